"""Read Parquet tables of fixes into the fixes table.

The columns are found by name exactly as for delimited text
(:mod:`driftloop.io.columns`, including ``ReadConfig.columns``).  Values may
be typed or text:

* time: a timestamp column (zone-aware ones are converted to UTC; naive ones
  are taken as UTC and flagged ``time_assumed_utc``), numbers (epoch
  seconds), or text parsed as in :mod:`driftloop.io.timeparse`.  With a date
  column, the time column holds the time of day (``time32``/``time64`` or
  text) and the date is a ``date32``/``date64``, a timestamp or text.
* lat, lon: numbers (integer, float or decimal) or number text.  Null and
  NaN are missing.
* id: text or integers.

``source_row`` is the 1-based record index.  ``raw`` for a row that did not
parse lists its role columns as ``name=value``.  A file that is not Parquet,
has no rows, or whose time/lat/lon column has no readable value at all is
refused with an :class:`~driftloop.errors.InputError`, as is a drifter whose
longitudes mix the 0..360 and -180..180 conventions.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd
import pyarrow as pa
import pyarrow.compute as pc
import pyarrow.parquet as pq

from driftloop.config import ReadConfig
from driftloop.errors import InputError
from driftloop.io.columns import (
    ColumnRoles,
    ParsedNumbers,
    check_lon_convention,
    default_drifter_id,
    drifter_ids,
    infer_columns,
    join_errors,
    parse_numbers,
    refuse_unreadable_column,
)
from driftloop.io.schema import make_fixes
from driftloop.io.timeparse import (
    TIME_EXPECTED,
    ParsedTimes,
    bool_mask,
    is_text_type,
    parse_date_and_time,
    parse_time_values,
)

__all__ = ["read_parquet"]

_MAGIC = b"PAR1"


def read_parquet(path: str | Path, config: ReadConfig) -> pd.DataFrame:
    """Read a Parquet file of fixes.

    Parameters
    ----------
    path : str or Path
        The input file.
    config : ReadConfig
        Column mapping and drifter id.

    Returns
    -------
    pandas.DataFrame
        One row per record, columns as in :mod:`driftloop.io.schema`.

    Raises
    ------
    InputError
        If the file is not Parquet, has no rows, lacks a required column, or
        a required column has no readable value.

    Examples
    --------
    >>> import pathlib, tempfile
    >>> import pyarrow as pa, pyarrow.parquet as pq
    >>> with tempfile.TemporaryDirectory() as folder:
    ...     path = pathlib.Path(folder) / "B2.parquet"
    ...     pq.write_table(pa.table({"time": [1772366400], "lat": [45.5], "lon": [200.0]}), path)
    ...     table = read_parquet(path, ReadConfig())
    >>> table[["drifter_id", "lon", "source_row"]].values.tolist()
    [['B2', -160.0, 1]]
    """
    file = str(path)
    parquet = _open(path, file)
    names = parquet.schema_arrow.names
    partitions = {k: v for k, v in hive_partitions(path).items() if k not in names}
    names = [*names, *partitions]
    roles = infer_columns(names, config, file)
    if parquet.metadata.num_rows == 0:
        raise InputError(file, "the file has no rows")
    columns = _read_columns(parquet, names, roles, file, partitions)
    n = len(columns["time"])
    source_row = np.arange(1, n + 1, dtype=np.int64)

    times = _times(columns, roles, file)
    refuse_unreadable_column(file, times.parsed, times.errors, source_row, columns, roles,
                             TIME_EXPECTED)
    numbers = {}
    for role in ("lat", "lon"):
        parsed = _numbers(columns[role], roles.name(role), file)
        refuse_unreadable_column(file, parsed.parsed, parsed.errors, source_row, columns, roles,
                                 "decimal degrees like 45.25")
        numbers[role] = parsed

    if roles.has("id"):
        ids, id_errors = drifter_ids(columns["id"], roles.name("id"))
    else:
        ids = np.full(n, default_drifter_id(path, config), dtype=object)
        id_errors = np.full(n, "", dtype=object)
    errors = join_errors(id_errors, times.errors, numbers["lat"].errors, numbers["lon"].errors)
    # a row without a drifter id belongs to no drifter's longitude convention
    check_lon_convention(np.where(id_errors == "", numbers["lon"].values, np.nan), ids,
                         source_row, file, roles.name("lon"))

    return make_fixes(
        drifter_id=ids,
        time=times.time,
        lat=numbers["lat"].values,
        lon=numbers["lon"].values,
        source_file=file,
        source_row=source_row,
        time_assumed_utc=times.assumed_utc,
        raw=_raw_records(columns, roles, errors),
        parse_error=errors,
    )


def _open(path: str | Path, file: str) -> pq.ParquetFile:
    try:
        with open(path, "rb") as handle:
            head = handle.read(4)
            handle.seek(0, 2)
            size = handle.tell()
            tail = b""
            if size >= 8:
                handle.seek(-4, 2)
                tail = handle.read(4)
    except OSError as exc:
        raise InputError(file, f"cannot read the file: {exc.strerror or exc}") from exc
    if size == 0:
        raise InputError(file, "file is empty")
    if head != _MAGIC or tail != _MAGIC:
        raise InputError(file, "not a Parquet file (no Parquet marker at its start and end)")
    try:
        return pq.ParquetFile(path)
    except (pa.ArrowException, OSError, ValueError) as exc:
        raise InputError(file, f"not a Parquet file that can be read: {exc}") from exc


def hive_partitions(path: str | Path) -> dict[str, str]:
    """Partition columns given by the folders of a file in a partitioned dataset.

    A folder named ``KEY=VALUE`` (Hive-style partitioning, as written by
    Spark, Dask or :func:`pyarrow.dataset.write_dataset`) gives every row of
    the files below it the text column ``KEY`` with value ``VALUE``
    (percent-decoded); a column of the file itself takes precedence.

    Parameters
    ----------
    path : str or Path
        The file.

    Returns
    -------
    dict of str to str
        Partition columns, outermost folder first.

    Examples
    --------
    >>> hive_partitions("release/drifter_id=B2/year=2024/part-0.parquet")
    {'drifter_id': 'B2', 'year': '2024'}
    """
    from urllib.parse import unquote

    out: dict[str, str] = {}
    for part in Path(path).parent.parts:
        key, sep, value = part.partition("=")
        if sep and key and "=" not in value:
            out[unquote(key)] = unquote(value)
    return out


def _read_columns(
    parquet: pq.ParquetFile, names: list[str], roles: ColumnRoles, file: str,
    partitions: dict[str, str] | None = None,
) -> dict[str, pa.Array]:
    """Read only the role columns (all columns if their names are not unique)."""
    partitions = partitions or {}
    n_file = len(names) - len(partitions)
    extra = {n_file + k: value for k, value in enumerate(partitions.values())}
    columns = {}
    for role, i in list(roles.index.items()):
        if i in extra:
            columns[role] = pa.array([extra[i]] * parquet.metadata.num_rows, pa.large_string())
    roles_file = {role: i for role, i in roles.index.items() if i not in extra}
    names = names[:n_file]
    wanted = sorted(set(roles_file.values()))
    unique = all(names.count(names[i]) == 1 for i in wanted)
    try:
        if unique:
            table = parquet.read(columns=[names[i] for i in wanted])
            position = {i: k for k, i in enumerate(wanted)}
        else:
            table = parquet.read()
            position = {i: i for i in wanted}
    except (pa.ArrowException, OSError, ValueError) as exc:
        raise InputError(file, f"cannot read the Parquet data: {exc}") from exc
    for role, i in roles_file.items():
        column = table.column(position[i]).combine_chunks()
        if pa.types.is_dictionary(column.type):
            column = column.dictionary_decode()
        if pa.types.is_null(column.type):
            # a column with no value at all: every row is missing it (not a wrong type)
            column = pa.nulls(len(column), pa.float64() if role in ("lat", "lon")
                              else pa.large_string())
        columns[role] = column
    if "id" in columns:
        kind = columns["id"].type
        if not (is_text_type(kind) or pa.types.is_integer(kind) or pa.types.is_floating(kind)):
            raise _type_error(file, roles.name("id"), kind, "text or integer drifter ids")
    return columns


def _type_error(file: str, column: str, kind: pa.DataType, expected: str) -> InputError:
    return InputError(file, f"the column has type {kind}; expected {expected}", column=column)


def _times(columns: dict[str, pa.Array], roles: ColumnRoles, file: str) -> ParsedTimes:
    name = roles.name("time")
    if not roles.has("date"):
        try:
            return parse_time_values(columns["time"], name)
        except TypeError:
            raise _type_error(file, name, columns["time"].type,
                              "timestamps, epoch seconds or ISO 8601 text") from None
    date_name = roles.name("date")
    dates = columns["date"]
    if pa.types.is_dictionary(dates.type):
        dates = dates.dictionary_decode()
    if pa.types.is_timestamp(dates.type):
        dates = pc.cast(dates, pa.date32())
    if pa.types.is_date(dates.type):
        dates = pc.cast(pc.cast(dates, pa.date32()), pa.large_string())
    if not is_text_type(dates.type):
        raise _type_error(file, date_name, dates.type, "dates or YYYY-MM-DD text")
    clock = columns["time"]
    if pa.types.is_dictionary(clock.type):
        clock = clock.dictionary_decode()
    if pa.types.is_time(clock.type):
        clock = pc.cast(clock, pa.large_string())
    if not is_text_type(clock.type):
        raise _type_error(file, name, clock.type, "times of day or hh:mm:ss text")
    return parse_date_and_time(dates, clock, date_name, name)


def _numbers(values: pa.Array, column: str, file: str) -> ParsedNumbers:
    kind = values.type
    if pa.types.is_dictionary(kind):
        values = values.dictionary_decode()
        kind = values.type
    if pa.types.is_integer(kind) or pa.types.is_floating(kind) or pa.types.is_decimal(kind):
        numbers = np.asarray(
            pc.cast(values, pa.float64()).to_numpy(zero_copy_only=False), dtype=float
        )
        null = bool_mask(pc.is_null(values)) if values.null_count else np.zeros(len(values), bool)
        numbers = np.where(null, np.nan, numbers)
        missing = np.isnan(numbers)
        errors = np.full(len(values), "", dtype=object)
        infinite = np.isinf(numbers)
        for i in np.flatnonzero(infinite):
            errors[i] = f"{column}: not a finite number {float(numbers[i])!r}"
        return ParsedNumbers(np.where(infinite, np.nan, numbers), missing, errors)
    if is_text_type(kind):
        return parse_numbers(values, column)
    raise _type_error(file, column, kind, "numbers (decimal degrees)")


def _raw_records(
    columns: dict[str, pa.Array], roles: ColumnRoles, errors: np.ndarray
) -> np.ndarray:
    """Text of the role columns of each row that did not parse, as ``name=value``."""
    raw = np.full(len(errors), "", dtype=object)
    rows = np.flatnonzero(errors != "")
    if len(rows) == 0:
        return raw
    taken = pa.array(rows)
    parts = []
    for role in sorted(roles.index, key=roles.index.get):
        values = columns[role].take(taken).to_pylist()
        parts.append([f"{roles.name(role)}={'' if v is None else v}" for v in values])
    for k, i in enumerate(rows):
        raw[i] = ", ".join(p[k] for p in parts)
    return raw
