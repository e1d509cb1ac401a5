"""The package layout maps three folders onto one import namespace."""

import subprocess
import sys


def test_subpackages_import_and_stdlib_io_is_not_shadowed(tmp_path):
    # Run from outside the repository so that only the installed mapping counts.
    code = (
        "import io, zoning, zoning.io, zoning.fitting;"
        "assert hasattr(io, 'StringIO'), io.__file__;"
        "assert zoning.io.__name__ == 'zoning.io';"
        "print('ok')"
    )
    out = subprocess.run(
        [sys.executable, "-c", code], cwd=tmp_path, capture_output=True, text=True, check=False
    )
    assert out.returncode == 0, out.stderr
    assert out.stdout.strip() == "ok"


def test_demo_data_is_reachable_from_the_installed_package():
    from zoning.demo_data import DEMO_DIR

    assert DEMO_DIR.is_dir()
    assert (DEMO_DIR / "__init__.py").exists()


def test_command_line_help_runs():
    out = subprocess.run(
        [sys.executable, "-m", "zoning", "--help"], capture_output=True, text=True, check=False
    )
    assert out.returncode == 0, out.stderr
    assert "usage: zoning" in out.stdout


def test_test_modules_import_shared_helpers_absolutely():
    # Relative imports between test modules ("from ._tolerances import ...")
    # work with pytest >= 8 in importlib mode but not with the oldest pytest the
    # test extra allows; the suite must run on both (CI runs the lower bounds).
    import re
    from pathlib import Path

    relative = re.compile(r"^\s*from\s+\.", re.MULTILINE)
    offenders = [p.name for p in sorted(Path(__file__).parent.glob("*.py"))
                 if relative.search(p.read_text(encoding="utf-8"))]
    assert offenders == [], f"use 'from _tolerances import ...' in {offenders}"


def test_traverses_group_by_the_sample_written_in_their_file():
    import pandas as pd

    from zoning.traverse import Traverse, by_written_sample

    spots = pd.DataFrame({"distance_um": [0.0, 10.0], "fo": [85.0, 84.0]})
    ts = [Traverse(n, f"{n}.csv", "olivine", spots, sample=s)
          for n, s in [("a1", "A"), ("b1", "B"), ("x", ""), ("a2", "A")]]
    groups = by_written_sample(ts)
    assert list(groups) == ["A", "B"]  # input order, unnamed left out
    assert [t.name for t in groups["A"]] == ["a1", "a2"]
    assert [t.name for t in groups["B"]] == ["b1"]
