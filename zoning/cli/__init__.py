"""Command-line entry point ``zoning``.

Each sub-command lives in its own module of this package and exposes
``add_parser(subparsers)`` and ``run(args) -> int``. This is the application
layer: the only place where the core (:mod:`zoning`), :mod:`zoning.io` and
:mod:`zoning.fitting` meet. No traceback reaches the user: expected errors
(:class:`zoning.exceptions.ZoningError`, missing files) are printed as one
clear message, and warnings of libraries (numpy, scipy, matplotlib) are
printed as one plain ``warning:`` line each, once.

Exit codes (also in the README):

====  =====================================================================
0     success
1     finished, but something could not be done: a sample or traverse
      failed (listed), or ``inspect`` found no usable spot
2     unusable input or settings, or an output that would replace a file
      zoning did not write; nothing was fitted
75    another ``zoning batch`` is writing into the same ``--out`` (try later)
129   stopped by SIGHUP, 130 by SIGINT (Ctrl-C), 143 by SIGTERM, after
      cleaning up
141   the output pipe was closed (e.g. ``| head``); ends quietly
====  =====================================================================
"""

from __future__ import annotations

import argparse
import importlib
import os
import shlex
import signal
import sys
import warnings

from zoning.exceptions import OutputLockedError, ZoningError, ZoningWarning

__all__ = ["main"]

#: Sub-command modules, in the order shown by ``zoning --help``.
COMMANDS = ("inspect", "simulate", "fit", "batch", "demo")

#: Exit codes of the command line.
EXIT_OK, EXIT_PARTIAL, EXIT_INPUT, EXIT_LOCKED, EXIT_PIPE = 0, 1, 2, 75, 141


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


_SHOWN: set[str] = set()


def _library(filename: str) -> str:
    for name in ("numpy", "scipy", "pandas", "matplotlib", "emcee", "lmfit", "openpyxl"):
        if f"{os.sep}{name}{os.sep}" in filename or f"/{name}/" in filename:
            return name
    return ""


def _show_warning(message, category, filename, lineno, file=None, line=None):
    """Print a warning as one plain line: no file name, line number or class name."""
    stream = file if file is not None else sys.stderr
    text = " ".join(str(message).split())
    if issubclass(category, ZoningWarning):
        out = f"warning: {text}\n"
    else:
        source = _library(str(filename))
        out = f"warning ({source}): {text}\n" if source else f"warning: {text}\n"
    if out in _SHOWN:
        return
    _SHOWN.add(out)
    try:
        stream.write(out)
    except (OSError, ValueError):  # pragma: no cover - stderr closed
        pass


def _quiet_pipe() -> None:
    """After a closed pipe: send further output nowhere, so exiting stays quiet."""
    try:
        devnull = os.open(os.devnull, os.O_WRONLY)
        os.dup2(devnull, sys.stdout.fileno())
    except (OSError, ValueError, AttributeError):  # pragma: no cover
        pass


def _say(text: str) -> None:
    try:
        print(text, file=sys.stderr)
    except (OSError, ValueError):  # pragma: no cover - stderr closed (hang-up)
        pass


def main(argv: list[str] | None = None) -> int:
    """Run the ``zoning`` command line.

    Parameters
    ----------
    argv : list of str, optional
        Arguments without the program name (default: ``sys.argv[1:]``).

    Returns
    -------
    int
        Exit code: 0 on success, 1 when part of the work failed, 2 on
        unusable input, 75 when another batch holds the output folder,
        128 + signal number when stopped by a signal, 141 when the output
        pipe was closed (module docstring).
    """
    parser = build_parser()
    args = parser.parse_args(argv)
    if args.command is None:
        parser.print_help()
        return EXIT_INPUT
    warnings.showwarning = _show_warning
    # The command as typed, recorded in the results so that reports say how to rerun it.
    args.command_line = shlex.join(["zoning", *(sys.argv[1:] if argv is None else argv)])
    try:
        code = int(args.run(args) or 0)
        sys.stdout.flush()
        return code
    except BrokenPipeError:
        _quiet_pipe()
        return EXIT_PIPE
    except OutputLockedError as exc:
        _say(f"zoning {args.command}: error: {exc}")
        return EXIT_LOCKED
    except ZoningError as exc:
        _say(f"zoning {args.command}: error: {exc}")
        return EXIT_INPUT
    except FileNotFoundError as exc:
        _say(
            f"zoning {args.command}: error: file not found: {exc.filename}. "
            "Check the path (relative paths are taken from the current folder)."
        )
        return EXIT_INPUT
    except KeyboardInterrupt as exc:
        signum = int(getattr(exc, "signum", signal.SIGINT))
        try:
            name = signal.Signals(signum).name
        except ValueError:  # pragma: no cover
            name = f"signal {signum}"
        _say(f"zoning {args.command}: interrupted ({name}); finished results are kept")
        return 128 + signum


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
