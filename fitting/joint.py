r"""Joint inversion of the crystals of one sample: one parent melt, many crystals.

The crystals of a rock that grew from one melt along one crystallization
path share the parent melt ratio (Mg# or Ca#), the reference melt, the
exchange coefficient Kd (its prior counted once for the sample) and the
retention r; each crystal has its own place on the path: the crystallized
fraction at which its core nucleated (F_core) and, when the crystals were not
erupted together, at which its rim stopped (F_rim, shared by default).
:func:`fit_sample` fits them together, tests every crystal for consistency
with the sample's melt (antecrysts) and samples the joint posterior.

Statistical model
-----------------
Crystal c contributes the normalized residuals of its spots exactly as a
single fit does (:mod:`zoning.fitting.fit`); the log-posterior of the sample
is ``-1/2 (sum_c chi2_c + ((Kd - Kd0)/sd)^2)`` plus the hierarchical prior
terms when r varies by crystal. Priors:

* parent melt ratio, shared F_rim, shared r, trace initial contents: flat
  within their physical bounds (as for single fits);
* F_core of crystal c: ``F_core = u_c F_rim`` with u_c uniform on [0, 1]
  (the core nucleated at some time between the start of crystallization and
  the rim). A flat prior on F_core itself on [0, F_rim] would, for C
  crystals, weigh F_rim by F_rim^C and push it upwards;
* hierarchical r (``retention="hierarchical"``): ``logit r_c = mu + tau z_c``
  with z_c ~ N(0, 1) (non-centred parameterisation, Papaspiliopoulos,
  Roberts & Sköld 2007), mu flat on [-6, 6] and tau half-normal with sd 1
  on the logit scale (a weakly informative group-scale prior in the sense of
  Gelman 2006). The population median expit(mu) is reported as
  ``retention`` and tau as ``retention_spread``.

Sections. By default every crystal is taken as cut through its centre
(h/R = 0). With ``section_h_over_r="free"`` each crystal has its own section
offset h/R, uniform prior on [0, :data:`zoning.models.SECTION_H_OVER_R_MAX`]
as in single fits: a spot at distance x from the section's centre lies at
radius sqrt(x^2 + h^2) of a crystal of true radius sqrt(R_obs^2 + h^2)
(:func:`zoning.geometry.zone_fraction`). Because a cut changes the profile at
O(h^2), the least-squares gradient with respect to h/R vanishes at 0; every
least-squares fit therefore also starts with h/R at :data:`SECTION_START`.
Diffusion after growth is never fitted here.

What "parent melt" means here. Moving the parent melt to a more primitive
composition and every crystal's F_core later along the path changes the
predicted profiles very little (the same melt is reached later), so the
melt before the first crystal nucleated is hardly constrained by zoning. The
joint fit therefore counts F from the nucleation of the earliest crystal of
the sample: the crystal with the smallest F_core (the *anchor*, named in
the result) has F_core = 0 by definition, and the parent melt is the melt
that grew its core. This is the usual meaning of "the melt in equilibrium
with the most primitive core"; a more primitive earlier melt is not excluded
by the data.

Vectorised evaluation
---------------------
Every (parameter set, crystal) pair is one row of a stacked evaluation: the
distances of each crystal (padded to the longest traverse) are mapped to F
with :func:`zoning.geometry.fraction_from_distance` and the model is
evaluated on per-row fractions by
:meth:`zoning.models.CrystallizationModel.path`, in chunks of
:data:`CHUNK_ROWS` rows (the kernel is fastest when its working set stays in
cache; measured in ``benchmarks/joint.py``).

Antecrysts: leave-one-out likelihood-ratio test
-----------------------------------------------
For crystal k of the set S of crystals currently taken as consistent,

.. math:: T_k = \chi^2_{min}(S) - \chi^2_{min}(S \setminus k) - \chi^2_{min}(k)

compares "crystal k shares the melt, Kd, r (and F_rim) of the others" with
"crystal k has its own" (its own single-crystal fit with F_core free): the
likelihood-ratio statistic of two nested models, asymptotically chi-square
with d degrees of freedom, d the number of parameters crystal k owns only in
the second (Wilks 1938). Every chi-square includes the Kd prior term once.
Each crystal's sigma is first scaled by its own Birge ratio (from its own
best fit) when the model cannot fit it within the stated uncertainties, so
that the test measures disagreement with the others, not misfit of the
model. The least consistent crystal is set apart when its p-value is below
:data:`ALPHA` divided by the number of crystals tested (Bonferroni), and the
test is repeated on the others until none is (sequential outlier testing,
as in Rosner 1983). Because some of the parameters are weakly determined by
one crystal, the chi-square reference with the nominal d is conservative:
consistent crystals are rarely flagged (``benchmarks/joint.py`` prints the
false-alarm rate). Crystals set apart are tested among themselves: when at
least two of them share a melt, the sample holds two groups; without a
two-thirds majority for one group the sample is reported as not recording
one melt, and no single answer is given.

Sampler
-------
Metropolis-within-Gibbs with conditionally independent blocks (Gelman et
al. 2013, ch. 11-12). Given the shared parameters, the crystals' own
parameters are independent a posteriori, so one stacked evaluation updates
every crystal at once, each with its own accept/reject; the shared
parameters are then updated together with a *shear*: a move d of the shared
block moves each crystal's block by B_c d, with B_c the regression of the
crystal's parameters on the shared ones in the Laplace (later: burn-in)
covariance, so that the strongly correlated directions (parent melt against
every F_core, F_rim against the cores) are followed in one step. The shear
is volume-preserving and its reverse is the negated move, so the plain
Metropolis ratio applies. Proposal covariances come from the Laplace
approximation at the best fit, refreshed from the first half of the
burn-in; step sizes adapt during burn-in only (Robbins-Monro towards
acceptance rates 0.44 for one-parameter blocks, 0.25 otherwise; Roberts &
Rosenthal 2009) and are fixed afterwards, so production is a valid MCMC.
Many chains run in parallel from Laplace draws; at the end of burn-in a
chain whose mean log-posterior lies far below the others' (below the first
quartile by twice the interquartile range; Vrugt et al. 2009) is restarted
from the state of another chain, so that one chain left in a tail does not
bias the bands; convergence is judged by the
integrated autocorrelation time and the split R-hat (Vehtari et al. 2021).
An ensemble sampler (emcee) needs at least twice as many walkers as
parameters and mixes slowly in 25-85 dimensions; this scheme uses the block
structure instead. ``benchmarks/joint.py`` compares it with a long emcee
chain.

References
----------
Gelman, A. (2006) Prior distributions for variance parameters in
hierarchical models. Bayesian Analysis 1, 515-534.
Gelman, A., Carlin, J. B., Stern, H. S., Dunson, D. B., Vehtari, A. &
Rubin, D. B. (2013) Bayesian Data Analysis, 3rd ed. CRC Press.
Papaspiliopoulos, O., Roberts, G. O. & Sköld, M. (2007) A general framework
for the parametrization of hierarchical models. Statistical Science 22,
59-73.
Roberts, G. O. & Rosenthal, J. S. (2009) Examples of adaptive MCMC. Journal
of Computational and Graphical Statistics 18, 349-367.
Vrugt, J. A., ter Braak, C. J. F., Diks, C. G. H., Robinson, B. A., Hyman,
J. M. & Higdon, D. (2009) Accelerating Markov chain Monte Carlo simulation by
differential evolution with self-adaptive randomized subspace sampling.
International Journal of Nonlinear Sciences and Numerical Simulation 10,
273-290.
Rosner, B. (1983) Percentage points for a generalized ESD many-outlier
procedure. Technometrics 25, 165-172.
Vehtari, A., Gelman, A., Simpson, D., Carpenter, B. & Bürkner, P.-C. (2021)
Rank-normalization, folding, and localization: an improved R-hat for
assessing convergence of MCMC. Bayesian Analysis 16, 667-718.
Wilks, S. S. (1938) The large-sample distribution of the likelihood ratio
for testing composite hypotheses. Annals of Mathematical Statistics 9,
60-62.
"""

from __future__ import annotations

import dataclasses
import time
import warnings
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field
from typing import Any

import numpy as np
import pandas as pd
from scipy import optimize, stats
from zoning.fitting.bestfit import PROCESS_START_LEVELS, _grid_starts, _optimise
from zoning.fitting.problem import (
    _MELT_OXIDE,
    _RATIO,
    DEFAULT_SIGMA,
    KD_PRIOR,
    KD_RELATIVE_SD,
    LOG_FLOOR,
    OPTIONAL_FREE,
    TRACES,
    FitProblem,
    TraceData,
    _build_model,
    _major_sigma,
    _parse_range,
    _process_setting,
    _select_traces,
    _soft_l1,
    _split_sigma,
    diffusion_length_max_um,
)
from zoning.fitting.results import Estimate
from zoning.fitting.sampling import (
    MIN_ESS,
    SHEAR_DRAWS_PER_COEF,
    T_DOF,
    T_WIDEN,
    _QuadraticShear,
    credible_band,
    laplace_covariance,
)
from zoning.fitting.summary import N_CURVE_POINTS, _versions, calibration_messages
from zoning.fitting.summary import estimate_from_draws as _estimate

from zoning import diffusion as _diffusion
from zoning import geometry as _geometry
from zoning.exceptions import (
    CalibrationRangeWarning,
    ConvergenceWarning,
    DataQualityWarning,
    FitError,
    ZoningError,
)
from zoning.melt import read_melt
from zoning.models import SECTION_H_OVER_R_MAX
from zoning.partitioning import equilibrium_crystal
from zoning.traverse import MINERALS, Traverse, by_written_sample

__all__ = ["fit_sample", "SampleFitResult", "CrystalFit", "VERDICTS"]

#: Rows of one stacked model evaluation (parameter sets x crystals): the
#: kernel's time per row was lowest around 64-128 rows on the development
#: machine (benchmarks/joint.py prints the comparison).
CHUNK_ROWS = 128
#: Points of one stacked evaluation when the crystals share the path (every
#: crystal's spots on the row of its parameter set); about 32 sets x 1000
#: spots was fastest on the development machine.
CHUNK_POINTS = 32000
#: Iterations of a crystal's own fit with F_core free (see _h1_value).
H1_MAX_EVALS = 30
#: Family-wise false-alarm rate of the antecryst test for one sample.
ALPHA = 0.05
#: Chains of the sampler (run in parallel, one stacked evaluation per move).
N_CHAINS = 32
#: Default sweeps per chain (burn-in included), per mineral; plagioclase
#: posteriors are more skewed (as for single fits).
DEFAULT_N_SWEEPS = {"olivine": 1200, "plagioclase": 2000}
#: Share of the sweeps used as burn-in (adaptation, covariance refresh).
BURN_FRACTION = 0.4
#: Without a user --steps, a chain still short after the default sweeps is
#: continued up to this many times the default in all (:func:`_sample`).
MAX_EXTEND = 3
#: Differential-evolution move (ter Braak 2006): share of the moves that use
#: a jump factor of 1 (to hop between modes) instead of 2.38/sqrt(2 d).
DE_HOP = 0.1
#: Largest split R-hat accepted without a warning (Vehtari et al. 2021).
MAX_RHAT = 1.01
#: Bounds of the hierarchical population mean of logit r, and its spread.
MU_BOUNDS = (-6.0, 6.0)
TAU_BOUNDS = (0.0, 4.0)
#: Half-normal prior sd of the spread of logit r (Gelman 2006: weakly
#: informative; one logit unit spans r = 0.27-0.73 around r = 0.5).
TAU_PRIOR_SD = 1.0
#: Posterior draws used for the model bands of profiles and melt path.
N_CURVE_DRAWS = 300
#: Share of the crystals a group must hold to be given as the sample's answer
#: when the crystals fall into two groups.
MAJORITY = 2.0 / 3.0

#: Stated in every joint result: the processes after growth that single fits
#: can fit are held at zero here.
PROCESS_NOTE = (
    "joint fits model growth only: every crystal is taken as cut through its core "
    "(section h/R = 0) and unrelaxed by diffusion after growth (L = 0). An off-centre cut "
    "or diffusion biases r towards equilibrium and can make a crystal look like an "
    "antecryst; fit doubtful crystals alone (zoning fit FILE without --joint) to test "
    "both, and leave out (--exclude) those that need them."
)
#: Stated instead when the section offset h/R is fitted per crystal.
PROCESS_NOTE_SECTION_FREE = (
    "joint fits here fit each crystal's section offset h/R (uniform prior on "
    "[0, {hmax:g}]) but not diffusion after growth: every crystal is taken as unrelaxed "
    "(L = 0). Diffusion biases r towards equilibrium and can make a crystal look like an "
    "antecryst; fit doubtful crystals alone (zoning fit FILE without --joint) to test it, "
    "and leave out (--exclude) those that need it."
)
#: Stated instead when the section offset h/R is fixed at a value > 0.
PROCESS_NOTE_SECTION_FIXED = (
    "joint fits here take every crystal as cut at the same section offset h/R = {h:g} "
    "(not fitted) and unrelaxed by diffusion after growth (L = 0). A different cut or "
    "diffusion biases r towards equilibrium and can make a crystal look like an "
    "antecryst; fit doubtful crystals alone (zoning fit FILE without --joint) or with "
    "--section-h-over-r free."
)
#: Starting level of a free section offset h/R in the least-squares fits, besides
#: the crystals' own values: the gradient with respect to h/R vanishes at h = 0
#: (a cut changes the profile at O(h^2)), so a start at 0 stays there (the
#: first level of bestfit.PROCESS_START_LEVELS).
SECTION_START = PROCESS_START_LEVELS["section_h_over_r"][0]
#: Starting level of a free diffusion length, as a share of each crystal's
#: bound (the first level of bestfit.PROCESS_START_LEVELS; same reason).
DIFFUSION_START = PROCESS_START_LEVELS["diffusion_length_um"][0]


#: Stated instead when diffusion after growth is fitted or fixed: the diffusion
#: clause, then the section clause (``{section}``) and the caution.
PROCESS_NOTE_DIFFUSION_FREE = (
    "joint fits here fit each crystal's diffusion length L = sqrt(D t) after growth "
    "(uniform prior on [0, min(R, {lmax:g} µm)], R the crystal's section radius; traces "
    "relaxed with their diffusivities relative to Fe-Mg, the rim held at the melt's "
    "composition){section}. Diffusion and near-equilibrium growth (high r) both flatten a "
    "profile: without NiO or another slower-diffusing element they trade off, and the r "
    "and L bands are then wide."
)
PROCESS_NOTE_DIFFUSION_FIXED = (
    "joint fits here relax every crystal by the same diffusion length L = {length:g} µm "
    "after growth (not fitted){section}. Crystals that sat in the melt for different times "
    "relaxed by different lengths: fit them with --diffusion-length-um free."
)
_SECTION_CLAUSE = {
    "free": " and each crystal's section offset h/R (uniform prior on [0, {hmax:g}])",
    "zero": ", every crystal taken as cut through its core (h/R = 0; an off-centre cut "
            "biases r towards equilibrium, --section-h-over-r free fits it)",
    "fixed": ", every crystal taken as cut at h/R = {h:g} (not fitted)",
}


def process_note(section_h_over_r, diffusion_length_um=0.0) -> str:
    """Statement of the processes after growth a joint fit models.

    Parameters
    ----------
    section_h_over_r : "free" or float
        The section setting of the fit (0 when growth only).
    diffusion_length_um : "free" or float, optional
        The diffusion setting of the fit [µm] (0, the default, when none).

    Returns
    -------
    str
        :data:`PROCESS_NOTE` for h/R = 0 and L = 0, otherwise the statement
        of the fitted or fixed processes.
    """
    if diffusion_length_um == 0.0:
        if section_h_over_r == "free":
            return PROCESS_NOTE_SECTION_FREE.format(hmax=SECTION_H_OVER_R_MAX)
        if float(section_h_over_r) > 0.0:
            return PROCESS_NOTE_SECTION_FIXED.format(h=float(section_h_over_r))
        return PROCESS_NOTE
    if section_h_over_r == "free":
        clause = _SECTION_CLAUSE["free"].format(hmax=SECTION_H_OVER_R_MAX)
    elif float(section_h_over_r) > 0.0:
        clause = _SECTION_CLAUSE["fixed"].format(h=float(section_h_over_r))
    else:
        clause = _SECTION_CLAUSE["zero"]
    if diffusion_length_um == "free":
        return PROCESS_NOTE_DIFFUSION_FREE.format(lmax=_diffusion.MAX_DIFFUSION_LENGTH_UM,
                                                  section=clause)
    return PROCESS_NOTE_DIFFUSION_FIXED.format(length=float(diffusion_length_um),
                                               section=clause)

#: Verdicts of a crystal.
VERDICTS = ("consistent", "likely antecryst", "second melt", "excluded", "too few spots",
            "undecided")

_SHARED_OPTIONS = {"f_rim": ("shared", "per_crystal"),
                   "retention": ("shared", "hierarchical")}


# ----------------------------------------------------------------- results
def _readonly(a) -> np.ndarray:
    arr = np.array(a, dtype=float, copy=True)
    arr.setflags(write=False)
    return arr


@dataclass(frozen=True, eq=False)
class CrystalFit:
    """One crystal of a joint fit.

    Parameters
    ----------
    name : str
        Crystal (traverse) name.
    traverse : Traverse
        The traverse (every spot, flagged or not).
    verdict : str
        One of :data:`VERDICTS`: ``"consistent"`` (shares the sample's
        melt), ``"likely antecryst"`` (set apart by the consistency test),
        ``"second melt"`` (shares a melt with other crystals set apart,
        different from the main group's), ``"excluded"`` (left out by the
        user), ``"too few spots"`` (left out: fewer usable spots than its
        parameters need; the warnings say how many) or ``"undecided"`` (too
        few crystals to tell which disagree).
    group : int
        1 for the main group, 2 for a second melt, 0 otherwise.
    estimates : mapping of str to Estimate
        The crystal's own quantities in the joint fit of its group:
        ``f_core`` always, ``f_rim`` and ``retention`` when they vary by
        crystal, plus ``growth_exponent``/``core_offset_um`` and
        ``section_h_over_r`` when fitted.
        Empty for crystals in no group.
    own_estimates : mapping of str to Estimate
        From the crystal's own single-crystal best fit (F_core = 0): the
        parent melt ratio, F at the rim, r and Kd, bands from the Laplace
        approximation at that fit (method stated in ``note``).
    consistency_statistic : float
        Leave-one-out likelihood-ratio statistic T (module docstring); NaN
        when not tested.
    consistency_dof : int
        Its degrees of freedom.
    consistency_p : float
        Chi-square p-value of T (NaN when not tested).
    chi_square, reduced_chi_square : float
        Of the crystal's data at the joint best fit of its group (own best
        fit for crystals in no group), with its sigma scale.
    own_reduced_chi_square : float
        At its own best fit, before any sigma scaling.
    sigma_scale : float
        Factor applied to its sigmas (Birge ratio of its own fit, 1 if it fits).
    n_spots, n_used : int
        Rows in the traverse; spots used.
    spots : pandas.DataFrame
        One row per input spot as in :attr:`FitResult.spots` (model and 95%
        band from the joint posterior of its group), plus ``f`` (best-fit
        crystallized fraction of the spot).
    curve : pandas.DataFrame
        Dense model curve core to rim: ``distance_um``, ``f``, ``best``,
        ``lo95``, ``hi95`` (and ``<oxide>_best``/``_lo95``/``_hi95`` per trace).
    """

    name: str
    traverse: Traverse
    verdict: str
    group: int
    estimates: Mapping[str, Estimate]
    own_estimates: Mapping[str, Estimate]
    consistency_statistic: float = float("nan")
    consistency_dof: int = 0
    consistency_p: float = float("nan")
    chi_square: float = float("nan")
    reduced_chi_square: float = float("nan")
    own_reduced_chi_square: float = float("nan")
    sigma_scale: float = 1.0
    n_spots: int = 0
    n_used: int = 0
    spots: pd.DataFrame = field(default_factory=pd.DataFrame)
    curve: pd.DataFrame = field(default_factory=pd.DataFrame)

    def __post_init__(self):
        object.__setattr__(self, "estimates", dict(self.estimates))
        object.__setattr__(self, "own_estimates", dict(self.own_estimates))


@dataclass(frozen=True, eq=False)
class SampleFitResult:
    """Everything a joint fit of the crystals of one sample produced.

    Parameters
    ----------
    name : str
        Sample name.
    mineral : {"olivine", "plagioclase"}
        The analysed mineral.
    crystals : tuple of CrystalFit
        Every crystal given, in input order (excluded ones included).
    estimates : mapping of str to Estimate
        Shared quantities of the main group, with the names of single fits:
        ``melt_mg_number``/``melt_ca_number``, ``f_rim`` (when shared),
        ``retention`` (hierarchical: population median), ``kd``, trace
        initial contents, derived ``melt_mgo_wt``/``melt_cao_wt`` and
        ``temperature_c`` (olivine); hierarchical r adds
        ``retention_spread`` (sd of logit r). When the crystals record two
        melts without a two-thirds majority, every value is NaN and
        ``constrained`` is False: there is no single answer.
    group_estimates : tuple of mapping
        Shared quantities of each group found (main group first).
    verdict : str
        ``"one melt"``, ``"one melt with antecrysts"``, ``"two melts"`` or
        ``"two melts, no majority"`` (then no single answer).
    anchor : str
        Crystal whose F_core is 0 by definition (F counts from its
        nucleation; module docstring).
    parameter_names : tuple of str
        Columns of ``samples`` (``<name>`` shared, ``<name>[<crystal>]`` per crystal).
    samples : ndarray, shape (k, p)
        Posterior draws of the main group (natural parameters), read-only.
    correlation : ndarray, shape (p, p)
        Their correlation matrix.
    path : pandas.DataFrame
        Shared melt path on an F grid from 0 to F_rim: ``f``,
        ``melt_ratio``, ``crystal`` (in equilibrium with the melt), each with
        ``_lo95``/``_hi95`` bands.
    chi_square, reduced_chi_square : float
        Of the main group's data at its joint best fit.
    n_crystals, n_antecrysts : int
        Crystals given (excluded ones included) and crystals set apart
        (likely antecrysts and second-melt crystals).
    n_spots, n_used : int
        Spots in all traverses; spots used in the main group's fit.
    excluded : tuple of str
        Crystals left out by the user.
    diagnostics : mapping of str to float
        Sampler diagnostics (``ess_<name>``, ``rhat_<name>``, acceptance
        rates, chains, sweeps, timings in seconds).
    warnings : tuple of str
        Plain-language warnings.
    settings, versions : mapping
        Every setting; versions of the libraries.
    seed : int
        Seed used.
    methods : tuple of zoning.references.MethodUse
        Every published method the result rests on (the forward model's laws,
        the Kd prior, the consistency test, the sampler), for the report's
        methods paragraph and reference list and ``fit.json``.
    """

    name: str
    mineral: str
    crystals: tuple[CrystalFit, ...]
    estimates: Mapping[str, Estimate]
    group_estimates: tuple[Mapping[str, Estimate], ...]
    verdict: str
    anchor: str
    parameter_names: tuple[str, ...]
    samples: np.ndarray
    correlation: np.ndarray
    path: pd.DataFrame
    chi_square: float = float("nan")
    reduced_chi_square: float = float("nan")
    n_crystals: int = 0
    n_antecrysts: int = 0
    n_spots: int = 0
    n_used: int = 0
    excluded: tuple[str, ...] = ()
    diagnostics: Mapping[str, float] = field(default_factory=dict)
    warnings: tuple[str, ...] = ()
    settings: Mapping[str, Any] = field(default_factory=dict)
    versions: Mapping[str, str] = field(default_factory=dict)
    seed: int = 0
    methods: tuple = ()

    def __post_init__(self):
        object.__setattr__(self, "methods", tuple(self.methods))
        object.__setattr__(self, "samples", _readonly(self.samples))
        object.__setattr__(self, "correlation", _readonly(self.correlation))
        object.__setattr__(self, "crystals", tuple(self.crystals))
        object.__setattr__(self, "estimates", dict(self.estimates))
        object.__setattr__(self, "group_estimates",
                           tuple(dict(g) for g in self.group_estimates))
        object.__setattr__(self, "parameter_names", tuple(self.parameter_names))
        object.__setattr__(self, "excluded", tuple(self.excluded))
        object.__setattr__(self, "warnings", tuple(self.warnings))
        object.__setattr__(self, "diagnostics", dict(self.diagnostics))
        object.__setattr__(self, "settings", dict(self.settings))
        object.__setattr__(self, "versions", dict(self.versions))

    @property
    def sample(self) -> str:
        """Sample name (as :attr:`FitResult.sample`, for the summary table)."""
        return self.name

    @property
    def preferred_model(self) -> str:
        """Short statement of the verdict (the summary's ``preferred_model`` column)."""
        return f"joint: {self.verdict}"

    def crystal(self, name: str) -> CrystalFit:
        """Return the crystal called ``name``.

        Raises
        ------
        KeyError
            When no crystal has that name.
        """
        for c in self.crystals:
            if c.name == name:
                return c
        raise KeyError(name)


# ----------------------------------------------------------- crystal data
@dataclass(eq=False)
class _Crystal:
    """Data of one crystal (private)."""

    name: str
    traverse: Traverse
    usable: pd.DataFrame
    distance_um: np.ndarray
    radius_um: float
    y: np.ndarray
    sigma: np.ndarray
    sigma_source: str
    traces: dict  # trace parameter -> (oxide, key, obs, sig, ok)
    sigma_scale: float = 1.0


@dataclass(eq=False)
class _Settings:
    """Model and parameter layout shared by every sub-problem (private)."""

    model: Any
    mineral: str
    ratio: str
    kd0: float
    kd_sd: float
    f_rim_mode: str
    retention_mode: str
    extra_local: tuple
    trace_params: tuple  # (param, key, oxide)
    robust: bool
    #: Section offset h/R of every crystal when not fitted (0: cut through the core).
    section_fixed: float = 0.0
    #: Diffusion length L of every crystal when not fitted [µm] (0: unrelaxed).
    diffusion_fixed: float = 0.0

    def shared_names(self) -> list[str]:
        names = [self.ratio]
        if self.f_rim_mode == "shared":
            names.append("f_rim")
        if self.retention_mode == "shared":
            names.append("retention")
        else:
            names += ["retention_mu", "retention_tau"]
        if self.kd_sd > 0:
            names.append("kd")
        names += [t[0] for t in self.trace_params]
        return names

    def local_names(self) -> list[str]:
        names = ["f_core_fraction"]
        if self.f_rim_mode == "per_crystal":
            names.append("f_rim")
        if self.retention_mode == "hierarchical":
            names.append("retention_z")
        names += list(self.extra_local)
        return names

    def bounds(self, name: str) -> tuple[float, float]:
        specs = {s.name: s for s in self.model.parameters}
        if name in specs:
            return float(specs[name].lower), float(specs[name].upper)
        return {"f_core_fraction": (0.0, 1.0), "retention_mu": MU_BOUNDS,
                "retention_tau": TAU_BOUNDS, "retention_z": (-5.0, 5.0)}[name]


def _expit(x):
    return 1.0 / (1.0 + np.exp(-x))


class _Joint:
    """Stacked joint problem over a set of crystals (private).

    Parameter vectors are ``[shared (S), local (C x Q) crystal-major]``;
    ``fixed`` marks entries held at their value (the anchor's F_core).
    """

    def __init__(self, settings: _Settings, crystals: Sequence[_Crystal]):
        self.s = settings
        self.crystals = list(crystals)
        self.shared = settings.shared_names()
        self.local = settings.local_names()
        self.S, self.Q, self.C = len(self.shared), len(self.local), len(self.crystals)
        self.D = self.S + self.C * self.Q
        lo = [settings.bounds(n)[0] for n in self.shared]
        hi = [settings.bounds(n)[1] for n in self.shared]
        for _ in range(self.C):
            lo += [settings.bounds(n)[0] for n in self.local]
            hi += [settings.bounds(n)[1] for n in self.local]
        self.lower, self.upper = np.array(lo), np.array(hi)
        if "diffusion_length_um" in self.local:
            # uniform prior on [0, min(R, model bound)] per crystal, as single fits
            for c, cr in enumerate(self.crystals):
                i = self.index("diffusion_length_um", c)
                self.upper[i] = diffusion_length_max_um(cr.radius_um, self.upper[i])
        n = max(c.distance_um.size for c in self.crystals)
        self.N = n
        self.X = np.zeros((self.C, n))
        self.Y = np.zeros((self.C, n))
        self.W = np.zeros((self.C, n))  # 1/sigma, 0 on padding
        self.R = np.array([c.radius_um for c in self.crystals])[:, None]
        self.trace_obs, self.trace_w = {}, {}
        for param, _key, _oxide in settings.trace_params:
            self.trace_obs[param] = np.zeros((self.C, n))
            self.trace_w[param] = np.zeros((self.C, n))
        for i, c in enumerate(self.crystals):
            k = c.distance_um.size
            self.X[i, :k] = c.distance_um
            self.X[i, k:] = c.distance_um[-1]
            self.Y[i, :k] = c.y
            self.W[i, :k] = 1.0 / (c.sigma * c.sigma_scale)
            for param, (_ox, _key, obs, sig, ok) in c.traces.items():
                self.trace_obs[param][i, :k] = np.where(ok, obs, 0.0)
                self.trace_w[param][i, :k] = np.where(ok, 1.0 / (sig * c.sigma_scale), 0.0)
        self.n_data = int((self.W > 0).sum() + sum((w > 0).sum() for w in self.trace_w.values()))
        self.fixed = np.zeros(self.D, dtype=bool)
        self.hier = settings.retention_mode == "hierarchical"
        # sampler coordinates (see the section below): fixed by the layout
        self._log_cols = self._log_columns()
        self._slo, self._shi = self._sampler_bounds()

    # ------------------------------------------------------------ layout
    def index(self, name: str, crystal: int | None = None) -> int:
        if crystal is None:
            return self.shared.index(name)
        return self.S + crystal * self.Q + self.local.index(name)

    def split(self, v: np.ndarray):
        v = np.atleast_2d(v)
        return v[:, : self.S], v[:, self.S :].reshape(v.shape[0], self.C, self.Q)

    def rows(self, v: np.ndarray) -> dict:
        """Model parameters of every (set, crystal) row, shape (m*C,)."""
        sh, lc = self.split(v)
        m = sh.shape[0]

        def shared(name):
            return np.repeat(sh[:, self.shared.index(name)], self.C)

        def local(name):
            return lc[:, :, self.local.index(name)].ravel()

        out = {self.s.ratio: shared(self.s.ratio)}
        out["f_rim"] = shared("f_rim") if "f_rim" in self.shared else local("f_rim")
        if self.hier:
            out["retention"] = np.clip(_expit(shared("retention_mu") + shared("retention_tau")
                                              * local("retention_z")), 0.0, 1.0)
        else:
            out["retention"] = shared("retention")
        out["kd"] = shared("kd") if "kd" in self.shared else np.full(m * self.C, self.s.kd0)
        for param, _key, _ox in self.s.trace_params:
            out[param] = shared(param)
        out["f_core"] = local("f_core_fraction") * out["f_rim"]
        for name in self.s.extra_local:
            out[name] = local(name)
        if "section_h_over_r" not in out and self.s.section_fixed > 0.0:
            out["section_h_over_r"] = np.full(m * self.C, self.s.section_fixed)
        if "diffusion_length_um" not in out and self.s.diffusion_fixed > 0.0:
            out["diffusion_length_um"] = np.full(m * self.C, self.s.diffusion_fixed)
        return out

    # -------------------------------------------------------- evaluation
    def predict(self, v: np.ndarray, distance: np.ndarray | None = None) -> dict:
        """Crystal outputs (m, C, n) at the spots (or at ``distance`` (C, n)).

        With a diffusion length L > 0 (fitted per crystal or fixed) every
        crystal output is the grown profile relaxed by diffusion after growth,
        as :meth:`zoning.models.CrystallizationModel.profile` computes it for
        one crystal: the growth profile of the true crystal on the radial grid
        of :func:`zoning.diffusion.radial_grid` is relaxed with L over the
        true radius and read at the spots' zone radii; ``"<key>_grown"`` then
        holds the growth profile.
        """
        p = self.rows(v)
        m = np.atleast_2d(v).shape[0]
        X = self.X if distance is None else distance
        n = X.shape[1]
        xr = np.broadcast_to(X[None], (m, self.C, n)).reshape(-1, n)
        rr = np.broadcast_to(self.R[None], (m, self.C, 1)).reshape(-1, 1)

        def column(value):
            return np.reshape(value, (-1, 1)) if np.ndim(value) else value

        exponent = column(p.get("growth_exponent", self._default("growth_exponent")))
        offset = column(p.get("core_offset_um", 0.0))
        section = column(p.get("section_h_over_r", 0.0))
        xi = _geometry.zone_fraction(xr, rr, offset, self.s.model.section_offset_um, section)
        f = np.clip(_geometry.fraction_from_zone(xi**exponent, p["f_core"][:, None],
                                                 p["f_rim"][:, None]), 0.0, 0.999)
        length = p.get("diffusion_length_um")
        diffuse = length is not None and bool(np.any(length > 0))
        f_eval = f
        if diffuse:
            grid = _diffusion.radial_grid()
            f_grid = _geometry.fraction_from_zone(grid[None, :] ** exponent,
                                                  p["f_core"][:, None], p["f_rim"][:, None])
            f_eval = np.concatenate([f, np.clip(f_grid, 0.0, 0.999)], axis=1)
        n_eval = f_eval.shape[1]
        keys = ["crystal"] + [k for _p, k, _o in self.s.trace_params]
        model_params = {k: val for k, val in p.items()
                        if k not in ("f_core", "f_rim", "growth_exponent", "core_offset_um",
                                     "section_h_over_r", "diffusion_length_um")}
        if self.hier:
            # r differs by crystal: one row per (set, crystal)
            rows, cols, step = m * self.C, n_eval, CHUNK_ROWS
            fs = f_eval
            params = model_params
        else:
            # the path depends on the set only: every crystal's spots on one row
            # (one integration grid per set instead of one per crystal)
            rows, cols = m, self.C * n_eval
            step = max(4, CHUNK_POINTS // cols)
            fs = f_eval.reshape(m, cols)
            params = {k: val[:: self.C] for k, val in model_params.items()}
        res_all = {k: np.empty((rows, cols)) for k in keys}
        with np.errstate(all="ignore"), warnings.catch_warnings():
            warnings.simplefilter("ignore")
            for a in range(0, rows, step):
                b = min(a + step, rows)
                res = self.s.model.path(fs[a:b], strict=False,
                                        **{k: val[a:b] for k, val in params.items()})
                for k in keys:
                    res_all[k][a:b] = res[k]
        grown = {k: res_all[k].reshape(m * self.C, n_eval) for k in keys}
        out = {"f": f}
        for k in keys:
            out[k] = grown[k][:, :n]
        if diffuse:
            positive = (length > 0)[:, None]
            rel = np.reshape(length, (-1, 1)) * np.sqrt(1.0 - np.square(section)) / rr
            with np.errstate(all="ignore"), warnings.catch_warnings():
                warnings.simplefilter("ignore")
                change = self.s.model._relax({k: g[:, n:] for k, g in grown.items()}, {},
                                             rel, rr)
            idx, w = _diffusion.grid_interpolation(xi)
            at = np.arange(m * self.C)[:, None]
            for k in keys:
                out[k + "_grown"] = out[k]
                if k in change:
                    d = change[k]
                    delta = (w[0] * d[at, idx] + w[1] * d[at, idx + 1]
                             + w[2] * d[at, idx + 2] + w[3] * d[at, idx + 3])
                    out[k] = np.where(positive, out[k] + delta, out[k])
        return {k: val.reshape(m, self.C, n) for k, val in out.items()}

    def _default(self, name):
        return {s.name: s.default for s in self.s.model.parameters}[name]

    def residual_blocks(self, v: np.ndarray):
        """Per-crystal residuals (m, C, L) and shared prior residuals (m, P)."""
        v = np.atleast_2d(v)
        out = self.predict(v)
        parts = [(self.Y - out["crystal"]) * self.W]
        for param, key, _ox in self.s.trace_params:
            parts.append((self.trace_obs[param] - out[key]) * self.trace_w[param])
        sh, lc = self.split(v)
        if self.hier:
            parts.append(lc[:, :, [self.local.index("retention_z")]])
        block = np.concatenate(parts, axis=2)
        prior = []
        if "kd" in self.shared and self.s.kd_sd > 0:
            prior.append((sh[:, self.shared.index("kd")] - self.s.kd0) / self.s.kd_sd)
        if self.hier:
            prior.append(sh[:, self.shared.index("retention_tau")] / TAU_PRIOR_SD)
        prior = np.stack(prior, axis=1) if prior else np.zeros((v.shape[0], 0))
        return block, prior

    def _n_data_block(self) -> int:
        return self.N * (1 + len(self.s.trace_params))

    def chi2_blocks(self, v: np.ndarray):
        """-2 log posterior parts: per crystal (m, C) and shared priors (m,)."""
        block, prior = self.residual_blocks(v)
        nd = self._n_data_block()
        data = block[:, :, :nd]
        loss = _soft_l1(data**2) if self.s.robust else data**2
        per = loss.sum(axis=2) + (block[:, :, nd:] ** 2).sum(axis=2)
        per = np.where(np.isfinite(per), per, np.inf)
        return per, (prior**2).sum(axis=1)

    def objective(self, v: np.ndarray) -> np.ndarray:
        per, pr = self.chi2_blocks(v)
        return per.sum(axis=1) + pr

    def flat_residuals(self, v: np.ndarray) -> np.ndarray:
        block, prior = self.residual_blocks(v)
        m = block.shape[0]
        return np.concatenate([block.reshape(m, -1), prior], axis=1)

    # ------------------------------------------------- sampler coordinates
    # The data fix the composition of the anchor's core far better than the
    # melt ratio and Kd separately; as in single fits the sampler works with
    # X0 = the crystal in equilibrium with the parent melt instead of the
    # melt ratio y0, keeping the flat prior on y0 through the Jacobian.
    # F_rim, each crystal's F_core / F_rim and the initial melt trace
    # contents are sampled as logarithms: what a crystal's spots fix is its
    # F_core = (F_core / F_rim) F_rim and its trace contents relative to the
    # melt's, so the ridge along which F_rim and every core trade off, curved
    # (hyperbolic) in the natural parameters, is straight in the logarithms
    # and the linear moves follow it. The flat priors are kept through the
    # Jacobian (d v / d log v = v).
    #
    # Where the section is off the core (h/R free, or fixed above 0), the
    # spots fix the composition of the zone the section's centre cuts, not
    # the crystal's own core: that zone grew at F = g F_rim with
    # g = c + (1 - c) s, s = (h/R)^n and c = F_core / F_rim. Every crystal
    # but the anchor (whose F_core is held at 0) is therefore sampled in
    # log g instead of log c, so that a move of h/R or n keeps the observed
    # core where the data put it instead of dragging it along a curved
    # ridge; c = (g - s) / (1 - s), with log |d c / d log g| = log g -
    # log(1 - s) in the Jacobian. Without a section offset s = 0 and g = c.
    def _k(self, w):
        if "kd" in self.shared:
            kd = w[:, self.shared.index("kd")]
        else:
            kd = np.full(w.shape[0], self.s.kd0)
        return np.asarray(self.s.model.law.kernel_k(kd), dtype=float)

    def _log_columns(self) -> np.ndarray:
        logged = {"f_rim"} | {p for p, _k, _o in self.s.trace_params}
        cols = [self.index(n) for n in self.shared if n in logged]
        for c in range(self.C):
            cols += [self.index(n, c) for n in ("f_core_fraction", "f_rim") if n in self.local]
        return np.array(cols, dtype=int)

    def _sampler_bounds(self):
        lo, hi = self.lower.copy(), self.upper.copy()
        lo[0], hi[0] = 0.0, 1.0
        L = self._log_cols
        lo[L] = np.log(np.maximum(self.lower[L], LOG_FLOOR * self.upper[L]))
        hi[L] = np.log(self.upper[L])
        return lo, hi

    def sampler_bounds(self):
        return self._slo.copy(), self._shi.copy()

    def to_sampler(self, v):
        v = np.atleast_2d(np.asarray(v, dtype=float))
        w = v.copy()
        w[:, 0] = equilibrium_crystal(v[:, 0], self._k(v))
        g_cols, s = self._observed_core(v)
        w[:, g_cols] = v[:, g_cols] + (1.0 - v[:, g_cols]) * s
        L = self._log_cols
        with np.errstate(divide="ignore"):
            w[:, L] = np.maximum(np.log(np.maximum(w[:, L], 0.0)), self._slo[L])
        return w

    def from_sampler(self, w):
        w = np.atleast_2d(np.asarray(w, dtype=float))
        v = w.copy()
        k = self._k(w)
        x = w[:, 0]
        v[:, 0] = k * x / (1.0 - x + k * x)
        L = self._log_cols
        # at the floor: the natural lower bound itself (the anchor's F_core of 0)
        v[:, L] = np.where(w[:, L] <= self._slo[L], self.lower[L], np.exp(w[:, L]))
        g_cols, s = self._observed_core(v)
        v[:, g_cols] = (v[:, g_cols] - s) / (1.0 - s)
        return v

    def _observed_core(self, v):
        """Columns sampled as the observed core's g, and s = (h/R)^n of their crystals.

        ``v`` holds natural values at least in the section and exponent
        columns (the same in both coordinate systems). Returns the columns
        (k,) of the free ``f_core_fraction`` entries and s (m, k); with no
        section offset, no columns.
        """
        if "section_h_over_r" not in self.local and not self.s.section_fixed > 0.0:
            return np.zeros(0, dtype=int), np.zeros((v.shape[0], 0))
        crystals = np.array([c for c in range(self.C)
                             if not self.fixed[self.index("f_core_fraction", c)]], dtype=int)
        cols = self.S + crystals * self.Q + self.local.index("f_core_fraction")
        if "section_h_over_r" in self.local:
            h = v[:, self.S + crystals * self.Q + self.local.index("section_h_over_r")]
        else:
            h = np.full((v.shape[0], crystals.size), self.s.section_fixed)
        if "growth_exponent" in self.local:
            n = v[:, self.S + crystals * self.Q + self.local.index("growth_exponent")]
        else:
            n = self._default("growth_exponent")
        return cols, np.clip(h, 0.0, 1.0 - 1e-12) ** n

    def log_jacobian(self, w):
        """Log |d natural / d sampler|: per crystal (m, C) and shared (m,)."""
        k = self._k(w)
        x = w[:, 0]
        with np.errstate(all="ignore"):
            shared = np.log(k) - 2.0 * np.log(1.0 - x + k * x)
        L = self._log_cols
        free = ~self.fixed[L]
        is_shared = L < self.S
        shared = shared + w[:, L[is_shared & free]].sum(axis=1)
        local = np.zeros((w.shape[0], self.C))
        sel = ~is_shared & free
        np.add.at(local.T, (L[sel] - self.S) // self.Q, w[:, L[sel]].T)
        g_cols, s = self._observed_core(w)
        if g_cols.size:
            np.add.at(local.T, (g_cols - self.S) // self.Q, -np.log1p(-s).T)
        return local, shared

    def log_parts(self, w):
        """Per-crystal (m, C) and shared (m,) log-target in sampler coordinates."""
        w = np.atleast_2d(w)
        lo, hi = self.lower, self.upper
        v = self.from_sampler(w)
        slo, shi = self._slo, self._shi
        bad_shared = ~np.all((w[:, : self.S] >= slo[: self.S]) & (w[:, : self.S] <= shi[: self.S])
                             & (v[:, : self.S] >= lo[: self.S]) & (v[:, : self.S] <= hi[: self.S]),
                             axis=1)
        local_w = w[:, self.S :].reshape(-1, self.C, self.Q)
        llo = slo[self.S :].reshape(self.C, self.Q)
        lhi = shi[self.S :].reshape(self.C, self.Q)
        local_v = v[:, self.S :].reshape(-1, self.C, self.Q)
        bad_local = ~np.all((local_w >= llo) & (local_w <= lhi)
                            & (local_v >= lo[self.S :].reshape(self.C, self.Q))
                            & (local_v <= hi[self.S :].reshape(self.C, self.Q)), axis=2)
        vc = np.clip(v, lo, hi)
        per, pr = self.chi2_blocks(vc)
        jac_local, jac_shared = self.log_jacobian(w)
        lc = np.where(bad_local, -np.inf, -0.5 * per + jac_local)
        ls = -0.5 * pr + jac_shared
        ls = np.where(bad_shared | ~np.isfinite(ls), -np.inf, ls)
        return lc, ls


# ------------------------------------------------------------ optimisation
def _jacobian(fun, x, steps, upper, groups):
    """Finite-difference Jacobian of ``fun`` (sets -> residual rows) at ``x``.

    ``groups`` lists column groups whose perturbations can share one
    evaluation (parameters of different crystals touch disjoint residual
    rows); ``groups`` entries are (columns, row masks), the row mask of each
    column selecting the residuals it can change.
    """
    h = steps * np.where(x + steps <= upper, 1.0, -1.0)
    sets = [x]
    for cols, _rows in groups:
        xs = x.copy()
        xs[cols] += h[cols]
        sets.append(xs)
    r = fun(np.vstack(sets))
    r = np.where(np.isfinite(r), r, 1e6)
    jac = np.zeros((r.shape[1], x.size))
    for g, (cols, rows) in enumerate(groups):
        diff = r[g + 1] - r[0]
        for col, mask in zip(cols, rows, strict=True):
            jac[mask, col] = diff[mask] / h[col]
    return r[0], jac


class _LeastSquares:
    """Bounded least squares of a :class:`_Joint` over its free entries."""

    def __init__(self, joint: _Joint, coords: str = "natural"):
        self.j = joint
        self.coords = coords
        self.free = np.flatnonzero(~joint.fixed)
        if coords == "natural":
            lo, hi = joint.lower, joint.upper
        else:
            lo, hi = joint.sampler_bounds()
        self.lo, self.hi = lo[self.free], hi[self.free]
        self.steps = 1e-6 * (self.hi - self.lo)
        # residual rows touched by each parameter
        S, Q, C = joint.S, joint.Q, joint.C
        L = joint._n_data_block() + (1 if joint.hier else 0)
        n_rows = C * L + (1 if ("kd" in joint.shared and joint.s.kd_sd > 0) else 0) + (
            1 if joint.hier else 0)
        self.n_rows = n_rows
        groups = []
        every = np.ones(n_rows, dtype=bool)
        pos = {int(f): i for i, f in enumerate(self.free)}
        for s in range(S):
            if s in pos:
                groups.append(([pos[s]], [every]))
        for q in range(Q):
            cols, masks = [], []
            for c in range(C):
                idx = S + c * Q + q
                if idx in pos:
                    mask = np.zeros(n_rows, dtype=bool)
                    mask[c * L : (c + 1) * L] = True
                    cols.append(pos[idx])
                    masks.append(mask)
            if cols:
                groups.append((cols, masks))
        self.groups = groups
        self.base = None

    def full(self, x_sets: np.ndarray) -> np.ndarray:
        out = np.repeat(self.base[None, :], x_sets.shape[0], axis=0)
        out[:, self.free] = x_sets
        return out

    def residuals_of(self, x_sets):
        full = self.full(np.atleast_2d(x_sets))
        v = full if self.coords == "natural" else self.j.from_sampler(full)
        v = np.clip(v, self.j.lower, self.j.upper)
        return self.j.flat_residuals(v)

    def solve(self, v0: np.ndarray, max_nfev: int = 200):
        """Return (v_best, objective) from the start ``v0`` (natural coordinates)."""
        self.base = np.asarray(v0, dtype=float).copy()
        x0 = np.clip(self.base[self.free], self.lo + 1e-9 * (self.hi - self.lo),
                     self.hi - 1e-9 * (self.hi - self.lo))
        cache = {}

        def evaluate(x):
            key = x.tobytes()
            if key not in cache:
                cache.clear()
                cache[key] = _jacobian(self.residuals_of, x, self.steps, self.hi, self.groups)
            return cache[key]

        kws = {"loss": "soft_l1", "f_scale": 1.0} if self.j.s.robust else {}
        with np.errstate(all="ignore"), warnings.catch_warnings():
            warnings.simplefilter("ignore")
            res = optimize.least_squares(
                lambda x: evaluate(x)[0], x0, jac=lambda x: evaluate(x)[1],
                bounds=(self.lo, self.hi), method="trf", x_scale=self.hi - self.lo,
                max_nfev=max_nfev, **kws,
            )
        v = self.full(res.x[None, :])[0]
        return v, float(self.j.objective(v)[0])

    def jacobian_at(self, v: np.ndarray) -> np.ndarray:
        self.base = np.asarray(v, dtype=float).copy()
        x = self.base[self.free]
        x = np.clip(x, self.lo, self.hi)
        return _jacobian(self.residuals_of, x, self.steps, self.hi, self.groups)[1]


def _fit_joint(joint: _Joint, starts: Sequence[np.ndarray], max_nfev: int = 200):
    """Best of several starts: (v, objective)."""
    ls = _LeastSquares(joint)
    best = (None, np.inf)
    for v0 in starts:
        v, obj = ls.solve(v0, max_nfev=max_nfev)
        if obj < best[1]:
            best = (v, obj)
    if best[0] is None:
        best = (np.asarray(starts[0], dtype=float), float(joint.objective(starts[0])[0]))
    return best


def _laplace(joint: _Joint, v: np.ndarray) -> np.ndarray:
    """Covariance of the free entries in sampler coordinates at ``v``.

    Directions the data do not inform get the variance of their prior range
    (never the zero variance a pseudo-inverse would give).
    """
    ls = _LeastSquares(joint, coords="sampler")
    w = joint.to_sampler(v)[0]
    jac = ls.jacobian_at(w)
    span = ls.hi - ls.lo
    scaled = jac * span[None, :]
    fisher = scaled.T @ scaled
    eigval, eigvec = np.linalg.eigh(fisher)
    variance = 1.0 / np.maximum(eigval, 1.0)
    return (eigvec * variance) @ eigvec.T * np.outer(span, span)


# ------------------------------------------------------------------ sampler
@dataclass(eq=False)
class _Chain:
    draws: np.ndarray  # (steps, chains, p) natural coordinates, free entries
    tau: np.ndarray
    ess: np.ndarray
    rhat: np.ndarray
    accept_local: float
    accept_shared: float
    accept_independence: float
    accept_de: float
    n_restarted: int
    n_chains: int
    n_sweeps: int
    burn_in: int
    extended_from: int = 0  # planned sweeps when production was continued, else 0


def _split_rhat(chain: np.ndarray) -> np.ndarray:
    """Split R-hat per parameter of a (steps, chains, p) array (Gelman et al. 2013)."""
    n = chain.shape[0] // 2
    halves = np.concatenate([chain[:n], chain[n : 2 * n]], axis=1)  # (n, 2m, p)
    means = halves.mean(axis=0)
    within = halves.var(axis=0, ddof=1).mean(axis=0)
    between = n * means.var(axis=0, ddof=1)
    with np.errstate(all="ignore"):
        var = (n - 1) / n * within + between / n
        rhat = np.sqrt(var / within)
    return np.where(within > 0, rhat, 1.0)


class _Blocks:
    """Proposal factors of the local and shared moves from a covariance."""

    def __init__(self, cov, shared_cols, local_cols, crystal_of_local):
        self.cov = cov
        self.Is, self.Il = shared_cols, local_cols
        prec = np.linalg.inv(cov)
        nL = local_cols.size
        self.Lloc = np.zeros((nL, nL))
        for c in np.unique(crystal_of_local):
            sel = np.flatnonzero(crystal_of_local == c)
            cond = np.linalg.inv(prec[np.ix_(local_cols[sel], local_cols[sel])])
            self.Lloc[np.ix_(sel, sel)] = np.linalg.cholesky(_sym(cond))
        css = cov[np.ix_(shared_cols, shared_cols)]
        self.Ls = np.linalg.cholesky(_sym(css))
        self.B = cov[np.ix_(local_cols, shared_cols)] @ np.linalg.inv(css)


def _sym(a):
    a = 0.5 * (a + a.T)
    return a + np.eye(a.shape[0]) * 1e-12 * np.max(np.abs(np.diag(a)))


def _independence(kept):
    """Multivariate t proposal from burn-in draws (None when unusable).

    An independence Metropolis-Hastings move (Tierney 1994) with the shape of
    the posterior found during burn-in, widened by :data:`T_WIDEN` with
    :data:`T_DOF` degrees of freedom (heavier tails than the posterior).
    """
    if not kept:
        return None, None, None
    tail = np.concatenate(kept, axis=0)
    if tail.shape[0] < 10 * tail.shape[1]:
        return None, None, None
    mean = tail.mean(axis=0)
    sd = tail.std(axis=0)
    if not np.all(sd > 0):
        return None, None, None
    corr = np.corrcoef(tail, rowvar=False)
    try:
        dist = stats.multivariate_t(loc=np.zeros(mean.size), shape=_sym(corr) * T_WIDEN**2,
                                    df=T_DOF)
    except (ValueError, np.linalg.LinAlgError):
        return None, None, None
    return dist, mean, sd


def _stuck_chains(logp: np.ndarray) -> np.ndarray:
    """Chains whose mean log-target lies far below the others' (boolean, per chain).

    ``logp`` is (sweeps, chains) from the second half of the burn-in. A chain
    is stuck when its mean lies below the first quartile of the chain means
    by more than twice their interquartile range (the outlier-chain test of
    Vrugt et al. 2009): a chain left in a tail or a minor mode that the
    others never visit, which would inflate R-hat and bias the bands.
    """
    means = np.where(np.isfinite(logp), logp, -np.inf).mean(axis=0)
    finite = np.isfinite(means)
    if finite.sum() < 4:
        return ~finite
    q1, q3 = np.percentile(means[finite], [25, 75])
    return ~finite | (means < q1 - 2.0 * (q3 - q1))


#: Sample in coordinates straightened by a :class:`_BlockShear` fitted to the
#: burn-in draws (False: the sampler coordinates themselves).
STRAIGHTEN = True


class _BlockShear:
    """Straightening map of the joint posterior that keeps the crystals apart.

    Fitted to burn-in draws ``u`` (k, p) of the free sampler coordinates. The
    shared entries are straightened by :class:`~zoning.fitting.sampling._QuadraticShear`
    (a triangular quadratic map with unit diagonal after standardizing); each
    local entry is standardized and shifted by a quadratic in the
    standardized shared entries, fitted by least squares to the draws:
    ``w_l = z_l - q_l(z_s)``. A crystal's entries depend only on its own
    and the shared ones, so with the shared entries held the crystals stay
    conditionally independent and the per-crystal block moves remain exact
    Gibbs steps. The map is triangular with a constant Jacobian, which
    cancels in every Metropolis-Hastings ratio: the target in ``w`` is the
    target in ``u`` at ``inverse(w)``, whatever the coefficients. Where a
    crystal's F_core or h/R follows the shared melt and F_rim along a bent
    ridge, the ridge is nearly straight in ``w``.
    """

    def __init__(self, u: np.ndarray, shared_cols: np.ndarray, local_cols: np.ndarray):
        u = np.asarray(u, dtype=float)
        self.Is, self.Il = np.asarray(shared_cols), np.asarray(local_cols)
        us, ul = u[:, self.Is], u[:, self.Il]
        self.shared = _QuadraticShear(us)
        self.ms = us.mean(axis=0)
        sd = us.std(axis=0)
        self.ss = np.where(sd > 0, sd, 1.0)
        self.ml = ul.mean(axis=0)
        sd = ul.std(axis=0)
        self.sl = np.where(sd > 0, sd, 1.0)
        feats = _QuadraticShear._features((us - self.ms) / self.ss)
        coef, *_ = np.linalg.lstsq(feats, (ul - self.ml) / self.sl, rcond=None)
        self.coef = np.where(np.isfinite(coef), coef, 0.0)

    @classmethod
    def fitted(cls, u, shared_cols, local_cols):
        """Fit the map to ``u``; None when the draws are too few or degenerate."""
        u = np.asarray(u, dtype=float).reshape(-1, np.shape(u)[-1])
        n_s = np.size(shared_cols)
        need = SHEAR_DRAWS_PER_COEF * _QuadraticShear.n_features(n_s + 1)
        if n_s < 1 or u.shape[0] < need or not np.all(np.isfinite(u)):
            return None
        with np.errstate(all="ignore"):
            shear = cls(u, shared_cols, local_cols)
            w = shear.forward(u)
            back = shear.inverse(w)
        scale = np.abs(u).max(axis=0) + 1e-300
        if not (np.all(np.isfinite(w)) and np.allclose(back / scale, u / scale, rtol=0,
                                                       atol=1e-9)):
            return None
        return shear

    def _shift(self, us):
        return _QuadraticShear._features((us - self.ms) / self.ss) @ self.coef

    def forward(self, u: np.ndarray) -> np.ndarray:
        """Free sampler coordinates u (m, p) -> straightened w (m, p)."""
        u = np.atleast_2d(u)
        w = np.empty_like(u)
        us = u[:, self.Is]
        w[:, self.Is] = self.shared.forward(us)
        w[:, self.Il] = (u[:, self.Il] - self.ml) / self.sl - self._shift(us)
        return w

    def inverse(self, w: np.ndarray) -> np.ndarray:
        """Straightened w (m, p) -> free sampler coordinates u (m, p)."""
        w = np.atleast_2d(w)
        u = np.empty_like(w)
        us = self.shared.inverse(w[:, self.Is])
        u[:, self.Is] = us
        u[:, self.Il] = (w[:, self.Il] + self._shift(us)) * self.sl + self.ml
        return u


def _chain_diagnostics(chain: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Autocorrelation time [sweeps], effective sample size and split R-hat per entry."""
    import emcee

    tau = np.asarray(emcee.autocorr.integrated_time(chain, c=5, tol=0, quiet=True), dtype=float)
    tau = np.maximum(np.where(np.isfinite(tau), tau, float(chain.shape[0])), 1.0)
    ess = chain.shape[0] * chain.shape[1] / tau
    return tau, ess, _split_rhat(chain)


def _short_entries(ess: np.ndarray, rhat: np.ndarray) -> np.ndarray:
    """Entries with too few effective draws or chains that have not mixed (bool)."""
    return (np.asarray(ess) < MIN_ESS) | (np.asarray(rhat) > MAX_RHAT)


def _chain_short(ess: np.ndarray, rhat: np.ndarray) -> bool:
    """Tell whether any entry of a chain is short by :func:`_short_entries`."""
    return bool(_short_entries(ess, rhat).any())


def _sample(joint: _Joint, v_best: np.ndarray, cov: np.ndarray, *, n_chains: int,
            n_sweeps: int, seed: int, straighten: bool | None = None,
            max_sweeps: int | None = None) -> _Chain:
    """Metropolis-within-Gibbs with parallel crystal blocks and a shear move.

    With ``straighten`` (default :data:`STRAIGHTEN`) the moves work in the
    coordinates of a :class:`_BlockShear` fitted to the burn-in draws at half
    and at three quarters of the burn-in (the second fit, to the draws in
    between, is kept for production); the chains are returned in natural
    coordinates either way.

    With ``max_sweeps`` larger than ``n_sweeps``, production continues (with
    the moves as tuned) while the chain is short by :func:`_chain_short`:
    each time by as many sweeps as it has so far, up to ``max_sweeps`` in
    all. The burn-in stays that of ``n_sweeps``; a chain that is long enough
    after ``n_sweeps`` is returned as it is, draw for draw.
    """
    straighten = STRAIGHTEN if straighten is None else straighten
    rng = np.random.default_rng(seed)
    free = np.flatnonzero(~joint.fixed)
    w_full = joint.to_sampler(v_best)[0]
    slo, shi = joint.sampler_bounds()
    lo, hi = slo[free], shi[free]
    shared_cols = np.flatnonzero(free < joint.S)
    local_cols = np.flatnonzero(free >= joint.S)
    crystal_of_local = (free[local_cols] - joint.S) // joint.Q
    n_cr = joint.C
    blocks = _Blocks(cov, shared_cols, local_cols, crystal_of_local)
    dim_c = np.bincount(crystal_of_local, minlength=n_cr)
    target_local = np.where(dim_c <= 1, 0.44, 0.25)
    log_scale_local = np.log(2.38 / np.sqrt(np.maximum(dim_c, 1)))
    log_scale_shared = np.log(2.38 / np.sqrt(max(shared_cols.size, 1)))
    burn = int(n_sweeps * BURN_FRACTION)
    shear = None  # W holds sampler coordinates u until a map is fitted

    def to_u(w):
        return w if shear is None else shear.inverse(w)

    def to_w(u):
        return u if shear is None else shear.forward(u)

    def full(w):
        out = np.repeat(w_full[None, :], w.shape[0], axis=0)
        out[:, free] = to_u(w)
        return out

    # start: Laplace draws, each kept only where its posterior is finite
    w0 = w_full[free]
    start = w0 + rng.standard_normal((n_chains, free.size)) @ np.linalg.cholesky(_sym(cov)).T
    start = np.clip(start, lo, hi)
    lc, ls = joint.log_parts(full(start))
    bad = ~np.isfinite(lc.sum(axis=1) + ls)
    start[bad] = w0
    W = start
    lc, ls = joint.log_parts(full(W))
    kept = []  # burn-in: sampler coordinates u; production: natural values
    logp_burn = []  # log-target of every chain over the burn-in
    n_restarted = 0
    indep = indep_mean = indep_sd = None
    acc_l = acc_s = acc_ind = acc_de = 0.0
    order = rng.permutation(n_chains)
    halves = [(order[: n_chains // 2], order[n_chains // 2 :]),
              (order[n_chains // 2 :], order[: n_chains // 2])]
    de_gamma = 2.38 / np.sqrt(2.0 * free.size)
    de_jitter = 1e-4 * np.sqrt(np.maximum(np.diag(cov), 0.0))
    n_prod = 0
    reshape_at = {burn // 2, 3 * burn // 4} if straighten else {burn // 2}
    last_reshape = 0
    total = n_sweeps
    t = -1
    while t + 1 < total:
        t += 1
        adapt = t < burn
        gamma = 1.0 / np.sqrt(t + 1.0)
        # --- every crystal's own block at once -----------------------------
        if local_cols.size:
            eps = rng.standard_normal((n_chains, local_cols.size))
            scale_rows = np.exp(log_scale_local)[crystal_of_local]
            step = eps @ (blocks.Lloc * scale_rows[:, None]).T
            prop = W.copy()
            prop[:, local_cols] += step
            lc_new, _ = joint.log_parts(full(prop))
            accept = np.log(rng.random((n_chains, n_cr))) < (lc_new - lc)
            accept &= np.isfinite(lc_new)
            take = accept[:, crystal_of_local]
            W[:, local_cols] = np.where(take, prop[:, local_cols], W[:, local_cols])
            lc = np.where(accept, lc_new, lc)
            rate = accept.mean(axis=0)
            if adapt:
                log_scale_local += gamma * (rate - target_local)
            else:
                acc_l += float(rate.mean())
        # --- shared block, with every crystal sheared along -------------
        eps = rng.standard_normal((n_chains, shared_cols.size))
        d = np.exp(log_scale_shared) * eps @ blocks.Ls.T
        prop = W.copy()
        prop[:, shared_cols] += d
        if local_cols.size:
            prop[:, local_cols] += d @ blocks.B.T
        lc_new, ls_new = joint.log_parts(full(prop))
        new = lc_new.sum(axis=1) + ls_new
        old = lc.sum(axis=1) + ls
        accept = (np.log(rng.random(n_chains)) < new - old) & np.isfinite(new)
        W = np.where(accept[:, None], prop, W)
        lc = np.where(accept[:, None], lc_new, lc)
        ls = np.where(accept, ls_new, ls)
        # --- differential-evolution move over every free parameter -------
        # Each half of the chains jumps along the difference of two chains of
        # the other half (held fixed meanwhile, so the move is symmetric):
        # the ensemble's spread follows the curved ridge of parent melt, Kd,
        # F_rim and the cores, which the fixed-shape moves cross slowly.
        for upd, ref in halves:
            n_u = upd.size
            g = np.where(rng.random(n_u) < DE_HOP, 1.0, de_gamma)
            a = rng.integers(ref.size, size=n_u)
            b = (a + 1 + rng.integers(ref.size - 1, size=n_u)) % ref.size
            prop = (W[upd] + g[:, None] * (W[ref[a]] - W[ref[b]])
                    + de_jitter * rng.standard_normal((n_u, free.size)))
            lc_new, ls_new = joint.log_parts(full(prop))
            new = lc_new.sum(axis=1) + ls_new
            old = lc[upd].sum(axis=1) + ls[upd]
            acc_d = (np.log(rng.random(n_u)) < new - old) & np.isfinite(new)
            W[upd] = np.where(acc_d[:, None], prop, W[upd])
            lc[upd] = np.where(acc_d[:, None], lc_new, lc[upd])
            ls[upd] = np.where(acc_d, ls_new, ls[upd])
            if not adapt:
                acc_de += float(acc_d.mean()) / len(halves)
        # --- independence move over every free parameter (production) ----
        if indep is not None:
            z = indep.rvs(size=n_chains, random_state=rng).reshape(n_chains, -1)
            prop = indep_mean + z * indep_sd
            lc_new, ls_new = joint.log_parts(full(prop))
            new = lc_new.sum(axis=1) + ls_new
            old = lc.sum(axis=1) + ls
            q_old = indep.logpdf((W - indep_mean) / indep_sd)
            q_new = indep.logpdf(z)
            acc_i = (np.log(rng.random(n_chains)) < new - old + q_old - q_new) & np.isfinite(new)
            W = np.where(acc_i[:, None], prop, W)
            lc = np.where(acc_i[:, None], lc_new, lc)
            ls = np.where(acc_i, ls_new, ls)
            acc_ind += float(acc_i.mean())
        if adapt:
            log_scale_shared += gamma * (float(accept.mean()) - 0.25)
            kept.append(to_u(W))
            logp_burn.append(lc.sum(axis=1) + ls)
            if t in reshape_at and burn >= 40:
                # reshape the moves from the draws since the last reshaping
                # (the second half of them at the first), after refitting the
                # straightening map to them
                first = len(kept) // 2 if last_reshape == 0 else last_reshape
                tail_u = np.concatenate(kept[first:], axis=0)
                last_reshape = len(kept)
                if straighten:
                    fitted = _BlockShear.fitted(tail_u, shared_cols, local_cols)
                    if fitted is not None:
                        U = to_u(W)
                        shear = fitted
                        W = to_w(U)
                tail = to_w(tail_u)
                emp = np.cov(tail, rowvar=False)
                if tail.shape[0] > 5 * free.size and np.all(np.isfinite(emp)):
                    try:
                        blocks = _Blocks(_sym(emp), shared_cols, local_cols, crystal_of_local)
                        log_scale_shared = np.log(2.38 / np.sqrt(max(shared_cols.size, 1)))
                        log_scale_local = np.log(2.38 / np.sqrt(np.maximum(dim_c, 1)))
                        de_jitter = 1e-4 * np.sqrt(np.maximum(np.diag(emp), 0.0))
                    except np.linalg.LinAlgError:
                        pass
            if t == burn - 1:
                stuck = _stuck_chains(np.array(logp_burn[len(logp_burn) // 2 :]))
                if stuck.any() and not stuck.all():
                    # restart each stuck chain from the state of a chain that is not
                    src = rng.choice(np.flatnonzero(~stuck), size=int(stuck.sum()))
                    W[stuck] = W[src]
                    lc[stuck], ls[stuck] = lc[src], ls[src]
                    n_restarted = int(stuck.sum())
                good = np.flatnonzero(~stuck)
                indep, indep_mean, indep_sd = _independence(
                    [to_w(k[good]) for k in kept[len(kept) // 2 :]])
                kept = []
        else:
            acc_s += float(accept.mean())
            n_prod += 1
            kept.append(joint.from_sampler(full(W))[:, free])
            if t + 1 == total and max_sweeps is not None and total < max_sweeps:
                _, ess_now, rhat_now = _chain_diagnostics(np.stack(kept, axis=0))
                if _chain_short(ess_now, rhat_now):
                    total = min(int(max_sweeps), total + n_prod)
    chain = np.stack(kept, axis=0)
    tau, ess, rhat = _chain_diagnostics(chain)
    return _Chain(
        draws=chain, tau=tau, ess=ess, rhat=rhat,
        accept_local=acc_l / max(n_prod, 1), accept_shared=acc_s / max(n_prod, 1),
        accept_independence=acc_ind / max(n_prod, 1), accept_de=acc_de / max(n_prod, 1),
        n_restarted=n_restarted,
        n_chains=n_chains, n_sweeps=total, burn_in=burn,
        extended_from=n_sweeps if total > n_sweeps else 0,
    )


# --------------------------------------------------------------- own fits
@dataclass(eq=False)
class _Own:
    """A crystal's own single-crystal best fit (F_core = 0)."""

    prob: Any
    theta: np.ndarray
    objective: float
    reduced: float
    sigma_scale: float
    core: float  # model core composition [mol%]
    rim: float  # model rim composition [mol%]
    cov: np.ndarray | None
    h1: float = float("inf")  # best chi-square with F_core free too


def _own_fit(settings: _Settings, crystal: _Crystal, model) -> _Own:
    specs = {s.name: s for s in model.parameters}
    order = [s.name for s in model.parameters]
    free = [settings.ratio, "f_rim", "retention"]
    if settings.kd_sd > 0:
        free.append("kd")
    free += [n for n in settings.extra_local
             if n in OPTIONAL_FREE or n in ("section_h_over_r", "diffusion_length_um")]
    free += [t[0] for t in settings.trace_params if t[0] in crystal.traces]
    free = tuple(n for n in order if n in free)
    fixed = {n: float(specs[n].default) for n in order if n not in free}
    if "kd" not in free:
        fixed["kd"] = settings.kd0
    if "section_h_over_r" not in free:
        fixed["section_h_over_r"] = float(settings.section_fixed)
    if "diffusion_length_um" not in free:
        fixed["diffusion_length_um"] = float(settings.diffusion_fixed)
    upper = np.array([specs[n].upper for n in free], dtype=float)
    if "diffusion_length_um" in free:
        j = free.index("diffusion_length_um")
        upper[j] = diffusion_length_max_um(crystal.radius_um, upper[j])
    trace_names = {t[0]: t[1] for t in TRACES[settings.mineral]}
    traces = tuple(TraceData(ox, trace_names.get(ox, ox), key, param, obs, sig, ok)
                   for param, (ox, key, obs, sig, ok) in crystal.traces.items())
    prob = FitProblem(
        traverse=crystal.traverse, usable=crystal.usable,
        model=model, names=tuple(order), free=free, fixed=fixed,
        lower=np.array([specs[n].lower for n in free], dtype=float),
        upper=upper,
        kd0=settings.kd0, kd_sd=settings.kd_sd, distance_um=crystal.distance_um,
        radius_um=crystal.radius_um, y=crystal.y, sigma=crystal.sigma, traces=traces,
        robust=settings.robust,
    )
    starts, _ = _grid_starts(prob)
    starts = starts[:3]
    if "section_h_over_r" in free:
        # the grid holds h/R at 0, where its gradient vanishes: start off-centre too
        cut = starts.copy()
        cut[:, free.index("section_h_over_r")] = SECTION_START
        starts = np.concatenate([starts, cut], axis=0)
    if "diffusion_length_um" in free:
        # likewise L (the relaxation changes the profile at O(L^2)): start relaxed too
        j = free.index("diffusion_length_um")
        relaxed = starts.copy()
        relaxed[:, j] = DIFFUSION_START * upper[j]
        starts = np.concatenate([starts, relaxed], axis=0)
    theta, obj, _, _, _ = _optimise(prob, starts)
    if not np.isfinite(obj):
        raise FitError(
            f"crystal {crystal.name!r}: no start gave a finite model; check the reference "
            "melt (--melt) and Kd, which must give compositions in range."
        )
    z = prob.residuals(prob.params(theta[None, :]), 1)[0]
    dof = max(prob.n_data - len(free), 1)
    reduced = float(np.sum(z[:-1] ** 2)) / dof
    misfit = reduced
    if settings.robust:
        misfit = float((1.4826 * np.median(np.abs(z[:-1]))) ** 2)
    scale = float(np.sqrt(misfit)) if misfit > 1.0 + 3.0 * np.sqrt(2.0 / dof) else 1.0
    prob = prob.with_sigma_scale(scale)
    obj_scaled = float(prob.objective(prob.residuals(prob.params(theta[None, :]), 1))[0])
    edge = prob.predict(prob.params(theta[None, :]), np.array([0.0, crystal.radius_um]))
    crystal_edge = np.reshape(edge["crystal"], -1)
    cov = laplace_covariance(prob, prob.to_sampler(theta)[0])
    return _Own(prob=prob, theta=theta, objective=obj_scaled, reduced=reduced,
                sigma_scale=scale, core=float(crystal_edge[0]), rim=float(crystal_edge[1]),
                cov=cov)


def _own_estimates(own: _Own, settings: _Settings, rng):
    """Bands of the own fit from the Laplace approximation (sampler coordinates).

    Returns the estimates and the draws (None when no approximation exists).
    """
    prob = own.prob
    specs = {s.name: s for s in prob.model.parameters}
    u = prob.to_sampler(own.theta)[0]
    lo, hi = prob.sampler_bounds()
    out = {}
    draws = None
    if own.cov is not None:
        try:
            chol = np.linalg.cholesky(_sym(own.cov))
            z = u + rng.standard_normal((4000, u.size)) @ chol.T
            z = z[np.all((z > lo) & (z < hi), axis=1)]
            th = prob.from_sampler(z)
            th = th[np.all((th >= prob.lower) & (th <= prob.upper), axis=1)]
            draws = th if th.shape[0] >= 100 else None
        except np.linalg.LinAlgError:
            draws = None
    for j, name in enumerate(prob.free):
        if name not in (settings.ratio, "f_rim", "retention", "kd"):
            continue
        spec = specs[name]
        if draws is None:
            e = Estimate(name=name, unit=spec.unit, best=float(own.theta[j]),
                         best_fit=float(own.theta[j]), lower=spec.lower, upper=spec.upper,
                         constrained=False,
                         note="own fit: no usable Laplace approximation")
        else:
            e = _estimate(name, spec.unit, own.theta[j], draws[:, j], spec.lower, spec.upper)
            e = _replace(e, note=(e.note + "; " if e.note else "")
                         + "crystal's own fit, Laplace approximation")
        out[name] = e
    return out, draws


def _replace(e, **kw):
    from dataclasses import replace

    return replace(e, **kw)


# ------------------------------------------------------------------ starts
def _path_crystal(settings: _Settings, grid, y0, r, kd, traces):
    with np.errstate(all="ignore"), warnings.catch_warnings():
        warnings.simplefilter("ignore")
        params = {settings.ratio: y0, "retention": r, "kd": kd}
        params.update(traces)
        return np.asarray(settings.model.path(grid, strict=False, **params)["crystal"])


def _start(joint: _Joint, owns: Sequence[_Own], y0: float) -> np.ndarray:
    """Joint start: the crystals' own cores and rims placed on one path."""
    s = joint.s
    v = np.zeros(joint.D)
    thetas = [dict(zip(o.prob.free, o.theta, strict=True)) for o in owns]
    r = float(np.clip(np.median([t.get("retention", 0.0) for t in thetas]), 0.02, 0.98))
    traces = {}
    for param, _k, _o in s.trace_params:
        vals = [t[param] for t in thetas if param in t]
        traces[param] = float(np.median(vals)) if vals else joint._default(param)
    fmax = float(s.model.max_fraction(**{s.ratio: y0}))
    grid = np.linspace(0.0, min(0.95, 0.98 * fmax), 400)
    path = _path_crystal(s, grid, y0, r, s.kd0, traces)
    ok = np.isfinite(path)
    grid, path = grid[ok], path[ok]

    def place(x):
        if path.size < 2:
            return 0.1
        return float(np.interp(-x, -path, grid)) if path[0] >= path[-1] else float(
            np.interp(x, path, grid))

    rims = np.array([place(o.rim) for o in owns])
    f_rim_shared = float(np.clip(np.median(rims), 0.01, 0.94))
    for name in joint.shared:
        i = joint.index(name)
        if name == s.ratio:
            v[i] = y0
        elif name == "f_rim":
            v[i] = f_rim_shared
        elif name == "retention":
            v[i] = r
        elif name == "retention_mu":
            v[i] = float(np.log(r / (1.0 - r)))
        elif name == "retention_tau":
            v[i] = 0.5
        elif name == "kd":
            v[i] = s.kd0
        else:
            v[i] = traces[name]
    for c, o in enumerate(owns):
        f_rim_c = f_rim_shared if "f_rim" in joint.shared else float(np.clip(rims[c], 0.01,
                                                                                0.94))
        for name in joint.local:
            i = joint.index(name, c)
            if name == "f_core_fraction":
                v[i] = float(np.clip(place(o.core) / f_rim_c, 0.0, 0.95))
            elif name == "f_rim":
                v[i] = f_rim_c
            elif name == "retention_z":
                v[i] = 0.0
            else:
                v[i] = thetas[c].get(name, joint._default(name))
    return np.clip(v, joint.lower, joint.upper)


def _section_starts(joint: _Joint, starts) -> list[np.ndarray]:
    """Return copies of the starts moved off the zero-gradient point of each process.

    Empty when neither h/R nor L is fitted. The least-squares gradient with
    respect to h/R vanishes at h = 0 and that with respect to L at L = 0 (both
    change the profile at second order), so a crystal started there stays
    there; the copies (every crystal's h/R at :data:`SECTION_START`; its L at
    :data:`DIFFUSION_START` of its bound) let the fit leave them when the data
    call for it.
    """
    out = []
    for name in ("section_h_over_r", "diffusion_length_um"):
        if name not in joint.local:
            continue
        cols = [joint.index(name, c) for c in range(joint.C)]
        level = (np.full(joint.C, SECTION_START) if name == "section_h_over_r"
                 else DIFFUSION_START * joint.upper[cols])
        for v0 in starts:
            v0 = np.array(v0, dtype=float)
            if np.allclose(v0[cols], level):
                continue
            v1 = v0.copy()
            v1[cols] = level
            out.append(v1)
    return out


def _anchor(joint: _Joint, v: np.ndarray, exclude: int | None = None) -> int:
    """Fix F_core = 0 for the crystal with the smallest F_core; return its index."""
    cols = [joint.index("f_core_fraction", c) for c in range(joint.C)]
    values = np.array([v[i] for i in cols], dtype=float)
    if exclude is not None:
        values[exclude] = np.inf
    a = int(np.argmin(values))
    joint.fixed[:] = False
    joint.fixed[cols[a]] = True
    v[cols[a]] = 0.0
    return a


def _best_joint(settings, crystals, owns, starts=None, extra_starts=()):
    """Anchored best fit of a set of crystals: (joint, v, objective, anchor).

    The default starts place every crystal on paths from the most primitive
    and the median parent melt of the crystals' own fits; ``extra_starts``
    (e.g. the fit of a larger set) are tried as well.
    """
    joint = _Joint(settings, crystals)
    if starts is None:
        y_own = np.array([dict(zip(o.prob.free, o.theta, strict=True))[settings.ratio]
                          for o in owns])
        levels = sorted({float(np.max(y_own)), float(np.median(y_own))}, reverse=True)
        starts = [_start(joint, owns, y) for y in levels]
        starts += _section_starts(joint, starts)
    starts = [*extra_starts, *starts]
    best = (None, np.inf, 0)
    for v0 in starts:
        v0 = np.array(v0, dtype=float)
        a = _anchor(joint, v0)
        v, obj = _fit_joint(joint, [v0])
        if obj < best[1]:
            best = (v, obj, a)
    v, obj, a = best
    joint.fixed[:] = False
    joint.fixed[joint.index("f_core_fraction", a)] = True
    return joint, v, obj, a


# --------------------------------------------------------------- screening
def _h1_settings(settings: _Settings) -> _Settings:
    from dataclasses import replace

    return replace(settings, f_rim_mode="shared", retention_mode="shared")


def _to_h1(joint: _Joint, v: np.ndarray, c: int, h1: _Joint) -> np.ndarray:
    """Crystal c of a joint vector as a single-crystal vector with its own everything."""
    p = joint.rows(v[None, :])
    row = {k: float(np.reshape(val, (-1, joint.C))[0, c]) for k, val in p.items()}
    out = np.zeros(h1.D)
    for name in h1.shared:
        out[h1.index(name)] = row.get(name, joint.s.kd0 if name == "kd" else 0.0)
    for name in h1.local:
        i = h1.index(name, 0)
        if name == "f_core_fraction":
            out[i] = row["f_core"] / max(row["f_rim"], 1e-9)
        else:
            out[i] = row[name]
    return np.clip(out, h1.lower, h1.upper)


def _own_to_h1(own: _Own, h1: _Joint) -> np.ndarray:
    theta = dict(zip(own.prob.free, own.theta, strict=True))
    theta.update({k: v for k, v in own.prob.fixed.items() if k not in theta})
    out = np.zeros(h1.D)
    for name in h1.shared:
        out[h1.index(name)] = theta.get(name, h1._default(name) if name != "kd" else
                                        h1.s.kd0)
    for name in h1.local:
        out[h1.index(name, 0)] = 0.0 if name == "f_core_fraction" else theta.get(
            name, h1._default(name))
    return np.clip(out, h1.lower, h1.upper)


def _h1_value(settings, crystal, own, starts) -> tuple[float, int]:
    """Chi-square of crystal alone with every parameter its own (F_core free).

    With F_core free the parent melt of one crystal lies on a nearly flat
    ridge; a few iterations from each start reach its floor (the chi-square
    changes by hundredths along it), so the iterations are capped.
    """
    h1 = _Joint(_h1_settings(settings), [crystal])
    starts = list(starts(h1))
    if not np.isfinite(own.h1):
        starts.insert(0, _own_to_h1(own, h1))
    starts += _section_starts(h1, starts)
    _, obj = _fit_joint(h1, starts, max_nfev=H1_MAX_EVALS)
    own.h1 = min(own.h1, obj, own.objective)
    return own.h1, h1.D


@dataclass(eq=False)
class _Screen:
    members: list  # indices into the crystal list, consistent
    flagged: list  # indices set apart, in the order they were set apart
    stats: dict  # index -> (T, d, p)
    disagree_pair: bool = False


def _lr_stats(settings, crystals, owns, members):
    """T, d, p of every member of a set (leave-one-out likelihood ratio)."""
    sub = [crystals[i] for i in members]
    joint, v, obj, anchor = _best_joint(settings, sub, [owns[i] for i in members])
    out = {}
    for pos, k in enumerate(members):
        rest = [i for i in members if i != k]
        h1, d_h1 = _h1_value(settings, crystals[k], owns[k],
                             lambda h, pos=pos: [_to_h1(joint, v, pos, h)])
        n_local_free = joint.Q
        if len(rest) == 1:
            loo = owns[rest[0]].h1 if np.isfinite(owns[rest[0]].h1) else _h1_value(
                settings, crystals[rest[0]], owns[rest[0]], lambda h: [])[0]
        else:
            # From the fit with crystal k and from the rest's own fits: a set
            # holding an antecryst can sit in the antecryst's basin (its melt,
            # the hosts placed late on the path), which the fit without it
            # would not leave from there.
            keep = np.concatenate([np.arange(joint.S)] + [
                joint.S + c * joint.Q + np.arange(joint.Q) for c in range(joint.C) if c != pos])
            _, _, loo, _ = _best_joint(settings, [crystals[i] for i in rest],
                                       [owns[i] for i in rest], extra_starts=[v[keep].copy()])
        t = max(obj - loo - h1, 0.0)
        d = max(d_h1 - n_local_free, 1)
        out[k] = (float(t), int(d), float(stats.chi2.sf(t, d)))
    return out, (joint, v, obj, anchor)


def _screen(settings, crystals, owns, members) -> _Screen:
    members = list(members)
    flagged, record = [], {}
    disagree = False
    while len(members) >= 2:
        st, _ = _lr_stats(settings, crystals, owns, members)
        record.update(st)
        threshold = ALPHA / len(members)
        # The most discordant crystal goes first (Rosner 1983): ranked by the
        # log tail probability, since p underflows to 0 for several crystals
        # when an antecryst drags the shared fit, and ties at p = 0 would
        # otherwise be broken by the order of the files.
        worst = min(members, key=lambda i: (stats.chi2.logsf(st[i][0], st[i][1]), -st[i][0]))
        if st[worst][2] >= threshold:
            break
        if len(members) == 2:
            disagree = True  # two crystals that disagree: which one is the outsider?
            break
        flagged.append(worst)
        members.remove(worst)
    return _Screen(members=members, flagged=flagged, stats=record, disagree_pair=disagree)


# ------------------------------------------------------------ group results
@dataclass(eq=False)
class _Group:
    joint: _Joint
    v: np.ndarray
    objective: float
    anchor: int
    chain: _Chain
    flat: np.ndarray  # (k, D) full natural vectors
    estimates: dict
    crystal_estimates: list
    spots: list
    curves: list
    path: pd.DataFrame
    chi2_crystal: np.ndarray
    warnings: list


def _shared_estimates(joint: _Joint, v: np.ndarray, flat: np.ndarray, rng) -> tuple[dict, list]:
    s = joint.s
    specs = {sp.name: sp for sp in s.model.parameters}
    notes = []
    est: dict[str, Estimate] = {}
    with np.errstate(all="ignore"), warnings.catch_warnings():
        warnings.simplefilter("ignore")
        reach = np.asarray(s.model.max_fraction(**{s.ratio: flat[:, 0]}), dtype=float)
    f_reach = float(np.nanmax(reach)) if reach.size else 0.95
    for name in joint.shared:
        i = joint.index(name)
        if name == "retention_mu":
            draws = _expit(flat[:, i])
            e = _estimate("retention", "1", float(_expit(v[i])), draws, 0.0, 1.0)
            e = _replace(e, note=(e.note + "; " if e.note else "")
                         + "population median of the crystals' r (hierarchical)")
            est["retention"] = e
            continue
        if name == "retention_tau":
            lo, hi = TAU_BOUNDS
            e = _estimate("retention_spread", "1", v[i], flat[:, i], lo, hi)
            e = _replace(e, note=(e.note + "; " if e.note else "")
                         + "sd of logit r between crystals")
            est["retention_spread"] = e
            continue
        lo, hi = s.bounds(name)
        if name == "f_rim":
            hi = min(hi, f_reach)
        est[name] = _estimate(name, specs[name].unit, v[i], flat[:, i], lo, hi)
    if "kd" not in joint.shared:
        sp = specs["kd"]
        est["kd"] = Estimate(name="kd", unit="1", best=s.kd0, median=s.kd0, lo95=s.kd0,
                             hi95=s.kd0, best_fit=s.kd0, lower=sp.lower, upper=sp.upper,
                             constrained=True,
                             note=f"kd fixed at {s.kd0:g}")
    else:
        sd = float(np.std(flat[:, joint.index("kd")]))
        if sd > 0.8 * s.kd_sd:
            est["kd"] = _replace(est["kd"], note=f"kd set by its prior ({s.kd0:g} +/- "
                                 f"{s.kd_sd:g}), hardly by these data")
    # derived: parent melt oxide and temperature at F = 0
    pick = flat[rng.choice(flat.shape[0], size=min(4000, flat.shape[0]), replace=False)]
    oxide = _MELT_OXIDE[s.mineral]

    def parent(vs):
        p = joint.rows(vs)
        params = {s.ratio: p[s.ratio][:: joint.C], "kd": p["kd"][:: joint.C],
                  "retention": np.zeros(vs.shape[0])}
        for param, _k, _o in s.trace_params:
            params[param] = p[param][:: joint.C]
        with np.errstate(all="ignore"), warnings.catch_warnings():
            warnings.simplefilter("ignore")
            out = s.model.path(np.array([0.0]), strict=False, **params)
        return {"melt_oxide": np.reshape(out[oxide], -1),
                "temperature_c": np.reshape(out["temperature_c"], -1)}

    pb, pd_ = parent(v[None, :]), parent(pick)
    ratio_e = est[s.ratio]
    derived = [("melt_oxide", oxide, "wt%")]
    if s.mineral == "olivine":
        derived.append(("temperature_c", "temperature_c", "°C"))
    for key, name, unit in derived:
        b = float(pb[key][0])
        if not np.isfinite(b):
            continue
        med, lo, hi, _ = credible_band(pd_[key], -np.inf, np.inf)
        est[name] = Estimate(name=name, unit=unit, best=med if np.isfinite(med) else b,
                             median=med, lo95=lo, hi95=hi, best_fit=b,
                             constrained=ratio_e.constrained,
                             note="derived from " + s.ratio + " and the reference melt")
    for e in est.values():
        if not e.constrained:
            notes.append(e.note)
    return est, notes


def _crystal_estimates(joint: _Joint, v, flat, anchor) -> list[dict]:
    out = []
    rb = joint.rows(v[None, :])
    rd = joint.rows(flat)
    for c in range(joint.C):
        est = {}
        if c == anchor:
            est["f_core"] = Estimate(
                name="f_core", unit="1", best=0.0, median=0.0, lo95=0.0, hi95=0.0,
                best_fit=0.0,
                lower=0.0, upper=0.95, constrained=True,
                note="0 by definition: F counts from this crystal's nucleation (anchor)")
        else:
            est["f_core"] = _estimate("f_core", "1", rb["f_core"][c],
                                      rd["f_core"][c:: joint.C], 0.0, 0.95)
        if "f_rim" in joint.local:
            est["f_rim"] = _estimate("f_rim", "1", rb["f_rim"][c], rd["f_rim"][c:: joint.C],
                                     0.0, 0.95)
        if joint.hier:
            est["retention"] = _estimate("retention", "1", rb["retention"][c],
                                         rd["retention"][c:: joint.C], 0.0, 1.0)
        for name in joint.s.extra_local:
            lo, hi = joint.s.bounds(name)
            est[name] = _estimate(name, {s.name: s.unit for s in joint.s.model.parameters}[
                name], rb[name][c], rd[name][c:: joint.C], lo, hi)
        out.append(est)
    return out


def _crystal_tables(joint: _Joint, v, draws, settings, include_flagged, rng_range):
    """Spot tables and dense curves of every crystal with the joint band."""
    C = joint.C
    pts_all, n_spot = [], []
    for cr in joint.crystals:
        d = cr.traverse.spots["distance_um"].to_numpy(float)
        d = d[np.isfinite(d)]
        grid = np.linspace(0.0, cr.radius_um, N_CURVE_POINTS)
        pts_all.append(np.concatenate([np.abs(d), grid]))
        n_spot.append(d.size)
    n = max(p.size for p in pts_all)
    D = np.zeros((C, n))
    for c, p in enumerate(pts_all):
        D[c, : p.size] = p
        D[c, p.size :] = p[-1] if p.size else 0.0
    best = joint.predict(v[None, :], D)
    band = joint.predict(draws, D)
    keys = ["crystal"] + [k for _p, k, _o in settings.trace_params]
    spots_out, curves_out = [], []
    for c, cr in enumerate(joint.crystals):
        tr = cr.traverse
        spots = tr.spots
        k = n_spot[c]
        size = pts_all[c].size
        finite = np.isfinite(spots["distance_um"].to_numpy(float))
        q = {key: np.nanpercentile(band[key][:, c, :size], [2.5, 97.5], axis=0) for key in keys}
        b = {key: best[key][0, c, :size] for key in keys}
        f_best = best["f"][0, c, :size]
        nn = len(spots)

        def at_spots(arr, nn=nn, finite=finite, k=k):
            out = np.full(nn, np.nan)
            out[finite] = arr[:k]
            return out

        used_idx = set(cr.usable.index)
        used = np.array([i in used_idx for i in spots.index])
        sig = np.full(nn, DEFAULT_SIGMA[settings.mineral])
        col = "fo_sigma" if settings.mineral == "olivine" else "an_sigma"
        if col in spots.columns:
            fs = spots[col].to_numpy(float)
            sig = np.where(np.isfinite(fs) & (fs > 0), fs, sig)
        pos = {idx: j for j, idx in enumerate(cr.usable.index)}
        for idx, j in pos.items():
            sig[spots.index.get_loc(idx)] = cr.sigma[j]
        observed = spots[tr.major].to_numpy(float)
        model_v = at_spots(b["crystal"])
        reason = spots["reason"].astype(str).to_numpy().copy()
        if rng_range is not None:
            dd = spots["distance_um"].to_numpy(float)
            outside = finite & ((dd < rng_range[0]) | (dd > rng_range[1]))
            extra = f"outside the fitted range {rng_range[0]:g}-{rng_range[1]:g} µm"
            reason = np.where(outside, np.where(reason == "", extra, reason + "; " + extra),
                              reason)
        table = {
            "row": spots["row"].to_numpy() if "row" in spots.columns else np.arange(1, nn + 1),
            "point": spots["point"].astype(str).to_numpy() if "point" in spots.columns
            else np.arange(1, nn + 1).astype(str),
            "distance_um": spots["distance_um"].to_numpy(float),
            "f": at_spots(f_best),
            "observed": observed,
            "sigma": sig,
            "model": model_v,
            "model_lo95": at_spots(q["crystal"][0]),
            "model_hi95": at_spots(q["crystal"][1]),
            "residual": observed - model_v,
            "normalized_residual": (observed - model_v) / (sig * cr.sigma_scale),
            "used": used,
            "status": spots["status"].astype(str).to_numpy(),
            "reason": reason,
        }
        curve = {
            "distance_um": pts_all[c][k:],
            "f": f_best[k:],
            "best": b["crystal"][k:],
            "lo95": q["crystal"][0][k:],
            "hi95": q["crystal"][1][k:],
        }
        for param, key, oxide in settings.trace_params:
            if param not in cr.traces:
                continue
            obs = spots[oxide].to_numpy(float)
            mv = at_spots(b[key])
            table[f"{oxide}_observed"] = obs
            table[f"{oxide}_sigma"] = np.full(nn, float(cr.traces[param][3][0]))
            table[f"{oxide}_model"] = mv
            table[f"{oxide}_model_lo95"] = at_spots(q[key][0])
            table[f"{oxide}_model_hi95"] = at_spots(q[key][1])
            table[f"{oxide}_residual"] = obs - mv
            curve[f"{oxide}_best"] = b[key][k:]
            curve[f"{oxide}_lo95"] = q[key][0][k:]
            curve[f"{oxide}_hi95"] = q[key][1][k:]
        spots_out.append(pd.DataFrame(table))
        curves_out.append(pd.DataFrame(curve))
    return spots_out, curves_out


def _melt_path(joint: _Joint, v, draws) -> pd.DataFrame:
    s = joint.s
    rows = joint.rows(v[None, :])
    f_end = float(np.max(rows["f_rim"]))
    grid = np.linspace(0.0, f_end, 120)

    def evaluate(vs):
        p = joint.rows(vs)
        params = {s.ratio: p[s.ratio][:: joint.C], "kd": p["kd"][:: joint.C]}
        if joint.hier:
            params["retention"] = _expit(vs[:, joint.index("retention_mu")])
        else:
            params["retention"] = p["retention"][:: joint.C]
        with np.errstate(all="ignore"), warnings.catch_warnings():
            warnings.simplefilter("ignore")
            out = s.model.path(grid, strict=False, **params)
        return np.reshape(out["melt_ratio"], (vs.shape[0], -1)), np.reshape(
            out["crystal"], (vs.shape[0], -1))

    mb, cb = evaluate(v[None, :])
    md, cd = evaluate(draws)
    mq = np.nanpercentile(md, [2.5, 97.5], axis=0)
    cq = np.nanpercentile(cd, [2.5, 97.5], axis=0)
    return pd.DataFrame({"f": grid, "melt_ratio": mb[0], "melt_ratio_lo95": mq[0],
                         "melt_ratio_hi95": mq[1], "crystal": cb[0], "crystal_lo95": cq[0],
                         "crystal_hi95": cq[1]})


def _calibration_warnings(joint: _Joint, v: np.ndarray) -> list[str]:
    """Calibration-range warnings of the laws along the shared best-fit path.

    The checks of a single fit (:func:`zoning.fitting.summary.calibration_messages`)
    on the path from F = 0 to the rim at the joint best fit ``v``.
    """
    s = joint.s
    rows = joint.rows(v[None, :])
    grid = np.linspace(0.0, float(np.max(rows["f_rim"])), 120)
    params = {s.ratio: rows[s.ratio][:1], "kd": rows["kd"][:1]}
    params["retention"] = (_expit(v[None, joint.index("retention_mu")]) if joint.hier
                           else rows["retention"][:1])
    for name, _key, _ox in s.trace_params:
        params[name] = rows[name][:1]
    return calibration_messages(s.model, lambda: s.model.path(grid, strict=False, **params))


def _param_names(joint: _Joint, idx) -> list[str]:
    """Names of parameter entries: ``<name>`` shared, ``<name>[<crystal>]`` per crystal."""
    out = []
    for i in idx:
        if i < joint.S:
            out.append(joint.shared[i])
        else:
            c, q = divmod(int(i) - joint.S, joint.Q)
            out.append(f"{joint.local[q]}[{joint.crystals[c].name}]")
    return out


def _fit_group(settings, crystals, owns, *, n_chains, n_sweeps, seed, include_flagged,
               rng_range, max_sweeps=None) -> _Group:
    joint, v, obj, anchor = _best_joint(settings, crystals, owns)
    if not np.isfinite(obj):
        raise FitError(
            f"no start gave a finite joint model for crystals "
            f"{', '.join(c.name for c in crystals)}; check the reference melt (--melt) and Kd."
        )
    cov = _laplace(joint, v)
    try:
        chain = _sample(joint, v, cov, n_chains=n_chains, n_sweeps=n_sweeps, seed=seed,
                        max_sweeps=max_sweeps)
    except np.linalg.LinAlgError as exc:
        raise FitError(
            f"posterior sampling of the joint fit failed ({exc}); try another --seed or "
            "fewer free parameters."
        ) from exc
    free = np.flatnonzero(~joint.fixed)
    draws = chain.draws.reshape(-1, free.size)
    flat = np.repeat(v[None, :], draws.shape[0], axis=0)
    flat[:, free] = draws
    rng = np.random.default_rng(seed + 1)
    est, notes = _shared_estimates(joint, v, flat, rng)
    cest = _crystal_estimates(joint, v, flat, anchor)
    pick = flat[rng.choice(flat.shape[0], size=min(N_CURVE_DRAWS, flat.shape[0]),
                           replace=False)]
    spots, curves = _crystal_tables(joint, v, pick, settings, include_flagged, rng_range)
    path = _melt_path(joint, v, pick)
    per, _ = joint.chi2_blocks(v[None, :])
    block, _ = joint.residual_blocks(v[None, :])
    nd = joint._n_data_block()
    chi2_c = (block[0, :, :nd] ** 2).sum(axis=1)
    warn = list(notes)
    if chain.extended_from:
        warn.append(
            f"the default {chain.extended_from} sweeps gave too few effective draws or "
            f"chains that had not mixed; production was continued to {chain.n_sweeps} sweeps "
            "(set --steps to choose the length yourself)."
        )
    names = _param_names(joint, free)
    short = [n for n, s_ in zip(names, _short_entries(chain.ess, chain.rhat), strict=True)
             if s_]
    if short:
        factor = max(MIN_ESS / float(np.min(chain.ess)), 2.0 if np.max(chain.rhat) > MAX_RHAT
                     else 1.25)
        need = int(np.ceil(chain.n_sweeps * factor / 100) * 100)
        warn.append(
            f"posterior chains too short for {', '.join(short[:4])}"
            + (f" and {len(short) - 4} more" if len(short) > 4 else "")
            + f" (lowest effective sample size {float(np.min(chain.ess)):.0f}, largest "
            f"R-hat {float(np.max(chain.rhat)):.3f}); run longer: --steps {need}."
        )
    return _Group(joint=joint, v=v, objective=obj, anchor=anchor, chain=chain, flat=flat,
                  estimates=est, crystal_estimates=cest, spots=spots, curves=curves,
                  path=path, chi2_crystal=chi2_c, warnings=warn)


# ---------------------------------------------------------------- the API
def _kd_prior(mineral, kd, kd_sd, model) -> tuple[float, float]:
    specs = {s.name: s for s in model.parameters}
    if kd is not None:
        kd0 = float(kd)
    elif mineral in KD_PRIOR:
        kd0 = KD_PRIOR[mineral][0]
    else:
        kd0 = float(specs["kd"].default)
    if kd_sd is None:
        kd_sd = (KD_PRIOR[mineral][1] if kd is None and mineral in KD_PRIOR
                 else KD_RELATIVE_SD[mineral] * kd0)
    kd_sd = float(kd_sd)
    if not (np.isfinite(kd0) and kd0 > 0 and np.isfinite(kd_sd) and kd_sd >= 0):
        raise ZoningError(
            f"Kd prior must be a positive mean and a non-negative sd; got {kd0!r} +/- "
            f"{kd_sd!r}. Give e.g. --kd 0.30 --kd-sd 0.03."
        )
    return kd0, kd_sd


def _unique_names(traverses) -> list[str]:
    names = [t.name for t in traverses]
    out, seen = [], set()
    for t, n in zip(traverses, names, strict=True):
        name = n
        if names.count(n) > 1:
            from pathlib import Path

            name = f"{Path(str(t.source)).stem} {n}"
        k = 2
        base = name
        while name in seen:
            name, k = f"{base} ({k})", k + 1
        seen.add(name)
        out.append(name)
    return out


def _radius_of(traverse, radius_um, name):
    if isinstance(radius_um, Mapping):
        value = radius_um.get(name, radius_um.get(traverse.name))
    else:
        value = radius_um
    if value is None:
        d = traverse.spots["distance_um"].to_numpy(float)
        d = d[np.isfinite(d)]
        value = float(np.max(np.abs(d))) if d.size else float("nan")
    value = float(value)
    if not (np.isfinite(value) and value > 0):
        raise ZoningError(
            f"crystal radius must be a positive number [µm]; got {value!r} for crystal "
            f"{name!r}. Give radius_um / --radius-um."
        )
    return value


def fit_sample(
    traverses: Sequence[Traverse],
    *,
    melt: Mapping[str, float],
    name: str | None = None,
    kd: float | None = None,
    kd_sd: float | None = None,
    fe3_fraction: float | None = None,
    geometry: str = "sphere",
    distance_range: tuple[float, float] | None = None,
    radius_um: float | Mapping[str, float] | None = None,
    free: Sequence[str] = (),
    sigma: float | Mapping | None = None,
    trace_sigma: float | Mapping[str, float] | None = None,
    traces: str | Sequence[str] | None = "auto",
    include_flagged: bool = False,
    robust: bool = False,
    temperature_c: float | None = None,
    f_rim: str = "shared",
    retention: str = "shared",
    exclude: Sequence[str] = (),
    seed: int = 0,
    n_chains: int = N_CHAINS,
    n_sweeps: int | None = None,
    section_h_over_r: str | float | None = None,
    diffusion_length_um: str | float | None = None,
) -> SampleFitResult:
    """Fit the crystals of one sample jointly: one parent melt, Kd and r.

    Parameters
    ----------
    traverses : sequence of zoning.Traverse
        One traverse per crystal, all of one mineral (at least two).
    melt : mapping of str to float
        Reference melt analysis [wt%], as for :func:`fit_traverse`.
    name : str, optional
        Sample name (default: the traverse names' common part, else "sample").
    kd, kd_sd, fe3_fraction, geometry, distance_range, sigma, trace_sigma, traces,
    include_flagged, robust, temperature_c
        As for :func:`zoning.fitting.fit_traverse`; they apply to every
        crystal. The Kd prior enters the sample's posterior once.
    radius_um : float or mapping of str to float, optional
        Crystal radius [µm], one value for all or by crystal name; default
        the largest distance of each traverse.
    free : sequence of str, optional
        Extra per-crystal parameters: ``"growth_exponent"``,
        ``"core_offset_um"`` (F_core is always fitted per crystal).
    f_rim : {"shared", "per_crystal"}, optional
        One F at the rim for all crystals (erupted together; default) or one
        per crystal.
    retention : {"shared", "hierarchical"}, optional
        One r for the sample (default) or one per crystal drawn from a
        population (logit-normal; module docstring).
    exclude : sequence of str, optional
        Crystal names to leave out (reported as "excluded").
    seed : int, optional
        Seed of every random step.
    n_chains, n_sweeps : int, optional
        Sampler chains and sweeps per chain (burn-in, the first
        :data:`BURN_FRACTION`, included); default sweeps
        :data:`DEFAULT_N_SWEEPS` of the mineral. With the default, a chain
        with too few effective draws or an R-hat above :data:`MAX_RHAT` is
        continued (up to :data:`MAX_EXTEND` times the default in all) and a
        warning says so; a given ``n_sweeps`` is run as it is.
    section_h_over_r : None, "free" or float, optional
        Section offset h/R of each crystal [1] (distance of the section plane
        from the crystal centre over the true radius). None (default): every
        crystal is cut through its centre (growth only, h/R = 0); "free": fitted
        per crystal, uniform prior on [0, :data:`zoning.models.SECTION_H_OVER_R_MAX`]
        (as single fits); a number in [0, 1): that offset for every crystal.
        Geometry "slab" accepts only None or 0 (an offset changes nothing there).
    diffusion_length_um : None, "free" or float, optional
        Diffusion length L = sqrt(D t) of Fe-Mg after growth [µm], per crystal
        (crystals sit in the melt for different times). None (default): no
        diffusion (growth only, L = 0); "free": fitted per crystal, uniform
        prior on [0, min(R, model bound)] with R the crystal's section radius
        (as single fits), the traces relaxed with their diffusivities relative
        to Fe-Mg and the rim held at the melt's composition; a number: that L
        for every crystal. Plagioclase needs an MgO or SrO profile (An is
        practically frozen), as for single fits.

    Returns
    -------
    SampleFitResult

    Raises
    ------
    zoning.exceptions.ZoningError
        Invalid settings, mixed minerals, unknown names in ``exclude``,
        fewer than two crystals to fit.
    zoning.exceptions.FitError
        A crystal has too few usable spots, or no model is finite.

    Warns
    -----
    DataQualityWarning
        Likely antecrysts, two melts, reversals.
    ConvergenceWarning
        Chains too short.
    CalibrationRangeWarning
        A law or the glass thermometer used outside its calibration range
        along the shared best-fit path (once per law, as for single fits).
    """
    from zoning.fitting.diagnostics import find_reversals

    t_start = time.perf_counter()
    traverses = list(traverses)
    if not traverses or not all(isinstance(t, Traverse) for t in traverses):
        raise ZoningError(
            "fit_sample needs a list of traverses (one per crystal) from read_traverses; got "
            f"{type(traverses).__name__} of {len(traverses)} items."
        )
    minerals = sorted({t.mineral for t in traverses})
    if len(minerals) != 1 or minerals[0] not in MINERALS:
        raise ZoningError(
            f"the crystals of one joint fit must be of one mineral; got {minerals}. Fit each "
            "mineral as its own sample (or pass --mineral when reading)."
        )
    mineral = minerals[0]
    for key, value in (("f_rim", f_rim), ("retention", retention)):
        if value not in _SHARED_OPTIONS[key]:
            raise ZoningError(
                f"{key} sharing {value!r} not understood; expected one of "
                f"{list(_SHARED_OPTIONS[key])} (--joint-{key.replace('_', '-')})."
            )
    extra = tuple(n for n in free if n != "f_core")
    unknown = [n for n in extra if n not in OPTIONAL_FREE]
    if unknown:
        raise ZoningError(
            f"cannot free {unknown} per crystal; expected any of {list(OPTIONAL_FREE)}."
        )
    section = 0.0
    if section_h_over_r is not None:
        # the single-fit rules and wording (slab, range, "free" or a number)
        section = _process_setting("section_h_over_r", section_h_over_r, mineral, geometry,
                                   (), [])
    names = _unique_names(traverses)
    exclude = tuple(exclude)
    missing = [e for e in exclude if e not in names and e not in [t.name for t in traverses]]
    if missing:
        raise ZoningError(
            f"--exclude names {missing} are not crystals of this sample; the crystals are "
            f"{names}. Give names from this list (comma-separated)."
        )
    is_excluded = [n in exclude or t.name in exclude for n, t in zip(names, traverses,
                                                                      strict=True)]
    active = [i for i, x in enumerate(is_excluded) if not x]
    if len(active) < 2:
        raise ZoningError(
            f"a joint fit needs at least two crystals; {len(active)} left after --exclude "
            f"(crystals {names}). Fit a single crystal without --joint."
        )
    sample_name = name or _common_name([t.name for t in traverses])
    # Without a user length, a short chain is continued (as single fits do).
    max_sweeps = MAX_EXTEND * DEFAULT_N_SWEEPS[mineral] if n_sweeps is None else None
    n_sweeps = int(DEFAULT_N_SWEEPS[mineral] if n_sweeps is None else n_sweeps)
    if n_sweeps < 100:
        raise ZoningError(f"n_sweeps must be at least 100; got {n_sweeps}. Use e.g. --steps 1200.")
    n_chains = int(n_chains)
    if n_chains < 4:
        raise ZoningError(f"n_chains must be at least 4; got {n_chains}. Use e.g. --walkers 32.")
    rng_range = _parse_range(distance_range)
    ratio = _RATIO[mineral]

    # --- data of every crystal -------------------------------------------
    sig_major, sig_trace = _split_sigma(sigma, trace_sigma, mineral)
    crystals: list[_Crystal] = []
    chosen_all: dict[str, tuple] = {}
    skipped = []
    for i, tr in enumerate(traverses):
        usable = tr.usable(include_flagged)
        if rng_range is not None:
            dd = usable["distance_um"].to_numpy(float)
            usable = usable[(dd >= rng_range[0]) & (dd <= rng_range[1])]
        chosen = [(t.oxide, t.name, t.key, t.param, t.observed, t.sigma, t.finite)
                  for t in _select_traces(tr, usable, mineral, traces, sig_trace)]
        if mineral == "plagioclase" and temperature_c is None and chosen:
            if traces == "auto":
                skipped = [c[0] for c in chosen]
                chosen = []
            else:
                raise ZoningError(
                    f"fitting {[c[0] for c in chosen]} in plagioclase needs the temperature of "
                    "the partitioning laws; got none. Give temperature_c (--temperature-c)."
                )
        sig, source = _major_sigma(usable, mineral, sig_major)
        crystals.append(_Crystal(
            name=names[i], traverse=tr, usable=usable,
            distance_um=usable["distance_um"].to_numpy(float),
            radius_um=_radius_of(tr, radius_um, names[i]),
            y=usable[tr.major].to_numpy(float), sigma=sig, sigma_source=source,
            traces={c[3]: (c[0], c[2], c[4], c[5], c[6]) for c in chosen},
        ))
        if not is_excluded[i]:
            for c in chosen:
                chosen_all.setdefault(c[3], (c[3], c[2], c[0], c[1]))
    melt_input = read_melt(melt, mineral, fe3_fraction=fe3_fraction)
    melt, fe3_fraction = melt_input.oxides, melt_input.fe3_fraction
    process_notes: list[str] = []
    diffusion = 0.0
    if diffusion_length_um is not None:
        # the single-fit rules and wording (plagioclase needs an MgO/SrO profile)
        diffusion = _process_setting("diffusion_length_um", diffusion_length_um, mineral,
                                     geometry, [v[2] for v in chosen_all.values()],
                                     process_notes)
    extra_local = (extra + (("section_h_over_r",) if section == "free" else ())
                   + (("diffusion_length_um",) if diffusion == "free" else ()))
    model = _build_model(mineral, melt, kd, fe3_fraction,
                         [v[3] for v in chosen_all.values()], geometry, temperature_c)
    kd0, kd_sd_v = _kd_prior(mineral, kd, kd_sd, model)
    settings = _Settings(
        model=model, mineral=mineral, ratio=ratio, kd0=kd0, kd_sd=kd_sd_v,
        f_rim_mode=f_rim, retention_mode=retention, extra_local=extra_local,
        trace_params=tuple((p, key, ox) for p, key, ox, _n in chosen_all.values()),
        robust=bool(robust), section_fixed=0.0 if section == "free" else float(section),
        diffusion_fixed=0.0 if diffusion == "free" else float(diffusion),
    )
    # A crystal with fewer usable spots than its own fit has parameters (plus
    # two) is left out and reported, so that one short traverse does not stop
    # the sample; the sample stops only when fewer than two crystals remain.
    warn_list: list[str] = list(melt_input.notes) + process_notes
    data_quality: set[str] = set()  # messages that are DataQualityWarnings
    n_own = 4 + len(extra_local) + len(settings.trace_params)
    too_few = [i for i in active if crystals[i].y.size < n_own + 2]
    for i in too_few:
        hint = (" or fix its section (--section-h-over-r 0 when its core is in the cut)"
                if section == "free" else "")
        if diffusion == "free":
            hint += " or its diffusion length (--diffusion-length-um 0)"
        msg = (f"crystal {crystals[i].name!r} has {crystals[i].y.size} usable spots; at "
               f"least {n_own + 2} are needed to fit it here: left out (verdict 'too few "
               f"spots'). Check its flagged spots (--include-flagged){hint}.")
        warn_list.append(msg)
        data_quality.add(msg)
    active = [i for i in active if i not in too_few]
    if len(active) < 2:
        raise FitError(
            f"a joint fit needs at least two crystals with at least {n_own + 2} usable spots "
            f"each; {len(active)} of {names} have them. Check the flagged spots, leave out "
            "the short traverses (--exclude), or fit the crystals without --joint."
        )

    # --- every crystal alone -----------------------------------------------
    written = by_written_sample(traverses)
    if len(written) > 1:
        warn_list.append(
            f"the files name {len(written)} samples in their sample column ("
            + "; ".join(f"{k}: {len(v)} crystal{'s' if len(v) > 1 else ''}"
                        for k, v in written.items())
            + "); they were fitted as one sample sharing one parent melt, as asked. Fit each "
            "sample on its own (zoning fit --joint splits a file by its sample column unless "
            "--name is given) unless they really are one rock."
        )
    owns: dict[int, _Own] = {}
    own_est: dict[int, dict] = {}
    own_draws: dict[int, Any] = {}
    rng = np.random.default_rng(seed + 7)
    for i in active:
        owns[i] = _own_fit(settings, crystals[i], model)
        crystals[i].sigma_scale = owns[i].sigma_scale
        own_est[i], own_draws[i] = _own_estimates(owns[i], settings, rng)
        if owns[i].sigma_scale > 1.0:
            warn_list.append(
                f"crystal {crystals[i].name!r}: the model does not fit it within the stated "
                f"uncertainties (reduced chi-square {owns[i].reduced:.2f}); its sigmas were "
                f"multiplied by {owns[i].sigma_scale:.2f} for the joint fit and the test."
            )
        cr = crystals[i]
        rev = find_reversals(cr.distance_um, cr.y, cr.sigma)
        if len(rev):
            warn_list.append(
                f"crystal {cr.name!r} goes back towards its core composition at "
                f"{float(rev['start_um'].iloc[0]):g}-{float(rev['end_um'].iloc[0]):g} µm "
                "(recharge or mixing): no closed-system path describes it; consider "
                "--exclude for it or fitting its segments alone."
            )
    t_own = time.perf_counter()

    # --- consistency of the crystals ---------------------------------------
    screen = _screen(settings, crystals, owns, active)
    main, set_apart = screen.members, screen.flagged
    second = _Screen(members=[], flagged=[], stats={})
    if len(set_apart) >= 2:
        second = _screen(settings, crystals, owns, set_apart)
        if second.disagree_pair or len(second.members) < 2:
            second = _Screen(members=[], flagged=list(set_apart), stats=second.stats)
    t_screen = time.perf_counter()
    n_active = len(active)
    no_answer = screen.disagree_pair or (
        len(second.members) >= 2 and len(main) < MAJORITY * n_active)
    verdict = "one melt"
    if screen.disagree_pair:
        verdict = "crystals disagree"
    elif len(second.members) >= 2:
        verdict = "two melts" if not no_answer else "two melts, no majority"
    elif set_apart:
        verdict = "one melt with antecrysts"

    # --- posterior of each group -----------------------------------------
    groups: list[tuple[list, _Group]] = []
    for g, members in enumerate([main, second.members]):
        if len(members) < 2:
            continue
        grp = _fit_group(settings, [crystals[i] for i in members], [owns[i] for i in members],
                         n_chains=n_chains, n_sweeps=n_sweeps, seed=seed + 101 * g,
                         include_flagged=include_flagged, rng_range=rng_range,
                         max_sweeps=max_sweeps)
        groups.append((members, grp))
    t_sample = time.perf_counter()
    main_members, main_grp = groups[0]

    # --- crystals ------------------------------------------------------------
    from zoning.fitting.summary import _curves

    crystal_fits = []
    for i, cr in enumerate(crystals):
        tested = screen.stats.get(i) or second.stats.get(i) or (np.nan, 0, np.nan)
        if i not in active:
            crystal_fits.append(CrystalFit(
                name=cr.name, traverse=cr.traverse,
                verdict="excluded" if is_excluded[i] else "too few spots", group=0,
                estimates={}, own_estimates={}, n_spots=cr.traverse.n_spots,
                n_used=int(cr.y.size)))
            continue
        group, grp, pos = 0, None, None
        for g, (members, gr) in enumerate(groups):
            if i in members:
                group, grp, pos = g + 1, gr, members.index(i)
        if screen.disagree_pair:
            v_name = "undecided"
        elif group == 1:
            v_name = "consistent"
        elif group == 2:
            v_name = "second melt"
        else:
            v_name = "likely antecryst"
        own = owns[i]
        if grp is not None:
            chi2 = float(grp.chi2_crystal[pos])
            dof = max(cr.y.size + sum(int(t[4].sum()) for t in cr.traces.values())
                      - grp.joint.Q, 1)
            spots, curve, est = grp.spots[pos], grp.curves[pos], grp.crystal_estimates[pos]
        else:
            prob = own.prob
            dr = own_draws[i]
            dr = own.theta[None, :] if dr is None else dr[:N_CURVE_DRAWS]
            spots, curve = _curves(
                dataclasses.replace(prob, options={**prob.options,
                                                   "distance_range_um": rng_range}),
                own.theta, own.theta, own.theta, dr)
            z = prob.residuals(prob.params(own.theta[None, :]), 1)[0]
            chi2 = float(np.sum(z[:-1] ** 2))
            dof = max(prob.n_data - len(prob.free), 1)
            est = {}
        crystal_fits.append(CrystalFit(
            name=cr.name, traverse=cr.traverse, verdict=v_name, group=group, estimates=est,
            own_estimates=own_est[i], consistency_statistic=float(tested[0]),
            consistency_dof=int(tested[1]), consistency_p=float(tested[2]),
            chi_square=chi2, reduced_chi_square=chi2 / dof,
            own_reduced_chi_square=own.reduced, sigma_scale=own.sigma_scale,
            n_spots=cr.traverse.n_spots, n_used=int(cr.y.size), spots=spots, curve=curve,
        ))

    # --- statements ----------------------------------------------------------
    anchor_name = main_grp.joint.crystals[main_grp.anchor].name
    if screen.disagree_pair:
        msg = (f"the two crystals {', '.join(crystals[i].name for i in main)} do not share "
               "one melt (p = {:.2g}); with two crystals the tool cannot tell which one is "
               "the outsider, so no shared answer is given. Add crystals or fit them "
               "alone.".format(min(screen.stats[i][2] for i in main)))
        warn_list.append(msg)
    for i in set_apart:
        t, d, p = screen.stats.get(i, (np.nan, 0, np.nan))
        where = "a second melt" if i in second.members else "a likely antecryst"
        own_ratio = own_est[i].get(ratio)
        band = (f"; its own parent {ratio} {own_ratio.lo95:.3f}-{own_ratio.hi95:.3f}"
                if own_ratio is not None and np.isfinite(own_ratio.lo95) else "")
        p_text = "p < 0.001" if p < 1e-3 else f"p = {p:.2g}"
        warn_list.append(
            f"crystal {crystals[i].name!r} does not share the melt of the others "
            f"(likelihood-ratio T = {t:.1f} on {d} dof, {p_text}): {where}, left out of "
            f"the shared answer{band}."
        )
    if len(second.members) >= 2:
        g2 = groups[1][1].estimates[ratio]
        g1 = main_grp.estimates[ratio]
        msg = (
            f"the crystals record two melts: {', '.join(crystals[i].name for i in main)} "
            f"({ratio} {g1.lo95:.3f}-{g1.hi95:.3f}) and "
            f"{', '.join(crystals[i].name for i in second.members)} "
            f"({ratio} {g2.lo95:.3f}-{g2.hi95:.3f})"
        )
        if no_answer:
            msg += ("; neither group holds two thirds of the crystals, so the sample is not "
                    "given one answer (see crystals.csv for each group).")
        else:
            msg += "; the summary gives the larger group."
        warn_list.append(msg)
    warn_list.append(
        f"F counts from the nucleation of the earliest crystal ({anchor_name!r}, F_core = 0 by "
        "definition); the parent melt is the melt that grew its core."
    )
    warn_list += main_grp.warnings
    calibration = _calibration_warnings(main_grp.joint, main_grp.v)
    warn_list += calibration
    if len(groups) > 1:
        warn_list += [f"second melt: {w}" for w in groups[1][1].warnings if "short" in w]
    if skipped:
        warn_list.append(
            f"{', '.join(skipped)} not fitted: the plagioclase partitioning laws need a "
            "temperature (--temperature-c)."
        )
    if robust:
        warn_list.append("robust (soft-L1) loss used: stray spots are down-weighted.")
    warn_list.append(process_note(section, diffusion))
    for w in warn_list:
        if (w in data_quality or "does not share" in w or "two melts" in w
                or "do not share" in w or "samples in their sample column" in w):
            warnings.warn(f"sample {sample_name!r}: {w}", DataQualityWarning, stacklevel=2)
        if "too short" in w:
            warnings.warn(f"sample {sample_name!r}: {w}", ConvergenceWarning, stacklevel=2)
        if w in calibration:
            warnings.warn(f"sample {sample_name!r}: {w}", CalibrationRangeWarning, stacklevel=2)

    estimates = dict(main_grp.estimates)
    if no_answer:
        estimates = {
            k: Estimate(name=e.name, unit=e.unit, lower=e.lower, upper=e.upper,
                        constrained=False,
                        note="no single answer: the crystals do not share one melt "
                             "(see the crystals table)")
            for k, e in estimates.items()
        }
    joint = main_grp.joint
    free_idx = np.flatnonzero(~joint.fixed)
    pnames = tuple(_param_names(joint, free_idx))
    samples = main_grp.flat[:, free_idx]
    with np.errstate(all="ignore"):
        corr = np.atleast_2d(np.corrcoef(samples, rowvar=False))
    chi2_total = float(np.sum(main_grp.chi2_crystal))
    dof_total = max(joint.n_data - free_idx.size, 1)
    ch = main_grp.chain
    diagnostics = {
        "n_chains": float(ch.n_chains), "n_sweeps": float(ch.n_sweeps),
        "n_sweeps_planned": float(ch.extended_from or ch.n_sweeps),
        "burn_in": float(ch.burn_in), "accept_local": ch.accept_local,
        "accept_shared": ch.accept_shared, "accept_independence": ch.accept_independence,
        "accept_de": ch.accept_de, "chains_restarted": ch.n_restarted,
        "seconds_own_fits": t_own - t_start, "seconds_screening": t_screen - t_own,
        "seconds_sampling": t_sample - t_screen,
        "seconds_total": time.perf_counter() - t_start,
        "min_ess": float(np.min(ch.ess)), "max_rhat": float(np.max(ch.rhat)),
    }
    for n_, e_, r_ in zip(pnames, ch.ess, ch.rhat, strict=True):
        diagnostics[f"ess_{n_}"] = float(e_)
        diagnostics[f"rhat_{n_}"] = float(r_)
    settings_out = {
        "mineral": mineral, "melt": {str(k): float(v) for k, v in dict(melt).items()},
        "kd_prior_mean": kd0, "kd_prior_sd": kd_sd_v, "fe3_fraction": float(fe3_fraction),
        "fe3_source": melt_input.fe3_source,
        "geometry": geometry, "distance_range_um": list(rng_range) if rng_range else None,
        "radius_um": {c.name: c.radius_um for c in crystals}, "free": list(extra),
        "f_rim": f_rim, "retention": retention, "exclude": list(exclude),
        "traces": [t[2] for t in settings.trace_params],
        "include_flagged": bool(include_flagged), "robust": bool(robust),
        "temperature_c": float("nan") if temperature_c is None else float(temperature_c),
        "seed": int(seed), "n_chains": n_chains, "n_sweeps": n_sweeps,
        "consistency_test": "leave-one-out likelihood ratio (Wilks 1938), sequential, "
                            f"Bonferroni alpha {ALPHA:g}",
        "sampler": "Metropolis-within-Gibbs, parallel crystal blocks + shear move",
        "section_h_over_r": section, "diffusion_length_um": diffusion,
    }
    from zoning.fitting.methods import joint_methods

    processes = tuple(p for p, value in (("section", section), ("diffusion", diffusion))
                      if value != 0.0)
    methods = model.methods(processes=processes) + joint_methods(
        mineral, kd_mean=kd0, kd_sd=kd_sd_v, kd_default=kd is None,
        fe3_fraction=float(fe3_fraction), fe3_source=melt_input.fe3_source,
        sigma_scaled=any(owns[i].sigma_scale > 1.0 for i in main_members))
    return SampleFitResult(
        name=sample_name, mineral=mineral, crystals=tuple(crystal_fits), estimates=estimates,
        group_estimates=tuple(g.estimates for _m, g in groups), verdict=verdict,
        anchor=anchor_name, parameter_names=pnames, samples=samples, correlation=corr,
        path=main_grp.path, chi_square=chi2_total, reduced_chi_square=chi2_total / dof_total,
        n_crystals=len(crystals), n_antecrysts=len(set_apart),
        n_spots=int(sum(c.traverse.n_spots for c in crystals)),
        n_used=int(sum(crystals[i].y.size for i in main_members)),
        excluded=tuple(names[i] for i, x in enumerate(is_excluded) if x),
        diagnostics=diagnostics, warnings=tuple(warn_list), settings=settings_out,
        versions=_versions(), seed=int(seed), methods=methods,
    )


def _common_name(names: Sequence[str]) -> str:
    """Longest common leading part of the crystal names, trimmed ("sample" if none)."""
    import os

    prefix = os.path.commonprefix(list(names))
    if len(set(names)) > 1 and prefix and prefix[-1] not in " _-.":
        cut = max(prefix.rfind(ch) for ch in " _-.")
        prefix = prefix[: cut + 1] if cut >= 0 else ""
    return prefix.strip(" _-.") or "sample"
