"""Resampling onto a uniform grid (driftloop.resample).

External check values: geodesic tracks from GeographicLib (Geodesic.WGS84.Line,
Karney 2013), scipy's not-a-knot CubicSpline for the interpolant, and
analytic circles whose radius and speed are known exactly.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from geographiclib.geodesic import Geodesic
from scipy.interpolate import CubicSpline

from driftloop import geodesy
from driftloop.config import Config, ResampleConfig, config_from_dict
from driftloop.constants import EARTH_ROTATION_RATE_RAD_S
from driftloop.errors import ConfigError
from driftloop.resample import (
    RESAMPLED_COLUMNS,
    _units,
    resample_all,
    resample_drifter,
    segment_xy,
)

WGS84 = Geodesic.WGS84
T0 = pd.Timestamp("2024-04-02T00:00:00Z")
HOUR = 3600.0


def _fixes(t_s, lat, lon, drifter="A", flag=1) -> pd.DataFrame:
    return pd.DataFrame({
        "drifter_id": pd.array([drifter] * len(t_s), dtype="string"),
        "time": T0 + pd.to_timedelta(np.asarray(t_s, dtype=float), unit="s"),
        "lat": np.asarray(lat, dtype=float),
        "lon": np.asarray(lon, dtype=float),
        "qc_flag": np.broadcast_to(np.asarray(flag, dtype=np.int8), (len(t_s),)).copy(),
    })


def _seconds(times: pd.Series) -> np.ndarray:
    return (pd.DatetimeIndex(times).as_unit("ns").asi8 - T0.value) / 1e9


def _irregular_times(days: float, seed: int, gaps_day=(), gap_h=3.0) -> np.ndarray:
    """40-80 min steps, with gaps of gap_h hours starting on the given days."""
    rng = np.random.default_rng(seed)
    n = int(days * 24 * 60 / 40) + 10
    t = 1234.0 + np.r_[0.0, np.cumsum(rng.uniform(40, 80, n) * 60.0)]
    t = t[t < days * 86400]
    for day in gaps_day:
        t = t[(t < day * 86400) | (t > day * 86400 + gap_h * HOUR)]
    return t


def _circle(t, lon_c, lat_c, radius_m=2000.0):
    """An inertial circle (clockwise in the north) about a fixed centre."""
    f = 2 * EARTH_ROTATION_RATE_RAD_S * np.sin(np.radians(lat_c))
    x = radius_m * np.cos(-f * t)
    y = radius_m * np.sin(-f * t)
    back = geodesy.aeqd_inverse(x, y, lon_c, lat_c)
    return back.lat_deg, back.lon_deg, abs(f) * radius_m


def _radius(track, lon_c, lat_c):
    p = geodesy.aeqd_forward(track["lon"], track["lat"], lon_c, lat_c)
    return np.hypot(p.x_m, p.y_m)


# --------------------------------------------------------------------------- loops


@pytest.mark.parametrize("method", ["conformal", "geodesic"])
def test_circle_keeps_its_radius(method):
    # 2 km circle at 45 N (inertial period 16.9 h), 40-80 min steps, three 3-h gaps
    t = _irregular_times(6, seed=1, gaps_day=(1.2, 2.5, 3.7))
    lat, lon, speed = _circle(t, 179.9, 45.0)
    track, dropped = resample_all(_fixes(t, lat, lon),
                                  ResampleConfig(projection_method=method))
    assert not dropped
    r = _radius(track, 179.9, 45.0) / 2000.0
    gap = track["in_gap"].to_numpy()
    assert gap.sum() >= 6  # the gaps are there and marked
    assert np.abs(r[~gap] - 1).max() < 0.005
    assert abs(r.mean() - 1) < 0.005
    # a 3-h gap spans 64 degrees of the turn; the spline's error there goes
    # as (omega h)^4 and stays within 2.5 % (docs/resampling.md)
    assert np.abs(r[gap] - 1).max() < 0.025
    s = np.hypot(track["u"], track["v"]) / speed
    assert np.abs(s[~gap] - 1).max() < 0.005


def test_linear_interpolation_cuts_the_corners():
    t = _irregular_times(6, seed=1, gaps_day=(1.2, 2.5, 3.7))
    lat, lon, _ = _circle(t, -30.0, 45.0)
    track, _ = resample_all(_fixes(t, lat, lon), ResampleConfig(interpolator="linear"))
    r = _radius(track, -30.0, 45.0) / 2000.0
    assert r.max() <= 1.0 + 1e-9  # chords lie inside the circle
    assert r.mean() < 0.985


def test_spline_is_the_not_a_knot_cubic_spline():
    t = _irregular_times(4, seed=7)
    lat, lon, _ = _circle(t, 10.0, -50.0, radius_m=5000.0)
    track, _ = resample_all(_fixes(t, lat, lon))
    # scipy in the same projection (one chunk: the track is 10 km across)
    lon0, lat0 = geodesy.track_centre(lon, lat)
    p = geodesy.aeqd_forward(lon, lat, lon0, lat0)
    tg = _seconds(track["time"])
    q = geodesy.aeqd_forward(track["lon"], track["lat"], lon0, lat0)
    xs, ys = CubicSpline(t, p.x_m)(tg), CubicSpline(t, p.y_m)(tg)
    # the chunk centre differs from lon0/lat0 by metres: distortion ~1e-12
    assert np.hypot(q.x_m - xs, q.y_m - ys).max() < 1e-4


def test_derivative_velocity_agrees_with_geodesic_differences_of_the_grid():
    t = _irregular_times(5, seed=3)
    lat, lon, speed = _circle(t, 100.0, 30.0)
    track, _ = resample_all(_fixes(t, lat, lon))
    tg = _seconds(track["time"])
    fd = geodesy.fix_velocities(tg, track["lon"].to_numpy(), track["lat"].to_numpy())
    # centred differences of a circle underestimate the speed by
    # sin(w h) / (w h) on an even grid (w = f, h = 1 h)
    w = 2 * EARTH_ROTATION_RATE_RAD_S * np.sin(np.radians(30.0)) * HOUR
    factor = np.sin(w) / w
    inner = slice(2, -2)
    u = track["u"].to_numpy()[inner] * factor
    v = track["v"].to_numpy()[inner] * factor
    err = np.hypot(fd.u_m_s[inner] - u, fd.v_m_s[inner] - v)
    assert err.max() < 0.002 * speed


# --------------------------------------------------------------------------- geography


def _geodesic_track(lat1, lon1, azi1, speed, t):
    line = WGS84.Line(lat1, lon1, azi1)
    pos = [line.Position(speed * float(tk)) for tk in t]
    return (np.array([p["lat2"] for p in pos]), np.array([p["lon2"] for p in pos]),
            np.array([p["azi2"] for p in pos]))


@pytest.mark.parametrize("method", ["conformal", "geodesic"])
@pytest.mark.parametrize(
    ("name", "lat1", "lon1", "azi1"),
    [
        ("across the antimeridian", 10.0, 178.8, 75.0),
        ("poleward of 85", 85.5, -60.0, 30.0),
        ("passing 29 m from the north pole", 89.9, 30.0, 0.15),
        ("along the equator", 0.0, -5.0, 90.0),
    ],
)
def test_geodesic_track_is_reproduced(method, name, lat1, lon1, azi1):
    # constant speed along a geodesic (GeographicLib Line), uneven sampling
    t = _irregular_times(3.5, seed=5)
    lat, lon, _ = _geodesic_track(lat1, lon1, azi1, 0.6, t)
    track, dropped = resample_all(_fixes(t, lat, lon),
                                  ResampleConfig(projection_method=method))
    assert not dropped
    tg = _seconds(track["time"])
    lat_ref, lon_ref, azi_ref = _geodesic_track(lat1, lon1, azi1, 0.6, tg)
    err = geodesy.inverse(track["lon"], track["lat"], lon_ref, lat_ref).distance_m
    assert err.max() < 0.01  # 1 cm
    lon_out = track["lon"].to_numpy()
    assert np.all((lon_out >= -180.0) & (lon_out < 180.0))
    speed = np.hypot(track["u"], track["v"])
    np.testing.assert_allclose(speed, 0.6, rtol=1e-6)
    polar = np.abs(track["lat"].to_numpy()) > 89.999  # east/north turn fast right at the pole
    direction = np.degrees(np.arctan2(track["u"], track["v"]))
    diff = np.abs((direction - azi_ref + 180.0) % 360.0 - 180.0)
    assert diff[~polar].max() < 1e-4
    legs = geodesy.leg_distances(track["lon"], track["lat"])
    np.testing.assert_allclose(legs, 0.6 * HOUR, rtol=1e-6)  # no jump anywhere
    if name == "along the equator":
        assert np.abs(track["lat"]).max() < 1e-9 and np.abs(track["v"]).max() < 1e-9
    if name.startswith("across"):
        assert lon_out.min() < -179.0 and lon_out.max() > 179.0


def test_long_segment_is_cut_into_projection_chunks_that_join_smoothly():
    # 20 days at 0.5 m/s: 860 km, far beyond one 150-km projection
    t = _irregular_times(20, seed=8)
    lat, lon, _ = _geodesic_track(50.0, -20.0, 100.0, 0.5, t)
    config = ResampleConfig()
    track, _ = resample_all(_fixes(t, lat, lon), config)
    tg = _seconds(track["time"])
    lat_ref, lon_ref, _ = _geodesic_track(50.0, -20.0, 100.0, 0.5, tg)
    err = geodesy.inverse(track["lon"], track["lat"], lon_ref, lat_ref).distance_m
    assert err.max() < 0.01
    np.testing.assert_allclose(np.hypot(track["u"], track["v"]), 0.5, rtol=1e-6)
    # every fix that an interpolant sees lies within the projection radius
    from driftloop.resample import _Segments

    seg = _Segments(np.zeros(t.size, dtype=np.int64), (t * 1e9).astype(np.int64), 10**15)
    units = _units(seg, lat, lon, config.projection_radius_km * 1e3)
    assert units.lo.size >= 5
    dist = geodesy.inverse(units.centre_lon[units.of_fix], units.centre_lat[units.of_fix],
                           lon[units.fix], lat[units.fix]).distance_m
    assert dist.max() < config.projection_radius_km * 1e3


def test_projection_methods_agree():
    t = _irregular_times(4, seed=9)
    lat, lon, _ = _circle(t, -150.0, 62.0, radius_m=8000.0)
    a, _ = resample_all(_fixes(t, lat, lon), ResampleConfig(projection_method="geodesic"))
    b, _ = resample_all(_fixes(t, lat, lon), ResampleConfig(projection_method="conformal"))
    assert geodesy.inverse(a["lon"], a["lat"], b["lon"], b["lat"]).distance_m.max() < 2e-3
    np.testing.assert_allclose(a["u"], b["u"], atol=1e-7)
    np.testing.assert_allclose(a["v"], b["v"], atol=1e-7)


# --------------------------------------------------------------------------- grid and segments


@pytest.mark.parametrize("step_h", [1.0, 0.5, 3.0])
def test_grid_is_aligned_to_multiples_of_the_step(step_h):
    t = _irregular_times(3.2, seed=2)
    lat, lon, _ = _circle(t, 0.0, 40.0)
    track, _ = resample_all(_fixes(t, lat, lon), ResampleConfig(step_h=step_h))
    ns = pd.DatetimeIndex(track["time"]).as_unit("ns").asi8
    step_ns = int(step_h * 3600e9)
    assert np.all(ns % step_ns == 0)
    assert np.all(np.diff(ns) == step_ns)
    first, last = T0.value + t[0] * 1e9, T0.value + t[-1] * 1e9
    assert ns[0] >= first and ns[0] - step_ns < first
    assert ns[-1] <= last and ns[-1] + step_ns > last
    assert str(track["time"].dtype) == "datetime64[ns, UTC]"
    assert list(track.columns) == list(RESAMPLED_COLUMNS)


def test_fixes_on_the_grid_are_kept_exactly():
    t = np.arange(0, 80) * HOUR
    lat, lon, _ = _circle(t, 179.99, -70.0, radius_m=4000.0)
    for method in ("conformal", "geodesic"):
        for interpolator in ("spline", "linear"):
            track, _ = resample_all(_fixes(t, lat, lon), ResampleConfig(
                projection_method=method, interpolator=interpolator))
            d = geodesy.inverse(track["lon"], track["lat"], lon, lat).distance_m
            assert d.max() < 1e-7
            np.testing.assert_allclose(track["sigma_m"], 10.0)


def test_suspect_fixes_only_by_option():
    t = np.arange(0, 80) * HOUR
    lat, lon, _ = _circle(t, 20.0, 45.0)
    lat = lat.copy()
    lat[40] += 0.01  # 1.1 km off the circle, flagged suspect
    flags = np.ones(t.size, dtype=np.int8)
    flags[40] = 3
    fixes = _fixes(t, lat, lon, flag=flags)
    default, _ = resample_all(fixes)
    with_suspect, _ = resample_all(fixes, ResampleConfig(include_suspect=True))
    at = default["time"] == T0 + pd.Timedelta(hours=40)
    d_default = geodesy.inverse(default.loc[at, "lon"], default.loc[at, "lat"], lon[40], lat[40])
    d_suspect = geodesy.inverse(with_suspect.loc[at, "lon"], with_suspect.loc[at, "lat"],
                                lon[40], lat[40])
    assert float(d_default.distance_m[0]) > 1000.0  # interpolated past it
    assert float(d_suspect.distance_m[0]) < 1e-6  # goes through it
    # flag 4 and 9 are never used
    flags[40] = 4
    fail, _ = resample_all(_fixes(t, lat, lon, flag=flags), ResampleConfig(include_suspect=True))
    np.testing.assert_allclose(fail["lat"], default["lat"], rtol=0, atol=1e-12)


def test_segments_split_at_max_gap_and_short_ones_dropped():
    hours = np.r_[
        np.arange(0, 20),  # segment of 19 h: too short
        np.arange(33, 33 + 100),  # 13-h gap before it: a new segment
        np.arange(143, 143 + 100),  # 11-h gap: joined to the previous one
    ].astype(float)
    t = hours * HOUR + 600.0
    lat = 30.0 + hours * 1e-3
    lon = -60.0 + hours * 1e-3
    track, dropped = resample_all(_fixes(t, lat, lon, drifter="ORV-A01"))
    assert dropped == [{
        "drifter_id": "ORV-A01", "start": "2024-04-02T00:10:00Z",
        "end": "2024-04-02T19:10:00Z", "n_fixes": 20, "duration_h": 19.0,
        "reason": "too_short",
    }]
    assert track["segment"].unique().tolist() == [0]  # renumbered after dropping
    tg = _seconds(track["time"]) / HOUR
    assert tg[0] == 34.0 and tg[-1] == 242.0  # across the 11-h gap, to the last fix
    in_gap = track["in_gap"].to_numpy()
    assert tg[in_gap].tolist() == list(np.arange(133.0, 144.0))  # 132:10 to 143:10
    np.testing.assert_allclose(track.loc[in_gap, "gap_h"], 11.0)
    assert (track.loc[~in_gap, "gap_h"] == 0).all()
    # a shorter max gap splits there too and keeps both halves
    track, dropped = resample_all(_fixes(t, lat, lon), ResampleConfig(max_gap_h=10.0))
    assert track["segment"].unique().tolist() == [0, 1] and len(dropped) == 1


def test_gap_flag_threshold():
    hours = np.r_[np.arange(0, 40), 42.0, 46.0, np.arange(47, 90)]  # 2-h and 4-h intervals
    t = hours * HOUR
    lat, lon, _ = _circle(t, 5.0, -40.0)
    track, _ = resample_all(_fixes(t, lat, lon))
    tg = _seconds(track["time"]) / HOUR
    assert tg[track["in_gap"].to_numpy()].tolist() == [43.0, 44.0, 45.0]
    np.testing.assert_allclose(track.loc[track["in_gap"], "gap_h"], 4.0)
    track, _ = resample_all(_fixes(t, lat, lon), ResampleConfig(flag_gap_h=1.5))
    tg = _seconds(track["time"]) / HOUR
    assert tg[track["in_gap"].to_numpy()].tolist() == [40.0, 41.0, 43.0, 44.0, 45.0]


def test_uncertainty_grows_with_distance_to_the_nearest_fix():
    t = np.r_[np.arange(0, 40), np.arange(46, 90)] * HOUR + 1200.0  # one 7-h interval
    lat, lon, _ = _circle(t, 5.0, -40.0)
    fixes = _fixes(t, lat, lon)
    for interpolator in ("spline", "linear"):
        track, _ = resample_all(fixes, ResampleConfig(interpolator=interpolator),
                                gps_noise_m=7.0)
        sigma = track["sigma_m"].to_numpy()
        tg = _seconds(track["time"])
        nearest = np.abs(tg[:, None] - t[None, :]).min(axis=1)
        assert sigma.min() >= 7.0
        # inside the gap sigma rises and falls with the distance to the nearest fix
        gap = track["in_gap"].to_numpy()
        order = np.argsort(nearest[gap])
        assert np.all(np.diff(sigma[gap][order]) > 0)
        assert sigma[gap].max() > sigma[~gap].max() > 7.0
        # and it is the documented bound (module notes)
        d1 = tg - t[np.searchsorted(t, tg, side="right") - 1]
        d2 = t[np.minimum(np.searchsorted(t, tg, side="right"), t.size - 1)] - tg
        a, w = 2e-4, 2 * EARTH_ROTATION_RATE_RAD_S
        bound = 0.5 * a * d1 * d2
        if interpolator == "spline":
            bound = np.minimum(5 / 24 * a * w**2 * (d1 * d2) ** 2, bound)
        np.testing.assert_allclose(sigma, np.hypot(7.0, bound), rtol=1e-9)


# --------------------------------------------------------------------------- tables


def test_many_drifters_in_any_row_order():
    t = _irregular_times(3.5, seed=4)
    a = _fixes(t, *_circle(t, 0.0, 40.0)[:2], drifter="B")
    b = _fixes(t + 1800.0, *_circle(t, 120.0, -40.0)[:2], drifter="A")
    both = pd.concat([a, b], ignore_index=True)
    track, _ = resample_all(both)
    shuffled, _ = resample_all(both.sample(frac=1.0, random_state=1))
    pd.testing.assert_frame_equal(track, shuffled)
    assert track["drifter_id"].unique().tolist() == ["A", "B"]
    assert str(track["drifter_id"].dtype) == "string"
    one, _ = resample_drifter(a)
    pd.testing.assert_frame_equal(one, track[track["drifter_id"] == "B"].reset_index(drop=True))
    with pytest.raises(ValueError, match="one drifter"):
        resample_drifter(both)


def test_repeated_time_and_unusable_rows():
    t = np.arange(0, 80) * HOUR
    lat, lon, _ = _circle(t, 0.0, 40.0)
    fixes = _fixes(t, lat, lon)
    extra = fixes.iloc[[10]].copy()
    extra["lat"] += 1.0  # same time, elsewhere: the first one in time order is kept
    nan = fixes.iloc[[11]].copy()
    nan["time"] = pd.NaT
    track, _ = resample_all(pd.concat([fixes, extra, nan], ignore_index=True))
    ref, _ = resample_all(fixes)
    pd.testing.assert_frame_equal(track, ref)


def test_empty_results():
    t = np.arange(0, 10) * HOUR
    track, dropped = resample_all(_fixes(t, np.zeros(10), np.zeros(10), flag=4))
    assert track.empty and dropped == [] and list(track.columns) == list(RESAMPLED_COLUMNS)
    track, dropped = resample_all(_fixes(t, np.zeros(10), np.linspace(0, 0.1, 10)))
    assert track.empty and [d["reason"] for d in dropped] == ["too_short"]
    with pytest.raises(ValueError, match="qc_flag"):
        resample_all(_fixes(t, np.zeros(10), np.zeros(10)).drop(columns="qc_flag"))
    # a segment between two grid times
    short = _fixes([600.0, 1200.0], [0.0, 0.0], [0.0, 0.001])
    track, dropped = resample_all(short, ResampleConfig(min_segment_days=0.0))
    assert track.empty and dropped[0]["reason"] == "no_grid_time"
    # a lone fix on a grid time, next to a kept segment
    t = np.r_[0.0, 20 * HOUR + np.arange(0, 30) * HOUR]
    track, dropped = resample_all(_fixes(t, np.zeros(t.size), np.linspace(0, 0.1, t.size)),
                                  ResampleConfig(min_segment_days=0.0))
    assert [d["reason"] for d in dropped] == ["single_fix"]
    assert len(track) == 30 and track["segment"].unique().tolist() == [0]


def test_segment_xy():
    t = _irregular_times(4, seed=6)
    lat, lon, _ = _circle(t, 179.99, 87.0, radius_m=3000.0)
    track, _ = resample_all(_fixes(t, lat, lon))
    xy = segment_xy(track)
    lon0, lat0 = xy.projection
    dist = geodesy.inverse(lon0, lat0, track["lon"], track["lat"]).distance_m
    np.testing.assert_allclose(np.hypot(xy.x_m, xy.y_m), dist, rtol=0, atol=1e-6)
    assert xy.max_scale_error < 1e-6
    assert np.hypot(xy.x_m, xy.y_m).max() < 3100.0  # centred on the loop
    two = pd.concat([track.assign(segment=0), track.assign(segment=1)])
    with pytest.raises(ValueError, match="one segment"):
        segment_xy(two)


def test_configuration_section():
    config = config_from_dict({"resample": {"max_gap_h": 8, "interpolator": "linear"}})
    assert config.resample.max_gap_h == 8.0 and config.resample.interpolator == "linear"
    assert Config().resample == ResampleConfig()
    with pytest.raises(ConfigError, match="resample.interpolator"):
        config_from_dict({"resample": {"interpolator": "akima"}})
    with pytest.raises(ConfigError, match="resample.step_h"):
        Config().replace("resample", step_h=0.0)
    with pytest.raises(ConfigError, match="resample.max_gap_h"):
        config_from_dict({"resample": {"max_gap_h": "12"}})


def test_chunk_joins_do_not_show():
    # random walks cut into many tiny projection chunks (2 km of path, then
    # halved) against the same tracks in one projection: the chunks' splines
    # agree to well below the GPS noise where they meet (module notes)
    rng = np.random.default_rng(1)
    for _ in range(10):
        n = int(rng.integers(5, 300))
        dt = rng.uniform(600.0, 7200.0, n)
        dt[rng.random(n) < 0.05] *= rng.uniform(2.0, 6.0)
        t = np.cumsum(dt)
        lat = rng.uniform(-80.0, 80.0) + np.cumsum(rng.normal(0.0, 0.005, n))
        lon = rng.uniform(-180.0, 180.0) + np.cumsum(rng.normal(0.0, 0.008, n))
        lon = (lon + 180.0) % 360.0 - 180.0
        fixes = _fixes(t, lat, lon)
        small, _ = resample_all(fixes, ResampleConfig(min_segment_days=0.0,
                                                      projection_radius_km=2.0))
        whole, _ = resample_all(fixes, ResampleConfig(min_segment_days=0.0))
        assert len(small) == len(whole)
        if len(small):
            d = geodesy.inverse(small["lon"], small["lat"], whole["lon"], whole["lat"])
            assert d.distance_m.max() < 1.0
            np.testing.assert_allclose(small["u"], whole["u"], atol=1e-3)
            np.testing.assert_allclose(small["v"], whole["v"], atol=1e-3)
