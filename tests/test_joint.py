"""Joint fit of the crystals of a sample (zoning.fitting.joint).

Identities (the stacked evaluation against the single-crystal model), the
compressed Jacobian against plain finite differences, and end-to-end checks
on invented samples made by tests/_joint_synthetic.py: a planted antecryst is
named and the shared bands contain the truth, excluded crystals are left out,
two melts are not forced into one answer.
"""

import warnings

import _joint_synthetic as js
import numpy as np
import pytest
from _tolerances import RTOL_IDENTITY
from numpy.testing import assert_allclose
from zoning.fitting import fit_sample
from zoning.fitting import joint as J
from zoning.fitting.problem import FitProblem, TraceData, _build_model

from zoning.exceptions import (
    CalibrationRangeWarning,
    DataQualityWarning,
    FitError,
    ZoningError,
)
from zoning.models import CrystallizationModel
from zoning.traverse import Traverse

#: Difference between compressed and column-by-column finite differences:
#: the same forward differences, summed in another order.
RTOL_FD = 1e-6
#: Stacked versus one-crystal evaluation: the kernel places its grid from all
#: the fractions of a row, so stacking crystals moves nodes at round-off level
#: (observed 3e-12 relative; the integration error itself is 1e-5 mol%).
RTOL_STACKED = 1e-9
#: Traces: node placement enters at the integration error of the trace
#: quadrature, about 1e-5 relative (CrystallizationModel docstring).
RTOL_STACKED_TRACE = 1e-5
#: Sampler standard deviations against the closed form of a Gaussian target:
#: with about 5000 effective draws the sd has a sampling error near 1%, so 8%
#: is 8 standard errors (a sampler that ignored a move's asymmetry or the
#: shear would be off by tens of percent).
RTOL_SAMPLER_SD = 0.08
#: Log-Jacobian against central differences (step 1e-6): round-off of about
#: 1e-10 per entry; a missing factor would be off by order 1.
ATOL_LOGDET = 1e-6


def _settings(hier=False, per_crystal_rim=False, extra_local=(), section_fixed=0.0):
    model = _build_model("olivine", js.MELT, None, 0.10, ["Ni"], "sphere", None)
    return J._Settings(
        model=model, mineral="olivine", ratio="melt_mg_number", kd0=0.30, kd_sd=0.03,
        f_rim_mode="per_crystal" if per_crystal_rim else "shared",
        retention_mode="hierarchical" if hier else "shared", extra_local=tuple(extra_local),
        section_fixed=section_fixed,
        trace_params=(("melt0_ni_ppm", "crystal_nio_wt", "NiO"),), robust=False,
    )


def _crystals(traverses):
    out = []
    for t in traverses:
        u = t.usable()
        n = len(u)
        out.append(J._Crystal(
            name=t.name, traverse=t, usable=u, distance_um=u["distance_um"].to_numpy(float),
            radius_um=float(u["distance_um"].max()), y=u["fo"].to_numpy(float),
            sigma=np.full(n, 0.2), sigma_source="test",
            traces={"melt0_ni_ppm": ("NiO", "crystal_nio_wt", u["NiO"].to_numpy(float),
                                     np.full(n, 0.015), np.ones(n, dtype=bool))},
        ))
    return out


def _vector(joint, rng, m=5):
    v = rng.uniform(joint.lower, joint.upper, size=(m, joint.D))
    v[:, joint.index("melt_mg_number")] = rng.uniform(0.70, 0.78, m)
    for c in range(joint.C):
        if "f_rim" in joint.local:
            v[:, joint.index("f_rim", c)] = rng.uniform(0.05, 0.2, m)
    if "f_rim" in joint.shared:
        v[:, joint.index("f_rim")] = rng.uniform(0.05, 0.2, m)
    return v


def test_path_with_one_row_of_fractions_per_set_matches_profile():
    model = CrystallizationModel("olivine", js.MELT, traces=("Ni",))
    x = np.linspace(0.0, 300.0, 40)
    p = dict(melt_mg_number=np.array([0.72, 0.76]), f_rim=np.array([0.1, 0.2]),
             f_core=np.array([0.0, 0.05]), retention=np.array([0.2, 0.8]))
    ref = model.profile(x, 300.0, **p)
    zone = (x / 300.0) ** 3
    f = p["f_core"][:, None] + (p["f_rim"] - p["f_core"])[:, None] * zone
    out = model.path(f, melt_mg_number=p["melt_mg_number"], retention=p["retention"])
    assert_allclose(out["crystal"], ref["crystal"], rtol=RTOL_IDENTITY)
    assert_allclose(out["crystal_nio_wt"], ref["crystal_nio_wt"], rtol=RTOL_IDENTITY)


def _profile_alone(model, cr, rows, c, n_crystals, extra=()):
    """Single-crystal profile of crystal ``c`` at the joint rows' parameters."""
    sel = slice(c, None, n_crystals)
    names = ("melt_mg_number", "kd", "retention", "f_rim", "f_core", "melt0_ni_ppm", *extra)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", CalibrationRangeWarning)  # random sets
        return model.profile(cr.distance_um, cr.radius_um, strict=False,
                             **{n: rows[n][sel] for n in names})


@pytest.mark.parametrize("hier", [False, True])
def test_stacked_evaluation_equals_each_crystal_alone(hier):
    traverses, _ = js.sample(n_hosts=3, antecryst=False, n_spots=20, seed=4)
    joint = J._Joint(_settings(hier=hier, per_crystal_rim=True), _crystals(traverses))
    v = _vector(joint, np.random.default_rng(0))
    out = joint.predict(v)
    rows = joint.rows(v)
    model = joint.s.model
    for c, cr in enumerate(joint.crystals):
        ref = _profile_alone(model, cr, rows, c, joint.C)
        n = cr.distance_um.size
        assert_allclose(out["crystal"][:, c, :n], ref["crystal"], rtol=RTOL_STACKED)
        assert_allclose(out["crystal_nio_wt"][:, c, :n], ref["crystal_nio_wt"],
                        rtol=RTOL_STACKED_TRACE)


def test_one_crystal_objective_equals_the_single_fit_objective():
    traverses, _ = js.sample(n_hosts=1, antecryst=False, n_spots=25, seed=5)
    (cr,) = _crystals(traverses)
    joint = J._Joint(_settings(), [cr])
    model = joint.s.model
    theta = np.array([0.75, 0.15, 0.4, 0.31, 380.0])
    free = ("melt_mg_number", "f_rim", "retention", "kd", "melt0_ni_ppm")
    specs = {s.name: s for s in model.parameters}
    prob = FitProblem(
        traverse=cr.traverse, usable=cr.usable, model=model, names=tuple(specs), free=free,
        fixed={n: specs[n].default for n in specs if n not in free},
        lower=np.array([specs[n].lower for n in free]),
        upper=np.array([specs[n].upper for n in free]), kd0=0.30, kd_sd=0.03,
        distance_um=cr.distance_um, radius_um=cr.radius_um, y=cr.y, sigma=cr.sigma,
        traces=(TraceData("NiO", "Ni", "crystal_nio_wt", "melt0_ni_ppm",
                          *cr.traces["melt0_ni_ppm"][2:]),),
        robust=False,
    )
    single = prob.objective(prob.residuals(prob.params(theta[None, :]), 1))[0]
    v = np.r_[theta, 0.0]  # F_core fraction 0
    assert_allclose(joint.objective(v)[0], single, rtol=1e-10)


def test_compressed_jacobian_equals_column_by_column_differences():
    traverses, _ = js.sample(n_hosts=3, antecryst=False, n_spots=15, seed=6)
    joint = J._Joint(_settings(), _crystals(traverses))
    v = _vector(joint, np.random.default_rng(1), m=1)[0]
    ls = J._LeastSquares(joint)
    jac = ls.jacobian_at(v)
    h = ls.steps * np.where(v + ls.steps <= ls.hi, 1.0, -1.0)
    base = ls.residuals_of(v[None, :])[0]
    for col in range(v.size):
        x = v.copy()
        x[col] += h[col]
        ref = (ls.residuals_of(x[None, :])[0] - base) / h[col]
        assert_allclose(jac[:, col], ref, rtol=RTOL_FD, atol=1e-9 * np.max(np.abs(ref)))


def _fit(traverses, **kw):
    kw.setdefault("n_sweeps", 300)
    kw.setdefault("n_chains", 12)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", DataQualityWarning)
        warnings.simplefilter("ignore", CalibrationRangeWarning)  # picritic invented melt
        warnings.filterwarnings("ignore", category=Warning, message=".*too short.*")
        return fit_sample(traverses, melt=js.MELT, **kw)


def test_planted_antecryst_is_named_and_shared_bands_contain_the_truth():
    traverses, truth = js.sample(n_hosts=5, n_spots=30, seed=11)
    res = _fit(traverses, seed=2)
    verdicts = {c.name: c.verdict for c in res.crystals}
    assert [n for n, v in verdicts.items() if v == "likely antecryst"] == truth["antecrysts"]
    assert res.n_antecrysts == 1 and res.n_crystals == 6
    # no fe3_fraction given: the melt reader's default, recorded as such (as for
    # single fits; the command line passes None when --fe3 is not given)
    assert res.settings["fe3_fraction"] == 0.10
    assert res.settings["fe3_source"] == "default"
    for name in ("melt_mg_number", "f_rim", "retention", "kd", "melt0_ni_ppm"):
        e = res.estimates[name]
        assert e.lo95 <= truth[name] <= e.hi95, (name, e)
    ante = res.crystal(truth["antecrysts"][0])
    own = ante.own_estimates["melt_mg_number"]
    assert own.lo95 <= truth["melt_mg_number"] + 0.06 <= own.hi95
    assert any("does not share" in w for w in res.warnings)
    # the invented parent melt is picritic (melt MgO above 10 wt% early on the
    # path): the glass thermometer's calibration range is left, and said so
    assert any("calibration range" in w and "thermometer" in w for w in res.warnings)
    # the anchor has F_core = 0 by definition; the others' F_core bands hold the truth
    inside = [c.estimates["f_core"].lo95 - 0.01 <= truth["f_core"][c.name]
              <= c.estimates["f_core"].hi95 + 0.01 for c in res.crystals
              if c.verdict == "consistent"]
    assert all(inside)


def test_default_length_is_continued_when_short_and_a_given_length_is_not(monkeypatch):
    # With the default sweeps (made short here), a short chain is continued
    # and the fit says so; the length a user gives is run as it is.
    traverses, _ = js.sample(n_hosts=3, antecryst=False, n_spots=20, seed=4)
    monkeypatch.setattr(J, "DEFAULT_N_SWEEPS", {"olivine": 200, "plagioclase": 200})
    res = _fit(traverses, n_sweeps=None, seed=1)
    d = res.diagnostics
    assert d["n_sweeps_planned"] == 200 and 200 < d["n_sweeps"] <= J.MAX_EXTEND * 200
    assert any("production was continued to" in w for w in res.warnings)
    given = _fit(traverses, n_sweeps=200, seed=1)
    assert given.diagnostics["n_sweeps"] == given.diagnostics["n_sweeps_planned"] == 200
    assert not any("production was continued" in w for w in given.warnings)


def test_excluded_crystals_are_left_out_and_listed():
    traverses, truth = js.sample(n_hosts=3, n_spots=25, seed=12)
    res = _fit(traverses, exclude=truth["antecrysts"])
    assert res.excluded == tuple(truth["antecrysts"])
    assert res.crystal(truth["antecrysts"][0]).verdict == "excluded"
    assert res.n_antecrysts == 0 and res.verdict == "one melt"
    # growth only: the processes single fits can fit are held at zero, and said so
    assert res.settings["section_h_over_r"] == 0.0
    assert res.settings["diffusion_length_um"] == 0.0
    assert J.PROCESS_NOTE in res.warnings
    keys = [m.key for m in res.methods]
    assert "wilks_1938" in keys and "hart_davis_1978" in keys


def _shortened(traverse, n_spots):
    """The traverse with only its first ``n_spots`` spots."""
    return Traverse(traverse.name, traverse.source, traverse.mineral,
                    traverse.spots.iloc[:n_spots].reset_index(drop=True))


def test_crystal_with_too_few_spots_is_left_out_and_said_not_a_stop():
    traverses, _ = js.sample(n_hosts=3, antecryst=False, n_spots=25, seed=12)
    # 4 growth parameters + the initial Ni: 7 spots needed, 6 given
    short = _shortened(traverses[1], 6)
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        res = fit_sample([traverses[0], short, traverses[2]], melt=js.MELT, n_sweeps=300,
                         n_chains=12)
    assert any(issubclass(w.category, DataQualityWarning)
               and "6 usable spots; at least 7" in str(w.message) for w in caught)
    assert res.crystal(short.name).verdict == "too few spots"
    assert res.crystal(short.name).group == 0 and not res.crystal(short.name).estimates
    assert {c.verdict for c in res.crystals if c.name != short.name} == {"consistent"}
    assert res.excluded == ()  # the user's exclusions only
    # fewer than two crystals left: the sample cannot be fitted, and says why
    with pytest.raises(FitError, match="at least two crystals with at least 7 usable"):
        fit_sample([traverses[0], short], melt=js.MELT)


def test_two_melts_are_not_forced_into_one_answer():
    traverses, truth = js.sample(n_hosts=3, antecryst=False, two_melts=True, n_spots=25,
                                 seed=13)
    res = _fit(traverses)
    assert res.verdict == "two melts, no majority"
    assert all(not e.constrained and np.isnan(e.best) for e in res.estimates.values())
    assert len(res.group_estimates) == 2
    groups = {c.name: c.group for c in res.crystals}
    g = [{n for n, k in groups.items() if k == i} for i in (1, 2)]
    assert sorted(map(sorted, g)) == sorted(map(sorted, truth["groups"]))
    assert any("two melts" in w for w in res.warnings)


def test_same_seed_same_numbers():
    traverses, _ = js.sample(n_hosts=2, antecryst=False, n_spots=20, seed=14)
    a = _fit(traverses, n_sweeps=150, n_chains=6, seed=3)
    b = _fit(traverses, n_sweeps=150, n_chains=6, seed=3)
    assert_allclose(a.samples, b.samples, rtol=0)


def test_bad_requests_say_what_to_do():
    traverses, _ = js.sample(n_hosts=2, antecryst=False, n_spots=15, seed=15)
    with pytest.raises(ZoningError, match="not crystals of this sample"):
        fit_sample(traverses, melt=js.MELT, exclude=["nope"])
    with pytest.raises(ZoningError, match="at least two crystals"):
        fit_sample(traverses, melt=js.MELT, exclude=[traverses[0].name])
    plag = Traverse("FRL-12 pl1", "x.csv", "plagioclase", traverses[0].spots.rename(
        columns={"fo": "an"}))
    with pytest.raises(ZoningError, match="of one mineral"):
        fit_sample([traverses[0], plag], melt=js.MELT)
    with pytest.raises(ZoningError, match="retention sharing"):
        fit_sample(traverses, melt=js.MELT, retention="free")


def test_laws_outside_their_calibration_warn_once_along_the_shared_path():
    # The thermometer of Helz & Thornber (1987) is calibrated on about 2.5-10 wt%
    # glass MgO and D_Ni of Hart & Davis (1978) on about 6-20 wt% melt MgO (both
    # ranges from memory, as in zoning.thermometry and zoning.partitioning): a
    # picritic parent (Mg# 0.88) leaves both, a basaltic one stays in them.
    traverses, _ = js.sample(n_hosts=2, antecryst=False, n_spots=15, seed=1)
    joint = J._Joint(_settings(), _crystals(traverses))
    v = _vector(joint, np.random.default_rng(0), 1)[0]
    v[joint.index("melt_mg_number")] = 0.88
    out = J._calibration_warnings(joint, v)
    assert len(out) == 2 and len(set(out)) == 2
    assert any("Hart & Davis (1978)" in w for w in out)
    assert any("thermometer" in w and "2.5-10 wt% MgO" in w for w in out)
    v[joint.index("melt_mg_number")] = 0.66
    v[joint.index("f_rim")] = 0.05
    assert J._calibration_warnings(joint, v) == []


def test_screening_sets_apart_the_most_discordant_crystal_first(monkeypatch):
    # An antecryst drags the shared fit so far that every crystal's p value
    # underflows to 0; the sequential test (Rosner 1983) must still remove the
    # crystal with the largest statistic first, not the first file in the list.
    from scipy import stats

    planted = {0: 1700.0, 1: 2700.0, 2: 10400.0, 3: 55.0}

    def fake_stats(settings, crystals, owns, members):
        out = {}
        for i in members:
            t = planted[i] if 2 in members else 2.0 + 0.1 * i
            out[i] = (t, 5, float(stats.chi2.sf(t, 5)))
        return out, None

    monkeypatch.setattr(J, "_lr_stats", fake_stats)
    assert all(stats.chi2.sf(t, 5) == 0.0 for t in (1700.0, 2700.0, 10400.0))
    screen = J._screen(None, [None] * 4, {}, [0, 1, 2, 3])
    assert screen.flagged == [2]
    assert screen.members == [0, 1, 3] and not screen.disagree_pair


@pytest.mark.parametrize("per_crystal_rim, extra_local, section_fixed", [
    (False, (), 0.0), (True, (), 0.0),
    (False, ("section_h_over_r",), 0.0),
    (True, ("section_h_over_r", "growth_exponent"), 0.0),
    (False, (), 0.4),
])
def test_sampler_coordinates_invert_and_their_jacobian_matches_differences(
        per_crystal_rim, extra_local, section_fixed):
    # Closed-form check: from_sampler(to_sampler(v)) = v, and the log-Jacobian
    # the sampler adds equals log|det(d natural / d sampler)| by central
    # differences over the free entries (the anchor's F_core held fixed).
    # With an off-core section every other crystal's F_core is sampled
    # through its observed core, whose map also depends on h/R and n.
    traverses, _ = js.sample(n_hosts=3, antecryst=False, n_spots=12, seed=4)
    joint = J._Joint(_settings(per_crystal_rim=per_crystal_rim, extra_local=extra_local,
                               section_fixed=section_fixed), _crystals(traverses))
    rng = np.random.default_rng(11)
    v = _vector(joint, rng, m=3)
    for c in range(joint.C):
        if "section_h_over_r" in joint.local:
            v[:, joint.index("section_h_over_r", c)] = rng.uniform(0.1, 0.8, 3)
    anchor = joint.index("f_core_fraction", 0)
    joint.fixed[anchor] = True
    v[:, anchor] = 0.0
    w = joint.to_sampler(v)
    assert_allclose(joint.from_sampler(w), v, rtol=RTOL_IDENTITY, atol=1e-15)
    assert np.all(joint.from_sampler(w)[:, anchor] == 0.0)
    free = np.flatnonzero(~joint.fixed)
    h = 1e-6
    for row in range(v.shape[0]):
        jac = np.empty((free.size, free.size))
        for a, col in enumerate(free):
            up, dn = w[row].copy(), w[row].copy()
            up[col] += h
            dn[col] -= h
            diff = (joint.from_sampler(up)[0] - joint.from_sampler(dn)[0]) / (2 * h)
            jac[:, a] = diff[free]
        local, shared = joint.log_jacobian(w[row : row + 1])
        assert_allclose(local.sum() + shared[0], np.linalg.slogdet(jac)[1], atol=ATOL_LOGDET)


class _GaussianJoint:
    """A joint-shaped Gaussian with a closed-form covariance (test double).

    Shared s ~ N(0, Ss) (2 entries); each of C crystals has 2 local entries
    l_c ~ N(A s, Ll), conditionally independent given s, as in the real
    joint posterior. Identity sampler coordinates.
    """

    def __init__(self, n_crystals=6, rho=0.9):
        self.S, self.Q, self.C = 2, 2, n_crystals
        self.D = self.S + self.C * self.Q
        self.fixed = np.zeros(self.D, dtype=bool)
        self.Ss = 0.01 * np.array([[1.0, rho], [rho, 1.0]])
        self.A = np.array([[3.0, 0.5], [-1.0, 2.0]])
        self.Ll = 0.01 * np.array([[0.2, 0.1], [0.1, 0.3]])
        self.lower, self.upper = np.full(self.D, -50.0), np.full(self.D, 50.0)

    def to_sampler(self, v):
        return np.atleast_2d(v).copy()

    def from_sampler(self, w):
        return np.atleast_2d(w).copy()

    def sampler_bounds(self):
        return self.lower.copy(), self.upper.copy()

    def log_parts(self, w):
        w = np.atleast_2d(w)
        s, loc = w[:, :2], w[:, 2:].reshape(-1, self.C, 2)
        r = loc - (s @ self.A.T)[:, None, :]
        lc = -0.5 * np.einsum("mci,ij,mcj->mc", r, np.linalg.inv(self.Ll), r)
        ls = -0.5 * np.einsum("mi,ij,mj->m", s, np.linalg.inv(self.Ss), s)
        return lc, ls

    def covariance(self):
        stack = np.vstack([np.eye(2)] + [self.A] * self.C)
        cov = stack @ self.Ss @ stack.T
        for c in range(self.C):
            i = self.S + 2 * c
            cov[i : i + 2, i : i + 2] += self.Ll
        return cov


def test_sampler_draws_a_gaussian_target_with_its_closed_form_spread():
    # Every move of the joint sampler (crystal blocks, shared block with the
    # shear, differential evolution, independence) must leave the target
    # invariant: on a Gaussian the draws' sds equal the closed form, also when
    # the start is four times too wide.
    target = _GaussianJoint()
    cov = target.covariance()
    chain = J._sample(target, np.zeros(target.D), 4.0 * cov, n_chains=32, n_sweeps=1000,
                      seed=3)
    draws = chain.draws.reshape(-1, target.D)
    assert_allclose(draws.std(axis=0), np.sqrt(np.diag(cov)), rtol=RTOL_SAMPLER_SD)
    assert chain.rhat.max() < 1.05


def test_short_chain_is_continued_draw_for_draw_up_to_the_cap():
    # Production continues while the chain is short (ESS or R-hat): the
    # continued chain starts with exactly the draws of the chain that was
    # not continued (same seed), stops once long enough or at the cap, and
    # still draws the target's closed-form spread.
    target = _GaussianJoint()
    cov = target.covariance()
    kw = dict(n_chains=32, n_sweeps=200, seed=3)
    plain = J._sample(target, np.zeros(target.D), cov, **kw)
    assert J._chain_short(plain.ess, plain.rhat)  # 120 production sweeps are too few
    longer = J._sample(target, np.zeros(target.D), cov, max_sweeps=2000, **kw)
    n_prod = plain.draws.shape[0]
    assert_allclose(longer.draws[:n_prod], plain.draws, rtol=0, atol=0)
    assert longer.extended_from == 200 and 200 < longer.n_sweeps <= 2000
    assert longer.draws.shape[0] == longer.n_sweeps - longer.burn_in
    assert longer.n_sweeps == 2000 or not J._chain_short(longer.ess, longer.rhat)
    draws = longer.draws.reshape(-1, target.D)
    assert_allclose(draws.std(axis=0), np.sqrt(np.diag(cov)), rtol=RTOL_SAMPLER_SD)
    # a cap at the planned length changes nothing
    same = J._sample(target, np.zeros(target.D), cov, max_sweeps=200, **kw)
    assert same.extended_from == 0
    assert_allclose(same.draws, plain.draws, rtol=0, atol=0)


class _CurvedJoint(_GaussianJoint):
    """A joint-shaped target with a bent shared-local ridge (test double).

    Shared s ~ N(0, I) (2 entries); each of C crystals has two local
    entries, conditionally independent given s:
    l_c0 | s ~ N(B (s_0^2 - 1) + 0.5 s_1, 0.1^2) and l_c1 | s ~ N(0.3 s_0, 0.2^2).
    Closed-form marginals: every entry has mean 0; Var(s_k) = 1,
    Var(l_c0) = 2 B^2 + 0.25 + 0.01, Var(l_c1) = 0.09 + 0.04.
    """

    B = 1.5

    def __init__(self, n_crystals=4):
        super().__init__(n_crystals=n_crystals)

    def log_parts(self, w):
        w = np.atleast_2d(w)
        s, loc = w[:, :2], w[:, 2:].reshape(-1, self.C, 2)
        m0 = self.B * (s[:, 0] ** 2 - 1.0) + 0.5 * s[:, 1]
        m1 = 0.3 * s[:, 0]
        lc = (-0.5 * ((loc[:, :, 0] - m0[:, None]) / 0.1) ** 2
              - 0.5 * ((loc[:, :, 1] - m1[:, None]) / 0.2) ** 2)
        ls = -0.5 * (s**2).sum(axis=1)
        return lc, ls

    def sd(self):
        local = [np.sqrt(2 * self.B**2 + 0.26), np.sqrt(0.13)]
        return np.array([1.0, 1.0] + local * self.C)


def test_block_straightening_map_is_exact_keeps_crystals_apart_and_straightens():
    # The map fitted to draws of the curved target: inverse(forward(u)) = u to
    # rounding; its Jacobian is constant (a triangular map with unit diagonal
    # after scaling: central-difference log-determinants equal at every
    # point); a crystal's straightened entries do not depend on another
    # crystal's; and the ridge l_c0 = B (s_0^2 - 1) + ... becomes straight
    # (the straightened entry's variance is the conditional one, 0.1^2, in
    # the map's units).
    target = _CurvedJoint()
    rng = np.random.default_rng(5)
    k = 4000
    sh = rng.standard_normal((k, 2))
    loc = np.empty((k, target.C, 2))
    loc[:, :, 0] = (target.B * (sh[:, :1] ** 2 - 1.0) + 0.5 * sh[:, 1:]
                    + 0.1 * rng.standard_normal((k, target.C)))
    loc[:, :, 1] = 0.3 * sh[:, :1] + 0.2 * rng.standard_normal((k, target.C))
    u = np.concatenate([sh, loc.reshape(k, -1)], axis=1)
    shared_cols, local_cols = np.arange(2), np.arange(2, target.D)
    shear = J._BlockShear.fitted(u, shared_cols, local_cols)
    assert shear is not None
    w = shear.forward(u)
    assert_allclose(shear.inverse(w), u, rtol=0, atol=1e-10)
    h = 1e-6

    def logdet(x):
        jac = np.empty((x.size, x.size))
        for a in range(x.size):
            up, dn = x.copy(), x.copy()
            up[a] += h
            dn[a] -= h
            jac[:, a] = (shear.forward(up)[0] - shear.forward(dn)[0]) / (2 * h)
        return np.linalg.slogdet(jac)[1], jac

    d0, jac = logdet(u[0])
    d1, _ = logdet(u[1] + 0.7)
    assert_allclose(d0, d1, atol=ATOL_LOGDET)
    # crystal 1's straightened entries do not move with crystal 0's entries
    assert_allclose(jac[4:6, 2:4], 0.0, atol=1e-8)
    # the bent entry is straight: residual sd 0.1 of an entry with sd ~2.2
    sd_l0 = u[:, 2].std()
    assert w[:, 2].std() * sd_l0 < 0.12
    # too few draws: no map
    assert J._BlockShear.fitted(u[:50], shared_cols, local_cols) is None


def test_sampler_draws_a_curved_joint_target_with_its_closed_form_spread():
    # The straightening map is refitted during burn-in and changes the
    # coordinates the moves work in; the target must stay invariant: on the
    # curved target the draws' means and sds equal the closed form. (Without
    # the map, straighten=False, the same run gave sd 0.73 for s_0 and 1.01
    # for l_c0: the bent ridge is not crossed in 2000 sweeps.)
    target = _CurvedJoint()
    chain = J._sample(target, np.zeros(target.D), 0.1 * np.eye(target.D), n_chains=32,
                      n_sweeps=2000, seed=4, straighten=True)
    draws = chain.draws.reshape(-1, target.D)
    assert_allclose(draws.std(axis=0), target.sd(), rtol=RTOL_SAMPLER_SD)
    assert_allclose(draws.mean(axis=0), 0.0, atol=0.1 * target.sd().max())


# ------------------------------------------------- section offset per crystal
def test_section_none_or_zero_gives_the_growth_only_numbers():
    # h/R = 0 is growth only: None (default) and 0 give the same draws bit for
    # bit, and the process note of growth-only fits
    traverses, _ = js.sample(n_hosts=2, antecryst=False, n_spots=20, seed=14)
    a = _fit(traverses, n_sweeps=150, n_chains=6, seed=3)
    b = _fit(traverses, n_sweeps=150, n_chains=6, seed=3, section_h_over_r=0.0)
    assert_allclose(a.samples, b.samples, rtol=0)
    assert a.parameter_names == b.parameter_names
    assert not any("section_h_over_r" in n for n in a.parameter_names)
    assert J.PROCESS_NOTE in b.warnings and b.settings["section_h_over_r"] == 0.0


def test_stacked_evaluation_with_a_section_per_crystal_equals_each_crystal_alone():
    # Limit check against the single-crystal forward model: a spot at distance
    # x of a section at h from the centre lies at radius sqrt(x^2 + h^2) of the
    # crystal (zoning.geometry.zone_fraction); the stacked evaluation with one
    # h/R per row must equal CrystallizationModel.profile(..., section_h_over_r=h)
    # of each crystal alone.
    traverses, _ = js.sample(n_hosts=3, antecryst=False, n_spots=20, seed=4)
    base = _settings(per_crystal_rim=True)
    settings = J._Settings(**{**base.__dict__, "extra_local": ("section_h_over_r",)})
    joint = J._Joint(settings, _crystals(traverses))
    rng = np.random.default_rng(2)
    v = _vector(joint, rng)
    for c in range(joint.C):
        v[:, joint.index("section_h_over_r", c)] = rng.uniform(0.0, 0.9, v.shape[0])
    out = joint.predict(v)
    rows = joint.rows(v)
    model = joint.s.model
    for c, cr in enumerate(joint.crystals):
        ref = _profile_alone(model, cr, rows, c, joint.C, ("section_h_over_r",))
        n = cr.distance_um.size
        assert_allclose(out["f"][:, c, :n], ref["f"], rtol=RTOL_IDENTITY)
        assert_allclose(out["crystal"][:, c, :n], ref["crystal"], rtol=RTOL_STACKED)
        assert_allclose(out["crystal_nio_wt"][:, c, :n], ref["crystal_nio_wt"],
                        rtol=RTOL_STACKED_TRACE)
    # a fixed h/R for every crystal is the same as that value in every row
    fixed = J._Joint(J._Settings(**{**base.__dict__, "section_fixed": 0.5}),
                     _crystals(traverses))
    w = np.delete(v, [joint.index("section_h_over_r", c) for c in range(joint.C)], axis=1)
    v_half = v.copy()
    v_half[:, [joint.index("section_h_over_r", c) for c in range(joint.C)]] = 0.5
    assert_allclose(fixed.predict(w)["crystal"], joint.predict(v_half)["crystal"],
                    rtol=RTOL_IDENTITY)


@pytest.mark.parametrize("hier", [False, True])
def test_stacked_evaluation_with_diffusion_per_crystal_equals_each_crystal_alone(hier):
    # Limit check against the single-crystal forward model: with one
    # diffusion length (and section) per row, the stacked evaluation must
    # equal CrystallizationModel.profile(..., diffusion_length_um=L,
    # section_h_over_r=h) of each crystal alone, relaxed and grown profiles
    # both; rows with L = 0 are the growth profile (the L -> 0 limit).
    traverses, _ = js.sample(n_hosts=3, antecryst=False, n_spots=20, seed=4)
    joint = J._Joint(_settings(hier=hier, per_crystal_rim=True,
                               extra_local=("section_h_over_r", "diffusion_length_um")),
                     _crystals(traverses))
    rng = np.random.default_rng(3)
    v = _vector(joint, rng)
    for c in range(joint.C):
        v[:, joint.index("section_h_over_r", c)] = rng.uniform(0.0, 0.8, v.shape[0])
        v[:, joint.index("diffusion_length_um", c)] = rng.uniform(0.0, 60.0, v.shape[0])
    v[0, joint.index("diffusion_length_um", 1)] = 0.0
    out = joint.predict(v)
    rows = joint.rows(v)
    model = joint.s.model
    for c, cr in enumerate(joint.crystals):
        ref = _profile_alone(model, cr, rows, c, joint.C,
                             ("section_h_over_r", "diffusion_length_um"))
        n = cr.distance_um.size
        for key in ("crystal", "crystal_grown"):
            assert_allclose(out[key][:, c, :n], ref[key], rtol=RTOL_STACKED)
        for key in ("crystal_nio_wt", "crystal_nio_wt_grown"):
            assert_allclose(out[key][:, c, :n], ref[key], rtol=RTOL_STACKED_TRACE)
    assert_allclose(out["crystal"][0, 1], out["crystal_grown"][0, 1], rtol=0)
    assert not np.allclose(out["crystal"][1, 1], out["crystal_grown"][1, 1])
    # a crystal's L is capped at its section radius (the single-fit prior)
    for c, cr in enumerate(joint.crystals):
        assert joint.upper[joint.index("diffusion_length_um", c)] == min(
            cr.radius_um, {s.name: s for s in model.parameters}["diffusion_length_um"].upper)


def test_off_centre_crystals_fitted_with_free_sections_recover_the_shared_melt():
    # Invented sample: three hosts cut at h/R 0.3-0.8, all from one melt.
    traverses, truth = js.sample(n_hosts=3, antecryst=False, n_spots=30, seed=21,
                                 section_h_over_r=(0.3, 0.8))
    res = _fit(traverses, seed=1, section_h_over_r="free")
    assert [c.verdict for c in res.crystals] == ["consistent"] * 3
    for name in ("melt_mg_number", "f_rim", "retention", "kd"):
        e = res.estimates[name]
        assert e.lo95 <= truth[name] <= e.hi95, (name, e)
    for c in res.crystals:
        e = c.estimates["section_h_over_r"]
        assert 0.0 <= e.lo95 <= e.hi95 <= 0.95
    assert res.settings["section_h_over_r"] == "free"
    assert any("section_h_over_r[" in n for n in res.parameter_names)
    assert J.process_note("free") in res.warnings
    assert any(m.role == "off-centre section" for m in res.methods)
    from zoning.io.joint_results import JOINT_CAUTION, format_sample_report, joint_caution

    assert "fitted per crystal" in joint_caution(res.settings)
    assert joint_caution({"section_h_over_r": 0.0}) == JOINT_CAUTION
    assert "fitted per crystal" in " ".join(format_sample_report(res).split())
    assert "not diffusion after growth" in J.process_note("free")


def test_diffused_crystals_fitted_with_free_diffusion_recover_the_melt_and_their_lengths():
    # Invented sample: three hosts from one melt, each relaxed after growth by
    # its own L in 15-40 µm (sitting in the melt for different times). With
    # L fitted per crystal the shared bands and every crystal's L band hold
    # the truth; the settings, process note and methods say diffusion was
    # fitted.
    traverses, truth = js.sample(n_hosts=3, antecryst=False, n_spots=30, seed=21,
                                 diffusion_length_um=(15.0, 40.0))
    res = _fit(traverses, seed=1, diffusion_length_um="free")
    assert [c.verdict for c in res.crystals] == ["consistent"] * 3
    for name in ("melt_mg_number", "f_rim", "retention", "kd"):
        e = res.estimates[name]
        assert e.lo95 <= truth[name] <= e.hi95, (name, e)
    for c in res.crystals:
        e = c.estimates["diffusion_length_um"]
        assert e.lo95 <= truth["diffusion_length_um"][c.name] <= e.hi95, (c.name, e)
    assert res.settings["diffusion_length_um"] == "free"
    assert any("diffusion_length_um[" in n for n in res.parameter_names)
    assert J.process_note(0.0, "free") in res.warnings
    assert any("diffusion" in m.role for m in res.methods)
    from zoning.io.joint_results import crystals_table, joint_caution

    table = crystals_table(res)
    assert {"diffusion_length_um", "diffusion_length_um_lo95", "diffusion_length_um_hi95",
            "diffusion_length_um_constrained"} <= set(table.columns)
    assert "diffusion length L was fitted per crystal" in joint_caution(res.settings)
    # the text report gives every crystal's L band
    from zoning.io.joint_results import format_sample_report

    lines = [ln for ln in format_sample_report(res).splitlines() if ": consistent" in ln]
    assert len(lines) == 3 and all(", L " in ln and "] µm" in ln for ln in lines)


def test_diffusion_settings_are_checked_as_for_single_fits():
    traverses, _ = js.sample(n_hosts=2, antecryst=False, n_spots=20, seed=14)
    with pytest.raises(ZoningError, match="diffusion length >= 0"):
        fit_sample(traverses, melt=js.MELT, diffusion_length_um=-5.0)
    with pytest.raises(ZoningError, match="'free' or a number"):
        fit_sample(traverses, melt=js.MELT, diffusion_length_um="long")
    # the growth-only note names both processes as held at zero
    assert "unrelaxed by diffusion" in J.process_note(0.0, 0.0)
    assert "L = 12 µm" in J.process_note("free", 12.0)
    assert "section offset h/R" in J.process_note("free", "free")


def test_section_settings_are_checked_as_for_single_fits():
    traverses, _ = js.sample(n_hosts=2, antecryst=False, n_spots=20, seed=14)
    with pytest.raises(ZoningError, match="geometry 'slab'"):
        fit_sample(traverses, melt=js.MELT, geometry="slab", section_h_over_r="free")
    with pytest.raises(ZoningError, match=r"must be in \[0, 1\)"):
        fit_sample(traverses, melt=js.MELT, section_h_over_r=1.5)
    with pytest.raises(ZoningError, match="'free' or a number"):
        fit_sample(traverses, melt=js.MELT, section_h_over_r="half")
