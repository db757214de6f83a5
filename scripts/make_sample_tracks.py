"""Regenerate the bundled sample tracks in ``sample_tracks/``.

The release is invented: eight drifters deployed one an hour along 38.5 W
between 43.0 and 44.05 N (central North Atlantic, several hundred kilometres
from any land) on the fictional cruise ORRAVANE, release A, and followed for
45 days.  The data are synthetic (:mod:`driftloop.synth`), not observations.

Run from the repository root::

    python scripts/make_sample_tracks.py            # writes sample_tracks/
    python scripts/make_sample_tracks.py --out-dir /tmp/x

The output is deterministic: the same code gives byte-identical files.
"""

from __future__ import annotations

import argparse
from pathlib import Path

from driftloop.synth import (
    DuplicateFix,
    EddyEncounter,
    FixGap,
    PositionSpike,
    ReleaseScenario,
    simulate_release,
    write_fixes_csv,
    write_truth_csv,
)

RELEASE = "orravane_a"
SEED = 20240402
DEFAULT_OUT = Path(__file__).resolve().parents[1] / "sample_tracks"
DRIFTERS = tuple(f"ORV-A{i:02d}" for i in range(1, 9))


def sample_scenario() -> ReleaseScenario:
    """Return the scenario of the bundled sample release.

    Returns
    -------
    ReleaseScenario
        Eight drifters, 45 days, hourly fixes, with one eddy trapping, one
        data gap, six spikes and three duplicated records.
    """
    return ReleaseScenario(
        name=RELEASE,
        drifter_ids=DRIFTERS,
        deploy_lat_deg=tuple(43.0 + 0.15 * i for i in range(8)),
        deploy_lon_deg=(-38.5,) * 8,
        deploy_after_start_h=tuple(float(i) for i in range(8)),
        start_utc="2024-04-02T00:00:00Z",
        duration_days=45.0,
        eddies=(
            EddyEncounter("ORV-A06", start_day=12.0, duration_days=14.0, orbit_radius_km=12.0,
                          orbit_period_days=4.0, core_radius_km=30.0, spin="cyclonic",
                          centre_bearing_deg=90.0),
        ),
        gaps=(FixGap("ORV-A03", start_day=20.3, duration_h=27.0),),
        spikes=(
            PositionSpike("ORV-A01", day=5.4, displacement_km=4.0, bearing_deg=60.0),
            PositionSpike("ORV-A08", day=9.1, displacement_km=8.0, bearing_deg=130.0),
            PositionSpike("ORV-A04", day=17.8, displacement_km=6.5, bearing_deg=200.0),
            PositionSpike("ORV-A06", day=19.5, displacement_km=5.0, bearing_deg=340.0),
            PositionSpike("ORV-A07", day=31.2, displacement_km=3.0, bearing_deg=300.0),
            PositionSpike("ORV-A02", day=38.6, displacement_km=45.0, bearing_deg=250.0),
        ),
        duplicates=(
            DuplicateFix("ORV-A02", day=7.25),
            DuplicateFix("ORV-A05", day=22.5),
            DuplicateFix("ORV-A08", day=40.1),
        ),
    )


def write_sample(out_dir: str | Path = DEFAULT_OUT) -> tuple[Path, Path]:
    """Simulate the sample release and write its two CSV files.

    Parameters
    ----------
    out_dir : str or Path
        Directory to write ``<release>.csv`` and ``<release>_truth.csv`` to.

    Returns
    -------
    tuple of Path
        The fixes file and the ground-truth file.
    """
    out_dir = Path(out_dir)
    out_dir.mkdir(parents=True, exist_ok=True)
    release = simulate_release(sample_scenario(), SEED)
    fixes = write_fixes_csv(release.fixes, out_dir / f"{RELEASE}.csv")
    truth = write_truth_csv(release.truth, out_dir / f"{RELEASE}_truth.csv")
    return fixes, truth


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description="Regenerate the synthetic sample tracks.")
    parser.add_argument("--out-dir", type=Path, default=DEFAULT_OUT,
                        help="output directory (default: sample_tracks/ in the repository)")
    args = parser.parse_args(argv)
    for path in write_sample(args.out_dir):
        print(f"wrote {path} ({path.stat().st_size / 1e6:.2f} MB)")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
