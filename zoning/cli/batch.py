"""``zoning batch``: fit every sample of a project file, or every export in a folder.

``zoning batch PROJECT.toml [--out DIR] [--workers N] [--cluster ADDRESS]``
fits the samples listed in a TOML project file (see :mod:`zoning.workflow`);
``zoning batch FOLDER --mineral olivine --melt FeO=9.5`` fits every export in
a folder with the settings given on the command line. Fit options given on
the command line replace those of the project's ``[defaults]`` (sample tables
still override them).
"""

from __future__ import annotations

import argparse
import sys
from pathlib import Path

from zoning.cli._figures import add_figure_options, where_graphics
from zoning.cli._reading import add_reading_options, reading_options
from zoning.exceptions import ZoningError

__all__ = ["add_parser", "run", "options_from_args"]


def add_parser(subparsers) -> argparse.ArgumentParser:
    """Register ``zoning batch`` on the sub-command parsers.

    Parameters
    ----------
    subparsers : argparse._SubParsersAction

    Returns
    -------
    argparse.ArgumentParser
    """
    p = subparsers.add_parser(
        "batch",
        help="fit every sample of a project file (TOML) or every export in a folder",
        description=(
            "Fit every sample of a project file, or every export in a folder, in parallel. "
            "Writes summary.csv (and summary.xlsx), an overview figure and one folder per "
            "sample with fit.json, profile.csv, figures and report.pdf. Samples whose input "
            "file and settings are unchanged since the last run are not refitted."
        ),
    )
    p.add_argument("path", help="project file (.toml) or folder of exports")
    p.add_argument("--out", help="output folder (default: 'results' beside the project file, "
                                 "or inside the folder)")
    p.add_argument("--workers", type=int, help="worker processes (default: number of cores)")
    p.add_argument("--cluster", metavar="ADDRESS",
                   help="send the work to a Dask distributed scheduler, e.g. "
                        "tcp://10.0.0.5:8786 (needs the 'dask' extra; the input files and "
                        "--out must be on a file system the workers share)")
    p.add_argument("--force", action="store_true",
                   help="refit every sample (never deletes files zoning did not write)")
    p.add_argument("--quiet", action="store_true", help="no progress bar")
    p.add_argument("--no-figures", dest="figures", action="store_false", default=None,
                   help="do not draw the sample figures (project key figures = false)")
    p.add_argument("--no-report", dest="report", action="store_false", default=None,
                   help="do not write report.pdf per sample (project key report = false)")
    add_figure_options(p, batch=True)
    p.add_argument("--wait", type=float, default=0.0, metavar="SECONDS",
                   help="wait up to SECONDS for another batch writing into the same --out "
                        "(default: refuse at once, naming it)")
    p.add_argument("--allow-outside-paths", action="store_true",
                   help="let a project file name exports by absolute path or outside its "
                        "own folder (refused by default)")
    p.add_argument("--out-beside-inputs", action="store_true",
                   help="allow --out to be the folder the exports are read from (folder "
                        "mode); zoning's own outputs there are never read as inputs")
    g = p.add_argument_group("fit options (as for zoning fit; replace the project defaults)")
    g.add_argument("--mineral", choices=("olivine", "plagioclase"),
                   help="analysed mineral (default: detected)")
    g.add_argument("--melt", action="append", metavar="OXIDE=WT",
                   help="reference melt analysis [wt%%], repeatable, e.g. --melt FeO=9.5 "
                        "(FeOT=... for total iron; FeO and Fe2O3 together set Fe3+/FeT)")
    g.add_argument("--kd", type=float, help="mean of the Kd prior")
    g.add_argument("--kd-sd", type=float, help="1-sigma of the Kd prior (0 fixes Kd)")
    g.add_argument("--fe3", type=float, help="melt Fe3+/FeT")
    g.add_argument("--geometry", choices=("sphere", "cylinder", "slab"),
                   help="growth geometry")
    g.add_argument("--range", metavar="A:B", help="fit only spots between A and B µm")
    g.add_argument("--radius-um", type=float, help="crystal radius [µm]")
    g.add_argument("--sigma", type=float, help="1-sigma of every Fo/An value [mol%%]")
    g.add_argument("--robust", action="store_true", default=None,
                   help="soft-L1 loss: down-weight stray spots")
    g.add_argument("--include-flagged", action="store_true", default=None,
                   help="also fit spots flagged by the checks")
    g.add_argument("--free", metavar="NAMES",
                   help="extra free parameters, comma-separated")
    g.add_argument("--temperature-c", type=float,
                   help="temperature [°C] of the plagioclase Sr/Mg partitioning laws and of "
                        "diffusion after growth (converts the diffusion length into days)")
    g.add_argument("--section-h-over-r", metavar="free|H",
                   help="section offset h/R: 'free' (fitted; default) or a number, 0 for a cut "
                        "through the core; joint samples: per crystal, default 0 (project key "
                        "section_h_over_r)")
    g.add_argument("--diffusion-length-um", metavar="free|L",
                   help="diffusion length after growth [µm]: 'free' (fitted; olivine default) "
                        "or a number, 0 for none (project key diffusion_length_um)")
    g.add_argument("--delta-qfm", type=float,
                   help="log10 fO2 relative to QFM for the olivine Fe-Mg diffusion time "
                        "(default 0)")
    g.add_argument("--walkers", type=int, help="sampler walkers")
    g.add_argument("--steps", type=int,
                   help="sampler steps (default: as zoning fit, continued when too short)")
    g.add_argument("--seed", type=int, help="random seed")
    g.add_argument("--thermometer", choices=("helz_thornber_1987", "montierth_1995", "shea_2022"),
                   help="olivine: glass MgO thermometer of the reported melt temperature")
    add_reading_options(
        p.add_argument_group("reading options (as for zoning inspect; replace the project "
                             "defaults)"), batch=True)
    g.add_argument("--joint", action="store_true", default=None,
                   help="fit the traverses of each sample's file(s) together as the crystals "
                        "of one sample (project key joint = true)")
    g.add_argument("--exclude", metavar="NAMES",
                   help="with --joint: crystals to leave out, comma-separated traverse names")
    g.add_argument("--joint-f-rim", choices=("shared", "per_crystal"),
                   help="with --joint: one F at the rim for all crystals or one each")
    g.add_argument("--joint-retention", choices=("shared", "hierarchical"),
                   help="with --joint: one r for the sample or r per crystal from a population")
    p.set_defaults(run=run)
    return p


_FIT_ARGS = ("kd", "kd_sd", "fe3", "geometry", "range", "radius_um", "sigma",
             "robust", "include_flagged", "free", "temperature_c", "walkers", "steps",
             "seed", "thermometer", "joint", "exclude", "joint_f_rim", "joint_retention",
             "section_h_over_r", "diffusion_length_um", "delta_qfm")


def options_from_args(args: argparse.Namespace) -> dict:
    """Project-file options given on the command line.

    Parameters
    ----------
    args : argparse.Namespace

    Returns
    -------
    dict
        Only the options actually given, with project-file names.
    """
    from zoning.cli.fit import parse_melt, parse_process

    opts = {k: getattr(args, k) for k in _FIT_ARGS if getattr(args, k, None) is not None}
    for key in ("section_h_over_r", "diffusion_length_um"):
        if key in opts:
            opts[key] = parse_process("--" + key.replace("_", "-"), opts[key])
    opts.update(reading_options(args))
    if args.melt:
        opts["melt"] = parse_melt(args.melt)
    for key in ("figures", "report", "figure_format", "figure_style"):
        if getattr(args, key, None) is not None:
            opts[key] = getattr(args, key)
    return opts


def _cluster_executor(address: str):
    try:
        from distributed import Client
    except ImportError:
        raise ZoningError(
            "--cluster needs the Dask 'distributed' package, which is not installed. "
            "Install it with: pip install 'zoning[dask]'."
        ) from None
    try:
        client = Client(address, timeout="20s")
    except (OSError, TimeoutError, ValueError) as exc:
        raise ZoningError(
            f"cannot connect to the Dask scheduler at {address!r} ({exc}). Check the address "
            "(e.g. tcp://host:8786) and that the scheduler is running."
        ) from None
    return client, client.get_executor()


def run(args: argparse.Namespace) -> int:
    """Run ``zoning batch`` with parsed arguments.

    Parameters
    ----------
    args : argparse.Namespace

    Returns
    -------
    int
        0 when every sample was fitted (or unchanged), 1 when some failed;
        an interruption is raised as :class:`zoning.exceptions.Interrupted`
        (exit code 128 + signal number from the entry point).
    """
    import os

    from zoning.io.outputs import check_output_dir
    from zoning.workflow import (
        MAX_WORKERS_PER_CORE,
        check_sampler_settings,
        input_problem,
        project_from_folder,
        read_project,
        run_batch,
    )

    path = Path(args.path)
    check_sampler_settings(args.walkers, args.steps, args.seed)
    max_workers = max(8, MAX_WORKERS_PER_CORE * (os.cpu_count() or 1))
    if args.workers is not None and not 1 <= args.workers <= max_workers:
        raise ZoningError(
            f"--workers must be between 1 and {max_workers} on this machine "
            f"({os.cpu_count()} cores; each worker needs about 200 MB); got {args.workers}."
        )
    if not (args.wait >= 0 and args.wait < 1e7):
        raise ZoningError(f"--wait must be a number of seconds >= 0; got {args.wait!r}.")
    opts = options_from_args(args)
    if path.is_dir():
        if "melt" not in opts:
            raise ZoningError(
                f"{str(path)!r} is a folder: give the reference melt for all its exports, "
                "e.g. zoning batch FOLDER --mineral olivine --melt FeO=9.5 (or use a "
                "project file for per-sample settings)."
            )
        default_out = path / "results"
        out = Path(args.out) if args.out else default_out
        check_output_dir(out)
        project = project_from_folder(path, opts)
    elif path.exists():
        problem = input_problem(path)
        if problem:
            raise ZoningError(f"{problem} Give a project file (.toml) or a folder of exports.")
        default_out = path.resolve().parent / "results"
        out = Path(args.out) if args.out else default_out
        check_output_dir(out)
        project = read_project(path, overrides=opts,
                               allow_outside_paths=args.allow_outside_paths)
    else:
        raise ZoningError(
            f"{str(path)!r} not found. Give a project file (.toml) or a folder of exports."
        )
    client = executor = None
    if args.cluster:
        client, executor = _cluster_executor(args.cluster)
    try:
        result = run_batch(project, out, executor=executor, workers=args.workers,
                           progress=not args.quiet, force=args.force, wait=args.wait,
                           beside_inputs=args.out_beside_inputs)
    finally:
        if client is not None:
            client.close()
    for note in result.notes:
        print(f"note: {note}", file=sys.stderr)
    print(
        f"zoning batch: {len(result.outcomes)} samples: {result.n_fitted} fitted, "
        f"{result.n_unchanged} unchanged (not refitted), {result.n_failed} failed "
        f"in {result.seconds:.1f} s"
    )
    for o in result.outcomes:
        if o.status == "failed":
            print(f"  failed: {o.name}: {o.error}", file=sys.stderr)
        elif o.status == "fitted" and o.note:
            print(f"  {o.name}: {o.note}", file=sys.stderr)
    print(f"summary: {Path(result.out_dir) / 'summary.csv'}")
    print(where_graphics(project.jobs, Path(result.out_dir)))
    return 1 if result.n_failed else 0
