"""Compare ridge results with a saved reference, to check that a change leaves them unchanged.

``python benchmarks/ridge_regression.py save REF.npz`` runs
:func:`driftloop.ridges.detect` on a fixed set of inputs and writes every
ridge (sense, indices, all per-sample arrays, statistic, threshold), the
transforms of a few inputs and the noise calibration to ``REF.npz``;
``python benchmarks/ridge_regression.py compare REF.npz`` runs them again and
reports the largest differences.  Indices and senses must be identical,
floating-point values within ``--rtol`` (default 1e-9) relative to the
largest value of the same quantity on the ridge.

The inputs: the segment of ``benchmarks/bench_wavelet.py`` (seeds 1-3, both
dtypes, two workers, and variants without the significance test, without
bias correction, with a fixed cone factor and a period limit), white and
AR(1) red noise with the amplitude floor off (as in
``benchmarks/false_positive_rate.py``), short segments, and, if present, the
resampled segments of a ``driftloop analyse`` run (``--resampled``).
"""

from __future__ import annotations

import argparse
import dataclasses
import math
import sys
from pathlib import Path

import numpy as np
from scipy.signal import lfilter

sys.path.insert(0, str(Path(__file__).resolve().parent))

from bench_wavelet import HOUR, segment  # noqa: E402

from driftloop.ridges import detect  # noqa: E402
from driftloop.significance import calibrate  # noqa: E402
from driftloop.wavelet import WaveletConfig, rotary_transform  # noqa: E402

FIELDS = ("frequency_rad_s", "scale_frequency_rad_s", "amplitude_m_s", "phase_rad",
          "amplitude_ccw_m_s", "amplitude_cw_m_s", "phase_ccw_rad", "phase_cw_rad", "snr")
PHASES = ("phase_rad", "phase_ccw_rad", "phase_cw_rad")


def noise(seed: int, ar: float, n: int = 2880) -> np.ndarray:
    rng = np.random.default_rng([seed, int(round(ar * 1000))])
    z = 0.1 * (rng.standard_normal(n) + 1j * rng.standard_normal(n)) / math.sqrt(2.0)
    return lfilter([1.0], [1.0, -ar], z) if ar else z


def cases(resampled: str | None):
    base = WaveletConfig()
    for seed in (1, 2, 3):
        yield f"bench{seed}", segment(seed=seed), HOUR, base
    z = segment()
    yield "bench1-float32", z, HOUR, dataclasses.replace(base, dtype="float32")
    yield "bench1-workers2", z, HOUR, dataclasses.replace(base, fft_workers=2)
    yield "bench1-nosig", z, HOUR, dataclasses.replace(base, significance=False)
    yield "bench1-nobias", z, HOUR, dataclasses.replace(base, bias_correction=False)
    yield "bench1-coi2", z, HOUR, dataclasses.replace(base, coi_factor=2.0,
                                                       max_period_s=100 * HOUR)
    yield "bench1-pp8", z, HOUR, dataclasses.replace(base, periods_per_octave=8, beta=6.0)
    floor0 = dataclasses.replace(base, amplitude_floor_m_s=0.0)
    for ar in (0.0, 0.5, 0.9, 0.99):
        for seed in (7, 8):
            yield f"noise{ar}-{seed}", noise(seed, ar), HOUR, floor0
    for n in (12, 40, 100, 333, 1000):
        yield f"short{n}", segment(n=n, seed=n), HOUR, base
    if resampled and Path(resampled).is_file():
        import pandas as pd

        track = pd.read_csv(resampled, parse_dates=["time"])
        for (d, s), seg in track.groupby(["drifter_id", "segment"], sort=True):
            seg = seg.sort_values("time")
            zz = seg["u"].to_numpy(float) + 1j * seg["v"].to_numpy(float)
            if zz.size >= 8 and np.all(np.isfinite(zz)):
                yield f"track-{d}-{s}", zz, 3600.0, base


def collect(resampled: str | None) -> dict:
    out = {}
    for name, z, dt, config in cases(resampled):
        out[f"{name}/input"] = z
        ridges = detect(z, dt, config).ridges
        out[f"{name}/count"] = np.array(len(ridges))
        for k, r in enumerate(ridges):
            p = f"{name}/{k}/"
            out[p + "sense"] = np.array(r.sense)
            out[p + "index"] = np.asarray(r.index)
            out[p + "statistic"] = np.array(r.statistic)
            out[p + "threshold"] = np.array(r.threshold)
            out[p + "decay"] = np.array(r.decay_rate_per_s)
            for f in FIELDS:
                out[p + f] = np.asarray(getattr(r, f))
    for name, z in (("bench1", segment()), ("noise", noise(7, 0.9))):
        for dtype in ("float64", "float32"):
            tr = rotary_transform(z, HOUR, WaveletConfig(dtype=dtype))
            out[f"transform-{name}-{dtype}/ccw"] = tr.w_ccw
            out[f"transform-{name}-{dtype}/cw"] = tr.w_cw
            out[f"transform-{name}-{dtype}/spectrum"] = tr.spectrum
    cal = calibrate(WaveletConfig())
    for i, (s, d) in enumerate(zip(cal.statistic, cal.density, strict=True)):
        out[f"calibration/{i}/statistic"] = s
        out[f"calibration/{i}/density"] = d
    return out


def compare(ref: dict, new: dict, rtol: float) -> int:
    problems = 0
    worst = {}
    for key, a in ref.items():
        if key not in new:
            print(f"missing in new results: {key}")
            problems += 1
            continue
        b = new[key]
        leaf = key.rsplit("/", 1)[-1]
        if leaf in ("sense", "index", "count", "input") or a.dtype.kind in "biu":
            if a.shape != b.shape or not np.array_equal(a, b):
                print(f"differs: {key}")
                problems += 1
            continue
        if a.shape != b.shape:
            print(f"shape differs: {key} {a.shape} {b.shape}")
            problems += 1
            continue
        if leaf in PHASES:
            d = np.abs(np.angle(np.exp(1j * (a - b))))
            scale = 1.0
        else:
            d = np.abs(a - b)
            scale = float(np.nanmax(np.abs(a))) if a.size and np.any(np.isfinite(a)) else 1.0
        same_nan = np.array_equal(np.isnan(a), np.isnan(b))
        rel = float(np.nanmax(d) / scale) if d.size and np.any(np.isfinite(d)) else 0.0
        group = leaf if not key.startswith("calibration") else "calibration"
        if key.startswith("transform"):
            group = "transform-" + key.split("-")[-1].split("/")[0]
        worst[group] = max(worst.get(group, 0.0), rel)
        if not same_nan or rel > rtol:
            print(f"differs: {key} relative {rel:.3g}")
            problems += 1
    for key in new:
        if key not in ref:
            print(f"new key: {key}")
            problems += 1
    for group, rel in sorted(worst.items()):
        print(f"largest relative difference {group:24s} {rel:.3g}")
    n_ridges = sum(int(v) for k, v in ref.items() if k.endswith("/count"))
    print(f"{n_ridges} ridges compared, {problems} problems (rtol {rtol:g})")
    return problems


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("mode", choices=("save", "compare"))
    parser.add_argument("reference")
    parser.add_argument("--resampled", default=None,
                        help="resampled.csv of a driftloop analyse run (optional)")
    parser.add_argument("--rtol", type=float, default=1e-9)
    args = parser.parse_args()
    new = collect(args.resampled)
    if args.mode == "save":
        np.savez_compressed(args.reference, **new)
        print(f"saved {len(new)} arrays to {args.reference}")
        return
    with np.load(args.reference) as f:
        ref = {k: f[k] for k in f.files}
    sys.exit(1 if compare(ref, new, args.rtol) else 0)


if __name__ == "__main__":
    main()
