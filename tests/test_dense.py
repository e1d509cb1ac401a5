"""Spot-dense traverses: the model at nodes, interpolated to the spots (zoning.fitting.dense)."""

import dataclasses
import warnings

import numpy as np
import pandas as pd
import pytest
from numpy.testing import assert_allclose
from zoning.fitting.dense import (
    DENSE_SPOTS,
    DENSE_TOLERANCE,
    DenseNodes,
    plan_dense_nodes,
    predict_at,
)
from zoning.fitting.problem import prepare_problem

from zoning.models import CrystallizationModel
from zoning.traverse import Traverse

MELT = {"FeO": 9.5}
#: Invented truth of the synthetic line scans.
TRUTH = dict(melt_mg_number=0.72, f_rim=0.20, retention=0.3, kd=0.30, melt0_ni_ppm=300.0)


def _line_scan(n, *, radius=300.0, seed=5):
    """Invented olivine line scan of ``n`` spots (forward model plus microprobe noise)."""
    model = CrystallizationModel("olivine", MELT, traces=("Ni",))
    d = np.linspace(0.0, radius, n)
    out = model.profile(d, radius, **TRUTH)
    rng = np.random.default_rng(seed)
    spots = pd.DataFrame({
        "row": np.arange(2, n + 2), "point": [str(i) for i in range(n)], "label": "",
        "distance_um": d, "fo": out["crystal"] + rng.normal(0.0, 0.2, n),
        "NiO": out["crystal_nio_wt"] + rng.normal(0, 0.015, n), "status": "ok", "reason": "",
    })
    return Traverse("FRL-40 scan", "FRL-40.csv", "olivine", spots)


@pytest.fixture(scope="module")
def dense_problem():
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        return prepare_problem(_line_scan(3000), melt=MELT)


def test_short_traverses_evaluate_every_spot():
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")  # Ni law calibration range of the invented melt
        problem = prepare_problem(_line_scan(DENSE_SPOTS), melt=MELT)
    assert problem.dense is None and "model_nodes" not in problem.options


def test_dense_plan_is_recorded_and_reproducible(dense_problem):
    plan = dense_problem.dense
    assert plan is not None and plan.n_nodes < 3000 // 2
    assert plan.max_error <= DENSE_TOLERANCE
    assert dense_problem.options["model_nodes"] == plan.n_nodes
    assert any("interpolated to the spots" in n for n in dense_problem.notes)
    again = plan_dense_nodes(dense_problem)
    assert_allclose(again.nodes_um, plan.nodes_um, rtol=0, atol=0)


def test_interpolation_is_exact_for_a_straight_line():
    # closed form: linear interpolation reproduces any linear function exactly
    nodes = np.array([0.0, 1.5, 4.0, 10.0])
    d = np.array([0.0, 0.7, 1.5, 3.9, 9.99, 10.0])
    plan = DenseNodes.from_nodes(nodes, d)
    line = np.vstack([2.0 * nodes - 1.0, -0.5 * nodes + 3.0])  # two parameter sets
    out = plan.interpolate({"crystal": line, "label": "kept"})
    assert_allclose(out["crystal"], np.vstack([2.0 * d - 1.0, -0.5 * d + 3.0]), rtol=1e-14)
    assert out["label"] == "kept"


def test_interpolated_model_matches_every_spot_at_the_truth(dense_problem):
    # the truth was not among the check draws: an independent check of the plan
    exact = dataclasses.replace(dense_problem, dense=None)
    params = {**dense_problem.fixed, **{k: np.array([v]) for k, v in TRUTH.items()
                                        if k in dense_problem.free}}
    keys = ("crystal", "crystal_nio_wt")
    a = dense_problem.predict(params, keys=keys)
    b = exact.predict(params)
    err_fo = np.abs(a["crystal"] - b["crystal"]) / dense_problem.sigma
    trace = dense_problem.traces[0]
    err_ni = np.abs(a["crystal_nio_wt"] - b["crystal_nio_wt"]) / trace.sigma
    assert err_fo.max() <= DENSE_TOLERANCE and err_ni.max() <= DENSE_TOLERANCE


def test_predict_at_covers_points_outside_the_nodes(dense_problem):
    exact = dataclasses.replace(dense_problem, dense=None)
    params = {**dense_problem.fixed, **{k: np.array([v]) for k, v in TRUTH.items()
                                        if k in dense_problem.free}}
    pts = np.array([305.0, 0.0, 150.0, 299.9, 300.0, 310.0])  # two beyond the node range
    a = predict_at(dense_problem, params, pts)["crystal"]
    b = exact.predict(params, pts)["crystal"]
    assert a.shape == b.shape
    # beyond the nodes: evaluated exactly (here past the rim: NaN in both)
    assert_allclose(a[:, [0, 5]], b[:, [0, 5]], rtol=1e-12, equal_nan=True)
    assert np.all(np.abs(a[:, 1:5] - b[:, 1:5]) <= DENSE_TOLERANCE * 0.2)  # sigma 0.2 mol%
