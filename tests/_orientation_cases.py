"""Synthetic traverses for the orientation tests.

Every profile is made with the package's own forward model
(:class:`zoning.models.CrystallizationModel`): Fo or An and the traces it
models (NiO, Ca in olivine with a constant D; Sr, Mg, K in plagioclase), then
turned into oxide wt% of microprobe spots with analytical noise, and read
through :func:`zoning.io.traverses.build_traverse` like a real export. The
numbers (melts, crystallized fractions, noise levels, glass composition) are
invented but typical; the names are invented (fictional Ferrolyn field).

Case kinds (``make_case(kind, rng, ...)``):

``normal``     normally zoned crystal, measured core-to-rim or rim-to-core;
``reverse``    reversely zoned olivine: a core grown from an evolved melt,
               overgrown after recharge by a more primitive rim (Fo and NiO
               rise rimward);
``rim-to-rim`` normally zoned crystal crossed from rim to rim, core off-centre;
``flat``       a homogeneous (re-equilibrated) crystal: no zoning;
``step``       two plateaus joined by a sharp step (two-stage growth);
``glass``      normally zoned, the outermost rim spot with glass in the beam
               (``glass_end``), otherwise like ``normal``;
``oscillatory`` plagioclase with oscillatory An zoning on top of a weak
               normal trend: the minor elements are the best hint.
"""

from __future__ import annotations

import warnings
from dataclasses import dataclass

import numpy as np
import pandas as pd
from zoning.io.readers import RawTable
from zoning.io.traverses import build_traverse

from zoning.exceptions import CalibrationRangeWarning
from zoning.models import CrystallizationModel
from zoning.oxides import molar_mass

#: Matrix glass added to a rim spot (basaltic andesite, invented) [wt%].
GLASS = {"SiO2": 54.0, "TiO2": 1.4, "Al2O3": 15.5, "FeO": 9.0, "MnO": 0.17, "MgO": 4.5,
         "CaO": 8.2, "Na2O": 3.3, "K2O": 1.1, "P2O5": 0.3, "NiO": 0.0, "SrO": 0.05,
         "Cr2O3": 0.0}

#: Olivine Fe/Mn by weight of FeO/MnO (about 70 in basaltic olivine; common practice).
FE_MN_RATIO = 70.0

KINDS = ("normal", "reverse", "rim-to-rim", "flat", "step", "glass", "oscillatory")


@dataclass(frozen=True)
class Case:
    """A synthetic traverse and the truth about it."""

    kind: str
    mineral: str
    truth: str            # orientation as measured; "" when unknowable (flat)
    core_position_um: float
    traverse: object      # zoning.Traverse


def _olivine_profile(r, radius, rng, *, mg, f_rim, retention, ni=350.0):
    model = CrystallizationModel("olivine", {"FeO": 9.8}, traces=("Ni",),
                                 trace_d={"Ca": 0.025})
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", CalibrationRangeWarning)
        out = model.profile(r, radius, melt_mg_number=mg, f_rim=f_rim, retention=retention,
                            melt0_ni_ppm=ni, melt0_ca_ppm=72000.0)
    cao = out["crystal_ca_ppm"] * 1e-4 * molar_mass("CaO") / 40.078
    return out["crystal"], out["crystal_nio_wt"], cao


def _plag_profile(r, radius, *, ca, f_rim, retention):
    model = CrystallizationModel("plagioclase", {"Na2O": 3.2}, traces=("Sr", "Mg"),
                                 trace_d={"K": 0.15}, temperature_c=1150.0)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", CalibrationRangeWarning)
        out = model.profile(r, radius, melt_ca_number=ca, f_rim=f_rim, retention=retention,
                            melt0_sr_ppm=420.0, melt0_mgo_wt=4.0, melt0_k_ppm=5000.0)
    k2o = out["crystal_k_ppm"] * 1e-4 * molar_mass("K2O") / (2 * 39.0983)
    return out["crystal"], out["crystal_sro_wt"], out["crystal_mgo_wt"], k2o


def olivine_oxides(fo, nio, cao, rng) -> pd.DataFrame:
    """Oxide wt% of olivine spots from Fo [mol%], NiO and CaO [wt%], with noise."""
    x = np.asarray(fo) / 100.0
    n = x.size
    wt = pd.DataFrame({
        "SiO2": molar_mass("SiO2") + 0 * x,
        "TiO2": rng.uniform(0.0, 0.02, n),
        "Al2O3": rng.uniform(0.02, 0.05, n),
        "Cr2O3": rng.uniform(0.0, 0.04, n),
        "FeO": 2 * (1 - x) * molar_mass("FeO"),
        "MgO": 2 * x * molar_mass("MgO"),
        "CaO": cao,
        "NiO": nio,
    })
    major = wt["SiO2"] + wt["FeO"] + wt["MgO"]
    fixed = wt[["TiO2", "Al2O3", "Cr2O3", "CaO", "NiO"]].sum(axis=1)
    wt["MnO"] = wt["FeO"] / major * (100.0 - fixed) / FE_MN_RATIO
    for ox in ("SiO2", "FeO", "MgO"):
        wt[ox] = wt[ox] / major * (100.0 - fixed - wt["MnO"])
    wt = wt.mul(rng.normal(99.9, 0.3, n) / 100.0, axis=0)
    for ox, rel in (("SiO2", 0.004), ("FeO", 0.006), ("MgO", 0.005), ("MnO", 0.05),
                    ("NiO", 0.05), ("CaO", 0.05)):
        wt[ox] = wt[ox] * (1.0 + rng.normal(0.0, rel, n))
    return wt


def plagioclase_oxides(an, sro, mgo, k2o, rng) -> pd.DataFrame:
    """Oxide wt% of plagioclase spots from An [mol%], SrO, MgO, K2O [wt%], with noise."""
    an = np.asarray(an)
    n = an.size
    orth = np.asarray(k2o) * 2 / molar_mass("K2O") * 278.33 / 100.0  # Or fraction, approx.
    ca = an / 100.0 * (1.0 - orth)
    na = (1.0 - an / 100.0) * (1.0 - orth)
    wt = pd.DataFrame({
        "SiO2": (3.0 - ca) * molar_mass("SiO2"),
        "Al2O3": (1.0 + ca) / 2.0 * molar_mass("Al2O3"),
        "FeO": rng.normal(0.45, 0.03, n),
        "MgO": mgo,
        "CaO": ca * molar_mass("CaO"),
        "Na2O": na / 2.0 * molar_mass("Na2O"),
        "K2O": orth / 2.0 * molar_mass("K2O"),
        "SrO": sro,
    })
    major = wt[["SiO2", "Al2O3", "CaO", "Na2O", "K2O"]].sum(axis=1)
    fixed = wt[["FeO", "MgO", "SrO"]].sum(axis=1)
    for ox in ("SiO2", "Al2O3", "CaO", "Na2O", "K2O"):
        wt[ox] = wt[ox] / major * (100.0 - fixed)
    wt = wt.mul(rng.normal(99.8, 0.3, n) / 100.0, axis=0)
    for ox, rel in (("SiO2", 0.004), ("Al2O3", 0.005), ("CaO", 0.006), ("Na2O", 0.012),
                    ("K2O", 0.04), ("SrO", 0.06), ("MgO", 0.05)):
        wt[ox] = wt[ox] * (1.0 + rng.normal(0.0, rel, n))
    return wt


def _add_glass(wt: pd.DataFrame, i: int, share: float) -> None:
    for ox in wt.columns:
        wt.loc[i, ox] = (1 - share) * wt.loc[i, ox] + share * GLASS.get(ox, 0.0)
    for ox in ("Na2O", "K2O", "P2O5"):
        if ox not in wt.columns:
            wt[ox] = np.nan
            wt.loc[i, ox] = share * GLASS[ox]


def make_case(kind: str, rng: np.random.Generator, *, mineral: str | None = None,
              measured: str | None = None, n: int | None = None, name: str = "FRL-S1",
              labels=None, glass_end: bool = False) -> Case:
    """Build one synthetic traverse (see the module docstring for ``kind``)."""
    if mineral is None:
        mineral = "plagioclase" if kind == "oscillatory" else "olivine"
    if measured is None:
        measured = "rim-to-rim" if kind == "rim-to-rim" else str(
            rng.choice(["core-to-rim", "rim-to-core"]))
    n = int(rng.integers(18, 61)) if n is None else n
    radius = float(rng.uniform(150.0, 500.0))
    if kind == "rim-to-rim":
        # both ends are rims; the core may be off-centre (uneven growth)
        core_at = float(rng.uniform(0.35, 0.65)) * 2 * radius
        pos = np.linspace(0.0, 2 * radius, n)
        side = np.where(pos < core_at, core_at, 2 * radius - core_at)
        r = np.abs(pos - core_at) / side * radius
        half = radius + 5.0
    else:
        pos = np.linspace(0.0, radius, n)
        r = pos.copy()
        half = radius + 5.0
        core_at = 0.0
    if mineral == "olivine":
        mg = float(rng.uniform(0.64, 0.78))
        f_rim = float(rng.uniform(0.08, 0.30))
        retention = float(rng.uniform(0.0, 0.6))
        fo, nio, cao = _olivine_profile(r, half, rng, mg=mg, f_rim=f_rim, retention=retention)
        if kind == "flat":  # homogeneous (re-equilibrated) crystal
            fo, nio, cao = (np.full(n, a[0]) for a in (fo, nio, cao))
        if kind == "reverse":
            # core from an evolved melt; after recharge the rim grows from a primitive one
            at = float(rng.uniform(0.5, 0.75)) * radius
            core_fo, core_ni, core_ca = _olivine_profile(r, half, rng, mg=mg - 0.08,
                                                         f_rim=0.04, retention=0.5, ni=180.0)
            width = float(rng.uniform(0.02, 0.08)) * radius  # relaxed by diffusion
            w = 0.5 * (1 + np.tanh((r - at) / width))
            fo = (1 - w) * core_fo + w * fo[0]
            nio = (1 - w) * core_ni + w * nio[0]
            cao = (1 - w) * core_ca + w * cao[0]
        elif kind == "step":
            at = float(rng.uniform(0.35, 0.65)) * radius
            w = 0.5 * (1 + np.tanh((r - at) / (0.01 * radius)))
            fo = (1 - w) * fo[0] + w * (fo[0] - float(rng.uniform(2.0, 6.0)))
            nio = (1 - w) * nio[0] + w * nio[0] * 0.7
            cao = (1 - w) * cao[0] + w * cao[0] * 1.15
        fo = fo + rng.normal(0.0, 0.12, n)
        wt = olivine_oxides(fo, nio, cao, rng)
    else:
        ca = float(rng.uniform(0.5, 0.7))
        f_rim = float(rng.uniform(0.15, 0.4))
        retention = float(rng.uniform(0.0, 0.5))
        an, sro, mgo, k2o = _plag_profile(r, half, ca=ca, f_rim=f_rim, retention=retention)
        if kind == "flat":  # homogeneous crystal
            an, sro, mgo, k2o = (np.full(n, a[0]) for a in (an, sro, mgo, k2o))
        if kind == "oscillatory":
            an = an[0] - 0.35 * (an[0] - an) + 1.5 * np.sin(2 * np.pi * r / (radius / 3.3)
                                                             + rng.uniform(0, 2 * np.pi))
        elif kind == "step":
            at = float(rng.uniform(0.35, 0.65)) * radius
            w = 0.5 * (1 + np.tanh((r - at) / (0.01 * radius)))
            an = (1 - w) * an[0] + w * (an[0] - float(rng.uniform(4.0, 10.0)))
            k2o = (1 - w) * k2o[0] + w * k2o[0] * 1.3
        an = an + rng.normal(0.0, 0.4, n)
        wt = plagioclase_oxides(an, sro, mgo, k2o, rng)
    wt = wt.reset_index(drop=True)
    if kind == "glass" or glass_end:
        _add_glass(wt, n - 1, float(rng.uniform(0.04, 0.15)))  # the rim spot (core-to-rim order)
    if measured == "rim-to-core":
        wt = wt.iloc[::-1].reset_index(drop=True)
        core_pos = float(pos[-1])
    else:
        core_pos = core_at
    data = pd.DataFrame({"row": np.arange(2, n + 2), "point": [str(i + 1) for i in range(n)],
                         "label": list(labels) if labels is not None else [""] * n,
                         "distance_um": pos})
    data = pd.concat([data, wt.round(4)], axis=1)
    data["read_flags"] = ""
    raw = RawTable(name=name, source=f"{name}.csv", data=data,
                   column_map={"distance_um": "Distance (um)"}, notes=())
    traverse = build_traverse(raw, mineral=mineral)
    truth = "" if kind == "flat" and not (kind == "glass" or glass_end) else measured
    return Case(kind, mineral, truth, core_pos, traverse)
