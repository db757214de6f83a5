"""Physics-based synthetic drifter releases with a ground-truth table.

A release is a set of drogued surface drifters whose velocity is the sum of

1. a slowly varying **background current**: a uniform drift plus a
   non-divergent meander that travels slowly eastward;
2. the wind-driven velocity of a **slab mixed layer** (Pollard & Millard
   1970), which rings at the local inertial frequency after every passing
   storm and decays with damping time 1/r;
3. for drifters caught in a **mesoscale eddy**, the azimuthal swirl of a
   Gaussian vortex while they are trapped;
4. optionally, a **barotropic tidal current** (M2, S2, K1, O1 ellipses,
   :class:`TidalCurrent`).

Drifters named in ``quiet_drifters`` feel no wind, so they carry no
inertial motion: a control for false detections.  Releases work in either
hemisphere (f < 0 in the south turns free inertial motion anticlockwise)
and eddies of either spin can be put in either.

Positions are integrated on the WGS 84 ellipsoid and then sampled roughly
hourly, the way a field file records them: jittered fix times, lost fixes,
GPS noise, spikes, duplicated rows and data gaps.  Every fix that was
scheduled is kept in a ground-truth table with its true position, the three
velocity components and how it was corrupted, so that a detector can be
scored against it.

:func:`simulate_release` runs a :class:`ReleaseScenario`;
:func:`simulate_many` builds and runs a randomised scenario of many drifters
for benchmarks; :func:`write_fixes_csv` and :func:`write_truth_csv` save the
two tables.  :func:`truth_events` lists the inertial, eddy and tidal events
a loop detector should find, and :func:`evaluation_release` builds the
multi-site, two-hemisphere release that loop detection is scored on
(``benchmarks/eval_loops.py``, :mod:`driftloop.evaluation`).

Method
------
Slab mixed layer (Pollard & Millard 1970; Gill 1982, from memory).  With Z = u + i v the
slab velocity (m/s) and T = tau_x + i tau_y the wind stress (Pa),

    dZ/dt + (r + i f) Z = T / (rho_0 H),        f = 2 Omega sin(phi),

where H is the mixed-layer depth, r the damping rate and rho_0 the
reference density of sea water.  With no forcing Z = Z_0 exp(-(r + i f) t):
a circle traversed clockwise in the northern hemisphere (f > 0) and
anticlockwise in the southern, period 2 pi / |f| and radius |Z| / |f| (AMS
Glossary of Meteorology, "inertial oscillation").  Over each step of length
h the forcing and f are held at their mid-step values and the linear
equation is integrated exactly (exponential integrator): with x = (r + i f) h,

    Z(t + h) = Z(t) e^{-x} + F h phi_1(x),
    integral of Z over the step = Z(t) h phi_1(x) + F h^2 phi_2(x),

phi_1(x) = (1 - e^{-x}) / x, phi_2(x) = (x - 1 + e^{-x}) / x^2, F = T/(rho_0 H).
Inside an eddy of relative vorticity zeta, f is replaced by f + w zeta/2,
w the trapping weight below (Kunze 1985, J. Phys. Oceanogr. 15, from
memory), so inertial motion there is super-inertial in a cyclone and
sub-inertial in an anticyclone.

Wind stress follows the bulk formula tau = rho_air C_D |U| U with a constant
drag coefficient C_D ~ 1.2e-3 (common practice, from memory).  The wind is a
light uniform background plus storms that pass eastward every few days,
switch on and off over a few hours (tanh ramps) and veer clockwise in the
northern hemisphere (anticlockwise in the southern) while they last.

The background current and the eddy swirl are advanced with the explicit
midpoint rule.  East and north displacements (m) become changes of latitude
and longitude through the WGS 84 meridional and prime-vertical radii of
curvature at the mid-step latitude, M = a (1 - e^2) / (1 - e^2 sin^2 phi)^1.5
and N = a / (1 - e^2 sin^2 phi)^0.5 (NGA.STND.0036 2014 for a and f);
longitudes are wrapped into [-180, 180) after every step.  The scheme is
second order in the step (default 600 s), far shorter than the days over
which the background current and the swirl change.  Fixes between steps are
reached by a partial step from the stored step state, so true positions and
velocities are exact outputs of the same integrator.  The model is not
meant for drifters within a degree of a pole or crossing the equator.

An eddy is a Gaussian vortex with angular velocity
omega(rho) = omega_0 exp(-rho^2 / (2 R^2)) at distance rho from its centre;
its relative vorticity is zeta = +-omega(rho) (2 - rho^2 / R^2) (positive
when it turns anticlockwise).  The trapped drifter is placed at distance
rho_0 from the centre when the swirl starts.  With the trapping weight w
(0 -> 1 -> 0, smoothstep ramps of ``ramp_h`` at both ends) its velocity is
(1 - w) u_b + w (c_e + swirl) + Z: the background current u_b gives way to
the eddy's own slow drift c_e (mesoscale eddies propagate westward at a few
cm/s, from memory).  The centre moves with the same velocity less the swirl
(the slab current is uniform on the eddy scale), so relative to the centre
the drifter turns on a circle of radius rho_0 (to a few tenths of a percent)
at angular velocity w omega(rho_0).

A tidal current u + i v = e^{i theta} (a cos psi + i b sin psi),
psi = omega t - phi, is the sum of an anticlockwise and a clockwise
rotary component, ((a + b)/2) e^{i(theta - phi)} e^{i omega t} +
((a - b)/2) e^{i(theta + phi)} e^{-i omega t} (Gonella 1972, from memory for
the notation); its displacement over a step is integrated exactly.  It is
uniform on the scale of the excursions, so it carries an eddy centre as it
carries the drifter.

References
----------
Pollard, R. T., and R. C. Millard, 1970: Comparison between observed and
simulated wind-generated inertial oscillations.  Deep-Sea Res., 17
(title and venue from memory).

Gill, A. E., 1982: Atmosphere-Ocean Dynamics.  Academic Press (from memory).

Kunze, E., 1985: Near-inertial wave propagation in geostrophic shear.
J. Phys. Oceanogr., 15 (venue from memory).

NGA.STND.0036, 2014: World Geodetic System 1984, v1.0.0.

AMS Glossary of Meteorology: "inertial oscillation".

Gonella, J., 1972: A rotary-component method for analysing meteorological
and oceanographic vector time series.  Deep-Sea Res., 19, 833-846.

Lilly, J. M., and J.-C. Gascard, 2006: Wavelet ridge diagnosis of
time-varying elliptical signals with application to an oceanic eddy.
Nonlin. Processes Geophys., 13, 467-483.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass, field
from pathlib import Path
from typing import NamedTuple

import numpy as np
import pandas as pd

from driftloop.constants import (
    AIR_DENSITY_KG_M3,
    SEAWATER_DENSITY_KG_M3,
    TIDAL_PERIODS_H,
    WGS84_A_M,
    WGS84_E2,
)
from driftloop.physics import coriolis_parameter

__all__ = [
    "EVALUATION_SITES",
    "FIELD_CSV_COLUMNS",
    "TIDE_TRUTH_COLUMNS",
    "TRUTH_COLUMNS",
    "TRUTH_EVENT_COLUMNS",
    "DuplicateFix",
    "EddyEncounter",
    "EvaluationRelease",
    "FixGap",
    "PositionSpike",
    "ReleaseScenario",
    "SyntheticRelease",
    "TidalCurrent",
    "coriolis_parameter",
    "evaluation_release",
    "simulate_many",
    "simulate_release",
    "truth_events",
    "write_fixes_csv",
    "write_truth_csv",
]

#: Column names of the field-style CSV written by :func:`write_fixes_csv`.
FIELD_CSV_COLUMNS = ("platform_id", "obs_time_utc", "latitude", "longitude")

#: Columns of :attr:`SyntheticRelease.truth`.
TRUTH_COLUMNS = (
    "drifter_id",
    "time",
    "fix_row",
    "corruption",
    "lat_true",
    "lon_true",
    "offset_m",
    "u_mean_m_s",
    "v_mean_m_s",
    "u_slab_m_s",
    "v_slab_m_s",
    "u_eddy_m_s",
    "v_eddy_m_s",
    "eddy_weight",
    "eddy_lat",
    "eddy_lon",
    "tau_east_pa",
    "tau_north_pa",
)

#: Extra columns of :attr:`SyntheticRelease.truth` when the scenario has tides:
#: the barotropic tidal current at the drifter (east, north; m/s).
TIDE_TRUTH_COLUMNS = ("u_tide_m_s", "v_tide_m_s")

#: Columns of the truth-event table returned by :func:`truth_events`.
TRUTH_EVENT_COLUMNS = (
    "drifter_id",
    "kind",
    "start",
    "end",
    "period_h",
    "radius_km",
    "speed_m_s",
    "spin",
    "lat",
    "lon",
    "cycles",
    "constituent",
    "ellipse_ratio",
    "orientation_deg",
)

_DAY_S = 86400.0
_HOUR_S = 3600.0
_DEG = math.pi / 180.0
_STRING = pd.StringDtype()


# ---------------------------------------------------------------------------
# scenario
# ---------------------------------------------------------------------------


@dataclass(frozen=True)
class EddyEncounter:
    """One drifter trapped in a mesoscale eddy for a while.

    Attributes
    ----------
    drifter_id : str
        The trapped drifter.
    start_day : float
        When the swirl starts to act, days after the scenario start.
    duration_days : float
        How long the drifter is influenced, ramps included (days).
    orbit_radius_km : float
        Distance of the drifter from the eddy centre at capture (km).
    orbit_period_days : float
        Time for one turn at ``orbit_radius_km`` (days).  Should be well
        above the inertial period.
    core_radius_km : float
        e-folding radius R of the Gaussian angular velocity (km).
    spin : str
        ``"cyclonic"`` (anticlockwise north, clockwise south) or
        ``"anticyclonic"``.
    centre_bearing_deg : float
        Bearing from the drifter to the eddy centre at capture, degrees
        clockwise from north.
    ramp_h : float
        Time over which the swirl switches on and off (h).
    propagation_east_m_s, propagation_north_m_s : float
        Drift of the eddy, which replaces the background current while the
        drifter is trapped (m/s); mesoscale eddies typically propagate
        westward at a few cm/s (from memory).
    shift_inertial_frequency : bool
        Whether the drifter's inertial frequency is shifted to f + zeta/2
        while trapped (Kunze 1985).
    """

    drifter_id: str
    start_day: float
    duration_days: float
    orbit_radius_km: float = 12.0
    orbit_period_days: float = 4.0
    core_radius_km: float = 30.0
    spin: str = "cyclonic"
    centre_bearing_deg: float = 90.0
    ramp_h: float = 12.0
    propagation_east_m_s: float = -0.02
    propagation_north_m_s: float = 0.0
    shift_inertial_frequency: bool = True


@dataclass(frozen=True)
class FixGap:
    """A stretch with no fixes from one drifter (e.g. a transmitter outage).

    Attributes
    ----------
    drifter_id : str
        The drifter.
    start_day : float
        Start of the gap, days after the scenario start.
    duration_h : float
        Length of the gap (h).
    """

    drifter_id: str
    start_day: float
    duration_h: float


@dataclass(frozen=True)
class PositionSpike:
    """A single fix reported far from the true position.

    The fix nearest to ``day`` that is reported is moved by
    ``displacement_km`` along ``bearing_deg`` (no GPS noise is added to it).

    Attributes
    ----------
    drifter_id : str
        The drifter.
    day : float
        Approximate time of the spike, days after the scenario start.
    displacement_km : float
        Geodesic distance of the reported from the true position (km).
    bearing_deg : float
        Direction of the displacement, degrees clockwise from north.
    """

    drifter_id: str
    day: float
    displacement_km: float
    bearing_deg: float = 45.0


@dataclass(frozen=True)
class DuplicateFix:
    """A fix whose record appears twice in a row in the file.

    Attributes
    ----------
    drifter_id : str
        The drifter.
    day : float
        Approximate time, days after the scenario start; the nearest
        reported fix that is not a spike is duplicated.
    """

    drifter_id: str
    day: float


@dataclass(frozen=True)
class TidalCurrent:
    """A barotropic tidal current felt by one drifter (one constituent).

    The current traces the ellipse

        u + i v = e^{i theta} (a cos psi + i b sin psi),   psi = omega t - phi,

    with a the semi-major speed, b = ``ellipse_ratio`` a the signed
    semi-minor speed, theta the orientation of the major axis and phi the
    phase; t is time after the scenario's ``start_utc``.  With b > 0 the
    current vector turns anticlockwise, with b < 0 clockwise (as in the
    ellipse parameters of Lilly & Gascard 2006).  omega = 2 pi / T with T
    the constituent period from :data:`driftloop.constants.TIDAL_PERIODS_H`
    (NOAA CO-OPS constituent speeds).  The current is uniform on the scale
    of a drifter's excursion (barotropic, far from the coast), so it also
    carries an eddy centre.  A drifter riding it alone traces an ellipse of
    semi-axes a / omega and |b| / omega.

    Attributes
    ----------
    drifter_id : str
        The drifter.
    constituent : str
        ``"M2"``, ``"S2"``, ``"K1"`` or ``"O1"``.
    amplitude_m_s : float
        Semi-major axis of the current ellipse, a (m/s).
    ellipse_ratio : float
        Semi-minor over semi-major axis, signed: > 0 anticlockwise,
        < 0 clockwise, 0 rectilinear; within [-1, 1].
    orientation_deg : float
        Direction of the major axis, degrees anticlockwise from east.
    phase_deg : float
        Phase phi (degrees): the current points along the major axis
        (direction ``orientation_deg``) at t = phi / omega.
    """

    drifter_id: str
    constituent: str = "M2"
    amplitude_m_s: float = 0.1
    ellipse_ratio: float = 0.0
    orientation_deg: float = 0.0
    phase_deg: float = 0.0

    @property
    def period_s(self) -> float:
        """Period of the constituent (s)."""
        return TIDAL_PERIODS_H[self.constituent] * _HOUR_S


def _tuple(values, kind=float) -> tuple:
    return tuple(kind(v) for v in values)


@dataclass(frozen=True)
class ReleaseScenario:
    """Everything that defines a synthetic release, with units in the names.

    Times are given relative to ``start_utc``.  Random elements (storm
    times, strengths and directions, fix jitter, lost fixes, GPS noise) are
    drawn from the seed given to :func:`simulate_release`; all else is fixed
    here.

    Attributes
    ----------
    name : str
        Name of the release.
    drifter_ids : tuple of str
        Drifter identifiers.
    deploy_lat_deg, deploy_lon_deg : tuple of float
        Deployment positions, degrees north and east, one per drifter.
    deploy_after_start_h : tuple of float or None
        Deployment time of each drifter after ``start_utc`` (h), rounded to
        the integration step; ``None`` deploys all at the start.
    start_utc : str
        ISO 8601 UTC time of the start of the release.
    duration_days : float
        Length of the record from ``start_utc`` (days).
    spinup_days : float
        Time the ocean is forced before ``start_utc`` so that inertial
        motion is already present at deployment (days).
    step_s : float
        Integration step (s), at most 3600 s.  The slab equation is
        integrated exactly at any step; the background current and the
        swirl are second-order accurate, so 600 s (the default) is far
        finer than their time scales of days.
    drift_east_m_s, drift_north_m_s : float
        Uniform part of the background current (m/s).
    meander_speed_m_s : float
        Peak speed of the meander (m/s).
    meander_wavelength_km : float
        East-west wavelength of the meander (km).
    meander_width_km : float
        North-south wavelength of the meander cells (km).
    meander_phase_speed_m_s : float
        Eastward phase speed of the meander pattern (m/s).
    reference_lat_deg, reference_lon_deg : float or None
        Origin of the meander and storm coordinates; ``None`` takes the
        mean deployment position.
    mixed_layer_depth_m : float
        Slab depth H (m).
    damping_time_days : float
        1/r, e-folding time of free inertial motion (days); ``math.inf``
        for none.
    initial_slab_speed_m_s : float
        Slab velocity at the start of the integration (m/s).
    initial_slab_toward_deg : float
        Its direction, degrees clockwise from north.
    drag_coefficient : float
        Bulk drag coefficient C_D (dimensionless).
    background_wind_m_s : float
        Speed of the steady background wind (m/s).
    background_wind_toward_deg : float
        Direction the background wind blows toward, degrees clockwise from
        north.
    storm_mean_interval_days : float
        Mean time between storm onsets (days); ``math.inf`` for no storms.
    storm_duration_h : tuple of float
        Range (min, max) of storm durations (h).
    storm_peak_wind_m_s : tuple of float
        Range (min, max) of storm peak wind speeds (m/s).
    storm_ramp_h : float
        Time scale over which a storm switches on and off (h).
    storm_veer_deg : float
        Turn of the storm wind over its life (degrees, clockwise in the
        northern hemisphere).
    storm_translation_m_s : float
        Eastward speed of storm passage (m/s).
    eddies : tuple of EddyEncounter
        Eddy trapping episodes, at most one per drifter.
    fix_interval_h : float
        Nominal time between fixes (h).
    fix_jitter_min : float
        Standard deviation of the fix-time jitter (minutes); clipped at
        three standard deviations and at 0.4 of the interval.
    fix_loss_probability : float
        Probability that a scheduled fix is lost.
    gps_noise_m : float
        Standard deviation of GPS noise per horizontal component (m).
    gaps, spikes, duplicates : tuple
        Corruptions: :class:`FixGap`, :class:`PositionSpike`,
        :class:`DuplicateFix`.
    tides : tuple of TidalCurrent
        Barotropic tidal currents, any number per drifter.  With tides the
        truth table has the extra columns :data:`TIDE_TRUTH_COLUMNS`.
    quiet_drifters : tuple of str
        Drifters under a calm patch: the wind (background and storms) does
        not reach them and their slab velocity starts at zero, so they move
        with the background current (and any eddy or tide) alone.  Their
        truth ``tau_*`` and ``u_/v_slab_m_s`` are zero.
    """

    name: str
    drifter_ids: tuple[str, ...]
    deploy_lat_deg: tuple[float, ...]
    deploy_lon_deg: tuple[float, ...]
    deploy_after_start_h: tuple[float, ...] | None = None
    start_utc: str = "2024-04-02T00:00:00Z"
    duration_days: float = 45.0
    spinup_days: float = 5.0
    step_s: float = 600.0
    drift_east_m_s: float = 0.07
    drift_north_m_s: float = 0.02
    meander_speed_m_s: float = 0.10
    meander_wavelength_km: float = 180.0
    meander_width_km: float = 140.0
    meander_phase_speed_m_s: float = 0.03
    reference_lat_deg: float | None = None
    reference_lon_deg: float | None = None
    mixed_layer_depth_m: float = 45.0
    damping_time_days: float = 4.0
    initial_slab_speed_m_s: float = 0.0
    initial_slab_toward_deg: float = 0.0
    drag_coefficient: float = 1.2e-3
    background_wind_m_s: float = 5.0
    background_wind_toward_deg: float = 60.0
    storm_mean_interval_days: float = 4.0
    storm_duration_h: tuple[float, float] = (12.0, 36.0)
    storm_peak_wind_m_s: tuple[float, float] = (12.0, 20.0)
    storm_ramp_h: float = 3.0
    storm_veer_deg: float = 120.0
    storm_translation_m_s: float = 12.0
    eddies: tuple[EddyEncounter, ...] = ()
    fix_interval_h: float = 1.0
    fix_jitter_min: float = 2.0
    fix_loss_probability: float = 0.02
    gps_noise_m: float = 8.0
    gaps: tuple[FixGap, ...] = ()
    spikes: tuple[PositionSpike, ...] = ()
    duplicates: tuple[DuplicateFix, ...] = ()
    tides: tuple[TidalCurrent, ...] = ()
    quiet_drifters: tuple[str, ...] = ()

    def __post_init__(self) -> None:
        set_ = object.__setattr__
        set_(self, "drifter_ids", _tuple(self.drifter_ids, str))
        set_(self, "deploy_lat_deg", _tuple(self.deploy_lat_deg))
        set_(self, "deploy_lon_deg", _tuple(self.deploy_lon_deg))
        if self.deploy_after_start_h is not None:
            set_(self, "deploy_after_start_h", _tuple(self.deploy_after_start_h))
        for name in ("eddies", "gaps", "spikes", "duplicates", "tides"):
            set_(self, name, tuple(getattr(self, name)))
        set_(self, "quiet_drifters", _tuple(self.quiet_drifters, str))
        set_(self, "storm_duration_h", _tuple(self.storm_duration_h))
        set_(self, "storm_peak_wind_m_s", _tuple(self.storm_peak_wind_m_s))
        self._validate()

    def _validate(self) -> None:
        n = len(self.drifter_ids)
        if n == 0:
            raise ValueError("a release needs at least one drifter")
        if len(set(self.drifter_ids)) != n:
            raise ValueError("drifter_ids must be unique")
        lengths = {
            "deploy_lat_deg": len(self.deploy_lat_deg),
            "deploy_lon_deg": len(self.deploy_lon_deg),
        }
        if self.deploy_after_start_h is not None:
            lengths["deploy_after_start_h"] = len(self.deploy_after_start_h)
        for key, length in lengths.items():
            if length != n:
                raise ValueError(f"{key} has {length} values for {n} drifters")
        lat = np.asarray(self.deploy_lat_deg)
        if np.any(~np.isfinite(lat)) or np.any(np.abs(lat) > 89.0) or np.any(lat == 0.0):
            raise ValueError("deploy_lat_deg must be finite, within 89 degrees of the equator "
                             "and not on it")
        if np.any(~np.isfinite(self.deploy_lon_deg)):
            raise ValueError("deploy_lon_deg must be finite")
        if self.deploy_after_start_h is not None and min(self.deploy_after_start_h) < 0:
            raise ValueError("deploy_after_start_h must be >= 0")
        if not 0 < self.step_s <= 3600.0:
            raise ValueError(f"step_s must be in (0, 3600] s, got {self.step_s}")
        positive = ("duration_days", "mixed_layer_depth_m", "damping_time_days",
                    "fix_interval_h", "storm_ramp_h", "storm_mean_interval_days",
                    "storm_translation_m_s")
        for key in positive:
            if not getattr(self, key) > 0:
                raise ValueError(f"{key} must be > 0, got {getattr(self, key)}")
        non_negative = ("spinup_days", "fix_jitter_min", "gps_noise_m", "drag_coefficient",
                        "background_wind_m_s", "initial_slab_speed_m_s", "meander_speed_m_s")
        for key in non_negative:
            if not getattr(self, key) >= 0:
                raise ValueError(f"{key} must be >= 0, got {getattr(self, key)}")
        if not 0 <= self.fix_loss_probability < 1:
            raise ValueError("fix_loss_probability must be in [0, 1)")
        known = set(self.drifter_ids)
        trapped = set()
        for spec in (*self.eddies, *self.gaps, *self.spikes, *self.duplicates, *self.tides):
            if spec.drifter_id not in known:
                raise ValueError(f"{type(spec).__name__} names unknown drifter "
                                 f"{spec.drifter_id!r}")
        unknown = sorted(set(self.quiet_drifters) - known)
        if unknown:
            raise ValueError(f"quiet_drifters names unknown drifter(s) {unknown}")
        for tide in self.tides:
            if tide.constituent not in TIDAL_PERIODS_H:
                raise ValueError(f"tide of {tide.drifter_id!r}: constituent must be one of "
                                 f"{sorted(TIDAL_PERIODS_H)}, got {tide.constituent!r}")
            if not (tide.amplitude_m_s >= 0 and abs(tide.ellipse_ratio) <= 1 and
                    math.isfinite(tide.orientation_deg) and math.isfinite(tide.phase_deg)):
                raise ValueError(f"tide of {tide.drifter_id!r}: need amplitude_m_s >= 0, "
                                 "|ellipse_ratio| <= 1 and finite angles")
        for eddy in self.eddies:
            if eddy.drifter_id in trapped:
                raise ValueError(f"drifter {eddy.drifter_id!r} has more than one eddy")
            trapped.add(eddy.drifter_id)
            if eddy.spin not in ("cyclonic", "anticyclonic"):
                raise ValueError(f"eddy spin must be 'cyclonic' or 'anticyclonic', "
                                 f"got {eddy.spin!r}")
            if not (eddy.duration_days * 24.0 >= 2.0 * eddy.ramp_h > 0 and
                    eddy.orbit_radius_km > 0 and eddy.orbit_period_days > 0 and
                    eddy.core_radius_km > 0):
                raise ValueError(f"eddy of {eddy.drifter_id!r}: radii, period and ramp must "
                                 "be > 0 and the duration at least two ramps")

    @property
    def drifter_count(self) -> int:
        """Number of drifters."""
        return len(self.drifter_ids)


@dataclass(frozen=True, eq=False)
class SyntheticRelease:
    """What :func:`simulate_release` returns.

    Attributes
    ----------
    scenario : ReleaseScenario
        The scenario that was run.
    seed : int
        The seed of the random draws.
    fixes : pandas.DataFrame
        What a field file would hold: columns ``drifter_id`` (string),
        ``time`` (datetime64[ns, UTC], whole seconds), ``lat``, ``lon``
        (degrees, rounded to 6 decimals as written to CSV), one row per
        record, drifters in scenario order, each in time order with any
        duplicated record right after its original.
    truth : pandas.DataFrame
        One row per scheduled fix plus one per duplicated record, in the
        order of ``fixes`` with lost fixes in their time place; columns
        :data:`TRUTH_COLUMNS`:

        - ``fix_row``: 0-based row in ``fixes`` (and data row in the CSV),
          -1 for a fix that is not in the file;
        - ``corruption``: ``"none"``, ``"missing"`` (randomly lost),
          ``"gap"`` (in a :class:`FixGap`), ``"spike"`` or ``"duplicate"``
          (the repeated record);
        - ``lat_true``, ``lon_true``: true position (degrees);
        - ``offset_m``: distance of the reported from the true position
          (m, geodesic for spikes), NaN when not reported;
        - ``u_/v_mean_m_s``: background current carrying the drifter
          (while trapped, blended with the eddy's own drift);
          ``u_/v_slab_m_s``: slab mixed-layer velocity (inertial
          oscillation plus directly wind-driven drift);
          ``u_/v_eddy_m_s``: eddy swirl; east and north components (m/s),
          summing to the drifter velocity (with the tide, if any);
        - ``eddy_weight``: 0 outside an eddy, 1 fully trapped;
        - ``eddy_lat``, ``eddy_lon``: eddy centre while the weight is > 0;
        - ``tau_east_pa``, ``tau_north_pa``: wind stress (Pa);
        - only when the scenario has tides, :data:`TIDE_TRUTH_COLUMNS`
          ``u_/v_tide_m_s``: the tidal current (m/s).
    storms : pandas.DataFrame
        One row per storm: ``onset`` (UTC, at the reference longitude),
        ``duration_h``, ``peak_wind_m_s``, ``toward_start_deg``,
        ``toward_end_deg``.
    """

    scenario: ReleaseScenario
    seed: int
    fixes: pd.DataFrame = field(repr=False)
    truth: pd.DataFrame = field(repr=False)
    storms: pd.DataFrame = field(repr=False)


# ---------------------------------------------------------------------------
# geometry and physics helpers
# ---------------------------------------------------------------------------


def _radii(sin2: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """WGS 84 meridional (M) and prime-vertical (N) radii of curvature (m) from sin^2(lat)."""
    w = 1.0 - WGS84_E2 * sin2
    return WGS84_A_M * (1.0 - WGS84_E2) / (w * np.sqrt(w)), WGS84_A_M / np.sqrt(w)


def _move(lat: np.ndarray, lon: np.ndarray, disp: np.ndarray,
          m0: np.ndarray | None = None) -> tuple[np.ndarray, np.ndarray]:
    """Move points by complex displacements east + i north (m) on WGS 84.

    The radii of curvature are taken at the mid-step latitude (second-order
    accurate); ``m0`` is M at ``lat`` if already known.
    """
    if m0 is None:
        m0, _ = _radii(np.sin(lat * _DEG) ** 2)
    lat_mid = lat + 0.5 * disp.imag / m0 / _DEG
    s = np.sin(lat_mid * _DEG)
    m, n = _radii(s * s)
    lat_new = lat + disp.imag / m / _DEG
    lon_new = lon + disp.real / (n * np.cos(lat_mid * _DEG)) / _DEG
    return lat_new, _wrap(lon_new)


def _wrap(lon: np.ndarray) -> np.ndarray:
    """Wrap any longitude into [-180, 180)."""
    wrapped = lon - 360.0 * np.floor((lon + 180.0) / 360.0)
    return np.where(wrapped >= 180.0, wrapped - 360.0, wrapped)


def _dlon(delta: np.ndarray) -> np.ndarray:
    """Longitude difference (degrees) reduced to [-180, 180]."""
    return delta - 360.0 * np.rint(delta / 360.0)


def _offset(lat0, lon0, lat, lon) -> np.ndarray:
    """Local east + i north offset (m) of (lat, lon) from (lat0, lon0), for short distances."""
    mid = 0.5 * (lat0 + lat)
    m, n = _radii(np.sin(mid * _DEG) ** 2)
    dx = _dlon(lon - lon0) * _DEG * n * np.cos(mid * _DEG)
    dy = (lat - lat0) * _DEG * m
    return dx + 1j * dy


def _phi12(x: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """e^-x, phi_1(x) = (1 - e^-x)/x and phi_2(x) = (x - 1 + e^-x)/x^2 for complex x."""
    x = np.asarray(x, dtype=complex)
    e = np.exp(-x)
    small = np.abs(x) < 1e-4
    if not small.any():
        return e, (1.0 - e) / x, (x - 1.0 + e) / (x * x)
    xs = np.where(small, 1.0, x)
    phi1 = np.where(small, 1.0 - x / 2.0 + x * x / 6.0, (1.0 - e) / xs)
    phi2 = np.where(small, 0.5 - x / 6.0 + x * x / 24.0, (xs - 1.0 + e) / (xs * xs))
    return e, phi1, phi2


def _compass(speed, toward_deg) -> np.ndarray:
    """Complex east + i north vector of a speed toward a compass bearing."""
    return 1j * speed * np.exp(-1j * _DEG * np.asarray(toward_deg, dtype=float))


def _pick(values, idx):
    """``values[idx]`` for an array, ``values`` for a scalar."""
    return values[idx] if np.ndim(values) else values


class _Physics(NamedTuple):
    """Scenario-wide parameters in the units the integrator uses."""

    r: float  # damping rate (1/s)
    rho_h: float  # rho_0 H (kg/m2)
    stress_factor: float  # rho_air C_D (kg/m3)
    drift: complex  # uniform current (m/s)
    meander_a: float  # streamfunction amplitude (m2/s)
    meander_k: float  # east-west wavenumber (rad/m)
    meander_l: float  # north-south wavenumber (rad/m)
    meander_c: float  # phase speed (m/s)
    ref_lat: float
    ref_lon: float
    ref_mx: float  # metres per degree of longitude at the reference
    ref_my: float  # metres per degree of latitude at the reference
    wind_bg: complex  # background wind (m/s)
    storm_onset: np.ndarray  # (s), at the reference longitude
    storm_duration: np.ndarray  # (s)
    storm_peak: np.ndarray  # (m/s)
    storm_toward: np.ndarray  # (deg)
    storm_veer: float  # signed turn over a storm (deg)
    storm_ramp: float  # (s)
    storm_speed: float  # (m/s)


class _Eddies(NamedTuple):
    """Eddy parameters of the drifters at positions ``idx`` of the state arrays."""

    idx: np.ndarray  # positions in the state arrays
    start: np.ndarray  # (s)
    end: np.ndarray  # (s)
    ramp: np.ndarray  # (s)
    omega0: np.ndarray  # (rad/s), signed: > 0 anticlockwise
    r2: np.ndarray  # core radius squared (m2)
    prop: np.ndarray  # complex (m/s)
    shift: np.ndarray  # 1.0 to shift f by zeta/2, else 0.0

    def take(self, sel: np.ndarray) -> _Eddies:
        return _Eddies(*(a[sel] for a in self))

    def for_drifters(self, row_of: np.ndarray, drifters: np.ndarray) -> _Eddies:
        """Return the eddies of a list of drifters (``row_of`` maps drifter -> row)."""
        rows = row_of[drifters]
        pos = np.flatnonzero(rows >= 0)
        sub = self.take(rows[pos])
        return sub._replace(idx=pos)


def _local_x(ph: _Physics, lon) -> np.ndarray:
    """East coordinate (m) from the reference point (field definition, not geodesy)."""
    return _dlon(lon - ph.ref_lon) * ph.ref_mx


def _background(ph: _Physics, t, lat, lon, x=None) -> np.ndarray:
    """Background current (complex m/s): uniform drift + travelling meander.

    Streamfunction psi = A sin(k (x - c t)) cos(l y) in east and north
    coordinates x, y (m) from the reference point; u = -psi_y, v = psi_x,
    so the meander is non-divergent.  ``x`` may be passed if known.
    """
    if x is None:
        x = _local_x(ph, lon)
    along = np.exp(1j * ph.meander_k * (x - ph.meander_c * t))
    across = np.exp(1j * ph.meander_l * (lat - ph.ref_lat) * ph.ref_my)
    u = ph.meander_a * ph.meander_l * along.imag * across.imag
    v = ph.meander_a * ph.meander_k * along.real * across.real
    return ph.drift + u + 1j * v


def _stress(ph: _Physics, window: tuple[float, float], t, lon, x=None) -> np.ndarray:
    """Wind stress (complex Pa) from the bulk formula tau = rho_air C_D |U| U.

    ``window`` bounds the times in ``t``; it selects the storms that can
    matter (tanh ramps are within 1e-8 of their limits 10 ramp times away).
    """
    if x is None:
        x = _local_x(ph, lon)
    wind = np.full(np.broadcast(t, lon).shape, ph.wind_bg, dtype=complex)
    if ph.storm_onset.size == 0:
        return ph.stress_factor * np.abs(wind) * wind
    margin = 10.0 * ph.storm_ramp
    lead = float(np.min(x)) / ph.storm_speed
    lag = float(np.max(x)) / ph.storm_speed
    active = np.flatnonzero(
        (window[1] - ph.storm_onset > lead - margin)
        & (window[0] - ph.storm_onset < ph.storm_duration + lag + margin)
    )
    for k in active:
        local = t - ph.storm_onset[k] - x / ph.storm_speed
        dur = ph.storm_duration[k]
        envelope = 0.5 * (np.tanh(local / ph.storm_ramp) - np.tanh((local - dur) / ph.storm_ramp))
        toward = ph.storm_toward[k] + ph.storm_veer * np.minimum(np.maximum(local / dur, 0.0),
                                                                 1.0)
        wind = wind + _compass(ph.storm_peak[k] * envelope, toward)
    return ph.stress_factor * np.abs(wind) * wind


def _trapped(ed: _Eddies, t, window: tuple[float, float]):
    """Return the eddies acting at time ``t`` and their weights, or ``None``.

    The weight is 0 outside an eddy, 1 when fully trapped, with smoothstep
    ramps of length ``ramp`` at both ends.
    """
    if ed.idx.size == 0 or window[1] <= ed.start.min() or window[0] >= ed.end.max():
        return None
    tt = _pick(t, ed.idx)
    a = np.minimum(np.maximum((tt - ed.start) / ed.ramp, 0.0), 1.0)
    b = np.minimum(np.maximum((ed.end - tt) / ed.ramp, 0.0), 1.0)
    s = np.minimum(a, b)
    w = s * s * (3.0 - 2.0 * s)
    act = np.flatnonzero(w > 0.0)
    if act.size == 0:
        return None
    return ed.take(act), w[act]


def _swirl(ed: _Eddies, off: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Swirl velocity (complex m/s) and relative vorticity (1/s) at offset ``off`` (m)."""
    q = (off.real ** 2 + off.imag ** 2) / ed.r2
    omega = ed.omega0 * np.exp(-0.5 * q)
    return 1j * omega * off, omega * (2.0 - q)


class _Extras(NamedTuple):
    """Tides and wind factors at the positions of the state arrays."""

    n: int  # number of positions
    tide_pos: np.ndarray  # position of each tide term
    tide_omega: np.ndarray  # (rad/s)
    tide_ap: np.ndarray  # complex coefficient of e^{+i omega t} (m/s)
    tide_am: np.ndarray  # complex coefficient of e^{-i omega t} (m/s)
    wind: np.ndarray | None  # 1.0 where the wind acts, 0.0 for quiet drifters

    @property
    def has_tides(self) -> bool:
        return self.tide_pos.size > 0


def _extra_spec(sc: ReleaseScenario) -> dict[str, np.ndarray] | None:
    """Per-drifter tide terms and quiet flags of a scenario; ``None`` if it has neither."""
    if not sc.tides and not sc.quiet_drifters:
        return None
    index = {d: i for i, d in enumerate(sc.drifter_ids)}
    a = np.array([t.amplitude_m_s for t in sc.tides], dtype=float)
    b = a * np.array([t.ellipse_ratio for t in sc.tides], dtype=float)
    theta = np.array([t.orientation_deg for t in sc.tides], dtype=float) * _DEG
    phi = np.array([t.phase_deg for t in sc.tides], dtype=float) * _DEG
    calm = np.zeros(sc.drifter_count, dtype=bool)
    calm[[index[q] for q in sc.quiet_drifters]] = True
    return {
        "drifter": np.array([index[t.drifter_id] for t in sc.tides], dtype=np.int64),
        "omega": np.array([2.0 * math.pi / t.period_s for t in sc.tides], dtype=float),
        # e^{i theta} (a cos psi + i b sin psi) = ap e^{i omega t} + am e^{-i omega t}
        "ap": 0.5 * (a + b) * np.exp(1j * (theta - phi)),
        "am": 0.5 * (a - b) * np.exp(1j * (theta + phi)),
        "calm": calm,
    }


def _extras_at(spec: dict[str, np.ndarray] | None, drifters: np.ndarray) -> _Extras | None:
    """Tides and wind factors for state arrays holding the given drifters."""
    if spec is None:
        return None
    pos, k = np.nonzero(drifters[:, None] == spec["drifter"][None, :])
    wind = None
    if spec["calm"].any():
        wind = np.where(spec["calm"][drifters], 0.0, 1.0)
    return _Extras(int(drifters.size), pos, spec["omega"][k], spec["ap"][k], spec["am"][k],
                   wind)


def _sum_terms(ex: _Extras, terms: np.ndarray) -> np.ndarray:
    """Add complex tide terms into their positions."""
    re = np.bincount(ex.tide_pos, weights=terms.real, minlength=ex.n)
    im = np.bincount(ex.tide_pos, weights=terms.imag, minlength=ex.n)
    return re + 1j * im


def _tide_velocity(ex: _Extras, t) -> np.ndarray:
    """Tidal current (complex m/s) at each position at time ``t`` (s after the start)."""
    e = np.exp(1j * ex.tide_omega * _pick(t, ex.tide_pos))
    return _sum_terms(ex, ex.tide_ap * e + ex.tide_am * np.conj(e))


def _tide_step(ex: _Extras, t, h) -> tuple[np.ndarray, np.ndarray]:
    """Tidal current at ``t`` (complex m/s) and its exact integral over ``[t, t + h]`` (m)."""
    t0 = _pick(t, ex.tide_pos)
    iw = 1j * ex.tide_omega
    e0 = np.exp(iw * t0)
    e1 = np.exp(iw * (t0 + _pick(h, ex.tide_pos)))
    vel = ex.tide_ap * e0 + ex.tide_am * np.conj(e0)
    disp = (ex.tide_ap * (e1 - e0) - ex.tide_am * (np.conj(e1) - np.conj(e0))) / iw
    return _sum_terms(ex, vel), _sum_terms(ex, disp)


def _advance(ph, deploy_t, ed, window, t, h, lat, lon, z, clat, clon, extra=None):
    """Advance the drifters from time ``t`` by ``h`` seconds (scalars or per drifter).

    Returns the new latitude, longitude, slab velocity and eddy-centre
    position (the centre arrays are changed only where an eddy acts).
    Drifters not yet deployed keep their position.  Forcing, f and the
    advecting velocity are evaluated at mid-step (predicted) positions;
    the tidal current, if any, is integrated exactly over the step.
    """
    tm = t + 0.5 * h
    moving = deploy_t <= t
    moving = 1.0 if moving.all() else moving.astype(float)
    m, n = _radii(np.sin(lat * _DEG) ** 2)
    trapped = _trapped(ed, tm, window)
    tides = extra is not None and extra.has_tides
    if tides:
        tide0, tide_disp = _tide_step(extra, t, h)
    # predictor: half a step with the start-of-step velocity
    vel0 = _background(ph, t, lat, lon)
    if trapped is not None:
        e, w = trapped
        tr = e.idx
        h_tr = _pick(h, tr)
        swirl0, _ = _swirl(e, _offset(clat[tr], clon[tr], lat[tr], lon[tr]))
        vel0[tr] = (1.0 - w) * vel0[tr] + w * (e.prop + swirl0)
        # the centre moves with the drifter less the swirl: a circular orbit
        drive0 = vel0[tr] - w * swirl0 + z[tr]
        if tides:
            drive0 = drive0 + tide0[tr]
        clat_h, clon_h = _move(clat[tr], clon[tr], 0.5 * h_tr * drive0)
    half = 0.5 * h * moving * ((vel0 + z + tide0) if tides else (vel0 + z))
    lat_h = lat + half.imag / m / _DEG
    lon_h = lon + half.real / (n * np.cos(lat * _DEG)) / _DEG
    x_h = _local_x(ph, lon_h)
    f = coriolis_parameter(lat_h)
    vel = _background(ph, tm, lat_h, lon_h, x_h)
    if trapped is not None:
        swirl, zeta = _swirl(e, _offset(clat_h, clon_h, lat_h[tr], lon_h[tr]))
        vel[tr] = (1.0 - w) * vel[tr] + w * (e.prop + swirl)
        f[tr] += e.shift * w * 0.5 * zeta
    # slab mixed layer: exact over the step for mid-step forcing and f
    forcing = _stress(ph, window, tm, lon_h, x_h) / ph.rho_h
    if extra is not None and extra.wind is not None:
        forcing = forcing * extra.wind
    x = (ph.r + 1j * f) * h
    ex, phi1, phi2 = _phi12(x)
    z_new = z * ex + forcing * h * phi1
    slab_disp = z * h * phi1 + forcing * h * h * phi2
    if trapped is not None:
        clat, clon = clat.copy(), clon.copy()
        centre_disp = (vel[tr] - w * swirl) * h_tr + slab_disp[tr]
        if tides:
            centre_disp = centre_disp + tide_disp[tr]
        clat[tr], clon[tr] = _move(clat[tr], clon[tr], centre_disp)
    disp = vel * h + slab_disp
    if tides:
        disp = disp + tide_disp
    lat_new, lon_new = _move(lat, lon, moving * disp, m)
    return lat_new, lon_new, z_new, clat, clon


def _components(ph, ed, window, t, lat, lon, z, clat, clon, extra=None):
    """Velocity components (complex m/s), eddy weight, stress and tide at a time and place.

    The tide is ``None`` when there is none.
    """
    mean = _background(ph, t, lat, lon)
    eddy = np.zeros_like(mean)
    weight = np.zeros(mean.shape)
    trapped = _trapped(ed, t, window)
    if trapped is not None:
        e, w = trapped
        tr = e.idx
        swirl, _ = _swirl(e, _offset(clat[tr], clon[tr], lat[tr], lon[tr]))
        mean[tr] = (1.0 - w) * mean[tr] + w * e.prop
        eddy[tr] = w * swirl
        weight[tr] = w
    tau = _stress(ph, window, t, lon)
    tide = None
    if extra is not None:
        if extra.wind is not None:
            tau = tau * extra.wind
        if extra.has_tides:
            tide = _tide_velocity(extra, t)
    return mean, z, eddy, weight, tau, tide


# ---------------------------------------------------------------------------
# building the run
# ---------------------------------------------------------------------------


def _circular_mean_deg(values: Sequence[float]) -> float:
    a = np.asarray(values, dtype=float) * _DEG
    return float(_wrap(np.array([math.atan2(np.sin(a).mean(), np.cos(a).mean()) / _DEG]))[0])


def _draw_storms(sc: ReleaseScenario, rng: np.random.Generator, t_begin: float,
                 t_end: float) -> dict[str, np.ndarray]:
    """Storm onsets a few days apart (gamma-distributed intervals) and their properties."""
    onset, duration, peak, toward = [], [], [], []
    if math.isfinite(sc.storm_mean_interval_days):
        mean_s = sc.storm_mean_interval_days * _DAY_S
        t = t_begin - 1.0 * _DAY_S + rng.uniform(0.0, mean_s)
        while t < t_end:
            dur = rng.uniform(*sc.storm_duration_h) * _HOUR_S
            onset.append(t)
            duration.append(dur)
            peak.append(rng.uniform(*sc.storm_peak_wind_m_s))
            toward.append(rng.uniform(0.0, 360.0))
            gap = rng.gamma(4.0, mean_s / 4.0)
            t += max(gap, dur + 12.0 * _HOUR_S)
    return {
        "onset": np.asarray(onset, dtype=float),
        "duration": np.asarray(duration, dtype=float),
        "peak": np.asarray(peak, dtype=float),
        "toward": np.asarray(toward, dtype=float),
    }


def _physics(sc: ReleaseScenario, storms: dict[str, np.ndarray], ref_lat: float,
             ref_lon: float) -> _Physics:
    m, n = _radii(np.sin(np.array(ref_lat) * _DEG) ** 2)
    k = 2.0 * math.pi / (sc.meander_wavelength_km * 1e3)
    ell = 2.0 * math.pi / (sc.meander_width_km * 1e3)
    hemisphere = 1.0 if ref_lat > 0 else -1.0
    return _Physics(
        r=0.0 if math.isinf(sc.damping_time_days) else 1.0 / (sc.damping_time_days * _DAY_S),
        rho_h=SEAWATER_DENSITY_KG_M3 * sc.mixed_layer_depth_m,
        stress_factor=AIR_DENSITY_KG_M3 * sc.drag_coefficient,
        drift=complex(sc.drift_east_m_s, sc.drift_north_m_s),
        meander_a=sc.meander_speed_m_s / max(k, ell),
        meander_k=k,
        meander_l=ell,
        meander_c=sc.meander_phase_speed_m_s,
        ref_lat=ref_lat,
        ref_lon=ref_lon,
        ref_mx=float(n * math.cos(ref_lat * _DEG) * _DEG),
        ref_my=float(m * _DEG),
        wind_bg=complex(_compass(sc.background_wind_m_s, sc.background_wind_toward_deg)),
        storm_onset=storms["onset"],
        storm_duration=storms["duration"],
        storm_peak=storms["peak"],
        storm_toward=storms["toward"],
        storm_veer=hemisphere * sc.storm_veer_deg,
        storm_ramp=sc.storm_ramp_h * _HOUR_S,
        storm_speed=sc.storm_translation_m_s,
    )


def _eddy_params(sc: ReleaseScenario, deploy_t: np.ndarray, step: float,
                 t_begin: float) -> tuple[_Eddies, np.ndarray, np.ndarray]:
    """Eddy parameters, the row of each drifter (-1 if none) and the capture offsets."""
    index = {d: i for i, d in enumerate(sc.drifter_ids)}
    row_of = np.full(sc.drifter_count, -1, dtype=np.int64)
    cols = {key: [] for key in _Eddies._fields}
    capture = []
    for row, e in enumerate(sc.eddies):
        i = index[e.drifter_id]
        row_of[i] = row
        t0 = t_begin + round((e.start_day * _DAY_S - t_begin) / step) * step
        start = max(t0, float(deploy_t[i]))
        rr = e.orbit_radius_km * 1e3
        core = e.core_radius_km * 1e3
        turn = 1.0 if e.spin == "cyclonic" else -1.0
        hemisphere = 1.0 if sc.deploy_lat_deg[i] > 0 else -1.0
        omega_orbit = 2.0 * math.pi / (e.orbit_period_days * _DAY_S)
        cols["idx"].append(i)
        cols["start"].append(start)
        cols["end"].append(start + e.duration_days * _DAY_S)
        cols["ramp"].append(e.ramp_h * _HOUR_S)
        cols["omega0"].append(turn * hemisphere * omega_orbit * math.exp(0.5 * (rr / core) ** 2))
        cols["r2"].append(core * core)
        cols["prop"].append(complex(e.propagation_east_m_s, e.propagation_north_m_s))
        cols["shift"].append(1.0 if e.shift_inertial_frequency else 0.0)
        capture.append(complex(_compass(rr, e.centre_bearing_deg)))
    dtypes = {"idx": np.int64, "prop": complex}
    eddies = _Eddies(**{key: np.asarray(v, dtype=dtypes.get(key, float))
                        for key, v in cols.items()})
    return eddies, row_of, np.asarray(capture, dtype=complex)


def _schedule(sc: ReleaseScenario, rng: np.random.Generator, deploy_t: np.ndarray,
              t_end: float) -> tuple[np.ndarray, np.ndarray]:
    """Scheduled fix times: drifter index and time (s, whole seconds), drifter-major."""
    interval = sc.fix_interval_h * _HOUR_S
    m = int(math.floor((t_end - float(deploy_t.min())) / interval)) + 1
    nominal = deploy_t[:, None] + interval * np.arange(m)[None, :]
    sd = sc.fix_jitter_min * 60.0
    limit = min(3.0 * sd, 0.4 * interval)
    jitter = np.clip(rng.normal(0.0, 1.0, nominal.shape) * sd, -limit, limit)
    jitter[:, 0] = np.abs(jitter[:, 0])
    times = np.round(nominal + jitter)
    valid = times <= t_end
    drifter = np.broadcast_to(np.arange(sc.drifter_count)[:, None], times.shape)
    return drifter[valid], times[valid]


def _run(sc: ReleaseScenario, seed: int, record_truth: bool):
    """Integrate the release and sample it at the scheduled fix times."""
    rng = np.random.default_rng(seed)
    step = float(sc.step_s)
    t_begin = -sc.spinup_days * _DAY_S
    t_end = sc.duration_days * _DAY_S
    n = sc.drifter_count
    ref_lat = sc.reference_lat_deg
    if ref_lat is None:
        ref_lat = float(np.mean(sc.deploy_lat_deg))
    ref_lon = sc.reference_lon_deg
    if ref_lon is None:
        ref_lon = _circular_mean_deg(sc.deploy_lon_deg)
    storms = _draw_storms(sc, rng, t_begin, t_end)
    ph = _physics(sc, storms, ref_lat, ref_lon)
    offsets = np.zeros(n) if sc.deploy_after_start_h is None else np.asarray(
        sc.deploy_after_start_h) * _HOUR_S
    deploy_t = t_begin + np.round((offsets - t_begin) / step) * step
    eddies, eddy_row, capture = _eddy_params(sc, deploy_t, step, t_begin)
    capture_step = np.rint((eddies.start - t_begin) / step).astype(np.int64)
    d_fix, t_fix = _schedule(sc, rng, deploy_t, t_end)
    extra_spec = _extra_spec(sc)
    extra = _extras_at(extra_spec, np.arange(n))

    lat = np.asarray(sc.deploy_lat_deg, dtype=float).copy()
    lon = _wrap(np.asarray(sc.deploy_lon_deg, dtype=float))
    z = np.full(n, complex(_compass(sc.initial_slab_speed_m_s, sc.initial_slab_toward_deg)))
    if extra is not None and extra.wind is not None:
        z = z * extra.wind
    clat = np.full(n, np.nan)
    clon = np.full(n, np.nan)

    total = t_fix.size
    rec = {"lat": np.empty(total), "lon": np.empty(total)}
    if record_truth:
        keys = ("mean", "slab", "eddy", "tau", "tide") if sc.tides else (
            "mean", "slab", "eddy", "tau")
        for key in keys:
            rec[key] = np.empty(total, dtype=complex)
        for key in ("w", "clat", "clon"):
            rec[key] = np.empty(total)
    # fixes are computed a chunk of steps at a time from the stored step states
    s_fix = np.floor((t_fix - t_begin) / step).astype(np.int64)
    order = np.argsort(s_fix, kind="stable")
    s_sorted = s_fix[order]
    chunk = 144
    buf = {"lat": np.empty((chunk, n)), "lon": np.empty((chunk, n)),
           "z": np.empty((chunk, n), dtype=complex), "clat": np.empty((chunk, n)),
           "clon": np.empty((chunk, n))}
    n_steps = int(math.ceil((t_end - t_begin) / step)) + 1
    first = 0
    for i in range(n_steps):
        t = t_begin + i * step
        if eddies.idx.size:
            cap = np.flatnonzero(capture_step == i)
            if cap.size:
                who = eddies.idx[cap]
                clat[who], clon[who] = _move(lat[who], lon[who], capture[cap])
        k = i - first
        buf["lat"][k], buf["lon"][k], buf["z"][k] = lat, lon, z
        buf["clat"][k], buf["clon"][k] = clat, clon
        if k == chunk - 1 or i == n_steps - 1:
            lo, hi = np.searchsorted(s_sorted, [first, i + 1])
            sel = order[lo:hi]
            if sel.size:
                _sample(ph, eddies, eddy_row, deploy_t, t_begin, step, first, buf, sel,
                        d_fix, t_fix, rec, record_truth, extra_spec)
            first = i + 1
        if i < n_steps - 1:
            lat, lon, z, clat, clon = _advance(ph, deploy_t, eddies, (t, t + step), t, step,
                                               lat, lon, z, clat, clon, extra)
    return rng, ph, storms, d_fix, t_fix, rec


def _sample(ph, eddies, eddy_row, deploy_t, t_begin, step, first, buf, sel, d_fix, t_fix,
            rec, record_truth, extra_spec=None) -> None:
    """Advance the stored step states to the fix times ``sel`` and record them."""
    d = d_fix[sel]
    tf = t_fix[sel]
    s = np.floor((tf - t_begin) / step).astype(np.int64)
    row = s - first
    t0 = t_begin + s * step
    window = (float(t0.min()), float(tf.max()))
    ed = eddies.for_drifters(eddy_row, d)
    extra = _extras_at(extra_spec, d)
    state = [buf[key][row, d] for key in ("lat", "lon", "z", "clat", "clon")]
    la, lo, zz, cla, clo = _advance(ph, deploy_t[d], ed, window, t0, tf - t0, *state, extra)
    rec["lat"][sel] = la
    rec["lon"][sel] = lo
    if record_truth:
        mean, slab, eddy, w, tau, tide = _components(ph, ed, window, tf, la, lo, zz, cla, clo,
                                                     extra)
        if tide is not None:
            rec["tide"][sel] = tide
        rec["mean"][sel] = mean
        rec["slab"][sel] = slab
        rec["eddy"][sel] = eddy
        rec["tau"][sel] = tau
        rec["w"][sel] = w
        rec["clat"][sel] = np.where(w > 0, cla, np.nan)
        rec["clon"][sel] = np.where(w > 0, clo, np.nan)


# ---------------------------------------------------------------------------
# sampling and corruption
# ---------------------------------------------------------------------------


def _nearest(keys: np.ndarray, drifter: np.ndarray, where: np.ndarray,
             target_d: np.ndarray, target_t: np.ndarray, span: float) -> np.ndarray:
    """Index (into ``keys``) of the eligible fix of each target drifter nearest each time.

    ``keys`` are drifter * span + time, sorted.  Returns -1 where the drifter
    has no eligible fix.
    """
    pool = np.flatnonzero(where)
    if target_d.size == 0:
        return np.zeros(0, dtype=np.int64)
    if pool.size == 0:
        return np.full(target_d.size, -1, dtype=np.int64)
    pk = keys[pool]
    want = target_d * span + target_t
    j = np.searchsorted(pk, want)
    lo = np.clip(j - 1, 0, pool.size - 1)
    hi = np.clip(j, 0, pool.size - 1)
    pick = np.where(np.abs(pk[hi] - want) < np.abs(pk[lo] - want), hi, lo)
    found = pool[pick]
    return np.where(drifter[found] == target_d, found, -1)


def _geodesic_fwd(lat, lon, bearing_deg, dist_m):
    from pyproj import Geod

    geod = Geod(ellps="WGS84")
    lon2, lat2, _ = geod.fwd(lon, lat, bearing_deg, dist_m)
    return np.asarray(lat2), _wrap(np.asarray(lon2))


def _geodesic_dist(lat1, lon1, lat2, lon2):
    from pyproj import Geod

    geod = Geod(ellps="WGS84")
    _, _, dist = geod.inv(lon1, lat1, lon2, lat2)
    return np.asarray(dist)


def _assemble(sc: ReleaseScenario, seed: int, rng, storms, ph, d_flat, t_flat, rec,
              record_truth: bool) -> SyntheticRelease:
    lat_true = rec["lat"]
    lon_true = rec["lon"]
    total = t_flat.size
    span = 4.0 * (sc.duration_days + sc.spinup_days + 1.0) * _DAY_S
    keys = d_flat * span + t_flat

    # draws in a fixed order, independent of which corruptions are asked for
    lost = rng.random(total) < sc.fix_loss_probability
    noise = rng.normal(0.0, sc.gps_noise_m, (total, 2))

    kind = np.where(lost, 1, 0)  # 0 none, 1 missing, 2 gap, 3 spike
    index = {d: i for i, d in enumerate(sc.drifter_ids)}
    if sc.gaps:
        gd = np.array([index[g.drifter_id] for g in sc.gaps]) * span
        g0 = np.array([g.start_day * _DAY_S for g in sc.gaps])
        g1 = g0 + np.array([g.duration_h * _HOUR_S for g in sc.gaps])
        marks = np.zeros(total + 1, dtype=np.int64)
        np.add.at(marks, np.searchsorted(keys, gd + g0, side="left"), 1)
        np.add.at(marks, np.searchsorted(keys, gd + g1, side="left"), -1)
        kind[np.cumsum(marks[:-1]) > 0] = 2

    lat_rep = lat_true.copy()
    lon_rep = lon_true.copy()
    m, nn = _radii(np.sin(lat_true * _DEG) ** 2)
    lat_rep += noise[:, 1] / m / _DEG
    lon_rep = _wrap(lon_rep + noise[:, 0] / (nn * np.cos(lat_true * _DEG)) / _DEG)

    if sc.spikes:
        sd = np.array([index[s.drifter_id] for s in sc.spikes])
        st = np.array([s.day * _DAY_S for s in sc.spikes])
        hit = _nearest(keys, d_flat, kind == 0, sd, st, span)
        ok = hit >= 0
        hit = hit[ok]
        dist = np.array([s.displacement_km * 1e3 for s in sc.spikes])[ok]
        bear = np.array([s.bearing_deg for s in sc.spikes])[ok]
        lat_rep[hit], lon_rep[hit] = _geodesic_fwd(lat_true[hit], lon_true[hit], bear, dist)
        kind[hit] = 3

    dup = np.zeros(total, dtype=bool)
    if sc.duplicates:
        dd = np.array([index[s.drifter_id] for s in sc.duplicates])
        dt = np.array([s.day * _DAY_S for s in sc.duplicates])
        hit = _nearest(keys, d_flat, kind == 0, dd, dt, span)
        dup[hit[hit >= 0]] = True

    reported = kind == 0
    reported |= kind == 3
    lat_rep = np.round(lat_rep, 6)
    lon_rep = _wrap(np.round(lon_rep, 6))

    # truth rows: every scheduled fix, plus a second row for each duplicate
    t_rows = np.repeat(np.arange(total), np.where(dup, 2, 1))
    second = np.zeros(t_rows.size, dtype=bool)
    second[1:] = t_rows[1:] == t_rows[:-1]
    in_file = reported[t_rows]
    fix_row = np.where(in_file, np.cumsum(in_file) - 1, -1)
    start = pd.Timestamp(sc.start_utc)
    start = start.tz_localize("UTC") if start.tzinfo is None else start.tz_convert("UTC")
    ids = np.asarray(sc.drifter_ids, dtype=object)

    f_rows = t_rows[in_file]
    fixes = pd.DataFrame({
        "drifter_id": pd.array(ids[d_flat[f_rows]], dtype=_STRING),
        "time": _times(start, t_flat[f_rows]),
        "lat": lat_rep[f_rows],
        "lon": lon_rep[f_rows],
    })

    storm_table = pd.DataFrame({
        "onset": _times(start, np.round(storms["onset"])),
        "duration_h": storms["duration"] / _HOUR_S,
        "peak_wind_m_s": storms["peak"],
        "toward_start_deg": np.mod(storms["toward"], 360.0),
        "toward_end_deg": np.mod(storms["toward"] + ph.storm_veer, 360.0),
    })

    if not record_truth:
        extra_columns = list(TIDE_TRUTH_COLUMNS) if sc.tides else []
        truth = pd.DataFrame(columns=list(TRUTH_COLUMNS) + extra_columns)
        return SyntheticRelease(sc, seed, fixes, truth, storm_table)

    labels = np.array(["none", "missing", "gap", "spike"], dtype=object)
    corruption = labels[kind[t_rows]]
    corruption[second] = "duplicate"
    # noise offsets are metres, where the local metric is exact to ~1e-12;
    # spikes are measured along the geodesic
    offset = np.where(reported, np.abs(_offset(lat_true, lon_true, lat_rep, lon_rep)), np.nan)
    spiked = np.flatnonzero(kind == 3)
    offset[spiked] = _geodesic_dist(lat_true[spiked], lon_true[spiked], lat_rep[spiked],
                                    lon_rep[spiked])

    def col(key):
        return rec[key][t_rows]

    mean, slab, eddy, tau = col("mean"), col("slab"), col("eddy"), col("tau")
    truth = pd.DataFrame({
        "drifter_id": pd.array(ids[d_flat[t_rows]], dtype=_STRING),
        "time": _times(start, t_flat[t_rows]),
        "fix_row": fix_row.astype(np.int64),
        "corruption": pd.array(corruption, dtype=_STRING),
        "lat_true": lat_true[t_rows],
        "lon_true": lon_true[t_rows],
        "offset_m": offset[t_rows],
        "u_mean_m_s": mean.real,
        "v_mean_m_s": mean.imag,
        "u_slab_m_s": slab.real,
        "v_slab_m_s": slab.imag,
        "u_eddy_m_s": eddy.real,
        "v_eddy_m_s": eddy.imag,
        "eddy_weight": col("w"),
        "eddy_lat": col("clat"),
        "eddy_lon": col("clon"),
        "tau_east_pa": tau.real,
        "tau_north_pa": tau.imag,
    })
    if sc.tides:
        tide = col("tide")
        truth["u_tide_m_s"] = tide.real
        truth["v_tide_m_s"] = tide.imag
    return SyntheticRelease(sc, seed, fixes, truth, storm_table)


def _times(start: pd.Timestamp, seconds: np.ndarray) -> pd.DatetimeIndex:
    ns = start.value + np.round(np.asarray(seconds, dtype=float)).astype(np.int64) * 10**9
    return pd.DatetimeIndex(ns.astype("datetime64[ns]")).tz_localize("UTC")


# ---------------------------------------------------------------------------
# public entry points
# ---------------------------------------------------------------------------


def simulate_release(scenario: ReleaseScenario, seed: int, *,
                     truth: bool = True) -> SyntheticRelease:
    """Simulate a synthetic drifter release and sample it like a field file.

    Parameters
    ----------
    scenario : ReleaseScenario
        What to simulate.
    seed : int
        Seed of the :class:`numpy.random.Generator`; the same scenario and
        seed give identical output.
    truth : bool, optional
        Whether to build the ground-truth table (default).  Without it the
        run is faster and ``truth`` is an empty table with the columns
        :data:`TRUTH_COLUMNS`; the fixes are the same either way.

    Returns
    -------
    SyntheticRelease
        The fixes, the ground truth and the storms.

    Notes
    -----
    The physics and the integration are described in the module docstring
    (:mod:`driftloop.synth`): slab mixed layer after Pollard & Millard
    (1970) and Gill (1982) (from memory), bulk wind stress (common
    practice), Gaussian eddy swirl, positions on the WGS 84 ellipsoid.

    Examples
    --------
    >>> sc = ReleaseScenario(name="demo", drifter_ids=("A",), deploy_lat_deg=(42.0,),
    ...                      deploy_lon_deg=(-35.0,), duration_days=2.0, spinup_days=0.0)
    >>> release = simulate_release(sc, seed=1)
    >>> list(release.fixes.columns)
    ['drifter_id', 'time', 'lat', 'lon']
    >>> bool(release.truth["lon_true"].between(-180, 180).all())
    True
    """
    rng, ph, storms, d_fix, t_fix, rec = _run(scenario, seed, truth)
    return _assemble(scenario, seed, rng, storms, ph, d_fix, t_fix, rec, truth)


def simulate_many(n_drifters: int, days: float, seed: int, *, centre_lat_deg: float = 35.0,
                  centre_lon_deg: float = -55.0, spread_deg: float = 6.0,
                  step_s: float = 1800.0, truth: bool = True) -> SyntheticRelease:
    """Simulate a large randomised release, e.g. for throughput benchmarks.

    Drifters are deployed at random in a box around the centre during the
    first day.  About 5 % are trapped in an eddy (random radius, period and
    spin) for 10-20 days; every drifter gets a Poisson number of spikes of
    2-10 km (mean 1), 1 % one spike of 20-60 km, duplicates (mean 0.5) and
    10 % a data gap of 12-36 h.  All else uses the :class:`ReleaseScenario`
    defaults.

    Parameters
    ----------
    n_drifters : int
        Number of drifters.
    days : float
        Length of the record (days).
    seed : int
        Seed of the random draws (scenario and simulation).
    centre_lat_deg, centre_lon_deg : float, optional
        Centre of the deployment box (degrees north and east).  The default,
        35 N 55 W in the open western North Atlantic, keeps 90-day tracks,
        which drift east, clear of land (no fix within 20 km of the 1-km
        land mask for 300 drifters).
    spread_deg : float, optional
        Half-width of the box in latitude (degrees); its longitude
        half-width is the same distance.
    step_s : float, optional
        Integration step (s).  The default 1800 s is three times faster than
        the 600 s of :class:`ReleaseScenario`; the slab motion is still
        integrated exactly and the rest to second order.
    truth : bool, optional
        Whether to build the ground-truth table.

    Returns
    -------
    SyntheticRelease
        The fixes, ground truth and storms.

    Notes
    -----
    The run is vectorised across drifters: one Python loop over the
    integration steps, NumPy arrays over drifters.
    """
    if n_drifters < 1 or not days > 0:
        raise ValueError(f"need n_drifters >= 1 and days > 0, got {n_drifters}, {days}")
    rng = np.random.default_rng([seed, 1])
    width = max(3, len(str(n_drifters - 1)))
    ids = tuple(f"SYN-{i:0{width}d}" for i in range(n_drifters))
    lat = centre_lat_deg + rng.uniform(-spread_deg, spread_deg, n_drifters)
    lat = np.clip(lat, -88.0, 88.0)
    lat = np.where(lat == 0.0, 1e-3, lat)
    dlon = spread_deg / max(math.cos(centre_lat_deg * _DEG), 0.05)
    lon = _wrap(centre_lon_deg + rng.uniform(-dlon, dlon, n_drifters))
    deploy_h = rng.uniform(0.0, 24.0, n_drifters)

    eddies = []
    for i in np.flatnonzero(rng.random(n_drifters) < 0.05):
        dur = float(rng.uniform(10.0, 20.0))
        if dur + 2.0 > days:
            continue
        eddies.append(EddyEncounter(
            drifter_id=ids[i], start_day=float(rng.uniform(1.0, days - dur)),
            duration_days=dur, orbit_radius_km=float(rng.uniform(5.0, 20.0)),
            orbit_period_days=float(rng.uniform(3.0, 8.0)),
            core_radius_km=float(rng.uniform(25.0, 50.0)),
            spin=str(rng.choice(["cyclonic", "anticyclonic"])),
            centre_bearing_deg=float(rng.uniform(0.0, 360.0))))
    spikes = []
    counts = rng.poisson(1.0, n_drifters)
    for i in np.flatnonzero(counts):
        for _ in range(counts[i]):
            spikes.append(PositionSpike(ids[i], float(rng.uniform(1.0, days)),
                                        float(rng.uniform(2.0, 10.0)),
                                        float(rng.uniform(0.0, 360.0))))
    for i in np.flatnonzero(rng.random(n_drifters) < 0.01):
        spikes.append(PositionSpike(ids[i], float(rng.uniform(1.0, days)),
                                    float(rng.uniform(20.0, 60.0)),
                                    float(rng.uniform(0.0, 360.0))))
    counts = rng.poisson(0.5, n_drifters)
    duplicates = [DuplicateFix(ids[i], float(rng.uniform(1.0, days)))
                  for i in np.flatnonzero(counts) for _ in range(counts[i])]
    gaps = [FixGap(ids[i], float(rng.uniform(1.0, max(days - 2.0, 1.0))),
                   float(rng.uniform(12.0, 36.0)))
            for i in np.flatnonzero(rng.random(n_drifters) < 0.10)]
    scenario = ReleaseScenario(
        name=f"synthetic-{n_drifters}x{days:g}d-seed{seed}",
        drifter_ids=ids, deploy_lat_deg=tuple(lat), deploy_lon_deg=tuple(lon),
        deploy_after_start_h=tuple(deploy_h), duration_days=float(days),
        reference_lat_deg=float(centre_lat_deg), reference_lon_deg=float(centre_lon_deg),
        step_s=float(step_s), eddies=tuple(eddies), spikes=tuple(spikes),
        duplicates=tuple(duplicates), gaps=tuple(gaps))
    return simulate_release(scenario, seed, truth=truth)


# ---------------------------------------------------------------------------
# ground-truth events
# ---------------------------------------------------------------------------


def _cumtrapz(values: np.ndarray, t: np.ndarray) -> np.ndarray:
    """Cumulative trapezoidal integral of ``values`` over ``t``, starting at 0."""
    out = np.zeros(values.shape, dtype=values.dtype)
    out[1:] = np.cumsum(0.5 * (values[1:] + values[:-1]) * np.diff(t))
    return out


def _window_mean(cum: np.ndarray, t: np.ndarray, half: np.ndarray) -> np.ndarray:
    """Mean over ``[t - half, t + half]`` (clipped to the record) from a cumulative integral."""
    lo = np.maximum(t - half, t[0])
    hi = np.minimum(t + half, t[-1])
    width = np.maximum(hi - lo, 1e-9)

    def at(x: np.ndarray) -> np.ndarray:
        # the cumulative integral is piecewise quadratic; linear interpolation
        # between fixes an hour apart is exact to the order that matters here
        value = np.interp(x, t, cum.real)
        return value + 1j * np.interp(x, t, cum.imag) if np.iscomplexobj(cum) else value

    return (at(hi) - at(lo)) / width


def _eddy_vorticity(eddy: EddyEncounter, hemisphere: float, off: np.ndarray) -> np.ndarray:
    """Relative vorticity (1/s) of the Gaussian vortex at offsets ``off`` (m) from its centre."""
    rr = eddy.orbit_radius_km * 1e3
    core = eddy.core_radius_km * 1e3
    turn = 1.0 if eddy.spin == "cyclonic" else -1.0
    omega_orbit = 2.0 * math.pi / (eddy.orbit_period_days * _DAY_S)
    omega0 = turn * hemisphere * omega_orbit * math.exp(0.5 * (rr / core) ** 2)
    q = (off.real ** 2 + off.imag ** 2) / (core * core)
    return omega0 * np.exp(-0.5 * q) * (2.0 - q)


def _runs(mask: np.ndarray) -> list[tuple[int, int]]:
    """Inclusive index ranges of the runs of True in a boolean array."""
    edges = np.diff(np.concatenate([[0], mask.astype(np.int8), [0]]))
    return list(zip(np.flatnonzero(edges == 1), np.flatnonzero(edges == -1) - 1, strict=True))


def _spin_of_rotation(anticlockwise: bool, lat: float) -> str:
    """``"cyclonic"`` for rotation with the Earth (anticlockwise north, clockwise south)."""
    return "cyclonic" if anticlockwise == (lat > 0) else "anticyclonic"


def _event(drifter_id, kind, t0, t1, period_s, radius_m, speed, spin, lat, lon, cycles,
           constituent=None, ratio=math.nan, orientation=math.nan) -> dict:
    return {"drifter_id": drifter_id, "kind": kind, "start": t0, "end": t1,
            "period_h": period_s / _HOUR_S, "radius_km": radius_m / 1e3, "speed_m_s": speed,
            "spin": spin, "lat": lat, "lon": lon, "cycles": cycles, "constituent": constituent,
            "ellipse_ratio": ratio, "orientation_deg": orientation}


def _ringing(drifter_id, times, t, lat, lon, z, f, inside, threshold, min_cycles,
             merge_cycles):
    """Inertial-ringing events of one drifter from its slab velocity (see :func:`truth_events`).

    ``inside`` marks the fixes where the drifter counts as trapped in an
    eddy; events are split where it changes.
    """
    phase = _cumtrapz(f, t)
    # complex demodulation: free inertial motion Z0 exp(-i phase) becomes the constant Z0
    demod = z * np.exp(1j * phase)
    half_period = np.pi / np.abs(f)
    amp = np.abs(_window_mean(_cumtrapz(demod, t), t, half_period))
    runs = _runs(amp >= threshold)
    merged: list[list[int]] = []
    for i0, i1 in runs:
        if merged and t[i0] - t[merged[-1][1]] < merge_cycles * 2.0 * half_period[i0]:
            merged[-1][1] = i1
        else:
            merged.append([i0, i1])
    cuts = np.flatnonzero(inside[1:] != inside[:-1]) + 1
    pieces = []
    for i0, i1 in merged:
        inner = cuts[(cuts > i0) & (cuts <= i1)]
        bounds = [i0, *inner.tolist(), i1 + 1]
        pieces += [(a, b - 1) for a, b in zip(bounds[:-1], bounds[1:], strict=True)]
    out = []
    for i0, i1 in pieces:
        if i1 <= i0:
            continue
        cycles = abs(phase[i1] - phase[i0]) / (2.0 * math.pi)
        if cycles < min_cycles:
            continue
        span = t[i1] - t[i0]
        f_mean = (phase[i1] - phase[i0]) / span
        sl = slice(i0, i1 + 1)
        speed = float(_cumtrapz(amp[sl], t[sl])[-1] / span)
        out.append(_event(drifter_id, "inertial", times[i0], times[i1],
                          2.0 * math.pi / abs(f_mean), speed / abs(f_mean), speed,
                          "anticyclonic", float(np.mean(lat[sl])),
                          _circular_mean_deg(lon[sl]), cycles))
    return out


def truth_events(release: SyntheticRelease, *, ringing_threshold_m_s: float = 0.05,
                 min_cycles: float = 2.0, merge_cycles: float = 0.5,
                 eddy_weight_threshold: float = 0.5,
                 tidal_threshold_m_s: float = 0.05) -> pd.DataFrame:
    """List the loop events a detector should find in a synthetic release.

    Three kinds of event are derived from the ground truth and the scenario:

    ``inertial``
        Ringing of the slab mixed layer.  The slab velocity Z is complex
        demodulated at the drifter's own effective inertial frequency,
        D(t) = Z(t) exp(i integral of f_eff dt), and D is averaged over one
        local inertial period 2 pi / |f_eff| (a boxcar over one period
        removes the slowly varying, directly wind-driven part of Z); the
        modulus A(t) of that mean is the speed of the inertial circle.  An
        event is a stretch where A >= ``ringing_threshold_m_s``; stretches
        less than ``merge_cycles`` inertial periods apart are joined, and
        the result is kept if it lasts at least ``min_cycles`` inertial
        cycles (integral of |f_eff| dt / 2 pi).  f_eff = f + w zeta / 2
        inside an eddy of relative vorticity zeta with trapping weight w
        (Kunze 1985), else f = 2 Omega sin(lat) at the true position.
        ``period_h`` is 2 pi / |mean f_eff| over the event (at the mean
        latitude to second order), ``speed_m_s`` the mean of A,
        ``radius_km`` = speed / |mean f_eff|, ``spin`` always
        ``"anticyclonic"`` (AMS Glossary, "inertial oscillation").
    ``eddy``
        The time the drifter's trapping weight is at least
        ``eddy_weight_threshold``, with the orbit as simulated: ``radius_km``
        the mean distance of the drifter from the eddy centre, ``period_h``
        2 pi over the mean angular rate about the centre (the turn of the
        drifter-centre vector from the first to the last fix divided by the
        time; slightly longer than the :class:`EddyEncounter` period because
        the swirl is still ramping at both ends), ``speed_m_s`` the mean
        swirl speed, ``spin`` from the sense of that turn.  Inertial events
        are split where the drifter enters or leaves its eddy (the Kunze
        shift changes the inertial period there).
    ``tidal``
        One event per :class:`TidalCurrent` whose semi-major speed is at
        least ``tidal_threshold_m_s``, spanning the whole record; period of
        the constituent, ``speed_m_s`` the semi-major speed a, ``radius_km``
        the semi-major excursion a / omega, ``ellipse_ratio`` and
        ``orientation_deg`` as specified; ``spin`` from the sense of
        rotation (anticlockwise is cyclonic in the northern hemisphere),
        missing for a rectilinear current.

    ``lat`` and ``lon`` are the mean true position over the event; times
    are those of the first and last scheduled fix in it (lost fixes and
    gaps included: the events are properties of the motion, not of the
    sampling).

    Parameters
    ----------
    release : SyntheticRelease
        A release simulated with ``truth=True``.
    ringing_threshold_m_s : float, optional
        Inertial speed above which the slab layer is ringing (m/s).
    min_cycles : float, optional
        Shortest inertial event, in inertial cycles.
    merge_cycles : float, optional
        Stretches above the threshold closer than this many inertial
        periods form one event.
    eddy_weight_threshold : float, optional
        Trapping weight from which a drifter counts as looping in its eddy.
    tidal_threshold_m_s : float, optional
        Smallest semi-major tidal speed that makes a tidal event (m/s).

    Returns
    -------
    pandas.DataFrame
        One row per event, columns :data:`TRUTH_EVENT_COLUMNS`, sorted by
        drifter (scenario order) and start; ``start`` and ``end`` are
        datetime64[ns, UTC]; ``cycles`` is the number of loops;
        ``constituent``, ``ellipse_ratio`` and ``orientation_deg`` are set
        for tidal events only.

    Raises
    ------
    ValueError
        If the release was simulated without its truth table.

    Notes
    -----
    Complex demodulation of a rotary signal at a known frequency is the
    classical way of following a narrow-band amplitude (e.g. Bloomfield,
    *Fourier Analysis of Time Series*, 1976, from memory); here the
    frequency is exact, taken from the same f_eff the slab model used.
    """
    sc = release.scenario
    truth = release.truth
    if truth.empty and not release.fixes.empty:
        raise ValueError("truth_events needs a release simulated with truth=True")
    rows = truth[truth["corruption"] != "duplicate"]
    start = pd.Timestamp(sc.start_utc)
    start = start.tz_localize("UTC") if start.tzinfo is None else start.tz_convert("UTC")
    eddy_of = {e.drifter_id: e for e in sc.eddies}
    tides_of: dict[str, list[TidalCurrent]] = {}
    for tide in sc.tides:
        tides_of.setdefault(tide.drifter_id, []).append(tide)
    hemisphere = {d: (1.0 if lat > 0 else -1.0)
                  for d, lat in zip(sc.drifter_ids, sc.deploy_lat_deg, strict=True)}
    events: list[dict] = []
    for drifter_id, g in rows.groupby("drifter_id", sort=False, observed=True):
        if len(g) < 3:
            continue
        times = pd.DatetimeIndex(g["time"])
        t = (times - start).total_seconds().to_numpy()
        lat = g["lat_true"].to_numpy(dtype=float)
        lon = g["lon_true"].to_numpy(dtype=float)
        z = g["u_slab_m_s"].to_numpy(dtype=float) + 1j * g["v_slab_m_s"].to_numpy(dtype=float)
        f = coriolis_parameter(lat)
        weight = g["eddy_weight"].to_numpy(dtype=float)
        eddy = eddy_of.get(drifter_id)
        if eddy is not None and eddy.shift_inertial_frequency:
            inside = weight > 0
            off = _offset(g["eddy_lat"].to_numpy(dtype=float)[inside],
                          g["eddy_lon"].to_numpy(dtype=float)[inside], lat[inside], lon[inside])
            f = f.copy()
            f[inside] += weight[inside] * 0.5 * _eddy_vorticity(eddy, hemisphere[drifter_id],
                                                                off)
        inside = weight >= eddy_weight_threshold
        events += _ringing(drifter_id, times, t, lat, lon, z, f, inside, ringing_threshold_m_s,
                           min_cycles, merge_cycles)
        held = np.flatnonzero(inside)
        if eddy is not None and held.size >= 2:
            sl = slice(held[0], held[-1] + 1)
            # the orbit as simulated: drifter about the eddy centre
            off = _offset(g["eddy_lat"].to_numpy(dtype=float)[sl],
                          g["eddy_lon"].to_numpy(dtype=float)[sl], lat[sl], lon[sl])
            turn = np.unwrap(np.angle(off))
            rate = (turn[-1] - turn[0]) / (t[sl][-1] - t[sl][0])
            period = 2.0 * math.pi / abs(rate)
            swirl = np.hypot(g["u_eddy_m_s"].to_numpy(dtype=float)[sl],
                             g["v_eddy_m_s"].to_numpy(dtype=float)[sl])
            mean_lat = float(np.mean(lat[sl]))
            events.append(_event(drifter_id, "eddy", times[sl][0], times[sl][-1], period,
                                 float(np.mean(np.abs(off))), float(np.mean(swirl)),
                                 _spin_of_rotation(rate > 0, mean_lat), mean_lat,
                                 _circular_mean_deg(lon[sl]), (t[sl][-1] - t[sl][0]) / period))
        for tide in tides_of.get(drifter_id, []):
            if tide.amplitude_m_s < tidal_threshold_m_s:
                continue
            period = tide.period_s
            mean_lat = float(np.mean(lat))
            spin = (pd.NA if tide.ellipse_ratio == 0 else
                    _spin_of_rotation(tide.ellipse_ratio > 0, mean_lat))
            events.append(_event(drifter_id, "tidal", times[0], times[-1], period,
                                 tide.amplitude_m_s * period / (2.0 * math.pi),
                                 tide.amplitude_m_s, spin, mean_lat, _circular_mean_deg(lon),
                                 (t[-1] - t[0]) / period, tide.constituent, tide.ellipse_ratio,
                                 tide.orientation_deg))
    table = pd.DataFrame(events, columns=list(TRUTH_EVENT_COLUMNS))
    order = {d: i for i, d in enumerate(sc.drifter_ids)}
    return _tidy_events(table, order)


_EVENT_DTYPES = {
    "drifter_id": _STRING, "kind": _STRING, "start": "datetime64[ns, UTC]",
    "end": "datetime64[ns, UTC]", "period_h": float, "radius_km": float, "speed_m_s": float,
    "spin": _STRING, "lat": float, "lon": float, "cycles": float, "constituent": _STRING,
    "ellipse_ratio": float, "orientation_deg": float,
}


def _tidy_events(table: pd.DataFrame, order: dict[str, int]) -> pd.DataFrame:
    """Sort a truth-event table and give its columns their dtypes."""
    if table.empty:
        return pd.DataFrame({c: pd.Series(dtype=_EVENT_DTYPES[c]) for c in TRUTH_EVENT_COLUMNS})
    table = table.copy()
    for key in ("start", "end"):
        table[key] = pd.to_datetime(table[key], utc=True).astype("datetime64[ns, UTC]")
    rank = table["drifter_id"].map(order).to_numpy()
    table = table.iloc[np.lexsort((pd.DatetimeIndex(table["start"]).asi8, rank))]
    table = table.reset_index(drop=True)
    return table.astype({c: d for c, d in _EVENT_DTYPES.items() if c not in ("start", "end")})


# ---------------------------------------------------------------------------
# the evaluation release
# ---------------------------------------------------------------------------


class _Site(NamedTuple):
    """A deployment site of the evaluation release."""

    name: str
    lat_deg: float
    lon_deg: float
    drift_east_m_s: float
    drift_north_m_s: float
    tides: tuple[str, ...]  # constituents given to the site's tidal drifter
    eddy_spin: str | None  # spin of the site's eddy looper, if any
    quiet: bool  # whether the site has a quiet drifter


#: Deployment sites of :func:`evaluation_release`: name, centre latitude and
#: longitude (degrees), uniform drift (east, north; m/s), the constituents of
#: the site's tidal drifter, the spin of its eddy looper and whether it has a
#: quiet drifter.  All are open ocean, several hundred kilometres from land
#: (common geographic knowledge; the tests check every true position with
#: :func:`driftloop.landmask.is_land`).  A constituent is only given where
#: the local inertial period T_i differs from its period by more than 25 %
#: (|ln(T_i / T)| > ln 1.25) all along the tracks: M2 (12.42 h) only at
#: |lat| <= 45 deg, far below its 74.5 deg critical latitude, K1 (23.93 h)
#: and O1 (25.82 h) only well away from 30 and 27.6 deg.
EVALUATION_SITES = (
    _Site("NA", 45.0, -35.0, 0.05, 0.01, ("M2", "K1"), "cyclonic", True),
    _Site("NB", 56.0, -28.0, -0.03, -0.02, ("K1",), None, True),
    _Site("NC", 35.0, -150.0, 0.05, 0.0, ("M2",), "anticyclonic", False),
    _Site("ND", 18.0, -130.0, -0.06, 0.01, ("M2", "K1"), "cyclonic", True),
    _Site("SA", -40.0, -25.0, 0.05, 0.0, ("M2",), "anticyclonic", True),
    _Site("SB", -52.0, 105.0, 0.08, 0.0, ("K1",), None, True),
    _Site("SC", -32.0, -118.0, -0.03, 0.01, ("M2",), "cyclonic", False),
    _Site("SD", -18.0, 85.0, -0.05, 0.0, ("M2", "O1"), "anticyclonic", True),
)

_EVAL_NAME = "velmora-evaluation"
_EVAL_START = "2025-03-01T00:00:00Z"
_EVAL_DAYS = 90.0


@dataclass(frozen=True, eq=False)
class EvaluationRelease:
    """What :func:`evaluation_release` returns: a multi-site release and its truth.

    Attributes
    ----------
    name : str
        Name of the release.
    seed : int
        The seed it was built from.
    releases : tuple of SyntheticRelease
        One simulated release per site (own storms, mean flow and seed).
    fixes : pandas.DataFrame
        All fixes, site after site, as in :attr:`SyntheticRelease.fixes`.
    truth : pandas.DataFrame
        All truth rows, columns :data:`TRUTH_COLUMNS` and
        :data:`TIDE_TRUTH_COLUMNS` (zero without a tide); ``fix_row``
        refers to rows of ``fixes``.
    events : pandas.DataFrame
        The truth events (:func:`truth_events`, default thresholds).
    drifters : pandas.DataFrame
        One row per drifter: ``drifter_id``, ``site``, ``hemisphere``
        (``"north"``/``"south"``), ``quiet`` (bool), ``eddy_spin`` (or
        missing), ``tides`` (constituents joined by ``+``, or empty),
        ``n_gaps``, ``longest_gap_h`` (injected gaps), ``first_fix``,
        ``last_fix`` and ``days`` (between the first and last fix).
    storms : pandas.DataFrame
        The storms of every site, with a ``site`` column.
    """

    name: str
    seed: int
    releases: tuple[SyntheticRelease, ...] = field(repr=False)
    fixes: pd.DataFrame = field(repr=False)
    truth: pd.DataFrame = field(repr=False)
    events: pd.DataFrame = field(repr=False)
    drifters: pd.DataFrame = field(repr=False)
    storms: pd.DataFrame = field(repr=False)

    @property
    def quiet_drifters(self) -> list[str]:
        """Ids of the quiet drifters."""
        return self.drifters.loc[self.drifters["quiet"], "drifter_id"].astype(str).tolist()


def _site_scenario(site: _Site, ids: list[str], roles: list[str], rng: np.random.Generator,
                   step_s: float) -> ReleaseScenario:
    """Draw the scenario of one site of the evaluation release."""
    n = len(ids)
    lat = site.lat_deg + rng.uniform(-0.5, 0.5, n)
    lon = site.lon_deg + rng.uniform(-0.5, 0.5, n) / math.cos(site.lat_deg * _DEG)
    deploy_day = rng.uniform(0.0, _EVAL_DAYS - 60.0, n)
    inertial_days = float(2.0 * math.pi / abs(coriolis_parameter(site.lat_deg))) / _DAY_S
    eddies, tides, gaps, spikes, duplicates = [], [], [], [], []
    for i, (drifter, role) in enumerate(zip(ids, roles, strict=True)):
        first, last = deploy_day[i], _EVAL_DAYS
        if role == "eddy":
            # period long enough that |zeta / 2 f| <= 0.2 at the orbit (see Notes)
            period = max(3.0, 4.6 * inertial_days) * rng.uniform(1.0, 1.4)
            radius = rng.uniform(8.0, 20.0)
            duration = min(max(15.0, 3.5 * period) * rng.uniform(1.0, 1.3), last - first - 8.0)
            eddies.append(EddyEncounter(
                drifter, start_day=float(first + rng.uniform(3.0, last - first - duration - 3.0)),
                duration_days=float(duration), orbit_radius_km=float(radius),
                orbit_period_days=float(period),
                core_radius_km=float(radius * rng.uniform(1.6, 2.5)), spin=site.eddy_spin,
                centre_bearing_deg=float(rng.uniform(0.0, 360.0))))
        if role == "tidal":
            for name in site.tides:
                amplitude = rng.uniform(0.06, 0.15) if name in ("M2", "S2") else rng.uniform(
                    0.06, 0.10)
                ratio = rng.choice([-1.0, 1.0]) * rng.uniform(0.3, 0.9)
                tides.append(TidalCurrent(drifter, name, float(amplitude), float(ratio),
                                          float(rng.uniform(0.0, 180.0)),
                                          float(rng.uniform(0.0, 360.0))))
        if rng.random() < 0.5:
            gaps.append(FixGap(drifter, float(rng.uniform(first + 2.0, last - 3.0)),
                               float(rng.uniform(6.0, 14.0))))
        if rng.random() < 0.2:
            gaps.append(FixGap(drifter, float(rng.uniform(first + 2.0, last - 3.0)),
                               float(rng.uniform(20.0, 40.0))))
        for _ in range(int(rng.poisson(1.5))):
            spikes.append(PositionSpike(drifter, float(rng.uniform(first + 0.5, last)),
                                        float(rng.uniform(2.0, 10.0)),
                                        float(rng.uniform(0.0, 360.0))))
        if rng.random() < 0.1:
            spikes.append(PositionSpike(drifter, float(rng.uniform(first + 0.5, last)),
                                        float(rng.uniform(20.0, 60.0)),
                                        float(rng.uniform(0.0, 360.0))))
        for _ in range(int(rng.poisson(0.5))):
            duplicates.append(DuplicateFix(drifter, float(rng.uniform(first + 0.5, last))))
    return ReleaseScenario(
        name=f"{_EVAL_NAME}-{site.name}", drifter_ids=tuple(ids), deploy_lat_deg=tuple(lat),
        deploy_lon_deg=tuple(_wrap(lon)), deploy_after_start_h=tuple(deploy_day * 24.0),
        start_utc=_EVAL_START, duration_days=_EVAL_DAYS, step_s=step_s,
        drift_east_m_s=site.drift_east_m_s, drift_north_m_s=site.drift_north_m_s,
        meander_speed_m_s=float(rng.uniform(0.05, 0.12)),
        meander_wavelength_km=float(rng.uniform(150.0, 250.0)),
        meander_width_km=float(rng.uniform(120.0, 200.0)),
        reference_lat_deg=site.lat_deg, reference_lon_deg=site.lon_deg,
        mixed_layer_depth_m=float(rng.uniform(30.0, 60.0)),
        damping_time_days=float(rng.uniform(3.0, 5.0)),
        background_wind_m_s=float(rng.uniform(3.0, 6.0)),
        background_wind_toward_deg=float(rng.uniform(0.0, 360.0)),
        storm_mean_interval_days=float(rng.uniform(3.5, 5.5)),
        gps_noise_m=float(rng.uniform(5.0, 10.0)),
        eddies=tuple(eddies), tides=tuple(tides), gaps=tuple(gaps), spikes=tuple(spikes),
        duplicates=tuple(duplicates),
        quiet_drifters=tuple(d for d, r in zip(ids, roles, strict=True) if r == "quiet"))


def evaluation_release(seed: int = 0, n_drifters: int = 40, *,
                       sites: Sequence[str] | None = None,
                       step_s: float = 3600.0) -> EvaluationRelease:
    """Build and simulate the release that loop detection is scored on.

    The drifters are split evenly between the eight open-ocean sites of
    :data:`EVALUATION_SITES`, four in each hemisphere between 18 and 56
    degrees of latitude.  Each site is its own :class:`ReleaseScenario`
    with its own storms (3.5-5.5 days apart on average), mixed-layer depth
    (30-60 m), damping time (3-5 days), background wind (3-6 m/s), uniform
    drift and meander (0.05-0.12 m/s), all drawn from the seed.  Drifters
    are deployed within 0.5 degrees of the site centre.  Within a site the
    first drifter is an eddy looper
    (six sites; cyclonic and anticyclonic eddies in both hemispheres), the
    second carries the site's tides (M2 at six sites, K1 at four, O1 at
    one), the third is quiet (six sites: no wind reaches it, so it has no
    inertial motion), and all others are ordinary drifters.  Every
    drifter but the quiet ones rings after the storms of its site; all
    share the site's mean flow and meander.  With the default 40 drifters:
    6 eddy loopers, 8 tidal drifters (11 tidal currents), 6 quiet drifters
    and 20 ordinary ones.

    Each drifter is deployed at a random time in the first 30 days and
    followed to day 90 (records of 60 to 90 days), with hourly fixes
    (2 min jitter, 2 % lost), GPS noise of 5-10 m, on average 1.5 spikes of
    2-10 km, a 20-60 km spike for one drifter in ten, 0.5 duplicated
    records, a 6-14 h gap for half of the drifters and a 20-40 h gap for
    one in five.  Eddy loopers orbit at 8-20 km with a period of
    1.0-1.4 times max(3 days, 4.6 T_i) for 15 days or 3.5 periods or more.
    Tidal currents have semi-major speeds of 0.06-0.15 m/s (M2) or
    0.06-0.10 m/s (K1, O1) and ellipse ratios of 0.3-0.9 of either sign.

    Parameters
    ----------
    seed : int, optional
        Seed of every random draw; the same seed gives identical tables.
    n_drifters : int, optional
        Number of drifters, at least one per site, split evenly between
        the sites (the first sites get one more when it does not divide).
        The mix above needs three per site to include quiet drifters; 40
        is the design.
    sites : sequence of str, optional
        Names of the sites to simulate (default: all of
        :data:`EVALUATION_SITES`).  Each site draws from its own random
        stream (seeded by ``seed`` and its position in
        :data:`EVALUATION_SITES`), so a site with the same number of
        drifters comes out the same whichever other sites are included.
    step_s : float, optional
        Integration step (s).  The slab layer and the tides are integrated
        exactly at any step and the truth events are measured on the
        simulated motion, so the default of one hour costs no accuracy
        that the evaluation depends on; the mean flow and the eddy swirl,
        which change over days, are second-order accurate.

    Returns
    -------
    EvaluationRelease
        Fixes, truth, truth events and a table of drifters.

    Notes
    -----
    The eddy period bound keeps the Rossby number small: with the orbit
    inside the core (core radius 1.6-2.5 orbit radii) the vorticity at the
    orbit is at most 1.84 times the orbital angular velocity, so a period of
    at least 4.6 T_i keeps the Kunze (1985) shift |zeta / 2 f| below 0.2.

    Examples
    --------
    >>> release = evaluation_release(seed=1, n_drifters=8)  # doctest: +SKIP
    >>> sorted(release.events["kind"].unique())  # doctest: +SKIP
    ['eddy', 'inertial', 'tidal']
    """
    known = [site.name for site in EVALUATION_SITES]
    chosen = known if sites is None else list(dict.fromkeys(sites))
    unknown = sorted(set(chosen) - set(known))
    if unknown or not chosen:
        raise ValueError(f"sites must be a non-empty selection of {known}, got {sites!r}")
    if n_drifters < len(chosen):
        raise ValueError(f"need at least one drifter per site ({len(chosen)}), got {n_drifters}")
    count = [n_drifters // len(chosen) + (1 if k < n_drifters % len(chosen) else 0)
             for k in range(len(chosen))]
    releases, fixes, truths, events, storms, rows = [], [], [], [], [], []
    offset = 0
    for name, m in zip(chosen, count, strict=True):
        position = known.index(name)
        site = EVALUATION_SITES[position]
        rng = np.random.default_rng([seed, 20250301, position])
        ids = [f"VEL-{site.name}{k + 1:02d}" for k in range(m)]
        slots = ["eddy" if site.eddy_spin else "ordinary", "tidal" if site.tides else "ordinary",
                 "quiet" if site.quiet else "ordinary"]
        roles = [slots[k] if k < len(slots) else "ordinary" for k in range(m)]
        sc = _site_scenario(site, ids, roles, rng, step_s)
        release = simulate_release(sc, int(rng.integers(2**31)))
        releases.append(release)
        truth = release.truth.copy()
        for key in TIDE_TRUTH_COLUMNS:
            if key not in truth:
                truth[key] = 0.0
        truth["fix_row"] = np.where(truth["fix_row"] >= 0, truth["fix_row"] + offset, -1)
        offset += len(release.fixes)
        fixes.append(release.fixes)
        truths.append(truth)
        events.append(truth_events(release))
        storms.append(release.storms.assign(site=site.name))
        for drifter, role in zip(ids, roles, strict=True):
            times = release.fixes.loc[release.fixes["drifter_id"] == drifter, "time"]
            gaps = [g.duration_h for g in sc.gaps if g.drifter_id == drifter]
            rows.append({
                "drifter_id": drifter, "site": site.name,
                "hemisphere": "north" if site.lat_deg > 0 else "south",
                "quiet": role == "quiet",
                "eddy_spin": site.eddy_spin if role == "eddy" else pd.NA,
                "tides": "+".join(t.constituent for t in sc.tides if t.drifter_id == drifter),
                "n_gaps": len(gaps), "longest_gap_h": max(gaps, default=0.0),
                "first_fix": times.min(), "last_fix": times.max(),
                "days": (times.max() - times.min()).total_seconds() / _DAY_S,
            })
    drifters = pd.DataFrame(rows)
    for key in ("drifter_id", "site", "hemisphere", "eddy_spin", "tides"):
        drifters[key] = drifters[key].astype(_STRING)
    return EvaluationRelease(
        name=_EVAL_NAME, seed=seed, releases=tuple(releases),
        fixes=pd.concat(fixes, ignore_index=True),
        truth=pd.concat(truths, ignore_index=True),
        events=pd.concat(events, ignore_index=True),
        drifters=drifters,
        storms=pd.concat(storms, ignore_index=True))


def _iso(times: pd.Series) -> pd.Series:
    return pd.Series(pd.DatetimeIndex(times).tz_convert("UTC").strftime("%Y-%m-%dT%H:%M:%SZ"),
                     index=times.index)


def _fmt(values: np.ndarray, spec: str) -> np.ndarray:
    values = np.asarray(values, dtype=float)
    out = np.char.mod(spec, values).astype(object)
    out[~np.isfinite(values)] = ""
    out[out == spec % -0.0] = spec % 0.0
    return out


def write_fixes_csv(fixes: pd.DataFrame, path: str | Path) -> Path:
    """Write fixes as a field-style CSV file.

    The columns are :data:`FIELD_CSV_COLUMNS`
    (``platform_id,obs_time_utc,latitude,longitude``), times ISO 8601 UTC
    with a ``Z`` designator and whole seconds, positions in degrees with
    6 decimals (about 0.1 m), Unix line endings.

    Parameters
    ----------
    fixes : pandas.DataFrame
        Columns ``drifter_id``, ``time``, ``lat``, ``lon`` (as in
        :attr:`SyntheticRelease.fixes`).
    path : str or Path
        The output file.

    Returns
    -------
    Path
        The file written.
    """
    path = Path(path)
    table = pd.DataFrame({
        "platform_id": fixes["drifter_id"].astype(str),
        "obs_time_utc": _iso(fixes["time"]),
        "latitude": _fmt(fixes["lat"], "%.6f"),
        "longitude": _fmt(fixes["lon"], "%.6f"),
    })
    table.to_csv(path, index=False, lineterminator="\n")
    return path


_TRUTH_FORMATS = {
    "lat_true": "%.7f",
    "lon_true": "%.7f",
    "offset_m": "%.1f",
    "u_mean_m_s": "%.5f",
    "v_mean_m_s": "%.5f",
    "u_slab_m_s": "%.5f",
    "v_slab_m_s": "%.5f",
    "u_eddy_m_s": "%.5f",
    "v_eddy_m_s": "%.5f",
    "eddy_weight": "%.4f",
    "eddy_lat": "%.5f",
    "eddy_lon": "%.5f",
    "tau_east_pa": "%.5f",
    "tau_north_pa": "%.5f",
}


def write_truth_csv(truth: pd.DataFrame, path: str | Path) -> Path:
    """Write the ground-truth table as CSV.

    Columns as :data:`TRUTH_COLUMNS`, followed by :data:`TIDE_TRUTH_COLUMNS`
    when the table has them; times ISO 8601 UTC with ``Z``; positions with
    7 decimals (about 1 cm), velocities and stresses with 5, offsets with 1;
    empty cells for NaN.

    Parameters
    ----------
    truth : pandas.DataFrame
        :attr:`SyntheticRelease.truth`.
    path : str or Path
        The output file.

    Returns
    -------
    Path
        The file written.
    """
    path = Path(path)
    table = pd.DataFrame({"drifter_id": truth["drifter_id"].astype(str),
                          "time": _iso(truth["time"])})
    table["fix_row"] = truth["fix_row"].astype(np.int64)
    table["corruption"] = truth["corruption"].astype(str)
    for key, spec in _TRUTH_FORMATS.items():
        table[key] = _fmt(truth[key], spec)
    for key in TIDE_TRUTH_COLUMNS:
        if key in truth:
            table[key] = _fmt(truth[key], "%.5f")
    table.to_csv(path, index=False, lineterminator="\n")
    return path
