"""Delimited-text reader and the time parsing behind every reader."""

from __future__ import annotations

import random

import numpy as np
import pandas as pd
import pytest

from driftloop.config import ReadConfig
from driftloop.errors import InputError
from driftloop.io import FIX_COLUMNS, read_file
from driftloop.io.delimited import read_delimited, sniff_separator
from driftloop.io.timeparse import (
    parse_date_and_time,
    parse_epoch_seconds,
    parse_time_text,
)

NOON = pd.Timestamp("2026-03-01T12:00:00Z")


def write(tmp_path, name, content):
    path = tmp_path / name
    if isinstance(content, bytes):
        path.write_bytes(content)
    else:
        path.write_bytes(content.encode("utf-8"))
    return path


def read(path, **config):
    return read_delimited(path, ReadConfig(**config))


def error_of(path, **config) -> InputError:
    with pytest.raises(InputError) as caught:
        read(path, **config)
    return caught.value


# --- time parsing ---------------------------------------------------------


@pytest.mark.parametrize(
    ("text", "utc", "assumed"),
    [
        # RFC 3339 section 4.2 / ISO 8601 offsets: local time minus the offset is UTC
        ("2026-03-01T12:00:00+02:00", "2026-03-01T10:00:00", False),
        ("2026-03-01T12:00:00-03:30", "2026-03-01T15:30:00", False),
        ("2026-03-01T12:00:00+0200", "2026-03-01T10:00:00", False),
        ("2026-03-01T12:00:00-05", "2026-03-01T17:00:00", False),
        ("2026-03-01T12:00:00Z", "2026-03-01T12:00:00", False),
        ("2026-03-01t12:00:00z", "2026-03-01T12:00:00", False),
        ("2026-03-01 12:00:00 UTC", "2026-03-01T12:00:00", False),
        ("2026-03-01 12:00:00", "2026-03-01T12:00:00", True),
        ("2026-03-01T12:00", "2026-03-01T12:00:00", True),
        ("2026-03-01T12:00:00.250Z", "2026-03-01T12:00:00.250", False),
        # ISO 8601 allows a comma as the decimal sign of the seconds
        ("2026-03-01T12:00:00,5Z", "2026-03-01T12:00:00.500", False),
        ("2026/03/01 12:00:00", "2026-03-01T12:00:00", True),
        ("2026/03/01 9:05", "2026-03-01T09:05:00", True),
        ("2026-03-01", "2026-03-01T00:00:00", True),
        # POSIX "seconds since the epoch": 20513 days * 86400 s + 12 h
        ("1772366400", "2026-03-01T12:00:00", False),
        ("1772366400.5", "2026-03-01T12:00:00.500", False),
    ],
)
def test_time_text_forms(text, utc, assumed):
    parsed = parse_time_text([text])
    assert parsed.errors[0] == ""
    assert parsed.time[0] == pd.Timestamp(utc, tz="UTC")
    assert bool(parsed.assumed_utc[0]) is assumed


@pytest.mark.parametrize("token", ["", "NA", "NaN", "nan", "null", "NULL", "-", "N/A", "  "])
def test_time_missing_tokens_are_missing_not_errors(token):
    parsed = parse_time_text([token])
    assert parsed.missing[0]
    assert parsed.errors[0] == ""
    assert parsed.time[0] is pd.NaT


@pytest.mark.parametrize(
    ("text", "reason"),
    [
        ("xyz", "time: not a time 'xyz'"),
        ("05/03/2024", "day/month order is ambiguous in '05/03/2024'"),
        ("5.3.2024 12:00", "day/month order is ambiguous"),
        ("2026-13-01T00:00:00Z", "time: not a valid date and time '2026-13-01T00:00:00Z'"),
        ("2026-02-30T00:00:00Z", "not a valid date and time"),
        ("123", "epoch seconds out of range '123'"),
        ("1772366400000", "epoch seconds out of range"),  # milliseconds, not seconds
        ("0001-01-01T00:00:00Z", "outside the years 1678-2261"),
    ],
)
def test_time_unparseable_values(text, reason):
    parsed = parse_time_text([text])
    assert not parsed.missing[0]
    assert reason in parsed.errors[0]
    assert parsed.time[0] is pd.NaT
    assert not parsed.assumed_utc[0]


def test_epoch_plausible_range():
    parsed = parse_epoch_seconds([1.0e8, 4.0e9, 9.9e7, 4.1e9, np.nan])
    assert parsed.unparseable.tolist() == [False, False, True, True, False]
    assert parsed.missing.tolist() == [False, False, False, False, True]


def test_date_and_time_columns():
    parsed = parse_date_and_time(
        ["2026-03-01", "2026/03/01", "2026-03-01", "", "01/03/2026", "2026-03-01"],
        ["12:00:00", "13:30", "12:00+02:00", "12:00", "12:00", "noon"],
        "day", "clock",
    )
    assert parsed.time[0] == NOON
    assert parsed.time[1] == pd.Timestamp("2026-03-01T13:30Z")
    assert parsed.time[2] == pd.Timestamp("2026-03-01T10:00Z")
    assert parsed.assumed_utc[:3].tolist() == [True, True, False]
    assert parsed.missing[3] and parsed.errors[3] == ""
    assert parsed.errors[4].startswith("day: day/month order is ambiguous")
    assert parsed.errors[5] == "clock: not a time of day 'noon'"


# --- delimited reader -----------------------------------------------------


def test_basic_csv_table(tmp_path):
    path = write(tmp_path, "LANTERN-01.csv",
                 "time,lat,lon\n2026-03-01T12:00:00Z,45.5,-30.25\n2026-03-01T13:00:00Z,45.6,-30.2\n")
    table = read(path)
    assert list(table.columns) == list(FIX_COLUMNS)
    assert table["drifter_id"].tolist() == ["LANTERN-01", "LANTERN-01"]
    assert table["source_row"].tolist() == [2, 3]
    assert table["source_file"].tolist() == [str(path)] * 2
    assert table["time"].dtype == "datetime64[ns, UTC]"
    assert table["time"].iloc[0] == NOON
    assert table["lat"].tolist() == [45.5, 45.6]
    assert (table["parse_error"] == "").all() and (table["raw"] == "").all()
    assert table.attrs["encoding"] == "utf-8"


@pytest.mark.parametrize(("sep", "name"), [(",", "t.csv"), (";", "t.csv"), ("\t", "t.tsv")])
@pytest.mark.parametrize("explicit", [False, True])
def test_separators(tmp_path, sep, name, explicit):
    rows = [["id", "time", "lat", "lon"], ["A", "2026-03-01T12:00:00Z", "1.5", "2.5"]]
    path = write(tmp_path, name, "\n".join(sep.join(r) for r in rows) + "\n")
    table = read(path, separator=("tab" if sep == "\t" else sep) if explicit else None)
    assert table[["drifter_id", "lat", "lon"]].values.tolist() == [["A", 1.5, 2.5]]


def test_sniffing_ignores_separators_inside_quotes():
    assert sniff_separator('"time; UTC";"lat, deg";lon') == ";"
    assert sniff_separator("id\ttime\tlat\tlon") == "\t"


def test_semicolon_file_accepts_decimal_comma(tmp_path):
    path = write(tmp_path, "t.csv", "zeit;lat;lon\n2026-03-01 12:00;45,25;-3,5\n")
    table = read(path, columns={"time": "zeit"})
    assert table[["lat", "lon"]].values.tolist() == [[45.25, -3.5]]


def test_comma_file_does_not_take_decimal_comma(tmp_path):
    path = write(tmp_path, "t.csv", 'time,lat,lon\n'
                                    '2026-03-01T12:00Z,"45,25",1\n2026-03-01T13:00Z,1,1\n')
    table = read(path)
    assert table["parse_error"].iloc[0] == "lat: not a number '45,25'"


def test_utf8_bom(tmp_path):
    path = write(tmp_path, "t.csv", b"\xef\xbb\xbfid,time,lat,lon\nA,2026-03-01T12:00Z,1,2\n")
    table = read(path)
    assert table["drifter_id"].tolist() == ["A"]  # the BOM is not part of the 'id' name
    assert table.attrs["encoding"] == "utf-8-sig"


def test_latin1_fallback(tmp_path):
    text = "bouée,time,lat,lon\nBouée-1,2026-03-01T12:00Z,1,2\n"
    path = write(tmp_path, "t.csv", text.encode("latin-1"))
    table = read(path, columns={"id": "bouée"})
    assert table["drifter_id"].tolist() == ["Bouée-1"]
    assert table.attrs["encoding"] == "latin-1"


def test_crlf_line_endings(tmp_path):
    path = write(tmp_path, "t.csv", "time,lat,lon\r\n"
                                    "2026-03-01T12:00Z,1,2\r\n2026-03-01T13:00Z,3,4\r\n")
    table = read(path)
    assert table["lat"].tolist() == [1.0, 3.0]
    assert table["source_row"].tolist() == [2, 3]


def test_offsets_epoch_and_assumed_utc_in_a_file(tmp_path):
    path = write(tmp_path, "t.csv", (
        "time,lat,lon\n"
        "2026-03-01T12:00:00+02:00,1,1\n"
        "2026-03-01 10:00:00,1,1\n"
        "1772366400,1,1\n"
    ))
    table = read(path)
    # RFC 3339 / ISO 8601 offset semantics: 12:00+02:00 is 10:00Z
    assert table["time"].tolist() == [pd.Timestamp("2026-03-01T10:00Z"),
                                      pd.Timestamp("2026-03-01T10:00Z"), NOON]
    assert table["time_assumed_utc"].tolist() == [False, True, False]


def test_date_and_time_columns_in_a_file(tmp_path):
    path = write(tmp_path, "t.csv", "Date,Time,Lat,Lon\n"
                                    "2026-03-01,12:00:00,1,2\n2026-03-01,12:30,1,2\n")
    table = read(path)
    assert table["time"].tolist() == [NOON, pd.Timestamp("2026-03-01T12:30Z")]
    assert table["time_assumed_utc"].all()


def test_lon_0_360_is_normalised(tmp_path):
    path = write(tmp_path, "t.csv", "time,lat,lon\n"
                                    "2026-03-01T12:00Z,1,350\n2026-03-01T13:00Z,1,180\n"
                 "2026-03-01T14:00Z,1,10\n")
    assert read(path)["lon"].tolist() == [-10.0, -180.0, 10.0]


def test_multi_drifter_by_id_column(tmp_path):
    path = write(tmp_path, "t.csv", (
        "buoy,time,lat,lon\n"
        "A,2026-03-01T12:00Z,1,350\n"
        "B,2026-03-01T12:00Z,2,-10\n"
        "A,2026-03-01T13:00Z,3,351\n"
    ))
    table = read(path)
    assert table["drifter_id"].tolist() == ["A", "B", "A"]  # file order is kept
    assert table["lon"].tolist() == [-10.0, -10.0, -9.0]


def test_one_drifter_per_file_with_configured_id(tmp_path):
    path = write(tmp_path, "t.csv", "time,lat,lon\n2026-03-01T12:00Z,1,2\n")
    assert read(path, drifter_id="SVP-9")["drifter_id"].tolist() == ["SVP-9"]


def test_empty_id_cell_is_an_unparseable_row(tmp_path):
    path = write(tmp_path, "t.csv", "id,time,lat,lon\n"
                                    "A,2026-03-01T12:00Z,1,2\n,2026-03-01T13:00Z,1,2\n")
    table = read(path)
    assert table["parse_error"].tolist() == ["", "id: no drifter id"]
    assert table["raw"].iloc[1] == ",2026-03-01T13:00Z,1,2"


def test_missing_column_error(tmp_path):
    path = write(tmp_path, "buoys.csv", "id,time,latitude,x\nA,2026-03-01T12:00Z,1,2\n")
    text = str(error_of(path))
    assert text.startswith(f"{path}: no longitude column found")
    assert "'id', 'time', 'latitude', 'x'" in text
    assert "--columns lon=NAME" in text


def test_unparseable_time_row_is_kept(tmp_path):
    path = write(tmp_path, "t.csv", "time,lat,lon\n"
                                    "2026-03-01T12:00Z,1,2\nxyz,3,4\n2026-03-01T13:00Z,5,6\n")
    table = read(path)
    assert len(table) == 3
    bad = table.iloc[1]
    assert bad["time"] is pd.NaT
    assert bad["parse_error"] == "time: not a time 'xyz'"
    assert bad["raw"] == "xyz,3,4"
    assert bad["source_row"] == 3
    assert bad["lat"] == 3.0  # the other cells are still read


def test_several_cell_errors_are_joined(tmp_path):
    path = write(tmp_path, "t.csv", "time,lat,lon\n2026-03-01T12:00Z,1,2\nxyz,abc,4\n")
    assert read(path)["parse_error"].iloc[1] == "time: not a time 'xyz'; lat: not a number 'abc'"


def test_whole_time_column_unparseable_is_refused(tmp_path):
    path = write(tmp_path, "tr.csv", "time,lat,lon\nxyz,1,2\nabc,3,4\n")
    error = error_of(path)
    assert (error.row, error.column) == (2, "time")
    text = str(error)
    assert text.startswith(f"{path}, row 2, column 'time': no value in this column is a time")
    assert "expected ISO 8601 like 2026-03-01T12:00:00Z or epoch seconds, got 'xyz'" in text


def test_whole_lat_column_unparseable_is_refused(tmp_path):
    path = write(tmp_path, "t.csv", "time,lat,lon\n2026-03-01T12:00Z,north,2\n")
    error = error_of(path)
    assert (error.row, error.column) == (2, "lat")
    assert "no value in this column is a number" in str(error)
    assert "got 'north'" in str(error)


def test_all_missing_time_is_not_refused(tmp_path):
    path = write(tmp_path, "t.csv", "time,lat,lon\n,1,2\nNA,3,4\n")
    table = read(path)
    assert table["time"].isna().all()
    assert (table["parse_error"] == "").all()  # missing, not unparseable: QC flags it 9


def test_latitude_95_is_kept_for_qc(tmp_path):
    path = write(tmp_path, "t.csv", "time,lat,lon\n2026-03-01T12:00Z,95,2\n")
    table = read(path)
    assert table["lat"].tolist() == [95.0]
    assert table["parse_error"].tolist() == [""]


def test_missing_tokens_in_cells(tmp_path):
    path = write(tmp_path, "t.csv", "time,lat,lon\n2026-03-01T12:00Z,NA,\nnull,N/A,-\n")
    table = read(path)
    assert table["lat"].isna().all() and table["lon"].isna().all()
    assert (table["parse_error"] == "").all()


@pytest.mark.parametrize("content", [b"", b"\n\n  \n"])
def test_empty_file(tmp_path, content):
    path = write(tmp_path, "t.csv", content)
    assert str(error_of(path)) == f"{path}: file is empty"


@pytest.mark.parametrize(
    "content",
    [
        bytes(range(256)) * 4,                     # NUL bytes
        b"\x01\x02\x03\x04\x05garbage\x06\x07",    # control bytes, no NUL
        "time,lat,lon\n".encode("utf-16"),         # UTF-16 text
        b"PAR1\x15\x04\x15\x00",                   # a Parquet file given as .csv
    ],
)
def test_binary_junk_is_not_a_text_file(tmp_path, content):
    path = write(tmp_path, "junk.csv", content)
    text = str(error_of(path))
    assert text.startswith(f"{path}: not a text file")


def test_header_only(tmp_path):
    path = write(tmp_path, "t.csv", "time,lat,lon\n\n")
    error = error_of(path)
    assert str(error) == f"{path}, row 1: no data rows after the header"


def test_mixed_lon_conventions_refused(tmp_path):
    path = write(tmp_path, "t.csv", (
        "time,lat,Longitude\n"
        "2026-03-01T12:00Z,1,350\n"
        "2026-03-01T13:00Z,1,355\n"
        "2026-03-01T14:00Z,1,-4\n"
    ))
    error = error_of(path)
    assert (error.row, error.column) == (4, "Longitude")
    text = str(error)
    assert text.startswith(f"{path}, row 4, column 'Longitude': longitudes of drifter 't'")
    assert "-4 here but 350 in row 2" in text


def test_ragged_rows_are_kept(tmp_path):
    path = write(tmp_path, "t.csv", (
        "id,time,lat,lon,note\n"
        "A,2026-03-01T12:00Z,1,2,ok\n"
        "A,2026-03-01T13:00Z,1\n"
        "A,2026-03-01T14:00Z,1,2,x,y\n"
        "A,2026-03-01T15:00Z,1,2,\n"
    ))
    table = read(path)
    assert len(table) == 4
    assert table["parse_error"].tolist() == [
        "", "row has 3 fields, header has 5", "row has 6 fields, header has 5", "",
    ]
    assert table["raw"].iloc[1] == "A,2026-03-01T13:00Z,1"
    assert table["raw"].iloc[2] == "A,2026-03-01T14:00Z,1,2,x,y"
    assert table.loc[1:2, "lat"].isna().all() and table.loc[1:2, "time"].isna().all()
    assert table["source_row"].tolist() == [2, 3, 4, 5]


def test_no_row_matching_the_header_suggests_the_separator(tmp_path):
    path = write(tmp_path, "t.csv", "time,lat,lon\n2026-03-01T12:00Z;1;2\n2026-03-01T13:00Z;1;2\n")
    text = str(error_of(path))
    assert "no data row has the header's 3 fields; the rows have 1 field" in text
    assert "is the separator ',' right?" in text


def test_quoting_rfc4180(tmp_path):
    path = write(tmp_path, "t.csv", (
        'id,time,lat,lon,note\n'
        '"A, the first",2026-03-01T12:00Z,1,2,"said ""hi"""\n'
        '"B","2026-03-01T13:00Z","3","4",""\n'
    ))
    table = read(path)
    # RFC 4180 section 2: quoted fields may hold the separator, "" is one quote
    assert table["drifter_id"].tolist() == ["A, the first", "B"]
    assert table["lat"].tolist() == [1.0, 3.0]


def test_quoted_field_spanning_lines_counts_once(tmp_path):
    path = write(tmp_path, "t.csv", (
        "time,lat,lon,note\n"
        '2026-03-01T12:00Z,1,2,"two\nlines"\n'
        "2026-03-01T13:00Z,abc,2,x\n"
    ))
    table = read(path)
    assert len(table) == 2
    assert table["source_row"].tolist() == [2, 3]
    assert table["raw"].iloc[1] == "2026-03-01T13:00Z,abc,2,x"


def test_unbalanced_quote_is_an_unparseable_row(tmp_path):
    path = write(tmp_path, "t.csv", (
        "time,lat,lon\n"
        '"2026-03-01T12:00Z,1,2\n'
        "2026-03-01T13:00Z,1,2\n"
    ))
    table = read(path)
    assert len(table) == 2
    assert table["parse_error"].iloc[0].startswith("quotes are not balanced")
    assert table["raw"].iloc[0] == '"2026-03-01T12:00Z,1,2'
    assert table["time"].iloc[1] == pd.Timestamp("2026-03-01T13:00Z")


def test_quote_inside_an_unquoted_field_is_a_character(tmp_path):
    path = write(tmp_path, "t.csv", "time,lat,lon\n"
                                    "2026-03-01T12:00Z,45°30'10\"N,2\n2026-03-01T13:00Z,1,2\n")
    table = read(path)
    assert table["parse_error"].iloc[0] == "lat: not a number '45°30\\'10\"N'"
    assert table["lat"].iloc[1] == 1.0


def test_blank_lines_are_not_records_but_keep_row_numbers(tmp_path):
    path = write(tmp_path, "t.csv", "time,lat,lon\n"
                                    "\n2026-03-01T12:00Z,1,2\n   \n2026-03-01T13:00Z,abc,2\n\n")
    table = read(path)
    assert len(table) == 2
    # the row number is the spreadsheet row (and here the editor line) of the record
    assert table["source_row"].tolist() == [3, 5]


def test_accounting_rows_out_equal_records_in(tmp_path):
    rng = random.Random(20260301)
    lines, expected, counts = ["id,time,lat,lon"], 0, {}
    kinds = ["good", "bad_time", "bad_lat", "short", "long", "blank", "missing", "quoted"]
    for i in range(400):
        kind = rng.choice(kinds)
        t = f"2026-03-01T{i % 24:02d}:{i % 60:02d}:00Z"
        lines.append({
            "good": f"D{i % 3},{t},{rng.uniform(-80, 80):.4f},{rng.uniform(-170, 170):.4f}",
            "bad_time": "D1,not-a-time,1,2",
            "bad_lat": f"D1,{t},xx,2",
            "short": f"D1,{t}",
            "long": f"D1,{t},1,2,3",
            "blank": "",
            "missing": ",,,",
            "quoted": f'"D,{i}","{t}","1","2"',
        }[kind])
        expected += kind != "blank"
        counts[kind] = counts.get(kind, 0) + 1
    path = write(tmp_path, "t.csv", "\n".join(lines) + "\n")
    table = read(path)
    assert len(table) == expected
    assert table["source_row"].is_monotonic_increasing
    errors = table["parse_error"]
    assert errors.str.startswith("row has").sum() == counts["short"] + counts["long"]
    assert errors.str.startswith("time: not a time").sum() == counts["bad_time"]
    assert errors.str.startswith("lat: not a number").sum() == counts["bad_lat"]
    assert (table["drifter_id"].str.startswith("D,")).sum() == counts["quoted"]


def test_dispatcher_reads_csv_and_tsv(tmp_path):
    csv_path = write(tmp_path, "a.csv", "time,lat,lon\n2026-03-01T12:00Z,1,2\n")
    tsv_path = write(tmp_path, "b.tsv", "time\tlat\tlon\n2026-03-01T12:00Z\t1\t2\n")
    for path in (csv_path, tsv_path):
        table = read_file(path)
        assert list(table.columns) == list(FIX_COLUMNS)
        assert table["lat"].tolist() == [1.0]
