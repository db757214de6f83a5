"""Export of a run a chunk at a time, with the bytes of :func:`driftloop.export.export_run`.

A streaming run (:mod:`driftloop.streaming`) hands every layer and table
over in pieces, drifter by drifter, and never holds a whole layer:

- GeoJSON features are appended to an anonymous temporary file and the
  collection's bounding box is accumulated in fixed memory
  (:class:`driftloop.export.geojson.GeoJSONWriter`);
- GeoParquet and GeoPackage layers are kept as GeoParquet chunks in an
  anonymous temporary file; at the end each layer is written from them,
  GeoParquet one row group (1,048,576 rows, the ``pyarrow`` default) at a
  time with the merged ``geo`` metadata, the GeoPackage one whole layer at
  a time (GDAL stores the times of appended features with another
  precision, so appending would change the file);
- the CSV tables are appended as they come (:class:`driftloop.io.writers.CsvAppender`).

Nothing appears under its final name until :meth:`StreamExport.commit`,
which renames the files in the order :func:`~driftloop.export.export_run`
writes them.
"""

from __future__ import annotations

import io
import json
import tempfile
from collections.abc import Iterator, Mapping, Sequence
from pathlib import Path
from typing import Any

import geopandas as gpd
import numpy as np
import pandas as pd
import pyarrow as pa
import pyarrow.parquet as pq

from driftloop.export.formats import (
    CSV_TABLES,
    FORMATS,
    GPKG_NAME,
    _csvw_columns,
    run_provenance,
    write_gpkg,
)
from driftloop.export.geojson import GeoJSONWriter
from driftloop.export.layers import EVENT_COLUMNS, LAYER_NAMES, TRACK_COLUMNS
from driftloop.io.writers import AtomicFile, CsvAppender, write_json

__all__ = ["PARQUET_ROW_GROUP", "StreamExport", "render_layer"]

#: Rows per GeoParquet row group (the ``pyarrow.parquet.write_table`` default).
PARQUET_ROW_GROUP = 1024 * 1024

_TITLES = {
    "tracks": "Resampled drifter tracks, one row per drifter, segment and time.",
    "events": "Catalogue of loop events, one row per event.",
}


class _ChunkSpool:
    """Chunks of one layer as GeoParquet bytes in an anonymous temporary file."""

    def __init__(self, folder: Path) -> None:
        self._file = tempfile.TemporaryFile(dir=folder)
        self._sizes: list[int] = []

    @property
    def count(self) -> int:
        return len(self._sizes)

    def put(self, chunk: gpd.GeoDataFrame) -> None:
        buffer = io.BytesIO()
        chunk.to_parquet(buffer, index=False)
        data = buffer.getvalue()
        self._file.seek(0, 2)
        self._file.write(data)
        self._sizes.append(len(data))

    def _blobs(self) -> Iterator[bytes]:
        self._file.flush()
        self._file.seek(0)
        offset = 0
        for size in self._sizes:
            self._file.seek(offset)
            offset += size
            yield self._file.read(size)

    def tables(self) -> Iterator[pa.Table]:
        """Each chunk as the table ``write_geoparquet`` writes for it."""
        for blob in self._blobs():
            yield pq.read_table(io.BytesIO(blob))

    def chunks(self) -> Iterator[gpd.GeoDataFrame]:
        """Each chunk as a layer again."""
        for blob in self._blobs():
            yield gpd.read_parquet(io.BytesIO(blob))

    def close(self) -> None:
        self._file.close()


def _merge_geo(into: dict | None, chunk: dict) -> dict:
    """Merge the GeoParquet ``geo`` metadata of a chunk into that of the chunks before."""
    if into is None:
        return chunk
    for name, column in chunk["columns"].items():
        mine = into["columns"][name]
        mine["geometry_types"] = sorted(set(mine["geometry_types"]) | set(column["geometry_types"]))
        if "bbox" in column:
            if "bbox" in mine:
                a, b = mine["bbox"], column["bbox"]
                mine["bbox"] = [min(a[0], b[0]), min(a[1], b[1]), max(a[2], b[2]),
                                max(a[3], b[3])]
            else:
                mine["bbox"] = column["bbox"]
    return into


def _merge_pandas(into: dict | None, chunk: dict) -> dict:
    """Merge pandas metadata: a column all null so far takes the type of a later chunk."""
    if into is None:
        return chunk
    for k, column in enumerate(chunk["columns"]):
        if into["columns"][k]["pandas_type"] == "empty" and column["pandas_type"] != "empty":
            into["columns"][k] = column
    return into


class _ParquetLayer:
    """GeoParquet layer written from spooled chunks: two passes over the spool."""

    def __init__(self, path: Path, spool: _ChunkSpool, provenance: Mapping[str, Any]) -> None:
        self.path = path
        self.spool = spool
        self.provenance = provenance

    def write(self) -> AtomicFile:
        geo = pandas_meta = None
        schema = None
        first: dict | None = None
        for table in self.spool.tables():
            meta = table.schema.metadata or {}
            first = dict(meta) if first is None else first
            geo = _merge_geo(geo, json.loads(meta[b"geo"]))
            pandas_meta = _merge_pandas(pandas_meta, json.loads(meta[b"pandas"]))
            plain = table.schema.remove_metadata()
            schema = plain if schema is None else pa.unify_schemas([schema, plain])
        metadata = dict(first or {})
        metadata[b"pandas"] = json.dumps(pandas_meta).encode("utf-8")
        metadata[b"geo"] = json.dumps(geo).encode("utf-8")
        metadata[b"driftloop"] = json.dumps(run_provenance(self.provenance),
                                            sort_keys=True).encode()
        schema = schema.with_metadata(metadata)
        target = AtomicFile(self.path, "wb")
        try:
            if not any(len(t) for t in self.spool.tables()):
                empty = next(self.spool.tables())
                meta = dict(empty.schema.metadata or {})
                meta[b"driftloop"] = metadata[b"driftloop"]
                pq.write_table(empty.replace_schema_metadata(meta), target.handle)
                return target
            with pq.ParquetWriter(target.handle, schema) as writer:
                pending: list[pa.Table] = []
                rows = 0
                for table in self.spool.tables():
                    table = table.replace_schema_metadata(None)
                    pending.append(table.cast(schema.remove_metadata()))
                    rows += len(table)
                    while rows >= PARQUET_ROW_GROUP:
                        whole = pa.concat_tables(pending).combine_chunks()
                        group = whole.slice(0, PARQUET_ROW_GROUP)
                        writer.write_table(group.replace_schema_metadata(metadata),
                                           row_group_size=PARQUET_ROW_GROUP)
                        rest = whole.slice(PARQUET_ROW_GROUP)
                        pending, rows = [rest], len(rest)
                if rows:
                    whole = pa.concat_tables(pending).combine_chunks()
                    writer.write_table(whole.replace_schema_metadata(metadata),
                                       row_group_size=PARQUET_ROW_GROUP)
        except BaseException:
            target.abort()
            raise
        return target


def _concat(chunks: list[gpd.GeoDataFrame]) -> gpd.GeoDataFrame:
    if len(chunks) == 1:
        return chunks[0]
    return gpd.GeoDataFrame(pd.concat(chunks, ignore_index=True), crs=chunks[0].crs)


def render_layer(layer: gpd.GeoDataFrame, formats: Sequence[str]) -> dict:
    """Prepare a layer chunk for :meth:`StreamExport.add_rendered`.

    The GeoJSON text is formatted here, so that workers can do it.

    Parameters
    ----------
    layer : geopandas.GeoDataFrame
        The chunk.
    formats : sequence of str
        The run's formats.

    Returns
    -------
    dict
        ``geojson``: (text, count, boxes) or None; ``frame``: the chunk when
        a GeoPackage or GeoParquet file needs it, else None.
    """
    from driftloop.export.geojson import feature_text

    return {"geojson": feature_text(layer) if "geojson" in formats else None,
            "frame": layer if ("gpkg" in formats or "parquet" in formats) else None}


class StreamExport:
    """The GIS layers and CSV tables of a run, written a chunk at a time.

    Parameters
    ----------
    out_dir : str or Path
        Output folder.
    formats : sequence of str
        As for :func:`driftloop.export.export_run`.
    provenance : dict, optional
        Recorded in every file.
    layers : sequence of str
        Layer names that will be given (the others are not written).
    tables : sequence of str
        CSV table names that will be given (``"tracks"``, ``"events"``).
    """

    def __init__(self, out_dir: str | Path, formats: Sequence[str],
                 provenance: Mapping[str, Any] | None = None,
                 layers: Sequence[str] = LAYER_NAMES,
                 tables: Sequence[str] = ("tracks", "events")) -> None:
        unknown = [f for f in formats if f not in FORMATS]
        if unknown:
            raise ValueError(f"unknown export format(s) {unknown}; choose from {list(FORMATS)}")
        self.out = Path(out_dir)
        self.out.mkdir(parents=True, exist_ok=True)
        self.formats = [f for f in FORMATS if f in formats]
        self.info = run_provenance(provenance)
        self.layers = [n for n in LAYER_NAMES if n in layers]
        self._geojson = {}
        if "geojson" in self.formats:
            self._geojson = {n: GeoJSONWriter(self.out / f"{n}.geojson", name=n,
                                              provenance=self.info) for n in self.layers}
        self._spools: dict[str, _ChunkSpool] = {}
        if "gpkg" in self.formats or "parquet" in self.formats:
            self._spools = {n: _ChunkSpool(self.out) for n in self.layers}
        self._csv: dict[str, CsvAppender] = {}
        self._csv_first: dict[str, pd.DataFrame] = {}
        if "csv" in self.formats:
            self._csv = {t: CsvAppender(self.out / CSV_TABLES[t]) for t in tables}

    def add_layer(self, name: str, layer: gpd.GeoDataFrame, *, geojson: bool = True) -> None:
        """Append a chunk of a layer (chunks in layer order).

        Parameters
        ----------
        name : str
            Layer name.
        layer : geopandas.GeoDataFrame
            The chunk, as :func:`driftloop.export.layers.build_layers` builds it.
        geojson : bool
            Whether to add it to the GeoJSON file too.
        """
        if geojson and name in self._geojson:
            self._geojson[name].append(layer)
        if name in self._spools and len(layer):
            self._spools[name].put(layer)
        elif name in self._spools and self._spools[name].count == 0:
            self._empty = getattr(self, "_empty", {})
            self._empty[name] = layer

    @property
    def needs_frames(self) -> bool:
        """Whether layer chunks are needed as GeoDataFrames (GeoPackage, GeoParquet)."""
        return bool(self._spools)

    def add_rendered(self, name: str, rendered: dict) -> None:
        """Append a layer chunk prepared by :func:`render_layer` (possibly in a worker).

        Parameters
        ----------
        name : str
            Layer name.
        rendered : dict
            Output of :func:`render_layer`.
        """
        if name in self._geojson and rendered.get("geojson") is not None:
            self._geojson[name].append_text(*rendered["geojson"])
        if rendered.get("frame") is not None:
            self.add_layer(name, rendered["frame"], geojson=False)

    def add_geojson_text(self, name: str, text: str, count: int,
                         boxes: np.ndarray | None) -> None:
        """Append GeoJSON features formatted elsewhere (a worker) to a layer's file.

        For layers written only as GeoJSON and CSV; the GeoPackage and
        GeoParquet files take chunks through :meth:`add_rendered`.

        Parameters
        ----------
        name : str
            Layer name.
        text, count, boxes
            As :func:`driftloop.export.geojson.feature_text` returns them.
        """
        if name in self._geojson:
            self._geojson[name].append_text(text, count, boxes)

    def add_table_text(self, name: str, text: str, rows: int, empty: pd.DataFrame) -> None:
        """Append CSV rows formatted by :func:`driftloop.io.writers.csv_text`.

        Parameters
        ----------
        name : str
            Table name.
        text : str
            The rows with their header line.
        rows : int
            Number of rows.
        empty : pandas.DataFrame
            The table's columns and dtypes (no rows), for the CSVW sidecar.
        """
        if name not in self._csv:
            return
        if name not in self._csv_first or (self._csv[name].rows == 0 and rows):
            self._csv_first[name] = empty
        self._csv[name].append_text(text, rows)

    def add_table(self, name: str, table: pd.DataFrame) -> None:
        """Append rows of a CSV table (``"tracks"`` or ``"events"``).

        Parameters
        ----------
        name : str
            Table name.
        table : pandas.DataFrame
            The rows; give the table once even when it is empty.
        """
        if name not in self._csv:
            return
        if name not in self._csv_first or (self._csv_first[name].empty and len(table)):
            self._csv_first[name] = table.iloc[:0]
        self._csv[name].append(table)

    def commit(self) -> list[Path]:
        """Write what is pending and rename every file into place.

        Returns
        -------
        list of Path
            The files, in the order :func:`~driftloop.export.export_run`
            writes them.
        """
        written: list[Path] = []
        try:
            for fmt in self.formats:
                if fmt == "geojson":
                    for name in self.layers:
                        written.append(self._geojson[name].commit())
                elif fmt == "gpkg":
                    written.append(self._write_gpkg())
                elif fmt == "parquet":
                    for name in self.layers:
                        written.append(self._write_parquet(name))
                elif fmt == "csv":
                    for name, appender in self._csv.items():
                        written.extend(self._commit_csv(name, appender))
        finally:
            for spool in self._spools.values():
                spool.close()
        return written

    def abort(self) -> None:
        """Drop every temporary file."""
        for writer in self._geojson.values():
            writer.abort()
        for spool in self._spools.values():
            spool.close()
        for appender in self._csv.values():
            appender.abort()

    def _chunks(self, name: str) -> Iterator[gpd.GeoDataFrame]:
        spool = self._spools[name]
        if spool.count:
            yield from spool.chunks()
        else:
            yield getattr(self, "_empty", {})[name]

    def _write_parquet(self, name: str) -> Path:
        spool = self._spools[name]
        if spool.count == 0:
            spool.put(self._empty[name])
        return _ParquetLayer(self.out / f"{name}.parquet", spool, self.info).write().commit()

    def _write_gpkg(self) -> Path:
        # GDAL writes the times of appended features with another precision
        # than those of the first write, so each layer is written in one go
        layers = {n: _concat(list(self._chunks(n))) for n in self.layers}
        return write_gpkg(self.out / GPKG_NAME, layers, self.info)

    def _commit_csv(self, name: str, appender: CsvAppender) -> list[Path]:
        path = appender.commit()
        sidecar = path.with_name(path.name + "-metadata.json")
        docs = {"tracks": TRACK_COLUMNS, "events": EVENT_COLUMNS}[name]
        write_json(sidecar, {
            "@context": "http://www.w3.org/ns/csvw",
            "url": path.name,
            "dc:creator": f"{self.info['software']} {self.info['version']}",
            "dc:description": _TITLES[name],
            "tableSchema": {"columns": _csvw_columns(self._csv_first[name], docs)},
            "notes": [self.info],
        })
        return [path, sidecar]

