"""Never lose or damage a user's files; die cleanly; reruns verify; inputs checked first.

The hostile cases are built by ``tests/hostile/make_hostile.py``. Signals and
kills use real subprocesses; each test stays within a few seconds of fitting
(short traverses, 8 walkers x 100 steps, no figures).
"""

import json
import math
import os
import signal
import subprocess
import sys
import time
from pathlib import Path

import pandas as pd
import pytest
from hostile.make_hostile import (
    SECRET_LINES,
    few_spot_exports,
    fifo_input,
    folder_with_export_named_summary,
    not_an_export,
    project,
    project_outside_paths,
    small_export,
    thesis_folder,
)
from zoning.io.outputs import MANIFEST_NAME, OutputLock, read_manifest, verify_folder
from zoning.io.writers import write_table

from zoning._pool import WorkerLost, WorkerPool
from zoning.cli import main
from zoning.exceptions import OutputLockedError, OutputRefusedError
from zoning.workflow import read_project, run_batch

FOLDER_FAST = ["--mineral", "olivine", "--melt", "FeO=9.8", "--section-h-over-r", "0",
               "--diffusion-length-um", "0", "--walkers", "8", "--steps", "100",
               "--no-figures", "--no-report", "--quiet"]

#: Seconds after which no process of a stopped batch may be alive (the promise is 10 s).
GONE_WITHIN_S = 10.0


def _tree(folder: Path) -> dict[str, bytes]:
    return {str(p.relative_to(folder)): p.read_bytes()
            for p in sorted(folder.rglob("*")) if p.is_file()}


def _samples(tmp_path: Path, names) -> Path:
    small_export(tmp_path / "data" / "ol.csv")
    return project(tmp_path / "data", {n: "ol.csv" for n in names})


# --- write only what is ours ------------------------------------------------------------------

def test_out_into_a_thesis_folder_refuses_and_touches_nothing(tmp_path, capsys):
    root = tmp_path / "thesis"
    path = thesis_folder(root)
    before = _tree(root)
    assert main(["batch", str(path), "--out", str(root), "--quiet"]) == 2
    err = capsys.readouterr().err
    assert "'chapter2' (for sample 'chapter2') is a folder zoning did not create" in err
    assert "draft.tex" in err and "Nothing was written or deleted" in err
    assert _tree(root) == before  # not even a manifest or a lock file


def test_force_refits_but_keeps_files_zoning_did_not_write(tmp_path):
    path = _samples(tmp_path, ["S1"])
    out = tmp_path / "out"
    run_batch(read_project(path), out, workers=1, progress=False)
    mine = out / "S1" / "my_notes.txt"
    mine.write_text("keep me", encoding="utf-8")
    (out / "S1" / "fit.json").write_text("{}", encoding="utf-8")  # edited by hand
    again = run_batch(read_project(path), out, workers=1, progress=False, force=True)
    assert [o.status for o in again.outcomes] == ["fitted"]
    assert mine.read_text(encoding="utf-8") == "keep me"
    assert json.loads((out / "S1" / "fit.json").read_text(encoding="utf-8"))["sample"]
    assert verify_folder(out / "S1") == ""
    assert "my_notes.txt" not in read_manifest(out / "S1")["files"]


def test_foreign_batch_file_in_out_is_refused_before_any_fit(tmp_path):
    path = _samples(tmp_path, ["S1"])
    out = tmp_path / "out"
    out.mkdir()
    (out / "overview.png").write_bytes(b"my own figure")
    with pytest.raises(OutputRefusedError, match="overview.png"):
        run_batch(read_project(path), out, workers=1, progress=False)
    assert sorted(p.name for p in out.iterdir()) == ["overview.png"]


def test_folder_mode_never_reads_or_overwrites_its_inputs(tmp_path, capsys):
    folder = folder_with_export_named_summary(tmp_path / "exports")
    summary_export = (folder / "summary.csv").read_bytes()
    # The folder the exports are read from is not an output folder unless asked.
    assert main(["batch", str(folder), "--out", str(folder), *FOLDER_FAST]) == 2
    assert "is the folder the exports are read from" in capsys.readouterr().err
    # Default: outputs go into exports/results; the export called summary.csv is an input.
    assert main(["batch", str(folder), *FOLDER_FAST, "--workers", "1"]) == 0
    summary = pd.read_csv(folder / "results" / "summary.csv")
    assert summary["sample"].tolist() == ["FRL-07_ol2", "summary"]
    assert (folder / "summary.csv").read_bytes() == summary_export
    # A rerun does not read the results folder (nor its summary.xlsx) as input.
    assert main(["batch", str(folder), *FOLDER_FAST, "--workers", "1"]) == 0
    summary = pd.read_csv(folder / "results" / "summary.csv")
    assert summary["run_status"].tolist() == ["unchanged", "unchanged"]


def test_outputs_beside_inputs_are_never_read_back(tmp_path):
    folder = tmp_path / "exports"
    small_export(folder / "FRL-07_ol2.csv")
    args = ["batch", str(folder), "--out", str(folder), "--out-beside-inputs", *FOLDER_FAST,
            "--workers", "1"]
    assert main(args) == 0
    assert (folder / "summary.xlsx").is_file() and (folder / "summary.csv").is_file()
    assert main(args) == 0  # summary.csv / summary.xlsx listed in the manifest: not inputs
    summary = pd.read_csv(folder / "summary.csv")
    assert summary["sample"].tolist() == ["FRL-07_ol2"]
    assert summary["run_status"].tolist() == ["unchanged"]


# --- reruns verify ------------------------------------------------------------------------------

@pytest.mark.parametrize(("damage", "reason"), [
    ("empty", "fit.json was emptied"),
    ("edit", "fit.json was changed after it was written"),
    ("delete", "profile.csv is missing"),
])
def test_rerun_refits_a_damaged_sample_and_says_why(tmp_path, damage, reason):
    path = _samples(tmp_path, ["S1", "S2"])
    out = tmp_path / "out"
    run_batch(read_project(path), out, workers=1, progress=False)
    if damage == "empty":
        (out / "S1" / "fit.json").write_bytes(b"")
    elif damage == "edit":
        text = (out / "S1" / "fit.json").read_text(encoding="utf-8")
        (out / "S1" / "fit.json").write_text(text.replace('"', "'", 1), encoding="utf-8")
    else:
        (out / "S1" / "profile.csv").unlink()
    again = run_batch(read_project(path), out, workers=1, progress=False)
    assert [o.status for o in again.outcomes] == ["fitted", "unchanged"]
    summary = pd.read_csv(out / "summary.csv", keep_default_na=False).set_index("sample")
    assert summary.loc["S1", "run_note"] == f"refitted: {reason}"
    assert verify_folder(out / "S1") == ""


# --- tables anyone can open ---------------------------------------------------------------------

def test_summary_opens_with_plain_read_csv_and_carries_its_provenance(tmp_path):
    path = _samples(tmp_path, ["S1"])
    out = tmp_path / "out"
    run_batch(read_project(path), out, workers=1, progress=False)
    summary = pd.read_csv(out / "summary.csv")
    assert summary.columns[0] == "sample"
    assert pd.api.types.is_integer_dtype(summary["n_spots"])
    for col in [c for c in summary.columns if c.endswith(("_lo95", "_hi95"))]:
        for text in summary[col].dropna().astype(str):
            mantissa = text.lower().split("e")[0].replace("-", "").replace(".", "").lstrip("0")
            assert len(mantissa) <= 4, (col, text)  # 4 significant digits
    side = json.loads((out / "summary.json").read_text(encoding="utf-8"))
    assert side["project"] == str(path.resolve())
    assert side["state"] == "complete" and side["counts"]["fitted"] == 1
    assert side["versions"]["numpy"] and side["samples"]["S1"]["settings"]
    profile = pd.read_csv(out / "S1" / "profile.csv")
    assert len(profile) == 12
    manifest = read_manifest(out)
    assert {"summary.csv", "summary.json"} <= set(manifest["files"])


@pytest.mark.parametrize("text", [" =1+1", "＝1+1", "\u3000+SUM(A1)", "－2+3", "  @x"])
def test_leading_space_and_full_width_formula_signs_are_neutralised(tmp_path, text):
    write_table(pd.DataFrame({"label": [text, "-3.5", "core"]}), tmp_path / "t.csv")
    cells = (tmp_path / "t.csv").read_text(encoding="utf-8").splitlines()[1:]
    assert cells == ["'" + text, "-3.5", "core"]


# --- inputs and settings ------------------------------------------------------------------------

def test_project_paths_stay_inside_the_project_folder(tmp_path):
    path = project_outside_paths(tmp_path / "proj", tmp_path / "elsewhere")
    out = tmp_path / "out"
    result = run_batch(read_project(path), out, workers=1, progress=False)
    status = {o.name: o.status for o in result.outcomes}
    assert status == {"inside": "fitted", "absolute": "failed", "dotdot": "failed",
                      "link": "failed"}
    text = (out / "summary.csv").read_text(encoding="utf-8")
    assert "--allow-outside-paths" in text
    assert not any(line in text for line in SECRET_LINES)
    allowed = read_project(path, allow_outside_paths=True)
    assert {j.name: j.problem for j in allowed.jobs}["dotdot"] == ""


def test_a_file_that_is_not_an_export_is_a_failed_row_without_its_content(tmp_path):
    path = not_an_export(tmp_path / "proj")
    result = run_batch(read_project(path), tmp_path / "out", workers=1, progress=False)
    assert [o.status for o in result.outcomes] == ["fitted", "failed"]
    assert "not a readable microprobe export" in result.outcomes[1].error
    for name in ("summary.csv", "summary.json"):
        text = (tmp_path / "out" / name).read_text(encoding="utf-8")
        assert not any(line in text for line in SECRET_LINES)


@pytest.mark.skipif(not hasattr(os, "mkfifo"), reason="no named pipes on this platform")
def test_a_named_pipe_is_never_opened(tmp_path, capsys):
    folder = fifo_input(tmp_path / "exports")
    assert main(["batch", str(folder), *FOLDER_FAST, "--workers", "1"]) == 1
    summary = pd.read_csv(folder / "results" / "summary.csv", keep_default_na=False)
    error = summary.set_index("sample").loc["pipe", "error"]
    assert "named pipe (FIFO)" in error and "not opened" in error
    assert main(["inspect", str(folder / "pipe.csv")]) == 2
    assert "named pipe" in capsys.readouterr().err


def test_missing_file_and_folder_as_file_are_failed_rows(tmp_path):
    data = tmp_path / "data"
    small_export(data / "ol.csv")
    (data / "adir.csv").mkdir()
    path = project(data, {"good": "ol.csv", "gone": "missing.csv", "folder": "adir.csv"})
    result = run_batch(read_project(path), tmp_path / "out", workers=1, progress=False)
    assert [o.status for o in result.outcomes] == ["fitted", "failed", "failed"]
    assert "not found" in result.outcomes[1].error
    assert "is a folder, not an export file" in result.outcomes[2].error


@pytest.mark.parametrize(("option", "value", "match"), [
    ("--walkers", "-4", "--walkers must be between 8 and 2048; got -4"),
    ("--walkers", "100000", "--walkers must be between 8 and 2048"),
    ("--steps", "10000000", "--steps must be between 100 and 200000"),
    ("--seed", "-1", "--seed must be between 0 and 4294967295; got -1"),
])
def test_bad_sampler_settings_are_refused_before_reading(tmp_path, capsys, option, value, match):
    path = small_export(tmp_path / "ol.csv")
    assert main(["fit", str(path), "--melt", "FeO=9.8", option, value]) == 2
    assert match in capsys.readouterr().err
    assert not (tmp_path / "ol_fit").exists()


def test_walkers_times_steps_has_an_upper_bound_in_project_files(tmp_path, capsys):
    path = _samples(tmp_path, ["S1"])
    text = path.read_text(encoding="utf-8").replace("walkers = 8", "walkers = 2048")
    path.write_text(text.replace("steps = 100", "steps = 100000"), encoding="utf-8")
    assert main(["batch", str(path), "--out", str(tmp_path / "out"), "--quiet"]) == 2
    assert "walker steps is more than the limit" in capsys.readouterr().err


def test_out_that_is_a_file_is_refused_before_the_fit(tmp_path, capsys):
    path = small_export(tmp_path / "ol.csv")
    blocker = tmp_path / "taken.txt"
    blocker.write_text("mine", encoding="utf-8")
    for command in (["fit", str(path), "--melt", "FeO=9.8"], ["inspect", str(path)]):
        assert main([*command, "--out", str(blocker)]) == 2
        assert "is a file, not a folder" in capsys.readouterr().err
    assert blocker.read_text(encoding="utf-8") == "mine"


@pytest.mark.skipif(os.name != "posix" or os.geteuid() == 0,
                    reason="needs POSIX permissions and a non-root user")
def test_read_only_out_is_refused_before_the_fit(tmp_path, capsys):
    path = small_export(tmp_path / "ol.csv")
    locked = tmp_path / "ro"
    locked.mkdir()
    locked.chmod(0o500)
    try:
        assert main(["fit", str(path), "--melt", "FeO=9.8", "--out", str(locked / "o")]) == 2
        assert "cannot write into the parent folder" in capsys.readouterr().err
    finally:
        locked.chmod(0o700)


def test_one_spot_and_equal_distances_name_the_real_problem(tmp_path, capsys):
    files = few_spot_exports(tmp_path)
    assert main(["fit", str(files["one_spot"]), "--melt", "FeO=9.8"]) == 2
    err = capsys.readouterr().err
    assert "only 1 usable spot" in err and "at least 3 spots" in err
    assert "radius must be positive" not in err
    assert main(["fit", str(files["same_distance"]), "--melt", "FeO=9.8"]) == 2
    err = capsys.readouterr().err
    assert "cannot be fitted" in err and "radius must be positive" not in err


def test_inspect_exits_non_zero_when_no_spot_is_usable(tmp_path, capsys):
    path = tmp_path / "bad.csv"
    pd.DataFrame({"Point": [1, 2], "SiO2": [40.0, 41.0], "MgO": [0.0, 0.0],
                  "FeO": [0.0, 0.0], "Distance (um)": [0, 10]}).to_csv(path, index=False)
    assert main(["inspect", str(path), "--mineral", "olivine", "--out", str(tmp_path / "o")]) == 1
    assert "no usable spot" in capsys.readouterr().err


def test_closed_pipe_ends_quietly(tmp_path):
    path = small_export(tmp_path / "ol.csv", n=12)
    script = ("import sys\nfrom zoning.cli import main\n"
              "sys.exit(main(['inspect', sys.argv[1], '--out', sys.argv[2]]))\n")
    proc = subprocess.Popen([sys.executable, "-c", script, str(path), str(tmp_path / "o")],
                            stdout=subprocess.PIPE, stderr=subprocess.PIPE)
    proc.stdout.close()  # like `| head` going away before zoning writes
    with proc.stderr:
        err = proc.stderr.read().decode()
    proc.wait(timeout=60)
    assert "Traceback" not in err and "BrokenPipe" not in err
    assert proc.returncode == 141


# --- lock ---------------------------------------------------------------------------------------

def test_a_second_run_on_the_same_out_is_refused_naming_the_first(tmp_path):
    out = tmp_path / "out"
    out.mkdir()
    first = OutputLock(out).acquire()
    try:
        with pytest.raises(OutputLockedError, match=rf"pid {os.getpid()} on .*Wait for it"):
            OutputLock(out).acquire()
        path = _samples(tmp_path, ["S1"])
        assert main(["batch", str(path), "--out", str(out), "--quiet"]) == 75
    finally:
        first.release()
    second = OutputLock(out).acquire()
    assert not second.previous_unfinished  # the first one finished
    second.release()


def test_a_lock_left_by_a_killed_run_is_detected(tmp_path):
    out = tmp_path / "out"
    out.mkdir()
    script = ("import sys, time\nfrom zoning.io.outputs import OutputLock\n"
              "OutputLock(sys.argv[1]).acquire()\nprint('locked', flush=True)\ntime.sleep(60)\n")
    proc = subprocess.Popen([sys.executable, "-c", script, str(out)], stdout=subprocess.PIPE,
                            text=True)
    assert proc.stdout.readline().strip() == "locked"
    with pytest.raises(OutputLockedError, match=f"pid {proc.pid}"):
        OutputLock(out).acquire()
    proc.kill()
    proc.wait(timeout=10)
    proc.stdout.close()
    lock = OutputLock(out).acquire()  # the OS released it with the process
    assert lock.previous_unfinished and lock.previous["pid"] == proc.pid
    lock.release()


# --- workers ------------------------------------------------------------------------------------

def test_a_dying_worker_costs_only_its_own_task():
    results = {}
    tasks = [("a", math.sqrt, (4.0,)), ("crash", os._exit, (3,)), ("b", math.sqrt, (9.0,)),
             ("killed", signal.raise_signal, (signal.SIGKILL,)), ("c", math.sqrt, (16.0,)),
             ("d", math.sqrt, (25.0,))]
    pool = WorkerPool(2)
    try:
        pool.run(tasks, lambda key, result: results.__setitem__(key, result))
    finally:
        pool.close()
    assert {k: results[k] for k in "abcd"} == {"a": 2.0, "b": 3.0, "c": 4.0, "d": 5.0}
    assert isinstance(results["crash"], WorkerLost)
    assert "exit code 3" in results["crash"].message
    assert isinstance(results["killed"], WorkerLost)
    assert "SIGKILL" in results["killed"].message


def _spawn(path: Path, out: Path, workers: int = 2) -> subprocess.Popen:
    return subprocess.Popen(
        [sys.executable, "-m", "zoning", "batch", str(path), "--out", str(out),
         "--workers", str(workers), "--quiet"],
        stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True, start_new_session=True,
    )


def _session_processes(sid: int) -> list[int]:
    """Live (not zombie) processes of a session (Linux /proc)."""
    pids = []
    for entry in os.listdir("/proc"):
        if not entry.isdigit():
            continue
        try:
            with open(f"/proc/{entry}/stat", encoding="ascii", errors="replace") as fh:
                fields = fh.read().rsplit(")", 1)[1].split()
        except OSError:
            continue
        if fields[0] != "Z" and int(fields[3]) == sid:
            pids.append(int(entry))
    return pids


def _wait_for(predicate, proc, timeout=120.0, what="the batch to start"):
    t0 = time.monotonic()
    while time.monotonic() - t0 < timeout:
        value = predicate()
        if value:
            return value
        if proc.poll() is not None:
            pytest.fail(f"batch ended early: {proc.communicate()[1]}")
        time.sleep(0.05)
    os.killpg(proc.pid, signal.SIGKILL)
    pytest.fail(f"timed out waiting for {what}")


def _workers_and_one_done(out: Path):
    try:
        record = json.loads((out / ".zoning-lock").read_text(encoding="utf-8"))
    except (OSError, ValueError):
        return None
    done = [f for f in out.glob("*/" + MANIFEST_NAME) if not f.parent.name.startswith(".")]
    return record.get("workers") if record.get("workers") and done else None


needs_proc = pytest.mark.skipif(not Path("/proc/self/stat").exists(), reason="needs Linux /proc")


def _gone(sid: int) -> float:
    t0 = time.monotonic()
    while _session_processes(sid) and time.monotonic() - t0 < GONE_WITHIN_S + 5:
        time.sleep(0.1)
    return time.monotonic() - t0


@needs_proc
def test_kill_9_of_the_parent_ends_the_workers_and_the_next_run_repairs(tmp_path):
    names = [f"K{k}" for k in range(5)]
    path = _samples(tmp_path, names)
    out = tmp_path / "out"
    proc = _spawn(path, out)
    try:
        _wait_for(lambda: _workers_and_one_done(out), proc)
        os.kill(proc.pid, signal.SIGKILL)  # the parent only, as the OOM killer would
        proc.communicate(timeout=30)
        seconds = _gone(proc.pid)
        assert not _session_processes(proc.pid), "workers outlived the parent"
        assert seconds < GONE_WITHIN_S
    finally:
        try:
            os.killpg(proc.pid, signal.SIGKILL)
        except ProcessLookupError:
            pass
    stale = pd.read_csv(out / "summary.csv", keep_default_na=False)
    assert set(stale["run_status"]) <= {"fitted", "pending"}  # it says the run was unfinished
    assert json.loads((out / "summary.json").read_text(encoding="utf-8"))["state"] == "running"
    result = run_batch(read_project(path), out, workers=1, progress=False)
    assert any("stopped without finishing" in n for n in result.notes)
    assert {o.status for o in result.outcomes} <= {"fitted", "unchanged"}
    summary = pd.read_csv(out / "summary.csv", keep_default_na=False)
    assert summary["sample"].tolist() == names
    assert not list(out.glob(".partial-*"))  # build folders of the dead workers removed
    assert all(verify_folder(out / n) == "" for n in names)


@needs_proc
@pytest.mark.parametrize("signame", ["SIGTERM", pytest.param("SIGHUP", marks=pytest.mark.slow)])
def test_stop_signal_to_the_parent_stops_workers_and_marks_the_run(tmp_path, signame):
    names = [f"T{k}" for k in range(5)]
    path = _samples(tmp_path, names)
    out = tmp_path / "out"
    proc = _spawn(path, out)
    try:
        _wait_for(lambda: _workers_and_one_done(out), proc)
        signum = getattr(signal, signame)
        os.kill(proc.pid, signum)  # what `kill`, `timeout` and schedulers send
        _, err = proc.communicate(timeout=60)
        assert proc.returncode == 128 + signum, err
        assert f"interrupted ({signame})" in err and "Traceback" not in err
        assert _gone(proc.pid) < GONE_WITHIN_S
    finally:
        try:
            os.killpg(proc.pid, signal.SIGKILL)
        except ProcessLookupError:
            pass
    summary = pd.read_csv(out / "summary.csv", keep_default_na=False).set_index("sample")
    assert summary.index.tolist() == names
    done = {p.parent.name for p in out.glob("*/" + MANIFEST_NAME)
            if not p.parent.name.startswith(".")}
    status = summary["run_status"]
    assert set(status[status == "fitted"].index) == done
    assert (summary.loc[status != "fitted", "run_note"].str.contains(signame)).all()
    assert json.loads((out / "summary.json").read_text())["state"] == f"interrupted by {signame}"
    assert not list(out.glob(".partial-*"))


@needs_proc
def test_a_worker_killed_by_the_system_fails_one_sample_only(tmp_path):
    names = [f"W{k}" for k in range(4)]
    path = _samples(tmp_path, names)
    out = tmp_path / "out"
    proc = _spawn(path, out)
    try:
        workers = _wait_for(lambda: _workers_and_one_done(out), proc)
        os.kill(workers[0], signal.SIGKILL)
        _, err = proc.communicate(timeout=120)
    finally:
        try:
            os.killpg(proc.pid, signal.SIGKILL)
        except ProcessLookupError:
            pass
    summary = pd.read_csv(out / "summary.csv", keep_default_na=False).set_index("sample")
    failed = summary[summary["run_status"] == "failed"]
    assert len(failed) <= 1, failed["error"]  # 0 if the worker was between two samples
    assert (summary["run_status"] == "fitted").sum() == len(names) - len(failed)
    for message in failed["error"]:
        assert "killed by SIGKILL" in message and "only this sample" in message
    assert proc.returncode == (1 if len(failed) else 0), err
