"""Figures of a driftloop run, drawn with matplotlib (Agg, no network).

Every function takes the run's tables (pandas DataFrames, dicts) and
returns a :class:`matplotlib.figure.Figure`; :func:`save_figure` writes one
to PNG or SVG atomically.  Colours come from one colour-blind-safe palette,
:data:`PALETTE` (the eight colours of Okabe & Ito 2008), assigned to roles
once in :data:`KIND_COLOURS`, :data:`SENSE_COLOURS` and :data:`FLAG_COLOURS`.

Figures
-------
- :func:`track_map` -- all resampled tracks, QC-failed fixes and loop events
  by class on plain longitude/latitude axes (aspect 1 / cos(mean latitude)).
- :func:`scalogram` -- |W| of both rotary senses against time and period,
  with ridges, the local inertial period and the cone of influence.
- :func:`rotary_spectrum` -- both sides of a rotary spectrum, log-log, with
  the inertial frequency and a period axis.
- :func:`period_latitude` -- event period against latitude with the
  inertial period pi / (Omega |sin(lat)|).
- :func:`qc_timeline` -- QC flags of one drifter over time, gaps shaded.
- :func:`drift_dispersion` -- mean drift vector of each drifter on a map and
  single-particle diffusivity per drifter with confidence intervals.
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from pathlib import Path

import matplotlib

matplotlib.use("Agg")

import matplotlib.dates as mdates  # noqa: E402
import numpy as np  # noqa: E402
import pandas as pd  # noqa: E402
from matplotlib.colors import LogNorm  # noqa: E402
from matplotlib.figure import Figure  # noqa: E402

from driftloop.io.writers import atomic_open  # noqa: E402
from driftloop.physics import inertial_period_s  # noqa: E402

__all__ = [
    "FLAG_COLOURS",
    "KIND_COLOURS",
    "PALETTE",
    "SENSE_COLOURS",
    "drift_dispersion",
    "drifter_latitude",
    "inertial_period_h",
    "map_aspect",
    "period_latitude",
    "qc_timeline",
    "rotary_spectrum",
    "save_figure",
    "scalogram",
    "track_map",
    "wavelet_config_from",
]

#: Okabe & Ito (2008) colour-blind-safe palette, by name.
PALETTE: dict[str, str] = {
    "black": "#000000",
    "orange": "#E69F00",
    "sky_blue": "#56B4E9",
    "green": "#009E73",
    "yellow": "#F0E442",
    "blue": "#0072B2",
    "vermillion": "#D55E00",
    "purple": "#CC79A7",
}

#: Loop event class -> colour.
KIND_COLOURS: dict[str, str] = {
    "inertial": PALETTE["blue"],
    "eddy": PALETTE["vermillion"],
    "tidal": PALETTE["green"],
    "other": PALETTE["purple"],
}

#: Rotary side -> colour.
SENSE_COLOURS: dict[str, str] = {
    "anticlockwise": PALETTE["vermillion"],
    "clockwise": PALETTE["blue"],
}

#: QC flag -> (label, colour).
FLAG_COLOURS: dict[int, tuple[str, str]] = {
    1: ("pass", PALETTE["green"]),
    3: ("suspect", PALETTE["orange"]),
    4: ("fail", PALETTE["vermillion"]),
    9: ("missing", PALETTE["black"]),
}

_TRACK_GREYS = ("#4D4D4D", "#7F7F7F", "#A6A6A6", "#333333", "#999999", "#666666")
_GAP_COLOUR = "#D9D9D9"
_SCALOGRAM_CMAP = "cividis"


def _utc_naive(values: pd.Series | np.ndarray) -> pd.Series:
    """Parse times to naive UTC datetimes (matplotlib dates)."""
    t = pd.to_datetime(pd.Series(values), utc=True, errors="coerce")
    return t.dt.tz_convert(None)


def inertial_period_h(lat: np.ndarray | float) -> np.ndarray:
    """Return the inertial period pi / (Omega |sin(lat)|) in hours.

    Parameters
    ----------
    lat : array_like
        Latitude, degrees north.

    Returns
    -------
    numpy.ndarray
        Period (h); infinite at the equator.

    Examples
    --------
    >>> print(f"{float(inertial_period_h(30.0)):.3f}")
    23.934
    """
    return inertial_period_s(lat) / 3600.0


def map_aspect(lat: np.ndarray) -> float:
    """Return the data aspect 1 / cos(mean latitude) of a lon/lat map.

    Parameters
    ----------
    lat : array_like
        Latitudes (degrees north); NaN ignored.

    Returns
    -------
    float
        Ratio of the length of one degree of latitude to one degree of
        longitude on the plot.

    Examples
    --------
    >>> print(f"{map_aspect([60.0]):.3f}")
    2.000
    """
    mean = float(np.nanmean(np.asarray(lat, dtype=float)))
    return 1.0 / max(math.cos(math.radians(mean)), 1e-3)


def save_figure(fig: Figure, path: str | Path, *, dpi: int = 100) -> Path:
    """Write a figure to PNG or SVG atomically.

    The figure goes to a temporary file in the destination folder, which
    then replaces ``path`` (:func:`os.replace`), so readers never see a
    partial file.

    Parameters
    ----------
    fig : matplotlib.figure.Figure
        The figure.
    path : str or Path
        Destination ending in ``.png`` or ``.svg``.
    dpi : int, optional
        Resolution of PNG output.

    Returns
    -------
    Path
        The path written.

    Raises
    ------
    ValueError
        If the suffix is neither ``.png`` nor ``.svg``.
    """
    path = Path(path)
    fmt = path.suffix.lower().lstrip(".")
    if fmt not in ("png", "svg"):
        raise ValueError(f"save_figure writes .png or .svg, not {path.suffix!r}")
    with atomic_open(path, "wb") as fh:
        fig.savefig(fh, format=fmt, dpi=dpi, metadata=_metadata(fmt))
    return path


def _metadata(fmt: str) -> dict:
    """Deterministic metadata (no dates) for PNG and SVG output."""
    if fmt == "svg":
        return {"Date": None, "Creator": "driftloop"}
    return {"Software": "driftloop"}


def _crosses_antimeridian(lon: pd.Series | np.ndarray) -> bool:
    """Whether tracks straddle +-180 deg (then the map uses 0..360 longitudes)."""
    lon = np.asarray(lon, dtype=float)
    lon = lon[np.isfinite(lon)]
    if lon.size == 0:
        return False
    plain = lon.max() - lon.min()
    shifted = np.mod(lon, 360.0)
    return bool(plain > 180.0 and shifted.max() - shifted.min() < plain)


def _map_lon(lon: pd.Series | np.ndarray, wrap: bool) -> np.ndarray:
    lon = np.asarray(lon, dtype=float)
    return np.mod(lon, 360.0) if wrap else lon


def _date_axis(ax) -> None:
    """Calendar ticks (month names at month starts) on a date-number x axis."""
    locator = mdates.AutoDateLocator(minticks=4, maxticks=9)
    ax.xaxis.set_major_locator(locator)
    ax.xaxis.set_major_formatter(mdates.ConciseDateFormatter(locator))


def track_map(resampled: pd.DataFrame, fixes: pd.DataFrame | None = None,
              loops: pd.DataFrame | None = None) -> Figure:
    """Map all tracks, QC-failed fixes and loop events on lon/lat axes.

    Parameters
    ----------
    resampled : pandas.DataFrame
        ``resampled.csv``: drifter_id, segment, time, lat, lon.
    fixes : pandas.DataFrame, optional
        ``fixes.csv``; fixes with ``qc_flag`` 4 are marked.
    loops : pandas.DataFrame, optional
        ``loops.csv``; each event's stretch of track is drawn in its class
        colour.

    Returns
    -------
    matplotlib.figure.Figure
        One axes with aspect 1 / cos(mean latitude).
    """
    fig = Figure(figsize=(8.0, 6.0))
    fig.subplots_adjust(left=0.1, right=0.97, bottom=0.09, top=0.94)
    ax = fig.add_subplot()
    res = resampled.copy()
    res["_t"] = _utc_naive(res["time"]).to_numpy()
    wrap = _crosses_antimeridian(res["lon"])
    res["lon"] = _map_lon(res["lon"], wrap)
    for k, (drifter, track) in enumerate(res.groupby("drifter_id", sort=True)):
        colour = _TRACK_GREYS[k % len(_TRACK_GREYS)]
        for j, (_, seg) in enumerate(track.groupby("segment", sort=True)):
            ax.plot(seg["lon"], seg["lat"], color=colour, lw=0.8,
                    label="track (resampled)" if k == 0 and j == 0 else None)
        first = track.iloc[0]
        ax.plot(first["lon"], first["lat"], marker="o", ms=4, color=colour, ls="none")
        ax.annotate(str(drifter), (first["lon"], first["lat"]), fontsize=7,
                    xytext=(3, 3), textcoords="offset points", color=PALETTE["black"])
    if loops is not None and len(loops):
        seen: set[str] = set()
        start = _utc_naive(loops["start"]).to_numpy()
        end = _utc_naive(loops["end"]).to_numpy()
        for i, ev in enumerate(loops.itertuples(index=False)):
            kind = str(ev.kind)
            sel = res[(res["drifter_id"] == ev.drifter_id) & (res["_t"] >= start[i])
                      & (res["_t"] <= end[i])]
            if "segment" in loops.columns:
                sel = sel[sel["segment"] == ev.segment]
            if sel.empty:
                continue
            ax.plot(sel["lon"], sel["lat"], color=KIND_COLOURS.get(kind, PALETTE["purple"]),
                    lw=2.2, alpha=0.9,
                    label=f"{kind} event" if kind not in seen else None)
            seen.add(kind)
    if fixes is not None and len(fixes):
        bad = fixes[fixes["qc_flag"] == 4]
        bad = bad[np.isfinite(bad["lat"]) & np.isfinite(bad["lon"])]
        if len(bad):
            ax.plot(_map_lon(bad["lon"], wrap), bad["lat"], ls="none", marker="x", ms=6,
                    mew=1.4, color=PALETTE["black"], label=f"QC fail fix ({len(bad)})")
    ax.set_aspect(map_aspect(res["lat"]), adjustable="datalim")
    ax.set_xlabel("Longitude (degrees east, 0-360)" if wrap else "Longitude (degrees east)")
    ax.set_ylabel("Latitude (degrees north)")
    ax.set_title("Drifter tracks and loop events")
    ax.grid(True, lw=0.3, color=_GAP_COLOUR)
    ax.legend(loc="best", fontsize=8, framealpha=0.9)
    return fig


def _segment_transform(seg: pd.DataFrame, wavelet_config):
    """Transform and ridges of one resampled segment, or None if too short."""
    from driftloop.ridges import detect

    times = seg["time"].to_numpy(dtype="datetime64[ns]").astype(np.int64)
    if times.size < 8:
        return None
    dt_s = float(np.median(np.diff(times))) / 1e9
    z = seg["u"].to_numpy(dtype=float) + 1j * seg["v"].to_numpy(dtype=float)
    if not np.all(np.isfinite(z)):
        return None
    lat = float(np.mean(seg["lat"].to_numpy(dtype=float)))  # as the loop stage does
    return detect(z, dt_s, wavelet_config, latitude=lat, keep_transform=True), dt_s


def scalogram(resampled: pd.DataFrame, drifter_id: str, wavelet_config=None) -> Figure:
    """Time-period scalogram |W| of one drifter, both rotary senses.

    The transform is recomputed from the resampled velocities one segment
    at a time (:func:`driftloop.ridges.detect`); ridges are overlaid, the
    cone of influence is shaded and the local inertial period (from each
    sample's latitude) is drawn.

    Parameters
    ----------
    resampled : pandas.DataFrame
        ``resampled.csv`` (all drifters or one).
    drifter_id : str
        The drifter to draw.
    wavelet_config : driftloop.wavelet.WaveletConfig, optional
        Parameters of the run; defaults if omitted.

    Returns
    -------
    matplotlib.figure.Figure
        Two axes (anticlockwise above, clockwise below), log period axis (h).
    """
    from driftloop.wavelet import WaveletConfig

    wavelet_config = wavelet_config or WaveletConfig()
    fig = Figure(figsize=(9.0, 5.6))
    axes = fig.subplots(2, 1, sharex=True, sharey=True,
                        gridspec_kw={"left": 0.08, "right": 0.86, "bottom": 0.09,
                                     "top": 0.95, "hspace": 0.14})
    track = resampled[resampled["drifter_id"].astype(str) == str(drifter_id)].copy()
    track["time"] = _utc_naive(track["time"]).to_numpy()
    meshes = []
    vmax = 0.0
    labelled = False
    for _, seg in track.groupby("segment", sort=True):
        seg = seg.sort_values("time")
        out = _segment_transform(seg, wavelet_config)
        if out is None:
            continue
        result, dt_s = out
        tr = result.transform
        t = mdates.date2num(seg["time"].to_numpy())
        period_h = np.asarray(tr.periods_s) / 3600.0
        lat = seg["lat"].to_numpy(dtype=float)
        for ax, w, sense in ((axes[0], tr.w_ccw, 1), (axes[1], tr.w_cw, -1)):
            amp = np.abs(w).astype(float)
            vmax = max(vmax, float(np.nanmax(amp)))
            meshes.append(ax.pcolormesh(t, period_h, amp, shading="nearest",
                                        cmap=_SCALOGRAM_CMAP, rasterized=True))
            edge = np.asarray(tr.coi, dtype=float) * dt_s / 86400.0
            ax.fill_betweenx(period_h, t[0], np.minimum(t[0] + edge, t[-1]), color="white",
                             alpha=0.45, lw=0,
                             label="cone of influence" if not labelled else None)
            ax.fill_betweenx(period_h, np.maximum(t[-1] - edge, t[0]), t[-1], color="white",
                             alpha=0.45, lw=0)
            ax.plot(t, inertial_period_h(lat), color="white", lw=1.3, ls="--",
                    label="local inertial period" if not labelled else None)
            first_ridge = True
            for ridge in result.ridges:
                if int(ridge.sense) != sense:
                    continue
                omega = np.abs(np.asarray(ridge.frequency_rad_s, dtype=float))
                omega = np.where(omega > 0, omega,
                                 np.abs(np.asarray(ridge.scale_frequency_rad_s, dtype=float)))
                ax.plot(t[np.asarray(ridge.index)], 2 * np.pi / omega / 3600.0,
                        color=PALETTE["vermillion"], lw=2.0,
                        label="ridge" if first_ridge and not labelled else None)
                first_ridge = False
        labelled = True
    vmin = max(vmax * 1e-2, 1e-4)
    for m in meshes:
        m.set_norm(LogNorm(vmin=vmin, vmax=max(vmax, vmin * 10)))
    for ax, name in ((axes[0], "anticlockwise (W+)"), (axes[1], "clockwise (W-)")):
        ax.set_yscale("log")
        ax.set_ylabel("Period (h)")
        ax.set_title(f"{drifter_id}: {name}", fontsize=10, loc="left")
        handles, labels = ax.get_legend_handles_labels()
        if handles:
            ax.legend(fontsize=7, loc="upper right", framealpha=0.85)
    axes[1].set_xlabel("Time (UTC)")
    _date_axis(axes[1])
    if meshes:
        fig.colorbar(meshes[0], cax=fig.add_axes((0.885, 0.12, 0.02, 0.8)), label="|W| (m/s)")
    else:
        axes[0].text(0.5, 0.5, "no segment long enough", transform=axes[0].transAxes,
                     ha="center")
    return fig


def rotary_spectrum(spectra: pd.DataFrame, drifter_id: str, lat: float | None = None
                    ) -> Figure:
    """Rotary spectrum of one drifter or of the release, log-log.

    Parameters
    ----------
    spectra : pandas.DataFrame
        ``spectra.csv``: drifter_id, frequency_cpd, psd_anticlockwise,
        psd_clockwise ((m/s)^2/cpd).
    drifter_id : str
        Drifter, or ``"(release)"``.
    lat : float, optional
        Latitude (degrees north) of the inertial frequency marker.

    Returns
    -------
    matplotlib.figure.Figure
        One axes with frequency (cpd) below and period (h) above.
    """
    fig = Figure(figsize=(7.0, 4.4))
    fig.subplots_adjust(left=0.13, right=0.97, bottom=0.12, top=0.82)
    ax = fig.add_subplot()
    sp = spectra[spectra["drifter_id"].astype(str) == str(drifter_id)]
    sp = sp[sp["frequency_cpd"] > 0].sort_values("frequency_cpd")
    for col, side in (("psd_anticlockwise", "anticlockwise"), ("psd_clockwise", "clockwise")):
        y = sp[col].to_numpy(dtype=float)
        ok = np.isfinite(y) & (y > 0)
        ax.plot(sp["frequency_cpd"].to_numpy()[ok], y[ok], color=SENSE_COLOURS[side], lw=1.3,
                label=side)
    if lat is not None and np.isfinite(lat) and abs(lat) > 0.5:
        f_cpd = 24.0 / float(inertial_period_h(lat))
        ax.axvline(f_cpd, color=PALETTE["black"], ls=":", lw=1.2,
                   label=f"inertial f = {f_cpd:.2f} cpd ({lat:.1f} deg)")
    ax.set_xscale("log")
    ax.set_yscale("log")
    ax.set_xlabel("Frequency (cycles per day, cpd)")
    ax.set_ylabel("PSD ((m/s)$^2$/cpd)")
    sec = ax.secondary_xaxis("top", functions=(_cpd_to_h, _cpd_to_h))
    sec.set_xlabel("Period (h)")
    title = "Release rotary spectrum" if drifter_id == "(release)" else \
        f"{drifter_id}: rotary spectrum"
    ax.set_title(title, fontsize=10, loc="left")
    ax.grid(True, which="major", lw=0.3, color=_GAP_COLOUR)
    ax.legend(fontsize=8)
    return fig


def _cpd_to_h(x: np.ndarray) -> np.ndarray:
    """Convert cycles per day to hours per cycle (its own inverse)."""
    x = np.asarray(x, dtype=float)
    with np.errstate(divide="ignore", invalid="ignore"):
        return np.where(x > 0, 24.0 / np.where(x > 0, x, 1.0), np.inf)


def period_latitude(loops: pd.DataFrame, lat_range: tuple[float, float] | None = None
                    ) -> Figure:
    """Event period against latitude with the inertial-period curve.

    Parameters
    ----------
    loops : pandas.DataFrame
        ``loops.csv``: lat, period_h, kind.
    lat_range : (float, float), optional
        Latitude limits of the plot; default -80 to 80 degrees so that both
        hemispheres' branches of the curve show.

    Returns
    -------
    matplotlib.figure.Figure
        One axes; the curve pi / (Omega |sin(lat)|) is the line labelled
        ``"inertial period"`` drawn over both hemispheres.
    """
    fig = Figure(figsize=(7.0, 4.6))
    fig.subplots_adjust(left=0.11, right=0.97, bottom=0.11, top=0.93)
    ax = fig.add_subplot()
    lat_curve = np.concatenate([np.linspace(-89.0, -2.0, 400), [np.nan],
                                np.linspace(2.0, 89.0, 400)])
    ax.plot(lat_curve, inertial_period_h(lat_curve), color=PALETTE["black"], lw=1.2,
            label="inertial period")
    for kind, colour in KIND_COLOURS.items():
        ev = loops[loops["kind"] == kind] if len(loops) else loops
        if len(ev):
            ax.plot(ev["lat"], ev["period_h"], ls="none", marker="o", ms=5, mfc=colour,
                    mec=PALETTE["black"], mew=0.4, label=f"{kind} ({len(ev)})")
    if lat_range is None:
        lat_range = (-80.0, 80.0)
    ax.set_xlim(*lat_range)
    ax.set_yscale("log")
    periods = loops["period_h"].to_numpy(dtype=float) if len(loops) else np.array([12.0, 48.0])
    top = max(float(np.nanmax(periods)) * 1.5, 100.0)
    ax.set_ylim(max(float(np.nanmin(periods)) / 1.5, 8.0), top)
    ax.set_xlabel("Latitude (degrees north)")
    ax.set_ylabel("Period (h)")
    ax.set_title("Loop event period against latitude", fontsize=10, loc="left")
    ax.grid(True, which="major", lw=0.3, color=_GAP_COLOUR)
    ax.legend(fontsize=8)
    return fig


def qc_timeline(fixes: pd.DataFrame, drifter_id: str, resampled: pd.DataFrame | None = None
                ) -> Figure:
    """QC flags of one drifter over time, gaps shaded.

    Parameters
    ----------
    fixes : pandas.DataFrame
        ``fixes.csv``: drifter_id, time, qc_flag.
    drifter_id : str
        The drifter.
    resampled : pandas.DataFrame, optional
        ``resampled.csv``; stretches interpolated across a gap (``in_gap``)
        and the breaks between segments are shaded.

    Returns
    -------
    matplotlib.figure.Figure
        One axes, one row per QC flag.
    """
    fig = Figure(figsize=(9.0, 2.6))
    fig.subplots_adjust(left=0.14, right=0.8, bottom=0.2, top=0.88)
    ax = fig.add_subplot()
    fx = fixes[fixes["drifter_id"].astype(str) == str(drifter_id)].copy()
    fx["_t"] = _utc_naive(fx["time"]).to_numpy()
    levels = {flag: i for i, flag in enumerate(FLAG_COLOURS)}
    for flag, (name, colour) in FLAG_COLOURS.items():
        sel = fx[(fx["qc_flag"] == flag) & fx["_t"].notna()]
        ax.plot(sel["_t"], np.full(len(sel), levels[flag]), ls="none", marker="|", ms=10,
                color=colour, label=f"{name} ({len(sel)})")
    labelled = False
    if resampled is not None and len(resampled):
        rs = resampled[resampled["drifter_id"].astype(str) == str(drifter_id)].copy()
        rs["_t"] = _utc_naive(rs["time"]).to_numpy()
        spans = []
        bounds = []
        for _, seg in rs.groupby("segment", sort=True):
            seg = seg.sort_values("_t")
            bounds.append((seg["_t"].iloc[0], seg["_t"].iloc[-1]))
            if "in_gap" in seg.columns:
                gap = seg["in_gap"].astype(str).str.lower().isin(["true", "1"]).to_numpy()
                edges = np.flatnonzero(np.diff(np.concatenate([[0], gap.astype(int), [0]])))
                for a, b in zip(edges[::2], edges[1::2], strict=True):
                    spans.append((seg["_t"].iloc[max(a - 1, 0)],
                                  seg["_t"].iloc[min(b, len(seg) - 1)]))
        bounds.sort()
        spans += [(bounds[i][1], bounds[i + 1][0]) for i in range(len(bounds) - 1)]
        for a, b in spans:
            ax.axvspan(a, b, color=_GAP_COLOUR, lw=0,
                       label="gap" if not labelled else None)
            labelled = True
    ax.set_yticks(list(levels.values()), [FLAG_COLOURS[f][0] + f" ({f})" for f in levels])
    ax.set_ylim(-0.6, len(levels) - 0.4)
    ax.set_ylabel("QC flag")
    ax.set_xlabel("Time (UTC)")
    _date_axis(ax)
    ax.set_title(f"{drifter_id}: QC timeline", fontsize=10, loc="left")
    ax.legend(fontsize=7, loc="upper left", bbox_to_anchor=(1.01, 1.0), framealpha=0.9)
    return fig


def drifter_latitude(resampled: pd.DataFrame, drifter_id: str) -> float:
    """Mean latitude (degrees north) of one drifter's resampled track, or NaN.

    Parameters
    ----------
    resampled : pandas.DataFrame
        ``resampled.csv``.
    drifter_id : str
        The drifter, or ``"(release)"`` for all.

    Returns
    -------
    float
        Mean latitude.
    """
    if drifter_id == "(release)":
        lat = resampled["lat"]
    else:
        lat = resampled.loc[resampled["drifter_id"].astype(str) == str(drifter_id), "lat"]
    lat = lat.to_numpy(dtype=float)
    return float(np.nanmean(lat)) if np.isfinite(lat).any() else math.nan


def wavelet_config_from(parameters: Mapping | None):
    """Build the run's WaveletConfig from summary.json provenance parameters.

    Parameters
    ----------
    parameters : mapping, optional
        ``summary["provenance"]["parameters"]``; unknown keys are ignored.

    Returns
    -------
    driftloop.wavelet.WaveletConfig
        The configuration (defaults where absent).
    """
    import dataclasses

    from driftloop.wavelet import WaveletConfig

    given = dict((parameters or {}).get("wavelet") or {})
    names = {f.name for f in dataclasses.fields(WaveletConfig)}
    try:
        return WaveletConfig(**{k: v for k, v in given.items() if k in names})
    except (TypeError, ValueError):
        return WaveletConfig()


def _diffusivity(entry: Mapping | None) -> tuple[float, float, float]:
    """Vector diffusivity and its confidence interval (m2/s) from a drift entry."""
    disp = ((entry or {}).get("dispersion") or {}).get("vector") or {}
    k = disp.get("diffusivity_m2_s")
    lo, hi = (disp.get("diffusivity_ci_m2_s") or [None, None])[:2]
    return tuple(math.nan if v is None else float(v) for v in (k, lo, hi))


def drift_dispersion(summary: Mapping, resampled: pd.DataFrame) -> Figure:
    """Mean drift of each drifter and its single-particle diffusivity.

    Left: the mean low-frequency drift vector of each drifter (oscillations
    removed, :func:`driftloop.drift.decompose`) drawn from the drifter's mean
    position on lon/lat axes (aspect 1 / cos(mean latitude)), with a 0.1 m/s
    key.  Right: the diffusivity K = sigma^2 T_L of each drifter and of the
    release (Taylor 1921), with the confidence intervals of ``summary.json``
    where the record is long enough to give one.

    Parameters
    ----------
    summary : mapping
        ``summary.json``: ``drift`` (release) and ``drifters.*.drift``.
    resampled : pandas.DataFrame
        ``resampled.csv`` (for the mean positions).

    Returns
    -------
    matplotlib.figure.Figure
        Two axes.
    """
    fig = Figure(figsize=(10.0, 4.6))
    ax_map, ax_k = fig.subplots(1, 2, gridspec_kw={"width_ratios": [1.25, 1.0], "left": 0.07,
                                                   "right": 0.98, "bottom": 0.14, "top": 0.9,
                                                   "wspace": 0.28})
    drifters = summary.get("drifters", {})
    ids = sorted(drifters)
    res = resampled.copy()
    res["drifter_id"] = res["drifter_id"].astype(str)
    wrap = _crosses_antimeridian(res["lon"]) if len(res) else False
    res["lon"] = _map_lon(res["lon"], wrap)
    positions = res.groupby("drifter_id")[["lon", "lat"]].mean()
    x, y, u, v, names = [], [], [], [], []
    for d in ids:
        entry = drifters[d].get("drift") or {}
        if d not in positions.index or entry.get("mean_drift_u_m_s") is None:
            continue
        x.append(positions.loc[d, "lon"])
        y.append(positions.loc[d, "lat"])
        u.append(float(entry["mean_drift_u_m_s"]))
        v.append(float(entry["mean_drift_v_m_s"]))
        names.append(d)
    for _, track in res.groupby("drifter_id", sort=True):
        ax_map.plot(track["lon"], track["lat"], color="#BBBBBB", lw=0.6)
    if names:
        aspect = map_aspect(np.asarray(y))
        # arrows in degrees: 1 m/s drawn as `scale` degrees of latitude
        span = max(np.ptp(np.r_[x, res["lon"].min(), res["lon"].max()]) * aspect,
                   np.ptp(np.r_[y, res["lat"].min(), res["lat"].max()]), 0.2)
        scale = 0.15 * span / max(max(math.hypot(a, b) for a, b in zip(u, v, strict=True)), 1e-3)
        for xi, yi, ui, vi, d in zip(x, y, u, v, names, strict=True):
            ax_map.annotate("", xy=(xi + ui * scale / aspect, yi + vi * scale), xytext=(xi, yi),
                            arrowprops={"arrowstyle": "->", "color": PALETTE["blue"], "lw": 1.6})
            ax_map.annotate(d, (xi, yi), fontsize=7, xytext=(-3, -9),
                            textcoords="offset points")
        x0, y0 = ax_map.get_xlim()[0], min(y) - 0.05 * span
        ax_map.annotate("", xy=(x0 + 0.1 * scale / aspect + 0.02 * span, y0),
                        xytext=(x0 + 0.02 * span, y0),
                        arrowprops={"arrowstyle": "->", "color": PALETTE["black"], "lw": 1.6})
        ax_map.annotate("0.1 m/s", (x0 + 0.02 * span, y0), fontsize=7, xytext=(0, 4),
                        textcoords="offset points")
        ax_map.set_aspect(aspect, adjustable="datalim")
    else:
        ax_map.text(0.5, 0.5, "no drift estimate", transform=ax_map.transAxes, ha="center")
    ax_map.set_xlabel("Longitude (degrees east, 0-360)" if wrap else "Longitude (degrees east)")
    ax_map.set_ylabel("Latitude (degrees north)")
    ax_map.set_title("Mean drift (oscillations removed)", fontsize=10, loc="left")
    ax_map.grid(True, lw=0.3, color=_GAP_COLOUR)

    rows = [(d, *_diffusivity(drifters[d].get("drift"))) for d in ids]
    rows = [r for r in rows if np.isfinite(r[1])]
    pos = np.arange(len(rows))
    for i, (_, k, lo, hi) in enumerate(rows):
        if np.isfinite(lo) and np.isfinite(hi):
            ax_k.errorbar(i, k, yerr=[[k - lo], [hi - k]], fmt="o", color=PALETTE["blue"],
                          capsize=3, ms=5)
        else:
            ax_k.plot(i, k, "o", color=PALETTE["blue"], mfc="white", ms=5)
    k_rel, lo_rel, hi_rel = _diffusivity(summary.get("drift"))
    if np.isfinite(k_rel):
        ax_k.axhline(k_rel, color=PALETTE["vermillion"], lw=1.4,
                     label=f"release K = {k_rel:.0f} m$^2$/s")
        if np.isfinite(lo_rel) and np.isfinite(hi_rel):
            ax_k.axhspan(lo_rel, hi_rel, color=PALETTE["vermillion"], alpha=0.15, lw=0,
                         label="release 95 % interval")
    if any(not (np.isfinite(r[2]) and np.isfinite(r[3])) for r in rows):
        ax_k.plot([], [], "o", color=PALETTE["blue"], mfc="white", ms=5,
                  label="drifter (record too short for an interval)")
    if rows or np.isfinite(k_rel):
        ax_k.legend(fontsize=7, loc="best")
    ax_k.set_xticks(pos, [r[0] for r in rows], rotation=45, ha="right", fontsize=7)
    ax_k.set_ylabel("Diffusivity K = $\\sigma^2 T_L$ (m$^2$/s)")
    ax_k.set_title("Single-particle diffusivity", fontsize=10, loc="left")
    ax_k.grid(True, axis="y", lw=0.3, color=_GAP_COLOUR)
    if not rows:
        ax_k.text(0.5, 0.5, "no dispersion estimate", transform=ax_k.transAxes, ha="center")
    return fig
