"""Is a ridge more than background noise?  Background fit, noise levels, calibration.

A ridge is kept only if a ridge at least as strong and long is rare in
Gaussian noise that has the segment's own smooth background spectrum, in
the spirit of Lilly & Perez-Brunius (2021), who compare ridges of each
trajectory with those of a matched stochastic surrogate.  Here the
comparison is done analytically per scale and by a single simulation that
is the same for every segment.

Method
------
1. **Background spectrum.**  :func:`fit_background` fits, for each rotary
   sense separately, a smooth red spectrum to the segment's rotary
   periodogram S(omega) (mean removed; +omega counter-clockwise, -omega
   clockwise; Gonella 1972): the periodogram is averaged in quarter-octave
   bins of |omega| from two cycles per record to the Nyquist frequency, and
   ln S is fitted by penalised weighted least squares with a function that is
   piecewise linear in ln |omega| between knots one octave apart (power
   laws, a Matern-like low-frequency flattening and a high-frequency noise
   floor all fit).  The bin average of m independent exponential
   periodogram values has E[ln] = ln S + digamma(m) - ln m and Var[ln] =
   trigamma(m) (*derived*); the fit removes the bias and weights by the
   variance.  Peaks are excluded iteratively: bins more than three standard
   deviations above the fit are dropped and the fit repeated.  The fit is
   held constant beyond its first and last knot.  Given the segment's
   latitude, bands around the inertial frequency (0.67-1.5 |f|, both senses:
   near-inertial frequencies are shifted by vorticity, Kunze 1985, and
   decaying ringing has broad skirts) and the M2, S2, K1 and O1 tides
   (:func:`excluded_bands`) are left out of the fit, and the background
   across them is the straight line in log-log space between the band edges.

2. **Noise level per scale** (*derived*).  For Gaussian noise with spectral
   density S the rotary transform W+(t, s) = W[z]/2 is a sum of Fourier
   coefficients at positive frequencies only, hence circular complex
   Gaussian even if u and v have different variances (terms pairing
   +omega with -omega vanish), so |W+|^2 is exponential (chi-square with two
   degrees of freedom, scaled) with mean

       sigma_+^2(s) = (1/4) integral_0^pi/dt S(+omega) Psi(s omega)^2 d omega / 2 pi,

   and the same with S(-omega) for W-.  :func:`noise_variance` evaluates the
   integral on the FFT grid of the transform.

3. **Ridge statistic.**  Ridge points must reach |W| >= ``min_point_snr``
   sigma.  Each chained ridge gets E = sum snr^2 dt / T (T the refined scale
   period), the noise-normalised power integrated over its length in
   cycles: a steady oscillation of power ratio q over L cycles has E = q L.

4. **Calibration.**  In units of cycles and ln-scale the normalised noise
   W / sigma is nearly the same at every scale, so the duration of noise
   ridges with E >= c per unit time and unit ln-scale is a function D(c) of
   the threshold.  :func:`calibrate` measures it once by simulation:
   records of complex white and AR(1) red Gaussian noise (``CALIBRATION_AR``,
   fixed seed) go through exactly the same steps, including the background
   fit.  D is kept per period band (the first two octaves above
   ``min_period_samples``, where the Nyquist frequency cuts the wavelet, and
   all longer periods).  For a segment of analysed area A (both senses, the
   scales that can hold ridge points, each weighted by its unmasked fraction
   of the record, times the ln-scale spacing; :func:`analysed_area`) the
   expected fraction of its duration covered by false ridges is sum over
   bands of D_b(c_b) A_b; :func:`statistic_threshold` sets every band to the
   density ``false_positive_rate`` / A, taking the largest threshold any of
   the noise processes needs.  D is fitted as exponential in c over its
   upper tail.  The calibration takes about a second per distinct set of
   wavelet and ridge parameters; it is kept for the process and stored in
   the driftloop cache folder (:func:`driftloop.landmask.cache_dir`) under a
   name made from those parameters, the calibration constants, the source
   of the wavelet, ridge and significance modules and the NumPy and SciPy
   versions, so that a change to any of them simulates afresh.
   ``tests/test_significance.py`` checks the resulting rate on white and
   red noise.  With bands left out the calibration leaves out the same bands
   (in rad per sample) and keeps ridges near them (mean period within
   ``EXCLUDED_MARGIN`` of a band) as a band of their own, so the budget holds
   there too.

References
----------
Gonella, J., 1972: A rotary-component method for analysing meteorological
and oceanographic vector time series.  Deep-Sea Res., 19, 833-846.

Kunze, E., 1985: Near-inertial wave propagation in geostrophic shear.
J. Phys. Oceanogr., 15, 544-565 (from memory).

Lilly, J. M., and P. Perez-Brunius, 2021: Extracting statistically
significant eddy signals from large Lagrangian datasets using wavelet ridge
analysis.  Nonlin. Processes Geophys., 28, 181- (method as summarised in
its abstract; details from memory).
"""

from __future__ import annotations

import dataclasses
import functools
import hashlib
import math
import os
import tempfile
import zipfile
from pathlib import Path
from typing import NamedTuple

import numpy as np
from scipy.signal import lfilter
from scipy.special import digamma, polygamma

from driftloop.constants import EARTH_ROTATION_RATE_RAD_S, TIDAL_PERIODS_H
from driftloop.wavelet import RotaryTransform, WaveletConfig, wavelet_table

__all__ = [
    "NoiseCalibration",
    "RotaryBackground",
    "analysed_area",
    "calibrate",
    "excluded_bands",
    "fit_background",
    "noise_variance",
    "statistic_threshold",
]

#: Width of the periodogram bins of the background fit (octaves).
BIN_OCTAVES = 0.25
#: Bins this many standard deviations above the fit count as peaks.
PEAK_SIGMA = 3.0
#: Weight of the second-difference penalty on the knot values of the fit.
SMOOTHING = 1.0
#: Calibration: number and length of the simulated white-noise records.
CALIBRATION_RECORDS = 16
CALIBRATION_LENGTH = 4096
#: Calibration: noise processes, complex AR(1) with these coefficients
#: (0: white; the others are red with their knee at about 2 pi / (1 - a)
#: samples, i.e. 21, 31 and 63, inside the calibrated band).
CALIBRATION_AR = (0.0, 0.7, 0.8, 0.9)
#: Calibration: number of period bands (octaves from ``min_period_samples``,
#: the last one open-ended) and the longest period simulated (sample intervals).
CALIBRATION_BANDS = 3
CALIBRATION_MAX_PERIOD = 80.0
CALIBRATION_SEED = 20210401
#: Band left out of the background fit around the local inertial frequency
#: |f|, as fractions of |f| (Kunze 1985: near-inertial frequencies are shifted
#: by half the relative vorticity, a few tenths of f in eddies).
INERTIAL_BAND = (0.67, 1.5)
#: Within this many degrees of the equator no inertial band is left out.
INERTIAL_MIN_LATITUDE = 5.0
#: Band left out around each tidal constituent (fractions of its frequency).
TIDAL_BAND = (0.95, 1.05)
#: Grid of the left-out bands: the inertial frequency is rounded to 1/8
#: octave and every band edge outwards to 1/32 octave of the sampling
#: frequency, so segments share a few calibrations.
INERTIAL_GRID_OCTAVES = 0.125
EDGE_GRID_OCTAVES = 1.0 / 32.0
#: Ridges of mean period within this factor of a left-out band form their
#: own calibration band (the background is interpolated there).
EXCLUDED_MARGIN = math.sqrt(2.0)
#: Longest period the calibration simulates when bands are left out
#: (sample intervals; the calibration records are ``CALIBRATION_LENGTH`` long).
CALIBRATION_MAX_EXCLUDED_PERIOD = 512.0


class RotaryBackground(NamedTuple):
    """Smooth background spectrum of both rotary senses.

    ln S(+-omega) is piecewise linear in x = ln |omega| between knots one
    octave apart, constant beyond the first and last knot.

    Attributes
    ----------
    knots : numpy.ndarray
        Knot positions x = ln(|omega| / (rad/s)), increasing.
    log_density : numpy.ndarray
        (2, K) ln S at the knots: row 0 counter-clockwise (omega > 0),
        row 1 clockwise.
    """

    knots: np.ndarray
    log_density: np.ndarray

    def density(self, omega_rad_s: np.ndarray) -> np.ndarray:
        """Return the background spectral density at signed frequencies.

        Parameters
        ----------
        omega_rad_s : array_like
            Angular frequency (rad/s), > 0 counter-clockwise, < 0 clockwise.

        Returns
        -------
        numpy.ndarray
            S (m^2/s^2 per rad/s), normalised so that the integral of
            S d omega / 2 pi is the variance of z.
        """
        w = np.asarray(omega_rad_s, dtype=float)
        x = np.log(np.maximum(np.abs(w), _TINY))
        ccw = np.interp(x, self.knots, self.log_density[0])
        cw = np.interp(x, self.knots, self.log_density[1])
        return np.exp(np.where(w < 0, cw, ccw))


_TINY = 1e-300


def excluded_bands(latitude: float | None, dt_s: float) -> tuple:
    """Return the frequency bands left out of the background fit at a latitude.

    Parameters
    ----------
    latitude : float or None
        Mean latitude of the segment (degrees); ``None`` leaves nothing out.
    dt_s : float
        Sample interval (s).

    Returns
    -------
    tuple of (float, float)
        Disjoint, increasing (omega_lo, omega_hi) ranges of |omega| (rad/s),
        both rotary senses: ``INERTIAL_BAND`` times |f| = 2 Omega |sin lat|
        (none within ``INERTIAL_MIN_LATITUDE`` of the equator) and
        ``TIDAL_BAND`` times the M2, S2, K1 and O1 frequencies; |f| is rounded
        to ``INERTIAL_GRID_OCTAVES`` and the edges outwards to
        ``EDGE_GRID_OCTAVES`` of the sampling frequency, so that nearby
        latitudes share a calibration.  Bands above the Nyquist frequency are
        dropped.
    """
    if latitude is None or not math.isfinite(float(latitude)):
        return ()
    dt_s = float(dt_s)
    raw = []  # in rad per sample
    if abs(float(latitude)) >= INERTIAL_MIN_LATITUDE:
        f = 2.0 * EARTH_ROTATION_RATE_RAD_S * abs(math.sin(math.radians(float(latitude)))) * dt_s
        step = INERTIAL_GRID_OCTAVES
        f = 2.0 ** (step * round(math.log2(f) / step))
        raw.append((f * INERTIAL_BAND[0], f * INERTIAL_BAND[1]))
    for hours in TIDAL_PERIODS_H.values():
        w = 2.0 * math.pi * dt_s / (hours * 3600.0)
        raw.append((w * TIDAL_BAND[0], w * TIDAL_BAND[1]))
    g = EDGE_GRID_OCTAVES
    snapped = sorted((2.0 ** (g * math.floor(math.log2(lo) / g + 1e-9)),
                      2.0 ** (g * math.ceil(math.log2(hi) / g - 1e-9)))
                     for lo, hi in raw if lo < math.pi)
    merged: list[list[float]] = []
    for lo, hi in snapped:
        if merged and lo <= merged[-1][1]:
            merged[-1][1] = max(merged[-1][1], hi)
        else:
            merged.append([lo, hi])
    return tuple((lo / dt_s, hi / dt_s) for lo, hi in merged)


def _hat_basis(x: np.ndarray, knots: np.ndarray) -> np.ndarray:
    """Linear-interpolation (hat function) basis at x, shape (len(x), len(knots))."""
    eye = np.eye(len(knots))
    return np.stack([np.interp(x, knots, eye[k]) for k in range(len(knots))], axis=1)


class _Binning(NamedTuple):
    """The parts of the background fit that depend on the segment geometry only (cached)."""

    knots: np.ndarray
    which: np.ndarray  # bin of every periodogram value, -1 outside
    counts: np.ndarray  # values per bin, bins that have any
    have: np.ndarray  # bins that have values
    basis: np.ndarray  # (bins that have values, knots)
    offset: np.ndarray  # E[ln mean] - ln S of a bin mean (digamma(m) - ln m)
    var: np.ndarray  # Var[ln mean] (trigamma(m))
    penalty: np.ndarray  # second-difference penalty on the knot values
    weighted: np.ndarray  # basis / var
    outer: np.ndarray  # (bins, knots^2): outer products of the basis rows / var


@functools.lru_cache(maxsize=32)
def _binning(n: int, n_fft: int, dt: float, exclude: tuple = ()) -> _Binning:
    half = (n_fft + 1) // 2
    omega = 2.0 * np.pi * np.arange(1, half) / (n_fft * dt)
    x_lo = math.log(2.0 * 2.0 * math.pi / (n * dt))
    x_hi = math.log(math.pi / dt)
    width = BIN_OCTAVES * math.log(2.0)
    edges = np.arange(x_lo, x_hi + 1e-12, width)
    if len(edges) < 2:
        edges = np.array([x_lo, x_hi])
    n_knots = max(2, int(math.ceil((x_hi - x_lo) / math.log(2.0) - 1e-9)) + 1)
    knots = np.linspace(x_lo, x_hi, n_knots)
    which = np.digitize(np.log(omega), edges) - 1
    which[(which < 0) | (which >= len(edges) - 1)] = -1
    for lo, hi in exclude:
        which[(omega >= lo) & (omega <= hi)] = -1
    counts = np.bincount(which[which >= 0], minlength=len(edges) - 1).astype(float)
    centres = 0.5 * (edges[:-1] + edges[1:])
    have = counts > 0
    basis = _hat_basis(centres[have], knots)
    m = np.maximum(counts[have] * n / n_fft, 1.0)
    diff2 = np.diff(np.eye(n_knots), 2, axis=0) if n_knots > 2 else np.zeros((0, n_knots))
    penalty = SMOOTHING * diff2.T @ diff2 + 1e-9 * np.eye(n_knots)
    var = polygamma(1, m)
    weighted = basis / var[:, None]
    outer = (weighted[:, :, None] * basis[:, None, :]).reshape(len(basis), -1)
    out = _Binning(knots, which, counts[have], have, basis, digamma(m) - np.log(m), var,
                   penalty, weighted, outer)
    for arr in out:
        arr.setflags(write=False)
    return out


def _fit(y: np.ndarray, b: _Binning) -> np.ndarray:
    """Fit the knot values of ln S to the bin means y, one row per rotary sense."""
    y = y - b.offset
    basis, k = b.basis, b.basis.shape[1]
    limit = PEAK_SIGMA * np.sqrt(b.var)
    use = np.ones(y.shape)  # 1: bin used, 0: dropped as a peak
    coef = y[:, :k]
    for _ in range(8):
        normal = (use @ b.outer).reshape(len(y), k, k) + b.penalty
        coef = np.linalg.solve(normal, ((use * y) @ b.weighted)[:, :, None])[:, :, 0]
        new = (y - coef @ basis.T) <= limit
        # a sense whose set of bins no longer changes keeps it (and so its fit)
        stop = (new.sum(axis=1) < 3) | np.all(new == use, axis=1)
        if stop.all():
            break
        use = np.where(stop[:, None], use, new)
    return coef


def fit_background(transform: RotaryTransform, exclude: tuple = ()) -> RotaryBackground:
    """Fit the smooth red background of each rotary sense of a segment.

    Parameters
    ----------
    transform : RotaryTransform
        Carries the segment's rotary periodogram.
    exclude : tuple of (float, float), optional
        Ranges of |omega| (rad/s) whose periodogram values the fit leaves out
        in both senses (:func:`excluded_bands`); across each the background
        is the straight line in ln S against ln |omega| between the fit at
        the band edges (held constant where a band reaches past the first or
        last knot).

    Returns
    -------
    RotaryBackground
        Piecewise-linear fit of ln S in ln |omega| per sense, peaks excluded.

    Notes
    -----
    Method in the module docstring (:mod:`driftloop.significance`).
    """
    exclude = tuple((float(lo), float(hi)) for lo, hi in exclude)
    fit = _fit_background(transform, exclude)
    return _bridge(fit, exclude) if exclude else fit


def _bridge(fit: RotaryBackground, exclude: tuple) -> RotaryBackground:
    """Replace the fit inside the left-out bands by straight lines in log-log space."""
    knots, dens = fit.knots, fit.log_density
    first, last = knots[0], knots[-1]
    gaps = [(max(math.log(lo), first), min(math.log(hi), last)) for lo, hi in exclude]
    gaps = [(a, b) for a, b in gaps if a < b]
    if not gaps:
        return fit
    keep = np.ones(len(knots), dtype=bool)
    for a, b in gaps:
        keep &= (knots <= a) | (knots >= b)
    new_x = [knots[keep]]
    new_y = [dens[:, keep]]
    for a, b in gaps:
        ya = np.array([np.interp(a, knots, d) for d in dens])
        yb = np.array([np.interp(b, knots, d) for d in dens])
        if a <= first:  # the band reaches past the first knot: hold the value beyond it
            ya = yb
        if b >= last:
            yb = ya
        new_x.append(np.array([a, b]))
        new_y.append(np.stack([ya, yb], axis=1))
    x = np.concatenate(new_x)
    y = np.concatenate(new_y, axis=1)
    order = np.argsort(x, kind="stable")
    x, y = x[order], y[:, order]
    # a band edge on a kept knot: keep one point (the bridged value)
    dup = np.r_[np.diff(x) <= 0, False]
    return RotaryBackground(x[~dup], y[:, ~dup])


def _fit_background(transform: RotaryTransform, exclude: tuple) -> RotaryBackground:
    b = _binning(transform.n_samples, transform.n_fft, float(transform.dt_s), exclude)
    log_density = np.full((2, len(b.knots)), math.log(_TINY))
    if len(b.counts) == 0:
        return RotaryBackground(b.knots, log_density)
    valid = b.which >= 0
    which = b.which[valid]
    n_bins = len(b.have)
    spec = transform.spectrum[:, valid]
    totals = np.sum(transform.spectrum, axis=1)
    fitted = [s for s in (0, 1) if totals[s] > 0]
    if not fitted:
        return RotaryBackground(b.knots, log_density)
    y = np.empty((len(fitted), len(b.counts)))
    for i, s in enumerate(fitted):
        sums = np.bincount(which, weights=spec[s], minlength=n_bins)
        y[i] = np.log(np.maximum(sums[b.have] / b.counts, totals[s] * 1e-30))
    log_density[fitted] = _fit(y, b)
    return RotaryBackground(b.knots, log_density)


@functools.lru_cache(maxsize=8)
def _squared_table(n_fft: int, config: WaveletConfig, count: int) -> tuple:
    """Psi(s_j omega_k)^2 in blocks of rows, each cut where its rows become zero."""
    periods = config.min_period_samples * 2.0 ** (np.arange(count) / config.periods_per_octave)
    sq = np.square(wavelet_table(n_fft, periods, config), dtype=float)
    nonzero = sq != 0
    band = np.where(nonzero.any(axis=1), sq.shape[1] - np.argmax(nonzero[:, ::-1], axis=1), 0)
    blocks = []
    for a in range(0, count, 8):
        b = min(count, a + 8)
        h = int(band[a:b].max()) if b > a else 0
        block = np.ascontiguousarray(sq[a:b, :h])
        block.setflags(write=False)
        blocks.append((a, b, h, block))
    return tuple(blocks)


def noise_variance(background: RotaryBackground, transform: RotaryTransform) -> np.ndarray:
    """Return the expected |W+-|^2 of Gaussian background noise at every scale.

    Parameters
    ----------
    background : RotaryBackground
        Background spectrum.
    transform : RotaryTransform
        Gives the scales, the FFT grid and the wavelet.

    Returns
    -------
    numpy.ndarray
        (2, J): sigma_+^2 (row 0) and sigma_-^2 (row 1), (m/s)^2,
        (1/4) sum_k S(+-omega_k) Psi(s_j omega_k)^2 / (n_fft dt) (*derived*,
        the discrete form of the integral in the module docstring).
    """
    dt = transform.dt_s
    count = len(transform.periods_s)
    omega = transform.omega_rad_s
    x = np.log(np.maximum(omega, _TINY))
    dens = np.exp(np.stack([np.interp(x, background.knots, background.log_density[s])
                            for s in (0, 1)]))  # S(+omega), S(-omega)
    out = np.empty((2, count))
    for a, b, h, block in _squared_table(transform.n_fft, _table_config(transform.config),
                                         count):
        np.matmul(dens[:, :h], block.T, out=out[:, a:b])
    out /= 4.0 * transform.n_fft * dt
    return out


@functools.lru_cache(maxsize=32)
def _table_config(config: WaveletConfig) -> WaveletConfig:
    """Reduce a configuration to what the wavelet table depends on (a cache key)."""
    return WaveletConfig(beta=config.beta, gamma=config.gamma,
                         periods_per_octave=config.periods_per_octave,
                         min_period_samples=config.min_period_samples, dtype=config.dtype)


def analysed_area(transform: RotaryTransform) -> float:
    """Return the time-scale area A in which ridge points can occur.

    Parameters
    ----------
    transform : RotaryTransform
        The transform.

    Returns
    -------
    float
        2 x sum over scales j = 1 .. J-2 of (unmasked fraction of the
        record) x ln 2 / periods_per_octave (both senses; dimensionless).
    """
    n = transform.n_samples
    if transform.w_ccw.shape[0] < 3 or n == 0:
        return 0.0
    inner = np.maximum(n - 2 * transform.coi[1:-1], 0) / n
    return float(2.0 * inner.sum() * math.log(2.0) / transform.config.periods_per_octave)


class NoiseCalibration(NamedTuple):
    """Noise-ridge statistics from the calibration simulation, per period band.

    Attributes
    ----------
    band_edges : numpy.ndarray
        Edges of the period bands (sample intervals), increasing; the last
        band extends to all longer periods.
    statistic : tuple of numpy.ndarray
        Per noise process (``CALIBRATION_AR``) and band, process-major, E of
        every simulated noise ridge in the band, decreasing.
    density : tuple of numpy.ndarray
        Same layout, D(E >= statistic[i]): duration of noise ridges with at
        least that E per unit duration and unit analysed area of the band.
    n_records : int
        Number of simulated records per process.
    zones : numpy.ndarray
        (k, 2) period ranges (sample intervals) around the bands left out of
        the background fit; ridges there form one more band, after the
        period bands.  Empty without left-out bands.
    """

    band_edges: np.ndarray
    statistic: tuple
    density: tuple
    n_records: int
    zones: np.ndarray = np.zeros((0, 2))

    @property
    def n_bands(self) -> int:
        """Number of bands (period bands, plus one if there are zones)."""
        return len(self.band_edges) + (1 if len(self.zones) else 0)

    def band(self, period_samples: np.ndarray) -> np.ndarray:
        """Return the band index of ridges of the given (geometric-mean) periods."""
        return _band_index(np.asarray(period_samples, dtype=float), self.band_edges, self.zones)


def _band_index(period: np.ndarray, edges: np.ndarray, zones: np.ndarray) -> np.ndarray:
    band = np.clip(np.searchsorted(edges, period, side="right") - 1, 0, len(edges) - 1)
    for lo, hi in zones:
        band = np.where((period >= lo) & (period <= hi), len(edges), band)
    return band


def _zones(exclude: tuple) -> np.ndarray:
    """Period ranges (samples) around left-out bands given in rad per sample."""
    if not exclude:
        return np.zeros((0, 2))
    return np.array([(2.0 * math.pi / hi / EXCLUDED_MARGIN, 2.0 * math.pi / lo * EXCLUDED_MARGIN)
                     for lo, hi in exclude])


def _per_sample(exclude: tuple, dt_s: float) -> tuple:
    """Left-out bands in rad per sample, rounded so that they make a stable cache key."""
    return tuple((float(f"{lo * dt_s:.12g}"), float(f"{hi * dt_s:.12g}")) for lo, hi in exclude)


@functools.lru_cache(maxsize=64)
def _calibration_config(config: WaveletConfig, exclude: tuple = ()) -> WaveletConfig:
    longest = CALIBRATION_MAX_PERIOD
    if exclude:  # simulate the zones around the left-out bands and beyond them
        zone_top = float(np.max(_zones(exclude)[:, 1]))
        longest = min(CALIBRATION_MAX_EXCLUDED_PERIOD, max(longest, 1.5 * zone_top))
    return dataclasses.replace(config, amplitude_floor_m_s=0.0, significance=True,
                               max_period_s=longest, bias_correction=False,
                               fft_workers=1, false_positive_rate=1.0, dtype="float64",
                               coi_factor=None, coi_edge_error=0.01)


def _band_areas(transform: RotaryTransform, edges: np.ndarray, zones: np.ndarray,
                n_bands: int) -> np.ndarray:
    n = transform.n_samples
    per = transform.periods_s[1:-1] / transform.dt_s
    inner = np.maximum(n - 2 * transform.coi[1:-1], 0) / n
    inner = inner * 2.0 * math.log(2.0) / transform.config.periods_per_octave
    band = _band_index(per, edges, zones)
    return np.bincount(band, weights=inner, minlength=n_bands)


def chain_periods(cand, config: WaveletConfig) -> np.ndarray:
    """Return the geometric-mean scale period (sample intervals) of each candidate chain.

    Parameters
    ----------
    cand : driftloop.ridges.Candidates
        Chained ridge points.
    config : WaveletConfig
        Gives the period grid.

    Returns
    -------
    numpy.ndarray
        One period per chain.
    """
    mean_x = np.add.reduceat(cand.x, cand.starts[:-1]) / np.diff(cand.starts)
    return config.min_period_samples * 2.0 ** (mean_x / config.periods_per_octave)


def _noise_record(rng: np.random.Generator, ar: float) -> np.ndarray:
    z = (rng.standard_normal(CALIBRATION_LENGTH)
         + 1j * rng.standard_normal(CALIBRATION_LENGTH)) / math.sqrt(2.0)
    if ar > 0:
        z = lfilter([1.0], [1.0, -ar], z)
    return z


@functools.lru_cache(maxsize=32)
def _calibrate(config: WaveletConfig, exclude: tuple = ()) -> NoiseCalibration:
    path = _calibration_file(config, exclude)
    cal = _read_calibration(path) if path is not None else None
    if cal is None:
        cal = _simulate(config, exclude)
        if path is not None:
            _write_calibration(path, cal)
    return cal


def _calibration_file(config: WaveletConfig, exclude: tuple = ()) -> Path | None:
    """Cache file of a calibration, named by everything that can change its result."""
    import scipy

    from driftloop.landmask import cache_dir

    here = Path(__file__).resolve().parent
    digest = hashlib.sha256()
    try:
        for name in ("wavelet.py", "ridges.py", "significance.py"):
            digest.update((here / name).read_bytes())
    except OSError:
        return None
    digest.update(repr((config, CALIBRATION_RECORDS, CALIBRATION_LENGTH, CALIBRATION_AR,
                        CALIBRATION_BANDS, CALIBRATION_MAX_PERIOD, CALIBRATION_SEED,
                        np.__version__, scipy.__version__)).encode())
    if exclude:
        digest.update(repr((exclude, EXCLUDED_MARGIN)).encode())
    return cache_dir() / f"ridge_noise_calibration_{digest.hexdigest()[:24]}.npz"


def _read_calibration(path: Path) -> NoiseCalibration | None:
    try:
        with np.load(path, allow_pickle=False) as f:
            count = int(f["count"])
            stats = tuple(f[f"statistic_{i}"] for i in range(count))
            dens = tuple(f[f"density_{i}"] for i in range(count))
            zones = f["zones"] if "zones" in f.files else np.zeros((0, 2))
            return NoiseCalibration(f["band_edges"], stats, dens, int(f["n_records"]), zones)
    except (OSError, KeyError, ValueError, EOFError, zipfile.BadZipFile):
        return None


def _write_calibration(path: Path, cal: NoiseCalibration) -> None:
    """Store a calibration atomically; a folder that cannot be written is not an error."""
    arrays = {"band_edges": cal.band_edges, "count": np.array(len(cal.statistic)),
              "n_records": np.array(cal.n_records), "zones": np.asarray(cal.zones)}
    for i, (stat, dens) in enumerate(zip(cal.statistic, cal.density, strict=True)):
        arrays[f"statistic_{i}"] = stat
        arrays[f"density_{i}"] = dens
    try:
        path.parent.mkdir(parents=True, exist_ok=True)
        fd, tmp = tempfile.mkstemp(prefix=f".{path.name}.", suffix=".npz", dir=path.parent)
    except OSError:
        return
    try:
        with os.fdopen(fd, "wb") as out:
            np.savez(out, **arrays)
        os.chmod(tmp, 0o644)
        os.replace(tmp, path)
    except OSError:
        Path(tmp).unlink(missing_ok=True)


def _simulate(config: WaveletConfig, exclude: tuple = ()) -> NoiseCalibration:
    from driftloop.ridges import _segment_candidates

    t_min = config.min_period_samples
    edges = np.r_[0.0, t_min * 2.0 ** np.arange(1, CALIBRATION_BANDS)]
    zones = _zones(exclude)
    n_bands = len(edges) + (1 if len(zones) else 0)
    rng = np.random.default_rng(CALIBRATION_SEED)
    out_s, out_d = [], []
    for ar in CALIBRATION_AR:
        stats, durations, bands = [], [], []
        area = np.zeros(n_bands)
        for _ in range(CALIBRATION_RECORDS):
            tr, _, _, _, cand = _segment_candidates(_noise_record(rng, ar), 1.0, config,
                                                    calibrating=True, exclude=exclude)
            area += _band_areas(tr, edges, zones, n_bands) * CALIBRATION_LENGTH
            if cand is not None:
                stats.append(cand.statistic)
                durations.append(np.diff(cand.starts).astype(float))
                bands.append(_band_index(chain_periods(cand, config), edges, zones))
        stat = np.concatenate(stats) if stats else np.zeros(0)
        dur = np.concatenate(durations) if durations else np.zeros(0)
        band = np.concatenate(bands) if bands else np.zeros(0, dtype=int)
        for b in range(n_bands):
            sel = band == b
            order = np.argsort(-stat[sel], kind="stable")
            out_s.append(stat[sel][order])
            out_d.append(np.cumsum(dur[sel][order]) / max(area[b], 1.0))
    return NoiseCalibration(edges, tuple(out_s), tuple(out_d), CALIBRATION_RECORDS, zones)


def calibrate(config: WaveletConfig, exclude: tuple = ()) -> NoiseCalibration:
    """Return the noise-ridge calibration for a configuration (cached).

    Parameters
    ----------
    config : WaveletConfig
        Wavelet and ridge parameters; the amplitude floor, period limit,
        bias correction, workers, rate, dtype and cone of influence do not
        matter (the last two hardly change the noise-ridge density per unit
        analysed area) and are set to fixed values.
    exclude : tuple of (float, float), optional
        Bands left out of the background fit, in rad per sample interval
        (:func:`excluded_bands` times the sample interval): the simulation
        leaves out the same bands, reaches periods up to 1.5 times the
        longest zone (at most ``CALIBRATION_MAX_EXCLUDED_PERIOD``) and keeps
        the ridges of the zones around the bands (within ``EXCLUDED_MARGIN``
        of their period range) as a band of their own.

    Returns
    -------
    NoiseCalibration
        Statistics and durations of ridges in complex white Gaussian noise
        (``CALIBRATION_RECORDS`` records of ``CALIBRATION_LENGTH`` samples,
        seed ``CALIBRATION_SEED``, periods up to ``CALIBRATION_MAX_PERIOD``
        samples), found with the fitted background, in three period bands:
        the first two octaves above ``min_period_samples``, where the
        Nyquist frequency cuts the wavelet, and all longer periods, where
        the normalised noise is scale-free.
    """
    exclude = tuple(exclude)
    return _calibrate(_calibration_config(config, exclude), exclude)


def threshold_for_density(statistic: np.ndarray, density: np.ndarray, target: float) -> float:
    """Return the smallest statistic c whose noise-ridge density is at most ``target``.

    Parameters
    ----------
    statistic, density : numpy.ndarray
        One band of a :class:`NoiseCalibration`.
    target : float
        Allowed duration of false ridges per unit duration and unit area.

    Returns
    -------
    float
        The threshold c (ridges with E >= c are kept).
    """
    if len(statistic) == 0 or target >= density[-1]:
        return 0.0
    # ln D is close to linear in E in the upper tail and bends down further
    # out; a straight fit from 20 times the target outwards is smooth and, if
    # anything, conservative
    tail = density <= 20.0 * target
    if tail.sum() < 15:
        tail = np.arange(len(density)) < min(len(density), 60)
    slope, icpt = np.polyfit(statistic[tail], np.log(density[tail]), 1)
    if not slope < 0:
        return float(statistic[0])
    return float((math.log(target) - icpt) / slope)


def statistic_threshold(transform: RotaryTransform, period_samples: np.ndarray,
                        config: WaveletConfig | None = None, exclude: tuple = ()) -> np.ndarray:
    """Return the ridge-statistic thresholds for a segment at the configured rate.

    Parameters
    ----------
    transform : RotaryTransform
        The segment's transform (gives the analysed area).
    period_samples : numpy.ndarray
        Geometric-mean scale period of each ridge (sample intervals).
    config : WaveletConfig, optional
        Gives ``false_positive_rate``; the transform's own if omitted.
    exclude : tuple of (float, float), optional
        Bands (rad/s) left out of the segment's background fit; the
        calibration leaves out the same ones.

    Returns
    -------
    numpy.ndarray
        Per ridge, c such that false ridges of every period band together
        are expected to cover at most ``false_positive_rate`` of the segment
        duration: each band is allowed the density rate / A, A the whole
        analysed area (:func:`analysed_area`), and the threshold is the
        largest that any of the calibration noise processes needs.
    """
    config = config or transform.config
    period_samples = np.asarray(period_samples, dtype=float)
    area = analysed_area(transform)
    if area <= 0:
        return np.full(period_samples.shape, np.inf)
    exclude = _per_sample(exclude, transform.dt_s)
    cal = calibrate(config, exclude)
    per_band = _band_thresholds(_calibration_config(config, exclude), exclude,
                                float(config.false_positive_rate / area))
    return per_band[cal.band(period_samples)]


@functools.lru_cache(maxsize=256)
def _band_thresholds(config: WaveletConfig, exclude: tuple, target: float) -> np.ndarray:
    cal = _calibrate(config, exclude)
    n_bands = cal.n_bands
    per_band = np.zeros(n_bands)
    for i, (stat, dens) in enumerate(zip(cal.statistic, cal.density, strict=True)):
        b = i % n_bands
        per_band[b] = max(per_band[b], threshold_for_density(stat, dens, target))
    per_band.setflags(write=False)
    return per_band
