r"""Binary solid-solution loops with temperature (experimental and analogue systems).

For a binary system with complete solid solution (forsterite-fayalite,
anorthite-albite at 1 atm) and ideal mixing in both liquid and crystal, the
equilibrium ratio of the activities of end-member :math:`i` follows from its
melting temperature :math:`T_i` and enthalpy of fusion :math:`\Delta H_i`
(standard cryoscopic treatment, :math:`\Delta C_p = 0`):

.. math::

    k_i = \frac{X_i^S}{X_i^L}
        = \exp\left[\frac{\Delta H_i}{nR}\left(\frac{1}{T} - \frac{1}{T_i}\right)\right]

with :math:`n` the number of mixing sites per formula unit: per-cation
mixing on the two octahedral sites of olivine (:math:`n = 2`, components
:math:`MgSi_{0.5}O_2`, :math:`FeSi_{0.5}O_2`) and molecular mixing for
plagioclase (:math:`n = 1`, components :math:`CaAl_2Si_2O_8`,
:math:`NaAlSi_3O_8`; the coupled Ca-Al / Na-Si substitution keeps the
framework ordered). With A the high-melting end-member and B the other, the
two-phase loop at temperature :math:`T` is

.. math::

    X_A^L = \frac{1 - k_B}{k_A - k_B}, \qquad X_A^S = k_A X_A^L,

the liquidus is :math:`X_A^L(T)` and the solidus :math:`X_A^S(T)`; the
implied exchange coefficient is :math:`K_D = (X_B/X_A)^S/(X_B/X_A)^L =
k_B/k_A`. For olivine the per-cation model gives :math:`K_D` of 0.22-0.31 at
the liquidus, consistent with the measured 0.30 (Roeder & Emslie 1970); a
molecular (n = 1) model would give 0.03-0.10, which is why n = 2 is used.

Crystallization paths
---------------------
A bulk liquid of composition :math:`X_0` (in moles of mixing units, n0 = 1)
cools from its liquidus. Of every crystal increment :math:`dn_c` a share
:math:`r` (retention) stays in exchange equilibrium with the melt and a
share :math:`1 - r` is isolated at the composition it formed with (r = 0:
fractional, Rayleigh-type; r = 1: equilibrium, lever rule). Mass balance of
component A over the exchanging pool (melt + retained crystals):

.. math::

    d\left[(1 - n_c)X^L + r\,n_c X^S\right] = -(1 - r) X^S\,dn_c
    \;\Rightarrow\;
    \frac{dn_c}{dT} = -\frac{(1 - n_c)\,dX^L/dT + r\,n_c\,dX^S/dT}{X^S - X^L},

a linear ODE in :math:`n_c` because the loop gives :math:`X^L(T)`,
:math:`X^S(T)`. It is the same mass balance as the exchange model of
:mod:`zoning.models` with a temperature-dependent coefficient. For r = 1 it
reduces to the lever rule :math:`n_c = (X_0 - X^L)/(X^S - X^L)`; for r = 0
to :math:`\ln(1 - n_c) = \int_{X_0}^{X^L} dX/(X^S - X)`. It is integrated
here in :math:`\sigma = \ln(T - T_B)`, in which the integrand stays finite
down to :math:`T_B`, with the integrating factor and cumulative Simpson
quadrature on a fixed grid, for all parameter sets at once. The mass fraction
crystallized is :math:`F = 1 - (1 - n_c)M(X^L)/M(X_0)` with :math:`M(X)`
the molar mass of a mixing unit of composition X.

The classic outcome: in equilibrium the last liquid is the liquidus
composition at the solidus temperature of the bulk; with fractionation the
zoned crystals keep the early high-temperature cores out of reaction, so the
last liquid, the last solid and the final temperature all move beyond that
end-point, toward pure B at :math:`T_B` for r = 0.

Assumptions and limits: ideal mixing in both phases (calorimetry gives a
small positive excess for olivine, about 5 kJ/mol per site, ignored);
:math:`\Delta C_p = 0`; 1 atm; pure binary melts. Natural melts are not
binary; use these loops for experiments and analogue systems, and
:mod:`zoning.models` with a measured :math:`K_D` for natural crystals.

References
----------
.. [1] Bowen, N. L. & Schairer, J. F. (1935). The system MgO-FeO-SiO2.
   American Journal of Science 29, 151-217.
.. [2] Bowen, N. L. (1913). The melting phenomena of the plagioclase
   feldspars. American Journal of Science 35, 577-599.
.. [3] Stebbins, J. F. & Carmichael, I. S. E. (1984). The heat of fusion of
   fayalite. American Mineralogist 69, 292-297.
.. [4] Stebbins, J. F., Carmichael, I. S. E. & Weill, D. F. (1983). The high
   temperature liquid and glass heat contents and the heats of fusion of
   diopside, albite, sanidine and nepheline. American Mineralogist 68, 717-730.
.. [5] Navrotsky, A., Ziegler, D., Oestrike, R. & Maniar, P. (1989).
   Calorimetry of silicate melts at 1773 K: measurement of enthalpies of
   fusion and of mixing in the systems diopside-anorthite-albite and
   anorthite-forsterite. Contributions to Mineralogy and Petrology 101,
   122-130 (forsterite enthalpy of fusion; attribution from memory).
.. [6] Roeder, P. L. & Emslie, R. F. (1970). Olivine-liquid equilibrium.
   Contributions to Mineralogy and Petrology 29, 275-289.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy.integrate import cumulative_simpson

from zoning.exceptions import ModelDomainError
from zoning.redox import MOLAR_MASS

__all__ = [
    "EndMember",
    "BinaryLoop",
    "FORSTERITE_FAYALITE",
    "ANORTHITE_ALBITE",
    "LOOPS",
    "loop_path",
    "LoopModel",
]

#: Citation keys (:mod:`zoning.references`) of the loops' end-member data.
CITATIONS = ("bowen_schairer_1935", "bowen_1913", "navrotsky_1989",
             "stebbins_carmichael_1984", "stebbins_1983")

#: Molar gas constant [J/(mol K)] (CODATA 2018 exact value).
_R = 8.314462618
_KELVIN = 273.15

# Grid of the path integration, as fractions of T_liquidus - T_B: linear (uniform
# in T) down to 0.1, then geometric (uniform in ln(T - T_B)) to 1e-8 and, where
# every integrand has reached its limit, coarsely on to 1e-250.
_GRID = np.concatenate(
    [
        np.linspace(1.0, 0.1, 2001),
        np.geomspace(0.1, 1e-8, 1201)[1:],
        np.geomspace(1e-8, 1e-250, 301)[1:],
    ]
)


@dataclass(frozen=True)
class EndMember:
    """One end-member of a binary loop, per mixing unit.

    Parameters
    ----------
    name : str
        End-member name ("Fo", "Fa", "An", "Ab").
    melting_c : float
        Melting temperature at 1 atm [°C].
    fusion_enthalpy_j : float
        Enthalpy of fusion per formula unit [J/mol] (per Mg2SiO4 for olivine).
    oxides : tuple of (str, float)
        Moles of each oxide per mixing unit (e.g. MgSi0.5O2: MgO 1, SiO2 0.5).
    source : str
        Published source of the melting point and enthalpy.
    """

    name: str
    melting_c: float
    fusion_enthalpy_j: float
    oxides: tuple
    source: str

    @property
    def molar_mass(self) -> float:
        """Molar mass of one mixing unit [g/mol]."""
        return float(sum(MOLAR_MASS[ox] * n for ox, n in self.oxides))


@dataclass(frozen=True)
class BinaryLoop:
    """Ideal binary solid-solution loop between a high- and a low-melting end-member.

    Parameters
    ----------
    name : str
        Loop name.
    mineral : {"olivine", "plagioclase"}
        Mineral whose record the loop gives.
    high, low : EndMember
        High-melting (A: Fo, An) and low-melting (B: Fa, Ab) end-members.
    sites : int
        Mixing sites per formula unit n (olivine 2, plagioclase 1).

    Notes
    -----
    Compositions are mole fractions of the high-melting end-member on the
    mixing-unit basis (for olivine identical to Mg/(Mg+Fe), for plagioclase
    to Ca/(Ca+Na)). The equations are in the module docstring.

    References
    ----------
    .. [1] Bowen, N. L. & Schairer, J. F. (1935). Am. J. Sci. 29, 151-217.
    .. [2] Bowen, N. L. (1913). Am. J. Sci. 35, 577-599.
    """

    name: str
    mineral: str
    high: EndMember
    low: EndMember
    sites: int

    # -- thermodynamics ---------------------------------------------------------
    @property
    def _a(self):
        return (
            self.high.fusion_enthalpy_j / (self.sites * _R),
            self.low.fusion_enthalpy_j / (self.sites * _R),
        )

    @property
    def _t_k(self):
        return self.high.melting_c + _KELVIN, self.low.melting_c + _KELVIN

    def _state(self, tau):
        """Loop state at ``T = T_B + tau`` [K]; accurate for tiny tau.

        Returns T [K], X_L, X_S, dX_L/dT, dX_S/dT.
        """
        a_a, a_b = self._a
        t_a, t_b = self._t_k
        t = t_b + tau
        u_a = a_a * (t_a - t) / (t * t_a)
        u_b = -a_b * tau / (t * t_b)
        k_a = np.exp(u_a)
        k_b = np.exp(u_b)
        one_minus_kb = -np.expm1(u_b)
        den = k_a - k_b
        x_l = one_minus_kb / den
        x_s = k_a * x_l
        dk_a = -k_a * a_a / t**2
        dk_b = -k_b * a_b / t**2
        dx_l = (-dk_b * den - one_minus_kb * (dk_a - dk_b)) / den**2
        dx_s = dk_a * x_l + k_a * dx_l
        return t, x_l, x_s, dx_l, dx_s

    def _check_t(self, temperature_c):
        t = np.asarray(temperature_c, dtype=float)
        lo, hi = self.low.melting_c, self.high.melting_c
        if np.any(~np.isfinite(t)) or np.any((t < lo) | (t > hi)):
            raise ModelDomainError(
                f"temperature for the {self.name} loop must lie between the end-member melting "
                f"points {lo:g} and {hi:g} °C; got {np.ravel(t)[:5].tolist()}. "
                "Outside that range the system is all liquid or all solid."
            )
        return t

    def _check_x(self, x, what):
        x = np.asarray(x, dtype=float)
        if np.any(~np.isfinite(x)) or np.any((x < 0) | (x > 1)):
            raise ModelDomainError(
                f"{what} for the {self.name} loop must be a mole fraction of "
                f"{self.high.name} in [0, 1]; got {np.ravel(x)[:5].tolist()}. "
                "Give it as a fraction (e.g. 0.6 for 60 mol%)."
            )
        return x

    def partition_ratios(self, temperature_c):
        """End-member ratios k_A = X_A^S/X_A^L and k_B = X_B^S/X_B^L [1].

        Parameters
        ----------
        temperature_c : float or array_like
            Temperature [°C].

        Returns
        -------
        tuple of numpy.ndarray
            ``(k_high, k_low)``.
        """
        t = np.asarray(temperature_c, dtype=float) + _KELVIN
        a_a, a_b = self._a
        t_a, t_b = self._t_k
        return np.exp(a_a * (1 / t - 1 / t_a)), np.exp(a_b * (1 / t - 1 / t_b))

    def tie_line(self, temperature_c):
        """Coexisting liquid and solid at a temperature [fraction of A].

        Parameters
        ----------
        temperature_c : float or array_like
            Temperature between the end-member melting points [°C].

        Returns
        -------
        tuple of numpy.ndarray
            ``(x_liquid, x_solid)``, mole fractions of the high-melting end-member.
        """
        t = self._check_t(temperature_c)
        _, x_l, x_s, _, _ = self._state(t + _KELVIN - self._t_k[1])
        return x_l, x_s

    def implied_kd(self, temperature_c):
        """Exchange coefficient implied by the loop, K_D = k_B / k_A [1].

        For olivine this is (Fe/Mg)_ol / (Fe/Mg)_melt, comparable with
        Roeder & Emslie (1970).

        Parameters
        ----------
        temperature_c : float or array_like
            Temperature [°C].

        Returns
        -------
        numpy.ndarray
            K_D at each temperature.
        """
        k_a, k_b = self.partition_ratios(self._check_t(temperature_c))
        return k_b / k_a

    def _invert(self, x, which):
        """Temperature [°C] at which the liquidus (0) or solidus (1) has composition x."""
        x = np.asarray(x, dtype=float)
        t_a, t_b = self._t_k
        lo = np.zeros_like(x)
        hi = np.full_like(x, t_a - t_b)
        for _ in range(80):  # bisection to float64 resolution, vectorised over x
            mid = 0.5 * (lo + hi)
            value = self._state(mid)[1 + which]
            below = value < x
            lo = np.where(below, mid, lo)
            hi = np.where(below, hi, mid)
        out = 0.5 * (lo + hi) + t_b - _KELVIN
        out = np.where(x >= 1.0, self.high.melting_c, np.where(x <= 0.0, self.low.melting_c, out))
        return out if out.ndim else float(out)

    def liquidus_c(self, x_liquid):
        """Liquidus temperature of a liquid of composition ``x_liquid`` [°C].

        Parameters
        ----------
        x_liquid : float or array_like
            Mole fraction of the high-melting end-member [fraction].

        Returns
        -------
        float or numpy.ndarray
            Temperature [°C].
        """
        return self._invert(self._check_x(x_liquid, "liquid composition"), 0)

    def solidus_c(self, x_solid):
        """Solidus temperature of a crystal (or bulk) of composition ``x_solid`` [°C].

        Parameters
        ----------
        x_solid : float or array_like
            Mole fraction of the high-melting end-member [fraction].

        Returns
        -------
        float or numpy.ndarray
            Temperature [°C].
        """
        return self._invert(self._check_x(x_solid, "solid composition"), 1)

    def curves(self, n_points: int = 201) -> dict:
        """Liquidus and solidus curves sampled in temperature.

        Parameters
        ----------
        n_points : int, optional
            Number of temperatures from the low to the high melting point.

        Returns
        -------
        dict of numpy.ndarray
            ``"temperature_c"``, ``"x_liquid"``, ``"x_solid"`` (fractions of A).
        """
        t = np.linspace(self.low.melting_c, self.high.melting_c, int(n_points))
        x_l, x_s = self.tie_line(t)
        return {"temperature_c": t, "x_liquid": x_l, "x_solid": x_s}

    # -- crystallization paths ---------------------------------------------------
    def _mixing_mass(self, x):
        return x * self.high.molar_mass + (1.0 - x) * self.low.molar_mass

    def _validate_path_args(self, bulk, retention):
        x0 = np.atleast_1d(self._check_x(bulk, "bulk composition"))
        r = np.atleast_1d(np.asarray(retention, dtype=float))
        if np.any(~np.isfinite(r)) or np.any((r < 0) | (r > 1)):
            raise ModelDomainError(
                f"retention must lie in [0, 1]; got {np.ravel(r)[:5].tolist()}. "
                "Use 0 for fractional and 1 for equilibrium crystallization."
            )
        if x0.ndim != 1 or r.ndim != 1:
            raise ModelDomainError(
                f"bulk composition and retention must be scalars or 1-D arrays; got shapes "
                f"{x0.shape} and {r.shape}. Pass one value per parameter set."
            )
        try:
            x0, r = np.broadcast_arrays(x0, r)
        except ValueError:
            raise ModelDomainError(
                f"bulk composition ({x0.size} values) and retention ({r.size} values) "
                "must have the same length or be scalars."
            ) from None
        if np.any((x0 <= 0) | (x0 >= 1)):
            raise ModelDomainError(
                f"bulk composition must lie strictly between 0 and 1 for a loop path; got "
                f"{np.ravel(x0)[:5].tolist()}. A pure end-member melts at one temperature."
            )
        return x0, r

    def _integrate(self, x0, r):
        """Integrate the path on the grid (equations in the module docstring).

        Returns a dict of (m, k) arrays on the truncated grid: ``s``
        (nondecreasing), ``f`` and ``dfds``, ``n_l``, ``x_l``, ``x_s``, ``iso``
        (isolated A), plus ``tau_l`` (m,) and ``x0`` (m,).
        """
        x0 = x0[:, None]
        r = r[:, None]
        m = x0.shape[0]
        t_b = self._t_k[1]
        tau_l = np.asarray(self._invert(x0[:, 0], 0)) + _KELVIN - t_b
        tau = tau_l[:, None] * _GRID[None, :]
        _, x_l, x_s, dx_l, dx_s = self._state(tau)
        x_l[:, 0] = x0[:, 0]  # exact liquidus composition (removes bisection round-off)
        dx = x_s - x_l
        # Melt left n_L = 1 - n_c obeys, in s = -ln((T - T_B)/(T_L - T_B))
        # (increasing along the path), dn_L/ds = -source - beta n_L with
        # beta = tau (X_L' - r X_S')/dX and source = r tau X_S'/dX (primes: d/dT).
        # source vanishes for r = 0, so the Rayleigh limit is a pure exponential.
        beta = (dx_l - r * dx_s) * tau / dx
        source = r * dx_s * tau / dx
        s = np.broadcast_to(-np.log(_GRID)[None, :], tau.shape)
        # n_L = e^Q (1 - int source e^-Q ds), Q = -int beta ds
        big_q = cumulative_simpson(-beta, x=s, axis=-1, initial=0.0)
        inner = cumulative_simpson(source * np.exp(-big_q), x=s, axis=-1, initial=0.0)
        n_l = np.exp(big_q) * (1.0 - inner)
        dnl = -(source + beta * n_l)
        diso = -(1.0 - r) * x_s * dnl
        iso = cumulative_simpson(diso, x=s, axis=-1, initial=0.0)

        # Melt exhaustion (r > 0): first crossing of n_L = 0, located inside its
        # step with a cubic Hermite interpolant (values and ODE slopes at both
        # ends); the crossing becomes the last grid point, later points repeat it.
        gone = n_l <= 0.0
        has_end = gone.any(axis=1)
        k = tau.shape[1]
        first = np.where(has_end, gone.argmax(axis=1), k)
        rows = np.arange(m)
        k1 = np.clip(first, 1, k - 1)
        k0 = k1 - 1
        h = s[rows, k1] - s[rows, k0]
        theta = _hermite_root(
            n_l[rows, k0], dnl[rows, k0], n_l[rows, k1], dnl[rows, k1], h, np.zeros(m)
        )
        s_end = s[rows, k0] + theta * h
        tau_end = tau_l * np.exp(-s_end)
        _, xl_e, xs_e, dxl_e, dxs_e = self._state(tau_end)
        iso_e = _hermite(iso[rows, k0], diso[rows, k0], iso[rows, k1], diso[rows, k1], h, theta)
        src_e = r[:, 0] * dxs_e * tau_end / (xs_e - xl_e)
        after = np.arange(k)[None, :] >= first[:, None]

        def put(arr, end):
            return np.where(after, end[:, None], arr)

        s = put(s, s_end)
        x_l = put(x_l, xl_e)
        x_s = put(x_s, xs_e)
        iso = put(iso, iso_e)
        n_l = np.where(after, 0.0, n_l)
        dnl = put(dnl, -src_e)
        dxl_ds = put(-dx_l * tau, -dxl_e * tau_end)
        m0 = self._mixing_mass(x0)
        mass_l = self._mixing_mass(x_l)
        f = 1.0 - n_l * mass_l / m0
        dm = self.high.molar_mass - self.low.molar_mass
        dfds = -(dnl * mass_l + n_l * dm * dxl_ds) / m0
        return {
            "s": s, "f": f, "dfds": dfds, "n_l": n_l, "x_l": x_l, "x_s": x_s,
            "iso": iso, "tau_l": tau_l, "x0": x0[:, 0],
        }

    def path_grid(self, bulk, retention=0.0) -> dict:
        """Crystallization path of a bulk liquid on the internal integration grid.

        Parameters
        ----------
        bulk : float or array_like, shape (m,)
            Bulk (initial liquid) mole fraction of the high-melting end-member.
        retention : float or array_like, shape (m,)
            Share r of each crystal increment kept in exchange with the melt
            (0 fractional, 1 equilibrium).

        Returns
        -------
        dict of numpy.ndarray, shape (m, k)
            ``"f"`` mass fraction crystallized (nondecreasing, ends at 1),
            ``"temperature_c"``, ``"x_liquid"``, ``"x_solid"`` (instantaneous
            crystal), ``"melt_moles"`` (mixing units left in the melt per unit
            initial), ``"isolated_high"`` (moles of A locked in isolated
            crystals, integrated separately so that the mass balance
            ``melt + retained + isolated = bulk`` is a check). After the melt
            is exhausted each row repeats its end state.
        """
        g = self._integrate(*self._validate_path_args(bulk, retention))
        t = self._t_k[1] + g["tau_l"][:, None] * np.exp(-g["s"]) - _KELVIN
        return {
            "f": g["f"],
            "temperature_c": t,
            "x_liquid": g["x_l"],
            "x_solid": g["x_s"],
            "melt_moles": g["n_l"],
            "isolated_high": g["iso"],
        }

    def path(self, f, bulk, retention=0.0) -> dict:
        """Temperature and compositions along a crystallization path at given F.

        Parameters
        ----------
        f : array_like, shape (n,)
            Mass fraction crystallized [fraction], in [0, 1].
        bulk : float or array_like, shape (m,)
            Bulk liquid composition [fraction of the high-melting end-member].
        retention : float or array_like, shape (m,)
            Retention r in [0, 1] (0 fractional, 1 equilibrium).

        Returns
        -------
        dict of numpy.ndarray, shape (m, n) or (n,) for scalar parameters
            ``"f"``, ``"temperature_c"``, ``"x_liquid"``, ``"x_solid"``
            (instantaneous crystal, i.e. the zone grown at F).

        Notes
        -----
        F is located on the integration grid and refined with a cubic Hermite
        interpolant of F(s) (values and exact slopes); the loop state is then
        evaluated exactly at that point.
        """
        f = np.asarray(f, dtype=float)
        if f.ndim != 1 or np.any(~np.isfinite(f)) or np.any((f < 0) | (f > 1)):
            raise ModelDomainError(
                f"crystallized fraction F must be a 1-D array of values in [0, 1]; got "
                f"shape {f.shape} with values {np.ravel(f)[:5].tolist()}. "
                "Give F as a fraction."
            )
        scalar = np.ndim(bulk) == 0 and np.ndim(retention) == 0
        x0, r = self._validate_path_args(bulk, retention)
        out = self._path_at(np.broadcast_to(f, (x0.size, f.size)), x0, r)
        if scalar:
            out = {key: v[0] for key, v in out.items()}
        return out

    def _path_at(self, f, x0, r):
        """Path state at crystallized fractions ``f`` of shape (m, n), one row per set."""
        g = self._integrate(x0, r)
        m, k = g["f"].shape
        n = f.shape[1]
        offset = 2.0 * np.arange(m)[:, None]  # F in [0, 1]: shifted rows do not overlap
        row = np.repeat(np.arange(m), n)
        target = np.asarray(f, dtype=float).ravel()
        idx = np.searchsorted((g["f"] + offset).ravel(), target + 2.0 * row, side="left")
        idx = np.clip(idx, row * k + 1, row * k + k - 1)
        i0, i1 = idx - 1, idx
        fs, ff, fd = g["s"].ravel(), g["f"].ravel(), g["dfds"].ravel()
        h = fs[i1] - fs[i0]
        theta = _hermite_root(ff[i0], fd[i0], ff[i1], fd[i1], h, target)
        s_q = fs[i0] + theta * h
        tau_q = g["tau_l"][row] * np.exp(-s_q)
        _, x_l, x_s, _, _ = self._state(tau_q)
        x_l = np.where(s_q == 0.0, g["x0"][row], x_l)
        t = self._t_k[1] + tau_q - _KELVIN
        return {
            "f": np.array(f, dtype=float, copy=True).reshape(m, n),
            "temperature_c": t.reshape(m, n),
            "x_liquid": x_l.reshape(m, n),
            "x_solid": x_s.reshape(m, n),
        }


def _hermite(y0, d0, y1, d1, h, theta):
    """Cubic Hermite interpolant on one step at relative position theta."""
    t2, t3 = theta**2, theta**3
    return (
        (2 * t3 - 3 * t2 + 1) * y0
        + (t3 - 2 * t2 + theta) * h * d0
        + (-2 * t3 + 3 * t2) * y1
        + (t3 - t2) * h * d1
    )


def _hermite_slope(y0, d0, y1, d1, h, theta):
    """Return d/dtheta of :func:`_hermite`."""
    t2 = theta**2
    return (
        (6 * t2 - 6 * theta) * y0
        + (3 * t2 - 4 * theta + 1) * h * d0
        + (-6 * t2 + 6 * theta) * y1
        + (3 * t2 - 2 * theta) * h * d1
    )


def _hermite_root(y0, d0, y1, d1, h, target):
    """Relative position in [0, 1] where the Hermite cubic reaches ``target``.

    Newton from the linear guess, vectorised; the data are monotone over the
    step and ``d0``/``d1`` are the exact slopes d/ds at its ends.
    """
    y0 = y0 - target
    y1 = y1 - target
    span = y0 - y1
    ok = span != 0
    theta = np.clip(np.where(ok, y0 / np.where(ok, span, 1.0), 1.0), 0.0, 1.0)
    for _ in range(10):
        slope = _hermite_slope(y0, d0, y1, d1, h, theta)
        good = slope != 0
        value = _hermite(y0, d0, y1, d1, h, theta)
        step = np.where(good, value / np.where(good, slope, 1.0), 0.0)
        theta = np.clip(theta - step, 0.0, 1.0)
    return theta


#: Forsterite-fayalite at 1 atm, per-cation mixing (n = 2). Fo melts at 1890 °C
#: (Bowen & Schairer 1935), Delta H 142 kJ/mol (Navrotsky et al. 1989, from
#: memory); Fa at 1205 °C (Bowen & Schairer 1935, from memory), Delta H
#: 89.3 kJ/mol (Stebbins & Carmichael 1984).
FORSTERITE_FAYALITE = BinaryLoop(
    name="forsterite-fayalite",
    mineral="olivine",
    high=EndMember(
        "Fo", 1890.0, 142.0e3, (("MgO", 1.0), ("SiO2", 0.5)),
        "Bowen & Schairer (1935); Delta H Navrotsky et al. (1989, from memory)",
    ),
    low=EndMember(
        "Fa", 1205.0, 89.3e3, (("FeO", 1.0), ("SiO2", 0.5)),
        "Bowen & Schairer (1935, from memory); Delta H Stebbins & Carmichael (1984)",
    ),
    sites=2,
)

#: Anorthite-albite at 1 atm, molecular mixing (n = 1). An melts at 1553 °C
#: (Bowen 1913), Delta H 135.6 kJ/mol (Delta S 17.7 cal/mol/K quoted by
#: Stebbins et al. 1983, times 1830 K); Ab at 1100 °C (Bowen 1913,
#: extrapolated; from memory), Delta H 62.8 kJ/mol (Stebbins et al. 1983).
ANORTHITE_ALBITE = BinaryLoop(
    name="anorthite-albite",
    mineral="plagioclase",
    high=EndMember(
        "An", 1553.0, 135.6e3, (("CaO", 1.0), ("Al2O3", 1.0), ("SiO2", 2.0)),
        "Bowen (1913); Delta S of fusion quoted by Stebbins et al. (1983)",
    ),
    low=EndMember(
        "Ab", 1100.0, 62.8e3, (("Na2O", 0.5), ("Al2O3", 0.5), ("SiO2", 3.0)),
        "Bowen (1913, from memory); Delta H Stebbins, Carmichael & Weill (1983)",
    ),
    sites=1,
)

#: Loops by analysed mineral.
LOOPS = {"olivine": FORSTERITE_FAYALITE, "plagioclase": ANORTHITE_ALBITE}

#: Melt oxide columns reported for each mineral (compatible, other).
_PAIR = {"olivine": ("MgO", "FeO"), "plagioclase": ("CaO", "Na2O")}
_RATIO = {"olivine": "melt_mg_number", "plagioclase": "melt_ca_number"}


def _melt_oxides(loop: BinaryLoop, mineral: str, x_l):
    """Oxide wt% of the exchanging pair in a binary melt of composition x_l."""
    mass = loop._mixing_mass(x_l)
    a_ox, b_ox = _PAIR[mineral]
    a_moles = dict(loop.high.oxides)[a_ox]
    b_moles = dict(loop.low.oxides)[b_ox]
    return {
        f"melt_{a_ox.lower()}_wt": 100.0 * x_l * a_moles * MOLAR_MASS[a_ox] / mass,
        f"melt_{b_ox.lower()}_wt": 100.0 * (1.0 - x_l) * b_moles * MOLAR_MASS[b_ox] / mass,
    }


def _model_output(loop, mineral, res):
    out = {
        "f": res["f"],
        "crystal": 100.0 * res["x_solid"],
        "melt_ratio": res["x_liquid"],
    }
    out.update(_melt_oxides(loop, mineral, res["x_liquid"]))
    out["temperature_c"] = res["temperature_c"]
    return out


def loop_path(mineral: str, f, *, retention=0.0, loop: BinaryLoop | None = None, **ratio) -> dict:
    """Crystallization path of a binary-loop melt with the forward-model output keys.

    Parameters
    ----------
    mineral : {"olivine", "plagioclase"}
        Selects the loop (forsterite-fayalite or anorthite-albite).
    f : array_like, shape (n,)
        Mass fraction crystallized [fraction].
    retention : float or array_like, shape (m,)
        Retention r in [0, 1].
    loop : BinaryLoop, optional
        Use another loop (e.g. with different end-member data).
    **ratio
        ``melt_mg_number`` (olivine) or ``melt_ca_number`` (plagioclase):
        the bulk liquid ratio [fraction], float or shape (m,).

    Returns
    -------
    dict of numpy.ndarray, shape (m, n) or (n,)
        ``"f"``, ``"crystal"`` (Fo or An of the zone grown at F) [mol%],
        ``"melt_ratio"`` (melt Mg# or Ca#) [fraction], ``"melt_mgo_wt"`` and
        ``"melt_feo_wt"`` or ``"melt_cao_wt"`` and ``"melt_na2o_wt"`` of the
        binary melt [wt%], and ``"temperature_c"`` [°C]; the same keys as
        :meth:`zoning.models.CrystallizationModel.path` without traces.

    Raises
    ------
    ModelDomainError
        Unknown mineral, missing or wrong ratio argument, values out of domain.
    """
    if mineral not in LOOPS:
        raise ModelDomainError(
            f"unknown mineral {mineral!r} for a binary loop; expected one of {sorted(LOOPS)}."
        )
    loop = LOOPS[mineral] if loop is None else loop
    name = _RATIO[mineral]
    if set(ratio) != {name}:
        raise ModelDomainError(
            f"a {mineral} loop path needs exactly the bulk ratio {name!r}; got "
            f"{sorted(ratio)}. Pass {name}=<fraction>."
        )
    return _model_output(loop, mineral, loop.path(f, ratio[name], retention))


class LoopModel:
    r"""Zoning recorded by a crystal growing from a binary-loop melt.

    The same interface as :class:`zoning.models.CrystallizationModel`
    (``parameters``, ``path``, ``profile``, same output keys) for the
    analogue systems forsterite-fayalite and anorthite-albite: the partition
    law is the ideal loop of :class:`BinaryLoop` (temperature-dependent
    exchange coefficient :math:`K_D = k_B/k_A`) instead of a constant K_D,
    and ``temperature_c`` is the loop temperature. Distance maps to F as in
    :func:`zoning.geometry.fraction_from_distance`,
    :math:`F = F_{core} + (F_{rim} - F_{core})((x - x_0)/R)^n`; no beam
    averaging.

    Parameters
    ----------
    mineral : {"olivine", "plagioclase"}
        Selects the loop.
    geometry : {"sphere", "cylinder", "slab"}
        Sets the default growth exponent (3, 2, 1).
    loop : BinaryLoop, optional
        Another loop (e.g. other end-member data).

    Attributes
    ----------
    parameters : tuple of zoning.models.ParameterSpec
        ``melt_mg_number`` | ``melt_ca_number`` (bulk liquid ratio),
        ``f_rim``, ``retention``, ``f_core``, ``growth_exponent``,
        ``core_offset_um``.

    References
    ----------
    .. [1] Bowen, N. L. & Schairer, J. F. (1935). Am. J. Sci. 29, 151-217.
    .. [2] Bowen, N. L. (1913). Am. J. Sci. 35, 577-599.
    """

    def __init__(self, mineral: str, *, geometry: str = "sphere", loop: BinaryLoop | None = None):
        from zoning import geometry as _geometry
        from zoning.models import ParameterSpec

        if mineral not in LOOPS:
            raise ModelDomainError(
                f"unknown mineral {mineral!r} for a binary loop; expected one of {sorted(LOOPS)}."
            )
        if geometry not in _geometry.GEOMETRY_EXPONENT:
            raise ModelDomainError(
                f"unknown growth geometry {geometry!r}; expected one of "
                f"{sorted(_geometry.GEOMETRY_EXPONENT)}. Use 'sphere' for equant crystals."
            )
        self.mineral = mineral
        self.geometry = geometry
        self.loop = LOOPS[mineral] if loop is None else loop
        self._geometry = _geometry
        label = "Mg/(Mg+Fe)" if mineral == "olivine" else "Ca/(Ca+Na)"
        self.parameters = (
            ParameterSpec(_RATIO[mineral], "1", 0.01, 0.99, 0.6 if mineral == "olivine" else 0.5,
                          f"bulk liquid {label} of the binary melt, molar"),
            ParameterSpec("f_rim", "1", 0.0, 1.0, 0.5,
                          "mass fraction crystallized when the rim grew"),
            ParameterSpec("retention", "1", 0.0, 1.0, 0.0,
                          "share of each crystal increment kept in exchange with the melt "
                          "(0 fractional, 1 equilibrium)"),
            ParameterSpec("f_core", "1", 0.0, 0.95, 0.0,
                          "mass fraction crystallized when the core nucleated"),
            ParameterSpec("growth_exponent", "1", 0.5, 4.0,
                          _geometry.GEOMETRY_EXPONENT[geometry],
                          "exponent n of F(x) = F_core + (F_rim - F_core)(x/R)^n"),
            ParameterSpec("core_offset_um", "µm", -100.0, 100.0, 0.0,
                          "offset of the true core from the apparent core"),
        )

    @property
    def parameter_names(self) -> tuple[str, ...]:
        """Parameter names in their fixed order."""
        return tuple(p.name for p in self.parameters)

    def _params(self, params):
        specs = {p.name: p for p in self.parameters}
        unknown = sorted(set(params) - set(specs))
        if unknown:
            raise ModelDomainError(
                f"unknown parameter(s) {unknown} for the {self.mineral} loop model; expected "
                f"names from {list(specs)}."
            )
        values = {}
        for name, spec in specs.items():
            arr = np.asarray(params.get(name, spec.default), dtype=float)
            bad = ~np.isfinite(arr) | (arr < spec.lower) | (arr > spec.upper)
            if arr.ndim > 1 or np.any(bad):
                raise ModelDomainError(
                    f"parameter {name!r} must be a float or 1-D array in [{spec.lower:g}, "
                    f"{spec.upper:g}] {spec.unit}; got {np.ravel(arr)[:5].tolist()}."
                )
            values[name] = arr
        scalar = all(v.ndim == 0 for v in values.values())
        try:
            shape = np.broadcast_shapes(*(v.shape for v in values.values()))
        except ValueError:
            raise ModelDomainError(
                "array parameters must all have the same length; got "
                f"{ {k: v.shape for k, v in values.items()} }."
            ) from None
        m = shape[0] if shape else 1
        return {k: np.broadcast_to(v, (m,)).astype(float) for k, v in values.items()}, m, scalar

    def path(self, f, **params) -> dict:
        """Evaluate the loop model at crystallized fractions.

        Parameters
        ----------
        f : array_like, shape (n,)
            Mass fraction crystallized [fraction], in [0, 1].
        **params : float or array_like, shape (m,)
            Parameters by name (see :attr:`parameters`).

        Returns
        -------
        dict of numpy.ndarray, shape (m, n) or (n,)
            ``"f"``, ``"crystal"`` [mol%], ``"melt_ratio"``, melt oxides of
            the pair [wt%], ``"temperature_c"``.
        """
        p, m, scalar = self._params(params)
        f = np.asarray(f, dtype=float)
        if f.ndim != 1 or np.any(~np.isfinite(f)) or np.any((f < 0) | (f > 1)):
            raise ModelDomainError(
                f"crystallized fraction F must be a 1-D array of values in [0, 1]; got "
                f"{np.ravel(f)[:5].tolist()}."
            )
        res = self.loop._path_at(
            np.broadcast_to(f, (m, f.size)), p[_RATIO[self.mineral]], p["retention"]
        )
        out = _model_output(self.loop, self.mineral, res)
        return {k: v[0] for k, v in out.items()} if scalar else out

    def profile(self, distance_um, radius_um, **params) -> dict:
        """Evaluate the recorded profile at distances from the core.

        Parameters
        ----------
        distance_um : array_like, shape (n,)
            Distance of each spot from the core [µm], >= 0.
        radius_um : float
            Core-to-rim distance R [µm], > 0.
        **params : float or array_like, shape (m,)
            Parameters by name.

        Returns
        -------
        dict of numpy.ndarray
            As :meth:`path`, plus ``"distance_um"``.
        """
        x = np.asarray(distance_um, dtype=float)
        if x.ndim != 1 or np.any(~np.isfinite(x)) or np.any(x < 0):
            raise ModelDomainError(
                "distance_um must be a 1-D array of finite distances from the core >= 0 [µm]; "
                f"got {np.ravel(x)[:5].tolist()}."
            )
        radius = float(radius_um)
        if not np.isfinite(radius) or radius <= 0:
            raise ModelDomainError(f"radius_um must be > 0 µm; got {radius_um!r}.")
        p, m, scalar = self._params(params)
        col = {k: v[:, None] for k, v in p.items()}
        f = self._geometry.fraction_from_distance(
            x[None, :], radius, col["f_core"], col["f_rim"], col["growth_exponent"],
            col["core_offset_um"],
        )
        f = np.clip(np.broadcast_to(f, (m, x.size)), 0.0, 1.0)
        res = self.loop._path_at(f, p[_RATIO[self.mineral]], p["retention"])
        out = _model_output(self.loop, self.mineral, res)
        out["distance_um"] = np.broadcast_to(x, (m, x.size)).copy()
        return {k: v[0] for k, v in out.items()} if scalar else out
