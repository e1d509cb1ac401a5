"""Hostile corpus for the batch safety tests: folders a careless user (or an attacker) gives zoning.

Every case is built by a function of this module into a fresh folder, so the
tests never depend on files checked in by hand. The exports are the first
spots of an invented demo traverse (fictional Ferrolyn volcanic field,
``zoning.demo_data``); every other file (the thesis draft, the "secret" file,
the typo'd positions) is invented here.

Run ``python tests/hostile/make_hostile.py FOLDER`` to write every case into
FOLDER for manual experiments.
"""

from __future__ import annotations

import os
import sys
from pathlib import Path

import pandas as pd
from zoning.demo_data import DEMO_DIR

__all__ = [
    "FAST",
    "CASES",
    "small_export",
    "project",
    "thesis_folder",
    "folder_with_export_named_summary",
    "project_outside_paths",
    "not_an_export",
    "fifo_input",
    "few_spot_exports",
]

#: Project defaults that keep one fit below a second (the numbers are not the point here).
FAST = ("walkers = 8\nsteps = 100\nfigures = false\nreport = false\n"
        "section_h_over_r = 0\ndiffusion_length_um = 0\n")

#: Lines of a file that is not an export; they must never reach an output.
SECRET_LINES = ("root:x:0:0:root:/root:/bin/bash", "ferrolyn-admin:x:1000:1000::/home/f:/bin/sh")


def small_export(path: Path, n: int = 12) -> Path:
    """Write the last ``n`` spots of a demo olivine traverse (no NiO) as a plain CSV.

    The last spots hold the zoned rim, so the orientation is found from the
    data (a flat core alone would have to be confirmed by the user).
    """
    df = pd.read_csv(DEMO_DIR / "ferrolyn" / "FRL-07_ol2.csv", sep=";", decimal=",",
                     encoding="latin-1")
    path.parent.mkdir(parents=True, exist_ok=True)
    df.tail(n).drop(columns=["NiO"]).to_csv(path, index=False)
    return path


def project(folder: Path, samples: dict[str, str], *, defaults: str = FAST) -> Path:
    """Write ``folder/project.toml`` with one sample table per ``name -> file`` entry."""
    folder.mkdir(parents=True, exist_ok=True)
    lines = ["[defaults]", 'mineral = "olivine"', "melt = { FeO = 9.8 }", "seed = 3", defaults]
    for name, file in samples.items():
        lines += [f'[samples."{name}"]', f"file = {file!r}".replace("'", '"')]
    path = folder / "project.toml"
    path.write_text("\n".join(lines) + "\n", encoding="utf-8")
    return path


def thesis_folder(root: Path) -> Path:
    """A thesis folder with a chapter folder named like a sample; returns the project file.

    ``root/chapter2/draft.tex`` is the user's own work; the project (in
    ``root``) has a sample called ``chapter2``, so ``--out root`` would put
    that sample's folder where the chapter is.
    """
    (root / "chapter2").mkdir(parents=True, exist_ok=True)
    (root / "chapter2" / "draft.tex").write_text(
        "\\chapter{Olivine zoning at Ferrolyn}\nDraft, do not lose.\n", encoding="utf-8")
    (root / "notes.csv").write_text("day,what\n1,field work\n", encoding="utf-8")
    small_export(root / "exports" / "FRL-07_ol2.csv")
    return project(root, {"chapter2": "exports/FRL-07_ol2.csv"})


def folder_with_export_named_summary(root: Path) -> Path:
    """A folder of exports in which one export is called ``summary.csv``; returns the folder."""
    small_export(root / "FRL-07_ol2.csv")
    small_export(root / "summary.csv", n=10)
    return root


def project_outside_paths(root: Path, outside: Path) -> Path:
    """A project whose samples point outside its folder (absolute, ``..`` and a link)."""
    small_export(outside / "elsewhere.csv")
    (outside / "secret.csv").write_text("\n".join(SECRET_LINES) + "\n", encoding="utf-8")
    root.mkdir(parents=True, exist_ok=True)
    small_export(root / "inside.csv")
    link = root / "link.csv"
    if not link.exists():
        os.symlink(outside / "secret.csv", link)
    rel = os.path.relpath(outside / "elsewhere.csv", root)
    return project(root, {
        "inside": "inside.csv",
        "absolute": str(outside / "secret.csv"),
        "dotdot": rel,
        "link": "link.csv",
    })


def not_an_export(root: Path) -> Path:
    """A project with one real export and one text file that is not an export."""
    small_export(root / "ol.csv")
    (root / "accounts.csv").write_text("\n".join(SECRET_LINES) + "\n", encoding="utf-8")
    return project(root, {"good": "ol.csv", "accounts": "accounts.csv"})


def fifo_input(root: Path) -> Path:
    """A folder of exports holding a named pipe called ``pipe.csv`` (never to be opened)."""
    small_export(root / "FRL-07_ol2.csv")
    os.mkfifo(root / "pipe.csv")
    return root


def few_spot_exports(root: Path) -> dict[str, Path]:
    """Exports that cannot make a profile: one spot, and all spots at one distance."""
    one = small_export(root / "one_spot.csv", n=1)
    same = small_export(root / "same_distance.csv", n=6)
    df = pd.read_csv(same)
    dist = [c for c in df.columns if c.lower().startswith(("dist", "x", "position"))]
    for c in dist:
        df[c] = 0.0
    df.to_csv(same, index=False)
    return {"one_spot": one, "same_distance": same}


#: Every case: name -> builder of one folder.
CASES = {
    "thesis": thesis_folder,
    "summary_named_export": folder_with_export_named_summary,
    "not_an_export": not_an_export,
    "few_spots": few_spot_exports,
}


if __name__ == "__main__":  # pragma: no cover - manual use
    target = Path(sys.argv[1] if len(sys.argv) > 1 else "hostile_corpus")
    for name, build in CASES.items():
        build(target / name)
    project_outside_paths(target / "outside_paths" / "project", target / "outside_paths" / "o")
    if hasattr(os, "mkfifo"):
        fifo_input(target / "fifo")
    print(f"wrote the hostile corpus into {target}")
