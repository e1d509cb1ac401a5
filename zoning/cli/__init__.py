"""Command-line entry point ``zoning``.

Each sub-command lives in its own module of this package and exposes
``add_parser(subparsers)`` and ``run(args) -> int``. This is the application
layer: the only place where the core (:mod:`zoning`), :mod:`zoning.io` and
:mod:`zoning.fitting` meet. No traceback reaches the user: expected errors
(:class:`zoning.exceptions.ZoningError`, missing files) are printed as one
clear message with exit code 2.
"""

from __future__ import annotations

import argparse
import importlib
import sys
import warnings

from zoning.exceptions import ZoningError, ZoningWarning

__all__ = ["main"]

#: Sub-command modules, in the order shown by ``zoning --help``.
COMMANDS = ("inspect", "simulate", "fit", "batch", "demo")


def build_parser() -> argparse.ArgumentParser:
    """Build the argument parser with every available sub-command."""
    from zoning import __version__

    parser = argparse.ArgumentParser(
        prog="zoning",
        description=(
            "Read microprobe traverses across zoned olivine or plagioclase, "
            "fit crystallization models and report the parent melt, the "
            "crystallized fraction and the retention of crystals, with 95% bands."
        ),
    )
    parser.add_argument("--version", action="version", version=f"zoning {__version__}")
    sub = parser.add_subparsers(dest="command", metavar="COMMAND")
    for name in COMMANDS:
        try:
            module = importlib.import_module(f"zoning.cli.{name}")
        except ModuleNotFoundError as exc:  # command not built yet
            if exc.name != f"zoning.cli.{name}":
                raise
            continue
        module.add_parser(sub)
    return parser


def _show_warning(message, category, filename, lineno, file=None, line=None):
    stream = file if file is not None else sys.stderr
    if issubclass(category, ZoningWarning):
        stream.write(f"warning: {message}\n")
    else:
        stream.write(warnings.formatwarning(message, category, filename, lineno, line))


def main(argv: list[str] | None = None) -> int:
    """Run the ``zoning`` command line.

    Parameters
    ----------
    argv : list of str, optional
        Arguments without the program name (default: ``sys.argv[1:]``).

    Returns
    -------
    int
        Exit code: 0 on success, 2 on unusable input, 130 on Ctrl-C.
    """
    parser = build_parser()
    args = parser.parse_args(argv)
    if args.command is None:
        parser.print_help()
        return 2
    warnings.showwarning = _show_warning
    try:
        return int(args.run(args) or 0)
    except ZoningError as exc:
        print(f"zoning {args.command}: error: {exc}", file=sys.stderr)
        return 2
    except FileNotFoundError as exc:
        print(
            f"zoning {args.command}: error: file not found: {exc.filename}. "
            "Check the path (relative paths are taken from the current folder).",
            file=sys.stderr,
        )
        return 2
    except KeyboardInterrupt:
        print(f"zoning {args.command}: interrupted", file=sys.stderr)
        return 130


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
