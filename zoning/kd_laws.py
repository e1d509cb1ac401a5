r"""Composition-dependent exchange coefficients (a choice, not the default).

The forward model uses one constant exchange coefficient along a path
(default olivine Fe-Mg :math:`K_D = 0.30`, Roeder & Emslie 1970). The laws
here compute that constant from the melt instead:

Olivine, Toplis (2005), eqs. 10-12 and 14 (R in J/mol/K, T in K, P in bar,
:math:`X_{Fo}` fraction, oxides in mol% on an anhydrous single-oxide basis):

.. math::

    \ln K_D = \frac{-6766}{RT} - \frac{7.34}{R}
    + \ln(0.036\,SiO_2^A - 0.22)
    + \frac{3000(1 - 2X_{Fo})}{RT} + \frac{0.035(P - 1)}{RT}

    SiO_2^A = SiO_2 + \Psi\,(Na_2O + K_2O) \;[+\,0.8\,H_2O]

    \Psi = \left[0.46\frac{100}{100 - SiO_2} - 0.93\right](Na_2O + K_2O)
         + \left[-5.33\frac{100}{100 - SiO_2} + 9.69\right]
         \quad (SiO_2 \le 60\ \mathrm{mol\%})

    \Psi = \left[11 - 5.5\frac{100}{100 - SiO_2}\right]
           e^{-0.13(Na_2O + K_2O)} \quad (SiO_2 > 60\ \mathrm{mol\%};
           \text{eq. 13, from memory})

Olivine, Blundy et al. (2020), eq. 8 (T in K):

.. math::

    K_D^{Fe_T-Mg} = 0.3642\,(1 - Fe^{3+}/\Sigma Fe)
                    \exp\left[\frac{312.7(1 - 2X_{Fo})}{T}\right]

so that the ferrous coefficient used by the forward model is
:math:`K_D^{Fe^{2+}-Mg} = 0.3642\exp[312.7(1 - 2X_{Fo})/T]`.

Both depend on the olivine composition, so :func:`liquidus_olivine_kd`
solves :math:`Fo = 1/(1 + K_D(Fo)(1/Mg\# - 1))` by fixed-point iteration for
the *parent melt at its liquidus olivine* and returns that value. It is then
used as the constant :math:`K_D` of the whole path. That is the choice a
zoning study needs (one coefficient per scenario, comparable between
crystals); it ignores the small drift of :math:`K_D` as Fo and T fall along
the path (for Toplis' law about +0.01 per 10 mol% Fo lost). If the melt or
the temperature used is not the real parent's, the resulting Fo offsets are
of the order of the spread between laws (0.28-0.35): the choice of
:math:`K_D` is a model assumption and should be reported.

Plagioclase Ca-Na: :math:`K_D^{Ca-Na} = (Ca/Na)_{pl}/(Ca/Na)_{melt}` rises
with melt water, from about 1-2 for anhydrous melts to about 5.5 for
water-saturated melts at 200 MPa (Sisson & Grove 1993, values from memory).
:func:`plagioclase_kd_from_water` interpolates linearly from 1.7 at 0 wt%
H2O to 5.5 at 6 wt% H2O. This is a rule of thumb (common practice), **not a
calibration**: temperature, pressure and melt composition also move the
value. Give a measured or experimental value when one exists.

References
----------
.. [1] Toplis, M. J. (2005). The thermodynamics of iron and magnesium
   partitioning between olivine and liquid: criteria for assessing and
   predicting equilibrium in natural and experimental systems.
   Contributions to Mineralogy and Petrology 149, 22-39.
.. [2] Blundy, J., Melekhova, E., Ziberna, L., Humphreys, M. C. S., Cerantola,
   V., Brooker, R. A., McCammon, C. A., Pichavant, M. & Ulmer, P. (2020).
   Effect of redox on Fe-Mg-Mn exchange between olivine and melt and an
   oxybarometer for basalts. Contributions to Mineralogy and Petrology 175:103.
.. [3] Roeder, P. L. & Emslie, R. F. (1970). Olivine-liquid equilibrium.
   Contributions to Mineralogy and Petrology 29, 275-289.
.. [4] Sisson, T. W. & Grove, T. L. (1993). Experimental investigations of
   the role of H2O in calc-alkaline differentiation and subduction zone
   magmatism. Contributions to Mineralogy and Petrology 113, 143-166.
"""

from __future__ import annotations

import warnings
from collections.abc import Mapping
from dataclasses import dataclass

import numpy as np

from zoning.exceptions import CalibrationRangeWarning, ConvergenceWarning, ModelDomainError
from zoning.redox import MOLAR_MASS, melt_mole_fractions
from zoning.thermometry import helz_thornber_1987

__all__ = [
    "GAS_CONSTANT",
    "OLIVINE_KD_LAWS",
    "LiquidusKd",
    "toplis_silica_activity_term",
    "toplis_2005_kd",
    "blundy_2020_kd",
    "liquidus_olivine_kd",
    "plagioclase_kd_from_water",
]

#: Citation keys (:mod:`zoning.references`) of the laws of this module, by law name.
CITATIONS = {"toplis_2005": "toplis_2005", "blundy_2020": "blundy_2020",
             "plagioclase_kd_from_water": "sisson_grove_1993"}

#: Molar gas constant [J/(mol K)] (CODATA 2018 exact value).
GAS_CONSTANT = 8.314462618

#: Names of the olivine Fe-Mg laws accepted by :func:`liquidus_olivine_kd`.
OLIVINE_KD_LAWS = ("toplis_2005", "blundy_2020")

#: Approximate temperature window of the Toplis (2005) data set [°C] (from memory).
_TOPLIS_T_RANGE_C = (1000.0, 1600.0)

#: Plagioclase rule of thumb: K_D(Ca-Na) at 0 wt% and at ``_PL_H2O_SAT`` wt% H2O.
_PL_KD_DRY = 1.7
_PL_KD_WET = 5.5
_PL_H2O_SAT = 6.0


def _check_fraction(name, value, *, allow_one=True):
    arr = np.asarray(value, dtype=float)
    upper_ok = arr <= 1 if allow_one else arr < 1
    if np.any(~np.isfinite(arr)) or np.any(arr < 0) or np.any(~upper_ok):
        bound = "[0, 1]" if allow_one else "[0, 1)"
        raise ModelDomainError(
            f"{name} must be a fraction in {bound}; got {np.ravel(arr)[:5].tolist()}. "
            "Give it as a fraction (e.g. 0.85), not in percent."
        )
    return arr


def _check_temperature(value):
    arr = np.asarray(value, dtype=float)
    if np.any(~np.isfinite(arr)) or np.any(arr <= -273.15):
        raise ModelDomainError(
            f"temperature must be a finite value in °C; got {np.ravel(arr)[:5].tolist()}. "
            "Give the melt temperature in °C."
        )
    return arr


def toplis_silica_activity_term(melt_wt: Mapping[str, object], h2o_wt=None):
    """Effective silica SiO2_A of Toplis (2005) eqs. 11-14 [mol%].

    Parameters
    ----------
    melt_wt : mapping of str to float or array_like
        Melt oxide contents [wt%].
    h2o_wt : float or array_like, optional
        Melt water [wt%]; default the ``"H2O"`` entry of ``melt_wt`` or 0.

    Returns
    -------
    numpy.ndarray
        SiO2_A [mol%].

    Notes
    -----
    Oxide mol% are computed on an anhydrous single-oxide basis with all iron
    as FeO. For hydrous melts eq. 14 adds 0.8 times the H2O mol%, taken here
    on the hydrous basis (our reading of the paper).
    """
    melt = dict(melt_wt)
    if h2o_wt is None:
        h2o_wt = melt.get("H2O", 0.0)
    melt.pop("H2O", None)
    x = melt_mole_fractions(melt)
    sio2 = 100.0 * x.get("SiO2", np.zeros(()))
    alk = 100.0 * (x.get("Na2O", 0.0) + x.get("K2O", 0.0))
    ratio = 100.0 / (100.0 - sio2)
    psi_low = (0.46 * ratio - 0.93) * alk + (-5.33 * ratio + 9.69)
    psi_high = (11.0 - 5.5 * ratio) * np.exp(-0.13 * alk)
    psi = np.where(sio2 <= 60.0, psi_low, psi_high)
    sio2_a = sio2 + psi * alk
    h2o = np.asarray(h2o_wt, dtype=float)
    if np.any(h2o < 0) or np.any(~np.isfinite(h2o)):
        raise ModelDomainError(
            f"melt H2O must be a finite value >= 0 wt%; got {np.ravel(h2o)[:5].tolist()}. "
            "Give the water content in wt% (0 for a dry melt)."
        )
    if np.any(h2o > 0):
        dry = _fe_star(melt)
        dry_moles = sum(np.asarray(v, dtype=float) / MOLAR_MASS[k] for k, v in dry.items())
        h2o_moles = h2o / MOLAR_MASS["H2O"]
        sio2_a = sio2_a + 0.8 * 100.0 * h2o_moles / (dry_moles + h2o_moles)
    return sio2_a


def _fe_star(melt):
    out = {k: v for k, v in melt.items() if k not in ("FeO", "Fe2O3", "FeOt")}
    out["FeO"] = (
        np.asarray(melt.get("FeO", 0.0), dtype=float)
        + np.asarray(melt.get("FeOt", 0.0), dtype=float)
        + np.asarray(melt.get("Fe2O3", 0.0), dtype=float)
        * (2 * MOLAR_MASS["FeO"] / MOLAR_MASS["Fe2O3"])
    )
    return out


def toplis_2005_kd(melt_wt, temperature_c, fo, pressure_bar=1.0, h2o_wt=None, *, warn=True):
    """Olivine-melt Fe2+-Mg exchange coefficient after Toplis (2005) [1].

    Parameters
    ----------
    melt_wt : mapping of str to float or array_like
        Melt oxide contents [wt%] (H2O optional, see ``h2o_wt``).
    temperature_c : float or array_like
        Temperature [°C].
    fo : float or array_like
        Olivine forsterite content X_Fo [fraction], in [0, 1].
    pressure_bar : float or array_like, optional
        Pressure [bar] (default 1).
    h2o_wt : float or array_like, optional
        Melt water [wt%] for eq. 14 (default: ``melt_wt["H2O"]`` or 0).
    warn : bool, optional
        Warn outside 1000-1600 °C (approximate calibration window).

    Returns
    -------
    float or numpy.ndarray
        :math:`K_D = (Fe^{2+}/Mg)_{ol}/(Fe^{2+}/Mg)_{melt}`, broadcast shape.

    References
    ----------
    .. [1] Toplis, M. J. (2005). Contrib. Mineral. Petrol. 149, 22-39, eqs. 10-14.
    """
    t_c = _check_temperature(temperature_c)
    x_fo = _check_fraction("olivine X_Fo", fo)
    if warn and np.any((t_c < _TOPLIS_T_RANGE_C[0]) | (t_c > _TOPLIS_T_RANGE_C[1])):
        warnings.warn(
            f"temperature {float(np.ravel(t_c)[0]):.0f} °C (or others given) lies outside the "
            f"approximate calibration window of Toplis (2005) "
            f"({_TOPLIS_T_RANGE_C[0]:.0f}-{_TOPLIS_T_RANGE_C[1]:.0f} °C); K_D is extrapolated.",
            CalibrationRangeWarning,
            stacklevel=2,
        )
    sio2_a = toplis_silica_activity_term(melt_wt, h2o_wt)
    inner = 0.036 * sio2_a - 0.22
    if np.any(inner <= 0):
        raise ModelDomainError(
            f"the melt is too silica-poor for Toplis (2005): 0.036 SiO2_A - 0.22 = "
            f"{float(np.min(inner)):.3g} <= 0. Use a constant K_D or the Blundy et al. (2020) law."
        )
    rt = GAS_CONSTANT * (t_c + 273.15)
    p = np.asarray(pressure_bar, dtype=float)
    ln_kd = (
        -6766.0 / rt
        - 7.34 / GAS_CONSTANT
        + np.log(inner)
        + 3000.0 * (1.0 - 2.0 * x_fo) / rt
        + 0.035 * (p - 1.0) / rt
    )
    out = np.exp(ln_kd)
    return out if out.ndim else float(out)


def blundy_2020_kd(temperature_c, fo, fe3_fraction=0.0, *, total_iron=False):
    """Olivine-melt Fe-Mg exchange coefficient after Blundy et al. (2020) eq. 8 [1].

    Parameters
    ----------
    temperature_c : float or array_like
        Temperature [°C].
    fo : float or array_like
        Olivine X_Fo [fraction].
    fe3_fraction : float or array_like, optional
        Melt Fe3+/FeT [fraction] (only used when ``total_iron`` is True).
    total_iron : bool, optional
        Return the total-iron coefficient :math:`K_D^{Fe_T-Mg}` of eq. 8
        (melt iron as FeT) instead of the ferrous one (default False; the
        forward model uses the ferrous coefficient with its own Fe3+/FeT).

    Returns
    -------
    float or numpy.ndarray
        Exchange coefficient, broadcast shape.

    References
    ----------
    .. [1] Blundy, J. et al. (2020). Contrib. Mineral. Petrol. 175:103, eq. 8.
    """
    t_k = _check_temperature(temperature_c) + 273.15
    x_fo = _check_fraction("olivine X_Fo", fo)
    kd = 0.3642 * np.exp(312.7 * (1.0 - 2.0 * x_fo) / t_k)
    if total_iron:
        kd = kd * (1.0 - _check_fraction("melt Fe3+/FeT", fe3_fraction, allow_one=False))
    return kd if np.ndim(kd) else float(kd)


@dataclass(frozen=True)
class LiquidusKd:
    """Exchange coefficient evaluated for a parent melt at its liquidus olivine.

    Parameters
    ----------
    kd : float or numpy.ndarray
        Ferrous Fe-Mg exchange coefficient to use as the constant K_D of the path.
    fo : float or numpy.ndarray
        Liquidus olivine Fo [mol%] consistent with ``kd``.
    temperature_c : float or numpy.ndarray
        Temperature used [°C].
    law : str
        Law name ("toplis_2005" or "blundy_2020").
    iterations : int
        Fixed-point iterations used.
    """

    kd: object
    fo: object
    temperature_c: object
    law: str
    iterations: int


def liquidus_olivine_kd(
    melt_wt: Mapping[str, object],
    law: str = "toplis_2005",
    *,
    temperature_c=None,
    fe3_fraction=0.10,
    melt_mg_number=None,
    pressure_bar=1.0,
    h2o_wt=None,
    tol=1e-12,
    max_iter=100,
) -> LiquidusKd:
    r"""Olivine Fe-Mg K_D of a parent melt at its liquidus olivine.

    Solves :math:`X_{Fo} = 1/(1 + K_D(X_{Fo})(1/Mg\# - 1))` by fixed-point
    iteration (vectorised; converges in a few steps because K_D depends only
    weakly on X_Fo).

    Parameters
    ----------
    melt_wt : mapping of str to float or array_like
        Parent (or reference) melt oxides [wt%], FeO as total iron.
    law : {"toplis_2005", "blundy_2020"}
        Composition-dependent law.
    temperature_c : float or array_like, optional
        Liquidus temperature [°C]; default from the melt MgO with the
        Helz & Thornber (1987) glass thermometer.
    fe3_fraction : float or array_like, optional
        Melt Fe3+/FeT [fraction] (default 0.10).
    melt_mg_number : float or array_like, optional
        Melt Mg/(Mg + Fe2+) [fraction]; default from ``melt_wt`` and
        ``fe3_fraction``. Give it when the parent ratio is a model parameter.
    pressure_bar : float, optional
        Pressure [bar] (Toplis only).
    h2o_wt : float, optional
        Melt water [wt%] (Toplis only).
    tol : float, optional
        Convergence tolerance on K_D.
    max_iter : int, optional
        Maximum number of iterations.

    Returns
    -------
    LiquidusKd
        ``kd`` (ferrous), liquidus ``fo`` [mol%], ``temperature_c`` used.

    Raises
    ------
    ModelDomainError
        Unknown law or inputs out of their domain.

    Warns
    -----
    ConvergenceWarning
        If the iteration did not converge within ``max_iter`` steps.

    References
    ----------
    .. [1] Toplis, M. J. (2005). Contrib. Mineral. Petrol. 149, 22-39.
    .. [2] Blundy, J. et al. (2020). Contrib. Mineral. Petrol. 175:103.
    .. [3] Helz, R. T. & Thornber, C. R. (1987). Bull. Volcanol. 49, 651-668.
    """
    if law not in OLIVINE_KD_LAWS:
        raise ModelDomainError(
            f"unknown olivine K_D law {law!r}; expected one of {list(OLIVINE_KD_LAWS)}. "
            "Pick one of these, or give a constant K_D."
        )
    fe3 = _check_fraction("melt Fe3+/FeT", fe3_fraction, allow_one=False)
    if melt_mg_number is None:
        fe = _fe_star(dict(melt_wt))["FeO"]
        mg = np.asarray(dict(melt_wt).get("MgO", 0.0), dtype=float)
        mg_mol = mg / MOLAR_MASS["MgO"]
        fe2_mol = fe * (1.0 - fe3) / MOLAR_MASS["FeO"]
        if np.any(mg_mol <= 0) or np.any(fe2_mol <= 0):
            raise ModelDomainError(
                "the melt needs MgO > 0 and FeO > 0 wt% to compute its Mg#; got "
                f"MgO={np.ravel(mg)[:3].tolist()}, FeO={np.ravel(fe)[:3].tolist()}. "
                "Give both, or pass melt_mg_number."
            )
        mg_number = mg_mol / (mg_mol + fe2_mol)
    else:
        mg_number = _check_fraction("melt Mg#", melt_mg_number)
        if np.any((mg_number <= 0) | (mg_number >= 1)):
            raise ModelDomainError(
                f"melt Mg# must lie strictly between 0 and 1; got "
                f"{np.ravel(mg_number)[:5].tolist()}. Give Mg/(Mg+Fe2+) as a fraction."
            )
    if temperature_c is None:
        temperature_c = helz_thornber_1987(dict(melt_wt).get("MgO", np.nan), warn=False)
    t_c = _check_temperature(temperature_c)

    if law == "toplis_2005":
        def kd_of(x_fo):
            return np.asarray(
                toplis_2005_kd(melt_wt, t_c, x_fo, pressure_bar, h2o_wt, warn=False), dtype=float
            )
    else:
        def kd_of(x_fo):
            return np.asarray(blundy_2020_kd(t_c, x_fo), dtype=float)

    ratio = 1.0 / mg_number - 1.0
    kd = np.broadcast_to(np.asarray(0.30), np.broadcast(ratio, t_c).shape).astype(float)
    iterations = 0
    converged = False
    for iterations in range(1, max_iter + 1):  # noqa: B007 - fixed-point loop on all sets at once
        x_fo = 1.0 / (1.0 + kd * ratio)
        new = kd_of(x_fo)
        delta = np.max(np.abs(new - kd))
        kd = new
        if delta < tol:
            converged = True
            break
    if not converged:
        warnings.warn(
            f"K_D iteration for the {law} law did not converge in {max_iter} steps "
            f"(last change {delta:.2g}); the value may be off by that much.",
            ConvergenceWarning,
            stacklevel=2,
        )
    fo = 100.0 / (1.0 + kd * ratio)

    def scalar(a):
        a = np.asarray(a, dtype=float)
        return float(a) if a.ndim == 0 else a

    return LiquidusKd(scalar(kd), scalar(fo), scalar(t_c), law, iterations)


def plagioclase_kd_from_water(h2o_wt, *, warn=True):
    r"""Plagioclase-melt Ca-Na exchange coefficient from melt water (rule of thumb).

    .. math:: K_D^{Ca-Na} = 1.7 + (5.5 - 1.7)\,\min(H_2O, 6)/6

    A linear interpolation (common practice, not a calibration) between
    about 1.7 for anhydrous melts and about 5.5 for water-saturated melts
    (about 6 wt% H2O) at 200 MPa, anchored on Sisson & Grove (1993) (values
    from memory). Above 6 wt% the value is held at 5.5.

    Parameters
    ----------
    h2o_wt : float or array_like
        Melt water content [wt%].
    warn : bool, optional
        Warn (CalibrationRangeWarning) above 6 wt% H2O.

    Returns
    -------
    float or numpy.ndarray
        :math:`K_D^{Ca-Na} = (Ca/Na)_{pl}/(Ca/Na)_{melt}` (molar).

    References
    ----------
    .. [1] Sisson, T. W. & Grove, T. L. (1993). Contrib. Mineral. Petrol. 113,
       143-166.
    """
    h2o = np.asarray(h2o_wt, dtype=float)
    if np.any(~np.isfinite(h2o)) or np.any(h2o < 0):
        raise ModelDomainError(
            f"melt H2O must be a finite value >= 0 wt%; got {np.ravel(h2o)[:5].tolist()}. "
            "Give the water content in wt% (0 for a dry melt)."
        )
    if warn and np.any(h2o > _PL_H2O_SAT):
        warnings.warn(
            f"melt H2O {float(np.max(h2o)):.3g} wt% exceeds {_PL_H2O_SAT:g} wt%, the water "
            f"saturation anchor of the plagioclase K_D rule of thumb; K_D is held at "
            f"{_PL_KD_WET:g}.",
            CalibrationRangeWarning,
            stacklevel=2,
        )
    kd = _PL_KD_DRY + (_PL_KD_WET - _PL_KD_DRY) * np.minimum(h2o, _PL_H2O_SAT) / _PL_H2O_SAT
    return kd if kd.ndim else float(kd)
