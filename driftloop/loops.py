"""Looping events: wavelet ridges of resampled tracks turned into a catalogue.

For each resampled segment of each drifter the complex velocity z = u + i v
goes through the rotary Morse-wavelet ridge engine
(:func:`driftloop.ridges.detect`); every significant ridge is a candidate.

From ridges to events
---------------------
1. **Joining.**  Ridges of the same drifter and rotation sense whose periods
   agree within ``merge_period_tolerance`` and that are separated by less
   than ``merge_gap_periods`` of their period (a short gap, a segment break
   plus the cones of influence, a dip of the ridge below threshold) are
   joined, each to the group it continues best, so that neither a gap nor a
   concurrent ridge at another period splits one oscillation.
2. **Speed threshold.**  An event is looping at a speed of at least
   ``min_speed_m_s``: the joined ridge is cut to the stretches where its
   loop speed reaches it (own-sense amplitude A, the speed of the circular
   part; the semi-major speed of the ridge ellipse where the period is
   tidal) and stretches shorter than the wavelet's ``min_cycles`` are
   dropped.  Without it the slow tail of one storm's ringing and the
   quiet spell before the next become events of their own.  The default,
   5 cm/s, is the threshold by which the evaluation's ground truth defines
   ringing (:func:`driftloop.synth.truth_events`), so that the two count
   the same thing.
3. **Forcing episodes.**  Each stretch is split at deep minima of its
   amplitude (``episode_split_depth``): each storm's ringing is its own
   event, with its own decay time.
4. **Eddies.**  Events that are eddies (first pass of :func:`classify`,
   eddy period at least twice the inertial period, where the Kunze shift
   below is a valid small-Rossby-number approximation) cut the other events
   of the drifter where the eddy event starts or ends -- the inertial
   frequency shifts there -- unless that end is within the eddy ridge's
   cone of influence of a segment end, where the ridge cannot be seen; the
   other events then carry the angular rate of the eddy they overlap for
   the classification.

Event properties
----------------
period_h
    Median over the event of the instantaneous period 2 pi / |omega| from the
    ridge's phase derivative.  The median ignores the phase resets of the
    storms that force inertial ringing.
speed_m_s, radius_km
    Median own-sense speed amplitude A of the ridge (bias-corrected) and
    median ridge radius A / |omega| (Lilly & Gascard 2006); medians are not
    pulled by the few samples at the ends of a ridge.
radius_fit_km
    A second, position-based radius: the track in the event's own azimuthal
    equidistant frame, less its running mean over one period (which removes
    the low-frequency drift and leaves the loops), gives each sample's
    distance from the drifting centre, and the median of those distances is
    the radius; exactly R for a circle of radius R.  (A root-mean-square of
    the distances, as before, weights the strongest loops of a decaying
    event and ran about 1.1-1.2 times the median ridge radius.)
semi_major_km, semi_minor_km, orientation_deg
    Median ellipse of the ridge (displacement axes; orientation of the major
    axis clockwise from north).
decay_time_h
    E-folding time of the amplitude from its maximum onward, leaving out the
    wavelet's time support at both ends (see :func:`_decay_rate`).
inertial_period_h, inertial_radius_km
    pi / (Omega |sin lat|) and |V / f| at the event's mean latitude, with V =
    ``speed_m_s``.
period_ratio, radius_ratio
    period_h / inertial_period_h and radius_fit_km / inertial_radius_km.  The
    ridge radius over |V / f| would equal the period ratio identically, so the
    independent position-based radius is the one checked.
period_err_h, radius_err_km
    Standard errors: the robust spread (1.4826 MAD) of the per-sample
    estimates over the square root of the number of cycles, and for the
    radius also half the disagreement of the two radius estimates.

Classification (thresholds in :class:`driftloop.config.LoopConfig`)
-------------------------------------------------------------------
``tidal``
    Period within ``tidal_tolerance`` of M2, S2, K1 or O1 where that tidal
    period is more than ``tidal_inertial_separation`` from the local inertial
    period (so that the two cannot be confused); inside an eddy, from every
    inertial period the eddy's vorticity allows.
``inertial``
    Anticyclonic (clockwise north, anticlockwise south), period ratio within
    [``inertial_period_ratio_min``, ``inertial_period_ratio_max``] -- a band
    that allows the vorticity shift f_eff = f + zeta/2 of near-inertial motion
    (Kunze 1985, J. Phys. Oceanogr. 15) -- and radius ratio within
    [``inertial_radius_ratio_min``, ``inertial_radius_ratio_max``]; never
    within ``equator_band_deg`` of the equator, where f-plane inertial
    dynamics do not hold.  Inside an eddy event the band is stretched to
    cover f_eff between f and f + omega (see :func:`classify`).
``eddy``
    Looping, either spin, at a period of at least ``eddy_period_ratio_min``
    times the inertial period.
``other``
    Everything else.

Spin is "anticyclonic" when the sense of rotation is opposite to the
Earth's (clockwise north, anticlockwise south), else "cyclonic".

References
----------
Kunze, E., 1985: Near-inertial wave propagation in geostrophic shear.
*J. Phys. Oceanogr.*, 15 (venue from memory).
Lilly, J. M., and J.-C. Gascard, 2006: Wavelet ridge diagnosis of
time-varying elliptical signals with application to an oceanic eddy.
*Nonlin. Processes Geophys.*, 13, 467-483.
Lilly, J. M., and S. C. Olhede, 2009: Higher-order properties of analytic
wavelets. *IEEE Trans. Signal Process.*, 57 (from memory; P_beta,gamma / pi
as the number of oscillations in the wavelet's central window).
Park, J. J., K. Kim, and R. W. Schmitt, 2009: Global distribution of the
decay timescale of mixed layer inertial motions observed by
satellite-tracked drifters. *J. Geophys. Res.*, 114 (from memory; e-folding
decay fitted to the inertial amplitude after its peak).
"""

from __future__ import annotations

from collections.abc import Callable, Iterable
from dataclasses import dataclass, field

import numpy as np
import pandas as pd
from scipy.ndimage import uniform_filter1d

from driftloop import geodesy
from driftloop.config import LoopConfig
from driftloop.constants import TIDAL_PERIODS_H
from driftloop.physics import coriolis_parameter, inertial_period_s
from driftloop.ridges import Ridge, detect
from driftloop.wavelet import WaveletConfig

__all__ = ["EVENT_COLUMNS", "EventCatalogue", "classify", "find_events", "spin_name"]

#: Columns of the event catalogue, in order.
EVENT_COLUMNS = (
    "event_id",
    "drifter_id",
    "segment",
    "start",
    "end",
    "duration_h",
    "cycles",
    "kind",
    "spin",
    "sense",
    "period_h",
    "period_err_h",
    "radius_km",
    "radius_fit_km",
    "radius_err_km",
    "speed_m_s",
    "semi_major_km",
    "semi_minor_km",
    "orientation_deg",
    "decay_time_h",
    "lat",
    "lon",
    "centre_lat",
    "centre_lon",
    "inertial_period_h",
    "inertial_radius_km",
    "period_ratio",
    "radius_ratio",
    "tide",
    "pieces",
)

_MAD = 1.4826  # MAD -> standard deviation for a normal distribution
_KUNZE_MIN_PERIOD_RATIO = 2.0  # eddy period / T_i from which f + zeta/2 is used


@dataclass
class _Piece:
    """One ridge with the per-sample values an event needs."""

    drifter_id: str
    segment: int
    sense: int
    time_ns: np.ndarray
    period_s: np.ndarray
    amplitude: np.ndarray
    radius_m: np.ndarray
    semi_major_m: np.ndarray
    semi_minor_m: np.ndarray
    orientation_rad: np.ndarray
    lat: np.ndarray
    lon: np.ndarray
    residual_m: np.ndarray
    decay_rate_per_s: float
    cycles: float

    @property
    def period(self) -> float:
        return float(np.median(self.period_s))


@dataclass
class EventCatalogue:
    """Loop events of a set of resampled tracks.

    Attributes
    ----------
    events : pandas.DataFrame
        One row per event, columns :data:`EVENT_COLUMNS`.
    ridges : int
        Number of significant ridges found before merging.
    notes : list of str
        Remarks for the summary (e.g. events masked near the equator).
    """

    events: pd.DataFrame
    ridges: int = 0
    notes: list[str] = field(default_factory=list)


def spin_name(sense: np.ndarray | int, lat: np.ndarray | float) -> np.ndarray:
    """Return "cyclonic" or "anticyclonic" for a rotation sense at a latitude.

    Parameters
    ----------
    sense : array_like of int
        +1 anticlockwise, -1 clockwise.
    lat : array_like
        Latitude, degrees north.

    Returns
    -------
    numpy.ndarray
        ``"anticyclonic"`` where the rotation opposes the Earth's
        (clockwise north, anticlockwise south), else ``"cyclonic"``.

    Examples
    --------
    >>> spin_name([-1, 1, 1], [40.0, 40.0, -40.0]).tolist()
    ['anticyclonic', 'cyclonic', 'anticyclonic']
    """
    product = np.asarray(sense) * np.sign(np.asarray(lat, dtype=float))
    return np.where(product < 0, "anticyclonic", "cyclonic")


def _residual_positions(lon: np.ndarray, lat: np.ndarray, window: int) -> np.ndarray:
    """Distance (m) of each point from the running mean of the track over ``window`` samples."""
    lon0, lat0 = geodesy.track_centre(lon, lat)
    x, y = geodesy.LocalProjection(lon0, lat0).forward(lon, lat)
    window = max(int(window), 1)
    xs = uniform_filter1d(x, window, mode="nearest")
    ys = uniform_filter1d(y, window, mode="nearest")
    return np.hypot(x - xs, y - ys)


def _pieces_of_segment(seg: pd.DataFrame, wavelet: WaveletConfig) -> list[_Piece]:
    """Run the ridge engine on one resampled segment."""
    times = seg["time"].to_numpy(dtype="datetime64[ns]").astype(np.int64)
    if times.size < 8:
        return []
    dt_s = float(np.median(np.diff(times))) / 1e9
    z = seg["u"].to_numpy(dtype=float) + 1j * seg["v"].to_numpy(dtype=float)
    lat = seg["lat"].to_numpy(dtype=float)
    # the inertial and tidal bands of the segment's mean latitude stay out of the
    # background fit of the significance test
    result = detect(z, dt_s, wavelet, latitude=float(np.mean(lat)))
    lon = seg["lon"].to_numpy(dtype=float)
    pieces = []
    residual_cache: dict[int, np.ndarray] = {}
    for ridge in result.ridges:
        pieces.append(_piece(ridge, seg, times, lat, lon, dt_s, residual_cache))
    return pieces


def _piece(ridge: Ridge, seg: pd.DataFrame, times: np.ndarray, lat: np.ndarray,
           lon: np.ndarray, dt_s: float, cache: dict[int, np.ndarray]) -> _Piece:
    idx = ridge.index
    omega = np.abs(ridge.frequency_rad_s)
    omega = np.where(omega > 0, omega, np.abs(ridge.scale_frequency_rad_s))
    period = 2.0 * np.pi / omega
    window = int(round(float(np.median(period)) / dt_s))
    if window not in cache:
        cache[window] = _residual_positions(lon, lat, window)
    return _Piece(
        drifter_id=str(seg["drifter_id"].iloc[0]),
        segment=int(seg["segment"].iloc[0]),
        sense=int(ridge.sense),
        time_ns=times[idx],
        period_s=period,
        amplitude=np.asarray(ridge.amplitude_m_s, dtype=float),
        radius_m=np.asarray(ridge.amplitude_m_s, dtype=float) / omega,
        semi_major_m=np.abs(np.asarray(ridge.semi_major_m, dtype=float)),
        semi_minor_m=np.abs(np.asarray(ridge.semi_minor_m, dtype=float)),
        orientation_rad=np.asarray(ridge.orientation_rad, dtype=float),
        lat=lat[idx],
        lon=lon[idx],
        residual_m=cache[window][idx],
        decay_rate_per_s=float(ridge.decay_rate_per_s),
        cycles=float(ridge.n_cycles),
    )


def _merge(pieces: list[_Piece], config: LoopConfig, wavelet: WaveletConfig
           ) -> list[list[_Piece]]:
    """Group pieces of one drifter that continue the same oscillation.

    Pieces are taken in time order within each rotation sense; each joins
    the group whose last piece it continues best -- same sense, periods
    within ``merge_period_tolerance``, gap at most ``merge_gap_periods`` of
    the longer period, the smallest period difference winning -- so that a
    concurrent ridge of the same sense at another period (a tide beside
    inertial ringing, say) does not break the chain.  Across a segment break
    the ridges also stop short of the break by the cone of influence,
    k P / omega = k P T / 2 pi on each side, which is added to the allowed
    gap.
    """
    coi_periods = 2.0 * wavelet.coi * wavelet.duration / (2.0 * np.pi)
    order = sorted(pieces, key=lambda p: (p.sense, p.time_ns[0]))
    tolerance = np.log1p(config.merge_period_tolerance)
    groups: list[list[_Piece]] = []
    for piece in order:
        best, best_diff = None, np.inf
        for group in groups:
            last = group[-1]
            if last.sense != piece.sense:
                continue
            gap_s = (piece.time_ns[0] - last.time_ns[-1]) / 1e9
            diff = abs(np.log(piece.period / last.period))
            allowed = config.merge_gap_periods
            if piece.segment != last.segment:
                allowed += coi_periods
            if (diff <= tolerance and diff < best_diff
                    and gap_s <= allowed * max(piece.period, last.period)):
                best, best_diff = group, diff
        if best is None:
            groups.append([piece])
        else:
            best.append(piece)
    return groups


def _circular_median(angle: np.ndarray, period: float) -> float:
    """Median direction of axial angles (defined modulo ``period``)."""
    k = 2.0 * np.pi / period
    mean = np.angle(np.mean(np.exp(1j * k * angle))) / k
    return float(mean)


_ARRAYS = ("time_ns", "period_s", "amplitude", "radius_m", "semi_major_m", "semi_minor_m",
           "orientation_rad", "lat", "lon", "residual_m")


def _concatenate(group: list[_Piece]) -> dict[str, np.ndarray]:
    cat = {name: np.concatenate([getattr(p, name) for p in group]) for name in _ARRAYS}
    cat["piece"] = np.concatenate([np.full(p.time_ns.size, k) for k, p in enumerate(group)])
    return cat


def _cycles(cat: dict[str, np.ndarray], dt_s: float) -> float:
    return float(np.sum(dt_s / cat["period_s"]))


def _split_episodes(cat: dict[str, np.ndarray], dt_s: float, depth: float,
                    min_cycles: float) -> list[np.ndarray]:
    """Split an event at deep minima of its amplitude into forcing episodes.

    The amplitude, smoothed over one period, is cut at its deepest local
    minimum lower than ``depth`` times the smaller of the maxima on either
    side, if both parts keep at least ``min_cycles`` cycles; then again in
    each part.  Returns index arrays of the episodes.
    """
    n = cat["time_ns"].size
    window = max(int(round(float(np.median(cat["period_s"])) / dt_s)), 1)
    smooth = uniform_filter1d(cat["amplitude"], window, mode="nearest")
    cycles = np.cumsum(dt_s / cat["period_s"])
    todo, done = [np.arange(n)], []
    while todo:
        idx = todo.pop()
        a = smooth[idx]
        if idx.size < 3:
            done.append(idx)
            continue
        left = np.maximum.accumulate(a)
        right = np.maximum.accumulate(a[::-1])[::-1]
        interior = np.zeros(idx.size, dtype=bool)
        interior[1:-1] = (a[1:-1] <= a[:-2]) & (a[1:-1] <= a[2:])
        score = a / np.maximum(np.minimum(left, right), 1e-12)
        c = cycles[idx] - cycles[idx[0]]
        long_enough = (c >= min_cycles) & (c[-1] - c >= min_cycles)
        ok = interior & long_enough & (score < depth)
        if not ok.any():
            done.append(idx)
            continue
        cut = int(np.flatnonzero(ok)[np.argmin(score[ok])])
        todo.extend([idx[:cut], idx[cut:]])
    return sorted(done, key=lambda i: i[0])


def _decay_rate(cat: dict[str, np.ndarray], support_periods: float) -> float:
    """E-folding decay rate (1/s) of an event's amplitude after its maximum.

    The logarithm of the ridge amplitude is fitted by least squares with a
    straight line from the amplitude maximum onward (the free decay after
    the forcing, Park et al. 2009), leaving out ``support_periods`` periods
    after the maximum and before the end of the event: there the wavelet,
    whose central window spans P_beta,gamma / pi periods (Lilly & Olhede
    2009), still averages over the onset or over the end of the ridge, which
    flattens the slope.  If too little remains (fewer than one period or
    three samples), the fit runs from the maximum to the end.  Returns 0 for
    an event too short to fit.
    """
    amp = np.maximum(cat["amplitude"], 1e-12)
    t_s = (cat["time_ns"] - cat["time_ns"][0]) / 1e9
    period = float(np.median(cat["period_s"]))
    peak = int(np.argmax(amp))
    margin = support_periods * period
    sel = (t_s >= t_s[peak] + margin) & (t_s <= t_s[-1] - margin)
    if np.count_nonzero(sel) < 3 or np.ptp(t_s[sel]) < period:
        sel = t_s >= t_s[peak]
    if np.count_nonzero(sel) < 3:
        return 0.0
    return float(-np.polyfit(t_s[sel], np.log(amp[sel]), 1)[0])


def _event_row(group: list[_Piece], cat: dict[str, np.ndarray], dt_s: float,
               support_periods: float) -> dict:
    cycles = _cycles(cat, dt_s)
    n_eff = np.sqrt(max(cycles, 1.0))
    period = float(np.median(cat["period_s"]))
    period_sd = _MAD * float(np.median(np.abs(cat["period_s"] - period)))
    radius = float(np.median(cat["radius_m"]))
    radius_sd = _MAD * float(np.median(np.abs(cat["radius_m"] - radius)))
    radius_fit = float(np.median(cat["residual_m"]))
    lon0, lat0 = geodesy.track_centre(cat["lon"], cat["lat"])
    decay = _decay_rate(cat, support_periods)
    theta = _circular_median(cat["orientation_rad"], np.pi)  # axial, ccw from east
    first = group[int(cat["piece"][0])]
    return {
        "drifter_id": first.drifter_id,
        "segment": first.segment,
        "start": pd.Timestamp(int(cat["time_ns"].min()), tz="UTC"),
        "end": pd.Timestamp(int(cat["time_ns"].max()), tz="UTC"),
        "cycles": cycles,
        "sense": "anticlockwise" if first.sense > 0 else "clockwise",
        "_sense": first.sense,
        "period_h": period / 3600.0,
        "period_err_h": period_sd / n_eff / 3600.0,
        "radius_km": radius / 1000.0,
        "radius_fit_km": radius_fit / 1000.0,
        "radius_err_km": float(np.hypot(radius_sd / n_eff, 0.5 * (radius - radius_fit))) / 1000,
        "speed_m_s": float(np.median(cat["amplitude"])),
        "semi_major_km": float(np.median(cat["semi_major_m"])) / 1000.0,
        "semi_minor_km": float(np.median(cat["semi_minor_m"])) / 1000.0,
        "orientation_deg": float(np.mod(90.0 - np.degrees(theta), 180.0)),
        "decay_time_h": (1.0 / decay / 3600.0) if decay > 0 else np.inf,
        "lat": float(np.mean(cat["lat"])),
        "lon": float(lon0),
        "centre_lat": float(lat0),
        "centre_lon": float(lon0),
        "pieces": int(np.unique(cat["piece"]).size),
        "_eddy_rate": 0.0,
    }


def _is_tidal(period_s: float, lat: float, config: LoopConfig) -> bool:
    """Whether a period would be called tidal at ``lat`` (the rule of :func:`classify`)."""
    t_i = float(inertial_period_s(lat))
    for tide_h in TIDAL_PERIODS_H.values():
        tide_s = tide_h * 3600.0
        if (abs(period_s / tide_s - 1.0) <= config.tidal_tolerance
                and abs(tide_s / t_i - 1.0) > config.tidal_inertial_separation):
            return True
    return False


def _speed(cat: dict[str, np.ndarray], config: LoopConfig) -> np.ndarray:
    """Per-sample speed of the loop that ``min_speed_m_s`` is compared with.

    The own-sense amplitude A (the speed of the circular part) for inertial
    and eddy candidates; for a group whose period is tidal, the semi-major
    speed a = A+ + A- of the ridge ellipse (Lilly & Gascard 2006), the
    usual measure of the strength of a tidal current.
    """
    if _is_tidal(float(np.median(cat["period_s"])), float(np.mean(cat["lat"])), config):
        return cat["semi_major_m"] * (2.0 * np.pi / cat["period_s"])
    return cat["amplitude"]


def _active_runs(cat: dict[str, np.ndarray], speed: np.ndarray, dt_s: float,
                 min_speed: float, min_cycles: float) -> list[np.ndarray]:
    """Index runs of a joined group where the loop speed is at least ``min_speed``.

    Runs shorter than ``min_cycles`` cycles are dropped.  The ridge
    amplitude is already a local average over the wavelet's time support,
    so it is not smoothed further.
    """
    keep = speed >= min_speed
    edges = np.diff(np.concatenate([[0], keep.astype(np.int8), [0]]))
    runs = []
    for a, b in zip(np.flatnonzero(edges == 1), np.flatnonzero(edges == -1), strict=True):
        if np.sum(dt_s / cat["period_s"][a:b]) >= min_cycles:
            runs.append(np.arange(a, b))
    return runs


def _cut_at(cat: dict[str, np.ndarray], cuts_ns: np.ndarray, dt_s: float,
            min_cycles: float) -> list[np.ndarray]:
    """Cut an event at the given times where both parts keep ``min_cycles`` cycles."""
    n = cat["time_ns"].size
    cycles = np.cumsum(dt_s / cat["period_s"])
    bounds = [0]
    for cut in np.sort(cuts_ns):
        k = int(np.searchsorted(cat["time_ns"], cut))
        if k <= bounds[-1] or k >= n:
            continue
        before = cycles[k - 1] - (cycles[bounds[-1] - 1] if bounds[-1] else 0.0)
        after = cycles[-1] - cycles[k - 1]
        if before >= min_cycles and after >= min_cycles:
            bounds.append(k)
    bounds.append(n)
    return [np.arange(a, b) for a, b in zip(bounds[:-1], bounds[1:], strict=True)]


def _eddy_rate(row: dict, eddies: list[tuple[int, int, float]]) -> float:
    """Signed angular rate (rad/s) of the eddy event that overlaps ``row`` most, else 0."""
    t0, t1 = row["start"].value, row["end"].value
    best, rate = 0, 0.0
    for e0, e1, e_rate in eddies:
        overlap = min(t1, e1) - max(t0, e0)
        if overlap > best:
            best, rate = overlap, e_rate
    return rate


def _eddy_span(group: list[_Piece], cat: dict[str, np.ndarray], row: dict,
               bounds: dict[int, tuple[int, int]], wavelet: WaveletConfig
               ) -> tuple[int, int, float, bool, bool]:
    """Time span (ns) and signed angular rate (rad/s) of an eddy event.

    A ridge cannot come closer to the end of its segment than the cone of
    influence k P / omega; an eddy event that ends there may well go on, so
    its span is carried to the end of the segment and that end is flagged
    as open (it is not a time where the drifter is known to enter or leave
    the eddy).
    """
    period_s = row["period_h"] * 3600.0
    reach = wavelet.coi * wavelet.duration * period_s / (2.0 * np.pi)
    slack = 2 * float(np.median(np.diff(cat["time_ns"]))) if cat["time_ns"].size > 1 else 0.0
    seg0 = bounds[group[int(cat["piece"][0])].segment][0]
    seg1 = bounds[group[int(cat["piece"][-1])].segment][1]
    t0, t1 = int(cat["time_ns"][0]), int(cat["time_ns"][-1])
    open0 = t0 - seg0 <= reach * 1e9 + slack
    open1 = seg1 - t1 <= reach * 1e9 + slack
    rate = row["_sense"] * 2.0 * np.pi / period_s
    return (seg0 if open0 else t0, seg1 if open1 else t1, rate, open0, open1)


def _drifter_rows(pieces: list[_Piece], bounds: dict[int, tuple[int, int]],
                  config: LoopConfig, wavelet: WaveletConfig) -> list[dict]:
    """Events of one drifter, before classification.

    Joined groups of ridges are cut to the stretches where the loop speed
    reaches ``min_speed_m_s`` and split into forcing episodes.  Events that
    are not eddies themselves are then cut where an eddy event of the same
    drifter starts or ends (the vorticity shift of the inertial frequency
    changes there, Kunze 1985) and carry the eddy's angular rate in
    ``_eddy_rate`` for :func:`classify`.  ``bounds`` gives the first and
    last time (ns) of each segment.
    """
    min_cycles = wavelet.min_cycles
    support = wavelet.duration / np.pi
    spans = []
    for group in _merge(pieces, config, wavelet):
        cat = _concatenate(group)
        dt_s = float(np.median(np.diff(group[0].time_ns))) / 1e9 \
            if group[0].time_ns.size > 1 else 3600.0
        speed = _speed(cat, config)
        for run in _active_runs(cat, speed, dt_s, config.min_speed_m_s, min_cycles):
            sub = {k: v[run] for k, v in cat.items()}
            for ep in _split_episodes(sub, dt_s, config.episode_split_depth, min_cycles):
                spans.append((group, {k: v[ep] for k, v in sub.items()}, dt_s))
    rows = [_event_row(group, cat, dt_s, support) for group, cat, dt_s in spans]
    if not rows:
        return rows
    first = _class_columns(*(np.array([r[k] for r in rows], dtype=float) for k in
                             ("period_h", "speed_m_s", "radius_fit_km", "lat")),
                           np.array([r["_sense"] for r in rows]), None, config)
    is_eddy = first["kind"] == "eddy"
    # the shift f + zeta/2 is a small-Rossby-number result; with zeta at most
    # 2 omega, |zeta / f| <= 1 needs an eddy period of at least 2 T_i
    usable = is_eddy & (first["period_ratio"] >= _KUNZE_MIN_PERIOD_RATIO)
    if not usable.any():
        return rows
    eddies = [_eddy_span(group, cat, row, bounds, wavelet)
              for (group, cat, _), row, e in zip(spans, rows, usable, strict=True) if e]
    cuts = np.array([t for e0, e1, _, open0, open1 in eddies
                     for t, is_open in ((e0, open0), (e1, open1)) if not is_open],
                    dtype=np.int64)
    eddies = [(e0, e1, rate) for e0, e1, rate, _, _ in eddies]
    out = []
    for (group, cat, dt_s), row, eddy in zip(spans, rows, is_eddy, strict=True):
        if eddy:
            out.append(row)
            continue
        for part in _cut_at(cat, cuts, dt_s, min_cycles):
            new = _event_row(group, {k: v[part] for k, v in cat.items()}, dt_s, support)
            new["_eddy_rate"] = _eddy_rate(new, eddies)
            out.append(new)
    return out


def classify(events: pd.DataFrame, config: LoopConfig) -> pd.DataFrame:
    """Add the inertial checks and the class of each event.

    Parameters
    ----------
    events : pandas.DataFrame
        Rows with at least ``period_h``, ``speed_m_s``, ``radius_fit_km``,
        ``lat`` and ``_sense`` (+1 anticlockwise, -1 clockwise); optionally
        ``_eddy_rate`` (rad/s, signed, anticlockwise positive), the angular
        rate of an eddy event the event lies in.
    config : LoopConfig
        Thresholds.

    Returns
    -------
    pandas.DataFrame
        ``events`` with ``spin``, ``inertial_period_h``,
        ``inertial_radius_km``, ``period_ratio``, ``radius_ratio``, ``tide``
        and ``kind`` added.

    Notes
    -----
    Inside an eddy the inertial frequency is shifted to f_eff = f + zeta/2
    (Kunze 1985).  For an axisymmetric vortex whose angular velocity omega(r)
    does not increase outwards, zeta = 2 omega + r d omega/dr lies between 0
    and 2 omega (of the sign of omega where zeta does not change sign), so
    f_eff lies between f and f + omega, omega being the eddy event's signed
    angular rate 2 pi / period.  Where ``_eddy_rate`` is set, the inertial
    period band and the separation of the tides from the inertial period are
    therefore taken over the whole range of periods 2 pi / |f_eff| between
    those two bounds (the f-plane value alone where f + omega has the other
    sign).  ``inertial_period_h`` and ``period_ratio`` stay those of f.

    Examples
    --------
    >>> row = pd.DataFrame({"period_h": [14.0], "speed_m_s": [0.2], "radius_fit_km": [2.0],
    ...                     "lat": [45.0], "_sense": [-1]})
    >>> classify(row, LoopConfig())["kind"].tolist()  # 0.83 T_i: too fast for f alone
    ['other']
    >>> eddy = 2 * np.pi / (80 * 3600.0)  # in a cyclonic eddy turning once in 80 h
    >>> classify(row.assign(_eddy_rate=eddy), LoopConfig())["kind"].tolist()
    ['inertial']
    """
    columns = _class_columns(
        events["period_h"].to_numpy(dtype=float), events["speed_m_s"].to_numpy(dtype=float),
        events["radius_fit_km"].to_numpy(dtype=float), events["lat"].to_numpy(dtype=float),
        events["_sense"].to_numpy(),
        events["_eddy_rate"].to_numpy(dtype=float) if "_eddy_rate" in events else None,
        config)
    out = events.drop(columns=[c for c in columns if c in events])
    added = pd.DataFrame(columns, index=events.index)
    return pd.concat([out, added], axis=1) if len(out.columns) else added


def _class_columns(period_h: np.ndarray, speed: np.ndarray, radius_fit_km: np.ndarray,
                   lat: np.ndarray, sense: np.ndarray, eddy_rate: np.ndarray | None,
                   config: LoopConfig) -> dict[str, np.ndarray]:
    """Compute the columns that :func:`classify` adds, from the events' values as arrays."""
    t_i = inertial_period_s(lat) / 3600.0
    f_signed = coriolis_parameter(lat)
    f = np.abs(f_signed)
    rate = eddy_rate if eddy_rate is not None else np.zeros(lat.size)
    f_eff = f_signed + np.nan_to_num(rate)
    with np.errstate(divide="ignore", invalid="ignore"):
        t_eff = np.where(f_eff * f_signed > 0, 2.0 * np.pi / np.abs(f_eff) / 3600.0, t_i)
        r_i = np.where(f > 0, speed / f / 1000.0, np.inf)
        period_ratio = period_h / t_i
        radius_ratio = radius_fit_km / r_i
    t_lo, t_hi = np.minimum(t_i, t_eff), np.maximum(t_i, t_eff)
    spin = spin_name(sense, lat)
    tide = np.full(lat.size, "", dtype=object)
    sep = config.tidal_inertial_separation
    for name, tide_h in TIDAL_PERIODS_H.items():
        near = np.abs(period_h / tide_h - 1.0) <= config.tidal_tolerance
        apart = (tide_h > t_hi * (1.0 + sep)) | (tide_h < t_lo * (1.0 - sep))
        tide = np.where(near & apart & (tide == ""), name, tide)
    inertial = (
        (spin == "anticyclonic")
        & (period_h >= t_lo * config.inertial_period_ratio_min)
        & (period_h <= t_hi * config.inertial_period_ratio_max)
        & (radius_ratio >= config.inertial_radius_ratio_min)
        & (radius_ratio <= config.inertial_radius_ratio_max)
        & (np.abs(lat) >= config.equator_band_deg)
    )
    eddy = period_ratio >= config.eddy_period_ratio_min
    kind = np.select([tide != "", inertial, eddy], ["tidal", "inertial", "eddy"], "other")
    return {"spin": spin, "inertial_period_h": t_i, "inertial_radius_km": r_i,
            "period_ratio": period_ratio, "radius_ratio": radius_ratio, "tide": tide,
            "kind": kind}


def _empty_events() -> pd.DataFrame:
    table = pd.DataFrame({name: pd.Series(dtype=float) for name in EVENT_COLUMNS})
    for name in ("event_id", "drifter_id", "kind", "spin", "sense", "tide"):
        table[name] = pd.Series(dtype=pd.StringDtype())
    for name in ("start", "end"):
        table[name] = pd.Series(dtype="datetime64[ns, UTC]")
    for name in ("segment", "pieces"):
        table[name] = pd.Series(dtype=np.int64)
    return table


def find_events(
    track: pd.DataFrame,
    config: LoopConfig | None = None,
    wavelet: WaveletConfig | None = None,
    progress: Callable[[Iterable], Iterable] | None = None,
) -> EventCatalogue:
    """Find, merge and classify the loop events of resampled tracks.

    Parameters
    ----------
    track : pandas.DataFrame
        Resampled tracks (:func:`driftloop.resample.resample_all`): columns
        ``drifter_id``, ``segment``, ``time``, ``lat``, ``lon``, ``u``, ``v``
        on a uniform grid within each segment.
    config : LoopConfig, optional
        Merging and classification thresholds.
    wavelet : WaveletConfig, optional
        Transform and ridge parameters.
    progress : callable, optional
        Wraps the iterable of drifter groups (e.g. a progress bar).

    Returns
    -------
    EventCatalogue
        The events, sorted by drifter and start, with ids ``DRIFTER-E001``...
    """
    config = config or LoopConfig()
    wavelet = wavelet or WaveletConfig()
    rows = []
    n_ridges = 0
    groups = track.groupby("drifter_id", sort=True, observed=True)
    iterator: Iterable = (g for _, g in groups)
    if progress is not None:
        iterator = progress(iterator)
    for drifter in iterator:
        pieces = []
        bounds = {}
        for number, seg in drifter.groupby("segment", sort=True):
            seg = seg.sort_values("time")
            times = seg["time"].to_numpy(dtype="datetime64[ns]").astype(np.int64)
            bounds[int(number)] = (int(times[0]), int(times[-1]))
            pieces.extend(_pieces_of_segment(seg, wavelet))
        n_ridges += len(pieces)
        rows.extend(_drifter_rows(pieces, bounds, config, wavelet))
    if not rows:
        return EventCatalogue(_empty_events(), n_ridges, [])
    events = classify(pd.DataFrame(rows), config)
    events = events.sort_values(["drifter_id", "start", "_sense"], kind="stable")
    events["event_id"] = [
        f"{d}-E{n + 1:03d}" for d, n in zip(
            events["drifter_id"], events.groupby("drifter_id").cumcount(), strict=True)
    ]
    events["duration_h"] = (events["end"] - events["start"]).dt.total_seconds() / 3600.0
    notes = []
    masked = int(((events["lat"].abs() < config.equator_band_deg)
                  & (events["spin"] == "anticyclonic")).sum())
    if masked:
        notes.append(
            f"{masked} anticyclonic events lie within {config.equator_band_deg:g} degrees of "
            "the equator, where f-plane inertial dynamics do not hold; none is called inertial."
        )
    events = events.loc[:, list(EVENT_COLUMNS)].reset_index(drop=True)
    for name in ("event_id", "drifter_id", "kind", "spin", "sense", "tide"):
        events[name] = events[name].astype(pd.StringDtype())
    return EventCatalogue(events, n_ridges, notes)
