"""The five stages of a fit, each on its own: prepare, best fits, choose, sample, summarise."""

import sys
import warnings
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from zoning.fitting.bestfit import (
    Candidate,
    CandidateFit,
    candidate_models,
    fit_candidates,
    shared_starts,
)
from zoning.fitting.choice import (
    CLEAR_PREFERENCE_BIC,
    NO_CLEAR_PREFERENCE,
    choose_model,
    comparison_table,
)
from zoning.fitting.problem import prepare_problem
from zoning.fitting.sampling import sample_posterior
from zoning.fitting.summary import summarise_fit

from zoning.exceptions import DataQualityWarning
from zoning.models import CrystallizationModel
from zoning.traverse import Traverse

sys.path.insert(0, str(Path(__file__).resolve().parent))
from _tolerances import GROWTH_ONLY, RTOL_IDENTITY  # noqa: E402

MELT = {"FeO": 9.5}
TRUTH = dict(melt_mg_number=0.72, f_rim=0.12, retention=0.0, kd=0.30, melt0_ni_ppm=300.0)


def _traverse(*, n=30, seed=3, shift_outer=0.0, name="FRL-21"):
    """Invented olivine traverse with NiO from the forward model plus noise."""
    model = CrystallizationModel("olivine", MELT, traces=("Ni",))
    d = np.linspace(0.0, 200.0, n)
    out = model.profile(d, 200.0, **TRUTH)
    rng = np.random.default_rng(seed)
    fo = out["crystal"] + rng.normal(0.0, 0.2, n)
    fo[d > 120.0] += shift_outer
    spots = pd.DataFrame({
        "row": np.arange(2, n + 2), "point": [str(i) for i in range(n)], "label": "",
        "distance_um": d, "fo": fo, "NiO": out["crystal_nio_wt"] + rng.normal(0, 0.015, n),
        "status": "ok", "reason": "",
    })
    return Traverse(name, f"{name}.csv", "olivine", spots)


@pytest.fixture(scope="module")
def problem():
    return prepare_problem(_traverse(), melt=MELT, **GROWTH_ONLY)


@pytest.fixture(scope="module")
def fits(problem):
    return fit_candidates(problem)


# --- stage 1: prepare ----------------------------------------------------------------


def test_prepare_lays_out_free_and_fixed_parameters_in_model_order(problem):
    order = [s.name for s in problem.model.parameters]
    assert set(problem.free) >= {"melt_mg_number", "f_rim", "retention", "kd", "melt0_ni_ppm"}
    assert list(problem.free) == [n for n in order if n in problem.free]
    assert set(problem.free).isdisjoint(problem.fixed)
    assert set(problem.free) | set(problem.fixed) == set(order)
    assert problem.n_data == 60  # 30 Fo + 30 NiO
    assert np.all(problem.lower < problem.upper)
    assert problem.kd0 == 0.30 and problem.kd_sd == 0.03  # Roeder & Emslie (1970)


def test_with_fixed_returns_a_copy_and_leaves_the_problem_unchanged(problem):
    sub = problem.with_fixed({"retention": 1.0})
    assert "retention" not in sub.free and sub.fixed["retention"] == 1.0
    assert "retention" in problem.free and "retention" not in problem.fixed
    assert sub.lower.size == problem.lower.size - 1
    theta = np.array([[0.7, 0.1, 0.3, 200.0]])
    full = problem.expand(theta, sub)
    assert full[0, problem.free.index("retention")] == 1.0
    assert full[0, problem.free.index("melt0_ni_ppm")] == 200.0


def test_residuals_and_log_posterior_shapes_and_bounds(problem):
    theta = np.array([[0.72, 0.12, 0.0, 0.30, 300.0], [0.70, 0.10, 0.5, 0.31, 250.0]])
    z = problem.residuals(problem.params(theta), 2)
    assert z.shape == (2, problem.n_data + 1)
    lp = problem.log_prob(theta)
    # -1/2 of the sum of squares, Kd prior included (closed form of the objective)
    np.testing.assert_allclose(lp, -0.5 * (z**2).sum(axis=1), rtol=RTOL_IDENTITY)
    outside = theta.copy()
    outside[0, 2] = 1.5  # retention above its bound
    assert problem.log_prob(outside)[0] == -np.inf
    assert not np.isnan(problem.log_prob_sampler(problem.to_sampler(outside))).any()


def test_sampler_coordinates_round_trip(problem):
    theta = np.array([[0.72, 0.12, 0.0, 0.30, 300.0], [0.66, 0.3, 0.9, 0.25, 100.0]])
    back = problem.from_sampler(problem.to_sampler(theta))
    np.testing.assert_allclose(back, theta, rtol=1e-12)


def test_sampler_coordinates_log_columns_and_jacobian_match_differences(problem):
    # F at the rim and the initial Ni content are sampled as logarithms; the
    # log-Jacobian that keeps the flat priors must equal log|det| of the
    # derivative of from_sampler (closed form against central differences).
    assert [problem.free[i] for i in problem.log_columns] == ["f_rim", "melt0_ni_ppm"]
    theta = np.array([[0.72, 0.12, 0.3, 0.30, 300.0]])
    u = problem.to_sampler(theta)
    lo, hi = problem.sampler_bounds()
    assert np.all((u >= lo) & (u <= hi))
    step = 1e-6 * np.maximum(np.abs(u[0]), 1.0)
    jac = np.empty((u.shape[1], u.shape[1]))
    for j in range(u.shape[1]):
        e = np.zeros_like(u)
        e[0, j] = step[j]
        up, down = problem.from_sampler(u + e)[0], problem.from_sampler(u - e)[0]
        jac[:, j] = (up - down) / (2 * step[j])
    expected = np.log(abs(np.linalg.det(jac)))
    # central differences of smooth maps: relative error ~ step^2
    np.testing.assert_allclose(problem.log_jacobian(u)[0], expected, rtol=1e-7)
    # the sampler's log-posterior is the posterior's plus that Jacobian
    np.testing.assert_allclose(problem.log_prob_sampler(u)[0],
                               problem.log_prob(theta)[0] + expected, rtol=1e-7)


# --- stage 2: best fits ------------------------------------------------------------------


def test_candidates_name_processes_and_retention(problem):
    names = [c.name for c in candidate_models(problem)]
    assert names == ["growth r free", "growth r=0", "growth r=1"]
    c = Candidate(("section", "diffusion"), "0")
    assert c.name == "growth+section+diffusion r=0"
    assert c.process_label == "growth+section+diffusion"
    assert Candidate(("section",), "free").contains(Candidate((), "1"))
    assert not Candidate((), "0").contains(Candidate((), "1"))


def test_shared_starts_lie_inside_the_bounds(problem):
    starts, n_grid = shared_starts(problem)
    assert n_grid > starts.shape[0] >= 4
    assert np.all(starts >= problem.lower) and np.all(starts <= problem.upper)


def test_nested_fits_are_never_better_than_the_free_fit(fits):
    by = {f.candidate.name: f for f in fits}
    free = by["growth r free"]
    for name in ("growth r=0", "growth r=1"):
        # r fixed is a special case of r free: its optimum cannot be lower
        # (tolerance: the optimiser's convergence, 1e-3 in chi-square).
        assert free.objective <= by[name].objective + 1e-3
        j = free.problem.free.index("retention")
        assert by[name].theta_full[j] == float(by[name].candidate.retention)
    assert free.n_params == by["growth r=0"].n_params + 1


# --- stage 3: choose ------------------------------------------------------------------------


class _Layout:
    """Stand-in for a FitProblem: only the free parameter names matter here."""

    def __init__(self, k):
        self.free = tuple(f"p{i}" for i in range(k))


def _fake_fit(name, processes, retention, objective, k):
    return CandidateFit(Candidate(processes, retention), _Layout(k), np.zeros(k), np.zeros(k),
                        objective, 1, 1, True)


def test_comparison_table_bic_and_weights_known_answer():
    # BIC = chi2 + k ln n (Schwarz 1978); weights exp(-dBIC/2), normalised.
    fits = [_fake_fit("a", (), "free", 50.0, 5), _fake_fit("b", (), "0", 52.0, 4)]
    t = comparison_table(fits, n_data=100)
    np.testing.assert_allclose(t["bic"], [50 + 5 * np.log(100), 52 + 4 * np.log(100)])
    np.testing.assert_allclose(t["aic"], [60.0, 60.0])
    d = t["bic"] - t["bic"].min()
    np.testing.assert_allclose(t["delta_bic"], d)
    w = np.exp(-0.5 * d)
    np.testing.assert_allclose(t["weight"], w / w.sum())
    assert list(t["processes"]) == ["growth", "growth"] and list(t["retention"]) == ["free", "0"]


def test_close_models_give_no_clear_preference(problem, fits):
    choice = choose_model(problem, fits)
    bic = np.sort(choice.comparison["bic"].to_numpy())
    assert choice.delta_bic == pytest.approx(bic[1] - bic[0])
    if choice.delta_bic < CLEAR_PREFERENCE_BIC:
        assert choice.preferred_model == NO_CLEAR_PREFERENCE
    else:
        assert choice.preferred_model == choice.comparison.loc[
            choice.comparison["bic"].idxmin(), "model"]
    assert choice.sampled.candidate == Candidate((), "free")


def test_reversal_voids_the_preferred_model():
    tr = _traverse(shift_outer=3.0, name="FRL-22")
    prob = prepare_problem(tr, melt=MELT, **GROWTH_ONLY)
    choice = choose_model(prob, fit_candidates(prob))
    assert len(choice.reversals) == 1
    assert choice.preferred_model == ""


# --- stage 4: sample -------------------------------------------------------------------------


def test_sample_posterior_is_reproducible_and_inside_the_prior(problem, fits):
    choice = choose_model(problem, fits)
    kw = dict(n_walkers=16, n_steps=120, seed=5)
    a = sample_posterior(choice.problem, choice.sampled.theta, **kw)
    b = sample_posterior(choice.problem, choice.sampled.theta, **kw)
    np.testing.assert_array_equal(a.flat, b.flat)
    assert a.flat.shape[1] == len(choice.problem.free)
    assert np.all(a.flat >= choice.problem.lower) and np.all(a.flat <= choice.problem.upper)
    assert a.short and "--steps" in a.message  # 120 steps are too few on purpose


# --- stage 5: summarise -------------------------------------------------------------------


def test_summarise_fills_every_field_and_warns_at_the_callers_line(problem, fits):
    choice = choose_model(problem, fits)
    post = sample_posterior(choice.problem, choice.sampled.theta, n_walkers=16, n_steps=120,
                            seed=5)
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        result = summarise_fit(problem, fits, choice, post, seed=5)
    assert result.preferred_model == choice.preferred_model
    assert result.delta_bic == choice.delta_bic
    assert list(result.parameter_names) == list(choice.problem.free)
    for name in ("melt_mg_number", "melt_mgo_wt", "f_rim", "retention", "kd", "melt0_ni_ppm"):
        assert name in result.estimates
    assert len(result.spots) == 30 and "NiO_model" in result.spots
    assert caught and all(w.filename == __file__ for w in caught)
    assert not any(issubclass(w.category, DataQualityWarning) for w in caught)
