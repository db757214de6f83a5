"""Tests of driftloop.drift: ridge reconstruction, decomposition and drift statistics.

Sources of the expected values:

- the synthetic track's mean drift (0.10 m/s towards 60 degrees) and inertial
  e-folding time (3 days) are the inputs of the construction, so they are the
  analytic answers;
- the damped inertial oscillation z = A0 exp(-(r + i f) t) is the free
  solution of the slab mixed-layer model dZ/dt + (r + i f) Z = 0 (Pollard &
  Millard 1970, Deep-Sea Res. 17, from memory), whose amplitude e-folds in
  1/r, clockwise in the northern hemisphere;
- that a ridge rebuilds a steady circle, A+ exp(i phi+) + A- exp(-i phi-) = z,
  follows from the rotary normalisation |W+-| = A+- on the ridge
  (driftloop.wavelet docstring; Lilly & Gascard 2006; Lilly & Olhede 2012).
"""

from __future__ import annotations

import json

import numpy as np
import pandas as pd
import pytest

from driftloop import geodesy
from driftloop.drift import (
    DECOMPOSITION_COLUMNS,
    RELEASE_KEY,
    decompose,
    drift_statistics,
    reconstruct_ridge,
)
from driftloop.loops import find_events
from driftloop.physics import coriolis_parameter
from driftloop.ridges import detect

DT = 3600.0
SPEED, TOWARD_DEG = 0.10, 60.0
EFOLD_H = 72.0
LAT0 = 45.0


def _table(z: np.ndarray, drifter: str = "SYN-1", lat0: float = LAT0,
           lon0: float = -30.0) -> pd.DataFrame:
    """Resampled-style table: positions integrated from z with geodesy.forward."""
    n = z.size
    lat = np.empty(n)
    lon = np.empty(n)
    lat[0], lon[0] = lat0, lon0
    zm = 0.5 * (z[1:] + z[:-1])
    az = np.degrees(np.arctan2(zm.real, zm.imag))
    for k in range(n - 1):
        end = geodesy.forward(lon[k], lat[k], az[k], abs(zm[k]) * DT)
        lon[k + 1], lat[k + 1] = float(end.lon_deg), float(end.lat_deg)
    return pd.DataFrame({
        "drifter_id": drifter, "segment": 0,
        "time": pd.date_range("2024-01-01", periods=n, freq="h", tz="UTC"),
        "lat": lat, "lon": lon, "u": z.real, "v": z.imag, "sigma_m": 10.0,
        "in_gap": False, "gap_h": 0.0,
    })


def _drift_plus_ringing(days: float = 40.0) -> np.ndarray:
    t = np.arange(int(days * 24) + 1) * DT
    f = float(coriolis_parameter(LAT0))
    r = 1.0 / (EFOLD_H * 3600.0)
    mean = SPEED * np.exp(1j * np.radians(90.0 - TOWARD_DEG))
    return mean + 0.3 * np.exp(-(r + 1j * f) * t)


@pytest.fixture(scope="module")
def ringing():
    track = _table(_drift_plus_ringing())
    events = find_events(track).events
    decomposed = decompose(track, events=events)
    return track, events, decomposed


def test_decompose_columns_and_sum(ringing):
    track, _, dec = ringing
    assert tuple(dec.columns) == DECOMPOSITION_COLUMNS
    assert len(dec) == len(track)
    u = dec[[c for c in dec if c.startswith("u_")]].sum(axis=1)
    v = dec[[c for c in dec if c.startswith("v_")]].sum(axis=1)
    np.testing.assert_allclose(u, track["u"], atol=1e-12)
    np.testing.assert_allclose(v, track["v"], atol=1e-12)


def test_mean_drift_and_inertial_decay(ringing):
    _, events, dec = ringing
    inertial = events[events["kind"] == "inertial"]
    assert len(inertial) == 1
    assert inertial["decay_time_h"].iloc[0] == pytest.approx(EFOLD_H, rel=0.10)
    stats = drift_statistics(dec, events)
    json.dumps(stats)  # JSON-ready
    st = stats["SYN-1"]
    true = SPEED * np.exp(1j * np.radians(90.0 - TOWARD_DEG))
    got = st["mean_drift_u_m_s"] + 1j * st["mean_drift_v_m_s"]
    assert abs(got - true) < 0.02 * SPEED
    assert st["mean_drift_speed_m_s"] == pytest.approx(SPEED, rel=0.02)
    assert st["mean_drift_direction_deg"] == pytest.approx(TOWARD_DEG, abs=1.2)
    assert st["inertial_decay_time_median_h"] == pytest.approx(EFOLD_H, rel=0.10)
    assert 0 < st["inertial_fraction"] < 1
    assert st["inertial_speed_p90_m_s"] <= 0.3 + 1e-3
    assert st["dispersion"]["vector"]["method"] == "first_zero"
    assert RELEASE_KEY in stats and stats[RELEASE_KEY]["drifters"] == 1
    # where the ridge is, the drift is the mean current alone
    on = dec["u_inertial"].to_numpy() != 0
    res = np.abs(dec["u_drift"] + 1j * dec["v_drift"] - true).to_numpy()[on]
    assert np.sqrt(np.mean(res ** 2)) < 0.01 * 0.3


@pytest.mark.parametrize("sign", [1, -1])
def test_circle_reconstruction(sign):
    t = np.arange(24 * 30) * DT
    z = 0.2 * np.exp(sign * 2j * np.pi * t / (16.9 * 3600.0))
    ridges = detect(z, DT).ridges
    assert len(ridges) == 1 and ridges[0].sense == sign
    r = ridges[0]
    err = reconstruct_ridge(r) - z[r.index]
    assert np.sqrt(np.mean(np.abs(err) ** 2)) < 0.05 * 0.2


def test_ellipse_reconstruction():
    t = np.arange(24 * 30) * DT
    w = 2 * np.pi / (30 * 3600.0)
    z = 0.2 * np.exp(1j * w * t) + 0.08 * np.exp(-1j * w * t + 0.7j)
    ridges = detect(z, DT).ridges
    assert len(ridges) == 1
    r = ridges[0]
    err = reconstruct_ridge(r) - z[r.index]
    assert np.sqrt(np.mean(np.abs(err) ** 2)) < 0.05 * 0.2


def test_circle_drift_residual_is_zero_away_from_edges():
    t = np.arange(24 * 30) * DT
    z = 0.2 * np.exp(-2j * np.pi * t / (17.0 * 3600.0))
    dec = decompose(_table(z))
    osc = dec[["u_inertial", "u_tidal", "u_eddy", "u_other"]].abs().sum(axis=1).to_numpy()
    on = osc > 0
    assert on.mean() > 0.8
    drift = np.hypot(dec["u_drift"], dec["v_drift"]).to_numpy()[on]
    assert np.sqrt(np.mean(drift ** 2)) < 0.05 * 0.2


def test_unlabeled_ridges_are_other():
    t = np.arange(24 * 20) * DT
    z = 0.2 * np.exp(-2j * np.pi * t / (17.0 * 3600.0))
    track = _table(z)
    no_events = find_events(track).events.iloc[0:0]
    dec = decompose(track, events=no_events)
    assert (dec["u_inertial"] == 0).all()
    assert (dec["u_other"] != 0).any()
