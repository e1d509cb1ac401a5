"""Write joint (one sample, many crystals) fit results and their terminal report.

Outputs of a joint fit (:func:`zoning.fitting.fit_sample`), read by
attribute (this module does not import :mod:`zoning.fitting`):

* ``summary.csv``: one row per sample, the columns of single fits (the
  shared quantities and their bands) plus ``n_crystals``, ``n_antecrysts``,
  ``verdict`` and ``anchor``;
* ``crystals.csv``: one row per crystal: its verdict and group, its own
  quantities in the joint fit (F_core, and F_rim / r when they vary by
  crystal) with bands, its own single-crystal parent melt band, the
  consistency statistic, its dof and p-value;
* ``<sample>/fit.json``: everything, as for single fits;
* ``<sample>/<crystal>/profile.csv``: the spot table of each crystal with the
  joint model band.
"""

from __future__ import annotations

import math
import os
import textwrap
from collections.abc import Iterable, Mapping
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd
from zoning.io.results import _fmt, summary_table
from zoning.io.writers import unique_names, write_json, write_table

__all__ = [
    "sample_summary_table",
    "crystals_table",
    "sample_to_dict",
    "write_sample_outputs",
    "write_sample_files",
    "sample_output_names",
    "format_sample_report",
    "JOINT_CAUTION",
    "JOINT_GENERAL",
    "joint_caution",
]

#: Verdicts (:data:`zoning.fitting.joint.VERDICTS`) of crystals left out of
#: every group, by the user or for too few usable spots: no joint estimates,
#: no profile table, not drawn.
LEFT_OUT_VERDICTS = ("excluded", "too few spots")

#: The general assumption statement of joint fits (the single-fit one says
#: that sections and diffusion are fitted; joint fits never fit diffusion and
#: fit sections only when asked, which :func:`joint_caution` states).
JOINT_GENERAL = (
    "Assumes each zone grew in surface equilibrium with the melt; every number depends on "
    "the chosen Kd and reference melt."
)

#: The part of :data:`JOINT_CAUTION` that holds whatever the section setting.
_JOINT_CAUTION_HEAD = (
    "The joint fit assumes that the consistent crystals grew from one melt along one "
    "closed-system path and share Kd and r; F and the parent melt count from the "
    "nucleation of the earliest crystal (the anchor), so a melt more primitive than any "
    "recorded core is not excluded. The antecryst test compares each crystal with the "
    "others; crystals that disagree are left out of the shared answer, and a sample "
    "whose crystals fall into two groups without a two-thirds majority is given no "
    "single answer."
)
#: What the joint fit assumes beyond single fits, printed with every report.
JOINT_CAUTION = _JOINT_CAUTION_HEAD + (
    " Unlike single fits, joint fits fit diffusion after growth and an off-centre "
    "section only when asked (diffusion_length_um = \"free\", one L per crystal; "
    "section_h_over_r = \"free\", one h/R per crystal); here each crystal is taken as "
    "unrelaxed and cut through its core."
)


def joint_caution(settings: Mapping[str, Any] | None = None) -> str:
    """Return the joint-fit caution for a fit's settings.

    Parameters
    ----------
    settings : mapping, optional
        :attr:`SampleFitResult.settings`; its ``section_h_over_r`` and
        ``diffusion_length_um`` ("free" or a number) say whether sections and
        diffusion after growth were fitted.

    Returns
    -------
    str
        :data:`JOINT_CAUTION` with the section statement of this fit.
    """
    section = (settings or {}).get("section_h_over_r", 0.0)
    diffusion = (settings or {}).get("diffusion_length_um", 0.0)
    head = _JOINT_CAUTION_HEAD
    if diffusion != 0.0:
        if diffusion == "free":
            text = (" The diffusion length L was fitted per crystal (uniform prior on [0, "
                    "the crystal's radius]); relaxation and near-equilibrium growth both "
                    "flatten a profile, so without NiO r and L trade off and their bands "
                    "are wide.")
        else:
            text = (f" Every crystal is taken as relaxed by L = {float(diffusion):g} µm "
                    "after growth (not fitted).")
        if section == "free":
            text += " The section offset h/R was fitted per crystal (uniform prior)."
        elif float(section) > 0.0:
            text += f" Every crystal is taken as cut at h/R = {float(section):g} (not fitted)."
        else:
            text += " Every crystal is taken as cut through its core."
        return head + text
    if section == "free":
        return head + (" The section offset h/R was fitted per crystal (uniform prior); "
                       "diffusion after growth was not (diffusion_length_um = \"free\" fits "
                       "it): each crystal is taken as unrelaxed, and a diffused crystal can "
                       "still look like an antecryst.")
    if float(section) > 0.0:
        return head + (f" Every crystal is taken as cut at h/R = {float(section):g} (not "
                       "fitted) and unrelaxed by diffusion after growth.")
    return JOINT_CAUTION

_RATIO = {"olivine": "melt_mg_number", "plagioclase": "melt_ca_number"}


def sample_summary_table(results: Iterable[Any]) -> pd.DataFrame:
    """One row per sample: shared quantities with bands, as single-fit summaries.

    Parameters
    ----------
    results : iterable of SampleFitResult

    Returns
    -------
    pandas.DataFrame
        The columns of :func:`zoning.io.results.summary_table`, then
        ``n_crystals``, ``n_antecrysts``, ``verdict``, ``anchor``.
    """
    results = list(results)
    df = summary_table(results)
    df["n_crystals"] = [int(r.n_crystals) for r in results]
    df["n_antecrysts"] = [int(r.n_antecrysts) for r in results]
    df["verdict"] = [r.verdict for r in results]
    df["anchor"] = [r.anchor for r in results]
    return df


def _band(row: dict, prefix: str, e) -> None:
    row[prefix] = float(e.best) if e is not None else math.nan
    row[f"{prefix}_lo95"] = float(e.lo95) if e is not None else math.nan
    row[f"{prefix}_hi95"] = float(e.hi95) if e is not None else math.nan


def crystals_table(result: Any) -> pd.DataFrame:
    """One row per crystal of a joint fit.

    Parameters
    ----------
    result : SampleFitResult

    Returns
    -------
    pandas.DataFrame
        ``sample``, ``crystal``, ``verdict``, ``group``, ``anchor`` (bool),
        ``n_spots``, ``n_used``; ``f_core`` (and ``f_rim``, ``retention`` when
        per crystal, plus any per-crystal free parameter) with ``_lo95`` and
        ``_hi95`` from the joint fit of its group (``section_h_over_r`` and
        ``diffusion_length_um`` also with ``_constrained``); ``own_<ratio>``,
        ``own_f_rim``, ``own_retention``, ``own_kd`` with bands from its own
        single-crystal fit; ``consistency_statistic``, ``consistency_dof``,
        ``consistency_p``, ``reduced_chi_square``, ``own_reduced_chi_square``,
        ``sigma_scale``.
    """
    ratio = _RATIO[result.mineral]
    local = []
    for c in result.crystals:
        for k in c.estimates:
            if k not in local:
                local.append(k)
    rows = []
    for c in result.crystals:
        row: dict[str, Any] = {
            "sample": result.name, "crystal": c.name, "verdict": c.verdict,
            "group": int(c.group), "anchor": c.name == result.anchor,
            "n_spots": int(c.n_spots), "n_used": int(c.n_used),
        }
        for k in local:
            _band(row, k, c.estimates.get(k))
            if k in ("section_h_over_r", "diffusion_length_um"):
                # a section offset is often unconstrained by one crystal: say so per crystal
                e = c.estimates.get(k)
                row[f"{k}_constrained"] = bool(e.constrained) if e is not None else False
        for k in (ratio, "f_rim", "retention", "kd"):
            _band(row, f"own_{k}", c.own_estimates.get(k))
        row["consistency_statistic"] = float(c.consistency_statistic)
        row["consistency_dof"] = int(c.consistency_dof)
        row["consistency_p"] = float(c.consistency_p)
        row["reduced_chi_square"] = float(c.reduced_chi_square)
        row["own_reduced_chi_square"] = float(c.own_reduced_chi_square)
        row["sigma_scale"] = float(c.sigma_scale)
        rows.append(row)
    return pd.DataFrame(rows)


def _estimates_dict(estimates) -> dict:
    return {
        name: {"unit": e.unit, "best": e.best,
               "best_fit": float(getattr(e, "best_fit", math.nan)), "median": e.median,
               "lo95": e.lo95,
               "hi95": e.hi95, "lower": e.lower, "upper": e.upper,
               "constrained": bool(e.constrained), "note": e.note}
        for name, e in estimates.items()
    }


def sample_to_dict(result: Any) -> dict[str, Any]:
    """Every number of one joint fit as plain data (the content of ``fit.json``).

    Parameters
    ----------
    result : SampleFitResult

    Returns
    -------
    dict
    """
    crystals = []
    for c in result.crystals:
        crystals.append({
            "name": c.name, "source": str(c.traverse.source), "verdict": c.verdict,
            "group": int(c.group), "estimates": _estimates_dict(c.estimates),
            "own_estimates": _estimates_dict(c.own_estimates),
            "consistency_statistic": c.consistency_statistic,
            "consistency_dof": int(c.consistency_dof), "consistency_p": c.consistency_p,
            "chi_square": c.chi_square, "reduced_chi_square": c.reduced_chi_square,
            "own_reduced_chi_square": c.own_reduced_chi_square,
            "sigma_scale": c.sigma_scale, "n_spots": int(c.n_spots), "n_used": int(c.n_used),
            "traverse_notes": list(c.traverse.notes),
        })
    return {
        "sample": result.name,
        "mineral": result.mineral,
        "joint": True,
        "verdict": result.verdict,
        "anchor": result.anchor,
        "n_crystals": int(result.n_crystals),
        "n_antecrysts": int(result.n_antecrysts),
        "excluded": list(result.excluded),
        "n_spots": int(result.n_spots),
        "n_used": int(result.n_used),
        "estimates": _estimates_dict(result.estimates),
        "group_estimates": [_estimates_dict(g) for g in result.group_estimates],
        "crystals": crystals,
        "chi_square": result.chi_square,
        "reduced_chi_square": result.reduced_chi_square,
        "parameter_names": list(result.parameter_names),
        "correlation": np.asarray(result.correlation),
        "melt_path": result.path,
        "diagnostics": dict(result.diagnostics),
        "warnings": list(result.warnings),
        "cautions": [JOINT_GENERAL, joint_caution(result.settings)],
        "settings": dict(result.settings),
        "versions": dict(result.versions),
        "seed": int(result.seed),
        "methods": [m.as_dict() for m in getattr(result, "methods", ())],
    }


def _crystal_folders(result: Any) -> list[tuple[Any, str]]:
    """Crystals that get a profile table, with their sub-folder names."""
    names = unique_names([c.name for c in result.crystals])
    return [(c, sub) for c, sub in zip(result.crystals, names, strict=True)
            if c.verdict not in LEFT_OUT_VERDICTS and not c.spots.empty]


def sample_output_names(result: Any, *, figures: bool = True, report: bool = True,
                        figure_format=None) -> list[str]:
    """Relative paths :func:`write_sample_files` writes into a sample folder.

    Parameters
    ----------
    result : SampleFitResult
    figures, report : bool, optional
        Whether the figures and the PDF report are written (default both).
    figure_format : str or iterable of str, optional
        Figure file formats (default PNG and PDF).

    Returns
    -------
    list of str
    """
    from zoning.io.figures import graphics_names
    from zoning.io.joint_figures import JOINT_FIGURES

    names = ["fit.json", "crystals.csv", "crystals.json"]
    for _c, sub in _crystal_folders(result):
        names += [f"{sub}/profile.csv", f"{sub}/profile.json"]
    return names + graphics_names(figures=figures, report=report, formats=figure_format,
                                  stems=JOINT_FIGURES)


def write_sample_files(result: Any, folder: str | os.PathLike, *, protect=None,
                       figures: bool = True, report: bool = True, figure_format=None,
                       figure_style=None) -> list[Path]:
    """Write one joint fit into its sample folder.

    ``fit.json``, ``crystals.csv`` (with its JSON provenance sidecar), each
    crystal's ``<crystal>/profile.csv`` (joint model band of its group, or
    its own fit when set apart), the figures ``sample`` and ``crystals``
    (PNG and PDF) and ``report.pdf``: the names of
    :func:`sample_output_names`. Ownership of the folder (manifest) is the
    caller's: :func:`write_sample_outputs` for ``zoning fit``, the batch
    engine's build folders for ``zoning batch``.

    Parameters
    ----------
    result : SampleFitResult
    folder : str or path-like
        The sample folder (created if missing).
    protect : iterable of path-like, optional
        Paths never to overwrite (the input files).
    figures, report : bool, optional
        Draw the figures / write the PDF report (default both).
    figure_format : str or iterable of str, optional
        Figure file formats (default PNG and PDF).
    figure_style : str, optional
        Preset of :data:`zoning.io.figures.FIGURE_STYLES` of the saved figures
        (default ``"thesis"``; the report always holds thesis figures).

    Returns
    -------
    list of pathlib.Path
        Every file written.
    """
    from zoning.io.results import band_digits

    folder = Path(folder)
    base = {"sample": result.name, "mineral": result.mineral, "seed": int(result.seed),
            "sources": sorted({str(c.traverse.source) for c in result.crystals}),
            "settings": dict(result.settings), "versions": dict(result.versions)}
    written = [write_json(folder / "fit.json", sample_to_dict(result), protect=protect)]
    table = crystals_table(result)
    written.append(write_table(
        table, folder / "crystals.csv", digits=band_digits(table.columns), protect=protect,
        provenance={"content": f"one row per crystal of the joint fit of {result.name}: "
                               "verdict, own quantities with 95% bands, consistency test",
                    **base}))
    for c, sub in _crystal_folders(result):
        written.append(write_table(
            c.spots, folder / sub / "profile.csv", digits=band_digits(c.spots.columns),
            protect=protect,
            provenance={"content": f"fitted profile of crystal {c.name} of sample "
                                   f"{result.name} ({result.mineral}); model and 95% band "
                                   "from the joint posterior of its group (own fit when set "
                                   "apart)", "crystal": c.name,
                        "source": str(c.traverse.source), **base}))
    if figures or report:
        from zoning.io import joint_figures
        from zoning.io.figures import DEFAULT_FIGURE_STYLE, save_figure
        from zoning.io.figures import figure_style as resolve_style

        style = resolve_style(figure_style)
        drawn = joint_figures.sample_figures(result, style=style)
        if figures:
            for stem, fig in drawn.items():
                written += list(save_figure(fig, folder / stem, formats=figure_format).values())
        if report:
            from zoning.io.report import write_sample_report

            if style.name != DEFAULT_FIGURE_STYLE:  # A4 pages: thesis-size figures
                drawn = joint_figures.sample_figures(result)
            written.append(write_sample_report(
                result, folder / "report.pdf", figures=list(drawn.values())))
    return written


def write_sample_outputs(results: Iterable[Any], out_dir: str | os.PathLike, *,
                         protect=None, provenance=None, output=None, figures: bool = True,
                         report: bool = True, figure_format=None,
                         figure_style=None) -> list[Path]:
    """Write ``summary.csv``, ``crystals.csv`` and one folder per sample.

    The output folder gets a manifest (:mod:`zoning.io.outputs`); a file of
    the same name that zoning did not write is never replaced
    (:class:`~zoning.exceptions.OutputRefusedError`, before anything is
    written).

    Parameters
    ----------
    results : iterable of SampleFitResult
    out_dir : str or path-like
        Output folder (created if missing).
    protect : iterable of path-like, optional
        Paths never to overwrite (the input files).
    provenance : mapping, optional
        Extra provenance for the sidecars of the two tables (e.g. the sources).
    output : zoning.io.outputs.OutputFolder, optional
        The folder object, when the caller already checked it.
    figures, report : bool, optional
        Per sample: draw the figures / write the PDF report (default both).
    figure_format, figure_style : optional
        Figure file formats and preset (see :func:`write_sample_files`).

    Returns
    -------
    list of pathlib.Path
        Every file written, the two tables first.
    """
    from zoning.io.outputs import OutputFolder
    from zoning.io.results import band_digits

    results = list(results)
    folder = output if output is not None else OutputFolder(out_dir, kind="fit")
    subs = unique_names([r.name for r in results])
    names = ["summary.csv", "summary.json", "crystals.csv", "crystals.json"]
    for r, sub in zip(results, subs, strict=True):
        names += [f"{sub}/{n}" for n in sample_output_names(r, figures=figures, report=report,
                                                            figure_format=figure_format)]
    folder.claim(names)
    summary = sample_summary_table(results)
    crystals = pd.concat([crystals_table(r) for r in results], ignore_index=True)
    extra = dict(provenance or {})
    written = [
        write_table(summary, folder.path("summary.csv"), digits=band_digits(summary.columns),
                    protect=protect,
                    provenance={"content": "one row per sample fitted jointly: shared "
                                           "quantities and 95% bands", **extra}),
        write_table(crystals, folder.path("crystals.csv"),
                    digits=band_digits(crystals.columns), protect=protect,
                    provenance={"content": "one row per crystal of the joint fits: verdict, "
                                           "own quantities, consistency test", **extra}),
    ]
    for r, sub in zip(results, subs, strict=True):
        written += write_sample_files(r, folder.path(sub), protect=protect, figures=figures,
                                      report=report, figure_format=figure_format,
                                      figure_style=figure_style)
    folder.record(*names)
    folder.finish()
    return written


def format_sample_report(result: Any) -> str:
    """Readable plain-text report of one joint fit for the terminal.

    Parameters
    ----------
    result : SampleFitResult

    Returns
    -------
    str
    """
    from zoning.io.results import _LABELS

    lines = [
        f"{result.name} ({result.mineral}, joint fit of {result.n_crystals} crystals): "
        f"{result.verdict}; reduced chi-square {result.reduced_chi_square:.2f}"
    ]
    if result.verdict.endswith("no majority") or result.verdict == "crystals disagree":
        lines.append("  NO SINGLE ANSWER: the crystals do not share one melt.")
    for name, e in result.estimates.items():
        label = _LABELS.get(name, name).ljust(22)
        unit = "" if e.unit in ("1", "") else f" {e.unit}"
        band = f"[{_fmt(e.lo95, e.unit)}, {_fmt(e.hi95, e.unit)}]"
        text = (f"  {label}  NOT CONSTRAINED (95% band {band}{unit})" if not e.constrained
                else f"  {label}  {_fmt(e.best, e.unit)}{unit}  95% band {band}")
        if e.note:
            text += f"  - {e.note}"
        lines.append(text)
    ratio = _RATIO[result.mineral]
    lines.append("  crystals:")
    for c in result.crystals:
        fc = c.estimates.get("f_core")
        own = c.own_estimates.get(ratio)
        parts = [f"    {c.name}: {c.verdict}"]
        if fc is not None:
            parts.append(f"F_core {_fmt(fc.best, '1')} [{_fmt(fc.lo95, '1')}, "
                         f"{_fmt(fc.hi95, '1')}]")
        for key, label, unit in (("section_h_over_r", "h/R", "1"),
                                 ("diffusion_length_um", "L", "µm")):
            e = c.estimates.get(key)
            if e is not None:
                parts.append(f"{label} {_fmt(e.best, unit)} [{_fmt(e.lo95, unit)}, "
                             f"{_fmt(e.hi95, unit)}]{'' if unit == '1' else ' ' + unit}")
        if own is not None:
            parts.append(f"own {ratio} [{_fmt(own.lo95, '1')}, {_fmt(own.hi95, '1')}]")
        if np.isfinite(c.consistency_p):
            parts.append(f"T = {c.consistency_statistic:.1f} ({c.consistency_dof} dof, "
                         f"p = {c.consistency_p:.2g})")
        lines.append(", ".join(parts))
    d = result.diagnostics
    lines.append(
        f"  sampler: {int(d.get('n_chains', 0))} chains x {int(d.get('n_sweeps', 0))} sweeps, "
        f"lowest effective sample size {d.get('min_ess', float('nan')):.0f}, largest R-hat "
        f"{d.get('max_rhat', float('nan')):.3f}, {d.get('seconds_total', float('nan')):.0f} s"
    )
    if result.warnings:
        lines.append("  warnings:")
        for w in result.warnings:
            lines.extend(textwrap.wrap(w, width=96, initial_indent="    - ",
                                       subsequent_indent="      "))
    for text in (JOINT_GENERAL, joint_caution(result.settings)):
        lines.extend(textwrap.wrap("  note: " + text, width=100, subsequent_indent="    "))
    return "\n".join(lines) + "\n"
