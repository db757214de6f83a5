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

Large files
-----------
The file is read twice, block by block (:data:`BLOCK_BYTES` at a time): once
to refuse what is not text and to settle the encoding, once to parse.  A
block ends at a line end; a record whose quoted field goes on past the
block is read again with the next one.  The checks that concern the whole
file (below) are gathered block by block and made at the end, so a file is
refused or read exactly as if it were read at once, and the memory needed
is that of the table of fixes plus one block.

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
    default_drifter_id,
    drifter_ids,
    infer_columns,
    join_errors,
    parse_numbers,
)
from driftloop.io.schema import make_fixes
from driftloop.io.timeparse import (
    TIME_EXPECTED,
    bool_mask,
    parse_date_and_time,
    parse_time_text,
    quote_value,
)

__all__ = ["BLOCK_BYTES", "read_delimited", "sniff_separator"]

BLOCK_BYTES = 1 << 24
"""Bytes of the file read and parsed at a time (16 MiB): memory does not grow
with the file beyond the table of fixes itself."""

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
    encoding, has_cr = _inspect(path, file)
    sep_hint = _separator_from_config(config.separator)
    space = r"[^\S\t]" if sep_hint == "\t" else r"\s"
    checks = _FileChecks()
    tables: list[pd.DataFrame] = []
    line_offset = 0  # lines before the current block (0-based line of its first line)
    continued = 0  # lines before the current block that continued a record
    carry = ""  # lines of a record that the previous block ended inside
    header = None  # (names, roles, sep, 1-based line of the header)
    blocks = _text_blocks(path, file, encoding, has_cr, BLOCK_BYTES)
    for text, final in blocks:
        text = carry + text
        carry = ""
        lines = _split_lines(text)
        first = 0
        if header is None:
            blank = bool_mask(pc.match_substring_regex(lines, rf"^{space}*$"))
            nonblank = np.flatnonzero(~blank)
            if len(nonblank) == 0:
                line_offset += len(lines)
                continue
            header_at = int(nonblank[0])
            header_text = lines[header_at].as_py()
            sep = sep_hint or sniff_separator(header_text)
            names = _header_names(header_text, sep)
            roles = infer_columns(names, config, file)
            header = (names, roles, sep, line_offset + header_at + 1)
            first = header_at + 1
        names, roles, sep, _ = header
        space_re = r"^[^\S\t]*$" if sep == "\t" else rf"^{space}*$"
        blank = bool_mask(pc.match_substring_regex(lines, space_re))
        starts, ends, malformed, carry_from = _group_records(
            lines, blank, first, sep, '"' in text, final=final
        )
        n_lines = len(lines) if carry_from is None else carry_from
        if carry_from is not None:
            carry = "\n".join(lines.slice(carry_from).to_pylist()) + "\n"
        del text
        if len(starts):
            consumed_before = _continuation_count(starts, ends, n_lines)
            source_row = line_offset + starts + 1 - continued - consumed_before[starts]
            tables.append(_read_block(file, config, path, names, roles, sep, lines, starts, ends,
                                      malformed, source_row, checks))
            continued += int((ends - starts).sum())
        line_offset += n_lines
    if header is None:
        raise InputError(file, "file is empty (only blank lines)")
    names, roles, sep, header_row = header
    checks.raise_problems(file, names, roles, sep, header_row)
    table = pd.concat(tables, ignore_index=True) if len(tables) > 1 else tables[0]
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
            f"key 'read.separator' must be one character (',', ';' or 'tab'), got {separator!r}"
        )
    return value


def _sep_word(sep: str) -> str:
    return "tab" if sep == "\t" else repr(sep)


def _count_words(counts: np.ndarray) -> str:
    values = sorted({int(c) for c in counts})
    shown = ", ".join(str(v) for v in values[:5])
    return f"{shown} field{'s' if values != [1] else ''}"


def _inspect(path: str | Path, file: str) -> tuple[str, bool]:
    """Read the file once, in blocks, and refuse what is not text.

    Returns the encoding (``utf-8``, ``utf-8-sig`` or ``latin-1``: the whole
    file must be valid UTF-8 to be read as UTF-8) and whether it holds a
    carriage return.  Memory stays at one block whatever the file's size.
    """
    encoding = "utf-8"
    decoder = codecs.getincrementaldecoder("utf-8")()
    valid = True
    has_cr = False
    has_text = False
    newlines = 0
    try:
        with open(path, "rb") as handle:
            head = handle.read(max(BLOCK_BYTES, 4096))
            if head.startswith((codecs.BOM_UTF16_LE, codecs.BOM_UTF16_BE)):
                raise InputError(
                    file, "not a text file driftloop reads: it is UTF-16; save it as UTF-8"
                )
            for magic, what in _MAGIC:
                if head.startswith(magic):
                    raise InputError(file, f"not a text file: it looks like {what}")
            if head.startswith(codecs.BOM_UTF8):
                encoding = "utf-8-sig"
                head = head[len(codecs.BOM_UTF8):]
            data = head or handle.read(BLOCK_BYTES)
            while data:
                if b"\x00" in data:
                    raise InputError(
                        file, "not a text file (it contains NUL bytes); expected CSV or TSV text"
                    )
                if len(data.translate(None, _CONTROL_BYTES)) != len(data):
                    bad = _CONTROL.search(data)
                    line = newlines + data.count(b"\n", 0, bad.start()) + 1
                    raise InputError(
                        file,
                        f"not a text file: control byte 0x{bad.group()[0]:02x} on line {line}; "
                        f"expected CSV or TSV text",
                    )
                newlines += data.count(b"\n")
                has_cr = has_cr or b"\r" in data
                has_text = has_text or bool(data.strip())
                if valid:
                    try:
                        decoder.decode(data)
                    except UnicodeDecodeError:
                        valid = False
                data = handle.read(BLOCK_BYTES)
    except OSError as exc:
        raise InputError(file, f"cannot read the file: {exc.strerror or exc}") from exc
    if not has_text:
        raise InputError(file, "file is empty")
    if valid:
        try:
            decoder.decode(b"", final=True)
        except UnicodeDecodeError:
            valid = False
    if not valid:
        if encoding == "utf-8-sig":
            raise InputError(
                file, "the file starts with a UTF-8 byte-order mark but is not valid UTF-8; "
                "save it as UTF-8",
            )
        encoding = "latin-1"
    return encoding, has_cr


def _text_blocks(
    path: str | Path, file: str, encoding: str, has_cr: bool, size: int
):
    """Yield ``(text, final)``: the decoded file in blocks that end at a line end.

    Line ends CR LF and CR become LF; a CR LF pair is never split between
    two blocks.
    """
    codec = "latin-1" if encoding == "latin-1" else "utf-8"
    rest = b""
    try:
        with open(path, "rb") as handle:
            if encoding == "utf-8-sig":
                handle.read(len(codecs.BOM_UTF8))
            while True:
                data = handle.read(size)
                final = not data
                data = rest + data
                if not final:
                    # cut after the last line end that is not the block's last byte, so that
                    # the byte after a \r is known (\r\n stays together)
                    cut = max(data.rfind(b"\n", 0, len(data) - 1),
                              data.rfind(b"\r", 0, len(data) - 1))
                    if cut < 0:
                        rest = data
                        continue
                    if data[cut : cut + 2] == b"\r\n":
                        cut += 1
                    data, rest = data[: cut + 1], data[cut + 1 :]
                text = data.decode(codec)
                del data
                if has_cr:
                    text = text.replace("\r\n", "\n").replace("\r", "\n")
                if text or final:
                    yield text, final
                if final:
                    return
    except OSError as exc:
        raise InputError(file, f"cannot read the file: {exc.strerror or exc}") from exc


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
    lines: pa.Array, blank: np.ndarray, first: int, sep: str, quoted: bool, *,
    final: bool = True,
) -> tuple[np.ndarray, np.ndarray, np.ndarray, int | None]:
    """Group physical lines into records.

    Returns the first and last line of each record (0-based), whether the
    record has a quote that never closes, and the line from which the lines
    belong to a record that goes on past the end of ``lines`` (None when
    ``final`` or when no record does; those lines are read again with the
    next block).  Lines that are whole fields on their own (the usual case)
    are found with one vectorised regex; only a line whose quoted field runs
    past its end is scanned, character by character, to find the line where
    that field closes.
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
        consumed = np.zeros(n - first, dtype=bool)
        for i in np.flatnonzero(~complete):
            if consumed[i]:
                continue
            keep[i] = True
            j = _record_end(data, int(i), sep)
            if j == _RUNS_ON and not final:
                keep[i:] = False
                index = np.flatnonzero(keep & ~consumed)
                return index + first, ends[index], malformed[index], first + int(i)
            if j is None or j == _RUNS_ON:
                malformed[i] = True
            elif j > i:
                ends[i] = first + j
                consumed[i + 1 : j + 1] = True
                keep[i + 1 : j + 1] = False
            else:
                malformed[i] = True
        keep &= ~consumed
    index = np.flatnonzero(keep)
    return index + first, ends[index], malformed[index], None


_RUNS_ON = -1  # the record's quoted field is still open at the last line given


def _record_end(data: pa.Array, i: int, sep: str) -> int | None:
    """Return the last line of the record that starts on line ``i``, or None.

    RFC 4180 fields: a field that starts with ``"`` is quoted, may hold the
    separator and line breaks, ``""`` inside it is one quote, and it must be
    followed by the separator or the end of the record; in a field that does
    not start with ``"``, a quote is an ordinary character.  None means the
    record is malformed: a quoted field that does not close within
    ``_MAX_RECORD_LINES`` lines, or text after a closing quote;
    ``_RUNS_ON`` that the field is still open at the last line of ``data``.
    """
    in_quotes = False
    j = i
    while j < len(data) and j - i < _MAX_RECORD_LINES:
        line = data[j].as_py() or ""
        k, size = 0, len(line)
        while True:
            if in_quotes:
                q = line.find('"', k)
                if q < 0:
                    break  # the quoted field goes on over the line break
                if line.startswith('""', q):
                    k = q + 2
                    continue
                in_quotes, k = False, q + 1
                if k == size:
                    return j
                if line[k] != sep:
                    return None
                k += 1
            elif k < size and line[k] == '"':
                in_quotes, k = True, k + 1
            else:
                s = line.find(sep, k)
                if s < 0:
                    return j
                k = s + 1
        j += 1
    return _RUNS_ON if j == len(data) and j - i < _MAX_RECORD_LINES else None


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

    if len(usable) == 0:
        n_fields[:] = -1
        return {role: pa.nulls(n, pa.large_string()) for role in roles.index}, n_fields
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


def _read_block(
    file: str,
    config: ReadConfig,
    path: str | Path,
    names: list[str],
    roles: ColumnRoles,
    sep: str,
    lines: pa.Array,
    starts: np.ndarray,
    ends: np.ndarray,
    malformed: np.ndarray,
    source_row: np.ndarray,
    checks: _FileChecks,
) -> pd.DataFrame:
    """Read the records of one block; note what the file-level checks need."""
    record_text = _record_texts(lines, starts, ends)
    fields, n_fields = _split_fields(
        record_text, malformed, len(names), sep, roles, file, multiline=bool((ends > starts).any())
    )
    good = n_fields == len(names)
    checks.records(source_row, malformed, good, n_fields)
    row_errors = np.full(len(starts), "", dtype=object)
    for i in np.flatnonzero(~good):
        row_errors[i] = (
            "quotes are not balanced (a quoted field never ends)"
            if malformed[i]
            else f"row has {n_fields[i]} field{'' if n_fields[i] == 1 else 's'}, "
            f"header has {len(names)}"
        )
    decimal_comma = sep == ";"
    n = len(good)
    time_name = roles.name("time")
    if roles.has("date"):
        times = parse_date_and_time(fields["date"], fields["time"], roles.name("date"), time_name)
    else:
        times = parse_time_text(fields["time"], time_name, decimal_comma=decimal_comma)
    time_error = np.where(good, times.errors, "")
    checks.column("time", times.parsed & good, time_error, source_row, fields, roles)

    numbers = {}
    for role in ("lat", "lon"):
        name = roles.name(role)
        parsed = parse_numbers(fields[role], name, decimal_comma=decimal_comma)
        checks.column(role, parsed.parsed & good, np.where(good, parsed.errors, ""), source_row,
                      fields, roles)
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
    # a row without a drifter id belongs to no drifter's longitude convention
    checks.longitudes(np.where(id_errors == "", lon, np.nan), ids, source_row)

    raw = np.full(n, "", dtype=object)
    flagged = np.flatnonzero(errors != "")
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


class _FileChecks:
    """What the file-level refusals need to know, gathered block by block.

    A file is refused when it has no data record, when no record's quotes
    close, when no record has the header's number of fields, when a time,
    lat or lon column holds values but none can be read, and when a drifter
    mixes the 0..360 and -180..180 longitude conventions.  These depend on
    the whole file, so each block adds what it saw and :meth:`raise_problems`
    decides at the end, in that order.
    """

    _EXPECTED = {"time": TIME_EXPECTED, "lat": "decimal degrees like 45.25",
                 "lon": "decimal degrees like 45.25"}

    def __init__(self) -> None:
        self.n_records = 0
        self.first_row: int | None = None
        self.any_closed = False
        self.any_good = False
        self.field_counts: set[int] = set()
        self.parsed = {"time": False, "lat": False, "lon": False}
        self.first_bad: dict[str, tuple[int, str, object]] = {}
        # drifter id -> [(row, lon) of the first 0..360 value, (row, lon) of the first negative]
        self.conventions: dict[str, list[tuple[int, float] | None]] = {}

    def records(self, source_row: np.ndarray, malformed: np.ndarray, good: np.ndarray,
                n_fields: np.ndarray) -> None:
        """Note a block's records."""
        if self.first_row is None and len(source_row):
            self.first_row = int(source_row[0])
        self.n_records += len(source_row)
        self.any_closed |= bool((~malformed).any())
        self.any_good |= bool(good.any())
        if not self.any_good:
            self.field_counts |= {int(c) for c in np.unique(n_fields[n_fields >= 0])}

    def column(self, role: str, parsed: np.ndarray, errors: np.ndarray, source_row: np.ndarray,
               values: dict[str, pa.Array], roles: ColumnRoles) -> None:
        """Note whether a block read any value of a column, and its first failure."""
        self.parsed[role] |= bool(parsed.any())
        if self.parsed[role] or role in self.first_bad:
            return
        bad = np.flatnonzero(errors != "")
        if len(bad) == 0:
            return
        first = int(bad[0])
        blamed = str(errors[first]).split(": ", 1)[0]
        culprit = next((r for r in roles.index if roles.name(r) == blamed), "time")
        value = values[culprit][first]
        if isinstance(value, pa.Scalar):
            value = value.as_py()
        self.first_bad[role] = (int(source_row[first]), roles.name(culprit), value)

    def longitudes(self, lon: np.ndarray, ids: np.ndarray, source_row: np.ndarray) -> None:
        """Note the first longitude of each convention per drifter."""
        with np.errstate(invalid="ignore"):
            east = (lon > 180.0) & (lon <= 360.0)
            west = (lon < 0.0) & (lon >= -180.0)
        if not (east.any() or west.any()):
            return
        codes, uniques = pd.factorize(pd.Series(ids, dtype=object))
        for kind, mask in ((0, east), (1, west)):
            rows = np.flatnonzero(mask)
            if len(rows) == 0:
                continue
            # first row of each drifter among these
            seen, at = np.unique(codes[rows], return_index=True)
            for code, k in zip(seen, at, strict=True):
                entry = self.conventions.setdefault(str(uniques[code]), [None, None])
                if entry[kind] is None:
                    entry[kind] = (int(source_row[rows[k]]), float(lon[rows[k]]))

    def raise_problems(self, file: str, names: list[str], roles: ColumnRoles, sep: str,
                       header_row: int) -> None:
        """Raise the first file-level problem, if any.

        Raises
        ------
        InputError
            Naming the file, the row and the column where there is one.
        """
        if self.n_records == 0:
            raise InputError(file, "no data rows after the header", row=header_row)
        if not self.any_closed:
            raise InputError(
                file,
                "no data row can be read: the quoted field that starts in this row never ends; "
                'expected RFC 4180 quoting (a field that starts with " ends with ")',
                row=self.first_row,
            )
        if not self.any_good:
            found = np.asarray(sorted(self.field_counts), dtype=np.int64)
            seen = f"; the rows have {_count_words(found)}" if len(found) else ""
            raise InputError(
                file,
                f"no data row has the header's {len(names)} fields{seen}; is the separator "
                f"{_sep_word(sep)} right? set it with --separator",
                row=self.first_row,
            )
        for role in ("time", "lat", "lon"):
            if not self.parsed[role] and role in self.first_bad:
                row, column, value = self.first_bad[role]
                noun = "a number" if role in ("lat", "lon") else "a time"
                raise InputError(
                    file,
                    f"no value in this column is {noun}; expected {self._EXPECTED[role]}, "
                    f"got {quote_value(value)}",
                    row=row,
                    column=column,
                )
        conflicts = [(d, e, w) for d, (e, w) in self.conventions.items()
                     if e is not None and w is not None]
        if conflicts:
            drifter, east, west = conflicts[0]
            later, earlier = (west, east) if west[0] > east[0] else (east, west)
            raise InputError(
                file,
                f"longitudes of drifter {drifter!r} mix the 0..360 and -180..180 "
                f"conventions: {later[1]:g} here but {earlier[1]:g} in row {earlier[0]}; "
                f"use one convention per drifter",
                row=later[0],
                column=roles.name("lon"),
            )
