"""PDF reports of fits: one per traverse, one per sample of a joint fit.

A report is a sequence of *sections*; each section is one function from the
result to a list of blocks (title, paragraph, bullet list, table), kept in a
registry (:data:`TRAVERSE_SECTIONS`, :data:`SAMPLE_SECTIONS`). A new section
(e.g. of a new process) is one function decorated with :func:`section`.
The blocks are laid out on A4 pages by a small layout engine that measures
every word with matplotlib's own text renderer, so that lines wrap between
words and never run off the page; the figures follow as further pages.

Traverse report: title with sample, date (UTC), ``zoning`` version and the
command or project entry that reproduces it; the results with 95% bands
(quantities the data do not constrain are said to be so in words); the model
comparison; the warnings (calibration ranges included); a methods paragraph
generated from ``result.methods`` (:class:`zoning.references.MethodUse`);
definitions; the data quality (spots used and left out, with reasons); the
settings as a table (each once, only those that apply to the mineral); the
cautions; the reference list of every method used, in full; how the file
was read; then the profile, melt-path and posterior figures.

Only matplotlib is used (``PdfPages``): the report needs text, tables and
the figures the package already draws, which matplotlib does well enough.
"""

from __future__ import annotations

import datetime as _dt
import math
import os
import re
from collections.abc import Callable, Iterable, Mapping, Sequence
from dataclasses import dataclass, field
from functools import lru_cache
from pathlib import Path
from typing import Any

from matplotlib.backends.backend_pdf import PdfPages
from matplotlib.figure import Figure
from matplotlib.font_manager import FontProperties
from matplotlib.lines import Line2D

from zoning.references import REFERENCES, reference_list, short_cite

__all__ = [
    "CAUTIONS",
    "DEFINITIONS",
    "Section",
    "Title",
    "Paragraph",
    "Bullets",
    "Table",
    "section",
    "TRAVERSE_SECTIONS",
    "SAMPLE_SECTIONS",
    "methods_paragraph",
    "settings_rows",
    "results_rows",
    "data_quality_rows",
    "report_pages",
    "sample_report_pages",
    "write_report",
    "write_sample_report",
]

#: A4 portrait [in].
_A4 = (8.27, 11.69)
#: Page size [pt] and margins [pt].
_PAGE_W, _PAGE_H = _A4[0] * 72.0, _A4[1] * 72.0
_LEFT, _RIGHT, _TOP, _BOTTOM = 56.0, 50.0, 54.0, 50.0
_TEXT_W = _PAGE_W - _LEFT - _RIGHT
_FONT = "DejaVu Sans"

#: Statement of assumptions and cautions printed in every report.
CAUTIONS = (
    "Surface equilibrium during growth: each growth layer is assumed to have formed in "
    "equilibrium with the melt at its surface and then kept its composition (apart from the "
    "retained share r, which keeps exchanging). Sluggish growth kinetics or boundary layers "
    "break this.",
    "Diffusion after growth: Fe-Mg in olivine diffuses fast at magmatic temperature and "
    "relaxes the zoning, which mimics a higher retention r. Single fits fit the diffusion "
    "length L (olivine, by default); joint fits fit it per crystal only when asked "
    "(diffusion_length_um = \"free\"). Measured on invented crystals "
    "(benchmarks/fit.py): unmodelled diffusion of a fractional crystal (r = 0) by L = 50 µm "
    "raised r by about 0.65 and made equilibrium look preferred; with L fitted the r band "
    "held the truth but was wide. NiO, or another slower-diffusing element, tells "
    "relaxation from near-equilibrium growth.",
    "Sectioning: a cut that misses the crystal centre shortens and flattens the profile "
    "(the core looks less primitive, zones look wider). Single fits fit the offset h/R with "
    "the prior of a random cut unless it is fixed, and widen every band to hold also for a "
    "cut through the core when the data do not rule one out (an off-centre cut hides a more "
    "primitive core, so the two readings give different parent melts; fix h/R = 0 when a "
    "core feature is visible, for the narrower band); joint fits take every cut through the "
    "core unless asked to fit h/R per crystal (section_h_over_r = \"free\"). Measured "
    "on invented crystals (benchmarks/fit.py): an unmodelled cut at h/R = 0.5 "
    "raised r by about 0.1-0.2 on average (up to 0.45); with h/R fitted, r lay within "
    "0.05 of the truth in most crystals (once 0.24 below it), inside its band in 3 of 4.",
    "Choice of Kd and reference melt: the parent melt Mg#/Ca# follows directly from the "
    "exchange coefficient, and the speed at which the melt evolves from the reference melt's "
    "oxide contents. A different Kd or reference melt gives a different answer; the bands "
    "include the stated Kd uncertainty only.",
    "Closed system: reversals (zones that go back to higher Fo/An) record recharge or mixing, "
    "which no closed-system model produces; fit such segments separately.",
)

#: Definitions printed in the reports, by symbol; ``minerals`` says where each applies.
DEFINITIONS = (
    ("Fo", ("olivine",), "forsterite content of olivine, 100 Mg/(Mg + Fe) in moles "
     "(all iron of olivine counted as Fe2+) [mol%]."),
    ("An", ("plagioclase",), "anorthite content of plagioclase, 100 Ca/(Ca + Na + K) in moles "
     "[mol%]."),
    ("Mg#", ("olivine",), "melt Mg number, Mg/(Mg + Fe2+) in moles [fraction]; Fe2+ = "
     "(1 - Fe3+/FeT) FeT, so the melt Fe3+/FeT enters every melt Mg#."),
    ("Ca#", ("plagioclase",), "melt Ca number, Ca/(Ca + Na) in moles [fraction]."),
    ("Kd", ("olivine",), "olivine-melt exchange coefficient K_D(Fe-Mg) = (Fe/Mg)olivine / "
     "(Fe2+/Mg)melt, in moles [1]."),
    ("Kd ", ("plagioclase",), "plagioclase-melt exchange coefficient K_D(Ca-Na) = "
     "(Ca/Na)plagioclase / (Ca/Na)melt, in moles [1]."),
    ("F", ("olivine", "plagioclase"), "crystallized fraction: mass of crystals grown divided "
     "by the mass of the parent melt [fraction]; F at the rim is the value when the rim "
     "grew."),
    ("r", ("olivine", "plagioclase"), "retention: the share of each newly grown layer that "
     "keeps exchanging with the melt; r = 0 is fractional (Rayleigh) crystallization, r = 1 "
     "equilibrium (batch) crystallization [fraction]."),
    ("95% band", ("olivine", "plagioclase"), "2.5 to 97.5 percentiles of the posterior "
     "distribution; the best value is the posterior median."),
)


# ----------------------------------------------------------------- blocks
@dataclass(frozen=True)
class Title:
    """Title of a report with lines under it (date, version, reproduce)."""

    text: str
    lines: tuple[str, ...] = ()


@dataclass(frozen=True)
class Paragraph:
    """Running text, wrapped between words."""

    text: str
    size: float = 8.5
    italic: bool = False


@dataclass(frozen=True)
class Bullets:
    """Numbered or bulleted items, each wrapped with a hanging indent."""

    items: tuple[str, ...]
    numbered: bool = False
    size: float = 8.0


@dataclass(frozen=True)
class Table:
    """Table with a header row; cells wrap inside their column.

    ``widths`` are the column widths as fractions of the text width (they
    are normalised to sum to 1).
    """

    header: tuple[str, ...]
    rows: tuple[tuple[str, ...], ...]
    widths: tuple[float, ...]
    size: float = 7.5


Block = Title | Paragraph | Bullets | Table


@dataclass(frozen=True)
class Section:
    """One section of a report: a heading and a function result -> blocks.

    The function returns an empty list when the section has nothing to say
    for this result (the heading is then left out too).
    """

    title: str
    content: Callable[[Any], list]
    name: str = ""
    position: float = 0.0


#: Sections of the report of one traverse, in order.
TRAVERSE_SECTIONS: list[Section] = []
#: Sections of the report of one sample (joint fit), in order.
SAMPLE_SECTIONS: list[Section] = []


def section(title: str, *, traverse: float | None = None, sample: float | None = None):
    """Register a function result -> blocks as a report section.

    Parameters
    ----------
    title : str
        Heading of the section ("" for none).
    traverse, sample : float, optional
        Position of the section in the traverse report
        (:data:`TRAVERSE_SECTIONS`) and/or the sample report
        (:data:`SAMPLE_SECTIONS`); sections are kept sorted by position
        (title 0, results 10, ..., references 90). None: not in that report.

    Returns
    -------
    callable
        Decorator returning the function unchanged.

    Examples
    --------
    A section on diffusion after growth, between the model comparison (20)
    and the warnings (30) of traverse reports::

        @section("Diffusion after growth", traverse=25)
        def _diffusion(ctx):
            return [Paragraph(...)]
    """

    def register(func):
        for registry, position in ((TRAVERSE_SECTIONS, traverse), (SAMPLE_SECTIONS, sample)):
            if position is None:
                continue
            registry.append(Section(title, func, func.__name__, float(position)))
            registry.sort(key=lambda sec: sec.position)
        return func

    return register


# ----------------------------------------------------------------- text layout
@lru_cache(maxsize=None)
def _renderer():
    from matplotlib.backends.backend_agg import RendererAgg

    return RendererAgg(10, 10, 72.0)


@lru_cache(maxsize=8)
def _prop(size: float, weight: str = "normal", style: str = "normal") -> FontProperties:
    return FontProperties(family=_FONT, size=size, weight=weight, style=style)


@lru_cache(maxsize=20000)
def _width(text: str, size: float, weight: str = "normal", style: str = "normal") -> float:
    """Width of ``text`` in points at ``size`` pt."""
    if not text:
        return 0.0
    w, _h, _d = _renderer().get_text_width_height_descent(text, _prop(size, weight, style),
                                                          ismath=False)
    return float(w)


def _split_long(word: str, width: float, size: float, weight: str, style: str) -> list[str]:
    """Split a word wider than a line: after '/', '_', '-' or '.', else between characters."""
    pieces, current = [], ""
    for ch in word:
        if current and _width(current + ch, size, weight, style) > width:
            cut = max(current.rfind(c) for c in "/_-.,;")
            if 0 < cut < len(current) - 1:
                pieces.append(current[: cut + 1])
                current = current[cut + 1:]
            else:
                pieces.append(current)
                current = ""
        current += ch
    if current:
        pieces.append(current)
    return pieces


def wrap_text(text: str, width: float, size: float, *, weight: str = "normal",
              style: str = "normal") -> list[str]:
    """Wrap text to lines no wider than ``width`` points, breaking between words.

    A single word wider than the line (a long path or URL) is broken after a
    '/', '_', '-' or '.' where possible.

    Parameters
    ----------
    text : str
        Text; explicit newlines start new lines.
    width : float
        Line width [pt].
    size : float
        Font size [pt].
    weight, style : str, optional
        Font weight and style.

    Returns
    -------
    list of str
        At least one line ("" for empty text).
    """
    lines: list[str] = []
    space = _width(" ", size, weight, style)
    for para in str(text).split("\n"):
        words = para.split()
        if not words:
            lines.append("")
            continue
        line, line_w = "", 0.0
        for word in words:
            w = _width(word, size, weight, style)
            parts = [word] if w <= width else _split_long(word, width, size, weight, style)
            for k, part in enumerate(parts):
                pw = w if len(parts) == 1 else _width(part, size, weight, style)
                glue = " " if (line and k == 0) else ""
                extra = (space if glue else 0.0) + pw
                if line and line_w + extra > width:
                    lines.append(line)
                    line, line_w = part, pw
                else:
                    line += glue + part
                    line_w += extra
        lines.append(line)
    return lines or [""]


class _Layout:
    """Place blocks down A4 pages, starting a new page when one is full."""

    def __init__(self, running_title: str):
        self.pages: list[Figure] = []
        self.running_title = running_title
        self._new_page()

    def _new_page(self) -> None:
        fig = Figure(figsize=_A4)
        self.pages.append(fig)
        self.fig = fig
        self.y = _PAGE_H - _TOP  # top of the next line [pt from the bottom]
        if len(self.pages) > 1:
            self._text(_LEFT, _PAGE_H - _TOP * 0.55, f"{self.running_title} (continued)", 7.0,
                       color="#555555")

    def _text(self, x: float, y: float, text: str, size: float, *, weight: str = "normal",
              style: str = "normal", color: str = "black", ha: str = "left") -> None:
        self.fig.text(x / _PAGE_W, y / _PAGE_H, text, fontsize=size, family=_FONT,
                      weight=weight, style=style, color=color, va="top", ha=ha,
                      parse_math=False)

    def _rule(self, y: float, width: float = 0.6) -> None:
        self.fig.add_artist(Line2D([_LEFT / _PAGE_W, (_LEFT + _TEXT_W) / _PAGE_W],
                                   [y / _PAGE_H, y / _PAGE_H], lw=width, color="0.4"))

    def need(self, height: float) -> bool:
        """Start a new page unless ``height`` points fit; True if a page was started."""
        if self.y - height < _BOTTOM:
            self._new_page()
            return True
        return False

    def gap(self, height: float) -> None:
        self.y -= height

    def heading(self, text: str, first_block_height: float) -> None:
        size = 11.0
        self.need(size * 1.3 + 8 + first_block_height)
        self.y -= 6
        self._text(_LEFT, self.y, text, size, weight="bold")
        self.y -= size * 1.3 + 2

    def title(self, block: Title) -> None:
        lines = wrap_text(block.text, _TEXT_W, 15.0, weight="bold")
        for line in lines:
            self._text(_LEFT, self.y, line, 15.0, weight="bold")
            self.y -= 15.0 * 1.3
        self.y -= 2
        for text in block.lines:
            for line in wrap_text(text, _TEXT_W, 8.0):
                self.need(10)
                self._text(_LEFT, self.y, line, 8.0, color="#222222")
                self.y -= 8.0 * 1.3
        self.y -= 2
        self._rule(self.y)
        self.y -= 4

    def paragraph(self, block: Paragraph) -> None:
        style = "italic" if block.italic else "normal"
        lead = block.size * 1.32
        for line in wrap_text(block.text, _TEXT_W, block.size, style=style):
            self.need(lead)
            self._text(_LEFT, self.y, line, block.size, style=style)
            self.y -= lead
        self.y -= 3

    def bullets(self, block: Bullets) -> None:
        lead = block.size * 1.32
        for k, item in enumerate(block.items):
            mark = f"{k + 1}." if block.numbered else "•"
            indent = _width("00. ", block.size) if block.numbered else _width("•  ", block.size)
            lines = wrap_text(item, _TEXT_W - indent, block.size)
            # an item of up to KEEP_LINES lines is kept on one page; a longer
            # one may break, but not after its first line
            self.need(lead * (len(lines) if len(lines) <= KEEP_LINES else 2))
            self._text(_LEFT, self.y, mark, block.size)
            for line in lines:
                if self.need(lead):
                    pass
                self._text(_LEFT + indent, self.y, line, block.size)
                self.y -= lead
            self.y -= 1.5
        self.y -= 2

    def table(self, block: Table) -> None:
        pad = 4.0
        lead = block.size * 1.28
        widths = _column_widths(block, pad)
        xs = [_LEFT + sum(widths[:j]) for j in range(len(widths))]

        def cells(row, weight="normal"):
            return [wrap_text(str(c), max(w - pad, 8.0), block.size, weight=weight)
                    for c, w in zip(row, widths, strict=True)]

        head = cells(block.header, "bold")
        head_h = lead * max(len(c) for c in head) + 3

        def draw_header():
            for x, lines in zip(xs, head, strict=True):
                for k, line in enumerate(lines):
                    self._text(x, self.y - k * lead, line, block.size, weight="bold")
            self.y -= head_h
            self._rule(self.y + 1.5, 0.5)
            self.y -= 1.5

        rows = [cells(r) for r in block.rows]
        first_h = lead * max(len(c) for c in rows[0]) if rows else 0.0
        self.need(head_h + first_h + 2)
        draw_header()
        for row in rows:
            h = lead * max(len(c) for c in row) + 2
            if self.need(h):
                draw_header()
            for x, lines in zip(xs, row, strict=True):
                for k, line in enumerate(lines):
                    self._text(x, self.y - k * lead, line, block.size)
            self.y -= h
        self.y -= 4

    def block(self, block) -> None:
        if isinstance(block, Title):
            self.title(block)
        elif isinstance(block, Paragraph):
            self.paragraph(block)
        elif isinstance(block, Bullets):
            self.bullets(block)
        elif isinstance(block, Table):
            self.table(block)
        else:  # pragma: no cover - programming error
            raise TypeError(f"unknown report block {type(block).__name__}")

    def footers(self, text: str) -> None:
        n = len(self.pages)
        for k, fig in enumerate(self.pages):
            fig.text(_LEFT / _PAGE_W, (_BOTTOM * 0.5) / _PAGE_H, text, fontsize=6.5,
                     family=_FONT, color="#555555", va="center", parse_math=False)
            fig.text((_LEFT + _TEXT_W) / _PAGE_W, (_BOTTOM * 0.5) / _PAGE_H,
                     f"page {k + 1} of {n} (text)", fontsize=6.5, family=_FONT,
                     color="#555555", va="center", ha="right", parse_math=False)


#: Bullet items of at most this many lines are never split across pages.
KEEP_LINES = 8


def _column_widths(block: Table, pad: float) -> list[float]:
    """Column widths [pt]: the given shares, widened so that the longest word of each fits.

    Width taken by a widened column is given back by the columns with room
    to spare, in proportion to that room; words only break when the words
    of the row cannot fit side by side at all.
    """
    total = sum(block.widths)
    widths = [w / total * _TEXT_W for w in block.widths]
    need = []
    for j in range(len(widths)):
        texts = [block.header[j]] + [str(r[j]) for r in block.rows]
        longest = max((_width(word, block.size, "bold" if k == 0 else "normal")
                       for k, t in enumerate(texts) for word in t.split()), default=0.0)
        need.append(longest + pad + 0.5)
    if sum(need) > _TEXT_W:
        return widths
    short = sum(max(n - w, 0.0) for n, w in zip(need, widths, strict=True))
    if short <= 0:
        return widths
    room = [max(w - n, 0.0) for n, w in zip(need, widths, strict=True)]
    spare = sum(room)
    return [max(w, n) - (r / spare * short if spare else 0.0)
            for w, n, r in zip(widths, need, room, strict=True)]


def _first_height(block) -> float:
    """Height the first lines of a block need, to keep a heading with its content."""
    if isinstance(block, Table):
        return block.size * 1.28 * 3
    if isinstance(block, (Paragraph, Bullets)):
        return block.size * 1.32 * 2
    return 20.0


def _lay_out(result, sections: Sequence[Section], running_title: str, footer: str,
             context: Mapping[str, Any]) -> list[Figure]:
    layout = _Layout(running_title)
    for sec in sections:
        blocks = sec.content(_Context(result, context))
        if not blocks:
            continue
        if sec.title:
            layout.heading(sec.title, _first_height(blocks[0]))
        for b in blocks:
            layout.block(b)
    layout.footers(footer)
    return layout.pages


@dataclass(frozen=True)
class _Context:
    """What a section function receives: the result and the report's context."""

    result: Any
    info: Mapping[str, Any] = field(default_factory=dict)


# ----------------------------------------------------------------- formatting
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


_LABELS = {
    "melt_mg_number": "parent melt Mg#",
    "melt_ca_number": "parent melt Ca#",
    "melt_mgo_wt": "parent melt MgO",
    "melt_cao_wt": "parent melt CaO",
    "f_rim": "F at the rim",
    "f_core": "F at the core",
    "retention": "retention r",
    "retention_spread": "spread of r (sd of logit r)",
    "kd": "Kd",
    "growth_exponent": "growth exponent",
    "core_offset_um": "core offset",
    "section_h_over_r": "section offset h/R",
    "diffusion_length_um": "diffusion length",
    "diffusion_time_days": "diffusion time",
    "melt0_ni_ppm": "initial melt Ni",
    "melt0_sr_ppm": "initial melt Sr",
    "melt0_mgo_wt": "initial melt MgO (trace)",
    "temperature_c": "parent melt temperature",
}


def _label(name: str) -> str:
    return _LABELS.get(name, name.replace("_", " "))


_NAME = re.compile(r"(?<![-\w])(" + "|".join(sorted(_LABELS, key=len, reverse=True))
                   + r")(?![-\w])")


#: Words for quantity names inside messages (where "parent" is usually said already).
_IN_TEXT = {**_LABELS, "melt_mg_number": "melt Mg#", "melt_ca_number": "melt Ca#",
            "melt_mgo_wt": "melt MgO", "melt_cao_wt": "melt CaO"}


_KEY = re.compile(r"(?<![-\w])([a-z]+(?:_[a-z]+)*_\d{4}[a-z]?)(?![-\w])")


def humanize(text: str) -> str:
    """Put a message in words: quantity names and citation keys replaced, ``+/-`` as ``±``.

    ``melt_mg_number`` becomes "melt Mg#", a registered citation key such as
    ``helz_thornber_1987`` its in-text citation "Helz & Thornber (1987)".
    """
    text = _NAME.sub(lambda m: _IN_TEXT[m.group(1)], str(text)).replace("+/-", "±")
    return _KEY.sub(lambda m: short_cite(m.group(1)) if m.group(1) in REFERENCES
                    else m.group(1), text)


def _unit(unit: str) -> str:
    return "" if unit in ("1", "") else unit


def results_rows(result) -> list[list[str]]:
    """Rows of the results table: quantity, best, 95% band, unit, statement.

    Parameters
    ----------
    result : FitResult or SampleFitResult
        A fit (its ``estimates``).

    Returns
    -------
    list of list of str
        One row per estimate. A quantity the data do not constrain shows
        "not constrained" in place of a best value (its band is still
        given, and the statement says why), so that no precise-looking
        number is quoted for it.
    """
    rows = []
    for name, est in result.estimates.items():
        band = f"{_fmt(est.lo95, est.unit)} – {_fmt(est.hi95, est.unit)}"
        best = _fmt(est.best, est.unit)
        note = est.note
        if not est.constrained:
            best = "not constrained"
            note = note or "not constrained by these data: quote the band, not a value"
        rows.append([_label(name), best, band, _unit(est.unit), humanize(note)])
    return rows


# ----------------------------------------------------------------- methods
#: How each role of :class:`MethodUse` opens its sentence in the methods paragraph.
_ROLE_LEADS = {
    "crystallization between the fractional and equilibrium limits":
        "Crystallization was modelled between the fractional and equilibrium limits",
    "melt temperature (glass MgO thermometer)":
        "Melt temperatures were computed from the melt MgO with a glass thermometer",
    "distance from the core to crystallized fraction F":
        "Distance from the core was converted to crystallized fraction F",
    "model choice": "Models were compared by",
}


def _cite_or_given(key: str) -> str:
    return short_cite(key) if key and key in REFERENCES else ""


def methods_paragraph(uses: Iterable, *, lead: str = "", closing: str = "") -> str:
    """Write the methods paragraph of a result from its :class:`MethodUse` records.

    Each role becomes one sentence, in the order the roles first appear,
    listing the detail of each method with its in-text citation, e.g.
    "Olivine-melt Fe-Mg exchange: K_D(Fe-Mg) = ... (Roeder & Emslie 1970)."
    Roles without a prepared opening are written as "<Role>: ...", so new
    methods appear without any change here.

    Parameters
    ----------
    uses : iterable of MethodUse
        What the result rests on (``FitResult.methods``).
    lead : str, optional
        Opening sentence (what was fitted).
    closing : str, optional
        Closing sentence(s).

    Returns
    -------
    str
    """
    groups: dict[str, list] = {}
    for use in uses:
        groups.setdefault(use.role, []).append(use)
    sentences = [lead] if lead else []
    for role, items in groups.items():
        parts = []
        for u in items:
            cite = _cite_or_given(u.key)
            detail = u.detail.replace("+/-", "±").strip()
            if cite and detail:
                parts.append(f"{detail} ({cite.replace(' (', ' ').rstrip(')')})")
            elif cite:
                parts.append(cite)
            elif detail:
                parts.append(detail)
        opening = _ROLE_LEADS.get(role, role[:1].upper() + role[1:])
        sep = " " if opening.endswith(" by") else ": "
        sentences.append(f"{opening}{sep}{'; '.join(parts)}.")
    if closing:
        sentences.append(closing)
    return " ".join(s.replace("..", ".") for s in sentences)


def _method_keys(result) -> list[str]:
    return [m.key for m in getattr(result, "methods", ()) if m.key and m.key in REFERENCES]


# ----------------------------------------------------------------- settings
_MINERAL_ONLY = {
    "fe3_fraction": "olivine", "fe3_source": "olivine", "thermometer": "olivine",
}

#: Settings shown elsewhere in the report (title, data quality), or internal.
_SKIP_SETTINGS = {"command", "command_folder", "project_entry", "seed", "mineral",
                  "kd_prior_sd", "fe3_source", "trace_sigma_wt", "n_steps", "burn_in",
                  "n_sweeps", "include_flagged"}


def _is_blank(value) -> bool:
    if value is None:
        return True
    if isinstance(value, float) and not math.isfinite(value):
        return True
    if isinstance(value, (str, list, tuple, dict)) and len(value) == 0:
        return True
    return False


def _plain(value: Any) -> str:
    if isinstance(value, Mapping):
        return ", ".join(f"{k} = {_plain(v)}" for k, v in value.items())
    if isinstance(value, bool):
        return "yes" if value else "no"
    if isinstance(value, float):
        return f"{value:g}"
    if isinstance(value, (list, tuple)):
        return ", ".join(_plain(v) for v in value)
    return str(value)


def settings_rows(result) -> list[list[str]]:
    """Rows (setting, value) of the settings table of a report.

    Each setting appears once, in words, and only where it applies to the
    mineral: no melt Fe3+/FeT or thermometer for plagioclase, no partitioning
    temperature when none was given (never "nan"), the seed once.

    Parameters
    ----------
    result : FitResult or SampleFitResult

    Returns
    -------
    list of list of str
    """
    s = dict(result.settings)
    mineral = result.mineral
    rows: list[list[str]] = [["mineral", mineral]]
    melt = s.get("melt") or {}
    if melt:
        rows.append(["reference melt", ", ".join(f"{k} {_plain(v)} wt%"
                                                  for k, v in dict(melt).items())])
    mean, sd = s.get("kd_prior_mean", math.nan), s.get("kd_prior_sd", math.nan)
    if isinstance(mean, (int, float)) and math.isfinite(mean):
        what = "K_D(Fe-Mg)" if mineral == "olivine" else "K_D(Ca-Na)"
        if isinstance(sd, (int, float)) and math.isfinite(sd) and sd > 0:
            rows.append([f"{what} prior", f"Gaussian, {mean:.3g} ± {sd:.2g}"])
        else:
            rows.append([what, f"fixed at {mean:.3g}"])
    if mineral == "olivine":
        fe3 = s.get("fe3_fraction", math.nan)
        if not _is_blank(fe3):
            from_ = {"default": "built-in default (basalt near QFM)",
                     "given": "given by the user"}.get(str(s.get("fe3_source", "")),
                                                       str(s.get("fe3_source", "")))
            rows.append(["melt Fe3+/FeT", f"{float(fe3):.2f}" + (f" ({from_})" if from_ else "")])
        th = s.get("thermometer", "")
        if th:
            cite = _cite_or_given(str(th))
            rows.append(["glass thermometer", f"{cite} ({th})" if cite else str(th)])
    temp = s.get("temperature_c", math.nan)
    if not _is_blank(temp):
        rows.append(["temperature of the partitioning laws", f"{float(temp):g} °C"])
    rng = s.get("distance_range_um")
    rows.append(["distance range fitted", "all spots" if _is_blank(rng)
                 else f"{_plain(rng[0])} to {_plain(rng[1])} µm"])
    radius = s.get("radius_um")
    if isinstance(radius, Mapping):
        rows.append(["crystal radii", ", ".join(f"{k} {v:g} µm" for k, v in radius.items())])
    elif not _is_blank(radius):
        rows.append(["crystal radius", f"{float(radius):g} µm"])
    traces = s.get("traces") or []
    sig = s.get("trace_sigma_wt") or {}
    if traces:
        rows.append(["trace profiles fitted", ", ".join(
            f"{t} (1σ {sig[t]:g} wt%)" if t in sig else str(t) for t in traces)])
    n_flag = int(getattr(result, "n_spots", 0)) - int(getattr(result, "n_used", 0))
    rows.append(["flagged spots", "included in the fit" if s.get("include_flagged")
                 else "left out of the fit" + ("" if n_flag else " (none flagged)")])
    if "n_walkers" in s:
        rows.append(["sampler length", f"{s['n_walkers']} walkers × {s.get('n_steps', '?')} "
                     f"steps, first {s.get('burn_in', '?')} discarded"])
    if "n_chains" in s:
        rows.append(["sampler length", f"{s['n_chains']} chains × {s.get('n_sweeps', '?')} "
                     "sweeps"])
    labels = {"geometry": "growth geometry", "free": "free parameters",
              "fixed": "fixed parameters",
              "sigma": "1σ of Fo" if mineral == "olivine" else "1σ of An",
              "robust": "robust loss",
              "f_rim": "F at the rim", "retention": "retention", "exclude": "crystals left out",
              "consistency_test": "consistency test", "sampler": "sampler",
              "section_h_over_r": "section offset h/R",
              "diffusion_length_um": "diffusion length L [µm]",
              "delta_qfm": "ΔQFM of the diffusivity [log units]",
              "kd_prior_mean": None, "melt": None, "fe3_fraction": None, "thermometer": None,
              "temperature_c": None, "distance_range_um": None, "radius_um": None,
              "traces": None, "n_walkers": None, "n_chains": None}
    for key, value in s.items():
        if key in _SKIP_SETTINGS or labels.get(key, "") is None:
            continue
        if _MINERAL_ONLY.get(key, mineral) != mineral or _is_blank(value):
            continue
        if key == "robust" and not value:
            continue
        rows.append([labels.get(key) or key.replace("_", " "), _plain(value)])
    rows.append(["random seed", str(getattr(result, "seed", s.get("seed", "")))])
    versions = getattr(result, "versions", {}) or {}
    if versions:
        rows.append(["versions", ", ".join(f"{k} {v}" for k, v in versions.items() if v)])
    return rows


# ----------------------------------------------------------------- data quality
def data_quality_rows(spots, *, crystal: str = "") -> list[list[str]]:
    """One row per spot not used in the fit: (crystal,) row, point, distance, status, reason.

    Parameters
    ----------
    spots : pandas.DataFrame
        The spot table of a result (``used``, ``status``, ``reason``, ...).
    crystal : str, optional
        Crystal name to put first (joint fits).

    Returns
    -------
    list of list of str
    """
    if spots is None or len(spots) == 0 or "used" not in spots:
        return []
    rows = []
    for rec in spots[~spots["used"].astype(bool)].to_dict("records"):
        reason = str(rec.get("reason", "") or "")
        status = str(rec.get("status", "") or "")
        if status == "ok" and not reason:
            reason = "outside the fitted range"
        row = [str(rec.get("row", "")), str(rec.get("point", "")),
               _fmt(rec.get("distance_um", math.nan), "µm"), status, reason]
        rows.append(([crystal] if crystal else []) + row)
    return rows


# ----------------------------------------------------------------- sections
def _version(result) -> str:
    from zoning import __version__

    return (getattr(result, "versions", {}) or {}).get("zoning", __version__)


def _reproduce(result) -> str:
    s = result.settings
    if s.get("command"):
        where = f" (run in {s['command_folder']})" if s.get("command_folder") else ""
        return f"Reproduce{where}: {s['command']}"
    entry = s.get("project_entry")
    if entry:
        if isinstance(entry, Mapping):
            sample = entry.get("sample", result.sample)
            if entry.get("project"):
                return (f"Reproduce: zoning batch {entry['project']} (sample entry '{sample}', "
                        f"file {entry.get('file', '?')}); same settings and seed give the "
                        "same numbers.")
            return (f"Reproduce: zoning batch on the project's sample entry '{sample}' "
                    f"(file {entry.get('file', '?')}); same settings and seed give the same "
                    "numbers.")
        return f"Reproduce: {entry}"
    return ("Reproduce: fit the same file with the settings below (same settings and seed "
            "give the same numbers).")


def _title_lines(ctx) -> tuple[str, ...]:
    r = ctx.result
    date = ctx.info["date"]
    source = getattr(getattr(r, "traverse", None), "source", "")
    lines = [f"written {date:%Y-%m-%d %H:%M} UTC · zoning {_version(r)} · seed {r.seed}"]
    if source:
        lines.append(f"file: {source}")
    lines.append(_reproduce(r))
    return tuple(lines)


@section("", traverse=0)
def _traverse_title(ctx):
    r = ctx.result
    return [Title(f"zoning report: {r.sample} ({r.mineral}, "
                  f"{r.n_used} of {r.n_spots} spots fitted)", _title_lines(ctx))]


@section("Results (best value and 95% band)", traverse=10)
def _traverse_results(ctx):
    r = ctx.result
    rows = results_rows(r)
    blocks = [Table(("quantity", "best", "95% band", "unit", "statement"),
                    tuple(map(tuple, rows)), (0.2, 0.14, 0.16, 0.07, 0.43))]
    text = (f"Reduced chi-square of the best fit: {_fmt(r.reduced_chi_square)}. "
            "Where a quantity is not constrained the band covers most of its physical "
            "range: quote the band, never a single value.")
    blocks.append(Paragraph(text, size=7.5, italic=True))
    return blocks


@section("Model comparison", traverse=20)
def _traverse_comparison(ctx):
    comp = ctx.result.comparison
    if comp is None or not len(comp):
        return []
    rows = tuple((str(x.get("model", "")), _fmt(x.get("chi_square", math.nan)),
                  str(x.get("n_params", "")), _fmt(x.get("bic", math.nan)),
                  _fmt(x.get("delta_bic", math.nan)), _fmt(x.get("weight", math.nan)))
                 for x in comp.to_dict("records"))
    pref = ctx.result.preferred_model or "none (a reversal voids every closed-system model)"
    return [Table(("model", "chi-square", "parameters", "BIC", "ΔBIC", "BIC weight"), rows,
                  (0.34, 0.13, 0.12, 0.13, 0.12, 0.16)),
            Paragraph(f"Preferred model: {pref}. A model is preferred when its BIC is lower "
                      "than the runner-up's by at least 2 (positive evidence in the scale of "
                      "Kass & Raftery 1995).", size=7.5, italic=True)]


def _reversal_warnings(r) -> list[str]:
    out = []
    rev = getattr(r, "reversals", None)
    if rev is not None and len(rev) and "start_um" in rev:
        for x in rev.to_dict("records"):
            out.append(
                f"reversal between {_fmt(x['start_um'], 'µm')} and {_fmt(x['end_um'], 'µm')} "
                f"µm from the core (amplitude {_fmt(x.get('amplitude', math.nan))} mol%): "
                "recharge or mixing; fit the segments separately with --range.")
    return out


@section("Warnings", traverse=30, sample=30)
def _warnings(ctx):
    warn = [humanize(w) for w in dict.fromkeys(ctx.result.warnings)]
    warn += _reversal_warnings(ctx.result)
    return [Bullets(tuple(warn) if warn else ("none",))]


def _traverse_lead(r) -> str:
    return (f"The {r.mineral} traverse {r.sample} ({r.n_used} of {r.n_spots} spots used) was "
            f"fitted with zoning {_version(r)}, which inverts a forward model of growth zoning "
            "for the parent melt, the crystallized fraction F at the rim and the retention r.")


_CLOSING = ("Values are posterior medians with 95% bands (2.5 and 97.5 percentiles of the "
            "posterior).")


def _thermometer_sentence(r) -> str:
    th = r.settings.get("thermometer", "")
    if r.mineral != "olivine" or not th:
        return ""
    cite = _cite_or_given(th).replace(" (", " ").rstrip(")") or th
    return (f"The parent melt temperature in the results was computed with this thermometer "
            f"({cite}); the choice is recorded in fit.json (settings, "
            "thermometer).")


@section("Methods", traverse=40)
def _traverse_methods(ctx):
    r = ctx.result
    uses = list(getattr(r, "methods", ()))
    if not uses:
        return [Paragraph("This result does not record the methods it rests on (it was made "
                          "by an older version of zoning); refit it to get the methods "
                          "paragraph and the reference list.")]
    closing = " ".join(x for x in (_thermometer_sentence(r), _CLOSING) if x)
    text = methods_paragraph(uses, lead=_traverse_lead(r), closing=closing)
    return [Paragraph(text, size=8.5),
            Paragraph("Adapt this paragraph freely; every method named in it is listed in "
                      "full under References.", size=7.0, italic=True)]


def _definitions(mineral: str) -> Bullets:
    return Bullets(tuple(f"{sym.strip()}: {text}" for sym, where, text in DEFINITIONS
                         if mineral in where), size=8.0)


@section("Definitions", traverse=50, sample=50)
def _definitions_section(ctx):
    return [_definitions(ctx.result.mineral)]


@section("Data quality", traverse=60)
def _traverse_data_quality(ctx):
    r = ctx.result
    rows = data_quality_rows(r.spots)
    n_flag = int((r.spots["status"] != "ok").sum()) if "status" in r.spots else 0
    text = (f"{r.n_spots} spots read, {r.n_used} used in the fit, {r.n_spots - r.n_used} left "
            f"out; {n_flag} flagged by the checks of the reader.")
    blocks = [Paragraph(text)]
    t = getattr(r, "traverse", None)
    if t is not None:
        trust = {"confirmed": "given by the user",
                 "high": "decided from the file, independent lines of evidence agree",
                 "low": "decided from the file on one line of evidence: confirm it if you can"}
        basis = f" Evidence: {t.orientation_basis}." if t.orientation_basis else ""
        blocks.append(Paragraph(
            f"Orientation {t.orientation}, core at {t.core_position_um:g} µm on the traverse "
            f"line ({trust.get(t.orientation_confidence, t.orientation_confidence)}).{basis}"))
    if rows:
        blocks.append(Table(("row", "point", "distance [µm]", "status", "reason"),
                            tuple(map(tuple, rows)), (0.07, 0.08, 0.12, 0.1, 0.63)))
    return blocks


@section("Settings", traverse=70, sample=70)
def _settings(ctx):
    return [Table(("setting", "value"), tuple(map(tuple, settings_rows(ctx.result))),
                  (0.28, 0.72), size=7.5)]


@section("Assumptions and cautions", traverse=80)
def _traverse_cautions(ctx):
    return [Bullets(CAUTIONS, numbered=True)]


def _references(keys: Iterable[str]) -> list:
    refs = reference_list(keys)
    if not refs:
        return [Paragraph("No published method recorded.")]
    items = []
    for ref in refs:
        text = ref.full()
        if ref.from_memory:
            text += " [†]"
        items.append(text)
    from zoning import __version__

    blocks = [Bullets(tuple(items), size=7.5),
              Paragraph(f"Software: zoning {__version__}; cite it as given in its "
                        "CITATION.cff.", size=7.5)]
    if any(r.from_memory for r in refs):
        blocks.append(Paragraph("[†] bibliographic details recalled, not yet checked against "
                                "the publication: check them before citing.", size=7.0,
                                italic=True))
    return blocks


@section("References", traverse=90)
def _traverse_references(ctx):
    return _references(_method_keys(ctx.result))


@section("How the file was read", traverse=100)
def _traverse_reading(ctx):
    notes = list(ctx.result.traverse.notes)
    return [Bullets(tuple(notes), size=7.0)] if notes else []


# ----------------------------------------------------------------- sample sections
@section("", sample=0)
def _sample_title(ctx):
    r = ctx.result
    return [Title(f"zoning sample report: {r.name} ({r.mineral}, joint fit of "
                  f"{r.n_crystals} crystals)", _title_lines(ctx))]


@section("Shared quantities (best value and 95% band)", sample=10)
def _sample_results(ctx):
    r = ctx.result
    verdict = f"Verdict: {r.verdict}."
    if r.verdict.endswith("no majority") or r.verdict == "crystals disagree":
        verdict += (" NO SINGLE ANSWER: the crystals do not share one melt; see the crystals "
                    "table for each group.")
    return [Paragraph(verdict, size=9.0),
            Table(("quantity", "best", "95% band", "unit", "statement"),
                  tuple(map(tuple, results_rows(r))), (0.22, 0.14, 0.16, 0.07, 0.41)),
            Paragraph(f"Reduced chi-square of the joint best fit: "
                      f"{_fmt(r.reduced_chi_square)}; F counts from the nucleation of the "
                      f"anchor crystal {r.anchor!r} (F_core = 0 by definition).", size=7.5,
                      italic=True)]


_RATIO = {"olivine": ("melt_mg_number", "Mg#"), "plagioclase": ("melt_ca_number", "Ca#")}


def _band_text(e, unit: str = "") -> str:
    """``best (lo95–hi95)`` of an Estimate, each number as :func:`_fmt` writes it."""
    return f"{_fmt(e.best, unit)} ({_fmt(e.lo95, unit)}–{_fmt(e.hi95, unit)})"


def crystal_rows(result) -> list[list[str]]:
    """Rows of the crystals table of a joint fit.

    Parameters
    ----------
    result : SampleFitResult

    Returns
    -------
    list of list of str
        Crystal, verdict, group, F at the core (95% band), own parent melt
        ratio (95% band of its single-crystal fit), consistency statistic
        with dof and p-value, spots used of read.
    """
    ratio, _ = _RATIO[result.mineral]
    rows = []
    for c in result.crystals:
        fc = c.estimates.get("f_core")
        own = c.own_estimates.get(ratio)
        name = c.name + (" (anchor)" if c.name == result.anchor else "")
        f_text = _band_text(fc) if fc is not None else "–"
        own_text = (f"{_fmt(own.lo95)}–{_fmt(own.hi95)}" if own is not None else "–")
        if math.isfinite(c.consistency_p):
            p_text = "< 0.001" if c.consistency_p < 1e-3 else f"= {c.consistency_p:.2g}"
            test = f"T = {c.consistency_statistic:.1f} ({c.consistency_dof} dof), p {p_text}"
        else:
            test = "–"
        rows.append([name, c.verdict, str(c.group), f_text, own_text, test,
                     f"{c.n_used} of {c.n_spots}"])
    return rows


#: Per-crystal processes after growth of a joint fit: key, column title, unit.
_CRYSTAL_PROCESSES = (("section_h_over_r", "section offset h/R (95% band)", "1"),
                      ("diffusion_length_um", "diffusion length L [µm] (95% band)", "µm"))


def crystal_process_rows(result) -> tuple[tuple[str, ...], list[list[str]]]:
    """Column titles and rows of the per-crystal process table of a joint fit.

    Parameters
    ----------
    result : SampleFitResult

    Returns
    -------
    titles : tuple of str
        ``"crystal"`` and one title per process fitted (or fixed away from 0)
        for some crystal: section offset h/R, diffusion length L [µm].
    rows : list of list of str
        One row per crystal with each process's value and 95% band ("–"
        where the crystal has none); empty when no process was fitted.
    """
    keys = [(k, t, u) for k, t, u in _CRYSTAL_PROCESSES
            if any(k in c.estimates for c in result.crystals)]
    if not keys:
        return ("crystal",), []
    rows = []
    for c in result.crystals:
        row = [c.name]
        for k, _t, u in keys:
            e = c.estimates.get(k)
            if e is None:
                row.append("–")
                continue
            row.append(_band_text(e, u) + ("" if e.constrained else ", not constrained"))
        rows.append(row)
    return ("crystal", *(t for _k, t, _u in keys)), rows


@section("Crystals", sample=20)
def _sample_crystals(ctx):
    r = ctx.result
    _, sym = _RATIO[r.mineral]
    titles, process_rows = crystal_process_rows(r)
    process = []
    if process_rows:
        n = len(titles) - 1
        process = [Table(titles, tuple(map(tuple, process_rows)),
                         (0.25, *([0.75 / n] * n)))]
    return [Table(("crystal", "verdict", "group", "F at the core (95% band)",
                   f"own parent {sym} (95%)", "consistency test", "spots used"),
                  tuple(map(tuple, crystal_rows(r))),
                  (0.17, 0.13, 0.07, 0.19, 0.13, 0.22, 0.09)),
            *process,
            Paragraph("consistent: shares the melt of the others and enters the shared "
                      "answer; likely antecryst: disagrees with the others (leave-one-out "
                      "likelihood-ratio test) and is left out of the shared answer; excluded: "
                      "left out by the user; too few spots: left out, fewer usable spots "
                      "than its parameters need.", size=7.5, italic=True)]


@section("Methods", sample=40)
def _sample_methods(ctx):
    r = ctx.result
    s = r.settings
    lead = (f"The {r.n_crystals} {r.mineral} crystals of sample {r.name} were fitted jointly "
            f"with zoning {_version(r)}: one parent melt, Kd and retention r shared by the "
            "consistent crystals, each crystal with its own F at the core.")
    joint = []
    if s.get("consistency_test"):
        joint.append(f"Crystals were tested for a common melt by {s['consistency_test']}.")
    if s.get("sampler"):
        joint.append(f"The joint posterior was sampled by {s['sampler']}.")
    uses = list(getattr(r, "methods", ()))
    if uses:  # the records say it all, the consistency test and the sampler included
        text = methods_paragraph(uses, lead=lead, closing=_CLOSING)
    else:
        text = " ".join([lead, *joint, _CLOSING])
    return [Paragraph(text, size=8.5),
            Paragraph("Adapt this paragraph freely; every method named in it is listed in "
                      "full under References.", size=7.0, italic=True)]


@section("Data quality", sample=60)
def _sample_data_quality(ctx):
    r = ctx.result
    rows = []
    for c in r.crystals:
        rows += data_quality_rows(c.spots, crystal=c.name)
    blocks = [Paragraph(f"{r.n_spots} spots read in {r.n_crystals} crystals; {r.n_used} used "
                        "in the shared fit of the main group.")]
    if rows:
        blocks.append(Table(("crystal", "row", "point", "distance [µm]", "status", "reason"),
                            tuple(map(tuple, rows)), (0.14, 0.06, 0.07, 0.1, 0.09, 0.54)))
    return blocks


@section("Assumptions and cautions", sample=80)
def _sample_cautions(ctx):
    from zoning.io.joint_results import joint_caution

    return [Bullets((joint_caution(ctx.result.settings), *CAUTIONS), numbered=True)]


@section("References", sample=90)
def _sample_references(ctx):
    keys = _method_keys(ctx.result)
    if "Wilks 1938" in str(ctx.result.settings.get("consistency_test", "")):
        keys.append("wilks_1938")
    return _references(keys)


# ----------------------------------------------------------------- pages and files
def _utc(date: _dt.datetime | None) -> _dt.datetime:
    if date is None:
        return _dt.datetime.now(_dt.timezone.utc)
    if date.tzinfo is None:
        return date.replace(tzinfo=_dt.timezone.utc)
    return date.astimezone(_dt.timezone.utc)


def report_pages(result, figures: Sequence[Figure] | None = None, *,
                 date: _dt.datetime | None = None) -> list[Figure]:
    """Build the report pages of one traverse fit as matplotlib figures.

    Parameters
    ----------
    result : FitResult
        A fit of one traverse.
    figures : sequence of Figure, optional
        Already drawn profile, melt-path and posterior figures of this
        result (drawn here when not given).
    date : datetime.datetime, optional
        Date printed in the report (default: now) [UTC].

    Returns
    -------
    list of matplotlib.figure.Figure
        The text pages (:data:`TRAVERSE_SECTIONS`), then the figures.
    """
    date = _utc(date)
    pages = _lay_out(result, TRAVERSE_SECTIONS, f"zoning report: {result.sample}",
                     f"zoning {_version(result)} · {result.sample} · {date:%Y-%m-%d} UTC",
                     {"date": date})
    if figures is None:
        from zoning.io import figures as _fig

        figures = [_fig.profile_figure(result), _fig.melt_path_figure(result),
                   _fig.corner_figure(result)]
    return pages + list(figures)


def sample_report_pages(result, figures: Sequence[Figure] | None = None, *,
                        date: _dt.datetime | None = None) -> list[Figure]:
    """Build the report pages of one joint (sample) fit as matplotlib figures.

    Parameters
    ----------
    result : SampleFitResult
        A joint fit of the crystals of one sample.
    figures : sequence of Figure, optional
        Already drawn figures (default those of
        :func:`zoning.io.joint_figures.sample_figures`).
    date : datetime.datetime, optional
        Date printed in the report (default: now) [UTC].

    Returns
    -------
    list of matplotlib.figure.Figure
        The text pages (:data:`SAMPLE_SECTIONS`), then the figures.
    """
    date = _utc(date)
    pages = _lay_out(result, SAMPLE_SECTIONS, f"zoning sample report: {result.name}",
                     f"zoning {_version(result)} · sample {result.name} · {date:%Y-%m-%d} UTC",
                     {"date": date})
    if figures is None:
        from zoning.io import joint_figures

        figures = list(joint_figures.sample_figures(result).values())
    return pages + list(figures)


def _write_pdf(pages: Sequence[Figure], path: str | os.PathLike, title: str) -> Path:
    path = Path(path)
    path.parent.mkdir(parents=True, exist_ok=True)
    tmp = path.with_name(f".{path.name}.{os.getpid()}.tmp")
    meta = {"Title": title, "Creator": "zoning", "CreationDate": None}
    try:
        with PdfPages(tmp, metadata=meta) as pdf:
            for page in pages:
                pdf.savefig(page)
        os.replace(tmp, path)
    finally:
        if tmp.exists():
            tmp.unlink()
    return path


def write_report(result, path: str | os.PathLike, *, figures: Sequence[Figure] | None = None,
                 date: _dt.datetime | None = None) -> Path:
    """Write the PDF report of one traverse fit, atomically.

    Parameters
    ----------
    result : FitResult
        A fit of one traverse.
    path : str or path-like
        Destination ``.pdf``; folders are created.
    figures : sequence of Figure, optional
        Already drawn figures of this result to put after the text pages
        (default: the profile, melt-path and posterior figures, drawn here).
    date : datetime.datetime, optional
        Date printed in the report (default: now) [UTC]. The PDF holds no
        other time stamp, so the same result and date give the same bytes.

    Returns
    -------
    pathlib.Path
        The path written.
    """
    return _write_pdf(report_pages(result, figures, date=date), path,
                      f"zoning report: {result.sample}")


def write_sample_report(result, path: str | os.PathLike, *,
                        figures: Sequence[Figure] | None = None,
                        date: _dt.datetime | None = None) -> Path:
    """Write the PDF report of one joint (sample) fit, atomically.

    Parameters
    ----------
    result : SampleFitResult
        A joint fit of the crystals of one sample.
    path : str or path-like
        Destination ``.pdf``; folders are created.
    figures : sequence of Figure, optional
        Figures to put after the text pages (default: the sample figures).
    date : datetime.datetime, optional
        Date printed in the report (default: now) [UTC].

    Returns
    -------
    pathlib.Path
        The path written.
    """
    return _write_pdf(sample_report_pages(result, figures, date=date), path,
                      f"zoning sample report: {result.name}")
