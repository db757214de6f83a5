"""driftloop.drift on whole tables: the order of rows, the grid steps and per-drifter entries.

References for the checks:

- :func:`driftloop.drift.decompose` as its docstring defines it: every
  (drifter, segment) of the track sorted by time, each segment's ridges
  (:func:`driftloop.ridges.detect` at the segment's step and mean latitude)
  rebuilt and added to the kind of the event overlapping them longest, the
  drift the rest; the reference below does exactly that, one segment at a
  time;
- the grid step counts are the counts of ``numpy.diff`` of each segment's
  sorted times (their definition), counted here segment by segment;
- a drifter's ``dispersion`` entry is the table of
  :func:`driftloop.dispersion.dispersion_by_drifter` for its drift
  velocities, read row by row.
"""

from __future__ import annotations

import math

import numpy as np
import pandas as pd
import pytest

from driftloop import drift
from driftloop.dispersion import dispersion_by_drifter
from driftloop.loops import find_events
from driftloop.physics import coriolis_parameter
from driftloop.ridges import detect

DT = 3600.0


def _segment(drifter, segment, start, hours, lat, amplitude, rng):
    t = np.arange(hours) * DT
    f = float(coriolis_parameter(lat))
    z = 0.08 + 0.03j + amplitude * np.exp(-1j * f * t) + rng.normal(0.0, 0.01, hours) * (1 + 1j)
    return pd.DataFrame({
        "drifter_id": drifter, "segment": segment,
        "time": pd.date_range(start, periods=hours, freq="h", tz="UTC"),
        "lat": lat + 0.001 * np.arange(hours), "lon": -20.0 + 0.001 * np.arange(hours),
        "u": z.real, "v": z.imag,
    })


@pytest.fixture(scope="module")
def shuffled_track():
    rng = np.random.default_rng(30)
    parts = [
        _segment("B-2", 0, "2024-03-01", 500, 40.0, 0.25, rng),
        _segment("A-1", 1, "2024-03-25", 400, 35.0, 0.2, rng),
        _segment("A-1", 0, "2024-03-01", 450, 35.0, 0.0, rng),
        _segment("B-2", 1, "2024-03-24", 6, 40.0, 0.1, rng),  # too short for ridges
    ]
    track = pd.concat(parts, ignore_index=True)
    track["drifter_id"] = track["drifter_id"].astype("string")
    track["segment"] = track["segment"].astype(np.int32)
    return track.iloc[rng.permutation(len(track))].reset_index(drop=True)


def _reference_decompose(track, events):
    spans = drift._event_spans(events)
    parts = []
    for (drifter, _), seg in track.groupby(["drifter_id", "segment"], sort=True):
        seg = seg.sort_values("time", kind="stable")
        times = seg["time"].to_numpy(dtype="datetime64[ns]").astype(np.int64)
        z = seg["u"].to_numpy() + 1j * seg["v"].to_numpy()
        osc = {k: np.zeros(z.size, dtype=complex) for k in drift.KINDS}
        if z.size >= 8:
            lat = float(np.mean(seg["lat"].to_numpy()))
            for ridge in detect(z, float(np.median(np.diff(times))) / 1e9,
                                latitude=lat).ridges:
                idx = np.asarray(ridge.index)
                kind = drift._label(int(times[idx[0]]), int(times[idx[-1]]), int(ridge.sense),
                                    spans.get(str(drifter), []))
                osc[kind][idx] += drift.reconstruct_ridge(ridge)
        rest = z - sum(osc.values())
        out = {c: seg[c].to_numpy() for c in ("drifter_id", "segment", "time", "lat", "lon")}
        for k in drift.KINDS:
            out[f"u_{k}"], out[f"v_{k}"] = osc[k].real, osc[k].imag
        out["u_drift"], out["v_drift"] = rest.real, rest.imag
        parts.append(pd.DataFrame(out))
    table = pd.concat(parts, ignore_index=True)
    table["time"] = pd.to_datetime(table["time"], utc=True)
    return table.loc[:, list(drift.DECOMPOSITION_COLUMNS)]


def test_decompose_matches_a_segment_by_segment_construction(shuffled_track):
    # events of several kinds and senses, so that ridges of both drifters get labels
    events = pd.DataFrame({
        "drifter_id": ["B-2", "A-1", "A-1"],
        "start": pd.to_datetime(["2024-03-01", "2024-03-25", "2024-03-30"], utc=True),
        "end": pd.to_datetime(["2024-03-21", "2024-03-29", "2024-04-10"], utc=True),
        "kind": ["inertial", "tidal", "eddy"],
        "sense": ["clockwise", "clockwise", "anticlockwise"],
    })
    got = drift.decompose(shuffled_track, events=events)
    expected = _reference_decompose(shuffled_track, events)
    assert list(got.columns) == list(drift.DECOMPOSITION_COLUMNS)
    assert list(got.dtypes) == list(expected.dtypes)
    pd.testing.assert_frame_equal(got, expected, check_exact=True)
    assert (got["u_inertial"] != 0).any() and (got["u_tidal"] != 0).any()


def test_grid_step_counts_are_the_steps_of_each_segment():
    rng = np.random.default_rng(31)
    rows = []
    for drifter, segment, steps in (("Z", 0, [3600] * 40 + [1800] * 3 + [7200]),
                                    ("A", 0, [3600] * 10), ("Z", 2, [900, 900, 3600]),
                                    ("A", 1, [])):
        t = np.datetime64("2024-01-01T00:00:00", "ns") + np.cumsum([0, *steps]).astype(
            "timedelta64[s]")
        rows.append(pd.DataFrame({"drifter_id": drifter, "segment": segment,
                                  "time": pd.to_datetime(t, utc=True)}))
    table = pd.concat(rows, ignore_index=True)
    table = table.iloc[rng.permutation(len(table))]
    expected: dict[int, int] = {}
    for _, seg in table.groupby(["drifter_id", "segment"], sort=False):
        t = np.sort(seg["time"].to_numpy(dtype="datetime64[ns]").astype(np.int64))
        values, n = np.unique(np.diff(t), return_counts=True)
        for value, k in zip(values.tolist(), n.tolist(), strict=True):
            expected[value] = expected.get(value, 0) + k
    got = drift.grid_step_counts(table)
    assert got == expected
    assert list(got) == list(expected)  # the same key order too
    assert drift.grid_step_from_counts(got) == 3600.0
    assert drift.grid_step_counts(table.iloc[:1]) == {}


def test_drifter_entry_is_the_dispersion_table_of_its_drift(shuffled_track):
    decomposed = drift.decompose(shuffled_track, events=find_events(shuffled_track).events)
    rows = decomposed[decomposed["drifter_id"] == "B-2"]
    entry = drift.drifter_drift_statistics(rows, "B-2", [], DT)["dispersion"]
    velocities = pd.DataFrame({"drifter_id": rows["drifter_id"], "time": rows["time"],
                               "u_m_s": rows["u_drift"], "v_m_s": rows["v_drift"]})
    table = dispersion_by_drifter(velocities, DT, release=False, n_boot=200)
    assert list(entry) == table["component"].tolist() == ["u", "v", "vector"]
    for _, r in table.iterrows():
        got = entry[r["component"]]
        assert got["samples"] == r["samples"]
        for key, column in (("variance_m2_s2", "variance_m2_s2"),
                            ("integral_time_s", "integral_time_s"),
                            ("diffusivity_m2_s", "diffusivity_m2_s"),
                            ("limit_s", "limit_s"), ("dof_effective", "dof_effective")):
            assert got[key] == r[column]
        assert got["variance_ci_m2_s2"] == [r["variance_low_m2_s2"], r["variance_high_m2_s2"]]
        assert got["integral_time_ci_s"] == [r["integral_time_low_s"], r["integral_time_high_s"]]
        assert got["diffusivity_ci_m2_s"] == [r["diffusivity_low_m2_s"],
                                              r["diffusivity_high_m2_s"]]
        assert got["method"] == r["method"] and got["limit_found"] == r["limit_found"]
    u, v = drift.drift_series(rows, "B-2", DT)
    assert u.size == int(round((rows["time"].max() - rows["time"].min()).total_seconds() / DT)) + 1
    assert math.isnan(u[505]) and np.isfinite(u[:500]).all()


def test_drifter_with_too_few_samples_has_no_dispersion(shuffled_track):
    decomposed = drift.decompose(shuffled_track, events=find_events(shuffled_track).events)
    rows = decomposed[decomposed["drifter_id"] == "A-1"].iloc[:2]
    assert drift.drifter_drift_statistics(rows, "A-1", [], DT)["dispersion"] is None


@pytest.mark.parametrize("times", [
    pd.Series(pd.date_range("2024-03-31", periods=30, freq="h", tz="UTC")),
    pd.Series(pd.date_range("2024-03-31", periods=30, freq="h", tz="Europe/Paris").as_unit("us")),
    pd.Series(pd.date_range("2024-03-31", periods=30, freq="h")),
    pd.Series(["2024-03-31T00:00:00Z", "2024-03-31T01:30:00+01:00"]),
], ids=["utc", "paris-us", "naive", "text"])
def test_times_in_ns_are_those_of_pandas_to_datetime_utc(times):
    # pandas.to_datetime(utc=True): aware times converted to UTC, naive ones taken as UTC
    expected = pd.DatetimeIndex(pd.to_datetime(times, utc=True)).as_unit("ns").asi8
    got = drift._time_ns(times)
    assert got.dtype == np.int64
    np.testing.assert_array_equal(got, expected)
