import sys
from pathlib import Path

import numpy as np
import pytest
from numpy.testing import assert_allclose

from zoning.exceptions import ProfileFormatError
from zoning.orientation import locate_core, project_traverse, robust_sigma

sys.path.insert(0, str(Path(__file__).resolve().parent))
from _tolerances import ATOL_CLOSED_FORM  # noqa: E402

# The core of a synthetic rim-to-rim traverse must be found within two spot
# spacings (spots every 5 µm in these tests) [µm].
ATOL_CORE_UM = 10.0


def _normal_profile(r, radius, core=88.0, drop=8.0):
    """Invented normally zoned Fo profile: flat core, steepening towards the rim."""
    return core - drop * (np.clip(r, 0, None) / radius) ** 4


def test_robust_sigma_of_normal_sample():
    rng = np.random.default_rng(3)
    # MAD * 1.4826 estimates the standard deviation of normal data (textbook identity).
    assert abs(robust_sigma(rng.normal(0, 2.0, 20000)) - 2.0) < 0.05
    assert np.isnan(robust_sigma([np.nan]))


def test_projection_recovers_positions_and_flags_stray_spot():
    rng = np.random.default_rng(7)
    t = np.arange(0, 200.0, 5.0)
    angle = np.deg2rad(35)
    x = 1000 + t * np.cos(angle) + rng.normal(0, 0.3, t.size)
    y = 2000 + t * np.sin(angle) + rng.normal(0, 0.3, t.size)
    x[10] += 20 * np.sin(angle)
    y[10] -= 20 * np.cos(angle)
    x[15] = np.nan
    fit = project_traverse(x, y)
    assert fit.far.tolist() == [i == 10 for i in range(t.size)]
    ok = np.isfinite(fit.position_um)
    assert not ok[15]
    assert_allclose(fit.position_um[ok], t[ok], atol=1.5)
    assert fit.offline_um[10] > 19
    assert "off-line scatter" in fit.note
    assert fit.position_um[0] == 0


def test_projection_exact_on_a_line():
    t = np.array([0.0, 3.0, 4.0, 10.0])
    fit = project_traverse(3 * t / 5, 4 * t / 5)
    assert_allclose(fit.position_um, t, atol=ATOL_CLOSED_FORM)
    assert_allclose(fit.offline_um, 0.0, atol=ATOL_CLOSED_FORM)


def test_projection_orients_towards_last_spot():
    t = np.arange(0, 50.0, 5.0)
    fit = project_traverse(-t, np.zeros_like(t))  # stage moving towards -X
    assert_allclose(fit.position_um, t, atol=ATOL_CLOSED_FORM)


def test_projection_degenerate_inputs():
    fit = project_traverse([np.nan, np.nan], [1.0, 2.0])
    assert np.isnan(fit.position_um).all()
    fit = project_traverse([1.0, 1.0], [2.0, 2.0])
    assert fit.position_um.tolist() == [0.0, 0.0]
    with pytest.raises(ProfileFormatError, match="equal length"):
        project_traverse([1.0], [1.0, 2.0])


def test_core_to_rim_and_rim_to_core_detected():
    rng = np.random.default_rng(11)
    pos = np.arange(0, 205.0, 5.0)
    fo = _normal_profile(pos, 200.0) + rng.normal(0, 0.1, pos.size)
    d = locate_core(pos, fo)
    assert d.orientation == "core-to-rim" and d.core_position_um == 0.0
    assert d.confidence == "high"
    assert_allclose(d.distance_um, pos)
    assert "fastest at the high-position end" in d.basis
    d = locate_core(pos, fo[::-1])
    assert d.orientation == "rim-to-core" and d.core_position_um == 200.0
    assert_allclose(d.distance_um, 200.0 - pos)


def test_reverse_zoned_half_profile_found_by_steep_rim():
    pos = np.arange(0, 205.0, 5.0)
    an = 60 + 15 * (pos / 200.0) ** 4  # An rises towards the rim (reverse zoning)
    d = locate_core(pos, an, record="An")
    # the steep end is the rim, but normal zoning would read it the other way: asked, not guessed
    assert d.orientation == "core-to-rim" and d.confidence == "uncertain"


def test_rim_to_rim_off_centre_core_found():
    rng = np.random.default_rng(5)
    pos = np.arange(0, 305.0, 5.0)
    core = 130.0
    fo = _normal_profile(np.abs(pos - core), 175.0) + rng.normal(0, 0.1, pos.size)
    d = locate_core(pos, fo)
    assert d.orientation == "rim-to-rim"
    assert abs(d.core_position_um - core) <= ATOL_CORE_UM
    assert set(d.side) == {"A", "B"}
    assert (d.side[pos < d.core_position_um] == "A").all()
    assert_allclose(d.distance_um, np.abs(pos - d.core_position_um))


def test_rim_to_rim_with_reversely_zoned_rims_uses_symmetry_not_maximum():
    # Core Fo 80 decreasing to 78, then reversely zoned rims rising to 86:
    # the highest Fo is at the rims, yet the core is in the middle.
    pos = np.arange(0, 285.0, 5.0)
    centre = 150.0
    r = np.abs(pos - centre)
    fo = np.where(r < 110, 80 - 2 * (r / 110) ** 2, 78 + 8 * (r - 110) / 40)
    d = locate_core(pos, fo)
    assert d.orientation == "rim-to-rim"
    assert abs(d.core_position_um - centre) <= ATOL_CORE_UM
    assert np.argmax(fo) in (0, pos.size - 1)


def test_flat_profile_is_uncertain_and_taken_as_measured_until_confirmed():
    pos = np.arange(0, 100.0, 5.0)
    d = locate_core(pos, np.full(pos.size, 85.0))
    assert d.orientation == "core-to-rim" and d.confidence == "uncertain"
    assert "flat" in d.basis


def test_unusable_spots_do_not_drive_the_decision():
    pos = np.arange(0, 205.0, 5.0)
    fo = _normal_profile(pos, 200.0)
    fo_bad = fo.copy()
    fo_bad[:3] = 60.0  # bad analyses at the core end
    d = locate_core(pos, fo_bad, usable=np.arange(pos.size) >= 3)
    assert d.orientation == "core-to-rim"


def test_user_overrides():
    pos = np.arange(0, 205.0, 5.0)
    fo = _normal_profile(pos, 200.0)
    d = locate_core(pos, fo, orientation="rim-to-core")
    assert d.orientation == "rim-to-core" and d.core_position_um == 200.0
    assert d.confidence == "confirmed"
    assert "given by the user" in d.basis
    d = locate_core(pos, fo, core_position_um=100.0)
    assert d.orientation == "rim-to-rim" and d.core_position_um == 100.0
    assert d.side[0] == "A" and d.side[-1] == "B"
    d = locate_core(pos, fo, orientation="core-to-rim", core_position_um=20.0)
    assert_allclose(d.distance_um[:5], [20, 15, 10, 5, 0])
    assert "beyond the core" in d.basis
    with pytest.raises(ProfileFormatError, match="unknown orientation 'sideways'"):
        locate_core(pos, fo, orientation="sideways")
    with pytest.raises(ProfileFormatError, match="not a finite number"):
        locate_core(pos, fo, core_position_um=float("nan"))


def test_few_spots_and_unknown_positions():
    d = locate_core([0.0, 5.0], [80.0, 79.0])
    assert d.orientation == "core-to-rim" and "too few usable spots" in d.basis
    d = locate_core([np.nan, np.nan], [80.0, 79.0])
    assert np.isnan(d.distance_um).all() and "positions unknown" in d.basis


def test_fit_refuses_an_uncertain_orientation_before_fitting():
    import pandas as pd
    from zoning.fitting import fit_traverse

    from zoning import Traverse
    from zoning.exceptions import OrientationUncertainError, ZoningError

    spots = pd.DataFrame({"distance_um": np.arange(0, 50.0, 5.0), "fo": np.full(10, 85.0),
                          "status": "ok", "reason": ""})
    tr = Traverse("FRL-X1", "FRL-X1.csv", "olivine", spots, orientation_confidence="uncertain",
                  orientation_basis="the Fo profile is flat")
    with pytest.raises(OrientationUncertainError, match="the Fo profile is flat") as info:
        fit_traverse(tr, melt={"FeO": 9.5})
    message = str(info.value)
    assert "--orientation core-to-rim" in message and "--core-um" in message
    assert 'orientation = "core-to-rim"' in message and "core_um" in message
    assert isinstance(info.value, ZoningError) and isinstance(info.value, ValueError)
    with pytest.raises(ValueError, match="orientation_confidence must be one of"):
        Traverse("FRL-X1", "FRL-X1.csv", "olivine", spots, orientation_confidence="sure")
