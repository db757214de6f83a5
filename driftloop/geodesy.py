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

Local projection
----------------
Positions are interpolated and differentiated in a local **azimuthal
equidistant projection** (PROJ ``+proj=aeqd +ellps=WGS84``, see
:class:`LocalProjection`): a point at geodesic distance s and azimuth alpha1
from the centre maps to x = s sin(alpha1), y = s cos(alpha1) (east, north,
metres).  Distances and azimuths from the centre are exact; the map is
smooth everywhere within a hemisphere of the centre, poles and the
antimeridian included, because it never uses longitude differences.

*Distortion* (derived, sphere of radius R).  On the sphere the radial scale
of the aeqd is exactly 1 and the transverse scale is

    k(r) = (r/R) / sin(r/R) = 1 + (r/R)^2 / 6 + O((r/R)^4),

so lengths are wrong by at most (r/R)^2 / 6 and angles by about as much
(in radians) at distance r from the centre.  On the ellipsoid the
transverse scale is s / m12 (m12 the reduced length, Karney 2013), which
differs from the spherical value with R = sqrt(M0 N0), the Gaussian radius
at the centre, by a fraction e^2 (r/R) of the (r/R)^2 / 6 term.  Requiring
(r/R)^2 / 6 < eps gives r_max = R sqrt(6 eps): with R = 6371 km,
eps = 1e-4 gives r_max = 156 km.  :data:`AEQD_MAX_RADIUS_M` = 150 km keeps
the scale error below 9.3e-5 (:func:`aeqd_scale_error`).

*Evaluation.*  ``method="geodesic"`` solves the inverse (forward
projection) and direct (inverse projection) geodesic problems with
:data:`GEOD`; this is exactly what PROJ's ``aeqd`` does on the ellipsoid
(agreement to nanometres).  ``method="conformal"`` evaluates the same map
in closed form, three to four times faster: the ellipsoid is mapped
conformally onto the Gauss sphere of radius R = sqrt(M0 N0) that osculates
it at the centre latitude (the Gauss conformal sphere, first step of the
"double" oblique stereographic projection, EPSG method 9809, in IOGP
*Geomatics Guidance Note 7-2*; edition from memory), and the spherical aeqd
is taken on that sphere.  The Gauss map's scale differs from 1 only to
third order in the latitude difference, so the two agree to 1.1 mm at
150 km from the centre, 0.22 mm at 100 km and below a micrometre at 20 km
(tested against PROJ); each
method is its own exact inverse (round trip to nanometres).  The inverse of
the conformal latitude uses the Newton iteration of Karney, C. F. F.
(2011), "Transverse Mercator with an accuracy of a few nanometers",
*J. Geodesy* 85, 475-485, eqs (7)-(9).

Velocities
----------
:func:`fix_velocities` gives east/north velocities at the fixes from centred
geodesic differences, exact for motion that is quadratic in time in the
aeqd centred on the fix (see its Notes); :func:`projected_to_east_north`
rotates velocities from a local projection to the east/north frame at the
point.  East and north are undefined at a pole, and near one they turn
quickly with position: every velocity here is computed in a projection
(the aeqd centred on the fix, or the chunk's aeqd) and only turned into
east/north at the end, using the exact azimuth at the point.  Analyses
near the poles should prefer the projected components.
"""

from __future__ import annotations

from typing import NamedTuple

import numpy as np
import pyproj
from numpy.typing import ArrayLike

from driftloop.constants import EARTH_MEAN_RADIUS_M, WGS84_A_M, WGS84_E2

__all__ = [
    "AEQD_MAX_RADIUS_M",
    "GEOD",
    "ForwardResult",
    "InverseResult",
    "LocalProjection",
    "ProjectedPoints",
    "UnprojectedPoints",
    "Velocity",
    "aeqd_forward",
    "aeqd_inverse",
    "aeqd_max_radius",
    "aeqd_scale_error",
    "fix_velocities",
    "forward",
    "inverse",
    "leg_distances",
    "projected_to_east_north",
    "track_centre",
]

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


# --------------------------------------------------------------------------- local projection

#: Largest distance from a projection centre at which driftloop works in the
#: local aeqd (m): scale error (r/R)^2 / 6 < 9.3e-5 (module notes, *derived*).
AEQD_MAX_RADIUS_M = 150_000.0

_E = float(np.sqrt(WGS84_E2))
_ONE_MINUS_E2 = 1.0 - WGS84_E2
_METHODS = ("geodesic", "conformal")
#: Newton steps of the inverse conformal latitude.  From the start
#: tau'/(1 - e^2) one step already reaches 3e-14 degrees at every latitude
#: (checked in the tests); Karney (2011) uses two to be safe with any e.
_NEWTON_STEPS = 1


class ProjectedPoints(NamedTuple):
    """Points in a local azimuthal equidistant projection.

    Attributes
    ----------
    x_m : numpy.ndarray
        Easting from the centre (m): s sin(alpha1).
    y_m : numpy.ndarray
        Northing from the centre (m): s cos(alpha1).
    """

    x_m: np.ndarray
    y_m: np.ndarray


class UnprojectedPoints(NamedTuple):
    """Points mapped back from a local azimuthal equidistant projection.

    Attributes
    ----------
    lon_deg : numpy.ndarray
        Longitude, degrees east, in [-180, 180).
    lat_deg : numpy.ndarray
        Latitude, degrees north.
    radial_azimuth_deg : numpy.ndarray
        Forward azimuth at the point of the geodesic from the centre
        (degrees clockwise from north): the true direction of the
        projection's radial axis there, needed to turn projected vectors
        into east/north (:func:`projected_to_east_north`).  At the centre
        itself it is the direction of the projected point, 0 for (0, 0).
    """

    lon_deg: np.ndarray
    lat_deg: np.ndarray
    radial_azimuth_deg: np.ndarray


class Velocity(NamedTuple):
    """Velocity components in the local east/north frame.

    Attributes
    ----------
    u_m_s : numpy.ndarray
        Eastward velocity (m/s).
    v_m_s : numpy.ndarray
        Northward velocity (m/s).
    """

    u_m_s: np.ndarray
    v_m_s: np.ndarray


def aeqd_scale_error(r_m: ArrayLike) -> np.ndarray:
    """Largest scale error of the azimuthal equidistant projection at a distance.

    Parameters
    ----------
    r_m : array_like
        Distance from the projection centre (m).

    Returns
    -------
    numpy.ndarray
        k - 1 = (r/R) / sin(r/R) - 1 (dimensionless), the error of the
        transverse scale on a sphere of the mean Earth radius R; it is
        (r/R)^2 / 6 to leading order.  The radial scale is exact.

    Examples
    --------
    >>> print(f"{float(aeqd_scale_error(150e3)):.2e}")
    9.24e-05
    """
    ang = np.asarray(r_m, dtype=float) / EARTH_MEAN_RADIUS_M
    with np.errstate(invalid="ignore", divide="ignore"):
        return np.where(ang == 0.0, 0.0, ang / np.sin(ang) - 1.0)


def aeqd_max_radius(scale_error: float) -> float:
    """Distance from the centre within which the aeqd scale error stays below a bound.

    Parameters
    ----------
    scale_error : float
        Largest acceptable scale error eps (dimensionless, small).

    Returns
    -------
    float
        r_max = R sqrt(6 eps) (m), R the mean Earth radius (leading order
        of (r/R)^2 / 6 = eps, *derived*).

    Examples
    --------
    >>> print(f"{aeqd_max_radius(1e-4) / 1e3:.0f} km")
    156 km
    """
    return float(EARTH_MEAN_RADIUS_M * np.sqrt(6.0 * scale_error))


def _check_method(method: str) -> None:
    if method not in _METHODS:
        raise ValueError(f"method must be one of {', '.join(_METHODS)}; got {method!r}")


def _wrap180(lon: np.ndarray) -> np.ndarray:
    """Wrap degrees into [-180, 180)."""
    return (lon + 180.0) % 360.0 - 180.0


def _gaussian_radius(sin_lat0: np.ndarray) -> np.ndarray:
    """sqrt(M N) = a sqrt(1 - e^2) / (1 - e^2 sin^2 phi) (m), the Gauss sphere radius."""
    return WGS84_A_M * np.sqrt(_ONE_MINUS_E2) / (1.0 - WGS84_E2 * sin_lat0 * sin_lat0)


class _Sphere(NamedTuple):
    """Gauss conformal sphere osculating WGS 84 at the centre latitude (one per centre)."""

    radius: np.ndarray  # R = sqrt(M0 N0), m
    n: np.ndarray  # longitude factor
    k: np.ndarray  # isometric latitude offset: Q = n q + k
    sin_chi0: np.ndarray
    cos_chi0: np.ndarray
    lon0: np.ndarray  # degrees


def _sphere(lon0: np.ndarray, lat0: np.ndarray) -> _Sphere:
    """Constants of the Gauss conformal sphere for each centre.

    Gauss's conditions (scale 1 and stationary at the centre latitude phi0)
    give n^2 = 1 + e^2 cos^4(phi0) / (1 - e^2), sin(chi0) = sin(phi0) / n
    and R = sqrt(M0 N0) (IOGP Guidance Note 7-2, method EPSG 9809).  The
    isometric latitudes are q = asinh(tan phi) - e atanh(e sin phi) on the
    ellipsoid and Q = asinh(tan chi) = n q + k on the sphere.
    """
    phi0 = np.radians(lat0)
    s0, c0 = np.sin(phi0), np.cos(phi0)
    n2m1 = WGS84_E2 * c0**4 / _ONE_MINUS_E2  # n^2 - 1
    n = np.sqrt(1.0 + n2m1)
    sin_chi0 = s0 / n
    cos_chi0 = np.sqrt(n2m1 + c0 * c0) / n
    q0 = np.arcsinh(s0 / c0) - _E * np.arctanh(_E * s0)
    k = np.arcsinh(sin_chi0 / cos_chi0) - n * q0
    return _Sphere(_gaussian_radius(s0), n, k, sin_chi0, cos_chi0, lon0)


def _take(sphere: _Sphere, index: np.ndarray | None) -> _Sphere:
    if index is None:
        return sphere
    return _Sphere(*(part[index] for part in sphere))


def _atanh_small(z: np.ndarray) -> np.ndarray:
    """atanh(z) for |z| < 1 as 0.5 log1p(2z / (1 - z)) (faster than numpy's atanh)."""
    return 0.5 * np.log1p(2.0 * z / (1.0 - z))


def _atanh_sin(s: np.ndarray, c: np.ndarray) -> np.ndarray:
    """atanh(s) for s = sin(a), c = cos(a) >= 0, accurate up to the poles."""
    return np.copysign(np.log((1.0 + np.abs(s)) / c), s)


def _conformal_forward(lon, lat, sph: _Sphere) -> tuple[np.ndarray, np.ndarray]:
    phi = np.radians(lat)
    s, c = np.sin(phi), np.cos(phi)
    # isometric latitude q = atanh(s) - e atanh(e s), atanh(s) = sign(s) log((1 + |s|) / c)
    # (c is never exactly 0 in floating point, so the poles stay finite)
    big_q = sph.n * (_atanh_sin(s, c) - _E * _atanh_small(_E * s)) + sph.k
    ex = np.exp(big_q)
    inv_ex = 1.0 / ex
    sum_ex = ex + inv_ex
    sin_chi = (ex - inv_ex) / sum_ex  # tanh Q
    cos_chi = 2.0 / sum_ex  # sech Q
    lam = sph.n * np.radians(_wrap180(np.asarray(lon, dtype=float) - sph.lon0))
    cos_lam = np.cos(lam)
    east = cos_chi * np.sin(lam)
    north = sph.cos_chi0 * sin_chi - sph.sin_chi0 * cos_chi * cos_lam
    up = sph.cos_chi0 * cos_chi * cos_lam + sph.sin_chi0 * sin_chi
    rho = np.sqrt(east * east + north * north)
    with np.errstate(invalid="ignore", divide="ignore"):
        scale = sph.radius * np.where(rho > 0.0, np.arctan2(rho, up) / rho, 1.0)
    return scale * east, scale * north


def _tau_prime(tau: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Return tan(conformal latitude) and sqrt(1 + tau^2) from tau = tan(phi).

    Karney (2011), eq. (7): tau' = tau sqrt(1 + sigma^2) - sigma sqrt(1 + tau^2)
    with sigma = sinh(e atanh(e tau / sqrt(1 + tau^2))); |e atanh(..)| < 0.0068,
    so the sinh is summed as a series to 1e-19.
    """
    root = np.sqrt(1.0 + tau * tau)
    w = _E * _atanh_small(_E * tau / root)
    w2 = w * w
    sigma = w * (1.0 + w2 / 6.0 * (1.0 + w2 / 20.0))
    return tau * np.sqrt(1.0 + sigma * sigma) - sigma * root, root


def _tau_from_tau_prime(taup: np.ndarray) -> np.ndarray:
    """Invert :func:`_tau_prime` by Newton's method (Karney 2011, eqs. 8-9)."""
    tau = taup / _ONE_MINUS_E2
    for _ in range(_NEWTON_STEPS):
        tp, root = _tau_prime(tau)
        tau = tau + ((taup - tp) / np.sqrt(1.0 + tp * tp)
                     * (1.0 + _ONE_MINUS_E2 * tau * tau) / (_ONE_MINUS_E2 * root))
    return tau


def _conformal_inverse(x, y, sph: _Sphere) -> tuple[np.ndarray, ...]:
    """Return lon, lat (degrees) and sin, cos of the radial azimuth at the points."""
    x = np.asarray(x, dtype=float)
    y = np.asarray(y, dtype=float)
    r = np.sqrt(x * x + y * y)
    ang = r / sph.radius
    f = np.sin(ang) / np.maximum(r, 1e-300)  # 0 at the centre, where x = y = 0 anyway
    east, north, up = f * x, f * y, np.cos(ang)
    sin_chi = sph.sin_chi0 * up + sph.cos_chi0 * north
    a = sph.cos_chi0 * up - sph.sin_chi0 * north  # cos(chi) cos(lambda)
    cos_chi = np.sqrt(a * a + east * east)
    lam = np.arctan2(east, a)
    # Q = atanh(sin chi); tau' = sinh(q)
    eq = np.exp((_atanh_sin(sin_chi, cos_chi) - sph.k) / sph.n)
    lat = np.degrees(np.arctan(_tau_from_tau_prime(0.5 * (eq - 1.0 / eq))))
    lon = sph.lon0 + np.degrees(lam / sph.n)  # within 180 degrees of lon0: one wrap at most
    lon = np.where(lon >= 180.0, lon - 360.0, np.where(lon < -180.0, lon + 360.0, lon))
    # direction of the great circle from the centre at the point (azimuths
    # are the same on the Gauss sphere and the ellipsoid: the map is
    # conformal and keeps meridians), as atan2(ae, an); written so that it
    # tends to the direction of (x, y) at the centre without cancellation
    ae = sph.cos_chi0 * x
    an = a * y - sph.sin_chi0 * f * x * x
    norm = np.sqrt(ae * ae + an * an)
    safe = np.maximum(norm, 1e-300)
    return lon, lat, ae / safe, np.where(norm > 0.0, an / safe, 1.0)


def _east_north(x, y, vx, vy, sin_a, cos_a, radius) -> tuple[np.ndarray, np.ndarray]:
    """Projected vector -> east/north (see :func:`projected_to_east_north`)."""
    r = np.sqrt(x * x + y * y)
    at_centre = r == 0.0
    safe_r = np.maximum(r, 1e-300)
    ex = x / safe_r
    ey = np.where(at_centre, 1.0, y / safe_r)
    ang = r / radius
    inv_k = np.where(at_centre, 1.0, np.sin(ang) / np.maximum(ang, 1e-300))
    if at_centre.any():  # the projection is the identity on vectors there
        sin_a = np.where(at_centre, 0.0, sin_a)
        cos_a = np.where(at_centre, 1.0, cos_a)
    v_r = vx * ex + vy * ey
    v_t = (vx * ey - vy * ex) * inv_k
    return v_r * sin_a + v_t * cos_a, v_r * cos_a - v_t * sin_a


def _broadcast(*values: ArrayLike) -> list[np.ndarray]:
    return [np.asarray(a, dtype=float) for a in np.broadcast_arrays(
        *(np.asarray(v, dtype=float) for v in values))]


def aeqd_forward(
    lon: ArrayLike, lat: ArrayLike, lon0: ArrayLike, lat0: ArrayLike, *,
    method: str = "geodesic",
) -> ProjectedPoints:
    """Project points into the azimuthal equidistant projection about a centre.

    Parameters
    ----------
    lon, lat : array_like
        Points: longitude, degrees east; latitude, degrees north.
    lon0, lat0 : array_like
        Projection centre(s), same units; broadcast against the points, so
        each point may have its own centre.
    method : {"geodesic", "conformal"}, optional
        ``"geodesic"`` (default) solves the inverse geodesic problem from
        the centre (Karney 2013, as PROJ's ``aeqd`` does); ``"conformal"``
        evaluates the same map in closed form on the Gauss conformal
        sphere, within 1.1 mm of it up to 150 km from the centre (module
        notes).

    Returns
    -------
    ProjectedPoints
        ``x_m`` (east) and ``y_m`` (north) in metres, broadcast shape.

    Examples
    --------
    >>> p = aeqd_forward(1.0, 0.0, 0.0, 0.0)
    >>> print(f"{float(p.x_m):.3f} {abs(float(p.y_m)):.3f}")
    111319.491 0.000
    """
    _check_method(method)
    lon, lat, lon0, lat0 = _broadcast(lon, lat, lon0, lat0)
    if method == "conformal":
        x, y = _conformal_forward(lon, lat, _sphere(lon0, lat0))
        return ProjectedPoints(x, y)
    az1, _, s = inverse(lon0, lat0, lon, lat)
    a = np.radians(az1)
    return ProjectedPoints(s * np.sin(a), s * np.cos(a))


def aeqd_inverse(
    x_m: ArrayLike, y_m: ArrayLike, lon0: ArrayLike, lat0: ArrayLike, *,
    method: str = "geodesic",
) -> UnprojectedPoints:
    """Map projected points back to longitude and latitude.

    Parameters
    ----------
    x_m, y_m : array_like
        Easting and northing from the centre (m).
    lon0, lat0 : array_like
        Projection centre(s): longitude, degrees east; latitude, degrees
        north; broadcast against the points.
    method : {"geodesic", "conformal"}, optional
        As in :func:`aeqd_forward`; each method inverts its own forward map
        to nanometres.

    Returns
    -------
    UnprojectedPoints
        ``lon_deg`` in [-180, 180), ``lat_deg`` and ``radial_azimuth_deg``.

    Examples
    --------
    >>> back = aeqd_inverse(111319.491, 0.0, 0.0, 0.0)
    >>> print(f"{float(back.lon_deg):.6f} {float(back.radial_azimuth_deg):.1f}")
    1.000000 90.0
    """
    _check_method(method)
    x, y, lon0, lat0 = _broadcast(x_m, y_m, lon0, lat0)
    if method == "conformal":
        lon, lat, sin_a, cos_a = _conformal_inverse(x, y, _sphere(lon0, lat0))
        return UnprojectedPoints(lon, lat, np.degrees(np.arctan2(sin_a, cos_a)))
    r = np.hypot(x, y)
    # the direction of (0, 0) is 0 whatever the signs of the zeros
    end = forward(lon0, lat0, np.where(r > 0.0, np.degrees(np.arctan2(x, y)), 0.0), r)
    return UnprojectedPoints(_wrap180(end.lon_deg), end.lat_deg, end.azimuth2_deg)


def projected_to_east_north(
    x_m: ArrayLike, y_m: ArrayLike, vx: ArrayLike, vy: ArrayLike,
    radial_azimuth_deg: ArrayLike, lat0: ArrayLike,
) -> Velocity:
    """Turn a vector given in a local aeqd into east/north components at its point.

    Parameters
    ----------
    x_m, y_m : array_like
        Projected position of the point (m).
    vx, vy : array_like
        Vector in projected coordinates, e.g. d(x, y)/dt (m/s).
    radial_azimuth_deg : array_like
        True azimuth of the radial direction at the point
        (:attr:`UnprojectedPoints.radial_azimuth_deg`), degrees.
    lat0 : array_like
        Latitude of the projection centre, degrees north.

    Returns
    -------
    Velocity
        ``u_m_s`` (east) and ``v_m_s`` (north), in the units of ``vx, vy``.

    Notes
    -----
    *Derived.*  The aeqd maps the geodesic from the centre to the point onto
    the radial line: along it the scale is exactly 1 and the radial
    direction at the point has the true azimuth alpha2.  Across it the
    projection stretches lengths by k = s / m12, taken here on the sphere
    of the Gaussian radius R = sqrt(M0 N0) at the centre,
    k = (r/R) / sin(r/R) (relative error below 1e-8 at 150 km).  With the
    radial and transverse components v_r = (vx x + vy y) / r and
    v_t = (vx y - vy x) / r (transverse = 90 degrees clockwise of radial),

        u = v_r sin(alpha2) + (v_t / k) cos(alpha2),
        v = v_r cos(alpha2) - (v_t / k) sin(alpha2).

    At the centre the projection is the identity on vectors.
    """
    x, y, vx, vy, azi, lat0 = _broadcast(x_m, y_m, vx, vy, radial_azimuth_deg, lat0)
    a = np.radians(azi)
    u, v = _east_north(x, y, vx, vy, np.sin(a), np.cos(a),
                       _gaussian_radius(np.sin(np.radians(lat0))))
    return Velocity(u, v)


def track_centre(lon: ArrayLike, lat: ArrayLike) -> tuple[float, float]:
    """Robust centre of a set of points: the direction of their mean surface normal.

    Parameters
    ----------
    lon, lat : array_like
        Points: longitude, degrees east; latitude, degrees north.  NaN
        values are ignored.

    Returns
    -------
    tuple of float
        ``(lon0, lat0)`` in degrees: the geodetic coordinates whose
        ellipsoid normal points along the mean of the points' unit normals.
        Unlike a mean of longitudes it is right across the antimeridian and
        near the poles.

    Raises
    ------
    ValueError
        If there is no finite point or the normals cancel (points spread
        over the whole globe).

    Examples
    --------
    >>> lon0, lat0 = track_centre([179.0, -179.0], [10.0, 10.0])
    >>> print(f"{abs(lon0):.1f} {lat0:.4f}")
    180.0 10.0015
    """
    lon = np.radians(np.asarray(lon, dtype=float).ravel())
    lat = np.radians(np.asarray(lat, dtype=float).ravel())
    ok = np.isfinite(lon) & np.isfinite(lat)
    if not ok.any():
        raise ValueError("no finite point to take the centre of")
    c = np.cos(lat[ok])
    vx, vy, vz = (c * np.cos(lon[ok])).sum(), (c * np.sin(lon[ok])).sum(), np.sin(lat[ok]).sum()
    norm = float(np.sqrt(vx * vx + vy * vy + vz * vz))
    if norm < 1e-9 * ok.sum():
        raise ValueError("the points have no meaningful centre (their normals cancel)")
    return float(np.degrees(np.arctan2(vy, vx))), float(np.degrees(np.arcsin(vz / norm)))


class LocalProjection(NamedTuple):
    """A local azimuthal equidistant projection on WGS 84 about one centre.

    Attributes
    ----------
    lon0_deg : float
        Longitude of the centre, degrees east.
    lat0_deg : float
        Latitude of the centre, degrees north.

    Notes
    -----
    The map is PROJ's ``+proj=aeqd +lat_0=.. +lon_0=.. +ellps=WGS84
    +units=m`` (:attr:`proj_string`, :meth:`to_pyproj`).  :meth:`forward`
    and :meth:`inverse` evaluate it with :data:`GEOD` by default, which
    agrees with PROJ to nanometres and works for many points in one call;
    see the module notes for its distortion, (r/R)^2 / 6 at distance r.

    Examples
    --------
    >>> proj = LocalProjection(-38.5, 43.0)
    >>> x, y = proj.forward(-38.5, 43.1)
    >>> print(f"{float(x):.3f} {float(y):.1f}")
    0.000 11109.4
    """

    lon0_deg: float
    lat0_deg: float

    @property
    def proj_string(self) -> str:
        """PROJ definition of the projection."""
        return (f"+proj=aeqd +lat_0={self.lat0_deg!r} +lon_0={self.lon0_deg!r} "
                "+ellps=WGS84 +units=m +no_defs")

    def to_pyproj(self) -> pyproj.Proj:
        """Return the projection as a :class:`pyproj.Proj`.

        Returns
        -------
        pyproj.Proj
            Forward ``proj(lon, lat)`` and inverse ``proj(x, y, inverse=True)``.
        """
        return pyproj.Proj(self.proj_string)

    def forward(self, lon: ArrayLike, lat: ArrayLike, *,
                method: str = "geodesic") -> ProjectedPoints:
        """Project points (see :func:`aeqd_forward`).

        Parameters
        ----------
        lon, lat : array_like
            Longitude, degrees east; latitude, degrees north.
        method : {"geodesic", "conformal"}, optional
            Evaluation method.

        Returns
        -------
        ProjectedPoints
            ``x_m``, ``y_m`` (m).
        """
        return aeqd_forward(lon, lat, self.lon0_deg, self.lat0_deg, method=method)

    def inverse(self, x_m: ArrayLike, y_m: ArrayLike, *,
                method: str = "geodesic") -> UnprojectedPoints:
        """Map projected points back (see :func:`aeqd_inverse`).

        Parameters
        ----------
        x_m, y_m : array_like
            Easting and northing (m).
        method : {"geodesic", "conformal"}, optional
            Evaluation method.

        Returns
        -------
        UnprojectedPoints
            ``lon_deg``, ``lat_deg``, ``radial_azimuth_deg``.
        """
        return aeqd_inverse(x_m, y_m, self.lon0_deg, self.lat0_deg, method=method)


# --------------------------------------------------------------------------- velocities


def _breaks(n: int, segment: ArrayLike | None) -> np.ndarray:
    """Boolean array: True where a new segment starts (always at 0)."""
    start = np.zeros(n, dtype=bool)
    if n:
        start[0] = True
    if segment is not None:
        seg = np.asarray(segment)
        if seg.shape != (n,):
            raise ValueError(f"segment must have the shape of time, got {seg.shape} for {n} fixes")
        start[1:] |= seg[1:] != seg[:-1]
    return start


_BLOCK = 65536  # elements per block of long array-operation chains (fits the cache)


class _Displacer:
    """East/north displacements between fixes in the aeqd centred on the first (m)."""

    def __init__(self, lon: np.ndarray, lat: np.ndarray, method: str) -> None:
        self.lon, self.lat, self.method = lon, lat, method
        self.sphere = _sphere(lon, lat) if method == "conformal" else None

    def __call__(self, a: np.ndarray, b: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        if self.method == "geodesic":
            az1, _, s = inverse(self.lon[a], self.lat[a], self.lon[b], self.lat[b])
            ang = np.radians(az1)
            return s * np.sin(ang), s * np.cos(ang)
        x, y = np.empty(a.size), np.empty(a.size)
        for start in range(0, a.size, _BLOCK):
            blk = slice(start, start + _BLOCK)
            ia, ib = a[blk], b[blk]
            x[blk], y[blk] = _conformal_forward(self.lon[ib], self.lat[ib],
                                                _take(self.sphere, ia))
        return x, y


def fix_velocities(
    time_s: ArrayLike, lon: ArrayLike, lat: ArrayLike, segment: ArrayLike | None = None, *,
    method: str = "geodesic",
) -> Velocity:
    """East/north velocity at each fix from centred geodesic differences.

    Parameters
    ----------
    time_s : array_like
        Time of each fix (s, any origin), increasing within each segment.
    lon, lat : array_like
        Longitude, degrees east; latitude, degrees north; one value per fix.
    segment : array_like, optional
        Segment label of each fix; differences never reach across a change
        of label.  Fixes must be grouped by segment (time order inside
        each); ``None`` treats all fixes as one segment.
    method : {"geodesic", "conformal"}, optional
        How the displacements to the neighbours are found: inverse geodesic
        problems (default; Karney 2013) or the closed-form aeqd centred on
        the fix (module notes; the same to well below a micrometre for
        neighbours a few kilometres apart, and faster).

    Returns
    -------
    Velocity
        ``u_m_s`` and ``v_m_s`` at each fix (m/s); NaN for a segment of one
        fix.

    Raises
    ------
    ValueError
        If the arrays differ in shape or time does not increase within a
        segment.

    Notes
    -----
    *Derived.*  Work in the aeqd centred on fix n, where the neighbours sit
    at d+ = s+ (sin a+, cos a+) and d- = s- (sin a-, cos a-), with s and a
    the distance and azimuth at n of the geodesics to fixes n + 1 and
    n - 1 (the backward one is the reverse of the leg n - 1 -> n, so one
    inverse problem per leg suffices).  In this frame the east/north
    axes at n are the projection axes.  With h+ = t(n+1) - t(n) and
    h- = t(n) - t(n-1), motion x(t) = v t + a t^2 / 2 gives
    d+ = v h+ + a h+^2 / 2 and d- = -v h- + a h-^2 / 2; eliminating a,

        v = (h-^2 d+ - h+^2 d-) / (h+ h- (h+ + h-)),

    the non-uniform three-point centred difference: exact for quadratic
    motion, second order in the step otherwise, and equal to
    (d+ - d-) / (h+ + h-) on even steps.  At the first fix of a segment,
    with d1, d2 the displacements to the next two fixes and h1, h2 the
    steps, H = h1 + h2,

        v = (H^2 d1 - h1^2 d2) / (h1 h2 H),

    and at the last fix, with d1, d2 to the previous two, k1, k2 and
    K = k1 + k2,

        v = -(K^2 d1 - k1^2 d2) / (k1 k2 K),

    both also exact for quadratic motion.  A segment of two fixes gets
    d / h at both ends, each in its own frame.  Longitudes are never
    differenced, so tracks across the antimeridian need no care; at a pole
    the east/north frame is that of the meridian given by the fix's
    longitude (the limit along it).

    Examples
    --------
    Due north along a meridian at 1 m/s:

    >>> t = [0.0, 600.0, 1500.0]
    >>> lat = [0.0, float(forward(0, 0, 0, 600.0).lat_deg), float(forward(0, 0, 0, 1500.0).lat_deg)]
    >>> vel = fix_velocities(t, [0.0, 0.0, 0.0], lat)
    >>> print(vel.v_m_s.round(9), abs(vel.u_m_s).max() < 1e-12)
    [1. 1. 1.] True
    """
    _check_method(method)
    t = np.asarray(time_s, dtype=float)
    lon = np.asarray(lon, dtype=float)
    lat = np.asarray(lat, dtype=float)
    if t.ndim != 1 or lon.shape != t.shape or lat.shape != t.shape:
        raise ValueError(f"time_s, lon and lat must be 1-D of one length, got shapes "
                         f"{t.shape}, {lon.shape} and {lat.shape}")
    n = t.size
    start = _breaks(n, segment)
    u = np.full(n, np.nan)
    v = np.full(n, np.nan)
    if n < 2:
        return Velocity(u, v)
    h = np.diff(t)
    link = ~start[1:]  # leg k joins fix k and k + 1
    if np.any(link & ~(h > 0)):
        bad = int(np.flatnonzero(link & ~(h > 0))[0])
        raise ValueError(f"time must increase within a segment; fixes {bad} and {bad + 1} "
                         f"are {h[bad]} s apart")
    legs = np.flatnonzero(link)
    displacement = _Displacer(lon, lat, method)
    # forward displacement of every leg in the frame of its first fix ...
    fx, fy = displacement(legs, legs + 1)
    # ... and backward displacement in the frame of its second fix
    bx, by = displacement(legs + 1, legs)
    dpx = np.full(n, np.nan)
    dpy = np.full(n, np.nan)
    dmx = np.full(n, np.nan)
    dmy = np.full(n, np.nan)
    hp = np.full(n, np.nan)
    hm = np.full(n, np.nan)
    dpx[legs], dpy[legs], hp[legs] = fx, fy, h[legs]
    dmx[legs + 1], dmy[legs + 1], hm[legs + 1] = bx, by, h[legs]

    has_p = np.isfinite(hp)
    has_m = np.isfinite(hm)
    inner = has_p & has_m
    w = hp[inner] * hm[inner] * (hp[inner] + hm[inner])
    a, b = hm[inner] ** 2, hp[inner] ** 2
    u[inner] = (a * dpx[inner] - b * dmx[inner]) / w
    v[inner] = (a * dpy[inner] - b * dmy[inner]) / w

    # segment ends: first fixes (no previous) and last fixes (no next)
    first = np.flatnonzero(has_p & ~has_m)
    last = np.flatnonzero(has_m & ~has_p)
    for ends, sign in ((first, 1), (last, -1)):
        if not ends.size:
            continue
        near = ends + sign
        d1x = np.where(sign > 0, dpx[ends], dmx[ends])
        d1y = np.where(sign > 0, dpy[ends], dmy[ends])
        h1 = np.where(sign > 0, hp[ends], hm[ends])
        h2 = hp[near] if sign > 0 else hm[near]
        three = np.isfinite(h2)
        two = ~three
        u[ends[two]] = sign * d1x[two] / h1[two]
        v[ends[two]] = sign * d1y[two] / h1[two]
        e3 = ends[three]
        if e3.size:
            far = e3 + 2 * sign
            d2x, d2y = displacement(e3, far)
            h1t, h2t = h1[three], h2[three]
            big = h1t + h2t
            den = sign * h1t * h2t * big
            u[e3] = (big**2 * d1x[three] - h1t**2 * d2x) / den
            v[e3] = (big**2 * d1y[three] - h1t**2 * d2y) / den
    return Velocity(u, v)
