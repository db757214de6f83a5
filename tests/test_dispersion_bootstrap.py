"""The block bootstrap of driftloop.dispersion, computed for all resamples at once.

References for the checks:

- the bootstrap as the module docstring of :mod:`driftloop.dispersion`
  describes it: the lag sums of the pairs starting in each block,
  resampled with replacement block by block, T_L and sigma^2 recomputed
  from every resample with the same integration rule, and the percentile
  interval of the results (block bootstrap, common practice); the block
  indices are ``numpy.random.default_rng(seed).integers`` draws, one row of
  draws per resample.  The reference below counts the pairs directly and
  loops over the resamples one at a time;
- the integral time scale of one correlation by the scalar rule
  :func:`driftloop.dispersion.integral_time_scale`, itself checked against
  analytic integrals in ``tests/test_dispersion.py``;
- NumPy's 1-D ``numpy.sum`` for the partial trapezoidal sums.
"""

from __future__ import annotations

import math

import numpy as np
import pytest

from driftloop import dispersion


def _noisy_covariances(rng, rows, lags, dt):
    """Rows of exponential, oscillating and noisy covariances with gaps and bad lags."""
    tau = np.arange(lags) * dt
    cov = np.exp(-tau / (rng.uniform(0.5, 30.0) * dt))[None, :] * rng.uniform(1e-3, 0.1, (rows, 1))
    cov = cov + rng.normal(0.0, 0.3, (rows, lags)) * cov[:, :1] * rng.uniform(0, 1, (rows, 1))
    if rng.random() < 0.5:
        cov = cov * np.cos(tau / (rng.uniform(2.0, 50.0) * dt))
    for i in range(rows):
        kind = rng.random()
        if kind < 0.1:
            cov[i, int(rng.integers(1, lags)):] = np.nan  # no pairs past some lag
        elif kind < 0.15:
            cov[i, int(rng.integers(0, lags))] = np.nan
        elif kind < 0.2:
            cov[i, 0] = -abs(cov[i, 0]) if kind < 0.18 else 0.0
    return tau, cov


@pytest.mark.parametrize("method", dispersion.INTEGRATION_METHODS)
def test_time_scales_of_all_resamples_are_those_of_the_scalar_rule(method):
    rng = np.random.default_rng(20)
    checked = 0
    for _ in range(60):
        lags = int(rng.integers(2, 300))
        tau, cov = _noisy_covariances(rng, int(rng.integers(1, 80)), lags,
                                      float(rng.choice([3600.0, 10800.0, 0.7])))
        fixed = float(rng.uniform(0.01, 1.0) * tau[-1]) if method == "fixed_lag" else None
        expected = []
        for row in cov:
            if np.isfinite(row[0]) and row[0] > 0:
                expected.append(dispersion.integral_time_scale(
                    tau, row / row[0], method, fixed_lag_s=fixed).time_s)
            else:
                expected.append(math.nan)
        got = dispersion._time_scales(cov, tau, method, fixed)
        # exact: the same operations in the same order as the scalar rule
        np.testing.assert_array_equal(got, np.array(expected))
        checked += int(np.isfinite(got).sum())
    assert checked > 500


def test_time_scales_raise_as_the_scalar_rule_does():
    tau = np.arange(5) * 3600.0
    cov = np.array([[1.0, 0.5, 0.2, 0.1, 0.05]])
    with pytest.raises(ValueError, match="method must be one of"):
        dispersion._time_scales(cov, tau, "somewhere", None)
    with pytest.raises(ValueError, match="needs a positive fixed_lag_s"):
        dispersion._time_scales(cov, tau, "fixed_lag", None)
    with pytest.raises(ValueError, match="beyond the last lag"):
        dispersion._time_scales(cov, tau, "fixed_lag", 5 * 3600.0)


def test_partial_sums_are_numpys_one_dimensional_sums():
    rng = np.random.default_rng(21)
    for _ in range(40):
        rows, cols = int(rng.integers(1, 200)), int(rng.integers(1, 700))
        terms = rng.standard_normal((rows, cols)) * 10.0 ** rng.integers(-8, 4, (rows, 1))
        stops = rng.integers(0, cols + 1, rows)
        expected = [float(np.sum(terms[i, :stop])) for i, stop in enumerate(stops)]
        np.testing.assert_array_equal(dispersion._prefix_sums(terms, stops), expected)


def _lag_sums_by_block(x, block, max_lag):
    """sum over pairs (i, i + k) with i in the block, both present; and the pair count."""
    present = np.isfinite(x)
    values = np.where(present, x, 0.0)
    blocks = x.size // block
    products = np.zeros((blocks, max_lag + 1))
    pairs = np.zeros((blocks, max_lag + 1))
    for i in range(x.size):
        b = min(i // block, blocks - 1)
        for k in range(min(max_lag, x.size - 1 - i) + 1):
            products[b, k] += values[i] * values[i + k]
            pairs[b, k] += present[i] and present[i + k]
    return products, pairs


@pytest.mark.parametrize("method", dispersion.INTEGRATION_METHODS)
def test_bootstrap_intervals_match_a_loop_over_the_resamples(method):
    rng = np.random.default_rng(22)
    dt, n, block, max_lag, n_boot = 3600.0, 480, 40, 30, 150
    phi = math.exp(-dt / (6 * dt))
    u = np.zeros(n)
    v = np.zeros(n)
    for i in range(1, n):  # AR(1) velocities, T_L of 6 steps
        u[i] = phi * u[i - 1] + rng.normal(0.0, 0.05)
        v[i] = phi * v[i - 1] + rng.normal(0.0, 0.05)
    u[100:130] = np.nan
    v[300:305] = np.nan
    fixed = 8 * dt if method == "fixed_lag" else None
    stats = dispersion.single_particle_statistics(
        u, v, dt, method=method, fixed_lag_s=fixed, max_lag_s=max_lag * dt, demean="none",
        block_s=block * dt, n_boot=n_boot, confidence=0.9, seed=7)

    both = np.isfinite(u) & np.isfinite(v)
    pu, pairs = _lag_sums_by_block(np.where(both, u, np.nan), block, max_lag)
    pv, _ = _lag_sums_by_block(np.where(both, v, np.nan), block, max_lag)
    blocks = pairs.shape[0]
    draws = np.random.default_rng(7).integers(0, blocks, size=(n_boot, blocks))
    tau = np.arange(max_lag + 1) * dt
    for name, top, parts in (("u", pu, 1), ("v", pv, 1), ("vector", pu + pv, 2)):
        rep_var, rep_t = [], []
        for row in draws:
            chosen_pairs = pairs[row].sum(axis=0)
            cov = top[row].sum(axis=0) / chosen_pairs / parts
            rep_var.append(cov[0])
            rep_t.append(dispersion.integral_time_scale(tau, cov / cov[0], method,
                                                        fixed_lag_s=fixed).time_s)
        rep_var, rep_t = np.array(rep_var), np.array(rep_t)
        st = stats[name]
        assert st.blocks == blocks
        # the sums are added in another order here, so the last bits may differ
        expected = {
            "variance": np.quantile(rep_var, [0.05, 0.95]),
            "time": np.quantile(rep_t, [0.05, 0.95]),
            "diffusivity": np.quantile(rep_var * rep_t, [0.05, 0.95]),
        }
        np.testing.assert_allclose(st.variance_ci_m2_s2, expected["variance"], rtol=1e-9)
        np.testing.assert_allclose(st.integral_time_ci_s, expected["time"], rtol=1e-9)
        np.testing.assert_allclose(st.diffusivity_ci_m2_s, expected["diffusivity"], rtol=1e-9)
