"""Benchmark of the text rendering of the outputs: GIS layers, GeoJSON features, CSV tables.

Generates N drifters x D days of hourly fixes with
:func:`driftloop.synth.simulate_many`, runs the streaming pipeline once
(CSV tables only) to get the fixes, resampled tracks and loop catalogue,
reads them back, and then times, in this process, over a number of
repeats (medians printed):

- building each layer (:mod:`driftloop.export.layers`);
- formatting its GeoJSON features (:func:`driftloop.export.geojson.feature_text`);
- formatting each table as CSV (:func:`driftloop.io.writers.csv_text`);

with the number of features or rows and the megabytes of text made.

Usage::

    python benchmarks/bench_export_text.py                    # 40 drifters x 60 days
    python benchmarks/bench_export_text.py --drifters 100 --repeat 5

This is a measurement script, not a test.
"""

from __future__ import annotations

import argparse
import statistics
import sys
import tempfile
import time
from pathlib import Path

import pandas as pd

from driftloop.config import Config
from driftloop.export import layers
from driftloop.export.geojson import feature_text
from driftloop.io import expand_inputs
from driftloop.io.writers import csv_text
from driftloop.streaming import run

sys.path.insert(0, str(Path(__file__).resolve().parent))
from bench_pipeline import generate  # noqa: E402


def _table(path: Path, times: tuple[str, ...], strings: tuple[str, ...]) -> pd.DataFrame:
    table = pd.read_csv(path, keep_default_na=False, na_values=[""],
                        dtype={name: "string" for name in strings})
    for name in times:
        table[name] = pd.to_datetime(table[name], utc=True, format="ISO8601")
    return table


def tables(work: Path, drifters: int, days: float) -> dict[str, pd.DataFrame]:
    """Run the pipeline on a synthetic release and read back its fixes, tracks and events."""
    folder = work / "in"
    folder.mkdir()
    generate(drifters, days, folder, per_file=50)
    out = work / "out"
    run(expand_inputs([folder]), out, Config().replace("qc", land_test=False),
        formats=("csv",), overwrite=True)
    fixes = _table(out / "fixes.csv", ("time",),
                   ("source_file", "drifter_id", "qc_reasons", "raw"))
    tracks = _table(out / "resampled.csv", ("time",), ("drifter_id",))
    events = _table(out / "loops.csv", ("start", "end"),
                    ("event_id", "drifter_id", "kind", "spin", "sense", "tide"))
    return {"fixes": fixes, "tracks": tracks, "events": events}


def _timed(function, *args) -> tuple[float, object]:
    start = time.perf_counter()
    result = function(*args)
    return time.perf_counter() - start, result


def measure(data: dict[str, pd.DataFrame], repeat: int) -> list[tuple[str, float, int, float]]:
    """Time every step: (step, median seconds, items, MB of text)."""
    builders = {
        "fixes": (layers.fixes_layer, (data["fixes"],)),
        "tracks": (layers.tracks_layer, (data["tracks"],)),
        "loops": (layers.loops_layer, (data["events"], data["tracks"])),
        "loop_centres": (layers.loop_centres_layer, (data["events"],)),
        "loop_shapes": (layers.loop_shapes_layer, (data["events"],)),
    }
    seconds: dict[str, list[float]] = {}
    sizes: dict[str, tuple[int, float]] = {}
    for _ in range(repeat):
        for name, (build, args) in builders.items():
            spent, layer = _timed(build, *args)
            seconds.setdefault(f"layer {name}", []).append(spent)
            sizes[f"layer {name}"] = (len(layer), 0.0)
            spent, (text, count, _) = _timed(feature_text, layer)
            seconds.setdefault(f"geojson {name}", []).append(spent)
            sizes[f"geojson {name}"] = (count, len(text) / 1e6)
        for name, table in data.items():
            spent, text = _timed(csv_text, table)
            seconds.setdefault(f"csv {name}", []).append(spent)
            sizes[f"csv {name}"] = (len(table), len(text) / 1e6)
    return [(step, statistics.median(s), *sizes[step]) for step, s in seconds.items()]


def main(argv: list[str] | None = None) -> None:
    parser = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    parser.add_argument("--drifters", type=int, default=40, help="drifters in the release")
    parser.add_argument("--days", type=float, default=60.0, help="track length (days)")
    parser.add_argument("--repeat", type=int, default=3, help="timed repeats (median printed)")
    args = parser.parse_args(argv)
    with tempfile.TemporaryDirectory() as work:
        data = tables(Path(work), args.drifters, args.days)
    rows = measure(data, args.repeat)
    print(f"{args.drifters} drifters x {args.days:g} days: {len(data['fixes'])} fixes, "
          f"{len(data['tracks'])} track rows, {len(data['events'])} events; "
          f"median of {args.repeat}")
    print(f"{'step':24s} {'seconds':>8s} {'items':>8s} {'MB text':>8s}")
    for step, spent, items, mb in rows:
        print(f"{step:24s} {spent:8.3f} {items:8d} {mb:8.2f}")
    for group in ("layer", "geojson", "csv"):
        total = sum(spent for step, spent, _, _ in rows if step.startswith(group))
        print(f"{'total ' + group:24s} {total:8.3f}")


if __name__ == "__main__":
    main()
