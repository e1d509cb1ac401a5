"""Figure options shared by ``zoning fit`` and ``zoning batch``.

``--no-figures``, ``--no-report``, ``--figure-format`` and ``--figure-style``
mean the same on both commands and have the same names as the project-file
keys ``figures``, ``report``, ``figure_format`` and ``figure_style``. The
values are checked by :mod:`zoning.io.figures` when the command runs (not at
parse time, so that ``zoning --help`` does not load matplotlib).
"""

from __future__ import annotations

import argparse
from collections.abc import Iterable
from pathlib import Path

__all__ = ["add_figure_options", "figure_settings", "where_graphics", "list_graphics"]


def add_figure_options(p: argparse.ArgumentParser, *, batch: bool = False) -> None:
    """Add the figure options to a sub-command parser.

    Parameters
    ----------
    p : argparse.ArgumentParser
    batch : bool, optional
        For ``zoning batch``: ``--no-figures``/``--no-report`` already exist
        and every option defaults to None (the project file decides).
    """
    if not batch:
        p.add_argument("--no-figures", dest="figures", action="store_false", default=True,
                       help="do not write the figures (profile, melt path, posterior)")
        p.add_argument("--no-report", dest="report", action="store_false", default=True,
                       help="do not write report.pdf")
    p.add_argument("--figure-format", metavar="FORMATS",
                   help="figure file formats, any of png, pdf, svg, comma-separated "
                        "(default png,pdf; project key figure_format)")
    p.add_argument("--figure-style", metavar="PRESET",
                   help="figure size and fonts: thesis (160 mm text width, default), column "
                        "(85 mm journal column) or slide (16:9 slide) (project key "
                        "figure_style)")


def figure_settings(args: argparse.Namespace) -> dict:
    """Return the checked figure settings of ``zoning fit``.

    Parameters
    ----------
    args : argparse.Namespace

    Returns
    -------
    dict
        ``figures``, ``report`` (bool), ``figure_format`` (tuple of str) and
        ``figure_style`` (preset name).

    Raises
    ------
    zoning.exceptions.ZoningError
        An unknown format or preset (naming the ones that exist).
    """
    from zoning.io.figures import figure_style, parse_figure_formats

    return {
        "figures": bool(args.figures),
        "report": bool(args.report),
        "figure_format": parse_figure_formats(args.figure_format),
        "figure_style": figure_style(args.figure_style).name,
    }


def where_graphics(jobs: Iterable, out: Path) -> str:
    """Say where the figures and reports of a run are, for the console.

    Parameters
    ----------
    jobs : iterable
        Objects with ``figures``, ``report``, ``figure_format`` and
        ``figure_style`` (the batch's sample jobs, or one object for a fit).
    out : pathlib.Path
        Output folder.

    Returns
    -------
    str
        One or two lines.
    """
    jobs = list(jobs)
    lines = []
    drawn = [j for j in jobs if j.figures]
    if drawn:
        formats = sorted({f for j in drawn for f in j.figure_format})
        styles = sorted({j.figure_style for j in drawn})
        kinds = {bool(getattr(j, "joint", False)) for j in drawn}
        stems = ("<figure>" if len(kinds) > 1 else
                 "{sample,crystals}" if kinds == {True} else "{profile,melt_path,posterior}")
        lines.append(f"figures: {out}/<sample>/{stems}.{{{','.join(formats)}}} "
                     f"(preset {', '.join(styles)})")
    else:
        lines.append("figures: none (--no-figures / figures = false)")
    if any(j.report for j in jobs):
        lines.append(f"reports: {out}/<sample>/report.pdf")
    else:
        lines.append("reports: none (--no-report / report = false)")
    return "\n".join(lines)


def list_graphics(written: Iterable[Path], out: Path) -> list[str]:
    """Console lines naming the figures and reports written, one line per folder.

    Parameters
    ----------
    written : iterable of pathlib.Path
        Every file a command wrote.
    out : pathlib.Path
        Output folder.

    Returns
    -------
    list of str
    """
    folders: dict[Path, list[str]] = {}
    for path in map(Path, written):
        if path.suffix.lower() in (".png", ".pdf", ".svg"):
            folders.setdefault(path.parent, []).append(path.name)
    lines = []
    for folder, names in folders.items():
        figures = [n for n in names if n != "report.pdf"]
        parts = []
        if figures:
            stems = dict.fromkeys(Path(n).stem for n in figures)
            exts = dict.fromkeys(Path(n).suffix[1:] for n in figures)
            parts.append(f"figures {', '.join(stems)} ({', '.join(exts)})")
        if "report.pdf" in names:
            parts.append("report.pdf")
        lines.append(f"  {folder}: {'; '.join(parts)}")
    if not lines:
        lines.append(f"  no figures or reports in {out} (--no-figures --no-report)")
    return lines
