"""Forward models: contract over every model, outside checks, errors and warnings."""

import sys
import warnings
from pathlib import Path

import numpy as np
import pytest
from numpy.testing import assert_allclose
from scipy.integrate import solve_ivp

from zoning import ConstantPartitionModel, CrystallizationModel, ModelDomainError, kernels
from zoning.exceptions import CalibrationRangeWarning
from zoning.kernels import retention_closed_form
from zoning.models import MODELS, ParameterSpec

sys.path.insert(0, str(Path(__file__).resolve().parent))
from _tolerances import (  # noqa: E402
    ATOL_CLOSED_FORM,
    ATOL_MASS_BALANCE,
    RTOL_IDENTITY,
    RTOL_TABLE_3SF,
)

#: Trace integration on the kernel's grid (the forward model aims at 1e-4
#: relative for traces; measured about 3e-6).
RTOL_TRACE = 1e-5

BASALT = {"SiO2": 50.0, "MgO": 8.0, "FeO": 9.0, "CaO": 11.0, "Na2O": 2.5}


def _registry():
    """Every model/law configuration through the one interface."""
    return [
        ("olivine", CrystallizationModel("olivine", BASALT)),
        ("olivine-ni", CrystallizationModel("olivine", {"MgO": 12.0, "FeO": 10.0},
                                            traces=("Ni",))),
        ("olivine-constd", CrystallizationModel("olivine", BASALT, trace_d={"Co": 2.0})),
        ("plag", CrystallizationModel("plagioclase", BASALT)),
        ("plag-sr-mg", CrystallizationModel("plagioclase", {"CaO": 9.0, "Na2O": 3.5},
                                            traces=("Sr", "Mg"), temperature_c=1150.0)),
        ("plag-water-rich", CrystallizationModel("plagioclase", BASALT, kd=5.5)),
        ("constant-d", ConstantPartitionModel("Ni")),
    ]


REGISTRY = _registry()
IDS = [name for name, _ in REGISTRY]


def _params(model, m):
    rng = np.random.default_rng(3)
    out = {}
    for spec in model.parameters:
        if spec.name in ("f_rim", "retention"):
            hi = 0.08 if spec.name == "f_rim" else 1.0
            out[spec.name] = rng.uniform(0.0, hi, m)
    return out


@pytest.mark.parametrize("name,model", REGISTRY, ids=IDS)
def test_contract_shapes_and_finiteness(name, model):
    f = np.linspace(0, 0.08, 7)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", CalibrationRangeWarning)
        single = model.path(f)
        batch = model.path(f, **_params(model, 5))
        prof = model.profile(np.linspace(0, 50, 9), 50.0, **_params(model, 4))
    assert {"f", "crystal", "melt_ratio", "temperature_c"} <= set(single)
    for v in single.values():
        assert v.shape == (7,)
    for key, v in batch.items():
        assert v.shape == (5, 7)
        if key != "temperature_c":
            assert np.all(np.isfinite(v)), key
    for v in prof.values():
        assert v.shape == (4, 9)


@pytest.mark.parametrize("name,model", REGISTRY, ids=IDS)
def test_contract_inputs_unchanged_and_list_equals_array(name, model):
    f = np.linspace(0, 0.05, 6)
    f.setflags(write=False)
    params = _params(model, 3)
    for v in params.values():
        v.setflags(write=False)
    keep = {k: v.copy() for k, v in params.items()}
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", CalibrationRangeWarning)
        a = model.path(f, **params)
        b = model.path(list(f), **{k: list(v) for k, v in params.items()})
    for k in keep:
        assert np.array_equal(params[k], keep[k])
    for key in a:
        assert_allclose(a[key], b[key], rtol=RTOL_IDENTITY)


@pytest.mark.parametrize("name,model", REGISTRY, ids=IDS)
def test_contract_parameter_specs(name, model):
    names = [p.name for p in model.parameters]
    assert len(set(names)) == len(names)
    for spec in model.parameters:
        assert isinstance(spec, ParameterSpec)
        assert spec.unit
        assert np.isfinite(spec.lower) and np.isfinite(spec.upper)
        assert spec.lower <= spec.default <= spec.upper
        assert spec.description


@pytest.mark.parametrize("cls", MODELS)
def test_contract_docstrings_have_references(cls):
    assert "References" in cls.__doc__
    assert "References" in cls.path.__doc__ or "References" in cls.__doc__


def test_parameter_order_of_the_contract():
    ol = CrystallizationModel("olivine", BASALT, traces=("Ni",))
    assert ol.parameter_names == ("melt_mg_number", "f_rim", "retention", "kd", "f_core",
                                  "growth_exponent", "core_offset_um", "melt0_ni_ppm",
                                  "section_h_over_r", "diffusion_length_um",
                                  "diffusivity_ratio_ni")
    pl = CrystallizationModel("plagioclase", BASALT, traces=("Sr", "Mg"), temperature_c=1100)
    assert pl.parameter_names == ("melt_ca_number", "f_rim", "retention", "kd", "f_core",
                                  "growth_exponent", "core_offset_um", "melt0_sr_ppm",
                                  "melt0_mgo_wt", "section_h_over_r", "diffusion_length_um",
                                  "diffusivity_ratio_sr")


def test_kd_consistency_fo_at_f0():
    # Melt MgO 8.0, FeO 9.0 wt% (all Fe2+), Kd 0.30 -> Fo 84.08 at F = 0
    # (derived from the Kd definition of Roeder & Emslie 1970).
    model = CrystallizationModel("olivine", {"MgO": 8.0, "FeO": 9.0}, fe3_fraction=0.0)
    out = model.path([0.0])
    assert_allclose(out["crystal"], 84.08, atol=0.005)
    assert_allclose(out["melt_mgo_wt"], 8.0, rtol=RTOL_IDENTITY)
    assert_allclose(out["melt_feo_wt"], 9.0, rtol=RTOL_IDENTITY)
    # Fo = 1/(1 + Kd (1/Mg# - 1)) with the other Kd values of the same check
    for kd, fo in ((0.3135, 83.48), (0.345, 82.12)):
        assert_allclose(model.path([0.0], kd=kd)["crystal"], fo, atol=0.005)


def test_helz_thornber_temperature_along_path():
    # T = 20.1 MgO + 1014 (Helz & Thornber 1987); MgO 7 wt% -> 1154.7 C
    model = CrystallizationModel("olivine", {"MgO": 7.0, "FeO": 9.0}, fe3_fraction=0.0)
    out = model.path([0.0, 0.05])
    assert_allclose(out["temperature_c"][0], 1154.7, atol=1e-9)
    assert_allclose(out["temperature_c"], 20.1 * out["melt_mgo_wt"] + 1014, rtol=RTOL_IDENTITY)


def test_fe3_is_inert_and_lowers_melt_feo():
    a = CrystallizationModel("olivine", {"MgO": 8.0, "FeO": 9.0}, fe3_fraction=0.0)
    b = CrystallizationModel("olivine", {"MgO": 8.0, "FeO": 9.0}, fe3_fraction=0.2)
    assert_allclose(b.path([0.0], melt_mg_number=0.6)["melt_feo_wt"], 7.2, rtol=RTOL_IDENTITY)
    assert a.path([0.0], melt_mg_number=0.6)["crystal"] == pytest.approx(
        b.path([0.0], melt_mg_number=0.6)["crystal"])


@pytest.mark.parametrize("mineral", ["olivine", "plagioclase"])
def test_mass_balance_of_model_outputs(mineral):
    # Whole-melt budget from the outputs: melt oxide + crystal (retained + isolated)
    # equals the parent, with the crystal from the recorded profile (Simpson rule).
    model = CrystallizationModel(mineral, BASALT)
    law = model.law
    r = 0.35
    f = np.linspace(0, 0.12, 3001)
    out = model.path(f, retention=r)
    y0 = model.defaults()[law.ratio_name]
    a0, b0, s0 = model.initial_state(y0)
    ox = law.compatible_oxide.lower()
    from zoning.partitioning import OXIDE_MOLAR_MASS as MM
    melt_a = out[f"melt_{ox}_wt"] / 100 * 100 * (1 - f) / MM[law.compatible_oxide]
    melt_a *= law.cations_per_oxide_a
    x = out["crystal"] / 100
    # cations crystallized t from the melt budget of both cations
    ox_b = law.other_oxide.lower()
    melt_b = (out[f"melt_{ox_b}_wt"] * (1 - f) / MM[law.other_oxide]
              * law.cations_per_oxide_b)
    t = 1 - (melt_a + melt_b) / s0
    from scipy.integrate import cumulative_simpson
    iso = (1 - r) * s0 * cumulative_simpson(x, x=t, initial=0.0)
    ret = r * s0 * t * x
    assert_allclose(melt_a + ret + iso, a0, rtol=1e-9)
    assert_allclose(melt_a[-1] + ret[-1] + iso[-1], a0, rtol=ATOL_MASS_BALANCE)


def test_nickel_against_ode_reference():
    # Ni with D = 124/MgO - 0.9 (Hart & Davis 1978), retention 0.5: the kernel
    # against solve_ivp of the wt-based trace mass balance on the kernel's major path.
    model = CrystallizationModel("olivine", {"MgO": 12.0, "FeO": 10.0}, traces=("Ni",))
    r = 0.5
    f = np.linspace(0, 0.15, 1501)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", CalibrationRangeWarning)
        out = model.path(f, retention=r)
    law = model.law
    x = out["crystal"] / 100
    mf = law.molar_mass_b + (law.molar_mass_a - law.molar_mass_b) * x
    y0 = model.defaults()["melt_mg_number"]
    _, _, s0 = model.initial_state(y0)
    from zoning.partitioning import OXIDE_MOLAR_MASS as MM
    cat = (out["melt_mgo_wt"] / MM["MgO"] + out["melt_feo_wt"] / MM["FeO"]) * (1 - f)
    t = 1 - cat / s0
    m_ret = r * s0 / 2 * t * mf
    m_iso = 100 * f - m_ret
    d = 124 / out["melt_mgo_wt"] - 0.9
    w = 100 * (1 - f) + d * m_ret

    def interp(v, fv):
        return np.interp(fv, f, v)

    # T = c W ; dT/dF = -D c dm_iso/dF
    dmiso = np.gradient(m_iso, f, edge_order=2)

    def rhs(fv, z):
        c = z[0] / interp(w, fv)
        return [-interp(d, fv) * c * interp(dmiso, fv)]

    sol = solve_ivp(rhs, [0, f[-1]], [250.0 * 100], t_eval=f[::100], rtol=1e-10, atol=1e-10,
                    max_step=1e-4)
    ref = sol.y[0] / w[::100]
    assert_allclose(out["melt_ni_ppm"][::100], ref, rtol=2e-4)


def test_public_trace_functions_agree_with_the_model():
    # zoning.kernels.trace_log_ratio (its own gather of the same table) and
    # exchange_invert give what the model returns from its fused path.
    model = CrystallizationModel("olivine", {"MgO": 12.0, "FeO": 10.0}, traces=("Ni",))
    law = model.law
    y0 = np.array([[0.62], [0.70]])
    r = np.array([[0.2], [0.9]])
    kd = np.array([[0.30], [0.33]])
    f0 = np.linspace(0.0, 0.12, 25)
    f = np.vstack([f0, f0])
    s0 = model._b0 / (1.0 - y0)
    ni_law = model._trace_path_law(model.traces[0], s0)
    path = kernels.exchange_path(f, y0, kd, r, s0, law.sites, law.molar_mass_a,
                                 law.molar_mass_b)
    with np.errstate(all="ignore"):
        ln_ratio, _ = kernels.trace_log_ratio(path, ni_law, s0, law.sites, r, f)
    y, t, _, _ = kernels.exchange_invert(f, path["grid"], y0, s0, law.sites,
                                         law.molar_mass_a, law.molar_mass_b)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", CalibrationRangeWarning)
        out = model.path(f0, melt_mg_number=y0[:, 0], retention=r[:, 0], kd=kd[:, 0],
                         melt0_ni_ppm=[300.0, 300.0])
    assert_allclose(300.0 * np.exp(ln_ratio), out["melt_ni_ppm"], rtol=1e-12)
    assert_allclose(y, out["melt_ratio"], rtol=1e-12)
    assert_allclose(t, path["t"], rtol=1e-12)


def test_nickel_partition_at_core():
    model = CrystallizationModel("olivine", {"MgO": 8.0, "FeO": 9.0}, fe3_fraction=0.0,
                                 traces=("Ni",))
    out = model.path([0.0], melt0_ni_ppm=200.0)
    # D_Ni = 124/8 - 0.9 = 14.6 (Hart & Davis 1978, from memory); NiO = D Ni_melt
    nio_ppm_as_ni = out["crystal_nio_wt"] * 1e4 * 58.6934 / 74.6924
    assert_allclose(nio_ppm_as_ni / out["melt_ni_ppm"], 14.6, rtol=RTOL_TABLE_3SF)


def test_constant_d_trace_equals_closed_form_when_mass_change_negligible():
    # A constant-D trace in the exchange model against the closed form at r = 0
    # and r = 1 (Rayleigh 1896 / Shaw 1970): the retained crystal mass follows
    # its composition, so only r = 0 is exact.
    model = CrystallizationModel("olivine", BASALT, trace_d={"Co": 2.5})
    f = np.linspace(0, 0.15, 12)
    out = model.path(f, retention=0.0, melt0_co_ppm=100.0)
    assert_allclose(out["melt_co_ppm"], 100 * retention_closed_form(f, 2.5, 0.0),
                    rtol=RTOL_TRACE)
    assert_allclose(out["crystal_co_ppm"], 2.5 * out["melt_co_ppm"], rtol=RTOL_IDENTITY)


def test_constant_partition_model_is_the_closed_form():
    model = ConstantPartitionModel("Sr")
    f = np.linspace(0, 0.9, 10)
    out = model.path(f, melt0=300.0, partition_coefficient=2.0, retention=0.5)
    assert_allclose(out["melt"], 300 * retention_closed_form(f, 2.0, 0.5), rtol=ATOL_CLOSED_FORM)
    assert_allclose(out["crystal"], 2 * out["melt"], rtol=RTOL_IDENTITY)


def test_plagioclase_directions():
    # Ca is compatible in plagioclase (K_D(Ca-Na) > 1): An and melt Ca# fall with F.
    model = CrystallizationModel("plagioclase", BASALT)
    out = model.path(np.linspace(0, 0.3, 8))
    assert np.all(np.diff(out["crystal"]) < 0)
    assert np.all(np.diff(out["melt_ratio"]) < 0)
    assert np.all(np.diff(out["melt_na2o_wt"]) > 0)
    # K_D(Ca-Na) = (Ca/Na)pl/(Ca/Na)melt holds at every point
    x = out["crystal"] / 100
    y = out["melt_ratio"]
    assert_allclose((x / (1 - x)) / (y / (1 - y)), 2.0, rtol=RTOL_IDENTITY)


def test_batch_limit_has_more_primitive_rim_than_fractional():
    model = CrystallizationModel("olivine", BASALT)
    out = model.path([0.15], retention=np.array([0.0, 0.5, 1.0]))
    assert out["crystal"][0, 0] < out["crystal"][1, 0] < out["crystal"][2, 0]


def test_profile_geometry_mapping():
    model = CrystallizationModel("olivine", BASALT)
    x = np.array([0.0, 50.0, 79.37, 100.0])
    out = model.profile(x, 100.0, f_rim=0.1)
    # sphere: F = F_rim (x/R)^3; 50 um -> 12.5 %, 79.37 um -> 50 % (science ref. sec. 10, derived)
    assert_allclose(out["f"], [0.0, 0.0125, 0.05, 0.1], rtol=1e-4)
    assert_allclose(out["distance_um"], x)


def test_profile_zone_cache_follows_distances_radius_and_exponent():
    # (x/R)^n is cached between calls; changing x, R or n must not reuse it
    model = CrystallizationModel("olivine", BASALT)
    x1, x2 = np.linspace(0.0, 100.0, 7), np.linspace(0.0, 80.0, 7)
    calls = [(x1, 100.0, 3.0), (x2, 100.0, 3.0), (x2, 80.0, 3.0), (x2, 80.0, 2.0), (x1, 100.0, 3.0)]
    for x, radius, n in calls:
        got = model.profile(x, radius, f_rim=0.1, growth_exponent=n)["f"]
        assert_allclose(got, 0.1 * (x / radius) ** n, rtol=1e-12)


def test_profile_equals_path_at_the_mapped_fractions():
    # profile() locates spots through the shared (x/R)^n; path() searches in F
    model = CrystallizationModel("olivine", BASALT, traces=("Ni",))
    rng = np.random.default_rng(5)
    params = {"f_rim": rng.uniform(0.05, 0.2, 6), "retention": rng.uniform(0, 1, 6),
              "f_core": rng.uniform(0.0, 0.03, 6)}
    x = np.linspace(0.0, 120.0, 31)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", CalibrationRangeWarning)
        prof = model.profile(x, 120.0, **params)
        for i in range(6):
            one = {k: v[i] for k, v in params.items()}
            ref = model.path(prof["f"][i], **one)
            for key in ("crystal", "melt_ratio", "melt_ni_ppm", "crystal_nio_wt"):
                assert_allclose(prof[key][i], ref[key], rtol=1e-12, atol=1e-14)


def test_profile_beam_average_of_flat_profile_is_unchanged():
    flat = CrystallizationModel("olivine", BASALT, beam_um=2.0)
    out = flat.profile(np.linspace(0, 30, 7), 30.0, f_rim=0.0)
    assert_allclose(out["crystal"], out["crystal"][0], rtol=1e-12)


def test_profile_beam_is_a_gaussian_average():
    # Independent check: trapezoid convolution of the sharp profile with a
    # Gaussian of the given FWHM (mirrored at the core, rim value beyond the rim).
    sharp = CrystallizationModel("olivine", BASALT)
    blurred = CrystallizationModel("olivine", BASALT, beam_um=5.0)
    x = np.array([0.0, 10.0, 20.0, 30.0, 36.0])
    b = blurred.profile(x, 40.0, f_rim=0.15)["crystal"]
    sigma = 5.0 / (2 * np.sqrt(2 * np.log(2)))
    u = np.linspace(-6 * sigma, 6 * sigma, 2001)
    kernel = np.exp(-0.5 * (u / sigma) ** 2)
    for xi, bi in zip(x, b, strict=True):
        fine = sharp.profile(np.abs(xi + u), 40.0, f_rim=0.15)["crystal"]
        ref = np.trapezoid(fine * kernel, u) / np.trapezoid(kernel, u)
        # 7-node Gauss-Hermite average: accurate inside the crystal, coarser within
        # about one beam width of the rim, where the profile ends with a kink
        assert bi == pytest.approx(ref, abs=2e-3 if xi <= 30 else 0.05)
    a = sharp.profile(x, 40.0, f_rim=0.15)["crystal"]
    assert np.max(np.abs(a - b)) > 0.01


def test_unknown_parameter_names_the_options():
    model = CrystallizationModel("olivine", BASALT)
    with pytest.raises(ModelDomainError, match="unknown parameter.*'retension'"):
        model.path([0.0], retension=0.5)


def test_out_of_range_parameter_reports_value_and_range():
    model = CrystallizationModel("olivine", BASALT)
    with pytest.raises(ModelDomainError, match=r"'retention' = 1.5 .*\[0, 1\]"):
        model.path([0.0], retention=1.5)


def test_unreachable_fraction_raises_or_gives_nan():
    model = CrystallizationModel("olivine", BASALT)
    fmax = model.max_fraction()
    with pytest.raises(ModelDomainError, match="used up at F"):
        model.path([0.0, fmax * 1.01])
    out = model.path([0.0, fmax * 1.01], strict=False)
    assert np.isfinite(out["crystal"][0]) and np.isnan(out["crystal"][1])


def test_bad_melt_and_mineral():
    with pytest.raises(ModelDomainError, match="needs FeO"):
        CrystallizationModel("olivine", {"MgO": 8.0})
    with pytest.raises(ModelDomainError, match="unknown mineral"):
        CrystallizationModel("pyroxene", BASALT)
    with pytest.raises(ModelDomainError, match="temperature"):
        CrystallizationModel("plagioclase", BASALT, traces=("Sr",))
    with pytest.raises(ModelDomainError, match="no partitioning law"):
        CrystallizationModel("olivine", BASALT, traces=("Sr",))


def test_ni_calibration_warning_points_at_caller():
    model = CrystallizationModel("olivine", {"MgO": 4.0, "FeO": 9.0}, traces=("Ni",))
    with pytest.warns(CalibrationRangeWarning, match="Hart & Davis") as rec:
        model.path([0.0, 0.01])
    assert len(rec) == 1
    assert rec[0].filename == __file__


def test_initial_guess_recovers_synthetic_parameters_roughly():
    model = CrystallizationModel("olivine", BASALT, traces=("Ni",))
    x = np.linspace(0, 200, 40)
    truth = dict(melt_mg_number=0.62, f_rim=0.12, retention=0.3, melt0_ni_ppm=300.0)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", CalibrationRangeWarning)
        prof = model.profile(x, 200.0, **truth)
        guess = model.initial_guess(x, prof["crystal"], trace=prof["crystal_nio_wt"])
    specs = {p.name: p for p in model.parameters}
    for name, value in guess.items():
        assert specs[name].lower <= value <= specs[name].upper
    assert guess["melt_mg_number"] == pytest.approx(0.62, abs=0.01)
    assert guess["f_rim"] == pytest.approx(0.12, abs=0.05)
    assert guess["melt0_ni_ppm"] == pytest.approx(300.0, rel=0.1)


@pytest.mark.parametrize("r", [0.0, 0.45, 1.0])
def test_assemblage_integrator_reproduces_fast_path(r):
    # The general RK4 integrator with the analysed mineral alone against the
    # semi-analytic path (two independent numerical routes).
    model = CrystallizationModel("olivine", BASALT, traces=("Ni",))
    p, _, _ = model._params({"retention": r})
    f = np.broadcast_to(np.linspace(0, 0.15, 25), (1, 25))
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", CalibrationRangeWarning)
        fast = model._evaluate(f, p, strict=True, stacklevel=2)
        y0 = p["melt_mg_number"]
        a0, b0, _ = model.initial_state(y0)
        slow = model._evaluate_assemblage(f, p, y0, model.law.kernel_k(p["kd"]), p["retention"],
                                          a0, b0, strict=True, stacklevel=2)
    assert_allclose(slow["crystal"], fast["crystal"], atol=1e-4)
    assert_allclose(slow["melt_mgo_wt"], fast["melt_mgo_wt"], rtol=1e-6)
    assert_allclose(slow["melt_ni_ppm"], fast["melt_ni_ppm"], rtol=RTOL_TRACE)


def test_assemblage_trace_with_equal_d_is_rayleigh():
    # Every mineral takes the trace with the same constant D and r = 0: the melt
    # follows Rayleigh (1896) fractionation C_L/C0 = (1-F)^(D-1) exactly.
    model = CrystallizationModel(
        "plagioclase", BASALT, trace_d={"Ba": 0.3},
        assemblage={"plagioclase": 0.5, "clinopyroxene": 0.5},
        assemblage_d={"clinopyroxene": {"Ba": 0.3}},
    )
    f = np.linspace(0, 0.6, 13)
    out = model.path(f, retention=0.0, melt0_ba_ppm=200.0)
    assert_allclose(out["melt_ba_ppm"], 200 * retention_closed_form(f, 0.3, 0.0), rtol=1e-6)


def test_assemblage_dilutes_the_exchange():
    # With plagioclase and clinopyroxene taking little Mg and Fe, olivine zoning
    # at a given F is weaker than when olivine crystallizes alone.
    alone = CrystallizationModel("olivine", BASALT)
    mix = CrystallizationModel("olivine", BASALT,
                               assemblage={"olivine": 0.2, "plagioclase": 0.8})
    a = alone.path([0.15])["crystal"]
    b = mix.path([0.15])["crystal"]
    assert b > a


def test_assemblage_needs_the_analysed_mineral_and_known_d():
    with pytest.raises(ModelDomainError, match="must contain the analysed mineral"):
        CrystallizationModel("olivine", BASALT, assemblage={"clinopyroxene": 1.0})
    with pytest.raises(ModelDomainError, match="no partition coefficient of Co"):
        CrystallizationModel("olivine", BASALT, trace_d={"Co": 2.0},
                             assemblage={"olivine": 0.5, "clinopyroxene": 0.5})


def test_max_fraction_with_assemblage_exceeds_olivine_alone():
    alone = CrystallizationModel("olivine", BASALT)
    mix = CrystallizationModel("olivine", BASALT,
                               assemblage={"olivine": 0.3, "plagioclase": 0.7})
    assert float(mix.max_fraction()) > float(alone.max_fraction())
    assert float(alone.max_fraction()) == pytest.approx(
        # F_max = (S0/2)(M_A y0 + M_B (1 - y0))/100: all Mg and Fe2+ as olivine
        float(np.sum(np.array(alone.initial_state(alone.defaults()["melt_mg_number"])[:2])
                     * [alone.law.molar_mass_a, alone.law.molar_mass_b])) / 200.0,
        rel=RTOL_IDENTITY)


@pytest.mark.parametrize("mineral,melt,trace,kw", [
    ("olivine", {"MgO": 12.0, "FeO": 10.0}, "Ni", {}),
    ("plagioclase", {"CaO": 9.0, "Na2O": 3.5}, "Sr", {"temperature_c": 1150.0}),
    ("plagioclase", {"CaO": 9.0, "Na2O": 3.5}, "Ba", {"trace_d": {"Ba": 0.2}}),
])
def test_trace_mass_balance_closes(mineral, melt, trace, kw):
    # melt + retained + isolated = initial for the trace: c_L (M_L + D M_ret) +
    # integral of D c_L dm_iso = 100 c0 (closes to the trace integration accuracy)
    traces = () if "trace_d" in kw else (trace,)
    model = CrystallizationModel(mineral, melt, traces=traces, **kw)
    law = model.law
    tr = model.traces[0]
    r = 0.6
    f = np.linspace(0, 0.12, 4001)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", CalibrationRangeWarning)
        out = model.path(f, retention=r)
    from scipy.integrate import cumulative_simpson

    from zoning.partitioning import OXIDE_MOLAR_MASS as MM
    ratio = model.defaults()[law.ratio_name]
    _, _, s0 = model.initial_state(ratio)
    ca, cb = law.compatible_oxide, law.other_oxide
    cat = (out[f"melt_{ca.lower()}_wt"] / MM[ca] * law.cations_per_oxide_a
           + out[f"melt_{cb.lower()}_wt"] / MM[cb] * law.cations_per_oxide_b) * (1 - f)
    t = 1 - cat / s0
    x = out["crystal"] / 100
    m_ret = r * s0 / law.sites * t * (law.molar_mass_b + (law.molar_mass_a - law.molar_mass_b) * x)
    m_iso = 100 * f - m_ret
    c_l = out[tr.melt_key]
    d = out[tr.crystal_key] / tr.crystal_factor / c_l
    iso = cumulative_simpson(d * c_l * np.gradient(m_iso, f, edge_order=2), x=f, initial=0.0)
    total = c_l * (100 * (1 - f) + d * m_ret) + iso
    c0 = model.defaults()[tr.parameter]
    assert_allclose(total, 100 * c0, rtol=RTOL_TRACE)


def test_batch_rows_equal_single_evaluations_near_exhaustion():
    # Rows of a batch must not influence each other, also when one row's grid
    # runs far past the exhaustion of its melt (regression: found by fuzzing).
    model = CrystallizationModel("olivine", {"MgO": 9.0, "FeO": 10.0}, traces=("Ni",))
    p = {"melt_mg_number": np.array([0.85, 0.31, 0.62, 0.45]),
         "retention": np.array([0.97, 0.01, 0.5, 0.2]),
         "kd": np.array([0.2, 0.38, 0.3, 0.45]),
         "melt0_ni_ppm": np.array([500.0, 1900.0, 300.0, 800.0])}
    fmax = model.max_fraction(**p)
    f = np.linspace(0, 0.9 * fmax.min(), 25)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", CalibrationRangeWarning)
        batch = model.path(f, **p)
        for i in range(4):
            single = model.path(f, **{k: v[i] for k, v in p.items()})
            for key in single:
                assert np.all(np.isfinite(batch[key][i])), key
                # identical up to BLAS summation order
                assert_allclose(batch[key][i], single[key], rtol=1e-12, atol=0)


def test_initial_guess_plagioclase_with_trace_mapping():
    model = CrystallizationModel("plagioclase", {"CaO": 9.0, "Na2O": 3.5}, traces=("Sr",),
                                 temperature_c=1150.0)
    x = np.linspace(0, 300, 30)
    truth = dict(melt_ca_number=0.6, f_rim=0.3, retention=0.2, melt0_sr_ppm=400.0)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", CalibrationRangeWarning)
        prof = model.profile(x, 300.0, **truth)
        major = prof["crystal"].copy()
        major[5] = np.nan  # a flagged spot
        order = np.random.default_rng(0).permutation(30)  # any spot order
        guess = model.initial_guess(x[order], major[order],
                                    trace={"Sr": prof["crystal_sro_wt"][order]})
    assert guess["melt_ca_number"] == pytest.approx(0.6, abs=0.01)
    assert guess["melt0_sr_ppm"] == pytest.approx(400.0, rel=0.1)
    assert 0.05 < guess["f_rim"] < 0.6


def test_initial_guess_needs_two_spots():
    model = CrystallizationModel("olivine", BASALT)
    with pytest.raises(ModelDomainError, match="at least two"):
        model.initial_guess([0.0, 1.0], [np.nan, 85.0])


def test_initial_guess_is_silent_and_checks_trace_length():
    # no calibration warning from the internal exploration (pytest turns warnings
    # into errors), and a trace record of the wrong length is an error
    model = CrystallizationModel("olivine", BASALT, traces=("Ni",))
    x = np.linspace(0, 100, 12)
    fo = np.linspace(85, 80, 12)
    guess = model.initial_guess(x, fo)
    assert guess["retention"] == 0.5
    with pytest.raises(ModelDomainError, match="one value per spot"):
        model.initial_guess(x, fo, trace=np.ones(5))


def test_profile_section_and_core_offsets():
    # Off-centre section at h: the apparent core samples the zone at r = h
    # (science reference sec. 10: h = R/2 misses the inner 12.5 % of the volume).
    a = 86.6025  # apparent radius for R = 100, h = 50
    model = CrystallizationModel("olivine", BASALT, section_offset_um=50.0)
    out = model.profile([0.0, a], a, f_rim=0.1)
    assert_allclose(out["f"], [0.0125, 0.1], rtol=1e-5)
    # a core offset shifts the zone centre along the traverse
    plain = CrystallizationModel("olivine", BASALT)
    shifted = plain.profile([10.0, 60.0], 100.0, f_rim=0.1, core_offset_um=10.0)
    assert_allclose(shifted["f"], [0.0, 0.1 * 0.5**3], rtol=1e-12)


def test_a_melt_mgo_just_below_zero_gives_no_temperature_not_an_error():
    # Sampler proposals next to exhaustion can integrate the melt MgO to a
    # hair below 0 (seen: -2e-4 wt%); the path then has no temperature there
    # (NaN, rejected by the fit) instead of the thermometer's domain error.
    model = CrystallizationModel("olivine", {"FeO": 9.5})
    f = np.array([[0.40, 0.45]])
    y = np.array([[0.5, 0.1]])
    k = np.full((1, 2), 0.3)
    a = np.array([[0.2, -1e-6]])  # melt Mg cations per unit melt, the second past the end
    out, _ = model._outputs(f, y, k, a, np.array([[0.4, 0.1]]))
    assert np.isfinite(out["temperature_c"][0, 0]) and np.isnan(out["temperature_c"][0, 1])
