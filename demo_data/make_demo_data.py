"""Generate the invented demo data of the fictional Ferrolyn volcanic field.

Everything in ``demo_data/ferrolyn/`` except ``README.md`` is written by this
script, deterministically (fixed seeds): the microprobe exports of six
traverses in several export dialects, and ``project.toml``. The zoning
profiles are made with the package's own forward model
(:class:`zoning.models.CrystallizationModel`) from invented "true" settings
listed in ``TRUTH`` below and in README.md; oxide wt% are built from the Fo
or An of each spot with realistic minor elements, analytical noise and
analytical totals scattered around 100 wt%. A few bad spots are planted on
purpose. The Ferrolyn field, its samples and every number here are invented.

Run from anywhere::

    python demo_data/make_demo_data.py [OUTPUT_FOLDER]
"""

from __future__ import annotations

import io
import re
import sys
import zipfile
from pathlib import Path

import numpy as np
import pandas as pd

from zoning.models import CrystallizationModel
from zoning.oxides import molar_mass

OUT = Path(__file__).resolve().parent / "ferrolyn"

#: Invented "true" settings of each traverse (the answers the demo fits should find).
TRUTH = {
    "FRL-07 ol1": dict(mineral="olivine", melt={"FeO": 9.8}, kd=0.30, melt_mg_number=0.76,
                       f_rim=0.16, retention=0.10, radius_um=420.0, melt0_ni_ppm=420.0,
                       n=40, seed=701),
    "FRL-07 ol2": dict(mineral="olivine", melt={"FeO": 9.8}, kd=0.30, melt_mg_number=0.75,
                       f_rim=0.20, retention=0.90, radius_um=300.0, melt0_ni_ppm=380.0,
                       n=30, seed=702),
    "FRL-07 ol3": dict(mineral="olivine", melt={"FeO": 9.8}, kd=0.30, melt_mg_number=0.75,
                       f_rim=0.16, retention=0.40, radius_um=250.0, melt0_ni_ppm=400.0,
                       n=41, seed=703),
    "FRL-03 ol1": dict(mineral="olivine", melt={"FeO": 10.4}, kd=0.30, melt_mg_number=0.70,
                       f_rim=0.12, retention=0.20, radius_um=280.0, melt0_ni_ppm=260.0,
                       n=29, seed=301, recharge_um=170.0, recharge_mg_number=0.74),
    "FRL-12 pl1": dict(mineral="plagioclase", melt={"Na2O": 3.1}, kd=2.0,
                       melt_ca_number=0.62, f_rim=0.35, retention=0.30, radius_um=500.0,
                       melt0_sr_ppm=420.0, melt0_mgo_wt=4.0, n=36, seed=1201),
    "FRL-12 pl2": dict(mineral="plagioclase", melt={"Na2O": 3.1}, kd=2.0,
                       melt_ca_number=0.58, f_rim=0.30, retention=0.0, radius_um=360.0,
                       melt0_sr_ppm=450.0, melt0_mgo_wt=3.8, n=30, seed=1202),
}


#: Invented multi-crystal sample fitted jointly by the demo: six olivines that grew
#: from one melt (cores nucleated at different F, rims together at F = 0.15) and
#: one antecryst carried in from a melt 0.06 higher in Mg#.
FRL21 = dict(melt={"FeO": 9.8}, kd=0.30, melt_mg_number=0.76, f_rim=0.15, retention=0.30,
             melt0_ni_ppm=420.0, f_core=(0.0, 0.02, 0.035, 0.05, 0.07, 0.09),
             radius_um=(320.0, 280.0, 260.0, 240.0, 210.0, 190.0), n=26, seed=2101,
             antecryst=dict(melt_mg_number=0.82, f_rim=0.09, radius_um=300.0))

#: Melt temperature assumed for the plagioclase Sr partitioning law [°C] (invented).
PLAG_TEMPERATURE_C = 1150.0


def _model(t: dict) -> CrystallizationModel:
    if t["mineral"] == "olivine":
        return CrystallizationModel("olivine", t["melt"], kd=t["kd"], traces=("Ni",))
    return CrystallizationModel("plagioclase", t["melt"], kd=t["kd"], traces=("Sr", "Mg"),
                                temperature_c=PLAG_TEMPERATURE_C)


def _profile(t: dict, distance_um: np.ndarray, **override) -> dict:
    ratio = "melt_mg_number" if t["mineral"] == "olivine" else "melt_ca_number"
    trace = "melt0_ni_ppm" if t["mineral"] == "olivine" else "melt0_sr_ppm"
    params = {ratio: t[ratio], "f_rim": t["f_rim"], "retention": t["retention"],
              trace: t[trace]}
    if t["mineral"] == "plagioclase":
        params["melt0_mgo_wt"] = t["melt0_mgo_wt"]
    params.update(override)
    return _model(t).profile(distance_um, t["radius_um"], **params)


def olivine_oxides(fo: np.ndarray, nio: np.ndarray, rng: np.random.Generator) -> pd.DataFrame:
    """Oxide wt% of olivine spots from Fo [mol%] and NiO [wt%], with noise and totals."""
    x = fo / 100.0
    n = len(x)
    feo_mol = 2.0 * (1.0 - x)
    wt = pd.DataFrame({
        "SiO2": 1.0 * molar_mass("SiO2") + 0 * x,
        "TiO2": rng.uniform(0.0, 0.02, n),
        "Al2O3": rng.uniform(0.02, 0.06, n),
        "Cr2O3": rng.uniform(0.0, 0.05, n),
        "FeO": feo_mol * molar_mass("FeO"),
        "MnO": 0.0,
        "MgO": 2.0 * x * molar_mass("MgO"),
        "CaO": rng.normal(0.24, 0.02, n),
        "NiO": nio,
    })
    major = wt["SiO2"] + wt["FeO"] + wt["MgO"]
    fixed = wt[["TiO2", "Al2O3", "Cr2O3", "CaO", "NiO"]].sum(axis=1)
    wt["MnO"] = 0.0145 * wt["FeO"] / major * (100.0 - fixed)  # Fe/Mn of olivine ~ 70
    for ox in ("SiO2", "FeO", "MgO"):
        wt[ox] = wt[ox] / major * (100.0 - fixed - wt["MnO"])
    total = rng.normal(99.9, 0.3, n)
    wt = wt.mul(total / 100.0, axis=0)
    for ox, rel in (("SiO2", 0.004), ("FeO", 0.006), ("MgO", 0.005), ("MnO", 0.05),
                    ("NiO", 0.04)):
        wt[ox] = wt[ox] * (1.0 + rng.normal(0.0, rel, n))
    return wt


def plagioclase_oxides(an: np.ndarray, sro: np.ndarray, mgo: np.ndarray,
                       rng: np.random.Generator) -> pd.DataFrame:
    """Oxide wt% of plagioclase spots from An [mol%], SrO and MgO [wt%], with noise."""
    n = len(an)
    orth = rng.uniform(0.005, 0.015, n)
    ca = an / 100.0 * (1.0 - orth)
    na = (1.0 - an / 100.0) * (1.0 - orth)
    wt = pd.DataFrame({
        "SiO2": (3.0 - ca) * molar_mass("SiO2"),
        "Al2O3": (1.0 + ca) / 2.0 * molar_mass("Al2O3"),
        "FeO": rng.normal(0.45, 0.04, n),
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
    total = rng.normal(99.8, 0.3, n)
    wt = wt.mul(total / 100.0, axis=0)
    for ox, rel in (("SiO2", 0.004), ("Al2O3", 0.005), ("CaO", 0.006), ("Na2O", 0.012),
                    ("K2O", 0.05), ("SrO", 0.06), ("MgO", 0.05)):
        wt[ox] = wt[ox] * (1.0 + rng.normal(0.0, rel, n))
    return wt


def _round(df: pd.DataFrame, decimals: int = 3) -> pd.DataFrame:
    return df.round(decimals)


def make_ol1() -> pd.DataFrame:
    """FRL-07 ol1: comma CSV, distance column in µm, core to rim, three bad spots."""
    t = TRUTH["FRL-07 ol1"]
    rng = np.random.default_rng(t["seed"])
    d = np.round(np.linspace(0.0, t["radius_um"] - 5.0, t["n"]), 1)
    d[20] = d[19]  # planted: spot re-analysed at the same position
    prof = _profile(t, d)
    fo = prof["crystal"] + rng.normal(0.0, 0.12, len(d))
    wt = olivine_oxides(fo, prof["crystal_nio_wt"], rng)
    wt.loc[12] = wt.loc[12] * 0.972  # planted: low analytical total (~97 wt%)
    # planted: spinel/melt inclusion in the excitation volume (total stays near 100)
    extra = 1.85 + 1.10 - wt.loc[27, "Al2O3"] - wt.loc[27, "CaO"]
    wt.loc[27, ["SiO2", "MgO"]] -= extra / 2.0
    wt.loc[27, "Al2O3"] = 1.85
    wt.loc[27, "CaO"] = 1.10
    df = pd.DataFrame({"Point": np.arange(1, len(d) + 1),
                       "Comment": [f"FRL-07 ol1 / {i + 1}" for i in range(len(d))],
                       "Distance (µm)": d})
    df = pd.concat([df, _round(wt)], axis=1)
    df["Total"] = _round(wt).sum(axis=1).round(3)
    df.to_csv(OUT / "FRL-07_ol1.csv", index=False, encoding="utf-8", lineterminator="\n")
    return df


def make_ol2() -> pd.DataFrame:
    """FRL-07 ol2: semicolon + decimal comma, Latin-1, near-equilibrium crystal."""
    t = TRUTH["FRL-07 ol2"]
    rng = np.random.default_rng(t["seed"])
    d = np.round(np.linspace(0.0, t["radius_um"] - 4.0, t["n"]), 1)
    prof = _profile(t, d)
    fo = prof["crystal"] + rng.normal(0.0, 0.12, len(d))
    wt = _round(olivine_oxides(fo, prof["crystal_nio_wt"], rng))
    wt.loc[9] = (wt.loc[9] * 1.025).round(3)  # planted: high total (~102.4 wt%)
    df = pd.DataFrame({"No.": np.arange(1, len(d) + 1), "Comment": "ol2",
                       "Distance (µm)": d})
    df = pd.concat([df, wt], axis=1)
    df["Total"] = wt.sum(axis=1).round(3)
    text = df.to_csv(index=False, sep=";", decimal=",", lineterminator="\n")
    (OUT / "FRL-07_ol2.csv").write_bytes(text.encode("latin-1"))
    return df


def make_ol3() -> pd.DataFrame:
    """FRL-07 ol3: tab-separated with title lines, stage X/Y in mm, rim to rim."""
    t = TRUTH["FRL-07 ol3"]
    rng = np.random.default_rng(t["seed"])
    half = t["radius_um"] - 5.0
    s = np.linspace(-half, half, t["n"])  # signed position along the line [µm]
    d = np.abs(s)
    prof = _profile(t, d)
    fo = prof["crystal"] + rng.normal(0.0, 0.12, len(d))
    wt = _round(olivine_oxides(fo, prof["crystal_nio_wt"], rng))
    angle = np.deg2rad(32.0)
    x0, y0 = 23.4512, 11.0871  # stage position of the core [mm]
    off = rng.normal(0.0, 0.8, len(s))  # off-line scatter [µm]
    x = x0 + (s * np.cos(angle) - off * np.sin(angle)) / 1000.0
    y = y0 + (s * np.sin(angle) + off * np.cos(angle)) / 1000.0
    df = pd.DataFrame({"Point": [f"ol3-{i + 1:02d}" for i in range(len(s))],
                       "X (mm)": np.round(x, 4), "Y (mm)": np.round(y, 4)})
    df = pd.concat([df, wt], axis=1)
    df["Total"] = wt.sum(axis=1).round(3)
    title = ("Ferrolyn field, microprobe session 14 (invented demo data)\n"
             "Sample FRL-07, olivine 3, rim-to-rim traverse, 15 kV 20 nA 2 um beam\n\n")
    body = df.to_csv(index=False, sep="\t", lineterminator="\n")
    (OUT / "FRL-07_ol3.txt").write_text(title + body, encoding="utf-8")
    return df


def make_frl03() -> pd.DataFrame:
    """FRL-03 ol1: reverse-zoned crystal (recharge: a more primitive melt arrives)."""
    t = TRUTH["FRL-03 ol1"]
    rng = np.random.default_rng(t["seed"])
    d = np.round(np.linspace(0.0, t["radius_um"] - 4.0, t["n"]), 1)
    prof = _profile(t, d)
    fo = prof["crystal"].copy()
    nio = prof["crystal_nio_wt"].copy()
    outer = d >= t["recharge_um"]
    # After recharge the crystal grows from a new, more primitive melt.
    d_out = d[outer] - t["recharge_um"]
    p2 = _profile(t, d_out, melt_mg_number=t["recharge_mg_number"], f_rim=0.08)
    fo[outer] = p2["crystal"]
    nio[outer] = p2["crystal_nio_wt"]
    fo = fo + rng.normal(0.0, 0.12, len(d))
    wt = _round(olivine_oxides(fo, nio, rng))
    df = pd.DataFrame({"Point": np.arange(1, len(d) + 1), "Label": "FRL-03 ol1",
                       "Distance from core (um)": d})
    df = pd.concat([df, wt], axis=1)
    df["Total"] = wt.sum(axis=1).round(3)
    df.to_csv(OUT / "FRL-03_ol1.csv", index=False, lineterminator="\n")
    return df


def make_pl1() -> pd.DataFrame:
    """FRL-12 pl1: Excel export, distance in µm, normal zoning with SrO."""
    t = TRUTH["FRL-12 pl1"]
    rng = np.random.default_rng(t["seed"])
    d = np.round(np.linspace(0.0, t["radius_um"] - 6.0, t["n"]), 1)
    prof = _profile(t, d)
    an = prof["crystal"] + rng.normal(0.0, 0.3, len(d))
    wt = _round(plagioclase_oxides(an, prof["crystal_sro_wt"], prof["crystal_mgo_wt"], rng))
    df = pd.DataFrame({"Point": np.arange(1, len(d) + 1), "Comment": "FRL-12 pl1",
                       "Distance (um)": d})
    df = pd.concat([df, wt], axis=1)
    df["Total"] = wt.sum(axis=1).round(3)
    path = OUT / "FRL-12_pl1.xlsx"
    df.to_excel(path, index=False, sheet_name="FRL-12 pl1")
    _make_xlsx_deterministic(path)
    return df


def _make_xlsx_deterministic(path: Path) -> None:
    """Fix the time stamps inside an .xlsx so that reruns give identical bytes."""
    fixed = "2026-03-14T09:00:00Z"
    with zipfile.ZipFile(path) as zin:
        items = [(info, zin.read(info.filename)) for info in zin.infolist()]
    buf = io.BytesIO()
    with zipfile.ZipFile(buf, "w", zipfile.ZIP_DEFLATED) as zout:
        for info, data in items:
            if info.filename == "docProps/core.xml":
                data = re.sub(rb"(<dcterms:(created|modified)[^>]*>)[^<]*",
                              rb"\g<1>" + fixed.encode(), data)
            zi = zipfile.ZipInfo(info.filename, date_time=(2026, 3, 14, 9, 0, 0))
            zi.compress_type = zipfile.ZIP_DEFLATED
            zi.external_attr = info.external_attr
            zout.writestr(zi, data)
    path.write_bytes(buf.getvalue())


def make_frl21() -> pd.DataFrame:
    """FRL-21: seven olivine traverses in one CSV (a Crystal column), fitted jointly."""
    t = FRL21
    rng = np.random.default_rng(t["seed"])
    model = CrystallizationModel("olivine", t["melt"], kd=t["kd"], traces=("Ni",))
    shared = {k: t[k] for k in ("melt_mg_number", "f_rim", "retention", "melt0_ni_ppm")}
    crystals = [(dict(shared, f_core=fc), r) for fc, r in zip(t["f_core"], t["radius_um"],
                                                               strict=True)]
    a = t["antecryst"]
    crystals.append((dict(shared, melt_mg_number=a["melt_mg_number"], f_rim=a["f_rim"]),
                     a["radius_um"]))
    parts = []
    for i, (params, radius) in enumerate(crystals):
        d = np.round(np.linspace(0.0, radius - 4.0, t["n"]), 1)
        prof = model.profile(d, radius, **params)
        fo = prof["crystal"] + rng.normal(0.0, 0.15, len(d))
        wt = olivine_oxides(fo, prof["crystal_nio_wt"] + rng.normal(0.0, 0.01, len(d)), rng)
        df = pd.DataFrame({"Crystal": f"FRL-21 ol{i + 1}", "Point": np.arange(1, len(d) + 1),
                           "Distance (µm)": d})
        df = pd.concat([df, _round(wt)], axis=1)
        df["Total"] = _round(wt).sum(axis=1).round(3)
        parts.append(df)
    out = pd.concat(parts, ignore_index=True)
    out.to_csv(OUT / "FRL-21_olivines.csv", index=False, encoding="utf-8", lineterminator="\n")
    return out


def make_pl2() -> pd.DataFrame:
    """FRL-12 pl2: CSV with distance in mm, a glass hit and summary rows at the end."""
    t = TRUTH["FRL-12 pl2"]
    rng = np.random.default_rng(t["seed"])
    d = np.round(np.linspace(0.0, t["radius_um"] - 5.0, t["n"]), 1)
    prof = _profile(t, d)
    an = prof["crystal"] + rng.normal(0.0, 0.3, len(d))
    wt = _round(plagioclase_oxides(an, prof["crystal_sro_wt"], prof["crystal_mgo_wt"], rng))
    # planted: spot 18 partly on the groundmass glass (Fe, Mg, K up; Al, Ca down)
    wt.loc[17, ["SiO2", "Al2O3", "FeO", "MgO", "CaO", "Na2O", "K2O"]] = [
        55.84, 21.10, 4.12, 2.05, 8.95, 4.21, 1.38]
    df = pd.DataFrame({"Point": np.arange(1, len(d) + 1),
                       "Comment": [f"pl2_{i + 1}" for i in range(len(d))],
                       "Distance (mm)": np.round(d / 1000.0, 4)})
    df = pd.concat([df, wt], axis=1)
    df["Total"] = wt.sum(axis=1).round(3)
    num = df.drop(columns=["Point", "Comment"])
    avg = num.mean().round(3)
    sd = num.std().round(3)
    summary = pd.DataFrame([{"Point": "", "Comment": "Average", **avg.to_dict()},
                            {"Point": "", "Comment": "Std Dev", **sd.to_dict()}])
    summary["Distance (mm)"] = ""
    out = pd.concat([df, summary], ignore_index=True)
    out.to_csv(OUT / "FRL-12_pl2.csv", index=False, lineterminator="\n")
    return df


PROJECT = """\
# Ferrolyn volcanic field (invented demo scenario): one table per traverse.
# Option names are those of `zoning fit` with underscores; paths are relative
# to this file. Sampler lengths are kept short so that `zoning demo` runs in
# under a minute on two cores; use longer chains (e.g. steps = 2000) for a thesis.

[defaults]
seed = 7
walkers = {walkers}
steps = {steps}
kd_sd = 0.03

[samples."FRL-07 ol1"]
file = "FRL-07_ol1.csv"
mineral = "olivine"
melt = {{ FeO = 9.8 }}

[samples."FRL-07 ol2"]
file = "FRL-07_ol2.csv"
mineral = "olivine"
melt = {{ FeO = 9.8 }}

[samples."FRL-07 ol3"]
file = "FRL-07_ol3.txt"
mineral = "olivine"
melt = {{ FeO = 9.8 }}

[samples."FRL-03 ol1"]
file = "FRL-03_ol1.csv"
mineral = "olivine"
melt = {{ FeO = 10.4 }}
orientation = "core-to-rim"

[samples."FRL-12 pl1"]
file = "FRL-12_pl1.xlsx"
mineral = "plagioclase"
melt = {{ Na2O = 3.1 }}
kd = 2.0
kd_sd = 0.3
temperature_c = {plag_t:.0f}

[samples."FRL-12 pl2"]
file = "FRL-12_pl2.csv"
mineral = "plagioclase"
melt = {{ Na2O = 3.1 }}
kd = 2.0
kd_sd = 0.3
temperature_c = {plag_t:.0f}

# Seven olivines of one thin section fitted together (one parent melt, Kd and r;
# each crystal its own F_core); the antecryst test names the crystal that does
# not belong.
[samples."FRL-21 olivines"]
file = "FRL-21_olivines.csv"
mineral = "olivine"
melt = {{ FeO = 9.8 }}
joint = true
"""

#: Sampler lengths written into the demo project (short: the demo must be fast).
DEMO_WALKERS = 16
DEMO_STEPS = 300


def main(argv: list[str] | None = None) -> int:
    """Write every demo file into ``ferrolyn/`` (or the folder given as first argument)."""
    global OUT
    argv = sys.argv[1:] if argv is None else argv
    if argv:
        OUT = Path(argv[0])
    OUT.mkdir(parents=True, exist_ok=True)
    for make in (make_ol1, make_ol2, make_ol3, make_frl03, make_pl1, make_pl2, make_frl21):
        make()
    (OUT / "project.toml").write_text(
        PROJECT.format(walkers=DEMO_WALKERS, steps=DEMO_STEPS, plag_t=PLAG_TEMPERATURE_C),
        encoding="utf-8")
    print(f"wrote the Ferrolyn demo data to {OUT}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
