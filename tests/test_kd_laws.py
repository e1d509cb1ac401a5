import sys
from pathlib import Path

import numpy as np
import pytest
from numpy.testing import assert_allclose

from zoning.exceptions import CalibrationRangeWarning, ModelDomainError
from zoning.kd_laws import (
    blundy_2020_kd,
    liquidus_olivine_kd,
    plagioclase_kd_from_water,
    toplis_2005_kd,
    toplis_silica_activity_term,
)
from zoning.redox import MOLAR_MASS

sys.path.insert(0, str(Path(__file__).resolve().parent))
from _tolerances import RTOL_IDENTITY  # noqa: E402

BASALT = dict(
    SiO2=50.0, TiO2=1.5, Al2O3=15.0, FeO=10.0, MnO=0.2, MgO=8.0,
    CaO=11.0, Na2O=2.5, K2O=0.3, P2O5=0.15,
)
# Check values quoted to 3-4 decimals.
ATOL_3DP = 5e-4
ATOL_4DP = 5e-5


def test_toplis_silica_term_derived():
    # Derived with our implementation of Toplis (2005) eqs. 11-12 (not a
    # published number): SiO2 52.692 mol%, Psi = -1.460 -> SiO2_A = 48.669.
    assert toplis_silica_activity_term(BASALT) == pytest.approx(48.669, abs=ATOL_3DP)


def test_toplis_kd_derived():
    # Derived with our implementation of Toplis (2005) eq. 10:
    # basalt above, Fo85, 1200 °C, 1 bar -> K_D = 0.3073.
    assert toplis_2005_kd(BASALT, 1200.0, 0.85) == pytest.approx(0.3073, abs=ATOL_4DP)


def test_toplis_kd_in_published_range():
    # Toplis (2005) and Roeder & Emslie (1970): basaltic K_D about 0.30 +/- 0.03.
    kd = toplis_2005_kd(BASALT, np.array([1150.0, 1200.0, 1250.0]), 0.85)
    assert np.all((kd > 0.27) & (kd < 0.34))


def test_toplis_hydrous_term_raises_kd():
    # Eq. 14: water adds to SiO2_A, so K_D increases.
    dry = toplis_2005_kd(BASALT, 1100.0, 0.85)
    wet = toplis_2005_kd(BASALT, 1100.0, 0.85, h2o_wt=3.0)
    assert wet > dry
    assert toplis_2005_kd({**BASALT, "H2O": 3.0}, 1100.0, 0.85) == pytest.approx(wet)


def test_blundy_derived_values():
    # Derived with our implementation of Blundy et al. (2020) eq. 8:
    # Fe3+/FeT 0.1, Fo85, 1473.15 K -> K_D(FeT-Mg) = 0.2825.
    assert blundy_2020_kd(1200.0, 0.85, 0.1, total_iron=True) == pytest.approx(
        0.2825, abs=ATOL_4DP
    )
    # Ferrous form divides out (1 - Fe3+/FeT).
    assert blundy_2020_kd(1200.0, 0.85) == pytest.approx(0.2825219619778 / 0.9, rel=1e-9)


def test_blundy_simple_form_near_fo50():
    # Blundy et al. (2020): the exponential term vanishes at X_Fo = 0.5,
    # leaving the prefactor 0.3642 (ferrous) for any T.
    assert_allclose(blundy_2020_kd([1000.0, 1300.0], 0.5), 0.3642, rtol=RTOL_IDENTITY)


@pytest.mark.parametrize("law", ["toplis_2005", "blundy_2020"])
def test_liquidus_kd_is_self_consistent(law):
    res = liquidus_olivine_kd(BASALT, law, temperature_c=1200.0, fe3_fraction=0.1)
    # Olivine recorded at F = 0 satisfies Fo = 1/(1 + K_D (1/Mg# - 1))
    # (definition of K_D, Roeder & Emslie 1970).
    mg = (8.0 / MOLAR_MASS["MgO"]) / (8.0 / MOLAR_MASS["MgO"] + 9.0 / MOLAR_MASS["FeO"])
    assert res.fo == pytest.approx(100 / (1 + res.kd * (1 / mg - 1)), rel=1e-10)
    if law == "toplis_2005":
        expected = toplis_2005_kd(BASALT, 1200.0, res.fo / 100)
    else:
        expected = blundy_2020_kd(1200.0, res.fo / 100)
    assert res.kd == pytest.approx(expected, rel=1e-10)
    assert 0.27 < res.kd < 0.34


def test_liquidus_kd_vectorised_over_mg_number():
    mg = np.array([0.5, 0.6, 0.7])
    res = liquidus_olivine_kd(BASALT, melt_mg_number=mg, temperature_c=1200.0)
    assert res.kd.shape == (3,)
    assert np.all(np.diff(res.fo) > 0)
    for i, m in enumerate(mg):
        one = liquidus_olivine_kd(BASALT, melt_mg_number=m, temperature_c=1200.0)
        assert one.kd == pytest.approx(res.kd[i], rel=1e-10)


def test_liquidus_kd_default_temperature_is_helz_thornber():
    res = liquidus_olivine_kd(BASALT)
    # Helz & Thornber (1987): 20.1 * 8 + 1014 = 1174.8 °C.
    assert res.temperature_c == pytest.approx(1174.8)


def test_plagioclase_rule_of_thumb():
    # Common practice, anchored on Sisson & Grove (1993) (from memory):
    # about 1.7 dry, about 5.5 at water saturation (~6 wt%) at 200 MPa.
    assert_allclose(plagioclase_kd_from_water([0.0, 3.0, 6.0]), [1.7, 3.6, 5.5], rtol=1e-12)
    with pytest.warns(CalibrationRangeWarning, match="exceeds 6 wt%") as rec:
        assert plagioclase_kd_from_water(8.0) == pytest.approx(5.5)
    assert rec[0].filename == __file__


def test_errors():
    with pytest.raises(ModelDomainError, match="unknown olivine K_D law 'roeder'"):
        liquidus_olivine_kd(BASALT, "roeder")
    with pytest.raises(ModelDomainError, match="olivine X_Fo must be a fraction"):
        toplis_2005_kd(BASALT, 1200.0, 85.0)
    with pytest.raises(ModelDomainError, match="melt H2O must be"):
        plagioclase_kd_from_water(-1.0)
    with pytest.raises(ModelDomainError, match="MgO > 0 and FeO > 0"):
        liquidus_olivine_kd({"SiO2": 50.0, "FeO": 10.0})
    with pytest.warns(CalibrationRangeWarning, match="Toplis"):
        toplis_2005_kd(BASALT, 900.0, 0.85)
