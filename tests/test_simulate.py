import sys
import warnings
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from numpy.testing import assert_allclose

from zoning.cli import main
from zoning.exceptions import CalibrationRangeWarning
from zoning.kd_laws import liquidus_olivine_kd, plagioclase_kd_from_water
from zoning.loops import FORSTERITE_FAYALITE

sys.path.insert(0, str(Path(__file__).resolve().parent))
from _tolerances import ATOL_MOL_PCT_HAND, RTOL_IDENTITY  # noqa: E402

FULL_MELT = ["SiO2=50", "TiO2=1.5", "Al2O3=15", "FeO=10", "MnO=0.2", "MgO=8", "CaO=11",
             "Na2O=2.5", "K2O=0.3", "P2O5=0.15"]


def _melt_args(items):
    out = []
    for item in items:
        out += ["--melt", item]
    return out


def _read(path):
    lines = Path(path).read_text(encoding="utf-8").splitlines()
    meta = {}
    for line in lines:
        if not line.startswith("# "):
            break
        key, _, value = line[2:].partition(": ")
        meta[key] = value
    return pd.read_csv(path, comment="#"), meta


def test_olivine_core_satisfies_kd_definition(tmp_path, capsys):
    out = tmp_path / "ol.csv"
    code = main(["simulate", "--out", str(out), "--melt", "MgO=8.0", "--melt", "FeO=10.0",
                 "--fe3", "0.1", "--f-rim", "0.05", "--points", "6"])
    assert code == 0
    table, meta = _read(out)
    assert list(table.columns) == ["f", "fo", "melt_mg_number", "melt_mgo_wt", "melt_feo_wt",
                                   "temperature_c"]
    # Melt MgO 8.0, FeO(Fe2+) 9.0 wt% gives Fo 84.08 at Kd 0.30 (derived from the
    # Roeder & Emslie 1970 definition of Kd).
    assert table["fo"].iloc[0] == pytest.approx(84.08, abs=ATOL_MOL_PCT_HAND)
    # Helz & Thornber (1987): T = 20.1 MgO + 1014 on the melt MgO column.
    assert_allclose(table["temperature_c"], 20.1 * table["melt_mgo_wt"] + 1014.0,
                    rtol=RTOL_IDENTITY)
    assert table["temperature_c"].iloc[0] == pytest.approx(1174.8, abs=0.01)
    assert_allclose(table["f"], np.linspace(0, 0.05, 6), rtol=RTOL_IDENTITY)
    assert np.all(np.diff(table["fo"]) < 0)
    assert meta["zoning_version"]
    assert meta["kd"].startswith("0.3 ")
    assert meta["fe3_fraction"].startswith("0.1 ")
    assert "wrote 6 spots" in capsys.readouterr().out


def test_distance_spacing_geometry_and_traces(tmp_path):
    out = tmp_path / "ni.csv"
    code = main(["simulate", "--out", str(out), "--melt", "MgO=9.5", "--melt", "FeO=9",
                 "--radius-um", "300", "--points", "7", "--f-rim", "0.05", "--retention",
                 "0.5", "--trace", "Ni=300", "--geometry", "cylinder"])
    assert code == 0
    table, meta = _read(out)
    assert list(table.columns)[:2] == ["distance_um", "f"]
    assert {"crystal_nio_wt", "melt_ni_ppm"} <= set(table.columns)
    assert_allclose(table["distance_um"], np.linspace(0, 300, 7), rtol=RTOL_IDENTITY)
    # self-similar growth of a cylinder: F = F_rim (x/R)^2
    assert_allclose(table["f"], 0.05 * (table["distance_um"] / 300) ** 2, rtol=1e-12)
    assert table["melt_ni_ppm"].iloc[0] == pytest.approx(300.0)
    # Hart & Davis (1978): D_Ni = 124/MgO - 0.9 (wt basis); NiO in the crystal.
    d = 124 / table["melt_mgo_wt"].iloc[0] - 0.9
    nio = d * 300e-4 * 74.6928 / 58.6934
    assert table["crystal_nio_wt"].iloc[0] == pytest.approx(nio, rel=1e-3)
    assert meta["traces"] == "Ni=300"


def test_plagioclase_kd_from_water(tmp_path, capsys):
    out = tmp_path / "pl.csv"
    code = main(["simulate", "--out", str(out), "--mineral", "plagioclase", "--melt",
                 "CaO=11", "--melt", "Na2O=3", "--h2o", "3", "--points", "4"])
    assert code == 0
    table, meta = _read(out)
    assert list(table.columns) == ["f", "an", "melt_ca_number", "melt_cao_wt", "melt_na2o_wt"]
    kd = plagioclase_kd_from_water(3.0)
    ca = (11 / 56.0774) / (11 / 56.0774 + 2 * 3 / 61.9789)
    # KD(Ca-Na) = (Ca/Na)pl/(Ca/Na)melt, so An = Kd y / (Kd y + 1 - y) at F = 0.
    assert table["an"].iloc[0] == pytest.approx(100 * kd * ca / (kd * ca + 1 - ca), rel=1e-6)
    assert "rule of thumb" in meta["kd"]
    assert "KD(Ca-Na) = 3.60" in capsys.readouterr().out


def test_kd_law_toplis(tmp_path):
    out = tmp_path / "tp.csv"
    code = main(["simulate", "--out", str(out), *_melt_args(FULL_MELT), "--kd-law",
                 "toplis_2005", "--points", "3"])
    assert code == 0
    _, meta = _read(out)
    melt = dict(item.split("=") for item in FULL_MELT)
    melt = {k: float(v) for k, v in melt.items()}
    expected = liquidus_olivine_kd(melt, "toplis_2005", fe3_fraction=0.1)
    assert float(meta["kd"].split()[0]) == pytest.approx(expected.kd, rel=1e-5)


def test_delta_qfm_sets_fe3(tmp_path):
    out = tmp_path / "fe3.csv"
    code = main(["simulate", "--out", str(out), *_melt_args(FULL_MELT), "--delta-qfm", "0",
                 "--temperature-c", "1200", "--points", "3"])
    assert code == 0
    _, meta = _read(out)
    # Derived with our implementation of Kress & Carmichael (1991): 0.153.
    assert float(meta["fe3_fraction"].split()[0]) == pytest.approx(0.153, abs=5e-4)


def test_loop_law(tmp_path):
    out = tmp_path / "loop.csv"
    code = main(["simulate", "--out", str(out), "--loop", "--mg-number", "0.6",
                 "--f-rim", "0.9", "--points", "5"])
    assert code == 0
    table, meta = _read(out)
    t_liq = FORSTERITE_FAYALITE.liquidus_c(0.6)
    _, x_s = FORSTERITE_FAYALITE.tie_line(t_liq)
    assert table["fo"].iloc[0] == pytest.approx(100 * x_s, rel=1e-10)
    assert table["temperature_c"].iloc[0] == pytest.approx(t_liq, rel=1e-10)
    assert meta["law"] == "binary loop"


@pytest.mark.parametrize("suffix", [".png", ".pdf"])
def test_figure_written(tmp_path, suffix):
    out = tmp_path / "f.csv"
    fig = tmp_path / f"fig{suffix}"
    code = main(["simulate", "--out", str(out), "--melt", "MgO=8", "--melt", "FeO=9",
                 "--retention", "0.4", "--figure", str(fig), "--points", "5"])
    assert code == 0
    head = fig.read_bytes()[:8]
    assert head.startswith(b"\x89PNG" if suffix == ".png" else b"%PDF")


def test_same_settings_give_identical_numbers(tmp_path):
    args = ["--melt", "MgO=9", "--melt", "FeO=9", "--retention", "0.3", "--f-rim", "0.15"]
    main(["simulate", "--out", str(tmp_path / "a.csv"), *args])
    main(["simulate", "--out", str(tmp_path / "b.csv"), *args])

    def body(p):
        return [x for x in p.read_text().splitlines() if not x.startswith("# written_utc")]

    assert body(tmp_path / "a.csv") == body(tmp_path / "b.csv")


@pytest.mark.parametrize(
    ("extra", "message"),
    [
        (["--retention", "1.5"], "--retention must lie in"),
        (["--mg-number", "65"], "not a percentage"),
        (["--f-rim", "0.95", "--mg-number", "0.3"], "cannot simulate this scenario"),
        (["--kd-law", "toplis_2005"], "needs a full melt analysis"),
        (["--h2o", "2"], "--h2o applies to plagioclase only"),
        (["--loop", "--kd", "0.3"], "does not apply with --loop"),
        (["--points", "1"], "--points must be"),
        (["--trace", "Ni=abc"], "--trace expects"),
        (["--fe3", "0.1", "--delta-qfm", "1"], "either --fe3 or --delta-qfm"),
        (["--melt", "Sio2=50"], "unknown oxide(s) ['Sio2']"),
        (["--trace", "Sr"], "no partitioning law for Sr in olivine"),
        (["--trace-d", "Co=3"], "no --trace asks for them"),
        (["--trace", "Co", "--trace-d", "Co=-1"], "--trace-d expects EL=D"),
    ],
)
def test_bad_options_exit_2_with_message(tmp_path, capsys, extra, message):
    code = main(["simulate", "--out", str(tmp_path / "x.csv"), "--melt", "MgO=8",
                 "--melt", "FeO=9", *extra])
    assert code == 2
    err = capsys.readouterr().err
    assert err.startswith("zoning simulate: error:")
    assert message in err
    assert not (tmp_path / "x.csv").exists()


def test_constant_trace_d(tmp_path):
    out = tmp_path / "co.csv"
    code = main(["simulate", "--out", str(out), "--melt", "MgO=8", "--melt", "FeO=9",
                 "--trace", "Co=50", "--trace-d", "Co=3", "--f-rim", "0.05", "--points", "4"])
    assert code == 0
    table, meta = _read(out)
    # constant D: crystal = D x melt at every spot (definition of D).
    assert_allclose(table["crystal_co_ppm"], 3 * table["melt_co_ppm"], rtol=RTOL_IDENTITY)
    assert table["melt_co_ppm"].iloc[0] == pytest.approx(50.0)
    assert meta["trace_d"] == "Co=3"


def test_plagioclase_trace_needs_temperature(tmp_path, capsys):
    code = main(["simulate", "--out", str(tmp_path / "p.csv"), "--mineral", "plagioclase",
                 "--melt", "CaO=11", "--melt", "Na2O=3", "--trace", "Sr"])
    assert code == 2
    assert "needs a temperature: give --temperature-c" in capsys.readouterr().err


def test_missing_reference_melt_and_bad_out(tmp_path, capsys):
    assert main(["simulate", "--out", str(tmp_path / "x.csv"), "--mg-number", "0.7"]) == 2
    assert "needs the reference melt FeO" in capsys.readouterr().err
    assert main(["simulate", "--out", str(tmp_path / "x.txt"), "--melt", "FeO=9",
                 "--mg-number", "0.7"]) == 2
    assert "--out must name a .csv file" in capsys.readouterr().err
    with pytest.raises(SystemExit) as exc:
        main(["simulate", "--out", str(tmp_path / "x.csv"), "--mineral", "pyroxene"])
    assert exc.value.code == 2


def test_thermometer_range_warning_reaches_user(tmp_path, capsys):
    # The CLI prints ZoningWarnings as one "warning:" line on stderr.
    with warnings.catch_warnings():
        warnings.simplefilter("always", CalibrationRangeWarning)
        code = main(["simulate", "--out", str(tmp_path / "w.csv"), "--melt", "MgO=12.6",
                     "--melt", "FeO=9.2", "--points", "3"])
    assert code == 0
    err = capsys.readouterr().err
    assert "warning:" in err and "helz_thornber_1987 thermometer" in err
