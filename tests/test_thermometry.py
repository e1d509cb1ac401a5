import sys
from pathlib import Path

import numpy as np
import pytest
from numpy.testing import assert_allclose

from zoning.exceptions import CalibrationRangeWarning, ModelDomainError
from zoning.thermometry import (
    THERMOMETERS,
    helz_thornber_1987,
    melt_temperature,
    montierth_1995,
    shea_2022,
)

sys.path.insert(0, str(Path(__file__).resolve().parent))
from _tolerances import RTOL_IDENTITY  # noqa: E402

# Rounding of a published linear equation evaluated by hand [°C].
ATOL_HAND_C = 0.05


def test_helz_thornber_published_example():
    # Helz & Thornber (1987): T = 20.1 MgO + 1014; MgO 7 wt% -> 1154.7 °C.
    assert helz_thornber_1987(7.0) == pytest.approx(1154.7, abs=ATOL_HAND_C)


@pytest.mark.parametrize(
    ("func", "mgo", "expected"),
    [
        # Montierth, Johnston & Cashman (1995): T = 23.0 MgO + 1012.
        (montierth_1995, 7.0, 1173.0),
        (montierth_1995, 10.0, 1242.0),
        # Shea et al. (2022): T = 21.2 MgO + 1017.
        (shea_2022, 7.0, 1165.4),
        (shea_2022, 10.0, 1229.0),
        (helz_thornber_1987, 10.0, 1215.0),
    ],
)
def test_published_equations(func, mgo, expected):
    assert func(mgo) == pytest.approx(expected, abs=ATOL_HAND_C)


def test_vectorised_shape_and_nan():
    mgo = np.array([[5.0, 6.0], [np.nan, 8.0]])
    t = helz_thornber_1987(mgo)
    assert t.shape == (2, 2)
    assert np.isnan(t[1, 0])
    assert_allclose(t[0], 20.1 * mgo[0] + 1014.0, rtol=RTOL_IDENTITY)


def test_dispatcher_matches_functions():
    for name in THERMOMETERS:
        assert melt_temperature(6.5, name) == pytest.approx(THERMOMETERS[name](6.5))


def test_outside_range_warns_and_points_at_caller():
    with pytest.warns(CalibrationRangeWarning, match="outside the approximate calibration") as rec:
        helz_thornber_1987(16.0)
    assert rec[0].filename == __file__


def test_no_warning_when_disabled():
    assert helz_thornber_1987(16.0, warn=False) == pytest.approx(20.1 * 16 + 1014)


def test_negative_mgo_raises():
    with pytest.raises(ModelDomainError, match="must be a finite value >= 0"):
        helz_thornber_1987([-1.0, 5.0])


def test_unknown_method():
    with pytest.raises(ModelDomainError, match="unknown glass thermometer 'foo'"):
        melt_temperature(7.0, "foo")
