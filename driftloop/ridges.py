"""Wavelet ridges of a rotary transform: points, chains, estimates and summaries.

:func:`find_ridges` turns a :class:`~driftloop.wavelet.RotaryTransform` into a
list of :class:`Ridge`; :func:`detect` runs the transform and the ridge
analysis on one segment; :func:`ridge_table` summarises ridges as a table.

Method
------
**Ridge points** (Delprat et al. 1992; Lilly & Olhede 2010, 2012).  An
amplitude ridge point is a local maximum of |W| across scale at fixed time,
in one rotary transform, above a threshold and outside the cone of
influence.  With 1/s normalisation a tone peaks at s omega_0 =
omega_{beta,gamma}, where Psi' = 0.  Near its maximum ln |Psi(s omega)| is
quadratic in ln s with curvature -P^2 (*derived*), so the point is refined
by a parabola through ln |W| at the three neighbouring log-spaced scales;
the complex transform at the refined scale takes the parabola's value as
modulus and the quadratic (Lagrange) interpolant's argument as phase.  The
other rotary transform is read at the same refined scale and time.

A point counts only in the transform of the stronger rotary component at
its scale and time, so that an ellipse gives one ridge, in the sense of its
semi-minor axis b, with the weaker component as its other-sense value.

**Chaining.**  Points of the same sense at consecutive samples are linked
when each is the other's nearest point in log-scale (mutual nearest
neighbours) and their scale frequencies differ by at most the fraction
(1 + c)^(dt/T) - 1 per step, c = ``max_frequency_change_per_cycle``: the
bound is stated per cycle so that it means the same at every scale, which
the significance calibration relies on.  Chains never bridge a sample
without a point (masked, below threshold or outside the cone) and never
switch rotation sense (Lilly & Perez-Brunius 2021).  Chains shorter than
``min_cycles`` cycles, N = sum dt / T over the refined scale periods T, are
dropped.  Point search and chaining are vectorised (binary search for the
nearest neighbours, pointer jumping for the chains).

**Ridge estimates.**  The instantaneous frequency is the phase derivative
of the ridge-sense transform (Delprat et al. 1992), from the mean of the
two adjacent phase increments arg(W_{n+1} W_n^*) (each below pi for
periods above two samples); it is signed: positive on counter-clockwise,
negative on clockwise ridges.  The scale frequency 2 pi / T_j of the refined
scale is kept beside it.

**Bias correction** (*derived*, after Lilly & Olhede 2010, whose result has
this form; form and P^2 scaling quoted from memory).  Expanding the
signal x(t + tau) = a(t + tau) exp(i phi(t + tau)) about t to second order,
with tau^n exp(i omega tau) mapping to (-i d/d omega)^n of Psi,

    W(t, s) = x(t) [Psi(s omega) - i (a'/a) s Psi'(s omega)
                    - (1/2)(a''/a + i omega') s^2 Psi''(s omega)] + ...

At the ridge s omega = omega_{beta,gamma}: Psi' = 0 and s^2 Psi''/Psi =
-P^2 exactly for Morse wavelets (*derived*), so with the rotary factor 1/2

    W+- = x(t) (1 + P^2 rho_2),    rho_2 = (a''/a + i omega') / (2 omega^2).

The estimate x = W / (1 + P^2 rho_2) corrects amplitude and phase.  a''/a =
(ln a)'' + ((ln a)')^2 and omega' are taken from local quadratic
least-squares fits (Savitzky-Golay) over about one period of the ridge's own
ln amplitude and frequency, the window shrinking at the ridge ends; the
correction is applied to both rotary values (a steady ellipse shape gives
both the same modulation), is skipped on ridges shorter than five samples
and |P^2 rho_2| is capped at 0.5, beyond which the expansion is not valid.

**Ellipse** (Lilly & Gascard 2006; *derived*).  With z = A+ exp(i phi+) +
A- exp(-i phi-) = exp(i theta) (a cos phi + i b sin phi),

    a = A+ + A-,  b = A+ - A- (> 0 counter-clockwise),
    theta = (phi+ - phi-) / 2,  phi = (phi+ + phi-) / 2,

in speed units (m/s).  Displacements are velocities integrated over time,
so their ellipse has axes a/|omega|, b/|omega| (m) and the circular radius
of the ridge is R = A/|omega| with A its own-sense amplitude; the mean
radius is sqrt(a |b|) / |omega| (from memory, METHODS section 7).

**Decay rate**: least-squares slope of ln A against time, sign changed
(1/s, positive for decaying motion).

References
----------
Delprat, N., et al., 1992: Asymptotic wavelet and Gabor analysis:
extraction of instantaneous frequencies.  IEEE Trans. Inf. Theory 38(2)
(issue from memory).

Lilly, J. M., and J.-C. Gascard, 2006: Wavelet ridge diagnosis of
time-varying elliptical signals with application to an oceanic eddy.
Nonlin. Processes Geophys., 13, 467-483.

Lilly, J. M., and S. C. Olhede, 2010: On the analytic wavelet transform.
IEEE Trans. Inf. Theory, 56(8), 4135-4156.

Lilly, J. M., and S. C. Olhede, 2012: Analysis of modulated multivariate
oscillations.  IEEE Trans. Signal Process., 60 (details from memory).

Lilly, J. M., and P. Perez-Brunius, 2021: Extracting statistically
significant eddy signals from large Lagrangian datasets using wavelet ridge
analysis.  Nonlin. Processes Geophys., 28, 181-.
"""

from __future__ import annotations

import dataclasses
import math
from dataclasses import dataclass, field
from typing import NamedTuple

import numpy as np
import pandas as pd

from driftloop import wavelet
from driftloop.wavelet import RotaryTransform, WaveletConfig, scratch

__all__ = [
    "Candidates",
    "Ridge",
    "RidgeResult",
    "candidate_ridges",
    "detect",
    "find_ridges",
    "ridge_table",
]

_TINY = 1e-300


@dataclass(frozen=True, eq=False)
class Ridge:
    """One wavelet ridge: per-sample estimates along it and summary properties.

    All arrays have one value per ridge sample.  Speeds in m/s, lengths in
    m, angles in radians, frequencies in rad/s (signed: > 0 counter-clockwise).

    Attributes
    ----------
    sense : int
        +1 counter-clockwise (found in W+), -1 clockwise (found in W-).
    index : numpy.ndarray
        Sample indices in the segment, consecutive.
    dt_s : float
        Sample interval (s).
    frequency_rad_s : numpy.ndarray
        Instantaneous frequency from the phase derivative (signed).
    scale_frequency_rad_s : numpy.ndarray
        Peak frequency of the refined ridge scale, 2 pi / T (signed).
    amplitude_m_s : numpy.ndarray
        Own-sense speed amplitude A (bias-corrected if configured).
    phase_rad : numpy.ndarray
        Own-sense phase arg W (bias-corrected if configured).
    amplitude_ccw_m_s, amplitude_cw_m_s : numpy.ndarray
        A+ and A- at the ridge scale.
    phase_ccw_rad, phase_cw_rad : numpy.ndarray
        phi+ and phi- at the ridge scale.
    snr : numpy.ndarray
        Uncorrected |W| over the background noise rms at the ridge scale
        (NaN without a significance test).
    statistic : float
        Significance statistic: sum of snr^2 |omega| dt / 2 pi (NaN without test).
    threshold : float
        Value of ``statistic`` needed to be kept (NaN without test).
    """

    sense: int
    index: np.ndarray
    dt_s: float
    frequency_rad_s: np.ndarray
    scale_frequency_rad_s: np.ndarray
    amplitude_m_s: np.ndarray
    phase_rad: np.ndarray
    amplitude_ccw_m_s: np.ndarray
    amplitude_cw_m_s: np.ndarray
    phase_ccw_rad: np.ndarray
    phase_cw_rad: np.ndarray
    snr: np.ndarray = field(repr=False)
    statistic: float = math.nan
    threshold: float = math.nan

    @property
    def start(self) -> int:
        """First sample index."""
        return int(self.index[0])

    @property
    def end(self) -> int:
        """Last sample index (inclusive)."""
        return int(self.index[-1])

    @property
    def sense_name(self) -> str:
        """``"ccw"`` or ``"cw"``."""
        return "ccw" if self.sense > 0 else "cw"

    @property
    def n_cycles(self) -> float:
        """Length in cycles, sum |omega| dt / 2 pi."""
        return float(np.sum(np.abs(self.frequency_rad_s)) * self.dt_s / (2.0 * np.pi))

    @property
    def duration_s(self) -> float:
        """Number of samples times dt (s)."""
        return len(self.index) * self.dt_s

    @property
    def mean_period_s(self) -> float:
        """Duration over number of cycles, 2 pi / mean |omega| (s)."""
        return float(2.0 * np.pi / np.mean(np.abs(self.frequency_rad_s)))

    @property
    def mean_amplitude_m_s(self) -> float:
        """Mean own-sense speed amplitude (m/s)."""
        return float(np.mean(self.amplitude_m_s))

    @property
    def semi_major_m_s(self) -> np.ndarray:
        """Speed-ellipse semi-major axis a = A+ + A- (m/s)."""
        return self.amplitude_ccw_m_s + self.amplitude_cw_m_s

    @property
    def semi_minor_m_s(self) -> np.ndarray:
        """Speed-ellipse semi-minor axis b = A+ - A- (m/s), > 0 counter-clockwise."""
        return self.amplitude_ccw_m_s - self.amplitude_cw_m_s

    @property
    def orientation_rad(self) -> np.ndarray:
        """Ellipse orientation theta = (phi+ - phi-)/2, in (-pi/2, pi/2], from east."""
        return np.angle(np.exp(1j * (self.phase_ccw_rad - self.phase_cw_rad))) / 2.0

    @property
    def ellipse_phase_rad(self) -> np.ndarray:
        """Ellipse phase phi = phi+ - theta (so that phi+ = theta + phi)."""
        return np.angle(np.exp(1j * (self.phase_ccw_rad - self.orientation_rad)))

    @property
    def radius_m(self) -> np.ndarray:
        """Circular displacement radius R = A / |omega| (m)."""
        return self.amplitude_m_s / np.abs(self.frequency_rad_s)

    @property
    def semi_major_m(self) -> np.ndarray:
        """Displacement-ellipse semi-major axis a / |omega| (m)."""
        return self.semi_major_m_s / np.abs(self.frequency_rad_s)

    @property
    def semi_minor_m(self) -> np.ndarray:
        """Displacement-ellipse semi-minor axis b / |omega| (m), signed like b."""
        return self.semi_minor_m_s / np.abs(self.frequency_rad_s)

    @property
    def mean_radius_m(self) -> float:
        """Mean circular radius R = A / |omega| along the ridge (m)."""
        return float(np.mean(self.radius_m))

    @property
    def decay_rate_per_s(self) -> float:
        """Minus the least-squares slope of ln A against time (1/s); > 0 decaying."""
        if len(self.index) < 2:
            return math.nan
        t = self.index * self.dt_s
        slope = np.polyfit(t - t.mean(), np.log(np.maximum(self.amplitude_m_s, _TINY)), 1)[0]
        return float(-slope)

    def summary(self) -> dict:
        """Return the one-line summary of the ridge.

        Returns
        -------
        dict
            ``sense``, ``start``, ``end``, ``n_cycles``, ``mean_period_s``,
            ``mean_amplitude_m_s``, ``mean_radius_m``, ``decay_rate_per_s``,
            ``statistic``, ``threshold``.
        """
        return {
            "sense": self.sense_name,
            "start": self.start,
            "end": self.end,
            "n_cycles": self.n_cycles,
            "mean_period_s": self.mean_period_s,
            "mean_amplitude_m_s": self.mean_amplitude_m_s,
            "mean_radius_m": self.mean_radius_m,
            "decay_rate_per_s": self.decay_rate_per_s,
            "statistic": self.statistic,
            "threshold": self.threshold,
        }


class Candidates(NamedTuple):
    """Chained ridge points before the significance test and the estimates.

    All point arrays are ordered by chain, then time.

    Attributes
    ----------
    sense : numpy.ndarray
        +1 / -1 per point.
    t : numpy.ndarray
        Sample index per point.
    x : numpy.ndarray
        Refined fractional scale index per point.
    log_amp : numpy.ndarray
        ln |W| at the refined scale (uncorrected).
    snr2 : numpy.ndarray
        |W|^2 over the background noise variance (NaN without background).
    starts : numpy.ndarray
        Index of the first point of each chain; ``starts[-1]`` is the end.
    cycles : numpy.ndarray
        Length in cycles of each chain, sum dt / T over its points, T the
        refined scale period.
    statistic : numpy.ndarray
        sum snr^2 dt / T per chain.
    """

    sense: np.ndarray
    t: np.ndarray
    x: np.ndarray
    log_amp: np.ndarray
    snr2: np.ndarray
    starts: np.ndarray
    cycles: np.ndarray
    statistic: np.ndarray


def _both_senses(tr: RotaryTransform) -> np.ndarray:
    """W+ and W- as one (2 J, >= N) array: a view of the transform's buffer if possible."""
    n_p, n = tr.w_ccw.shape
    base = tr.w_ccw.base
    if (base is not None and base is tr.w_cw.base and base.ndim == 2
            and base.shape[0] == 2 * n_p and base.shape[1] >= n
            and np.shares_memory(base[:1, :1], tr.w_ccw[:1, :1])
            and np.shares_memory(base[n_p:n_p + 1, :1], tr.w_cw[:1, :1])):
        return base
    return np.concatenate((tr.w_ccw, tr.w_cw))


def _unit(w: np.ndarray) -> np.ndarray:
    mag = np.abs(w)
    return np.where(mag > 0, w / np.where(mag > 0, mag, 1.0), 1.0)


def _squared_thresholds(config: WaveletConfig, n_p: int, noise_variance: np.ndarray | None,
                        dtype) -> np.ndarray:
    """(2, J) squared amplitude thresholds of ridge points, in the dtype of the power."""
    thr = np.full((2, n_p), config.amplitude_floor_m_s)
    if noise_variance is not None:
        thr = np.maximum(thr, config.min_point_snr * np.sqrt(noise_variance))
    return np.square(thr).astype(dtype)


def _stored_power(tr: RotaryTransform) -> np.ndarray:
    """|W+-|^2 of a stored transform, (2, J, N), computed a few rows at a time."""
    n_p, n = tr.w_ccw.shape
    real_t = np.zeros(1, dtype=tr.w_ccw.dtype).real.dtype
    power = scratch("ridges.power", (2, n_p, n), real_t)
    rows = max(1, wavelet.BLOCK_BYTES // max(1, 16 * n))
    tmp = scratch("ridges.squares", (rows, 2 * n), real_t)
    for s, w in enumerate((tr.w_ccw, tr.w_cw)):
        if w.strides[-1] != w.itemsize:
            w = np.ascontiguousarray(w)
        for a in range(0, n_p, rows):
            v = w[a:a + rows].view(real_t)
            sq = tmp[:v.shape[0]]
            np.multiply(v, v, out=sq)
            np.add(sq[:, 0::2], sq[:, 1::2], out=power[s, a:a + rows])
    return power


def _maxima(power: np.ndarray, thr2: np.ndarray, inside: np.ndarray, j_lo: int, j_hi: int
            ) -> np.ndarray:
    """Flat indices into ``power`` of the ridge-point candidates at scales j_lo .. j_hi.

    A candidate is a local maximum of |W|^2 across scale (rising into scale j
    and not rising out of it) above the squared threshold and outside the
    cone of influence (``inside``); rows j_lo - 1 .. j_hi + 1 must be filled.
    """
    _, n_p, n = power.shape
    k = j_hi - j_lo + 1
    rises = scratch("ridges.rises", (2, k + 1, n), bool)
    np.greater(power[:, j_lo:j_hi + 2], power[:, j_lo - 1:j_hi + 1], out=rises)
    is_max = scratch("ridges.is_max", (2, k, n), bool)
    np.greater(rises[:, :k], rises[:, 1:], out=is_max)  # rises in and does not rise out
    above = scratch("ridges.above", (2, k, n), bool)
    np.greater(power[:, j_lo:j_hi + 1], thr2[:, j_lo:j_hi + 1, None], out=above)
    np.logical_and(is_max, above, out=is_max)
    np.logical_and(is_max, inside[None, j_lo:j_hi + 1], out=is_max)
    flat = np.flatnonzero(is_max)
    s_idx, rest = np.divmod(flat, k * n)
    return (s_idx * n_p + j_lo) * n + rest


def _grid_points(power: np.ndarray, flat: np.ndarray):
    """Refined ridge points from the candidates: sense, time, grid scale, scale, ln |W|."""
    _, n_p, n = power.shape
    plane = n_p * n
    pf = power.reshape(-1)
    s_idx = flat // plane
    own = pf[flat]
    # a ridge has the sense of the stronger rotary component at its scale (the sign
    # of the ellipse's b): the weaker one is its other-sense value, not a ridge
    dominant = own >= pf[flat + (1 - 2 * s_idx) * plane]
    flat, s_idx, own = flat[dominant], s_idx[dominant], own[dominant]
    if len(flat) == 0:
        return None
    rest = flat - s_idx * plane
    j_idx, t_idx = np.divmod(rest, n)
    # ln |W| = ln(|W|^2) / 2 at the three scales around the maximum
    lm, l0, lp = (0.5 * np.log(np.maximum(v.astype(np.float64), _TINY))
                  for v in (pf[flat - n], own, pf[flat + n]))
    curv = lm - 2.0 * l0 + lp
    safe = np.where(curv < 0, curv, -1.0)
    delta = np.clip(np.where(curv < 0, 0.5 * (lm - lp) / safe, 0.0), -0.5, 0.5)
    log_peak = l0 - 0.25 * (lm - lp) * delta
    return 1 - 2 * s_idx, t_idx, j_idx, j_idx + delta, log_peak


def _complex_at(both: np.ndarray, n_p: int, sense: np.ndarray, t: np.ndarray, x: np.ndarray,
                log_amp: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Own- and other-sense transform at refined scales: parabolic modulus, Lagrange phase."""
    j = np.clip(np.rint(x).astype(np.int64), 1, n_p - 2)
    delta = x - j
    s_idx = (1 - sense) // 2
    wm, w0, wp = 0.5 * delta * (delta - 1.0), 1.0 - delta ** 2, 0.5 * delta * (delta + 1.0)
    own_row = s_idx * n_p + j
    other_row = own_row + (1 - 2 * s_idx) * n_p
    if both.flags.c_contiguous:
        flat, stride = both.reshape(-1), both.shape[1]
        near = np.arange(-1, 2)[:, None]
        o = flat.take((own_row + near) * stride + t)
        v = flat.take((other_row + near) * stride + t)
    else:
        o = np.stack([both[own_row + d, t] for d in (-1, 0, 1)])
        v = np.stack([both[other_row + d, t] for d in (-1, 0, 1)])
    own = wm * o[0] + w0 * o[1] + wp * o[2]
    w_own = np.exp(log_amp) * _unit(own)
    lm, l0, lp = np.log(np.maximum(np.abs(v), _TINY))
    log_other = l0 + 0.5 * (lp - lm) * delta + 0.5 * (lm - 2.0 * l0 + lp) * delta ** 2
    w_other = np.exp(log_other) * _unit(wm * v[0] + w0 * v[1] + wp * v[2])
    return w_own, w_other


def _nearest(key: np.ndarray, row_pad: np.ndarray, x_pad: np.ndarray, x: np.ndarray,
             target_row: np.ndarray, big: float) -> tuple[np.ndarray, np.ndarray]:
    """Nearest point in log-scale within ``target_row`` (index, distance; inf if none).

    ``row_pad`` and ``x_pad`` carry one sentinel entry at the end, which index
    -1 (before the first point) and m (after the last) both reach.
    """
    pos = np.searchsorted(key, target_row * big + x)
    below = pos - 1
    d_below = np.where(row_pad[below] == target_row, np.abs(x_pad[below] - x), np.inf)
    d_above = np.where(row_pad[pos] == target_row, np.abs(x_pad[pos] - x), np.inf)
    above_wins = d_above < d_below  # ties go to the point below
    return np.where(above_wins, pos, below), np.where(above_wins, d_above, d_below)


def _chain(sense: np.ndarray, t: np.ndarray, j: np.ndarray, x: np.ndarray, n: int,
           n_p: int, max_dx: np.ndarray):
    """Link points into chains by mutual nearest neighbours; return order and chain starts.

    Points of the same sense and time must come in increasing grid scale ``j``.
    """
    row = (sense > 0).astype(np.int64) * (n + 2) + t  # one "row" per sense and time
    # points of one row are at least two grid scales apart, so ordering by grid scale
    # orders by refined scale too: the order of (row, x) is that of (row, j).  The
    # points come ordered by j within each row, so a stable sort by row suffices,
    # a radix sort if the rows fit in 16 bits
    order = np.argsort(row.astype(np.int16) if 2 * (n + 2) < 2 ** 15 else row, kind="stable")
    row, x, max_dx = row[order], x[order], max_dx[order]
    big = float(np.max(x)) + 4.0
    key = row * big + x
    m = len(key)
    row_pad = np.append(row, -10)
    x_pad = np.append(x, 0.0)
    nxt, d_nxt = _nearest(key, row_pad, x_pad, x, row + 1, big)
    prv, _ = _nearest(key, row_pad, x_pad, x, row - 1, big)
    linked = np.flatnonzero(d_nxt <= max_dx)
    linked = linked[prv[nxt[linked]] == linked]
    idx = np.arange(m)
    root = idx.copy()
    root[nxt[linked]] = linked  # predecessor, or the point itself at a chain start
    # pointer jumping to the first point of every chain
    while True:
        new = root[root]
        if np.array_equal(new, root):
            break
        root = new
    # chains in the order of their first points, points in time order within a chain
    is_start = root == idx
    chain = (np.cumsum(is_start) - 1)[root]
    starts = np.r_[0, np.cumsum(np.bincount(chain))]
    final = np.empty(m, dtype=np.int64)
    final[starts[chain] + (row - row[root])] = order
    return final, starts


def _own_frequency(w_own: np.ndarray, starts: np.ndarray, dt_s: float) -> np.ndarray:
    """Phase-derivative frequency: mean of the adjacent increments within each ridge."""
    m = len(w_own)
    inc = np.angle(w_own[1:] * np.conj(w_own[:-1])) / dt_s  # between points i and i + 1
    valid = np.ones(max(m - 1, 0))
    valid[starts[1:-1] - 1] = 0.0  # increments across ridge boundaries are not used
    inc *= valid
    total = np.zeros(m)
    total[1:] += inc
    total[:-1] += inc
    count = np.zeros(m)
    count[1:] += valid
    count[:-1] += valid
    return np.where(count > 0, total / np.maximum(count, 1.0), np.nan)


def _power_sums(n_below: np.ndarray, n_above: np.ndarray) -> tuple:
    """Return the sums of u^p, p = 0 .. 4, over the integers u = -n_below .. n_above."""
    def faulhaber(n):  # sum of u^p for u = 1 .. n, p = 1 .. 4
        g1 = n * (n + 1.0) / 2.0
        g2 = g1 * (2.0 * n + 1.0) / 3.0
        return g1, g2, g1 * g1, g2 * (3.0 * n * n + 3.0 * n - 1.0) / 5.0

    a1, a2, a3, a4 = faulhaber(n_above)
    b1, b2, b3, b4 = faulhaber(n_below)
    return n_above + n_below + 1.0, a1 - b1, a2 + b2, a3 - b3, a4 + b4


def _local_quadratic(ys: np.ndarray, starts: np.ndarray, half: np.ndarray
                     ) -> tuple[np.ndarray, np.ndarray]:
    """Slopes and curvatures (per sample) of local quadratic least-squares fits along ridges.

    Point i is fitted over [i - half_i, i + half_i], clipped to its own ridge
    (a Savitzky-Golay fit whose window shrinks at the ridge ends), for every
    row of ``ys`` (shape (R, m)).  The sums of u^p (u the offset from i) are
    in closed form; the sums of u^p y come from cumulative sums of k^q y, k
    the index within the ridge.
    """
    m = ys.shape[1]
    lengths = np.diff(starts)
    first = np.repeat(starts[:-1], lengths)
    idx = np.arange(m)
    i = idx - first  # index within the ridge
    below = np.minimum(half, i)
    above = np.minimum(half, np.repeat(lengths, lengths) - 1 - i)
    a, b, c, d, e = _power_sums(below.astype(float), above.astype(float))
    lo = idx - below
    hi = idx + above + 1
    i = i.astype(float)
    rows = ys.shape[0]
    weighted = np.empty((3 * rows, m + 1))
    weighted[:, 0] = 0.0
    np.cumsum(ys, axis=1, out=weighted[:rows, 1:])
    np.cumsum(ys * i, axis=1, out=weighted[rows:2 * rows, 1:])
    np.cumsum(ys * (i * i), axis=1, out=weighted[2 * rows:, 1:])
    sy = weighted[:, hi] - weighted[:, lo]  # sums of k^q y over each window
    # normal equations [[a b c] [b c d] [c d e]] (c0 c1 c2) = (r0 r1 r2), Cramer's rule
    det = a * (c * e - d * d) - b * (b * e - c * d) + c * (b * d - c * c)
    slopes, curvatures = [], []
    for r in range(rows):
        y0, y1, y2 = sy[r], sy[rows + r], sy[2 * rows + r]
        r0, r1, r2 = y0, y1 - i * y0, y2 - 2.0 * i * y1 + i * i * y0  # sums of u^p y
        c1 = a * (r1 * e - d * r2) - r0 * (b * e - d * c) + c * (b * r2 - r1 * c)
        c2 = a * (c * r2 - r1 * d) - b * (b * r2 - r1 * c) + r0 * (b * d - c * c)
        slopes.append(c1 / det)
        curvatures.append(2.0 * c2 / det)
    return np.array(slopes), np.array(curvatures)


def _bias_factor(amp: np.ndarray, omega: np.ndarray, period: np.ndarray, starts: np.ndarray,
                 dt_s: float, p: float) -> np.ndarray:
    """Return 1 + P^2 rho_2 at every ridge point (Lilly & Olhede 2010 form, derived)."""
    half = np.maximum(2, np.rint(period / 2.0).astype(np.int64))
    la = np.log(np.maximum(amp, _TINY))
    slope, curv = _local_quadratic(np.stack((la, omega)), starts, half)
    d1, d2, dw = slope[0], curv[0], slope[1]
    corr = p * p * ((d2 + d1 ** 2) / dt_s ** 2 + 1j * dw / dt_s) / (2.0 * omega ** 2)
    big = np.abs(corr) > 0.5
    corr[big] *= 0.5 / np.abs(corr[big])
    short = np.repeat(np.diff(starts) < 5, np.diff(starts))
    corr[short] = 0.0
    return 1.0 + corr


def _period_samples(x: np.ndarray, config: WaveletConfig) -> np.ndarray:
    return config.min_period_samples * 2.0 ** (x / config.periods_per_octave)


def _candidates_from_points(pts, n: int, n_p: int, config: WaveletConfig,
                            wavelet_config: WaveletConfig,
                            noise_variance: np.ndarray | None) -> Candidates | None:
    """Chain refined points, prune short chains and compute the noise statistic."""
    if pts is None:
        return None
    sense, t, j, x, log_amp = pts
    period = _period_samples(x, wavelet_config)
    # the bound per step follows from the bound per cycle: (1 + c)^(dt / T) - 1
    max_dx = math.log1p(config.max_frequency_change_per_cycle) / period * \
        config.periods_per_octave / math.log(2.0)
    order, starts = _chain(sense, t, j, x, n, n_p, max_dx)
    cyc_pt = 1.0 / period[order]
    cycles = np.add.reduceat(cyc_pt, starts[:-1])
    keep = cycles >= config.min_cycles
    if not np.any(keep):
        return None
    lengths = np.diff(starts)
    point_keep = np.repeat(keep, lengths)
    order = order[point_keep]
    cyc_pt = cyc_pt[point_keep]
    new_starts = np.r_[0, np.cumsum(lengths[keep])]
    sense, t, x, log_amp = sense[order], t[order], x[order], log_amp[order]
    if noise_variance is not None:
        lv = np.log(np.maximum(noise_variance, _TINY))
        s_row = (1 - sense) // 2
        j0 = np.clip(np.floor(x).astype(np.int64), 0, n_p - 2)
        f = x - j0
        log_var = lv[s_row, j0] * (1.0 - f) + lv[s_row, j0 + 1] * f
        snr2 = np.exp(2.0 * log_amp - log_var)
        stat = np.add.reduceat(snr2 * cyc_pt, new_starts[:-1])
    else:
        snr2 = np.full(len(t), np.nan)
        stat = np.full(int(keep.sum()), np.nan)
    return Candidates(sense, t, x, log_amp, snr2, new_starts, cycles[keep], stat)


def candidate_ridges(tr: RotaryTransform, config: WaveletConfig | None = None,
                     noise_variance: np.ndarray | None = None) -> Candidates | None:
    """Find and chain ridge points and compute their lengths and noise statistic.

    Parameters
    ----------
    tr : RotaryTransform
        The transform.
    config : WaveletConfig, optional
        Thresholds; the transform's own configuration if omitted.
    noise_variance : numpy.ndarray, optional
        Background E|W+-|^2 per scale, shape (2, J) (row 0 counter-clockwise);
        enables the ``min_point_snr`` threshold and the statistic.

    Returns
    -------
    Candidates or None
        Chains at least ``min_cycles`` long, or ``None`` if there are none.

    Notes
    -----
    Lengths here use the refined scale period, which is cheap for every
    point; the phase-derivative frequency is computed only for the ridges
    that are kept (:func:`find_ridges`).
    """
    config = config or tr.config
    n_p, n = tr.w_ccw.shape
    if n_p < 3 or n == 0:
        return None
    power = _stored_power(tr)
    thr2 = _squared_thresholds(config, n_p, noise_variance, power.dtype)
    flat = _maxima(power, thr2, tr.outside_coi(), 1, n_p - 2)
    return _candidates_from_points(_grid_points(power, flat), n, n_p, config, tr.config,
                                   noise_variance)


def _segment_candidates(z: np.ndarray, dt_s: float, config: WaveletConfig, *,
                        keep_transform: bool = False, background=None,
                        calibrating: bool = False, exclude: tuple = ()):
    """Transform one segment and find its candidate ridges, one block of scales at a time.

    Each block of the transform is searched for ridge points while it is
    still in the processor cache (:func:`driftloop.wavelet.inverse_blocks`);
    the result is the same as :func:`candidate_ridges` on the stored
    transform.  Unless ``keep_transform``, the transform lives in a
    per-thread buffer that the next call overwrites.  ``exclude``: bands
    (rad/s) left out of the background fit.

    Returns
    -------
    tuple
        (transform, both senses as one (2 J, n_fft) array, background, noise
        variance, candidates or None).
    """
    from driftloop import significance as sig

    z, plan = wavelet._checked(z, dt_s, config)
    halves, periodogram = wavelet._half_spectra(z, plan, dt_s, config.fft_workers)
    n_p, n = len(plan.periods), plan.n
    shape = (2 * n_p, plan.n_fft)
    out = (np.empty(shape, dtype=plan.complex_type) if keep_transform
           else scratch("ridges.transform", shape, plan.complex_type))
    tr = wavelet._transform_of(plan, out, periodogram, dt_s, config)
    var = None
    if config.significance and n_p >= 3:
        if not calibrating:  # the calibration runs this function: let it use the buffers first
            sig.calibrate(config, sig._per_sample(exclude, dt_s))
        if background is None:
            background = sig.fit_background(tr, exclude)
        var = sig.noise_variance(background, tr)
    if n_p < 3 or n == 0:
        for _ in wavelet.inverse_blocks(plan, halves, out, config.fft_workers):
            pass
        return tr, out, background, var, None
    power = scratch("ridges.power", (2, n_p, n), halves.dtype)
    thr2 = _squared_thresholds(config, n_p, var, power.dtype)
    flats = []
    for a, b in wavelet.inverse_blocks(plan, halves, out, config.fft_workers, power):
        # scales a+1 .. b have both neighbours once scales a .. J-1 are done
        lo, hi = a + 1, min(b, n_p - 2)
        if lo <= hi:
            flats.append(_maxima(power, thr2, plan.inside, lo, hi))
    flats.reverse()  # increasing scale, as _chain needs
    pts = _grid_points(power, np.concatenate(flats))
    return tr, out, background, var, _candidates_from_points(pts, n, n_p, config, config, var)


def find_ridges(transform: RotaryTransform, config: WaveletConfig | None = None,
                background=None, *, latitude: float | None = None) -> list[Ridge]:
    """Find the wavelet ridges of a rotary transform.

    Parameters
    ----------
    transform : RotaryTransform
        From :func:`driftloop.wavelet.rotary_transform`.
    config : WaveletConfig, optional
        Ridge and significance parameters; the transform's own if omitted.
        Wavelet parameters (beta, gamma, periods) always come from the
        transform.
    background : driftloop.significance.RotaryBackground, optional
        Background noise spectrum for the significance test; fitted to the
        transform's own rotary periodogram if omitted
        (:func:`driftloop.significance.fit_background`).  Ignored when
        ``config.significance`` is false.
    latitude : float, optional
        Mean latitude of the segment (degrees).  If given, the bands around
        the inertial frequency and the main tidal constituents are left out
        of the background fit and of its calibration
        (:func:`driftloop.significance.excluded_bands`); if omitted, none is.

    Returns
    -------
    list of Ridge
        Ridges ordered by start index, then sense (counter-clockwise first).

    Notes
    -----
    Ridge points, chaining, pruning, estimates, bias correction and ellipse
    parameters are described in the module docstring (:mod:`driftloop.ridges`);
    the noise test in :mod:`driftloop.significance` (after Lilly &
    Perez-Brunius 2021).
    """
    from driftloop import significance as sig

    wc = transform.config
    if config is None:
        config = wc
    else:  # the wavelet and its period grid are those of the transform
        config = dataclasses.replace(config, beta=wc.beta, gamma=wc.gamma,
                                     periods_per_octave=wc.periods_per_octave,
                                     min_period_samples=wc.min_period_samples)
    var = None
    exclude = sig.excluded_bands(latitude, transform.dt_s)
    if config.significance and transform.w_ccw.shape[0] >= 3:
        if background is None:
            background = sig.fit_background(transform, exclude)
        var = sig.noise_variance(background, transform)
    cand = candidate_ridges(transform, config, var)
    if cand is None:
        return []
    return _ridges(cand, transform, _both_senses(transform), config, var is not None, exclude)


def _ridges(cand: Candidates, transform: RotaryTransform, both: np.ndarray,
            config: WaveletConfig, tested: bool, exclude: tuple = ()) -> list[Ridge]:
    """Significance test of the candidates, then the estimates along the ridges kept."""
    from driftloop import significance as sig

    wc = transform.config
    n_p = transform.w_ccw.shape[0]
    keep = np.ones(len(cand.cycles), dtype=bool)
    thresholds = np.full(len(cand.cycles), math.nan)
    if tested:
        thresholds = sig.statistic_threshold(transform, sig.chain_periods(cand, wc), config,
                                             exclude)
        keep = cand.statistic >= thresholds
    if not np.any(keep):
        return []
    lengths = np.diff(cand.starts)
    pts = np.repeat(keep, lengths)
    sense, t, x = cand.sense[pts], cand.t[pts], cand.x[pts]
    w_own, w_other = _complex_at(both, n_p, sense, t, x, cand.log_amp[pts])
    starts = np.r_[0, np.cumsum(lengths[keep])]
    dt = transform.dt_s
    period = _period_samples(x, wc)
    scale_omega = 2.0 * np.pi / (period * dt)
    omega = _own_frequency(w_own, starts, dt)
    omega = np.where(np.isfinite(omega), omega, scale_omega)
    if config.bias_correction:
        factor = _bias_factor(np.abs(w_own), omega, period, starts, dt, wc.duration)
        w_own = w_own / factor
        w_other = w_other / factor
    ccw = sense > 0
    amp_own, ph_own = np.abs(w_own), np.angle(w_own)
    amp_other, ph_other = np.abs(w_other), np.angle(w_other)
    amp_ccw, amp_cw = np.where(ccw, amp_own, amp_other), np.where(ccw, amp_other, amp_own)
    ph_ccw, ph_cw = np.where(ccw, ph_own, ph_other), np.where(ccw, ph_other, ph_own)
    snr = np.sqrt(cand.snr2[pts])
    ridges = []
    for k, i in enumerate(np.flatnonzero(keep)):
        sl = slice(starts[k], starts[k + 1])
        sgn = int(sense[starts[k]])
        ridges.append(Ridge(
            sense=sgn, index=t[sl], dt_s=dt,
            frequency_rad_s=sgn * omega[sl], scale_frequency_rad_s=sgn * scale_omega[sl],
            amplitude_m_s=amp_own[sl], phase_rad=ph_own[sl],
            amplitude_ccw_m_s=amp_ccw[sl], amplitude_cw_m_s=amp_cw[sl],
            phase_ccw_rad=ph_ccw[sl], phase_cw_rad=ph_cw[sl],
            snr=snr[sl], statistic=float(cand.statistic[i]), threshold=float(thresholds[i])))
    ridges.sort(key=lambda r: (r.start, -r.sense))
    return ridges


class RidgeResult(NamedTuple):
    """What :func:`detect` returns for one segment.

    Attributes
    ----------
    ridges : list of Ridge
        The significant ridges.
    background : driftloop.significance.RotaryBackground or None
        The fitted background (``None`` without a significance test).
    periods_s : numpy.ndarray
        Periods analysed (s).
    transform : RotaryTransform or None
        The transform, if asked for.
    """

    ridges: list
    background: object
    periods_s: np.ndarray
    transform: RotaryTransform | None


def detect(z: np.ndarray, dt_s: float, config: WaveletConfig | None = None, *,
           keep_transform: bool = False, latitude: float | None = None) -> RidgeResult:
    """Transform one segment and find its significant ridges.

    Parameters
    ----------
    z : array_like
        Complex velocity u + i v (m/s), one gap-free uniformly sampled segment.
    dt_s : float
        Sample interval (s).
    config : WaveletConfig, optional
        Parameters; defaults if omitted.
    keep_transform : bool, optional
        Whether to return the transform (scale x time arrays) as well.
    latitude : float, optional
        Mean latitude of the segment (degrees): leave the inertial and tidal
        bands out of the background fit, as in :func:`find_ridges`.

    Returns
    -------
    RidgeResult
        Ridges, background and periods.

    Notes
    -----
    The same as :func:`driftloop.wavelet.rotary_transform` followed by
    :func:`find_ridges`, but the ridge points are searched block by block
    while the transform is computed, and the transform is not kept unless
    asked for (see the Speed section of ``docs/wavelets.md``).

    Examples
    --------
    >>> t = np.arange(1200) * 3600.0
    >>> z = 0.25 * np.exp(-2j * np.pi * t / (16.9 * 3600.0))
    >>> r = detect(z, 3600.0).ridges[0]
    >>> print(r.sense_name, f"{r.mean_period_s / 3600:.2f} h {r.mean_radius_m:.0f} m")
    cw 16.90 h 2421 m
    """
    from driftloop import significance as sig

    config = config or WaveletConfig()
    exclude = sig.excluded_bands(latitude, dt_s)
    tr, both, background, var, cand = _segment_candidates(z, dt_s, config,
                                                          keep_transform=keep_transform,
                                                          exclude=exclude)
    ridges = [] if cand is None else _ridges(cand, tr, both, config, var is not None, exclude)
    return RidgeResult(ridges, background, tr.periods_s, tr if keep_transform else None)


def ridge_table(ridges: list[Ridge]) -> pd.DataFrame:
    """Summarise ridges, one row each.

    Parameters
    ----------
    ridges : list of Ridge
        From :func:`find_ridges`.

    Returns
    -------
    pandas.DataFrame
        Columns of :meth:`Ridge.summary`.
    """
    cols = ["sense", "start", "end", "n_cycles", "mean_period_s", "mean_amplitude_m_s",
            "mean_radius_m", "decay_rate_per_s", "statistic", "threshold"]
    return pd.DataFrame([r.summary() for r in ridges], columns=cols)
