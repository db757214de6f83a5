"""The local azimuthal equidistant projection (driftloop.geodesy).

External check values: PROJ's ``+proj=aeqd +ellps=WGS84`` through pyproj, and
GeographicLib (Geodesic.WGS84, a reference implementation of Karney 2013)
for distances, azimuths and the reduced length m12.
"""

from __future__ import annotations

import numpy as np
import pytest
from geographiclib.geodesic import Geodesic

from driftloop import geodesy
from driftloop.constants import EARTH_MEAN_RADIUS_M

WGS84 = Geodesic.WGS84

CENTRES = {
    "mid-latitude": (-38.5, 43.0),
    "antimeridian": (179.95, -20.0),
    "equator": (0.0, 0.0),
    "poleward of 85": (60.0, 86.5),
    "near the north pole": (-100.0, 89.99),
    "south pole": (0.0, -90.0),
}


def _points_around(lon0, lat0, max_m, n=400, seed=0):
    """Points at known distance and azimuth from the centre (GeographicLib Direct)."""
    rng = np.random.default_rng(seed)
    azi = rng.uniform(-180.0, 180.0, n)
    dist = max_m * np.sqrt(rng.uniform(0.0, 1.0, n))
    dist[:4] = [0.0, 1e-3, max_m, max_m]
    out = [WGS84.Direct(lat0, lon0, a, s) for a, s in zip(azi, dist, strict=True)]
    lon = np.array([o["lon2"] for o in out])
    lat = np.array([o["lat2"] for o in out])
    return lon, lat, azi, dist, np.array([o["azi2"] for o in out])


def _metres_apart(lon1, lat1, lon2, lat2):
    return geodesy.inverse(lon1, lat1, lon2, lat2).distance_m


def _angle_diff(a, b):
    return np.abs((np.asarray(a) - np.asarray(b) + 180.0) % 360.0 - 180.0)


@pytest.mark.parametrize("where", list(CENTRES))
def test_geodesic_method_is_projs_aeqd(where):
    lon0, lat0 = CENTRES[where]
    lon, lat, azi, dist, _ = _points_around(lon0, lat0, 150e3)
    proj = geodesy.LocalProjection(lon0, lat0)
    x_ref, y_ref = proj.to_pyproj()(lon, lat)  # PROJ aeqd
    p = proj.forward(lon, lat)
    np.testing.assert_allclose(p.x_m, x_ref, rtol=0, atol=1e-6)
    np.testing.assert_allclose(p.y_m, y_ref, rtol=0, atol=1e-6)
    # the defining property: distance from the centre exact (GeographicLib s12, 1 mm)
    np.testing.assert_allclose(np.hypot(p.x_m, p.y_m), dist, rtol=0, atol=1e-3)


@pytest.mark.parametrize("where", list(CENTRES))
def test_conformal_method_is_within_a_millimetre_of_proj(where):
    lon0, lat0 = CENTRES[where]
    lon, lat, _, dist, _ = _points_around(lon0, lat0, 150e3, seed=1)
    x_ref, y_ref = geodesy.LocalProjection(lon0, lat0).to_pyproj()(lon, lat)  # PROJ aeqd
    p = geodesy.aeqd_forward(lon, lat, lon0, lat0, method="conformal")
    err = np.hypot(p.x_m - x_ref, p.y_m - y_ref)
    assert err.max() < 1.2e-3  # 1.1 mm at 150 km (module notes)
    assert err[dist < 100e3].max() < 0.25e-3
    assert err[dist < 20e3].max() < 1e-6


@pytest.mark.parametrize("method", ["geodesic", "conformal"])
@pytest.mark.parametrize("where", list(CENTRES))
def test_round_trip(method, where):
    lon0, lat0 = CENTRES[where]
    lon, lat, _, _, _ = _points_around(lon0, lat0, 150e3, seed=2)
    p = geodesy.aeqd_forward(lon, lat, lon0, lat0, method=method)
    back = geodesy.aeqd_inverse(p.x_m, p.y_m, lon0, lat0, method=method)
    assert _metres_apart(lon, lat, back.lon_deg, back.lat_deg).max() < 1e-7
    assert np.all((back.lon_deg >= -180.0) & (back.lon_deg < 180.0))


@pytest.mark.parametrize("method", ["geodesic", "conformal"])
@pytest.mark.parametrize("where", list(CENTRES))
def test_radial_azimuth_is_the_geodesic_azimuth(method, where):
    lon0, lat0 = CENTRES[where]
    lon, lat, _, dist, azi2 = _points_around(lon0, lat0, 150e3, seed=3)
    p = geodesy.aeqd_forward(lon, lat, lon0, lat0, method=method)
    back = geodesy.aeqd_inverse(p.x_m, p.y_m, lon0, lat0, method=method)
    far = dist > 1.0  # at the centre the radial direction is a convention
    tol = 1e-9 if method == "geodesic" else 1e-6  # GeographicLib azi2
    assert _angle_diff(back.radial_azimuth_deg[far], azi2[far]).max() < tol


def test_inverse_conformal_latitude_reaches_double_precision():
    # one Newton step from tau' / (1 - e^2) (Karney 2011); every latitude
    lat = np.linspace(-90.0, 90.0, 200_001)
    tau = np.tan(np.radians(lat))
    taup, _ = geodesy._tau_prime(tau)
    back = np.degrees(np.arctan(geodesy._tau_from_tau_prime(taup)))
    assert np.abs(back - lat).max() < 1e-13


def test_scale_error_bound():
    # (r/R)^2 / 6 to leading order; 1e-4 allows 156 km (module notes)
    assert float(geodesy.aeqd_scale_error(150e3)) == pytest.approx(
        (150e3 / EARTH_MEAN_RADIUS_M) ** 2 / 6, rel=1e-3)
    assert float(geodesy.aeqd_scale_error(geodesy.AEQD_MAX_RADIUS_M)) < 1e-4
    assert geodesy.aeqd_max_radius(1e-4) == pytest.approx(156.06e3, rel=1e-3)
    assert float(geodesy.aeqd_scale_error(0.0)) == 0.0


@pytest.mark.parametrize("where", ["mid-latitude", "poleward of 85"])
def test_transverse_scale_is_s_over_m12(where):
    # the derivation behind projected_to_east_north: across the radial line
    # PROJ's aeqd stretches by s / m12 (m12 = reduced length, GeographicLib)
    lon0, lat0 = CENTRES[where]
    proj = geodesy.LocalProjection(lon0, lat0)
    for s, azi in [(150e3, 30.0), (80e3, -120.0)]:
        g = WGS84.Direct(lat0, lon0, azi, s, Geodesic.STANDARD | Geodesic.REDUCEDLENGTH)
        ds = 1.0  # 1 m step across the geodesic at its end point
        side = WGS84.Direct(g["lat2"], g["lon2"], g["azi2"] + 90.0, ds)
        a = proj.forward(g["lon2"], g["lat2"])
        b = proj.forward(side["lon2"], side["lat2"])
        stretch = float(np.hypot(b.x_m - a.x_m, b.y_m - a.y_m)) / ds
        assert stretch == pytest.approx(s / g["m12"], abs=2e-8)
        # the spherical formula used for the velocity conversion
        assert stretch - 1.0 == pytest.approx(float(geodesy.aeqd_scale_error(s)), rel=0.02)


@pytest.mark.parametrize("method", ["geodesic", "conformal"])
@pytest.mark.parametrize("where", list(CENTRES))
def test_projected_vectors_turn_into_east_north(method, where):
    # a 1-cm move along a known azimuth, seen in the projection, must come
    # back as (sin b, cos b) in east/north
    lon0, lat0 = CENTRES[where]
    lon, lat, _, dist, _ = _points_around(lon0, lat0, 150e3, n=60, seed=4)
    rng = np.random.default_rng(9)
    bearing = rng.uniform(-180.0, 180.0, lon.size)
    step = 0.01
    moved = geodesy.forward(lon, lat, bearing, step)
    a = geodesy.aeqd_forward(lon, lat, lon0, lat0, method=method)
    b = geodesy.aeqd_forward(moved.lon_deg, moved.lat_deg, lon0, lat0, method=method)
    back = geodesy.aeqd_inverse(a.x_m, a.y_m, lon0, lat0, method=method)
    vel = geodesy.projected_to_east_north(a.x_m, a.y_m, (b.x_m - a.x_m) / step,
                                          (b.y_m - a.y_m) / step, back.radial_azimuth_deg, lat0)
    ok = np.abs(lat) < 89.9999  # east/north are undefined at the pole itself
    np.testing.assert_allclose(vel.u_m_s[ok], np.sin(np.radians(bearing[ok])), atol=1e-6)
    np.testing.assert_allclose(vel.v_m_s[ok], np.cos(np.radians(bearing[ok])), atol=1e-6)


def test_projection_across_the_antimeridian_is_continuous():
    lon0, lat0 = 179.99, 10.0
    lon = np.array([179.9, 179.99, -179.99, -179.9])
    x, y = geodesy.aeqd_forward(lon, np.full(4, lat0), lon0, lat0)
    assert np.all(np.diff(x) > 0)  # eastward, no jump of 360 degrees
    expected = [WGS84.Inverse(lat0, lon0, lat0, lo)["s12"] for lo in lon]
    np.testing.assert_allclose(np.abs(x), expected, rtol=0, atol=0.5)  # y != 0 off the parallel


def test_track_centre():
    lon0, lat0 = geodesy.track_centre([179.5, -179.5, 179.8, -179.8], [-5.0, -5.0, -4.0, -4.0])
    assert abs(abs(lon0) - 180.0) < 1e-9 and lat0 == pytest.approx(-4.5, abs=0.01)
    # around the pole: the centre is the pole, not the mean of the longitudes
    lon0, lat0 = geodesy.track_centre([0.0, 90.0, 180.0, -90.0], [89.0] * 4)
    assert lat0 == pytest.approx(90.0, abs=1e-9)
    with pytest.raises(ValueError, match="finite"):
        geodesy.track_centre([np.nan], [np.nan])
    with pytest.raises(ValueError, match="cancel"):
        geodesy.track_centre([0.0, 180.0], [0.0, 0.0])


def test_proj_string_and_methods():
    proj = geodesy.LocalProjection(-38.5, 43.0)
    assert proj.proj_string.startswith("+proj=aeqd +lat_0=43.0 +lon_0=-38.5 +ellps=WGS84")
    with pytest.raises(ValueError, match="method"):
        proj.forward(0.0, 0.0, method="sphere")
    p = proj.inverse(0.0, 0.0)
    assert float(p.lon_deg) == pytest.approx(-38.5) and float(p.lat_deg) == pytest.approx(43.0)
    nan = geodesy.aeqd_forward([np.nan, -38.4], [43.0, 43.0], -38.5, 43.0)
    assert np.isnan(nan.x_m[0]) and np.isfinite(nan.x_m[1])
