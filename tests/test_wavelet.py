"""Generalized Morse wavelets and the rotary transform (driftloop.wavelet)."""

import math

import numpy as np
import pytest

from driftloop.errors import ConfigError
from driftloop.wavelet import (
    WaveletConfig,
    coi_factor,
    morse_peak_frequency,
    morse_wavelet,
    rotary_transform,
    transform_periods_samples,
    wavelet_table,
)

HOUR = 3600.0


def circle(n, period_h, speed, sense=1, phase=0.3):
    t = np.arange(n) * HOUR
    return speed * np.exp(1j * (sense * 2 * np.pi * t / (period_h * HOUR) + phase))


@pytest.mark.parametrize(("beta", "gamma"), [(4.0, 3.0), (2.0, 3.0), (8.0, 2.0), (3.0, 1.5)])
def test_peak_frequency_and_value(beta, gamma):
    # Olhede & Walden 2002: peak at (beta/gamma)^(1/gamma); normalisation Psi(peak) = 2
    # (a = 2 (e gamma / beta)^(beta/gamma), derived)
    w = np.linspace(1e-4, 6.0, 600001)
    psi = morse_wavelet(w, beta, gamma)
    assert w[np.argmax(psi)] == pytest.approx(morse_peak_frequency(beta, gamma), abs=2e-5)
    assert psi.max() == pytest.approx(2.0, rel=1e-9)
    assert np.all(morse_wavelet(np.array([-2.0, -0.1, 0.0]), beta, gamma) == 0.0)


def test_time_domain_wavelet_is_analytic_with_predicted_envelope():
    # Lilly & Olhede 2009: the time-domain Morse wavelet is analytic (no negative
    # frequencies); its envelope s.d. is about P / omega (Gaussian approximation, derived)
    cfg = WaveletConfig()
    n = 4096
    periods = transform_periods_samples(n, cfg)
    table = wavelet_table(n, periods, cfg)
    j = 40
    spec = np.zeros(n)
    spec[1: 1 + table.shape[1]] = table[j]
    psi = np.fft.fftshift(np.fft.ifft(spec))
    back = np.fft.fft(np.fft.ifftshift(psi))
    negative = np.abs(back[n // 2 + 1:])
    assert negative.max() < 1e-12 * np.abs(back).max()
    t = np.arange(n) - n // 2
    env = np.abs(psi) ** 2
    sd = math.sqrt(np.sum(env * t ** 2) / np.sum(env))
    omega = 2 * np.pi / periods[j]
    # |psi|^2 has s.d. P / (omega sqrt 2) when |psi| has P / omega
    assert sd == pytest.approx(cfg.duration / omega / math.sqrt(2), rel=0.05)


@pytest.mark.parametrize("sense", [1, -1])
def test_each_rotary_sense_appears_only_in_its_own_transform(sense):
    # Gonella 1972: omega > 0 counter-clockwise (W[z]), omega < 0 clockwise (W[conj z])
    z = circle(1500, 16.9, 0.3, sense)
    tr = rotary_transform(z, HOUR)
    inside = tr.outside_coi()
    own, other = (tr.w_ccw, tr.w_cw) if sense > 0 else (tr.w_cw, tr.w_ccw)
    assert np.abs(own[inside]).max() == pytest.approx(0.3, rel=0.01)
    # edge leakage through the cone boundary stays at the percent level
    assert np.abs(other[inside]).max() < 0.02 * 0.3
    # far from the edges the other sense is essentially zero (what is left comes
    # from the ringing of the shortest scales, whose wavelet the Nyquist frequency cuts)
    mid = slice(600, 900)
    assert np.abs(other[:, mid]).max() < 2e-4 * 0.3
    far = tr.coi < 300  # scales whose wavelet does not reach the ends from the middle
    assert np.abs(other[12:][far[12:]][:, mid]).max() < 1e-6 * 0.3


def test_circle_amplitude_equals_speed_on_its_ridge():
    # normalisation (derived): |W+| = V for z = V exp(i omega t), at the peak scale
    v = 0.27
    tr = rotary_transform(circle(2000, 20.0, v), HOUR)
    col = np.abs(tr.w_ccw[:, 1000])
    j = int(np.argmax(col))
    # the grid maximum is within half a grid step (1/24 octave) of the peak
    assert col[j] == pytest.approx(v, rel=6e-3)
    assert tr.periods_s[j] / HOUR == pytest.approx(20.0, rel=0.03)


def test_period_grid_and_cone_of_influence():
    cfg = WaveletConfig()
    n = 2880
    periods = transform_periods_samples(n, cfg)
    assert periods[0] == 2.5
    assert np.allclose(np.diff(np.log2(periods)), 1 / cfg.periods_per_octave)
    assert len(periods) >= 50
    tr = rotary_transform(np.zeros(n, complex), HOUR, cfg)
    # the longest period still leaves min_cycles cycles outside the cone
    interior = n - 2 * tr.coi[-1]
    assert interior >= cfg.min_cycles * periods[-1] - 2
    assert np.all(np.diff(tr.coi) >= 0)
    assert tr.n_fft >= n + tr.coi[-1]


def test_coi_factor_bounds_the_edge_error():
    # derived bound: at k P / omega from the end, a tone's ridge amplitude is off by <= 1 %
    cfg = WaveletConfig()
    k = coi_factor(cfg.beta, cfg.gamma, cfg.coi_edge_error)
    assert 2.0 < k < 2.6  # near the one-sided 1 % point of a Gaussian, 2.33
    v = 0.2
    tr = rotary_transform(circle(3000, 30.0, v), HOUR, cfg)
    j = int(np.argmin(np.abs(tr.periods_s / HOUR - 30.0)))
    peak = np.abs(tr.w_ccw[j, 1500])
    at_edge = np.abs(tr.w_ccw[j, tr.coi[j]])
    assert abs(at_edge / peak - 1.0) <= cfg.coi_edge_error * 1.05
    # and the error is larger inside the cone
    inside = np.abs(tr.w_ccw[j, tr.coi[j] // 3])
    assert abs(inside / peak - 1.0) > 3 * cfg.coi_edge_error


def test_float32_transform_matches_float64():
    rng = np.random.default_rng(3)
    z = circle(1000, 14.0, 0.2, -1) + 0.05 * (rng.standard_normal(1000)
                                              + 1j * rng.standard_normal(1000))
    a = rotary_transform(z, HOUR, WaveletConfig())
    b = rotary_transform(z, HOUR, WaveletConfig(dtype="float32"))
    assert b.w_cw.dtype == np.complex64
    scale = np.abs(a.w_cw).max()
    assert np.abs(a.w_cw - b.w_cw).max() < 1e-5 * scale
    assert np.abs(a.w_ccw - b.w_ccw).max() < 1e-5 * scale


def test_mean_drift_is_invisible_inside_the_cone():
    # Psi(0) = 0: a constant drift adds nothing away from the ends
    z = circle(1200, 12.0, 0.1)
    a = rotary_transform(z, HOUR)
    b = rotary_transform(z + (0.3 - 0.2j), HOUR)
    inside = a.outside_coi()
    assert np.abs(a.w_ccw - b.w_ccw)[inside].max() < 1e-12


def test_periodogram_sums_to_variance():
    rng = np.random.default_rng(0)
    z = rng.standard_normal(777) + 1j * rng.standard_normal(777)
    tr = rotary_transform(z, 600.0)
    total = tr.spectrum.sum() * (2 * np.pi / (tr.n_fft * 600.0)) / (2 * np.pi)
    assert total == pytest.approx(np.mean(np.abs(z - z.mean()) ** 2), rel=0.01)


def test_short_segment_gives_an_empty_transform():
    tr = rotary_transform(circle(10, 5.0, 0.1), HOUR)
    assert tr.w_ccw.shape == (0, 10)


def test_bad_input_is_refused():
    with pytest.raises(ValueError, match="one-dimensional"):
        rotary_transform(np.zeros((3, 50), complex), HOUR)
    with pytest.raises(ValueError, match="finite"):
        rotary_transform(np.array([0, np.nan, 1, 2] * 20, dtype=complex), HOUR)
    with pytest.raises(ValueError, match="dt_s"):
        rotary_transform(np.zeros(100, complex), 0.0)
    with pytest.raises(ConfigError, match="wavelet.min_period_samples"):
        WaveletConfig(min_period_samples=2.0)
