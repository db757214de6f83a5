"""End-to-end benchmark of ``driftloop analyse`` on synthetic releases.

Generates N drifters x D days of hourly fixes with
:func:`driftloop.synth.simulate_many` (deployed in the open western North
Atlantic), writes them as CSV files and runs the streaming pipeline
(:func:`driftloop.streaming.run`, what ``driftloop analyse`` runs before its
HTML report) in a fresh subprocess for every configuration, with the land
test off (``--no-land-test``).  It prints:

- fixes per second end to end and the time of each stage (read, QC,
  resample, transform, ridges, events, drift, spectra, layers, write;
  summed over drifters, from the pipeline's own timers);
- the floor of the wavelet stage: in this process, the bare inverse FFTs
  of the same total array shape that stage needs (for every resampled
  segment, 2 senses x n_periods x padded length, from
  ``driftloop.wavelet``'s plan), and the ratio of the end-to-end time to it
  (target <= 2.5);
- a lower bound of any run: reading the input CSV files and writing them
  back with pyarrow's C++ CSV reader and writer, nothing else, as a
  multiple of the floor;
- peak RSS of the run (``ru_maxrss`` of the subprocess), at 200 and 2,000
  drifters (target: ratio <= 1.3);
- wall time with ``--workers 1`` and ``--workers 2`` on 500 drifters
  (target: speed-up >= 1.7 on a 2-core machine; other load on the machine
  spoils it, so ``uptime`` is printed beside it).

Usage::

    python benchmarks/bench_pipeline.py --quick            # small sizes, every part
    python benchmarks/bench_pipeline.py --part throughput --drifters 200 --days 60
    python benchmarks/bench_pipeline.py --part memory      # 200 vs 2,000 drifters
    python benchmarks/bench_pipeline.py --part workers     # 1 vs 2 workers, 500 drifters

This is a measurement script, not a test.
"""

from __future__ import annotations

import argparse
import json
import math
import os
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

_CHILD = r"""
import json, resource, sys, time
from driftloop.config import Config
from driftloop.io import expand_inputs
from driftloop.streaming import run
folder, out, workers = sys.argv[1], sys.argv[2], int(sys.argv[3])
start = time.perf_counter()
result = run(expand_inputs([folder]), out, Config().replace("qc", land_test=False),
             workers=workers, overwrite=True)
wall = time.perf_counter() - start
print(json.dumps({
    "wall_s": wall, "stages": result.stage_seconds, "fixes": result.summary["release"]["fixes"],
    "balanced": result.summary["accounting"]["balanced"],
    "maxrss_kib": resource.getrusage(resource.RUSAGE_SELF).ru_maxrss,
    "children_maxrss_kib": resource.getrusage(resource.RUSAGE_CHILDREN).ru_maxrss,
}))
"""

STAGES = ("read", "qc", "resample", "transform", "ridges", "events", "drift", "spectra",
          "layers", "write")


def generate(n: int, days: float, folder: Path, per_file: int, seed: int = 3) -> int:
    """Write a synthetic release as CSV files of ``per_file`` drifters each."""
    from driftloop.synth import simulate_many

    folder.mkdir(parents=True, exist_ok=True)
    fixes = simulate_many(n, days, seed, truth=False).fixes
    fixes = fixes.assign(time=fixes["time"].dt.strftime("%Y-%m-%dT%H:%M:%SZ"))
    ids = fixes["drifter_id"].astype(str)
    order = sorted(ids.unique())
    for k in range(0, len(order), per_file):
        chunk = fixes[ids.isin(order[k:k + per_file])]
        chunk.to_csv(folder / f"part-{k // per_file:05d}.csv", index=False)
    return len(fixes)


def run_child(folder: Path, out: Path, workers: int) -> dict:
    done = subprocess.run([sys.executable, "-c", _CHILD, str(folder), str(out), str(workers)],
                          capture_output=True, text=True, check=False)
    if done.returncode != 0:
        raise SystemExit(f"benchmark run failed:\n{done.stderr[-3000:]}")
    return json.loads(done.stdout.strip().splitlines()[-1])


def fft_floor(run_dir: Path, repeat: int = 3) -> tuple[float, int]:
    """Seconds of the bare inverse FFTs of the wavelet stage for the run's segments."""
    import pandas as pd
    import scipy.fft

    from driftloop import wavelet
    from driftloop.config import Config

    config = Config().wavelet
    track = pd.read_csv(run_dir / "resampled.csv", usecols=["drifter_id", "segment"])
    lengths = track.groupby(["drifter_id", "segment"]).size().to_numpy()
    shapes: dict[tuple[int, int, type], int] = {}
    for n in lengths[lengths >= 8]:
        plan = wavelet._plan(int(n), 3600.0, config)
        key = (2 * len(plan.periods), plan.n_fft, plan.complex_type)
        shapes[key] = shapes.get(key, 0) + 1
    best = []
    rng = np.random.default_rng(0)
    for _ in range(repeat):
        total = 0.0
        for (rows, n_fft, kind), count in shapes.items():
            if rows == 0:
                continue
            a = (rng.standard_normal((rows, n_fft)) + 1j * rng.standard_normal((rows, n_fft)))
            a = a.astype(kind)
            start = time.perf_counter()
            for _ in range(count):
                scipy.fft.ifft(a, axis=-1, workers=config.fft_workers)
            total += time.perf_counter() - start
        best.append(total)
    return float(np.median(best)), int(sum(shapes.values()))


def io_bound(folder: Path, repeat: int = 3) -> float:
    """Seconds to read the input CSVs and write them back, with pyarrow's C++ CSV code.

    A lower bound of any run that reads every fix and writes ``fixes.csv``:
    no parsing of times, no QC, no other output.
    """
    import pyarrow.csv as pacsv

    best = math.inf
    with tempfile.TemporaryDirectory() as tmp:
        for _ in range(repeat):
            start = time.perf_counter()
            for k, path in enumerate(sorted(folder.glob("*.csv"))):
                pacsv.write_csv(pacsv.read_csv(path), Path(tmp) / f"{k}.csv")
            best = min(best, time.perf_counter() - start)
    return best


def load() -> str:
    try:
        return " ".join(f"{v:.2f}" for v in os.getloadavg())
    except OSError:
        return "n/a"


def _stage_line(stages: dict) -> str:
    return "  ".join(f"{s} {stages.get(s, 0.0):.1f}" for s in STAGES)


def part_throughput(work: Path, drifters: int, days: float, per_file: int) -> None:
    folder = work / f"tp_{drifters}x{days:g}"
    n = generate(drifters, days, folder, per_file)
    result = run_child(folder, work / "tp_out", 1)
    floor, segments = fft_floor(work / "tp_out")
    print(f"\n## throughput: {drifters} drifters x {days:g} days, {n} fixes, "
          f"{segments} segments (load {load()})")
    print(f"end to end        {result['wall_s']:8.1f} s   {n / result['wall_s']:9.0f} fixes/s")
    ratio = result["wall_s"] / floor
    print(f"FFT floor         {floor:8.2f} s   ratio end-to-end / floor {ratio:.1f}"
          "  (target <= 2.5)")
    bound = io_bound(folder)
    print(f"CSV in and out    {bound:8.2f} s   = {bound / floor:.1f} x the floor: reading the "
          "inputs and writing them back with pyarrow's CSV code alone")
    print(f"stages (s)        {_stage_line(result['stages'])}")
    print(f"peak RSS          {result['maxrss_kib'] / 1024:8.0f} MiB")


def part_memory(work: Path, small: int, large: int, days: float, per_file: int) -> None:
    rows = []
    for n_drifters in (small, large):
        folder = work / f"mem_{n_drifters}x{days:g}"
        n = generate(n_drifters, days, folder, per_file)
        result = run_child(folder, work / f"mem_out_{n_drifters}", 1)
        rows.append((n_drifters, n, result))
    print(f"\n## memory: {days:g}-day tracks (load {load()})")
    print(f"{'drifters':>9} {'fixes':>9} {'wall s':>8} {'peak RSS MiB':>13}")
    for n_drifters, n, result in rows:
        print(f"{n_drifters:9d} {n:9d} {result['wall_s']:8.1f} "
              f"{result['maxrss_kib'] / 1024:13.0f}")
    ratio = rows[1][2]["maxrss_kib"] / rows[0][2]["maxrss_kib"]
    print(f"peak RSS ratio {large} / {small} drifters: {ratio:.2f}  (target <= 1.3)")


def part_workers(work: Path, drifters: int, days: float, per_file: int, repeat: int) -> None:
    folder = work / f"wk_{drifters}x{days:g}"
    n = generate(drifters, days, folder, per_file)
    walls: dict[int, list[float]] = {1: [], 2: []}
    loads = []
    for _ in range(repeat):
        for workers in (1, 2):
            loads.append(load())
            walls[workers].append(run_child(folder, work / f"wk_out_{workers}", workers)["wall_s"])
    one, two = float(np.median(walls[1])), float(np.median(walls[2]))
    print(f"\n## workers: {drifters} drifters x {days:g} days, {n} fixes, "
          f"median of {repeat}")
    print(f"--workers 1  {one:8.1f} s   ({', '.join(f'{w:.1f}' for w in walls[1])})")
    print(f"--workers 2  {two:8.1f} s   ({', '.join(f'{w:.1f}' for w in walls[2])})")
    print(f"speed-up {one / two:.2f}  (target >= 1.7); load averages before each run: "
          + "; ".join(loads))


def main(argv: list[str] | None = None) -> None:
    parser = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    parser.add_argument("--part", choices=("throughput", "memory", "workers", "all"),
                        default="all")
    parser.add_argument("--quick", action="store_true", help="small sizes for a quick check")
    parser.add_argument("--drifters", type=int, help="drifters of the throughput run")
    parser.add_argument("--days", type=float, help="track length (days)")
    parser.add_argument("--per-file", type=int, default=50, help="drifters per CSV file")
    parser.add_argument("--repeat", type=int, default=1, help="repeats of the workers runs")
    parser.add_argument("--keep", metavar="DIR", help="work in DIR and keep it")
    args = parser.parse_args(argv)
    if args.quick:
        sizes = {"tp": (20, 20.0), "mem": (20, 100, 10.0), "wk": (40, 20.0)}
    else:
        sizes = {"tp": (200, 60.0), "mem": (200, 2000, 10.0), "wk": (500, 30.0)}
    if args.drifters:
        sizes["tp"] = (args.drifters, sizes["tp"][1])
    if args.days:
        sizes = {"tp": (sizes["tp"][0], args.days), "mem": (*sizes["mem"][:2], args.days),
                 "wk": (sizes["wk"][0], args.days)}
    with tempfile.TemporaryDirectory(dir=args.keep) as tmp:
        work = Path(args.keep or tmp)
        print(f"driftloop pipeline benchmark ({os.cpu_count()} cores; land test off)")
        if args.part in ("throughput", "all"):
            part_throughput(work, *sizes["tp"], args.per_file)
        if args.part in ("memory", "all"):
            part_memory(work, *sizes["mem"], args.per_file)
        if args.part in ("workers", "all"):
            part_workers(work, *sizes["wk"], args.per_file, args.repeat)


if __name__ == "__main__":
    main()
