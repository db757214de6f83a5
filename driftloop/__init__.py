"""driftloop: quality control and loop analysis of ocean surface drifter tracks.

The public API is small:

- :func:`read_tracks` reads CSV, Parquet, CF NetCDF trajectories and GPX
  files into one tidy table of fixes;
- :func:`run_qc` flags every fix on the QARTOD scale with reason codes;
- :func:`analyse` runs every stage and returns an :class:`Analysis`.

Research tool: results are not a substitute for an operational
search-and-rescue system; defer to the responsible authority.
"""

from __future__ import annotations

__version__ = "0.1.0"

import importlib

_LAZY = {
    "Analysis": "driftloop.pipeline",
    "analyse": "driftloop.pipeline",
    "Config": "driftloop.config",
    "load_config": "driftloop.config",
    "ConfigError": "driftloop.errors",
    "DriftloopError": "driftloop.errors",
    "InputError": "driftloop.errors",
    "read_tracks": "driftloop.io",
    "run_qc": "driftloop.qc",
}


def __getattr__(name: str):
    """Import public names on first use, so that ``import driftloop`` is quick."""
    if name in _LAZY:
        return getattr(importlib.import_module(_LAZY[name]), name)
    raise AttributeError(f"module 'driftloop' has no attribute {name!r}")


def __dir__() -> list[str]:
    return sorted(__all__)


__all__ = [
    "Analysis",
    "Config",
    "ConfigError",
    "DriftloopError",
    "InputError",
    "__version__",
    "analyse",
    "load_config",
    "read_tracks",
    "run_qc",
]
