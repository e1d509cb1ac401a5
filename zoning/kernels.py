r"""Pure NumPy kernels of the forward crystallization models.

Every function here takes arrays and floats in documented units, trusts its
inputs (validation happens in :mod:`zoning.models`) and is vectorised over
parameter sets: parameters have shape ``(m, 1)`` and the crystallized
fractions shape ``(m, n)``.

Retention model
---------------
Of each crystal increment a share :math:`r` stays in exchange equilibrium
with the melt (it re-equilibrates as the melt evolves) and :math:`1-r` is
isolated at the composition it grew with. :math:`r = 0` is perfect
fractional (Rayleigh 1896) and :math:`r = 1` batch (equilibrium)
crystallization (Shaw 1970).

*Constant partition coefficient.* The mass balance
:math:`d[(1-F)C_L + rFDC_L] = -(1-r) D C_L\,dF` integrates to

.. math:: \frac{C_L}{C_0} = \left(1 - F(1 - rD)\right)^{(D-1)/(1-rD)}

with the removable singularity :math:`rD = 1`, where
:math:`C_L/C_0 = \exp((1-D)F)`. This is the back-diffusion equation of
Brody & Flemings (1966) with :math:`r = 2\alpha`.

*Binary exchange (olivine Fe-Mg, plagioclase Ca-Na).* Per formula unit the
crystal carries ``s`` exchange cations (olivine 2, plagioclase 1). Let
:math:`S_0 = a_0 + b_0` be the moles of exchange cations in 100 g of initial
melt, :math:`t` the fraction of them crystallized and :math:`y = a_L/(a_L +
b_L)` the melt ratio; melt cations are :math:`S_0(1-t)` whatever ``r``. The
crystal in equilibrium is :math:`X = f(y) = y/(y + K(1-y))`. Mass balance of
the compatible cation over the exchanging pool (melt plus retained crystals
at :math:`f(y)`) gives

.. math:: \frac{dy}{dt} = \frac{y - f(y)}{(1 - t) + r t f'(y)},

which is *linear* in :math:`t(y)`:
:math:`dt/dy + t(1 - r f')/g = 1/g` with :math:`g = y - f(y) =
-(1-K)y(1-y)/(K + (1-K)y)` and :math:`f' = K/(K + (1-K)y)^2`. With the
integrating factor

.. math:: \mu(y) = y^p (1-y)^q (K + (1-K)y)^{-r},\quad
          p = \frac{r-K}{1-K},\quad q = \frac{1-rK}{1-K}

the solution is :math:`t(y) = \mu(y)^{-1}\int_{y_0}^{y}\mu(\eta)/g(\eta)\,d\eta`
with :math:`\mu/g = -(1-K)^{-1}\eta^{p-1}(1-\eta)^{q-1}(K+(1-K)\eta)^{1-r}`.
Closed forms: :math:`r = 0` gives :math:`a_L/a_0 = (b_L/b_0)^{1/K}` and
:math:`r = 1` gives :math:`t = (y_0 - y)/(f(y) - y)`. The crystal mass
(retained plus isolated) is explicit,

.. math:: m = \frac{S_0}{s}\left[M_B t + (M_A - M_B)(y_0 - (1-t)y)\right],

so :math:`F = m/100` and the mass balance closes exactly. The kernel
integrates :math:`t` on a grid uniform in :math:`w = \ln(y_0/y)` by
Gauss-Legendre quadrature of each interval (in logs, so that it stays finite
as :math:`K \to 1`), then inverts :math:`F \to y` by cubic Hermite
interpolation with the exact :math:`dF/dw`, followed by one Newton step on
the exact :math:`F(y)`. When :math:`K > 1` (the "other" cation is the
compatible one) the pair is swapped (:math:`y \to 1-y`, :math:`K \to 1/K`,
:math:`M_A \leftrightarrow M_B`), which leaves the equations unchanged.

References
----------
.. [1] Rayleigh, Lord (1896). Theoretical considerations respecting the
   separation of gases by diffusion and similar processes. Phil. Mag. 42,
   493-498.
.. [2] Shaw, D. M. (1970). Trace element fractionation during anatexis.
   Geochim. Cosmochim. Acta 34, 237-243.
.. [3] Brody, H. D. & Flemings, M. C. (1966). Solute redistribution in
   dendritic solidification. Trans. Metall. Soc. AIME 236, 615-624.
.. [4] Roeder, P. L. & Emslie, R. F. (1970). Olivine-liquid equilibrium.
   Contrib. Mineral. Petrol. 29, 275-289.
"""

from __future__ import annotations

from functools import lru_cache

import numpy as np

__all__ = [
    "retention_closed_form",
    "rayleigh_exchange_t",
    "batch_exchange_t",
    "exchange_grid",
    "exchange_invert",
    "exchange_path",
    "trace_log_ratio",
    "exhaustion_fraction",
    "K_EPS",
]

#: Closest approach of the kernel exchange coefficient K to 1. At |1 - K| below
#: this the melt ratio moves by less than ~1e-9 over the whole path.
K_EPS = 1e-9

#: Default number of grid intervals and Gauss-Legendre nodes per interval.
N_INTERVALS = 12
N_GAUSS = 3
#: Intervals of the coarse pass that locates the end of the path.
N_COARSE = 6


@lru_cache(maxsize=16)
def _gauss01(q: int) -> tuple[np.ndarray, np.ndarray]:
    """Gauss-Legendre nodes and weights on [0, 1]."""
    x, wt = np.polynomial.legendre.leggauss(q)
    return 0.5 * (x + 1.0), 0.5 * wt


def retention_closed_form(f, d, r):
    r"""Melt concentration ratio for a constant partition coefficient [1].

    .. math:: \frac{C_L}{C_0} = \left(1 - F(1 - rD)\right)^{(D-1)/(1-rD)},
              \qquad rD = 1:\ \exp((1-D)F)

    Parameters
    ----------
    f : ndarray
        Crystallized mass fraction F [fraction], 0 <= F < 1.
    d : float or ndarray
        Bulk crystal/melt partition coefficient D (wt basis) [1].
    r : float or ndarray
        Retention r [fraction]: 0 fractional (Rayleigh 1896), 1 batch (Shaw 1970).

    Returns
    -------
    ndarray
        C_L / C_0 [1], broadcast shape of the inputs.

    References
    ----------
    .. [1] Brody, H. D. & Flemings, M. C. (1966). Trans. Metall. Soc. AIME 236, 615-624.
    """
    f = np.asarray(f, dtype=float)
    d = np.asarray(d, dtype=float)
    r = np.asarray(r, dtype=float)
    e = 1.0 - r * d
    # ln C = (D-1)/e * log1p(-F e); series for small e avoids 0/0 at rD = 1.
    x = -f * e
    small = np.abs(x) < 1e-8
    safe_e = np.where(small, 1.0, e)
    ratio = np.where(small, -f * (1.0 - 0.5 * x + x * x / 3.0), np.log1p(x) / safe_e)
    return np.exp((d - 1.0) * ratio)


def rayleigh_exchange_t(y, y0, k):
    r"""Fraction of exchange cations crystallized, fractional limit (r = 0) [fraction].

    From :math:`a_L/a_0 = (b_L/b_0)^{1/K}` with :math:`a_L = yS_0(1-t)`,
    :math:`b_L = (1-y)S_0(1-t)`:

    .. math:: \ln(1-t) = \frac{\ln(y_0/y) + K^{-1}\ln\frac{1-y}{1-y_0}}{1 - 1/K}

    Parameters
    ----------
    y, y0 : ndarray
        Melt ratio now and initially [fraction].
    k : ndarray
        Kernel exchange coefficient K [1], K != 1.

    Returns
    -------
    ndarray
        t [fraction].

    References
    ----------
    .. [1] Rayleigh, Lord (1896). Phil. Mag. 42, 493-498.
    """
    y = np.asarray(y, dtype=float)
    num = np.log(y0 / y) + (np.log1p(-y) - np.log1p(-y0)) / k
    return -np.expm1(num / (1.0 - 1.0 / k))


def batch_exchange_t(y, y0, k):
    r"""Fraction of exchange cations crystallized, batch limit (r = 1) [fraction].

    .. math:: t = \frac{y_0 - y}{f(y) - y}

    Parameters
    ----------
    y, y0 : ndarray
        Melt ratio now and initially [fraction].
    k : ndarray
        Kernel exchange coefficient K [1], K != 1.

    Returns
    -------
    ndarray
        t [fraction].

    References
    ----------
    .. [1] Shaw, D. M. (1970). Geochim. Cosmochim. Acta 34, 237-243.
    """
    y = np.asarray(y, dtype=float)
    fy = y / (y + k * (1.0 - y))
    return (y0 - y) / (fy - y)


def _gather(values, flat):
    """values[i, j[i, :]] given flat indices i * ncol + j."""
    return values.ravel()[flat]


def _f_of_t(t, y, y0, c, ma, mb):
    """Crystallized fraction from t and y (explicit mass balance)."""
    return c * (mb * t + (ma - mb) * (y0 - (1.0 - t) * y))


def _t_of_f(f, y, y0, c, ma, mb):
    """Inverse of :func:`_f_of_t` in t at given y."""
    return (f / c - (ma - mb) * (y0 - y)) / (mb + (ma - mb) * y)


def _dtdw(t, y, k, r):
    """dt/dw with w = ln(y0/y) (from the linear ODE for t(y))."""
    den = k + (1.0 - k) * y
    fp = k / (den * den)
    return (1.0 + t * (r * fp - 1.0)) * den / ((1.0 - k) * (1.0 - y))


def _dfdw(t, tw, y, c, ma, mb):
    """dF/dw at given t, dt/dw and y."""
    return c * (mb * tw + (ma - mb) * y * (tw + 1.0 - t))


def _w_lower_bound(f_end, y0, k, c, ma, mb):
    r"""Return w reached at F = f_end in the fractional limit (a bound for every r).

    Retained crystals buffer the melt, so at a given F the melt ratio moves
    least for r = 1 and most for r = 0; the fractional path therefore bounds
    the range of w needed for any r. Newton iteration on
    :math:`H(w) = -\ln(F_{max} - F_0(w))`, which is nearly linear in w both
    near the start and towards exhaustion, using the explicit r = 0 relation;
    vectorised over parameter sets.
    """
    f_cap = c * (mb + (ma - mb) * y0)
    target = -np.log(f_cap - f_end)
    w = np.zeros_like(f_end)
    for _ in range(40):
        y = y0 * np.exp(-w)
        t = rayleigh_exchange_t(y, y0, k)
        fw = _f_of_t(t, y, y0, c, ma, mb)
        dl = (1.0 + y / ((1.0 - y) * k)) / (1.0 - 1.0 / k)  # d ln(1-t)/dw
        dfw = _dfdw(t, -(1.0 - t) * dl, y, c, ma, mb)
        gap = f_cap - fw
        resid = -np.log(gap) - target
        if np.all(np.abs(resid) <= 1e-12):
            break
        w = np.maximum(w - resid * gap / dfw, 0.5 * w)
    # Slight overshoot so that the grid surely covers f_end.
    return w * (1.0 + 1e-6) + 1e-12


def exchange_grid(f_end, y0, k, r, s0, sites, ma, mb, *, n_intervals=N_INTERVALS,
                  n_gauss=N_GAUSS, w_end=None):
    r"""Integrate t on a grid uniform in w = ln(y0/y) up to F = ``f_end``.

    Parameters
    ----------
    f_end : ndarray, shape (m, 1)
        Largest crystallized fraction needed per parameter set [fraction];
        must be below the exhaustion limit.
    y0 : ndarray, shape (m, 1)
        Initial melt ratio [fraction], already swapped so that K < 1.
    k : ndarray, shape (m, 1)
        Kernel exchange coefficient, 0 < K < 1 [1].
    r : ndarray, shape (m, 1)
        Retention [fraction].
    s0 : ndarray, shape (m, 1)
        Exchange cations in 100 g of initial melt [mol].
    sites : int
        Exchange cations per formula unit.
    ma, mb : ndarray or float
        End-member molar masses (swapped with y) [g/mol].
    n_intervals, n_gauss : int
        Grid intervals and Gauss-Legendre nodes per interval.
    w_end : ndarray, shape (m, 1), optional
        End of the grid in w; default the fractional-limit bound, which
        covers ``f_end`` for every r.

    Returns
    -------
    dict
        ``w`` (m, N+1), ``y``, ``t``, ``f``, ``dfdw``, ``dtdw`` at the nodes and
        ``h`` (m, 1), the grid step in w.
    """
    c = s0 / (100.0 * sites)
    if w_end is None:
        w_end = _w_lower_bound(f_end, y0, k, c, ma, mb)
    n = n_intervals
    frac = np.arange(n + 1) / n
    w = w_end * frac  # (m, N+1)
    h = w_end / n  # (m, 1)
    y = y0 * np.exp(-w)
    p = (r - k) / (1.0 - k)
    q = (1.0 - r * k) / (1.0 - k)
    l1y = np.log1p(-y)
    lden = np.log(k + (1.0 - k) * y)
    # ln mu at nodes (relative to an arbitrary constant)
    lmu = -p * w + q * l1y - r * lden
    # Gauss-Legendre nodes inside each interval, shape (m, N, G)
    xi, om = _gauss01(n_gauss)
    dw_right = (h * (1.0 - xi))[:, None, :]  # (m, 1, G)
    # w at the GL points measured back from the right node: w_g = w_{i+1} - dw_right
    eta = y[:, 1:, None] * np.exp(dw_right)
    l1eta = np.log1p(-eta)
    den_eta = k[:, :, None] + (1.0 - k[:, :, None]) * eta
    delta = (
        p[:, :, None] * dw_right
        + q[:, :, None] * (l1eta - l1y[:, 1:, None])
        - r[:, :, None] * (np.log(den_eta) - lden[:, 1:, None])
    )
    integrand = np.exp(delta) * den_eta / ((1.0 - k[:, :, None]) * (1.0 - eta))
    interval = h * (integrand @ om)  # (m, N): int over interval of mu/mu(right) * (-eta/g) dw
    # t_j = sum_{i<j} I_i exp(L_{i+1} - L_j)
    shift = np.max(lmu[:, 1:], axis=1, keepdims=True)
    with np.errstate(over="ignore", invalid="ignore"):
        acc = np.cumsum(interval * np.exp(lmu[:, 1:] - shift), axis=1)
        t_in = acc * np.exp(shift - lmu[:, 1:])
    if not np.all(np.isfinite(t_in)):
        # Very wide range of mu: fall back to the sequential recurrence.
        t_in = np.empty_like(interval)
        prev = np.zeros_like(interval[:, 0])
        for j in range(n):
            prev = prev * np.exp(lmu[:, j] - lmu[:, j + 1]) + interval[:, j]
            t_in[:, j] = prev
    t = np.concatenate([np.zeros_like(y[:, :1]), t_in], axis=1)
    f = _f_of_t(t, y, y0, c, ma, mb)
    tw = _dtdw(t, y, k, r)
    dfdw = _dfdw(t, tw, y, c, ma, mb)
    return {"w": w, "y": y, "t": t, "f": f, "dfdw": dfdw, "dtdw": tw, "h": h}


def _t_exact(w_pt, w_left, t_left, y0, k, r, n_gauss):
    """Return t at arbitrary w by quadrature from the grid node to its left."""
    y_pt = y0 * np.exp(-w_pt)
    y_left = y0 * np.exp(-w_left)
    dw = w_pt - w_left  # may be slightly negative after interpolation
    one_k = 1.0 - k
    p = (r - k) / one_k
    q = (1.0 - r * k) / one_k
    one_y = 1.0 - y_pt
    den = k + one_k * y_pt
    xi, om = _gauss01(n_gauss)
    back = dw[..., None] * (1.0 - xi)
    eta = y_pt[..., None] * np.exp(back)
    one_eta = 1.0 - eta
    den_eta = k[..., None] + one_k[..., None] * eta
    delta = (
        p[..., None] * back
        + q[..., None] * np.log(one_eta / one_y[..., None])
        - r[..., None] * np.log(den_eta / den[..., None])
    )
    integrand = np.exp(delta) * den_eta / one_eta
    part = dw / one_k * (integrand @ om)
    # mu(left)/mu(pt)
    ratio = np.exp(p * dw + q * np.log((1.0 - y_left) / one_y)
                   - r * np.log((k + one_k * y_left) / den))
    return t_left * ratio + part


def _hermite_w(f, grid):
    """Cubic Hermite inverse interpolation of w(F) on the grid nodes."""
    fn = grid["f"]
    j = np.sum(fn[:, None, 1:-1] <= f[:, :, None], axis=2)
    flat = j + (np.arange(fn.shape[0]) * fn.shape[1])[:, None]
    f_a = _gather(fn, flat)
    f_b = _gather(fn, flat + 1)
    w_a = _gather(grid["w"], flat)
    w_b = _gather(grid["w"], flat + 1)
    s_a = 1.0 / _gather(grid["dfdw"], flat)
    s_b = 1.0 / _gather(grid["dfdw"], flat + 1)
    df = f_b - f_a
    u = (f - f_a) / df
    u2 = u * u
    u3 = u2 * u
    w = (
        (2 * u3 - 3 * u2 + 1) * w_a
        + (u3 - 2 * u2 + u) * df * s_a
        + (-2 * u3 + 3 * u2) * w_b
        + (u3 - u2) * df * s_b
    )
    return w, (flat, w_a)


def exchange_invert(f, grid, y0, k, r, s0, sites, ma, mb, *, n_gauss=N_GAUSS, polish=True):
    """Melt ratio y and cation fraction t at requested crystallized fractions.

    Parameters
    ----------
    f : ndarray, shape (m, n)
        Crystallized fractions [fraction], each row within the row's grid.
    grid : dict
        Output of :func:`exchange_grid`.
    y0, k, r, s0 : ndarray, shape (m, 1)
        As in :func:`exchange_grid` (swapped so that K < 1).
    sites : int
        Exchange cations per formula unit.
    ma, mb : ndarray or float
        End-member molar masses [g/mol].
    n_gauss : int
        Gauss-Legendre nodes of the polishing quadrature.
    polish : bool
        Apply one Newton step on the exact F(y).

    Returns
    -------
    y, t, w : ndarray, shape (m, n)
        Melt ratio, cation fraction crystallized and w = ln(y0/y).
    flat : ndarray of int, shape (m, n)
        Flat index of the grid node at the left of each point.
    """
    c = s0 / (100.0 * sites)
    w, (flat, w_a) = _hermite_w(f, grid)
    if polish:
        t_ex = _t_exact(w, w_a, _gather(grid["t"], flat), y0, k, r, n_gauss)
        y = y0 * np.exp(-w)
        f_ex = _f_of_t(t_ex, y, y0, c, ma, mb)
        tw = _dtdw(t_ex, y, k, r)
        dfw = _dfdw(t_ex, tw, y, c, ma, mb)
        w = w + (f - f_ex) / dfw
    y = y0 * np.exp(-w)
    t = _t_of_f(f, y, y0, c, ma, mb)
    return y, t, w, flat


def exchange_path(f, y0, kd_kernel, r, s0, sites, ma, mb, *, n_intervals=N_INTERVALS,
                  n_gauss=N_GAUSS, polish=True):
    """Melt ratio and cation fraction along a retention crystallization path.

    Handles any K > 0 by swapping the pair where K > 1 and clamping
    ``|1 - K| >= K_EPS``.

    Parameters
    ----------
    f : ndarray, shape (m, n)
        Crystallized mass fractions [fraction]; must lie below
        :func:`exhaustion_fraction` of each row.
    y0 : ndarray, shape (m, 1)
        Initial melt ratio A/(A+B) [fraction].
    kd_kernel : ndarray, shape (m, 1)
        Kernel exchange coefficient K [1].
    r : ndarray, shape (m, 1)
        Retention [fraction].
    s0 : ndarray, shape (m, 1)
        Exchange cations in 100 g of initial melt [mol].
    sites : int
        Exchange cations per formula unit.
    ma, mb : float
        End-member molar masses [g/mol] (A = compatible-cation end-member for K < 1).
    n_intervals, n_gauss : int
        Grid resolution.
    polish : bool
        One Newton step on the exact F(y) after interpolation.

    Returns
    -------
    dict
        ``y`` and ``t`` (m, n) in the original orientation, plus ``grid``,
        ``swap`` (m, 1) bool, and the swapped ``y0s``, ``ks``, ``mas``, ``mbs``
        used by :func:`trace_log_ratio`.
    """
    k = np.asarray(kd_kernel, dtype=float)
    swap = k > 1.0
    ks = np.where(swap, 1.0 / k, k)
    ks = np.minimum(ks, 1.0 - K_EPS)
    y0s = np.where(swap, 1.0 - y0, y0)
    mas = np.where(swap, mb, ma)
    mbs = np.where(swap, ma, mb)
    f_end = np.max(f, axis=1, keepdims=True)
    f_end = np.maximum(f_end, 1e-12)
    # Pass 1: coarse grid up to the fractional-limit bound, to locate the end
    # of the actual path; pass 2: the working grid up to just beyond it.
    coarse = exchange_grid(f_end, y0s, ks, r, s0, sites, mas, mbs, n_intervals=N_COARSE,
                           n_gauss=n_gauss)
    w_r, _ = _hermite_w(f_end, coarse)
    w_end = np.minimum(w_r * 1.02 + 1e-12, coarse["w"][:, -1:])
    grid = exchange_grid(f_end, y0s, ks, r, s0, sites, mas, mbs, n_intervals=n_intervals,
                         n_gauss=n_gauss, w_end=w_end)
    short = grid["f"][:, -1:] < f_end
    if np.any(short):  # coarse estimate too low (not expected): use the safe bound
        w_end = np.where(short, coarse["w"][:, -1:], w_end)
        grid = exchange_grid(f_end, y0s, ks, r, s0, sites, mas, mbs,
                             n_intervals=n_intervals, n_gauss=n_gauss, w_end=w_end)
    ys, t, w_pt, flat = exchange_invert(f, grid, y0s, ks, r, s0, sites, mas, mbs,
                               n_gauss=n_gauss, polish=polish)
    y = np.where(swap, 1.0 - ys, ys)
    return {"y": y, "t": t, "ys": ys, "w": w_pt, "flat": flat, "grid": grid, "swap": swap,
            "y0s": y0s, "ks": ks, "mas": mas, "mbs": mbs}


def exhaustion_fraction(y0, s0, sites, ma, mb):
    r"""Crystallized fraction at which the exchange cations are used up [fraction].

    .. math:: F_{max} = \frac{S_0}{100 s}\left[M_B + (M_A - M_B) y_0\right]

    Parameters
    ----------
    y0 : ndarray
        Initial melt ratio [fraction].
    s0 : ndarray
        Exchange cations in 100 g of melt [mol].
    sites : int
        Exchange cations per formula unit.
    ma, mb : float
        End-member molar masses [g/mol].

    Returns
    -------
    ndarray
        F_max [fraction].
    """
    return s0 / (100.0 * sites) * (mb + (ma - mb) * y0)


def _trace_terms(w, t, ks, r, s0, sites, y0s, mas, mbs, swap, law, f=None):
    """Trace-budget terms at points given w and t (swapped orientation)."""
    c = s0 / (100.0 * sites)
    ys = y0s * np.exp(-w)
    if f is None:
        f = _f_of_t(t, ys, y0s, c, mas, mbs)
    tw = _dtdw(t, ys, ks, r)
    fw = _dfdw(t, tw, ys, c, mas, mbs)
    den = ks + (1.0 - ks) * ys
    xs = ys / den
    xs_w = -ys * ks / (den * den)  # dX/dw = f'(y) dy/dw, dy/dw = -y
    mf = mbs + (mas - mbs) * xs  # formula-unit mass of the retained crystal
    m_ret = r * (s0 / sites) * t * mf
    m_iso_w = 100.0 * fw - r * (s0 / sites) * (tw * mf + t * (mas - mbs) * xs_w)
    y_orig = np.where(swap, 1.0 - ys, ys)
    x_orig = np.where(swap, 1.0 - xs, xs)
    d = law(y_orig, t, x_orig, f)
    wgt = 100.0 * (1.0 - f) + d * m_ret
    return d, wgt, d / wgt * m_iso_w


def trace_log_ratio(path, law, s0, sites, r, f, *, n_gauss=N_GAUSS):
    r"""ln(C_L / C_0) of a trace element at the requested points.

    Wt-based mass balance with retention: the exchanging total is
    :math:`T = c_L (M_L + D M_{ret})` and isolated crystal takes
    :math:`dT = -D c_L\,dm_{iso}`, so

    .. math:: \ln\frac{c_L}{c_0} = -\ln\frac{W}{W_0} - \int_0 \frac{D}{W}\,dm_{iso},
              \qquad W = M_L + D M_{ret}

    D may vary along the path. The integral is accumulated over the grid
    intervals by Gauss-Legendre quadrature (t at the quadrature points from
    the exact solution) and interpolated to the points by cubic Hermite
    interpolation with its exact derivative; W is evaluated at the points.

    Parameters
    ----------
    path : dict
        Output of :func:`exchange_path`.
    law : callable
        ``law(y, t, x, f) -> D`` (original orientation of y and x).
    s0 : ndarray, shape (m, 1)
        Exchange cations in 100 g of initial melt [mol].
    sites : int
        Exchange cations per formula unit.
    r : ndarray, shape (m, 1)
        Retention [fraction].
    f : ndarray, shape (m, n)
        The requested crystallized fractions [fraction].
    n_gauss : int
        Quadrature nodes per interval.

    Returns
    -------
    ln_ratio, d : ndarray, shape (m, n)
        ln(C_L/C_0) and D at the points.
    """
    g = path["grid"]
    ks, mas, mbs, y0s, swap = path["ks"], path["mas"], path["mbs"], path["y0s"], path["swap"]
    args = (ks, r, s0, sites, y0s, mas, mbs, swap, law)
    with np.errstate(all="ignore"):
        # quadrature points inside each grid interval, shape (m, N, G)
        xi, om = _gauss01(n_gauss)
        w_left = g["w"][:, :-1, None]
        dw = (g["h"] * xi)[:, None, :]
        w_q = w_left + dw
        t_q = _t_exact(w_q, w_left + 0 * dw, g["t"][:, :-1, None] + 0 * dw,
                       y0s[..., None], ks[..., None], r[..., None], n_gauss)
        qargs = tuple(a[..., None] if isinstance(a, np.ndarray) else a for a in args)
        _, _, integrand_q = _trace_terms(w_q, t_q, *qargs)
        parts = g["h"] * (integrand_q @ om)  # (m, N)
        cum = np.concatenate([np.zeros_like(parts[:, :1]), np.cumsum(parts, axis=1)], axis=1)
        _, _, integrand_nodes = _trace_terms(g["w"], g["t"], *args, f=g["f"])
        # Hermite interpolation of the integral to the points
        flat = path["flat"]
        wa = _gather(g["w"], flat)
        h = g["h"]
        u = (path["w"] - wa) / h
        u2 = u * u
        u3 = u2 * u
        integral = (
            (2 * u3 - 3 * u2 + 1) * _gather(cum, flat)
            + (u3 - 2 * u2 + u) * h * _gather(integrand_nodes, flat)
            + (-2 * u3 + 3 * u2) * _gather(cum, flat + 1)
            + (u3 - u2) * h * _gather(integrand_nodes, flat + 1)
        )
        d_pt, w_pt, _ = _trace_terms(path["w"], path["t"], *args, f=f)
        out = -np.log(w_pt / 100.0) - integral
    return out, d_pt
