"""Velocities at the fixes from centred geodesic differences (driftloop.geodesy).

External check values: geodesic tracks from GeographicLib (Geodesic.WGS84.Line,
a reference implementation of Karney 2013); everything else is constructed
so that the exact answer is known (quadratic motion in the aeqd centred on
the fix, where the three-point formula must be exact).
"""

from __future__ import annotations

import numpy as np
import pytest
from geographiclib.geodesic import Geodesic

from driftloop import geodesy

WGS84 = Geodesic.WGS84
METHODS = ("geodesic", "conformal")


def _uneven_times(n: int, seed: int, lo_s: float = 1200.0, hi_s: float = 5400.0) -> np.ndarray:
    rng = np.random.default_rng(seed)
    return np.r_[0.0, np.cumsum(rng.uniform(lo_s, hi_s, n - 1))]


def _geodesic_track(lat1, lon1, azi1, speed, t):
    """Positions and forward azimuths along a geodesic at constant speed (GeographicLib)."""
    line = WGS84.Line(lat1, lon1, azi1)
    pos = [line.Position(speed * float(tk)) for tk in t]
    return (np.array([p["lon2"] for p in pos]), np.array([p["lat2"] for p in pos]),
            np.array([p["azi2"] for p in pos]))


def _angle_diff(a, b):
    return np.abs((np.asarray(a) - np.asarray(b) + 180.0) % 360.0 - 180.0)


@pytest.mark.parametrize("method", METHODS)
@pytest.mark.parametrize(
    ("name", "lat1", "lon1", "azi1"),
    [
        ("mid-latitude", 43.0, -38.5, 57.0),
        ("across the antimeridian", -20.0, 179.2, 80.0),
        ("along the equator", 0.0, -10.0, 90.0),
        ("poleward of 85 degrees", 86.0, 120.0, 140.0),
        ("passing 29 m from the north pole", 89.9, 30.0, 0.15),
    ],
)
def test_constant_speed_geodesic_gives_that_speed(method, name, lat1, lon1, azi1):
    # GeographicLib Line at uneven times: speed 0.8 m/s exactly, direction
    # the geodesic's forward azimuth at each fix
    t = _uneven_times(60, seed=3)
    lon, lat, azi = _geodesic_track(lat1, lon1, azi1, 0.8, t)
    vel = geodesy.fix_velocities(t, lon, lat, method=method)
    speed = np.hypot(vel.u_m_s, vel.v_m_s)
    np.testing.assert_allclose(speed, 0.8, rtol=1e-6)
    direction = np.degrees(np.arctan2(vel.u_m_s, vel.v_m_s))
    assert _angle_diff(direction, azi).max() < 1e-6
    if name == "along the equator":
        assert np.abs(vel.v_m_s).max() < 1e-9
    if name == "across the antimeridian":
        assert lon.min() < -179 and lon.max() > 179  # the track does cross it
    if name.startswith("passing"):
        assert lat.max() > 89.99 and lat[-1] < 89.0  # over the pole and down the far side


def _quadratic_in_aeqd(lon0, lat0, times, v0, a0):
    """Points at x(t) = v0 t + a0 t^2 / 2 in the aeqd centred on (lon0, lat0)."""
    t = np.asarray(times, dtype=float)
    x = v0[0] * t + 0.5 * a0[0] * t**2
    y = v0[1] * t + 0.5 * a0[1] * t**2
    back = geodesy.aeqd_inverse(x, y, lon0, lat0)
    return back.lon_deg, back.lat_deg


@pytest.mark.parametrize("lon0, lat0", [(-38.5, 43.0), (179.99, -61.0), (10.0, 88.0)])
def test_uneven_centred_difference_is_exact_for_quadratic_motion(lon0, lat0):
    v0 = np.array([0.31, -0.17])
    a0 = np.array([4e-5, 6e-5])
    hm, hp = 2700.0, 800.0  # very uneven steps
    lon, lat = _quadratic_in_aeqd(lon0, lat0, [-hm, 0.0, hp], v0, a0)
    vel = geodesy.fix_velocities([-hm, 0.0, hp], lon, lat)
    assert vel.u_m_s[1] == pytest.approx(v0[0], rel=1e-9)
    assert vel.v_m_s[1] == pytest.approx(v0[1], rel=1e-9)


@pytest.mark.parametrize("end", ["first", "last"])
def test_one_sided_ends_are_exact_for_quadratic_motion(end):
    v0 = np.array([-0.2, 0.45])
    a0 = np.array([-5e-5, 3e-5])
    lon0, lat0 = 150.0, -35.0
    times = [0.0, 1100.0, 4000.0] if end == "first" else [-4000.0, -1100.0, 0.0]
    lon, lat = _quadratic_in_aeqd(lon0, lat0, times, v0, a0)
    vel = geodesy.fix_velocities(times, lon, lat)
    k = 0 if end == "first" else 2
    assert vel.u_m_s[k] == pytest.approx(v0[0], rel=1e-9)
    assert vel.v_m_s[k] == pytest.approx(v0[1], rel=1e-9)


def _circle_error(step_s: float, where: str) -> float:
    """Velocity error at one fix of a circle sampled with steps (step, 0.4 step)."""
    omega, radius = 1.0e-4, 3000.0
    if where == "centre":
        t = np.array([-step_s, 0.0, 0.4 * step_s])
        k = 1
    else:
        t = np.array([0.0, step_s, 1.4 * step_s])
        k = 0
    x = radius * np.cos(omega * t)
    y = radius * np.sin(omega * t)
    back = geodesy.aeqd_inverse(x - radius, y, -20.0, 35.0)  # fix at t = 0 is the centre
    vel = geodesy.fix_velocities(t, back.lon_deg, back.lat_deg)
    exact = np.array([0.0, radius * omega])
    return float(np.hypot(vel.u_m_s[k] - exact[0], vel.v_m_s[k] - exact[1]))


@pytest.mark.parametrize("where", ["centre", "end"])
def test_second_order_error_quarters_when_the_step_halves(where):
    errors = [_circle_error(h, where) for h in (2400.0, 1200.0, 600.0)]
    ratios = [errors[0] / errors[1], errors[1] / errors[2]]
    for ratio in ratios:
        assert 3.5 < ratio < 4.5, (errors, ratios)


def test_velocities_never_reach_across_segments():
    t = np.array([0.0, 3600.0, 7200.0, 10800.0, 14400.0, 18000.0])
    lon = np.array([0.0, 0.01, 0.02, 5.0, 5.01, 6.0])  # big jump between segments
    lat = np.zeros(6)
    seg = np.array([0, 0, 0, 1, 1, 2])
    vel = geodesy.fix_velocities(t, lon, lat, seg)
    # first segment: steady eastward, 0.01 deg per hour at the equator
    expected = geodesy.inverse(0.0, 0.0, 0.01, 0.0).distance_m / 3600.0
    np.testing.assert_allclose(vel.u_m_s[:3], expected, rtol=1e-6)
    # two-fix segment: d / h at both ends
    np.testing.assert_allclose(vel.u_m_s[3:5], expected, rtol=1e-6)
    # one-fix segment: undefined
    assert np.isnan(vel.u_m_s[5]) and np.isnan(vel.v_m_s[5])


def test_two_methods_agree():
    t = _uneven_times(40, seed=11)
    rng = np.random.default_rng(5)
    lon = np.cumsum(rng.normal(0, 0.01, 40)) + 179.95
    lat = np.cumsum(rng.normal(0, 0.01, 40)) + 70.0
    a = geodesy.fix_velocities(t, lon, lat, method="geodesic")
    b = geodesy.fix_velocities(t, lon, lat, method="conformal")
    np.testing.assert_allclose(a.u_m_s, b.u_m_s, rtol=0, atol=1e-9)
    np.testing.assert_allclose(a.v_m_s, b.v_m_s, rtol=0, atol=1e-9)


def test_bad_input_is_refused():
    with pytest.raises(ValueError, match="increase"):
        geodesy.fix_velocities([0.0, 10.0, 10.0], [0.0, 0.1, 0.2], [0.0, 0.0, 0.0])
    with pytest.raises(ValueError, match="1-D"):
        geodesy.fix_velocities([0.0, 1.0], [0.0], [0.0, 0.0])
    with pytest.raises(ValueError, match="method"):
        geodesy.fix_velocities([0.0, 1.0], [0.0, 0.0], [0.0, 0.1], method="degrees")
    empty = geodesy.fix_velocities([], [], [])
    assert empty.u_m_s.shape == (0,)
