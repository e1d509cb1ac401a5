"""Stage 3 of a fit: compare the candidate models and choose what to sample.

Every candidate's best fit is scored by AIC = chi2 + 2k and BIC = chi2 +
k ln(n) (Schwarz 1978), where chi2 includes the Kd prior term, k counts the
free parameters and n the fitted data values. The weight of model i is
exp(-dBIC_i / 2) normalised over the models (the BIC approximation of the
posterior model probability with equal prior odds; Kass & Raftery 1995).

The lowest BIC is the preferred model when it beats the runner-up by at
least :data:`CLEAR_PREFERENCE_BIC` (2 units: Kass & Raftery 1995 call
smaller differences "not worth more than a bare mention"); otherwise the
answer is "no clear preference". A profile with a reversal (recharge or
mixing) voids every closed-system model: no model is preferred. Reversals
are tested against the larger of the stated sigma and the scatter the data
show, capped at the sigma the fit used after scaling
(:func:`zoning.fitting.diagnostics.reversal_sigma`).

When the best fit is significantly worse than the stated analytical
uncertainties allow (reduced chi-square above ``1 + 3 sqrt(2/dof)``),
every sigma is multiplied by ``sqrt(reduced chi-square)`` before sampling
(the Birge ratio), so that the bands are not narrower than the data
support.

References
----------
Kass, R. E. & Raftery, A. E. (1995) Bayes factors. Journal of the American
Statistical Association 90, 773-795.
Schwarz, G. (1978) Estimating the dimension of a model. Annals of
Statistics 6, 461-464.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass, field

import numpy as np
import pandas as pd
from zoning.fitting.bestfit import CandidateFit
from zoning.fitting.diagnostics import find_reversals, reversal_sigma
from zoning.fitting.problem import FitProblem

from zoning.exceptions import FitError

__all__ = ["ModelChoice", "choose_model", "comparison_table", "CLEAR_PREFERENCE_BIC",
           "NO_CLEAR_PREFERENCE"]

#: BIC difference below which two models are not told apart (Kass & Raftery 1995).
CLEAR_PREFERENCE_BIC = 2.0
#: ``preferred_model`` when the best two models are within CLEAR_PREFERENCE_BIC.
NO_CLEAR_PREFERENCE = "no clear preference"

#: -2 log posterior above the sampled model's best within which the best fit
#: of another candidate seeds walkers as a further mode (9: density ratio
#: exp(-4.5), about 1%; our choice).
MODE_DELTA = 9.0
#: Two seeds closer than this (largest difference over the parameters, as a
#: fraction of each prior range) count as one.
MODE_SEPARATION = 0.05

COMPARISON_COLUMNS = ["model", "processes", "retention", "chi_square", "n_params", "aic",
                      "bic", "delta_bic", "weight"]


@dataclass(frozen=True, eq=False)
class ModelChoice:
    """Outcome of the comparison.

    Parameters
    ----------
    comparison : pandas.DataFrame
        One row per candidate: ``model``, ``processes``, ``retention``,
        ``chi_square``, ``n_params``, ``aic``, ``bic``, ``delta_bic`` (to
        the lowest BIC), ``weight``.
    preferred_model : str
        Name of the lowest-BIC model, :data:`NO_CLEAR_PREFERENCE`, or ""
        when a reversal voids the closed-system models.
    delta_bic : float
        BIC of the runner-up minus that of the best model.
    sampled : CandidateFit
        The model whose posterior gives the bands (r free, every process
        the data may need).
    problem : FitProblem
        ``sampled.problem`` with the sigma scale applied.
    chi_square, reduced_chi_square : float
        Data chi-square of the sampled model's best fit (stated sigma).
    reversals : pandas.DataFrame
        Reversals of the measured profile (see
        :func:`zoning.fitting.diagnostics.find_reversals`).
    messages : tuple of str
        Plain-language warnings of this stage (several optima, sigma scaled).
    reversal_sigma : float
        Per-spot 1-sigma the reversals were tested against
        (:func:`zoning.fitting.diagnostics.reversal_sigma`) [mol%].
    modes : ndarray, shape (q, p)
        Best fits of other candidates, as points of the sampled model, that
        lie within :data:`MODE_DELTA` of its best -2 log posterior: starting
        points of walkers in other modes (e.g. fractional with diffusion
        against equilibrium without). Shape (0, p) when there are none.
    mode_weights : ndarray, shape (q + 1,)
        exp(-delta/2) of the sampled best fit (1) and of each mode.
    """

    comparison: pd.DataFrame
    preferred_model: str
    delta_bic: float
    sampled: CandidateFit
    problem: FitProblem
    chi_square: float
    reduced_chi_square: float
    reversals: pd.DataFrame
    messages: tuple[str, ...] = ()
    reversal_sigma: float = float("nan")
    modes: np.ndarray = field(default_factory=lambda: np.zeros((0, 0)))
    mode_weights: np.ndarray = field(default_factory=lambda: np.ones(1))


def comparison_table(fits: Sequence[CandidateFit], n_data: int) -> pd.DataFrame:
    """AIC, BIC, BIC differences and weights of every candidate's best fit.

    Parameters
    ----------
    fits : sequence of CandidateFit
    n_data : int
        Number of fitted data values n (in BIC's k ln n).

    Returns
    -------
    pandas.DataFrame
        Columns :data:`COMPARISON_COLUMNS`, one row per fit, in order.
    """
    rows = []
    for f in fits:
        obj, k = float(f.objective), int(f.n_params)
        rows.append({
            "model": f.candidate.name,
            "processes": f.candidate.process_label,
            "retention": f.candidate.retention,
            "chi_square": obj,
            "n_params": k,
            "aic": obj + 2.0 * k,
            "bic": obj + k * np.log(n_data),
        })
    table = pd.DataFrame(rows, columns=COMPARISON_COLUMNS[:-2])
    bic = table["bic"].to_numpy(float)
    finite = np.isfinite(bic)
    best = np.min(bic[finite]) if finite.any() else np.nan
    delta = bic - best
    weight = np.where(finite, np.exp(-0.5 * np.where(finite, delta, 0.0)), 0.0)
    total = weight.sum()
    table["delta_bic"] = delta
    table["weight"] = weight / total if total > 0 else np.nan
    return table


def _preference(table: pd.DataFrame) -> tuple[str, float]:
    bic = table["bic"].to_numpy(float)
    order = np.argsort(np.where(np.isfinite(bic), bic, np.inf), kind="stable")
    if len(order) < 2:
        return str(table["model"].iloc[order[0]]), float("nan")
    delta = float(bic[order[1]] - bic[order[0]])
    if not delta >= CLEAR_PREFERENCE_BIC:
        return NO_CLEAR_PREFERENCE, delta
    return str(table["model"].iloc[order[0]]), delta


def _sampled_fit(fits: Sequence[CandidateFit]) -> CandidateFit:
    """Return the r-free model with every process available (bands never omit one)."""
    free = [f for f in fits if f.candidate.retention == "free"] or list(fits)
    return max(free, key=lambda f: len(f.candidate.processes))


def _modes(sub: FitProblem, sampled: CandidateFit, fits: Sequence[CandidateFit]):
    """Other candidates' best fits that are modes worth seeding (see ModelChoice)."""
    rows = np.array([sub.expand(f.theta[None, :], f.problem)[0] for f in fits
                     if f is not sampled and np.isfinite(f.objective)])
    p = len(sub.free)
    if not sampled.candidate.processes or rows.size == 0:
        return np.zeros((0, p)), np.ones(1)
    rows = np.clip(rows, sub.lower, sub.upper)
    z = sub.residuals(sub.params(np.vstack([sampled.theta[None, :], rows])), rows.shape[0] + 1)
    obj = sub.objective(z)
    delta = obj[1:] - obj[0]
    span = np.where(sub.upper > sub.lower, sub.upper - sub.lower, 1.0)
    kept, weights = [], []
    for i in np.argsort(np.where(np.isfinite(delta), delta, np.inf), kind="stable"):
        if not delta[i] <= MODE_DELTA:
            break
        seen = [sampled.theta, *kept]
        if min(np.max(np.abs(rows[i] - s) / span) for s in seen) < MODE_SEPARATION:
            continue
        kept.append(rows[i])
        weights.append(np.exp(-0.5 * max(float(delta[i]), 0.0)))
    if not kept:
        return np.zeros((0, p)), np.ones(1)
    return np.array(kept), np.array([1.0, *weights])


def choose_model(problem: FitProblem, fits: Sequence[CandidateFit]) -> ModelChoice:
    """Compare the candidates, scale sigma if needed, find reversals (stage 3).

    Parameters
    ----------
    problem : FitProblem
        The full problem.
    fits : sequence of CandidateFit
        From :func:`zoning.fitting.bestfit.fit_candidates`.

    Returns
    -------
    ModelChoice

    Raises
    ------
    zoning.exceptions.FitError
        When no start of the sampled model gave a finite model.
    """
    sampled = _sampled_fit(fits)
    name = problem.traverse.name
    if not np.isfinite(sampled.objective):
        raise FitError(
            f"no start gave a finite model for traverse {name!r}; check the "
            "reference melt (--melt) and Kd, which must give compositions in range."
        )
    n_data = problem.n_data
    table = comparison_table(fits, n_data)
    preferred, delta = _preference(table)

    sub = sampled.problem
    z_best = sub.residuals(sub.params(sampled.theta), 1)[0]
    chi_data = float(np.sum(z_best[:-1] ** 2))
    dof = max(n_data - sampled.n_params, 1)
    reduced = chi_data / dof

    messages = []
    # Several minima of the growth model (shared starts) point at the profile
    # or the reference melt; the starts of models with processes begin at
    # different process levels on purpose and would reach different optima
    # where processes trade off (reported from the posterior instead).
    growth = [f for f in fits if not f.candidate.processes and f.candidate.retention == "free"]
    ref = growth[0] if growth else sampled
    if ref.n_same < 2 and ref.n_starts > 1:
        messages.append(
            f"only {ref.n_same} of {ref.n_starts} starts reached the best optimum; the "
            "fit surface has several minima, check the profile and the reference melt."
        )
    # Misfit beyond the stated uncertainties widens the bands (Birge ratio).
    # With the robust loss the scale comes from the median absolute
    # normalized residual (1.4826 MAD), so that stray spots do not inflate it.
    misfit = reduced
    if sub.robust:
        misfit = float((1.4826 * np.median(np.abs(z_best[:-1]))) ** 2)
    if misfit > 1.0 + 3.0 * np.sqrt(2.0 / dof):
        sub = sub.with_sigma_scale(float(np.sqrt(misfit)))
        messages.append(
            f"the model does not fit within the stated uncertainties (reduced chi-square "
            f"{reduced:.2f}); every sigma was multiplied by {sub.sigma_scale:.2f} so that "
            "the bands are not narrower than the data support."
        )
    # Reversals are judged against the noise the data actually show (never
    # less than stated, never more than the sigma the fit used): noise three
    # times the stated sigma must not read as recharge.
    rev_sigma = reversal_sigma(problem.distance_um, problem.y, problem.sigma, sub.sigma_scale)
    reversals = find_reversals(problem.distance_um, problem.y, rev_sigma)
    if len(reversals):
        preferred = ""
    modes, mode_weights = _modes(sub, sampled, fits)
    return ModelChoice(
        comparison=table,
        preferred_model=preferred,
        delta_bic=delta,
        sampled=sampled,
        problem=sub,
        chi_square=chi_data,
        reduced_chi_square=reduced,
        reversals=reversals,
        messages=tuple(messages),
        reversal_sigma=rev_sigma,
        modes=modes,
        mode_weights=mode_weights,
    )
