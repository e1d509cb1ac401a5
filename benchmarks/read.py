"""Time :func:`zoning.io.readers.read_export` on large invented exports.

Writes 100,000-row exports (semicolon + decimal comma, and comma + decimal
point with below-detection cells and junk) and a 20,000-row .xlsx to a
temporary folder and prints
the wall and CPU time of reading each (CPU time is the fairer figure on a
busy machine). Run: ``python benchmarks/read.py``.
"""

import tempfile
import time
from pathlib import Path

import numpy as np
from zoning.io.readers import read_export

OXIDES = ("SiO2", "TiO2", "Al2O3", "FeO", "MnO", "MgO", "NiO", "CaO", "Na2O", "K2O")


def make_file(path: Path, n: int, sep: str, decimal: str, rng: np.random.Generator) -> None:
    values = rng.uniform(0.0, 50.0, size=(n, len(OXIDES))).round(3)
    cells = values.astype(str).astype(object)
    junk = rng.random(cells.shape)
    cells[junk < 0.01] = "<0.01"
    cells[(junk >= 0.01) & (junk < 0.015)] = "n.d."
    cells[(junk >= 0.015) & (junk < 0.016)] = "abc"
    if decimal == ",":
        cells = np.char.replace(cells.astype(str), ".", ",").astype(object)
    header = sep.join(["Point", "Comment", "X (mm)", "Y (mm)", *OXIDES, "Total"])
    lines = ["Invented benchmark export, FRL-99", header]
    x = np.round(np.linspace(10.0, 10.5, n), 5).astype(str)
    body = [
        sep.join([str(i + 1), f"spot {i + 1}", x[i], x[i], *cells[i], "100"])
        for i in range(n)
    ]
    path.write_text("\n".join(lines + body) + "\n", encoding="utf-8")


def make_xlsx(path: Path, n: int, rng: np.random.Generator) -> None:
    import openpyxl

    wb = openpyxl.Workbook(write_only=True)
    ws = wb.create_sheet("FRL-99")
    ws.append(["Invented benchmark export, FRL-99"])
    ws.append(["Point", "Distance (µm)", *OXIDES, "Total"])
    values = rng.uniform(0.0, 50.0, size=(n, len(OXIDES))).round(3)
    for i in range(n):
        ws.append([i + 1, float(i), *values[i].tolist(), 100.0])
    wb.save(path)


def main() -> None:
    rng = np.random.default_rng(20261202)
    n = 100_000
    with tempfile.TemporaryDirectory() as tmp:
        for sep, decimal, name in ((";", ",", "semicolon_comma.csv"), (",", ".", "comma.csv")):
            path = Path(tmp) / name
            make_file(path, n, sep, decimal, rng)
            t0, c0 = time.perf_counter(), time.process_time()
            tables = read_export(path)
            dt, dc = time.perf_counter() - t0, time.process_time() - c0
            rows = sum(len(t.data) for t in tables)
            print(f"{name}: {rows} rows, {path.stat().st_size / 1e6:.1f} MB read in "
                  f"{dt:.2f} s wall, {dc:.2f} s CPU")
        path = Path(tmp) / "sheet.xlsx"
        make_xlsx(path, 20_000, rng)
        t0, c0 = time.perf_counter(), time.process_time()
        rows = sum(len(t.data) for t in read_export(path))
        dt, dc = time.perf_counter() - t0, time.process_time() - c0
        print(f"sheet.xlsx: {rows} rows read in {dt:.2f} s wall, {dc:.2f} s CPU "
              "(openpyxl parsing dominates)")


if __name__ == "__main__":
    main()
