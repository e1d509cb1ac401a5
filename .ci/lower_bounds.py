"""Write a pip constraints file that pins every direct dependency to its lower bound.

Reads ``[project] dependencies`` and the ``test`` extra of ``pyproject.toml`` and
prints ``name==X`` for every requirement written ``name>=X`` (markers kept), so
that ``pip install -c constraints.txt -e ".[test]"`` installs the oldest
versions the project claims to support. Used by ``.ci/run-lower-bounds``.
"""

import re
import sys
from pathlib import Path

try:
    import tomllib
except ModuleNotFoundError:  # Python 3.10
    import tomli as tomllib

root = Path(__file__).resolve().parent.parent
project = tomllib.loads((root / "pyproject.toml").read_text(encoding="utf-8"))["project"]
requirements = list(project["dependencies"]) + list(project["optional-dependencies"]["test"])
pattern = re.compile(r"^\s*([A-Za-z0-9_.\-]+)\s*>=\s*([0-9][0-9A-Za-z.]*)\s*(;.*)?$")
lines = []
for req in requirements:
    match = pattern.match(req)
    if match is None:
        if "zoning" in req:
            continue
        sys.exit(f"lower_bounds.py: cannot read a lower bound from {req!r} in pyproject.toml; "
                 "write it as 'name>=X'.")
    name, version, marker = match.groups()
    lines.append(f"{name}=={version}{' ' + marker if marker else ''}")
print("\n".join(lines))
