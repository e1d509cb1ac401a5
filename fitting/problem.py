"""Stage 1 of a fit: turn a traverse and the user's settings into a problem.

:func:`prepare_problem` checks every setting (raising a
:class:`~zoning.exceptions.ZoningError` that names the setting and what to
give), selects the spots and trace profiles, builds the forward model and
lays out the parameters. The result, a :class:`FitProblem`, holds the data
and the log-posterior; every later stage (best fits, choice, sampling,
summary) works on it and never on the traverse directly.

Statistical model
-----------------
Each used spot ``i`` contributes ``z_i = (y_i - m_i(theta)) / sigma_i``;
trace profiles add their own terms with their own 1-sigma. The exchange
coefficient Kd is a nuisance parameter with a Gaussian prior, which enters
the least squares as the extra residual ``(Kd - Kd0) / sd(Kd)``. All other
parameters have flat priors within their physical bounds. The log-posterior
is ``-1/2 (sum z_i^2 + ((Kd - Kd0)/sd)^2)`` (with ``robust=True`` each
``z_i^2`` is replaced by the soft-L1 loss ``2 (sqrt(1 + z_i^2) - 1)``, which
down-weights stray spots).
"""

from __future__ import annotations

import dataclasses
import functools
import warnings
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field

import numpy as np
import pandas as pd
from zoning.fitting.dense import plan_dense_nodes

from zoning.exceptions import FitError, ZoningError
from zoning.melt import read_melt
from zoning.orientation import require_orientation
from zoning.partitioning import equilibrium_crystal
from zoning.traverse import MINERALS, Traverse

__all__ = [
    "FitProblem",
    "prepare_problem",
    "DEFAULT_SIGMA",
    "DEFAULT_TRACE_SIGMA",
    "KD_PRIOR",
    "KD_RELATIVE_SD",
    "OPTIONAL_FREE",
    "PROCESS_DEFAULTS",
    "TRACES",
    "diffusion_length_max_um",
]

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

#: Parameters the user may free in addition to the melt ratio, f_rim,
#: retention and kd (and the trace initial melt contents).
OPTIONAL_FREE = ("f_core", "growth_exponent", "core_offset_um")

#: Default setting of the processes after growth, per mineral: "free" (fitted
#: with the prior of :func:`process_prior_note`) or a fixed value. Plagioclase
#: diffusion is fixed at 0: its An record is practically frozen (CaAl-NaSi
#: interdiffusion, Grove et al. 1984, Geochim. Cosmochim. Acta 48, 2113-2121),
#: so only a fitted Mg or Sr profile could constrain a diffusion length.
PROCESS_DEFAULTS = {
    "olivine": {"section_h_over_r": "free", "diffusion_length_um": "free"},
    "plagioclase": {"section_h_over_r": "free", "diffusion_length_um": 0.0},
}

#: CLI option and project key of each process parameter (for messages).
_PROCESS_OPTION = {
    "section_h_over_r": ("--section-h-over-r", "section_h_over_r"),
    "diffusion_length_um": ("--diffusion-length-um", "diffusion_length_um"),
}

#: Minimum number of finite values for a trace profile to be fitted.
MIN_TRACE_SPOTS = 5

_RATIO = {"olivine": "melt_mg_number", "plagioclase": "melt_ca_number"}
_MELT_OXIDE = {"olivine": "melt_mgo_wt", "plagioclase": "melt_cao_wt"}


#: Floor of the logarithmic sampler coordinates (F at the rim, initial trace
#: contents; in joint fits also F_core / F_rim) relative to their upper
#: bound: smaller values are not sampled. Under the flat priors the mass below
#: it is below 1e-6 of the range (an F_core within 1e-6 of the anchor's is the
#: anchor's).
LOG_FLOOR = 1e-6


def _soft_l1(z2):
    """Soft-L1 loss of squared normalized residuals (scipy's definition)."""
    return 2.0 * (np.sqrt(1.0 + z2) - 1.0)


@dataclass(frozen=True)
class TraceData:
    """One trace profile in the fit.

    Parameters
    ----------
    oxide : str
        Column of the traverse, e.g. ``"NiO"``.
    name : str
        Trace name of the forward model, e.g. ``"Ni"``.
    key : str
        Model output key, e.g. ``"crystal_nio_wt"``.
    param : str
        Initial-melt parameter, e.g. ``"melt0_ni_ppm"``.
    observed, sigma : ndarray, shape (n,)
        Measured values and 1-sigma [wt%] of the used spots.
    finite : ndarray of bool, shape (n,)
        Spots with a finite measured value.
    """

    oxide: str
    name: str
    key: str
    param: str
    observed: np.ndarray = field(repr=False)
    sigma: np.ndarray = field(repr=False)
    finite: np.ndarray = field(repr=False)


@dataclass(frozen=True, eq=False)
class FitProblem:
    """Data, forward model, parameter layout and log-posterior of one fit.

    Made by :func:`prepare_problem`; immutable: :meth:`with_fixed` and
    :meth:`with_sigma_scale` return modified copies.

    Parameters
    ----------
    traverse : Traverse
        The traverse being fitted (every spot).
    usable : pandas.DataFrame
        The spots used in the fit (rows of ``traverse.spots``).
    model : zoning.models.CrystallizationModel
        Forward model.
    names : tuple of str
        Every model parameter, model order.
    free : tuple of str
        Free parameters, model order (the columns of ``theta``).
    fixed : dict
        Name -> value of every other parameter.
    lower, upper : ndarray, shape (p,)
        Prior bounds of the free parameters.
    kd0, kd_sd : float
        Mean and 1-sigma of the Kd prior (sd 0: Kd fixed).
    distance_um, y, sigma : ndarray, shape (n,)
        Distance [µm], measured Fo/An [mol%] and its 1-sigma [mol%] of the
        used spots.
    radius_um : float
        Crystal (section) radius [µm].
    traces : tuple of TraceData
        Trace profiles fitted jointly.
    robust : bool
        Soft-L1 loss instead of squares.
    sigma_scale : float
        Factor applied to every sigma (Birge ratio, set by the choice stage).
    options : dict
        The user's settings as resolved (recorded in the result).
    notes : tuple of str
        Plain-language notes from preparing (e.g. trace profiles skipped).
    dense : zoning.fitting.dense.DenseNodes or None
        For spot-dense traverses, the nodes at which the model is evaluated
        and interpolated to the spots (:mod:`zoning.fitting.dense`).
    """

    traverse: Traverse
    usable: pd.DataFrame
    model: object
    names: tuple
    free: tuple
    fixed: dict
    lower: np.ndarray
    upper: np.ndarray
    kd0: float
    kd_sd: float
    distance_um: np.ndarray
    radius_um: float
    y: np.ndarray
    sigma: np.ndarray
    traces: tuple
    robust: bool
    sigma_scale: float = 1.0
    options: dict = field(default_factory=dict)
    notes: tuple = ()
    dense: object = None

    # --- layout ---------------------------------------------------------------
    @property
    def mineral(self) -> str:
        """Analysed mineral."""
        return self.traverse.mineral

    @property
    def ratio_name(self) -> str:
        """Name of the melt-ratio parameter (Mg# or Ca#)."""
        return _RATIO[self.mineral]

    @property
    def oxide_name(self) -> str:
        """Name of the derived parent-melt oxide."""
        return _MELT_OXIDE[self.mineral]

    @property
    def n_data(self) -> int:
        """Number of fitted data values (major spots + finite trace values)."""
        return int(self.y.size + sum(int(t.finite.sum()) for t in self.traces))

    @property
    def specs(self) -> dict:
        """ParameterSpec of every model parameter, by name."""
        return {spec.name: spec for spec in self.model.parameters}

    def params(self, theta: np.ndarray, free: Sequence[str] | None = None) -> dict:
        """Model parameters of each row of ``theta`` (free columns) plus the fixed ones."""
        free = self.free if free is None else free
        theta = np.atleast_2d(theta)
        out = dict(self.fixed)
        for j, name in enumerate(free):
            out[name] = theta[:, j]
        return out

    def with_fixed(self, values: Mapping[str, float]) -> FitProblem:
        """Copy with the named free parameters fixed at ``values``."""
        keep = [j for j, n in enumerate(self.free) if n not in values]
        return dataclasses.replace(
            self,
            free=tuple(self.free[j] for j in keep),
            fixed={**self.fixed, **{k: float(v) for k, v in values.items()}},
            lower=self.lower[keep],
            upper=self.upper[keep],
        )

    def with_sigma_scale(self, scale: float) -> FitProblem:
        """Copy with every sigma multiplied by ``scale``."""
        return dataclasses.replace(self, sigma_scale=float(scale))

    def expand(self, theta: np.ndarray, sub: FitProblem) -> np.ndarray:
        """Rows of ``sub``'s free parameters as rows of this problem's free parameters."""
        theta = np.atleast_2d(np.asarray(theta, dtype=float))
        out = np.empty((theta.shape[0], len(self.free)))
        for j, name in enumerate(self.free):
            if name in sub.free:
                out[:, j] = theta[:, sub.free.index(name)]
            else:
                out[:, j] = sub.fixed[name]
        return out

    # --- likelihood -------------------------------------------------------------
    def predict(self, params: Mapping, distance_um=None, keys=None) -> dict:
        """Forward model at the used spots (or at ``distance_um``), warnings silenced.

        Warnings of the forward model (calibration ranges) are silenced
        here, where the optimiser and sampler explore; the best fit is
        checked once with warnings on (summary stage). On a spot-dense
        traverse (``dense`` set) the model is evaluated at the nodes and
        interpolated to the used spots (only the outputs named in ``keys``,
        when given).
        """
        dense = self.dense if distance_um is None else None
        if dense is not None:
            d = dense.nodes_um
        else:
            d = self.distance_um if distance_um is None else distance_um
        with np.errstate(all="ignore"), warnings.catch_warnings():
            warnings.simplefilter("ignore")
            out = self.model.profile(d, self.radius_um, strict=False, **params)
        return out if dense is None else dense.interpolate(out, keys)

    def residuals(self, params: Mapping, m: int) -> np.ndarray:
        """Return normalized residuals (m, n_data + 1): data terms, then the Kd prior."""
        out = self.predict(params, keys=("crystal", *(t.key for t in self.traces)))
        s = self.sigma * self.sigma_scale
        parts = [(self.y - np.reshape(out["crystal"], (m, -1))) / s]
        for t in self.traces:
            model = np.reshape(out[t.key], (m, -1))[:, t.finite]
            parts.append((t.observed[t.finite] - model) / (t.sigma[t.finite] * self.sigma_scale))
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

    def log_prob(self, theta: np.ndarray) -> np.ndarray:
        """Log-posterior (up to a constant) of rows of free parameters; -inf outside."""
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

    def max_fraction(self, theta: np.ndarray) -> np.ndarray:
        """Largest F the parent melt of each parameter set can reach (m,)."""
        ratio = self.params(theta)[self.ratio_name]
        return np.asarray(self.model.max_fraction(**{self.ratio_name: ratio}), dtype=float)

    # --- sampler coordinates -------------------------------------------------
    # The data fix the composition of the core crystal far better than the
    # melt ratio and Kd separately, which makes (ratio, Kd) a thin curved
    # ridge. The sampler therefore works with X0 = the crystal in equilibrium
    # with the parent melt, X0 = y0 / (y0 + K (1 - y0)), in place of the melt
    # ratio y0; the flat prior on y0 is kept through the Jacobian
    # dy0/dX0 = K / (1 - X0 + K X0)^2.
    # F at the rim and the initial melt contents of the traces are sampled as
    # logarithms: a compatible trace (Ni in olivine, D ~ 10) fixes the
    # product of its initial melt content and a power of the melt left, so
    # the ridge along which they trade off with F (and an off-centre cut) is
    # nearly straight in the logarithms, where the ensemble's linear moves
    # follow it; in the natural values it is curved and the chains crawl
    # (autocorrelation times of ~1000 steps measured on such crystals). The
    # flat priors are kept through the Jacobian d v / d log v = v.
    @functools.cached_property
    def log_columns(self) -> np.ndarray:
        """Columns of ``theta`` sampled as logarithms (F at the rim, initial trace contents)."""
        trace_params = {t.param for t in self.traces}
        return np.array([i for i, n in enumerate(self.free)
                         if n == "f_rim" or n in trace_params], dtype=int)

    def _kernel_k(self, theta: np.ndarray) -> np.ndarray:
        kd = theta[:, self.free.index("kd")] if "kd" in self.free else np.full(
            theta.shape[0], self.fixed["kd"]
        )
        return np.asarray(self.model.law.kernel_k(kd), dtype=float)

    def _log_floor(self) -> np.ndarray:
        cols = self.log_columns
        return np.maximum(self.lower[cols], LOG_FLOOR * self.upper[cols])

    def to_sampler(self, theta: np.ndarray) -> np.ndarray:
        """Free parameters -> sampler coordinates (X0 for the ratio, logarithms)."""
        theta = np.atleast_2d(np.asarray(theta, dtype=float))
        u = theta.copy()
        k = self._kernel_k(theta)
        u[:, 0] = equilibrium_crystal(theta[:, 0], k)
        cols = self.log_columns
        if cols.size:
            with np.errstate(invalid="ignore"):
                u[:, cols] = np.log(np.maximum(theta[:, cols], self._log_floor()))
        return u

    def from_sampler(self, u: np.ndarray) -> np.ndarray:
        """Sampler coordinates -> free parameters."""
        u = np.atleast_2d(np.asarray(u, dtype=float))
        theta = u.copy()
        k = self._kernel_k(u)
        x = u[:, 0]
        theta[:, 0] = k * x / (1.0 - x + k * x)
        cols = self.log_columns
        if cols.size:
            theta[:, cols] = np.exp(u[:, cols])
        return theta

    def sampler_bounds(self) -> tuple[np.ndarray, np.ndarray]:
        """Prior bounds in sampler coordinates."""
        lo, hi = self.lower.copy(), self.upper.copy()
        lo[0], hi[0] = 0.0, 1.0
        cols = self.log_columns
        if cols.size:
            lo[cols] = np.log(self._log_floor())
            hi[cols] = np.log(self.upper[cols])
        return lo, hi

    def log_jacobian(self, u: np.ndarray) -> np.ndarray:
        """Logarithm of abs(det(d theta / d u)) of :meth:`from_sampler` at ``u`` (m,)."""
        u = np.atleast_2d(u)
        k = self._kernel_k(u)
        with np.errstate(all="ignore"):
            log_jac = np.log(k) - 2.0 * np.log(1.0 - u[:, 0] + k * u[:, 0])
        cols = self.log_columns
        if cols.size:
            log_jac = log_jac + u[:, cols].sum(axis=1)
        return log_jac

    def log_prob_sampler(self, u: np.ndarray) -> np.ndarray:
        """Log-posterior in sampler coordinates (Jacobian included); never NaN."""
        u = np.atleast_2d(u)
        x = u[:, 0]
        ok = (x > 0.0) & (x < 1.0)
        lp = np.full(u.shape[0], -np.inf)
        if ok.any():
            sub = u[ok]
            value = self.log_prob(self.from_sampler(sub)) + self.log_jacobian(sub)
            lp[ok] = np.where(np.isfinite(value), value, -np.inf)
        return lp


# --- settings ------------------------------------------------------------------


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
        chosen.append(TraceData(oxide, name, key, param, obs, np.full(obs.shape, s), ok))
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


def check_mineral(traverse: Traverse) -> str:
    """Return the traverse's mineral or raise naming the expected ones."""
    if traverse.mineral not in MINERALS:
        raise ZoningError(
            f"traverse {traverse.name!r} has mineral {traverse.mineral!r}; "
            f"expected one of {MINERALS}. Give --mineral olivine or --mineral plagioclase "
            "(project key mineral)."
        )
    return traverse.mineral


def _kd_prior(mineral, kd, kd_sd, specs):
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
    return kd0, kd_sd


def diffusion_length_max_um(radius_um: float, maximum: float) -> float:
    """Upper bound of the fitted diffusion length [µm].

    The prior of L = sqrt(D t) is uniform on [0, min(radius_um, maximum)]:
    at L = R (D t / R^2 = 1) a sphere, cylinder or slab has come within a
    fraction of a per cent of homogeneity (Crank 1975, The Mathematics of
    Diffusion, figs. 6.4 and 5.7; from memory), so longer lengths give the
    same flat profile and cannot be told apart.

    Parameters
    ----------
    radius_um : float
        Section (core-to-rim) radius of the traverse [µm].
    maximum : float
        The forward model's upper bound [µm].

    Returns
    -------
    float
    """
    return float(min(float(radius_um), float(maximum)))


def _process_setting(name, value, mineral, geometry, traces, notes):
    """Resolve one process setting to "free" or a fixed float (notes appended)."""
    option, key = _PROCESS_OPTION[name]
    hint = f"Give e.g. {option} free or {option} 0 (project key {key} = \"free\" or 0)."
    given = value is not None
    if not given:
        value = PROCESS_DEFAULTS[mineral][name]
    if isinstance(value, str):
        text = value.strip().lower()
        if text == "free":
            value = "free"
        else:
            try:
                value = float(text)
            except ValueError:
                raise ZoningError(
                    f"{name} must be 'free' or a number; got {value!r}. {hint}"
                ) from None
    elif isinstance(value, bool) or not isinstance(value, (int, float, np.floating,
                                                           np.integer)):
        raise ZoningError(f"{name} must be 'free' or a number; got {value!r}. {hint}")
    else:
        value = float(value)
    if name == "section_h_over_r":
        if geometry == "slab" and value != 0.0:
            if not given:
                notes.append(
                    "section offset not fitted (geometry slab): zones of a slab are planes, so "
                    "the offset of a cut changes nothing; an oblique cut, which stretches the "
                    "profile, is not modelled."
                )
                return 0.0
            raise ZoningError(
                f"{name} cannot be {value!r} for geometry 'slab': zones of a slab are planes "
                f"and the offset of a cut changes nothing. Give {option} 0 (project key "
                f"{key} = 0) or --geometry sphere/cylinder."
            )
        if value != "free" and not (np.isfinite(value) and 0.0 <= value < 1.0):
            raise ZoningError(
                f"{name} must be in [0, 1) (distance of the section plane from the crystal "
                f"centre over the true radius); got {value!r}. Give e.g. {option} 0 for a "
                f"cut through the core, or {option} free."
            )
        return value
    if value != "free" and not (np.isfinite(value) and value >= 0.0):
        raise ZoningError(
            f"{name} must be a diffusion length >= 0 [µm] or 'free'; got {value!r}. "
            f"Give e.g. {option} 0 (no diffusion after growth) or {option} free."
        )
    if mineral == "plagioclase" and not traces:
        if value == "free":
            raise ZoningError(
                "diffusion after growth cannot be fitted for plagioclase without an MgO or "
                "SrO profile: An (CaAl-NaSi) is practically frozen, so the An record says "
                "nothing about it. Fit an MgO/SrO profile (with --temperature-c), or give "
                f"{option} 0 (project key {key} = 0)."
            )
        if value > 0.0:
            notes.append(
                f"diffusion length {value:g} µm has no effect on this fit: An (CaAl-NaSi) "
                "is practically frozen and no MgO/SrO profile is fitted."
            )
            return 0.0
    if mineral == "plagioclase" and not given:
        notes.append(
            "diffusion after growth not fitted (plagioclase default): An (CaAl-NaSi) is "
            "practically frozen, so only MgO/SrO profiles could show it; "
            + (f"give {option} free (project key {key} = \"free\") to fit it from them."
               if traces else "fit an MgO/SrO profile (with --temperature-c) and give "
               f"{option} free to fit it.")
        )
    return value


def prepare_problem(
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
    sigma: float | Mapping | None = None,
    trace_sigma: float | Mapping[str, float] | None = None,
    traces: str | Sequence[str] | None = "auto",
    include_flagged: bool = False,
    robust: bool = False,
    temperature_c: float | None = None,
    thermometer: str = "helz_thornber_1987",
    section_h_over_r: str | float | None = None,
    diffusion_length_um: str | float | None = None,
    delta_qfm: float | None = None,
) -> FitProblem:
    """Check the settings and lay out the fit of one traverse (stage 1).

    Parameters are those of :func:`zoning.fitting.fit_traverse` (which
    documents them) without the sampler settings.

    Returns
    -------
    FitProblem
        Every parameter that may be fitted is free; later stages fix some
        of them for the compared models (:meth:`FitProblem.with_fixed`).

    Raises
    ------
    zoning.exceptions.OrientationUncertainError
        The traverse's orientation is "uncertain" and not confirmed (checked
        first, before anything else).
    zoning.exceptions.ZoningError
        Invalid settings (the message says which and what to give).
    zoning.exceptions.FitError
        Too few usable spots for the free parameters.
    """
    require_orientation(traverse)  # orientation gate: never fit an unconfirmed guess
    mineral = check_mineral(traverse)
    major = traverse.major
    rng_range = _parse_range(distance_range)
    extra = tuple(free)
    unknown = [n for n in extra if n not in OPTIONAL_FREE]
    if unknown:
        raise ZoningError(
            f"cannot free {unknown}; expected any of {list(OPTIONAL_FREE)}. "
            "Melt ratio, f_rim, retention and kd are always free."
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
            f"{traverse.name!r}. Give --radius-um (project key radius_um)."
        )

    sigma, trace_sigma = _split_sigma(sigma, trace_sigma, mineral)
    chosen = _select_traces(traverse, usable, mineral, traces, trace_sigma)
    notes = []
    if mineral == "plagioclase" and temperature_c is None and chosen:
        # The plagioclase Sr and Mg laws (RT ln D = A X_An + B) need a temperature.
        if traces == "auto":
            notes.append(
                f"{', '.join(c.oxide for c in chosen)} not fitted: the plagioclase "
                "partitioning laws need a temperature (--temperature-c)."
            )
            chosen = []
        else:
            raise ZoningError(
                f"fitting {[c.oxide for c in chosen]} in plagioclase needs the temperature "
                "of the partitioning laws; got none. Give --temperature-c (project key "
                "temperature_c) or "
                "fit without traces."
            )
    melt_input = read_melt(melt, mineral, fe3_fraction=fe3_fraction)
    melt, fe3_fraction = melt_input.oxides, melt_input.fe3_fraction
    notes[:0] = list(melt_input.notes)
    model = _build_model(
        mineral, melt, kd, fe3_fraction, [c.name for c in chosen], geometry, temperature_c,
        thermometer,
    )
    specs = {spec.name: spec for spec in model.parameters}
    kd0, kd_sd = _kd_prior(mineral, kd, kd_sd, specs)
    process = {
        "section_h_over_r": _process_setting("section_h_over_r", section_h_over_r, mineral,
                                             geometry, chosen, notes),
        "diffusion_length_um": _process_setting("diffusion_length_um", diffusion_length_um,
                                                mineral, geometry, chosen, notes),
    }
    if delta_qfm is not None and not np.isfinite(float(delta_qfm)):
        raise ZoningError(
            f"delta_qfm must be a number (log10 fO2 relative to QFM); got {delta_qfm!r}. "
            "Give e.g. --delta-qfm 0 (project key delta_qfm = 0)."
        )

    free_names = [_RATIO[mineral], "f_rim", "retention"]
    if kd_sd > 0:
        free_names.append("kd")
    free_names += [n for n in OPTIONAL_FREE if n in extra]
    free_names += [c.param for c in chosen]
    free_names += [n for n, v in process.items() if v == "free"]
    order = [s.name for s in model.parameters]
    free_names = tuple(n for n in order if n in free_names)
    fixed = {n: float(specs[n].default) for n in order if n not in free_names}
    fixed["kd"] = kd0 if kd_sd == 0 else fixed.get("kd", kd0)
    for n, v in process.items():
        if v != "free":
            fixed[n] = float(v)
    fixed = {n: v for n, v in fixed.items() if n not in free_names}
    lower = np.array([float(specs[n].lower) for n in free_names])
    upper = np.array([float(specs[n].upper) for n in free_names])
    if "diffusion_length_um" in free_names:
        j = free_names.index("diffusion_length_um")
        upper[j] = diffusion_length_max_um(radius, upper[j])
    # Process parameters are nested at 0 (growth only) and do not raise the minimum.
    n_min = len([n for n in free_names if n not in process]) + 2
    if len(usable) < n_min:
        raise FitError(
            f"traverse {traverse.name!r} has {len(usable)} usable spots"
            + (f" in {rng_range[0]:g}-{rng_range[1]:g} µm" if rng_range else "")
            + f"; at least {n_min} are needed to fit {len(free_names)} parameters. "
            "Widen --range, add --include-flagged, or check the flagged spots."
        )
    sig, sigma_source = _major_sigma(usable, mineral, sigma)
    options = {
        "melt": {str(k): float(v) for k, v in dict(melt).items()},
        "fe3_fraction": float(fe3_fraction),
        "fe3_source": melt_input.fe3_source,
        "kd_default": kd is None,
        "thermometer": model.thermometer,
        "geometry": geometry,
        "distance_range_um": list(rng_range) if rng_range else None,
        "sigma": sigma_source,
        "include_flagged": bool(include_flagged),
        "temperature_c": float("nan") if temperature_c is None else float(temperature_c),
        "delta_qfm": float("nan") if delta_qfm is None else float(delta_qfm),
        "section_h_over_r": process["section_h_over_r"],
        "diffusion_length_um": process["diffusion_length_um"],
    }
    problem = FitProblem(
        traverse=traverse,
        usable=usable,
        model=model,
        names=tuple(order),
        free=free_names,
        fixed=fixed,
        lower=lower,
        upper=upper,
        kd0=kd0,
        kd_sd=kd_sd,
        distance_um=usable["distance_um"].to_numpy(float),
        radius_um=radius,
        y=usable[major].to_numpy(float),
        sigma=sig,
        traces=tuple(chosen),
        robust=bool(robust),
        options=options,
        notes=tuple(notes),
    )
    return _with_dense_nodes(problem)


def _with_dense_nodes(problem: FitProblem) -> FitProblem:
    """Attach the node plan of a spot-dense traverse (see :mod:`zoning.fitting.dense`)."""
    plan = plan_dense_nodes(problem)
    if plan is None:
        return problem
    options = {**problem.options, "model_nodes": plan.n_nodes,
               "model_nodes_max_error_sigma": plan.max_error}
    note = (f"{problem.y.size} spots: the model was evaluated at {plan.n_nodes} positions and "
            f"interpolated to the spots (largest error {plan.max_error:.2g} sigma on prior "
            "draws)")
    return dataclasses.replace(problem, dense=plan, options=options,
                               notes=(*problem.notes, note))
