"""Posterior bands and the emcee wrapper (zoning.fitting.sampling)."""

import numpy as np
import pytest
from scipy import stats
from zoning.fitting.sampling import credible_band, run_ensemble

#: Monte-Carlo error of a percentile from 200,000 independent draws is about
#: 0.01 sd; allow five times that.
ATOL_PERCENTILE_SD = 0.05


def test_central_band_of_a_normal_matches_scipy_quantiles():
    rng = np.random.default_rng(0)
    x = rng.normal(5.0, 1.0, 200_000)
    med, lo, hi, kind = credible_band(x, 0.0, 10.0)
    assert kind == "central"
    assert lo == pytest.approx(stats.norm.ppf(0.025, 5.0), abs=ATOL_PERCENTILE_SD)
    assert hi == pytest.approx(stats.norm.ppf(0.975, 5.0), abs=ATOL_PERCENTILE_SD)
    assert med == pytest.approx(5.0, abs=ATOL_PERCENTILE_SD)


def test_posterior_piled_on_a_bound_gives_a_one_sided_limit():
    # Half-normal at the lower bound 0: the band starts at the bound and ends
    # at the 95th percentile of the half-normal (scipy.stats.halfnorm).
    rng = np.random.default_rng(1)
    x = np.abs(rng.normal(0.0, 0.1, 200_000))
    _, lo, hi, kind = credible_band(x, 0.0, 1.0)
    assert kind == "upper_limit"
    assert lo == 0.0
    assert hi == pytest.approx(stats.halfnorm.ppf(0.95, scale=0.1), abs=0.1 * ATOL_PERCENTILE_SD)
    # The mirror image at the upper bound.
    _, lo, hi, kind = credible_band(1.0 - x, 0.0, 1.0)
    assert kind == "lower_limit" and hi == 1.0


def test_flat_posterior_over_the_whole_prior_gives_the_prior_range():
    rng = np.random.default_rng(2)
    _, lo, hi, kind = credible_band(rng.uniform(0.0, 1.0, 50_000), 0.0, 1.0)
    assert kind == "bounds" and (lo, hi) == (0.0, 1.0)


def test_ensemble_recovers_a_correlated_gaussian_and_is_reproducible():
    mean = np.array([1.0, -2.0])
    cov = np.array([[1.0, 0.9], [0.9, 1.0]])
    prec = np.linalg.inv(cov)

    def log_prob(theta):
        dx = theta - mean
        return -0.5 * np.einsum("ij,jk,ik->i", dx, prec, dx)

    lower, upper = np.array([-20.0, -20.0]), np.array([20.0, 20.0])
    kw = dict(n_walkers=16, n_steps=1500, burn_in=300, seed=5)
    a = run_ensemble(log_prob, mean, lower, upper, covariance=cov, **kw)
    b = run_ensemble(log_prob, mean, lower, upper, covariance=cov, **kw)
    assert np.array_equal(a.flat, b.flat)
    # Tolerance: 4 Monte-Carlo standard errors, sd / sqrt(ESS).
    se = 1.0 / np.sqrt(a.ess.min())
    np.testing.assert_allclose(a.flat.mean(axis=0), mean, atol=4 * se)
    np.testing.assert_allclose(a.flat.std(axis=0), [1.0, 1.0], atol=8 * se)
    assert np.corrcoef(a.flat, rowvar=False)[0, 1] == pytest.approx(0.9, abs=0.05)
    assert np.all(a.tau >= 1.0) and np.all(a.ess > 0)
    assert 0.05 < a.acceptance_fraction < 0.95
