"""Read CF NetCDF trajectory files (discrete sampling geometries) into the fixes table.

The file must declare the global attribute ``featureType = "trajectory"``
(any letter case; CF Conventions chapter 9).  These layouts are read:

* **contiguous ragged array** (CF 9.3.3): a count variable, e.g.
  ``rowSize(trajectory)``, whose attribute ``sample_dimension`` names the
  observation dimension; the counts must add up to its length.
* **indexed ragged array** (CF 9.3.4): an index variable, e.g.
  ``trajectoryIndex(obs)``, whose attribute ``instance_dimension`` names the
  trajectory dimension.
* **multidimensional array** (CF 9.3.1, H.4.1): ``time``, ``lat`` and
  ``lon`` over (trajectory, obs) (``time`` may also be over obs alone).  A
  slot where time, lat and lon are all missing is padding, not a record, and
  gives no row; a slot with only some of them missing is a record with
  missing values.
* **single trajectory** (H.4.2): ``time``, ``lat`` and ``lon`` over one
  dimension.

Variables are found by CF ``standard_name`` (``time``, ``latitude``,
``longitude``), then ``units`` (``degrees_north`` / ``degrees_east``, or
``<unit> since <date>`` for time), then ``axis`` (``T``, ``Y``, ``X``), then
by name as for table columns; ``ReadConfig.columns`` may name them
explicitly (roles ``id``, ``time``, ``lat``, ``lon``).  Times are decoded
from their CF units by xarray; a reference time without a zone is UTC by the
CF definition, so NetCDF times are never flagged ``time_assumed_utc``.
``_FillValue`` / ``missing_value`` give missing values.

The drifter id comes from the variable with ``cf_role = "trajectory_id"``
(text, a character array, or integers).  Without one, the id is
``ReadConfig.drifter_id`` or the file name without its suffix, followed by
``-1``, ``-2`` ... when the file holds several trajectories.

``source_row`` is the 1-based index along the observation dimension for the
ragged and single layouts, and the row-major (trajectory, obs) position + 1
for the multidimensional layout (trajectory ``t``, slot ``o`` of ``n_obs``
is row ``t * n_obs + o + 1``), so padding leaves gaps in the numbers.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd
import xarray as xr

from driftloop.config import ReadConfig
from driftloop.errors import InputError
from driftloop.io.columns import (
    ROLE_SPELLINGS,
    check_lon_convention,
    default_drifter_id,
    join_errors,
    normalise_name,
)
from driftloop.io.schema import make_fixes
from driftloop.io.timeparse import parse_time_values

__all__ = ["read_netcdf"]

_HDF5_MAGIC = b"\x89HDF\r\n\x1a\n"
_CLASSIC_MAGIC = (b"CDF\x01", b"CDF\x02", b"CDF\x05")

_LAT_UNITS = frozenset({
    "degrees_north", "degree_north", "degree_n", "degrees_n", "degreen", "degreesn",
})
_LON_UNITS = frozenset({
    "degrees_east", "degree_east", "degree_e", "degrees_e", "degreee", "degreese",
})
_STANDARD = {"time": "time", "lat": "latitude", "lon": "longitude"}
_AXIS = {"time": "T", "lat": "Y", "lon": "X"}


def read_netcdf(path: str | Path, config: ReadConfig) -> pd.DataFrame:
    """Read a CF NetCDF file of trajectories.

    Parameters
    ----------
    path : str or Path
        The input file.
    config : ReadConfig
        ``columns`` may name the id, time, lat and lon variables;
        ``drifter_id`` names a file without a trajectory id variable.

    Returns
    -------
    pandas.DataFrame
        One row per observation record, columns as in :mod:`driftloop.io.schema`.

    Raises
    ------
    InputError
        If the file is not NetCDF, is not a CF trajectory file, lacks a
        time, lat or lon variable, or its counts do not add up.
    """
    file = str(path)
    _check_magic(path, file)
    ds = _open(path, file)
    with ds:
        _check_feature_type(ds, file)
        names = {role: _find_variable(ds, role, config, file) for role in ("time", "lat", "lon")}
        id_name = _find_id_variable(ds, config, file)
        layout = _layout(ds, names, file, _dimensions(path, ds))
        return _assemble(ds, names, id_name, layout, path, config, file)


def _check_magic(path: str | Path, file: str) -> None:
    try:
        with open(path, "rb") as handle:
            head = handle.read(2048 + 8)
    except OSError as exc:
        raise InputError(file, f"cannot read the file: {exc.strerror or exc}") from exc
    if not head:
        raise InputError(file, "file is empty")
    if head[:4] in _CLASSIC_MAGIC:
        return
    # an HDF5 superblock sits at offset 0, 512, 1024 or 2048
    if any(head[offset : offset + 8] == _HDF5_MAGIC for offset in (0, 512, 1024, 2048)):
        return
    raise InputError(file, "not a NetCDF file (neither NetCDF classic nor NetCDF-4/HDF5)")


def _open(path: str | Path, file: str) -> xr.Dataset:
    problems = []
    for engine in ("netcdf4", "h5netcdf"):
        try:
            return xr.open_dataset(path, engine=engine, decode_timedelta=False)
        except ImportError:
            continue  # an optional engine that is not installed says nothing about the file
        except (OSError, ValueError, RuntimeError, TypeError, KeyError) as exc:
            if isinstance(exc, OSError) and exc.strerror:
                text = exc.strerror
            else:
                text = " ".join(str(exc).replace(str(path), "the file").split())
            if "No module named" in text or "not available" in text:
                continue
            problems.append(text)
    reason = problems[0] if problems else "no NetCDF library could open it"
    raise InputError(
        file, f"not a NetCDF file that can be read ({reason}); expected NetCDF classic or "
        "NetCDF-4 with featureType = \"trajectory\""
    )


def _check_feature_type(ds: xr.Dataset, file: str) -> None:
    key = next((k for k in ds.attrs if k.lower() == "featuretype"), None)
    if key is None:
        raise InputError(
            file,
            "not a CF trajectory file: the global attribute featureType is missing "
            "(expected featureType = \"trajectory\", CF chapter 9)",
        )
    value = str(ds.attrs[key]).strip()
    if value.lower() != "trajectory":
        raise InputError(
            file,
            f"not a CF trajectory file: featureType is {value!r}, expected \"trajectory\"",
        )


def _attr(var: xr.Variable, name: str) -> str:
    value = var.attrs.get(name, var.encoding.get(name, ""))
    return str(value).strip()


def _find_variable(ds: xr.Dataset, role: str, config: ReadConfig, file: str) -> str:
    """Pick the time, lat or lon variable (see the module notes for the order)."""
    variables = {str(k): v for k, v in ds.variables.items()}
    if role in config.columns:
        wanted = config.columns[role]
        if wanted not in variables:
            raise InputError(
                file,
                f"variable {wanted!r} given for {role} is not in the file; the variables are "
                f"{', '.join(repr(n) for n in variables)}",
            )
        return wanted

    def units_match(v: xr.Variable) -> bool:
        units = (_attr(v, "units")).lower().replace(" ", "_")
        if role == "lat":
            return units in _LAT_UNITS
        if role == "lon":
            return units in _LON_UNITS
        return "since" in _attr(v, "units").lower() or np.issubdtype(v.dtype, np.datetime64)

    tests = (
        lambda n, v: _attr(v, "standard_name").lower() == _STANDARD[role],
        lambda n, v: units_match(v),
        lambda n, v: _attr(v, "axis").upper() == _AXIS[role],
        lambda n, v: any(normalise_name(n) in tier for tier in ROLE_SPELLINGS[role]),
    )
    for test in tests:
        hits = [n for n, v in variables.items() if v.ndim >= 1 and test(n, v)]
        if len(hits) > 1:
            # prefer the variables over the most elements (obs, not trajectory)
            most = max(variables[n].size for n in hits)
            hits = [n for n in hits if variables[n].size == most]
        if len(hits) == 1:
            return hits[0]
        if len(hits) > 1:
            listed = " and ".join(repr(n) for n in hits)
            both = "both" if len(hits) == 2 else "all"
            raise InputError(
                file,
                f"variables {listed} {both} look like the {_STANDARD[role]}; "
                f"choose one with --columns {role}=NAME",
            )
    raise InputError(
        file,
        f"no {_STANDARD[role]} variable found (by standard_name, units, axis or name); the "
        f"variables are {', '.join(repr(n) for n in variables) or '(none)'}; "
        f"map it with --columns {role}=NAME",
    )


def _find_id_variable(ds: xr.Dataset, config: ReadConfig, file: str) -> str | None:
    variables = {str(k): v for k, v in ds.variables.items()}
    if "id" in config.columns:
        wanted = config.columns["id"]
        if wanted not in variables:
            raise InputError(
                file,
                f"variable {wanted!r} given for id is not in the file; the variables are "
                f"{', '.join(repr(n) for n in variables)}",
            )
        return wanted
    hits = [n for n, v in variables.items() if _attr(v, "cf_role").lower() == "trajectory_id"]
    if len(hits) > 1:
        raise InputError(
            file,
            f"variables {' and '.join(repr(n) for n in hits)} all have "
            f"cf_role = \"trajectory_id\"; choose one with --columns id=NAME",
        )
    return hits[0] if hits else None


def _dimensions(path: str | Path, ds: xr.Dataset) -> dict[str, int]:
    """Every dimension of the file with its size.

    xarray leaves out dimensions that no variable uses, but an indexed ragged
    array may name such a trajectory dimension in ``instance_dimension`` (a
    file with no per-trajectory variable), so the file's own list is read.
    """
    sizes = {str(k): int(v) for k, v in ds.sizes.items()}
    try:
        import netCDF4

        with netCDF4.Dataset(path) as nc:
            sizes.update({str(k): len(v) for k, v in nc.dimensions.items()})
    except (ImportError, OSError, RuntimeError, ValueError):
        pass
    return sizes


def _layout(ds: xr.Dataset, names: dict[str, str], file: str, sizes: dict[str, int]) -> dict:
    """Work out how observations map to trajectories."""
    lat = ds.variables[names["lat"]]
    for name, var in ds.variables.items():
        sample = _attr(var, "sample_dimension")
        if sample:
            return _ragged_layout(ds, str(name), var, sample, names, file)
    for name, var in ds.variables.items():
        instance = _attr(var, "instance_dimension")
        if instance:
            return _indexed_layout(ds, str(name), var, instance, names, file, sizes)
    if lat.ndim == 2:
        return {"kind": "multidimensional", "trajectory_dim": None}
    if lat.ndim == 1:
        for role in ("time", "lon"):
            if ds.variables[names[role]].dims != lat.dims:
                raise InputError(
                    file,
                    f"variable {names[role]!r} is over {ds.variables[names[role]].dims}, "
                    f"but {names['lat']!r} is over {lat.dims}",
                    column=names[role],
                )
        n = lat.shape[0]
        return {"kind": "single", "trajectory": np.zeros(n, dtype=np.int64), "n_traj": 1}
    raise InputError(
        file, f"variable {names['lat']!r} has {lat.ndim} dimensions; expected 1 or 2",
        column=names["lat"],
    )


def _require_obs(ds: xr.Dataset, names: dict[str, str], obs: str, file: str, layout: str) -> None:
    for role, name in names.items():
        if ds.variables[name].dims != (obs,):
            raise InputError(
                file,
                f"in a {layout} every {role} value belongs to the dimension {obs!r}, but "
                f"{name!r} is over {ds.variables[name].dims}",
                column=name,
            )


def _integers(var: xr.Variable, name: str, file: str) -> np.ndarray:
    values = np.asarray(var.values)
    if values.dtype.kind == "f":
        if np.isnan(values).any():
            bad = int(np.flatnonzero(np.isnan(values))[0]) + 1
            raise InputError(file, f"value {bad} is missing; every value must be an integer",
                             column=name)
        if (values != np.round(values)).any():
            raise InputError(file, "values must be integers", column=name)
    elif values.dtype.kind not in "iu":
        raise InputError(file, f"values must be integers, got {values.dtype}", column=name)
    return values.astype(np.int64).reshape(-1)


def _ragged_layout(
    ds: xr.Dataset, count_name: str, count: xr.Variable, obs: str, names: dict[str, str],
    file: str,
) -> dict:
    if obs not in ds.sizes:
        raise InputError(
            file, f"sample_dimension {obs!r} is not a dimension of the file", column=count_name
        )
    _require_obs(ds, names, obs, file, "contiguous ragged array")
    counts = _integers(count, count_name, file)
    if (counts < 0).any():
        raise InputError(file, "counts must not be negative", column=count_name)
    total, size = int(counts.sum()), int(ds.sizes[obs])
    if total != size:
        raise InputError(
            file,
            f"the counts add up to {total} but the dimension {obs!r} has {size} observations "
            f"(CF contiguous ragged array: they must be equal)",
            column=count_name,
        )
    trajectory = np.repeat(np.arange(len(counts)), counts)
    return {"kind": "ragged", "trajectory": trajectory, "n_traj": len(counts),
            "trajectory_dim": count.dims[0] if count.dims else None}


def _indexed_layout(
    ds: xr.Dataset, index_name: str, index: xr.Variable, instance: str, names: dict[str, str],
    file: str, sizes: dict[str, int],
) -> dict:
    if instance not in sizes or index.ndim != 1:
        raise InputError(
            file, f"instance_dimension {instance!r} is not a dimension of the file",
            column=index_name,
        )
    obs = index.dims[0]
    _require_obs(ds, names, obs, file, "indexed ragged array")
    trajectory = _integers(index, index_name, file)
    n_traj = int(sizes[instance])
    bad = np.flatnonzero((trajectory < 0) | (trajectory >= n_traj))
    if len(bad):
        raise InputError(
            file,
            f"index {int(trajectory[bad[0]])} does not name one of the {n_traj} trajectories",
            row=int(bad[0]) + 1,
            column=index_name,
        )
    return {"kind": "indexed", "trajectory": trajectory, "n_traj": n_traj,
            "trajectory_dim": instance}


def _text_id(value: object) -> str:
    if isinstance(value, bytes):
        value = value.decode("utf-8", errors="replace")
    if isinstance(value, float | np.floating):
        if np.isnan(value):
            return ""
        if value == int(value):
            return str(int(value))
    if isinstance(value, np.integer | int):
        return str(int(value))
    return str(value).replace("\x00", "").strip()


def _trajectory_ids(
    ds: xr.Dataset, id_name: str | None, n_traj: int, path: str | Path, config: ReadConfig,
    file: str,
) -> np.ndarray:
    base = default_drifter_id(path, config)
    fallback = [base] if n_traj == 1 else [f"{base}-{k + 1}" for k in range(n_traj)]
    if id_name is None:
        return np.asarray(fallback, dtype=object)
    values = np.asarray(ds.variables[id_name].values)
    chars = values.dtype.kind == "S" and values.dtype.itemsize == 1
    if chars and (values.ndim >= 2 or (values.ndim == 1 and n_traj == 1 and values.size > 1)):
        # character array (trajectory, strlen): join the characters of each id
        width = values.shape[-1]
        values = np.ascontiguousarray(values).reshape(-1, width).view(f"S{width}").reshape(-1)
    values = values.reshape(-1)
    if len(values) != n_traj:
        raise InputError(
            file,
            f"the trajectory id variable has {len(values)} values for {n_traj} trajectories",
            column=id_name,
        )
    ids = [_text_id(v) for v in values]
    return np.asarray([i or fallback[k] for k, i in enumerate(ids)], dtype=object)


def _decoded_times(ds: xr.Dataset, name: str, file: str) -> np.ndarray:
    """Return the time values as decoded by xarray: datetime64 or text."""
    var = ds.variables[name]
    try:
        values = np.asarray(var.values)
    except (ValueError, OverflowError, pd.errors.OutOfBoundsDatetime) as exc:
        raise InputError(
            file, f"the times cannot be decoded from units {_attr(var, 'units')!r}: {exc}",
            column=name,
        ) from exc
    except (OSError, RuntimeError) as exc:
        raise InputError(file, f"cannot read the variable: {exc}", column=name) from exc
    if values.dtype.kind in "MUS":
        return values
    if values.dtype.kind == "O" and all(isinstance(v, str | bytes) for v in values.flat[:10]):
        return values
    if values.dtype.kind == "O":
        calendar = _attr(var, "calendar") or "standard"
        raise InputError(
            file,
            f"the times (calendar {calendar!r}) cannot be placed on the real calendar between "
            f"the years 1678 and 2261; expected the standard, gregorian or "
            f"proleptic_gregorian calendar",
            column=name,
        )
    units = _attr(var, "units")
    raise InputError(
        file,
        (f"time units {units!r} are not CF time units" if units else "the time variable has "
         "no units") + "; expected e.g. units = \"seconds since 1970-01-01T00:00:00Z\"",
        column=name,
    )


def _assemble(
    ds: xr.Dataset,
    names: dict[str, str],
    id_name: str | None,
    layout: dict,
    path: str | Path,
    config: ReadConfig,
    file: str,
) -> pd.DataFrame:
    lat_var = ds.variables[names["lat"]]
    time_values = _decoded_times(ds, names["time"], file)
    order = None
    if layout["kind"] == "multidimensional":
        order = _multidim_dims(ds, names, id_name, file)
        traj_dim, obs_dim = order
    lat = _degrees(lat_var, names["lat"], order, file)
    lon_values = _degrees(ds.variables[names["lon"]], names["lon"], order, file)
    if layout["kind"] == "multidimensional":
        time_var = ds.variables[names["time"]]
        if time_var.dims == (obs_dim,):
            time_values = np.broadcast_to(np.asarray(time_var.values), lat.shape)
        else:
            time_values = np.asarray(time_var.transpose(traj_dim, obs_dim).values)
        if lon_values.shape != lat.shape or time_values.shape != lat.shape:
            raise InputError(
                file,
                f"time, lat and lon must share the (trajectory, obs) shape {lat.shape}",
                column=names["lon"] if lon_values.shape != lat.shape else names["time"],
            )
    lon = np.asarray(lon_values, dtype=float)
    times = parse_time_values(np.asarray(time_values).reshape(-1), names["time"],
                              naive_assumed_utc=False)
    lat = lat.reshape(-1)
    lon = lon.reshape(-1)
    if layout["kind"] == "multidimensional":
        n_traj, n_obs = time_values.shape
        padding = times.missing & np.isnan(lat) & np.isnan(lon)
        keep = np.flatnonzero(~padding)
        trajectory = keep // n_obs
        source_row = keep + 1
    else:
        n_traj = layout["n_traj"]
        keep = np.arange(len(lat))
        trajectory = layout["trajectory"]
        source_row = keep + 1
    ids = _trajectory_ids(ds, id_name, n_traj, path, config, file)[trajectory]
    lat, lon = lat[keep], lon[keep]
    time = times.time[keep]
    errors = join_errors(times.errors[keep])
    check_lon_convention(lon, ids, source_row, file, names["lon"])
    raw = np.full(len(keep), "", dtype=object)
    for i in np.flatnonzero(errors != ""):
        raw[i] = (f"{names['time']}={time_values.reshape(-1)[keep[i]]}, "
                  f"{names['lat']}={lat[i]}, {names['lon']}={lon[i]}")
    return make_fixes(
        drifter_id=ids,
        time=time,
        lat=lat,
        lon=lon,
        source_file=file,
        source_row=source_row,
        time_assumed_utc=times.assumed_utc[keep],
        raw=raw,
        parse_error=errors,
    )


def _degrees(var: xr.Variable, name: str, order: tuple[str, str] | None, file: str) -> np.ndarray:
    """Read a latitude or longitude variable as floats (fill values are NaN)."""
    if var.dtype.kind not in "fiu":
        raise InputError(file, f"the variable holds {var.dtype}; expected numbers (degrees)",
                         column=name)
    try:
        values = var.transpose(*order).values if order else var.values
    except (OSError, RuntimeError) as exc:
        raise InputError(file, f"cannot read the variable: {exc}", column=name) from exc
    return np.asarray(values, dtype=float)


def _multidim_dims(
    ds: xr.Dataset, names: dict[str, str], id_name: str | None, file: str
) -> tuple[str, str]:
    """Return the (trajectory, obs) dimension names of a multidimensional file."""
    dims = ds.variables[names["lat"]].dims
    traj_dim = None
    if id_name is not None and ds.variables[id_name].ndim >= 1:
        traj_dim = ds.variables[id_name].dims[0]
    if traj_dim not in dims:
        traj_dim = dims[0]
    obs_dim = dims[1] if dims[0] == traj_dim else dims[0]
    if ds.variables[names["lon"]].dims not in ((traj_dim, obs_dim), (obs_dim, traj_dim)):
        raise InputError(
            file,
            f"variable {names['lon']!r} is over {ds.variables[names['lon']].dims}, "
            f"but {names['lat']!r} is over {dims}",
            column=names["lon"],
        )
    time_dims = ds.variables[names["time"]].dims
    if time_dims not in ((traj_dim, obs_dim), (obs_dim, traj_dim), (obs_dim,)):
        raise InputError(
            file,
            f"variable {names['time']!r} is over {time_dims}; expected {(traj_dim, obs_dim)}",
            column=names["time"],
        )
    return traj_dim, obs_dim
