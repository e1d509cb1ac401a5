"""Invented multi-crystal samples for the joint fit (tests and benchmarks/joint.py).

Every crystal is made by the package's forward model
(:class:`zoning.models.CrystallizationModel`) with Gaussian analytical noise.
The "host" crystals of a sample grew from one melt along one path: they share
the parent melt Mg#, Kd, retention r and F at the rim, and differ in the F at
which their cores nucleated (the earliest at F = 0, the convention of
:func:`zoning.fitting.joint.fit_sample`) and in their radius. A planted
antecryst grew from a melt ``antecryst_dmg`` higher in Mg# and stopped at its
own F. A "two-melt" sample holds two groups of crystals from two melts. The
numbers are invented (the demo's fictional Ferrolyn field).
"""

from __future__ import annotations

import warnings

import numpy as np
import pandas as pd

from zoning.models import CrystallizationModel
from zoning.traverse import Traverse

MELT = {"FeO": 9.5}
FO_SIGMA = 0.2
NIO_SIGMA = 0.015


def crystal(name, truth, *, n_spots, radius_um, rng, sigma=FO_SIGMA) -> Traverse:
    """One invented olivine traverse, core to rim, from the forward model."""
    model = CrystallizationModel("olivine", MELT, traces=("Ni",))
    d = np.linspace(0.0, radius_um, n_spots)
    with warnings.catch_warnings():
        # primitive antecryst melts lie above the calibrated MgO of the Ni law
        warnings.simplefilter("ignore")
        out = model.profile(d, radius_um, **truth)
    spots = pd.DataFrame({
        "row": np.arange(2, n_spots + 2),
        "point": [str(i + 1) for i in range(n_spots)],
        "label": "",
        "distance_um": d,
        "fo": out["crystal"] + rng.normal(0.0, sigma, n_spots),
        "NiO": out["crystal_nio_wt"] + rng.normal(0.0, NIO_SIGMA, n_spots),
        "status": "ok",
        "reason": "",
    })
    return Traverse(name, f"{name}.csv", "olivine", spots)


def sample(*, n_hosts=6, antecryst=True, two_melts=False, n_spots=50, seed=0,
           mg_number=0.76, f_rim=0.16, retention=0.3, kd=0.30, ni_ppm=400.0,
           antecryst_dmg=0.06, f_core_max=0.10, name="FRL-21", section_h_over_r=None,
           diffusion_length_um=None):
    """Return (traverses, truth) of one invented sample.

    ``section_h_over_r`` = (lo, hi) cuts every host crystal off-centre at an
    h/R drawn uniformly in [lo, hi] (from its own random stream, so the other
    draws are those of a centred sample); ``truth["section_h_over_r"]`` holds
    them by crystal name (0 for crystals cut through the centre).
    ``diffusion_length_um`` = (lo, hi) relaxes every host crystal after
    growth by an L [µm] drawn uniformly in [lo, hi] (its own stream too);
    ``truth["diffusion_length_um"]`` holds them by crystal name.

    ``truth`` holds the shared values (``melt_mg_number``, ``f_rim``,
    ``retention``, ``kd``, ``melt0_ni_ppm``), ``f_core`` by crystal name,
    ``antecrysts`` (names) and, for two-melt samples, ``groups``.
    """
    rng = np.random.default_rng(seed)
    shared = dict(melt_mg_number=mg_number, f_rim=f_rim, retention=retention, kd=kd,
                  melt0_ni_ppm=ni_ppm)
    f_cores = np.concatenate([[0.0], np.sort(rng.uniform(0.0, f_core_max, n_hosts - 1))])
    rng.shuffle(f_cores)
    h = np.zeros(n_hosts)
    if section_h_over_r is not None:
        h = np.random.default_rng(seed + 1000).uniform(*section_h_over_r, n_hosts)
    lengths = np.zeros(n_hosts)
    if diffusion_length_um is not None:
        lengths = np.random.default_rng(seed + 2000).uniform(*diffusion_length_um, n_hosts)
    traverses, f_core, cuts, relaxed = [], {}, {}, {}
    for i, fc in enumerate(f_cores):
        nm = f"{name} ol{i + 1}"
        t = dict(shared, f_core=float(fc))
        if h[i] > 0:
            t["section_h_over_r"] = float(h[i])
        if lengths[i] > 0:
            t["diffusion_length_um"] = float(lengths[i])
        cuts[nm] = float(h[i])
        relaxed[nm] = float(lengths[i])
        traverses.append(crystal(nm, t, n_spots=n_spots, radius_um=rng.uniform(200, 450),
                                 rng=rng))
        f_core[nm] = float(fc)
    truth = dict(shared, f_core=f_core, antecrysts=[], groups=[], section_h_over_r=cuts,
                 diffusion_length_um=relaxed)
    if antecryst:
        nm = f"{name} ol{n_hosts + 1}"
        t = dict(shared, melt_mg_number=mg_number + antecryst_dmg, f_rim=0.10, f_core=0.0)
        traverses.append(crystal(nm, t, n_spots=n_spots, radius_um=rng.uniform(200, 450),
                                 rng=rng))
        truth["antecrysts"] = [nm]
    if two_melts:
        group2 = []
        fc2 = np.concatenate([[0.0], rng.uniform(0.0, f_core_max, n_hosts - 1)])
        for fc in fc2:
            nm = f"{name} ol{len(traverses) + 1}"
            t = dict(shared, melt_mg_number=mg_number - 0.08, f_rim=0.20, f_core=float(fc))
            traverses.append(crystal(nm, t, n_spots=n_spots, radius_um=rng.uniform(200, 450),
                                     rng=rng))
            group2.append(nm)
        truth["groups"] = [[t.name for t in traverses if t.name not in group2], group2]
    return traverses, truth
