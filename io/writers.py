"""Safe, atomic writers for result files: CSV, JSON and plain text.

Every writer

* writes to a temporary file in the destination folder and moves it into
  place with :func:`os.replace`, so a crash or Ctrl-C never leaves a
  half-written result behind (the old file, if any, stays intact);
* creates missing parent folders;
* refuses to overwrite any of the paths given in ``protect=`` (the input
  files of a run), raising :class:`zoning.exceptions.ZoningError`.

:func:`write_csv` also neutralises spreadsheet formula injection: a text
cell that begins with ``=``, ``+``, ``-``, ``@``, a TAB or a carriage return
is written with a leading apostrophe (``'``), so that a spreadsheet shows it
as text instead of running it as a formula. Numeric cells (and text cells
that are a plain number such as ``-3.5``) are written unchanged.

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
    "write_csv",
    "write_json",
    "write_text",
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


def _neutralise_cell(value: Any) -> Any:
    r"""Prefix a formula-like text cell with an apostrophe; leave others alone.

    Carriage returns inside text become ``\n`` (the CSV module quotes
    ``\n`` but not a lone ``\r`` when lines end in ``\n``).
    """
    if isinstance(value, str):
        if value.startswith(_FORMULA_START) and not _PLAIN_NUMBER.fullmatch(value):
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
