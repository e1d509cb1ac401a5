"""Speed and accuracy of the forward crystallization model.

Run: ``python benchmarks/forward.py [--batches N] [--seed S]``

Measures, on the same batches of 64 parameter sets (olivine Fe-Mg exchange
with Ni after Hart & Davis 1978, retention r drawn uniformly in 0-1), the
time to evaluate 60-spot core-to-rim profiles with

* ours: ``CrystallizationModel.profile`` (semi-analytic kernel);
* (a) the constant-partition-coefficient closed form through the same
  interface (``ConstantPartitionModel.profile``);
* (b) a straightforward ``scipy.integrate.solve_ivp`` integration, per
  parameter set, of the same mass balance (state t, y and the exchanging Ni
  total as functions of F; RK45, rtol 1e-9, atol 1e-13, the tolerance at
  which its error is of the same order as ours; both errors are printed).

The speed-up is the median over the solve_ivp batches of (b)'s time divided
by ours on the same batch, the two timed in turn: the batch's solve_ivp runs
go in 8 blocks of consecutive parameter sets, and before each block our whole
batch runs three times (median kept); (b) is the sum of its blocks and ours
the median over the blocks, so that both are timed warm and across the same
stretch of time (robust to load on the machine). It also
prints the integration error of ours (and of b) against a fine
reference (DOP853, rtol 1e-12) in mol% Fo and relative Ni. Times are CPU times
(``time.process_time``), so that other load on the machine affects them less.
Diffusion after growth (``diffusion_length_um`` > 0, Fe-Mg with the
Dohmen & Chakraborty 2007 composition dependence and Ni at its ratio, one
batched implicit solve per time step) is timed on the same batches with L
drawn uniformly in 1-60 µm, with and without an off-centre section (h/R
uniform in 0-0.9), and its error printed against a fine method-of-lines
reference (Radau, 1601 cells) for a steep fractional rim at L = 2, 10, 25
and 70 µm. The last line reads
``forward: speedup_vs_solve_ivp=<b time / ours> closed_form_ratio=<ours / a time>``.
"""

from __future__ import annotations

import argparse
import time
import warnings

import numpy as np
from scipy.integrate import solve_ivp
from scipy.sparse import diags

from zoning import CalibrationRangeWarning, ConstantPartitionModel, CrystallizationModel
from zoning.geometry import fraction_from_distance
from zoning.partitioning import OXIDE_MOLAR_MASS

MELT = {"SiO2": 49.0, "MgO": 10.0, "FeO": 10.0, "CaO": 11.0, "Na2O": 2.3}
N_SPOTS = 60
BATCH = 64
#: Blocks of parameter sets per solve_ivp batch, each preceded by our batch.
BLOCKS = 8
RADIUS_UM = 150.0


def draw_batch(rng):
    return {
        "melt_mg_number": rng.uniform(0.55, 0.72, BATCH),
        "f_rim": rng.uniform(0.04, 0.18, BATCH),
        "retention": rng.uniform(0.0, 1.0, BATCH),
        "kd": rng.uniform(0.27, 0.34, BATCH),
        "melt0_ni_ppm": rng.uniform(150.0, 450.0, BATCH),
    }


def ivp_profile(model, f, params, rtol, atol, method="RK45"):
    """Reference: integrate the mole/mass balance in F for one parameter set."""
    law = model.law
    y0 = params["melt_mg_number"]
    k = params["kd"]
    r = params["retention"]
    _, _, s0 = model.initial_state(y0)
    s, ma, mb = law.sites, law.molar_mass_a, law.molar_mass_b
    c = s0 / (100.0 * s)
    m_mgo = OXIDE_MOLAR_MASS["MgO"]

    def rhs(fr, z):
        t, y, total_ni = z
        den = y + k * (1 - y)
        x = y / den
        fp = k / den**2
        dydt = (y - x) / ((1 - t) + r * t * fp)
        dfdt = c * (mb + (ma - mb) * (y - (1 - t) * dydt))
        dtdf = 1.0 / dfdt
        dydf = dydt * dtdf
        mf = mb + (ma - mb) * x
        dxdf = fp * dydf
        dmret = r * (s0 / s) * (dtdf * mf + t * (ma - mb) * dxdf)
        dmiso = 100.0 - dmret
        mgo = 100.0 * y * s0 * (1 - t) * m_mgo / (100.0 * (1 - fr))
        d = 124.0 / mgo - 0.9
        w = 100.0 * (1 - fr) + d * r * (s0 / s) * t * mf
        cl = total_ni / w
        return [dtdf, dydf, -d * cl * dmiso]

    order = np.argsort(f)
    fs = f[order]
    sol = solve_ivp(rhs, [0.0, fs[-1]], [0.0, y0, params["melt0_ni_ppm"] * 100.0],
                    t_eval=fs, rtol=rtol, atol=atol, method=method)
    t, y, total = sol.y
    x = y / (y + k * (1 - y))
    mf = mb + (ma - mb) * x
    mgo = y * s0 * (1 - t) * m_mgo / (1 - fs)
    d = 124.0 / mgo - 0.9
    w = 100.0 * (1 - fs) + d * r * (s0 / s) * t * mf
    fo = np.empty_like(fs)
    ni = np.empty_like(fs)
    fo[order] = 100 * x
    ni[order] = total / w
    return fo, ni


def mol_reference(initial, tau, dimension, slope, n_cells=1601):
    """Method of lines (Radau, cell-centred, uniform) with D = exp(slope (c - c_rim)), fixed rim."""
    edges = np.linspace(0, 1, n_cells + 1)
    centres = 0.5 * (edges[1:] + edges[:-1])
    vol = (edges[1:] ** dimension - edges[:-1] ** dimension) / dimension
    area = edges[1:-1] ** (dimension - 1)
    h = 1.0 / n_cells
    rim = float(initial(np.array([1.0]))[0])

    def rhs(_t, c):
        d_face = np.exp(slope * (0.5 * (c[1:] + c[:-1]) - rim))
        flux = np.zeros(n_cells + 1)
        flux[1:-1] = -area * d_face * (c[1:] - c[:-1]) / h
        flux[-1] = -np.exp(slope * 0.5 * (c[-1] - rim)) * (rim - c[-1]) / (h / 2)
        return -(flux[1:] - flux[:-1]) / vol

    jac = diags([np.ones(n_cells - 1), np.ones(n_cells), np.ones(n_cells - 1)], [-1, 0, 1])
    sol = solve_ivp(rhs, [0, tau], initial(centres), method="Radau", rtol=1e-9, atol=1e-12,
                    jac_sparsity=jac)
    return np.r_[centres, 1.0], np.r_[sol.y[:, -1], rim]


def diffusion_benchmark(model, x, batches, rng):
    """Time of growth-only vs diffused profiles [ms/batch] and error vs a fine reference."""
    lengths = [rng.uniform(1.0, 60.0, BATCH) for _ in batches]
    sections = [rng.uniform(0.0, 0.9, BATCH) for _ in batches]
    runs = {"growth": [], "diffusion": [], "diffusion+section": []}
    for b, length in zip(batches, lengths, strict=True):
        model.profile(x, RADIUS_UM, diffusion_length_um=length, **b)
    for _ in range(3):
        for b, length, section in zip(batches, lengths, sections, strict=True):
            for name, extra in (("growth", {}), ("diffusion", {"diffusion_length_um": length}),
                                ("diffusion+section", {"diffusion_length_um": length,
                                                       "section_h_over_r": section})):
                t0 = time.process_time()
                model.profile(x, RADIUS_UM, **b, **extra)
                runs[name].append(time.process_time() - t0)
    times = {k: float(np.median(v)) * 1e3 for k, v in runs.items()}
    plain = CrystallizationModel("olivine", MELT)
    params = {"f_rim": 0.15, "retention": 0.0}
    fine = np.linspace(0, RADIUS_UM, 3001)
    grown = plain.profile(fine, RADIUS_UM, **params)["crystal"] / 100

    def initial(r):
        return np.interp(r * RADIUS_UM, fine, grown)

    errors = {}
    for length in (2.0, 10.0, 25.0, 70.0):
        rc, ref = mol_reference(initial, (length / RADIUS_UM) ** 2, 3, -3 * np.log(10))
        out = plain.profile(x, RADIUS_UM, diffusion_length_um=length, **params)["crystal"]
        errors[length] = float(np.max(np.abs(out - 100 * np.interp(x / RADIUS_UM, rc, ref))))
    return times, errors


def main(argv=None):
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--batches", type=int, default=20)
    parser.add_argument("--ivp-batches", type=int, default=5)
    parser.add_argument("--seed", type=int, default=20261202)
    args = parser.parse_args(argv)
    warnings.simplefilter("ignore", CalibrationRangeWarning)

    rng = np.random.default_rng(args.seed)
    model = CrystallizationModel("olivine", MELT, traces=("Ni",))
    closed = ConstantPartitionModel("Ni")
    x = np.linspace(0.0, RADIUS_UM, N_SPOTS)
    batches = [draw_batch(rng) for _ in range(args.batches)]

    def ours(b):
        return model.profile(x, RADIUS_UM, **b)

    def closed_form(b):
        return closed.profile(x, RADIUS_UM, f_rim=b["f_rim"], retention=b["retention"],
                              melt0=b["melt0_ni_ppm"], partition_coefficient=10.0)

    ours(batches[0])
    closed_form(batches[0])
    t_ours, t_closed = [], []
    for _ in range(5):  # interleaved repeats; median is robust to load
        for b in batches:
            t0 = time.process_time()
            ours(b)
            t1 = time.process_time()
            closed_form(b)
            t2 = time.process_time()
            t_ours.append(t1 - t0)
            t_closed.append(t2 - t1)
    t_ours_batch = float(np.median(t_ours))
    t_closed_batch = float(np.median(t_closed))

    t_ivp, ratios = [], []
    err_fo, err_ni, err_fo_ivp = 0.0, 0.0, 0.0
    for b in batches[: args.ivp_batches]:
        f = fraction_from_distance(x[None, :], RADIUS_UM, 0.0, b["f_rim"][:, None], 3.0)
        sets = [{k: v[i] for k, v in b.items()} for i in range(BATCH)]
        # The batch's solve_ivp runs go in BLOCKS blocks of consecutive
        # parameter sets (about 15 ms each); before each block our whole batch
        # runs three times (about 1 ms each, the median kept), so that both
        # sides are timed warm, in turn and across the same stretch of time.
        t_block, t_here, ivp = [], [], []
        for block in np.array_split(np.arange(BATCH), BLOCKS):
            runs = []
            for _ in range(3):
                t0 = time.process_time()
                ours(b)
                runs.append(time.process_time() - t0)
            t_here.append(float(np.median(runs)))
            t0 = time.process_time()
            ivp.extend(ivp_profile(model, f[i], sets[i], 1e-9, 1e-13) for i in block)
            t_block.append(time.process_time() - t0)
        t_ivp.append(float(np.sum(t_block)))
        ratios.append(t_ivp[-1] / float(np.median(t_here)))
        fine = [ivp_profile(model, f[i], sets[i], 1e-12, 1e-14, "DOP853")
                for i in range(BATCH)]
        out = ours(b)
        for i in range(BATCH):
            err_fo = max(err_fo, float(np.max(np.abs(out["crystal"][i] - fine[i][0]))))
            err_ni = max(err_ni, float(np.max(np.abs(out["melt_ni_ppm"][i] / fine[i][1] - 1))))
            err_fo_ivp = max(err_fo_ivp, float(np.max(np.abs(ivp[i][0] - fine[i][0]))))
    t_ivp_batch = float(np.median(t_ivp))

    print(f"batches of {BATCH} parameter sets, {N_SPOTS}-spot olivine profiles with Ni, "
          f"r ~ U(0, 1)")
    print(f"ours (semi-analytic kernel):     {t_ours_batch * 1e3:9.3f} ms/batch  "
          f"{BATCH / t_ours_batch:12.0f} profiles/s")
    print(f"(a) constant-D closed form:      {t_closed_batch * 1e3:9.3f} ms/batch  "
          f"{BATCH / t_closed_batch:12.0f} profiles/s")
    print(f"(b) solve_ivp per parameter set: {t_ivp_batch * 1e3:9.3f} ms/batch  "
          f"{BATCH / t_ivp_batch:12.0f} profiles/s")
    print(f"accuracy vs fine reference (DOP853 rtol 1e-12), {args.ivp_batches} batches: "
          f"ours max |dFo| = {err_fo:.2e} mol%, max rel. Ni error = {err_ni:.2e}; "
          f"(b) max |dFo| = {err_fo_ivp:.2e} mol%")
    print(f"(b) / ours per batch, runs interleaved (robust to machine load): "
          f"{', '.join(f'{v:.1f}' for v in ratios)}")
    times, errors = diffusion_benchmark(model, x, batches, rng)
    print(f"diffusion after growth, same batches, L ~ U(1, 60) µm: growth only "
          f"{times['growth']:.3f} ms/batch, with diffusion {times['diffusion']:.3f} ms/batch "
          f"({times['diffusion'] / times['growth']:.1f}x), diffusion + section h/R ~ U(0, 0.9) "
          f"{times['diffusion+section']:.3f} ms/batch "
          f"({1e3 * times['diffusion'] / BATCH:.0f} µs per diffused profile)")
    print("diffusion accuracy vs fine method of lines (steep fractional rim Fo87->72, "
          "R = 150 µm), max |dFo| [mol%]: "
          + ", ".join(f"L = {k:g} µm {v:.4f}" for k, v in errors.items()))
    print(f"forward: speedup_vs_solve_ivp={float(np.median(ratios)):.1f} "
          f"closed_form_ratio={t_ours_batch / t_closed_batch:.2f}")


if __name__ == "__main__":
    main()
