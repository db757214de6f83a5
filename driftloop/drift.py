"""Decomposition of resampled drifter velocities into oscillations and drift.

:func:`decompose` splits the velocity of every resampled grid point into the
oscillatory parts carried by the significant wavelet ridges, grouped by the
kind of loop event each ridge belongs to (inertial, tidal, eddy, other), and
the residual *drift*; :func:`drift_statistics` summarises the drift and the
inertial motion per drifter and for the release, with the single-particle
dispersion of the drift residual.

Method
------
**Ridge reconstruction** (Lilly & Gascard 2006; Lilly & Olhede 2012).  On a
ridge the rotary transforms of :mod:`driftloop.wavelet` estimate the two
rotary components of a modulated elliptical oscillation,

    z_osc(t) = A+(t) exp(i phi+(t)) + A-(t) exp(-i phi-(t)),

where A+ exp(i phi+) = W+ = W[z]/2 is the counter-clockwise part and
A- exp(i phi-) = W- = W[conj z]/2 the transform of the conjugate, so that
the clockwise part of z is conj(W-) = A- exp(-i phi-).  The ridge engine
(:func:`driftloop.ridges.detect`) gives A+-, phi+- at the refined ridge
scale, bias-corrected for amplitude and frequency modulation; both the
ridge's own-sense and other-sense values are used, so an ellipse is rebuilt
whole.  With the rotary normalisation of :mod:`driftloop.wavelet` (|W+-| =
A+- on the ridge) no further factor is needed.  For a steady circle the
reconstruction equals the signal to the bias of the ridge estimates
(*derived*; checked numerically in ``tests/test_drift.py``).

A ridge exists only on its own samples: outside the cone of influence, above
the significance threshold and on chains of at least ``min_cycles`` cycles.
Where no ridge is found (the first and last wavelet half-lengths of a
segment, weak or short oscillations) the oscillation stays in the drift.
Ridges at different scales that overlap in time add.

**Labels.**  Each ridge takes the ``kind`` of the loop event
(:func:`driftloop.loops.find_events`) of the same drifter that overlaps it
longest in time, preferring events of the ridge's own rotation sense;
ridges that overlap no event are labelled ``"other"``.

**Drift** is the residual u_drift + i v_drift = z - sum of all oscillatory
parts.

Columns of :func:`decompose` (:data:`DECOMPOSITION_COLUMNS`), velocities in
m/s east and north: ``drifter_id``, ``segment``, ``time``, ``lat``, ``lon``,
``u_inertial``, ``v_inertial``, ``u_tidal``, ``v_tidal``, ``u_eddy``,
``v_eddy``, ``u_other``, ``v_other``, ``u_drift``, ``v_drift``.

References
----------
Lilly, J. M., and J.-C. Gascard, 2006: Wavelet ridge diagnosis of
time-varying elliptical signals with application to an oceanic eddy.
Nonlin. Processes Geophys., 13, 467-483.

Lilly, J. M., and S. C. Olhede, 2012: Analysis of modulated multivariate
oscillations.  IEEE Trans. Signal Process., 60 (details from memory).
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from typing import Any

import numpy as np
import pandas as pd

from driftloop.dispersion import (
    ComponentStatistics,
    _check_dt,
    _regrid_arrays,
    dispersion_by_drifter,
    single_particle_statistics,
)
from driftloop.ridges import Ridge, detect
from driftloop.wavelet import WaveletConfig

__all__ = [
    "DECOMPOSITION_COLUMNS",
    "KINDS",
    "RELEASE_KEY",
    "decompose",
    "drift_series",
    "drift_statistics",
    "drifter_drift_statistics",
    "grid_step_counts",
    "grid_step_from_counts",
    "inertial_decay_times",
    "release_drift_statistics",
    "reconstruct_ridge",
]

#: Event kinds that get their own velocity columns, in column order.
KINDS = ("inertial", "tidal", "eddy", "other")

#: Columns of :func:`decompose`, in order.
DECOMPOSITION_COLUMNS = (
    "drifter_id", "segment", "time", "lat", "lon",
    *(f"{c}_{k}" for k in KINDS for c in ("u", "v")),
    "u_drift", "v_drift",
)

#: Key of the release-level entry of :func:`drift_statistics`.
RELEASE_KEY = "(release)"

_MIN_SAMPLES = 8  # segments shorter than this get no ridge analysis (as in loops)


def reconstruct_ridge(ridge: Ridge) -> np.ndarray:
    """Return the oscillatory complex velocity of one ridge on its samples.

    Parameters
    ----------
    ridge : Ridge
        A ridge from :func:`driftloop.ridges.detect`.

    Returns
    -------
    numpy.ndarray
        Complex z_osc = A+ exp(i phi+) + A- exp(-i phi-) (m/s), one value
        per sample of ``ridge.index``.

    Notes
    -----
    Lilly & Gascard (2006); Lilly & Olhede (2012).  W- is the transform of
    conj z, so the clockwise part of z is conj(W-) = A- exp(-i phi-).

    Examples
    --------
    >>> t = np.arange(1200) * 3600.0
    >>> z = 0.25 * np.exp(-2j * np.pi * t / (16.9 * 3600.0))
    >>> r = detect(z, 3600.0).ridges[0]
    >>> err = np.abs(reconstruct_ridge(r) - z[r.index]).max()
    >>> print(err < 0.01)
    True
    """
    ccw = np.asarray(ridge.amplitude_ccw_m_s) * np.exp(1j * np.asarray(ridge.phase_ccw_rad))
    cw = np.asarray(ridge.amplitude_cw_m_s) * np.exp(-1j * np.asarray(ridge.phase_cw_rad))
    return ccw + cw


def _time_ns(values: pd.Series) -> np.ndarray:
    """Return the times as int64 ns since the epoch (UTC; naive times taken as UTC)."""
    if isinstance(values, pd.Series) and (isinstance(values.dtype, pd.DatetimeTZDtype)
                                          or values.dtype.kind == "M"):
        # already datetimes: their UTC ns, as pd.to_datetime(utc=True) would give
        return values.array.as_unit("ns").asi8.copy()
    return pd.DatetimeIndex(pd.to_datetime(values, utc=True)).as_unit("ns").asi8


def _event_spans(events: pd.DataFrame | None) -> dict[str, list[tuple[int, int, int, str]]]:
    """Per drifter: (start ns, end ns, sense +-1, kind) of each event."""
    spans: dict[str, list[tuple[int, int, int, str]]] = {}
    if events is None or len(events) == 0:
        return spans
    start = _time_ns(events["start"])
    end = _time_ns(events["end"])
    sense = events["sense"].astype(str).to_numpy() if "sense" in events else \
        np.full(len(events), "", dtype=object)
    kinds = events["kind"].astype(str).to_numpy()
    for i, drifter in enumerate(events["drifter_id"].astype(str).to_numpy()):
        kind = kinds[i] if kinds[i] in KINDS else "other"
        s = 1 if sense[i] == "anticlockwise" else (-1 if sense[i] == "clockwise" else 0)
        spans.setdefault(drifter, []).append((int(start[i]), int(end[i]), s, kind))
    return spans


def _label(t0: int, t1: int, sense: int, spans: list[tuple[int, int, int, str]]) -> str:
    """Kind of the event overlapping [t0, t1] longest, same sense first."""
    best: tuple[int, int] | None = None
    kind = "other"
    for e0, e1, e_sense, e_kind in spans:
        overlap = min(t1, e1) - max(t0, e0)
        if overlap < 0:
            continue
        key = (int(e_sense == sense), overlap)
        if best is None or key > best:
            best, kind = key, e_kind
    return kind


def decompose(track: pd.DataFrame, wavelet_config: WaveletConfig | None = None,
              events: pd.DataFrame | None = None) -> pd.DataFrame:
    """Split resampled velocities into ridge oscillations by event kind and drift.

    Parameters
    ----------
    track : pandas.DataFrame
        Resampled tracks (:func:`driftloop.resample.resample_all`): columns
        ``drifter_id``, ``segment``, ``time``, ``lat``, ``lon``, ``u``, ``v``
        (m/s) on a uniform grid within each segment.
    wavelet_config : WaveletConfig, optional
        Transform and ridge parameters; use the same as for the events.
    events : pandas.DataFrame, optional
        Loop events (:func:`driftloop.loops.find_events`): at least
        ``drifter_id``, ``start``, ``end``, ``kind`` (and ``sense``).  If
        omitted they are computed from ``track`` with ``wavelet_config``.

    Returns
    -------
    pandas.DataFrame
        One row per grid point, columns :data:`DECOMPOSITION_COLUMNS`
        (velocities in m/s), in the order of ``track`` sorted by drifter,
        segment and time.  The oscillatory parts are zero where no ridge is;
        segments shorter than eight samples or with a non-finite velocity
        get no ridge analysis (all drift).

    Notes
    -----
    Method in the module docstring (:mod:`driftloop.drift`).
    """
    config = wavelet_config or WaveletConfig()
    if events is None:
        from driftloop.loops import find_events
        events = find_events(track, wavelet=config).events
    spans = _event_spans(events)
    order, starts = _segment_order(track)
    if order.size == 0:
        return pd.DataFrame({c: pd.Series(dtype=float) for c in DECOMPOSITION_COLUMNS})
    times = _time_ns(track["time"])[order]
    ids = track["drifter_id"].to_numpy()[order]
    lat = track["lat"].to_numpy(dtype=float)[order]
    z = track["u"].to_numpy(dtype=float)[order] + 1j * track["v"].to_numpy(dtype=float)[order]
    osc = {k: np.zeros(z.size, dtype=complex) for k in KINDS}
    for start, stop in zip(starts[:-1].tolist(), starts[1:].tolist(), strict=True):
        z_seg = z[start:stop]
        if z_seg.size < _MIN_SAMPLES or not np.all(np.isfinite(z_seg)):
            continue
        t_seg = times[start:stop]
        dt_s = float(np.median(np.diff(t_seg))) / 1e9
        # the same call as the loop stage (loops._pieces_of_segment), so the
        # decomposition uses the ridges the events came from
        lat_mean = float(np.mean(lat[start:stop]))
        drifter_spans = spans.get(str(ids[start]), [])
        for ridge in detect(z_seg, dt_s, config, latitude=lat_mean).ridges:
            idx = np.asarray(ridge.index)
            kind = _label(int(t_seg[idx[0]]), int(t_seg[idx[-1]]), int(ridge.sense),
                          drifter_spans)
            osc[kind][start + idx] += reconstruct_ridge(ridge)
    drift = z - sum(osc.values())
    out = {
        "drifter_id": ids,
        "segment": track["segment"].to_numpy()[order],
        "time": track["time"].array.take(order),
        "lat": lat,
        "lon": track["lon"].to_numpy(dtype=float)[order],
    }
    for k in KINDS:
        out[f"u_{k}"] = osc[k].real
        out[f"v_{k}"] = osc[k].imag
    out["u_drift"] = drift.real
    out["v_drift"] = drift.imag
    table = pd.DataFrame(out)
    table["time"] = pd.to_datetime(table["time"], utc=True)
    return table


def _segment_order(track: pd.DataFrame) -> tuple[np.ndarray, np.ndarray]:
    """Row positions by drifter, segment and time, and where each segment starts.

    The order is that of iterating ``groupby(["drifter_id", "segment"])``
    (sorted keys, rows with a missing key left out) and sorting each group
    by time with a stable sort; ``starts`` holds the first position of each
    segment in ``order`` and, last, ``order.size``.
    """
    codes = track.groupby(["drifter_id", "segment"], sort=True, observed=True).ngroup()
    codes = codes.to_numpy(dtype=float)
    by_time = np.asarray(track["time"].reset_index(drop=True)
                         .sort_values(kind="stable").index, dtype=np.int64)
    by_time = by_time[np.isfinite(codes[by_time])]
    order = by_time[np.argsort(codes[by_time], kind="stable")]
    if order.size == 0:
        return order, np.zeros(1, dtype=np.int64)
    sorted_codes = codes[order]
    starts = np.flatnonzero(np.diff(sorted_codes)) + 1
    return order, np.concatenate([[0], starts, [order.size]]).astype(np.int64)


def _num(value: Any) -> float | None:
    """JSON-ready float: None for NaN, infinite or missing."""
    if value is None:
        return None
    value = float(value)
    return value if math.isfinite(value) else None


def _direction_deg(u: float, v: float) -> float | None:
    """Direction towards which (u, v) points, degrees clockwise from north."""
    if not (math.isfinite(u) and math.isfinite(v)) or (u == 0.0 and v == 0.0):
        return None
    return float(np.mod(np.degrees(np.arctan2(u, v)), 360.0))


def _quantiles(x: np.ndarray) -> dict[str, float | None]:
    x = x[np.isfinite(x)]
    if x.size == 0:
        return {"median": None, "p10": None, "p90": None}
    p10, p50, p90 = np.quantile(x, [0.1, 0.5, 0.9])
    return {"median": float(p50), "p10": float(p10), "p90": float(p90)}


def _block(rows: pd.DataFrame, decay_h: list[float]) -> dict[str, Any]:
    u = rows["u_drift"].to_numpy(dtype=float)
    v = rows["v_drift"].to_numpy(dtype=float)
    ok = np.isfinite(u) & np.isfinite(v)
    mean_u = float(np.mean(u[ok])) if ok.any() else math.nan
    mean_v = float(np.mean(v[ok])) if ok.any() else math.nan
    speed = np.hypot(u[ok], v[ok])
    inertial = np.hypot(rows["u_inertial"].to_numpy(dtype=float),
                        rows["v_inertial"].to_numpy(dtype=float))
    nonzero = inertial[inertial > 0]
    decays = sorted(float(d) for d in decay_h if math.isfinite(d))
    return {
        "samples": int(ok.sum()),
        "mean_drift_u_m_s": _num(mean_u),
        "mean_drift_v_m_s": _num(mean_v),
        "mean_drift_speed_m_s": _num(math.hypot(mean_u, mean_v)),
        "mean_drift_direction_deg": _direction_deg(mean_u, mean_v),
        "drift_speed_mean_m_s": _num(speed.mean()) if speed.size else None,
        "drift_speed_m_s": _quantiles(speed),
        "inertial_speed_median_m_s": _num(np.median(nonzero)) if nonzero.size else None,
        "inertial_speed_p90_m_s": _num(np.quantile(nonzero, 0.9)) if nonzero.size else None,
        "inertial_fraction": _num(nonzero.size / inertial.size) if inertial.size else None,
        "inertial_decay_times_h": decays,
        "inertial_decay_time_median_h": _num(np.median(decays)) if decays else None,
    }


def _dispersion_entry(table: pd.DataFrame, label: str) -> dict[str, Any] | None:
    rows = table[table["drifter_id"] == label]
    if rows.empty:
        return None
    out: dict[str, Any] = {}
    for _, r in rows.iterrows():
        out[str(r["component"])] = {
            "samples": int(r["samples"]),
            "variance_m2_s2": _num(r["variance_m2_s2"]),
            "variance_ci_m2_s2": [_num(r["variance_low_m2_s2"]), _num(r["variance_high_m2_s2"])],
            "integral_time_s": _num(r["integral_time_s"]),
            "integral_time_ci_s": [_num(r["integral_time_low_s"]),
                                   _num(r["integral_time_high_s"])],
            "diffusivity_m2_s": _num(r["diffusivity_m2_s"]),
            "diffusivity_ci_m2_s": [_num(r["diffusivity_low_m2_s"]),
                                    _num(r["diffusivity_high_m2_s"])],
            "method": str(r["method"]),
            "limit_s": _num(r["limit_s"]),
            "limit_found": bool(r["limit_found"]),
            "dof_effective": _num(r["dof_effective"]),
        }
    return out


def _stats_entry(stats: Mapping[str, ComponentStatistics]) -> dict[str, Any]:
    """Return the ``dispersion`` entry of :func:`single_particle_statistics` results.

    The same entry :func:`_dispersion_entry` makes from the rows of the table.
    """
    out: dict[str, Any] = {}
    for name, st in stats.items():
        out[str(name)] = {
            "samples": int(st.samples),
            "variance_m2_s2": _num(st.variance_m2_s2),
            "variance_ci_m2_s2": [_num(st.variance_ci_m2_s2[0]), _num(st.variance_ci_m2_s2[1])],
            "integral_time_s": _num(st.integral_time_s),
            "integral_time_ci_s": [_num(st.integral_time_ci_s[0]),
                                   _num(st.integral_time_ci_s[1])],
            "diffusivity_m2_s": _num(st.diffusivity_m2_s),
            "diffusivity_ci_m2_s": [_num(st.diffusivity_ci_m2_s[0]),
                                    _num(st.diffusivity_ci_m2_s[1])],
            "method": str(st.method),
            "limit_s": _num(st.limit_s),
            "limit_found": bool(st.limit_found),
            "dof_effective": _num(st.dof_effective),
        }
    return out


def grid_step_counts(decomposed: pd.DataFrame) -> dict[int, int]:
    """Count the time steps (ns) between grid points within each segment.

    Parameters
    ----------
    decomposed : pandas.DataFrame
        Output of :func:`decompose` (or a resampled track).

    Returns
    -------
    dict of int to int
        Step (ns) -> how many times it occurs; merged over drifters, these
        counts give :func:`grid_step_from_counts` the release's grid step.
    """
    if len(decomposed) < 2:
        return {}
    # segments numbered in the order they first appear (as groupby with
    # sort=False meets them), rows with a missing key left out
    ids = pd.factorize(decomposed["drifter_id"])[0].astype(np.int64)
    segments = pd.factorize(decomposed["segment"])[0].astype(np.int64)
    keep = np.flatnonzero((ids >= 0) & (segments >= 0))
    codes = pd.factorize(ids[keep] * (int(segments.max()) + 1) + segments[keep])[0]
    t = _time_ns(decomposed["time"])[keep]
    order = np.lexsort((t, codes))  # by segment (first seen first), then time
    codes, t = codes[order], t[order]
    within = codes[1:] == codes[:-1]
    steps, segment = np.diff(t)[within], codes[1:][within]
    if steps.size == 0:
        return {}
    # keys in the order the segments meet them (each segment's steps ascending)
    order = np.lexsort((steps, segment))
    values, first, n = np.unique(steps[order], return_index=True, return_counts=True)
    return {int(values[i]): int(n[i]) for i in np.argsort(first, kind="stable")}


def grid_step_from_counts(counts: Mapping[int, int]) -> float:
    """Median grid step (s) from step counts, as the median of all steps.

    Parameters
    ----------
    counts : mapping of int to int
        Step (ns) -> occurrences (:func:`grid_step_counts`).

    Returns
    -------
    float
        The median step in seconds (the same value as ``numpy.median`` of
        every step), 3600 when there is no step.
    """
    total = sum(counts.values())
    if total == 0:
        return 3600.0
    values = sorted(counts)
    cumulative = np.cumsum([counts[v] for v in values])

    def nth(k: int) -> int:  # k-th smallest step, 0-based
        return values[int(np.searchsorted(cumulative, k + 1))]

    middle = [nth(total // 2)] if total % 2 else [nth(total // 2 - 1), nth(total // 2)]
    return float(np.median(np.array(middle, dtype=np.int64))) / 1e9


def _grid_step_s(decomposed: pd.DataFrame) -> float:
    return grid_step_from_counts(grid_step_counts(decomposed))


def _velocities(decomposed: pd.DataFrame) -> pd.DataFrame:
    return pd.DataFrame({
        "drifter_id": decomposed["drifter_id"].astype(str),
        "time": decomposed["time"],
        "u_m_s": decomposed["u_drift"].astype(float),
        "v_m_s": decomposed["v_drift"].astype(float),
    })


def inertial_decay_times(events: pd.DataFrame | None) -> dict[str, list[float]]:
    """Decay times (h) of the inertial events, per drifter.

    Parameters
    ----------
    events : pandas.DataFrame or None
        Loop events (``drifter_id``, ``kind``, ``decay_time_h``).

    Returns
    -------
    dict of str to list of float
        In event order.
    """
    decay: dict[str, list[float]] = {}
    if events is not None and len(events):
        inertial = events[events["kind"].astype(str) == "inertial"]
        for drifter, d in zip(inertial["drifter_id"].astype(str),
                              inertial["decay_time_h"].astype(float), strict=True):
            decay.setdefault(drifter, []).append(float(d))
    return decay


def drifter_drift_statistics(rows: pd.DataFrame, drifter: str, decay_h: list[float],
                             dt_s: float, dispersion_options: Mapping[str, Any] | None = None,
                             series: tuple[np.ndarray, np.ndarray] | None = None
                             ) -> dict[str, Any]:
    """Compute the :func:`drift_statistics` entry of one drifter.

    Parameters
    ----------
    rows : pandas.DataFrame
        The drifter's rows of :func:`decompose`.
    drifter : str
        Its id.
    decay_h : list of float
        Decay times of its inertial events (h).
    dt_s : float
        Grid step of the release (s).
    dispersion_options : mapping, optional
        As for :func:`drift_statistics`.
    series : tuple of numpy.ndarray, optional
        ``drift_series(rows, drifter, dt_s)`` when the caller has it already.

    Returns
    -------
    dict
        The entry (without ``drifters``), as :func:`drift_statistics` gives it.
    """
    options = {"n_boot": 200, **dict(dispersion_options or {})}
    labels = pd.unique(rows["drifter_id"])
    if len(labels) == 1 and isinstance(labels[0], str) and labels[0] == drifter:
        # one drifter: its statistics directly, as dispersion_by_drifter gives them
        dt_s = _check_dt(dt_s)
        u, v = series if series is not None else drift_series(rows, drifter, dt_s)
        ok = np.isfinite(u) & np.isfinite(v)
        stats = single_particle_statistics(u, v, dt_s, **options) if ok.sum() >= 3 else None
        dispersion = None if stats is None else _stats_entry(stats)
    else:
        table = dispersion_by_drifter(_velocities(rows), dt_s, release=False, **options)
        dispersion = _dispersion_entry(table, drifter)
    entry = _block(rows, decay_h)
    entry["dispersion"] = dispersion
    return entry


def drift_series(rows: pd.DataFrame, drifter: str, dt_s: float) -> tuple[np.ndarray, np.ndarray]:
    """One drifter's drift velocity on its full grid (NaN in gaps), as the release pools it.

    Parameters
    ----------
    rows : pandas.DataFrame
        The drifter's rows of :func:`decompose`.
    drifter : str
        Its id.
    dt_s : float
        Grid step of the release (s).

    Returns
    -------
    u, v : numpy.ndarray
        East and north drift velocity (m/s).
    """
    return _regrid_arrays(_time_ns(rows["time"]), rows["u_drift"].to_numpy(dtype=float),
                          rows["v_drift"].to_numpy(dtype=float), dt_s, drifter)


def release_drift_statistics(rows: pd.DataFrame, decay_h: list[float],
                             series: list[tuple[np.ndarray, np.ndarray]], dt_s: float,
                             n_drifters: int,
                             dispersion_options: Mapping[str, Any] | None = None
                             ) -> dict[str, Any]:
    """Compute the release entry of :func:`drift_statistics`.

    Parameters
    ----------
    rows : pandas.DataFrame
        ``u_drift``, ``v_drift``, ``u_inertial``, ``v_inertial`` of every
        drifter, in the order of :func:`decompose` over the release.
    decay_h : list of float
        Decay times of every inertial event (h).
    series : list of (u, v)
        :func:`drift_series` of every drifter, sorted by id.
    dt_s : float
        Grid step (s).
    n_drifters : int
        Drifters with a drift entry.
    dispersion_options : mapping, optional
        As for :func:`drift_statistics`.

    Returns
    -------
    dict
        The release entry.
    """
    options = {"n_boot": 200, **dict(dispersion_options or {})}
    dispersion = None
    if series:
        us = [s[0] for s in series]
        vs = [s[1] for s in series]
        dispersion = _stats_entry(single_particle_statistics(us, vs, dt_s, **options))
    release = _block(rows, decay_h)
    release["drifters"] = n_drifters
    release["dispersion"] = dispersion
    release["grid_step_s"] = dt_s
    return release


def drift_statistics(decomposed: pd.DataFrame, events: pd.DataFrame | None = None, *,
                     dispersion_options: Mapping[str, Any] | None = None
                     ) -> dict[str, dict[str, Any]]:
    """Drift, inertial-motion and dispersion statistics per drifter and for the release.

    Parameters
    ----------
    decomposed : pandas.DataFrame
        Output of :func:`decompose`.
    events : pandas.DataFrame, optional
        Loop events (``drifter_id``, ``kind``, ``decay_time_h``); the decay
        times of the ``inertial`` ones are reported.
    dispersion_options : mapping, optional
        Passed to :func:`driftloop.dispersion.dispersion_by_drifter`
        (``method``, ``n_boot``, ``confidence``, ...).

    Returns
    -------
    dict of str to dict
        One entry per drifter id and one under :data:`RELEASE_KEY` pooling
        all drifters.  Values are JSON-ready (float, int, str, bool, list,
        dict or None for undefined):

        ``samples``
            Grid points with a drift velocity.
        ``mean_drift_u_m_s``, ``mean_drift_v_m_s``, ``mean_drift_speed_m_s``
            Mean drift vector (m/s) and its length.
        ``mean_drift_direction_deg``
            Direction of the mean drift vector, degrees clockwise from north,
            the way it goes *towards*.
        ``drift_speed_mean_m_s``, ``drift_speed_m_s``
            Mean, and ``median``, ``p10``, ``p90`` of |u_drift + i v_drift|.
        ``inertial_speed_median_m_s``, ``inertial_speed_p90_m_s``
            Median and 90th percentile of |z_inertial| where it is nonzero.
        ``inertial_fraction``
            Fraction of grid points with inertial motion (a ridge labelled
            inertial).
        ``inertial_decay_times_h``, ``inertial_decay_time_median_h``
            Finite e-folding decay times of the inertial events (h), sorted,
            and their median.
        ``dispersion``
            Per component (``u``, ``v``, ``vector``) of the drift residual:
            ``variance_m2_s2`` (sigma^2), ``integral_time_s`` (T_L),
            ``diffusivity_m2_s`` (K = sigma^2 T_L), their confidence
            intervals ``*_ci_*`` [low, high], ``method`` and ``limit_s`` of
            the T_L integration, ``limit_found``, ``dof_effective``; None
            when the drifter is too short.
    """
    decay = inertial_decay_times(events)
    result: dict[str, dict[str, Any]] = {}
    if decomposed.empty:
        return result
    dt_s = _grid_step_s(decomposed)
    ids = decomposed["drifter_id"].astype(str)
    series = []
    for drifter in sorted(ids.unique()):
        rows = decomposed[ids == drifter]
        result[drifter] = drifter_drift_statistics(rows, drifter, decay.get(drifter, []), dt_s,
                                                   dispersion_options)
        series.append(drift_series(rows, drifter, dt_s))
    result[RELEASE_KEY] = release_drift_statistics(
        decomposed, [d for ds in decay.values() for d in ds], series, dt_s, len(result),
        dispersion_options)
    return result
