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
        # each traverse keeps the name written in the file
        assert [t.name for t in tables] == list(rows_by_group)


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


# ---------------------------------------------------------------------------
# header recognition and splitting of long tables

from zoning.io._columns import OXIDES as _OXIDES  # noqa: E402
from zoning.io._columns import element_ppm_factor, recognise  # noqa: E402

_OXIDE_UNITS = ["", " wt%", " (wt%)", " [wt.%]", "(wt%)", "_wt%", " (wt. %)"]


@st.composite
def oxide_header(draw):
    """An oxide header as typed by people: case, digit 0 for O, unit, total-iron marker."""
    oxide = draw(st.sampled_from(_OXIDES))
    text = oxide
    if draw(st.booleans()):
        text = text.replace("O", "0")
    text = draw(st.sampled_from([text, text.lower(), text.upper()]))
    if oxide == "FeO" and draw(st.booleans()):
        text += draw(st.sampled_from(["T", "t", "*", "(tot)", " total", "(T)"]))
    return oxide, text + draw(st.sampled_from(_OXIDE_UNITS))


@settings(max_examples=300, deadline=None)
@given(oxide_header())
def test_oxide_headers_in_any_typed_spelling_are_recognised(case):
    oxide, header = case
    m = recognise(header)
    assert (m.canonical, m.scale) == (oxide, 1.0)
    # no oxide name and no unit here contains the digit 0, so a 0 is a typed letter O
    assert ("digit 0" in m.reading) == ("0" in header)


_ELEMENTS = {"Ni": ["58", "60", "62"], "Sr": ["86", "88"], "Mg": ["24", "25", "26"],
             "Ba": ["137", "138"], "Ti": ["47", "49"], "Mn": ["55"], "Ca": ["43", "44"]}


@st.composite
def ppm_header(draw):
    """Laser-ablation style element headers in ppm: Sr88 (ppm), 88Sr ppm, Ni_ppm ..."""
    element = draw(st.sampled_from(sorted(_ELEMENTS)))
    mass = draw(st.sampled_from(["", *_ELEMENTS[element]]))
    name = draw(st.sampled_from([element + mass, mass + element]))
    if mass and draw(st.booleans()):
        name = f"{element} {mass}" if name.startswith(element) else name
    unit = draw(st.sampled_from([" (ppm)", " ppm", "_ppm", " [ppm]", " (µg/g)", " ug/g"]))
    return element, name + unit


@settings(max_examples=200, deadline=None)
@given(ppm_header())
def test_element_ppm_headers_become_the_oxide_with_the_molar_mass_factor(case):
    element, header = case
    m = recognise(header)
    assert m.canonical != ""
    assert math.isclose(m.scale, element_ppm_factor(element), rel_tol=RTOL_IDENTITY)
    assert f"{element} ppm" in m.reading and m.canonical in m.reading


@st.composite
def sigma_header(draw):
    target = draw(st.sampled_from(["Fo", "An", "FeO", "MgO", "CaO", "Na2O", "NiO"]))
    k = draw(st.sampled_from(["", "1", "2"]))
    word = draw(st.sampled_from(["σ", "sigma", "sd", "err", "error", "±", "unc",
                                 "uncertainty"]))
    if k and word not in ("σ", "sigma", "sd"):
        word = draw(st.sampled_from(["σ", "sigma", "sd", "s"]))
    form = draw(st.sampled_from(["prefix", "suffix"]))
    if form == "prefix" and word != "s":
        header = f"{k}{word}({target})"
    else:
        word = "s" if word == "s" and not k else word
        sep = draw(st.sampled_from([" ", "_", ""]))
        header = f"{target}{sep}{k}{word}" if (k or word != "s") else f"{target} 1s"
    return target, 2 if k == "2" else 1, header


@settings(max_examples=300, deadline=None)
@given(sigma_header())
def test_uncertainty_headers_feed_the_sigma_of_their_quantity(case):
    target, k, header = case
    m = recognise(header)
    key = f"{target.lower()}_sigma" if target in ("Fo", "An") else f"{target}_sigma"
    assert m.canonical == key, header
    assert m.scale == (0.5 if k == 2 else 1.0), header


_TRAVERSE_NAMES = ["prof 1", "prof 2", "prof 12", "Prof 1", "prof_1", "ol3-A", "line 2",
                   "FRL-07 ol1", "1", "2"]


@st.composite
def long_table(draw):
    """A long table with a traverse column (any header spelling) and maybe a sample column."""
    names = draw(st.lists(st.sampled_from(_TRAVERSE_NAMES), min_size=1, max_size=5,
                          unique=True))
    samples = draw(st.sampled_from([None, ["FRL-21"], ["FRL-21", "FRL-22"]]))
    groups = [(s, n) for s in (samples or [""]) for n in names]
    sizes = [draw(st.integers(1, 5)) for _ in groups]
    if max(sizes) < 2:
        sizes[0] = 2
    order = [g for g, size in zip(groups, sizes, strict=True) for _ in range(size)]
    if draw(st.booleans()):
        order = draw(st.permutations(order))
    header = draw(st.sampled_from(["Profile", "profile_name", "TRANSECT", "Traverse ID",
                                   "Line", "Spot set name", "Grain"]))
    cols = (["Sample"] if samples else []) + [header, "Distance (µm)", "SiO2", "FeO", "MgO"]
    lines = [",".join(cols)]
    for i, (s, n) in enumerate(order):
        lines.append(",".join(([s] if samples else []) + [n, str(10 * (i % 7)), "40.81",
                                                          "9.55", "49.42"]))
    return "\n".join(lines) + "\n", order


@SETTINGS
@given(long_table())
def test_long_tables_split_on_every_distinct_name_and_never_merge(tmp_path, case):
    text, order = case
    path = tmp_path / "long.csv"
    path.write_text(text, encoding="utf-8")
    tables = read_export(path)
    distinct = list(dict.fromkeys(order))
    assert len(tables) == len(distinct)
    assert len({t.name for t in tables}) == len(tables)
    for t, group in zip(tables, distinct, strict=True):
        expected_rows = [i + 2 for i, g in enumerate(order) if g == group]
        assert t.data["row"].tolist() == expected_rows
        # the name is the one written in the file (with the sample in front if needed)
        assert group[1] in t.name or (len(distinct) == 1 and t.name == group[1])
    assert sorted(r for t in tables for r in t.data["row"]) == list(range(2, len(order) + 2))
