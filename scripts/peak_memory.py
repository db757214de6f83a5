"""Peak memory of ``driftloop qc`` on a big generated CSV.

Usage::

    python scripts/peak_memory.py --megabytes 1000

Writes a CSV of about that size (1-minute fixes of many drifters, 50-byte
rows) in a temporary folder outside the repository (``--folder``, default
the system's temporary folder), runs ``driftloop qc FILE --out DIR
--no-land-test --quiet`` in a subprocess, prints its peak resident memory and
wall time, and deletes the file and the outputs.  ``--reader-only`` measures
``driftloop.io.read_file`` alone.
"""

from __future__ import annotations

import argparse
import resource
import shutil
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

_READ_ONLY = "import sys; from driftloop.io import read_file; print(len(read_file(sys.argv[1])))"


def write_csv(path: Path, megabytes: float) -> int:
    per = 20_000  # fixes per drifter, about two weeks at one minute
    k = np.arange(per)
    stamps = (1772323200 + 60 * k).astype("datetime64[s]").astype(str)
    size, rows, d = 0, 0, 0
    with open(path, "w", encoding="utf-8") as handle:
        handle.write("drifter,time,lat,lon\n")
        while size < megabytes * 1e6:
            lat = (30 + (d % 50) * 0.5 + 1e-5 * k).round(6)
            lon = (-40 + (d // 50) * 0.5 + 1e-5 * k).round(6)
            text = "".join(f"B{d:05d},{s}Z,{a:.6f},{b:.6f}\n" for s, a, b in zip(
                stamps.tolist(), lat.tolist(), lon.tolist(), strict=True))
            handle.write(text)
            size += len(text)
            rows += per
            d += 1
    return rows


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    parser.add_argument("--megabytes", type=float, default=1000.0)
    parser.add_argument("--folder", default=None, help="where to write the file")
    parser.add_argument("--reader-only", action="store_true")
    args = parser.parse_args(argv)
    folder = Path(tempfile.mkdtemp(prefix="driftloop-memory-", dir=args.folder))
    try:
        path = folder / "big.csv"
        t0 = time.monotonic()
        rows = write_csv(path, args.megabytes)
        size = path.stat().st_size
        print(f"wrote {path} ({size / 1e6:.0f} MB, {rows} rows) in {time.monotonic() - t0:.0f} s",
              flush=True)
        if args.reader_only:
            command = [sys.executable, "-c", _READ_ONLY, str(path)]
        else:
            command = [sys.executable, "-m", "driftloop", "qc", str(path), "--out",
                       str(folder / "out"), "--no-land-test", "--quiet"]
        t0 = time.monotonic()
        done = subprocess.run(command, capture_output=True, text=True, check=False)
        wall = time.monotonic() - t0
        peak = resource.getrusage(resource.RUSAGE_CHILDREN).ru_maxrss * 1024  # Linux: KiB
        print(f"exit {done.returncode}; peak RSS {peak / 1e9:.2f} GB = {peak / size:.1f} x the "
              f"file; {wall:.0f} s")
        if done.returncode:
            print(done.stderr, file=sys.stderr)
        return done.returncode
    finally:
        shutil.rmtree(folder, ignore_errors=True)


if __name__ == "__main__":
    sys.exit(main())
