"""Orientation of the corpus exports (tests/corpus/, made by tests/corpus/make_corpus.py).

The reversely zoned olivine and the flat olivine must be asked about, not
guessed; the normally zoned plagioclase measured rim-to-core must be read
rim-to-core from its data (its An profile and minor elements), also when the
file name gives no hint.
"""

import shutil
from pathlib import Path

import pandas as pd
import pytest
from zoning.io import read_traverses

CORPUS = Path(__file__).resolve().parent / "corpus"

pytestmark = pytest.mark.skipif(not (CORPUS / "make_corpus.py").is_file(),
                                reason="tests/corpus not present on this branch yet")


def _one(path):
    (t,) = read_traverses(path)
    return t


def test_reversely_zoned_olivine_is_uncertain():
    t = _one(CORPUS / "reverse_olivine.csv")
    assert t.mineral == "olivine"
    assert t.orientation_confidence == "uncertain", t.orientation_basis
    assert t.orientation_basis.startswith("orientation uncertain")
    assert "reversely zoned" in t.orientation_basis
    assert len(t.spots) == len(pd.read_csv(CORPUS / "reverse_olivine.csv"))  # nothing dropped


def test_flat_olivine_is_uncertain():
    t = _one(CORPUS / "flat_olivine.csv")
    assert t.orientation_confidence == "uncertain", t.orientation_basis
    assert "flat" in t.orientation_basis


@pytest.mark.parametrize("name", ["FRL-31_pl7.csv", "plag_traverse_B.csv"])
def test_plagioclase_measured_rim_to_core_is_read_from_its_data(tmp_path, name):
    # a copy under a neutral name: no hint in the name, only the data
    path = tmp_path / name
    shutil.copyfile(CORPUS / "FRL-31_pl7.csv", path)
    t = _one(path)
    assert t.mineral == "plagioclase"
    assert t.orientation == "rim-to-core", t.orientation_basis
    assert t.orientation_confidence in ("high", "low")
    assert "K2O falls towards the high-position end" in t.orientation_basis
    position = t.spots["position_um"].max()
    assert t.core_position_um == pytest.approx(position)
