"""Geodesics on the WGS 84 ellipsoid: distances, azimuths and destinations.

Every distance and azimuth in driftloop comes from here.  The geodesic
problems are solved with :class:`pyproj.Geod`, which wraps the C library by
Karney that implements

    Karney, C. F. F. (2013), "Algorithms for geodesics", *J. Geodesy* 87,
    43-55, doi:10.1007/s00190-012-0578-z.

Those algorithms are accurate to about 15 nm on WGS 84 and converge for
every pair of points, nearly antipodal ones included (the classical
Vincenty iteration can fail there).

The **inverse problem** takes two points and returns the geodesic distance
s12 and the azimuths alpha1 at the first point and alpha2 at the second; the
**direct problem** takes a point, an azimuth and a distance and returns the
end point.  Following Karney (2013), alpha2 is the *forward* azimuth at the
second point (the direction in which the geodesic continues), not the
azimuth back to the first point, which is alpha2 +/- 180 degrees.

Conventions used throughout: longitude and latitude in degrees (longitude
east, latitude north, WGS 84), azimuths in degrees clockwise from north,
distances in metres.  Longitudes need not be wrapped: a leg from 179.9 E to
-179.9 E is the short geodesic across the antimeridian.  Inputs broadcast
against each other like NumPy arrays; NaN in gives NaN out.
"""

from __future__ import annotations

from typing import NamedTuple

import numpy as np
import pyproj
from numpy.typing import ArrayLike

__all__ = ["GEOD", "ForwardResult", "InverseResult", "forward", "inverse", "leg_distances"]

#: The WGS 84 ellipsoid (a = 6378137 m, 1/f = 298.257223563; NGA.STND.0036).
GEOD = pyproj.Geod(ellps="WGS84")


class InverseResult(NamedTuple):
    """Solution of the inverse geodesic problem.

    Attributes
    ----------
    azimuth1_deg : numpy.ndarray
        Azimuth of the geodesic at the first point, degrees clockwise from
        north, in (-180, 180].
    azimuth2_deg : numpy.ndarray
        Forward azimuth of the geodesic at the second point, degrees.
    distance_m : numpy.ndarray
        Geodesic distance, metres.
    """

    azimuth1_deg: np.ndarray
    azimuth2_deg: np.ndarray
    distance_m: np.ndarray


class ForwardResult(NamedTuple):
    """Solution of the direct geodesic problem.

    Attributes
    ----------
    lon_deg : numpy.ndarray
        Longitude of the end point, degrees east, in [-180, 180].
    lat_deg : numpy.ndarray
        Latitude of the end point, degrees north.
    azimuth2_deg : numpy.ndarray
        Forward azimuth of the geodesic at the end point, degrees.
    """

    lon_deg: np.ndarray
    lat_deg: np.ndarray
    azimuth2_deg: np.ndarray


def _flat_float(*values: ArrayLike) -> tuple[tuple[int, ...], list[np.ndarray]]:
    arrays = np.broadcast_arrays(*(np.asarray(v, dtype=float) for v in values))
    shape = arrays[0].shape
    return shape, [np.ascontiguousarray(a).ravel() for a in arrays]


def inverse(lon1: ArrayLike, lat1: ArrayLike, lon2: ArrayLike, lat2: ArrayLike) -> InverseResult:
    """Solve the inverse geodesic problem between two sets of points.

    Parameters
    ----------
    lon1, lat1 : array_like
        First points: longitude, degrees east; latitude, degrees north.
    lon2, lat2 : array_like
        Second points, same units; broadcast against the first.

    Returns
    -------
    InverseResult
        ``azimuth1_deg``, ``azimuth2_deg`` (forward azimuth at the second
        point) and ``distance_m``, each of the broadcast shape.

    Notes
    -----
    Karney (2013), *J. Geodesy* 87, 43-55, as implemented by PROJ's
    ``geod_inverse`` through :meth:`pyproj.Geod.inv`.

    Examples
    --------
    One degree of longitude along the equator:

    >>> result = inverse(0.0, 0.0, 1.0, 0.0)
    >>> print(f"{float(result.distance_m):.3f} m, azimuth {float(result.azimuth1_deg):.1f}")
    111319.491 m, azimuth 90.0
    """
    shape, (x1, y1, x2, y2) = _flat_float(lon1, lat1, lon2, lat2)
    az1, az2, dist = GEOD.inv(x1, y1, x2, y2, return_back_azimuth=False)
    return InverseResult(
        np.asarray(az1, dtype=float).reshape(shape),
        np.asarray(az2, dtype=float).reshape(shape),
        np.asarray(dist, dtype=float).reshape(shape),
    )


def forward(
    lon: ArrayLike, lat: ArrayLike, azimuth_deg: ArrayLike, distance_m: ArrayLike
) -> ForwardResult:
    """Solve the direct geodesic problem: where a geodesic of given length ends.

    Parameters
    ----------
    lon, lat : array_like
        Start points: longitude, degrees east; latitude, degrees north.
    azimuth_deg : array_like
        Azimuth at the start, degrees clockwise from north.
    distance_m : array_like
        Length of the geodesic, metres (negative goes backwards).

    Returns
    -------
    ForwardResult
        ``lon_deg``, ``lat_deg`` and ``azimuth2_deg`` (forward azimuth at
        the end point), each of the broadcast shape.

    Notes
    -----
    Karney (2013), *J. Geodesy* 87, 43-55, through :meth:`pyproj.Geod.fwd`.

    Examples
    --------
    >>> end = forward(0.0, 0.0, 0.0, 10_001_965.729)  # quarter meridian, WGS 84
    >>> print(f"{float(end.lat_deg):.6f}")
    90.000000
    """
    shape, (x, y, az, s) = _flat_float(lon, lat, azimuth_deg, distance_m)
    lon2, lat2, az2 = GEOD.fwd(x, y, az, s, return_back_azimuth=False)
    return ForwardResult(
        np.asarray(lon2, dtype=float).reshape(shape),
        np.asarray(lat2, dtype=float).reshape(shape),
        np.asarray(az2, dtype=float).reshape(shape),
    )


def leg_distances(lon: ArrayLike, lat: ArrayLike) -> np.ndarray:
    """Geodesic distance between consecutive points of a track.

    Parameters
    ----------
    lon, lat : array_like
        One-dimensional track: longitude, degrees east; latitude, degrees
        north; same length n.

    Returns
    -------
    numpy.ndarray
        n - 1 distances in metres; element k is the leg from point k to
        point k + 1.  Empty for fewer than two points.

    Raises
    ------
    ValueError
        If ``lon`` and ``lat`` are not one-dimensional arrays of one length.

    Examples
    --------
    >>> print(leg_distances([0.0, 0.0, 0.0], [0.0, 1.0, 2.0]).round(1))
    [110574.4 110575.1]
    """
    lon = np.asarray(lon, dtype=float)
    lat = np.asarray(lat, dtype=float)
    if lon.ndim != 1 or lon.shape != lat.shape:
        raise ValueError(
            f"lon and lat must be 1-D arrays of one length, got shapes {lon.shape} and {lat.shape}"
        )
    if lon.size < 2:
        return np.empty(0, dtype=float)
    return inverse(lon[:-1], lat[:-1], lon[1:], lat[1:]).distance_m
