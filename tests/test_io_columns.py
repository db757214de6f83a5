"""Column-role inference and the value helpers shared by the table readers."""

from __future__ import annotations

import numpy as np
import pytest

from driftloop.config import ReadConfig
from driftloop.errors import ConfigError, InputError
from driftloop.io.columns import (
    check_lon_convention,
    default_drifter_id,
    drifter_ids,
    infer_columns,
    join_errors,
    normalise_name,
    parse_numbers,
)

BASE = {"id": "id", "time": "time", "lat": "lat", "lon": "lon"}


def roles_of(names, config=None):
    roles = infer_columns(names, config or ReadConfig(), "tracks.csv")
    return {role: roles.name(role) for role in ("id", "time", "date", "lat", "lon")}


@pytest.mark.parametrize(
    ("role", "spelling"),
    [
        ("id", "ID"),
        ("id", "Drifter ID"),
        ("id", "drifter_id"),
        ("id", "buoy"),
        ("id", "BUOY-ID"),
        ("id", "platform_code"),
        ("id", "WMO"),
        ("id", "imei"),
        ("id", "trajectory"),
        ("time", "Time"),
        ("time", "timestamp"),
        ("time", "DateTime"),
        ("time", "date_time"),
        ("time", "time_utc"),
        ("time", "Time (UTC)"),
        ("time", "obs_time"),
        ("time", "obs_time_utc"),
        ("time", "Timestamp (GMT)"),
        ("lat", "Latitude"),
        ("lat", "LAT"),
        ("lat", "lat_deg"),
        ("lat", "Latitude (deg N)"),
        ("lat", "latitude [degrees_north]"),
        ("lon", "Longitude"),
        ("lon", "long"),
        ("lon", "lng"),
        ("lon", "lon_deg"),
        ("lon", "lon [degrees_east]"),
    ],
)
def test_spellings_are_recognised(role, spelling):
    names = {**BASE, role: spelling}
    found = roles_of(list(names.values()))
    assert found[role] == spelling
    for other, name in names.items():
        assert found[other] == name


@pytest.mark.parametrize("name", ["x", "y", "northing", "easting", "value"])
def test_xy_are_not_guessed(name):
    with pytest.raises(InputError, match="no latitude column found"):
        roles_of(["time", name, "lon"])


def test_name_folding():
    assert normalise_name("  Drifter-ID ") == "drifterid"
    assert normalise_name("LAT_deg") == "latdeg"


def test_no_id_column_means_one_drifter():
    found = roles_of(["time", "lat", "lon"])
    assert found["id"] is None


def test_generic_id_name_only_used_without_a_specific_one():
    assert roles_of(["id", "name", "time", "lat", "lon"])["id"] == "id"
    assert roles_of(["name", "time", "lat", "lon"])["id"] == "name"


def test_explicit_mapping_wins_and_takes_the_column():
    config = ReadConfig(columns={"lat": "gps_y", "id": "lat"})
    found = roles_of(["lat", "time", "gps_y", "lon"], config)
    assert found["lat"] == "gps_y"
    assert found["id"] == "lat"


def test_mapping_matches_case_and_spaces_insensitively():
    found = roles_of(["Time", " My Lat ", "lon"], ReadConfig(columns={"lat": "my lat"}))
    assert found["lat"] == " My Lat "


def test_mapped_column_absent_names_it_and_lists_the_columns():
    config = ReadConfig(columns={"lat": "breite"})
    with pytest.raises(InputError) as caught:
        roles_of(["time", "lat", "lon"], config)
    text = str(caught.value)
    assert text.startswith("tracks.csv: ")
    assert "'breite' given for lat is not in the file" in text
    assert "'time', 'lat', 'lon'" in text


def test_unknown_role_in_mapping_is_a_config_error():
    with pytest.raises(ConfigError, match="unknown column role 'depth'"):
        roles_of(["time", "lat", "lon"], ReadConfig(columns={"depth": "z"}))


def test_two_columns_for_one_role_is_ambiguous_unless_mapped():
    names = ["time", "lat", "lon", "longitude"]
    with pytest.raises(InputError) as caught:
        roles_of(names)
    text = str(caught.value)
    assert "'lon' and 'longitude' both look like the longitude" in text
    assert "--columns lon=NAME" in text
    assert roles_of(names, ReadConfig(columns={"lon": "longitude"}))["lon"] == "longitude"


def test_missing_required_role_names_role_header_and_mapping():
    with pytest.raises(InputError) as caught:
        roles_of(["buoy", "when", "lat", "lon"])
    text = str(caught.value)
    assert "no time column found" in text
    assert "'buoy', 'when', 'lat', 'lon'" in text
    assert "--columns time=NAME" in text


def test_single_column_header_hints_at_the_separator():
    with pytest.raises(InputError, match="is the separator right"):
        roles_of(["time;lat;lon"])


def test_date_pairs_with_a_time_of_day_column():
    found = roles_of(["date", "time", "lat", "lon"])
    assert (found["date"], found["time"]) == ("date", "time")


def test_date_is_ignored_next_to_a_full_timestamp_column():
    found = roles_of(["date", "timestamp", "lat", "lon"])
    assert (found["date"], found["time"]) == (None, "timestamp")


def test_lone_date_column_is_the_time():
    found = roles_of(["Date", "lat", "lon"])
    assert (found["date"], found["time"]) == (None, "Date")


def test_date_not_inferred_when_time_is_mapped():
    found = roles_of(["date", "t", "lat", "lon"], ReadConfig(columns={"time": "t"}))
    assert (found["date"], found["time"]) == (None, "t")


def test_default_drifter_id():
    assert default_drifter_id("a/b/LANTERN-01.csv", ReadConfig()) == "LANTERN-01"
    assert default_drifter_id("a/b/x.csv", ReadConfig(drifter_id="B9")) == "B9"


def test_parse_numbers_missing_versus_unparseable():
    parsed = parse_numbers(["45.5", " -3e1 ", "", "NA", "nan", "N/A", "-", "abc", "1,5", "inf"],
                           "lat")
    assert parsed.values[:2].tolist() == [45.5, -30.0]
    assert parsed.missing.tolist() == [False, False, True, True, True, True, True,
                                       False, False, False]
    assert parsed.errors[7] == "lat: not a number 'abc'"
    assert parsed.errors[8] == "lat: not a number '1,5'"
    assert parsed.errors[9] == "lat: not a number 'inf'"
    assert np.isnan(parsed.values[2:]).all()


def test_parse_numbers_decimal_comma():
    parsed = parse_numbers(["12,5", "-0,25", "7", "1,2,3"], "lon", decimal_comma=True)
    assert parsed.values[:3].tolist() == [12.5, -0.25, 7.0]
    assert parsed.errors[3] == "lon: not a number '1,2,3'"


def test_drifter_ids_empty_is_an_error_for_the_row():
    ids, errors = drifter_ids(["A1", " B2 ", "", "NA"], "buoy")
    assert ids.tolist() == ["A1", "B2", "", ""]
    assert errors.tolist() == ["", "", "buoy: no drifter id", "buoy: no drifter id"]


def test_join_errors():
    a = np.array(["", "x: bad", "y: bad"], dtype=object)
    b = np.array(["", "", "z: bad"], dtype=object)
    assert join_errors(a, b).tolist() == ["", "x: bad", "y: bad; z: bad"]


def test_lon_convention_mixed_within_a_drifter():
    lon = np.array([10.0, 350.0, -5.0])
    ids = np.array(["A", "A", "A"], dtype=object)
    with pytest.raises(InputError) as caught:
        check_lon_convention(lon, ids, np.array([2, 3, 4]), "f.csv", "lon")
    error = caught.value
    assert (error.row, error.column) == (4, "lon")
    assert "350 in row 3" in str(error)


def test_lon_convention_separate_drifters_may_differ():
    lon = np.array([350.0, -5.0, 500.0, -200.0])
    ids = np.array(["A", "B", "A", "A"], dtype=object)
    assert check_lon_convention(lon, ids, np.arange(4), "f.csv", "lon") is None
