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


# (h) tides, hemispheres, quiet drifters, truth events and the evaluation release ----------

# NOAA CO-OPS harmonic constituent speed of M2: 28.9841042 degrees per hour
NOAA_M2_PERIOD_H = 360.0 / 28.9841042  # 12.4206 h


def _still(lat: float, **kw) -> ReleaseScenario:
    """One drifter, no wind, no mean flow, no noise; the caller adds tides or eddies."""
    args = dict(
        name="still", drifter_ids=("T",), deploy_lat_deg=(lat,), deploy_lon_deg=(-30.0,),
        duration_days=6.0, spinup_days=0.0, drift_east_m_s=0.0, drift_north_m_s=0.0,
        meander_speed_m_s=0.0, background_wind_m_s=0.0, storm_mean_interval_days=math.inf,
        fix_interval_h=0.25, fix_jitter_min=0.0, fix_loss_probability=0.0, gps_noise_m=0.0,
        step_s=1800.0)
    args.update(kw)
    return ReleaseScenario(**args)


def _rotary_fit(t: np.ndarray, z: np.ndarray, omega: float) -> tuple[complex, complex]:
    """Least-squares coefficients of exp(+i omega t) and exp(-i omega t) (plus a constant)."""
    design = np.column_stack([np.exp(1j * omega * t), np.exp(-1j * omega * t),
                              np.ones_like(t)])
    coef = np.linalg.lstsq(design, z, rcond=None)[0]
    return complex(coef[0]), complex(coef[1])


@pytest.mark.parametrize("ratio", [0.5, -0.4])
def test_tidal_current_period_and_ellipse(ratio):
    from driftloop.synth import TidalCurrent

    amplitude, orientation = 0.2, 30.0
    sc = _still(40.0, tides=(TidalCurrent("T", "M2", amplitude, ratio, orientation, 75.0),))
    release = simulate_release(sc, seed=0)
    fixes = release.fixes
    x, y = _local_xy(fixes)
    t = _seconds(fixes["time"])
    z = x + 1j * y
    # period: maximum of the rotary periodogram of the track, on a fine grid around 12.4 h
    periods_h = np.linspace(11.5, 13.5, 4001)
    power = [abs(np.sum((z - z.mean()) * np.exp(-1j * np.sign(ratio) * 2 * np.pi / (p * 3600)
                                                 * t))) for p in periods_h]
    peak_h = periods_h[int(np.argmax(power))]
    # NOAA CO-OPS M2 speed 28.9841042 deg/h -> 12.4206 h; the 6-day record and 1.8 s
    # grid resolve the peak to better than 0.05 %
    assert peak_h == pytest.approx(NOAA_M2_PERIOD_H, rel=5e-4)
    # ellipse: the excursion ellipse has semi-axes a / omega and |b| / omega (b = ratio a),
    # its major axis at the stated orientation, and turns anticlockwise when b > 0
    omega = 2 * np.pi / (NOAA_M2_PERIOD_H * 3600)
    cp, cm = _rotary_fit(t, z, omega)
    assert abs(cp) + abs(cm) == pytest.approx(amplitude / omega, rel=2e-3)
    assert abs(cp) - abs(cm) == pytest.approx(ratio * amplitude / omega, rel=5e-3)
    theta = np.degrees(0.5 * (np.angle(cp) + np.angle(cm))) % 180.0
    assert theta == pytest.approx(orientation, abs=0.5)
    signed_area = 0.5 * np.sum(x[:-1] * y[1:] - x[1:] * y[:-1])
    assert (signed_area > 0) == (ratio > 0)
    truth = release.truth
    speed = np.hypot(truth["u_tide_m_s"], truth["v_tide_m_s"])
    assert speed.max() == pytest.approx(amplitude, rel=1e-3)
    assert speed.min() == pytest.approx(abs(ratio) * amplitude, rel=1e-2)


def test_tides_add_up_with_the_other_components(tmp_path):
    from driftloop.synth import TIDE_TRUTH_COLUMNS, TidalCurrent, write_truth_csv

    sc = ReleaseScenario(
        name="tidal", drifter_ids=("A", "B"), deploy_lat_deg=(42.0, 42.1),
        deploy_lon_deg=(-35.0, -35.1), duration_days=4.0, spinup_days=1.0,
        fix_interval_h=0.25, fix_jitter_min=0.0, fix_loss_probability=0.0, gps_noise_m=0.0,
        eddies=(EddyEncounter("B", start_day=0.5, duration_days=3.0, orbit_period_days=2.0),),
        tides=(TidalCurrent("A", "M2", 0.12, 0.6, 20.0, 10.0),
               TidalCurrent("A", "K1", 0.06, -0.5, 100.0, 200.0),
               TidalCurrent("B", "S2", 0.08, 0.3)))
    release = simulate_release(sc, seed=4)
    truth = release.truth
    assert tuple(truth.columns) == TRUTH_COLUMNS + TIDE_TRUTH_COLUMNS
    for drifter, track in truth.groupby("drifter_id"):
        track = track.assign(lat=track["lat_true"], lon=track["lon_true"])
        u, v, _ = _centred_velocity(track)
        inner = track.iloc[1:-1]
        u_sum = inner[["u_mean_m_s", "u_slab_m_s", "u_eddy_m_s", "u_tide_m_s"]].sum(axis=1)
        v_sum = inner[["v_mean_m_s", "v_slab_m_s", "v_eddy_m_s", "v_tide_m_s"]].sum(axis=1)
        # centred differences over an even 30 min shorten the chords of a 12-h loop
        # by (omega dt)^2 / 6 ~ 0.3 %, i.e. well under 1 mm/s
        err = np.hypot(u - u_sum.to_numpy(), v - v_sum.to_numpy())
        assert np.percentile(err, 99) < 1e-3, drifter
    header = write_truth_csv(truth, tmp_path / "t.csv").read_text().splitlines()[0]
    assert header.endswith("tau_north_pa,u_tide_m_s,v_tide_m_s")


def test_tide_scenarios_are_validated():
    from driftloop.synth import TidalCurrent

    with pytest.raises(ValueError, match="constituent"):
        _still(40.0, tides=(TidalCurrent("T", "N2"),))
    with pytest.raises(ValueError, match="ellipse_ratio"):
        _still(40.0, tides=(TidalCurrent("T", ellipse_ratio=1.5),))
    with pytest.raises(ValueError, match="unknown drifter"):
        _still(40.0, tides=(TidalCurrent("Z"),))
    with pytest.raises(ValueError, match="quiet_drifters"):
        _still(40.0, quiet_drifters=("Z",))


def _rotary_coefficient_near(lat: float, z: np.ndarray, dt_s: float) -> float:
    """(S+ - S-) / (S+ + S-) within 20 % of |f| (Gonella 1972; METHODS.md section 5)."""
    spec = np.abs(np.fft.fft(z - z.mean())) ** 2
    freq = np.fft.fftfreq(z.size, dt_s) * 2 * np.pi
    band = np.abs(np.abs(freq) / abs(coriolis_parameter(lat)) - 1) < 0.2
    plus = spec[band & (freq > 0)].sum()
    minus = spec[band & (freq < 0)].sum()
    return float((plus - minus) / (plus + minus))


@pytest.mark.parametrize("lat", [40.0, -40.0])
def test_storm_driven_ringing_is_anticyclonic_in_both_hemispheres(lat):
    # AMS Glossary of Meteorology, "inertial oscillation": clockwise in the northern
    # hemisphere, anticlockwise in the southern; with storms, not only free motion
    sc = ReleaseScenario(name="ring", drifter_ids=("R",), deploy_lat_deg=(lat,),
                         deploy_lon_deg=(-25.0,), duration_days=30.0, gps_noise_m=0.0,
                         step_s=1800.0)
    truth = simulate_release(sc, seed=8).truth
    t = _seconds(truth["time"])
    grid = np.arange(0.0, t[-1], 3600.0)
    z = (np.interp(grid, t, truth["u_slab_m_s"]) + 1j * np.interp(grid, t, truth["v_slab_m_s"]))
    coefficient = _rotary_coefficient_near(lat, z, 3600.0)
    # almost purely anticlockwise (> 0) in the south, clockwise (< 0) in the north
    assert coefficient * np.sign(lat) < -0.9
    assert np.abs(z).max() > 0.1  # the storms did make it ring


@pytest.mark.parametrize("lat", [40.0, -40.0])
@pytest.mark.parametrize("spin", ["cyclonic", "anticyclonic"])
def test_eddies_of_either_spin_in_either_hemisphere(lat, spin):
    from driftloop.synth import truth_events

    eddy = EddyEncounter("E", start_day=2.0, duration_days=14.0, orbit_radius_km=12.0,
                         orbit_period_days=4.0, core_radius_km=30.0, spin=spin)
    sc = ReleaseScenario(name="eddy", drifter_ids=("E",), deploy_lat_deg=(lat,),
                         deploy_lon_deg=(-25.0,), duration_days=18.0, gps_noise_m=0.0,
                         step_s=1800.0, eddies=(eddy,))
    release = simulate_release(sc, seed=2)
    truth = release.truth
    held = truth[truth["eddy_weight"] > 0.999]
    az, _, _ = GEOD.inv(held["eddy_lon"].to_numpy(), held["eddy_lat"].to_numpy(),
                        held["lon_true"].to_numpy(), held["lat_true"].to_numpy())
    rate = np.polyfit(_seconds(held["time"]), np.unwrap(np.radians(90.0 - az)), 1)[0]
    # cyclonic = the sense of the Earth's rotation: anticlockwise north, clockwise south
    anticlockwise = (spin == "cyclonic") == (lat > 0)
    assert (rate > 0) == anticlockwise
    assert 2 * math.pi / abs(rate) / 86400 == pytest.approx(eddy.orbit_period_days, rel=0.01)
    events = truth_events(release)
    found = events[events["kind"] == "eddy"].iloc[0]
    assert found["spin"] == spin
    assert found["radius_km"] == pytest.approx(eddy.orbit_radius_km, rel=0.01)
    # the event includes the half ramps, so its mean period is a little longer
    assert 1.0 <= found["period_h"] / (eddy.orbit_period_days * 24) < 1.05
    # Kunze (1985): inside a cyclone inertial motion is super-inertial, in an
    # anticyclone sub-inertial, in either hemisphere
    inside = events[(events["kind"] == "inertial") & (events["start"] >= found["start"])
                    & (events["end"] <= found["end"])]
    assert len(inside) >= 1
    t_i = 2 * math.pi / abs(coriolis_parameter(inside["lat"].to_numpy())) / 3600
    ratio = inside["period_h"].to_numpy() / t_i
    assert np.all(ratio < 0.95) if spin == "cyclonic" else np.all(ratio > 1.05)


def test_quiet_drifters_have_no_slab_motion():
    from driftloop.synth import truth_events

    sc = ReleaseScenario(name="calm", drifter_ids=("W", "Q"), deploy_lat_deg=(45.0, 45.05),
                         deploy_lon_deg=(-30.0, -30.0), duration_days=20.0, step_s=1800.0,
                         initial_slab_speed_m_s=0.2, quiet_drifters=("Q",))
    release = simulate_release(sc, seed=6)
    truth = release.truth
    quiet = truth[truth["drifter_id"] == "Q"]
    windy = truth[truth["drifter_id"] == "W"]
    assert np.hypot(quiet["u_slab_m_s"], quiet["v_slab_m_s"]).max() < 1e-9
    assert np.hypot(quiet["tau_east_pa"], quiet["tau_north_pa"]).max() == 0.0
    assert np.hypot(windy["u_slab_m_s"], windy["v_slab_m_s"]).max() > 0.1
    events = truth_events(release)
    assert set(events["drifter_id"]) == {"W"}
    # only the mean flow moves it: its velocity is the background current
    track = quiet.assign(lat=quiet["lat_true"], lon=quiet["lon_true"])
    u, v, _ = _centred_velocity(track)
    inner = quiet.iloc[1:-1]
    assert np.percentile(np.hypot(u - inner["u_mean_m_s"], v - inner["v_mean_m_s"]), 99) < 2e-3


@pytest.mark.parametrize("lat", [30.0, -45.0])
def test_truth_event_of_a_free_oscillation(lat):
    gsw = pytest.importorskip("gsw")
    from driftloop.synth import truth_events

    speed = 0.2
    release = simulate_release(_free(lat, speed=speed, days=5.0), seed=0)
    events = truth_events(release)
    assert list(events["kind"]) == ["inertial"]
    event = events.iloc[0]
    assert event["start"] == release.truth["time"].iloc[0]
    assert event["end"] == release.truth["time"].iloc[-1]
    # TEOS-10 gsw.f: period 2 pi / |f| and radius |V / f| (METHODS.md section 1)
    f = abs(float(gsw.f(lat)))
    assert event["period_h"] == pytest.approx(2 * math.pi / f / 3600, rel=1e-4)
    assert event["speed_m_s"] == pytest.approx(speed, rel=1e-3)
    assert event["radius_km"] == pytest.approx(speed / f / 1e3, rel=1e-3)
    assert event["cycles"] == pytest.approx(5 * 86400 * f / (2 * math.pi), rel=1e-3)
    assert event["spin"] == "anticyclonic"


@pytest.fixture(scope="module")
def evaluation():
    from driftloop.synth import evaluation_release

    return evaluation_release(seed=0)


def test_truth_inertial_periods_match_teos10(evaluation):
    gsw = pytest.importorskip("gsw")
    events = evaluation.events
    plain = evaluation.drifters.loc[evaluation.drifters["eddy_spin"].isna(), "drifter_id"]
    inertial = events[(events["kind"] == "inertial") & events["drifter_id"].isin(plain)]
    assert len(inertial) > 50
    # outside eddies the true period is 2 pi / |f| at the mean latitude (TEOS-10 gsw.f);
    # the latitude changes by well under a degree within an event, which moves
    # 2 pi / mean(f) from 2 pi / f(mean lat) by far less than 0.1 %
    expected_h = 2 * np.pi / np.abs(gsw.f(inertial["lat"].to_numpy())) / 3600
    np.testing.assert_allclose(inertial["period_h"].to_numpy(), expected_h, rtol=1e-3)
    f = np.abs(gsw.f(inertial["lat"].to_numpy()))
    np.testing.assert_allclose(inertial["radius_km"] * 1e3, inertial["speed_m_s"] / f,
                               rtol=1e-3)
    assert (inertial["speed_m_s"] >= 0.05).all() and (inertial["cycles"] >= 2).all()
    assert (inertial["spin"] == "anticyclonic").all()


def test_evaluation_release_is_at_sea_and_as_designed(evaluation):
    from driftloop.landmask import is_land

    truth, drifters, events = evaluation.truth, evaluation.drifters, evaluation.events
    # no true position on land (1-km GLOBE-derived mask), and none of the fixes
    assert not is_land(truth["lat_true"], truth["lon_true"]).any()
    assert not is_land(evaluation.fixes["lat"], evaluation.fixes["lon"]).any()
    assert len(drifters) == 40 and drifters["drifter_id"].is_unique
    assert set(drifters["hemisphere"]) == {"north", "south"}
    lat = truth.groupby("drifter_id")["lat_true"].agg(["min", "max"])
    assert (lat["max"] < 60).all() and (lat["min"] > -56).all()
    assert (lat.abs().min(axis=1) > 12).all()
    assert drifters["quiet"].sum() >= 5
    for hemisphere in ("north", "south"):
        spins = drifters.loc[drifters["hemisphere"] == hemisphere, "eddy_spin"].dropna()
        assert set(spins) == {"cyclonic", "anticyclonic"}
    assert drifters["days"].between(60, 90).all()
    # some 6-14 h gaps in the file, as real releases have
    steps_h = evaluation.fixes.groupby("drifter_id")["time"].apply(
        lambda s: s.diff().dt.total_seconds().max() / 3600)
    assert steps_h.between(6, 15).sum() >= 5
    # quiet drifters: no event of any kind and no slab motion
    quiet = set(evaluation.quiet_drifters)
    assert not events["drifter_id"].isin(quiet).any()
    calm = truth[truth["drifter_id"].isin(quiet)]
    assert np.hypot(calm["u_slab_m_s"], calm["v_slab_m_s"]).max() < 1e-9
    assert set(events["kind"]) == {"inertial", "eddy", "tidal"}
    assert (events["kind"] == "eddy").sum() == drifters["eddy_spin"].notna().sum()
    # tides well apart from the local inertial period everywhere along the tracks
    from driftloop.constants import TIDAL_PERIODS_H

    tidal = events[events["kind"] == "tidal"]
    assert set(tidal["constituent"]) >= {"M2", "K1"}
    for row in tidal.itertuples():
        t_i = 2 * np.pi / np.abs(coriolis_parameter(lat.loc[row.drifter_id].to_numpy())) / 3600
        assert np.all(np.abs(np.log(t_i / TIDAL_PERIODS_H[row.constituent])) > np.log(1.25))
    # fix_row points into the combined fixes table
    rows = truth.loc[truth["fix_row"] >= 0, "fix_row"].to_numpy()
    assert np.array_equal(rows, np.arange(len(evaluation.fixes)))


def test_evaluation_release_is_deterministic_for_a_seed(evaluation):
    from driftloop.synth import evaluation_release

    # one site with the same drifters comes out exactly as in the full release
    alone = evaluation_release(seed=0, n_drifters=5, sites=["SD"])
    part = evaluation.fixes[evaluation.fixes["drifter_id"].str.startswith("VEL-SD")]
    pd.testing.assert_frame_equal(alone.fixes, part.reset_index(drop=True))
    events = evaluation.events[evaluation.events["drifter_id"].str.startswith("VEL-SD")]
    pd.testing.assert_frame_equal(alone.events, events.reset_index(drop=True))
    other = evaluation_release(seed=1, n_drifters=5, sites=["SD"])
    assert not np.array_equal(other.fixes["lat"].to_numpy()[:100],
                              alone.fixes["lat"].to_numpy()[:100])
