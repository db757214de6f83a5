"""Per-drifter and release-level accounting of a QC-flagged fixes table.

:func:`build_summary` turns the output of :func:`driftloop.qc.run_qc` into the
dictionary written as ``summary.json``: for each drifter the counts by QC
flag and by reason, the first and last good fix, the duration, the largest
gap, statistics of the sampling interval, and for the whole release the same
totals plus the accounting check (rows in = rows out).
"""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np
import pandas as pd

from driftloop.config import Config, provenance
from driftloop.notices import CAUTION

__all__ = ["FLAG_MEANINGS", "SummaryAccumulator", "build_summary", "drifter_summary"]

#: QARTOD flag values and meanings (U.S. IOOS 2020, QARTOD flags manual v1.2).
FLAG_MEANINGS = {1: "pass", 2: "not_evaluated", 3: "suspect", 4: "fail", 9: "missing"}

_REPORTED_FLAGS = (1, 3, 4, 9)


def _iso(t: pd.Timestamp | None) -> str | None:
    if t is None or pd.isna(t):
        return None
    return t.strftime("%Y-%m-%dT%H:%M:%SZ")


def _flag_counts(flags: np.ndarray) -> dict[str, int]:
    return {FLAG_MEANINGS[f]: int(np.count_nonzero(flags == f)) for f in _REPORTED_FLAGS}


def _reason_counts(codes: np.ndarray, texts: list[str]) -> dict[str, int]:
    """Count reason codes from factorized ``qc_reasons`` (``texts[k]`` for code ``k``)."""
    counts: dict[str, int] = {}
    for k, n in enumerate(np.bincount(codes, minlength=len(texts)).tolist()):
        if n and texts[k]:
            for code in texts[k].split("|"):
                counts[code] = counts.get(code, 0) + n
    return {str(k): int(v) for k, v in sorted(counts.items())}


def _interval_stats(seconds: np.ndarray) -> dict[str, float | None]:
    if seconds.size == 0:
        return {k: None for k in ("median_s", "p10_s", "p90_s", "min_s", "max_s")}
    p10, med, p90 = np.percentile(seconds, [10, 50, 90])
    return {
        "median_s": float(med),
        "p10_s": float(p10),
        "p90_s": float(p90),
        "min_s": float(seconds.min()),
        "max_s": float(seconds.max()),
    }


def drifter_summary(group: pd.DataFrame) -> dict:
    """Summarise the flagged fixes of one drifter.

    Parameters
    ----------
    group : pandas.DataFrame
        Rows of one drifter from :func:`driftloop.qc.run_qc`.

    Returns
    -------
    dict
        Counts by flag and reason, first/last good fix (flag 1), duration,
        largest gap between good fixes, sampling-interval statistics over good
        fixes, number of segments, rows whose time zone was assumed UTC, and
        the source files.
    """
    return _Columns(group).drifter(0, len(group))


class _Columns:
    """The columns of a flagged table that the summary reads, as NumPy arrays.

    Taken once per table, so that the rows of many drifters (consecutive
    slices ``start:stop``) are summarised without pandas indexing per drifter.
    """

    def __init__(self, flagged: pd.DataFrame) -> None:
        self.flags = flagged["qc_flag"].to_numpy()
        self.time = flagged["time"].dt.tz_convert(None).to_numpy()
        reasons = flagged["qc_reasons"].to_numpy(dtype=object, na_value="")
        self.reason_codes, uniques = pd.factorize(reasons)
        self.reason_texts = [str(u) for u in uniques]
        self.segment = flagged["segment"].to_numpy()
        self.assumed = flagged["time_assumed_utc"].to_numpy(dtype=np.int64, na_value=0)
        self.file_codes, files = pd.factorize(flagged["source_file"].astype(str),
                                              use_na_sentinel=False)
        self.files = np.asarray(files, dtype=object)

    def good_times(self, start: int, stop: int) -> np.ndarray:
        """Return the times (UTC, tz-naive) of the flag-1 rows of a slice, in row order."""
        return self.time[start:stop][self.flags[start:stop] == 1]

    def drifter(self, start: int, stop: int) -> dict:
        """Return the :func:`drifter_summary` entry of rows ``start:stop``."""
        flags = self.flags[start:stop]
        good = np.sort(self.good_times(start, stop))
        steps = np.diff(good).astype("timedelta64[ns]").astype(np.int64) / 1e9
        first = pd.Timestamp(good[0], tz="UTC") if good.size else None
        last = pd.Timestamp(good[-1], tz="UTC") if good.size else None
        if steps.size:
            k = int(np.argmax(steps))
            largest_gap = {
                "hours": float(steps[k] / 3600.0),
                "start": _iso(pd.Timestamp(good[k], tz="UTC")),
                "end": _iso(pd.Timestamp(good[k + 1], tz="UTC")),
            }
        else:
            largest_gap = {"hours": None, "start": None, "end": None}
        segment = self.segment[start:stop]
        files = self.files[np.unique(self.file_codes[start:stop])]
        return {
            "fixes": int(stop - start),
            "by_flag": _flag_counts(flags),
            "by_reason": _reason_counts(self.reason_codes[start:stop], self.reason_texts),
            "first_good_fix": _iso(first),
            "last_good_fix": _iso(last),
            "duration_days": None if first is None else (last - first).total_seconds() / 86400.0,
            "largest_gap": largest_gap,
            "sampling_interval": _interval_stats(steps),
            "segments": int(np.unique(segment[segment >= 0]).size),
            "time_assumed_utc_rows": int(self.assumed[start:stop].sum()),
            "source_files": sorted(files.tolist()),
        }


class SummaryAccumulator:
    """Build ``summary.json`` from one drifter at a time.

    :func:`build_summary` is this class fed with every drifter of a table;
    a streaming run feeds it drifter by drifter (sorted by id) and gets the
    same dictionary, because the release totals are sums, minima and maxima
    taken in the same order.

    Parameters
    ----------
    config : Config
        The configuration used (recorded as provenance).
    """

    def __init__(self, config: Config) -> None:
        self.config = config
        self.drifters: dict[str, dict] = {}
        self.rows = 0
        self._flags: dict[str, int] = {FLAG_MEANINGS[f]: 0 for f in _REPORTED_FLAGS}
        self._reasons: dict[str, int] = {}
        self._first: pd.Timestamp | None = None
        self._last: pd.Timestamp | None = None
        self._assumed = 0

    def add_rows(self, flagged: pd.DataFrame, drifter: str | None) -> None:
        """Count the flagged rows of one drifter (``None``: rows without an id).

        Parameters
        ----------
        flagged : pandas.DataFrame
            Rows of one drifter from :func:`driftloop.qc.run_qc`, in input order.
        drifter : str or None
            Its id; rows without an id count in the release totals only.
        """
        self.add_drifters(flagged, [(drifter, len(flagged))])

    def add_drifters(self, flagged: pd.DataFrame, drifters: Sequence[tuple[str | None, int]]
                     ) -> None:
        """Count the flagged rows of several drifters held one after another in a table.

        The same as :meth:`add_rows` on each drifter's slice in turn, with the
        columns taken from the table once.

        Parameters
        ----------
        flagged : pandas.DataFrame
            Rows from :func:`driftloop.qc.run_qc`: the rows of the first
            drifter (in input order), then those of the second, and so on.
        drifters : sequence of (str or None, int)
            Each drifter's id (``None``: rows without an id) and row count,
            in table order; the counts add up to the rows of ``flagged``.

        Raises
        ------
        ValueError
            If the row counts do not add up to the rows of the table.
        """
        if sum(count for _, count in drifters) != len(flagged):
            raise ValueError("drifter row counts do not add up to the rows of the table")
        columns = _Columns(flagged)
        start = 0
        for drifter, count in drifters:
            stop = start + count
            if drifter is not None:
                self.drifters[drifter] = columns.drifter(start, stop)
            self.rows += count
            for name, n in _flag_counts(columns.flags[start:stop]).items():
                self._flags[name] += n
            reasons = _reason_counts(columns.reason_codes[start:stop], columns.reason_texts)
            for name, n in reasons.items():
                self._reasons[name] = self._reasons.get(name, 0) + n
            good = columns.good_times(start, stop)
            if good.size:
                first = pd.Timestamp(good.min(), tz="UTC")
                last = pd.Timestamp(good.max(), tz="UTC")
                self._first = first if self._first is None else min(self._first, first)
                self._last = last if self._last is None else max(self._last, last)
            self._assumed += int(columns.assumed[start:stop].sum())
            start = stop

    def merge(self, other: SummaryAccumulator) -> None:
        """Add the drifters and totals of another accumulator (added after these).

        Parameters
        ----------
        other : SummaryAccumulator
            Rows of other drifters.
        """
        self.drifters.update(other.drifters)
        self.rows += other.rows
        for name, count in other._flags.items():
            self._flags[name] += count
        for name, count in other._reasons.items():
            self._reasons[name] = self._reasons.get(name, 0) + count
        if other._first is not None:
            self._first = other._first if self._first is None else min(self._first, other._first)
        if other._last is not None:
            self._last = other._last if self._last is None else max(self._last, other._last)
        self._assumed += other._assumed

    def finish(self, inputs: Sequence[dict], rows_out: int | None = None) -> dict:
        """Return the ``summary.json`` dictionary.

        Parameters
        ----------
        inputs : sequence of dict
            One ``{"file": ..., "rows": ...}`` per input file, rows as read.
        rows_out : int, optional
            Rows written to ``fixes.csv``; defaults to the rows added.

        Returns
        -------
        dict
            As :func:`build_summary`.
        """
        rows_in = int(sum(item["rows"] for item in inputs))
        rows_out = self.rows if rows_out is None else int(rows_out)
        drifters = {k: self.drifters[k] for k in sorted(self.drifters)}
        assumed = self._assumed
        notes = []
        if assumed:
            notes.append(
                f"{assumed} fixes had times without a time zone; they were taken as UTC."
            )
        release = {
            "drifters": len(drifters),
            "fixes": int(self.rows),
            "by_flag": dict(self._flags),
            "by_reason": {k: self._reasons[k] for k in sorted(self._reasons)},
            "first_good_fix": _iso(self._first),
            "last_good_fix": _iso(self._last),
            "drifter_days": float(
                sum(d["duration_days"] or 0.0 for d in drifters.values())
            ),
            "time_assumed_utc_rows": assumed,
            "notes": notes,
        }
        return {
            "provenance": provenance(self.config),
            "caution": CAUTION,
            "inputs": list(inputs),
            "release": release,
            "drifters": drifters,
            "accounting": {"rows_in": rows_in, "rows_out": rows_out,
                           "balanced": rows_in == rows_out},
        }


def build_summary(
    flagged: pd.DataFrame,
    config: Config,
    inputs: Sequence[dict],
    rows_out: int | None = None,
) -> dict:
    """Build the ``summary.json`` dictionary of a run.

    Parameters
    ----------
    flagged : pandas.DataFrame
        Output of :func:`driftloop.qc.run_qc` for every input row.
    config : Config
        The configuration used (recorded as provenance).
    inputs : sequence of dict
        One ``{"file": ..., "rows": ...}`` per input file, rows as read.
    rows_out : int, optional
        Rows written to ``fixes.csv``; defaults to ``len(flagged)``.

    Returns
    -------
    dict
        ``provenance``, ``caution``, ``inputs``, ``release`` totals,
        ``drifters`` (sorted by id) and ``accounting``.
    """
    acc = SummaryAccumulator(config)
    ids = flagged["drifter_id"]
    for name, group in flagged.groupby("drifter_id", sort=True, observed=True):
        acc.add_rows(group, str(name))
    orphans = flagged[ids.isna().to_numpy()]
    if len(orphans):
        acc.add_rows(orphans, None)
    return acc.finish(inputs, len(flagged) if rows_out is None else rows_out)
