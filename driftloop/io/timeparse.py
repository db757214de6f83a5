"""Whole-column parsing of times to UTC.

Every function here takes a whole column and returns a :class:`ParsedTimes`:
the times as ``datetime64[ns, UTC]`` together with, per value, whether it was
missing, whether UTC had to be assumed, and why it could not be read.  The
work is done by pyarrow and pandas on whole arrays; Python only touches the
values that failed, to word their messages.

Accepted text
-------------
* ISO 8601 calendar dates with a time of day, ``T`` or a space between them:
  ``2026-03-01T12:00:00Z``, ``2026-03-01 12:00``, ``2026-03-01T12:00:00.25+02:00``.
  Seconds and a fraction of them (``.`` or ``,``) are optional.
* The zone designator ``Z``, an offset ``+hh:mm``, ``+hhmm`` or ``+hh``, or the
  words ``UTC`` / ``GMT``.  Offsets are converted to UTC (ISO 8601 and
  RFC 3339: local time minus the offset is UTC, so ``12:00+02:00`` is 10:00Z).
  A value without any zone is taken as UTC and flagged ``time_assumed_utc``.
* ``YYYY/MM/DD hh:mm[:ss]`` (slashes, year first).
* A date alone (``2026-03-01``) is midnight of that day, UTC assumed.
* Epoch seconds (a plain number, integer or decimal) between 1e8 and 4e9,
  that is 1973-03-03 to 2096-10-02.  Anything outside is refused for that
  value: it is more likely milliseconds or a fill value than a time.
* A separate date column and time-of-day column (``hh:mm[:ss[.f]]``, which
  may carry the zone).

Day/month orders such as ``05/03/2024`` cannot be told apart and are never
guessed: such values are unparseable with a message saying so.

The tokens ``""``, ``NA``, ``NaN``, ``null``, ``None``, ``NaT``, ``N/A`` and
``-`` (in any letter case) and null values are *missing*, not unparseable.
"""

from __future__ import annotations

import re
from dataclasses import dataclass

import numpy as np
import pandas as pd
import pyarrow as pa
import pyarrow.compute as pc

__all__ = [
    "EPOCH_MAX_S",
    "EPOCH_MIN_S",
    "MISSING_TOKENS",
    "TIME_EXPECTED",
    "ParsedTimes",
    "as_text_array",
    "bool_mask",
    "is_text_type",
    "missing_mask",
    "parse_date_and_time",
    "parse_epoch_seconds",
    "parse_time_text",
    "parse_time_values",
    "quote_value",
]

MISSING_TOKENS = ("", "na", "nan", "null", "none", "nat", "n/a", "-")
"""Cell texts (compared in lower case, after trimming) that mean *missing*."""

EPOCH_MIN_S = 1.0e8
"""Smallest plausible epoch time, seconds since 1970-01-01T00:00Z (1973-03-03)."""

EPOCH_MAX_S = 4.0e9
"""Largest plausible epoch time, seconds since 1970-01-01T00:00Z (2096-10-02)."""

TIME_EXPECTED = "ISO 8601 like 2026-03-01T12:00:00Z or epoch seconds"
"""How error messages describe an acceptable time."""

# Years that datetime64[ns] can hold, with a margin (1677-09-21 .. 2262-04-11).
_YEAR_MIN = 1678
_YEAR_MAX = 2261

_NAT = np.iinfo(np.int64).min
_EPOCH_RANGE = "expected 1e8 to 4e9, the years 1973 to 2096"

_NUMBER = r"[+-]?(?:\d+\.?\d*|\.\d+)(?:[eE][+-]?\d+)?"
_DATE = r"(?:\d{4}-\d{2}-\d{2}|\d{4}/\d{2}/\d{2})"
_CLOCK = r"\d{1,2}:\d{2}(?::\d{2}(?:[.,]\d+)?)?"
_ZONE = r"(?:[Zz]|[+-]\d{2}(?::?\d{2})?|(?i:UTC|GMT))"
_DATETIME_RE = rf"^{_DATE}(?:(?:[Tt]|\s+){_CLOCK}\s*{_ZONE}?)?$"
_DATE_RE = rf"^{_DATE}$"
_CLOCK_RE = rf"^{_CLOCK}\s*{_ZONE}?$"
_NUMBER_RE = rf"^{_NUMBER}$"
# the form pandas' ISO 8601 parser takes as it is
_CANONICAL_RE = (
    r"^\d{4}-\d{2}-\d{2}(?:T\d{2}:\d{2}(?::\d{2}(?:\.\d+)?)?(?:Z|[+-]\d{2}(?::?\d{2})?)?)?$"
)
# day and month in either order, e.g. 05/03/2024 or 5.3.24: never guessed
_AMBIGUOUS_RE = r"^\d{1,2}[/.-]\d{1,2}[/.-]\d{2,4}(?:$|[\sT])"


@dataclass(frozen=True)
class ParsedTimes:
    """Times read from one column (or a date and a time-of-day column).

    Attributes
    ----------
    time : pandas.DatetimeIndex
        ``datetime64[ns, UTC]``; NaT where missing or unparseable.
    assumed_utc : numpy.ndarray of bool
        The value had no zone designator and was taken as UTC.
    missing : numpy.ndarray of bool
        The value was absent (empty, an NA token, null).
    errors : numpy.ndarray of object
        ``"column: reason"`` where the value could not be read, else ``""``.
    """

    time: pd.DatetimeIndex
    assumed_utc: np.ndarray
    missing: np.ndarray
    errors: np.ndarray

    @property
    def unparseable(self) -> np.ndarray:
        """Boolean mask of values that were present but could not be read."""
        return self.errors != ""

    @property
    def parsed(self) -> np.ndarray:
        """Boolean mask of values that were read."""
        return ~self.missing & ~self.unparseable

    def __len__(self) -> int:
        return len(self.time)


def quote_value(value: object, limit: int = 40) -> str:
    """Quote a raw value for a message, shortened to ``limit`` characters.

    Parameters
    ----------
    value : object
        The value as found in the file.
    limit : int
        Longest text kept.

    Returns
    -------
    str
        ``repr``-style quoted text.

    Examples
    --------
    >>> quote_value("abc")
    "'abc'"
    """
    text = str(value)
    if len(text) > limit:
        text = text[: limit - 3] + "..."
    return repr(text)


def as_text_array(values: object) -> pa.Array:
    """Return values as a pyarrow large-string array (nulls kept).

    Parameters
    ----------
    values : array_like
        Strings, a pyarrow array or chunked array, or a pandas Series.

    Returns
    -------
    pyarrow.Array
        ``large_string`` array.
    """
    if isinstance(values, pa.ChunkedArray):
        values = values.combine_chunks()
    if not isinstance(values, pa.Array):
        try:
            values = pa.array(values, from_pandas=True)
        except (pa.ArrowInvalid, pa.ArrowTypeError):
            values = pa.array(
                [None if v is None else str(v) for v in values], pa.large_string()
            )
    if pa.types.is_dictionary(values.type):
        values = values.dictionary_decode()
    if not pa.types.is_large_string(values.type):
        values = pc.cast(values, pa.large_string())
    return values


def is_text_type(kind: pa.DataType) -> bool:
    """Return whether a pyarrow type holds text (string, large string or string view).

    Parameters
    ----------
    kind : pyarrow.DataType
        The type.

    Returns
    -------
    bool
        True for text types.
    """
    view = getattr(pa.types, "is_string_view", lambda _: False)
    return pa.types.is_string(kind) or pa.types.is_large_string(kind) or view(kind)


def bool_mask(array: pa.Array | pa.ChunkedArray) -> np.ndarray:
    """Turn a pyarrow boolean array into a numpy mask, nulls as False.

    Parameters
    ----------
    array : pyarrow.Array
        Booleans.

    Returns
    -------
    numpy.ndarray of bool
        The mask.
    """
    return np.asarray(pc.fill_null(array, False).to_numpy(zero_copy_only=False), dtype=bool)


def _case_variants(word: str) -> list[str]:
    variants = [""]
    for ch in word:
        variants = [v + c for v in variants for c in {ch.lower(), ch.upper()}]
    return variants


_MISSING_SET = pa.array(
    sorted({v for token in MISSING_TOKENS for v in _case_variants(token)}), pa.large_string()
)


def missing_mask(values: pa.Array, *, trimmed: bool = False) -> np.ndarray:
    """Return which text values are missing (null, empty or an NA token).

    Parameters
    ----------
    values : pyarrow.Array
        Text values.
    trimmed : bool
        The values have had surrounding white space removed already.

    Returns
    -------
    numpy.ndarray of bool
        True where the value is missing.

    Examples
    --------
    >>> import pyarrow as pa
    >>> missing_mask(pa.array(["", " NA ", "1.5", None, "-"])).tolist()
    [True, True, False, True, True]
    """
    values = as_text_array(values)
    text = values if trimmed else pc.utf8_trim_whitespace(values)
    missing = bool_mask(pc.is_in(text, value_set=_MISSING_SET))
    if values.null_count:
        missing |= bool_mask(pc.is_null(values))
    return missing


def _empty_errors(n: int) -> np.ndarray:
    return np.full(n, "", dtype=object)


def _ns_index(ns: np.ndarray) -> pd.DatetimeIndex:
    """Wrap int64 nanoseconds since the epoch (NaT as int64 min) as UTC times."""
    return pd.DatetimeIndex(np.asarray(ns, dtype=np.int64).view("M8[ns]")).tz_localize("UTC")


def _to_ns(times: pd.Series | pd.DatetimeIndex) -> tuple[np.ndarray, np.ndarray]:
    """Convert parsed pandas times to int64 ns; flag those ns cannot hold.

    Returns the int64 values (NaT where not representable) and a mask of
    values that were parsed but lie outside the years 1678-2261.
    """
    index = pd.DatetimeIndex(times)
    if index.tz is not None:
        index = index.tz_convert("UTC").tz_localize(None)
    na = np.asarray(index.isna())
    years = np.where(na, 2000, np.asarray(index.year))
    out_of_range = ~na & ((years < _YEAR_MIN) | (years > _YEAR_MAX))
    keep = ~na & ~out_of_range
    ns = np.full(len(index), _NAT, dtype=np.int64)
    if keep.any():
        ns[keep] = index[keep].as_unit("ns").asi8
    return ns, out_of_range


def parse_epoch_seconds(seconds: object, column: str = "time") -> ParsedTimes:
    """Parse epoch seconds (since 1970-01-01T00:00Z) to UTC times.

    Parameters
    ----------
    seconds : array_like of float
        Seconds since the Unix epoch; NaN is missing.
    column : str
        Column name used in the error messages.

    Returns
    -------
    ParsedTimes
        Values outside [1e8, 4e9] s are unparseable; none is assumed UTC
        (epoch time is UTC by definition).

    Examples
    --------
    >>> parse_epoch_seconds([1772366400.0]).time[0].isoformat()
    '2026-03-01T12:00:00+00:00'
    """
    secs = np.asarray(seconds, dtype=float)
    n = len(secs)
    missing = np.isnan(secs)
    bad = ~missing & ~((secs >= EPOCH_MIN_S) & (secs <= EPOCH_MAX_S))
    good = ~missing & ~bad
    ns = np.full(n, _NAT, dtype=np.int64)
    if good.any():
        whole = np.floor(secs[good])
        frac_ns = np.round((secs[good] - whole) * 1e9).astype(np.int64)
        ns[good] = whole.astype(np.int64) * 1_000_000_000 + frac_ns
    errors = _empty_errors(n)
    for i in np.flatnonzero(bad):
        value = _format_number(secs[i])
        errors[i] = f"{column}: epoch seconds out of range {value} ({_EPOCH_RANGE})"
    return ParsedTimes(_ns_index(ns), np.zeros(n, dtype=bool), missing, errors)


def _format_number(value: float) -> str:
    if np.isfinite(value) and value == int(value) and abs(value) < 1e18:
        return str(int(value))
    return repr(float(value))


def _normalise_iso(text: pa.Array, canonical: np.ndarray | None = None) -> pa.Array:
    """Rewrite accepted date-time spellings into the form pandas reads as ISO 8601.

    Values already in that form (``canonical``, the usual case) are left
    alone, so that the rewriting costs nothing for a clean column.
    """
    if canonical is None:
        canonical = bool_mask(pc.match_substring_regex(text, _CANONICAL_RE))
    if canonical.all():
        return text
    mask = pa.array(~canonical)
    part = text.filter(mask)
    part = pc.replace_substring_regex(part, r"^(\d{4})/(\d{2})/(\d{2})", r"\1-\2-\3")
    part = pc.replace_substring_regex(part, r"^(\d{4}-\d{2}-\d{2})(?:[Tt]|\s+)", r"\1T")
    part = pc.replace_substring_regex(part, r"T(\d):", r"T0\1:")
    part = pc.replace_substring_regex(part, r"(\d),(\d)", r"\1.\2")
    part = pc.replace_substring_regex(part, r"\s*(?i:UTC|GMT)$", "Z")
    part = pc.replace_substring_regex(part, r"\s+([+-]\d)", r"\1")
    return pc.replace_with_mask(text, mask, pc.utf8_upper(part))


def _parse_iso(text: pa.Array) -> tuple[np.ndarray, np.ndarray]:
    """Parse normalised ISO text; return int64 ns, has-zone and out-of-years masks."""
    series = pd.Series(text, dtype=pd.ArrowDtype(pa.large_string()))
    parsed = pd.to_datetime(series, format="ISO8601", utc=True, errors="coerce")
    ns, out_of_range = _to_ns(parsed)
    has_zone = bool_mask(pc.ends_with(text, "Z"))
    other = ~has_zone
    if other.any():
        part = text.filter(pa.array(other))
        found = pc.match_substring_regex(part, r"T\d{2}:\d{2}.*[+-]\d{2}(?::?\d{2})?$")
        has_zone[other] = bool_mask(found)
    return ns, has_zone, out_of_range


def parse_time_text(
    values: object, column: str = "time", *, decimal_comma: bool = False
) -> ParsedTimes:
    """Parse a column of time text: ISO 8601 or epoch seconds, value by value.

    Parameters
    ----------
    values : array_like of str
        The raw cell texts (a pyarrow array, a list or a Series).
    column : str
        Column name used in the error messages.
    decimal_comma : bool
        Accept ``1772366400,5`` as epoch seconds (semicolon-separated files).

    Returns
    -------
    ParsedTimes
        See the module notes for what is accepted.

    Examples
    --------
    >>> parsed = parse_time_text(["2026-03-01T12:00:00+02:00", "2026-03-01 10:00", "xyz"])
    >>> [t.isoformat() if t is not pd.NaT else None for t in parsed.time]
    ['2026-03-01T10:00:00+00:00', '2026-03-01T10:00:00+00:00', None]
    >>> parsed.assumed_utc.tolist(), parsed.errors[2]
    ([False, True, False], "time: not a time 'xyz'")
    """
    raw = as_text_array(values)
    n = len(raw)
    text = pc.utf8_trim_whitespace(raw)
    missing = missing_mask(text, trimmed=True)
    canonical = bool_mask(pc.match_substring_regex(text, _CANONICAL_RE))
    is_iso = canonical.copy()
    other = ~missing & ~canonical
    if other.any():
        part = text.filter(pa.array(other))
        is_iso[other] = bool_mask(pc.match_substring_regex(part, _DATETIME_RE))
    number_text = pc.replace_substring(text, ",", ".") if decimal_comma else text
    rest = ~missing & ~is_iso
    is_number = np.zeros(n, dtype=bool)
    if rest.any():
        part = number_text if rest.all() else number_text.filter(pa.array(rest))
        is_number[rest] = bool_mask(pc.match_substring_regex(part, _NUMBER_RE))

    ns = np.full(n, _NAT, dtype=np.int64)
    assumed = np.zeros(n, dtype=bool)
    failed = ~missing & ~is_iso & ~is_number
    years_bad = np.zeros(n, dtype=bool)
    if is_iso.any():
        iso_ns, has_zone, out_of_range = _parse_iso(_normalise_iso(text, canonical))
        ns[is_iso] = iso_ns[is_iso]
        assumed[is_iso] = ~has_zone[is_iso]
        years_bad = is_iso & out_of_range
        failed |= is_iso & (ns == _NAT)
    epoch_failed = np.zeros(n, dtype=bool)
    if is_number.any():
        secs = np.full(n, np.nan)
        cast = pc.cast(pc.if_else(pa.array(is_number), number_text, None), pa.float64())
        secs[is_number] = np.asarray(cast.to_numpy(zero_copy_only=False))[is_number]
        epoch = parse_epoch_seconds(secs, column)
        ns[is_number] = epoch.time.asi8[is_number]
        epoch_failed = is_number & epoch.unparseable
    assumed &= ~failed

    errors = _empty_errors(n)
    bad = np.flatnonzero(failed | epoch_failed)
    if len(bad):
        texts = text.take(pa.array(bad)).to_pylist()
        for i, value in zip(bad, texts, strict=True):
            why = "epoch" if epoch_failed[i] else "years" if years_bad[i] else ""
            errors[i] = f"{column}: {_time_reason(value, why, kind='time')}"
    return ParsedTimes(_ns_index(ns), assumed, missing, errors)


def _time_reason(value: str, why: str, kind: str) -> str:
    """Word why one value is not a time (only called for failed values).

    ``why`` is ``"epoch"`` for a number outside the plausible epoch range,
    ``"years"`` for a date outside the years datetime64[ns] holds, else ``""``.
    """
    quoted = quote_value(value)
    if why == "epoch":
        return f"epoch seconds out of range {quoted} ({_EPOCH_RANGE})"
    year = re.match(r"^(\d{4})[-/]", value)
    if why == "years" or (year and not _YEAR_MIN <= int(year.group(1)) <= _YEAR_MAX):
        return f"time outside the years {_YEAR_MIN}-{_YEAR_MAX} {quoted}"
    if kind != "clock" and re.match(_AMBIGUOUS_RE, value):
        return (
            f"day/month order is ambiguous in {quoted}; write dates as YYYY-MM-DD (ISO 8601)"
        )
    if kind == "time" and re.match(_DATETIME_RE, value):
        return f"not a valid date and time {quoted}"
    if kind == "date" and re.match(_DATE_RE, value):
        return f"not a valid date {quoted}"
    if kind == "clock" and re.match(_CLOCK_RE, value):
        return f"not a valid time of day {quoted}"
    noun = {"time": "a time", "date": "a date", "clock": "a time of day"}[kind]
    return f"not {noun} {quoted}"


def parse_date_and_time(
    dates: object, times: object, date_column: str = "date", time_column: str = "time"
) -> ParsedTimes:
    """Parse a date column and a time-of-day column into UTC times.

    Parameters
    ----------
    dates : array_like of str
        ``YYYY-MM-DD`` or ``YYYY/MM/DD``.
    times : array_like of str
        ``hh:mm[:ss[.fff]]``, optionally followed by a zone designator.
    date_column, time_column : str
        Column names used in the error messages.

    Returns
    -------
    ParsedTimes
        Missing where either part is missing; unparseable where either part
        cannot be read (the message names the column at fault).

    Examples
    --------
    >>> parsed = parse_date_and_time(["2026-03-01"], ["12:30:00+01:00"])
    >>> parsed.time[0].isoformat()
    '2026-03-01T11:30:00+00:00'
    """
    date_raw = as_text_array(dates)
    time_raw = as_text_array(times)
    if len(date_raw) != len(time_raw):
        raise ValueError("date and time columns differ in length")
    n = len(date_raw)
    date_text = pc.utf8_trim_whitespace(date_raw)
    time_text = pc.utf8_trim_whitespace(time_raw)
    date_missing = missing_mask(date_text, trimmed=True)
    time_missing = missing_mask(time_text, trimmed=True)
    date_ok = bool_mask(pc.match_substring_regex(date_text, _DATE_RE)) & ~date_missing
    time_ok = bool_mask(pc.match_substring_regex(time_text, _CLOCK_RE)) & ~time_missing
    date_bad = ~date_missing & ~date_ok
    time_bad = ~time_missing & ~time_ok
    missing = (date_missing | time_missing) & ~date_bad & ~time_bad

    both = date_ok & time_ok
    ns = np.full(n, _NAT, dtype=np.int64)
    assumed = np.zeros(n, dtype=bool)
    combined_bad = np.zeros(n, dtype=bool)
    if both.any():
        separator = pa.scalar("T", pa.large_string())
        joined = pc.binary_join_element_wise(date_text, time_text, separator)
        iso_ns, has_zone, _ = _parse_iso(_normalise_iso(joined))
        ns[both] = iso_ns[both]
        assumed[both] = ~has_zone[both]
        combined_bad = both & (ns == _NAT)
        assumed &= ~combined_bad

    errors = _empty_errors(n)
    rows = np.flatnonzero(date_bad | time_bad | combined_bad)
    if len(rows):
        taken = pa.array(rows)
        d_values = date_text.take(taken).to_pylist()
        t_values = time_text.take(taken).to_pylist()
        for i, d, t in zip(rows, d_values, t_values, strict=True):
            parts = []
            if date_bad[i]:
                parts.append(f"{date_column}: {_time_reason(d, '', 'date')}")
            if time_bad[i]:
                parts.append(f"{time_column}: {_time_reason(t, '', 'clock')}")
            if combined_bad[i]:
                parts.append(
                    f"{date_column}/{time_column}: not a valid date and time {quote_value(d)} "
                    f"{quote_value(t)}"
                )
            errors[i] = "; ".join(parts)
    return ParsedTimes(_ns_index(ns), assumed, missing, errors)


def _scaled_to_ns(values: np.ndarray, valid: np.ndarray, factor: int) -> tuple[np.ndarray, ...]:
    """Multiply int64 counts by ``factor`` to ns; flag those that overflow the years."""
    ns = np.full(len(values), _NAT, dtype=np.int64)
    limit_lo = pd.Timestamp(f"{_YEAR_MIN}-01-01").value // factor
    limit_hi = pd.Timestamp(f"{_YEAR_MAX}-12-31").value // factor
    in_range = valid & (values >= limit_lo) & (values <= limit_hi)
    ns[in_range] = values[in_range] * factor
    return ns, valid & ~in_range


def parse_time_values(
    values: object, column: str = "time", *, naive_assumed_utc: bool = True
) -> ParsedTimes:
    """Parse a typed column of times, whatever its type.

    Parameters
    ----------
    values : pyarrow.Array, numpy.ndarray or array_like
        Timestamps (``timestamp`` / ``datetime64``; zone-aware ones are
        converted, naive ones are UTC), dates (midnight UTC), numbers
        (epoch seconds) or text (see :func:`parse_time_text`).
    column : str
        Column name used in the error messages.
    naive_assumed_utc : bool
        Whether naive timestamps are flagged ``time_assumed_utc``.  CF
        NetCDF times are UTC by definition of their units, so the NetCDF
        reader passes False.

    Returns
    -------
    ParsedTimes
        The times.

    Raises
    ------
    TypeError
        If the values are of a type that holds no time (e.g. boolean).
    """
    if isinstance(values, pa.ChunkedArray):
        values = values.combine_chunks()
    if isinstance(values, np.ndarray) and values.dtype.kind == "M":
        values = pa.array(values)
    if not isinstance(values, pa.Array):
        array = np.asarray(values)
        if array.dtype.kind in "OUS":
            return parse_time_text(array, column)
        values = pa.array(array)
    kind = values.type
    if pa.types.is_dictionary(kind):
        values = values.dictionary_decode()
        kind = values.type
    n = len(values)
    null = bool_mask(pc.is_null(values))
    if pa.types.is_timestamp(kind):
        factor = {"s": 1_000_000_000, "ms": 1_000_000, "us": 1_000, "ns": 1}[kind.unit]
        raw = np.asarray(
            pc.fill_null(values.cast(pa.int64()), 0).to_numpy(zero_copy_only=False), dtype=np.int64
        )
        ns, overflow = _scaled_to_ns(raw, ~null, factor)
        errors = _empty_errors(n)
        for i in np.flatnonzero(overflow):
            errors[i] = f"{column}: time outside the years {_YEAR_MIN}-{_YEAR_MAX}"
        assumed = ~null & ~overflow & (kind.tz is None) & naive_assumed_utc
        return ParsedTimes(_ns_index(ns), np.asarray(assumed, dtype=bool), null, errors)
    if pa.types.is_date(kind):
        days = np.asarray(
            pc.fill_null(values.cast(pa.date32()).cast(pa.int32()), 0).to_numpy(
                zero_copy_only=False
            ),
            dtype=np.int64,
        )
        ns, overflow = _scaled_to_ns(days, ~null, 86_400 * 1_000_000_000)
        errors = _empty_errors(n)
        for i in np.flatnonzero(overflow):
            errors[i] = f"{column}: date outside the years {_YEAR_MIN}-{_YEAR_MAX}"
        return ParsedTimes(_ns_index(ns), ~null & ~overflow, null, errors)
    if pa.types.is_integer(kind) or pa.types.is_floating(kind) or pa.types.is_decimal(kind):
        secs = np.asarray(
            values.cast(pa.float64()).to_numpy(zero_copy_only=False), dtype=float
        )
        return parse_epoch_seconds(np.where(null, np.nan, secs), column)
    if is_text_type(kind) or pa.types.is_binary(kind) or pa.types.is_large_binary(kind):
        return parse_time_text(values, column)
    raise TypeError(f"column {column!r} has type {kind}, which holds no time")
