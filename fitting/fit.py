"""Inversion of one measured traverse: best fits, model choice, posterior bands.

:func:`fit_traverse` fits the forward crystallization model of
:class:`zoning.models.CrystallizationModel` to the major-element record (Fo
or An) of a traverse, jointly with any trace-element profile present, and
returns a :class:`~zoning.fitting.results.FitResult`. It runs five named
stages, each a function of its own module that other fits (e.g. joint fits
of several crystals) reuse:

1. :func:`~zoning.fitting.problem.prepare_problem` -- check the settings,
   select spots and traces, build the model and the log-posterior
   (statistical model in :mod:`zoning.fitting.problem`);
2. :func:`~zoning.fitting.bestfit.fit_candidates` -- best fit of every
   candidate model (growth plus each set of processes, r free / 0 / 1) from
   shared, batched starts;
3. :func:`~zoning.fitting.choice.choose_model` -- AIC/BIC comparison, the
   preferred model and its strength, the sigma scale, reversals;
4. :func:`~zoning.fitting.sampling.sample_posterior` -- emcee posterior of
   the chosen model;
5. :func:`~zoning.fitting.summary.summarise_fit` -- estimates with 95%
   bands, curves, diagnostics and warnings.

A new process or parameter enters in one place: its ParameterSpec in the
forward model and, for a process, its parameter in
:data:`zoning.fitting.bestfit.PROCESS_PARAMETERS`.

Assumptions a user must keep in mind (stated in every report): each zone
grew in surface equilibrium with the melt; later diffusion can smooth the
zoning and off-centre sections distort the distance-to-F mapping (both
fitted as processes unless fixed); the answer depends on the chosen Kd and
reference melt.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence

from zoning.fitting.bestfit import fit_candidates, shared_starts
from zoning.fitting.choice import choose_model
from zoning.fitting.problem import (
    DEFAULT_SIGMA,
    DEFAULT_TRACE_SIGMA,
    KD_PRIOR,
    check_mineral,
    prepare_problem,
)
from zoning.fitting.results import FitResult
from zoning.fitting.sampling import (
    DEFAULT_N_STEPS,
    MAX_AUTO_STEPS,
    sample_posterior,
    sampler_settings,
)
from zoning.fitting.summary import summarise_fit

from zoning.orientation import require_orientation
from zoning.traverse import Traverse

__all__ = ["fit_traverse", "DEFAULT_SIGMA", "DEFAULT_TRACE_SIGMA", "KD_PRIOR", "DEFAULT_N_STEPS"]


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
    section_h_over_r: str | float | None = None,
    diffusion_length_um: str | float | None = None,
    delta_qfm: float | None = None,
) -> FitResult:
    """Fit a crystallization model to one traverse and sample its posterior.

    Parameters
    ----------
    traverse : zoning.Traverse
        Checked traverse (from :func:`zoning.io.read_traverses`).
    melt : mapping of str to float
        Reference melt analysis [wt%]; it fixes the less compatible member
        of the exchanging pair (``FeO`` for olivine, ``Na2O`` for
        plagioclase), e.g. ``{"FeO": 9.5}``. Read by
        :func:`zoning.melt.read_melt`: ``FeOT``/``FeO*`` are total iron,
        FeO + Fe2O3 set Fe3+/FeT, values the fit does not use are listed in
        the result's warnings.
    kd : float, optional
        Mean of the Kd prior (Fe-Mg exchange for olivine, KD(Ca-Na) for
        plagioclase); default :data:`KD_PRIOR` (olivine 0.30) or the forward
        model's default.
    kd_sd : float, optional
        1-sigma of the Kd prior; default 0.03 for olivine (Roeder & Emslie
        1970), 25% of the mean for plagioclase, 10%/25% of a user Kd. Zero
        fixes Kd.
    fe3_fraction : float, optional
        Melt Fe3+/FeT [fraction] (olivine); default from the melt's FeO and
        Fe2O3 when both are given, else 0.10 (recorded as the default in the
        methods of the result).
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
        Temperature [°C]; needed by the plagioclase Sr and Mg partitioning
        laws (without it, ``traces="auto"`` skips them). When diffusion
        after growth is fitted it is also the temperature of that
        diffusion, and the diffusion length is converted into a time
        (``diffusion_time_days``, :func:`zoning.diffusion.diffusion_time_days`).
    seed : int, optional
        Seed of every random step (same seed, same numbers).
    n_walkers, n_steps : int, optional
        emcee walkers and steps, burn-in (the first quarter) included;
        default steps :data:`DEFAULT_N_STEPS` of the mineral. When
        ``n_steps`` is not given and the effective sample size after them
        is below 1000, the chain is continued by the steps that size needs,
        up to :data:`~zoning.fitting.sampling.MAX_AUTO_STEPS`, and the
        result says so.
    progress : bool, optional
        Show the sampler's progress bar.
    thermometer : str, optional
        Olivine: glass-MgO thermometer of the reported melt temperature
        (:data:`zoning.thermometry.THERMOMETERS`, default Helz & Thornber
        1987). Warns once (CalibrationRangeWarning) when the best-fit melt
        path leaves its calibration range.

    section_h_over_r : "free" or float, optional
        Distance of the section plane from the crystal centre over the true
        radius, h/R [1]: ``"free"`` fits it with the prior of a random cut
        (uniform on [0, 0.95]: for random planes meeting a sphere, or planes
        parallel to a prism's axis meeting it, h/R is uniform on [0, 1); see
        :mod:`zoning.geometry`), a number fixes it (0: the cut went through
        the core, e.g. a core feature is visible). Default ``"free"``
        (geometry ``"slab"``: fixed at 0, where a cut's offset changes
        nothing).
    diffusion_length_um : "free" or float, optional
        Diffusion length L = sqrt(D t) after growth of Fe-Mg (olivine) or
        Mg (plagioclase) [µm]: ``"free"`` fits it with a uniform prior on
        [0, min(radius, 500 µm)] (zero included), a number fixes it.
        Default: ``"free"`` for olivine; 0 for plagioclase, whose An record
        is practically frozen (give ``"free"`` with an MgO/SrO profile).
    delta_qfm : float, optional
        Oxygen fugacity relative to the QFM buffer [log10 units] for the
        olivine Fe-Mg diffusivity (Dohmen & Chakraborty 2007) when a
        diffusion time is computed; default 0 (QFM, stated in the warnings).

    Returns
    -------
    FitResult

    Raises
    ------
    zoning.exceptions.OrientationUncertainError
        The traverse's orientation is "uncertain" and was not confirmed by
        the user (checked first, before anything is fitted).
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
    require_orientation(traverse)  # orientation gate first (also in prepare_problem)
    mineral = check_mineral(traverse)
    auto_steps = n_steps is None
    n_walkers, n_steps = sampler_settings(mineral, n_walkers, n_steps)
    problem = prepare_problem(
        traverse,
        melt=melt,
        kd=kd,
        kd_sd=kd_sd,
        fe3_fraction=fe3_fraction,
        geometry=geometry,
        distance_range=distance_range,
        radius_um=radius_um,
        free=free,
        sigma=sigma,
        trace_sigma=trace_sigma,
        traces=traces,
        include_flagged=include_flagged,
        robust=robust,
        temperature_c=temperature_c,
        thermometer=thermometer,
        section_h_over_r=section_h_over_r,
        diffusion_length_um=diffusion_length_um,
        delta_qfm=delta_qfm,
    )
    starts, n_grid = shared_starts(problem)
    fits = fit_candidates(problem, starts=starts)
    choice = choose_model(problem, fits)
    posterior = sample_posterior(
        choice.problem, choice.sampled.theta, n_walkers=n_walkers, n_steps=n_steps,
        max_steps=MAX_AUTO_STEPS[mineral] if auto_steps else None,
        seed=seed, progress=progress, modes=choice.modes, mode_weights=choice.mode_weights,
    )
    return summarise_fit(problem, fits, choice, posterior, seed=seed, n_grid=n_grid,
                         stacklevel=3)
