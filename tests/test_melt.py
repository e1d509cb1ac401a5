"""Reading the reference melt: names, Fe3+/FeT from FeO + Fe2O3, values not used."""

import pytest
from _tolerances import RTOL_TABLE_3SF

from zoning.exceptions import ModelDomainError
from zoning.melt import DEFAULT_FE3_FRACTION, merge_melts, read_melt


def _masses():
    """Molar masses of FeO and Fe2O3 from the periodictable package (IUPAC weights)."""
    pt = pytest.importorskip("periodictable")
    fe, o = pt.elements.Fe.mass, pt.elements.O.mass
    return fe + o, 2 * fe + 3 * o


def test_feo_and_fe2o3_set_fe3_and_total_iron():
    m_feo, m_fe2o3 = _masses()
    m = read_melt({"FeO": 8.1, "Fe2O3": 1.6, "Na2O": 2.5}, "olivine")
    n2, n3 = 8.1 / m_feo, 2 * 1.6 / m_fe2o3
    assert m.fe3_fraction == pytest.approx(n3 / (n2 + n3), rel=RTOL_TABLE_3SF)
    # total iron as FeO: FeO + 2 M(FeO)/M(Fe2O3) Fe2O3 (same moles of Fe)
    assert m.oxides["FeO"] == pytest.approx(8.1 + 2 * m_feo / m_fe2o3 * 1.6, rel=RTOL_TABLE_3SF)
    assert "Fe2O3" not in m.oxides
    assert m.fe3_source == "from the melt FeO and Fe2O3"
    assert any(n.startswith("melt Fe3+/FeT = 0.151 from the melt FeO 8.1 and Fe2O3 1.6")
               for n in m.notes)


@pytest.mark.parametrize("name", ["FeOT", "FeO*", "feot", "FeOt", "FeO(tot)", "Fe0T"])
def test_total_iron_names_are_read_as_feo(name):
    m = read_melt({name: 9.5}, "olivine", fe3_fraction=0.15)
    assert m.oxides == {"FeO": 9.5}
    assert (m.fe3_fraction, m.fe3_source) == (0.15, "given")


def test_fe2o3_total_is_converted_to_feo():
    m_feo, m_fe2o3 = _masses()
    m = read_melt({"Fe2O3T": 10.0}, "olivine")
    assert m.oxides["FeO"] == pytest.approx(10.0 * 2 * m_feo / m_fe2o3, rel=RTOL_TABLE_3SF)
    assert m.fe3_fraction == DEFAULT_FE3_FRACTION


def test_values_the_fit_does_not_use_are_reported():
    m = read_melt({"FeO": 9.5, "MgO": 8.1, "SiO2": 49.0, "Ni": 250, "H2O": 1.0}, "olivine")
    text = " | ".join(m.notes)
    assert "melt MgO = 8.1 wt% not used by the fit: the parent melt Mg# is fitted" in text
    assert "melt SiO2 = 49 wt% not used" in text
    assert "melt Ni = 250 ppm not used: the initial melt Ni is fitted" in text
    assert "melt 'H2O' = 1 not used" in text
    assert "Ni" not in m.oxides
    p = read_melt({"Na2O": 3.1, "CaO": 11.0, "FeO": 9.0}, "plagioclase", fe3_fraction=0.2)
    text = " | ".join(p.notes)
    assert "melt CaO = 11 wt% not used by the fit: the parent melt Ca# is fitted" in text
    assert "Fe3+/FeT not used" in text


@pytest.mark.parametrize(
    "melt,fe3,match",
    [
        ({"FeO": 8.1, "Fe2O3": 1.6}, 0.30, r"give Fe3\+/FeT = 0\.151, but Fe3\+/FeT 0\.3 was "
                                           r"also given \(--fe3 / project key fe3\)"),
        ({"FeO": 9.0, "FeOT": 9.5}, None, r"the melt gives FeO twice \('FeO' and 'FeOT'\)"),
        ({"FeOT": 9.5, "Fe2O3": 1.0}, None, r"total iron \('FeOT'\) and Fe2O3"),
        ({"Fe2O3": 1.0, "MgO": 8}, None, r"Fe2O3 but no FeO; give FeO and Fe2O3"),
        ({"MgO": 8.0}, None, r"needs FeO \[wt%\].*--melt FeO=<wt%> \(project key melt = "
                             r"\{ FeO = <wt%> \}\)"),
        ({"FeO": 120.0}, None, r"outside \[0, 100\]"),
    ],
)
def test_contradictions_and_gaps_are_refused_with_the_fix(melt, fe3, match):
    with pytest.raises(ModelDomainError, match=match):
        read_melt(melt, "olivine", fe3_fraction=fe3)


def test_given_fe3_that_agrees_with_feo_and_fe2o3_is_accepted():
    m = read_melt({"FeO": 8.1, "Fe2O3": 1.6}, "olivine", fe3_fraction=0.15)
    assert m.fe3_source == "from the melt FeO and Fe2O3"


def test_merge_replaces_iron_whatever_its_spelling():
    assert merge_melts({"FeO": 9.5, "MgO": 8}, {"FeOT": 10.0}) == {"MgO": 8, "FeOT": 10.0}
    assert merge_melts({"FeO": 9.5}, {"Fe2O3": 1.0, "FeO": 8.0}) == {"Fe2O3": 1.0, "FeO": 8.0}
    assert merge_melts({"FeO": 9.5, "Na2O": 3}, {"mgo": 7}) == {"FeO": 9.5, "Na2O": 3, "mgo": 7}
