"""Writers of the GIS layers and tables: GeoJSON, GeoPackage, GeoParquet, CSV.

Every file is written to a temporary name in its destination folder and
renamed over the target with :func:`os.replace` (atomic on POSIX), so a
reader or a run that fails part-way sees the previous complete file or the
new one, never a half-written file.  Every file records the run provenance
(package version and parameters):

- GeoJSON (RFC 7946): the foreign member ``"driftloop"`` of the
  FeatureCollection (:mod:`driftloop.export.geojson`);
- GeoPackage (OGC 12-128): ``driftloop.gpkg`` with one table per layer in
  EPSG:4326, written by GDAL through pyogrio; the provenance is stored as
  dataset and layer metadata (the ``gpkg_metadata`` extension, which GDAL
  reads back as metadata items) and a one-line summary in the layer
  description (``gpkg_contents.description``);
- GeoParquet: one ``<layer>.parquet`` per layer from
  :meth:`geopandas.GeoDataFrame.to_parquet` (``geo`` file metadata with the
  CRS as PROJJSON, geometries as WKB), with the provenance as JSON under the
  file metadata key ``driftloop``;
- CSV: the tracks table as ``resampled.csv`` and the loop catalogue as
  ``loops.csv`` (times ISO 8601 with ``Z``), each with a W3C CSVW sidecar
  ``<name>-metadata.json`` listing the columns, their types and units, and
  the provenance.  ``fixes.csv`` belongs to the pipeline and is not written
  here.
"""

from __future__ import annotations

import contextlib
import io
import json
import os
import tempfile
from collections.abc import Mapping, Sequence
from pathlib import Path
from typing import Any

import geopandas as gpd
import pandas as pd
import pyarrow.parquet as pq
import pyogrio

from driftloop.export.geojson import plain_data, write_geojson
from driftloop.export.layers import (
    EVENT_COLUMNS,
    LAYER_NAMES,
    TRACK_COLUMNS,
    build_layers,
)
from driftloop.io.writers import atomic_open, write_csv, write_json

__all__ = [
    "CSV_TABLES",
    "FORMATS",
    "GPKG_NAME",
    "GPKG_VERSION",
    "export_run",
    "run_provenance",
    "write_geoparquet",
    "write_gpkg",
    "write_table_csv",
]

#: Output formats :func:`export_run` knows.
FORMATS = ("geojson", "gpkg", "parquet", "csv")

#: The GeoPackage file holding every layer.
GPKG_NAME = "driftloop.gpkg"

#: GeoPackage version written (OGC 12-128 v1.3): GDAL 3.6 warns on v1.4 files.
GPKG_VERSION = "1.3"

#: Tables written as CSV: table name -> file name.
CSV_TABLES = {"tracks": "resampled.csv", "events": "loops.csv"}

#: Geometry type of each layer in the GeoPackage (singles promoted to Multi*).
_GPKG_GEOMETRY = {
    "fixes": "Point",
    "tracks": "MultiLineString",
    "loops": "MultiLineString",
    "loop_centres": "Point",
    "loop_shapes": "MultiPolygon",
}

_LAYER_TITLES = {
    "fixes": "drifter fixes with QC flag and reasons",
    "tracks": "resampled drifter tracks, one line per drifter segment",
    "loops": "track pieces of loop events",
    "loop_centres": "centres of loop events",
    "loop_shapes": "fitted loop ellipses and circles",
}

_CSVW_TYPES = {"b": "boolean", "i": "integer", "u": "integer", "f": "double", "M": "datetime"}


def run_provenance(provenance: Mapping[str, Any] | None = None) -> dict:
    """Return the provenance recorded in every export, as plain JSON data.

    Parameters
    ----------
    provenance : mapping, optional
        What the run records (for example :func:`driftloop.config.provenance`
        of its configuration: software, version, parameters).

    Returns
    -------
    dict
        ``provenance`` with ``software`` and ``version`` filled in when
        absent.

    Examples
    --------
    >>> from driftloop import __version__
    >>> run_provenance()["version"] == __version__
    True
    """
    from driftloop import __version__

    info = {"software": "driftloop", "version": __version__}
    info.update(plain_data(dict(provenance or {})))
    return info


@contextlib.contextmanager
def _temporary_beside(path: Path):
    """Yield an unused path beside ``path`` (same suffix); rename it over ``path`` on success."""
    path.parent.mkdir(parents=True, exist_ok=True)
    fd, name = tempfile.mkstemp(prefix=f".{path.name}.", suffix=f".part{path.suffix}",
                                dir=path.parent)
    os.close(fd)
    os.unlink(name)  # the writer creates the file itself
    tmp = Path(name)
    try:
        yield tmp
        with open(tmp, "rb") as handle:
            os.fsync(handle.fileno())
        os.replace(tmp, path)
    finally:
        for leftover in (tmp, *tmp.parent.glob(tmp.name + "-*")):
            with contextlib.suppress(FileNotFoundError):
                os.unlink(leftover)


def _content_time(layers: Mapping[str, gpd.GeoDataFrame]) -> str:
    """Time stamp for ``gpkg_contents.last_change``, the same on every run.

    ``SOURCE_DATE_EPOCH`` (the reproducible-builds convention) when it is
    set, otherwise the latest time in the layers (the newest fix), otherwise
    the Unix epoch.  The clock time of the run is kept out of the file, so
    that two runs on the same input write identical bytes.
    """
    epoch = os.environ.get("SOURCE_DATE_EPOCH", "").strip()
    stamp = None
    if epoch.isdigit():
        stamp = pd.Timestamp(int(epoch), unit="s", tz="UTC")
    else:
        for layer in layers.values():
            for column in ("time", "end"):
                if column in layer.columns and pd.api.types.is_datetime64_any_dtype(layer[column]):
                    latest = layer[column].max()
                    if pd.notna(latest) and (stamp is None or latest > stamp):
                        stamp = latest
    if stamp is None:
        stamp = pd.Timestamp(0, unit="s", tz="UTC")
    stamp = stamp.tz_convert("UTC")
    return stamp.strftime("%Y-%m-%dT%H:%M:%S.") + f"{stamp.microsecond // 1000:03d}Z"


@contextlib.contextmanager
def _gpkg_change_time(stamp: str):
    """Make GDAL write ``stamp`` wherever it records the current time."""
    previous = pyogrio.get_gdal_config_option("OGR_CURRENT_DATE")
    pyogrio.set_gdal_config_options({"OGR_CURRENT_DATE": stamp})
    try:
        yield
    finally:
        pyogrio.set_gdal_config_options({"OGR_CURRENT_DATE": previous})


def write_gpkg(
    path: str | Path,
    layers: Mapping[str, gpd.GeoDataFrame],
    provenance: Mapping[str, Any] | None = None,
) -> Path:
    """Write layers into one GeoPackage, atomically.

    Parameters
    ----------
    path : str or Path
        Destination ``.gpkg`` file; replaced as a whole.
    layers : mapping of str to geopandas.GeoDataFrame
        Layer name -> layer (EPSG:4326).  Lines and polygons are stored as
        ``MultiLineString`` / ``MultiPolygon`` so that each table has one
        geometry type.
    provenance : mapping, optional
        Recorded as dataset and layer metadata item ``driftloop_provenance``
        (JSON) and summarised in each layer's description.

    Returns
    -------
    Path
        The file written.
    """
    path = Path(path)
    info = run_provenance(provenance)
    text = json.dumps(info, sort_keys=True, allow_nan=False)
    with _temporary_beside(path) as tmp, _gpkg_change_time(_content_time(layers)):
        for k, (name, layer) in enumerate(layers.items()):
            title = _LAYER_TITLES.get(name, name)
            geometry_type = _GPKG_GEOMETRY.get(name)
            pyogrio.write_dataframe(
                layer,
                tmp,
                layer=name,
                driver="GPKG",
                geometry_type=geometry_type,
                promote_to_multi=bool(geometry_type and geometry_type.startswith("Multi")),
                layer_options={
                    "DESCRIPTION": f"{title} ({info['software']} {info['version']}; "
                    "provenance in metadata item driftloop_provenance)",
                    "IDENTIFIER": name,
                },
                layer_metadata={"driftloop_provenance": text},
                dataset_metadata={"driftloop_provenance": text} if k == 0 else None,
                dataset_options={"VERSION": GPKG_VERSION} if k == 0 else None,
            )
    return path


def write_geoparquet(
    path: str | Path, layer: gpd.GeoDataFrame, provenance: Mapping[str, Any] | None = None
) -> Path:
    """Write one layer as GeoParquet, atomically.

    Parameters
    ----------
    path : str or Path
        Destination ``.parquet`` file.
    layer : geopandas.GeoDataFrame
        The layer (EPSG:4326).
    provenance : mapping, optional
        Stored as JSON under the Parquet file metadata key ``driftloop``,
        beside the GeoParquet ``geo`` key.

    Returns
    -------
    Path
        The file written.
    """
    buffer = io.BytesIO()
    layer.to_parquet(buffer, index=False)
    table = pq.read_table(io.BytesIO(buffer.getvalue()))
    metadata = dict(table.schema.metadata or {})
    metadata[b"driftloop"] = json.dumps(run_provenance(provenance), sort_keys=True).encode()
    table = table.replace_schema_metadata(metadata)
    with atomic_open(path, "wb") as handle:
        pq.write_table(table, handle)
    return Path(path)


def _csvw_columns(table: pd.DataFrame, docs: Mapping[str, tuple[str, str, str]]) -> list[dict]:
    columns = []
    for name in table.columns:
        kind = table[name].dtype.kind
        datatype, unit, meaning = docs.get(name, (_CSVW_TYPES.get(kind, "string"), "", ""))
        if name in docs and kind in _CSVW_TYPES:
            datatype = _CSVW_TYPES[kind]
        entry = {"name": name, "titles": name, "datatype": datatype}
        if meaning:
            entry["dc:description"] = f"{meaning} ({unit})" if unit else meaning
        columns.append(entry)
    return columns


def write_table_csv(
    path: str | Path,
    table: pd.DataFrame,
    *,
    description: str,
    column_docs: Mapping[str, tuple[str, str, str]] | None = None,
    provenance: Mapping[str, Any] | None = None,
) -> list[Path]:
    """Write a table as CSV with a CSVW metadata sidecar, both atomically.

    Parameters
    ----------
    path : str or Path
        Destination ``.csv`` file; the sidecar is ``<path>-metadata.json``.
    table : pandas.DataFrame
        The table; times are written ISO 8601 with ``Z``.
    description : str
        One line describing the table.
    column_docs : mapping, optional
        Column name -> (CSVW datatype, unit, meaning).
    provenance : mapping, optional
        Recorded in the sidecar's ``notes``.

    Returns
    -------
    list of Path
        The CSV file and its sidecar.
    """
    path = Path(path)
    sidecar = path.with_name(path.name + "-metadata.json")
    info = run_provenance(provenance)
    write_csv(path, table)
    write_json(
        sidecar,
        {
            "@context": "http://www.w3.org/ns/csvw",
            "url": path.name,
            "dc:creator": f"{info['software']} {info['version']}",
            "dc:description": description,
            "tableSchema": {"columns": _csvw_columns(table, column_docs or {})},
            "notes": [info],
        },
    )
    return [path, sidecar]


def export_run(
    tables: dict[str, pd.DataFrame],
    out_dir: str | Path,
    formats: Sequence[str] = ("geojson",),
    provenance: dict | None = None,
) -> list[Path]:
    """Write the GIS layers (and tables) of a run in the chosen formats.

    Parameters
    ----------
    tables : dict of str to pandas.DataFrame
        Any of ``"fixes"`` (flagged fixes, ``FIXES_CSV_COLUMNS``),
        ``"tracks"`` (resampled tracks) and ``"events"`` (loop catalogue);
        the layers that need an absent table are not written (see
        :func:`driftloop.export.layers.build_layers`).
    out_dir : str or Path
        Output folder (created if needed).
    formats : sequence of str
        Any of :data:`FORMATS`: ``"geojson"`` writes ``<layer>.geojson``
        per layer; ``"gpkg"`` writes every layer into ``driftloop.gpkg``;
        ``"parquet"`` writes ``<layer>.parquet`` per layer; ``"csv"`` writes
        ``resampled.csv`` and ``loops.csv`` (with CSVW sidecars) for the tables
        given (never ``fixes.csv``, which the pipeline writes).
    provenance : dict, optional
        Parameters and version of the run, recorded in every file.

    Returns
    -------
    list of Path
        The files written, in the order written.

    Raises
    ------
    ValueError
        For an unknown format or table, or a table lacking a column.
    """
    unknown = [f for f in formats if f not in FORMATS]
    if unknown:
        raise ValueError(f"unknown export format(s) {unknown}; choose from {list(FORMATS)}")
    out = Path(out_dir)
    out.mkdir(parents=True, exist_ok=True)
    info = run_provenance(provenance)
    layers = build_layers(tables)
    written: list[Path] = []
    order = [f for f in FORMATS if f in formats]
    for fmt in order:
        if fmt == "geojson":
            for name in LAYER_NAMES:
                if name in layers:
                    written.append(
                        write_geojson(out / f"{name}.geojson", layers[name], name=name,
                                      provenance=info)
                    )
        elif fmt == "gpkg":
            if layers:
                written.append(write_gpkg(out / GPKG_NAME, layers, info))
        elif fmt == "parquet":
            for name in LAYER_NAMES:
                if name in layers:
                    written.append(write_geoparquet(out / f"{name}.parquet", layers[name], info))
        elif fmt == "csv":
            docs = {"tracks": TRACK_COLUMNS, "events": EVENT_COLUMNS}
            titles = {
                "tracks": "Resampled drifter tracks, one row per drifter, segment and time.",
                "events": "Catalogue of loop events, one row per event.",
            }
            for table_name, file_name in CSV_TABLES.items():
                if table_name in tables:
                    written.extend(
                        write_table_csv(out / file_name, tables[table_name],
                                        description=titles[table_name],
                                        column_docs=docs[table_name], provenance=info)
                    )
    return written
