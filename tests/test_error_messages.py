"""Every refusal is one line that says where and what: file, row, column, what was expected.

Shape (docs/cli.md): ``driftloop: error: FILE[, row N][, column 'C']: what was
wrong; what was expected``, exactly one line on stderr, exit status 1, no
traceback, and no output file written.
"""

from __future__ import annotations

import subprocess
import sys
from pathlib import Path

import netCDF4
import numpy as np
import pyarrow as pa
import pyarrow.parquet as pq
import pytest
import strategies

GOOD = "drifter,time,lat,lon\nD1,2026-03-01T00:00:00Z,45.0,-30.0\n"


def _text(content: str):
    def make(path: Path) -> None:
        path.write_text(content, encoding="utf-8")
    return make


def _bytes(content: bytes):
    def make(path: Path) -> None:
        path.write_bytes(content)
    return make


def _good_then(row: str):
    return _text(GOOD + "D1,2026-03-01T01:00:00Z,45.0,-30.001\n" + row + "\n")


def _netcdf(feature: str | None):
    def make(path: Path) -> None:
        with netCDF4.Dataset(path, "w") as nc:
            if feature is not None:
                nc.featureType = feature
            nc.createDimension("obs", 2)
            t = nc.createVariable("time", "f8", ("obs",))
            t.units = "seconds since 2026-03-01 00:00:00"
            t[:] = [0.0, 60.0]
            for name, units in (("lat", "degrees_north"), ("lon", "degrees_east")):
                v = nc.createVariable(name, "f8", ("obs",))
                v.units = units
                v[:] = [1.0, 2.0]
    return make


def _parquet(table: pa.Table):
    def make(path: Path) -> None:
        pq.write_table(table, path)
    return make


_BILLION_LAUGHS = (
    '<?xml version="1.0"?>\n<!DOCTYPE gpx [\n <!ENTITY lol "lol">\n'
    + "".join(f' <!ENTITY lol{k} "{("&lol" + (str(k - 1) if k > 1 else "") + ";") * 10}">\n'
              for k in range(1, 10))
    + ']>\n<gpx version="1.1"><wpt lat="1" lon="2"><name>&lol9;</name></wpt></gpx>\n'
)

# (name, file, options, row, column, words the message must hold)
CASES = [
    ("missing_column.csv", _text("drifter,when,lat,lon\nD1,2026-03-01T00:00:00Z,45,-30\n"), [],
     None, None, ["no time column found", "'when'", "--columns time=NAME"]),
    ("bad_time.csv", _good_then("D1,xyz,45.0,-30.0"), ["--strict"], 4, "time",
     ["not a time 'xyz'"]),
    ("bad_lat.csv", _good_then("D1,2026-03-01T02:00:00Z,4S.5,-30.0"), ["--strict"], 4, "lat",
     ["not a number '4S.5'"]),
    ("bad_lon.csv", _good_then("D1,2026-03-01T02:00:00Z,45.0,30W"), ["--strict"], 4, "lon",
     ["not a number '30W'"]),
    ("lat95.csv", _good_then("D1,2026-03-01T02:00:00Z,95,-30.0"), ["--strict"], 4, "lat",
     ["95", "outside [-90, 90]"]),
    ("no_id.csv", _good_then(",2026-03-01T02:00:00Z,45.0,-30.0"), ["--strict"], 4, "drifter",
     ["no drifter id"]),
    ("ragged.csv", _good_then("D1,2026-03-01T02:00:00Z,45.0"), ["--strict"], 4, None,
     ["row has 3 fields, header has 4"]),
    ("unclosed.csv", _good_then('D1,2026-03-01T02:00:00Z,45.0,"-30'), ["--strict"], 4, None,
     ["quotes are not balanced (a quoted field never ends)"]),
    ("empty.csv", _text(""), [], None, None, ["file is empty"]),
    ("blank.csv", _text("\n  \n\n"), [], None, None, ["file is empty"]),
    ("header.csv", _text("drifter,time,lat,lon\n"), [], 1, None,
     ["no data rows after the header"]),
    ("junk.csv", _bytes(bytes(range(256)) * 8), [], None, None,
     ["not a text file", "expected CSV or TSV text"]),
    ("control.csv", _bytes(GOOD.encode() + b"D1,\x07,1,2\n"), [], None, None,
     ["control byte 0x07 on line 3"]),
    ("zip.csv", _bytes(b"PK\x03\x04" + b"\x00" * 40), [], None, None,
     ["ZIP archive", "export the sheet as CSV"]),
    ("utf16.csv", _bytes(GOOD.encode("utf-16")), [], None, None, ["UTF-16", "save it as UTF-8"]),
    ("mixed.csv", _text("drifter,time,lat,lon\nM,2026-03-01T00:00:00Z,45,350\n"
                        "M,2026-03-01T01:00:00Z,45,-4\n"), [], 3, "lon",
     ["mix the 0..360 and -180..180 conventions", "-4 here but 350 in row 2"]),
    ("all_bad_time.csv", _text("drifter,time,lat,lon\nD1,noon,45,-30\nD1,dusk,45,-30\n"), [],
     2, "time", ["no value in this column is a time", "ISO 8601", "'noon'"]),
    ("semi.csv", _text("drifter;time;lat;lon\nD1;2026-03-01T00:00:00Z;45;-30\n"),
     ["--separator", ","], None, None, ["no time column found", "is the separator right"]),
    ("never.csv", _text('time,lat,lon\n"2026-03-01,45,-30\n'), [], 2, None,
     ["no data row can be read", "never ends"]),
    ("bomb.gpx", _text(_BILLION_LAUGHS), [], 2, None, ["refused", "DTD"]),
    ("m.gpx", _text('<?xml version="1.0"?>\n<gpx version="1.1">\n<trk><trkseg>\n'
                    '<trkpt lat="1" lon="2"></trk>\n</gpx>\n'), [], 4, None,
     ["not well-formed XML", "mismatched tag", "(line 4, column"]),
    ("kml.gpx", _text('<?xml version="1.0"?>\n<kml><Placemark/></kml>\n'), [], 1, None,
     ["not a GPX file", "<kml>", "expected <gpx>"]),
    ("routes.gpx", _text('<gpx version="1.1"><rte><rtept lat="1" lon="2"/></rte></gpx>\n'), [],
     None, None, ["no track points", "only routes"]),
    ("series.nc", _netcdf("timeSeries"), [], None, None,
     ["not a CF trajectory file", "'timeSeries'", 'expected "trajectory"']),
    ("plain.nc", _netcdf(None), [], None, None,
     ["featureType is missing", 'featureType = "trajectory"']),
    ("junk.nc", _bytes(b"CDF\x01" + b"\xff" * 64), [], None, None,
     ["not a NetCDF file that can be read"]),
    ("text.nc", _text(GOOD), [], None, None, ["not a NetCDF file"]),
    ("text.parquet", _text(GOOD), [], None, None, ["not a Parquet file"]),
    ("bool.parquet", _parquet(pa.table({"time": [1772366400], "lat": [True], "lon": [1.0]})), [],
     None, "lat", ["type bool", "expected numbers (decimal degrees)"]),
    ("inf.parquet", _parquet(pa.table({"time": [1772366400, 1772370000],
                                       "lat": [45.0, float("inf")], "lon": [1.0, 1.0]})),
     ["--strict"], 2, "lat", ["not a finite number inf"]),
    ("norows.parquet", _parquet(pa.table({"time": pa.array([], pa.int64()),
                                          "lat": pa.array([], pa.float64()),
                                          "lon": pa.array([], pa.float64())})), [], None, None,
     ["the file has no rows"]),
    ("unknown.xlsx", _bytes(b"PK\x03\x04"), [], None, None, ["unknown file type '.xlsx'"]),
]


@pytest.mark.parametrize(("name", "make", "options", "row", "column", "words"), CASES,
                         ids=[c[0] for c in CASES])
def test_refusal_is_one_line_naming_file_row_and_column(tmp_path, name, make, options, row,
                                                        column, words):
    path = tmp_path / name
    make(path)
    out = tmp_path / "out"
    code, stdout, stderr, caught = strategies.run_cli(
        ["qc", str(path), "--out", str(out), "--no-land-test", *options])
    assert code == 1, stderr
    assert not caught
    assert "Traceback" not in stderr
    lines = stderr.splitlines()
    assert len(lines) == 1, stderr
    where = str(path) + (f", row {row}" if row is not None else "") + (
        f", column {column!r}" if column is not None else "")
    assert lines[0].startswith(f"driftloop: error: {where}: "), lines[0]
    if row is None:
        assert ", row " not in lines[0].split(": ", 2)[1]
    for word in words:
        assert word in lines[0], (word, lines[0])
    assert not out.exists() or not any(out.iterdir())


def _config_run(tmp_path, text: str) -> tuple[int, str, Path]:
    src = tmp_path / "t.csv"
    src.write_text(GOOD)
    cfg = tmp_path / "c.toml"
    cfg.write_text(text)
    out = tmp_path / "out"
    code, _, err, _ = strategies.run_cli(["qc", str(src), "--out", str(out), "--config",
                                          str(cfg)])
    assert not out.exists() or not any(out.iterdir())
    return code, err, cfg


@pytest.mark.parametrize(("text", "words"), [
    ("[qc]\nspeed_limit = 2\n", ["unknown key 'qc.speed_limit'", "known keys of [qc]:",
                                 "speed_fail_m_s"]),
    ("[qc]\nspeed_fail_m_s = 'fast'\n", ["key 'qc.speed_fail_m_s' must be float",
                                         "got str 'fast'"]),
    ("[qc]\nland_test = 1\n", ["key 'qc.land_test' must be bool", "got int 1"]),
    ("[qc]\nspeed_max_run_fixes = 2.5\n", ["key 'qc.speed_max_run_fixes' must be int"]),
    ("[qcc]\nx = 1\n", ["unknown section [qcc]", "known sections:"]),
    ("qc = 3\n", ["[qc] must be a table of keys"]),
    ("[qc\n", ["not valid TOML", "line 1"]),
    ("[read]\nseparator = 7\n", ["key 'read.separator' must be"]),
])
def test_bad_configuration_names_the_file_and_the_key(tmp_path, text, words):
    code, err, cfg = _config_run(tmp_path, text)
    assert code == 1
    lines = err.splitlines()
    assert len(lines) == 1 and lines[0].startswith(f"driftloop: error: {cfg}: "), err
    for word in words:
        assert word in lines[0], (word, lines[0])


@pytest.mark.parametrize(("text", "words"), [
    ("[read]\ncolumns = { depth = 'z' }\n", ["read.columns.depth", "unknown column role"]),
    ("[read]\ncolumns = { lat = 3 }\n", ["read.columns.lat", "must be str", "got int 3"]),
    ("[read]\nseparator = '::'\n", ["read.separator", "one character"]),
])
def test_bad_read_section_names_the_file_and_the_key(tmp_path, text, words):
    code, err, cfg = _config_run(tmp_path, text)
    assert code == 1
    assert err.startswith(f"driftloop: error: {cfg}: "), err
    for word in words:
        assert word in err, (word, err)


@pytest.mark.parametrize("text", ["[qc]\nspeed_fail_m_s = nan\n", "[qc]\ngap_h = -1.0\n",
                                  "[qc]\nsame_time_s = inf\n"])
def test_thresholds_that_are_not_finite_positive_numbers_are_refused(tmp_path, text):
    code, err, cfg = _config_run(tmp_path, text)
    assert code == 1
    assert err.startswith(f"driftloop: error: {cfg}: key 'qc."), err


def test_unknown_columns_role_on_the_command_line(tmp_path):
    src = tmp_path / "t.csv"
    src.write_text(GOOD)
    code, _, err, _ = strategies.run_cli(["qc", str(src), "--out", str(tmp_path / "o"),
                                          "--columns", "depth=z"])
    assert code == 1
    assert err.splitlines() == ["driftloop: error: --columns: unknown role 'depth'; roles are "
                                "id, time, date, lat, lon"]
    code, _, err, _ = strategies.run_cli(["qc", str(src), "--out", str(tmp_path / "o"),
                                          "--columns", "lat"])
    assert code == 1 and err.splitlines() == [
        "driftloop: error: --columns: expected ROLE=NAME, got 'lat'"]
    assert not (tmp_path / "o").exists()


def test_mapped_column_that_is_absent_lists_the_columns(tmp_path):
    src = tmp_path / "t.csv"
    src.write_text(GOOD)
    code, _, err, _ = strategies.run_cli(["qc", str(src), "--out", str(tmp_path / "o"),
                                          "--columns", "lat=y"])
    assert code == 1
    assert err.strip() == (f"driftloop: error: {src}: column 'y' given for lat is not in the "
                           "file; the columns are 'drifter', 'time', 'lat', 'lon'")


@pytest.mark.parametrize("index", [0, 4, 19])
def test_the_installed_command_prints_the_same_single_line(tmp_path, index):
    name, make, options, row, column, words = CASES[index]
    path = tmp_path / name
    make(path)
    done = subprocess.run([sys.executable, "-m", "driftloop", "qc", str(path), "--out",
                           str(tmp_path / "out"), "--no-land-test", *options],
                          capture_output=True, text=True, check=False)
    assert done.returncode == 1
    assert "Traceback" not in done.stderr
    assert len(done.stderr.splitlines()) == 1
    assert done.stderr.startswith(f"driftloop: error: {path}")
    assert all(w in done.stderr for w in words)


def test_numbers_in_messages_are_plain(tmp_path):
    """Messages quote values as the user wrote them, never as numpy reprs."""
    path = tmp_path / "p.parquet"
    pq.write_table(pa.table({"time": [1772366400, 1772370000], "lat": [45.0, 1.0],
                             "lon": np.array([1.0, -np.inf])}), path)
    code, _, err, _ = strategies.run_cli(["qc", str(path), "--out", str(tmp_path / "o"),
                                          "--strict", "--no-land-test"])
    assert code == 1 and "np.float" not in err and "-inf" in err
