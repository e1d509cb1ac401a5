r"""Melt ferric/ferrous ratio from oxygen fugacity, and oxygen buffers.

Kress & Carmichael (1991), eq. 7:

.. math::

    \ln\frac{X_{Fe_2O_3}}{X_{FeO}} = a\ln f_{O_2} + \frac{b}{T} + c
    + \sum_i d_i X_i
    + e\left[1 - \frac{T_0}{T} - \ln\frac{T}{T_0}\right]
    + f\frac{P}{T} + g\frac{(T - T_0)P}{T} + h\frac{P^2}{T}

with :math:`a = 0.196`, :math:`b = 11492` K, :math:`c = -6.675`,
:math:`d_{Al_2O_3} = -2.243`, :math:`d_{FeO^*} = -1.828` (negative),
:math:`d_{CaO} = 3.201`, :math:`d_{Na_2O} = 5.854`, :math:`d_{K_2O} = 6.215`,
:math:`e = -3.36`, :math:`f = -7.01\times10^{-7}` K/Pa,
:math:`g = -1.54\times10^{-10}` Pa\ :sup:`-1`, :math:`h = 3.85\times10^{-17}`
K/Pa\ :sup:`2`, :math:`T_0 = 1673` K. :math:`X_i` are anhydrous oxide mole
fractions with all iron as FeO*, :math:`f_{O_2}` in bar (natural log), T in
K, P in Pa. Then :math:`Fe^{3+}/Fe_T = 2R/(1 + 2R)` with
:math:`R = X_{Fe_2O_3}/X_{FeO}`.

Assumptions: silicate melt of basaltic to rhyolitic composition at 1-atm to
crustal pressures (the calibration spans about 1200-1630 °C at 1 bar and
up to about 3 GPa in the pressure terms, from memory); water is ignored
(anhydrous basis); the oxygen fugacity is imposed externally (buffer + offset).

Oxygen buffers (log10 fO2, fO2 in bar, T in K, P in bar), Frost (1991),
coefficients from memory:

========  ==========  =======  ===========
buffer    A           B        C
========  ==========  =======  ===========
QFM       -25096.3    8.735    0.110
NNO       -24930      9.36     0.046
IW        -27489      6.702    0.055
========  ==========  =======  ===========

:math:`\log_{10} f_{O_2} = A/T + B + C(P - 1)/T` (QFM: beta-quartz field,
above 573 °C).

References
----------
.. [1] Kress, V. C. & Carmichael, I. S. E. (1991). The compressibility of
   silicate liquids containing Fe2O3 and the effect of composition,
   temperature, oxygen fugacity and pressure on their redox states.
   Contributions to Mineralogy and Petrology 108, 82-92.
.. [2] Frost, B. R. (1991). Introduction to oxygen fugacity and its
   petrologic importance. Reviews in Mineralogy 25, 1-9.
"""

from __future__ import annotations

import warnings
from collections.abc import Mapping

import numpy as np

from zoning.exceptions import CalibrationRangeWarning, ModelDomainError
from zoning.oxides import ATOMIC_WEIGHTS, CANONICAL_OXIDES, molar_mass

__all__ = [
    "MOLAR_MASS",
    "BUFFERS",
    "buffer_log_fo2",
    "melt_mole_fractions",
    "fe3_fraction_kress_carmichael",
]

#: Citation keys (:mod:`zoning.references`) of the laws of this module, by function.
CITATIONS = {"fe3_fraction_kress_carmichael": "kress_carmichael_1991",
             "buffer_log_fo2": "frost_1991"}

#: Molar masses of oxides [g/mol]: the package oxide table (IUPAC/CIAAW 2021
#: standard atomic weights) plus H2O (H 1.008, IUPAC conventional value).
MOLAR_MASS = {name: molar_mass(name) for name in CANONICAL_OXIDES}
MOLAR_MASS["H2O"] = 2 * 1.008 + ATOMIC_WEIGHTS["O"]

#: Oxides accepted in a melt analysis (``FeOt`` = total iron as FeO).
_MELT_KEYS = (*MOLAR_MASS, "FeOt")

#: Frost (1991) buffer coefficients (A, B, C), from memory.
BUFFERS = {
    "QFM": (-25096.3, 8.735, 0.110),
    "NNO": (-24930.0, 9.36, 0.046),
    "IW": (-27489.0, 6.702, 0.055),
}

# Kress & Carmichael (1991) eq. 7 coefficients.
_KC_A = 0.196
_KC_B = 11492.0
_KC_C = -6.675
_KC_D = {"Al2O3": -2.243, "FeO": -1.828, "CaO": 3.201, "Na2O": 5.854, "K2O": 6.215}
_KC_E = -3.36
_KC_F = -7.01e-7
_KC_G = -1.54e-10
_KC_H = 3.85e-17
_KC_T0 = 1673.0

#: Approximate calibration window of Kress & Carmichael (1991) [°C] (from memory).
_KC_T_RANGE_C = (1000.0, 1650.0)


def buffer_log_fo2(buffer: str, temperature_c, pressure_bar=1.0):
    """Oxygen fugacity of a solid buffer, log10 fO2 [log10 bar].

    Parameters
    ----------
    buffer : {"QFM", "NNO", "IW"}
        Buffer name (Frost 1991; "FMQ" is accepted for "QFM").
    temperature_c : float or array_like
        Temperature [°C].
    pressure_bar : float or array_like, optional
        Pressure [bar] (default 1).

    Returns
    -------
    float or numpy.ndarray
        log10 fO2 [log10 bar], broadcast shape of the inputs.

    References
    ----------
    .. [1] Frost, B. R. (1991). Reviews in Mineralogy 25, 1-9.
    """
    key = "QFM" if buffer.upper() == "FMQ" else buffer.upper()
    if key not in BUFFERS:
        raise ModelDomainError(
            f"unknown oxygen buffer {buffer!r}; expected one of {sorted(BUFFERS)}. "
            "Give the buffer name, or pass log_fo2 directly."
        )
    a, b, c = BUFFERS[key]
    t_k = np.asarray(temperature_c, dtype=float) + 273.15
    p = np.asarray(pressure_bar, dtype=float)
    out = a / t_k + b + c * (p - 1.0) / t_k
    return out if out.ndim else float(out)


def melt_mole_fractions(melt_wt: Mapping[str, object], *, anhydrous: bool = True) -> dict:
    """Oxide mole fractions of a melt with all iron as FeO*.

    Parameters
    ----------
    melt_wt : mapping of str to float or array_like
        Oxide contents [wt%]; keys among SiO2, TiO2, Al2O3, Cr2O3, FeO,
        Fe2O3, FeOt (total iron as FeO), MnO, MgO, NiO, CaO, Na2O, K2O,
        P2O5, H2O. Values broadcast against each other.
    anhydrous : bool, optional
        Leave H2O out of the normalisation (default True).

    Returns
    -------
    dict of str to numpy.ndarray
        Mole fractions (sum 1) keyed by oxide, with ``"FeO"`` holding total
        iron as FeO* (FeO + 0.8998 Fe2O3, or FeOt) and no ``"Fe2O3"`` key.

    Raises
    ------
    ModelDomainError
        Unknown oxide name, negative or non-finite content, or no oxide given.
    """
    unknown = sorted(set(melt_wt) - set(_MELT_KEYS))
    if unknown:
        raise ModelDomainError(
            f"unknown oxide name(s) {unknown} in the melt composition; expected names among "
            f"{list(_MELT_KEYS)} (wt%). Rename them (e.g. 'FeO' for total iron as FeO)."
        )
    values = {}
    for key, value in melt_wt.items():
        arr = np.asarray(value, dtype=float)
        if np.any(~np.isfinite(arr)) or np.any(arr < 0):
            raise ModelDomainError(
                f"melt {key} must be a finite value >= 0 wt%; got {np.ravel(arr)[:5].tolist()}. "
                "Give every oxide of the melt in wt% (0 when absent)."
            )
        values[key] = arr
    if "FeOt" in values and ("FeO" in values or "Fe2O3" in values):
        raise ModelDomainError(
            "the melt composition gives both FeOt and FeO/Fe2O3; expected total iron either "
            "as FeOt or as FeO (+ Fe2O3). Give one of them."
        )
    feo_star = values.pop("FeOt", 0.0)
    feo_star = feo_star + values.pop("FeO", 0.0)
    feo_star = feo_star + values.pop("Fe2O3", 0.0) * (2 * MOLAR_MASS["FeO"] / MOLAR_MASS["Fe2O3"])
    values["FeO"] = np.asarray(feo_star, dtype=float)
    if anhydrous:
        values.pop("H2O", None)
    moles = {k: v / MOLAR_MASS[k] for k, v in values.items()}
    total = sum(moles.values())
    if np.any(np.asarray(total) <= 0):
        raise ModelDomainError(
            "the melt composition sums to zero moles; expected oxide contents in wt%. "
            "Give at least SiO2, FeO and MgO."
        )
    return {k: np.asarray(v / total, dtype=float) for k, v in moles.items()}


def fe3_fraction_kress_carmichael(
    melt_wt: Mapping[str, object],
    temperature_c,
    delta_qfm=0.0,
    pressure_bar=1.0,
    *,
    log_fo2=None,
):
    """Melt Fe3+/FeT from oxygen fugacity after Kress & Carmichael (1991) [fraction].

    Parameters
    ----------
    melt_wt : mapping of str to float or array_like
        Melt oxide contents [wt%] (see :func:`melt_mole_fractions`); only
        total iron matters, any FeO/Fe2O3 split is recombined as FeO*.
    temperature_c : float or array_like
        Melt temperature [°C].
    delta_qfm : float or array_like, optional
        Oxygen fugacity relative to the QFM buffer [log10 units] (default 0).
    pressure_bar : float or array_like, optional
        Pressure [bar] (default 1).
    log_fo2 : float or array_like, optional
        Absolute log10 fO2 [log10 bar]; overrides ``delta_qfm`` when given
        (use :func:`buffer_log_fo2` for other buffers, e.g. NNO + 1).

    Returns
    -------
    float or numpy.ndarray
        Fe3+/(Fe2+ + Fe3+) of the melt (molar), broadcast shape of the inputs.

    Notes
    -----
    Equation 7 of Kress & Carmichael (1991), with the FeO* coefficient
    :math:`d_{FeO^*} = -1.828`. Warns with ``CalibrationRangeWarning`` below
    1000 °C or above 1650 °C (approximate calibration window, from memory).

    References
    ----------
    .. [1] Kress, V. C. & Carmichael, I. S. E. (1991). Contrib. Mineral.
       Petrol. 108, 82-92.
    .. [2] Frost, B. R. (1991). Reviews in Mineralogy 25, 1-9 (QFM buffer).
    """
    t_c = np.asarray(temperature_c, dtype=float)
    if np.any(~np.isfinite(t_c)) or np.any(t_c <= -273.15):
        raise ModelDomainError(
            f"temperature must be a finite value in °C above absolute zero; got "
            f"{np.ravel(t_c)[:5].tolist()}. Give the melt temperature in °C."
        )
    p_bar = np.asarray(pressure_bar, dtype=float)
    if np.any(~np.isfinite(p_bar)) or np.any(p_bar <= 0):
        raise ModelDomainError(
            f"pressure must be a finite value > 0 bar; got {np.ravel(p_bar)[:5].tolist()}. "
            "Give the pressure in bar (1 bar = 0.1 MPa)."
        )
    lo, hi = _KC_T_RANGE_C
    if np.any((t_c < lo) | (t_c > hi)):
        warnings.warn(
            f"temperature {float(np.ravel(t_c)[0]):.0f} °C (or others given) lies outside the "
            f"approximate calibration range of Kress & Carmichael (1991) ({lo:.0f}-{hi:.0f} °C); "
            "the Fe3+/FeT value is an extrapolation.",
            CalibrationRangeWarning,
            stacklevel=2,
        )
    if log_fo2 is None:
        log_fo2 = buffer_log_fo2("QFM", t_c, p_bar) + np.asarray(delta_qfm, dtype=float)
    log_fo2 = np.asarray(log_fo2, dtype=float)
    x = melt_mole_fractions(melt_wt)
    t_k = t_c + 273.15
    p_pa = p_bar * 1e5
    ln_r = (
        _KC_A * np.log(10.0) * log_fo2
        + _KC_B / t_k
        + _KC_C
        + sum(d * x.get(k, 0.0) for k, d in _KC_D.items())
        + _KC_E * (1.0 - _KC_T0 / t_k - np.log(t_k / _KC_T0))
        + _KC_F * p_pa / t_k
        + _KC_G * (t_k - _KC_T0) * p_pa / t_k
        + _KC_H * p_pa**2 / t_k
    )
    ratio = np.exp(ln_r)
    out = 2.0 * ratio / (1.0 + 2.0 * ratio)
    return out if np.ndim(out) else float(out)
