"""Trajectory skill of drift models against observed drifter tracks.

A drift model is calibrated by releasing a model particle where and when a
drifter was, and measuring how far the modelled track strays from the
observed one.  This module computes

- the **separation** d(t) between the observed and the modelled position at
  every observed fix time, and the observed **track length** l(t) from the
  release (:func:`separation`);
- the **skill score** of Liu & Weisberg (2011) from d and l
  (:func:`liu_weisberg_skill`);
- that score over **forecast windows** (e.g. 24, 48 and 72 h) that restart
  along the track (:func:`forecast_windows`, :func:`summarise_windows`);
- the tables, map layer (:func:`skill_layer`) and figure
  (:func:`skill_figure`) of a run, and the run itself: :func:`run_skill`
  reads observed and modelled track files, checks that every modelled track
  starts at the same time and place as its drifter, and writes
  ``separation.csv``, ``skill.csv`` (with CSVW sidecars), ``skill.json``,
  ``skill.geojson`` (RFC 7946, through :mod:`driftloop.export.geojson`) and
  ``skill.png`` (:func:`write_skill`).

Method
------
Skill score (Liu & Weisberg 2011, J. Geophys. Res. 116, C09013, article
number from memory).  With d_i the geodesic distance between the modelled
and the observed position at the i-th observed time after the release and
l_oi the length of the observed track from the release to that time,

    s = sum_{i=1..N} d_i / sum_{i=1..N} l_oi,
    ss = 1 - s / n   if s <= n,   else 0,

where n > 0 is the tolerance: the largest s still counted as having some
skill.  Liu & Weisberg used n = 1 (from memory), the default here.  ss = 1
is a perfect track; ss = 0 is a model that strays as far as the drifter
travels, or further.  Because ss is floored at zero, averages of ss over
many windows are biased upwards compared with what the separations alone
would give (Révelard et al. 2021, Front. Mar. Sci. 8, 630388, who propose
a revised score); the summaries therefore also give the mean and median of
the unfloored s and the fraction of windows with ss > 0.

Positions between model output times lie on the geodesic between the two
bracketing model positions, at the fraction of the geodesic given by the
fraction of the time interval (constant speed along each leg).  Both this
and every distance use the WGS 84 geodesics of :mod:`driftloop.geodesy`
(Karney 2013), so tracks crossing the antimeridian or passing near a pole
need no special care.  The modelled track is never extrapolated: observed
fixes after its last output time are not scored.

Forecast windows
----------------
Search-and-rescue drift evaluations restart the model at the observed
position at regular intervals and score each restarted forecast over a
fixed horizon.  driftloop does **not** re-anchor a single long model run
(shifting a model track to the observed position does not reproduce what
the model would do from there); instead each forecast is a separate
modelled track supplied by the user, starting at the observed position at
its own start time.  Such tracks are matched to their drifter by id and
each is checked against the observed track at its start.  For a window of
W hours and a restart interval R (default W), the modelled tracks used are
those that start at t_ref + k R (k = 0, 1, ...) within the start-time
tolerance, t_ref being the earliest modelled start for that drifter; each
is scored over the observed fixes in (t0, t0 + W].  A single modelled
track from the release thus gives one window of each length.

References
----------
Liu, Y., and R. H. Weisberg, 2011: Evaluation of trajectory modeling in
different dynamic regions using normalized cumulative Lagrangian
separation.  J. Geophys. Res., 116, C09013 (article number from memory).

Révelard, A., and co-authors, 2021: Front. Mar. Sci., 8, 630388 (revised
skill score; author list and title from memory).

Karney, C. F. F., 2013: Algorithms for geodesics.  J. Geodesy, 87, 43-55.

Okabe, M., and K. Ito, 2008: Color Universal Design (CUD): how to make
figures and presentations that are friendly to colorblind people (web
page; title from memory).  Source of the figure colours.
"""

from __future__ import annotations

import dataclasses
import math
import os
from collections.abc import Iterable, Mapping, Sequence
from dataclasses import dataclass, field
from datetime import UTC, datetime
from pathlib import Path
from typing import Any, NamedTuple

import numpy as np
import pandas as pd
from numpy.typing import ArrayLike

from driftloop import geodesy
from driftloop.config import QCConfig, ReadConfig, SkillConfig
from driftloop.errors import InputError
from driftloop.io.schema import wrap_lon
from driftloop.io.writers import atomic_open, format_time, write_json
from driftloop.notices import CAUTION

__all__ = [
    "SEPARATION_COLUMNS",
    "SKILL_COLUMNS",
    "SkillConfig",
    "SkillResult",
    "TrajectorySkill",
    "forecast_windows",
    "liu_weisberg_skill",
    "positions_at",
    "run_skill",
    "separation",
    "skill_figure",
    "skill_layer",
    "write_skill",
    "summarise_windows",
]

#: Columns of ``separation.csv`` (and of :attr:`SkillResult.separation`).
SEPARATION_COLUMNS = (
    "drifter_id",
    "run_id",
    "run_start",
    "time",
    "elapsed_h",
    "lat_obs",
    "lon_obs",
    "lat_model",
    "lon_model",
    "separation_m",
    "obs_length_m",
    "s_to_here",
    "ss_to_here",
)

#: Columns of ``skill.csv`` (and of :attr:`SkillResult.windows`).
SKILL_COLUMNS = (
    "drifter_id",
    "run_id",
    "window_h",
    "restart_h",
    "start_time",
    "end_time",
    "status",
    "n_points",
    "separation_sum_m",
    "length_sum_m",
    "s",
    "ss",
    "final_separation_m",
    "final_length_m",
)

#: Window statuses: ``ok`` is scored; the others say why a window is not.
WINDOW_STATUS = {
    "ok": "scored",
    "observed_short": "the observed track ends before the window does",
    "observed_gap": "the observed track has a gap longer than max_gap_h in the window",
    "model_short": "the modelled track ends before the window does",
    "no_points": "no observed fix after the start within the window",
}

#: Figure colours, from the palette of Okabe & Ito (2008), distinguishable
#: with the common forms of colour blindness.
PALETTE = ("#0072B2", "#E69F00", "#009E73", "#D55E00", "#56B4E9", "#CC79A7", "#000000")

_NS = 1e-9


# ---------------------------------------------------------------------------
# configuration
# ---------------------------------------------------------------------------




# ---------------------------------------------------------------------------
# geometry
# ---------------------------------------------------------------------------


def _seconds(times: Any) -> np.ndarray:
    """UTC times (anything pandas reads; naive = UTC) -> float seconds since 1970."""
    index = pd.DatetimeIndex(pd.to_datetime(pd.Series(times), utc=True))
    if index.isna().any():
        raise ValueError("times must not be missing (NaT)")
    return index.as_unit("ns").asi8.astype(float) * _NS


def _track(frame: pd.DataFrame, name: str) -> tuple[np.ndarray, np.ndarray, np.ndarray, pd.Series]:
    """Validate a track table and return its time (s), lon, lat and UTC times."""
    missing = [c for c in ("time", "lat", "lon") if c not in frame.columns]
    if missing:
        raise ValueError(f"{name} track lacks column(s) {missing}; expected time, lat, lon")
    times = pd.Series(pd.to_datetime(frame["time"], utc=True).to_numpy(), name="time")
    t = _seconds(times)
    lon = np.asarray(frame["lon"], dtype=float)
    lat = np.asarray(frame["lat"], dtype=float)
    if t.size == 0:
        raise ValueError(f"{name} track is empty")
    if not (np.isfinite(lon).all() and np.isfinite(lat).all()):
        raise ValueError(f"{name} track has missing or infinite positions")
    if np.any(np.abs(lat) > 90):
        raise ValueError(f"{name} track has latitudes outside [-90, 90]")
    if np.any(np.diff(t) <= 0):
        raise ValueError(f"{name} track times must increase strictly")
    return t, wrap_lon(lon), lat, times


def positions_at(
    time_s: ArrayLike, lon: ArrayLike, lat: ArrayLike, at_s: ArrayLike
) -> tuple[np.ndarray, np.ndarray]:
    """Positions along a track at given times, moving along each leg's geodesic.

    Between two track points the position moves along the WGS 84 geodesic
    joining them at constant speed: at the fraction q of the time interval
    it is the point at distance q s12 along the geodesic (direct problem
    from the first point with its azimuth alpha1; Karney 2013).  This is
    exact across the antimeridian and near the poles, unlike linear
    interpolation of degrees.

    Parameters
    ----------
    time_s : array_like
        Track times, seconds (any epoch), strictly increasing, length n.
    lon, lat : array_like
        Track positions: longitude, degrees east; latitude, degrees north.
    at_s : array_like
        Times at which positions are wanted, seconds (same epoch).

    Returns
    -------
    lon, lat : numpy.ndarray
        Positions (degrees; longitude in [-180, 180)) of the shape of
        ``at_s``; NaN outside [time_s[0], time_s[-1]] (no extrapolation).

    Examples
    --------
    Half-way between 179.5 E and 179.5 W on the equator is the antimeridian:

    >>> lon, lat = positions_at([0.0, 3600.0], [179.5, -179.5], [0.0, 0.0], [1800.0])
    >>> print(f"{abs(float(lon[0])):.6f} {float(lat[0]):.6f}")
    180.000000 0.000000
    """
    t = np.asarray(time_s, dtype=float)
    x = np.asarray(lon, dtype=float)
    y = np.asarray(lat, dtype=float)
    q = np.asarray(at_s, dtype=float)
    if t.ndim != 1 or x.shape != t.shape or y.shape != t.shape or t.size == 0:
        raise ValueError(f"time_s, lon and lat must be 1-D of one non-zero length, got "
                         f"{t.shape}, {x.shape}, {y.shape}")
    if np.any(np.diff(t) <= 0):
        raise ValueError("time_s must increase strictly")
    out_lon = np.full(q.shape, np.nan)
    out_lat = np.full(q.shape, np.nan)
    inside = (q >= t[0]) & (q <= t[-1])
    if not inside.any():
        return out_lon, out_lat
    tq = q[inside]
    if t.size == 1:
        out_lon[inside], out_lat[inside] = x[0], y[0]
        return out_lon, out_lat
    k = np.clip(np.searchsorted(t, tq, side="right") - 1, 0, t.size - 2)
    frac = (tq - t[k]) / (t[k + 1] - t[k])
    leg = geodesy.inverse(x[k], y[k], x[k + 1], y[k + 1])
    end = geodesy.forward(x[k], y[k], leg.azimuth1_deg, frac * leg.distance_m)
    out_lon[inside] = wrap_lon(end.lon_deg)
    out_lat[inside] = end.lat_deg
    return out_lon, out_lat


def separation(observed: pd.DataFrame, modelled: pd.DataFrame) -> pd.DataFrame:
    """Separation between a modelled and an observed track, at the observed times.

    The release is the modelled track's first time t0.  Rows are the
    observed fixes from t0 to the modelled track's last time; the modelled
    position at each is found along the geodesics of the modelled track
    (:func:`positions_at`).

    Parameters
    ----------
    observed, modelled : pandas.DataFrame
        Tracks with columns ``time`` (UTC; naive values are UTC), ``lat``
        (degrees north) and ``lon`` (degrees east); times strictly
        increasing, positions finite.  Their sampling times may differ.

    Returns
    -------
    pandas.DataFrame
        One row per scored observed fix, columns ``time`` (UTC),
        ``elapsed_s`` (s since t0), ``lat_obs``, ``lon_obs``,
        ``lat_model``, ``lon_model`` (degrees), ``separation_m`` (geodesic
        distance d(t), m) and ``obs_length_m`` (observed track length l(t)
        from the observed position at t0, summed over geodesic legs, m).
        Empty when the tracks do not overlap in time.

    Raises
    ------
    ValueError
        If a track lacks a column, is empty, has non-finite positions or
        times that do not increase strictly.

    Notes
    -----
    The observed position at t0 is interpolated along the observed track's
    geodesics when t0 lies within it; when the model starts before the
    first observed fix, l(t) counts from that fix.  Distances and lengths
    are geodesics on WGS 84 (Karney 2013, through :mod:`driftloop.geodesy`).

    Examples
    --------
    >>> obs = pd.DataFrame({"time": pd.to_datetime(["2024-01-01T00:00Z", "2024-01-01T01:00Z"]),
    ...                     "lat": [0.0, 0.0], "lon": [0.0, 0.01]})
    >>> mod = pd.DataFrame({"time": pd.to_datetime(["2024-01-01T00:00Z", "2024-01-01T02:00Z"]),
    ...                     "lat": [0.0, 0.0], "lon": [0.0, 0.04]})
    >>> table = separation(obs, mod)
    >>> print(table[["separation_m", "obs_length_m"]].round(1).to_string(index=False))
     separation_m  obs_length_m
              0.0           0.0
           1113.2        1113.2
    """
    to, lono, lato, times_o = _track(observed, "observed")
    tm, lonm, latm, _ = _track(modelled, "modelled")
    t0 = tm[0]
    idx = np.flatnonzero((to >= t0) & (to <= tm[-1]))
    if idx.size == 0:
        return _empty_separation()
    if to[0] <= t0:
        lon_r, lat_r = positions_at(to, lono, lato, [t0])
    else:
        lon_r, lat_r = lono[idx[:1]], lato[idx[:1]]
    path_lon = np.concatenate([lon_r, lono[idx]])
    path_lat = np.concatenate([lat_r, lato[idx]])
    length = np.cumsum(geodesy.leg_distances(path_lon, path_lat))
    lon_m, lat_m = positions_at(tm, lonm, latm, to[idx])
    dist = geodesy.inverse(lono[idx], lato[idx], lon_m, lat_m).distance_m
    return pd.DataFrame(
        {
            "time": times_o.iloc[idx].reset_index(drop=True),
            "elapsed_s": to[idx] - t0,
            "lat_obs": lato[idx],
            "lon_obs": lono[idx],
            "lat_model": lat_m,
            "lon_model": lon_m,
            "separation_m": dist,
            "obs_length_m": length,
        }
    )


def _empty_separation() -> pd.DataFrame:
    table = pd.DataFrame(
        {name: pd.Series(dtype=float) for name in
         ("elapsed_s", "lat_obs", "lon_obs", "lat_model", "lon_model", "separation_m",
          "obs_length_m")}
    )
    table.insert(0, "time", pd.Series(pd.DatetimeIndex([], tz="UTC")))
    return table


# ---------------------------------------------------------------------------
# the skill score
# ---------------------------------------------------------------------------


class TrajectorySkill(NamedTuple):
    """The skill score of Liu & Weisberg (2011) and what it is made of.

    Attributes
    ----------
    s : float
        Normalised cumulative separation sum(d) / sum(l) (dimensionless;
        ``inf`` when the observed drifter did not move but the model did).
    ss : float
        Skill score in [0, 1].
    n_points : int
        Number of times N in the sums.
    separation_sum_m : float
        sum of d_i (m).
    length_sum_m : float
        sum of l_oi (m).
    """

    s: float
    ss: float
    n_points: int
    separation_sum_m: float
    length_sum_m: float


def liu_weisberg_skill(d: ArrayLike, l: ArrayLike, n: float = 1.0) -> TrajectorySkill:  # noqa: E741
    """Skill score of a modelled trajectory (Liu & Weisberg 2011).

    Parameters
    ----------
    d : array_like
        Separation between modelled and observed positions at the N times
        after the release, d_i (m).
    l : array_like
        Length of the observed track from the release to those times,
        l_oi (m), same length as ``d``.
    n : float, optional
        Tolerance (> 0, dimensionless); Liu & Weisberg used 1 (from memory).

    Returns
    -------
    TrajectorySkill
        ``s`` = sum(d) / sum(l) and ``ss`` = 1 - s/n if s <= n, else 0.

    Raises
    ------
    ValueError
        If ``d`` and ``l`` are not 1-D of one non-zero length, hold negative
        or non-finite values, or ``n`` is not positive.

    Notes
    -----
    Liu, Y., and R. H. Weisberg (2011), "Evaluation of trajectory modeling
    in different dynamic regions using normalized cumulative Lagrangian
    separation", J. Geophys. Res. 116, C09013 (article number from memory):

        s = sum_{i=1..N} d_i / sum_{i=1..N} l_oi,
        ss = 1 - s/n  (s <= n),   ss = 0  (s > n).

    Dividing by the cumulative observed length makes s comparable between
    slow and fast flows.  If the observed drifter did not move at all
    (sum l = 0), s is 0 when the model did not move either and infinite
    otherwise.  The zero floor biases averages of ss over many windows
    (Révelard et al. 2021, Front. Mar. Sci. 8, 630388); average s as well.

    Examples
    --------
    >>> r = liu_weisberg_skill([1000.0, 2000.0, 3000.0], [2000.0, 4000.0, 6000.0])
    >>> print(f"s = {r.s:.3f}, ss = {r.ss:.3f}")
    s = 0.500, ss = 0.500
    """
    d = np.asarray(d, dtype=float)
    l = np.asarray(l, dtype=float)  # noqa: E741
    if d.ndim != 1 or d.shape != l.shape or d.size == 0:
        raise ValueError(f"d and l must be 1-D of one non-zero length, got shapes "
                         f"{d.shape} and {l.shape}")
    if not (np.isfinite(d).all() and np.isfinite(l).all()):
        raise ValueError("d and l must be finite")
    if (d < 0).any() or (l < 0).any():
        raise ValueError("d and l are distances and must not be negative")
    if not (isinstance(n, int | float | np.floating) and math.isfinite(n) and n > 0):
        raise ValueError(f"the tolerance n must be a positive number, got {n!r}")
    total_d = float(d.sum())
    total_l = float(l.sum())
    if total_l > 0:
        s = total_d / total_l
    else:
        s = 0.0 if total_d == 0 else math.inf
    ss = 1.0 - s / n if s <= n else 0.0
    return TrajectorySkill(s, ss, int(d.size), total_d, total_l)


def _cumulative_skill(
    d: np.ndarray, length: np.ndarray, n: float
) -> tuple[np.ndarray, np.ndarray]:
    """Return s and ss from the release to each row; NaN d (at the release) is left out."""
    after = np.isfinite(d) & (length >= 0)
    cd = np.cumsum(np.where(after, d, 0.0))
    cl = np.cumsum(np.where(after, length, 0.0))
    with np.errstate(divide="ignore", invalid="ignore"):
        s = np.where(cl > 0, cd / cl, np.where(cd > 0, np.inf, np.nan))
    ss = np.where(np.isnan(s), np.nan, np.where(s <= n, 1.0 - s / n, 0.0))
    return s, ss


# ---------------------------------------------------------------------------
# forecast windows
# ---------------------------------------------------------------------------


def _score_window(
    sep: pd.DataFrame,
    obs_t: np.ndarray,
    t0: float,
    model_end: float,
    window_s: float,
    *,
    n: float,
    time_tol_s: float,
    max_gap_s: float,
) -> dict:
    """Score one modelled track over (t0, t0 + window_s]; sep from :func:`separation`."""
    end = t0 + window_s
    row: dict[str, Any] = {"status": "ok", "n_points": 0}
    near = obs_t[(obs_t >= t0) & (obs_t <= end)]
    before = obs_t[obs_t < t0][-1:]
    after = obs_t[obs_t > end][:1]
    span = np.concatenate([before, near, after])
    if obs_t[-1] < end - time_tol_s:
        row["status"] = "observed_short"
    elif span.size < 2 or np.max(np.diff(span)) > max_gap_s:
        row["status"] = "observed_gap"
    elif model_end < end - time_tol_s:
        row["status"] = "model_short"
    elapsed = sep["elapsed_s"].to_numpy()
    sel = (elapsed > 0) & (elapsed <= window_s)
    row["n_points"] = int(sel.sum())
    if row["status"] == "ok" and row["n_points"] == 0:
        row["status"] = "no_points"
    if row["status"] != "ok":
        row.update(separation_sum_m=np.nan, length_sum_m=np.nan, s=np.nan, ss=np.nan,
                   final_separation_m=np.nan, final_length_m=np.nan)
        return row
    d = sep["separation_m"].to_numpy()[sel]
    length = sep["obs_length_m"].to_numpy()[sel]
    score = liu_weisberg_skill(d, length, n)
    row.update(separation_sum_m=score.separation_sum_m, length_sum_m=score.length_sum_m,
               s=score.s, ss=score.ss, final_separation_m=float(d[-1]),
               final_length_m=float(length[-1]))
    return row


def forecast_windows(
    observed: pd.DataFrame,
    runs: Mapping[str, pd.DataFrame],
    windows_h: Sequence[float] = (24.0, 48.0, 72.0),
    *,
    restart_h: float | None = None,
    tolerance_n: float = 1.0,
    start_time_tol_s: float = 3600.0,
    max_gap_h: float = 6.0,
) -> pd.DataFrame:
    """Skill of restarted forecasts over windows of fixed length.

    Parameters
    ----------
    observed : pandas.DataFrame
        The observed track of one drifter: ``time``, ``lat``, ``lon``,
        times strictly increasing.
    runs : mapping of str to pandas.DataFrame
        Modelled tracks of that drifter by run id, each a track like
        ``observed`` that starts at the observed position at its start time
        (checked by :func:`run_skill`, not here).
    windows_h : sequence of float, optional
        Window lengths W (h).
    restart_h : float or None, optional
        Interval R between window starts (h); ``None`` uses W.
    tolerance_n : float, optional
        Tolerance n of the skill score.
    start_time_tol_s : float, optional
        How far from the schedule t_ref + k R a modelled start may be (s),
        and how much earlier than t0 + W the observed and modelled tracks
        may end (s).
    max_gap_h : float, optional
        Longest interval between observed fixes inside a window (h).

    Returns
    -------
    pandas.DataFrame
        One row per window length and modelled track on the restart
        schedule, columns :data:`SKILL_COLUMNS` less ``drifter_id``; windows
        that cannot be scored have a ``status`` other than ``"ok"`` (see
        :data:`WINDOW_STATUS`) and NaN scores.

    Notes
    -----
    Each window is scored with :func:`liu_weisberg_skill` over the observed
    fixes in (t0, t0 + W], with d and l counted from that window's own
    start t0 (the restarted release), following the practice of restarting
    the model at the observed position (Liu & Weisberg 2011).
    """
    if not runs:
        return pd.DataFrame(columns=[c for c in SKILL_COLUMNS if c != "drifter_id"])
    obs_t, _, _, _ = _track(observed, "observed")
    prepared = []
    for run_id, track in runs.items():
        tm, _, _, times_m = _track(track, f"modelled ({run_id})")
        prepared.append((run_id, tm, times_m.iloc[0], separation(observed, track)))
    t_ref = min(p[1][0] for p in prepared)
    rows = []
    for window in windows_h:
        window = float(window)
        if not window > 0:
            raise ValueError(f"window lengths must be positive, got {window}")
        restart = float(window if restart_h is None else restart_h)
        if not restart > 0:
            raise ValueError(f"restart_h must be positive, got {restart_h}")
        for run_id, tm, start_time, sep in prepared:
            offset = tm[0] - t_ref
            k = round(offset / (restart * 3600.0))
            if abs(offset - k * restart * 3600.0) > start_time_tol_s:
                continue
            row = _score_window(sep, obs_t, tm[0], tm[-1], window * 3600.0, n=tolerance_n,
                                time_tol_s=start_time_tol_s, max_gap_s=max_gap_h * 3600.0)
            rows.append({"run_id": run_id, "window_h": window, "restart_h": restart,
                         "start_time": start_time,
                         "end_time": start_time + pd.Timedelta(hours=window), **row})
    columns = [c for c in SKILL_COLUMNS if c != "drifter_id"]
    if not rows:
        return pd.DataFrame(columns=columns)
    table = pd.DataFrame(rows).loc[:, columns]
    return table.sort_values(["window_h", "start_time", "run_id"], kind="stable",
                             ignore_index=True)


def _window_stats(table: pd.DataFrame) -> dict:
    if len(table) == 0:
        table = pd.DataFrame(columns=list(SKILL_COLUMNS))
    ok = table[table["status"] == "ok"]
    ss = ok["ss"].to_numpy(dtype=float)
    s = ok["s"].to_numpy(dtype=float)
    counts = table["status"].value_counts()
    return {
        "scheduled": int(len(table)),
        "scored": int(len(ok)),
        "not_scored": {k: int(v) for k, v in counts.items() if k != "ok"},
        "mean_ss": float(np.mean(ss)) if ss.size else None,
        "median_ss": float(np.median(ss)) if ss.size else None,
        "fraction_ss_positive": float(np.mean(ss > 0)) if ss.size else None,
        "mean_s": float(np.mean(s)) if s.size else None,
        "median_s": float(np.median(s)) if s.size else None,
        "mean_final_separation_m": float(ok["final_separation_m"].mean()) if ss.size else None,
    }


def summarise_windows(windows: pd.DataFrame, windows_h: Sequence[float] = ()) -> dict:
    """Summary statistics of window skill, per window length.

    Parameters
    ----------
    windows : pandas.DataFrame
        Rows as returned by :func:`forecast_windows` (any number of drifters).
    windows_h : sequence of float, optional
        Window lengths (h) to report even if ``windows`` has no row for them.

    Returns
    -------
    dict
        ``{"24": {...}, "48": {...}}`` keyed by the window length in hours
        (``"%g"`` format), each with ``scheduled`` (windows on the restart
        schedule), ``scored``, ``not_scored``
        (counts by status), ``mean_ss``, ``median_ss``,
        ``fraction_ss_positive``, ``mean_s``, ``median_s`` and
        ``mean_final_separation_m``; ``None`` where nothing was scored.

    Notes
    -----
    ss is floored at zero, so ``mean_ss`` is biased upwards relative to the
    separations (Révelard et al. 2021, Front. Mar. Sci. 8, 630388); read it
    beside ``mean_s``, ``median_s`` and ``fraction_ss_positive``.
    """
    lengths = sorted({float(w) for w in windows_h}
                     | {float(w) for w in windows.get("window_h", pd.Series(dtype=float))})
    out = {}
    for window in lengths:
        group = windows[windows["window_h"] == window] if len(windows) else windows
        out[f"{window:g}"] = _window_stats(group)
    return out


# ---------------------------------------------------------------------------
# reading and checking the inputs of a run
# ---------------------------------------------------------------------------


class _Run(NamedTuple):
    run_id: str
    model_id: str
    drifter_id: str
    file: str
    first_row: int
    track: pd.DataFrame


def _usable(fixes: pd.DataFrame) -> pd.Series:
    return (
        (fixes["parse_error"].fillna("") == "")
        & fixes["time"].notna()
        & np.isfinite(fixes["lat"].to_numpy(dtype=float))
        & np.isfinite(fixes["lon"].to_numpy(dtype=float))
        & (fixes["lat"].abs() <= 90)
        & (fixes["lon"] >= -180)
        & (fixes["lon"] < 180)
    )


def _dedupe(group: pd.DataFrame, what: str) -> pd.DataFrame:
    """Drop repeated records of one instant; refuse one instant at two places."""
    t = group["time"].to_numpy()
    same = np.flatnonzero(t[1:] == t[:-1]) + 1
    if same.size == 0:
        return group
    for k in same:
        a, b = group.iloc[k - 1], group.iloc[k]
        if a["lat"] != b["lat"] or a["lon"] != b["lon"]:
            raise InputError(str(b["source_file"]),
                             f"{what} {b['drifter_id']!r} has two positions at "
                             f"{format_time(pd.Series([b['time']])).iloc[0]}; expected one "
                             "position per time", row=int(b["source_row"]))
    return group.drop(group.index[same])


def _observed_tracks(
    fixes: pd.DataFrame, config: SkillConfig, qc_config: QCConfig | None
) -> tuple[dict[str, pd.DataFrame], dict[str, int]]:
    """Usable observed fixes per drifter, sorted by time; and fixes used per file."""
    if config.observed_qc and len(fixes):
        from driftloop.qc import FLAG_PASS, FLAG_SUSPECT, run_qc

        qc_config = qc_config or QCConfig()
        parts = [run_qc(group, qc_config)
                 for _, group in fixes.groupby("drifter_id", sort=True, observed=True)]
        flagged = pd.concat(parts).loc[fixes.index] if parts else fixes.assign(qc_flag=4)
        keep = flagged["qc_flag"].isin([FLAG_PASS, FLAG_SUSPECT]) & _usable(fixes)
    else:
        keep = _usable(fixes)
    used = fixes[keep]
    tracks = {}
    for drifter, group in used.groupby("drifter_id", sort=True, observed=True):
        group = group.sort_values("time", kind="stable")
        tracks[str(drifter)] = _dedupe(group, "observed drifter")
    per_file = used["source_file"].astype(str).value_counts().to_dict()
    return tracks, {k: int(v) for k, v in per_file.items()}


def _modelled_runs(fixes: pd.DataFrame) -> tuple[list[_Run], dict[str, int]]:
    """Split modelled fixes into runs: per file and id, a new run where time goes back."""
    keep = _usable(fixes)
    used = fixes[keep]
    pieces = []
    for (file, model_id), group in used.groupby(["source_file", "drifter_id"], sort=False,
                                                observed=True):
        group = group.sort_values("source_row", kind="stable")
        t = group["time"].to_numpy()
        starts = np.concatenate([[0], np.flatnonzero(t[1:] < t[:-1]) + 1, [len(group)]])
        for a, b in zip(starts[:-1], starts[1:], strict=True):
            part = _dedupe(group.iloc[a:b], "modelled track")
            pieces.append((str(file), str(model_id), part))
    counts: dict[str, int] = {}
    for _, model_id, _ in pieces:
        counts[model_id] = counts.get(model_id, 0) + 1
    runs, seen = [], {}
    for file, model_id, part in pieces:
        run_id = model_id
        if counts[model_id] > 1:
            seen[model_id] = seen.get(model_id, 0) + 1
            run_id = f"{model_id}#{seen[model_id]}"
        runs.append(_Run(run_id, model_id, "", file, int(part["source_row"].iloc[0]),
                         part.loc[:, ["time", "lat", "lon"]].reset_index(drop=True)))
    per_file = used["source_file"].astype(str).value_counts().to_dict()
    return runs, {k: int(v) for k, v in per_file.items()}


def _match(model_id: str, observed_ids: Iterable[str], pairs: Mapping[str, str],
           separator: str) -> str | None:
    if model_id in pairs:
        return pairs[model_id]
    ids = set(observed_ids)
    if model_id in ids:
        return model_id
    head = model_id
    while separator in head:
        head = head.rsplit(separator, 1)[0]
        if head in ids:
            return head
    return None


def _iso(t: pd.Timestamp | float) -> str:
    if not isinstance(t, pd.Timestamp):
        t = pd.Timestamp(int(round(t * 1e9)), tz="UTC")
    return format_time(pd.Series([t])).iloc[0]


def _check_start(run: _Run, observed: pd.DataFrame, config: SkillConfig,
                 observed_files: str) -> dict:
    """Refuse a modelled track that does not start where and when its drifter was."""
    to, lono, lato, _ = _track(observed, "observed")
    tm0 = _seconds(run.track["time"].iloc[:1])[0]
    lon_m0 = float(run.track["lon"].iloc[0])
    lat_m0 = float(run.track["lat"].iloc[0])
    nearest = int(np.argmin(np.abs(to - tm0)))
    dt = abs(float(to[nearest] - tm0))
    where = (f"modelled track {run.model_id!r} starts at {_iso(tm0)} "
             f"({lat_m0:.5f} N, {lon_m0:.5f} E)")
    if dt > config.start_time_tol_s:
        raise InputError(
            run.file,
            f"{where}, but observed drifter {run.drifter_id!r} ({observed_files}) has no usable "
            f"fix within {config.start_time_tol_s:g} s (start_time_tol_s) of that time; its "
            f"nearest is at {_iso(float(to[nearest]))}, {dt / 3600:.2f} h away; expected a "
            "modelled track released at an observed fix",
            row=run.first_row,
        )
    if to[0] <= tm0 <= to[-1]:
        lon_o, lat_o = positions_at(to, lono, lato, [tm0])
        lon_o, lat_o = float(lon_o[0]), float(lat_o[0])
    else:
        lon_o, lat_o = float(lono[nearest]), float(lato[nearest])
    dist = float(geodesy.inverse(lon_m0, lat_m0, lon_o, lat_o).distance_m)
    if dist > config.start_distance_tol_m:
        raise InputError(
            run.file,
            f"{where}, {dist:.0f} m from observed drifter {run.drifter_id!r} "
            f"({observed_files}), which was at ({lat_o:.5f} N, {lon_o:.5f} E) then; expected a "
            f"start within {config.start_distance_tol_m:g} m (start_distance_tol_m)",
            row=run.first_row,
        )
    return {"start_time_offset_s": float(tm0 - to[nearest]), "start_offset_m": dist}


# ---------------------------------------------------------------------------
# outputs: GeoJSON, figure, CSV metadata
# ---------------------------------------------------------------------------


def _track_line(track: pd.DataFrame):
    from shapely import LineString

    return LineString(np.column_stack([track["lon"].to_numpy(dtype=float),
                                       track["lat"].to_numpy(dtype=float)]))


def skill_layer(
    observed: Mapping[str, pd.DataFrame],
    runs: Sequence[Any],
    separation_table: pd.DataFrame,
):
    """Map layer of the observed and modelled tracks and of their separations.

    Parameters
    ----------
    observed : mapping of str to pandas.DataFrame
        Observed track (``time``, ``lat``, ``lon``) by drifter id.
    runs : sequence
        Modelled tracks: objects with attributes ``run_id``, ``drifter_id``
        and ``track`` (a ``time``, ``lat``, ``lon`` table).
    separation_table : pandas.DataFrame
        Rows with ``run_id``, ``drifter_id``, ``time``, ``elapsed_h``,
        ``lat_obs``, ``lon_obs``, ``lat_model``, ``lon_model``,
        ``separation_m`` (as in ``separation.csv``).

    Returns
    -------
    geopandas.GeoDataFrame
        EPSG:4326 lines with properties ``kind`` (``observed``,
        ``modelled`` or ``separation``), ``drifter_id``, ``run_id``,
        ``start_time`` and ``end_time`` (tracks), ``time``, ``elapsed_h``
        and ``separation_m`` (separation lines, one from the observed to the
        modelled position at each scored time after a release).  Lines are
        given vertex to vertex; :func:`driftloop.export.geojson.write_geojson`
        cuts them at the antimeridian and rounds them for RFC 7946.
    """
    import geopandas as gpd
    from shapely import linestrings

    nat = pd.NaT
    rows, geoms = [], []
    for drifter, track in observed.items():
        if len(track) >= 2:
            rows.append(("observed", drifter, None, track["time"].iloc[0],
                         track["time"].iloc[-1], nat, np.nan, np.nan))
            geoms.append(_track_line(track))
    for run in runs:
        if len(run.track) >= 2:
            rows.append(("modelled", run.drifter_id, run.run_id, run.track["time"].iloc[0],
                         run.track["time"].iloc[-1], nat, np.nan, np.nan))
            geoms.append(_track_line(run.track))
    frame = pd.DataFrame(rows, columns=["kind", "drifter_id", "run_id", "start_time",
                                        "end_time", "time", "elapsed_h", "separation_m"])
    sep = separation_table[separation_table["elapsed_h"] > 0]
    if len(sep):
        lines = linestrings(np.stack([
            np.column_stack([sep["lon_obs"], sep["lat_obs"]]),
            np.column_stack([sep["lon_model"], sep["lat_model"]]),
        ], axis=1).astype(float))
        extra = pd.DataFrame({
            "kind": "separation", "drifter_id": sep["drifter_id"].to_numpy(dtype=object),
            "run_id": sep["run_id"].to_numpy(dtype=object), "start_time": nat,
            "end_time": nat, "time": sep["time"].to_numpy(),
            "elapsed_h": sep["elapsed_h"].to_numpy(dtype=float),
            "separation_m": sep["separation_m"].to_numpy(dtype=float)})
        frame = pd.concat([frame, extra], ignore_index=True) if len(frame) else extra
        geoms.extend(lines)
    for name in ("start_time", "end_time", "time"):
        frame[name] = pd.to_datetime(frame[name], utc=True)
    for name in ("kind", "drifter_id", "run_id"):
        frame[name] = frame[name].astype(object)
    return gpd.GeoDataFrame(frame, geometry=gpd.GeoSeries(geoms, crs="EPSG:4326"),
                            crs="EPSG:4326")


def skill_figure(separation_table: pd.DataFrame, windows: pd.DataFrame):
    """Figure of separation against time and of skill against window length.

    Parameters
    ----------
    separation_table : pandas.DataFrame
        Rows with ``drifter_id``, ``run_id``, ``elapsed_h``, ``separation_m``.
    windows : pandas.DataFrame
        Rows with ``window_h``, ``status``, ``ss``.

    Returns
    -------
    matplotlib.figure.Figure
        Two panels: separation (km) against time since each release (h),
        one line per modelled track coloured by drifter; and the skill score
        of every scored window against its length (h) with the mean and
        median per length.  Drawn with the Agg canvas (no display needed).
    """
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.figure import Figure

    fig = Figure(figsize=(10.0, 4.2), layout="constrained")
    FigureCanvasAgg(fig)
    ax1, ax2 = fig.subplots(1, 2)
    drifters = sorted(separation_table["drifter_id"].astype(str).unique()) \
        if len(separation_table) else []
    colour = {d: PALETTE[k % len(PALETTE)] for k, d in enumerate(drifters)}
    labelled = set()
    for (drifter, _run), group in separation_table.groupby(["drifter_id", "run_id"],
                                                           sort=True):
        label = None
        if str(drifter) not in labelled and len(drifters) <= 12:
            label = str(drifter)
            labelled.add(str(drifter))
        ax1.plot(group["elapsed_h"], group["separation_m"] / 1000.0, lw=1.0, alpha=0.8,
                 color=colour[str(drifter)], label=label)
    ax1.set_xlabel("time since release (h)")
    ax1.set_ylabel("separation, model to drifter (km)")
    ax1.set_title("Separation")
    ax1.grid(True, lw=0.3, alpha=0.5)
    if labelled:
        ax1.legend(title="drifter", fontsize="small", frameon=False)
    ok = windows[windows["status"] == "ok"] if len(windows) else windows
    lengths = sorted(ok["window_h"].unique()) if len(ok) else []
    rng = np.random.default_rng(0)  # fixed jitter so the figure is reproducible
    spacing = float(np.min(np.diff(lengths))) if len(lengths) > 1 else float(max(lengths or [1]))
    for k, w in enumerate(lengths):
        ss = ok.loc[ok["window_h"] == w, "ss"].to_numpy(dtype=float)
        x = float(w) + rng.uniform(-0.12, 0.12, ss.size) * spacing
        ax2.scatter(x, ss, s=14, color=PALETTE[4], alpha=0.6,
                    label="one window" if k == 0 else None, zorder=2)
        ax2.scatter([w], [np.mean(ss)], marker="D", s=50, color=PALETTE[3],
                    label="mean" if k == 0 else None, zorder=3)
        ax2.scatter([w], [np.median(ss)], marker="_", s=300, color=PALETTE[6], lw=2,
                    label="median" if k == 0 else None, zorder=3)
    ax2.set_xlabel("forecast window (h)")
    ax2.set_ylabel("skill score ss (dimensionless)")
    ax2.set_title("Skill (Liu & Weisberg 2011)")
    ax2.set_ylim(-0.05, 1.05)
    if lengths:
        ax2.set_xticks([float(w) for w in lengths])
        ax2.legend(fontsize="small", frameon=False, loc="lower left")
    else:
        ax2.text(0.5, 0.5, "no window could be scored", ha="center", va="center",
                 transform=ax2.transAxes)
    ax2.grid(True, lw=0.3, alpha=0.5)
    return fig


#: Column -> (CSVW datatype, unit, meaning) of ``separation.csv``.
SEPARATION_DOCS = {
    "drifter_id": ("string", "", "observed drifter"),
    "run_id": ("string", "", "modelled track (its id; #k added when an id repeats)"),
    "run_start": ("datetime", "UTC", "release time of the modelled track"),
    "time": ("datetime", "UTC", "observed fix time"),
    "elapsed_h": ("double", "h", "time since the release"),
    "lat_obs": ("double", "degrees_north", "observed latitude (WGS 84)"),
    "lon_obs": ("double", "degrees_east", "observed longitude (WGS 84)"),
    "lat_model": ("double", "degrees_north", "modelled latitude at the observed time"),
    "lon_model": ("double", "degrees_east", "modelled longitude at the observed time"),
    "separation_m": ("double", "m", "geodesic distance from the observed to the modelled position"),
    "obs_length_m": ("double", "m", "observed track length from the release"),
    "s_to_here": ("double", "1", "normalised cumulative separation from the release to here"),
    "ss_to_here": ("double", "1", "skill score from the release to here (tolerance_n)"),
}

#: Column -> (CSVW datatype, unit, meaning) of ``skill.csv``.
SKILL_DOCS = {
    "drifter_id": ("string", "", "observed drifter"),
    "run_id": ("string", "", "modelled track"),
    "window_h": ("double", "h", "window length"),
    "restart_h": ("double", "h", "interval between window starts"),
    "start_time": ("datetime", "UTC", "window start = release of the modelled track"),
    "end_time": ("datetime", "UTC", "nominal window end"),
    "status": ("string", "", "ok, or why the window is not scored: "
               + "; ".join(f"{k}: {v}" for k, v in WINDOW_STATUS.items() if k != "ok")),
    "n_points": ("integer", "", "observed fixes in the window after its start"),
    "separation_sum_m": ("double", "m", "sum of the separations"),
    "length_sum_m": ("double", "m", "sum of the observed track lengths"),
    "s": ("double", "1", "normalised cumulative separation (Liu & Weisberg 2011)"),
    "ss": ("double", "1", "skill score in [0, 1] (Liu & Weisberg 2011)"),
    "final_separation_m": ("double", "m", "separation at the last fix of the window"),
    "final_length_m": ("double", "m", "observed track length at the last fix"),
}


# ---------------------------------------------------------------------------
# the run
# ---------------------------------------------------------------------------


@dataclass
class SkillResult:
    """Everything a skill run produced.

    Attributes
    ----------
    separation : pandas.DataFrame
        ``separation.csv``: every modelled track against its drifter at the
        observed times, columns :data:`SEPARATION_COLUMNS`.
    windows : pandas.DataFrame
        ``skill.csv``: skill per forecast window, columns :data:`SKILL_COLUMNS`.
    summary : dict
        ``skill.json``: provenance, inputs, runs, summaries per window
        length for the release and per drifter, notes.
    layer : geopandas.GeoDataFrame
        ``skill.geojson``: the map layer of :func:`skill_layer`.
    config : SkillConfig
        The configuration used.
    files : list of Path
        The files written.
    """

    separation: pd.DataFrame
    windows: pd.DataFrame
    summary: dict
    layer: Any
    config: SkillConfig
    files: list[Path] = field(default_factory=list)


def _paths(paths: str | Path | Iterable[str | Path]) -> list[Path]:
    if isinstance(paths, str | Path):
        return [Path(paths)]
    return [Path(p) for p in paths]


def _provenance(config: SkillConfig, read_config: ReadConfig,
                modelled_read: ReadConfig, qc_config: QCConfig | None) -> dict:
    from driftloop import __version__

    parameters: dict[str, Any] = {"skill": dataclasses.asdict(config),
                                  "read": dataclasses.asdict(read_config)}
    if modelled_read != read_config:
        parameters["read_modelled"] = dataclasses.asdict(modelled_read)
    if config.observed_qc:
        parameters["qc"] = dataclasses.asdict(qc_config or QCConfig())
    return {"software": "driftloop", "version": __version__, "parameters": parameters}


def run_skill(
    observed_paths: str | Path | Iterable[str | Path],
    modelled_paths: str | Path | Iterable[str | Path],
    out_dir: str | Path | None,
    config: SkillConfig | None = None,
    *,
    pairs: Mapping[str, str] | None = None,
    read_config: ReadConfig | None = None,
    modelled_read_config: ReadConfig | None = None,
    qc_config: QCConfig | None = None,
    overwrite: bool = False,
) -> SkillResult:
    """Score modelled tracks against observed drifter tracks and write the outputs.

    Parameters
    ----------
    observed_paths : path or iterable of paths
        Observed track files, any format :func:`driftloop.read_tracks` reads.
    modelled_paths : path or iterable of paths
        Modelled track files, same formats.  Each (file, id) holds one or
        more modelled tracks one after another; a new track starts wherever
        the time goes back.
    out_dir : str, Path or None
        Output folder; ``None`` computes without writing.
    config : SkillConfig, optional
        Parameters; defaults to ``SkillConfig()``.
    pairs : mapping of str to str, optional
        Explicit matching: modelled id -> observed drifter id.  Ids not
        given here are matched by name: a modelled id equal to a drifter
        id, or made of the drifter id, ``config.run_separator`` and a run
        label (``ORV-A01@day3``).
    read_config : ReadConfig, optional
        How to read the observed files (and the modelled ones, unless
        ``modelled_read_config`` is given).
    modelled_read_config : ReadConfig, optional
        How to read the modelled files.
    qc_config : QCConfig, optional
        Thresholds of the quality control run on the observed fixes when
        ``config.observed_qc`` is true.
    overwrite : bool, optional
        Allow writing into a non-empty folder that is not a driftloop run.

    Returns
    -------
    SkillResult
        Tables, summary, GeoJSON and the files written.

    Raises
    ------
    InputError
        If a file cannot be read; if a modelled track matches no observed
        drifter; or if it does not start within ``start_time_tol_s`` of a
        usable observed fix and within ``start_distance_tol_m`` of the
        observed position at its start time (the message names the modelled
        file, its first row and what was expected).

    Notes
    -----
    Writes ``separation.csv``, ``skill.csv`` (each with a CSVW
    ``-metadata.json`` description), ``skill.json``, ``skill.geojson``,
    ``skill.png`` and ``provenance.json`` into ``out_dir``, each atomically
    (:func:`driftloop.io.writers.atomic_open`).  Methods: see the module
    docstring (Liu & Weisberg 2011; Karney 2013).
    """
    from driftloop.io import read_tracks

    config = config or SkillConfig()
    read_config = read_config or ReadConfig()
    modelled_read = modelled_read_config or read_config
    pairs = dict(pairs or {})
    obs_paths = _paths(observed_paths)
    mod_paths = _paths(modelled_paths)
    if not obs_paths:
        raise InputError(None, "no observed track files given")
    if not mod_paths:
        raise InputError(None, "no modelled track files given")
    prov = _provenance(config, read_config, modelled_read, qc_config)

    obs_fixes = read_tracks(sorted(obs_paths, key=str), read_config)
    mod_fixes = read_tracks(sorted(mod_paths, key=str), modelled_read)
    observed, obs_used = _observed_tracks(obs_fixes, config, qc_config)
    runs, mod_used = _modelled_runs(mod_fixes)
    if not runs:
        raise InputError(", ".join(str(p) for p in mod_paths),
                         "no usable modelled fixes (time, lat and lon) found")
    obs_files = {d: ", ".join(sorted(t["source_file"].astype(str).unique()))
                 for d, t in observed.items()}
    for target in set(pairs.values()):
        if target not in observed:
            raise InputError(None, f"pair target {target!r} is not an observed drifter with "
                             f"usable fixes; observed drifters: {', '.join(observed) or 'none'}")

    matched, run_info = [], []
    for run in runs:
        drifter = _match(run.model_id, observed, pairs, config.run_separator)
        if drifter is None:
            raise InputError(
                run.file,
                f"modelled track {run.model_id!r} matches no observed drifter; expected an id "
                f"equal to one of {', '.join(sorted(observed)) or '(none)'} or such an id "
                f"followed by {config.run_separator!r} and a run label, or an explicit pair",
                row=run.first_row,
            )
        run = run._replace(drifter_id=drifter)
        offsets = _check_start(run, observed[drifter], config, obs_files[drifter])
        matched.append(run)
        run_info.append((run, offsets))

    sep_parts, window_parts, runs_json = [], [], []
    for drifter in sorted({r.drifter_id for r in matched}):
        obs_track = observed[drifter].loc[:, ["time", "lat", "lon"]].reset_index(drop=True)
        mine = [(r, o) for r, o in run_info if r.drifter_id == drifter]
        for run, offsets in mine:
            sep = separation(obs_track, run.track)
            start = pd.Timestamp(run.track["time"].iloc[0]).tz_convert("UTC")
            s_here, ss_here = _cumulative_skill(
                np.where(sep["elapsed_s"] > 0, sep["separation_m"], np.nan),
                sep["obs_length_m"].to_numpy(), config.tolerance_n)
            part = sep.assign(drifter_id=drifter, run_id=run.run_id, run_start=start,
                              elapsed_h=sep["elapsed_s"] / 3600.0, s_to_here=s_here,
                              ss_to_here=ss_here)
            sep_parts.append(part.loc[:, list(SEPARATION_COLUMNS)])
            after = sep[sep["elapsed_s"] > 0]
            whole = (liu_weisberg_skill(after["separation_m"], after["obs_length_m"],
                                        config.tolerance_n) if len(after) else None)
            runs_json.append({
                "run_id": run.run_id, "model_id": run.model_id, "drifter_id": drifter,
                "file": run.file, "first_row": run.first_row,
                "start_time": _iso(start),
                "end_time": _iso(pd.Timestamp(run.track["time"].iloc[-1]).tz_convert("UTC")),
                "model_points": int(len(run.track)), "scored_points": int(len(after)),
                **offsets,
                "s": whole.s if whole else None, "ss": whole.ss if whole else None,
            })
        table = forecast_windows(
            obs_track, {r.run_id: r.track for r, _ in mine}, config.windows,
            restart_h=config.restart_h, tolerance_n=config.tolerance_n,
            start_time_tol_s=config.start_time_tol_s, max_gap_h=config.max_gap_h)
        if len(table):
            window_parts.append(table.assign(drifter_id=drifter).loc[:, list(SKILL_COLUMNS)])

    separation_table = (pd.concat(sep_parts, ignore_index=True) if sep_parts
                        else pd.DataFrame(columns=list(SEPARATION_COLUMNS)))
    windows = (pd.concat(window_parts, ignore_index=True) if window_parts
               else pd.DataFrame(columns=list(SKILL_COLUMNS)))
    notes = []
    unscored = sorted(set(observed) - {r.drifter_id for r in matched})
    if unscored:
        notes.append(f"observed drifters without modelled tracks: {', '.join(unscored)}")
    if len(windows) == 0 or not (windows["status"] == "ok").any():
        notes.append("no forecast window could be scored; check windows_h, restart_h and "
                     "the lengths of the modelled tracks")
    summary = {
        "provenance": prov,
        "caution": CAUTION,
        "method": {
            "score": "Liu & Weisberg (2011) normalised cumulative Lagrangian separation: "
                     "s = sum(d_i) / sum(l_oi); ss = 1 - s/n if s <= n else 0",
            "tolerance_n": config.tolerance_n,
            "windows_h": list(config.windows),
            "restart_h": config.restart_h,
            "caveat": "ss is floored at 0, so averages of ss are biased upwards "
                      "(Revelard et al. 2021, Front. Mar. Sci. 8, 630388); read mean_s, "
                      "median_s and fraction_ss_positive as well",
            "references": [
                "Liu, Y., and R. H. Weisberg (2011), J. Geophys. Res. 116, C09013",
                "Revelard, A., et al. (2021), Front. Mar. Sci. 8, 630388",
                "Karney, C. F. F. (2013), Algorithms for geodesics, J. Geodesy 87, 43-55",
            ],
        },
        "inputs": {
            "observed": [{"file": str(p), "rows": int((obs_fixes["source_file"] == str(p)).sum()),
                          "fixes_used": obs_used.get(str(p), 0)}
                         for p in sorted(obs_paths, key=str)],
            "modelled": [{"file": str(p), "rows": int((mod_fixes["source_file"] == str(p)).sum()),
                          "fixes_used": mod_used.get(str(p), 0)}
                         for p in sorted(mod_paths, key=str)],
        },
        "runs": runs_json,
        "windows": summarise_windows(windows, config.windows),
        "drifters": {
            d: {"runs": sum(1 for r in matched if r.drifter_id == d),
                "windows": summarise_windows(windows[windows["drifter_id"] == d]
                                             if len(windows) else windows, config.windows)}
            for d in sorted({r.drifter_id for r in matched})
        },
        "notes": notes,
    }
    # modelled tracks whose start is not on a window length's restart schedule
    for drifter, info in summary["drifters"].items():
        ids = [r.run_id for r in matched if r.drifter_id == drifter]
        mine = windows[windows["drifter_id"] == drifter] if len(windows) else windows
        for label, stats in info["windows"].items():
            used = set(mine.loc[mine["window_h"] == float(label), "run_id"]) if len(mine) \
                else set()
            stats["runs_off_schedule"] = [i for i in ids if i not in used]
    for label, stats in summary["windows"].items():
        stats["runs_off_schedule"] = sorted(
            i for info in summary["drifters"].values()
            for i in info["windows"][label]["runs_off_schedule"])
    layer = skill_layer({d: observed[d] for d in sorted({r.drifter_id for r in matched})},
                        matched, separation_table)
    result = SkillResult(separation_table, windows, summary, layer, config)
    if out_dir is not None:
        result.files = write_skill(result, out_dir, overwrite=overwrite,
                                   protect=[*obs_paths, *mod_paths])
    return result


def write_skill(result: SkillResult, out_dir: str | Path, *, overwrite: bool = False,
                protect: Sequence[str | Path] = ()) -> list[Path]:
    """Write the files of a skill run, each atomically.

    Parameters
    ----------
    result : SkillResult
        What :func:`run_skill` computed.
    out_dir : str or Path
        Output folder (created if needed); a non-empty folder must be a
        previous driftloop run unless ``overwrite``.
    overwrite : bool, optional
        Allow a non-empty folder that is not a driftloop run.
    protect : sequence of path, optional
        Files that must never be overwritten (the inputs).

    Returns
    -------
    list of Path
        The files written.

    Raises
    ------
    InputError
        If the folder cannot be used or a target is an input file.
    """
    from driftloop.pipeline import RUN_MARKER, prepare_out_dir

    out = prepare_out_dir(out_dir, overwrite=overwrite)
    targets = {
        "separation": out / "separation.csv",
        "separation_meta": out / "separation.csv-metadata.json",
        "skill": out / "skill.csv",
        "skill_meta": out / "skill.csv-metadata.json",
        "json": out / "skill.json",
        "geojson": out / "skill.geojson",
        "png": out / "skill.png",
        "provenance": out / RUN_MARKER,
    }
    protected = {os.path.realpath(p) for p in protect}
    for target in targets.values():
        if os.path.realpath(target) in protected:
            raise InputError(str(target), "refusing to overwrite an input file; choose "
                             "another --out")
    from driftloop.export.formats import write_table_csv
    from driftloop.export.geojson import write_geojson

    prov = result.summary["provenance"]
    sep = result.separation.copy()
    sep[["lat_obs", "lon_obs", "lat_model", "lon_model", "elapsed_h", "s_to_here",
         "ss_to_here"]] = sep[["lat_obs", "lon_obs", "lat_model", "lon_model", "elapsed_h",
                               "s_to_here", "ss_to_here"]].astype(float).round(6)
    sep[["separation_m", "obs_length_m"]] = sep[["separation_m", "obs_length_m"]].astype(
        float).round(3)
    write_table_csv(targets["separation"], sep, provenance=prov, column_docs=SEPARATION_DOCS,
                    description="Separation between modelled and observed drifter positions "
                                "at the observed times.")
    win = result.windows.copy()
    metres = ["separation_sum_m", "length_sum_m", "final_separation_m", "final_length_m"]
    win[metres] = win[metres].astype(float).round(3)
    win[["s", "ss"]] = win[["s", "ss"]].astype(float).round(6)
    write_table_csv(targets["skill"], win, provenance=prov, column_docs=SKILL_DOCS,
                    description="Skill score (Liu & Weisberg 2011) of every forecast window.")
    write_json(targets["json"], result.summary)
    write_geojson(targets["geojson"], result.layer, name="skill", provenance=prov)
    fig = skill_figure(result.separation, result.windows)
    with atomic_open(targets["png"], "wb") as handle:
        fig.savefig(handle, format="png", dpi=120,
                    metadata={"Software": f"driftloop {prov['version']}"})
    run_info = dict(prov)
    run_info["inputs"] = result.summary["inputs"]
    run_info["written_utc"] = datetime.now(UTC).strftime("%Y-%m-%dT%H:%M:%SZ")
    write_json(targets["provenance"], run_info)
    return list(targets.values())
