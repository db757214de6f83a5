"""False-positive rate of the ridge significance test on simulated noise.

Runs :func:`driftloop.ridges.detect` (default configuration, amplitude floor
off) on seeded records of complex Gaussian noise - white and AR(1) red with
the given coefficients - and prints the fraction of the record duration
covered by the ridges it keeps (both senses counted), to compare with
``WaveletConfig.false_positive_rate``.  With ``--latitude`` the records are
analysed as segments at those latitudes (``detect(..., latitude=...)``), so
that the inertial and tidal bands are left out of the background fit and of
its calibration; ``none`` is the test without left-out bands.  The figures in
docs/wavelets.md come from ``python benchmarks/false_positive_rate.py
--records 100 --latitude none 20 45 70``.
"""

from __future__ import annotations

import argparse
import math

import numpy as np
from scipy.signal import lfilter

from driftloop.ridges import detect
from driftloop.wavelet import WaveletConfig


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--records", type=int, default=100)
    parser.add_argument("--length", type=int, default=2880)
    parser.add_argument("--ar", type=float, nargs="*", default=[0.0, 0.5, 0.9, 0.99])
    parser.add_argument("--seed", type=int, default=7)
    parser.add_argument("--latitude", nargs="*", default=["none"],
                        help="segment latitudes (degrees) or 'none' (default: none)")
    args = parser.parse_args()
    config = WaveletConfig(amplitude_floor_m_s=0.0)
    for lat_text in args.latitude:
        latitude = None if lat_text.lower() == "none" else float(lat_text)
        for ar in args.ar:
            _run(args, config, ar, latitude)


def _run(args: argparse.Namespace, config: WaveletConfig, ar: float,
         latitude: float | None) -> None:
    """Print the false-positive rate of one noise process at one latitude."""
    rng = np.random.default_rng([args.seed, int(round(ar * 1000))])
    covered = 0
    count = 0
    for _ in range(args.records):
        z = 0.1 * (rng.standard_normal(args.length)
                   + 1j * rng.standard_normal(args.length)) / math.sqrt(2.0)
        if ar:
            z = lfilter([1.0], [1.0, -ar], z)
        ridges = detect(z, 3600.0, config, latitude=latitude).ridges
        covered += sum(len(r.index) for r in ridges)
        count += len(ridges)
    rate = covered / (args.records * args.length)
    where = "no bands left out" if latitude is None else f"latitude {latitude:g}"
    print(f"{where}, AR({ar:g}) noise: {count} false ridges in {args.records} records of "
          f"{args.length} samples, covering {100 * rate:.2f} % of the time "
          f"(target {100 * config.false_positive_rate:.2f} %)")


if __name__ == "__main__":
    main()
