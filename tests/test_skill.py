"""Trajectory skill: the Liu & Weisberg (2011) score, separations, windows, runs.

External references named beside each check:

- the skill score formula of Liu, Y. and R. H. Weisberg (2011), J. Geophys.
  Res. 116, C09013 (article number from memory), worked by hand;
- geodesic distances and points along geodesics from GeographicLib
  (Karney 2013, "Algorithms for geodesics", J. Geodesy 87, 43-55), an
  implementation independent of pyproj;
- GeoJSON structure from RFC 7946, read back with GDAL through geopandas.
"""

from __future__ import annotations

import json

import numpy as np
import pandas as pd
import pytest
from geographiclib.geodesic import Geodesic

from driftloop import geodesy
from driftloop.config import QCConfig, SkillConfig, parse_windows
from driftloop.errors import ConfigError, InputError
from driftloop.skill import (
    forecast_windows,
    liu_weisberg_skill,
    positions_at,
    run_skill,
    separation,
    summarise_windows,
)

WGS84 = Geodesic.WGS84
T0 = pd.Timestamp("2024-05-01T00:00:00Z")
NO_LAND = QCConfig(land_test=False)


def straight_track(lon0, lat0, azimuth_deg, speed_m_s, hours, step_h=1.0, start=T0):
    """Positions along one geodesic at constant speed, every step_h hours."""
    t = np.arange(0.0, hours + 1e-9, step_h) * 3600.0
    end = geodesy.forward(lon0, lat0, azimuth_deg, speed_m_s * t)
    return pd.DataFrame({"time": start + pd.to_timedelta(t, unit="s"),
                         "lat": end.lat_deg, "lon": end.lon_deg})


def curved_track(hours, start=T0):
    """An observed-like track: a drift east with a clockwise wiggle (about 0.25 m/s)."""
    t = np.arange(0.0, hours + 1e-9, 1.0) * 3600.0
    east = 0.2 * t + 1500.0 * np.sin(2 * np.pi * t / (17.0 * 3600))
    north = 0.05 * t + 1500.0 * np.cos(2 * np.pi * t / (17.0 * 3600)) - 1500.0
    dist = np.hypot(east, north)
    az = np.degrees(np.arctan2(east, north))
    end = geodesy.forward(-30.0, 42.0, az, dist)
    return pd.DataFrame({"time": start + pd.to_timedelta(t, unit="s"),
                         "lat": end.lat_deg, "lon": end.lon_deg})


def displaced(track, speed_m_s, azimuth_deg=90.0):
    """The same track pushed away along an azimuth at a constant rate from its start."""
    t = (track["time"] - track["time"].iloc[0]).dt.total_seconds().to_numpy()
    end = geodesy.forward(track["lon"].to_numpy(), track["lat"].to_numpy(), azimuth_deg,
                          speed_m_s * t)
    return pd.DataFrame({"time": track["time"].to_numpy(), "lat": end.lat_deg,
                         "lon": end.lon_deg})


def write_csv(path, frames):
    """Write (id, track) pairs as one delimited file, in the given order."""
    rows = [pd.DataFrame({"drifter_id": ident,
                          "time": f["time"].dt.strftime("%Y-%m-%dT%H:%M:%SZ"),
                          "lat": f["lat"].round(7), "lon": f["lon"].round(7)})
            for ident, f in frames]
    pd.concat(rows).to_csv(path, index=False)
    return path


# ---------------------------------------------------------------------------
# the score
# ---------------------------------------------------------------------------


def test_skill_score_on_a_hand_worked_example():
    # Liu & Weisberg (2011): s = sum d_i / sum l_oi, ss = 1 - s/n (s <= n).
    # By hand: d = 100, 300, 500 m -> sum 900 m; l = 1000, 2000, 3000 m ->
    # sum 6000 m; s = 900 / 6000 = 0.15; n = 1: ss = 1 - 0.15 = 0.85;
    # n = 0.5: ss = 1 - 0.15 / 0.5 = 0.70.
    d = [100.0, 300.0, 500.0]
    l = [1000.0, 2000.0, 3000.0]  # noqa: E741
    score = liu_weisberg_skill(d, l)
    assert score.s == pytest.approx(0.15, abs=1e-15)
    assert score.ss == pytest.approx(0.85, abs=1e-15)
    assert score.n_points == 3
    assert score.separation_sum_m == 900.0 and score.length_sum_m == 6000.0
    assert liu_weisberg_skill(d, l, n=0.5).ss == pytest.approx(0.70, abs=1e-15)


def test_tolerance_n_sets_where_the_score_reaches_zero():
    # Liu & Weisberg (2011): ss = 1 - s/n for s <= n, else 0.  By hand with
    # d = 600 m, l = 1000 m, s = 0.6: n = 0.5 -> s > n -> 0; n = 0.6 -> s = n
    # -> 1 - 1 = 0; n = 1 -> 0.4; n = 2 -> 1 - 0.3 = 0.7; n = 6 -> 0.9.
    expected = {0.5: 0.0, 0.6: 0.0, 1.0: 0.4, 2.0: 0.7, 6.0: 0.9}
    for n, ss in expected.items():
        assert liu_weisberg_skill([600.0], [1000.0], n=n).ss == pytest.approx(ss, abs=1e-12)
    values = [liu_weisberg_skill([600.0], [1000.0], n=n).ss for n in np.linspace(0.1, 10, 50)]
    assert np.all(np.diff(values) >= 0)  # a larger tolerance never lowers the score
    for bad in (0.0, -1.0, float("nan")):
        with pytest.raises(ValueError, match="tolerance"):
            liu_weisberg_skill([1.0], [1.0], n=bad)


def test_score_refuses_unusable_input():
    with pytest.raises(ValueError, match="non-zero length"):
        liu_weisberg_skill([], [])
    with pytest.raises(ValueError, match="finite"):
        liu_weisberg_skill([1.0, np.nan], [1.0, 2.0])
    with pytest.raises(ValueError, match="negative"):
        liu_weisberg_skill([-1.0], [1.0])
    # an observed drifter at rest: perfect if the model rests too, else no skill
    assert liu_weisberg_skill([0.0, 0.0], [0.0, 0.0]).ss == 1.0
    assert liu_weisberg_skill([5.0, 0.0], [0.0, 0.0]).ss == 0.0


def test_identical_tracks_score_one():
    obs = curved_track(72)
    table = separation(obs, obs)
    assert np.all(table["separation_m"] < 1e-6)
    after = table[table["elapsed_s"] > 0]
    score = liu_weisberg_skill(after["separation_m"], after["obs_length_m"])
    assert score.ss == pytest.approx(1.0, abs=1e-9)


def test_model_diverging_faster_than_the_drifter_travels_floors_at_zero():
    # The model runs the opposite way at the drifter's speed: d = 2 l at
    # every time, so s = 2 > n = 1 and ss = 0 (Liu & Weisberg 2011 floor);
    # with n = 4, ss = 1 - 2/4 = 0.5 (by hand).
    obs = straight_track(-30.0, 42.0, 90.0, 0.3, 48)
    mod = straight_track(-30.0, 42.0, 270.0, 0.3, 48)
    after = separation(obs, mod).query("elapsed_s > 0")
    score = liu_weisberg_skill(after["separation_m"], after["obs_length_m"])
    assert score.s == pytest.approx(2.0, rel=1e-3)
    assert score.ss == 0.0
    n4 = liu_weisberg_skill(after["separation_m"], after["obs_length_m"], n=4.0)
    assert n4.ss == pytest.approx(0.5, abs=1e-3)


# ---------------------------------------------------------------------------
# separation against GeographicLib
# ---------------------------------------------------------------------------


def _reference_model_position(tm, lon, lat, t):
    """GeographicLib: the point at the time fraction of the bracketing geodesic leg."""
    k = min(int(np.searchsorted(tm, t, side="right") - 1), len(tm) - 2)
    line = WGS84.InverseLine(lat[k], lon[k], lat[k + 1], lon[k + 1])
    frac = (t - tm[k]) / (tm[k + 1] - tm[k])
    pos = line.Position(frac * line.s13)
    return pos["lon2"], pos["lat2"]


@pytest.mark.parametrize("lon0", [-20.0, 179.7])
def test_separation_agrees_with_geographiclib(lon0):
    # 179.7 E: both tracks cross the antimeridian eastward during the record.
    obs = straight_track(lon0, -35.0, 80.0, 0.45, 36, step_h=1.0)
    obs["lon"] = ((obs["lon"] + 180.0) % 360.0) - 180.0
    # modelled output every 1.5 h, released at the observed start, drifting
    # at a different speed and heading, so its times fall between the fixes
    mod = straight_track(lon0, -35.0, 95.0, 0.6, 36, step_h=1.5)
    assert (obs["lon"] < 0).any() and (obs["lon"] > 0).any() or lon0 < 0
    table = separation(obs, mod)
    t_obs = (obs["time"] - T0).dt.total_seconds().to_numpy()
    tm = (mod["time"] - T0).dt.total_seconds().to_numpy()
    assert len(table) == len(obs)  # model spans the whole record
    length = 0.0
    for k, row in enumerate(table.itertuples()):
        lon_m, lat_m = _reference_model_position(tm, mod["lon"].to_numpy(),
                                                 mod["lat"].to_numpy(), t_obs[k])
        ref = WGS84.Inverse(obs["lat"].iloc[k], obs["lon"].iloc[k], lat_m, lon_m)["s12"]
        # same algorithm (Karney 2013) in two implementations: far below 1 mm
        assert row.separation_m == pytest.approx(ref, abs=1e-5)
        if k:
            length += WGS84.Inverse(obs["lat"].iloc[k - 1], obs["lon"].iloc[k - 1],
                                    obs["lat"].iloc[k], obs["lon"].iloc[k])["s12"]
        assert row.obs_length_m == pytest.approx(length, abs=1e-5)
    assert table["separation_m"].iloc[-1] > 10_000.0  # the check is not trivially zero


def test_positions_at_follow_geodesics_and_never_extrapolate():
    t = np.array([0.0, 3600.0])
    lon, lat = positions_at(t, [179.5, -179.5], [10.0, 11.0], [-1.0, 0.0, 900.0, 3600.0, 3601])
    assert np.isnan(lon[0]) and np.isnan(lon[-1])
    assert lon[1] == pytest.approx(179.5) and lat[3] == pytest.approx(11.0)
    ref = WGS84.InverseLine(10.0, 179.5, 11.0, -179.5)
    pos = ref.Position(0.25 * ref.s13)  # GeographicLib, a quarter along the geodesic
    assert lat[2] == pytest.approx(pos["lat2"], abs=1e-10)
    assert ((lon[2] - pos["lon2"] + 180) % 360 - 180) == pytest.approx(0.0, abs=1e-10)


# ---------------------------------------------------------------------------
# forecast windows
# ---------------------------------------------------------------------------


def _daily_runs(obs, days, length_h, drift_m_s=0.05, step_h=1.0):
    """One modelled track per day, released at the observed fix, drifting off east."""
    runs = {}
    for k in range(days):
        start = obs["time"].iloc[0] + pd.Timedelta(days=k)
        part = obs[(obs["time"] >= start)
                   & (obs["time"] <= start + pd.Timedelta(hours=length_h))]
        part = part.iloc[::int(step_h)] if step_h >= 1 else part
        runs[f"D1@{k}"] = displaced(part.reset_index(drop=True), drift_m_s * (1 + k % 3))
    return runs


def test_windows_restart_on_schedule_and_count_from_their_own_start():
    obs = curved_track(24 * 7)
    runs = _daily_runs(obs, 7, 72)
    table = forecast_windows(obs, runs, (24, 48, 72))
    starts = {w: [(t - T0) / pd.Timedelta(hours=1) for t in g["start_time"]]
              for w, g in table.groupby("window_h")}
    # default restart = window length: back-to-back windows
    assert starts[24.0] == [0, 24, 48, 72, 96, 120, 144]
    assert starts[48.0] == [0, 48, 96, 144]
    assert starts[72.0] == [0, 72, 144]
    status = table.set_index(["window_h", "run_id"])["status"]
    # day 6 starts at 144 h: the 168-h record cannot hold a 48- or 72-h window
    assert status[(48.0, "D1@6")] == "observed_short"
    assert status[(72.0, "D1@6")] == "observed_short"
    assert status[(24.0, "D1@6")] == "ok"
    # each window's score is the score of its own release over (t0, t0 + W]
    for row in table[table["status"] == "ok"].itertuples():
        sep = separation(obs, runs[row.run_id])
        sel = (sep["elapsed_s"] > 0) & (sep["elapsed_s"] <= row.window_h * 3600)
        ref = liu_weisberg_skill(sep.loc[sel, "separation_m"], sep.loc[sel, "obs_length_m"])
        assert row.ss == pytest.approx(ref.ss, abs=1e-12)
        assert row.n_points == int(row.window_h)
        # l counts from the restart: after one hour about 0.25 m/s * 3600 s,
        # not the length travelled since the first release
        assert sep["obs_length_m"].iloc[1] < 2000.0
    # restart every 24 h: every run that covers a 72-h window is used
    daily = forecast_windows(obs, runs, (72,), restart_h=24)
    assert list(daily["run_id"]) == [f"D1@{k}" for k in range(7)]
    assert list(daily["status"]) == ["ok"] * 5 + ["observed_short"] * 2
    summary = summarise_windows(daily)["72"]
    ok = daily[daily["status"] == "ok"]
    assert summary["scored"] == 5 and summary["not_scored"] == {"observed_short": 2}
    assert summary["mean_ss"] == pytest.approx(ok["ss"].mean())
    assert summary["median_ss"] == pytest.approx(ok["ss"].median())
    assert summary["fraction_ss_positive"] == pytest.approx((ok["ss"] > 0).mean())


def test_window_statuses_for_short_models_and_observed_gaps():
    obs = curved_track(96)
    runs = {"short": displaced(obs[obs["time"] <= T0 + pd.Timedelta(hours=30)], 0.05)}
    table = forecast_windows(obs, runs, (24, 48))
    assert list(table["status"]) == ["ok", "model_short"]
    gappy = obs.drop(index=range(30, 40)).reset_index(drop=True)  # 11 h without fixes
    table = forecast_windows(gappy, {"full": displaced(obs, 0.05)}, (24, 48))
    assert list(table["status"]) == ["ok", "observed_gap"]
    relaxed = forecast_windows(gappy, {"full": displaced(obs, 0.05)}, (48,), max_gap_h=12)
    assert list(relaxed["status"]) == ["ok"]


# ---------------------------------------------------------------------------
# the run: reading, matching, refusing, writing
# ---------------------------------------------------------------------------


@pytest.fixture
def release(tmp_path):
    obs = curved_track(24 * 4)
    obs_path = write_csv(tmp_path / "observed.csv", [("D1", obs)])
    runs = _daily_runs(obs, 4, 48)
    # all runs in one file, one after another: time goes back at each new run
    mod_path = write_csv(tmp_path / "model.csv", [("D1@run", r) for r in runs.values()])
    return obs, runs, obs_path, mod_path


def test_run_writes_every_output_and_they_read_back(release, tmp_path):
    import geopandas as gpd
    from matplotlib.image import imread

    obs, runs, obs_path, mod_path = release
    out = tmp_path / "out"
    config = SkillConfig(windows_h="24,48")
    result = run_skill(obs_path, mod_path, out, config, qc_config=NO_LAND)
    names = sorted(p.name for p in out.iterdir())
    assert names == sorted(["separation.csv", "separation.csv-metadata.json", "skill.csv",
                            "skill.csv-metadata.json", "skill.json", "skill.geojson",
                            "skill.png", "provenance.json"])
    # four runs found in one file by the time going back
    assert sorted(r["run_id"] for r in result.summary["runs"]) == [
        "D1@run#1", "D1@run#2", "D1@run#3", "D1@run#4"]
    sep = pd.read_csv(out / "separation.csv")
    assert len(sep) == len(result.separation) and sep["separation_m"].max() > 1000
    skill = pd.read_csv(out / "skill.csv")
    assert set(skill["window_h"]) == {24.0, 48.0}
    info = json.loads((out / "skill.json").read_text())
    assert info["provenance"]["software"] == "driftloop"
    assert info["provenance"]["parameters"]["skill"]["windows_h"] == "24,48"
    assert "research tool" in info["caution"]
    assert info["windows"]["24"]["scored"] == 4
    assert info["windows"]["48"]["scored"] == 2  # starts at 0 and 48 h
    # the runs released at 24 and 72 h are not on the 48-h schedule, and say so
    assert info["windows"]["48"]["runs_off_schedule"] == ["D1@run#2", "D1@run#4"]
    assert info["drifters"]["D1"]["windows"]["24"]["runs_off_schedule"] == []
    # GeoJSON (RFC 7946): no crs member, [lon, lat] order, 6 decimals, Z times
    geo = json.loads((out / "skill.geojson").read_text())
    assert geo["type"] == "FeatureCollection" and "crs" not in geo
    observed = [f for f in geo["features"] if f["properties"]["kind"] == "observed"]
    first = observed[0]["geometry"]["coordinates"][0]
    assert first == [round(obs["lon"].iloc[0], 6), round(obs["lat"].iloc[0], 6)]
    assert observed[0]["properties"]["start_time"] == "2024-05-01T00:00:00Z"
    kinds = [f["properties"]["kind"] for f in geo["features"]]
    assert kinds.count("modelled") == 4
    assert kinds.count("separation") == int((sep["elapsed_h"] > 0).sum())
    lines = [f for f in geo["features"] if f["properties"]["kind"] == "separation"]
    assert all(f["properties"]["time"].endswith("Z") for f in lines)
    assert all(len(f["geometry"]["coordinates"]) == 2 for f in lines)
    frame = gpd.read_file(out / "skill.geojson")  # GDAL, an independent reader
    assert len(frame) == len(geo["features"]) and frame.crs.to_epsg() == 4326
    image = imread(out / "skill.png")
    assert (out / "skill.png").read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
    assert image.shape[0] > 300 and image.shape[1] > 600


def test_explicit_pairs_match_any_modelled_id(release, tmp_path):
    obs, runs, obs_path, _ = release
    mod_path = write_csv(tmp_path / "sim.csv", [("particle-7", runs["D1@0"])])
    with pytest.raises(InputError, match="matches no observed drifter"):
        run_skill(obs_path, mod_path, None, qc_config=NO_LAND)
    result = run_skill(obs_path, mod_path, None, pairs={"particle-7": "D1"}, qc_config=NO_LAND)
    assert result.summary["runs"][0]["drifter_id"] == "D1"


def test_refuses_a_modelled_track_released_elsewhere(release, tmp_path):
    obs, runs, obs_path, _ = release
    moved = displaced(runs["D1@1"], 0.0)
    start = geodesy.forward(moved["lon"], moved["lat"], 0.0, 5000.0)  # 5 km north
    moved["lon"], moved["lat"] = start.lon_deg, start.lat_deg
    bad = write_csv(tmp_path / "bad_place.csv", [("D1@1", moved)])
    with pytest.raises(InputError) as caught:
        run_skill(obs_path, bad, None, qc_config=NO_LAND)
    text = str(caught.value)
    assert str(bad) in text and "row 2" in text
    assert "5000 m from observed drifter 'D1'" in text
    assert "expected a start within 1000 m (start_distance_tol_m)" in text
    # a looser tolerance accepts it
    ok = run_skill(obs_path, bad, None, SkillConfig(start_distance_tol_m=6000.0),
                   qc_config=NO_LAND)
    assert ok.summary["runs"][0]["start_offset_m"] == pytest.approx(5000.0, abs=1.0)


def test_refuses_a_modelled_track_released_when_the_drifter_was_not_seen(release, tmp_path):
    obs, runs, obs_path, _ = release
    early = runs["D1@0"].copy()
    early["time"] = early["time"] - pd.Timedelta(hours=3)
    bad = write_csv(tmp_path / "bad_time.csv", [("D1", early)])
    with pytest.raises(InputError) as caught:
        run_skill(obs_path, bad, None, qc_config=NO_LAND)
    text = str(caught.value)
    assert str(bad) in text and "starts at 2024-04-30T21:00:00Z" in text
    assert "no usable fix within 3600 s (start_time_tol_s)" in text
    assert "3.00 h away" in text


def test_skill_config_parses_and_checks_its_values():
    assert parse_windows(" 72,24, 48 ") == (24.0, 48.0, 72.0)
    assert SkillConfig(windows_h="6").windows == (6.0,)
    for text in ("24,x", "", "24,-1", "0"):
        with pytest.raises(ConfigError, match="windows_h"):
            SkillConfig(windows_h=text)
    with pytest.raises(ConfigError, match="tolerance_n"):
        SkillConfig(tolerance_n=0.0)
    with pytest.raises(ConfigError, match="restart_h"):
        SkillConfig(restart_h=-24.0)


# ---------------------------------------------------------------------------
# a release across the antimeridian, end to end
# ---------------------------------------------------------------------------


def test_run_across_the_antimeridian(tmp_path):
    obs = straight_track(179.6, -20.0, 100.0, 0.3, 72)
    obs["lon"] = ((obs["lon"] + 180.0) % 360.0) - 180.0
    mod = straight_track(179.6, -20.0, 110.0, 0.35, 72, step_h=0.5)
    mod["lon"] = ((mod["lon"] + 180.0) % 360.0) - 180.0
    obs_path = write_csv(tmp_path / "obs.csv", [("SOUTH-1", obs)])
    mod_path = write_csv(tmp_path / "mod.csv", [("SOUTH-1@a", mod)])
    out = tmp_path / "out"
    result = run_skill(obs_path, mod_path, out, SkillConfig(windows_h="24,72"),
                       qc_config=NO_LAND)
    # separation along geodesics, not degrees: GeographicLib at the last fix
    last = result.separation.iloc[-1]
    ref = WGS84.Inverse(last.lat_obs, last.lon_obs, last.lat_model, last.lon_model)["s12"]
    assert last.separation_m == pytest.approx(ref, abs=1e-3)
    assert last.separation_m < 20_000.0  # about 0.1 m/s * 72 h, not a world away
    assert list(result.windows["status"]) == ["ok", "ok"]
    # RFC 7946 3.1.9: the tracks are cut at the antimeridian
    geo = json.loads((out / "skill.geojson").read_text())
    tracks = [f for f in geo["features"] if f["properties"]["kind"] != "separation"]
    assert [f["geometry"]["type"] for f in tracks] == ["MultiLineString"] * 2
    for feature in tracks:
        parts = feature["geometry"]["coordinates"]
        assert abs(parts[0][-1][0]) == 180.0 and abs(parts[1][0][0]) == 180.0
        assert parts[0][-1][1] == pytest.approx(parts[1][0][1], abs=1e-6)
    assert geo["bbox"][0] > geo["bbox"][2]  # RFC 7946 5.2: west > east across 180
