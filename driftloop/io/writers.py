"""Writers of run outputs: every file appears complete or not at all.

Each output is written to a temporary file in the destination folder and
renamed over the target with :func:`os.replace`, which is atomic on POSIX
file systems: a reader (or a run killed part-way) sees either the previous
complete file or the new complete file, never a truncated one.
"""

from __future__ import annotations

import contextlib
import json
import os
import tempfile
from collections.abc import Iterator
from pathlib import Path
from typing import IO, Any

import numpy as np
import pandas as pd

__all__ = ["atomic_open", "format_time", "write_csv", "write_json"]


@contextlib.contextmanager
def atomic_open(path: str | Path, mode: str = "w", **kwargs: Any) -> Iterator[IO]:
    """Open a temporary file beside ``path`` and rename it over ``path`` on success.

    Parameters
    ----------
    path : str or Path
        The final file.
    mode : str
        ``"w"`` (text, UTF-8, Unix line ends) or ``"wb"``.
    **kwargs
        Passed to :func:`open`.

    Yields
    ------
    file object
        The temporary file; if the block raises, it is removed and ``path``
        is left as it was.
    """
    path = Path(path)
    path.parent.mkdir(parents=True, exist_ok=True)
    fd, tmp = tempfile.mkstemp(prefix=f".{path.name}.", suffix=".part", dir=path.parent)
    if "b" not in mode:
        kwargs.setdefault("encoding", "utf-8")
        kwargs.setdefault("newline", "")
    # mkstemp creates the file readable by its owner only; give it the usual
    # permissions of a new file (0666 less the umask)
    umask = os.umask(0)
    os.umask(umask)
    os.chmod(tmp, 0o666 & ~umask)
    try:
        with os.fdopen(fd, mode, **kwargs) as handle:
            yield handle
            handle.flush()
            os.fsync(handle.fileno())
        os.replace(tmp, path)
    except BaseException:
        with contextlib.suppress(FileNotFoundError):
            os.unlink(tmp)
        raise


def format_time(times: pd.Series) -> pd.Series:
    """Format UTC times as ISO 8601 strings with a ``Z`` designator.

    Parameters
    ----------
    times : pandas.Series
        ``datetime64[ns, UTC]`` values.

    Returns
    -------
    pandas.Series
        Strings like ``2026-03-01T12:00:00Z`` (fractional seconds only when
        present); NaT becomes the empty string.
    """
    t = pd.to_datetime(times, utc=True)
    whole = t.dt.strftime("%Y-%m-%dT%H:%M:%SZ")
    has_fraction = (t.dt.microsecond != 0) | (t.dt.nanosecond != 0)
    if bool(has_fraction.any()):
        frac = t.dt.strftime("%Y-%m-%dT%H:%M:%S.%fZ")
        whole = whole.where(~has_fraction, frac)
    return whole.fillna("").astype(object).where(t.notna(), "")


def write_csv(path: str | Path, table: pd.DataFrame, float_digits: dict | None = None) -> None:
    """Write a table as RFC 4180 CSV atomically.

    Parameters
    ----------
    path : str or Path
        Destination file.
    table : pandas.DataFrame
        The table; datetime columns are written as ISO 8601 ``Z`` strings.
    float_digits : dict, optional
        ``{column: decimals}`` for columns to round on output.
    """
    out = table.copy()
    for name in out.columns:
        if pd.api.types.is_datetime64_any_dtype(out[name].dtype):
            out[name] = format_time(out[name])
    for name, digits in (float_digits or {}).items():
        out[name] = out[name].round(digits)
    with atomic_open(path) as handle:
        out.to_csv(handle, index=False, lineterminator="\n")


def _json_default(value: Any) -> Any:
    if isinstance(value, np.integer):
        return int(value)
    if isinstance(value, np.floating):
        return None if not np.isfinite(value) else float(value)
    if isinstance(value, np.bool_):
        return bool(value)
    if isinstance(value, pd.Timestamp):
        return value.strftime("%Y-%m-%dT%H:%M:%SZ")
    if isinstance(value, Path):
        return str(value)
    raise TypeError(f"cannot write {type(value).__name__} as JSON")


def _finite(value: Any) -> Any:
    """Replace NaN and infinities by None (JSON has no such numbers)."""
    if isinstance(value, dict):
        return {k: _finite(v) for k, v in value.items()}
    if isinstance(value, list | tuple):
        return [_finite(v) for v in value]
    if isinstance(value, float | np.floating) and not np.isfinite(value):
        return None
    return value


def write_json(path: str | Path, data: Any) -> None:
    """Write JSON atomically, with stable key order and 2-space indent.

    Parameters
    ----------
    path : str or Path
        Destination file.
    data : object
        JSON-ready data; NumPy scalars and pandas timestamps are converted.
    """
    with atomic_open(path) as handle:
        json.dump(_finite(data), handle, indent=2, default=_json_default, allow_nan=False)
        handle.write("\n")
