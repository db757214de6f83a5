"""Parquet reader."""

from __future__ import annotations

import datetime as dt

import numpy as np
import pandas as pd
import pyarrow as pa
import pyarrow.parquet as pq
import pytest

from driftloop.config import ReadConfig
from driftloop.errors import InputError
from driftloop.io import FIX_COLUMNS, read_file
from driftloop.io.parquet import read_parquet

NOON = pd.Timestamp("2026-03-01T12:00:00Z")


def write(tmp_path, name, columns):
    path = tmp_path / name
    pq.write_table(pa.table(columns), path)
    return path


def read(path, **config):
    return read_parquet(path, ReadConfig(**config))


def error_of(path, **config) -> InputError:
    with pytest.raises(InputError) as caught:
        read(path, **config)
    return caught.value


def test_typed_columns(tmp_path):
    path = write(tmp_path, "SVP-3.parquet", {
        "time": pa.array([NOON.value // 1000, None], pa.timestamp("us", tz="UTC")),
        "latitude": pa.array([45.5, None]),
        "longitude": pa.array([350.0, 10.0], pa.float32()),
    })
    table = read(path)
    assert list(table.columns) == list(FIX_COLUMNS)
    assert table["drifter_id"].tolist() == ["SVP-3", "SVP-3"]
    assert table["source_row"].tolist() == [1, 2]
    assert table["time"].iloc[0] == NOON
    assert table["time"].iloc[1] is pd.NaT
    assert table["time_assumed_utc"].tolist() == [False, False]
    assert np.isnan(table["lat"].iloc[1])
    assert table["lon"].tolist() == [-10.0, 10.0]  # 0..360 normalised
    assert (table["parse_error"] == "").all()  # nulls are missing, not errors


def test_zone_aware_timestamps_are_converted(tmp_path):
    times = pd.Series(pd.to_datetime(["2026-03-01T12:00:00+02:00"], utc=True)).dt.tz_convert(
        "Etc/GMT-2"  # POSIX sign convention: Etc/GMT-2 is UTC+2
    )
    path = tmp_path / "t.parquet"
    pd.DataFrame({"time": times, "lat": [1.0], "lon": [2.0]}).to_parquet(path)
    table = read(path)
    # RFC 3339 / ISO 8601 offset semantics: 12:00+02:00 is 10:00Z
    assert table["time"].iloc[0] == pd.Timestamp("2026-03-01T10:00Z")
    assert not table["time_assumed_utc"].iloc[0]


def test_naive_timestamps_are_assumed_utc_and_flagged(tmp_path):
    path = write(tmp_path, "t.parquet", {
        "timestamp": pa.array([dt.datetime(2026, 3, 1, 12)], pa.timestamp("ms")),
        "lat": [1.0], "lon": [2.0],
    })
    table = read(path)
    assert table["time"].iloc[0] == NOON
    assert table["time_assumed_utc"].iloc[0]


def test_epoch_seconds_column(tmp_path):
    # POSIX "seconds since the epoch": 20513 days * 86400 s + 12 h is 2026-03-01T12:00Z
    path = write(tmp_path, "t.parquet", {"time": [1772366400, 1772370000, 12],
                                         "lat": [1, 2, 3], "lon": [4, 5, 6]})
    table = read(path)
    assert table["time"].iloc[0] == NOON
    assert table["time"].iloc[1] == pd.Timestamp("2026-03-01T13:00Z")
    assert "epoch seconds out of range 12" in table["parse_error"].iloc[2]
    assert table["raw"].iloc[2] == "time=12, lat=3, lon=6"


def test_string_times_and_numbers(tmp_path):
    path = write(tmp_path, "t.parquet", {
        "id": ["A", "A", "B"],
        "time": ["2026-03-01T12:00:00Z", "2026-03-01 13:00", "xyz"],
        "lat": ["45.5", "abc", "1"],
        "lon": ["1", "2", "NA"],
    })
    table = read(path)
    assert table["time"].iloc[0] == NOON
    assert table["time_assumed_utc"].tolist() == [False, True, False]
    assert table["parse_error"].tolist() == [
        "", "lat: not a number 'abc'", "time: not a time 'xyz'",
    ]
    assert np.isnan(table["lon"].iloc[2])


def test_date_and_time_of_day_columns(tmp_path):
    path = write(tmp_path, "t.parquet", {
        "date": pa.array([dt.date(2026, 3, 1)] * 2, pa.date32()),
        "time": pa.array([dt.time(12, 0), dt.time(12, 30, 15, 500000)], pa.time64("us")),
        "lat": [1.0, 2.0], "lon": [3.0, 4.0],
    })
    table = read(path)
    assert table["time"].tolist() == [NOON, pd.Timestamp("2026-03-01T12:30:15.5Z")]


def test_id_column_and_mapping(tmp_path):
    path = write(tmp_path, "t.parquet", {
        "platform_id": pa.array([4101, 4102], pa.int64()),
        "obs": ["2026-03-01T12:00Z"] * 2,
        "y": [1.0, 2.0], "lon": [3.0, 4.0],
    })
    table = read(path, columns={"time": "obs", "lat": "y"})
    assert table["drifter_id"].tolist() == ["4101", "4102"]
    assert table["lat"].tolist() == [1.0, 2.0]


def test_missing_column(tmp_path):
    path = write(tmp_path, "t.parquet", {"time": [1772366400], "lat": [1.0]})
    text = str(error_of(path))
    assert text.startswith(f"{path}: no longitude column found; the columns are 'time', 'lat'")
    assert "--columns lon=NAME" in text


def test_latitude_95_is_kept_for_qc(tmp_path):
    path = write(tmp_path, "t.parquet", {"time": [1772366400], "lat": [95.0], "lon": [1.0]})
    table = read(path)
    assert table["lat"].tolist() == [95.0]
    assert table["parse_error"].tolist() == [""]


def test_whole_time_column_unparseable_is_refused(tmp_path):
    path = write(tmp_path, "t.parquet", {"time": ["noon", "later"], "lat": [1.0, 2.0],
                                         "lon": [1.0, 2.0]})
    error = error_of(path)
    assert (error.row, error.column) == (1, "time")
    assert "no value in this column is a time" in str(error)
    assert "got 'noon'" in str(error)


def test_wrong_column_type_is_refused(tmp_path):
    path = write(tmp_path, "t.parquet", {"time": [1772366400], "lat": [True], "lon": [1.0]})
    error = error_of(path)
    assert error.column == "lat"
    assert "has type bool; expected numbers" in str(error)


def test_mixed_lon_conventions_refused(tmp_path):
    path = write(tmp_path, "t.parquet", {"time": [1772366400] * 3, "lat": [1.0] * 3,
                                         "lon": [-10.0, 5.0, 200.0]})
    error = error_of(path)
    assert (error.row, error.column) == (3, "lon")


def test_not_a_parquet_file(tmp_path):
    path = tmp_path / "t.parquet"
    path.write_text("time,lat,lon\n2026-03-01T12:00Z,1,2\n")
    assert str(error_of(path)).startswith(f"{path}: not a Parquet file")


def test_truncated_parquet_file(tmp_path):
    good = write(tmp_path, "good.parquet", {"time": [1772366400], "lat": [1.0], "lon": [1.0]})
    data = good.read_bytes()
    path = tmp_path / "cut.parquet"
    path.write_bytes(data[: len(data) // 2] + b"PAR1")
    assert "not a Parquet file" in str(error_of(path))


def test_empty_and_zero_row_files(tmp_path):
    empty = tmp_path / "e.parquet"
    empty.write_bytes(b"")
    assert str(error_of(empty)) == f"{empty}: file is empty"
    schema = pa.schema([("time", pa.int64()), ("lat", pa.float64()), ("lon", pa.float64())])
    none = tmp_path / "n.parquet"
    pq.write_table(schema.empty_table(), none)
    assert str(error_of(none)) == f"{none}: the file has no rows"


def test_accounting_rows_out_equal_records_in(tmp_path):
    n = 1000
    rng = np.random.default_rng(7)
    lat = rng.uniform(-80, 80, n)
    lat[::7] = np.nan
    times = pa.array([None if i % 11 == 0 else 1772366400 + 60 * i for i in range(n)], pa.int64())
    path = write(tmp_path, "t.parquet", {"id": [f"D{i % 4}" for i in range(n)], "time": times,
                                         "lat": lat, "lon": rng.uniform(-170, 170, n)})
    table = read_file(path)
    assert len(table) == n
    assert table["source_row"].tolist() == list(range(1, n + 1))
    assert table["time"].isna().sum() == len(range(0, n, 11))
