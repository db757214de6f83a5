"""Throughput of projection, fix velocities and resampling; interpolator comparison.

Run from the repository root::

    python benchmarks/bench_resample.py                 # 1 million fixes
    python benchmarks/bench_resample.py --fixes 3000000 --repeat 5
    python benchmarks/bench_resample.py --synth         # driftloop.synth.simulate_many input
    python benchmarks/bench_resample.py --compare       # loop retention by interpolator

The throughput tables give the best of ``--repeat`` runs in CPU time of
this process (``time.process_time``; one thread), and fixes per second
from it: first each stage inside :func:`driftloop.resample.resample_all`
(timed by calling its private stage functions in order), then whole calls
of the public functions (with wall-clock time too; on a machine shared
with other work it is the less reliable figure).

The default input is a fast synthetic release: drifters spread over
latitudes 70 S to 70 N and all longitudes (some cross the antimeridian),
each turning in inertial circles of 0.5-5 km radius at its local inertial
frequency while drifting at about 0.1 m/s, sampled every 40-80 minutes
with 1 % of the intervals stretched into gaps of 3-30 h; every fix has QC
flag 1.  ``--synth`` uses the physics-based generator instead (slower to
build, about 1.4 fixes per drifter-hour).

``--compare`` reruns the interpolator comparison quoted in
``docs/resampling.md``: a 2-km inertial circle at 45 N sampled every 40-80
minutes with 10 m GPS noise, resampled hourly by each candidate, and the
worst position error inside gaps of 3 to 24 h.
"""

from __future__ import annotations

import argparse
import sys
import time
from collections.abc import Callable

import numpy as np
import pandas as pd
from scipy.interpolate import Akima1DInterpolator, CubicSpline, PchipInterpolator

from driftloop import geodesy
from driftloop.config import ResampleConfig
from driftloop.constants import EARTH_ROTATION_RATE_RAD_S
from driftloop.resample import resample_all

T0 = pd.Timestamp("2024-01-01T00:00:00Z")


# --------------------------------------------------------------------------- inputs


def fast_release(n_fixes: int, n_drifters: int, seed: int) -> pd.DataFrame:
    """Make a flagged fixes table of ``n_fixes`` fixes with NumPy only."""
    rng = np.random.default_rng(seed)
    per = max(n_fixes // n_drifters, 2)
    dt = rng.uniform(40.0, 80.0, (n_drifters, per)) * 60.0
    gap = rng.random((n_drifters, per)) < 0.01
    dt[gap] = rng.uniform(3.0, 30.0, int(gap.sum())) * 3600.0
    t = np.cumsum(dt, axis=1) + rng.uniform(0.0, 86400.0, (n_drifters, 1))
    lat0 = rng.uniform(-70.0, 70.0, n_drifters)
    lat0 = np.where(np.abs(lat0) < 1.0, 1.0, lat0)
    lon0 = rng.uniform(-180.0, 180.0, n_drifters)
    f = 2.0 * EARTH_ROTATION_RATE_RAD_S * np.sin(np.radians(lat0))[:, None]
    radius = rng.uniform(500.0, 5000.0, (n_drifters, 1))
    drift = rng.normal(0.0, 0.1, (n_drifters, 2))
    x = radius * np.cos(f * t) + drift[:, :1] * t
    y = -radius * np.sin(f * t) + drift[:, 1:] * t
    back = geodesy.aeqd_inverse(x.ravel(), y.ravel(), np.repeat(lon0, per),
                                np.repeat(lat0, per), method="conformal")
    ids = np.repeat(np.array([f"FAST-{k:05d}" for k in range(n_drifters)]), per)
    ns = T0.value + np.round(t.ravel() * 1e9).astype(np.int64)
    return pd.DataFrame({
        "drifter_id": pd.array(ids, dtype="string"),
        "time": pd.DatetimeIndex(ns.view("M8[ns]")).tz_localize("UTC"),
        "lat": back.lat_deg,
        "lon": back.lon_deg,
        "qc_flag": np.ones(ids.size, dtype=np.int8),
    })


def synth_release(n_fixes: int, seed: int) -> pd.DataFrame:
    """Make a release with :func:`driftloop.synth.simulate_many` (every fix flag 1)."""
    from driftloop.synth import simulate_many

    days = 60.0
    n_drifters = max(1, round(n_fixes / (days * 24.0)))
    fixes = simulate_many(n_drifters, days, seed, truth=False).fixes.copy()
    fixes["qc_flag"] = np.int8(1)
    return fixes


# --------------------------------------------------------------------------- timing


def best_of(repeat: int, func: Callable[[], object]) -> tuple[float, float]:
    """Best CPU and wall-clock time of ``repeat`` calls (s)."""
    cpu, wall = [], []
    for _ in range(repeat):
        c0, w0 = time.process_time(), time.perf_counter()
        func()
        cpu.append(time.process_time() - c0)
        wall.append(time.perf_counter() - w0)
    return min(cpu), min(wall)


def _resample_stages(fixes: pd.DataFrame, config: ResampleConfig) -> dict[str, float]:
    """CPU time of each stage of :func:`resample_all` (its private stage functions, in order)."""
    from driftloop import resample as rs

    times = {}

    def timed(name, func, *args):
        c0 = time.process_time()
        out = func(*args)
        times[name] = time.process_time() - c0
        return out

    prep = timed("select, sort, segment, grid", rs._prepare, fixes, config)
    units = timed("projection chunks", rs._units, prep.seg, prep.lat, prep.lon,
                  config.projection_radius_km * 1e3)
    proj = timed("project fixes", rs._project, prep, units, config.projection_method)
    loc = timed("locate grid points", rs._locate, prep, units)
    slopes = timed("spline slopes (tridiagonal)", rs._slopes, proj, units, config.interpolator)
    cols = timed("interpolate, unproject, east/north, sigma", rs._evaluate, prep, units, proj,
                 loc, slopes, config, 10.0)
    timed("build the table", rs._table, prep, loc, cols)
    return times


def throughput(fixes: pd.DataFrame, repeat: int) -> None:
    n = len(fixes)
    t_s = (pd.DatetimeIndex(fixes["time"]).as_unit("ns").asi8 - T0.value) / 1e9
    lon = fixes["lon"].to_numpy()
    lat = fixes["lat"].to_numpy()
    code = pd.factorize(fixes["drifter_id"])[0]
    order = np.lexsort((t_s, code))
    t_s, lon, lat, code = t_s[order], lon[order], lat[order], code[order]
    # fix_velocities needs increasing times: leave out repeated records
    # (the physics-based generator writes some duplicates, as field files do)
    fresh = np.r_[True, (np.diff(code) != 0) | (np.diff(t_s) > 0)]
    t_s, lon, lat, code = t_s[fresh], lon[fresh], lat[fresh], code[fresh]
    first = np.r_[0, np.flatnonzero(np.diff(code)) + 1]
    size = np.diff(np.r_[first, code.size])
    lon0, lat0 = np.repeat(lon[first], size), np.repeat(lat[first], size)
    track, dropped = resample_all(fixes)
    n_seg = track.groupby(["drifter_id", "segment"], observed=True).ngroups
    print(f"{n:,} fixes of {fixes['drifter_id'].nunique():,} drifters -> {len(track):,} "
          f"hourly points in {n_seg:,} segments ({len(dropped):,} short segments dropped)")
    print(f"best of {repeat}, one thread, CPU time of this process\n")

    print(f"{'resample_all, default configuration':46s} {'CPU s':>7s} {'fixes/s':>12s}")
    runs = [_resample_stages(fixes, ResampleConfig()) for _ in range(repeat)]
    for name in runs[0]:
        cpu = min(run[name] for run in runs)
        print(f"  {name:44s} {cpu:7.3f} {n / cpu:12,.0f}")
    cpu = min(sum(run.values()) for run in runs)
    print(f"  {'sum of the stages':44s} {cpu:7.3f} {n / cpu:12,.0f}\n")

    stages: list[tuple[str, Callable[[], object]]] = [
        ("resample_all: spline, conformal (default)", lambda: resample_all(fixes)),
        ("resample_all: linear, conformal",
         lambda: resample_all(fixes, ResampleConfig(interpolator="linear"))),
        ("resample_all: spline, geodesic",
         lambda: resample_all(fixes, ResampleConfig(projection_method="geodesic"))),
        ("aeqd_forward, conformal",
         lambda: geodesy.aeqd_forward(lon, lat, lon0, lat0, method="conformal")),
        ("aeqd_forward, geodesic",
         lambda: geodesy.aeqd_forward(lon, lat, lon0, lat0, method="geodesic")),
        ("fix_velocities, conformal",
         lambda: geodesy.fix_velocities(t_s, lon, lat, code, method="conformal")),
        ("fix_velocities, geodesic",
         lambda: geodesy.fix_velocities(t_s, lon, lat, code, method="geodesic")),
    ]
    print(f"{'whole calls':46s} {'CPU s':>7s} {'wall s':>7s} {'fixes/s':>12s}")
    for name, func in stages:
        cpu, wall = best_of(repeat, func)
        print(f"  {name:44s} {cpu:7.3f} {wall:7.3f} {n / cpu:12,.0f}")


# --------------------------------------------------------------------------- comparison


def _looping_track(seed: int, gaps_day=(), gap_h=3.0, noise_m=10.0, days=6.0):
    rng = np.random.default_rng(seed)
    f = 2.0 * EARTH_ROTATION_RATE_RAD_S * np.sin(np.radians(45.0))
    t = np.r_[0.0, np.cumsum(rng.uniform(40.0, 80.0, int(days * 36) + 10) * 60.0)]
    t = t[t < days * 86400.0]
    for day in gaps_day:
        t = t[(t < day * 86400.0) | (t > day * 86400.0 + gap_h * 3600.0)]
    drift = 0.1
    x = 2000.0 * np.cos(-f * t) + drift * t + rng.normal(0.0, noise_m, t.size)
    y = 2000.0 * np.sin(-f * t) + rng.normal(0.0, noise_m, t.size)

    def truth(tt):
        return 2000.0 * np.cos(-f * tt) + drift * tt, 2000.0 * np.sin(-f * tt)

    return t, x, y, truth


def _candidates(t, x, y, tg):
    """Hourly positions from each interpolator (scipy's, and driftloop's own)."""
    lon0, lat0 = -30.0, 45.0
    back = geodesy.aeqd_inverse(x, y, lon0, lat0)
    fixes = pd.DataFrame({"drifter_id": "C", "time": T0 + pd.to_timedelta(t, unit="s"),
                          "lat": back.lat_deg, "lon": back.lon_deg, "qc_flag": 1})
    out = {}
    for name in ("spline", "linear"):
        config = ResampleConfig(interpolator=name, min_segment_days=0.1, max_gap_h=48.0)
        track, _ = resample_all(fixes, config)
        p = geodesy.aeqd_forward(track["lon"], track["lat"], lon0, lat0)
        times = (pd.DatetimeIndex(track["time"]).as_unit("ns").asi8 - T0.value) / 1e9
        keep = np.isin(times, tg)
        out[f"driftloop {name}"] = (p.x_m[keep], p.y_m[keep])
    def natural(a, b):
        return CubicSpline(a, b, bc_type="natural")

    for name, make in (("Akima (scipy)", Akima1DInterpolator),
                       ("PCHIP (scipy)", PchipInterpolator),
                       ("natural spline (scipy)", natural)):
        out[name] = (make(t, x)(tg), make(t, y)(tg))
    return out


def compare() -> None:
    t, x, y, truth = _looping_track(1, gaps_day=(1.2, 2.5, 3.7, 4.9))
    tg = np.arange(np.ceil(t[0] / 3600.0) * 3600.0, t[-1], 3600.0)
    i = np.searchsorted(t, tg, side="right") - 1
    nearest_gap = (t[np.minimum(i + 1, t.size - 1)] - t[i]) > 2.5 * 3600.0
    xt, yt = truth(tg)
    centre_x = xt - 2000.0 * np.cos(-2.0 * EARTH_ROTATION_RATE_RAD_S * np.sin(np.radians(45.0))
                                    * tg)
    print("2-km inertial circle at 45 N (period 16.9 h), 40-80 min steps, four 3-h gaps,")
    print("10 m GPS noise, 0.1 m/s drift; hourly values, radius r about the moving centre\n")
    print(f"{'interpolator':24s} {'mean r/R':>9s} {'min r/R':>8s} {'max r/R':>8s} "
          f"{'min r/R gaps':>13s} {'rms err m':>10s}")
    for name, (xi, yi) in _candidates(t, x, y, tg).items():
        r = np.hypot(xi - centre_x, yi) / 2000.0
        rms = np.sqrt(np.mean((xi - xt) ** 2 + (yi - yt) ** 2))
        print(f"{name:24s} {r.mean():9.4f} {r.min():8.4f} {r.max():8.4f} "
              f"{r[nearest_gap].min():13.4f} {rms:10.1f}")
    print("\nworst position error inside one gap (m), median over 20 tracks")
    gaps = (3, 6, 10, 14, 24)
    print(f"{'interpolator':24s} " + " ".join(f"{g:>6d} h" for g in gaps))
    table: dict[str, list[float]] = {}
    for gap_h in gaps:
        worst: dict[str, list[float]] = {}
        for seed in range(20):
            rng = np.random.default_rng(100 + seed)
            start = float(rng.uniform(2.0, 2.5))
            t, x, y, truth = _looping_track(seed, gaps_day=(start,), gap_h=gap_h)
            tg = np.arange(np.ceil(start * 24.0) * 3600.0, (start * 24.0 + gap_h) * 3600.0,
                           3600.0)
            xt, yt = truth(tg)
            for name, (xi, yi) in _candidates(t, x, y, tg).items():
                worst.setdefault(name, []).append(float(np.hypot(xi - xt, yi - yt).max()))
        for name, values in worst.items():
            table.setdefault(name, []).append(float(np.median(values)))
    for name, values in table.items():
        print(f"{name:24s} " + " ".join(f"{v:8.0f}" for v in values))


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--fixes", type=int, default=1_000_000, help="number of fixes")
    parser.add_argument("--drifters", type=int, default=1000, help="drifters (fast input)")
    parser.add_argument("--repeat", type=int, default=3, help="runs per stage; best is shown")
    parser.add_argument("--seed", type=int, default=0)
    parser.add_argument("--synth", action="store_true",
                        help="use driftloop.synth.simulate_many for the input")
    parser.add_argument("--compare", action="store_true",
                        help="print the interpolator comparison instead of throughput")
    args = parser.parse_args(argv)
    if args.compare:
        compare()
        return 0
    fixes = (synth_release(args.fixes, args.seed) if args.synth
             else fast_release(args.fixes, args.drifters, args.seed))
    throughput(fixes, args.repeat)
    return 0


if __name__ == "__main__":
    sys.exit(main())
