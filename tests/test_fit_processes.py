"""Processes after growth in the fit: off-centre section and diffusion after growth.

Synthetic traverses are invented (forward model + Gaussian noise, Ferrolyn
scenario); the priors follow from geometry (planes of random position and
orientation meeting a sphere cut it at h/R uniform on [0, 1): the distance
of the plane from the centre is uniform, a standard result of geometric
probability; from memory) and t = L^2 / D (definition of the diffusion
length, Crank 1975).
"""

from __future__ import annotations

import warnings

import numpy as np
import pandas as pd
import pytest
from _tolerances import GROWTH_ONLY, RTOL_IDENTITY
from numpy.testing import assert_allclose
from zoning.fitting import fit_traverse
from zoning.fitting.bestfit import candidate_models
from zoning.fitting.problem import PROCESS_DEFAULTS, prepare_problem
from zoning.fitting.summary import trade_off_messages
from zoning.io.results import SUMMARY_QUANTITIES, summary_table

from zoning.diffusion import MAX_DIFFUSION_LENGTH_UM, diffusion_time_days
from zoning.exceptions import ZoningError, ZoningWarning
from zoning.models import SECTION_H_OVER_R_MAX, CrystallizationModel
from zoning.traverse import Traverse

MELT = {"olivine": {"FeO": 9.5}, "plagioclase": {"Na2O": 3.1}}


def _traverse(mineral="olivine", n=40, radius=240.0, sigma=None, seed=0, traces=(),
              name="FRL-P1", **truth):
    model = CrystallizationModel(mineral, MELT[mineral], traces=traces,
                                 temperature_c=1200.0 if mineral == "plagioclase" else None)
    d = np.linspace(0.0, radius, n)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        out = model.profile(d, radius, **truth)
    rng = np.random.default_rng(seed)
    major = "fo" if mineral == "olivine" else "an"
    sigma = (0.2 if mineral == "olivine" else 0.5) if sigma is None else sigma
    spots = pd.DataFrame({
        "row": np.arange(2, n + 2), "point": [str(i + 1) for i in range(n)], "label": "",
        "distance_um": d, major: out["crystal"] + rng.normal(0.0, sigma, n),
        f"{major}_sigma": sigma, "status": "ok", "reason": "",
    })
    if "Ni" in traces:
        spots["NiO"] = out["crystal_nio_wt"] + rng.normal(0.0, 0.015, n)
    return Traverse(name, f"{name}.csv", mineral, spots)


OL_TRUTH = {"melt_mg_number": 0.74, "f_rim": 0.3, "retention": 0.5, "kd": 0.3}
PL_TRUTH = {"melt_ca_number": 0.62, "f_rim": 0.4, "retention": 0.3, "kd": 2.0}


# --- settings and priors --------------------------------------------------------


def test_olivine_fits_both_processes_by_default_with_their_priors():
    prob = prepare_problem(_traverse(**OL_TRUTH), melt=MELT["olivine"])
    assert PROCESS_DEFAULTS["olivine"] == {"section_h_over_r": "free",
                                           "diffusion_length_um": "free"}
    j = prob.free.index("section_h_over_r")
    # random cut: h/R uniform on [0, 1), truncated where the section shows
    # only the outermost few per cent of the crystal
    assert (prob.lower[j], prob.upper[j]) == (0.0, SECTION_H_OVER_R_MAX)
    k = prob.free.index("diffusion_length_um")
    # uniform on [0, min(radius, model maximum)]: beyond L = R the crystal is homogenised
    assert (prob.lower[k], prob.upper[k]) == (0.0, min(240.0, MAX_DIFFUSION_LENGTH_UM))
    assert {"section", "diffusion"} == {p for c in candidate_models(prob) for p in c.processes}
    assert len(candidate_models(prob)) == 12  # 4 process sets x r free / 0 / 1


def test_numbers_fix_the_processes_and_strings_are_accepted():
    tr = _traverse(**OL_TRUTH)
    prob = prepare_problem(tr, melt=MELT["olivine"], section_h_over_r="0.3",
                           diffusion_length_um=12)
    assert "section_h_over_r" not in prob.free and prob.fixed["section_h_over_r"] == 0.3
    assert prob.fixed["diffusion_length_um"] == 12.0
    assert [c.processes for c in candidate_models(prob)] == [()] * 3
    prob = prepare_problem(tr, melt=MELT["olivine"], section_h_over_r="FREE",
                           diffusion_length_um=0)
    assert "section_h_over_r" in prob.free and "diffusion_length_um" not in prob.free


def test_plagioclase_diffusion_is_fixed_at_zero_with_a_note():
    prob = prepare_problem(_traverse("plagioclase", **PL_TRUTH), melt=MELT["plagioclase"])
    assert "diffusion_length_um" not in prob.free and prob.fixed["diffusion_length_um"] == 0
    assert "section_h_over_r" in prob.free
    assert any("An (CaAl-NaSi) is practically frozen" in n for n in prob.notes)
    with pytest.raises(ZoningError, match="cannot be fitted for plagioclase without an MgO"):
        prepare_problem(_traverse("plagioclase", **PL_TRUTH), melt=MELT["plagioclase"],
                        diffusion_length_um="free")


def test_slab_section_is_fixed_with_a_note_and_refused_when_asked_for():
    tr = _traverse(**OL_TRUTH)
    prob = prepare_problem(tr, melt=MELT["olivine"], geometry="slab")
    assert prob.fixed["section_h_over_r"] == 0.0
    assert any("geometry slab" in n for n in prob.notes)
    with pytest.raises(ZoningError, match="--section-h-over-r 0"):
        prepare_problem(tr, melt=MELT["olivine"], geometry="slab", section_h_over_r="free")


@pytest.mark.parametrize("kw, message", [
    ({"section_h_over_r": "half"}, "must be 'free' or a number; got 'half'"),
    ({"section_h_over_r": 1.0}, r"must be in \[0, 1\)"),
    ({"diffusion_length_um": -1.0}, "diffusion length >= 0"),
    ({"diffusion_length_um": True}, "--diffusion-length-um free"),
    ({"delta_qfm": float("nan")}, "--delta-qfm 0"),
])
def test_bad_process_settings_say_what_to_give(kw, message):
    with pytest.raises(ZoningError, match=message):
        prepare_problem(_traverse(**OL_TRUTH), melt=MELT["olivine"], **kw)


# --- trade-off statement -----------------------------------------------------------


def test_trade_off_sentence_from_correlated_or_bimodal_draws_only():
    rng = np.random.default_rng(1)
    names = ("retention", "diffusion_length_um")
    lower, upper = np.array([0.0, 0.0]), np.array([1.0, 200.0])
    # r and L anticorrelated over a wide r range
    r = rng.uniform(0.0, 1.0, 4000)
    length = np.clip(60.0 * (1.0 - r) + rng.normal(0.0, 5.0, r.size), 0.0, 200.0)
    text = trade_off_messages(names, np.column_stack([r, length]), lower, upper)
    assert len(text) == 1 and "NiO" in text[0] and "relaxed by diffusion" in text[0]
    # two modes: (r ~ 0.1, L ~ 50) and (r ~ 0.95, L ~ 0)
    r2 = np.concatenate([rng.normal(0.1, 0.03, 2000), rng.normal(0.95, 0.02, 2000)])
    l2 = np.concatenate([rng.normal(50.0, 3.0, 2000), np.abs(rng.normal(0.0, 1.0, 2000))])
    assert trade_off_messages(names, np.column_stack([np.clip(r2, 0, 1), l2]), lower, upper)
    # negative controls: independent draws; or r pinned down
    l3 = rng.uniform(0.0, 200.0, r.size)
    assert trade_off_messages(names, np.column_stack([r, l3]), lower, upper) == []
    r4 = rng.normal(0.5, 0.05, r.size)
    l4 = np.clip(60.0 * (1.0 - r4) + rng.normal(0.0, 1.0, r.size), 0, 200)
    assert trade_off_messages(names, np.column_stack([r4, l4]), lower, upper) == []


# --- fits: columns, time in days, recovery ------------------------------------------


def _fit(traverse, **kw):
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", ZoningWarning)  # short test chains warn
        return fit_traverse(traverse, melt=MELT[traverse.mineral], seed=2, n_walkers=32,
                            n_steps=300, traces=(), **kw)


@pytest.fixture(scope="module")
def off_centre():
    """r = 0.5 crystal cut at h/R = 0.5 (half of random cuts lie this far out)."""
    return _fit(_traverse(**OL_TRUTH, section_h_over_r=0.5), temperature_c=1150.0)


@pytest.fixture(scope="module")
def no_process():
    return _fit(_traverse(**{**OL_TRUTH, "retention": 0.2}, seed=3))


def test_off_centre_crystal_r_band_contains_the_truth(off_centre):
    r, h = off_centre.estimates["retention"], off_centre.estimates["section_h_over_r"]
    assert r.lo95 <= 0.5 <= r.hi95
    assert h.lo95 <= 0.5 <= h.hi95
    # fitted with processes: the summary names them and the table has the columns
    row = summary_table([off_centre]).iloc[0]
    for q in ("section_h_over_r", "diffusion_length_um", "diffusion_time_days"):
        assert q in SUMMARY_QUANTITIES
        assert row[f"{q}_lo95"] <= row[q] <= row[f"{q}_hi95"]
    assert off_centre.comparison["processes"].str.contains("section").any()


def test_diffusion_time_is_the_length_band_through_t_equals_l2_over_d(off_centre):
    length = off_centre.estimates["diffusion_length_um"]
    days = off_centre.estimates["diffusion_time_days"]
    fo_rim = float(off_centre.curve["best_grown"].iloc[-1]) if "best_grown" in (
        off_centre.curve) else float(off_centre.curve["best"].iloc[-1])
    kw = dict(mineral="olivine", delta_qfm=0.0, x_fe=1.0 - 0.01 * fo_rim)
    expected = diffusion_time_days(length.hi95, 1150.0, **kw)
    # monotone transform: the band end of t is the band end of L transformed
    # (percentiles of the same draws; one-sided at 0 for both)
    assert days.lo95 == 0.0 if length.lo95 == 0.0 else days.lo95 > 0
    assert_allclose(days.hi95, expected, rtol=1e-6)
    assert any("fO2 = QFM" in w for w in off_centre.warnings)


def test_crystal_without_processes_is_not_reported_as_diffused(no_process):
    length = no_process.estimates["diffusion_length_um"]
    assert length.lo95 == 0.0  # the band reaches zero
    assert np.isnan(no_process.estimates.get(
        "diffusion_time_days", type("E", (), {"best": np.nan})).best)  # no temperature given


def test_fixed_processes_are_reported_as_fixed():
    r = _fit(_traverse(**OL_TRUTH), **GROWTH_ONLY)
    for q in ("section_h_over_r", "diffusion_length_um"):
        e = r.estimates[q]
        assert e.best == e.lo95 == e.hi95 == 0.0 and e.constrained
    assert set(r.comparison["processes"]) == {"growth"}
    assert "best_grown" not in r.curve
    assert_allclose(r.settings["section_h_over_r"], 0.0, rtol=RTOL_IDENTITY)


@pytest.mark.slow
def test_bands_cover_the_truth_across_the_process_families():
    """Larger run (full version: ``benchmarks/fit.py`` part 2).

    Twelve olivine crystals, three per family (central cut without
    diffusion; random off-centre cut; diffused 0-60 µm; both), without NiO:
    the r band must hold the true r in at least 10 of 12 (a 95% band misses
    more than 2 of 12 with probability about 2%, binomial), and the L and h/R
    bands their truths likewise.
    """
    rng = np.random.default_rng(2026)
    hits = {"retention": 0, "section_h_over_r": 0, "diffusion_length_um": 0}
    n = 0
    for family in ("central", "off-centre", "diffused", "both"):
        for _ in range(3):
            truth = {"melt_mg_number": float(rng.uniform(0.70, 0.78)),
                     "f_rim": float(rng.uniform(0.1, 0.3)),
                     "retention": float(rng.uniform(0.0, 1.0)), "kd": 0.3}
            if family in ("off-centre", "both"):
                truth["section_h_over_r"] = float(rng.uniform(0.0, 0.95))
            if family in ("diffused", "both"):
                truth["diffusion_length_um"] = float(rng.uniform(0.0, 60.0))
            r = _fit(_traverse(n=60, radius=300.0, seed=100 + n, **truth))
            n += 1
            for q in hits:
                e = r.estimates[q]
                hits[q] += bool(e.lo95 <= truth.get(q, 0.0) <= e.hi95)
    assert all(v >= n - 2 for v in hits.values()), hits


def test_section_sentence_gives_the_central_cut_band_only_where_it_differs():
    from zoning.fitting.summary import CENTRAL_CUT, estimate_from_draws, section_messages

    rng = np.random.default_rng(3)
    names = ("melt_mg_number", "section_h_over_r")
    n = 8000
    h = rng.uniform(0.0, 0.6, n)  # piled at 0: a central cut is not ruled out
    m = 0.70 + 0.10 * h + rng.normal(0.0, 0.01, n)  # off-centre cuts need a higher Mg#
    flat = np.column_stack([m, h])
    lower, upper = np.array([0.2, 0.0]), np.array([0.9, 1.0])
    est = {nm: estimate_from_draws(nm, "1", float(np.median(flat[:, j])), flat[:, j],
                                   lower[j], upper[j]) for j, nm in enumerate(names)}
    assert est["section_h_over_r"].lo95 == 0.0
    text = section_messages(names, flat, est, "melt_mg_number", "Mg#")
    assert len(text) == 1 and "--section-h-over-r 0" in text[0] and "higher parent Mg#" in text[0]
    c_lo, c_hi = np.percentile(m[h < CENTRAL_CUT], [2.5, 97.5])
    assert f"{c_lo:.3f}-{c_hi:.3f}" in text[0]
    e = est["melt_mg_number"]
    assert f"Mg# {e.lo95:.3f}-{e.hi95:.3f}) hold for either" in text[0]
    # the stated central-cut band matches this construction's closed form:
    # Mg# = 0.70 + 0.1 h with h uniform below 0.1, plus N(0, 0.01), is close
    # to normal with mean 0.705 and sd sqrt(0.01^2 + 0.01^2 / 12) (tolerance:
    # sampling of about 800 draws)
    sd = np.sqrt(0.01**2 + 0.01**2 / 12.0)
    assert abs(c_lo - (0.705 - 1.96 * sd)) < 0.002
    assert abs(c_hi - (0.705 + 1.96 * sd)) < 0.002
    # negative controls: Mg# independent of h; h/R band away from 0
    flat2 = np.column_stack([rng.normal(0.7, 0.01, n), h])
    assert section_messages(names, flat2, est, "melt_mg_number", "Mg#") == []
    h3 = rng.uniform(0.4, 0.6, n)
    flat3 = np.column_stack([0.70 + 0.10 * h3, h3])
    est3 = dict(est, section_h_over_r=estimate_from_draws(
        "section_h_over_r", "1", 0.5, h3, 0.0, 1.0))
    assert section_messages(names, flat3, est3, "melt_mg_number", "Mg#") == []


def _section_draws(n=8000, seed=3):
    rng = np.random.default_rng(seed)
    h = rng.uniform(0.0, 0.6, n)  # a central cut not ruled out
    m = 0.70 + 0.10 * h + rng.normal(0.0, 0.01, n)  # off-centre cuts need a higher Mg#
    return h, m


def test_section_envelope_is_the_union_of_the_random_and_central_cut_bands():
    from zoning.fitting.summary import CENTRAL_CUT, section_envelope

    h, m = _section_draws()
    central = h < CENTRAL_CUT
    med, lo, hi, kind, widened = section_envelope("melt_mg_number", m, 0.2, 0.9, m[central])
    f_lo, f_med, f_hi = np.percentile(m, [2.5, 50.0, 97.5])
    c_lo, c_hi = np.percentile(m[central], [2.5, 97.5])
    assert widened and kind == "central"
    assert med == pytest.approx(f_med, rel=RTOL_IDENTITY)
    # closed form of this construction: the central draws are close to
    # normal with mean 0.705 and sd sqrt(0.01^2 + 0.01^2 / 12), so their
    # lower end (0.684) lies below that of all draws (0.70 + uniform 0-0.06
    # + noise: 0.698) and the upper end is that of all draws
    assert lo == pytest.approx(c_lo, rel=RTOL_IDENTITY) and lo < f_lo
    assert hi == pytest.approx(f_hi, rel=RTOL_IDENTITY)
    assert lo <= med <= hi
    # too few central draws, or none given: the band is that of all draws
    for few in (None, m[central][:150]):
        _, lo2, hi2, _, w2 = section_envelope("melt_mg_number", m, 0.2, 0.9, few)
        assert not w2 and (lo2, hi2) == pytest.approx((f_lo, f_hi), rel=RTOL_IDENTITY)
    # a central band inside the full band leaves it unchanged
    inner = np.random.default_rng(4).normal(0.73, 0.002, 500)
    _, lo3, hi3, _, w3 = section_envelope("melt_mg_number", m, 0.2, 0.9, inner)
    assert not w3 and (lo3, hi3) == pytest.approx((f_lo, f_hi), rel=RTOL_IDENTITY)


def test_section_envelope_keeps_a_one_sided_band_one_sided():
    from zoning.fitting.summary import section_envelope

    rng = np.random.default_rng(5)
    length = np.abs(rng.normal(0.0, 10.0, 6000))  # piled at L = 0: an upper limit
    central = np.abs(rng.normal(0.0, 20.0, 400))  # a central cut needs more diffusion
    _, lo, hi, kind, widened = section_envelope("diffusion_length_um", length, 0.0, 120.0,
                                                central)
    assert widened and kind == "upper_limit" and lo == 0.0
    assert hi == pytest.approx(np.percentile(central, 95.0), rel=RTOL_IDENTITY)
    # a lower limit on r from all draws and an upper limit from the central
    # ones span the whole range: "bounds"
    r_all = 1.0 - np.abs(rng.normal(0.0, 0.2, 6000))
    r_central = np.abs(rng.normal(0.0, 0.2, 400))
    _, lo, hi, kind, _ = section_envelope("retention", r_all, 0.0, 1.0, r_central)
    assert (lo, hi, kind) == (0.0, 1.0, "bounds")


def test_central_cut_draws_only_where_a_central_cut_is_not_ruled_out():
    from zoning.fitting.summary import CENTRAL_CUT, central_cut_draws, estimate_from_draws

    h, m = _section_draws()
    names = ("melt_mg_number", "section_h_over_r")
    flat = np.column_stack([m, h])
    lower, upper = np.array([0.2, 0.0]), np.array([0.9, 1.0])
    mask = central_cut_draws(names, flat, lower, upper)
    assert mask is not None and np.array_equal(mask, h < CENTRAL_CUT)
    est = estimate_from_draws("melt_mg_number", "1", 0.73, m, 0.2, 0.9, central=m[mask])
    assert est.lo95 < np.percentile(m, 2.5) and "cut through the crystal's core" in est.note
    # negative controls: h/R not free; h/R band away from 0; every draw central
    assert central_cut_draws(names[:1], flat[:, :1], lower[:1], upper[:1]) is None
    away = np.column_stack([m, np.random.default_rng(6).uniform(0.4, 0.6, m.size)])
    assert central_cut_draws(names, away, lower, upper) is None
    near = np.column_stack([m, np.random.default_rng(7).uniform(0.0, 0.05, m.size)])
    assert central_cut_draws(names, near, lower, upper) is None
    # Bayes factor of a central cut: posterior share of h/R < 0.1 over its
    # prior share (0.1 here); below 1/3 (Kass & Raftery 1995) it is ruled out
    rng = np.random.default_rng(8)
    for n_central, kept in ((500, False), (800, True)):  # shares 2.5% and 4%
        hh = np.concatenate([rng.uniform(0.0, CENTRAL_CUT, n_central),
                             rng.uniform(0.3, 0.9, 20_000 - n_central)])
        got = central_cut_draws(names, np.column_stack([np.full(hh.size, 0.7), hh]),
                                lower, upper)
        assert (got is not None) == kept


def test_fitted_bands_are_widened_for_a_central_cut_when_the_section_is_unresolved():
    """A diffused crystal cut through its core, fitted with h/R free: the h/R
    band reaches 0, and the parent-melt bands are widened to hold also for the
    draws with a central cut (their band reaches below that of all draws)."""
    from zoning.fitting.summary import CENTRAL_CUT

    truth = dict(OL_TRUTH, retention=0.0, diffusion_length_um=20.0)
    r = _fit(_traverse(n=60, radius=300.0, seed=12, **truth))
    names = list(r.parameter_names)
    h = r.samples[:, names.index("section_h_over_r")]
    m = r.samples[:, names.index("melt_mg_number")]
    assert r.estimates["section_h_over_r"].lo95 == 0.0
    e = r.estimates["melt_mg_number"]
    assert "cut through the crystal's core" in e.note
    assert "cut through the crystal's core" in r.estimates["melt_mgo_wt"].note
    # the central cuts need a lower Mg#; the thinned draws show it
    assert np.median(m[h < CENTRAL_CUT]) < np.median(m[h >= CENTRAL_CUT])
    assert e.lo95 < np.percentile(m, 2.5) and e.lo95 <= e.best <= e.hi95
