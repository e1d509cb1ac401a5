"""Speed and calibration of ``zoning.fitting.fit_traverse`` (a script, not a test).

Parts, in one run:

1. Pipeline speed: the full fit (multi-start least squares, comparison of
   every candidate model -- growth, +section, +diffusion, +both, each with
   r free / 0 / 1 -- and posterior sampling) of 60-spot olivine traverses
   with a NiO profile and both processes free (the defaults), on one core
   (BLAS threads pinned to 1); then the same traverses growth only
   (processes fixed at 0). Prints wall and CPU time per traverse, the lowest
   effective sample size, and the medians.
2. Coverage of the 95% bands per scenario family of olivine crystals:
   central cut without diffusion; off-centre cut (h/R drawn from the
   random-cut prior, uniform on [0, 0.95)); diffused (L uniform on 0-60
   µm); both; each with and without a NiO profile, fitted with the
   defaults. Prints coverage per family and quantity, the count of reported
   values outside their own band, crashes, and the false reversals of
   traverses with noise three times the stated sigma.
3. Coverage over mixed olivine and plagioclase traverses without processes
   (retention exactly 0, exactly 1 or in between; three noise levels).
4. What an unmodelled process does: off-centre (h/R = 0.5) and diffused
   (L = 50 µm, r = 0) crystals fitted growth only, against the defaults.

The synthetic data are invented (the "Ferrolyn" scenario's noise levels), and
the truths are drawn from ranges typical of basaltic systems:
olivine melt Mg# 0.66-0.80 with FeO 9.5 wt%, plagioclase melt Ca# 0.50-0.75
with Na2O 3.1 wt%, Kd from its prior (0.30 +/- 0.03; 2.0 +/- 0.5), and (melt
ratio, F at the rim) uniform over the region the parent melt can reach, like
the fit's flat priors.

Usage::

    python benchmarks/fit.py [--n-timing 10] [--n-family 8] [--families central,diffused]
                             [--n-coverage 24] [--workers 2]

The last line reads
``fit: median_fit_s=<seconds> coverage95=<lowest coverage over the quantities>``.
"""

from __future__ import annotations

import os

for _var in ("OMP_NUM_THREADS", "OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS"):
    os.environ.setdefault(_var, "1")

import argparse  # noqa: E402
import time  # noqa: E402
import warnings  # noqa: E402
from concurrent.futures import ProcessPoolExecutor  # noqa: E402

import numpy as np  # noqa: E402
import pandas as pd  # noqa: E402
from scipy import stats  # noqa: E402
from zoning.fitting import fit_traverse  # noqa: E402

from zoning.models import CrystallizationModel  # noqa: E402
from zoning.traverse import Traverse  # noqa: E402

MELT = {"olivine": {"FeO": 9.5}, "plagioclase": {"Na2O": 3.1}}
KD_PRIOR = {"olivine": (0.30, 0.03), "plagioclase": (2.0, 0.5)}
RATIO = {"olivine": "melt_mg_number", "plagioclase": "melt_ca_number"}
OXIDE = {"olivine": "melt_mgo_wt", "plagioclase": "melt_cao_wt"}
SIGMAS = {"olivine": (0.1, 0.2, 0.4), "plagioclase": (0.3, 0.5, 1.0)}
QUANTITIES = ("ratio", "f_rim", "retention", "kd", "oxide")
PROCESS_QUANTITIES = ("section_h_over_r", "diffusion_length_um")
GROWTH_ONLY = {"section_h_over_r": 0.0, "diffusion_length_um": 0.0}
FAMILIES = ("central", "off-centre", "diffused", "both")
N_SPOTS = 60
RADIUS_UM = 300.0
NIO_SIGMA = 0.015


def draw_case(k: int, seed: int, *, force_olivine_ni: bool = False, family: str = "",
              ni: bool | None = None, noise_factor: float = 1.0) -> dict:
    """Random truth and noise level for synthetic traverse number ``k``.

    ``family`` (one of :data:`FAMILIES`) makes an olivine crystal with the
    family's processes, with (``ni=True``) or without a NiO profile;
    ``noise_factor`` multiplies the noise added (the stated sigma stays).
    """
    rng = np.random.default_rng([seed, k])
    if family:
        force_olivine_ni = bool(ni)
    mineral = "olivine" if (force_olivine_ni or family or k % 2 == 0) else "plagioclase"
    with_ni = mineral == "olivine" and (force_olivine_ni or (not family and rng.uniform() < 0.5))
    traces = ("Ni",) if with_ni else ()
    model = CrystallizationModel(mineral, MELT[mineral], traces=traces)
    lo, hi = (0.66, 0.80) if mineral == "olivine" else (0.50, 0.75)
    mean, sd = KD_PRIOR[mineral]
    kd = float(np.clip(rng.normal(mean, sd), mean - 3 * sd, mean + 3 * sd))
    # (ratio, F at the rim) uniform over the region the melt can reach, as
    # the fit's flat priors are (F above its reachable limit has no prior
    # mass); F is kept off the last 2% before exhaustion.
    while True:
        ratio = float(rng.uniform(lo, hi))
        f_rim = float(rng.uniform(0.0, 0.95))
        if f_rim < 0.98 * float(model.max_fraction(**{RATIO[mineral]: ratio})):
            break
    u = rng.uniform()
    retention = 0.0 if u < 0.25 else (1.0 if u < 0.5 else float(rng.uniform()))
    truth = {RATIO[mineral]: ratio, "f_rim": f_rim, "retention": retention, "kd": kd}
    if with_ni:
        truth["melt0_ni_ppm"] = float(rng.uniform(150.0, 500.0))
    sigma = float(rng.choice(SIGMAS[mineral])) if not force_olivine_ni else 0.2
    if family in ("off-centre", "both"):
        truth["section_h_over_r"] = float(rng.uniform(0.0, 0.95))
    if family in ("diffused", "both"):
        truth["diffusion_length_um"] = float(rng.uniform(0.0, 60.0))
    return {"k": k, "seed": seed, "mineral": mineral, "traces": traces, "truth": truth,
            "sigma": sigma, "family": family, "noise_factor": noise_factor, "fit": {}}


def make_traverse(case: dict) -> Traverse:
    """Synthetic traverse of one case (forward model + Gaussian noise)."""
    mineral = case["mineral"]
    model = CrystallizationModel(mineral, MELT[mineral], traces=case["traces"])
    d = np.linspace(0.0, RADIUS_UM, N_SPOTS)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        out = model.profile(d, RADIUS_UM, **case["truth"])
    rng = np.random.default_rng([case["seed"], case["k"], 1])
    major = "fo" if mineral == "olivine" else "an"
    spots = pd.DataFrame(
        {
            "row": np.arange(2, N_SPOTS + 2),
            "point": [str(i + 1) for i in range(N_SPOTS)],
            "label": "",
            "distance_um": d,
            major: out["crystal"] + rng.normal(0.0, case["sigma"] * case.get("noise_factor", 1.0),
                                               N_SPOTS),
            f"{major}_sigma": case["sigma"],
            "status": "ok",
            "reason": "",
        }
    )
    if case["traces"]:
        spots["NiO"] = out["crystal_nio_wt"] + rng.normal(
            0.0, NIO_SIGMA * case.get("noise_factor", 1.0), N_SPOTS)
    name = f"FRL-SYN-{case['k']:03d}"
    return Traverse(name, f"{name}.csv", mineral, spots)


def run_case(case: dict) -> dict:
    """Fit one case; return timing, coverage flags and diagnostics (never raises)."""
    tr = make_traverse(case)
    mineral = case["mineral"]
    row = {"k": case["k"], "mineral": mineral, "ni": bool(case["traces"]),
           "family": case.get("family", ""), "sigma": case["sigma"],
           "retention_true": case["truth"]["retention"], "crash": ""}
    t0, c0 = time.perf_counter(), time.process_time()
    try:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            result = fit_traverse(tr, melt=MELT[mineral], seed=case["k"], **case.get("fit", {}))
    except Exception as exc:  # counted and printed: a crash is a finding
        row["crash"] = f"{type(exc).__name__}: {exc}"[:200]
        return row
    elapsed, cpu = time.perf_counter() - t0, time.process_time() - c0
    truth = case["truth"]
    model = CrystallizationModel(mineral, MELT[mineral])
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        true_oxide = float(
            model.path(np.array([0.0]), **{RATIO[mineral]: truth[RATIO[mineral]]})[
                OXIDE[mineral]
            ][0]
        )
    values = {
        "ratio": (RATIO[mineral], truth[RATIO[mineral]]),
        "f_rim": ("f_rim", truth["f_rim"]),
        "retention": ("retention", truth["retention"]),
        "kd": ("kd", truth["kd"]),
        "oxide": (OXIDE[mineral], true_oxide),
    }
    for q in PROCESS_QUANTITIES:
        values[q] = (q, truth.get(q, 0.0))
    row.update({"seconds": elapsed, "cpu_seconds": cpu,
                "ess_min": min(v for k, v in result.diagnostics.items()
                               if k.startswith("ess_")),
                "reversal": len(result.reversals) > 0,
                "retention_best": result.estimates["retention"].best,
                "preferred": result.preferred_model,
                "trade_off": any("trade off" in w for w in result.warnings)})
    outside = 0
    for e in result.estimates.values():
        if np.isfinite(e.lo95) and not (e.lo95 <= e.best <= e.hi95):
            outside += 1
    row["best_outside_band"] = outside
    for q, (name, value) in values.items():
        e = result.estimates.get(name)
        if e is None:
            continue
        row[f"in_{q}"] = bool(e.lo95 <= value <= e.hi95)
        row[f"constrained_{q}"] = bool(e.constrained)
        # the numbers behind the flag, for reading the misses in --table
        row[f"true_{q}"], row[f"lo95_{q}"], row[f"hi95_{q}"] = value, e.lo95, e.hi95
    row["n_steps"] = int(result.settings["n_steps"])
    return row


def _map(cases, workers):
    if workers > 1:
        with ProcessPoolExecutor(max_workers=workers) as pool:
            return list(pool.map(run_case, cases, chunksize=1))
    return [run_case(c) for c in cases]


def _crashes(table) -> int:
    if "crash" not in table:  # a part that was skipped (--n-... 0)
        return 0
    crashed = table[table["crash"] != ""]
    for _, r in crashed.iterrows():
        print(f"    crash: traverse {r['k']} ({r['family'] or r['mineral']}): {r['crash']}")
    return len(crashed)


def _family_coverage(table, noise_table, coverage) -> None:
    """Print part 2 (coverage per family) and record it in ``coverage``."""
    crashes = _crashes(table) + _crashes(noise_table)
    ok = table[table["crash"] == ""]
    quantities = QUANTITIES + PROCESS_QUANTITIES
    for family in FAMILIES:
        sub = ok[ok["family"] == family]
        if not len(sub):
            continue
        parts = []
        for q in quantities:
            col = f"in_{q}"
            if col in sub and sub[col].notna().any():
                v = float(sub[col].astype(float).mean())
                coverage[(family, q)] = v
                by_ni = sub.groupby("ni")[col].mean()
                parts.append(f"{q} {v:.2f} (no NiO {by_ni.get(False, np.nan):.2f}, NiO "
                             f"{by_ni.get(True, np.nan):.2f})")
        print(f"  {family:10s} n={len(sub)}: " + "; ".join(parts))
        fam_cov = {q: v for (f, q), v in coverage.items() if f == family}
        if fam_cov and len(sub):
            q_low = min(fam_cov, key=fam_cov.get)
            n_in = int(round(fam_cov[q_low] * len(sub)))
            ci = stats.binomtest(n_in, len(sub)).proportion_ci(0.95)
            print(f"  {'':10s} lowest: {q_low} {n_in} of {len(sub)}, binomial 95% interval "
                  f"[{ci.low:.2f}, {ci.high:.2f}] ("
                  + ("holds" if ci.low <= 0.95 <= ci.high else "excludes")
                  + " 0.95)")
        print(f"  {'':10s} preferred: " + ", ".join(
            f"{k} {v}" for k, v in sub["preferred"].value_counts().items())
              + f"; trade-off stated in {int(sub['trade_off'].sum())}")
    for q in quantities:
        col = f"in_{q}"
        print(f"  {q:20s} coverage over all families {ok[col].astype(float).mean():.3f}; "
              f"constrained in {ok[f'constrained_{q}'].astype(float).mean():.0%}")
    print(f"  reported values outside their own band: {int(ok['best_outside_band'].sum())}; "
          f"crashes: {crashes}")
    n_noise_ok = int((noise_table["crash"] == "").sum()) if len(noise_table) else 0
    false_rev = int(noise_table.get("reversal", pd.Series(dtype=bool)).fillna(False).sum())
    print(f"  reversal with 3x noise: {false_rev} of {n_noise_ok} traverses")


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--n-timing", type=int, default=10)
    parser.add_argument("--n-family", type=int, default=8,
                        help="traverses per scenario family and NiO variant (part 2)")
    parser.add_argument("--n-coverage", type=int, default=24,
                        help="mixed olivine/plagioclase traverses without processes (part 3)")
    parser.add_argument("--n-noise", type=int, default=6,
                        help="traverses with noise 3x the stated sigma (part 2)")
    parser.add_argument("--n-bias", type=int, default=4,
                        help="traverses per unmodelled process (part 4)")
    parser.add_argument("--families", default=",".join(FAMILIES),
                        help="scenario families of part 2, comma-separated (default: all)")
    parser.add_argument("--workers", type=int, default=2)
    parser.add_argument("--seed", type=int, default=2026)
    parser.add_argument("--table", help="also write the per-traverse coverage table (CSV)")
    args = parser.parse_args()

    print(f"part 1: full pipeline on {args.n_timing} olivine traverses, {N_SPOTS} spots + NiO, "
          "default settings (section and diffusion free), one core")
    summary = {}
    for label, fit in (("all processes free", {}), ("growth only", GROWTH_ONLY)):
        times, cpus, ess = [], [], []
        for k in range(args.n_timing):
            case = draw_case(10_000 + k, args.seed, force_olivine_ni=True)
            case["fit"] = fit
            row = run_case(case)
            if row["crash"]:
                print(f"  traverse {k + 1:2d}: crash {row['crash']}")
                continue
            times.append(row["seconds"])
            cpus.append(row["cpu_seconds"])
            ess.append(row["ess_min"])
            print(f"  {label}, traverse {k + 1:2d}: wall {row['seconds']:.2f} s, CPU "
                  f"{row['cpu_seconds']:.2f} s, lowest ESS {row['ess_min']:.0f}")
        summary[label] = float(np.median(times)) if times else float("nan")
        print(f"  {label}: median wall time per traverse {summary[label]:.2f} s (CPU "
              f"{np.median(cpus) if cpus else float('nan'):.2f} s; the two differ when other "
              f"programs share the cores); lowest ESS {min(ess) if ess else float('nan'):.0f}")
    median_s = summary["all processes free"]

    n_fam = args.n_family
    print(f"part 2: coverage per scenario family, {n_fam} olivine traverses per family and "
          f"NiO variant ({args.workers} worker processes)")
    chosen = [f.strip() for f in args.families.split(",") if f.strip()]
    unknown = sorted(set(chosen) - set(FAMILIES))
    if unknown:
        parser.error(f"--families: unknown {', '.join(unknown)}; choose from "
                     + ", ".join(FAMILIES))
    cases = []
    for i, family in enumerate(FAMILIES):
        if family not in chosen:
            continue
        for ni in (False, True):
            for j in range(n_fam):
                cases.append(draw_case(20_000 + 1000 * i + 100 * ni + j, args.seed,
                                       family=family, ni=ni))
    noisy = [draw_case(30_000 + j, args.seed, family="central", ni=bool(j % 2),
                       noise_factor=3.0) for j in range(args.n_noise)]
    t0 = time.perf_counter()
    rows = _map(cases + noisy, args.workers)
    table = pd.DataFrame(rows[:len(cases)])
    noise_table = pd.DataFrame(rows[len(cases):])
    print(f"  done in {time.perf_counter() - t0:.0f} s")
    coverage = {}
    if cases:
        _family_coverage(table, noise_table, coverage)

    print(f"part 3: coverage over {args.n_coverage} mixed olivine/plagioclase traverses "
          "without processes, default settings")
    mixed = [draw_case(k, args.seed) for k in range(args.n_coverage)]
    t0 = time.perf_counter()
    mtable = pd.DataFrame(_map(mixed, args.workers)) if mixed else pd.DataFrame()
    if len(mtable):
        print(f"  done in {time.perf_counter() - t0:.0f} s; crashes {_crashes(mtable)}")
        mok = mtable[mtable["crash"] == ""]
        for q in QUANTITIES:
            v = float(mok[f"in_{q}"].mean())
            coverage[("mixed", q)] = v
            by = mok.groupby("mineral")[f"in_{q}"].mean()
            print(f"  {q:10s} coverage {v:.3f}  (" + ", ".join(
                f"{m} {x:.3f}" for m, x in by.items()) + f"); constrained in "
                  f"{mok[f'constrained_{q}'].mean():.0%} of cases")
        print(f"  false reversals reported: {int(mok['reversal'].sum())}; values outside "
              f"their band: {int(mok['best_outside_band'].sum())}")

    print(f"part 4: unmodelled processes, {args.n_bias} olivine traverses each (no NiO)")
    bias_cases = []
    for label, extra in (("cut at h/R = 0.5", {"section_h_over_r": 0.5}),
                         ("diffused L = 50 µm, r = 0", {"diffusion_length_um": 50.0,
                                                        "retention": 0.0})):
        for fit_label, fit in (("growth only", GROWTH_ONLY), ("defaults", {})):
            for j in range(args.n_bias):
                c = draw_case(40_000 + j, args.seed, family="central", ni=False)
                c["truth"].update(extra)
                if "retention" not in extra:
                    c["truth"]["retention"] = 0.5
                c["fit"] = fit
                c["label"] = (label, fit_label)
                bias_cases.append(c)
    brows = _map(bias_cases, args.workers)
    for (label, fit_label) in dict.fromkeys(c["label"] for c in bias_cases):
        idx = [i for i, c in enumerate(bias_cases) if c["label"] == (label, fit_label)]
        sub = pd.DataFrame([brows[i] for i in idx])
        sub = sub[sub["crash"] == ""]
        true_r = np.array([bias_cases[i]["truth"]["retention"] for i in idx])[: len(sub)]
        shift = sub["retention_best"].to_numpy(float) - true_r
        print(f"  {label}, fitted {fit_label}: r - true r = {np.mean(shift):+.2f} (mean; "
              f"range {np.min(shift):+.2f} to {np.max(shift):+.2f}); r band holds the truth "
              f"in {int(sub['in_retention'].sum())} of {len(sub)}; preferred: "
              + ", ".join(sorted(set(sub["preferred"]))))

    if args.table:
        pd.concat([table, noise_table, mtable], ignore_index=True).to_csv(args.table,
                                                                         index=False)
    lowest = min(coverage.values()) if coverage else float("nan")
    print(f"fit: median_fit_s={median_s:.2f} coverage95={lowest:.3f}")


if __name__ == "__main__":
    main()
