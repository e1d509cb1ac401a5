"""Stage 2 of a fit: the best fit of every candidate model.

A candidate model is the growth model plus a set of processes (an
off-centre section, diffusion after growth), with retention r free or fixed
at 0 (fractional) or 1 (equilibrium): :class:`Candidate`. Each is the full
:class:`~zoning.fitting.problem.FitProblem` with some parameters fixed, so a
new process is added by naming its parameter in :data:`PROCESS_PARAMETERS`.

Best fit: a coarse grid of starting values is evaluated in one batched call
of the forward model; the best few grid points (and the model's own initial
guess) are refined with lmfit's bounded ``least_squares``
(:func:`shared_starts`). Every candidate starts from these shared starts,
restricted to its free parameters; a candidate with more processes also
starts from the best fits of the candidates nested in it, so that its
optimum is never worse than theirs.
"""

from __future__ import annotations

import warnings
from collections.abc import Sequence
from dataclasses import dataclass

import lmfit
import numpy as np
from zoning.fitting.problem import FitProblem

from zoning.exceptions import ZoningError

__all__ = [
    "Candidate",
    "CandidateFit",
    "PROCESS_PARAMETERS",
    "candidate_models",
    "shared_starts",
    "fit_candidates",
]

#: Processes besides growth and the model parameter that switches each on
#: (the process is absent when its parameter is 0).
PROCESS_PARAMETERS = {"section": "section_h_over_r", "diffusion": "diffusion_length_um"}

#: Retention variants of every process set: free, fractional (0), equilibrium (1).
RETENTIONS = ("free", "0", "1")

#: Coarse start grid: levels of the melt ratio, F at the rim and retention.
GRID_RATIO, GRID_F, GRID_R = 14, 9, 5
#: Grid points refined by the local minimiser (plus the model's own guess).
N_REFINE = 4
#: Largest number of model evaluations of one local refinement. A start far
#: from any optimum on a nearly flat, noisy surface (e.g. a diffusion length
#: for a model that cannot fit at all) can otherwise take minutes; the good
#: starts converge within a few tens of evaluations.
MAX_NFEV = 200
#: Starting levels of each process parameter when a candidate switches the
#: process on (from the best fits of the nested models without it): the
#: section offset h/R, and the diffusion length as a fraction of its upper
#: bound. The least-squares gradient with respect to a process parameter
#: vanishes at 0 (a smooth profile changes by O(L^2), a cut by O(h^2)), so a
#: start at 0 would stay there.
PROCESS_START_LEVELS = {"section_h_over_r": (0.45, 0.8), "diffusion_length_um": (0.1, 0.3)}
#: Nested best fits (lowest objectives) a process candidate starts from.
N_NESTED_STARTS = 2


@dataclass(frozen=True)
class Candidate:
    """One model of the comparison: growth plus processes, with a retention variant.

    Parameters
    ----------
    processes : tuple of str
        Processes besides growth, in :data:`PROCESS_PARAMETERS` order
        (empty: growth only).
    retention : {"free", "0", "1"}
        Retention free, or fixed at 0 (fractional) or 1 (equilibrium).
    """

    processes: tuple[str, ...] = ()
    retention: str = "free"

    @property
    def process_label(self) -> str:
        """Processes named, e.g. ``"growth+diffusion"``."""
        return "+".join(("growth", *self.processes))

    @property
    def name(self) -> str:
        """Model name, e.g. ``"growth+section r=0"`` or ``"growth r free"``."""
        r = "r free" if self.retention == "free" else f"r={self.retention}"
        return f"{self.process_label} {r}"

    def fixed_values(self, problem: FitProblem) -> dict[str, float]:
        """Parameters this candidate fixes (among those free in ``problem``)."""
        out = {}
        if self.retention != "free" and "retention" in problem.free:
            out["retention"] = float(self.retention)
        for process, param in PROCESS_PARAMETERS.items():
            if process not in self.processes and param in problem.free:
                out[param] = 0.0
        return out

    def contains(self, other: Candidate) -> bool:
        """Tell whether ``other`` is this model with some parameters fixed (nested)."""
        return set(other.processes) <= set(self.processes) and (
            self.retention == "free" or self.retention == other.retention
        )


@dataclass(frozen=True, eq=False)
class CandidateFit:
    """Best fit of one candidate model.

    Parameters
    ----------
    candidate : Candidate
    problem : FitProblem
        The full problem with the candidate's parameters fixed.
    theta : ndarray, shape (k,)
        Best values of the candidate's free parameters (``problem.free`` order).
    theta_full : ndarray, shape (p,)
        The same point in the free parameters of the full problem.
    objective : float
        -2 log posterior at the best fit (data terms plus the Kd prior).
    n_same, n_starts : int
        Starts that reached the best optimum; starts refined.
    success : bool
        The optimiser's success flag of the best start.
    """

    candidate: Candidate
    problem: FitProblem
    theta: np.ndarray
    theta_full: np.ndarray
    objective: float
    n_same: int
    n_starts: int
    success: bool

    @property
    def n_params(self) -> int:
        """Number of free parameters k."""
        return len(self.problem.free)


def candidate_models(problem: FitProblem) -> tuple[Candidate, ...]:
    """Every model to compare: each set of the available processes x r free, 0, 1.

    A process is available when its parameter is free in ``problem``.
    """
    available = [p for p, param in PROCESS_PARAMETERS.items() if param in problem.free]
    sets = [()]
    for p in available:
        sets = sets + [s + (p,) for s in sets]
    sets.sort(key=len)
    retentions = RETENTIONS if "retention" in problem.free else ("free",)
    return tuple(Candidate(tuple(s), r) for s in sets for r in retentions)


# --- starts -------------------------------------------------------------------


def _grid_starts(prob: FitProblem) -> tuple[np.ndarray, int]:
    """Evaluate a coarse grid in one batched call; return the best starts."""
    specs = prob.specs
    free = prob.free
    idx = {n: i for i, n in enumerate(free)}

    def levels(name, k):
        lo, hi = prob.lower[idx[name]], prob.upper[idx[name]]
        if name == "retention":
            return np.linspace(lo, hi, k)
        return np.linspace(lo, hi, k + 2)[1:-1]

    axes = []
    for name in free:
        if name == prob.ratio_name:
            axes.append(levels(name, GRID_RATIO))
        elif name == "f_rim":
            # Fractions of the largest F the parent melt can reach (set below).
            axes.append(np.linspace(0.0, 1.0, GRID_F + 2)[1:-1])
        elif name == "retention":
            axes.append(levels(name, GRID_R))
        elif name == "kd":
            axes.append(np.array([prob.kd0]))
        else:
            axes.append(np.array([np.clip(specs[name].default, prob.lower[idx[name]],
                                          prob.upper[idx[name]])]))
    mesh = np.meshgrid(*axes, indexing="ij")
    theta = np.stack([g.ravel() for g in mesh], axis=1)
    m = theta.shape[0]
    j_f = idx["f_rim"]
    f_cap = prob.max_fraction(theta)
    theta[:, j_f] = np.clip(theta[:, j_f] * np.minimum(f_cap, prob.upper[j_f]),
                            prob.lower[j_f], prob.upper[j_f])
    params = prob.params(theta)
    with np.errstate(all="ignore"), warnings.catch_warnings():
        warnings.simplefilter("ignore")
        out = prob.predict(params)
    pred = np.reshape(out["crystal"], (m, -1))
    with np.errstate(all="ignore"):
        chi2 = _grid_chi2(prob, theta, params, out, pred, idx, m)
    chi2 = np.where(np.isfinite(chi2), chi2, np.inf)
    order = np.argsort(chi2, kind="stable")
    picks = order[:N_REFINE]
    return theta[picks], m


def _grid_chi2(prob, theta, params, out, pred, idx, m):
    """Chi-square of every grid point; trace initial contents solved linearly."""
    chi2 = (((prob.y - pred) / prob.sigma) ** 2).sum(axis=1)
    # Trace initial contents enter the crystal profile linearly: solve each
    # for its best scale at every grid point instead of gridding it.
    for t in prob.traces:
        j = idx[t.param]
        ok, obs, sig = t.finite, t.observed, t.sigma
        base = np.reshape(out[t.key], (m, -1))[:, ok]
        w = 1.0 / sig[ok] ** 2
        num = (base * obs[ok] * w).sum(axis=1)
        den = (base**2 * w).sum(axis=1)
        scale = num / np.where(den > 0, den, 1.0)
        scale = np.where((den > 0) & np.isfinite(scale) & (scale > 0), scale, 1.0)
        theta[:, j] = np.clip(theta[:, j] * scale, prob.lower[j], prob.upper[j])
        p_old = params[t.param]
        fitted = base * (theta[:, j] / np.where(p_old > 0, p_old, 1.0))[:, None]
        chi2 += (((obs[ok] - fitted) / sig[ok]) ** 2).sum(axis=1)
    return chi2


def shared_starts(problem: FitProblem) -> tuple[np.ndarray, int]:
    """Return the starting points shared by every candidate (full problem's free parameters).

    Returns
    -------
    starts : ndarray, shape (s, p)
        The best :data:`N_REFINE` points of a coarse batched grid, plus the
        forward model's own initial guess when it has one.
    n_grid : int
        Number of grid points evaluated.
    """
    grid_best, n_grid = _grid_starts(problem)
    starts = [row for row in grid_best]
    try:
        trace_obs = {t.name: t.observed for t in problem.traces}
        with np.errstate(all="ignore"), warnings.catch_warnings():
            warnings.simplefilter("ignore")
            guess = problem.model.initial_guess(
                problem.distance_um, problem.y, trace=trace_obs or None
            )
    except (ZoningError, ValueError, FloatingPointError):
        guess = None
    if guess is not None:
        free = problem.free
        row = np.array([float(guess.get(n, grid_best[0][i])) for i, n in enumerate(free)])
        if "kd" in free:
            row[free.index("kd")] = problem.kd0
        starts.append(np.clip(row, problem.lower, problem.upper))
    return np.array(starts), n_grid


# --- local refinement -----------------------------------------------------------


def _least_squares(prob: FitProblem, start: np.ndarray):
    """Refine one start with lmfit; returns (theta, objective, success)."""
    free = prob.free
    lo = dict(zip(free, prob.lower, strict=True))
    hi = dict(zip(free, prob.upper, strict=True))
    params = lmfit.Parameters()
    for value, name in zip(start, free, strict=True):
        span = hi[name] - lo[name]
        v = float(np.clip(value, lo[name] + 1e-9 * span, hi[name] - 1e-9 * span))
        params.add(name, value=v, min=lo[name], max=hi[name])
    steps = np.array([1e-6 * (hi[n] - lo[n]) for n in free])
    upper = np.array([hi[n] for n in free])
    cache: dict[bytes, np.ndarray] = {}

    def vector(p):
        return np.array([p[n].value for n in free])

    def evaluate(x):
        # The residuals at x and the forward-difference Jacobian come from
        # ONE batched model call (p + 1 parameter sets); the Jacobian is kept
        # for the jac() call that least_squares makes at accepted points.
        key = x.tobytes()
        if key not in cache:
            h = steps * np.where(x + steps <= upper, 1.0, -1.0)
            theta = np.vstack([x, x + np.diag(h)])
            # With robust=True least_squares applies the soft-L1 loss itself.
            r = prob.residuals(prob.params(theta), theta.shape[0])
            r = np.where(np.isfinite(r), r, 1e6)
            cache.clear()
            cache[key] = np.vstack([r[0], ((r[1:] - r[0]) / h[:, None])])
        return cache[key]

    def fcn(p):
        return evaluate(vector(p))[0]

    def jac(p):
        return evaluate(vector(p))[1:].T

    kws = {"jac": jac, "max_nfev": MAX_NFEV}
    if prob.robust:
        kws.update(loss="soft_l1", f_scale=1.0)
    with np.errstate(all="ignore"), warnings.catch_warnings():
        warnings.simplefilter("ignore")
        mini = lmfit.Minimizer(fcn, params, nan_policy="propagate")
        res = mini.minimize(method="least_squares", **kws)
    theta = vector(res.params)
    z = prob.residuals(prob.params(theta[None, :]), 1)
    obj = float(prob.objective(z)[0])
    return theta, obj, bool(res.success)


def _optimise(prob: FitProblem, starts: np.ndarray):
    """Refine every start; return the best and the number that agree with it."""
    results = [_least_squares(prob, s) for s in starts]
    objs = np.array([r[1] for r in results])
    objs = np.where(np.isfinite(objs), objs, np.inf)
    best = int(np.argmin(objs))
    tol = max(0.05, 1e-3 * abs(objs[best]))
    n_same = int(np.sum(np.abs(objs - objs[best]) <= tol))
    return results[best][0], float(objs[best]), n_same, len(results), results[best][2]


def _restrict(full: FitProblem, sub: FitProblem, rows: np.ndarray) -> np.ndarray:
    """Rows of the full problem's free parameters -> columns of ``sub``'s."""
    cols = [full.free.index(n) for n in sub.free]
    return np.atleast_2d(rows)[:, cols]


def _process_levels(problem: FitProblem, sub: FitProblem, fit: CandidateFit) -> np.ndarray:
    """Rows of ``fit`` (full problem) with the processes ``sub`` frees set to start levels."""
    base = fit.theta_full
    switched = [n for n in PROCESS_PARAMETERS.values()
                if n in sub.free and n not in fit.problem.free]
    rows = [base.copy()]
    for name in switched:
        j = problem.free.index(name)
        levels = np.asarray(PROCESS_START_LEVELS[name], dtype=float)
        if name == "diffusion_length_um":
            levels = problem.lower[j] + levels * (problem.upper[j] - problem.lower[j])
        new_rows = []
        for row in rows:
            for v in levels:
                r = row.copy()
                r[j] = v
                new_rows.append(r)
        rows = new_rows
    return np.array(rows)


def fit_candidates(
    problem: FitProblem,
    candidates: Sequence[Candidate] | None = None,
    starts: np.ndarray | None = None,
) -> tuple[CandidateFit, ...]:
    """Best fit of every candidate model (stage 2).

    Parameters
    ----------
    problem : FitProblem
        The full problem (every parameter that may be fitted is free).
    candidates : sequence of Candidate, optional
        Default :func:`candidate_models`. Fitted in order of increasing
        number of processes, so that nested fits can seed larger ones.
    starts : ndarray, shape (s, p), optional
        Shared starts in the full problem's free parameters; default
        :func:`shared_starts`.

    Returns
    -------
    tuple of CandidateFit
        In the order of ``candidates``.
    """
    candidates = candidate_models(problem) if candidates is None else tuple(candidates)
    if starts is None:
        starts, _ = shared_starts(problem)
    order = sorted(range(len(candidates)), key=lambda i: len(candidates[i].processes))
    fits: dict[int, CandidateFit] = {}
    for i in order:
        cand = candidates[i]
        sub = problem.with_fixed(cand.fixed_values(problem))
        # Warm starts: the best fits of nested models with processes switched
        # off are points of this model too (its optimum can only be as good or
        # better). A candidate with processes starts from the best of them,
        # as they are and with the new process parameters at their start
        # levels; growth-only candidates start from the shared starts.
        nested = sorted(
            (f for f in fits.values()
             if cand.contains(f.candidate) and f.candidate.processes != cand.processes
             and np.isfinite(f.objective)),
            key=lambda f: f.objective,
        )[:N_NESTED_STARTS]
        if nested:
            rows = [_restrict(problem, sub, np.array([f.theta_full for f in nested]))]
            rows += [_restrict(problem, sub, _process_levels(problem, sub, f)) for f in nested]
        else:
            rows = [_restrict(problem, sub, starts)]
        sub_starts = np.vstack(rows)
        theta, obj, n_same, n_starts, success = _optimise(sub, sub_starts)
        fits[i] = CandidateFit(
            candidate=cand,
            problem=sub,
            theta=theta,
            theta_full=problem.expand(theta[None, :], sub)[0],
            objective=obj,
            n_same=n_same,
            n_starts=n_starts,
            success=success,
        )
    return tuple(fits[i] for i in range(len(candidates)))
