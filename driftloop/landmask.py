"""Land tests against a 1-km global land mask.

The mask
--------
The mask is the one shipped in the registry package ``global-land-mask``
(file ``globe_combined_mask_compressed.npz``): a 21600 x 43200 grid of
30 arc-second cells (1/120 degree, about 0.93 km north-south) covering the
globe, derived from GLOBE, the Global Land One-km Base Elevation project of
NOAA's National Geophysical Data Center (NGDC; now NCEI).  A cell is sea
where GLOBE holds its ocean value (-500) and land otherwise, so inland lakes
count as land.  Row 0 is the band just south of 90 N and column 0 the band
just east of 180 W; a point belongs to the cell whose north-west corner is
the nearest grid node north and west of it, as in ``global-land-mask``.
GLOBE's 1999 release date and its coastline sources are from memory.

Near a coast the mask is only as good as its 1-km cells: a fix within about
a kilometre of the shore may fall in a land cell.

Loading
-------
Importing ``global_land_mask`` decompresses the whole grid into a 0.9 GB
boolean array.  This module avoids that: on first use it streams the grid
out of the ``.npz`` archive a block of rows at a time, packs eight cells per
byte (:func:`numpy.packbits`, land = 1, 117 MB) and stores the result as a
``.npy`` file in the cache folder, written to a temporary file and moved
into place with :func:`os.replace`.  Later uses memory-map that file.  The
cache folder is ``$DRIFTLOOP_CACHE_DIR`` if set, else
``$XDG_CACHE_HOME/driftloop``, else ``~/.cache/driftloop``; if it cannot
be written the packed grid is kept in memory for the process.
"""

from __future__ import annotations

import importlib.util
import os
import tempfile
import threading
import zipfile
from pathlib import Path

import numpy as np
from numpy.typing import ArrayLike

from driftloop.constants import EARTH_MEAN_RADIUS_M

__all__ = [
    "CELLS_PER_DEGREE",
    "GRID_SHAPE",
    "cache_dir",
    "is_land",
    "land_bits",
    "land_within",
    "mask_source",
]

#: Cells per degree of latitude and of longitude (30 arc-second cells).
CELLS_PER_DEGREE = 120

#: Shape of the mask grid, (rows from north to south, columns from west to east).
GRID_SHAPE = (180 * CELLS_PER_DEGREE, 360 * CELLS_PER_DEGREE)

_ROWS, _COLS = GRID_SHAPE
_BYTES_PER_ROW = _COLS // 8
_MASK_FILE = "globe_combined_mask_compressed.npz"
_CACHE_VERSION = 1
_ROWS_PER_BLOCK = 600  # 26 MB of booleans per block while packing
_BLOCK = 32  # cells per side of the coarse blocks used to screen land_within

_lock = threading.RLock()
_bits: np.ndarray | None = None
_block_table: np.ndarray | None = None


def mask_source() -> Path:
    """Return the path of the ``.npz`` mask shipped by ``global-land-mask``.

    The package is located without importing it (importing it would load
    the whole unpacked grid).

    Returns
    -------
    pathlib.Path
        The archive.

    Raises
    ------
    FileNotFoundError
        If the package or its mask file is not installed.
    """
    spec = importlib.util.find_spec("global_land_mask")
    if spec is None or not spec.submodule_search_locations:
        raise FileNotFoundError("the package 'global-land-mask' is not installed")
    path = Path(next(iter(spec.submodule_search_locations))) / _MASK_FILE
    if not path.is_file():
        raise FileNotFoundError(f"land mask not found: {path}")
    return path


def cache_dir() -> Path:
    """Return the folder where driftloop keeps derived data files.

    Returns
    -------
    pathlib.Path
        ``$DRIFTLOOP_CACHE_DIR``, else ``$XDG_CACHE_HOME/driftloop``, else
        ``~/.cache/driftloop`` (not created here).
    """
    explicit = os.environ.get("DRIFTLOOP_CACHE_DIR")
    if explicit:
        return Path(explicit).expanduser()
    xdg = os.environ.get("XDG_CACHE_HOME")
    if xdg:
        return Path(xdg).expanduser() / "driftloop"
    return Path.home() / ".cache" / "driftloop"


def _read_npy_header(stream) -> tuple[tuple[int, ...], bool, np.dtype]:
    version = np.lib.format.read_magic(stream)
    if version == (1, 0):
        return np.lib.format.read_array_header_1_0(stream)
    return np.lib.format.read_array_header_2_0(stream)


def _check_grid(archive: zipfile.ZipFile, source: Path) -> None:
    """Check that the archive's latitude and longitude axes are the grid assumed here."""
    with archive.open("lat.npy") as f:
        lat = np.lib.format.read_array(f)
    with archive.open("lon.npy") as f:
        lon = np.lib.format.read_array(f)
    step = 1.0 / CELLS_PER_DEGREE
    expected_lat = 90.0 - step * np.arange(_ROWS)
    expected_lon = -180.0 + step * np.arange(_COLS)
    if (
        lat.shape != (_ROWS,)
        or lon.shape != (_COLS,)
        or not np.allclose(lat, expected_lat, rtol=0, atol=1e-6)
        or not np.allclose(lon, expected_lon, rtol=0, atol=1e-6)
    ):
        raise ValueError(f"{source}: unexpected grid axes; driftloop expects 30 arc-second cells")


def _pack_into(out: np.ndarray, source: Path) -> None:
    """Stream the boolean sea mask out of the archive and store packed land bits in ``out``."""
    with zipfile.ZipFile(source) as archive:
        _check_grid(archive, source)
        with archive.open("mask.npy") as stream:
            shape, fortran_order, dtype = _read_npy_header(stream)
            if shape != GRID_SHAPE or fortran_order or dtype != np.dtype(bool):
                raise ValueError(
                    f"{source}: expected a C-ordered boolean {GRID_SHAPE} mask, "
                    f"got {dtype} {shape} (fortran_order={fortran_order})"
                )
            for start in range(0, _ROWS, _ROWS_PER_BLOCK):
                rows = min(_ROWS_PER_BLOCK, _ROWS - start)
                buffer = stream.read(rows * _COLS)
                if len(buffer) != rows * _COLS:
                    raise ValueError(f"{source}: mask data ends early")
                sea = np.frombuffer(buffer, dtype=np.uint8).reshape(rows, _COLS)
                out[start : start + rows] = np.packbits(sea == 0, axis=1)


def _cache_file(source: Path) -> Path:
    size = source.stat().st_size
    return cache_dir() / f"globe_land_bits_v{_CACHE_VERSION}_{size}.npy"


def _open_cached(path: Path) -> np.ndarray | None:
    try:
        bits = np.load(path, mmap_mode="r")
    except (OSError, ValueError):
        return None
    if bits.shape != (_ROWS, _BYTES_PER_ROW) or bits.dtype != np.uint8:
        return None
    return bits


def _build(source: Path, target: Path) -> np.ndarray:
    """Pack the mask, writing it atomically to ``target`` when the folder allows it."""
    try:
        target.parent.mkdir(parents=True, exist_ok=True)
        fd, tmp_name = tempfile.mkstemp(prefix=f".{target.name}.", dir=target.parent)
    except OSError:
        bits = np.empty((_ROWS, _BYTES_PER_ROW), dtype=np.uint8)
        _pack_into(bits, source)
        return bits
    os.close(fd)
    tmp = Path(tmp_name)
    try:
        out = np.lib.format.open_memmap(
            tmp, mode="w+", dtype=np.uint8, shape=(_ROWS, _BYTES_PER_ROW)
        )
        _pack_into(out, source)
        out.flush()
        del out
        os.chmod(tmp, 0o644)  # mkstemp makes it private; the cache is shareable
        os.replace(tmp, target)
    except OSError:
        tmp.unlink(missing_ok=True)
        bits = np.empty((_ROWS, _BYTES_PER_ROW), dtype=np.uint8)
        _pack_into(bits, source)
        return bits
    except BaseException:
        tmp.unlink(missing_ok=True)
        raise
    cached = _open_cached(target)
    if cached is None:  # pragma: no cover - the file was just written
        raise OSError(f"cannot read back the land-mask cache {target}")
    return cached


def land_bits() -> np.ndarray:
    """Return the packed land mask, loading or building it on first use.

    Returns
    -------
    numpy.ndarray
        ``uint8`` array of shape (21600, 5400), read-only (memory-mapped
        when cached): bit ``7 - (col % 8)`` of byte ``[row, col // 8]`` is 1
        where cell (row, col) is land.
    """
    global _bits
    if _bits is not None:
        return _bits
    with _lock:
        if _bits is None:
            source = mask_source()
            target = _cache_file(source)
            bits = _open_cached(target)
            if bits is None:
                bits = _build(source, target)
            _bits = bits
    return _bits


def _cell_rows(lat: np.ndarray) -> np.ndarray:
    rows = np.floor((90.0 - lat) * CELLS_PER_DEGREE)
    return np.clip(rows, 0, _ROWS - 1).astype(np.int64)


def _cell_cols(lon: np.ndarray) -> np.ndarray:
    cols = np.floor((lon + 180.0) * CELLS_PER_DEGREE).astype(np.int64)
    return np.mod(cols, _COLS)


def is_land(lat: ArrayLike, lon: ArrayLike) -> np.ndarray:
    """Test whether points fall in a land cell of the 1-km mask.

    Parameters
    ----------
    lat : array_like
        Latitude, degrees north.
    lon : array_like
        Longitude, degrees east (any range; wrapped).

    Returns
    -------
    numpy.ndarray
        Boolean array of the broadcast shape; False where ``lat`` or ``lon``
        is NaN or infinite or ``|lat| > 90``.

    Notes
    -----
    Nearest-cell lookup in the GLOBE-derived mask of ``global-land-mask``
    (30 arc-second cells); see the module notes.

    Examples
    --------
    >>> is_land([0.0, 48.8566], [0.0, 2.3522]).tolist()  # doctest: +SKIP
    [False, True]
    """
    lat_a, lon_a = np.broadcast_arrays(np.asarray(lat, dtype=float), np.asarray(lon, dtype=float))
    valid = np.isfinite(lat_a) & np.isfinite(lon_a) & (np.abs(lat_a) <= 90.0)
    result = np.zeros(lat_a.shape, dtype=bool)
    if not valid.any():
        return result
    bits = land_bits()
    rows = _cell_rows(lat_a[valid])
    cols = _cell_cols(lon_a[valid])
    byte = bits[rows, cols >> 3]
    result[valid] = ((byte >> (7 - (cols & 7)).astype(np.uint8)) & 1).astype(bool)
    return result


def _any_land_in_spans(
    bits: np.ndarray, rows: np.ndarray, col0: np.ndarray, col1: np.ndarray
) -> np.ndarray:
    """Return whether row ``rows[k]`` holds land in columns ``col0[k]..col1[k]`` (wrapping)."""
    found = np.zeros(rows.shape, dtype=bool)
    byte0 = col0 >> 3
    byte1 = col1 >> 3
    nbytes = byte1 - byte0 + 1
    first_mask = (0xFF >> (col0 & 7)).astype(np.uint8)
    last_mask = ((0xFF << (7 - (col1 & 7))) & 0xFF).astype(np.uint8)
    whole = nbytes >= _BYTES_PER_ROW
    if whole.any():
        found[whole] = bits[rows[whole]].any(axis=1)
    # group the spans by width (powers of two) so that each gather is rectangular
    width_class = np.ceil(np.log2(np.maximum(nbytes, 1))).astype(np.int64)
    width_class[whole] = -1
    for cls in np.unique(width_class[width_class >= 0]):
        sel = np.flatnonzero(width_class == cls)
        width = 1 << int(cls)
        offsets = np.arange(width)
        n = nbytes[sel][:, None]
        cols = np.mod(byte0[sel][:, None] + offsets, _BYTES_PER_ROW)
        values = bits[rows[sel][:, None], cols]
        keep = np.where(offsets < n, np.uint8(0xFF), np.uint8(0))
        keep = np.where(offsets == 0, keep & first_mask[sel][:, None], keep)
        keep = np.where(offsets == n - 1, keep & last_mask[sel][:, None], keep)
        found[sel] = (values & keep).any(axis=1)
    return found


def _coarse_counts() -> np.ndarray:
    """Return the summed-area table of land blocks of ``_BLOCK`` cells a side (built once)."""
    global _block_table
    if _block_table is not None:
        return _block_table
    with _lock:
        if _block_table is None:
            bits = land_bits()
            nrow, ncol = _ROWS // _BLOCK, _BYTES_PER_ROW // (_BLOCK // 8)
            blocks = np.zeros((nrow, ncol), dtype=bool)
            step = 60 * _BLOCK  # rows per read, to bound memory
            for start in range(0, _ROWS, step):
                chunk = np.asarray(bits[start : start + step])
                blocks[start // _BLOCK : (start + chunk.shape[0]) // _BLOCK] = (
                    chunk.reshape(-1, _BLOCK, ncol, _BLOCK // 8).any(axis=(1, 3))
                )
            table = np.zeros((nrow + 1, ncol + 1), dtype=np.int32)
            table[1:, 1:] = blocks.cumsum(axis=0, dtype=np.int32).cumsum(axis=1, dtype=np.int32)
            _block_table = table
    return _block_table


def _blocks_with_land(
    table: np.ndarray, row0: np.ndarray, row1: np.ndarray, col0: np.ndarray, col1: np.ndarray
) -> np.ndarray:
    """Test for land blocks in block rows row0..row1, block columns col0..col1 (wrapping)."""
    ncol = table.shape[1] - 1
    whole = col1 - col0 + 1 >= ncol
    start = np.where(whole, 0, np.mod(col0, ncol))
    stop = np.where(whole, ncol, start + (col1 - col0 + 1))  # exclusive, may pass ncol

    def rect(c0: np.ndarray, c1: np.ndarray) -> np.ndarray:
        return table[row1 + 1, c1] - table[row0, c1] - table[row1 + 1, c0] + table[row0, c0]

    total = rect(start, np.minimum(stop, ncol))
    wraps = stop > ncol
    total = total + np.where(wraps, rect(np.zeros_like(start), np.maximum(stop - ncol, 0)), 0)
    return total > 0


def land_within(lat: ArrayLike, lon: ArrayLike, radius_km: float) -> np.ndarray:
    """Test whether any land cell lies within a distance of each point.

    Parameters
    ----------
    lat : array_like
        Latitude, degrees north.
    lon : array_like
        Longitude, degrees east (any range; wrapped).
    radius_km : float
        Search radius (km), >= 0.

    Returns
    -------
    numpy.ndarray
        Boolean array of the broadcast shape; False for NaN, infinite or
        ``|lat| > 90`` points.

    Raises
    ------
    ValueError
        If ``radius_km`` is negative or not finite.

    Notes
    -----
    A window search on the packed mask.  A point in a land cell is done at
    once; a point whose bounding box holds no land in a coarse table of
    32 x 32-cell blocks (a summed-area table built once) is sea.  For the
    rest, for each grid row that the circle touches, the circle's half-width
    in longitude at the latitude of that row nearest the point follows from
    spherical trigonometry, cos d = sin(phi) sin(phi_r) + cos(phi) cos(phi_r)
    cos(dlon), with d the radius over the mean Earth radius (IUGG R1), and
    every cell of the row overlapping that longitude span is tested.  The
    search therefore covers the circle to within a fraction of a cell (the
    sphere differs from WGS 84 by well under 1 % of the radius); spans that
    reach a pole take the whole row.  ``land_within(lat, lon, 0)`` equals
    :func:`is_land`.
    """
    if not np.isfinite(radius_km) or radius_km < 0:
        raise ValueError(f"radius_km must be finite and >= 0, got {radius_km!r}")
    lat_a, lon_a = np.broadcast_arrays(np.asarray(lat, dtype=float), np.asarray(lon, dtype=float))
    shape = lat_a.shape
    lat_f = lat_a.ravel()
    lon_f = lon_a.ravel()
    result = is_land(lat_f, lon_f)
    valid = np.isfinite(lat_f) & np.isfinite(lon_f) & (np.abs(lat_f) <= 90.0)
    points = np.flatnonzero(valid & ~result)
    if points.size == 0 or radius_km == 0:
        return result.reshape(shape)
    angle = radius_km * 1000.0 / EARTH_MEAN_RADIUS_M  # radians
    angle_deg = np.degrees(angle)

    # coarse screen on the bounding box of each circle
    phi = lat_f[points]
    lam = lon_f[points]
    row_top = _cell_rows(np.minimum(phi + angle_deg, 90.0))
    row_bottom = _cell_rows(np.maximum(phi - angle_deg, -90.0))
    with np.errstate(invalid="ignore", divide="ignore"):
        sin_half = np.sin(angle) / np.cos(np.radians(phi))
    polar = ~(sin_half < 1.0) | (np.abs(phi) + angle_deg >= 90.0)
    half = np.where(polar, 180.0, np.degrees(np.arcsin(np.clip(sin_half, 0.0, 1.0))))
    col0 = np.floor((lam - half + 180.0) * CELLS_PER_DEGREE).astype(np.int64)
    col1 = np.floor((lam + half + 180.0) * CELLS_PER_DEGREE).astype(np.int64)
    near = _blocks_with_land(
        _coarse_counts(), row_top // _BLOCK, row_bottom // _BLOCK, col0 // _BLOCK, col1 // _BLOCK
    )
    points = points[near]
    if points.size == 0:
        return result.reshape(shape)

    bits = land_bits()
    max_rows = int(np.ceil(2 * angle_deg * CELLS_PER_DEGREE)) + 2
    chunk = max(1, 2_000_000 // max_rows)
    cos_angle = np.cos(angle)
    step = 1.0 / CELLS_PER_DEGREE
    for start in range(0, points.size, chunk):
        idx = points[start : start + chunk]
        phi = lat_f[idx]
        lam = lon_f[idx]
        row_top = _cell_rows(np.minimum(phi + angle_deg, 90.0))
        row_bottom = _cell_rows(np.maximum(phi - angle_deg, -90.0))
        rows = row_top[:, None] + np.arange(max_rows)
        in_range = rows <= row_bottom[:, None]
        owner = np.broadcast_to(np.arange(idx.size)[:, None], rows.shape)[in_range]
        rows = rows[in_range]
        band_north = 90.0 - rows * step
        band_south = band_north - step
        phi_p = phi[owner]
        phi_r = np.radians(np.clip(phi_p, band_south, band_north))
        phi_pr = np.radians(phi_p)
        with np.errstate(invalid="ignore", divide="ignore"):
            cos_dlon = (cos_angle - np.sin(phi_pr) * np.sin(phi_r)) / (
                np.cos(phi_pr) * np.cos(phi_r)
            )
        cos_dlon = np.where(np.isfinite(cos_dlon), cos_dlon, -1.0)  # at a pole: whole row
        own_row = rows == _cell_rows(phi_p)
        test = (cos_dlon <= 1.0 + 1e-12) | own_row
        dlon = np.degrees(np.arccos(np.clip(cos_dlon[test], -1.0, 1.0)))
        lam_p = lam[owner[test]]
        c0 = np.floor((lam_p - dlon + 180.0) * CELLS_PER_DEGREE).astype(np.int64)
        c1 = np.floor((lam_p + dlon + 180.0) * CELLS_PER_DEGREE).astype(np.int64)
        whole = (c1 - c0 + 1 >= _COLS) | (dlon >= 180.0)
        c0 = np.where(whole, 0, c0)
        c1 = np.where(whole, _COLS - 1, c1)
        found = _any_land_in_spans(bits, rows[test], c0, c1)
        result[idx] = np.bincount(owner[test], weights=found, minlength=idx.size) > 0
    return result.reshape(shape)
