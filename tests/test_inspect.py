"""read_traverses and `zoning inspect` on exports built from reference materials.

Spot compositions are mixtures (in wt%) of Smithsonian microbeam reference
materials (Jarosewich, Nelen & Norberg 1980, Geostandards Newsletter 4,
43-47; preferred compositions transcribed from the NMNH table): San Carlos
olivine (core) with Springwater olivine (rim), and Great Sitkin anorthite
(core) with Lake County plagioclase (rim). Fo/An of every spot is checked
against a step-by-step hand calculation.
"""

import subprocess
import sys
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st
from zoning.io import read_traverses

from zoning.cli import main
from zoning.exceptions import ProfileFormatError
from zoning.oxides import OXIDES

sys.path.insert(0, str(Path(__file__).resolve().parent))
from _tolerances import ATOL_MOL_PCT_HAND  # noqa: E402

# The core of the rim-to-rim traverse must be found within two spot
# spacings (8 µm spacing here) [µm].
ATOL_CORE_UM = 16.0

# Preferred compositions [wt%]. Oxides not reported ("-") or below detection
# ("<0.02") are entered as 0 so that two materials can be mixed; Springwater
# Cr2O3 (0.02) is left out. Lake County Fe2O3 (0.34) is folded into FeO
# (FeO* = FeO + 0.8998 Fe2O3); the hand calculation does the same.
SAN_CARLOS = {"SiO2": 40.81, "FeO": 9.55, "MnO": 0.14, "MgO": 49.42, "NiO": 0.37}
SPRINGWATER = {"SiO2": 38.95, "FeO": 16.62, "MnO": 0.30, "MgO": 43.58, "NiO": 0.0}
GREAT_SITKIN = {"SiO2": 44.00, "TiO2": 0.03, "Al2O3": 36.03, "FeO": 0.62, "MgO": 0.0,
                "CaO": 19.09, "Na2O": 0.53, "K2O": 0.03}
LAKE_COUNTY = {"SiO2": 51.25, "TiO2": 0.05, "Al2O3": 30.91, "FeO": 0.15 + 0.8998 * 0.34,
               "MgO": 0.14, "CaO": 13.64, "Na2O": 3.45, "K2O": 0.18}


def _hand(comp, oxygens):
    """Scalar hand recalculation: cations per formula unit by name."""
    moles = {k: v / OXIDES[k].molar_mass for k, v in comp.items() if np.isfinite(v)}
    f = oxygens / sum(m * OXIDES[k].n_oxygens for k, m in moles.items())
    return {OXIDES[k].cation: m * OXIDES[k].n_cations * f for k, m in moles.items()}


def _hand_fo(comp):
    c = _hand(comp, 4)
    return 100 * c["Mg"] / (c["Mg"] + c["Fe"])


def _hand_an(comp):
    c = _hand(comp, 8)
    return 100 * c["Ca"] / (c["Ca"] + c["Na"] + c["K"])


def _mix(a, b, t):
    return {k: round((1 - t) * a[k] + t * b[k], 3) for k in a}


def _olivine_file(path):
    """Rim-to-rim olivine traverse, stage X/Y in mm, with planted bad spots."""
    n, step, centre = 31, 8.0, 13  # core at the 14th spot (off-centre)
    s = (np.arange(n) - centre) * step  # signed position from the core [µm]
    radius = max(abs(s.min()), s.max()) + step
    angle = np.deg2rad(25.0)
    rows, expected = [], {}
    for i, si in enumerate(s):
        comp = _mix(SAN_CARLOS, SPRINGWATER, (abs(si) / radius) ** 2)
        offset = 0.0
        label = f"spot {i + 1}"
        reason = ""
        if i == 4:
            comp = {k: round(v * 0.97, 3) for k, v in comp.items()}
            reason = "total"
        if i == 8:
            comp = dict(comp, Al2O3=1.5)
            reason = "Al2O3"
        if i == 20:
            comp = dict(comp, NiO=-0.03)
            reason = "negative NiO"
        if i == 24:
            offset = 15.0
            reason = "off the traverse line"
        if i == 2:
            label = "=1+2"
        x = 12.0 + (si * np.cos(angle) - offset * np.sin(angle)) / 1000
        y = 7.5 + (si * np.sin(angle) + offset * np.cos(angle)) / 1000
        rows.append({"Point": i + 1, "Comment": label, "X (mm)": round(x, 6),
                     "Y (mm)": round(y, 6), **comp})
        expected[i] = (_hand_fo(comp), reason)
    # a repeat analysis at the position of spot 11
    dup = dict(rows[10], Point=n + 1, Comment="repeat")
    rows.append(dup)
    expected[n] = (expected[10][0], "same position as row 13")  # spot 11 is on line 13
    df = pd.DataFrame(rows).fillna(0.0)
    text = "Ferrolyn test session\n" + df.to_csv(index=False, lineterminator="\n")
    text += "Average,,,,40,12,0.2,47,0.2,0\n"
    path.write_text(text, encoding="utf-8")
    true_core_um = float(np.hypot(*(0.0, 0.0)) + centre * step)  # from the first spot
    return expected, true_core_um


def _plag_file(path, n=25, step=10.0):
    d = np.arange(n) * step
    radius = d[-1] + step
    rows, an = [], []
    for i, di in enumerate(d):
        comp = _mix(GREAT_SITKIN, LAKE_COUNTY, (di / radius) ** 3)
        rows.append({"No.": i + 1, "Distance (um)": di, **comp})
        an.append(_hand_an(comp))
    pd.DataFrame(rows).to_csv(path, index=False, sep=";", decimal=",")
    return np.array(an)


@pytest.fixture
def olivine_csv(tmp_path):
    path = tmp_path / "FRL-21_ol4.csv"
    expected, core = _olivine_file(path)
    return path, expected, core


def test_read_traverses_olivine_every_row_fo_and_flags(olivine_csv):
    path, expected, true_core = olivine_csv
    (t,) = read_traverses(path)
    s = t.spots
    assert t.mineral == "olivine"
    assert any("detected as olivine" in note for note in t.notes)
    # every input row, in input order: 32 analyses + the summary row
    assert len(s) == len(expected) + 1
    assert s["row"].tolist() == list(range(3, 3 + len(expected) + 1))
    assert s["point"].tolist()[:3] == ["1", "2", "3"]
    contract = ["row", "point", "label", "position_um", "offline_um", "distance_um", "side",
                "total_wt", "cation_sum", "fo", "fo_sigma", "status", "reason"]
    assert all(c in s.columns for c in contract)
    for i, (fo, reason) in expected.items():
        assert abs(s["fo"].iloc[i] - fo) <= ATOL_MOL_PCT_HAND, i
        if reason:
            assert s["status"].iloc[i] == "flagged", (i, s["reason"].iloc[i])
            assert reason in s["reason"].iloc[i], (i, s["reason"].iloc[i])
        else:
            assert s["status"].iloc[i] == "ok", (i, s["reason"].iloc[i])
    assert s["status"].iloc[-1] == "flagged"
    assert "summary row" in s["reason"].iloc[-1]
    assert "total" not in s["reason"].iloc[-1]  # only the reader's reason for a non-analysis
    assert t.orientation == "rim-to-rim"
    assert abs(t.core_position_um - true_core) <= ATOL_CORE_UM
    assert set(s.loc[s["status"] == "ok", "side"]) == {"A", "B"}
    assert (s["distance_um"].dropna() >= 0).all()
    assert t.settings["mineral"] == "olivine" and t.settings["mineral_detected"] is True
    assert t.settings["checks"]["total_min_wt"] == 98.5


def test_read_traverses_plagioclase_core_to_rim(tmp_path):
    path = tmp_path / "FRL-30_pl1.csv"
    an = _plag_file(path)
    (t,) = read_traverses(path, mineral="plagioclase")
    s = t.spots
    assert t.orientation == "core-to-rim" and t.core_position_um == 0
    assert np.abs(s["an"].to_numpy() - an).max() <= ATOL_MOL_PCT_HAND
    assert (s["status"] == "ok").all(), s["reason"].tolist()
    assert np.allclose(s["an"] + s["ab"] + s["or"], 100)
    assert s["an_sigma"].isna().all()


def test_plagioclase_read_as_olivine_is_refused(tmp_path):
    path = tmp_path / "FRL-30_pl1.csv"
    _plag_file(path)
    with pytest.raises(ProfileFormatError, match=r"look like plagioclase.*--mineral plagioclase"):
        read_traverses(path, mineral="olivine")


def test_single_spot_and_all_flagged_are_returned_with_a_note(tmp_path):
    one = tmp_path / "one.csv"
    pd.DataFrame([{"Point": 1, "Distance (um)": 0.0, **SAN_CARLOS}]).to_csv(one, index=False)
    (t,) = read_traverses(one)
    assert t.n_spots == 1
    assert any(n.startswith("cannot be fitted: the traverse has a single spot") for n in t.notes)
    bad = tmp_path / "bad.csv"
    rows = [{"Point": i, "Distance (um)": 10.0 * i, **{k: v * 0.9 for k, v in SAN_CARLOS.items()}}
            for i in range(5)]
    pd.DataFrame(rows).to_csv(bad, index=False)
    (t,) = read_traverses(bad)
    assert t.n_ok == 0
    assert any(n.startswith("cannot be fitted: all 5 spots are flagged") for n in t.notes)


def test_no_position_column_is_a_clear_error(tmp_path):
    path = tmp_path / "nopos.csv"
    pd.DataFrame([{"Point": i, **SAN_CARLOS} for i in range(4)]).to_csv(path, index=False)
    with pytest.raises(ProfileFormatError, match=r"nopos.csv.*no position information.*column_map"):
        read_traverses(path)


def test_all_positions_missing_flags_every_spot(tmp_path, capsys):
    path = tmp_path / "nodist.csv"
    rows = [{"Point": i, "Distance (um)": "n.d.", **SAN_CARLOS} for i in range(4)]
    pd.DataFrame(rows).to_csv(path, index=False)
    (t,) = read_traverses(path)
    assert (t.spots["reason"] == "position missing").all()
    assert any(n.startswith("cannot be fitted: all 4 spots") for n in t.notes)
    # No usable spot: the tables are written (to show why) and the exit code says so.
    assert main(["inspect", str(path), "--out", str(tmp_path / "o")]) == 1
    captured = capsys.readouterr()
    assert "core position unknown" in captured.out
    assert "no usable spot in 'nodist'" in captured.err
    assert (tmp_path / "o" / "nodist" / "points.csv").is_file()


def test_distance_header_from_core_sets_the_orientation(tmp_path):
    path = tmp_path / "FRL-22_ol1.csv"
    # Reverse zoning (Springwater core, San Carlos rim): the header says where the core is.
    rows = [{"Point": i, "Distance from core (um)": 10.0 * i,
             **_mix(SPRINGWATER, SAN_CARLOS, (i / 10) ** 2)} for i in range(10)]
    pd.DataFrame(rows).to_csv(path, index=False)
    (t,) = read_traverses(path)
    assert t.orientation == "core-to-rim"
    assert any("measured from the core" in n for n in t.notes)
    (t,) = read_traverses(path, orientation="rim-to-core")
    assert t.orientation == "rim-to-core" and t.core_position_um == 90.0


def test_checks_mapping_and_bad_settings(olivine_csv):
    path, _, _ = olivine_csv
    (t,) = read_traverses(path, checks={"total_min_wt": 95.0})
    assert "total" not in t.spots["reason"].iloc[4]
    with pytest.raises(ProfileFormatError, match="unknown quality-check setting"):
        read_traverses(path, checks={"total_min": 95.0})
    with pytest.raises(ProfileFormatError, match="unknown orientation"):
        read_traverses(path, orientation="sideways")
    with pytest.raises(ProfileFormatError, match="unknown mineral"):
        read_traverses(path, mineral="pyroxene")


def test_cli_inspect_writes_every_row_and_prints_summary(olivine_csv, tmp_path, capsys):
    path, expected, _ = olivine_csv
    out = tmp_path / "out"
    assert main(["inspect", str(path), "--out", str(out)]) == 0
    printed = capsys.readouterr().out
    assert "spots read: 33; ok: 27; flagged: 6" in printed
    assert "1  duplicate position" in printed
    assert "orientation: rim-to-rim" in printed
    assert "detected as olivine" in printed
    table = pd.read_csv(out / "FRL-21_ol4" / "points.csv", comment="#")
    assert len(table) == 33
    for col in ("row", "point", "distance_um", "fo", "status", "reason"):
        assert col in table.columns
    assert table["row"].is_monotonic_increasing
    assert table["label"].iloc[2] == "'=1+2"  # formula injection neutralised
    assert (out / "FRL-21_ol4" / "notes.txt").read_text(encoding="utf-8").count("\n") >= 3
    assert path.read_text(encoding="utf-8").startswith("Ferrolyn test session")


def test_cli_inspect_errors_exit_2_with_file_name(tmp_path, capsys):
    path = tmp_path / "FRL-30_pl1.csv"
    _plag_file(path)
    assert main(["inspect", str(path), "--mineral", "olivine", "--out", str(tmp_path)]) == 2
    err = capsys.readouterr().err
    assert "FRL-30_pl1.csv" in err and "--mineral plagioclase" in err
    assert main(["inspect", str(path), "--column-map", "MgO", "--out", str(tmp_path)]) == 2
    assert "--column-map expects KEY=VALUE" in capsys.readouterr().err


def test_cli_inspect_column_map_and_overrides(tmp_path, capsys):
    path = tmp_path / "odd.csv"
    rows = [{"Point": i, "Dist": 10.0 * i, **_mix(SAN_CARLOS, SPRINGWATER, (i / 9) ** 3)}
            for i in range(10)]
    pd.DataFrame(rows).rename(columns={"MgO": "Magnesia"}).to_csv(path, index=False)
    code = main(["inspect", str(path), "--out", str(tmp_path / "o"),
                 "--column-map", "MgO=Magnesia", "--column-map", "distance_um=Dist",
                 "--orientation", "rim-to-core", "--check", "total_min_wt=98"])
    assert code == 0
    table = pd.read_csv(tmp_path / "o" / "odd" / "points.csv", comment="#")
    assert table["distance_um"].tolist() == [90.0 - 10 * i for i in range(10)]
    fo = [_hand_fo(_mix(SAN_CARLOS, SPRINGWATER, (i / 9) ** 3)) for i in range(10)]
    assert np.abs(table["fo"].to_numpy() - fo).max() <= ATOL_MOL_PCT_HAND
    assert "orientation rim-to-core given by the user" in capsys.readouterr().out


def test_cli_inspect_refuses_to_overwrite_its_input(tmp_path, capsys):
    folder = tmp_path / "points"  # the traverse is named after the file: points
    folder.mkdir()
    path = folder / "points.csv"
    _plag_file(path)
    before = path.read_bytes()
    assert main(["inspect", str(path), "--out", str(tmp_path)]) == 2
    err = capsys.readouterr().err
    assert "refusing to write" in err and "points.csv" in err and "Nothing was written" in err
    assert path.read_bytes() == before


def test_inspect_as_a_subprocess(tmp_path):
    path = tmp_path / "FRL-30_pl1.csv"
    _plag_file(path)
    proc = subprocess.run(
        [sys.executable, "-m", "zoning", "inspect", str(path)],
        cwd=tmp_path, capture_output=True, text=True, check=False,
    )
    assert proc.returncode == 0, proc.stderr
    assert "detected as plagioclase" in proc.stdout
    assert (tmp_path / "FRL-30_pl1_inspect" / "FRL-30_pl1" / "points.csv").exists()


_cell = st.one_of(
    st.floats(allow_nan=True, allow_infinity=True, width=32),
    st.floats(min_value=-5, max_value=120),
    st.sampled_from(["", "<0.01", "n.d.", "abc", "--", "1e400", "=cmd()", "12,5", "1e308",
                     "-1e308", "5e-324"]),
)


@settings(max_examples=40, deadline=None,
          suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(st.lists(st.lists(_cell, min_size=5, max_size=5), min_size=1, max_size=12))
def test_random_malformed_tables_never_crash_and_keep_every_row(tmp_path, rows):
    path = tmp_path / "random.csv"
    lines = ["Point,Distance (um),SiO2,FeO,MgO"]
    for i, cells in enumerate(rows):
        lines.append(",".join([str(i + 1)] + [str(c) for c in cells[1:]]))
    path.write_text("\n".join(lines) + "\n", encoding="utf-8")
    try:
        traverses = read_traverses(path, mineral="olivine")
    except ProfileFormatError:
        return
    spots = pd.concat([t.spots for t in traverses])
    assert len(spots) == len(rows)
    assert spots["row"].tolist() == list(range(2, 2 + len(rows)))
    assert set(spots["status"]) <= {"ok", "flagged"}
    flagged = spots[spots["status"] == "flagged"]
    assert (flagged["reason"].str.len() > 0).all()
    ok = spots[spots["status"] == "ok"]
    assert np.isfinite(ok["fo"].to_numpy(float)).all()


# Planted bad spots of the invented Ferrolyn demo exports (demo_data/make_demo_data.py):
# 0-based spot index -> expected words in the reason.
DEMO_PLANTED = {
    "FRL-07_ol1.csv": {12: "total", 20: "same position as row", 27: "Al2O3"},
    "FRL-07_ol2.csv": {9: "total"},
    "FRL-12_pl2.csv": {17: "MgO"},
}


@pytest.mark.parametrize("name", ["FRL-03_ol1.csv", "FRL-07_ol1.csv", "FRL-07_ol2.csv",
                                  "FRL-07_ol3.txt", "FRL-12_pl1.xlsx", "FRL-12_pl2.csv"])
def test_demo_exports_fo_an_per_spot_and_planted_spots(name):
    from zoning.demo_data import DEMO_DIR

    path = DEMO_DIR / "ferrolyn" / name
    if not path.exists():
        pytest.skip(f"demo export {name} not generated")
    (t,) = read_traverses(path)
    s = t.spots
    oxides = [c for c in OXIDES if c in s.columns]
    analyses = ~s["reason"].str.contains("summary row")
    for i in np.flatnonzero(analyses.to_numpy()):
        comp = {k: s[k].iloc[i] for k in oxides}
        if t.mineral == "olivine":
            comp["FeO"] = np.nan_to_num(comp.get("FeO", 0.0)) + 0.8998 * np.nan_to_num(
                comp.pop("Fe2O3", 0.0))
            assert abs(s["fo"].iloc[i] - _hand_fo(comp)) <= ATOL_MOL_PCT_HAND, i
        else:
            assert abs(s["an"].iloc[i] - _hand_an(comp)) <= ATOL_MOL_PCT_HAND, i
    planted = DEMO_PLANTED.get(name, {})
    for i, word in planted.items():
        assert s["status"].iloc[i] == "flagged" and word in s["reason"].iloc[i], (i, s.iloc[i])
    others = analyses.to_numpy() & ~np.isin(np.arange(len(s)), list(planted))
    assert (s["status"].to_numpy()[others] == "ok").all(), s.loc[others & (s["status"] != "ok")]
    if name == "FRL-07_ol3.txt":
        # rim-to-rim: the core is at the middle spot (spot 21 of 41)
        assert t.orientation == "rim-to-rim"
        assert abs(t.core_position_um - s["position_um"].iloc[20]) <= ATOL_CORE_UM
