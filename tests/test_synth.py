"""Checks of the synthetic release generator against outside facts.

Reference values and their sources are named beside each check.  The
handbook inertial periods T_i(30 deg) = 23.934 h and T_i(45 deg) = 16.924 h
are computed from T_i = pi / (Omega |sin(lat)|) with the WGS 84 rotation
rate Omega = 7.2921150e-5 rad/s (NGA.STND.0036, 2014); TEOS-10's
``gsw.f`` is an independent implementation of f = 2 Omega sin(lat).
"""

from __future__ import annotations

import importlib.util
import math
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from pyproj import Geod

from driftloop.synth import (
    FIELD_CSV_COLUMNS,
    TRUTH_COLUMNS,
    DuplicateFix,
    EddyEncounter,
    FixGap,
    PositionSpike,
    ReleaseScenario,
    coriolis_parameter,
    simulate_many,
    simulate_release,
    write_fixes_csv,
)

REPO = Path(__file__).resolve().parents[1]
GEOD = Geod(ellps="WGS84")
HANDBOOK_PERIOD_H = {30.0: 23.934, 45.0: 16.924}


def _free(lat: float, *, speed: float = 0.2, damping_days: float = math.inf,
          days: float = 4.0, interval_h: float = 0.25) -> ReleaseScenario:
    """One drifter in the unforced slab model: no wind, no mean flow, no noise."""
    return ReleaseScenario(
        name="free", drifter_ids=("F",), deploy_lat_deg=(lat,), deploy_lon_deg=(-30.0,),
        duration_days=days, spinup_days=0.0, drift_east_m_s=0.0, drift_north_m_s=0.0,
        meander_speed_m_s=0.0, damping_time_days=damping_days, initial_slab_speed_m_s=speed,
        background_wind_m_s=0.0, storm_mean_interval_days=math.inf, fix_interval_h=interval_h,
        fix_jitter_min=0.0, fix_loss_probability=0.0, gps_noise_m=0.0)


def _seconds(times: pd.Series) -> np.ndarray:
    return (times - times.iloc[0]).dt.total_seconds().to_numpy()


def _centred_velocity(fixes: pd.DataFrame) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """East, north velocity (m/s) from centred geodesic differences (METHODS.md section 2)."""
    lon, lat, t = fixes["lon"].to_numpy(), fixes["lat"].to_numpy(), _seconds(fixes["time"])
    az_f, _, s_f = GEOD.inv(lon[1:-1], lat[1:-1], lon[2:], lat[2:])
    az_b, _, s_b = GEOD.inv(lon[1:-1], lat[1:-1], lon[:-2], lat[:-2])
    az_f, az_b = np.radians(az_f), np.radians(az_b)
    dt = t[2:] - t[:-2]
    u = (s_f * np.sin(az_f) - s_b * np.sin(az_b)) / dt
    v = (s_f * np.cos(az_f) - s_b * np.cos(az_b)) / dt
    return u, v, t[1:-1]


def _local_xy(fixes: pd.DataFrame) -> tuple[np.ndarray, np.ndarray]:
    """Azimuthal equidistant coordinates (m) about the first fix."""
    lon, lat = fixes["lon"].to_numpy(), fixes["lat"].to_numpy()
    az, _, s = GEOD.inv(np.full(lon.size, lon[0]), np.full(lat.size, lat[0]), lon, lat)
    return s * np.sin(np.radians(az)), s * np.cos(np.radians(az))


# (a) period of the free oscillation --------------------------------------------------------


@pytest.mark.parametrize("lat", [30.0, 45.0])
def test_coriolis_parameter_matches_teos10(lat):
    gsw = pytest.importorskip("gsw")
    # TEOS-10 gsw.f: f = 2 Omega sin(lat) with Omega = 7.292115e-5 rad/s
    assert coriolis_parameter(lat) == pytest.approx(float(gsw.f(lat)), rel=1e-9)
    # handbook table (computed from the formula with WGS 84 Omega), to its 3 decimals
    assert 2 * math.pi / coriolis_parameter(lat) / 3600 == pytest.approx(
        HANDBOOK_PERIOD_H[lat], abs=5e-4)


@pytest.mark.parametrize("lat", [30.0, 45.0])
def test_free_inertial_period(lat):
    gsw = pytest.importorskip("gsw")
    fixes = simulate_release(_free(lat), seed=0).fixes
    u, v, t = _centred_velocity(fixes)
    rate = np.polyfit(t, np.unwrap(np.arctan2(v, u)), 1)[0]
    period_h = 2 * math.pi / abs(rate) / 3600
    # TEOS-10 gsw.f, period 2 pi / |f|, within 0.5 %; the slab equation is
    # integrated exactly, so 1e-4 also holds (and would catch Omega = 2 pi / 86400 s,
    # which is 0.27 % off)
    gsw_period_h = 2 * math.pi / abs(float(gsw.f(lat))) / 3600
    assert period_h == pytest.approx(gsw_period_h, rel=5e-3)
    assert period_h == pytest.approx(gsw_period_h, rel=1e-4)
    # handbook inertial period T_i = pi / (Omega |sin lat|), within 0.5 %
    assert period_h == pytest.approx(HANDBOOK_PERIOD_H[lat], rel=5e-3)


# (b) sense of rotation -------------------------------------------------------------------


@pytest.mark.parametrize("lat, clockwise", [(45.0, True), (-45.0, False)])
def test_free_inertial_rotation_sense(lat, clockwise):
    # AMS Glossary of Meteorology, "inertial oscillation": anticyclonic, i.e.
    # clockwise in the northern hemisphere, anticlockwise in the southern
    fixes = simulate_release(_free(lat), seed=0).fixes
    x, y = _local_xy(fixes)
    signed_area = 0.5 * np.sum(x[:-1] * y[1:] - x[1:] * y[:-1])
    assert (signed_area < 0) == clockwise
    u, v, t = _centred_velocity(fixes)
    rate = np.polyfit(t, np.unwrap(np.arctan2(v, u)), 1)[0]
    assert (rate < 0) == clockwise
    assert abs(rate) == pytest.approx(abs(coriolis_parameter(lat)), rel=5e-3)


# (c) radius of the inertial circle -------------------------------------------------------


@pytest.mark.parametrize("lat, speed", [(30.0, 0.15), (45.0, 0.3)])
def test_free_inertial_radius(lat, speed):
    gsw = pytest.importorskip("gsw")
    fixes = simulate_release(_free(lat, speed=speed), seed=0).fixes
    x, y = _local_xy(fixes)
    # algebraic least-squares circle: x^2 + y^2 = 2 a x + 2 b y + c
    design = np.column_stack([2 * x, 2 * y, np.ones_like(x)])
    a, b, c = np.linalg.lstsq(design, x ** 2 + y ** 2, rcond=None)[0]
    radius = math.sqrt(c + a * a + b * b)
    # METHODS.md section 1: R_i = |V / f| (f from TEOS-10 gsw.f), within 2 %
    assert radius == pytest.approx(speed / abs(float(gsw.f(lat))), rel=0.02)


# (d) damping ------------------------------------------------------------------------------


def test_damping_e_folding_time():
    # slab model (Pollard & Millard 1970): with no wind |Z| = |Z0| exp(-r t)
    damping_days = 2.0
    fixes = simulate_release(_free(45.0, speed=0.3, damping_days=damping_days, days=6.0),
                             seed=0).fixes
    u, v, t = _centred_velocity(fixes)
    slope = np.polyfit(t, np.log(np.hypot(u, v)), 1)[0]
    assert -1 / slope / 86400 == pytest.approx(damping_days, rel=0.01)


# (e) determinism --------------------------------------------------------------------------


def _small_scenario() -> ReleaseScenario:
    return ReleaseScenario(
        name="small", drifter_ids=("P", "Q", "R"), deploy_lat_deg=(40.0, 40.2, 40.4),
        deploy_lon_deg=(-30.0, -30.1, -30.2), deploy_after_start_h=(0.0, 1.0, 2.0),
        duration_days=6.0, spinup_days=1.0,
        eddies=(EddyEncounter("Q", start_day=1.0, duration_days=3.0, orbit_radius_km=8.0,
                              orbit_period_days=2.0),),
        gaps=(FixGap("R", start_day=2.0, duration_h=20.0),),
        spikes=(PositionSpike("P", day=3.0, displacement_km=5.0),),
        duplicates=(DuplicateFix("P", day=4.0),))


def test_same_seed_same_output():
    first = simulate_release(_small_scenario(), seed=11)
    again = simulate_release(_small_scenario(), seed=11)
    pd.testing.assert_frame_equal(first.fixes, again.fixes)
    pd.testing.assert_frame_equal(first.truth, again.truth)
    pd.testing.assert_frame_equal(first.storms, again.storms)
    other = simulate_release(_small_scenario(), seed=12)
    assert not np.array_equal(first.fixes["lat"].to_numpy()[:50],
                              other.fixes["lat"].to_numpy()[:50])


def test_simulate_many_is_deterministic():
    first = simulate_many(30, 4.0, seed=5)
    again = simulate_many(30, 4.0, seed=5)
    pd.testing.assert_frame_equal(first.fixes, again.fixes)
    pd.testing.assert_frame_equal(first.truth, again.truth)
    assert first.fixes["drifter_id"].nunique() == 30


# (f) antimeridian and the ellipsoid ---------------------------------------------------------


@pytest.mark.parametrize("east, north", [(0.5, 0.0), (0.0, 0.5)])
def test_track_on_ellipsoid_and_across_antimeridian(east, north):
    sc = ReleaseScenario(
        name="dateline", drifter_ids=("N", "S"), deploy_lat_deg=(40.0, -60.0),
        deploy_lon_deg=(179.7, 179.8), duration_days=1.5, spinup_days=0.0,
        drift_east_m_s=east, drift_north_m_s=north, meander_speed_m_s=0.0,
        background_wind_m_s=0.0, storm_mean_interval_days=math.inf,
        fix_loss_probability=0.0, gps_noise_m=0.0)
    release = simulate_release(sc, seed=3)
    for lon in (release.fixes["lon"], release.truth["lon_true"]):
        assert lon.between(-180.0, 180.0, inclusive="left").all()
    for _, track in release.fixes.groupby("drifter_id"):
        lon, lat = track["lon"].to_numpy(), track["lat"].to_numpy()
        if east:
            assert (lon > 179.0).any() and (lon < -179.0).any()  # it crossed
        _, _, step_m = GEOD.inv(lon[:-1], lat[:-1], lon[1:], lat[1:])
        expected_m = math.hypot(east, north) * np.diff(_seconds(track["time"]))
        # geodesic step lengths on WGS 84 (Karney 2013 via pyproj) = speed x dt;
        # a spherical metric would be off by ~0.3 %
        np.testing.assert_allclose(step_m, expected_m, rtol=1e-4)


# (g) the bundled sample -----------------------------------------------------------------------


def _load_script():
    path = REPO / "scripts" / "make_sample_tracks.py"
    spec = importlib.util.spec_from_file_location("make_sample_tracks", path)
    module = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(module)
    return module


@pytest.fixture(scope="module")
def sample(tmp_path_factory):
    script = _load_script()
    out = tmp_path_factory.mktemp("sample")
    fixes_path, truth_path = script.write_sample(out)
    return script, fixes_path, truth_path


def test_sample_tracks_regression_byte_identical(sample):
    # Regression check (not an outside fact): the bundled files are exactly
    # what scripts/make_sample_tracks.py writes.
    _, fixes_path, truth_path = sample
    for path in (fixes_path, truth_path):
        bundled = REPO / "sample_tracks" / path.name
        assert bundled.read_bytes() == path.read_bytes(), f"{bundled} is out of date"


def test_sample_tracks_record_what_the_scenario_injects(sample):
    script, fixes_path, truth_path = sample
    scenario = script.sample_scenario()
    fixes = pd.read_csv(fixes_path)
    truth = pd.read_csv(truth_path)
    assert tuple(fixes.columns) == FIELD_CSV_COLUMNS
    assert tuple(truth.columns) == TRUTH_COLUMNS
    assert fixes_path.stat().st_size + truth_path.stat().st_size < 3e6
    in_file = truth[truth["fix_row"] >= 0]
    assert len(in_file) == len(fixes)
    assert (fixes["platform_id"].to_numpy() == in_file["drifter_id"].to_numpy()).all()
    spikes = truth[truth["corruption"] == "spike"]
    assert sorted(spikes["offset_m"].round(-1)) == sorted(
        s.displacement_km * 1e3 for s in scenario.spikes)
    assert (truth.loc[truth["corruption"] == "none", "offset_m"] < 60).all()
    dup_rows = truth.loc[truth["corruption"] == "duplicate", "fix_row"].to_numpy()
    assert len(dup_rows) == len(scenario.duplicates)
    pd.testing.assert_frame_equal(fixes.iloc[dup_rows].reset_index(drop=True),
                                  fixes.iloc[dup_rows - 1].reset_index(drop=True))
    gap = scenario.gaps[0]
    track = fixes[fixes["platform_id"] == gap.drifter_id]
    steps_h = pd.to_datetime(track["obs_time_utc"]).diff().dt.total_seconds() / 3600
    assert steps_h.max() == pytest.approx(gap.duration_h + 1, abs=1.5)


def test_sample_eddy_orbit_matches_its_specification(sample):
    script, _, truth_path = sample
    eddy = script.sample_scenario().eddies[0]
    truth = pd.read_csv(truth_path)
    trapped = truth[truth["eddy_weight"] > 0.999]
    assert set(trapped["drifter_id"]) == {eddy.drifter_id}
    az, _, dist = GEOD.inv(trapped["eddy_lon"].to_numpy(), trapped["eddy_lat"].to_numpy(),
                           trapped["lon_true"].to_numpy(), trapped["lat_true"].to_numpy())
    np.testing.assert_allclose(dist, eddy.orbit_radius_km * 1e3, rtol=0.01)
    times = pd.to_datetime(trapped["time"])
    rate = np.polyfit(_seconds(times), np.unwrap(np.radians(90.0 - az)), 1)[0]
    # cyclonic in the northern hemisphere turns anticlockwise (rate > 0)
    assert rate > 0
    assert 2 * math.pi / rate / 86400 == pytest.approx(eddy.orbit_period_days, rel=0.01)
    f = coriolis_parameter(trapped["lat_true"].mean())
    assert 2 * math.pi / rate > 3 * (2 * math.pi / f)  # far slower than inertial


def test_truth_components_add_up_to_the_true_motion(sample):
    _, _, truth_path = sample
    truth = pd.read_csv(truth_path)
    track = truth[(truth["drifter_id"] == "ORV-A05") & (truth["corruption"] != "duplicate")]
    track = track.assign(time=pd.to_datetime(track["time"]), lat=track["lat_true"],
                         lon=track["lon_true"])
    u, v, _ = _centred_velocity(track)
    inner = track.iloc[1:-1]
    u_sum = inner[["u_mean_m_s", "u_slab_m_s", "u_eddy_m_s"]].sum(axis=1).to_numpy()
    v_sum = inner[["v_mean_m_s", "v_slab_m_s", "v_eddy_m_s"]].sum(axis=1).to_numpy()
    # centred differences over ~2 h shorten inertial chords by ~2 %, so allow 1 cm/s
    assert np.percentile(np.hypot(u - u_sum, v - v_sum), 99) < 0.01


def test_scenario_is_validated():
    with pytest.raises(ValueError, match="deploy_lon_deg"):
        ReleaseScenario(name="x", drifter_ids=("A", "B"), deploy_lat_deg=(40.0, 41.0),
                        deploy_lon_deg=(-30.0,))
    with pytest.raises(ValueError, match="unknown drifter"):
        ReleaseScenario(name="x", drifter_ids=("A",), deploy_lat_deg=(40.0,),
                        deploy_lon_deg=(-30.0,), spikes=(PositionSpike("Z", 1.0, 5.0),))


def test_fixes_csv_format(tmp_path):
    release = simulate_release(_free(45.0, days=0.5, interval_h=1.0), seed=0)
    path = write_fixes_csv(release.fixes, tmp_path / "f.csv")
    lines = path.read_text().splitlines()
    assert lines[0] == ",".join(FIELD_CSV_COLUMNS)
    drifter, time, lat, lon = lines[1].split(",")
    assert drifter == "F" and time.endswith("Z") and len(time) == 20
    assert len(lat.split(".")[1]) == 6 and len(lon.split(".")[1]) == 6
    assert str(release.fixes["time"].dtype) == "datetime64[ns, UTC]"


def test_qc_finds_exactly_the_corruptions_injected_in_the_sample():
    # Regression on invented data: the generator's ground truth says which
    # records are spikes or duplicated; QC must fail exactly those.
    from driftloop import read_tracks, run_qc
    from driftloop.config import QCConfig

    folder = Path(__file__).resolve().parent.parent / "sample_tracks"
    fixes = read_tracks(folder / "orravane_a.csv")
    truth = pd.read_csv(folder / "orravane_a_truth.csv")
    bad = truth[truth["corruption"].isin(["spike", "duplicate"])]
    expected = set(bad["fix_row"] + 2)  # header is row 1
    out = run_qc(fixes, QCConfig(land_test=False))
    failed = set(out.loc[out["qc_flag"] == 4, "source_row"])
    assert failed == expected
    assert (out["qc_flag"] != 3).all()
