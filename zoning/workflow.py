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

    [samples."FRL-09 prof 2"]
    file = "FRL-09_long.xlsx"
    sheet = "olivine"         # reading options too: column_map, sheet, orientation,
    traverse = "prof 2"       # core_um, check, iron (as on the command line)
    column_map = { traverse = "Line" }

The option names are exactly those of ``zoning fit`` with underscores for
dashes (``--core-um`` is ``core_um``, ``--check total_min_wt=98`` is
``check = { total_min_wt = 98 }``); tables (``melt``, ``column_map``,
``check``) given both in ``[defaults]`` and in a sample are merged key by key,
and a sample melt with FeO and Fe2O3 sets its own Fe3+/FeT instead of a
default ``fe3``; :data:`FIT_OPTIONS` and :data:`READ_OPTIONS` map them onto the keyword
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
import dataclasses
import difflib
import hashlib
import json
import math
import os
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

from zoning.exceptions import OutputRefusedError, ProjectError, ZoningError
from zoning.minerals import IRON_OPTIONS
from zoning.traverse import MINERALS, ORIENTATIONS

if sys.version_info >= (3, 11):
    import tomllib
else:  # pragma: no cover - Python 3.10
    import tomli as tomllib

__all__ = [
    "check_sampler_settings",
    "check_fittable",
    "input_problem",
    "BATCH_FILES",
    "RUN_STATUSES",
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
    "read_keywords",
    "run_sample",
    "run_batch",
    "fingerprint",
]

#: File suffixes taken as microprobe exports when a folder is given.
EXPORT_SUFFIXES = (".csv", ".txt", ".tsv", ".xlsx", ".ods")


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


def _as_process(key: str, value: Any) -> str | float:
    if isinstance(value, str) and value.strip().lower() == "free":
        return "free"
    if isinstance(value, bool) or not isinstance(value, (int, float)):
        raise TypeError('"free" or a number, e.g. ' + key + ' = 0')
    out = float(value)
    if not math.isfinite(out) or out < 0:
        raise TypeError('"free" or a number >= 0, e.g. ' + key + ' = 0')
    return out


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


def _as_column_map(key: str, value: Any) -> dict[str, str]:
    if not isinstance(value, Mapping) or not all(
        isinstance(v, str) and v.strip() for v in value.values()
    ):
        raise TypeError('a table of column = "header in the file", e.g. '
                        'column_map = { FeO = "FeO tot", traverse = "Line" }')
    return {str(k): str(v) for k, v in value.items()}


def _as_check(key: str, value: Any) -> dict[str, float]:
    from dataclasses import fields

    from zoning.minerals import QualitySettings

    if not isinstance(value, Mapping):
        raise TypeError("a table of setting = number, e.g. check = { total_min_wt = 98 }")
    known = [f.name for f in fields(QualitySettings)]
    out = {}
    for name, v in value.items():
        if name not in known:
            raise TypeError(f"known quality-check settings (not {name!r}): {', '.join(known)}")
        out[str(name)] = _as_float(key, v)
    return out


def _as_sheet(key: str, value: Any) -> str | int:
    if isinstance(value, bool):
        raise TypeError("a sheet name in quotes or a sheet number counted from 0")
    if isinstance(value, int) and value >= 0:
        return value
    if isinstance(value, str) and value.strip():
        return value
    raise TypeError("a sheet name in quotes or a sheet number counted from 0")


def _as_choice(choices: tuple[str, ...]):
    def convert(key: str, value: Any) -> str:
        if not isinstance(value, str) or value not in choices:
            raise TypeError(f"one of {', '.join(repr(c) for c in choices)}")
        return value

    return convert


def _as_fe3(key: str, value: Any) -> float:
    v = _as_float(key, value)
    if not 0.0 <= v < 1.0:
        raise TypeError("a fraction Fe3+/FeT in [0, 1), e.g. fe3 = 0.15")
    return v


#: Project-file option -> (:func:`zoning.fitting.fit_traverse` keyword, converter).
#: The names are those of ``zoning fit`` with underscores for dashes.
FIT_OPTIONS: dict[str, tuple[str, Callable[[str, Any], Any]]] = {
    "melt": ("melt", _as_melt),
    "kd": ("kd", _as_float),
    "kd_sd": ("kd_sd", _as_float),
    "fe3": ("fe3_fraction", _as_fe3),
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
    "thermometer": ("thermometer", _as_str),
    "section_h_over_r": ("section_h_over_r", _as_process),
    "diffusion_length_um": ("diffusion_length_um", _as_process),
    "delta_qfm": ("delta_qfm", _as_float),
}

#: Project-file option -> (:func:`zoning.io.read_traverses` keyword, converter).
#: The names are those of the reading options of ``zoning inspect``/``fit``/``batch``.
READ_OPTIONS: dict[str, tuple[str, Callable[[str, Any], Any]]] = {
    "mineral": ("mineral", _as_mineral),
    "column_map": ("column_map", _as_column_map),
    "sheet": ("sheet", _as_sheet),
    "orientation": ("orientation", _as_choice(ORIENTATIONS)),
    "core_um": ("core_position_um", _as_float),
    "check": ("checks", _as_check),
    "iron": ("iron", _as_choice(IRON_OPTIONS)),
}

#: Option names of earlier versions, with the name to use now.
_RENAMED = {"checks": "check", "core_position_um": "core_um"}

#: Options whose tables are merged key by key ([defaults], then the sample).
_MERGED_TABLES = ("column_map", "check")

#: Options of joint fits (:func:`zoning.fitting.fit_sample` keyword, converter);
#: ``joint = true`` (in ``[defaults]`` or a sample table) fits every traverse of
#: the sample's ``file``/``files`` together as the crystals of one sample.
JOINT_OPTIONS: dict[str, tuple[str, Callable[[str, Any], Any]]] = {
    "joint": ("joint", _as_bool),
    "exclude": ("exclude", _as_names),
    "joint_f_rim": ("f_rim", _as_str),
    "joint_retention": ("retention", _as_str),
}

def _as_figure_format(key: str, value: Any) -> tuple[str, ...]:
    from zoning.io.figures import FIGURE_FORMATS, parse_figure_formats

    try:
        return parse_figure_formats(value)
    except ZoningError:
        raise TypeError(f"figure file formats from {', '.join(FIGURE_FORMATS)}, e.g. "
                        f'{key} = ["png", "svg"] or {key} = "png,pdf"') from None


def _as_figure_style(key: str, value: Any) -> str:
    from zoning.io.figures import FIGURE_STYLES, figure_style

    try:
        return figure_style(value if isinstance(value, str) else repr(value)).name
    except ZoningError:
        raise TypeError(f"a figure preset, one of {', '.join(map(repr, FIGURE_STYLES))}, "
                        f'e.g. {key} = "column"') from None


#: Options of the batch itself: which outputs to draw (figures and report
#: default true) and how (figure file formats and size/font preset).
OUTPUT_OPTIONS: dict[str, tuple[str, Callable[[str, Any], Any]]] = {
    "figures": ("figures", _as_bool),
    "report": ("report", _as_bool),
    "figure_format": ("figure_format", _as_figure_format),
    "figure_style": ("figure_style", _as_figure_style),
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
            if key in _RENAMED:
                hint = f" It is now called {_RENAMED[key]!r}."
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


#: Bounds of the sampler settings. Below MIN_WALKERS the ensemble sampler
#: cannot explore the 4-8 free parameters (it needs at least twice as many
#: walkers as parameters); the upper bounds keep one fit within a few hundred
#: MB of memory (the chain holds walkers x steps x parameters floats) and
#: well under an hour.
MIN_WALKERS, MAX_WALKERS = 8, 2048
MIN_STEPS, MAX_STEPS = 100, 200_000
MAX_WALKER_STEPS = 2_000_000
MAX_SEED = 2**32 - 1


def check_sampler_settings(n_walkers: Any = None, n_steps: Any = None, seed: Any = None, *,
                           where: str = "") -> None:
    """Refuse sampler settings that are not counts, or would not fit in memory.

    Parameters
    ----------
    n_walkers, n_steps, seed : int or None
        As given (None: the default is used).
    where : str, optional
        Where the values come from (e.g. a project-file table), for the
        message; "" for the command line.

    Raises
    ------
    zoning.exceptions.ZoningError
        Naming the option as the user types it (``--walkers`` /
        ``walkers = ...``), the value received and the range allowed.
    """
    def name(cli: str, key: str) -> str:
        return f"'{key}' in {where}" if where else cli

    checks = (
        (n_walkers, "--walkers", "walkers", MIN_WALKERS, MAX_WALKERS,
         "the default 64 suits most traverses"),
        (n_steps, "--steps", "steps", MIN_STEPS, MAX_STEPS,
         "600 (olivine) or 2000 (plagioclase) are the defaults"),
        (seed, "--seed", "seed", 0, MAX_SEED, "any whole number from 0 up, e.g. --seed 1"),
    )
    for value, cli, key, lo, hi, hint in checks:
        if value is None:
            continue
        if isinstance(value, bool) or not isinstance(value, (int, np.integer)):
            raise ZoningError(f"{name(cli, key)} must be a whole number; got {value!r}. {hint}.")
        if not lo <= int(value) <= hi:
            raise ZoningError(
                f"{name(cli, key)} must be between {lo} and {hi}; got {int(value)}. "
                f"{hint[0].upper()}{hint[1:]}."
            )
    if n_walkers is not None and n_steps is not None and n_walkers * n_steps > MAX_WALKER_STEPS:
        raise ZoningError(
            f"{name('--walkers', 'walkers')} x {name('--steps', 'steps')} = "
            f"{n_walkers} x {n_steps} = {n_walkers * n_steps} walker steps is more than the "
            f"limit {MAX_WALKER_STEPS} (memory and time of one fit). Use fewer walkers or "
            "steps; 64 walkers x 600-2000 steps give calibrated bands."
        )


def _check_job_settings(fit: Mapping[str, Any], where: str) -> None:
    try:
        check_sampler_settings(fit.get("n_walkers"), fit.get("n_steps"), fit.get("seed"),
                               where=where)
    except ZoningError as exc:
        raise ProjectError(str(exc)) from None


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
        Draw the figures and the PDF report.
    figure_format : tuple of str
        Figure file formats (project key ``figure_format``; default PNG + PDF).
    figure_style : str
        Figure preset of :data:`zoning.io.figures.FIGURE_STYLES` (project key
        ``figure_style``; default ``"thesis"``).
    problem : str
        Why the sample cannot be run (e.g. its file lies outside the project
        folder); "" when it can. A sample with a problem is a failed row of
        the batch, its file is never opened.
    project : str
        The project file (or folder) the sample was read from; recorded in
        the results so that reports say how to rerun them (not part of the
        fingerprint).
    """

    name: str
    file: str
    traverse: str = ""
    read_options: Mapping[str, Any] = field(default_factory=dict)
    fit_options: Mapping[str, Any] = field(default_factory=dict)
    figures: bool = True
    report: bool = True
    figure_format: tuple[str, ...] = ("png", "pdf")
    figure_style: str = "thesis"
    problem: str = ""
    files: tuple[str, ...] = ()
    joint: bool = False
    joint_options: Mapping[str, Any] = field(default_factory=dict)
    project: str = ""

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
            # Part of the fingerprint: a folder with other formats or another
            # preset is not "unchanged".
            "figure_format": list(self.figure_format) if self.figures else [],
            "figure_style": self.figure_style if self.figures else "",
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


def read_keywords(options: Mapping[str, Any], *, where: str = "the command-line options"
                  ) -> dict[str, Any]:
    """Keyword arguments of :func:`zoning.io.read_traverses` from reading options.

    The one translation used by ``zoning inspect``, ``zoning fit`` and
    ``zoning batch`` (and project files), so that the three read a file the
    same way.

    Parameters
    ----------
    options : mapping
        Project-file option names (``mineral``, ``column_map``, ``sheet``,
        ``orientation``, ``core_um``, ``check``, ``iron``); other options are
        ignored.
    where : str, optional
        Where the options come from, for error messages.

    Returns
    -------
    dict
    """
    chosen = {k: v for k, v in options.items() if k in READ_OPTIONS}
    resolved = resolve_options(chosen, where=where)
    return _split(resolved)[0]


def _merge(defaults: Mapping[str, Any], opts: Mapping[str, Any]) -> dict[str, Any]:
    """Sample options over the defaults; melt and tables merged key by key."""
    from zoning.melt import merge_melts

    merged = {**defaults, **opts}
    if "melt" in defaults and "melt" in opts:
        merged["melt"] = merge_melts(defaults["melt"], opts["melt"])
    for key in _MERGED_TABLES:
        if key in defaults and key in opts:
            merged[key] = {**defaults[key], **opts[key]}
    # FeO + Fe2O3 in a sample's melt set its Fe3+/FeT; a default fe3 does not apply
    melt = opts.get("melt", {})
    if "fe3" in defaults and "fe3" not in opts and any(
        str(k).strip().lower() in ("fe2o3", "fe203") for k in melt
    ):
        del merged["fe3"]
    return merged


def _split(options: Mapping[str, Any]) -> tuple[dict, dict, dict]:
    read = {READ_OPTIONS[k][0]: v for k, v in options.items() if k in READ_OPTIONS}
    fit = {FIT_OPTIONS[k][0]: v for k, v in options.items() if k in FIT_OPTIONS}
    out = {OUTPUT_OPTIONS[k][0]: v for k, v in options.items() if k in OUTPUT_OPTIONS}
    return read, fit, out


def _make_job(name: str, file: Path, traverse: str, options: Mapping[str, Any],
              problem: str = "", files: tuple[Path, ...] = ()) -> SampleJob:
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
        figure_format=tuple(out.get("figure_format", ("png", "pdf"))),
        figure_style=out.get("figure_style", "thesis"),
        problem=problem,
        files=tuple(str(f) for f in files),
        joint=is_joint,
        joint_options=joint,
    )


def _project_file_problem(given: str, base: Path, allow_outside: bool) -> tuple[Path, str]:
    """Resolve a project ``file`` entry; say why it cannot be used ("" when it can).

    Paths are taken relative to the project folder and must stay inside it
    (after following links) unless ``allow_outside``; a file of a type that
    is not an export is refused without being opened.
    """
    raw = Path(given).expanduser()
    file = (base / raw).resolve()
    if not allow_outside:
        if raw.is_absolute():
            return file, (
                f"file {given!r} is an absolute path; project paths are taken relative to "
                f"the project folder {str(base)!r} and must stay inside it. Move the export "
                "into the project folder, or run with --allow-outside-paths.")
        if file != base and base not in file.parents:
            return file, (
                f"file {given!r} points outside the project folder {str(base)!r} "
                f"(to {str(file)!r}); it was not read. Move the export into the project "
                "folder, or run with --allow-outside-paths.")
    problem = input_problem(file)
    if problem.startswith("file not found"):
        problem = (f"file {given!r} not found ({str(file)!r}); paths are relative to the "
                   f"project file's folder {str(base)!r}.")
    if not problem and file.suffix.lower() not in EXPORT_SUFFIXES:
        problem = (f"file {given!r} is not an export (expected a file ending in "
                   f"{', '.join(EXPORT_SUFFIXES)}); it was not read.")
    return file, problem


def read_project(
    path: str | os.PathLike, *, overrides: Mapping[str, Any] | None = None,
    allow_outside_paths: bool = False,
) -> Project:
    """Read a TOML project file.

    Parameters
    ----------
    path : str or path-like
        The project file.
    overrides : mapping, optional
        Options that replace those of ``[defaults]`` (e.g. from the command
        line); sample tables still override them.
    allow_outside_paths : bool, optional
        Allow sample files given as absolute paths or outside the project
        file's folder (``--allow-outside-paths``). By default such a sample
        is a failed row and its file is never opened.

    Returns
    -------
    Project

    Raises
    ------
    ProjectError
        Unreadable TOML, unknown tables or options, missing ``file``. A
        sample file that does not exist, is a folder or lies outside the
        project folder does not stop the project: that sample carries the
        problem and the batch lists it as failed.
    """
    path = Path(path)
    problem = input_problem(path)
    if problem:
        raise ProjectError(f"project file: {problem}")
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
    _check_job_settings({FIT_OPTIONS[k][0]: v for k, v in defaults.items() if k in FIT_OPTIONS},
                        f"[defaults] of {str(path)!r}")
    if overrides:
        defaults = _merge(defaults, resolve_options(overrides, where="the command-line options"))
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
        paths, problem = [], ""
        for entry in listed:
            file, entry_problem = _project_file_problem(entry, base, allow_outside_paths)
            paths.append(file)
            problem = problem or entry_problem
        traverse = opts.pop("traverse", "")
        merged = _merge(defaults, opts)
        if len(paths) > 1 and not merged.get("joint", False):
            raise ProjectError(
                f"{where} lists several files but is not a joint sample; add joint = true to "
                "fit their crystals together, or give one sample table per file."
            )
        if not merged.get("joint", False) and any(
                k in opts for k in ("exclude", "joint_f_rim", "joint_retention")):
            raise ProjectError(
                f"{where} sets joint-fit options without joint = true; add joint = true.")
        _check_job_settings({FIT_OPTIONS[k][0]: v for k, v in merged.items() if k in FIT_OPTIONS},
                            where)
        jobs.append(_make_job(str(name), paths[0], traverse, merged, problem, tuple(paths)))
    jobs = [dataclasses.replace(j, project=str(path.resolve())) for j in jobs]
    return Project(path=str(path.resolve()), jobs=tuple(jobs), defaults=defaults)


def project_from_folder(folder: str | os.PathLike, options: Mapping[str, Any]) -> Project:
    """Make a project of every export in a folder (not its subfolders).

    Each traverse of each file becomes one sample, named after the traverse.
    A file that cannot be read (or is not a regular file, e.g. a named pipe,
    which is never opened) still becomes a sample, so that the batch lists
    it with its error. Files listed in the folder's ``.zoning-manifest.json``
    (outputs zoning wrote there) and hidden files are not inputs.

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
    from zoning.io.outputs import MANIFEST_NAME, PARTIAL_PREFIX, read_manifest

    opts = resolve_options(options, where="the command-line options")
    try:
        check_sampler_settings(opts.get("walkers"), opts.get("steps"), opts.get("seed"))
    except ZoningError as exc:
        raise ProjectError(str(exc)) from None
    # Files zoning wrote into this folder (listed in its manifest) are outputs,
    # never inputs: a rerun must not read its own summary.csv or summary.xlsx.
    ours = set((read_manifest(folder) or {}).get("files", {}))
    candidates = sorted(
        p for p in folder.iterdir()
        if p.suffix.lower() in EXPORT_SUFFIXES and not p.name.startswith(".")
        and p.name not in ours and not p.name.startswith(PARTIAL_PREFIX)
        and p.name != MANIFEST_NAME
    )
    files = [p for p in candidates if p.is_file() or not p.is_dir()]
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
        problem = input_problem(file)
        if problem:
            jobs.append(_make_job(file.stem, file, "", opts, problem))
            used.add(file.stem)
            continue
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
    jobs = [dataclasses.replace(j, project=str(folder)) for j in jobs]
    return Project(path=str(folder), jobs=tuple(jobs), defaults=opts)


def input_problem(path: str | os.PathLike) -> str:
    """Say why a path cannot be read as an export, without opening it.

    Parameters
    ----------
    path : str or path-like

    Returns
    -------
    str
        "" for a regular file; otherwise the problem in plain words (missing,
        a folder, a named pipe or device: never opened, so nothing hangs).
    """
    import stat as _stat

    path = Path(path)
    try:
        st = path.stat()
    except FileNotFoundError:
        return f"file not found: {str(path)!r}"
    except OSError as exc:
        return f"cannot read {str(path)!r}: {exc.strerror or exc}"
    if _stat.S_ISDIR(st.st_mode):
        return (f"{str(path)!r} is a folder, not an export file. Name the export itself "
                "(e.g. file = \"FRL-07_ol1.csv\"), or give the folder to zoning batch.")
    if not _stat.S_ISREG(st.st_mode):
        kind = "a named pipe (FIFO)" if _stat.S_ISFIFO(st.st_mode) else "not a regular file"
        return (f"{str(path)!r} is {kind}, not an export file; it was not opened. Save the "
                "export as an ordinary file and give that.")
    if not os.access(path, os.R_OK):
        return f"cannot read {str(path)!r}: permission denied"
    return ""


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

    if job.problem or input_problem(job.file):
        return ""
    h = hashlib.sha256()
    try:
        for f in job.files:
            with open(f, "rb") as handle:
                for block in iter(lambda: handle.read(1 << 20), b""):
                    h.update(block)
    except OSError:
        return ""
    h.update(json.dumps(job.settings(), sort_keys=True).encode())
    h.update(__version__.encode())
    return h.hexdigest()


#: Status of a sample in a batch, as written in the ``run_status`` column.
RUN_STATUSES = ("fitted", "unchanged", "failed", "not run")


@dataclass(frozen=True, eq=False)
class SampleOutcome:
    """What one sample of a batch produced.

    Parameters
    ----------
    name : str
        Sample name.
    status : {"fitted", "unchanged", "failed", "not run"}
        Fitted now; skipped because its fingerprint and every output hash
        matched; failed; or not run because the batch was interrupted.
    row : mapping
        Its row of ``summary.csv``.
    error : str
        The error message ("" unless failed).
    folder : str
        Its output folder ("" when it has none).
    seconds : float
        Wall time spent on it [s].
    note : str
        Why it was (re)fitted or not run, e.g. ``"fit.json was changed after
        it was written"`` (the ``run_note`` column).
    """

    name: str
    status: str
    row: Mapping[str, Any]
    error: str = ""
    folder: str = ""
    seconds: float = float("nan")
    note: str = ""


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
    notes : tuple of str
        What the batch repaired or wants the user to know (e.g. leftovers of
        a killed run cleaned up).
    """

    out_dir: str
    summary: pd.DataFrame
    outcomes: tuple[SampleOutcome, ...]
    seconds: float = float("nan")
    notes: tuple[str, ...] = ()

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

#: Files the batch writes into the output folder itself (besides sample folders).
BATCH_FILES = ("summary.csv", "summary.json", "summary.xlsx", "overview.png", "overview.pdf",
               "overview.svg")

#: Limits of the batch's parallelism: each worker holds a full Python with
#: numpy, scipy and matplotlib (about 200 MB).
MAX_WORKERS_PER_CORE = 4


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


def check_fittable(traverse, *, include_flagged: bool = False,
                   distance_range: tuple[float, float] | None = None,
                   radius_um: float | None = None) -> None:
    """Refuse, with the real reason, a traverse that cannot be fitted.

    Catches what would otherwise surface deep in the fit as a puzzling
    message: no usable spot, a single spot, or spots that all sit at the
    same distance from the core (positions missing, or all zero).

    Parameters
    ----------
    traverse : zoning.Traverse
    include_flagged : bool, optional
        As for :func:`zoning.fitting.fit_traverse`.
    distance_range : (float, float), optional
        Fitted range [µm].
    radius_um : float, optional
        Crystal radius given by the user [µm].

    Raises
    ------
    zoning.exceptions.FitError
    """
    from zoning.exceptions import FitError

    spots = traverse.spots
    usable = traverse.usable(include_flagged)
    d = usable["distance_um"].to_numpy(float)
    d = d[np.isfinite(d)]
    if distance_range is not None:
        d = d[(d >= distance_range[0]) & (d <= distance_range[1])]
    name = traverse.name
    n_flagged = int((spots["status"] != "ok").sum())
    if d.size == 0:
        why = (f"all {len(spots)} spots are flagged (see zoning inspect for the reasons; "
               "--include-flagged fits them anyway)" if n_flagged == len(spots) and len(spots)
               else "no spot has a usable position and composition")
        if distance_range is not None:
            why += f", or none lies in --range {distance_range[0]:g}:{distance_range[1]:g}"
        raise FitError(f"traverse {name!r} cannot be fitted: {why}.")
    position = spots["position_um"].to_numpy(float)
    if len(spots) > 1 and np.isfinite(position).all() and np.ptp(position) == 0:
        raise FitError(
            f"traverse {name!r} cannot be fitted: all {len(spots)} spots have the same position "
            f"({position[0]:g} µm), so there is no profile. Check the distance or stage X/Y "
            "columns (--column-map distance_um=<header>, project key column_map)."
        )
    if d.size < 3:
        raise FitError(
            f"traverse {name!r} cannot be fitted: only {d.size} usable spot"
            f"{'s' if d.size != 1 else ''} (at {', '.join(f'{v:g}' for v in d)} µm from the "
            "core); a zoning profile needs at least 3 spots at different distances. Check "
            "the flagged spots (zoning inspect) and --range."
        )
    if np.ptp(d) == 0 and radius_um is None:
        raise FitError(
            f"traverse {name!r} cannot be fitted: all {d.size} usable spots lie at the same "
            f"distance from the core ({d[0]:g} µm), so there is no profile. The positions are "
            "probably missing or all equal: check the distance or stage X/Y columns "
            "(--column-map distance_um=<header>) and the core position (--core-um)."
        )


def run_sample(
    job: SampleJob, out_dir: str | os.PathLike, fp: str = "", folder_name: str = ""
) -> SampleOutcome:
    """Read, fit and write one sample; never raises for a bad sample.

    The sample folder ``out_dir/<safe name>/`` is built in a hidden build
    folder, sealed with a manifest (every file with its SHA-256) and moved
    into place file by file (:func:`zoning.io.outputs.install_folder`), so
    it is either complete or recognisably incomplete, and nothing in it that
    zoning did not write is touched. It holds ``fit.json``, ``profile.csv``
    (+ ``profile.json``), the figures (PNG and PDF), ``report.pdf``,
    ``fingerprint.json`` and ``.zoning-manifest.json``.

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
    from zoning.io.outputs import _remove_build, install_folder, make_build_folder, seal_folder
    from zoning.io.writers import write_json

    t0 = time.perf_counter()
    out_dir = Path(out_dir)
    folder = out_dir / (folder_name or _sample_dir_name(job.name))
    problem = job.problem or input_problem(job.file)
    if problem:
        return SampleOutcome(job.name, "failed", _failed_row(job, problem), problem, "",
                             time.perf_counter() - t0)
    fp = fp or fingerprint(job)
    build = None
    try:
        build = make_build_folder(out_dir, folder.name)
        with warnings.catch_warnings(record=True) as caught:
            warnings.simplefilter("always")
            row, result = _fit_and_write(job, build)
        # Warnings the result states already (a fit warns "traverse 'X': <text>" and keeps
        # <text> in result.warnings) are not repeated as batch warnings: once per traverse.
        extra = [_warning_text(w) for w in caught
                 if not any(text and text in str(w.message) for text in result.warnings)]
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
        write_json(build / _FINGERPRINT_FILE, record)
        seal_folder(build, kind="sample", extra={"fingerprint": fp, "sample": job.name})
        from zoning._pool import critical

        with critical():
            install_folder(build, folder)
        return SampleOutcome(job.name, "fitted", row, "", str(folder), time.perf_counter() - t0)
    except (ZoningError, OSError, ValueError) as exc:
        msg = _error_text(exc, job)
    except MemoryError:
        msg = "out of memory while fitting this sample; run it alone or with fewer workers"
    except Exception as exc:  # noqa: BLE001 - one failed fit never stops the batch
        tb = traceback.extract_tb(exc.__traceback__)
        where = f" at {Path(tb[-1].filename).name}:{tb[-1].lineno}" if tb else ""
        msg = f"unexpected {type(exc).__name__}{where}: {exc}. Please report this."
    except BaseException:
        if build is not None:
            _remove_build(build)
        raise
    if build is not None:
        _remove_build(build)
    return SampleOutcome(
        job.name, "failed", _failed_row(job, msg), msg, "", time.perf_counter() - t0
    )


def _warning_text(w: warnings.WarningMessage) -> str:
    """Return a library warning as one plain line (no file name, no line number)."""
    from zoning.exceptions import ZoningWarning

    text = str(w.message)
    if issubclass(w.category, ZoningWarning):
        return text
    module = getattr(w, "filename", "") or ""
    source = "numpy" if "numpy" in module else ("scipy" if "scipy" in module else "a library")
    return f"{source} reported: {text}"


#: Phrases of reader errors that quote lines of a file that is not an export.
_NOT_AN_EXPORT = ("no header line found",)


def _error_text(exc: BaseException, job: SampleJob | None = None) -> str:
    if isinstance(exc, FileNotFoundError):
        return f"file not found: {exc.filename}"
    text = str(exc) if isinstance(exc, ZoningError) else f"{type(exc).__name__}: {exc}"
    if job is not None and (getattr(exc, "not_an_export", False)
                            or any(p in text for p in _NOT_AN_EXPORT)):
        # Never copy lines of a file that is not an export into the outputs.
        return (f"{job.file!r} is not a readable microprobe export: no header line with "
                "recognised column names (SiO2, MgO, FeO, Point, Distance, ...). Run zoning "
                "inspect on it to see what was read, or name the columns with --column-map "
                "(project key column_map).")
    return text


def _fit_and_write(job: SampleJob, build: Path):
    """Fit one sample and write its files into ``build`` (an empty folder of ours).

    Any file written into ``build`` before it is sealed becomes part of the
    sample's result (listed with its hash in the manifest).
    """
    from zoning.fitting import fit_traverse
    from zoning.io.results import summary_table, write_fit_json, write_profile_csv

    if job.joint:
        return _fit_and_write_joint(job, build)
    traverse = _select_traverse(job)
    check_fittable(traverse, include_flagged=bool(job.fit_options.get("include_flagged")),
                   distance_range=job.fit_options.get("distance_range"),
                   radius_um=job.fit_options.get("radius_um"))
    result = _with_project_entry(fit_traverse(traverse, **job.fit_options), job)
    write_fit_json(result, build / "fit.json")
    write_profile_csv(result, build / "profile.csv")
    if job.figures or job.report:
        from zoning.io.figures import write_sample_graphics

        write_sample_graphics(result, build, figures=job.figures, report=job.report,
                              formats=job.figure_format, style=job.figure_style)
    row = summary_table([result]).iloc[0].to_dict()
    row["sample"] = job.name
    return row, result


def _with_project_entry(result, job: SampleJob):
    """Record in ``result.settings["project_entry"]`` the project entry that reproduces it."""
    entry = {"sample": job.name, "file": job.file}
    if job.project:
        entry["project"] = job.project
    if job.traverse:
        entry["traverse"] = job.traverse
    return dataclasses.replace(result, settings={**result.settings, "project_entry": entry})


def _fit_and_write_joint(job: SampleJob, build: Path):
    """Fit every traverse of the sample's files as one sample (joint fit)."""
    from zoning.fitting import fit_sample
    from zoning.io.joint_results import sample_summary_table, write_sample_files

    read_traverses = _reader()
    traverses = [t for f in job.files for t in read_traverses(f, **job.read_options)]
    if job.traverse:
        traverses = [t for t in traverses if t.name == job.traverse] or traverses
    kw = dict(job.fit_options)
    # Joint fits fit the section offset and the diffusion length (per crystal)
    # when asked, but not the redox setting of single fits.
    kw.pop("delta_qfm", None)
    if "n_walkers" in kw:
        kw["n_chains"] = kw.pop("n_walkers")
    if "n_steps" in kw:
        kw["n_sweeps"] = kw.pop("n_steps")
    result = _with_project_entry(fit_sample(traverses, name=job.name, **kw,
                                            **job.joint_options), job)
    write_sample_files(result, build, figures=job.figures, report=job.report,
                       figure_format=job.figure_format, figure_style=job.figure_style)
    row = sample_summary_table([result]).iloc[0].to_dict()
    row["sample"] = job.name
    return row, result


def _stored(folder: Path) -> dict[str, Any] | None:
    try:
        data = json.loads((folder / _FINGERPRINT_FILE).read_text(encoding="utf-8"))
    except (OSError, ValueError):
        return None
    return data if isinstance(data, dict) else None


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
        try:
            if self.tty:
                end = "\n" if self.done >= self.total else ""
                self.stream.write("\r\x1b[2K" + line + end)
            else:
                self.stream.write(line + "\n")
            self.stream.flush()
        except (BrokenPipeError, OSError, ValueError):
            self.stream = None
            self.update = lambda *a, **k: None  # the terminal went away: go on quietly


def _ignore_sigint() -> None:  # pragma: no cover - runs in worker processes
    signal.signal(signal.SIGINT, signal.SIG_IGN)


#: Signals that stop a batch cleanly (those that exist on this platform).
_STOP_SIGNALS = tuple(getattr(signal, n) for n in ("SIGINT", "SIGTERM", "SIGHUP")
                      if hasattr(signal, n))


class _Signals:
    """Turn SIGINT/SIGTERM/SIGHUP into :class:`~zoning.exceptions.Interrupted` (main thread)."""

    def __init__(self):
        self.saved: dict[int, Any] = {}
        self.pending: list[int] = []

    def _raise(self, signum, frame):
        from zoning._pool import defer_if_critical
        from zoning.exceptions import Interrupted

        if defer_if_critical(self._raise, signum):
            return
        raise Interrupted(signum)

    def _defer(self, signum, frame):
        self.pending.append(signum)

    def __enter__(self):
        import threading

        if threading.current_thread() is threading.main_thread():
            for s in _STOP_SIGNALS:
                try:
                    self.saved[s] = signal.signal(s, self._raise)
                except (OSError, ValueError):  # pragma: no cover
                    pass
        return self

    def hold(self) -> None:
        """While cleaning up: note further signals instead of raising."""
        for s in self.saved:
            signal.signal(s, self._defer)

    def __exit__(self, *exc):
        for s, handler in self.saved.items():
            signal.signal(s, handler)


def _legacy_batch_files(out: Path) -> list[str]:
    """Batch files of a folder written by zoning 0.1.0 (summary.csv began with '# project: ')."""
    try:
        with open(out / "summary.csv", "rb") as handle:
            head = handle.read(11)
    except OSError:
        return []
    if head != b"# project: ":
        return []
    return [n for n in ("summary.csv", "summary.xlsx", "overview.png", "overview.pdf")
            if (out / n).is_file() and not (out / n).is_symlink()]


def _check_targets(out: Path, folders: Mapping[str, Path], inputs: set[str],
                   root, *, folder_mode: str = "", beside_inputs: bool = False) -> None:
    """Refuse, before any work, outputs that would replace what is not ours or read our own."""
    from zoning.io.outputs import LOCK_NAME, MANIFEST_NAME, folder_state, read_manifest

    clash: list[str] = []
    if folder_mode and not beside_inputs and Path(folder_mode).resolve() == out.resolve():
        raise ProjectError(
            f"--out {str(out)!r} is the folder the exports are read from; the outputs would "
            "mix with the inputs. Give another folder (the default is a 'results' folder "
            "inside it), or add --out-beside-inputs to write there anyway."
        )
    batch = [*BATCH_FILES, LOCK_NAME]
    for f in [*(str(out / n) for n in batch), *(str(p) for p in folders.values())]:
        if str(Path(f).resolve()) in inputs:
            raise ProjectError(
                f"output {f!r} would overwrite an input file of the project. "
                "Choose another --out folder."
            )
    for f in folders.values():
        if any(f in Path(i).parents or f.resolve() in Path(i).parents for i in inputs):
            raise ProjectError(
                f"output {str(f)!r} would overwrite an input file of the project "
                "(an input lies inside it). Choose another --out folder."
            )
    for i in inputs:
        ip = Path(i)
        if out.resolve() in ip.parents:
            rel = ip.relative_to(out.resolve()).parts
            manifest = read_manifest(ip.parent)
            if rel and (rel[0] in {p.name for p in folders.values()}
                        or (manifest is not None and ip.relative_to(ip.parent).as_posix()
                            in manifest["files"])):
                raise ProjectError(
                    f"input {i!r} is an output of zoning in this --out folder; the batch "
                    "never reads its own outputs. Point the project at the original export."
                )
    clash += root.foreign(BATCH_FILES)  # the lock file is checked when it is taken
    for name, f in folders.items():
        state = folder_state(f, legacy_sample=True)
        if state in ("absent", "empty"):
            continue
        manifest = read_manifest(f)
        if state == "ours" and (manifest is None or manifest.get("kind") == "sample"):
            continue
        detail = "a file or link" if state == "file" else "a folder zoning did not create"
        if state == "ours":
            detail = f"a {manifest.get('kind')} folder of zoning, not a batch sample folder"
        try:
            held = sorted(p.name for p in f.iterdir() if p.name != MANIFEST_NAME)[:3]
        except OSError:
            held = []
        holds = f" (it holds {', '.join(held)})" if held and state != "file" else ""
        clash.append(f"{f.name!r} (for sample {name!r}) is {detail}{holds}")
    if clash:
        shown = "; ".join(c if " " in c else repr(c) for c in clash[:5])
        more = f"; and {len(clash) - 5} more" if len(clash) > 5 else ""
        raise OutputRefusedError(
            f"refusing to write into {str(out)!r}: {shown}{more}. zoning replaces only files "
            "and folders it wrote itself (listed in a .zoning-manifest.json). Nothing was "
            "written or deleted. Choose another --out folder (e.g. --out results), or move "
            "those away."
        )


def run_batch(
    project: Project,
    out_dir: str | os.PathLike,
    *,
    executor: cf.Executor | None = None,
    workers: int | None = None,
    progress: bool | Any = True,
    force: bool = False,
    wait: float = 0.0,
    beside_inputs: bool = False,
) -> BatchResult:
    """Fit every sample of a project and write the batch outputs.

    What the batch writes, what it never touches and what happens when it
    is interrupted is listed in the README ("What zoning batch guarantees").

    Parameters
    ----------
    project : Project
        From :func:`read_project` or :func:`project_from_folder`.
    out_dir : str or path-like
        Output folder (created). Holds ``summary.csv`` (+ ``summary.json``,
        its provenance), ``summary.xlsx`` (if openpyxl is installed),
        ``overview.png``/``overview.pdf``, one folder per sample, a manifest
        and a lock file.
    executor : concurrent.futures.Executor, optional
        Where to run the samples (e.g. a Dask ``Client.get_executor()``).
        Not shut down by this function. Default: worker processes
        (:mod:`zoning._pool`), or the calling process when ``workers == 1``.
    workers : int, optional
        Worker processes (default ``os.cpu_count()``).
    progress : bool or stream, optional
        Progress bar on stderr (True), on the given stream, or none (False).
    force : bool, optional
        Refit every sample even if nothing changed (never deletes files
        zoning did not write).
    wait : float, optional
        Seconds to wait for another batch writing into the same folder
        (default 0: refuse at once, naming it).
    beside_inputs : bool, optional
        Allow ``out_dir`` to be the folder the exports of a folder project
        are read from.

    Returns
    -------
    BatchResult

    Raises
    ------
    zoning.exceptions.Interrupted
        On SIGINT (Ctrl-C), SIGTERM or SIGHUP, after stopping the workers and
        writing a summary that says which samples were not run; finished
        samples are kept, nothing is half-written. A subclass of
        KeyboardInterrupt.
    zoning.exceptions.OutputRefusedError
        Before any fit, when an output would replace a file or folder zoning
        did not write, or ``out_dir`` cannot be written.
    zoning.exceptions.OutputLockedError
        When another batch is writing into ``out_dir``.
    ProjectError
        When an output would overwrite an input file, or ``out_dir`` is the
        input folder of a folder project.
    """
    from zoning.io.outputs import (
        LOCK_NAME,
        OutputFolder,
        OutputLock,
        check_output_dir,
        clean_partials,
        folder_state,
        read_manifest,
        verify_folder,
    )
    from zoning.io.writers import unique_names

    t0 = time.perf_counter()
    out = check_output_dir(out_dir).resolve()
    inputs = {str(Path(f).resolve()) for f in project.input_files}
    if str(out) in inputs:
        raise ProjectError(
            f"output folder {str(out)!r} is an input file. Choose another --out folder."
        )
    names = [j.name for j in project.jobs]
    dup = sorted({n for n in names if names.count(n) > 1})
    if dup:
        raise ProjectError(f"sample name {dup[0]!r} is used twice; give each sample its own name.")
    folders = {
        name: out / folder for name, folder in zip(names, unique_names(names), strict=True)
    }
    folder_mode = project.path if Path(project.path).is_dir() else ""

    def make_root() -> OutputFolder:
        root = OutputFolder(out, kind="batch")
        if not root.files:
            for n in _legacy_batch_files(out):
                root.files[n] = {"sha256": None, "bytes": None}
        return root

    # Read-only checks first: a refusal leaves the folder exactly as it was.
    _check_targets(out, folders, inputs, make_root(), folder_mode=folder_mode,
                   beside_inputs=beside_inputs)
    out.mkdir(parents=True, exist_ok=True)
    lock = OutputLock(out, wait=wait).acquire()
    notes: list[str] = []
    state = "stopped"
    try:
        root = make_root()
        _check_targets(out, folders, inputs, root, folder_mode=folder_mode,
                       beside_inputs=beside_inputs)
        root.files.setdefault(LOCK_NAME, {"sha256": None, "bytes": None})
        root.claim(BATCH_FILES)
        removed = clean_partials(out)
        if lock.previous_unfinished:
            prev = lock.previous
            notes.append(
                f"the previous batch in this folder (pid {prev.get('pid', '?')}, started "
                f"{prev.get('started_utc', '?')}) stopped without finishing; "
                f"{len(removed)} unfinished sample folder(s) were cleaned up and the summary "
                "is rebuilt from what is on disk"
            )
        result = _run_batch_locked(project, out, folders, root, lock, executor=executor,
                                   workers=workers, progress=progress, force=force,
                                   inputs=inputs, notes=notes, t0=t0,
                                   verify=verify_folder, folder_state=folder_state,
                                   read_manifest=read_manifest)
        state = "finished"
        return result
    except KeyboardInterrupt:
        state = "interrupted"
        raise
    finally:
        lock.release(state)


def _decide(job: SampleJob, fp: str, folder: Path, force: bool, verify, read_manifest
            ) -> tuple[SampleOutcome | None, str]:
    """Return (unchanged outcome, "") or (None, why it is (re)fitted)."""
    if not folder.exists():
        return None, ""
    stored = _stored(folder)
    manifest = read_manifest(folder)
    if force:
        return None, "refitted on request (--force)"
    if not fp:
        return None, ""
    recorded = (manifest or {}).get("fingerprint") or (stored or {}).get("fingerprint")
    if recorded != fp:
        return None, "refitted: the input file, the settings or the zoning version changed"
    problem = verify(folder)
    if problem:
        return None, f"refitted: {problem}"
    if not stored or stored.get("status") != "fitted":
        return None, "refitted: fingerprint.json is unreadable"
    return SampleOutcome(job.name, "unchanged", stored.get("row", {}), "", str(folder), 0.0,
                         "unchanged: input, settings and every output file match their "
                         "recorded hashes"), ""


def _run_batch_locked(project, out, folders, root, lock, *, executor, workers, progress,
                      force, inputs, notes, t0, verify, folder_state, read_manifest):
    bar = None
    if progress:
        bar = _Progress(len(project.jobs), stream=None if progress is True else progress)

    outcomes: dict[str, SampleOutcome] = {}
    todo: list[tuple[SampleJob, str]] = []
    why: dict[str, str] = {}
    for job in project.jobs:
        fp = fingerprint(job)
        unchanged, reason = _decide(job, fp, folders[job.name], force, verify, read_manifest)
        if unchanged is not None:
            outcomes[job.name] = unchanged
        else:
            todo.append((job, fp))
            why[job.name] = reason
    skipped = len(outcomes)
    if bar is not None:
        for name in [j.name for j in project.jobs if j.name in outcomes]:
            bar.update(name, "unchanged", skipped=skipped)

    run_info = {"pid": os.getpid(), "started_utc": lock.record.get("started_utc", "")}
    last_write = [0.0]

    def interim(force_write: bool = False) -> None:
        now = time.monotonic()
        if force_write or now - last_write[0] >= 1.0:
            _write_tables(project, out, outcomes, folders, inputs, root, state="running",
                          run_info=run_info, why=why)
            last_write[0] = now

    def record(outcome: SampleOutcome) -> None:
        if outcome.status == "fitted" and why.get(outcome.name):
            outcome = SampleOutcome(outcome.name, outcome.status, outcome.row, outcome.error,
                                    outcome.folder, outcome.seconds, why[outcome.name])
        outcomes[outcome.name] = outcome
        if bar is not None:
            bar.update(outcome.name, outcome.status, skipped=skipped)
        interim()

    interim(force_write=True)
    n_workers = workers if workers is not None else (os.cpu_count() or 1)
    signals = _Signals()
    try:
        with signals:
            if todo and executor is None and (n_workers <= 1 or len(todo) == 1):
                for job, fp in todo:
                    record(run_sample(job, out, fp, folders[job.name].name))
            elif todo and executor is None:
                _run_on_pool(todo, out, folders, min(n_workers, len(todo)), record, lock)
            elif todo:
                _run_on_executor(todo, out, folders, executor, record)
    except KeyboardInterrupt as exc:
        from zoning.exceptions import Interrupted

        signals.hold()
        signum = getattr(exc, "signum", signal.SIGINT)
        try:
            sig_name = signal.Signals(signum).name
        except ValueError:  # pragma: no cover
            sig_name = f"signal {signum}"
        from zoning.io.outputs import clean_partials

        clean_partials(out)
        _recover_finished(todo, folders, outcomes, why)
        for job, _fp in todo:
            if job.name not in outcomes:
                earlier = (" ; its folder still holds the earlier fit"
                           if folders[job.name].exists() else "")
                note = f"not run: the batch was stopped by {sig_name}{earlier}"
                outcomes[job.name] = SampleOutcome(
                    job.name, "not run", _failed_row(job, ""), "", "", math.nan, note)
        _write_tables(project, out, outcomes, folders, inputs, root,
                      state=f"interrupted by {sig_name}", run_info=run_info, why=why,
                      final=True)
        root.finish()
        signals.__exit__(None, None, None)
        raise Interrupted(signum) from None

    summary = _write_tables(project, out, outcomes, folders, inputs, root, state="complete",
                            run_info=run_info, why=why, final=True)
    root.finish()
    ordered = tuple(outcomes[j.name] for j in project.jobs if j.name in outcomes)
    return BatchResult(str(out), summary, ordered, time.perf_counter() - t0, tuple(notes))


def _lost(job: SampleJob, message: str) -> SampleOutcome:
    msg = f"{message}; only this sample was lost, the batch went on"
    return SampleOutcome(job.name, "failed", _failed_row(job, msg), msg)


def _run_on_pool(todo, out, folders, n_workers, record, lock) -> None:
    from zoning._pool import WorkerLost, WorkerPool

    jobs = {job.name: job for job, _ in todo}
    pool = WorkerPool(n_workers, on_start=lock.set_workers)

    def on_result(key, result):
        job = jobs[key]
        if isinstance(result, SampleOutcome):
            record(result)
        elif isinstance(result, WorkerLost):
            record(_lost(job, result.message))
        else:
            msg = f"worker failed: {getattr(result, 'text', result)}"
            record(SampleOutcome(job.name, "failed", _failed_row(job, msg), msg))

    tasks = [(job.name, run_sample, (job, str(out), fp, folders[job.name].name))
             for job, fp in todo]
    try:
        pool.run(tasks, on_result)
    finally:
        pool.close()


def _run_on_executor(todo, out, folders, executor, record) -> None:
    futures: dict[cf.Future, SampleJob] = {}
    try:
        for job, fp in todo:
            futures[executor.submit(run_sample, job, str(out), fp, folders[job.name].name)] = job
        for fut in cf.as_completed(futures):
            job = futures[fut]
            try:
                record(fut.result())
            except Exception as exc:  # noqa: BLE001 - a lost worker fails one sample only
                msg = f"worker failed: {type(exc).__name__}: {exc}"
                record(SampleOutcome(job.name, "failed", _failed_row(job, msg), msg))
    except BaseException:
        for fut in futures:
            fut.cancel()
        raise


def _recover_finished(todo, folders, outcomes: dict, why: Mapping[str, str]) -> None:
    """Add samples that finished on disk but whose result never reached us (interrupted)."""
    from zoning.io.outputs import read_manifest, verify_folder

    for job, fp in todo:
        if job.name in outcomes:
            continue
        folder = folders[job.name]
        stored = _stored(folder)
        manifest = read_manifest(folder) or {}
        if (fp and stored and manifest.get("fingerprint") == fp
                and stored.get("status") == "fitted" and not verify_folder(folder)):
            outcomes[job.name] = SampleOutcome(job.name, "fitted", stored.get("row", {}), "",
                                               str(folder), math.nan, why.get(job.name, ""))


def _summary_frame(project: Project, outcomes: Mapping[str, SampleOutcome],
                   why: Mapping[str, str] | None = None) -> pd.DataFrame:
    """Rows in project order; columns in the order of ``zoning fit``, then run status, file, error.

    Samples without an outcome yet are rows with ``run_status`` "pending".
    """
    from zoning.io.results import ORIENTATION_COLUMNS, SUMMARY_QUANTITIES, SUMMARY_TAIL

    why = why or {}
    rows = []
    for j in project.jobs:
        o = outcomes.get(j.name)
        if o is None:
            row = _failed_row(j, "")
            row["run_status"] = "pending"
            row["run_note"] = why.get(j.name) or "to be fitted in the run in progress"
        else:
            row = {k: v for k, v in dict(o.row).items() if k not in ("run_status", "run_note")}
            row["run_status"] = o.status
            row["run_note"] = o.note or ("" if o.status != "failed" else "failed: see error")
        rows.append(row)
    df = pd.DataFrame(rows)
    if df.empty:
        return pd.DataFrame(columns=["sample", "run_status", "run_note", "file", "error"])
    for col in ("file", "error"):
        if col not in df:
            df[col] = ""
        df[col] = df[col].fillna("")
    for col in ("n_spots", "n_used", "n_crystals", "n_antecrysts"):
        # Counts stay integers when some rows lack them (failed samples, or
        # single fits beside joint samples): nullable integers, blank when absent.
        if col in df:
            df[col] = pd.array(
                [None if v is None or (isinstance(v, float) and not math.isfinite(v))
                 else int(v) for v in df[col].tolist()], dtype="Int64")
    order = ["sample", "mineral", "n_spots", "n_used", *ORIENTATION_COLUMNS]
    for q in SUMMARY_QUANTITIES:
        order += [q, f"{q}_lo95", f"{q}_hi95", f"{q}_constrained"]
    order += list(SUMMARY_TAIL)
    tail = ["batch_warnings", "run_status", "run_note", "file", "error"]
    known = [c for c in order if c in df.columns]
    other = [c for c in df.columns if c not in known and c not in tail]
    return df[known + other + [c for c in tail if c in df.columns]]


def _write_tables(project: Project, out: Path, outcomes: Mapping[str, SampleOutcome], folders,
                  inputs: Iterable[str], root, *, state: str, run_info: Mapping[str, Any],
                  why: Mapping[str, str], final: bool = False) -> pd.DataFrame:
    """Write summary.csv (+ its sidecar); with ``final`` also summary.xlsx and the overview."""
    from zoning.io.results import band_digits
    from zoning.io.writers import write_table

    df = _summary_frame(project, outcomes, why)
    counts = {s: sum(o.status == s for o in outcomes.values()) for s in RUN_STATUSES}
    counts["pending"] = len(project.jobs) - len(outcomes)
    provenance = {
        "content": "one row per sample of the batch: best values and 95% bands, run status",
        "project": project.path,
        "state": state,
        "run": dict(run_info),
        "counts": counts,
        "samples": {j.name: {"folder": folders[j.name].name, "file": j.file,
                             **({"files": list(j.files)} if j.joint else {}),
                             "settings": j.settings()} for j in project.jobs},
        "units": "melt Mg#/Ca# as molar fractions; MgO/CaO in wt%; F and r in [0, 1]",
    }
    protect = tuple(inputs)
    write_table(df, out / "summary.csv", provenance=provenance, digits=band_digits(df.columns),
                protect=protect)
    root.record("summary.csv", "summary.json")
    _write_crystals_table(project, out, outcomes, provenance, protect, root)
    if final:
        if _write_xlsx(df, out / "summary.xlsx", protect=protect, provenance=provenance):
            root.record("summary.xlsx")
        shown = df[df["run_status"].isin(["fitted", "unchanged", "failed"])]
        if (shown["run_status"] != "failed").any():
            from zoning.io.figures import overview_figure, save_figure

            with warnings.catch_warnings():
                warnings.simplefilter("ignore")
                fig = overview_figure(shown.reset_index(drop=True),
                                      style=project.defaults.get("figure_style"))
            formats = project.defaults.get("figure_format")
            for path in save_figure(fig, out / "overview", formats=formats).values():
                root.record_path(path)
            import matplotlib.pyplot as plt

            plt.close(fig)
    return df


def _write_crystals_table(project, out, outcomes, provenance, protect, root) -> None:
    """Write ``crystals.csv``: the crystals of every joint sample, one row each."""
    from zoning.io.results import band_digits
    from zoning.io.writers import write_table

    tables = []
    for j in project.jobs:
        o = outcomes.get(j.name)
        if j.joint and o is not None and o.status != "failed" and o.folder:
            path = Path(o.folder) / "crystals.csv"
            if path.is_file():  # written by this run or an earlier one (unchanged)
                tables.append(pd.read_csv(path, keep_default_na=False, na_values=[""]))
    if not tables:
        return
    df = pd.concat(tables, ignore_index=True)
    meta = {**{k: v for k, v in provenance.items() if k != "counts"},
            "content": "one row per crystal of the joint samples of the batch: verdict, "
                       "own quantities with 95% bands, consistency test"}
    write_table(df, out / "crystals.csv", provenance=meta, digits=band_digits(df.columns),
                protect=protect)
    root.record("crystals.csv", "crystals.json")


def _write_xlsx(df: pd.DataFrame, path: Path, protect: Iterable[str] = (),
                provenance: Mapping[str, Any] | None = None) -> bool:
    """Write ``summary.xlsx`` (units row, number formats, provenance sheet) atomically."""
    try:
        import openpyxl  # noqa: F401
    except ImportError:  # pragma: no cover - optional extra
        return False
    if str(path.resolve()) in {str(Path(p).resolve()) for p in protect}:
        raise ProjectError(f"refusing to overwrite input file {str(path)!r}; choose another --out.")
    from zoning.io.results import band_digits, summary_number_formats, summary_units
    from zoning.io.writers import write_xlsx

    write_xlsx(df, path, units=summary_units(df.columns),
               number_formats=summary_number_formats(df.columns), provenance=provenance,
               digits=band_digits(df.columns), protect=protect)
    return True
