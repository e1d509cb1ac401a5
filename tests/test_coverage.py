"""Calibration of the 95% bands on synthetic traverses with known truths.

The full run (>= 100 traverses) is ``python benchmarks/fit.py``; here a small
fast version runs with the suite and a larger one is marked ``slow``.
"""

import warnings

import numpy as np
import pandas as pd
import pytest
from _tolerances import GROWTH_ONLY
from zoning.fitting import fit_traverse

from zoning.models import CrystallizationModel
from zoning.traverse import Traverse

MELT = {"olivine": {"FeO": 9.5}, "plagioclase": {"Na2O": 3.1}}
RATIO = {"olivine": "melt_mg_number", "plagioclase": "melt_ca_number"}
#: Kd priors of the fit (olivine: Roeder & Emslie 1970, 0.30 +/- 0.03;
#: plagioclase: the model default 2.0 with the fit's 25% sd); truths are drawn
#: from them so that the bands can be calibrated.
KD_PRIOR = {"olivine": (0.30, 0.03), "plagioclase": (2.0, 0.5)}


def _case(k, seed):
    rng = np.random.default_rng([seed, k])
    mineral = ("olivine", "plagioclase")[k % 2]
    model = CrystallizationModel(mineral, MELT[mineral])
    lo, hi = (0.66, 0.80) if mineral == "olivine" else (0.50, 0.75)
    mean, sd = KD_PRIOR[mineral]
    kd = float(np.clip(rng.normal(mean, sd), mean - 3 * sd, mean + 3 * sd))
    # (ratio, F at the rim) uniform over the reachable region, like the fit's
    # flat priors.
    while True:
        ratio = float(rng.uniform(lo, hi))
        f_rim = float(rng.uniform(0.0, 0.95))
        if f_rim < 0.98 * float(model.max_fraction(**{RATIO[mineral]: ratio})):
            break
    retention = (0.0, 1.0, float(rng.uniform()))[k % 3]
    truth = {RATIO[mineral]: ratio, "f_rim": f_rim, "retention": retention, "kd": kd}
    sigma = 0.2 if mineral == "olivine" else 0.5
    n = 30
    d = np.linspace(0.0, 200.0, n)
    out = model.profile(d, 200.0, **truth)
    major = "fo" if mineral == "olivine" else "an"
    spots = pd.DataFrame(
        {
            "row": np.arange(2, n + 2), "point": [str(i) for i in range(n)], "label": "",
            "distance_um": d, major: out["crystal"] + rng.normal(0.0, sigma, n),
            "status": "ok", "reason": "",
        }
    )
    return Traverse(f"FRL-SYN-{k}", "synthetic", mineral, spots), truth


def _coverage(n_cases, seed, **fit_kw):
    hits = {"ratio": [], "f_rim": [], "retention": [], "kd": []}
    for k in range(n_cases):
        tr, truth = _case(k, seed)
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")  # short chains warn by design
            r = fit_traverse(tr, melt=MELT[tr.mineral], seed=k, **{**GROWTH_ONLY, **fit_kw})
        for q, name in (("ratio", RATIO[tr.mineral]), ("f_rim", "f_rim"),
                        ("retention", "retention"), ("kd", "kd")):
            e = r.estimates[name]
            hits[q].append(e.lo95 <= truth[name] <= e.hi95)
    return {q: float(np.mean(v)) for q, v in hits.items()}


def test_small_coverage_run_contains_the_truth_in_most_cases():
    # 6 traverses: olivine and plagioclase, r = 0, 1 and in between. With
    # calibrated 95% bands, fewer than 4 hits out of 6 has probability 0.2%
    # (binomial), so the bound below fails only for badly miscalibrated bands.
    coverage = _coverage(6, seed=99, n_walkers=32, n_steps=300)
    for q, value in coverage.items():
        assert value >= 4 / 6, (q, coverage)


@pytest.mark.slow
def test_coverage_of_the_95_percent_bands_is_calibrated():
    # 40 traverses: binomial(40, 0.95) lies in [0.85, 1.0] with probability 99%.
    coverage = _coverage(40, seed=7)
    for q, value in coverage.items():
        assert 0.85 <= value <= 1.0, (q, coverage)
