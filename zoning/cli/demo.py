"""``zoning demo``: fit the invented Ferrolyn demo project and write its reports.

Runs the whole chain (reading, checks, fits, figures, PDF reports, batch
summary) on the demo data installed with the package, writing into ``--out``
(default ``./zoning-demo``); nothing is written into the package folder. The
demo project uses short sampler chains so that it finishes in about a minute
on two cores; its bands are therefore rougher than a thesis run's.
"""

from __future__ import annotations

import argparse
from pathlib import Path

from zoning.exceptions import ZoningError

__all__ = ["add_parser", "run", "demo_project_path"]


def demo_project_path() -> Path:
    """Path of the installed demo project file.

    Returns
    -------
    pathlib.Path
    """
    from zoning.demo_data import DEMO_DIR

    return DEMO_DIR / "ferrolyn" / "project.toml"


def add_parser(subparsers) -> argparse.ArgumentParser:
    """Register ``zoning demo`` on the sub-command parsers.

    Parameters
    ----------
    subparsers : argparse._SubParsersAction

    Returns
    -------
    argparse.ArgumentParser
    """
    p = subparsers.add_parser(
        "demo",
        help="fit the invented Ferrolyn demo traverses and write their reports",
        description=(
            "Fit the demo project of the fictional Ferrolyn volcanic field (olivine and "
            "plagioclase traverses, normal and reverse zoning, bad spots) and write the "
            "summary, figures and PDF reports into --out."
        ),
    )
    p.add_argument("--out", default="zoning-demo",
                   help="output folder (default ./zoning-demo)")
    p.add_argument("--workers", type=int, help="worker processes (default: number of cores)")
    p.add_argument("--quiet", action="store_true", help="no progress bar")
    p.set_defaults(run=run)
    return p


def run(args: argparse.Namespace) -> int:
    """Run ``zoning demo``.

    Parameters
    ----------
    args : argparse.Namespace

    Returns
    -------
    int
        0 on success, 1 if a demo sample failed.
    """
    from zoning.workflow import read_project, run_batch

    project_file = demo_project_path()
    if not project_file.is_file():
        raise ZoningError(
            f"demo project {str(project_file)!r} is missing from this installation. "
            "Reinstall zoning (pip install --force-reinstall zoning)."
        )
    project = read_project(project_file)
    out = Path(args.out).resolve()
    print(f"zoning demo: fitting {len(project.jobs)} invented Ferrolyn traverses into {out}")
    result = run_batch(project, out, workers=args.workers, progress=not args.quiet)
    print(f"zoning demo: done in {result.seconds:.1f} s "
          f"({result.n_fitted} fitted, {result.n_unchanged} unchanged, "
          f"{result.n_failed} failed)")
    for o in result.outcomes:
        if o.status == "failed":
            print(f"  failed: {o.name}: {o.error}")
        else:
            print(f"  {o.name}: {Path(o.folder) / 'report.pdf'}")
    print("note: the demo uses short sampler chains so that it runs in about a minute; its "
          "bands are rough and its reports warn so. Use longer chains for real work.")
    print(f"summary table: {out / 'summary.csv'}")
    print(f"overview figure: {out / 'overview.pdf'}")
    return 1 if result.n_failed else 0
