"""The tidy table of fixes that every reader returns.

One row per input record, in file order, with these columns:

================== ======================= ==========================================
column             dtype                   meaning
================== ======================= ==========================================
drifter_id         string                  drifter identifier
time               datetime64[ns, UTC]     time of the fix (NaT if missing/unparseable)
lat                float64                 latitude, degrees north (NaN if missing)
lon                float64                 longitude, degrees east in [-180, 180)
source_file        string                  the input file, as given
source_row         int64                   1-based record number in the file
time_assumed_utc   bool                    time had no zone designator; UTC assumed
raw                string                  the raw record text when it did not parse
parse_error        string                  what did not parse ("" when all parsed)
================== ======================= ==========================================

``source_row`` counts like a spreadsheet for delimited text (the header is
row 1, the first data record row 2), records from 1 for Parquet and NetCDF,
and is the line number of the point element for GPX.

A value that is absent (an empty cell, ``NA``, a fill value) is *missing*:
NaN or NaT with ``parse_error`` empty; QC gives it flag 9.  A value that is
present but cannot be read is *unparseable*: NaN or NaT, the record's text in
``raw`` and a short ``column: reason`` in ``parse_error``; QC gives it flag 4.
"""

from __future__ import annotations

import numpy as np
import pandas as pd

__all__ = ["FIX_COLUMNS", "empty_fixes", "make_fixes", "wrap_lon"]

FIX_COLUMNS = (
    "drifter_id",
    "time",
    "lat",
    "lon",
    "source_file",
    "source_row",
    "time_assumed_utc",
    "raw",
    "parse_error",
)

_STRING = pd.StringDtype()


def wrap_lon(lon: np.ndarray) -> np.ndarray:
    """Wrap longitudes given as [-180, 180] or [0, 360] into [-180, 180).

    Values outside [-180, 360] (and NaN, inf) are returned unchanged: they are
    not a longitude convention but an error, which QC flags as out of range.

    Parameters
    ----------
    lon : array_like
        Longitude, degrees east.

    Returns
    -------
    numpy.ndarray
        Longitude, degrees east, in [-180, 180) where it was in [-180, 360].

    Examples
    --------
    >>> wrap_lon([180.0, 359.5, -180.0, 10.0, 500.0]).tolist()
    [-180.0, -0.5, -180.0, 10.0, 500.0]
    """
    lon = np.asarray(lon, dtype=float)
    with np.errstate(invalid="ignore"):
        # only values at or beyond 180 change, so in-range values keep every bit
        shift = (lon >= 180.0) & (lon <= 360.0)
        wrapped = np.where(shift, lon - 360.0, lon)
        # 360 - 360 = 0 and 180 - 360 = -180 land inside [-180, 180)
    return wrapped


def make_fixes(
    *,
    drifter_id,
    time,
    lat,
    lon,
    source_file: str,
    source_row,
    time_assumed_utc=False,
    raw="",
    parse_error="",
) -> pd.DataFrame:
    """Assemble a fixes table with the documented column order and dtypes.

    Parameters
    ----------
    drifter_id : array_like or str
        Drifter identifier per row (a scalar is broadcast).
    time : array_like
        Times; converted to ``datetime64[ns, UTC]`` (naive values are UTC).
    lat, lon : array_like
        Degrees; longitude is wrapped into [-180, 180).
    source_file : str
        The input file.
    source_row : array_like
        1-based record numbers.
    time_assumed_utc, raw, parse_error : array_like or scalar
        See the module table.

    Returns
    -------
    pandas.DataFrame
        The tidy table.
    """
    n = len(source_row)
    times = pd.to_datetime(pd.Series(time, dtype=object) if n == 0 else time, utc=True)
    table = pd.DataFrame(
        {
            "drifter_id": pd.array(_broadcast(drifter_id, n), dtype=_STRING),
            "time": pd.DatetimeIndex(times).as_unit("ns"),
            "lat": np.asarray(lat, dtype=float),
            "lon": wrap_lon(np.asarray(lon, dtype=float)),
            "source_file": pd.array([str(source_file)] * n, dtype=_STRING),
            "source_row": np.asarray(source_row, dtype=np.int64),
            "time_assumed_utc": np.asarray(_broadcast(time_assumed_utc, n), dtype=bool),
            "raw": pd.array(_broadcast(raw, n), dtype=_STRING),
            "parse_error": pd.array(_broadcast(parse_error, n), dtype=_STRING),
        }
    )
    return table


def _broadcast(value, n: int) -> list:
    if isinstance(value, str | bool | int | float) or value is None:
        return [value] * n
    values = list(value)
    if len(values) != n:
        raise ValueError(f"expected {n} values, got {len(values)}")
    return values


def empty_fixes() -> pd.DataFrame:
    """Return a fixes table with no rows and the documented dtypes.

    Returns
    -------
    pandas.DataFrame
        Zero rows, columns :data:`FIX_COLUMNS`.
    """
    return make_fixes(drifter_id=[], time=[], lat=[], lon=[], source_file="", source_row=[])
