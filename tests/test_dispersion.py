"""Single-particle dispersion against Taylor (1921) and LaCasce (2008).

External references named beside each check:

- Taylor, G. I. (1921), "Diffusion by continuous movements", Proc. London
  Math. Soc. s2-20 (volume from memory): for a velocity with
  autocorrelation R(tau) = exp(-|tau|/T_L) (an Ornstein-Uhlenbeck process),
  K = sigma^2 T_L and <x'^2>(t) = 2 sigma^2 T_L [t - T_L (1 - exp(-t/T_L))],
  which tends to sigma^2 t^2 for t << T_L and 2 sigma^2 T_L t for t >> T_L
  (the closed form is *derived* from Taylor's integral);
- LaCasce, J. H. (2008), "Statistics from Lagrangian observations", Prog.
  Oceanogr. 77, 1-29: an oscillation in the velocity makes R oscillate, so
  the integral to the first zero crossing underestimates T_L;
- the exact AR(1) recursion u_{n+1} = phi u_n + sqrt(1 - phi^2) sigma xi,
  phi = exp(-dt/T_L), samples the Ornstein-Uhlenbeck process without
  discretisation error (common knowledge of the process).

The tolerances below were chosen for the ensemble sizes used (about 3
standard errors of the estimators at these record lengths) and hold for
the fixed seeds.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from scipy.signal import lfilter

from driftloop import dispersion
from driftloop.physics import inertial_period_s

T_L = 2 * 86400.0  # 2 days
SIGMA = 0.1  # m/s
DT = 3 * 3600.0  # 3-hourly drift velocities


def ou_ensemble(seed, n_series, n_samples, dt=DT, t_l=T_L, sigma=SIGMA):
    """Exact AR(1) samples of a stationary Ornstein-Uhlenbeck velocity."""
    rng = np.random.default_rng(seed)
    phi = np.exp(-dt / t_l)
    noise = rng.normal(0.0, sigma * np.sqrt(1 - phi**2), (n_series, n_samples))
    noise[:, 0] = rng.normal(0.0, sigma, n_series)  # start in the stationary state
    return lfilter([1.0], [1.0, -phi], noise, axis=1)


@pytest.fixture(scope="module")
def ensemble():
    # 24 drifters x 250 days, 3-hourly: 125 T_L per drifter
    u = ou_ensemble(11, 24, 2000)
    v = ou_ensemble(12, 24, 2000)
    return u, v


# The Ornstein-Uhlenbeck velocity has zero mean by construction, like a
# residual whose mean field was removed beforehand: demean="none" checks the
# estimators without the finite-record bias of removing each drifter's own
# mean (checked separately below).
EXACT = dict(demean="none")


def test_ornstein_uhlenbeck_gives_taylor_t_l_sigma2_and_k(ensemble):
    u, v = ensemble
    stats = dispersion.single_particle_statistics(u, v, DT, max_lag_s=20 * T_L, n_boot=400,
                                                  **EXACT)
    for name in ("u", "v", "vector"):
        st = stats[name]
        assert st.method == "first_zero" and st.limit_found
        # Taylor (1921) with R = exp(-tau/T_L): T_L, sigma^2, K = sigma^2 T_L
        assert st.variance_m2_s2 == pytest.approx(SIGMA**2, rel=0.06)
        assert st.integral_time_s == pytest.approx(T_L, rel=0.20)
        assert st.diffusivity_m2_s == pytest.approx(SIGMA**2 * T_L, rel=0.22)
    vec = stats["vector"]
    assert vec.integral_time_s == pytest.approx(T_L, rel=0.15)
    # the bootstrap intervals bracket the estimate and the known truth
    low, high = vec.integral_time_ci_s
    assert low < vec.integral_time_s < high and low < T_L < high
    low, high = vec.diffusivity_ci_m2_s
    assert low < SIGMA**2 * T_L < high
    assert vec.blocks >= dispersion.MIN_BLOCKS
    # effective degrees of freedom N dt / (2 T_L) (common practice)
    assert vec.dof_effective == pytest.approx(u.size * DT / (2 * vec.integral_time_s))


def test_correlation_is_the_exponential_of_taylor(ensemble):
    u, v = ensemble
    r = dispersion.autocorrelation(u, DT, v, max_lag_s=3 * T_L, **EXACT)
    expected = np.exp(-r.lags_s / T_L)  # Taylor (1921), Ornstein-Uhlenbeck
    assert r.correlation[0] == 1.0
    assert np.max(np.abs(r.correlation - expected)) < 0.05


def test_dispersion_follows_taylor_and_tends_to_2_sigma2_t_l_t(ensemble):
    u, v = ensemble
    d = dispersion.displacement_dispersion(u, DT, v, max_lag_s=20 * T_L, **EXACT)
    t = d.times_s
    # Taylor (1921) for R = exp(-tau/T_L), closed form derived from his integral
    exact = 2 * SIGMA**2 * T_L * (t - T_L * (1 - np.exp(-t / T_L)))
    assert np.allclose(d.dispersion_m2[1:], exact[1:], rtol=0.12)
    # ballistic start: <x'^2> ~ sigma^2 t^2 for t << T_L (first 3-h step)
    assert d.dispersion_m2[1] == pytest.approx(SIGMA**2 * DT**2, rel=0.1)
    # diffusive limit: K(t) = 1/2 d<x'^2>/dt -> sigma^2 T_L for t >> T_L
    late = (t > 8 * T_L) & (t < 18 * T_L)
    assert np.mean(d.diffusivity_m2_s[late]) == pytest.approx(SIGMA**2 * T_L, rel=0.15)
    slope = np.polyfit(t[late], d.dispersion_m2[late], 1)[0]
    assert slope == pytest.approx(2 * SIGMA**2 * T_L, rel=0.15)


def test_removing_each_drifters_mean_lowers_the_dispersion_by_one_minus_t_over_t(ensemble):
    # Derived from Taylor (1921): removing the record mean of a series of
    # length T takes x'(t) - (t/T) x'(T), whose variance for t, T >> T_L is
    # 2 K t (1 - t/T).  With T = 250 d = 125 T_L, at t = 20 T_L: 0.84.
    u, v = ensemble
    raw = dispersion.displacement_dispersion(u, DT, v, max_lag_s=20 * T_L, demean="none")
    own = dispersion.displacement_dispersion(u, DT, v, max_lag_s=20 * T_L)
    record = u.shape[1] * DT
    ratio = own.dispersion_m2[-1] / raw.dispersion_m2[-1]
    # spread of the ratio over seeds: standard deviation 0.035, so 0.1 is ~3
    assert ratio == pytest.approx(1 - own.times_s[-1] / record, abs=0.1)
    assert ratio < 0.95  # the bias is there at this record length
    # and the covariance is lowered by about the variance of a record mean,
    # 2 sigma^2 T_L / T (0.016 sigma^2; derived likewise), at every lag well
    # inside the record; the tolerance is the sampling spread of the squared
    # means of 48 series (about 20 %, so 50 % is 2.5 standard deviations)
    c_raw = dispersion.autocorrelation(u, DT, v, max_lag_s=T_L, demean="none")
    c_own = dispersion.autocorrelation(u, DT, v, max_lag_s=T_L)
    lowered = (c_raw.covariance_m2_s2 - c_own.covariance_m2_s2) / SIGMA**2
    assert np.mean(lowered) == pytest.approx(2 * T_L / record, rel=0.5)
    assert np.ptp(lowered) < 0.2 * np.mean(lowered)  # the same at every lag


def test_gaps_do_not_bias_the_nan_aware_estimators(ensemble):
    u, v = (a.copy() for a in ensemble)
    rng = np.random.default_rng(3)
    for row in range(u.shape[0]):  # ten 2-day transmission gaps per drifter
        for start in rng.integers(0, u.shape[1] - 16, 10):
            u[row, start:start + 16] = np.nan
    full = dispersion.single_particle_statistics(*ensemble, DT, max_lag_s=20 * T_L, n_boot=50,
                                                 **EXACT)
    gappy = dispersion.single_particle_statistics(u, v, DT, max_lag_s=20 * T_L, n_boot=50,
                                                  **EXACT)
    assert gappy["vector"].samples < full["vector"].samples
    assert gappy["vector"].integral_time_s == pytest.approx(T_L, rel=0.15)
    assert gappy["vector"].variance_m2_s2 == pytest.approx(SIGMA**2, rel=0.06)


def test_lagged_sums_match_a_direct_count_of_pairs():
    # Direct definition of the NaN-aware estimator, one pair at a time
    rng = np.random.default_rng(5)
    series = [rng.normal(size=40), rng.normal(size=25)]
    series[0][[3, 4, 17]] = np.nan
    series[1][[0, 11]] = np.nan
    r = dispersion.autocorrelation(series, 60.0, max_lag_s=600.0)
    centred = [s - np.nanmean(s) for s in series]
    for k in range(11):
        products = [a[i] * a[i + k] for a in centred for i in range(a.size - k)
                    if np.isfinite(a[i]) and np.isfinite(a[i + k])]
        assert r.pairs[k] == len(products)
        assert r.covariance_m2_s2[k] == pytest.approx(np.mean(products), abs=1e-12)
    # displacements summed one window at a time, skipping windows with a gap
    d = dispersion.displacement_dispersion(series, 60.0, max_lag_s=600.0)
    for k in range(1, 11):
        squares = [(60.0 * a[i:i + k].sum()) ** 2 for a in centred for i in range(a.size - k + 1)
                   if np.isfinite(a[i:i + k]).all()]
        assert d.samples[k] == len(squares)
        assert d.dispersion_m2[k] == pytest.approx(np.mean(squares), rel=1e-10)


def test_integration_limits_on_analytic_correlations():
    tau = np.linspace(0.0, 20.0, 20001)
    # exp(-tau): fixed lag L gives 1 - exp(-L); no zero crossing is reported
    fixed = dispersion.integral_time_scale(tau, np.exp(-tau), "fixed_lag", fixed_lag_s=3.0)
    assert fixed.time_s == pytest.approx(1 - np.exp(-3.0), abs=1e-6) and fixed.limit_s == 3.0
    none = dispersion.integral_time_scale(tau, np.exp(-tau))
    assert not none.limit_found and none.limit_s == 20.0
    # damped cosine exp(-tau/5) cos(tau): first zero at pi/2, first minimum
    # just before pi (where d/dtau = 0: tan(tau) = -1/5 -> tau = pi - atan(0.2))
    r = np.exp(-tau / 5) * np.cos(tau)
    zero = dispersion.integral_time_scale(tau, r, "first_zero")
    minimum = dispersion.integral_time_scale(tau, r, "first_minimum")
    assert zero.limit_s == pytest.approx(np.pi / 2, abs=1e-6)
    assert minimum.limit_s == pytest.approx(np.pi - np.arctan(0.2), abs=2e-3)
    assert minimum.time_s < zero.time_s  # R < 0 between the two limits
    with pytest.raises(ValueError, match="fixed_lag_s"):
        dispersion.integral_time_scale(tau, r, "fixed_lag")
    with pytest.raises(ValueError, match="method"):
        dispersion.integral_time_scale(tau, r, "somewhere")


def test_inertial_oscillation_biases_the_first_zero_crossing_low():
    # LaCasce (2008): an oscillation left in the velocity makes R oscillate;
    # the first zero crossing then comes after about a quarter of an
    # inertial period and T_L and K from it are far too low, while a long
    # fixed lag lets the oscillation average out.
    dt = 3600.0
    lat = 45.0
    period = float(inertial_period_s(lat))  # 16.9 h
    omega = 2 * np.pi / period
    n = 24 * 200
    u = ou_ensemble(21, 16, n, dt=dt)
    v = ou_ensemble(22, 16, n, dt=dt)
    rng = np.random.default_rng(23)
    amp = 0.2  # m/s, twice the drift's sigma
    t = np.arange(n) * dt
    phase = rng.uniform(0, 2 * np.pi, (16, 1))
    ui = u + amp * np.cos(omega * t + phase)  # clockwise circles (northern hemisphere)
    vi = v - amp * np.sin(omega * t + phase)
    k_true = SIGMA**2 * T_L
    opts = dict(max_lag_s=8 * T_L, n_boot=20, block_s=20 * 86400.0, **EXACT)
    zero = dispersion.single_particle_statistics(ui, vi, dt, **opts)["vector"]
    fixed = dispersion.single_particle_statistics(ui, vi, dt, method="fixed_lag",
                                                  fixed_lag_s=6 * T_L, **opts)["vector"]
    minimum = dispersion.single_particle_statistics(ui, vi, dt, method="first_minimum",
                                                    **opts)["vector"]
    # the drift alone (same realisation): both limits give Taylor's K, within
    # the sampling spread of this ensemble (1600 T_L of record; 30 % is about
    # 3 standard errors)
    clean_zero = dispersion.single_particle_statistics(u, v, dt, **opts)["vector"]
    clean_fixed = dispersion.single_particle_statistics(u, v, dt, method="fixed_lag",
                                                        fixed_lag_s=6 * T_L, **opts)["vector"]
    assert clean_zero.diffusivity_m2_s == pytest.approx(k_true, rel=0.3)
    assert clean_fixed.diffusivity_m2_s == pytest.approx(k_true, rel=0.3)
    # with the oscillation: the first zero comes after a quarter period or so
    assert zero.limit_s < 0.35 * period
    assert zero.limit_s < minimum.limit_s < period
    assert minimum.integral_time_s < zero.integral_time_s
    # ... so T_L and K from it collapse
    assert zero.integral_time_s < 0.1 * T_L
    assert zero.diffusivity_m2_s < 0.4 * clean_zero.diffusivity_m2_s
    # the fixed lag keeps K: the oscillation adds only (A^2/2) sin(omega L)/omega
    # (17 m2/s here, derived) plus small cross terms
    assert fixed.diffusivity_m2_s == pytest.approx(clean_fixed.diffusivity_m2_s,
                                                   abs=0.1 * k_true)
    # ... while T_L (normalised by the larger variance) is still biased low
    assert fixed.integral_time_s < 0.5 * clean_fixed.integral_time_s


def test_table_per_drifter_and_for_the_release():
    u = ou_ensemble(31, 3, 1200)
    v = ou_ensemble(32, 3, 1200)
    frames = []
    for k in range(3):
        time = pd.Timestamp("2024-04-02T00:00Z") + pd.to_timedelta(np.arange(1200) * DT, "s")
        frame = pd.DataFrame({"drifter_id": f"D{k}", "time": time, "u_m_s": u[k],
                              "v_m_s": v[k]})
        frames.append(frame.drop(index=range(100, 130)))  # a gap: rows missing
    table = dispersion.dispersion_by_drifter(pd.concat(frames), DT, max_lag_s=15 * T_L,
                                             n_boot=50)
    assert list(table.columns) == list(dispersion.DISPERSION_COLUMNS)
    assert list(table["drifter_id"].unique()) == ["D0", "D1", "D2", "(release)"]
    rows = table.set_index(["drifter_id", "component"])
    assert rows.loc[("D0", "u"), "samples"] == 1170
    assert rows.loc[("(release)", "vector"), "samples"] == 3 * 1170
    # the missing rows are gaps: the release rows equal the pooled statistics
    # of the three series with NaN in the gap
    gapped_u, gapped_v = u.copy(), v.copy()
    gapped_u[:, 100:130] = np.nan
    gapped_v[:, 100:130] = np.nan
    direct = dispersion.single_particle_statistics(list(gapped_u), list(gapped_v), DT,
                                                   max_lag_s=15 * T_L, n_boot=50)["vector"]
    pooled = rows.loc[("(release)", "vector")]
    assert pooled["integral_time_s"] == pytest.approx(direct.integral_time_s, rel=1e-12)
    assert pooled["diffusivity_low_m2_s"] == pytest.approx(direct.diffusivity_ci_m2_s[0],
                                                           rel=1e-12)
    assert pooled["integral_time_s"] == pytest.approx(T_L, rel=0.3)
    single = dispersion.single_particle_statistics(gapped_u[1], gapped_v[1], DT,
                                                   max_lag_s=15 * T_L, n_boot=50)["u"]
    assert rows.loc[("D1", "u"), "variance_m2_s2"] == pytest.approx(single.variance_m2_s2)
    with pytest.raises(ValueError, match="uniform grid"):
        bad = frames[0].copy()
        bad.loc[bad.index[5], "time"] += pd.Timedelta(minutes=20)
        dispersion.dispersion_by_drifter(bad, DT)
