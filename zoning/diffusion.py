r"""Diffusion inside a crystal after its growth, and the published diffusivities.

After the rim grew the crystal may sit in melt at temperature T for a time t.
Its zoning then relaxes by diffusion inside the crystal,

.. math:: \kappa\,\frac{\partial u}{\partial t} = \frac{1}{r^{d-1}}
          \frac{\partial}{\partial r}\left(r^{d-1}\,\kappa\,D\,
          \frac{\partial u}{\partial r}\right),
          \qquad c = \kappa u,

with :math:`d = 3` (sphere), 2 (cylinder, radial) or 1 (slab, across its
thickness), a symmetric centre and either a **fixed rim** (held at its last
grown composition, i.e. in equilibrium with the melt; the default) or a
**closed rim** (no flux; the crystal keeps its mass). :math:`\kappa = 1`
except for trace elements in plagioclase, where
:math:`\kappa = \exp(A X_{An}/RT)` carries the chemical-potential term of
Costa, Chakraborty & Dohmen (2003): with :math:`RT\ln D_i = A X_{An} + B` the
flux is :math:`J = -D(\partial c/\partial r - (A c/RT)\,\partial X_{An}/\partial r)`,
so a trace in equilibrium with one melt (flat :math:`u`) does not diffuse.

Diffusivities
-------------
The model is written in the diffusion length of a reference species at the
rim composition, :math:`L = \sqrt{D_{ref}(rim)\,t}` [µm]:

* **olivine**: Fe-Mg interdiffusion, whose diffusivity depends on
  composition as :math:`10^{3(X_{Fe} - 0.1)}` (Dohmen & Chakraborty 2007), so
  :math:`D(X) = D_{rim}\,10^{-3(X_{Fo} - X_{Fo,rim})}` (the equation for Fo is
  non-linear). Trace elements diffuse with :math:`\rho_i D(X)` (their own
  ratio :math:`\rho_i` to Fe-Mg, :data:`OLIVINE_DIFFUSIVITY_RATIOS`) in the
  evolving Fe-Mg field.
* **plagioclase**: CaAl-NaSi interdiffusion is practically frozen at magmatic
  time scales (Grove, Baker & Kinzler 1984), so An keeps its growth zoning.
  :math:`L` is the diffusion length of **Mg** at the rim An,
  :math:`D_{Mg} = 2.92\times10^{-4.1X_{An} - 3.1}\exp(-266\,\mathrm{kJ}/RT)`
  m²/s (Costa et al. 2003, from memory); Sr diffuses with
  :math:`D_{Sr}/D_{Mg}` from Giletti & Casserly (1994) in the fit of Zellmer
  et al. (1999), :math:`D_{Sr} = 2.92\times10^{-4.1X_{An} - 4.08}
  \exp(-276\,\mathrm{kJ}/RT)` m²/s (from memory). Both share the
  :math:`10^{-4.1X_{An}}` dependence, so every trace diffuses in the fixed
  field :math:`D_{rim}\,10^{-4.1(X_{An} - X_{An,rim})}` times its ratio.

Numerical method
----------------
Vertex-centred finite volumes on a radial grid graded towards the rim
(:func:`radial_grid`, spacing at the rim 0.4 times that at the centre), which
conserve :math:`\sum_i \kappa_i V_i u_i` exactly for a closed rim; variable-step
BDF2 in time (first step backward Euler), steps uniform in
:math:`(t/t_{end})^{1/p}` with :math:`p = 1.5` so that the early, steep
stage is resolved; the diffusivity at each face is taken at the composition
extrapolated to the new time level (linearly implicit, second order). All
parameter sets (and all species that share a matrix) go into one symmetric
positive-definite tridiagonal system per step, solved by LAPACK ``dptsv``
(no Python loop over parameter sets). The change of the profile is carried
to the spots by four-point Lagrange interpolation on the grid and added to
the exact growth profile there, so that :math:`L \to 0` gives the growth
profile continuously (and ``L = 0`` exactly, without a solve).

Accuracy at the default resolution (:data:`N_NODES`, :data:`N_STEPS`), against
a fine reference (method of lines, Radau, 1601 cells): about 0.01 mol% Fo or
less on steep rims (``benchmarks/forward.py`` prints the figure);
``tests/test_diffusion.py`` checks the Crank (1975) series solutions.

References
----------
.. [1] Crank, J. (1975). The Mathematics of Diffusion, 2nd ed. Oxford:
   Clarendon Press (sections 4.3, 5.3, 6.3).
.. [2] Dohmen, R. & Chakraborty, S. (2007). Fe-Mg diffusion in olivine II:
   point defect chemistry, change of diffusion mechanisms and a model for
   calculation of diffusion coefficients in natural olivine. Phys. Chem.
   Minerals 34, 409-430.
.. [3] Costa, F. & Chakraborty, S. (2004). Decadal time gaps between mafic
   intrusion and silicic eruption obtained from chemical zoning patterns in
   olivine. Earth Planet. Sci. Lett. 227, 517-530.
.. [4] Costa, F., Chakraborty, S. & Dohmen, R. (2003). Diffusion coupling
   between trace and major elements and a model for calculation of magma
   residence times using plagioclase. Geochim. Cosmochim. Acta 67, 2189-2200.
.. [5] Giletti, B. J. & Casserly, J. E. D. (1994). Strontium diffusion
   kinetics in plagioclase feldspars. Geochim. Cosmochim. Acta 58, 3785-3793.
.. [6] Zellmer, G. F., Blake, S., Vance, D., Hawkesworth, C. & Turner, S.
   (1999). Plagioclase residence times at two island arc volcanoes (Kameni
   Islands, Santorini, and Soufriere, St. Vincent) determined by Sr
   diffusion systematics. Contrib. Mineral. Petrol. 136, 345-357.
.. [7] Grove, T. L., Baker, M. B. & Kinzler, R. J. (1984). Coupled CaAl-NaSi
   diffusion in plagioclase feldspar: experiments and applications to
   cooling rate speedometry. Geochim. Cosmochim. Acta 48, 2113-2121.
.. [8] Petry, C., Chakraborty, S. & Palme, H. (2004). Experimental
   determination of Ni diffusion coefficients in olivine and their
   dependence on temperature, composition, oxygen fugacity, and
   crystallographic orientation. Geochim. Cosmochim. Acta 68, 4179-4188.
.. [9] Coogan, L. A., Hain, A., Stahl, S. & Chakraborty, S. (2005).
   Experimental determination of the diffusion coefficient for calcium in
   olivine between 900 °C and 1500 °C. Geochim. Cosmochim. Acta 69, 3683-3694.
.. [10] Chakraborty, S. (2010). Diffusion coefficients in olivine, wadsleyite
   and ringwoodite. Rev. Mineral. Geochem. 72, 603-639.
"""

from __future__ import annotations

import math
import warnings
from functools import lru_cache

import numpy as np
from scipy.linalg.lapack import dptsv

from zoning.exceptions import CalibrationRangeWarning, ModelDomainError
from zoning.partitioning import R_GAS
from zoning.redox import buffer_log_fo2

__all__ = [
    "CITATIONS",
    "DIMENSION",
    "OLIVINE_DIFFUSIVITY_RATIOS",
    "OLIVINE_FE_EXPONENT",
    "PLAGIOCLASE_AN_EXPONENT",
    "OLIVINE_ANISOTROPY",
    "MAX_DIFFUSION_LENGTH_UM",
    "N_NODES",
    "N_STEPS",
    "d_femg_olivine",
    "d_mg_plagioclase",
    "d_sr_plagioclase",
    "direction_weights",
    "diffusion_time_days",
    "radial_grid",
    "relax",
    "grid_interpolation",
]

#: Citation keys (zoning.references) of the laws and methods used here.
CITATIONS = ("crank_1975", "dohmen_chakraborty_2007", "costa_chakraborty_2004", "costa_2003",
             "giletti_casserly_1994", "zellmer_1999", "grove_1984", "petry_2004",
             "coogan_2005", "chakraborty_2010")

#: Spatial dimension of the diffusion problem of each growth geometry.
DIMENSION = {"sphere": 3, "cylinder": 2, "slab": 1}

#: Upper bound of the ``diffusion_length_um`` parameter [µm]. Beyond a few
#: crystal radii the crystal is homogenised and the data only give a lower
#: limit; 500 µm covers crystals up to millimetre size.
MAX_DIFFUSION_LENGTH_UM = 500.0

#: log10 D(Fe-Mg) rises by 3 per unit X_Fe (Dohmen & Chakraborty 2007).
OLIVINE_FE_EXPONENT = 3.0

#: log10 D(Mg), D(Sr) in plagioclase fall by 4.1 per unit X_An (Giletti &
#: Casserly 1994; Costa et al. 2003; from memory).
PLAGIOCLASE_AN_EXPONENT = 4.1

#: D[100]/D[001] and D[010]/D[001] of Fe-Mg in olivine: diffusion along c is
#: about six times faster than along a and b (Dohmen & Chakraborty 2007; from
#: memory).
OLIVINE_ANISOTROPY = (1.0 / 6.0, 1.0 / 6.0, 1.0)

#: Diffusivity of trace elements in olivine relative to Fe-Mg, D_i/D_FeMg, at
#: the same composition (defaults; override with ``diffusivity_ratio``).
#: All from memory, roughly valid at 1100-1300 °C (the activation energies
#: differ, so the ratios depend on temperature):
#: Ni close to Fe-Mg (Petry et al. 2004; Chakraborty 2010);
#: Mn close to Fe-Mg (Chakraborty 2010);
#: Ca about an order of magnitude slower (Coogan et al. 2005);
#: P practically immobile at magmatic time scales (common practice).
OLIVINE_DIFFUSIVITY_RATIOS: dict[str, float] = {"Ni": 1.0, "Mn": 1.0, "Ca": 0.1, "P": 0.0}

#: Default number of grid nodes on the crystal radius and of time steps.
N_NODES = 41
N_STEPS = 40
#: Grading of the grid towards the rim (spacing at the rim / at the centre
#: is (1 - beta)/(1 + beta)) and of the time steps.
GRID_BETA = 0.6
STEP_POWER = 1.5
#: Dimensionless times (D t / R^2) beyond this are treated as this: every
#: geometry is homogenised to round-off long before.
TAU_CAP = 100.0

#: fO2 below which Fe-Mg diffusion in olivine follows the PED mechanism
#: (Dohmen & Chakraborty 2007) [Pa].
_FO2_PED_PA = 1e-10
#: Temperature range of the Fe-Mg experiments behind the law (from memory) [°C].
_OLIVINE_T_RANGE_C = (700.0, 1300.0)

_LN10 = math.log(10.0)


# ------------------------------------------------------------ diffusivities
def direction_weights(direction=None) -> tuple[float, float, float]:
    r"""Weights of D[100], D[010], D[001] for a traverse direction [1].

    .. math:: D = D_{[100]}\cos^2\alpha + D_{[010]}\cos^2\beta + D_{[001]}\cos^2\gamma

    (Costa & Chakraborty 2004), with :math:`\alpha, \beta, \gamma` the angles
    between the traverse and the a, b and c axes.

    Parameters
    ----------
    direction : None, str or sequence of 3 floats, optional
        ``None`` (unknown: the average over random directions, weights 1/3
        each), an axis (``"a"``, ``"b"``, ``"c"`` or ``"[100]"``,
        ``"[010]"``, ``"[001]"``), or the angles (alpha, beta, gamma) [°] to
        a, b and c, e.g. from EBSD. The squared cosines must sum to 1 within
        0.05 (they are renormalised).

    Returns
    -------
    tuple of float
        Weights of D[100], D[010] and D[001], summing to 1.

    Raises
    ------
    ModelDomainError
        For an unknown axis or angles that are not a direction.
    """
    if direction is None:
        return (1.0 / 3.0, 1.0 / 3.0, 1.0 / 3.0)
    if isinstance(direction, str):
        axes = {"a": 0, "[100]": 0, "100": 0, "b": 1, "[010]": 1, "010": 1,
                "c": 2, "[001]": 2, "001": 2}
        key = direction.strip().lower()
        if key not in axes:
            raise ModelDomainError(
                f"unknown traverse direction {direction!r}; expected 'a', 'b', 'c' (or "
                f"'[100]', '[010]', '[001]') or three angles in degrees to a, b and c."
            )
        w = [0.0, 0.0, 0.0]
        w[axes[key]] = 1.0
        return tuple(w)
    try:
        angles = np.asarray(direction, dtype=float)
    except (TypeError, ValueError):
        angles = np.array([])
    if angles.shape != (3,) or not np.all(np.isfinite(angles)):
        raise ModelDomainError(
            f"traverse direction must be an axis name or three angles [°] to a, b and c; "
            f"got {direction!r}."
        )
    c2 = np.cos(np.radians(angles)) ** 2
    total = float(c2.sum())
    if abs(total - 1.0) > 0.05:
        raise ModelDomainError(
            f"the angles {list(angles)} [°] to a, b and c are not a direction: their squared "
            f"cosines sum to {total:.3f}, not 1. Give the three angles of one line."
        )
    return tuple(float(v) for v in c2 / total)


def d_femg_olivine(temperature_c, *, fo2_pa, pressure_pa=1e5, x_fe=0.1, direction="c"):
    r"""Fe-Mg interdiffusion coefficient of olivine [m²/s].

    Dohmen & Chakraborty (2007), for fO2 above 1e-10 Pa (TaMED mechanism):

    .. math:: \log_{10} D_{[001]} = -9.21 - \frac{201000 + (P - 10^5)\,7\times10^{-6}}
              {2.303\,R T} + \frac{1}{6}\log_{10}\frac{f_{O_2}}{10^{-7}}
              + 3(X_{Fe} - 0.1)

    and below it (PED mechanism)
    :math:`\log_{10} D_{[001]} = -8.91 - (220000 + (P - 10^5)\,7\times10^{-6})/(2.303RT)
    + 3(X_{Fe} - 0.1)`, with P and fO2 in Pa, T in K. Other directions by
    :func:`direction_weights` with D[100] = D[010] = D[001]/6. The
    coefficients are recalled from the paper (from memory; the form agrees
    with later compilations).

    Parameters
    ----------
    temperature_c : float or ndarray
        Temperature [°C].
    fo2_pa : float or ndarray
        Oxygen fugacity [Pa].
    pressure_pa : float or ndarray, optional
        Pressure [Pa], default 1e5.
    x_fe : float or ndarray, optional
        Molar Fe/(Fe + Mg) of the olivine [fraction], default 0.1 (Fo90).
    direction : see :func:`direction_weights`, optional
        Default ``"c"`` ([001]).

    Returns
    -------
    ndarray
        D [m²/s].

    References
    ----------
    .. [1] Dohmen, R. & Chakraborty, S. (2007). Phys. Chem. Minerals 34, 409-430.
    .. [2] Costa, F. & Chakraborty, S. (2004). Earth Planet. Sci. Lett. 227, 517-530.
    """
    t_k = np.asarray(temperature_c, dtype=float) + 273.15
    p = np.asarray(pressure_pa, dtype=float)
    fo2 = np.asarray(fo2_pa, dtype=float)
    x = np.asarray(x_fe, dtype=float)
    rt = 2.303 * R_GAS * t_k
    with np.errstate(divide="ignore", invalid="ignore"):
        tamed = -9.21 - (201000.0 + (p - 1e5) * 7e-6) / rt + np.log10(fo2 / 1e-7) / 6.0
    ped = -8.91 - (220000.0 + (p - 1e5) * 7e-6) / rt
    log_d = np.where(fo2 < _FO2_PED_PA, ped, tamed) + OLIVINE_FE_EXPONENT * (x - 0.1)
    w = direction_weights(direction)
    factor = sum(wi * ai for wi, ai in zip(w, OLIVINE_ANISOTROPY, strict=True))
    return factor * 10.0 ** log_d


def d_mg_plagioclase(temperature_c, x_an):
    r"""Mg diffusion coefficient of plagioclase [m²/s].

    .. math:: D_{Mg} = 2.92\times10^{-4.1 X_{An} - 3.1}\exp(-266\,000/RT)

    Costa, Chakraborty & Dohmen (2003); coefficients from memory (verify
    before quoting times; a later calibration, Van Orman et al. 2014 /
    Faak et al. 2013, gives different values).

    Parameters
    ----------
    temperature_c : float or ndarray
        Temperature [°C].
    x_an : float or ndarray
        Anorthite mole fraction [fraction].

    Returns
    -------
    ndarray
        D [m²/s].

    References
    ----------
    .. [1] Costa, F., Chakraborty, S. & Dohmen, R. (2003). Geochim. Cosmochim.
       Acta 67, 2189-2200.
    """
    t_k = np.asarray(temperature_c, dtype=float) + 273.15
    x = np.asarray(x_an, dtype=float)
    return 2.92 * 10.0 ** (-PLAGIOCLASE_AN_EXPONENT * x - 3.1) * np.exp(-266000.0 / (R_GAS * t_k))


def d_sr_plagioclase(temperature_c, x_an):
    r"""Sr diffusion coefficient of plagioclase [m²/s].

    .. math:: D_{Sr} = 2.92\times10^{-4.1 X_{An} - 4.08}\exp(-276\,000/RT)

    The experiments of Giletti & Casserly (1994) as fitted by Zellmer et al.
    (1999); coefficients from memory (verify before quoting times).

    Parameters
    ----------
    temperature_c : float or ndarray
        Temperature [°C].
    x_an : float or ndarray
        Anorthite mole fraction [fraction].

    Returns
    -------
    ndarray
        D [m²/s].

    References
    ----------
    .. [1] Giletti, B. J. & Casserly, J. E. D. (1994). Geochim. Cosmochim. Acta
       58, 3785-3793.
    .. [2] Zellmer, G. F. et al. (1999). Contrib. Mineral. Petrol. 136, 345-357.
    """
    t_k = np.asarray(temperature_c, dtype=float) + 273.15
    x = np.asarray(x_an, dtype=float)
    return 2.92 * 10.0 ** (-PLAGIOCLASE_AN_EXPONENT * x - 4.08) * np.exp(-276000.0 / (R_GAS * t_k))


def plagioclase_diffusivity_ratio(element: str, temperature_c: float) -> float:
    """D_element / D_Mg in plagioclase at a temperature [1] (NaN if unknown).

    Parameters
    ----------
    element : str
        "Mg" (1 by definition) or "Sr" (Giletti & Casserly 1994 over Costa
        et al. 2003, independent of X_An); NaN otherwise.
    temperature_c : float
        Temperature [°C]; NaN gives NaN for Sr.

    Returns
    -------
    float
        The ratio [1].
    """
    if element == "Mg":
        return 1.0
    if element == "Sr" and math.isfinite(temperature_c):
        return float(d_sr_plagioclase(temperature_c, 0.5) / d_mg_plagioclase(temperature_c, 0.5))
    return math.nan


def diffusion_time_days(length_um, temperature_c, *, mineral, fo2_pa=math.nan,
                        delta_qfm=math.nan, pressure_pa=1e5, direction=None,
                        x_fe=math.nan, x_an=math.nan):
    r"""Time at temperature that gives a diffusion length [days].

    .. math:: t = L^2 / D

    with D of the reference species at the rim composition: olivine Fe-Mg
    (:func:`d_femg_olivine`, direction-weighted), plagioclase Mg
    (:func:`d_mg_plagioclase`). NaN where the temperature (or, for olivine,
    the oxygen fugacity) is not known: report the length alone then.

    Parameters
    ----------
    length_um : float or array_like
        Diffusion length :math:`L = \sqrt{D t}` [µm], >= 0.
    temperature_c : float or array_like
        Temperature during diffusion [°C]; NaN or None when unknown.
    mineral : {"olivine", "plagioclase"}
        Host mineral.
    fo2_pa : float, optional
        Oxygen fugacity [Pa] (olivine).
    delta_qfm : float, optional
        Oxygen fugacity relative to the QFM buffer (Frost 1991) [log10
        units], used when ``fo2_pa`` is NaN (olivine).
    pressure_pa : float, optional
        Pressure [Pa], default 1e5 (olivine; 7 cm³/mol activation volume).
    direction : optional
        Crystallographic direction of the traverse (olivine), see
        :func:`direction_weights`. ``None`` takes the average over random
        directions; the time for a traverse along c is then 0.44 times, along
        a or b 2.67 times the value returned.
    x_fe : float or array_like
        Olivine molar Fe/(Fe+Mg) at the rim [fraction] (olivine, required).
    x_an : float or array_like
        Plagioclase X_An at the rim [fraction] (plagioclase, required).

    Returns
    -------
    float or ndarray
        Time [days]; NaN where it cannot be computed.

    Raises
    ------
    ModelDomainError
        For an unknown mineral, negative lengths or a composition outside [0, 1].

    References
    ----------
    .. [1] Dohmen, R. & Chakraborty, S. (2007). Phys. Chem. Minerals 34, 409-430.
    .. [2] Costa, F. & Chakraborty, S. (2004). Earth Planet. Sci. Lett. 227, 517-530.
    .. [3] Costa, F., Chakraborty, S. & Dohmen, R. (2003). Geochim. Cosmochim.
       Acta 67, 2189-2200.
    """
    length = np.asarray(length_um, dtype=float)
    if np.any(length < 0):
        raise ModelDomainError(
            f"diffusion length must be >= 0 µm; got {float(np.min(length))!r}."
        )
    t_c = np.asarray(np.nan if temperature_c is None else temperature_c, dtype=float)
    if mineral == "olivine":
        x = np.asarray(x_fe, dtype=float)
        fo2 = float(fo2_pa)
        if not math.isfinite(fo2) and math.isfinite(float(delta_qfm)):
            p_bar = float(pressure_pa) / 1e5
            log_bar = buffer_log_fo2("QFM", t_c, p_bar) + float(delta_qfm)
            fo2 = 10.0 ** (np.asarray(log_bar) + 5.0)  # bar -> Pa
        finite_t = t_c[np.isfinite(t_c)]
        if finite_t.size and (finite_t.min() < _OLIVINE_T_RANGE_C[0]
                              or finite_t.max() > _OLIVINE_T_RANGE_C[1]):
            warnings.warn(
                f"Fe-Mg diffusivity of Dohmen & Chakraborty (2007) used at "
                f"{finite_t.min():.0f}-{finite_t.max():.0f} °C, outside the experiments' "
                f"range of about {_OLIVINE_T_RANGE_C[0]:.0f}-{_OLIVINE_T_RANGE_C[1]:.0f} °C; "
                f"treat the time as extrapolated.",
                CalibrationRangeWarning, stacklevel=2,
            )
        d = d_femg_olivine(t_c, fo2_pa=fo2, pressure_pa=pressure_pa, x_fe=x,
                           direction=direction)
    elif mineral == "plagioclase":
        x = np.asarray(x_an, dtype=float)
        d = d_mg_plagioclase(t_c, x)
    else:
        raise ModelDomainError(
            f"unknown mineral {mineral!r} for a diffusion time; expected 'olivine' or "
            f"'plagioclase'."
        )
    if np.any((x < 0) | (x > 1)):
        raise ModelDomainError(
            f"rim composition for the diffusion time must be a mole fraction in [0, 1]; got "
            f"{np.asarray(x).ravel()[:3]}."
        )
    with np.errstate(invalid="ignore", divide="ignore"):
        days = (length * 1e-6) ** 2 / d / 86400.0
    return days if np.ndim(days) else float(days)


# ------------------------------------------------------------ the kernel
@lru_cache(maxsize=8)
def radial_grid(n_nodes: int = N_NODES, beta: float = GRID_BETA) -> np.ndarray:
    r"""Relative radii of the grid nodes, graded towards the rim [fraction].

    .. math:: \rho(u) = (1 + \beta) u - \beta u^2, \quad u = 0, 1/(N-1), \dots, 1

    Parameters
    ----------
    n_nodes : int
        Number of nodes N (>= 5).
    beta : float
        Grading in [0, 1): spacing at the rim over spacing at the centre is
        (1 - beta)/(1 + beta).

    Returns
    -------
    ndarray, shape (N,)
        Node radii from 0 (centre) to 1 (rim), read-only.
    """
    u = np.linspace(0.0, 1.0, n_nodes)
    rho = (1.0 + beta) * u - beta * u * u
    rho[-1] = 1.0
    rho.flags.writeable = False
    return rho


@lru_cache(maxsize=16)
def _finite_volumes(n_nodes: int, beta: float, dimension: int):
    """Control volumes (N,) and face conductances area/spacing (N-1,) of the grid."""
    rho = radial_grid(n_nodes, beta)
    faces = 0.5 * (rho[1:] + rho[:-1])
    edges = np.concatenate([[0.0], faces, [1.0]])
    vol = (edges[1:] ** dimension - edges[:-1] ** dimension) / dimension
    cond = faces ** (dimension - 1) / np.diff(rho)
    for a in (vol, cond):
        a.flags.writeable = False
    return vol, cond


def _inverse_grid(xi, beta):
    """Grid coordinate u in [0, 1] of relative radii xi (inverse of radial_grid)."""
    if beta == 0.0:
        return xi
    b1 = 1.0 + beta
    return (b1 - np.sqrt(np.maximum(b1 * b1 - 4.0 * beta * xi, 0.0))) / (2.0 * beta)


def grid_interpolation(xi, n_nodes: int = N_NODES, beta: float = GRID_BETA):
    """Four-point Lagrange interpolation from the radial grid to relative radii.

    Parameters
    ----------
    xi : ndarray, shape (k, n)
        Relative radii in [0, 1] (k = 1 when shared by every parameter set).
    n_nodes, beta : optional
        The grid (see :func:`radial_grid`).

    Returns
    -------
    index : ndarray of int, shape (k, n)
        First of the four nodes used at each point.
    weights : ndarray, shape (4, k, n)
        Lagrange weights of nodes index .. index + 3 (sum to 1).
    """
    rho = radial_grid(n_nodes, beta)
    xi = np.clip(xi, 0.0, 1.0)
    u = _inverse_grid(xi, beta) * (n_nodes - 1)
    j = np.clip(np.floor(u).astype(np.intp) - 1, 0, n_nodes - 4)
    nodes = [rho[j + q] for q in range(4)]
    diff = [xi - nq for nq in nodes]
    weights = np.empty((4,) + xi.shape)
    for q in range(4):
        num = np.ones(xi.shape)
        den = np.ones(xi.shape)
        for s in range(4):
            if s != q:
                num = num * diff[s]
                den = den * (nodes[q] - nodes[s])
        weights[q] = num / den
    return j, weights


def relax(initial, tau, *, dimension, rim="fixed", ratio=None, field=None,
          field_slope=0.0, self_driven=False, log_capacity=None,
          n_steps=N_STEPS, beta=GRID_BETA):
    r"""Diffuse profiles given on the radial grid for dimensionless times.

    Solves :math:`\kappa\,u_\tau = \rho^{1-d}(\rho^{d-1}\kappa\,\rho_s\,g\,u_\rho)_\rho`
    on :math:`0 \le \rho \le 1` for every species s and parameter set, with
    :math:`g = \exp(\text{field\_slope}\,(\phi - \phi_{rim}))` the
    composition dependence of the diffusivity (relative to the rim) and
    :math:`\phi` either ``field`` (fixed) or species 0 itself
    (``self_driven``, non-linear); see the module docstring for the scheme.

    Parameters
    ----------
    initial : ndarray, shape (S, m, N)
        Concentrations c on :func:`radial_grid` (N nodes) at time 0.
    tau : ndarray, shape (m, 1)
        Dimensionless time :math:`D_{rim} t / R^2` per parameter set [1], >= 0.
    dimension : {1, 2, 3}
        Slab, cylinder or sphere.
    rim : {"fixed", "closed"}
        Rim held at its initial value, or no flux through it.
    ratio : ndarray, shape (S, m, 1), optional
        Diffusivity of each species relative to the reference (default 1).
    field : ndarray, shape (m, N), optional
        Composition that sets the diffusivity when not ``self_driven``.
    field_slope : float
        d ln D / d(field) [1].
    self_driven : bool
        Species 0 sets the diffusivity of every species (olivine Fe-Mg).
    log_capacity : ndarray, shape (S, m, N), optional
        :math:`\ln\kappa` (chemical-potential term; default 0).
    n_steps : int
        Number of time steps.
    beta : float
        Grid grading.

    Returns
    -------
    ndarray, shape (S, m, N)
        Concentrations at time ``tau``.
    """
    c0 = np.asarray(initial, dtype=float)
    n_species, m, n = c0.shape
    vol, cond = _finite_volumes(n, beta, dimension)
    closed = rim == "closed"
    tau = np.minimum(np.asarray(tau, dtype=float).reshape(m, 1), TAU_CAP)
    # rows with nothing to do or NaN inputs are solved as flat zeros, then restored
    bad = ~np.isfinite(c0).all(axis=(0, 2))
    if field is not None:
        bad |= ~np.isfinite(field).all(axis=1)
    if log_capacity is not None:
        bad |= ~np.isfinite(log_capacity).all(axis=(0, 2))
    if bad.any():
        c0 = np.where(bad[None, :, None], 0.0, c0)
        if field is not None:
            field = np.where(bad[:, None], 0.0, field)
        if log_capacity is not None:
            log_capacity = np.where(bad[None, :, None], 0.0, log_capacity)
    # conductances without the composition factor: tau * ratio * area / spacing
    base = tau * cond  # (m, N-1)
    if ratio is not None:
        ratio = np.broadcast_to(np.asarray(ratio, dtype=float), (n_species, m, 1))
        shared = bool((ratio == ratio[:1]).all()) and log_capacity is None
        base = (ratio[:1] if shared else ratio) * base
    else:
        shared = log_capacity is None
        base = base[None]
    if log_capacity is not None:
        capacity = np.exp(log_capacity)
        u = c0 / capacity
        base = base * np.exp(0.5 * (log_capacity[..., 1:] + log_capacity[..., :-1]))
        cap_vol = capacity * vol
    else:
        capacity = None
        u = c0.copy()
        cap_vol = vol
    if field is not None and field_slope:
        phi = np.asarray(field, dtype=float)
        base = base * np.exp(field_slope * (0.5 * (phi[:, 1:] + phi[:, :-1]) - phi[:, -1:]))
    # base: (G, m, N-1) with G = 1 (one matrix shared by every species) or S.
    # The unknowns are the N nodes (closed rim) or the N-1 inside the held rim;
    # every buffer below is contiguous, so LAPACK works on them in place.
    nu = n if closed else n - 1
    rim_u = u[..., -1].copy()
    drive_rim = u[0, :, -1:]
    half_slope = 0.5 * field_slope
    nonlinear = self_driven and bool(field_slope)
    times = np.linspace(0.0, 1.0, n_steps + 1) ** STEP_POWER
    steps = np.diff(times)
    groups = base.shape[0]
    faces = np.zeros((groups, m, n + 1))  # faces[..., j] between nodes j-1 and j
    off = np.zeros((groups, m, nu))       # last column stays 0: systems uncoupled
    capv = np.ascontiguousarray(cap_vol[..., :nu]) if capacity is not None else vol[:nu]

    def assemble():
        fsum = faces[..., :nu] + faces[..., 1:nu + 1]
        np.negative(faces[..., 1:nu], out=off[..., :nu - 1])
        rim_flux = None if closed else faces[..., n - 1] * rim_u  # (S or G, m)
        return fsum, off.ravel()[:-1].copy(), rim_flux

    if not nonlinear:
        faces[..., 1:n] = base
        fsum, e_const, rim_flux = assemble()
    if nonlinear:
        pred_full = np.empty((m, n))
        pred_full[:, nu:] = u[0, :, nu:]
    u_prev = None
    u = np.ascontiguousarray(u[..., :nu])
    for k, dt in enumerate(steps):
        if k == 0:
            a0 = 1.0
        else:
            om = dt / steps[k - 1]
            a0, a1, a2 = (1 + 2 * om) / (1 + om), -(1 + om), om * om / (1 + om)
        if nonlinear:
            # diffusivity at the composition extrapolated to the new time level
            if k == 0:
                pred_full[:, :nu] = u[0]
            else:
                np.multiply(u[0] - u_prev[0], om, out=pred_full[:, :nu])
                pred_full[:, :nu] += u[0]
            mob = np.exp(half_slope * (pred_full[:, 1:] + pred_full[:, :-1])
                         - field_slope * drive_rim)
            np.multiply(base, mob, out=faces[..., 1:n])
            fsum, e_step, rim_flux = assemble()
        else:
            e_step = e_const.copy()
        diag = (a0 / dt) * capv + fsum
        if k == 0:
            rhs = capv * (1.0 / dt) * u
        else:
            rhs = (a1 * u + a2 * u_prev) * (capv * (-1.0 / dt))
        if rim_flux is not None:
            rhs[..., -1] += rim_flux
        if diag.shape != (groups, m, nu):
            diag = np.ascontiguousarray(np.broadcast_to(diag, (groups, m, nu)))
        b = rhs.reshape(n_species, -1).T if groups == 1 else rhs.reshape(-1, 1)
        _, _, x, info = dptsv(diag.ravel(), e_step, b, overwrite_d=1, overwrite_e=1,
                              overwrite_b=1)
        if info != 0:  # pragma: no cover - the matrix is an M-matrix
            raise FloatingPointError(f"tridiagonal solve failed (LAPACK info {info})")
        u_prev, u = u, (x.T if groups == 1 else x).reshape(n_species, m, nu)
    if not closed:
        u = np.concatenate([u, rim_u[..., None]], axis=-1)
    out = u * capacity if capacity is not None else u
    if bad.any():
        out[:, bad, :] = np.nan
    return out
