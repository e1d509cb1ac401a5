"""``zoning fit`` end to end on an invented olivine export."""

import json
import os
import warnings

import numpy as np
import pandas as pd
import pytest
from zoning.io.writers import safe_name

from zoning.cli import main
from zoning.exceptions import CalibrationRangeWarning, ConvergenceWarning, DataQualityWarning
from zoning.models import CrystallizationModel

#: Molar masses [g/mol] from IUPAC atomic weights (Mg 24.305, Fe 55.845,
#: Si 28.085, O 15.999).
M_MGO, M_FEO, M_SIO2 = 40.304, 71.844, 60.083


def _olivine_oxides(fo):
    """Oxide wt% of stoichiometric olivine (Mg,Fe)2SiO4 of the given Fo [mol%]."""
    x = np.asarray(fo) / 100.0
    mgo, feo, sio2 = 2 * x * M_MGO, 2 * (1 - x) * M_FEO, np.full_like(x, M_SIO2)
    total = mgo + feo + sio2
    return 100 * sio2 / total, 100 * feo / total, 100 * mgo / total


@pytest.fixture(scope="module")
def export(tmp_path_factory):
    # Invented Ferrolyn-style traverse: forward model + noise.
    model = CrystallizationModel("olivine", {"FeO": 9.5})
    d = np.linspace(0.0, 240.0, 40)
    fo = model.profile(d, 240.0, melt_mg_number=0.72, f_rim=0.12, retention=0.2)["crystal"]
    fo = fo + np.random.default_rng(0).normal(0, 0.15, d.size)
    sio2, feo, mgo = _olivine_oxides(fo)
    df = pd.DataFrame(
        {
            "Point": np.arange(1, 41),
            "Comment": [f"FRL-21 ol1 / {i}" for i in range(1, 41)],
            "Distance (µm)": d.round(2),
            "SiO2": sio2.round(3), "FeO": feo.round(3), "MgO": mgo.round(3),
            "Total": (sio2 + feo + mgo).round(3),
        }
    )
    path = tmp_path_factory.mktemp("exports") / "FRL-21_ol1.csv"
    df.to_csv(path, index=False, encoding="utf-8")
    return path


def _run(argv):
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", ConvergenceWarning)
        warnings.simplefilter("ignore", CalibrationRangeWarning)
        return main(argv)


def test_zoning_fit_writes_summary_fit_json_and_profile(export, tmp_path, capsys):
    out = tmp_path / "res"
    code = _run(["fit", str(export), "--melt", "FeO=9.5", "--out", str(out),
                 "--steps", "300", "--walkers", "32", "--seed", "3"])
    assert code == 0
    text = capsys.readouterr().out
    assert "parent melt Mg#" in text and "95% band" in text and "diffusion" in text
    summary = pd.read_csv(out / "summary.csv", comment="#")
    assert len(summary) == 1
    row = summary.iloc[0]
    assert row["mineral"] == "olivine" and row["n_used"] == 40
    assert row["melt_mg_number_lo95"] <= 0.72 <= row["melt_mg_number_hi95"]
    # Processes after growth are fitted by default (olivine): their columns are
    # filled; the crystal grew without them, so both bands reach 0.
    for q in ("section_h_over_r", "diffusion_length_um"):
        assert {q, f"{q}_lo95", f"{q}_hi95", f"{q}_constrained"} <= set(summary.columns)
        assert row[f"{q}_lo95"] == 0.0
    # no --temperature-c: the length alone, no time column
    assert "diffusion_time_days" not in summary.columns
    assert row["preferred_model"].startswith(("growth", "no clear preference"))
    folder = out / safe_name(summary.loc[0, "sample"])
    data = json.loads((folder / "fit.json").read_text(encoding="utf-8"))
    assert data["seed"] == 3 and data["settings"]["melt"] == {"FeO": 9.5}
    # The command that reproduces the result, as typed, and where it was run.
    assert data["settings"]["command"] == (
        f"zoning fit {export} --melt FeO=9.5 --out {out} --steps 300 --walkers 32 --seed 3")
    assert data["settings"]["command_folder"] == os.getcwd()
    assert {"zoning", "python", "numpy", "scipy", "lmfit", "emcee", "pandas"} <= set(
        data["versions"]
    )
    profile = pd.read_csv(folder / "profile.csv", comment="#")
    assert len(profile) == 40 and {"model", "model_lo95", "residual"} <= set(profile.columns)
    # Same input and seed: identical numbers in a second run.
    out2 = tmp_path / "res2"
    _run(["fit", str(export), "--melt", "FeO=9.5", "--out", str(out2),
          "--steps", "300", "--walkers", "32", "--seed", "3"])
    again = pd.read_csv(out2 / "summary.csv", comment="#")
    pd.testing.assert_frame_equal(summary, again)


@pytest.mark.parametrize(
    "argv, message",
    [
        (["--melt", "FeO"], "--melt expects OXIDE=WT"),
        ([], "no reference melt given"),
        (["--melt", "FeO=9.5", "--range", "50:10"], "--range expects A:B"),
        (["--melt", "FeO=9.5", "--free", "viscosity"], "cannot free"),
        (["--melt", "FeO=9.5", "--section-h-over-r", "half"],
         "--section-h-over-r expects 'free' or a number"),
        (["--melt", "FeO=9.5", "--section-h-over-r", "1.2"], "must be in [0, 1)"),
        (["--melt", "FeO=9.5", "--diffusion-length-um", "-3"], "diffusion length >= 0"),
    ],
)
def test_bad_options_give_one_clear_line_and_exit_code_2(export, tmp_path, capsys, argv, message):
    code = _run(["fit", str(export), "--out", str(tmp_path / "x"), *argv])
    assert code == 2
    err = capsys.readouterr().err
    assert message in err and "Traceback" not in err


@pytest.fixture(scope="module")
def two_sample_table(tmp_path_factory):
    # Invented long table: two Ferrolyn samples of three olivines each, in
    # one file with a Sample and a Crystal column.
    import _joint_synthetic as js

    rows = []
    for sample, seed, mg in (("FRL-31", 1, 0.76), ("FRL-32", 2, 0.72)):
        traverses, _ = js.sample(n_hosts=3, antecryst=False, n_spots=30, seed=seed,
                                 mg_number=mg, name=sample)
        for t in traverses:
            u = t.spots
            sio2, feo, mgo = _olivine_oxides(u["fo"].to_numpy(float))
            for i in range(len(u)):
                rows.append({"Sample": sample, "Crystal": t.name.split()[-1],
                             "Distance (um)": round(float(u["distance_um"].iloc[i]), 2),
                             "SiO2": round(sio2[i], 3), "FeO": round(feo[i], 3),
                             "MgO": round(mgo[i], 3),
                             "NiO": round(float(u["NiO"].iloc[i]), 4)})
    path = tmp_path_factory.mktemp("exports") / "ferrolyn_two_samples.csv"
    pd.DataFrame(rows).to_csv(path, index=False)
    return path


def test_joint_fit_of_a_file_with_two_samples_fits_each_on_its_own(two_sample_table,
                                                                    tmp_path, capsys):
    out = tmp_path / "joint"
    code = _run(["fit", str(two_sample_table), "--melt", "FeO=9.5", "--joint", "--steps",
                 "200", "--walkers", "8", "--no-figures", "--no-report", "--out", str(out)])
    printed = capsys.readouterr().out
    assert code == 0
    assert "name 2 samples in their sample column" in printed and "give --name" in printed
    summary = pd.read_csv(out / "summary.csv", comment="#")
    assert list(summary["sample"]) == ["FRL-31", "FRL-32"]
    assert list(summary["n_crystals"]) == [3, 3]
    # Named by the user: one sample of six crystals, as asked.
    out2 = tmp_path / "joint_named"
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", DataQualityWarning)  # the two melts, said plainly
        code = _run(["fit", str(two_sample_table), "--melt", "FeO=9.5", "--joint", "--steps",
                     "200", "--walkers", "8", "--no-figures", "--no-report", "--out",
                     str(out2), "--name", "FRL-3x"])
    assert code == 0
    summary = pd.read_csv(out2 / "summary.csv", comment="#")
    assert list(summary["sample"]) == ["FRL-3x"] and int(summary["n_crystals"].iloc[0]) == 6
    # In Python, traverses of two written samples fitted as one are warned about.
    from zoning.fitting import fit_sample
    from zoning.io import read_traverses

    traverses = read_traverses(two_sample_table)
    assert {t.sample for t in traverses} == {"FRL-31", "FRL-32"}
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        res = fit_sample(traverses, melt={"FeO": 9.5}, n_sweeps=100, n_chains=8)
    mixed = [w for w in caught if "2 samples in their sample column" in str(w.message)]
    assert mixed and all(issubclass(w.category, DataQualityWarning) for w in mixed)
    assert any("2 samples in their sample column" in w for w in res.warnings)


def test_joint_fit_of_several_samples_goes_on_past_one_it_cannot_fit(two_sample_table,
                                                                     tmp_path, capsys):
    table = pd.read_csv(two_sample_table)
    rank = table.groupby(["Sample", "Crystal"]).cumcount()
    # FRL-31: ol3 dropped and ol2 cut to 5 spots -> one usable crystal, not fitted;
    # FRL-32: ol3 cut to 5 spots -> left out, the sample fitted with ol1 and ol2.
    keep = ~((table["Sample"] == "FRL-31") & (table["Crystal"] == "ol3"))
    keep &= ~((table["Crystal"].isin(["ol2"]) & (table["Sample"] == "FRL-31")) & (rank >= 5))
    keep &= ~((table["Crystal"].isin(["ol3"]) & (table["Sample"] == "FRL-32")) & (rank >= 5))
    path = tmp_path / "ferrolyn_short_traverses.csv"
    table[keep].to_csv(path, index=False)
    out = tmp_path / "joint"
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", DataQualityWarning)
        code = _run(["fit", str(path), "--melt", "FeO=9.5", "--joint", "--steps", "200",
                     "--walkers", "8", "--no-figures", "--no-report", "--out", str(out)])
    captured = capsys.readouterr()
    assert code == 1 and "Traceback" not in captured.err
    assert "sample 'FRL-31': not fitted" in captured.err
    assert "at least two crystals with at least 7 usable spots" in captured.err
    summary = pd.read_csv(out / "summary.csv", comment="#")
    assert list(summary["sample"]) == ["FRL-32"]
    crystals = pd.read_csv(out / "crystals.csv", comment="#")
    verdicts = dict(zip(crystals["crystal"], crystals["verdict"], strict=True))
    assert verdicts["FRL-32 ol3"] == "too few spots"
    assert "5 usable spots; at least 7" in captured.out


def test_joint_fit_with_free_sections_writes_them_per_crystal(two_sample_table, tmp_path,
                                                              capsys):
    out = tmp_path / "joint_sections"
    code = _run(["fit", str(two_sample_table), "--melt", "FeO=9.5", "--joint", "--steps",
                 "150", "--walkers", "8", "--no-figures", "--no-report", "--out", str(out),
                 "--section-h-over-r", "free"])
    capsys.readouterr()
    assert code == 0
    crystals = pd.read_csv(out / "crystals.csv", comment="#")
    for col in ("section_h_over_r", "section_h_over_r_lo95", "section_h_over_r_hi95",
                "section_h_over_r_constrained"):
        assert col in crystals.columns
    assert crystals["section_h_over_r"].between(0.0, 0.95).all()
    fit = json.loads((out / "FRL-31" / "fit.json").read_text(encoding="utf-8"))
    assert fit["settings"]["section_h_over_r"] == "free"
    assert any("section offset h/R" in w for w in fit["warnings"])


@pytest.mark.parametrize(
    "extra, message",
    [
        (["--geometry", "slab", "--section-h-over-r", "free"], "geometry 'slab'"),
        (["--diffusion-length-um", "-3"], "diffusion length >= 0"),
        (["--delta-qfm", "0"], "--delta-qfm applies to single fits"),
    ],
)
def test_joint_fit_rejects_what_it_cannot_fit(two_sample_table, tmp_path, capsys, extra,
                                              message):
    code = _run(["fit", str(two_sample_table), "--melt", "FeO=9.5", "--joint", "--out",
                 str(tmp_path / "x"), *extra])
    assert code == 2
    err = capsys.readouterr().err
    assert message in err and "Traceback" not in err
