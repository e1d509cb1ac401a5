"""Reading options shared by ``zoning inspect``, ``zoning fit`` and ``zoning batch``.

One definition of each option, so that the three commands accept the same
names and read a file the same way: the options are turned into project-file
options (:func:`reading_options`) and from there into the keyword arguments
of :func:`zoning.io.read_traverses` by :func:`zoning.workflow.read_keywords`,
exactly as a project file's keys are.
"""

from __future__ import annotations

import argparse

from zoning.exceptions import ZoningError

__all__ = ["add_reading_options", "reading_options", "parse_pairs", "sheet_value"]

#: Project-file key of each reading option (``dest`` on the parsed arguments).
READING_KEYS = ("column_map", "sheet", "orientation", "core_um", "check", "iron")


def parse_pairs(items: list[str] | None, option: str, example: str) -> dict[str, str]:
    """Parse repeated ``KEY=VALUE`` options into a dict.

    Parameters
    ----------
    items : list of str
        Values as given on the command line.
    option : str
        Option name, for the message (e.g. ``"--column-map"``).
    example : str
        An example value, for the message.

    Returns
    -------
    dict of str to str

    Raises
    ------
    ZoningError
        When an item has no ``=`` or an empty key, or gives a key twice.
    """
    out: dict[str, str] = {}
    for item in items or []:
        key, sep, value = item.partition("=")
        if not sep or not key.strip() or not value.strip():
            raise ZoningError(
                f"{option} expects KEY=VALUE; got {item!r}. Give e.g. {option} {example}."
            )
        if key.strip() in out:
            raise ZoningError(
                f"{option} gives {key.strip()!r} twice ({out[key.strip()]!r} and "
                f"{value.strip()!r}); give it once."
            )
        out[key.strip()] = value.strip()
    return out


def sheet_value(value: str | None) -> str | None:
    """Return the ``--sheet`` text (a name, or a number counted from 0, as text)."""
    if value is None:
        return None
    return value.strip()


def add_reading_options(parser, *, batch: bool = False) -> None:
    """Add the reading options to a parser or argument group.

    Parameters
    ----------
    parser : argparse.ArgumentParser or argument group
    batch : bool, optional
        For ``zoning batch``: every default is None, so that only options
        given on the command line replace the project's ``[defaults]``.
    """
    parser.add_argument(
        "--column-map", action="append", metavar="CANON=HEADER",
        help="use the file column HEADER for the quantity CANON, repeatable, e.g. "
             "--column-map FeO='FeO tot' --column-map distance_um=Dist "
             "--column-map traverse=Line. CANON is an oxide (SiO2, FeO, ...), point, label, "
             "sample, crystal, traverse, distance_um, x_um, y_um, total, fo_sigma, an_sigma, "
             "<oxide>_sigma or exclude (project key column_map = { FeO = \"FeO tot\" })")
    parser.add_argument(
        "--sheet", metavar="NAME",
        help="worksheet of an .xlsx/.ods workbook, by name or number counted from 0 "
             "(default: the first sheet that holds analyses; project key sheet)")
    parser.add_argument(
        "--orientation", choices=("core-to-rim", "rim-to-core", "rim-to-rim"),
        help="orientation along increasing position (default: decided from the profile, "
             "the basis is printed; project key orientation)")
    parser.add_argument(
        "--core-um", type=float, metavar="X",
        help="position of the core along the traverse [µm] (default: found from the "
             "profile; project key core_um)")
    parser.add_argument(
        "--check", action="append", metavar="NAME=VALUE",
        help="change a quality-check threshold, repeatable, e.g. --check total_min_wt=98 "
             "(project key check = { total_min_wt = 98 }); an unknown name lists the valid "
             "ones")
    parser.add_argument(
        "--iron", choices=("FeO", "reported", "charge-balance"),
        default=None if batch else "FeO",
        help="iron in the structural formula: all as FeO (default), Fe2O3 as reported, or "
             "Fe3+ by charge balance (Droop 1987); project key iron")


def reading_options(args: argparse.Namespace) -> dict:
    """Project-file reading options given on the command line.

    Parameters
    ----------
    args : argparse.Namespace
        Parsed arguments of a command that called :func:`add_reading_options`
        (``mineral`` is taken too when present).

    Returns
    -------
    dict
        Project-file key to value, only for the options given (and ``iron``
        when it has a default): ``mineral``, ``column_map``, ``sheet``,
        ``orientation``, ``core_um``, ``check``, ``iron``.
    """
    opts: dict = {}
    if getattr(args, "mineral", None) is not None:
        opts["mineral"] = args.mineral
    column_map = parse_pairs(getattr(args, "column_map", None), "--column-map",
                             "FeO='FeO tot'")
    if column_map:
        opts["column_map"] = column_map
    sheet = sheet_value(getattr(args, "sheet", None))
    if sheet is not None:
        opts["sheet"] = sheet
    for key in ("orientation", "core_um", "iron"):
        value = getattr(args, key, None)
        if value is not None:
            opts[key] = value
    checks = parse_pairs(getattr(args, "check", None), "--check", "total_min_wt=98")
    if checks:
        values = {}
        for name, text in checks.items():
            try:
                values[name] = float(text)
            except ValueError:
                raise ZoningError(
                    f"--check {name}={text!r}: the value must be a number; give e.g. "
                    "--check total_min_wt=98."
                ) from None
        opts["check"] = values
    return opts
