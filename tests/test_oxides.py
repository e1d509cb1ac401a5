import numpy as np
import pandas as pd
import periodictable
import pytest
from numpy.testing import assert_allclose

from zoning.oxides import (
    ATOMIC_WEIGHTS,
    CANONICAL_OXIDES,
    FEO_PER_FE2O3,
    OXIDES,
    molar_mass,
    oxide_moles,
    total_iron_as_feo,
)

# periodictable 2.x carries the IUPAC 2021 standard atomic weights too, so the
# two tables may differ only by the last digit of an older release (e.g. Al
# 26.9815385 in the 2013 table): relative 1e-7 catches any real slip such as
# O = 16.000 (2e-5 relative in SiO2) while tolerating such revisions.
RTOL_ATOMIC_WEIGHT_REVISION = 1e-7

# Molar masses printed to 3 decimals in the reference notes (half the last digit) [g/mol].
ATOL_3_DECIMALS = 5e-4


@pytest.mark.parametrize("name", CANONICAL_OXIDES)
def test_molar_masses_match_periodictable(name):
    # Independent reference: the `periodictable` package (IUPAC atomic weights).
    assert_allclose(molar_mass(name), periodictable.formula(name).mass,
                    rtol=RTOL_ATOMIC_WEIGHT_REVISION)


def test_atomic_weights_match_periodictable():
    for element, weight in ATOMIC_WEIGHTS.items():
        assert_allclose(weight, getattr(periodictable, element).mass,
                        rtol=RTOL_ATOMIC_WEIGHT_REVISION)


@pytest.mark.parametrize(
    "name, value",
    # Molar masses computed from IUPAC atomic weights, 3 decimals (hand calculation).
    [("SiO2", 60.083), ("TiO2", 79.865), ("Al2O3", 101.960), ("FeO", 71.844),
     ("Fe2O3", 159.687), ("MnO", 70.937), ("MgO", 40.304), ("NiO", 74.692),
     ("CaO", 56.077), ("Na2O", 61.979), ("K2O", 94.196)],
)
def test_molar_masses_hand_values(name, value):
    assert abs(molar_mass(name) - value) <= ATOL_3_DECIMALS


def test_feo_fe2o3_factor():
    # FeO* = FeO + 0.8998 Fe2O3 (standard conversion, 2 M(FeO)/M(Fe2O3)).
    assert round(FEO_PER_FE2O3, 4) == 0.8998
    assert_allclose(total_iron_as_feo(9.0, 1.0), 9.0 + FEO_PER_FE2O3)
    out = total_iron_as_feo([9.0, np.nan, np.nan], [np.nan, 2.0, np.nan])
    assert_allclose(out[:2], [9.0, 2 * FEO_PER_FE2O3])
    assert np.isnan(out[2])


def test_oxide_charges_and_stoichiometry():
    assert OXIDES["Al2O3"].charge == 3
    assert OXIDES["Na2O"].charge == 1
    assert OXIDES["P2O5"].charge == 5
    assert OXIDES["Fe2O3"].cation == "Fe3"


def test_oxide_moles_ignores_other_columns():
    df = pd.DataFrame({"SiO2": [60.083], "label": ["x"], "MgO": [40.304]})
    out = oxide_moles(df)
    assert list(out.columns) == ["SiO2", "MgO"]
    assert_allclose(out.to_numpy(), [[1.0, 1.0]], rtol=1e-4)


def test_unknown_oxide_message():
    with pytest.raises(KeyError, match="unknown oxide 'ZnO'"):
        molar_mass("ZnO")
