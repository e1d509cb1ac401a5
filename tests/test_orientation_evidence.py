"""Orientation from all the evidence: synthetic traverses from the forward model.

The traverses are made by ``tests/_orientation_cases.py`` with
:class:`zoning.models.CrystallizationModel` and read through the same path
as a real export (:func:`zoning.io.traverses.build_traverse`). The full
randomized accuracy table is printed by ``benchmarks/orientation.py``.
"""

import sys
from pathlib import Path

import numpy as np
import pytest
from zoning.io.readers import RawTable
from zoning.io.traverses import build_traverse

from zoning.exceptions import OrientationUncertainError
from zoning.orientation import find_stray_positions, locate_core

sys.path.insert(0, str(Path(__file__).resolve().parent))
from _orientation_cases import make_case  # noqa: E402


def _rng(seed):
    return np.random.default_rng(seed)


@pytest.mark.parametrize("measured", ["core-to-rim", "rim-to-core"])
@pytest.mark.parametrize("seed", [1, 2, 3])
def test_normal_olivine_is_decided_right_with_high_confidence(measured, seed):
    case = make_case("normal", _rng(seed), mineral="olivine", measured=measured)
    t = case.traverse
    assert (t.orientation, t.orientation_confidence) == (measured, "high")
    assert t.core_position_um == pytest.approx(case.core_position_um)
    # the basis names the shape and the minor-element trends it used
    assert "changes fastest" in t.orientation_basis and "NiO" in t.orientation_basis


@pytest.mark.parametrize("seed", range(6))
def test_reversely_zoned_olivine_is_uncertain_not_read_backwards(seed):
    case = make_case("reverse", _rng(seed))
    t = case.traverse
    assert t.orientation_confidence == "uncertain", t.orientation_basis
    assert t.orientation_basis.startswith("orientation uncertain")


def test_reversely_zoned_olivine_with_glass_at_its_rim_is_read_as_reversely_zoned():
    # shape (steep rim) and glass both mark the rim against the normal-zoning reading
    pos = np.arange(0.0, 205.0, 5.0)
    fo = 82 + 6 * (pos / 200.0) ** 4  # Fo rises towards the rim (reverse zoning)
    n = pos.size
    oxides = {"Al2O3": np.full(n, 0.03), "Na2O": np.full(n, 0.01),
              "NiO": np.full(n, 0.3), "MnO": np.full(n, 0.18)}
    oxides["Al2O3"][-1], oxides["Na2O"][-1] = 1.6, 0.35
    d = locate_core(pos, fo, oxides=oxides, mineral="olivine")
    assert d.orientation == "core-to-rim" and d.confidence == "low"
    assert "reversely zoned" in d.basis


@pytest.mark.parametrize("seed", range(4))
def test_rim_to_rim_core_found(seed):
    case = make_case("rim-to-rim", _rng(seed), mineral="olivine")
    t = case.traverse
    assert t.orientation == "rim-to-rim" and t.orientation_confidence == "high"
    length = float(np.ptp(t.spots["position_um"]))
    assert abs(t.core_position_um - case.core_position_um) < 0.1 * length


def test_normal_plagioclase_measured_rim_to_core_is_never_read_backwards():
    decided = 0
    for seed in range(8):
        case = make_case("normal", _rng(100 + seed), mineral="plagioclase",
                         measured="rim-to-core")
        t = case.traverse
        if t.orientation_confidence != "uncertain":
            assert t.orientation == "rim-to-core", t.orientation_basis
            decided += 1
    assert decided >= 6


def test_plagioclase_with_weak_an_zoning_is_oriented_by_its_k2o():
    # An barely changes (within the noise); K2O (Or) rises towards the rim at the low end
    rng = _rng(4)
    pos = np.arange(0.0, 300.0, 6.0)
    an = 70 + rng.normal(0, 0.4, pos.size)
    k2o = 0.09 + 0.05 * ((300 - pos) / 300) ** 2 + rng.normal(0, 0.003, pos.size)
    d = locate_core(pos, an, record="An", oxides={"K2O": k2o}, mineral="plagioclase")
    assert d.orientation == "rim-to-core" and d.confidence == "low"
    assert "K2O" in d.basis


@pytest.mark.parametrize("mineral", ["olivine", "plagioclase"])
def test_flat_profile_is_uncertain(mineral):
    t = make_case("flat", _rng(5), mineral=mineral).traverse
    assert t.orientation_confidence == "uncertain"
    assert "flat" in t.orientation_basis


@pytest.mark.parametrize("mineral", ["olivine", "plagioclase"])
def test_step_zoned_profile_is_uncertain(mineral):
    t = make_case("step", _rng(6), mineral=mineral).traverse
    assert t.orientation_confidence == "uncertain"
    assert "step" in t.orientation_basis


@pytest.mark.parametrize("mineral", ["olivine", "plagioclase"])
def test_glass_at_the_rim_spot_marks_the_rim(mineral):
    case = make_case("glass", _rng(7), mineral=mineral, measured="rim-to-core")
    t = case.traverse
    assert t.orientation == "rim-to-core" and t.orientation_confidence == "high"
    assert "glass in the beam" in t.orientation_basis
    # the glassy spot itself is flagged by the spot checks, and not fitted
    assert t.spots.loc[t.spots["position_um"].idxmin(), "status"] == "flagged"


def test_flat_profile_with_glass_at_one_end_is_decided_with_low_confidence():
    case = make_case("flat", _rng(8), mineral="olivine", measured="core-to-rim", glass_end=True)
    t = case.traverse
    assert (t.orientation, t.orientation_confidence) == ("core-to-rim", "low")


@pytest.mark.parametrize(("name", "expected"), [
    ("FRL-21 ol2 rtoc", "rim-to-core"), ("FRL-21_ctor", "core-to-rim"),
    ("FRL-21 rim-to-core", "rim-to-core"), ("FRL-21 ol2 Rim to Rim", "rim-to-rim"),
])
def test_names_in_the_file_decide(name, expected):
    # a flat profile: only the name can tell
    case = make_case("flat", _rng(9), mineral="olivine", measured="core-to-rim", name=name)
    t = case.traverse
    assert t.orientation == expected
    if expected != "rim-to-rim":
        assert t.orientation_confidence == "high" and "the file says" in t.orientation_basis
    else:  # the file says rim-to-rim, but nothing places the core
        assert t.orientation_confidence == "uncertain" and "core cannot be placed" in \
            t.orientation_basis


def test_words_inside_other_words_are_not_names():
    # "vector", "score", "primitive" contain ctor/core/rim but say nothing
    case = make_case("flat", _rng(9), mineral="olivine", name="FRL vector score primitive")
    assert case.traverse.orientation_confidence == "uncertain"


def test_spot_labels_core_and_rim_decide():
    rng = _rng(10)
    labels = [""] * 30
    labels[0], labels[-1] = "ol5 rim", "ol5 core"
    case = make_case("flat", rng, mineral="olivine", measured="core-to-rim", n=30, labels=labels)
    t = case.traverse
    assert (t.orientation, t.orientation_confidence) == ("rim-to-core", "high")


def test_name_contradicted_by_the_shape_is_uncertain():
    case = make_case("normal", _rng(11), mineral="olivine", measured="core-to-rim",
                     name="FRL-22 rtoc")
    t = case.traverse
    assert t.orientation_confidence == "uncertain"
    assert "the file says rim-to-core" in t.orientation_basis


def test_uncertain_traverse_is_refused_by_fit_and_accepted_once_confirmed():
    from zoning.fitting import fit_traverse

    case = make_case("step", _rng(6), mineral="olivine")
    with pytest.raises(OrientationUncertainError, match="orientation uncertain"):
        fit_traverse(case.traverse, melt={"FeO": 9.8})


# --- stray positions --------------------------------------------------------

def test_stray_positions_flagged_in_every_form():
    pos = np.arange(0.0, 400.0, 10.0)
    for bad in (4260.0, 1e300, -1e300, -5000.0):
        p = pos.copy()
        p[4] = bad
        reasons = find_stray_positions(p)
        assert [i for i, r in enumerate(reasons) if r] == [4], bad
        assert "typo or a stage glitch" in reasons[4]
    p = pos.copy()
    p[4] = 426.0  # inside the sequence, within a factor of the span: the order gives it away
    reasons = find_stray_positions(p)
    assert [i for i, r in enumerate(reasons) if r] == [4]
    assert "breaks the sequence" in reasons[4]


def test_no_stray_positions_in_ordinary_traverses():
    rng = _rng(12)
    pos = np.cumsum(rng.uniform(2.0, 12.0, 60))
    assert not any(find_stray_positions(pos))
    gap = np.concatenate([np.arange(0, 100.0, 5), np.arange(300, 400.0, 5)])  # crack skipped
    assert not any(find_stray_positions(gap))
    assert not any(find_stray_positions(gap[::-1]))
    two_passes = np.concatenate([np.arange(0, 200.0, 5), np.arange(400, 200.0, -5)])
    assert not any(find_stray_positions(two_passes))


def _raw_with_typo(position_typo):
    case = make_case("normal", _rng(13), mineral="olivine", measured="rim-to-core", n=40)
    data = case.traverse.spots.copy()
    keep = ["row", "point", "label", "position_um"] + [
        c for c in ("SiO2", "TiO2", "Al2O3", "Cr2O3", "FeO", "MnO", "MgO", "CaO", "NiO")]
    raw = data[keep].rename(columns={"position_um": "distance_um"})
    raw.loc[3, "distance_um"] = position_typo
    raw["read_flags"] = ""
    return case, RawTable("FRL-23", "FRL-23.csv", raw, {"distance_um": "Distance"}, ())


@pytest.mark.parametrize("typo", [4260.0, 1e300, -3000.0])
def test_one_spot_typo_is_flagged_and_the_core_found_right(typo):
    case, raw = _raw_with_typo(typo)
    t = build_traverse(raw, mineral="olivine")
    spot = t.spots.loc[3]
    assert spot["status"] == "flagged" and "typo or a stage glitch" in spot["reason"]
    assert np.isnan(spot["distance_um"])
    assert t.orientation == "rim-to-core" and t.orientation_confidence == "high"
    assert t.core_position_um == pytest.approx(case.core_position_um)
    assert int(np.isfinite(t.spots["distance_um"]).sum()) == len(t.spots) - 1


def test_stage_glitch_in_xy_does_not_tilt_the_line():
    from zoning.orientation import project_traverse

    t = np.arange(0, 200.0, 5.0)
    x, y = 1000 + 0.6 * t, 2000 + 0.8 * t
    x[7] = 1e7
    fit = project_traverse(x, y)
    ok = np.arange(t.size) != 7
    np.testing.assert_allclose(fit.position_um[ok], t[ok], atol=1e-6)
    assert fit.far[7]


def test_locate_core_ignores_untrusted_positions():
    pos = np.arange(0.0, 205.0, 5.0)
    fo = 88 - 8 * (pos / 200.0) ** 4
    pos_bad = pos.copy()
    pos_bad[-1] = 9000.0
    trusted = np.ones(pos.size, bool)
    trusted[-1] = False
    d = locate_core(pos_bad, fo, trusted=trusted)
    assert d.orientation == "core-to-rim" and d.core_position_um == 0.0
    assert np.isnan(d.distance_um[-1])
    d = locate_core(pos_bad, fo[::-1], trusted=trusted)
    assert d.orientation == "rim-to-core" and d.core_position_um == pos[-2]


# --- degenerate positions ---------------------------------------------------

def _demo_olivine(path, n=None, zero=False):
    import pandas as pd
    from zoning.demo_data import DEMO_DIR

    df = pd.read_csv(DEMO_DIR / "ferrolyn" / "FRL-07_ol2.csv", sep=";", decimal=",",
                     encoding="latin-1")
    if n is not None:
        df = df.head(n)
    if zero:
        df["Distance (µm)"] = 0.0
    df.to_csv(path, index=False)
    return path


def test_all_equal_positions_are_named_as_the_problem(tmp_path, capsys):
    from zoning.io import read_traverses

    from zoning.cli import main

    path = _demo_olivine(tmp_path / "zero.csv", zero=True)
    (t,) = read_traverses(path, mineral="olivine")
    assert any("all 30 spots have the same position (0 µm in column 'Distance (µm)')" in s
               and "--column-map distance_um=" in s for s in t.notes)
    code = main(["fit", str(path), "--mineral", "olivine", "--melt", "FeO=9.8",
                 "--walkers", "8", "--steps", "100", "--out", str(tmp_path / "out")])
    err = capsys.readouterr().err
    assert code == 2
    assert "all 30 spots have the same position (0 µm)" in err and "zero.csv" in err
    assert "radius must be positive" not in err and "Traceback" not in err


def test_one_spot_is_refused_with_the_file_named(tmp_path, capsys):
    from zoning.cli import main

    path = _demo_olivine(tmp_path / "one.csv", n=1)
    code = main(["fit", str(path), "--mineral", "olivine", "--melt", "FeO=9.8",
                 "--walkers", "8", "--steps", "100", "--out", str(tmp_path / "out")])
    err = capsys.readouterr().err
    assert code == 2
    assert "only 1 usable spot" in err and "one.csv" in err
    assert "radius must be positive" not in err and "Traceback" not in err


# --- cases once decided wrong by benchmarks/orientation.py ------------------

def test_reverse_olivine_without_a_steeper_end_is_asked_not_read_backwards():
    # chemistry alone (Fo, NiO, MnO all agree) cannot tell a reversely zoned crystal
    # from a normally zoned one read backwards; the shape shows no steeper end
    case = make_case("reverse", np.random.default_rng([20261202, 12, len("reverse"), 0]),
                     mineral="olivine")
    t = case.traverse
    assert t.orientation_confidence == "uncertain", t.orientation_basis
    assert "a reversely zoned crystal would look the same" in t.orientation_basis

