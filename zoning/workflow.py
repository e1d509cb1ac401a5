"""Project files and the batch engine (application layer).

A *project file* (TOML) lists the traverses of a thesis and the settings used
to fit them::

    [defaults]
    mineral = "olivine"
    melt = { FeO = 9.5 }      # reference melt [wt%]
    kd = 0.30
    seed = 1

    [samples."FRL-07 ol1"]
    file = "FRL-07_ol1.csv"   # relative to the project file
    range = "0:180"           # any option of `zoning fit`, overriding [defaults]

The option names are exactly those of ``zoning fit`` with underscores for
dashes; :data:`FIT_OPTIONS` and :data:`READ_OPTIONS` map them onto the keyword
arguments of :func:`zoning.fitting.fit_traverse` and
:func:`zoning.io.read_traverses` (the one place where that mapping lives).

:func:`run_batch` fits every sample on any :class:`concurrent.futures.Executor`
(a process pool by default, or a Dask ``distributed`` client's executor for a
cluster). One bad file or failed fit never stops the batch: it is listed in
the summary with its error. Each sample folder is written into a temporary
folder and moved into place in one step, so a killed run never leaves a
half-written result; a fingerprint (hash of the input file bytes, the resolved
settings and the ``zoning`` version) stored with each result lets a rerun skip
the samples whose inputs and settings are unchanged.
"""

from __future__ import annotations

import concurrent.futures as cf
import difflib
import hashlib
import json
import math
import os
import shutil
import signal
import sys
import time
import traceback
import warnings
from collections.abc import Callable, Iterable, Mapping
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd

from zoning.exceptions import ProjectError, ZoningError
from zoning.traverse import MINERALS

if sys.version_info >= (3, 11):
    import tomllib
else:  # pragma: no cover - Python 3.10
    import tomli as tomllib

__all__ = [
    "FIT_OPTIONS",
    "READ_OPTIONS",
    "JOINT_OPTIONS",
    "OUTPUT_OPTIONS",
    "EXPORT_SUFFIXES",
    "SampleJob",
    "Project",
    "SampleOutcome",
    "BatchResult",
    "read_project",
    "project_from_folder",
    "resolve_options",
    "run_sample",
    "run_batch",
    "fingerprint",
]

#: File suffixes taken as microprobe exports when a folder is given.
EXPORT_SUFFIXES = (".csv", ".txt", ".tsv", ".xlsx")


def _as_float(key: str, value: Any) -> float:
    if isinstance(value, bool) or not isinstance(value, (int, float)):
        raise TypeError("a number")
    out = float(value)
    if not math.isfinite(out):
        raise TypeError("a finite number")
    return out


def _as_int(key: str, value: Any) -> int:
    if isinstance(value, bool) or not isinstance(value, int):
        raise TypeError("a whole number")
    return int(value)


def _as_bool(key: str, value: Any) -> bool:
    if not isinstance(value, bool):
        raise TypeError("true or false")
    return value


def _as_str(key: str, value: Any) -> str:
    if not isinstance(value, str):
        raise TypeError("a text string in quotes")
    return value


def _as_mineral(key: str, value: Any) -> str:
    if not isinstance(value, str) or value.lower() not in MINERALS:
        raise TypeError(f"one of {', '.join(repr(m) for m in MINERALS)}")
    return value.lower()


def _as_melt(key: str, value: Any) -> dict[str, float]:
    if not isinstance(value, Mapping) or not value:
        raise TypeError("a table of oxide = wt%, e.g. melt = { FeO = 9.5 }")
    out = {}
    for oxide, wt in value.items():
        if isinstance(wt, bool) or not isinstance(wt, (int, float)) or not math.isfinite(wt):
            raise TypeError(f"a number of wt% for every oxide (got {oxide} = {wt!r})")
        out[str(oxide)] = float(wt)
    return out


def _as_range(key: str, value: Any) -> tuple[float, float]:
    """Accept "A:B" (as on the command line) or [A, B] [µm]."""
    parts: list[Any]
    if isinstance(value, str):
        parts = value.split(":")
        if len(parts) != 2:
            raise TypeError('"A:B" in µm from the core, e.g. "0:150"')
        try:
            parts = [float(p) if p.strip() else (0.0 if i == 0 else math.inf)
                     for i, p in enumerate(parts)]
        except ValueError:
            raise TypeError('"A:B" in µm from the core, e.g. "0:150"') from None
    elif isinstance(value, (list, tuple)) and len(value) == 2:
        parts = list(value)
        if any(isinstance(p, bool) or not isinstance(p, (int, float)) for p in parts):
            raise TypeError("two numbers [A, B] in µm from the core")
    else:
        raise TypeError('"A:B" or [A, B] in µm from the core, e.g. "0:150"')
    lo, hi = float(parts[0]), float(parts[1])
    if not lo < hi:
        raise TypeError(f"A < B (got {lo:g} and {hi:g})")
    return (lo, hi)


def _as_sigma(key: str, value: Any) -> float | dict[str, float]:
    if isinstance(value, Mapping):
        return {str(k): _as_float(key, v) for k, v in value.items()}
    return _as_float(key, value)


def _as_names(key: str, value: Any) -> tuple[str, ...]:
    """Accept "a,b" (as on the command line) or a list of names."""
    if isinstance(value, str):
        return tuple(v.strip() for v in value.split(",") if v.strip())
    if isinstance(value, (list, tuple)) and all(isinstance(v, str) for v in value):
        return tuple(value)
    raise TypeError('a list of names, e.g. ["f_core", "growth_exponent"]')


def _as_table(key: str, value: Any) -> dict[str, Any]:
    if not isinstance(value, Mapping):
        raise TypeError("a table, e.g. { SiO2 = \"Si wt%\" }")
    return dict(value)


#: Project-file option -> (:func:`zoning.fitting.fit_traverse` keyword, converter).
#: The names are those of ``zoning fit`` with underscores for dashes.
FIT_OPTIONS: dict[str, tuple[str, Callable[[str, Any], Any]]] = {
    "melt": ("melt", _as_melt),
    "kd": ("kd", _as_float),
    "kd_sd": ("kd_sd", _as_float),
    "fe3": ("fe3_fraction", _as_float),
    "geometry": ("geometry", _as_str),
    "range": ("distance_range", _as_range),
    "radius_um": ("radius_um", _as_float),
    "sigma": ("sigma", _as_sigma),
    "robust": ("robust", _as_bool),
    "include_flagged": ("include_flagged", _as_bool),
    "free": ("free", _as_names),
    "temperature_c": ("temperature_c", _as_float),
    "seed": ("seed", _as_int),
    "walkers": ("n_walkers", _as_int),
    "steps": ("n_steps", _as_int),
}

#: Project-file option -> (:func:`zoning.io.read_traverses` keyword, converter).
READ_OPTIONS: dict[str, tuple[str, Callable[[str, Any], Any]]] = {
    "mineral": ("mineral", _as_mineral),
    "column_map": ("column_map", _as_table),
    "orientation": ("orientation", _as_str),
    "core_position_um": ("core_position_um", _as_float),
    "checks": ("checks", _as_table),
}

#: Options of joint fits (:func:`zoning.fitting.fit_sample` keyword, converter);
#: ``joint = true`` (in ``[defaults]`` or a sample table) fits every traverse of
#: the sample's ``file``/``files`` together as the crystals of one sample.
JOINT_OPTIONS: dict[str, tuple[str, Callable[[str, Any], Any]]] = {
    "joint": ("joint", _as_bool),
    "exclude": ("exclude", _as_names),
    "joint_f_rim": ("f_rim", _as_str),
    "joint_retention": ("retention", _as_str),
}

#: Options of the batch itself: which outputs to draw (both default true).
OUTPUT_OPTIONS: dict[str, tuple[str, Callable[[str, Any], Any]]] = {
    "figures": ("figures", _as_bool),
    "report": ("report", _as_bool),
}

#: Keys only a sample table may hold.
_SAMPLE_KEYS = ("file", "traverse", "files")


def _valid_names(table_kind: str) -> list[str]:
    names = sorted([*FIT_OPTIONS, *READ_OPTIONS, *OUTPUT_OPTIONS, *JOINT_OPTIONS])
    if table_kind == "sample":
        names = sorted([*_SAMPLE_KEYS, *names])
    return names


def resolve_options(
    options: Mapping[str, Any], *, where: str, table_kind: str = "defaults"
) -> dict[str, Any]:
    r"""Check and convert project-file options.

    Parameters
    ----------
    options : mapping
        Option name (as in ``zoning fit``, underscores for dashes) to value.
    where : str
        Where the options come from, for error messages (e.g.
        ``"[samples.\\"FRL-07 ol1\\"] in project.toml"``).
    table_kind : {"defaults", "sample"}
        Sample tables may also hold ``file`` and ``traverse``.

    Returns
    -------
    dict
        The options with converted values (same keys).

    Raises
    ------
    ProjectError
        For an unknown key (naming it, the table and the valid names) or a
        value of the wrong kind.
    """
    valid = _valid_names(table_kind)
    converters = {**FIT_OPTIONS, **READ_OPTIONS, **OUTPUT_OPTIONS, **JOINT_OPTIONS}
    out: dict[str, Any] = {}
    for key, value in options.items():
        if key not in valid:
            close = difflib.get_close_matches(key, valid, n=1)
            hint = f" Did you mean {close[0]!r}?" if close else ""
            if key == "file" and table_kind != "sample":
                hint = " 'file' belongs in a [samples.\"<name>\"] table."
            raise ProjectError(
                f"unknown option {key!r} in {where}.{hint} Valid names: {', '.join(valid)}."
            )
        if key == "files":
            if (not isinstance(value, (list, tuple)) or not value
                    or not all(isinstance(v, str) and v.strip() for v in value)):
                raise ProjectError(
                    f"option 'files' in {where} must be a list of file names in quotes, e.g. "
                    f'files = ["FRL-21_ol1.csv", "FRL-21_ol2.csv"]; got {value!r}.'
                )
            out[key] = list(value)
            continue
        if key in _SAMPLE_KEYS:
            if not isinstance(value, str) or not value.strip():
                raise ProjectError(
                    f"option {key!r} in {where} must be a text string in quotes; got {value!r}."
                )
            out[key] = value
            continue
        try:
            out[key] = converters[key][1](key, value)
        except TypeError as exc:
            raise ProjectError(
                f"option {key!r} in {where} has value {value!r}; expected {exc}. "
                "Correct the value in the project file."
            ) from None
    return out


@dataclass(frozen=True, eq=False)
class SampleJob:
    """One traverse to fit, with every setting resolved.

    Parameters
    ----------
    name : str
        Sample name (the project-file table name, or the traverse name).
    file : str
        Absolute path of the export.
    traverse : str
        Name of the traverse inside the file when it holds several; "" to
        take the only one.
    read_options : mapping
        Keyword arguments of :func:`zoning.io.read_traverses`.
    fit_options : mapping
        Keyword arguments of :func:`zoning.fitting.fit_traverse`.
    figures, report : bool
        Draw the figures (PNG + PDF) and the PDF report.
    """

    name: str
    file: str
    traverse: str = ""
    read_options: Mapping[str, Any] = field(default_factory=dict)
    fit_options: Mapping[str, Any] = field(default_factory=dict)
    figures: bool = True
    report: bool = True
    files: tuple[str, ...] = ()
    joint: bool = False
    joint_options: Mapping[str, Any] = field(default_factory=dict)

    def __post_init__(self):
        object.__setattr__(self, "read_options", dict(self.read_options))
        object.__setattr__(self, "fit_options", dict(self.fit_options))
        object.__setattr__(self, "files", tuple(self.files) or (self.file,))
        object.__setattr__(self, "joint_options", dict(self.joint_options))

    def settings(self) -> dict[str, Any]:
        """Return the resolved settings as a JSON-ready dictionary."""
        return {
            "name": self.name,
            "traverse": self.traverse,
            "read": _jsonable(self.read_options),
            "fit": _jsonable(self.fit_options),
            "figures": self.figures,
            "report": self.report,
            **({"files": list(self.files), "joint": _jsonable(self.joint_options)}
               if self.joint else {}),
        }


def _jsonable(obj: Any) -> Any:
    if isinstance(obj, Mapping):
        return {str(k): _jsonable(v) for k, v in sorted(obj.items(), key=lambda kv: str(kv[0]))}
    if isinstance(obj, (list, tuple)):
        return [_jsonable(v) for v in obj]
    if isinstance(obj, (np.floating, np.integer)):
        return _jsonable(obj.item())
    return obj


@dataclass(frozen=True, eq=False)
class Project:
    """A set of samples to fit.

    Parameters
    ----------
    path : str
        Project file or folder it was made from.
    jobs : tuple of SampleJob
        The samples, in project-file order.
    defaults : mapping
        The resolved ``[defaults]`` options.
    """

    path: str
    jobs: tuple[SampleJob, ...]
    defaults: Mapping[str, Any] = field(default_factory=dict)

    def __post_init__(self):
        object.__setattr__(self, "jobs", tuple(self.jobs))
        object.__setattr__(self, "defaults", dict(self.defaults))

    @property
    def input_files(self) -> tuple[str, ...]:
        """Every input file of the project (never overwritten)."""
        files = {f for j in self.jobs for f in j.files}
        if Path(self.path).is_file():
            files.add(str(Path(self.path).resolve()))
        return tuple(sorted(files))


def _split(options: Mapping[str, Any]) -> tuple[dict, dict, dict]:
    read = {READ_OPTIONS[k][0]: v for k, v in options.items() if k in READ_OPTIONS}
    fit = {FIT_OPTIONS[k][0]: v for k, v in options.items() if k in FIT_OPTIONS}
    out = {OUTPUT_OPTIONS[k][0]: v for k, v in options.items() if k in OUTPUT_OPTIONS}
    return read, fit, out


def _make_job(name: str, file: Path, traverse: str, options: Mapping[str, Any],
              files: tuple[Path, ...] = ()) -> SampleJob:
    read, fit, out = _split(options)
    joint = {JOINT_OPTIONS[k][0]: v for k, v in options.items() if k in JOINT_OPTIONS}
    is_joint = bool(joint.pop("joint", False))
    return SampleJob(
        name=name,
        file=str(file),
        traverse=traverse,
        read_options=read,
        fit_options=fit,
        figures=out.get("figures", True),
        report=out.get("report", True),
        files=tuple(str(f) for f in files),
        joint=is_joint,
        joint_options=joint,
    )


def read_project(
    path: str | os.PathLike, *, overrides: Mapping[str, Any] | None = None
) -> Project:
    """Read a TOML project file.

    Parameters
    ----------
    path : str or path-like
        The project file.
    overrides : mapping, optional
        Options that replace those of ``[defaults]`` (e.g. from the command
        line); sample tables still override them.

    Returns
    -------
    Project

    Raises
    ------
    ProjectError
        Unreadable TOML, unknown tables or options, missing ``file``, a
        sample file that does not exist.
    """
    path = Path(path)
    try:
        text = path.read_bytes()
    except FileNotFoundError:
        raise ProjectError(
            f"project file {str(path)!r} not found. Check the path, or give a folder of exports."
        ) from None
    try:
        data = tomllib.loads(text.decode("utf-8-sig"))
    except UnicodeDecodeError as exc:
        raise ProjectError(
            f"project file {str(path)!r} is not UTF-8 text ({exc}). Save it as UTF-8."
        ) from None
    except tomllib.TOMLDecodeError as exc:
        raise ProjectError(
            f"project file {str(path)!r} is not valid TOML: {exc}. "
            'Expected [defaults] and [samples."<name>"] tables with key = value lines.'
        ) from None
    unknown = sorted(set(data) - {"defaults", "samples"})
    if unknown:
        raise ProjectError(
            f"unknown table [{unknown[0]}] in {str(path)!r}; valid tables: "
            '[defaults] and [samples."<name>"] (one per traverse).'
        )
    raw_defaults = data.get("defaults", {})
    if not isinstance(raw_defaults, Mapping):
        raise ProjectError(f"'defaults' in {str(path)!r} must be a table [defaults].")
    defaults = resolve_options(raw_defaults, where=f"[defaults] of {str(path)!r}")
    if overrides:
        defaults.update(resolve_options(overrides, where="the command-line options"))
    samples = data.get("samples", {})
    if not isinstance(samples, Mapping) or not samples:
        raise ProjectError(
            f"no samples in {str(path)!r}. Add one table per traverse: "
            '[samples."FRL-07 ol1"] with file = "FRL-07_ol1.csv".'
        )
    base = path.resolve().parent
    jobs = []
    for name, table in samples.items():
        where = f'[samples."{name}"] of {str(path)!r}'
        if not isinstance(table, Mapping):
            raise ProjectError(f"{where} must be a table with at least file = \"...\".")
        opts = resolve_options(table, where=where, table_kind="sample")
        if "file" not in opts and "files" not in opts:
            raise ProjectError(
                f"{where} has no 'file'. Add file = \"<export>.csv\" "
                "(relative to the project file), or files = [...] for a joint sample."
            )
        if "file" in opts and "files" in opts:
            raise ProjectError(
                f"{where} has both 'file' and 'files'; give one of them (files = [...] lists "
                "every export of a joint sample)."
            )
        listed = opts.pop("files", None) or [opts.pop("file")]
        paths = []
        for entry in listed:
            file = (base / entry).resolve()
            if not file.is_file():
                raise ProjectError(
                    f"{where}: file {str(file)!r} not found. Paths are relative to the "
                    f"project file's folder {str(base)!r}."
                )
            paths.append(file)
        traverse = opts.pop("traverse", "")
        merged = {**defaults, **opts}
        if "melt" in defaults and "melt" in opts:
            merged["melt"] = {**defaults["melt"], **opts["melt"]}
        if len(paths) > 1 and not merged.get("joint", False):
            raise ProjectError(
                f"{where} lists several files but is not a joint sample; add joint = true to "
                "fit their crystals together, or give one sample table per file."
            )
        if not merged.get("joint", False) and any(
                k in opts for k in ("exclude", "joint_f_rim", "joint_retention")):
            raise ProjectError(
                f"{where} sets joint-fit options without joint = true; add joint = true.")
        jobs.append(_make_job(str(name), paths[0], traverse, merged, tuple(paths)))
    return Project(path=str(path.resolve()), jobs=tuple(jobs), defaults=defaults)


def project_from_folder(folder: str | os.PathLike, options: Mapping[str, Any]) -> Project:
    """Make a project of every export in a folder (not its subfolders).

    Each traverse of each file becomes one sample, named after the traverse.
    A file that cannot be read still becomes a sample, so that the batch
    lists it with its error.

    Parameters
    ----------
    folder : str or path-like
        Folder holding the exports (``.csv``, ``.txt``, ``.tsv``, ``.xlsx``).
    options : mapping
        Options for every sample (as in ``[defaults]``).

    Returns
    -------
    Project

    Raises
    ------
    ProjectError
        The folder holds no exports, or an option is invalid.
    """
    folder = Path(folder).resolve()
    opts = resolve_options(options, where="the command-line options")
    files = sorted(
        p for p in folder.iterdir()
        if p.is_file() and p.suffix.lower() in EXPORT_SUFFIXES and not p.name.startswith(".")
    )
    files = [p for p in files if p.name not in ("summary.csv",)]
    if not files:
        raise ProjectError(
            f"no exports in folder {str(folder)!r}: expected files ending in "
            f"{', '.join(EXPORT_SUFFIXES)}. Give the folder that holds them, or a project file."
        )
    read_kw, _, _ = _split(opts)
    read_traverses = _reader()
    jobs = []
    used: set[str] = set()
    for file in files:
        try:
            with warnings.catch_warnings():
                warnings.simplefilter("ignore")
                names = [t.name for t in read_traverses(file, **read_kw)]
        except Exception:  # noqa: BLE001 - the worker reports the error for this file
            names = [""]
        for tname in names:
            name = tname or file.stem
            if name in used:
                name = f"{file.stem} {tname}" if tname else file.name
            used.add(name)
            jobs.append(_make_job(name, file, tname if len(names) > 1 else "", opts))
    return Project(path=str(folder), jobs=tuple(jobs), defaults=opts)


def fingerprint(job: SampleJob) -> str:
    """Hash of the input file bytes, the resolved settings and the version.

    Parameters
    ----------
    job : SampleJob
        The sample.

    Returns
    -------
    str
        Hex SHA-256 digest; "" when the file cannot be read (never skipped).
    """
    from zoning import __version__

    h = hashlib.sha256()
    try:
        for f in job.files:
            h.update(Path(f).read_bytes())
    except OSError:
        return ""
    h.update(json.dumps(job.settings(), sort_keys=True).encode())
    h.update(__version__.encode())
    return h.hexdigest()


@dataclass(frozen=True, eq=False)
class SampleOutcome:
    """What one sample of a batch produced.

    Parameters
    ----------
    name : str
        Sample name.
    status : {"fitted", "unchanged", "failed"}
        Fitted now, skipped because its fingerprint matched, or failed.
    row : mapping
        Its row of ``summary.csv``.
    error : str
        The error message ("" unless failed).
    folder : str
        Its output folder.
    seconds : float
        Wall time spent on it [s].
    """

    name: str
    status: str
    row: Mapping[str, Any]
    error: str = ""
    folder: str = ""
    seconds: float = float("nan")


@dataclass(frozen=True, eq=False)
class BatchResult:
    """Outcome of :func:`run_batch`.

    Parameters
    ----------
    out_dir : str
        Output folder.
    summary : pandas.DataFrame
        One row per sample (the table written to ``summary.csv``).
    outcomes : tuple of SampleOutcome
        Per sample, in project order.
    seconds : float
        Wall time of the batch [s].
    """

    out_dir: str
    summary: pd.DataFrame
    outcomes: tuple[SampleOutcome, ...]
    seconds: float = float("nan")

    @property
    def n_failed(self) -> int:
        """Number of samples that failed."""
        return sum(o.status == "failed" for o in self.outcomes)

    @property
    def n_unchanged(self) -> int:
        """Number of samples skipped because nothing changed."""
        return sum(o.status == "unchanged" for o in self.outcomes)

    @property
    def n_fitted(self) -> int:
        """Number of samples fitted in this run."""
        return sum(o.status == "fitted" for o in self.outcomes)


_FINGERPRINT_FILE = "fingerprint.json"
_PARTIAL = ".partial-"


def _sample_dir_name(name: str) -> str:
    from zoning.io.writers import safe_name

    return safe_name(name)


def _reader():
    try:
        from zoning.io import read_traverses
    except ImportError:  # pragma: no cover - older layout of zoning.io
        from zoning.io.traverses import read_traverses
    return read_traverses


def _select_traverse(job: SampleJob):
    read_traverses = _reader()
    traverses = read_traverses(job.file, **job.read_options)
    if job.traverse:
        for t in traverses:
            if t.name == job.traverse:
                return t
        raise ProjectError(
            f"sample {job.name!r}: no traverse {job.traverse!r} in {job.file!r}; the file holds "
            f"{', '.join(repr(t.name) for t in traverses)}. Correct 'traverse' in the project file."
        )
    if len(traverses) > 1:
        raise ProjectError(
            f"sample {job.name!r}: {job.file!r} holds {len(traverses)} traverses "
            f"({', '.join(repr(t.name) for t in traverses)}). Add traverse = \"<name>\" to the "
            "sample table, one sample per traverse."
        )
    return traverses[0]


def _failed_row(job: SampleJob, error: str) -> dict[str, Any]:
    return {"sample": job.name, "file": job.file, "error": error}


def run_sample(
    job: SampleJob, out_dir: str | os.PathLike, fp: str = "", folder_name: str = ""
) -> SampleOutcome:
    """Read, fit and write one sample; never raises for a bad sample.

    The sample folder ``out_dir/<safe name>/`` is built in a temporary
    folder and moved into place at the end, so it is either complete or
    absent. It holds ``fit.json`` and ``profile.csv`` (as written by ``zoning
    fit``), the figures (PNG and PDF), ``report.pdf`` and ``fingerprint.json``.

    Parameters
    ----------
    job : SampleJob
        The sample.
    out_dir : str or path-like
        Batch output folder.
    fp : str, optional
        Fingerprint to store (see :func:`fingerprint`); computed when "".
    folder_name : str, optional
        Name of the sample folder; :func:`zoning.io.writers.safe_name` of
        the sample name when "".

    Returns
    -------
    SampleOutcome
        With status "fitted", or "failed" and the error message.
    """
    t0 = time.perf_counter()
    out_dir = Path(out_dir)
    fp = fp or fingerprint(job)
    folder = out_dir / (folder_name or _sample_dir_name(job.name))
    tmp = out_dir / f"{_PARTIAL}{folder.name}-{os.getpid()}"
    try:
        with warnings.catch_warnings(record=True) as caught:
            warnings.simplefilter("always")
            row, result = _fit_and_write(job, tmp)
        extra = [str(w.message) for w in caught if str(w.message) not in result.warnings]
        row = dict(row)
        row["file"] = job.file
        row["error"] = ""
        if extra:
            row["batch_warnings"] = " | ".join(dict.fromkeys(extra))
        record = {
            "fingerprint": fp,
            "status": "fitted",
            "settings": job.settings(),
            "file": job.file,
            "row": row,
        }
        from zoning.io.writers import write_json

        write_json(tmp / _FINGERPRINT_FILE, record)
        _move_into_place(tmp, folder)
        return SampleOutcome(job.name, "fitted", row, "", str(folder), time.perf_counter() - t0)
    except (ZoningError, OSError, ValueError) as exc:
        msg = _error_text(exc)
    except MemoryError:
        msg = "out of memory while fitting this sample; run it alone or with fewer workers"
    except Exception as exc:  # noqa: BLE001 - one failed fit never stops the batch
        tb = traceback.extract_tb(exc.__traceback__)
        where = f" at {Path(tb[-1].filename).name}:{tb[-1].lineno}" if tb else ""
        msg = f"unexpected {type(exc).__name__}{where}: {exc}. Please report this."
    shutil.rmtree(tmp, ignore_errors=True)
    return SampleOutcome(
        job.name, "failed", _failed_row(job, msg), msg, "", time.perf_counter() - t0
    )


def _error_text(exc: BaseException) -> str:
    if isinstance(exc, FileNotFoundError):
        return f"file not found: {exc.filename}"
    if isinstance(exc, ZoningError):
        return str(exc)
    return f"{type(exc).__name__}: {exc}"


def _fit_and_write(job: SampleJob, tmp: Path):
    from zoning.fitting import fit_traverse
    from zoning.io.results import summary_table, write_fit_json, write_profile_csv

    if tmp.exists():
        shutil.rmtree(tmp)
    tmp.mkdir(parents=True)
    if job.joint:
        return _fit_and_write_joint(job, tmp)
    traverse = _select_traverse(job)
    result = fit_traverse(traverse, **job.fit_options)
    write_fit_json(result, tmp / "fit.json")
    write_profile_csv(result, tmp / "profile.csv")
    if job.figures or job.report:
        from zoning.io import figures

        drawn = figures.sample_figures(result)
        if job.figures:
            figures.save_sample_figures(result, tmp, figures=drawn)
        if job.report:
            from zoning.io.report import write_report

            write_report(result, tmp / "report.pdf", figures=list(drawn.values()))
    row = summary_table([result]).iloc[0].to_dict()
    row["sample"] = job.name
    return row, result


def _fit_and_write_joint(job: SampleJob, tmp: Path):
    """Fit every traverse of the sample's files as one sample (joint fit)."""
    from zoning.fitting import fit_sample
    from zoning.io.joint_results import (
        crystals_table,
        sample_summary_table,
        sample_to_dict,
    )
    from zoning.io.writers import standard_metadata, unique_names, write_csv, write_json

    read_traverses = _reader()
    traverses = [t for f in job.files for t in read_traverses(f, **job.read_options)]
    if job.traverse:
        traverses = [t for t in traverses if t.name == job.traverse] or traverses
    kw = dict(job.fit_options)
    if "n_walkers" in kw:
        kw["n_chains"] = kw.pop("n_walkers")
    if "n_steps" in kw:
        kw["n_sweeps"] = kw.pop("n_steps")
    result = fit_sample(traverses, name=job.name, **kw, **job.joint_options)
    write_json(tmp / "fit.json", sample_to_dict(result))
    write_csv(crystals_table(result), tmp / "crystals.csv",
              metadata=standard_metadata(f"crystals of the joint fit of {job.name}"))
    for c, sub in zip(result.crystals, unique_names([c.name for c in result.crystals]),
                      strict=True):
        if not c.spots.empty:
            write_csv(c.spots, tmp / sub / "profile.csv",
                      metadata=standard_metadata(f"profile of crystal {c.name}"))
    if job.figures or job.report:
        from zoning.io import joint_figures

        drawn = joint_figures.sample_figures(result)
        if job.figures:
            from zoning.io.figures import save_figure

            for stem, fig in drawn.items():
                save_figure(fig, tmp / stem)
        if job.report:
            joint_figures.write_sample_report(result, tmp / "report.pdf",
                                              figures=list(drawn.values()))
    row = sample_summary_table([result]).iloc[0].to_dict()
    row["sample"] = job.name
    return row, result


def _move_into_place(tmp: Path, folder: Path) -> None:
    """Replace ``folder`` by ``tmp`` with renames (never half-written)."""
    old = None
    if folder.exists():
        old = folder.with_name(f"{_PARTIAL}old-{folder.name}-{os.getpid()}")
        if old.exists():
            shutil.rmtree(old)
        os.replace(folder, old)
    os.replace(tmp, folder)
    if old is not None:
        shutil.rmtree(old, ignore_errors=True)


def _outputs_present(job: SampleJob, folder: Path) -> bool:
    if job.joint:
        names = ["fit.json", "crystals.csv"]
        if job.figures:
            names += [f"{n}.{ext}" for n in ("sample", "crystals") for ext in ("png", "pdf")]
        if job.report:
            names.append("report.pdf")
        return all((folder / n).is_file() for n in names)
    names = ["fit.json", "profile.csv"]
    if job.figures:
        names += [f"{n}.{ext}" for n in ("profile", "melt_path", "posterior")
                  for ext in ("png", "pdf")]
    if job.report:
        names.append("report.pdf")
    return all((folder / n).is_file() for n in names)


def _stored(folder: Path) -> dict[str, Any] | None:
    try:
        return json.loads((folder / _FINGERPRINT_FILE).read_text(encoding="utf-8"))
    except (OSError, ValueError):
        return None


class _Progress:
    """Text progress bar on a stream: done/total, sample, elapsed, remaining."""

    def __init__(self, total: int, stream=None, width: int = 24):
        self.total = max(total, 1)
        self.stream = stream if stream is not None else sys.stderr
        self.width = width
        self.t0 = time.perf_counter()
        self.done = 0
        self.tty = bool(getattr(self.stream, "isatty", lambda: False)())

    @staticmethod
    def _clock(seconds: float) -> str:
        if not math.isfinite(seconds):
            return "--:--"
        seconds = int(round(seconds))
        h, rem = divmod(seconds, 3600)
        m, s = divmod(rem, 60)
        return f"{h}:{m:02d}:{s:02d}" if h else f"{m:02d}:{s:02d}"

    def update(self, name: str, status: str, skipped: int = 0) -> None:
        self.done += 1
        elapsed = time.perf_counter() - self.t0
        worked = self.done - skipped
        rate = elapsed / worked if worked > 0 else math.nan
        remaining = rate * (self.total - self.done) if self.done < self.total else 0.0
        filled = int(self.width * self.done / self.total)
        bar = "#" * filled + "." * (self.width - filled)
        line = (
            f"[{bar}] {self.done}/{self.total} {name} ({status}) "
            f"elapsed {self._clock(elapsed)} remaining {self._clock(remaining)}"
        )
        if self.tty:
            end = "\n" if self.done >= self.total else ""
            self.stream.write("\r\x1b[2K" + line + end)
        else:
            self.stream.write(line + "\n")
        self.stream.flush()


def _ignore_sigint() -> None:  # pragma: no cover - runs in worker processes
    signal.signal(signal.SIGINT, signal.SIG_IGN)


def _terminate(executor: cf.Executor) -> None:
    """Cancel what has not started and stop the workers now."""
    processes = getattr(executor, "_processes", None)
    try:
        executor.shutdown(wait=False, cancel_futures=True)
    except TypeError:  # pragma: no cover - executors without cancel_futures
        executor.shutdown(wait=False)
    if isinstance(processes, dict):
        for p in list(processes.values()):
            try:
                p.terminate()
            except Exception:  # noqa: BLE001, S110 - already gone
                pass
        for p in list(processes.values()):
            p.join(timeout=5)


def _clean_partials(out_dir: Path) -> None:
    for p in out_dir.glob(f"{_PARTIAL}*"):
        shutil.rmtree(p, ignore_errors=True)


def run_batch(
    project: Project,
    out_dir: str | os.PathLike,
    *,
    executor: cf.Executor | None = None,
    workers: int | None = None,
    progress: bool | Any = True,
    force: bool = False,
) -> BatchResult:
    """Fit every sample of a project and write the batch outputs.

    Parameters
    ----------
    project : Project
        From :func:`read_project` or :func:`project_from_folder`.
    out_dir : str or path-like
        Output folder (created). Holds ``summary.csv``, ``summary.xlsx``
        (if openpyxl is installed), ``overview.png``/``overview.pdf`` and
        one folder per sample.
    executor : concurrent.futures.Executor, optional
        Where to run the samples (e.g. a Dask ``Client.get_executor()``).
        Not shut down by this function. Default: a process pool with
        `workers` processes, or the calling process when ``workers == 1``.
    workers : int, optional
        Worker processes of the default pool (default ``os.cpu_count()``).
    progress : bool or stream, optional
        Progress bar on stderr (True), on the given stream, or none (False).
    force : bool, optional
        Refit every sample even if its fingerprint is unchanged.

    Returns
    -------
    BatchResult

    Raises
    ------
    KeyboardInterrupt
        On Ctrl-C, after cancelling pending samples and stopping the
        workers; finished samples are kept, nothing is half-written.
    ProjectError
        When the output folder would overwrite an input file.
    """
    t0 = time.perf_counter()
    out = Path(out_dir).resolve()
    inputs = {str(Path(f).resolve()) for f in project.input_files}
    if str(out) in inputs:
        raise ProjectError(
            f"output folder {str(out)!r} is an input file. Choose another --out folder."
        )
    out.mkdir(parents=True, exist_ok=True)
    _clean_partials(out)
    names = [j.name for j in project.jobs]
    dup = sorted({n for n in names if names.count(n) > 1})
    if dup:
        raise ProjectError(f"sample name {dup[0]!r} is used twice; give each sample its own name.")
    from zoning.io.writers import unique_names

    folders = {
        name: out / folder for name, folder in zip(names, unique_names(names), strict=True)
    }
    batch_files = [out / n for n in ("summary.csv", "summary.xlsx", "overview.png",
                                     "overview.pdf")]
    clash = [str(f) for f in [*folders.values(), *batch_files] if str(f) in inputs]
    clash += [str(f) for f in folders.values()
              if any(f in Path(i).parents for i in inputs)]
    if clash:
        raise ProjectError(
            f"output {clash[0]!r} would overwrite an input file of the project. "
            "Choose another --out folder."
        )

    bar = None
    if progress:
        bar = _Progress(len(project.jobs), stream=None if progress is True else progress)

    outcomes: dict[str, SampleOutcome] = {}
    todo: list[tuple[SampleJob, str]] = []
    for job in project.jobs:
        fp = fingerprint(job)
        stored = _stored(folders[job.name])
        if (not force and fp and stored and stored.get("fingerprint") == fp
                and stored.get("status") == "fitted" and _outputs_present(job, folders[job.name])):
            outcomes[job.name] = SampleOutcome(
                job.name, "unchanged", stored.get("row", {}), "", str(folders[job.name]), 0.0
            )
        else:
            todo.append((job, fp))
    skipped = len(outcomes)
    if bar is not None:
        for name in [j.name for j in project.jobs if j.name in outcomes]:
            bar.update(name, "unchanged", skipped=skipped)

    def record(outcome: SampleOutcome) -> None:
        outcomes[outcome.name] = outcome
        if bar is not None:
            bar.update(outcome.name, outcome.status, skipped=skipped)

    n_workers = workers if workers is not None else (os.cpu_count() or 1)
    if todo and executor is None and (n_workers <= 1 or len(todo) == 1):
        try:
            for job, fp in todo:
                record(run_sample(job, out, fp, folders[job.name].name))
        except KeyboardInterrupt:
            _clean_partials(out)
            _recover_finished(todo, folders, outcomes)
            _write_summary(project, out, outcomes, inputs)
            raise
    elif todo:
        own = executor is None
        pool = executor or cf.ProcessPoolExecutor(
            max_workers=max(1, min(n_workers, len(todo))), initializer=_ignore_sigint
        )
        futures: dict[cf.Future, SampleJob] = {}
        try:
            for job, fp in todo:
                futures[pool.submit(run_sample, job, str(out), fp, folders[job.name].name)] = job
            for fut in cf.as_completed(futures):
                job = futures[fut]
                try:
                    record(fut.result())
                except Exception as exc:  # noqa: BLE001 - a lost worker fails one sample only
                    msg = f"worker failed: {type(exc).__name__}: {exc}"
                    record(SampleOutcome(job.name, "failed", _failed_row(job, msg), msg))
        except KeyboardInterrupt:
            for fut in futures:
                fut.cancel()
            if own:
                _terminate(pool)
            _clean_partials(out)
            _recover_finished(todo, folders, outcomes)
            _write_summary(project, out, outcomes, inputs)
            raise
        finally:
            if own:
                pool.shutdown(wait=True, cancel_futures=True)

    summary = _write_summary(project, out, outcomes, inputs)
    ordered = tuple(outcomes[j.name] for j in project.jobs if j.name in outcomes)
    return BatchResult(str(out), summary, ordered, time.perf_counter() - t0)


def _recover_finished(todo, folders, outcomes: dict) -> None:
    """Add samples that finished on disk but whose result never reached us (Ctrl-C)."""
    for job, fp in todo:
        if job.name in outcomes:
            continue
        stored = _stored(folders[job.name])
        if fp and stored and stored.get("fingerprint") == fp and stored.get("status") == "fitted":
            outcomes[job.name] = SampleOutcome(job.name, "fitted", stored.get("row", {}), "",
                                               str(folders[job.name]))


def _summary_frame(project: Project, outcomes: Mapping[str, SampleOutcome]) -> pd.DataFrame:
    """Rows in project order; columns in the order of ``zoning fit``, then file, error."""
    from zoning.io.results import SUMMARY_QUANTITIES, SUMMARY_TAIL

    rows = [dict(outcomes[j.name].row) for j in project.jobs if j.name in outcomes]
    df = pd.DataFrame(rows)
    if df.empty:
        return pd.DataFrame(columns=["sample", "file", "error"])
    for col in ("file", "error"):
        if col not in df:
            df[col] = ""
        df[col] = df[col].fillna("")
    for col in ("n_spots", "n_used", "n_crystals", "n_antecrysts"):
        # Counts stay integers when some rows lack them (failed samples, or
        # single fits beside joint samples): nullable integers, blank when absent.
        if col in df:
            df[col] = pd.to_numeric(df[col], errors="coerce").round().astype("Int64")
    order = ["sample", "mineral", "n_spots", "n_used"]
    for q in SUMMARY_QUANTITIES:
        order += [q, f"{q}_lo95", f"{q}_hi95", f"{q}_constrained"]
    order += list(SUMMARY_TAIL)
    tail = ["batch_warnings", "file", "error"]
    known = [c for c in order if c in df.columns]
    other = [c for c in df.columns if c not in known and c not in tail]
    return df[known + other + [c for c in tail if c in df.columns]]


def _write_summary(
    project: Project, out: Path, outcomes: Mapping[str, SampleOutcome], inputs: Iterable[str]
) -> pd.DataFrame:
    from zoning.io.writers import write_csv

    df = _summary_frame(project, outcomes)
    meta = {"project": project.path, "samples": str(len(project.jobs))}
    write_csv(df, out / "summary.csv", metadata=meta, protect=tuple(inputs))
    tables = []
    for j in project.jobs:
        o = outcomes.get(j.name)
        if j.joint and o is not None and o.status != "failed" and o.folder:
            try:
                tables.append(pd.read_csv(Path(o.folder) / "crystals.csv", comment="#"))
            except (OSError, ValueError):
                pass
    if tables:
        write_csv(pd.concat(tables, ignore_index=True), out / "crystals.csv",
                  metadata={**meta, "content": "one row per crystal of the joint samples"},
                  protect=tuple(inputs))
    _write_xlsx(df, out / "summary.xlsx", protect=tuple(inputs))
    ok = df[df["error"] == ""] if "error" in df else df
    if len(ok):
        from zoning.io.figures import overview_figure, save_figure

        fig = overview_figure(df)
        save_figure(fig, out / "overview")
    return df


def _write_xlsx(df: pd.DataFrame, path: Path, protect: Iterable[str] = ()) -> bool:
    """Write ``summary.xlsx`` atomically if openpyxl is installed."""
    try:
        import openpyxl  # noqa: F401
    except ImportError:  # pragma: no cover - optional extra
        return False
    if str(path.resolve()) in {str(Path(p).resolve()) for p in protect}:
        raise ProjectError(f"refusing to overwrite input file {str(path)!r}; choose another --out.")
    tmp = path.with_name(f"{_PARTIAL}{path.name}-{os.getpid()}.xlsx")
    try:
        # Same neutralisation of formula injection as zoning.io.writers.write_csv.
        from zoning.io.writers import _neutralise_frame

        _neutralise_frame(df).to_excel(tmp, index=False, sheet_name="summary")
        os.replace(tmp, path)
    finally:
        if tmp.exists():
            tmp.unlink()
    return True
