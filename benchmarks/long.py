"""Time the per-spot work on long traverses: reading, stray positions, orientation, diagnostics.

A normally zoned olivine traverse (invented: Fo 91 to 87, NiO falling and
MnO rising rimward, spots 1 µm apart, microprobe-like noise, one stray
position typed 100x too large) is written for n = 1,000, 10,000 and 62,000 spots
(the longest traverse reported to the project) and timed through:

* ``read_traverses`` (recalculation, spot checks, stray positions,
  orientation decision);
* ``find_stray_positions`` and ``locate_core`` alone;
* the residual diagnostics of a fit: ``longest_run_threshold``,
  ``residual_runs``, ``runs_test_z`` and ``find_reversals`` (whose noise
  simulation is the largest cost).

Prints one line per size with wall times in seconds, the CPU time of the
whole line (``cpu_s``, the fairer figure on a busy machine), the peak
memory of the diagnostics (``tracemalloc``), the orientation found and the
number of stray positions flagged (1 expected).

Then whole fits (``fit_traverse`` with default settings, melt FeO 9.5 wt%,
NiO fitted) of traverses of ``--fit-sizes`` spots, one line each:
``long: spots=<n> fit_s=<wall> fit_cpu_s=<cpu> model_nodes=<k>`` (``k``: the
positions at which the model was evaluated and interpolated to the spots,
0 when every spot was evaluated; see ``zoning.fitting.dense``). Pin BLAS to
one thread (``OMP_NUM_THREADS=1``) for comparable CPU times. Run:
``nice -n 10 python benchmarks/long.py`` (``--sizes 1000,10000`` and
``--fit-sizes 300,2000,20000`` choose the sizes; ``--fit-sizes ''`` skips
the fits).
"""

import argparse
import tempfile
import time
import tracemalloc
from pathlib import Path

import numpy as np
import pandas as pd
from zoning.fitting.diagnostics import (
    find_reversals,
    longest_run_threshold,
    residual_runs,
    runs_test_z,
)
from zoning.io.traverses import read_traverses

from zoning.orientation import find_stray_positions, locate_core
from zoning.oxides import molar_mass

#: Analytical 1-sigma added to each oxide [wt%] (typical routine microprobe
#: precision for olivine; invented for the benchmark).
NOISE_WT = {"SiO2": 0.2, "FeO": 0.12, "MgO": 0.2, "MnO": 0.01, "CaO": 0.01, "NiO": 0.01}
#: Spot spacing of the long traverses [µm].
SPACING_UM = 1.0


def make_traverse(path: Path, n: int, rng: np.random.Generator) -> None:
    """Write an ``n``-spot normally zoned olivine traverse to ``path`` (invented).

    Fo falls from 91 at the core to 87 at the rim as ``(x/L)^3`` (steep
    rim), NiO falls and MnO rises with it; oxides from the olivine formula
    (Mg,Fe)2SiO4 plus the minor elements, then analytical noise.
    """
    distance = np.arange(n, dtype=float) * SPACING_UM
    u = (distance / distance[-1]) ** 3
    fo = 0.91 - 0.04 * u
    minor = {"NiO": 0.36 - 0.13 * u, "MnO": 0.125 + 0.05 * u, "CaO": np.full(n, 0.24),
             "TiO2": np.full(n, 0.01), "Al2O3": np.full(n, 0.04), "Cr2O3": np.full(n, 0.03)}
    mass = {"MgO": 2 * fo * molar_mass("MgO"), "FeO": 2 * (1 - fo) * molar_mass("FeO"),
            "SiO2": np.full(n, molar_mass("SiO2"))}
    major_total = sum(mass.values())
    remaining = 100.0 - sum(minor.values())
    out = {"Point": np.arange(1, n + 1), "Distance (µm)": distance}
    for col, m in mass.items():
        out[col] = m / major_total * remaining
    out.update(minor)
    for col in ("SiO2", "TiO2", "Al2O3", "Cr2O3", "FeO", "MnO", "MgO", "CaO", "NiO"):
        out[col] = (out[col] + rng.normal(0.0, NOISE_WT.get(col, 0.005), n)).round(3)
    table = pd.DataFrame(out)
    table.loc[n // 3, "Distance (µm)"] *= 100.0  # one typo: a stray position
    table.to_csv(path, index=False)


def _timed(fn, *args, **kwargs):
    t0 = time.perf_counter()
    value = fn(*args, **kwargs)
    return value, time.perf_counter() - t0


def run(n: int, tmp: Path, rng: np.random.Generator) -> str:
    path = tmp / f"long_{n}.csv"
    make_traverse(path, n, rng)
    c0 = time.process_time()
    (traverse,), read_s = _timed(read_traverses, path, mineral="olivine")
    spots = traverse.spots
    stray = int(spots["reason"].str.contains("far outside", regex=False).sum())
    position = np.asarray(spots["position_um"], dtype=float)
    fo = np.asarray(spots["fo"], dtype=float)
    _, stray_s = _timed(find_stray_positions, position)
    _, core_s = _timed(locate_core, position, fo, usable=spots["status"].eq("ok").to_numpy())
    residual = rng.normal(0.0, 0.2, n)
    distance = np.sort(np.abs(rng.normal(0.0, 100.0, n)))
    tracemalloc.start()
    _, threshold_s = _timed(longest_run_threshold, n)
    _, runs_s = _timed(residual_runs, distance, residual)
    _, z_s = _timed(runs_test_z, residual)
    _, reversal_s = _timed(find_reversals, distance, fo[:n], 0.2)
    _, peak = tracemalloc.get_traced_memory()
    tracemalloc.stop()
    cpu_s = time.process_time() - c0
    return (f"long: spots={n} read_s={read_s:.3f} stray_s={stray_s:.4f} locate_core_s={core_s:.4f} "
            f"run_threshold_s={threshold_s:.4f} residual_runs_s={runs_s:.4f} "
            f"runs_test_s={z_s:.5f} reversals_s={reversal_s:.3f} diagnostics_peak_mb="
            f"{peak / 2**20:.0f} cpu_s={cpu_s:.2f} orientation={traverse.orientation}/"
            f"{traverse.orientation_confidence} stray_flagged={stray}")


def fit_run(n: int, tmp: Path, rng: np.random.Generator) -> str:
    """Time a whole default fit of an ``n``-spot traverse."""
    import warnings

    from zoning.fitting import fit_traverse

    path = tmp / f"fit_{n}.csv"
    make_traverse(path, n, rng)
    (traverse,) = read_traverses(path, mineral="olivine")
    c0 = time.process_time()
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")  # chain-length and data warnings: not timed here
        result, fit_s = _timed(fit_traverse, traverse, melt={"FeO": 9.5}, seed=0)
    cpu_s = time.process_time() - c0
    nodes = int(result.settings.get("model_nodes", 0))
    return f"long: spots={n} fit_s={fit_s:.1f} fit_cpu_s={cpu_s:.1f} model_nodes={nodes}"


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--sizes", default="1000,10000,62000",
                        help="comma-separated spot counts (default: 1000,10000,62000)")
    parser.add_argument("--fit-sizes", default="300,2000,20000",
                        help="spot counts of the whole fits (default: 300,2000,20000)")
    args = parser.parse_args()
    rng = np.random.default_rng(20261202)
    with tempfile.TemporaryDirectory() as tmp:
        for n in (int(s) for s in args.sizes.split(",") if s):
            print(run(n, Path(tmp), rng), flush=True)
        for n in (int(s) for s in args.fit_sizes.split(",") if s):
            print(fit_run(n, Path(tmp), rng), flush=True)


if __name__ == "__main__":
    main()
