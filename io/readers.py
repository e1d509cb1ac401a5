"""Read microprobe exports (CSV/TXT in any common dialect, or .xlsx) into raw tables.

:func:`read_export` turns one instrument export into one or more
:class:`RawTable` objects: the rows of the file with recognised columns
renamed to canonical names (:mod:`zoning.io._columns`), numbers parsed, and
every reader-level problem written next to the row it concerns. Nothing is
dropped: every data row of the file, summary rows and repeated header lines
included, appears in :attr:`RawTable.data` with its physical line number, so a
thesis appendix can account for every spot. Mineral recalculation and quality
checks happen later, on these tables.

What is understood
------------------
* delimiters comma, semicolon and tab; decimal point or decimal comma
  (``40,81``), and thousands grouping written with the other separator;
* UTF-8 with or without byte-order mark, UTF-16 with byte-order mark, and
  Windows-1252/Latin-1 (tried in that order, so a ``µm`` header survives);
* title and metadata lines above the header: the header is the first line
  holding at least :data:`MIN_RECOGNISED` recognised column names (or all
  headers named in ``column_map``); a line of units directly below the header
  (``wt%``, ``µm`` ...) is read as units;
* summary rows (average, mean, standard deviation, min, max ...) recognised
  from the point, label or sample cell or the first cell, kept and flagged;
* cells ``<0.01``, ``<LOD``, ``bdl``, ``b.d.l.`` (below detection) and
  ``n.d.``, ``n.a.``, ``--``, ``-``, empty (missing or not determined) read as
  NaN and counted per column in the notes; negative concentrations
  (background-corrected) kept and flagged;
* several traverses in one file: split on an explicit sample/traverse/crystal
  column, or on blank-line separated blocks that start with a name line.

Units of position columns
-------------------------
A unit in the header (``Distance (mm)``, ``X [µm]``, ``distance_mm``) or in a
units line always wins. A distance column without a unit is read as µm. Stage
X/Y columns without a unit are read as mm when the larger of the X and Y spans
in the file is below :data:`STAGE_MM_SPAN_LIMIT` (50), else as µm: stage
exports give millimetres by default, and a traverse measured in µm spans more
than 50 µm. The rule used is stated in the notes.
"""

from __future__ import annotations

import csv
import os
import re
from collections.abc import Mapping
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pandas as pd
from zoning.io import _columns
from zoning.io._columns import CANONICAL, OXIDES

from zoning.exceptions import ProfileFormatError

__all__ = ["RawTable", "read_export", "map_hint", "MIN_RECOGNISED", "STAGE_MM_SPAN_LIMIT",
           "DISTANCE_MM_SPAN_LIMIT"]

#: A line is the header when it holds at least this many recognised column names.
MIN_RECOGNISED = 3
#: Stage X/Y without a unit: read as mm when the larger span is below this value.
STAGE_MM_SPAN_LIMIT = 50.0
#: A distance column without a unit is read as mm when its span is below this value:
#: a traverse is tens to thousands of µm long, i.e. a few mm at most.
DISTANCE_MM_SPAN_LIMIT = 5.0
#: Lines searched for the header.
_HEADER_SEARCH_LINES = 300
_DELIMITERS = ("\t", ";", ",")
_DELIMITER_NAMES = {"\t": "tab", ";": "semicolon ';'", ",": "comma ','"}

_BELOW_DETECTION_RE = (
    r"^(?:<.*|bdl|b\.d\.l\.?|b\.d\.?|bd|below detection(?: limit)?|lod|l\.o\.d\.?|dl|"
    r"u\.d\.l\.?|<?\s*mdl)$"
)
_MISSING_TOKENS = frozenset(
    {"n.d.", "n.d", "nd", "--", "-", "---", "—", "–", "n.a.", "n.a", "na", "n/a",
     "not determined", "not analysed", "not analyzed", "not measured", "nm", "n.m."}
)
_NANINF_TOKENS = frozenset(
    {"nan", "+nan", "-nan", "inf", "+inf", "-inf", "infinity", "+infinity", "-infinity",
     "#num!", "#div/0!", "1.#inf", "-1.#inf", "1.#qnan", "-1.#ind"}
)
_SUMMARY_RE = re.compile(
    r"^\s*(?P<kind>average|avg\.?|mean|median|std\.?\s*dev\.?|st\.?\s*dev\.?|stdev|"
    r"standard deviation|s\.d\.|sd|1\s*sigma|2\s*sigma|1σ|2σ|min\.?|minimum|max\.?|maximum|"
    r"rsd|%\s*rsd|rel\.?\s*sd|range|count|sum)(?:\s*[:(=].*|\s+(?:of|n\s*=).*|\s*)$",
    re.IGNORECASE,
)
_SUMMARY_WORDS = {
    "avg": "average", "mean": "average", "std dev": "standard deviation",
    "stdev": "standard deviation", "st dev": "standard deviation",
    "sd": "standard deviation", "s d": "standard deviation", "min": "minimum",
    "max": "maximum",
}
_COMMA_DECIMAL_RE = r"^[+-]?(?:\d{1,3}(?:\.\d{3})+|\d*),\d+(?:[eE][+-]?\d+)?$"
_POINT_DECIMAL_RE = r"^[+-]?(?:\d{1,3}(?:,\d{3})+|\d*)\.\d+(?:[eE][+-]?\d+)?$"
_NUMERIC_CELL_RE = re.compile(r"^[+-]?(?:\d+[.,]?\d*|[.,]\d+)(?:[eE][+-]?\d+)?$")


@dataclass(frozen=True, eq=False)
class RawTable:
    """One traverse as read from an export, before mineral recalculation.

    Parameters
    ----------
    name : str
        Traverse name: the file stem, or ``"<stem>_<group>"`` when one file
        holds several traverses.
    source : str
        Path of the file, as given.
    data : pandas.DataFrame
        One row per data row of the file, in file order (summary rows and
        repeated header lines included, flagged in ``read_flags``). Columns:
        ``row`` (int, 1-based line number in the file, or sheet row),
        ``point`` (str), ``label`` (str), ``distance_um`` and/or ``x_um``,
        ``y_um`` [µm] when the file has them, the oxides found [wt%],
        ``total_reported`` [wt%], ``fo_sigma``/``an_sigma`` [mol%, 1-sigma]
        when present, and ``read_flags`` (str, "; "-joined reasons, "" if
        none). Numbers are NaN where missing or below detection.
    column_map : dict of str to str
        Canonical name → header actually used.
    notes : tuple of str
        Plain statements made while reading (encoding, delimiter, decimal
        separator, header line, units, per-column below-detection and
        missing counts, ignored columns, how the file was split).
    sample : str, optional
        The sample name written in the file's sample column for these rows
        ("" when the file has no sample column).
    """

    name: str
    source: str
    data: pd.DataFrame
    column_map: dict[str, str]
    notes: tuple[str, ...]
    sample: str = ""

    def __post_init__(self):
        object.__setattr__(self, "column_map", dict(self.column_map))
        object.__setattr__(self, "notes", tuple(self.notes))


# ---------------------------------------------------------------------------
# public entry point


def read_export(
    path: str | os.PathLike,
    *,
    column_map: Mapping[str, str] | None = None,
    sheet: str | int | None = None,
) -> list[RawTable]:
    r"""Read a microprobe export into one raw table per traverse.

    Parameters
    ----------
    path : str or path-like
        CSV/TXT export (any delimiter, decimal style and common encoding) or
        ``.xlsx`` workbook.
    column_map : mapping of str to str, optional
        Canonical name → header in the file, overriding recognition for files
        the rules do not understand. Keys: the oxides (``"SiO2"`` ...),
        ``"point"``, ``"label"``, ``"sample"``, ``"distance_um"``, ``"x_um"``,
        ``"y_um"``, ``"total"``, ``"fo_sigma"``, ``"an_sigma"``. Position
        units are still read from the header text.
    sheet : str or int, optional
        Worksheet name or 0-based index of an ``.xlsx`` file (default: the
        first sheet). Ignored for text files.

    Returns
    -------
    list of RawTable
        One table per traverse found in the file, in file order.

    Raises
    ------
    ProfileFormatError
        Empty, binary or undecodable file; no header line; header but no data
        rows; no oxide columns; duplicated headers; a ``column_map`` key or
        header that does not exist; an unknown sheet.

    Examples
    --------
    >>> import tempfile, pathlib
    >>> p = pathlib.Path(tempfile.mkdtemp()) / "FRL-07_ol1.csv"
    >>> _ = p.write_text("Point;SiO2;FeO;MgO\n1;40,81;9,55;49,42\n", encoding="utf-8")
    >>> t, = read_export(p)
    >>> float(t.data.loc[0, "MgO"]), t.name
    (49.42, 'FRL-07_ol1')
    """
    source = str(path)
    p = Path(path)
    user_map = _check_user_map(column_map, source)
    if not p.exists():
        raise ProfileFormatError(
            f"{source}: file not found; check the path (got {source!r})."
        )
    if p.is_dir():
        raise ProfileFormatError(f"{source}: is a folder, expected an export file.")
    try:
        raw = p.read_bytes()
    except OSError as err:
        raise ProfileFormatError(
            f"{source}: cannot be read ({err.strerror or err}); check that the file exists "
            "and that you may read it."
        ) from err
    if not raw.strip():
        raise ProfileFormatError(
            f"{source}: the file is empty; expected a header line and one row per spot. "
            "Export the traverse again."
        )
    notes: list[str] = []
    kind = _workbook_kind(p, raw)
    if kind:
        records, header_pos, delimiter = _workbook_records(p, source, kind, sheet, notes,
                                                           user_map)
        spans: dict[int, int] = {}
    else:
        if p.suffix.lower() in (".xls", ".numbers"):
            raise ProfileFormatError(
                f"{source}: '{p.suffix}' workbooks are not read; save the sheet as .xlsx, "
                ".ods or CSV and read that file."
            )
        text = _decode(raw, source, notes)
        lines = re.split(r"\r\n|\r|\n", text)
        while lines and not lines[-1].strip():
            lines.pop()
        header_pos, delimiter = _find_header(
            lines[:_HEADER_SEARCH_LINES], source, user_map, delimiter_known=False,
            line_numbers=list(range(1, len(lines) + 1)),
        )
        notes.append(f"delimiter: {_DELIMITER_NAMES[delimiter]}")
        # split from the header on, so that a stray quote in a title line cannot
        # swallow the header
        records, spans = _csv_records(lines[header_pos:], delimiter, first_line=header_pos + 1)
        before = _split_line(lines[header_pos - 1], delimiter) if header_pos > 0 else []
        return _build_tables(records, spans, p, source, user_map, notes,
                             header_line=header_pos + 1, line_before=before, row_word="line",
                             delimiter=delimiter)
    before = records[header_pos - 1][1] if header_pos > 0 else []
    header_line = records[header_pos][0]
    return _build_tables(records[header_pos:], spans, p, source, user_map, notes,
                         header_line=header_line, line_before=before, row_word="sheet row",
                         delimiter="")


# ---------------------------------------------------------------------------
# decoding and splitting


def map_hint(key: str, header: str) -> str:
    """Return how to name a column, spelled for the command line and the project file.

    Parameters
    ----------
    key : str
        Canonical column name (e.g. ``"FeO"``).
    header : str
        Header text in the file.

    Returns
    -------
    str
        E.g. ``--column-map FeO='FeO tot' (project key column_map = { FeO = "FeO tot" })``.
    """
    return (f"--column-map {key}='{header}' (project key column_map = "
            f'{{ {key} = "{header}" }})')


def _check_user_map(column_map: Mapping[str, str] | None, source: str) -> dict[str, str]:
    if column_map is None:
        return {}
    if not isinstance(column_map, Mapping):
        raise ProfileFormatError(
            f"{source}: the column map must be a mapping of column name to header (as "
            f"--column-map FeO='FeO tot' gives), got {type(column_map).__name__}."
        )
    out = {}
    for key, header in column_map.items():
        if key not in CANONICAL:
            raise ProfileFormatError(
                f"{source}: column-map key {key!r} is not a known column; expected one of "
                f"{', '.join(CANONICAL)} (e.g. --column-map FeO='FeO tot')."
            )
        if not isinstance(header, str) or not header.strip():
            raise ProfileFormatError(
                f"{source}: the column map for {key} must be a header text of the file, got "
                f"{header!r}; give e.g. {map_hint(key, '<header>')}."
            )
        out[key] = header.strip()
    if len(set(out.values())) != len(out):
        raise ProfileFormatError(
            f"{source}: the column map gives one header to several columns: {out}; give "
            "each header once."
        )
    return out


def _decode(raw: bytes, source: str, notes: list[str]) -> str:
    if raw.startswith((b"\xff\xfe", b"\xfe\xff")):
        try:
            text = raw.decode("utf-16")
        except UnicodeDecodeError as err:
            raise ProfileFormatError(
                f"{source}: starts like UTF-16 text but cannot be decoded ({err}); save the "
                "export as UTF-8 CSV."
            ) from err
        notes.append("encoding: UTF-16")
        return text.lstrip("\ufeff")
    head = raw[:65536]
    if b"\x00" in head and len(head) >= 8:
        # UTF-16 without a byte-order mark: NUL in every other byte
        for codec, zeros in (("utf-16-le", head[1::2]), ("utf-16-be", head[0::2])):
            if zeros.count(0) > 0.9 * len(zeros):
                try:
                    text = raw.decode(codec)
                except UnicodeDecodeError:
                    break
                notes.append(f"encoding: {codec.upper()} without byte-order mark")
                return text
    if b"\x00" in head:
        raise ProfileFormatError(
            f"{source}: looks like a binary file (contains NUL bytes), not a text export; "
            "export the traverse as CSV or .xlsx."
        )
    if raw.startswith(b"\xef\xbb\xbf"):
        try:
            text = raw[3:].decode("utf-8")
            notes.append("encoding: UTF-8 with byte-order mark")
        except UnicodeDecodeError:
            text = raw[3:].decode("cp1252", errors="strict") if _cp1252_ok(raw[3:]) else \
                raw[3:].decode("latin-1")
            notes.append("encoding: byte-order mark says UTF-8 but the text is not; read "
                         "as Windows-1252/Latin-1")
    else:
        try:
            text = raw.decode("utf-8")
            notes.append("encoding: UTF-8")
        except UnicodeDecodeError:
            if _cp1252_ok(raw):
                text = raw.decode("cp1252")
                notes.append("encoding: not UTF-8; read as Windows-1252 (Latin-1)")
            else:
                text = raw.decode("latin-1")
                notes.append("encoding: not UTF-8; read as Latin-1 (ISO 8859-1)")
    bad = sum(1 for ch in text[:65536] if (ord(ch) < 32 and ch not in "\t\r\n\x0c")
              or 0x7F <= ord(ch) < 0xA0)
    if bad > max(8, 0.01 * min(len(text), 65536)):
        raise ProfileFormatError(
            f"{source}: unreadable text ({bad} control characters after decoding as UTF-8, "
            "Windows-1252 and Latin-1); this is not a text export or uses an unknown "
            "encoding. Save it as UTF-8 CSV."
        )
    return text


def _cp1252_ok(raw: bytes) -> bool:
    try:
        raw.decode("cp1252")
    except UnicodeDecodeError:
        return False
    return True


def _split_line(line: str, delimiter: str) -> list[str]:
    try:
        return next(csv.reader([line], delimiter=delimiter))
    except (StopIteration, csv.Error):
        return line.split(delimiter)


def _csv_records(lines: list[str], delimiter: str, first_line: int):
    """Split lines into records: [(line number, cells)] and {start line: end line}."""
    records: list[tuple[int, list[str]]] = []
    spans: dict[int, int] = {}
    reader = csv.reader(lines, delimiter=delimiter, strict=False)
    start = 1
    off = first_line - 1
    while True:
        try:
            cells = next(reader)
        except StopIteration:
            break
        except csv.Error:
            # a malformed quote; fall back to a plain split of this line
            cells = lines[start - 1].split(delimiter)
        end = reader.line_num
        if end > start:
            spans[start + off] = end + off
        records.append((start + off, cells))
        start = end + 1
    return records, spans


def _workbook_kind(p: Path, raw: bytes) -> str:
    """Return "xlsx", "ods" or "" (a text export)."""
    suffix = p.suffix.lower()
    if suffix in (".xlsx", ".xlsm"):
        return "xlsx"
    if suffix in (".ods",):
        return "ods"
    if raw[:4] == b"PK\x03\x04":
        # an OpenDocument zip starts with its uncompressed "mimetype" member
        return "ods" if b"opendocument.spreadsheet" in raw[:200] else "xlsx"
    return ""


_KIND_NAME = {"xlsx": ".xlsx", "ods": ".ods (OpenDocument)"}


def _workbook_sheets(p: Path, source: str, kind: str) -> dict[str, list[list[str]]]:
    """Every sheet of a workbook as rows of cell texts, in workbook order."""
    # A damaged workbook can fail inside openpyxl/odfpy, zipfile or the XML parser
    # with many exception types; each is turned into one clear error for the user.
    try:
        if kind == "xlsx":
            import openpyxl

            with open(p, "rb") as fh:
                wb = openpyxl.load_workbook(fh, read_only=True, data_only=True)
                try:
                    sheets = {name: _openpyxl_rows(wb[name]) for name in wb.sheetnames}
                finally:
                    wb.close()
        else:
            try:
                import odf  # noqa: F401 - pandas reads .ods through odfpy
            except ImportError as err:  # pragma: no cover - odfpy is a dependency
                raise ProfileFormatError(
                    f"{source}: reading .ods needs the 'odfpy' package; install it "
                    "(pip install odfpy) or save the sheet as .xlsx or CSV."
                ) from err
            sheets = {}
            with pd.ExcelFile(p, engine="odf") as book:
                for name in book.sheet_names:
                    frame = pd.read_excel(book, sheet_name=name, header=None, dtype=object)
                    sheets[str(name)] = [[_xlsx_cell(v) for v in row]
                                         for row in frame.itertuples(index=False)]
    except ProfileFormatError:
        raise
    except Exception as err:  # noqa: BLE001 - see comment above
        raise ProfileFormatError(
            f"{source}: cannot be opened as an {_KIND_NAME[kind]} workbook "
            f"({type(err).__name__}: {err}); save it again as .xlsx or CSV."
        ) from err
    out = {}
    for name, rows in sheets.items():
        for r in rows:
            while r and not r[-1].strip():
                r.pop()
        while rows and not rows[-1]:
            rows.pop()
        width = max((len(r) for r in rows), default=0)
        # a sheet has no ragged rows: pad every row to the used width
        out[name] = [r + [""] * (width - len(r)) for r in rows]
    return out


def _openpyxl_rows(ws) -> list[list[str]]:
    if hasattr(ws, "reset_dimensions") and (
        ws.max_row is None or ws.max_column is None or (ws.max_row, ws.max_column) == (1, 1)
    ):
        # read-only sheets trust the stored dimension, which some writers omit or
        # leave at "A1"; then the sheet is scanned for its real size
        ws.reset_dimensions()
    return [[_xlsx_cell(v) for v in values]
            for values in ws.iter_rows(min_row=1, values_only=True)]


def _sheet_list(names: list[str]) -> str:
    return ", ".join(repr(n) for n in names)


def _workbook_records(p: Path, source: str, kind: str, sheet, notes: list[str],
                      user_map: dict[str, str]):
    """Choose the sheet; return (records, header position, delimiter "")."""
    sheets = _workbook_sheets(p, source, kind)
    names = list(sheets)
    if not names:
        raise ProfileFormatError(f"{source}: the workbook holds no sheets.")
    how = (f"sheet names are {_sheet_list(names)}; give --sheet NAME (project key "
           f'sheet = "NAME"), or the sheet number counted from 0')

    def header_of(name):
        rows = sheets[name]
        if not any(c.strip() for r in rows for c in r):
            raise ProfileFormatError(f"{source}: sheet {name!r} is empty.")
        return _find_header(rows, f"{source} (sheet {name!r})", user_map, delimiter_known=True,
                            line_numbers=list(range(1, len(rows) + 1)))

    if sheet is None:
        chosen, pos, skipped = None, None, []
        first_error = None
        for name in names:
            try:
                pos, _ = header_of(name)
            except ProfileFormatError as exc:
                skipped.append(name)
                first_error = first_error or exc
                continue
            chosen = name
            break
        if chosen is None:
            if len(names) == 1:
                raise first_error
            raise ProfileFormatError(
                f"{source}: no sheet of the workbook has a header line of analyses "
                f"(first problem: {first_error}). The {how}."
            )
        if len(names) > 1:
            others = []
            for name in names[names.index(chosen) + 1:]:
                try:
                    header_of(name)
                except ProfileFormatError:
                    continue
                others.append(name)
            text = (f"sheet: read {chosen!r} (sheet {names.index(chosen) + 1} of {len(names)}: "
                    f"{_sheet_list(names)})")
            if skipped:
                text += f"; {_sheet_list(skipped)} skipped: no header line of analyses"
            if others:
                text += (f"; {_sheet_list(others)} also hold analyses: read them with --sheet "
                         f"NAME (project key sheet)")
            notes.append(text)
        else:
            notes.append(f"sheet: {chosen!r}")
    else:
        if isinstance(sheet, str) and sheet in sheets:
            chosen = sheet
        elif isinstance(sheet, str) and sheet.strip().isdigit():
            sheet = int(sheet.strip())
            chosen = None
        elif isinstance(sheet, str):
            close = [n for n in names if n.strip().lower() == sheet.strip().lower()]
            hint = f" Did you mean {close[0]!r}?" if close else ""
            raise ProfileFormatError(f"{source}: sheet {sheet!r} not found.{hint} The {how}.")
        else:
            chosen = None
        if chosen is None:
            if isinstance(sheet, bool) or not isinstance(sheet, int):
                raise ProfileFormatError(
                    f"{source}: sheet must be a sheet name or number; got {sheet!r}. The {how}."
                )
            if not 0 <= sheet < len(names):
                raise ProfileFormatError(
                    f"{source}: sheet number {sheet} does not exist (numbers count from 0); "
                    f"the workbook has {len(names)} sheets. The {how}."
                )
            chosen = names[sheet]
        notes.append(f"sheet: read {chosen!r}, as asked"
                     + (f" (sheets: {_sheet_list(names)})" if len(names) > 1 else ""))
        pos, _ = header_of(chosen)
    notes.append(f"read from {_KIND_NAME[kind]}; row numbers are sheet rows")
    records = list(enumerate(sheets[chosen], start=1))
    return records, pos, ""


def _xlsx_cell(v) -> str:
    if v is None or v is pd.NaT:
        return ""
    if isinstance(v, bool):
        return str(v)
    if isinstance(v, (int, np.integer)):
        return str(int(v))
    if isinstance(v, (float, np.floating)):
        v = float(v)
        if np.isnan(v):
            return ""
        if np.isfinite(v) and v.is_integer() and abs(v) < 1e15:
            return str(int(v))
        return repr(v)
    return str(v)


# ---------------------------------------------------------------------------
# header


def _score(cells: list[str]) -> tuple[int, int]:
    found = {_columns.recognise(c).canonical for c in cells
             if c.strip() and not _NUMERIC_CELL_RE.match(c.strip())}
    found.discard("")
    return len(found), len(cells)


def _find_header(lines_or_cells, source: str, user_map: dict[str, str], *,
                 delimiter_known: bool, line_numbers: list[int]) -> tuple[int, str]:
    """Return (index of the header line, delimiter)."""
    wanted = {h.lower() for h in user_map.values()}
    best_fallback: tuple[int, int, list[str]] | None = None
    best: tuple[int, int, str] | None = None
    for i, item in enumerate(lines_or_cells[:_HEADER_SEARCH_LINES]):
        if delimiter_known:
            candidates = [("", item)]
        else:
            if not item.strip():
                continue
            candidates = [(d, _split_line(item, d)) for d in _DELIMITERS if d in item]
            if not candidates:
                candidates = [(",", [item])]
        for _, cells in candidates:
            stripped = [c.strip() for c in cells]
            nonempty = sum(1 for c in stripped if c)
            if best_fallback is None or nonempty > best_fallback[1]:
                best_fallback = (i, nonempty, stripped)
        scored = []
        for d, cells in candidates:
            stripped = [c.strip() for c in cells]
            if wanted:
                present = {c.lower() for c in stripped if c}
                if wanted <= present:
                    scored.append((1000, len(cells), d))
                continue
            n_rec, n_cells = _score(stripped)
            if n_rec >= MIN_RECOGNISED:
                scored.append((n_rec, n_cells, d))
        if scored:
            scored.sort(key=lambda t: (t[0], t[1]), reverse=True)
            if wanted:
                return i, scored[0][2]
            if best is None or scored[0][0] > best[0]:
                best = (scored[0][0], i, scored[0][2])
    if best is not None:
        # the first line with the most recognised names: a metadata line that
        # happens to list a few oxides does not beat the real header below it
        return best[1], best[2]
    if best_fallback is None:
        raise ProfileFormatError(f"{source}: the file holds no text lines; nothing to read.")
    i, _, cells = best_fallback
    shown = [c for c in cells if c][:30]
    if wanted:
        try:
            j, d = _find_header(lines_or_cells, source, {}, delimiter_known=delimiter_known,
                                line_numbers=line_numbers)
        except ProfileFormatError:
            pass
        else:
            item = lines_or_cells[j]
            cells = [c.strip() for c in (item if delimiter_known else _split_line(item, d))]
            i, shown = j, [c for c in cells if c][:40]
        lower = {c.lower() for c in cells}
        missing = [h for h in user_map.values() if h.lower() not in lower]
        raise ProfileFormatError(
            f"{source}: headers {missing} named in the column map not found on the header line; "
            f"the header (line {line_numbers[i]}) has {shown}. Use the header texts exactly "
            "as in the file."
        )
    if not delimiter_known:
        for j, line in enumerate(lines_or_cells[:_HEADER_SEARCH_LINES]):
            if _score(line.split())[0] >= MIN_RECOGNISED:
                raise ProfileFormatError(
                    f"{source}: line {line_numbers[j]} looks like a header with columns "
                    "separated by spaces; only comma, semicolon and tab separated text (or "
                    ".xlsx) is read, because spaces inside comments would shift the numbers. "
                    "Save the export as CSV or tab-separated text."
                )
    raise ProfileFormatError(
        f"{source}: no header line found (no line in the first {_HEADER_SEARCH_LINES} has "
        f"{MIN_RECOGNISED} or more recognised column names such as SiO2, MgO, FeO, Point, "
        f"Distance); the line that looks most like a header (line {line_numbers[i]}) has "
        f"{shown}. Say which column is which with {map_hint('SiO2', '<header>')}, one "
        "per column."
    )


def _attach_bare_sigmas(matches, stripped, used, notes) -> None:
    """Give a bare uncertainty header (``±``, ``1s``, ``err``) to the column on its left."""
    by_index = {j: m for _, (j, m) in used.items()}
    for j in sorted(matches):
        m = matches[j]
        if m.ignored_kind != "sigma":
            continue
        left = matches.get(j - 1) or by_index.get(j - 1)
        key = ""
        if left is not None and left.canonical in OXIDES:
            key, what, factor = f"{left.canonical}_sigma", left.canonical, left.scale
        elif left is not None and left.ignored_kind == "reported":
            low = _columns.normalise_header(left.header)
            if low in ("fo", "an"):
                key, what, factor = f"{low}_sigma", low.capitalize(), 1.0
        if not key:
            where = f"after '{left.header}'" if left is not None else "first column"
            matches[j] = _columns.ColumnMatch(
                m.header, "", m.unit, note=f"column '{m.header}' ({where}) ignored: an "
                "uncertainty of a column that is not used", ignored_kind="other")
            continue
        two = m.scale == 0.5
        size = "2-sigma, halved to 1-sigma" if two else "1-sigma"
        matches[j] = _columns.ColumnMatch(
            m.header, key, left.unit, m.scale * (factor if np.isfinite(factor) else 1.0),
            f"column '{m.header}' read as the {size} of {what} (the column on its left, "
            f"'{left.header}')",
            reading=f"{size} uncertainty of {what} (column on its left)")


def _choose_weak_distance(matches, by_canonical, stripped, used, notes, source, row_word,
                          header_line) -> None:
    """Use a lone ``z (µm)``/``d [µm]`` column as the distance, or leave it out."""
    weak = [j for j in by_canonical.get("distance_um", []) if matches[j].weak]
    if not weak:
        return
    strong = [j for j in by_canonical.get("distance_um", []) if not matches[j].weak]
    others = strong + by_canonical.get("x_um", []) + by_canonical.get("y_um", [])
    if others or any(k in used for k in ("distance_um", "x_um", "y_um")):
        for j in weak:
            notes.append(f"column '{stripped[j]}' not used as the distance: the file has "
                         "another position column")
            matches[j] = _columns.ColumnMatch(stripped[j], "", matches[j].unit,
                                              ignored_kind="other")
        by_canonical["distance_um"] = strong
        if not strong:
            del by_canonical["distance_um"]
        return
    if len(weak) > 1:
        names = [stripped[j] for j in weak]
        raise ProfileFormatError(
            f"{source}: columns {names} on {row_word} {header_line} could each be the distance "
            f"along the traverse; choose one with --column-map distance_um='{names[0]}' "
            f"(project key column_map = {{ distance_um = \"{names[0]}\" }})."
        )
    j = weak[0]
    m = matches[j]
    matches[j] = _columns.ColumnMatch(
        m.header, "distance_um", m.unit, m.scale,
        f"column '{m.header}' read as the distance along the traverse (the only position "
        f"column, with a length unit {m.unit})")


def _map_columns(header: list[str], source: str, user_map: dict[str, str],
                 header_line: int, row_word: str = "line"):
    """Return (canonical -> (column index, ColumnMatch), notes)."""
    stripped = [h.strip().lstrip("\ufeff") for h in header]
    notes: list[str] = []
    lower_index: dict[str, list[int]] = {}
    for j, h in enumerate(stripped):
        if h:
            lower_index.setdefault(h.lower(), []).append(j)
    used: dict[str, tuple[int, _columns.ColumnMatch]] = {}
    taken: set[int] = set()
    for key, header_text in user_map.items():
        idx = lower_index.get(header_text.lower())
        if not idx:
            raise ProfileFormatError(
                f"{source}: the column map names {header_text!r} for {key}, which is not a "
                f"header of the file; headers found on {row_word} {header_line}: "
                f"{[h for h in stripped if h]}. Use the header text exactly as in the file."
            )
        if len(idx) > 1:
            raise ProfileFormatError(
                f"{source}: header {header_text!r} appears {len(idx)} times on line "
                f"{header_line} (columns {[j + 1 for j in idx]}); rename the duplicates so "
                "each header is unique."
            )
        match = _columns.recognise(header_text)
        if key in OXIDES:
            scale = match.scale if match.canonical == key else 1.0
            unit = match.unit if match.canonical == key else ""
            m = _columns.ColumnMatch(stripped[idx[0]], key, unit, scale, "")
        elif key in ("distance_um", "x_um", "y_um"):
            _, unit = _columns.split_unit(_columns.normalise_header(header_text))
            m = _columns.ColumnMatch(stripped[idx[0]], key, unit,
                                     _columns.position_scale(unit), "")
        elif key in ("fo_sigma", "an_sigma"):
            m = _columns.ColumnMatch(stripped[idx[0]], key, "",
                                     match.scale if match.canonical == key else 1.0, "")
        else:
            m = _columns.ColumnMatch(stripped[idx[0]], key)
        used[key] = (idx[0], m)
        taken.add(idx[0])
        notes.append(f"column '{stripped[idx[0]]}' read as {key} (column map)")
    matches = {j: _columns.recognise(h) for j, h in enumerate(stripped) if h and j not in taken}
    _attach_bare_sigmas(matches, stripped, used, notes)
    # duplicates among used columns
    by_canonical: dict[str, list[int]] = {}
    for j, m in matches.items():
        if m.canonical:
            by_canonical.setdefault(m.canonical, []).append(j)
    dups = {h: idx for h, idx in lower_index.items() if len(idx) > 1}
    for idx in dups.values():
        if all(_columns.recognise(stripped[j]).ignored_kind == "sigma" for j in idx):
            continue  # bare '±' columns: each belongs to the column on its left
        if any(matches.get(j) is not None and matches[j].canonical for j in idx):
            names = [stripped[j] for j in idx]
            raise ProfileFormatError(
                f"{source}: duplicated header {names[0]!r} on {row_word} {header_line} (columns "
                f"{[j + 1 for j in idx]}); rename the duplicates so each header is unique, "
                f"or pick one with {map_hint('<column>', names[0])}."
            )
    ignored_other, ignored_elements, ignored_reported = [], [], []
    _choose_weak_distance(matches, by_canonical, stripped, used, notes, source, row_word,
                          header_line)
    for canonical, idx in by_canonical.items():
        if canonical in used:
            for j in idx:
                notes.append(f"column '{stripped[j]}' ignored: {canonical} is taken from "
                             f"'{used[canonical][1].header}' (column map)")
            continue
        if len(idx) > 1:
            names = [stripped[j] for j in idx]
            raise ProfileFormatError(
                f"{source}: columns {names} on {row_word} {header_line} all look like "
                f"{canonical}; choose one with {map_hint(canonical, names[0])}, or rename the "
                "other one."
            )
        j = idx[0]
        used[canonical] = (j, matches[j])
        if matches[j].note:
            notes.append(matches[j].note)
    for m in matches.values():
        if m.canonical:
            continue
        if m.ignored_kind == "element":
            ignored_elements.append(m.header)
        elif m.ignored_kind == "reported":
            ignored_reported.append(m.header)
        elif m.note:
            notes.append(m.note)
        else:
            ignored_other.append(m.header)
    if ignored_elements:
        notes.append(f"element wt% columns ignored (not oxides): {ignored_elements}")
    if ignored_reported:
        notes.append(f"columns computed by the instrument ignored (recalculated from the "
                     f"oxides): {ignored_reported}")
    if ignored_other:
        notes.append(f"columns not used: {ignored_other}")
    if not any(k in OXIDES for k in used):
        raise ProfileFormatError(
            f"{source}: no oxide columns recognised on header {row_word} {header_line}; headers "
            f"found: {[h for h in stripped if h]}. Expected oxide wt% columns such as SiO2, "
            f"FeO, MgO, CaO; name them with {map_hint('MgO', '<header>')}, one per column."
        )
    return used, notes


# ---------------------------------------------------------------------------
# numbers

_BELOW_RE = re.compile(_BELOW_DETECTION_RE)
_COMMA_RE = re.compile(_COMMA_DECIMAL_RE)
_POINT_RE = re.compile(_POINT_DECIMAL_RE)
_PLAIN_NUMBER_RE = re.compile(r"^[+-]?\d+(?:[eE][+-]?\d+)?$")


def _classify(cell: str, decimal: str) -> tuple[float, str]:
    """Slow path for a cell the fast numeric parse did not understand.

    Returns the value (NaN when none) and the kind: "num", "minority" (a
    number written with the other decimal separator), "below", "missing",
    "naninf" or "bad".
    """
    if "\u2212" in cell:  # typographic minus sign, e.g. from a word processor
        return _classify(cell.replace("\u2212", "-"), decimal)
    low = cell.lower()
    if low in _MISSING_TOKENS:
        return np.nan, "missing"
    if _BELOW_RE.match(low):
        return np.nan, "below"
    if low in _NANINF_TOKENS:
        return np.nan, "naninf"
    if _COMMA_RE.match(cell):
        return float(cell.replace(".", "").replace(",", ".")), \
            "num" if decimal == "," else "minority"
    if _POINT_RE.match(cell):
        return float(cell.replace(",", "")), "num" if decimal == "." else "minority"
    if _PLAIN_NUMBER_RE.match(cell):
        return float(cell), "num"
    return np.nan, "bad"


@dataclass
class _Parsed:
    values: np.ndarray
    below: np.ndarray
    missing: np.ndarray
    minority: int
    messages: dict[int, str]


def _parse_numbers(cells: np.ndarray, name: str, decimal: str, scale: float,
                   negative_note: str | None) -> _Parsed:
    """Parse one column of stripped cell texts (object array).

    A vectorised fast path (``pandas.to_numeric``) handles ordinary numbers;
    only the cells it cannot read go through :func:`_classify`.
    ``negative_note`` is None when negative values are legitimate.
    """
    n = len(cells)
    if decimal == ",":
        conv = np.array([c.replace(",", ".") if "," in c and "." not in c else c
                         for c in cells], dtype=object)
        minority_fast = np.fromiter(("." in c for c in cells), dtype=bool, count=n)
    else:
        conv = cells
        minority_fast = None
    values = pd.to_numeric(pd.Series(conv, dtype=object), errors="coerce").to_numpy(
        dtype=float, copy=True)
    empty = cells == ""
    below = np.zeros(n, dtype=bool)
    missing = empty.copy()
    messages: dict[int, str] = {}
    minority = 0
    if minority_fast is not None:
        minority = int((minority_fast & np.isfinite(values)).sum())
    for i in np.flatnonzero(np.isnan(values) & ~empty):
        v, kind = _classify(cells[i], decimal)
        values[i] = v
        if kind == "below":
            below[i] = True
        elif kind == "missing":
            missing[i] = True
        elif kind == "naninf":
            messages[int(i)] = f"NaN/inf in {name}"
        elif kind == "bad":
            messages[int(i)] = f"non-numeric value '{cells[i][:40]}' in {name}"
        elif kind == "minority":
            minority += 1
    inf = np.isinf(values)
    for i in np.flatnonzero(inf):
        messages[int(i)] = f"NaN/inf in {name}"
    values[inf] = np.nan
    values = values * scale
    if negative_note is not None:
        for i in np.flatnonzero(values < 0):
            messages[int(i)] = f"negative value in {name} ({values[i]:g}{negative_note}) kept"
    return _Parsed(values, below, missing, minority, messages)


def _detect_decimal(columns: list[np.ndarray]) -> str:
    """Return "," when more number-like cells use a decimal comma than a point."""
    n_comma = n_point = 0
    for col in columns:
        sample = col[:5000]
        n_comma += sum(1 for c in sample if "," in c and "." not in c and c[-1:].isdigit())
        n_point += sum(1 for c in sample if "." in c and "," not in c and c[-1:].isdigit())
    return "," if n_comma > n_point else "."


# ---------------------------------------------------------------------------
# assembly


def _is_number(text: str) -> bool:
    return bool(_NUMERIC_CELL_RE.match(text.strip()))


class _Flags:
    """Reader flags of each output row, in the order they were raised."""

    def __init__(self, n: int):
        self.n = n
        self.by_row: dict[int, list[str]] = {}

    def add(self, i: int, message: str) -> None:
        self.by_row.setdefault(int(i), []).append(message)

    def add_many(self, rows, message: str) -> None:
        for i in rows:
            self.add(i, message)

    def column(self) -> np.ndarray:
        out = np.full(self.n, "", dtype=object)
        for i, msgs in self.by_row.items():
            out[i] = "; ".join(msgs)
        return out


def _build_tables(records, spans, p: Path, source: str, user_map, notes, *,
                  header_line: int, line_before: list[str], row_word: str, delimiter: str):
    header_cells = [c.strip().lstrip("\ufeff") for c in records[0][1]]
    used, col_notes = _map_columns(header_cells, source, user_map, header_line, row_word)
    if header_line > 2:
        notes.append(f"header on {row_word} {header_line}; {row_word}s 1-{header_line - 1} "
                     "above it skipped as title/metadata")
    elif header_line == 2:
        notes.append(f"header on {row_word} 2; {row_word} 1 above it skipped as "
                     "title/metadata")
    else:
        notes.append(f"header on {row_word} 1")
    notes.extend(col_notes)

    body = records[1:]
    if not body:
        raise ProfileFormatError(
            f"{source}: header found on {row_word} {header_line} but no data rows below it; "
            "expected one row per analysed spot."
        )
    n_header = len(header_cells)
    width = max(n_header, max(len(c) for _, c in body))
    line_no = np.fromiter((n for n, _ in body), dtype=np.int64, count=len(body))
    lengths = np.fromiter((len(c) for _, c in body), dtype=np.int64, count=len(body))
    pad = [""] * width
    grid = np.empty((len(body), width), dtype=object)
    grid[:] = [[c.strip() for c in cells] + pad[len(cells):] for _, cells in body]
    nonempty = grid != ""
    n_nonempty = nonempty.sum(axis=1)
    blank = n_nonempty == 0
    kind = np.full(len(body), "data", dtype=object)
    kind[blank] = "blank"

    unnamed = [j for j in range(min(n_header, width)) if not header_cells[j]]
    if unnamed:
        n_cells = int(nonempty[:, unnamed].sum())
        if n_cells:
            notes.append(f"{n_cells} cell(s) in {len(unnamed)} column(s) without a header "
                         "ignored")
    # a units line directly below the header
    units_row: dict[int, str] = {}
    if n_nonempty[0] >= 2 and all(_columns.is_unit_token(c) for c in grid[0] if c):
        units = {j: _columns.unit_of_token(c) for j, c in enumerate(grid[0]) if c}
        # "nm" alone may mean "not measured" as well as nanometres: not a units line
        if any(u != "nm" for u in units.values()):
            units_row = units
            kind[0] = "units"
            notes.append(f"{row_word} {line_no[0]} read as a units line")

    # repeated header lines
    hdr = np.array(header_cells + pad[n_header:], dtype=object)
    is_header = (grid == hdr).all(axis=1) & ~blank

    # block name lines: after a blank line, a single non-numeric cell, then a non-blank line
    prev_blank = np.r_[False, blank[:-1]]
    next_nonblank = np.r_[~blank[1:], False]
    block_names: dict[int, str] = {}
    for i in np.flatnonzero((n_nonempty == 1) & prev_blank & next_nonblank):
        cell = next(c for c in grid[i] if c)
        if not _is_number(cell) and not _SUMMARY_RE.match(cell):
            block_names[int(i)] = cell
            kind[i] = "name"
            if i + 1 < len(body) and is_header[i + 1]:
                kind[i + 1] = "block header"
    is_data = kind == "data"
    if not is_data.any():
        raise ProfileFormatError(
            f"{source}: header found on {row_word} {header_line} but no data rows below it "
            "(only blank or structural lines); expected one row per analysed spot."
        )
    n_blank = int(blank.sum())
    if n_blank:
        notes.append(f"{n_blank} blank {row_word}(s) inside the data skipped (not spots)")
    if block_names:
        notes.append(
            "name lines of blank-line separated blocks: "
            + ", ".join(f"{row_word} {line_no[i]} '{v}'" for i, v in block_names.items())
        )
    if (kind == "block header").any():
        notes.append(f"{int((kind == 'block header').sum())} header line(s) repeated at the "
                     "start of a block skipped")

    idx = np.flatnonzero(is_data)
    n = len(idx)
    rows = line_no[idx]
    S = grid[idx]
    hdr_rows = is_header[idx]
    flags = _Flags(n)
    flags.add_many(np.flatnonzero(hdr_rows), "duplicate header row repeated inside the data")
    for i in np.flatnonzero([r in spans for r in rows]) if spans else ():
        flags.add(i, f"quoted cell spans lines {rows[i]}-{spans[rows[i]]}")
    text_keys = ("point", "label", "exclude", *_columns.NAME_KEYS)
    numeric_cols = [j for k, (j, _) in used.items() if k not in text_keys]
    max_used = max(numeric_cols)
    lens = lengths[idx]
    for i in np.flatnonzero((lens < n_header) & (lens <= max_used) & ~hdr_rows):
        flags.add(i, f"row has only {lens[i]} of {n_header} fields")
    if width > n_header:
        for i in np.flatnonzero((S[:, n_header:] != "").any(axis=1)):
            flags.add(i, f"cells beyond the last of the {n_header} header columns ignored")

    if delimiter == "," and width > n_header:
        too_long = (S[:, n_header:] != "").any(axis=1) & ~hdr_rows
        if too_long.sum() > 0.5 * n:
            raise ProfileFormatError(
                f"{source}: {int(too_long.sum())} of {n} rows have more cells than the "
                f"{n_header} header columns; the file is comma-separated and probably writes "
                "numbers with a decimal comma without quotes, so the numbers cannot be told "
                "apart. Export again with ';' or tab as the separator (or a decimal point)."
            )
    out: dict[str, np.ndarray] = {"row": rows.astype(np.int64)}
    row_text = rows.astype(str).astype(object)
    if "point" in used:
        pt = S[:, used["point"][0]]
        out["point"] = np.where(pt == "", row_text, pt).astype(object)
    else:
        out["point"] = row_text
    out["label"] = (S[:, used["label"][0]].copy() if "label" in used
                    else np.full(n, "", dtype=object))

    # summary rows, recognised from the point, label or sample cell or the first cell
    probe = list(dict.fromkeys(
        [used[k][0] for k in ("point", "label", *_columns.NAME_KEYS) if k in used] + [0]))
    is_summary = np.zeros(n, dtype=bool)
    for j in probe:
        col = S[:, j]
        for i in np.flatnonzero(~is_summary & ~hdr_rows):
            c = col[i]
            if not c or c[0].isdigit():
                continue
            m = _SUMMARY_RE.match(c)
            if m:
                k = re.sub(r"[.\s]+", " ", m.group("kind").lower()).strip()
                flags.add(i, f"summary row ({_SUMMARY_WORDS.get(k, k)}) — not an analysis")
                is_summary[i] = True

    # numbers
    oxide_keys = [k for k in OXIDES if k in used]
    clean = ~hdr_rows
    numeric_keys = [k for k in (*oxide_keys, "distance_um", "x_um", "y_um", "total")
                    if k in used]
    decimal = _detect_decimal([S[clean, used[k][0]] for k in numeric_keys])
    notes.append("decimal separator: " + ("comma" if decimal == "," else "point"))
    minority_total = 0
    counts: dict[str, tuple[np.ndarray, np.ndarray]] = {}

    def parse(key: str, out_name: str, scale: float, negative_note: str | None):
        nonlocal minority_total
        j = used[key][0]
        cells = np.where(hdr_rows, "", S[:, j]).astype(object)
        label = out_name if key in OXIDES else f"'{used[key][1].header}'"
        res = _parse_numbers(cells, label, decimal, scale, negative_note)
        minority_total += res.minority
        for i, msg in res.messages.items():
            flags.add(i, msg)
        out[out_name] = res.values
        counts[out_name] = (res.below, res.missing & clean)

    for key in ("distance_um", "x_um", "y_um"):
        if key not in used:
            continue
        m = used[key][1]
        unit = m.unit or units_row.get(used[key][0], "")
        scale = _columns.position_scale(unit)
        parse(key, key, scale if np.isfinite(scale) else 1.0, None)
        what = "distance" if key == "distance_um" else f"stage {key[0].upper()}"
        if np.isfinite(scale):
            conv = ", converted to µm" if unit != "µm" else ""
            notes.append(f"{what} from '{m.header}' in {unit}{conv}")
            used[key] = (used[key][0], _columns.ColumnMatch(m.header, key, unit, scale))
        elif key == "distance_um":
            finite = out[key][np.isfinite(out[key])]
            span = float(finite.max() - finite.min()) if finite.size else 0.0
            if finite.size > 1 and 0 < span < DISTANCE_MM_SPAN_LIMIT:
                out[key] = out[key] * 1000.0
                unit = "mm"
                notes.append(f"distance from '{m.header}': no unit given; span {span:g} < "
                             f"{DISTANCE_MM_SPAN_LIMIT:g}, so read as mm and converted to µm "
                             "(write the unit in the header to say otherwise)")
            else:
                unit = "µm"
                notes.append(f"distance from '{m.header}': no unit given; span {span:g} >= "
                             f"{DISTANCE_MM_SPAN_LIMIT:g}, so read as µm")
            used[key] = (used[key][0], _columns.ColumnMatch(
                m.header, key, unit, _columns.position_scale(unit),
                reading=f"distance along the traverse [{unit}: no unit in the header, read "
                        f"as {unit} because the values span {span:g}]"))
    stage = [k for k in ("x_um", "y_um") if k in used and not np.isfinite(used[k][1].scale)]
    if stage:
        spans_xy = [np.nanmax(out[k]) - np.nanmin(out[k]) for k in stage
                    if np.isfinite(out[k]).any()]
        span = float(max(spans_xy)) if spans_xy else 0.0
        heads = "/".join(f"'{used[k][1].header}'" for k in stage)
        unit = "mm" if span < STAGE_MM_SPAN_LIMIT else "µm"
        for k in stage:
            used[k] = (used[k][0], _columns.ColumnMatch(
                used[k][1].header, k, unit, _columns.position_scale(unit),
                reading=f"stage {k[0].upper()} [{unit}: no unit in the header, read as {unit} "
                        f"because the largest X/Y span is {span:g}]"))
        if span < STAGE_MM_SPAN_LIMIT:
            for k in stage:
                out[k] = out[k] * 1000.0
            notes.append(f"stage {heads}: no unit given; largest span {span:g} < "
                         f"{STAGE_MM_SPAN_LIMIT:g}, so read as mm and converted to µm")
        else:
            notes.append(f"stage {heads}: no unit given; largest span {span:g} >= "
                         f"{STAGE_MM_SPAN_LIMIT:g}, so read as µm")
    for key in oxide_keys:
        m = used[key][1]
        scale = m.scale
        if not m.unit and units_row.get(used[key][0]) == "ppm":
            scale = 1e-4
            notes.append(f"{key}: the units line says ppm; converted to wt%")
        parse(key, key, scale, " wt%, background-corrected")
    if "total" in used:
        parse("total", "total_reported", 1.0, " wt%")
    for key in ("fo_sigma", "an_sigma", *_columns.SIGMA_KEYS):
        if key in used:
            scale = used[key][1].scale
            if (key in _columns.SIGMA_KEYS and not used[key][1].unit
                    and units_row.get(used[key][0]) == "ppm"):
                scale = scale * 1e-4
            parse(key, key, scale, " (an uncertainty cannot be negative)")
    if "exclude" in used:
        _flag_excluded(S[:, used["exclude"][0]], hdr_rows | is_summary,
                       used["exclude"][1].header, flags, notes)
    if oxide_keys:
        no_oxide = np.ones(n, dtype=bool)
        for key in oxide_keys:
            no_oxide &= np.isnan(out[key]) & (S[:, used[key][0]] == "")
        for i in np.flatnonzero(no_oxide & ~hdr_rows & ~is_summary):
            flags.add(i, "no oxide values in this row")
    if minority_total:
        own, other = ("point", "comma") if decimal == "." else ("comma", "point")
        notes.append(f"{minority_total} cell(s) written with a decimal {other} although the "
                     f"file uses a decimal {own}; read with their own separator")
    out["read_flags"] = flags.column()

    order = ["row", "point", "label", "distance_um", "x_um", "y_um", *OXIDES,
             "total_reported", "fo_sigma", "an_sigma", *_columns.SIGMA_KEYS, "read_flags"]
    frame = pd.DataFrame({k: out[k] for k in order if k in out})
    for k in ("point", "label", "read_flags"):
        frame[k] = frame[k].astype(object)

    # traverses: blank-line blocks with name lines, then sample / crystal / traverse columns
    split_notes: list[str] = []
    block_of_row = np.cumsum(kind == "name")[idx]
    if block_names:
        labels = [_first_block_name(line_before)] + [block_names[i] for i in
                                                     sorted(block_names)]
        block_text = np.array(labels, dtype=object)[block_of_row]
        split_notes.append(f"split into {len(set(block_of_row.tolist()))} blank-line "
                           "separated blocks by their name lines")
    else:
        block_text = np.full(n, "", dtype=object)
    levels = [block_text]
    for key in _columns.NAME_KEYS:
        if key not in used:
            levels.append(np.full(n, "", dtype=object))
            continue
        column = S[:, used[key][0]]
        values, note, spot_names = _name_groups(column, hdr_rows | is_summary,
                                                used[key][1].header, key)
        split_notes.append(note)
        levels.append(values)
        if spot_names and "label" not in used:
            frame["label"] = np.where(hdr_rows, "", column).astype(object)
    # Group rows by their name levels in file order with a plain dict: pandas
    # before 2.3 hashes object strings as C strings, so keys joined by NUL
    # bytes would all fall into one group there.
    rows_of: dict[str, list[int]] = {}
    for i, parts in enumerate(zip(*levels, strict=True)):
        rows_of.setdefault("\x00".join(parts), []).append(i)
    groups = {key: np.asarray(pos, dtype=np.intp) for key, pos in rows_of.items()}
    column_map_out = {k: m.header for k, (_, m) in used.items()}
    group_parts = {key: key.split("\x00") for key in groups}
    names = _traverse_names(group_parts, p.stem)
    if len(groups) == 1 and "distance_um" in out:
        split_notes.extend(_restart_note(out["distance_um"], rows, row_word))
    readings = _column_readings(header_cells, used)

    tables = []
    for key, positions in groups.items():
        mask = np.zeros(n, dtype=bool)
        mask[positions] = True
        parts = [x for x in group_parts[key] if x]
        tnotes = list(notes) + split_notes
        if len(groups) > 1:
            tnotes.append(f"this traverse: {names[key]!r}, rows of "
                          f"{' / '.join(repr(x) for x in parts)} ({int(mask.sum())} rows)")
        tnotes.extend(_count_notes(counts, mask))
        tnotes.extend(readings)
        # levels: block, then _columns.NAME_KEYS (sample, crystal, traverse)
        tables.append(RawTable(names[key], source, frame[mask].reset_index(drop=True),
                               column_map_out, tuple(tnotes),
                               sample=str(group_parts[key][1]).strip()))
    return tables


def _traverse_names(group_parts: dict[str, list[str]], stem: str) -> dict[str, str]:
    """Name each group by the names written in the file.

    The innermost name level the file has (traverse, else crystal, else
    sample, else block) names a traverse as written; outer levels that vary
    are put in front, joined by a space, only where needed to tell two
    traverses apart. One group takes the traverse or crystal name written in
    the file, else the file stem.
    """
    keys = list(group_parts)
    if len(keys) == 1:
        parts = group_parts[keys[0]]
        # levels: block, sample, crystal, traverse
        for value in (parts[3], parts[2]):
            if value:
                return {keys[0]: value}
        return {keys[0]: stem}
    n_levels = len(next(iter(group_parts.values())))
    present = [lv for lv in range(n_levels) if any(group_parts[k][lv] for k in keys)]
    varying = [lv for lv in range(n_levels)
               if len({group_parts[k][lv] for k in keys}) > 1]
    if present:
        chosen = [present[-1]]
        outer = [lv for lv in reversed(varying) if lv != present[-1]]
        for extra in [None, *outer]:
            if extra is not None:
                chosen = sorted([*chosen, extra])
            names = {k: " ".join(group_parts[k][lv] for lv in chosen if group_parts[k][lv])
                     for k in keys}
            if len(set(names.values())) == len(keys) and all(names.values()):
                return names
    names = {k: " ".join(x for x in group_parts[k] if x) or stem for k in keys}
    out, seen = {}, set()
    for k in keys:
        name, i = names[k], 2
        while name in seen:
            name, i = f"{names[k]} ({i})", i + 1
        seen.add(name)
        out[k] = name
    return out


def _restart_note(distance: np.ndarray, rows: np.ndarray, row_word: str) -> list[str]:
    """Say so when the distance falls back to its start: the file may hold several traverses."""
    d = np.asarray(distance, dtype=float)
    ok = np.isfinite(d)
    if ok.sum() < 4:
        return []
    dd, rr = d[ok], rows[ok]
    with np.errstate(over="ignore", invalid="ignore"):  # absurd values such as 1e308
        span = dd.max() - dd.min()
        steps = np.diff(dd)
    if not (np.isfinite(span) and span > 0):
        return []
    # a fall of more than half the span in one step, in an otherwise increasing column
    falls = np.flatnonzero(steps < -0.5 * span)
    if not falls.size or (steps < 0).sum() > falls.size + 0.1 * steps.size:
        return []
    where = ", ".join(f"{row_word} {rr[i + 1]}" for i in falls[:5])
    return [f"the distance falls back to its start at {where}: the file may hold "
            f"{falls.size + 1} traverses one after the other; name the column that tells them "
            "apart with --column-map traverse='<header>' (project key column_map = "
            '{ traverse = "<header>" })']


_FALSY = frozenset({"", "0", "0.0", "no", "n", "false", "f", "ok", "good", "keep", "none",
                    "nan", "-", "--", "use", "kept"})
_PLAIN_TRUE = frozenset({"1", "1.0", "yes", "y", "true", "t", "x", "*", "bad", "exclude",
                         "excluded", "ignore", "ignored", "reject", "rejected", "omit",
                         "omitted", "skip", "discard", "discarded"})


def _flag_excluded(cells: np.ndarray, skip: np.ndarray, header: str, flags, notes) -> None:
    """Flag every spot whose cell in a bad-spot column holds a true value."""
    n_marked = 0
    for i, cell in enumerate(cells):
        text = str(cell).strip()
        if skip[i] or text.lower() in _FALSY:
            continue
        if text.lower() in _PLAIN_TRUE:
            flags.add(i, f"marked to leave out in the file (column '{header}')")
        else:
            flags.add(i, f"marked to leave out in the file (column '{header}': "
                         f"'{text[:60]}')")
        n_marked += 1
    notes.append(f"column '{header}' marks spots to leave out: {n_marked} marked, flagged "
                 "with the reason (empty, 0, no, false, ok mean keep)")


def _column_readings(header_cells: list[str], used) -> list[str]:
    """One line per column saying how it was read (for notes.txt)."""
    by_index = {j: (k, m) for k, (j, m) in used.items()}
    lines = ["how each column was read:"]
    for j, h in enumerate(header_cells):
        if not h:
            continue
        if j in by_index:
            key, m = by_index[j]
            if key in ("distance_um", "x_um", "y_um") and m.reading:
                text = m.reading
            elif key in ("distance_um", "x_um", "y_um"):
                what = {"distance_um": "distance along the traverse", "x_um": "stage X",
                        "y_um": "stage Y"}[key]
                unit = m.unit or "no unit"
                conv = "" if m.unit == "µm" else ", converted to µm"
                text = f"{what} [{unit}{conv}]"
            else:
                text = m.reading or key
            lines.append(f"  '{h}' -> {text}")
        else:
            m = _columns.recognise(h)
            why = {
                "element": "not used (element wt%, not an oxide)",
                "reported": "not used (computed by the instrument; recalculated from the "
                            "oxides)",
                "sigma": "not used (an uncertainty of a column that is not used)",
            }.get(m.ignored_kind, "not used")
            prefix = f"column '{m.header}' "
            if m.note.startswith(prefix) and m.ignored_kind in ("unit", "other"):
                why = m.note[len(prefix):]
            lines.append(f"  '{h}' -> {why}")
    return lines


def _name_groups(values: np.ndarray, skip: np.ndarray, header: str,
                 what: str) -> tuple[np.ndarray, str, bool]:
    """Group value per row from a sample/crystal/traverse column, a note, spot names?.

    Rows whose cell is empty (and summary or repeated-header rows) join the
    group of the row above (the first rows join the first group). The values
    are used exactly as written: two different values are never merged
    (``prof 1`` and ``prof 2`` stay two traverses). Only when every row has
    its own value (the column holds spot names such as ``FRL-07a_03``) is a
    trailing spot number after a separator stripped, and the file split by
    the prefixes if that gives groups of several spots; otherwise such a
    column is read as spot names and does not split the file.
    """
    n = len(values)
    vals = np.where(skip, "", values).astype(object)
    has = vals != ""
    none = np.full(n, "", dtype=object)
    if not has.any():
        return none, f"{what} column '{header}' is empty; file not split", False
    last = np.maximum.accumulate(np.where(has, np.arange(n), -1))
    last[last < 0] = int(np.argmax(has))
    v = vals[last]
    uniq = list(dict.fromkeys(v.tolist()))
    if len(uniq) == 1:
        return (v, f"{what} column '{header}' holds one value {str(uniq[0])!r}; file not "
                "split", False)
    how = "its values as written"
    n_spots = int(has.sum())
    if n_spots >= 3 and len(set(vals[has].tolist())) == n_spots:
        prefix = np.array([re.sub(r"[\s_\-.:/#]+\d+$", "", x) for x in v], dtype=object)
        stripped = prefix != v
        puniq = list(dict.fromkeys(prefix.tolist()))
        if stripped.all() and (prefix != "").all() and 1 <= len(puniq) < n_spots:
            if len(puniq) == 1:
                return (prefix, f"{what} column '{header}' holds spot names of one "
                        f"{what} {puniq[0]!r}; file not split", True)
            v, uniq = prefix, puniq
            how = "the spot names without their trailing spot number (every row has its own name)"
        else:
            return none, (
                f"{what} column '{header}' has a different value on every row: read as spot "
                "names, file not split (name the column that tells traverses apart with "
                "--column-map traverse='<header>')"
            ), True
    runs = int(1 + (v[1:] != v[:-1]).sum())
    note = f"split on {what} column '{header}' by {how} into {len(uniq)} groups"
    if runs != len(uniq):
        note += (f" (values not contiguous: {runs} runs; the rows of each value are gathered "
                 "in file order)")
    return v, note, how != "its values as written"


def _first_block_name(line_before: list[str]) -> str:
    cells = [c.strip() for c in line_before if c.strip()]
    if len(cells) == 1 and not _is_number(cells[0]):
        return cells[0]
    return "1"


def _count_notes(counts, mask) -> list[str]:
    out = []
    for name, (below, missing) in counts.items():
        b = int(below[mask].sum())
        m = int(missing[mask].sum())
        parts = []
        if b:
            parts.append(f"{b} below detection")
        if m:
            parts.append(f"{m} missing/not determined")
        if parts:
            out.append(f"{name}: " + ", ".join(parts) + " (NaN)")
    return out
