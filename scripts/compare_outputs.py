"""Check that a change leaves every output byte of ``driftloop analyse`` as it was.

Speed work must not change results.  Write the reference outputs with the
code before the change, e.g. from a second worktree of the old commit, then
compare with the changed code::

    git worktree add /tmp/driftloop-old HEAD
    PYTHONPATH=/tmp/driftloop-old python scripts/compare_outputs.py write /tmp/ref
    python scripts/compare_outputs.py compare /tmp/ref

Cases, each run through the streaming pipeline (:func:`driftloop.streaming.run`,
what ``driftloop analyse`` runs before its report):

- ``sample``: the bundled release with every GIS format (GeoJSON,
  GeoPackage, GeoParquet, CSV) and the land test on;
- ``grouped``: 40 synthetic drifters, one CSV file per drifter, GeoJSON only
  (the fixes are formatted by the per-drifter stage);
- ``interleaved``: the same fixes in one file sorted by time, with every
  format (the fixes are put back in input order chunk by chunk).

Every file but ``provenance.json`` (which holds the run's clock) must be
identical.  Exit status 0 when all are, 1 otherwise (the differing files are
listed).  The synthetic inputs come from :func:`driftloop.synth.simulate_many`
with a fixed seed and written to the same folder, so both runs see the same
rows under the same file names.
"""

from __future__ import annotations

import argparse
import filecmp
import shutil
import sys
import tempfile
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent
SAMPLE = ROOT / "sample_tracks" / "orravane_a.csv"
ALL_FORMATS = ("geojson", "gpkg", "parquet", "csv")


def _synthetic(folder: Path) -> tuple[list[Path], list[Path]]:
    from driftloop.synth import simulate_many

    fixes = simulate_many(40, 30, 7, truth=False).fixes.copy()
    fixes["time"] = fixes["time"].dt.strftime("%Y-%m-%dT%H:%M:%SZ")
    shutil.rmtree(folder, ignore_errors=True)
    grouped = folder / "grouped"
    grouped.mkdir(parents=True)
    for drifter, rows in fixes.groupby("drifter_id", observed=True):
        rows.to_csv(grouped / f"{drifter}.csv", index=False)
    mixed = folder / "interleaved.csv"
    fixes.sort_values("time", kind="stable").to_csv(mixed, index=False)
    return sorted(grouped.iterdir()), [mixed]


def write_outputs(root: Path) -> list[str]:
    """Write the outputs of every case under ``root``; return the case names."""
    from driftloop.config import Config
    from driftloop.streaming import run

    no_land = Config().replace("qc", land_test=False)
    # the inputs' paths are written into the outputs, so they are the same every time
    folder = Path(tempfile.gettempdir()) / "driftloop-compare-inputs"
    try:
        grouped, mixed = _synthetic(folder)
        cases = {
            "sample": ([SAMPLE], Config(), ALL_FORMATS),
            "grouped": (grouped, no_land, ("geojson",)),
            "interleaved": (mixed, no_land, ALL_FORMATS),
        }
        for name, (paths, config, formats) in cases.items():
            run(paths, root / name, config, formats=formats, overwrite=True)
            print(f"wrote {name}")
    finally:
        shutil.rmtree(folder, ignore_errors=True)
    return list(cases)


def compare(reference: Path) -> int:
    """Write the outputs again beside ``reference`` and list the files that differ."""
    with tempfile.TemporaryDirectory() as tmp:
        new = Path(tmp)
        differ = []
        for case in write_outputs(new):
            old_files = {p.name for p in (reference / case).iterdir()}
            new_files = {p.name for p in (new / case).iterdir()}
            differ += [f"{case}/{n} (only in one run)" for n in sorted(old_files ^ new_files)]
            for name in sorted(old_files & new_files - {"provenance.json"}):
                if not filecmp.cmp(reference / case / name, new / case / name, shallow=False):
                    differ.append(f"{case}/{name}")
    for item in differ:
        print(f"DIFFERS: {item}")
    print("all outputs byte-identical" if not differ else f"{len(differ)} file(s) differ")
    return 1 if differ else 0


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    parser.add_argument("action", choices=("write", "compare"))
    parser.add_argument("folder", type=Path, help="reference outputs (written or compared)")
    args = parser.parse_args(argv)
    if args.action == "write":
        write_outputs(args.folder)
        return 0
    return compare(args.folder)


if __name__ == "__main__":
    sys.exit(main())
