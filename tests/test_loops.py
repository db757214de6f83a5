"""Loop events from resampled tracks, checked against inertial theory."""

import numpy as np
import pandas as pd
import pytest

from driftloop import geodesy
from driftloop.config import LoopConfig
from driftloop.constants import TIDAL_PERIODS_H
from driftloop.loops import EVENT_COLUMNS, classify, find_events, spin_name
from driftloop.physics import coriolis_parameter, inertial_period_s, inertial_radius_m
from driftloop.spectra import inertial_peak_check, rotary_spectra

HOUR = 3600.0
T0 = pd.Timestamp("2026-01-01T00:00:00Z")


def track_from_velocity(u, v, lat0, lon0, *, drifter="D1", segment=0, start=T0):
    """A resampled-track table whose positions integrate (u, v) hourly on WGS 84."""
    n = u.size
    lat = np.empty(n)
    lon = np.empty(n)
    lat[0], lon[0] = lat0, lon0
    for k in range(1, n):  # test helper; the library never loops per fix
        du, dv = (u[k - 1] + u[k]) / 2 * HOUR, (v[k - 1] + v[k]) / 2 * HOUR
        end = geodesy.forward(lon[k - 1], lat[k - 1], np.degrees(np.arctan2(du, dv)),
                              np.hypot(du, dv))
        lat[k], lon[k] = float(end.lat_deg), float(end.lon_deg)
    return pd.DataFrame({
        "drifter_id": pd.array([drifter] * n, dtype="string"),
        "segment": segment,
        "time": start + pd.to_timedelta(np.arange(n), unit="h"),
        "lat": lat, "lon": lon, "u": u, "v": v,
        "sigma_m": 10.0, "in_gap": False, "gap_h": 0.0,
    })


def inertial_track(lat0, speed=0.2, days=12, drift=(0.05, 0.02), **kw):
    """Free inertial oscillation Z = V exp(-i f t) plus a steady drift (f-plane)."""
    t = np.arange(int(days * 24)) * HOUR
    f = float(coriolis_parameter(lat0))
    z = speed * np.exp(-1j * f * t) + complex(*drift)
    return track_from_velocity(z.real, z.imag, lat0, -30.0, **kw)


def test_inertial_circle_is_an_inertial_event_with_theory_period_and_radius():
    lat0 = 45.0
    events = find_events(inertial_track(lat0)).events
    assert len(events) == 1
    event = events.iloc[0]
    # f-plane inertial circle: period pi / (Omega sin lat), radius V / |f| (physics.py,
    # checked against TEOS-10 gsw.f in test_physics.py)
    assert event["kind"] == "inertial"
    assert event["spin"] == "anticyclonic" and event["sense"] == "clockwise"
    assert event["period_h"] == pytest.approx(float(inertial_period_s(lat0)) / HOUR, rel=0.01)
    assert event["radius_km"] == pytest.approx(float(inertial_radius_m(0.2, lat0)) / 1e3,
                                               rel=0.03)
    # the position-based radius of a circle is the same radius (no RMS inflation)
    assert event["radius_fit_km"] == pytest.approx(float(inertial_radius_m(0.2, lat0)) / 1e3,
                                                   rel=0.03)
    assert event["period_ratio"] == pytest.approx(1.0, abs=0.02)
    assert 0.8 < event["radius_ratio"] < 1.2
    assert list(events.columns) == list(EVENT_COLUMNS)


def test_southern_hemisphere_inertial_motion_turns_anticlockwise():
    # AMS Glossary of Meteorology, "inertial oscillation": anticyclonic in both hemispheres
    events = find_events(inertial_track(-40.0)).events
    assert len(events) == 1
    assert events.iloc[0]["sense"] == "anticlockwise"
    assert events.iloc[0]["spin"] == "anticyclonic"
    assert events.iloc[0]["kind"] == "inertial"


def test_slow_cyclonic_loops_are_an_eddy_not_inertial():
    lat0, period_h, speed = 40.0, 96.0, 0.25
    t = np.arange(30 * 24) * HOUR
    sense = np.sign(lat0)  # cyclonic = same sense as the Earth's rotation
    z = speed * np.exp(1j * sense * 2 * np.pi * t / (period_h * HOUR))
    events = find_events(track_from_velocity(z.real, z.imag, lat0, -30.0)).events
    eddy = events[events["kind"] == "eddy"]
    assert len(eddy) == 1 and (events["kind"] != "inertial").all()
    assert eddy.iloc[0]["spin"] == "cyclonic"
    assert eddy.iloc[0]["period_h"] == pytest.approx(period_h, rel=0.02)
    radius_km = speed * period_h * HOUR / (2 * np.pi) / 1e3  # circle: R = V T / 2 pi
    assert eddy.iloc[0]["radius_km"] == pytest.approx(radius_km, rel=0.03)


def test_m2_tidal_circle_far_from_the_inertial_period_is_tidal():
    # At 45 N the inertial period (16.9 h) is far from M2 (12.42 h, NOAA CO-OPS speed)
    lat0, speed = 45.0, 0.15
    t = np.arange(20 * 24) * HOUR
    z = speed * np.exp(-2j * np.pi * t / (TIDAL_PERIODS_H["M2"] * HOUR))
    events = find_events(track_from_velocity(z.real, z.imag, lat0, -30.0)).events
    tidal = events[events["kind"] == "tidal"]
    assert len(tidal) == 1 and tidal.iloc[0]["tide"] == "M2"


def test_near_the_equator_nothing_is_inertial():
    # at 4.5 deg the inertial period is 6.4 days; the loops are found, but
    # f-plane inertial dynamics do not hold there, so they are not inertial
    catalogue = find_events(inertial_track(4.5, speed=0.3, days=60, drift=(0.05, 0.0)))
    events = catalogue.events
    assert len(events) >= 1
    assert (events["kind"] != "inertial").all()
    # the circle (26 km radius) is centred north of the start, hence not exactly 1
    assert (events["period_ratio"] - 1).abs().min() < 0.1
    assert any("equator" in note for note in catalogue.notes)


def test_a_segment_break_does_not_split_one_oscillation():
    lat0 = 45.0
    first = inertial_track(lat0, days=8, segment=0)
    f = float(coriolis_parameter(lat0))
    t = (np.arange(8 * 24) + 8 * 24 + 6) * HOUR  # resumes 6 h after the break
    z = 0.2 * np.exp(-1j * f * t) + complex(0.05, 0.02)
    second = track_from_velocity(z.real, z.imag, float(first["lat"].iloc[-1]),
                                 float(first["lon"].iloc[-1]), segment=1,
                                 start=T0 + pd.Timedelta(hours=8 * 24 + 6))
    events = find_events(pd.concat([first, second], ignore_index=True)).events
    inertial = events[events["kind"] == "inertial"]
    assert len(inertial) == 1 and inertial.iloc[0]["pieces"] == 2
    assert inertial.iloc[0]["duration_h"] > 13 * 24  # both segments less their cones


def test_classify_uses_the_configured_band():
    row = pd.DataFrame({"period_h": [16.9 * 1.2], "speed_m_s": [0.2], "radius_fit_km": [2.3],
                        "lat": [45.0], "_sense": [-1]})
    assert classify(row, LoopConfig()).iloc[0]["kind"] == "other"
    wide = LoopConfig(inertial_period_ratio_max=1.25)
    assert classify(row, wide).iloc[0]["kind"] == "inertial"


def test_spin_names():
    assert spin_name([-1, 1, -1, 1], [10.0, 10.0, -10.0, -10.0]).tolist() == [
        "anticyclonic", "cyclonic", "cyclonic", "anticyclonic"]


def test_noise_only_track_has_no_inertial_event():
    rng = np.random.default_rng(5)
    n = 20 * 24
    u = 0.05 + np.cumsum(rng.normal(0, 0.005, n))
    v = np.cumsum(rng.normal(0, 0.005, n))
    events = find_events(track_from_velocity(u, v, 45.0, -30.0)).events
    assert (events["kind"] != "inertial").all()


def test_rotary_spectrum_peaks_at_f_on_the_anticyclonic_side():
    track = inertial_track(45.0, days=30)
    spectra = rotary_spectra(track)
    check = inertial_peak_check(spectra, track)["D1"]
    assert check["checked"] and check["side"] == "clockwise" and check["within_tolerance"]
    f_cpd = abs(float(coriolis_parameter(track["lat"].mean()))) / (2 * np.pi) * 86400
    assert check["inertial_cpd"] == pytest.approx(f_cpd, rel=1e-3)
    mine = spectra.table[spectra.table["drifter_id"] == "D1"]
    near = mine.iloc[(mine["frequency_cpd"] - f_cpd).abs().argsort()[:1]]
    assert float(near["psd_clockwise"].iloc[0]) > 100 * float(near["psd_anticlockwise"].iloc[0])


@pytest.mark.parametrize("lat0", [45.0, -30.0])
def test_decay_time_of_ringing_that_starts_mid_record(lat0):
    # Free slab-layer ringing Z = A0 exp(-(r + i f)(t - t0)) after a storm at t0
    # (Pollard & Millard 1970, Deep-Sea Res. 17, from memory): the amplitude
    # e-folds in 1/r.  Before t0 the drifter only drifts, so the wavelet ramps
    # up across t0; the fit must not take that ramp for slow decay.
    efold_h, t0 = 48.0, 7.3 * 86400.0
    t = np.arange(30 * 24) * HOUR
    f = float(coriolis_parameter(lat0))
    ringing = 0.3 * np.exp(-(1.0 / (efold_h * HOUR) + 1j * f) * (t - t0))
    z = np.where(t >= t0, ringing, 0.0) + complex(0.05, 0.02)
    events = find_events(track_from_velocity(z.real, z.imag, lat0, -30.0)).events
    inertial = events[events["kind"] == "inertial"]
    assert len(inertial) == 1
    assert inertial.iloc[0]["decay_time_h"] == pytest.approx(efold_h, rel=0.10)
    assert inertial.iloc[0]["start"] >= T0 + pd.Timedelta(seconds=t0) - pd.Timedelta(hours=12)


def test_loops_slower_than_the_speed_threshold_are_no_event():
    # an inertial circle at 3 cm/s is below the default min_speed_m_s (5 cm/s)
    weak = inertial_track(45.0, speed=0.03)
    assert len(find_events(weak).events) == 0
    events = find_events(weak, LoopConfig(min_speed_m_s=0.02)).events
    assert events["kind"].tolist() == ["inertial"]
    assert events.iloc[0]["speed_m_s"] == pytest.approx(0.03, rel=0.02)


def test_ringing_inside_a_cyclonic_eddy_is_inertial_at_the_shifted_frequency():
    # Inside an eddy near-inertial motion turns at f_eff = f + zeta/2 (Kunze 1985,
    # J. Phys. Oceanogr. 15); a solid-body core turning at omega has zeta = 2 omega
    # (textbook kinematics), so f_eff = f + omega.  At 45 N in an 80-h cyclonic
    # eddy that is a 13.97-h period, 0.83 of T_i: outside the f-plane band alone.
    lat0 = 45.0
    f = float(coriolis_parameter(lat0))
    omega = 2 * np.pi / (80.0 * HOUR)
    t = np.arange(30 * 24) * HOUR
    z = 0.2 * np.exp(1j * omega * t) + 0.15 * np.exp(-1j * (f + omega) * t) + 0.05
    events = find_events(track_from_velocity(z.real, z.imag, lat0, -30.0)).events
    eddy = events[events["kind"] == "eddy"]
    inertial = events[events["kind"] == "inertial"]
    assert len(eddy) == 1 and eddy.iloc[0]["spin"] == "cyclonic"
    assert eddy.iloc[0]["period_h"] == pytest.approx(80.0, rel=0.02)
    assert len(inertial) == 1 and (events["kind"] == "other").sum() == 0
    expected_h = 2 * np.pi / (f + omega) / HOUR
    assert inertial.iloc[0]["period_h"] == pytest.approx(expected_h, rel=0.01)
    assert inertial.iloc[0]["period_ratio"] < LoopConfig().inertial_period_ratio_min
    # the same ringing without the eddy is too fast to be inertial
    z_alone = 0.15 * np.exp(-1j * (f + omega) * t) + 0.05
    alone = find_events(track_from_velocity(z_alone.real, z_alone.imag, lat0, -30.0)).events
    assert (alone["kind"] != "inertial").all()


def test_each_segment_is_tested_at_its_own_mean_latitude(monkeypatch):
    # the significance test leaves out the inertial band of the segment's latitude
    # (f = 2 Omega sin lat, Gill 1982), so the ridge stage gets the segment's mean latitude
    import driftloop.loops as loops_module

    seen = []
    real = loops_module.detect

    def spy(z, dt_s, config=None, **kw):
        seen.append(kw.get("latitude"))
        return real(z, dt_s, config, **kw)

    monkeypatch.setattr(loops_module, "detect", spy)
    a = inertial_track(40.0, days=6, segment=0)
    b = inertial_track(-20.0, days=6, segment=1, start=T0 + pd.Timedelta(days=7))
    find_events(pd.concat([a, b], ignore_index=True))
    assert seen == pytest.approx([a["lat"].mean(), b["lat"].mean()])
