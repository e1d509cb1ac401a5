"""How often the automatic orientation is right, asks, or is wrong, on synthetic traverses.

Draws randomized synthetic traverses of every kind (``tests/_orientation_cases.py``:
forward-model profiles of normally and reversely zoned olivine, plagioclase
with weak oscillatory zoning, rim-to-rim traverses with off-centre cores,
flat and step-zoned crystals, glass at the rim spot; 18-60 spots, measured
core-to-rim or rim-to-core at random) and reads each through the same path
as an export. For every kind and mineral it prints the share of traverses

* ``right``: decided (confidence high or low) and right; for rim-to-rim the
  core also within 10% of the length of the truth;
* ``asked``: confidence "uncertain" (not fitted until the user confirms);
* ``wrong``: decided with confidence high or low, but wrong — the failure
  the rules exist to avoid — split into ``wrong_high`` and ``wrong_low``.

A flat crystal has no right answer: every decision on it counts as wrong.
Run: ``nice -n 10 python benchmarks/orientation.py [--seeds 200]``.
"""

import argparse
import sys
import time
import warnings
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parents[1] / "tests"))
from _orientation_cases import make_case  # noqa: E402

from zoning.exceptions import ZoningWarning  # noqa: E402

#: (kind, mineral) pairs drawn; glass_end adds glass to the rim spot of a reverse case.
CASES = (
    ("normal", "olivine", False), ("reverse", "olivine", False), ("reverse", "olivine", True),
    ("rim-to-rim", "olivine", False), ("flat", "olivine", False), ("step", "olivine", False),
    ("glass", "olivine", False),
    ("normal", "plagioclase", False), ("oscillatory", "plagioclase", False),
    ("rim-to-rim", "plagioclase", False), ("flat", "plagioclase", False),
    ("step", "plagioclase", False), ("glass", "plagioclase", False),
)
#: Core position error accepted for a rim-to-rim decision (fraction of the length).
CORE_TOLERANCE = 0.1


def outcome(case) -> str:
    t = case.traverse
    if t.orientation_confidence == "uncertain":
        return "asked"
    right = bool(case.truth) and t.orientation == case.truth
    if right and case.truth == "rim-to-rim":
        pos = t.spots["position_um"].to_numpy(float)
        length = np.nanmax(pos) - np.nanmin(pos)
        right = abs(t.core_position_um - case.core_position_um) <= CORE_TOLERANCE * length
    if right:
        return "right"
    return f"wrong_{t.orientation_confidence}"


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--seeds", type=int, default=100, help="traverses per kind (default 100)")
    args = parser.parse_args()
    print(f"{'kind':<22}{'mineral':<13}{'right':>7}{'asked':>7}{'wrong_high':>12}"
          f"{'wrong_low':>11}")
    t0 = time.perf_counter()
    total = {"right": 0, "asked": 0, "wrong_high": 0, "wrong_low": 0}
    for kind, mineral, glass in CASES:
        counts = dict.fromkeys(total, 0)
        for seed in range(args.seeds):
            rng = np.random.default_rng([20261202, seed, len(kind), int(glass)])
            with warnings.catch_warnings():
                warnings.simplefilter("ignore", ZoningWarning)
                case = make_case(kind, rng, mineral=mineral, glass_end=glass)
            counts[outcome(case)] += 1
        for k, v in counts.items():
            total[k] += v
        label = kind + (" + glass" if glass else "")
        share = {k: v / args.seeds for k, v in counts.items()}
        print(f"{label:<22}{mineral:<13}{share['right']:>7.0%}{share['asked']:>7.0%}"
              f"{share['wrong_high']:>12.0%}{share['wrong_low']:>11.0%}")
    n = sum(total.values())
    print(f"orientation: traverses={n} right={total['right'] / n:.1%} asked="
          f"{total['asked'] / n:.1%} wrong_high={total['wrong_high'] / n:.1%} "
          f"wrong_low={total['wrong_low'] / n:.1%} seconds={time.perf_counter() - t0:.1f}")


if __name__ == "__main__":
    main()
