"""Residual runs and profile reversals (zoning.fitting.diagnostics)."""

import itertools

import numpy as np
import pytest
from _tolerances import ATOL_CLOSED_FORM
from numpy.testing import assert_allclose
from zoning.fitting.diagnostics import (
    find_reversals,
    longest_run_probability,
    longest_run_threshold,
    residual_runs,
    reversal_threshold,
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


def _old_longest_run_distribution(n):
    """The former O(n^3)-time, O(n^2)-memory recursion, kept as a reference.

    Returns P(longest run < L) for L = 1 .. n + 1 (one row per L; column k:
    current run of length k + 1 and no run of length L yet).
    """
    lengths = np.arange(1, n + 2)
    state = np.zeros((lengths.size, n + 1))
    state[:, 0] = 1.0
    valid = np.arange(n + 1)[None, :] < (lengths[:, None] - 1)
    state *= valid
    for _ in range(1, n):
        new = np.zeros_like(state)
        new[:, 0] = 0.5 * state.sum(axis=1)
        new[:, 1:] = 0.5 * state[:, :-1]
        state = new * valid
    return state.sum(axis=1)


def _old_longest_run_threshold(n, alpha):
    if n <= 0:
        return 1
    p_no_run = _old_longest_run_distribution(n)
    ok = np.flatnonzero(1.0 - p_no_run <= alpha)
    return int(ok[0] + 1) if ok.size else n + 1


@pytest.mark.parametrize("n", [1, 2, 3, 7, 20, 63, 150])
def test_longest_run_probability_matches_the_former_recursion(n):
    old = 1.0 - _old_longest_run_distribution(n)
    new = np.array([longest_run_probability(n, L) for L in range(1, n + 2)])
    assert_allclose(new, old, rtol=0, atol=ATOL_CLOSED_FORM)


@pytest.mark.parametrize("n", [6, 10, 14])
def test_longest_run_probability_matches_exact_enumeration(n):
    longest = np.array([_longest_run(s) for s in itertools.product((0, 1), repeat=n)])
    for L in range(1, n + 2):
        assert_allclose(longest_run_probability(n, L), np.mean(longest >= L),
                        rtol=0, atol=ATOL_CLOSED_FORM)


def test_longest_run_threshold_is_the_former_one_on_small_n():
    for n in range(0, 160):
        for alpha in (0.01, 0.05, 0.1, 0.2, 0.5):
            assert longest_run_threshold(n, alpha) == _old_longest_run_threshold(n, alpha), \
                (n, alpha)


def test_longest_run_threshold_on_long_traverses_is_the_known_asymptote():
    # Schilling (1990, from memory): the longest run of heads in n tosses is
    # about log2(n); counting runs of either sign, about log2(n) + 1, with a
    # spread of about 2 runs and a right tail of about 2^-k per extra spot.
    # The 95% point lies a few spots above that.
    for n in (1_000, 62_000, 500_000):
        limit = longest_run_threshold(n)
        assert np.log2(n) + 1 < limit <= np.log2(n) + 1 + 6
        assert longest_run_probability(n, limit) <= 0.05 < longest_run_probability(n, limit - 1)


def test_longest_run_threshold_refuses_no_false_alarm_level():
    assert longest_run_threshold(50, 0.0) == 51


def test_reversal_threshold_is_the_same_when_simulated_in_blocks(monkeypatch):
    import zoning.fitting.diagnostics as diagnostics

    whole = reversal_threshold(40, 0.3, n_sim=300)
    monkeypatch.setattr(diagnostics, "_SIMULATION_BLOCK", 40 * 7)
    assert reversal_threshold(40, 0.3, n_sim=300) == whole


def test_running_median_of_three_is_the_median():
    from zoning.fitting.diagnostics import _running_median

    rng = np.random.default_rng(4)
    y = rng.normal(size=(5, 40))
    y[2, 7] = np.nan
    padded = np.pad(y, [(0, 0), (1, 1)], mode="edge")
    expected = np.median(np.lib.stride_tricks.sliding_window_view(padded, 3, axis=-1), axis=-1)
    np.testing.assert_array_equal(_running_median(y, 3), expected)
    np.testing.assert_array_equal(_running_median(y[0], 5), np.median(
        np.lib.stride_tricks.sliding_window_view(np.pad(y[0], 2, mode="edge"), 5), axis=-1))
