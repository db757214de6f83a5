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

import numpy as np
import pandas as pd

from driftloop import geodesy
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

#: The deliberately biased "model" of the sample: which drifters, run spacing
#: and length (h), current scaling and extra eastward leeway (m/s).
MODEL_DRIFTERS = ("ORV-A01",)
MODEL_RESTART_H = 24
MODEL_RUN_H = 72
MODEL_CURRENT_FACTOR = 0.8
MODEL_LEEWAY_EAST_M_S = 0.03


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


def write_model(out_dir: str | Path = DEFAULT_OUT) -> Path:
    """Write a deliberately biased "model" of some sample drifters.

    For each drifter of :data:`MODEL_DRIFTERS` a modelled run starts every
    :data:`MODEL_RESTART_H` hours at a reported (uncorrupted) fix and lasts
    :data:`MODEL_RUN_H` hours, hourly.  The run drifts with the true
    background current along the drifter's track (``u_mean_m_s``,
    ``v_mean_m_s`` of the truth file, linear in time) scaled by
    :data:`MODEL_CURRENT_FACTOR`, plus an eastward leeway of
    :data:`MODEL_LEEWAY_EAST_M_S`; it has no inertial, eddy or wind-driven
    motion.  Positions are stepped along geodesics (:func:`driftloop.geodesy.forward`)
    with the mid-step velocity.  The file is meant for trying ``driftloop
    skill``; it is not a model of the real ocean.

    Parameters
    ----------
    out_dir : str or Path
        Directory holding ``<release>.csv`` and ``<release>_truth.csv`` (as
        written by :func:`write_sample`); ``<release>_model.csv`` goes there.

    Returns
    -------
    Path
        The modelled-track file: columns ``platform_id`` (``ORV-A01@d01`` ...),
        ``obs_time_utc``, ``latitude``, ``longitude``.
    """
    out_dir = Path(out_dir)
    truth = pd.read_csv(out_dir / f"{RELEASE}_truth.csv")
    observed = pd.read_csv(out_dir / f"{RELEASE}.csv")
    truth["t"] = pd.to_datetime(truth["time"], utc=True)
    row = truth["fix_row"].clip(lower=0)
    truth["latitude_obs"] = observed["latitude"].to_numpy()[row]
    truth["longitude_obs"] = observed["longitude"].to_numpy()[row]
    rows = []
    for drifter in MODEL_DRIFTERS:
        tr = truth[(truth["drifter_id"] == drifter) & (truth["corruption"] != "duplicate")]
        tr = tr.sort_values("t")
        t_s = (tr["t"] - tr["t"].iloc[0]).dt.total_seconds().to_numpy()
        fixes = tr[tr["corruption"] == "none"]
        fix_s = (fixes["t"] - tr["t"].iloc[0]).dt.total_seconds().to_numpy()
        day = 0
        while True:
            start_s = day * MODEL_RESTART_H * 3600.0
            if start_s + MODEL_RUN_H * 3600.0 > t_s[-1]:
                break
            k = int(np.searchsorted(fix_s, start_s))
            if k >= fix_s.size:
                break
            first = fixes.iloc[k]
            t_run = fix_s[k] + 3600.0 * np.arange(MODEL_RUN_H + 1)
            mid = t_run[:-1] + 1800.0
            u = (MODEL_CURRENT_FACTOR * np.interp(mid, t_s, tr["u_mean_m_s"].to_numpy())
                 + MODEL_LEEWAY_EAST_M_S)
            v = MODEL_CURRENT_FACTOR * np.interp(mid, t_s, tr["v_mean_m_s"].to_numpy())
            lat = np.empty(t_run.size)
            lon = np.empty(t_run.size)
            lat[0], lon[0] = float(first["latitude_obs"]), float(first["longitude_obs"])
            az = np.degrees(np.arctan2(u, v))
            dist = np.hypot(u, v) * 3600.0
            for i in range(MODEL_RUN_H):
                end = geodesy.forward(lon[i], lat[i], az[i], dist[i])
                lon[i + 1], lat[i + 1] = float(end.lon_deg), float(end.lat_deg)
            times = first["t"] + pd.to_timedelta(t_run - fix_s[k], unit="s")
            rows.append(pd.DataFrame({
                "platform_id": f"{drifter}@d{day + 1:02d}",
                "obs_time_utc": times.strftime("%Y-%m-%dT%H:%M:%SZ"),
                "latitude": np.char.mod("%.6f", lat),
                "longitude": np.char.mod("%.6f", lon),
            }))
            day += 1
    path = out_dir / f"{RELEASE}_model.csv"
    pd.concat(rows, ignore_index=True).to_csv(path, index=False, lineterminator="\n")
    return path


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description="Regenerate the synthetic sample tracks.")
    parser.add_argument("--out-dir", type=Path, default=DEFAULT_OUT,
                        help="output directory (default: sample_tracks/ in the repository)")
    args = parser.parse_args(argv)
    for path in (*write_sample(args.out_dir), write_model(args.out_dir)):
        print(f"wrote {path} ({path.stat().st_size / 1e6:.2f} MB)")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
