"""Read GPX 1.1 and 1.0 files (track points and waypoints) into the fixes table.

What is read
------------
* Track points ``gpx/trk/trkseg/trkpt`` and waypoints ``gpx/wpt``, in file
  order.  Routes (``rte/rtept``) are planned positions, not observations,
  and are not read; a file with nothing but routes is refused.
* ``lat`` and ``lon`` attributes (decimal degrees, WGS 84) and the ``time``
  child (ISO 8601; a time without a zone designator is taken as UTC and
  flagged ``time_assumed_utc``).  Other children (``ele``, ``name`` of a
  point, ``extensions``) are ignored.
* The GPX 1.1 namespace ``http://www.topografix.com/GPX/1/1``, the 1.0
  namespace ``http://www.topografix.com/GPX/1/0``, or none: elements count
  when they are in the namespace of the root ``gpx`` element.

Every point is one row.  A point whose ``lat``/``lon`` attribute is missing
or not a number is kept as an unparseable row.  ``source_row`` is the line
number of the point's start tag.  The drifter id is the ``name`` of the
``trk`` when it has one, else ``ReadConfig.drifter_id``, else the file name
without its suffix; waypoints take the latter.

Safety
------
The file is parsed with :mod:`defusedxml` and any document type declaration
is refused: GPX never needs one, and DTDs carry the entity-expansion
("billion laughs") and external-entity attacks.  Nothing is expanded or
fetched before the refusal.
"""

from __future__ import annotations

import xml.sax
from pathlib import Path
from xml.sax.handler import ContentHandler, feature_namespaces

import numpy as np
import pandas as pd
from defusedxml import DTDForbidden, EntitiesForbidden, ExternalReferenceForbidden
from defusedxml.expatreader import DefusedExpatParser

from driftloop.config import ReadConfig
from driftloop.errors import InputError
from driftloop.io.columns import (
    check_lon_convention,
    default_drifter_id,
    join_errors,
    parse_numbers,
)
from driftloop.io.schema import make_fixes
from driftloop.io.timeparse import parse_time_text

__all__ = ["GPX_NAMESPACES", "read_gpx"]

GPX_NAMESPACES = (
    "http://www.topografix.com/GPX/1/1",
    "http://www.topografix.com/GPX/1/0",
)
"""Namespaces of GPX 1.1 and GPX 1.0 (Topografix schemas)."""

_REFUSED = (
    "refused: the file declares XML entities/DTD, which GPX never needs "
    "(possible entity-expansion or external-entity attack)"
)


class _NotGpx(Exception):
    """The root element is not ``gpx``."""

    def __init__(self, root: str) -> None:
        super().__init__(root)
        self.root = root


class _PointCollector(ContentHandler):
    """SAX handler that records every track point and waypoint with its line."""

    def __init__(self) -> None:
        super().__init__()
        self._locator = None
        self._stack: list[str | None] = []  # local names; None for foreign elements
        self._ns: str | None = None
        self._text: list[str] | None = None
        self._point: dict | None = None
        self.points: list[dict] = []
        self.track_names: list[str | None] = []
        self.routes = 0

    def setDocumentLocator(self, locator) -> None:  # noqa: N802 (SAX API name)
        """Keep the locator, to know the line of each element."""
        self._locator = locator

    def line(self) -> int | None:
        """Return the current line number, if known."""
        return None if self._locator is None else self._locator.getLineNumber()

    def startElementNS(self, name, qname, attrs) -> None:  # noqa: N802 (SAX API name)
        """Open an element: note points, tracks, and text worth keeping."""
        uri, local = name
        if not self._stack:
            if local != "gpx":
                raise _NotGpx(local)
            self._ns = uri
            self._stack.append("gpx")
            return
        parent = self._stack[-1]
        mine = uri == self._ns
        self._stack.append(local if mine else None)
        if not mine:
            return
        if local == "trk" and parent == "gpx":
            self.track_names.append(None)
        elif local == "rte" and parent == "gpx":
            self.routes += 1
        elif (local == "trkpt" and parent == "trkseg") or (local == "wpt" and parent == "gpx"):
            self._point = {
                "kind": local,
                "track": len(self.track_names) - 1 if local == "trkpt" else None,
                "line": self.line(),
                "lat": attrs.get((None, "lat")),
                "lon": attrs.get((None, "lon")),
                "time": None,
            }
        elif local == "time" and parent in ("trkpt", "wpt") and self._point is not None:
            self._text = []
        elif local == "name" and parent == "trk":
            self._text = []

    def characters(self, content: str) -> None:
        """Collect text of a ``time`` or track ``name`` element."""
        if self._text is not None:
            self._text.append(content)

    def endElementNS(self, name, qname) -> None:  # noqa: N802 (SAX API name)
        """Close an element: store its text or the finished point."""
        local = self._stack.pop()
        parent = self._stack[-1] if self._stack else None
        if local == "time" and self._text is not None and self._point is not None:
            self._point["time"] = "".join(self._text)
            self._text = None
        elif local == "name" and parent == "trk" and self._text is not None:
            self.track_names[-1] = "".join(self._text).strip() or None
            self._text = None
        elif local in ("trkpt", "wpt") and self._point is not None:
            self.points.append(self._point)
            self._point = None


def read_gpx(path: str | Path, config: ReadConfig) -> pd.DataFrame:
    """Read the track points and waypoints of a GPX file.

    Parameters
    ----------
    path : str or Path
        The input file.
    config : ReadConfig
        ``drifter_id`` names tracks without a ``name`` and waypoints.

    Returns
    -------
    pandas.DataFrame
        One row per point, columns as in :mod:`driftloop.io.schema`.

    Raises
    ------
    InputError
        If the file is empty, is not well-formed XML (the message gives the
        line), is not GPX, declares a DTD or entities, or has no points.
    """
    file = str(path)
    collector = _parse(path, file)
    points = collector.points
    if not points:
        routes = " (it has only routes, rte, which are planned positions, not fixes)"
        raise InputError(
            file,
            "no track points (trk/trkseg/trkpt) or waypoints (wpt) found"
            + (routes if collector.routes else ""),
        )
    fallback = default_drifter_id(path, config)
    ids = np.asarray(
        [
            (collector.track_names[p["track"]] if p["track"] is not None else None) or fallback
            for p in points
        ],
        dtype=object,
    )
    rows = np.asarray([p["line"] or 0 for p in points], dtype=np.int64)
    lat_text = [p["lat"] for p in points]
    lon_text = [p["lon"] for p in points]
    lat = parse_numbers(lat_text, "lat")
    lon = parse_numbers(lon_text, "lon")
    times = parse_time_text([p["time"] for p in points], "time")
    absent = {
        "lat": np.asarray([v is None for v in lat_text]),
        "lon": np.asarray([v is None for v in lon_text]),
    }
    attr_errors = [
        np.where(absent[a], f"{a}: attribute missing", parsed.errors).astype(object)
        for a, parsed in (("lat", lat), ("lon", lon))
    ]
    errors = join_errors(*attr_errors, times.errors)
    check_lon_convention(lon.values, ids, rows, file, "lon")
    raw = np.full(len(points), "", dtype=object)
    for i in np.flatnonzero(errors != ""):
        raw[i] = _point_text(points[i])
    return make_fixes(
        drifter_id=ids,
        time=times.time,
        lat=lat.values,
        lon=lon.values,
        source_file=file,
        source_row=rows,
        time_assumed_utc=times.assumed_utc,
        raw=raw,
        parse_error=errors,
    )


def _point_text(point: dict) -> str:
    """Rebuild a short text of a point for the ``raw`` column."""
    attrs = "".join(f' {a}="{point[a]}"' for a in ("lat", "lon") if point[a] is not None)
    time = f"<time>{point['time']}</time>" if point["time"] is not None else ""
    return f"<{point['kind']}{attrs}>{time}"


def _parse(path: str | Path, file: str) -> _PointCollector:
    try:
        if Path(path).stat().st_size == 0:
            raise InputError(file, "file is empty")
    except OSError as exc:
        raise InputError(file, f"cannot read the file: {exc.strerror or exc}") from exc
    collector = _PointCollector()
    parser = DefusedExpatParser(
        namespaceHandling=1, forbid_dtd=True, forbid_entities=True, forbid_external=True
    )
    parser.setFeature(feature_namespaces, True)
    parser.setContentHandler(collector)
    try:
        parser.parse(str(path))
    except (DTDForbidden, EntitiesForbidden, ExternalReferenceForbidden):
        raise InputError(file, _REFUSED, row=collector.line()) from None
    except xml.sax.SAXParseException as exc:
        raise InputError(
            file,
            f"not well-formed XML: {exc.getMessage()} (line {exc.getLineNumber()}, "
            f"column {exc.getColumnNumber() + 1})",
            row=exc.getLineNumber(),
        ) from None
    except _NotGpx as exc:
        raise InputError(
            file, f"not a GPX file: the root element is <{exc.root}>, expected <gpx>", row=1
        ) from None
    except OSError as exc:
        raise InputError(file, f"cannot read the file: {exc.strerror or exc}") from exc
    return collector
