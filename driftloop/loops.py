"""Looping events: wavelet ridges of resampled tracks turned into a catalogue.

For each resampled segment of each drifter the complex velocity z = u + i v
goes through the rotary Morse-wavelet ridge engine
(:func:`driftloop.ridges.detect`); every significant ridge is a candidate
event.  Candidates of the same drifter and rotation sense whose periods
agree within ``merge_period_tolerance`` and that are separated by less than
``merge_gap_periods`` of their period (a short gap, a segment break or a
dip of the ridge below threshold) are joined, so that one oscillation is not
reported as several.  Each event is then checked against inertial theory
(:mod:`driftloop.physics`) and classified.

Event properties
----------------
period_h
    Median over the event of the instantaneous period 2 pi / |omega| from the
    ridge's phase derivative.  The median ignores the phase resets of the
    storms that force inertial ringing.
speed_m_s, radius_km
    Median own-sense speed amplitude A of the ridge (bias-corrected) and the
    ridge radius A / |omega| (Lilly & Gascard 2006).
radius_fit_km
    A second, position-based radius: the track in the event's own azimuthal
    equidistant frame, less its running mean over one period (which removes
    the low-frequency drift and leaves the loops), gives the root-mean-square
    distance from the drifting centre; exactly R for a circle of radius R.
semi_major_km, semi_minor_km, orientation_deg
    Median ellipse of the ridge (displacement axes; orientation of the major
    axis clockwise from north).
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
    period (so that the two cannot be confused).
``inertial``
    Anticyclonic (clockwise north, anticlockwise south), period ratio within
    [``inertial_period_ratio_min``, ``inertial_period_ratio_max``] -- a band
    that allows the vorticity shift f_eff = f + zeta/2 of near-inertial motion
    (Kunze 1985, J. Phys. Oceanogr. 15) -- and radius ratio within
    [``inertial_radius_ratio_min``, ``inertial_radius_ratio_max``]; never
    within ``equator_band_deg`` of the equator, where f-plane inertial
    dynamics do not hold.
``eddy``
    Looping, either spin, at a period of at least ``eddy_period_ratio_min``
    times the inertial period.
``other``
    Everything else.

Spin is "anticyclonic" when the sense of rotation is opposite to the
Earth's (clockwise north, anticlockwise south), else "cyclonic".
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
    result = detect(z, dt_s, wavelet)
    lat = seg["lat"].to_numpy(dtype=float)
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

    Across a segment break the ridges also stop short of the break by the
    cone of influence, k P / omega = k P T / 2 pi on each side, which is
    added to the allowed gap.
    """
    coi_periods = 2.0 * wavelet.coi * wavelet.duration / (2.0 * np.pi)
    order = sorted(pieces, key=lambda p: (p.sense, p.time_ns[0]))
    groups: list[list[_Piece]] = []
    for piece in order:
        if groups:
            last = groups[-1][-1]
            gap_s = (piece.time_ns[0] - last.time_ns[-1]) / 1e9
            same_sense = piece.sense == last.sense
            close_period = abs(np.log(piece.period / last.period)) <= np.log1p(
                config.merge_period_tolerance
            )
            allowed = config.merge_gap_periods
            if piece.segment != last.segment:
                allowed += coi_periods
            if same_sense and close_period and gap_s <= allowed * max(
                piece.period, last.period
            ):
                groups[-1].append(piece)
                continue
        groups.append([piece])
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


def _event_row(group: list[_Piece], cat: dict[str, np.ndarray], dt_s: float) -> dict:
    cycles = _cycles(cat, dt_s)
    n_eff = np.sqrt(max(cycles, 1.0))
    period = float(np.median(cat["period_s"]))
    period_sd = _MAD * float(np.median(np.abs(cat["period_s"] - period)))
    radius = float(np.median(cat["radius_m"]))
    radius_sd = _MAD * float(np.median(np.abs(cat["radius_m"] - radius)))
    radius_fit = float(np.sqrt(np.mean(cat["residual_m"] ** 2)))
    lon0, lat0 = geodesy.track_centre(cat["lon"], cat["lat"])
    t_s = (cat["time_ns"] - cat["time_ns"][0]) / 1e9
    decay = -np.polyfit(t_s, np.log(np.maximum(cat["amplitude"], 1e-12)), 1)[0] \
        if t_s.size > 2 else 0.0
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
    }


def _events_of_group(group: list[_Piece], config: LoopConfig, min_cycles: float) -> list[dict]:
    cat = _concatenate(group)
    dt_s = float(np.median(np.diff(group[0].time_ns))) / 1e9 if group[0].time_ns.size > 1 \
        else 3600.0
    episodes = _split_episodes(cat, dt_s, config.episode_split_depth, min_cycles)
    return [_event_row(group, {k: v[i] for k, v in cat.items()}, dt_s) for i in episodes]


def classify(events: pd.DataFrame, config: LoopConfig) -> pd.DataFrame:
    """Add the inertial checks and the class of each event.

    Parameters
    ----------
    events : pandas.DataFrame
        Rows with at least ``period_h``, ``speed_m_s``, ``radius_fit_km``,
        ``lat`` and ``_sense`` (+1 anticlockwise, -1 clockwise).
    config : LoopConfig
        Thresholds.

    Returns
    -------
    pandas.DataFrame
        ``events`` with ``spin``, ``inertial_period_h``,
        ``inertial_radius_km``, ``period_ratio``, ``radius_ratio``, ``tide``
        and ``kind`` added.
    """
    out = events.copy()
    lat = out["lat"].to_numpy(dtype=float)
    period_h = out["period_h"].to_numpy(dtype=float)
    t_i = inertial_period_s(lat) / 3600.0
    f = np.abs(coriolis_parameter(lat))
    with np.errstate(divide="ignore", invalid="ignore"):
        r_i = np.where(f > 0, out["speed_m_s"].to_numpy(dtype=float) / f / 1000.0, np.inf)
        period_ratio = period_h / t_i
        radius_ratio = out["radius_fit_km"].to_numpy(dtype=float) / r_i
    spin = spin_name(out["_sense"].to_numpy(), lat)
    tide = np.full(len(out), "", dtype=object)
    for name, tide_h in TIDAL_PERIODS_H.items():
        near = np.abs(period_h / tide_h - 1.0) <= config.tidal_tolerance
        apart = np.abs(tide_h / t_i - 1.0) > config.tidal_inertial_separation
        tide = np.where(near & apart & (tide == ""), name, tide)
    inertial = (
        (spin == "anticyclonic")
        & (period_ratio >= config.inertial_period_ratio_min)
        & (period_ratio <= config.inertial_period_ratio_max)
        & (radius_ratio >= config.inertial_radius_ratio_min)
        & (radius_ratio <= config.inertial_radius_ratio_max)
        & (np.abs(lat) >= config.equator_band_deg)
    )
    eddy = period_ratio >= config.eddy_period_ratio_min
    kind = np.select([tide != "", inertial, eddy], ["tidal", "inertial", "eddy"], "other")
    out["spin"] = spin
    out["inertial_period_h"] = t_i
    out["inertial_radius_km"] = r_i
    out["period_ratio"] = period_ratio
    out["radius_ratio"] = radius_ratio
    out["tide"] = tide
    out["kind"] = kind
    return out


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
        for _, seg in drifter.groupby("segment", sort=True):
            pieces.extend(_pieces_of_segment(seg.sort_values("time"), wavelet))
        n_ridges += len(pieces)
        for group in _merge(pieces, config, wavelet):
            rows.extend(_events_of_group(group, config, wavelet.min_cycles))
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
