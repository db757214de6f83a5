"""GPX reader: tracks, waypoints, namespaces, malformed and hostile XML."""

from __future__ import annotations

import time
import tracemalloc

import numpy as np
import pandas as pd
import pytest

from driftloop.config import ReadConfig
from driftloop.errors import InputError
from driftloop.io import FIX_COLUMNS, read_file
from driftloop.io.gpx import read_gpx

GPX11 = "http://www.topografix.com/GPX/1/1"  # GPX 1.1 schema, Topografix
GPX10 = "http://www.topografix.com/GPX/1/0"  # GPX 1.0 schema, Topografix
NOON = pd.Timestamp("2026-03-01T12:00:00Z")


def write(tmp_path, name, text):
    path = tmp_path / name
    path.write_text(text, encoding="utf-8")
    return path


def read(path, **config):
    return read_gpx(path, ReadConfig(**config))


def error_of(path, **config) -> InputError:
    with pytest.raises(InputError) as caught:
        read(path, **config)
    return caught.value


def track_document(namespace: str | None, version: str = "1.1") -> str:
    xmlns = f' xmlns="{namespace}"' if namespace else ""
    return (
        '<?xml version="1.0" encoding="UTF-8"?>\n'                                   # line 1
        f'<gpx version="{version}" creator="test"{xmlns} xmlns:e="urn:example">\n'  # line 2
        '  <wpt lat="10.5" lon="20.5"><time>2026-03-01T00:00:00Z</time></wpt>\n'    # line 3
        "  <trk>\n"                                                                  # line 4
        "    <name>LANTERN-07</name>\n"                                              # line 5
        "    <trkseg>\n"                                                             # line 6
        '      <trkpt lat="45.0" lon="-30.0"><ele>0</ele>\n'                         # line 7
        "        <time>2026-03-01T12:00:00Z</time></trkpt>\n"                        # line 8
        '      <trkpt lat="45.1" lon="-29.9"><time>2026-03-01T14:00:00+02:00</time>\n'  # 9
        "        <extensions><e:time>not this one</e:time></extensions></trkpt>\n"  # line 10
        "    </trkseg>\n"                                                            # line 11
        "    <trkseg>\n"                                                             # line 12
        '      <trkpt lat="45.2" lon="-29.8"><time>2026-03-01T13:00:00</time></trkpt>\n'  # 13
        "    </trkseg>\n"
        "  </trk>\n"
        "</gpx>\n"
    )


@pytest.mark.parametrize(("namespace", "version"), [(GPX11, "1.1"), (GPX10, "1.0"), (None, "1.1")])
def test_tracks_and_waypoints(tmp_path, namespace, version):
    path = write(tmp_path, "cruise.gpx", track_document(namespace, version))
    table = read(path)
    assert list(table.columns) == list(FIX_COLUMNS)
    assert table["drifter_id"].tolist() == ["cruise", "LANTERN-07", "LANTERN-07", "LANTERN-07"]
    assert table["source_row"].tolist() == [3, 7, 9, 13]  # line of each point's start tag
    assert table["lat"].tolist() == [10.5, 45.0, 45.1, 45.2]
    assert table["lon"].tolist() == pytest.approx([20.5, -30.0, -29.9, -29.8], abs=1e-12)
    # RFC 3339 / ISO 8601 offset semantics: 14:00+02:00 is 12:00Z; the extension's
    # <e:time> in another namespace is not the point's time
    assert table["time"].iloc[2] == NOON
    # GPX 1.1 schema: times are UTC; one without a designator is flagged
    assert table["time_assumed_utc"].tolist() == [False, False, False, True]
    assert (table["parse_error"] == "").all()


def test_waypoint_and_unnamed_track_take_configured_id(tmp_path):
    path = write(tmp_path, "x.gpx", (
        f'<gpx xmlns="{GPX11}"><wpt lat="1" lon="2"/>'
        '<trk><trkseg><trkpt lat="3" lon="4"/></trkseg></trk></gpx>'
    ))
    table = read(path, drifter_id="SVP-1")
    assert table["drifter_id"].tolist() == ["SVP-1", "SVP-1"]
    assert table["time"].isna().all()  # no <time>: missing, not an error
    assert (table["parse_error"] == "").all()


def test_bad_and_missing_coordinates_are_kept(tmp_path):
    path = write(tmp_path, "t.gpx", (
        f'<gpx xmlns="{GPX11}"><trk><trkseg>\n'
        '<trkpt lat="abc" lon="4"><time>2026-03-01T12:00:00Z</time></trkpt>\n'
        '<trkpt lon="5"/>\n'
        '<trkpt lat="95" lon="6"><time>yesterday</time></trkpt>\n'
        "</trkseg></trk></gpx>\n"
    ))
    table = read(path)
    assert len(table) == 3
    assert table["parse_error"].tolist() == [
        "lat: not a number 'abc'", "lat: attribute missing", "time: not a time 'yesterday'",
    ]
    assert table["raw"].iloc[0] == '<trkpt lat="abc" lon="4"><time>2026-03-01T12:00:00Z</time>'
    assert table["lat"].iloc[2] == 95.0  # out of range is for QC, not the reader
    assert table["source_row"].tolist() == [2, 3, 4]


def test_routes_are_not_fixes(tmp_path):
    path = write(tmp_path, "r.gpx",
                 f'<gpx xmlns="{GPX11}"><rte><rtept lat="1" lon="2"/></rte></gpx>')
    assert "it has only routes" in str(error_of(path))


def test_not_gpx_root(tmp_path):
    path = write(tmp_path, "k.gpx", '<kml xmlns="http://www.opengis.net/kml/2.2"/>')
    assert str(error_of(path)) == (
        f"{path}, row 1: not a GPX file: the root element is <kml>, expected <gpx>"
    )


def test_malformed_xml_gives_the_line(tmp_path):
    path = write(tmp_path, "m.gpx", (
        f'<gpx xmlns="{GPX11}">\n<trk><trkseg>\n<trkpt lat="1" lon="2">\n</trkseg></trk></gpx>\n'
    ))
    error = error_of(path)
    assert error.row == 4
    assert str(error).startswith(f"{path}, row 4: not well-formed XML: mismatched tag (line 4")


def test_empty_file(tmp_path):
    path = write(tmp_path, "e.gpx", "")
    assert str(error_of(path)) == f"{path}: file is empty"


BILLION_LAUGHS = """<?xml version="1.0"?>
<!DOCTYPE gpx [
  <!ENTITY a "lollollollollollollollollollol">
  <!ENTITY b "&a;&a;&a;&a;&a;&a;&a;&a;&a;&a;">
  <!ENTITY c "&b;&b;&b;&b;&b;&b;&b;&b;&b;&b;">
  <!ENTITY d "&c;&c;&c;&c;&c;&c;&c;&c;&c;&c;">
  <!ENTITY e "&d;&d;&d;&d;&d;&d;&d;&d;&d;&d;">
  <!ENTITY f "&e;&e;&e;&e;&e;&e;&e;&e;&e;&e;">
  <!ENTITY g "&f;&f;&f;&f;&f;&f;&f;&f;&f;&f;">
  <!ENTITY h "&g;&g;&g;&g;&g;&g;&g;&g;&g;&g;">
  <!ENTITY i "&h;&h;&h;&h;&h;&h;&h;&h;&h;&h;">
  <!ENTITY j "&i;&i;&i;&i;&i;&i;&i;&i;&i;&i;">
]>
<gpx xmlns="http://www.topografix.com/GPX/1/1"><trk><name>&j;</name>
<trkseg><trkpt lat="1" lon="2"/></trkseg></trk></gpx>
"""


def test_billion_laughs_is_refused_without_expansion(tmp_path):
    path = write(tmp_path, "bomb.gpx", BILLION_LAUGHS)
    tracemalloc.start()
    started = time.perf_counter()
    try:
        error = error_of(path)
        _, peak = tracemalloc.get_traced_memory()
    finally:
        tracemalloc.stop()
    elapsed = time.perf_counter() - started
    assert "refused: the file declares XML entities/DTD" in str(error)
    assert "entity-expansion" in str(error)
    # &j; would expand to 3e10 characters (30 bytes * 10**9); refusing it costs almost nothing
    assert peak < 5_000_000
    assert elapsed < 5.0
    assert "lol" not in str(error)


def test_external_entity_is_refused_and_not_read(tmp_path):
    secret = tmp_path / "secret.txt"
    secret.write_text("MARKER-7f3a-SECRET")
    path = write(tmp_path, "xxe.gpx", (
        '<?xml version="1.0"?>\n'
        f'<!DOCTYPE gpx [<!ENTITY leak SYSTEM "{secret.as_uri()}">]>\n'
        f'<gpx xmlns="{GPX11}"><trk><name>&leak;</name>'
        '<trkseg><trkpt lat="1" lon="2"/></trkseg></trk></gpx>\n'
    ))
    error = error_of(path)
    assert "refused" in str(error) and "external-entity" in str(error)
    assert "MARKER-7f3a-SECRET" not in str(error)


def test_external_dtd_is_refused(tmp_path):
    dtd = tmp_path / "evil.dtd"
    dtd.write_text('<!ENTITY x "MARKER-DTD">')
    path = write(tmp_path, "dtd.gpx", (
        f'<?xml version="1.0"?>\n<!DOCTYPE gpx SYSTEM "{dtd.as_uri()}">\n'
        f'<gpx xmlns="{GPX11}"><wpt lat="1" lon="2"><name>&x;</name></wpt></gpx>\n'
    ))
    error = error_of(path)
    assert "refused" in str(error)
    assert "MARKER-DTD" not in str(error)


def test_accounting_rows_out_equal_points_in(tmp_path):
    rng = np.random.default_rng(3)
    points = []
    for i in range(300):
        lat = "bad" if i % 17 == 0 else f"{rng.uniform(-80, 80):.5f}"
        points.append(f'<trkpt lat="{lat}" lon="{rng.uniform(-170, 170):.5f}">'
                      f"<time>2026-03-01T{i % 24:02d}:00:00Z</time></trkpt>")
    segments = "".join(f"<trkseg>{''.join(points[k:k + 50])}</trkseg>" for k in range(0, 300, 50))
    waypoints = "".join(f'<wpt lat="{k}" lon="{k}"/>' for k in range(7))
    document = f'<gpx xmlns="{GPX11}">{waypoints}<trk>{segments}</trk></gpx>'
    path = write(tmp_path, "acc.gpx", document)
    table = read_file(path)
    assert len(table) == 300 + 7
    assert (table["parse_error"] != "").sum() == len(range(0, 300, 17))
