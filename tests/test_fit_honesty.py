"""Honesty of a fit: noise is not recharge, reported values inside their bands,
no crash or NaN on any posterior draw, a warning when the melt is drained.

Synthetic traverses are made by the forward model with Gaussian noise
(invented data; "FRL" = the fictional Ferrolyn field).
"""

import warnings

import numpy as np
import pandas as pd
import pytest
from _tolerances import GROWTH_ONLY
from zoning.fitting import fit_traverse
from zoning.fitting.bestfit import fit_candidates
from zoning.fitting.choice import choose_model
from zoning.fitting.diagnostics import noise_scatter, reversal_sigma
from zoning.fitting.problem import prepare_problem
from zoning.fitting.sampling import run_ensemble
from zoning.fitting.summary import _parent

from zoning.exceptions import CalibrationRangeWarning, ConvergenceWarning, DataQualityWarning
from zoning.models import CrystallizationModel
from zoning.traverse import Traverse

MELT = {"olivine": {"FeO": 9.5}, "plagioclase": {"Na2O": 3.1}}
#: Relative standard error of a 1.4826 x MAD scale estimate from ~400
#: Gaussian values is about 1.17 / sqrt(400) ~ 6 % (asymptotic efficiency of
#: the MAD, 37 %; from memory): 3 standard errors.
RTOL_SCATTER = 0.18


def _traverse(mineral, truth, *, sigma, n=60, radius=300.0, seed=0, name="FRL-31"):
    model = CrystallizationModel(mineral, MELT[mineral])
    d = np.linspace(0.0, radius, n)
    out = model.profile(d, radius, **truth)
    rng = np.random.default_rng(seed)
    major = "fo" if mineral == "olivine" else "an"
    spots = pd.DataFrame({
        "row": np.arange(2, n + 2), "point": [str(i + 1) for i in range(n)], "label": "",
        "distance_um": d, major: out["crystal"] + rng.normal(0.0, sigma, n),
        "status": "ok", "reason": "",
    })
    return Traverse(name, f"{name}.csv", mineral, spots)


def _choice(traverse, **kw):
    problem = prepare_problem(traverse, melt=MELT[traverse.mineral], traces=(),
                              **{**GROWTH_ONLY, **kw})
    return choose_model(problem, fit_candidates(problem))


# --- reversals against the noise the data show --------------------------------------


def test_noise_scatter_recovers_the_sigma_of_white_noise_on_a_curved_trend():
    rng = np.random.default_rng(3)
    x = np.sort(rng.uniform(0.0, 300.0, 400))  # uneven spacing
    trend = 85.0 - 8.0 * (x / 300.0) ** 3
    est = noise_scatter(x, trend + rng.normal(0.0, 0.6, x.size))
    assert est == pytest.approx(0.6, rel=RTOL_SCATTER)
    # a smooth trend alone has (almost) no scatter
    assert noise_scatter(x, trend) < 0.01


def test_reversal_sigma_is_never_below_stated_and_never_above_the_scaled_sigma():
    rng = np.random.default_rng(4)
    x = np.linspace(0.0, 200.0, 80)
    y = 88.0 - 0.02 * x + rng.normal(0.0, 0.6, x.size)
    assert reversal_sigma(x, y, 0.2, sigma_scale=1.0) == 0.2   # capped by the fit's sigma
    assert reversal_sigma(x, y, 0.2, sigma_scale=10.0) == pytest.approx(
        noise_scatter(x, y))
    assert reversal_sigma(x, y, 2.0, sigma_scale=3.0) == 2.0   # never below stated


@pytest.mark.parametrize("seed", range(6))
def test_noise_three_times_the_stated_sigma_makes_no_reversal(seed):
    truth = {"melt_mg_number": 0.72, "f_rim": 0.2, "retention": 0.0, "kd": 0.30}
    tr = _traverse("olivine", truth, sigma=0.6, seed=seed)   # stated sigma 0.2
    choice = _choice(tr, sigma=0.2)
    assert choice.problem.sigma_scale > 2.0   # the fit saw the excess scatter
    assert len(choice.reversals) == 0
    assert choice.preferred_model != ""


def test_a_real_reversal_is_still_found_when_the_noise_is_as_stated():
    # negative control of the test above: a 3 mol% rise spread over 6 spots
    # at the stated 0.2 mol% noise inflates the Birge ratio, not the scatter.
    truth = {"melt_mg_number": 0.72, "f_rim": 0.2, "retention": 0.0, "kd": 0.30}
    tr = _traverse("olivine", truth, sigma=0.2, seed=1)
    spots = tr.spots.copy()
    d = spots["distance_um"].to_numpy(float)
    spots["fo"] = spots["fo"] + np.where(d > 150.0, 3.0 * np.clip((d - 150.0) / 30.0, 0, 1), 0)
    choice = _choice(Traverse("FRL-32", "FRL-32.csv", "olivine", spots), sigma=0.2)
    assert len(choice.reversals) == 1
    assert choice.preferred_model == ""
    assert choice.reversal_sigma < 0.3


# --- reported value inside its band; derived quantities never crash -------------------


@pytest.fixture(scope="module")
def plagioclase_fit():
    truth = {"melt_ca_number": 0.62, "f_rim": 0.45, "retention": 0.3, "kd": 2.0}
    tr = _traverse("plagioclase", truth, sigma=0.5, seed=5, name="FRL-33")
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", ConvergenceWarning)
        warnings.simplefilter("ignore", CalibrationRangeWarning)
        return fit_traverse(tr, melt=MELT["plagioclase"], seed=1, n_steps=400,
                            **GROWTH_ONLY), truth


def test_every_reported_value_lies_inside_its_band_and_the_best_fit_is_kept(plagioclase_fit):
    r, _ = plagioclase_fit
    for name, e in r.estimates.items():
        assert e.lo95 <= e.best <= e.hi95, name
        assert np.isfinite(e.best_fit), name
    assert r.estimates["f_rim"].best == r.estimates["f_rim"].median


def test_posterior_draws_all_lie_in_the_prior(plagioclase_fit):
    r, _ = plagioclase_fit
    names = r.parameter_names
    spec = {s.name: s for s in CrystallizationModel("plagioclase", MELT["plagioclase"]).parameters}
    for j, n in enumerate(names):
        assert np.all(r.samples[:, j] >= spec[n].lower) and np.all(r.samples[:, j] <= spec[n].upper)


def test_parent_melt_of_rows_outside_the_prior_is_nan_not_an_error():
    truth = {"melt_ca_number": 0.62, "f_rim": 0.45, "retention": 0.3, "kd": 2.0}
    tr = _traverse("plagioclase", truth, sigma=0.5, seed=5, name="FRL-33")
    problem = prepare_problem(tr, melt=MELT["plagioclase"], traces=(), **GROWTH_ONLY)
    inside = np.array([0.62, 0.45, 0.3, 2.0])
    rows = np.vstack([inside, inside, inside])
    rows[1, 0] = 0.995   # melt Ca# beyond its range
    rows[2, 0] = np.nan
    out = _parent(problem, rows)
    assert np.isfinite(out["melt_oxide"][0])
    assert np.isnan(out["melt_oxide"][1:]).all()


def test_sampler_started_partly_outside_the_support_keeps_only_finite_draws():
    # a standard normal cut at x0 > 0: half of a start ball around 0.01
    # lies where the posterior is zero; no -inf - -inf (NaN) comparisons.
    def log_prob(u):
        u = np.atleast_2d(u)
        return np.where(u[:, 0] > 0.0, -0.5 * (u**2).sum(axis=1), -np.inf)

    with warnings.catch_warnings():
        warnings.simplefilter("error", RuntimeWarning)
        chain = run_ensemble(log_prob, np.array([0.01, 0.0]), np.array([-5.0, -5.0]),
                             np.array([5.0, 5.0]), n_walkers=16, n_steps=400, burn_in=100,
                             seed=2, covariance=np.eye(2))
    assert np.all(chain.flat[:, 0] > 0.0) and np.all(chain.thinned[:, 0] > 0.0)


# --- melt driven towards exhaustion ------------------------------------------------------


def test_fit_that_drains_the_melt_warns_and_names_the_missing_minerals():
    model = CrystallizationModel("olivine", MELT["olivine"])
    f_max = float(model.max_fraction(melt_mg_number=0.72))
    truth = {"melt_mg_number": 0.72, "f_rim": 0.95 * f_max, "retention": 0.0, "kd": 0.30}
    tr = _traverse("olivine", truth, sigma=0.2, seed=7, name="FRL-34")
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        r = fit_traverse(tr, melt=MELT["olivine"], traces=(), seed=1, n_steps=300,
                         **GROWTH_ONLY)
    texts = [str(w.message) for w in caught if issubclass(w.category, DataQualityWarning)]
    assert any("exhaustion" in t and "not modelled" in t for t in texts)
    assert any("exhaustion" in t for t in r.warnings)


def test_ordinary_fit_does_not_warn_of_exhaustion():
    truth = {"melt_mg_number": 0.72, "f_rim": 0.12, "retention": 0.0, "kd": 0.30}
    tr = _traverse("olivine", truth, sigma=0.2, seed=8, name="FRL-35")
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", ConvergenceWarning)
        # the glass thermometer may warn of its calibration range: not the point here
        warnings.simplefilter("ignore", CalibrationRangeWarning)
        r = fit_traverse(tr, melt=MELT["olivine"], traces=(), seed=1, n_steps=300,
                         **GROWTH_ONLY)
    assert not any("exhaustion" in t for t in r.warnings)
