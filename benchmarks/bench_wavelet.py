"""Speed of the rotary wavelet transform and ridge detection.

Times :func:`driftloop.wavelet.rotary_transform` followed by
:func:`driftloop.ridges.find_ridges` (significance test included, background
fit included, calibration done beforehand) on a 2,880-sample hourly segment
(120 days) of synthetic drifter velocity: damped inertial events at 45 N,
an M2 tidal ellipse and red noise.  Prints

- the ratio of that time to the bare inverse FFTs of the same array shape
  (2 x n_periods x padded length, same dtype, same workers) - target <= 1.3;
- the time per scale and sense against PyWavelets' ``pywt.cwt`` with
  ``method="fft"`` on the same signal and number of scales (one real call
  each for u and v, which is what a real-valued library needs for a vector
  series) - target >= 3x faster; skipped with a message if PyWavelets is
  not installed.

Each figure is the minimum over repeats, the functions timed in turn so
that a varying machine load affects them alike.

Run: ``python benchmarks/bench_wavelet.py [--workers N] [--dtype float32]``.
"""

from __future__ import annotations

import argparse
import math
import time

import numpy as np
import scipy.fft
from scipy.signal import lfilter

from driftloop.ridges import find_ridges
from driftloop.significance import calibrate, fit_background
from driftloop.wavelet import WaveletConfig, rotary_transform

HOUR = 3600.0


def segment(n: int = 2880, seed: int = 1) -> np.ndarray:
    rng = np.random.default_rng(seed)
    t = np.arange(n) * HOUR
    f = 2 * 7.2921150e-5 * math.sin(math.radians(45.0))
    z = np.zeros(n, dtype=complex)
    for start_h in (200, 900, 1500, 2300):
        on = t >= start_h * HOUR
        age = np.where(on, t - start_h * HOUR, 0.0)
        z += on * 0.25 * np.exp(-age / (4 * 86400.0)) * np.exp(-1j * f * age)
    w2 = 2 * math.pi / (12.4206012 * HOUR)
    z += 0.05 * np.exp(1j * w2 * t) + 0.02 * np.exp(-1j * w2 * t)
    noise = (rng.standard_normal(n) + 1j * rng.standard_normal(n)) * 0.02
    return z + lfilter([1.0], [1.0, -0.9], noise) + 0.08


def best(fns: dict, repeat: int) -> dict:
    """Minimum time of each function, the functions run in turn (fair under load)."""
    for fn in fns.values():
        fn()
    times = {name: [] for name in fns}
    for _ in range(repeat):
        for name, fn in fns.items():
            t0 = time.perf_counter()
            fn()
            times[name].append(time.perf_counter() - t0)
    return {name: min(v) for name, v in times.items()}


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--workers", type=int, default=1)
    parser.add_argument("--dtype", default="float64", choices=("float64", "float32"))
    parser.add_argument("--repeat", type=int, default=30)
    args = parser.parse_args()
    config = WaveletConfig(fft_workers=args.workers, dtype=args.dtype)
    z = segment()
    calibrate(config)

    tr = rotary_transform(z, HOUR, config)
    n_p, n_fft = len(tr.periods_s), tr.n_fft
    complex_t = np.complex64 if args.dtype == "float32" else np.complex128
    rng = np.random.default_rng(0)
    block = (rng.standard_normal((2 * n_p, n_fft))
             + 1j * rng.standard_normal((2 * n_p, n_fft))).astype(complex_t)

    def bare():
        scipy.fft.ifft(block, axis=-1, workers=args.workers)

    def transform_only():
        rotary_transform(z, HOUR, config)

    def full():
        t = rotary_transform(z, HOUR, config)
        find_ridges(t, config, fit_background(t))

    timing = best({"bare": bare, "transform": transform_only, "full": full}, args.repeat)
    t_bare, t_tr, t_full = timing["bare"], timing["transform"], timing["full"]
    ridges = find_ridges(tr, config)
    print(f"segment: {len(z)} hourly samples, {n_p} periods "
          f"({tr.periods_s[0] / HOUR:.1f}-{tr.periods_s[-1] / HOUR:.0f} h), "
          f"padded FFT length {n_fft}, dtype {args.dtype}, workers {args.workers}, "
          f"{len(ridges)} ridges")
    print(f"bare inverse FFTs (2 x {n_p} x {n_fft}): {t_bare * 1e3:8.2f} ms")
    print(f"transform only:                     {t_tr * 1e3:8.2f} ms  "
          f"ratio {t_tr / t_bare:.2f}")
    print(f"transform + ridges + significance:  {t_full * 1e3:8.2f} ms  "
          f"ratio {t_full / t_bare:.2f}  (target <= 1.3)")

    try:
        import pywt
    except ImportError:
        print("PyWavelets is not installed: comparison with pywt.cwt skipped "
              "(pip install PyWavelets)")
        return
    # the same periods with PyWavelets' complex Morlet wavelet
    wav = "cmor1.5-1.0"
    centre = pywt.central_frequency(wav)
    scales = centre * tr.periods_s / HOUR

    def with_pywt():
        pywt.cwt(z.real, scales, wav, method="fft")
        pywt.cwt(z.imag, scales, wav, method="fft")

    timing = best({"pywt": with_pywt, "full": full}, max(3, args.repeat // 4))
    t_pywt, t_full = timing["pywt"], min(t_full, timing["full"])
    ours = t_full / (2 * n_p)
    ours_tr = t_tr / (2 * n_p)
    theirs = t_pywt / (2 * n_p)
    print(f"pywt.cwt (method='fft', {wav}, u and v, {n_p} scales): {t_pywt * 1e3:8.2f} ms")
    print(f"per scale and sense: pywt {theirs * 1e6:.1f} us (transform only); driftloop "
          f"{ours_tr * 1e6:.1f} us transform only ({theirs / ours_tr:.1f}x faster), "
          f"{ours * 1e6:.1f} us with ridges and significance ({theirs / ours:.1f}x faster; "
          f"target >= 3)")

if __name__ == "__main__":
    main()
