"""Speed and calibration of ``zoning.fitting.fit_sample`` (a script, not a test).

Parts (each can be skipped):

1. ``--n-timing``: joint fits of invented samples of 20 olivine crystals x 50
   spots (no antecryst), default settings, BLAS pinned to one thread; prints
   the wall time of each (own fits, antecryst screening, sampling) and the
   last line ``joint: median_fit_s=<s> crystals=20``.
2. ``--n-coverage``: calibration set of invented samples (6 crystals from one
   melt with different F_core, one planted antecryst from a melt 0.06 higher
   in Mg#), random truths: fraction of samples whose shared 95% bands contain
   the truth, per quantity; how often the antecryst is named and how often a
   consistent crystal is wrongly set apart; the width of the joint r band
   against the median single-crystal r band (``fit_traverse`` of each host
   crystal, on the first ``--n-single`` samples).
3. ``--n-two-melt``: samples of 3 + 3 crystals from two melts: how often the
   tool says "two melts" instead of one answer.
4. ``--off-centre N``: N samples of 5 crystals from one melt, every crystal
   cut off-centre at an h/R drawn uniformly in [0.3, 0.8]; each fitted growth
   only (h/R = 0, the default) and with ``section_h_over_r="free"``: coverage
   of the shared 95% bands and consistent crystals wrongly set apart
   (antecryst false alarms), for both.
5. ``--diffused N``: N samples of 5 crystals from one melt, every crystal
   relaxed after growth by an L drawn uniformly in [0, 50] µm; each fitted
   growth only (L = 0, the default) and with ``diffusion_length_um="free"``:
   coverage of the shared 95% bands, antecryst false alarms, and how many
   crystals' own L bands hold their L.
6. ``--validate``: one 6-crystal sample's posterior read two more ways: a
   long emcee chain (differential-evolution moves, 20 x the default length,
   started over-dispersed from the joint draws) and importance sampling from
   a Student-t proposal (no Markov chain; prints its effective draws);
   prints the 2.5/50/97.5 percentiles of all three.

Samples are made by ``tests/_joint_synthetic.py`` (invented Ferrolyn numbers).
Usage::

    nice -n 10 python benchmarks/joint.py [--n-timing 3] [--n-coverage 40]
        [--n-single 8] [--n-two-melt 6] [--off-centre 8] [--diffused 8] [--validate]
        [--workers 2]
"""

from __future__ import annotations

import os

for _var in ("OMP_NUM_THREADS", "OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS"):
    os.environ.setdefault(_var, "1")

import argparse  # noqa: E402
import sys  # noqa: E402
import time  # noqa: E402
import warnings  # noqa: E402
from concurrent.futures import ProcessPoolExecutor  # noqa: E402
from pathlib import Path  # noqa: E402

import numpy as np  # noqa: E402
from scipy import stats  # noqa: E402

sys.path.insert(0, str(Path(__file__).resolve().parent.parent / "tests"))
import _joint_synthetic as js  # noqa: E402
from zoning.fitting import fit_sample, fit_traverse  # noqa: E402

SHARED = ("melt_mg_number", "f_rim", "retention", "kd", "melt0_ni_ppm")


def _quiet(fn, *a, **kw):
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        return fn(*a, **kw)


def _truth(rng):
    f_rim = float(rng.uniform(0.10, 0.22))
    return dict(mg_number=float(rng.uniform(0.70, 0.79)), f_rim=f_rim,
                retention=float(rng.uniform(0.0, 1.0)),
                kd=float(np.clip(rng.normal(0.30, 0.03), 0.22, 0.38)),
                ni_ppm=float(rng.uniform(250, 500)), f_core_max=0.6 * f_rim)


def timing_one(seed):
    traverses, _ = js.sample(n_hosts=20, antecryst=False, n_spots=50, seed=seed)
    t0 = time.perf_counter()
    res = _quiet(fit_sample, traverses, melt=js.MELT, seed=seed)
    d = res.diagnostics
    return (time.perf_counter() - t0, d["seconds_own_fits"], d["seconds_screening"],
            d["seconds_sampling"], d["min_ess"], d["max_rhat"], res.verdict)


def coverage_one(args):
    seed, single = args
    rng = np.random.default_rng(1000 + seed)
    t = _truth(rng)
    traverses, truth = js.sample(n_hosts=6, antecryst=True, n_spots=40, seed=seed, **t)
    res = _quiet(fit_sample, traverses, melt=js.MELT, seed=seed)
    inside = {q: bool(res.estimates[q].lo95 <= truth[q] <= res.estimates[q].hi95)
              for q in SHARED}
    named = [c.name for c in res.crystals if c.verdict == "likely antecryst"]
    found = truth["antecrysts"][0] in named
    false = len([n for n in named if n not in truth["antecrysts"]])
    r_joint = res.estimates["retention"].hi95 - res.estimates["retention"].lo95
    r_single = np.nan
    if single:
        widths = []
        for tr in traverses[:6]:
            fr = _quiet(fit_traverse, tr, melt=js.MELT, seed=seed)
            e = fr.estimates["retention"]
            widths.append(e.hi95 - e.lo95)
        r_single = float(np.median(widths))
    return inside, found, false, r_joint, r_single, res.diagnostics["max_rhat"]


def two_melt_one(seed):
    traverses, truth = js.sample(n_hosts=3, antecryst=False, two_melts=True, n_spots=40,
                                 seed=seed)
    res = _quiet(fit_sample, traverses, melt=js.MELT, seed=seed)
    return res.verdict


def _process_one(seed, offset, sample_kw, option, labels):
    """Fit one invented sample growth only and with one process free per crystal.

    Returns, per label, (inside by quantity, crystals set apart, seconds,
    largest R-hat, per-crystal process bands holding the truth), and the true
    Kd's distance from its prior mean in prior sd (``"kd_z"``).
    """
    t = _truth(np.random.default_rng(offset + seed))
    traverses, truth = js.sample(n_hosts=5, antecryst=False, n_spots=40, seed=seed,
                                 **sample_kw, **t)
    out = {"kd_z": (truth["kd"] - 0.30) / 0.03}
    for label, value in zip(labels, (None, "free"), strict=True):
        t0 = time.perf_counter()
        res = _quiet(fit_sample, traverses, melt=js.MELT, seed=seed, **{option: value})
        inside = {q: bool(res.estimates[q].lo95 <= truth[q] <= res.estimates[q].hi95)
                  for q in SHARED}
        false = len([c for c in res.crystals if c.verdict != "consistent"])
        held = [bool(c.estimates[option].lo95 <= truth[option][c.name]
                     <= c.estimates[option].hi95)
                for c in res.crystals if option in c.estimates]
        out[label] = (inside, false, time.perf_counter() - t0, res.diagnostics["max_rhat"],
                      held)
    return out


OFF_CENTRE = (3000, {"section_h_over_r": (0.3, 0.8)}, "section_h_over_r",
              ("growth only", "h/R free"))
DIFFUSED = (4000, {"diffusion_length_um": (0.0, 50.0)}, "diffusion_length_um",
            ("growth only", "L free"))


def off_centre_one(seed):
    return _process_one(seed, *OFF_CENTRE)


def diffused_one(seed):
    return _process_one(seed, *DIFFUSED)


def _print_process(out, labels, what) -> None:
    n = len(out)
    for label in labels:
        cov = "  ".join(f"{q} {np.mean([o[label][0][q] for o in out]):.3f}" for q in SHARED)
        print(f"  {label:11s} coverage95: {cov}")
        held = [h for o in out for h in o[label][4]]
        own = f"; crystals' {what} bands hold the truth: {sum(held)} of {len(held)}" if held else ""
        print(f"  {label:11s} consistent crystals set apart: "
              f"{sum(o[label][1] for o in out)} of {5 * n}; median fit "
              f"{np.median([o[label][2] for o in out]):.1f} s; largest R-hat "
              f"{max(o[label][3] for o in out):.3f}{own}")
        for s_, o in enumerate(out):
            missed = [q for q in SHARED if not o[label][0][q]]
            if missed:
                print(f"    sample {s_}: missed {', '.join(missed)} (true Kd "
                      f"{o['kd_z']:+.1f} prior sd from the prior mean)")


#: Steps of the long emcee chain of ``--validate`` (the first half discarded)
#: and the spread of its start about the joint-sampler draws.
VALIDATE_STEPS = 24000
START_SPREAD = 1.5
#: Draws and proposal spread of the importance-sampling reading of ``--validate``.
IS_DRAWS = 200_000
IS_SPREAD = 1.3


def validate(seed=5):
    import emcee
    from zoning.fitting import joint as J

    traverses, truth = js.sample(n_hosts=6, antecryst=False, n_spots=40, seed=seed)
    res = _quiet(fit_sample, traverses, melt=js.MELT, seed=seed)
    print("validation against a long emcee chain (DE moves), shared quantities:")
    joint_samples = {n: res.samples[:, res.parameter_names.index(n)] for n in SHARED
                     if n in res.parameter_names}
    # the long chain runs on the private joint problem of the fit
    from zoning.fitting.problem import _build_model

    model = _build_model("olivine", js.MELT, None, 0.10, ["Ni"], "sphere", None)
    st = J._Settings(model=model, mineral="olivine", ratio="melt_mg_number", kd0=0.30,
                     kd_sd=0.03, f_rim_mode="shared", retention_mode="shared", extra_local=(),
                     trace_params=(("melt0_ni_ppm", "crystal_nio_wt", "NiO"),), robust=False)
    crystals = []
    for t in traverses:
        u = t.usable()
        n = len(u)
        crystals.append(J._Crystal(
            name=t.name, traverse=t, usable=u, distance_um=u["distance_um"].to_numpy(float),
            radius_um=float(u["distance_um"].max()), y=u["fo"].to_numpy(float),
            sigma=np.full(n, js.FO_SIGMA), sigma_source="",
            traces={"melt0_ni_ppm": ("NiO", "crystal_nio_wt", u["NiO"].to_numpy(float),
                                     np.full(n, js.NIO_SIGMA), np.ones(n, dtype=bool))}))
    jnt = J._Joint(st, crystals)
    anchor = [c.name for c in crystals].index(res.anchor)
    jnt.fixed[jnt.index("f_core_fraction", anchor)] = True
    free = np.flatnonzero(~jnt.fixed)
    v_best = np.zeros(jnt.D)
    med = np.median(res.samples, axis=0)
    for i, name in zip(free, res.parameter_names, strict=True):
        v_best[i] = med[list(res.parameter_names).index(name)]
    w0 = jnt.to_sampler(v_best)[0]

    def log_prob(w):
        full = np.repeat(w0[None, :], w.shape[0], axis=0)
        full[:, free] = w
        lc, ls = jnt.log_parts(full)
        out = lc.sum(axis=1) + ls
        return np.where(np.isfinite(out), out, -np.inf)

    n_walkers = 4 * free.size
    rng = np.random.default_rng(seed)
    # Start over-dispersed: joint-sampler draws spread 1.5 times about their
    # mean in sampler coordinates (a start inside a tiny ball leaves the
    # differential-evolution ensemble narrow for a long time), each walker
    # kept only where the posterior is finite.
    v_all = np.repeat(v_best[None, :], res.samples.shape[0], axis=0)
    for i, name in zip(free, res.parameter_names, strict=True):
        v_all[:, i] = res.samples[:, list(res.parameter_names).index(name)]
    w_all = jnt.to_sampler(v_all)[:, free]  # every joint draw, sampler coordinates
    w_draws = w_all[rng.choice(w_all.shape[0], size=4 * n_walkers, replace=False)]
    w_mean = w_draws.mean(axis=0)
    w_start = w_mean + START_SPREAD * (w_draws - w_mean)
    start = w_start[np.isfinite(log_prob(w_start))][:n_walkers]
    if start.shape[0] < n_walkers:
        raise RuntimeError(f"only {start.shape[0]} finite over-dispersed starts of {n_walkers}")
    sampler = emcee.EnsembleSampler(n_walkers, free.size, log_prob, vectorize=True,
                                    moves=[(emcee.moves.DEMove(), 0.8),
                                           (emcee.moves.DESnookerMove(), 0.2)])
    n_steps = VALIDATE_STEPS
    t0 = time.perf_counter()
    sampler.run_mcmc(start, n_steps, skip_initial_state_check=True)
    chain = sampler.get_chain(discard=n_steps // 2)
    full = np.repeat(w0[None, :], chain.shape[0] * chain.shape[1], axis=0)
    full[:, free] = chain.reshape(-1, free.size)
    flat = jnt.from_sampler(full)
    tau = emcee.autocorr.integrated_time(chain, c=5, tol=0, quiet=True)
    print(f"  emcee: {n_walkers} walkers x {n_steps} steps in {time.perf_counter() - t0:.0f} s, "
          f"largest tau {np.max(tau):.0f} steps")
    # Third reading, without a Markov chain: importance sampling from a
    # Student-t proposal (5 dof) with the mean and 1.3 times the spread of
    # the joint-sampler draws in sampler coordinates.
    t0 = time.perf_counter()
    prop = stats.multivariate_t(loc=w_all.mean(axis=0),
                                shape=IS_SPREAD**2 * np.cov(w_all, rowvar=False), df=5)
    ws, logw = [], []
    for _ in range(IS_DRAWS // 2000):
        x = prop.rvs(size=2000, random_state=rng)
        ws.append(x)
        logw.append(log_prob(x) - prop.logpdf(x))
    ws, logw = np.concatenate(ws), np.concatenate(logw)
    weight = np.exp(logw - np.max(logw))
    weight /= weight.sum()
    is_ess = 1.0 / np.sum(weight**2)
    full_is = np.repeat(w0[None, :], ws.shape[0], axis=0)
    full_is[:, free] = ws
    flat_is = jnt.from_sampler(full_is)
    print(f"  importance sampling: {ws.shape[0]} draws in {time.perf_counter() - t0:.0f} s, "
          f"effective {is_ess:.0f}")

    def weighted_percentiles(x, w, q):
        order = np.argsort(x)
        c = np.cumsum(w[order])
        return np.interp(np.asarray(q) / 100.0, c - 0.5 * w[order], x[order])

    for name in SHARED:
        if name not in joint_samples:
            continue
        a = np.percentile(joint_samples[name], [2.5, 50, 97.5])
        b = np.percentile(flat[:, jnt.index(name)], [2.5, 50, 97.5])
        c = weighted_percentiles(flat_is[:, jnt.index(name)], weight, [2.5, 50, 97.5])
        print(f"  {name:16s} joint sampler {a[0]:.4g} {a[1]:.4g} {a[2]:.4g} | "
              f"long emcee {b[0]:.4g} {b[1]:.4g} {b[2]:.4g} | importance {c[0]:.4g} "
              f"{c[1]:.4g} {c[2]:.4g} | truth {truth[name]:.4g}")


def main(argv=None) -> int:
    p = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    p.add_argument("--n-timing", type=int, default=3)
    p.add_argument("--n-coverage", type=int, default=40)
    p.add_argument("--n-single", type=int, default=8)
    p.add_argument("--n-two-melt", type=int, default=6)
    p.add_argument("--off-centre", type=int, default=0, metavar="N")
    p.add_argument("--diffused", type=int, default=0, metavar="N")
    p.add_argument("--validate", action="store_true")
    p.add_argument("--workers", type=int, default=2)
    a = p.parse_args(argv)
    if a.n_coverage:
        with ProcessPoolExecutor(a.workers) as pool:
            out = list(pool.map(coverage_one, [(s, s < a.n_single)
                                               for s in range(a.n_coverage)]))
        n = len(out)
        print(f"calibration: {n} samples of 6 crystals + 1 antecryst (+0.06 Mg#)")
        for q in SHARED:
            print(f"  coverage95 {q:16s} {np.mean([o[0][q] for o in out]):.3f}")
        print(f"  antecryst named in {np.mean([o[1] for o in out]):.3f} of samples; "
              f"consistent crystals set apart: {sum(o[2] for o in out)} of {6 * n}")
        rj = np.array([o[3] for o in out if np.isfinite(o[4])])
        rs = np.array([o[4] for o in out if np.isfinite(o[4])])
        if rj.size:
            print(f"  retention band width: joint/median single = {np.median(rj / rs):.3f} "
                  f"(median over {rj.size} samples; 1/sqrt(6) = {1 / np.sqrt(6):.3f} if "
                  "every crystal carried the same information on r)")
        print(f"  largest R-hat {max(o[5] for o in out):.3f}")
    if a.n_two_melt:
        with ProcessPoolExecutor(a.workers) as pool:
            verdicts = list(pool.map(two_melt_one, range(500, 500 + a.n_two_melt)))
        print(f"two melts (3 + 3): verdicts {verdicts}")
    parts = ((a.off_centre, off_centre_one, OFF_CENTRE, "h/R",
              "cut at h/R 0.3-0.8 (uniform)"),
             (a.diffused, diffused_one, DIFFUSED, "L", "relaxed by L 0-50 µm (uniform)"))
    for n_samples, one, spec, what, how in parts:
        if not n_samples:
            continue
        with ProcessPoolExecutor(a.workers) as pool:
            out = list(pool.map(one, range(n_samples)))
        kind = "off-centre" if spec is OFF_CENTRE else "diffused"
        print(f"{kind}: {len(out)} samples of 5 crystals {how}, one melt")
        _print_process(out, spec[3], what)
    if a.validate:
        validate()
    if a.n_timing:
        times = []
        for s in range(a.n_timing):
            tot, own, scr, smp, ess, rhat, verdict = timing_one(s)
            times.append(tot)
            print(f"  20 crystals x 50 spots: {tot:.1f} s (own fits {own:.1f}, screening "
                  f"{scr:.1f}, sampling {smp:.1f}); lowest ESS {ess:.0f}, R-hat {rhat:.3f}; "
                  f"{verdict}")
        print(f"joint: median_fit_s={np.median(times):.1f} crystals=20")
    return 0


if __name__ == "__main__":
    sys.exit(main())
