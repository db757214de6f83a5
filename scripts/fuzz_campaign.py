"""Long fuzzing campaign of the driftloop command line.

Draws runs with the strategies of ``tests/strategies.py`` (the same ones the
property-based tests use), runs ``driftloop qc``/``analyse`` on each and
checks the invariants of ``tests/strategies.check_case``: no traceback, exit
status 0 or 1, a one-line error naming the file, or complete outputs that
account for every generated record and keep each readable value unchanged.

Usage::

    python scripts/fuzz_campaign.py --examples 10000 --seed 1 --save fuzz-failures

Prints how many runs were made and how many broke an invariant; the inputs of
the first failing runs are saved (one folder each, with ``case.txt`` saying
what broke) under ``--save``.  ``--subprocess`` runs ``python -m driftloop``
instead of calling it in-process (slower; real exit status and stderr).
Exit status 1 when any run failed.
"""

from __future__ import annotations

import argparse
import shutil
import sys
import tempfile
import time
from pathlib import Path

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE.parent / "tests"))

import strategies  # noqa: E402
from hypothesis import HealthCheck, given, seed, settings  # noqa: E402


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    parser.add_argument("--examples", type=int, default=10_000, help="runs to make")
    parser.add_argument("--seed", type=int, default=20260301, help="random seed")
    parser.add_argument("--save", default="fuzz-failures", help="folder for failing inputs")
    parser.add_argument("--keep", type=int, default=20, help="failing runs to save")
    parser.add_argument("--subprocess", action="store_true", help="run python -m driftloop")
    parser.add_argument("--max-files", type=int, default=3, help="input files per run")
    parser.add_argument("--max-records", type=int, default=40, help="records per file")
    parser.add_argument("--analyse", action="store_true",
                        help="run driftloop analyse in half the runs (slower) besides qc")
    parser.add_argument("--progress", type=int, default=500, help="report every N runs")
    parser.add_argument("--long-days", type=float, default=730.0,
                        help="also run one drifter with this many days of 1-minute fixes "
                        "(0: skip)")
    args = parser.parse_args(argv)

    save = Path(args.save)
    counts = {"runs": 0, "failed": 0, "exit0": 0, "exit1": 0, "records": 0}
    kinds: dict[str, int] = {}
    refusals: dict[str, int] = {}
    started = time.monotonic()

    @seed(args.seed)
    @settings(max_examples=args.examples, deadline=None, database=None, derandomize=False,
              suppress_health_check=list(HealthCheck), print_blob=False)
    @given(strategies.cases(max_files=args.max_files, max_records=args.max_records,
                            analyse=args.analyse))
    def campaign(case: strategies.Case) -> None:
        with tempfile.TemporaryDirectory(prefix="driftloop-fuzz-") as folder:
            problems = strategies.check_case(case, Path(folder),
                                             in_process=not args.subprocess,
                                             errors=refusals)
            counts["runs"] += 1
            counts["records"] += case.records
            out = Path(folder) / "out"
            counts["exit0" if (out / "provenance.json").exists() else "exit1"] += 1
            for f in case.files:
                kind = f.name.rsplit(".", 1)[-1]
                kinds[kind] = kinds.get(kind, 0) + 1
            if problems:
                counts["failed"] += 1
                if counts["failed"] <= args.keep:
                    target = save / f"failure-{counts['failed']:03d}"
                    if target.exists():
                        shutil.rmtree(target)
                    shutil.copytree(Path(folder) / "in", target / "in")
                    if out.exists():
                        shutil.copytree(out, target / "out")
                    (target / "case.txt").write_text(
                        case.describe() + "\n\nbroken:\n" + "\n".join(problems) + "\n",
                        encoding="utf-8")
                    print(f"FAIL {counts['failed']}: {problems[0][:200]} -> {target}",
                          flush=True)
        if counts["runs"] % args.progress == 0:
            rate = counts["runs"] / (time.monotonic() - started)
            print(f"... {counts['runs']} runs, {counts['failed']} failed ({rate:.1f}/s)",
                  flush=True)

    campaign()
    if args.long_days > 0:
        long_case = strategies.Case(
            [strategies.long_csv("long.csv", days=args.long_days)], ["--no-land-test"])
        with tempfile.TemporaryDirectory(prefix="driftloop-fuzz-long-") as folder:
            t0 = time.monotonic()
            problems = strategies.check_case(long_case, Path(folder))
            print(f"long record: {long_case.records} fixes at 1-minute sampling "
                  f"({args.long_days:g} days): {'ok' if not problems else problems} "
                  f"({time.monotonic() - t0:.0f} s)", flush=True)
        counts["runs"] += 1
        counts["records"] += long_case.records
        counts["failed"] += bool(problems)
    elapsed = time.monotonic() - started
    print(f"runs: {counts['runs']}  failed: {counts['failed']}  "
          f"(outputs written: {counts['exit0']}, refused with exit 1: {counts['exit1']}; "
          f"{counts['records']} records; files by suffix {dict(sorted(kinds.items()))}; "
          f"{elapsed:.0f} s, seed {args.seed})")
    print("refusals by kind: " + ", ".join(
        f"{k} {v}" for k, v in sorted(refusals.items(), key=lambda kv: -kv[1])))
    if counts["failed"]:
        print(f"first failing inputs saved under {save}/")
    return 1 if counts["failed"] else 0


if __name__ == "__main__":
    sys.exit(main())
