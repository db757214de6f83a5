"""GIS export read back by GDAL (pyogrio, ogrinfo), geopandas and GeographicLib.

External references: GDAL reads every file (``pyogrio`` and the ``ogrinfo``
command of Debian's gdal-bin); geodesic distances are checked against
GeographicLib (Karney 2013); the structure checks follow RFC 7946 (§3.1.1
positions, §3.1.6 rings and winding, §3.1.9 antimeridian cutting, §4 no
``crs``, §5 and §5.2 bounding boxes, §6.1 foreign members).
"""

from __future__ import annotations

import json
import re
import shutil
import subprocess
from pathlib import Path

import geopandas as gpd
import numpy as np
import pandas as pd
import pyarrow.parquet as pq
import pyogrio
import pytest
import shapely
from geographiclib.geodesic import Geodesic

from driftloop import geodesy
from driftloop.export import (
    LAYER_NAMES,
    build_layers,
    conform_geometry,
    ellipse_ring,
    export_run,
    geojson_text,
)
from driftloop.export import formats as export_formats
from driftloop.pipeline import FIXES_CSV_COLUMNS

WGS84 = Geodesic.WGS84
T0 = pd.Timestamp("2026-03-01T00:00:00Z")
PROVENANCE = {"software": "driftloop", "version": "test", "parameters": {"qc": {"a": 1.5}}}


# --------------------------------------------------------------------------- tables


def _track(drifter, segment, lon0, lat0, hours, drift_m_s, radius_m, period_h):
    """Hourly positions: a centre drifting east with a circle of radius_m around it."""
    t = np.arange(hours, dtype=float)
    centre = geodesy.forward(lon0, lat0, 90.0, drift_m_s * 3600.0 * t)
    bearing = np.rad2deg(2 * np.pi * t / period_h)
    pos = geodesy.forward(centre.lon_deg, centre.lat_deg, bearing, radius_m)
    speed = 2 * np.pi * radius_m / (period_h * 3600.0)
    return pd.DataFrame({
        "drifter_id": pd.array([drifter] * hours, dtype="string"),
        "segment": np.full(hours, segment, dtype=np.int32),
        "time": T0 + pd.to_timedelta(t, unit="h"),
        "lat": pos.lat_deg,
        "lon": pos.lon_deg,
        "u": np.full(hours, drift_m_s) + speed * np.cos(np.deg2rad(bearing)),
        "v": -speed * np.sin(np.deg2rad(bearing)),
        "sigma_m": np.full(hours, 15.0),
        "in_gap": np.zeros(hours, dtype=bool),
        "gap_h": np.zeros(hours),
    })


def make_tables():
    tracks = pd.concat([
        _track("A", 0, -30.0, 40.0, 30, 0.1, 2_000.0, 17.0),
        _track("A", 1, -29.0, 40.2, 12, 0.1, 0.0, 17.0),
        # crosses the antimeridian eastwards: 179.6 E -> about 179.2 W
        _track("B", 0, 179.6, 30.0, 36, 0.6, 3_000.0, 24.0),
        _track("C", 0, -60.0, 80.0, 24, 0.05, 4_000.0, 12.2),
        _track("D", 0, 20.0, -45.0, 24, 0.05, 5_000.0, 16.9),
    ], ignore_index=True)
    tracks.loc[3, "in_gap"] = True
    tracks.loc[3, "gap_h"] = 2.0
    nan = np.nan
    events = pd.DataFrame({
        "event_id": pd.array(["E1", "E2", "E3", "E4"], dtype="string"),
        "drifter_id": pd.array(["B", "D", "C", "A"], dtype="string"),
        "segment": np.array([0, 0, 0, 0], dtype=np.int32),
        "start": T0 + pd.to_timedelta([6, 2, 0, 5], unit="h"),
        "end": T0 + pd.to_timedelta([30, 20, 12, 22], unit="h"),
        "duration_h": [24.0, 18.0, 12.0, 17.0],
        "cycles": [1.0, 1.1, 1.0, 1.0],
        "kind": pd.array(["eddy", "inertial", "inertial", "other"], dtype="string"),
        "spin": pd.array(["cyclonic", "anticyclonic", "anticyclonic", "cyclonic"],
                         dtype="string"),
        "period_h": [24.0, 16.9, 12.2, 17.0],
        "radius_km": [15.0, 5.0, 20.0, nan],
        "speed_m_s": [0.2, 0.5, 0.3, 0.2],
        "lat": [30.0, -45.0, 80.0, 40.1],
        "lon": [179.9, 20.1, -60.0, -29.8],
        "inertial_period_h": [23.93, 16.92, 12.15, 18.6],
        "inertial_radius_km": [2.7, 4.9, 3.0, 2.1],
        "period_ratio": [1.003, 0.999, 1.004, 0.91],
        "radius_ratio": [5.6, 1.02, 6.7, nan],
        "semi_major_km": [nan, 12.0, nan, nan],
        "semi_minor_km": [nan, 6.0, nan, nan],
        "orientation_deg": [nan, 30.0, nan, nan],
        "centre_lat": [nan, -45.01, nan, nan],
        "centre_lon": [nan, 20.12, nan, nan],
    })
    n = 8
    fixes = pd.DataFrame({
        "source_file": pd.array(["a.csv"] * n, dtype="string"),
        "source_row": np.arange(2, n + 2, dtype=np.int64),
        "drifter_id": pd.array(["A"] * 5 + ["B"] * 3, dtype="string"),
        "time": T0 + pd.to_timedelta(np.arange(n) * 1800, unit="s"),
        "lat": [40.0, 40.01, nan, 95.0, 40.03, 30.0, 30.0, 30.01],
        "lon": [-30.0, -29.99, -29.98, -29.97, -29.96, 179.99, -179.99, -179.98],
        "qc_flag": np.array([1, 1, 9, 4, 3, 1, 1, 1], dtype=np.int8),
        "qc_reasons": pd.array(["", "", "missing_value", "lat_out_of_range",
                                "speed_suspect", "", "gap_before", ""], dtype="string"),
        "segment": np.array([0, 0, -1, -1, 0, 0, 0, 0], dtype=np.int32),
        "time_assumed_utc": np.array([False] * 7 + [True]),
        "raw": pd.array(["", "", "", "", "", "", "", ""], dtype="string"),
    })
    fixes.loc[3, "raw"] = "A,2026-03-01T01:30Z,95,-29.97"
    return {"fixes": fixes, "tracks": tracks, "events": events}


@pytest.fixture(scope="module")
def tables():
    return make_tables()


@pytest.fixture(scope="module")
def layers(tables):
    return build_layers(tables)


@pytest.fixture(scope="module")
def run_dir(tmp_path_factory, tables):
    out = tmp_path_factory.mktemp("export")
    written = export_run(tables, out, formats=("geojson", "gpkg", "parquet", "csv"),
                         provenance=PROVENANCE)
    assert all(p.is_file() for p in written)
    return out


def _geojson(run_dir, name):
    return json.loads((run_dir / f"{name}.geojson").read_text(encoding="utf-8"))


def _feature(layer, column, value):
    rows = layer.index[layer[column] == value]
    assert len(rows) == 1
    return layer.loc[rows[0]]


# --------------------------------------------------------------------------- helpers


def _assert_same_values(expected: pd.Series, actual: pd.Series, name: str):
    """Compare a property column as GDAL returned it with the layer column."""
    assert len(expected) == len(actual), name
    if pd.api.types.is_datetime64_any_dtype(expected.dtype):
        got = pd.to_datetime(actual, utc=True)
        want = pd.to_datetime(expected, utc=True)
        assert (got.isna().to_numpy() == want.isna().to_numpy()).all(), name
        ok = want.notna().to_numpy()
        assert (got[ok].to_numpy() == want[ok].to_numpy()).all(), name
    elif pd.api.types.is_bool_dtype(expected.dtype):
        assert [bool(v) for v in actual] == [bool(v) for v in expected], name
    elif pd.api.types.is_numeric_dtype(expected.dtype):
        np.testing.assert_allclose(actual.to_numpy(dtype=float, na_value=np.nan),
                                   expected.to_numpy(dtype=float, na_value=np.nan),
                                   rtol=1e-12, atol=0, equal_nan=True, err_msg=name)
    else:
        def norm(values):
            return [None if pd.isna(v) else str(v) for v in values]
        assert norm(actual) == norm(expected), name


def _as_multi(geom):
    if geom.geom_type == "LineString":
        return shapely.MultiLineString([geom])
    if geom.geom_type == "Polygon":
        return shapely.MultiPolygon([geom])
    return geom


def _geodesic_distance(lon1, lat1, lon2, lat2):
    return WGS84.Inverse(lat1, lon1, lat2, lon2)["s12"]


def _exterior_rings(geom):
    parts = geom.geoms if geom.geom_type == "MultiPolygon" else [geom]
    return [p.exterior for p in parts]


def _lon_in_box(lon, west, east):
    if west <= east:
        return west - 1e-9 <= lon <= east + 1e-9
    return lon >= west - 1e-9 or lon <= east + 1e-9


# --------------------------------------------------------------------------- GDAL read-back


def test_every_geojson_layer_reads_back_through_gdal(run_dir, layers):
    for name in LAYER_NAMES:
        path = run_dir / f"{name}.geojson"
        listed = pyogrio.list_layers(path)
        assert listed[:, 0].tolist() == [name]  # the "name" foreign member
        back = pyogrio.read_dataframe(path)
        layer = layers[name]
        assert len(back) == len(layer), name
        properties = [c for c in layer.columns if c != "geometry"]
        assert [c for c in back.columns if c != "geometry"] == properties, name
        for column in properties:
            _assert_same_values(layer[column], back[column], f"{name}.{column}")
        # geometries: same type family, within the 1e-6 degree rounding
        for want, got in zip(layer.geometry, back.geometry, strict=True):
            if want is None:
                assert got is None
                continue
            assert got.geom_type == want.geom_type
            # snapped to the 1e-6 degree grid (rings may start elsewhere)
            assert shapely.hausdorff_distance(got, want) <= 1e-6


def test_gdal_reads_integer_real_boolean_datetime_and_string_fields(run_dir):
    info = pyogrio.read_info(run_dir / "fixes.geojson")
    types = dict(zip(info["fields"], info["ogr_types"], strict=True))
    subtypes = dict(zip(info["fields"], info["ogr_subtypes"], strict=True))
    assert types["source_row"] in ("OFTInteger", "OFTInteger64")
    assert types["lat"] == "OFTReal"
    assert types["time"] == "OFTDateTime"
    assert types["qc_reasons"] == "OFTString"
    assert subtypes["time_assumed_utc"] == "OFSTBoolean"
    info = pyogrio.read_info(run_dir / "tracks.geojson")
    types = dict(zip(info["fields"], info["ogr_types"], strict=True))
    assert types["start"] == types["end"] == "OFTDateTime"
    assert types["length_km"] == types["mean_speed_m_s"] == "OFTReal"
    assert types["n_points"] in ("OFTInteger", "OFTInteger64")


def _ogrinfo_counts(path):
    done = subprocess.run(["ogrinfo", "-ro", "-al", "-so", str(path)],
                          capture_output=True, text=True, timeout=60, check=False)
    assert done.returncode == 0, done.stderr
    assert "Warning" not in done.stderr and "ERROR" not in done.stderr, done.stderr
    names = re.findall(r"^Layer name: (\S+)$", done.stdout, flags=re.M)
    counts = [int(n) for n in re.findall(r"^Feature Count: (\d+)$", done.stdout, flags=re.M)]
    assert len(names) == len(counts)
    return dict(zip(names, counts, strict=True)), done.stdout


@pytest.mark.skipif(shutil.which("ogrinfo") is None, reason="ogrinfo (gdal-bin) is not installed")
def test_ogrinfo_reads_every_file_with_the_feature_counts(run_dir, layers):
    for name in LAYER_NAMES:
        counts, _ = _ogrinfo_counts(run_dir / f"{name}.geojson")
        assert counts == {name: len(layers[name])}
    counts, text = _ogrinfo_counts(run_dir / "driftloop.gpkg")
    assert counts == {name: len(layers[name]) for name in LAYER_NAMES}
    assert text.count('ID["EPSG",4326]') == len(LAYER_NAMES)


VALIDATE_GPKG = Path("/usr/lib/python3/dist-packages/osgeo_utils/samples/validate_gpkg.py")


@pytest.mark.skipif(not VALIDATE_GPKG.is_file() or shutil.which("ogrinfo") is None,
                    reason="GDAL's validate_gpkg.py (python3-gdal, with gdal-bin) is absent")
def test_geopackage_passes_gdal_conformance_checker(run_dir):
    # GDAL's checker of the OGC GeoPackage requirements, run by the system Python
    # that Debian's python3-gdal belongs to
    done = subprocess.run(["/usr/bin/python3", str(VALIDATE_GPKG), str(run_dir / "driftloop.gpkg")],
                          capture_output=True, text=True, timeout=60, check=False)
    assert done.returncode == 0, done.stdout + done.stderr
    assert done.stdout.strip() == "" and done.stderr.strip() == ""


def test_geopackage_has_every_layer_in_epsg_4326_with_provenance(run_dir, layers):
    path = run_dir / "driftloop.gpkg"
    listed = dict(pyogrio.list_layers(path).tolist())
    assert listed == {
        "fixes": "Point", "tracks": "MultiLineString", "loops": "MultiLineString",
        "loop_centres": "Point", "loop_shapes": "MultiPolygon",
    }
    for name in LAYER_NAMES:
        back = pyogrio.read_dataframe(path, layer=name)
        assert back.crs.to_epsg() == 4326
        layer = layers[name]
        assert len(back) == len(layer)
        for column in (c for c in layer.columns if c != "geometry"):
            _assert_same_values(layer[column], back[column], f"gpkg {name}.{column}")
        for want, got in zip(layer.geometry, back.geometry, strict=True):
            assert (got is None) == (want is None)
            if want is not None:
                # lines and polygons are stored as Multi*, with every bit kept
                assert shapely.equals_exact(got, _as_multi(want), tolerance=0)
        info = pyogrio.read_info(path, layer=name)
        recorded = json.loads(info["layer_metadata"]["driftloop_provenance"])
        assert recorded == PROVENANCE
        assert "driftloop test" in info["layer_metadata"]["DESCRIPTION"]
    dataset = pyogrio.read_info(path, layer="fixes")["dataset_metadata"]
    assert json.loads(dataset["driftloop_provenance"]) == PROVENANCE


def test_geoparquet_keeps_crs_columns_geometry_and_provenance(run_dir, layers):
    for name in LAYER_NAMES:
        path = run_dir / f"{name}.parquet"
        back = gpd.read_parquet(path)
        layer = layers[name]
        assert back.crs.to_epsg() == 4326
        assert list(back.columns) == list(layer.columns)
        for column in (c for c in layer.columns if c != "geometry"):
            _assert_same_values(layer[column], back[column], f"parquet {name}.{column}")
        for want, got in zip(layer.geometry, back.geometry, strict=True):
            assert (got is None) == (want is None)
            if want is not None:
                assert shapely.equals_exact(got, want, tolerance=0)
        metadata = pq.read_schema(path).metadata
        assert json.loads(metadata[b"driftloop"]) == PROVENANCE
        assert json.loads(metadata[b"geo"])["primary_column"] == "geometry"


# --------------------------------------------------------------------------- antimeridian


def test_antimeridian_track_is_a_valid_multilinestring(run_dir, layers):
    want = _feature(layers["tracks"], "drifter_id", "B").geometry
    assert want.geom_type == "MultiLineString"
    back = pyogrio.read_dataframe(run_dir / "tracks.geojson")
    got = back.geometry[back["drifter_id"] == "B"].iloc[0]
    for geom in (want, got):
        assert geom.geom_type == "MultiLineString" and geom.is_valid
        xy = shapely.get_coordinates(geom)
        assert (np.abs(xy[:, 0]) <= 180.0).all()
        parts = list(geom.geoms)
        assert len(parts) == 2
        # the parts meet on the antimeridian at one latitude
        end, start = parts[0].coords[-1], parts[1].coords[0]
        assert abs(end[0]) == 180.0 and abs(start[0]) == 180.0 and end[0] == -start[0]
        assert end[1] == pytest.approx(start[1], abs=1e-6)
    # every resampled position is a vertex of the cut line
    track = make_tables()["tracks"].query("drifter_id == 'B'")
    assert len(shapely.get_coordinates(want)) == len(track) + 2
    feature = next(f for f in _geojson(run_dir, "tracks")["features"]
                   if f["properties"]["drifter_id"] == "B")
    west, south, east, north = feature["bbox"]
    assert west > east  # RFC 7946 5.2
    lon = track["lon"].to_numpy()
    assert west == pytest.approx(lon[lon > 0].min(), abs=1e-6)
    assert east == pytest.approx(lon[lon < 0].max(), abs=1e-6)


def test_loop_shape_at_179_9_east_is_cut_into_counter_clockwise_parts(layers, run_dir):
    shape = _feature(layers["loop_shapes"], "event_id", "E1").geometry
    assert shape.geom_type == "MultiPolygon" and shape.is_valid
    assert len(shape.geoms) == 2
    xy = shapely.get_coordinates(shape)
    assert (np.abs(xy[:, 0]) <= 180.0).all()
    for ring in _exterior_rings(shape):
        assert ring.is_ccw
    # every vertex is 15 km from the centre (cut points lie on chords, 0.03 % in)
    for lon, lat in xy:
        assert _geodesic_distance(179.9, 30.0, lon, lat) == pytest.approx(15e3, rel=0.01)
    # the two parts together have the area of the unsplit ring (unwrapped to 0..360)
    ring_lon, ring_lat = ellipse_ring(179.9, 30.0, 15e3, 15e3, 0.0)
    whole = shapely.Polygon(np.column_stack([np.mod(ring_lon, 360.0), ring_lat]))
    parts = shapely.MultiPolygon([shapely.affinity.translate(p, 360.0) if p.bounds[2] <= 0
                                  else p for p in shape.geoms])
    assert parts.area == pytest.approx(whole.area, rel=1e-6)
    feature = next(f for f in _geojson(run_dir, "loop_shapes")["features"]
                   if f["properties"]["event_id"] == "E1")
    assert feature["geometry"]["type"] == "MultiPolygon"
    assert feature["bbox"][0] > feature["bbox"][2]


def test_loop_track_piece_crossing_the_antimeridian_is_cut(layers):
    piece = _feature(layers["loops"], "event_id", "E1").geometry
    assert piece.geom_type == "MultiLineString" and piece.is_valid
    assert (np.abs(shapely.get_coordinates(piece)[:, 0]) <= 180.0).all()


# --------------------------------------------------------------------------- shapes on WGS 84


def test_southern_ellipse_keeps_its_axes_and_orientation(layers):
    row = _feature(layers["loop_shapes"], "event_id", "E2")
    assert row["shape_kind"] == "ellipse"
    shape = row.geometry
    assert shape.geom_type == "Polygon" and shape.is_valid and shape.exterior.is_ccw
    xy = np.asarray(shape.exterior.coords)[:-1]
    assert len(xy) >= 64
    solved = [WGS84.Inverse(-45.01, 20.12, lat, lon) for lon, lat in xy]
    distance = np.array([s["s12"] for s in solved])
    azimuth = np.array([s["azi1"] for s in solved])
    assert distance.max() == pytest.approx(12e3, rel=0.01)
    assert distance.min() == pytest.approx(6e3, rel=0.01)
    # the farthest vertices lie along the major axis, 30 deg clockwise from north
    far = np.mod(azimuth[distance > 0.999 * distance.max()], 180.0)
    assert np.allclose(far, 30.0, atol=3.0)
    near = np.mod(azimuth[distance < 1.001 * distance.min()], 180.0)
    assert np.allclose(near, 120.0, atol=3.0)


def test_high_latitude_circle_keeps_its_radius(layers):
    row = _feature(layers["loop_shapes"], "event_id", "E3")
    assert row["shape_kind"] == "circle"
    shape = row.geometry
    assert shape.geom_type == "Polygon" and shape.is_valid and shape.exterior.is_ccw
    xy = np.asarray(shape.exterior.coords)
    assert len(xy) - 1 >= 64
    for lon, lat in xy:
        assert _geodesic_distance(-60.0, 80.0, lon, lat) == pytest.approx(20e3, rel=0.01)
    # at 80 N a degree of longitude is ~5.8 times shorter than one of latitude
    width = np.ptp(xy[:, 0])
    height = np.ptp(xy[:, 1])
    assert width / height == pytest.approx(1 / np.cos(np.deg2rad(80.0)), rel=0.02)


def test_event_without_axes_or_radius_has_no_shape(layers, run_dir):
    row = _feature(layers["loop_shapes"], "event_id", "E4")
    assert row.geometry is None and pd.isna(row["shape_kind"])
    feature = next(f for f in _geojson(run_dir, "loop_shapes")["features"]
                   if f["properties"]["event_id"] == "E4")
    assert feature["geometry"] is None and "bbox" not in feature
    assert feature["properties"]["radius_km"] is None  # NaN -> null


def test_circle_around_the_pole_is_valid_and_spans_all_longitudes():
    ring_lon, ring_lat = ellipse_ring(0.0, 89.9, 30e3, 30e3, 0.0)
    shape = conform_geometry(shapely.Polygon(np.column_stack([ring_lon, ring_lat])))
    assert shape.is_valid
    assert all(ring.is_ccw for ring in _exterior_rings(shape))
    assert shape.contains(shapely.Point(0.0, 89.99))
    assert shape.bounds[0] == -180.0 and shape.bounds[2] == 180.0
    assert shape.bounds[3] == 90.0


# --------------------------------------------------------------------------- RFC 7946 structure


def _check_position(position, where):
    assert isinstance(position, list) and len(position) == 2, where
    for value in position:
        assert isinstance(value, str) and re.fullmatch(r"-?\d+(\.\d{1,6})?", value), (
            f"{where}: {value!r} is not a plain number with at most 6 decimals")
    lon, lat = float(position[0]), float(position[1])
    assert -180.0 <= lon <= 180.0 and -90.0 <= lat <= 90.0, where


def _check_ring(ring, where):
    assert len(ring) >= 4 and ring[0] == ring[-1], where  # 3.1.6: closed, >= 4 positions
    for p in ring:
        _check_position(p, where)


def _check_geometry(geometry, where):
    if geometry is None:
        return
    assert set(geometry) == {"type", "coordinates"}, where
    kind, coords = geometry["type"], geometry["coordinates"]
    if kind == "Point":
        _check_position(coords, where)
    elif kind == "LineString":
        assert len(coords) >= 2, where
        for p in coords:
            _check_position(p, where)
    elif kind == "MultiLineString":
        for line in coords:
            _check_geometry({"type": "LineString", "coordinates": line}, where)
    elif kind == "Polygon":
        for k, ring in enumerate(coords):
            _check_ring(ring, where)
            xy = [(float(x), float(y)) for x, y in ring]
            # right-hand rule: exterior counter-clockwise, holes clockwise
            assert shapely.LinearRing(xy).is_ccw == (k == 0), where
    elif kind == "MultiPolygon":
        for polygon in coords:
            _check_geometry({"type": "Polygon", "coordinates": polygon}, where)
    else:
        raise AssertionError(f"{where}: unexpected geometry type {kind}")


def _check_bbox(box, where):
    assert isinstance(box, list) and len(box) == 4, where
    west, south, east, north = (float(v) for v in box)
    assert south <= north and -180 <= west <= 180 and -180 <= east <= 180, where


def test_geojson_follows_rfc_7946(run_dir):
    for name in LAYER_NAMES:
        text = (run_dir / f"{name}.geojson").read_text(encoding="utf-8")
        assert "NaN" not in text and "Infinity" not in text
        data = json.loads(text, parse_float=str, parse_int=str)
        assert data["type"] == "FeatureCollection"
        assert "crs" not in data
        assert data["driftloop"]["version"] == "test"  # foreign member, 6.1
        _check_bbox(data["bbox"], name)
        assert data["features"]
        for k, feature in enumerate(data["features"]):
            where = f"{name}[{k}]"
            assert feature["type"] == "Feature", where
            assert set(feature) <= {"type", "bbox", "properties", "geometry"}, where
            assert "crs" not in feature and isinstance(feature["properties"], dict)
            _check_geometry(feature["geometry"], where)
            if feature["geometry"] is not None and feature["geometry"]["type"] != "Point":
                _check_bbox(feature["bbox"], where)


def test_geojson_property_types_are_stable(run_dir, layers):
    for name in LAYER_NAMES:
        data = _geojson(run_dir, name)
        layer = layers[name]
        for column in (c for c in layer.columns if c != "geometry"):
            values = [f["properties"][column] for f in data["features"]]
            kinds = {type(v) for v in values if v is not None}
            dtype = layer[column].dtype
            if pd.api.types.is_datetime64_any_dtype(dtype):
                assert kinds == {str}
                assert all(v.endswith("Z") for v in values if v is not None)
                assert [pd.Timestamp(v) for v in values] == list(layer[column])
            elif pd.api.types.is_bool_dtype(dtype):
                assert kinds == {bool}, column
            elif pd.api.types.is_integer_dtype(dtype):
                assert kinds == {int}, column
            elif pd.api.types.is_float_dtype(dtype):
                assert kinds <= {float}, column
                nan = layer[column].isna().to_numpy()
                assert [v is None for v in values] == nan.tolist(), column
            else:
                assert kinds <= {str}, column


def test_feature_boxes_lie_inside_the_collection_box(run_dir):
    for name in LAYER_NAMES:
        data = _geojson(run_dir, name)
        west, south, east, north = data["bbox"]
        for feature in data["features"]:
            if feature["geometry"] is None:
                continue
            xy = shapely.get_coordinates(shapely.geometry.shape(feature["geometry"]))
            assert all(_lon_in_box(x, west, east) for x in xy[:, 0]), name
            assert south <= xy[:, 1].min() and xy[:, 1].max() <= north
    # shapes near 180, at 60 W and at 20 E: the largest empty arc is 20 E .. 179.7 E, so the
    # shortest covering range runs from the shape at 180 eastwards to the one at 20 E
    shapes = _geojson(run_dir, "loop_shapes")
    by_id = {f["properties"]["event_id"]: f for f in shapes["features"]}
    west, _, east, _ = shapes["bbox"]
    assert west == by_id["E1"]["bbox"][0] and east == by_id["E2"]["bbox"][2]
    assert west > 179.0 and 20.0 < east < 21.0


def test_geojson_output_is_deterministic(tmp_path, tables):
    first = export_run(tables, tmp_path / "one", provenance=PROVENANCE)
    again = export_run(make_tables(), tmp_path / "two", provenance=PROVENANCE)
    assert [p.name for p in first] == [f"{n}.geojson" for n in LAYER_NAMES]
    for a, b in zip(first, again, strict=True):
        assert a.read_bytes() == b.read_bytes()


# --------------------------------------------------------------------------- layer contents


def test_fixes_layer_keeps_every_row_and_nulls_bad_positions(run_dir, tables):
    data = _geojson(run_dir, "fixes")
    fixes = tables["fixes"]
    assert len(data["features"]) == len(fixes)
    assert list(data["features"][0]["properties"]) == list(FIXES_CSV_COLUMNS)
    geometries = [f["geometry"] for f in data["features"]]
    assert geometries[2] is None and geometries[3] is None  # NaN lat, lat 95
    assert data["features"][2]["properties"]["lat"] is None
    assert data["features"][3]["properties"]["raw"] == "A,2026-03-01T01:30Z,95,-29.97"
    assert geometries[0]["coordinates"] == [-30, 40]  # lon, lat order
    assert geometries[5]["coordinates"] == [179.99, 30]
    assert data["features"][4]["properties"]["qc_flag"] == 3
    assert data["features"][7]["properties"]["time_assumed_utc"] is True
    back = pyogrio.read_dataframe(run_dir / "fixes.geojson")
    assert back.geometry.isna().tolist() == [False, False, True, True] + [False] * 4


def test_track_properties_match_geographiclib(layers, tables):
    track_layer = layers["tracks"]
    assert track_layer[["drifter_id", "segment"]].values.tolist() == [
        ["A", 0], ["A", 1], ["B", 0], ["C", 0], ["D", 0]]
    for row in track_layer.itertuples():
        points = tables["tracks"].query("drifter_id == @row.drifter_id and segment == @row.segment")
        length = sum(_geodesic_distance(points["lon"].iloc[k], points["lat"].iloc[k],
                                        points["lon"].iloc[k + 1], points["lat"].iloc[k + 1])
                     for k in range(len(points) - 1))
        assert row.n_points == len(points)
        assert row.length_km == pytest.approx(length / 1000.0, rel=1e-9)
        assert row.start == points["time"].min() and row.end == points["time"].max()
        hours = (row.end - row.start).total_seconds()
        assert row.mean_speed_m_s == pytest.approx(length / hours, rel=1e-9)


def test_single_position_segment_has_null_geometry():
    tracks = make_tables()["tracks"].iloc[:1]
    layer = build_layers({"tracks": tracks})["tracks"]
    assert layer.geometry.iloc[0] is None
    assert layer["n_points"].iloc[0] == 1 and layer["length_km"].iloc[0] == 0.0
    assert np.isnan(layer["mean_speed_m_s"].iloc[0])


def test_loop_pieces_follow_the_track_between_start_and_end(layers, tables):
    loops = layers["loops"]
    events = tables["events"]
    assert loops["event_id"].tolist() == events["event_id"].tolist()
    assert [c for c in loops.columns if c != "geometry"] == list(events.columns)
    row = _feature(loops, "event_id", "E2")
    track = tables["tracks"].query("drifter_id == 'D'")
    inside = track[(track["time"] >= row["start"]) & (track["time"] <= row["end"])]
    assert len(inside) == 19
    np.testing.assert_allclose(np.asarray(row.geometry.coords),
                               inside[["lon", "lat"]].to_numpy(), rtol=0, atol=1e-12)


def test_loop_centres_use_centre_columns_then_mean_position(layers):
    centres = layers["loop_centres"]
    e2 = _feature(centres, "event_id", "E2").geometry
    e3 = _feature(centres, "event_id", "E3").geometry
    assert (e2.x, e2.y) == (20.12, -45.01)
    assert (e3.x, e3.y) == (-60.0, 80.0)


# --------------------------------------------------------------------------- files and failures


def test_csv_tables_with_sidecars_and_fixes_csv_untouched(tmp_path, tables):
    out = tmp_path / "run"
    out.mkdir()
    (out / "fixes.csv").write_text("written by the pipeline\n")
    written = export_run(tables, out, formats=("csv",), provenance=PROVENANCE)
    assert [p.name for p in written] == [
        "resampled.csv", "resampled.csv-metadata.json", "loops.csv", "loops.csv-metadata.json"]
    assert (out / "fixes.csv").read_text() == "written by the pipeline\n"
    loops = pd.read_csv(out / "loops.csv")
    assert loops["event_id"].tolist() == ["E1", "E2", "E3", "E4"]
    assert loops["start"].iloc[0] == "2026-03-01T06:00:00Z"
    tracks = pd.read_csv(out / "resampled.csv")
    assert len(tracks) == len(tables["tracks"])
    meta = json.loads((out / "resampled.csv-metadata.json").read_text())
    columns = {c["name"]: c for c in meta["tableSchema"]["columns"]}
    assert list(columns) == list(tables["tracks"].columns)
    assert columns["in_gap"]["datatype"] == "boolean"
    assert columns["u"]["dc:description"] == "eastward velocity (m s-1)"
    assert meta["notes"] == [PROVENANCE]


def test_failed_geopackage_write_leaves_no_file(tmp_path, tables, monkeypatch):
    out = tmp_path / "run"
    export_run(tables, out, formats=("gpkg",), provenance=PROVENANCE)
    before = (out / "driftloop.gpkg").read_bytes()
    real = pyogrio.write_dataframe
    calls = []

    def failing(df, path, **kwargs):
        calls.append(kwargs["layer"])
        if len(calls) == 3:
            raise RuntimeError("disk full")
        return real(df, path, **kwargs)

    monkeypatch.setattr(export_formats.pyogrio, "write_dataframe", failing)
    with pytest.raises(RuntimeError, match="disk full"):
        export_run(tables, out, formats=("gpkg",), provenance={"version": "other"})
    assert (out / "driftloop.gpkg").read_bytes() == before
    assert sorted(p.name for p in out.iterdir()) == ["driftloop.gpkg"]


def test_layers_without_their_tables_are_not_written(tmp_path, tables):
    written = export_run({"fixes": tables["fixes"]}, tmp_path, formats=("geojson", "gpkg"))
    assert [p.name for p in written] == ["fixes.geojson", "driftloop.gpkg"]
    assert pyogrio.list_layers(tmp_path / "driftloop.gpkg")[:, 0].tolist() == ["fixes"]
    provenance = _geojson(tmp_path, "fixes")["driftloop"]
    assert provenance["software"] == "driftloop" and provenance["version"]


def test_empty_catalogue_gives_empty_valid_layers(tmp_path, tables):
    events = tables["events"].iloc[:0]
    written = export_run({"tracks": tables["tracks"], "events": events}, tmp_path,
                         formats=("geojson", "gpkg"))
    assert (tmp_path / "loop_shapes.geojson") in written
    data = _geojson(tmp_path, "loop_shapes")
    assert data["features"] == [] and "bbox" not in data
    assert len(pyogrio.read_dataframe(tmp_path / "loop_shapes.geojson")) == 0
    assert len(pyogrio.read_dataframe(tmp_path / "driftloop.gpkg", layer="loops")) == 0


def test_bad_requests_are_refused(tmp_path, tables):
    with pytest.raises(ValueError, match="unknown export format"):
        export_run(tables, tmp_path, formats=("shapefile",))
    with pytest.raises(ValueError, match="unknown table"):
        export_run({"ridges": tables["tracks"]}, tmp_path)
    with pytest.raises(ValueError, match="lacks column"):
        export_run({"tracks": tables["tracks"].drop(columns="lat")}, tmp_path)
    layer = build_layers({"fixes": tables["fixes"]})["fixes"].to_crs("EPSG:3857")
    with pytest.raises(ValueError, match="WGS 84"):
        geojson_text(layer)


def test_longitudes_beyond_180_are_wrapped_before_cutting():
    line = conform_geometry(shapely.LineString([(179.0, 0.0), (181.0, 0.0), (183.0, 0.5)]))
    assert line.geom_type == "MultiLineString"
    xy = shapely.get_coordinates(line)
    assert xy[:, 0].min() >= -180.0 and xy[:, 0].max() <= 180.0
    assert xy[-1].tolist() == pytest.approx([-177.0, 0.5])


def test_docs_describe_every_layer_and_property():
    from driftloop.export.layers import EVENT_COLUMNS, TRACK_COLUMNS, TRACK_PROPERTIES

    text = (Path(__file__).resolve().parent.parent / "docs" / "gis.md").read_text()
    names = [*FIXES_CSV_COLUMNS, *TRACK_COLUMNS, *EVENT_COLUMNS, *TRACK_PROPERTIES, "shape_kind"]
    missing = sorted({n for n in names if f"| `{n}` |" not in text})
    assert not missing, f"docs/gis.md lacks {missing}"
    for name in LAYER_NAMES:
        assert f"### {name} " in text, name
