"""Generalized Morse wavelets and the rotary analytic wavelet transform.

The complex velocity z = u + i v (m/s) of one gap-free, uniformly sampled
segment is transformed with an analytic (positive-frequency) generalized
Morse wavelet, once for each sense of rotation:

- ``w_ccw`` = W+ = W[z] / 2 sees counter-clockwise motion (omega > 0),
- ``w_cw`` = W- = W[conj z] / 2 sees clockwise motion (omega < 0),

the rotary convention of Gonella (1972).  With the normalisation below, a
circle of speed amplitude V gives |W+-| = V on its ridge in its own sense.
:func:`rotary_transform` returns a :class:`RotaryTransform`;
:mod:`driftloop.ridges` finds the ridges.  :class:`WaveletConfig` holds every
parameter of the wavelet, ridge and significance stages.

Method
------
**Generalized Morse wavelets** (Olhede & Walden 2002; Lilly & Olhede 2009,
2012) are defined in the frequency domain,

    Psi_{beta,gamma}(omega) = U(omega) a_{beta,gamma} omega^beta exp(-omega^gamma),

U the unit step, beta > 0 (order) and gamma > 0 (family).  Setting the
derivative of beta ln(omega) - omega^gamma to zero gives the peak frequency
omega_{beta,gamma} = (beta / gamma)^(1/gamma).

*Normalisation* (derived).  At the peak omega^beta exp(-omega^gamma) =
(beta/gamma)^(beta/gamma) exp(-beta/gamma), so

    a_{beta,gamma} = 2 (e gamma / beta)^(beta/gamma)   gives   Psi(omega_{beta,gamma}) = 2.

The transform with 1/s scaling (Lilly & Olhede 2009) of a signal x is

    W(t, s) = (1/2 pi) integral X(omega) Psi(s omega) exp(i omega t) d omega,

computed as an inverse FFT of X Psi(s omega).  A tone x = A exp(i omega_0 t)
gives W = A Psi(s omega_0) exp(i omega_0 t), largest at s = omega_{beta,gamma}
/ omega_0 where |W| = 2 A: the factor 2 makes a *real* cosine A cos(omega_0
t) = A/2 (e^{i omega_0 t} + e^{-i omega_0 t}) come out with |W| = A, the
convention of the analytic-signal literature.  A complex velocity is not
split in two halves: the circle z = V exp(i omega_0 t) puts all of its
amplitude at +omega_0, so |W[z]| = 2 V.  The rotary transforms therefore
carry a factor 1/2,

    W+ = W[z] / 2,      W- = W[conj z] / 2,

and z = A+ exp(i phi+) + A- exp(-i phi-) gives |W+| = A+, |W-| = A- and
arg W+- = phi+- on the ridges (*derived*; the form of METHODS section 6).

*Duration and bandwidth* (Lilly & Olhede 2009).  P = sqrt(beta gamma) is the
wavelet duration (P^2 the time-bandwidth product).  The second logarithmic
derivative of Psi at its peak is -beta gamma / omega_{beta,gamma}^2 (*derived*),
so near the peak Psi(omega) ~ 2 exp(-P^2 (omega - omega_p)^2 / (2 omega_p^2)):
the fractional (1-s.d.) bandwidth of |Psi| is 1/P, and in time the
envelope is close to a Gaussian of standard deviation P / omega at the scale
whose peak frequency is omega, i.e. P / (2 pi) cycles.

*Defaults* (``gamma = 3``, ``beta = 4``, P = sqrt(12) = 3.46).  gamma = 3
(the Airy family) is the most symmetric, nearly Gaussian member and the
recommended default of Lilly & Olhede (2012).  beta = 4 is a trade-off for
drifters:

- time resolution: the envelope s.d. is P/(2 pi) = 0.55 cycles (9.3 h at the
  16.9-h inertial period of 45 degrees), and +-1 s.d. spans P/pi = 1.1
  cycles, short beside inertial events that decay over a few days (a 4-day
  e-folding time is 5.7 inertial cycles at 45 degrees); the leading ridge
  bias P^2 r^2 / (2 omega^2) of such a decay is 0.5 %;
- frequency resolution: fractional bandwidth 1/P = 0.29.  Two equal
  same-sense tones give separate maxima of the time-averaged |W|^2 when
  ln(omega_2/omega_1) > sqrt(2)/P = 0.41 (*derived* from the Gaussian
  approximation), a frequency ratio of 1.50; the vorticity-shifted inertial
  band f + zeta/2 (|zeta/f| <~ 0.3) is wholly inside one bandwidth and is
  tracked as frequency modulation, not split.  Inertial motion and M2 (ratio
  1.36 at 45 degrees) or K1/O1 (ratio 1.41 and 1.53) are only partly
  separated in frequency at any P that still resolves events of a few days
  (P = 5 would need 0.28, i.e. a 1.33 ratio, at twice the time smearing);
  inertial motion is purely anticyclonic while tides are elliptical, so the
  rotary split and the ellipse parameters help, and the loop classifier must
  still test the tidal periods near the critical latitudes (METHODS sect. 8).
- the default two-cycle minimum ridge length is about one wavelet length
  2P/pi = 2.2 cycles.

**Boundaries.**  The segment mean is removed (it contributes nothing
inside, since Psi(0) = 0) and the segment is zero-padded at its end to a
fast FFT length at least ``N + c_max`` (``c_max`` the cone of influence at the
longest period), so that values outside the cone never see the periodic
wrap-around.  Reflection padding is not used: time reversal turns a
counter-clockwise circle into a clockwise one and would feed each rotary
transform with the other sense near the ends.

**Cone of influence.**  |psi(t)| is symmetric (Psi is real) and nearly
Gaussian.  If the data are missing beyond a distance d from the point, the
transform of a unit tone at its ridge (|W| = 2) is in error by at most
integral_{tau > d} |psi(tau)| d tau, relative error half that.  The factor k
is the smallest d / sigma, sigma = P/omega, for which that bound is
``coi_edge_error`` (default 1 %), computed numerically from the wavelet:
k = 2.30 for the defaults (the one-sided 1 % point of a Gaussian is 2.33).
Values closer than k P / omega to either end are masked; the longest
period analysed is the one that still leaves ``min_cycles`` cycles of
unmasked interior, T_max = N dt / (min_cycles + k P / pi).

**Speed.**  One forward FFT of z serves both senses (the spectrum of conj z
is conj Z(-omega)); the wavelet table Psi(s_j omega_k) is computed once per
segment length and kept; the inverse FFTs (``scipy.fft``'s pocketfft,
``workers``) run a few scales at a time, longest periods first, on a buffer
that stays in the processor cache, and the table is multiplied in only up
to the bin where it becomes zero (:func:`inverse_blocks`).
:func:`driftloop.ridges.detect` uses each block while it is in the cache.
``dtype = "float32"`` runs the FFTs in single precision.

References
----------
Gonella, J., 1972: A rotary-component method for analysing meteorological
and oceanographic vector time series.  Deep-Sea Res., 19, 833-846.

Olhede, S. C., and A. T. Walden, 2002: Generalized Morse wavelets.  IEEE
Trans. Signal Process., 50(11), 2661-2670.

Lilly, J. M., and S. C. Olhede, 2009: Higher-order properties of analytic
wavelets.  IEEE Trans. Signal Process., 57(1), 146-160.

Lilly, J. M., and S. C. Olhede, 2012: Generalized Morse wavelets as a
superfamily of analytic wavelets.  IEEE Trans. Signal Process., 60 (volume
from memory).
"""

from __future__ import annotations

import functools
import math
import os
import threading
from dataclasses import dataclass
from typing import NamedTuple

import numpy as np
import scipy.fft

__all__ = [
    "RotaryTransform",
    "WaveletConfig",
    "coi_factor",
    "morse_peak_frequency",
    "morse_wavelet",
    "rotary_transform",
    "transform_periods_samples",
    "wavelet_table",
]


@dataclass(frozen=True)
class WaveletConfig:
    """Parameters of the wavelet transform, ridge analysis and significance test.

    Attributes
    ----------
    gamma : float
        Morse family parameter gamma (3: Airy wavelets, Lilly & Olhede 2012).
    beta : float
        Morse order beta; duration P = sqrt(beta gamma) = 3.46 by default.
    periods_per_octave : int
        Number of log-spaced periods per doubling of the period.
    min_period_samples : float
        Shortest period analysed, in sample intervals (at least 2.5).
    max_period_s : float or None
        Longest period analysed (s); ``None`` takes the longest period that
        leaves ``min_cycles`` cycles outside the cone of influence.
    coi_factor : float or None
        k of the cone of influence k P / omega (wavelet envelope standard
        deviations); ``None`` derives it from the wavelet and ``coi_edge_error``.
    coi_edge_error : float
        Bound on the relative error of a tone's ridge amplitude at the edge
        of the cone of influence, from which k is derived.
    amplitude_floor_m_s : float
        Ridge points with a speed amplitude below this are ignored (m/s).
    max_frequency_change_per_cycle : float
        Largest fractional change of the ridge frequency over one cycle; two
        ridge points at consecutive samples are chained only if their
        frequencies differ by at most (1 + c)^(dt/T) - 1, T the period.
    min_cycles : float
        Ridges shorter than this many cycles, N = integral |omega| dt / 2 pi,
        are dropped.
    significance : bool
        Whether ridges must pass the noise test of :mod:`driftloop.significance`.
    false_positive_rate : float
        Expected duration of ridges kept from pure background noise, as a
        fraction of the record duration (both senses counted).
    min_point_snr : float
        Ridge points must reach this multiple of the background noise rms
        |W| at their scale (used only with ``significance``).
    bias_correction : bool
        Whether to apply the leading-order ridge amplitude/phase correction
        (Lilly & Olhede 2010).
    dtype : str
        ``"float64"`` or ``"float32"`` (single-precision FFTs).
    fft_workers : int
        ``workers`` for ``scipy.fft`` (-1: all cores).
    """

    gamma: float = 3.0
    beta: float = 4.0
    periods_per_octave: int = 12
    min_period_samples: float = 2.5
    max_period_s: float | None = None
    coi_factor: float | None = None
    coi_edge_error: float = 0.01
    amplitude_floor_m_s: float = 0.01
    max_frequency_change_per_cycle: float = 1.0
    min_cycles: float = 2.0
    significance: bool = True
    false_positive_rate: float = 0.01
    min_point_snr: float = 1.0
    bias_correction: bool = True
    dtype: str = "float64"
    fft_workers: int = 1

    def __post_init__(self) -> None:
        from driftloop.errors import ConfigError

        problems = [
            (self.beta > 0, "beta", "must be > 0"),
            (self.gamma > 0, "gamma", "must be > 0"),
            (self.periods_per_octave >= 1, "periods_per_octave", "must be >= 1"),
            (self.min_period_samples >= 2.5, "min_period_samples", "must be >= 2.5"),
            (self.dtype in ("float64", "float32"), "dtype", "must be 'float64' or 'float32'"),
            (0 < self.coi_edge_error < 0.5, "coi_edge_error", "must be in (0, 0.5)"),
            (0 < self.false_positive_rate <= 1, "false_positive_rate", "must be in (0, 1]"),
            (self.max_frequency_change_per_cycle > 0, "max_frequency_change_per_cycle",
             "must be > 0"),
        ]
        for ok, key, rule in problems:
            if not ok:
                raise ConfigError(f"key 'wavelet.{key}' {rule}, got {getattr(self, key)!r}")

    @property
    def duration(self) -> float:
        """Morse wavelet duration P = sqrt(beta gamma) (dimensionless)."""
        return math.sqrt(self.beta * self.gamma)

    @property
    def peak_frequency(self) -> float:
        """Peak frequency (beta/gamma)^(1/gamma) of the unit-scale wavelet (rad/sample)."""
        return morse_peak_frequency(self.beta, self.gamma)

    @property
    def coi(self) -> float:
        """The cone-of-influence factor k actually used."""
        if self.coi_factor is not None:
            return float(self.coi_factor)
        return coi_factor(self.beta, self.gamma, self.coi_edge_error)


def morse_peak_frequency(beta: float, gamma: float) -> float:
    """Return the peak frequency of the generalized Morse wavelet.

    Parameters
    ----------
    beta, gamma : float
        Morse parameters (> 0).

    Returns
    -------
    float
        omega_{beta,gamma} = (beta / gamma)^(1/gamma) (Olhede & Walden 2002).
    """
    return (beta / gamma) ** (1.0 / gamma)


def morse_wavelet(omega: np.ndarray, beta: float, gamma: float) -> np.ndarray:
    """Return the generalized Morse wavelet in the frequency domain.

    Parameters
    ----------
    omega : array_like
        Dimensionless frequency (radians per unit of scaled time).
    beta, gamma : float
        Morse order and family (> 0).

    Returns
    -------
    numpy.ndarray
        Psi(omega) = U(omega) a omega^beta exp(-omega^gamma), with
        a = 2 (e gamma / beta)^(beta / gamma) so that the peak value is 2
        (Olhede & Walden 2002; normalisation *derived*, see module notes).

    Examples
    --------
    >>> wp = morse_peak_frequency(4.0, 3.0)
    >>> print(f"{float(morse_wavelet(wp, 4.0, 3.0)):.6f}")
    2.000000
    """
    w = np.asarray(omega, dtype=float)
    out = np.zeros_like(w)
    pos = w > 0
    lw = np.log(w[pos])
    out[pos] = np.exp(math.log(2.0) + (beta / gamma) * (1.0 + math.log(gamma / beta))
                      + beta * lw - np.exp(gamma * lw))
    return out


@functools.lru_cache(maxsize=32)
def coi_factor(beta: float, gamma: float, edge_error: float = 0.01) -> float:
    """Return the cone-of-influence factor k derived from the wavelet envelope.

    Parameters
    ----------
    beta, gamma : float
        Morse parameters.
    edge_error : float, optional
        Bound on the relative ridge-amplitude error of a tone (see Notes).

    Returns
    -------
    float
        The smallest k with (1/2) integral_{t > k sigma} |psi(t)| dt <= edge_error,
        sigma = P / omega_{beta,gamma} the unit-scale envelope scale.

    Notes
    -----
    For a unit tone at the peak frequency the unit-scale transform is 2; if
    the signal is replaced by zeros beyond t = d the transform changes by at
    most integral_{t > d} |psi(t)| dt (*derived*).  |psi| is symmetric since
    Psi is real, so one side suffices.  psi is obtained by a fine inverse FFT.
    """
    wp = morse_peak_frequency(beta, gamma)
    p = math.sqrt(beta * gamma)
    # frequency grid reaching where Psi is negligible; time step resolves the carrier
    w_max = wp * (1.0 + 12.0 / p) + 4.0 * wp
    m = 2 ** 17
    dw = w_max / (m / 8)
    w = np.arange(m) * dw
    psi = np.fft.ifft(morse_wavelet(w, beta, gamma)) * (m * dw / (2.0 * np.pi))
    dt = 2.0 * np.pi / (m * dw)
    env = np.abs(psi[: m // 2])  # t >= 0
    tail = np.cumsum(env[::-1])[::-1] * dt  # integral from t_i to infinity
    i = int(np.argmax(tail <= 2.0 * edge_error))
    return float(i * dt / (p / wp))


def transform_periods_samples(n_samples: int, config: WaveletConfig,
                              dt_s: float = 1.0) -> np.ndarray:
    """Return the log-spaced periods analysed for a segment, in sample intervals.

    Parameters
    ----------
    n_samples : int
        Length of the segment.
    config : WaveletConfig
        Sets the shortest period, the spacing and the longest period.
    dt_s : float, optional
        Sample interval (s), for ``max_period_s``.

    Returns
    -------
    numpy.ndarray
        Periods T_j = T_min 2^(j / periods_per_octave) up to
        T_max = N / (min_cycles + k P / pi) (and ``max_period_s``), possibly empty.
    """
    t_max = n_samples / (config.min_cycles + config.coi * config.duration / math.pi)
    if config.max_period_s is not None:
        t_max = min(t_max, config.max_period_s / dt_s)
    t_min = config.min_period_samples
    if t_max < t_min:
        return np.zeros(0)
    count = int(math.floor(config.periods_per_octave * math.log2(t_max / t_min) + 1e-9)) + 1
    return t_min * 2.0 ** (np.arange(count) / config.periods_per_octave)


@functools.lru_cache(maxsize=16)
def _table(n_fft: int, beta: float, gamma: float, t_min: float, per_octave: int,
           count: int, dtype: str) -> np.ndarray:
    omega = 2.0 * np.pi * np.arange(1, (n_fft + 1) // 2) / n_fft  # positive bins, rad/sample
    periods = t_min * 2.0 ** (np.arange(count) / per_octave)
    scales = morse_peak_frequency(beta, gamma) * periods / (2.0 * np.pi)
    # Psi(s w) = a s^b w^b exp(-(s w)^g): one exp per element
    log_a = math.log(2.0) + (beta / gamma) * (1.0 + math.log(gamma / beta))
    sw_g = (scales[:, None] ** gamma) * (omega[None, :] ** gamma)
    table = np.exp(-sw_g)
    table *= np.exp(log_a + beta * np.log(scales))[:, None]
    table *= (omega ** beta)[None, :]
    # values this small cannot matter beside the peak value 2, and subnormal
    # numbers would slow every later product and FFT down many times
    table[table < 1e-20] = 0.0
    table = table.astype(dtype)
    table.setflags(write=False)
    return table


def wavelet_table(n_fft: int, periods_samples: np.ndarray, config: WaveletConfig) -> np.ndarray:
    """Return Psi(s_j omega_k) on the positive FFT frequencies, one row per period.

    Parameters
    ----------
    n_fft : int
        FFT length.
    periods_samples : numpy.ndarray
        Periods from :func:`transform_periods_samples`.
    config : WaveletConfig
        Wavelet parameters and dtype.

    Returns
    -------
    numpy.ndarray
        Read-only array (n_periods, (n_fft + 1) // 2 - 1) for the bins
        k = 1 .. (n_fft + 1) // 2 - 1 (the Nyquist bin, of ambiguous sign,
        is left out).  Cached per FFT length.
    """
    return _table(int(n_fft), float(config.beta), float(config.gamma),
                  float(config.min_period_samples), int(config.periods_per_octave),
                  len(periods_samples), config.dtype)


class RotaryTransform(NamedTuple):
    """The rotary wavelet transform of one segment.

    Attributes
    ----------
    periods_s : numpy.ndarray
        Periods 2 pi s / omega_{beta,gamma} dt (s), increasing, shape (J,).
    w_ccw : numpy.ndarray
        W+ = W[z]/2, counter-clockwise (omega > 0), shape (J, N), m/s.
    w_cw : numpy.ndarray
        W- = W[conj z]/2, clockwise (omega < 0), shape (J, N), m/s.
    coi : numpy.ndarray
        Cone of influence: number of samples masked at each end, per period (J,).
    dt_s : float
        Sample interval (s).
    n_fft : int
        Length of the padded FFT.
    spectrum : numpy.ndarray
        Rotary periodogram of the (mean-removed, zero-padded) segment,
        shape (2, K): row 0 at +omega_k (counter-clockwise), row 1 at
        -omega_k (clockwise), for the positive bins omega_k = 2 pi k /
        (n_fft dt), k = 1 .. K; units (m/s)^2 / (rad/s), normalised so that
        sum S d omega / 2 pi over both rows is the variance of z.
    config : WaveletConfig
        The configuration used.
    """

    periods_s: np.ndarray
    w_ccw: np.ndarray
    w_cw: np.ndarray
    coi: np.ndarray
    dt_s: float
    n_fft: int
    spectrum: np.ndarray
    config: WaveletConfig

    @property
    def n_samples(self) -> int:
        """Segment length N."""
        return self.w_ccw.shape[1]

    @property
    def omega_rad_s(self) -> np.ndarray:
        """Positive angular frequencies of the periodogram bins (rad/s)."""
        k = np.arange(1, self.spectrum.shape[1] + 1)
        return 2.0 * np.pi * k / (self.n_fft * self.dt_s)

    @property
    def scale_frequency_rad_s(self) -> np.ndarray:
        """Peak angular frequency 2 pi / T_j of each scale (rad/s, positive)."""
        return 2.0 * np.pi / self.periods_s

    def outside_coi(self) -> np.ndarray:
        """Return a boolean (J, N) array, True where values are outside the cone of influence."""
        t = np.arange(self.n_samples)
        c = self.coi[:, None]
        return (t[None, :] >= c) & (t[None, :] < self.n_samples - c)


def rotary_transform(z: np.ndarray, dt_s: float, config: WaveletConfig | None = None
                     ) -> RotaryTransform:
    """Compute the rotary generalized-Morse wavelet transform of a complex velocity.

    Parameters
    ----------
    z : array_like
        Complex velocity u + i v (m/s) of one gap-free, uniformly sampled
        segment, shape (N,); u east, v north.
    dt_s : float
        Sample interval (s).
    config : WaveletConfig, optional
        Wavelet parameters; defaults if omitted.

    Returns
    -------
    RotaryTransform
        W+ (counter-clockwise) and W- (clockwise) on log-spaced periods,
        the cone of influence and the rotary periodogram.

    Raises
    ------
    ValueError
        If ``z`` is not one-dimensional, has non-finite values or ``dt_s``
        is not positive.

    Notes
    -----
    Olhede & Walden (2002) for the Morse wavelets and the need for both
    rotary transforms of a complex signal; Lilly & Olhede (2009) for the 1/s
    normalisation; Gonella (1972) for the rotary convention.  See the module
    docstring for the normalisation, padding and cone of influence.

    Examples
    --------
    >>> t = np.arange(960) * 3600.0
    >>> z = 0.2 * np.exp(-2j * np.pi * t / (17 * 3600.0))   # clockwise circle
    >>> tr = rotary_transform(z, 3600.0)
    >>> j = np.argmax(np.abs(tr.w_cw[:, 480]))
    >>> print(f"{np.abs(tr.w_cw[j, 480]):.2f} {np.abs(tr.w_ccw[:, 480]).max():.2f}")
    0.20 0.00
    """
    config = config or WaveletConfig()
    z, plan = _checked(z, dt_s, config)
    halves, periodogram = _half_spectra(z, plan, dt_s, config.fft_workers)
    n_p = len(plan.periods)
    out = np.empty((2 * n_p, plan.n_fft), dtype=plan.complex_type)
    for _ in inverse_blocks(plan, halves, out, config.fft_workers):
        pass
    return _transform_of(plan, out, periodogram, dt_s, config)


# -- the transform in blocks of scales ------------------------------------------------------
#
# The inverse FFTs run a few scales at a time, the longest periods first, so
# that the spectrum times the wavelet is formed in a small buffer that stays
# in the processor cache and callers can use each block of the transform
# (e.g. its squared modulus) while it is still there.  The wavelet table is
# zero above a cut-off bin that falls with the period, so only the bins below
# it are multiplied; going from long to short periods the band only widens,
# so every value left in the buffer by the previous block is overwritten.

#: Bytes of spectrum per block of scales (both senses), about a core's L2 cache.
BLOCK_BYTES = 2 ** 20


class _Plan(NamedTuple):
    """Everything about a transform that depends on the segment length only (cached)."""

    n: int
    periods: np.ndarray  # sample intervals, (J,)
    coi: np.ndarray  # samples masked at each end, (J,)
    n_fft: int
    half: int  # bins 1 .. half - 1 are strictly positive
    complex_type: type
    multiplier: np.ndarray  # (J, 2 (half - 1)) table with each value twice (re, im)
    blocks: tuple  # (a, b, h): scales a .. b-1, table columns 0 .. h-1; long periods first
    block_size: int
    inside: np.ndarray  # (J, N) bool: outside the cone of influence


@functools.lru_cache(maxsize=8)
def _plan(n: int, dt_s: float, config: WaveletConfig) -> _Plan:
    complex_t = np.complex64 if config.dtype == "float32" else np.complex128
    periods = transform_periods_samples(n, config, dt_s)
    periods.setflags(write=False)
    coi = np.ceil(config.coi * config.duration * periods / (2.0 * np.pi)).astype(np.int64)
    coi.setflags(write=False)
    pad = int(coi[-1]) if len(coi) else 0
    n_fft = scipy.fft.next_fast_len(n + pad)
    half = (n_fft + 1) // 2
    n_p = len(periods)
    t = np.arange(n)
    inside = (t[None, :] >= coi[:, None]) & (t[None, :] < n - coi[:, None])
    inside.setflags(write=False)
    if n_p == 0:
        empty = np.zeros((0, 0))
        return _Plan(n, periods, coi, n_fft, half, complex_t, empty, (), 1, inside)
    table = wavelet_table(n_fft, periods, config)
    nonzero = table != 0
    # columns up to the last nonzero value of each row; rows never widen with the period
    band = np.where(nonzero.any(axis=1), table.shape[1] - np.argmax(nonzero[:, ::-1], axis=1), 0)
    band = np.maximum.accumulate(band[::-1])[::-1]
    multiplier = np.repeat(table, 2, axis=1)
    multiplier.setflags(write=False)
    size = max(2, BLOCK_BYTES // (2 * n_fft * np.dtype(complex_t).itemsize))
    blocks = []
    for b in range(n_p, 0, -size):
        a = max(0, b - size)
        blocks.append((a, b, int(band[a])))
    return _Plan(n, periods, coi, n_fft, half, complex_t, multiplier, tuple(blocks), size,
                 inside)


def _checked(z: np.ndarray, dt_s: float, config: WaveletConfig) -> tuple[np.ndarray, _Plan]:
    z = np.asarray(z)
    if z.ndim != 1:
        raise ValueError(f"z must be one-dimensional, got shape {z.shape}")
    if not dt_s > 0:
        raise ValueError(f"dt_s must be > 0, got {dt_s}")
    if not np.all(np.isfinite(z)):
        raise ValueError("z must be finite (one gap-free segment)")
    return z, _plan(int(z.shape[0]), float(dt_s), config)


def _half_spectra(z: np.ndarray, plan: _Plan, dt_s: float, workers: int
                  ) -> tuple[np.ndarray, np.ndarray]:
    """Halved spectra of z and conj z on the positive bins, interleaved (re, im), and periodogram.

    Returns a real (2, 2 (half - 1)) array and the (2, half - 1) rotary periodogram.
    """
    n, n_fft, half = plan.n, plan.n_fft, plan.half
    zc = np.zeros(n_fft, dtype=plan.complex_type)
    zc[:n] = z - z.mean() if n else z
    spec = scipy.fft.fft(zc, workers=workers)
    pos = spec[1:half]
    neg_conj = np.conj(spec[n_fft - 1: n_fft - half: -1])  # FFT of conj z at +omega_k
    halves = np.empty((2, half - 1), dtype=plan.complex_type)
    # the factor 1/2 of the rotary split is folded into the spectra
    np.multiply(pos, 0.5, out=halves[0])
    np.multiply(neg_conj, 0.5, out=halves[1])
    periodogram = np.empty((2, half - 1))
    if n:
        periodogram[0] = np.abs(pos) ** 2 * (dt_s / n)
        periodogram[1] = np.abs(neg_conj) ** 2 * (dt_s / n)
    return halves.view(halves.real.dtype), periodogram


def _transform_of(plan: _Plan, out: np.ndarray, periodogram: np.ndarray, dt_s: float,
                  config: WaveletConfig) -> RotaryTransform:
    n_p, n = len(plan.periods), plan.n
    return RotaryTransform(plan.periods * dt_s, out[:n_p, :n], out[n_p:, :n], plan.coi,
                           float(dt_s), plan.n_fft, periodogram, config)


_SCRATCH = threading.local()


def scratch(name: str, shape: tuple, dtype) -> np.ndarray:
    """Return a reusable per-thread work array (contents undefined).

    Fresh multi-megabyte arrays for every segment cost as much in page
    faults and zeroing as the arithmetic done on them.
    """
    store = getattr(_SCRATCH, "arrays", None)
    if store is None:
        store = _SCRATCH.arrays = {}
    arr = store.get(name)
    size = math.prod(shape)
    if arr is None or arr.dtype != np.dtype(dtype) or arr.size < size:
        arr = store[name] = np.empty(size, dtype=dtype)
    return arr[:size].reshape(shape)


try:  # pocketfft as used by scipy.fft, able to write into a given array
    from scipy.fft._pocketfft import pypocketfft as _pocketfft
except ImportError:  # pragma: no cover - other scipy layouts
    _pocketfft = None


def _ifft_into(src: np.ndarray, dst: np.ndarray, workers: int) -> None:
    """Write the inverse FFT of ``src`` along its last axis into ``dst`` (as scipy.fft.ifft)."""
    if _pocketfft is not None:
        threads = workers if workers > 0 else max(1, (os.cpu_count() or 1) + 1 + workers)
        try:
            _pocketfft.c2c(src, (src.ndim - 1,), False, 2, dst, threads)
            return
        except (TypeError, ValueError):  # pragma: no cover - a changed private interface
            pass
    dst[...] = scipy.fft.ifft(src, axis=-1, workers=workers)


def inverse_blocks(plan: _Plan, halves: np.ndarray, out: np.ndarray, workers: int,
                   power: np.ndarray | None = None):
    """Fill ``out`` with the rotary transform block by block, longest periods first.

    Parameters
    ----------
    plan : _Plan
        From :func:`_plan`.
    halves : numpy.ndarray
        Interleaved half spectra from :func:`_half_spectra`.
    out : numpy.ndarray
        (2 J, n_fft) complex array: rows 0 .. J-1 receive W+, rows J .. 2J-1 W-.
    workers : int
        ``workers`` of the FFTs.
    power : numpy.ndarray, optional
        (2, J, N) real array that receives |W|^2 for t < N, block by block.

    Yields
    ------
    tuple of int
        (a, b): scales a .. b-1 are done (their power too).
    """
    n_p, n_fft, n = len(plan.periods), plan.n_fft, plan.n
    out3 = out.reshape(2, n_p, n_fft)
    size = plan.block_size
    buf = scratch("wavelet.spectrum", (2, size, n_fft), plan.complex_type)
    real = buf.view(halves.dtype)
    # the buffer may hold wider bands from an earlier segment: start from zeros
    buf.fill(0)
    tmp = None
    if power is not None:
        tmp = scratch("wavelet.squares", (2, size, 2 * n), halves.dtype)
    for a, b, h in plan.blocks:
        c = b - a
        for s in (0, 1):
            np.multiply(plan.multiplier[a:b, :2 * h], halves[s, :2 * h],
                        out=real[s, :c, 2:2 * h + 2])
        block = out3[:, a:b]
        _ifft_into(buf[:, :c], block, workers)
        if power is not None:
            v = block.view(halves.dtype)[..., :2 * n]
            sq = tmp[:, :c]
            np.multiply(v, v, out=sq)
            np.add(sq[..., 0::2], sq[..., 1::2], out=power[:, a:b])
        yield a, b
