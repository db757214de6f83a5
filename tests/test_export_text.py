"""Text of GeoJSON coordinates, geometries and features, formatted whole arrays at a time.

References: coordinates are checked against Python's own fixed-point
formatting, ``format(x, ".6f")`` with trailing zeros stripped (the six
decimals RFC 7946 §11.2 advises); geometry objects against the layout of
RFC 7946 §3.1 (positions, rings, Multi* nesting) built here from shapely's
``__geo_interface__``; property members against Python's :mod:`json`
encoder; ring winding against the shoelace formula (RFC 7946 §3.1.6
right-hand rule).
"""

from __future__ import annotations

import json
import math

import geopandas as gpd
import numpy as np
import pandas as pd
import pytest
import shapely

from driftloop.export import geojson as gj


def _reference_number(x: float) -> str:
    """``format(x, '.6f')`` with trailing zeros and point stripped, ``-0`` written ``0``."""
    text = format(x, ".6f").rstrip("0").rstrip(".")
    return "0" if text == "-0" else text


def _edge_values() -> np.ndarray:
    """Values where fixed-point rounding is delicate."""
    rng = np.random.default_rng(7)
    k = rng.integers(-180_000_000, 180_000_000, 20_000).astype(float)
    halves = (k + 0.5) / 1e6  # close to (not exactly at) half a unit in the sixth decimal
    near = np.concatenate([np.nextafter(halves, np.inf), np.nextafter(halves, -np.inf)])
    exact_halves = np.array([0.5, 1.5, 2.5, 0.25, 0.125, 0.0625, 2.0**-21, 3 * 2.0**-21,
                             2.0**-20, 2.0**-7 + 2.0**-21]) * np.array([1e-5] * 5 + [1] * 5)
    special = np.array([0.0, -0.0, 1e-7, -1e-7, 4.9e-7, -4.9e-7, 5e-7, -5e-7, 5.000001e-7,
                        -5.000001e-7, 1e-6, -1e-6, 1.5e-6, 2.5e-6, -2.5e-6, 0.0000015,
                        179.9999995, -179.9999995, 180.0, -180.0, 90.0, -90.0, 1e-300,
                        -1e-300, 5e-324, 123456789.123456, -987654321.9999994,
                        999999999.9999994, 999999999.9999996, 1e9, -1e9, 1e15, 1e20, 1e300,
                        -1e300, 2.0**53, np.nan, np.inf, -np.inf, 0.1, 0.7, 1 / 3, 2 / 3,
                        0.000001499999, 0.0000025000000001])
    return np.concatenate([halves, near, exact_halves, -exact_halves, special])


def _random_values(n: int, seed: int) -> np.ndarray:
    rng = np.random.default_rng(seed)
    bits = rng.integers(0, 2**63, n, dtype=np.int64) * rng.choice([-1, 1], n)
    return np.concatenate([
        rng.uniform(-180.0, 180.0, n),
        np.round(rng.uniform(-180.0, 180.0, n), 6),
        rng.normal(0.0, 1e-5, n),
        10.0 ** rng.uniform(-9.0, 10.0, n) * rng.choice([-1.0, 1.0], n),
        bits.view(np.float64),  # every magnitude, subnormals, NaN and infinities
    ])


@pytest.mark.parametrize("values", [_edge_values(), _random_values(40_000, 1),
                                    _random_values(40_000, 2)], ids=["edges", "random1",
                                                                      "random2"])
def test_vectorised_numbers_equal_pythons_fixed_point_format(values):
    expected = [_reference_number(x) for x in values.tolist()]
    assert gj._number_texts(values) == expected
    assert [gj._number(x) for x in values.tolist()] == expected


def test_number_grid_gives_way_to_text_too_wide_for_it():
    values = np.array([1.5, 1e300, -0.0])
    assert gj._decimal_chars(values) is None
    assert gj._number_texts(values) == ["1.5", _reference_number(1e300), "0"]


def test_number_texts_of_an_empty_array():
    assert gj._number_texts(np.empty(0)) == []


def _positions_reference(coords) -> str:
    return "[" + ",".join(
        f"[{_reference_number(c[0])},{_reference_number(c[1])}]" for c in coords
    ) + "]"


def _geometry_reference(geom) -> str:
    """RFC 7946 §3.1 geometry text from shapely's ``__geo_interface__``."""
    if geom is None:
        return "null"
    data = geom.__geo_interface__
    kind, coords = data["type"], data["coordinates"]
    if kind == "Point":
        text = _positions_reference([coords])[1:-1]
    elif kind in ("LineString", "MultiPoint"):
        text = _positions_reference(coords)
    elif kind in ("Polygon", "MultiLineString"):
        text = "[" + ",".join(_positions_reference(r) for r in coords) + "]"
    else:
        text = "[" + ",".join(
            "[" + ",".join(_positions_reference(r) for r in p) + "]" for p in coords
        ) + "]"
    return f'{{"type":"{kind}","coordinates":{text}}}'


def _sample_geometries(seed: int) -> np.ndarray:
    rng = np.random.default_rng(seed)

    def xy(n):
        return np.column_stack([rng.uniform(-180, 180, n), rng.uniform(-90, 90, n)])

    square = [(0, 0), (10, 0), (10, 10), (0, 10), (0, 0)]
    hole = [(2, 2), (2, 4), (4, 4), (4, 2), (2, 2)]
    geoms = [
        shapely.Point(1.25, -0.5), None, shapely.LineString(xy(5)),
        shapely.Polygon(square, [hole]), shapely.MultiPoint(xy(3)),
        shapely.MultiLineString([xy(2), xy(4)]), shapely.Point(-0.0000001, 179.9999996),
        shapely.MultiPolygon([shapely.Polygon(square, [hole]),
                              shapely.Polygon([(20, 20), (21, 20), (21, 21), (20, 20)])]),
        shapely.LineString(xy(300)), shapely.Point(*xy(1)[0]),
    ]
    return np.array(geoms * 3, dtype=object)


@pytest.mark.parametrize("seed", [0, 1])
def test_geometry_texts_follow_rfc_7946_layout(seed):
    geoms = _sample_geometries(seed)
    texts = gj._geometry_texts(geoms)
    assert texts == [_geometry_reference(g) for g in geoms]
    for text, geom in zip(texts, geoms, strict=True):
        parsed = json.loads(text)
        if geom is None:
            assert parsed is None
        else:
            assert parsed["type"] == geom.geom_type


def test_geometry_texts_refuse_collections():
    collection = shapely.GeometryCollection([shapely.Point(0, 0)])
    with pytest.raises(TypeError, match="GeometryCollection"):
        gj._geometry_texts(np.array([shapely.Point(1, 1), collection], dtype=object))


def test_feature_properties_are_what_the_json_module_writes():
    rng = np.random.default_rng(3)
    n = 50
    layer = gpd.GeoDataFrame({
        "name%s": pd.array([f'd"{k}\\\u00e9\n' if k % 3 else "plain" if k % 7 else None
                            for k in range(n)], dtype="string"),
        "code": pd.array([f"c{k}" if k % 5 else None for k in range(n)], dtype="str"),
        "n": pd.array([k if k % 4 else None for k in range(n)], dtype="Int64"),
        "u": rng.integers(0, 2**63, n, dtype=np.uint64),
        "x": np.where(rng.random(n) < 0.2, np.nan, rng.normal(0, 1e3, n)),
        "k": rng.integers(-5, 5, n),
        "ok": rng.random(n) < 0.5,
        "t": pd.Timestamp("2026-03-01T00:00:00Z") + pd.to_timedelta(rng.integers(0, 10**6, n),
                                                                   unit="s"),
    }, geometry=[shapely.Point(*p) for p in rng.uniform(-50, 50, (n, 2))], crs="EPSG:4326")
    lines, geoms = gj._feature_lines(layer)
    columns = [c for c in layer.columns if c != "geometry"]
    assert gj._feature_list(layer, columns, geoms) == lines  # Python strings, no Arrow
    for line, (_, row) in zip(lines, layer.iterrows(), strict=True):
        props = {
            "name%s": None if pd.isna(row["name%s"]) else row["name%s"],
            "code": None if pd.isna(row["code"]) else row["code"],
            "n": None if pd.isna(row["n"]) else int(row["n"]), "u": int(row["u"]),
            "x": None if math.isnan(row["x"]) else float(row["x"]),
            "k": int(row["k"]), "ok": bool(row["ok"]),
            "t": row["t"].strftime("%Y-%m-%dT%H:%M:%SZ"),
        }
        member = json.dumps(props, ensure_ascii=False, separators=(",", ":"))
        assert f'"properties":{member},' in line
        assert json.loads(line)["properties"] == props


def _signed_area(ring) -> float:
    """Shoelace formula: positive for a counter-clockwise ring."""
    x, y = np.asarray(ring, dtype=float).T
    return 0.5 * float(np.sum(x[:-1] * y[1:] - x[1:] * y[:-1]))


def test_rounded_polygons_follow_the_right_hand_rule():
    clockwise = [(0, 0), (0, 10), (10, 10), (10, 0), (0, 0)]
    hole_ccw = [(2, 2), (4, 2), (4, 4), (2, 4), (2, 2)]
    geoms = np.array([
        shapely.Polygon(clockwise, [hole_ccw]),
        shapely.MultiPolygon([shapely.Polygon(clockwise, [hole_ccw]),
                              shapely.Polygon([(20, 20), (20, 21), (21, 21), (20, 20)])]),
        None,
    ], dtype=object)
    rounded = gj._round_geometries(gj.conform_geometries(geoms))
    for text in gj._geometry_texts(rounded)[:2]:
        coords = json.loads(text)["coordinates"]
        polygons = coords if json.loads(text)["type"] == "MultiPolygon" else [coords]
        for polygon in polygons:
            assert _signed_area(polygon[0]) > 0
            assert all(_signed_area(r) < 0 for r in polygon[1:])
    assert rounded[2] is None


def test_feature_boxes_are_part_bounds_or_cross_the_antimeridian():
    line = shapely.LineString([(10.1234567, -5.5), (12.0, 3.25), (11.0, 1.0)])
    cut = gj.conform_geometry(shapely.LineString([(179.5, 10.0), (-179.5, 11.0)]))
    layer = gpd.GeoDataFrame({"k": [1, 2]}, geometry=[line, cut], crs="EPSG:4326")
    lines, _ = gj._feature_lines(layer)
    boxes = [json.loads(t)["bbox"] for t in lines]
    assert boxes[0] == [10.123457, -5.5, 12.0, 3.25]  # shapely bounds rounded to 1e-6
    assert boxes[1] == [179.5, 10.0, -179.5, 11.0]  # RFC 7946 §5.2: west > east


def test_geometries_conformed_together_are_those_conformed_one_by_one():
    rng = np.random.default_rng(11)
    geoms = [
        shapely.LineString([(179.5, 10.0), (-179.5, 11.0)]),  # crosses: cut (RFC 7946 §3.1.9)
        shapely.LineString([(10.0, 1.0), (11.0, 2.0), (12.0, 1.5)]),
        shapely.LineString([(181.0, 1.0), (182.0, 2.0)]),  # wrapped into [-180, 180]
        shapely.LineString([(1.0, 1.0, 5.0), (2.0, 2.0, 6.0)]),  # 3-D: written 2-D
        shapely.LineString([(-90.0, 0.0), (89.9999995, 0.0)]),  # nearly 180 degrees apart
        shapely.Polygon([(0, 0), (0, 10), (10, 10), (10, 0), (0, 0)]),  # clockwise
        shapely.Polygon([(0, 0), (10, 0), (10, 10), (0, 0)], [[(6, 2), (8, 2), (8, 4), (6, 2)]]),
        shapely.Polygon([(179.0, 0.0), (-179.0, 0.0), (-179.0, 1.0), (179.0, 1.0),
                         (179.0, 0.0)]),  # crosses the antimeridian
        shapely.MultiLineString([[(0, 0), (1, 1)], [(2, 2), (3, 1)]]),
        shapely.Point(200.0, 5.0), None, shapely.LineString(),
        *[shapely.LineString(np.column_stack([rng.uniform(-180, 180, 6), rng.uniform(-80, 80, 6)]))
          for _ in range(20)],
    ]
    array = np.empty(len(geoms), dtype=object)
    array[:] = geoms
    together = gj.conform_geometries(array)
    one_by_one = [gj.conform_geometry(g) for g in geoms]
    assert [None if g is None else g.wkb for g in together] == \
        [None if g is None else g.wkb for g in one_by_one]
    for geom in together:
        if geom is None:
            continue
        lon = shapely.get_coordinates(geom)[:, 0]
        assert ((lon >= -180.0) & (lon <= 180.0)).all()
        assert not shapely.has_z(geom)
    assert together[0].geom_type == "MultiLineString"
    assert _signed_area(shapely.get_coordinates(together[5])) > 0


def test_points_are_rounded_to_the_grid_as_geos_set_precision_does():
    rng = np.random.default_rng(5)
    n = 100_000
    k = rng.integers(-180_000_000, 180_000_000, n).astype(float)
    halves = (k + 0.5) / 1e6
    near = np.concatenate([halves + d * np.spacing(halves) for d in range(-3, 4)])
    near = near[near * 1e6 == np.floor(near * 1e6) + 0.5]  # products exactly at a half
    x = np.concatenate([rng.uniform(-180, 180, n), rng.normal(0, 1e-5, n), near, -near,
                        [0.0, -0.0, -1e-7, 4e-7, -5e-7, 180.0, -180.0]])
    y = rng.permutation(np.resize(x, x.size))
    geoms = shapely.points(x, y)
    geos = shapely.get_coordinates(shapely.set_precision(geoms, 1e-6))  # the reference
    ours = shapely.get_coordinates(gj._round_geometries(geoms))
    assert near.size > 1000
    assert np.array_equal(ours.view(np.int64), geos.view(np.int64))  # bit for bit, -0.0 too
