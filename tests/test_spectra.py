"""Rotary spectra and the inertial peak check of driftloop.spectra.

References for the checks:

- the Welch estimate of each segment is ``scipy.signal.welch`` (reference
  library) with the parameters the module docstring names (Hann window,
  50 % overlap, mean removed per window, two-sided density); a drifter's
  spectrum averages the windows of its segments and the release spectrum
  all windows (module docstring), computed here segment by segment;
- rotary components (Gonella 1972, Deep-Sea Res. 19, 833-846): an
  anticlockwise circle z = A exp(i w t) puts its power at +w, a clockwise
  one at -w; free inertial motion turns clockwise in the northern
  hemisphere at |f| = 2 Omega sin(lat) (common knowledge).
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from scipy import signal

from driftloop import spectra
from driftloop.physics import coriolis_parameter

DT = 3600.0
DAY = 86400.0


def _segment(drifter, segment, start, hours, lat, z_of_t):
    t = np.arange(hours) * DT
    z = z_of_t(t)
    return pd.DataFrame({
        "drifter_id": drifter, "segment": segment,
        "time": pd.date_range(start, periods=hours, freq="h", tz="UTC"),
        "lat": np.full(hours, lat), "lon": np.full(hours, -20.0), "u": z.real, "v": z.imag,
    })


def _inertial(lat, amplitude, rng):
    f = float(coriolis_parameter(lat))
    return lambda t: (0.05 + amplitude * np.exp(-1j * f * t)
                      + rng.normal(0.0, 0.02, t.size) + 1j * rng.normal(0.0, 0.02, t.size))


@pytest.fixture(scope="module")
def track():
    rng = np.random.default_rng(40)
    parts = [
        _segment("N-1", 0, "2024-05-01", 24 * 25, 40.0, _inertial(40.0, 0.2, rng)),
        _segment("N-1", 3, "2024-06-01", 24 * 12, 41.0, _inertial(41.0, 0.1, rng)),
        _segment("N-1", 1, "2024-05-28", 24 * 3, 40.5, _inertial(40.5, 0.1, rng)),  # too short
        _segment("E-0", 0, "2024-05-01", 24 * 30, 1.0, _inertial(1.0, 0.0, rng)),
        _segment("S-2", 0, "2024-05-01", 24 * 21, -35.0, _inertial(-35.0, 0.2, rng)),
        _segment("X-9", 0, "2024-05-01", 24 * 8, 50.0, _inertial(50.0, 0.2, rng)),
    ]
    # segments (each in time order, as resampled tracks are) in no particular order
    table = pd.concat([parts[i] for i in rng.permutation(len(parts))], ignore_index=True)
    table["drifter_id"] = table["drifter_id"].astype("string")
    table["segment"] = table["segment"].astype(np.int32)
    return table


def _welch_by_segment(group, window_days=10.0):
    """Window-weighted Welch spectrum of a drifter's segments, and the window count."""
    total, windows, freq = None, 0, None
    for _, seg in group.groupby("segment"):
        nperseg = int(round(window_days * DAY / DT))
        if len(seg) < nperseg:
            continue
        z = seg["u"].to_numpy() + 1j * seg["v"].to_numpy()
        freq, psd = signal.welch(z, fs=1.0 / DT, window="hann", nperseg=nperseg,
                                 noverlap=nperseg // 2, detrend="constant",
                                 return_onesided=False, scaling="density")
        n = 1 + (z.size - nperseg) // (nperseg - nperseg // 2)
        total = psd * n if total is None else total + psd * n
        windows += n
    return freq, total, windows


def test_drifter_spectra_are_welch_spectra_averaged_over_windows(track):
    result = spectra.rotary_spectra(track)
    table = result.table
    assert list(table.columns) == ["drifter_id", "frequency_cpd", "psd_anticlockwise",
                                   "psd_clockwise", "windows"]
    assert table["drifter_id"].drop_duplicates().tolist() == ["E-0", "N-1", "S-2", "(release)"]
    release_sum, release_windows = 0.0, 0
    for drifter in ("E-0", "N-1", "S-2"):
        freq, total, windows = _welch_by_segment(track[track["drifter_id"] == drifter])
        psd = total / windows
        rows = table[table["drifter_id"] == drifter]
        positive = np.sort(freq[freq > 0])
        np.testing.assert_allclose(rows["frequency_cpd"], positive * DAY, rtol=1e-12)
        at = {round(float(f), 12): i for i, f in enumerate(freq)}
        ccw = np.array([psd[at[round(float(f), 12)]] for f in positive])
        cw = np.array([psd[at[round(float(-f), 12)]] for f in positive])
        np.testing.assert_allclose(rows["psd_anticlockwise"], ccw / DAY, rtol=1e-12)
        np.testing.assert_allclose(rows["psd_clockwise"], cw / DAY, rtol=1e-12)
        assert (rows["windows"] == windows).all()
        release_sum = release_sum + np.stack([ccw, cw]) * windows
        release_windows += windows
    release = table[table["drifter_id"] == "(release)"]
    np.testing.assert_allclose(release["psd_anticlockwise"],
                               release_sum[0] / release_windows / DAY, rtol=1e-12)
    np.testing.assert_allclose(release["psd_clockwise"],
                               release_sum[1] / release_windows / DAY, rtol=1e-12)
    assert (release["windows"] == release_windows).all()
    # N-1: two 10-day-window segments (25 days: 4 windows, 12 days: 1), the 3-day one left out
    assert int(table.loc[table["drifter_id"] == "N-1", "windows"].iloc[0]) == 5


def test_rotary_sides_follow_the_sense_of_rotation():
    w = 2 * np.pi / (0.5 * DAY)
    ccw = _segment("A", 0, "2024-01-01", 24 * 20, 30.0, lambda t: 0.2 * np.exp(1j * w * t))
    cw = _segment("C", 0, "2024-01-01", 24 * 20, 30.0, lambda t: 0.2 * np.exp(-1j * w * t))
    table = spectra.rotary_spectra(pd.concat([ccw, cw], ignore_index=True)).table
    for drifter, side, other in (("A", "psd_anticlockwise", "psd_clockwise"),
                                 ("C", "psd_clockwise", "psd_anticlockwise")):
        rows = table[table["drifter_id"] == drifter]
        peak = rows["frequency_cpd"].to_numpy()[np.argmax(rows[side].to_numpy())]
        assert peak == pytest.approx(2.0, rel=0.06)  # 0.5-day period, 0.1 cpd resolution
        assert rows[side].max() > 1e3 * rows[other].max()


def test_accumulator_gives_the_table_of_the_whole_track(track):
    acc = spectra.SpectraAccumulator()
    rows = []
    for drifter, group in track.groupby("drifter_id", sort=True):
        rows.append(acc.drifter_rows(str(drifter), group))
        acc.add_rows(rows[-1])
    assert rows[3] is None  # 8 days, shorter than a window
    whole = spectra.rotary_spectra(track).table
    pd.testing.assert_frame_equal(acc.table().table, whole, check_exact=True)
    # a drifter table built by hand from the rows, as documented
    expected = pd.concat([r.loc[:, list(whole.columns)] for r in rows if r is not None],
                         ignore_index=True)
    pd.testing.assert_frame_equal(whole[whole["drifter_id"] != "(release)"], expected,
                                  check_exact=True)
    assert spectra.SpectraAccumulator().table().table.empty


def test_inertial_peak_check_per_drifter(track):
    result = spectra.rotary_spectra(track)
    check = spectra.inertial_peak_check(result, track)
    assert sorted(check) == ["E-0", "N-1", "S-2", "X-9"]
    assert check["E-0"] == {"checked": False,
                            "reason": "fewer than 10 days poleward of 5 deg"}
    assert check["X-9"] == {"checked": False,
                            "reason": "fewer than 10 days poleward of 5 deg"}
    north, south = check["N-1"], check["S-2"]
    assert north["checked"] and north["side"] == "clockwise" and north["within_tolerance"]
    assert south["checked"] and south["side"] == "anticlockwise" and south["within_tolerance"]
    lat_n = track.loc[track["drifter_id"] == "N-1", "lat"].mean()
    f_cpd = abs(float(coriolis_parameter(lat_n))) / (2 * np.pi) * DAY
    assert north["inertial_cpd"] == pytest.approx(f_cpd, rel=1e-12)
    assert north["peak_cpd"] == pytest.approx(f_cpd, rel=0.1)
    # a drifter long enough poleward but without a spectrum row
    alone = track[track["drifter_id"] == "N-1"]
    check = spectra.inertial_peak_check(spectra.rotary_spectra(alone.iloc[:0]), alone)
    assert check["N-1"] == {"checked": False, "reason": "no segment long enough for a spectrum"}
