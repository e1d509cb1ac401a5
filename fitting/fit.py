"""Inversion of one measured traverse: best fit, posterior bands, model comparison.

:func:`fit_traverse` fits the forward crystallization model of
:class:`zoning.models.CrystallizationModel` to the major-element record (Fo
or An) of a traverse, jointly with any trace-element profile present, and
returns a :class:`~zoning.fitting.results.FitResult`.

Statistical model
-----------------
Each used spot ``i`` contributes ``z_i = (y_i - m_i(theta)) / sigma_i``;
trace profiles add their own terms with their own 1-sigma. The exchange
coefficient Kd is a nuisance parameter with a Gaussian prior, which enters
the least squares as the extra residual ``(Kd - Kd0) / sd(Kd)``. All other
parameters have flat priors within their physical bounds. The
log-posterior is ``-1/2 (sum z_i^2 + ((Kd - Kd0)/sd)^2)`` (with
``robust=True`` each ``z_i^2`` is replaced by the soft-L1 loss
``2 (sqrt(1 + z_i^2) - 1)``, which down-weights stray spots).

Best fit: a coarse grid of starting values is evaluated in one batched call
of the forward model; the best few grid points (and the model's own initial
guess) are refined with lmfit's bounded ``least_squares``. The posterior is
then sampled with emcee (:mod:`zoning.fitting.sampling`).

Model comparison: the best fits with r fixed at 0 (fractional), fixed at 1
(equilibrium) and free are compared by AIC = chi2 + 2k and BIC = chi2 +
k ln(n) (Schwarz 1978), where chi2 includes the Kd prior term, k counts the
free parameters and n the fitted data values; the lowest BIC is preferred.

When the best fit is significantly worse than the stated analytical
uncertainties allow (reduced chi-square above ``1 + 3 sqrt(2/dof)``), every
sigma is multiplied by ``sqrt(reduced chi-square)`` before sampling (the
Birge ratio), so that the bands are not narrower than the data support; the
report says so.

Assumptions a user must keep in mind (stated in every report): each zone
grew in surface equilibrium with the melt; later diffusion can smooth the
zoning; off-centre sections distort the distance-to-F mapping; the answer
depends on the chosen Kd and reference melt.
"""

from __future__ import annotations

import platform
import warnings
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from importlib import metadata

import lmfit
import numpy as np
import pandas as pd
from zoning.fitting.diagnostics import find_reversals, residual_runs, runs_test_z
from zoning.fitting.methods import fit_methods
from zoning.fitting.results import Estimate, FitResult
from zoning.fitting.sampling import MIN_ESS, MIN_TAU_MULTIPLE, credible_band, run_ensemble

from zoning.exceptions import (
    CalibrationRangeWarning,
    ConvergenceWarning,
    DataQualityWarning,
    FitError,
    ZoningError,
)
from zoning.partitioning import equilibrium_crystal
from zoning.thermometry import THERMOMETERS
from zoning.traverse import MINERALS, Traverse

__all__ = ["fit_traverse", "DEFAULT_SIGMA", "DEFAULT_TRACE_SIGMA", "KD_PRIOR", "DEFAULT_N_STEPS"]

#: Default per-spot 1-sigma of the major-element record when the file gives
#: none [mol%] (common practice for routine microprobe analyses).
DEFAULT_SIGMA = {"olivine": 0.2, "plagioclase": 0.5}

#: Trace profiles fitted with each mineral: (oxide column, model trace name,
#: model output key, initial-melt parameter name).
TRACES = {
    "olivine": (("NiO", "Ni", "crystal_nio_wt", "melt0_ni_ppm"),),
    "plagioclase": (
        ("SrO", "Sr", "crystal_sro_wt", "melt0_sr_ppm"),
        ("MgO", "Mg", "crystal_mgo_wt", "melt0_mgo_wt"),
    ),
}

#: Default 1-sigma of trace oxides in the crystal [wt%] (common practice for
#: microprobe trace analyses at raised beam current and counting time).
DEFAULT_TRACE_SIGMA = {"NiO": 0.015, "SrO": 0.02, "MgO": 0.01}

#: Default Kd prior of olivine (mean, 1-sigma): Fe-Mg exchange 0.30 +/- 0.03
#: (Roeder & Emslie 1970, Contrib. Mineral. Petrol. 29, 275-289).
#: Plagioclase has no single default: the mean is the forward model's
#: default KD(Ca-Na) (or the user's value) and the 1-sigma is
#: :data:`KD_RELATIVE_SD` of it.
KD_PRIOR = {"olivine": (0.30, 0.03)}

#: Relative 1-sigma of Kd when no sd is given (olivine with a user Kd: the
#: 10% of Roeder & Emslie's 0.30 +/- 0.03). Plagioclase: 25%, because
#: KD(Ca-Na) ranges from about 1-2 in dry melts to about 5.5 in water-rich
#: melts at 200 MPa (Sisson & Grove 1993, Contrib. Mineral. Petrol. 113,
#: 143-166; from memory) and a known water content narrows it to roughly
#: this; our choice, to be replaced by a value for the melt at hand.
KD_RELATIVE_SD = {"olivine": 0.10, "plagioclase": 0.25}

#: Parameters free by default (besides the trace initial melt contents).
DEFAULT_FREE = ("ratio", "f_rim", "retention", "kd")
#: Parameters the user may free in addition.
OPTIONAL_FREE = ("f_core", "growth_exponent", "core_offset_um")

#: Default sampler steps per mineral. Plagioclase posteriors (melt Ca#,
#: KD(Ca-Na) and F) are skewed and mix more slowly: with 600 steps their 95%
#: bands came out too narrow in the coverage benchmark (benchmarks/fit.py).
DEFAULT_N_STEPS = {"olivine": 600, "plagioclase": 2000}
#: Share of the sampler steps discarded as burn-in.
BURN_FRACTION = 0.25
#: Minimum number of finite values for a trace profile to be fitted.
MIN_TRACE_SPOTS = 5
#: Fraction of the prior range above which a 95% band means "not constrained".
UNCONSTRAINED_FRACTION = 0.75
#: Posterior draws used for the model-curve envelope.
N_CURVE_DRAWS = 300
#: Points of the dense model curve.
N_CURVE_POINTS = 200
#: Coarse start grid: levels of the melt ratio, F at the rim and retention.
GRID_RATIO, GRID_F, GRID_R = 14, 9, 5
#: Grid points refined by the local minimiser (plus the model's own guess).
N_REFINE = 4

_RATIO = {"olivine": "melt_mg_number", "plagioclase": "melt_ca_number"}
_MELT_OXIDE = {"olivine": "melt_mgo_wt", "plagioclase": "melt_cao_wt"}
_MAJOR_LABEL = {"olivine": "Fo", "plagioclase": "An"}


def _soft_l1(z2):
    """Soft-L1 loss of squared normalized residuals (scipy's definition)."""
    return 2.0 * (np.sqrt(1.0 + z2) - 1.0)


def _versions() -> dict[str, str]:
    out = {"python": platform.python_version()}
    for dist in ("zoning", "numpy", "scipy", "lmfit", "emcee", "pandas"):
        try:
            out[dist] = metadata.version(dist)
        except metadata.PackageNotFoundError:
            out[dist] = "unknown"
    return out


@dataclass(eq=False)
class _Problem:
    """Data, model and parameter layout of one fit (private)."""

    model: object
    names: tuple  # every model parameter, model order
    free: tuple  # free parameter names, model order
    fixed: dict  # name -> value for the others
    lower: np.ndarray
    upper: np.ndarray
    kd0: float
    kd_sd: float
    distance_um: np.ndarray
    radius_um: float
    y: np.ndarray
    sigma: np.ndarray
    traces: list  # (oxide, key, param, obs, sigma, finite mask)
    robust: bool
    sigma_scale: float = 1.0

    @property
    def n_data(self) -> int:
        return int(self.y.size + sum(int(t[5].sum()) for t in self.traces))

    def params(self, theta: np.ndarray, free: Sequence[str] | None = None) -> dict:
        free = self.free if free is None else free
        theta = np.atleast_2d(theta)
        out = dict(self.fixed)
        for j, name in enumerate(free):
            out[name] = theta[:, j]
        return out

    def predict(self, params: Mapping, distance_um=None) -> dict:
        # Warnings of the forward model (calibration ranges) are silenced
        # here, where the optimiser and sampler explore; the best fit is
        # checked once with warnings on (see fit_traverse).
        d = self.distance_um if distance_um is None else distance_um
        with np.errstate(all="ignore"), warnings.catch_warnings():
            warnings.simplefilter("ignore")
            return self.model.profile(d, self.radius_um, strict=False, **params)

    def residuals(self, params: Mapping, m: int) -> np.ndarray:
        """Return normalized residuals (m, n_data + 1): data terms, then the Kd prior."""
        out = self.predict(params)
        s = self.sigma * self.sigma_scale
        parts = [(self.y - np.reshape(out["crystal"], (m, -1))) / s]
        for _oxide, key, _param, obs, sig, ok in self.traces:
            model = np.reshape(out[key], (m, -1))[:, ok]
            parts.append((obs[ok] - model) / (sig[ok] * self.sigma_scale))
        kd = np.broadcast_to(np.asarray(params["kd"], dtype=float), (m,))
        if self.kd_sd > 0:
            parts.append(((kd - self.kd0) / self.kd_sd)[:, None])
        else:
            parts.append(np.zeros((m, 1)))
        return np.concatenate(parts, axis=1)

    def objective(self, z: np.ndarray) -> np.ndarray:
        """-2 log posterior (up to a constant) of normalized residuals (m, N)."""
        data, prior = z[:, :-1], z[:, -1]
        loss = _soft_l1(data**2) if self.robust else data**2
        return loss.sum(axis=1) + prior**2

    # --- sampler coordinates -------------------------------------------------
    # The data fix the composition of the core crystal far better than the
    # melt ratio and Kd separately, which makes (ratio, Kd) a thin curved
    # ridge. The sampler therefore works with X0 = the crystal in equilibrium
    # with the parent melt, X0 = y0 / (y0 + K (1 - y0)), in place of the melt
    # ratio y0; the flat prior on y0 is kept through the Jacobian
    # dy0/dX0 = K / (1 - X0 + K X0)^2.
    def _kernel_k(self, theta: np.ndarray) -> np.ndarray:
        kd = theta[:, self.free.index("kd")] if "kd" in self.free else np.full(
            theta.shape[0], self.fixed["kd"]
        )
        return np.asarray(self.model.law.kernel_k(kd), dtype=float)

    def to_sampler(self, theta: np.ndarray) -> np.ndarray:
        theta = np.atleast_2d(np.asarray(theta, dtype=float))
        u = theta.copy()
        k = self._kernel_k(theta)
        y = theta[:, 0]
        u[:, 0] = equilibrium_crystal(y, k)
        return u

    def from_sampler(self, u: np.ndarray) -> np.ndarray:
        u = np.atleast_2d(np.asarray(u, dtype=float))
        theta = u.copy()
        k = self._kernel_k(u)
        x = u[:, 0]
        theta[:, 0] = k * x / (1.0 - x + k * x)
        return theta

    def sampler_bounds(self) -> tuple[np.ndarray, np.ndarray]:
        lo, hi = self.lower.copy(), self.upper.copy()
        lo[0], hi[0] = 0.0, 1.0
        return lo, hi

    def log_prob_sampler(self, u: np.ndarray) -> np.ndarray:
        u = np.atleast_2d(u)
        x = u[:, 0]
        ok = (x > 0.0) & (x < 1.0)
        lp = np.full(u.shape[0], -np.inf)
        if ok.any():
            sub = u[ok]
            k = self._kernel_k(sub)
            with np.errstate(all="ignore"):
                log_jac = np.log(k) - 2.0 * np.log(1.0 - sub[:, 0] + k * sub[:, 0])
            value = self.log_prob(self.from_sampler(sub)) + log_jac
            lp[ok] = np.where(np.isfinite(value), value, -np.inf)
        return lp

    def log_prob(self, theta: np.ndarray) -> np.ndarray:
        theta = np.atleast_2d(theta)
        inside = np.all((theta >= self.lower) & (theta <= self.upper), axis=1)
        lp = np.full(theta.shape[0], -np.inf)
        if inside.any():
            sub = theta[inside]
            with np.errstate(all="ignore"), warnings.catch_warnings():
                warnings.simplefilter("ignore")
                z = self.residuals(self.params(sub), sub.shape[0])
            value = -0.5 * self.objective(z)
            lp[inside] = np.where(np.isfinite(value), value, -np.inf)
        return lp


def _spec_map(model) -> dict:
    return {spec.name: spec for spec in model.parameters}


def _select_traces(traverse, used, mineral, traces, trace_sigma):
    """Trace profiles to fit: list of (oxide, model name, key, param, obs, sigma, mask)."""
    available = TRACES[mineral]
    if traces is None:
        wanted = ()
    elif isinstance(traces, str):
        if traces != "auto":
            wanted = (traces,)
        else:
            wanted = tuple(t[0] for t in available)
    else:
        wanted = tuple(traces)
    known = {t[0]: t for t in available}
    chosen = []
    for oxide in wanted:
        if oxide not in known:
            raise ZoningError(
                f"trace profile {oxide!r} cannot be fitted for {mineral}; "
                f"expected one of {sorted(known)}. Choose one of these or traces=()."
            )
        if oxide not in used.columns:
            if traces == "auto":
                continue
            raise ZoningError(
                f"trace profile {oxide!r} requested but traverse {traverse.name!r} "
                f"has no {oxide} column; columns are {list(used.columns)}. "
                "Remove it from traces or add the column."
            )
        obs = used[oxide].to_numpy(float)
        ok = np.isfinite(obs)
        if ok.sum() < max(MIN_TRACE_SPOTS, 0.5 * obs.size):
            if traces == "auto":
                continue
            raise ZoningError(
                f"trace profile {oxide!r} of traverse {traverse.name!r} has only "
                f"{int(ok.sum())} finite values among {obs.size} used spots; expected at "
                f"least {max(MIN_TRACE_SPOTS, int(np.ceil(0.5 * obs.size)))}. "
                "Fit without it (traces=())."
            )
        if isinstance(trace_sigma, Mapping):
            s = float(trace_sigma.get(oxide, DEFAULT_TRACE_SIGMA[oxide]))
        elif trace_sigma is not None:
            s = float(trace_sigma)
        else:
            s = DEFAULT_TRACE_SIGMA[oxide]
        if not (np.isfinite(s) and s > 0):
            raise ZoningError(
                f"trace sigma for {oxide} must be a positive number [wt%]; got {s!r}. "
                "Give e.g. 0.015."
            )
        _, name, key, param = known[oxide]
        chosen.append((oxide, name, key, param, obs, np.full(obs.shape, s), ok))
    return chosen


def _split_sigma(sigma, trace_sigma, mineral):
    """Accept ``sigma`` as a number or a mapping {"fo"/"an": .., oxide: ..}."""
    if not isinstance(sigma, Mapping):
        return sigma, trace_sigma
    major_key = "fo" if mineral == "olivine" else "an"
    major = None
    traces = dict(trace_sigma) if isinstance(trace_sigma, Mapping) else {}
    for key, value in sigma.items():
        if str(key).lower() == major_key:
            major = value
        elif str(key) in DEFAULT_TRACE_SIGMA:
            traces[str(key)] = value
        elif str(key).lower() not in ("fo", "an"):
            raise ZoningError(
                f"sigma key {key!r} not understood; expected {major_key!r} [mol%] or a "
                f"trace oxide among {sorted(DEFAULT_TRACE_SIGMA)} [wt%]. Rename the key."
            )
    if not traces and not isinstance(trace_sigma, Mapping):
        traces = trace_sigma
    return major, traces


def _major_sigma(used, mineral, sigma):
    column = "fo_sigma" if mineral == "olivine" else "an_sigma"
    if sigma is not None:
        s = float(sigma)
        if not (np.isfinite(s) and s > 0):
            raise ZoningError(
                f"sigma must be a positive number [mol%]; got {sigma!r}. "
                f"Give e.g. {DEFAULT_SIGMA[mineral]}."
            )
        return np.full(len(used), s), f"user value {s:g} mol%"
    per_spot = (
        used[column].to_numpy(float) if column in used.columns else np.full(len(used), np.nan)
    )
    good = np.isfinite(per_spot) & (per_spot > 0)
    out = np.where(good, per_spot, DEFAULT_SIGMA[mineral])
    if good.all():
        return out, "per spot from the file"
    if good.any():
        return out, (
            f"per spot from the file; default {DEFAULT_SIGMA[mineral]:g} mol% where missing"
        )
    return out, f"default {DEFAULT_SIGMA[mineral]:g} mol% (common practice)"


def _build_model(mineral, melt, kd, fe3_fraction, traces, geometry, temperature_c,
                 thermometer="helz_thornber_1987"):
    from zoning.models import CrystallizationModel

    return CrystallizationModel(
        mineral,
        dict(melt),
        kd=kd,
        fe3_fraction=fe3_fraction,
        traces=tuple(traces),
        geometry=geometry,
        temperature_c=temperature_c,
        thermometer=thermometer,
    )


def _grid_starts(prob: _Problem, ratio_name: str) -> tuple[np.ndarray, int]:
    """Evaluate a coarse grid in one batched call; return the best starts."""
    specs = _spec_map(prob.model)
    free = prob.free
    idx = {n: i for i, n in enumerate(free)}

    def levels(name, k):
        lo, hi = prob.lower[idx[name]], prob.upper[idx[name]]
        if name == "retention":
            return np.linspace(lo, hi, k)
        return np.linspace(lo, hi, k + 2)[1:-1]

    axes = []
    for name in free:
        if name == ratio_name:
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
    f_cap = _max_fraction(prob, theta)
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
    for _oxide, key, param, obs, sig, ok in prob.traces:
        j = idx[param]
        base = np.reshape(out[key], (m, -1))[:, ok]
        w = 1.0 / sig[ok] ** 2
        num = (base * obs[ok] * w).sum(axis=1)
        den = (base**2 * w).sum(axis=1)
        scale = num / np.where(den > 0, den, 1.0)
        scale = np.where((den > 0) & np.isfinite(scale) & (scale > 0), scale, 1.0)
        theta[:, j] = np.clip(theta[:, j] * scale, prob.lower[j], prob.upper[j])
        fitted = base * (theta[:, j] / np.where(params[param] > 0, params[param], 1.0))[:, None]
        chi2 += (((obs[ok] - fitted) / sig[ok]) ** 2).sum(axis=1)
    return chi2


def _max_fraction(prob: _Problem, theta: np.ndarray) -> np.ndarray:
    """Largest F the parent melt of each parameter set can reach (m,)."""
    ratio = prob.params(theta)[prob.free[0]]
    return np.asarray(prob.model.max_fraction(**{prob.free[0]: ratio}), dtype=float)


def _least_squares(prob: _Problem, start: np.ndarray, free: Sequence[str]):
    """Refine one start with lmfit; returns (theta, objective, success)."""
    lo = {n: prob.lower[i] for i, n in enumerate(prob.free)}
    hi = {n: prob.upper[i] for i, n in enumerate(prob.free)}
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
            r = prob.residuals(prob.params(theta, free), theta.shape[0])
            r = np.where(np.isfinite(r), r, 1e6)
            cache.clear()
            cache[key] = np.vstack([r[0], ((r[1:] - r[0]) / h[:, None])])
        return cache[key]

    def fcn(p):
        return evaluate(vector(p))[0]

    def jac(p):
        return evaluate(vector(p))[1:].T

    kws = {"jac": jac}
    if prob.robust:
        kws.update(loss="soft_l1", f_scale=1.0)
    with np.errstate(all="ignore"), warnings.catch_warnings():
        warnings.simplefilter("ignore")
        mini = lmfit.Minimizer(fcn, params, nan_policy="propagate")
        res = mini.minimize(method="least_squares", **kws)
    theta = vector(res.params)
    z = prob.residuals(prob.params(theta[None, :], free), 1)
    obj = float(prob.objective(z)[0])
    return theta, obj, bool(res.success)


def _optimise(prob: _Problem, starts: np.ndarray, free: Sequence[str]):
    """Refine every start; return the best and the number that agree with it."""
    results = [_least_squares(prob, s, free) for s in starts]
    objs = np.array([r[1] for r in results])
    objs = np.where(np.isfinite(objs), objs, np.inf)
    best = int(np.argmin(objs))
    tol = max(0.05, 1e-3 * abs(objs[best]))
    n_same = int(np.sum(np.abs(objs - objs[best]) <= tol))
    return results[best][0], float(objs[best]), n_same, len(results), results[best][2]


def _fixed_r_fit(prob: _Problem, starts: np.ndarray, r_value: float):
    """Best fit with retention fixed at ``r_value``; returns (theta_full, objective)."""
    j = prob.free.index("retention")
    free = tuple(n for n in prob.free if n != "retention")
    sub_starts = np.delete(starts, j, axis=1)
    saved = prob.fixed.copy()
    prob.fixed = dict(saved, retention=r_value)
    try:
        theta, obj, _, _, _ = _optimise(prob, sub_starts, free)
    finally:
        prob.fixed = saved
    full = np.insert(theta, j, r_value)
    return full, obj


def _parse_range(distance_range):
    if distance_range is None:
        return None
    try:
        a, b = (float(v) for v in distance_range)
    except (TypeError, ValueError):
        raise ZoningError(
            f"distance_range must be two numbers (a, b) [µm]; got {distance_range!r}. "
            "Give e.g. (0, 120) or --range 0:120."
        ) from None
    if not (np.isfinite(a) and np.isfinite(b) and a < b):
        raise ZoningError(
            f"distance_range must satisfy a < b [µm]; got ({a:g}, {b:g}). "
            "Give the inner distance first, e.g. --range 0:120."
        )
    return a, b


def fit_traverse(
    traverse: Traverse,
    *,
    melt: Mapping[str, float],
    kd: float | None = None,
    kd_sd: float | None = None,
    fe3_fraction: float | None = None,
    geometry: str = "sphere",
    distance_range: tuple[float, float] | None = None,
    radius_um: float | None = None,
    free: Sequence[str] = (),
    sigma: float | None = None,
    trace_sigma: float | Mapping[str, float] | None = None,
    traces: str | Sequence[str] | None = "auto",
    include_flagged: bool = False,
    robust: bool = False,
    temperature_c: float | None = None,
    seed: int = 0,
    n_walkers: int = 64,
    n_steps: int | None = None,
    progress: bool = False,
    thermometer: str = "helz_thornber_1987",
) -> FitResult:
    """Fit a crystallization model to one traverse and sample its posterior.

    Parameters
    ----------
    traverse : zoning.Traverse
        Checked traverse (from :func:`zoning.io.read_traverses`).
    melt : mapping of str to float
        Reference melt analysis [wt%]; it fixes the less compatible member
        of the exchanging pair (``FeO`` for olivine, ``Na2O`` for
        plagioclase), e.g. ``{"FeO": 9.5}``.
    kd : float, optional
        Mean of the Kd prior (Fe-Mg exchange for olivine, KD(Ca-Na) for
        plagioclase); default :data:`KD_PRIOR` (olivine 0.30) or the forward
        model's default.
    kd_sd : float, optional
        1-sigma of the Kd prior; default 0.03 for olivine (Roeder & Emslie
        1970), 25% of the mean for plagioclase, 10%/25% of a user Kd. Zero
        fixes Kd.
    fe3_fraction : float, optional
        Melt Fe3+/FeT [fraction] (olivine); default 0.10, recorded as the
        default in the methods of the result.
    geometry : {"sphere", "cylinder", "slab"}, optional
        Growth geometry mapping distance to crystallized fraction.
    distance_range : (float, float), optional
        Fit only spots with ``a <= distance_um <= b`` [µm].
    radius_um : float, optional
        Crystal radius [µm]; default the largest distance of any spot.
    free : sequence of str, optional
        Extra parameters to fit: any of ``"f_core"``, ``"growth_exponent"``,
        ``"core_offset_um"``.
    sigma : float or mapping, optional
        1-sigma of every Fo/An value [mol%]; default: per spot from the
        file's ``fo_sigma``/``an_sigma`` where given, else 0.2 mol% Fo or
        0.5 mol% An (common practice). A user value overrides both. A
        mapping may give ``{"fo": 0.3, "NiO": 0.01}`` (major and traces).
    trace_sigma : float or mapping, optional
        1-sigma of trace oxides [wt%] (default :data:`DEFAULT_TRACE_SIGMA`).
    traces : "auto", sequence of str or None, optional
        Trace oxides to fit jointly (``"NiO"`` for olivine; ``"SrO"``,
        ``"MgO"`` for plagioclase). ``"auto"`` uses those with enough finite
        values; ``None`` or ``()`` fits the major record only.
    include_flagged : bool, optional
        Use spots flagged by the reader (default False).
    robust : bool, optional
        Soft-L1 loss instead of squares (down-weights stray spots).
    temperature_c : float, optional
        Crystallization temperature [°C]; needed by the plagioclase Sr and
        Mg partitioning laws (without it, ``traces="auto"`` skips them).
    seed : int, optional
        Seed of every random step (same seed, same numbers).
    n_walkers, n_steps : int, optional
        emcee walkers and steps, burn-in (the first quarter) included;
        default steps :data:`DEFAULT_N_STEPS` of the mineral.
    progress : bool, optional
        Show the sampler's progress bar.
    thermometer : str, optional
        Olivine: glass-MgO thermometer of the reported melt temperature
        (:data:`zoning.thermometry.THERMOMETERS`, default Helz & Thornber
        1987). Warns once (CalibrationRangeWarning) when the best-fit melt
        path leaves its calibration range.

    Returns
    -------
    FitResult

    Raises
    ------
    zoning.exceptions.FitError
        Too few usable spots, or no finite model for any start.
    zoning.exceptions.ZoningError
        Invalid settings (message says which and what to give).

    Warns
    -----
    ConvergenceWarning
        Chain too short (effective sample size < 1000 or < 50 tau).
    DataQualityWarning
        Reversals in the profile, long residual runs, poor fit.
    """
    if traverse.mineral not in MINERALS:
        raise ZoningError(
            f"traverse {traverse.name!r} has mineral {traverse.mineral!r}; "
            f"expected one of {MINERALS}. Pass mineral= when reading the file."
        )
    mineral = traverse.mineral
    major = traverse.major
    label = _MAJOR_LABEL[mineral]
    ratio_name = _RATIO[mineral]
    oxide_name = _MELT_OXIDE[mineral]
    rng_range = _parse_range(distance_range)
    extra = tuple(free)
    unknown = [n for n in extra if n not in OPTIONAL_FREE]
    if unknown:
        raise ZoningError(
            f"cannot free {unknown}; expected any of {list(OPTIONAL_FREE)}. "
            "Melt ratio, f_rim, retention and kd are always free."
        )
    n_walkers = int(n_walkers)
    n_steps = int(DEFAULT_N_STEPS[mineral] if n_steps is None else n_steps)
    if n_steps < 100:
        raise ZoningError(
            f"n_steps must be at least 100; got {n_steps}. Use e.g. --steps 600."
        )

    usable = traverse.usable(include_flagged)
    if rng_range is not None:
        dd = usable["distance_um"].to_numpy(float)
        usable = usable[(dd >= rng_range[0]) & (dd <= rng_range[1])]
    all_d = traverse.spots["distance_um"].to_numpy(float)
    if radius_um is None:
        finite_d = all_d[np.isfinite(all_d)]
        radius = float(finite_d.max()) if finite_d.size else float("nan")
    else:
        radius = float(radius_um)
    if not (np.isfinite(radius) and radius > 0):
        raise ZoningError(
            f"crystal radius must be a positive number [µm]; got {radius!r} for traverse "
            f"{traverse.name!r}. Give radius_um / --radius-um."
        )

    sigma, trace_sigma = _split_sigma(sigma, trace_sigma, mineral)
    chosen = _select_traces(traverse, usable, mineral, traces, trace_sigma)
    skipped = []
    if mineral == "plagioclase" and temperature_c is None and chosen:
        # The plagioclase Sr and Mg laws (RT ln D = A X_An + B) need a temperature.
        if traces == "auto":
            skipped = [c[0] for c in chosen]
            chosen = []
        else:
            raise ZoningError(
                f"fitting {[c[0] for c in chosen]} in plagioclase needs the temperature of "
                "the partitioning laws; got none. Give temperature_c (--temperature-c) or "
                "fit without traces."
            )
    fe3_source = "default" if fe3_fraction is None else "given"
    fe3_fraction = 0.10 if fe3_fraction is None else fe3_fraction
    model = _build_model(
        mineral, melt, kd, fe3_fraction, [c[1] for c in chosen], geometry, temperature_c,
        thermometer,
    )
    specs = _spec_map(model)
    if kd is not None:
        kd0 = float(kd)
    elif mineral in KD_PRIOR:
        kd0 = KD_PRIOR[mineral][0]
    else:
        kd0 = float(specs["kd"].default)
    if kd_sd is None:
        if kd is None and mineral in KD_PRIOR:
            kd_sd = KD_PRIOR[mineral][1]
        else:
            kd_sd = KD_RELATIVE_SD[mineral] * kd0
    kd_sd = float(kd_sd)
    if not (np.isfinite(kd0) and kd0 > 0 and np.isfinite(kd_sd) and kd_sd >= 0):
        raise ZoningError(
            f"Kd prior must be a positive mean and a non-negative sd; got {kd0!r} +/- "
            f"{kd_sd!r}. Give e.g. --kd 0.30 --kd-sd 0.03."
        )

    free_names = [ratio_name, "f_rim", "retention"]
    if kd_sd > 0:
        free_names.append("kd")
    free_names += [n for n in OPTIONAL_FREE if n in extra]
    free_names += [c[3] for c in chosen]
    order = [s.name for s in model.parameters]
    free_names = tuple(n for n in order if n in free_names)
    fixed = {n: float(specs[n].default) for n in order if n not in free_names}
    fixed["kd"] = kd0 if kd_sd == 0 else fixed.get("kd", kd0)
    fixed = {n: v for n, v in fixed.items() if n not in free_names}
    lower = np.array([float(specs[n].lower) for n in free_names])
    upper = np.array([float(specs[n].upper) for n in free_names])
    n_min = len(free_names) + 2
    if len(usable) < n_min:
        raise FitError(
            f"traverse {traverse.name!r} has {len(usable)} usable spots"
            + (f" in {rng_range[0]:g}-{rng_range[1]:g} µm" if rng_range else "")
            + f"; at least {n_min} are needed to fit {len(free_names)} parameters. "
            "Widen --range, add --include-flagged, or check the flagged spots."
        )
    d = usable["distance_um"].to_numpy(float)
    y = usable[major].to_numpy(float)
    sig, sigma_source = _major_sigma(usable, mineral, sigma)
    prob = _Problem(
        model=model,
        names=tuple(order),
        free=free_names,
        fixed=fixed,
        lower=lower,
        upper=upper,
        kd0=kd0,
        kd_sd=kd_sd,
        distance_um=d,
        radius_um=radius,
        y=y,
        sigma=sig,
        traces=[(c[0], c[2], c[3], c[4], c[5], c[6]) for c in chosen],
        robust=bool(robust),
    )

    # --- best fit: batched grid, then local refinement of the best few ----
    grid_best, n_grid = _grid_starts(prob, ratio_name)
    starts = [row for row in grid_best]
    try:
        trace_obs = {c[1]: c[4] for c in chosen}
        with np.errstate(all="ignore"), warnings.catch_warnings():
            warnings.simplefilter("ignore")
            guess = model.initial_guess(d, y, trace=trace_obs or None)
    except (ZoningError, ValueError, FloatingPointError):
        guess = None
    if guess is not None:
        row = np.array([float(guess.get(n, grid_best[0][i])) for i, n in enumerate(free_names)])
        if "kd" in free_names:
            row[free_names.index("kd")] = kd0
        starts.append(np.clip(row, lower, upper))
    starts = np.array(starts)
    theta_best, obj_best, n_same, n_starts, _ = _optimise(prob, starts, free_names)
    if not np.isfinite(obj_best):
        raise FitError(
            f"no start gave a finite model for traverse {traverse.name!r}; check the "
            "reference melt (--melt) and Kd, which must give compositions in range."
        )

    # --- model comparison: r = 0, r = 1, r free -----------------------------
    theta_frac, obj_frac = _fixed_r_fit(prob, starts, 0.0)
    theta_eq, obj_eq = _fixed_r_fit(prob, starts, 1.0)
    n_data = prob.n_data
    k_free = len(free_names)
    rows = []
    for name, obj, k in (
        ("fractional", obj_frac, k_free - 1),
        ("equilibrium", obj_eq, k_free - 1),
        ("retention", obj_best, k_free),
    ):
        rows.append(
            {
                "model": name,
                "chi_square": obj,
                "n_params": k,
                "aic": obj + 2.0 * k,
                "bic": obj + k * np.log(n_data),
            }
        )
    comparison = pd.DataFrame(rows, columns=["model", "chi_square", "n_params", "aic", "bic"])
    preferred = str(comparison.loc[comparison["bic"].idxmin(), "model"])

    z_best = prob.residuals(prob.params(theta_best), 1)[0]
    chi_data = float(np.sum(z_best[:-1] ** 2))
    dof = max(n_data - k_free, 1)
    reduced = chi_data / dof

    warn_list: list[str] = []
    notes_all: list[str] = []
    if n_same < 2 and n_starts > 1:
        warn_list.append(
            f"only {n_same} of {n_starts} starts reached the best optimum; the fit surface "
            "has several minima, check the profile and the reference melt."
        )
    # Misfit beyond the stated uncertainties widens the bands (Birge ratio).
    # With the robust loss the scale comes from the median absolute
    # normalized residual (1.4826 MAD), so that stray spots do not inflate it.
    misfit = reduced
    if robust:
        misfit = float((1.4826 * np.median(np.abs(z_best[:-1]))) ** 2)
    if misfit > 1.0 + 3.0 * np.sqrt(2.0 / dof):
        prob.sigma_scale = float(np.sqrt(misfit))
        warn_list.append(
            f"the model does not fit within the stated uncertainties (reduced chi-square "
            f"{reduced:.2f}); every sigma was multiplied by {prob.sigma_scale:.2f} so that "
            "the bands are not narrower than the data support."
        )

    # --- posterior -----------------------------------------------------------
    n_walkers = max(n_walkers, 2 * k_free + 2)
    n_walkers += n_walkers % 2
    burn_in = int(n_steps * BURN_FRACTION)
    u_best = prob.to_sampler(theta_best)[0]
    u_lower, u_upper = prob.sampler_bounds()
    try:
        chain = run_ensemble(
            prob.log_prob_sampler,
            u_best,
            u_lower,
            u_upper,
            n_walkers=n_walkers,
            n_steps=n_steps,
            burn_in=burn_in,
            seed=seed,
            covariance=_laplace_covariance(prob, u_best),
            progress=progress,
        )
    except (ValueError, np.linalg.LinAlgError) as exc:
        raise FitError(
            f"posterior sampling of traverse {traverse.name!r} failed ({exc}); the best "
            "fit may sit at the edge of what the melt can reach. Check --melt and --range, "
            "or try another --seed or more --walkers."
        ) from exc
    samples = prob.from_sampler(chain.thinned)
    flat = prob.from_sampler(chain.flat)
    short = [
        n
        for n, e, t in zip(free_names, chain.ess, chain.tau, strict=True)
        if e < MIN_ESS or (n_steps - burn_in) < MIN_TAU_MULTIPLE * t
    ]
    if short:
        post_needed = max(
            MIN_TAU_MULTIPLE * float(np.max(chain.tau)),
            MIN_ESS * float(np.max(chain.tau)) / n_walkers,
        )
        need = int(np.ceil(1.25 * post_needed / (1.0 - BURN_FRACTION) / 100.0) * 100)
        warn_list.append(
            f"posterior chain too short for {', '.join(short)} (effective sample size "
            f"{float(np.min(chain.ess)):.0f}, autocorrelation time "
            f"{float(np.max(chain.tau)):.0f} steps); run longer: --steps {need}."
        )
        warnings.warn(
            f"traverse {traverse.name!r}: {warn_list[-1]}", ConvergenceWarning, stacklevel=2
        )

    # --- estimates -----------------------------------------------------------
    rng = np.random.default_rng(seed + 1)
    estimates: dict[str, Estimate] = {}
    # The reachable F is capped by the parent melt (olivine alone uses up the
    # melt's MgO and FeO): the prior range of f_rim ends there.
    draw_rows = flat[rng.choice(flat.shape[0], size=min(2000, flat.shape[0]), replace=False)]
    f_reach = float(np.nanmax(_max_fraction(prob, np.vstack([theta_best, draw_rows]))))
    for j, name in enumerate(free_names):
        hi_j = min(upper[j], f_reach) if name == "f_rim" and np.isfinite(f_reach) else upper[j]
        estimates[name] = _estimate(
            name, specs[name].unit, theta_best[j], flat[:, j], lower[j], hi_j
        )
    for name, value in prob.fixed.items():
        if name in (ratio_name, "f_rim", "retention", "kd"):
            estimates[name] = Estimate(
                name=name, unit=specs[name].unit, best=value, median=value, lo95=value,
                hi95=value, lower=float(specs[name].lower), upper=float(specs[name].upper),
                constrained=True, note=f"{name} fixed at {value:g}",
            )
    if "kd" in free_names:
        post_sd = float(np.std(flat[:, free_names.index("kd")]))
        if post_sd > 0.8 * kd_sd:
            e = estimates["kd"]
            estimates["kd"] = _replace(
                e, note=f"kd set by its prior ({kd0:g} +/- {kd_sd:g}), hardly by these data"
            )
    # Derived: parent melt oxide and temperature, from the model at F = 0.
    j_ratio = free_names.index(ratio_name)
    derived_draws = flat[rng.choice(flat.shape[0], size=min(4000, flat.shape[0]),
                                    replace=False)]
    parent_best = _parent(prob, theta_best[None, :])
    parent_draws = _parent(prob, derived_draws)
    ratio_bounds = np.array([[lower[j_ratio]], [upper[j_ratio]]])
    bound_theta = np.repeat(theta_best[None, :], 2, axis=0)
    bound_theta[:, j_ratio] = ratio_bounds[:, 0]
    parent_bounds = _parent(prob, bound_theta)
    ratio_est = estimates[ratio_name]
    derived = [("melt_oxide", oxide_name, "wt%")]
    if mineral == "olivine":  # plagioclase temperature is an input, not derived
        derived.append(("temperature_c", "temperature_c", "°C"))
    for key, name, unit in derived:
        best_v = float(parent_best[key][0])
        if not np.isfinite(best_v):
            continue
        draws = parent_draws[key]
        lo_b, hi_b = np.sort(parent_bounds[key])
        med, lo, hi, _kind = credible_band(draws, -np.inf, np.inf)
        estimates[name] = Estimate(
            name=name, unit=unit, best=best_v, median=med, lo95=lo, hi95=hi,
            lower=float(lo_b), upper=float(hi_b), constrained=ratio_est.constrained,
            note="derived from " + ratio_name + " and the reference melt"
            + ("" if ratio_est.constrained else "; not constrained by these data"),
        )

    # --- correlation ---------------------------------------------------------
    with np.errstate(all="ignore"):
        corr = np.corrcoef(flat, rowvar=False) if flat.shape[1] > 1 else np.ones((1, 1))
    corr = np.atleast_2d(corr)

    # --- curves and spot table -----------------------------------------------
    draw_idx = rng.choice(samples.shape[0], size=min(N_CURVE_DRAWS, samples.shape[0]),
                          replace=False)
    draws = samples[draw_idx]
    spots_df, curve_df = _curves(
        prob, traverse, usable, theta_best, theta_frac, theta_eq, draws, radius, rng_range,
        chosen, sig, include_flagged,
    )

    # --- diagnostics ---------------------------------------------------------
    used_rows = spots_df[spots_df["used"]].sort_values("distance_um", kind="stable")
    runs = residual_runs(
        used_rows["distance_um"].to_numpy(float),
        used_rows["residual"].to_numpy(float),
    )
    reversals = find_reversals(d, y, sig)
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
        warnings.warn(f"traverse {traverse.name!r}: {msg}", DataQualityWarning, stacklevel=2)
        estimates = {
            k: _replace(
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
        warnings.warn(f"traverse {traverse.name!r}: {msg}", DataQualityWarning, stacklevel=2)
    for e in estimates.values():
        if not e.constrained and "reversal" not in e.note:
            notes_all.append(e.note)
    warn_list = notes_all + warn_list
    n_flagged = int((traverse.spots["status"] != "ok").sum())
    if n_flagged and not include_flagged:
        warn_list.append(
            f"{n_flagged} flagged spot(s) left out (see profile.csv 'reason'); "
            "--include-flagged puts them back."
        )
    if robust:
        warn_list.append("robust (soft-L1) loss used: stray spots are down-weighted.")
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        best_out = model.profile(d, radius, strict=False, **prob.params(theta_best[None, :]))
        if model.thermometer:  # the reported melt temperatures, parent to rim
            THERMOMETERS[model.thermometer].check_range(best_out["melt_mgo_wt"])
    for w in caught:
        if issubclass(w.category, CalibrationRangeWarning):
            text = str(w.message)
            if text not in warn_list:
                warn_list.append(text)
                warnings.warn(f"traverse {traverse.name!r}: {text}", CalibrationRangeWarning,
                              stacklevel=2)
    if skipped:
        warn_list.append(
            f"{', '.join(skipped)} not fitted: the plagioclase partitioning laws need a "
            "temperature (--temperature-c)."
        )

    diagnostics = {
        "acceptance_fraction": chain.acceptance_fraction,
        "n_walkers": float(chain.n_walkers),
        "n_steps": float(chain.n_steps),
        "burn_in": float(chain.burn_in),
        "thin": float(chain.thin),
        "n_starts": float(n_starts),
        "n_converged_starts": float(n_same),
        "n_grid": float(n_grid),
        "sigma_scale": float(prob.sigma_scale),
        "runs_test_z": runs_test_z(used_rows["residual"].to_numpy(float)),
    }
    for name, t, e in zip(free_names, chain.tau, chain.ess, strict=True):
        diagnostics[f"tau_{name}"] = float(t)
        diagnostics[f"ess_{name}"] = float(e)

    settings = {
        "mineral": mineral,
        "melt": {str(k): float(v) for k, v in dict(melt).items()},
        "kd_prior_mean": kd0,
        "kd_prior_sd": kd_sd,
        "fe3_fraction": float(fe3_fraction),
        "geometry": geometry,
        "distance_range_um": list(rng_range) if rng_range else None,
        "radius_um": radius,
        "free": list(free_names),
        "fixed": {k: float(v) for k, v in prob.fixed.items()},
        "sigma": sigma_source,
        "traces": [c[0] for c in chosen],
        "trace_sigma_wt": {c[0]: float(c[5][0]) for c in chosen},
        "include_flagged": bool(include_flagged),
        "robust": bool(robust),
        "temperature_c": float("nan") if temperature_c is None else float(temperature_c),
        "thermometer": model.thermometer,
        "seed": int(seed),
        "n_walkers": int(n_walkers),
        "n_steps": int(n_steps),
        "burn_in": int(burn_in),
    }
    return FitResult(
        traverse=traverse,
        mineral=mineral,
        estimates=estimates,
        parameter_names=free_names,
        samples=samples,
        correlation=corr,
        spots=spots_df,
        curve=curve_df,
        comparison=comparison,
        preferred_model=preferred,
        chi_square=chi_data,
        reduced_chi_square=reduced,
        n_spots=traverse.n_spots,
        n_used=len(usable),
        diagnostics=diagnostics,
        reversals=reversals,
        residual_runs=runs,
        warnings=tuple(warn_list),
        settings=settings,
        versions=_versions(),
        seed=int(seed),
        methods=model.methods() + fit_methods(
            mineral, kd_mean=kd0, kd_sd=kd_sd, kd_default=kd is None,
            fe3_fraction=fe3_fraction, fe3_source=fe3_source,
            sigma_scale=prob.sigma_scale),
    )


def _laplace_covariance(prob: _Problem, u: np.ndarray) -> np.ndarray | None:
    """Covariance (J^T J)^-1 at the best fit, in sampler coordinates ``u``.

    Forward and backward differences come from one batched call; each
    column uses whichever is finite (the best fit may sit on a bound or next
    to the largest reachable F). Returns None when no usable approximation
    exists; the sampler then starts from a small sphere instead.
    """
    lo, hi = prob.sampler_bounds()
    h = 1e-6 * (hi - lo)
    p = u.size
    batch = prob.from_sampler(np.vstack([u, u + np.diag(h), u - np.diag(h)]))
    inside = np.all((batch >= prob.lower) & (batch <= prob.upper), axis=1)
    z = np.full((batch.shape[0], prob.n_data + 1), np.nan)
    if inside[0]:
        z[inside] = prob.residuals(prob.params(batch[inside]), int(inside.sum()))
    forward = (z[1 : p + 1] - z[0]) / h[:, None]
    backward = (z[0] - z[p + 1 :]) / h[:, None]
    ok_f = np.all(np.isfinite(forward), axis=1)
    jac = np.where(ok_f[:, None], forward, backward)
    if not np.all(np.isfinite(jac)):
        return None
    # Invert the Fisher matrix in range-normalised coordinates. A direction
    # the data do not inform (e.g. retention when F at the rim is ~0) has a
    # near-zero eigenvalue: give it a variance of the whole prior range, never
    # the zero variance a pseudo-inverse would give (the walkers would then
    # start, and stay, on one value and the band would look precise).
    span = hi - lo
    scaled = jac * span[:, None]
    try:
        eigval, eigvec = np.linalg.eigh(scaled @ scaled.T)
    except np.linalg.LinAlgError:
        return None
    variance = 1.0 / np.maximum(eigval, 1.0)
    return (eigvec * variance) @ eigvec.T * np.outer(span, span)


def _replace(e: Estimate, **changes) -> Estimate:
    from dataclasses import replace

    return replace(e, **changes)


def _estimate(name, unit, best, draws, lower, upper) -> Estimate:
    med, lo, hi, kind = credible_band(draws, lower, upper)
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
    return Estimate(
        name=name, unit=unit, best=float(best), median=med, lo95=lo, hi95=hi,
        lower=float(lower), upper=float(upper), constrained=constrained, note=note,
    )


def _parent(prob: _Problem, theta: np.ndarray) -> dict:
    """Parent melt oxide of the pair and temperature at F = 0 for each row."""
    params = prob.params(theta)
    params = {k: v for k, v in params.items() if k not in ("growth_exponent", "core_offset_um")}
    params["f_core"] = np.zeros(theta.shape[0]) if "f_core" in params else 0.0
    with np.errstate(all="ignore"), warnings.catch_warnings():
        warnings.simplefilter("ignore")
        out = prob.model.path(np.array([0.0]), strict=False, **params)
    m = theta.shape[0]
    key = _MELT_OXIDE[prob.model.mineral]
    oxide = np.reshape(out[key], (m, -1))[:, 0]
    temp = np.reshape(out["temperature_c"], (m, -1))[:, 0] if "temperature_c" in out else (
        np.full(m, np.nan)
    )
    return {"melt_oxide": oxide, "temperature_c": temp}


def _curves(prob, traverse, usable, best, frac, eq, draws, radius, rng_range, chosen, sig,
            include_flagged):
    """Spot table (every input row) and dense model curve with posterior bands."""
    spots = traverse.spots
    major = traverse.major
    d_all = spots["distance_um"].to_numpy(float)
    finite = np.isfinite(d_all)
    grid = np.linspace(0.0, radius, N_CURVE_POINTS)
    pts = np.concatenate([d_all[finite], grid])
    n_spot = int(finite.sum())
    m_draw = draws.shape[0]
    with np.errstate(all="ignore"), warnings.catch_warnings():
        warnings.simplefilter("ignore")
        out_best = prob.predict(prob.params(best[None, :]), pts)
        out_draw = prob.predict(prob.params(draws), pts)
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
    pos = {idx: k for k, idx in enumerate(usable.index)}
    for idx, k in pos.items():
        sigma_all[spots.index.get_loc(idx)] = sig[k]
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
    for oxide, _name, key, _param, _obs, tsig, _ok in chosen:
        tb = row(out_best, key)[0]
        tband = np.nanpercentile(row(out_draw, key, m_draw), [2.5, 97.5], axis=0)
        obs_all = spots[oxide].to_numpy(float)
        vals = {}
        for label, arr in (("model", tb), ("model_lo95", tband[0]), ("model_hi95", tband[1])):
            v = np.full(n, np.nan)
            v[finite] = arr[:n_spot]
            vals[label] = v
        table[f"{oxide}_observed"] = obs_all
        table[f"{oxide}_sigma"] = np.full(n, float(tsig[0]))
        table[f"{oxide}_model"] = vals["model"]
        table[f"{oxide}_model_lo95"] = vals["model_lo95"]
        table[f"{oxide}_model_hi95"] = vals["model_hi95"]
        table[f"{oxide}_residual"] = obs_all - vals["model"]
        curve[f"{oxide}_best"] = tb[n_spot:]
        curve[f"{oxide}_lo95"] = tband[0, n_spot:]
        curve[f"{oxide}_hi95"] = tband[1, n_spot:]
    for key in sorted(out_best):
        if key == "melt_ratio" or (key.startswith("melt_") and key.endswith("_wt")) or (
            key == "temperature_c"
        ):
            curve[key] = row(out_best, key)[0][n_spot:]
    return pd.DataFrame(table), pd.DataFrame(curve)
