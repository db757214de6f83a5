"""Writers of run outputs: every file appears complete or not at all.

Each output is written to a temporary file in the destination folder and
renamed over the target with :func:`os.replace`, which is atomic on POSIX
file systems: a reader (or a run killed part-way) sees either the previous
complete file or the new complete file, never a truncated one.
"""

from __future__ import annotations

import contextlib
import csv
import io
import json
import os
import re
import tempfile
from collections.abc import Iterator
from pathlib import Path
from typing import IO, Any

import numpy as np
import pandas as pd
import pyarrow as pa
import pyarrow.compute as pc

__all__ = [
    "CSV_CHUNK_ROWS",
    "AtomicFile",
    "CsvAppender",
    "csv_text",
    "float_reprs",
    "PART_SUFFIX",
    "atomic_open",
    "format_time",
    "time_texts",
    "new_file_mode",
    "remove_stale_parts",
    "write_csv",
    "write_json",
]


#: Temporary files are named ``.NAME.PID.RANDOM.part`` beside their target.
PART_SUFFIX = ".part"


def _process_alive(pid: int) -> bool:
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    except PermissionError:  # exists, owned by someone else
        return True
    except OSError:
        return False
    return True


def remove_stale_parts(path: str | Path) -> list[Path]:
    """Remove temporary files of ``path`` left by writers that were killed.

    A run killed part-way through :func:`atomic_open` (SIGKILL, power cut)
    leaves its ``.NAME.PID.RANDOM.part`` file.  This removes those of
    ``path`` whose process no longer runs, and those without a process id
    (written by older versions); temporary files of live writers are kept.

    Parameters
    ----------
    path : str or Path
        The final file whose temporary files are looked for.

    Returns
    -------
    list of Path
        The files removed.
    """
    path = Path(path)
    prefix = f".{path.name}."
    removed = []
    try:
        candidates = [p for p in path.parent.iterdir()
                      if p.name.startswith(prefix) and p.name.endswith(PART_SUFFIX)]
    except OSError:
        return removed
    for part in candidates:
        middle = part.name[len(prefix):-len(PART_SUFFIX)]
        pid = middle.split(".", 1)[0]
        if pid.isdigit() and "." in middle and (
            int(pid) == os.getpid() or _process_alive(int(pid))
        ):
            continue
        with contextlib.suppress(OSError):
            part.unlink()
            removed.append(part)
    return removed


def _umask() -> int:
    mask = os.umask(0o022)
    os.umask(mask)
    return mask


def new_file_mode() -> int:
    """Return the permissions a newly created file gets here (``0o666`` less the umask).

    Returns
    -------
    int
        The mode bits.
    """
    return 0o666 & ~_umask()


@contextlib.contextmanager
def atomic_open(path: str | Path, mode: str = "w", **kwargs: Any) -> Iterator[IO]:
    """Open a temporary file beside ``path`` and rename it over ``path`` on success.

    The temporary file is ``.NAME.PID.RANDOM.part`` in the same folder; it
    gets the permissions a new file would get (``0o666`` less the umask) and
    is flushed to disk before the rename, and the folder after it.  Stale
    temporary files of ``path`` from killed writers are removed first
    (:func:`remove_stale_parts`).

    Parameters
    ----------
    path : str or Path
        The final file.
    mode : str
        ``"w"`` (text, UTF-8, Unix line ends) or ``"wb"``.
    **kwargs
        Passed to :func:`open`.

    Yields
    ------
    file object
        The temporary file; if the block raises, it is removed and ``path``
        is left as it was.
    """
    path = Path(path)
    path.parent.mkdir(parents=True, exist_ok=True)
    remove_stale_parts(path)
    fd, tmp = tempfile.mkstemp(
        prefix=f".{path.name}.{os.getpid()}.", suffix=PART_SUFFIX, dir=path.parent
    )
    if "b" not in mode:
        kwargs.setdefault("encoding", "utf-8")
        kwargs.setdefault("newline", "")
    try:
        with contextlib.suppress(OSError):
            os.fchmod(fd, new_file_mode())
        with os.fdopen(fd, mode, **kwargs) as handle:
            yield handle
            handle.flush()
            os.fsync(handle.fileno())
        os.replace(tmp, path)
    except BaseException:
        with contextlib.suppress(FileNotFoundError):
            os.unlink(tmp)
        raise
    _sync_folder(path.parent)


class AtomicFile:
    """A temporary file beside its target, renamed over it by :meth:`commit`.

    The non-context-manager form of :func:`atomic_open`, for outputs written
    piece by piece over a whole run and renamed at its end in a chosen
    order: same temporary name (``.NAME.PID.RANDOM.part``), permissions,
    flush and folder sync.

    Parameters
    ----------
    path : str or Path
        The final file.
    mode : str
        ``"w"`` (text, UTF-8, Unix line ends) or ``"wb"``.
    """

    def __init__(self, path: str | Path, mode: str = "w") -> None:
        self.path = Path(path)
        self.path.parent.mkdir(parents=True, exist_ok=True)
        remove_stale_parts(self.path)
        fd, self.tmp = tempfile.mkstemp(
            prefix=f".{self.path.name}.{os.getpid()}.", suffix=PART_SUFFIX, dir=self.path.parent
        )
        with contextlib.suppress(OSError):
            os.fchmod(fd, new_file_mode())
        kwargs = {} if "b" in mode else {"encoding": "utf-8", "newline": ""}
        self.handle: IO = os.fdopen(fd, mode, **kwargs)

    def commit(self) -> Path:
        """Flush the file to disk and rename it over the target.

        Returns
        -------
        Path
            The target.
        """
        try:
            self.handle.flush()
            os.fsync(self.handle.fileno())
            self.handle.close()
            os.replace(self.tmp, self.path)
        except BaseException:
            self.abort()
            raise
        _sync_folder(self.path.parent)
        return self.path

    def abort(self) -> None:
        """Close and remove the temporary file; the target is left as it was."""
        with contextlib.suppress(OSError):
            self.handle.close()
        with contextlib.suppress(FileNotFoundError):
            os.unlink(self.tmp)


def _sync_folder(folder: Path) -> None:
    """Flush a folder's entries (the rename) to disk, where the system allows it."""
    try:
        fd = os.open(folder, os.O_RDONLY)
    except OSError:
        return
    try:
        os.fsync(fd)
    except OSError:
        pass
    finally:
        os.close(fd)


_LARGE = pa.large_string()


def _large(text: str) -> pa.Scalar:
    return pa.scalar(text, _LARGE)


def format_time(times: pd.Series) -> pd.Series:
    """Format UTC times as ISO 8601 strings with a ``Z`` designator.

    Parameters
    ----------
    times : pandas.Series
        ``datetime64[ns, UTC]`` values.

    Returns
    -------
    pandas.Series
        Strings like ``2026-03-01T12:00:00Z`` (fractional seconds only when
        present); NaT becomes the empty string.
    """
    index = times.index if isinstance(times, pd.Series) else None
    text = time_texts(times).to_numpy(zero_copy_only=False)
    return pd.Series(text, index=index, dtype=object)


def time_texts(times: Any) -> pa.Array:
    """Format times as :func:`format_time` does, into an Arrow array.

    Parameters
    ----------
    times : pandas.Series or array_like
        Times; naive ones are taken as UTC.

    Returns
    -------
    pyarrow.Array
        ``large_string`` texts, empty for NaT.
    """
    t = pd.to_datetime(times, utc=True)
    ns = pd.DatetimeIndex(t).tz_convert("UTC").tz_localize(None).as_unit("ns").to_numpy()
    nat = np.isnat(ns)
    # numpy formats whole arrays in C; a datetime64[us] string has exactly the
    # digits of strftime's %f, and NaT rows are blanked below
    text = pa.array(np.datetime_as_string(ns, unit="s"), _LARGE)
    fraction = ~nat & (ns.view(np.int64) % 1_000_000_000 != 0)
    if fraction.any():
        micro = pa.array(np.datetime_as_string(ns[fraction], unit="us"), _LARGE)
        text = pc.replace_with_mask(text, pa.array(fraction), micro)
    text = pc.binary_join_element_wise(text, _large(""), _large("Z"))
    if nat.any():
        text = pc.if_else(pa.array(nat), _large(""), text)
    return text


#: Rows formatted and written at a time by :func:`write_csv`.
CSV_CHUNK_ROWS = 200_000


def write_csv(path: str | Path, table: pd.DataFrame, float_digits: dict | None = None) -> None:
    """Write a table as RFC 4180 CSV atomically.

    The rows are formatted and written :data:`CSV_CHUNK_ROWS` at a time, so
    that writing needs little memory beyond the table itself; the bytes are
    those of writing the table in one go.

    Parameters
    ----------
    path : str or Path
        Destination file.
    table : pandas.DataFrame
        The table; datetime columns are written as ISO 8601 ``Z`` strings.
    float_digits : dict, optional
        ``{column: decimals}`` for columns to round on output.
    """
    with atomic_open(path) as handle:
        for start in range(0, max(len(table), 1), CSV_CHUNK_ROWS):
            handle.write(_csv_chunk(_rounded(table.iloc[start : start + CSV_CHUNK_ROWS],
                                             float_digits), header=start == 0))


def float_reprs(values: np.ndarray) -> pa.Array:
    """Python's ``repr`` of every float64 value, formatted in Arrow.

    Parameters
    ----------
    values : numpy.ndarray
        float64 values.

    Returns
    -------
    pyarrow.Array
        ``large_string`` texts equal to ``repr(float(x))`` (the shortest
        decimal that reads back as ``x``), NaN included as ``nan``.

    Notes
    -----
    Arrow's cast to string writes the same shortest round-trip digits
    (closest to the value, ties to even) but other notation: it is kept for
    values that Python writes in plain notation without a trailing ``.0``
    (not integral, 1e-4 <= |x| < 1e16) where Arrow wrote no exponent;
    integral values below 1e16 are their integer text with ``.0``
    (``-0.0`` for negative zero); the rest (NaN, infinities, tiny and huge
    values) go through :func:`repr`.

    Examples
    --------
    >>> float_reprs(np.array([0.1, 2.0, -0.0, 1e-05, 1e16, float("nan")])).to_pylist()
    ['0.1', '2.0', '-0.0', '1e-05', '1e+16', 'nan']
    """
    v = np.ascontiguousarray(values, dtype=np.float64)
    text = pc.cast(pa.array(v), _LARGE)
    with np.errstate(invalid="ignore"):
        size = np.abs(v)
        finite = np.isfinite(v)
        integral = finite & (np.trunc(v) == v) & (size < 1e16)
        plain = finite & ~integral & (size >= 1e-4) & (size < 1e16)
    if plain.any():
        plain &= ~np.asarray(pc.match_substring(text, "e"), dtype=bool)
    if integral.any():
        whole = pc.cast(pa.array(v[integral].astype(np.int64)), _LARGE)
        whole = pc.binary_join_element_wise(whole, _large(".0"), _large(""))
        negative_zero = np.signbit(v[integral]) & (v[integral] == 0.0)
        if negative_zero.any():
            whole = pc.if_else(pa.array(negative_zero), _large("-0.0"), whole)
        text = pc.replace_with_mask(text, pa.array(integral), whole)
    rest = ~(plain | integral)
    if rest.any():
        text = pc.replace_with_mask(
            text, pa.array(rest), pa.array(list(map(float.__repr__, v[rest].tolist())), _LARGE)
        )
    return text


#: Characters that may make the csv module quote a field.
_CSV_SPECIAL = '[,"\r\n]'


def _csv_field(value: str) -> str:
    """One field as :func:`csv.writer` writes it (QUOTE_MINIMAL), not the only one of its row.

    A field with a carriage return is quoted too: RFC 4180 (§2, rule 6)
    quotes fields with line breaks, and many readers take a bare CR for
    one, while the csv module quotes only the characters of its line
    terminator (here the line feed).
    """
    buffer = io.StringIO()
    csv.writer(buffer, lineterminator="\n").writerow([value, ""])
    field = buffer.getvalue()[:-2]
    if "\r" in value and not field.startswith('"'):
        field = '"' + value.replace('"', '""') + '"'
    return field


def _csv_strings(array: pa.Array) -> pa.Array:
    """Strings with nulls written empty and fields the csv module would quote quoted."""
    array = pc.fill_null(array.cast(_LARGE), _large(""))
    special = np.asarray(pc.match_substring_regex(array, _CSV_SPECIAL), dtype=bool)
    if special.any():
        values = np.asarray(array.to_pylist(), dtype=object)[special]
        array = pc.replace_with_mask(array, pa.array(special),
                                     pa.array([_csv_field(v) for v in values], _LARGE))
    return array


def _csv_column(series: pd.Series) -> pa.Array | None:
    """Return the fields pandas' ``to_csv`` writes for a column (None: dtype not handled here).

    pandas writes float64 columns through NumPy's cast to ``str`` (Python's
    ``repr`` digits), integers and booleans as Python's ``str`` would, and
    missing values (NaN, None, NA) as empty fields.
    """
    dtype = series.dtype
    if pd.api.types.is_datetime64_any_dtype(dtype):
        return time_texts(series)
    if isinstance(dtype, np.dtype):
        values = series.to_numpy()
        if dtype == np.float64:
            text = float_reprs(values)
            missing = np.isnan(values)
            if missing.any():
                text = pc.if_else(pa.array(missing), _large(""), text)
            return text
        if dtype.kind in "iu":
            return pc.cast(pa.array(values), _LARGE)
        if dtype.kind == "b":
            return pc.if_else(pa.array(values), _large("True"), _large("False"))
        if dtype.kind == "O":
            missing = pd.isna(values)
            present = values[~missing]
            if not all(isinstance(v, str) for v in present.tolist()):
                return None
            out = np.where(missing, None, values)
            return _csv_strings(pa.array(out.tolist(), _LARGE))
        return None
    if isinstance(dtype, pd.StringDtype):
        array = pa.array(series.array)
        if isinstance(array, pa.ChunkedArray):
            array = array.combine_chunks()
        return _csv_strings(array)
    return None


def _rounded(table: pd.DataFrame, float_digits: dict | None) -> pd.DataFrame:
    if not float_digits:
        return table
    table = table.copy()
    for name, digits in float_digits.items():
        table[name] = table[name].round(digits)
    return table


def _pandas_csv(table: pd.DataFrame, header: bool) -> str:
    """``to_csv`` text, with text fields holding a carriage return quoted (see :func:`_csv_field`).

    Such fields go to ``to_csv`` as placeholders (a number between NUL
    characters, which need no quoting), replaced by the quoted fields
    afterwards; a table whose text holds NUL characters is written as
    ``to_csv`` writes it.
    """
    quoted: list[str] = []
    out = table
    for k in range(table.shape[1]):
        column = table.iloc[:, k]
        if column.dtype.kind != "O" and not isinstance(
                column.dtype, pd.StringDtype | pd.CategoricalDtype):
            continue
        values = column.astype(object).to_numpy()
        with_cr = []
        for i, v in enumerate(values.tolist()):
            if isinstance(v, str):
                if "\x00" in v:
                    return table.to_csv(None, index=False, header=header, lineterminator="\n")
                if "\r" in v:
                    with_cr.append(i)
        if not with_cr:
            continue
        if out is table:
            out = table.copy()
        values = values.copy()
        for i in with_cr:
            quoted.append(_csv_field(values[i]))
            values[i] = f"\x00{len(quoted) - 1}\x00"
        out.isetitem(k, values)
    text = out.to_csv(None, index=False, header=header, lineterminator="\n")
    if quoted:
        text = re.sub("\x00([0-9]+)\x00", lambda m: quoted[int(m.group(1))], text)
    return text


def _csv_chunk(table: pd.DataFrame, header: bool) -> str:
    """Format a chunk as ``table.to_csv(None, index=False, header=header)`` does, in Arrow.

    Unix line ends.

    Datetime columns are written as :func:`format_time` writes them.  Tables
    this does not handle (fewer than two columns, labels that are
    not unique strings, other dtypes) are written by pandas.
    """
    labels = list(table.columns)
    fields = None
    if len(labels) > 1 and all(isinstance(c, str) for c in labels) and table.columns.is_unique:
        fields = [_csv_column(table[c]) for c in labels]
    if fields is None or any(f is None for f in fields):
        times = [n for n in labels if pd.api.types.is_datetime64_any_dtype(table[n].dtype)]
        if times:
            table = table.copy()
            for name in times:
                table[name] = format_time(table[name])
        return _pandas_csv(table, header)
    head = ""
    if header:
        buffer = io.StringIO()
        csv.writer(buffer, lineterminator="\n").writerow(labels)
        head = buffer.getvalue()
    if len(table) == 0:
        return head
    rows = pc.binary_join_element_wise(*fields, _large(","))
    rows = pc.binary_join_element_wise(rows, _large(""), _large("\n"))
    offsets = np.frombuffer(rows.buffers()[1], dtype=np.int64)[rows.offset:]
    data = rows.buffers()[2]
    return head + data[int(offsets[0]):int(offsets[len(rows)])].to_pybytes().decode("utf-8")


def csv_text(table: pd.DataFrame, float_digits: dict | None = None) -> str:
    """Format a table as :func:`write_csv` writes it, header line first.

    Parameters
    ----------
    table : pandas.DataFrame
        The table.
    float_digits : dict, optional
        ``{column: decimals}`` for columns to round on output.

    Returns
    -------
    str
        The CSV text (Unix line ends).
    """
    parts = []
    for start in range(0, max(len(table), 1), CSV_CHUNK_ROWS):
        parts.append(_csv_chunk(_rounded(table.iloc[start : start + CSV_CHUNK_ROWS],
                                         float_digits), header=start == 0))
    return "".join(parts)


class CsvAppender:
    """Write a CSV table a piece at a time, with the bytes of :func:`write_csv`.

    Parameters
    ----------
    path : str or Path
        Destination file, renamed into place by :meth:`commit`.
    float_digits : dict, optional
        ``{column: decimals}`` for columns to round on output.
    """

    def __init__(self, path: str | Path, float_digits: dict | None = None) -> None:
        self.file = AtomicFile(path)
        self.float_digits = float_digits
        self.rows = 0
        self._header = False

    def append(self, table: pd.DataFrame) -> None:
        """Append rows (the first call, even with no rows, writes the header).

        Parameters
        ----------
        table : pandas.DataFrame
            The rows; every call must have the same columns and dtypes.
        """
        self.append_text(csv_text(table, self.float_digits), len(table))

    def append_text(self, text: str, rows: int) -> None:
        """Append rows already formatted by :func:`csv_text` (header line first).

        Parameters
        ----------
        text : str
            Output of :func:`csv_text`; its header line is dropped after the first call.
        rows : int
            Rows in ``text``.
        """
        if self._header:
            text = text.split("\n", 1)[1]
        self.file.handle.write(text)
        self._header = True
        self.rows += rows

    def commit(self) -> Path:
        """Rename the file into place.

        Returns
        -------
        Path
            The file.
        """
        return self.file.commit()

    def abort(self) -> None:
        """Remove the temporary file."""
        self.file.abort()


def _json_default(value: Any) -> Any:
    if isinstance(value, np.integer):
        return int(value)
    if isinstance(value, np.floating):
        return None if not np.isfinite(value) else float(value)
    if isinstance(value, np.bool_):
        return bool(value)
    if isinstance(value, pd.Timestamp):
        return value.strftime("%Y-%m-%dT%H:%M:%SZ")
    if isinstance(value, Path):
        return str(value)
    raise TypeError(f"cannot write {type(value).__name__} as JSON")


def _finite(value: Any) -> Any:
    """Replace NaN and infinities by None (JSON has no such numbers)."""
    if isinstance(value, dict):
        return {k: _finite(v) for k, v in value.items()}
    if isinstance(value, list | tuple):
        return [_finite(v) for v in value]
    if isinstance(value, float | np.floating) and not np.isfinite(value):
        return None
    return value


def write_json(path: str | Path, data: Any) -> None:
    """Write JSON atomically, with stable key order and 2-space indent.

    Parameters
    ----------
    path : str or Path
        Destination file.
    data : object
        JSON-ready data; NumPy scalars and pandas timestamps are converted.
    """
    with atomic_open(path) as handle:
        json.dump(_finite(data), handle, indent=2, default=_json_default, allow_nan=False)
        handle.write("\n")
