"""Write fit results: ``summary.csv``, ``<traverse>/fit.json``, ``<traverse>/profile.csv``.

The functions read a :class:`zoning.fitting.FitResult` by attribute (duck
typing); this module does not import :mod:`zoning.fitting`. Files are
written through :mod:`zoning.io.writers` (atomic, safe to open in a
spreadsheet, safe folder names).
"""

from __future__ import annotations

import math
import os
import textwrap
from collections.abc import Iterable, Sequence
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd
from zoning.io.writers import (
    BAND_DIGITS,
    unique_names,
    write_json,
    write_table,
)

__all__ = [
    "summary_table",
    "band_digits",
    "fit_output_names",
    "fit_to_dict",
    "write_fit_json",
    "write_profile_csv",
    "write_fit_outputs",
    "format_report",
    "SUMMARY_QUANTITIES",
    "SUMMARY_TAIL",
    "CAUTIONS",
    "QUANTITY_UNITS",
    "summary_units",
    "summary_number_formats",
]

#: Quantities of the summary table, in column order (the mineral decides
#: which of the melt ratio / melt oxide pairs are filled).
SUMMARY_QUANTITIES = (
    "melt_mg_number",
    "melt_ca_number",
    "f_rim",
    "retention",
    "kd",
    "melt_mgo_wt",
    "melt_cao_wt",
    "section_h_over_r",
    "diffusion_length_um",
    "diffusion_time_days",
)

#: Columns of the summary table after the quantities, in order.
SUMMARY_TAIL = ("reduced_chi_square", "preferred_model", "delta_bic", "warnings")

_RATIO = {"olivine": "melt_mg_number", "plagioclase": "melt_ca_number"}
_OXIDE = {"olivine": "melt_mgo_wt", "plagioclase": "melt_cao_wt"}

#: Plain statement of the model assumptions printed with every report.
CAUTIONS = (
    "Assumes each zone grew in surface equilibrium with the melt. An off-centre section and "
    "diffusion after growth (olivine; plagioclase only through MgO/SrO) are fitted as "
    "processes unless fixed, and trade off with r when the data cannot tell them apart; "
    "every number depends on the chosen Kd and reference melt."
)

_LABELS = {
    "melt_mg_number": "parent melt Mg#",
    "melt_ca_number": "parent melt Ca#",
    "melt_mgo_wt": "parent melt MgO",
    "melt_cao_wt": "parent melt CaO",
    "f_rim": "F at the rim",
    "f_core": "F at the core",
    "retention": "retention r",
    "kd": "Kd",
    "growth_exponent": "growth exponent",
    "core_offset_um": "core offset",
    "melt0_ni_ppm": "initial melt Ni",
    "melt0_sr_ppm": "initial melt Sr",
    "melt0_mgo_wt": "initial melt MgO (trace)",
    "temperature_c": "parent temperature",
    "section_h_over_r": "section offset h/R",
    "diffusion_length_um": "diffusion length",
    "diffusion_time_days": "diffusion time",
}


def _quantities(results: Sequence[Any]) -> list[str]:
    present = set()
    for r in results:
        present.update(r.estimates)
    return [q for q in SUMMARY_QUANTITIES if q in present]


#: Columns of the summary table on how the traverse was read, after ``n_used``.
ORIENTATION_COLUMNS = ("orientation", "orientation_confidence", "core_position_um")


def _orientation_fields(result: Any) -> dict[str, Any]:
    """Orientation, its confidence and the core position of the fitted traverse.

    Empty for results without one traverse (joint fits of several crystals
    give them per crystal in ``crystals.csv``).
    """
    t = getattr(result, "traverse", None)
    if t is None:
        return {"orientation": "", "orientation_confidence": "", "core_position_um": math.nan}
    return {
        "orientation": t.orientation,
        "orientation_confidence": t.orientation_confidence,
        "core_position_um": float(getattr(t, "core_position_um", math.nan)),
    }


def summary_table(results: Iterable[Any]) -> pd.DataFrame:
    """One row per fitted traverse: best values, 95% bands and verdicts.

    Parameters
    ----------
    results : iterable of FitResult
        Fit results (any mix of minerals).

    Returns
    -------
    pandas.DataFrame
        Columns ``sample``, ``mineral``, ``n_spots``, ``n_used``,
        ``orientation``, ``orientation_confidence`` ("confirmed" when given
        by the user, else "high" or "low" as decided from the file: see
        the README's "Orientation and core") and ``core_position_um``
        (stage position of the core on the traverse line [µm]); for each
        quantity of :data:`SUMMARY_QUANTITIES` present in any result:
        ``<name>`` (best value), ``<name>_lo95``, ``<name>_hi95``,
        ``<name>_constrained``; then ``reduced_chi_square``,
        ``preferred_model`` (a model of the comparison, "no clear
        preference" or "" when a reversal voids the fit), ``delta_bic``
        (BIC of the runner-up minus the best), ``warnings`` (``"; "``-joined). Quantities a
        result does not have are NaN (and empty for ``_constrained``).
    """
    results = list(results)
    quantities = _quantities(results)
    rows = []
    for r in results:
        row: dict[str, Any] = {
            "sample": r.sample,
            "mineral": r.mineral,
            "n_spots": int(r.n_spots),
            "n_used": int(r.n_used),
            **_orientation_fields(r),
        }
        for q in quantities:
            e = r.estimates.get(q)
            row[q] = float(e.best) if e is not None else math.nan
            row[f"{q}_lo95"] = float(e.lo95) if e is not None else math.nan
            row[f"{q}_hi95"] = float(e.hi95) if e is not None else math.nan
            row[f"{q}_constrained"] = bool(e.constrained) if e is not None else None
        row["reduced_chi_square"] = float(r.reduced_chi_square)
        row["preferred_model"] = r.preferred_model
        row["delta_bic"] = float(getattr(r, "delta_bic", math.nan))
        row["warnings"] = "; ".join(r.warnings)
        rows.append(row)
    columns = ["sample", "mineral", "n_spots", "n_used", *ORIENTATION_COLUMNS]
    for q in quantities:
        columns += [q, f"{q}_lo95", f"{q}_hi95", f"{q}_constrained"]
    columns += list(SUMMARY_TAIL)
    return pd.DataFrame(rows, columns=columns)


#: Float columns of the result tables written with :data:`BAND_DIGITS`
#: significant digits besides every ``<q>``, ``<q>_lo95``, ``<q>_hi95``.
_BAND_COLUMNS = ("reduced_chi_square", "delta_bic", "model", "residual",
                 "normalized_residual", "best", "lo95", "hi95")


def band_digits(columns: Iterable[Any]) -> dict[str, int]:
    """Significant digits of the estimate and band columns of a result table.

    Parameters
    ----------
    columns : iterable of str
        Column names of ``summary.csv`` or ``profile.csv``.

    Returns
    -------
    dict of str to int
        :data:`zoning.io.writers.BAND_DIGITS` for every best value and band
        (``<q>``, ``<q>_lo95``, ``<q>_hi95``, model curves and residuals);
        other columns keep the default of
        :func:`zoning.io.writers.write_table`.
    """
    columns = [str(c) for c in columns]
    bases = {c[: -len("_lo95")] for c in columns if c.endswith("_lo95")}
    bases |= {c[: -len("_hi95")] for c in columns if c.endswith("_hi95")}
    out = {}
    for c in columns:
        if (c in bases or c.endswith(("_lo95", "_hi95", "_model", "_residual"))
                or c in _BAND_COLUMNS):
            out[c] = BAND_DIGITS
    return out


def fit_to_dict(result: Any) -> dict[str, Any]:
    """Every number of one fit as plain data (the content of ``fit.json``).

    Parameters
    ----------
    result : FitResult

    Returns
    -------
    dict
        Sample, source, mineral, estimates, model comparison, chi-square,
        diagnostics, correlation matrix, reversals, residual runs, warnings,
        settings, versions and seed; ``methods``: every published method the
        result rests on (``role``, citation ``key`` of
        :data:`zoning.references.REFERENCES`, short ``citation``, ``detail``)
        and ``references``: the full reference of each key used.
        Posterior draws and the spot/curve tables are in ``profile.csv`` and
        not repeated here.
    """
    from zoning.references import cite

    methods = list(getattr(result, "methods", ()))
    keys = list(dict.fromkeys(m.key for m in methods if m.key))
    return {
        "sample": result.sample,
        "source": str(result.traverse.source),
        "mineral": result.mineral,
        "n_spots": int(result.n_spots),
        "n_used": int(result.n_used),
        **_orientation_fields(result),
        "orientation_basis": result.traverse.orientation_basis,
        "estimates": {
            name: {
                "unit": e.unit,
                "best": e.best,
                "median": e.median,
                "best_fit": float(getattr(e, "best_fit", float("nan"))),
                "lo95": e.lo95,
                "hi95": e.hi95,
                "lower": e.lower,
                "upper": e.upper,
                "constrained": bool(e.constrained),
                "note": e.note,
            }
            for name, e in result.estimates.items()
        },
        "chi_square": result.chi_square,
        "reduced_chi_square": result.reduced_chi_square,
        "preferred_model": result.preferred_model,
        "delta_bic": float(getattr(result, "delta_bic", math.nan)),
        "comparison": result.comparison,
        "parameter_names": list(result.parameter_names),
        "correlation": np.asarray(result.correlation),
        "diagnostics": dict(result.diagnostics),
        "reversals": result.reversals,
        "residual_runs": result.residual_runs,
        "warnings": list(result.warnings),
        "cautions": CAUTIONS,
        "settings": dict(result.settings),
        "versions": dict(result.versions),
        "seed": int(result.seed),
        "traverse_notes": list(result.traverse.notes),
        "methods": [m.as_dict() for m in methods],
        "references": {k: cite(k) for k in keys},
    }


def write_fit_json(result: Any, path: str | os.PathLike, *, protect=None) -> Path:
    """Write :func:`fit_to_dict` of one result as JSON (NaN written as null).

    Parameters
    ----------
    result : FitResult
    path : str or path-like
        Destination file.
    protect : iterable of path-like, optional
        Paths never to overwrite (the input files).

    Returns
    -------
    pathlib.Path
    """
    return write_json(path, fit_to_dict(result), protect=protect)


def write_profile_csv(result: Any, path: str | os.PathLike, *, protect=None) -> Path:
    """Write the per-spot table of one result (model, band, residual, status).

    Parameters
    ----------
    result : FitResult
    path : str or path-like
        Destination file.
    protect : iterable of path-like, optional
        Paths never to overwrite (the input files).

    Returns
    -------
    pathlib.Path
    """
    provenance = {
        "content": f"fitted profile of {result.sample} ({result.mineral}): every input spot "
                   "with observed and model Fo/An [mol%] (trace oxides [wt%]), 95% posterior "
                   "band of the model, residual, status and reason",
        "sample": result.sample,
        "source": str(result.traverse.source),
        "seed": int(result.seed),
        "settings": dict(result.settings),
        "versions": dict(result.versions),
    }
    return write_table(result.spots, path, provenance=provenance,
                       digits=band_digits(result.spots.columns), protect=protect)


def fit_output_names(samples: Iterable[str], *, figures: bool = False, report: bool = False,
                     figure_format=None) -> list[str]:
    """Relative paths :func:`write_fit_outputs` writes for these sample names.

    Parameters
    ----------
    samples : iterable of str
        Traverse names, in order.
    figures, report : bool, optional
        Whether the figures / ``report.pdf`` are written (default neither).
    figure_format : str or iterable of str, optional
        Figure file formats (default PNG and PDF).

    Returns
    -------
    list of str
        ``summary.csv``, ``summary.json`` and per traverse
        ``<folder>/fit.json``, ``<folder>/profile.csv``, ``<folder>/profile.json``
        and the figures and report (:func:`zoning.io.figures.graphics_names`).
    """
    graphics: list[str] = []
    if figures or report:
        from zoning.io.figures import graphics_names

        graphics = graphics_names(figures=figures, report=report, formats=figure_format)
    names = ["summary.csv", "summary.json"]
    for folder in unique_names(list(samples)):
        names += [f"{folder}/fit.json", f"{folder}/profile.csv", f"{folder}/profile.json"]
        names += [f"{folder}/{g}" for g in graphics]
    return names


def write_fit_outputs(
    results: Iterable[Any], out_dir: str | os.PathLike, *, protect=None, provenance=None,
    output=None, figures: bool = False, report: bool = False, figure_format=None,
    figure_style=None,
) -> list[Path]:
    """Write ``summary.csv`` and, per traverse, ``fit.json``, ``profile.csv``, figures, report.

    The folder gets a manifest (:mod:`zoning.io.outputs`); a file of the same
    name that zoning did not write is never replaced
    (:class:`~zoning.exceptions.OutputRefusedError`, before anything is
    written).

    Parameters
    ----------
    results : iterable of FitResult
        Results to write; each gets a folder named after its traverse
        (:func:`zoning.io.writers.unique_names`, safe on every system).
    out_dir : str or path-like
        Output folder (created if missing).
    protect : iterable of path-like, optional
        Paths never to overwrite (the input files of the run).
    provenance : mapping, optional
        Extra provenance for the sidecar of ``summary.csv`` (e.g. the source).
    output : zoning.io.outputs.OutputFolder, optional
        The folder object, when the caller already claimed the names.
    figures, report : bool, optional
        Per traverse, draw the figures / write ``report.pdf`` with
        :func:`zoning.io.figures.write_sample_graphics`, the writer of
        ``zoning batch`` (default neither).
    figure_format, figure_style : optional
        Figure file formats and preset (default PNG + PDF, ``"thesis"``).

    Returns
    -------
    list of pathlib.Path
        Every file written, summary first.
    """
    from zoning.io.outputs import OutputFolder

    results = list(results)
    folder = output if output is not None else OutputFolder(out_dir, kind="fit")
    names = fit_output_names([r.sample for r in results], figures=figures, report=report,
                             figure_format=figure_format)
    folder.claim(names)
    table = summary_table(results)
    meta = {"content": "one row per fitted traverse: best values and 95% bands",
            **dict(provenance or {})}
    written = [write_table(table, folder.path("summary.csv"), provenance=meta,
                           digits=band_digits(table.columns), protect=protect)]
    for r, sub in zip(results, unique_names([r.sample for r in results]), strict=True):
        written.append(write_fit_json(r, folder.path(f"{sub}/fit.json"), protect=protect))
        written.append(write_profile_csv(r, folder.path(f"{sub}/profile.csv"), protect=protect))
        if figures or report:
            from zoning.io.figures import write_sample_graphics

            written += write_sample_graphics(r, folder.path(sub), figures=figures,
                                             report=report, formats=figure_format,
                                             style=figure_style)
    folder.record(*names)
    folder.finish()
    return written


def _fmt(value: float, unit: str) -> str:
    if not np.isfinite(value):
        return "n/a"
    a = abs(value)
    if unit in ("°C", "ppm", "µm") or a >= 100:
        text = f"{value:.0f}"
    elif a >= 10:
        text = f"{value:.1f}"
    elif a >= 1:
        text = f"{value:.2f}"
    else:
        text = f"{value:.3f}"
    return text


def format_report(result: Any) -> str:
    """Readable plain-text report of one fit for the terminal.

    Parameters
    ----------
    result : FitResult

    Returns
    -------
    str
        Multi-line text: the traverse, each quantity with its best value and
        95% band (or a plain statement that the data do not constrain it),
        the model comparison, diagnostics and warnings, and the cautions of
        the model.
    """
    lines = []
    major = "Fo" if result.mineral == "olivine" else "An"
    lines.append(
        f"{result.sample} ({result.mineral}): {result.n_used} of {result.n_spots} spots "
        f"fitted, reduced chi-square {result.reduced_chi_square:.2f}"
    )
    t = result.traverse
    basis = f" ({t.orientation_basis})" if t.orientation_basis else ""
    lines.extend(textwrap.wrap(
        f"orientation {t.orientation}, confidence {t.orientation_confidence}{basis}",
        width=96, initial_indent="  ", subsequent_indent="    "))
    width = max(len(_LABELS.get(n, n)) for n in result.estimates) if result.estimates else 10
    for name, e in result.estimates.items():
        label = _LABELS.get(name, name).ljust(width)
        unit = "" if e.unit in ("1", "") else f" {e.unit}"
        band = f"[{_fmt(e.lo95, e.unit)}, {_fmt(e.hi95, e.unit)}]"
        if not e.constrained:
            text = f"  {label}  NOT CONSTRAINED (95% band {band}{unit})"
        else:
            text = f"  {label}  {_fmt(e.best, e.unit)}{unit}  95% band {band}"
        if e.note:
            text += f"  - {e.note}"
        lines.append(text)
    comp = result.comparison
    if len(comp):
        parts = ", ".join(
            f"{m} BIC {b:.1f}" for m, b in zip(comp["model"], comp["bic"], strict=True)
        )
        lines.append(f"  models: {parts}; preferred: {result.preferred_model}")
    diag = result.diagnostics
    ess = [v for k, v in diag.items() if k.startswith("ess_")]
    if ess:
        lines.append(
            f"  sampler: {int(diag.get('n_walkers', 0))} walkers x "
            f"{int(diag.get('n_steps', 0))} steps, lowest effective sample size "
            f"{min(ess):.0f}; {int(diag.get('n_converged_starts', 0))} of "
            f"{int(diag.get('n_starts', 0))} starts reached the best fit"
        )
    if len(result.reversals):
        lines.append(f"  reversals in the measured {major} profile:")
        for row in result.reversals.itertuples(index=False):
            lines.append(
                f"    {row.start_um:g}-{row.end_um:g} µm: +{row.amplitude:.1f} mol% {major} "
                f"over {row.n_spots} spots"
            )
    if result.warnings:
        lines.append("  warnings:")
        for w in result.warnings:
            lines.extend(
                textwrap.wrap(w, width=96, initial_indent="    - ", subsequent_indent="      ")
            )
    lines.extend(textwrap.wrap("  note: " + CAUTIONS, width=100, subsequent_indent="    "))
    return "\n".join(lines) + "\n"


#: Unit of each quantity of the result tables (``<q>``, ``<q>_lo95``, ``<q>_hi95``).
QUANTITY_UNITS = {
    "melt_mg_number": "molar fraction",
    "melt_ca_number": "molar fraction",
    "f_rim": "fraction",
    "f_core": "fraction",
    "retention": "fraction",
    "retention_spread": "logit units",
    "kd": "1",
    "melt_mgo_wt": "wt%",
    "melt_cao_wt": "wt%",
    "temperature_c": "°C",
    "growth_exponent": "1",
    "core_offset_um": "µm",
    "section_h_over_r": "fraction",
    "diffusion_length_um": "µm",
    "diffusion_time_days": "days",
    "melt0_ni_ppm": "ppm",
    "melt0_sr_ppm": "ppm",
    "melt0_mgo_wt": "wt%",
}

#: Excel number format by unit of a quantity (digits as the bands carry them).
_UNIT_FORMATS = {"molar fraction": "0.000", "fraction": "0.000", "1": "0.000",
                 "logit units": "0.00", "wt%": "0.00", "°C": "0", "µm": "0.0", "ppm": "0",
                 "days": "0.0"}

#: Units and formats of the other columns of the summary tables.
_OTHER_COLUMNS = {
    "n_spots": ("count", "0"), "n_used": ("count", "0"), "n_crystals": ("count", "0"),
    "n_antecrysts": ("count", "0"), "reduced_chi_square": ("1", "0.00"),
    "delta_bic": ("BIC units", "0.0"),
}


def _base(column: str) -> str:
    for suffix in ("_lo95", "_hi95", "_constrained"):
        if column.endswith(suffix):
            return column[: -len(suffix)]
    return column


def summary_units(columns: Iterable[Any]) -> dict[str, str]:
    """Return the unit of each column of a summary table (row 2 of ``summary.xlsx``).

    Parameters
    ----------
    columns : iterable of str

    Returns
    -------
    dict of str to str
        ``"molar fraction"``, ``"wt%"``, ``"°C"``, ``"count"``, ... ;
        ``"true/false"`` for ``<q>_constrained``; ``""`` for text columns.
    """
    out = {}
    for c in map(str, columns):
        if c.endswith("_constrained"):
            out[c] = "true/false"
        elif _base(c) in QUANTITY_UNITS:
            out[c] = QUANTITY_UNITS[_base(c)]
        elif c in _OTHER_COLUMNS:
            out[c] = _OTHER_COLUMNS[c][0]
        else:
            out[c] = ""
    return out


def summary_number_formats(columns: Iterable[Any]) -> dict[str, str]:
    """Return the Excel number format of each numeric column of a summary table.

    Parameters
    ----------
    columns : iterable of str

    Returns
    -------
    dict of str to str
        Fractions and Kd with 3 decimals, wt% with 2, °C and ppm whole,
        counts as integers; columns not listed keep "General".
    """
    out = {}
    for c in map(str, columns):
        base = _base(c)
        if c.endswith("_constrained"):
            continue
        if base in QUANTITY_UNITS:
            out[c] = _UNIT_FORMATS[QUANTITY_UNITS[base]]
        elif c in _OTHER_COLUMNS:
            out[c] = _OTHER_COLUMNS[c][1]
    return out
