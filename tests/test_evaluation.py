"""Scoring of loop-event catalogues against ground truth, on constructed tables.

Every expected number below follows by hand from the constructed events and
the matching rule in ``driftloop/evaluation.py`` (overlap of at least half
the shorter event, periods within 25 %, one to one).
"""

from __future__ import annotations

import math

import numpy as np
import pandas as pd
import pytest

from driftloop.evaluation import (
    EVENT_COLUMNS,
    TARGETS,
    check_events,
    check_targets,
    match_events,
    score_events,
    score_table,
    truth_as_catalogue,
)

T0 = pd.Timestamp("2025-03-01", tz="UTC")


def _events(rows) -> pd.DataFrame:
    """Events from (drifter, kind, start day, length in days, period h, radius km, spin)."""
    table = pd.DataFrame(rows, columns=["drifter_id", "kind", "day", "days", "period_h",
                                        "radius_km", "spin"])
    table["start"] = T0 + pd.to_timedelta(table["day"], unit="D")
    table["end"] = table["start"] + pd.to_timedelta(table["days"], unit="D")
    table["speed_m_s"] = 0.1
    table["lat"] = 45.0
    table["lon"] = -30.0
    table["cycles"] = table["days"] * 24 / table["period_h"]
    return table.drop(columns=["day", "days"])


@pytest.fixture
def truth() -> pd.DataFrame:
    return _events([
        ("A", "inertial", 1.0, 4.0, 16.9, 1.5, "anticyclonic"),
        ("A", "inertial", 8.0, 6.0, 16.9, 2.0, "anticyclonic"),
        ("A", "tidal", 0.0, 60.0, 12.42, 0.8, "cyclonic"),
        ("B", "inertial", 3.0, 5.0, 18.6, 1.0, "anticyclonic"),
        ("B", "inertial", 20.0, 3.0, 18.6, 1.2, "anticyclonic"),
        ("B", "eddy", 10.0, 15.0, 96.0, 12.0, "cyclonic"),
    ])


QUIET = {"Q1": 100.0, "Q2": 100.0}


def test_perfect_detection_scores_one(truth):
    scores = score_events(truth, truth, quiet_drifter_days=QUIET)
    assert scores["n_truth_inertial"] == scores["n_matched_inertial"] == 4
    assert scores["inertial_precision"] == scores["inertial_recall"] == 1.0
    assert scores["inertial_f1"] == 1.0
    assert scores["median_period_error_pct"] == 0.0
    assert scores["median_radius_error_pct"] == 0.0
    assert scores["spin_correct_pct"] == 100.0
    assert scores["n_eddy_labelled_eddy"] == 1 and scores["n_eddy_labelled_inertial"] == 0
    assert scores["n_tidal_labelled_tidal"] == 1
    assert scores["false_inertial_per_1000_days"] == 0.0
    assert all(check_targets(scores).values())


def test_missed_event_lowers_recall_only(truth):
    detected = truth.drop(index=3)
    scores = score_events(detected, truth, quiet_drifter_days=QUIET)
    assert scores["n_missed_inertial"] == 1
    assert scores["inertial_recall"] == pytest.approx(0.75)
    assert scores["inertial_precision"] == 1.0
    assert scores["inertial_f1"] == pytest.approx(2 * 0.75 / 1.75)  # 0.857
    assert not check_targets(scores)["inertial_f1"]


def test_false_event_on_a_quiet_drifter_counts_per_1000_drifter_days(truth):
    extra = _events([("Q1", "inertial", 5.0, 3.0, 16.9, 1.0, "anticyclonic")])
    detected = pd.concat([truth, extra], ignore_index=True)
    scores = score_events(detected, truth, quiet_drifter_days=QUIET)
    # one false event in 200 quiet drifter-days
    assert scores["n_false_inertial_quiet"] == 1
    assert scores["false_inertial_per_1000_days"] == pytest.approx(5.0)
    assert scores["n_false_inertial"] == 1
    assert scores["inertial_precision"] == pytest.approx(4 / 5)
    assert check_targets(scores)["false_inertial_per_1000_days"]  # 5.0 is at the limit
    two = pd.concat([detected, extra], ignore_index=True)
    scores = score_events(two, truth, quiet_drifter_days=QUIET)
    assert scores["false_inertial_per_1000_days"] == pytest.approx(10.0)
    assert not check_targets(scores)["false_inertial_per_1000_days"]


def test_wrong_spin_is_counted(truth):
    detected = truth.copy()
    detected.loc[1, "spin"] = "cyclonic"
    scores = score_events(detected, truth)
    assert scores["inertial_f1"] == 1.0  # spin does not decide the match
    assert scores["spin_correct_pct"] == pytest.approx(75.0)
    assert not check_targets(scores)["spin_correct_pct"]


def test_eddy_labelled_inertial_is_counted(truth):
    detected = truth.copy()
    detected.loc[5, "kind"] = "inertial"  # the 4-day eddy loops, called inertial
    scores = score_events(detected, truth)
    assert scores["n_eddy_labelled_inertial"] == 1
    assert scores["eddy_labelled_inertial_pct"] == pytest.approx(100.0)
    assert scores["n_eddy_labelled_eddy"] == 0
    # and it is a false inertial event
    assert scores["n_false_inertial"] == 1
    assert scores["inertial_precision"] == pytest.approx(4 / 5)
    assert scores["inertial_recall"] == 1.0


def test_period_and_radius_errors_are_medians_over_matched_events(truth):
    detected = truth.copy()
    inertial = detected["kind"] == "inertial"
    detected.loc[inertial, "period_h"] *= [1.01, 1.03, 0.96, 1.05]
    detected.loc[inertial, "radius_km"] *= [1.10, 0.80, 1.00, 1.30]
    scores = score_events(detected, truth)
    assert scores["median_period_error_pct"] == pytest.approx(3.5)  # of 1, 3, 4, 5 %
    assert scores["median_radius_error_pct"] == pytest.approx(15.0)  # of 0, 10, 20, 30 %
    met = check_targets(scores)
    assert met["median_radius_error_pct"] and not met["median_period_error_pct"]


def test_overlap_rule():
    truth = _events([("A", "inertial", 0.0, 4.0, 16.9, 1.5, "anticyclonic")])
    # 1.6 of 4 days overlap: 40 % of the shorter event, no match
    late = _events([("A", "inertial", 2.4, 4.0, 16.9, 1.5, "anticyclonic")])
    assert match_events(late, truth).pairs.empty
    # 2.4 of 4 days: 60 %, a match
    early = _events([("A", "inertial", 1.6, 4.0, 16.9, 1.5, "anticyclonic")])
    pairs = match_events(early, truth).pairs
    assert len(pairs) == 1
    assert pairs["overlap_h"].iloc[0] == pytest.approx(2.4 * 24)
    assert pairs["iou"].iloc[0] == pytest.approx(2.4 / 5.6)
    # a short event inside a long one overlaps 100 % of the shorter
    inside = _events([("A", "inertial", 1.0, 1.0, 16.9, 1.5, "anticyclonic")])
    assert len(match_events(inside, truth).pairs) == 1
    # never across drifters
    other = _events([("B", "inertial", 0.0, 4.0, 16.9, 1.5, "anticyclonic")])
    assert match_events(other, truth).pairs.empty


def test_period_gate_keeps_concurrent_events_apart(truth):
    # a loop at twice the inertial period is not a detection of the inertial event
    wrong = truth.copy()
    wrong.loc[0, "period_h"] = 2 * 16.9
    scores = score_events(wrong, truth)
    assert scores["n_matched_inertial"] == 3 and scores["n_false_inertial"] == 1
    # the inertial detection during the record-long tide pairs with the inertial truth
    pairs = match_events(truth, truth).pairs
    assert (pairs["detected"] == pairs["truth"]).all()


def test_split_event_gives_a_fragment_not_a_false_event():
    truth = _events([("A", "inertial", 0.0, 10.0, 16.9, 1.5, "anticyclonic")])
    halves = _events([("A", "inertial", 0.0, 4.8, 16.9, 1.5, "anticyclonic"),
                      ("A", "inertial", 5.2, 4.8, 16.9, 1.5, "anticyclonic")])
    matching = match_events(halves, truth)
    assert len(matching.pairs) == 1 and len(matching.fragments) == 1
    assert matching.unmatched_detected.empty and matching.unmatched_truth.empty
    scores = score_events(halves, truth)
    assert scores["inertial_f1"] == 1.0 and scores["n_inertial_fragments"] == 1
    strict = score_events(halves, truth, fragments_are_false=True)
    assert strict["inertial_precision"] == pytest.approx(0.5)


def test_kind_agreement_wins_the_pairing():
    truth = _events([("A", "inertial", 0.0, 4.0, 16.9, 1.5, "anticyclonic")])
    # the same loops reported twice, once as "other" with the better overlap
    detected = _events([("A", "other", 0.0, 4.0, 16.9, 1.5, "anticyclonic"),
                        ("A", "inertial", 0.5, 3.0, 16.9, 1.5, "anticyclonic")])
    pairs = match_events(detected, truth).pairs
    assert pairs["detected_kind"].tolist() == ["inertial"]
    assert score_events(detected, truth)["n_matched_inertial"] == 1


def test_undefined_scores_are_nan_and_fail_their_targets():
    empty = _events([])
    truth = _events([("A", "inertial", 0.0, 4.0, 16.9, 1.5, "anticyclonic")])
    scores = score_events(empty, truth)
    assert scores["inertial_recall"] == 0.0
    assert math.isnan(scores["inertial_precision"]) and math.isnan(scores["inertial_f1"])
    assert math.isnan(scores["median_period_error_pct"])
    assert math.isnan(scores["false_inertial_per_1000_days"])  # no quiet drifters given
    assert not any(check_targets(scores).values())
    assert "n/a" in score_table(scores)


def test_score_table_shows_every_target(truth):
    text = score_table(score_events(truth, truth, quiet_drifter_days=QUIET))
    lines = text.splitlines()
    assert lines[0] == "| metric | value | target | met |"
    assert len(lines) == 2 + 13
    assert sum(line.endswith("| yes |") for line in lines) == len(TARGETS)
    assert "| inertial F1 | 1.000 | ≥ 0.9 | yes |" in lines


def test_catalogue_contract_is_checked(truth):
    catalogue = truth_as_catalogue(truth)
    assert tuple(catalogue.columns) == EVENT_COLUMNS
    check_events(catalogue)
    # inertial period and radius at 45 deg: T = pi / (Omega sin 45) = 16.924 h
    # (METHODS.md section 1 table), R = V / |f| = 0.1 / 1.0313e-4 m
    assert catalogue["inertial_period_h"].iloc[0] == pytest.approx(16.924, abs=5e-4)
    assert catalogue["inertial_radius_km"].iloc[0] == pytest.approx(0.9697, abs=1e-4)
    assert catalogue["event_id"].is_unique
    with pytest.raises(ValueError, match="missing columns"):
        check_events(catalogue.drop(columns=["radius_ratio"]))
    naive = catalogue.assign(start=catalogue["start"].dt.tz_localize(None))
    with pytest.raises(ValueError, match="start must be datetime64"):
        check_events(naive)
    with pytest.raises(ValueError, match="kind must be one of"):
        check_events(catalogue.assign(kind="loop"))
    with pytest.raises(ValueError, match="spin must be one of"):
        check_events(catalogue.assign(spin="clockwise"))
    with pytest.raises(ValueError, match="end before"):
        check_events(catalogue.assign(end=catalogue["start"] - pd.Timedelta("1h")))


def test_truth_of_a_synthetic_site_scores_perfectly_against_itself():
    from driftloop.synth import evaluation_release

    release = evaluation_release(seed=3, n_drifters=5, sites=["SA"])
    truth = release.events
    quiet = release.drifters[release.drifters["quiet"]]
    days = dict(zip(quiet["drifter_id"].astype(str), quiet["days"], strict=True))
    scores = score_events(truth_as_catalogue(truth), truth, quiet_drifter_days=days)
    assert scores["n_truth_inertial"] > 5 and scores["n_truth_eddy"] == 1
    assert scores["inertial_f1"] == 1.0 and scores["n_fragments"] == 0
    assert all(check_targets(scores).values())
    # dropping every other inertial event halves the recall (rounded up)
    inertial = np.flatnonzero(truth["kind"] == "inertial")
    half = truth.drop(index=truth.index[inertial[::2]])
    scores = score_events(truth_as_catalogue(half), truth, quiet_drifter_days=days)
    assert scores["inertial_recall"] == pytest.approx((len(inertial) // 2) / len(inertial))
