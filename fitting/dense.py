"""Spot-dense traverses: the forward model at a few hundred nodes, interpolated to the spots.

A line scan of 20,000 spots samples a zoning profile that is smooth on the
scale of its spacing, and evaluating the forward model at every spot for
every walker makes such a fit cost 50 times a 400-spot fit (about 150 s on
one core). Above :data:`DENSE_SPOTS` used spots, :class:`DenseNodes` places
nodes at quantiles of the spot distances, evaluates the model there and
interpolates linearly to the spots. The nodes are refined locally (midpoints
of the node intervals where the interpolation error is too large) until, for
the best guess and :data:`N_CHECK_DRAWS` parameter sets drawn uniformly from
the prior box, every fitted value (Fo/An and each trace) is interpolated
within :data:`DENSE_TOLERANCE` of its 1-sigma. The prior draws include the
steepest profiles the model can make (near-exhaustion rims, r = 0 and 1), so
the check is conservative for the posterior. The node count and the largest
error found are recorded in the fit's settings; if no node set of fewer than
half the spots passes, every spot is evaluated as before.
"""

from __future__ import annotations

import warnings
from dataclasses import dataclass

import numpy as np
from scipy import sparse

__all__ = ["DENSE_SPOTS", "DENSE_TOLERANCE", "N_START_NODES", "N_CHECK_DRAWS", "DenseNodes",
           "plan_dense_nodes"]

#: Used spots above which the model is evaluated at nodes and interpolated.
DENSE_SPOTS = 1000
#: Largest interpolation error allowed on any fitted value [fraction of its 1-sigma].
DENSE_TOLERANCE = 0.01
#: Nodes of the first node set (quantiles of the spot distances, ends included).
N_START_NODES = 256
#: Parameter sets drawn from the prior box to check the interpolation.
N_CHECK_DRAWS = 48
#: Fewest check sets the model resolves (else every spot is evaluated).
MIN_CHECK_SETS = 8
#: Refinement rounds before giving up (each at most doubles the nodes).
MAX_ROUNDS = 8


@dataclass(frozen=True, eq=False)
class DenseNodes:
    """Nodes in distance and the linear-interpolation weights of the spots.

    Parameters
    ----------
    nodes_um : ndarray, shape (k,)
        Strictly increasing node distances [µm]; the first and last are the
        smallest and largest spot distance.
    index : ndarray of int, shape (n,)
        Interval of each spot: it lies between ``nodes_um[index]`` and
        ``nodes_um[index + 1]``.
    weight : ndarray, shape (n,)
        Weight of the upper node (0 at the lower node, 1 at the upper).
    max_error : float
        Largest interpolation error found in the check [fraction of sigma].
    """

    nodes_um: np.ndarray
    index: np.ndarray
    weight: np.ndarray
    max_error: float
    matrix: object = None

    @classmethod
    def from_nodes(cls, nodes_um, distance_um, max_error=float("nan")) -> DenseNodes:
        """Interpolation weights of the spots at ``distance_um`` on sorted nodes [µm]."""
        nodes = np.asarray(nodes_um, dtype=float)
        d = np.asarray(distance_um, dtype=float)
        idx = np.clip(np.searchsorted(nodes, d, side="right") - 1, 0, nodes.size - 2)
        w = np.clip((d - nodes[idx]) / (nodes[idx + 1] - nodes[idx]), 0.0, 1.0)
        # spots x nodes, two entries per row: one sparse product interpolates
        # every parameter set at once
        rows = np.repeat(np.arange(d.size), 2)
        cols = np.column_stack([idx, idx + 1]).ravel()
        vals = np.column_stack([1.0 - w, w]).ravel()
        matrix = sparse.csr_matrix((vals, (rows, cols)), shape=(d.size, nodes.size))
        return cls(nodes, idx, w, float(max_error), matrix)

    @property
    def n_nodes(self) -> int:
        """Number of nodes."""
        return int(self.nodes_um.size)

    def interpolate(self, out: dict, keys=None) -> dict:
        """Every array of ``out`` whose last axis runs over the nodes, at the spots.

        ``keys`` limits the result to those outputs (the fit's residuals need
        only the fitted records).
        """
        k = self.nodes_um.size
        res = {}
        for key, value in out.items():
            if keys is not None and key not in keys:
                continue
            a = np.asarray(value) if isinstance(value, np.ndarray) else value
            if isinstance(a, np.ndarray) and a.ndim in (1, 2) and a.shape[-1] == k:
                res[key] = np.asarray(self.matrix @ a.T).T
            else:
                res[key] = value
        return res


def _profile(problem, params, distance_um):
    with np.errstate(all="ignore"), warnings.catch_warnings():
        warnings.simplefilter("ignore")
        return problem.model.profile(distance_um, problem.radius_um, strict=False, **params)


def _errors(problem, exact, interp, m) -> np.ndarray:
    """Interpolation error of every fitted value [sigma]: (m, n) max over records."""
    err = np.abs(np.reshape(interp["crystal"], (m, -1)) - np.reshape(exact["crystal"], (m, -1)))
    err = err / problem.sigma
    for t in problem.traces:
        e = np.abs(np.reshape(interp[t.key], (m, -1)) - np.reshape(exact[t.key], (m, -1)))
        e = np.where(t.finite, e / t.sigma, 0.0)
        err = np.fmax(err, e)
    # parameter sets the model cannot make (NaN exactly) say nothing about the nodes
    return np.where(np.isfinite(err), err, 0.0)


def _check_params(problem, d, rng) -> tuple[dict, np.ndarray, int]:
    """Check sets from the prior box whose profile the model itself resolves.

    Near melt exhaustion, or with a trace partition coefficient so large
    that the trace is used up within a few grid intervals, the forward
    model's grid (which follows the requested points) limits its accuracy
    and its values depend on which points are asked for; such parameter sets
    make profiles far from any measured crystal and are skipped: a set is
    kept when its profile at the inner half of the spots, asked for alone,
    equals its profile there when asked for with all spots.
    """
    lo, hi = problem.lower, problem.upper
    theta = np.vstack([0.5 * (lo + hi), lo + (hi - lo) * rng.random((N_CHECK_DRAWS, lo.size))])
    m = theta.shape[0]
    params = problem.params(theta)
    exact = _profile(problem, params, d)
    half = np.flatnonzero(d <= np.median(d))
    coarse = _profile(problem, params, d[half])
    sub = {key: np.reshape(exact[key], (m, -1))[:, half] for key in _records(problem)}
    sub_problem = _Subset(problem, half)
    stable = _errors(sub_problem, sub, coarse, m).max(axis=1) <= DENSE_TOLERANCE
    keep = np.flatnonzero(stable)
    params = problem.params(theta[keep])
    exact = {key: np.reshape(exact[key], (m, -1))[keep] for key in _records(problem)}
    return params, exact, keep.size


def _records(problem) -> list[str]:
    return ["crystal", *(t.key for t in problem.traces)]


@dataclass(frozen=True)
class _SubTrace:
    key: str
    finite: np.ndarray
    sigma: np.ndarray


class _Subset:
    """The sigmas of a problem at a subset of its spots (for :func:`_errors`)."""

    def __init__(self, problem, idx):
        self.sigma = np.broadcast_to(problem.sigma, problem.distance_um.shape)[idx]
        self.traces = [_SubTrace(t.key, t.finite[idx], np.broadcast_to(
            t.sigma, problem.distance_um.shape)[idx]) for t in problem.traces]


def plan_dense_nodes(problem, *, seed: int = 20261202) -> DenseNodes | None:
    """Node set of a spot-dense problem, or None when every spot is evaluated.

    Parameters
    ----------
    problem : FitProblem
        The problem with every fitted parameter free (its prior box is
        sampled for the check).
    seed : int
        Seed of the check draws (fixed: same traverse, same nodes).

    Returns
    -------
    DenseNodes or None
        None when the traverse has at most :data:`DENSE_SPOTS` used spots or
        no node set of fewer than half the spots interpolates within
        :data:`DENSE_TOLERANCE`.
    """
    d = np.asarray(problem.distance_um, dtype=float)
    if d.size <= DENSE_SPOTS or not np.all(np.isfinite(d)):
        return None
    unique = np.unique(d)
    if unique.size <= 2 * N_START_NODES:
        return None
    q = np.linspace(0.0, 1.0, N_START_NODES)
    nodes = np.unique(np.quantile(unique, q))
    rng = np.random.default_rng(seed)
    params, exact, m = _check_params(problem, d, rng)
    if m < MIN_CHECK_SETS:
        return None
    for _ in range(MAX_ROUNDS):
        plan = DenseNodes.from_nodes(nodes, d)
        interp = plan.interpolate(_profile(problem, params, nodes))
        err = _errors(problem, exact, interp, m).max(axis=0)
        worst = float(err.max()) if err.size else 0.0
        if worst <= DENSE_TOLERANCE:
            return DenseNodes.from_nodes(nodes, d, worst)
        bad = np.unique(plan.index[err > DENSE_TOLERANCE])
        # midpoint of each failing interval, and of its neighbours (the error
        # of linear interpolation is set by the curvature over the interval)
        bad = np.unique(np.clip(np.concatenate([bad - 1, bad, bad + 1]), 0, nodes.size - 2))
        nodes = np.unique(np.concatenate([nodes, 0.5 * (nodes[bad] + nodes[bad + 1])]))
        if nodes.size * 2 > unique.size:
            return None
    return None


def predict_at(problem, params, distance_um) -> dict:
    """``problem.predict`` at any distances, through the nodes where they cover them.

    Distances inside the node range of a spot-dense problem are
    interpolated from the nodes; the others are evaluated exactly. Without
    nodes this is ``problem.predict(params, distance_um)``.
    """
    plan = getattr(problem, "dense", None)
    d = np.asarray(distance_um, dtype=float)
    if plan is None:
        return problem.predict(params, d)
    nodes = plan.nodes_um
    inside = (d >= nodes[0]) & (d <= nodes[-1])
    out = problem.predict(params, np.concatenate([nodes, d[~inside]]))
    interp = DenseNodes.from_nodes(nodes, d[inside])
    k = nodes.size
    res = {}
    for key, value in out.items():
        a = value if isinstance(value, np.ndarray) else None
        if a is None or a.ndim not in (1, 2) or a.shape[-1] != k + int((~inside).sum()):
            res[key] = value
            continue
        full = np.empty(a.shape[:-1] + d.shape, dtype=a.dtype)
        full[..., inside] = np.asarray(interp.matrix @ a[..., :k].T).T
        full[..., ~inside] = a[..., k:]
        res[key] = full
    return res
