"""Gap-aware resampling of drifter fixes onto a uniform time grid, with uncertainty.

:func:`resample_all` takes the QC-flagged fixes table of one or many
drifters and returns a table of positions, velocities and position
uncertainties at whole multiples of a time step (default one hour), plus a
list of the stretches of track that were too short to keep.
:func:`resample_drifter` does the same for one drifter; :func:`segment_xy`
gives the projected x/y of one resampled segment for the wavelet stage.

Method
------
1. **Fixes used.**  Only fixes with ``qc_flag`` 1 (pass), or 1 and 3 with
   ``include_suspect``; each drifter's fixes sorted by time; a fix at
   exactly the time of the previous one is left out.
2. **Segments.**  A drifter's track is split where consecutive fixes are
   more than ``max_gap_h`` apart.  Segments whose first and last fixes are
   less than ``min_segment_days`` apart are dropped and reported (drifter,
   start, end, number of fixes, reason).  The kept segments of each drifter
   are numbered 0, 1, 2, ... in time order.
3. **Grid.**  The grid times of a segment are the multiples of ``step_h``
   since 1970-01-01T00:00Z that lie between its first and last fix
   (inclusive); with the default step every point is on a whole UTC hour.
4. **Projection.**  Positions are interpolated in metres, never in degrees,
   in a local azimuthal equidistant projection (:mod:`driftloop.geodesy`).
   Long segments are cut into chunks of at most ``projection_radius_km`` of
   path, each projected about its own centre (the fix halfway along the
   chunk's path) together with 10 more fixes on either side, so that
   every fix the chunk's interpolant sees is within ``projection_radius_km``
   of the centre (the scale error of the projection is then below
   (r/R)^2 / 6 = 9.3e-5 at the default 150 km).  A grid point is evaluated
   in the chunk whose own stretch of time contains it; the margins make the
   interpolants of neighbouring chunks agree where they meet (the
   influence of a spline's end condition decays by at least a factor of 2,
   typically 3.7, per fix).
5. **Interpolation** of x(t) and y(t), each separately:

   * ``"spline"`` (default): the not-a-knot cubic spline through the fixes
     (de Boor 1978, *A Practical Guide to Splines*, ch. IV; from memory),
     solved for all segments of all drifters as one tridiagonal system;
     a chunk of three fixes gets the parabola, of two the straight line.
   * ``"linear"``: straight lines between fixes.

   Velocities are the time derivative of the interpolant in the projection,
   turned into east/north at each grid point with the exact direction of
   the projection's axes there and its scale
   (:func:`driftloop.geodesy.projected_to_east_north`).
6. **Gaps.**  A grid point strictly between two fixes more than
   ``flag_gap_h`` apart has ``in_gap`` True and ``gap_h`` = the length of
   that interval (h); elsewhere ``gap_h`` is 0.
7. **Uncertainty** ``sigma_m`` (m), combining in quadrature the GPS noise
   of the fixes and a bound on the interpolation error:

       sigma(t) = sqrt(sigma_gps^2 + e(t)^2),

   with d1 = t - t_i and d2 = t_(i+1) - t the times to the fixes either
   side, A = ``accel_m_s2`` the largest acceleration of real drifter motion
   and omega = 2 Omega the fastest oscillation it has (inertial motion at
   the poles):

   * linear: e = A d1 d2 / 2, the error of linear interpolation of a curve
     whose second derivative is at most A (*derived*, textbook);
   * spline: e = min((5/24) A omega^2 d1^2 d2^2, A d1 d2 / 2).  The first
     term is the pointwise shape of the Hermite interpolation error scaled
     so that its maximum at mid-interval, (5/384) h^4 max|x''''|, is the
     bound of Hall & Meyer (1976, *J. Approx. Theory* 16, 105-122; from
     memory) for cubic spline interpolation, with |x''''| <= A omega^2 for
     motion of acceleration A oscillating at omega (*derived*).  It holds
     while omega h is small and grows as h^4; beyond intervals of 5.9 h,
     where the two terms cross, the second-order term caps it (a modelling
     choice: the spline was never worse than linear interpolation in gaps
     up to ``max_gap_h`` in the comparison below).

   e is zero at a fix and largest mid-way between fixes: for the spline
   9.3 m in the middle of a 1-h interval, 150 m of a 2-h, 750 m of a 3-h
   and 11.7 km of a 6-h interval with the defaults.  It is a bound for
   vigorous inertial motion, not an estimate: most of the time the error
   is much smaller.  The interpolant passes through the fixes, so their
   noise is kept, not reduced: sigma_gps (``gps_noise_m`` of the QC
   configuration) stands for the noise of the fixes the interpolant is
   built from.

Defaults and why
----------------
*Interpolator.*  On a 2-km inertial circle at 45 N (period 16.9 h) drifting
at 0.1 m/s, sampled every 40-80 min with four 3-h gaps and 10 m GPS noise,
the hourly values keep the radius as (mean r/R; smallest r/R, inside a
gap; rms position error): spline 0.998, 0.965, 18 m; Akima (1970) 0.993,
0.862, 59 m; monotone PCHIP 0.988, 0.794, 85 m; linear 0.964, 0.619,
170 m.  PCHIP flattens every extremum of x(t) and y(t), which a loop has
twice per turn; linear interpolation cuts the corners; Akima's local slopes
are poor estimates when a gap leaves few fixes per turn.  The cubic spline
(natural or not-a-knot, the same inside the track) did not overshoot at
gaps: the worst position error inside a gap of 3, 6, 10, 14 and 24 h
(median of 20 tracks) was 0.04, 0.33, 1.4, 3.3 and 6.6 km for the spline,
0.16, 0.62, 1.8, 3.7 and 5.9 km for Akima, 0.21, 1.2, 2.7, 3.9 and 4.0 km
for PCHIP and 0.52, 1.5, 3.0, 3.9 and 2.8 km for linear interpolation.
Only across gaps longer than the inertial period does linear interpolation
do better, and those are beyond the default ``max_gap_h``.
``python benchmarks/bench_resample.py --compare`` prints these numbers.

*max_gap_h = 12 h.*  Real releases have many gaps of 6-14 h; splitting at
each of them would cut most loop events of several days into pieces too
short to analyse.  But no interpolator can reconstruct motion across a gap
longer than about half an inertial period (8.5 h at 45 N): the spline's
error reaches the loop radius at about 12 h (0.68 R at 10 h, 1.7 R at 14 h
above).  12 h keeps the
common short gaps inside segments, marked by ``in_gap`` and ``gap_h`` so
that the loop stage can discount them by their length relative to the local
inertial period, and splits at longer ones.  The value is meant to be
tuned by the loop-event evaluation; it is a configuration value.

*flag_gap_h = 3 h*: three missed hourly fixes.  Up to it the spline keeps a
2-km loop to about 2 % (42 m error in a 3-h gap above); at 6 h the error is
already 16 % of the radius.  *min_segment_days = 3 days*: the
shortest stretch that holds a few inertial periods at mid-latitudes, which
the wavelet stage needs to see a loop.  *step_h = 1 h*: the usual hourly
product (Elipot et al. 2016).

Comparison with Elipot et al. (2016)
------------------------------------
Elipot, S., R. Lumpkin, R. C. Perez, J. M. Lilly, J. J. Early and
A. M. Sykulski (2016), "A global surface drifter data set at hourly
resolution", *J. Geophys. Res. Oceans* 121, doi:10.1002/2016JC011716,
produce hourly positions and velocities of GPS-tracked drifters by locally
weighted polynomial regression (LOWESS) of the fixes about each hour; the
velocity is the linear coefficient and the weighted least-squares fit gives
the uncertainties (kernel, order and window from memory).  driftloop
differs in that (a) it *interpolates* (the curve passes through every fix)
instead of smoothing, so GPS noise is carried into the hourly positions
rather than reduced and the velocities are noisier at high frequency;
(b) it works in a local azimuthal equidistant projection on WGS 84 rather
than in degrees or a per-window tangent plane; (c) its uncertainty is
GPS noise plus an interpolation error bound from a motion model, not a
regression error; (d) gaps are interpolated up to ``max_gap_h`` and marked
(``in_gap``, ``gap_h``), where a local regression would have fewer fixes in
its window; (e) it treats Argos fixes no differently (Elipot et al. use a
separate maximum-likelihood method for them).  Users expecting the hourly
product's smoothness can smooth driftloop's output or raise ``gps_noise_m``
in their interpretation; the loop stage works on the unsmoothed series.

References
----------
Akima, H. (1970), "A new method of interpolation and smooth curve fitting
based on local procedures", *J. ACM* 17, 589-602 (from memory).

de Boor, C. (1978), *A Practical Guide to Splines*, Springer (from memory).

Elipot, S., et al. (2016), *J. Geophys. Res. Oceans* 121,
doi:10.1002/2016JC011716.

Fritsch, F. N., and R. E. Carlson (1980), "Monotone piecewise cubic
interpolation", *SIAM J. Numer. Anal.* 17, 238-246 (PCHIP; from memory).

Hall, C. A., and W. W. Meyer (1976), "Optimal error bounds for cubic
spline interpolation", *J. Approx. Theory* 16, 105-122 (from memory).

Karney, C. F. F. (2013), "Algorithms for geodesics", *J. Geodesy* 87, 43-55.
"""

from __future__ import annotations

from typing import NamedTuple

import numpy as np
import pandas as pd
import pyarrow as pa
from scipy.linalg import solve_banded

from driftloop import geodesy
from driftloop.config import QCConfig, ResampleConfig
from driftloop.constants import EARTH_MEAN_RADIUS_M, EARTH_ROTATION_RATE_RAD_S

__all__ = [
    "DROP_REASONS",
    "INTERPOLATORS",
    "RESAMPLED_COLUMNS",
    "Resampled",
    "ResampledDrifter",
    "SegmentXY",
    "resample_all",
    "resample_drifter",
    "segment_xy",
]

#: Columns of the resampled table, in order.
RESAMPLED_COLUMNS = (
    "drifter_id", "segment", "time", "lat", "lon", "u", "v", "sigma_m", "in_gap", "gap_h",
)

#: Interpolators of :func:`resample_all` (``ResampleConfig.interpolator``).
INTERPOLATORS = ("spline", "linear")

#: Reason codes of dropped segments and what they mean.
DROP_REASONS = {
    "too_short": "first and last fix less than min_segment_days apart",
    "no_grid_time": "no grid time between the first and last fix",
    "single_fix": "only one usable fix (possible with min_segment_days = 0)",
}

#: Fixes added on each side of a projection chunk so that the interpolants
#: of neighbouring chunks agree where they meet.
_MARGIN = 10
#: Fastest oscillation of real drifter motion, 2 Omega (rad/s): inertial
#: motion at the poles (the M2, S2, K1 and O1 tides are slower).
_OMEGA_MAX = 2.0 * EARTH_ROTATION_RATE_RAD_S
#: Elements per block in the long chains of array operations (fits the cache).
_BLOCK = 65536
#: Chunks are halved at most this many times to bring every fix within the
#: projection radius (only a track with legs longer than the radius needs it).
_MAX_HALVINGS = 8

_NS = 1_000_000_000
_REQUIRED = ("drifter_id", "time", "lat", "lon", "qc_flag")
_STRING = pd.StringDtype()


class Resampled(NamedTuple):
    """Result of resampling: the gridded track and what was left out.

    Attributes
    ----------
    track : pandas.DataFrame
        One row per grid time of every kept segment, columns
        :data:`RESAMPLED_COLUMNS`, sorted by drifter, segment and time.
    dropped : list of dict
        One entry per segment that was not kept: ``drifter_id``, ``start``
        and ``end`` (ISO 8601 UTC of its first and last fix), ``n_fixes``,
        ``duration_h`` and ``reason`` (a key of :data:`DROP_REASONS`).
    """

    track: pd.DataFrame
    dropped: list[dict]


#: The result of :func:`resample_drifter` (the same type as for many drifters).
ResampledDrifter = Resampled


class SegmentXY(NamedTuple):
    """One resampled segment in its own local azimuthal equidistant projection.

    Attributes
    ----------
    x_m, y_m : numpy.ndarray
        Easting and northing of each grid point from the centre (m).
    projection : driftloop.geodesy.LocalProjection
        The projection (centre = direction of the mean surface normal of
        the segment's positions).
    max_scale_error : float
        Largest scale error of the projection over the segment,
        (r/R)^2 / 6 at the farthest point (dimensionless).
    """

    x_m: np.ndarray
    y_m: np.ndarray
    projection: geodesy.LocalProjection
    max_scale_error: float


def _empty_track() -> pd.DataFrame:
    return pd.DataFrame({
        "drifter_id": pd.array([], dtype=_STRING),
        "segment": np.array([], dtype=np.int32),
        "time": pd.DatetimeIndex([], dtype="datetime64[ns, UTC]"),
        **{name: np.array([], dtype=float) for name in ("lat", "lon", "u", "v", "sigma_m")},
        "in_gap": np.array([], dtype=bool),
        "gap_h": np.array([], dtype=float),
    })


def resample_all(
    fixes: pd.DataFrame,
    config: ResampleConfig | None = None,
    gps_noise_m: float | None = None,
) -> Resampled:
    """Resample the QC-flagged fixes of any number of drifters onto a uniform grid.

    Parameters
    ----------
    fixes : pandas.DataFrame
        Flagged fixes (:func:`driftloop.qc.run_qc` output); the columns
        ``drifter_id``, ``time`` (UTC), ``lat``, ``lon`` (degrees) and
        ``qc_flag`` are used.  Row order does not matter.
    config : ResampleConfig, optional
        Resampling parameters; defaults to ``ResampleConfig()``.
    gps_noise_m : float, optional
        Standard deviation of GPS position noise (m) used in ``sigma_m``;
        pass the run's ``config.qc.gps_noise_m``.  Defaults to the
        ``QCConfig`` default.

    Returns
    -------
    Resampled
        ``track``: columns :data:`RESAMPLED_COLUMNS` --
        ``drifter_id`` (string), ``segment`` (int32, 0.. per drifter),
        ``time`` (datetime64[ns, UTC]), ``lat``, ``lon`` (degrees),
        ``u``, ``v`` (m/s east, north), ``sigma_m`` (m), ``in_gap`` (bool),
        ``gap_h`` (h, 0 outside gaps); ``dropped``: the segments left out.

    Raises
    ------
    ValueError
        If a required column is absent or ``gps_noise_m`` is negative.

    Notes
    -----
    The method, the defaults and their reasons, and how it differs from the
    hourly product of Elipot et al. (2016) are in the module docstring
    (:mod:`driftloop.resample`) and ``docs/resampling.md``.

    Examples
    --------
    >>> import pandas as pd
    >>> from driftloop.config import ResampleConfig
    >>> t = pd.date_range("2024-04-02T00:20Z", periods=80, freq="55min")
    >>> fixes = pd.DataFrame({"drifter_id": "A", "time": t, "lat": 43.0,
    ...                       "lon": [-38.5 + 0.001 * k for k in range(80)], "qc_flag": 1})
    >>> track, dropped = resample_all(fixes, ResampleConfig(min_segment_days=1.0))
    >>> print(len(track), track["time"].iloc[0].isoformat(), dropped)
    72 2024-04-02T01:00:00+00:00 []
    """
    config = config or ResampleConfig()
    sigma_gps = QCConfig().gps_noise_m if gps_noise_m is None else float(gps_noise_m)
    if not sigma_gps >= 0:
        raise ValueError(f"gps_noise_m must be >= 0, got {gps_noise_m!r}")
    missing = [c for c in _REQUIRED if c not in fixes.columns]
    if missing:
        raise ValueError(f"fixes table lacks the column(s) {', '.join(missing)}")

    prepared = _prepare(fixes, config)
    if prepared.seg is None:
        return Resampled(_empty_track(), prepared.dropped)
    units = _units(prepared.seg, prepared.lat, prepared.lon, config.projection_radius_km * 1e3)
    projected = _project(prepared, units, config.projection_method)
    located = _locate(prepared, units)
    slopes = _slopes(projected, units, config.interpolator)
    columns = _evaluate(prepared, units, projected, located, slopes, config, sigma_gps)
    return Resampled(_table(prepared, located, columns), prepared.dropped)


def resample_drifter(
    fixes: pd.DataFrame,
    config: ResampleConfig | None = None,
    gps_noise_m: float | None = None,
) -> Resampled:
    """Resample the QC-flagged fixes of one drifter (see :func:`resample_all`).

    Parameters
    ----------
    fixes : pandas.DataFrame
        Flagged fixes of a single drifter.
    config : ResampleConfig, optional
        Resampling parameters.
    gps_noise_m : float, optional
        GPS noise standard deviation (m); pass ``config.qc.gps_noise_m``.

    Returns
    -------
    Resampled
        The resampled track of the drifter and its dropped segments.

    Raises
    ------
    ValueError
        If the table holds more than one drifter.
    """
    if "drifter_id" in fixes.columns:
        n_ids = fixes["drifter_id"].nunique(dropna=False)
        if n_ids > 1:
            raise ValueError(f"resample_drifter takes one drifter, got {n_ids}; "
                             "use resample_all for many")
    return resample_all(fixes, config, gps_noise_m)


def segment_xy(track_segment: pd.DataFrame, *, method: str = "geodesic") -> SegmentXY:
    """Project one resampled segment into its own local aeqd, e.g. for a wavelet transform.

    Parameters
    ----------
    track_segment : pandas.DataFrame
        Rows of the resampled table for one drifter and one segment
        (columns ``lat``, ``lon``; ``drifter_id`` and ``segment`` are
        checked when present).
    method : {"geodesic", "conformal"}, optional
        Evaluation of the projection (:func:`driftloop.geodesy.aeqd_forward`).

    Returns
    -------
    SegmentXY
        ``x_m``, ``y_m``, the :class:`~driftloop.geodesy.LocalProjection` and
        its largest scale error over the segment.

    Raises
    ------
    ValueError
        If the rows belong to more than one drifter or segment, or are empty.

    Notes
    -----
    One projection serves the whole segment, so for segments that reach
    far from their centre the scale error grows as (r/R)^2 / 6
    (``max_scale_error``: 1.5e-3 at 600 km); loop radii computed from x/y
    are then wrong by about that fraction.  Velocities (``u``, ``v``) do
    not have this error.
    """
    for name in ("drifter_id", "segment"):
        if name in track_segment.columns and track_segment[name].nunique(dropna=False) > 1:
            raise ValueError(f"segment_xy takes one segment, got several values of {name!r}")
    if track_segment.empty:
        raise ValueError("segment_xy needs at least one row")
    lon = track_segment["lon"].to_numpy(dtype=float)
    lat = track_segment["lat"].to_numpy(dtype=float)
    lon0, lat0 = geodesy.track_centre(lon, lat)
    projection = geodesy.LocalProjection(lon0, lat0)
    x, y = projection.forward(lon, lat, method=method)
    scale_error = float(geodesy.aeqd_scale_error(np.hypot(x, y).max()))
    return SegmentXY(x, y, projection, scale_error)


# --------------------------------------------------------------------------- selection


def _select(fixes: pd.DataFrame, config: ResampleConfig):
    """Usable fixes sorted by drifter and time: (ids, code, t_ns, lat, lon) or None."""
    flags = fixes["qc_flag"].to_numpy(dtype=np.int64, na_value=-1)
    usable = flags == 1
    if config.include_suspect:
        usable |= flags == 3
    times = pd.DatetimeIndex(pd.to_datetime(fixes["time"], utc=True)).as_unit("ns")
    t_ns = times.asi8
    lat = fixes["lat"].to_numpy(dtype=float, na_value=np.nan)
    lon = fixes["lon"].to_numpy(dtype=float, na_value=np.nan)
    usable &= ~np.asarray(times.isna()) & np.isfinite(lat) & np.isfinite(lon)
    rows = np.flatnonzero(usable)
    if not rows.size:
        return None
    code, ids = pd.factorize(fixes["drifter_id"], sort=True, use_na_sentinel=False)
    code = np.asarray(code, dtype=np.int64)[rows]
    ids = [str(i) for i in ids]
    t_ns = t_ns[rows]
    if code.size > 1:
        step_code = np.diff(code)
        in_order = bool(np.all((step_code > 0) | ((step_code == 0) & (np.diff(t_ns) >= 0))))
        if not in_order:  # tables usually come sorted; sorting 1e6 rows costs 0.1 s
            order = np.lexsort((t_ns, code))
            rows, code, t_ns = rows[order], code[order], t_ns[order]
    repeat = np.zeros(rows.size, dtype=bool)
    repeat[1:] = (code[1:] == code[:-1]) & (t_ns[1:] == t_ns[:-1])
    if repeat.any():
        rows, code, t_ns = rows[~repeat], code[~repeat], t_ns[~repeat]
    return ids, code, t_ns, lat[rows], lon[rows]


def _utc(t_ns: np.ndarray) -> pd.DatetimeIndex:
    return pd.DatetimeIndex(np.asarray(t_ns, dtype=np.int64).view("M8[ns]")).tz_localize("UTC")


def _strings(codes: np.ndarray, ids: list[str]) -> pd.api.extensions.ExtensionArray:
    """Return ids[codes] as a pandas string array (through Arrow: fast for many rows)."""
    dictionary = pa.DictionaryArray.from_arrays(pa.array(codes.astype(np.int32)),
                                                pa.array(ids, type=pa.string()))
    return pd.array(dictionary.dictionary_decode(), dtype=_STRING)


class _Segments:
    """Fixes of all drifters cut into segments (fixes contiguous and time-sorted)."""

    def __init__(self, code, t_ns, max_gap_ns, starts_from: _Segments | None = None) -> None:
        self.code = code
        self.t_ns = t_ns
        n = code.size
        if starts_from is not None:  # the kept segments of another _Segments, in order
            keep = starts_from.kept
            self.n = starts_from.n[keep]
        else:
            start = np.ones(n, dtype=bool)
            start[1:] = (code[1:] != code[:-1]) | (np.diff(t_ns) > max_gap_ns)
            first = np.flatnonzero(start)
            self.n = np.diff(np.r_[first, n])
        self.first = np.r_[0, np.cumsum(self.n)[:-1]].astype(np.int64)
        self.last = self.first + self.n - 1
        self.t_first = t_ns[self.first]
        self.t_last = t_ns[self.last]
        self.index = np.repeat(np.arange(self.n.size), self.n)  # segment of each fix
        self.kept = None

    def judge(self, min_ns: int, step_ns: int) -> tuple[np.ndarray, np.ndarray]:
        """Which segments to keep, and a reason code for the others."""
        duration = self.t_last - self.t_first
        g0 = -(-self.t_first // step_ns) * step_ns
        g1 = (self.t_last // step_ns) * step_ns
        reason = np.full(self.n.size, "", dtype=object)
        reason[g1 < g0] = "no_grid_time"
        reason[self.n < 2] = "single_fix"
        reason[duration < min_ns] = "too_short"
        self.kept = reason == ""
        return self.kept, reason


def _dropped(seg: _Segments, ids: list[str], keep: np.ndarray, reason: np.ndarray) -> list[dict]:
    out = []
    bad = np.flatnonzero(~keep)
    if not bad.size:
        return out
    start = _iso(seg.t_first[bad])
    end = _iso(seg.t_last[bad])
    drifter = seg.code[seg.first[bad]].tolist()
    n_fixes = seg.n[bad].tolist()
    hours = ((seg.t_last[bad] - seg.t_first[bad]) / (3600 * _NS)).tolist()
    why = reason[bad].tolist()
    for j in range(bad.size):
        out.append({"drifter_id": ids[drifter[j]], "start": start[j], "end": end[j],
                    "n_fixes": n_fixes[j], "duration_h": hours[j], "reason": why[j]})
    return out


def _iso(t_ns: np.ndarray) -> list[str]:
    """ISO 8601 UTC with a Z (fractional seconds only when present), like the CSV writer."""
    t_ns = np.asarray(t_ns, dtype=np.int64)
    whole = bool(np.all(t_ns % _NS == 0))
    unit = "s" if whole else ("us" if np.all(t_ns % 1000 == 0) else "ns")
    text = np.datetime_as_string(t_ns.view("M8[ns]"), unit=unit)
    return [f"{v}Z" for v in text.tolist()]


# --------------------------------------------------------------------------- projection chunks


class _Units:
    """Projection chunks ("units"): fix ranges with margins, cores and centres."""

    def __init__(self, lo, hi, core_lo, core_hi, segment) -> None:
        self.lo = lo  # first fix of the unit (margin included)
        self.hi = hi  # one past its last fix
        self.core_lo = core_lo  # first fix of the unit's own stretch
        self.core_hi = core_hi  # one past its last fix
        self.segment = segment
        self.size = hi - lo
        # flat array of the fixes of all units, unit by unit
        self.start = np.r_[0, np.cumsum(self.size)[:-1]].astype(np.int64)
        self.fix = (np.arange(int(self.size.sum()), dtype=np.int64)
                    - np.repeat(self.start - lo, self.size))
        self.of_fix = np.repeat(np.arange(lo.size), self.size)  # unit of each flat entry
        self.centre_lon = np.empty(0)
        self.centre_lat = np.empty(0)


def _unit_vectors(lat: np.ndarray, lon: np.ndarray) -> tuple[np.ndarray, ...]:
    phi, lam = np.radians(lat), np.radians(lon)
    c = np.cos(phi)
    return c * np.cos(lam), c * np.sin(lam), np.sin(phi)


def _chord_m(a: tuple, b: tuple) -> np.ndarray:
    """Chord between unit vectors a and b on the sphere of mean radius (m)."""
    dot = a[0] * b[0] + a[1] * b[1] + a[2] * b[2]
    return np.sqrt(np.maximum(2.0 - 2.0 * dot, 0.0)) * EARTH_MEAN_RADIUS_M


def _units(seg: _Segments, lat: np.ndarray, lon: np.ndarray, radius_m: float) -> _Units:
    """Cut segments into chunks of path <= radius and check every fix is within radius.

    Path lengths and distances are chords of the sphere of mean radius (only
    used to place the chunks; 0.3 % of a geodesic distance is enough).
    """
    xyz = _unit_vectors(lat, lon)
    n = lat.size
    leg = np.zeros(n)
    if n > 1:
        leg[1:] = _chord_m(tuple(c[1:] for c in xyz), tuple(c[:-1] for c in xyz))
    leg[seg.first] = 0.0
    path = np.cumsum(leg)
    path -= np.repeat(path[seg.first], seg.n)  # path from the segment's first fix
    length = np.full(seg.n.size, radius_m)  # chunk path length of each segment
    for _ in range(_MAX_HALVINGS + 1):
        units, centre = _make_units(seg, path, length, lat, lon)
        # no fix is farther from the centre than along the path; only units
        # whose margins reach beyond the radius along the path need the chords
        reach = np.maximum(path[units.hi - 1] - path[centre], path[centre] - path[units.lo])
        check = np.flatnonzero(reach > radius_m)
        if not check.size:
            break
        sub = np.isin(units.of_fix, check)
        fixes, owner = units.fix[sub], centre[units.of_fix[sub]]
        chord = _chord_m(tuple(c[fixes] for c in xyz), tuple(c[owner] for c in xyz))
        too_far = np.zeros(units.lo.size, dtype=bool)
        too_far[units.of_fix[sub][chord > radius_m]] = True
        if not too_far.any():
            break
        length[np.unique(units.segment[too_far])] *= 0.5
    return units


def _make_units(seg: _Segments, path, length, lat, lon) -> tuple[_Units, np.ndarray]:
    chunk = np.floor(path / np.repeat(length, seg.n)).astype(np.int64)
    new = np.ones(path.size, dtype=bool)
    new[1:] = (seg.index[1:] != seg.index[:-1]) | (chunk[1:] != chunk[:-1])
    core_lo = np.flatnonzero(new)
    core_hi = np.r_[core_lo[1:], path.size]
    useg = seg.index[core_lo]
    lo = np.maximum(core_lo - _MARGIN, seg.first[useg])
    hi = np.minimum(core_hi + _MARGIN, seg.last[useg] + 1)
    units = _Units(lo, hi, core_lo, core_hi, useg)
    centre = _centre_fix(units, path)
    units.centre_lon = lon[centre]
    units.centre_lat = lat[centre]
    return units, centre


def _centre_fix(units: _Units, path: np.ndarray) -> np.ndarray:
    """Return the fix of each unit's core nearest to halfway along the core's path."""
    lo, hi = units.core_lo, units.core_hi
    mid = 0.5 * (path[lo] + path[hi - 1])
    # the cores cover all fixes in order; path increases within each core,
    # so shifting each core by the running total of the spans before it
    # makes one increasing array to search
    rank = np.repeat(np.arange(lo.size), hi - lo)
    span = path[hi - 1] - path[lo] + 1.0
    base = np.r_[0.0, np.cumsum(span)[:-1]]
    glob = base[rank] + (path - path[lo][rank])
    idx = np.clip(np.searchsorted(glob, base + (mid - path[lo])), lo, hi - 1)
    before = np.maximum(idx - 1, lo)
    closer = np.abs(path[before] - mid) < np.abs(path[idx] - mid)
    return np.where(closer, before, idx)


# --------------------------------------------------------------------------- stages


class _Prepared(NamedTuple):
    """Usable fixes of the kept segments, the segments and the grid."""

    ids: list[str]
    seg: _Segments | None  # None when nothing is kept
    lat: np.ndarray
    lon: np.ndarray
    step_ns: int
    grid_first_ns: np.ndarray  # first grid time of each segment
    grid_count: np.ndarray  # grid points of each segment
    grid_segment: np.ndarray  # segment of each grid point
    grid_ns: np.ndarray  # time of each grid point (ns since 1970)
    dropped: list[dict]


def _prepare(fixes: pd.DataFrame, config: ResampleConfig) -> _Prepared:
    """Select, sort and segment the fixes, drop short segments, lay out the grid."""
    none = np.empty(0)
    step_ns = round(config.step_h * 3600 * _NS)
    selected = _select(fixes, config)
    if selected is None:
        return _Prepared([], None, none, none, step_ns, none, none, none, none, [])
    ids, code, t_ns, lat, lon = selected
    seg = _Segments(code, t_ns, round(config.max_gap_h * 3600 * _NS))
    keep, reason = seg.judge(round(config.min_segment_days * 86400 * _NS), step_ns)
    dropped = _dropped(seg, ids, keep, reason)
    if not keep.any():
        return _Prepared(ids, None, none, none, step_ns, none, none, none, none, dropped)
    if not keep.all():
        sel = np.repeat(keep, seg.n)
        seg = _Segments(code[sel], t_ns[sel], None, starts_from=seg)
        lat, lon = lat[sel], lon[sel]
    g0 = -(-seg.t_first // step_ns) * step_ns
    g1 = (seg.t_last // step_ns) * step_ns
    count = (g1 - g0) // step_ns + 1
    start = np.r_[0, np.cumsum(count)[:-1]]
    k = np.arange(int(count.sum()), dtype=np.int64) - np.repeat(start, count)
    grid_segment = np.repeat(np.arange(seg.n.size), count)
    return _Prepared(ids, seg, lat, lon, step_ns, g0, count, grid_segment,
                     g0[grid_segment] + k * step_ns, dropped)


class _Projected(NamedTuple):
    """Fixes of every unit projected about the unit's centre (flat, unit by unit)."""

    x: np.ndarray  # m
    y: np.ndarray  # m
    t: np.ndarray  # s from the unit's first fix
    sphere: geodesy._Sphere | None  # Gauss sphere of each unit (conformal method)


def _blocks(n: int):
    """Yield slices of at most _BLOCK elements.

    Long chains of NumPy operations on blocks that fit the processor cache
    run about 1.5 times faster than on whole arrays of a million elements.
    """
    for start in range(0, n, _BLOCK):
        yield slice(start, min(start + _BLOCK, n))


def _project(prep: _Prepared, units: _Units, method: str) -> _Projected:
    fix, ufix = units.fix, units.of_fix
    n = fix.size
    x, y = np.empty(n), np.empty(n)
    sphere = None
    if method == "conformal":
        sphere = geodesy._sphere(units.centre_lon, units.centre_lat)
        for b in _blocks(n):
            f = fix[b]
            x[b], y[b] = geodesy._conformal_forward(prep.lon[f], prep.lat[f],
                                                    geodesy._take(sphere, ufix[b]))
    else:
        x[:], y[:] = geodesy.aeqd_forward(prep.lon[fix], prep.lat[fix],
                                          units.centre_lon[ufix], units.centre_lat[ufix])
    t_ns = prep.seg.t_ns
    t = (t_ns[fix] - t_ns[units.lo][ufix]) / _NS
    return _Projected(x, y, t, sphere)


class _Located(NamedTuple):
    unit: np.ndarray  # unit of each grid point
    interval: np.ndarray  # flat index (in the unit arrays) of the fix starting its interval
    t: np.ndarray  # s from the unit's first fix


def _locate(prep: _Prepared, units: _Units) -> _Located:
    """Find the unit and the interval between fixes of every grid point.

    With g0 the first grid time of the segment and step the grid step,
    c_j = ceil((t_j - g0) / step) grid points come before fix j, so grid
    points c_j .. c_(j+1) - 1 lie in [t_j, t_(j+1)): the interval of every
    grid point follows by repetition, without a search.  A grid point at
    the segment's last fix takes the last interval.  It is evaluated in the
    unit whose core holds the first fix of its interval.
    """
    seg = prep.seg
    t_ns = seg.t_ns
    step = int(prep.step_ns)
    g0 = prep.grid_first_ns[seg.index]
    before = -((g0 - t_ns) // step)  # ceil((t - g0) / step), exact in integers
    count = np.empty(t_ns.size, dtype=np.int64)
    count[:-1] = before[1:] - before[:-1]
    count[seg.last] = prep.grid_count - before[seg.last]  # the point on the last fix, if any
    interval = np.repeat(np.arange(t_ns.size), count)
    at_last = interval == seg.last[prep.grid_segment]
    interval[at_last] -= 1
    core_unit = np.repeat(np.arange(units.lo.size), units.core_hi - units.core_lo)
    gu = core_unit[np.where(at_last, interval + 1, interval)]
    flat = units.start[gu] + (interval - units.lo[gu])
    tg = (prep.grid_ns - t_ns[units.lo[gu]]) / _NS
    return _Located(gu, flat, tg)


def _slopes(proj: _Projected, units: _Units, interpolator: str) -> np.ndarray | None:
    if interpolator == "linear":
        return None
    return _spline_slopes(proj.t, np.stack([proj.x, proj.y], axis=1), units)


def _spline_slopes(t: np.ndarray, v: np.ndarray, units: _Units) -> np.ndarray:
    """Slopes (first derivatives) at the fixes of the not-a-knot cubic splines of all units.

    ``t`` (s) and ``v`` (n, 2) are flat over the units.  One tridiagonal
    system for all units (de Boor 1978, ch. IV: the slope form with the
    not-a-knot end conditions); units of two fixes get the secant, of three
    the parabola.  Row i of an interior fix reads

        h_i s_(i-1) + 2 (h_(i-1) + h_i) s_i + h_(i-1) s_(i+1)
            = 3 (h_i delta_(i-1) + h_(i-1) delta_i),

    with h the steps and delta the secant slopes.
    """
    n = t.size
    first = units.start
    last = units.start + units.size - 1
    h = np.diff(t)
    h[last[:-1]] = 1.0  # the "interval" between two units: never used
    delta = np.diff(v, axis=0) / h[:, None]
    # interior rows for every fix 1..n-2; the first and last fix of each unit
    # are overwritten below
    hm, hp = h[:-1], h[1:]
    sub = np.zeros(n)  # A[i, i-1]
    diag = np.ones(n)
    sup = np.zeros(n)  # A[i, i+1]
    rhs = np.zeros((n, 2))
    sub[1:-1] = hp
    diag[1:-1] = 2.0 * (hm + hp)
    sup[1:-1] = hm
    rhs[1:-1] = 3.0 * (hp[:, None] * delta[:-1] + hm[:, None] * delta[1:])

    size = units.size
    big = size >= 4
    f, e = first[big], last[big]
    h0, h1 = h[f], h[f + 1]
    d = h0 + h1
    sub[f], diag[f], sup[f] = 0.0, h1, d
    rhs[f] = (((h0 + 2.0 * d) * h1 / d)[:, None] * delta[f]
              + (h0 * h0 / d)[:, None] * delta[f + 1])
    ha, hb = h[e - 2], h[e - 1]  # h_(m-3), h_(m-2)
    d = ha + hb
    sub[e], diag[e], sup[e] = d, ha, 0.0
    rhs[e] = ((hb * hb / d)[:, None] * delta[e - 2]
              + ((2.0 * d + hb) * ha / d)[:, None] * delta[e - 1])

    rows = []  # explicit slopes for small units: identity rows
    f = first[size == 2]
    rows += [(f, delta[f]), (f + 1, delta[f])]
    f = first[size == 3]
    h0, h1 = h[f][:, None], h[f + 1][:, None]
    c = (delta[f + 1] - delta[f]) / (h0 + h1)  # half the second derivative
    rows += [(f, delta[f] - c * h0), (f + 1, delta[f] + c * h0), (f + 2, delta[f + 1] + c * h1)]
    f = first[size == 1]  # never made by _units; slope 0
    rows += [(f, np.zeros((f.size, 2)))]
    for r, value in rows:
        sub[r], diag[r], sup[r] = 0.0, 1.0, 0.0
        rhs[r] = value
    ab = np.empty((3, n))
    ab[0, 0] = 0.0
    ab[0, 1:] = sup[:-1]
    ab[1] = diag
    ab[2, :-1] = sub[1:]
    ab[2, -1] = 0.0
    return solve_banded((1, 1), ab, rhs, check_finite=False, overwrite_ab=True,
                        overwrite_b=True)


def _evaluate(prep: _Prepared, units: _Units, proj: _Projected, loc: _Located,
              slopes: np.ndarray | None, config: ResampleConfig, sigma_gps: float) -> dict:
    """Interpolate, map back, turn velocities to east/north and bound the error, by blocks."""
    m = loc.unit.size
    out = {name: np.empty(m) for name in ("lat", "lon", "u", "v", "sigma_m", "gap_h")}
    in_gap = np.empty(m, dtype=bool)
    conformal = config.projection_method == "conformal"
    linear = slopes is None
    flag_gap_s = config.flag_gap_h * 3600.0
    accel = config.accel_m_s2
    spline_factor = (5.0 / 24.0) * accel * _OMEGA_MAX**2
    x, y, t = proj.x, proj.y, proj.t
    for b in _blocks(m):
        i, gu, tg = loc.interval[b], loc.unit[b], loc.t[b]
        t0, t1 = t[i], t[i + 1]
        h = t1 - t0
        lam = (tg - t0) / h
        x0, x1, y0, y1 = x[i], x[i + 1], y[i], y[i + 1]
        dx, dy = x1 - x0, y1 - y0
        if linear:
            gx, gy = x0 + lam * dx, y0 + lam * dy
            vx, vy = dx / h, dy / h
        else:
            sx0, sx1 = slopes[i, 0] * h, slopes[i + 1, 0] * h
            sy0, sy1 = slopes[i, 1] * h, slopes[i + 1, 1] * h
            # cubic Hermite form on [t0, t1] with lam in [0, 1]
            lam1 = lam - 1.0
            h01 = lam * lam * (3.0 - 2.0 * lam)
            h10 = lam * lam1 * lam1
            h11 = lam * lam * lam1
            gx = x0 + h01 * dx + h10 * sx0 + h11 * sx1
            gy = y0 + h01 * dy + h10 * sy0 + h11 * sy1
            d01 = 6.0 * lam * (1.0 - lam)
            d10 = (3.0 * lam - 1.0) * lam1
            d11 = lam * (3.0 * lam - 2.0)
            vx = (d01 * dx + d10 * sx0 + d11 * sx1) / h
            vy = (d01 * dy + d10 * sy0 + d11 * sy1) / h
        if conformal:
            sph = geodesy._take(proj.sphere, gu)
            lon, lat, sin_a, cos_a = geodesy._conformal_inverse(gx, gy, sph)
            radius = sph.radius
        else:
            c_lat = units.centre_lat[gu]
            lon, lat, azi = geodesy.aeqd_inverse(gx, gy, units.centre_lon[gu], c_lat)
            a = np.radians(azi)
            sin_a, cos_a = np.sin(a), np.cos(a)
            radius = geodesy._gaussian_radius(np.sin(np.radians(c_lat)))
        out["lon"][b], out["lat"][b] = lon, lat
        out["u"][b], out["v"][b] = geodesy._east_north(gx, gy, vx, vy, sin_a, cos_a, radius)
        d1 = np.maximum(tg - t0, 0.0)
        d2 = np.maximum(t1 - tg, 0.0)
        dd = d1 * d2
        bound = 0.5 * accel * dd
        if not linear:
            bound = np.minimum(spline_factor * dd * dd, bound)
        out["sigma_m"][b] = np.sqrt(sigma_gps * sigma_gps + bound * bound)
        gap = (dd > 0) & (h > flag_gap_s)
        in_gap[b] = gap
        out["gap_h"][b] = np.where(gap, h / 3600.0, 0.0)
    out["in_gap"] = in_gap
    return out


def _table(prep: _Prepared, loc: _Located, columns: dict) -> pd.DataFrame:
    seg = prep.seg
    seg_code = seg.code[seg.first]
    first_of_drifter = np.flatnonzero(np.r_[True, seg_code[1:] != seg_code[:-1]])
    rank = np.arange(seg_code.size) - np.repeat(
        first_of_drifter, np.diff(np.r_[first_of_drifter, seg_code.size]))
    gseg = prep.grid_segment
    data = {
        "drifter_id": _strings(seg_code[gseg], prep.ids),
        "segment": rank[gseg].astype(np.int32),
        "time": _utc(prep.grid_ns),
        **columns,
    }
    return pd.DataFrame({name: data[name] for name in RESAMPLED_COLUMNS})
