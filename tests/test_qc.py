"""Quality control on constructed tracks: each test on the case it is built for."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from driftloop import geodesy, landmask
from driftloop.config import Config, QCConfig, config_from_dict
from driftloop.constants import EARTH_ROTATION_RATE_RAD_S
from driftloop.io.schema import FIX_COLUMNS, empty_fixes, make_fixes
from driftloop.qc import FLAG_FAIL, FLAG_MISSING, FLAG_PASS, FLAG_SUSPECT, REASONS, run_qc

T0 = pd.Timestamp("2024-03-01T00:00:00Z")
OPEN_ATLANTIC = (40.0, -40.0)  # lat, lon: far from any land
# 39 N 9.5 W is sea about 6.6 km off the Portuguese coast (see test_landmask)
OFF_PORTUGAL = (39.0, -9.5)


@pytest.fixture(scope="module", autouse=True)
def mask():
    return landmask.land_bits()


def local_track(x_m, y_m, *, hours, origin=OPEN_ATLANTIC, drifter="D1", noise_m=0.0, seed=0):
    """Columns of a track given as east/north offsets (m) from ``origin`` at ``hours``."""
    x_m = np.asarray(x_m, dtype=float)
    y_m = np.asarray(y_m, dtype=float)
    if noise_m:
        rng = np.random.default_rng(seed)
        x_m = x_m + rng.normal(0, noise_m, x_m.size)
        y_m = y_m + rng.normal(0, noise_m, y_m.size)
    lat0, lon0 = origin
    end = geodesy.forward(lon0, lat0, np.degrees(np.arctan2(x_m, y_m)), np.hypot(x_m, y_m))
    return {
        "drifter_id": [drifter] * x_m.size,
        "time": T0 + pd.to_timedelta(np.asarray(hours, dtype=float), unit="h"),
        "lat": end.lat_deg,
        "lon": end.lon_deg,
    }


def drifting(n=48, dt_h=1.0, u=0.15, v=0.05, **kw):
    """A smooth track drifting at (u, v) m/s, sampled every ``dt_h`` hours."""
    hours = np.arange(n) * dt_h
    return local_track(u * hours * 3600, v * hours * 3600, hours=hours, **kw)


def table(*tracks, **columns):
    """Fixes table of the concatenated tracks, rows 2, 3, ... of one file."""
    parts = {k: [] for k in ("drifter_id", "time", "lat", "lon")}
    for tr in tracks:
        parts["drifter_id"] += list(tr["drifter_id"])
        parts["time"] += list(pd.DatetimeIndex(tr["time"]))
        parts["lat"] += list(tr["lat"])
        parts["lon"] += list(tr["lon"])
    n = len(parts["lat"])
    return make_fixes(source_file="track.csv", source_row=np.arange(n) + 2, **parts, **columns)


def move(fixes, row, azimuth_deg, distance_m):
    """Displace one fix by a geodesic distance."""
    end = geodesy.forward(fixes.at[row, "lon"], fixes.at[row, "lat"], azimuth_deg, distance_m)
    fixes.at[row, "lat"] = float(end.lat_deg)
    fixes.at[row, "lon"] = float(end.lon_deg)


def flagged(out):
    return set(np.flatnonzero(out["qc_flag"].to_numpy() != FLAG_PASS))


# ----------------------------------------------------------------------- registry


def test_reason_registry():
    assert list(REASONS) == [
        "unparseable", "missing_value", "lat_out_of_range", "lon_out_of_range", "duplicate",
        "time_conflict", "out_of_order", "on_land", "speed_fail", "ship_pickup",
        "position_outlier", "speed_suspect", "grounded", "gap_before",
    ]
    for code, reason in REASONS.items():
        assert code == code.lower() and " " not in code
        assert reason.flag in (FLAG_PASS, FLAG_SUSPECT, FLAG_FAIL, FLAG_MISSING)
        assert reason.description and "\n" not in reason.description
    assert REASONS["missing_value"].flag == FLAG_MISSING
    assert REASONS["speed_suspect"].flag == FLAG_SUSPECT
    assert REASONS["out_of_order"].flag == REASONS["gap_before"].flag == FLAG_PASS


# ---------------------------------------------------------------- clean tracks


def test_clean_track_passes_with_columns_and_dtypes():
    fixes = table(drifting(noise_m=10.0))
    out = run_qc(fixes)
    assert out["qc_flag"].dtype == np.int8
    assert out["qc_reasons"].dtype == pd.StringDtype()
    assert out["segment"].dtype == np.int32
    assert (out["qc_flag"] == FLAG_PASS).all()
    assert (out["qc_reasons"] == "").all()
    assert (out["segment"] == 0).all()
    pd.testing.assert_frame_equal(out[list(FIX_COLUMNS)], fixes)


def inertial_period_h(lat_deg):
    # T_i = pi / (Omega |sin(phi)|), Omega of WGS 84
    return np.pi / (EARTH_ROTATION_RATE_RAD_S * abs(np.sin(np.radians(lat_deg)))) / 3600.0


def test_inertial_loops_with_gps_noise_are_not_flagged():
    period_h = inertial_period_h(45.0)
    assert period_h == pytest.approx(16.924, abs=1e-3)  # METHODS.md table
    hours = np.arange(0, 6 * 24, 1.0)
    omega = 2 * np.pi / (period_h * 3600)
    radius = 3000.0
    phase = -omega * hours * 3600  # clockwise in the northern hemisphere
    x = radius * np.cos(phase) + 0.05 * hours * 3600
    y = radius * np.sin(phase)
    fixes = table(local_track(x, y, hours=hours, origin=(45.0, -30.0), noise_m=10.0, seed=1))
    out = run_qc(fixes)
    assert flagged(out) == set()
    assert (out["qc_reasons"] == "").all()


@pytest.mark.parametrize(("radius_m", "period_h", "dt_h"),
                         [(1000.0, 12.0, 1.0), (4000.0, 14.0, 1.0), (10000.0, 30.0, 1.0),
                          (8000.0, 28.0, 0.5), (4000.0, 14.0, 2.0)])
def test_fast_loops_up_to_half_a_metre_per_second_pass(radius_m, period_h, dt_h):
    hours = np.arange(0, 4 * 24, dt_h)
    phase = -2 * np.pi * hours / period_h
    speed = 2 * np.pi * radius_m / (period_h * 3600)
    assert speed <= 0.6
    fixes = table(local_track(radius_m * np.cos(phase), radius_m * np.sin(phase), hours=hours,
                              origin=(62.0, -20.0), noise_m=10.0, seed=2))
    assert flagged(run_qc(fixes)) == set()


# --------------------------------------------------------------- record tests


def test_missing_and_unparseable():
    tr = drifting(n=6)
    fixes = table(tr)
    fixes.loc[1, "lat"] = np.nan
    fixes.loc[2, "time"] = pd.NaT
    fixes.loc[3, "lon"] = np.nan
    fixes.loc[3, "parse_error"] = "lon: not a number"
    fixes.loc[3, "raw"] = "D1,2024-03-01T03:00Z,40.0,abc"
    out = run_qc(fixes)
    assert out["qc_flag"].tolist() == [1, 9, 9, 4, 1, 1]
    assert out["qc_reasons"].tolist() == ["", "missing_value", "missing_value", "unparseable",
                                          "", ""]
    assert out["segment"].tolist() == [0, -1, -1, -1, 0, 0]


def test_out_of_range_positions():
    fixes = table(drifting(n=8))
    fixes.loc[2, "lat"] = 95.0
    fixes.loc[3, "lon"] = 500.0  # outside [-180, 360], so not wrapped by the reader
    fixes.loc[4, "lat"] = -np.inf
    fixes.loc[5, "lon"] = np.inf
    out = run_qc(fixes)
    reasons = out["qc_reasons"].tolist()
    assert reasons[2] == "lat_out_of_range"
    assert reasons[3] == "lon_out_of_range"
    assert reasons[4] == "lat_out_of_range"
    assert reasons[5] == "lon_out_of_range"
    assert out["qc_flag"].tolist() == [1, 1, 4, 4, 4, 4, 1, 1]
    assert flagged(out) == {2, 3, 4, 5}


def test_duplicates_keep_the_first_in_file_order():
    tr = drifting(n=10)
    fixes = table(tr)
    extra = fixes.iloc[[4, 4, 7]].copy()
    fixes = pd.concat([fixes, extra], ignore_index=True)
    fixes["source_row"] = np.arange(len(fixes)) + 2
    out = run_qc(fixes)
    # the first copy also comes after a later time in the file
    assert out["qc_reasons"].iloc[10:].tolist() == ["duplicate|out_of_order", "duplicate",
                                                    "duplicate"]
    assert (out["qc_flag"].iloc[10:] == FLAG_FAIL).all()
    assert (out["qc_flag"].iloc[:10] == FLAG_PASS).all()
    assert (out["segment"].iloc[:10] == 0).all()


def test_time_conflict_fails_every_position_at_that_time():
    fixes = table(drifting(n=10))
    other = fixes.iloc[[5]].copy()
    other["lat"] += 0.001
    sub_second = fixes.iloc[[7]].copy()
    sub_second["time"] += pd.Timedelta(milliseconds=400)
    sub_second["lon"] += 0.002
    fixes = pd.concat([fixes, other, sub_second], ignore_index=True)
    fixes["source_row"] = np.arange(len(fixes)) + 2
    out = run_qc(fixes)
    assert flagged(out) == {5, 7, 10, 11}
    assert out["qc_reasons"].iloc[[5, 7, 10, 11]].tolist() == [
        "time_conflict", "time_conflict", "time_conflict|out_of_order", "time_conflict"]
    assert (out["qc_flag"].iloc[[5, 7, 10, 11]] == FLAG_FAIL).all()
    # the fixes around them still form one segment
    assert (out["segment"].iloc[[4, 6, 8]] == 0).all()


def test_out_of_order_is_recorded_and_tests_use_time_order():
    fixes = table(drifting(n=30, noise_m=10.0))
    shuffled = fixes.sample(frac=1.0, random_state=3).reset_index(drop=True)
    out = run_qc(shuffled)
    ordered = run_qc(fixes)
    # same verdict for every fix, whatever the file order, apart from the note
    merged = out.merge(ordered, on="source_row", suffixes=("_shuffled", "_sorted"))
    assert (merged["qc_flag_shuffled"] == merged["qc_flag_sorted"]).all()
    assert (merged["qc_flag_shuffled"] == FLAG_PASS).all()
    assert (merged["segment_shuffled"] == merged["segment_sorted"]).all()
    notes = out["qc_reasons"].to_numpy()
    assert set(notes) == {"", "out_of_order"}
    earlier = np.zeros(len(out), dtype=bool)
    earlier[1:] = shuffled["time"].to_numpy()[1:] < shuffled["time"].to_numpy()[:-1]
    np.testing.assert_array_equal(notes == "out_of_order", earlier)


def test_reversed_file_marks_all_but_first_out_of_order():
    fixes = table(drifting(n=12)).iloc[::-1].reset_index(drop=True)
    out = run_qc(fixes)
    assert out["qc_reasons"].tolist() == [""] + ["out_of_order"] * 11
    assert (out["qc_flag"] == FLAG_PASS).all()


# ------------------------------------------------------------------- speed


def test_spike_flags_only_the_spike():
    fixes = table(drifting(n=24, noise_m=10.0))
    move(fixes, 10, 90.0, 25_000.0)  # 25 km in an hour each way: ~7 m/s
    out = run_qc(fixes)
    assert flagged(out) == {10}
    assert out.at[10, "qc_reasons"] == "speed_fail"
    assert out.at[10, "segment"] == -1


def test_spikes_at_track_ends_and_adjacent_pair():
    fixes = table(drifting(n=30, noise_m=10.0))
    move(fixes, 0, 0.0, 30_000.0)
    move(fixes, 29, 180.0, 30_000.0)
    move(fixes, 12, 45.0, 20_000.0)  # two wild fixes in a row, apart from each other
    move(fixes, 13, 225.0, 20_000.0)
    out = run_qc(fixes)
    assert flagged(out) == {0, 12, 13, 29}
    assert set(out["qc_reasons"].iloc[[0, 12, 13, 29]]) == {"speed_fail"}


def test_suspect_speed():
    fixes = table(drifting(n=24, noise_m=5.0))
    move(fixes, 8, 90.0, 9_000.0)  # ~2.5 m/s legs: above 2, below 3 m/s
    out = run_qc(fixes, QCConfig(outlier_min_m=20_000.0))  # keep the outlier test out of it
    assert flagged(out) == {8}
    assert out.at[8, "qc_reasons"] == "speed_suspect"
    assert out.at[8, "qc_flag"] == FLAG_SUSPECT
    assert out.at[8, "segment"] == 0  # suspect fixes stay usable


def test_jump_between_long_stretches_marks_both_ends_suspect():
    a = drifting(n=12)
    b = drifting(n=12, origin=(40.0, -39.6))  # ~34 km further east, same times onwards
    b["time"] = b["time"] + pd.Timedelta(hours=12)
    fixes = table(a, b)
    out = run_qc(fixes)
    assert flagged(out) == {11, 12}
    assert set(out["qc_reasons"].iloc[[11, 12]]) == {"speed_suspect"}


def test_near_simultaneous_fixes_do_not_make_absurd_speeds():
    tr = drifting(n=12, noise_m=10.0)
    fixes = table(tr)
    twin = fixes.iloc[[6]].copy()
    twin["time"] += pd.Timedelta(seconds=2)
    move_to = geodesy.forward(twin["lon"].iloc[0], twin["lat"].iloc[0], 30.0, 15.0)
    twin["lat"], twin["lon"] = float(move_to.lat_deg), float(move_to.lon_deg)
    fixes = pd.concat([fixes, twin], ignore_index=True)
    fixes["source_row"] = np.arange(len(fixes)) + 2
    out = run_qc(fixes)
    # 15 m in 2 s is GPS noise, not 7.5 m/s of motion
    assert flagged(out) == set()


def test_ship_pickup_flags_the_whole_run():
    hours = np.arange(0, 30.0)
    x = 0.2 * hours * 3600
    onboard = (hours > 10) & (hours <= 18)
    x = np.where(onboard, x[10] + 6.0 * (hours - 10) * 3600, x)
    x = np.where(hours > 18, x[10] + 6.0 * 8 * 3600 + 0.2 * (hours - 18) * 3600, x)
    fixes = table(local_track(x, np.zeros_like(x), hours=hours, noise_m=10.0))
    out = run_qc(fixes)
    run = set(range(10, 19))  # the fixes joined by the fast legs, ends included
    assert flagged(out) == run
    assert set(out["qc_reasons"].iloc[sorted(run)]) == {"ship_pickup"}


def test_short_fast_stretch_is_not_a_ship():
    hours = np.arange(0, 20.0)
    x = 0.2 * hours * 3600
    x[10:] += 2.7 * 2 * 3600  # two hours above ship speed: shorter than 3 h
    x[11] -= 2.7 * 3600
    fixes = table(local_track(x, np.zeros_like(x), hours=hours))
    out = run_qc(fixes)
    assert "ship_pickup" not in set(out["qc_reasons"])


# ----------------------------------------------------------- position outliers


def test_displaced_fix_in_smooth_hourly_track_is_an_outlier():
    fixes = table(drifting(n=48, noise_m=10.0))
    move(fixes, 20, 0.0, 3000.0)  # 0.8 m/s legs: invisible to the speed test
    out = run_qc(fixes)
    assert flagged(out) == {20}
    assert out.at[20, "qc_reasons"] == "position_outlier"
    assert (out["qc_flag"].iloc[[18, 19, 21, 22]] == FLAG_PASS).all()


def test_displaced_fix_on_an_inertial_loop_is_an_outlier():
    period_h = inertial_period_h(45.0)
    hours = np.arange(0, 72, 1.0)
    phase = -2 * np.pi * hours / period_h
    fixes = table(local_track(3000 * np.cos(phase), 3000 * np.sin(phase), hours=hours,
                              origin=(45.0, -30.0), noise_m=10.0))
    move(fixes, 33, 120.0, 3000.0)
    out = run_qc(fixes)
    assert flagged(out) == {33}
    assert out.at[33, "qc_reasons"] == "position_outlier"


def test_displaced_fix_after_a_lost_fix_blames_the_right_one():
    # A 5 km displacement right after a lost fix, on a 12 km, 4-day eddy orbit:
    # the good fix after it has the worse prediction (it leans on the bad fix),
    # but leaving the bad fix out is what makes its neighbours consistent again.
    hours = np.delete(np.arange(0, 48, 1.0), 20)  # fix at 20 h lost
    phase = 2 * np.pi * hours / 96.0
    fixes = table(local_track(12000 * np.cos(phase), 12000 * np.sin(phase), hours=hours,
                              origin=(44.0, -37.0), noise_m=8.0, seed=3))
    move(fixes, 20, 300.0, 5000.0)  # the fix at 21 h
    out = run_qc(fixes)
    assert flagged(out) == {20}
    assert out.at[20, "qc_reasons"] == "position_outlier"


def test_outliers_near_track_ends_do_not_condemn_their_neighbours():
    # the first and last two fixes have fewer than two neighbours on one side:
    # the outlier test leaves them (and so cannot be misled by them)
    fixes = table(drifting(n=24, noise_m=10.0))
    move(fixes, 23, 90.0, 3000.0)
    move(fixes, 1, 270.0, 3000.0)
    move(fixes, 2, 0.0, 3000.0)  # the first fix with two neighbours each side
    out = run_qc(fixes)
    assert flagged(out) == {2}
    assert out.at[2, "qc_reasons"] == "position_outlier"


def test_displaced_fixes_three_apart():
    fixes = table(drifting(n=30, noise_m=10.0))
    move(fixes, 12, 0.0, 3000.0)
    move(fixes, 15, 90.0, 3000.0)
    out = run_qc(fixes)
    assert flagged(out) == {12, 15}
    assert set(out["qc_reasons"].iloc[[12, 15]]) == {"position_outlier"}


def test_jump_does_not_make_outliers_of_its_ends():
    a = drifting(n=12)
    b = drifting(n=12, origin=(40.0, -39.6))
    b["time"] = b["time"] + pd.Timedelta(hours=12)
    out = run_qc(table(a, b))
    assert "position_outlier" not in set(out["qc_reasons"])


# ----------------------------------------------------------------- land


def test_fix_inland_is_on_land():
    paris = {"drifter_id": ["P"], "time": [T0], "lat": [48.8566], "lon": [2.3522]}
    fixes = table(drifting(n=5), paris)
    out = run_qc(fixes)
    assert out["qc_reasons"].tolist() == ["", "", "", "", "", "on_land"]
    assert out["qc_flag"].tolist() == [1, 1, 1, 1, 1, 4]
    off = run_qc(fixes, QCConfig(land_test=False))
    assert (off["qc_flag"] == FLAG_PASS).all()


def test_grounded_run_near_a_coast():
    lat, lon = OFF_PORTUGAL
    assert not landmask.is_land(lat, lon) and landmask.land_within(lat, lon, 10.0)
    hours = np.arange(0, 36.0)
    # drifting in at 0.1 m/s for 12 h, then still (GPS noise only) for 24 h
    x = np.where(hours < 12, -0.1 * (12 - hours) * 3600, 0.0)
    fixes = table(local_track(x, np.zeros_like(x), hours=hours, origin=OFF_PORTUGAL,
                              noise_m=10.0, seed=4))
    out = run_qc(fixes)
    still = set(range(12, 36))
    assert flagged(out) == still
    assert set(out["qc_reasons"].iloc[sorted(still)]) == {"grounded"}
    # the same stillness in the open ocean is not grounding
    far = table(local_track(x, np.zeros_like(x), hours=hours, noise_m=10.0, seed=4))
    assert flagged(run_qc(far)) == set()


# --------------------------------------------------------------- gaps, segments


def test_gap_before_and_segments():
    hours = np.concatenate([np.arange(0, 10.0), np.arange(20, 30.0), np.arange(40, 45.0)])
    a = local_track(0.1 * hours * 3600, 0.0 * hours, hours=hours, drifter="A")
    hb = np.arange(0, 8.0)
    b = local_track(0.1 * hb * 3600, 0.0 * hb, hours=hb, drifter="B", origin=(35.0, -45.0))
    fixes = table(a, b)
    out = run_qc(fixes)
    seg = out["segment"].to_numpy()
    assert seg[:10].tolist() == [0] * 10
    assert seg[10:20].tolist() == [1] * 10
    assert seg[20:25].tolist() == [2] * 5
    assert seg[25:].tolist() == [0] * 8
    gaps = np.flatnonzero(out["qc_reasons"].to_numpy() == "gap_before")
    assert gaps.tolist() == [10, 20]
    assert (out["qc_flag"] == FLAG_PASS).all()


def test_failed_fixes_can_open_a_gap():
    fixes = table(drifting(n=20))
    for row in range(5, 13):  # 8 hours of unreadable records
        fixes.loc[row, "parse_error"] = "time: bad"
        fixes.loc[row, "time"] = pd.NaT
    out = run_qc(fixes)
    assert out.at[13, "qc_reasons"] == "gap_before"
    assert out["segment"].tolist() == [0] * 5 + [-1] * 8 + [1] * 7


# ------------------------------------------------------------ table behaviour


def test_rows_order_and_index_are_preserved():
    fixes = table(drifting(n=20, noise_m=10.0), drifting(n=15, drifter="D2", origin=(30, -50)))
    move(fixes, 7, 0.0, 40_000.0)
    fixes.index = pd.Index([f"r{k}" for k in range(len(fixes))][::-1])
    fixes = fixes.sample(frac=1.0, random_state=0)
    out = run_qc(fixes)
    assert len(out) == len(fixes)
    assert out.index.equals(fixes.index)
    pd.testing.assert_frame_equal(out[list(FIX_COLUMNS)], fixes)
    spike = fixes.index[fixes["source_row"] == 9][0]
    assert "speed_fail" in out.at[spike, "qc_reasons"].split("|")
    assert out.at[spike, "qc_flag"] == FLAG_FAIL
    assert "qc_flag" not in fixes.columns  # the input is not modified


def test_rerun_replaces_qc_columns():
    fixes = table(drifting(n=10))
    once = run_qc(fixes)
    twice = run_qc(once)
    assert list(twice.columns) == list(once.columns)
    pd.testing.assert_frame_equal(once, twice)


def test_empty_table():
    out = run_qc(empty_fixes())
    assert len(out) == 0
    assert {"qc_flag", "qc_reasons", "segment"} <= set(out.columns)
    assert out["qc_flag"].dtype == np.int8


def test_missing_column_is_refused():
    with pytest.raises(ValueError, match="lat"):
        run_qc(table(drifting(n=3)).drop(columns="lat"))


def test_thresholds_come_from_config():
    fixes = table(drifting(n=24, noise_m=10.0))
    move(fixes, 10, 90.0, 25_000.0)
    strict = run_qc(fixes)
    loose = run_qc(fixes, config_from_dict({"qc": {"speed_fail_m_s": 10.0,
                                                   "speed_suspect_m_s": 8.0,
                                                   "outlier_min_m": 50_000.0}}).qc)
    assert strict.at[10, "qc_flag"] == FLAG_FAIL
    assert loose.at[10, "qc_flag"] == FLAG_PASS
    assert Config().qc == QCConfig()


def test_every_reason_is_reachable():
    seen = set()
    cases = [
        test_missing_and_unparseable, test_out_of_range_positions,
        test_duplicates_keep_the_first_in_file_order,
        test_time_conflict_fails_every_position_at_that_time,
        test_reversed_file_marks_all_but_first_out_of_order, test_fix_inland_is_on_land,
        test_spike_flags_only_the_spike, test_ship_pickup_flags_the_whole_run,
        test_displaced_fix_in_smooth_hourly_track_is_an_outlier, test_suspect_speed,
        test_grounded_run_near_a_coast, test_gap_before_and_segments,
    ]
    original = run_qc

    def recording(fixes, config=None):
        out = original(fixes, config)
        for text in out["qc_reasons"]:
            seen.update(code for code in text.split("|") if code)
        return out

    globals()["run_qc"] = recording
    try:
        for case in cases:
            case()
    finally:
        globals()["run_qc"] = original
    assert seen == set(REASONS)
