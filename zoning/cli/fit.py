"""``zoning fit``: fit crystallization models to every traverse of one export.

Prints a plain report per traverse and writes ``summary.csv`` and, per
traverse, ``fit.json``, ``profile.csv``, the figures (profile, melt path,
posterior) and ``report.pdf`` into the output folder: the same figures and
report as ``zoning batch``, written by the same code
(:func:`zoning.io.figures.write_sample_graphics`).
"""

from __future__ import annotations

import argparse
import sys
from pathlib import Path

from zoning.cli._figures import add_figure_options, figure_settings, list_graphics
from zoning.cli._reading import add_reading_options, reading_options
from zoning.exceptions import ZoningError

__all__ = ["add_parser", "run", "parse_melt", "parse_range", "parse_process", "with_command"]


def parse_melt(items: list[str] | None) -> dict[str, float]:
    """Parse repeated ``OXIDE=WT`` options into a mapping [wt%].

    Names are kept as given (``FeOT``, ``FeO*``, ``Fe2O3`` ...); they are
    read by :func:`zoning.melt.read_melt` when fitting.

    Parameters
    ----------
    items : list of str
        E.g. ``["FeO=9.5", "MgO=8.1"]``.

    Returns
    -------
    dict of str to float

    Raises
    ------
    ZoningError
        An item without ``=``, a value that is not a non-negative number, or
        a name given twice.
    """
    melt: dict[str, float] = {}
    for item in items or []:
        name, sep, value = item.partition("=")
        try:
            number = float(value)
        except ValueError:
            number = float("nan")
        if not sep or not name.strip() or not (number == number) or number < 0:
            raise ZoningError(
                f"--melt expects OXIDE=WT with a non-negative number [wt%]; got {item!r}. "
                "Give e.g. --melt FeO=9.5."
            )
        if name.strip() in melt:
            raise ZoningError(f"--melt gives {name.strip()} twice; give it once.")
        melt[name.strip()] = number
    return melt


def parse_range(text: str | None) -> tuple[float, float] | None:
    """Parse ``A:B`` into a distance range [µm].

    Parameters
    ----------
    text : str or None
        E.g. ``"0:120"``.

    Returns
    -------
    (float, float) or None
    """
    if text is None:
        return None
    a, sep, b = text.partition(":")
    try:
        lo, hi = float(a), float(b)
    except ValueError:
        lo = hi = float("nan")
    if not sep or not (lo < hi):
        raise ZoningError(
            f"--range expects A:B in µm with A < B; got {text!r}. Give e.g. --range 0:120."
        )
    return lo, hi


def parse_process(option: str, text: str | None) -> str | float | None:
    """Parse a process option: ``free`` or a number (``None`` when not given).

    Parameters
    ----------
    option : str
        The option, e.g. ``"--section-h-over-r"`` (for the message).
    text : str or None
        E.g. ``"free"`` or ``"0"``.

    Returns
    -------
    "free", float or None

    Raises
    ------
    ZoningError
        When the text is neither.
    """
    if text is None:
        return None
    if text.strip().lower() == "free":
        return "free"
    try:
        return float(text)
    except ValueError:
        raise ZoningError(
            f"{option} expects 'free' or a number; got {text!r}. Give e.g. {option} free or "
            f"{option} 0."
        ) from None


def with_command(result, args: argparse.Namespace):
    """Return ``result`` with the command line and its folder in its settings.

    ``settings["command"]`` (as typed, e.g. ``zoning fit FRL-07_ol1.csv --melt FeO=9.8``) and
    ``settings["command_folder"]`` (the folder it was run from) let the report, ``fit.json`` and
    the table sidecars say how to reproduce the result.
    """
    import dataclasses
    import os

    command = getattr(args, "command_line", "")
    if not command:
        return result
    settings = {**result.settings, "command": command, "command_folder": os.getcwd()}
    return dataclasses.replace(result, settings=settings)


def _free(text: str | None) -> tuple[str, ...]:
    if not text:
        return ()
    return tuple(t.strip() for t in text.split(",") if t.strip())


def add_parser(subparsers) -> argparse.ArgumentParser:
    """Register ``zoning fit`` on the sub-command parsers.

    Parameters
    ----------
    subparsers : argparse._SubParsersAction

    Returns
    -------
    argparse.ArgumentParser
    """
    p = subparsers.add_parser(
        "fit",
        help="fit parent melt, F and retention with 95%% bands to each traverse",
        description=(
            "Fit a crystallization model (retention r between fractional, r = 0, and "
            "equilibrium, r = 1) to every traverse in FILE and report the parent melt, "
            "the crystallized fraction at the rim and r with 95% bands."
        ),
    )
    p.add_argument("file", nargs="+",
                   help="microprobe export(s) (CSV, TXT, XLSX or ODS); with --joint every traverse "
                        "of every file is one crystal of the sample")
    p.add_argument("--mineral", choices=("olivine", "plagioclase"),
                   help="analysed mineral (default: detected from the analyses)")
    p.add_argument("--melt", action="append", metavar="OXIDE=WT",
                   help="reference melt analysis [wt%%], repeatable, e.g. --melt FeO=9.5 "
                        "(olivine; FeOT=... for total iron, FeO and Fe2O3 together set "
                        "Fe3+/FeT) or --melt Na2O=3.1 (plagioclase)")
    p.add_argument("--kd", type=float, help="mean of the Kd prior (olivine Fe-Mg default "
                   "0.30; plagioclase KD(Ca-Na))")
    p.add_argument("--kd-sd", type=float, help="1-sigma of the Kd prior (0 fixes Kd)")
    p.add_argument("--fe3", type=float,
                   help="melt Fe3+/FeT (default: from the melt FeO and Fe2O3 when both are "
                        "given, else 0.10)")
    p.add_argument("--thermometer", default="helz_thornber_1987",
                   choices=("helz_thornber_1987", "montierth_1995", "shea_2022"),
                   help="olivine: glass MgO thermometer of the reported melt temperature "
                        "(default helz_thornber_1987)")
    p.add_argument("--temperature-c", type=float,
                   help="temperature [°C] of the plagioclase Sr/Mg partitioning laws "
                        "(SrO/MgO profiles are fitted only when it is given) and of diffusion "
                        "after growth (the diffusion length is then also given in days)")
    p.add_argument("--section-h-over-r", metavar="free|H",
                   help="distance of the section plane from the crystal centre over the "
                        "radius: 'free' (fitted with the random-cut prior; default) or a "
                        "number, 0 for a cut through the core; with --joint: per crystal, "
                        "default 0 (every crystal cut through its core)")
    p.add_argument("--diffusion-length-um", metavar="free|L",
                   help="diffusion length sqrt(D t) after growth [µm]: 'free' (fitted; "
                        "olivine default) or a number, 0 for none (plagioclase default: An "
                        "is frozen); with --joint: per crystal, default 0")
    p.add_argument("--delta-qfm", type=float,
                   help="log10 fO2 relative to QFM for the olivine Fe-Mg diffusivity of the "
                        "diffusion time (default 0)")
    p.add_argument("--geometry", choices=("sphere", "cylinder", "slab"), default="sphere",
                   help="growth geometry (default sphere)")
    p.add_argument("--range", dest="distance_range", metavar="A:B",
                   help="fit only spots between A and B µm from the core")
    p.add_argument("--radius-um", type=float, help="crystal radius [µm] (default: last spot)")
    p.add_argument("--sigma", type=float,
                   help="1-sigma of every Fo/An value [mol%%] (default: from the file, "
                        "else 0.2 Fo / 0.5 An)")
    p.add_argument("--robust", action="store_true",
                   help="soft-L1 loss: down-weight stray spots")
    p.add_argument("--include-flagged", action="store_true",
                   help="also fit spots flagged by the checks")
    p.add_argument("--free", metavar="NAMES",
                   help="extra free parameters, comma-separated: f_core,growth_exponent,"
                        "core_offset_um")
    p.add_argument("--walkers", type=int,
                   help="sampler walkers (default 64; with --joint: chains, default 32)")
    p.add_argument("--steps", type=int,
                   help="sampler steps including burn-in (default 600 olivine, "
                        "2000 plagioclase, continued up to 3000/6000 when they leave fewer "
                        "than 1000 effective draws; a number given here is kept as given)")
    p.add_argument("--joint", action="store_true",
                   help="fit all crystals together as one sample: shared parent melt, Kd and "
                        "r, per-crystal F_core, antecryst test")
    p.add_argument("--exclude", metavar="NAMES",
                   help="with --joint: crystals to leave out, comma-separated traverse names")
    p.add_argument("--joint-f-rim", choices=("shared", "per_crystal"), default="shared",
                   help="with --joint: one F at the rim for all crystals (default) or one each")
    p.add_argument("--joint-retention", choices=("shared", "hierarchical"), default="shared",
                   help="with --joint: one r for the sample (default) or r per crystal from "
                        "a population (hierarchical)")
    p.add_argument("--name", help="with --joint: sample name (default: common part of the "
                   "traverse names)")
    p.add_argument("--out", help="output folder (default: <file name>_fit)")
    p.add_argument("--seed", type=int, default=0, help="random seed (default 0)")
    add_figure_options(p.add_argument_group("figures and report (as for zoning batch)"))
    add_reading_options(p.add_argument_group("reading options (as for zoning inspect)"))
    p.set_defaults(run=run)
    return p


def run(args: argparse.Namespace) -> int:
    """Run ``zoning fit`` with parsed arguments.

    Parameters
    ----------
    args : argparse.Namespace

    Returns
    -------
    int
        Exit code (0 when every traverse was fitted, 1 when some failed).
    """
    from zoning.exceptions import FitError
    from zoning.fitting import fit_traverse
    from zoning.io import read_traverses
    from zoning.io.outputs import OutputFolder, check_output_dir
    from zoning.io.results import fit_output_names, format_report, write_fit_outputs
    from zoning.workflow import (
        check_fittable,
        check_sampler_settings,
        input_problem,
        read_keywords,
    )

    sources = [Path(f) for f in args.file]
    source = sources[0]
    for path in sources:
        problem = input_problem(path)
        if problem:
            raise ZoningError(problem)
    melt = parse_melt(args.melt)
    if not melt:
        raise ZoningError(
            "no reference melt given; the fit needs the less compatible oxide of the "
            "exchanging pair [wt%], from a glass or whole-rock analysis. Give e.g. "
            "--melt FeO=9.5 (olivine) or --melt Na2O=3.1 (plagioclase)."
        )
    distance_range = parse_range(args.distance_range)
    check_sampler_settings(args.walkers, args.steps, args.seed)
    graphics = figure_settings(args)
    out_dir = Path(args.out) if args.out else source.with_name(source.stem + "_fit")
    check_output_dir(out_dir)
    traverses = [t for s in sources
                 for t in read_traverses(s, **read_keywords(reading_options(args)))]
    for traverse in traverses:
        for note in traverse.notes:
            if note.startswith(("sheet: read", "this traverse: ")):
                print(f"{traverse.name}: {note}")
    common = dict(
        melt=melt, kd=args.kd, kd_sd=args.kd_sd, fe3_fraction=args.fe3,
        geometry=args.geometry, distance_range=distance_range, radius_um=args.radius_um,
        free=_free(args.free), sigma=args.sigma, include_flagged=args.include_flagged,
        robust=args.robust, temperature_c=args.temperature_c, seed=args.seed,
    )
    process = dict(
        section_h_over_r=parse_process("--section-h-over-r", args.section_h_over_r),
        diffusion_length_um=parse_process("--diffusion-length-um", args.diffusion_length_um),
        delta_qfm=args.delta_qfm,
    )
    if args.joint:
        if process["delta_qfm"] is not None:
            raise ZoningError(
                "--delta-qfm applies to single fits; joint fits (--joint) take the melt "
                "Fe3+/FeT from --fe3. Drop it or fit without --joint."
            )
        common = dict(common, section_h_over_r=process["section_h_over_r"],
                      diffusion_length_um=process["diffusion_length_um"])
        return _run_joint(args, traverses, common, out_dir, sources, graphics)
    if args.exclude:
        raise ZoningError("--exclude applies to joint fits only; add --joint.")
    # Before any fit: every file the fit will write must be new or zoning's own.
    output = OutputFolder(out_dir, kind="fit")
    output.check(fit_output_names([t.name for t in traverses], figures=graphics["figures"],
                                  report=graphics["report"],
                                  figure_format=graphics["figure_format"]))
    results = []
    failed = 0
    for traverse in traverses:
        try:
            check_fittable(traverse, include_flagged=args.include_flagged,
                           distance_range=distance_range, radius_um=args.radius_um)
            result = fit_traverse(
                traverse, **common,
                n_walkers=64 if args.walkers is None else args.walkers,
                n_steps=args.steps,
                thermometer=args.thermometer,
                **process,
            )
        except FitError as exc:
            failed += 1
            print(f"zoning fit: {traverse.name}: not fitted: {exc}", file=sys.stderr)
            continue
        result = with_command(result, args)
        results.append(result)
        print(format_report(result))
    if not results:
        raise ZoningError(
            f"no traverse of {', '.join(map(str, sources))} could be fitted (see the messages "
            "above); check the flagged spots, --range and --melt."
        )
    provenance = {"source": [str(p.resolve()) for p in sources] if len(sources) > 1
                  else str(source.resolve()), "settings": dict(results[0].settings)}
    written = write_fit_outputs(results, out_dir, protect=sources, provenance=provenance,
                                output=output, **graphics)
    print(f"wrote {len(written)} files to {out_dir}")
    print("\n".join(list_graphics(written, out_dir)))
    return 1 if failed else 0


def _run_joint(args, traverses, common, out_dir, sources, graphics) -> int:
    """Fit every traverse as one crystal of one sample and write the joint outputs."""
    from zoning.exceptions import FitError
    from zoning.fitting import fit_sample
    from zoning.io.joint_results import format_sample_report, write_sample_outputs
    from zoning.io.outputs import OutputFolder

    if len(traverses) < 2:
        raise ZoningError(
            f"--joint needs at least two crystals; {', '.join(map(str, sources))} hold "
            f"{len(traverses)} traverse. Give more files, or fit without --joint."
        )
    # Before the fit: the tables must be new or zoning's own (the sample
    # folder's names are known after the fit and claimed then, before writing).
    output = OutputFolder(out_dir, kind="fit")
    output.check(["summary.csv", "summary.json", "crystals.csv", "crystals.json"])
    groups = _sample_groups(traverses, args.name)
    exclude = _free(args.exclude)
    known = {t.name for t in traverses}
    missing = [e for e in exclude if e not in known]
    if missing and len(groups) > 1:
        raise ZoningError(
            f"--exclude names {missing} are not traverses of {', '.join(map(str, sources))}; "
            f"the traverses are {sorted(known)}."
        )
    if len(groups) > 1:
        print(f"the files name {len(groups)} samples in their sample column ("
              + "; ".join(f"{k}: {len(v)} traverses" for k, v in groups.items())
              + "): each is fitted jointly on its own. To fit them as one sample, give --name.")
    results = []
    for sample, members in groups.items():
        names = {t.name for t in members}
        mine = [e for e in exclude if e in names] if len(groups) > 1 else exclude
        if len(groups) > 1 and len(members) - len(mine) < 2:
            print(f"zoning fit: sample {sample!r}: not fitted: a joint fit needs at least two "
                  f"crystals and it has {len(members) - len(mine)} "
                  f"({', '.join(sorted(names - set(mine))) or 'none'}); fit it without --joint.",
                  file=sys.stderr)
            continue
        try:
            result = fit_sample(
                members, **common, name=args.name if len(groups) == 1 else sample,
                f_rim=args.joint_f_rim, retention=args.joint_retention, exclude=mine,
                n_chains=32 if args.walkers is None else args.walkers, n_sweeps=args.steps,
            )
        except FitError as exc:
            if len(groups) == 1:
                raise
            # one sample that cannot be fitted does not stop the others
            print(f"zoning fit: sample {sample!r}: not fitted: {exc}", file=sys.stderr)
            continue
        result = with_command(result, args)
        print(format_sample_report(result))
        results.append(result)
    if not results:
        raise ZoningError(
            "no sample has two crystals to fit jointly (see above); fit the traverses "
            "without --joint."
        )
    provenance = {"sources": [str(p.resolve()) for p in sources],
                  "settings": dict(results[0].settings)}
    written = write_sample_outputs(results, out_dir, protect=sources, provenance=provenance,
                                   output=output, **graphics)
    print(f"wrote {len(written)} files to {out_dir}")
    print("\n".join(list_graphics(written, out_dir)))
    return 0 if len(results) == len(groups) else 1


def _sample_groups(traverses, name) -> dict:
    """Traverses by the sample written in their file, when every one names one.

    One group (keyed by ``name`` or "") when ``name`` is given, when any
    traverse names no sample, or when all name the same one.
    """
    from zoning.traverse import by_written_sample

    groups = by_written_sample(traverses)
    if name is not None or len(groups) < 2 or any(not t.sample for t in traverses):
        return {name or "": list(traverses)}
    return groups
