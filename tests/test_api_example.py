"""The Python API example of the README runs as written.

The code block of the README's "Python API" section is extracted and run in a
fresh interpreter, so the README's copy is what gets tested.
"""

import os
import re
import subprocess
import sys
from pathlib import Path

README = Path(__file__).resolve().parents[1] / "README.md"


def _example_text() -> str:
    text = README.read_text(encoding="utf-8")
    section = re.search(r"^## Python API\n(.*?)(?=^## |\Z)", text, re.S | re.M)
    assert section, "README.md has no '## Python API' section"
    block = re.search(r"```python\n(.*?)```", section.group(1), re.S)
    assert block, "the README's Python API section has no python code block"
    return block.group(1)


def test_example_is_short():
    assert len(_example_text().strip().splitlines()) <= 15


def test_api_example_runs_verbatim(tmp_path):
    env = {**os.environ, "MPLBACKEND": "Agg"}
    out = subprocess.run([sys.executable, "-c", _example_text()], cwd=tmp_path, env=env,
                         capture_output=True, text=True, check=False, timeout=300)
    assert out.returncode == 0, out.stderr
    assert "distance_um" in out.stdout and "status" in out.stdout
    for name in ("melt_mg_number", "f_rim", "retention", "kd"):
        assert f"{name}: " in out.stdout
    png = tmp_path / "FRL-07_ol1_profile.png"
    assert png.read_bytes().startswith(b"\x89PNG")
    assert "Traceback" not in out.stderr
