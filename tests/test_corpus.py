"""Reading the export corpus of tests/corpus/ (invented data, see make_corpus.py).

Each file is checked for the split into traverses (names as written in the
file), the reading of its columns, and that nothing is dropped: every data
row of the file comes back exactly once, with its row number. The same
traverses must come out of ``zoning inspect``, ``zoning fit`` and ``zoning
batch``. Orientation checks on the reversely zoned olivine, the plagioclase
measured rim-to-core and the flat profile belong with the orientation tests.
"""

from __future__ import annotations

import csv
import io
import math
import sys
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from _tolerances import RTOL_IDENTITY, RTOL_TABLE_3SF
from numpy.testing import assert_allclose
from zoning.io import read_traverses
from zoning.io.readers import read_export

from zoning.cli import main
from zoning.exceptions import ProfileFormatError

CORPUS = Path(__file__).resolve().parent / "corpus"
sys.path.insert(0, str(CORPUS))
from make_corpus import BAD_CELLS, FILES  # noqa: E402

#: Values in the corpus files are written with 2-3 decimals [wt%].
ATOL_WRITTEN = 5e-3


def _source_header(name: str) -> list[str]:
    return _source_table(name)[0]


def _source_rows(name: str) -> list[dict[str, str]]:
    header, body = _source_table(name)
    return [dict(zip(header, r, strict=False)) for r in body]


def _source_table(name: str) -> tuple[list[str], list[list[str]]]:
    """Data rows of a corpus file read independently of zoning (header = first row with SiO2)."""
    path = CORPUS / name
    if path.suffix == ".xlsx":
        grid = pd.read_excel(path, sheet_name=FILES[name]["sheet"], header=None, dtype=str)
        rows = [["" if (isinstance(c, float) and math.isnan(c)) else str(c) for c in r]
                for r in grid.itertuples(index=False)]
    elif path.suffix == ".ods":
        grid = pd.read_excel(path, header=None, dtype=str, engine="odf")
        rows = [["" if (isinstance(c, float) and math.isnan(c)) else str(c) for c in r]
                for r in grid.itertuples(index=False)]
    else:
        raw = path.read_bytes()
        text = raw.decode("utf-8") if raw.isascii() or _utf8(raw) else raw.decode("cp1252")
        delim = max(("\t", ";", ","), key=text.splitlines()[1].count)
        rows = list(csv.reader(io.StringIO(text), delimiter=delim))
    start = next(i for i, r in enumerate(rows) if any(c.strip() in ("SiO2", "Si02", "SiO2 (wt%)")
                                                        for c in r))
    return rows[start], [r for r in rows[start + 1:] if any(c.strip() for c in r)]


def _utf8(raw: bytes) -> bool:
    try:
        raw.decode("utf-8")
    except UnicodeDecodeError:
        return False
    return True


@pytest.fixture(scope="module")
def corpus():
    out = {}
    for name in FILES:
        out[name] = read_traverses(CORPUS / name)
    return out


@pytest.mark.parametrize("name", list(FILES))
def test_split_names_and_nothing_dropped(corpus, name):
    traverses = corpus[name]
    expected = FILES[name]
    assert [t.name for t in traverses] == list(expected["traverses"])
    assert [t.n_spots for t in traverses] == list(expected["traverses"].values())
    assert {t.mineral for t in traverses} == {expected["mineral"]}
    # every data row of the file exactly once
    source = _source_rows(name)
    rows = np.concatenate([t.spots["row"].to_numpy() for t in traverses])
    assert len(rows) == len(source) == len(set(rows.tolist()))
    # the numbers are those written in the file (first oxide column)
    si_header = next(h for h in source[0] if h.strip() in ("SiO2", "Si02", "SiO2 (wt%)"))
    written = sorted(float(r[si_header].replace(",", ".")) for r in source)
    read = sorted(np.concatenate([t.spots["SiO2"].to_numpy() for t in traverses]).tolist())
    assert_allclose(read, written, rtol=RTOL_IDENTITY)


#: Traverses of the corpus whose orientation cannot be told from the data and
#: must be asked about (``orientation_confidence == "uncertain"``), and why.
ASKED = {
    ("ferrolyn_long_table.csv", "FRL-21 prof 1"): "4 spots: too few to tell the ends apart",
    ("reverse_olivine.csv", "reverse_olivine"): "reversely zoned: shape and trends disagree",
    ("flat_olivine.csv", "flat_olivine"): "flat within the noise",
}


@pytest.mark.parametrize("name", list(FILES))
def test_orientation_as_measured_or_asked(corpus, name):
    # every traverse is either read in the orientation it was written in
    # (make_corpus.FILES) from its data, or asked about; never confidently wrong
    expected = FILES[name]["orientation"]
    for t in corpus[name]:
        if (name, t.name) in ASKED:
            assert t.orientation_confidence == "uncertain", (t.name, t.orientation_basis)
        else:
            assert t.orientation == expected, (t.name, t.orientation_basis)
            assert t.orientation_confidence in ("high", "low"), (t.name, t.orientation_basis)


@pytest.mark.parametrize("name", list(FILES))
def test_every_column_is_accounted_for_in_the_notes(corpus, name):
    t = corpus[name][0]
    start = t.notes.index("how each column was read:")
    lines = [n for n in t.notes[start + 1:] if n.startswith("  '")]
    headers = [h for h in _source_header(name) if h.strip()]
    assert [line.split("'")[1] for line in lines] == [h.strip() for h in headers]


def test_long_table_splits_on_sample_and_profile_without_merging(corpus):
    traverses = corpus["ferrolyn_long_table.csv"]
    # 'prof 1', 'prof 2' and 'prof 12' stay apart, and 'prof 1' of two samples too
    assert len({t.name for t in traverses}) == 6
    # distances restart in every traverse: duplicate positions are checked per traverse only
    for t in traverses:
        assert not t.spots["reason"].str.contains("same position").any()
        assert t.spots["row"].is_monotonic_increasing
    notes = traverses[0].notes
    assert "split on sample column 'Sample' by its values as written into 2 groups" in notes
    assert any(n.startswith("split on traverse column 'Profile_Name'") for n in notes)


def test_workbook_reads_the_sheet_with_analyses_and_says_so(corpus, tmp_path, capsys):
    t, = corpus["ferrolyn_workbook.xlsx"]
    note = ("sheet: read 'olivine' (sheet 2 of 3: 'info', 'olivine', 'standards'); 'info' "
            "skipped: no header line of analyses; 'standards' also hold analyses: read them "
            "with --sheet NAME (project key sheet)")
    assert note in t.notes
    # stage X/Y without a unit span 0.16: millimetres, 12 µm steps along the line
    assert_allclose(np.diff(t.spots["position_um"]), 12.0, rtol=1e-6)
    assert main(["inspect", str(CORPUS / "ferrolyn_workbook.xlsx"), "--out",
                 str(tmp_path / "o")]) == 0
    assert "sheet: read 'olivine' (sheet 2 of 3" in capsys.readouterr().out
    std, = read_export(CORPUS / "ferrolyn_workbook.xlsx", sheet="standards")
    assert len(std.data) == 2
    assert len(read_export(CORPUS / "ferrolyn_workbook.xlsx", sheet=2)[0].data) == 2
    assert len(read_export(CORPUS / "ferrolyn_workbook.xlsx", sheet="2")[0].data) == 2
    with pytest.raises(ProfileFormatError,
                       match=r"sheet 'Olivine ' not found. Did you mean 'olivine'\? The sheet "
                             r"names are 'info', 'olivine', 'standards'; give --sheet NAME"):
        read_export(CORPUS / "ferrolyn_workbook.xlsx", sheet="Olivine ")
    assert main(["inspect", str(CORPUS / "ferrolyn_workbook.xlsx"), "--sheet", "nope",
                 "--out", str(tmp_path / "p")]) == 2
    assert "'info', 'olivine', 'standards'" in capsys.readouterr().err


def test_ods_is_read_like_xlsx(corpus, tmp_path):
    t, = corpus["ferrolyn_plag.ods"]
    assert "read from .ods (OpenDocument); row numbers are sheet rows" in t.notes
    assert t.spots["row"].tolist() == list(range(4, 4 + t.n_spots))
    # the same table saved as .xlsx reads to the same spots
    grid = pd.read_excel(CORPUS / "ferrolyn_plag.ods", header=None, engine="odf")
    grid.to_excel(tmp_path / "same.xlsx", header=False, index=False, sheet_name="FRL-12 pl3")
    x, = read_traverses(tmp_path / "same.xlsx")
    pd.testing.assert_frame_equal(x.spots, t.spots)


def test_typo_headers_digit_zero_for_letter_o(corpus):
    t, = corpus["typo_headers.csv"]
    cmap = t.settings["column_map"]
    assert {cmap[k] for k in ("SiO2", "MnO", "MgO", "NiO", "CaO", "Al2O3")} == {
        "Si02", "Mn0", "Mg0", "Ni0", "Ca0", "Al203"}
    assert cmap["FeO"] == "FeO(tot)"
    assert "  'Si02' -> SiO2 wt% (digit 0 in the header read as the letter O)" in t.notes
    assert "encoding: not UTF-8; read as Windows-1252 (Latin-1)" in t.notes


def test_laser_ablation_ppm_columns_become_oxides_with_the_conversion_named(corpus):
    periodictable = pytest.importorskip("periodictable")
    t, = corpus["la_ppm_traces.csv"]
    source = _source_rows("la_ppm_traces.csv")
    # independent molar masses: the periodictable package (IUPAC standard atomic weights)
    el = periodictable.elements
    for header, oxide, element, n_cat, n_o in (("Sr88 (ppm)", "SrO", el.Sr, 1, 1),
                                                ("Mg25 (ppm)", "MgO", el.Mg, 1, 1),
                                                ("Ba137 (ppm)", "BaO", el.Ba, 1, 1),
                                                ("Ti49 (ppm)", "TiO2", el.Ti, 1, 2)):
        ppm = np.array([float(r[header]) for r in source])
        factor = (n_cat * element.mass + n_o * el.O.mass) / (n_cat * element.mass) * 1e-4
        assert_allclose(t.spots[oxide], ppm * factor, rtol=RTOL_TABLE_3SF)
        assert any(n.startswith(f"  '{header}' -> {oxide} wt% = {element.symbol} ppm")
                   for n in t.notes)
    sr_2se = np.array([float(r["Sr88 2SE (ppm)"]) for r in source])
    sro_per_sr = (el.Sr.mass + el.O.mass) / el.Sr.mass * 1e-4
    assert_allclose(t.spots["SrO_sigma"], sr_2se / 2 * sro_per_sr, rtol=RTOL_TABLE_3SF)
    assert "  'Sr88_LOD' -> (a detection limit) not used" in t.notes


def test_bad_spot_column_flags_with_its_reason(corpus):
    t, = corpus["bad_spot_column.csv"]
    marked = [i for i, c in enumerate(BAD_CELLS) if c not in ("", "0", "no")]
    flagged = np.flatnonzero((t.spots["status"] != "ok").to_numpy())
    assert flagged.tolist() == marked
    reasons = t.spots["reason"].tolist()
    assert "marked to leave out in the file (column 'marked_bad': 'crack')" in reasons[4]
    assert "marked to leave out in the file (column 'marked_bad')" in reasons[2]
    assert "'glass in beam'" in reasons[9]


def test_distance_in_mm_without_unit_and_bare_sigma_columns(corpus):
    t, = corpus["distance_mm_no_unit.csv"]
    assert_allclose(np.diff(t.spots["position_um"]), 18.0, rtol=1e-9)
    assert any(n.startswith("distance from 'Distance': no unit given; span 0.216 < 5, so "
                            "read as mm") for n in t.notes)
    assert_allclose(t.spots["FeO_sigma"], 0.12, rtol=RTOL_IDENTITY)
    assert_allclose(t.spots["MgO_sigma"], 0.18, rtol=RTOL_IDENTITY)
    # Fo 1-sigma propagated from the oxide sigmas, checked by finite differences
    s = t.spots
    m_mg, m_fe = 40.304, 71.844  # molar masses [g/mol] (IUPAC 2021)

    def fo(mgo, feo):
        return 100 * (mgo / m_mg) / (mgo / m_mg + feo / m_fe)

    h = 1e-6
    d_mg = (fo(s["MgO"] + h, s["FeO"]) - fo(s["MgO"] - h, s["FeO"])) / (2 * h)
    d_fe = (fo(s["MgO"], s["FeO"] + h) - fo(s["MgO"], s["FeO"] - h)) / (2 * h)
    expected = np.hypot(d_mg * 0.18, d_fe * 0.12)
    assert_allclose(s["fo_sigma"], expected, rtol=1e-5)


def test_sigma_of_fo_column_is_the_spot_uncertainty(corpus):
    t, = corpus["reverse_olivine.csv"]
    assert_allclose(t.spots["fo_sigma"], 0.15, rtol=RTOL_IDENTITY)


@pytest.mark.parametrize("name", ["ferrolyn_long_table.csv", "ferrolyn_workbook.xlsx",
                                  "typo_headers.csv"])
def test_inspect_fit_and_batch_read_the_same_traverses(name, tmp_path, monkeypatch, capsys):
    """The three commands read the same file with the same options into the same traverses."""
    import zoning.fitting

    from zoning.exceptions import FitError

    seen: dict[str, list] = {"fit": [], "batch": []}
    which = ["fit"]

    def capture(traverse, **kwargs):
        seen[which[0]].append(traverse)
        raise FitError("captured for the test")

    monkeypatch.setattr(zoning.fitting, "fit_traverse", capture)
    path = CORPUS / name
    reading = ["--iron", "FeO", "--check", "total_min_wt=98.0", "--mineral", "olivine"]
    if path.suffix == ".xlsx":
        reading += ["--sheet", "olivine"]
    assert main(["inspect", str(path), "--out", str(tmp_path / "i"), *reading]) == 0
    expected = read_traverses(path, mineral="olivine", sheet="olivine" if path.suffix ==
                              ".xlsx" else None, checks={"total_min_wt": 98.0})
    assert main(["fit", str(path), "--melt", "FeO=9.8", "--out", str(tmp_path / "f"),
                 *reading]) == 2
    which[0] = "batch"
    folder = tmp_path / "in"
    folder.mkdir()
    (folder / path.name).write_bytes(path.read_bytes())
    main(["batch", str(folder), "--melt", "FeO=9.8", "--workers", "1", "--quiet", "--out",
          str(tmp_path / "b"), *reading])
    capsys.readouterr()
    for got in (seen["fit"], seen["batch"]):
        assert [t.name for t in got] == [t.name for t in expected]
        for a, b in zip(got, expected, strict=True):
            pd.testing.assert_frame_equal(a.spots, b.spots)
            assert a.notes == b.notes
    # inspect wrote one points.csv per traverse with the same rows and statuses
    from zoning.io.writers import unique_names

    for t, folder in zip(expected, unique_names(t.name for t in expected), strict=True):
        points = pd.read_csv(tmp_path / "i" / folder / "points.csv", comment="#")
        assert points["row"].tolist() == t.spots["row"].tolist()
        assert points["status"].tolist() == t.spots["status"].tolist()
