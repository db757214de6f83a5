"""Quality control of a table of many drifters: each drifter is flagged on its own.

The QC tests are defined per drifter (docs/qc.md).  ``run_qc`` on a table of
several drifters must therefore give every row the flag, reasons and segment
that ``run_qc`` on that drifter's rows alone gives, whatever the other
drifters hold: the batched streaming run relies on it.  The tracks below are
built so that the iterative tests need many passes in some drifters and few
in others, and so that suspect fixes sit at the ends of neighbouring
drifters.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from driftloop import geodesy, landmask
from driftloop.config import QCConfig
from driftloop.io.schema import make_fixes
from driftloop.qc import QC_COLUMNS, run_qc

T0 = pd.Timestamp("2024-03-01T00:00:00Z")
# 39 N 9.5 W is sea about 6.6 km off the Portuguese coast (see test_landmask)
OFF_PORTUGAL = (39.0, -9.5)


@pytest.fixture(scope="module", autouse=True)
def mask():
    return landmask.land_bits()


def _track(rng, drifter, n, origin, *, wild=0.0, still=False, end_spikes=False, ship=0,
           start_h=0.0):
    """East/north motion of one drifter (m) turned into fixes around ``origin``."""
    hours = np.arange(n, dtype=float) + start_h + rng.uniform(0, 24)
    if still:
        x, y = rng.normal(0, 5, n), rng.normal(0, 5, n)
    else:
        u, v = rng.normal(0, 0.3, 2)
        radius, period = rng.uniform(0, 3000), rng.uniform(12, 30)
        phase = 2 * np.pi * hours / period
        x = u * hours * 3600 + radius * np.cos(phase) + rng.normal(0, 10, n)
        y = v * hours * 3600 + radius * np.sin(phase) + rng.normal(0, 10, n)
    if wild:  # many displaced fixes: the iterative tests need many passes
        bad = rng.random(n) < wild
        size = rng.choice([2000.0, 8000.0, 40000.0], n)
        angle = rng.uniform(0, 2 * np.pi, n)
        x[bad] += (size * np.cos(angle))[bad]
        y[bad] += (size * np.sin(angle))[bad]
    if end_spikes:  # wild first and last fixes
        x[[0, -1]] += 30000.0
    if ship:  # carried away at 8 m/s for ``ship`` hours from the middle of the track
        k = n // 2
        x[k:] += np.minimum(np.arange(n - k) + 1, ship) * 8.0 * 3600
    lat0, lon0 = origin
    end = geodesy.forward(lon0, lat0, np.degrees(np.arctan2(x, y)), np.hypot(x, y))
    # times to the nanosecond, a few ns off the hour
    ns = np.round(hours * 3600.0).astype(np.int64) * 1_000_000_000 + rng.integers(-3, 4, n)
    time = T0 + pd.to_timedelta(ns)
    return pd.DataFrame({"drifter_id": drifter, "time": time,
                         "lat": end.lat_deg, "lon": end.lon_deg})


def _release(seed):
    rng = np.random.default_rng(seed)
    # ship runs of exactly the minimum duration (3 h) are decided by the last
    # bits of the fix times; one drifter starts a year before the others
    kinds = [dict(wild=0.4), dict(end_spikes=True), dict(end_spikes=True), dict(),
             dict(wild=0.2), dict(ship=3), dict(still=True), dict(wild=0.3, end_spikes=True),
             dict(end_spikes=True, still=True), dict(ship=8), dict(ship=3), dict(ship=3),
             dict(start_h=-365 * 24.0)]
    parts = []
    for k, kind in enumerate(kinds * 2):
        near_coast = kind.get("still", False)
        origin = OFF_PORTUGAL if near_coast else (35 + rng.normal(0, 3), -40 + rng.normal(0, 3))
        n = 40 if kind.get("ship") else int(rng.choice([3, 5, 40, 300]))
        parts.append(_track(rng, f"D{k:02d}", n, origin, **kind))
    tracks = pd.concat(parts, ignore_index=True)
    table = make_fixes(source_file="release.csv", source_row=np.arange(len(tracks)) + 2,
                       **{c: tracks[c].tolist() for c in ("drifter_id", "time", "lat", "lon")})
    # shuffle the rows: the table need not be grouped by drifter
    return table.iloc[rng.permutation(len(table))]


def _one_by_one(table, config):
    parts = [run_qc(group, config).loc[:, list(QC_COLUMNS)]
             for _, group in table.groupby("drifter_id", sort=True, observed=True)]
    return pd.concat(parts).reindex(table.index)


@pytest.mark.parametrize("seed", [0, 1, 2])
@pytest.mark.parametrize("land_test", [True, False])
def test_each_drifter_is_flagged_as_if_alone(seed, land_test):
    config = QCConfig(land_test=land_test)
    table = _release(seed)
    together = run_qc(table, config).loc[:, list(QC_COLUMNS)]
    alone = _one_by_one(table, config)
    pd.testing.assert_frame_equal(together, alone, check_exact=True)
    # the release exercises what it is built for
    reasons = set("|".join(alone["qc_reasons"]).split("|"))
    assert {"speed_fail", "position_outlier", "ship_pickup"} <= reasons
    assert ("grounded" in reasons) == land_test
