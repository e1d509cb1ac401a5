"""Layout checks of a drawn figure: nothing outside the page, nothing cut, nothing hidden.

:func:`layout_problems` draws a figure with the Agg renderer at a low
resolution (the layout is in points, so the result does not depend on the
dpi) and returns a list of plain-text problems, empty when the layout is
clean:

* every visible text (titles, axis labels, tick labels, legend entries,
  annotations) and every legend lies inside the figure;
* every marker drawn in a panel lies whole inside that panel (a marker cut
  by the panel edge, e.g. r = 1 on an axis ending at 1) or, for markers
  drawn deliberately outside the panel, inside the figure;
* no legend covers a data marker of any panel;
* no two tick labels of one axis overlap.

:func:`legend_texts` returns the text of every legend entry with line breaks
undone, to check that labels were wrapped, never cut.
"""

from __future__ import annotations

import numpy as np
from matplotlib.backends.backend_agg import FigureCanvasAgg
from matplotlib.collections import PathCollection
from matplotlib.legend import Legend
from matplotlib.lines import Line2D
from matplotlib.text import Text
from matplotlib.transforms import Bbox

#: Rendering resolution of the checks [dots per inch]: layout is computed in
#: points, so a low resolution changes nothing but the time.
LAYOUT_DPI = 40

#: Slack of the bounding-box comparisons [pixels at LAYOUT_DPI]: antialiasing
#: and the rounding of text extents to whole pixels.
SLACK_PX = 1.5


def _draw(fig):
    fig.set_dpi(LAYOUT_DPI)
    canvas = FigureCanvasAgg(fig)
    canvas.draw()
    return canvas.get_renderer()


def _inside(inner: Bbox, outer: Bbox, slack: float = SLACK_PX) -> bool:
    return (inner.x0 >= outer.x0 - slack and inner.y0 >= outer.y0 - slack
            and inner.x1 <= outer.x1 + slack and inner.y1 <= outer.y1 + slack)


def _name(artist) -> str:
    if isinstance(artist, Text):
        return f"text {artist.get_text()!r}"
    label = artist.get_label() if hasattr(artist, "get_label") else ""
    return f"{type(artist).__name__} {label!r}"


def _figures(fig) -> list:
    """The figure and its subfigures, at any depth."""
    out = [fig]
    for sub in getattr(fig, "subfigs", []):
        out += _figures(sub)
    return out


def _axes(fig) -> list:
    return [ax for f in _figures(fig) for ax in f.axes]


def _drawn_texts(fig) -> list[Text]:
    """Every text matplotlib draws for this figure (not those of hidden axes)."""
    texts = []
    for f in _figures(fig):
        texts += list(f.texts)
        texts += [t for t in (f._suptitle, f._supxlabel, f._supylabel) if t is not None]
        for leg in f.legends:
            texts += list(leg.get_texts())
    for ax in _axes(fig):
        if not ax.get_visible():
            continue
        texts += list(ax.texts)
        leg = ax.get_legend()
        if leg is not None:
            texts += list(leg.get_texts())
        if not ax.axison:
            continue
        texts += [ax.title, ax._left_title, ax._right_title]
        for axis in (ax.xaxis, ax.yaxis):
            texts += [axis.label, axis.get_offset_text()]
            texts += _tick_labels(axis)
    return [t for t in texts if t.get_visible() and t.get_text().strip()]


def _tick_labels(axis) -> list[Text]:
    """Tick labels matplotlib draws: those of ticks inside the view interval."""
    ticks = axis._update_ticks()  # the ticks the axis draws (private, stable since 3.1)
    return [lab for t in ticks for lab in (t.label1, t.label2)
            if lab.get_visible() and lab.get_text().strip()]


def _markers(ax, renderer) -> list[tuple[object, np.ndarray, float, bool]]:
    """Return (artist, centres [px], half size [px], clipped) of every marker of a panel."""
    out = []
    for line in ax.get_lines():
        marker = line.get_marker()
        if not line.get_visible() or marker in (None, "None", "none", "", " ", ","):
            continue
        xy = np.column_stack([np.asarray(line.get_xdata(), float),
                              np.asarray(line.get_ydata(), float)])
        xy = xy[np.isfinite(xy).all(axis=1)]
        if not len(xy):
            continue
        px = line.get_transform().transform(xy)
        half = 0.5 * line.get_markersize() * renderer.points_to_pixels(1.0)
        half += 0.5 * line.get_markeredgewidth() * renderer.points_to_pixels(1.0)
        out.append((line, px, half, line.get_clip_on()))
    for coll in ax.collections:
        if isinstance(coll, PathCollection) and coll.get_visible() and len(coll.get_offsets()):
            xy = np.asarray(coll.get_offsets(), float)
            xy = xy[np.isfinite(xy).all(axis=1)]
            px = coll.get_offset_transform().transform(xy)
            sizes = coll.get_sizes()
            half = 0.5 * np.sqrt(float(np.max(sizes)) if len(sizes) else 36.0)
            out.append((coll, px, half * renderer.points_to_pixels(1.0), coll.get_clip_on()))
    return out


def _cap_line(line) -> bool:
    """Return True for the cap markers of error bars (drawn at the bar ends)."""
    return line.get_marker() in ("_", "|") and line.get_label().startswith("_")


def layout_problems(fig) -> list[str]:
    """Draw `fig` and list its layout problems (empty list: clean).

    Parameters
    ----------
    fig : matplotlib.figure.Figure

    Returns
    -------
    list of str
        One line per problem, naming the artist and where it lies.
    """
    renderer = _draw(fig)
    page = fig.bbox
    problems = []
    for text in _drawn_texts(fig):
        box = text.get_window_extent(renderer)
        if not _inside(box, page):
            problems.append(f"{_name(text)} extends outside the figure ({box} vs {page})")
    legends = [leg for f in _figures(fig) for leg in f.legends]
    legends += [ax.get_legend() for ax in _axes(fig) if ax.get_legend()]
    for leg in legends:
        box = leg.get_window_extent(renderer)
        if not _inside(box, page):
            problems.append(f"legend extends outside the figure ({box} vs {page})")
    legend_boxes = [leg.get_window_extent(renderer) for leg in legends if leg.get_visible()]
    for ax in _axes(fig):
        if not ax.get_visible():
            continue
        panel = ax.get_window_extent(renderer)
        for artist, px, half, clipped in _markers(ax, renderer):
            if isinstance(artist, Line2D) and _cap_line(artist):
                continue
            lo = px - half
            hi = px + half
            where = panel if clipped else page
            bad = ((lo[:, 0] < where.x0 - SLACK_PX) | (lo[:, 1] < where.y0 - SLACK_PX)
                   | (hi[:, 0] > where.x1 + SLACK_PX) | (hi[:, 1] > where.y1 + SLACK_PX))
            if bad.any():
                kind = "panel" if clipped else "figure"
                problems.append(f"{bad.sum()} marker(s) of {_name(artist)} cut by the {kind} "
                                f"edge, e.g. at {px[bad][0]}")
            for box in legend_boxes:
                under = ((px[:, 0] > box.x0) & (px[:, 0] < box.x1)
                         & (px[:, 1] > box.y0) & (px[:, 1] < box.y1))
                if under.any():
                    problems.append(f"a legend covers {under.sum()} marker(s) of "
                                    f"{_name(artist)}")
        for axis in (ax.xaxis, ax.yaxis):
            labels = _tick_labels(axis)
            boxes = [t.get_window_extent(renderer) for t in labels]
            for i in range(len(boxes)):
                for j in range(i + 1, len(boxes)):
                    if _overlap(boxes[i], boxes[j]):
                        problems.append(f"tick labels {labels[i].get_text()!r} and "
                                        f"{labels[j].get_text()!r} overlap")
    return problems


def _overlap(a: Bbox, b: Bbox) -> bool:
    return (min(a.x1, b.x1) - max(a.x0, b.x0) > SLACK_PX
            and min(a.y1, b.y1) - max(a.y0, b.y0) > SLACK_PX)


def legend_texts(fig) -> list[str]:
    """Return the text of every legend entry of `fig`, line breaks undone.

    Parameters
    ----------
    fig : matplotlib.figure.Figure

    Returns
    -------
    list of str
    """
    out = []
    for leg in fig.findobj(Legend):
        out += [" ".join(t.get_text().split()) for t in leg.get_texts()]
    return out
