"""Result types of the inversion (frozen dataclasses, NaN never None).

These types are the contract between :mod:`zoning.fitting` (which fills
them) and the writers, figures and reports of :mod:`zoning.io` (which read
them by attribute).
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass, field
from typing import Any

import numpy as np
import pandas as pd

from zoning.traverse import Traverse

__all__ = ["Estimate", "FitResult"]


def _readonly(a) -> np.ndarray:
    arr = np.array(a, dtype=float, copy=True)
    arr.setflags(write=False)
    return arr


@dataclass(frozen=True, eq=False)
class Estimate:
    """Best value and 95% band of one fitted or derived quantity.

    Parameters
    ----------
    name : str
        Quantity name, e.g. ``"retention"`` or ``"melt_mg_number"``.
    unit : str
        Unit ("1" for dimensionless fractions, "wt%", "ppm", "µm").
    best : float
        Reported value: the posterior median, so that it always lies inside
        ``[lo95, hi95]`` (for a fixed quantity, its value).
    median : float
        Posterior median (the same as ``best``; kept for readers of older
        results).
    lo95, hi95 : float
        2.5 and 97.5 percentiles of the posterior (NaN when not sampled).
    lower, upper : float
        Bounds of the prior (physical range) for this quantity.
    constrained : bool
        False when the band covers most of the prior range, i.e. the data do
        not constrain the quantity; reports must then say so instead of
        quoting the best value as if it were precise.
    note : str
        Plain-language statement (e.g. "retention not constrained by these
        data: band covers most of 0-1"), "" when there is nothing to say.
    best_fit : float
        Value at the best fit (least squares with the Kd prior, i.e. the
        maximum a posteriori of the sampled model). It may lie outside the
        band when the posterior is skewed or piled at a bound; figures of
        the best-fit curve use it.
    """

    name: str
    unit: str
    best: float = float("nan")
    median: float = float("nan")
    lo95: float = float("nan")
    hi95: float = float("nan")
    lower: float = float("nan")
    upper: float = float("nan")
    constrained: bool = True
    note: str = ""
    best_fit: float = float("nan")


@dataclass(frozen=True, eq=False)
class FitResult:
    """Everything one fit of one traverse produced.

    Parameters
    ----------
    traverse : Traverse
        The traverse that was fitted (every spot, flagged or not).
    mineral : {"olivine", "plagioclase"}
        The analysed mineral.
    estimates : mapping of str to Estimate
        Fitted and derived quantities. Always holds ``melt_mg_number`` and
        ``melt_mgo_wt`` (olivine) or ``melt_ca_number`` and ``melt_cao_wt``
        (plagioclase), ``f_rim``, ``retention``, ``kd``; plus optional fitted
        quantities (``f_core``, ``growth_exponent``, ``core_offset_um``,
        ``melt0_ni_ppm``, ...) and ``temperature_c`` of the parent where known.
    parameter_names : tuple of str
        Names of the sampled parameters, the column order of ``samples``
        and ``correlation``.
    samples : ndarray, shape (k, p)
        Posterior draws (flattened, thinned chain), read-only.
    correlation : ndarray, shape (p, p)
        Posterior correlation matrix, read-only; NaN-filled if not sampled.
    spots : pandas.DataFrame
        One row per input spot, in input order: ``row``, ``point``,
        ``distance_um``, ``observed``, ``sigma``, ``model``, ``model_lo95``,
        ``model_hi95``, ``residual`` (observed - model), ``normalized_residual``,
        ``used`` (bool), ``status``, ``reason``; plus, per trace profile fitted,
        ``<oxide>_observed``, ``<oxide>_sigma``, ``<oxide>_model``,
        ``<oxide>_model_lo95``, ``<oxide>_model_hi95``, ``<oxide>_residual``.
    curve : pandas.DataFrame
        Model on a dense distance grid from core to rim: ``distance_um``,
        ``f``, ``best``, ``lo95``, ``hi95``, ``fractional`` (best r = 0 fit),
        ``equilibrium`` (best r = 1 fit); plus ``<oxide>_best``,
        ``<oxide>_lo95``, ``<oxide>_hi95`` per trace; melt path columns
        ``melt_ratio``, ``melt_<oxide>_wt``, ``temperature_c``.
    comparison : pandas.DataFrame
        One row per compared model (growth plus the processes the problem
        can fit, each with r free, r = 0 and r = 1): ``model`` (e.g.
        ``"growth r free"``, ``"growth+section+diffusion r=0"``),
        ``processes`` (e.g. ``"growth+diffusion"``), ``retention``
        (``"free"``, ``"0"``, ``"1"``), ``chi_square`` (Kd prior term
        included), ``n_params``, ``aic``, ``bic``, ``delta_bic`` (to the
        lowest BIC), ``weight`` (BIC weight, sums to 1).
    preferred_model : str
        ``model`` name of the lowest BIC when it beats the runner-up by at
        least 2 BIC units (Kass & Raftery 1995); ``"no clear preference"``
        otherwise; ``""`` when a reversal voids every closed-system model.
    delta_bic : float
        BIC of the runner-up minus the lowest BIC (NaN with one model).
    chi_square, reduced_chi_square : float
        Data chi-square of the best fit of the sampled model (r free, every
        process fitted) at the stated sigma.
    n_spots, n_used : int
        Rows in the traverse; spots used in the fit.
    diagnostics : mapping of str to float
        Sampler diagnostics: ``ess_<name>`` (effective sample size),
        ``tau_<name>`` (integrated autocorrelation time [steps]),
        ``acceptance_fraction``, ``n_walkers``, ``n_steps``, ``burn_in``,
        ``n_starts``, ``n_converged_starts``.
    reversals : pandas.DataFrame
        Zones that go back towards the core composition (recharge/mixing):
        ``start_um``, ``end_um``, ``amplitude`` (mol%), ``n_spots``.
    residual_runs : pandas.DataFrame
        Runs of same-sign residuals longer than expected by chance:
        ``start_um``, ``end_um``, ``sign``, ``n_spots``.
    warnings : tuple of str
        Plain-language warnings (unconstrained quantities, short chains,
        reversals, flagged spots, calibration ranges).
    settings : mapping
        Every setting of the fit (mineral, reference melt, kd prior,
        geometry, range, seed, sampler lengths, ...).
    versions : mapping of str to str
        Versions of zoning, Python, numpy, scipy, lmfit, emcee, pandas.
    seed : int
        Seed of the random generator used (reproducibility).
    methods : tuple of zoning.references.MethodUse
        Every published method the result rests on (forward-model laws,
        thermometer, Kd prior, sampler, model choice), with its citation
        key; the report's methods paragraph and reference list and
        ``fit.json`` are written from it.
    """

    traverse: Traverse
    mineral: str
    estimates: Mapping[str, Estimate]
    parameter_names: tuple[str, ...]
    samples: np.ndarray
    correlation: np.ndarray
    spots: pd.DataFrame
    curve: pd.DataFrame
    comparison: pd.DataFrame
    preferred_model: str
    delta_bic: float = float("nan")
    chi_square: float = float("nan")
    reduced_chi_square: float = float("nan")
    n_spots: int = 0
    n_used: int = 0
    diagnostics: Mapping[str, float] = field(default_factory=dict)
    reversals: pd.DataFrame = field(default_factory=pd.DataFrame)
    residual_runs: pd.DataFrame = field(default_factory=pd.DataFrame)
    warnings: tuple[str, ...] = ()
    settings: Mapping[str, Any] = field(default_factory=dict)
    versions: Mapping[str, str] = field(default_factory=dict)
    seed: int = 0
    methods: tuple = ()

    def __post_init__(self):
        object.__setattr__(self, "samples", _readonly(self.samples))
        object.__setattr__(self, "correlation", _readonly(self.correlation))
        object.__setattr__(self, "parameter_names", tuple(self.parameter_names))
        object.__setattr__(self, "estimates", dict(self.estimates))
        object.__setattr__(self, "warnings", tuple(self.warnings))
        object.__setattr__(self, "methods", tuple(self.methods))
        object.__setattr__(self, "diagnostics", dict(self.diagnostics))
        object.__setattr__(self, "settings", dict(self.settings))
        object.__setattr__(self, "versions", dict(self.versions))

    @property
    def sample(self) -> str:
        """Name of the fitted traverse."""
        return self.traverse.name
