"""Diffusion after growth and sectioning: closed forms, conservation, limits, contracts."""

import sys
import warnings
from pathlib import Path

import numpy as np
import pytest
from numpy.testing import assert_allclose
from scipy.integrate import solve_ivp
from scipy.sparse import diags
from scipy.special import j0, j1, jn_zeros

from zoning import ConstantPartitionModel, CrystallizationModel, ModelDomainError
from zoning.diffusion import (
    MAX_DIFFUSION_LENGTH_UM,
    OLIVINE_DIFFUSIVITY_RATIOS,
    d_femg_olivine,
    d_mg_plagioclase,
    d_sr_plagioclase,
    diffusion_time_days,
    direction_weights,
    grid_interpolation,
    radial_grid,
    relax,
)
from zoning.exceptions import CalibrationRangeWarning
from zoning.geometry import true_radius, zone_fraction
from zoning.partitioning import PLAGIOCLASE_TRACE_COEFFICIENTS, R_GAS

sys.path.insert(0, str(Path(__file__).resolve().parent))
from _tolerances import (  # noqa: E402
    ATOL_CONSERVED,
    ATOL_DIFFUSION_FO,
    ATOL_DIFFUSION_STEP,
    RTOL_IDENTITY,
)

MELT = {"SiO2": 49.0, "MgO": 10.0, "FeO": 10.0, "CaO": 11.0, "Na2O": 2.3}
PLAG_MELT = {"CaO": 9.0, "Na2O": 3.5}

# the Ni and plagioclase laws are used beyond their calibration ranges in some
# of these synthetic crystals; the warnings are tested in test_models.py
pytestmark = pytest.mark.filterwarnings("ignore::zoning.exceptions.CalibrationRangeWarning")


# ---------------------------------------------------------------- closed forms
def crank_sphere(r, tau, terms=400):
    """Crank (1975) eq. 6.18: sphere, uniform C1 = 0, surface held at C0 = 1."""
    n = np.arange(1, terms)[:, None]
    r = np.maximum(r, 1e-12)
    series = ((-1.0) ** n / n) * np.sin(n * np.pi * r) * np.exp(-(n * np.pi) ** 2 * tau)
    return 1.0 + (2.0 / (np.pi * r)) * series.sum(axis=0)


def crank_slab(x, tau, terms=400):
    """Crank (1975) eq. 4.17: slab -1 < x < 1, uniform C1 = 0, surfaces at C0 = 1."""
    n = np.arange(terms)[:, None]
    k = (2 * n + 1) * np.pi / 2
    series = ((-1.0) ** n / (2 * n + 1)) * np.exp(-k**2 * tau) * np.cos(k * x)
    return 1.0 - (4.0 / np.pi) * series.sum(axis=0)


def crank_cylinder(r, tau, terms=400):
    """Crank (1975) eq. 5.22: cylinder, uniform C1 = 0, surface at C0 = 1 (Bessel series)."""
    a = jn_zeros(0, terms)[:, None]
    return 1.0 - 2.0 * (np.exp(-a**2 * tau) * j0(r * a) / (a * j1(a))).sum(axis=0)


CLOSED_FORMS = {3: crank_sphere, 1: crank_slab, 2: crank_cylinder}


def _step(n_nodes, m):
    c0 = np.zeros((1, m, n_nodes))
    c0[..., -1] = 1.0
    return c0


def test_series_centre_value():
    # Crank (1975) centre of a sphere, 1 + 2 sum (-1)^n exp(-n^2 pi^2 Dt/a^2); at
    # Dt/a^2 = 0.09 the centre is 0.234 of the way (derived check value)
    assert crank_sphere(np.array([0.0]), 0.09)[0] == pytest.approx(0.234, abs=5e-4)


@pytest.mark.parametrize("dimension", [1, 2, 3])
def test_fixed_rim_against_crank_series(dimension):
    rho = radial_grid()
    tau = np.array([[0.01], [0.05], [0.09], [0.3]])
    out = relax(_step(rho.size, 4), tau, dimension=dimension)
    exact = np.stack([CLOSED_FORMS[dimension](rho[:-1], t) for t in tau[:, 0]])
    assert_allclose(out[0, :, :-1], exact, atol=ATOL_DIFFUSION_STEP)
    assert np.all(out[0, :, -1] == 1.0)  # the rim is held


@pytest.mark.parametrize("dimension", [1, 2, 3])
def test_second_order_convergence(dimension):
    # doubling nodes and steps divides the error by about 4 (second-order scheme)
    errors = []
    tau = np.array([[0.05]])
    for n_nodes, steps in ((41, 20), (81, 40), (161, 80)):
        rho = radial_grid(n_nodes)
        out = relax(_step(n_nodes, 1), tau, dimension=dimension, n_steps=steps)
        errors.append(np.max(np.abs(out[0, 0, :-1] - CLOSED_FORMS[dimension](rho[:-1], 0.05))))
    ratios = np.array(errors[:-1]) / np.array(errors[1:])
    assert np.all(ratios > 3.0), ratios


@pytest.mark.parametrize("dimension", [1, 2, 3])
def test_closed_rim_conserves_mass(dimension):
    rho = radial_grid()
    from zoning.diffusion import _finite_volumes

    vol, _ = _finite_volumes(rho.size, 0.6, dimension)
    c0 = np.stack([0.9 - 0.2 * rho**3, 0.5 + 0.3 * rho**8])[None]
    out = relax(c0, np.array([[0.02], [1.5]]), dimension=dimension, rim="closed",
                field_slope=-3 * np.log(10), self_driven=True)
    assert_allclose(out[0] @ vol, c0[0] @ vol, rtol=0, atol=ATOL_CONSERVED)
    # and the continuous integral of c r^(d-1) dr, by quadrature of the profile
    fine = np.linspace(0, 1, 4001)
    for i in range(2):
        before = np.trapezoid(np.interp(fine, rho, c0[0, i]) * fine ** (dimension - 1), fine)
        after = np.trapezoid(np.interp(fine, rho, out[0, i]) * fine ** (dimension - 1), fine)
        assert after == pytest.approx(before, rel=2e-3)
    # long times: the closed crystal homogenises at its mean
    mean = (c0[0, 1] @ vol) / vol.sum()
    assert_allclose(out[0, 1], mean, atol=1e-6)


def test_chemical_potential_equilibrium_profile_is_stationary():
    # Costa et al. (2003): with RT ln D = A X_An + B, a trace in equilibrium with one
    # melt, c proportional to exp(A X_An / RT), has no flux whatever the An zoning
    rho = radial_grid()
    x_an = 0.85 - 0.3 * rho**2 + 0.05 * np.sin(9 * rho)
    a_j = PLAGIOCLASE_TRACE_COEFFICIENTS["Sr"][0]
    log_cap = (a_j / (R_GAS * 1423.15)) * x_an
    c0 = 0.07 * np.exp(log_cap)
    out = relax(c0[None, None], np.array([[0.5]]), dimension=3, field=x_an[None],
                field_slope=-4.1 * np.log(10), log_capacity=log_cap[None, None])
    assert_allclose(out[0, 0], c0, rtol=1e-12)


def test_interpolation_is_exact_for_cubics():
    xi = np.array([[0.0, 0.013, 0.31, 0.5, 0.77, 0.999, 1.0]])
    idx, w = grid_interpolation(xi)
    rho = radial_grid()
    f = 2 - rho + 3 * rho**2 - 5 * rho**3
    got = sum(w[q] * f[idx + q] for q in range(4))
    assert_allclose(got, 2 - xi + 3 * xi**2 - 5 * xi**3, rtol=1e-12, atol=1e-12)


# ---------------------------------------------------------------- model level
def _olivine(**kw):
    return CrystallizationModel("olivine", MELT, traces=("Ni",), **kw)


def _batch(m, rng):
    return {
        "melt_mg_number": rng.uniform(0.6, 0.7, m),
        "f_rim": rng.uniform(0.05, 0.15, m),
        "retention": rng.uniform(0.0, 1.0, m),
        "melt0_ni_ppm": rng.uniform(200.0, 400.0, m),
    }


def test_zero_length_is_the_growth_profile_bit_for_bit():
    model = _olivine()
    x = np.linspace(0, 120, 25)
    b = _batch(6, np.random.default_rng(1))
    grown = model.profile(x, 120.0, **b)
    zero = model.profile(x, 120.0, diffusion_length_um=np.zeros(6), **b)
    assert set(zero) == set(grown)
    for key in grown:
        assert np.array_equal(grown[key], zero[key]), key
    mixed = model.profile(x, 120.0, diffusion_length_um=np.array([0, 5, 0, 20, 0, 1.0]), **b)
    for key in ("crystal", "crystal_nio_wt"):
        assert np.array_equal(mixed[key][[0, 2, 4]], grown[key][[0, 2, 4]])
        assert np.array_equal(mixed[key + "_grown"], grown[key])
        assert not np.allclose(mixed[key][3], grown[key][3])


def test_small_length_tends_to_the_growth_profile():
    model = _olivine()
    x = np.linspace(0, 120, 25)
    grown = model.profile(x, 120.0, f_rim=0.12)
    previous = np.inf
    for length in (3.0, 1.0, 0.1, 1e-3):
        out = model.profile(x, 120.0, f_rim=0.12, diffusion_length_um=length)
        change = np.max(np.abs(out["crystal"] - grown["crystal"]))
        assert change < previous
        previous = change
    assert previous < 1e-6


def _mol_reference(c_initial, tau, dimension, slope, n_cells=1601):
    """Method of lines (Radau, cell-centred, uniform fine grid) with D = exp(slope (c - c_rim))."""
    edges = np.linspace(0, 1, n_cells + 1)
    centres = 0.5 * (edges[1:] + edges[:-1])
    vol = (edges[1:] ** dimension - edges[:-1] ** dimension) / dimension
    area = edges[1:-1] ** (dimension - 1)
    h = 1.0 / n_cells
    y0 = c_initial(centres)
    rim = float(c_initial(np.array([1.0]))[0])

    def rhs(_t, c):
        d_face = np.exp(slope * (0.5 * (c[1:] + c[:-1]) - rim))
        flux = np.zeros(n_cells + 1)
        flux[1:-1] = -area * d_face * (c[1:] - c[:-1]) / h
        flux[-1] = -np.exp(slope * 0.5 * (c[-1] - rim)) * (rim - c[-1]) / (h / 2)
        return -(flux[1:] - flux[:-1]) / vol

    jac = diags([np.ones(n_cells - 1), np.ones(n_cells), np.ones(n_cells - 1)], [-1, 0, 1])
    sol = solve_ivp(rhs, [0, tau], y0, method="Radau", rtol=1e-9, atol=1e-12,
                    jac_sparsity=jac)
    return np.r_[centres, 1.0], np.r_[sol.y[:, -1], rim]


@pytest.mark.parametrize("length", [4.0, 25.0, 70.0])
def test_concentration_dependent_fo_against_fine_reference(length):
    # Fe-Mg with D proportional to 10^(3 X_Fe) (Dohmen & Chakraborty 2007), a
    # fractional (r = 0) growth profile whose rim drops steeply (Fo 87 to 72)
    model = CrystallizationModel("olivine", MELT)
    radius = 150.0
    params = {"f_rim": 0.15, "retention": 0.0}
    fine = np.linspace(0, radius, 3001)
    grown = model.profile(fine, radius, **params)["crystal"] / 100

    def initial(r):
        return np.interp(r * radius, fine, grown)

    rc, ref = _mol_reference(initial, (length / radius) ** 2, 3, -3 * np.log(10))
    x = np.linspace(0, radius, 60)
    out = model.profile(x, radius, diffusion_length_um=length, **params)
    expected = 100 * np.interp(x / radius, rc, ref)
    assert_allclose(out["crystal"], expected, atol=ATOL_DIFFUSION_FO)
    assert np.max(np.abs(out["crystal"] - out["crystal_grown"])) > 10 * ATOL_DIFFUSION_FO


def test_nickel_follows_the_fe_mg_field_with_its_ratio():
    # ratio 1: Ni diffuses exactly like Fo in the same D field, so the relaxed Ni
    # equals the Fo solution of the same initial shape; ratio 0 freezes Ni
    model = _olivine()
    x = np.linspace(0, 100, 30)
    base = {"f_rim": 0.12, "diffusion_length_um": 30.0}
    frozen = model.profile(x, 100.0, diffusivity_ratio_ni=0.0, **base)
    assert_allclose(frozen["crystal_nio_wt"], frozen["crystal_nio_wt_grown"], rtol=1e-12)
    fast = model.profile(x, 100.0, diffusivity_ratio_ni=3.0, **base)
    one = model.profile(x, 100.0, **base)
    change_one = np.abs(one["crystal_nio_wt"] - one["crystal_nio_wt_grown"]).max()
    change_fast = np.abs(fast["crystal_nio_wt"] - fast["crystal_nio_wt_grown"]).max()
    assert change_fast > change_one > 0
    assert model.defaults()["diffusivity_ratio_ni"] == OLIVINE_DIFFUSIVITY_RATIOS["Ni"]


def test_fixed_rim_holds_the_rim_and_closed_rim_keeps_mass():
    x = np.linspace(0, 100, 201)
    fixed = _olivine().profile(x, 100.0, f_rim=0.15, diffusion_length_um=20.0)
    assert fixed["crystal"][-1] == pytest.approx(fixed["crystal_grown"][-1], abs=1e-12)
    closed = _olivine(rim="closed").profile(x, 100.0, f_rim=0.15, diffusion_length_um=20.0)
    # integral of c r^2 dr over the sphere (Fo and NiO) is conserved; the grid
    # conserves its finite-volume sum exactly (test_closed_rim_conserves_mass), the
    # spots carry the change by interpolation, whose integral differs from that sum
    # at second order in the grid spacing (0.02 mol% Fo on average here)
    for key in ("crystal", "crystal_nio_wt"):
        before = np.trapezoid(closed[key + "_grown"] * x**2, x)
        after = np.trapezoid(closed[key] * x**2, x)
        assert after == pytest.approx(before, rel=5e-4)
    assert closed["crystal"][-1] > closed["crystal_grown"][-1]


def test_plagioclase_an_is_frozen_and_traces_diffuse():
    model = CrystallizationModel("plagioclase", PLAG_MELT, traces=("Sr", "Mg"),
                                 temperature_c=1150.0)
    assert model.diffusing_keys == ("crystal_sro_wt", "crystal_mgo_wt")
    x = np.linspace(0, 150, 40)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", CalibrationRangeWarning)
        out = model.profile(x, 150.0, f_rim=0.3, diffusion_length_um=40.0)
    assert np.array_equal(out["crystal"], out["crystal_grown"])
    for key in ("crystal_sro_wt", "crystal_mgo_wt"):
        assert np.max(np.abs(out[key] - out[key + "_grown"])) > 1e-4
    # D_Sr / D_Mg at 1150 °C from the two Arrhenius laws, independent of X_An
    ratio = model.defaults()["diffusivity_ratio_sr"]
    assert ratio == pytest.approx(
        float(d_sr_plagioclase(1150.0, 0.3) / d_mg_plagioclase(1150.0, 0.3)), rel=1e-12)
    assert 0 < ratio < 1


def test_constant_partition_model_diffuses_with_constant_d():
    model = ConstantPartitionModel("Ni")
    x = np.linspace(0, 100, 30)
    out = model.profile(x, 100.0, partition_coefficient=1.0, f_rim=0.3,
                        diffusion_length_um=30.0)
    # a flat profile stays flat
    assert_allclose(out["crystal"], out["crystal_grown"], rtol=1e-12)


# ---------------------------------------------------------------- sectioning
def test_section_geometry_check_values():
    # science reference sec. 10 (geometry): h/R = 0.5 -> section radius 0.866 R, the
    # apparent core is the zone at r = h, and the inner 12.5 % of the volume is missed
    assert float(true_radius(0.8660254, 0.5)) == pytest.approx(1.0, rel=1e-7)
    xi = zone_fraction(np.array([0.0, 0.8660254]), 0.8660254, section_h_over_r=0.5)
    assert_allclose(xi, [0.5, 1.0], rtol=1e-7)
    assert xi[0] ** 3 == pytest.approx(0.125, rel=1e-12)
    model = CrystallizationModel("olivine", MELT)
    out = model.profile([0.0, 86.60254], 86.60254, f_rim=0.1, section_h_over_r=0.5)
    assert_allclose(out["f"], [0.0125, 0.1], rtol=1e-6)


def test_section_parameter_equals_the_offset_setting():
    a, h = 80.0, 45.0
    x = np.linspace(0, a, 17)
    by_offset = CrystallizationModel("olivine", MELT, section_offset_um=h).profile(x, a,
                                                                                  f_rim=0.1)
    s = h / np.hypot(a, h)
    by_ratio = CrystallizationModel("olivine", MELT).profile(x, a, f_rim=0.1,
                                                           section_h_over_r=s)
    for key in by_offset:
        assert_allclose(by_ratio[key], by_offset[key], rtol=RTOL_IDENTITY)
    with pytest.raises(ModelDomainError, match="given twice"):
        CrystallizationModel("olivine", MELT, section_offset_um=h).profile(
            x, a, section_h_over_r=0.2)


def test_section_rows_and_diffusion_with_section():
    # rows with different h/R are mapped per row; with diffusion the true crystal
    # (radius a / sqrt(1 - s^2)) is relaxed and sampled at sqrt(x^2 + h^2)
    model = _olivine()
    x = np.linspace(0, 80, 20)
    s = np.array([0.0, 0.3, 0.6])
    rows = model.profile(x, 80.0, f_rim=0.1, section_h_over_r=s, diffusion_length_um=10.0)
    for i, si in enumerate(s):
        single = model.profile(x, 80.0, f_rim=0.1, section_h_over_r=si,
                               diffusion_length_um=10.0)
        for key in ("crystal", "crystal_nio_wt", "f"):
            assert_allclose(rows[key][i], single[key], rtol=1e-12)
    # a section through the centre of a bigger crystal sampled at the true radii
    s1 = 0.6
    big = true_radius(80.0, s1)
    central = model.profile(np.hypot(x, s1 * big), big, f_rim=0.1, diffusion_length_um=10.0)
    assert_allclose(rows["crystal"][2], central["crystal"], atol=1e-9)


def test_slab_refuses_an_offset():
    slab = CrystallizationModel("olivine", MELT, geometry="slab")
    with pytest.raises(ModelDomainError, match="geometry 'slab'"):
        slab.profile([0.0, 10.0], 10.0, section_h_over_r=0.3)
    with pytest.raises(ModelDomainError, match="geometry 'slab'"):
        CrystallizationModel("olivine", MELT, geometry="slab", section_offset_um=5.0)
    out = slab.profile([0.0, 10.0], 10.0, diffusion_length_um=2.0)
    assert out["crystal"].shape == (2,)


# ---------------------------------------------------------------- contracts
MODELS = [
    ("olivine-ni", _olivine()),
    ("olivine-cylinder", CrystallizationModel("olivine", MELT, geometry="cylinder",
                                              beam_um=2.0)),
    ("plag-sr-mg", CrystallizationModel("plagioclase", PLAG_MELT, traces=("Sr", "Mg"),
                                        temperature_c=1150.0)),
    ("constant", ConstantPartitionModel("Ni")),
]


@pytest.mark.parametrize("name,model", MODELS, ids=[n for n, _ in MODELS])
def test_contract_shapes_inputs_and_lists(name, model):
    x = np.linspace(0, 60, 9)
    x.flags.writeable = False
    length = np.array([0.0, 5.0, 30.0])
    section = np.array([0.0, 0.4, 0.2])
    length.flags.writeable = False
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", CalibrationRangeWarning)
        out = model.profile(x, 60.0, diffusion_length_um=length, section_h_over_r=section)
        listed = model.profile(list(x), 60.0, diffusion_length_um=list(length),
                               section_h_over_r=list(section))
        single = model.profile(x, 60.0, diffusion_length_um=5.0)
    assert "crystal_grown" in out
    for key, v in out.items():
        assert v.shape == (3, 9), key
        assert_allclose(listed[key], v, rtol=0, atol=0)
        if key != "temperature_c":
            assert np.all(np.isfinite(v)), key
    assert single["crystal"].shape == (9,)
    assert_allclose(length, [0.0, 5.0, 30.0])


def test_parameter_specs_and_errors():
    model = _olivine()
    specs = {p.name: p for p in model.parameters}
    assert (specs["section_h_over_r"].lower, specs["section_h_over_r"].upper) == (0.0, 0.95)
    assert specs["diffusion_length_um"].upper == MAX_DIFFUSION_LENGTH_UM
    assert specs["section_h_over_r"].default == specs["diffusion_length_um"].default == 0.0
    with pytest.raises(ModelDomainError, match="outside its allowed range"):
        model.profile([0.0, 1.0], 1.0, section_h_over_r=0.99)
    with pytest.raises(ModelDomainError, match="unknown rim condition"):
        _olivine(rim="open")
    co = CrystallizationModel("olivine", MELT, trace_d={"Co": 2.0})
    assert "diffusivity_ratio_co" not in co.parameter_names
    co.profile([0.0, 1.0], 1.0)  # fine without diffusion
    with pytest.raises(ModelDomainError, match="diffusivity_ratio=\\{'Co'"):
        co.profile([0.0, 1.0], 1.0, diffusion_length_um=1.0)
    ok = CrystallizationModel("olivine", MELT, trace_d={"Co": 2.0}, diffusivity_ratio={"Co": 0.5})
    assert ok.defaults()["diffusivity_ratio_co"] == 0.5
    with pytest.raises(ModelDomainError, match="not traces"):
        CrystallizationModel("olivine", MELT, diffusivity_ratio={"Zn": 1.0})


# ---------------------------------------------------------------- Arrhenius
def test_dohmen_chakraborty_values():
    # values of the published equation (Dohmen & Chakraborty 2007, TaMED; derived
    # check values, not printed in the paper): 1000 °C, 1e5 Pa, fO2 1e-7 Pa,
    # X_Fe 0.1 -> 3.5e-18 m2/s along [001]; 1200 °C -> 4.6e-17 m2/s
    d1000 = float(d_femg_olivine(1000.0, fo2_pa=1e-7, x_fe=0.1))
    d1200 = float(d_femg_olivine(1200.0, fo2_pa=1e-7, x_fe=0.1))
    assert d1000 == pytest.approx(3.5e-18, rel=0.02)
    assert d1200 == pytest.approx(4.6e-17, rel=0.02)
    # composition dependence 10^(3 (X_Fe - 0.1)) and fO2^(1/6)
    assert float(d_femg_olivine(1200.0, fo2_pa=1e-7, x_fe=0.2)) / d1200 == pytest.approx(
        10**0.3, rel=1e-12)
    assert float(d_femg_olivine(1200.0, fo2_pa=1e-1, x_fe=0.1)) / d1200 == pytest.approx(
        10.0, rel=1e-12)
    # 1200 °C, log fO2 = -7.86 bar (-2.86 Pa), X_Fe 0.15 -> 3.2e-16 m2/s and
    # sqrt(D t) = 28 µm after 28 days (derived)
    d = float(d_femg_olivine(1200.0, fo2_pa=10**-2.86, x_fe=0.15))
    assert d == pytest.approx(3.2e-16, rel=0.02)
    days = diffusion_time_days(28.0, 1200.0, mineral="olivine", fo2_pa=10**-2.86,
                               x_fe=0.15, direction="c")
    assert days == pytest.approx(28.0, rel=0.03)


def test_anisotropy_and_direction_weights():
    # Costa & Chakraborty (2004) weighting with D[100] = D[010] = D[001]/6 (from memory)
    dc = float(d_femg_olivine(1150.0, fo2_pa=1e-6, direction="c"))
    assert float(d_femg_olivine(1150.0, fo2_pa=1e-6, direction="a")) == pytest.approx(dc / 6)
    assert float(d_femg_olivine(1150.0, fo2_pa=1e-6, direction=(90, 90, 0))) == pytest.approx(dc)
    assert float(d_femg_olivine(1150.0, fo2_pa=1e-6, direction=None)) == pytest.approx(
        dc * (1 + 1 / 6 + 1 / 6) / 3)
    assert_allclose(direction_weights((60.0, 45.0, 60.0)), [0.25, 0.5, 0.25], rtol=1e-12)
    with pytest.raises(ModelDomainError, match="not a direction"):
        direction_weights((10.0, 10.0, 10.0))
    with pytest.raises(ModelDomainError, match="unknown traverse direction"):
        direction_weights("d")


def test_diffusion_time_conventions():
    # unknown temperature or fO2 -> NaN (report the length alone)
    assert np.isnan(diffusion_time_days(10.0, None, mineral="olivine", fo2_pa=1e-6, x_fe=0.15))
    assert np.isnan(diffusion_time_days(10.0, 1150.0, mineral="olivine", x_fe=0.15))
    # delta QFM equals the absolute fO2 of the buffer (Frost 1991)
    from zoning.redox import buffer_log_fo2

    fo2 = 10 ** (float(buffer_log_fo2("QFM", 1150.0, 1.0)) + 5.0)
    a = diffusion_time_days(10.0, 1150.0, mineral="olivine", delta_qfm=0.0, x_fe=0.15)
    b = diffusion_time_days(10.0, 1150.0, mineral="olivine", fo2_pa=fo2, x_fe=0.15)
    assert a == pytest.approx(b, rel=1e-12)
    # t scales with L^2; arrays in, arrays out; zero length is zero days
    t = diffusion_time_days(np.array([0.0, 10.0, 20.0]), 1150.0, mineral="plagioclase",
                            x_an=0.7)
    assert t[0] == 0 and t[2] == pytest.approx(4 * t[1], rel=RTOL_IDENTITY)
    # Costa et al. (2003) law (from memory): activation energy 266 kJ/mol from the
    # Arrhenius slope between two temperatures, log10 D falls by 4.1 per unit X_An
    t1, t2 = 1373.15, 1473.15
    slope = np.log(float(d_mg_plagioclase(t2 - 273.15, 0.7) / d_mg_plagioclase(t1 - 273.15, 0.7)))
    assert -R_GAS * slope / (1 / t2 - 1 / t1) == pytest.approx(266000.0, rel=RTOL_IDENTITY)
    assert np.log10(float(d_mg_plagioclase(1100.0, 0.4) / d_mg_plagioclase(1100.0, 0.9))) == (
        pytest.approx(4.1 * 0.5, rel=RTOL_IDENTITY))
    # Sr (Giletti & Casserly 1994 as fitted by Zellmer et al. 1999; from memory):
    # 276 kJ/mol, so Sr is slower than Mg and the gap widens as T falls
    slope_sr = np.log(float(d_sr_plagioclase(t2 - 273.15, 0.7) / d_sr_plagioclase(t1 - 273.15,
                                                                                     0.7)))
    assert -R_GAS * slope_sr / (1 / t2 - 1 / t1) == pytest.approx(276000.0, rel=RTOL_IDENTITY)
    with pytest.raises(ModelDomainError, match="unknown mineral"):
        diffusion_time_days(1.0, 1100.0, mineral="quartz")
    with pytest.warns(CalibrationRangeWarning, match="outside"):
        diffusion_time_days(1.0, 1500.0, mineral="olivine", fo2_pa=1e-5, x_fe=0.1)


# ---------------------------------------------------------------- citations
def test_methods_name_the_diffusion_laws_when_asked():
    from zoning.references import REFERENCES

    ol = _olivine()
    assert not any("diffusion" in u.role for u in ol.methods())
    keys = [u.key for u in ol.methods(processes=("section", "diffusion"))]
    for key in ("crank_1975", "dohmen_chakraborty_2007", "petry_2004"):
        assert key in keys
    assert any(u.role == "off-centre section" for u in ol.methods(processes=("section",)))
    pl = CrystallizationModel("plagioclase", PLAG_MELT, traces=("Sr", "Mg"),
                              temperature_c=1150.0)
    keys_pl = [u.key for u in pl.methods(processes=("diffusion",))]
    for key in ("costa_2003", "grove_1984", "zellmer_1999"):
        assert key in keys_pl
    assert all(k in REFERENCES for k in keys + keys_pl if k)
    with pytest.raises(ModelDomainError, match="unknown processes"):
        ol.methods(processes=("recharge",))
