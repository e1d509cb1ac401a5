"""``zoning inspect``: read one export, check every spot and show the result.

Prints a short summary per traverse (spots read and flagged by reason,
mineral, orientation and its basis, Fo/An range, values below detection)
and writes, per traverse, ``<out>/<traverse>/points.csv`` with every input
row in input order and ``<out>/<traverse>/notes.txt`` with every statement
made while reading.
"""

from __future__ import annotations

import argparse
import re
import sys
from collections import Counter
from pathlib import Path

from zoning.cli._reading import add_reading_options, parse_pairs, reading_options
from zoning.exceptions import ZoningError

__all__ = ["add_parser", "run", "parse_pairs", "reason_kind", "DEFAULT_OUT_SUFFIX"]

#: The default output folder is ``<file stem><DEFAULT_OUT_SUFFIX>`` in the current folder.
DEFAULT_OUT_SUFFIX = "_inspect"

_KINDS = (
    (re.compile(r"^total .* wt% outside (.*)$"), r"total outside \1 wt%"),
    (re.compile(r"^cation sum \S+ per (\d+) O outside (.*)$"), r"cation sum outside \2 per \1 O"),
    (re.compile(r"^negative (\S+) \(.*\)$"), r"negative \1"),
    (re.compile(r"^same position as row .*$"), "duplicate position"),
    (re.compile(r"^\S+ µm off the traverse line \(limit (.*)\)$"),
     r"off the traverse line (> \1)"),
    (re.compile(r"^(\S+) \S+ wt% > (\S+) \((.*)\)$"), r"\1 > \2 wt% (\3)"),
)
_NUMBER = re.compile(r"(?<![A-Za-z\d.])-?\d+(?:\.\d+)?(?:[eE][+-]?\d+)?")


#: Significant digits of the values inspect computes (Fo/An/Ab/Or, cation
#: sums, projected positions): microprobe oxides carry 3-4 significant
#: digits, so 6 keep every digit they support without float noise.
_POINT_DIGITS = {c: 6 for c in ("fo", "an", "ab", "or", "cation_sum", "position_um",
                                "offline_um", "distance_um", "fo_sigma", "an_sigma")}


def reason_kind(reason: str) -> str:
    """Return the kind of one flagging reason, without spot-specific numbers.

    Parameters
    ----------
    reason : str
        One reason, e.g. ``"total 97.21 wt% outside 98.5-101.5"``.

    Returns
    -------
    str
        E.g. ``"total outside 98.5-101.5 wt%"``; numbers in unknown reasons
        are replaced by ``#``.
    """
    reason = reason.strip()
    for pattern, repl in _KINDS:
        if pattern.match(reason):
            return pattern.sub(repl, reason)
    return _NUMBER.sub("#", reason)


def add_parser(subparsers) -> argparse.ArgumentParser:
    """Register ``zoning inspect`` on the sub-command parsers.

    Parameters
    ----------
    subparsers : argparse._SubParsersAction

    Returns
    -------
    argparse.ArgumentParser
    """
    p = subparsers.add_parser(
        "inspect",
        help="read an export, check every spot and write the checked spot table",
        description=(
            "Read one microprobe export (CSV, TXT or XLSX), recalculate every spot (Fo for "
            "olivine, An/Ab/Or for plagioclase), check it (total, cation sum, contamination, "
            "duplicate position, distance from the traverse line), find the core and write "
            "OUT/<traverse>/points.csv with every input row, in input order, with its status "
            "and the reason for any flag."
        ),
    )
    p.add_argument("file", help="microprobe export (CSV, TXT, XLSX or ODS)")
    p.add_argument("--mineral", choices=("olivine", "plagioclase"),
                   help="analysed mineral (default: detected from the oxides)")
    p.add_argument("--out", metavar="DIR",
                   help=f"output folder (default: <file name>{DEFAULT_OUT_SUFFIX} in the "
                        "current folder)")
    add_reading_options(p)
    p.set_defaults(run=run)
    return p


def _summary(traverse, written: Path) -> str:
    s = traverse.spots
    record = "Fo" if traverse.mineral == "olivine" else "An"
    major = traverse.major
    n = len(s)
    flagged = s[s["status"] != "ok"]
    lines = [f"{traverse.name}  ({traverse.mineral})", f"  file: {traverse.source}"]
    lines.append(f"  spots read: {n}; ok: {n - len(flagged)}; flagged: {len(flagged)}")
    if len(flagged):
        kinds: Counter[str] = Counter()
        for reason in flagged["reason"]:
            for piece in {reason_kind(r) for r in str(reason).split("; ") if r.strip()}:
                kinds[piece] += 1
        lines.append("  flagged by reason (a spot can have several):")
        for kind, count in sorted(kinds.items(), key=lambda kv: (-kv[1], kv[0])):
            lines.append(f"    {count:5d}  {kind}")
    for note in traverse.notes:
        if note.startswith(("sheet: read", "mineral ", "orientation: ", "cannot be fitted",
                            "split on ", "this traverse: ")):
            lines.append(f"  {note}")
    if traverse.core_position_um == traverse.core_position_um:  # finite
        lines.append(f"  core at {traverse.core_position_um:.4g} µm along the traverse")
    else:
        lines.append("  core position unknown (no spot has a position)")
    ok = s[s["status"] == "ok"]
    vals = ok[major].dropna()
    if len(vals):
        d = ok["distance_um"].dropna()
        extent = f", {d.min():.1f}-{d.max():.1f} µm from the core" if len(d) else ""
        lines.append(f"  {record} (ok spots): {vals.min():.2f}-{vals.max():.2f} mol%{extent}")
    else:
        lines.append(f"  {record}: no usable value")
    detection = [nt for nt in traverse.notes
                 if "below detection" in nt or "missing" in nt or "not determined" in nt]
    if detection:
        lines.append("  below detection / missing:")
        lines.extend(f"    {nt}" for nt in detection)
    lines.append(f"  written: {written}")
    return "\n".join(lines)


def run(args: argparse.Namespace) -> int:
    """Run ``zoning inspect`` with parsed arguments.

    Parameters
    ----------
    args : argparse.Namespace

    Returns
    -------
    int
        0 on success (flagged spots included); 1 when a traverse has no usable
        spot (the tables are still written, to show why); unusable input
        raises :class:`~zoning.exceptions.ZoningError` (exit code 2 from the
        entry point).
    """
    from zoning.io.outputs import OutputFolder, check_output_dir
    from zoning.io.traverses import read_traverses
    from zoning.io.writers import unique_names, write_table, write_text
    from zoning.workflow import input_problem, read_keywords

    source = Path(args.file)
    problem = input_problem(source)
    if problem:
        raise ZoningError(problem)
    out_dir = Path(args.out) if args.out else Path.cwd() / f"{source.stem}{DEFAULT_OUT_SUFFIX}"
    check_output_dir(out_dir)
    traverses = read_traverses(source, **read_keywords(reading_options(args)))
    names = unique_names(t.name for t in traverses)
    output = OutputFolder(out_dir, kind="inspect")
    files = [f"{folder}/{n}" for folder in names for n in ("points.csv", "points.json",
                                                             "notes.txt")]
    output.claim(files)
    blocks = []
    unusable = []
    for traverse, folder in zip(traverses, names, strict=True):
        target = output.path(f"{folder}/points.csv")
        provenance = {
            "content": "checked spots, one row per input row in input order",
            "source": str(traverse.source),
            "traverse": traverse.name,
            "mineral": traverse.mineral,
            "orientation": traverse.orientation,
            "core_position_um": traverse.core_position_um,
            "units": "positions and distances in µm, oxides and totals in wt%, "
                     "fo/an/ab/or in mol%",
        }
        write_table(traverse.spots, target, provenance=provenance, digits=_POINT_DIGITS,
                    protect=[source])
        write_text(output.path(f"{folder}/notes.txt"),
                   "\n".join(traverse.notes) + "\n", protect=[source])
        output.record(f"{folder}/points.csv", f"{folder}/points.json", f"{folder}/notes.txt")
        blocks.append(_summary(traverse, target))
        spots = traverse.spots
        ok = spots[(spots["status"] == "ok")]
        if not len(ok) or not ok[traverse.major].notna().any():
            unusable.append(traverse.name)
    output.finish()
    print("\n\n".join(blocks), file=sys.stdout)
    if unusable:
        print(
            f"zoning inspect: no usable spot in {', '.join(repr(n) for n in unusable)} "
            "(every spot flagged or without a value; see the reasons above and in points.csv)",
            file=sys.stderr,
        )
        return 1
    return 0
