"""One frozen configuration for every stage, with units in the field names.

A run's configuration is a :class:`Config`, made of one section per stage.
Defaults live here and only here.  A TOML file given with ``--config`` may
override any field; unknown sections or keys and values of the wrong type
are refused with the key named.  :func:`provenance` returns what every
output records about the run (parameters and package version).

Example TOML::

    [qc]
    speed_fail_m_s = 2.5
    land_test = false

    [read]
    columns = { id = "buoy", time = "obs_time" }
"""

from __future__ import annotations

import dataclasses
import tomllib
import typing
from dataclasses import dataclass, field, fields
from pathlib import Path
from typing import Any

from driftloop.errors import ConfigError

__all__ = ["Config", "QCConfig", "ReadConfig", "load_config", "provenance"]


@dataclass(frozen=True)
class ReadConfig:
    """How input files are read.

    Attributes
    ----------
    columns : dict
        Explicit column mapping for delimited text and Parquet, from the
        roles ``id``, ``time``, ``date``, ``lat``, ``lon`` to column names
        in the file.  Roles not given are inferred from the header.  When
        ``date`` is given (or inferred), ``time`` holds the time of day.
    separator : str or None
        Field separator for delimited text; ``None`` sniffs ``,`` ``;`` or tab.
    drifter_id : str or None
        Drifter id to use for files without an id column; ``None`` takes the
        file name without its suffix.
    """

    columns: dict[str, str] = field(default_factory=dict)
    separator: str | None = None
    drifter_id: str | None = None


@dataclass(frozen=True)
class QCConfig:
    """Thresholds of the per-fix quality-control tests (see :mod:`driftloop.qc`).

    Attributes
    ----------
    speed_fail_m_s : float
        Speed to a neighbour above which a fix fails (m/s).  Common practice
        for drogued surface drifters.
    speed_suspect_m_s : float
        Speed above which a fix is suspect (m/s).  Common practice.
    gps_noise_m : float
        Standard deviation of GPS position noise (m).  Typical of the GPS
        receivers on surface drifters (from memory).
    outlier_sigma : float
        Number of noise standard deviations (after the motion allowance) that
        a fix may lie from the position its neighbours predict.
    outlier_min_m : float
        Smallest distance from the predicted position ever called an outlier (m).
    outlier_accel_m_s2 : float
        Acceleration that real drifter motion can reach (m/s2); with the
        rate 2 * Omega * a at which it can turn, bounds how far real motion
        departs from the local fit of the position-outlier test.  Inertial
        motion of 1 m/s at the poles gives about 1.5e-4 m/s2.
    ship_speed_m_s : float
        Sustained speed above which the drifter is taken to be aboard a ship (m/s).
    ship_min_duration_h : float
        How long the speed must stay above ``ship_speed_m_s`` (h).
    grounded_max_drift_m : float
        Largest net displacement over ``grounded_min_duration_h`` for a
        drifter to be grounded (m).
    grounded_min_duration_h : float
        How long the drifter must be still (h).
    near_land_km : float
        Distance from the nearest land cell within which a still drifter is
        called grounded (km).
    speed_max_run_fixes : int
        Longest run of fixes that the speed tests remove as an excursion
        from the track (a spike is a run of one); a fast leg between longer
        runs only marks its two ends suspect.
    same_time_s : float
        Fixes of one drifter closer in time than this are taken as the same
        instant (s): duplicates if at the same position, else time conflicts.
    land_test : bool
        Whether to run the tests that need the bundled 1-km land mask
        (on land, grounded).
    gap_h : float
        Interval between fixes above which a gap is recorded and the track is
        broken into segments (h).
    """

    speed_fail_m_s: float = 3.0
    speed_suspect_m_s: float = 2.0
    gps_noise_m: float = 10.0
    outlier_sigma: float = 5.0
    outlier_min_m: float = 500.0
    outlier_accel_m_s2: float = 2.0e-4
    ship_speed_m_s: float = 2.5
    ship_min_duration_h: float = 3.0
    grounded_max_drift_m: float = 100.0
    grounded_min_duration_h: float = 6.0
    near_land_km: float = 10.0
    speed_max_run_fixes: int = 3
    same_time_s: float = 1.0
    land_test: bool = True
    gap_h: float = 6.0


@dataclass(frozen=True)
class Config:
    """Configuration of a whole run: one section per stage.

    Attributes
    ----------
    read : ReadConfig
        Reader options.
    qc : QCConfig
        Quality-control thresholds.
    """

    read: ReadConfig = field(default_factory=ReadConfig)
    qc: QCConfig = field(default_factory=QCConfig)

    def replace(self, section: str, **changes: Any) -> Config:
        """Return a copy with fields of one section changed.

        Parameters
        ----------
        section : str
            Section name, e.g. ``"qc"``.
        **changes
            Field values to set; each is type-checked as in a TOML file.

        Returns
        -------
        Config
            The new configuration.
        """
        current = getattr(self, section)
        checked = _check_section(type(current), section, changes, None)
        return dataclasses.replace(self, **{section: dataclasses.replace(current, **checked)})


def _type_ok(value: Any, annotation: Any) -> bool:
    origin = typing.get_origin(annotation)
    if origin is typing.Union or str(origin) == "<class 'types.UnionType'>":
        return any(_type_ok(value, a) for a in typing.get_args(annotation))
    if annotation is type(None):
        return value is None
    if annotation is float:
        return isinstance(value, int | float) and not isinstance(value, bool)
    if annotation is int:
        return isinstance(value, int) and not isinstance(value, bool)
    if annotation is bool:
        return isinstance(value, bool)
    if annotation is str:
        return isinstance(value, str)
    if origin is dict:
        key_t, val_t = typing.get_args(annotation)
        return isinstance(value, dict) and all(
            _type_ok(k, key_t) and _type_ok(v, val_t) for k, v in value.items()
        )
    return isinstance(value, annotation)


def _type_name(annotation: Any) -> str:
    return getattr(annotation, "__name__", str(annotation)).replace("NoneType", "none")


def _check_section(cls: type, name: str, values: dict, file: str | None) -> dict:
    hints = typing.get_type_hints(cls)
    known = {f.name for f in fields(cls)}
    out = {}
    for key, value in values.items():
        if key not in known:
            raise ConfigError(
                f"unknown key '{name}.{key}'; known keys of [{name}]: {', '.join(sorted(known))}",
                file,
            )
        if not _type_ok(value, hints[key]):
            raise ConfigError(
                f"key '{name}.{key}' must be {_type_name(hints[key])}, "
                f"got {type(value).__name__} {value!r}",
                file,
            )
        out[key] = float(value) if hints[key] is float else value
    return out


def config_from_dict(data: dict, file: str | None = None) -> Config:
    """Build a :class:`Config` from nested dictionaries, refusing unknown keys.

    Parameters
    ----------
    data : dict
        ``{section: {key: value}}`` as read from TOML.
    file : str or None
        File name for error messages.

    Returns
    -------
    Config
        Defaults overridden by ``data``.

    Raises
    ------
    ConfigError
        On an unknown section or key, or a value of the wrong type.
    """
    hints = typing.get_type_hints(Config)
    sections = {}
    for name, values in data.items():
        if name not in hints:
            raise ConfigError(
                f"unknown section [{name}]; known sections: {', '.join(sorted(hints))}", file
            )
        if not isinstance(values, dict):
            raise ConfigError(f"[{name}] must be a table of keys, got {values!r}", file)
        cls = hints[name]
        sections[name] = cls(**_check_section(cls, name, values, file))
    return Config(**sections)


def load_config(path: str | Path | None) -> Config:
    """Read a TOML configuration file over the defaults.

    Parameters
    ----------
    path : str, Path or None
        The file; ``None`` gives the defaults.

    Returns
    -------
    Config
        The configuration.

    Raises
    ------
    ConfigError
        If the file cannot be read, is not TOML, or has unknown keys or
        values of the wrong type.
    """
    if path is None:
        return Config()
    try:
        text = Path(path).read_bytes().decode("utf-8")
        data = tomllib.loads(text)
    except OSError as exc:
        raise ConfigError(f"cannot read configuration: {exc.strerror}", str(path)) from exc
    except UnicodeDecodeError as exc:
        raise ConfigError("configuration is not UTF-8 text", str(path)) from exc
    except tomllib.TOMLDecodeError as exc:
        raise ConfigError(f"not valid TOML: {exc}", str(path)) from exc
    return config_from_dict(data, str(path))


def config_to_dict(config: Config) -> dict:
    """Return the configuration as nested plain dictionaries (JSON-ready).

    Parameters
    ----------
    config : Config
        The configuration.

    Returns
    -------
    dict
        ``{section: {key: value}}``.
    """
    return dataclasses.asdict(config)


def provenance(config: Config) -> dict:
    """Return what every output records about how it was made.

    Parameters
    ----------
    config : Config
        The configuration used.

    Returns
    -------
    dict
        Package name and version and every parameter.
    """
    from driftloop import __version__

    return {"software": "driftloop", "version": __version__, "parameters": config_to_dict(config)}
