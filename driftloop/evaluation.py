"""Scoring a loop-event catalogue against ground-truth events.

The loop stage reports a catalogue of events (:data:`EVENT_COLUMNS`, one
row per event, as ``Analysis.events``).  The synthetic generator knows which
events are really there (:func:`driftloop.synth.truth_events`).  This module
pairs the two and turns the pairs into scores; it works on plain tables and
knows nothing about how either was made.

Matching rule
-------------
A detected event d and a truth event t *qualify* as a pair when

1. they belong to the same drifter;
2. their time intervals overlap by at least ``min_overlap`` (default one
   half) of the shorter of the two durations;
3. their periods agree within ``period_tolerance`` (default 25 %):
   |ln(P_d / P_t)| <= ln(1 + tolerance).  Without this a loop found at the
   inertial period could be paired with a concurrent eddy or tide.

Pairs are then chosen one to one, greedily: pairs whose kinds agree first,
then by decreasing intersection over union of the two intervals, then by
increasing period difference.  A detected event left without a partner that
qualifies with a truth event of its own kind which is already paired is a
*fragment* (typically one event cut in two by a data gap); fragments are
reported on their own and count neither for nor, by default, against the
detector.  Every other unpaired detection is a false event, every unpaired
truth event a missed one.

Scores
------
For inertial events: precision = TP / (TP + FP), recall = TP / (TP + FN),
F1 = 2 P R / (P + R), with TP the pairs in which both events are inertial,
FP the inertial detections that are neither such a pair nor a fragment and
FN the truth inertial events without an inertial partner (a truth event
paired with a detection of another kind is missed).  Over the TP pairs:
the median of |P_d / P_t - 1| and |R_d / R_t - 1| in per cent, and the
share with the right spin.  An eddy *labelled inertial* is a truth eddy
paired with an inertial detection.  On quiet drifters (no inertial motion
at all) every inertial detection is false; their rate is given per 1000
drifter-days.

These are the usual event-detection scores (precision, recall and their
harmonic mean; common practice, e.g. van Rijsbergen 1979, *Information
Retrieval*, from memory); the overlap rule and the targets
(:data:`TARGETS`) are this project's choices.
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from typing import NamedTuple

import numpy as np
import pandas as pd

from driftloop.physics import coriolis_parameter

__all__ = [
    "EVENT_COLUMNS",
    "EVENT_KINDS",
    "SPINS",
    "TARGETS",
    "EventMatching",
    "check_events",
    "check_targets",
    "match_events",
    "score_events",
    "score_table",
    "truth_as_catalogue",
]

#: Columns of the loop-event catalogue (``Analysis.events``), in order:
#: ``event_id`` (str), ``drifter_id`` (str), ``segment`` (int), ``start``,
#: ``end`` (datetime64[ns, UTC]), ``duration_h``, ``cycles``, ``kind``
#: (one of :data:`EVENT_KINDS`), ``spin`` (one of :data:`SPINS`),
#: ``period_h``, ``radius_km``, ``speed_m_s``, ``lat``, ``lon`` (mean
#: position, degrees), ``inertial_period_h``, ``inertial_radius_km`` (the
#: local 2 pi / |f| and speed / |f|), ``period_ratio``, ``radius_ratio``
#: (event over inertial value).
EVENT_COLUMNS = (
    "event_id",
    "drifter_id",
    "segment",
    "start",
    "end",
    "duration_h",
    "cycles",
    "kind",
    "spin",
    "period_h",
    "radius_km",
    "speed_m_s",
    "lat",
    "lon",
    "inertial_period_h",
    "inertial_radius_km",
    "period_ratio",
    "radius_ratio",
)

#: Values of the ``kind`` column.
EVENT_KINDS = ("inertial", "eddy", "tidal", "other")

#: Values of the ``spin`` column: cyclonic turns with the Earth
#: (anticlockwise north of the equator, clockwise south of it).
SPINS = ("cyclonic", "anticyclonic")

#: Targets for the inertial scores: key of :func:`score_events`, comparison
#: and value.  Project choices.
TARGETS = {
    "inertial_f1": (">=", 0.9),
    "median_period_error_pct": ("<=", 3.0),
    "median_radius_error_pct": ("<=", 15.0),
    "spin_correct_pct": (">=", 100.0),
    "false_inertial_per_1000_days": ("<=", 5.0),
}

_HOUR_S = 3600.0


class EventMatching(NamedTuple):
    """What :func:`match_events` returns.

    Attributes
    ----------
    pairs : pandas.DataFrame
        One row per pair: ``detected`` and ``truth`` (index labels in the
        two input tables), ``drifter_id``, ``detected_kind``,
        ``truth_kind``, ``overlap_h``, ``iou`` (intersection over union of
        the intervals) and ``period_ratio`` (detected over true period).
    fragments : pandas.Index
        Labels of unpaired detections that repeat a paired truth event of
        their own kind.
    unmatched_detected : pandas.Index
        Labels of the other unpaired detections.
    unmatched_truth : pandas.Index
        Labels of the unpaired truth events.
    """

    pairs: pd.DataFrame
    fragments: pd.Index
    unmatched_detected: pd.Index
    unmatched_truth: pd.Index


def check_events(events: pd.DataFrame) -> None:
    """Check that a table follows the event-catalogue contract.

    Parameters
    ----------
    events : pandas.DataFrame
        A catalogue, e.g. ``Analysis.events``.

    Raises
    ------
    ValueError
        Listing every problem found: missing columns, times that are not
        UTC or end before they start, unknown kinds or spins, repeated
        ``event_id``.

    Examples
    --------
    >>> check_events(pd.DataFrame({"event_id": ["e1"]}))  # doctest: +ELLIPSIS
    Traceback (most recent call last):
    ...
    ValueError: events table: missing columns ['drifter_id', 'segment', ...]
    """
    problems = []
    missing = [c for c in EVENT_COLUMNS if c not in events.columns]
    if missing:
        raise ValueError(f"events table: missing columns {missing}")
    for key in ("start", "end"):
        dtype = events[key].dtype
        if not (isinstance(dtype, pd.DatetimeTZDtype) and str(dtype.tz) == "UTC"):
            problems.append(f"{key} must be datetime64[ns, UTC], not {dtype}")
    if not problems and (events["end"] < events["start"]).any():
        problems.append(f"{int((events['end'] < events['start']).sum())} events end before "
                        "they start")
    kinds = set(events["kind"].dropna().astype(str)) - set(EVENT_KINDS)
    if kinds or events["kind"].isna().any():
        problems.append(f"kind must be one of {list(EVENT_KINDS)}, found {sorted(kinds)} "
                        f"and {int(events['kind'].isna().sum())} missing")
    spins = set(events["spin"].dropna().astype(str)) - set(SPINS)
    if spins:
        problems.append(f"spin must be one of {list(SPINS)}, found {sorted(spins)}")
    if events["event_id"].duplicated().any():
        problems.append("event_id values repeat")
    if problems:
        raise ValueError("events table: " + "; ".join(problems))


def _epoch_s(times: pd.Series) -> np.ndarray:
    """Return times as seconds since 1970-01-01 (UTC for tz-aware times)."""
    return pd.DatetimeIndex(times).as_unit("ns").asi8.astype(float) / 1e9


def _duration_s(table: pd.DataFrame) -> np.ndarray:
    return _epoch_s(table["end"]) - _epoch_s(table["start"])


def match_events(detected: pd.DataFrame, truth: pd.DataFrame, *, min_overlap: float = 0.5,
                 period_tolerance: float = 0.25) -> EventMatching:
    """Pair detected events with truth events, one to one.

    Parameters
    ----------
    detected : pandas.DataFrame
        Detected events with at least ``drifter_id``, ``kind``, ``start``,
        ``end`` (UTC) and ``period_h``.
    truth : pandas.DataFrame
        Truth events with the same columns
        (:func:`driftloop.synth.truth_events`).
    min_overlap : float, optional
        Smallest overlap, as a fraction of the shorter event's duration.
    period_tolerance : float, optional
        Largest relative period difference, as |ln(P_d / P_t)| <=
        ln(1 + tolerance).

    Returns
    -------
    EventMatching
        The pairs, the fragments and the unpaired events of both tables.

    Notes
    -----
    The rule is given in the module notes (:mod:`driftloop.evaluation`).
    """
    if not 0 < min_overlap <= 1 or not period_tolerance > 0:
        raise ValueError("need 0 < min_overlap <= 1 and period_tolerance > 0")
    def slim(table: pd.DataFrame, label: str) -> pd.DataFrame:
        t0, t1 = _epoch_s(table["start"]), _epoch_s(table["end"])
        return pd.DataFrame({
            "drifter_id": table["drifter_id"].astype(str).to_numpy(),
            "kind": table["kind"].astype(str).to_numpy(), "t0": t0, "t1": t1, "dur": t1 - t0,
            "period_h": table["period_h"].to_numpy(dtype=float), label: table.index})

    cand = slim(detected, "label_det").merge(slim(truth, "label_true"), on="drifter_id",
                                             suffixes=("_det", "_true"))
    overlap = (np.minimum(cand["t1_det"], cand["t1_true"])
               - np.maximum(cand["t0_det"], cand["t0_true"])).to_numpy(dtype=float)
    shorter = np.minimum(cand["dur_det"].to_numpy(), cand["dur_true"].to_numpy())
    with np.errstate(divide="ignore", invalid="ignore"):
        signed = np.log(cand["period_h_det"].to_numpy(dtype=float)
                        / cand["period_h_true"].to_numpy(dtype=float))
    log_ratio = np.abs(signed)
    ok = (overlap > 0) & (overlap >= min_overlap * shorter)
    ok &= log_ratio <= math.log1p(period_tolerance)
    cand = cand.loc[ok].assign(
        overlap_s=overlap[ok], log_ratio=log_ratio[ok], signed=signed[ok],
        same=(cand.loc[ok, "kind_det"].astype(str) == cand.loc[ok, "kind_true"].astype(str)))
    cand["iou"] = cand["overlap_s"] / (cand["dur_det"] + cand["dur_true"] - cand["overlap_s"])
    cand = cand.sort_values(["same", "iou", "log_ratio"], ascending=[False, False, True],
                            kind="stable")
    used_d: set = set()
    used_t: set = set()
    chosen = []
    for row in cand.itertuples(index=False):
        if row.label_det in used_d or row.label_true in used_t:
            continue
        used_d.add(row.label_det)
        used_t.add(row.label_true)
        chosen.append(row)
    pairs = pd.DataFrame({
        "detected": [r.label_det for r in chosen],
        "truth": [r.label_true for r in chosen],
        "drifter_id": pd.array([r.drifter_id for r in chosen], dtype=pd.StringDtype()),
        "detected_kind": pd.array([str(r.kind_det) for r in chosen], dtype=pd.StringDtype()),
        "truth_kind": pd.array([str(r.kind_true) for r in chosen], dtype=pd.StringDtype()),
        "overlap_h": np.array([r.overlap_s for r in chosen], dtype=float) / _HOUR_S,
        "iou": np.array([r.iou for r in chosen], dtype=float),
        "period_ratio": np.exp(np.array([r.signed for r in chosen], dtype=float)),
    })
    paired_kind = dict(zip(pairs["truth"], pairs["truth_kind"].astype(str), strict=True))
    spare = cand[~cand["label_det"].isin(used_d) & cand["label_true"].isin(used_t)]
    spare = spare[spare["kind_det"].astype(str) == spare["label_true"].map(paired_kind)]
    fragments = detected.index[detected.index.isin(spare["label_det"])]
    unmatched_d = detected.index[~detected.index.isin(used_d) & ~detected.index.isin(fragments)]
    unmatched_t = truth.index[~truth.index.isin(used_t)]
    return EventMatching(pairs, fragments, unmatched_d, unmatched_t)


def _median_abs_pct(ratio: np.ndarray) -> float:
    err = np.abs(np.asarray(ratio, dtype=float) - 1.0) * 100.0
    err = err[np.isfinite(err)]
    return float(np.median(err)) if err.size else math.nan


def _share_pct(hits: np.ndarray) -> float:
    return float(100.0 * np.mean(hits)) if len(hits) else math.nan


def score_events(detected: pd.DataFrame, truth: pd.DataFrame, *,
                 quiet_drifter_days: Mapping[str, float] | None = None,
                 min_overlap: float = 0.5, period_tolerance: float = 0.25,
                 fragments_are_false: bool = False) -> dict:
    """Score a detected event catalogue against truth events.

    Parameters
    ----------
    detected : pandas.DataFrame
        Detected events: ``drifter_id``, ``kind``, ``start``, ``end``,
        ``period_h``, ``radius_km``, ``spin`` (the catalogue contract
        :data:`EVENT_COLUMNS` has them all).
    truth : pandas.DataFrame
        Truth events (:func:`driftloop.synth.truth_events`).
    quiet_drifter_days : mapping of str to float, optional
        Record length (days) of each quiet drifter, one that has no
        inertial motion; inertial detections on them are counted against
        these days.
    min_overlap, period_tolerance : float, optional
        Matching rule, see :func:`match_events`.
    fragments_are_false : bool, optional
        Count fragments as false events (default: report them apart).

    Returns
    -------
    dict
        Counts (``n_truth_inertial``, ``n_detected_inertial``,
        ``n_matched_inertial``, ``n_false_inertial``,
        ``n_missed_inertial``, ``n_fragments``), ``inertial_precision``,
        ``inertial_recall``, ``inertial_f1``;
        ``median_period_error_pct``, ``median_radius_error_pct`` and
        ``spin_correct_pct`` over the matched inertial events;
        ``n_truth_eddy``, ``n_eddy_matched``, ``n_eddy_labelled_eddy``,
        ``n_eddy_labelled_inertial``, ``eddy_labelled_inertial_pct``,
        ``eddy_spin_correct_pct``, ``eddy_median_period_error_pct``;
        ``n_truth_tidal``, ``n_tidal_matched``, ``n_tidal_labelled_tidal``;
        ``quiet_drifter_days``, ``n_false_inertial_quiet``,
        ``false_inertial_per_1000_days``.  Undefined shares (no events to
        take them over) are NaN.

    Examples
    --------
    >>> t = pd.Timestamp("2025-01-01", tz="UTC")
    >>> truth = pd.DataFrame({"drifter_id": ["A"], "kind": ["inertial"], "start": [t],
    ...                       "end": [t + pd.Timedelta("3D")], "period_h": [17.0],
    ...                       "radius_km": [2.0], "spin": ["anticyclonic"]})
    >>> scores = score_events(truth, truth, quiet_drifter_days={"Q": 80.0})
    >>> scores["inertial_f1"], scores["false_inertial_per_1000_days"]
    (1.0, 0.0)
    """
    matching = match_events(detected, truth, min_overlap=min_overlap,
                            period_tolerance=period_tolerance)
    pairs = matching.pairs
    det_kind = detected["kind"].astype(str)
    true_kind = truth["kind"].astype(str)

    both = pairs[(pairs["detected_kind"] == "inertial") & (pairs["truth_kind"] == "inertial")]
    n_truth = int((true_kind == "inertial").sum())
    n_det = int((det_kind == "inertial").sum())
    tp = len(both)
    frag = int((det_kind.loc[matching.fragments] == "inertial").sum())
    fp = n_det - tp - (0 if fragments_are_false else frag)
    precision = tp / (tp + fp) if tp + fp > 0 else math.nan
    recall = tp / n_truth if n_truth else math.nan
    if math.isnan(precision) or math.isnan(recall):
        f1 = math.nan
    else:
        f1 = 2 * precision * recall / (precision + recall) if precision + recall > 0 else 0.0

    d_rows = detected.loc[both["detected"]]
    t_rows = truth.loc[both["truth"]]
    period_ratio = d_rows["period_h"].to_numpy(dtype=float) / t_rows["period_h"].to_numpy(
        dtype=float)
    radius_ratio = d_rows["radius_km"].to_numpy(dtype=float) / t_rows["radius_km"].to_numpy(
        dtype=float)
    spin_ok = (d_rows["spin"].astype(str).to_numpy() == t_rows["spin"].astype(str).to_numpy())

    eddy_pairs = pairs[pairs["truth_kind"] == "eddy"]
    eddy_eddy = eddy_pairs[eddy_pairs["detected_kind"] == "eddy"]
    n_eddy = int((true_kind == "eddy").sum())
    n_eddy_inertial = int((eddy_pairs["detected_kind"] == "inertial").sum())
    ed = detected.loc[eddy_eddy["detected"]]
    et = truth.loc[eddy_eddy["truth"]]
    tidal_pairs = pairs[pairs["truth_kind"] == "tidal"]

    quiet = dict(quiet_drifter_days or {})
    quiet_days = float(sum(quiet.values()))
    on_quiet = detected["drifter_id"].astype(str).isin(list(quiet)) & (det_kind == "inertial")
    n_quiet = int(on_quiet.sum())
    return {
        "n_truth_inertial": n_truth,
        "n_detected_inertial": n_det,
        "n_matched_inertial": tp,
        "n_false_inertial": fp,
        "n_missed_inertial": n_truth - tp,
        "n_fragments": len(matching.fragments),
        "n_inertial_fragments": frag,
        "inertial_precision": precision,
        "inertial_recall": recall,
        "inertial_f1": f1,
        "median_period_error_pct": _median_abs_pct(period_ratio),
        "median_radius_error_pct": _median_abs_pct(radius_ratio),
        "spin_correct_pct": _share_pct(spin_ok),
        "n_truth_eddy": n_eddy,
        "n_eddy_matched": len(eddy_pairs),
        "n_eddy_labelled_eddy": len(eddy_eddy),
        "n_eddy_labelled_inertial": n_eddy_inertial,
        "eddy_labelled_inertial_pct": 100.0 * n_eddy_inertial / n_eddy if n_eddy else math.nan,
        "eddy_spin_correct_pct": _share_pct(
            ed["spin"].astype(str).to_numpy() == et["spin"].astype(str).to_numpy()),
        "eddy_median_period_error_pct": _median_abs_pct(
            ed["period_h"].to_numpy(dtype=float) / et["period_h"].to_numpy(dtype=float)),
        "n_truth_tidal": int((true_kind == "tidal").sum()),
        "n_tidal_matched": len(tidal_pairs),
        "n_tidal_labelled_tidal": int((tidal_pairs["detected_kind"] == "tidal").sum()),
        "quiet_drifter_days": quiet_days,
        "n_false_inertial_quiet": n_quiet,
        "false_inertial_per_1000_days": (1000.0 * n_quiet / quiet_days if quiet_days > 0
                                         else math.nan),
    }


def check_targets(scores: Mapping[str, float],
                  targets: Mapping[str, tuple[str, float]] | None = None) -> dict[str, bool]:
    """Say which targets the scores meet.

    Parameters
    ----------
    scores : mapping
        What :func:`score_events` returns.
    targets : mapping, optional
        Score key -> (``">="`` or ``"<="``, value); default :data:`TARGETS`.

    Returns
    -------
    dict
        Score key -> whether its target holds (False for an undefined score).

    Examples
    --------
    >>> check_targets({"inertial_f1": 0.95}, {"inertial_f1": (">=", 0.9)})
    {'inertial_f1': True}
    """
    targets = TARGETS if targets is None else targets
    out = {}
    for key, (op, value) in targets.items():
        got = float(scores.get(key, math.nan))
        if math.isnan(got):
            out[key] = False
        elif op == ">=":
            out[key] = got >= value - 1e-9
        elif op == "<=":
            out[key] = got <= value + 1e-9
        else:
            raise ValueError(f"target {key}: comparison must be '>=' or '<=', got {op!r}")
    return out


def _num(value: float, spec: str, unit: str = "") -> str:
    return "n/a" if value is None or math.isnan(value) else f"{value:{spec}}{unit}"


def score_table(scores: Mapping[str, float]) -> str:
    """Format scores as a Markdown table with the targets and whether they hold.

    Parameters
    ----------
    scores : mapping
        What :func:`score_events` returns.

    Returns
    -------
    str
        A Markdown table, one metric a row.
    """
    met = check_targets(scores)

    def verdict(key):
        return "yes" if met[key] else "**no**"

    s = scores
    rows = [
        ("inertial events: truth / detected / matched / fragments",
         f"{s['n_truth_inertial']} / {s['n_detected_inertial']} / {s['n_matched_inertial']} / "
         f"{s['n_inertial_fragments']}", "", ""),
        ("inertial: false / missed", f"{s['n_false_inertial']} / {s['n_missed_inertial']}",
         "", ""),
        ("inertial precision", _num(s["inertial_precision"], ".3f"), "", ""),
        ("inertial recall", _num(s["inertial_recall"], ".3f"), "", ""),
        ("inertial F1", _num(s["inertial_f1"], ".3f"), "≥ 0.9", verdict("inertial_f1")),
        ("median abs. period error, matched inertial",
         _num(s["median_period_error_pct"], ".2f", " %"), "≤ 3 %",
         verdict("median_period_error_pct")),
        ("median abs. radius error, matched inertial",
         _num(s["median_radius_error_pct"], ".2f", " %"), "≤ 15 %",
         verdict("median_radius_error_pct")),
        ("spin correct, matched inertial", _num(s["spin_correct_pct"], ".1f", " %"), "100 %",
         verdict("spin_correct_pct")),
        ("eddies labelled inertial",
         f"{s['n_eddy_labelled_inertial']} of {s['n_truth_eddy']} "
         f"({_num(s['eddy_labelled_inertial_pct'], '.1f', ' %')})", "", ""),
        ("false inertial events on quiet drifters",
         f"{_num(s['false_inertial_per_1000_days'], '.2f')} per 1000 drifter-days "
         f"({s['n_false_inertial_quiet']} in {s['quiet_drifter_days']:.1f} d)", "≤ 5",
         verdict("false_inertial_per_1000_days")),
        ("eddy events: truth / matched / labelled eddy",
         f"{s['n_truth_eddy']} / {s['n_eddy_matched']} / {s['n_eddy_labelled_eddy']}", "", ""),
        ("eddy spin correct / median abs. period error (labelled eddy)",
         f"{_num(s['eddy_spin_correct_pct'], '.1f', ' %')} / "
         f"{_num(s['eddy_median_period_error_pct'], '.2f', ' %')}", "", ""),
        ("tidal events: truth / matched / labelled tidal",
         f"{s['n_truth_tidal']} / {s['n_tidal_matched']} / {s['n_tidal_labelled_tidal']}",
         "", ""),
    ]
    lines = ["| metric | value | target | met |", "|---|---|---|---|"]
    lines += [f"| {a} | {b} | {c} | {d} |" for a, b, c, d in rows]
    return "\n".join(lines)


def truth_as_catalogue(truth: pd.DataFrame) -> pd.DataFrame:
    """Write truth events in the form of the event catalogue.

    Useful to check the scoring (a catalogue equal to the truth must score
    perfectly) and to build test catalogues.

    Parameters
    ----------
    truth : pandas.DataFrame
        Truth events (:func:`driftloop.synth.truth_events`).

    Returns
    -------
    pandas.DataFrame
        Columns :data:`EVENT_COLUMNS`, same index as ``truth``; ``segment``
        is 0, ``event_id`` is ``<drifter_id>-<n>``, and the inertial
        columns use f = 2 Omega sin(lat) at the event's mean latitude.
    """
    lat = truth["lat"].to_numpy(dtype=float)
    f = np.abs(coriolis_parameter(lat))
    with np.errstate(divide="ignore"):
        inertial_h = 2.0 * np.pi / f / _HOUR_S
        inertial_km = truth["speed_m_s"].to_numpy(dtype=float) / f / 1e3
    drifter = truth["drifter_id"].astype(str)
    number = drifter.groupby(drifter).cumcount() + 1
    out = pd.DataFrame({
        "event_id": pd.array(drifter + "-" + number.astype(str), dtype=pd.StringDtype()),
        "drifter_id": pd.array(drifter, dtype=pd.StringDtype()),
        "segment": np.zeros(len(truth), dtype=np.int64),
        "start": truth["start"],
        "end": truth["end"],
        "duration_h": _duration_s(truth) / _HOUR_S,
        "cycles": truth["cycles"].to_numpy(dtype=float),
        "kind": pd.array(truth["kind"].astype(str), dtype=pd.StringDtype()),
        "spin": pd.array(truth["spin"], dtype=pd.StringDtype()),
        "period_h": truth["period_h"].to_numpy(dtype=float),
        "radius_km": truth["radius_km"].to_numpy(dtype=float),
        "speed_m_s": truth["speed_m_s"].to_numpy(dtype=float),
        "lat": lat,
        "lon": truth["lon"].to_numpy(dtype=float),
        "inertial_period_h": inertial_h,
        "inertial_radius_km": inertial_km,
    }, index=truth.index)
    out["period_ratio"] = out["period_h"] / out["inertial_period_h"]
    out["radius_ratio"] = out["radius_km"] / out["inertial_radius_km"]
    return out
