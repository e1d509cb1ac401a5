"""Figures and report pages of a joint fit (one sample, many crystals).

* :func:`sample_figure`: every crystal's record placed on the shared melt
  path (composition against the crystallized fraction F, each crystal its own
  colour and marker, crystals set apart shown in their own panel) and the
  shared melt with its 95% band, the parent melt at F = 0;
* :func:`crystals_figure`: each crystal's profile with the model band of the
  joint posterior of its group (or of its own fit when set apart);
* :func:`crystals_section`: the report page with the table of crystals
  (one function per report section), and :func:`write_sample_report`.

Results are read by attribute; :mod:`zoning.fitting` is not imported.
"""

from __future__ import annotations

import math
import os
import textwrap
from collections.abc import Sequence
from pathlib import Path

import numpy as np
from matplotlib.backends.backend_pdf import PdfPages
from matplotlib.figure import Figure
from matplotlib.ticker import MaxNLocator
from zoning.io.figures import (
    F_LABEL,
    FigureStyle,
    _chars,
    _finish,
    _legend_entries,
    _new_figure,
    _panel_width,
    _styled,
    _title,
    _wrap,
)

__all__ = ["sample_figure", "crystals_figure", "crystals_section", "sample_figures",
           "write_sample_report", "JOINT_FIGURES"]

_MARKERS = ("o", "s", "^", "D", "v", "P", "X", "<", ">", "h", "*", "p")
_RATIO = {"olivine": ("melt_mg_number", "Mg#"), "plagioclase": ("melt_ca_number", "Ca#")}
_MAJOR = {"olivine": "Fo [mol%]", "plagioclase": "An [mol%]"}
_A4 = (8.27, 11.69)


def _look(i: int):
    import matplotlib as mpl

    colors = mpl.colormaps["tab10"].colors
    return colors[i % len(colors)], _MARKERS[i % len(_MARKERS)]


def _used(spots):
    return spots[spots["used"].astype(bool)] if "used" in spots else spots


def sample_figure(result, *, fig: Figure | None = None,
                  style: str | FigureStyle | None = None) -> Figure:
    """Crystal records on the shared melt path, and the shared melt with its band.

    Parameters
    ----------
    result : SampleFitResult
    fig : matplotlib.figure.Figure, optional
        Figure to draw into (default a new figure of the style's size).
    style : str or FigureStyle, optional
        Preset of :data:`zoning.io.figures.FIGURE_STYLES` (default ``"thesis"``).

    Returns
    -------
    matplotlib.figure.Figure
    """
    with _styled(style) as st:
        apart = [c for c in result.crystals if c.group != 1 and c.verdict != "excluded"]
        n_panels = 3 if apart else 2
        if fig is None:
            height = 2.6 * n_panels + 1.2 if st.narrow else 4.8
            fig = _new_figure(st.width_in, st.height(height))
        if st.narrow:
            axes = fig.subplots(n_panels, 1)
        else:
            axes = fig.subplots(1, n_panels, width_ratios=[1.4, 1.0, 0.9][:n_panels])
        ax, axm = axes[0], axes[1]
        path = result.path
        ratio, ratio_label = _RATIO[result.mineral]
        ax.fill_between(path["f"], path["crystal_lo95"], path["crystal_hi95"], color="0.85",
                        label="shared path, 95% band")
        ax.plot(path["f"], path["crystal"], color="0.2", lw=1.2, label="shared path (best)")
        for i, c in enumerate([c for c in result.crystals if c.group == 1]):
            color, marker = _look(i)
            s = _used(c.spots)
            ax.plot(s["f"], s["observed"], ls="none", marker=marker, ms=3.5, color=color,
                    label=c.name + (" (anchor)" if c.name == result.anchor else ""))
        ax.set_xlabel(F_LABEL)
        ax.set_ylabel(_MAJOR[result.mineral])
        ax.set_title("crystal records on the shared path")
        axm.fill_between(path["f"], path["melt_ratio_lo95"], path["melt_ratio_hi95"],
                         color="0.85", label=f"shared melt {ratio_label}, 95% band")
        axm.plot(path["f"], path["melt_ratio"], color="0.2", lw=1.2,
                 label=f"shared melt {ratio_label} (best)")
        e = result.estimates.get(ratio)
        if e is not None and np.isfinite(e.best):
            err = [[max(e.best - e.lo95, 0.0)], [max(e.hi95 - e.best, 0.0)]]
            bars = axm.errorbar([0.0], [e.best], yerr=err, fmt="o", color="C3", capsize=3,
                                label=f"parent melt {ratio_label}")
            bars.lines[0].set_clip_on(False)  # at F = 0, on the panel edge
        elif result.group_estimates:
            axm.text(0.5, 0.5, "no single parent melt:\ncrystals record two melts",
                     transform=axm.transAxes, ha="center", va="center", color="C3")
        axm.set_xlabel(F_LABEL)
        axm.set_ylabel(f"melt {ratio_label} [fraction]")
        axm.set_title("shared melt")
        for a in (ax, axm):
            a.xaxis.set_major_locator(MaxNLocator(4))
        if apart:
            axa = axes[2]
            for i, c in enumerate(apart):
                color, marker = "0.25", _MARKERS[-1 - (i % len(_MARKERS))]
                s = _used(c.spots)
                x = s["distance_um"] / max(float(np.nanmax(s["distance_um"])), 1e-9)
                axa.plot(x, s["observed"], ls="none", marker=marker, ms=3.5, mfc="none",
                         color=color, label=f"{c.name}: {c.verdict}")
            axa.set_xlabel("distance / radius [0–1]")
            axa.set_ylabel(_MAJOR[result.mineral])
            axa.set_title("set apart: not on the shared path")
        # One legend below the panels: inside, with many crystals, it would
        # cover the records.
        handles, labels = _legend_entries(axes)
        ncol = max(1, min(len(labels), 2 if st.narrow else 4))
        chars = _chars(fig.get_figwidth() / ncol, st.legend_pt) - 7
        fig.legend(handles, [_wrap(lab, chars) for lab in labels], loc="outside lower center",
                   ncol=ncol, fontsize=st.legend_pt, frameon=False)
        for a in axes:
            a.set_title(_wrap(a.get_title(), _chars(_panel_width(a), st.font_pt)))
        _title(fig, f"{result.name}: {result.verdict}")
        return _finish(fig)


def crystals_figure(result, *, fig: Figure | None = None,
                    style: str | FigureStyle | None = None) -> Figure:
    """Each crystal's profile with the joint model band.

    Parameters
    ----------
    result : SampleFitResult
    fig : matplotlib.figure.Figure, optional
    style : str or FigureStyle, optional
        Preset of :data:`zoning.io.figures.FIGURE_STYLES` (default ``"thesis"``).

    Returns
    -------
    matplotlib.figure.Figure
    """
    with _styled(style) as st:
        shown = [c for c in result.crystals if c.verdict != "excluded" and not c.curve.empty]
        n = max(len(shown), 1)
        cols = min(2 if st.narrow else (4 if st.legend_side == "right" else 3), n)
        rows = math.ceil(n / cols)
        row_in = (1.8 if st.narrow else 2.1) * st.height_scale
        if fig is None:
            # Many crystals may take more than a page: never squash a panel.
            height = max(st.height(0.6 + row_in * rows), (0.6 + 1.4 * rows) * st.height_scale)
            fig = _new_figure(st.width_in, height)
        axes = np.atleast_1d(fig.subplots(rows, cols, squeeze=False)).ravel()
        for ax, c in zip(axes, shown, strict=False):
            color = "0.2" if c.group == 1 else "C3"
            ax.fill_between(c.curve["distance_um"], c.curve["lo95"], c.curve["hi95"],
                            color="0.85" if c.group == 1 else "mistyrose")
            ax.plot(c.curve["distance_um"], c.curve["best"], color=color, lw=1.0)
            s = c.spots
            used = s["used"].to_numpy(bool)
            ax.errorbar(s["distance_um"][used], s["observed"][used], yerr=s["sigma"][used],
                        fmt="o", ms=2.5, lw=0.6, color="C0")
            if (~used).any():
                ax.plot(s["distance_um"][~used], s["observed"][~used], "x", ms=3, color="0.5")
            ax.set_title(_wrap(f"{c.name}: {c.verdict}", _chars(0.95 * _panel_width(ax),
                                                                    st.font_pt)),
                         fontsize=st.font_pt)
            ax.set_xlabel("distance from core [µm]")
            ax.set_ylabel(_MAJOR[result.mineral])
            ax.xaxis.set_major_locator(MaxNLocator(4))
            ax.yaxis.set_major_locator(MaxNLocator(5))
        for ax in axes[len(shown):]:
            ax.set_axis_off()
        _title(fig, f"{result.name}: profiles with the joint model band (95%)")
        return _finish(fig)


def _f(value, digits=3) -> str:
    return "–" if not (isinstance(value, float | int) and math.isfinite(value)) else (
        f"{value:.{digits}f}")


def crystals_section(result, *, fig: Figure | None = None) -> Figure:
    """Report page of a joint fit: shared quantities and the table of crystals.

    Parameters
    ----------
    result : SampleFitResult
    fig : matplotlib.figure.Figure, optional
        A4 page to draw into (default a new one).

    Returns
    -------
    matplotlib.figure.Figure
    """
    from zoning.io.joint_results import JOINT_CAUTION

    fig = fig if fig is not None else Figure(figsize=_A4)
    ratio, label = _RATIO[result.mineral]
    y = 0.96
    fig.text(0.06, y, f"{result.name}: joint fit of {result.n_crystals} crystals",
             fontsize=12, weight="bold")
    y -= 0.03
    fig.text(0.06, y, f"verdict: {result.verdict}; F counts from the nucleation of "
             f"{result.anchor} (F_core = 0 by definition)", fontsize=8)
    y -= 0.035
    for name, e in result.estimates.items():
        text = (f"{name}: NOT CONSTRAINED" if not e.constrained else
                f"{name}: {_f(e.best)}  95% band [{_f(e.lo95)}, {_f(e.hi95)}] {e.unit}")
        if e.note:
            text += f"  ({e.note})"
        for line in textwrap.wrap(text, 110):
            fig.text(0.06, y, line, fontsize=7)
            y -= 0.018
    y -= 0.01
    header = ["crystal", "verdict", "F_core [95%]", f"own {label} [95%]", "T (dof)", "p"]
    rows = []
    for c in result.crystals:
        fc = c.estimates.get("f_core")
        own = c.own_estimates.get(ratio)
        rows.append([
            c.name, c.verdict,
            f"{_f(fc.best)} [{_f(fc.lo95)}, {_f(fc.hi95)}]" if fc is not None else "–",
            f"[{_f(own.lo95)}, {_f(own.hi95)}]" if own is not None else "–",
            f"{_f(c.consistency_statistic, 1)} ({c.consistency_dof})"
            if math.isfinite(c.consistency_statistic) else "–",
            f"{c.consistency_p:.2g}" if math.isfinite(c.consistency_p) else "–",
        ])
    height = 0.022 * (len(rows) + 1)
    ax = fig.add_axes((0.06, y - height, 0.88, height))
    ax.set_axis_off()
    table = ax.table(cellText=rows, colLabels=header, loc="upper left", cellLoc="left")
    table.auto_set_font_size(False)
    table.set_fontsize(6.5)
    y -= height + 0.03
    for text in list(result.warnings) + [JOINT_CAUTION]:
        for line in textwrap.wrap("- " + text, 120):
            if y < 0.03:
                break
            fig.text(0.06, y, line, fontsize=6.5)
            y -= 0.016
    return fig


#: File stems of the figures of a joint fit, in the order of :func:`sample_figures`.
JOINT_FIGURES = ("sample", "crystals")


def sample_figures(result, *, style: str | FigureStyle | None = None) -> dict[str, Figure]:
    """Return the figures of a joint fit by file stem (``sample``, ``crystals``).

    Parameters
    ----------
    result : SampleFitResult
    style : str or FigureStyle, optional
        Preset of :data:`zoning.io.figures.FIGURE_STYLES` (default ``"thesis"``).

    Returns
    -------
    dict of str to Figure
    """
    return {"sample": sample_figure(result, style=style),
            "crystals": crystals_figure(result, style=style)}


def write_sample_report(result, path: str | os.PathLike,
                        figures: Sequence[Figure] | None = None) -> Path:
    """Write the PDF report of a joint fit: crystals page, then the figures.

    Parameters
    ----------
    result : SampleFitResult
    path : str or path-like
        Destination ``.pdf``.
    figures : sequence of Figure, optional
        Figures to append (default :func:`sample_figures`).

    Returns
    -------
    pathlib.Path
    """
    path = Path(path)
    path.parent.mkdir(parents=True, exist_ok=True)
    figures = list(sample_figures(result).values()) if figures is None else list(figures)
    tmp = path.with_name(f".partial-{path.name}")
    with PdfPages(tmp, metadata={"Title": f"zoning joint fit {result.name}"}) as pdf:
        pdf.savefig(crystals_section(result))
        for f in figures:
            pdf.savefig(f)
    os.replace(tmp, path)
    return path
