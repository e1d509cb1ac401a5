"""Time :func:`zoning.io.read_traverses` on a 100,000-spot invented export.

read_traverses = read_export + structural formulae + quality checks + line
fit + orientation. The export is an invented normally zoned olivine traverse
(stage X/Y in mm, 2 µm spacing, 0.3 µm stage noise). Prints wall and CPU time
of the reader alone and of the whole chain, and the flag counts.
Run: ``python benchmarks/traverses.py``.
"""

import tempfile
import time
from pathlib import Path

import numpy as np
from zoning.io import read_traverses
from zoning.io.readers import read_export

from zoning.oxides import molar_mass


def make_file(path: Path, n: int, rng: np.random.Generator) -> None:
    fo = 88 - 8 * np.linspace(0, 1, n) ** 4 + rng.normal(0, 0.1, n)
    x = fo / 100
    grams = np.column_stack([
        np.full(n, molar_mass("SiO2")), 2 * x * molar_mass("MgO"), 2 * (1 - x) * molar_mass("FeO")
    ])
    wt = 100 * grams / grams.sum(axis=1, keepdims=True)
    t = np.arange(n) * 2.0
    stage_x = 10 + t / 1000 * np.cos(0.3) + rng.normal(0, 0.0003, n)
    stage_y = 20 + t / 1000 * np.sin(0.3) + rng.normal(0, 0.0003, n)
    lines = ["Point,Comment,X (mm),Y (mm),SiO2,FeO,MgO,CaO"]
    lines += [
        f"{i + 1},s{i + 1},{stage_x[i]:.6f},{stage_y[i]:.6f},{wt[i, 0]:.3f},{wt[i, 2]:.3f},"
        f"{wt[i, 1]:.3f},0.2"
        for i in range(n)
    ]
    path.write_text("\n".join(lines) + "\n", encoding="utf-8")


def timed(label, fn):
    w0, c0 = time.perf_counter(), time.process_time()
    out = fn()
    wall, cpu = time.perf_counter() - w0, time.process_time() - c0
    print(f"{label:15s} wall {wall:6.2f} s   cpu {cpu:6.2f} s")
    return out


def main(n: int = 100_000) -> None:
    with tempfile.TemporaryDirectory() as folder:
        path = Path(folder) / "FRL-99_big.csv"
        make_file(path, n, np.random.default_rng(0))
        print(f"{n:,} spots")
        timed("read_export", lambda: read_export(path))
        (traverse,) = timed("read_traverses", lambda: read_traverses(path))
        counts = traverse.spots["status"].value_counts().to_dict()
        print(f"orientation {traverse.orientation}; status counts {counts}")


if __name__ == "__main__":
    main()
