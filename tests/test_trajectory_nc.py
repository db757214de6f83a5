"""CF trajectory NetCDF writer (driftloop.io.trajectory_nc).

Independent readers: xarray (netCDF4 engine) and driftloop's own CF reader
(driftloop.io.netcdf.read_netcdf).  Layout and attribute names follow the CF
Conventions 1.11, chapter 9 (contiguous ragged array, 9.3.3).
"""

from __future__ import annotations

import json
import os

import numpy as np
import pandas as pd
import pytest
import xarray as xr

from driftloop.config import Config, ReadConfig, provenance
from driftloop.io.netcdf import read_netcdf
from driftloop.io.trajectory_nc import write_trajectories_nc


def _table() -> pd.DataFrame:
    rng = np.random.default_rng(0)
    rows = []
    for drifter, segment, start, n in (("ORV-A01", 0, "2024-04-02T01:00Z", 30),
                                       ("ORV-A01", 1, "2024-04-05T07:00Z", 12),
                                       ("B 2", 0, "2024-04-03T00:00Z", 20)):
        rows.append(pd.DataFrame({
            "drifter_id": drifter,
            "segment": np.int32(segment),
            "time": pd.date_range(start, periods=n, freq="h"),
            "lat": 43.0 + rng.normal(0, 0.01, n).cumsum(),
            "lon": (179.9 + rng.normal(0, 0.01, n).cumsum() + 180.0) % 360.0 - 180.0,
            "u": rng.normal(0, 0.2, n),
            "v": rng.normal(0, 0.2, n),
            "sigma_m": 10.0 + rng.uniform(0, 5, n),
            "in_gap": rng.random(n) < 0.2,
            "gap_h": 0.0,
        }))
    table = pd.concat(rows, ignore_index=True)
    table["gap_h"] = np.where(table["in_gap"], 4.5, 0.0)
    table["drifter_id"] = table["drifter_id"].astype("string")
    return table


def test_round_trip_through_xarray(tmp_path):
    table = _table()
    path = write_trajectories_nc(tmp_path / "tracks.nc", table,
                                 {"driftloop_provenance": provenance(Config()),
                                  "title": "test tracks"})
    with xr.open_dataset(path) as ds:
        assert ds.attrs["Conventions"] == "CF-1.11"
        assert ds.attrs["featureType"] == "trajectory"
        assert ds.attrs["title"] == "test tracks"
        prov = json.loads(ds.attrs["driftloop_provenance"])
        assert prov["parameters"]["resample"]["max_gap_h"] == Config().resample.max_gap_h
        assert ds.sizes == {"trajectory": 3, "obs": len(table)}
        assert ds["trajectory_id"].attrs["cf_role"] == "trajectory_id"
        assert ds["rowSize"].attrs["sample_dimension"] == "obs"
        # sorted by drifter id, then segment
        assert ds["trajectory_id"].values.tolist() == ["B 2/0", "ORV-A01/0", "ORV-A01/1"]
        assert ds["rowSize"].values.tolist() == [20, 30, 12]
        assert ds["segment"].values.tolist() == [0, 0, 1]
        assert ds["time"].encoding["units"] == "seconds since 1970-01-01T00:00:00Z"
        assert ds["time"].encoding["calendar"] == "standard"
        assert ds["lat"].attrs["units"] == "degrees_north"
        assert ds["lon"].attrs["units"] == "degrees_east"
        assert ds["u"].attrs["standard_name"] == "eastward_sea_water_velocity"
        assert ds["v"].attrs["standard_name"] == "northward_sea_water_velocity"
        assert ds["u"].attrs["units"] == "m s-1" and "Lagrangian" in ds["u"].attrs["long_name"]
        assert ds["in_gap"].dtype == np.int8
        assert ds["in_gap"].attrs["flag_values"].tolist() == [0, 1]
        assert ds["in_gap"].attrs["flag_meanings"].split() == ["between_close_fixes",
                                                               "inside_gap"]
        expected = table.sort_values(["drifter_id", "segment", "time"], kind="stable")
        np.testing.assert_array_equal(ds["lat"].values, expected["lat"].to_numpy())
        np.testing.assert_array_equal(ds["lon"].values, expected["lon"].to_numpy())
        np.testing.assert_array_equal(ds["u"].values, expected["u"].to_numpy())
        np.testing.assert_array_equal(ds["sigma_m"].values, expected["sigma_m"].to_numpy())
        np.testing.assert_array_equal(ds["in_gap"].values.astype(bool),
                                      expected["in_gap"].to_numpy())
        np.testing.assert_array_equal(ds["gap_h"].values, expected["gap_h"].to_numpy())
        times = pd.DatetimeIndex(ds["time"].values).tz_localize("UTC")
        assert (times == pd.DatetimeIndex(expected["time"])).all()


def test_round_trip_through_driftloops_reader(tmp_path):
    table = _table()
    path = write_trajectories_nc(tmp_path / "tracks.nc", table, {})
    back = read_netcdf(path, ReadConfig())
    expected = table.sort_values(["drifter_id", "segment", "time"], kind="stable")
    ids = (expected["drifter_id"].astype(str) + "/" + expected["segment"].astype(str)).tolist()
    assert back["drifter_id"].astype(str).tolist() == ids
    np.testing.assert_array_equal(back["lat"].to_numpy(), expected["lat"].to_numpy())
    np.testing.assert_array_equal(back["lon"].to_numpy(), expected["lon"].to_numpy())
    assert (pd.DatetimeIndex(back["time"]) == pd.DatetimeIndex(expected["time"])).all()
    assert (back["parse_error"] == "").all()


def test_resampled_output_round_trips(tmp_path):
    from driftloop.resample import resample_all

    t = pd.date_range("2024-04-02T00:17Z", periods=100, freq="50min")
    fixes = pd.DataFrame({"drifter_id": "X", "time": t,
                          "lat": np.linspace(-60, -60.5, 100), "lon": np.linspace(179, 181, 100),
                          "qc_flag": 1})
    fixes["lon"] = (fixes["lon"] + 180) % 360 - 180
    track, _ = resample_all(fixes)
    path = write_trajectories_nc(tmp_path / "x.nc", track, {})
    back = read_netcdf(path, ReadConfig())
    np.testing.assert_array_equal(back["lat"].to_numpy(), track["lat"].to_numpy())
    np.testing.assert_array_equal(back["lon"].to_numpy(), track["lon"].to_numpy())
    assert (pd.DatetimeIndex(back["time"]) == pd.DatetimeIndex(track["time"])).all()


def test_write_is_atomic(tmp_path, monkeypatch):
    path = tmp_path / "tracks.nc"
    path.write_bytes(b"previous complete file")

    def fail(self, *args, **kwargs):
        raise OSError("disk full")

    monkeypatch.setattr(xr.Dataset, "to_netcdf", fail)
    with pytest.raises(OSError, match="disk full"):
        write_trajectories_nc(path, _table(), {})
    assert path.read_bytes() == b"previous complete file"
    assert os.listdir(tmp_path) == ["tracks.nc"]  # no temporary file left


def test_missing_column_and_empty_table(tmp_path):
    with pytest.raises(ValueError, match="sigma_m"):
        write_trajectories_nc(tmp_path / "a.nc", _table().drop(columns="sigma_m"), {})
    empty = _table().iloc[:0]
    path = write_trajectories_nc(tmp_path / "empty.nc", empty, {})
    with xr.open_dataset(path) as ds:
        assert ds.sizes["trajectory"] == 0 and ds.sizes["obs"] == 0
        assert ds.attrs["featureType"] == "trajectory"


def test_file_gets_the_permissions_of_a_new_file_and_stale_parts_go(tmp_path):
    # POSIX: a new file gets 0o666 less the process umask (open(2), umask(2)); the
    # writer's private temporary file must not pass its 0o600 on to the output.
    stale = tmp_path / ".tracks.nc.999999999.a1b2.part"  # pid above Linux's pid_max
    stale.write_bytes(b"half a file")
    old = os.umask(0o027)
    try:
        path = write_trajectories_nc(tmp_path / "tracks.nc", _table(), {})
    finally:
        os.umask(old)
    assert oct(os.stat(path).st_mode & 0o777) == oct(0o640)
    assert sorted(os.listdir(tmp_path)) == ["tracks.nc"]
