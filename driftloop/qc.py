"""Per-fix quality control of drifter tracks, flagged on the QARTOD scale.

:func:`run_qc` adds three columns to the fixes table and drops nothing:

``qc_flag`` (int8)
    1 pass, 3 suspect, 4 fail, 9 missing: the flag values of U.S. Integrated
    Ocean Observing System (2020), *Manual for the Use of Real-Time
    Oceanographic Data Quality Control Flags*, v1.2, doi:10.25923/w8y6-d298
    (QARTOD).  Flag 2 (not evaluated) is not used.  A fix takes the most
    severe flag of its reasons (common practice), 1 when it has none or only
    informational ones.
``qc_reasons`` (string)
    The reason codes of :data:`REASONS` that apply, in the order of that
    registry, joined by ``"|"``; ``""`` when there are none.
``segment`` (int32)
    Per drifter, the number (0, 1, 2, ...) of the gap-free stretch of the
    time-sorted usable fixes (flag 1 or 3) that the fix belongs to; -1 for
    fixes with flag 4 or 9.

The tests run in this order; a fix that a test fails (flag 4) leaves the
track for the tests that follow it, so that one bad fix cannot condemn its
neighbours:

1. ``unparseable`` and ``missing_value``, then the range tests;
2. ``duplicate`` and ``time_conflict`` among fixes at the same instant;
3. ``out_of_order`` (informational, file order); from here on the tests see
   each drifter's track sorted by time (stable; ties by ``source_file``,
   then ``source_row``);
4. ``on_land``; 5. ``speed_fail`` (excursions of one to a few fixes);
6. ``ship_pickup``; 7. ``position_outlier``; 8. ``speed_suspect``;
9. ``grounded``; 10. ``gap_before`` and the segments.

Speeds come from geodesic distances on WGS 84 (:mod:`driftloop.geodesy`,
Karney 2013) less an allowance for GPS noise; land from
:mod:`driftloop.landmask` (GLOBE 1-km mask).  The thresholds are fields of
:class:`driftloop.config.QCConfig`; ``docs/qc.md`` describes every test.
"""

from __future__ import annotations

import copy
from typing import NamedTuple

import numpy as np
import pandas as pd

from driftloop import geodesy, landmask
from driftloop.config import QCConfig
from driftloop.constants import EARTH_ROTATION_RATE_RAD_S

__all__ = [
    "FLAG_FAIL",
    "FLAG_MEANINGS",
    "FLAG_MISSING",
    "FLAG_PASS",
    "FLAG_SUSPECT",
    "QC_COLUMNS",
    "REASONS",
    "Reason",
    "run_qc",
]

#: QARTOD flag values (IOOS 2020, v1.2).
FLAG_PASS = 1
FLAG_SUSPECT = 3
FLAG_FAIL = 4
FLAG_MISSING = 9

#: Flag value -> CF ``flag_meanings`` word.
FLAG_MEANINGS = {
    FLAG_PASS: "pass",
    FLAG_SUSPECT: "suspect",
    FLAG_FAIL: "fail",
    FLAG_MISSING: "missing_data",
}

#: Columns added by :func:`run_qc`.
QC_COLUMNS = ("qc_flag", "qc_reasons", "segment")


class Reason(NamedTuple):
    """One QC reason code.

    Attributes
    ----------
    flag : int
        QARTOD flag that the reason gives (1 means informational).
    description : str
        One line saying what the reason means.
    """

    flag: int
    description: str


#: Every reason code, in the canonical order used in ``qc_reasons``.
REASONS: dict[str, Reason] = {
    "unparseable": Reason(FLAG_FAIL, "a value of the record could not be read"),
    "missing_value": Reason(FLAG_MISSING, "time, latitude or longitude is missing"),
    "lat_out_of_range": Reason(FLAG_FAIL, "latitude is not in [-90, 90]"),
    "lon_out_of_range": Reason(FLAG_FAIL, "longitude is not in [-180, 180)"),
    "duplicate": Reason(FLAG_FAIL, "repeats an earlier fix of the drifter (same time and place)"),
    "time_conflict": Reason(FLAG_FAIL, "another fix of the drifter has the same time elsewhere"),
    "out_of_order": Reason(FLAG_PASS, "earlier than the drifter's previous fix in file order"),
    "on_land": Reason(FLAG_FAIL, "in a land cell of the 1-km GLOBE land mask"),
    "speed_fail": Reason(FLAG_FAIL, "part of a short excursion reached above the fail speed"),
    "ship_pickup": Reason(FLAG_FAIL, "in a run of sustained ship-like speed"),
    "position_outlier": Reason(FLAG_FAIL, "far from the position its neighbours predict"),
    "speed_suspect": Reason(FLAG_SUSPECT, "reached or left above the suspect speed"),
    "grounded": Reason(FLAG_FAIL, "motionless near land for a long time (aground)"),
    "gap_before": Reason(FLAG_PASS, "first fix after a gap; starts a new segment"),
}

_BIT = {code: 1 << k for k, code in enumerate(REASONS)}

#: Position noise allowed for in leg speeds: a leg is shortened by this many
#: standard deviations of the difference of two noisy fixes (sqrt(2) sigma).
_SPEED_NOISE_SIGMAS = 3.0
#: Passes of the iterative speed and outlier tests (each removes the worst).
_MAX_PASSES = 10
#: Neighbours on each side used to predict a fix in the outlier test.
_OUTLIER_HALF_WIDTH = 2
#: Fastest oscillation of real drifter motion: inertial at the poles, 2 Omega
#: (rad/s).  The M2, S2, K1 and O1 tides are all slower.
_MAX_OSCILLATION_RAD_S = 2.0 * EARTH_ROTATION_RATE_RAD_S
_CHUNK = 200_000

_REQUIRED = ("drifter_id", "time", "lat", "lon", "source_file", "source_row", "parse_error")


def run_qc(fixes: pd.DataFrame, config: QCConfig | None = None) -> pd.DataFrame:
    """Flag every fix of a fixes table on the QARTOD scale.

    Parameters
    ----------
    fixes : pandas.DataFrame
        Tidy fixes table (:mod:`driftloop.io.schema`); the columns
        ``drifter_id``, ``time``, ``lat``, ``lon``, ``source_file``,
        ``source_row`` and ``parse_error`` are used.
    config : QCConfig, optional
        Thresholds; defaults to ``QCConfig()``.

    Returns
    -------
    pandas.DataFrame
        A copy of ``fixes`` (same rows, order and index) with the columns
        ``qc_flag`` (int8), ``qc_reasons`` (string) and ``segment`` (int32)
        added or replaced.  Each drifter is flagged on its own: a table of
        many drifters gets the columns that its drifters get one at a time
        (times count from each drifter's first usable fix, and the
        iterative tests take their passes drifter by drifter).

    Raises
    ------
    ValueError
        If a required column is absent.

    Notes
    -----
    The tests, their thresholds and their sources are described in the
    module docstring and in ``docs/qc.md``.  Flags follow U.S. IOOS (2020),
    QARTOD flags manual v1.2, doi:10.25923/w8y6-d298.
    """
    config = config or QCConfig()
    missing_columns = [c for c in _REQUIRED if c not in fixes.columns]
    if missing_columns:
        raise ValueError(f"fixes table lacks the column(s) {', '.join(missing_columns)}")
    n = len(fixes)
    reasons = np.zeros(n, dtype=np.int64)

    times = pd.DatetimeIndex(pd.to_datetime(fixes["time"], utc=True)).as_unit("ns")
    nat = np.asarray(times.isna())
    time_ns = times.asi8
    lat = fixes["lat"].to_numpy(dtype=float, na_value=np.nan)
    lon = fixes["lon"].to_numpy(dtype=float, na_value=np.nan)
    errors = fixes["parse_error"].astype("string").fillna("")
    unparseable = np.asarray(errors != "", dtype=bool)
    drifter, _ = pd.factorize(fixes["drifter_id"], use_na_sentinel=False)
    source_file, _ = pd.factorize(fixes["source_file"].astype("string").fillna(""), sort=True)
    source_row = fixes["source_row"].to_numpy(dtype=np.int64, na_value=-1)

    # 1. record-level tests
    missing = ~unparseable & (nat | np.isnan(lat) | np.isnan(lon))
    present = ~unparseable & ~missing
    with np.errstate(invalid="ignore"):
        lat_bad = present & ~(np.abs(lat) <= 90.0)
        lon_bad = present & ~((lon >= -180.0) & (lon < 180.0))
    reasons[unparseable] |= _BIT["unparseable"]
    reasons[missing] |= _BIT["missing_value"]
    reasons[lat_bad] |= _BIT["lat_out_of_range"]
    reasons[lon_bad] |= _BIT["lon_out_of_range"]
    usable = np.flatnonzero(present & ~lat_bad & ~lon_bad)  # row positions, file order

    # 3. out of order, in file order (before any sorting)
    reasons[_out_of_order(drifter[usable], time_ns[usable], usable)] |= _BIT["out_of_order"]

    # sort the usable fixes: drifter, time, source file, source row, table position
    order = np.lexsort((usable, source_row[usable], source_file[usable],
                        time_ns[usable], drifter[usable]))
    rows = usable[order]  # row position of each sorted fix
    # seconds since each drifter's first usable fix, so that a drifter's
    # times (and all that follows) do not depend on the other drifters
    first = np.ones(rows.size, dtype=bool)
    first[1:] = drifter[rows[1:]] != drifter[rows[:-1]]
    t0 = time_ns[rows[first]][np.cumsum(first) - 1]
    track_time = (time_ns[rows] - t0) / 1e9  # s

    # 2. same instant: duplicates and conflicts
    dup, conflict = _same_instant(drifter[rows], track_time, lat[rows], lon[rows], rows,
                                  config.same_time_s)
    reasons[rows[dup]] |= _BIT["duplicate"]
    reasons[rows[conflict]] |= _BIT["time_conflict"]
    keep = ~dup & ~conflict
    rows = rows[keep]
    track = _Track(drifter[rows], track_time[keep], lon[rows], lat[rows], config)
    live = np.ones(rows.size, dtype=bool)

    # 4. on land (the fix stays in the track: its kinematics are still informative)
    if config.land_test and rows.size:
        reasons[rows[landmask.is_land(track.lat, track.lon)]] |= _BIT["on_land"]

    # 5. speed: excursions above the fail speed
    spikes, _ = _excursions(track, live, config.speed_fail_m_s, config.speed_max_run_fixes)
    reasons[rows[spikes]] |= _BIT["speed_fail"]
    live &= ~spikes

    # 6. ship pickup; the track is not joined across the time aboard
    ship = _sustained_runs(track, live, config.ship_speed_m_s, config.ship_min_duration_h * 3600)
    reasons[rows[ship]] |= _BIT["ship_pickup"]
    live &= ~ship
    track = track.split(live, ship)

    # 7. position outliers, within stretches free of unexplained jumps
    stretches = track.cut_fast(live, config.speed_fail_m_s)
    outliers = _position_outliers(stretches, live, config)
    reasons[rows[outliers]] |= _BIT["position_outlier"]
    live &= ~outliers

    # 8. speed: what is left above the suspect speed
    suspect, unresolved = _excursions(
        track, live, config.speed_suspect_m_s, config.speed_max_run_fixes
    )
    reasons[rows[suspect | unresolved]] |= _BIT["speed_suspect"]
    live &= ~suspect

    # 9. grounded
    if config.land_test:
        grounded = _grounded(stretches, live, config)
        reasons[rows[grounded]] |= _BIT["grounded"]

    flags = _aggregate(reasons)

    # 10. gaps and segments over the usable fixes (flag 1 or 3), time-sorted
    segment = np.full(n, -1, dtype=np.int32)
    ok = np.isin(flags[rows], (FLAG_PASS, FLAG_SUSPECT))
    gap, seg = _segments(track.drifter[ok], track.t[ok], config.gap_h * 3600)
    reasons[rows[ok][gap]] |= _BIT["gap_before"]
    segment[rows[ok]] = seg

    out = fixes.copy()
    out["qc_flag"] = flags
    out["qc_reasons"] = pd.array(_reason_strings(reasons), dtype=pd.StringDtype())
    out["segment"] = segment
    return out


# --------------------------------------------------------------------------- helpers


def _aggregate(reasons: np.ndarray) -> np.ndarray:
    """Return the most severe flag of each fix's reasons: 9 for missing, else max of 1/3/4."""
    flags = np.full(reasons.shape, FLAG_PASS, dtype=np.int8)
    for code, (flag, _) in REASONS.items():
        if flag in (FLAG_SUSPECT, FLAG_FAIL):
            has = (reasons & _BIT[code]) != 0
            flags[has] = np.maximum(flags[has], flag)
    flags[(reasons & _BIT["missing_value"]) != 0] = FLAG_MISSING
    return flags


def _reason_strings(reasons: np.ndarray) -> np.ndarray:
    """Turn bit masks into ``"a|b"`` strings in registry order."""
    unique, inverse = np.unique(reasons, return_inverse=True)
    texts = np.array(
        ["|".join(code for code in REASONS if mask & _BIT[code]) for mask in unique.tolist()],
        dtype=object,
    )
    return texts[inverse.ravel()] if unique.size else np.array([], dtype=object)


def _out_of_order(code: np.ndarray, time_ns: np.ndarray, rows: np.ndarray) -> np.ndarray:
    """Rows whose time is earlier than the previous fix of the same drifter in file order."""
    order = np.argsort(code, kind="stable")
    c, t = code[order], time_ns[order]
    earlier = np.zeros(order.size, dtype=bool)
    earlier[1:] = (c[1:] == c[:-1]) & (t[1:] < t[:-1])
    return rows[order[earlier]]


def _same_instant(
    code: np.ndarray,
    t: np.ndarray,
    lat: np.ndarray,
    lon: np.ndarray,
    rows: np.ndarray,
    same_time_s: float,
) -> tuple[np.ndarray, np.ndarray]:
    """Duplicates and time conflicts among sorted fixes closer in time than ``same_time_s``.

    Fixes of one drifter chained by intervals below ``same_time_s`` form one
    instant.  Within it, a fix at exactly the position of an earlier one (in
    table order) is a duplicate; when more than one distinct position
    remains, every fix with a distinct position is a time conflict.
    """
    n = code.size
    new = np.ones(n, dtype=bool)
    new[1:] = (code[1:] != code[:-1]) | (np.diff(t) >= same_time_s)
    instant = np.cumsum(new) - 1
    size = np.bincount(instant, minlength=instant[-1] + 1 if n else 0)
    dup = np.zeros(n, dtype=bool)
    conflict = np.zeros(n, dtype=bool)
    crowded = size[instant] > 1
    if not crowded.any():
        return dup, conflict
    sel = np.flatnonzero(crowded)
    frame = pd.DataFrame({"instant": instant[sel], "lat": lat[sel], "lon": lon[sel],
                          "row": rows[sel], "pos": sel}).sort_values("row", kind="stable")
    repeated = frame.duplicated(subset=["instant", "lat", "lon"], keep="first").to_numpy()
    dup[frame["pos"].to_numpy()[repeated]] = True
    distinct = np.bincount(instant[sel][~dup[sel]], minlength=size.size)
    conflict[sel] = ~dup[sel] & (distinct[instant[sel]] > 1)
    return dup, conflict


class _Track:
    """Sorted fixes of all drifters with a cache of leg lengths between live fixes."""

    def __init__(self, code, t, lon, lat, config: QCConfig) -> None:
        self.drifter = np.asarray(code)  # drifter of each fix
        self.code = self.drifter  # stretch of each fix: legs never join two stretches
        self.t = np.asarray(t, dtype=float)
        self.lon = np.asarray(lon, dtype=float)
        self.lat = np.asarray(lat, dtype=float)
        self.noise_m = _SPEED_NOISE_SIGMAS * np.sqrt(2.0) * config.gps_noise_m
        self._next = np.full(self.t.size, -1, dtype=np.int64)
        self._dist = np.full(self.t.size, np.nan)
        self._az1 = np.full(self.t.size, np.nan)  # azimuths of the cached legs (degrees)
        self._az2 = np.full(self.t.size, np.nan)

    def split(self, live: np.ndarray, removed: np.ndarray) -> _Track:
        """Return a view of the track cut where ``removed`` fixes lie between two live ones."""
        act = np.flatnonzero(live)
        count = np.cumsum(removed)
        cut = np.zeros(self.t.size, dtype=bool)
        if act.size >= 2:
            a, b = act[:-1], act[1:]
            cut[b[count[b] - count[a] > 0]] = True
        return self._view(cut)

    def cut_fast(self, live: np.ndarray, threshold: float) -> _Track:
        """Return a view of the track cut inside every live leg faster than ``threshold``."""
        act = np.flatnonzero(live)
        cut = np.zeros(self.t.size, dtype=bool)
        if act.size >= 2:
            dist, dt, same = self.legs(act)
            cut[act[1:][same & (self.speed(dist, dt) > threshold)]] = True
        return self._view(cut)

    def _view(self, cut: np.ndarray) -> _Track:
        view = copy.copy(self)  # shares the leg cache
        new = np.ones(self.t.size, dtype=bool)
        new[1:] = self.code[1:] != self.code[:-1]
        view.code = np.cumsum(new | cut) - 1
        return view

    def legs(self, act: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """Distance (m), interval (s) and same-drifter mask of legs between consecutive ``act``."""
        a, b = act[:-1], act[1:]
        same = self.code[a] == self.code[b]
        need = same & (self._next[a] != b)
        if need.any():
            ia, ib = a[need], b[need]
            inv = geodesy.inverse(self.lon[ia], self.lat[ia], self.lon[ib], self.lat[ib])
            self._dist[ia] = inv.distance_m
            self._az1[ia] = inv.azimuth1_deg
            self._az2[ia] = inv.azimuth2_deg
            self._next[ia] = ib
        dist = np.where(same, self._dist[a], np.nan)
        return dist, self.t[b] - self.t[a], same

    def distance(self, a: np.ndarray, b: np.ndarray) -> np.ndarray:
        """Geodesic distance (m) between fixes ``a`` and ``b``."""
        return geodesy.inverse(self.lon[a], self.lat[a], self.lon[b], self.lat[b]).distance_m

    def speed(self, dist: np.ndarray, dt: np.ndarray) -> np.ndarray:
        """Leg speed (m/s) beyond what GPS noise explains."""
        with np.errstate(invalid="ignore", divide="ignore"):
            return np.maximum(dist - self.noise_m, 0.0) / dt


def _excursions(
    track: _Track, live: np.ndarray, threshold: float, max_run: int
) -> tuple[np.ndarray, np.ndarray]:
    """Remove short excursions above ``threshold``; return them and the ends of other fast legs.

    Each pass first removes single fixes that have a fast leg while the leg
    skipping them is not fast (a spike, or a fix thrown far enough off the
    track that one of its legs is fast); among neighbouring candidates the
    one whose removal slows the track most is taken.  When there are none,
    longer excursions are sought.  Fast legs cut each drifter's live track
    into pieces.  A run of one or more consecutive pieces holding at most
    ``max_run`` fixes is an excursion when (inside a track) the leg from the
    fix before it to the fix after it is not fast, or (at a track end) it
    holds fewer fixes than the piece beyond it; two wild fixes in a row form
    a run of two pieces.  Among runs that overlap or touch, the worst is
    removed, judged by how much faster its fast legs are than the leg
    replacing them (then the one of fewest pieces).  Fast legs that remain
    join two longer, self-consistent pieces: which side is wrong cannot be
    told,
    and both ends are returned as unresolved.
    """
    n = live.size
    removed = np.zeros(n, dtype=bool)
    for _ in range(_MAX_PASSES):
        act = np.flatnonzero(live & ~removed)
        if act.size < 2:
            break
        dist, dt, same = track.legs(act)
        speed = track.speed(dist, dt)
        fast = same & (speed > threshold)
        if not fast.any():
            break
        # first, single fixes whose removal leaves no fast leg in their place;
        # a drifter that has some leaves its longer excursions to a later pass
        single = _single_fix_spikes(track, act, speed, fast, same, threshold)
        drifter = track.drifter[act]
        busy = np.zeros(0, dtype=drifter.dtype)
        if single.size:
            removed[act[single]] = True
            busy = np.unique(drifter[single])
            if np.isin(drifter[:-1][fast], busy).all():
                continue
        cut = ~same | fast
        piece = np.concatenate(([0], np.cumsum(cut)))
        first = np.flatnonzero(np.concatenate(([True], cut)))
        last = np.concatenate((first[1:] - 1, [act.size - 1]))
        size = last - first + 1
        npiece = first.size
        # pieces of one drifter only compete with each other: a free slot
        # between drifters keeps their runs from touching
        piece_drifter = drifter[first]
        slot = np.arange(npiece) + np.concatenate(
            ([0], np.cumsum(piece_drifter[1:] != piece_drifter[:-1])))
        idle = ~np.isin(piece_drifter, busy)
        # the leg after piece p joins it to piece p + 1 (-> fast, same drifter?)
        after_fast = np.zeros(npiece, dtype=bool)
        after_fast[:-1] = fast[last[:-1]]
        after_same = np.zeros(npiece, dtype=bool)
        after_same[:-1] = same[last[:-1]]
        after_speed = np.where(after_fast, np.concatenate((speed[last[:-1]], [0.0])), 0.0)
        before_fast = np.concatenate(([False], after_fast[:-1]))
        before_same = np.concatenate(([False], after_same[:-1]))
        before_speed = np.concatenate(([0.0], after_speed[:-1]))
        cum = np.concatenate(([0], np.cumsum(size)))
        chain = np.concatenate(([0], np.cumsum(after_fast)))  # counts fast joins

        starts, stops, scores = [], [], []
        for span in range(1, max_run + 1):
            start = np.arange(npiece - span + 1)
            stop = start + span - 1  # last piece of the run
            total = cum[stop + 1] - cum[start]
            joined = chain[stop] - chain[start] == span - 1  # inner joins are all fast legs
            ok = joined & (total <= max_run) & idle[start]
            score = np.full(start.size, -np.inf)
            inner = ok & before_fast[start] & after_fast[stop]
            if inner.any():
                ip = np.flatnonzero(inner)
                fa = act[first[start[ip]] - 1]
                fb = act[last[stop[ip]] + 1]
                bridge = track.speed(track.distance(fa, fb), track.t[fb] - track.t[fa])
                good = bridge <= threshold
                ip = ip[good]
                score[ip] = (
                    np.minimum(before_speed[start[ip]], after_speed[stop[ip]]) - bridge[good]
                )
            beyond_after = np.where(stop + 1 < npiece, size[np.minimum(stop + 1, npiece - 1)], 0)
            beyond_before = np.where(start > 0, size[np.maximum(start - 1, 0)], 0)
            head = ok & ~before_same[start] & after_fast[stop] & (total < beyond_after)
            score[head] = after_speed[stop[head]]
            tail = ok & ~after_same[stop] & before_fast[start] & (total < beyond_before)
            score[tail] = before_speed[start[tail]]
            keep = np.isfinite(score)
            starts.append(start[keep])
            stops.append(stop[keep])
            scores.append(score[keep])
        start = np.concatenate(starts)
        if start.size == 0:
            if single.size:
                continue
            break
        stop = np.concatenate(stops)
        score = np.concatenate(scores)
        # the best of runs that overlap or touch wins: highest score, then fewest pieces
        rank = np.empty(start.size, dtype=np.int64)
        rank[np.lexsort((start, stop - start, -score))] = np.arange(start.size)
        at = slot[start]  # a run covers the slots at .. at + stop - start
        own = np.full(slot[-1] + 3, start.size, dtype=np.int64)  # padded by one slot each side
        for d in range(max_run):
            inside = start + d <= stop
            np.minimum.at(own, at[inside] + d + 1, rank[inside])
        best = np.full(start.size, start.size, dtype=np.int64)
        for d in range(-1, max_run + 1):
            inside = start + d <= stop + 1
            best[inside] = np.minimum(best[inside], own[at[inside] + d + 1])
        pick = best == rank
        cover = np.zeros(npiece + 1, dtype=np.int64)
        np.add.at(cover, start[pick], 1)
        np.add.at(cover, stop[pick] + 1, -1)
        chosen_any = np.cumsum(cover[:-1]) > 0
        if not chosen_any.any() and not single.size:
            break
        removed[act[chosen_any[piece]]] = True
    act = np.flatnonzero(live & ~removed)
    unresolved = np.zeros(n, dtype=bool)
    if act.size >= 2:
        dist, dt, same = track.legs(act)
        fast = same & (track.speed(dist, dt) > threshold)
        unresolved[act[:-1][fast]] = True
        unresolved[act[1:][fast]] = True
    return removed, unresolved


def _single_fix_spikes(
    track: _Track,
    act: np.ndarray,
    speed: np.ndarray,
    fast: np.ndarray,
    same: np.ndarray,
    threshold: float,
) -> np.ndarray:
    """Pick fixes whose removal takes a fast leg away without making another (indices into act).

    Inside a track the candidate's skipping leg must not be fast; its score
    is its fastest leg minus the skipping leg.  At a track end the leg after
    its neighbour must not be fast; its score is its leg minus that one.
    Among neighbouring candidates the highest score is taken.
    """
    m = act.size
    score = np.full(m, -np.inf)
    if m < 3:
        return np.empty(0, dtype=np.int64)
    # interior fixes
    k = np.arange(1, m - 1)
    k = k[same[k - 1] & same[k] & (fast[k - 1] | fast[k])]
    if k.size:
        a, b = act[k - 1], act[k + 1]
        skip = track.speed(track.distance(a, b), track.t[b] - track.t[a])
        worst = np.maximum(np.where(fast[k - 1], speed[k - 1], 0.0),
                           np.where(fast[k], speed[k], 0.0))
        ok = skip <= threshold
        score[k[ok]] = worst[ok] - skip[ok]
    # first fixes of a track (leg k fast, leg k + 1 in the same track and not fast)
    first = np.concatenate(([True], ~same))[:-1]
    k = np.flatnonzero(first[: m - 2] & fast[: m - 2] & same[1 : m - 1] & ~fast[1 : m - 1])
    score[k] = speed[k] - speed[k + 1]
    # last fixes of a track (leg k - 1 fast, leg k - 2 in the same track and not fast)
    last = np.concatenate((~same, [True]))
    k = np.flatnonzero(last[2:] & fast[1:] & same[: m - 2] & ~fast[: m - 2]) + 2
    score[k] = speed[k - 1] - speed[k - 2]
    earlier = np.concatenate(([-np.inf], score[:-1]))
    later = np.concatenate((score[1:], [-np.inf]))
    other = np.flatnonzero(track.drifter[act[1:]] != track.drifter[act[:-1]])
    earlier[other + 1] = -np.inf  # neighbours are only compared within a drifter
    later[other] = -np.inf
    return np.flatnonzero(np.isfinite(score) & (score > earlier) & (score >= later))


def _sustained_runs(
    track: _Track, live: np.ndarray, threshold: float, min_duration_s: float
) -> np.ndarray:
    """Find fixes joined by consecutive legs above ``threshold`` for >= ``min_duration_s``."""
    flagged = np.zeros(live.size, dtype=bool)
    act = np.flatnonzero(live)
    if act.size < 2:
        return flagged
    dist, dt, same = track.legs(act)
    fast = same & (track.speed(dist, dt) > threshold)
    if not fast.any():
        return flagged
    edges = np.diff(np.concatenate(([0], fast.astype(np.int8), [0])))
    start = np.flatnonzero(edges == 1)  # first fast leg of each run
    stop = np.flatnonzero(edges == -1)  # one past the last fast leg
    duration = track.t[act[stop]] - track.t[act[start]]
    long_enough = duration >= min_duration_s
    cover = np.zeros(act.size + 1, dtype=np.int64)
    np.add.at(cover, start[long_enough], 1)
    np.add.at(cover, stop[long_enough] + 1, -1)
    flagged[act[np.cumsum(cover[:-1]) > 0]] = True
    return flagged


def _position_outliers(track: _Track, live: np.ndarray, config: QCConfig) -> np.ndarray:
    """Find fixes far from the position predicted by a local fit of their neighbours.

    For each live fix, up to ``_OUTLIER_HALF_WIDTH`` live neighbours on each
    side within ``gap_h`` are placed in the azimuthal equidistant frame
    centred on the fix (x = s sin(alpha), y = s cos(alpha) from the inverse
    geodesic problem).  A quadratic in time fitted by least squares gives
    the predicted position at the fix's time; the residual over its
    threshold is the fix's *ratio* (see :func:`_fit_ratio`).  The same fit
    is also made with each neighbour left out (where the blame below is
    compared: up to two fixes from one over its threshold).  A fix is
    tested only with the full number of neighbours on each side, so that
    every fit interpolates: the first and last two fixes of a stretch are
    left to the speed tests.

    One displaced fix spoils the fits of its neighbours too, and a good fix
    next to it may even show the larger ratio (its prediction leans on the
    bad fix).  So the culprit is chosen by *blame*: its own ratio plus how
    much the ratios of its neighbours drop when it is left out of their
    fits.  A fix is flagged when its ratio exceeds 1 and its blame is the
    largest among its neighbours; the test then repeats on the remaining
    fixes, so that the good neighbour is judged again without the bad one.
    """
    n = live.size
    flagged = np.zeros(n, dtype=bool)
    window_s = config.gap_h * 3600.0
    offsets = [o for o in range(-_OUTLIER_HALF_WIDTH, _OUTLIER_HALF_WIDTH + 1) if o]
    slots = len(offsets)
    mirror = np.array([offsets.index(-o) for o in offsets])
    leave_out = ~np.eye(slots, dtype=bool)[None, :, :]
    # the last fit of each fix: neighbours (track indices), how solved, ratios
    fitted = np.zeros(n, dtype=bool)
    fitted_direct = np.zeros(n, dtype=bool)
    fitted_nb = np.full((n, slots), -1, dtype=np.int64)
    fitted_ratio = np.zeros(n)
    fitted_loo = np.zeros((n, slots))
    fitted_has_loo = np.zeros(n, dtype=bool)
    for _ in range(_MAX_PASSES):
        act = np.flatnonzero(live & ~flagged)
        m = act.size
        if m < slots + 1:
            break
        # neighbour positions (indices into act), -1 where absent
        nb = np.full((m, slots), -1, dtype=np.int64)
        pos = np.arange(m)
        for k, o in enumerate(offsets):
            j = pos + o
            ok = (j >= 0) & (j < m)
            jj = np.where(ok, j, 0)
            ok &= track.code[act[jj]] == track.code[act]
            ok &= np.abs(track.t[act[jj]] - track.t[act]) <= window_s
            nb[ok, k] = j[ok]
        # only fixes with every neighbour slot filled are tested
        todo = np.flatnonzero((nb >= 0).all(axis=1))
        ratio = np.zeros(m)
        loo = np.zeros((m, slots))  # ratio with the neighbour in each slot left out
        direct = _direct_offsets(track, act, todo)
        # a fix whose neighbours and way of solving are those of its last fit
        # keeps the ratios of that fit (they would come out the same)
        neighbour = np.where(nb >= 0, act[np.maximum(nb, 0)], -1)
        c = act[todo]
        same = (fitted[c] & (fitted_direct[c] == direct[todo])
                & (fitted_nb[c] == neighbour[todo]).all(axis=1))
        ratio[todo[same]] = fitted_ratio[c[same]]
        redo = todo[~same]
        x, y = _local_offsets(track, act, nb, offsets, redo, direct)
        for centre, tau_s, xc, yc in _fit_chunks(track, act, nb, redo, x, y):
            full = np.ones((centre.size, slots), dtype=bool)
            r = _fit_ratio(tau_s, xc, yc, full, config)
            ratio[centre] = np.where(np.isfinite(r), r, 0.0)
        c = act[redo]
        fitted[c] = True
        fitted_direct[c] = direct[redo]
        fitted_nb[c] = neighbour[redo]
        fitted_ratio[c] = ratio[redo]
        fitted_has_loo[c] = False
        if not (ratio > 1.0).any():
            break
        # the fits without one neighbour enter the blame of the fixes over the
        # threshold and of their neighbours: they are needed up to two
        # neighbours away from a fix over the threshold
        near = ratio > 1.0
        for _hop in range(2):
            reach = near.copy()
            for k in range(slots):
                j = nb[near, k]
                reach[j[j >= 0]] = True
            near = reach
        need = todo[near[todo]]
        c = act[need]
        known = fitted_has_loo[c]
        loo[need[known]] = fitted_loo[c[known]]
        fresh = need[~known]
        x, y = _local_offsets(track, act, nb, offsets, fresh, direct)
        for centre, tau_s, xc, yc in _fit_chunks(track, act, nb, fresh, x, y):
            lo = _fit_ratio(tau_s[:, None, :], xc[:, None, :], yc[:, None, :], leave_out, config)
            loo[centre] = np.where(np.isfinite(lo), lo, ratio[centre][:, None])
        c = act[fresh]
        fitted_loo[c] = loo[fresh]
        fitted_has_loo[c] = True
        # blame of each fix: own ratio + how much each neighbour's ratio drops without it
        blame = ratio.copy()
        for k in range(slots):
            j = nb[:, k]
            has = j >= 0
            jj = np.where(has, j, 0)
            drop = ratio[jj] - loo[jj, mirror[k]]
            blame += np.where(has, np.maximum(drop, 0.0), 0.0)
        chosen = ratio > 1.0
        for k, o in enumerate(offsets):
            has = nb[:, k] >= 0
            other = np.where(has, blame[np.where(has, nb[:, k], 0)], -np.inf)
            chosen &= (blame > other) if o < 0 else (blame >= other)
        if not chosen.any():
            break
        flagged[act[chosen]] = True
    return flagged


def _direct_offsets(track: _Track, act: np.ndarray, todo: np.ndarray) -> np.ndarray:
    """Which fixes of ``act`` :func:`_local_offsets` solves with each neighbour on its own.

    Those of the drifters with fewer than half their live fixes to be done;
    the other drifters solve each pair of neighbouring fixes once.
    """
    if act.size == 0:
        return np.zeros(0, dtype=bool)
    drifter = track.drifter[act]
    ndrifter = int(drifter.max()) + 1
    return (2 * np.bincount(drifter[todo], minlength=ndrifter)
            < np.bincount(drifter, minlength=ndrifter))[drifter]


def _local_offsets(
    track: _Track, act: np.ndarray, nb: np.ndarray, offsets: list[int], todo: np.ndarray,
    direct: np.ndarray,
) -> tuple[np.ndarray, np.ndarray]:
    """East and north (m) of each neighbour in the azimuthal equidistant frame of its centre.

    Rows follow ``todo`` (indices into ``act``), columns the neighbour
    slots.  For the fixes of ``act`` marked ``direct`` (see
    :func:`_direct_offsets`) the inverse problem is solved from the fix to
    each neighbour.  For the others each pair of fixes is solved once: the
    inverse problem from p to q gives q about p from the azimuth at p, and p
    about q from the forward azimuth at q turned by 180 degrees.  All the
    inverse problems go to one call.
    """
    x = np.zeros((todo.size, nb.shape[1]))
    y = np.zeros((todo.size, nb.shape[1]))
    if todo.size == 0:
        return x, y
    # each fix with its neighbours
    alone = todo[direct[todo]]
    valid = nb[alone] >= 0
    centre = np.broadcast_to(act[alone][:, None], valid.shape)[valid]
    ends = [(centre, act[nb[alone][valid]])]
    # each pair once
    row = np.full(act.size, -1, dtype=np.int64)
    row[todo] = np.arange(todo.size)
    pairs = []
    for k, o in enumerate(offsets):
        if o < 0:
            continue
        p = np.flatnonzero((nb[:, k] >= 0) & ~direct)
        q = nb[p, k]
        wanted = (row[p] >= 0) | (row[q] >= 0)
        p, q = p[wanted], q[wanted]
        # legs between consecutive live fixes are solved already
        cached = track._next[act[p]] == act[q]
        pairs.append((k, offsets.index(-o), p, q, cached))
        ends.append((act[p[~cached]], act[q[~cached]]))
    a = np.concatenate([e[0] for e in ends])
    b = np.concatenate([e[1] for e in ends])
    inv = geodesy.inverse(track.lon[a], track.lat[a], track.lon[b], track.lat[b])
    s_all, az1_all, az2_all = inv.distance_m, inv.azimuth1_deg, inv.azimuth2_deg
    n = centre.size
    if n:
        az = np.radians(az1_all[:n])
        sub_x, sub_y = x[direct[todo]], y[direct[todo]]
        sub_x[valid] = s_all[:n] * np.sin(az)
        sub_y[valid] = s_all[:n] * np.cos(az)
        x[direct[todo]], y[direct[todo]] = sub_x, sub_y
    for k, back, p, q, cached in pairs:
        fresh = int(np.count_nonzero(~cached))
        s, az1, az2 = np.empty(p.size), np.empty(p.size), np.empty(p.size)
        s[~cached] = s_all[n : n + fresh]
        az1[~cached] = az1_all[n : n + fresh]
        az2[~cached] = az2_all[n : n + fresh]
        n += fresh
        leg = act[p[cached]]
        s[cached], az1[cached], az2[cached] = track._dist[leg], track._az1[leg], track._az2[leg]
        az1, az2 = np.radians(az1), np.radians(az2)
        fwd = row[p] >= 0
        x[row[p[fwd]], k] = (s * np.sin(az1))[fwd]
        y[row[p[fwd]], k] = (s * np.cos(az1))[fwd]
        rev = row[q] >= 0
        x[row[q[rev]], back] = -(s * np.sin(az2))[rev]
        y[row[q[rev]], back] = -(s * np.cos(az2))[rev]
    return x, y


def _fit_chunks(track, act: np.ndarray, nb: np.ndarray, centres: np.ndarray, x: np.ndarray,
                y: np.ndarray):
    """Yield the local fits' inputs ``_CHUNK`` centres at a time.

    Yields (centres, time offsets of their neighbours (s), x, y): the rows of
    ``x`` and ``y`` (from :func:`_local_offsets` for ``centres``) that go
    with those centres.
    """
    for start in range(0, centres.size, _CHUNK):
        rows = slice(start, start + _CHUNK)
        centre = centres[rows]
        yield centre, track.t[act[nb[centre]]] - track.t[act[centre]][:, None], x[rows], y[rows]


def _fit_ratio(
    tau_s: np.ndarray, x: np.ndarray, y: np.ndarray, w: np.ndarray, config: QCConfig
) -> np.ndarray:
    """Return residual / threshold of local quadratic fits predicting a fix from its neighbours.

    Parameters
    ----------
    tau_s, x, y : numpy.ndarray
        Neighbour time offsets (s) and east/north positions (m) relative to
        the fix, last axis over neighbours.
    w : numpy.ndarray
        Which neighbours enter each fit (broadcast against ``tau_s``).
    config : QCConfig
        Thresholds.

    Returns
    -------
    numpy.ndarray
        The ratio per fit (inf where fewer than three neighbours).

    Notes
    -----
    Least squares of x(t) = b0 + b1 t + b2 t^2 (and likewise y) on the
    neighbours gives a prediction at the fix's time t = 0 that is linear in
    their positions, x_hat = b0 = sum_j c_j x_j, and reproduces quadratic
    motion exactly.  Two things make it miss a good fix:

    * GPS noise: with independent noise of s.d. sigma per coordinate on the
      fix and its neighbours, the residual x - x_hat has s.d.
      sigma * sqrt(1 + sum c_j^2) per coordinate;
    * motion that is not quadratic.  By Taylor's theorem, with the third
      derivative bounded by J, x_j departs from the quadratic through the
      fix by at most J |tau_j|^3 / 6, so the prediction errs by at most
      B = J / 6 * sum_j |c_j| |tau_j|^3.  J is the rate at which the
      acceleration a (``outlier_accel_m_s2``) can turn: J = 2 Omega a for
      motion that oscillates no faster than the inertial frequency at the
      pole (the tides M2, S2, K1 and O1 are slower).

    The threshold is max(outlier_min_m, sqrt((k sigma sqrt(1 + sum c^2))^2 +
    B^2)) with k = ``outlier_sigma``: the noise is scaled to a small tail
    probability, the motion bound is already a worst case.  For a fix midway
    in an hourly track (neighbours at -2, -1, +1, +2 h) the fit has
    c = (-1/6, 2/3, 2/3, -1/6), sum |c| |tau|^3 = 4 h^3 and B = 0.9 km with
    the default a = 2e-4 m/s2, so a fix 3 km off the track is flagged, while
    an inertial loop of 0.5 m/s departs from the fit by tens of metres.
    Leaving out the neighbour at -2 or +2 h raises B to 1.5 km.
    """
    w = np.broadcast_to(w, np.broadcast_shapes(np.shape(w), np.shape(tau_s))).astype(float)
    tau = tau_s / 3600.0  # hours, for conditioning
    t2 = tau * tau
    s0 = w.sum(axis=-1)
    s1 = (w * tau).sum(axis=-1)
    s2 = (w * t2).sum(axis=-1)
    s3 = (w * t2 * tau).sum(axis=-1)
    s4 = (w * t2 * t2).sum(axis=-1)
    # first column of the inverse of the normal matrix [[s0 s1 s2] [s1 s2 s3] [s2 s3 s4]]
    a0 = s2 * s4 - s3 * s3
    a1 = s2 * s3 - s1 * s4
    a2 = s1 * s3 - s2 * s2
    det = s0 * a0 + s1 * a1 + s2 * a2
    ok = (s0 >= 3) & (det > 1e-12)
    det = np.where(ok, det, 1.0)
    coef = w * (a0[..., None] + a1[..., None] * tau + a2[..., None] * t2) / det[..., None]
    coef = np.where(ok[..., None], coef, 0.0)
    residual = np.hypot((coef * x).sum(axis=-1), (coef * y).sum(axis=-1))
    noise = config.outlier_sigma * config.gps_noise_m * np.sqrt(1.0 + (coef * coef).sum(axis=-1))
    jerk = _MAX_OSCILLATION_RAD_S * config.outlier_accel_m_s2
    bound = jerk / 6.0 * (np.abs(coef) * np.abs(tau_s) ** 3).sum(axis=-1)
    threshold = np.maximum(config.outlier_min_m, np.hypot(noise, bound))
    return np.where(ok, residual / threshold, np.inf)


def _grounded(track: _Track, live: np.ndarray, config: QCConfig) -> np.ndarray:
    """Find fixes that stay still near land for a long time.

    A window of fixes lasting >= ``grounded_min_duration_h`` whose every fix
    is within ``grounded_max_drift_m`` of its first fix, which is within
    ``near_land_km`` of a land cell, is grounded.
    """
    flagged = np.zeros(live.size, dtype=bool)
    act = np.flatnonzero(live)
    if act.size < 2:
        return flagged
    max_drift = config.grounded_max_drift_m
    duration = config.grounded_min_duration_h * 3600.0
    dist, dt, same = track.legs(act)
    # every fix of a still window is within max_drift of its first: legs < 2 max_drift
    short = same & (dist < 2.0 * max_drift)
    if not short.any():
        return flagged
    edges = np.diff(np.concatenate(([0], short.astype(np.int8), [0])))
    run_start = np.flatnonzero(edges == 1)  # act index of a run's first fix
    run_stop = np.flatnonzero(edges == -1)  # act index of a run's last fix
    t = track.t[act]
    long_runs = (t[run_stop] - t[run_start]) >= duration
    run_start, run_stop = run_start[long_runs], run_stop[long_runs]
    if run_start.size == 0:
        return flagged
    # candidate window starts and the act index where each window is long enough
    lengths = run_stop - run_start + 1
    starts = np.repeat(run_start, lengths) + _ragged_arange(lengths)
    stops = np.repeat(run_stop, lengths)
    # per drifter, times made increasing across its stretches, so that one
    # search serves them all
    drifter = track.drifter[act]
    head = np.flatnonzero(np.concatenate(([True], drifter[1:] != drifter[:-1])))
    tail = np.concatenate((head[1:], [act.size]))
    whose = np.cumsum(np.isin(np.arange(act.size), head)) - 1  # drifter block of each fix
    track_head = np.searchsorted(track.drifter, drifter[head], side="left")
    stretch = track.code[act] - track.code[track_head][whose]
    key = t + stretch * ((t[tail - 1] - t[head])[whose] + duration + 1.0)
    ends = np.empty(starts.size, dtype=np.int64)
    for block in np.unique(whose[starts]).tolist():
        lo, hi = int(head[block]), int(tail[block])
        mine = whose[starts] == block
        ends[mine] = lo + np.searchsorted(key[lo:hi], key[starts[mine]] + duration, side="left")
    fits = ends <= stops
    starts, ends = starts[fits], ends[fits]
    if starts.size == 0:
        return flagged
    still = np.ones(starts.size, dtype=bool)
    width = ends - starts
    for offset in range(1, int(width.max()) + 1):
        sel = np.flatnonzero(still & (width >= offset))
        if sel.size == 0:
            break
        d = track.distance(act[starts[sel]], act[starts[sel] + offset])
        still[sel[d >= max_drift]] = False
    starts, ends = starts[still], ends[still]
    if starts.size == 0:
        return flagged
    near = landmask.land_within(track.lat[act[starts]], track.lon[act[starts]],
                                config.near_land_km)
    starts, ends = starts[near], ends[near]
    cover = np.zeros(act.size + 1, dtype=np.int64)
    np.add.at(cover, starts, 1)
    np.add.at(cover, ends + 1, -1)
    flagged[act[np.cumsum(cover[:-1]) > 0]] = True
    return flagged


def _ragged_arange(lengths: np.ndarray) -> np.ndarray:
    """Concatenation of ``arange(k)`` for each k in ``lengths``."""
    total = int(lengths.sum())
    offsets = np.repeat(np.cumsum(lengths) - lengths, lengths)
    return np.arange(total) - offsets


def _segments(code: np.ndarray, t: np.ndarray, gap_s: float) -> tuple[np.ndarray, np.ndarray]:
    """First fixes after a gap > ``gap_s`` and per-drifter segment numbers of sorted fixes."""
    n = code.size
    gap = np.zeros(n, dtype=bool)
    if n == 0:
        return gap, np.zeros(0, dtype=np.int32)
    same = code[1:] == code[:-1]
    gap[1:] = same & (np.diff(t) > gap_s)
    count = np.cumsum(gap)
    first = np.ones(n, dtype=bool)
    first[1:] = ~same
    base = np.maximum.accumulate(np.where(first, np.arange(n), 0))
    seg = count - count[base]
    return gap, seg.astype(np.int32)
