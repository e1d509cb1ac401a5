"""Figures of a fit: profile, melt path, posterior, and the batch overview.

Every function draws with matplotlib only, into a figure it creates (a
:class:`matplotlib.figure.Figure` that needs no GUI and no pyplot state, so
it is safe in worker processes) or into the ``ax``/``fig`` given by the
caller, e.g. in a notebook::

    fig, ax = plt.subplots()
    profile_figure(result, ax=ax)

Colours are the Okabe & Ito (2008) colour-blind-safe palette. Figure size,
font sizes and line widths come from one of the presets of
:data:`FIGURE_STYLES` (``style=`` on every function; ``--figure-style`` on
the command line, ``figure_style`` in a project file): ``thesis`` (full text
width of a thesis page, 160 mm), ``column`` (one column of a two-column
journal page, 85 mm) and ``slide`` (a 16:9 presentation slide).
:func:`save_figure` writes any of PNG (300 dpi), PDF and SVG. Results are
read by attribute (:class:`zoning.fitting.FitResult`); this module does not
import the fitting package.
"""

from __future__ import annotations

import contextlib
import contextvars
import os
import textwrap
from collections.abc import Iterable, Iterator, Mapping, Sequence
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import matplotlib as mpl
import numpy as np
import pandas as pd
from matplotlib.collections import Collection
from matplotlib.figure import Figure
from matplotlib.lines import Line2D
from matplotlib.ticker import MaxNLocator
from scipy.ndimage import gaussian_filter

from zoning.exceptions import ZoningError

__all__ = [
    "PALETTE",
    "TEXT_WIDTH_IN",
    "FigureStyle",
    "FIGURE_STYLES",
    "DEFAULT_FIGURE_STYLE",
    "FIGURE_FORMATS",
    "DEFAULT_FIGURE_FORMATS",
    "figure_style",
    "parse_figure_formats",
    "profile_figure",
    "melt_path_figure",
    "corner_figure",
    "overview_figure",
    "loop_figure",
    "save_figure",
    "sample_figures",
    "save_sample_figures",
    "SAMPLE_FIGURES",
    "graphics_names",
    "write_sample_graphics",
    "quantity_label",
]

#: Okabe & Ito (2008) colour-blind-safe palette ("Color Universal Design").
PALETTE = {
    "black": "#000000",
    "orange": "#E69F00",
    "sky": "#56B4E9",
    "green": "#009E73",
    "yellow": "#F0E442",
    "blue": "#0072B2",
    "vermillion": "#D55E00",
    "purple": "#CC79A7",
    "grey": "#7F7F7F",
}


#: Full text width of a thesis page (160 mm) [in].
TEXT_WIDTH_IN = 160 / 25.4


@dataclass(frozen=True, slots=True)
class FigureStyle:
    """Size, fonts and line widths of the figures for one kind of page.

    Parameters
    ----------
    name : str
        Preset name (``--figure-style`` / project key ``figure_style``).
    description : str
        What the preset is for, in words.
    width_in : float
        Figure width [in].
    height_scale : float
        Factor on the height each figure kind chooses for a thesis page [1].
    max_height_in : float
        Tallest figure (a page or a slide less its margins) [in].
    font_pt, tick_pt, legend_pt, title_pt : float
        Axis labels, tick labels, legend entries and titles [pt].
    line_scale, marker_scale : float
        Factor on the line widths and marker sizes of the thesis preset [1].
    legend_side : {"top", "right"}
        Where a figure-wide legend goes (above the panels or to their right).
    legend_columns : int
        Columns of a figure-wide legend placed on top.
    """

    name: str
    description: str
    width_in: float
    height_scale: float
    max_height_in: float
    font_pt: float
    tick_pt: float
    legend_pt: float
    title_pt: float
    line_scale: float
    marker_scale: float
    legend_side: str
    legend_columns: int

    @property
    def narrow(self) -> bool:
        """Whether panels are stacked in one column instead of side by side."""
        return self.width_in < 4.5

    def height(self, thesis_height_in: float) -> float:
        """Figure height for a figure that is `thesis_height_in` tall on a thesis page [in]."""
        return float(min(thesis_height_in * self.height_scale, self.max_height_in))


#: The presets, by name. Widths: a thesis text block of 160 mm (A4 with
#: 25 mm margins); one column of a two-column journal page, 85 mm (the column
#: width most Earth-science journals ask for, common practice); a 16:9 slide
#: (13.33 x 7.5 in) less margins and a title line. Font sizes follow the same
#: practice: 7 pt is the smallest text journals accept at print size, 9 pt
#: matches 11-12 pt body text on a thesis page, 14-18 pt reads from the back
#: of a lecture room.
FIGURE_STYLES: Mapping[str, FigureStyle] = {
    "thesis": FigureStyle(
        "thesis", "full text width of a thesis page (160 mm), 9 pt labels",
        width_in=TEXT_WIDTH_IN, height_scale=1.0, max_height_in=9.3, font_pt=9.0,
        tick_pt=8.0, legend_pt=7.5, title_pt=10.0, line_scale=1.0, marker_scale=1.0,
        legend_side="top", legend_columns=2),
    "column": FigureStyle(
        "column", "one column of a two-column journal page (85 mm), 7 pt labels",
        width_in=85 / 25.4, height_scale=1.0, max_height_in=9.0, font_pt=7.0,
        tick_pt=6.5, legend_pt=6.0, title_pt=7.5, line_scale=0.75, marker_scale=0.8,
        legend_side="top", legend_columns=1),
    "slide": FigureStyle(
        "slide", "a 16:9 presentation slide (12 x 6.3 in), 14 pt labels",
        width_in=12.0, height_scale=1.35, max_height_in=6.3, font_pt=14.0,
        tick_pt=12.0, legend_pt=11.0, title_pt=16.0, line_scale=1.5, marker_scale=1.5,
        legend_side="right", legend_columns=1),
}

#: Preset used when none is given.
DEFAULT_FIGURE_STYLE = "thesis"

#: File formats :func:`save_figure` writes, and those written by default.
FIGURE_FORMATS = ("png", "pdf", "svg")
DEFAULT_FIGURE_FORMATS = ("png", "pdf")

_CURRENT: contextvars.ContextVar[FigureStyle] = contextvars.ContextVar(
    "zoning_figure_style", default=FIGURE_STYLES[DEFAULT_FIGURE_STYLE])


def figure_style(style: str | FigureStyle | None = None) -> FigureStyle:
    """Return the preset of this name (the default preset for None).

    Parameters
    ----------
    style : str or FigureStyle or None
        A name of :data:`FIGURE_STYLES` (case-insensitive), or a style.

    Returns
    -------
    FigureStyle

    Raises
    ------
    zoning.exceptions.ZoningError
        For an unknown name, listing the presets.
    """
    if style is None:
        return FIGURE_STYLES[DEFAULT_FIGURE_STYLE]
    if isinstance(style, FigureStyle):
        return style
    key = str(style).strip().lower()
    if key not in FIGURE_STYLES:
        names = ", ".join(f"{n} ({s.description})" for n, s in FIGURE_STYLES.items())
        raise ZoningError(
            f"unknown figure style {style!r}; the presets are {names}. Give one of them, e.g. "
            "--figure-style column (project key figure_style = \"column\")."
        )
    return FIGURE_STYLES[key]


def parse_figure_formats(formats: str | Iterable[str] | None) -> tuple[str, ...]:
    """Read a list of figure file formats, e.g. ``"png,pdf,svg"``.

    Parameters
    ----------
    formats : str or iterable of str or None
        Comma-separated text (as ``--figure-format``) or a list (as the
        project key ``figure_format``); None gives :data:`DEFAULT_FIGURE_FORMATS`.

    Returns
    -------
    tuple of str
        The formats in the order of :data:`FIGURE_FORMATS`, each once.

    Raises
    ------
    zoning.exceptions.ZoningError
        For an empty list or a format not in :data:`FIGURE_FORMATS`.
    """
    if formats is None:
        return DEFAULT_FIGURE_FORMATS
    items = formats.split(",") if isinstance(formats, str) else list(formats)
    if not all(isinstance(f, str) for f in items):
        raise ZoningError(
            f"figure formats must be names such as 'png'; got {formats!r}. Give e.g. "
            "--figure-format png,pdf (project key figure_format = [\"png\", \"pdf\"])."
        )
    given = [f.strip().lower().lstrip(".") for f in items if f.strip()]
    unknown = [f for f in given if f not in FIGURE_FORMATS]
    if unknown or not given:
        raise ZoningError(
            f"figure format {', '.join(map(repr, unknown)) if unknown else 'list'} "
            f"{'is not known' if unknown else 'is empty'} (got {formats!r}); zoning writes "
            f"{', '.join(FIGURE_FORMATS)}, any of them. Give e.g. --figure-format png,svg "
            "(project key figure_format = [\"png\", \"svg\"]), or --no-figures for none."
        )
    return tuple(f for f in FIGURE_FORMATS if f in given)


def _rc(style: FigureStyle) -> dict[str, Any]:
    return {
        "font.size": style.font_pt,
        "axes.labelsize": style.font_pt,
        "axes.titlesize": style.font_pt,
        "figure.titlesize": style.title_pt,
        "legend.fontsize": style.legend_pt,
        "legend.title_fontsize": style.legend_pt,
        "xtick.labelsize": style.tick_pt,
        "ytick.labelsize": style.tick_pt,
        "axes.linewidth": 0.8 * style.line_scale,
        "errorbar.capsize": 0.0,
    }


@contextlib.contextmanager
def _styled(style: str | FigureStyle | None) -> Iterator[FigureStyle]:
    """Draw with this preset: its fonts (rcParams) and the current style of the helpers."""
    st = figure_style(style)
    token = _CURRENT.set(st)
    try:
        with mpl.rc_context(_rc(st)):
            yield st
    finally:
        _CURRENT.reset(token)


def _style() -> FigureStyle:
    return _CURRENT.get()


def _new_figure(width: float, height: float) -> Figure:
    st = _style()
    pad = 0.04 * max(st.font_pt / 9.0, 1.0)
    fig = Figure(figsize=(width, height), layout="constrained")
    fig.get_layout_engine().set(w_pad=pad, h_pad=pad)
    return fig


#: Fewest characters per line :func:`_wrap` wraps to: a tiny panel gets a
#: label wider than itself rather than a column of one-word lines.
_MIN_WRAP_CHARS = 12


def _wrap(text: str, chars: int) -> str:
    """Wrap text on word boundaries (never cut); long words are kept whole.

    Lines are never wrapped to fewer than :data:`_MIN_WRAP_CHARS` characters,
    whatever `chars` is (also zero or negative, from a space too small).
    """
    text = str(text)
    chars = max(int(chars), _MIN_WRAP_CHARS)
    if max(len(line) for line in text.split("\n")) <= chars:
        return text
    # Line breaks already in the text are kept; each line is wrapped alone.
    return "\n".join("\n".join(textwrap.wrap(line, chars, break_long_words=False,
                                             break_on_hyphens=False)) or line
                     for line in text.split("\n"))


def _chars(width_in: float, pt: float) -> int:
    """About how many characters of a `pt` font fit in `width_in` [in] (DejaVu Sans)."""
    return int(width_in * 72.0 / (0.6 * pt))


def _title(fig: Figure, text: str) -> None:
    st = _style()
    fig.suptitle(_wrap(text, _chars(fig.get_figwidth() * 0.95, st.title_pt)),
                 fontsize=st.title_pt)


def _finish(fig: Figure, *, tick_scale: float = 1.0) -> Figure:
    """Apply the current preset's line widths, marker sizes and tick sizes to a drawn figure.

    Figure code draws with the widths of the thesis preset; this scales
    them, so each figure function needs no knowledge of the presets. Tick
    labels are set explicitly because matplotlib creates ticks lazily, when
    the figure is saved (outside the style's rcParams).
    """
    st = _style()
    if st.line_scale != 1.0 or st.marker_scale != 1.0:
        for ax in _all_axes(fig):
            for art in ax.get_children():
                _scale_artist(art, st)
            leg = ax.get_legend()
            if leg is not None:
                for h in leg.legend_handles:
                    _scale_artist(h, st)
        for leg in _all_legends(fig):
            for h in leg.legend_handles:
                _scale_artist(h, st)
    for ax in _all_axes(fig):
        # Axis labels longer than their panel wrap instead of running off the figure.
        width = _panel_width(ax)
        if ax.get_xlabel():
            ax.set_xlabel(_wrap(ax.get_xlabel(), _chars(width, st.font_pt)))
        height = ax.get_position().height * ax.get_figure(root=True).get_figheight()
        if ax.get_ylabel():
            ax.set_ylabel(_wrap(ax.get_ylabel(), _chars(height, st.font_pt)))
        ax.tick_params(which="major", labelsize=st.tick_pt * tick_scale,
                       width=0.8 * st.line_scale, length=3.5 * st.line_scale,
                       pad=3.0 * max(st.line_scale, 0.8))
        ax.tick_params(which="minor", labelsize=st.tick_pt * tick_scale,
                       width=0.6 * st.line_scale, length=2.0 * st.line_scale)
        for spine in ax.spines.values():
            spine.set_linewidth(0.8 * st.line_scale)
    return fig


def _scale_artist(art, st: FigureStyle) -> None:
    if getattr(art, "_zoning_scaled", False):
        return
    if isinstance(art, Line2D):
        art.set_linewidth(art.get_linewidth() * st.line_scale)
        art.set_markersize(art.get_markersize() * st.marker_scale)
        art.set_markeredgewidth(art.get_markeredgewidth() * st.line_scale)
    elif isinstance(art, Collection):
        lw = np.atleast_1d(art.get_linewidths())
        art.set_linewidths(lw * st.line_scale)
    else:
        return
    art._zoning_scaled = True


def _legend_entries(axes) -> tuple[list, list[str]]:
    """Return the handles and labels of these axes, each label once (first wins)."""
    handles, labels = [], []
    for ax in axes:
        for h, lab in zip(*ax.get_legend_handles_labels(), strict=True):
            if lab and not lab.startswith("_") and lab not in labels:
                handles.append(h)
                labels.append(lab)
    return handles, labels


def _all_axes(fig) -> list:
    """Axes of a figure and of its subfigures."""
    out = list(fig.axes)
    for sub in getattr(fig, "subfigs", []):
        out += _all_axes(sub)
    return out


def _all_legends(fig) -> list:
    """Figure-level legends of a figure and of its subfigures."""
    out = list(fig.legends)
    for sub in getattr(fig, "subfigs", []):
        out += _all_legends(sub)
    return out


def _panel_width(ax) -> float:
    """Width a panel will have after the layout, about [in].

    From its share of the grid (the positions before layout keep
    matplotlib's default margins, far wider than constrained layout's).
    """
    root = ax.get_figure(root=True)
    parent = ax.get_figure(root=False)
    width = root.get_figwidth()
    if parent is not root:
        width *= parent.bbox_relative.width
    spec = ax.get_subplotspec()
    if spec is None:
        return float(ax.get_position().width * root.get_figwidth())
    grid = spec.get_gridspec()
    ratios = list(grid.get_width_ratios() or [1.0] * grid.ncols)
    share = sum(ratios[spec.colspan.start:spec.colspan.stop]) / sum(ratios)
    return float(width * share * 0.85)


#: Share of the figure width given to a legend on the right of the panels.
_RIGHT_LEGEND = 0.27


def _panel_area(fig: Figure, side: str | None = None):
    """Return (where to draw the panels, where the legend goes or None).

    With the legend on the right the figure is split into two subfigures, so
    that a tall legend never squeezes the panels (constrained layout would
    give a legend attached to the top panel the height of that panel).
    """
    side = side or _style().legend_side
    if side != "right":
        return fig, None
    panels, legend = fig.subfigures(1, 2, width_ratios=[1.0 - _RIGHT_LEGEND, _RIGHT_LEGEND],
                                    wspace=0.0)
    return panels, legend


def _figure_legend(ax, handles, labels, *, host=None):
    """One legend for a whole figure, outside the panels, with wrapped (never cut) labels.

    Above the top panel `ax` (attached to it, so that the layout makes room
    for it below the figure title), or in the subfigure `host` of
    :func:`_panel_area` beside the panels.
    """
    st = _style()
    fig = ax.get_figure(root=True)
    if host is not None:
        chars = _chars(_RIGHT_LEGEND * fig.get_figwidth(), st.legend_pt) - 5
        return host.legend(handles, [_wrap(lab, chars) for lab in labels], loc="upper left",
                           borderaxespad=0.0, ncol=1, fontsize=st.legend_pt, frameon=False)
    ncol = max(1, min(st.legend_columns, len(labels)))
    chars = _chars(fig.get_figwidth() / ncol, st.legend_pt) - 7
    # Not mode="expand": with it, constrained layout collapses the panels when
    # the figure is saved in a second format (matplotlib 3.10-3.11).
    return ax.legend(handles, [_wrap(lab, chars) for lab in labels], loc="lower center",
                     bbox_to_anchor=(0.5, 1.02), borderaxespad=0.0, ncol=ncol,
                     fontsize=st.legend_pt, frameon=False)


def _axes_legend(ax, **kw):
    """Legend inside one panel, with labels wrapped to a third of the panel width."""
    st = _style()
    handles, labels = _legend_entries([ax])
    if not labels:
        return None
    chars = _chars(max(_panel_width(ax) * 0.7, 1.0), st.legend_pt)
    kw.setdefault("fontsize", st.legend_pt)
    kw.setdefault("loc", "best")
    return ax.legend(handles, [_wrap(lab, chars) for lab in labels], **kw)

#: Label of the crystallized-fraction axes.
F_LABEL = "F, fraction crystallized [0–1]"

#: Hollow markers for flagged spots, one per distinct reason.
_FLAG_MARKERS = ("o", "s", "^", "D", "v", "P", "X", "<", ">", "h")

_LABELS = {
    "melt_mg_number": "parent melt Mg#",
    "melt_ca_number": "parent melt Ca#",
    "f_rim": "F at rim",
    "f_core": "F at core",
    "retention": "retention r",
    "kd": "Kd",
    "growth_exponent": "growth exponent n",
    "core_offset_um": "core offset [µm]",
    "melt0_ni_ppm": "parent melt Ni [ppm]",
    "melt0_sr_ppm": "parent melt Sr [ppm]",
    "melt0_mgo_wt": "parent melt MgO [wt%]",
    "melt_mgo_wt": "parent melt MgO [wt%]",
    "melt_cao_wt": "parent melt CaO [wt%]",
    "temperature_c": "parent temperature [°C]",
    "section_h_over_r": "section h/R",
    "diffusion_length_um": "diffusion length L [µm]",
    "diffusion_time_days": "diffusion time [days]",
}


#: Short labels for the crowded axes of the corner plot.
_SHORT = {
    "melt_mg_number": "parent Mg#",
    "melt_ca_number": "parent Ca#",
    "f_rim": "F rim",
    "f_core": "F core",
    "retention": "r",
    "growth_exponent": "n",
    "core_offset_um": "offset [µm]",
    "melt0_ni_ppm": "Ni [ppm]",
    "melt0_sr_ppm": "Sr [ppm]",
    "melt0_mgo_wt": "MgO [wt%]",
    "section_h_over_r": "h/R",
    "diffusion_length_um": "L [µm]",
    "diffusion_time_days": "t [days]",
}


def quantity_label(name: str) -> str:
    """Readable axis label of a fitted quantity.

    Parameters
    ----------
    name : str
        Quantity name as in :attr:`FitResult.estimates`.

    Returns
    -------
    str
    """
    return _LABELS.get(name, name.replace("_", " "))


def _major_label(mineral: str) -> str:
    return "Fo [mol%]" if mineral == "olivine" else "An [mol%]"


def _trace_oxides(result) -> list[str]:
    cols = [c for c in result.spots.columns if c.endswith("_observed") and c != "observed"]
    return [c[: -len("_observed")] for c in cols]


def _flag_groups(spots: pd.DataFrame) -> list[tuple[str, pd.DataFrame]]:
    """Spots not used in the fit, grouped by the reason shown in the legend."""
    unused = spots[~spots["used"].astype(bool)]
    reasons = []
    for _, row in unused.iterrows():
        reason = str(row.get("reason", "") or "")
        if row.get("status", "ok") == "ok" or not reason:
            reason = "outside fitted range" if row.get("status", "ok") == "ok" else "flagged"
        reasons.append(reason)
    unused = unused.assign(_why=reasons)
    return [(why, grp) for why, grp in unused.groupby("_why", sort=True)]


def _sides(result, spots: pd.DataFrame) -> pd.Series:
    """Half-profile ("A"/"B", "" for one half) of each spot, from the traverse."""
    t = getattr(result, "traverse", None)
    tsp = getattr(t, "spots", None)
    if tsp is None or "side" not in tsp or "row" not in tsp or "row" not in spots:
        return pd.Series("", index=spots.index)
    side = dict(zip(tsp["row"].tolist(), tsp["side"].fillna("").astype(str), strict=True))
    return spots["row"].map(side).fillna("").astype(str)


def _draw_spots(ax, spots: pd.DataFrame, x: str, y: str, sig: str | None, mineral_color: str,
                flag_labels: bool = True, sides: pd.Series | None = None):
    used = spots[spots["used"].astype(bool)]
    side = (sides if sides is not None else pd.Series("", index=spots.index)).loc[used.index]
    halves = sorted(v for v in side.unique() if v)
    groups = [("", used)] if len(halves) < 2 else [(h, used[side == h]) for h in halves]
    styles = {"": ("o", mineral_color), halves[0] if halves else "A": ("o", mineral_color)}
    if len(halves) >= 2:
        styles[halves[1]] = ("D", PALETTE["purple"])
    for half, grp in groups:
        xs = grp[x].to_numpy(float)
        ys = grp[y].to_numpy(float)
        es = grp[sig].to_numpy(float) if sig and sig in grp else None
        if es is not None and not np.isfinite(es).any():
            es = None
        marker, colour = styles.get(half, ("o", mineral_color))
        label = (f"measured ({len(grp)} spots used)" if not half
                 else f"measured, half {half} ({len(grp)} spots used)")
        ax.errorbar(
            xs, ys, yerr=es, fmt=marker, ms=4, color=colour, ecolor=colour,
            elinewidth=0.8, capsize=0, label=label, zorder=4,
        )
    for k, (why, grp) in enumerate(_flag_groups(spots)):
        gx = grp[x].to_numpy(float)
        gy = grp[y].to_numpy(float)
        ok = np.isfinite(gx) & np.isfinite(gy)
        if not ok.any():
            continue
        ax.plot(
            gx[ok], gy[ok], linestyle="none", marker=_FLAG_MARKERS[k % len(_FLAG_MARKERS)],
            ms=5, mfc="none", mec=PALETTE["vermillion"], mew=1.0,
            label=f"not used: {why}" if flag_labels else None, zorder=5,
        )


def _shade_reversals(ax, result) -> None:
    rev = getattr(result, "reversals", None)
    if rev is None or len(rev) == 0 or "start_um" not in rev:
        return
    for i, (_, r) in enumerate(rev.iterrows()):
        ax.axvspan(
            float(r["start_um"]), float(r["end_um"]), color=PALETTE["yellow"], alpha=0.3,
            lw=0, label="reversal (recharge/mixing?)" if i == 0 else None, zorder=0,
        )


def _zoom_to_used(ax, spots: pd.DataFrame, y: str, sig: str | None,
                  curves: list[np.ndarray]) -> None:
    """Scale the y axis to the used spots and the model; pin far-off spots at the edge.

    A flagged spot far from the rest (e.g. a glass hit) would otherwise
    squash the profile; it is drawn at the edge of the panel with a note.
    """
    used = spots[spots["used"].astype(bool)]
    vals = [used[y].to_numpy(float)]
    if sig and sig in used:
        e = np.nan_to_num(used[sig].to_numpy(float))
        vals += [vals[0] - e, vals[0] + e]
    vals += [np.asarray(c, float) for c in curves]
    allv = np.concatenate([v.ravel() for v in vals]) if vals else np.array([])
    allv = allv[np.isfinite(allv)]
    if allv.size == 0:
        return
    lo, hi = float(allv.min()), float(allv.max())
    pad = 0.08 * (hi - lo) if hi > lo else max(abs(hi) * 0.05, 1e-3)
    lo, hi = lo - pad, hi + pad
    ax.set_ylim(lo, hi)
    for line in ax.lines:
        if not line.get_label().startswith("not used") and line.get_markerfacecolor() != "none":
            continue
        ys = np.asarray(line.get_ydata(), float)
        off = (ys < lo) | (ys > hi)
        if not off.any() or line.get_linestyle() not in ("None", "none", ""):
            continue
        xs = np.asarray(line.get_xdata(), float)
        clipped = np.clip(ys, lo, hi)
        line.set_ydata(clipped)
        line.set_clip_on(False)
        for xv, yv, orig in zip(xs[off], clipped[off], ys[off], strict=True):
            ax.annotate(f"{orig:.3g} (off scale)", (xv, yv), xytext=(5, -10 if yv >= hi else 4),
                        textcoords="offset points", fontsize=_style().legend_pt,
                        color=PALETTE["vermillion"], zorder=10)


def profile_figure(result, *, ax=None, fig: Figure | None = None,
                   style: str | FigureStyle | None = None) -> Figure:
    """Measured profile, best fit, 95% band and the two limiting models.

    Panels (top to bottom): Fo or An versus distance from the core with
    error bars (spots not used in the fit drawn hollow, with their reason in
    the legend), the best-fit curve, its 95% band, the best pure-fractional
    (r = 0) and pure-equilibrium (r = 1) curves; one panel per fitted trace
    oxide; the residuals (observed - model). A curve that lies under the
    best fit over the whole traverse says so in the legend.

    Parameters
    ----------
    result : FitResult
        A fit of one traverse.
    ax : matplotlib.axes.Axes, optional
        Draw only the main panel into this Axes (e.g. in a notebook).
    fig : matplotlib.figure.Figure, optional
        Draw all panels into this (empty) figure.
    style : str or FigureStyle, optional
        Preset of :data:`FIGURE_STYLES` (default ``"thesis"``).

    Returns
    -------
    matplotlib.figure.Figure
    """
    with _styled(style) as st:
        traces = _trace_oxides(result)
        if ax is not None:
            _profile_main(ax, result)
            _mark_hidden(ax)
            _axes_legend(ax)
            return ax.figure
        n = 2 + len(traces)
        if fig is None:
            fig = _new_figure(st.width_in, st.height(3.6 + 1.6 * (n - 1)))
        ratios = [3] + [2] * len(traces) + [1.3]
        area, host = _panel_area(fig)
        axes = area.subplots(n, 1, sharex=True, gridspec_kw={"height_ratios": ratios})
        _profile_main(axes[0], result)
        _mark_hidden(axes[0])
        axes[0].set_xlabel("")
        for a, oxide in zip(axes[1:-1], traces, strict=True):
            _profile_trace(a, result, oxide)
        _profile_residuals(axes[-1], result)
        axes[-1].set_xlabel("Distance from core [µm]")
        # One legend for every panel, outside the data (the trace panels use
        # the same symbols as the main panel).
        _figure_legend(axes[0], *_legend_entries(axes), host=host)
        _title(fig, f"{result.sample} ({result.mineral}): measured profile and fit")
        return _finish(fig)


#: Legend label of the best-fit curve: as fitted, or after the fitted diffusion.
BEST_LABEL = "best fit"
RELAXED_LABEL = "best fit (relaxed)"
_BEST_LABELS = (BEST_LABEL, RELAXED_LABEL)


def _relaxed(result) -> bool:
    """Return True when the best fit was relaxed by diffusion after growth.

    (The grown profile differs from the best fit somewhere.)
    """
    curve = result.curve
    return "best_grown" in curve and "best" in curve and bool(np.any(
        np.abs(curve["best_grown"].to_numpy(float) - curve["best"].to_numpy(float)) > 0))


def _best_label(result) -> str:
    return RELAXED_LABEL if _relaxed(result) else BEST_LABEL


#: A curve within this fraction of the y range of the best fit everywhere is
#: drawn under it (about one line width at print size).
_HIDDEN_FRACTION = 0.01


def _mark_hidden(ax) -> None:
    """Say in the legend which curves lie under the best fit along the whole traverse."""
    best = [ln for ln in ax.lines if ln.get_label() in _BEST_LABELS]
    if not best:
        return
    bx = np.asarray(best[0].get_xdata(), float)
    by = np.asarray(best[0].get_ydata(), float)
    lo, hi = ax.get_ylim()
    tol = _HIDDEN_FRACTION * abs(hi - lo)
    for ln in ax.lines:
        label = ln.get_label()
        if ln is best[0] or label.startswith(("_", "not used", "measured")):
            continue
        if ln.get_linestyle() in ("None", "none", "") or len(ln.get_xdata()) != len(bx):
            continue
        y = np.asarray(ln.get_ydata(), float)
        ok = np.isfinite(y) & np.isfinite(by)
        if ok.any() and np.allclose(np.asarray(ln.get_xdata(), float), bx) and (
                np.max(np.abs(y[ok] - by[ok])) <= tol):
            ln.set_label(f"{label}: under the best fit")


def _profile_main(ax, result) -> None:
    curve = result.curve
    spots = result.spots
    d = curve["distance_um"].to_numpy(float)
    _shade_reversals(ax, result)
    if {"lo95", "hi95"} <= set(curve.columns):
        ax.fill_between(
            d, curve["lo95"].to_numpy(float), curve["hi95"].to_numpy(float),
            color=PALETTE["sky"], alpha=0.45, lw=0, label="95% band", zorder=1,
        )
    if "fractional" in curve:
        ax.plot(d, curve["fractional"], color=PALETTE["orange"], ls="--", lw=1.2,
                label="pure fractional (r = 0)", zorder=2)
    if "equilibrium" in curve:
        ax.plot(d, curve["equilibrium"], color=PALETTE["green"], ls=":", lw=1.5,
                label="pure equilibrium (r = 1)", zorder=2)
    grown = _relaxed(result)
    if grown:  # diffusion after growth fitted: the profile as grown, before relaxing
        ax.plot(d, curve["best_grown"], color=PALETTE["blue"], ls="-.", lw=1.1,
                label="best fit as grown (before diffusion)", zorder=3)
    if "best" in curve:
        ax.plot(d, curve["best"], color=PALETTE["blue"], lw=1.8,
                label=_best_label(result), zorder=3)
    _draw_spots(ax, spots, "distance_um", "observed", "sigma", PALETTE["black"],
                sides=_sides(result, spots))
    _zoom_to_used(ax, spots, "observed", "sigma",
                  [curve[c].to_numpy(float) for c in ("best", "lo95", "hi95", "fractional",
                                                      "equilibrium", "best_grown")
                   if c in curve])
    ax.set_ylabel(_major_label(result.mineral))
    ax.set_xlabel("Distance from core [µm]")


def _profile_trace(ax, result, oxide: str) -> None:
    curve = result.curve
    spots = result.spots
    d = curve["distance_um"].to_numpy(float)
    if {f"{oxide}_lo95", f"{oxide}_hi95"} <= set(curve.columns):
        ax.fill_between(d, curve[f"{oxide}_lo95"], curve[f"{oxide}_hi95"],
                        color=PALETTE["sky"], alpha=0.45, lw=0, label="95% band")
    if f"{oxide}_best" in curve:
        # The same label as the main panel's curve (relaxed by the same
        # diffusion), so that the shared legend has one best-fit entry.
        ax.plot(d, curve[f"{oxide}_best"], color=PALETTE["blue"], lw=1.8,
                label=_best_label(result))
    sig = f"{oxide}_sigma" if f"{oxide}_sigma" in spots else None
    _draw_spots(ax, spots, "distance_um", f"{oxide}_observed", sig, PALETTE["black"],
                flag_labels=False, sides=_sides(result, spots))
    _zoom_to_used(ax, spots, f"{oxide}_observed", sig,
                  [curve[c].to_numpy(float) for c in (f"{oxide}_best", f"{oxide}_lo95",
                                                      f"{oxide}_hi95") if c in curve])
    ax.set_ylabel(f"{oxide} [wt%]")


def _profile_residuals(ax, result) -> None:
    spots = result.spots
    used = spots[spots["used"].astype(bool)]
    x = used["distance_um"].to_numpy(float)
    r = used["residual"].to_numpy(float)
    s = used["sigma"].to_numpy(float) if "sigma" in used else None
    if s is not None and not np.isfinite(s).any():
        s = None
    ax.axhline(0.0, color=PALETTE["grey"], lw=0.8)
    ax.errorbar(x, r, yerr=s, fmt="o", ms=3, color=PALETTE["black"], elinewidth=0.8)
    unit = "Fo" if result.mineral == "olivine" else "An"
    ax.set_ylabel(f"residual\n[mol% {unit}]")


def _f_of_distance(result, distance: np.ndarray) -> np.ndarray:
    curve = result.curve
    d = curve["distance_um"].to_numpy(float)
    f = curve["f"].to_numpy(float)
    order = np.argsort(d)
    return np.interp(distance, d[order], f[order], left=np.nan, right=np.nan)


def melt_path_figure(result, *, ax=None, fig: Figure | None = None,
                     style: str | FigureStyle | None = None) -> Figure:
    """Melt evolution with the crystallized fraction F, and the crystal record.

    Panels: melt Mg# (olivine) or Ca# (plagioclase) versus F with the
    parent marked; the oxides of the exchanging pair in the melt (for
    olivine the FeO that enters Mg# is Fe2+ only, drawn with the total iron
    as FeO beside it); the melt temperature where a law gives it; the
    crystal composition recorded (best-fit curve and the measured spots
    placed at their F). For a fit with the binary-loop law the loop itself
    (liquidus and solidus) is drawn with the equilibrium and fractional
    paths.

    Parameters
    ----------
    result : FitResult
        A fit of one traverse.
    ax : matplotlib.axes.Axes, optional
        Draw only the melt-ratio panel into this Axes.
    fig : matplotlib.figure.Figure, optional
        Draw all panels into this (empty) figure.
    style : str or FigureStyle, optional
        Preset of :data:`FIGURE_STYLES` (default ``"thesis"``).

    Returns
    -------
    matplotlib.figure.Figure
    """
    with _styled(style) as st:
        if ax is not None:
            _melt_ratio_panel(ax, result)
            _axes_legend(ax)
            return ax.figure
        if fig is None:
            fig = _new_figure(st.width_in, st.height(6.4 if st.narrow else 5.2))
        shape = (4, 1) if st.narrow else (2, 2)
        axes = fig.subplots(*shape, sharex=True).ravel()
        _melt_ratio_panel(axes[0], result)
        _melt_oxide_panel(axes[1], result)
        _temperature_panel(axes[2], result)
        _record_panel(axes[3], result)
        for a in axes[-shape[1]:]:
            a.set_xlabel(F_LABEL)
            a.xaxis.set_major_locator(MaxNLocator(4 if st.narrow else 5))
        _title(fig, f"{result.sample}: melt path of the best fit")
        if _is_loop(result):
            _loop_inset(fig, result)
        # One legend below the panels: inside them it would cover the curves
        # and spots of the small panels.
        handles, labels = _legend_entries(fig.axes)
        ncol = 2 if st.narrow else (4 if st.legend_side == "right" else 3)
        chars = _chars(fig.get_figwidth() / ncol, st.legend_pt) - 7
        fig.legend(handles, [_wrap(lab, chars) for lab in labels], loc="outside lower center",
                   ncol=ncol, fontsize=st.legend_pt, frameon=False)
        return _finish(fig)


def _melt_ratio_panel(ax, result) -> None:
    curve = result.curve
    f = curve["f"].to_numpy(float)
    name = "melt_mg_number" if result.mineral == "olivine" else "melt_ca_number"
    label = "melt Mg#" if result.mineral == "olivine" else "melt Ca#"
    if "melt_ratio" in curve:
        ax.plot(f, curve["melt_ratio"], color=PALETTE["blue"], lw=1.8, label=label)
    est = result.estimates.get(name)
    if est is not None and np.isfinite(est.best):
        f0 = float(np.nanmin(f)) if len(f) else 0.0
        ax.plot([f0], [est.best], marker="*", ms=11, color=PALETTE["vermillion"],
                linestyle="none", label="parent", zorder=5)
        if np.isfinite(est.lo95) and np.isfinite(est.hi95):
            # Non-negative by construction (best is the median, inside its
            # band); clipped so that a result from elsewhere cannot crash it.
            err = [[max(est.best - est.lo95, 0.0)], [max(est.hi95 - est.best, 0.0)]]
            ax.errorbar([f0], [est.best], yerr=err,
                        color=PALETTE["vermillion"], capsize=3, lw=1)
    ax.set_ylabel(label + " [fraction]")


def _melt_oxide_panel(ax, result) -> None:
    curve = result.curve
    f = curve["f"].to_numpy(float)
    cols = [c for c in curve.columns if c.startswith("melt_") and c.endswith("_wt")]
    colours = [PALETTE["orange"], PALETTE["green"], PALETTE["purple"], PALETTE["sky"]]
    drawn = 0
    fe3 = _number(result.settings.get("fe3_fraction", np.nan))
    for c, col in zip(cols, colours * 3, strict=False):
        y = curve[c].to_numpy(float)
        if not np.isfinite(y).any():
            continue
        oxide = c[len("melt_"):-len("_wt")]
        if oxide.lower() == "feo" and result.mineral == "olivine":
            # The exchange (and Mg#) uses Fe2+ only: the model's melt FeO is
            # Fe2+ as FeO; total iron as FeO is FeO(2+) / (1 - Fe3+/FeT).
            ax.plot(f, y, color=col, lw=1.6, label="melt FeO, Fe²⁺ only")
            if np.isfinite(fe3) and 0.0 <= fe3 < 1.0:
                ax.plot(f, y / (1.0 - fe3), color=col, lw=1.2, ls="--",
                        label=f"melt FeOT, total Fe (Fe³⁺/FeT {fe3:.2f})")
        else:
            ax.plot(f, y, color=col, lw=1.6, label=f"melt {_oxide_name(oxide)}")
        drawn += 1
    if not drawn:
        ax.text(0.5, 0.5, "no melt oxide path", transform=ax.transAxes, ha="center")
    ax.set_ylabel("melt oxide [wt%]")


def _number(value: Any) -> float:
    try:
        return float(value)
    except (TypeError, ValueError):
        return float("nan")


def _oxide_name(key: str) -> str:
    names = {"mgo": "MgO", "feo": "FeO", "cao": "CaO", "na2o": "Na2O", "k2o": "K2O",
             "sio2": "SiO2", "al2o3": "Al2O3"}
    return names.get(key.lower(), key)


def _temperature_panel(ax, result) -> None:
    curve = result.curve
    t = curve["temperature_c"].to_numpy(float) if "temperature_c" in curve else np.array([])
    if t.size and np.isfinite(t).any() and np.nanmax(t) - np.nanmin(t) < 1e-9:
        ax.plot(curve["f"], t, color=PALETTE["grey"], lw=1.2, ls="--")
        ax.text(0.5, 0.6, f"temperature fixed at {np.nanmax(t):.0f} °C\n(given, not modelled)",
                transform=ax.transAxes, ha="center", va="center", color=PALETTE["grey"],
                fontsize="small")
        ax.set_ylabel("melt temperature [°C]")
    elif t.size and np.isfinite(t).any():
        ax.plot(curve["f"], t, color=PALETTE["vermillion"], lw=1.6)
        ax.set_ylabel("melt temperature [°C]")
    else:
        ax.text(0.5, 0.5, "no temperature law\nfor this model", transform=ax.transAxes,
                ha="center", va="center", color=PALETTE["grey"])
        ax.set_ylabel("melt temperature [°C]")


def _record_panel(ax, result) -> None:
    curve = result.curve
    if "best" in curve:
        ax.plot(curve["f"], curve["best"], color=PALETTE["blue"], lw=1.8, label="recorded (fit)")
    spots = result.spots
    used = spots[spots["used"].astype(bool)]
    fx = _f_of_distance(result, used["distance_um"].to_numpy(float))
    ax.plot(fx, used["observed"].to_numpy(float), "o", ms=3.5, color=PALETTE["black"],
            label="measured, at fitted F")
    ax.set_ylabel("crystal " + _major_label(result.mineral))


def _is_loop(result) -> bool:
    law = str(result.settings.get("law", "") or result.settings.get("partitioning", ""))
    return "loop" in law.lower()


def _loop_inset(fig: Figure, result):
    """Replace the temperature panel by the binary loop for a loop-law fit."""
    name = "melt_mg_number" if result.mineral == "olivine" else "melt_ca_number"
    est = result.estimates.get(name)
    if est is None or not np.isfinite(est.best):
        return None
    # A new panel in the place of the temperature panel: the loop's x axis is
    # composition, not F, so it must not share x with the other panels.
    old = fig.axes[2]
    spec = old.get_subplotspec()
    old.remove()
    ax = fig.add_subplot(spec)
    loop_figure(result.mineral, est.best, ax=ax)
    # The panel above it shares F with the others but now needs its own F labels.
    above = fig.axes[0]
    above.tick_params(labelbottom=True)
    above.set_xlabel(F_LABEL)
    # Its entries go into the figure's legend below the panels.
    ax.get_legend().remove()
    return ax


def loop_figure(mineral: str, bulk: float, *, ax=None, fig: Figure | None = None,
                f_max: float = 0.99, style: str | FigureStyle | None = None) -> Figure:
    """Binary solid-solution loop with the equilibrium and fractional paths.

    Draws the liquidus and solidus of the forsterite-fayalite or
    anorthite-albite loop of :mod:`zoning.loops` (temperature versus
    composition), the bulk composition, and the liquid and crystal
    compositions along the equilibrium (r = 1) and fractional (r = 0)
    paths: fractional crystallization drives the last liquid and the last
    crystal beyond the equilibrium end point of the same bulk composition.

    Parameters
    ----------
    mineral : {"olivine", "plagioclase"}
        Selects the loop.
    bulk : float
        Bulk liquid composition: melt Mg# or Ca# [fraction].
    ax : matplotlib.axes.Axes, optional
        Draw into this Axes.
    fig : matplotlib.figure.Figure, optional
        Draw into this (empty) figure.
    f_max : float, optional
        Largest crystallized fraction of the fractional path [fraction].
    style : str or FigureStyle, optional
        Preset of :data:`FIGURE_STYLES` (default ``"thesis"``).

    Returns
    -------
    matplotlib.figure.Figure
    """
    with _styled(style):
        return _loop(mineral, bulk, ax, fig, f_max)


def _loop(mineral: str, bulk: float, ax, fig: Figure | None, f_max: float) -> Figure:
    from zoning.loops import LOOPS

    st = _style()
    loop = LOOPS[mineral]
    alone = ax is None
    host = None
    if alone:
        fig = fig if fig is not None else _new_figure(
            st.width_in, st.height(4.6 if st.narrow else 3.4))
        area, host = _panel_area(fig, "top" if st.narrow else "right")
        ax = area.add_subplot(1, 1, 1)
    end = "Fo" if mineral == "olivine" else "An"
    curves = loop.curves()
    t = curves["temperature_c"]
    ax.plot(100 * curves["x_liquid"], t, color=PALETTE["grey"], lw=1.0, label="liquidus")
    ax.plot(100 * curves["x_solid"], t, color=PALETTE["grey"], lw=1.0, ls="--",
            label="solidus")
    eq = loop.path(np.linspace(0.0, 1.0, 120), bulk, 1.0)
    fr = loop.path(np.linspace(0.0, f_max, 120), bulk, 0.0)
    ax.plot(100 * fr["x_liquid"], fr["temperature_c"], color=PALETTE["orange"], lw=5,
            alpha=0.55, solid_capstyle="butt", label="fractional (r = 0): liquid")
    ax.plot(100 * fr["x_solid"], fr["temperature_c"], color=PALETTE["orange"], lw=5,
            alpha=0.55, ls=(0, (1, 1)), label="fractional: crystal rim")
    ax.plot(100 * eq["x_liquid"], eq["temperature_c"], color=PALETTE["green"], lw=1.8,
            label="equilibrium (r = 1): liquid")
    ax.plot(100 * eq["x_solid"], eq["temperature_c"], color=PALETTE["green"], lw=1.8, ls=":",
            label="equilibrium: crystal")
    for path, colour, marker, what in ((eq, PALETTE["green"], "s", "equilibrium"),
                                       (fr, PALETTE["orange"], "v", "fractional")):
        # clip_on=False: the last liquid may lie at a pure end member, on the panel edge.
        ax.plot(100 * path["x_liquid"][-1], path["temperature_c"][-1], marker=marker, ms=7,
                color=colour, linestyle="none", label=f"{what}: last liquid", clip_on=False)
    ax.axvline(100 * bulk, color=PALETTE["grey"], lw=0.8, label=f"bulk {end}{100 * bulk:.0f}")
    ax.set_xlabel(f"{end} [mol%]")
    ax.set_ylabel("temperature [°C]")
    # Padded beyond 0-100 so that an end point at a pure end member is drawn whole.
    ax.set_xlim(-4, 104)
    ax.set_xticks([0, 20, 40, 60, 80, 100])
    if alone:
        _figure_legend(ax, *_legend_entries([ax]), host=host)
        return _finish(fig)
    # Inside another figure: the legend beside the panel, outside the data.
    _axes_legend(ax, loc="upper left", bbox_to_anchor=(1.02, 1.0), borderaxespad=0.0)
    return ax.figure


def _hist_levels(h: np.ndarray, fractions=(0.68, 0.95)) -> list[float]:
    flat = np.sort(h.ravel())[::-1]
    cum = np.cumsum(flat)
    if cum[-1] <= 0:
        return []
    cum /= cum[-1]
    levels = [flat[min(np.searchsorted(cum, q), len(flat) - 1)] for q in fractions]
    return sorted(set(float(v) for v in levels if v > 0))


def corner_figure(
    result, *, fig: Figure | None = None, names: Sequence[str] | None = None,
    max_points: int = 3000, seed: int = 0, style: str | FigureStyle | None = None,
) -> Figure:
    """Pairwise posterior plot with marginal histograms.

    Lower triangle: the posterior draws as light points with the 68% and 95%
    highest-density contours of their 2-d histogram; diagonal: the marginal
    histogram with the best value (solid) and the 95% band (dashed).

    Parameters
    ----------
    result : FitResult
        A fit with posterior ``samples``.
    fig : matplotlib.figure.Figure, optional
        Draw into this (empty) figure.
    names : sequence of str, optional
        Parameters to show (default: all of ``result.parameter_names``).
    max_points : int, optional
        Most points drawn per panel (a fixed-seed subsample; contours and
        histograms use every draw).
    seed : int, optional
        Seed of the subsample (figures are reproducible).
    style : str or FigureStyle, optional
        Preset of :data:`FIGURE_STYLES` (default ``"thesis"``).

    Returns
    -------
    matplotlib.figure.Figure
    """
    with _styled(style):
        fig = _corner(result, fig, names, max_points, seed)
        return _finish(fig, tick_scale=0.85)


#: From this many parameters on, the corner plot turns its x tick labels upright.
_CORNER_ROTATE_FROM = 4


def _corner(result, fig, names, max_points, seed) -> Figure:
    st = _style()
    all_names = list(result.parameter_names)
    names = list(names) if names is not None else all_names
    idx = [all_names.index(n) for n in names]
    samples = np.asarray(result.samples, float)
    p = len(names)
    if fig is None:
        side = min(st.width_in, st.max_height_in, st.height(1.7 * max(p, 2)))
        fig = _new_figure(side, side)
    if samples.ndim != 2 or samples.shape[0] < 2 or p == 0:
        ax = fig.add_subplot(1, 1, 1)
        ax.text(0.5, 0.5, "no posterior draws", ha="center", va="center", transform=ax.transAxes)
        ax.set_axis_off()
        return fig
    x = samples[:, idx]
    rng = np.random.default_rng(seed)
    pick = (rng.choice(len(x), size=max_points, replace=False)
            if len(x) > max_points else np.arange(len(x)))
    axes = fig.subplots(p, p, squeeze=False)
    for i in range(p):
        for j in range(p):
            ax = axes[i, j]
            if j > i:
                ax.set_axis_off()
                continue
            est = result.estimates.get(names[j])
            if i == j:
                ax.hist(x[:, i], bins=40, color=PALETTE["sky"], edgecolor="none")
                if est is not None:
                    if np.isfinite(est.best):
                        ax.axvline(est.best, color=PALETTE["blue"], lw=1.2)
                    for v in (est.lo95, est.hi95):
                        if np.isfinite(v):
                            ax.axvline(v, color=PALETTE["blue"], lw=1, ls="--")
                ax.set_yticks([])
            else:
                ax.plot(x[pick, j], x[pick, i], ".", ms=1.5, color=PALETTE["grey"],
                        alpha=0.35, rasterized=True)
                h, xe, ye = np.histogram2d(x[:, j], x[:, i], bins=24)
                h = gaussian_filter(h, 1.0)
                levels = _hist_levels(h)
                if len(levels) >= 1 and np.ptp(xe) > 0 and np.ptp(ye) > 0:
                    xc = 0.5 * (xe[1:] + xe[:-1])
                    yc = 0.5 * (ye[1:] + ye[:-1])
                    ax.contour(xc, yc, h.T, levels=levels, colors=[PALETTE["blue"]],
                               linewidths=0.9)
            if i == p - 1:
                ax.set_xlabel(_SHORT.get(names[j], quantity_label(names[j])), fontsize="small")
            else:
                ax.set_xticklabels([])
            if j == 0 and i > 0:
                ax.set_ylabel(_SHORT.get(names[i], quantity_label(names[i])), fontsize="small")
            elif i != j:
                ax.set_yticklabels([])
            # As many ticks as labels of ~5 characters fit side by side.
            nticks = int(np.clip(_width_in(fig) / p * 72.0 / (st.tick_pt * 0.85 * 5.5), 2, 3))
            ax.xaxis.set_major_locator(MaxNLocator(nticks))
            if i != j:
                ax.yaxis.set_major_locator(MaxNLocator(nticks))
            if i == p - 1 and (st.narrow or p >= _CORNER_ROTATE_FROM):
                # Upright, centred under its tick with its end at the axis: a
                # label then takes only its line height along the axis, so
                # neighbours on a small panel never overlap (slanted ones
                # still can). (tick_params' labelrotation_mode needs
                # matplotlib 3.11; for 90 degrees the default placement is
                # the same.)
                ax.tick_params(axis="x", labelrotation=90)
    _title(fig, f"{result.sample}: posterior ({len(x)} draws)")
    return fig


def _width_in(fig: Figure) -> float:
    """Width of a figure [in]."""
    return float(fig.get_figwidth())


def _summary_from(results_or_summary) -> pd.DataFrame:
    if isinstance(results_or_summary, pd.DataFrame):
        return results_or_summary
    from zoning.io.results import summary_table

    return summary_table(list(results_or_summary))


def overview_figure(results_or_summary, *, fig: Figure | None = None,
                    style: str | FigureStyle | None = None) -> Figure:
    """Parent Mg#/Ca#, F at the rim and retention of every sample side by side.

    One row per sample; points are best values, bars the 95% bands.
    Olivine (parent melt Mg#) and plagioclase (parent melt Ca#) share the
    first panel with different markers; samples that failed are listed with
    a cross.

    Parameters
    ----------
    results_or_summary : pandas.DataFrame or sequence of FitResult
        A batch ``summary.csv`` table (columns as written by ``zoning fit``)
        or the fit results themselves.
    fig : matplotlib.figure.Figure, optional
        Draw into this (empty) figure.
    style : str or FigureStyle, optional
        Preset of :data:`FIGURE_STYLES` (default ``"thesis"``).

    Returns
    -------
    matplotlib.figure.Figure
    """
    with _styled(style) as st:
        df = _summary_from(results_or_summary).reset_index(drop=True)
        n = len(df)
        labels = _overview_labels(df, st)
        lines = max([lab.count("\n") + 1 for lab in labels] or [1])
        row_in = (lines * 1.3 * st.tick_pt + 4.0) / 72.0
        panels = 3 if st.narrow else 1
        # Title, axis labels (up to 3 lines), tick labels, legend and pads [pt].
        fixed = (st.title_pt * 1.6 + st.legend_pt * (4.5 if st.narrow else 2.0) + 24.0
                 + panels * (st.font_pt * 1.3 * (2 if st.narrow else 3) + st.tick_pt * 1.6))
        need = fixed / 72.0 + panels * n * row_in
        page = 9.5 if st.max_height_in > 7.0 else st.max_height_in
        if fig is None:
            fig = _new_figure(st.width_in, min(need, page))
        # Rows that do not fit at full size get smaller names (never overlapping).
        room = fig.get_figheight() - (need - panels * n * row_in)
        tick_scale = float(np.clip(room / max(panels * n * row_in, 1e-9), 0.3, 1.0))
        axes = fig.subplots(3, 1, sharey=True) if st.narrow else fig.subplots(1, 3, sharey=True)
        _overview(fig, axes, df, n, st, labels)
        _title(fig, "Batch overview: best values and 95% bands")
        _finish(fig)
        axes[0].tick_params(axis="y", labelsize=st.tick_pt * tick_scale)
        return fig


def _overview_labels(df: pd.DataFrame, st: FigureStyle) -> list[str]:
    """Sample names with the mineral, wrapped to the room left of the panels."""
    n = len(df)
    names = df["sample"].astype(str).tolist() if "sample" in df else [str(i) for i in range(n)]
    mineral = df["mineral"].fillna("").astype(str).to_numpy() if "mineral" in df else np.full(n, "")
    short = {"olivine": " (ol)", "plagioclase": " (pl)"}
    chars = _chars((0.4 if st.narrow else 0.28) * st.width_in, st.tick_pt)
    return [_wrap(s + short.get(m, ""), chars) for s, m in zip(names, mineral, strict=True)]


def _overview(fig: Figure, axes, df: pd.DataFrame, n: int, st: FigureStyle,
              labels: list[str]) -> None:
    y = np.arange(n)[::-1].astype(float)
    failed = (df["error"].fillna("").astype(str) != "").to_numpy() if "error" in df else np.zeros(
        n, bool)
    mineral = df["mineral"].fillna("").astype(str).to_numpy() if "mineral" in df else np.full(n, "")
    styles = {"olivine": ("o", PALETTE["blue"]), "plagioclase": ("s", PALETTE["vermillion"])}
    panels = [
        ({"olivine": "melt_mg_number", "plagioclase": "melt_ca_number"},
         "parent melt Mg# (ol) / Ca# (pl) [fraction]"),
        ({"olivine": "f_rim", "plagioclase": "f_rim"}, "F at rim [0–1]"),
        ({"olivine": "retention", "plagioclase": "retention"}, "retention r [0–1]"),
    ]
    for ax, (cols, label) in zip(axes, panels, strict=True):
        for mineral_name, col in cols.items():
            if col not in df:
                continue
            marker, colour = styles[mineral_name]
            best = _numeric(df, col)
            lo = _numeric(df, f"{col}_lo95")
            hi = _numeric(df, f"{col}_hi95")
            ok = np.isfinite(best) & ~failed & (mineral == mineral_name)
            constrained = _constrained_column(df, col)
            xerr = np.abs(np.vstack([np.where(np.isfinite(lo), best - lo, 0.0),
                                     np.where(np.isfinite(hi), hi - best, 0.0)]))
            for filled in (True, False):
                sel = ok & (constrained == filled)
                if sel.any():
                    bars = ax.errorbar(best[sel], y[sel], xerr=xerr[:, sel], fmt=marker, ms=5,
                                       color=colour, mfc=colour if filled else "white",
                                       capsize=2, elinewidth=1)
                    # A value at a bound (r = 1, F = 0) is drawn whole, not cut
                    # by the panel edge.
                    for art in bars.lines[0:1] + tuple(bars.lines[1]):
                        art.set_clip_on(False)
        ax.set_xlabel(label)
        ax.grid(axis="x", color="#dddddd", lw=0.6)
        for k in np.flatnonzero(failed):
            ax.text(0.02, y[k], "× failed", transform=ax.get_yaxis_transform(),
                    va="center", fontsize="small", color=PALETTE["vermillion"])
    for ax in axes[1:]:
        ax.set_xlim(-0.06, 1.06)
        ax.set_xticks([0.0, 0.25, 0.5, 0.75, 1.0])
    axes[0].set_yticks(y)
    axes[0].set_yticklabels(labels)
    axes[0].set_ylim(-0.7, n - 0.3)
    handles = [
        Line2D([], [], marker="o", color=PALETTE["blue"], ls="none", label="olivine"),
        Line2D([], [], marker="s", color=PALETTE["vermillion"], ls="none", label="plagioclase"),
        Line2D([], [], marker="o", color=PALETTE["grey"], mfc="white", ls="none",
               label="not constrained by the data"),
    ]
    fig.legend(handles=handles, loc="outside lower center", ncol=1 if st.narrow else 3,
               fontsize=st.legend_pt, frameon=False)


def _numeric(df: pd.DataFrame, col: str) -> np.ndarray:
    if col not in df:
        return np.full(len(df), np.nan)
    return pd.to_numeric(df[col], errors="coerce").to_numpy(float)


def _constrained_column(df: pd.DataFrame, col: str) -> np.ndarray:
    """Return True where the summary says the quantity is constrained (default True)."""
    for name in (f"{col}_constrained",):
        if name in df:
            v = df[name]
            if v.dtype == object:
                v = v.astype(str).str.lower().isin(["true", "1", "yes"])
            return v.fillna(True).astype(bool).to_numpy()
    return np.ones(len(df), bool)


def save_figure(fig: Figure, stem: str | os.PathLike, *, dpi: int = 300,
                formats: str | Iterable[str] | None = None) -> dict[str, Path]:
    """Write ``<stem>.<format>`` for each format, each atomically.

    Parameters
    ----------
    fig : matplotlib.figure.Figure
        The figure.
    stem : str or path-like
        Path without suffix; folders are created.
    dpi : int, optional
        Resolution of the PNG [dots per inch] (default 300).
    formats : str or iterable of str, optional
        Any of :data:`FIGURE_FORMATS` (``"png,svg"`` or a list; default
        :data:`DEFAULT_FIGURE_FORMATS`, PNG and PDF).

    Returns
    -------
    dict
        Format to path, e.g. ``{"png": path, "pdf": path}``.

    Notes
    -----
    The files are reproducible: no creation date in PDF and SVG, no software
    tag in PNG, and a fixed salt for the SVG element ids.
    """
    stem = Path(stem)
    stem.parent.mkdir(parents=True, exist_ok=True)
    out = {}
    meta: dict[str, dict[str, Any]] = {"png": {"Software": None}, "pdf": {"CreationDate": None},
                                       "svg": {"Date": None}}
    for fmt in parse_figure_formats(formats):
        path = stem.with_name(f"{stem.name}.{fmt}")
        tmp = stem.with_name(f".{stem.name}.{fmt}.{os.getpid()}.tmp")
        try:
            with mpl.rc_context({"svg.hashsalt": "zoning"}):
                fig.savefig(tmp, format=fmt, dpi=dpi, metadata=meta[fmt])
            os.replace(tmp, path)
        finally:
            if tmp.exists():
                tmp.unlink()
        out[fmt] = path
    return out


#: File stems of the figures of one fit, in the order of :func:`sample_figures`.
SAMPLE_FIGURES = ("profile", "melt_path", "posterior")


def sample_figures(result, *, style: str | FigureStyle | None = None) -> dict[str, Figure]:
    """Draw the three figures of one fit.

    Parameters
    ----------
    result : FitResult
        A fit of one traverse.
    style : str or FigureStyle, optional
        Preset of :data:`FIGURE_STYLES` (default ``"thesis"``).

    Returns
    -------
    dict
        ``{"profile": Figure, "melt_path": Figure, "posterior": Figure}``.
    """
    return {
        "profile": profile_figure(result, style=style),
        "melt_path": melt_path_figure(result, style=style),
        "posterior": corner_figure(result, style=style),
    }


def save_sample_figures(
    result, folder: str | os.PathLike, *, figures: Mapping[str, Figure] | None = None,
    formats: str | Iterable[str] | None = None, style: str | FigureStyle | None = None,
) -> Mapping[str, dict[str, Path]]:
    """Draw and save the three figures of one fit into a folder.

    Parameters
    ----------
    result : FitResult
        A fit of one traverse.
    folder : str or path-like
        Destination folder.
    figures : mapping, optional
        Figures already drawn by :func:`sample_figures`. Their layout is
        fixed after saving, so that saving them again is faster.
    formats : str or iterable of str, optional
        File formats (default PNG and PDF; see :func:`save_figure`).
    style : str or FigureStyle, optional
        Preset used when the figures are drawn here.

    Returns
    -------
    dict
        ``{"profile": {...}, "melt_path": {...}, "posterior": {...}}`` with
        the path of each format.
    """
    folder = Path(folder)
    figures = figures if figures is not None else sample_figures(result, style=style)
    paths = {}
    for name, fig in figures.items():
        paths[name] = save_figure(fig, folder / name, formats=formats)
        # Keep the layout found for the first format: later saves (the PDF
        # report) reuse it.
        fig.set_layout_engine("none")
    return paths


def graphics_names(*, figures: bool = True, report: bool = True,
                   formats: str | Iterable[str] | None = None,
                   stems: Sequence[str] = SAMPLE_FIGURES) -> list[str]:
    """File names :func:`write_sample_graphics` writes into a sample folder.

    Parameters
    ----------
    figures, report : bool, optional
        Whether the figures / ``report.pdf`` are written (default both).
    formats : str or iterable of str, optional
        Figure formats (default PNG and PDF).
    stems : sequence of str, optional
        Figure file stems (default those of one fit).

    Returns
    -------
    list of str
    """
    names = ([f"{stem}.{fmt}" for stem in stems for fmt in parse_figure_formats(formats)]
             if figures else [])
    return names + (["report.pdf"] if report else [])


def write_sample_graphics(
    result, folder: str | os.PathLike, *, figures: bool = True, report: bool = True,
    formats: str | Iterable[str] | None = None, style: str | FigureStyle | None = None,
) -> list[Path]:
    """Draw and write the figures and the PDF report of one fit.

    The one writer of ``zoning fit`` and ``zoning batch``. The report
    pages are A4, so the report holds figures of the ``thesis`` preset
    (the ones saved when that is the style chosen, else drawn again for it).

    Parameters
    ----------
    result : FitResult
        A fit of one traverse.
    folder : str or path-like
        The sample folder.
    figures, report : bool, optional
        Write the figures (profile, melt path, posterior) / ``report.pdf``.
    formats : str or iterable of str, optional
        Figure formats (default PNG and PDF).
    style : str or FigureStyle, optional
        Preset of the saved figures (default ``"thesis"``).

    Returns
    -------
    list of pathlib.Path
        Every file written, in the order of :func:`graphics_names`.
    """
    folder = Path(folder)
    st = figure_style(style)
    written: list[Path] = []
    drawn = None
    if figures:
        drawn = sample_figures(result, style=st)
        for paths in save_sample_figures(result, folder, figures=drawn, formats=formats).values():
            written += list(paths.values())
    if report:
        from zoning.io.report import write_report

        if drawn is None or st.name != DEFAULT_FIGURE_STYLE:
            drawn = sample_figures(result)
        written.append(write_report(result, folder / "report.pdf", figures=list(drawn.values())))
    return written
