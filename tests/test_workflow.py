"""Project files: reading, option mapping, errors and fingerprints."""

import argparse
import inspect
import re
import shutil
from pathlib import Path

import pytest
from zoning.demo_data import DEMO_DIR

from zoning.cli import fit as fit_cli
from zoning.exceptions import ProjectError
from zoning.workflow import (
    FIT_OPTIONS,
    JOINT_OPTIONS,
    OUTPUT_OPTIONS,
    READ_OPTIONS,
    fingerprint,
    project_from_folder,
    read_project,
)

FERROLYN = DEMO_DIR / "ferrolyn"


def _write(tmp_path, text, files=("a.csv",)):
    for name in files:
        shutil.copy(FERROLYN / "FRL-07_ol1.csv", tmp_path / name)
    path = tmp_path / "project.toml"
    path.write_text(text, encoding="utf-8")
    return path


def test_demo_project_reads_with_every_sample_and_resolved_options():
    project = read_project(FERROLYN / "project.toml")
    names = [j.name for j in project.jobs]
    assert names == ["FRL-07 ol1", "FRL-07 ol2", "FRL-07 ol3", "FRL-03 ol1",
                     "FRL-12 pl1", "FRL-12 pl2", "FRL-21 olivines"]
    assert project.jobs[-1].joint and not project.jobs[0].joint
    ol1 = project.jobs[0]
    assert ol1.file == str((FERROLYN / "FRL-07_ol1.csv").resolve())
    assert ol1.read_options == {"mineral": "olivine"}
    assert ol1.fit_options["melt"] == {"FeO": 9.8}
    assert ol1.fit_options["n_walkers"] == 16 and ol1.fit_options["n_steps"] == 300
    pl1 = project.jobs[4]
    assert pl1.fit_options["kd"] == 2.0 and pl1.fit_options["kd_sd"] == 0.3
    assert project.jobs[3].read_options["orientation"] == "core-to-rim"


def test_option_map_targets_are_keywords_of_fit_and_read():
    from zoning.fitting import fit_traverse
    from zoning.io import read_traverses

    fit_kw = set(inspect.signature(fit_traverse).parameters)
    read_kw = set(inspect.signature(read_traverses).parameters)
    assert {target for target, _ in FIT_OPTIONS.values()} <= fit_kw
    assert {target for target, _ in READ_OPTIONS.values()} <= read_kw


def test_every_zoning_fit_option_has_a_project_file_name():
    parser = argparse.ArgumentParser()
    sub = parser.add_subparsers()
    p = fit_cli.add_parser(sub)
    names = {a.option_strings[0].lstrip("-").replace("-", "_")
             for a in p._actions if a.option_strings and a.dest != "help"}
    names -= {"out"}  # the output folder is a batch argument, not a per-sample option
    names -= {"name"}  # a joint sample's name is its [samples."..."] table name
    # --no-figures / --no-report are the project keys figures / report = false
    names = {n[len("no_"):] if n in ("no_figures", "no_report") else n for n in names}
    known = set(FIT_OPTIONS) | set(READ_OPTIONS) | set(JOINT_OPTIONS) | set(OUTPUT_OPTIONS)
    assert names <= known, names - known


def test_sample_tables_override_defaults_and_melt_tables_merge(tmp_path):
    path = _write(tmp_path, """
[defaults]
melt = { FeO = 9.5, MgO = 8.0 }
kd = 0.30
steps = 100

[samples."A"]
file = "a.csv"
melt = { FeO = 10.0 }
kd = 0.33
range = "10:200"
free = ["f_core"]
""")
    job = read_project(path, overrides={"steps": 150}).jobs[0]
    assert job.fit_options["melt"] == {"FeO": 10.0, "MgO": 8.0}
    assert job.fit_options["kd"] == 0.33
    assert job.fit_options["n_steps"] == 150
    assert job.fit_options["distance_range"] == (10.0, 200.0)
    assert job.fit_options["free"] == ("f_core",)


@pytest.mark.parametrize(
    ("text", "match"),
    [
        ('[defaults]\nwalkerz = 3\n[samples."A"]\nfile = "a.csv"\n',
         r"unknown option 'walkerz' in \[defaults\].*Did you mean 'walkers'.*Valid names:.*steps"),
        ('[samples."A"]\nfile = "a.csv"\nkdd = 0.3\n',
         r"unknown option 'kdd' in \[samples.\"A\"\].*Valid names:.*file"),
        ('[defaults]\nfile = "a.csv"\n[samples."A"]\nfile = "a.csv"\n',
         r"'file' belongs in a \[samples"),
        ('[default]\n[samples."A"]\nfile = "a.csv"\n', r"unknown table \[default\]"),
        ('[samples."A"]\nkd = 0.3\n', r"has no 'file'"),
        ('[samples."A"]\nfile = "a.csv"\nkd = "high"\n',
         r"option 'kd' in \[samples.\"A\"\].*'high'; expected a number"),
        ('[samples."A"]\nfile = "a.csv"\nrange = "5-9"\n', r"option 'range'.*A:B"),
        ('[samples."A"]\nfile = "a.csv"\nmelt = 9.5\n', r"melt = \{ FeO = 9.5 \}"),
        ('[samples."A"]\nfile = "a.csv"\nmineral = "pyroxene"\n', r"'olivine', 'plagioclase'"),
        ('[samples."A"]\nfile = "a.csv"\nrobust = 1\n', r"true or false"),
        ("[defaults]\nkd = 0.3\n", r"no samples"),
        ('[samples."A"\nfile = "a.csv"\n', r"not valid TOML"),
    ],
)
def test_project_file_errors_name_key_table_and_remedy(tmp_path, text, match):
    path = _write(tmp_path, text)
    with pytest.raises(ProjectError, match=match):
        read_project(path)


def test_missing_sample_file_or_folder_is_a_problem_of_that_sample_only(tmp_path):
    (tmp_path / "adir.csv").mkdir()
    path = _write(tmp_path, '[samples."A"]\nfile = "missing.csv"\n'
                            '[samples."B"]\nfile = "adir.csv"\n')
    a, b = read_project(path).jobs
    assert re.search(r"missing.csv.*not found.*relative to", a.problem)
    assert "is a folder, not an export file" in b.problem


def test_missing_project_file_is_a_clear_error(tmp_path):
    with pytest.raises(ProjectError, match="not found"):
        read_project(tmp_path / "nope.toml")


def test_fingerprint_changes_with_input_bytes_and_settings_only(tmp_path):
    path = _write(tmp_path, '[samples."A"]\nfile = "a.csv"\nmelt = { FeO = 9.5 }\n')
    job = read_project(path).jobs[0]
    first = fingerprint(job)
    assert first == fingerprint(read_project(path).jobs[0])
    path.write_text('[samples."A"]\nfile = "a.csv"\nmelt = { FeO = 9.6 }\n', encoding="utf-8")
    assert fingerprint(read_project(path).jobs[0]) != first
    path.write_text('[samples."A"]\nfile = "a.csv"\nmelt = { FeO = 9.5 }\n', encoding="utf-8")
    assert fingerprint(read_project(path).jobs[0]) == first
    with open(tmp_path / "a.csv", "a", encoding="utf-8") as fh:
        fh.write("\n")
    assert fingerprint(read_project(path).jobs[0]) != first


def test_every_option_name_is_unique_across_groups():
    groups = [set(FIT_OPTIONS), set(READ_OPTIONS), set(OUTPUT_OPTIONS)]
    assert sum(len(g) for g in groups) == len(set().union(*groups))


def test_folder_project_has_one_sample_per_export(tmp_path):
    for name in ("FRL-07_ol1.csv", "FRL-07_ol2.csv", "FRL-07_ol3.txt"):
        shutil.copy(FERROLYN / name, tmp_path / name)
    (tmp_path / "notes.md").write_text("not an export", encoding="utf-8")
    project = project_from_folder(tmp_path, {"mineral": "olivine", "melt": {"FeO": 9.8}})
    assert [j.name for j in project.jobs] == ["FRL-07_ol1", "FRL-07_ol2", "FRL-07_ol3"]
    assert all(j.fit_options["melt"] == {"FeO": 9.8} for j in project.jobs)


def test_empty_folder_is_a_clear_error(tmp_path):
    with pytest.raises(ProjectError, match=r"no exports in folder.*\.csv"):
        project_from_folder(tmp_path, {"melt": {"FeO": 9.5}})


def test_zoning_batch_accepts_every_zoning_fit_option():
    from zoning.cli import batch as batch_cli

    def options(module):
        parser = argparse.ArgumentParser()
        p = module.add_parser(parser.add_subparsers())
        return {s for a in p._actions for s in a.option_strings}

    # --name names the one joint sample of a zoning fit run; a batch names its
    # samples by their project tables (or file names).
    assert options(fit_cli) - {"--name"} <= options(batch_cli)


def test_reading_options_are_project_keys_in_defaults_and_samples(tmp_path):
    path = _write(tmp_path, """
[defaults]
melt = { FeO = 9.5 }
fe3 = 0.12
sheet = "olivine"
iron = "charge-balance"
check = { total_min_wt = 98.0, total_max_wt = 101.0 }
column_map = { FeO = "FeO" }

[samples."A"]
file = "a.csv"
orientation = "rim-to-core"
core_um = 12.5
check = { total_min_wt = 97.5 }
column_map = { MgO = "MgO" }
sheet = 1

[samples."B"]
file = "a.csv"
melt = { FeO = 8.1, Fe2O3 = 1.6 }
""")
    a, b = read_project(path).jobs
    assert a.read_options == {
        "sheet": 1, "iron": "charge-balance", "orientation": "rim-to-core",
        "core_position_um": 12.5, "checks": {"total_min_wt": 97.5, "total_max_wt": 101.0},
        "column_map": {"FeO": "FeO", "MgO": "MgO"},
    }
    assert a.fit_options["fe3_fraction"] == 0.12
    # FeO + Fe2O3 in the sample's melt set its Fe3+/FeT: the default fe3 does not apply
    assert "fe3_fraction" not in b.fit_options
    assert b.fit_options["melt"] == {"FeO": 8.1, "Fe2O3": 1.6}
    assert b.read_options["sheet"] == "olivine"


@pytest.mark.parametrize(
    ("text", "match"),
    [
        ('[samples."A"]\nfile = "a.csv"\ncore_position_um = 3\n', r"now called 'core_um'"),
        ('[samples."A"]\nfile = "a.csv"\nchecks = { total_min_wt = 98 }\n',
         r"now called 'check'"),
        ('[samples."A"]\nfile = "a.csv"\ncheck = { total_mn_wt = 98 }\n',
         r"known quality-check settings \(not 'total_mn_wt'\): .*total_min_wt"),
        ('[samples."A"]\nfile = "a.csv"\norientation = "core-rim"\n',
         r"'core-to-rim', 'rim-to-core', 'rim-to-rim'"),
        ('[samples."A"]\nfile = "a.csv"\niron = "Fe2O3"\n', r"'FeO', 'reported'"),
        ('[samples."A"]\nfile = "a.csv"\nsheet = true\n', r"sheet name in quotes or a sheet"),
        ('[samples."A"]\nfile = "a.csv"\ncolumn_map = { FeO = 3 }\n',
         r'column_map = \{ FeO = "FeO tot"'),
        ('[samples."A"]\nfile = "a.csv"\nfe3 = 1.5\n', r"fraction Fe3\+/FeT in \[0, 1\)"),
    ],
)
def test_reading_option_errors_name_the_key_and_the_fix(tmp_path, text, match):
    with pytest.raises(ProjectError, match=match):
        read_project(_write(tmp_path, text))


def test_inspect_fit_and_batch_share_every_reading_option():
    from zoning.cli import batch as batch_cli
    from zoning.cli import inspect as inspect_cli

    def options(module):
        parser = argparse.ArgumentParser()
        p = module.add_parser(parser.add_subparsers())
        return {s: (a.choices and tuple(a.choices), a.type, a.nargs, type(a).__name__)
                for a in p._actions for s in a.option_strings}

    reading = {"--column-map", "--sheet", "--orientation", "--core-um", "--check", "--iron",
               "--mineral"}
    got = [options(m) for m in (inspect_cli, fit_cli, batch_cli)]
    for opts in got:
        assert reading <= set(opts)
    for name in reading:
        assert got[0][name] == got[1][name] == got[2][name], name


def test_command_line_reading_options_become_the_same_read_keywords():
    from zoning.cli import batch as batch_cli
    from zoning.cli import inspect as inspect_cli
    from zoning.cli._reading import reading_options
    from zoning.workflow import read_keywords

    argv = ["--column-map", "FeO=FeO tot", "--sheet", "2", "--orientation", "rim-to-core",
            "--core-um", "4", "--check", "total_min_wt=98", "--iron", "reported",
            "--mineral", "olivine"]
    parsed = []
    for module, extra in ((inspect_cli, []), (fit_cli, ["--melt", "FeO=9"]),
                          (batch_cli, ["--melt", "FeO=9"])):
        parser = argparse.ArgumentParser()
        module.add_parser(parser.add_subparsers(dest="command"))
        args = parser.parse_args([module.__name__.rsplit(".", 1)[-1], "x.csv", *argv, *extra])
        parsed.append(read_keywords(reading_options(args)))
    assert parsed[0] == parsed[1] == parsed[2] == {
        "mineral": "olivine", "column_map": {"FeO": "FeO tot"}, "sheet": "2",
        "orientation": "rim-to-core", "core_position_um": 4.0,
        "checks": {"total_min_wt": 98.0}, "iron": "reported"}


def test_joint_sample_lists_several_files_and_its_options(tmp_path):
    path = _write(tmp_path, """
[defaults]
melt = { FeO = 9.8 }
joint = true

[samples."FRL-21"]
files = ["a.csv", "b.csv"]
exclude = ["FRL-07 ol1"]
joint_retention = "hierarchical"
""", files=("a.csv", "b.csv"))
    (job,) = read_project(path).jobs
    assert job.joint and [Path(f).name for f in job.files] == ["a.csv", "b.csv"]
    assert job.joint_options == {"exclude": ("FRL-07 ol1",), "retention": "hierarchical"}
    assert "fit" in job.settings() and job.settings()["files"] == list(job.files)


def test_several_files_without_joint_say_what_to_add(tmp_path):
    path = _write(tmp_path, """
[samples."FRL-21"]
files = ["a.csv", "b.csv"]
""", files=("a.csv", "b.csv"))
    with pytest.raises(ProjectError, match="add joint = true"):
        read_project(path)
    bad = _write(tmp_path, """
[samples."FRL-21"]
files = "a.csv"
joint = true
""")
    with pytest.raises(ProjectError, match="must be a list of file names"):
        read_project(bad)


def test_joint_samples_receive_the_section_and_diffusion_keys_but_not_redox(tmp_path,
                                                                             monkeypatch):
    import zoning.fitting as fitting

    from zoning import workflow

    path = _write(tmp_path, """
[defaults]
melt = { FeO = 9.8 }
section_h_over_r = "free"
diffusion_length_um = "free"

[samples."FRL-21"]
files = ["a.csv", "b.csv"]
joint = true
""", files=("a.csv", "b.csv"))
    (job,) = read_project(path).jobs
    seen = {}

    class _Stop(Exception):
        pass

    def fake(traverses, **kw):
        seen.update(kw)
        raise _Stop

    monkeypatch.setattr(fitting, "fit_sample", fake)
    with pytest.raises(_Stop):
        workflow._fit_and_write_joint(job, tmp_path / "build")
    assert seen["section_h_over_r"] == "free"
    assert seen["diffusion_length_um"] == "free"
    assert "delta_qfm" not in seen
