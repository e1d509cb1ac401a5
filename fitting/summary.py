"""Stage 5 of a fit: estimates, bands, curves, diagnostics and warnings.

:func:`summarise_fit` turns the best fits, the model choice and the
posterior draws into a :class:`~zoning.fitting.results.FitResult`: one
:class:`~zoning.fitting.results.Estimate` per fitted or derived quantity,
the spot table and model curve with posterior envelopes, the residual runs
and reversals, and every plain-language warning.
"""

from __future__ import annotations

import platform
import warnings
from collections.abc import Sequence
from dataclasses import replace
from importlib import metadata

import numpy as np
import pandas as pd
from zoning.fitting.bestfit import PROCESS_PARAMETERS, CandidateFit
from zoning.fitting.choice import ModelChoice
from zoning.fitting.dense import predict_at
from zoning.fitting.diagnostics import residual_runs, runs_test_z
from zoning.fitting.methods import fit_methods
from zoning.fitting.problem import DEFAULT_SIGMA, FitProblem
from zoning.fitting.results import Estimate, FitResult
from zoning.fitting.sampling import Posterior, credible_band

from zoning.exceptions import (
    CalibrationRangeWarning,
    ConvergenceWarning,
    DataQualityWarning,
    ZoningError,
)
from zoning.thermometry import THERMOMETERS

__all__ = ["summarise_fit", "estimate_from_draws", "section_envelope", "central_cut_draws",
           "UNCONSTRAINED_FRACTION",
           "TRADE_OFF_CORRELATION", "trade_off_messages", "section_messages"]

#: Fraction of the prior range above which a 95% band means "not constrained".
UNCONSTRAINED_FRACTION = 0.75
#: Posterior draws used for the model-curve envelope.
N_CURVE_DRAWS = 300
#: Points of the dense model curve.
N_CURVE_POINTS = 200

_MAJOR_LABEL = {"olivine": "Fo", "plagioclase": "An"}
_OXIDE_LABEL = {"mgo": "MgO", "feo": "FeO", "cao": "CaO", "na2o": "Na2O"}

#: |posterior correlation| of retention with a process parameter from which,
#: with retention not pinned down (band wider than
#: :data:`TRADE_OFF_R_WIDTH`), r and the process are said to trade off (our
#: choice).
TRADE_OFF_CORRELATION = 0.4
#: Width of the retention band [1] from which r counts as not pinned down for
#: the trade-off statement (our choice: half of its range).
TRADE_OFF_R_WIDTH = 0.5
#: A process parameter whose draws are piled within this share of its range
#: at 0 for some of the draws and away from 0 for others, while r differs
#: between the two groups by :data:`TRADE_OFF_R_SPLIT`, is read as a second
#: mode (bimodality between "process" and "no process").
TRADE_OFF_SPLIT_SHARE = 0.05
TRADE_OFF_R_SPLIT = 0.25

#: F_rim / F_max (largest F the melt can give as the one mineral) from which
#: a fit is said to drive the melt towards exhaustion (our choice).
EXHAUSTION_SHARE = 0.85
#: Share of an exchanging melt oxide left at the rim below which the melt is
#: said to be drained of it (our choice).
EXHAUSTION_REMAINING = 0.1


def calibration_messages(model, evaluate) -> list[str]:
    """Calibration-range warnings of one forward evaluation, once each, in order.

    Parameters
    ----------
    model : zoning.models.CrystallizationModel
        The model evaluated; its glass thermometer (if any) is checked on the
        melt MgO of the evaluation (the reported melt temperatures).
    evaluate : callable
        No arguments; evaluates ``model`` (``profile`` or ``path``, with
        ``strict=False``) and returns its outputs. The laws warn as they leave
        their calibration ranges.

    Returns
    -------
    list of str
        The texts of the CalibrationRangeWarning raised, duplicates dropped;
        other warnings of the evaluation are discarded.
    """
    with warnings.catch_warnings(record=True) as caught, np.errstate(all="ignore"):
        warnings.simplefilter("always")
        out = evaluate()
        if model.thermometer and "melt_mgo_wt" in out:
            THERMOMETERS[model.thermometer].check_range(out["melt_mgo_wt"])
    return list(dict.fromkeys(str(w.message) for w in caught
                              if issubclass(w.category, CalibrationRangeWarning)))


def _versions() -> dict[str, str]:
    out = {"python": platform.python_version()}
    for dist in ("zoning", "numpy", "scipy", "lmfit", "emcee", "pandas"):
        try:
            out[dist] = metadata.version(dist)
        except metadata.PackageNotFoundError:
            out[dist] = "unknown"
    return out


#: Quantities whose prior bounds are physical states the data may not tell
#: from values close to them, by bound ("lower", "upper"): a process absent
#: (0), fractional (r = 0) and equilibrium (r = 1) crystallization. The 95%
#: band of such a quantity is made one-sided at the bound (an upper or lower
#: limit) when the central band would stop closer to it than
#: :data:`EDGE_SHARE` of its width: a band that stopped just short of the
#: bound would read as evidence against it (our rule; in the calibration
#: benchmark central bands missed r = 0 and r = 1 by a few hundredths).
EDGE_PARAMETERS = {"section_h_over_r": ("lower",), "diffusion_length_um": ("lower",),
                   "retention": ("lower", "upper")}
EDGE_SHARE = 0.1


#: Section offset h/R below which a posterior draw counts as a cut through the
#: crystal's core (our choice: a tenth of the radius; in a sphere the observed
#: core then lies within the innermost 0.1% of the crystal's volume).
CENTRAL_CUT = 0.1
#: Fewest draws with h/R below :data:`CENTRAL_CUT` from which their parent-melt
#: band is quoted (our choice).
CENTRAL_CUT_MIN_DRAWS = 200
#: Bayes factor of a central cut against a random one (posterior over prior
#: share of the draws with h/R below :data:`CENTRAL_CUT`) below which the data
#: count as ruling a central cut out: 1/3, where "positive" evidence against
#: begins on the scale of Kass & Raftery (1995).
CENTRAL_CUT_MIN_BAYES = 1.0 / 3.0
#: Share of the parent-melt band's width by which the band of the central-cut
#: draws must differ (both ends summed) for the section statement (our choice).
SECTION_SHIFT_SHARE = 0.2


def _edge_band(name, draws, lower, upper) -> tuple[float, float, float, str]:
    """Median and 95% band of one quantity's draws, with the edge rules above."""
    med, lo, hi, kind = credible_band(draws, lower, upper)
    edges = EDGE_PARAMETERS.get(name, ())
    if kind == "central" and np.isfinite(lo) and edges:
        x = np.asarray(draws, dtype=float)
        x = x[np.isfinite(x)]
        near_lower = "lower" in edges and lo - lower < EDGE_SHARE * (hi - lo)
        near_upper = "upper" in edges and upper - hi < EDGE_SHARE * (hi - lo)
        if near_lower and near_upper:
            lo, hi, kind = float(lower), float(upper), "bounds"
        elif near_lower:
            lo, hi, kind = float(lower), float(np.percentile(x, 95.0)), "upper_limit"
        elif near_upper:
            lo, hi, kind = float(np.percentile(x, 5.0)), float(upper), "lower_limit"
    return med, lo, hi, kind


def section_envelope(name, draws, lower, upper, central=None) -> tuple[float, float, float,
                                                                       str, bool]:
    """Median and 95% band of one quantity, widened to hold for a cut through the core.

    With the section offset free and a central cut not ruled out, the
    posterior under the random-cut prior (h/R uniform) and the posterior
    given a cut through the crystal's core (the draws with h/R below
    :data:`CENTRAL_CUT`; petrologists pick traverses through visible cores)
    are both defensible, and their bands differ when the data cannot resolve
    the section. The band returned is the envelope of the two, so it holds at
    95% under either assumption: a band over a class of priors (robust
    Bayesian analysis, Berger 1990). On invented diffused olivines cut
    through their cores, the random-cut bands alone held the parent Mg# in 69
    of 80 (benchmarks/fit.py, 2026-12-04).

    Parameters
    ----------
    name : str
        Quantity name (for the edge rules of :data:`EDGE_PARAMETERS`).
    draws : ndarray, shape (k,)
        Posterior draws.
    lower, upper : float
        Prior bounds.
    central : ndarray, shape (m,), optional
        The quantity's draws that are central cuts (h/R below
        :data:`CENTRAL_CUT`); None, or fewer than
        :data:`CENTRAL_CUT_MIN_DRAWS` of them, leaves the band as it is.

    Returns
    -------
    median, lo95, hi95 : float
        The median is that of all draws (inside the band).
    kind : {"central", "upper_limit", "lower_limit", "bounds"}
    widened : bool
        True when the central-cut band extended the band.
    """
    draws = np.asarray(draws, dtype=float)
    med, lo, hi, kind = _edge_band(name, draws, lower, upper)
    if central is None or not np.isfinite(lo):
        return med, lo, hi, kind, False
    central = np.asarray(central, dtype=float)
    if int(np.isfinite(central).sum()) < CENTRAL_CUT_MIN_DRAWS:
        return med, lo, hi, kind, False
    _, c_lo, c_hi, c_kind = _edge_band(name, central, lower, upper)
    if not (np.isfinite(c_lo) and (c_lo < lo or c_hi > hi)):
        return med, lo, hi, kind, False
    kinds = {kind, c_kind}
    lo, hi = min(lo, c_lo), max(hi, c_hi)
    at_lower = lo <= lower and bool(kinds & {"upper_limit", "bounds"})
    at_upper = hi >= upper and bool(kinds & {"lower_limit", "bounds"})
    kind = ("bounds" if at_lower and at_upper else "upper_limit" if at_lower
            else "lower_limit" if at_upper else "central")
    return med, float(lo), float(hi), kind, True


def estimate_from_draws(name, unit, best, draws, lower, upper, *, central=None) -> Estimate:
    """Estimate of one quantity from its posterior draws and prior bounds.

    Parameters
    ----------
    name, unit : str
    best : float
        Best-fit value (kept as ``best_fit``; ``best`` is the median).
    draws : ndarray, shape (k,)
        Posterior draws.
    lower, upper : float
        Prior bounds.
    central : ndarray, shape (m,), optional
        The draws that are cuts through the crystal's core; when given, the
        band is the envelope of :func:`section_envelope`.

    Returns
    -------
    Estimate
        Not ``constrained`` when the band covers more than
        :data:`UNCONSTRAINED_FRACTION` of the prior range.
    """
    med, lo, hi, kind, widened = section_envelope(name, draws, lower, upper, central)
    constrained = bool((hi - lo) <= UNCONSTRAINED_FRACTION * (upper - lower))
    note = ""
    if not constrained:
        note = (
            f"{name} not constrained by these data: band covers most of "
            f"{lower:g}-{upper:g}"
        )
    elif kind == "upper_limit":
        note = f"only an upper limit: {name} < {hi:.3g} (95%)"
    elif kind == "lower_limit":
        note = f"only a lower limit: {name} > {lo:.3g} (95%)"
    if widened:
        note = (note + "; " if note else "") + (
            "band widened to hold also for a cut through the crystal's core")
    # The reported value is the median, which lies inside its own band by
    # construction (also for one-sided bands); the best fit is kept apart.
    reported = med if np.isfinite(med) else float(best)
    return Estimate(
        name=name, unit=unit, best=float(reported), median=med, lo95=lo, hi95=hi,
        lower=float(lower), upper=float(upper), constrained=constrained, note=note,
        best_fit=float(best),
    )


def _parent(prob: FitProblem, theta: np.ndarray) -> dict:
    """Parent melt oxide of the pair and temperature at F = 0 for each row.

    Rows outside the prior bounds (which the sampler never keeps, but a
    caller may pass) and rows the forward model refuses give NaN, never an
    exception: a derived quantity must not end a fit.
    """
    theta = np.atleast_2d(np.asarray(theta, dtype=float))
    m = theta.shape[0]
    oxide, temp = np.full(m, np.nan), np.full(m, np.nan)
    inside = np.all(np.isfinite(theta) & (theta >= prob.lower) & (theta <= prob.upper), axis=1)

    def evaluate(rows):
        params = prob.params(rows)
        params = {k: v for k, v in params.items()
                  if k not in ("growth_exponent", "core_offset_um")}
        params["f_core"] = np.zeros(rows.shape[0]) if "f_core" in params else 0.0
        with np.errstate(all="ignore"), warnings.catch_warnings():
            warnings.simplefilter("ignore")
            out = prob.model.path(np.array([0.0]), strict=False, **params)
        k = rows.shape[0]
        ox = np.reshape(out[prob.oxide_name], (k, -1))[:, 0]
        tc = (np.reshape(out["temperature_c"], (k, -1))[:, 0] if "temperature_c" in out
              else np.full(k, np.nan))
        return ox, tc

    idx = np.flatnonzero(inside)
    if idx.size:
        try:
            oxide[idx], temp[idx] = evaluate(theta[idx])
        except ZoningError:
            # One refused row must not void the others: evaluate them one by
            # one (rare path; the batched call is the normal one).
            for i in idx:
                try:
                    oxide[i], temp[i] = (v[0] for v in evaluate(theta[i:i + 1]))
                except ZoningError:
                    pass
    return {"melt_oxide": oxide, "temperature_c": temp}


def _estimates(prob: FitProblem, theta_best, flat, rng) -> dict[str, Estimate]:
    """Fitted, fixed and derived quantities of the sampled model."""
    specs = prob.specs
    free_names, lower, upper = prob.free, prob.lower, prob.upper
    ratio_name = prob.ratio_name
    estimates: dict[str, Estimate] = {}
    # The reachable F is capped by the parent melt (olivine alone uses up the
    # melt's MgO and FeO): the prior range of f_rim ends there.
    draw_rows = flat[rng.choice(flat.shape[0], size=min(2000, flat.shape[0]), replace=False)]
    f_reach = float(np.nanmax(prob.max_fraction(np.vstack([theta_best, draw_rows]))))
    central = central_cut_draws(free_names, flat, lower, upper)
    for j, name in enumerate(free_names):
        hi_j = min(upper[j], f_reach) if name == "f_rim" and np.isfinite(f_reach) else upper[j]
        estimates[name] = estimate_from_draws(
            name, specs[name].unit, theta_best[j], flat[:, j], lower[j], hi_j,
            central=None if central is None or name == "section_h_over_r"
            else flat[central, j],
        )
    for name, value in prob.fixed.items():
        if name in (ratio_name, "f_rim", "retention", "kd", "section_h_over_r",
                    "diffusion_length_um"):
            estimates[name] = Estimate(
                name=name, unit=specs[name].unit, best=value, median=value, lo95=value,
                hi95=value, lower=float(specs[name].lower), upper=float(specs[name].upper),
                constrained=True, note=f"{name} fixed at {value:g}", best_fit=value,
            )
    if "kd" in free_names:
        post_sd = float(np.std(flat[:, free_names.index("kd")]))
        if post_sd > 0.8 * prob.kd_sd:
            estimates["kd"] = replace(
                estimates["kd"],
                note=f"kd set by its prior ({prob.kd0:g} +/- {prob.kd_sd:g}), hardly by these "
                "data",
            )
    # Derived: parent melt oxide and temperature, from the model at F = 0.
    j_ratio = free_names.index(ratio_name)
    derived_draws = flat[rng.choice(flat.shape[0], size=min(4000, flat.shape[0]),
                                    replace=False)]
    central_parent = None
    if central is not None:
        rows = flat[central]
        central_parent = _parent(prob, rows[rng.choice(
            rows.shape[0], size=min(4000, rows.shape[0]), replace=False)])
    parent_best = _parent(prob, theta_best[None, :])
    parent_draws = _parent(prob, derived_draws)
    bound_theta = np.repeat(theta_best[None, :], 2, axis=0)
    bound_theta[:, j_ratio] = [lower[j_ratio], upper[j_ratio]]
    parent_bounds = _parent(prob, bound_theta)
    ratio_est = estimates[ratio_name]
    derived = [("melt_oxide", prob.oxide_name, "wt%")]
    if prob.mineral == "olivine":  # plagioclase temperature is an input, not derived
        derived.append(("temperature_c", "temperature_c", "°C"))
    for key, name, unit in derived:
        best_v = float(parent_best[key][0])
        if not np.isfinite(best_v):
            continue
        lo_b, hi_b = np.sort(parent_bounds[key])
        med, lo, hi, _kind, widened = section_envelope(
            name, parent_draws[key], -np.inf, np.inf,
            None if central_parent is None else central_parent[key])
        estimates[name] = Estimate(
            name=name, unit=unit, best=med if np.isfinite(med) else best_v, median=med,
            lo95=lo, hi95=hi, best_fit=best_v,
            lower=float(lo_b), upper=float(hi_b), constrained=ratio_est.constrained,
            note="derived from " + ratio_name + " and the reference melt"
            + ("" if ratio_est.constrained else "; not constrained by these data")
            + ("; band widened to hold also for a cut through the crystal's core"
               if widened else ""),
        )
    return estimates


_TRADE_OFF_TEXT = {
    "diffusion_length_um": (
        "r and the diffusion length trade off: the rim could be relaxed by diffusion after "
        "growth (lower r, longer L) or grown near equilibrium (higher r, little diffusion), "
        "and these data cannot tell which, so the r band spans both; a NiO profile or a "
        "slower-diffusing element (e.g. Ca or P in olivine), or a known diffusion length "
        "(--diffusion-length-um), would tell them apart."
    ),
    "section_h_over_r": (
        "r and the section offset trade off: the profile could be flattened by a cut far "
        "from the crystal's centre (lower r, larger h/R) or grown near equilibrium (higher "
        "r, central cut), and these data cannot tell which, so the r band spans both; a "
        "traverse through the crystal's core (a visible core feature; then "
        "--section-h-over-r 0) or a trace-element profile would tell them apart."
    ),
}


def trade_off_messages(names: Sequence[str], flat: np.ndarray, lower: np.ndarray,
                       upper: np.ndarray) -> list[str]:
    """Plain sentences when retention trades off with a process parameter.

    Read from the posterior draws alone: retention is not pinned down (95%
    band wider than :data:`TRADE_OFF_R_WIDTH`) and either its correlation
    with the process parameter reaches :data:`TRADE_OFF_CORRELATION`, or the
    draws split into a group with the process at about 0 and a group with
    it clearly on whose retention differs by :data:`TRADE_OFF_R_SPLIT`
    (two modes).

    Parameters
    ----------
    names : sequence of str
        Free parameter names (columns of ``flat``).
    flat : ndarray, shape (k, p)
        Posterior draws.
    lower, upper : ndarray, shape (p,)
        Prior bounds.

    Returns
    -------
    list of str
    """
    names = list(names)
    if "retention" not in names or flat.shape[0] < 10:
        return []
    r = flat[:, names.index("retention")]
    lo, hi = np.percentile(r, [2.5, 97.5])
    if not hi - lo > TRADE_OFF_R_WIDTH:
        return []
    out = []
    for name, text in _TRADE_OFF_TEXT.items():
        if name not in names:
            continue
        j = names.index(name)
        x = flat[:, j]
        span = upper[j] - lower[j]
        if not span > 0 or np.std(x) == 0:
            continue
        with np.errstate(all="ignore"):
            rho = float(np.corrcoef(r, x)[0, 1])
        near = x <= lower[j] + TRADE_OFF_SPLIT_SHARE * span
        split = False
        if 0.1 <= near.mean() <= 0.9:
            split = abs(float(np.median(r[near]) - np.median(r[~near]))) >= TRADE_OFF_R_SPLIT
        if (np.isfinite(rho) and abs(rho) >= TRADE_OFF_CORRELATION) or split:
            out.append(text)
    return out


def central_cut_draws(names: Sequence[str], flat: np.ndarray, lower: np.ndarray,
                      upper: np.ndarray) -> np.ndarray | None:
    """Mask of the posterior draws that are cuts through the crystal's core.

    Parameters
    ----------
    names : sequence of str
        Free parameter names (columns of ``flat``).
    flat : ndarray, shape (k, p)
        Posterior draws.
    lower, upper : ndarray, shape (p,)
        Prior bounds.

    Returns
    -------
    ndarray of bool, shape (k,), or None
        None when the section offset is not free, when the data rule a
        central cut out (its Bayes factor against the random-cut prior, the
        share of central draws over the prior share, is below
        :data:`CENTRAL_CUT_MIN_BAYES`), or when fewer than
        :data:`CENTRAL_CUT_MIN_DRAWS` draws, or all of them, are central cuts:
        the bands then need no widening for the section.
    """
    names = list(names)
    if "section_h_over_r" not in names:
        return None
    j = names.index("section_h_over_r")
    h = flat[:, j]
    central = h < CENTRAL_CUT
    n_central = int(central.sum())
    if not CENTRAL_CUT_MIN_DRAWS <= n_central < central.size:
        return None
    prior_share = (min(CENTRAL_CUT, upper[j]) - lower[j]) / (upper[j] - lower[j])
    if n_central / central.size < CENTRAL_CUT_MIN_BAYES * prior_share:
        return None
    return central


def section_messages(names: Sequence[str], flat: np.ndarray, estimates: dict,
                     ratio_name: str, label: str) -> list[str]:
    """Return a plain sentence when an unresolved section offset moves the parent melt.

    With the section offset free, the posterior keeps cuts off the crystal's
    centre that the data cannot rule out; such a cut hides the true core, so
    the parent melt ratio of those draws differs from that of a central cut
    (for a crystal grown from its core outwards, a hidden core is the more
    primitive one). Where a central cut is not ruled out
    (:func:`central_cut_draws`) and the parent-melt band of the draws with
    h/R below :data:`CENTRAL_CUT` differs from the full band by at least
    :data:`SECTION_SHIFT_SHARE` of its width, the sentence gives both bands,
    the reported envelope of :func:`section_envelope`, and what to set when
    the traverse crosses the core.

    Parameters
    ----------
    names : sequence of str
        Free parameter names (columns of ``flat``).
    flat : ndarray, shape (k, p)
        Posterior draws.
    estimates : dict of str to Estimate
        The fit's estimates (``section_h_over_r`` and ``ratio_name`` used).
    ratio_name : str
        Parent melt ratio parameter (``melt_mg_number`` or ``melt_ca_number``).
    label : str
        How to print the ratio (``"Mg#"``, ``"Ca#"``).

    Returns
    -------
    list of str
        Empty, or one sentence.
    """
    names = list(names)
    h_est = estimates.get("section_h_over_r")
    if "section_h_over_r" not in names or ratio_name not in names or h_est is None:
        return []
    j = names.index("section_h_over_r")
    bounds = np.zeros(len(names)), np.ones(len(names))
    bounds[0][j], bounds[1][j] = h_est.lower, h_est.upper
    central = central_cut_draws(names, flat, *bounds)
    if central is None:
        return []
    m = flat[:, names.index(ratio_name)]
    lo, hi = np.percentile(m, [2.5, 97.5])
    c_lo, c_hi = np.percentile(m[central], [2.5, 97.5])
    width = hi - lo
    if not width > 0 or (abs(hi - c_hi) + abs(c_lo - lo)) < SECTION_SHIFT_SHARE * width:
        return []
    off = m[~central]
    side = "higher" if np.median(off) > np.median(m[central]) else "lower"
    e = estimates.get(ratio_name)
    e_lo, e_hi = (e.lo95, e.hi95) if e is not None else (min(lo, c_lo), max(hi, c_hi))
    return [
        f"the parent melt depends on the section: these data do not rule out a cut through "
        f"the crystal's core (h/R band {h_est.lo95:.2f}-{h_est.hi95:.2f}; "
        f"{central.mean():.0%} of the posterior draws lie below h/R = {CENTRAL_CUT:g}), nor "
        f"one off its centre, which hides the true core and needs a {side} parent {label}. "
        f"For a random cut the {label} band is {lo:.3f}-{hi:.3f}, with the core in the cut "
        f"{c_lo:.3f}-{c_hi:.3f}; the bands reported ({label} {e_lo:.3f}-{e_hi:.3f}) hold "
        "for either. If the traverse crosses the crystal's core (a core feature is "
        "visible), refit with --section-h-over-r 0 (project key section_h_over_r = 0) for "
        "the narrower bands of a central cut."
    ]


def _diffusion_time(prob: FitProblem, theta_best, flat, estimates) -> tuple[Estimate | None,
                                                                              str]:
    """Diffusion time [days] from the diffusion length and the temperature, with a note."""
    from zoning.diffusion import diffusion_time_days

    est = estimates.get("diffusion_length_um")
    temp = float(prob.options.get("temperature_c", float("nan")))
    if est is None or not np.isfinite(temp) or (
            "diffusion_length_um" not in prob.free and not est.best > 0):
        return None, ""
    # Rim composition of the best fit (the rim is held at its grown value).
    out = prob.predict(prob.params(theta_best[None, :]), np.array([prob.radius_um]))
    rim = float(np.ravel(out.get("crystal_grown", out["crystal"]))[-1])
    dq = float(prob.options.get("delta_qfm", float("nan")))
    note = ""
    kwargs = {"mineral": prob.mineral}
    if prob.mineral == "olivine":
        if not np.isfinite(dq):
            dq = 0.0
            note = ("diffusion time computed at fO2 = QFM (give --delta-qfm for another "
                    "oxygen fugacity) and for a traverse of unknown crystallographic "
                    "direction (average over directions; along c the time is 0.44 times, "
                    "along a or b 2.67 times the value given).")
        else:
            note = ("diffusion time for a traverse of unknown crystallographic direction "
                    "(average over directions; along c the time is 0.44 times, along a or b "
                    "2.67 times the value given).")
        kwargs.update(delta_qfm=dq, x_fe=float(np.clip(1.0 - 0.01 * rim, 0.0, 1.0)))
    else:
        kwargs.update(x_an=float(np.clip(0.01 * rim, 0.0, 1.0)))
    with np.errstate(all="ignore"), warnings.catch_warnings():
        warnings.simplefilter("ignore")
        if "diffusion_length_um" in prob.free:
            j = prob.free.index("diffusion_length_um")
            draws = diffusion_time_days(flat[:, j], temp, **kwargs)
            central = central_cut_draws(prob.free, flat, prob.lower, prob.upper)
            central_days = None if central is None else draws[central]
            best = diffusion_time_days(float(theta_best[j]), temp, **kwargs)
            top = diffusion_time_days(float(prob.upper[j]), temp, **kwargs)
        else:
            best = top = diffusion_time_days(est.best, temp, **kwargs)
            draws = None
    if not np.isfinite(best):
        return None, ""
    if draws is None:
        return Estimate(name="diffusion_time_days", unit="days", best=best, median=best,
                        lo95=best, hi95=best, lower=0.0, upper=best, constrained=True,
                        note=f"diffusion_time_days from the fixed diffusion length at "
                        f"{temp:g} °C", best_fit=best), note
    # t = L^2 / D is monotone in L: the band is the band of L transformed
    # (widened, like the others, to hold also for a cut through the core).
    med, lo, hi, _kind, _widened = section_envelope("diffusion_time_days", draws, 0.0, top,
                                                    central_days)
    return Estimate(
        name="diffusion_time_days", unit="days", best=med, median=med, lo95=lo, hi95=hi,
        lower=0.0, upper=float(top), constrained=est.constrained,
        note=("diffusion_time_days not constrained by these data (diffusion length "
              "not constrained)" if not est.constrained else ""), best_fit=float(best),
    ), note


def _curves(prob: FitProblem, best, frac, eq, draws):
    """Spot table (every input row) and dense model curve with posterior bands."""
    traverse, usable = prob.traverse, prob.usable
    rng_range = prob.options.get("distance_range_um")
    spots = traverse.spots
    major = traverse.major
    d_all = spots["distance_um"].to_numpy(float)
    finite = np.isfinite(d_all)
    grid = np.linspace(0.0, prob.radius_um, N_CURVE_POINTS)
    pts = np.concatenate([d_all[finite], grid])
    n_spot = int(finite.sum())
    m_draw = draws.shape[0]
    with np.errstate(all="ignore"), warnings.catch_warnings():
        warnings.simplefilter("ignore")
        out_best = predict_at(prob, prob.params(best[None, :]), pts)
        out_draw = predict_at(prob, prob.params(draws), pts)
        out_frac = prob.predict(prob.params(frac[None, :]), grid)
        out_eq = prob.predict(prob.params(eq[None, :]), grid)

    def row(out, key, m=1):
        return np.reshape(out[key], (m, -1))

    best_major = row(out_best, "crystal")[0]
    band_major = np.nanpercentile(row(out_draw, "crystal", m_draw), [2.5, 97.5], axis=0)

    # Spot table, in input order.
    used_index = set(usable.index)
    n = len(spots)
    sigma_all = np.full(n, np.nan)
    col = "fo_sigma" if traverse.mineral == "olivine" else "an_sigma"
    sigma_all[:] = DEFAULT_SIGMA[traverse.mineral]
    if col in spots.columns:
        file_sig = spots[col].to_numpy(float)
        sigma_all = np.where(np.isfinite(file_sig) & (file_sig > 0), file_sig, sigma_all)
    sigma_all[spots.index.get_indexer(usable.index)] = prob.sigma
    observed = spots[major].to_numpy(float)
    model_v = np.full(n, np.nan)
    lo_v = np.full(n, np.nan)
    hi_v = np.full(n, np.nan)
    model_v[finite] = best_major[:n_spot]
    lo_v[finite] = band_major[0, :n_spot]
    hi_v[finite] = band_major[1, :n_spot]
    used = np.array([idx in used_index for idx in spots.index])
    reason = spots["reason"].astype(str).to_numpy().copy()
    if rng_range is not None:
        outside = finite & ((d_all < rng_range[0]) | (d_all > rng_range[1]))
        extra = f"outside the fitted range {rng_range[0]:g}-{rng_range[1]:g} µm"
        reason = np.where(outside, np.where(reason == "", extra, reason + "; " + extra), reason)
    residual = observed - model_v
    table = {
        "row": spots["row"].to_numpy() if "row" in spots.columns else np.arange(1, n + 1),
        "point": spots["point"].astype(str).to_numpy() if "point" in spots.columns else (
            np.arange(1, n + 1).astype(str)
        ),
        "distance_um": d_all,
        "observed": observed,
        "sigma": sigma_all,
        "model": model_v,
        "model_lo95": lo_v,
        "model_hi95": hi_v,
        "residual": residual,
        "normalized_residual": residual / (sigma_all * prob.sigma_scale),
        "used": used,
        "status": spots["status"].astype(str).to_numpy(),
        "reason": reason,
    }
    curve = {
        "distance_um": grid,
        "f": row(out_best, "f")[0][n_spot:],
        "best": best_major[n_spot:],
        "lo95": band_major[0, n_spot:],
        "hi95": band_major[1, n_spot:],
        "fractional": row(out_frac, "crystal")[0],
        "equilibrium": row(out_eq, "crystal")[0],
    }
    if "crystal_grown" in out_best:  # the grown profile before diffusion after growth
        curve["best_grown"] = row(out_best, "crystal_grown")[0][n_spot:]
    for t in prob.traces:
        tb = row(out_best, t.key)[0]
        tband = np.nanpercentile(row(out_draw, t.key, m_draw), [2.5, 97.5], axis=0)
        obs_all = spots[t.oxide].to_numpy(float)
        vals = {}
        for label, arr in (("model", tb), ("model_lo95", tband[0]), ("model_hi95", tband[1])):
            v = np.full(n, np.nan)
            v[finite] = arr[:n_spot]
            vals[label] = v
        table[f"{t.oxide}_observed"] = obs_all
        table[f"{t.oxide}_sigma"] = np.full(n, float(t.sigma[0]))
        table[f"{t.oxide}_model"] = vals["model"]
        table[f"{t.oxide}_model_lo95"] = vals["model_lo95"]
        table[f"{t.oxide}_model_hi95"] = vals["model_hi95"]
        table[f"{t.oxide}_residual"] = obs_all - vals["model"]
        curve[f"{t.oxide}_best"] = tb[n_spot:]
        curve[f"{t.oxide}_lo95"] = tband[0, n_spot:]
        curve[f"{t.oxide}_hi95"] = tband[1, n_spot:]
    for key in sorted(out_best):
        if key == "melt_ratio" or (key.startswith("melt_") and key.endswith("_wt")) or (
            key == "temperature_c"
        ):
            curve[key] = row(out_best, key)[0][n_spot:]
    return pd.DataFrame(table), pd.DataFrame(curve)


def _exhaustion_message(prob: FitProblem, theta: np.ndarray) -> str:
    """Warning text when the best-fit path nearly uses up the melt, else "".

    Crystallizing one mineral alone, the melt runs out of the exchanging
    cations at F_max (:meth:`zoning.models.CrystallizationModel.max_fraction`).
    A fit whose rim sits at :data:`EXHAUSTION_SHARE` of F_max or beyond, or
    whose melt loses all but :data:`EXHAUSTION_REMAINING` of an exchanging
    oxide, is explained by a melt the model drains of that oxide: in a
    real magma other minerals crystallize alongside and the melt evolves
    differently.
    """
    theta = np.atleast_2d(theta)
    params = prob.params(theta)
    f_rim = float(np.ravel(params["f_rim"])[0])
    f_max = float(np.ravel(prob.max_fraction(theta))[0])
    share = f_rim / f_max if f_max > 0 else float("nan")
    path_params = {k: v for k, v in params.items()
                   if k not in ("growth_exponent", "core_offset_um")}
    path_params["f_core"] = np.zeros(1) if "f_core" in path_params else 0.0
    try:
        with np.errstate(all="ignore"), warnings.catch_warnings():
            warnings.simplefilter("ignore")
            out = prob.model.path(np.array([0.0, min(f_rim, 0.999)]), strict=False,
                                  **path_params)
    except ZoningError:
        return ""
    drained = []
    for key in sorted(out):
        if key.startswith("melt_") and key.endswith("_wt"):
            v = np.reshape(out[key], (-1, 2))[0]
            if np.all(np.isfinite(v)) and v[0] > 0 and v[1] / v[0] < EXHAUSTION_REMAINING:
                oxide = key[len("melt_"):-len("_wt")]
                drained.append(f"{_OXIDE_LABEL.get(oxide, oxide)} {v[0]:.2g} -> {v[1]:.2g} wt%")
    if not drained and not (np.isfinite(share) and share >= EXHAUSTION_SHARE):
        return ""
    mineral = prob.mineral
    what = ("; melt " + ", ".join(drained)) if drained else ""
    return (
        f"the best fit crystallizes {mineral} to F_rim = {f_rim:.2f}, "
        f"{100 * share:.0f}% of the {f_max:.2f} its parent melt can make as {mineral} "
        f"alone{what}: the fit drives the melt towards exhaustion. Other minerals "
        "crystallizing alongside are not modelled, so F_rim and r are those of a "
        f"melt that makes only {mineral}; compare with the rim's glass or groundmass "
        "composition before reading F_rim."
    )


def _limit_fit(choice: ModelChoice, fits: Sequence[CandidateFit], retention: str) -> np.ndarray:
    """Best fit with r fixed (same processes as the sampled model), sampled coordinates."""
    sampled = choice.sampled
    for f in fits:
        if (f.candidate.processes == sampled.candidate.processes
                and f.candidate.retention == retention):
            return choice.problem.expand(f.theta[None, :], f.problem)[0]
    theta = sampled.theta.copy()
    if "retention" in choice.problem.free:
        theta[choice.problem.free.index("retention")] = float(retention)
    return theta


def summarise_fit(
    problem: FitProblem,
    fits: Sequence[CandidateFit],
    choice: ModelChoice,
    posterior: Posterior,
    *,
    seed: int,
    n_grid: int = 0,
    stacklevel: int = 2,
) -> FitResult:
    """Estimates, curves, diagnostics and warnings of one fit (stage 5).

    Parameters
    ----------
    problem : FitProblem
        The full problem.
    fits : sequence of CandidateFit
        Best fits of the candidate models.
    choice : ModelChoice
        The comparison and the sampled model.
    posterior : Posterior
        Draws of the sampled model.
    seed : int
        Seed of the fit (draws for derived quantities and curves use
        ``seed + 1``).
    n_grid : int, optional
        Grid points of the start search (recorded in the diagnostics).
    stacklevel : int, optional
        ``stacklevel`` of the Python warnings issued (2: the caller of this
        function).

    Returns
    -------
    FitResult
    """
    prob = choice.problem
    traverse = problem.traverse
    sampled = choice.sampled
    theta_best = sampled.theta
    chain, flat, samples = posterior.chain, posterior.flat, posterior.samples
    label = _MAJOR_LABEL[problem.mineral]
    emit = []  # (category, text), issued in order at the end
    warn_list = list(choice.messages)
    if posterior.extended_from:
        warn_list.append(
            f"the default {posterior.extended_from} sampler steps gave too few effective "
            f"draws for this posterior; the chain was continued to {chain.n_steps} steps "
            "(set --steps to choose the length yourself)."
        )
    if posterior.message:
        warn_list.append(posterior.message)
        emit.append((ConvergenceWarning, posterior.message))

    rng = np.random.default_rng(seed + 1)
    estimates = _estimates(prob, theta_best, flat, rng)
    days, days_note = _diffusion_time(prob, theta_best, flat, estimates)
    if days is not None:
        estimates["diffusion_time_days"] = days
    trade_offs = trade_off_messages(prob.free, flat, prob.lower, prob.upper)
    trade_offs += section_messages(prob.free, flat, estimates, prob.ratio_name,
                                   "Mg#" if prob.mineral == "olivine" else "Ca#")
    for text in trade_offs:
        warn_list.append(text)
        emit.append((DataQualityWarning, text))

    with np.errstate(all="ignore"):
        corr = np.corrcoef(flat, rowvar=False) if flat.shape[1] > 1 else np.ones((1, 1))
    corr = np.atleast_2d(corr)

    draw_idx = rng.choice(samples.shape[0], size=min(N_CURVE_DRAWS, samples.shape[0]),
                          replace=False)
    spots_df, curve_df = _curves(
        prob, theta_best, _limit_fit(choice, fits, "0"), _limit_fit(choice, fits, "1"),
        samples[draw_idx],
    )

    # --- diagnostics ---------------------------------------------------------
    used_rows = spots_df[spots_df["used"]].sort_values("distance_um", kind="stable")
    runs = residual_runs(
        used_rows["distance_um"].to_numpy(float),
        used_rows["residual"].to_numpy(float),
    )
    reversals = choice.reversals
    d = problem.distance_um
    if len(reversals):
        where = ", ".join(
            f"{a:g}-{b:g} µm (+{amp:.1f} mol% {label})"
            for a, b, amp in reversals[["start_um", "end_um", "amplitude"]].itertuples(
                index=False
            )
        )
        first = float(reversals["start_um"].iloc[0])
        msg = (
            f"the profile goes back towards the core composition at {where}: recharge or "
            "mixing, which no closed-system model makes. The single fit below is not a "
            "valid description; fit the segments separately, e.g. --range "
            f"0:{first:g} and --range {float(reversals['end_um'].iloc[0]):g}:"
            f"{float(np.max(d)):g}."
        )
        warn_list.append(msg)
        emit.append((DataQualityWarning, msg))
        estimates = {
            k: replace(
                e, constrained=False,
                note=(e.note + "; " if e.note else "")
                + "profile has a reversal: closed-system fit not valid",
            )
            for k, e in estimates.items()
        }
    if len(runs):
        where = ", ".join(
            f"{a:g}-{b:g} µm ({n} spots {'above' if s > 0 else 'below'})"
            for a, b, s, n in runs[["start_um", "end_um", "sign", "n_spots"]].itertuples(
                index=False
            )
        )
        msg = (
            f"residuals keep one sign over {where}, longer than chance allows (95%): the "
            "model misses a systematic feature there (Kd, diffusion after growth, or "
            "another process); consider fitting segments with --range A:B."
        )
        warn_list.append(msg)
        emit.append((DataQualityWarning, msg))
    notes_all = [
        e.note for e in estimates.values() if not e.constrained and "reversal" not in e.note
    ]
    warn_list = notes_all + warn_list
    include_flagged = prob.options.get("include_flagged", False)
    n_flagged = int((traverse.spots["status"] != "ok").sum())
    if n_flagged and not include_flagged:
        warn_list.append(
            f"{n_flagged} flagged spot(s) left out (see profile.csv 'reason'); "
            "--include-flagged puts them back."
        )
    if prob.robust:
        warn_list.append("robust (soft-L1) loss used: stray spots are down-weighted.")
    for text in calibration_messages(prob.model, lambda: prob.model.profile(
            d, prob.radius_um, strict=False, **prob.params(theta_best[None, :]))):
        if text not in warn_list:
            warn_list.append(text)
            emit.append((CalibrationRangeWarning, text))
    exhausted = _exhaustion_message(prob, theta_best)
    if exhausted:
        warn_list.append(exhausted)
        emit.append((DataQualityWarning, exhausted))
    warn_list.extend(problem.notes)
    if days_note:
        warn_list.append(days_note)

    diagnostics = {
        "acceptance_fraction": chain.acceptance_fraction,
        "n_walkers": float(chain.n_walkers),
        "n_steps": float(chain.n_steps),
        "burn_in": float(chain.burn_in),
        "thin": float(chain.thin),
        "n_starts": float(sampled.n_starts),
        "n_converged_starts": float(sampled.n_same),
        "n_grid": float(n_grid),
        "sigma_scale": float(prob.sigma_scale),
        "reversal_sigma": float(choice.reversal_sigma),
        "runs_test_z": runs_test_z(used_rows["residual"].to_numpy(float)),
    }
    for name, t, e in zip(prob.free, chain.tau, chain.ess, strict=True):
        diagnostics[f"tau_{name}"] = float(t)
        diagnostics[f"ess_{name}"] = float(e)

    opts = prob.options
    settings = {
        "mineral": problem.mineral,
        "melt": opts.get("melt", {}),
        "kd_prior_mean": prob.kd0,
        "kd_prior_sd": prob.kd_sd,
        "fe3_fraction": opts.get("fe3_fraction", float("nan")),
        "fe3_source": opts.get("fe3_source", ""),
        "geometry": opts.get("geometry", ""),
        "distance_range_um": opts.get("distance_range_um"),
        "radius_um": prob.radius_um,
        "free": list(prob.free),
        "fixed": {k: float(v) for k, v in prob.fixed.items()},
        "sigma": opts.get("sigma", ""),
        "traces": [t.oxide for t in prob.traces],
        "trace_sigma_wt": {t.oxide: float(t.sigma[0]) for t in prob.traces},
        "include_flagged": bool(include_flagged),
        "robust": bool(prob.robust),
        "temperature_c": opts.get("temperature_c", float("nan")),
        "section_h_over_r": opts.get("section_h_over_r", 0.0),
        "diffusion_length_um": opts.get("diffusion_length_um", 0.0),
        "delta_qfm": opts.get("delta_qfm", float("nan")),
        "thermometer": prob.model.thermometer,
        # spot-dense traverses: model positions interpolated to the spots (0: every spot)
        "model_nodes": int(opts.get("model_nodes", 0)),
        "seed": int(seed),
        "n_walkers": int(chain.n_walkers),
        "n_steps": int(chain.n_steps),
        "burn_in": int(chain.burn_in),
    }
    for category, text in emit:
        warnings.warn(f"traverse {traverse.name!r}: {text}", category, stacklevel=stacklevel)
    return FitResult(
        traverse=traverse,
        mineral=problem.mineral,
        estimates=estimates,
        parameter_names=prob.free,
        samples=samples,
        correlation=corr,
        spots=spots_df,
        curve=curve_df,
        comparison=choice.comparison,
        preferred_model=choice.preferred_model,
        delta_bic=choice.delta_bic,
        chi_square=choice.chi_square,
        reduced_chi_square=choice.reduced_chi_square,
        n_spots=traverse.n_spots,
        n_used=len(prob.usable),
        diagnostics=diagnostics,
        reversals=reversals,
        residual_runs=runs,
        warnings=tuple(warn_list),
        settings=settings,
        versions=_versions(),
        seed=int(seed),
        methods=prob.model.methods(processes=tuple(
            p for p, n in PROCESS_PARAMETERS.items() if n in prob.free
            or float(prob.fixed.get(n, 0.0)) > 0)) + fit_methods(
            problem.mineral, kd_mean=prob.kd0, kd_sd=prob.kd_sd,
            kd_default=bool(opts.get("kd_default", True)),
            fe3_fraction=opts.get("fe3_fraction", float("nan")),
            fe3_source=opts.get("fe3_source", "given"),
            sigma_scale=prob.sigma_scale, section_free="section_h_over_r" in prob.free),
    )
