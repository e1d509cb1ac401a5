"""Tests of zoning.io.readers.read_export on exports written in every dialect.

The oxide values in the files are the preferred compositions of four
Smithsonian microbeam reference materials (Jarosewich, Nelen & Norberg 1980,
"Reference samples for electron microprobe analysis", Geostandards Newsletter
4, 43-47; preferred compositions as tabulated by the NMNH): San Carlos olivine
NMNH 111312-44, Springwater olivine USNM 2566, Lake County plagioclase NMNH
115900 and Great Sitkin anorthite NMNH 137041. "--" stands for an oxide the
table does not give, "<0.05" and "<0.02" are the table's own below-detection
entries. Whatever the dialect, the parsed numbers must be the published ones.
"""

from __future__ import annotations

import math

import numpy as np
import openpyxl
import pandas as pd
import pytest
from _tolerances import RTOL_IDENTITY
from numpy.testing import assert_allclose
from zoning.io._columns import OXIDES
from zoning.io.readers import RawTable, read_export

from zoning.exceptions import ProfileFormatError

COLUMNS = ["SiO2", "TiO2", "Al2O3", "Cr2O3", "Fe2O3", "FeO", "MnO", "MgO", "NiO", "CaO",
           "Na2O", "K2O"]
# Jarosewich, Nelen & Norberg (1980), Geostandards Newsletter 4, 43-47 (preferred values).
REFERENCE = {
    "San Carlos olivine NMNH 111312-44": (
        ["40.81", "--", "--", "--", "--", "9.55", "0.14", "49.42", "0.37", "<0.05", "--", "--"],
        "100.29"),
    "Springwater olivine USNM 2566": (
        ["38.95", "--", "--", "0.02", "--", "16.62", "0.30", "43.58", "--", "--", "--", "--"],
        "99.47"),
    "Lake County plagioclase NMNH 115900": (
        ["51.25", "0.05", "30.91", "--", "0.34", "0.15", "0.01", "0.14", "--", "13.64", "3.45",
         "0.18"], "100.17"),
    "Great Sitkin anorthite NMNH 137041": (
        ["44.00", "0.03", "36.03", "--", "--", "0.62", "--", "<0.02", "--", "19.09", "0.53",
         "0.03"], "100.33"),
}
NAMES = list(REFERENCE)
DISTANCES_UM = ["0", "12.5", "25", "37.5"]


def expected_oxides() -> pd.DataFrame:
    rows = []
    for cells, _ in REFERENCE.values():
        rows.append([float(c) if c[0].isdigit() else np.nan for c in cells])
    return pd.DataFrame(rows, columns=COLUMNS)


def write_export(path, *, sep=",", decimal=".", encoding="utf-8", newline="\n", title=(),
                 headers=None, distance_header="Distance (µm)", distance_scale=1.0,
                 summary=False):
    """Write the reference table as an instrument export in one dialect."""
    headers = headers or COLUMNS
    head = ["Point", "Comment", distance_header, *headers, "Total"]
    lines = list(title) + [sep.join(head)]
    for k, (name, (cells, total)) in enumerate(REFERENCE.items()):
        dist = f"{float(DISTANCES_UM[k]) / distance_scale:g}"
        row = [str(k + 1), name, dist, *cells, total]
        if decimal == ",":
            row = [c.replace(".", ",") if c[:1].isdigit() or c[:1] == "<" else c for c in row]
        lines.append(sep.join(row))
    if summary:
        lines.append(sep.join(["", "Average", "", *["1,0" if decimal == "," else "1.0"]
                               * len(headers), "100"]))
        lines.append(sep.join(["", "Std Dev", "", *["0,1" if decimal == "," else "0.1"]
                               * len(headers), "0.1"]))
    text = newline.join(lines) + newline
    path.write_bytes(text.encode(encoding))
    return path


def only(tables: list[RawTable]) -> RawTable:
    assert len(tables) == 1, [t.name for t in tables]
    return tables[0]


def assert_reference_numbers(table: RawTable, first_row: int):
    data = table.data
    assert list(data["row"]) == list(range(first_row, first_row + 4))
    assert list(data["point"]) == ["1", "2", "3", "4"]
    assert list(data["label"]) == NAMES
    assert_allclose(data[COLUMNS].to_numpy(float), expected_oxides().to_numpy(float),
                    rtol=RTOL_IDENTITY)
    assert_allclose(data["distance_um"], [0, 12.5, 25, 37.5], rtol=RTOL_IDENTITY)
    assert_allclose(data["total_reported"], [100.29, 99.47, 100.17, 100.33],
                    rtol=RTOL_IDENTITY)
    assert list(data["read_flags"]) == ["", "", "", ""]


DIALECTS = {
    "comma": dict(sep=","),
    "semicolon": dict(sep=";"),
    "tab": dict(sep="\t"),
    "semicolon decimal comma": dict(sep=";", decimal=","),
    "tab decimal comma": dict(sep="\t", decimal=","),
    "utf-8 with BOM": dict(sep=",", encoding="utf-8-sig"),
    "latin-1": dict(sep=";", decimal=",", encoding="latin-1"),
    "windows-1252": dict(sep="\t", encoding="cp1252"),
    "utf-16": dict(sep="\t", encoding="utf-16"),
    "crlf": dict(sep=",", newline="\r\n"),
    "old mac cr": dict(sep=";", newline="\r"),
}


@pytest.mark.parametrize("dialect", list(DIALECTS))
def test_every_dialect_gives_the_published_numbers(tmp_path, dialect):
    path = write_export(tmp_path / "FRL-07_ref.csv", **DIALECTS[dialect])
    table = only(read_export(path))
    assert table.name == "FRL-07_ref"
    assert table.source == str(path)
    assert_reference_numbers(table, first_row=2)
    assert table.column_map["distance_um"] == "Distance (µm)"  # the µ survived decoding
    assert "header on line 1" in table.notes


def test_decimal_and_delimiter_are_stated(tmp_path):
    t = only(read_export(write_export(tmp_path / "a.csv", sep=";", decimal=",")))
    assert "delimiter: semicolon ';'" in t.notes
    assert "decimal separator: comma" in t.notes
    t = only(read_export(write_export(tmp_path / "b.txt", sep="\t", encoding="latin-1")))
    assert "delimiter: tab" in t.notes
    assert any(n.startswith("encoding: not UTF-8") for n in t.notes)


def test_title_lines_before_the_header_are_skipped_and_rows_keep_line_numbers(tmp_path):
    title = ["Ferrolyn volcanic field, sample FRL-07, crystal ol-3",
             "Beam 15 kV, 20 nA, 5 µm; standards: San Carlos olivine",
             "",
             "Date;2026-03-01"]
    path = write_export(tmp_path / "t.csv", sep=";", decimal=",", title=title)
    t = only(read_export(path))
    assert_reference_numbers(t, first_row=6)
    assert "header on line 5; lines 1-4 above it skipped as title/metadata" in t.notes


def test_distance_in_mm_is_converted_to_um(tmp_path):
    for header in ("Distance (mm)", "distance_mm", "Dist [mm]"):
        path = write_export(tmp_path / "mm.csv", distance_header=header, distance_scale=1000.0)
        t = only(read_export(path))
        assert_allclose(t.data["distance_um"], [0, 12.5, 25, 37.5], rtol=RTOL_IDENTITY)
        assert any("converted to µm" in n for n in t.notes)


def test_distance_without_unit_is_read_as_um_and_said_so(tmp_path):
    t = only(read_export(write_export(tmp_path / "d.csv", distance_header="Distance")))
    assert_allclose(t.data["distance_um"], [0, 12.5, 25, 37.5], rtol=RTOL_IDENTITY)
    assert "distance from 'Distance': no unit given; span 37.5 >= 5, so read as µm" in t.notes


@pytest.mark.parametrize(
    "spelling",
    [
        ["SiO2 wt%", "TiO2 wt%", "Al2O3 wt%", "Cr2O3 wt%", "Fe2O3 wt%", "FeO wt%", "MnO wt%",
         "MgO wt%", "NiO wt%", "CaO wt%", "Na2O wt%", "K2O wt%"],
        ["SiO2(wt%)", "TiO2(wt%)", "Al2O3(wt%)", "Cr2O3(wt%)", "Fe2O3(wt%)", "FeO(wt%)",
         "MnO(wt%)", "MgO(wt%)", "NiO(wt%)", "CaO(wt%)", "Na2O(wt%)", "K2O(wt%)"],
        ["SiO2 (wt.%)", "TiO2 (wt.%)", "Al2O3 (wt.%)", "Cr2O3 (wt.%)", "Fe2O3 (wt.%)",
         "FeO (wt.%)", "MnO (wt.%)", "MgO (wt.%)", "NiO (wt.%)", "CaO (wt.%)", "Na2O (wt.%)",
         "K2O (wt.%)"],
        [c.lower() for c in COLUMNS],
        [c.upper() for c in COLUMNS],
        ["SiO₂", "TiO₂", "Al₂O₃", "Cr₂O₃", "Fe₂O₃", "FeO", "MnO", "MgO", "NiO", "CaO", "Na₂O",
         "K₂O"],
    ],
    ids=["wt%", "(wt%)", "(wt.%)", "lower", "upper", "subscripts"],
)
def test_oxide_header_spellings(tmp_path, spelling):
    t = only(read_export(write_export(tmp_path / "s.csv", headers=spelling)))
    assert_reference_numbers(t, first_row=2)
    assert [t.column_map[c] for c in COLUMNS] == spelling


@pytest.mark.parametrize("header", ["FeO*", "FeOt", "FeOT", "FeO(T)", "FeO total", "FeOtot",
                                    "FeO (tot)", "FeO T"])
def test_total_iron_spellings_read_as_feo_with_a_note(tmp_path, header):
    path = tmp_path / "fe.csv"
    path.write_text(f"Point,SiO2,{header},MgO\n1,40.81,9.55,49.42\n", encoding="utf-8")
    t = only(read_export(path))
    assert t.column_map["FeO"] == header
    assert t.data["FeO"].tolist() == [9.55]
    assert f"column '{header}' read as FeO (total Fe as FeO)" in t.notes


def test_element_wt_percent_columns_are_not_oxides(tmp_path):
    path = tmp_path / "el.csv"
    path.write_text("Point,SiO2,FeO,MgO,Mg,Si (wt%),Fe\n1,40.81,9.55,49.42,29.8,19.1,7.4\n",
                    encoding="utf-8")
    t = only(read_export(path))
    assert set(t.data.columns) == {"row", "point", "label", "SiO2", "FeO", "MgO", "read_flags"}
    assert "element wt% columns ignored (not oxides): ['Mg', 'Si (wt%)', 'Fe']" in t.notes


def test_below_detection_and_missing_cells_are_nan_and_counted(tmp_path):
    path = tmp_path / "bdl.csv"
    path.write_text(
        "Point;SiO2;FeO;MgO;CaO;NiO\n"
        "1;40,81;9,55;49,42;<0,01;0,37\n"
        "2;40,80;9,56;49,40;b.d.l.;n.d.\n"
        "3;40,79;9,57;49,41;bdl;--\n"
        "4;40,78;9,58;49,43;<LOD;\n"
        "5;40,77;9,59;49,44;0,08;-\n",
        encoding="utf-8",
    )
    t = only(read_export(path))
    assert t.data["CaO"].isna().tolist() == [True, True, True, True, False]
    assert t.data["CaO"].iloc[4] == 0.08
    assert t.data["NiO"].isna().tolist() == [False, True, True, True, True]
    assert "CaO: 4 below detection (NaN)" in t.notes
    assert "NiO: 4 missing/not determined (NaN)" in t.notes
    assert (t.data["read_flags"] == "").all()


def test_negative_concentration_is_kept_and_flagged(tmp_path):
    path = tmp_path / "neg.csv"
    path.write_text("Point,SiO2,FeO,MgO,K2O\n1,40.81,9.55,49.42,-0.02\n", encoding="utf-8")
    t = only(read_export(path))
    assert t.data["K2O"].tolist() == [-0.02]
    assert t.data["read_flags"].tolist() == [
        "negative value in K2O (-0.02 wt%, background-corrected) kept"]


def test_non_numeric_and_nan_inf_cells_are_flagged_never_guessed(tmp_path):
    path = tmp_path / "junk.csv"
    path.write_text("Point,SiO2,FeO,MgO\n1,abc,9.55,49.42\n2,40.8,NaN,inf\n3,40.8,9.5,1e400\n",
                    encoding="utf-8")
    t = only(read_export(path))
    assert t.data["read_flags"].tolist() == [
        "non-numeric value 'abc' in SiO2",
        "NaN/inf in FeO; NaN/inf in MgO",
        "NaN/inf in MgO",
    ]
    assert t.data[["SiO2", "FeO", "MgO"]].isna().to_numpy().sum() == 4


@pytest.mark.parametrize("word,kind", [("Average", "average"), ("Mean", "average"),
                                       ("Std Dev", "standard deviation"),
                                       ("SD", "standard deviation"),
                                       ("Stdev", "standard deviation"), ("Min", "minimum"),
                                       ("Max", "maximum"), ("Average of 4", "average")])
def test_summary_rows_are_kept_and_flagged(tmp_path, word, kind):
    path = tmp_path / "sum.csv"
    path.write_text(f"Point,Comment,SiO2,FeO,MgO\n1,core,40.81,9.55,49.42\n"
                    f"2,rim,38.95,16.62,43.58\n,{word},39.88,13.09,46.5\n", encoding="utf-8")
    t = only(read_export(path))
    assert t.data["row"].tolist() == [2, 3, 4]
    assert t.data["read_flags"].tolist() == ["", "", f"summary row ({kind}) — not an analysis"]


def test_summary_word_in_the_point_column_is_recognised(tmp_path):
    path = write_export(tmp_path / "s.csv", summary=True)
    t = only(read_export(path))
    assert t.data["row"].tolist() == [2, 3, 4, 5, 6, 7]
    assert t.data["read_flags"].tolist()[4:] == [
        "summary row (average) — not an analysis",
        "summary row (standard deviation) — not an analysis",
    ]


def test_spot_names_that_start_like_a_summary_word_are_not_summary_rows(tmp_path):
    path = tmp_path / "names.csv"
    path.write_text("Point,Comment,SiO2,FeO,MgO\n1,SD-01 core,40.8,9.5,49.4\n"
                    "2,Mint green inclusion,40.8,9.5,49.4\n3,maximum zoning,40.8,9.5,49.4\n",
                    encoding="utf-8")
    t = only(read_export(path))
    assert (t.data["read_flags"] == "").all()


def test_repeated_header_row_inside_the_data_is_kept_and_flagged(tmp_path):
    path = tmp_path / "rep.csv"
    path.write_text("Point,SiO2,FeO,MgO\n1,40.81,9.55,49.42\nPoint,SiO2,FeO,MgO\n"
                    "2,38.95,16.62,43.58\n", encoding="utf-8")
    t = only(read_export(path))
    assert t.data["row"].tolist() == [2, 3, 4]
    assert t.data["read_flags"].tolist() == [
        "", "duplicate header row repeated inside the data", ""]
    assert math.isnan(t.data["SiO2"].iloc[1])


def test_blank_lines_are_not_rows_but_line_numbers_stay_physical(tmp_path):
    path = tmp_path / "blank.csv"
    path.write_text("Point,SiO2,FeO,MgO\n1,40.81,9.55,49.42\n\n,,,\n2,38.95,16.62,43.58\n",
                    encoding="utf-8")
    t = only(read_export(path))
    assert t.data["row"].tolist() == [2, 5]
    assert "2 blank line(s) inside the data skipped (not spots)" in t.notes


def test_missing_point_column_uses_the_line_number(tmp_path):
    path = tmp_path / "np.csv"
    path.write_text("Comment,SiO2,FeO,MgO\ncore,40.81,9.55,49.42\nrim,38.95,16.62,43.58\n",
                    encoding="utf-8")
    t = only(read_export(path))
    assert t.data["point"].tolist() == ["2", "3"]
    assert t.data["label"].tolist() == ["core", "rim"]


def test_sample_column_splits_the_file_into_named_traverses(tmp_path):
    path = tmp_path / "FRL-07.csv"
    path.write_text(
        "Sample,Point,SiO2,FeO,MgO\n"
        "ol1,1,40.81,9.55,49.42\nol1,2,40.5,10.1,48.9\n,Average,40.6,9.8,49.1\n"
        "ol 2,1,38.95,16.62,43.58\nol 2,2,39.1,16.0,44.0\n",
        encoding="utf-8",
    )
    tables = read_export(path)
    assert [t.name for t in tables] == ["ol1", "ol 2"]
    assert [t.data["row"].tolist() for t in tables] == [[2, 3, 4], [5, 6]]
    assert tables[0].data["read_flags"].iloc[2] == "summary row (average) — not an analysis"
    assert any("split on sample column 'Sample' by its values as written into 2 groups" in n
               for n in tables[0].notes)


def test_sample_column_of_spot_names_is_split_by_prefix(tmp_path):
    path = tmp_path / "p.csv"
    path.write_text(
        "Crystal,SiO2,FeO,MgO\nFRL-07a_01,40.8,9.5,49.4\nFRL-07a_02,40.8,9.5,49.4\n"
        "FRL-07b_01,40.8,9.5,49.4\nFRL-07b_02,40.8,9.5,49.4\n",
        encoding="utf-8",
    )
    tables = read_export(path)
    assert [t.name for t in tables] == ["FRL-07a", "FRL-07b"]
    # the spot names become the labels
    assert tables[0].data["label"].tolist() == ["FRL-07a_01", "FRL-07a_02"]


def test_sample_column_with_one_value_does_not_split(tmp_path):
    path = tmp_path / "one.csv"
    path.write_text("Sample,SiO2,FeO,MgO\nFRL-07,40.8,9.5,49.4\nFRL-07,40.8,9.5,49.4\n",
                    encoding="utf-8")
    t = only(read_export(path))
    assert t.name == "one"
    assert "sample column 'Sample' holds one value 'FRL-07'; file not split" in t.notes


def test_label_column_never_splits(tmp_path):
    path = tmp_path / "lab.csv"
    path.write_text("Comment,SiO2,FeO,MgO\nol1 core,40.8,9.5,49.4\nol2 rim,40.8,9.5,49.4\n",
                    encoding="utf-8")
    assert len(read_export(path)) == 1


def test_blank_line_separated_blocks_with_name_lines(tmp_path):
    path = tmp_path / "blocks.csv"
    path.write_text(
        "Traverse A\n"
        "Point;SiO2;FeO;MgO\n1;40,81;9,55;49,42\n2;40,5;10,1;48,9\n"
        "\n"
        "Traverse B\n"
        "Point;SiO2;FeO;MgO\n1;38,95;16,62;43,58\n"
        "\n\n"
        "Traverse C\n"
        "1;39,0;16,0;44,0\n",
        encoding="utf-8",
    )
    tables = read_export(path)
    assert [t.name for t in tables] == ["Traverse A", "Traverse B", "Traverse C"]
    assert [t.data["row"].tolist() for t in tables] == [[3, 4], [8], [12]]
    assert tables[1].data["MgO"].tolist() == [43.58]
    assert all((t.data["read_flags"] == "").all() for t in tables)


def test_stage_xy_without_unit_small_span_is_mm(tmp_path):
    path = tmp_path / "xy.csv"
    path.write_text("Point,X,Y,SiO2,FeO,MgO\n1,23.1000,11.2000,40.8,9.5,49.4\n"
                    "2,23.1050,11.2020,40.8,9.5,49.4\n", encoding="utf-8")
    t = only(read_export(path))
    assert_allclose(t.data["x_um"], [23100.0, 23105.0], rtol=RTOL_IDENTITY)
    assert_allclose(t.data["y_um"], [11200.0, 11202.0], rtol=RTOL_IDENTITY)
    assert any("read as mm and converted to µm" in n for n in t.notes)


def test_stage_xy_without_unit_large_span_is_um(tmp_path):
    path = tmp_path / "xy.csv"
    path.write_text("Point,X,Y,SiO2,FeO,MgO\n1,23100,11200,40.8,9.5,49.4\n"
                    "2,23180,11260,40.8,9.5,49.4\n", encoding="utf-8")
    t = only(read_export(path))
    assert_allclose(t.data["x_um"], [23100.0, 23180.0], rtol=RTOL_IDENTITY)
    assert any("so read as µm" in n for n in t.notes)


def test_stage_xy_header_unit_wins(tmp_path):
    path = tmp_path / "xy.csv"
    path.write_text("Point,Stage X (µm),Stage Y (µm),SiO2,FeO,MgO\n1,1.0,2.0,40.8,9.5,49.4\n",
                    encoding="utf-8")
    t = only(read_export(path))
    assert t.data["x_um"].tolist() == [1.0]
    assert t.data["y_um"].tolist() == [2.0]


def test_units_line_below_the_header(tmp_path):
    path = tmp_path / "u.csv"
    path.write_text("Point,Distance,SiO2,FeO,MgO,NiO\n,mm,wt%,wt%,wt%,ppm\n"
                    "1,0.01,40.8,9.5,49.4,3000\n", encoding="utf-8")
    t = only(read_export(path))
    assert t.data["row"].tolist() == [3]
    assert t.data["distance_um"].tolist() == [10.0]
    assert_allclose(t.data["NiO"], [0.3], rtol=RTOL_IDENTITY)
    assert "line 2 read as a units line" in t.notes


def test_fo_and_an_uncertainty_columns(tmp_path):
    path = tmp_path / "sig.csv"
    path.write_text("Point,SiO2,FeO,MgO,Fo,Fo 2σ\n1,40.8,9.5,49.4,90.2,0.4\n", encoding="utf-8")
    t = only(read_export(path))
    assert t.data["fo_sigma"].tolist() == [0.2]
    assert "Fo" not in t.column_map.values()
    for header in ("Fo err", "Fo_sd", "Fo 1s"):
        path.write_text(f"Point,SiO2,FeO,MgO,{header}\n1,40.8,9.5,49.4,0.3\n", encoding="utf-8")
        assert only(read_export(path)).data["fo_sigma"].tolist() == [0.3]
    path.write_text("Point,SiO2,Al2O3,CaO,Na2O,An ±\n1,51.25,30.91,13.64,3.45,0.5\n",
                    encoding="utf-8")
    assert only(read_export(path)).data["an_sigma"].tolist() == [0.5]


def test_xlsx_with_title_rows(tmp_path):
    path = tmp_path / "FRL-07_ol.xlsx"
    rows = [["Ferrolyn volcanic field, FRL-07"], [],
            ["Point", "Comment", "Distance (µm)", *COLUMNS, "Total"]]
    for k, (name, (cells, total)) in enumerate(REFERENCE.items()):
        rows.append([k + 1, name, float(DISTANCES_UM[k]),
                     *[float(c) if c[0].isdigit() else c for c in cells], float(total)])
    wb = openpyxl.Workbook()
    for r in rows:
        wb.active.append(r)
    wb.save(path)
    t = only(read_export(path))
    assert t.name == "FRL-07_ol"
    assert_reference_numbers(t, first_row=4)
    assert "header on sheet row 3; sheet rows 1-2 above it skipped as title/metadata" in t.notes


def test_xlsx_sheet_selection(tmp_path):
    path = tmp_path / "two.xlsx"
    with pd.ExcelWriter(path) as w:
        pd.DataFrame({"notes": ["nothing here"]}).to_excel(w, sheet_name="info", index=False)
        pd.DataFrame({"Point": [1], "SiO2": [40.81], "FeO": [9.55], "MgO": [49.42]}).to_excel(
            w, sheet_name="ol3", index=False)
    assert only(read_export(path, sheet="ol3")).data["MgO"].tolist() == [49.42]
    assert only(read_export(path, sheet=1)).data["MgO"].tolist() == [49.42]
    with pytest.raises(ProfileFormatError, match=r"sheet 'nope' not found. The sheet names are "
                                                 r"'info', 'ol3'; give --sheet NAME"):
        read_export(path, sheet="nope")
    # without --sheet, the first sheet that holds analyses is read, and the notes say so
    t = only(read_export(path))
    assert t.data["MgO"].tolist() == [49.42]
    assert ("sheet: read 'ol3' (sheet 2 of 2: 'info', 'ol3'); 'info' skipped: no header "
            "line of analyses") in t.notes


def test_column_map_overrides_recognition(tmp_path):
    path = tmp_path / "odd.csv"
    path.write_text("Spot label,Si-ox,Fe-ox,Mg-ox,Way\nA1,40.81,9.55,49.42,0.005\n",
                    encoding="utf-8")
    with pytest.raises(ProfileFormatError, match="no header line found"):
        read_export(path)
    t = only(read_export(path, column_map={"SiO2": "Si-ox", "FeO": "Fe-ox", "MgO": "Mg-ox",
                                           "point": "Spot label", "distance_um": "Way"}))
    assert t.data["point"].tolist() == ["A1"]
    assert t.data[["SiO2", "FeO", "MgO"]].to_numpy().tolist() == [[40.81, 9.55, 49.42]]
    assert t.data["distance_um"].tolist() == [0.005]
    assert t.column_map["SiO2"] == "Si-ox"


def test_column_map_errors_name_what_is_wrong(tmp_path):
    path = write_export(tmp_path / "m.csv")
    with pytest.raises(ProfileFormatError, match=r"column-map key 'Silica' is not a known"):
        read_export(path, column_map={"Silica": "SiO2"})
    with pytest.raises(ProfileFormatError, match=r"headers \['SiO2 %'\] named in the column map "
                                                 r"not found on the header line; the header "
                                                 r"\(line 1\) has \['Point', 'Comment', "):
        read_export(path, column_map={"SiO2": "SiO2 %", "MgO": "MgO"})


def test_column_map_chooses_between_two_candidate_columns(tmp_path):
    path = tmp_path / "two_fe.csv"
    path.write_text("Point,SiO2,FeO,FeO*,MgO\n1,40.8,9.0,9.55,49.4\n", encoding="utf-8")
    with pytest.raises(ProfileFormatError, match=r"columns \['FeO', 'FeO\*'\] .* all look like "
                                                 r"FeO"):
        read_export(path)
    t = only(read_export(path, column_map={"FeO": "FeO*"}))
    assert t.data["FeO"].tolist() == [9.55]


def test_ragged_rows_are_flagged(tmp_path):
    path = tmp_path / "rag.csv"
    path.write_text("Point,SiO2,FeO,MgO\n1,40.8,9.5\n2,40.8,9.5,49.4,extra\n", encoding="utf-8")
    t = only(read_export(path))
    assert t.data["read_flags"].tolist() == [
        "row has only 3 of 4 fields",
        "cells beyond the last of the 4 header columns ignored",
    ]


def test_quoted_cell_spanning_lines_is_flagged(tmp_path):
    path = tmp_path / "q.csv"
    path.write_text('Point,Comment,SiO2,FeO,MgO\n1,"two\nlines",40.8,9.5,49.4\n'
                    "2,ok,40.8,9.5,49.4\n", encoding="utf-8")
    t = only(read_export(path))
    assert t.data["row"].tolist() == [2, 4]
    assert t.data["read_flags"].tolist() == ["quoted cell spans lines 2-3", ""]


def test_decimal_comma_with_thousands_grouping_in_distance(tmp_path):
    path = tmp_path / "th.csv"
    path.write_text("Point;Distance (µm);SiO2;FeO;MgO\n1;1.234,5;40,8;9,5;49,4\n"
                    "2;0,5;40,8;9,5;49,4\n", encoding="utf-8")
    t = only(read_export(path))
    assert t.data["distance_um"].tolist() == [1234.5, 0.5]


@pytest.mark.parametrize(
    "content,match",
    [
        (b"", r"the file is empty"),
        (b"  \n\n", r"the file is empty"),
        (b"Point,SiO2,FeO,MgO\n", r"header found on line 1 but no data rows"),
        (b"Point,SiO2,FeO,MgO\n\n,,,\n", r"header found on line 1 but no data rows"),
        (b"Point,Comment,Distance,Mg,Si\n1,a,0,29,19\n",
         r"no oxide columns recognised on header line 1; headers found: \['Point', 'Comment', "
         r"'Distance', 'Mg', 'Si'\].*column_map"),
        (b"Point,SiO2,SiO2,MgO\n1,40,40,49\n", r"duplicated header 'SiO2' on line 1"),
        (b"\x00\x01\x02\x03binary\x00junk" * 50, r"looks like a binary file"),
        (b"just some words\nand more words\n", r"no header line found"),
        (bytes(range(128, 160)) * 200, r"unreadable text"),
    ],
    ids=["empty", "whitespace", "header only", "header and blanks", "no oxides",
         "duplicated headers", "binary", "garbage text", "control characters"],
)
def test_bad_files_give_a_clear_error_naming_the_file(tmp_path, content, match):
    path = tmp_path / "bad.csv"
    path.write_bytes(content)
    with pytest.raises(ProfileFormatError, match=match) as info:
        read_export(path)
    assert str(path) in str(info.value)


def test_missing_file_and_old_workbooks(tmp_path):
    with pytest.raises(ProfileFormatError, match="file not found"):
        read_export(tmp_path / "nope.csv")
    old = tmp_path / "old.xls"
    old.write_bytes(b"\xd0\xcf\x11\xe0 not really")
    with pytest.raises(ProfileFormatError, match=r"'\.xls' workbooks are not read"):
        read_export(old)
    fake = tmp_path / "fake.xlsx"
    fake.write_bytes(b"this is not a zip")
    with pytest.raises(ProfileFormatError, match="cannot be opened as an .xlsx workbook"):
        read_export(fake)


def test_data_columns_and_types_follow_the_contract(tmp_path):
    t = only(read_export(write_export(tmp_path / "c.csv", sep=";", decimal=",")))
    d = t.data
    oxides_in_canonical_order = [c for c in OXIDES if c in COLUMNS]
    assert list(d.columns) == ["row", "point", "label", "distance_um",
                               *oxides_in_canonical_order, "total_reported", "read_flags"]
    assert d["row"].dtype == np.int64
    for c in ("point", "label", "read_flags"):
        assert all(isinstance(v, str) for v in d[c])
    for c in ["distance_um", *COLUMNS, "total_reported"]:
        assert d[c].dtype == np.float64
    assert isinstance(t.notes, tuple)


def test_same_file_reads_identically_twice(tmp_path):
    path = write_export(tmp_path / "r.csv", sep="\t", decimal=",", summary=True)
    a, b = only(read_export(path)), only(read_export(path))
    pd.testing.assert_frame_equal(a.data, b.data)
    assert a.notes == b.notes


def test_metadata_line_listing_oxides_does_not_beat_the_real_header(tmp_path):
    path = tmp_path / "meta.csv"
    path.write_text("Elements,SiO2,MgO,FeO\nPoint,Comment,Distance (µm),SiO2,FeO,MgO,NiO\n"
                    "1,core,0,40.81,9.55,49.42,0.37\n", encoding="utf-8")
    t = only(read_export(path))
    assert t.data["row"].tolist() == [3]
    assert t.data["NiO"].tolist() == [0.37]


def test_quoted_decimal_commas_in_a_comma_separated_file(tmp_path):
    path = tmp_path / "q.csv"
    path.write_text('Point,SiO2,FeO,MgO\n1,"40,81","9,55","49,42"\n', encoding="utf-8")
    t = only(read_export(path))
    assert t.data[["SiO2", "FeO", "MgO"]].to_numpy().tolist() == [[40.81, 9.55, 49.42]]


def test_unquoted_decimal_commas_in_a_comma_separated_file_are_refused(tmp_path):
    path = tmp_path / "amb.csv"
    path.write_text("Point,SiO2,FeO,MgO\n1,40,81,9,55,49,42\n2,38,95,16,62,43,58\n",
                    encoding="utf-8")
    with pytest.raises(ProfileFormatError, match=r"2 of 2 rows have more cells than the 4 "
                                                 r"header columns.*decimal comma"):
        read_export(path)


def test_row_ending_before_an_empty_comment_is_not_flagged(tmp_path):
    path = tmp_path / "c.csv"
    path.write_text("Point,SiO2,FeO,MgO,Comment\n1,40.8,9.5,49.4\n2,40.8,9.5,49.4,rim\n",
                    encoding="utf-8")
    t = only(read_export(path))
    assert t.data["read_flags"].tolist() == ["", ""]
    assert t.data["label"].tolist() == ["", "rim"]


def test_utf16_without_byte_order_mark(tmp_path):
    path = write_export(tmp_path / "u16.txt", sep="\t", encoding="utf-16-le")
    t = only(read_export(path))
    assert_reference_numbers(t, first_row=2)
    assert "encoding: UTF-16-LE without byte-order mark" in t.notes


def test_cells_under_an_empty_header_are_noted(tmp_path):
    path = tmp_path / "nh.csv"
    path.write_text("Point,SiO2,FeO,MgO,\n1,40.8,9.5,49.4,7\n2,40.8,9.5,49.4,\n",
                    encoding="utf-8")
    t = only(read_export(path))
    assert "1 cell(s) in 1 column(s) without a header ignored" in t.notes


def test_xlsx_blank_rows_keep_sheet_row_numbers(tmp_path):
    path = tmp_path / "gap.xlsx"
    wb = openpyxl.Workbook()
    ws = wb.active
    ws["B2"] = "Point"
    ws["C2"], ws["D2"], ws["E2"] = "SiO2", "FeO", "MgO"
    ws["B3"], ws["C3"], ws["D3"], ws["E3"] = 1, 40.81, 9.55, 49.42
    ws["B6"], ws["C6"], ws["D6"], ws["E6"] = 2, "<0.01", 16.62, 43.58
    wb.save(path)
    t = only(read_export(path))
    assert t.data["row"].tolist() == [3, 6]
    assert t.data["point"].tolist() == ["1", "2"]
    assert_allclose(t.data["MgO"], [49.42, 43.58], rtol=RTOL_IDENTITY)
    assert "SiO2: 1 below detection (NaN)" in t.notes


def test_footer_and_excel_separator_lines(tmp_path):
    path = tmp_path / "sep.csv"
    path.write_text("sep=;\nPoint;SiO2;FeO;MgO\n1;40,81;9,55;49,42\n\nEnd of data\n",
                    encoding="utf-8")
    t = only(read_export(path))
    assert t.data["row"].tolist() == [3, 5]
    assert t.data["point"].tolist() == ["1", "End of data"]
    assert t.data["read_flags"].tolist() == [
        "", "row has only 1 of 4 fields; no oxide values in this row"]


def test_space_separated_export_gets_a_specific_error(tmp_path):
    path = tmp_path / "sp.txt"
    path.write_text("Point   SiO2    FeO     MgO\n1       40.81   9.55    49.42\n",
                    encoding="utf-8")
    with pytest.raises(ProfileFormatError, match="separated by spaces"):
        read_export(path)


def test_typographic_minus_sign_is_read_as_minus(tmp_path):
    path = tmp_path / "m.csv"
    path.write_text("Point,SiO2,FeO,MgO,K2O,Distance\n1,40.81,9.55,49.42,\u22120.02,\u22125\n",
                    encoding="utf-8")
    t = only(read_export(path))
    assert t.data["K2O"].tolist() == [-0.02]
    assert t.data["distance_um"].tolist() == [-5.0]
