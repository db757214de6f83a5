"""Read delimited text (CSV, TSV, semicolon-separated) into the fixes table.

What is accepted
----------------
* Separator ``,``, ``;`` or tab, from ``ReadConfig.separator`` or sniffed
  from the header line (the most frequent of the three outside quotes).
* UTF-8, UTF-8 with a byte-order mark, and Latin-1 when the file is not
  valid UTF-8.  The encoding used is recorded in ``table.attrs["encoding"]``
  (``"utf-8"``, ``"utf-8-sig"`` or ``"latin-1"``).
* The first non-blank line is the header; columns are found by name
  (:mod:`driftloop.io.columns`).  Fields may be quoted with ``"`` (RFC 4180:
  a doubled ``""`` inside a quoted field is one quote); a quoted field may
  contain the separator or span lines.  A quote inside an unquoted field is
  an ordinary character.
* Numbers use a decimal point; in ``;``-separated files a decimal comma
  (``12,5``) is accepted too.
* Times as in :mod:`driftloop.io.timeparse`.

Records and rows
----------------
Every record after the header becomes one row of the table, in file order:

* A record with more or fewer fields than the header is kept as an
  unparseable row (``parse_error`` like ``row has 3 fields, header has 5``),
  and so is a record whose quotes never close.
* A cell that does not parse gives NaN/NaT and a ``column: reason`` in
  ``parse_error``; several are joined with ``"; "``.  ``raw`` holds the
  record's original text for every row with a ``parse_error``.
* Blank lines (nothing but spaces) are not records and give no row.

``source_row`` numbers records the way a spreadsheet numbers rows: the
header on the first line is row 1 and the first data record row 2.  A blank
line still occupies a row number (so without quoted line breaks the row is
the line number in a text editor); a record whose quoted field spans several
lines counts once.

File-level problems raise :class:`~driftloop.errors.InputError`: an empty
file, a header without data rows, a file that is not text, missing or
ambiguous columns, no row with the header's number of fields, a time, lat or
lon column in which no value can be read, and a drifter whose longitudes mix
the 0..360 and -180..180 conventions.
"""

from __future__ import annotations

import codecs
import csv
import re
from pathlib import Path

import numpy as np
import pandas as pd
import pyarrow as pa
import pyarrow.compute as pc
import pyarrow.csv as pacsv

from driftloop.config import ReadConfig
from driftloop.errors import ConfigError, InputError
from driftloop.io.columns import (
    ColumnRoles,
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
    bool_mask,
    parse_date_and_time,
    parse_time_text,
)

__all__ = ["read_delimited", "sniff_separator"]

_SNIFFED = (",", ";", "\t")
_SEPARATOR_NAMES = {"tab": "\t", "\\t": "\t", "comma": ",", "semicolon": ";"}
# a quoted field may span at most this many lines before its quote is taken as unbalanced
_MAX_RECORD_LINES = 1000
# C0 control characters that never occur in text (tab, newlines, form feed, ^Z allowed);
# they are the same bytes in UTF-8 and Latin-1, so bytes can be checked before decoding
_CONTROL_BYTES = bytes([*range(0x00, 0x09), *range(0x0E, 0x1A), *range(0x1B, 0x20)])
_CONTROL = re.compile(rb"[\x00-\x08\x0e-\x19\x1b-\x1f]")
_MAGIC = (
    (b"PAR1", "a Parquet file; give it the suffix .parquet"),
    (b"PK\x03\x04", "a ZIP archive (an Excel workbook?); export the sheet as CSV"),
    (b"\x1f\x8b", "gzip-compressed; decompress it first"),
    (b"\x89HDF", "an HDF5/NetCDF-4 file; give it the suffix .nc"),
    (b"CDF\x01", "a NetCDF file; give it the suffix .nc"),
    (b"CDF\x02", "a NetCDF file; give it the suffix .nc"),
)


def read_delimited(path: str | Path, config: ReadConfig) -> pd.DataFrame:
    r"""Read a CSV/TSV/semicolon-separated track file.

    Parameters
    ----------
    path : str or Path
        The input file.
    config : ReadConfig
        Column mapping, separator and drifter id (see the module notes).

    Returns
    -------
    pandas.DataFrame
        One row per record, columns as in :mod:`driftloop.io.schema`;
        ``attrs["encoding"]`` records the text encoding used.

    Raises
    ------
    InputError
        For the file-level problems listed in the module notes.

    Examples
    --------
    >>> import pathlib, tempfile
    >>> with tempfile.TemporaryDirectory() as folder:
    ...     path = pathlib.Path(folder) / "A7.csv"
    ...     _ = path.write_text("time,lat,lon\n2026-03-01T12:00:00Z,45.5,350\n")
    ...     table = read_delimited(path, ReadConfig())
    >>> table[["drifter_id", "lat", "lon", "source_row"]].values.tolist()
    [['A7', 45.5, -10.0, 2]]
    """
    file = str(path)
    text, encoding = _read_text(path, file)
    lines = _split_lines(text)
    n_lines = len(lines)

    sep_hint = _separator_from_config(config.separator)
    space = r"[^\S\t]" if sep_hint == "\t" else r"\s"
    blank = bool_mask(pc.match_substring_regex(lines, rf"^{space}*$"))
    nonblank = np.flatnonzero(~blank)
    if len(nonblank) == 0:
        raise InputError(file, "file is empty (only blank lines)")
    header_at = int(nonblank[0])
    header_text = lines[header_at].as_py()
    sep = sep_hint or sniff_separator(header_text)
    if sep_hint is None and sep == "\t":
        blank = bool_mask(pc.match_substring_regex(lines, r"^[^\S\t]*$"))
    names = _header_names(header_text, sep)
    roles = infer_columns(names, config, file)

    starts, ends, malformed = _group_records(lines, blank, header_at + 1, sep, '"' in text)
    if len(starts) == 0:
        raise InputError(file, "no data rows after the header", row=header_at + 1)
    consumed_before = _continuation_count(starts, ends, n_lines)
    source_row = starts + 1 - consumed_before[starts]
    record_text = _record_texts(lines, starts, ends)

    fields, n_fields = _split_fields(
        record_text, malformed, len(names), sep, roles, file, multiline=bool((ends > starts).any())
    )
    good = n_fields == len(names)
    if not good.any():
        found = n_fields[n_fields >= 0]
        seen = f"; the rows have {_count_words(found)}" if len(found) else ""
        raise InputError(
            file,
            f"no data row has the header's {len(names)} fields{seen}; is the separator "
            f"{_sep_word(sep)} right? set it with --separator",
            row=int(source_row[0]),
        )

    row_errors = np.full(len(starts), "", dtype=object)
    for i in np.flatnonzero(~good):
        row_errors[i] = (
            "quotes are not balanced: a quoted field never ends"
            if malformed[i]
            else f"row has {n_fields[i]} field{'' if n_fields[i] == 1 else 's'}, "
            f"header has {len(names)}"
        )
    table = _build_table(file, config, path, roles, fields, good, row_errors, source_row,
                         record_text, decimal_comma=(sep == ";"))
    table.attrs["encoding"] = encoding
    return table


def sniff_separator(header: str) -> str:
    """Guess the field separator from the header line.

    Parameters
    ----------
    header : str
        The header line.

    Returns
    -------
    str
        The most frequent of ``,`` ``;`` and tab outside quoted parts
        (``,`` when none occurs or on a tie with it).

    Examples
    --------
    >>> sniff_separator("id;time;lat;lon")
    ';'
    >>> sniff_separator('"id","time, UTC","lat","lon"')
    ','
    """
    unquoted = re.sub(r'"(?:[^"]|"")*"', "", header)
    counts = {s: unquoted.count(s) for s in _SNIFFED}
    best = max(_SNIFFED, key=lambda s: counts[s])
    return best if counts[best] > counts[","] else ","


def _separator_from_config(separator: str | None) -> str | None:
    if separator is None:
        return None
    value = _SEPARATOR_NAMES.get(separator.lower(), separator)
    if len(value) != 1 or value in '"\n\r':
        raise ConfigError(
            f"separator must be one character (or 'tab'), got {separator!r}"
        )
    return value


def _sep_word(sep: str) -> str:
    return "tab" if sep == "\t" else repr(sep)


def _count_words(counts: np.ndarray) -> str:
    values = sorted({int(c) for c in counts})
    shown = ", ".join(str(v) for v in values[:5])
    return f"{shown} field{'s' if values != [1] else ''}"


def _read_text(path: str | Path, file: str) -> tuple[str, str]:
    """Read and decode the file; refuse what is not text."""
    try:
        data = Path(path).read_bytes()
    except OSError as exc:
        raise InputError(file, f"cannot read the file: {exc.strerror or exc}") from exc
    if not data.strip():
        raise InputError(file, "file is empty")
    if data.startswith((codecs.BOM_UTF16_LE, codecs.BOM_UTF16_BE)):
        raise InputError(file, "not a text file driftloop reads: it is UTF-16; save it as UTF-8")
    for magic, what in _MAGIC:
        if data.startswith(magic):
            raise InputError(file, f"not a text file: it looks like {what}")
    if b"\x00" in data:
        raise InputError(file, "not a text file (it contains NUL bytes); expected CSV or TSV text")
    if len(data.translate(None, _CONTROL_BYTES)) != len(data):
        bad = _CONTROL.search(data)
        line = data.count(b"\n", 0, bad.start()) + 1
        raise InputError(
            file,
            f"not a text file: control byte 0x{bad.group()[0]:02x} on line {line}; "
            f"expected CSV or TSV text",
        )
    encoding = "utf-8"
    if data.startswith(codecs.BOM_UTF8):
        data = data[len(codecs.BOM_UTF8):]
        encoding = "utf-8-sig"
    try:
        text = data.decode("utf-8")
    except UnicodeDecodeError:
        if encoding == "utf-8-sig":
            raise InputError(
                file, "the file starts with a UTF-8 byte-order mark but is not valid UTF-8; "
                "save it as UTF-8",
            ) from None
        text = data.decode("latin-1")
        encoding = "latin-1"
    if "\r" in text:
        text = text.replace("\r\n", "\n").replace("\r", "\n")
    return text, encoding


def _split_lines(text: str) -> pa.Array:
    """Split text into lines (a trailing newline does not start a line)."""
    if text.endswith("\n"):
        text = text[:-1]
    whole = pa.array([text], pa.large_string())
    return pc.split_pattern(whole, "\n").flatten()


def _header_names(header: str, sep: str) -> list[str]:
    row = next(csv.reader([header], delimiter=sep, quotechar='"', strict=False), [])
    return [name.strip() for name in row]


def _complete_pattern(sep: str) -> str:
    """Regex for text made of whole fields (RFC 4180 quoting; quotes only open a field)."""
    s = re.escape(sep)
    field = rf'(?:"(?:[^"]|"")*"|[^"{s}\n][^{s}\n]*|)'
    return rf"^{field}(?:{s}{field})*$"


def _group_records(
    lines: pa.Array, blank: np.ndarray, first: int, sep: str, quoted: bool
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Group physical lines into records.

    Returns the first and last line of each record (0-based) and whether the
    record has a quote that never closes.  Only lines with a quote that does
    not close on the same line are handled one by one.
    """
    n = len(lines)
    data = lines.slice(first)
    ends = np.arange(first, n)
    malformed = np.zeros(n - first, dtype=bool)
    keep = ~blank[first:]
    quotes = (
        np.asarray(pc.count_substring(data, '"').to_numpy(zero_copy_only=False))
        if quoted else np.zeros(0)
    )
    if quotes.any():
        pattern = _complete_pattern(sep)
        complete = bool_mask(pc.match_substring_regex(data, pattern)) | (quotes == 0)
        whole = re.compile(pattern)
        parity = np.cumsum(quotes % 2) % 2
        positions = (np.flatnonzero(parity == 0), np.flatnonzero(parity == 1))
        consumed = np.zeros(n - first, dtype=bool)
        for i in np.flatnonzero(~complete):
            if consumed[i]:
                continue
            keep[i] = True
            before = int(parity[i - 1]) if i > 0 else 0
            candidates = positions[before]
            k = int(np.searchsorted(candidates, i))
            if k == len(candidates) or candidates[k] - i >= _MAX_RECORD_LINES:
                malformed[i] = True
                continue
            j = int(candidates[k])
            block = "\n".join(data.slice(i, j - i + 1).to_pylist())
            if j > i and whole.fullmatch(block):
                ends[i] = first + j
                consumed[i + 1 : j + 1] = True
                keep[i + 1 : j + 1] = False
            else:
                malformed[i] = True
        keep &= ~consumed
    index = np.flatnonzero(keep)
    return index + first, ends[index], malformed[index]


def _continuation_count(starts: np.ndarray, ends: np.ndarray, n_lines: int) -> np.ndarray:
    """Per line, how many earlier lines continued a multi-line record."""
    extra = np.zeros(n_lines + 1, dtype=np.int64)
    spans = ends - starts
    multi = spans > 0
    # a record over lines s..e makes lines after e count (e - s) fewer rows
    np.add.at(extra, ends[multi] + 1, spans[multi])
    return np.cumsum(extra)[:n_lines]


def _record_texts(lines: pa.Array, starts: np.ndarray, ends: np.ndarray) -> pa.Array:
    texts = lines.take(pa.array(starts))
    multi = np.flatnonzero(ends > starts)
    if len(multi):
        joined = [
            "\n".join(lines.slice(int(starts[i]), int(ends[i] - starts[i] + 1)).to_pylist())
            for i in multi
        ]
        mask = np.zeros(len(starts), dtype=bool)
        mask[multi] = True
        texts = pc.replace_with_mask(texts, pa.array(mask), pa.array(joined, pa.large_string()))
    return texts


def _split_fields(
    record_text: pa.Array,
    malformed: np.ndarray,
    n_columns: int,
    sep: str,
    roles: ColumnRoles,
    file: str,
    *,
    multiline: bool,
) -> tuple[dict[str, pa.Array], np.ndarray]:
    """Split records into the role columns with pyarrow's CSV parser.

    Returns the role columns (null for records that were not split) and the
    number of fields of every record (the header's count for split ones).
    """
    n = len(record_text)
    n_fields = np.full(n, n_columns, dtype=np.int64)
    usable = np.flatnonzero(~malformed)
    rejected: list[tuple[int, int]] = []

    def on_invalid(row: pacsv.InvalidRow) -> str:
        rejected.append((row.number, row.actual_columns))
        return "skip"

    column_names = [f"c{i}" for i in range(n_columns)]
    wanted = sorted(set(roles.index.values()))
    include = [column_names[i] for i in wanted]
    feed = record_text.take(pa.array(usable)) if len(usable) < n else record_text
    offsets = pa.array([0, len(feed)], pa.int64())
    joined = pc.binary_join(pa.LargeListArray.from_arrays(offsets, feed),
                            pa.scalar("\n", pa.large_string()))[0]
    try:
        parsed = pacsv.read_csv(
            pa.BufferReader(joined.as_buffer()),
            read_options=pacsv.ReadOptions(column_names=column_names, use_threads=False,
                                           block_size=1 << 24),
            parse_options=pacsv.ParseOptions(delimiter=sep, quote_char='"', double_quote=True,
                                             newlines_in_values=multiline,
                                             ignore_empty_lines=False,
                                             invalid_row_handler=on_invalid),
            convert_options=pacsv.ConvertOptions(
                column_types={c: pa.large_string() for c in include},
                include_columns=include, strings_can_be_null=False,
                quoted_strings_can_be_null=False),
        )
    except (pa.ArrowInvalid, OSError) as exc:
        raise InputError(file, f"cannot split the records into fields: {exc}") from exc
    split_ok = np.ones(len(usable), dtype=bool)
    for number, actual in rejected:
        split_ok[number - 1] = False
        n_fields[usable[number - 1]] = actual
    n_fields[malformed] = -1
    rows = usable[split_ok]
    if len(rows) != parsed.num_rows:
        raise InputError(file, "cannot split the records into fields consistently")
    # scatter the split rows back to record positions (null elsewhere)
    take = None
    if len(rows) < n:
        where = np.full(n, -1, dtype=np.int64)
        where[rows] = np.arange(len(rows))
        take = pa.array(where, mask=where < 0)
    fields = {}
    for role, position in roles.index.items():
        column = parsed.column(column_names[position]).combine_chunks()
        fields[role] = column if take is None else column.take(take)
    return fields, n_fields


def _build_table(
    file: str,
    config: ReadConfig,
    path: str | Path,
    roles: ColumnRoles,
    fields: dict[str, pa.Array],
    good: np.ndarray,
    row_errors: np.ndarray,
    source_row: np.ndarray,
    record_text: pa.Array,
    *,
    decimal_comma: bool,
) -> pd.DataFrame:
    n = len(good)
    time_name = roles.name("time")
    if roles.has("date"):
        times = parse_date_and_time(fields["date"], fields["time"], roles.name("date"), time_name)
    else:
        times = parse_time_text(fields["time"], time_name, decimal_comma=decimal_comma)
    time_error = np.where(good, times.errors, "")
    refuse_unreadable_column(file, times.parsed & good, time_error, source_row, fields, roles,
                        TIME_EXPECTED)

    numbers = {}
    for role in ("lat", "lon"):
        name = roles.name(role)
        parsed = parse_numbers(fields[role], name, decimal_comma=decimal_comma)
        refuse_unreadable_column(file, parsed.parsed & good, np.where(good, parsed.errors, ""),
                            source_row, fields, roles, "decimal degrees like 45.25")
        numbers[role] = parsed

    if roles.has("id"):
        ids, id_errors = drifter_ids(fields["id"], roles.name("id"))
    else:
        ids = np.full(n, default_drifter_id(path, config), dtype=object)
        id_errors = np.full(n, "", dtype=object)
    id_errors = np.where(good, id_errors, "")

    errors = join_errors(
        row_errors, id_errors, time_error,
        np.where(good, numbers["lat"].errors, ""), np.where(good, numbers["lon"].errors, ""),
    )
    lat = np.where(good, numbers["lat"].values, np.nan)
    lon = np.where(good, numbers["lon"].values, np.nan)
    has_error = errors != ""
    check_lon_convention(lon, ids, source_row, file, roles.name("lon"))

    raw = np.full(n, "", dtype=object)
    flagged = np.flatnonzero(has_error)
    if len(flagged):
        raw[flagged] = record_text.take(pa.array(flagged)).to_pylist()
    time = times.time.where(good)
    return make_fixes(
        drifter_id=ids,
        time=time,
        lat=lat,
        lon=lon,
        source_file=file,
        source_row=source_row,
        time_assumed_utc=times.assumed_utc & good,
        raw=raw,
        parse_error=errors,
    )
