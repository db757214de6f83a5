"""GeoJSON (RFC 7946) writer with byte-level control of the output.

Butler, H., Daly, M., Doyle, A., Gillies, S., Hagen, S. and Schaub, T.
(2016), *The GeoJSON Format*, IETF RFC 7946.  What this module guarantees:

- positions are ``[longitude, latitude]`` in decimal degrees on WGS 84
  (§3.1.1, §4); no ``crs`` member is written (§4 removed it);
- coordinates are rounded to 1e-6 degree (about 0.1 m), written in plain
  decimal notation without trailing zeros (§11.2 recommends six decimals);
- longitudes lie in [-180, 180] (snapping to the grid keeps geometries
  valid: vertices that fall onto their neighbour are dropped);
  a line or polygon that crosses the
  antimeridian is cut there into a ``MultiLineString`` or ``MultiPolygon``
  (§3.1.9), by the ``antimeridian`` package, which places the cut at the
  great-circle crossing latitude;
- polygon rings follow the right-hand rule: exterior rings counter-clockwise,
  holes clockwise (§3.1.6), enforced with :func:`shapely.geometry.polygon.orient`;
- every feature with a line or polygon geometry, and the collection, carry a
  ``bbox`` ``[west, south, east, north]`` (§5); a box that spans the
  antimeridian has ``west > east`` (§5.2);
- property types are stable per column: numbers stay numbers (NaN and
  infinities become ``null``), times become ISO 8601 strings ending in ``Z``,
  booleans stay booleans, missing values are ``null``;
- key order and feature order are fixed, so the same layer gives the same
  bytes every time; one feature per line;
- run provenance goes in a foreign member ``"driftloop"`` of the
  FeatureCollection (§6.1), and the layer name in the foreign member
  ``"name"``, which GDAL reads as the layer name.
"""

from __future__ import annotations

import json
import math
from collections.abc import Iterable, Mapping
from json.encoder import encode_basestring
from pathlib import Path
from typing import TYPE_CHECKING, Any

import antimeridian
import numpy as np
import pandas as pd
import pyarrow as pa
import pyarrow.compute as pc
import shapely
from shapely.geometry.base import BaseGeometry
from shapely.geometry.polygon import orient

from driftloop.io.writers import atomic_open, float_reprs, format_time, time_texts

if TYPE_CHECKING:
    import geopandas as gpd

__all__ = [
    "COORDINATE_DECIMALS",
    "FULL_CIRCLE_GAP_DEG",
    "BboxAccumulator",
    "GeoJSONWriter",
    "feature_text",
    "conform_geometries",
    "conform_geometry",
    "geojson_bbox",
    "geojson_text",
    "plain_data",
    "property_values",
    "write_geojson",
]

#: Decimals of a degree kept in written coordinates (1e-6 deg ~ 0.11 m).
COORDINATE_DECIMALS = 6

_LINES = ("LineString", "MultiLineString")
_POLYGONS = ("Polygon", "MultiPolygon")
_POINTS = ("Point", "MultiPoint")
#: shapely type ids of points (Point, MultiPoint) and polygons (Polygon, MultiPolygon).
_POINT_IDS = (0, 4)
_POLYGON_IDS = (3, 6)
#: shapely type ids of the other geometries written.
_LINE_ID, _POLYGON_ID, _MULTIPOINT_ID, _MULTILINE_ID, _MULTIPOLYGON_ID = 1, 3, 4, 5, 6


def _wrap_lon(lon: np.ndarray) -> np.ndarray:
    """Bring longitudes into [-180, 180]; values already there keep every bit."""
    lon = np.asarray(lon, dtype=float)
    outside = (lon < -180.0) | (lon > 180.0)
    if not outside.any():
        return lon
    return np.where(outside, (lon + 180.0) % 360.0 - 180.0, lon)


def _wrap_array(geoms: Any) -> Any:
    """Wrap the longitudes of a geometry or geometry array into [-180, 180].

    Geometries whose longitudes all lie there already, and that are 2-D,
    are returned as they are (a transform would copy them unchanged).
    """
    lon = shapely.get_coordinates(geoms)[:, 0]
    if not ((lon < -180.0) | (lon > 180.0)).any() and not np.any(shapely.has_z(geoms)):
        return geoms
    return shapely.transform(
        geoms, lambda xy: np.column_stack([_wrap_lon(xy[:, 0]), xy[:, 1]])
    )


def _crosses_antimeridian(geom: BaseGeometry) -> bool:
    """Whether consecutive vertices of any ring are more than 180° of longitude apart."""
    polygons = geom.geoms if geom.geom_type == "MultiPolygon" else [geom]
    for polygon in polygons:
        for ring in (polygon.exterior, *polygon.interiors):
            lon = np.asarray(ring.coords)[:, 0]
            if lon.size > 1 and np.abs(np.diff(lon)).max() > 180.0:
                return True
    return False


def _may_cross(line: BaseGeometry) -> bool:
    """Whether consecutive vertices of a line are (nearly) 180 degrees of longitude apart.

    :func:`antimeridian.fix_shape` cuts a line where, after dropping vertices
    within 1e-8 degree of the one before, consecutive longitudes differ by
    more than 180; a line whose steps all stay 1e-6 degree below that is
    returned as it was.
    """
    lon = shapely.get_coordinates(line)[:, 0]
    return lon.size > 1 and bool(np.abs(np.diff(lon)).max() > 180.0 - 1e-6)


def _orient_polygons(geom: BaseGeometry) -> BaseGeometry:
    if geom.geom_type == "Polygon":
        return orient(geom, sign=1.0)
    return shapely.MultiPolygon([orient(part, sign=1.0) for part in geom.geoms])


def conform_geometry(geom: BaseGeometry | None) -> BaseGeometry | None:
    """Make a geometry in degrees fit RFC 7946: wrapped, cut at ±180°, right-handed.

    Parameters
    ----------
    geom : shapely geometry or None
        Point, LineString or Polygon (or their Multi forms) with longitude,
        latitude coordinates in degrees.  Longitudes outside [-180, 180]
        are wrapped first; consecutive vertices more than
        180° of longitude apart are taken to cross the antimeridian (the
        short way round), as geodesic tracks and rings do.
        A polygon ring that crosses the antimeridian must run
        counter-clockwise as seen from above (other rings may run either way).

    Returns
    -------
    shapely geometry or None
        The geometry with every longitude in [-180, 180]; lines and polygons
        that crossed the antimeridian are split there into Multi* parts that
        meet at ±180°; polygon exteriors counter-clockwise and holes
        clockwise.  ``None`` for ``None`` or an empty geometry.

    Raises
    ------
    TypeError
        For geometry collections and other unsupported types.

    Notes
    -----
    RFC 7946 §3.1.9 (antimeridian cutting) and §3.1.6 (winding).  The cut
    is made by :func:`antimeridian.fix_shape` (great-circle crossing
    latitude), the winding by :func:`shapely.geometry.polygon.orient`.

    Examples
    --------
    >>> from shapely import LineString
    >>> print(conform_geometry(LineString([(179.5, 10.0), (-179.5, 10.0)])).geom_type)
    MultiLineString
    """
    if geom is None or geom.is_empty:
        return None
    kind = geom.geom_type
    if kind in _POINTS:
        return _wrap_array(geom)
    if kind in _LINES:
        geom = _wrap_array(geom)
        if kind == "LineString" and not _may_cross(geom):
            # antimeridian.fix_shape gives a line that crosses nowhere back unchanged
            return geom
        fixed = shapely.geometry.shape(
            antimeridian.fix_shape(geom, great_circle=True)
        )
        return fixed
    if kind in _POLYGONS:
        geom = _wrap_array(geom)
        if not _crosses_antimeridian(geom):
            return _orient_polygons(geom)
        # fix_winding=False: a ring that crosses the antimeridian can look
        # clockwise in wrapped coordinates; it is taken as given
        # (counter-clockwise on the sphere) and must not be reversed first.
        fixed = shapely.geometry.shape(
            antimeridian.fix_shape(geom, fix_winding=False, great_circle=True)
        )
        return _orient_polygons(fixed)
    raise TypeError(f"cannot write a {kind} as an RFC 7946 layer geometry")


def conform_geometries(geoms: Any) -> np.ndarray:
    """Apply :func:`conform_geometry` to an array of geometries.

    Parameters
    ----------
    geoms : array_like of shapely geometry or None
        For example a :class:`geopandas.GeoSeries`.

    Returns
    -------
    numpy.ndarray
        Object array of conformed geometries (``None`` for missing or empty
        ones).  Points are wrapped in one vectorised step; lines and
        polygons one by one.
    """
    out = _object_array(geoms)
    present = ~shapely.is_missing(out)
    present[present] = ~shapely.is_empty(out[present])
    out[~present] = None
    kinds = np.full(out.shape, -1)
    kinds[present] = shapely.get_type_id(out[present])
    points = np.isin(kinds, _POINT_IDS)
    if points.any():
        out[points] = _wrap_array(out[points])
    others = np.flatnonzero(present & ~points)
    plain = others[_plain_shapes(out[others], kinds[others])]
    lines = plain[kinds[plain] == _LINE_ID]
    polygons = plain[kinds[plain] == _POLYGON_ID]
    if polygons.size:  # conform_geometry orients them and changes nothing else
        out[polygons] = shapely.orient_polygons(out[polygons], exterior_cw=False)
    for k in np.setdiff1d(others, np.concatenate([lines, polygons])):
        out[k] = conform_geometry(out[k])
    return out


def _plain_shapes(geoms: np.ndarray, kinds: np.ndarray) -> np.ndarray:
    """Which LineStrings and Polygons :func:`conform_geometry` need neither wrap nor cut.

    Those are 2-D with every longitude in [-180, 180] and no step between
    consecutive coordinates (the junctions between rings included, which
    only makes the test stricter) as wide as ``180 - 1e-6`` degrees.
    """
    plain = np.isin(kinds, (_LINE_ID, _POLYGON_ID)) & ~shapely.has_z(geoms)
    if not plain.any():
        return plain
    xy, owner = shapely.get_coordinates(geoms, return_index=True)
    lon = xy[:, 0]
    with np.errstate(invalid="ignore"):
        outside = (lon < -180.0) | (lon > 180.0)
        wide = np.abs(np.diff(lon)) > 180.0 - 1e-6
    plain[owner[outside]] = False
    plain[owner[1:][wide & (owner[1:] == owner[:-1])]] = False
    return plain


def _object_array(geoms: Any) -> np.ndarray:
    """Copy geometries into a new object array (a GeoSeries without a Python loop)."""
    values = getattr(geoms, "values", geoms)
    if hasattr(values, "__array__"):
        return np.array(np.asarray(values), dtype=object)
    return np.array(list(values), dtype=object)


def _grid_round(values: np.ndarray) -> np.ndarray:
    """Round finite coordinates to the 1e-6 degree grid exactly as GEOS does.

    GEOS's ``PrecisionModel::makePrecise`` for a grid finer than 1 (which
    :func:`shapely.set_precision` uses) rounds ``value * scale`` half up,
    as Java's ``Math.round`` does, and divides by ``scale``; here
    ``scale = 1e6``.
    """
    scale = 10.0**COORDINATE_DECIMALS
    v = np.asarray(values, dtype=float) * scale
    whole = np.trunc(v)
    frac = np.abs(v - whole)
    up = np.where(frac < 0.5, np.floor(v), np.where(frac > 0.5, np.ceil(v), whole + 1.0))
    down = np.where(frac < 0.5, np.ceil(v), np.where(frac > 0.5, np.floor(v), whole))
    return np.where(v >= 0.0, up, down) / scale


def _round_geometries(geoms: np.ndarray) -> np.ndarray:
    """Snap coordinates to the 1e-6 degree grid, keeping geometries valid.

    :func:`shapely.set_precision` drops vertices that fall onto their
    neighbour and parts that collapse, and may turn rings, so polygons are
    oriented again; geometries that collapse entirely become ``None``.
    """
    out = np.array(geoms, dtype=object)
    present = ~shapely.is_missing(out)
    if not present.any():
        return out
    rest = present.copy()
    points = np.zeros(out.shape, dtype=bool)
    points[present] = shapely.get_type_id(out[present]) == 0
    if points.any() and not shapely.has_z(out[points]).any():
        xy = shapely.get_coordinates(out[points])
        if len(xy) == points.sum() and np.isfinite(xy).all():
            # set_precision moves a point to the grid and does nothing else;
            # points already on it (bit for bit) are kept as they are
            grid = _grid_round(xy)
            moved = (grid.view(np.int64) != xy.view(np.int64)).any(axis=1)
            if moved.any():
                out[np.flatnonzero(points)[moved]] = shapely.points(grid[moved])
            rest &= ~points
    if rest.any():
        out[rest] = shapely.set_precision(out[rest], 10.0**-COORDINATE_DECIMALS)
    present[present] = ~shapely.is_empty(out[present])
    out[~present] = None
    polygons = np.zeros(out.shape, dtype=bool)
    polygons[present] = np.isin(shapely.get_type_id(out[present]), _POLYGON_IDS)
    if polygons.any():
        # the vectorised form of shapely.geometry.polygon.orient(sign=1.0)
        out[polygons] = shapely.orient_polygons(out[polygons], exterior_cw=False)
    return out


#: An extent whose widest uncovered arc of longitude is narrower than this
#: (degrees) is written as the whole circle, -180 .. 180.
FULL_CIRCLE_GAP_DEG = 1e-3


def _lon_extent(west: np.ndarray, east: np.ndarray) -> tuple[float, float]:
    """Smallest longitude range covering closed intervals on the circle.

    ``west[k] <= east[k]`` in [-180, 180]; -180 and 180 are the same
    meridian.  Returns ``(west, east)``, with ``west > east`` when the range
    spans the antimeridian, and ``(-180, 180)`` when no uncovered arc is as
    wide as :data:`FULL_CIRCLE_GAP_DEG` (which also lets a streaming writer
    find the same range from per-bin extremes, see :class:`BboxAccumulator`).
    """
    order = np.argsort(west, kind="stable")
    west, east = west[order], east[order]
    reach = np.maximum.accumulate(east)  # eastern end covered so far
    gaps = west[1:] - reach[:-1]  # uncovered arc before interval k + 1 (if > 0)
    wrap_gap = (west[0] + 180.0) + (180.0 - reach[-1])
    widest = max(wrap_gap, float(gaps.max())) if gaps.size else wrap_gap
    if widest < FULL_CIRCLE_GAP_DEG:
        return -180.0, 180.0
    if gaps.size == 0 or wrap_gap >= gaps.max():
        return float(west[0]), float(reach[-1])
    k = int(np.argmax(gaps))
    return float(west[k + 1]), float(reach[k])


class BboxAccumulator:
    """The :func:`geojson_bbox` of geometries added a chunk at a time, in fixed memory.

    Each added box goes to one of :data:`BINS` bins of longitude by its
    western edge; a bin keeps its smallest western and largest eastern edge.
    Every uncovered arc between bins is then exact, and arcs hidden inside a
    bin are narrower than a bin (0.0007 degrees), below
    :data:`FULL_CIRCLE_GAP_DEG`, so the result equals :func:`geojson_bbox`
    of all the geometries at once.
    """

    #: Number of longitude bins.
    BINS = 1 << 19

    #: Boxes kept as they are before the bins are set up.
    KEEP = 100_000

    def __init__(self) -> None:
        self._kept: list[np.ndarray] = []
        self._n_kept = 0
        self._west: np.ndarray | None = None
        self._east: np.ndarray | None = None
        self._south = np.inf
        self._north = -np.inf
        self._any = False

    def add(self, geoms: Iterable[BaseGeometry | None]) -> None:
        """Add conformed, rounded geometries (``None`` entries are skipped).

        Parameters
        ----------
        geoms : iterable of shapely geometry or None
            As :func:`geojson_bbox` takes them.
        """
        self.add_boxes(_boxes(geoms))

    def add_boxes(self, box: np.ndarray | None) -> None:
        """Add boxes ``[west, south, east, north]`` (rows of an (n, 4) array).

        Parameters
        ----------
        box : numpy.ndarray or None
            As :func:`feature_text` returns them; None adds nothing.
        """
        if box is None or len(box) == 0:
            return
        self._any = True
        self._south = min(self._south, float(box[:, 1].min()))
        self._north = max(self._north, float(box[:, 3].max()))
        if self._west is None:
            self._kept.append(box)
            self._n_kept += len(box)
            if self._n_kept <= self.KEEP:
                return
            box = np.vstack(self._kept)
            self._kept = []
            self._west = np.full(self.BINS, np.inf)
            self._east = np.full(self.BINS, -np.inf)
        k = np.clip(((box[:, 0] + 180.0) * (self.BINS / 360.0)).astype(np.int64), 0,
                    self.BINS - 1)
        np.minimum.at(self._west, k, box[:, 0])
        np.maximum.at(self._east, k, box[:, 2])

    def bbox(self) -> list[float] | None:
        """Return ``[west, south, east, north]``, or None when nothing was added.

        Returns
        -------
        list of float or None
            As :func:`geojson_bbox`.
        """
        if not self._any:
            return None
        if self._west is None:
            box = np.vstack(self._kept)
            west, east = _lon_extent(box[:, 0], box[:, 2])
        else:
            used = np.isfinite(self._west)
            west, east = _lon_extent(self._west[used], self._east[used])
        return [west, self._south, east, self._north]


def _boxes(geoms: Iterable[BaseGeometry | None]) -> np.ndarray | None:
    """``[west, south, east, north]`` of every point and part, or None if there is none."""
    array = _object_array(geoms)
    array = array[~shapely.is_missing(array)]
    array = array[~shapely.is_empty(array)]
    if array.size == 0:
        return None
    points = shapely.get_type_id(array) == 0
    xy = shapely.get_coordinates(array[points])  # a point is its own box
    parts = shapely.get_parts(array[~points])
    return np.vstack([np.column_stack([xy, xy]), shapely.bounds(parts).reshape(-1, 4)])


def geojson_bbox(geoms: Iterable[BaseGeometry | None]) -> list[float] | None:
    """Bounding box ``[west, south, east, north]`` of conformed geometries.

    Parameters
    ----------
    geoms : iterable of shapely geometry or None
        Geometries as returned by :func:`conform_geometry` (longitudes in
        [-180, 180], cut at the antimeridian); ``None`` entries are skipped.

    Returns
    -------
    list of float or None
        Degrees.  The longitude range is the shortest arc that covers every
        part, so a box across the antimeridian has ``west > east`` (RFC 7946
        §5.2) and one covering all longitudes is ``-180 .. 180``.  ``None``
        when there is no geometry.

    Examples
    --------
    >>> from shapely import LineString
    >>> cut = conform_geometry(LineString([(179.5, 10.0), (-179.5, 11.0)]))
    >>> geojson_bbox([cut])
    [179.5, 10.0, -179.5, 11.0]
    """
    box = _boxes(geoms)
    if box is None:
        return None
    west, east = _lon_extent(box[:, 0], box[:, 2])
    return [west, float(box[:, 1].min()), east, float(box[:, 3].max())]


def _number(value: float) -> str:
    text = f"{value:.{COORDINATE_DECIMALS}f}".rstrip("0").rstrip(".")
    return "0" if text in ("-0", "") else text


#: Integer digits that :func:`_decimal_chars` lays out (|value| below 1e9).
_INT_DIGITS = 9
#: Characters of one number in :func:`_decimal_chars`: sign, integer digits, point, decimals.
_WIDTH = 1 + _INT_DIGITS + 1 + COORDINATE_DECIMALS
#: Place values of the digits of ``round(|value| * 10**COORDINATE_DECIMALS)``, largest first.
_PLACES = 10 ** np.arange(_INT_DIGITS + COORDINATE_DECIMALS - 1, -1, -1, dtype=np.int64)
#: Largest scaled magnitude formatted arithmetically (exact in float64, below 2**53).
_FAST_MAX = float(10 ** (_INT_DIGITS + COORDINATE_DECIMALS) - 1)


def _decimal_chars(values: Any) -> tuple[np.ndarray, np.ndarray] | None:
    """Lay out the :func:`_number` texts of many values as a grid of ASCII characters.

    Parameters
    ----------
    values : array_like of float
        Flattened in C order.

    Returns
    -------
    tuple of numpy.ndarray or None
        ``chars`` (uint8, one row of :data:`_WIDTH` characters per value) and
        ``keep`` (bool, same shape): the text of value ``i`` is
        ``chars[i][keep[i]]``.  None when some text is longer than a row.

    Notes
    -----
    ``format(x, ".6f")`` (Python's correctly rounded fixed-point
    formatting) writes the integer nearest to the exact product
    ``|x| * 10**6`` with its last six digits after the point.  That integer
    is found here as ``rint(|x| * 1e6)`` in float64: the product is
    rounded by at most half a unit in its last place, which cannot move it
    across a half-integer unless its fraction lies within a few units in the
    last place of one half.  Such values, those above :data:`_FAST_MAX`
    after scaling, and NaN and infinities go through :func:`_number` one by
    one.  The digits are then cut out of the integer with integer
    arithmetic; the sign is written for a negative value whose rounded
    magnitude is not zero, the point and decimals up to the last non-zero
    one, as :func:`_number` strips trailing zeros and writes ``-0`` as
    ``0``.
    """
    v = np.asarray(values, dtype=float).ravel()
    with np.errstate(invalid="ignore", over="ignore"):
        scaled = np.abs(v) * 10.0**COORDINATE_DECIMALS
        frac = scaled - np.floor(scaled)
        fast = (scaled <= _FAST_MAX) & (
            np.abs(frac - 0.5) > 4.0 * np.spacing(scaled) + 1e-9
        )
    units = np.rint(np.where(fast, scaled, 0.0)).astype(np.int64)
    digits = (units[:, None] // _PLACES) % 10
    point = 1 + _INT_DIGITS
    chars = np.empty((v.size, _WIDTH), dtype=np.uint8)
    chars[:, 0] = ord("-")
    chars[:, 1:point] = digits[:, :_INT_DIGITS] + ord("0")
    chars[:, point] = ord(".")
    chars[:, point + 1:] = digits[:, _INT_DIGITS:] + ord("0")
    keep = np.empty((v.size, _WIDTH), dtype=bool)
    keep[:, 0] = (v < 0.0) & (units > 0)
    keep[:, 1:point] = units[:, None] >= _PLACES[:_INT_DIGITS]
    keep[:, point - 1] = True  # the units digit
    decimals = units % _PLACES[_INT_DIGITS - 1]
    keep[:, point] = decimals != 0
    keep[:, point + 1:] = (decimals[:, None] % (10 * _PLACES[_INT_DIGITS:])) != 0
    columns = np.arange(_WIDTH)
    for i in np.flatnonzero(~fast):
        text = _number(float(v[i])).encode("ascii")
        if len(text) > _WIDTH:
            return None
        chars[i, : len(text)] = np.frombuffer(text, dtype=np.uint8)
        keep[i] = columns < len(text)
    return chars, keep


def _number_texts(values: Any) -> list[str]:
    """:func:`_number` of every value (flattened in C order), formatted together."""
    grid = _decimal_chars(values)
    if grid is None:
        return [_number(x) for x in np.asarray(values, dtype=float).ravel().tolist()]
    chars, keep = grid
    text = chars[keep].tobytes().decode("ascii")
    ends = np.cumsum(keep.sum(axis=1)).tolist()
    return [text[a:b] for a, b in zip([0, *ends][:-1], ends, strict=True)]


def _position_runs(xy: np.ndarray) -> tuple[str, list[int]]:
    """Text ``,[x,y]`` of every position, concatenated, and where each one ends.

    The positions ``a`` to ``b - 1`` are written as a JSON array by
    :func:`_run_text`.
    """
    xy = np.asarray(xy, dtype=float)[:, :2]
    n = len(xy)
    grid = _decimal_chars(xy) if n else None
    if grid is None:
        pieces = [f",[{_number(x)},{_number(y)}]" for x, y in xy.tolist()]
        return "".join(pieces), np.cumsum([len(p) for p in pieces], dtype=np.int64).tolist()
    chars, keep = grid
    w = _WIDTH
    row = np.empty((n, 2 * w + 4), dtype=np.uint8)
    used = np.ones((n, 2 * w + 4), dtype=bool)
    row[:, 0], row[:, 1], row[:, 2 + w], row[:, -1] = ord(","), ord("["), ord(","), ord("]")
    row[:, 2:2 + w], used[:, 2:2 + w] = chars[0::2], keep[0::2]
    row[:, 3 + w:3 + 2 * w], used[:, 3 + w:3 + 2 * w] = chars[1::2], keep[1::2]
    return row[used].tobytes().decode("ascii"), np.cumsum(used.sum(axis=1)).tolist()


def _run_text(text: str, ends: list[int], a: int, b: int) -> str:
    """JSON array of the positions ``a`` to ``b - 1`` of :func:`_position_runs`."""
    if b <= a:
        return "[]"
    return "[" + text[(ends[a - 1] if a else 0) + 1 : ends[b - 1]] + "]"


def _positions(coords: Any) -> str:
    xy = np.asarray(coords, dtype=float)[:, :2]
    return "[" + ",".join(f"[{_number(x)},{_number(y)}]" for x, y in xy) + "]"


def _geometry_json(geom: BaseGeometry | None) -> str:
    """RFC 7946 geometry object text of an already conformed, rounded geometry."""
    if geom is None:
        return "null"
    kind = geom.geom_type
    if kind == "Point":
        coordinates = _positions(geom.coords)[1:-1]
    elif kind == "LineString":
        coordinates = _positions(geom.coords)
    elif kind == "Polygon":
        coordinates = _rings(geom)
    elif kind == "MultiPoint":
        coordinates = "[" + ",".join(_positions(p.coords)[1:-1] for p in geom.geoms) + "]"
    elif kind == "MultiLineString":
        coordinates = "[" + ",".join(_positions(p.coords) for p in geom.geoms) + "]"
    elif kind == "MultiPolygon":
        coordinates = "[" + ",".join(_rings(p) for p in geom.geoms) + "]"
    else:
        raise TypeError(f"cannot write a {kind} as an RFC 7946 geometry")
    return f'{{"type":"{kind}","coordinates":{coordinates}}}'


def _rings(polygon: shapely.Polygon) -> str:
    rings = [polygon.exterior, *polygon.interiors]
    return "[" + ",".join(_positions(ring.coords) for ring in rings) + "]"


def _scalar(value: Any) -> Any:
    """One property value as a JSON-ready Python object."""
    if value is None or value is pd.NA or value is pd.NaT:
        return None
    if isinstance(value, bool | np.bool_):
        return bool(value)
    if isinstance(value, int | np.integer):
        return int(value)
    if isinstance(value, float | np.floating):
        return float(value) if math.isfinite(value) else None
    if isinstance(value, pd.Timestamp | np.datetime64):
        stamp = pd.Timestamp(value)
        if pd.isna(stamp):
            return None
        stamp = stamp.tz_localize("UTC") if stamp.tzinfo is None else stamp.tz_convert("UTC")
        return format_time(pd.Series([stamp])).iloc[0]
    if isinstance(value, str):
        return value
    return str(value)


def property_values(series: pd.Series) -> list[Any]:
    """Convert one column to JSON-ready values of one type.

    Parameters
    ----------
    series : pandas.Series
        A property column.

    Returns
    -------
    list
        One value per row: ``int`` for integer columns, ``float`` for float
        columns (NaN and infinities as ``None``), ``bool`` for boolean
        columns, ISO 8601 strings ending in ``Z`` for datetime columns
        (naive times are taken as UTC), ``str`` otherwise; ``None`` where a
        value is missing.

    Examples
    --------
    >>> property_values(pd.Series([1.5, float("nan")]))
    [1.5, None]
    >>> property_values(pd.Series(pd.to_datetime(["2024-03-01T06:00:00Z"])))
    ['2024-03-01T06:00:00Z']
    """
    dtype = series.dtype
    missing = series.isna().to_numpy()
    if pd.api.types.is_datetime64_any_dtype(dtype):
        times = series if getattr(dtype, "tz", None) is not None else series.dt.tz_localize("UTC")
        text = format_time(times.dt.tz_convert("UTC"))
        return [None if gone else str(t) for t, gone in zip(text, missing, strict=True)]
    if pd.api.types.is_bool_dtype(dtype) or pd.api.types.is_integer_dtype(dtype):
        kind = bool if pd.api.types.is_bool_dtype(dtype) else int
        if not missing.any():
            return [kind(v) for v in series.to_numpy().tolist()]
        return [None if gone else kind(v) for v, gone in zip(series, missing, strict=True)]
    if pd.api.types.is_float_dtype(dtype):
        values = series.to_numpy(dtype=float, na_value=np.nan)
        out = values.astype(object)
        out[~np.isfinite(values)] = None
        return out.tolist()
    if pd.api.types.is_string_dtype(dtype) and not pd.api.types.is_object_dtype(dtype):
        out = series.to_numpy(dtype=object, na_value=None)
        return [None if v is None else str(v) for v in out.tolist()]
    return [_scalar(v) for v in series]


def plain_data(value: Any) -> Any:
    """Convert nested data to plain JSON data.

    Parameters
    ----------
    value : object
        Mappings, sequences and scalars (NumPy scalars, paths, timestamps).

    Returns
    -------
    object
        Dicts with string keys, lists, and JSON scalars; NaN becomes
        ``None``, times ISO 8601 strings with ``Z``, paths strings.

    Examples
    --------
    >>> import numpy as np
    >>> plain_data({"n": np.int64(3), "x": (np.float32(0.5), float("nan"))})
    {'n': 3, 'x': [0.5, None]}
    """
    if isinstance(value, Mapping):
        return {str(k): plain_data(v) for k, v in value.items()}
    if isinstance(value, list | tuple):
        return [plain_data(v) for v in value]
    if isinstance(value, Path):
        return str(value)
    return _scalar(value)


_ENCODER = json.JSONEncoder(ensure_ascii=False, allow_nan=False, separators=(",", ":"))


def _dumps(value: Any) -> str:
    return _ENCODER.encode(value)


_VALUE_TEXT = {
    type(None): lambda v: "null",
    bool: lambda v: "true" if v else "false",
    int: int.__repr__,
    float: float.__repr__,  # as the json module writes finite floats
    str: encode_basestring,
}


def _value_texts(values: list[Any]) -> list[str]:
    """JSON texts of one property column's values (from property_values)."""
    kinds = set(map(type, values))
    if len(kinds) == 1:
        return list(map(_VALUE_TEXT[kinds.pop()], values))
    return [_VALUE_TEXT[type(v)](v) for v in values]


def _column_texts(series: pd.Series, arrow: bool = False) -> Any:
    """JSON texts of one property column: those of :func:`property_values`, made in Arrow.

    A list of str, or an Arrow array for float and time columns when
    ``arrow`` is true.  Floats are Python's ``repr`` (as the json module writes them,
    :func:`driftloop.io.writers.float_reprs`) or ``null``; times their
    :func:`format_time` string in quotes (nothing in it needs escaping) or
    ``null``; other columns go through :func:`property_values`.
    """
    dtype = series.dtype
    if pd.api.types.is_float_dtype(dtype):
        values = series.to_numpy(dtype=float, na_value=np.nan)
        text = float_reprs(values)
        missing = ~np.isfinite(values)
    elif pd.api.types.is_datetime64_any_dtype(dtype):
        times = series if getattr(dtype, "tz", None) is not None else series.dt.tz_localize("UTC")
        quote = pa.scalar('"', pa.large_string())
        text = pc.binary_join_element_wise(quote, time_texts(times.dt.tz_convert("UTC")), quote,
                                           pa.scalar("", pa.large_string()))
        missing = series.isna().to_numpy()
    else:
        return _value_texts(property_values(series))
    if missing.any():
        text = pc.if_else(pa.array(missing), pa.scalar("null", pa.large_string()), text)
    return text if arrow else text.to_pylist()


_LARGE = pa.large_string()
#: Characters the json module escapes in a string (ensure_ascii=False).
_JSON_ESCAPED = r'[\x00-\x1f"\\]'


def _large(text: str) -> pa.Scalar:
    return pa.scalar(text, _LARGE)


def _column_array(series: pd.Series) -> pa.Array:
    """:func:`_column_texts` of a column as an Arrow ``large_string`` array.

    Integers are their decimal text, booleans ``true`` or ``false``,
    strings are quoted, with the json module's escapes where a string holds
    a quote, a backslash or a control character (``null`` where missing).
    """
    dtype = series.dtype
    if isinstance(dtype, np.dtype) and dtype.kind in "iu":
        return pc.cast(pa.array(series.to_numpy()), _LARGE)
    if isinstance(dtype, np.dtype) and dtype.kind == "b":
        return pc.if_else(pa.array(series.to_numpy()), _large("true"), _large("false"))
    if isinstance(dtype, pd.StringDtype):
        array = pa.array(series.array)
        if isinstance(array, pa.ChunkedArray):
            array = array.combine_chunks()
        array = array.cast(_LARGE)
        text = pc.binary_join_element_wise(_large('"'), array, _large('"'), _large(""))
        escaped = np.asarray(pc.fill_null(pc.match_substring_regex(array, _JSON_ESCAPED), False),
                             dtype=bool)
        if escaped.any():
            values = np.asarray(array.to_pylist(), dtype=object)[escaped]
            text = pc.replace_with_mask(text, pa.array(escaped),
                                        pa.array([encode_basestring(v) for v in values], _LARGE))
        return pc.fill_null(text, _large("null"))
    if pd.api.types.is_float_dtype(dtype) or pd.api.types.is_datetime64_any_dtype(dtype):
        return _column_texts(series, arrow=True)
    return pa.array(_value_texts(property_values(series)), _LARGE)


def _member_texts(name: str, values: list[Any]) -> list[str]:
    """``"name":value`` JSON texts of one property column (values from property_values)."""
    key = encode_basestring(name) + ":"
    return list(map(key.__add__, _value_texts(values)))


def _geometry_texts(geoms: np.ndarray) -> list[str]:
    """Geometry object texts, as :func:`_geometry_json` writes them one by one.

    The coordinates of all points, and then of all other geometries, are
    formatted in one pass each (:func:`_position_runs`); each line, ring or
    multi-point is then a slice of that text.
    """
    texts = ["null"] * len(geoms)
    present = ~shapely.is_missing(geoms)
    kinds = np.full(len(geoms), -1)
    kinds[present] = shapely.get_type_id(geoms[present])
    points = np.flatnonzero(kinds == 0)
    if points.size:
        xy = shapely.get_coordinates(geoms[points])
        if len(xy) != points.size:
            raise ValueError("cannot write an empty point")
        text, ends = _position_runs(xy)
        head = '{"type":"Point","coordinates":'
        for k, a, b in zip(points.tolist(), [0, *ends][:-1], ends, strict=True):
            texts[k] = head + text[a + 1 : b] + "}"
    others = np.flatnonzero(present & (kinds != 0))
    if not others.size:
        return texts
    shapes = geoms[others]
    for k in np.flatnonzero(~np.isin(kinds[others], (_LINE_ID, _POLYGON_ID, _MULTIPOINT_ID,
                                                      _MULTILINE_ID, _MULTIPOLYGON_ID))):
        _geometry_json(shapes[k])  # raises TypeError for the unsupported type
    text, ends = _position_runs(shapely.get_coordinates(shapes))
    cursor = 0

    def run(n: int) -> str:
        nonlocal cursor
        cursor += n
        return _run_text(text, ends, cursor - n, cursor)

    def rings(polygon: BaseGeometry) -> str:
        counts = shapely.get_num_coordinates(shapely.get_rings(polygon)).tolist()
        return "[" + ",".join([run(n) for n in counts]) + "]"

    for k, geom, kind in zip(others.tolist(), shapes, kinds[others].tolist(), strict=True):
        if kind in (_LINE_ID, _MULTIPOINT_ID):
            coordinates = run(int(shapely.get_num_coordinates(geom)))
        elif kind == _POLYGON_ID:
            coordinates = rings(geom)
        elif kind == _MULTILINE_ID:
            counts = shapely.get_num_coordinates(shapely.get_parts(geom)).tolist()
            coordinates = "[" + ",".join([run(n) for n in counts]) + "]"
        else:
            coordinates = "[" + ",".join([rings(p) for p in shapely.get_parts(geom)]) + "]"
        texts[k] = f'{{"type":"{geom.geom_type}","coordinates":{coordinates}}}'
    return texts


def _bbox_texts(geoms: np.ndarray) -> list[str]:
    """``bbox`` member texts of single conformed, rounded geometries (none missing).

    Each is ``_bbox_json(geojson_bbox([geom]))``; for a geometry of one part
    the box is that part's bounds, with the longitude range widened to the
    whole circle by the rule of :func:`_lon_extent`, computed for all such
    geometries at once.
    """
    parts, owner = shapely.get_parts(geoms, return_index=True)
    bounds = shapely.bounds(parts).reshape(-1, 4)
    count = np.bincount(owner, minlength=len(geoms))
    single = np.flatnonzero(count == 1)
    boxes = np.full((len(geoms), 4), np.nan)
    west, south, east, north = bounds[np.searchsorted(owner, single)].T
    full = (west + 180.0) + (180.0 - east) < FULL_CIRCLE_GAP_DEG  # as _lon_extent
    boxes[single] = np.column_stack([np.where(full, -180.0, west), south,
                                     np.where(full, 180.0, east), north])
    numbers = _number_texts(boxes)
    texts = ["[" + ",".join(numbers[4 * j : 4 * j + 4]) + "]" for j in range(len(geoms))]
    for j in np.flatnonzero(count != 1):
        texts[j] = _bbox_json(geojson_bbox([geoms[j]]))
    return texts


def _bbox_json(box: list[float]) -> str:
    return "[" + ",".join(_number(v) for v in box) + "]"


def geojson_text(
    layer: gpd.GeoDataFrame,
    *,
    name: str | None = None,
    provenance: Mapping[str, Any] | None = None,
) -> str:
    """Serialise a layer as an RFC 7946 FeatureCollection.

    Parameters
    ----------
    layer : geopandas.GeoDataFrame
        Features in longitude/latitude degrees on WGS 84 (CRS EPSG:4326,
        OGC:CRS84 or unset); every non-geometry column becomes a property,
        in column order.
    name : str, optional
        Layer name, written as the foreign member ``"name"``.
    provenance : mapping, optional
        Written as the foreign member ``"driftloop"`` of the collection.

    Returns
    -------
    str
        The GeoJSON text: the collection members on the first line, then one
        feature per line, ending with a newline.

    Raises
    ------
    ValueError
        If the layer has a CRS other than WGS 84 longitude/latitude.
    """
    lines, geoms = _feature_array(layer)
    features = ("\"features\":[\n" + _joined(lines, ",\n") + "\n]" if len(lines)
                else '"features":[]')
    return _head(name, provenance, geojson_bbox(geoms)) + features + "}\n"


def _check_crs(layer: gpd.GeoDataFrame) -> None:
    crs = layer.crs
    if crs is not None and crs.to_epsg() != 4326 and not crs.equals("OGC:CRS84"):
        raise ValueError(f"RFC 7946 GeoJSON is WGS 84 longitude/latitude only, not {crs.name}")


def _head(name: str | None, provenance: Mapping[str, Any] | None,
          box: list[float] | None) -> str:
    """Return the collection's members before ``"features"``, with the brace and comma."""
    head: list[str] = ['"type":"FeatureCollection"']
    if name is not None:
        head.append(f'"name":{_dumps(name)}')
    if provenance is not None:
        head.append(f'"driftloop":{_dumps(plain_data(provenance))}')
    if box is not None:
        head.append(f'"bbox":{_bbox_json(box)}')
    return "{" + ",".join(head) + ","


def _feature_lines(layer: gpd.GeoDataFrame) -> tuple[list[str], np.ndarray]:
    """One text line per feature, and the conformed, rounded geometries."""
    lines, geoms = _feature_array(layer)
    return lines.to_pylist(), geoms


def _joined(lines: pa.Array, separator: str) -> str:
    """Join the texts of an Arrow string array by a separator."""
    if len(lines) == 0:
        return ""
    ended = pc.binary_join_element_wise(lines, _large(""), _large(separator))
    offsets = np.frombuffer(ended.buffers()[1], dtype=np.int64)[ended.offset:]
    data = ended.buffers()[2]
    text = data[int(offsets[0]):int(offsets[len(ended)])].to_pybytes().decode("utf-8")
    return text[: len(text) - len(separator)]


def _point_array(geoms: np.ndarray) -> pa.Array | None:
    """Geometry texts of a layer whose geometries are points or missing, in Arrow; else None."""
    present = ~shapely.is_missing(geoms)
    kinds = shapely.get_type_id(geoms[present])
    if not (kinds == 0).all():
        return None
    xy = shapely.get_coordinates(geoms[present])
    if len(xy) != int(present.sum()):
        return None
    text, ends = _position_runs(xy)
    data = text.encode("ascii")
    offsets = np.concatenate([[0], np.asarray(ends, dtype=np.int64)])
    runs = pa.LargeStringArray.from_buffers(len(xy), pa.py_buffer(offsets.tobytes()),
                                            pa.py_buffer(data))
    points = pc.binary_join_element_wise(_large('{"type":"Point","coordinates":'),
                                         pc.utf8_slice_codeunits(runs, 1), _large("}"),
                                         _large(""))
    if present.all():
        return points
    out = pc.replace_with_mask(pa.nulls(len(geoms), _LARGE), pa.array(present), points)
    return pc.fill_null(out, _large("null"))


def _feature_array(layer: gpd.GeoDataFrame) -> tuple[pa.Array, np.ndarray]:
    """:func:`_feature_lines` as an Arrow array: the lines assembled column-wise in Arrow.

    Tables Arrow cannot hold (strings with lone surrogates) go through
    :func:`_feature_list`.
    """
    _check_crs(layer)
    geometry_name = layer.geometry.name
    columns = [c for c in layer.columns if c != geometry_name]
    geoms = _round_geometries(conform_geometries(layer.geometry))
    try:
        values = [_column_array(layer[c]) for c in columns]
        geometry = _point_array(geoms)
        if geometry is None:
            geometry = pa.array(_geometry_texts(geoms), _LARGE)
    except (pa.ArrowException, UnicodeError):
        return pa.array(_feature_list(layer, columns, geoms), _LARGE), geoms
    keys = [encode_basestring(str(c)) + ":" for c in columns]
    pieces = []
    for k, (key, value) in enumerate(zip(keys, values, strict=True)):
        pieces += [_large(("" if k else '{"type":"Feature","properties":{') + ("," if k else "")
                          + key), value]
    pieces += [_large(("}" if columns else '{"type":"Feature","properties":{}')
                      + ',"geometry":'), geometry, _large("}")]
    lines = pc.binary_join_element_wise(*pieces, _large(""))
    present = ~shapely.is_missing(geoms)
    kinds = np.full(len(geoms), -1)
    kinds[present] = shapely.get_type_id(geoms[present])
    boxed = present & ~np.isin(kinds, _POINT_IDS)
    if boxed.any():
        head = '{"type":"Feature",'
        framed = pc.take(lines, pa.array(np.flatnonzero(boxed))).to_pylist()
        texts = [head + '"bbox":' + box + "," + line[len(head):]
                 for box, line in zip(_bbox_texts(geoms[boxed]), framed, strict=True)]
        lines = pc.replace_with_mask(lines, pa.array(boxed), pa.array(texts, _LARGE))
    return lines, geoms


def _feature_list(layer: gpd.GeoDataFrame, columns: list, geoms: np.ndarray) -> list[str]:
    """Format the feature lines as Python strings (for tables Arrow cannot hold)."""
    texts = _geometry_texts(geoms)
    # each line is a %-template of the member keys filled with the value texts
    members = ",".join(encode_basestring(str(c)).replace("%", "%%") + ":%s" for c in columns)
    columns_text = [_column_texts(layer[c]) for c in columns]
    plain = '{"type":"Feature","properties":{' + members + '},"geometry":%s}'
    lines = [plain % row for row in zip(*columns_text, texts, strict=True)]
    present = ~shapely.is_missing(geoms)
    kinds = np.full(len(geoms), -1)
    kinds[present] = shapely.get_type_id(geoms[present])
    boxed = np.flatnonzero(present & ~np.isin(kinds, _POINT_IDS))
    if boxed.size:
        framed = '{"type":"Feature","bbox":%s,"properties":{' + members + '},"geometry":%s}'
        for k, box in zip(boxed.tolist(), _bbox_texts(geoms[boxed]), strict=True):
            lines[k] = framed % (box, *[column[k] for column in columns_text], texts[k])
    return lines


def feature_text(layer: gpd.GeoDataFrame) -> tuple[str, int, np.ndarray | None]:
    """Format the features of a layer (chunk) for :class:`GeoJSONWriter`.

    Parameters
    ----------
    layer : geopandas.GeoDataFrame
        As :func:`geojson_text` takes it.

    Returns
    -------
    text : str
        One feature per line, the lines joined by a comma and a line break.
    count : int
        Number of features.
    boxes : numpy.ndarray or None
        ``[west, south, east, north]`` of every point and part, for the
        collection's bounding box.
    """
    _check_crs(layer)
    if len(layer) == 0:
        return "", 0, None
    lines, geoms = _feature_array(layer)
    return _joined(lines, ",\n"), len(lines), _boxes(geoms)


class GeoJSONWriter:
    """Write a GeoJSON layer a chunk of features at a time.

    The bytes are those of :func:`write_geojson` of the whole layer.

    Feature lines go to an anonymous temporary file as they come, and the
    collection's bounding box is accumulated (:class:`BboxAccumulator`); at
    :meth:`commit` the head (which holds the box) and the features are
    written to the usual temporary file and renamed over the target.

    Parameters
    ----------
    path : str or Path
        Destination file.
    name : str, optional
        Layer name (foreign member ``"name"``).
    provenance : mapping, optional
        Run provenance (foreign member ``"driftloop"``).
    """

    def __init__(self, path: str | Path, *, name: str | None = None,
                 provenance: Mapping[str, Any] | None = None) -> None:
        import tempfile

        self.path = Path(path)
        self.path.parent.mkdir(parents=True, exist_ok=True)
        self.name = name
        self.provenance = provenance
        self._body = tempfile.TemporaryFile(dir=self.path.parent)
        self._box = BboxAccumulator()
        self.features = 0

    def append(self, layer: gpd.GeoDataFrame) -> None:
        """Add the features of a layer chunk, in order.

        Parameters
        ----------
        layer : geopandas.GeoDataFrame
            As :func:`geojson_text` takes it; every chunk has the same columns.
        """
        self.append_text(*feature_text(layer))

    def append_text(self, text: str, count: int, boxes: np.ndarray | None) -> None:
        """Add features already formatted by :func:`feature_text`.

        Parameters
        ----------
        text : str
            The feature lines, joined by a comma and a line break.
        count : int
            Number of features.
        boxes : numpy.ndarray or None
            Their boxes.
        """
        if not count:
            return
        self._body.write((",\n" + text if self.features else text).encode("utf-8"))
        self.features += count
        self._box.add_boxes(boxes)

    def commit(self) -> Path:
        """Write the file atomically and return its path.

        Returns
        -------
        Path
            The file written.
        """
        import shutil

        head = _head(self.name, self.provenance, self._box.bbox())
        with atomic_open(self.path, "wb") as handle:
            handle.write(head.encode("utf-8"))
            if self.features:
                handle.write(b'"features":[\n')
                self._body.seek(0)
                shutil.copyfileobj(self._body, handle, 1 << 20)
                handle.write(b"\n]}\n")
            else:
                handle.write(b'"features":[]}\n')
        self._body.close()
        return self.path

    def abort(self) -> None:
        """Drop what was written."""
        self._body.close()


def write_geojson(
    path: str | Path,
    layer: gpd.GeoDataFrame,
    *,
    name: str | None = None,
    provenance: Mapping[str, Any] | None = None,
) -> Path:
    """Write a layer as an RFC 7946 GeoJSON file, atomically.

    Parameters
    ----------
    path : str or Path
        Destination file (``.geojson``).
    layer : geopandas.GeoDataFrame
        See :func:`geojson_text`.
    name : str, optional
        Layer name (foreign member ``"name"``).
    provenance : mapping, optional
        Run provenance (foreign member ``"driftloop"``).

    Returns
    -------
    Path
        The file written (UTF-8, Unix line ends).
    """
    text = geojson_text(layer, name=name, provenance=provenance)
    with atomic_open(path, "wb") as handle:
        handle.write(text.encode("utf-8"))
    return Path(path)
