import sys
from pathlib import Path

import numpy as np
import pytest
from numpy.testing import assert_allclose
from scipy.integrate import quad, solve_ivp
from scipy.optimize import brentq

from zoning.exceptions import ModelDomainError
from zoning.loops import (
    ANORTHITE_ALBITE,
    FORSTERITE_FAYALITE,
    BinaryLoop,
    EndMember,
    LoopModel,
    loop_path,
)
from zoning.redox import MOLAR_MASS

sys.path.insert(0, str(Path(__file__).resolve().parent))
from _tolerances import ATOL_MASS_BALANCE, RTOL_IDENTITY  # noqa: E402

# Derived table values are quoted to 0.1 °C and 3 decimals of mole fraction.
ATOL_TABLE_C = 0.051
ATOL_TABLE_X = 0.00051
ATOL_TABLE_KD = 0.00051
# Path integration against independent quadrature / ODE solutions [mol%].
ATOL_PATH_MOL_PCT = 1e-7

FO, FA = FORSTERITE_FAYALITE.high, FORSTERITE_FAYALITE.low
# Loops with exactly the end-member data used for the derived tables
# (T in K: Fo 2163, Fa 1478.15, An 1830, Ab 1373).
OL_TABLE = BinaryLoop(
    "ol", "olivine",
    EndMember("Fo", 2163 - 273.15, 142e3, FO.oxides, "derived-table settings"),
    EndMember("Fa", 1205.0, 89.3e3, FA.oxides, "derived-table settings"),
    sites=2,
)
OL_MOLECULAR = BinaryLoop("ol1", "olivine", OL_TABLE.high, OL_TABLE.low, sites=1)
PL_TABLE = BinaryLoop(
    "pl", "plagioclase",
    EndMember("An", 1830 - 273.15, 135.6e3, ANORTHITE_ALBITE.high.oxides, "derived-table"),
    EndMember("Ab", 1373 - 273.15, 62.8e3, ANORTHITE_ALBITE.low.oxides, "derived-table"),
    sites=1,
)


@pytest.mark.parametrize(
    ("loop", "t_high", "t_low"),
    [
        # Bowen & Schairer (1935): Fo 1890 °C, Fa 1205 °C (from memory).
        (FORSTERITE_FAYALITE, 1890.0, 1205.0),
        # Bowen (1913): An 1553 °C; Ab 1100 °C (extrapolated, from memory).
        (ANORTHITE_ALBITE, 1553.0, 1100.0),
    ],
)
def test_end_member_melting_points_exact(loop, t_high, t_low):
    x_l, x_s = loop.tie_line([t_high, t_low])
    assert_allclose(x_l, [1.0, 0.0], rtol=0, atol=1e-15)
    assert_allclose(x_s, [1.0, 0.0], rtol=0, atol=1e-15)
    assert loop.liquidus_c(1.0) == t_high
    assert loop.solidus_c(0.0) == t_low
    # the loop closes onto the end-member points from inside
    assert loop.liquidus_c(1 - 1e-9) == pytest.approx(t_high, abs=1e-3)
    assert loop.solidus_c(1e-9) == pytest.approx(t_low, abs=1e-3)


def test_olivine_loop_kd_consistent_with_roeder_emslie():
    # Roeder & Emslie (1970): K_D(Fe-Mg) = 0.30 +/- 0.03; the per-cation ideal loop
    # gives 0.22-0.31 at the liquidus (derived; issue acceptance range) for liquids with
    # Mg# 0.2-0.85; towards pure forsterite the implied value rises to about 0.33.
    x = np.linspace(0.2, 0.85, 14)
    kd = FORSTERITE_FAYALITE.implied_kd(FORSTERITE_FAYALITE.liquidus_c(x))
    assert np.all((kd >= 0.22) & (kd <= 0.31))
    # K_D = (Fe/Mg)_S / (Fe/Mg)_L from the tie lines (definition).
    t = FORSTERITE_FAYALITE.liquidus_c(x)
    x_l, x_s = FORSTERITE_FAYALITE.tie_line(t)
    assert_allclose(kd, ((1 - x_s) / x_s) / ((1 - x_l) / x_l), rtol=1e-10)


def test_fa40_liquid_first_olivine():
    # Common statement for the Bowen & Schairer (1935) loop: a liquid with 40 mol%
    # fayalite first crystallizes olivine of about Fo85-95. The statement is
    # approximate; the ideal per-cation model gives Fo84.3, so the window is widened
    # by 2 mol% on the low side.
    t = FORSTERITE_FAYALITE.liquidus_c(0.6)
    _, x_s = FORSTERITE_FAYALITE.tie_line(t)
    assert 83.0 <= 100 * x_s <= 95.0


@pytest.mark.parametrize(
    ("loop", "x", "liquidus", "first_solid", "solidus", "kd"),
    [
        # Derived with this ideal model (science reference tables, n = 2), not data.
        (OL_TABLE, 0.2, 1460.5, 0.532, 1281.8, 0.220),
        (OL_TABLE, 0.5, 1665.7, 0.789, 1439.8, 0.267),
        (OL_TABLE, 0.8, 1810.2, 0.930, 1676.0, 0.299),
        # n = 1 (molecular) variant: the unrealistically wide loop.
        (OL_MOLECULAR, 0.2, 1565.0, 0.807, 1250.3, 0.060),
        (OL_MOLECULAR, 0.5, 1733.2, 0.926, 1351.7, 0.080),
        (OL_MOLECULAR, 0.8, 1836.4, 0.977, 1557.2, 0.093),
        # Plagioclase, molecular mixing.
        (PL_TABLE, 0.2, 1343.0, 0.650, 1153.5, None),
        (PL_TABLE, 0.5, 1456.4, 0.839, 1266.5, None),
        (PL_TABLE, 0.8, 1523.2, 0.945, 1431.8, None),
    ],
)
def test_derived_loop_tables(loop, x, liquidus, first_solid, solidus, kd):
    t = loop.liquidus_c(x)
    assert t == pytest.approx(liquidus, abs=ATOL_TABLE_C)
    x_l, x_s = loop.tie_line(t)
    assert x_l == pytest.approx(x, abs=1e-12)
    assert x_s == pytest.approx(first_solid, abs=ATOL_TABLE_X)
    assert loop.solidus_c(x) == pytest.approx(solidus, abs=ATOL_TABLE_C)
    if kd is not None:
        assert loop.implied_kd(t) == pytest.approx(kd, abs=ATOL_TABLE_KD)


@pytest.mark.parametrize(
    ("loop", "t", "x_l", "x_s"),
    [
        # Derived tie lines (science reference tables), not data.
        (OL_TABLE, 1300.0, 0.055, 0.241),
        (OL_TABLE, 1500.0, 0.247, 0.589),
        (OL_TABLE, 1700.0, 0.564, 0.825),
        (PL_TABLE, 1200.0, 0.039, 0.339),
        (PL_TABLE, 1300.0, 0.133, 0.569),
        (PL_TABLE, 1400.0, 0.324, 0.748),
        (PL_TABLE, 1500.0, 0.683, 0.908),
    ],
)
def test_derived_tie_lines(loop, t, x_l, x_s):
    got_l, got_s = loop.tie_line(t)
    assert got_l == pytest.approx(x_l, abs=ATOL_TABLE_X)
    assert got_s == pytest.approx(x_s, abs=ATOL_TABLE_X)


def test_curves_are_monotone_and_solidus_below_liquidus():
    c = FORSTERITE_FAYALITE.curves(101)
    assert np.all(np.diff(c["x_liquid"]) > 0)
    assert np.all(np.diff(c["x_solid"]) > 0)
    assert np.all(c["x_solid"][1:-1] > c["x_liquid"][1:-1])


def _mass(loop, x):
    return x * loop.high.molar_mass + (1 - x) * loop.low.molar_mass


@pytest.mark.parametrize("loop", [FORSTERITE_FAYALITE, ANORTHITE_ALBITE])
def test_equilibrium_path_is_the_lever_rule(loop):
    # r = 1 against the lever rule solved independently with brentq.
    x0 = 0.55
    fq = np.array([0.05, 0.3, 0.6, 0.9, 0.999])
    t_s, t_l = loop.solidus_c(x0), loop.liquidus_c(x0)

    def f_lever(t):
        xl, xs = loop.tie_line(t)
        return float(1 - (1 - (x0 - xl) / (xs - xl)) * _mass(loop, xl) / _mass(loop, x0))

    expected = [
        loop.tie_line(brentq(lambda t, v=v: f_lever(t) - v, t_s, t_l, xtol=1e-13))[1]
        for v in fq
    ]
    got = loop.path(fq, x0, 1.0)
    assert_allclose(100 * got["x_solid"], 100 * np.array(expected), rtol=0, atol=ATOL_PATH_MOL_PCT)
    # ends exactly at the solidus of the bulk with the last solid = bulk
    end = loop.path(np.array([1.0]), x0, 1.0)
    assert end["temperature_c"][0] == pytest.approx(t_s, abs=1e-6)
    assert end["x_solid"][0] == pytest.approx(x0, abs=1e-10)


def _loop_closed_form(loop, t_c):
    """Independent evaluation of the ideal loop equations (complex-safe)."""
    t = t_c + 273.15
    r_gas = 8.314462618
    k_a = np.exp(loop.high.fusion_enthalpy_j / (loop.sites * r_gas)
                 * (1 / t - 1 / (loop.high.melting_c + 273.15)))
    k_b = np.exp(loop.low.fusion_enthalpy_j / (loop.sites * r_gas)
                 * (1 / t - 1 / (loop.low.melting_c + 273.15)))
    x_l = (1 - k_b) / (k_a - k_b)
    return x_l, k_a * x_l


def test_fractional_path_against_quadrature():
    # r = 0: ln(melt moles) = int dX_L / (X_S - X_L) (Rayleigh-type closed form),
    # integrated over T with scipy.integrate.quad; dX_L/dT by complex step; the loop
    # equations re-implemented here; F inverted with brentq.
    # The integrand grows without bound towards the low-melting end member (F -> 1),
    # so the integral is split at the nodes of a temperature grid that stops well
    # short of it, and each F is bracketed on that grid before brentq refines it.
    # Every quad call then has a smooth, bounded integrand on a short interval.
    loop = FORSTERITE_FAYALITE
    x0 = 0.6
    t_l = brentq(lambda t: _loop_closed_form(loop, t)[0] - x0, 1206.0, 1889.0, xtol=1e-13)

    def integrand(t):
        xl, xs = _loop_closed_form(loop, t)
        dxl = _loop_closed_form(loop, complex(t, 1e-20))[0].imag / 1e-20
        return dxl / (xs - xl)

    def f_of(t, t_start, log_n_start):
        val, _ = quad(integrand, t_start, t, epsabs=1e-13, epsrel=1e-12, limit=200)
        xl, _ = _loop_closed_form(loop, t)
        return float(1 - np.exp(log_n_start + val) * _mass(loop, xl) / _mass(loop, x0))

    fq = np.array([0.1, 0.4, 0.7, 0.9])
    # nodes closer together towards the fayalite end (geometric in T - T_Fa)
    nodes = loop.low.melting_c + np.geomspace(t_l - loop.low.melting_c, 0.5, 241)
    log_n = np.zeros(nodes.size)
    for i in range(1, nodes.size):
        step, _ = quad(integrand, nodes[i - 1], nodes[i], epsabs=1e-13, epsrel=1e-12, limit=200)
        log_n[i] = log_n[i - 1] + step
    f_nodes = np.array([f_of(t, t, ln) for t, ln in zip(nodes, log_n, strict=True)])
    assert np.all(np.diff(f_nodes) > 0) and f_nodes[-1] > fq.max()
    expected = []
    for v in fq:
        i = int(np.searchsorted(f_nodes, v))  # f_nodes[i - 1] < v <= f_nodes[i]
        t_star = brentq(lambda t, v=v, i=i: f_of(t, nodes[i - 1], log_n[i - 1]) - v,
                        nodes[i], nodes[i - 1], xtol=1e-12)
        expected.append(_loop_closed_form(loop, t_star)[1])
    got = loop.path(fq, x0, 0.0)
    assert_allclose(100 * got["x_solid"], 100 * np.array(expected), rtol=0, atol=ATOL_PATH_MOL_PCT)


def test_intermediate_retention_against_solve_ivp():
    # General r: the ODE dn_c/dT = -[(1 - n_c) X_L' + r n_c X_S'] / (X_S - X_L)
    # integrated with scipy's DOP853 in T (derivatives by central differences of the
    # tie line, independent of the module's analytic ones).
    loop = FORSTERITE_FAYALITE
    x0, r = 0.6, 0.5
    grid = loop.path_grid(x0, r)
    keep = grid["melt_moles"][0] > 0.05
    t_eval = grid["temperature_c"][0][keep]

    def rhs(t, y):
        h = 1e-4
        xl, xs = loop.tie_line(t)
        xl1, xs1 = loop.tie_line(t + h)
        xl0, xs0 = loop.tie_line(t - h)
        dxl, dxs = (xl1 - xl0) / (2 * h), (xs1 - xs0) / (2 * h)
        return [-((1 - y[0]) * dxl + r * y[0] * dxs) / (xs - xl)]

    sol = solve_ivp(rhs, (t_eval[0], t_eval[-1]), [0.0], t_eval=t_eval, method="DOP853",
                    rtol=1e-11, atol=1e-13)
    assert_allclose(1 - sol.y[0], grid["melt_moles"][0][keep], rtol=0, atol=1e-7)


@pytest.mark.parametrize("r", [0.0, 0.25, 0.5, 0.75, 1.0])
def test_mass_balance_closes(r):
    # melt + retained + isolated = bulk, for the high-melting component; the isolated
    # part is integrated separately from the melt.
    x0 = 0.6
    g = FORSTERITE_FAYALITE.path_grid(x0, r)
    n_l = g["melt_moles"][0]
    total = n_l * g["x_liquid"][0] + r * (1 - n_l) * g["x_solid"][0] + g["isolated_high"][0]
    assert_allclose(total, x0, rtol=0, atol=ATOL_MASS_BALANCE)
    assert np.all(np.diff(g["f"][0]) >= 0)


def test_fractionation_goes_beyond_the_equilibrium_end_point():
    # Classic outcome (Bowen 1913; Bowen & Schairer 1935): fractional crystallization
    # drives the last liquid and last solid beyond the equilibrium end-point.
    for loop in (FORSTERITE_FAYALITE, ANORTHITE_ALBITE):
        x0 = 0.6
        r = np.array([0.0, 0.25, 0.5, 0.75, 1.0])
        end = loop.path(np.array([1.0]), np.full(5, x0), r)
        last_liquid = end["x_liquid"][:, 0]
        last_solid = end["x_solid"][:, 0]
        last_t = end["temperature_c"][:, 0]
        assert np.all(np.diff(last_liquid) > 0)
        assert np.all(np.diff(last_solid) > 0)
        assert np.all(np.diff(last_t) > 0)
        assert last_t[0] == pytest.approx(loop.low.melting_c, abs=1e-6)
        assert last_solid[0] < 1e-6 < last_solid[-1] == pytest.approx(x0, abs=1e-10)


def test_loop_path_keys_and_melt_oxides():
    out = loop_path("olivine", np.array([0.0, 0.5]), melt_mg_number=0.6, retention=0.0)
    assert set(out) == {"f", "crystal", "melt_ratio", "melt_mgo_wt", "melt_feo_wt",
                        "temperature_c"}
    # Pure Mg2SiO4-Fe2SiO4 melt at X = 0.6: MgO = 2*0.6*M(MgO) / (molar mass) (hand).
    mgo, feo, sio2 = MOLAR_MASS["MgO"], MOLAR_MASS["FeO"], MOLAR_MASS["SiO2"]
    mass = 2 * 0.6 * mgo + 2 * 0.4 * feo + sio2
    assert out["melt_mgo_wt"][0] == pytest.approx(100 * 2 * 0.6 * mgo / mass, rel=1e-12)
    assert out["melt_feo_wt"][0] == pytest.approx(100 * 2 * 0.4 * feo / mass, rel=1e-12)
    pl = loop_path("plagioclase", np.array([0.0]), melt_ca_number=0.5)
    assert set(pl) >= {"melt_cao_wt", "melt_na2o_wt"}
    # An50 melt (hand): CaO 0.5*56.0774, Na2O 0.25*61.9789 per (0.5 An + 0.5 Ab).
    m = 0.5 * 278.2072 + 0.5 * 262.2230
    assert pl["melt_cao_wt"][0] == pytest.approx(100 * 0.5 * 56.0774 / m, rel=1e-4)
    assert pl["melt_na2o_wt"][0] == pytest.approx(100 * 0.25 * 61.9789 / m, rel=1e-4)


def test_vectorised_matches_single_sets():
    f = np.linspace(0, 0.95, 7)
    mg = np.array([0.5, 0.7, 0.9])
    r = np.array([0.0, 0.4, 1.0])
    many = loop_path("olivine", f, melt_mg_number=mg, retention=r)
    for i in range(3):
        one = loop_path("olivine", f, melt_mg_number=mg[i], retention=r[i])
        assert_allclose(many["crystal"][i], one["crystal"], rtol=RTOL_IDENTITY, atol=1e-12)


def test_loop_model_profile_uses_growth_geometry():
    model = LoopModel("olivine")
    names = model.parameter_names
    assert names == ("melt_mg_number", "f_rim", "retention", "f_core", "growth_exponent",
                     "core_offset_um")
    x = np.linspace(0, 200, 9)
    prof = model.profile(x, 200.0, melt_mg_number=0.7, f_rim=0.6, retention=0.3)
    f_expected = 0.6 * (x / 200.0) ** 3  # self-similar growth, sphere
    assert_allclose(prof["f"], f_expected, rtol=1e-12)
    direct = model.path(f_expected, melt_mg_number=0.7, retention=0.3)
    assert_allclose(prof["crystal"], direct["crystal"], rtol=1e-12)
    assert np.all(np.diff(prof["crystal"]) <= 0)  # normal zoning, core to rim


def test_errors():
    with pytest.raises(ModelDomainError, match="between the end-member melting points"):
        FORSTERITE_FAYALITE.tie_line(2000.0)
    with pytest.raises(ModelDomainError, match="retention must lie in"):
        FORSTERITE_FAYALITE.path([0.1], 0.5, 1.5)
    with pytest.raises(ModelDomainError, match="strictly between 0 and 1"):
        FORSTERITE_FAYALITE.path([0.1], 1.0, 0.0)
    with pytest.raises(ModelDomainError, match="needs exactly the bulk ratio 'melt_ca_number'"):
        loop_path("plagioclase", [0.1], melt_mg_number=0.5)
    with pytest.raises(ModelDomainError, match="unknown mineral 'pyroxene'"):
        LoopModel("pyroxene")
