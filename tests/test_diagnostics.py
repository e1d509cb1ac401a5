"""Residual runs and profile reversals (zoning.fitting.diagnostics)."""

import itertools

import numpy as np
import pytest
from zoning.fitting.diagnostics import (
    find_reversals,
    longest_run_threshold,
    residual_runs,
    runs_test_z,
)

#: Largest false-alarm rate accepted for the reversal detector on pure noise
#: (its threshold is set at the 99th percentile of noise rises, so about 1%).
MAX_FALSE_REVERSAL_RATE = 0.03


def _longest_run(signs):
    best = cur = 1
    for a, b in itertools.pairwise(signs):
        cur = cur + 1 if a == b else 1
        best = max(best, cur)
    return best


@pytest.mark.parametrize("n", [6, 10, 14])
def test_longest_run_threshold_matches_exact_enumeration(n):
    # Independent check: enumerate all 2^n sign sequences (general-purpose
    # brute force, no recursion) and find the 95% point of the longest run.
    longest = np.array([_longest_run(s) for s in itertools.product((0, 1), repeat=n)])
    exact = next(L for L in range(1, n + 2) if np.mean(longest >= L) <= 0.05)
    assert longest_run_threshold(n) == exact


def test_runs_test_statistic_matches_wald_wolfowitz_formula():
    # Wald & Wolfowitz (1940): mean runs 2 n1 n2 / n + 1, variance
    # 2 n1 n2 (2 n1 n2 - n) / (n^2 (n - 1)). Alternating signs, n1 = n2 = 10:
    # R = 20, mean 11, variance 36000 / 7600.
    r = np.tile([1.0, -1.0], 10)
    expected = (20 - 11) / np.sqrt(36000 / 7600)
    assert runs_test_z(r) == pytest.approx(expected, rel=1e-12)
    assert np.isnan(runs_test_z(np.ones(8)))


def test_residual_runs_flags_systematic_misfit_and_locates_it():
    d = np.arange(40) * 5.0
    resid = np.where(d < 100, 0.3, -0.3)
    runs = residual_runs(d, resid)
    assert list(runs["sign"]) == [1, -1]
    assert runs["start_um"].iloc[0] == 0.0 and runs["end_um"].iloc[0] == 95.0
    assert list(runs["n_spots"]) == [20, 20]


def test_residual_runs_rarely_fire_on_random_residuals():
    rng = np.random.default_rng(3)
    d = np.arange(60) * 5.0
    hits = sum(len(residual_runs(d, rng.standard_normal(60))) > 0 for _ in range(200))
    assert hits / 200 <= 0.08  # 5% nominal; binomial sd 1.5% at 200 trials


def test_reversal_is_found_where_the_profile_goes_back_towards_the_core():
    rng = np.random.default_rng(7)
    d = np.arange(60) * 5.0
    fo = 88.0 - 0.08 * np.arange(60)
    fo[35:] += 3.0  # recharge: +3 mol% Fo from 175 um outwards
    fo = fo + rng.normal(0, 0.2, 60)
    rev = find_reversals(d, fo, 0.2)
    assert len(rev) == 1
    assert 160.0 <= rev["start_um"].iloc[0] <= 175.0
    assert 170.0 <= rev["end_um"].iloc[0] <= 190.0
    assert rev["amplitude"].iloc[0] > 1.5


def test_no_reversal_on_normal_zoning_or_flat_noise():
    rng = np.random.default_rng(11)
    d = np.arange(60) * 5.0
    hits = 0
    for k in range(200):
        base = 85.0 if k % 2 else 88.0 - 0.1 * np.arange(60)
        hits += len(find_reversals(d, base + rng.normal(0, 0.2, 60), 0.2)) > 0
    assert hits / 200 <= MAX_FALSE_REVERSAL_RATE


def test_a_single_stray_spot_is_not_a_reversal():
    rng = np.random.default_rng(5)
    d = np.arange(60) * 5.0
    fo = 88.0 - 0.08 * np.arange(60) + rng.normal(0, 0.2, 60)
    fo[20] += 4.0  # one bad analysis (20 sigma), not a zone
    assert len(find_reversals(d, fo, 0.2)) == 0
    fo[21] += 4.0  # two consecutive spots: a (thin) zone
    assert len(find_reversals(d, fo, 0.2)) == 1
