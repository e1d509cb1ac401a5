import csv
import json
import math
import os

import numpy as np
import pandas as pd
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from zoning.io.writers import (
    MAX_NAME_BYTES,
    safe_name,
    standard_metadata,
    unique_names,
    write_csv,
    write_json,
    write_text,
)

from zoning.exceptions import ZoningError


def _rows(path):
    with open(path, newline="", encoding="utf-8") as fh:
        return list(csv.reader(fh))


def test_write_csv_neutralises_formula_text_but_keeps_numbers(tmp_path):
    df = pd.DataFrame(
        {
            "label": [
                "=HYPERLINK(\"x\")", "+1+2", "-2+3", "@SUM(A1)", "\tcmd", "\rx", "core", "-3.5",
            ],
            "value": [-1.5, 2.0, -0.25, np.nan, 1e-9, 3.0, 4.0, 5.0],
        }
    )
    out = write_csv(df, tmp_path / "t.csv")
    rows = _rows(out)
    assert rows[0] == ["label", "value"]
    labels = [r[0] for r in rows[1:]]
    assert labels == [
        "'=HYPERLINK(\"x\")", "'+1+2", "'-2+3", "'@SUM(A1)", "'\tcmd", "'\nx", "core", "-3.5",
    ]
    values = [r[1] for r in rows[1:]]
    assert values[0] == "-1.5" and values[2] == "-0.25" and values[3] == ""
    # input frame untouched
    assert df["label"].iloc[0].startswith("=")


def test_write_csv_roundtrips_floats_exactly_and_is_reproducible(tmp_path):
    rng = np.random.default_rng(1)
    df = pd.DataFrame({"x": rng.normal(size=50), "y": np.arange(50)})
    a = write_csv(df, tmp_path / "a.csv")
    b = write_csv(df, tmp_path / "b.csv")
    assert a.read_bytes() == b.read_bytes()
    # Python's float() is the reference parser here: it is exact for repr
    # output, whereas pandas' default C parser before 3.0 was not and its
    # float_precision option is deprecated from 3.0 on.
    rows = _rows(a)
    x = np.array([float(row[0]) for row in rows[1:]])
    np.testing.assert_array_equal(x, df["x"].to_numpy())


def test_write_csv_header_cells_and_duplicate_columns(tmp_path):
    df = pd.DataFrame([["=x", 1.0]], columns=["=SUM(A1)", "a"])
    df2 = pd.concat([df, df], axis=1)  # duplicated column names
    rows = _rows(write_csv(df2, tmp_path / "d.csv"))
    assert rows == [["'=SUM(A1)", "a", "'=SUM(A1)", "a"], ["'=x", "1.0", "'=x", "1.0"]]


def test_write_csv_metadata_header(tmp_path):
    df = pd.DataFrame({"a": [1]})
    out = write_csv(df, tmp_path / "m.csv", metadata={"content": "spots\nsecond line", "k": 3})
    lines = out.read_text(encoding="utf-8").splitlines()
    assert lines[:2] == ["# content: spots second line", "# k: 3"]
    assert lines[2] == "a"
    back = pd.read_csv(out, comment="#")
    assert back["a"].tolist() == [1]


def test_standard_metadata_has_version_and_content():
    meta = standard_metadata("spot table", mineral="olivine")
    assert meta["content"] == "spot table"
    assert meta["mineral"] == "olivine"
    assert "zoning_version" in meta and meta["written_utc"].endswith("Z")


def test_write_csv_creates_parents_and_replaces_atomically(tmp_path):
    target = tmp_path / "deep" / "er" / "x.csv"
    write_csv(pd.DataFrame({"a": [1]}), target)
    write_csv(pd.DataFrame({"a": [2]}), target)
    assert pd.read_csv(target)["a"].tolist() == [2]
    # no temporary files left behind
    assert sorted(p.name for p in target.parent.iterdir()) == ["x.csv"]


def test_failed_write_leaves_old_file_and_no_temp(tmp_path):
    target = tmp_path / "x.json"
    write_json(target, {"a": 1})
    with pytest.raises(TypeError, match="cannot write an object"):
        write_json(target, {"a": object()})
    assert json.loads(target.read_text()) == {"a": 1}
    assert [p.name for p in tmp_path.iterdir()] == ["x.json"]


def test_refuses_to_overwrite_protected_input(tmp_path):
    src = tmp_path / "input.csv"
    src.write_text("SiO2\n40\n")
    with pytest.raises(ZoningError, match="one of the input files"):
        write_csv(pd.DataFrame({"a": [1]}), src, protect=[src])
    # the same file reached through another spelling of the path
    other = tmp_path / "sub" / ".." / "input.csv"
    (tmp_path / "sub").mkdir()
    with pytest.raises(ZoningError, match="one of the input files"):
        write_text(other, "x", protect=[str(src)])
    with pytest.raises(ZoningError, match="one of the input files"):
        write_json(src, {}, protect=[src])
    assert src.read_text() == "SiO2\n40\n"


def test_refuses_to_write_over_a_folder(tmp_path):
    (tmp_path / "d").mkdir()
    with pytest.raises(ZoningError, match="a folder of that name exists"):
        write_text(tmp_path / "d", "x")


def test_write_json_nan_becomes_null_and_numpy_types(tmp_path):
    obj = {
        "a": math.nan,
        "b": np.float64(np.inf),
        "c": np.arange(3),
        "d": np.int64(4),
        "e": (1.5, None),
        "f": tmp_path,
        "g": np.bool_(True),
    }
    out = write_json(tmp_path / "o.json", obj)
    text = out.read_text(encoding="utf-8")
    assert "NaN" not in text and "Infinity" not in text
    back = json.loads(text)  # strict standard JSON
    assert back == {"a": None, "b": None, "c": [0, 1, 2], "d": 4, "e": [1.5, None],
                    "f": str(tmp_path), "g": True}


def test_write_text_utf8(tmp_path):
    out = write_text(tmp_path / "r.txt", "distance [µm]\n")
    assert out.read_bytes() == "distance [µm]\n".encode()


def test_written_file_mode_follows_umask(tmp_path):
    out = write_text(tmp_path / "r.txt", "x")
    mask = os.umask(0)
    os.umask(mask)
    assert out.stat().st_mode & 0o777 == 0o666 & ~mask


@pytest.mark.parametrize(
    "raw, expected",
    [
        ("FRL-07", "FRL-07"),
        ("FRL-07 ol/3 core", "FRL-07_ol_3_core"),
        ("../../etc/passwd", "etc_passwd"),
        ("..", "unnamed"),
        (".", "unnamed"),
        ("", "unnamed"),
        ("   ", "unnamed"),
        (".hidden", "hidden"),
        ("CON", "_CON"),
        ("nul.txt", "_nul.txt"),
        ("COM1", "_COM1"),
        ("LPT9", "_LPT9"),
        ("COM10", "COM10"),
        ("a\x00b\nc", "a_b_c"),
        ("C:\\data\\x", "C_data_x"),
        ("trail. ", "trail"),
        ("Fo µm", "Fo_µm"),
    ],
)
def test_safe_name_examples(raw, expected):
    assert safe_name(raw) == expected


def test_safe_name_long_names_are_truncated_but_distinct():
    a = safe_name("x" * 300 + "a")
    b = safe_name("x" * 300 + "b")
    assert a != b
    assert len(a.encode()) <= MAX_NAME_BYTES
    assert safe_name("x" * 300 + "a") == a


def test_unique_names_dedupes_case_insensitively():
    assert unique_names(["a/b", "a b", "A_B", "c"]) == ["a_b", "a_b-2", "A_B-3", "c"]


@settings(max_examples=300, deadline=None)
@given(st.text())
def test_safe_name_property(raw):
    out = safe_name(raw)
    assert out
    assert "/" not in out and "\\" not in out
    assert out not in (".", "..")
    assert ".." not in out
    assert not out.startswith(".")
    assert len(out.encode("utf-8")) <= MAX_NAME_BYTES
    assert not any(ord(ch) < 32 for ch in out)
    assert out.split(".")[0].upper() not in {"CON", "PRN", "AUX", "NUL"}
    assert safe_name(raw) == out


def test_write_xlsx_has_units_row_formats_frozen_header_and_provenance(tmp_path):
    import openpyxl
    from zoning.io.results import summary_number_formats, summary_units
    from zoning.io.writers import write_xlsx

    df = pd.DataFrame({
        "sample": ["FRL-07 ol1", "=SUM(A1)"],
        "n_spots": pd.array([40, None], dtype="Int64"),
        "melt_mg_number": [0.7651, np.nan],
        "melt_mg_number_lo95": [0.729, np.nan],
        "melt_mg_number_constrained": [True, None],
        "melt_mgo_wt": [9.5123, 8.0],
        "temperature_c": [1204.4, 1190.0],
        "preferred_model": ["growth r free", ""],
    })
    before = df.copy()
    path = write_xlsx(df, tmp_path / "out" / "summary.xlsx", units=summary_units(df.columns),
                      number_formats=summary_number_formats(df.columns),
                      provenance={"content": "test table", "settings": {"seed": 7}})
    pd.testing.assert_frame_equal(df, before)
    wb = openpyxl.load_workbook(path)
    assert wb.sheetnames == ["summary", "provenance"]
    ws = wb["summary"]
    assert [c.value for c in ws[1]] == list(df.columns)
    assert [c.value or "" for c in ws[2]] == ["", "count", "molar fraction", "molar fraction",
                                              "true/false", "wt%", "°C", ""]
    assert ws.freeze_panes == "B3"
    assert ws["C3"].value == pytest.approx(0.7651) and ws["C3"].number_format == "0.000"
    assert ws["F3"].number_format == "0.00" and ws["G3"].number_format == "0"
    assert ws["B3"].value == 40 and ws["B3"].number_format == "0"
    assert ws["C4"].value is None and ws["B4"].value is None  # NaN / NA: empty cells
    assert ws["E3"].value is True
    assert ws["A4"].value == "'=SUM(A1)"  # formula injection neutralised, as in CSV
    prov = {r[0].value: r[1].value for r in wb["provenance"].iter_rows(min_row=2)}
    assert prov["content"] == "test table" and prov["settings.seed"] == "7"
    assert prov["zoning_version"] and prov["written_utc"].endswith("Z")
    assert prov["versions.numpy"] == np.__version__
    assert not list((tmp_path / "out").glob(".*tmp"))
