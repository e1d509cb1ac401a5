"""Figures of a joint fit (one sample, many crystals).

* :func:`sample_figure`: every crystal's record placed on the shared melt
  path (composition against the crystallized fraction F, each crystal its own
  colour and marker, crystals set apart shown in their own panel) and the
  shared melt with its 95% band, the parent melt at F = 0;
* :func:`crystals_figure`: each crystal's profile with the model band of the
  joint posterior of its group (or of its own fit when set apart);
* the report page with the table of crystals is a section of
  :func:`zoning.io.report.write_sample_report`.

Results are read by attribute; :mod:`zoning.fitting` is not imported.
"""

from __future__ import annotations

import math

import numpy as np
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
from zoning.io.joint_results import LEFT_OUT_VERDICTS

__all__ = ["sample_figure", "crystals_figure", "sample_figures", "JOINT_FIGURES"]

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
        apart = [c for c in result.crystals if c.group != 1 and c.verdict not in LEFT_OUT_VERDICTS]
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
        shown = [c for c in result.crystals
                 if c.verdict not in LEFT_OUT_VERDICTS and not c.curve.empty]
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
