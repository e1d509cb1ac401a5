"""What a result rests on: model and fit methods, thermometer warnings, fit.json records."""

import json
import warnings

import numpy as np
import pandas as pd
import pytest
from _tolerances import GROWTH_ONLY
from zoning.fitting import fit_traverse
from zoning.fitting.methods import fit_methods
from zoning.io.results import fit_to_dict, write_fit_json

from zoning.exceptions import (
    CalibrationRangeWarning,
    ConvergenceWarning,
    DataQualityWarning,
    ModelDomainError,
)
from zoning.models import CrystallizationModel
from zoning.references import REFERENCES
from zoning.thermometry import THERMOMETERS
from zoning.traverse import Traverse


def _keys(uses):
    return {u.key for u in uses if u.key}


def test_olivine_model_names_its_laws():
    model = CrystallizationModel("olivine", {"FeO": 9.5}, traces=("Ni",))
    keys = _keys(model.methods())
    assert {"rayleigh_1896", "shaw_1970", "brody_flemings_1966", "roeder_emslie_1970",
            "hart_davis_1978", "helz_thornber_1987", "pearce_1984"} <= keys
    assert keys <= set(REFERENCES)


def test_plagioclase_model_names_no_olivine_law():
    model = CrystallizationModel("plagioclase", {"Na2O": 3.1}, traces=("Sr",),
                                 temperature_c=1150.0)
    keys = _keys(model.methods())
    assert {"sisson_grove_1993", "blundy_wood_1991", "bindeman_1998"} <= keys
    assert not keys & {"roeder_emslie_1970", "helz_thornber_1987", "hart_davis_1978"}
    assert model.thermometer == ""


def test_model_temperature_follows_the_chosen_thermometer():
    # T = a MgO + b of each published thermometer (coefficients in zoning.thermometry).
    f = np.linspace(0.0, 0.2, 5)
    for name, th in THERMOMETERS.items():
        out = CrystallizationModel("olivine", {"FeO": 9.5}, thermometer=name).path(
            f, melt_mg_number=0.6)
        np.testing.assert_array_equal(out["temperature_c"],
                                      th.slope * out["melt_mgo_wt"] + th.intercept)
    with pytest.raises(ModelDomainError, match="unknown glass thermometer 'putative'"):
        CrystallizationModel("olivine", {"FeO": 9.5}, thermometer="putative")


def test_fit_methods_state_fe3_source_prior_and_birge_ratio():
    uses = fit_methods("olivine", kd_mean=0.30, kd_sd=0.03, kd_default=True,
                       fe3_fraction=0.10, fe3_source="default", sigma_scale=1.7)
    text = {u.role: u.detail for u in uses}
    assert "default value" in text["melt Fe3+/FeT"] and "0.10" in text["melt Fe3+/FeT"]
    assert "0.3 +/- 0.03" in text["exchange coefficient prior"]
    assert {"roeder_emslie_1970", "newville_2014", "foreman_mackey_2013", "schwarz_1978",
            "birge_1932"} <= _keys(uses)
    pl = fit_methods("plagioclase", kd_mean=2.0, kd_sd=0.0, kd_default=False)
    assert "melt Fe3+/FeT" not in {u.role for u in pl}
    assert "birge_1932" not in _keys(pl)
    assert "fixed at 2" in {u.role: u.detail for u in pl}["exchange coefficient prior"]


def _olivine_traverse(melt_mg_number, name="FRL-03"):
    """Noise-free forward-model traverse (invented data)."""
    model = CrystallizationModel("olivine", {"FeO": 9.5})
    d = np.linspace(0.0, 200.0, 25)
    out = model.profile(d, 200.0, melt_mg_number=melt_mg_number, f_rim=0.15, retention=0.2,
                        kd=0.30)
    spots = pd.DataFrame({"row": np.arange(2, 27), "point": [str(i) for i in range(25)],
                          "label": "", "distance_um": d, "fo": out["crystal"],
                          "status": "ok", "reason": ""})
    return Traverse(name, f"{name}.csv", "olivine", spots)


def _fit(traverse, **kw):
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        result = fit_traverse(traverse, melt={"FeO": 9.5}, n_walkers=16, n_steps=120, seed=3,
                              traces=(), **{**GROWTH_ONLY, **kw})
    calib = [w for w in caught if issubclass(w.category, CalibrationRangeWarning)]
    # Short test chains and noise-free data (residual runs) warn too, on purpose.
    allowed = (CalibrationRangeWarning, ConvergenceWarning, DataQualityWarning)
    assert all(issubclass(w.category, allowed) or "invalid value" in str(w.message)
               for w in caught), [str(w.message) for w in caught]
    return result, calib


def test_fit_warns_once_when_the_melt_leaves_the_thermometer_calibration():
    # Melt Mg# 0.74 with FeO 9.5 wt% (Fe3+/FeT 0.1) is about 13 wt% MgO, above the
    # approximate 2.5-10 wt% range of Helz & Thornber (1987) (range from memory).
    result, calib = _fit(_olivine_traverse(0.74))
    mentions = [w for w in calib if "helz_thornber_1987 thermometer" in str(w.message)]
    assert len(mentions) == 1
    assert "FRL-03" in str(mentions[0].message)
    assert sum("helz_thornber_1987 thermometer" in w for w in result.warnings) == 1
    assert result.settings["thermometer"] == "helz_thornber_1987"


def test_fit_json_records_thermometer_and_every_method_with_its_key(tmp_path):
    result, _ = _fit(_olivine_traverse(0.62), thermometer="montierth_1995")
    data = json.loads(write_fit_json(result, tmp_path / "fit.json").read_text("utf-8"))
    assert data["settings"]["thermometer"] == "montierth_1995"
    roles = {m["role"]: m for m in data["methods"]}
    assert roles["melt temperature (glass MgO thermometer)"]["key"] == "montierth_1995"
    assert roles["melt temperature (glass MgO thermometer)"]["citation"] == (
        "Montierth et al. (1995)")
    assert "default value" in roles["melt Fe3+/FeT"]["detail"]
    keys = {m["key"] for m in data["methods"] if m["key"]}
    assert keys == set(data["references"])
    assert data["references"]["roeder_emslie_1970"].startswith("Roeder, P. L. & Emslie")
    assert fit_to_dict(result)["methods"] == data["methods"]
