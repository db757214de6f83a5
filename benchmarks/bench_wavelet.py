"""Speed of the rotary wavelet transform and ridge detection.

Times transform plus ridge detection (significance test included, background
fit included, noise calibration done beforehand) on a 2,880-sample hourly
segment (120 days) of synthetic drifter velocity: damped inertial events at
45 N, an M2 tidal ellipse and red noise.  Both dtypes are measured in the
same run (float64 is the default of ``WaveletConfig``; float32 is labelled
as such wherever it appears).  Prints, per dtype,

- the ratio of that time to the bare inverse FFTs of the same array shape
  (2 x n_periods x padded length, same dtype, same workers) - target <= 1.3.
  Two floors are timed: one batched ``scipy.fft.ifft`` call on the whole
  array, and the same inverse FFTs issued as the transform issues them (in
  blocks of scales, from a small buffer into the output array, nothing else
  done).  Ratios are given against both; the headline uses the faster floor.
- a lower bound of any ridge detector built on this transform: the
  transform with |W|^2 and the search for local maxima across scale above
  the amplitude floor, block by block as :func:`driftloop.ridges.detect`
  does it, without refining, chaining, estimating or testing the points;
- the time per scale and sense against PyWavelets' ``pywt.cwt`` with
  ``method="fft"`` on the same signal and number of scales (one real call
  each for u and v, which is what a real-valued library needs for a vector
  series) - target >= 3x faster; skipped with a message if PyWavelets is
  not installed.

"Ridges" is :func:`driftloop.ridges.detect`, the path the loop-event stage
uses: ridge points are searched block by block while the transform is
computed and the transform is not kept.  The stored-transform path,
:func:`driftloop.wavelet.rotary_transform` followed by
:func:`driftloop.ridges.find_ridges`, gives the same ridges and is timed
too.  All functions are run in turn, ``--repeat`` times, so that a varying
machine load affects them alike; the minimum and the median of each are
printed and ratios are formed from minima (medians in brackets).

Run: ``python benchmarks/bench_wavelet.py [--workers N] [--repeat R]``.
"""

from __future__ import annotations

import argparse
import math
import time

import numpy as np
import scipy.fft
from scipy.signal import lfilter

from driftloop import wavelet
from driftloop.ridges import detect, find_ridges
from driftloop.significance import calibrate
from driftloop.wavelet import WaveletConfig, rotary_transform

HOUR = 3600.0
DTYPES = ("float64", "float32")


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


def interleaved(fns: dict, repeat: int) -> dict:
    """Time each function ``repeat`` times, the functions run in turn."""
    for fn in fns.values():
        fn()
    times = {name: [] for name in fns}
    for _ in range(repeat):
        for name, fn in fns.items():
            t0 = time.perf_counter()
            fn()
            times[name].append(time.perf_counter() - t0)
    return {name: np.array(v) for name, v in times.items()}


def functions(z: np.ndarray, config: WaveletConfig, workers: int) -> tuple[dict, dict]:
    """Return the timed functions for one configuration and facts about its transform."""
    tr = rotary_transform(z, HOUR, config)
    n_p, n_fft = len(tr.periods_s), tr.n_fft
    plan = wavelet._plan(len(z), HOUR, config)
    complex_t = plan.complex_type
    rng = np.random.default_rng(0)
    block = (rng.standard_normal((2 * n_p, n_fft))
             + 1j * rng.standard_normal((2 * n_p, n_fft))).astype(complex_t)
    small = np.ascontiguousarray(block.reshape(2, n_p, n_fft)[:, :plan.block_size])
    out = np.empty((2, n_p, n_fft), dtype=complex_t)

    def bare_batched():
        scipy.fft.ifft(block, axis=-1, workers=workers)

    def bare_blocked():
        for a, b, _ in plan.blocks:
            wavelet._ifft_into(small[:, :b - a], out[:, a:b], workers)

    from driftloop import ridges as ridges_module

    thr2 = ridges_module._squared_thresholds(config, n_p, None, plan.multiplier.dtype)

    def point_search():
        # the transform with |W|^2 and the local maxima across scale, nothing
        # more: no refinement, chaining, estimates, background or noise test
        halves, _ = wavelet._half_spectra(z, plan, HOUR, workers)
        power = wavelet.scratch("bench.power", (2, n_p, len(z)), halves.dtype)
        buffer = wavelet.scratch("bench.transform", (2 * n_p, n_fft), complex_t)
        for a, b in wavelet.inverse_blocks(plan, halves, buffer, workers, power):
            lo, hi = a + 1, min(b, n_p - 2)
            if lo <= hi:
                ridges_module._maxima(power, thr2, plan.inside, lo, hi)

    fns = {
        "bare, one batched call": bare_batched,
        "bare, in the transform's blocks": bare_blocked,
        "transform only": lambda: rotary_transform(z, HOUR, config),
        "transform + ridge-point search": point_search,
        "transform + ridges (detect)": lambda: detect(z, HOUR, config),
        "stored transform + find_ridges": lambda: find_ridges(rotary_transform(z, HOUR, config),
                                                              config),
    }
    facts = {"n_p": n_p, "n_fft": n_fft, "blocks": len(plan.blocks),
             "ridges": len(detect(z, HOUR, config).ridges), "periods": tr.periods_s}
    return fns, facts


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--workers", type=int, default=1)
    parser.add_argument("--repeat", type=int, default=40)
    args = parser.parse_args()
    z = segment()
    try:
        import pywt
    except ImportError:
        pywt = None
    fns, facts = {}, {}
    for dtype in DTYPES:
        config = WaveletConfig(fft_workers=args.workers, dtype=dtype)
        calibrate(config)
        f, facts[dtype] = functions(z, config, args.workers)
        fns.update({(dtype, name): fn for name, fn in f.items()})
    if pywt is not None:
        wav = "cmor1.5-1.0"
        scales = pywt.central_frequency(wav) * facts["float64"]["periods"] / HOUR

        def with_pywt():
            pywt.cwt(z.real, scales, wav, method="fft")
            pywt.cwt(z.imag, scales, wav, method="fft")

        fns[("", "pywt")] = with_pywt
    times = interleaved(fns, args.repeat)
    best = {k: float(v.min()) for k, v in times.items()}
    med = {k: float(np.median(v)) for k, v in times.items()}
    n_p, n_fft = facts["float64"]["n_p"], facts["float64"]["n_fft"]
    print(f"segment: {len(z)} hourly samples, {n_p} periods "
          f"({facts['float64']['periods'][0] / HOUR:.1f}-"
          f"{facts['float64']['periods'][-1] / HOUR:.0f} h), padded FFT length {n_fft}, "
          f"workers {args.workers}, {args.repeat} interleaved repeats; "
          f"{facts['float64']['ridges']} ridges (float64), "
          f"{facts['float32']['ridges']} (float32)")
    print("times: minimum (median) over the repeats; ratios of minima (of medians)")
    for dtype in DTYPES:
        floors = [(dtype, "bare, one batched call"), (dtype, "bare, in the transform's blocks")]
        floor = min(floors, key=lambda k: best[k])
        print(f"\n[{dtype}] inverse FFTs of 2 x {n_p} x {n_fft} "
              f"({facts[dtype]['blocks']} blocks of scales in the transform)")
        for key in [k for k in fns if k[0] == dtype]:
            line = f"  {key[1]:34s} {best[key] * 1e3:7.2f} ms ({med[key] * 1e3:6.2f})"
            if key not in floors:
                line += "  ratio " + " / ".join(
                    f"{best[key] / best[fl]:.2f} ({med[key] / med[fl]:.2f})" for fl in floors)
            print(line)
        full = (dtype, "transform + ridges (detect)")
        ok = best[full] / best[floor] <= 1.3
        print(f"  headline [{dtype}]: transform + ridges = {best[full] / best[floor]:.2f} x the "
              f"faster floor ({floor[1]}); target <= 1.3 {'met' if ok else 'NOT met'}")
        search = (dtype, "transform + ridge-point search")
        print(f"  lower bound [{dtype}]: the transform and the search for local maxima "
              f"alone take {best[search] / best[floor]:.2f} x the faster floor")
    if pywt is None:
        print("\nPyWavelets is not installed: comparison with pywt.cwt skipped "
              "(pip install PyWavelets)")
        return
    key = ("", "pywt")
    theirs = best[key] / (2 * n_p)
    print(f"\npywt.cwt (method='fft', cmor1.5-1.0, u and v, {n_p} scales, float64): "
          f"{best[key] * 1e3:.2f} ms ({med[key] * 1e3:.2f}); per scale and sense "
          f"{theirs * 1e6:.1f} us")
    for dtype in DTYPES:
        for name in ("transform only", "transform + ridges (detect)"):
            ours = best[(dtype, name)] / (2 * n_p)
            ours_med = med[(dtype, name)] / (2 * n_p)
            print(f"  [{dtype}] {name:28s} {ours * 1e6:6.1f} us per scale and sense: "
                  f"{theirs / ours:5.1f}x faster ({med[key] / (2 * n_p) / ours_med:.1f}x "
                  f"by medians){'; target >= 3' if 'ridges' in name else ''}")


if __name__ == "__main__":
    main()
