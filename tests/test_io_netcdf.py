"""CF NetCDF trajectory reader: ragged, indexed, multidimensional and single layouts."""

from __future__ import annotations

import netCDF4
import numpy as np
import pandas as pd
import pytest
import xarray as xr

from driftloop.config import ReadConfig
from driftloop.errors import InputError
from driftloop.io import FIX_COLUMNS, read_file
from driftloop.io.netcdf import read_netcdf

T0 = pd.Timestamp("2026-03-01T00:00:00Z")
UNITS = "hours since 2026-03-01 00:00:00"


def read(path, **config):
    return read_netcdf(path, ReadConfig(**config))


def error_of(path, **config) -> InputError:
    with pytest.raises(InputError) as caught:
        read(path, **config)
    return caught.value


def ragged_file(path, *, counts=(2, 3), ids=("A1", "B22"), feature="trajectory",
                n_obs=None, fmt="NETCDF4"):
    """A contiguous ragged array file with character-array ids.

    Layout of CF Conventions 1.11, section 9.3.3 and appendix H.4.3: a count
    variable rowSize(trajectory) with sample_dimension = "obs", and a
    trajectory variable with cf_role = "trajectory_id".
    """
    n_obs = sum(counts) if n_obs is None else n_obs
    with netCDF4.Dataset(path, "w", format=fmt) as nc:
        if feature is not None:
            nc.featureType = feature
        nc.Conventions = "CF-1.11"
        nc.createDimension("trajectory", len(counts))
        nc.createDimension("obs", n_obs)
        nc.createDimension("name_strlen", 8)
        size = nc.createVariable("rowSize", "i4", ("trajectory",))
        size.sample_dimension = "obs"
        size[:] = counts
        name = nc.createVariable("trajectory", "S1", ("trajectory", "name_strlen"))
        name.cf_role = "trajectory_id"
        name[:] = netCDF4.stringtochar(np.array(ids, "S8"))
        time = nc.createVariable("time", "f8", ("obs",), fill_value=-1.0)
        time.standard_name = "time"
        time.units = UNITS
        time.calendar = "standard"
        hours = np.arange(n_obs, dtype=float)
        mask = np.zeros(n_obs, bool)
        mask[min(3, n_obs - 1)] = True
        time[:] = np.ma.masked_array(hours, mask=mask)
        lat = nc.createVariable("lat", "f4", ("obs",), fill_value=np.float32(-999.0))
        lat.standard_name = "latitude"
        lat.units = "degrees_north"
        lat[:] = np.ma.masked_array(np.linspace(40, 41, n_obs), mask=np.arange(n_obs) == n_obs - 1)
        lon = nc.createVariable("lon", "f4", ("obs",))
        lon.standard_name = "longitude"
        lon.units = "degrees_east"
        lon[:] = np.linspace(350, 351, n_obs)
        data = nc.createVariable("sst", "f4", ("obs",))
        data.coordinates = "time lat lon"
        data[:] = 15.0
    return path


def test_contiguous_ragged_with_char_ids(tmp_path):
    path = ragged_file(tmp_path / "r.nc")
    table = read(path)
    assert list(table.columns) == list(FIX_COLUMNS)
    # CF 9.3.3: the first rowSize[0] observations belong to the first trajectory
    assert table["drifter_id"].tolist() == ["A1", "A1", "B22", "B22", "B22"]
    assert table["source_row"].tolist() == [1, 2, 3, 4, 5]
    assert table["time"].iloc[0] == T0
    assert table["time"].iloc[2] == T0 + pd.Timedelta(hours=2)
    assert table["time"].iloc[3] is pd.NaT  # _FillValue is missing
    assert np.isnan(table["lat"].iloc[4])
    assert table["lon"].iloc[0] == pytest.approx(-10.0)  # 0..360 normalised
    assert not table["time_assumed_utc"].any()  # CF: a reference time without zone is UTC
    assert (table["parse_error"] == "").all()


def test_netcdf3_classic_file(tmp_path):
    path = ragged_file(tmp_path / "c.nc", fmt="NETCDF3_CLASSIC")
    assert path.read_bytes()[:4] == b"CDF\x01"  # NetCDF classic format signature
    assert len(read(path)) == 5


def test_ragged_with_string_ids_written_by_xarray(tmp_path):
    ds = xr.Dataset(
        {
            "row_size": ("traj", np.array([1, 2], "i4"), {"sample_dimension": "obs"}),
            "buoy": ("traj", np.array(["north", "south"], dtype=object),
                     {"cf_role": "trajectory_id"}),
            "t": ("obs", np.array([0.0, 1800.0, 3600.0]),
                  {"units": "seconds since 2026-03-01T12:00:00Z", "axis": "T"}),
            "y": ("obs", np.array([10.0, -20.0, -21.0]), {"units": "degrees_north"}),
            "x": ("obs", np.array([1.0, 2.0, 3.0]), {"units": "degrees_east"}),
        },
        attrs={"featureType": "Trajectory"},
    )
    path = tmp_path / "s.nc"
    ds.to_netcdf(path)
    table = read(path)
    assert table["drifter_id"].tolist() == ["north", "south", "south"]
    assert table["lat"].tolist() == [10.0, -20.0, -21.0]
    assert table["time"].iloc[2] == pd.Timestamp("2026-03-01T13:00Z")


def multidim_file(path):
    """(trajectory, obs) arrays with padding: CF 1.11, section 9.3.1 and appendix H.4.1."""
    with netCDF4.Dataset(path, "w") as nc:
        nc.featureType = "trajectory"
        nc.createDimension("trajectory", 2)
        nc.createDimension("obs", 3)
        nc.createDimension("name_strlen", 4)
        name = nc.createVariable("trajectory", "S1", ("trajectory", "name_strlen"))
        name.cf_role = "trajectory_id"
        name[:] = netCDF4.stringtochar(np.array(["P1", "Q2"], "S4"))
        time = nc.createVariable("time", "f8", ("trajectory", "obs"), fill_value=-9999.0)
        time.standard_name = "time"
        time.units = UNITS
        lat = nc.createVariable("lat", "f8", ("trajectory", "obs"), fill_value=-9999.0)
        lat.standard_name = "latitude"
        lat.units = "degrees_north"
        lon = nc.createVariable("lon", "f8", ("trajectory", "obs"), fill_value=-9999.0)
        lon.standard_name = "longitude"
        lon.units = "degrees_east"
        fill = -9999.0
        # trajectory P1: 3 slots, the middle one lacks a latitude (a record)
        # trajectory Q2: 1 fix then two padding slots (all three missing)
        time[:] = [[0.0, 1.0, 2.0], [0.0, fill, fill]]
        lat[:] = [[1.0, fill, 3.0], [4.0, fill, fill]]
        lon[:] = [[10.0, 11.0, 12.0], [13.0, fill, fill]]
    return path


def test_multidimensional_padding_is_skipped(tmp_path):
    table = read(multidim_file(tmp_path / "m.nc"))
    assert len(table) == 4  # 6 slots, 2 of them padding
    assert table["drifter_id"].tolist() == ["P1", "P1", "P1", "Q2"]
    # row-major (trajectory, obs) position + 1: Q2's first slot is position 3
    assert table["source_row"].tolist() == [1, 2, 3, 4]
    assert np.isnan(table["lat"].iloc[1])  # a record with a missing value is kept
    assert table["lon"].iloc[1] == 11.0
    assert table["time"].iloc[3] == T0


def test_multidimensional_obs_first_and_shared_time(tmp_path):
    ds = xr.Dataset(
        {
            "time": ("obs", np.array([0.0, 1.0, 2.0]), {"units": UNITS, "standard_name": "time"}),
            "lat": (("obs", "trajectory"), np.array([[1.0, 4.0], [2.0, np.nan], [3.0, np.nan]]),
                    {"standard_name": "latitude"}),
            "lon": (("obs", "trajectory"), np.array([[1.0, 4.0], [2.0, 5.0], [3.0, np.nan]]),
                    {"standard_name": "longitude"}),
            "id": ("trajectory", np.array([7, 8], "i4"), {"cf_role": "trajectory_id"}),
        },
        attrs={"featureType": "trajectory"},
    )
    path = tmp_path / "o.nc"
    ds.to_netcdf(path)
    table = read(path)
    # the time exists for every slot, so only slots with time, lat and lon all missing are
    # padding; here none is, and every slot is a record
    assert table["drifter_id"].tolist() == ["7", "7", "7", "8", "8", "8"]
    assert table["lon"].tolist()[3:5] == [4.0, 5.0]


def test_single_trajectory(tmp_path):
    ds = xr.Dataset(
        {
            "trajectory": ((), "LANTERN-09", {"cf_role": "trajectory_id"}),
            "time": ("time", np.array([0.0, 1.0]), {"units": UNITS}),
            "latitude": ("time", np.array([1.0, 2.0])),
            "longitude": ("time", np.array([3.0, 4.0])),
        },
        attrs={"featureType": "trajectory"},
    )
    path = tmp_path / "one.nc"
    ds.to_netcdf(path)
    table = read(path)
    assert table["drifter_id"].tolist() == ["LANTERN-09"] * 2
    assert table["time"].tolist() == [T0, T0 + pd.Timedelta(hours=1)]


def test_indexed_ragged(tmp_path):
    ds = xr.Dataset(
        {
            # CF 1.11, section 9.3.4: index variable with instance_dimension
            "traj_index": ("obs", np.array([1, 0, 1], "i4"), {"instance_dimension": "trajectory"}),
            "name": ("trajectory", np.array(["A", "B"], dtype=object),
                     {"cf_role": "trajectory_id"}),
            "time": ("obs", np.array([0.0, 1.0, 2.0]), {"units": UNITS}),
            "lat": ("obs", np.array([1.0, 2.0, 3.0]), {"units": "degree_north"}),
            "lon": ("obs", np.array([1.0, 2.0, 3.0]), {"units": "degree_east"}),
        },
        attrs={"featureType": "trajectory"},
    )
    path = tmp_path / "i.nc"
    ds.to_netcdf(path)
    table = read(path)
    assert table["drifter_id"].tolist() == ["B", "A", "B"]
    assert table["source_row"].tolist() == [1, 2, 3]


def test_variables_found_by_units_and_mapping(tmp_path):
    ds = xr.Dataset(
        {
            "when": ("obs", np.array([0.0]), {"units": UNITS}),
            "gps_n": ("obs", np.array([1.0]), {"units": "degrees_north"}),
            "gps_e": ("obs", np.array([2.0]), {"units": "degrees_east"}),
            "other": ("obs", np.array([3.0])),
        },
        attrs={"featureType": "trajectory"},
    )
    path = tmp_path / "u.nc"
    ds.to_netcdf(path)
    table = read(path, drifter_id="X")
    assert table[["drifter_id", "lat", "lon"]].values.tolist() == [["X", 1.0, 2.0]]
    mapped = read(path, columns={"lat": "other"})
    assert mapped["lat"].tolist() == [3.0]


def test_no_id_variable_numbers_the_trajectories(tmp_path):
    ds = xr.Dataset(
        {
            "rowSize": ("trajectory", np.array([1, 1], "i4"), {"sample_dimension": "obs"}),
            "time": ("obs", np.array([0.0, 1.0]), {"units": UNITS}),
            "lat": ("obs", np.array([1.0, 2.0])),
            "lon": ("obs", np.array([1.0, 2.0])),
        },
        attrs={"featureType": "trajectory"},
    )
    path = tmp_path / "deploy.nc"
    ds.to_netcdf(path)
    assert read(path)["drifter_id"].tolist() == ["deploy-1", "deploy-2"]


def test_counts_not_adding_up_names_the_variable(tmp_path):
    path = ragged_file(tmp_path / "bad.nc", counts=(2, 2), n_obs=5)
    error = error_of(path)
    assert error.column == "rowSize"
    assert "the counts add up to 4 but the dimension 'obs' has 5" in str(error)


@pytest.mark.parametrize(("feature", "message"), [
    (None, "the global attribute featureType is missing"),
    ("timeSeries", "featureType is 'timeSeries', expected \"trajectory\""),
])
def test_not_a_trajectory_file(tmp_path, feature, message):
    path = ragged_file(tmp_path / "f.nc", feature=feature)
    text = str(error_of(path))
    assert text.startswith(f"{path}: not a CF trajectory file")
    assert message in text


def test_not_netcdf(tmp_path):
    path = tmp_path / "x.nc"
    path.write_text("time,lat,lon\n")
    assert str(error_of(path)).startswith(f"{path}: not a NetCDF file")
    empty = tmp_path / "e.nc"
    empty.write_bytes(b"")
    assert str(error_of(empty)) == f"{empty}: file is empty"


def test_missing_latitude_variable(tmp_path):
    ds = xr.Dataset({"time": ("obs", np.array([0.0]), {"units": UNITS}),
                     "lon": ("obs", np.array([1.0]))}, attrs={"featureType": "trajectory"})
    path = tmp_path / "n.nc"
    ds.to_netcdf(path)
    text = str(error_of(path))
    assert "no latitude variable found" in text
    assert "'time', 'lon'" in text


def test_time_without_cf_units(tmp_path):
    ds = xr.Dataset({"time": ("obs", np.array([0.0]), {"units": "fortnights", "axis": "T"}),
                     "lat": ("obs", np.array([1.0])), "lon": ("obs", np.array([1.0]))},
                    attrs={"featureType": "trajectory"})
    path = tmp_path / "t.nc"
    ds.to_netcdf(path)
    error = error_of(path)
    assert error.column == "time"
    assert "time units 'fortnights' are not CF time units" in str(error)


def test_accounting_ragged_rows_equal_observations(tmp_path):
    counts = (5, 0, 17, 3)
    ids = ("a", "b", "c", "d")
    table = read_file(ragged_file(tmp_path / "acc.nc", counts=counts, ids=ids))
    assert len(table) == sum(counts)
    assert table["drifter_id"].value_counts().to_dict() == {"c": 17, "a": 5, "d": 3}
