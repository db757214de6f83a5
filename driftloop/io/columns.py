"""Which column is which, and reading the values in them.

Shared by the delimited-text and Parquet readers (and, for the value
helpers, by the NetCDF and GPX readers).

Roles
-----
A track table needs a ``time``, a ``lat`` and a ``lon`` column, and may have
an ``id`` column (the drifter) and a ``date`` column.  Column names are
compared after folding case and dropping everything that is not a letter or
digit (``Drifter ID``, ``drifter_id`` and ``DRIFTER-ID`` are all
``drifterid``); a name whose bracketed part is a unit (``Latitude (deg)``,
``lon [degrees_east]``) is also tried without it, and so is a name ending in
a zone word (``obs_time_utc`` is tried as ``obstime``).  The spellings recognised
are listed in :data:`ROLE_SPELLINGS`; ``x``/``y`` are deliberately not
guessed.

Rules:

1. A role given in ``ReadConfig.columns`` always wins.  A mapped column that
   is not in the file is an error naming it and listing the columns found.
2. Columns taken by the mapping are not considered for other roles.
3. Each remaining role takes the one column whose name is a known spelling.
   Two columns matching one role is an error (ambiguous) unless the role is
   mapped.  For ``id``, generic names (``name``, ``label``) are only used
   when no specific one (``id``, ``buoy``, ``wmo`` ...) is present.
4. A ``date`` column pairs with a time-of-day column named like ``time`` /
   ``time_utc`` (the time column then holds only the time of day).  Without
   such a column a lone ``date`` column is the time column.  The date is not
   inferred when ``time`` is mapped explicitly.
5. No ``id`` column: the whole file is one drifter, named by
   ``ReadConfig.drifter_id`` or else the file name without its suffix.
6. A missing ``time``, ``lat`` or ``lon`` is an error naming the role,
   listing the header and saying how to map it.
"""

from __future__ import annotations

import re
from collections.abc import Sequence
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pandas as pd
import pyarrow as pa
import pyarrow.compute as pc

from driftloop.config import ReadConfig
from driftloop.errors import ConfigError, InputError
from driftloop.io.timeparse import as_text_array, bool_mask, missing_mask, quote_value

__all__ = [
    "REQUIRED_ROLES",
    "ROLES",
    "ROLE_SPELLINGS",
    "ColumnRoles",
    "ParsedNumbers",
    "check_lon_convention",
    "default_drifter_id",
    "drifter_ids",
    "infer_columns",
    "join_errors",
    "normalise_name",
    "parse_numbers",
    "refuse_unreadable_column",
]

ROLES = ("id", "time", "date", "lat", "lon")
"""Column roles, in the order they are resolved."""

REQUIRED_ROLES = ("time", "lat", "lon")
"""Roles every track table must have."""

_ROLE_WORDS = {
    "id": "drifter id",
    "time": "time",
    "date": "date",
    "lat": "latitude",
    "lon": "longitude",
}

ROLE_SPELLINGS: dict[str, tuple[frozenset[str], ...]] = {
    # each role: tiers of normalised names, the first tier that matches wins
    "id": (
        frozenset({
            "id", "drifter", "drifterid", "drifterno", "drifternumber", "driftername",
            "buoy", "buoyid", "buoyno", "buoynumber", "buoyname",
            "platform", "platformid", "platformcode", "platformnumber", "platformname",
            "wmo", "wmoid", "wmono", "wmonumber", "wmocode",
            "imei", "imeino", "imeinumber", "esn", "argosid", "ptt",
            "trajectory", "trajectoryid", "trajectoryname",
            "device", "deviceid", "devicename", "tracker", "trackerid",
            "unitid", "serialno", "serialnumber",
        }),
        frozenset({"name", "label", "station", "stationid"}),
    ),
    "time": (
        frozenset({
            "time", "timestamp", "timestamputc", "datetime", "datetimeutc", "utcdatetime",
            "timeutc", "utctime", "utc", "timegmt", "gmttime", "obstime", "observationtime",
            "timeobs", "fixtime", "gpstime", "gpstimestamp", "positiontime", "postime",
            "isotime", "datetimegmt", "timeiso", "epoch", "epochtime", "unixtime",
            "epochseconds", "timesec", "datetimeiso",
        }),
    ),
    "date": (
        frozenset({"date", "dateutc", "utcdate", "dategmt", "obsdate", "gpsdate", "fixdate"}),
    ),
    "lat": (
        frozenset({
            "lat", "latitude", "latdeg", "latdegn", "latdegrees", "latdegreesnorth",
            "latitudedeg", "latitudedegn", "latitudedegrees", "latitudedegreesnorth",
            "latdd", "latdecimal", "gpslat", "gpslatitude", "latn", "latitudewgs84",
            "poslat", "decimallatitude",
        }),
    ),
    "lon": (
        frozenset({
            "lon", "long", "lng", "longitude", "londeg", "londege", "londegrees",
            "londegreeseast", "longitudedeg", "longitudedege", "longitudedegrees",
            "longitudedegreeseast", "londd", "londecimal", "gpslon", "gpslong", "gpslng",
            "gpslongitude", "lone", "longitudewgs84", "poslon", "decimallongitude",
        }),
    ),
}
"""Recognised normalised spellings per role (see :func:`normalise_name`)."""

# time columns that hold a time of day when a date column is present
_CLOCK_NAMES = frozenset({
    "time", "timeutc", "utctime", "timegmt", "gmttime", "utc", "gpstime", "obstime",
    "fixtime", "timeofday", "clock", "hhmmss", "hourminute",
})

_BRACKETS = re.compile(r"[\(\[\{<].*?[\)\]\}>]")


def normalise_name(name: str) -> str:
    """Fold a column name for matching: lower case, letters and digits only.

    Parameters
    ----------
    name : str
        Column name as found in the file.

    Returns
    -------
    str
        The folded name.

    Examples
    --------
    >>> normalise_name(" Drifter-ID ")
    'drifterid'
    >>> normalise_name("Lat (deg N)")
    'latdegn'
    """
    return "".join(ch for ch in str(name).lower() if ch.isalnum())


_ZONE_SUFFIXES = ("utc", "gmt", "iso8601", "iso")


def _candidates(name: str) -> tuple[str, ...]:
    """Normalised forms a header name is matched under.

    The folded name, the folded name without bracketed parts, and both
    without a trailing zone word (``obs_time_utc`` is matched as ``obstime``).
    """
    forms = [normalise_name(name), normalise_name(_BRACKETS.sub("", str(name)))]
    for form in list(forms):
        for suffix in _ZONE_SUFFIXES:
            if form.endswith(suffix) and len(form) > len(suffix):
                forms.append(form[: -len(suffix)])
    return tuple(dict.fromkeys(f for f in forms if f))


@dataclass(frozen=True)
class ColumnRoles:
    """The columns that play each role in one file.

    Attributes
    ----------
    names : tuple of str
        All column names, in file order.
    index : dict
        Role to column position (0-based) for the roles present.
    mapped : frozenset of str
        Roles given explicitly in the configuration.
    """

    names: tuple[str, ...]
    index: dict[str, int]
    mapped: frozenset[str] = frozenset()

    def name(self, role: str) -> str | None:
        """Return the column name of a role, or None if absent.

        Parameters
        ----------
        role : str
            One of :data:`ROLES`.

        Returns
        -------
        str or None
            The column name.
        """
        position = self.index.get(role)
        return None if position is None else self.names[position]

    def has(self, role: str) -> bool:
        """Return whether a column plays this role.

        Parameters
        ----------
        role : str
            One of :data:`ROLES`.

        Returns
        -------
        bool
            True if present.
        """
        return role in self.index


def _listing(names: Sequence[str], limit: int = 20) -> str:
    shown = ", ".join(repr(str(n)) for n in names[:limit])
    if len(names) > limit:
        shown += f" and {len(names) - limit} more"
    return shown or "(none)"


def _spelling_examples(role: str) -> str:
    examples = {
        "id": "id, drifter_id, buoy, platform, wmo or imei",
        "time": "time, timestamp, datetime or time_utc",
        "date": "date",
        "lat": "lat, latitude or lat_deg",
        "lon": "lon, long, lng or longitude",
    }
    return examples[role]


def _find_mapped(
    names: Sequence[str], role: str, wanted: str, file: str, kind: str
) -> int:
    """Locate an explicitly mapped column: exact, then trimmed, then folded name."""
    for match in (
        lambda n: n == wanted,
        lambda n: n.strip() == wanted.strip(),
        lambda n: normalise_name(n) == normalise_name(wanted) and normalise_name(wanted) != "",
    ):
        hits = [i for i, n in enumerate(names) if match(str(n))]
        if len(hits) == 1:
            return hits[0]
        if len(hits) > 1:
            raise InputError(
                file,
                f"{len(hits)} {kind}s are named {wanted!r} (given for {role}); "
                f"rename them so that the name is unique",
            )
    raise InputError(
        file,
        f"{kind} {wanted!r} given for {role} is not in the file; "
        f"the {kind}s are {_listing(names)}",
    )


def infer_columns(
    names: Sequence[str], config: ReadConfig, file: str, *, kind: str = "column"
) -> ColumnRoles:
    """Decide which column plays each role (see the module rules).

    Parameters
    ----------
    names : sequence of str
        Column names in file order (duplicates allowed).
    config : ReadConfig
        ``config.columns`` maps roles to names explicitly.
    file : str
        File name for error messages.
    kind : str
        What the file calls its columns (``"column"``, ``"variable"``).

    Returns
    -------
    ColumnRoles
        Positions of the role columns.

    Raises
    ------
    InputError
        If a mapped column is absent, a role is ambiguous, or a required
        role has no column.
    ConfigError
        If the mapping names an unknown role.

    Examples
    --------
    >>> roles = infer_columns(["Buoy ID", "Time (UTC)", "Latitude", "Lng"], ReadConfig(), "f.csv")
    >>> [roles.name(r) for r in ("id", "time", "lat", "lon")]
    ['Buoy ID', 'Time (UTC)', 'Latitude', 'Lng']
    """
    names = [str(n) for n in names]
    unknown = sorted(set(config.columns) - set(ROLES))
    if unknown:
        raise ConfigError(
            f"unknown column role {unknown[0]!r} in the column mapping; "
            f"the roles are {', '.join(ROLES)}"
        )
    index: dict[str, int] = {}
    for role in ROLES:
        if role in config.columns:
            index[role] = _find_mapped(names, role, config.columns[role], file, kind)
    taken = set(index.values())
    for role in ROLES:
        if role in index:
            continue
        if role == "date" and "time" in config.columns:
            continue
        for tier in ROLE_SPELLINGS[role]:
            hits = [
                i for i, n in enumerate(names)
                if i not in taken and any(c in tier for c in _candidates(n))
            ]
            if len(hits) > 1:
                listed = " and ".join(repr(names[i]) for i in hits)
                both = "both" if len(hits) == 2 else "all"
                raise InputError(
                    file,
                    f"{kind}s {listed} {both} look like the {_ROLE_WORDS[role]}; "
                    f"choose one with --columns {role}=NAME",
                )
            if hits:
                index[role] = hits[0]
                taken.add(hits[0])
                break
    if "date" in index and "date" not in config.columns:
        time_at = index.get("time")
        if time_at is None:
            index["time"] = index.pop("date")
        elif not any(c in _CLOCK_NAMES for c in _candidates(names[time_at])):
            # the time column holds full timestamps: the date column is not needed
            del index["date"]
    if "date" in index and "time" not in index:
        index["time"] = index.pop("date")
    for role in REQUIRED_ROLES:
        if role not in index:
            hint = ""
            if len(names) == 1 and any(s in names[0] for s in ",;\t|"):
                hint = " (the header was read as a single column: is the separator right?)"
            raise InputError(
                file,
                f"no {_ROLE_WORDS[role]} {kind} found; the {kind}s are {_listing(names)}"
                f"{hint}; expected a name like {_spelling_examples(role)}, "
                f"or map it with --columns {role}=NAME",
            )
    return ColumnRoles(tuple(names), index, frozenset(config.columns))


def default_drifter_id(path: str | Path, config: ReadConfig) -> str:
    """Return the drifter id for a file without an id column.

    Parameters
    ----------
    path : str or Path
        The input file.
    config : ReadConfig
        ``config.drifter_id`` wins when set.

    Returns
    -------
    str
        The id: ``config.drifter_id`` or the file name without its suffix.

    Examples
    --------
    >>> default_drifter_id("tracks/LANTERN-01.csv", ReadConfig())
    'LANTERN-01'
    """
    if config.drifter_id:
        return str(config.drifter_id)
    return Path(path).stem


@dataclass(frozen=True)
class ParsedNumbers:
    """Numbers read from one column of text.

    Attributes
    ----------
    values : numpy.ndarray of float
        The numbers; NaN where missing or unparseable.
    missing : numpy.ndarray of bool
        The cell was empty or an NA token.
    errors : numpy.ndarray of object
        ``"column: not a number 'text'"`` where unparseable, else ``""``.
    """

    values: np.ndarray
    missing: np.ndarray
    errors: np.ndarray

    @property
    def parsed(self) -> np.ndarray:
        """Boolean mask of cells that were read as numbers."""
        return ~self.missing & (self.errors == "")


_NUMBER_RE = r"^[+-]?(?:\d+\.?\d*|\.\d+)(?:[eE][+-]?\d+)?$"


def parse_numbers(values: object, column: str, *, decimal_comma: bool = False) -> ParsedNumbers:
    """Parse a column of number text (decimal point; optionally decimal comma).

    Parameters
    ----------
    values : array_like of str
        Cell texts; surrounding spaces are ignored.
    column : str
        Column name for the error messages.
    decimal_comma : bool
        Also accept ``12,5`` for 12.5 (semicolon-separated files).

    Returns
    -------
    ParsedNumbers
        Numbers with missing and unparseable cells told apart.  ``inf``,
        thousands separators and hemisphere letters are not numbers.

    Examples
    --------
    >>> parsed = parse_numbers(["12.5", " -3 ", "NA", "abc"], "lat")
    >>> parsed.values.tolist()[:2], parsed.missing.tolist(), parsed.errors[3]
    ([12.5, -3.0], [False, False, True, False], "lat: not a number 'abc'")
    """
    raw = as_text_array(values)
    n = len(raw)
    trimmed = pc.utf8_trim_whitespace(raw)
    text = trimmed
    if decimal_comma:
        text = pc.replace_substring_regex(text, r"^([+-]?\d*),(\d+)$", r"\1.\2")
    missing = missing_mask(trimmed, trimmed=True)
    present = pc.if_else(pa.array(missing), None, text) if missing.any() else text
    try:
        # fast path: every present cell is a number pyarrow reads (checked below)
        numbers = np.asarray(
            pc.cast(present, pa.float64()).to_numpy(zero_copy_only=False), dtype=float
        )
        ok = ~missing & np.isfinite(numbers)
    except (pa.ArrowInvalid, pa.ArrowNotImplementedError):
        ok = bool_mask(pc.match_substring_regex(text, _NUMBER_RE)) & ~missing
        numbers = np.full(n, np.nan)
        if ok.any():
            cast = pc.cast(pc.if_else(pa.array(ok), text, None), pa.float64())
            numbers[ok] = np.asarray(cast.to_numpy(zero_copy_only=False))[ok]
    numbers = np.where(ok, numbers, np.nan)
    errors = np.full(n, "", dtype=object)
    bad = np.flatnonzero(~ok & ~missing)
    if len(bad):
        shown = trimmed.take(pa.array(bad)).to_pylist()
        for i, value in zip(bad, shown, strict=True):
            errors[i] = f"{column}: not a number {quote_value(value)}"
    return ParsedNumbers(numbers, missing, errors)


def drifter_ids(values: object, column: str) -> tuple[np.ndarray, np.ndarray]:
    """Read a column of drifter ids as trimmed text.

    Parameters
    ----------
    values : array_like
        Id cells (text or numbers; numbers are written without ``.0``).
    column : str
        Column name for the error messages.

    Returns
    -------
    ids : numpy.ndarray of object
        The ids; ``""`` where the cell is empty.
    errors : numpy.ndarray of object
        ``"column: no drifter id"`` where the cell is empty or an NA token
        (a fix that belongs to no drifter cannot be used), else ``""``.
    """
    if isinstance(values, pa.ChunkedArray):
        values = values.combine_chunks()
    if isinstance(values, pa.Array) and pa.types.is_floating(values.type):
        whole = pc.equal(values, pc.floor(values))
        as_int = pc.if_else(whole, pc.cast(values, pa.int64(), safe=False).cast(pa.string()),
                            pc.cast(values, pa.string()))
        values = as_int
    raw = as_text_array(values)
    text = pc.utf8_trim_whitespace(raw)
    missing = missing_mask(text, trimmed=True)
    ids = np.asarray(pc.fill_null(text, "").to_numpy(zero_copy_only=False), dtype=object)
    ids[missing] = ""
    errors = np.where(missing, f"{column}: no drifter id", "").astype(object)
    return ids, errors


def join_errors(*messages: np.ndarray) -> np.ndarray:
    """Combine per-row messages, joining the non-empty ones with ``"; "``.

    Parameters
    ----------
    *messages : numpy.ndarray of object
        Arrays of equal length, ``""`` where there is nothing to say.

    Returns
    -------
    numpy.ndarray of object
        The combined messages.

    Examples
    --------
    >>> import numpy as np
    >>> a = np.array(["", "lat: not a number 'x'"], dtype=object)
    >>> b = np.array(["", "lon: not a number 'y'"], dtype=object)
    >>> join_errors(a, b).tolist()
    ['', "lat: not a number 'x'; lon: not a number 'y'"]
    """
    if not messages:
        raise ValueError("nothing to join")
    n = len(messages[0])
    out = np.full(n, "", dtype=object)
    rows = np.zeros(n, dtype=bool)
    for m in messages:
        rows |= np.asarray(m, dtype=object) != ""
    for i in np.flatnonzero(rows):
        out[i] = "; ".join(str(m[i]) for m in messages if m[i] != "")
    return out


def check_lon_convention(
    lon: np.ndarray,
    drifter_id: np.ndarray,
    source_row: np.ndarray,
    file: str,
    column: str,
) -> None:
    """Refuse a drifter whose longitudes mix the 0-360 and -180-180 conventions.

    A drifter with a longitude in (180, 360] and another in [-180, 0) is
    ambiguous: the values cannot both be meant the same way.  Values outside
    [-180, 360] are not a convention but an error, left for QC.

    Parameters
    ----------
    lon : numpy.ndarray
        Longitudes as read, degrees east.
    drifter_id : numpy.ndarray
        Drifter id per row.
    source_row : numpy.ndarray
        Row numbers for the message.
    file : str
        File name for the message.
    column : str
        Longitude column name for the message.

    Raises
    ------
    InputError
        Naming the first row that conflicts with an earlier one.
    """
    lon = np.asarray(lon, dtype=float)
    with np.errstate(invalid="ignore"):
        east = (lon > 180.0) & (lon <= 360.0)
        west = (lon < 0.0) & (lon >= -180.0)
    if not (east.any() and west.any()):
        return
    ids = np.asarray(drifter_id, dtype=object)
    codes, uniques = _factorize(ids)
    for code in np.unique(codes):
        rows = codes == code
        e = np.flatnonzero(east & rows)
        w = np.flatnonzero(west & rows)
        if len(e) and len(w):
            first_e, first_w = e[0], w[0]
            later, earlier = (first_w, first_e) if first_w > first_e else (first_e, first_w)
            raise InputError(
                file,
                f"longitudes of drifter {str(uniques[code])!r} mix the 0..360 and -180..180 "
                f"conventions: {lon[later]:g} here but {lon[earlier]:g} in row "
                f"{int(source_row[earlier])}; use one convention per drifter",
                row=int(source_row[later]),
                column=column,
            )


def _factorize(values: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    codes, uniques = pd.factorize(pd.Series(values, dtype=object))
    return np.asarray(codes), np.asarray(uniques, dtype=object)


def refuse_unreadable_column(
    file: str,
    parsed: np.ndarray,
    errors: np.ndarray,
    source_row: np.ndarray,
    values: dict[str, object],
    roles: ColumnRoles,
    expected: str,
) -> None:
    """Raise when a column has values but not one of them can be read.

    A column whose every present value fails is almost always the wrong
    column or the wrong format, not bad data, so the file is refused rather
    than turned into a table of unparseable rows.

    Parameters
    ----------
    file : str
        File name for the message.
    parsed : numpy.ndarray of bool
        Values that were read.
    errors : numpy.ndarray of object
        ``"column: reason"`` per row, ``""`` where nothing failed.
    source_row : numpy.ndarray
        Row numbers for the message.
    values : dict
        Role to the column's raw values (indexable), to quote the first one.
    roles : ColumnRoles
        Column names of the roles.
    expected : str
        What a readable value looks like.

    Raises
    ------
    InputError
        Naming the column, the first row and its value.
    """
    bad = np.flatnonzero(errors != "")
    if parsed.any() or len(bad) == 0:
        return
    first = int(bad[0])
    blamed = str(errors[first]).split(": ", 1)[0]
    role = next((r for r in roles.index if roles.name(r) == blamed), "time")
    value = values[role][first]
    if isinstance(value, pa.Scalar):
        value = value.as_py()
    noun = "a number" if role in ("lat", "lon") else "a time"
    raise InputError(
        file,
        f"no value in this column is {noun}; expected {expected}, got {quote_value(value)}",
        row=int(source_row[first]),
        column=roles.name(role),
    )
