"""Per-sample PDF report of a fit (matplotlib ``PdfPages``, no other dependency).

Page 1 holds the settings, the table of results with 95% bands (quantities
the data do not constrain are said to be so in words), the model comparison,
the warnings and a short statement of the assumptions of the model and of the
ways its results can mislead. The following pages hold the profile, the melt
path and the posterior figures of :mod:`zoning.io.figures`.
"""

from __future__ import annotations

import math
import os
import textwrap
from collections.abc import Mapping, Sequence
from pathlib import Path
from typing import Any

from matplotlib.backends.backend_pdf import PdfPages
from matplotlib.figure import Figure
from zoning.io import figures as _fig

__all__ = ["CAUTIONS", "write_report", "results_rows", "report_pages"]

#: A4 portrait [in].
_A4 = (8.27, 11.69)

#: Statement of assumptions and cautions printed in every report.
CAUTIONS = (
    "Surface equilibrium during growth: each growth layer is assumed to have formed in "
    "equilibrium with the melt at its surface and then kept its composition (apart from the "
    "retained share r, which keeps exchanging). Sluggish growth kinetics or boundary layers "
    "break this.",
    "Diffusion after growth: Fe-Mg in olivine in particular diffuses fast at magmatic "
    "temperature; later diffusion can smooth or shift the zoning, which mimics a higher "
    "retention r or a different F. Compare with slower elements (e.g. Ni, P, Ca/Na-Al/Si in "
    "plagioclase) before trusting r.",
    "Sectioning: a section that misses the crystal centre shortens and distorts the profile "
    "(the core looks less primitive, zones look wider). The fitted F and parent melt then "
    "refer to the sectioned part only.",
    "Choice of Kd and reference melt: the parent melt Mg#/Ca# follows directly from the "
    "exchange coefficient, and the speed at which the melt evolves from the reference melt's "
    "oxide contents. A different Kd or reference melt gives a different answer; the bands "
    "include the stated Kd uncertainty only.",
    "Closed system: reversals (zones that go back to higher Fo/An) record recharge or mixing, "
    "which no closed-system model produces; fit such segments separately.",
)


def _fmt(value: float, unit: str = "") -> str:
    if value is None or not isinstance(value, (int, float)) or not math.isfinite(value):
        return "–"
    a = abs(value)
    if unit in ("°C", "C", "µm", "ppm") or a >= 100:
        text = f"{value:.0f}"
    elif a >= 10:
        text = f"{value:.1f}"
    elif a >= 1:
        text = f"{value:.2f}"
    else:
        text = f"{value:.3f}"
    return text


def results_rows(result) -> list[list[str]]:
    """Rows of the results table: quantity, best, 95% band, unit, statement.

    Parameters
    ----------
    result : FitResult
        A fit of one traverse.

    Returns
    -------
    list of list of str
        One row per estimate; quantities the data do not constrain say
        "not constrained" instead of a precise-looking number.
    """
    rows = []
    for name, est in result.estimates.items():
        band = f"{_fmt(est.lo95, est.unit)} – {_fmt(est.hi95, est.unit)}"
        best = _fmt(est.best, est.unit)
        note = est.note
        if not est.constrained:
            best = f"({best})"
            note = note or "not constrained by these data"
        unit = "" if est.unit in ("1", "") else est.unit
        rows.append([_fig.quantity_label(name), best, band, unit, note])
    return rows


def _settings_lines(result) -> list[str]:
    lines = []
    t = result.traverse
    lines.append(f"file: {t.source}")
    lines.append(
        f"mineral: {result.mineral}; spots: {result.n_spots} read, {result.n_used} used; "
        f"orientation: {t.orientation}"
    )
    for key, value in sorted(result.settings.items()):
        text = _short_value(value)
        lines.append(f"{key}: {text}")
    versions = ", ".join(f"{k} {v}" for k, v in sorted(result.versions.items()))
    if versions:
        lines.append(f"versions: {versions}")
    lines.append(f"seed: {result.seed}")
    return lines


def _short_value(value: Any) -> str:
    if isinstance(value, Mapping):
        return ", ".join(f"{k}={_short_value(v)}" for k, v in value.items()) or "{}"
    if isinstance(value, float):
        return f"{value:g}"
    if isinstance(value, (list, tuple)):
        return "[" + ", ".join(_short_value(v) for v in value) + "]"
    return str(value)


class _Writer:
    """Place wrapped text lines down a page, adding pages when full."""

    def __init__(self, pages: list[Figure], title: str):
        self.pages = pages
        self.title = title
        self._new_page()

    def _new_page(self) -> None:
        fig = Figure(figsize=_A4)
        self.pages.append(fig)
        self.fig = fig
        self.y = 0.95
        if len(self.pages) > 1:
            fig.text(0.08, 0.975, f"{self.title} (continued)", fontsize=8, color="#555555")

    def need(self, height: float) -> None:
        if self.y - height < 0.05:
            self._new_page()

    def heading(self, text: str) -> None:
        self.need(0.05)
        self.y -= 0.012
        self.fig.text(0.08, self.y, text, fontsize=11, weight="bold", va="top")
        self.y -= 0.026

    def lines(self, lines, *, size: float = 8, width: int = 110, indent: str = "") -> None:
        for line in lines:
            wrapped = textwrap.wrap(str(line), width=width, subsequent_indent=indent + "  ",
                                    initial_indent=indent) or [""]
            for w in wrapped:
                self.need(0.016)
                self.fig.text(0.08, self.y, w, fontsize=size, va="top", family="DejaVu Sans")
                self.y -= 0.0155 * size / 8

    def table(self, header, rows, col_x, *, size: float = 8) -> None:
        self.need(0.03)
        for x, h in zip(col_x, header, strict=True):
            self.fig.text(x, self.y, h, fontsize=size, weight="bold", va="top")
        self.y -= 0.018
        for row in rows:
            last = textwrap.wrap(str(row[-1]), width=44) or [""]
            self.need(0.016 * len(last) + 0.004)
            for x, cell in zip(col_x[:-1], row[:-1], strict=True):
                self.fig.text(x, self.y, str(cell), fontsize=size, va="top")
            for k, w in enumerate(last):
                self.fig.text(col_x[-1], self.y - 0.014 * k, w, fontsize=size - 0.5, va="top")
            self.y -= 0.016 * max(1, len(last)) + 0.002


def report_pages(result, figures: Sequence[Figure] | None = None) -> list[Figure]:
    """Build the report pages of one fit as matplotlib figures.

    Parameters
    ----------
    result : FitResult
        A fit of one traverse.
    figures : sequence of Figure, optional
        Already drawn profile, melt-path and posterior figures of this
        result (drawn here when not given).

    Returns
    -------
    list of matplotlib.figure.Figure
        Text page(s), then the profile, melt-path and posterior figures.
    """
    pages: list[Figure] = []
    title = f"zoning report: {result.sample}"
    w = _Writer(pages, title)
    w.fig.text(0.08, w.y, title, fontsize=15, weight="bold", va="top")
    w.y -= 0.04

    w.heading("Results (best value and 95% band)")
    w.table(["quantity", "best", "95% band", "unit", "statement"], results_rows(result),
            [0.08, 0.30, 0.39, 0.52, 0.58])
    w.lines([
        "Values in parentheses are not constrained by these data: quote the band, not the "
        "best value.",
        f"Reduced chi-square of the best fit: {_fmt(result.reduced_chi_square)}; "
        f"preferred model (lowest BIC): {result.preferred_model}.",
    ], size=7.5)

    comp = result.comparison
    if comp is not None and len(comp):
        w.heading("Model comparison")
        rows = [[str(r.get("model", "")), _fmt(r.get("chi_square", math.nan)),
                 str(r.get("n_params", "")), _fmt(r.get("aic", math.nan)),
                 _fmt(r.get("bic", math.nan))] for r in comp.to_dict("records")]
        w.table(["model", "chi-square", "parameters", "AIC", "BIC"], rows,
                [0.08, 0.28, 0.42, 0.56, 0.68])

    w.heading("Warnings")
    warn = list(result.warnings)
    rev = result.reversals
    if rev is not None and len(rev) and "start_um" in rev:
        for r in rev.to_dict("records"):
            warn.append(
                f"reversal between {_fmt(r['start_um'], 'µm')} and {_fmt(r['end_um'], 'µm')} µm "
                f"from the core (amplitude {_fmt(r.get('amplitude', math.nan))} mol%): "
                "recharge or mixing; fit the segments separately with range."
            )
    flagged = result.n_spots - result.n_used
    if flagged:
        warn.append(f"{flagged} of {result.n_spots} spots not used in the fit (see the profile "
                    "figure and profile.csv for each reason).")
    w.lines(warn or ["none"])

    notes = list(result.traverse.notes)
    if notes:
        w.heading("Reading notes")
        w.lines(notes)

    w.heading("Settings")
    w.lines(_settings_lines(result))

    w.heading("Assumptions and cautions")
    w.lines([f"{i + 1}. {c}" for i, c in enumerate(CAUTIONS)])

    if figures is None:
        figures = [_fig.profile_figure(result), _fig.melt_path_figure(result),
                   _fig.corner_figure(result)]
    pages.extend(figures)
    return pages


def write_report(
    result, path: str | os.PathLike, *, figures: Sequence[Figure] | None = None
) -> Path:
    """Write the PDF report of one fit, atomically.

    Parameters
    ----------
    result : FitResult
        A fit of one traverse.
    path : str or path-like
        Destination ``.pdf``; folders are created.
    figures : sequence of Figure, optional
        Already drawn figures of this result to put after the text pages
        (default: the profile, melt-path and posterior figures, drawn here).

    Returns
    -------
    pathlib.Path
        The path written.
    """
    path = Path(path)
    path.parent.mkdir(parents=True, exist_ok=True)
    tmp = path.with_name(f".{path.name}.{os.getpid()}.tmp")
    meta = {"Title": f"zoning report: {result.sample}", "Creator": "zoning",
            "CreationDate": None}
    try:
        with PdfPages(tmp, metadata=meta) as pdf:
            for page in report_pages(result, figures):
                pdf.savefig(page)
        os.replace(tmp, path)
    finally:
        if tmp.exists():
            tmp.unlink()
    return path
