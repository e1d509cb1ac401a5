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

from zoning import diffusion as _diffusion
from zoning import geometry as _geometry
from zoning import kernels as _kernels
from zoning.exceptions import CalibrationRangeWarning, ModelDomainError
from zoning.partitioning import (
    ASSEMBLAGE_D_DEFAULTS,
    ATOMIC_WEIGHT,
    EXCHANGE_LAWS,
    OXIDE_MOLAR_MASS,
    R_GAS,
    TraceLaw,
    equilibrium_crystal,
    make_trace_law,
)
from zoning.references import MethodUse
from zoning.thermometry import THERMOMETERS

__all__ = [
    "ParameterSpec",
    "CrystallizationModel",
    "ConstantPartitionModel",
    "MODELS",
    "DEFAULT_BEAM_UM",
    "SECTION_H_OVER_R_MAX",
]

#: Default width of the beam/interaction volume, full width at half maximum,
#: used when a convolution is asked for without a value [µm]. Typical
#: effective lateral resolution of a focused beam in silicates (1-3 µm).
DEFAULT_BEAM_UM = 2.0

#: Upper bound of the ``section_h_over_r`` parameter: beyond it the section
#: shows only the outermost few per cent of the crystal.
SECTION_H_OVER_R_MAX = 0.95

_SLAB_SECTION_MESSAGE = (
    "{name} = {value!r} is not possible for geometry 'slab': zones of a slab are planes, so "
    "a section normal to them shows the same profile wherever it cuts (an oblique cut "
    "stretches the profile instead, which is not modelled). Keep the section offset at 0 "
    "or use geometry 'sphere' or 'cylinder'."
)

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

    def __init__(self, geometry: str, beam_um: float, section_offset_um: float,
                 rim: str = "fixed"):
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
        if geometry == "slab" and self.section_offset_um > 0:
            raise ModelDomainError(_SLAB_SECTION_MESSAGE.format(value=section_offset_um,
                                                                name="section_offset_um"))
        if rim not in ("fixed", "closed"):
            raise ModelDomainError(
                f"unknown rim condition {rim!r} for diffusion after growth; expected 'fixed' "
                f"(rim held at its last composition, in equilibrium with the melt) or "
                f"'closed' (no exchange with the melt)."
            )
        self.rim = rim

    @staticmethod
    def _process_parameters() -> list[ParameterSpec]:
        """Specs of the sectioning and diffusion parameters shared by the models."""
        return [
            ParameterSpec("section_h_over_r", "1", 0.0, SECTION_H_OVER_R_MAX, 0.0,
                          "distance of the section plane from the crystal centre / true "
                          "crystal radius"),
            ParameterSpec("diffusion_length_um", "µm", 0.0, _diffusion.MAX_DIFFUSION_LENGTH_UM,
                          0.0, "diffusion length sqrt(D t) after growth of the reference "
                          "species at the rim composition"),
        ]

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

        Distance maps to the relative radius of the zone in the true crystal
        by :func:`zoning.geometry.zone_fraction` (core offset, off-centre
        section ``section_h_over_r``), and to F by
        :math:`F = F_{core} + (F_{rim} - F_{core})\xi^n`; the growth model is
        evaluated there. With ``diffusion_length_um > 0`` the grown profile
        of the true crystal (on :func:`zoning.diffusion.radial_grid`) is
        relaxed by diffusion after growth and sampled at the spots. With
        ``beam_um > 0`` the crystal outputs are averaged over a Gaussian beam
        of that full width at half maximum.

        Parameters
        ----------
        distance_um : array_like, shape (n,)
            Distance of each spot from the core [µm], >= 0.
        radius_um : float
            Core-to-rim distance of the section [µm], > 0 (the true radius
            is ``radius_um / sqrt(1 - section_h_over_r**2)``).
        strict : bool, optional
            As in :meth:`path`.
        **params : float or array_like, shape (m,)
            Model parameters by name.

        Returns
        -------
        dict of str to ndarray
            As :meth:`path`, plus ``"distance_um"``; when any
            ``diffusion_length_um`` is > 0, every crystal output ``<key>``
            is the relaxed profile and ``"<key>_grown"`` (``"crystal_grown"``,
            ``"crystal_nio_wt_grown"``, ...) the growth profile before
            diffusion. Melt outputs and ``"f"`` are those of the growth.

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
        section = self._section(p["section_h_over_r"], radius)
        length = p["diffusion_length_um"]
        diffuse = bool(length.any())
        if self.beam_um > 0:
            off, wt = _geometry.beam_offsets(self.beam_um)
            xs = np.abs(x[:, None] + off[None, :]).ravel()  # (n*K,), mirrored at the core
        else:
            xs = x
        # the zone radius depends on the parameter set only through the core
        # offset, the section and the exponent; when they are shared, map the
        # distances once
        exponent, offset = p["growth_exponent"], p["core_offset_um"]
        f_core = p["f_core"] if p["f_core"].any() else 0.0
        structure = None
        shared = ((exponent == exponent[0, 0]).all() and not offset.any()
                  and (section == section[0, 0]).all())
        if shared:
            # (xi)^n shared by every parameter set: cached between calls
            xi, zone, increasing = self._zone_power(xs, radius, float(exponent[0, 0]),
                                                    float(section[0, 0]))
            fm = _geometry.fraction_from_zone(zone, f_core, p["f_rim"])
            if increasing and (p["f_rim"] > f_core).all():
                # every row is f_core + (f_rim - f_core) zone, increasing: the
                # kernel locates the spots on its grid through the shared zone
                structure = (zone[0], f_core, p["f_rim"])
        else:
            xi = _geometry.zone_fraction(xs[None, :], radius, offset, 0.0,
                                         section if section.any() else 0.0)
            fm = _geometry.fraction_from_zone(xi**exponent, f_core, p["f_rim"])
        n = x.shape[0]
        parts = [fm]
        if self.beam_um > 0:
            centre = _geometry.fraction_from_distance(
                x[None, :], radius, p["f_core"], p["f_rim"], p["growth_exponent"],
                p["core_offset_um"], 0.0, section if section.any() else 0.0,
            )
            parts.insert(0, centre)
        if diffuse:
            grid = _diffusion.radial_grid()
            parts.append(_geometry.fraction_from_zone(grid[None, :] ** exponent, f_core,
                                                      p["f_rim"]))
        if len(parts) == 1:
            out_all = self._evaluate(fm, p, strict=strict, stacklevel=3, f_structure=structure)
        else:
            out_all = self._evaluate(np.concatenate(parts, axis=1), p, strict=strict,
                                     stacklevel=3)
        n_sampled = fm.shape[1]
        lo = n if self.beam_um > 0 else 0  # first sampled column
        out = {k: v[:, :n] for k, v in out_all.items()}
        keys = [k for k in self._crystal_keys if k in out_all]
        sampled = {k: out_all[k][:, lo:lo + n_sampled] for k in keys}
        if diffuse:
            grown_grid = {k: out_all[k][:, lo + n_sampled:] for k in keys}
            change = self._relax(grown_grid, p, length * np.sqrt(1.0 - section**2) / radius,
                                 radius)
            idx, w = _diffusion.grid_interpolation(xi)
            positive = length > 0
            relaxed = {}
            for k in keys:
                if k not in change:
                    relaxed[k] = sampled[k]
                    continue
                d = change[k]
                if idx.shape[0] == 1:  # positions shared by every parameter set
                    delta = (w[0] * d[:, idx[0]] + w[1] * d[:, idx[0] + 1]
                             + w[2] * d[:, idx[0] + 2] + w[3] * d[:, idx[0] + 3])
                else:
                    rows = np.arange(m)[:, None]
                    delta = (w[0] * d[rows, idx] + w[1] * d[rows, idx + 1]
                             + w[2] * d[rows, idx + 2] + w[3] * d[rows, idx + 3])
                relaxed[k] = np.where(positive, sampled[k] + delta, sampled[k])
        for k in keys:
            if self.beam_um > 0:
                k_nodes = off.shape[0]
                out[k] = sampled[k].reshape(m, n, k_nodes) @ wt
                if diffuse:
                    out[k + "_grown"] = out[k]
                    out[k] = relaxed[k].reshape(m, n, k_nodes) @ wt
            elif diffuse:
                out[k + "_grown"] = out[k]
                out[k] = relaxed[k]
        dist = np.empty(out["f"].shape)
        dist[...] = x
        out["distance_um"] = dist
        return _squeeze(out, scalar)

    def _section(self, h_over_r, radius):
        """Section offset h/R per parameter set, shape (m, 1), checked against the options."""
        if self.section_offset_um > 0:
            if h_over_r.any():
                raise ModelDomainError(
                    f"the section offset is given twice: section_offset_um = "
                    f"{self.section_offset_um:g} µm in the model settings and "
                    f"section_h_over_r = {float(h_over_r.max()):g}; give only one of them."
                )
            return np.full(h_over_r.shape, float(_geometry.section_h_over_r_from_offset(
                self.section_offset_um, radius)))
        if self.geometry == "slab" and h_over_r.any():
            raise ModelDomainError(_SLAB_SECTION_MESSAGE.format(
                value=float(h_over_r.max()), name="section_h_over_r"))
        return h_over_r

    def _zone_power(self, x, radius, exponent, section):
        """Relative zone radius and its n-th power, shape (1, n), and whether it increases.

        The last result is cached.
        """
        key = (x.tobytes(), radius, exponent, section)
        cached = getattr(self, "_zone_cache", None)
        if cached is None or cached[0] != key:
            xi = _geometry.zone_fraction(x[None, :], radius, 0.0, 0.0, section)
            zone = xi**exponent
            xi.flags.writeable = False
            zone.flags.writeable = False
            cached = (key, xi, zone, bool((zone[0, 1:] >= zone[0, :-1]).all()))
            self._zone_cache = cached
        return cached[1], cached[2], cached[3]

    def _relax(self, grown, p, length_over_radius, radius):  # pragma: no cover - abstract
        raise NotImplementedError

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
        Distance of the section plane from the crystal centre [µm], a fixed
        setting; the same mapping as the parameter ``section_h_over_r`` (=
        h / sqrt(radius_um^2 + h^2)), which must then stay 0. Not allowed
        for geometry "slab".
    temperature_c : float, optional
        Temperature for the plagioclase trace laws [°C], taken as constant
        along the path and reported as ``temperature_c`` for plagioclase.
        Olivine paths report the melt temperature of the glass thermometer
        instead. For plagioclase it also sets the default D_Sr/D_Mg of
        diffusion after growth.
    thermometer : str, optional
        Olivine: glass-MgO thermometer of the reported melt temperature, a
        name in :data:`zoning.thermometry.THERMOMETERS` (default
        ``"helz_thornber_1987"``). The temperature is a reported extra that
        no other output depends on, so the model does not check the
        thermometer's calibration range; whoever reports the temperature does
        (``THERMOMETERS[model.thermometer].check_range(out["melt_mgo_wt"])``,
        as ``zoning fit`` and ``zoning simulate`` do). Ignored for plagioclase.
    rim : {"fixed", "closed"}, optional
        Rim condition of diffusion after growth: held at its last grown
        composition, i.e. in equilibrium with the melt (default), or closed
        (no exchange with the melt; the crystal keeps its mass).
    diffusivity_ratio : mapping of str to float, optional
        Diffusivity of trace elements relative to the reference species
        (olivine: Fe-Mg; plagioclase: Mg), by element label; sets the
        defaults of the parameters ``diffusivity_ratio_<element>``.
        Defaults: olivine
        :data:`zoning.diffusion.OLIVINE_DIFFUSIVITY_RATIOS` (Ni 1, Mn 1,
        Ca 0.1, P 0); plagioclase Sr from the Arrhenius laws at
        ``temperature_c`` (:func:`zoning.diffusion.plagioclase_diffusivity_ratio`).
        A trace without a ratio cannot be diffused (an error names it when
        ``diffusion_length_um > 0``).

    Attributes
    ----------
    parameters : tuple of ParameterSpec
        In order: ``melt_mg_number`` | ``melt_ca_number`` [fraction],
        ``f_rim``, ``retention``, ``kd``, ``f_core``, ``growth_exponent``,
        ``core_offset_um``, the initial trace contents
        (``melt0_ni_ppm``, ``melt0_sr_ppm``, ``melt0_mgo_wt``, ``melt0_<x>_ppm``),
        then the processes after growth: ``section_h_over_r`` [1] (0 to
        0.95, default 0; h/R of an off-centre section, see
        :mod:`zoning.geometry`) and ``diffusion_length_um`` [µm] (0 to
        :data:`zoning.diffusion.MAX_DIFFUSION_LENGTH_UM`, default 0), and
        ``diffusivity_ratio_<element>`` [1] (0 to 10) for every trace with a
        known diffusivity ratio.
    diffusing_keys : tuple of str
        Crystal outputs changed by diffusion after growth (olivine: Fo and
        every trace with a ratio; plagioclase: the traces, An is frozen).

    Notes
    -----
    **Diffusion after growth** (:mod:`zoning.diffusion`): after the rim grew
    the crystal stays in melt at constant temperature; diffusion inside the
    crystal (sphere, cylinder or slab as ``geometry``) relaxes the growth
    profile of the true crystal, which is then sampled at the spots (through
    the section mapping and the beam average). ``diffusion_length_um`` is
    :math:`L = \sqrt{D t}` of the reference species at the *grown rim*
    composition: olivine Fe-Mg, with
    :math:`D(X_{Fo}) = D_{rim}10^{-3(X_{Fo} - X_{Fo,rim})}` (Dohmen &
    Chakraborty 2007; the equation is solved with this concentration
    dependence), traces at ``diffusivity_ratio_<el>`` times the local Fe-Mg
    D; plagioclase Mg, with :math:`D = D_{rim}10^{-4.1(X_{An} - X_{An,rim})}`
    and the chemical-potential term of Costa et al. (2003), Sr at its ratio,
    An frozen (Grove et al. 1984). Convert L to a time with
    :func:`zoning.diffusion.diffusion_time_days`. Melt outputs are those of
    the growth (the melt is a large reservoir). :meth:`path` ignores the
    section and diffusion parameters (they act on positions in the crystal).

    Notes
    -----
    Output keys of :meth:`path` and :meth:`profile`: ``"f"``, ``"crystal"``
    (Fo or An, mol%), ``"melt_ratio"`` (melt Mg# or Ca#, fraction),
    ``"melt_mgo_wt"`` and ``"melt_feo_wt"`` (olivine; FeO = Fe2+ as FeO) or
    ``"melt_cao_wt"`` and ``"melt_na2o_wt"`` (plagioclase), ``"temperature_c"``
    (olivine: the glass thermometer, by default Helz & Thornber 1987,
    T = 20.1 MgO + 1014, from melt MgO; plagioclase: ``temperature_c`` or
    NaN), and per trace
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
    .. [10] Dohmen, R. & Chakraborty, S. (2007). Phys. Chem. Minerals 34, 409-430.
    .. [11] Costa, F., Chakraborty, S. & Dohmen, R. (2003). Geochim. Cosmochim.
       Acta 67, 2189-2200.
    .. [12] Grove, T. L., Baker, M. B. & Kinzler, R. J. (1984). Geochim.
       Cosmochim. Acta 48, 2113-2121.
    .. [13] Crank, J. (1975). The Mathematics of Diffusion, 2nd ed. Clarendon Press.
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
        thermometer: str = "helz_thornber_1987",
        rim: str = "fixed",
        diffusivity_ratio: Mapping[str, float] | None = None,
    ):
        super().__init__(geometry, beam_um, section_offset_um, rim)
        if mineral not in EXCHANGE_LAWS:
            raise ModelDomainError(
                f"unknown mineral {mineral!r}; expected one of {sorted(EXCHANGE_LAWS)}."
            )
        self.mineral = mineral
        if thermometer not in THERMOMETERS:
            raise ModelDomainError(
                f"unknown glass thermometer {thermometer!r}; expected one of "
                f"{sorted(THERMOMETERS)}. Give one of these (--thermometer)."
            )
        #: Name of the glass thermometer of the olivine melt temperature ("" for plagioclase).
        self.thermometer = thermometer if mineral == "olivine" else ""
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
                "--temperature-c [°C] (project key temperature_c) or a constant D with "
                "--trace-d Sr=D."
            )
        self.kd = law.kd_default if kd is None else _check_scalar(
            "kd", kd, law.kd_bounds[0], law.kd_bounds[1], "[1]"
        )
        self._setup_assemblage(assemblage, assemblage_d)
        self._setup_diffusion(diffusivity_ratio)
        self.parameters = self._make_parameters()
        self._crystal_keys = ("crystal",) + tuple(t.crystal_key for t in self.traces)
        self.diffusing_keys = (("crystal",) if mineral == "olivine" else ()) + tuple(
            t.crystal_key for t in self.traces if t.element in self._ratio_defaults)

    def _setup_diffusion(self, diffusivity_ratio) -> None:
        """Default diffusivity ratio of every trace that has one (settings and defaults)."""
        given = {}
        for key, value in dict(diffusivity_ratio or {}).items():
            given[str(key)] = _check_scalar(f"diffusivity_ratio[{key!r}]", value, 0.0, 1e3,
                                            "[1]")
        labels = [t.element for t in self.traces]
        unknown = sorted(set(given) - set(labels))
        if unknown:
            raise ModelDomainError(
                f"diffusivity_ratio given for {unknown}, which are not traces of this model; "
                f"traces: {labels}."
            )
        if self.mineral == "plagioclase" and "Mg" in given and given["Mg"] != 1.0:
            raise ModelDomainError(
                "diffusivity_ratio of Mg in plagioclase is 1 by definition (diffusion_length_um "
                f"is the Mg diffusion length); got {given['Mg']!r}. Give the other traces "
                "relative to Mg."
            )
        defaults = {}
        for tr in self.traces:
            if tr.element in given:
                defaults[tr.element] = given[tr.element]
            elif self.mineral == "olivine":
                if tr.element in _diffusion.OLIVINE_DIFFUSIVITY_RATIOS:
                    defaults[tr.element] = _diffusion.OLIVINE_DIFFUSIVITY_RATIOS[tr.element]
            else:
                value = _diffusion.plagioclase_diffusivity_ratio(tr.element, self.temperature_c)
                if math.isfinite(value):
                    defaults[tr.element] = value
        self._ratio_defaults = defaults

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
                        f"known minerals {sorted(ASSEMBLAGE_D_DEFAULTS)}. Give D of {comp} "
                        f"for {name} in the assemblage partition coefficients (assemblage_d)."
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
        specs.extend(self._process_parameters())
        reference = "Fe-Mg" if self.mineral == "olivine" else "Mg"
        for tr in self.traces:
            if tr.element not in self._ratio_defaults or (
                    self.mineral == "plagioclase" and tr.element == "Mg"):
                continue
            value = self._ratio_defaults[tr.element]
            specs.append(ParameterSpec(_ratio_name(tr), "1", 0.0, max(10.0, value), value,
                                       f"diffusivity of {tr.element} relative to {reference}"))
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

    def methods(self, processes: Sequence[str] = ()) -> tuple[MethodUse, ...]:
        """List the published methods this model rests on, as configured.

        Returns
        -------
        tuple of MethodUse
            Role, citation key (:data:`zoning.references.REFERENCES`) and
            detail of: the fractional and equilibrium limits and the
            retention form; the exchange coefficient; each trace law (and
            the calibration range it is checked against); the olivine glass
            thermometer; the distance-to-F mapping and, when used, the
            off-centre section. The melt Fe3+/FeT is the caller's to state
            (its source is not known here).
        """
        crystallization = "crystallization between the fractional and equilibrium limits"
        uses = [
            MethodUse(crystallization, "rayleigh_1896", "fractional limit, r = 0"),
            MethodUse(crystallization, "shaw_1970", "equilibrium (batch) limit, r = 1"),
            MethodUse(crystallization, "brody_flemings_1966",
                      "retention r, the share of each new layer that keeps exchanging with the "
                      "melt (the back-diffusion form of the solute balance)"),
        ]
        if self.mineral == "olivine":
            uses.append(MethodUse(
                "olivine-melt Fe-Mg exchange coefficient", self.law.citation,
                "K_D(Fe-Mg) = (Fe/Mg)ol / (Fe/Mg)melt with Fe2+ in the melt"))
        else:
            uses.append(MethodUse(
                "plagioclase-melt Ca-Na exchange coefficient", self.law.citation,
                "K_D(Ca-Na) = (Ca/Na)pl / (Ca/Na)melt; about 1-2 in dry melts, higher with "
                "melt water"))
        for tr in self.traces:
            if tr.kind == "ni_hart_davis":
                uses.append(MethodUse("olivine-melt Ni partitioning", tr.citations[0],
                                      "D_Ni = 124 / MgO(melt, wt%) - 0.9"))
            elif tr.kind == "plag_lattice":
                uses.append(MethodUse(f"plagioclase-melt {tr.element} partitioning",
                                      tr.citations[0], "RT ln D = A X_An + B at the given "
                                      f"temperature {self.temperature_c:g} °C"))
                for key in tr.citations[1:]:
                    uses.append(MethodUse(f"calibration range of the {tr.element} law", key,
                                          "0.4 < X_An < 0.8"))
            else:
                uses.append(MethodUse(f"{tr.element} partitioning", "",
                                      f"constant D = {tr.constant_d:g} (given)"))
        if self.thermometer:
            th = THERMOMETERS[self.thermometer]
            uses.append(MethodUse("melt temperature (glass MgO thermometer)", th.citation,
                                  f"T = {th.slope:g} MgO + {th.intercept:g} °C, calibrated "
                                  f"for about {th.mgo_min_wt:g}-{th.mgo_max_wt:g} wt% MgO"))
        uses.append(MethodUse("distance from the core to crystallized fraction F",
                              _geometry.CITATIONS[0],
                              f"F = F_core + (F_rim - F_core)(x/R)^n, {self.geometry} growth"))
        if self.section_offset_um:
            uses.append(MethodUse("off-centre section", _geometry.CITATIONS[1],
                                  f"section plane {self.section_offset_um:g} µm from the centre"))
        if not self._fast:
            uses.append(MethodUse("co-crystallizing minerals", "",
                                  "constant partition coefficients of the other minerals "
                                  "(typical basaltic values)"))
        uses.extend(self._process_methods(processes))
        return tuple(uses)

    def _process_methods(self, processes) -> list[MethodUse]:
        """MethodUse entries of the section and diffusion processes named in ``processes``."""
        unknown = sorted(set(processes) - {"section", "diffusion"})
        if unknown:
            raise ModelDomainError(
                f"unknown processes {unknown} for the list of methods; expected 'section' "
                f"and/or 'diffusion'."
            )
        uses = []
        if "section" in processes and not self.section_offset_um:
            uses.append(MethodUse("off-centre section", _geometry.CITATIONS[1],
                                  "spot at section distance x lies at crystal radius "
                                  "sqrt(x^2 + h^2); h/R fitted"))
        if "diffusion" not in processes:
            return uses
        rim = ("rim held at its last grown composition" if self.rim == "fixed"
               else "closed rim (no exchange with the melt)")
        uses.append(MethodUse("diffusion after growth (numerical method)", "crank_1975",
                              f"{self.geometry}, {rim}; implicit finite volumes checked "
                              f"against the series solutions"))
        if self.mineral == "olivine":
            uses.append(MethodUse("olivine Fe-Mg interdiffusion", "dohmen_chakraborty_2007",
                                  "D proportional to 10^(3 X_Fe) along the profile; "
                                  "L = sqrt(D t) at the rim composition"))
            cites = {"Ni": "petry_2004", "Mn": "chakraborty_2010", "Ca": "coogan_2005"}
            for tr in self.traces:
                if tr.element in self._ratio_defaults:
                    uses.append(MethodUse(
                        f"{tr.element} diffusivity relative to Fe-Mg",
                        cites.get(tr.element, ""),
                        f"D_{tr.element}/D_FeMg = {self._ratio_defaults[tr.element]:g}"))
        else:
            uses.append(MethodUse("plagioclase An frozen during diffusion", "grove_1984",
                                  "CaAl-NaSi interdiffusion negligible at magmatic time scales"))
            uses.append(MethodUse("plagioclase Mg diffusion and the chemical-potential term",
                                  "costa_2003", "D_Mg = 2.92 10^(-4.1 X_An - 3.1) "
                                  "exp(-266 kJ/mol / RT); L = sqrt(D_Mg t) at the rim An"))
            if any(tr.element == "Sr" for tr in self.traces):
                uses.append(MethodUse("plagioclase Sr diffusion", "zellmer_1999",
                                      "Giletti & Casserly (1994) data, D_Sr/D_Mg = "
                                      f"{self._ratio_defaults.get('Sr', float('nan')):.3g}"))
        return uses

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
        if self.thermometer:
            # A melt MgO below 0 lies past the end of the path this melt can
            # take (reached in sampler proposals next to exhaustion): no
            # temperature there (NaN), rather than an error from the thermometer.
            with np.errstate(invalid="ignore"):
                reachable = np.where(melt_a < 0, np.nan, melt_a)
            out["temperature_c"] = THERMOMETERS[self.thermometer](reachable, warn=False)
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

    def _relax(self, grown, p, length_over_radius, radius):
        """Change of each diffusing crystal output on the radial grid, shape (m, N)."""
        tau = np.square(length_over_radius)
        species, ratios, log_cap = [], [], []
        olivine = self.mineral == "olivine"
        if olivine:
            species.append(("crystal", 0.01))
            ratios.append(1.0)
        temp_k = self.temperature_c + 273.15
        x_field = 0.01 * grown["crystal"]
        for tr in self.traces:
            if tr.element not in self._ratio_defaults:
                raise ModelDomainError(
                    f"no diffusivity is known for {tr.element} in {self.mineral} relative to "
                    f"{'Fe-Mg' if olivine else 'Mg'}, so its profile cannot be diffused; give "
                    f"diffusivity_ratio={{'{tr.element}': value}} (project key "
                    f"diffusivity_ratio) or keep diffusion_length_um at 0."
                )
            species.append((tr.crystal_key, 1.0))
            name = _ratio_name(tr)
            ratios.append(p[name] if name in p else self._ratio_defaults[tr.element])
            if not olivine:
                a_j = tr.coefficients[0] if tr.kind == "plag_lattice" else 0.0
                log_cap.append((a_j / (R_GAS * temp_k)) * x_field if a_j else None)
        if not species:
            return {}
        m = tau.shape[0]
        c0 = np.stack([np.broadcast_to(scale * grown[k], grown["crystal"].shape)
                       for k, scale in species])
        ratio = np.stack([np.broadcast_to(np.asarray(r, dtype=float), (m, 1)) for r in ratios])
        dim = _diffusion.DIMENSION[self.geometry]
        if olivine:
            out = _diffusion.relax(c0, tau, dimension=dim, rim=self.rim, ratio=ratio,
                                   field_slope=-_diffusion.OLIVINE_FE_EXPONENT * _LN10,
                                   self_driven=True)
        else:
            cap = None
            if any(v is not None for v in log_cap):
                cap = np.stack([np.zeros_like(x_field) if v is None else v for v in log_cap])
            out = _diffusion.relax(c0, tau, dimension=dim, rim=self.rim, ratio=ratio,
                                   field=x_field,
                                   field_slope=-_diffusion.PLAGIOCLASE_AN_EXPONENT * _LN10,
                                   log_capacity=cap)
        return {k: (out[i] - c0[i]) / scale for i, (k, scale) in enumerate(species)}

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
    geometry, beam_um, section_offset_um, rim
        As for :class:`CrystallizationModel`.

    Attributes
    ----------
    parameters : tuple of ParameterSpec
        ``melt0`` (initial melt content), ``partition_coefficient`` (D, wt
        basis), ``f_rim``, ``retention``, ``f_core``, ``growth_exponent``,
        ``core_offset_um``, ``section_h_over_r``, ``diffusion_length_um``
        (L = sqrt(D t) of the element itself, constant D).

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
                 beam_um: float = 0.0, section_offset_um: float = 0.0, rim: str = "fixed"):
        super().__init__(geometry, beam_um, section_offset_um, rim)
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
            *self._process_parameters(),
        )
        self._crystal_keys = ("crystal",)
        self.diffusing_keys = ("crystal",)

    def _relax(self, grown, p, length_over_radius, radius):
        c0 = grown["crystal"][None]
        out = _diffusion.relax(c0, np.square(length_over_radius),
                               dimension=_diffusion.DIMENSION[self.geometry], rim=self.rim)
        return {"crystal": out[0] - c0[0]}

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
_LN10 = math.log(10.0)


def _ratio_name(tr: TraceLaw) -> str:
    """Name of the diffusivity-ratio parameter of a trace."""
    return f"diffusivity_ratio_{tr.element.lower()}"


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
            f"{sorted(out)}. Give e.g. --melt {law.other_oxide}=<wt%> (project key melt = "
            f"{{ {law.other_oxide} = <wt%> }}) from a glass or "
            "whole-rock analysis."
        )
    return out
