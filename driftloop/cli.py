"""Command line: a thin layer over :mod:`driftloop.pipeline`.

Exit status: 0 success, 1 bad input (one-line message naming file, row and
column), 2 bad usage.  ``--debug`` shows the traceback of an error.
"""

from __future__ import annotations

import argparse
import sys
import traceback
from collections.abc import Sequence
from pathlib import Path

from driftloop import __version__
from driftloop.errors import ConfigError, DriftloopError, InputError
from driftloop.notices import CAUTION, CAUTION_SHORT

__all__ = ["build_parser", "main"]

#: How many row-level problems are printed before they are only counted.
MAX_ROW_WARNINGS = 10

_EXAMPLES_ANALYSE = """\
examples:
  driftloop analyse sample_tracks/orravane_a.csv --out runs/orravane_a
  driftloop analyse tracks/*.gpx --out runs/gpx --config strict.toml
  driftloop analyse buoys.csv --columns id=buoy,time=obs_time --out runs/buoys
"""

_EXAMPLES_SKILL = """\
examples:
  driftloop skill observed.csv model_runs.csv --out runs/skill
  driftloop skill drifters/ model/ --windows 24,48,72 --restart 24 --out runs/skill
  driftloop skill obs.nc leeway.csv --pair RUN7=ORV-A03 --tolerance 1 --out runs/skill
"""

_EXAMPLES_QC = """\
examples:
  driftloop qc sample_tracks/orravane_a.csv --out runs/orravane-qc
  driftloop qc release.nc --out runs/qc --no-land-test
"""


def _add_input_options(parser: argparse.ArgumentParser) -> None:
    parser.add_argument(
        "inputs", nargs="+", metavar="INPUT",
        help="track files (.csv .tsv .txt .parquet .nc .gpx) or folders holding them",
    )
    parser.add_argument("--out", required=True, metavar="DIR", help="output folder")
    parser.add_argument("--config", metavar="FILE.toml", help="TOML file overriding defaults")
    parser.add_argument(
        "--columns", metavar="ROLE=NAME[,...]",
        help="map roles id, time, date, lat, lon to column names, e.g. id=buoy,time=obs_time",
    )
    parser.add_argument(
        "--separator", choices=[",", ";", "tab"], help="field separator (default: sniffed)"
    )
    parser.add_argument(
        "--drifter-id", metavar="ID", help="drifter id for files without an id column"
    )
    parser.add_argument(
        "--no-land-test", action="store_true", help="skip the on-land and grounded tests"
    )
    parser.add_argument(
        "--strict", action="store_true",
        help="stop with an error at the first unparseable or out-of-range value",
    )
    parser.add_argument(
        "--overwrite", action="store_true",
        help="write into a non-empty folder that is not a previous driftloop run",
    )
    parser.add_argument(
        "--workers", type=int, default=1, metavar="N",
        help="run drifters in parallel in N processes on this machine with Dask "
        "(default 1: serial, in this process)",
    )
    parser.add_argument(
        "--scheduler", metavar="ADDRESS",
        help="send the drifters to a running dask.distributed scheduler, e.g. "
        "tcp://10.0.0.5:8786 (see docs/scaling.md)",
    )
    parser.add_argument("--quiet", action="store_true", help="print nothing but errors")
    parser.add_argument("--debug", action="store_true", help="show tracebacks of errors")


def build_parser() -> argparse.ArgumentParser:
    """Build the argument parser of the ``driftloop`` command.

    Returns
    -------
    argparse.ArgumentParser
        The parser with its subcommands.
    """
    parser = argparse.ArgumentParser(
        prog="driftloop",
        description="Quality control and loop analysis of ocean surface drifter tracks.",
        epilog=CAUTION,
    )
    parser.add_argument("--version", action="version", version=f"driftloop {__version__}")
    commands = parser.add_subparsers(dest="command", metavar="COMMAND", required=True)
    analyse = commands.add_parser(
        "analyse", help="run every stage on track files",
        description="Read track files, flag every fix and write all outputs to --out.",
        epilog=_EXAMPLES_ANALYSE + "\n" + CAUTION,
        formatter_class=argparse.RawDescriptionHelpFormatter,
    )
    _add_input_options(analyse)
    analyse.add_argument(
        "--formats", metavar="FORMAT[,...]",
        help="GIS formats of the layers: geojson (default), gpkg, parquet, csv; "
        "the CSV tables are always written",
    )
    qc = commands.add_parser(
        "qc", help="quality-control fixes only",
        description="Read track files and flag every fix on the QARTOD scale "
        "(writes fixes.csv and summary.json).",
        epilog=_EXAMPLES_QC + "\n" + CAUTION,
        formatter_class=argparse.RawDescriptionHelpFormatter,
    )
    _add_input_options(qc)
    export = commands.add_parser(
        "export", help="re-export the layers of a previous run",
        description="Write the GIS layers of a previous analyse run in other formats, "
        "from the tables kept in its folder, without recomputing.",
        epilog="examples:\n  driftloop export runs/orravane_a --formats gpkg,parquet\n",
        formatter_class=argparse.RawDescriptionHelpFormatter,
    )
    export.add_argument("run_dir", metavar="RUN_DIR", help="folder of a previous analyse run")
    export.add_argument("--formats", metavar="FORMAT[,...]", default="geojson",
                        help="geojson, gpkg, parquet, csv (default geojson)")
    export.add_argument("--quiet", action="store_true", help="print nothing but errors")
    export.add_argument("--debug", action="store_true", help="show tracebacks of errors")
    report = commands.add_parser(
        "report", help="rebuild the HTML report of a previous run",
        description="Rebuild RUN_DIR/report.html from the files of a previous analyse run.",
        epilog="examples:\n  driftloop report runs/orravane_a\n",
        formatter_class=argparse.RawDescriptionHelpFormatter,
    )
    report.add_argument("run_dir", metavar="RUN_DIR", help="folder of a previous analyse run")
    report.add_argument("--quiet", action="store_true", help="print nothing but errors")
    report.add_argument("--debug", action="store_true", help="show tracebacks of errors")
    skill = commands.add_parser(
        "skill", help="score modelled tracks against drifter tracks",
        description="Separation distance and the Liu-Weisberg normalised cumulative "
        "Lagrangian separation skill score of modelled tracks against observed drifters, "
        "for forecast windows restarting along the track.",
        epilog=_EXAMPLES_SKILL + "\n" + CAUTION,
        formatter_class=argparse.RawDescriptionHelpFormatter,
    )
    skill.add_argument("observed", metavar="OBSERVED", help="observed track file or folder")
    skill.add_argument(
        "modelled", metavar="MODELLED",
        help="modelled track file or folder; several runs per file start where time goes back",
    )
    skill.add_argument("--out", required=True, metavar="DIR", help="output folder")
    skill.add_argument("--config", metavar="FILE.toml", help="TOML file overriding defaults")
    skill.add_argument("--windows", metavar="H[,H...]",
                       help="forecast window lengths in hours (default 24,48,72)")
    skill.add_argument("--restart", type=float, metavar="H",
                       help="hours between window starts (default: each window's length)")
    skill.add_argument("--tolerance", type=float, metavar="N",
                       help="tolerance n of the skill score (default 1)")
    skill.add_argument("--start-time-tol", type=float, metavar="S",
                       help="largest start-time offset of a modelled track (s, default 3600)")
    skill.add_argument("--start-distance-tol", type=float, metavar="M",
                       help="largest start-position offset of a modelled track (m, default 1000)")
    skill.add_argument("--max-gap", type=float, metavar="H",
                       help="longest gap between observed fixes in a scored window (h)")
    skill.add_argument("--pair", metavar="MODEL_ID=OBS_ID[,...]",
                       help="match modelled ids to drifter ids explicitly")
    skill.add_argument("--no-observed-qc", action="store_true",
                       help="score every observed fix, not only QC-usable ones")
    skill.add_argument("--columns", metavar="ROLE=NAME[,...]",
                       help="map roles id, time, date, lat, lon to column names")
    skill.add_argument("--separator", choices=[",", ";", "tab"],
                       help="field separator (default: sniffed)")
    skill.add_argument("--drifter-id", metavar="ID",
                       help="drifter id for files without an id column")
    skill.add_argument("--no-land-test", action="store_true",
                       help="skip the on-land and grounded tests of the observed QC")
    skill.add_argument("--overwrite", action="store_true",
                       help="write into a non-empty folder that is not a previous driftloop run")
    skill.add_argument("--quiet", action="store_true", help="print nothing but errors")
    skill.add_argument("--debug", action="store_true", help="show tracebacks of errors")
    return parser


def _parse_columns(text: str | None) -> dict[str, str]:
    if not text:
        return {}
    mapping = {}
    for item in text.split(","):
        role, sep, name = item.partition("=")
        role, name = role.strip().lower(), name.strip()
        if not sep or not role or not name:
            raise ConfigError(f"--columns: expected ROLE=NAME, got {item!r}")
        if role not in {"id", "time", "date", "lat", "lon"}:
            raise ConfigError(
                f"--columns: unknown role {role!r}; roles are id, time, date, lat, lon"
            )
        mapping[role] = name
    return mapping


def _expand_inputs(items: Sequence[str]) -> list[Path]:
    from driftloop.io import expand_inputs

    return expand_inputs(items)


def _make_config(args: argparse.Namespace):
    from driftloop.config import load_config

    config = load_config(args.config)
    read_changes = {}
    columns = _parse_columns(args.columns)
    if columns:
        read_changes["columns"] = {**config.read.columns, **columns}
    if args.separator:
        read_changes["separator"] = "\t" if args.separator == "tab" else args.separator
    if args.drifter_id:
        read_changes["drifter_id"] = args.drifter_id
    if read_changes:
        config = config.replace("read", **read_changes)
    if args.no_land_test:
        config = config.replace("qc", land_test=False)
    return config


def _row_problems(fixes, count: int | None = None) -> tuple[list[InputError], int]:
    """Locate rows that did not parse or hold impossible coordinates."""
    bad = fixes[
        fixes["qc_reasons"].str.contains(
            r"unparseable|lat_out_of_range|lon_out_of_range", regex=True
        )
    ]
    problems = []
    for row in bad.head(MAX_ROW_WARNINGS).itertuples(index=False):
        if row.parse_error:
            column, _, message = str(row.parse_error).partition(":")
            if not message:
                column, message = None, column
            problems.append(InputError(row.source_file, message.strip(), row=row.source_row,
                                       column=column and column.strip()))
        elif "lat_out_of_range" in row.qc_reasons:
            problems.append(InputError(row.source_file, f"latitude {row.lat} is outside "
                                       "[-90, 90]", row=row.source_row, column="lat"))
        else:
            problems.append(InputError(row.source_file, f"longitude {row.lon} is outside "
                                       "[-180, 360]", row=row.source_row, column="lon"))
    return problems, len(bad) if count is None else count


def _report_row_problems(fixes, strict: bool, quiet: bool, count: int | None = None) -> None:
    problems, count = _row_problems(fixes, count)
    if strict and problems:
        raise problems[0]
    if quiet:
        return
    for problem in problems:
        print(f"driftloop: warning: {problem} (kept, flagged)", file=sys.stderr)
    if count > len(problems):
        print(f"driftloop: warning: ... and {count - len(problems)} more such rows; "
              "see qc_reasons in fixes.csv", file=sys.stderr)


def _parse_pairs(text: str | None) -> dict[str, str]:
    pairs = {}
    for item in (text or "").split(","):
        if not item.strip():
            continue
        model, sep, observed = item.partition("=")
        if not sep or not model.strip() or not observed.strip():
            raise ConfigError(f"--pair: expected MODEL_ID=OBS_ID, got {item!r}")
        pairs[model.strip()] = observed.strip()
    return pairs


def _run_skill(args: argparse.Namespace) -> int:
    from driftloop.skill import run_skill

    config = _make_config(args)
    changes = {
        key: value
        for key, value in {
            "windows_h": args.windows,
            "restart_h": args.restart,
            "tolerance_n": args.tolerance,
            "start_time_tol_s": args.start_time_tol,
            "start_distance_tol_m": args.start_distance_tol,
            "max_gap_h": args.max_gap,
        }.items()
        if value is not None
    }
    if args.no_observed_qc:
        changes["observed_qc"] = False
    if changes:
        config = config.replace("skill", **changes)
    observed = _expand_inputs([args.observed])
    modelled = _expand_inputs([args.modelled])
    result = run_skill(
        observed, modelled, args.out, config.skill, pairs=_parse_pairs(args.pair),
        read_config=config.read, qc_config=config.qc, overwrite=args.overwrite,
    )
    if not args.quiet:
        for label, stats in result.summary["windows"].items():
            mean_ss = "n/a" if stats["mean_ss"] is None else f"{stats['mean_ss']:.3f}"
            median_ss = "n/a" if stats["median_ss"] is None else f"{stats['median_ss']:.3f}"
            print(f"{label} h windows: {stats['scored']} scored of {stats['scheduled']}, "
                  f"mean skill {mean_ss}, median {median_ss}")
        print("wrote " + ", ".join(str(p) for p in result.files))
        print(CAUTION_SHORT)
    return 0


def _run(args: argparse.Namespace) -> int:
    if args.command == "skill":
        return _run_skill(args)
    if args.command == "export":
        return _run_export(args)
    if args.command == "report":
        return _run_report(args)
    config = _make_config(args)
    paths = _expand_inputs(args.inputs)
    formats = _parse_formats(getattr(args, "formats", None))
    stages = "qc" if args.command == "qc" else "all"
    if args.workers < 1:
        raise ConfigError(f"--workers: expected a whole number of at least 1, got {args.workers}")
    from driftloop.streaming import run

    def check(problems, count: int) -> None:
        _report_row_problems(problems, args.strict, args.quiet, count=count)

    result = run(paths, args.out, config, stages=stages, formats=formats,
                 overwrite=args.overwrite, protect=paths, workers=args.workers,
                 scheduler=args.scheduler, progress=not args.quiet, check=check,
                 max_problems=MAX_ROW_WARNINGS)
    written = result.files
    if stages == "all":
        from driftloop.report.html import build_report

        written.append(build_report(args.out))
    if not args.quiet:
        release = result.summary["release"]
        flags = release["by_flag"]
        print(
            f"{release['drifters']} drifters, {release['fixes']} fixes: "
            f"{flags['pass']} pass, {flags['suspect']} suspect, {flags['fail']} fail, "
            f"{flags['missing']} missing"
        )
        loops = result.summary.get("loops")
        if loops is not None:
            kinds = ", ".join(f"{n} {k}" for k, n in loops["by_kind"].items())
            print(f"{loops['events']} loop events: {kinds}")
        for note in release["notes"]:
            print(f"note: {note}")
        print(f"wrote {len(written)} files to {args.out}")
        print(CAUTION_SHORT)
    return 0


def _parse_formats(text: str | None) -> list[str]:
    from driftloop.export import FORMATS

    if not text:
        return ["geojson"]
    formats = [item.strip().lower() for item in text.split(",") if item.strip()]
    unknown = [f for f in formats if f not in FORMATS]
    if unknown or not formats:
        raise ConfigError(
            f"--formats: unknown format {', '.join(unknown) or '(none)'}; "
            f"choose from {', '.join(FORMATS)}"
        )
    return formats


def _run_report(args: argparse.Namespace) -> int:
    from driftloop.pipeline import load_run
    from driftloop.report.html import build_report

    load_run(args.run_dir)  # refuses a folder that is not a run, in one line
    try:
        path = build_report(args.run_dir)
    except FileNotFoundError as exc:
        raise InputError(str(args.run_dir), f"cannot rebuild the report: {exc}") from exc
    if not args.quiet:
        print(f"wrote {path}")
    return 0


def _run_export(args: argparse.Namespace) -> int:
    from driftloop.pipeline import export_previous_run

    formats = _parse_formats(args.formats)
    written = export_previous_run(args.run_dir, formats)
    if not args.quiet:
        print(f"wrote {len(written)} files to {args.run_dir}")
    return 0


def main(argv: Sequence[str] | None = None) -> int:
    """Run the ``driftloop`` command.

    Parameters
    ----------
    argv : sequence of str, optional
        Arguments (default: ``sys.argv[1:]``).

    Returns
    -------
    int
        Exit status: 0 success, 1 bad input, 2 bad usage.
    """
    parser = build_parser()
    args = parser.parse_args(argv)
    try:
        return _run(args)
    except DriftloopError as exc:
        if args.debug:
            traceback.print_exc()
        print(f"driftloop: error: {exc}", file=sys.stderr)
        return 1
    except KeyboardInterrupt:
        print("driftloop: interrupted", file=sys.stderr)
        return 130
    except Exception as exc:  # a bug: still no traceback unless asked for
        if args.debug:
            traceback.print_exc()
        print(
            f"driftloop: internal error: {type(exc).__name__}: {' '.join(str(exc).split())} "
            "(run again with --debug for details and please report it)",
            file=sys.stderr,
        )
        return 3


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
