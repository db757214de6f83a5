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
import math
import tomllib
import typing
from dataclasses import dataclass, field, fields
from pathlib import Path
from typing import Any

from driftloop.errors import ConfigError
from driftloop.wavelet import WaveletConfig

__all__ = [
    "Config",
    "LoopConfig",
    "QCConfig",
    "ReadConfig",
    "ResampleConfig",
    "SkillConfig",
    "load_config",
    "parse_windows",
    "provenance",
]


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

    def __post_init__(self) -> None:
        roles = ("id", "time", "date", "lat", "lon")
        for role in self.columns:
            if role not in roles:
                raise ConfigError(
                    f"key 'read.columns.{role}': unknown column role {role!r}; roles are "
                    + ", ".join(roles)
                )
        if self.separator is not None and len(self.separator) != 1 and self.separator != "tab":
            raise ConfigError(
                f"key 'read.separator' must be one character or \"tab\", "
                f"got {self.separator!r}"
            )


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

    def __post_init__(self) -> None:
        _require_positive(self, "qc")


@dataclass(frozen=True)
class ResampleConfig:
    """Resampling onto a uniform time grid (see :mod:`driftloop.resample`).

    Attributes
    ----------
    step_h : float
        Grid step (h); grid times are multiples of it since
        1970-01-01T00:00Z, so the default puts every point on a whole UTC hour.
    max_gap_h : float
        Interval between usable fixes above which the track is split into
        separate segments (h).  Shorter gaps are interpolated and marked.
    flag_gap_h : float
        Interval between fixes above which the grid points inside it are
        marked ``in_gap`` with its length in ``gap_h`` (h).
    min_segment_days : float
        Segments whose first and last fixes are less than this apart are
        dropped and reported (days).
    interpolator : str
        ``"spline"`` (not-a-knot cubic spline, loop-preserving) or ``"linear"``.
    include_suspect : bool
        Whether fixes with QC flag 3 (suspect) are used besides flag 1.
    accel_m_s2 : float
        Largest acceleration of real drifter motion (m/s2), used in the
        interpolation error bound of ``sigma_m`` (same meaning as
        ``qc.outlier_accel_m_s2``).
    projection_radius_km : float
        Largest distance of a fix from the centre of the local azimuthal
        equidistant projection it is interpolated in (km); the scale error
        stays below (r/R)^2 / 6, 9.3e-5 at 150 km.
    projection_method : str
        ``"conformal"`` (closed form, within 1.1 mm of PROJ's aeqd at 150 km,
        faster) or ``"geodesic"`` (geodesic problems, PROJ's aeqd exactly).
    """

    step_h: float = 1.0
    max_gap_h: float = 12.0
    flag_gap_h: float = 3.0
    min_segment_days: float = 3.0
    interpolator: str = "spline"
    include_suspect: bool = False
    accel_m_s2: float = 2.0e-4
    projection_radius_km: float = 150.0
    projection_method: str = "conformal"

    def __post_init__(self) -> None:
        """Refuse values that cannot work, naming the key."""
        choices = {"interpolator": ("spline", "linear"),
                   "projection_method": ("conformal", "geodesic")}
        for name, allowed in choices.items():
            if getattr(self, name) not in allowed:
                raise ConfigError(f"key 'resample.{name}' must be one of "
                                  f"{', '.join(allowed)}, got {getattr(self, name)!r}")
        for name in ("step_h", "max_gap_h", "projection_radius_km"):
            value = getattr(self, name)
            if isinstance(value, int | float) and not value > 0:
                raise ConfigError(f"key 'resample.{name}' must be > 0, got {value!r}")
        for name in ("flag_gap_h", "min_segment_days", "accel_m_s2"):
            value = getattr(self, name)
            if isinstance(value, int | float) and not value >= 0:
                raise ConfigError(f"key 'resample.{name}' must be >= 0, got {value!r}")


def parse_windows(text: str) -> tuple[float, ...]:
    """Parse a comma-separated list of window lengths in hours.

    Parameters
    ----------
    text : str
        E.g. ``"24,48,72"``; spaces are allowed.

    Returns
    -------
    tuple of float
        The window lengths (h), sorted, without repeats.

    Raises
    ------
    ConfigError
        If an item is not a positive finite number, or the list is empty.

    Examples
    --------
    >>> parse_windows("72, 24,48")
    (24.0, 48.0, 72.0)
    """
    items = [item.strip() for item in str(text).split(",")]
    if not items or all(not item for item in items):
        raise ConfigError("skill.windows_h: give at least one window length in hours, "
                          "e.g. \"24,48,72\"")
    values = []
    for item in items:
        try:
            value = float(item)
        except ValueError:
            raise ConfigError(f"skill.windows_h: {item!r} is not a number of hours; "
                              "expected e.g. \"24,48,72\"") from None
        if not math.isfinite(value) or value <= 0:
            raise ConfigError(f"skill.windows_h: window lengths must be positive hours, "
                              f"got {item!r}")
        values.append(value)
    return tuple(sorted(set(values)))


@dataclass(frozen=True)
class SkillConfig:
    """How modelled tracks are scored against observed ones (see :mod:`driftloop.skill`).

    Attributes
    ----------
    tolerance_n : float
        Tolerance n of the skill score (dimensionless, > 0): ss = 1 - s/n
        for s <= n, else 0.  Liu & Weisberg (2011) used 1 (from memory).
    windows_h : str
        Forecast window lengths (h), comma-separated, e.g. ``"24,48,72"``.
    restart_h : float or None
        Interval between the starts of successive windows (h); ``None``
        uses each window's own length (back-to-back windows).
    start_time_tol_s : float
        Largest time between a modelled track's start and the nearest
        usable observed fix (s); also how much earlier than a window's end
        the observed and modelled tracks may end.
    start_distance_tol_m : float
        Largest distance between a modelled track's start and the observed
        position at that time (m).
    max_gap_h : float
        Longest interval between observed fixes inside a scored window (h).
    run_separator : str
        Separator between a drifter id and a run label in modelled track
        ids: ``ORV-A01@day3`` belongs to drifter ``ORV-A01``.
    observed_qc : bool
        Whether to run driftloop's quality control on the observed fixes and
        score only usable ones (flag pass or suspect).
    """

    tolerance_n: float = 1.0
    windows_h: str = "24,48,72"
    restart_h: float | None = None
    start_time_tol_s: float = 3600.0
    start_distance_tol_m: float = 1000.0
    max_gap_h: float = 6.0
    run_separator: str = "@"
    observed_qc: bool = True

    def __post_init__(self) -> None:
        parse_windows(self.windows_h)
        positive = {
            "tolerance_n": self.tolerance_n,
            "start_time_tol_s": self.start_time_tol_s,
            "start_distance_tol_m": self.start_distance_tol_m,
            "max_gap_h": self.max_gap_h,
        }
        if self.restart_h is not None:
            positive["restart_h"] = self.restart_h
        for key, value in positive.items():
            if not isinstance(value, int | float) or not math.isfinite(value) or value <= 0:
                raise ConfigError(f"skill.{key} must be a positive number, got {value!r}")
        if not self.run_separator:
            raise ConfigError("skill.run_separator must not be empty")

    @property
    def windows(self) -> tuple[float, ...]:
        """Window lengths (h), parsed from :attr:`windows_h`."""
        return parse_windows(self.windows_h)


@dataclass(frozen=True)
class LoopConfig:
    """Merging and classification of loop events (see :mod:`driftloop.loops`).

    Attributes
    ----------
    merge_period_tolerance : float
        Largest fractional period difference for two ridges of the same
        sense to be joined into one event.
    merge_gap_periods : float
        Largest time between two such ridges, in periods, for them to be
        joined (covers short gaps and segment breaks).
    tidal_tolerance : float
        Largest fractional distance from the M2, S2, K1 or O1 period for an
        event to be tidal.
    tidal_inertial_separation : float
        A tidal period counts only where it differs from the local inertial
        period by more than this fraction.
    inertial_period_ratio_min, inertial_period_ratio_max : float
        Band of period / inertial period for inertial events; wide enough
        for the vorticity shift f + zeta/2 of near-inertial motion (Kunze
        1985).
    inertial_radius_ratio_min, inertial_radius_ratio_max : float
        Band of the position-based radius / |V/f| for inertial events.
    eddy_period_ratio_min : float
        Period / inertial period from which looping is taken as an eddy.
    equator_band_deg : float
        No event within this many degrees of the equator is called inertial.
    episode_split_depth : float
        An event is split into forcing episodes where its amplitude (smoothed
        over one period) falls below this fraction of the maxima on both
        sides; 0 never splits.
    min_speed_m_s : float
        Smallest speed of a loop event (m/s): the own-sense ridge amplitude
        (circular speed) for inertial and eddy candidates, the semi-major
        speed of the ridge ellipse for tidal ones.  Stretches of a ridge
        below it are not part of any event.
    """

    merge_period_tolerance: float = 0.15
    merge_gap_periods: float = 1.0
    tidal_tolerance: float = 0.03
    tidal_inertial_separation: float = 0.15
    inertial_period_ratio_min: float = 0.85
    inertial_period_ratio_max: float = 1.15
    inertial_radius_ratio_min: float = 0.5
    inertial_radius_ratio_max: float = 2.0
    eddy_period_ratio_min: float = 1.5
    equator_band_deg: float = 5.0
    episode_split_depth: float = 0.5
    min_speed_m_s: float = 0.05


@dataclass(frozen=True)
class Config:
    """Configuration of a whole run: one section per stage.

    Attributes
    ----------
    read : ReadConfig
        Reader options.
    qc : QCConfig
        Quality-control thresholds.
    skill : SkillConfig
        Model-vs-drifter trajectory skill.
    loops : LoopConfig
        Merging and classification of loop events.
    wavelet : WaveletConfig
        Morse wavelet transform, ridges and significance
        (:class:`driftloop.wavelet.WaveletConfig`).
    resample : ResampleConfig
        Resampling onto a uniform time grid.
    """

    read: ReadConfig = field(default_factory=ReadConfig)
    qc: QCConfig = field(default_factory=QCConfig)
    skill: SkillConfig = field(default_factory=SkillConfig)
    loops: LoopConfig = field(default_factory=LoopConfig)
    wavelet: WaveletConfig = field(default_factory=WaveletConfig)
    resample: ResampleConfig = field(default_factory=ResampleConfig)

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


def _require_positive(section: Any, name: str) -> None:
    """Refuse numeric fields that are not finite and positive, naming the key."""
    hints = typing.get_type_hints(type(section))
    for f in fields(section):
        value = getattr(section, f.name)
        if hints[f.name] in (float, int) and not isinstance(value, bool) and not (
            isinstance(value, int | float) and math.isfinite(value) and value > 0
        ):
            raise ConfigError(
                f"key '{name}.{f.name}' must be a finite positive number, got {value!r}"
            )


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
        if typing.get_origin(hints[key]) is dict and isinstance(value, dict):
            _, item_type = typing.get_args(hints[key])
            for item_key, item in value.items():
                if not _type_ok(item, item_type):
                    raise ConfigError(
                        f"key '{name}.{key}.{item_key}' must be {_type_name(item_type)}, "
                        f"got {type(item).__name__} {item!r}",
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
        try:
            sections[name] = cls(**_check_section(cls, name, values, file))
        except ConfigError as exc:
            raise ConfigError(exc.message, exc.file or file) from None
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
