"""Inertial physics against outside references."""

import math

import numpy as np
import pytest

from driftloop.constants import EARTH_ROTATION_RATE_RAD_S, TIDAL_PERIODS_H
from driftloop.physics import (
    coriolis_parameter,
    inertial_period_s,
    inertial_radius_m,
    nearest_tide,
)

gsw = pytest.importorskip("gsw")


@pytest.mark.parametrize("lat", [-75.0, -30.0, -5.0, 0.0, 13.0, 35.0, 45.5, 60.0, 90.0])
def test_f_matches_teos10(lat):
    # TEOS-10 GSW-Python gsw.f(lat) = 2 * 7.292115e-5 * sin(lat)
    assert float(coriolis_parameter(lat)) == pytest.approx(float(gsw.f(lat)), rel=1e-12, abs=1e-18)


@pytest.mark.parametrize(
    ("lat", "hours", "rel"),
    [
        # Textbook table of inertial periods (standard physical-oceanography
        # texts; values from memory, not checked against a printed table).
        (90.0, 11.97, 1e-3),
        (35.0, 20.87, 1e-3),
        (10.0, 68.93, 1e-3),
        # Half a pendulum day: ~16.9 h at 45.5 deg, ~2.2 days at 13 deg (common practice).
        (45.5, 16.9, 1e-2),
        (13.0, 2.2 * 24, 1e-2),
    ],
)
def test_inertial_period_against_tabulated_values(lat, hours, rel):
    assert float(inertial_period_s(lat)) / 3600 == pytest.approx(hours, rel=rel)
    assert float(inertial_period_s(-lat)) == float(inertial_period_s(lat))


def test_inertial_period_at_30_degrees_is_the_sidereal_day():
    # T(30 deg) = pi / (Omega / 2) = 2 pi / Omega, the sidereal day (derived; WGS 84 Omega)
    assert float(inertial_period_s(30.0)) == pytest.approx(2 * math.pi / EARTH_ROTATION_RATE_RAD_S)
    # and equals the K1 period to 1e-6 (NOAA CO-OPS constituent speed 15.0410686 deg/h)
    assert float(inertial_period_s(30.0)) / 3600 == pytest.approx(TIDAL_PERIODS_H["K1"], rel=1e-6)


def test_equator_has_no_inertial_period():
    assert np.isinf(inertial_period_s(0.0)) and np.isinf(inertial_radius_m(0.2, 0.0))


def test_inertial_radius_worked_example():
    # 0.3 m/s at 45 N -> 2.9 km (worked example: R = V / (2 Omega sin 45))
    assert float(inertial_radius_m(0.3, 45.0)) == pytest.approx(0.3 / float(gsw.f(45.0)), rel=1e-12)
    assert float(inertial_radius_m(0.3, 45.0)) == pytest.approx(2909, abs=1)


def test_f_plane_inertial_circle_from_the_slab_model():
    # Free slab motion dZ/dt = -i f Z: Z = V exp(-i f t); position
    # X = i V / f exp(-i f t), a circle of radius |V/f|, clockwise in the north.
    lat, speed = 40.0, 0.25
    f = float(coriolis_parameter(lat))
    t = np.linspace(0, 2 * float(inertial_period_s(lat)), 2001)
    dt = t[1] - t[0]
    z = np.empty(t.size, dtype=complex)
    z[0] = speed
    step = np.exp(-1j * f * dt)  # exact propagator of dZ/dt = -i f Z
    z[1:] = speed * step ** np.arange(1, t.size)
    x = np.concatenate([[0], np.cumsum((z[1:] + z[:-1]) / 2 * dt)])
    centre = x.mean()
    radius = np.abs(x - centre)
    assert radius.mean() == pytest.approx(float(inertial_radius_m(speed, lat)), rel=1e-3)
    turning = np.imag(np.conj(z[:-1]) * z[1:])
    assert (turning < 0).all()  # clockwise in the northern hemisphere (AMS Glossary)


def test_nearest_tide():
    assert nearest_tide(TIDAL_PERIODS_H["O1"] * 3600)[0] == "O1"
    name, off = nearest_tide(13.0 * 3600)
    assert name == "M2" and off == pytest.approx(13.0 / TIDAL_PERIODS_H["M2"] - 1)
