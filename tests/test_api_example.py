"""The Python API example of the README runs as written.

The example below is the text for the README's "Python API" section. When
the README has that section, the code block found there is run instead, so
the README's copy is what gets tested.
"""

import os
import re
import subprocess
import sys
from pathlib import Path

EXAMPLE = '''\
import matplotlib.pyplot as plt
from zoning.demo_data import DEMO_DIR
from zoning.fitting import fit_traverse
from zoning.io import read_traverses
from zoning.io.figures import profile_figure

traverse = read_traverses(DEMO_DIR / "ferrolyn" / "FRL-07_ol1.csv", mineral="olivine")[0]
print(traverse.spots[["distance_um", "fo", "status", "reason"]].head())  # a pandas DataFrame
result = fit_traverse(traverse, melt={"FeO": 9.8}, n_walkers=16, n_steps=300, seed=1)  # short chain
for name, est in result.estimates.items():
    print(f"{name}: {est.best:.3g} (95%: {est.lo95:.3g} to {est.hi95:.3g}) {est.note}")
fig, ax = plt.subplots(figsize=(6, 4))
profile_figure(result, ax=ax)  # draws into your own Axes
fig.savefig("FRL-07_ol1_profile.png", dpi=300)
'''

README = Path(__file__).resolve().parents[1] / "README.md"


def _example_text() -> str:
    if README.is_file():
        text = README.read_text(encoding="utf-8")
        section = re.search(r"^## Python API\n(.*?)(?=^## |\Z)", text, re.S | re.M)
        if section:
            block = re.search(r"```python\n(.*?)```", section.group(1), re.S)
            if block:
                return block.group(1)
    return EXAMPLE


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
