import sys
from pathlib import Path

import numpy as np
import periodictable
import pytest
from numpy.testing import assert_allclose

from zoning.exceptions import CalibrationRangeWarning, ModelDomainError
from zoning.redox import (
    MOLAR_MASS,
    buffer_log_fo2,
    fe3_fraction_kress_carmichael,
    melt_mole_fractions,
)

sys.path.insert(0, str(Path(__file__).resolve().parent))
from _tolerances import RTOL_IDENTITY, RTOL_TABLE_3SF  # noqa: E402

# Reference basalt used for the derived checks (composition in wt%).
BASALT = dict(
    SiO2=50.0, TiO2=1.5, Al2O3=15.0, FeO=10.0, MnO=0.2, MgO=8.0,
    CaO=11.0, Na2O=2.5, K2O=0.3, P2O5=0.15,
)
# Molar masses agree with IUPAC atomic weights to 1e-4 relative (periodictable
# carries slightly different rounding of some elements).
RTOL_MOLAR_MASS = 1e-4
# Value given to 3 decimals in the check.
ATOL_3DP = 5e-4


@pytest.mark.parametrize("oxide", sorted(MOLAR_MASS))
def test_molar_masses_against_periodictable(oxide):
    # periodictable (general-purpose library, IUPAC standard atomic weights).
    expected = periodictable.formula(oxide).mass
    assert MOLAR_MASS[oxide] == pytest.approx(expected, rel=RTOL_MOLAR_MASS)


def test_qfm_frost_1991():
    # Frost (1991) QFM: log fO2 = -25096.3/T + 8.735 (coefficients from memory);
    # 1200 °C -> -8.301 (hand evaluation).
    assert buffer_log_fo2("QFM", 1200.0) == pytest.approx(-8.301, abs=ATOL_3DP)
    assert buffer_log_fo2("FMQ", 1200.0) == buffer_log_fo2("QFM", 1200.0)


def test_nno_above_qfm_at_magmatic_temperature():
    # Textbook ordering of buffers (NNO about 0.7 log units above QFM at 1200 °C,
    # from memory): IW < QFM < NNO.
    t = np.linspace(900, 1300, 5)
    qfm = buffer_log_fo2("QFM", t)
    assert np.all(buffer_log_fo2("IW", t) < qfm)
    diff = buffer_log_fo2("NNO", t) - qfm
    assert np.all((diff > 0.4) & (diff < 1.0))


def test_melt_mole_fraction_silica():
    # Derived with our implementation (science reference, section 4): SiO2 52.692 mol%.
    x = melt_mole_fractions(BASALT)
    assert 100 * x["SiO2"] == pytest.approx(52.692, abs=ATOL_3DP)
    assert sum(x.values()) == pytest.approx(1.0, rel=RTOL_IDENTITY)


def test_kress_carmichael_derived_value():
    # Derived by our own implementation of Kress & Carmichael (1991) eq. 7
    # (not a published number): basalt above, 1200 °C, 1 bar, QFM -> 0.153.
    assert fe3_fraction_kress_carmichael(BASALT, 1200.0) == pytest.approx(0.153, abs=ATOL_3DP)


def test_kress_carmichael_by_hand():
    # Independent hand evaluation of eq. 7 (coefficients of Kress & Carmichael 1991).
    x = melt_mole_fractions(BASALT)
    t = 1473.15
    lnr = (
        0.196 * np.log(10) * (-25096.3 / t + 8.735) + 11492 / t - 6.675
        - 2.243 * x["Al2O3"] - 1.828 * x["FeO"] + 3.201 * x["CaO"]
        + 5.854 * x["Na2O"] + 6.215 * x["K2O"]
        - 3.36 * (1 - 1673 / t - np.log(t / 1673))
        - 7.01e-7 * 1e5 / t - 1.54e-10 * (t - 1673) * 1e5 / t + 3.85e-17 * 1e10 / t
    )
    r = np.exp(lnr)
    assert fe3_fraction_kress_carmichael(BASALT, 1200.0) == pytest.approx(
        2 * r / (1 + 2 * r), rel=RTOL_IDENTITY
    )


def test_more_oxidised_gives_more_ferric_iron():
    d = np.array([-2.0, -1.0, 0.0, 1.0, 2.0])
    fe3 = fe3_fraction_kress_carmichael(BASALT, 1200.0, delta_qfm=d)
    assert fe3.shape == (5,)
    assert np.all(np.diff(fe3) > 0)
    # A one-log-unit step changes ln R by 0.196 ln 10 (eq. 7, a = 0.196).
    r = fe3 / (2 * (1 - fe3))
    assert_allclose(np.diff(np.log(r)), 0.196 * np.log(10), rtol=1e-9)


def test_log_fo2_override_matches_buffer_offset():
    nno = buffer_log_fo2("NNO", 1150.0)
    a = fe3_fraction_kress_carmichael(BASALT, 1150.0, log_fo2=nno)
    b = fe3_fraction_kress_carmichael(BASALT, 1150.0, delta_qfm=nno - buffer_log_fo2("QFM", 1150))
    assert a == pytest.approx(b, rel=RTOL_IDENTITY)


def test_fe2o3_is_recombined_as_feo_star():
    split = dict(BASALT)
    split["FeO"] = 8.0
    split["Fe2O3"] = 2.0 / 0.89981
    assert fe3_fraction_kress_carmichael(split, 1200.0) == pytest.approx(
        fe3_fraction_kress_carmichael(BASALT, 1200.0), rel=RTOL_TABLE_3SF
    )


def test_errors_and_warnings():
    with pytest.raises(ModelDomainError, match="unknown oxide name"):
        fe3_fraction_kress_carmichael({"SiO2": 50, "Feo": 10}, 1200.0)
    with pytest.raises(ModelDomainError, match="melt MgO must be a finite value"):
        fe3_fraction_kress_carmichael({**BASALT, "MgO": -1}, 1200.0)
    with pytest.raises(ModelDomainError, match="unknown oxygen buffer 'XYZ'"):
        buffer_log_fo2("XYZ", 1200.0)
    with pytest.raises(ModelDomainError, match="pressure must be"):
        fe3_fraction_kress_carmichael(BASALT, 1200.0, pressure_bar=0.0)
    with pytest.warns(CalibrationRangeWarning, match="Kress & Carmichael") as rec:
        fe3_fraction_kress_carmichael(BASALT, 800.0)
    assert rec[0].filename == __file__
