"""Tests of driftloop.summary on a small flagged table worked out by hand."""

from __future__ import annotations

import pandas as pd
import pytest

from driftloop.config import Config
from driftloop.summary import SummaryAccumulator, build_summary, drifter_summary


def _table() -> pd.DataFrame:
    """Two drifters and one row without an id, flags and reasons as run_qc writes them."""
    times = pd.to_datetime([
        "2024-01-01T00:00:00Z", "2024-01-01T01:00:00Z", "2024-01-01T02:00:00Z",
        "2024-01-01T05:00:00Z", "2024-01-01T06:00:00Z",
        "2024-01-02T00:00:00Z", "2024-01-02T00:30:00Z", "2024-01-02T01:30:00Z",
        "2024-01-03T00:00:00Z",
    ], utc=True)
    return pd.DataFrame({
        "drifter_id": pd.array(["A", "A", "A", "A", "A", "B", "B", "B", None], dtype="string"),
        "time": times,
        "lat": [0.0] * 9,
        "lon": [0.0] * 9,
        "source_file": pd.array(["f2.csv", "f1.csv", "f1.csv", "f1.csv", "f1.csv",
                                 "f1.csv", "f1.csv", "f1.csv", "f1.csv"], dtype="string"),
        "source_row": range(9),
        "time_assumed_utc": [True, False, False, False, True, False, False, False, True],
        "qc_flag": pd.array([1, 4, 1, 1, 3, 1, 9, 1, 4], dtype="int8"),
        "qc_reasons": pd.array(["", "speed_fail|position_outlier", "", "gap_before",
                                "speed_suspect", "", "missing_value", "", "unparseable"],
                               dtype="string"),
        "segment": pd.array([0, -1, 0, 1, 1, 0, -1, 0, -1], dtype="int32"),
    })


def test_drifter_summary_worked_example():
    # counted by hand from _table: drifter A's good fixes are at 0, 2 and 5 h
    group = _table().iloc[:5]
    entry = drifter_summary(group)
    assert entry["fixes"] == 5
    assert entry["by_flag"] == {"pass": 3, "suspect": 1, "fail": 1, "missing": 0}
    assert entry["by_reason"] == {"gap_before": 1, "position_outlier": 1, "speed_fail": 1,
                                  "speed_suspect": 1}
    assert entry["first_good_fix"] == "2024-01-01T00:00:00Z"
    assert entry["last_good_fix"] == "2024-01-01T05:00:00Z"
    assert entry["duration_days"] == pytest.approx(5.0 / 24.0)
    assert entry["largest_gap"] == {"hours": 3.0, "start": "2024-01-01T02:00:00Z",
                                    "end": "2024-01-01T05:00:00Z"}
    # intervals 2 h and 3 h: linear-interpolation percentiles (numpy's default)
    assert entry["sampling_interval"] == {"median_s": 9000.0, "p10_s": 7560.0,
                                          "p90_s": 10440.0, "min_s": 7200.0, "max_s": 10800.0}
    assert entry["segments"] == 2
    assert entry["time_assumed_utc_rows"] == 2
    assert entry["source_files"] == ["f1.csv", "f2.csv"]


def test_release_totals_worked_example():
    table = _table()
    summary = build_summary(table, Config(), [{"file": "f1.csv", "rows": 8},
                                               {"file": "f2.csv", "rows": 1}])
    release = summary["release"]
    # the row without an id counts in the totals but is no drifter
    assert release["drifters"] == 2 and list(summary["drifters"]) == ["A", "B"]
    assert release["fixes"] == 9
    assert release["by_flag"] == {"pass": 5, "suspect": 1, "fail": 2, "missing": 1}
    assert release["by_reason"] == {"gap_before": 1, "missing_value": 1, "position_outlier": 1,
                                    "speed_fail": 1, "speed_suspect": 1, "unparseable": 1}
    assert release["first_good_fix"] == "2024-01-01T00:00:00Z"
    assert release["last_good_fix"] == "2024-01-02T01:30:00Z"
    assert release["drifter_days"] == pytest.approx(5.0 / 24.0 + 1.5 / 24.0)
    assert release["time_assumed_utc_rows"] == 3
    assert summary["drifters"]["B"]["by_flag"] == {"pass": 2, "suspect": 0, "fail": 0,
                                                   "missing": 1}
    # B: the fix at 00:30 is missing, so its good fixes are 1.5 h apart
    assert summary["drifters"]["B"]["largest_gap"]["hours"] == 1.5
    assert summary["accounting"] == {"rows_in": 9, "rows_out": 9, "balanced": True}


def test_add_drifters_matches_add_rows_per_drifter():
    table = _table()
    one = SummaryAccumulator(Config())
    for drifter, part in (("A", table.iloc[:5]), ("B", table.iloc[5:8]), (None, table.iloc[8:])):
        one.add_rows(part, drifter)
    many = SummaryAccumulator(Config())
    many.add_drifters(table, [("A", 5), ("B", 3), (None, 1)])
    inputs = [{"file": "f1.csv", "rows": 9}]
    assert many.finish(inputs) == one.finish(inputs)
    with pytest.raises(ValueError, match="add up"):
        many.add_drifters(table, [("A", 5)])
