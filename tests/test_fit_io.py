"""Writers of fit results (zoning.io.results) on a hand-built FitResult."""

import json

import numpy as np
import pandas as pd
from zoning.fitting import Estimate, FitResult
from zoning.io.results import (
    CAUTIONS,
    format_report,
    summary_table,
    write_fit_outputs,
)

from zoning.traverse import Traverse


def _result(name="FRL-07 ol/1", retention_constrained=False):
    spots = pd.DataFrame(
        {
            "row": [2, 3, 4],
            "point": ["1", "2", "3"],
            "label": ["", "", ""],
            "distance_um": [0.0, 50.0, 100.0],
            "fo": [88.0, 86.0, 80.0],
            "status": ["ok", "ok", "flagged"],
            "reason": ["", "", "total 96.1 wt% below 98.5"],
        }
    )
    tr = Traverse(name, "FRL-07.csv", "olivine", spots, core_position_um=0.0,
                  orientation_confidence="low",
                  orientation_basis="core-to-rim (one line of evidence): NiO falls rimward")
    est = {
        "melt_mg_number": Estimate("melt_mg_number", "1", 0.70, 0.70, 0.68, 0.72, 0.3, 0.9),
        "f_rim": Estimate("f_rim", "1", 0.30, 0.31, 0.25, 0.36, 0.0, 0.95),
        "retention": Estimate(
            "retention", "1", 0.4, 0.5, 0.02, 0.97, 0.0, 1.0,
            constrained=retention_constrained,
            note="retention not constrained by these data: band covers most of 0-1",
        ),
        "kd": Estimate("kd", "1", 0.30, 0.30, 0.25, 0.35, 0.1, 0.6),
        "melt_mgo_wt": Estimate("melt_mgo_wt", "wt%", 10.2, 10.2, 9.5, 10.9, 3.0, 20.0),
    }
    spot_table = pd.DataFrame(
        {
            "row": [2, 3, 4], "point": ["1", "2", "3"], "distance_um": [0.0, 50.0, 100.0],
            "observed": [88.0, 86.0, 80.0], "sigma": [0.2, 0.2, 0.2],
            "model": [88.1, 85.9, 84.0], "model_lo95": [87.9, 85.7, 83.8],
            "model_hi95": [88.3, 86.1, 84.2], "residual": [-0.1, 0.1, -4.0],
            "normalized_residual": [-0.5, 0.5, -20.0], "used": [True, True, False],
            "status": ["ok", "ok", "flagged"], "reason": ["", "", "total 96.1 wt% below 98.5"],
        }
    )
    comparison = pd.DataFrame(
        {"model": ["fractional", "equilibrium", "retention"], "chi_square": [3.0, 9.0, 2.5],
         "n_params": [3, 3, 4], "aic": [9.0, 15.0, 10.5], "bic": [6.0, 12.0, 6.6]}
    )
    return FitResult(
        traverse=tr, mineral="olivine", estimates=est,
        parameter_names=("melt_mg_number", "f_rim", "retention", "kd"),
        samples=np.zeros((4, 4)), correlation=np.full((4, 4), np.nan), spots=spot_table,
        curve=pd.DataFrame({"distance_um": [0.0, 100.0]}), comparison=comparison,
        preferred_model="fractional", chi_square=2.5, reduced_chi_square=float("nan"),
        n_spots=3, n_used=2, diagnostics={"ess_kd": 1500.0, "n_walkers": 32.0},
        warnings=("retention not constrained by these data: band covers most of 0-1",),
        settings={"seed": 3}, versions={"numpy": np.__version__}, seed=3,
    )


def test_summary_table_has_one_row_with_bands_and_verdicts():
    df = summary_table([_result()])
    assert len(df) == 1
    for q in ("melt_mg_number", "f_rim", "retention", "kd", "melt_mgo_wt"):
        for suffix in ("", "_lo95", "_hi95", "_constrained"):
            assert q + suffix in df.columns
    assert "melt_ca_number" not in df.columns
    row = df.iloc[0]
    assert row["retention_constrained"] == False  # noqa: E712 (numpy bool)
    assert row["f_rim_lo95"] == 0.25 and row["preferred_model"] == "fractional"
    assert "not constrained" in row["warnings"]
    # how far the orientation was trusted travels with the numbers
    assert row["orientation"] == "core-to-rim" and row["orientation_confidence"] == "low"
    assert row["core_position_um"] == 0.0


def test_outputs_are_written_with_safe_names_and_null_for_nan(tmp_path):
    files = write_fit_outputs([_result()], tmp_path)
    assert files[0] == tmp_path / "summary.csv"
    folder = tmp_path / "FRL-07_ol_1"
    data = json.loads((folder / "fit.json").read_text(encoding="utf-8"))
    assert data["reduced_chi_square"] is None  # NaN written as JSON null
    assert data["estimates"]["retention"]["constrained"] is False
    assert data["seed"] == 3 and data["versions"]["numpy"] == np.__version__
    assert data["comparison"][0]["model"] == "fractional"
    assert data["orientation_confidence"] == "low"
    assert data["orientation_basis"].startswith("core-to-rim (one line")
    profile = pd.read_csv(folder / "profile.csv", comment="#")
    assert len(profile) == 3  # every input spot, flagged ones included
    assert list(profile["used"]) == [True, True, False]
    summary = pd.read_csv(tmp_path / "summary.csv", comment="#")
    assert summary.loc[0, "sample"] == "FRL-07 ol/1"


def test_report_states_unconstrained_quantities_and_cautions():
    text = format_report(_result())
    assert "retention r" in text and "NOT CONSTRAINED" in text
    assert "preferred: fractional" in text
    assert "orientation core-to-rim, confidence low (core-to-rim (one line" in text
    assert "diffusion" in CAUTIONS and "Kd" in CAUTIONS
    assert "diffusion" in text.replace("\n    ", " ")
    constrained = format_report(_result(retention_constrained=True))
    assert "NOT CONSTRAINED" not in constrained
