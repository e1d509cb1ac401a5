"""`zoning batch`: executors, fault tolerance, fingerprints, Ctrl-C, kill and rerun.

The fits use a short traverse and short chains (walkers/steps in the
project defaults) so that the tests stay quick; the numbers are not the
point here, the batch machinery is.
"""

import io
import json
import os
import signal
import subprocess
import sys
import time
import warnings
from pathlib import Path

import openpyxl
import pandas as pd
import pytest
from zoning.demo_data import DEMO_DIR
from zoning.io.results import summary_table

from zoning.cli import main
from zoning.exceptions import ProjectError
from zoning.workflow import read_project, run_batch

FERROLYN = DEMO_DIR / "ferrolyn"
FAST = ("walkers = 8\nsteps = 100\nfigures = false\nreport = false\n"
        "section_h_over_r = 0\ndiffusion_length_um = 0\n")


def _small_export(path: Path, n: int = 12, *, rim: bool = False) -> Path:
    """First (or, with `rim`, last) `n` spots of a demo olivine traverse, without NiO.

    The first spots lie in the flat core, whose orientation must be confirmed
    (project key ``orientation``); the last ones hold the zoned rim, whose
    orientation is found from the data.
    """
    df = pd.read_csv(FERROLYN / "FRL-07_ol2.csv", sep=";", decimal=",", encoding="latin-1")
    part = df.tail(n) if rim else df.head(n)
    part.drop(columns=["NiO"]).to_csv(path, index=False)
    return path


def _project(tmp_path: Path, names, *, defaults: str = FAST, bad: tuple = ()) -> Path:
    data = tmp_path / "data"
    data.mkdir(exist_ok=True)
    _small_export(data / "ol.csv")
    (data / "bad.csv").write_text("Point,Comment\n1,nothing here\n", encoding="utf-8")
    # the first spots of a core are flat: the orientation must be confirmed
    lines = ["[defaults]", 'mineral = "olivine"', "melt = { FeO = 9.8 }", "seed = 3",
             'orientation = "core-to-rim"', defaults]
    for name in names:
        lines += [f'[samples."{name}"]', f'file = "{"bad.csv" if name in bad else "ol.csv"}"']
    path = data / "project.toml"
    path.write_text("\n".join(lines) + "\n", encoding="utf-8")
    return path


def _read_summary(out: Path) -> pd.DataFrame:
    return pd.read_csv(out / "summary.csv", comment="#", keep_default_na=False)


def test_batch_writes_summary_sample_folders_figures_and_report(tmp_path):
    path = _project(tmp_path, ["S1", "S2"])
    text = path.read_text(encoding="utf-8").replace(
        '[samples."S1"]\n', '[samples."S1"]\nfigures = true\nreport = true\n')
    path.write_text(text, encoding="utf-8")
    out = tmp_path / "out"
    stream = io.StringIO()
    result = run_batch(read_project(path), out, workers=1, progress=stream)
    assert [o.status for o in result.outcomes] == ["fitted", "fitted"]
    summary = _read_summary(out)
    assert summary["sample"].tolist() == ["S1", "S2"]
    # Same columns as `zoning fit` (summary_table), then file and error.
    expected = [c for c in summary_table([]).columns]
    assert [c for c in summary.columns if c in expected] == expected
    assert summary.columns[-2:].tolist() == ["file", "error"]
    assert (summary["error"] == "").all()
    # Each warning of a fit is stated once: in 'warnings', not again in 'batch_warnings'.
    assert summary["warnings"].fillna("").str.len().gt(0).all()
    for stated, extra in zip(summary["warnings"].fillna(""),
                             summary.get("batch_warnings", pd.Series([""] * len(summary)))
                             .fillna(""), strict=True):
        for text in filter(None, stated.split("; ")):
            assert text not in extra
    files = {p.name for p in (out / "S1").iterdir()}
    assert {"fit.json", "profile.csv", "fingerprint.json", "report.pdf", "profile.png",
            "profile.pdf", "melt_path.png", "posterior.pdf"} <= files
    assert (out / "S1" / "report.pdf").read_bytes().startswith(b"%PDF")
    # figures = false, report = false: fit outputs only.
    assert {p.name for p in (out / "S2").iterdir()} == {
        "fit.json", "profile.csv", "profile.json", "fingerprint.json", ".zoning-manifest.json"}
    assert (out / "summary.xlsx").exists() and (out / "overview.png").exists()
    # summary.xlsx: the same table with a units row and its provenance.
    book = openpyxl.load_workbook(out / "summary.xlsx")
    sheet = book["summary"]
    assert [c.value for c in sheet[1]][: len(summary.columns)] == summary.columns.tolist()
    units = dict(zip(summary.columns, [c.value for c in sheet[2]], strict=False))
    assert units["melt_mg_number"] == "molar fraction" and units["n_spots"] == "count"
    assert sheet.freeze_panes == "B3" and sheet.max_row == 2 + len(summary)
    col = summary.columns.tolist().index("melt_mg_number") + 1
    assert sheet.cell(3, col).value == summary["melt_mg_number"].iloc[0]  # as in the CSV
    provenance = {r[0].value: r[1].value for r in book["provenance"].iter_rows(min_row=2)}
    assert provenance["project"] == str(read_project(path).path)
    # The batch report says which project entry reproduces it.
    fit = json.loads((out / "S1" / "fit.json").read_text(encoding="utf-8"))
    assert fit["settings"]["project_entry"]["sample"] == "S1"
    assert fit["settings"]["project_entry"]["project"] == str(read_project(path).path)
    text = stream.getvalue()
    assert "2/2 S2" in text and "elapsed" in text and "remaining" in text


def test_rerun_skips_unchanged_samples_and_redoes_changed_ones(tmp_path):
    path = _project(tmp_path, ["S1", "S2", "S3"])
    out = tmp_path / "out"
    first = run_batch(read_project(path), out, workers=1, progress=False)
    assert first.n_fitted == 3
    stamp = (out / "S2" / "fit.json").stat().st_mtime_ns
    summary_first = _read_summary(out)
    assert summary_first["run_status"].tolist() == ["fitted"] * 3
    again = run_batch(read_project(path), out, workers=1, progress=False)
    assert [o.status for o in again.outcomes] == ["unchanged"] * 3
    summary_again = _read_summary(out)
    assert summary_again["run_status"].tolist() == ["unchanged"] * 3
    numbers = [c for c in summary_first.columns if not c.startswith("run_")]
    pd.testing.assert_frame_equal(summary_again[numbers], summary_first[numbers])  # exact
    assert (out / "S2" / "fit.json").stat().st_mtime_ns == stamp
    assert _read_summary(out)["sample"].tolist() == ["S1", "S2", "S3"]
    # A changed setting for one sample refits that sample only.
    text = path.read_text(encoding="utf-8").replace(
        '[samples."S3"]\n', '[samples."S3"]\nseed = 4\n')
    path.write_text(text, encoding="utf-8")
    third = run_batch(read_project(path), out, workers=1, progress=False)
    assert [o.status for o in third.outcomes] == ["unchanged", "unchanged", "fitted"]
    # A sample whose outputs were deleted is refitted even if nothing else changed.
    (out / "S1" / "fit.json").unlink()
    fourth = run_batch(read_project(path), out, workers=1, progress=False)
    assert [o.status for o in fourth.outcomes] == ["fitted", "unchanged", "unchanged"]


def test_forced_rerun_refits_and_gives_identical_numbers(tmp_path):
    path = _project(tmp_path, ["S1"])
    a = run_batch(read_project(path), tmp_path / "a", workers=1, progress=False)
    b = run_batch(read_project(path), tmp_path / "a", workers=1, progress=False, force=True)
    assert b.n_fitted == 1
    cols = [c for c in a.summary.columns if c != "file" and not c.startswith("run_")]
    pd.testing.assert_frame_equal(a.summary[cols], b.summary[cols])
    assert b.summary["run_note"].tolist() == ["refitted on request (--force)"]


def test_bad_file_is_listed_with_its_error_and_does_not_stop_the_batch(tmp_path, capsys):
    path = _project(tmp_path, ["good", "broken", "good2"], bad=("broken",))
    out = tmp_path / "out"
    code = main(["batch", str(path), "--out", str(out), "--workers", "1", "--quiet"])
    assert code == 1
    summary = _read_summary(out)
    assert summary["sample"].tolist() == ["good", "broken", "good2"]
    err = summary.set_index("sample")["error"]
    assert err["good"] == "" and err["good2"] == ""
    assert "bad.csv" in err["broken"] and len(err["broken"]) > 20
    assert not (out / "broken").exists()
    captured = capsys.readouterr()
    assert "failed: broken" in captured.err
    # The failed sample is retried on the next run; the good ones are not refitted.
    again = run_batch(read_project(path), out, workers=1, progress=False)
    assert [o.status for o in again.outcomes] == ["unchanged", "failed", "unchanged"]


def test_names_are_sanitised_and_formula_cells_neutralised(tmp_path):
    path = _project(tmp_path, ["=HYPERLINK(1)", "../escape"])
    out = tmp_path / "out"
    run_batch(read_project(path), out, workers=1, progress=False)
    assert sorted(p.name for p in out.iterdir() if p.is_dir()) == ["=HYPERLINK(1)", "escape"]
    assert not (tmp_path / "escape").exists()
    raw = (out / "summary.csv").read_text(encoding="utf-8")
    assert "'=HYPERLINK(1)" in raw
    sheet = openpyxl.load_workbook(out / "summary.xlsx").active
    cells = [c.value for c in sheet["A"]]
    assert "'=HYPERLINK(1)" in cells and "=HYPERLINK(1)" not in cells


def test_batch_refuses_to_overwrite_input_files(tmp_path):
    path = _project(tmp_path, ["S1"])
    data = path.parent
    (data / "summary.csv").write_bytes((data / "ol.csv").read_bytes())
    text = path.read_text(encoding="utf-8").replace('file = "ol.csv"', 'file = "summary.csv"')
    path.write_text(text, encoding="utf-8")
    before = (data / "summary.csv").read_bytes()
    with pytest.raises(ProjectError, match="would overwrite an input file"):
        run_batch(read_project(path), data, workers=1, progress=False)
    assert (data / "summary.csv").read_bytes() == before


def test_batch_refuses_to_replace_a_folder_that_holds_inputs(tmp_path):
    path = _project(tmp_path, ["data"])
    with pytest.raises(ProjectError, match="would overwrite an input file"):
        run_batch(read_project(path), tmp_path, workers=1, progress=False)
    assert (tmp_path / "data" / "ol.csv").is_file()


def test_folder_batch_fits_every_export(tmp_path, capsys):
    folder = tmp_path / "exports"
    folder.mkdir()
    _small_export(folder / "a.csv", rim=True)
    _small_export(folder / "b.csv", n=11, rim=True)
    out = tmp_path / "out"
    code = main(["batch", str(folder), "--mineral", "olivine", "--melt", "FeO=9.8",
                 "--walkers", "8", "--steps", "100", "--out", str(out), "--workers", "1",
                 "--quiet"])
    assert code == 0, capsys.readouterr().err
    assert _read_summary(out)["sample"].tolist() == ["a", "b"]


def test_folder_batch_without_melt_is_a_clear_error(tmp_path, capsys):
    folder = tmp_path / "exports"
    folder.mkdir()
    _small_export(folder / "a.csv")
    assert main(["batch", str(folder)]) == 2
    assert "--melt FeO=9.5" in capsys.readouterr().err


def test_forty_samples_on_two_worker_processes_with_one_bad_file(tmp_path):
    names = [f"FRL-{k:02d}" for k in range(40)]
    path = _project(tmp_path, names, bad=("FRL-17",))
    out = tmp_path / "out"
    result = run_batch(read_project(path), out, workers=2, progress=False)
    assert len(result.outcomes) == 40
    assert result.n_failed == 1 and result.n_fitted == 39
    summary = _read_summary(out)
    assert summary["sample"].tolist() == names
    assert (summary["error"] != "").sum() == 1
    assert not list(out.glob(".partial-*"))


def _spawn_batch(path: Path, out: Path, workers: int) -> subprocess.Popen:
    return subprocess.Popen(
        [sys.executable, "-m", "zoning", "batch", str(path), "--out", str(out),
         "--workers", str(workers), "--quiet"],
        stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True, start_new_session=True,
    )


def _wait_for_done(out: Path, proc: subprocess.Popen, n: int = 1, timeout: float = 120.0):
    t0 = time.monotonic()
    while time.monotonic() - t0 < timeout:
        # pathlib's "*" also matches hidden folders: count only sample folders
        # already moved into place, not the .partial-* ones still being written.
        finished = [p for p in out.glob("*/fingerprint.json")
                    if not p.parent.name.startswith(".")]
        if len(finished) >= n:
            return
        if proc.poll() is not None:
            pytest.fail(f"batch ended early: {proc.communicate()[1]}")
        time.sleep(0.05)
    os.killpg(proc.pid, signal.SIGKILL)
    proc.communicate()
    pytest.fail("no sample finished in time")


def _assert_complete_sample_folders(out: Path) -> list[str]:
    done = []
    for folder in out.iterdir():
        if not folder.is_dir() or folder.name.startswith("."):
            continue
        record = json.loads((folder / "fingerprint.json").read_text(encoding="utf-8"))
        assert record["status"] == "fitted"
        json.loads((folder / "fit.json").read_text(encoding="utf-8"))
        pd.read_csv(folder / "profile.csv", comment="#")
        done.append(record["row"]["sample"])
    return done


def test_killed_run_leaves_only_complete_results_and_rerun_finishes(tmp_path):
    names = [f"K{k}" for k in range(5)]
    path = _project(tmp_path, names)
    out = tmp_path / "out"
    proc = _spawn_batch(path, out, workers=1)
    _wait_for_done(out, proc, n=2)
    os.killpg(proc.pid, signal.SIGKILL)
    proc.communicate(timeout=30)
    done = _assert_complete_sample_folders(out)
    assert 2 <= len(done) < len(names)
    result = run_batch(read_project(path), out, workers=1, progress=False)
    status = {o.name: o.status for o in result.outcomes}
    assert all(status[n] == "unchanged" for n in done)
    assert all(status[n] == "fitted" for n in names if n not in done)
    assert _read_summary(out)["sample"].tolist() == names
    assert not list(out.glob(".partial-*"))


def test_ctrl_c_stops_cleanly_with_exit_code_130(tmp_path):
    names = [f"C{k}" for k in range(12)]
    path = _project(tmp_path, names)
    out = tmp_path / "out"
    proc = _spawn_batch(path, out, workers=2)
    _wait_for_done(out, proc, n=1)
    os.killpg(proc.pid, signal.SIGINT)  # what a terminal sends to the foreground group
    _, err = proc.communicate(timeout=60)
    assert proc.returncode == 130, err
    assert "interrupted" in err and "Traceback" not in err
    assert not list(out.glob(".partial-*"))
    done = _assert_complete_sample_folders(out)
    summary = _read_summary(out).set_index("sample")
    assert summary.index.tolist() == names  # every sample has a row that says what happened
    status = summary["run_status"]
    assert set(status[status == "fitted"].index) == set(done), summary[["run_status", "run_note"]]
    assert set(status[status != "fitted"]) == {"not run"}
    assert summary.loc[status == "not run", "run_note"].str.contains("SIGINT").all()
    side = json.loads((out / "summary.json").read_text(encoding="utf-8"))
    assert side["state"] == "interrupted by SIGINT"


def test_cluster_executor_from_dask_distributed(tmp_path, capsys):
    distributed = pytest.importorskip(
        "distributed", reason="Dask 'distributed' not installed (pip install 'zoning[dask]')")
    path = _project(tmp_path, ["D1", "D2"])
    out = tmp_path / "out"
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")  # the cluster's own deprecation chatter
        with distributed.LocalCluster(n_workers=1, threads_per_worker=1, processes=True,
                                      dashboard_address=None) as cluster:
            code = main(["batch", str(path), "--out", str(out), "--quiet",
                         "--cluster", cluster.scheduler_address])
    assert code == 0, capsys.readouterr().err
    summary = _read_summary(out)
    assert summary["sample"].tolist() == ["D1", "D2"]
    assert (summary["error"] == "").all()
