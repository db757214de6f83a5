"""Benchmark of quality control and its summary on many drifters.

Generates N drifters x D days of hourly fixes with
:func:`driftloop.synth.simulate_many`, writes and reads them back as a CSV
file (so that the table has the columns and types of a real run), then, in
this process and in alternating repeats, times:

- QC and summary with one call per drifter: :func:`driftloop.qc.run_qc` and
  :meth:`driftloop.summary.SummaryAccumulator.add_rows` on each drifter's rows;
- the same with one call per batch of drifters, as the streaming run makes
  them (:data:`driftloop.streaming.BATCH_DRIFTERS` drifters per call,
  ``add_drifters`` for the summary).

It prints the median seconds and milliseconds per drifter of each, their
ratio, and checks that both give the same flags and summary.  The land test
is off, as in ``bench_pipeline.py``.

Usage::

    python benchmarks/bench_qc.py --drifters 100 --days 60 --repeats 5

This is a measurement script, not a test.
"""

from __future__ import annotations

import argparse
import tempfile
import time
from pathlib import Path

import numpy as np
import pandas as pd

from driftloop.config import Config
from driftloop.io import read_file
from driftloop.qc import QC_COLUMNS, run_qc
from driftloop.streaming import BATCH_DRIFTERS
from driftloop.summary import SummaryAccumulator
from driftloop.synth import simulate_many


def drifters(n: int, days: float, seed: int) -> list[tuple[str, pd.DataFrame]]:
    """Rows of each simulated drifter, as read from a CSV file."""
    fixes = simulate_many(n, days, seed, truth=False).fixes
    fixes = fixes.assign(time=fixes["time"].dt.strftime("%Y-%m-%dT%H:%M:%SZ"))
    with tempfile.TemporaryDirectory() as tmp:
        path = Path(tmp) / "release.csv"
        fixes.to_csv(path, index=False)
        table = read_file(path, Config().read)
    return [(str(k), g) for k, g in table.groupby("drifter_id", sort=True, observed=True)]


def per_drifter(groups, config):
    summary = SummaryAccumulator(config)
    parts = []
    for drifter, rows in groups:
        flagged = run_qc(rows, config.qc)
        summary.add_rows(flagged, drifter)
        parts.append(flagged)
    return pd.concat(parts), summary


def per_batch(groups, config):
    summary = SummaryAccumulator(config)
    parts = []
    for start in range(0, len(groups), BATCH_DRIFTERS):
        batch = groups[start:start + BATCH_DRIFTERS]
        flagged = run_qc(pd.concat([rows for _, rows in batch]), config.qc)
        summary.add_drifters(flagged, [(drifter, len(rows)) for drifter, rows in batch])
        parts.append(flagged)
    return pd.concat(parts), summary


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--drifters", type=int, default=100)
    parser.add_argument("--days", type=float, default=60.0)
    parser.add_argument("--repeats", type=int, default=5)
    parser.add_argument("--seed", type=int, default=1)
    args = parser.parse_args()
    config = Config().replace("qc", land_test=False)
    groups = drifters(args.drifters, args.days, args.seed)
    fixes = sum(len(g) for _, g in groups)
    print(f"{len(groups)} drifters, {fixes} fixes ({fixes / len(groups):.0f} per drifter)")
    seconds = {"per drifter": [], "per batch": []}
    results = {}
    for _ in range(args.repeats):
        for name, func in (("per drifter", per_drifter), ("per batch", per_batch)):
            clock = time.perf_counter()
            results[name] = func(groups, config)
            seconds[name].append(time.perf_counter() - clock)
    for name, values in seconds.items():
        med = float(np.median(values))
        print(f"QC + summary, one call {name:12s}: {med:7.3f} s  "
              f"({1000 * med / len(groups):6.2f} ms per drifter)")
    ratio = np.median(np.array(seconds["per drifter"]) / np.array(seconds["per batch"]))
    print(f"ratio (median over repeats): {ratio:.2f}")
    (a, sa), (b, sb) = results["per drifter"], results["per batch"]
    same = a.loc[:, list(QC_COLUMNS)].equals(b.loc[:, list(QC_COLUMNS)])
    inputs = [{"file": "release.csv", "rows": fixes}]
    print("same flags:", same, "| same summary:", sa.finish(inputs) == sb.finish(inputs))


if __name__ == "__main__":
    main()
