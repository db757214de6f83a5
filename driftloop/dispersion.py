"""Single-particle dispersion statistics of drifter velocities.

From the residual velocity u' of drifters (the drift with its mean removed)
this module estimates

- the Lagrangian velocity autocorrelation R(tau), per component and for the
  velocity vector (:func:`autocorrelation`);
- the integral time scale T_L = integral of R from 0, with the integration
  limit chosen by one of three rules (:func:`integral_time_scale`);
- the velocity variance sigma^2 and the single-particle diffusivity
  K = sigma^2 T_L, with bootstrap confidence intervals, per drifter or for
  a release pooling drifters (:func:`single_particle_statistics`,
  :func:`dispersion_by_drifter`);
- the dispersion <x'^2>(t) of displacements and K(t) = 1/2 d<x'^2>/dt, to
  check the asymptote against sigma^2 T_L (:func:`displacement_dispersion`).

Method
------
Taylor (1921, "Diffusion by continuous movements", Proc. London Math. Soc.
s2-20, volume from memory) showed for stationary, homogeneous turbulence
that the mean square displacement of a particle from its start is

    <x'^2>(t) = 2 sigma^2 integral_0^t (t - tau) R(tau) dtau,

with R(tau) = <u'(s) u'(s + tau)> / <u'^2> and sigma^2 = <u'^2>: ballistic,
<x'^2> ~ sigma^2 t^2, for t << T_L, and diffusive, <x'^2> ~ 2 sigma^2 T_L t,
for t >> T_L, so that K(t) = 1/2 d<x'^2>/dt tends to K = sigma^2 T_L.
LaCasce (2008, "Statistics from Lagrangian observations", Prog. Oceanogr.
77, 1-29) reviews the use of these relations with ocean drifters.  For an
Ornstein-Uhlenbeck (first-order autoregressive) velocity R = exp(-|tau|/T_L)
and <x'^2> = 2 sigma^2 T_L [t - T_L (1 - exp(-t/T_L))] (*derived* from
Taylor's formula).

Estimators
----------
The series must be uniformly sampled at dt_s; gaps are NaN.  The lagged
covariance is C(k) = sum_i u'_i u'_{i+k} / P(k), summed over the P(k) pairs
with both values present, so gaps shorten the sums but do not bias them.
Several series (drifters, or segments) are pooled by adding their sums and
pair counts before dividing.  By default each series has its own mean
removed (u' = u - mean of that series); ``demean="pooled"`` removes one mean
over all series and ``demean="none"`` uses the values as given (for a
velocity whose mean field was already removed).  Removing a record's own
mean removes motion at periods longer than the record: for a record of
length T >> T_L the covariance drops by about the variance of the record
mean, 2 sigma^2 T_L / T, and <x'^2>(t) by the factor (1 - t / T) (both
*derived* from Taylor's formula), so use records much longer than the
times of interest.  The vector correlation is
that of the real part of <w'* w'(tau)>, w = u + i v: R = (C_uu + C_vv)(tau) /
(C_uu + C_vv)(0), with the variance reported per component,
sigma^2 = (sigma_u^2 + sigma_v^2) / 2 (the eddy kinetic energy per unit
mass), so that K of the vector is the mean of the two components'.  A
vector sample counts only where both components are present.

T_L is the trapezoidal integral of R from lag 0 to a limit set by
``method``: ``"first_zero"`` (the first zero crossing, found by linear
interpolation; the usual practice, LaCasce 2008), ``"first_minimum"`` (the
first local minimum of R) or ``"fixed_lag"`` (a given lag).  The result
reports the rule and the limit used, and whether the rule found its limit
within the lags computed (if not, the integral runs to the last lag).

Why the drift residual: leftover inertial oscillation (or tides)
----------------------------------------------------------------
An inertial oscillation of speed A adds (A^2 / 2) cos(f tau) to the lagged
covariance.  R then oscillates at the inertial period and, if A is not
small against sigma, first crosses zero after about a quarter of an
inertial period: T_L from the first zero crossing, and K with it, come out
far too low, while the oscillation itself carries no net dispersion
(LaCasce 2008 discusses such oscillating correlations).  Integrating to a
fixed long lag lets the oscillating part average out but adds noise.  The
remedy is to analyse the drift residual: remove the inertial and tidal
signals (or low-pass well below |f|) before these statistics.

Confidence intervals
--------------------
By a block bootstrap: each series is cut into consecutive blocks of
``block_s`` (default ten times the point estimate of T_L of the velocity
vector, and at least twice the largest integration limit); the lag sums
of the pairs starting in each block are resampled with replacement, block
by block, and T_L, sigma^2 and K recomputed from every resample (with the
same integration rule); the interval is the percentile interval.  Blocks
much longer than T_L are close to independent, so this respects the serial
correlation that a per-sample bootstrap would ignore (common practice).
With fewer than :data:`MIN_BLOCKS` blocks no interval is given.  The
effective number of degrees of freedom N dt / (2 T_L) (N samples present;
common practice) is reported as well.

References
----------
Taylor, G. I., 1921: Diffusion by continuous movements.  Proc. London Math.
Soc., s2-20, 196- (volume and page from memory).

LaCasce, J. H., 2008: Statistics from Lagrangian observations.  Prog.
Oceanogr., 77, 1-29.
"""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field
from typing import NamedTuple

import numpy as np
import pandas as pd
from numpy.typing import ArrayLike

__all__ = [
    "DISPERSION_COLUMNS",
    "INTEGRATION_METHODS",
    "MIN_BLOCKS",
    "Autocorrelation",
    "ComponentStatistics",
    "Dispersion",
    "IntegralTimeScale",
    "autocorrelation",
    "dispersion_by_drifter",
    "displacement_dispersion",
    "integral_time_scale",
    "single_particle_statistics",
]

#: Rules for the upper limit of the integral of R.
INTEGRATION_METHODS = ("first_zero", "first_minimum", "fixed_lag")

#: Fewest bootstrap blocks for which a confidence interval is given.
MIN_BLOCKS = 5

#: Columns of the table of :func:`dispersion_by_drifter`.
DISPERSION_COLUMNS = (
    "drifter_id",
    "component",
    "samples",
    "duration_s",
    "variance_m2_s2",
    "variance_low_m2_s2",
    "variance_high_m2_s2",
    "integral_time_s",
    "integral_time_low_s",
    "integral_time_high_s",
    "diffusivity_m2_s",
    "diffusivity_low_m2_s",
    "diffusivity_high_m2_s",
    "method",
    "limit_s",
    "limit_found",
    "dof_effective",
    "blocks",
    "block_s",
)

_DEMEAN = ("series", "pooled", "none")


# ---------------------------------------------------------------------------
# input handling
# ---------------------------------------------------------------------------


def _series_list(values: ArrayLike | Sequence[ArrayLike], name: str) -> list[np.ndarray]:
    """One 1-D float array per series from a 1-D array, a 2-D array or a list."""
    if isinstance(values, np.ndarray) and values.ndim <= 2:
        arrays = [values] if values.ndim == 1 else list(values)
    elif isinstance(values, Sequence) and values and np.ndim(values[0]) == 1:
        arrays = list(values)
    else:
        arrays = [np.asarray(values)]
    out = [np.asarray(a, dtype=float) for a in arrays]
    if any(a.ndim != 1 for a in out):
        raise ValueError(f"{name} must be a 1-D series, a 2-D array (one row per series) or "
                         "a list of 1-D series")
    if not out or all(a.size == 0 for a in out):
        raise ValueError(f"{name} holds no samples")
    return out


def _prepare(u, v, demean: str) -> tuple[list[np.ndarray], list[np.ndarray] | None]:
    """Series with NaN where any component is missing, with the mean removed."""
    if demean not in _DEMEAN:
        raise ValueError(f"demean must be one of {_DEMEAN}, got {demean!r}")
    us = _series_list(u, "u")
    vs = None if v is None else _series_list(v, "v")
    if vs is not None:
        if len(vs) != len(us) or any(a.shape != b.shape for a, b in zip(us, vs, strict=True)):
            raise ValueError("u and v must have the same series and lengths")
        masks = [np.isfinite(a) & np.isfinite(b) for a, b in zip(us, vs, strict=True)]
    else:
        masks = [np.isfinite(a) for a in us]

    def centre(series: list[np.ndarray]) -> list[np.ndarray]:
        series = [np.where(m, a, np.nan) for a, m in zip(series, masks, strict=True)]
        if demean == "series":
            return [a - np.nanmean(a) if np.isfinite(a).any() else a for a in series]
        if demean == "pooled":
            valid = np.concatenate([a[np.isfinite(a)] for a in series])
            mean = valid.mean() if valid.size else 0.0
            return [a - mean for a in series]
        return series

    if not any(m.any() for m in masks):
        raise ValueError("no sample has every velocity component present")
    return centre(us), (None if vs is None else centre(vs))


def _max_lag(series: list[np.ndarray], dt_s: float, max_lag_s: float | None) -> int:
    longest = max(a.size for a in series)
    if max_lag_s is None:
        return max(1, (longest - 1) // 4)
    if not (math.isfinite(max_lag_s) and max_lag_s > 0):
        raise ValueError(f"max_lag_s must be positive, got {max_lag_s}")
    return max(1, min(int(round(max_lag_s / dt_s)), longest - 1))


def _check_dt(dt_s: float) -> float:
    dt_s = float(dt_s)
    if not (math.isfinite(dt_s) and dt_s > 0):
        raise ValueError(f"dt_s must be a positive sampling interval in seconds, got {dt_s}")
    return dt_s


# ---------------------------------------------------------------------------
# lagged sums by block, with the FFT
# ---------------------------------------------------------------------------


def _block_sums(x: np.ndarray, bounds: Sequence[tuple[int, int]], max_lag: int) -> np.ndarray:
    """sum_{i in block} x_i x_{i+k} for k = 0..max_lag (x zero where missing), per block.

    Pairs starting in a block may end in the next one, so the sums over all
    blocks are the sums over the whole series.  Blocks of one length are
    transformed together.
    """
    out = np.zeros((len(bounds), max_lag + 1))
    padded = np.concatenate([x, np.zeros(max_lag)])
    lengths = np.array([stop - start for start, stop in bounds])
    for length in np.unique(lengths):
        which = np.flatnonzero(lengths == length)
        starts = np.array([bounds[b][0] for b in which])
        span = int(length) + max_lag
        nfft = 1 << int(math.ceil(math.log2(max(2, span + int(length)))))
        y = padded[starts[:, None] + np.arange(span)[None, :]]
        a = y[:, :int(length)]
        corr = np.fft.irfft(np.conj(np.fft.rfft(a, nfft, axis=1))
                            * np.fft.rfft(y, nfft, axis=1), nfft, axis=1)
        out[which] = corr[:, :max_lag + 1]
    return out


def _bounds(n: int, block: int | None) -> list[tuple[int, int]]:
    if block is None or block >= n:
        return [(0, n)]
    count = max(1, n // block)
    edges = [k * block for k in range(count)] + [n]
    return [(edges[k], edges[k + 1]) for k in range(count)]


class _Sums(NamedTuple):
    """Lag sums per block: products of each component and pair counts, (blocks, lags)."""

    products: list[np.ndarray]
    pairs: np.ndarray


def _lag_sums(components: list[list[np.ndarray]], max_lag: int, block: int | None) -> _Sums:
    products = [[] for _ in components]
    pairs = []
    for s in range(len(components[0])):
        first = components[0][s]
        bounds = _bounds(first.size, block)
        mask = np.isfinite(first).astype(float)
        pairs.append(np.rint(_block_sums(mask, bounds, max_lag)))
        for c, comp in enumerate(components):
            products[c].append(_block_sums(np.nan_to_num(comp[s], nan=0.0), bounds, max_lag))
    return _Sums([np.concatenate(p) for p in products], np.concatenate(pairs))


def _covariance(sums: _Sums, weights: np.ndarray | None = None,
                count: np.ndarray | None = None) -> tuple[np.ndarray, np.ndarray]:
    """Covariance per lag (summed over components) and pair counts, from block sums.

    With ``weights`` (resamples, blocks) there is one row per resample;
    ``count`` may then pass ``weights @ sums.pairs`` when it is already known.
    """
    total = sum(sums.products)
    if weights is None:
        top, count = total.sum(axis=0), sums.pairs.sum(axis=0)
    else:
        top = weights @ total
        if count is None:
            count = weights @ sums.pairs
    with np.errstate(invalid="ignore", divide="ignore"):
        cov = np.where(count > 0, top / np.where(count > 0, count, 1.0), np.nan)
    return cov / len(sums.products), count


# ---------------------------------------------------------------------------
# autocorrelation and the integral time scale
# ---------------------------------------------------------------------------


class Autocorrelation(NamedTuple):
    """Lagged covariance and correlation of a velocity series.

    Attributes
    ----------
    lags_s : numpy.ndarray
        Lags tau (s), 0, dt, 2 dt, ...
    covariance_m2_s2 : numpy.ndarray
        C(tau) (m2/s2); for the vector, the mean of the two components'.
    correlation : numpy.ndarray
        R(tau) = C(tau) / C(0) (dimensionless); NaN at lags with no pair.
    pairs : numpy.ndarray
        Number of sample pairs at each lag.
    """

    lags_s: np.ndarray
    covariance_m2_s2: np.ndarray
    correlation: np.ndarray
    pairs: np.ndarray


def autocorrelation(
    u: ArrayLike | Sequence[ArrayLike],
    dt_s: float,
    v: ArrayLike | Sequence[ArrayLike] | None = None,
    *,
    max_lag_s: float | None = None,
    demean: str = "series",
) -> Autocorrelation:
    """Lagrangian velocity autocorrelation R(tau), NaN-aware, pooled over series.

    Parameters
    ----------
    u : array_like or sequence of array_like
        Velocity component (m/s), uniformly sampled at ``dt_s``, NaN in
        gaps; one series, a 2-D array (one row per series) or a list of
        series (e.g. one per drifter).
    dt_s : float
        Sampling interval (s).
    v : array_like or sequence of array_like, optional
        Second component (m/s), same shape as ``u``; when given, the
        correlation of the velocity vector is returned.
    max_lag_s : float, optional
        Largest lag (s); default a quarter of the longest series.
    demean : {"series", "pooled", "none"}, optional
        Remove each series' mean (default), one pooled mean, or nothing.

    Returns
    -------
    Autocorrelation
        Lags, covariance, correlation and pair counts.

    Notes
    -----
    C(k) = sum_i u'_i u'_{i+k} / P(k) over the P(k) pairs with both samples
    present, summed over series before dividing; R = C / C(0) (Taylor 1921;
    LaCasce 2008).  The vector form is Re <w'* w'(tau)> / <|w'|^2>,
    w = u + i v.  Computed with the FFT.

    Examples
    --------
    >>> r = autocorrelation([1.0, -1.0, 1.0, -1.0, 1.0, -1.0], 3600.0, max_lag_s=7200.0)
    >>> r.correlation.round(3).tolist()
    [1.0, -1.0, 1.0]
    """
    dt_s = _check_dt(dt_s)
    us, vs = _prepare(u, v, demean)
    components = [us] if vs is None else [us, vs]
    max_lag = _max_lag(us, dt_s, max_lag_s)
    sums = _lag_sums(components, max_lag, None)
    cov, pairs = _covariance(sums)
    with np.errstate(invalid="ignore", divide="ignore"):
        corr = cov / cov[0] if cov[0] > 0 else np.full_like(cov, np.nan)
    return Autocorrelation(np.arange(max_lag + 1) * dt_s, cov, corr, pairs.astype(np.int64))


class IntegralTimeScale(NamedTuple):
    """An integral time scale and how it was obtained.

    Attributes
    ----------
    time_s : float
        T_L = integral of R from 0 to ``limit_s`` (s).
    limit_s : float
        Upper limit of the integral (s).
    method : str
        The rule for the limit (one of :data:`INTEGRATION_METHODS`).
    limit_found : bool
        False when the rule found no limit within the lags given (no zero
        crossing or minimum, or a NaN lag first) and the integral stops at
        the last usable lag instead.
    """

    time_s: float
    limit_s: float
    method: str
    limit_found: bool


def integral_time_scale(
    lags_s: ArrayLike,
    correlation: ArrayLike,
    method: str = "first_zero",
    *,
    fixed_lag_s: float | None = None,
) -> IntegralTimeScale:
    """Integral time scale T_L = integral of R(tau) from 0 to a chosen limit.

    Parameters
    ----------
    lags_s : array_like
        Lags (s), uniformly spaced from 0.
    correlation : array_like
        R at those lags (dimensionless), R(0) = 1.
    method : {"first_zero", "first_minimum", "fixed_lag"}, optional
        Upper limit: the first zero crossing of R (default; found by linear
        interpolation between the lags around it), the first local minimum
        of R, or ``fixed_lag_s``.
    fixed_lag_s : float, optional
        The limit (s) for ``method="fixed_lag"``; at most the last lag.

    Returns
    -------
    IntegralTimeScale
        T_L (s), the limit used, the method and whether its limit was found.

    Raises
    ------
    ValueError
        On an unknown method, a missing or out-of-range ``fixed_lag_s``, or
        arrays that do not match.

    Notes
    -----
    T_L = integral_0^infinity R dtau (Taylor 1921); in practice the integral
    is cut at the first zero crossing (LaCasce 2008) because the tail of a
    sample R is mostly noise.  The trapezoidal rule is used.

    Examples
    --------
    R = cos(omega tau) first crosses zero at pi / (2 omega), where its
    integral is 1 / omega:

    >>> tau = np.linspace(0.0, 10.0, 10001)
    >>> res = integral_time_scale(tau, np.cos(tau))
    >>> print(f"{res.time_s:.4f} {res.limit_s:.4f}")
    1.0000 1.5708
    """
    tau = np.asarray(lags_s, dtype=float)
    r = np.asarray(correlation, dtype=float)
    if tau.ndim != 1 or tau.shape != r.shape or tau.size < 2:
        raise ValueError(f"lags_s and correlation must be 1-D of one length >= 2, got "
                         f"{tau.shape} and {r.shape}")
    if method not in INTEGRATION_METHODS:
        raise ValueError(f"method must be one of {INTEGRATION_METHODS}, got {method!r}")
    bad = np.flatnonzero(~np.isfinite(r))
    usable = int(bad[0]) if bad.size else r.size
    if usable < 2:
        return IntegralTimeScale(math.nan, math.nan, method, False)
    tau, r = tau[:usable], r[:usable]

    def trapezoid(stop: int) -> float:
        return float(np.sum(0.5 * (r[1:stop + 1] + r[:stop]) * np.diff(tau[:stop + 1])))

    if method == "fixed_lag":
        if fixed_lag_s is None or not math.isfinite(fixed_lag_s) or fixed_lag_s <= 0:
            raise ValueError("method 'fixed_lag' needs a positive fixed_lag_s")
        if fixed_lag_s > tau[-1] * (1 + 1e-12):
            if bad.size:
                return IntegralTimeScale(trapezoid(usable - 1), float(tau[-1]), method, False)
            raise ValueError(f"fixed_lag_s = {fixed_lag_s:g} s is beyond the last lag "
                             f"{tau[-1]:g} s; compute more lags")
        j = int(np.searchsorted(tau, fixed_lag_s, side="right") - 1)
        j = min(j, tau.size - 2)
        frac = (fixed_lag_s - tau[j]) / (tau[j + 1] - tau[j])
        r_end = r[j] + frac * (r[j + 1] - r[j])
        value = trapezoid(j) + 0.5 * (r[j] + r_end) * (fixed_lag_s - tau[j])
        return IntegralTimeScale(value, float(fixed_lag_s), method, True)
    if method == "first_zero":
        crossing = np.flatnonzero(r[1:] <= 0)
        if crossing.size == 0:
            return IntegralTimeScale(trapezoid(usable - 1), float(tau[-1]), method, False)
        j = int(crossing[0]) + 1  # r[j] <= 0 < r[j-1]
        tau0 = tau[j - 1] + r[j - 1] / (r[j - 1] - r[j]) * (tau[j] - tau[j - 1])
        value = trapezoid(j - 1) + 0.5 * r[j - 1] * (tau0 - tau[j - 1])
        return IntegralTimeScale(value, float(tau0), method, True)
    interior = np.flatnonzero((r[1:-1] < r[:-2]) & (r[1:-1] <= r[2:])) + 1
    if interior.size == 0:
        return IntegralTimeScale(trapezoid(usable - 1), float(tau[-1]), method, False)
    j = int(interior[0])
    return IntegralTimeScale(trapezoid(j), float(tau[j]), method, True)


# ---------------------------------------------------------------------------
# displacement dispersion
# ---------------------------------------------------------------------------


def _runs(present: np.ndarray) -> list[tuple[int, int]]:
    """Start and stop indices of the runs of consecutive present samples."""
    edges = np.diff(np.concatenate([[0], present.astype(np.int8), [0]]))
    return list(zip(np.flatnonzero(edges == 1), np.flatnonzero(edges == -1), strict=True))


def _run_dispersion(x: np.ndarray, max_lag: int) -> tuple[np.ndarray, np.ndarray]:
    """Sum over starts i of (sum_{j=i}^{i+k-1} x_j)^2, and the number of starts, k = 0..max_lag.

    With S the cumulative sum (S_0 = 0, m + 1 values), the sum for lag k is
    sum_{i=0}^{m-k} (S_{i+k} - S_i)^2 = A_k + B_k - 2 C_k, where A and B are
    sums of S^2 over the two ends and C the lag-k product of S (by FFT).
    """
    cum = np.concatenate([[0.0], np.cumsum(x)])
    cum -= cum.mean()  # differences are unchanged; smaller numbers cancel better
    m1 = cum.size
    k = np.arange(max_lag + 1)
    valid = k < m1
    sq = np.concatenate([[0.0], np.cumsum(cum * cum)])
    kk = k[valid]
    upper = sq[m1] - sq[kk]  # sum_{i=k}^{m} S_i^2
    lower = sq[m1 - kk]  # sum_{i=0}^{m-k} S_i^2
    nfft = 1 << int(math.ceil(math.log2(2 * m1)))
    spec = np.fft.rfft(cum, nfft)
    prod = np.fft.irfft(spec * np.conj(spec), nfft)[:kk.size]
    squares = np.zeros(max_lag + 1)
    windows = np.zeros(max_lag + 1)
    squares[valid] = np.maximum(upper + lower - 2.0 * prod, 0.0)
    windows[valid] = m1 - kk
    return squares, windows


class Dispersion(NamedTuple):
    """Dispersion of displacements against time.

    Attributes
    ----------
    times_s : numpy.ndarray
        Time since the start of a displacement t (s): 0, dt, 2 dt, ...
    dispersion_m2 : numpy.ndarray
        <x'^2>(t) (m2); for the vector, the mean of the two components'.
    diffusivity_m2_s : numpy.ndarray
        K(t) = 1/2 d<x'^2>/dt (m2/s), by centred differences.
    samples : numpy.ndarray
        Number of displacements averaged at each t.
    """

    times_s: np.ndarray
    dispersion_m2: np.ndarray
    diffusivity_m2_s: np.ndarray
    samples: np.ndarray


def displacement_dispersion(
    u: ArrayLike | Sequence[ArrayLike],
    dt_s: float,
    v: ArrayLike | Sequence[ArrayLike] | None = None,
    *,
    max_lag_s: float | None = None,
    demean: str = "series",
) -> Dispersion:
    """Single-particle dispersion <x'^2>(t) from displacements of the residual velocity.

    Parameters
    ----------
    u : array_like or sequence of array_like
        Velocity component (m/s), uniformly sampled at ``dt_s``, NaN in gaps
        (series as for :func:`autocorrelation`).
    dt_s : float
        Sampling interval (s).
    v : array_like or sequence of array_like, optional
        Second component; when given, the per-component mean of the
        vector's dispersion is returned.
    max_lag_s : float, optional
        Longest displacement time (s); default a quarter of the longest series.
    demean : {"series", "pooled", "none"}, optional
        As for :func:`autocorrelation`.

    Returns
    -------
    Dispersion
        t, <x'^2>(t), K(t) and the number of displacements at each t.

    Notes
    -----
    The displacement over t = k dt starting at sample i is
    x'_i(k) = dt * sum_{j=i}^{i+k-1} u'_j (rectangle rule).  Every start i
    of every series is used (overlapping displacements), and only
    displacements whose k samples are all present.  Taylor (1921):
    <x'^2> -> 2 sigma^2 T_L t and K(t) -> sigma^2 T_L for t >> T_L.

    Examples
    --------
    A constant residual of 1 m/s is ballistic, <x'^2> = t^2:

    >>> res = displacement_dispersion([1.0] * 10, 1.0, max_lag_s=3.0, demean="none")
    >>> res.dispersion_m2.round(6).tolist()
    [0.0, 1.0, 4.0, 9.0]
    """
    dt_s = _check_dt(dt_s)
    us, vs = _prepare(u, v, demean)
    max_lag = _max_lag(us, dt_s, max_lag_s)
    components = [us] if vs is None else [us, vs]
    total = np.zeros(max_lag + 1)
    count = np.zeros(max_lag + 1)
    for comp in components:
        for series in comp:
            for start, stop in _runs(np.isfinite(series)):
                squares, windows = _run_dispersion(series[start:stop], max_lag)
                total += squares
                count += windows
    total *= dt_s * dt_s
    count_c = count / len(components)
    with np.errstate(invalid="ignore", divide="ignore"):
        disp2 = np.where(count > 0, total / np.where(count > 0, count, 1.0), np.nan)
    disp2[0] = 0.0
    count_c[0] = sum(np.isfinite(a).sum() for a in us)
    times = np.arange(max_lag + 1) * dt_s
    diffusivity = 0.5 * np.gradient(disp2, times)
    return Dispersion(times, disp2, diffusivity, np.rint(count_c).astype(np.int64))


# ---------------------------------------------------------------------------
# sigma^2, T_L, K with confidence intervals
# ---------------------------------------------------------------------------


@dataclass(frozen=True)
class ComponentStatistics:
    """Single-particle statistics of one velocity component or of the vector.

    Attributes
    ----------
    component : str
        ``"u"`` (east), ``"v"`` (north) or ``"vector"``.
    samples : int
        Samples present N.
    variance_m2_s2 : float
        sigma^2 (m2/s2); for the vector (sigma_u^2 + sigma_v^2) / 2.
    integral_time_s : float
        T_L (s).
    diffusivity_m2_s : float
        K = sigma^2 T_L (m2/s).
    method : str
        Rule for the integration limit.
    limit_s : float
        Integration limit used (s).
    limit_found : bool
        Whether the rule found its limit (see :class:`IntegralTimeScale`).
    dof_effective : float
        N dt / (2 T_L) (common practice); NaN if T_L <= 0.
    variance_ci_m2_s2, integral_time_ci_s, diffusivity_ci_m2_s : tuple of float
        Bootstrap percentile intervals (low, high); NaN when there were
        fewer than :data:`MIN_BLOCKS` blocks.
    confidence : float
        Level of the intervals.
    blocks : int
        Number of bootstrap blocks.
    block_s : float
        Block length (s).
    correlation : Autocorrelation
        R(tau) of the pooled series.
    """

    component: str
    samples: int
    variance_m2_s2: float
    integral_time_s: float
    diffusivity_m2_s: float
    method: str
    limit_s: float
    limit_found: bool
    dof_effective: float
    variance_ci_m2_s2: tuple[float, float]
    integral_time_ci_s: tuple[float, float]
    diffusivity_ci_m2_s: tuple[float, float]
    confidence: float
    blocks: int
    block_s: float
    correlation: Autocorrelation = field(repr=False)


def _scale(cov: np.ndarray, lags: np.ndarray, method: str,
           fixed_lag_s: float | None) -> IntegralTimeScale:
    if not (np.isfinite(cov[0]) and cov[0] > 0):
        return IntegralTimeScale(math.nan, math.nan, method, False)
    return integral_time_scale(lags, cov / cov[0], method, fixed_lag_s=fixed_lag_s)


def _prefix_sums(terms: np.ndarray, stops: np.ndarray) -> np.ndarray:
    """``float(np.sum(terms[i, :stops[i]]))`` for every row i.

    Rows with the same stop are summed together along the last axis, which
    NumPy adds up row by row with the pairwise summation it uses for a 1-D
    array, so each value is the one the 1-D sum gives, to the last bit.
    """
    out = np.zeros(stops.size)
    for stop in np.unique(stops).tolist():
        rows = np.flatnonzero(stops == stop)
        out[rows] = np.sum(np.ascontiguousarray(terms[rows, :stop]), axis=1)
    return out


def _time_scales(cov: np.ndarray, lags: np.ndarray, method: str,
                 fixed_lag_s: float | None) -> np.ndarray:
    """T_L of every row of ``cov`` (one bootstrap resample per row), all rows at once.

    The value of each row is ``_scale(row, lags, method, fixed_lag_s).time_s``
    with the same floating-point operations in the same order (so the same
    bits); the rules are those of :func:`integral_time_scale`.
    """
    n_rows, n_lags = cov.shape
    out = np.full(n_rows, math.nan)
    c0 = cov[:, 0]
    rows = np.flatnonzero(np.isfinite(c0) & (c0 > 0))
    if rows.size == 0:
        return out
    if method not in INTEGRATION_METHODS or n_lags < 2:
        # let the scalar rule raise its error
        integral_time_scale(lags, cov[rows[0]] / c0[rows[0]], method, fixed_lag_s=fixed_lag_s)
    r = cov[rows] / c0[rows, None]
    bad = ~np.isfinite(r)
    has_bad = bad.any(axis=1)
    usable = np.where(has_bad, bad.argmax(axis=1), n_lags)
    keep = usable >= 2
    rows, r, usable, has_bad = rows[keep], r[keep], usable[keep], has_bad[keep]
    if rows.size == 0:
        return out

    def trapezoid(stops: np.ndarray) -> np.ndarray:
        """Trapezoidal integral of each row's R from lag 0 to lag ``stops``."""
        m = int(stops.max())
        with np.errstate(invalid="ignore", over="ignore"):  # lags past a row's NaN are unused
            terms = 0.5 * (r[:, 1:m + 1] + r[:, :m]) * np.diff(lags[:m + 1])
        return _prefix_sums(terms, stops)

    at = np.arange(rows.size)
    j_lag = np.arange(1, n_lags)  # lag index of column c of r[:, 1:]
    if method == "fixed_lag":
        if fixed_lag_s is None or not math.isfinite(fixed_lag_s) or fixed_lag_s <= 0:
            integral_time_scale(lags, r[0], method, fixed_lag_s=fixed_lag_s)  # raises
        beyond = fixed_lag_s > lags[usable - 1] * (1 + 1e-12)
        if np.any(beyond & ~has_bad):
            first = int(np.flatnonzero(beyond & ~has_bad)[0])
            integral_time_scale(lags, r[first], method, fixed_lag_s=fixed_lag_s)  # raises
        j = np.minimum(int(np.searchsorted(lags, fixed_lag_s, side="right") - 1), usable - 2)
        value = trapezoid(np.where(beyond, usable - 1, j))
        inside = ~beyond
        ji, ai = j[inside], at[inside]
        frac = (fixed_lag_s - lags[ji]) / (lags[ji + 1] - lags[ji])
        r_end = r[ai, ji] + frac * (r[ai, ji + 1] - r[ai, ji])
        value[inside] = value[inside] + 0.5 * (r[ai, ji] + r_end) * (fixed_lag_s - lags[ji])
    elif method == "first_zero":
        crossing = (r[:, 1:] <= 0) & (j_lag[None, :] < usable[:, None])
        found = crossing.any(axis=1)
        j = crossing.argmax(axis=1) + 1  # r[j] <= 0 < r[j-1] where found
        value = trapezoid(np.where(found, j - 1, usable - 1))
        jf, af = j[found], at[found]
        before, after = r[af, jf - 1], r[af, jf]
        tau0 = lags[jf - 1] + before / (before - after) * (lags[jf] - lags[jf - 1])
        value[found] = value[found] + 0.5 * before * (tau0 - lags[jf - 1])
    else:  # first_minimum
        minimum = ((r[:, 1:-1] < r[:, :-2]) & (r[:, 1:-1] <= r[:, 2:])
                   & (j_lag[None, :-1] < (usable - 1)[:, None]))
        found = minimum.any(axis=1)
        first = minimum.argmax(axis=1) + 1 if n_lags > 2 else usable
        value = trapezoid(np.where(found, first, usable - 1))
    out[rows] = value
    return out


def _interval(values: np.ndarray, alpha: float) -> tuple[float, float]:
    """Percentile interval (alpha, 1 - alpha) of the finite values."""
    values = values[np.isfinite(values)]
    if values.size == 0:
        return (math.nan, math.nan)
    low, high = np.quantile(values, [alpha, 1.0 - alpha])
    return float(low), float(high)


def single_particle_statistics(
    u: ArrayLike | Sequence[ArrayLike],
    v: ArrayLike | Sequence[ArrayLike],
    dt_s: float,
    *,
    method: str = "first_zero",
    fixed_lag_s: float | None = None,
    max_lag_s: float | None = None,
    demean: str = "series",
    block_s: float | None = None,
    n_boot: int = 1000,
    confidence: float = 0.95,
    seed: int = 0,
) -> dict[str, ComponentStatistics]:
    """Velocity variance, integral time scale and diffusivity with confidence intervals.

    Parameters
    ----------
    u, v : array_like or sequence of array_like
        East and north residual velocity (m/s), uniformly sampled at
        ``dt_s``, NaN in gaps; one series or one per drifter (pooled).
    dt_s : float
        Sampling interval (s).
    method : {"first_zero", "first_minimum", "fixed_lag"}, optional
        Integration limit of R (:func:`integral_time_scale`).
    fixed_lag_s : float, optional
        Limit (s) for ``method="fixed_lag"``.
    max_lag_s : float, optional
        Largest lag computed (s); default a quarter of the longest series,
        and at least ``fixed_lag_s``.
    demean : {"series", "pooled", "none"}, optional
        Mean removal (:func:`autocorrelation`).
    block_s : float, optional
        Bootstrap block length (s); default ten times the vector T_L, at
        least twice the largest integration limit.
    n_boot : int, optional
        Bootstrap resamples.
    confidence : float, optional
        Level of the percentile intervals, in (0, 1).
    seed : int, optional
        Seed of the resampling.

    Returns
    -------
    dict of str to ComponentStatistics
        Keys ``"u"``, ``"v"``, ``"vector"``.

    Notes
    -----
    K = sigma^2 T_L (Taylor 1921; LaCasce 2008).  The estimators, the
    bootstrap and the effect of leftover inertial oscillations are described
    in the module docstring (:mod:`driftloop.dispersion`).
    """
    dt_s = _check_dt(dt_s)
    if not 0 < confidence < 1:
        raise ValueError(f"confidence must be in (0, 1), got {confidence}")
    if n_boot < 1:
        raise ValueError(f"n_boot must be at least 1, got {n_boot}")
    us, vs = _prepare(u, v, demean)
    if fixed_lag_s is not None and (max_lag_s is None or max_lag_s < fixed_lag_s):
        max_lag_s = max(fixed_lag_s + dt_s, max_lag_s or 0.0)
    max_lag = _max_lag(us, dt_s, max_lag_s)
    lags = np.arange(max_lag + 1) * dt_s

    whole = _lag_sums([us, vs], max_lag, None)
    singles = {"u": _Sums([whole.products[0]], whole.pairs),
               "v": _Sums([whole.products[1]], whole.pairs),
               "vector": whole}
    point = {}
    for name, sums in singles.items():
        cov, pairs = _covariance(sums)
        point[name] = (cov, pairs, _scale(cov, lags, method, fixed_lag_s))
    samples = int(sum(np.isfinite(a).sum() for a in us))
    if block_s is None:
        scales = [p[2] for p in point.values()]
        t_vec = point["vector"][2].time_s
        limit = max((s.limit_s for s in scales if math.isfinite(s.limit_s)), default=dt_s)
        base = 10.0 * t_vec if math.isfinite(t_vec) and t_vec > 0 else 10.0 * limit
        block_s = max(base, 2.0 * limit, dt_s * 2)
    block = max(1, int(round(block_s / dt_s)))
    blocked = _lag_sums([us, vs], max_lag, block)
    n_blocks = blocked.pairs.shape[0]
    rng = np.random.default_rng(seed)
    weights = rep_pairs = None
    if n_blocks >= MIN_BLOCKS:
        draws = rng.integers(0, n_blocks, size=(n_boot, n_blocks))
        # times each block is drawn in each resample (exact small integers)
        flat = (np.arange(n_boot)[:, None] * n_blocks + draws).ravel()
        weights = np.bincount(flat, minlength=n_boot * n_blocks).reshape(n_boot, n_blocks)
        weights = weights.astype(float)
        # pair counts per resample: sums of integers, exact in any order, shared
        rep_pairs = weights @ blocked.pairs
    alpha = 0.5 * (1.0 - confidence)
    out = {}
    for name in ("u", "v", "vector"):
        cov, pairs, scale = point[name]
        variance = float(cov[0])
        nan2 = (math.nan, math.nan)
        ci_var, ci_t, ci_k = nan2, nan2, nan2
        if weights is not None:
            chosen = {"u": [blocked.products[0]], "v": [blocked.products[1]],
                      "vector": blocked.products}[name]
            rep_cov, _ = _covariance(_Sums(chosen, blocked.pairs), weights, rep_pairs)
            rep_t = _time_scales(rep_cov, lags, method, fixed_lag_s)
            rep_var = rep_cov[:, 0]
            rep_k = rep_var * rep_t

            ci_var, ci_t, ci_k = (_interval(rep_var, alpha), _interval(rep_t, alpha),
                                  _interval(rep_k, alpha))
        t_l = scale.time_s
        dof = samples * dt_s / (2.0 * t_l) if math.isfinite(t_l) and t_l > 0 else math.nan
        corr = cov / cov[0] if cov[0] > 0 else np.full_like(cov, np.nan)
        out[name] = ComponentStatistics(
            component=name, samples=samples, variance_m2_s2=variance,
            integral_time_s=t_l, diffusivity_m2_s=variance * t_l, method=method,
            limit_s=scale.limit_s, limit_found=scale.limit_found, dof_effective=dof,
            variance_ci_m2_s2=ci_var, integral_time_ci_s=ci_t, diffusivity_ci_m2_s=ci_k,
            confidence=confidence, blocks=n_blocks, block_s=block * dt_s,
            correlation=Autocorrelation(lags, cov, corr, pairs.astype(np.int64)),
        )
    return out


def _regrid(group: pd.DataFrame, dt_s: float, drifter: str) -> tuple[np.ndarray, np.ndarray]:
    t = pd.DatetimeIndex(pd.to_datetime(group["time"], utc=True)).as_unit("ns").asi8
    return _regrid_arrays(t, group["u_m_s"].to_numpy(dtype=float),
                          group["v_m_s"].to_numpy(dtype=float), dt_s, drifter)


def _regrid_arrays(t: np.ndarray, u_values: np.ndarray, v_values: np.ndarray, dt_s: float,
                   drifter: str) -> tuple[np.ndarray, np.ndarray]:
    """Place a drifter's u and v on its grid of ``dt_s`` from its first time (NaN in gaps).

    ``t`` holds the times (ns since the epoch), in any order, of the values.
    """
    order = np.argsort(t, kind="stable")
    t = (t[order] - t[order][0]) * 1e-9
    slot = t / dt_s
    index = np.rint(slot).astype(np.int64)
    if np.any(np.abs(slot - index) > 1e-3):
        raise ValueError(f"drifter {drifter!r}: times are not on a uniform grid of "
                         f"{dt_s:g} s; resample the velocities first")
    if np.any(np.diff(index) == 0):
        raise ValueError(f"drifter {drifter!r}: two velocities in one {dt_s:g} s slot")
    u = np.full(int(index[-1]) + 1, np.nan)
    v = np.full(int(index[-1]) + 1, np.nan)
    u[index] = u_values[order]
    v[index] = v_values[order]
    return u, v


def dispersion_by_drifter(
    velocities: pd.DataFrame,
    dt_s: float,
    *,
    release: bool = True,
    release_label: str = "(release)",
    **options,
) -> pd.DataFrame:
    """Single-particle statistics per drifter and for the release pooling them.

    Parameters
    ----------
    velocities : pandas.DataFrame
        Residual velocities: columns ``drifter_id``, ``time`` (UTC),
        ``u_m_s`` and ``v_m_s`` (east and north, m/s).  Each drifter's times
        lie on a uniform grid of ``dt_s`` from its first time; missing grid
        times and NaN velocities are gaps.
    dt_s : float
        Sampling interval (s).
    release : bool, optional
        Add rows for all drifters pooled (each with its own mean removed
        unless ``demean`` says otherwise).
    release_label : str, optional
        ``drifter_id`` of the pooled rows.
    **options
        Passed to :func:`single_particle_statistics` (``method``,
        ``fixed_lag_s``, ``max_lag_s``, ``demean``, ``block_s``, ``n_boot``,
        ``confidence``, ``seed``).

    Returns
    -------
    pandas.DataFrame
        Columns :data:`DISPERSION_COLUMNS`, three rows (``u``, ``v``,
        ``vector``) per drifter and for the release; drifters with fewer
        than three samples of both components get no rows of their own.

    Raises
    ------
    ValueError
        If a column is missing or a drifter's times are not on the grid.
    """
    missing = [c for c in ("drifter_id", "time", "u_m_s", "v_m_s") if c not in velocities]
    if missing:
        raise ValueError(f"velocities lacks column(s) {missing}")
    dt_s = _check_dt(dt_s)
    series: dict[str, tuple[np.ndarray, np.ndarray]] = {}
    for drifter, group in velocities.groupby("drifter_id", sort=True, observed=True):
        series[str(drifter)] = _regrid(group, dt_s, str(drifter))
    rows = []

    def add(label: str, stats: Mapping[str, ComponentStatistics], duration: float) -> None:
        for name, st in stats.items():
            rows.append({
                "drifter_id": label, "component": name, "samples": st.samples,
                "duration_s": duration, "variance_m2_s2": st.variance_m2_s2,
                "variance_low_m2_s2": st.variance_ci_m2_s2[0],
                "variance_high_m2_s2": st.variance_ci_m2_s2[1],
                "integral_time_s": st.integral_time_s,
                "integral_time_low_s": st.integral_time_ci_s[0],
                "integral_time_high_s": st.integral_time_ci_s[1],
                "diffusivity_m2_s": st.diffusivity_m2_s,
                "diffusivity_low_m2_s": st.diffusivity_ci_m2_s[0],
                "diffusivity_high_m2_s": st.diffusivity_ci_m2_s[1],
                "method": st.method, "limit_s": st.limit_s, "limit_found": st.limit_found,
                "dof_effective": st.dof_effective, "blocks": st.blocks, "block_s": st.block_s,
            })

    for drifter, (u, v) in series.items():
        if (np.isfinite(u) & np.isfinite(v)).sum() < 3:
            continue
        add(drifter, single_particle_statistics(u, v, dt_s, **options), u.size * dt_s)
    if release and series:
        us = [s[0] for s in series.values()]
        vs = [s[1] for s in series.values()]
        add(release_label, single_particle_statistics(us, vs, dt_s, **options),
            float(sum(a.size for a in us) * dt_s))
    return pd.DataFrame(rows, columns=list(DISPERSION_COLUMNS))
