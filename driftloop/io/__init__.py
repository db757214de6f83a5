"""Readers for drifter tracks: every format becomes one tidy table of fixes.

:func:`read_tracks` picks the reader by file suffix:

============================ ===========================================
suffix                       reader
============================ ===========================================
``.csv`` ``.txt`` ``.tsv``   :func:`driftloop.io.delimited.read_delimited`
``.parquet`` ``.pq``         :func:`driftloop.io.parquet.read_parquet`
``.nc`` ``.nc4`` ``.cdf``    :func:`driftloop.io.netcdf.read_netcdf`
``.gpx``                     :func:`driftloop.io.gpx.read_gpx`
============================ ===========================================

The table is described in :mod:`driftloop.io.schema`.
"""

from __future__ import annotations

from collections.abc import Iterable
from pathlib import Path

import pandas as pd

from driftloop.config import ReadConfig
from driftloop.errors import InputError
from driftloop.io.schema import FIX_COLUMNS, empty_fixes, make_fixes, wrap_lon

__all__ = [
    "FIX_COLUMNS",
    "empty_fixes",
    "expand_inputs",
    "make_fixes",
    "read_file",
    "read_tracks",
    "wrap_lon",
]

_SUFFIXES = {
    ".csv": "delimited",
    ".txt": "delimited",
    ".tsv": "delimited",
    ".tab": "delimited",
    ".parquet": "parquet",
    ".pq": "parquet",
    ".nc": "netcdf",
    ".nc4": "netcdf",
    ".cdf": "netcdf",
    ".gpx": "gpx",
}


def reader_kind(path: str | Path) -> str:
    """Return which reader handles a file, from its suffix.

    Parameters
    ----------
    path : str or Path
        The input file.

    Returns
    -------
    str
        One of ``"delimited"``, ``"parquet"``, ``"netcdf"``, ``"gpx"``.

    Raises
    ------
    InputError
        If the suffix is not one driftloop reads.
    """
    suffix = Path(path).suffix.lower()
    if suffix not in _SUFFIXES:
        known = " ".join(sorted(_SUFFIXES))
        raise InputError(str(path), f"unknown file type {suffix or '(no suffix)'!r}; "
                         f"driftloop reads {known}")
    return _SUFFIXES[suffix]


def _readable(path: Path) -> bool:
    return path.is_file() and not path.name.startswith((".", "_")) \
        and path.suffix.lower() in _SUFFIXES


def _folder_files(folder: Path) -> list[Path]:
    """Track files of a folder and of its ``KEY=VALUE`` partition folders."""
    found = []
    for entry in folder.iterdir():
        if entry.is_dir() and "=" in entry.name and not entry.name.startswith((".", "_")):
            found.extend(_folder_files(entry))
        elif _readable(entry):
            found.append(entry)
    return found


def expand_inputs(items: Iterable[str | Path]) -> list[Path]:
    """Turn input names into the track files to read, sorted by path.

    A folder stands for the track files in it (by suffix, names starting
    with ``.`` or ``_`` left out) and in its ``KEY=VALUE`` subfolders, as in
    a Hive-partitioned Parquet dataset (the partition values become columns,
    see :func:`driftloop.io.parquet.hive_partitions`); other subfolders are
    not read.

    Parameters
    ----------
    items : iterable of str or Path
        Files and folders.

    Returns
    -------
    list of Path
        The files, sorted by path (a file named twice is read twice, as
        named).

    Raises
    ------
    InputError
        If a name does not exist or a folder holds no track file.
    """
    paths: list[Path] = []
    for item in items:
        path = Path(item)
        if path.is_dir():
            found = _folder_files(path)
            if not found:
                raise InputError(str(path), "folder holds no track files")
            paths.extend(found)
        elif not path.exists():
            raise InputError(str(path), "no such file or folder")
        else:
            paths.append(path)
    return sorted(paths, key=str)


def read_file(path: str | Path, config: ReadConfig | None = None) -> pd.DataFrame:
    """Read one track file into the tidy fixes table.

    Parameters
    ----------
    path : str or Path
        The input file.
    config : ReadConfig, optional
        Reader options (column mapping, separator, drifter id).

    Returns
    -------
    pandas.DataFrame
        One row per input record, columns :data:`FIX_COLUMNS`.

    Raises
    ------
    InputError
        If the file cannot be read as a track file.
    """
    config = config or ReadConfig()
    kind = reader_kind(path)
    if not Path(path).is_file():
        raise InputError(str(path), "no such file")
    if kind == "delimited":
        from driftloop.io.delimited import read_delimited as reader
    elif kind == "parquet":
        from driftloop.io.parquet import read_parquet as reader
    elif kind == "netcdf":
        from driftloop.io.netcdf import read_netcdf as reader
    else:
        from driftloop.io.gpx import read_gpx as reader
    table = reader(path, config)
    return table.loc[:, list(FIX_COLUMNS)]


def read_tracks(
    paths: str | Path | Iterable[str | Path], config: ReadConfig | None = None
) -> pd.DataFrame:
    """Read track files into one tidy table of fixes.

    Parameters
    ----------
    paths : str, Path or iterable of them
        Input files (CSV/TSV, Parquet, CF NetCDF trajectories, GPX).
    config : ReadConfig, optional
        Reader options.

    Returns
    -------
    pandas.DataFrame
        Every input record, files in the order given, rows in file order;
        columns as in :mod:`driftloop.io.schema`.

    Raises
    ------
    InputError
        If any file cannot be read; the message names file, row and column.

    Examples
    --------
    >>> import driftloop
    >>> fixes = driftloop.read_tracks(["sample_tracks/orravane_a.csv"])  # doctest: +SKIP
    """
    if isinstance(paths, str | Path):
        paths = [paths]
    tables = [read_file(p, config) for p in paths]
    if not tables:
        return empty_fixes()
    return pd.concat(tables, ignore_index=True)
