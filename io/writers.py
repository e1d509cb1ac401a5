"""Safe, atomic writers for result files: CSV, JSON and plain text.

Every writer

* writes to a temporary file in the destination folder and moves it into
  place with :func:`os.replace`, so a crash or Ctrl-C never leaves a
  half-written result behind (the old file, if any, stays intact);
* creates missing parent folders;
* refuses to overwrite any of the paths given in ``protect=`` (the input
  files of a run), raising :class:`zoning.exceptions.ZoningError`.

:func:`write_table` writes the result tables (``summary.csv``,
``points.csv``, ``profile.csv``): the header on line 1 and nothing above it,
so ``pandas.read_csv`` and every spreadsheet open them as they are; numbers
with the precision they carry (see :func:`write_table`); integer columns as
integers; and the provenance (settings, versions, command) in a JSON sidecar
``<table>.json`` beside the table.

:func:`write_csv` and :func:`write_table` neutralise spreadsheet formula
injection: a text cell whose first character, after any leading white
space, is ``=``, ``+``, ``-``, ``@`` (or their full-width forms such as
``＝``), a TAB or a carriage return is written with a leading apostrophe
(``'``), so that a spreadsheet shows it as text instead of running it as a
formula. Numeric cells (and text cells that are a plain number such as
``-3.5``) are written unchanged.

:func:`write_xlsx` writes the same tables as an Excel workbook: units in a
second header row, number formats by column, frozen header, and a
``provenance`` sheet.

:func:`safe_name` turns a sample or traverse name into a file or folder name.
"""

from __future__ import annotations

import dataclasses
import datetime as _dt
import hashlib
import json
import math
import os
import re
import tempfile
import unicodedata
from collections.abc import Iterable, Mapping
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd

from zoning.exceptions import ZoningError

__all__ = [
    "write_table",
    "sidecar_path",
    "significant",
    "BAND_DIGITS",
    "write_csv",
    "write_json",
    "write_text",
    "write_xlsx",
    "safe_name",
    "unique_names",
    "standard_metadata",
]

#: Characters that make a spreadsheet treat a cell as a formula (OWASP
#: "CSV injection" guidance lists =, +, -, @, TAB and CR).
_FORMULA_START = ("=", "+", "-", "@", "\t", "\r")

#: A text cell that is just a number (e.g. "-3.5", "+1e-3") is not a formula.
_PLAIN_NUMBER = re.compile(r"[+-]?(\d+(\.\d*)?|\.\d+)([eE][+-]?\d+)?")

#: Windows device names that cannot be used as file names (any extension).
_WINDOWS_RESERVED = frozenset(
    ["CON", "PRN", "AUX", "NUL"]
    + [f"COM{i}" for i in range(1, 10)]
    + [f"LPT{i}" for i in range(1, 10)]
)

#: Longest name returned by :func:`safe_name` [UTF-8 bytes]; file systems
#: allow 255, leaving room for suffixes such as ``_points.csv``.
MAX_NAME_BYTES = 100


def _current_umask() -> int:
    mask = os.umask(0)
    os.umask(mask)
    return mask


_UMASK = _current_umask()


def _check_protected(path: Path, protect: Iterable[str | os.PathLike] | None) -> None:
    """Raise if ``path`` is one of the protected (input) files."""
    if not protect:
        return
    target = os.path.realpath(path)
    for item in protect:
        other = os.path.realpath(os.fspath(item))
        same = other == target
        if not same and os.path.exists(target) and os.path.exists(other):
            try:
                same = os.path.samefile(target, other)
            except OSError:  # pragma: no cover - e.g. permission denied
                same = False
        if same:
            raise ZoningError(
                f"refusing to write '{path}': it is one of the input files of this run "
                f"('{item}'). Choose another output folder (e.g. --out results) so the "
                "input data are never overwritten."
            )


def _atomic_write(path: str | os.PathLike, data: bytes, protect) -> Path:
    """Write ``data`` to ``path`` via a temporary file and :func:`os.replace`."""
    path = Path(path)
    _check_protected(path, protect)
    if path.is_dir():
        raise ZoningError(
            f"cannot write '{path}': a folder of that name exists. "
            "Give a file name, or remove or rename the folder."
        )
    path.parent.mkdir(parents=True, exist_ok=True)
    fd, tmp = tempfile.mkstemp(prefix=f".{path.name}.", suffix=".tmp", dir=path.parent)
    try:
        with os.fdopen(fd, "wb") as handle:
            handle.write(data)
            handle.flush()
            os.fsync(handle.fileno())
        if path.exists():
            mode = path.stat().st_mode & 0o7777
        else:
            mode = 0o666 & ~_UMASK
        os.chmod(tmp, mode)
        os.replace(tmp, path)
    except BaseException:
        try:
            os.unlink(tmp)
        except FileNotFoundError:
            pass
        raise
    return path


def _formula_like(value: str) -> bool:
    """Whether a spreadsheet could run ``value`` as a formula.

    Leading white space (any Unicode space) is skipped, and the first
    character is compared after compatibility normalisation (NFKC), so the
    full-width ``＝＋－＠`` count like ``=+-@``.
    """
    if value.startswith(("\t", "\r")):
        return True
    stripped = value.lstrip()
    if not stripped:
        return False
    first = unicodedata.normalize("NFKC", stripped[0])[:1]
    if stripped[0] in ("\u2212", "\ufe63", "\ufe62"):  # minus sign, small minus/plus
        first = "-"
    if first not in _FORMULA_START:
        return False
    plain = unicodedata.normalize("NFKC", stripped).strip()
    return not _PLAIN_NUMBER.fullmatch(plain)


def _neutralise_cell(value: Any) -> Any:
    r"""Prefix a formula-like text cell with an apostrophe; leave others alone.

    Carriage returns inside text become ``\n`` (the CSV module quotes
    ``\n`` but not a lone ``\r`` when lines end in ``\n``).
    """
    if isinstance(value, str):
        if _formula_like(value):
            value = "'" + value
        if "\r" in value:
            value = value.replace("\r\n", "\n").replace("\r", "\n")
    return value


def _neutralise_frame(df: pd.DataFrame) -> pd.DataFrame:
    """Return a copy of ``df`` with formula-like text cells and headers neutralised."""
    out = df.copy()
    out.columns = range(out.shape[1])  # positional: duplicate headers are allowed
    for j in range(out.shape[1]):
        series = out[j]
        if series.dtype == object or isinstance(series.dtype, pd.StringDtype):
            out[j] = series.astype(object).map(_neutralise_cell)
        elif isinstance(series.dtype, pd.CategoricalDtype):
            out[j] = series.astype(object).map(_neutralise_cell)
    out.columns = [_neutralise_cell(str(c)) for c in df.columns]
    return out


def _clean_meta(text: Any) -> str:
    """One-line text for a metadata header (newlines and controls → spaces)."""
    return re.sub(r"[\x00-\x1f\x7f]+", " ", str(text)).strip()


def standard_metadata(what: str, **extra: Any) -> dict[str, str]:
    """Return the usual metadata header of a result file.

    Parameters
    ----------
    what : str
        One-line description of the file's content.
    **extra
        Further ``key: value`` lines (values converted with :class:`str`).

    Returns
    -------
    dict of str to str
        ``{"content": what, "zoning_version": ..., "written_utc": ..., **extra}``.
        The date makes two otherwise identical files differ in this header
        line only; the numbers are unaffected.
    """
    from zoning import __version__

    meta = {
        "content": what,
        "zoning_version": __version__,
        "written_utc": _dt.datetime.now(_dt.timezone.utc).strftime("%Y-%m-%dT%H:%M:%SZ"),
    }
    meta.update({str(k): str(v) for k, v in extra.items()})
    return meta


def write_csv(
    df: pd.DataFrame,
    path: str | os.PathLike,
    *,
    metadata: Mapping[str, Any] | None = None,
    protect: Iterable[str | os.PathLike] | None = None,
    na_rep: str = "",
) -> Path:
    """Write a table as UTF-8 CSV, atomically and safe to open in a spreadsheet.

    Parameters
    ----------
    df : pandas.DataFrame
        Table to write. The index is not written (put anything needed into a
        column). The frame is not modified.
    path : str or path-like
        Destination file. Missing parent folders are created.
    metadata : mapping, optional
        Written first as ``# key: value`` lines (one per item, newlines in
        values replaced by spaces). Read the file back with
        ``pandas.read_csv(path, comment=None, skiprows=<number of # lines>)``
        or skip lines starting with ``#``; see :func:`standard_metadata`.
    protect : iterable of path-like, optional
        Paths that must never be overwritten (the input files of a run).
    na_rep : str, optional
        Text for missing values (default: empty cell).

    Returns
    -------
    pathlib.Path
        The path written.

    Raises
    ------
    zoning.exceptions.ZoningError
        If ``path`` is one of the protected files or an existing folder.

    Notes
    -----
    Floats are written with full round-trip precision (Python ``repr``), so
    the same numbers always give byte-identical files. Text cells that a
    spreadsheet would run as a formula (first character ``= + - @``, TAB or
    CR) get a leading apostrophe; plain numbers stored as text (``"-3.5"``)
    and numeric columns (negative values included) are left as they are.
    Carriage returns inside text cells are written as line feeds (the cell
    is quoted), so every reader splits the rows the same way.
    """
    safe = _neutralise_frame(df)
    body = safe.to_csv(index=False, na_rep=na_rep, lineterminator="\n")
    header = ""
    if metadata:
        header = "".join(
            f"# {_clean_meta(k)}: {_clean_meta(v)}\n" for k, v in metadata.items()
        )
    return _atomic_write(path, (header + body).encode("utf-8"), protect)


#: Significant digits of best values and 95% bands in the result tables: a
#: band is known to a few per cent at best, so four digits carry all of it.
BAND_DIGITS = 4

#: Significant digits of other floats in the result tables: measured values
#: keep the digits they were typed with, computed ones lose only float noise
#: (``0.9999999999999999`` is written ``1.0``).
DEFAULT_DIGITS = 10


def significant(value: float, digits: int) -> float:
    """Round a float to ``digits`` significant digits [same unit].

    Parameters
    ----------
    value : float
    digits : int
        At least 1.

    Returns
    -------
    float
        NaN and infinities are returned unchanged.

    Examples
    --------
    >>> significant(0.9999999999999999, 10)
    1.0
    >>> significant(12345.678, 4)
    12350.0
    """
    value = float(value)
    if not math.isfinite(value):
        return value
    return float(f"{value:.{int(digits)}g}")


def _float_texts(values: np.ndarray, digits: int, na_rep: str) -> list[str]:
    out = []
    fmt = f".{int(digits)}g"
    for v in values.tolist():
        if v != v:
            out.append(na_rep)
        elif v in (math.inf, -math.inf):
            out.append("inf" if v > 0 else "-inf")
        else:
            out.append(repr(float(format(v, fmt))))
    return out


def _is_integer_dtype(dtype) -> bool:
    return pd.api.types.is_integer_dtype(dtype) and not pd.api.types.is_bool_dtype(dtype)


def _formatted_frame(df: pd.DataFrame, digits: Mapping[str, int] | None, default_digits: int,
                     na_rep: str) -> pd.DataFrame:
    """Neutralised copy of ``df`` with every number as the text it is written as."""
    safe = _neutralise_frame(df)
    digits = dict(digits or {})
    columns = list(df.columns)
    safe.columns = range(len(columns))
    for j, name in enumerate(columns):
        col = df.iloc[:, j]
        dtype = col.dtype
        if pd.api.types.is_bool_dtype(dtype):
            continue
        if _is_integer_dtype(dtype):
            safe[j] = [na_rep if v is pd.NA or v is None else str(int(v))
                       for v in col.astype(object).tolist()]
        elif pd.api.types.is_float_dtype(dtype):
            values = col.to_numpy(dtype=float, na_value=np.nan)
            safe[j] = _float_texts(values, digits.get(str(name), default_digits), na_rep)
    safe.columns = [_neutralise_cell(str(c)) for c in columns]
    return safe


def sidecar_path(path: str | os.PathLike) -> Path:
    """Path of the JSON provenance sidecar of a table (``summary.csv`` -> ``summary.json``)."""
    path = Path(path)
    return path.with_suffix(".json")


def _library_versions() -> dict[str, str]:
    import platform
    from importlib import metadata

    out = {"python": platform.python_version()}
    for dist in ("zoning", "numpy", "scipy", "pandas", "matplotlib", "lmfit", "emcee",
                 "openpyxl"):
        try:
            out[dist] = metadata.version(dist)
        except metadata.PackageNotFoundError:
            out[dist] = ""
    return out


def write_table(
    df: pd.DataFrame,
    path: str | os.PathLike,
    *,
    provenance: Mapping[str, Any] | None = None,
    digits: Mapping[str, int] | None = None,
    default_digits: int = DEFAULT_DIGITS,
    protect: Iterable[str | os.PathLike] | None = None,
    na_rep: str = "",
) -> Path:
    """Write a result table as plain CSV plus a JSON provenance sidecar.

    The CSV has the header on line 1 and no comment lines, so that
    ``pandas.read_csv(path)`` and any spreadsheet open it as a table. Its
    provenance goes into ``<table>.json`` beside it (see
    :func:`sidecar_path`). Both files are written atomically; the table
    first, the sidecar (holding the table's SHA-256) second.

    Parameters
    ----------
    df : pandas.DataFrame
        The table (index not written; not modified).
    path : str or path-like
        Destination ``.csv`` file.
    provenance : mapping, optional
        What the table is and how it was made (e.g. ``content``, ``project``,
        ``settings``, ``command``); plain JSON types. ``zoning_version``,
        ``written_utc``, the library versions and the command line are added.
    digits : mapping of str to int, optional
        Significant digits per float column (e.g. :data:`BAND_DIGITS` for
        best values and bands).
    default_digits : int, optional
        Significant digits of the other float columns (default 10: measured
        values keep every digit they were typed with; float noise such as
        ``0.9999999999999999`` goes).
    protect : iterable of path-like, optional
        Paths never to overwrite (the input files of the run).
    na_rep : str, optional
        Text of missing values (default: empty cell).

    Returns
    -------
    pathlib.Path
        The CSV path.

    Notes
    -----
    Integer columns (numpy or pandas nullable integer dtypes) are written as
    integers, an empty cell where missing. Text cells that a spreadsheet
    could run as a formula get a leading apostrophe (module docstring).
    Same frame, same bytes: the CSV holds no date.
    """
    import sys

    path = Path(path)
    meta_path = sidecar_path(path)
    if meta_path == path:
        raise ZoningError(f"a table must end in .csv; got {str(path)!r}")
    _check_protected(meta_path, protect)
    body = _formatted_frame(df, digits, default_digits, na_rep).to_csv(
        index=False, na_rep=na_rep, lineterminator="\n")
    data = body.encode("utf-8")
    _atomic_write(path, data, protect)
    from zoning import __version__

    record: dict[str, Any] = {
        "table": path.name,
        "sha256": hashlib.sha256(data).hexdigest(),
        "rows": int(len(df)),
        "columns": [str(c) for c in df.columns],
        "zoning_version": __version__,
        "written_utc": _dt.datetime.now(_dt.timezone.utc).strftime("%Y-%m-%dT%H:%M:%SZ"),
        "command": " ".join(["zoning", *sys.argv[1:]]) if sys.argv else "",
        "versions": _library_versions(),
    }
    if digits:
        record["significant_digits"] = {str(k): int(v) for k, v in digits.items()}
    record["significant_digits_other"] = int(default_digits)
    for key, value in (provenance or {}).items():
        record[str(key)] = value
    write_json(meta_path, record, protect=protect)
    return path


def write_text(
    path: str | os.PathLike,
    text: str,
    *,
    protect: Iterable[str | os.PathLike] | None = None,
) -> Path:
    r"""Write UTF-8 text atomically.

    Parameters
    ----------
    path : str or path-like
        Destination file. Missing parent folders are created.
    text : str
        Content; written as UTF-8 with ``\n`` line ends as given.
    protect : iterable of path-like, optional
        Paths that must never be overwritten (the input files of a run).

    Returns
    -------
    pathlib.Path
        The path written.
    """
    return _atomic_write(path, str(text).encode("utf-8"), protect)


def _jsonable(obj: Any) -> Any:
    """Convert ``obj`` to plain JSON types; NaN and infinities become ``None``."""
    if obj is None or isinstance(obj, (bool, str)):
        return obj
    if isinstance(obj, (np.bool_,)):
        return bool(obj)
    if isinstance(obj, (int, np.integer)):
        return int(obj)
    if isinstance(obj, (float, np.floating)):
        value = float(obj)
        return value if math.isfinite(value) else None
    if isinstance(obj, os.PathLike):
        return os.fspath(obj)
    if isinstance(obj, Mapping):
        return {str(k): _jsonable(v) for k, v in obj.items()}
    if dataclasses.is_dataclass(obj) and not isinstance(obj, type):
        return {f.name: _jsonable(getattr(obj, f.name)) for f in dataclasses.fields(obj)}
    if isinstance(obj, np.ndarray):
        return [_jsonable(v) for v in obj.tolist()]
    if isinstance(obj, pd.DataFrame):
        return [_jsonable(rec) for rec in obj.to_dict(orient="records")]
    if isinstance(obj, pd.Series):
        return [_jsonable(v) for v in obj.tolist()]
    if isinstance(obj, (list, tuple, set, frozenset)):
        items = sorted(obj, key=repr) if isinstance(obj, (set, frozenset)) else obj
        return [_jsonable(v) for v in items]
    if isinstance(obj, (_dt.datetime, _dt.date)):
        return obj.isoformat()
    raise TypeError(
        f"cannot write an object of type {type(obj).__name__} to JSON; "
        "convert it to numbers, strings, lists or dicts first."
    )


def write_json(
    path: str | os.PathLike,
    obj: Any,
    *,
    protect: Iterable[str | os.PathLike] | None = None,
) -> Path:
    """Write an object as standard JSON, atomically.

    Parameters
    ----------
    path : str or path-like
        Destination file. Missing parent folders are created.
    obj : object
        Dicts, lists, tuples, strings, numbers, booleans, ``None``, numpy
        scalars and arrays, pandas Series/DataFrames (as lists of records),
        paths, dates and dataclass instances (as dicts), nested freely.
    protect : iterable of path-like, optional
        Paths that must never be overwritten (the input files of a run).

    Returns
    -------
    pathlib.Path
        The path written.

    Notes
    -----
    The output is standard JSON (RFC 8259): NaN and ±infinity, which JSON
    cannot represent, are written as ``null``. Read them back as NaN where a
    number is expected. Keys keep their insertion order; indentation is two
    spaces; the file ends with a newline.
    """
    text = json.dumps(_jsonable(obj), indent=2, ensure_ascii=False, allow_nan=False)
    return _atomic_write(path, (text + "\n").encode("utf-8"), protect)


def safe_name(name: Any) -> str:
    """Turn a sample or traverse name into a safe file or folder name.

    Parameters
    ----------
    name : str
        Any name (converted with :class:`str`).

    Returns
    -------
    str
        A name without path separators, ``..``, leading dots, control or
        shell-awkward characters, not a Windows device name (``CON``,
        ``PRN``, ``AUX``, ``NUL``, ``COM1``-``COM9``, ``LPT1``-``LPT9``), at
        most :data:`MAX_NAME_BYTES` bytes in UTF-8 and never empty
        (``"unnamed"``). The same input always gives the same output. Names
        that had to be shortened end in an 8-character hash of the original,
        so long names that differ only at the end stay distinct.

    Examples
    --------
    >>> safe_name("FRL-07 ol/3 core")
    'FRL-07_ol_3_core'
    >>> safe_name("../../etc")
    'etc'
    >>> safe_name("con")
    '_con'
    """
    original = str(name)
    text = unicodedata.normalize("NFC", original)
    # Replace separators, controls, Windows-forbidden and whitespace characters.
    text = "".join(
        "_"
        if (
            ch in '/\\:*?"<>|'
            or unicodedata.category(ch)[0] in ("C", "Z")
            or ch.isspace()
        )
        else ch
        for ch in text
    )
    text = re.sub(r"_+", "_", text)
    text = re.sub(r"\.{2,}", ".", text)
    text = text.strip("._ -")
    if not text:
        return "unnamed"
    if text.split(".")[0].upper() in _WINDOWS_RESERVED:
        text = "_" + text
    encoded = text.encode("utf-8")
    if len(encoded) > MAX_NAME_BYTES:
        digest = hashlib.sha256(original.encode("utf-8", "surrogatepass")).hexdigest()[:8]
        keep = encoded[: MAX_NAME_BYTES - 9].decode("utf-8", "ignore").rstrip("._ -")
        text = f"{keep}_{digest}" if keep else digest
    return text


def unique_names(names: Iterable[Any]) -> list[str]:
    """Return :func:`safe_name` of each name, made unique in order.

    Parameters
    ----------
    names : iterable of str
        Names, e.g. the traverse names of one file.

    Returns
    -------
    list of str
        Safe names; the second and later names that would clash
        (case-insensitively, as on Windows and macOS file systems) get a
        suffix ``-2``, ``-3``, ... in order of appearance.
    """
    seen: set[str] = set()
    out = []
    for name in names:
        base = safe_name(name)
        candidate, k = base, 1
        while candidate.lower() in seen:
            k += 1
            candidate = f"{base}-{k}"
        seen.add(candidate.lower())
        out.append(candidate)
    return out


def _excel_value(value: Any) -> Any:
    """Return a value openpyxl can store: NaN/None empty, numpy scalars as Python numbers."""
    if value is None or value is pd.NA:
        return None
    if isinstance(value, (np.bool_, bool)):
        return bool(value)
    if isinstance(value, (np.integer, int)):
        return int(value)
    if isinstance(value, (np.floating, float)):
        v = float(value)
        return v if math.isfinite(v) else None
    if isinstance(value, str):
        return _neutralise_cell(value)
    return _neutralise_cell(str(value))


def _provenance_rows(record: Mapping[str, Any], prefix: str = "") -> list[tuple[str, str]]:
    """Flatten a provenance record to (key, text) rows; nested mappings as dotted keys."""
    rows: list[tuple[str, str]] = []
    for key, value in record.items():
        name = f"{prefix}{key}"
        if isinstance(value, Mapping) and value and len(prefix.split(".")) < 3:
            rows += _provenance_rows(value, prefix=name + ".")
        elif isinstance(value, (Mapping, list, tuple)):
            rows.append((name, json.dumps(_jsonable(value), ensure_ascii=False,
                                          allow_nan=False)))
        else:
            rows.append((name, "" if _jsonable(value) is None else str(_jsonable(value))))
    return rows


def write_xlsx(
    df: pd.DataFrame,
    path: str | os.PathLike,
    *,
    units: Mapping[str, str] | None = None,
    number_formats: Mapping[str, str] | None = None,
    provenance: Mapping[str, Any] | None = None,
    digits: Mapping[str, int] | None = None,
    sheet_name: str = "summary",
    protect: Iterable[str | os.PathLike] | None = None,
) -> Path:
    """Write a result table as an Excel workbook with units and a provenance sheet, atomically.

    The first sheet holds the table: column names in row 1, their units in
    row 2, one row per record from row 3, the two header rows and the first
    column frozen, a number format per column. The second sheet,
    ``provenance``, lists what the table is and how it was made (content,
    ``zoning`` version, date, command, library versions, settings), one item
    per row. Text cells that a spreadsheet could run as a formula get a
    leading apostrophe, as in :func:`write_csv`.

    Parameters
    ----------
    df : pandas.DataFrame
        The table (index not written; not modified).
    path : str or path-like
        Destination ``.xlsx``; folders are created.
    units : mapping of str to str, optional
        Unit of each column, written in row 2 ("" where none).
    number_formats : mapping of str to str, optional
        Excel number format of each numeric column (e.g. ``"0.000"``);
        others keep the "General" format.
    provenance : mapping, optional
        Items of the provenance sheet; ``zoning_version``, ``written_utc``,
        the command and the library versions are added.
    digits : mapping of str to int, optional
        Significant digits per float column, as for :func:`write_table`, so
        that the workbook holds the numbers of the CSV table (other floats
        keep :data:`DEFAULT_DIGITS`).
    sheet_name : str, optional
        Name of the table's sheet (default ``"summary"``).
    protect : iterable of path-like, optional
        Paths never to overwrite (the input files of the run).

    Returns
    -------
    pathlib.Path
        The path written.
    """
    import io as _io
    import sys

    from openpyxl import Workbook
    from openpyxl.styles import Alignment, Font
    from openpyxl.utils import get_column_letter

    from zoning import __version__

    path = Path(path)
    units = dict(units or {})
    formats = dict(number_formats or {})
    wb = Workbook()
    ws = wb.active
    ws.title = sheet_name
    columns = [str(c) for c in df.columns]
    ws.append([_neutralise_cell(c) for c in columns])
    ws.append([units.get(c, "") for c in columns])
    bold, italic = Font(bold=True), Font(italic=True, color="555555")
    for cell in ws[1]:
        cell.font = bold
    for cell in ws[2]:
        cell.font = italic
    digits = dict(digits or {})
    keep = [digits.get(c, DEFAULT_DIGITS) for c in columns]
    for record in df.itertuples(index=False, name=None):
        ws.append([significant(v, k) if isinstance(v, (float, np.floating)) else v
                   for v, k in zip(map(_excel_value, record), keep, strict=True)])
    for j, name in enumerate(columns, start=1):
        letter = get_column_letter(j)
        fmt = formats.get(name)
        if fmt:
            for (cell,) in ws.iter_rows(min_row=3, min_col=j, max_col=j):
                if isinstance(cell.value, (int, float)) and not isinstance(cell.value, bool):
                    cell.number_format = fmt
        width = max([len(name), len(units.get(name, ""))]
                    + [min(len(str(v)), 40) for v in df.iloc[:, j - 1].tolist()[:200]])
        ws.column_dimensions[letter].width = min(max(width + 2, 8), 48)
    ws.freeze_panes = "B3"

    record = {
        "content": "",
        "zoning_version": __version__,
        "written_utc": _dt.datetime.now(_dt.timezone.utc).strftime("%Y-%m-%dT%H:%M:%SZ"),
        "command": " ".join(["zoning", *sys.argv[1:]]) if sys.argv else "",
        "table": f"sheet '{sheet_name}': names in row 1, units in row 2, data from row 3",
        "rows": int(len(df)),
        "versions": _library_versions(),
    }
    record.update(dict(provenance or {}))
    prov = wb.create_sheet("provenance")
    prov.append(["item", "value"])
    for cell in prov[1]:
        cell.font = bold
    for key, text in _provenance_rows(record):
        prov.append([key, _neutralise_cell(text)])
    prov.freeze_panes = "A2"
    prov.column_dimensions["A"].width = 34
    prov.column_dimensions["B"].width = 100
    for (cell,) in prov.iter_rows(min_row=2, min_col=2, max_col=2):
        cell.alignment = Alignment(wrap_text=True, vertical="top")
    buffer = _io.BytesIO()
    wb.save(buffer)
    return _atomic_write(path, buffer.getvalue(), protect)
