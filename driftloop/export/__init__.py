"""GIS export: the run's fixes, tracks and loop events as map layers.

Layers (:mod:`driftloop.export.layers`): ``fixes`` (points), ``tracks``
(one line per drifter segment), ``loops`` (the track piece of each loop
event), ``loop_centres`` (points) and ``loop_shapes`` (fitted ellipses and
circles drawn with geodesics), all in EPSG:4326.

Formats (:mod:`driftloop.export.formats`): RFC 7946 GeoJSON
(:mod:`driftloop.export.geojson`), one GeoPackage with a table per layer,
GeoParquet, and CSV for the tables.  :func:`export_run` writes them all;
``docs/gis.md`` describes every layer and property.
"""

from __future__ import annotations

from driftloop.export.formats import (
    FORMATS,
    GPKG_NAME,
    export_run,
    write_geoparquet,
    write_gpkg,
    write_table_csv,
)
from driftloop.export.geojson import conform_geometry, geojson_text, write_geojson
from driftloop.export.layers import (
    LAYER_NAMES,
    build_layers,
    ellipse_ring,
    fixes_layer,
    loop_centres_layer,
    loop_shapes_layer,
    loops_layer,
    tracks_layer,
)

__all__ = [
    "FORMATS",
    "GPKG_NAME",
    "LAYER_NAMES",
    "build_layers",
    "conform_geometry",
    "ellipse_ring",
    "export_run",
    "fixes_layer",
    "geojson_text",
    "loop_centres_layer",
    "loop_shapes_layer",
    "loops_layer",
    "tracks_layer",
    "write_geojson",
    "write_geoparquet",
    "write_gpkg",
    "write_table_csv",
]
