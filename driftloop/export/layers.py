"""GIS layers built from driftloop's tables, as GeoDataFrames on EPSG:4326.

Five layers, each a :class:`geopandas.GeoDataFrame` in longitude/latitude
degrees on WGS 84 with geometries already fit for RFC 7946 (longitudes in
[-180, 180], cut at the antimeridian, polygons counter-clockwise; see
:func:`driftloop.export.geojson.conform_geometry`), so that every format
written from them draws the same on a map:

``fixes``
    One point per fix, every row of the fixes table (``FIXES_CSV_COLUMNS``)
    kept; a fix without a usable position (missing, unparseable or out of
    range) keeps its row with a null geometry.
``tracks``
    One line per (drifter, segment) of the resampled track, in time order.
``loops``
    One line per loop event: the resampled track of the event's drifter and
    segment from its start to its end; the event's columns as properties.
``loop_centres``
    One point per event at its centre (``centre_lon``, ``centre_lat``, or
    ``lon``, ``lat`` where those are absent).
``loop_shapes``
    One polygon per event: the fitted ellipse (``semi_major_km``,
    ``semi_minor_km``, ``orientation_deg``), or a circle of ``radius_km``,
    drawn on the ellipsoid around the centre.

Distances and the ring vertices come from geodesics on WGS 84
(:mod:`driftloop.geodesy`, Karney 2013).
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence

import geopandas as gpd
import numpy as np
import pandas as pd
import shapely
from shapely.geometry.base import BaseGeometry

from driftloop import geodesy
from driftloop.export.geojson import conform_geometries
from driftloop.pipeline import FIXES_CSV_COLUMNS

__all__ = [
    "CRS",
    "EVENT_COLUMNS",
    "LAYER_NAMES",
    "SHAPE_VERTICES",
    "TRACK_COLUMNS",
    "TRACK_PROPERTIES",
    "build_layers",
    "ellipse_ring",
    "fixes_layer",
    "loop_centres_layer",
    "loop_shapes_layer",
    "loops_layer",
    "tracks_layer",
]

#: Coordinate reference system of every layer (WGS 84 longitude/latitude).
CRS = "EPSG:4326"

#: Layer names, in the order they are written.
LAYER_NAMES = ("fixes", "tracks", "loops", "loop_centres", "loop_shapes")

#: Vertices of a loop-shape ring (the closing vertex not counted).
SHAPE_VERTICES = 128

#: Columns of the resampled tracks table: (CSVW datatype, unit, meaning).
TRACK_COLUMNS: dict[str, tuple[str, str, str]] = {
    "drifter_id": ("string", "", "drifter identifier"),
    "segment": ("integer", "", "segment number within the drifter"),
    "time": ("datetime", "UTC", "time of the resampled position, ISO 8601"),
    "lat": ("double", "degrees_north", "latitude, WGS 84"),
    "lon": ("double", "degrees_east", "longitude, WGS 84"),
    "u": ("double", "m s-1", "eastward velocity"),
    "v": ("double", "m s-1", "northward velocity"),
    "sigma_m": ("double", "m", "position uncertainty (one standard deviation)"),
    "in_gap": ("boolean", "", "position interpolated across a gap in the fixes"),
    "gap_h": ("double", "h", "length of the gap the position lies in"),
}

#: Columns of the loop-event catalogue: (CSVW datatype, unit, meaning).
EVENT_COLUMNS: dict[str, tuple[str, str, str]] = {
    "event_id": ("string", "", "event identifier"),
    "drifter_id": ("string", "", "drifter identifier"),
    "segment": ("integer", "", "segment of the drifter the event lies in"),
    "start": ("datetime", "UTC", "start of the event, ISO 8601"),
    "end": ("datetime", "UTC", "end of the event, ISO 8601"),
    "duration_h": ("double", "h", "duration of the event"),
    "cycles": ("double", "1", "number of loop cycles"),
    "kind": ("string", "", "inertial, eddy, tidal or other"),
    "spin": ("string", "", "cyclonic or anticyclonic"),
    "period_h": ("double", "h", "loop period"),
    "radius_km": ("double", "km", "loop radius"),
    "speed_m_s": ("double", "m s-1", "speed of the looping motion"),
    "lat": ("double", "degrees_north", "mean latitude of the event"),
    "lon": ("double", "degrees_east", "mean longitude of the event"),
    "inertial_period_h": ("double", "h", "local inertial period, pi/(Omega |sin lat|)"),
    "inertial_radius_km": ("double", "km", "inertial radius |V/f| for the loop speed"),
    "period_ratio": ("double", "1", "period_h / inertial_period_h"),
    "radius_ratio": ("double", "1", "radius_fit_km / inertial_radius_km"),
    "semi_major_km": ("double", "km", "semi-major axis of the fitted ellipse"),
    "semi_minor_km": ("double", "km", "semi-minor axis of the fitted ellipse"),
    "orientation_deg": (
        "double", "degree", "azimuth of the major axis, clockwise from true north"
    ),
    "centre_lat": ("double", "degrees_north", "latitude of the loop centre"),
    "centre_lon": ("double", "degrees_east", "longitude of the loop centre"),
}

#: Properties of the ``tracks`` layer: (CSVW datatype, unit, meaning).
TRACK_PROPERTIES: dict[str, tuple[str, str, str]] = {
    "drifter_id": ("string", "", "drifter identifier"),
    "segment": ("integer", "", "segment number within the drifter"),
    "start": ("datetime", "UTC", "time of the first position, ISO 8601"),
    "end": ("datetime", "UTC", "time of the last position, ISO 8601"),
    "n_points": ("integer", "1", "positions in the line"),
    "length_km": ("double", "km", "geodesic length of the line on WGS 84"),
    "mean_speed_m_s": ("double", "m s-1", "length over duration (end - start)"),
}

_TRACK_REQUIRED = ("drifter_id", "segment", "time", "lat", "lon")
_EVENT_REQUIRED = ("event_id", "drifter_id", "segment", "start", "end", "lat", "lon")


def _require(table: pd.DataFrame, columns: tuple[str, ...], what: str) -> None:
    missing = [c for c in columns if c not in table.columns]
    if missing:
        raise ValueError(
            f"the {what} table lacks column(s) {missing}; it has {list(table.columns)}"
        )


def _valid_position(lon: np.ndarray, lat: np.ndarray) -> np.ndarray:
    with np.errstate(invalid="ignore"):
        return (
            np.isfinite(lon) & np.isfinite(lat)
            & (lat >= -90.0) & (lat <= 90.0) & (lon >= -180.0) & (lon <= 180.0)
        )


def _frame(properties: pd.DataFrame, geoms: Sequence[BaseGeometry | None] | np.ndarray
           ) -> gpd.GeoDataFrame:
    geometry = gpd.GeoSeries(geoms, index=properties.index, crs=CRS)
    return gpd.GeoDataFrame(properties, geometry=geometry, crs=CRS)


def _points(lon: np.ndarray, lat: np.ndarray) -> np.ndarray:
    valid = _valid_position(lon, lat)
    geoms = np.full(lon.shape, None, dtype=object)
    geoms[valid] = shapely.points(lon[valid], lat[valid])
    return conform_geometries(geoms)


def _line(lon: np.ndarray, lat: np.ndarray) -> BaseGeometry | None:
    """Line through positions (not yet conformed), or None for fewer than two distinct ones."""
    if lon.size < 2 or (np.ptp(lon) == 0.0 and np.ptp(lat) == 0.0):
        return None
    return shapely.linestrings(np.column_stack([lon, lat]))


def _conformed(geoms: list[BaseGeometry | None]) -> np.ndarray:
    """:func:`conform_geometry` of each geometry, done for all of them at once."""
    array = np.empty(len(geoms), dtype=object)
    array[:] = geoms
    return conform_geometries(array)


def fixes_layer(fixes: pd.DataFrame) -> gpd.GeoDataFrame:
    """Point layer of every fix with its QC flag and reasons.

    Parameters
    ----------
    fixes : pandas.DataFrame
        The flagged fixes table with at least the columns of
        :data:`driftloop.pipeline.FIXES_CSV_COLUMNS`.

    Returns
    -------
    geopandas.GeoDataFrame
        One feature per row, in table order, properties the
        ``FIXES_CSV_COLUMNS``.  Fixes whose ``lat`` is not in [-90, 90] or
        whose ``lon`` is not in [-180, 180] (NaN included) have a null
        geometry, so the layer has exactly as many features as
        ``fixes.csv`` has rows.

    Raises
    ------
    ValueError
        If a column is missing.
    """
    _require(fixes, FIXES_CSV_COLUMNS, "fixes")
    table = fixes.loc[:, list(FIXES_CSV_COLUMNS)].reset_index(drop=True)
    lon = table["lon"].to_numpy(dtype=float, na_value=np.nan)
    lat = table["lat"].to_numpy(dtype=float, na_value=np.nan)
    return _frame(table, _points(lon, lat))


def _sorted_tracks(tracks: pd.DataFrame) -> pd.DataFrame:
    _require(tracks, _TRACK_REQUIRED, "tracks")
    return tracks.sort_values(["drifter_id", "segment", "time"], kind="stable").reset_index(
        drop=True
    )


def _segment_arrays(group: pd.DataFrame) -> tuple[np.ndarray, np.ndarray, pd.Series]:
    lon = group["lon"].to_numpy(dtype=float, na_value=np.nan)
    lat = group["lat"].to_numpy(dtype=float, na_value=np.nan)
    keep = _valid_position(lon, lat)
    return lon[keep], lat[keep], group["time"][keep]


def tracks_layer(tracks: pd.DataFrame) -> gpd.GeoDataFrame:
    """Line layer: one feature per drifter segment of the resampled track.

    Parameters
    ----------
    tracks : pandas.DataFrame
        The resampled tracks table (``drifter_id``, ``segment``, ``time``,
        ``lat``, ``lon`` at least; see :data:`TRACK_COLUMNS`).

    Returns
    -------
    geopandas.GeoDataFrame
        Sorted by ``drifter_id`` then ``segment``; properties
        :data:`TRACK_PROPERTIES`.  The line joins the segment's valid
        positions in time order (positions interpolated across short gaps
        included); ``length_km`` sums the geodesic legs on WGS 84 and
        ``mean_speed_m_s`` is that length over ``end - start``.  A segment
        with fewer than two distinct positions has a null geometry (length
        0, speed NaN).

    Raises
    ------
    ValueError
        If a column is missing.
    """
    table = _sorted_tracks(tracks)
    rows, geoms = [], []
    groups = table.groupby(["drifter_id", "segment"], sort=False, observed=True, dropna=False)
    for (drifter, segment), group in groups:
        lon, lat, times = _segment_arrays(group)
        if times.empty:
            times = group["time"]
        length_m = float(geodesy.leg_distances(lon, lat).sum())
        start, end = times.min(), times.max()
        duration_s = (end - start).total_seconds() if times.notna().any() else np.nan
        speed = length_m / duration_s if duration_s > 0 else np.nan
        rows.append((drifter, segment, start, end, int(lon.size), length_m / 1000.0, speed))
        geoms.append(_line(lon, lat))
    geoms = _conformed(geoms)
    properties = pd.DataFrame.from_records(rows, columns=list(TRACK_PROPERTIES))
    properties = properties.astype(
        {
            "drifter_id": table["drifter_id"].dtype,
            "segment": table["segment"].dtype,
            "start": table["time"].dtype,
            "end": table["time"].dtype,
            "n_points": np.int64,
            "length_km": float,
            "mean_speed_m_s": float,
        }
    )
    return _frame(properties, geoms)


def _events(events: pd.DataFrame) -> pd.DataFrame:
    _require(events, _EVENT_REQUIRED, "events")
    return events.reset_index(drop=True)


def loops_layer(events: pd.DataFrame, tracks: pd.DataFrame) -> gpd.GeoDataFrame:
    """Line layer: the piece of resampled track each loop event covers.

    Parameters
    ----------
    events : pandas.DataFrame
        The loop catalogue (see :data:`EVENT_COLUMNS`).
    tracks : pandas.DataFrame
        The resampled tracks table.

    Returns
    -------
    geopandas.GeoDataFrame
        One feature per event, in catalogue order, with every event column
        as a property.  The line joins the valid positions of the event's
        drifter and segment with ``start <= time <= end`` in time order (a
        missing ``segment`` matches every segment of the drifter); null
        when fewer than two distinct positions fall in the event.

    Raises
    ------
    ValueError
        If a column is missing.
    """
    table = _events(events)
    track = _sorted_tracks(tracks)
    pieces: dict[tuple, tuple[np.ndarray, np.ndarray, np.ndarray]] = {}
    for key, group in track.groupby(["drifter_id", "segment"], sort=False, observed=True):
        lon, lat, times = _segment_arrays(group)
        pieces[key] = (times.to_numpy(dtype="datetime64[ns]"), lon, lat)
    by_drifter: dict = {}
    for key in pieces:
        by_drifter.setdefault(key[0], []).append(key)
    geoms = []
    for drifter, segment, start, end in zip(
        table["drifter_id"], table["segment"], table["start"], table["end"], strict=True
    ):
        if pd.isna(segment):
            keys = by_drifter.get(drifter, [])
        else:
            keys = [(drifter, segment)] if (drifter, segment) in pieces else []
        lon_parts, lat_parts = [], []
        if not (pd.isna(start) or pd.isna(end)):
            lo, hi = _utc_ns(start), _utc_ns(end)
            for key in keys:
                times, lon, lat = pieces[key]
                inside = (times >= lo) & (times <= hi)
                lon_parts.append(lon[inside])
                lat_parts.append(lat[inside])
        lon = np.concatenate(lon_parts) if lon_parts else np.empty(0)
        lat = np.concatenate(lat_parts) if lat_parts else np.empty(0)
        geoms.append(_line(lon, lat))
    return _frame(table.copy(), _conformed(geoms))


def _utc_ns(value) -> np.datetime64:
    stamp = pd.Timestamp(value)
    if stamp.tzinfo is not None:
        stamp = stamp.tz_convert("UTC").tz_localize(None)
    return np.datetime64(stamp, "ns")


def _centres(table: pd.DataFrame) -> tuple[np.ndarray, np.ndarray]:
    lon = table["lon"].to_numpy(dtype=float, na_value=np.nan)
    lat = table["lat"].to_numpy(dtype=float, na_value=np.nan)
    if "centre_lon" in table.columns and "centre_lat" in table.columns:
        c_lon = table["centre_lon"].to_numpy(dtype=float, na_value=np.nan)
        c_lat = table["centre_lat"].to_numpy(dtype=float, na_value=np.nan)
        own = np.isfinite(c_lon) & np.isfinite(c_lat)
        lon = np.where(own, c_lon, lon)
        lat = np.where(own, c_lat, lat)
    return lon, lat


def loop_centres_layer(events: pd.DataFrame) -> gpd.GeoDataFrame:
    """Point layer: the centre of each loop event.

    Parameters
    ----------
    events : pandas.DataFrame
        The loop catalogue (see :data:`EVENT_COLUMNS`).

    Returns
    -------
    geopandas.GeoDataFrame
        One feature per event, in catalogue order, with every event column
        as a property; the point is (``centre_lon``, ``centre_lat``) where
        both are given and finite, else (``lon``, ``lat``); null when that
        position is missing or out of range.

    Raises
    ------
    ValueError
        If a column is missing.
    """
    table = _events(events)
    lon, lat = _centres(table)
    return _frame(table.copy(), _points(lon, lat))


def ellipse_ring(
    lon: float,
    lat: float,
    semi_major_m: float,
    semi_minor_m: float,
    orientation_deg: float,
    n_vertices: int = SHAPE_VERTICES,
) -> tuple[np.ndarray, np.ndarray]:
    """Vertices of an ellipse around a centre, drawn with geodesics on WGS 84.

    The ellipse is defined in the azimuthal equidistant projection about the
    centre: a vertex at parameter t lies at east/north offset
    ``a cos t · m + b sin t · m⊥`` from the centre, where ``m`` is the unit
    vector at azimuth ``orientation_deg`` and ``m⊥`` is ``m`` turned 90°
    counter-clockwise.  Each offset becomes a geodesic from the centre with
    the offset's azimuth and length (direct problem, Karney 2013), so every
    vertex lies at its exact geodesic distance from the centre and a circle
    keeps its radius at any latitude.

    Parameters
    ----------
    lon, lat : float
        Centre: longitude, degrees east; latitude, degrees north.
    semi_major_m, semi_minor_m : float
        Semi-axes, metres; ``semi_major_m`` lies along ``orientation_deg``.
    orientation_deg : float
        Azimuth of the major axis, degrees clockwise from true north.
    n_vertices : int
        Number of distinct vertices (at least 4; evenly spaced in t).

    Returns
    -------
    lon, lat : numpy.ndarray
        ``n_vertices + 1`` longitudes in [-180, 180] and latitudes, degrees,
        counter-clockwise as seen from above, the first vertex repeated last.

    Raises
    ------
    ValueError
        If ``n_vertices`` < 4.

    Examples
    --------
    A 10-km circle at 45°S, one vertex due north of the centre:

    >>> ring_lon, ring_lat = ellipse_ring(0.0, -45.0, 10e3, 10e3, 0.0, n_vertices=64)
    >>> d = geodesy.inverse(0.0, -45.0, ring_lon, ring_lat).distance_m
    >>> print(f"{d.min():.3f} {d.max():.3f}")
    10000.000 10000.000
    """
    if n_vertices < 4:
        raise ValueError(f"a ring needs at least 4 vertices, got {n_vertices}")
    t = np.linspace(0.0, 2.0 * np.pi, n_vertices, endpoint=False)
    alpha = np.deg2rad(orientation_deg)
    major = np.array([np.sin(alpha), np.cos(alpha)])  # east, north
    minor = np.array([-np.cos(alpha), np.sin(alpha)])  # major turned 90 deg anticlockwise
    offset = (
        semi_major_m * np.cos(t)[:, None] * major + semi_minor_m * np.sin(t)[:, None] * minor
    )
    azimuth = np.rad2deg(np.arctan2(offset[:, 0], offset[:, 1]))
    distance = np.hypot(offset[:, 0], offset[:, 1])
    end = geodesy.forward(lon, lat, azimuth, distance)
    ring_lon = np.append(end.lon_deg, end.lon_deg[0])
    ring_lat = np.append(end.lat_deg, end.lat_deg[0])
    return ring_lon, ring_lat


def _positive(value: float) -> bool:
    return bool(np.isfinite(value) and value > 0.0)


def loop_shapes_layer(events: pd.DataFrame, n_vertices: int = SHAPE_VERTICES) -> gpd.GeoDataFrame:
    """Polygon layer: the fitted ellipse or circle of each loop event.

    Parameters
    ----------
    events : pandas.DataFrame
        The loop catalogue (see :data:`EVENT_COLUMNS`).
    n_vertices : int
        Vertices per ring (:data:`SHAPE_VERTICES` by default).

    Returns
    -------
    geopandas.GeoDataFrame
        One feature per event, in catalogue order, with every event column
        and ``shape_kind`` as properties.  ``shape_kind`` is ``"ellipse"``
        when ``semi_major_km`` and ``semi_minor_km`` are positive and
        ``orientation_deg`` is finite (or the axes are equal), ``"circle"``
        when instead ``radius_km`` is positive, and null (with a null
        geometry) otherwise or when the centre is unusable.  The ring is
        :func:`ellipse_ring` about the centre used by
        :func:`loop_centres_layer`.

    Raises
    ------
    ValueError
        If a column is missing.
    """
    table = _events(events)
    lon, lat = _centres(table)
    valid = _valid_position(lon, lat)
    n = len(table)

    def column(name: str) -> np.ndarray:
        if name not in table.columns:
            return np.full(n, np.nan)
        return table[name].to_numpy(dtype=float, na_value=np.nan)

    major, minor = column("semi_major_km"), column("semi_minor_km")
    angle, radius = column("orientation_deg"), column("radius_km")
    kinds: list[str | None] = []
    geoms: list[BaseGeometry | None] = []
    for k in range(n):
        if _positive(major[k]) and _positive(minor[k]) and (
            np.isfinite(angle[k]) or major[k] == minor[k]
        ):
            kind, axes = "ellipse", (major[k], minor[k], float(np.nan_to_num(angle[k])))
        elif _positive(radius[k]):
            kind, axes = "circle", (radius[k], radius[k], 0.0)
        else:
            kind, axes = None, None
        if axes is None or not valid[k]:
            kinds.append(None)
            geoms.append(None)
            continue
        ring_lon, ring_lat = ellipse_ring(
            lon[k], lat[k], axes[0] * 1000.0, axes[1] * 1000.0, axes[2], n_vertices
        )
        kinds.append(kind)
        geoms.append(shapely.polygons(np.column_stack([ring_lon, ring_lat])))
    properties = table.copy()
    properties["shape_kind"] = pd.array(kinds, dtype="string")
    return _frame(properties, _conformed(geoms))


def build_layers(tables: Mapping[str, pd.DataFrame]) -> dict[str, gpd.GeoDataFrame]:
    """Build every layer that the given tables allow.

    Parameters
    ----------
    tables : mapping of str to pandas.DataFrame
        Any of ``"fixes"``, ``"tracks"`` and ``"events"``.

    Returns
    -------
    dict of str to geopandas.GeoDataFrame
        In :data:`LAYER_NAMES` order: ``fixes`` from fixes; ``tracks`` from
        tracks; ``loops`` from events and tracks; ``loop_centres`` and
        ``loop_shapes`` from events.  Layers whose tables are absent are
        left out; empty tables give empty layers.

    Raises
    ------
    ValueError
        For an unknown table name or a missing column.
    """
    unknown = sorted(set(tables) - {"fixes", "tracks", "events"})
    if unknown:
        raise ValueError(f"unknown table(s) {unknown}; expected fixes, tracks, events")
    layers: dict[str, gpd.GeoDataFrame] = {}
    if "fixes" in tables:
        layers["fixes"] = fixes_layer(tables["fixes"])
    if "tracks" in tables:
        layers["tracks"] = tracks_layer(tables["tracks"])
    if "events" in tables:
        if "tracks" in tables:
            layers["loops"] = loops_layer(tables["events"], tables["tracks"])
        layers["loop_centres"] = loop_centres_layer(tables["events"])
        layers["loop_shapes"] = loop_shapes_layer(tables["events"])
    return layers
