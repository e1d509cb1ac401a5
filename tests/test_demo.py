"""`zoning demo` and the invented Ferrolyn demo data.

The demo data are invented (see demo_data/ferrolyn/README.md): the "true"
settings below are those the generator used, so the demo fits must find them
within their bands. They are invented numbers, not outside references.
"""

import subprocess
import sys

import pandas as pd
import pytest
from zoning.demo_data import DEMO_DIR

from zoning.workflow import read_project

FERROLYN = DEMO_DIR / "ferrolyn"
GENERATOR = DEMO_DIR / "make_demo_data.py"

#: Values are written rounded to 0.001 wt% (µm, mm to 0.1 µm / 0.0001 mm);
#: a regenerated file may differ by one unit in the last digit [wt%].
ATOL_LAST_DIGIT = 1.5e-3


def _read(path):
    if path.suffix == ".xlsx":
        return pd.read_excel(path)
    if path.name == "FRL-07_ol2.csv":
        return pd.read_csv(path, sep=";", decimal=",", encoding="latin-1")
    if path.suffix == ".txt":
        return pd.read_csv(path, sep="\t", skiprows=3)
    return pd.read_csv(path)


def test_generator_reproduces_the_shipped_demo_files(tmp_path):
    out = subprocess.run([sys.executable, str(GENERATOR), str(tmp_path)], capture_output=True,
                         text=True, check=False, timeout=300)
    assert out.returncode == 0, out.stderr
    shipped = sorted(p.name for p in FERROLYN.iterdir() if p.name != "README.md")
    assert sorted(p.name for p in tmp_path.iterdir()) == shipped
    assert (tmp_path / "project.toml").read_text() == (FERROLYN / "project.toml").read_text()
    for name in shipped:
        if name == "project.toml":
            continue
        a, b = _read(FERROLYN / name), _read(tmp_path / name)
        assert list(a.columns) == list(b.columns), name
        pd.testing.assert_frame_equal(a, b, check_exact=False, atol=ATOL_LAST_DIGIT, rtol=0)


def test_demo_files_are_packaged_by_the_package_data_globs():
    allowed = {".csv", ".txt", ".xlsx", ".toml", ".md"}
    assert all(p.suffix in allowed for p in FERROLYN.iterdir())


def test_demo_project_covers_the_scenario():
    jobs = read_project(FERROLYN / "project.toml").jobs
    minerals = [j.read_options["mineral"] for j in jobs]
    assert minerals.count("olivine") == 5 and minerals.count("plagioclase") == 2
    assert [j.name for j in jobs if j.joint] == ["FRL-21 olivines"]
    suffixes = {j.file.rsplit(".", 1)[1] for j in jobs}
    assert suffixes == {"csv", "txt", "xlsx"}


@pytest.fixture(scope="module")
def demo_run(tmp_path_factory):
    out = tmp_path_factory.mktemp("demo") / "zoning-demo"
    before = sorted(p.name for p in DEMO_DIR.rglob("*") if "__pycache__" not in p.parts)
    proc = subprocess.run([sys.executable, "-m", "zoning", "demo", "--out", str(out),
                           "--quiet"], capture_output=True, text=True, check=False, timeout=900)
    after = sorted(p.name for p in DEMO_DIR.rglob("*") if "__pycache__" not in p.parts)
    return out, proc, before, after


def test_demo_writes_every_report_and_says_where(demo_run):
    out, proc, before, after = demo_run
    assert proc.returncode == 0, proc.stderr
    assert "Traceback" not in proc.stderr
    summary = pd.read_csv(out / "summary.csv", comment="#", keep_default_na=False)
    assert len(summary) == 7 and (summary["error"] == "").all()
    for sample in summary["sample"]:
        folder = out / sample.replace(" ", "_")
        assert (folder / "report.pdf").read_bytes().startswith(b"%PDF")
        assert str(folder / "report.pdf") in proc.stdout
    assert (out / "overview.pdf").exists() and str(out / "summary.csv") in proc.stdout
    assert before == after  # nothing written into the installed package


def test_demo_finds_the_planted_answers(demo_run):
    out = demo_run[0]
    s = pd.read_csv(out / "summary.csv", comment="#", keep_default_na=False).set_index("sample")
    # FRL-07 ol1 was generated with parent Mg# 0.76, F 0.16, r 0.10 (invented truth).
    row = s.loc["FRL-07 ol1"]
    for name, truth in (("melt_mg_number", 0.76), ("f_rim", 0.16), ("retention", 0.10)):
        assert float(row[f"{name}_lo95"]) <= truth <= float(row[f"{name}_hi95"]), name
    assert int(row["n_used"]) == int(row["n_spots"]) - 3  # the three planted bad spots
    # The recharge crystal is reported as such, not fitted with a confident answer.
    assert "recharge" in s.loc["FRL-03 ol1", "warnings"]
    # FRL-12 pl1: parent Ca# 0.62, F 0.35 and r 0.30 (invented truth).
    pl1 = s.loc["FRL-12 pl1"]
    for name, truth in (("melt_ca_number", 0.62), ("f_rim", 0.35), ("retention", 0.30)):
        assert float(pl1[f"{name}_lo95"]) <= truth <= float(pl1[f"{name}_hi95"]), name
    # Glass hit and the two summary rows of FRL-12 pl2 are not used.
    assert int(s.loc["FRL-12 pl2", "n_spots"]) - int(s.loc["FRL-12 pl2", "n_used"]) == 3
    # FRL-21: seven olivines fitted jointly; ol7 is the planted antecryst and the
    # shared parent Mg# 0.76 and F 0.15 are inside the bands (invented truth).
    frl21 = s.loc["FRL-21 olivines"]
    assert int(frl21["n_crystals"]) == 7 and int(frl21["n_antecrysts"]) == 1
    for name, truth in (("melt_mg_number", 0.76), ("f_rim", 0.15)):
        assert float(frl21[f"{name}_lo95"]) <= truth <= float(frl21[f"{name}_hi95"]), name
    crystals = pd.read_csv(out / "crystals.csv", comment="#", keep_default_na=False)
    verdicts = dict(zip(crystals["crystal"], crystals["verdict"], strict=True))
    assert [c for c, v in verdicts.items() if v == "likely antecryst"] == [
        "FRL-21 ol7"]  # the traverse name as written in the file
