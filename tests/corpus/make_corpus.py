"""Generate the reading corpus: invented exports in the shapes real ones take.

Every file in ``tests/corpus/`` except ``README.md`` is written by this script,
deterministically (fixed seeds). The samples belong to the fictional Ferrolyn
volcanic field; every name and number is invented. The layouts follow common
electron-microprobe and laser-ablation export practice (from our own
experience, not copied from any instrument's files): long tables with one row
per spot and a profile column, workbooks with an information sheet first,
OpenDocument sheets, hand-typed headers with the digit zero for the letter O,
laser-ablation trace columns in ppm of the element with isotope masses,
columns of 1-sigma uncertainties, a column marking bad spots, and a distance
column in mm without a unit.

Compositions are built from the Fo or An of each spot by stoichiometry
(olivine (Mg,Fe)2SiO4 with Mn, Ni, Ca; plagioclase CaAl2Si2O8-NaAlSi3O8 with
K, Fe, Mg), scaled to an analytical total near 100 wt% and given analytical
noise. ``FILES`` (below) says what each file holds; tests/test_corpus.py
checks the reading of each one against it.

Run from anywhere (needs the package installed, for odfpy and openpyxl)::

    python tests/corpus/make_corpus.py [OUTPUT_FOLDER]
"""

from __future__ import annotations

import sys
from pathlib import Path

import numpy as np
import pandas as pd

OUT = Path(__file__).resolve().parent

#: Molar masses [g/mol] (IUPAC 2021 atomic weights, as zoning.oxides).
_M = {"SiO2": 60.083, "MgO": 40.304, "FeO": 71.844, "MnO": 70.937, "NiO": 74.692,
      "CaO": 56.077, "Al2O3": 101.961, "Na2O": 61.979, "K2O": 94.195}

#: What each file holds: traverses (name -> number of spot rows), mineral,
#: extra rows that are not spots, and the orientation as measured.
FILES = {
    "ferrolyn_long_table.csv": dict(
        mineral="olivine",
        traverses={"FRL-21 prof 1": 4, "FRL-21 prof 2": 9, "FRL-21 prof 12": 15,
                   "FRL-22 prof 1": 22, "FRL-22 prof 2": 7, "FRL-22 line C": 31},
        orientation="core-to-rim"),
    "ferrolyn_workbook.xlsx": dict(mineral="olivine", traverses={"ferrolyn_workbook": 18},
                                   orientation="core-to-rim", sheet="olivine"),
    "ferrolyn_plag.ods": dict(mineral="plagioclase", traverses={"FRL-12 pl3": 16},
                              orientation="core-to-rim"),
    "typo_headers.csv": dict(mineral="olivine", traverses={"typo_headers": 12},
                             orientation="core-to-rim"),
    "la_ppm_traces.csv": dict(mineral="plagioclase", traverses={"la_ppm_traces": 14},
                              orientation="core-to-rim"),
    "bad_spot_column.csv": dict(mineral="olivine", traverses={"bad_spot_column": 10},
                                orientation="core-to-rim"),
    "distance_mm_no_unit.csv": dict(mineral="olivine", traverses={"distance_mm_no_unit": 13},
                                    orientation="core-to-rim"),
    "reverse_olivine.csv": dict(mineral="olivine", traverses={"reverse_olivine": 17},
                                orientation="core-to-rim"),
    "FRL-31_pl7.csv": dict(mineral="plagioclase", traverses={"FRL-31_pl7": 18},
                           orientation="rim-to-core"),
    "flat_olivine.csv": dict(mineral="olivine", traverses={"flat_olivine": 14},
                             orientation="uncertain"),
}


# ---------------------------------------------------------------------------
# compositions


def olivine(fo, rng, *, nio, mno, cao, total=100.0, noise=True):
    """Oxide wt% of olivine spots of Fo [mol%] with the given minor oxides [wt%]."""
    fo = np.asarray(fo, dtype=float) / 100.0
    n = fo.size
    mg, fe = 2.0 * fo, 2.0 * (1.0 - fo)
    wt = {"SiO2": np.full(n, _M["SiO2"]), "FeO": fe * _M["FeO"], "MgO": mg * _M["MgO"]}
    major = sum(wt.values())
    minor = np.asarray(nio) + np.asarray(mno) + np.asarray(cao)
    scale = (np.asarray(total) - minor) / major
    out = {k: v * scale for k, v in wt.items()}
    out.update(MnO=np.broadcast_to(mno, (n,)).astype(float),
               NiO=np.broadcast_to(nio, (n,)).astype(float),
               CaO=np.broadcast_to(cao, (n,)).astype(float))
    if noise:
        sd = {"SiO2": 0.15, "FeO": 0.10, "MgO": 0.15, "MnO": 0.01, "NiO": 0.01, "CaO": 0.01}
        out = {k: np.clip(v + rng.normal(0, sd[k], n), 0.0, None) for k, v in out.items()}
    return {k: out[k] for k in ("SiO2", "FeO", "MnO", "MgO", "NiO", "CaO")}


def plagioclase(an, rng, *, k2o, feo, mgo, total=100.0, noise=True):
    """Oxide wt% of plagioclase spots of An [mol%] with K2O, FeO, MgO [wt%]."""
    a = np.asarray(an, dtype=float) / 100.0
    n = a.size
    k = np.asarray(k2o) * 2.0 / _M["K2O"] / 0.37  # K per 8 O, roughly
    wt = {"SiO2": (3.0 - a) * _M["SiO2"], "Al2O3": (1.0 + a) / 2.0 * _M["Al2O3"],
          "CaO": a * _M["CaO"], "Na2O": np.clip(1.0 - a - k, 0.0, None) / 2.0 * _M["Na2O"]}
    major = sum(wt.values())
    minor = np.asarray(k2o) + np.asarray(feo) + np.asarray(mgo)
    scale = (np.asarray(total) - minor) / major
    out = {key: v * scale for key, v in wt.items()}
    out.update(K2O=np.broadcast_to(k2o, (n,)).astype(float),
               FeO=np.broadcast_to(feo, (n,)).astype(float),
               MgO=np.broadcast_to(mgo, (n,)).astype(float))
    if noise:
        sd = {"SiO2": 0.2, "Al2O3": 0.15, "CaO": 0.1, "Na2O": 0.06, "K2O": 0.01,
              "FeO": 0.02, "MgO": 0.005}
        out = {key: np.clip(v + rng.normal(0, sd[key], n), 0.0, None) for key, v in out.items()}
    return {key: out[key] for key in ("SiO2", "Al2O3", "FeO", "MgO", "CaO", "Na2O", "K2O")}


def normal_olivine(n, rng, fo_core=88.0, fo_rim=80.5, total_sd=0.4):
    """A normally zoned olivine, core to rim: Fo and Ni fall, Mn and Ca rise rimward."""
    x = np.linspace(0.0, 1.0, n)
    shape = x**2.5
    fo = fo_core + (fo_rim - fo_core) * shape
    ox = olivine(fo, rng, nio=0.36 - 0.20 * shape, mno=0.15 + 0.14 * shape,
                 cao=0.14 + 0.12 * shape, total=100.0 + rng.normal(0, total_sd, n))
    return ox, fo


def rounded(ox, digits=2):
    return {k: np.round(v, digits) for k, v in ox.items()}


# ---------------------------------------------------------------------------
# the files


def long_table(out: Path) -> None:
    """Long table: one row per spot, Sample and Profile_Name columns, 6 traverses."""
    rng = np.random.default_rng(2101)
    rows = []
    for name, n in FILES["ferrolyn_long_table.csv"]["traverses"].items():
        sample, profile = name.split(" ", 1)
        ox, _ = normal_olivine(n, rng, fo_core=rng.uniform(86, 89), fo_rim=rng.uniform(79, 82))
        ox = rounded(ox)
        step = 10.0 if n > 10 else 15.0
        for i in range(n):
            rows.append({"Sample": sample, "Profile_Name": profile, "Point": i + 1,
                         "Distance (µm)": round(i * step, 1),
                         **{k: ox[k][i] for k in ox},
                         "Total": round(sum(ox[k][i] for k in ox), 2)})
    pd.DataFrame(rows).to_csv(out / "ferrolyn_long_table.csv", index=False,
                              encoding="utf-8", lineterminator="\n")


def workbook(out: Path) -> None:
    """Workbook: an info sheet first, the traverse, then the standards."""
    import openpyxl

    rng = np.random.default_rng(2201)
    wb = openpyxl.Workbook()
    info = wb.active
    info.title = "info"
    for line in (["Ferrolyn volcanic field - olivine traverses, sample FRL-23"],
                 ["Instrument", "electron microprobe, 5 spectrometers"],
                 ["Conditions", "15 kV, 20 nA, focused beam"],
                 ["Operator", "A. N. Other"],
                 ["Note", "stage coordinates in mm"]):
        info.append(line)
    ws = wb.create_sheet("olivine")
    ws.append(["FRL-23 ol4, traverse core to rim"])
    ws.append([])
    ws.append(["Point", "Comment", "X", "Y", "SiO2", "FeO", "MnO", "MgO", "NiO", "CaO",
               "Total"])
    n = FILES["ferrolyn_workbook.xlsx"]["traverses"]["ferrolyn_workbook"]
    ox, _ = normal_olivine(n, rng)
    ox = rounded(ox)
    x0, y0 = 23.4182, 11.9051
    for i in range(n):
        d = i * 0.012  # 12 µm steps, in mm
        ws.append([i + 1, f"ol4-{i + 1:02d}", round(x0 + 0.8 * d, 4), round(y0 + 0.6 * d, 4),
                   *[float(ox[k][i]) for k in ox], round(float(sum(ox[k][i] for k in ox)), 2)])
    std = wb.create_sheet("standards")
    std.append(["Point", "Comment", "SiO2", "FeO", "MnO", "MgO", "NiO", "CaO", "Total"])
    for i, (si, fe, mn, mg, ni, ca) in enumerate([(40.81, 9.55, 0.14, 49.42, 0.37, 0.09),
                                                  (40.77, 9.49, 0.13, 49.51, 0.36, 0.10)]):
        std.append([i + 1, "olivine standard", si, fe, mn, mg, ni, ca,
                    round(si + fe + mn + mg + ni + ca, 2)])
    wb.properties.creator = "make_corpus.py"
    wb.save(out / "ferrolyn_workbook.xlsx")


def normal_plag(n, rng, an_core=80.0, an_rim=61.0):
    """A normally zoned plagioclase, core to rim: An falls, K2O and FeO rise rimward."""
    x = np.linspace(0.0, 1.0, n)
    shape = x**1.8
    an = an_core + (an_rim - an_core) * shape
    ox = plagioclase(an, rng, k2o=0.07 + 0.38 * shape, feo=0.38 + 0.30 * shape,
                     mgo=0.15 - 0.06 * shape, total=100.0 + rng.normal(0, 0.4, n))
    return ox, an


def ods(out: Path) -> None:
    """OpenDocument sheet: a plagioclase traverse with a title line."""
    rng = np.random.default_rng(2301)
    n = FILES["ferrolyn_plag.ods"]["traverses"]["FRL-12 pl3"]
    ox, _ = normal_plag(n, rng)
    ox = rounded(ox, 3)
    rows = [["Ferrolyn FRL-12, plagioclase 3"] + [None] * 10, [None] * 11,
            ["Traverse", "Point", "Distance (µm)", "SiO2", "Al2O3", "FeO", "MgO", "CaO",
             "Na2O", "K2O", "Total"]]
    for i in range(n):
        rows.append(["FRL-12 pl3", i + 1, 20.0 * i, *[float(ox[k][i]) for k in ox],
                     round(float(sum(ox[k][i] for k in ox)), 2)])
    with pd.ExcelWriter(out / "ferrolyn_plag.ods", engine="odf") as w:
        pd.DataFrame(rows).to_excel(w, sheet_name="FRL-12 pl3", index=False, header=False)


def typo_headers(out: Path) -> None:
    """Hand-typed headers (digit zero for O, FeO(tot)); Windows-1252, decimal commas."""
    rng = np.random.default_rng(2401)
    n = FILES["typo_headers.csv"]["traverses"]["typo_headers"]
    ox, _ = normal_olivine(n, rng)
    ox = rounded(ox)
    head = ["Spot", "Dist (µm)", "Si02", "FeO(tot)", "Mn0", "Mg0", "Ni0", "Ca0", "Al203",
            "Total"]
    lines = ["FRL-24 ol2 traverse;;;;;;;;;", ";".join(head)]
    for i in range(n):
        al = max(0.0, round(0.03 + rng.normal(0, 0.01), 2))
        cells = [str(i + 1), f"{15.0 * i:.1f}", *[f"{ox[k][i]:.2f}" for k in
                                                  ("SiO2", "FeO", "MnO", "MgO", "NiO", "CaO")],
                 f"{al:.2f}", f"{sum(ox[k][i] for k in ox) + al:.2f}"]
        lines.append(";".join(c.replace(".", ",") for c in cells))
    (out / "typo_headers.csv").write_text("\n".join(lines) + "\n", encoding="cp1252")


def la_ppm(out: Path) -> None:
    """EPMA majors and laser-ablation traces in ppm of the element with isotope masses."""
    rng = np.random.default_rng(2501)
    n = FILES["la_ppm_traces.csv"]["traverses"]["la_ppm_traces"]
    ox, an = normal_plag(n, rng)
    x = np.linspace(0, 1, n)
    mg_ppm = (0.15 - 0.06 * x**1.8) / 1.6583 * 1e4 + rng.normal(0, 15, n)  # MgO wt% -> Mg ppm
    sr_ppm = 780 + 260 * x**1.8 + rng.normal(0, 12, n)
    ba_ppm = 45 + 60 * x**1.8 + rng.normal(0, 3, n)
    ti_ppm = 230 + 140 * x**1.8 + rng.normal(0, 10, n)
    rows = []
    for i in range(n):
        rows.append({"Spot": f"pl7_{i + 1:02d}", "Distance (um)": 25.0 * i,
                     **{f"{k} (wt%)": round(float(ox[k][i]), 3)
                        for k in ("SiO2", "Al2O3", "FeO", "CaO", "Na2O", "K2O")},
                     "Mg25 (ppm)": round(float(mg_ppm[i]), 1),
                     "Sr88 (ppm)": round(float(sr_ppm[i]), 1),
                     "Sr88 2SE (ppm)": round(float(0.03 * sr_ppm[i]), 1),
                     "Ba137 (ppm)": round(float(ba_ppm[i]), 2),
                     "Ti49 (ppm)": round(float(ti_ppm[i]), 1),
                     "Sr88_LOD": 0.05})
    pd.DataFrame(rows).to_csv(out / "la_ppm_traces.csv", index=False, encoding="utf-8",
                              lineterminator="\n")


#: Cells of the bad-spot column, in order: empty/0/no keep; anything else marks a spot.
BAD_CELLS = ["", "", "1", "", "crack", "0", "yes", "", "no", "glass in beam"]


def bad_spots(out: Path) -> None:
    """A 'marked_bad' column: truthy values and reasons typed by the analyst."""
    rng = np.random.default_rng(2601)
    n = FILES["bad_spot_column.csv"]["traverses"]["bad_spot_column"]
    ox, _ = normal_olivine(n, rng)
    ox = rounded(ox)
    rows = [{"Point": i + 1, "Distance (µm)": 20.0 * i, **{k: ox[k][i] for k in ox},
             "marked_bad": BAD_CELLS[i]} for i in range(n)]
    pd.DataFrame(rows).to_csv(out / "bad_spot_column.csv", index=False, encoding="utf-8",
                              lineterminator="\n")


def distance_mm(out: Path) -> None:
    """A 'Distance' column in mm without a unit, and bare '±' 1-sigma columns."""
    rng = np.random.default_rng(2701)
    n = FILES["distance_mm_no_unit.csv"]["traverses"]["distance_mm_no_unit"]
    ox, _ = normal_olivine(n, rng)
    ox = rounded(ox)
    rows = []
    for i in range(n):
        rows.append({"No.": i + 1, "Distance": round(0.018 * i, 3),
                     "SiO2": ox["SiO2"][i], "FeO": ox["FeO"][i], "±": 0.12,
                     "MgO": ox["MgO"][i], "± ": 0.18, "NiO": ox["NiO"][i],
                     "MnO": ox["MnO"][i], "CaO": ox["CaO"][i]})
    text = pd.DataFrame(rows).to_csv(index=False, sep="\t", lineterminator="\n")
    # two columns headed '±' as instruments write them (pandas needs distinct keys)
    text = text.replace("\t± \t", "\t±\t", 1)
    (out / "distance_mm_no_unit.csv").write_text(text, encoding="utf-8")


def reverse_olivine(out: Path) -> None:
    """A reversely zoned olivine, core to rim: Fo and Ni rise toward the rim."""
    rng = np.random.default_rng(2801)
    n = FILES["reverse_olivine.csv"]["traverses"]["reverse_olivine"]
    x = np.linspace(0, 1, n)
    shape = 1.0 / (1.0 + np.exp(-(x - 0.7) / 0.06))
    fo = 81.5 + 4.5 * shape
    ox = rounded(olivine(fo, rng, nio=0.17 + 0.12 * shape, mno=0.27 - 0.08 * shape,
                         cao=0.22 - 0.04 * shape, total=100.0 + rng.normal(0, 0.4, n)))
    rows = [{"Point": i + 1, "Distance (µm)": 14.0 * i, **{k: ox[k][i] for k in ox},
             "σ(Fo)": 0.15} for i in range(n)]
    pd.DataFrame(rows).to_csv(out / "reverse_olivine.csv", index=False, encoding="utf-8",
                              lineterminator="\n")


def plag_rim_to_core(out: Path) -> None:
    """Normally zoned plagioclase measured from the rim inward; only K2O/FeO tell the rim.

    Written as ``FRL-31_pl7.csv``: the name gives no hint of the orientation.
    """
    rng = np.random.default_rng(2901)
    n = FILES["FRL-31_pl7.csv"]["traverses"]["FRL-31_pl7"]
    ox, _ = normal_plag(n, rng)
    ox = rounded({k: v[::-1] for k, v in ox.items()}, 3)
    rows = [{"Point": i + 1, "Distance (µm)": 18.0 * i, **{k: ox[k][i] for k in ox},
             "Total": round(float(sum(ox[k][i] for k in ox)), 2)} for i in range(n)]
    pd.DataFrame(rows).to_csv(out / "FRL-31_pl7.csv", index=False, encoding="utf-8",
                              lineterminator="\n")


def flat_olivine(out: Path) -> None:
    """A flat profile: Fo 84.1 within analytical noise from end to end."""
    rng = np.random.default_rng(3001)
    n = FILES["flat_olivine.csv"]["traverses"]["flat_olivine"]
    ox = rounded(olivine(np.full(n, 84.1), rng, nio=0.24, mno=0.21, cao=0.19,
                         total=100.0 + rng.normal(0, 0.4, n)))
    rows = [{"Point": i + 1, "Distance (µm)": 16.0 * i, **{k: ox[k][i] for k in ox}}
            for i in range(n)]
    pd.DataFrame(rows).to_csv(out / "flat_olivine.csv", index=False, encoding="utf-8",
                              lineterminator="\n")


def main(out: Path = OUT) -> None:
    out.mkdir(parents=True, exist_ok=True)
    for make in (long_table, workbook, ods, typo_headers, la_ppm, bad_spots, distance_mm,
                 reverse_olivine, plag_rim_to_core, flat_olivine):
        make(out)


if __name__ == "__main__":
    main(Path(sys.argv[1]) if len(sys.argv) > 1 else OUT)
