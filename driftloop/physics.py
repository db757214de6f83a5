"""Inertial physics on the rotating Earth: f, the inertial period and radius.

A parcel coasting without forcing on an f-plane obeys dZ/dt = -i f Z
(Z = u + i v), so it turns on a circle of radius R = |V / f| with period
T = 2 pi / |f| = pi / (Omega |sin(lat)|), half a pendulum day, clockwise in
the northern hemisphere and anticlockwise in the southern (anticyclonic;
AMS Glossary of Meteorology, "inertial oscillation").  Omega is the WGS 84
rotation rate :data:`driftloop.constants.EARTH_ROTATION_RATE_RAD_S`.

Near-inertial motion in a background flow of relative vorticity zeta has
the effective frequency f + zeta / 2 (Kunze 1985, "Near-inertial wave
propagation in geostrophic shear", J. Phys. Oceanogr. 15), so observed
periods spread around T by the local Rossby number.
"""

from __future__ import annotations

import numpy as np

from driftloop.constants import EARTH_ROTATION_RATE_RAD_S, TIDAL_PERIODS_H

__all__ = [
    "coriolis_parameter",
    "inertial_period_s",
    "inertial_radius_m",
    "nearest_tide",
]

_DEG = np.pi / 180.0


def coriolis_parameter(lat: np.ndarray | float) -> np.ndarray:
    """Return the Coriolis parameter f = 2 Omega sin(lat).

    Parameters
    ----------
    lat : array_like
        Latitude, degrees north.

    Returns
    -------
    numpy.ndarray
        f (rad/s), negative in the southern hemisphere.

    Examples
    --------
    >>> print(f"{coriolis_parameter(45.0):.6e}")
    1.031261e-04
    """
    return 2.0 * EARTH_ROTATION_RATE_RAD_S * np.sin(np.asarray(lat, dtype=float) * _DEG)


def inertial_period_s(lat: np.ndarray | float) -> np.ndarray:
    """Return the inertial period 2 pi / |f| = pi / (Omega |sin(lat)|).

    Parameters
    ----------
    lat : array_like
        Latitude, degrees north.

    Returns
    -------
    numpy.ndarray
        Period (s); infinite on the equator.

    Examples
    --------
    >>> print(f"{inertial_period_s(30.0) / 3600:.4f} h")
    23.9345 h
    """
    f = np.abs(coriolis_parameter(lat))
    with np.errstate(divide="ignore"):
        return np.where(f > 0, 2.0 * np.pi / np.where(f > 0, f, 1.0), np.inf)


def inertial_radius_m(speed_m_s: np.ndarray | float, lat: np.ndarray | float) -> np.ndarray:
    """Return the radius |V / f| of an inertial circle.

    Parameters
    ----------
    speed_m_s : array_like
        Speed of the oscillating motion, V (m/s).
    lat : array_like
        Latitude, degrees north.

    Returns
    -------
    numpy.ndarray
        Radius (m); infinite on the equator.

    Examples
    --------
    >>> print(f"{inertial_radius_m(0.3, 45.0) / 1000:.2f} km")
    2.91 km
    """
    f = np.abs(coriolis_parameter(lat))
    speed = np.abs(np.asarray(speed_m_s, dtype=float))
    with np.errstate(divide="ignore", invalid="ignore"):
        return np.where(f > 0, speed / np.where(f > 0, f, 1.0), np.inf)


def nearest_tide(period_s: float) -> tuple[str, float]:
    """Return the main tidal constituent nearest in period and the relative distance.

    Parameters
    ----------
    period_s : float
        An oscillation period (s).

    Returns
    -------
    tuple
        ``(name, |period / tide_period - 1|)`` for the nearest of M2, S2, K1
        and O1 (periods from NOAA CO-OPS constituent speeds).

    Examples
    --------
    >>> name, off = nearest_tide(12.5 * 3600)
    >>> name, round(off, 4)
    ('M2', 0.0064)
    """
    best = min(TIDAL_PERIODS_H.items(), key=lambda kv: abs(np.log(period_s / (kv[1] * 3600))))
    return best[0], abs(period_s / (best[1] * 3600.0) - 1.0)
