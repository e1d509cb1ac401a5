"""The published methods a fit rests on, as :class:`zoning.references.MethodUse` records.

:func:`fit_methods` lists what the inversion itself uses (best fit, sampler,
model choice, the Kd prior, the melt Fe3+/FeT and, when applied, the Birge
ratio); the forward model lists its own laws (:meth:`CrystallizationModel.methods`).
``fit_traverse`` stores both in ``FitResult.methods``, from which the report's
methods paragraph, its reference list and ``fit.json`` are written.
"""

from __future__ import annotations

import math

from zoning.references import MethodUse

__all__ = ["fit_methods", "joint_methods", "FE3_SOURCES"]

#: How the melt Fe3+/FeT of a fit was obtained, in words.
FE3_SOURCES = {
    "default": "default value, typical of basalts near the QFM buffer",
    "given": "given by the user",
}


def _melt_and_kd_uses(mineral, kd_mean, kd_sd, kd_default, fe3_fraction, fe3_source):
    """List the melt Fe3+/FeT (olivine) and Kd prior records of single and joint fits."""
    uses = []
    if mineral == "olivine":
        source = FE3_SOURCES.get(fe3_source, fe3_source)
        uses.append(MethodUse("melt Fe3+/FeT", "",
                              f"Fe3+/FeT = {fe3_fraction:.2f} ({source}); Fe3+ takes no part "
                              "in the exchange, so the melt Mg# counts Fe2+ only"))
    prior_key = "roeder_emslie_1970" if (mineral == "olivine" and kd_default) else ""
    if kd_sd > 0:
        prior = f"Gaussian prior {kd_mean:.3g} +/- {kd_sd:.2g}"
    else:
        prior = f"fixed at {kd_mean:.3g}"
    prior += " (built-in default)" if kd_default else " (given by the user)"
    uses.append(MethodUse("exchange coefficient prior", prior_key, prior))
    return uses


def fit_methods(
    mineral: str,
    *,
    kd_mean: float,
    kd_sd: float,
    kd_default: bool,
    fe3_fraction: float = math.nan,
    fe3_source: str = "given",
    sigma_scale: float = 1.0,
    sampled: bool = True,
    section_free: bool = False,
) -> tuple[MethodUse, ...]:
    """List the published methods of the inversion of one traverse.

    Parameters
    ----------
    mineral : {"olivine", "plagioclase"}
        The analysed mineral.
    kd_mean, kd_sd : float
        Mean and 1-sigma of the Gaussian prior on the exchange coefficient
        [1] (``kd_sd == 0``: Kd fixed).
    kd_default : bool
        True when the prior is the built-in one (olivine: Roeder & Emslie
        1970, 0.30 +/- 0.03), False when the user gave the mean.
    fe3_fraction : float, optional
        Melt Fe3+/FeT used (olivine) [fraction].
    fe3_source : str, optional
        ``"default"`` or ``"given"`` (:data:`FE3_SOURCES`), or a plain
        statement of the source.
    sigma_scale : float, optional
        Factor applied to every analytical sigma before sampling (the Birge
        ratio; 1 when the fit is consistent with the stated uncertainties).
    sampled : bool, optional
        Whether the posterior was sampled (False: best fit only).
    section_free : bool, optional
        Whether the section offset h/R was fitted (the bands are then
        widened for a cut through the core, :func:`zoning.fitting.summary.section_envelope`).

    Returns
    -------
    tuple of MethodUse
    """
    uses = list(_melt_and_kd_uses(mineral, kd_mean, kd_sd, kd_default, fe3_fraction,
                                  fe3_source))
    uses.append(MethodUse("best fit", "newville_2014",
                          "multi-start bounded least squares (lmfit, least_squares method)"))
    if sampled:
        sampling = "posterior sampling"
        uses += [
            MethodUse(sampling, "foreman_mackey_2013", "emcee ensemble sampler"),
            MethodUse(sampling, "goodman_weare_2010", "affine-invariant ensemble moves"),
            MethodUse(sampling, "ter_braak_2006", "differential-evolution moves"),
            MethodUse(sampling, "ter_braak_vrugt_2008", "snooker moves during burn-in"),
            MethodUse(sampling, "gelman_1996",
                      "scale 2.38/sqrt(p) of the Gaussian random-walk move"),
            MethodUse(sampling, "parno_marzouk_2018",
                      "production moves in coordinates straightened by a triangular "
                      "quadratic map fitted to the burn-in draws (a low-order transport "
                      "map; constant Jacobian; when the burn-in has enough draws)"),
            MethodUse("convergence of the chains", "sokal_1997",
                      "integrated autocorrelation time and effective sample size"),
        ]
    uses += [
        MethodUse("model choice", "schwarz_1978",
                  "Bayesian information criterion BIC = chi2 + k ln n"),
        MethodUse("model choice", "akaike_1974", "Akaike information criterion, reported"),
        MethodUse("model choice", "kass_raftery_1995",
                  "a model is preferred when its BIC is lower than the runner-up's by at "
                  "least 2 (positive evidence)"),
    ]
    if sampled and section_free:
        uses += [
            MethodUse("bands with the section offset free", "berger_1990",
                      "envelope of the bands under the random-cut prior and for a cut "
                      "through the core (h/R < 0.1): a band over a class of priors"),
            MethodUse("bands with the section offset free", "kass_raftery_1995",
                      "a central cut counts as ruled out when its Bayes factor against the "
                      "random cut is below 1/3"),
        ]
    if math.isfinite(sigma_scale) and sigma_scale > 1.0:
        uses.append(MethodUse("uncertainty scaling", "birge_1932",
                              f"every sigma multiplied by the Birge ratio {sigma_scale:.2f} "
                              "before sampling"))
    return tuple(uses)


def joint_methods(
    mineral: str,
    *,
    kd_mean: float,
    kd_sd: float,
    kd_default: bool,
    fe3_fraction: float = math.nan,
    fe3_source: str = "given",
    sigma_scaled: bool = False,
) -> tuple[MethodUse, ...]:
    """List the published methods of a joint fit of the crystals of a sample.

    The same melt Fe3+/FeT and Kd prior records as :func:`fit_methods`
    (the Kd prior enters the sample's posterior once), then the joint
    inversion's own steps (:mod:`zoning.fitting.joint`): bounded least
    squares, the leave-one-out likelihood-ratio test of every crystal with
    sequential outlier testing, and the Metropolis-within-Gibbs sampler with
    its adaptation and convergence check.

    Parameters
    ----------
    mineral, kd_mean, kd_sd, kd_default, fe3_fraction, fe3_source
        As for :func:`fit_methods`.
    sigma_scaled : bool, optional
        Whether any crystal's sigmas were scaled by its Birge ratio.

    Returns
    -------
    tuple of MethodUse
    """
    uses = _melt_and_kd_uses(mineral, kd_mean, kd_sd, kd_default, fe3_fraction, fe3_source)
    uses += [
        MethodUse("best fit", "", "multi-start bounded least squares of all crystals "
                  "together (scipy least_squares), started from each crystal's own fit"),
        MethodUse("consistency of the crystals with one melt", "wilks_1938",
                  "leave-one-out likelihood-ratio test of each crystal against the others"),
        MethodUse("consistency of the crystals with one melt", "rosner_1983",
                  "sequential outlier testing with a Bonferroni-corrected level"),
        MethodUse("posterior sampling", "metropolis_1953",
                  "Metropolis-within-Gibbs with one block per crystal and a shared block"),
        MethodUse("posterior sampling", "roberts_rosenthal_2009",
                  "step sizes adapted during burn-in only"),
        MethodUse("posterior sampling", "ter_braak_2006",
                  "a differential-evolution move over every parameter, each half of the "
                  "chains jumping along differences of the other half"),
        MethodUse("posterior sampling", "vrugt_2009",
                  "a chain left far below the others at the end of burn-in (outlier test "
                  "on the chains' mean log-posterior) restarted from another chain"),
        MethodUse("posterior sampling", "parno_marzouk_2018",
                  "moves in coordinates straightened by a block triangular map fitted to "
                  "the burn-in draws (a low-order transport map keeping the crystals "
                  "conditionally independent)"),
        MethodUse("convergence of the chains", "gelman_rubin_1992",
                  "split R-hat (each chain's two halves compared with the others)"),
        MethodUse("convergence of the chains", "vehtari_2021",
                  "largest R-hat accepted 1.01 (their threshold; the rank-normalised form "
                  "is not used)"),
        MethodUse("convergence of the chains", "sokal_1997",
                  "integrated autocorrelation time and effective sample size"),
    ]
    if sigma_scaled:
        uses.append(MethodUse("uncertainty scaling", "birge_1932",
                              "the sigmas of a crystal the model does not fit within its "
                              "stated uncertainties multiplied by its Birge ratio"))
    return tuple(uses)
