r"""Partitioning laws used by the forward crystallization models.

Two kinds of law live here:

* **Exchange laws** for the major-element record, one per analysed mineral
  (:data:`EXCHANGE_LAWS`): olivine Fe-Mg exchange and plagioclase Ca-Na
  exchange. Each fixes the exchanging cation pair, the number ``s`` of
  exchange cations per formula unit and the end-member molar masses.
* **Trace laws** (wt-based partition coefficients, crystal/melt):
  Ni in olivine (Hart & Davis 1978), Sr and Mg in plagioclase
  (Blundy & Wood 1991; Bindeman, Davis & Drake 1998), and a constant D.

Crystal-melt exchange
---------------------
With :math:`y` the melt ratio of the compatible cation
(:math:`y = \mathrm{Mg}/(\mathrm{Mg}+\mathrm{Fe^{2+}})` or
:math:`\mathrm{Ca}/(\mathrm{Ca}+\mathrm{Na})`, molar) the crystal in
exchange equilibrium has

.. math:: X = \frac{y}{y + K (1 - y)}

with :math:`K = K_D^{\mathrm{Fe-Mg}} = (\mathrm{Fe/Mg})_{ol}/(\mathrm{Fe/Mg})_{melt}`
for olivine (Roeder & Emslie 1970) and
:math:`K = 1/K_D^{\mathrm{Ca-Na}}` with
:math:`K_D^{\mathrm{Ca-Na}} = (\mathrm{Ca/Na})_{pl}/(\mathrm{Ca/Na})_{melt}`
for plagioclase (Sisson & Grove 1993 for the range of values).

Molar masses are computed from IUPAC standard atomic weights (CIAAW 2021;
conventional values for O, Mg and Si).

References
----------
.. [1] Roeder, P. L. & Emslie, R. F. (1970). Olivine-liquid equilibrium.
   Contrib. Mineral. Petrol. 29, 275-289.
.. [2] Sisson, T. W. & Grove, T. L. (1993). Experimental investigations of the
   role of H2O in calc-alkaline differentiation and subduction zone
   magmatism. Contrib. Mineral. Petrol. 113, 143-166.
.. [3] Hart, S. R. & Davis, K. E. (1978). Nickel partitioning between olivine
   and silicate melt. Earth Planet. Sci. Lett. 40, 203-219.
.. [4] Blundy, J. D. & Wood, B. J. (1991). Crystal-chemical controls on the
   partitioning of Sr and Ba between plagioclase feldspar, silicate melts,
   and hydrothermal solutions. Geochim. Cosmochim. Acta 55, 193-209.
.. [5] Bindeman, I. N., Davis, A. M. & Drake, M. J. (1998). Ion microprobe
   study of plagioclase-basalt partition experiments at natural
   concentration levels of trace elements. Geochim. Cosmochim. Acta 62,
   1175-1193.
"""

from __future__ import annotations

import math
import warnings
from collections.abc import Mapping
from dataclasses import dataclass

import numpy as np

from zoning.exceptions import CalibrationRangeWarning, ModelDomainError

__all__ = [
    "ATOMIC_WEIGHT",
    "OXIDE_MOLAR_MASS",
    "ExchangeLaw",
    "EXCHANGE_LAWS",
    "TraceLaw",
    "equilibrium_crystal",
    "d_ni_hart_davis_1978",
    "d_plagioclase_lattice",
    "PLAGIOCLASE_TRACE_COEFFICIENTS",
    "ASSEMBLAGE_D_DEFAULTS",
    "R_GAS",
    "make_trace_law",
]

#: Molar gas constant [J/(mol K)] (CODATA 2018, exact).
R_GAS = 8.314462618

#: IUPAC standard atomic weights [g/mol] (CIAAW 2021; conventional values for
#: O, Mg and Si, whose standard atomic weights are intervals).
ATOMIC_WEIGHT: dict[str, float] = {
    "O": 15.999,
    "Na": 22.98976928,
    "Mg": 24.305,
    "Al": 26.9815384,
    "Si": 28.085,
    "Ca": 40.078,
    "Fe": 55.845,
    "Ni": 58.6934,
    "Sr": 87.62,
}


def _mass(formula: Mapping[str, float]) -> float:
    return float(sum(ATOMIC_WEIGHT[el] * n for el, n in formula.items()))


#: Oxide molar masses [g/mol] from :data:`ATOMIC_WEIGHT`.
OXIDE_MOLAR_MASS: dict[str, float] = {
    "MgO": _mass({"Mg": 1, "O": 1}),
    "FeO": _mass({"Fe": 1, "O": 1}),
    "CaO": _mass({"Ca": 1, "O": 1}),
    "Na2O": _mass({"Na": 2, "O": 1}),
    "NiO": _mass({"Ni": 1, "O": 1}),
    "SrO": _mass({"Sr": 1, "O": 1}),
    "SiO2": _mass({"Si": 1, "O": 2}),
    "Al2O3": _mass({"Al": 2, "O": 3}),
}


@dataclass(frozen=True, slots=True)
class ExchangeLaw:
    """Stoichiometry of a binary exchange solid solution.

    Parameters
    ----------
    mineral : str
        Analysed mineral name.
    compatible_oxide, other_oxide : str
        Melt oxides of the compatible member A (Mg, Ca) and the other
        member B (Fe2+, Na) of the exchanging pair.
    cations_per_oxide_a, cations_per_oxide_b : int
        Exchange cations per oxide formula (MgO 1, FeO 1, CaO 1, Na2O 2).
    sites : int
        Exchange cations per crystal formula unit, ``s`` (olivine 2, plagioclase 1).
    molar_mass_a, molar_mass_b : float
        Molar masses of the end-members per formula unit [g/mol]
        (Mg2SiO4 / Fe2SiO4; CaAl2Si2O8 / NaAlSi3O8).
    record : str
        Name of the recorded end-member ("Fo" or "An").
    ratio_name : str
        Parameter name of the melt ratio ("melt_mg_number" / "melt_ca_number").
    kd_default : float
        Default exchange coefficient as the user gives it (olivine
        K_D(Fe-Mg); plagioclase K_D(Ca-Na)).
    kd_bounds : tuple of float
        Physical bounds of that coefficient used by fits.
    kd_inverted : bool
        True when ``K`` of the kernel is ``1 / kd`` (plagioclase).
    citation : str
        Key in :data:`zoning.references.REFERENCES` of the exchange
        formulation and its default coefficient.
    """

    mineral: str
    compatible_oxide: str
    other_oxide: str
    cations_per_oxide_a: int
    cations_per_oxide_b: int
    sites: int
    molar_mass_a: float
    molar_mass_b: float
    record: str
    ratio_name: str
    kd_default: float
    kd_bounds: tuple[float, float]
    kd_inverted: bool
    citation: str = ""

    def kernel_k(self, kd):
        """Return the kernel exchange coefficient ``K`` for user ``kd`` [1]."""
        kd = np.asarray(kd, dtype=float)
        return 1.0 / kd if self.kd_inverted else kd


#: Exchange laws by analysed mineral. Olivine K_D = 0.30 (Roeder & Emslie
#: 1970); plagioclase K_D(Ca-Na) = 2.0, within the anhydrous range of about
#: 1-2 quoted by Sisson & Grove (1993) (value from memory; give the value for
#: hydrous melts, up to about 5.5 at 200 MPa water saturation).
EXCHANGE_LAWS: dict[str, ExchangeLaw] = {
    "olivine": ExchangeLaw(
        mineral="olivine",
        compatible_oxide="MgO",
        other_oxide="FeO",
        cations_per_oxide_a=1,
        cations_per_oxide_b=1,
        sites=2,
        molar_mass_a=_mass({"Mg": 2, "Si": 1, "O": 4}),
        molar_mass_b=_mass({"Fe": 2, "Si": 1, "O": 4}),
        record="Fo",
        ratio_name="melt_mg_number",
        kd_default=0.30,
        kd_bounds=(0.15, 0.50),
        kd_inverted=False,
        citation="roeder_emslie_1970",
    ),
    "plagioclase": ExchangeLaw(
        mineral="plagioclase",
        compatible_oxide="CaO",
        other_oxide="Na2O",
        cations_per_oxide_a=1,
        cations_per_oxide_b=2,
        sites=1,
        molar_mass_a=_mass({"Ca": 1, "Al": 2, "Si": 2, "O": 8}),
        molar_mass_b=_mass({"Na": 1, "Al": 1, "Si": 3, "O": 8}),
        record="An",
        ratio_name="melt_ca_number",
        kd_default=2.0,
        kd_bounds=(0.5, 8.0),
        kd_inverted=True,
        citation="sisson_grove_1993",
    ),
}


def equilibrium_crystal(y, k):
    r"""Crystal mole fraction in exchange equilibrium with the melt [fraction].

    .. math:: X = \frac{y}{y + K(1 - y)}

    Parameters
    ----------
    y : float or ndarray
        Melt ratio of the compatible cation, A/(A+B) [fraction].
    k : float or ndarray
        Kernel exchange coefficient ``K = (B/A)_crystal / (B/A)_melt`` [1].

    Returns
    -------
    ndarray
        Crystal fraction of the A end-member [fraction].

    References
    ----------
    .. [1] Roeder, P. L. & Emslie, R. F. (1970). Contrib. Mineral. Petrol. 29, 275-289.
    """
    y = np.asarray(y, dtype=float)
    return y / (y + k * (1.0 - y))


# --------------------------------------------------------------------------
# Trace laws
# --------------------------------------------------------------------------

#: Melt MgO range [wt%] over which the Hart & Davis (1978) D_Ni law is used
#: without warning. The experiments covered roughly basaltic to picritic
#: melts; the range here is from memory and deliberately generous.
NI_MGO_RANGE_WT = (6.0, 20.0)


def d_ni_hart_davis_1978(melt_mgo_wt):
    r"""Olivine/melt Ni partition coefficient (weight ratio) [1].

    .. math:: D_{Ni} = \frac{124}{\mathrm{MgO_{melt}}} - 0.9

    Coefficients as recalled (from memory) from Hart & Davis (1978); the
    calibration range of melt MgO used for warnings is
    :data:`NI_MGO_RANGE_WT` (also from memory).

    Parameters
    ----------
    melt_mgo_wt : float or ndarray
        Melt MgO [wt%].

    Returns
    -------
    ndarray
        D_Ni (crystal/melt, wt basis) [1].

    References
    ----------
    .. [1] Hart, S. R. & Davis, K. E. (1978). Earth Planet. Sci. Lett. 40, 203-219.
    """
    return 124.0 / np.asarray(melt_mgo_wt, dtype=float) - 0.9


#: Coefficients (A, B) [J/mol] of RT ln D = A X_An + B for plagioclase.
#: Sr: Blundy & Wood (1991), A = -26 700, B = 26 800 (from memory).
#: Mg: Bindeman, Davis & Drake (1998), a = -26.1, b = -25.7 kJ/mol (from memory).
#: Calibrated for 0.4 < X_An < 0.8 (Bindeman et al. 1998).
PLAGIOCLASE_TRACE_COEFFICIENTS: dict[str, tuple[float, float]] = {
    "Sr": (-26700.0, 26800.0),
    "Mg": (-26100.0, -25700.0),
}

#: X_An range of the plagioclase trace laws (Bindeman et al. 1998).
PLAGIOCLASE_XAN_RANGE = (0.4, 0.8)


def d_plagioclase_lattice(x_an, temperature_c, a_j, b_j):
    r"""Plagioclase/melt partition coefficient from RT ln D = A X_An + B [1].

    .. math:: D = \exp\left(\frac{A X_{An} + B}{R T}\right)

    Parameters
    ----------
    x_an : float or ndarray
        Anorthite mole fraction of the plagioclase [fraction].
    temperature_c : float or ndarray
        Temperature [°C].
    a_j, b_j : float
        Coefficients A and B [J/mol].

    Returns
    -------
    ndarray
        D (crystal/melt, wt basis) [1].

    References
    ----------
    .. [1] Blundy, J. D. & Wood, B. J. (1991). Geochim. Cosmochim. Acta 55, 193-209.
    .. [2] Bindeman, I. N., Davis, A. M. & Drake, M. J. (1998). Geochim.
       Cosmochim. Acta 62, 1175-1193.
    """
    t_k = np.asarray(temperature_c, dtype=float) + 273.15
    return np.exp((a_j * np.asarray(x_an, dtype=float) + b_j) / (R_GAS * t_k))


@dataclass(frozen=True, slots=True)
class TraceLaw:
    """A trace element recorded by the analysed mineral.

    Parameters
    ----------
    element : str
        Element symbol or label ("Ni", "Sr", "Mg", or a user label).
    kind : {"ni_hart_davis", "plag_lattice", "constant"}
        Which partitioning law gives D.
    parameter : str
        Name of the initial-melt parameter ("melt0_ni_ppm", "melt0_mgo_wt", ...).
    crystal_key, melt_key : str
        Output keys of the crystal and melt concentrations.
    crystal_factor : float
        Multiplies D * c_melt to give the crystal output (ppm element -> wt%
        oxide = 1e-4 * M_oxide / M_element; 1 when units are kept).
    constant_d : float
        D for ``kind == "constant"`` (NaN otherwise).
    coefficients : tuple of float
        (A, B) [J/mol] for ``kind == "plag_lattice"``.
    default_c0, c0_bounds : float, tuple
        Default and bounds of the initial melt content, in the parameter unit.
    unit : str
        Unit of the initial melt content parameter.
    citations : tuple of str
        Keys in :data:`zoning.references.REFERENCES` of the law and its
        calibration range (empty for a user-given constant D).
    """

    element: str
    kind: str
    parameter: str
    crystal_key: str
    melt_key: str
    crystal_factor: float
    constant_d: float
    coefficients: tuple[float, float]
    default_c0: float
    c0_bounds: tuple[float, float]
    unit: str
    citations: tuple[str, ...] = ()

    def partition(self, melt_mgo_wt, crystal_x, temperature_c):
        """Return D along the path (wt basis) [1]."""
        if self.kind == "ni_hart_davis":
            return d_ni_hart_davis_1978(melt_mgo_wt)
        if self.kind == "plag_lattice":
            return d_plagioclase_lattice(crystal_x, temperature_c, *self.coefficients)
        return np.full(np.shape(crystal_x), self.constant_d)

    def check_range(self, melt_mgo_wt, crystal_x, stacklevel: int) -> None:
        """Warn once if the law is used outside its calibration range."""
        if self.kind == "ni_hart_davis":
            lo, hi = NI_MGO_RANGE_WT
            vmin, vmax = _finite_extremes(melt_mgo_wt)
            if vmin < lo or vmax > hi:
                warnings.warn(
                    f"D_Ni of Hart & Davis (1978) used at melt MgO "
                    f"{vmin:.3g}-{vmax:.3g} wt%, outside its calibration "
                    f"range of about {lo:g}-{hi:g} wt%; treat Ni results as extrapolated "
                    "or give a constant D (zoning simulate --trace-d Ni=D).",
                    CalibrationRangeWarning,
                    stacklevel=stacklevel,
                )
        elif self.kind == "plag_lattice":
            lo, hi = PLAGIOCLASE_XAN_RANGE
            vmin, vmax = _finite_extremes(crystal_x)
            if vmin < lo or vmax > hi:
                warnings.warn(
                    f"plagioclase D_{self.element} law (RT ln D = A X_An + B) used at X_An "
                    f"{vmin:.3g}-{vmax:.3g}, outside its calibration range "
                    f"{lo:g}-{hi:g} (Bindeman et al. 1998); treat {self.element} results as "
                    f"extrapolated or give a constant D with trace_d.",
                    CalibrationRangeWarning,
                    stacklevel=stacklevel,
                )


def _finite_extremes(values) -> tuple[float, float]:
    """Smallest and largest value ignoring NaN (NaN, NaN when there is none)."""
    v = np.asarray(values, dtype=float)
    if v.size == 0:
        return math.nan, math.nan
    return float(np.fmin.reduce(v, axis=None)), float(np.fmax.reduce(v, axis=None))


def make_trace_law(mineral: str, element: str, constant_d: float | None = None) -> TraceLaw:
    """Build the trace law for ``element`` recorded by ``mineral``.

    Parameters
    ----------
    mineral : {"olivine", "plagioclase"}
        Analysed mineral.
    element : str
        "Ni" (olivine), "Sr" or "Mg" (plagioclase) for the published laws, or
        any label together with ``constant_d``.
    constant_d : float, optional
        Constant crystal/melt partition coefficient (wt basis) [1].

    Returns
    -------
    TraceLaw
        The law with its parameter name and output keys.

    Raises
    ------
    ModelDomainError
        If no law is known for the element and no constant D is given.
    """
    if constant_d is not None:
        d = float(constant_d)
        if not np.isfinite(d) or d <= 0:
            raise ModelDomainError(
                f"constant partition coefficient for {element!r} must be a positive finite "
                f"number; got {constant_d!r}. Give e.g. --trace-d {element}=0.5."
            )
        key = element.lower()
        return TraceLaw(
            element=element,
            kind="constant",
            parameter=f"melt0_{key}_ppm",
            crystal_key=f"crystal_{key}_ppm",
            melt_key=f"melt_{key}_ppm",
            crystal_factor=1.0,
            constant_d=d,
            coefficients=(np.nan, np.nan),
            default_c0=100.0,
            c0_bounds=(1e-3, 1e5),
            unit="ppm",
        )
    if mineral == "olivine" and element == "Ni":
        return TraceLaw(
            element="Ni",
            kind="ni_hart_davis",
            parameter="melt0_ni_ppm",
            crystal_key="crystal_nio_wt",
            melt_key="melt_ni_ppm",
            crystal_factor=1e-4 * OXIDE_MOLAR_MASS["NiO"] / ATOMIC_WEIGHT["Ni"],
            constant_d=np.nan,
            coefficients=(np.nan, np.nan),
            default_c0=250.0,
            c0_bounds=(1.0, 3000.0),
            unit="ppm",
            citations=("hart_davis_1978",),
        )
    if mineral == "plagioclase" and element == "Sr":
        return TraceLaw(
            element="Sr",
            kind="plag_lattice",
            parameter="melt0_sr_ppm",
            crystal_key="crystal_sro_wt",
            melt_key="melt_sr_ppm",
            crystal_factor=1e-4 * OXIDE_MOLAR_MASS["SrO"] / ATOMIC_WEIGHT["Sr"],
            constant_d=np.nan,
            coefficients=PLAGIOCLASE_TRACE_COEFFICIENTS["Sr"],
            default_c0=300.0,
            c0_bounds=(1.0, 5000.0),
            unit="ppm",
            citations=("blundy_wood_1991", "bindeman_1998"),
        )
    if mineral == "plagioclase" and element == "Mg":
        return TraceLaw(
            element="Mg",
            kind="plag_lattice",
            parameter="melt0_mgo_wt",
            crystal_key="crystal_mgo_wt",
            melt_key="melt_mgo_wt",
            crystal_factor=1.0,
            constant_d=np.nan,
            coefficients=PLAGIOCLASE_TRACE_COEFFICIENTS["Mg"],
            default_c0=6.0,
            c0_bounds=(0.01, 25.0),
            unit="wt%",
            citations=("bindeman_1998",),
        )
    known = {"olivine": "'Ni'", "plagioclase": "'Sr', 'Mg'"}.get(mineral, "none")
    raise ModelDomainError(
        f"no partitioning law for trace {element!r} in {mineral}; known: {known}. "
        f"Give a constant partition coefficient with --trace-d {element}=D."
    )


#: Constant crystal/melt partition coefficients (oxide wt ratio) of the
#: minerals crystallizing *besides* the analysed one, for the tracked
#: components. Typical basaltic values, from memory (order of magnitude;
#: common practice); override with ``assemblage_d=``.
ASSEMBLAGE_D_DEFAULTS: dict[str, dict[str, float]] = {
    "olivine": {"MgO": 5.5, "FeO": 1.5, "CaO": 0.03, "Na2O": 0.01, "Ni": 10.0, "Sr": 0.01},
    "clinopyroxene": {"MgO": 2.0, "FeO": 0.7, "CaO": 1.8, "Na2O": 0.12, "Ni": 2.0, "Sr": 0.1},
    "orthopyroxene": {"MgO": 3.7, "FeO": 1.2, "CaO": 0.2, "Na2O": 0.02, "Ni": 4.0, "Sr": 0.01},
    "plagioclase": {"MgO": 0.03, "FeO": 0.05, "CaO": 1.3, "Na2O": 1.4, "Ni": 0.05, "Sr": 2.0},
    "spinel": {"MgO": 1.5, "FeO": 2.5, "CaO": 0.01, "Na2O": 0.01, "Ni": 10.0, "Sr": 0.01},
}
