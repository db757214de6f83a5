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


def _flag_counts(flags: pd.Series) -> dict[str, int]:
    counts = flags.value_counts()
    return {FLAG_MEANINGS[f]: int(counts.get(f, 0)) for f in _REPORTED_FLAGS}


def _reason_counts(reasons: pd.Series) -> dict[str, int]:
    codes = reasons[reasons.str.len() > 0].str.split("|").explode()
    counts = codes.value_counts()
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
    good = np.sort(group.loc[group["qc_flag"] == 1, "time"].dt.tz_convert(None).to_numpy())
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
    segments = group.loc[group["segment"] >= 0, "segment"]
    return {
        "fixes": int(len(group)),
        "by_flag": _flag_counts(group["qc_flag"]),
        "by_reason": _reason_counts(group["qc_reasons"]),
        "first_good_fix": _iso(first),
        "last_good_fix": _iso(last),
        "duration_days": None if first is None else (last - first).total_seconds() / 86400.0,
        "largest_gap": largest_gap,
        "sampling_interval": _interval_stats(steps),
        "segments": int(segments.nunique()),
        "time_assumed_utc_rows": int(group["time_assumed_utc"].sum()),
        "source_files": sorted(group["source_file"].astype(str).unique().tolist()),
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
        if drifter is not None:
            self.drifters[drifter] = drifter_summary(flagged)
        self.rows += len(flagged)
        for name, count in _flag_counts(flagged["qc_flag"]).items():
            self._flags[name] += count
        for name, count in _reason_counts(flagged["qc_reasons"]).items():
            self._reasons[name] = self._reasons.get(name, 0) + count
        good = flagged.loc[flagged["qc_flag"] == 1, "time"]
        if len(good):
            first, last = good.min(), good.max()
            self._first = first if self._first is None else min(self._first, first)
            self._last = last if self._last is None else max(self._last, last)
        self._assumed += int(flagged["time_assumed_utc"].sum())

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
