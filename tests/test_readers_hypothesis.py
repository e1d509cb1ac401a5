"""Property-based tests of zoning.io.readers.read_export.

Random exports (delimiter, decimal style, encoding, line ends, title lines,
header spellings, junk cells, below-detection cells, summary rows, blank
lines) must read without an unhandled exception, and every data row written
must come back exactly once, with its physical line number and its number.
Random bytes and randomly damaged tables may only raise ProfileFormatError.
"""

from __future__ import annotations

import math

import hypothesis.strategies as st
import numpy as np
from _tolerances import RTOL_IDENTITY
from hypothesis import HealthCheck, given, settings
from zoning.io.readers import read_export

from zoning.exceptions import ProfileFormatError

SETTINGS = settings(max_examples=100, deadline=None,
                    suppress_health_check=[HealthCheck.function_scoped_fixture,
                                           HealthCheck.too_slow])

SPELLINGS = {
    "SiO2": ["SiO2", "SiO2 wt%", "SiO2(wt%)", "SiO2 (wt.%)", "sio2"],
    "TiO2": ["TiO2", "TiO2 (wt%)"],
    "Al2O3": ["Al2O3", "AL2O3"],
    "FeO": ["FeO", "FeO*", "FeOt", "FeO(T)", "FeO total"],
    "MnO": ["MnO"],
    "MgO": ["MgO", "MgO wt%"],
    "NiO": ["NiO"],
    "CaO": ["CaO", "CaO(wt%)"],
    "Na2O": ["Na2O"],
    "K2O": ["K2O"],
}
BELOW = ["<0.01", "<LOD", "b.d.l.", "bdl", "< 0.02"]
MISSING = ["n.d.", "nd", "--", "-", ""]
JUNK = ["abc", "#VALUE!", "1.2.3", "??", "x", "NaN", "inf", "-inf", "12 3"]
SUMMARY = ["Average", "Mean", "Std Dev", "SD", "Min", "Max", "Stdev"]
TEXT = st.text(alphabet="abcdefghijklmnopqrstuvwxyz ABCDEFGHIJKLMNOPQRSTUVWXYZ0123456789-_/:()+",
               max_size=25)


@st.composite
def cell(draw, decimal):
    """Return (text written, expected value or None when not checked)."""
    kind = draw(st.sampled_from(["num", "num", "num", "num", "neg", "below", "missing", "junk",
                                 "text"]))
    if kind in ("num", "neg"):
        x = draw(st.floats(0, 120, allow_nan=False))
        digits = draw(st.integers(0, 4))
        text = f"{-x if kind == 'neg' else x:.{digits}f}"
        value = float(text)
        if decimal == ",":
            text = text.replace(".", ",")
        return text, value
    if kind == "below":
        return draw(st.sampled_from(BELOW)), math.nan
    if kind == "missing":
        return draw(st.sampled_from(MISSING)), math.nan
    if kind == "junk":
        return draw(st.sampled_from(JUNK)), math.nan
    t = draw(TEXT.filter(lambda s: not any(ch.isdigit() for ch in s)))
    return t, math.nan


@st.composite
def export(draw):
    sep = draw(st.sampled_from([",", ";", "\t"]))
    decimal = draw(st.sampled_from([".", ","]))
    encoding = draw(st.sampled_from(["utf-8", "utf-8-sig", "latin-1", "utf-16"]))
    newline = draw(st.sampled_from(["\n", "\r\n"]))
    oxides = draw(st.lists(st.sampled_from(sorted(SPELLINGS)), min_size=3, max_size=8,
                           unique=True))
    headers = [draw(st.sampled_from(SPELLINGS[o])) for o in oxides]
    with_label = draw(st.booleans())

    def join(cells):
        if sep == "," and decimal == ",":
            cells = [f'"{c}"' if "," in c else c for c in cells]
        return sep.join(cells)

    lines: list[str] = []
    titles = draw(st.lists(TEXT, max_size=3))
    lines.extend(titles)
    lines.append(join(["Point", *(["Comment"] if with_label else []), *headers]))
    n_rows = draw(st.integers(1, 25))
    expected_rows, expected_values = [], []
    for i in range(n_rows):
        if draw(st.integers(0, 9)) == 0:
            lines.append(draw(st.sampled_from(["", sep * (len(headers) + 1)])))
        summary = draw(st.integers(0, 9)) == 0
        point = draw(st.sampled_from(SUMMARY)) if summary else str(i + 1)
        cells = [draw(cell(decimal)) for _ in oxides]
        # at least one plain number, so that no data row looks like a block name line
        x = draw(st.floats(0.01, 99, allow_nan=False))
        first = f"{x:.2f}"
        cells[0] = (first.replace(".", ",") if decimal == "," else first, float(first))
        label = [draw(TEXT)] if with_label else []
        lines.append(join([point, *label, *(c for c, _ in cells)]))
        expected_rows.append(len(lines))
        expected_values.append([v for _, v in cells])
    text = newline.join(lines) + newline
    return text.encode(encoding), oxides, expected_rows, np.array(expected_values, float)


@SETTINGS
@given(export())
def test_random_exports_account_for_every_row(tmp_path, case):
    raw, oxides, rows, values = case
    path = tmp_path / "random_export.csv"
    path.write_bytes(raw)
    tables = read_export(path)
    assert len(tables) == 1
    data = tables[0].data
    assert data["row"].tolist() == rows
    got = data[oxides].to_numpy(float)
    numeric = np.isfinite(values)
    np.testing.assert_allclose(got[numeric], values[numeric], rtol=RTOL_IDENTITY)
    assert np.isnan(got[~numeric]).all()
    assert all(isinstance(f, str) for f in data["read_flags"])


@st.composite
def damaged(draw):
    """A small table with random damage: dropped, extra, swapped or garbage cells."""
    sep = draw(st.sampled_from([",", ";", "\t"]))
    header = ["Point", "SiO2", "FeO", "MgO", "CaO"]
    if draw(st.booleans()):
        header[draw(st.integers(0, 4))] = draw(st.sampled_from(["SiO2", "MgO", "", "Mg", "x"]))
    lines = [sep.join(header)]
    cell_text = st.one_of(st.sampled_from(["40.8", "9,5", "<0.01", "", "n.d.", "Average",
                                           "\"", "\"a", "Point", "SiO2", "nan"]),
                          st.text(max_size=8))
    for _ in range(draw(st.integers(0, 12))):
        k = draw(st.integers(0, 7))
        lines.append(sep.join(draw(cell_text).replace("\n", " ").replace("\r", " ")
                              for _ in range(k)))
    text = "\n".join(lines)
    return text.encode(draw(st.sampled_from(["utf-8", "latin-1", "utf-16"])), "replace")


def _physical_lines(raw: bytes) -> int:
    for enc in ("utf-16", "utf-8", "latin-1"):
        try:
            text = raw.decode(enc) if enc != "utf-16" or raw[:2] in (b"\xff\xfe", b"\xfe\xff") \
                else None
        except UnicodeDecodeError:
            continue
        if text is not None:
            return len(text.replace("\r\n", "\n").replace("\r", "\n").split("\n"))
    return 0


@SETTINGS
@given(damaged())
def test_damaged_tables_raise_only_profile_format_error(tmp_path, raw):
    path = tmp_path / "damaged.csv"
    path.write_bytes(raw)
    try:
        tables = read_export(path)
    except ProfileFormatError as err:
        assert str(path) in str(err)
        return
    rows = [r for t in tables for r in t.data["row"].tolist()]
    assert len(rows) == len(set(rows))
    assert all(2 <= r <= _physical_lines(raw) for r in rows)
    assert sum(len(t.data) for t in tables) == len(rows)


@SETTINGS
@given(st.binary(max_size=400))
def test_random_bytes_raise_only_profile_format_error(tmp_path, raw):
    path = tmp_path / "bytes.csv"
    path.write_bytes(raw)
    try:
        read_export(path)
    except ProfileFormatError as err:
        assert str(path) in str(err)


@SETTINGS
@given(st.lists(st.lists(TEXT, min_size=1, max_size=6), min_size=1, max_size=8),
       st.sampled_from([",", ";", "\t"]))
def test_random_text_tables_raise_only_profile_format_error(tmp_path, table, sep):
    path = tmp_path / "text.csv"
    head = ["Point", "SiO2", "MgO"]
    path.write_text("\n".join([sep.join(head)] + [sep.join(r) for r in table]) + "\n",
                    encoding="utf-8")
    try:
        tables = read_export(path)
    except ProfileFormatError as err:
        assert str(path) in str(err)
        return
    assert sum(len(t.data) for t in tables) <= len(table)


@st.composite
def grouped(draw):
    """A comma file with a Sample column of 1-4 traverses, in contiguous runs."""
    n_groups = draw(st.integers(1, 4))
    names = draw(st.lists(st.sampled_from(["ol1", "ol2", "pl-A", "FRL 07", "c3", "x"]),
                          min_size=n_groups, max_size=n_groups, unique=True))
    sizes = [draw(st.integers(2, 6)) for _ in names]
    lines = ["Sample,Point,SiO2,FeO,MgO"]
    rows_by_group = {}
    for name, size in zip(names, sizes, strict=True):
        for k in range(size):
            cells = [name, str(k + 1), "40.81", draw(st.sampled_from(["9.55", "<0.01", "abc"])),
                     "49.42"]
            lines.append(",".join(cells))
            rows_by_group.setdefault(name, []).append(len(lines))
        if draw(st.booleans()):
            lines.append(",Average,40.8,9.5,49.4")
            rows_by_group[name].append(len(lines))
    return "\n".join(lines) + "\n", rows_by_group


@SETTINGS
@given(grouped())
def test_sample_column_split_keeps_every_row_once(tmp_path, case):
    text, rows_by_group = case
    path = tmp_path / "FRL.csv"
    path.write_text(text, encoding="utf-8")
    tables = read_export(path)
    assert [t.data["row"].tolist() for t in tables] == list(rows_by_group.values())
    if len(rows_by_group) > 1:
        assert [t.name for t in tables] == [
            "FRL_" + g.replace(" ", "_") for g in rows_by_group]


@settings(max_examples=25, deadline=None,
          suppress_health_check=[HealthCheck.function_scoped_fixture, HealthCheck.too_slow])
@given(st.lists(st.tuples(st.floats(0, 100, allow_nan=False),
                          st.sampled_from(["<0.01", "n.d.", "", "abc"])),
                min_size=1, max_size=15),
       st.integers(0, 3))
def test_xlsx_rows_keep_sheet_row_numbers_and_values(tmp_path, cells, n_title):
    import openpyxl

    wb = openpyxl.Workbook()
    ws = wb.active
    for k in range(n_title):
        ws.append([f"title line {k}"])
    ws.append(["Point", "SiO2", "FeO", "MgO"])
    for i, (x, junk) in enumerate(cells):
        ws.append([i + 1, x, junk if junk else None, round(x / 2, 3)])
    path = tmp_path / "r.xlsx"
    wb.save(path)
    t = read_export(path)[0]
    first = n_title + 2
    assert t.data["row"].tolist() == list(range(first, first + len(cells)))
    np.testing.assert_allclose(t.data["SiO2"], [x for x, _ in cells], rtol=RTOL_IDENTITY)
    assert t.data["FeO"].isna().all()
