"""Wavelet ridges: points, chaining, estimates, ellipses and summaries (driftloop.ridges)."""

import math

import numpy as np
import pytest

from driftloop.constants import EARTH_ROTATION_RATE_RAD_S
from driftloop.ridges import detect, find_ridges, ridge_table
from driftloop.synth import ReleaseScenario, coriolis_parameter, simulate_release
from driftloop.wavelet import WaveletConfig, rotary_transform

HOUR = 3600.0
DAY = 86400.0


def circle(n, period_h, speed, sense=1, phase=0.3):
    t = np.arange(n) * HOUR
    return speed * np.exp(1j * (sense * 2 * np.pi * t / (period_h * HOUR) + phase))


def only(ridges):
    assert len(ridges) == 1, [r.summary() for r in ridges]
    return ridges[0]


@pytest.mark.parametrize(("sense", "period_h", "speed"), [(-1, 16.924, 0.3), (1, 37.5, 0.12),
                                                          (-1, 5.3, 0.2)])
def test_circle_period_and_radius(sense, period_h, speed):
    # exact circle z = V exp(+-i omega t): period 2 pi/omega, radius V/omega
    # (Gonella 1972 sense convention; METHODS sect. 1 inertial radius |V/f|)
    r = only(detect(circle(2400, period_h, speed, sense), HOUR).ridges)
    assert r.sense == sense
    assert np.all(np.sign(r.frequency_rad_s) == sense)
    assert r.mean_period_s / HOUR == pytest.approx(period_h, rel=0.005)
    radius = speed / (2 * np.pi / (period_h * HOUR))
    assert r.mean_radius_m == pytest.approx(radius, rel=0.01)
    assert np.all(np.abs(r.radius_m / radius - 1) < 0.01)
    assert r.mean_amplitude_m_s == pytest.approx(speed, rel=0.01)
    # the phase-derivative and scale frequencies agree
    assert np.allclose(r.scale_frequency_rad_s, r.frequency_rad_s, rtol=0.01)
    # nearly the whole interior is one ridge
    assert r.n_cycles > 0.8 * 2400 / period_h - 6 * 3.5 / np.pi


def test_chirp_is_tracked_along_its_frequency():
    # Delprat et al. 1992: the ridge follows the instantaneous frequency of a slowly
    # modulated oscillation; here omega(t) doubles linearly over 60 days
    n = 1440
    t = np.arange(n) * HOUR
    w0 = 2 * np.pi / (30 * HOUR)
    rate = w0 / (n * HOUR)
    z = 0.2 * np.exp(-1j * (w0 * t + 0.5 * rate * t ** 2))
    r = only(detect(z, HOUR).ridges)
    true = -(w0 + rate * t[r.index])
    assert r.sense == -1
    assert np.max(np.abs(r.frequency_rad_s / true - 1)) < 0.01
    assert r.duration_s > 0.7 * n * HOUR
    # frequency modulation biases the amplitude at order P^2 omega'/(2 omega^2); the
    # corrected amplitude is within 0.2 % of the truth, 1 % at the cone's edge
    err = np.abs(r.amplitude_m_s / 0.2 - 1)
    assert np.median(err) < 0.002
    assert np.max(err) < 0.012


def test_damped_inertial_oscillation_decay_rate():
    # slab-model free decay Z = Z0 exp(-(r + i f) t) (Pollard & Millard 1970 form)
    f = coriolis_parameter(40.0)
    rate = 1.0 / (3.0 * DAY)
    n = 720
    t = np.arange(n) * HOUR
    z = 0.4 * np.exp(-(rate + 1j * float(f)) * t)
    r = only(detect(z, HOUR).ridges)
    assert r.sense == -1
    assert r.decay_rate_per_s == pytest.approx(rate, rel=0.05)
    assert r.mean_period_s == pytest.approx(2 * np.pi / abs(f), rel=0.005)
    truth = 0.4 * np.exp(-rate * t[r.index])
    # bias correction (Lilly & Olhede 2010 form, derived): P^2 r^2/(2 f^2) = 0.9 % here;
    # near the cone's edge the edge error (at most 1 %) remains
    err = np.abs(r.amplitude_m_s / truth - 1)
    assert np.median(err) < 0.002
    assert np.max(err) < 0.012
    raw = only(detect(z, HOUR, WaveletConfig(bias_correction=False)).ridges)
    assert np.median(raw.amplitude_m_s / truth) == pytest.approx(
        1 + 12 * rate ** 2 / (2 * float(f) ** 2), rel=0.002)


def test_ellipse_axes_and_orientation_recovered():
    # Lilly & Gascard 2006: z = exp(i theta) (a cos phi + i b sin phi)
    a, b, theta = 0.3, -0.12, 0.6
    n = 2000
    omega = 2 * np.pi / (20.0 * HOUR)
    phi = omega * np.arange(n) * HOUR + 1.0
    z = np.exp(1j * theta) * (a * np.cos(phi) + 1j * b * np.sin(phi))
    r = only(detect(z, HOUR).ridges)
    assert r.sense == -1  # b < 0: clockwise
    assert np.allclose(r.semi_major_m_s, a, rtol=0.01)
    assert np.allclose(r.semi_minor_m_s, b, rtol=0.01)
    assert np.allclose(np.angle(np.exp(2j * (r.orientation_rad - theta))) / 2, 0, atol=0.01)
    assert np.allclose(r.semi_major_m, a / omega, rtol=0.01)
    assert np.allclose(r.semi_minor_m, b / omega, rtol=0.01)
    # the other-sense value at the ridge scale is the weaker rotary component
    assert np.allclose(r.amplitude_ccw_m_s, (a + b) / 2, rtol=0.01)


def test_cone_of_influence_stops_edge_ridges():
    # oscillations that live only within the cone at the ends give no ridge points there
    n = 1200
    z = circle(n, 20.0, 0.3, -1)
    t = np.arange(n)
    z = z * ((t < 60) | (t > n - 60))
    tr = rotary_transform(z, HOUR)
    ridges = find_ridges(tr)
    j = int(np.argmin(np.abs(tr.periods_s / HOUR - 20.0)))
    for r in ridges:
        period_index = np.interp(np.abs(r.scale_frequency_rad_s), tr.scale_frequency_rad_s[::-1],
                                 np.arange(len(tr.periods_s))[::-1])
        coi = np.interp(period_index, np.arange(len(tr.coi)), tr.coi)
        assert np.all(r.index >= np.floor(coi)) and np.all(r.index <= n - 1 - np.floor(coi))
    assert not any(r.start < tr.coi[j] + 5 and abs(r.mean_period_s / HOUR - 20) < 2
                   for r in ridges)
    # without the mask the same edges do make ridges
    open_cone = find_ridges(rotary_transform(z, HOUR, WaveletConfig(coi_factor=0.0)))
    assert any(r.start < 30 for r in open_cone)


def test_float32_gives_the_same_ridges():
    rng = np.random.default_rng(11)
    n = 1500
    z = circle(n, 16.9, 0.25, -1) * np.exp(-np.arange(n) / 600) + circle(n, 60.0, 0.1, 1)
    z = z + 0.03 * (rng.standard_normal(n) + 1j * rng.standard_normal(n))
    a = detect(z, HOUR).ridges
    b = detect(z, HOUR, WaveletConfig(dtype="float32")).ridges
    assert len(a) == len(b) >= 2
    for ra, rb in zip(a, b, strict=True):
        assert (ra.sense, ra.start, ra.end) == (rb.sense, rb.start, rb.end)
        assert np.allclose(ra.frequency_rad_s, rb.frequency_rad_s, rtol=1e-4)
        assert np.allclose(ra.amplitude_m_s, rb.amplitude_m_s, rtol=1e-4)


def test_synthetic_slab_inertial_event():
    # free inertial motion of the slab model in driftloop.synth at 45 N, no vorticity:
    # period 2 pi/|f|, f = 2 Omega sin(lat), Omega = 7.2921150e-5 rad/s (WGS 84)
    sc = ReleaseScenario(
        name="inertial", drifter_ids=("A",), deploy_lat_deg=(45.0,), deploy_lon_deg=(-30.0,),
        duration_days=12.0, spinup_days=0.0, drift_east_m_s=0.05, drift_north_m_s=0.0,
        meander_speed_m_s=0.0, initial_slab_speed_m_s=0.3, damping_time_days=4.0,
        background_wind_m_s=0.0, storm_mean_interval_days=math.inf, fix_jitter_min=0.0,
        fix_loss_probability=0.0, gps_noise_m=0.0)
    truth = simulate_release(sc, seed=1).truth
    assert np.all(np.diff(truth["time"].to_numpy()).astype("timedelta64[s]").astype(int) == 3600)
    u = truth["u_mean_m_s"] + truth["u_slab_m_s"] + truth["u_eddy_m_s"]
    v = truth["v_mean_m_s"] + truth["v_slab_m_s"] + truth["v_eddy_m_s"]
    z = u.to_numpy() + 1j * v.to_numpy()
    lat = float(truth["lat_true"].mean())
    assert EARTH_ROTATION_RATE_RAD_S == 7.2921150e-5
    f = 2 * 7.2921150e-5 * math.sin(math.radians(lat))
    assert float(coriolis_parameter(lat)) == pytest.approx(f, rel=1e-12)
    r = only(detect(z, HOUR).ridges)
    assert r.sense == -1  # anticyclonic: clockwise in the north
    assert r.mean_period_s == pytest.approx(2 * np.pi / abs(f), rel=0.01)
    assert r.decay_rate_per_s == pytest.approx(1 / (4 * DAY), rel=0.05)


def test_summary_table():
    ridges = detect(circle(1000, 12.0, 0.2, 1) + circle(1000, 40.0, 0.1, -1), HOUR).ridges
    table = ridge_table(ridges)
    assert list(table["sense"]) == [r.sense_name for r in ridges]
    assert set(table["sense"]) == {"ccw", "cw"}
    assert list(table.columns[:8]) == ["sense", "start", "end", "n_cycles", "mean_period_s",
                                       "mean_amplitude_m_s", "mean_radius_m",
                                       "decay_rate_per_s"]
    assert np.all(table["n_cycles"] >= 2.0)
    assert np.all(table["statistic"] >= table["threshold"])


def test_no_ridges_in_silence_or_below_the_floor():
    assert detect(np.zeros(800, complex), HOUR).ridges == []
    assert detect(circle(800, 15.0, 0.005), HOUR).ridges == []
    assert detect(circle(20, 5.0, 0.3), HOUR).ridges == []


@pytest.mark.parametrize("dtype", ["float64", "float32"])
def test_detect_searching_block_by_block_equals_the_stored_transform_path(dtype):
    # detect finds ridge points while the transform is computed in blocks of scales;
    # the documented equivalent is rotary_transform followed by find_ridges (same
    # arithmetic, so the ridges must be identical, not merely close)
    rng = np.random.default_rng(5)
    n = 2000
    z = circle(n, 16.9, 0.2, -1) * np.exp(-np.arange(n) / 500) + circle(n, 12.42, 0.05, 1)
    z = z + 0.03 * (rng.standard_normal(n) + 1j * rng.standard_normal(n))
    config = WaveletConfig(dtype=dtype)
    fused = detect(z, HOUR, config)
    stored = find_ridges(rotary_transform(z, HOUR, config), config)
    kept = detect(z, HOUR, config, keep_transform=True)
    assert len(fused.ridges) == len(stored) == len(kept.ridges) >= 2
    for a, b, c in zip(fused.ridges, stored, kept.ridges, strict=True):
        for name in ("index", "frequency_rad_s", "amplitude_m_s", "phase_rad",
                     "amplitude_ccw_m_s", "amplitude_cw_m_s", "snr"):
            assert np.array_equal(getattr(a, name), getattr(b, name)), name
            assert np.array_equal(getattr(a, name), getattr(c, name)), name
        assert (a.sense, a.statistic, a.threshold) == (b.sense, b.statistic, b.threshold)
    tr = rotary_transform(z, HOUR, config)
    assert np.array_equal(kept.transform.w_ccw, tr.w_ccw)
    assert np.array_equal(kept.transform.w_cw, tr.w_cw)


def test_without_a_latitude_nothing_is_left_out_of_the_background():
    # omitting the latitude keeps the test of the plain background fit (Lilly &
    # Perez-Brunius 2021 style); giving one leaves the inertial band out, which lowers
    # the noise level at f under decaying inertial ringing and raises its statistic
    rng = np.random.default_rng(3)
    n, lat = 2000, 45.0
    f = 2 * EARTH_ROTATION_RATE_RAD_S * math.sin(math.radians(lat))
    t = np.arange(n) * 3600.0
    z = 0.02 * (rng.standard_normal(n) + 1j * rng.standard_normal(n))
    for start in range(100, n - 300, 350):
        age = np.clip(t - start * 3600.0, 0, None)
        z = z + (t >= start * 3600.0) * 0.08 * np.exp(-age / 259200.0 - 1j * f * age)
    plain, same = detect(z, 3600.0), detect(z, 3600.0, latitude=None)
    assert [r.statistic for r in plain.ridges] == [r.statistic for r in same.ridges]
    assert np.array_equal(plain.background.log_density, same.background.log_density)
    left = detect(z, 3600.0, latitude=lat)
    w = np.array([-f])
    assert left.background.density(w)[0] < plain.background.density(w)[0]
