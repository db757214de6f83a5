"""Generated track files and the invariants every run on them must keep.

Shared by the property-based tests (``tests/test_properties.py``) and the
long campaign (``scripts/fuzz_campaign.py``), so that both draw inputs the
same way and check the same things.

Each strategy draws an :class:`InputFile`: the bytes (or a writer) of one
track file together with what an independent reading of it says, namely how
many records it holds and, per record, where it is (``source_row``) and
what the reader must make of it:

``"ok"``
    every value can be read; the expected drifter id, time (ns since the
    epoch, UTC) and position are known and must come out unchanged;
``"missing"``
    a time, lat or lon is absent: QC flag 9, reason ``missing_value``;
``"bad"``
    something is present but cannot be read (or the row is ragged, or has
    no drifter id): reason ``unparseable``, flag 4, raw text kept.

:func:`check_case` runs the command line on a drawn :class:`Case` and
returns every broken invariant as a sentence (an empty list when all hold).
"""

from __future__ import annotations

import contextlib
import csv
import io
import json
import math
import os
import warnings
from collections.abc import Callable
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
from hypothesis import strategies as st

__all__ = [
    "Case",
    "Expected",
    "InputFile",
    "cases",
    "check_case",
    "csv_files",
    "gpx_files",
    "long_csv",
    "netcdf_files",
    "parquet_files",
    "read_fixes_csv",
    "run_cli",
]

OUTPUTS = ("fixes.csv", "fixes.csv-metadata.json", "summary.json", "provenance.json")
#: Keys of ``provenance.json`` that hold the clock of the run (the only ones that may differ).
RUN_CLOCK = ("written_utc", "run_seconds", "stage_seconds")

# --------------------------------------------------------------------------- model


@dataclass(frozen=True)
class Expected:
    """What one generated record must become.

    Attributes
    ----------
    kind : str
        ``"ok"``, ``"missing"`` or ``"bad"`` (see the module notes).
    drifter_id : str or None
        Expected id for ``"ok"`` records.
    time_ns : int or None
        Expected UTC time, ns since 1970-01-01, for ``"ok"`` records.
    lat, lon : float or None
        Expected position (lon wrapped into [-180, 180)) for ``"ok"`` records.
    """

    kind: str
    drifter_id: str | None = None
    time_ns: int | None = None
    lat: float | None = None
    lon: float | None = None


@dataclass
class InputFile:
    """One generated track file.

    Attributes
    ----------
    name : str
        File name (with suffix).
    records : int
        Number of records in the file, counted independently of driftloop.
    rows : dict
        ``source_row`` to :class:`Expected`, for every record whose place
        and outcome are known (all of them, for these generators).
    content : bytes or None
        The file's bytes, or None when ``writer`` makes the file.
    writer : callable or None
        ``writer(path)`` writes a binary format (NetCDF, Parquet).
    note : str
        A short description of how the file was drawn (for failure reports).
    sampled : bool
        ``rows`` holds only a sample of the records (long files); the
        others are still counted.
    must_read : bool
        Nothing in the file gives a reason to refuse it (GPX and NetCDF
        files as drawn here: one longitude convention, at least one point),
        so a refusal naming it is a failure.
    """

    name: str
    records: int
    rows: dict[int, Expected]
    content: bytes | None = None
    writer: Callable[[Path], None] | None = None
    note: str = ""
    sampled: bool = False
    must_read: bool = False

    def write(self, folder: Path) -> Path:
        """Write the file into ``folder`` and return its path."""
        path = Path(folder) / self.name
        if self.content is not None:
            path.write_bytes(self.content)
        else:
            self.writer(path)
        return path


@dataclass
class Case:
    """One command-line run: input files and options.

    Attributes
    ----------
    files : list of InputFile
        The inputs (names unique).
    options : list of str
        Options after the inputs, e.g. ``["--no-land-test"]``.
    command : str
        ``"qc"`` or ``"analyse"``.
    """

    files: list[InputFile]
    options: list[str] = field(default_factory=list)
    command: str = "qc"

    @property
    def records(self) -> int:
        """Total number of generated records."""
        return sum(f.records for f in self.files)

    def describe(self) -> str:
        """One line per file: name, records, how it was drawn; then the options."""
        lines = [f"{f.name}: {f.records} records; {f.note}" for f in self.files]
        return "\n".join([*lines, f"driftloop {self.command} ... {' '.join(self.options)}"])


# --------------------------------------------------------------------------- values

_T_MIN = 631152000  # 1990-01-01T00:00:00Z
_T_MAX = 2840140800  # 2060-01-01T00:00:00Z
_MISSING = ["", "NA", "NaN", "nan", "null", "NULL", "None", "NaT", "N/A", "-", "  "]
_BAD_TIMES = [
    "yesterday noon", "05/03/2024", "2026-13-45T00:00:00Z", "2026-03-01T24:00:00Z",
    "3000-01-01T00:00:00Z", "1600-06-01T00:00:00Z", "99", "1e12", "2026-03-01Tnoon",
    "\u00e9t\u00e9",
]
_BAD_NUMBERS = ["abc", "inf", "-inf", "45\u00b030'N", "0x10", "1_000", "12.5.3", "N45", "+-3"]

_ID_SPELLINGS = ["drifter", "Drifter ID", "buoy_id", "platform_code", "WMO", "imei", "id"]
_TIME_SPELLINGS = ["time", "Time (UTC)", "timestamp", "obs_time_utc", "DATETIME", "gps_time"]
_LAT_SPELLINGS = ["lat", "Latitude", "LAT_DEG_N", "latitude (deg N)", "gps_lat"]
_LON_SPELLINGS = ["lon", "Longitude", "lng", "long", "lon [degrees_east]"]
_UNKNOWN = {"id": "unit_tag", "time": "t_obs_x", "lat": "y_pos", "lon": "x_pos"}


def _iso(seconds: int, style: str) -> tuple[str, int]:
    """Format epoch seconds; return the text and the UTC ns it stands for."""
    ns = seconds * 1_000_000_000
    t = np.datetime64(seconds, "s")
    base = str(t)  # YYYY-MM-DDTHH:MM:SS
    if style == "z":
        return base + "Z", ns
    if style == "space":
        return base.replace("T", " "), ns
    if style == "slash":
        return base.replace("-", "/").replace("T", " "), ns
    if style == "utc":
        return base.replace("T", " ") + " UTC", ns
    if style == "frac":
        return base + ".250Z", ns + 250_000_000
    if style == "lower":
        return base.lower() + "z", ns
    if style == "epoch":
        return str(seconds), ns
    if style == "epoch_frac":
        return f"{seconds}.5", ns + 500_000_000
    if style.startswith("offset"):
        minutes = {"offset+": 120, "offset-": -330, "offset_compact": 545}[style]
        local = str(np.datetime64(seconds + minutes * 60, "s"))
        sign = "+" if minutes >= 0 else "-"
        hh, mm = divmod(abs(minutes), 60)
        colon = "" if style == "offset_compact" else ":"
        zone = f"{sign}{hh:02d}{colon}{mm:02d}"
        return local + zone, ns
    raise ValueError(style)


_TIME_STYLES = ["z", "z", "z", "space", "slash", "utc", "frac", "lower", "offset+", "offset-",
                "offset_compact", "epoch", "epoch_frac"]
_TIME_STYLES_EPOCH_OK = {"epoch", "epoch_frac"}
_EPOCH_MIN, _EPOCH_MAX = 100_000_000, 4_000_000_000


def _number_text(value: float, style: str, decimal_comma: bool) -> str:
    if style == "repr":
        text = repr(float(value))
    elif style == "fixed":
        text = f"{value:.6f}"
    elif style == "exp":
        text = f"{value:.8e}"
    else:
        text = f" {value!r} "
    if decimal_comma and "e" not in text and "." in text:
        text = text.replace(".", ",")
    return text


def _wrap(lon: float) -> float:
    return float(np.where((lon >= 180.0) & (lon <= 360.0), lon - 360.0, lon))


def _number_back(text: str) -> float:
    return float(text.strip().replace(",", "."))


_EXTREME_LAT = [90.0, -90.0, 0.0, -0.0, 89.999999, 95.0, -1000.0, 1e3]
_EXTREME_LON = [180.0, -180.0, 360.0, 0.0, 179.999999, 359.999999, 500.0, -500.0]


@st.composite
def _positions(draw, n: int, convention: str) -> list[tuple[float, float]]:
    """A track of ``n`` positions: a slow drift with occasional extremes.

    ``convention`` is ``"signed"`` (longitudes in [-180, 180)) or ``"east"``
    (0..360); one drifter never mixes them, except through the extreme
    values 500 and -500, which belong to neither.
    """
    lat0 = draw(st.floats(-80.0, 80.0, allow_nan=False))
    lon0 = draw(st.floats(-179.0, 359.0, allow_nan=False))
    step = draw(st.sampled_from([0.0, 1e-4, 1e-3, 0.05, 2.0]))
    extremes = [180.0, 0.0, 500.0, -500.0] + (
        [360.0, 359.999999] if convention == "east" else [-180.0, 179.999999])
    out = []
    for k in range(n):
        lat = lat0 + step * k * 0.7
        lon = lon0 + step * k
        lon = lon % 360.0 if convention == "east" else ((lon + 180.0) % 360.0) - 180.0
        if draw(st.integers(0, 15)) == 0:
            lat = draw(st.sampled_from(_EXTREME_LAT))
        if draw(st.integers(0, 15)) == 0:
            lon = draw(st.sampled_from(extremes))
        out.append((round(lat, 6), round(lon, 6)))
    return out


@st.composite
def _times(draw, n: int, epoch_ok: bool) -> list[int]:
    """Epoch seconds of ``n`` fixes: regular sampling, jumps, repeats, reversals."""
    lo, hi = (_EPOCH_MIN, _EPOCH_MAX) if epoch_ok else (_T_MIN, _T_MAX)
    lo, hi = max(lo, _T_MIN), min(hi, _T_MAX)
    start = draw(st.integers(lo, hi - 10 * 365 * 86400))
    mode = draw(st.sampled_from(["regular", "regular", "jumps", "one_instant", "random"]))
    base = draw(st.sampled_from([60, 600, 3600, 10800]))
    out, t = [], start
    for _ in range(n):
        out.append(t)
        if mode == "regular":
            t += base
        elif mode == "one_instant":
            pass
        elif mode == "jumps":
            t += draw(st.sampled_from([base, base, base, 0, -base, 7 * 86400, 400 * 86400]))
        else:
            t += draw(st.integers(-3600, 86400))
        t = min(max(t, lo), hi)
    return out


# --------------------------------------------------------------------------- delimited text


def _needs_quotes(value: str, sep: str) -> bool:
    return any(c in value for c in (sep, "\n", "\r")) or value.startswith('"')


def _field(value: str, sep: str, quote_all: bool) -> str:
    if quote_all or _needs_quotes(value, sep):
        return '"' + value.replace('"', '""') + '"'
    return value


@st.composite
def csv_files(draw, name: str | None = None, *, separator: str | None = None,
              mapping: dict[str, str] | None = None, drifter_id: str | None = None,
              max_records: int = 40) -> InputFile:
    """Draw a delimited track file (CSV, TSV or semicolon).

    Parameters
    ----------
    name : str, optional
        File name; drawn when not given.
    separator : str, optional
        Use this separator (the run passes ``--separator``); drawn otherwise.
    mapping : dict, optional
        Role to column name, when the run maps columns with ``--columns``;
        roles in it get the given (unknown) names.
    drifter_id : str, optional
        The run's ``--drifter-id``, used when the file has no id column.
    max_records : int
        Largest number of data records.

    Returns
    -------
    InputFile
        The file and what each record must become.
    """
    encoding = draw(st.sampled_from(["utf-8", "utf-8", "utf-8-sig", "latin-1"]))
    sep = separator or draw(st.sampled_from([",", ",", ";", "\t"]))
    suffix = {",": ".csv", ";": ".csv", "\t": draw(st.sampled_from([".tsv", ".tab", ".txt"]))}[sep]
    stem = name or draw(st.sampled_from(["buoys", "LANTERN-07", "Bou\u00e9e 7", "svp.2026", "t"]))
    if not stem.endswith(suffix):
        stem = stem + suffix
    mapping = mapping or {}
    has_id = "id" in mapping or draw(st.booleans()) or draw(st.booleans())
    names = {
        "id": mapping.get("id") or draw(st.sampled_from(_ID_SPELLINGS)),
        "time": mapping.get("time") or draw(st.sampled_from(_TIME_SPELLINGS)),
        "lat": mapping.get("lat") or draw(st.sampled_from(_LAT_SPELLINGS)),
        "lon": mapping.get("lon") or draw(st.sampled_from(_LON_SPELLINGS)),
    }
    roles = (["id"] if has_id else []) + ["time", "lat", "lon"]
    extras = draw(st.lists(st.sampled_from(
        ["sst", "battery_v", "Notes", "quality", "extra_\u00e9", "extra \u6f02\u6d41"]),
        max_size=3, unique=True))
    if encoding == "latin-1":
        extras = [e for e in extras if e.encode("latin-1", "ignore").decode("latin-1") == e]
        if "extra_\u00e9" not in extras:
            extras.append("extra_\u00e9")  # makes the bytes invalid UTF-8
    columns = roles + extras
    draw_perm = draw(st.permutations(list(range(len(columns)))))
    columns = [columns[i] for i in draw_perm]
    header_names = [names[c] if c in names else c for c in columns]
    quote_all = draw(st.booleans()) and draw(st.booleans())
    decimal_comma = sep == ";" and draw(st.booleans())
    epoch_ok = True
    style_pool = draw(st.lists(st.sampled_from(_TIME_STYLES), min_size=1, max_size=3))
    number_style = draw(st.sampled_from(["repr", "fixed", "exp", "spaced"]))
    fallback_id = drifter_id or Path(stem).stem

    # drifters and their records
    n_drifters = draw(st.integers(1, 3)) if has_id else 1
    id_pool = ["D1", "A-7", "007", "Bou\u00e9e", " svp 9 ", "\u6f02\u6d41-3"]
    if encoding == "latin-1":
        id_pool = [i for i in id_pool if all(ord(c) < 256 for c in i)]
    ids = draw(st.lists(st.sampled_from(id_pool), min_size=n_drifters, max_size=n_drifters,
                        unique=True))
    records: list[tuple[dict, Expected]] = []
    for drifter in ids:
        n = draw(st.integers(1, max(1, max_records // n_drifters)))
        convention = draw(st.sampled_from(["signed", "signed", "east"]))
        pos = draw(_positions(n, convention))
        times = draw(_times(n, epoch_ok))
        for (lat, lon), t in zip(pos, times, strict=True):
            cells, kind = {}, "ok"
            style = draw(st.sampled_from(style_pool))
            t_text, t_ns = _iso(t, style)
            lat_text = _number_text(lat, number_style, decimal_comma)
            lon_text = _number_text(lon, number_style, decimal_comma)
            id_text = drifter
            damage = draw(st.integers(0, 9))
            if damage == 1:
                which = draw(st.sampled_from(["time", "lat", "lon"]))
                cells_missing = draw(st.sampled_from(_MISSING))
                if which == "time":
                    t_text = cells_missing
                elif which == "lat":
                    lat_text = cells_missing
                else:
                    lon_text = cells_missing
                kind = "missing"
            elif damage == 2:
                which = draw(st.sampled_from(["time", "lat", "lon"] + (["id"] if has_id else [])))
                if which == "time":
                    t_text = draw(st.sampled_from(_BAD_TIMES))
                elif which == "id":
                    id_text = draw(st.sampled_from(["", "NA", "  "]))
                else:
                    bad = draw(st.sampled_from(_BAD_NUMBERS))
                    if which == "lat":
                        lat_text = bad
                    else:
                        lon_text = bad
                kind = "bad"
            cells = {"id": id_text, "time": t_text, "lat": lat_text, "lon": lon_text}
            for extra in extras:
                cells[extra] = draw(st.sampled_from(
                    ["", "12.5", "ok", "a,b;c\td", 'say "hi"', "two\nlines", "45\u00b030'10\"N",
                     "\u00e9t\u00e9"]))
            if encoding == "latin-1":
                cells = {k: "".join(c if ord(c) < 256 else "?" for c in v)
                         for k, v in cells.items()}
            if kind == "ok":
                expect = Expected("ok", drifter.strip() if has_id else fallback_id, t_ns,
                                  _number_back(lat_text), _wrap(_number_back(lon_text)))
            else:
                expect = Expected(kind)
            records.append((cells, expect))
    # duplicated and shuffled rows
    if records and draw(st.booleans()):
        picks = draw(st.lists(st.integers(0, len(records) - 1), max_size=5))
        records += [records[i] for i in picks]
    if draw(st.booleans()):
        order = draw(st.permutations(list(range(len(records)))))
        records = [records[i] for i in order]
    records = records[:max(1, max_records)]

    # lay out lines
    eol = draw(st.sampled_from(["\n", "\n", "\r\n", "\r"]))
    lines: list[str] = []
    lead_blank = draw(st.sampled_from([0, 0, 0, 1, 2]))
    lines += [draw(st.sampled_from(["", "   "])) for _ in range(lead_blank)]
    lines.append(sep.join(_field(h, sep, quote_all) for h in header_names))
    rows: dict[int, Expected] = {}
    physical = len(lines)  # lines so far
    continuation = 0  # physical lines that continued a record
    texts = []
    for k, (cells, expect) in enumerate(records):
        if draw(st.integers(0, 12)) == 0:
            lines.append(draw(st.sampled_from(["", "  "])))
            physical += 1
        values = [cells[c] for c in columns]
        if draw(st.integers(0, 14)) == 0 and len(values) > 1:
            # ragged: drop or add a field (never a blank line)
            values = values[:-1] if draw(st.booleans()) else [*values, "surplus"]
            expect = Expected("bad")
        text = sep.join(_field(v, sep, quote_all) for v in values)
        if (k == len(records) - 1 and "\n" not in text and text.count('"') % 2 == 0
                and draw(st.integers(0, 10)) == 0):
            text = text + sep + '"never closed'
            expect = Expected("bad")
        start = physical + 1  # 1-based line of the record's first line
        rows[start - continuation] = expect
        span = text.count("\n")
        physical += 1 + span
        continuation += span
        texts.append(text)
        lines.append(text)
    trailing = draw(st.sampled_from([eol, eol, "", eol + eol]))
    body = eol.join(line.replace("\n", eol) if eol != "\n" else line for line in lines)
    body = body + trailing
    if encoding == "latin-1":
        data = body.encode("latin-1")
    elif encoding == "utf-8-sig":
        data = b"\xef\xbb\xbf" + body.encode("utf-8")
    else:
        data = body.encode("utf-8")
    note = (f"delimited sep={sep!r} encoding={encoding} eol={eol!r} columns={header_names} "
            f"quote_all={quote_all} decimal_comma={decimal_comma} styles={style_pool}")
    return InputFile(stem, len(records), rows, content=data, note=note)


def long_csv(name: str, days: float, step_s: int = 60) -> InputFile:
    """A single drifter sampled every ``step_s`` seconds for ``days`` days.

    Parameters
    ----------
    name : str
        File name.
    days : float
        Length of the record.
    step_s : int
        Sampling interval (s).

    Returns
    -------
    InputFile
        The file; every record is ``"ok"``.
    """
    n = int(days * 86400 // step_s)
    k = np.arange(n)
    t = 1772323200 + step_s * k
    lat = np.round(45.0 + 2e-6 * k, 6)
    lon = np.round(-30.0 + 3e-6 * k, 6)
    stamps = t.astype("datetime64[s]").astype(str)
    lines = ["time,lat,lon"] + [f"{a}Z,{b!r},{c!r}" for a, b, c in zip(
        stamps.tolist(), lat.tolist(), lon.tolist(), strict=True)]
    stem = Path(name).stem
    rows = {
        i + 2: Expected("ok", stem, int(t[i]) * 1_000_000_000, float(lat[i]), float(lon[i]))
        for i in range(0, n, max(1, n // 500))
    }
    return InputFile(name, n, rows, content=("\n".join(lines) + "\n").encode(),
                     note=f"long single drifter, {n} fixes every {step_s} s", sampled=True)


# --------------------------------------------------------------------------- GPX

_GPX_NS = {"1.1": "http://www.topografix.com/GPX/1/1", "1.0": "http://www.topografix.com/GPX/1/0"}


def _xml_escape(text: str) -> str:
    return text.replace("&", "&amp;").replace("<", "&lt;").replace('"', "&quot;")


@st.composite
def gpx_files(draw, name: str | None = None, *, drifter_id: str | None = None,
              max_records: int = 30) -> InputFile:
    """Draw a GPX file of tracks, segments and waypoints, one point per line.

    Parameters
    ----------
    name : str, optional
        File name; drawn when not given.
    drifter_id : str, optional
        The run's ``--drifter-id`` (names waypoints and unnamed tracks).
    max_records : int
        Largest number of points.

    Returns
    -------
    InputFile
        The file and what each point must become.
    """
    stem = name or draw(st.sampled_from(["track", "LANTERN-09", "d\u00e9rive", "g"]))
    if not stem.endswith(".gpx"):
        stem += ".gpx"
    fallback = drifter_id or Path(stem).stem
    version = draw(st.sampled_from(["1.1", "1.1", "1.0", None]))
    encoding = draw(st.sampled_from(["UTF-8", "UTF-8", "ISO-8859-1"]))
    xmlns = f' xmlns="{_GPX_NS[version]}"' if version else ""
    lines = []
    if draw(st.booleans()) or encoding != "UTF-8":
        lines.append(f'<?xml version="1.0" encoding="{encoding}"?>')
    lines.append(f'<gpx version="{version or "1.1"}" creator="t"{xmlns} xmlns:e="urn:x">')
    rows: dict[int, Expected] = {}
    count = 0
    convention = draw(st.sampled_from(["signed", "east"]))

    def point(tag: str, drifter: str, lat: float, lon: float, t: int) -> str:
        nonlocal count
        count += 1
        kind = "ok"
        lat_attr, lon_attr = repr(lat), repr(lon)
        t_text, t_ns = _iso(t, draw(st.sampled_from(["z", "frac", "offset+", "space"])))
        damage = draw(st.integers(0, 9))
        time_el = f"<time>{t_text}</time>"
        if damage == 1:
            kind = "missing"
            time_el = draw(st.sampled_from(["", "<time></time>", "<time> NA </time>"]))
        elif damage == 2:
            kind = "bad"
            which = draw(st.sampled_from(["lat", "lon", "time", "drop"]))
            if which == "lat":
                lat_attr = draw(st.sampled_from(_BAD_NUMBERS))
            elif which == "lon":
                lon_attr = draw(st.sampled_from(_BAD_NUMBERS))
            elif which == "time":
                time_el = f"<time>{_xml_escape(draw(st.sampled_from(_BAD_TIMES)))}</time>"
        attrs = [f'lat="{_xml_escape(lat_attr)}"', f'lon="{_xml_escape(lon_attr)}"']
        if damage == 2 and which == "drop":
            attrs.pop(draw(st.integers(0, 1)))
        if draw(st.booleans()):
            attrs.reverse()
        ext = ""
        if draw(st.integers(0, 5)) == 0:
            ext = "<extensions><e:time>not a fix time</e:time></extensions>"
        ele = "<ele>0.5</ele>" if draw(st.booleans()) else ""
        lines.append(f"    <{tag} {' '.join(attrs)}>{ele}{time_el}{ext}</{tag}>")
        line = len(lines) + 0  # 1-based line number of this point
        if kind == "ok":
            rows[line] = Expected("ok", drifter, t_ns, float(lat), _wrap(float(lon)))
        else:
            rows[line] = Expected(kind)
        return line

    n_tracks = draw(st.integers(0, 2))
    n_wpt = draw(st.integers(0 if n_tracks else 1, 3))
    budget = max_records
    for _ in range(n_wpt):
        if budget <= 0:
            break
        (lat, lon), = draw(_positions(1, convention))
        point("wpt", fallback, lat, lon, draw(_times(1, True))[0])
        budget -= 1
    for k in range(n_tracks):
        lines.append("  <trk>")
        track_name = draw(st.sampled_from(
            [None, "", f"LANTERN-{k}", "A &amp; B", "d\u00e9rive-trk"]))
        if track_name is not None:
            lines.append(f"    <name>{track_name}</name>")
        text_name = (track_name or "").replace("&amp;", "&").strip()
        drifter = text_name or fallback
        for _ in range(draw(st.integers(1, 2))):
            lines.append("   <trkseg>")
            n = draw(st.integers(0, max(0, min(budget, 12))))
            pos = draw(_positions(n, convention))
            times = draw(_times(n, True))
            for (lat, lon), t in zip(pos, times, strict=True):
                point("trkpt", drifter, lat, lon, t)
            budget -= n
            lines.append("   </trkseg>")
        lines.append("  </trk>")
    if draw(st.booleans()):
        lines.append('  <rte><rtept lat="1.0" lon="2.0"/></rte>')
    lines.append("</gpx>")
    text = "\n".join(lines) + "\n"
    data = text.encode("utf-8" if encoding == "UTF-8" else "latin-1", errors="replace")
    return InputFile(stem, count, rows, content=data, must_read=count > 0,
                     note=f"gpx version={version} encoding={encoding} tracks={n_tracks}")


# --------------------------------------------------------------------------- NetCDF


@st.composite
def netcdf_files(draw, name: str | None = None, *, drifter_id: str | None = None,
                 max_records: int = 30) -> InputFile:
    """Draw a CF trajectory NetCDF file in one of the four layouts.

    Parameters
    ----------
    name : str, optional
        File name; drawn when not given.
    drifter_id : str, optional
        The run's ``--drifter-id`` (used without a trajectory id variable).
    max_records : int
        Largest number of observations.

    Returns
    -------
    InputFile
        A writer of the file and what each observation must become.
    """
    stem = name or draw(st.sampled_from(["release", "svp_2026", "n"]))
    if not stem.endswith((".nc", ".nc4", ".cdf")):
        stem += draw(st.sampled_from([".nc", ".nc", ".nc4", ".cdf"]))
    layout = draw(st.sampled_from(["ragged", "indexed", "multidim", "single"]))
    n_traj = 1 if layout == "single" else draw(st.integers(1, 3))
    id_kind = draw(st.sampled_from(["chars", "vlen", "int", "none"]))
    fmt = draw(st.sampled_from(["NETCDF4", "NETCDF4", "NETCDF3_CLASSIC"]))
    if fmt != "NETCDF4" and id_kind == "vlen":
        id_kind = "chars"
    feature = draw(st.sampled_from(["trajectory", "Trajectory", "TRAJECTORY"]))
    base = drifter_id or Path(stem).stem
    traj_ids = [f"SVP-{k + 1}" for k in range(n_traj)] if id_kind in ("chars", "vlen") else (
        [str(1000 + k) for k in range(n_traj)] if id_kind == "int" else
        ([base] if n_traj == 1 else [f"{base}-{k + 1}" for k in range(n_traj)]))
    counts = [draw(st.integers(0 if layout != "single" else 1, max(1, max_records // n_traj)))
              for _ in range(n_traj)]
    if sum(counts) == 0:
        counts[0] = 1
    convention = draw(st.sampled_from(["signed", "east"]))
    obs = []  # (trajectory, seconds or None, lat or nan, lon or nan, kind)
    for k, c in enumerate(counts):
        pos = draw(_positions(c, convention))
        times = draw(_times(c, True))
        for (lat, lon), t in zip(pos, times, strict=True):
            damage = draw(st.integers(0, 9))
            if damage == 1:
                which = draw(st.sampled_from(["time", "lat", "lon"]))
                obs.append((k, None if which == "time" else t,
                            np.nan if which == "lat" else lat,
                            np.nan if which == "lon" else lon, "missing"))
            elif damage == 2:
                obs.append((k, t, draw(st.sampled_from([np.inf, -np.inf])), lon, "inf"))
            else:
                obs.append((k, t, lat, lon, "ok"))
    if layout == "indexed":
        order = draw(st.permutations(list(range(len(obs)))))
        obs = [obs[i] for i in order]
    time_dtype = draw(st.sampled_from(["f8", "i8" if fmt == "NETCDF4" else "i4", "f8"]))
    fill_time = -1 if time_dtype.startswith("i") else -1.0
    shift = 0
    if time_dtype == "i4":
        shift = 1_000_000_000  # keep int32 values in range: seconds since 2001-09-09
    units = f"seconds since {str(np.datetime64(shift, 's')).replace('T', ' ')}"

    rows: dict[int, Expected] = {}
    records = 0
    if layout == "multidim":
        width = max(counts)
        grid_time = np.full((n_traj, width), np.nan)
        grid_lat = np.full((n_traj, width), np.nan)
        grid_lon = np.full((n_traj, width), np.nan)
        kinds = np.full((n_traj, width), "", dtype=object)
        slot = [0] * n_traj
        for k, t, lat, lon, kind in obs:
            o = slot[k]
            slot[k] += 1
            grid_time[k, o] = np.nan if t is None else t - shift
            grid_lat[k, o], grid_lon[k, o] = lat, lon
            kinds[k, o] = kind
        for k in range(n_traj):
            for o in range(width):
                if kinds[k, o] == "" or (np.isnan(grid_time[k, o]) and np.isnan(grid_lat[k, o])
                                         and np.isnan(grid_lon[k, o])):
                    continue  # padding: no record
                records += 1
                rows[k * width + o + 1] = _nc_expect(kinds[k, o], traj_ids[k],
                                                     grid_time[k, o], grid_lat[k, o],
                                                     grid_lon[k, o], shift)
    else:
        for i, (k, t, lat, lon, kind) in enumerate(obs):
            records += 1
            rows[i + 1] = _nc_expect(kind, traj_ids[k], np.nan if t is None else t - shift,
                                     lat, lon, shift)

    def writer(path: Path) -> None:
        import netCDF4

        with netCDF4.Dataset(path, "w", format=fmt) as nc:
            nc.featureType = feature
            nc.Conventions = "CF-1.11"
            nc.createDimension("trajectory", n_traj)
            if layout == "multidim":
                width = grid_time.shape[1]
                nc.createDimension("obs", width)
                dims = ("trajectory", "obs")
                tv, la, lo = grid_time, grid_lat, grid_lon
            else:
                nc.createDimension("obs", len(obs))
                dims = ("obs",)
                tv = np.array([np.nan if t is None else t - shift for _, t, _, _, _ in obs])
                la = np.array([o[2] for o in obs], dtype=float)
                lo = np.array([o[3] for o in obs], dtype=float)
            time = nc.createVariable("time", time_dtype, dims, fill_value=fill_time)
            time.standard_name = "time"
            time.units = units
            time.calendar = "standard"
            mask = np.isnan(tv)
            time[:] = np.ma.masked_array(np.where(mask, 0, tv).astype(time_dtype), mask=mask)
            lat = nc.createVariable("lat", "f8", dims, fill_value=-999.0)
            lat.standard_name = "latitude"
            lat.units = "degrees_north"
            lat[:] = np.ma.masked_array(la, mask=np.isnan(la)) if draw_mask else la
            lon = nc.createVariable("lon", "f8", dims)
            lon.standard_name = "longitude"
            lon.units = "degrees_east"
            lon[:] = lo
            if layout == "ragged":
                size = nc.createVariable("rowSize", "i4", ("trajectory",))
                size.sample_dimension = "obs"
                size[:] = counts
            elif layout == "indexed":
                index = nc.createVariable("trajectoryIndex", "i4", ("obs",))
                index.instance_dimension = "trajectory"
                index[:] = [o[0] for o in obs]
            if id_kind == "chars":
                nc.createDimension("name_strlen", 8)
                var = nc.createVariable("trajectory_name", "S1", ("trajectory", "name_strlen"))
                var.cf_role = "trajectory_id"
                var[:] = netCDF4.stringtochar(np.array(traj_ids, "S8"))
            elif id_kind == "vlen":
                var = nc.createVariable("trajectory_name", str, ("trajectory",))
                var.cf_role = "trajectory_id"
                for k, v in enumerate(traj_ids):
                    var[k] = v
            elif id_kind == "int":
                var = nc.createVariable("platform", "i4", ("trajectory",))
                var.cf_role = "trajectory_id"
                var[:] = [int(v) for v in traj_ids]

    draw_mask = draw(st.booleans())
    return InputFile(stem, records, rows, writer=writer, must_read=True,
                     note=f"netcdf {layout} {fmt} ids={id_kind} counts={counts} "
                          f"time={time_dtype} masked_lat={draw_mask}")


def _nc_expect(kind: str, drifter: str, t: float, lat: float, lon: float, shift: int) -> Expected:
    if kind == "missing":
        return Expected("missing")
    # "inf": a present, infinite latitude is read as it is; QC flags it out of range
    return Expected("ok", drifter, int(t + shift) * 1_000_000_000, float(lat), _wrap(lon))


# --------------------------------------------------------------------------- Parquet


@st.composite
def parquet_files(draw, name: str | None = None, *, drifter_id: str | None = None,
                  max_records: int = 30) -> InputFile:
    """Draw a Parquet table of fixes with typed or text columns.

    Parameters
    ----------
    name : str, optional
        File name; drawn when not given.
    drifter_id : str, optional
        The run's ``--drifter-id``.
    max_records : int
        Largest number of rows.

    Returns
    -------
    InputFile
        A writer of the file and what each row must become.
    """
    import pyarrow as pa
    import pyarrow.parquet as pq

    stem = name or draw(st.sampled_from(["fixes", "release_b", "p"]))
    if not stem.endswith((".parquet", ".pq")):
        stem += draw(st.sampled_from([".parquet", ".pq"]))
    n = draw(st.integers(1, max_records))
    has_id = draw(st.booleans())
    id_type = draw(st.sampled_from(["string", "int"]))
    time_type = draw(st.sampled_from(["ts_utc", "ts_naive", "epoch", "text"]))
    convention = draw(st.sampled_from(["signed", "east"]))
    pos = draw(_positions(n, convention))
    times = draw(_times(n, True))
    ids_pool = ["A", "B"] if id_type == "string" else [11, 12]
    ids, tvals, lats, lons, rows = [], [], [], [], {}
    for i, ((lat, lon), t) in enumerate(zip(pos, times, strict=True)):
        drifter = draw(st.sampled_from(ids_pool))
        damage = draw(st.integers(0, 9))
        kind = "ok"
        tv = t
        if damage == 1:
            kind = "missing"
            which = draw(st.sampled_from(["time", "lat", "lon"]))
            if which == "time":
                tv = None
            elif which == "lat":
                lat = draw(st.sampled_from([None, float("nan")]))
            else:
                lon = draw(st.sampled_from([None, float("nan")]))
        elif damage == 2:
            kind = "bad"
            which = draw(st.sampled_from(["lat", "id"] if has_id else ["lat"]))
            if which == "lat":
                lat = draw(st.sampled_from([float("inf"), float("-inf")]))
            else:
                drifter = None
        ids.append(drifter)
        tvals.append(tv)
        lats.append(lat)
        lons.append(lon)
        if kind == "ok":
            expected_id = str(drifter) if has_id else (drifter_id or Path(stem).stem)
            rows[i + 1] = Expected("ok", expected_id, t * 1_000_000_000, float(lat), _wrap(lon))
        else:
            rows[i + 1] = Expected(kind)
    columns = {}
    if has_id:
        columns["buoy"] = pa.array(ids, pa.string() if id_type == "string" else pa.int64())
    if time_type == "ts_utc":
        columns["time"] = pa.array([None if t is None else t * 1_000_000 for t in tvals],
                                   pa.int64()).cast(pa.timestamp("us", tz="UTC"))
    elif time_type == "ts_naive":
        columns["time"] = pa.array([None if t is None else t for t in tvals],
                                   pa.int64()).cast(pa.timestamp("s"))
    elif time_type == "epoch":
        columns["time"] = pa.array(tvals, pa.int64())
    else:
        columns["time"] = pa.array([None if t is None else _iso(t, "z")[0] for t in tvals])
    columns["latitude"] = pa.array(lats, pa.float64())
    columns["longitude"] = pa.array(lons, pa.float64())
    table = pa.table(columns)

    def writer(path: Path) -> None:
        pq.write_table(table, path)

    return InputFile(stem, n, rows, writer=writer,
                     note=f"parquet time={time_type} id={has_id and id_type}")


# --------------------------------------------------------------------------- cases


@st.composite
def cases(draw, *, kinds: tuple[str, ...] = ("csv", "csv", "csv", "gpx", "netcdf", "parquet"),
          max_files: int = 3, land_test_every: int = 10, max_records: int = 40,
          analyse: bool = False) -> Case:
    """Draw a run: one to ``max_files`` input files and the command-line options.

    Parameters
    ----------
    kinds : tuple of str
        File kinds to draw from (repeat one to draw it more often).
    max_files : int
        Largest number of input files.
    land_test_every : int
        About one run in this many keeps the land test; the others pass
        ``--no-land-test`` (the land mask is the slow part of a small run).
    max_records : int
        Largest number of records per file.
    analyse : bool
        Also draw ``driftloop analyse`` (every stage, several seconds a run)
        besides ``driftloop qc``.

    Returns
    -------
    Case
        Files and options.
    """
    n_files = draw(st.integers(1, max_files))
    options: list[str] = []
    if draw(st.integers(1, land_test_every)) != 1:
        options.append("--no-land-test")
    if draw(st.integers(0, 9)) == 0:
        options.append("--strict")
    drifter_id = None
    if draw(st.integers(0, 5)) == 0:
        drifter_id = draw(st.sampled_from(["SVP-9", "b\u00e9e 2"]))
        options += ["--drifter-id", drifter_id]
    separator = None
    mapping = None
    if n_files == 1 and draw(st.integers(0, 4)) == 0:
        mapping = {role: _UNKNOWN[role] for role in draw(
            st.lists(st.sampled_from(["id", "time", "lat", "lon"]), min_size=1, unique=True))}
        options += ["--columns", ",".join(f"{r}={n}" for r, n in mapping.items())]
        kinds = ("csv",)
    files: list[InputFile] = []
    used: set[str] = set()
    if "csv" in kinds and draw(st.integers(0, 4)) == 0:
        separator = draw(st.sampled_from([",", ";", "\t"]))
        options += ["--separator", "tab" if separator == "\t" else separator]
    for _ in range(n_files):
        kind = draw(st.sampled_from(kinds))
        if kind == "csv":
            f = draw(csv_files(separator=separator, mapping=mapping, drifter_id=drifter_id,
                               max_records=max_records))
        elif kind == "gpx":
            f = draw(gpx_files(drifter_id=drifter_id, max_records=max_records))
        elif kind == "netcdf":
            f = draw(netcdf_files(drifter_id=drifter_id, max_records=max_records))
        else:
            f = draw(parquet_files(drifter_id=drifter_id, max_records=max_records))
        stem, dot, suffix = f.name.rpartition(".")
        k = 2
        while f.name in used:
            f.name = f"{stem}_{k}.{suffix}"
            k += 1
        if mapping is None and drifter_id is None:
            # the id of a file without an id column is its stem: keep expectations in step
            f.rows = {r: _rename(e, stem, Path(f.name).stem) for r, e in f.rows.items()}
        used.add(f.name)
        files.append(f)
    command = draw(st.sampled_from(["qc", "analyse"])) if analyse else "qc"
    return Case(files, options, command)


def _rename(expect: Expected, old: str, new: str) -> Expected:
    if expect.kind != "ok" or old == new or expect.drifter_id is None:
        return expect
    if expect.drifter_id == old:
        return Expected("ok", new, expect.time_ns, expect.lat, expect.lon)
    if expect.drifter_id.startswith(old + "-") and expect.drifter_id[len(old) + 1:].isdigit():
        return Expected("ok", new + expect.drifter_id[len(old):], expect.time_ns, expect.lat,
                        expect.lon)
    return expect


# --------------------------------------------------------------------------- running


def run_cli(argv: list[str]) -> tuple[int, str, str, list[str]]:
    """Run ``driftloop.cli.main`` in-process.

    Parameters
    ----------
    argv : list of str
        Arguments after ``driftloop``.

    Returns
    -------
    tuple
        Exit status, stdout, stderr and the text of any warnings raised
        (a warning would reach the user's terminal as extra stderr lines).
    """
    from driftloop.cli import main

    out, err = io.StringIO(), io.StringIO()
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        with contextlib.redirect_stdout(out), contextlib.redirect_stderr(err):
            try:
                code = main(argv)
            except SystemExit as exc:  # argparse usage errors
                code = exc.code if isinstance(exc.code, int) else 2
    return code, out.getvalue(), err.getvalue(), [str(w.message) for w in caught]


def read_fixes_csv(path: Path):
    """Read ``fixes.csv`` as text cells (nothing turned into NaN).

    Parameters
    ----------
    path : Path
        The file.

    Returns
    -------
    pandas.DataFrame
        Every cell as a string.
    """
    import pandas as pd

    return pd.read_csv(path, dtype=str, keep_default_na=False, encoding="utf-8")


def _float_cell(text: str) -> float:
    return math.nan if text == "" else float(text)


def check_case(case: Case, folder: Path, *, in_process: bool = True,
               errors: dict[str, int] | None = None) -> list[str]:
    """Write a case's inputs, run driftloop on them and check every invariant.

    Parameters
    ----------
    case : Case
        The drawn run.
    folder : Path
        An empty working folder (inputs go to ``in/``, outputs to ``out/``).
    in_process : bool
        Call :func:`driftloop.cli.main` directly (fast) or run
        ``python -m driftloop`` as a subprocess (real exit status and stderr).
    errors : dict, optional
        Counts of refusals by kind (the message with file, numbers and
        quoted values taken out), updated in place.

    Returns
    -------
    list of str
        Broken invariants, empty when the run behaved.
    """

    folder = Path(folder)
    inputs = folder / "in"
    inputs.mkdir()
    paths = [f.write(inputs) for f in case.files]
    hashes = {p: p.read_bytes() for p in paths}
    out = folder / "out"
    argv = [case.command, *map(str, paths), "--out", str(out), *case.options]
    if in_process:
        code, stdout, stderr, caught = run_cli(argv)
    else:
        import subprocess
        import sys

        done = subprocess.run([sys.executable, "-m", "driftloop", *argv], capture_output=True,
                              text=True, check=False, env={**os.environ, "PYTHONWARNINGS": ""})
        code, stdout, stderr, caught = done.returncode, done.stdout, done.stderr, []
    problems: list[str] = []
    if "Traceback" in stderr or "Traceback" in stdout:
        problems.append("a traceback was printed")
    if code not in (0, 1):
        problems.append(f"exit status {code} (expected 0 or 1): {stderr.strip()[:300]}")
    if caught:
        problems.append(f"warnings reached the user: {caught[:3]}")
    for p in paths:
        if p.read_bytes() != hashes[p]:
            problems.append(f"input {p.name} was modified")
    if code == 1:
        lines = stderr.strip("\n").splitlines()
        if len(lines) != 1:
            problems.append(f"error is {len(lines)} lines, expected 1: {stderr[:300]!r}")
        elif not lines[0].startswith("driftloop: error: "):
            problems.append(f"error line has the wrong shape: {lines[0][:200]!r}")
        elif not any(str(p) in lines[0] for p in paths):
            problems.append(f"error does not name an input file: {lines[0][:200]!r}")
        elif "--strict" not in case.options and any(
                f.must_read and lines[0].startswith(f"driftloop: error: {p}")
                for f, p in zip(case.files, paths, strict=True)):
            problems.append(f"a readable file was refused: {lines[0][:200]!r}")
        if out.exists() and any(out.iterdir()):
            problems.append(f"a failed run left files in --out: {sorted(os.listdir(out))}")
        if errors is not None and lines:
            errors[_error_kind(lines[0], paths)] = errors.get(_error_kind(lines[0], paths), 0) + 1
        return problems
    if code != 0:
        return problems
    return problems + check_outputs(case, paths, out)


def _error_kind(line: str, paths: list[Path]) -> str:
    """Reduce an error line to its kind: no file names, numbers or quoted values."""
    import re

    for p in paths:
        line = line.replace(str(p), "FILE")
    line = re.sub(r"'[^']*'|\"[^\"]*\"", "'…'", line.removeprefix("driftloop: error: "))
    line = re.sub(r"-?\d+(\.\d+)?(e[+-]?\d+)?", "N", line)
    return line.split(";")[0][:90]


def check_outputs(case: Case, paths: list[Path], out: Path) -> list[str]:
    """Check the outputs of a successful run against the generated records.

    Parameters
    ----------
    case : Case
        The drawn run.
    paths : list of Path
        The input files as passed on the command line (same order as
        ``case.files``).
    out : Path
        The output folder.

    Returns
    -------
    list of str
        Broken invariants.
    """
    problems: list[str] = []
    missing = [n for n in OUTPUTS if not (out / n).is_file()]
    if missing:
        return [f"outputs missing: {missing}"]
    leftovers = [n for n in os.listdir(out) if n.endswith(".part")]
    if leftovers:
        problems.append(f"temporary files left behind: {leftovers}")
    docs = {}
    for name in sorted(os.listdir(out)):
        problem = _parse_output(out / name)
        if problem:
            problems.append(problem)
    for name in OUTPUTS[1:]:
        try:
            docs[name] = json.loads((out / name).read_text(encoding="utf-8"))
        except (ValueError, UnicodeDecodeError) as exc:
            problems.append(f"{name} does not parse as JSON: {exc}")
    with open(out / "fixes.csv", encoding="utf-8", newline="") as handle:
        raw_rows = list(csv.reader(handle))
    if len(raw_rows) - 1 != case.records:
        problems.append(f"fixes.csv has {len(raw_rows) - 1} rows (csv module), "
                        f"{case.records} records went in")
    if raw_rows and any(len(r) != len(raw_rows[0]) for r in raw_rows):
        problems.append("fixes.csv rows have different numbers of fields")
    fixes = read_fixes_csv(out / "fixes.csv")
    if len(fixes) != case.records:
        problems.append(f"fixes.csv has {len(fixes)} rows (pandas), {case.records} went in")
    summary = docs.get("summary.json")
    if summary is not None:
        acc = summary["accounting"]
        if acc != {"rows_in": case.records, "rows_out": case.records, "balanced": True}:
            problems.append(f"accounting {acc}, {case.records} records went in")
        per_file = {i["file"]: i["rows"] for i in summary["inputs"]}
        for f, p in zip(case.files, paths, strict=True):
            if per_file.get(str(p)) != f.records:
                problems.append(f"summary.inputs says {per_file.get(str(p))} rows for {f.name}, "
                                f"{f.records} went in")
        if sum(summary["release"]["by_flag"].values()) != case.records:
            problems.append("release by_flag does not add up to the rows")
        if sum(d["fixes"] for d in summary["drifters"].values()) != case.records:
            problems.append("per-drifter fixes do not add up to the rows")
    flags = set(fixes["qc_flag"]) - {"1", "3", "4", "9"}
    if flags:
        problems.append(f"unexpected qc_flag values {sorted(flags)}")
    problems += _check_rows(case, paths, fixes)
    return problems


def _parse_output(path: Path) -> str | None:
    """Parse any output with an independent reader; return what went wrong, if anything."""
    import pandas as pd

    if path.is_dir() or path.name.endswith(".part"):
        return None
    try:
        if path.suffix == ".json":
            json.loads(path.read_text(encoding="utf-8"))
        elif path.suffix == ".csv":
            pd.read_csv(path, dtype=str, keep_default_na=False)
        elif path.suffix in (".nc", ".nc4"):
            import xarray as xr

            with xr.open_dataset(path) as ds:
                ds.load()
        elif path.suffix in (".parquet", ".pq"):
            import pyarrow.parquet as pq

            pq.read_table(path)
    except Exception as exc:  # any failure to parse is the finding
        return f"output {path.name} does not parse: {type(exc).__name__}: {exc}"
    return None


def _check_rows(case: Case, paths: list[Path], fixes) -> list[str]:
    """Compare each output row with the record it came from."""
    import pandas as pd

    problems: list[str] = []
    keyed = fixes.set_index(["source_file", "source_row"])
    if not keyed.index.is_unique:
        dup = keyed.index[keyed.index.duplicated()][:3].tolist()
        return [f"(source_file, source_row) repeats: {dup}"]
    for f, p in zip(case.files, paths, strict=True):
        rows_here = fixes.loc[fixes["source_file"] == str(p), "source_row"].astype(int)
        if f.sampled:
            lost = sorted(set(f.rows) - set(rows_here))[:5]
            if len(rows_here) != f.records or lost:
                problems.append(f"{f.name}: {len(rows_here)} rows of {f.records}, "
                                f"missing {lost}")
                continue
        elif sorted(rows_here) != sorted(f.rows):
            extra = sorted(set(rows_here) - set(f.rows))[:5]
            lost = sorted(set(f.rows) - set(rows_here))[:5]
            problems.append(f"{f.name}: source_row differ: unexpected {extra}, missing {lost}")
            continue
        for row, expect in f.rows.items():
            got = keyed.loc[(str(p), str(row))]
            reasons = got["qc_reasons"].split("|") if got["qc_reasons"] else []
            where = f"{f.name} row {row}"
            if expect.kind == "bad":
                if "unparseable" not in reasons or got["qc_flag"] != "4":
                    problems.append(f"{where}: expected unparseable, got {got['qc_flag']} "
                                    f"{got['qc_reasons']!r}")
                elif got["raw"] == "" and got["source_file"].endswith(
                        (".csv", ".tsv", ".tab", ".txt", ".gpx", ".parquet", ".pq")):
                    problems.append(f"{where}: unparseable row without its raw text")
            elif expect.kind == "missing":
                if got["qc_flag"] != "9" or reasons != ["missing_value"]:
                    problems.append(f"{where}: expected missing (9), got {got['qc_flag']} "
                                    f"{got['qc_reasons']!r}")
            else:
                if "unparseable" in reasons or "missing_value" in reasons:
                    problems.append(f"{where}: a readable record came out as "
                                    f"{got['qc_reasons']!r}")
                    continue
                if got["drifter_id"] != expect.drifter_id:
                    problems.append(f"{where}: drifter_id {got['drifter_id']!r}, "
                                    f"expected {expect.drifter_id!r}")
                t = pd.Timestamp(got["time"])
                if t.value != expect.time_ns:
                    problems.append(f"{where}: time {got['time']}, expected "
                                    f"{pd.Timestamp(expect.time_ns, tz='UTC')}")
                lat, lon = _float_cell(got["lat"]), _float_cell(got["lon"])
                if not (lat == expect.lat and lon == expect.lon):
                    problems.append(f"{where}: position ({lat!r}, {lon!r}), expected "
                                    f"({expect.lat!r}, {expect.lon!r})")
            if len(problems) > 10:
                return problems
    return problems
