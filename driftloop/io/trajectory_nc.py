"""Write resampled tracks as CF discrete-sampling-geometry trajectories (NetCDF-4).

:func:`write_trajectories_nc` stores the table of
:func:`driftloop.resample.resample_all` as a **contiguous ragged array**
(CF Conventions 1.11, section 9.3.3 and appendix H.4.3): one trajectory per
drifter segment, its observations stored one after the other along the
``obs`` dimension, and a count variable ``rowSize(trajectory)`` with
``sample_dimension = "obs"`` saying how many belong to each.

======================= ============= =========================================
variable                dimension     content
======================= ============= =========================================
``trajectory_id``       trajectory    ``"<drifter_id>/<segment>"``, ``cf_role = "trajectory_id"``
``drifter_id``          trajectory    drifter identifier (string)
``segment``             trajectory    segment number within the drifter (int32)
``rowSize``             trajectory    observations in the trajectory (int32)
``time``                obs           seconds since 1970-01-01T00:00:00Z (float64)
``lat``, ``lon``        obs           degrees_north, degrees_east (float64)
``u``, ``v``            obs           eastward / northward velocity, m s-1
``sigma_m``             obs           position uncertainty, m
``in_gap``              obs           int8 flag, 0 / 1 (``flag_values``, ``flag_meanings``)
``gap_h``               obs           length of the gap the point lies in, hours (0 outside)
======================= ============= =========================================

Global attributes: ``Conventions = "CF-1.11"``, ``featureType =
"trajectory"`` and the caller's attributes; values that are not text or
numbers (e.g. the provenance dictionary) are stored as JSON text.

``u`` and ``v`` carry the CF standard names ``eastward_sea_water_velocity``
and ``northward_sea_water_velocity`` (CF standard name table) with a
``long_name`` saying that they are the Lagrangian velocity of the drifter,
the time derivative of its interpolated track.

The file is written to a temporary file in the destination folder and
renamed over the target (:func:`os.replace`), as
:func:`driftloop.io.writers.atomic_open` does for the other outputs; the
NetCDF library needs a path rather than an open file, so the pattern is
repeated here (same temporary name ``.NAME.PID.RANDOM.part``, so that a later
run recognises one left by a killed writer, and the permissions of a new file).
"""

from __future__ import annotations

import contextlib
import json
import os
import tempfile
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd
import xarray as xr

from driftloop.io.writers import PART_SUFFIX, new_file_mode, remove_stale_parts

__all__ = [
    "OBS_DTYPES",
    "TRAJECTORY_COLUMNS",
    "obs_columns",
    "write_trajectories_nc",
    "write_trajectories_nc_columns",
]

#: Columns the table must have.
TRAJECTORY_COLUMNS = (
    "drifter_id", "segment", "time", "lat", "lon", "u", "v", "sigma_m", "in_gap", "gap_h",
)

_TIME_UNITS = "seconds since 1970-01-01T00:00:00Z"
_NS = 1_000_000_000

_OBS_ATTRS = {
    "time": {"standard_name": "time", "long_name": "time of the resampled position",
             "units": _TIME_UNITS, "calendar": "standard", "axis": "T"},
    "lat": {"standard_name": "latitude", "long_name": "latitude (WGS 84)",
            "units": "degrees_north", "axis": "Y"},
    "lon": {"standard_name": "longitude", "long_name": "longitude (WGS 84)",
            "units": "degrees_east", "axis": "X"},
    "u": {"standard_name": "eastward_sea_water_velocity",
          "long_name": "eastward Lagrangian velocity of the drifter, time derivative of "
                       "the interpolated track", "units": "m s-1"},
    "v": {"standard_name": "northward_sea_water_velocity",
          "long_name": "northward Lagrangian velocity of the drifter, time derivative of "
                       "the interpolated track", "units": "m s-1"},
    "sigma_m": {"long_name": "position uncertainty: GPS noise and an interpolation error "
                             "bound combined in quadrature", "units": "m"},
    "in_gap": {"long_name": "position interpolated inside a gap between fixes longer than "
                            "the flag threshold",
               "flag_values": np.array([0, 1], dtype=np.int8),
               "flag_meanings": "between_close_fixes inside_gap"},
    "gap_h": {"long_name": "length of the gap between fixes that the position lies in "
                           "(0 outside gaps)", "units": "hours"},
}


def _attribute(value: Any) -> Any:
    """Return a value NetCDF can store as an attribute; other values become JSON text."""
    if isinstance(value, str):
        return value
    if isinstance(value, bool | np.bool_):
        return int(value)
    if isinstance(value, int | float | np.integer | np.floating):
        return value
    return json.dumps(value, sort_keys=True, default=str)


def _dataset(table: pd.DataFrame, attrs: dict) -> xr.Dataset:
    missing = [c for c in TRAJECTORY_COLUMNS if c not in table.columns]
    if missing:
        raise ValueError(f"table lacks the column(s) {', '.join(missing)}")
    ids = table["drifter_id"].astype(str).to_numpy(dtype=object)
    segment = table["segment"].to_numpy(dtype=np.int64)
    time_ns = pd.DatetimeIndex(pd.to_datetime(table["time"], utc=True)).as_unit("ns").asi8
    order = np.lexsort((time_ns, segment, ids.astype(str)))
    ids, segment, time_ns = ids[order], segment[order], time_ns[order]
    new = np.ones(ids.size, dtype=bool)
    if ids.size:
        new[1:] = (ids[1:] != ids[:-1]) | (segment[1:] != segment[:-1])
    first = np.flatnonzero(new)
    counts = np.diff(np.r_[first, ids.size]).astype(np.int32)
    traj_drifter = ids[first]
    traj_segment = segment[first].astype(np.int32)

    def obs(name: str, dtype) -> np.ndarray:
        return table[name].to_numpy(dtype=dtype)[order]

    columns = {"time": time_ns / _NS, "lat": obs("lat", float), "lon": obs("lon", float)}
    for name in ("u", "v", "sigma_m", "gap_h"):
        columns[name] = obs(name, float)
    columns["in_gap"] = obs("in_gap", bool).astype(np.int8)
    return _assemble(traj_drifter, traj_segment, counts, columns, attrs)


def _assemble(traj_drifter: np.ndarray, traj_segment: np.ndarray, counts: np.ndarray,
              columns: dict[str, np.ndarray], attrs: dict) -> xr.Dataset:
    """Build the dataset from per-trajectory arrays and the obs columns in file order."""
    traj_id = np.array([f"{d}/{s}" for d, s in zip(traj_drifter, traj_segment, strict=True)],
                       dtype=object)
    data = {
        "trajectory_id": (("trajectory",), traj_id, {
            "cf_role": "trajectory_id", "long_name": "drifter and segment, as drifter/segment"}),
        "drifter_id": (("trajectory",), traj_drifter, {"long_name": "drifter identifier"}),
        "segment": (("trajectory",), traj_segment, {
            "long_name": "segment number within the drifter (split at long gaps)"}),
        "rowSize": (("trajectory",), counts, {
            "long_name": "number of observations in the trajectory", "sample_dimension": "obs"}),
        "time": (("obs",), columns["time"], _OBS_ATTRS["time"]),
        "lat": (("obs",), columns["lat"], _OBS_ATTRS["lat"]),
        "lon": (("obs",), columns["lon"], _OBS_ATTRS["lon"]),
    }
    for name in ("u", "v", "sigma_m", "gap_h"):
        data[name] = (("obs",), columns[name],
                      {**_OBS_ATTRS[name], "coordinates": "time lat lon"})
    data["in_gap"] = (("obs",), columns["in_gap"],
                      {**_OBS_ATTRS["in_gap"], "coordinates": "time lat lon"})
    ds = xr.Dataset({name: xr.Variable(*spec) for name, spec in data.items()})
    ds.attrs = {"Conventions": "CF-1.11", "featureType": "trajectory",
                **{str(k): _attribute(v) for k, v in attrs.items()}}
    return ds


def write_trajectories_nc(path: str | Path, table: pd.DataFrame, attrs: dict) -> Path:
    """Write a resampled table as CF trajectories in a contiguous ragged array, atomically.

    Parameters
    ----------
    path : str or Path
        The NetCDF-4 file to write (replaced if it exists).
    table : pandas.DataFrame
        Resampled positions: the columns :data:`TRAJECTORY_COLUMNS`
        (:data:`driftloop.resample.RESAMPLED_COLUMNS`).  Rows are grouped
        by drifter and segment and sorted by time in the file whatever
        their order in the table.
    attrs : dict
        Global attributes to add, e.g. ``{"driftloop_provenance":
        provenance(config)}``; text and numbers are stored as they are,
        anything else as JSON text.

    Returns
    -------
    Path
        The file written.

    Raises
    ------
    ValueError
        If a column is missing.

    Notes
    -----
    Layout: CF Conventions 1.11, section 9.3.3 (contiguous ragged array)
    and appendix H.4.3; variables and attributes are listed in the module
    docstring.  If writing fails, no file (and no temporary file) is left
    at ``path``.
    """
    return _write(Path(path), _dataset(table, attrs))


#: Obs columns of the file, in order, with their dtypes.
OBS_DTYPES = {"time": np.float64, "lat": np.float64, "lon": np.float64, "u": np.float64,
              "v": np.float64, "sigma_m": np.float64, "gap_h": np.float64, "in_gap": np.int8}


def obs_columns(table: pd.DataFrame) -> dict[str, np.ndarray]:
    """Return the obs columns of one drifter's resampled rows, as the file stores them.

    Parameters
    ----------
    table : pandas.DataFrame
        Resampled rows of one drifter, sorted by segment and time.

    Returns
    -------
    dict of str to numpy.ndarray
        :data:`OBS_DTYPES` columns (time in seconds since 1970).
    """
    time_ns = pd.DatetimeIndex(pd.to_datetime(table["time"], utc=True)).as_unit("ns").asi8
    out = {"time": time_ns / _NS}
    for name in ("lat", "lon", "u", "v", "sigma_m", "gap_h"):
        out[name] = table[name].to_numpy(dtype=float)
    out["in_gap"] = table["in_gap"].to_numpy(dtype=bool).astype(np.int8)
    return out


def write_trajectories_nc_columns(path: str | Path, traj_drifter: np.ndarray,
                                  traj_segment: np.ndarray, counts: np.ndarray,
                                  columns: dict[str, np.ndarray], attrs: dict) -> Path:
    """Write the file from arrays already in file order (streaming runs).

    Parameters
    ----------
    path : str or Path
        The NetCDF-4 file to write.
    traj_drifter, traj_segment, counts : numpy.ndarray
        Drifter id, segment and number of observations of each trajectory,
        sorted by drifter and segment.
    columns : dict of str to numpy.ndarray
        The :data:`OBS_DTYPES` columns in file order (memory-mapped arrays
        are fine: each is written in one piece).
    attrs : dict
        Global attributes, as for :func:`write_trajectories_nc`.

    Returns
    -------
    Path
        The file written; the same bytes as :func:`write_trajectories_nc` of
        the same rows.
    """
    ds = _assemble(np.asarray(traj_drifter, dtype=object), np.asarray(traj_segment, np.int32),
                   np.asarray(counts, np.int32), columns, attrs)
    return _write(Path(path), ds)


def _write(path: Path, ds: xr.Dataset) -> Path:
    encoding = {name: {"_FillValue": None} for name in ds.variables}
    encoding["time"]["dtype"] = "float64"
    path.parent.mkdir(parents=True, exist_ok=True)
    remove_stale_parts(path)
    fd, tmp = tempfile.mkstemp(prefix=f".{path.name}.{os.getpid()}.", suffix=PART_SUFFIX,
                               dir=path.parent)
    os.close(fd)
    try:
        ds.to_netcdf(tmp, format="NETCDF4", engine="netcdf4", encoding=encoding)
        os.chmod(tmp, new_file_mode())  # mkstemp's file is private; outputs are not
        with open(tmp, "rb") as handle:
            os.fsync(handle.fileno())
        os.replace(tmp, path)
    except BaseException:
        with contextlib.suppress(FileNotFoundError):
            os.unlink(tmp)
        raise
    return path
