"""Rotary spectra of resampled drifter velocities.

The complex velocity z = u + i v is split into its anticlockwise
(positive-frequency) and clockwise (negative-frequency) parts (Gonella 1972,
"A rotary-component method for analysing meteorological and oceanographic
vector time series", Deep-Sea Res. 19, 833-846).  Spectra are Welch
estimates (Hann window, 50 % overlap, mean removed per window) over every
resampled segment long enough for one window; a drifter's spectrum averages
its windows, the release spectrum averages all windows of all drifters.

Free inertial motion turns anticyclonically (clockwise north, anticlockwise
south), so a drogued drifter in open water should show a peak near |f| on
its anticyclonic side; :func:`inertial_peak_check` tests that within a
tolerance (default 15 %) for each drifter that spends enough time away from
the equator.
"""

from __future__ import annotations

from typing import NamedTuple

import numpy as np
import pandas as pd

from driftloop.physics import coriolis_parameter

__all__ = ["RotarySpectra", "SpectraAccumulator", "inertial_peak_check", "rotary_spectra"]

#: Seconds per day, to express frequencies in cycles per day.
_DAY_S = 86400.0

#: Id of the release-level spectrum in the table.
RELEASE_ID = "(release)"


class RotarySpectra(NamedTuple):
    """Rotary spectra per drifter and for the release.

    Attributes
    ----------
    table : pandas.DataFrame
        Columns ``drifter_id`` (the release as ``"(release)"``),
        ``frequency_cpd`` (> 0, cycles per day), ``psd_anticlockwise`` and
        ``psd_clockwise`` ((m/s)^2 per cycle per day), ``windows`` (Welch
        windows averaged).
    window_days : float
        Length of a Welch window (days).
    """

    table: pd.DataFrame
    window_days: float


def _segment_spectra(z: np.ndarray, fs: float, nperseg: int) -> tuple[np.ndarray, np.ndarray, int]:
    # imported here: the process that only gathers a release's spectra (the
    # main process of a parallel run) does not need scipy.signal (~1 s to import)
    from scipy import signal

    freq, psd = signal.welch(
        z, fs=fs, window="hann", nperseg=nperseg, noverlap=nperseg // 2,
        detrend="constant", return_onesided=False, scaling="density",
    )
    n_windows = 1 + (z.size - nperseg) // (nperseg - nperseg // 2)
    return freq, psd, n_windows


class SpectraAccumulator:
    """Rotary spectra built one drifter at a time (drifters in sorted order).

    :func:`rotary_spectra` feeds every drifter of a table to this class; a
    streaming run feeds them one by one and gets the same table, since the
    release spectrum is the same window-weighted sum taken in the same order.

    Parameters
    ----------
    window_days : float
        Welch window length (days).
    """

    def __init__(self, window_days: float = 10.0) -> None:
        self.window_days = window_days
        self.rows: list[pd.DataFrame] = []
        self._psd: np.ndarray | None = None
        self._windows = 0
        self._freq: np.ndarray | None = None

    def drifter_rows(self, drifter: str, group: pd.DataFrame) -> pd.DataFrame | None:
        """Return the spectrum rows of one drifter (None if no segment is long enough).

        Parameters
        ----------
        drifter : str
            Drifter id.
        group : pandas.DataFrame
            Its resampled track (``segment``, ``time``, ``u``, ``v``).

        Returns
        -------
        pandas.DataFrame or None
            The drifter's rows of the spectra table.
        """
        window_days = self.window_days
        acc, count = None, 0
        t_all = group["time"].to_numpy(dtype="datetime64[ns]").astype(np.int64) / 1e9
        u_all = group["u"].to_numpy(dtype=float)
        v_all = group["v"].to_numpy(dtype=float)
        for rows in _group_positions(pd.factorize(group["segment"], sort=True)[0]):
            t = t_all[rows]
            if t.size < 4:
                continue
            dt = float(np.median(np.diff(t)))
            nperseg = int(round(window_days * _DAY_S / dt))
            if t.size < nperseg or nperseg < 8:
                continue
            z = u_all[rows] + 1j * v_all[rows]
            freq, psd, n = _segment_spectra(z, 1.0 / dt, nperseg)
            acc = psd * n if acc is None else acc + psd * n
            count += n
        if acc is None:
            return None
        psd = acc / count
        pos = freq > 0
        order = np.argsort(freq[pos])
        f_pos = freq[pos][order]
        neg_index = {round(-f, 12): i for i, f in enumerate(freq.tolist()) if f < 0}
        cw = psd[np.array([neg_index[round(f, 12)] for f in f_pos.tolist()], dtype=np.int64)]
        ccw = psd[pos][order]
        scale = 1.0 / _DAY_S  # PSD per Hz -> per cycle per day
        return pd.DataFrame({
            "drifter_id": str(drifter),
            "frequency_cpd": f_pos * _DAY_S,
            "psd_anticlockwise": ccw * scale,
            "psd_clockwise": cw * scale,
            "windows": count,
            "_f": f_pos,
            "_ccw": ccw,
            "_cw": cw,
        })

    def add_rows(self, rows: pd.DataFrame | None) -> None:
        """Add the rows of one drifter (from :meth:`drifter_rows`) to the table.

        Parameters
        ----------
        rows : pandas.DataFrame or None
            The drifter's spectrum rows; None adds nothing.
        """
        if rows is None:
            return
        # the release sums the unscaled values, which the rows carry in the
        # private columns _f, _ccw and _cw (left out of the table)
        self.rows.append(rows)
        count = int(rows["windows"].iloc[0])
        both = np.stack([rows["_ccw"].to_numpy(), rows["_cw"].to_numpy()])
        self._psd = both * count if self._psd is None else self._psd + both * count
        self._windows += count
        self._freq = rows["_f"].to_numpy()

    def table(self) -> RotarySpectra:
        """Return the spectra table: every drifter added, then the release.

        Returns
        -------
        RotarySpectra
            The table and the window length.
        """
        if not self.rows:
            return RotarySpectra(pd.DataFrame(columns=_COLUMNS), self.window_days)
        # the drifters' rows share their columns: one concatenation, then the
        # public columns once
        rows = [pd.concat(self.rows, ignore_index=True).loc[:, list(_COLUMNS)]]
        if self._freq is not None:
            both = self._psd / self._windows
            rows.append(pd.DataFrame({
                "drifter_id": RELEASE_ID,
                "frequency_cpd": self._freq * _DAY_S,
                "psd_anticlockwise": both[0] / _DAY_S,
                "psd_clockwise": both[1] / _DAY_S,
                "windows": int(self._windows),
            }))
        table = pd.concat(rows, ignore_index=True)
        return RotarySpectra(table.loc[:, list(_COLUMNS)], self.window_days)


_COLUMNS = ("drifter_id", "frequency_cpd", "psd_anticlockwise", "psd_clockwise", "windows")


def _group_positions(codes: pd.Series | np.ndarray) -> list[np.ndarray]:
    """Row positions of each group, in group order, from group numbers of the rows.

    ``codes`` numbers the groups from 0 (as ``groupby(...).ngroup()`` or
    ``pandas.factorize`` do); rows numbered NaN or negative belong to no
    group and are left out.  Each group keeps the order of its rows.
    """
    codes = np.asarray(codes, dtype=float)
    order = np.argsort(codes, kind="stable")
    order = order[np.isfinite(codes[order]) & (codes[order] >= 0)]
    edges = np.flatnonzero(np.diff(codes[order])) + 1
    return np.split(order, edges) if order.size else []


def rotary_spectra(track: pd.DataFrame, window_days: float = 10.0) -> RotarySpectra:
    """Welch rotary spectra of the resampled velocities, per drifter and release.

    Parameters
    ----------
    track : pandas.DataFrame
        Resampled tracks with ``drifter_id``, ``segment``, ``time``, ``u``
        and ``v`` (m/s) on a uniform grid within each segment.
    window_days : float
        Welch window length (days); segments shorter than one window are
        left out.

    Returns
    -------
    RotarySpectra
        The spectra table.
    """
    acc = SpectraAccumulator(window_days)
    for drifter, group in track.groupby("drifter_id", sort=True, observed=True):
        acc.add_rows(acc.drifter_rows(str(drifter), group))
    return acc.table()


def inertial_peak_check(
    spectra: RotarySpectra,
    track: pd.DataFrame,
    *,
    tolerance: float = 0.15,
    min_days: float = 10.0,
    equator_band_deg: float = 5.0,
) -> dict[str, dict]:
    """Check that each drifter's anticyclonic spectrum peaks near the inertial frequency.

    Parameters
    ----------
    spectra : RotarySpectra
        Output of :func:`rotary_spectra` for ``track``.
    track : pandas.DataFrame
        The resampled tracks (``drifter_id``, ``time``, ``lat``).
    tolerance : float
        Allowed fractional distance of the peak from |f|.
    min_days : float
        Drifters with fewer days poleward of ``equator_band_deg`` are not
        checked.
    equator_band_deg : float
        Latitude band around the equator that does not count.

    Returns
    -------
    dict
        Per drifter: ``checked`` (bool), ``reason`` when not checked,
        ``side`` (``"clockwise"`` north, ``"anticlockwise"`` south),
        ``peak_cpd``, ``inertial_cpd`` (|f| / 2 pi at the mean latitude of
        the time away from the equator) and ``within_tolerance``.

    Notes
    -----
    The peak is sought at frequencies above half the inertial frequency, so
    that the low-frequency drift does not win.
    """
    out: dict[str, dict] = {}
    table = spectra.table
    # the rows of each drifter's spectrum, found once
    spec_rows: dict[str, np.ndarray] = {}
    if len(table):
        labels = table["drifter_id"].astype(str).to_numpy()
        for rows in _group_positions(pd.Series(pd.factorize(labels)[0], dtype=float)):
            spec_rows[str(labels[rows[0]])] = rows
    freq = table["frequency_cpd"].to_numpy()
    lat_all = track["lat"].to_numpy(dtype=float)
    t_all = track["time"].to_numpy(dtype="datetime64[ns]").astype(np.int64) / 1e9
    ids = track["drifter_id"].to_numpy()
    for rows in _group_positions(track.groupby("drifter_id", sort=True, observed=True).ngroup()):
        drifter = str(ids[rows[0]])
        lat = lat_all[rows]
        away = np.abs(lat) >= equator_band_deg
        t = t_all[rows]
        dt = float(np.median(np.diff(t))) if t.size > 1 else 0.0
        days = away.sum() * dt / _DAY_S
        spec = spec_rows.get(drifter)
        if days < min_days or spec is None:
            out[drifter] = {
                "checked": False,
                "reason": (f"fewer than {min_days:g} days poleward of {equator_band_deg:g} deg"
                           if days < min_days else "no segment long enough for a spectrum"),
            }
            continue
        mean_lat = float(np.mean(lat[away]))
        f_cpd = abs(float(coriolis_parameter(mean_lat))) / (2 * np.pi) * _DAY_S
        side = "psd_clockwise" if mean_lat > 0 else "psd_anticlockwise"
        band = spec[freq[spec] >= 0.5 * f_cpd]
        peak = float(freq[band][int(np.argmax(table[side].to_numpy()[band]))])
        out[drifter] = {
            "checked": True,
            "side": side.removeprefix("psd_"),
            "peak_cpd": peak,
            "inertial_cpd": f_cpd,
            "within_tolerance": bool(abs(peak / f_cpd - 1.0) <= tolerance),
        }
    return out
