"""Geodesics on WGS 84 against GeographicLib and Karney (2013)."""

from __future__ import annotations

import numpy as np
import pytest
from geographiclib.geodesic import Geodesic

from driftloop import geodesy

WGS84 = Geodesic.WGS84

# Karney (2013), "Algorithms for geodesics", J. Geodesy 87, 43-55, worked
# example of the direct problem: phi1 = 40 deg, alpha1 = 30 deg,
# s12 = 10 000 km.  The expected values below were recalled from memory and
# then checked against GeographicLib 2.1 (Geodesic.WGS84.Direct), which
# agrees with them to all the digits given (1e-11 deg).
KARNEY_LAT2 = 41.79331020506
KARNEY_LON12 = 137.84490004377
KARNEY_AZI2 = 149.09016931807


def test_direct_matches_karney_worked_example():
    end = geodesy.forward(0.0, 40.0, 30.0, 10_000e3)
    assert float(end.lat_deg) == pytest.approx(KARNEY_LAT2, abs=1e-10)
    assert float(end.lon_deg) == pytest.approx(KARNEY_LON12, abs=1e-10)
    assert float(end.azimuth2_deg) == pytest.approx(KARNEY_AZI2, abs=1e-10)
    reference = WGS84.Direct(40.0, 0.0, 30.0, 10_000e3)
    assert reference["lat2"] == pytest.approx(KARNEY_LAT2, abs=1e-11)
    assert reference["lon2"] == pytest.approx(KARNEY_LON12, abs=1e-11)
    assert reference["azi2"] == pytest.approx(KARNEY_AZI2, abs=1e-11)


def test_inverse_of_the_worked_example_returns_its_inputs():
    result = geodesy.inverse(0.0, 40.0, KARNEY_LON12, KARNEY_LAT2)
    # 1e-11 deg of rounding in the end point is ~1 mm of distance
    assert float(result.distance_m) == pytest.approx(10_000e3, abs=5e-3)
    assert float(result.azimuth1_deg) == pytest.approx(30.0, abs=1e-9)
    assert float(result.azimuth2_deg) == pytest.approx(KARNEY_AZI2, abs=1e-9)


def test_inverse_agrees_with_geographiclib_on_random_pairs():
    rng = np.random.default_rng(42)
    n = 200
    lat1 = rng.uniform(-89, 89, n)
    lat2 = rng.uniform(-89, 89, n)
    lon1 = rng.uniform(-180, 180, n)
    lon2 = rng.uniform(-180, 180, n)
    result = geodesy.inverse(lon1, lat1, lon2, lat2)
    for k in range(n):
        ref = WGS84.Inverse(lat1[k], lon1[k], lat2[k], lon2[k])
        # PROJ and GeographicLib implement the same algorithm: agreement to
        # well below the 15 nm accuracy quoted by Karney (2013), here 1e-6 m
        assert result.distance_m[k] == pytest.approx(ref["s12"], abs=1e-6)
        assert _angle_diff(result.azimuth1_deg[k], ref["azi1"]) < 1e-9
        assert _angle_diff(result.azimuth2_deg[k], ref["azi2"]) < 1e-9


def test_forward_agrees_with_geographiclib():
    rng = np.random.default_rng(7)
    n = 100
    lat = rng.uniform(-85, 85, n)
    lon = rng.uniform(-180, 180, n)
    azi = rng.uniform(-180, 180, n)
    dist = rng.uniform(0, 15_000e3, n)
    end = geodesy.forward(lon, lat, azi, dist)
    for k in range(n):
        ref = WGS84.Direct(lat[k], lon[k], azi[k], dist[k])
        assert end.lat_deg[k] == pytest.approx(ref["lat2"], abs=1e-9)
        assert _angle_diff(end.lon_deg[k], ref["lon2"]) < 1e-9
        assert _angle_diff(end.azimuth2_deg[k], ref["azi2"]) < 1e-9


def test_nearly_antipodal_inverse_converges():
    # Vincenty's iteration fails near antipodes; Karney's algorithm does not.
    result = geodesy.inverse(0.0, 0.5, 179.7, -0.5)
    ref = WGS84.Inverse(0.5, 0.0, -0.5, 179.7)
    assert np.isfinite(result.distance_m)
    assert float(result.distance_m) == pytest.approx(ref["s12"], abs=1e-6)


def test_antimeridian_leg_is_short():
    # 0.2 deg of longitude across 180 at the equator, not 359.8 deg
    result = geodesy.inverse(179.9, 0.0, -179.9, 0.0)
    ref = WGS84.Inverse(0.0, 179.9, 0.0, -179.9)
    assert float(result.distance_m) == pytest.approx(ref["s12"], abs=1e-6)
    assert float(result.distance_m) == pytest.approx(22_263.898, abs=1e-3)
    assert float(result.azimuth1_deg) == pytest.approx(90.0, abs=1e-9)
    legs = geodesy.leg_distances([179.95, -179.95, 180.0 - 360.0 + 0.1], [10.0, 10.0, 10.0])
    assert np.all(legs < 12e3)


def test_longitude_convention_does_not_matter():
    a = geodesy.inverse(-10.0, 50.0, 20.0, 55.0)
    b = geodesy.inverse(350.0, 50.0, 380.0, 55.0)
    np.testing.assert_allclose(a.distance_m, b.distance_m, rtol=0, atol=1e-6)
    np.testing.assert_allclose(a.azimuth1_deg, b.azimuth1_deg, rtol=0, atol=1e-9)


def test_forward_then_inverse_round_trip():
    lon = np.array([-179.5, 0.0, 120.0])
    lat = np.array([-60.0, 0.0, 45.0])
    end = geodesy.forward(lon, lat, np.array([45.0, -90.0, 170.0]), np.array([1e3, 5e5, 7e6]))
    back = geodesy.inverse(lon, lat, end.lon_deg, end.lat_deg)
    np.testing.assert_allclose(back.distance_m, [1e3, 5e5, 7e6], rtol=0, atol=1e-6)
    np.testing.assert_allclose(back.azimuth1_deg, [45.0, -90.0, 170.0], rtol=0, atol=1e-9)
    np.testing.assert_allclose(back.azimuth2_deg, end.azimuth2_deg, rtol=0, atol=1e-9)


@pytest.mark.parametrize("shape", [(), (5,), (2, 3)])
def test_vectorised_shapes(shape):
    lon1 = np.full(shape, 10.0)
    lat2 = np.full(shape, 1.0)
    result = geodesy.inverse(lon1, 0.0, 10.0, lat2)
    assert isinstance(result, geodesy.InverseResult)
    for part in result:
        assert isinstance(part, np.ndarray)
        assert part.shape == shape
    np.testing.assert_allclose(result.distance_m, WGS84.Inverse(0, 10, 1, 10)["s12"], atol=1e-6)
    end = geodesy.forward(lon1, 0.0, 0.0, 1000.0)
    assert isinstance(end, geodesy.ForwardResult)
    assert all(part.shape == shape for part in end)


def test_broadcasting_one_point_against_many():
    lats = np.linspace(-80, 80, 9)
    result = geodesy.inverse(0.0, 0.0, 0.0, lats)
    assert result.distance_m.shape == (9,)
    assert result.distance_m[4] == 0.0
    np.testing.assert_allclose(result.distance_m[::-1], result.distance_m, rtol=1e-12)


def test_nan_propagates():
    result = geodesy.inverse([0.0, np.nan], [0.0, 0.0], [1.0, 1.0], [0.0, 0.0])
    assert np.isfinite(result.distance_m[0])
    assert np.isnan(result.distance_m[1])


def test_leg_distances():
    lon = np.array([0.0, 0.1, 0.1, -0.2])
    lat = np.array([0.0, 0.0, 0.3, 0.3])
    legs = geodesy.leg_distances(lon, lat)
    expected = [WGS84.Inverse(lat[k], lon[k], lat[k + 1], lon[k + 1])["s12"] for k in range(3)]
    np.testing.assert_allclose(legs, expected, rtol=0, atol=1e-6)
    assert geodesy.leg_distances([1.0], [2.0]).shape == (0,)
    assert geodesy.leg_distances([], []).shape == (0,)
    with pytest.raises(ValueError, match="1-D"):
        geodesy.leg_distances(np.zeros((2, 2)), np.zeros((2, 2)))
    with pytest.raises(ValueError, match="shapes"):
        geodesy.leg_distances([0.0, 1.0], [0.0])


def _angle_diff(a: float, b: float) -> float:
    return abs((a - b + 180.0) % 360.0 - 180.0)
