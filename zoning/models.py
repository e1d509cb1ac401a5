r"""Forward crystallization models: what a zoned crystal records, core to rim.

A zoned crystal records, layer by layer, the crystal in equilibrium with the
melt at the moment each layer grew. The models here turn a parent melt, the
crystallized fraction F and the retention r into that record.

Retention r: of each crystal increment a share r stays in exchange
equilibrium with the melt (re-equilibrates as the melt evolves) and a share
1 - r is isolated at the composition it grew with. r = 0 is fractional
(Rayleigh 1896), r = 1 batch (equilibrium; Shaw 1970) crystallization. For a
constant partition coefficient the model reduces to the back-diffusion
equation of Brody & Flemings (1966) with r = 2 alpha.

:class:`CrystallizationModel` follows the exchanging major-element pair
(olivine Fe-Mg, plagioclase Ca-Na) and any trace elements; see
:mod:`zoning.kernels` for the derivation and the numerical method.
:class:`ConstantPartitionModel` is the closed form for one element with a
constant partition coefficient.

Assumptions that can mislead (state them when reporting):

* the parent melt is given by its exchanging-pair ratio; the less compatible
  member (FeO, Na2O) comes from the reference melt analysis in 100 g of
  melt, and everything else in the melt is inert mass;
* olivine: Fe3+ (``fe3_fraction`` of total Fe) does not enter olivine and
  stays in the melt; the default 0.10 is a typical value for basalts near the
  QFM buffer (compute it with :mod:`zoning.redox` for a given fO2);
* the exchange coefficient is constant along the path (pass a different
  ``kd`` to explore its effect; K_D(Fe-Mg) = 0.30 +/- 0.03);
* every crystal nucleated at ``f_core`` and grew self-similarly
  (:mod:`zoning.geometry`); the section passes through the core unless
  ``section_offset_um`` is given;
* no diffusion after growth: diffusive relaxation of the profile makes the
  record look more "equilibrium-like" (higher apparent r) than the growth was.

References
----------
.. [1] Rayleigh, Lord (1896). Phil. Mag. 42, 493-498.
.. [2] Shaw, D. M. (1970). Geochim. Cosmochim. Acta 34, 237-243.
.. [3] Brody, H. D. & Flemings, M. C. (1966). Trans. Metall. Soc. AIME 236, 615-624.
.. [4] Roeder, P. L. & Emslie, R. F. (1970). Contrib. Mineral. Petrol. 29, 275-289.
.. [5] Helz, R. T. & Thornber, C. R. (1987). Bull. Volcanol. 49, 651-668.
"""

from __future__ import annotations

import math
import warnings
from collections.abc import Mapping, Sequence
from dataclasses import dataclass

import numpy as np

from zoning import geometry as _geometry
from zoning import kernels as _kernels
from zoning.exceptions import CalibrationRangeWarning, ModelDomainError
from zoning.partitioning import (
    ASSEMBLAGE_D_DEFAULTS,
    ATOMIC_WEIGHT,
    EXCHANGE_LAWS,
    OXIDE_MOLAR_MASS,
    TraceLaw,
    equilibrium_crystal,
    make_trace_law,
)

__all__ = [
    "ParameterSpec",
    "CrystallizationModel",
    "ConstantPartitionModel",
    "MODELS",
    "DEFAULT_BEAM_UM",
]

#: Default width of the beam/interaction volume, full width at half maximum,
#: used when a convolution is asked for without a value [µm]. Typical
#: effective lateral resolution of a focused beam in silicates (1-3 µm).
DEFAULT_BEAM_UM = 2.0

#: Fe2O3 -> FeO conversion factor (2 M_FeO / M_Fe2O3).
_FEO_PER_FE2O3 = 2 * OXIDE_MOLAR_MASS["FeO"] / (2 * OXIDE_MOLAR_MASS["FeO"] + ATOMIC_WEIGHT["O"])


@dataclass(frozen=True, slots=True)
class ParameterSpec:
    """A named, bounded model parameter.

    Parameters
    ----------
    name : str
        Parameter name used as keyword argument.
    unit : str
        Unit ("1" for dimensionless fractions).
    lower, upper : float
        Physical bounds, inclusive.
    default : float
        Value used when the parameter is not given.
    description : str
        One-line meaning.
    """

    name: str
    unit: str
    lower: float
    upper: float
    default: float
    description: str


class _ModelBase:
    """Shared machinery: parameter handling, geometry mapping, beam averaging."""

    parameters: tuple[ParameterSpec, ...]
    _crystal_keys: tuple[str, ...]

    def __init__(self, geometry: str, beam_um: float, section_offset_um: float):
        if geometry not in _geometry.GEOMETRY_EXPONENT:
            raise ModelDomainError(
                f"unknown growth geometry {geometry!r}; expected one of "
                f"{sorted(_geometry.GEOMETRY_EXPONENT)}. Use 'sphere' for equant crystals."
            )
        self.geometry = geometry
        self.beam_um = _check_scalar("beam_um", beam_um, 0.0, 1e3, "[µm]")
        self.section_offset_um = _check_scalar(
            "section_offset_um", section_offset_um, 0.0, 1e5, "[µm]"
        )

    # ------------------------------------------------------------------ params
    @property
    def parameter_names(self) -> tuple[str, ...]:
        """Parameter names in their fixed order."""
        return tuple(p.name for p in self.parameters)

    def defaults(self) -> dict[str, float]:
        """Return the default value of every parameter."""
        return {p.name: p.default for p in self.parameters}

    def _params(self, params: Mapping[str, object]) -> tuple[dict[str, np.ndarray], int, bool]:
        """Validate keyword parameters; return (m, 1) arrays, m, and scalar flag."""
        specs = self.parameters
        names, lower, upper = self._spec_table
        if not params.keys() <= names.keys():
            unknown = sorted(set(params).difference(names))
            raise ModelDomainError(
                f"unknown parameter(s) {unknown} for {type(self).__name__}; expected names "
                f"from {list(names)}."
            )
        m = None
        arrays = {}
        for name, value in params.items():
            arr = np.asarray(value, dtype=float)
            if arr.ndim:
                if arr.ndim > 1:
                    raise ModelDomainError(
                        f"parameter {name!r} must be a float or a 1-D array of parameter "
                        f"sets; got an array of shape {arr.shape}."
                    )
                if m is None:
                    m = arr.shape[0]
                elif arr.shape[0] != m:
                    raise ModelDomainError(
                        f"parameter {name!r} has {arr.shape[0]} values but other "
                        f"parameters have {m}; give every array parameter the same length."
                    )
            arrays[name] = arr
        scalar = m is None
        m = 1 if m is None else m
        table = np.empty((len(specs), m, 1))
        for name, i in names.items():
            table[i] = arrays[name][..., None] if name in arrays else specs[i].default
        bad = ~((table >= lower) & (table <= upper))  # also catches NaN
        if bad.any():
            i = int(np.argmax(bad.any(axis=(1, 2))))
            spec = specs[i]
            got = float(table[i][bad[i]][0])
            raise ModelDomainError(
                f"parameter {spec.name!r} = {got!r} is outside its allowed range "
                f"[{spec.lower:g}, {spec.upper:g}] {spec.unit}; give a value inside it."
            )
        return dict(zip(names, table, strict=True)), m, scalar

    @property
    def _spec_table(self) -> tuple[dict[str, int], np.ndarray, np.ndarray]:
        """Parameter positions by name and the (p, 1, 1) lower and upper bounds."""
        cached = getattr(self, "_spec_cache", None)
        if cached is None or cached[0] is not self.parameters:
            specs = self.parameters
            names = {sp.name: i for i, sp in enumerate(specs)}
            lower = np.array([sp.lower for sp in specs])[:, None, None]
            upper = np.array([sp.upper for sp in specs])[:, None, None]
            cached = (specs, (names, lower, upper))
            self._spec_cache = cached
        return cached[1]

    # ------------------------------------------------------------- evaluation
    def path(self, f, *, strict: bool = True, **params) -> dict[str, np.ndarray]:
        """Evaluate the model at crystallized fractions.

        Parameters
        ----------
        f : array_like, shape (n,) or (m, n)
            Crystallized mass fraction F [fraction], in [0, 1). A 2-D array
            gives each parameter set its own fractions (row i with set i;
            one row is shared by every set).
        strict : bool, optional
            If True (default) a fraction the model cannot reach (for example
            more olivine than the melt's Mg and Fe can make) raises
            :class:`~zoning.exceptions.ModelDomainError`; if False those
            entries are NaN (for optimisers exploring parameter space).
        **params : float or array_like, shape (m,)
            Model parameters by name (see :attr:`parameters`); missing ones
            take their default.

        Returns
        -------
        dict of str to ndarray
            Arrays of shape (m, n), or (n,) when every parameter is a scalar.
            Keys are listed in the class docstring.

        Raises
        ------
        ModelDomainError
            For unknown or out-of-range parameters or fractions.
        """
        f = np.asarray(f, dtype=float)
        if f.ndim not in (1, 2):
            raise ModelDomainError(
                f"f must be a 1-D array of crystallized fractions (or 2-D, one row per "
                f"parameter set); got shape {f.shape}."
            )
        if not np.all(np.isfinite(f)) or np.any((f < 0) | (f >= 1)):
            bad = f[~(np.isfinite(f) & (f >= 0) & (f < 1))][0]
            raise ModelDomainError(
                f"crystallized fraction f = {bad!r} is outside [0, 1); give fractions of the "
                f"initial melt mass."
            )
        p, m, scalar = self._params(params)
        if f.ndim == 2 and f.shape[0] not in (1, m):
            if not scalar:
                raise ModelDomainError(
                    f"f has {f.shape[0]} rows but the parameters have {m} sets; give one "
                    "row of fractions per parameter set (or a single row)."
                )
            m = f.shape[0]  # scalar parameters: the same set for every row of f
            p = {k: np.repeat(v, m, axis=0) for k, v in p.items()}
        fm = np.broadcast_to(f, (m, f.shape[-1]))
        out = self._evaluate(fm, p, strict=strict, stacklevel=3)
        return _squeeze(out, scalar and f.ndim == 1)

    def profile(self, distance_um, radius_um, *, strict: bool = True,
                **params) -> dict[str, np.ndarray]:
        r"""Evaluate the recorded profile at distances from the core.

        Distance maps to F by :func:`zoning.geometry.fraction_from_distance`:
        :math:`F = F_{core} + (F_{rim} - F_{core})((x - x_0)/R)^n`, with the
        optional off-centre section correction, then the model is evaluated;
        with ``beam_um > 0`` the crystal outputs are averaged over a Gaussian
        beam of that full width at half maximum.

        Parameters
        ----------
        distance_um : array_like, shape (n,)
            Distance of each spot from the core [µm], >= 0.
        radius_um : float
            Core-to-rim distance R of the section [µm], > 0.
        strict : bool, optional
            As in :meth:`path`.
        **params : float or array_like, shape (m,)
            Model parameters by name.

        Returns
        -------
        dict of str to ndarray
            As :meth:`path`, plus ``"distance_um"``.

        Raises
        ------
        ModelDomainError
            For invalid distances, radius or parameters.
        """
        x = np.asarray(distance_um, dtype=float)
        cached = getattr(self, "_zone_cache", None)
        known = cached is not None and x.ndim == 1 and cached[0][0] == x.tobytes()
        if not known and (x.ndim != 1 or not np.isfinite(x).all() or (x < 0).any()):
            raise ModelDomainError(
                "distance_um must be a 1-D array of finite distances from the core >= 0 [µm]; "
                f"got {np.array2string(np.asarray(x).ravel()[:5])}..."
            )
        radius = _check_scalar("radius_um", radius_um, 1e-6, 1e7, "[µm]", open_lower=True)
        p, m, scalar = self._params(params)
        if self.beam_um > 0:
            off, wt = _geometry.beam_offsets(self.beam_um)
            xs = np.abs(x[:, None] + off[None, :]).ravel()  # (n*K,), mirrored at the core
        else:
            xs = x
        # the zone radius depends on the parameter set only through the core
        # offset and the exponent; when they are shared, map the distances once
        exponent, offset = p["growth_exponent"], p["core_offset_um"]
        f_core = p["f_core"] if p["f_core"].any() else 0.0
        structure = None
        if (exponent == exponent[0, 0]).all() and not offset.any():
            # (x/R)^n shared by every parameter set: cached between calls
            zone, increasing = self._zone_power(xs, radius, float(exponent[0, 0]))
            fm = _geometry.fraction_from_zone(zone, f_core, p["f_rim"])
            if increasing and (p["f_rim"] > f_core).all():
                # every row is f_core + (f_rim - f_core) zone, increasing: the
                # kernel locates the spots on its grid through the shared zone
                structure = (zone[0], f_core, p["f_rim"])
        else:
            fm = _geometry.fraction_from_distance(
                xs[None, :], radius, f_core, p["f_rim"], exponent, offset,
                self.section_offset_um,
            )
        if self.beam_um > 0:
            centre = _geometry.fraction_from_distance(
                x[None, :], radius, p["f_core"], p["f_rim"], p["growth_exponent"],
                p["core_offset_um"], self.section_offset_um,
            )
            fm_all = np.concatenate([centre, fm], axis=1)
            out_all = self._evaluate(fm_all, p, strict=strict, stacklevel=3)
            n = x.shape[0]
            out = {k: v[:, :n] for k, v in out_all.items()}
            k_nodes = off.shape[0]
            for key in self._crystal_keys:
                if key in out_all:
                    blurred = out_all[key][:, n:].reshape(m, n, k_nodes)
                    out[key] = blurred @ wt
        else:
            out = self._evaluate(fm, p, strict=strict, stacklevel=3, f_structure=structure)
        dist = np.empty(out["f"].shape)
        dist[...] = x
        out["distance_um"] = dist
        return _squeeze(out, scalar)

    def _zone_power(self, x, radius, exponent):
        """Relative zone radius to the power n, shape (1, n), and whether it increases.

        The last result is cached.
        """
        key = (x.tobytes(), radius, exponent, self.section_offset_um)
        cached = getattr(self, "_zone_cache", None)
        if cached is None or cached[0] != key:
            zone = _geometry.fraction_from_distance(x[None, :], radius, 0.0, 1.0, exponent, 0.0,
                                                    self.section_offset_um)
            zone.flags.writeable = False
            cached = (key, zone, bool((zone[0, 1:] >= zone[0, :-1]).all()))
            self._zone_cache = cached
        return cached[1], cached[2]

    def _evaluate(self, f, p, *, strict, stacklevel,
                  f_structure=None):  # pragma: no cover - abstract
        raise NotImplementedError


class CrystallizationModel(_ModelBase):
    r"""Exchange crystallization of olivine or plagioclase with retention r.

    The melt loses the analysed mineral (or, with ``assemblage``, a mixture
    of minerals in fixed mass proportions); a share ``retention`` of each
    increment stays in exchange equilibrium with the melt and the rest is
    isolated. The analysed crystal records, at each F,

    .. math:: X = \frac{y}{y + K(1 - y)},\qquad
              \frac{dy}{dt} = \frac{y - X}{(1 - t) + r t\,dX/dy}

    (olivine: X = Fo/100, y = melt Mg#, K = K_D(Fe-Mg); plagioclase:
    X = An/100, y = melt Ca#, K = 1/K_D(Ca-Na)); t is the fraction of the
    melt's exchange cations crystallized and
    :math:`F = (S_0/100s)[M_B t + (M_A - M_B)(y_0 - (1-t)y)]` in a 100 g
    melt basis (see :mod:`zoning.kernels` for the closed-form integration).

    Parameters
    ----------
    mineral : {"olivine", "plagioclase"}
        Analysed mineral.
    melt : mapping of str to float
        Reference melt analysis [wt%]. Olivine needs ``FeO`` (total iron as
        FeO; ``Fe2O3`` if given is folded in), plagioclase ``Na2O``. ``MgO``
        (``CaO``) if given sets the default melt ratio. Trace elements given
        by symbol, in ppm (e.g. ``"Ni": 250``), set the default initial trace
        contents.
    kd : float, optional
        Exchange coefficient: olivine K_D(Fe-Mg) = (Fe/Mg)ol/(Fe/Mg)melt,
        default 0.30 (Roeder & Emslie 1970); plagioclase K_D(Ca-Na) =
        (Ca/Na)pl/(Ca/Na)melt, default 2.0 (anhydrous range about 1-2,
        up to about 5.5 for water-rich melts at 200 MPa, Sisson & Grove 1993,
        from memory). Sets the default of parameter ``kd``.
    fe3_fraction : float, optional
        Melt Fe3+/FeT (olivine), default 0.10, typical of basalts near QFM
        (compute it for a given fO2 with :mod:`zoning.redox`). Fe3+ is
        inert and stays in the melt. Not used for plagioclase.
    traces : sequence of str, optional
        Trace elements to record: "Ni" (olivine, Hart & Davis 1978), "Sr",
        "Mg" (plagioclase, needs ``temperature_c``), or labels given in
        ``trace_d``.
    trace_d : mapping of str to float, optional
        Constant crystal/melt partition coefficients (wt basis) of trace
        elements; also overrides the law of "Ni", "Sr" or "Mg".
    assemblage : mapping of str to float, optional
        Mass proportions of the crystallizing minerals, including the
        analysed one, e.g. ``{"plagioclase": 0.6, "clinopyroxene": 0.3,
        "olivine": 0.1}`` (normalised to sum 1). Default: the analysed
        mineral alone (fast semi-analytic path); otherwise a fixed-step RK4
        integration (:func:`zoning.kernels.assemblage_path`), about a
        hundred times slower.
    assemblage_d : mapping of str to mapping, optional
        Constant crystal/melt partition coefficients (oxide or element wt
        ratio) of the *other* minerals for the tracked components (MgO, FeO
        or CaO, Na2O, and each trace element), overriding
        :data:`zoning.partitioning.ASSEMBLAGE_D_DEFAULTS` (typical basaltic
        values, from memory).
    geometry : {"sphere", "cylinder", "slab"}
        Growth geometry; sets the default growth exponent (3, 2, 1).
    beam_um : float, optional
        Beam/interaction full width at half maximum for :meth:`profile`
        [µm]; 0 (default) evaluates point values. :data:`DEFAULT_BEAM_UM`
        (2 µm) is the documented value to use when a convolution is wanted.
    section_offset_um : float, optional
        Distance of the section plane from the crystal centre [µm].
    temperature_c : float, optional
        Temperature for the plagioclase trace laws [°C], taken as constant
        along the path and reported as ``temperature_c`` for plagioclase.
        Olivine paths report the Helz & Thornber (1987) melt temperature
        instead.

    Attributes
    ----------
    parameters : tuple of ParameterSpec
        In order: ``melt_mg_number`` | ``melt_ca_number`` [fraction],
        ``f_rim``, ``retention``, ``kd``, ``f_core``, ``growth_exponent``,
        ``core_offset_um``, then the initial trace contents
        (``melt0_ni_ppm``, ``melt0_sr_ppm``, ``melt0_mgo_wt``, ``melt0_<x>_ppm``).

    Notes
    -----
    Output keys of :meth:`path` and :meth:`profile`: ``"f"``, ``"crystal"``
    (Fo or An, mol%), ``"melt_ratio"`` (melt Mg# or Ca#, fraction),
    ``"melt_mgo_wt"`` and ``"melt_feo_wt"`` (olivine; FeO = Fe2+ as FeO) or
    ``"melt_cao_wt"`` and ``"melt_na2o_wt"`` (plagioclase), ``"temperature_c"``
    (olivine: Helz & Thornber 1987, T = 20.1 MgO + 1014, from melt MgO;
    plagioclase: ``temperature_c`` or NaN), and per trace
    ``"crystal_nio_wt"``/``"melt_ni_ppm"``, ``"crystal_sro_wt"``/``"melt_sr_ppm"``,
    ``"crystal_mgo_wt"``/``"melt_mgo_wt"`` (plagioclase),
    ``"crystal_<x>_ppm"``/``"melt_<x>_ppm"`` (constant D).

    Integration error of the fast path is below 1e-5 mol% Fo (typically
    1e-8) and about 1e-5 relative for traces, against a fine reference
    (``benchmarks/forward.py`` prints it).

    References
    ----------
    .. [1] Roeder, P. L. & Emslie, R. F. (1970). Olivine-liquid equilibrium.
       Contrib. Mineral. Petrol. 29, 275-289.
    .. [2] Rayleigh, Lord (1896). Phil. Mag. 42, 493-498.
    .. [3] Shaw, D. M. (1970). Geochim. Cosmochim. Acta 34, 237-243.
    .. [4] Brody, H. D. & Flemings, M. C. (1966). Trans. Metall. Soc. AIME 236, 615-624.
    .. [5] Sisson, T. W. & Grove, T. L. (1993). Contrib. Mineral. Petrol. 113, 143-166.
    .. [6] Hart, S. R. & Davis, K. E. (1978). Earth Planet. Sci. Lett. 40, 203-219.
    .. [7] Blundy, J. D. & Wood, B. J. (1991). Geochim. Cosmochim. Acta 55, 193-209.
    .. [8] Bindeman, I. N., Davis, A. M. & Drake, M. J. (1998). Geochim.
       Cosmochim. Acta 62, 1175-1193.
    .. [9] Helz, R. T. & Thornber, C. R. (1987). Bull. Volcanol. 49, 651-668.
    """

    def __init__(
        self,
        mineral: str,
        melt: Mapping[str, float],
        *,
        kd: float | None = None,
        fe3_fraction: float = 0.10,
        traces: Sequence[str] = (),
        trace_d: Mapping[str, float] | None = None,
        assemblage: Mapping[str, float] | None = None,
        assemblage_d: Mapping[str, Mapping[str, float]] | None = None,
        geometry: str = "sphere",
        beam_um: float = 0.0,
        section_offset_um: float = 0.0,
        temperature_c: float | None = None,
    ):
        super().__init__(geometry, beam_um, section_offset_um)
        if mineral not in EXCHANGE_LAWS:
            raise ModelDomainError(
                f"unknown mineral {mineral!r}; expected one of {sorted(EXCHANGE_LAWS)}."
            )
        self.mineral = mineral
        law = self.law = EXCHANGE_LAWS[mineral]
        self.melt = _check_melt(melt, law)
        self.fe3_fraction = _check_scalar("fe3_fraction", fe3_fraction, 0.0, 0.9, "[fraction]")
        if temperature_c is not None:
            self.temperature_c = _check_scalar("temperature_c", temperature_c, 500.0, 2000.0,
                                               "[°C]")
        else:
            self.temperature_c = math.nan
        # moles of the "other" exchange cation in 100 g of melt
        other = self.melt[law.other_oxide]
        if mineral == "olivine":
            other = other * (1.0 - self.fe3_fraction)
        self._b0 = other / OXIDE_MOLAR_MASS[law.other_oxide] * law.cations_per_oxide_b
        if not self._b0 > 0:
            raise ModelDomainError(
                f"reference melt {law.other_oxide} must be > 0 wt% for the {mineral} exchange "
                f"model; got {self.melt[law.other_oxide]!r}."
            )
        # traces
        trace_d = dict(trace_d or {})
        names = list(traces)
        for extra in trace_d:
            if extra not in names:
                names.append(extra)
        if len(set(names)) != len(names):
            raise ModelDomainError(f"trace elements listed twice: {names}; list each once.")
        self.traces: tuple[TraceLaw, ...] = tuple(
            make_trace_law(mineral, el, trace_d.get(el)) for el in names
        )
        if any(t.kind == "plag_lattice" for t in self.traces) and not np.isfinite(
            self.temperature_c
        ):
            raise ModelDomainError(
                "the plagioclase Sr/Mg partitioning laws need a temperature; got none. Give "
                "temperature_c=... [°C] or a constant D with trace_d."
            )
        self.kd = law.kd_default if kd is None else _check_scalar(
            "kd", kd, law.kd_bounds[0], law.kd_bounds[1], "[1]"
        )
        self._setup_assemblage(assemblage, assemblage_d)
        self.parameters = self._make_parameters()
        self._crystal_keys = ("crystal",) + tuple(t.crystal_key for t in self.traces)

    def _setup_assemblage(self, assemblage, assemblage_d) -> None:
        """Validate the assemblage; store the shares and mass-weighted D of the others."""
        law = self.law
        if assemblage is None:
            assemblage = {self.mineral: 1.0}
        if not isinstance(assemblage, Mapping) or not assemblage:
            raise ModelDomainError(
                f"assemblage must be a mapping of mineral to mass proportion, e.g. "
                f"{{'{self.mineral}': 0.3, 'clinopyroxene': 0.7}}; got {assemblage!r}."
            )
        props = {}
        for name, value in assemblage.items():
            v = _check_scalar(f"assemblage[{name!r}]", value, 0.0, 1e6, "[mass proportion]")
            props[str(name)] = v
        total = sum(props.values())
        if self.mineral not in props or props[self.mineral] <= 0 or total <= 0:
            raise ModelDomainError(
                f"the assemblage must contain the analysed mineral {self.mineral!r} with a "
                f"positive proportion; got {assemblage!r}. Add it, e.g. "
                f"{{'{self.mineral}': 0.5, ...}}."
            )
        props = {k: v / total for k, v in props.items()}
        user_d = {str(k): dict(v) for k, v in (assemblage_d or {}).items()}
        needed = [law.compatible_oxide, law.other_oxide]
        trace_comp = []
        for tr in self.traces:
            trace_comp.append("MgO" if tr.parameter == "melt0_mgo_wt" else tr.element)
        d_other = {c: 0.0 for c in needed + trace_comp}
        for name, share in props.items():
            if name == self.mineral:
                continue
            table = dict(ASSEMBLAGE_D_DEFAULTS.get(name, {}))
            table.update(user_d.get(name, {}))
            for comp in d_other:
                if comp not in table:
                    raise ModelDomainError(
                        f"no partition coefficient of {comp} for {name!r} in the assemblage; "
                        f"known minerals {sorted(ASSEMBLAGE_D_DEFAULTS)}. Give it with "
                        f"assemblage_d={{'{name}': {{'{comp}': D}}}}."
                    )
                d = _check_scalar(f"assemblage_d[{name!r}][{comp!r}]", table[comp], 0.0, 1e4,
                                  "[1]")
                d_other[comp] += share * d
        w_an = props[self.mineral]
        w_o = 1.0 - w_an
        self.assemblage = props
        self._w_an = w_an
        self._d_other = {c: (v / w_o if w_o > 0 else 0.0) for c, v in d_other.items()}
        self._trace_components = tuple(trace_comp)
        self._fast = w_o <= 0.0

    # ------------------------------------------------------------ parameters
    def _ratio_from_melt(self) -> float:
        law = self.law
        if law.compatible_oxide not in self.melt:
            return 0.65 if self.mineral == "olivine" else 0.70
        a = self.melt[law.compatible_oxide] / OXIDE_MOLAR_MASS[law.compatible_oxide]
        a *= law.cations_per_oxide_a
        return a / (a + self._b0)

    def _make_parameters(self) -> tuple[ParameterSpec, ...]:
        law = self.law
        lo_r, hi_r = (0.2, 0.9) if self.mineral == "olivine" else (0.2, 0.97)
        ratio = float(np.clip(self._ratio_from_melt(), lo_r, hi_r))
        label = "Mg/(Mg+Fe2+)" if self.mineral == "olivine" else "Ca/(Ca+Na)"
        specs = [
            ParameterSpec(law.ratio_name, "1", lo_r, hi_r, ratio,
                          f"parent melt {label}, molar"),
            ParameterSpec("f_rim", "1", 0.0, 0.95, 0.10,
                          "mass fraction crystallized when the rim grew"),
            ParameterSpec("retention", "1", 0.0, 1.0, 0.0,
                          "share of each crystal increment kept in exchange with the melt "
                          "(0 fractional, 1 batch)"),
            ParameterSpec("kd", "1", law.kd_bounds[0], law.kd_bounds[1], self.kd,
                          "exchange coefficient K_D(Fe-Mg) (Fe/Mg)ol/(Fe/Mg)melt"
                          if self.mineral == "olivine"
                          else "exchange coefficient K_D(Ca-Na) (Ca/Na)pl/(Ca/Na)melt"),
            ParameterSpec("f_core", "1", 0.0, 0.95, 0.0,
                          "mass fraction crystallized when the core nucleated"),
            ParameterSpec("growth_exponent", "1", 0.5, 4.0,
                          _geometry.GEOMETRY_EXPONENT[self.geometry],
                          "exponent n of F(x) = F_core + (F_rim - F_core)(x/R)^n"),
            ParameterSpec("core_offset_um", "µm", -100.0, 100.0, 0.0,
                          "offset of the true core from the apparent core"),
        ]
        for tr in self.traces:
            specs.append(ParameterSpec(tr.parameter, tr.unit, tr.c0_bounds[0], tr.c0_bounds[1],
                                       self._trace_default(tr),
                                       f"initial melt {tr.element} content"))
        return tuple(specs)

    def _trace_default(self, tr: TraceLaw) -> float:
        melt = self.melt
        if tr.parameter == "melt0_mgo_wt" and "MgO" in melt:
            value = melt["MgO"]
        elif tr.element in melt:
            value = melt[tr.element]
        else:
            return tr.default_c0
        return float(np.clip(value, tr.c0_bounds[0], tr.c0_bounds[1]))

    # ------------------------------------------------------------- evaluation
    def initial_state(self, ratio):
        """Exchange cations in 100 g of parent melt for a melt ratio.

        Parameters
        ----------
        ratio : float or ndarray
            Parent melt Mg# or Ca# [fraction].

        Returns
        -------
        a0, b0, s0 : ndarray
            Moles of compatible, other and total exchange cations [mol].
        """
        y0 = np.asarray(ratio, dtype=float)
        b0 = self._b0
        a0 = b0 * y0 / (1.0 - y0)
        return a0, np.full_like(a0, b0), a0 + b0

    def max_fraction(self, **params) -> np.ndarray:
        """Largest crystallized fraction the melt can reach [fraction].

        Crystallizing the analysed mineral alone stops when the melt's
        exchange cations are used up:
        :math:`F_{max} = (S_0/100s)[M_B + (M_A - M_B)y_0]`. With an
        assemblage the integration is run to F = 0.95 and the fraction
        reached is returned (0.95 when nothing runs out first).

        Parameters
        ----------
        **params : float or array_like
            Model parameters (only the melt ratio matters).

        Returns
        -------
        ndarray
            F_max per parameter set, shape (m,) (or scalar).
        """
        p, m, scalar = self._params(params)
        law = self.law
        y0 = p[law.ratio_name]
        a0, b0, s0 = self.initial_state(y0)
        if self._fast:
            fmax = _kernels.exhaustion_fraction(y0, s0, law.sites, law.molar_mass_a,
                                                law.molar_mass_b)[:, 0]
        else:
            res = _kernels.assemblage_path(
                np.full((m, 1), 0.95), y0, law.kernel_k(p["kd"]), p["retention"], a0, b0,
                law.sites, law.molar_mass_a, law.molar_mass_b, self._w_an,
                self._d_other[law.compatible_oxide], self._d_other[law.other_oxide],
            )
            fmax = res["f_reached"][:, 0]
        return fmax[0] if scalar else fmax

    def _evaluate(self, f, p, *, strict, stacklevel, f_structure=None):
        law = self.law
        m, n = f.shape
        y0 = p[law.ratio_name]
        r = p["retention"]
        k = law.kernel_k(p["kd"])
        if not self._fast:
            a0, b0, _ = self.initial_state(y0)
            return self._evaluate_assemblage(f, p, y0, k, r, a0, b0, strict=strict,
                                             stacklevel=stacklevel + 1)
        s0 = self._b0 / (1.0 - y0)  # = a0 + b0 of initial_state
        fmax = _kernels.exhaustion_fraction(y0, s0, law.sites, law.molar_mass_a, law.molar_mass_b)
        limit = fmax * (1.0 - 1e-9)
        f_max_row = f.max(axis=1, keepdims=True)
        any_beyond = bool((f_max_row >= limit).any())
        if any_beyond:
            beyond = f >= limit
            if strict:
                i, j = np.argwhere(beyond)[0]
                raise ModelDomainError(
                    f"crystallized fraction {f[i, j]:.4g} cannot be reached by crystallizing "
                    f"{self.mineral} alone: the melt's {law.compatible_oxide} and "
                    f"{law.other_oxide} are used up at F = {fmax[i, 0]:.4g} (parameter set "
                    f"{i}). Lower f_rim or the fraction, or check the melt analysis."
                )
            f = np.where(beyond, 0.0, f)
            f_max_row = f_structure = None
        trace_laws = [self._trace_path_law(tr, s0) for tr in self.traces]
        path = _kernels.exchange_path(f, y0, k, r, s0, law.sites, law.molar_mass_a,
                                      law.molar_mass_b, trace_laws=trace_laws,
                                      f_max_row=f_max_row, f_structure=f_structure)
        y, t = path["y"], path["t"]
        one_f = 1.0 - f
        # exchange cations in the melt per 100 g of initial melt, per unit melt mass
        per_melt = s0 * (1.0 - t) / one_f
        out, x = self._outputs(f, y, k, y * per_melt, per_melt)
        if self.traces:
            self._traces(out, path, p, s0, r, one_f, x, stacklevel + 1)
        if any_beyond:
            for key in out:
                out[key] = np.where(beyond, np.nan, out[key])
        return out

    def _outputs(self, f, y, k, a_per_melt, s_per_melt):
        """Output dict from the melt ratio and the melt cations per unit melt mass.

        ``a_per_melt`` and ``s_per_melt`` are the compatible and all exchange
        cations in the melt [mol per g of melt, times 100]. Returns the dict
        and the crystal fraction X [fraction].
        """
        law = self.law
        # oxide wt% = 100 (cations / cations per oxide) M_oxide / melt mass
        to_a = OXIDE_MOLAR_MASS[law.compatible_oxide] / law.cations_per_oxide_a
        to_b = OXIDE_MOLAR_MASS[law.other_oxide] / law.cations_per_oxide_b
        x = equilibrium_crystal(y, k)
        melt_a = to_a * a_per_melt
        out = {
            "f": f.copy(),
            "crystal": 100.0 * x,
            "melt_ratio": y,
            f"melt_{law.compatible_oxide.lower()}_wt": melt_a,
            f"melt_{law.other_oxide.lower()}_wt": to_b * (s_per_melt - a_per_melt),
        }
        if self.mineral == "olivine":
            out["temperature_c"] = 20.1 * melt_a + 1014.0
        else:
            out["temperature_c"] = np.full_like(f, self.temperature_c)
        return out, x

    def _evaluate_assemblage(self, f, p, y0, k, r, a0, b0, *, strict, stacklevel):
        law = self.law
        temp = self.temperature_c
        mgo_factor = 100.0 * OXIDE_MOLAR_MASS["MgO"] / law.cations_per_oxide_a
        olivine = self.mineral == "olivine"
        laws = []
        for tr in self.traces:
            def law_fn(y, a, melt, x, tr=tr):
                return tr.partition(mgo_factor * a / melt if olivine else None, x, temp)
            laws.append(law_fn)
        res = _kernels.assemblage_path(
            f, y0, k, r, a0, b0, law.sites, law.molar_mass_a, law.molar_mass_b, self._w_an,
            self._d_other[law.compatible_oxide], self._d_other[law.other_oxide],
            trace_laws=laws, trace_d_other=[self._d_other[c] for c in self._trace_components],
        )
        beyond = f > res["f_reached"] * (1.0 - 1e-9) + 1e-15
        beyond &= f > 0
        if np.any(beyond) and strict:
            i, j = np.argwhere(beyond)[0]
            raise ModelDomainError(
                f"crystallized fraction {f[i, j]:.4g} cannot be reached with the assemblage "
                f"{self.assemblage}: the melt's {law.compatible_oxide} or {law.other_oxide} "
                f"is used up at F = {res['f_reached'][i, 0]:.4g} (parameter set {i}). Lower "
                f"f_rim or change the assemblage."
            )
        inv_mass = 100.0 / res["melt_mass"]
        a_per_melt = res["a"] * inv_mass
        out, x_pt = self._outputs(f, res["y"], k, a_per_melt, a_per_melt + res["b"] * inv_mass)
        for q, tr in enumerate(self.traces):
            melt_c = p[tr.parameter] * np.exp(res["trace_ln"][..., q])
            tr.check_range(out.get("melt_mgo_wt"), x_pt, stacklevel=stacklevel + 1)
            out[tr.melt_key] = melt_c
            out[tr.crystal_key] = res["trace_d"][..., q] * melt_c * tr.crystal_factor
        if np.any(beyond):
            for key in out:
                out[key] = np.where(beyond, np.nan, out[key])
        return out

    def _trace_path_law(self, tr: TraceLaw, s0):
        """D of ``tr`` along the path as ``law(y, t, x, f)`` for the kernels."""
        temp = self.temperature_c
        if self.mineral != "olivine":
            return lambda y, t, x, fr: tr.partition(None, x, temp)
        # melt MgO [wt%] from the melt ratio and the cations left in the melt
        mgo_per_cation = (OXIDE_MOLAR_MASS["MgO"] / self.law.cations_per_oxide_a) * s0
        return lambda y, t, x, fr: tr.partition(mgo_per_cation * y * (1.0 - t) / (1.0 - fr),
                                                x, temp)

    def _traces(self, out, path, p, s0, r, one_f, x_pt, stacklevel):
        law = self.law
        temp = self.temperature_c
        mgo_pt = out.get("melt_mgo_wt")
        olivine = self.mineral == "olivine"
        # at the points, W = M_L + D M_ret from the outputs already computed:
        # M_L = 100 (1 - F), M_ret = r (S_0/s) t M_f(X) (see trace_log_ratio)
        melt_mass = 100.0 * one_f
        m_ret = (r * s0 / law.sites) * path["t"] * (
            law.molar_mass_b + (law.molar_mass_a - law.molar_mass_b) * x_pt)
        for tr, decay in zip(self.traces, path["trace_decay"], strict=True):
            d_pt = tr.partition(mgo_pt if olivine else None, x_pt, temp)
            if np.ndim(d_pt) == 0:
                d_pt = np.full(one_f.shape, d_pt)
            # C_L/C_0 = (W_0/W) exp(-integral), W_0 = 100 (see trace_log_ratio)
            melt_c = (100.0 * p[tr.parameter]) * decay / (melt_mass + d_pt * m_ret)
            tr.check_range(mgo_pt, x_pt, stacklevel=stacklevel + 1)
            out[tr.melt_key] = melt_c
            out[tr.crystal_key] = d_pt * melt_c * tr.crystal_factor

    def initial_guess(self, distance_um, major, trace=None) -> dict[str, float]:
        """Data-driven starting values for a fit.

        The parent melt ratio is inverted from the innermost spots through
        the exchange equilibrium at the default K_D; ``f_rim`` is the F at
        which a half-retention path reaches the outermost composition; the
        initial trace content is the core trace content divided by D.

        Parameters
        ----------
        distance_um : array_like, shape (n,)
            Distance of each spot from the core [µm].
        major : array_like, shape (n,)
            Fo or An of each spot [mol%]; NaN spots are ignored.
        trace : array_like or mapping, optional
            Trace record of the crystal in the units of the crystal output
            (NiO / SrO / MgO wt%, or ppm for constant-D traces); a mapping by
            element for several traces.

        Returns
        -------
        dict of str to float
            A value for every parameter, inside its bounds.

        Raises
        ------
        ModelDomainError
            If fewer than two usable spots are given.
        """
        x = np.asarray(distance_um, dtype=float)
        c = np.asarray(major, dtype=float)
        ok = np.isfinite(x) & np.isfinite(c)
        if x.shape != c.shape or ok.sum() < 2:
            raise ModelDomainError(
                f"initial_guess needs distance_um and major of equal length with at least two "
                f"finite spots; got shapes {x.shape} and {c.shape} with {int(ok.sum())} usable."
            )
        order = np.argsort(x[ok])
        xs, cs = x[ok][order], c[ok][order]
        n_edge = max(1, min(3, xs.size // 5))
        core = np.clip(np.mean(cs[:n_edge]) / 100.0, 1e-4, 1 - 1e-4)
        rim = np.clip(np.mean(cs[-n_edge:]) / 100.0, 1e-4, 1 - 1e-4)
        specs = {s.name: s for s in self.parameters}
        guess = self.defaults()
        k = float(self.law.kernel_k(self.kd))
        y0 = k * core / (1.0 - core + k * core)
        ratio_spec = specs[self.law.ratio_name]
        y0 = float(np.clip(y0, ratio_spec.lower, ratio_spec.upper))
        guess[self.law.ratio_name] = y0
        guess["retention"] = 0.5
        fmax = float(self.max_fraction(**{self.law.ratio_name: y0}))
        grid = np.linspace(0.0, min(0.95, 0.9 * fmax), 200)
        with warnings.catch_warnings():
            # internal exploration far along the path: no calibration warnings
            warnings.simplefilter("ignore", CalibrationRangeWarning)
            path = self.path(grid, strict=False, **{self.law.ratio_name: y0, "retention": 0.5})
            core_path = self.path(np.array([0.0]), **{self.law.ratio_name: y0})
        rec = path["crystal"] / 100.0
        idx = int(np.nanargmin(np.abs(rec - rim)))
        guess["f_rim"] = float(np.clip(grid[idx], 0.005, specs["f_rim"].upper))
        if trace is not None and self.traces:
            traces = trace if isinstance(trace, Mapping) else {self.traces[0].element: trace}
            for tr in self.traces:
                if tr.element not in traces:
                    continue
                vals = np.asarray(traces[tr.element], dtype=float)
                if vals.shape != c.shape:
                    raise ModelDomainError(
                        f"initial_guess: the {tr.element} record has shape {vals.shape} but "
                        f"major has {c.shape}; give one value per spot (NaN where missing)."
                    )
                v = vals[ok][order][:n_edge]
                v = v[np.isfinite(v)]
                if v.size == 0:
                    continue
                c0 = specs[tr.parameter].default * float(np.mean(v)) / float(
                    core_path[tr.crystal_key][0])
                spec = specs[tr.parameter]
                guess[tr.parameter] = float(np.clip(c0, spec.lower, spec.upper))
        return guess


class ConstantPartitionModel(_ModelBase):
    r"""One element with a constant partition coefficient and retention r.

    .. math:: \frac{C_L}{C_0} = \left(1 - F(1 - rD)\right)^{(D-1)/(1-rD)},
              \qquad C_S = D\,C_L

    with the removable singularity :math:`rD = 1`, where
    :math:`C_L/C_0 = \exp((1-D)F)`; r = 0 is Rayleigh (1896) fractional
    crystallization, r = 1 batch crystallization (Shaw 1970); the form is
    the back-diffusion equation of Brody & Flemings (1966) with
    :math:`r = 2\alpha`.

    Parameters
    ----------
    element : str, optional
        Label of the element (used in output descriptions only).
    unit : str, optional
        Concentration unit of ``melt0`` and the outputs.
    geometry, beam_um, section_offset_um
        As for :class:`CrystallizationModel`.

    Attributes
    ----------
    parameters : tuple of ParameterSpec
        ``melt0`` (initial melt content), ``partition_coefficient`` (D, wt
        basis), ``f_rim``, ``retention``, ``f_core``, ``growth_exponent``,
        ``core_offset_um``.

    Notes
    -----
    Output keys: ``"f"``, ``"crystal"`` (D C_L), ``"melt"`` (C_L),
    ``"melt_ratio"`` (C_L/C_0), ``"temperature_c"`` (NaN).

    References
    ----------
    .. [1] Rayleigh, Lord (1896). Phil. Mag. 42, 493-498.
    .. [2] Shaw, D. M. (1970). Geochim. Cosmochim. Acta 34, 237-243.
    .. [3] Brody, H. D. & Flemings, M. C. (1966). Trans. Metall. Soc. AIME 236, 615-624.
    """

    def __init__(self, element: str = "X", unit: str = "ppm", *, geometry: str = "sphere",
                 beam_um: float = 0.0, section_offset_um: float = 0.0):
        super().__init__(geometry, beam_um, section_offset_um)
        self.element = element
        self.unit = unit
        self.parameters = (
            ParameterSpec("melt0", unit, 1e-6, 1e6, 100.0, f"initial melt {element} content"),
            ParameterSpec("partition_coefficient", "1", 1e-4, 1e3, 1.0,
                          "crystal/melt partition coefficient D (wt basis)"),
            ParameterSpec("f_rim", "1", 0.0, 0.95, 0.10,
                          "mass fraction crystallized when the rim grew"),
            ParameterSpec("retention", "1", 0.0, 1.0, 0.0,
                          "share of each crystal increment kept in exchange with the melt"),
            ParameterSpec("f_core", "1", 0.0, 0.95, 0.0,
                          "mass fraction crystallized when the core nucleated"),
            ParameterSpec("growth_exponent", "1", 0.5, 4.0,
                          _geometry.GEOMETRY_EXPONENT[geometry],
                          "exponent n of F(x) = F_core + (F_rim - F_core)(x/R)^n"),
            ParameterSpec("core_offset_um", "µm", -100.0, 100.0, 0.0,
                          "offset of the true core from the apparent core"),
        )
        self._crystal_keys = ("crystal",)

    def _evaluate(self, f, p, *, strict, stacklevel, f_structure=None):
        ratio = _kernels.retention_closed_form(f, p["partition_coefficient"], p["retention"])
        melt = p["melt0"] * ratio
        return {
            "f": f.copy(),
            "crystal": p["partition_coefficient"] * melt,
            "melt": melt,
            "melt_ratio": ratio,
            "temperature_c": np.full_like(f, np.nan),
        }


#: Model classes, for contract tests and the application layer.
MODELS = (CrystallizationModel, ConstantPartitionModel)


# ---------------------------------------------------------------- helpers
def _squeeze(out: dict, scalar: bool) -> dict:
    if scalar:
        return {k: np.ascontiguousarray(v[0]) for k, v in out.items()}
    return out


def _check_scalar(name, value, lower, upper, unit, open_lower=False) -> float:
    try:
        v = float(value)
    except (TypeError, ValueError):
        raise ModelDomainError(
            f"{name} must be a number {unit}; got {value!r}."
        ) from None
    low_bad = v <= lower if open_lower else v < lower
    if not math.isfinite(v) or low_bad or v > upper:
        bracket = "(" if open_lower else "["
        raise ModelDomainError(
            f"{name} = {value!r} is outside its allowed range {bracket}{lower:g}, {upper:g}] "
            f"{unit}; give a value inside it."
        )
    return v


def _check_melt(melt: Mapping[str, float], law) -> dict[str, float]:
    if not isinstance(melt, Mapping):
        raise ModelDomainError(
            f"melt must be a mapping of oxide name to wt%, e.g. {{'FeO': 9.5}}; got "
            f"{type(melt).__name__}."
        )
    out = {}
    for key, value in melt.items():
        try:
            v = float(value)
        except (TypeError, ValueError):
            raise ModelDomainError(
                f"melt {key} must be a number [wt%]; got {value!r}."
            ) from None
        if not math.isfinite(v) or v < 0 or v > 100:
            raise ModelDomainError(
                f"melt {key} = {value!r} wt% is outside [0, 100]; give oxide wt%."
            )
        out[str(key)] = v
    if "Fe2O3" in out and law.other_oxide == "FeO":
        out["FeO"] = out.get("FeO", 0.0) + _FEO_PER_FE2O3 * out.pop("Fe2O3")
    if law.other_oxide not in out:
        raise ModelDomainError(
            f"the reference melt for {law.mineral} needs {law.other_oxide} [wt%]; got "
            f"{sorted(out)}. Give e.g. melt={{'{law.other_oxide}': ...}} from a glass or "
            "whole-rock analysis."
        )
    return out
