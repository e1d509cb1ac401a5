"""Citation registry: shape of every entry, formatting, ordering, unknown keys."""

import re
from pathlib import Path

import pytest

from zoning import references
from zoning.exceptions import ZoningError
from zoning.references import REFERENCES, MethodUse, cite, reference_list, short_cite

_DOI = re.compile(r"^10\.\d{4,9}/\S+$")
#: "Surname, I. N." (initials with dots, hyphenated ones too) or "Rayleigh, Lord".
_AUTHOR = re.compile(r"^[^,]+, (Lord|[A-ZÀ-Ý][a-z]?\.(-?[ ]?[A-ZÀ-Ý][a-z]?\.)*)$")


@pytest.mark.parametrize("key", sorted(REFERENCES))
def test_every_entry_is_complete_and_well_formed(key):
    ref = REFERENCES[key]
    assert ref.key == key
    assert re.fullmatch(r"[a-z_]+_\d{4}[a-z]?", key), key
    assert str(ref.year) in key
    assert 1800 < ref.year < 2100
    assert ref.authors and all(_AUTHOR.match(a) for a in ref.authors), ref.authors
    assert ref.title and not ref.title.endswith(".")
    assert ref.journal
    assert ref.kind in references.KINDS
    assert not ref.doi or _DOI.match(ref.doi), ref.doi
    # An entry marked as checked says what checked it.
    assert ref.from_memory or ref.checked_against


def test_short_citation_follows_author_count():
    assert short_cite("helz_thornber_1987") == "Helz & Thornber (1987)"
    assert short_cite("schwarz_1978") == "Schwarz (1978)"
    assert short_cite("blundy_2020") == "Blundy et al. (2020)"
    assert short_cite("ter_braak_vrugt_2008") == "ter Braak & Vrugt (2008)"


def test_full_citation_has_authors_year_title_journal_pages_doi():
    text = cite("roeder_emslie_1970")
    assert text == ("Roeder, P. L. & Emslie, R. F. (1970). Olivine-liquid equilibrium. "
                    "Contributions to Mineralogy and Petrology 29, 275-289. "
                    "https://doi.org/10.1007/BF00371276")
    # Three or more authors: commas, then "&" before the last.
    assert cite("bindeman_1998").startswith(
        "Bindeman, I. N., Davis, A. M. & Drake, M. J. (1998). ")
    # Software without volume or pages.
    assert cite("newville_2014").endswith("Zenodo (software). https://doi.org/10.5281/zenodo.11813")


def test_reference_list_sorts_by_author_and_drops_repeats():
    refs = reference_list(["schwarz_1978", "", "blundy_2020", "blundy_wood_1991",
                           "ter_braak_2006", "schwarz_1978", "akaike_1974"])
    assert [r.key for r in refs] == ["akaike_1974", "blundy_wood_1991", "blundy_2020",
                                     "ter_braak_2006", "schwarz_1978"]


def test_unknown_key_names_the_closest_ones():
    with pytest.raises(ZoningError, match=r"unknown citation key 'roeder_1970'.*roeder_emslie"):
        cite("roeder_1970")
    with pytest.raises(ZoningError, match="unknown citation key"):
        reference_list(["nobody_2000"])


def test_method_use_as_dict_carries_the_short_citation():
    use = MethodUse("melt temperature", "helz_thornber_1987", "T = 20.1 MgO + 1014")
    assert use.as_dict() == {"role": "melt temperature", "key": "helz_thornber_1987",
                             "citation": "Helz & Thornber (1987)",
                             "detail": "T = 20.1 MgO + 1014"}
    assert MethodUse("melt Fe3+/FeT", "", "user value 0.10").as_dict()["citation"] == ""


def test_every_citation_key_named_in_the_code_is_registered():
    # Modules name the laws they use as `citation = "key"` / CITATION(S) = (...).
    root = Path(references.__file__).resolve().parents[1]
    statement = re.compile(
        r"""(?:citation|citations|CITATION\w*)\s*(?::[^=\n]*)?=\s*(\([^)]*\)|\{[^}]*\}|["'][^"']*["'])""")
    key = re.compile(r"""["']([a-z]+(?:_[a-z]+)*_\d{4}[a-z]?)["']""")
    found = set()
    for folder in ("zoning", "fitting", "io"):
        for path in (root / folder).rglob("*.py"):
            for value in statement.findall(path.read_text(encoding="utf-8")):
                found.update(key.findall(value))
    missing = sorted(k for k in found if k not in REFERENCES)
    assert not missing, missing


def test_the_laws_name_registered_citations():
    from zoning.partitioning import EXCHANGE_LAWS, make_trace_law
    from zoning.thermometry import THERMOMETERS

    for law in EXCHANGE_LAWS.values():
        assert law.citation in REFERENCES
    for mineral, element in (("olivine", "Ni"), ("plagioclase", "Sr"), ("plagioclase", "Mg")):
        keys = make_trace_law(mineral, element).citations
        assert keys and all(k in REFERENCES for k in keys)
    assert make_trace_law("olivine", "Co", 1.5).citations == ()
    for t in THERMOMETERS.values():
        assert t.citation == t.name and t.citation in REFERENCES


def _readme_section(title):
    text = (Path(references.__file__).resolve().parents[1] / "README.md").read_text("utf-8")
    start = text.index(f"## {title}\n")
    following = re.search(r"^## ", text[start + 3:], flags=re.M)
    return text[start: start + 3 + following.start()] if following else text[start:]


def test_readme_citing_section_is_the_generated_text():
    # Regenerate with: python -c "from zoning.references import citing_markdown as c; print(c())"
    assert _readme_section("Citing").rstrip("\n") == references.citing_markdown().rstrip("\n")


def test_citing_lists_the_methods_of_each_kind_of_result():
    text = references.citing_markdown()
    olivine = text[text.index("### Olivine traverse"): text.index("### Plagioclase traverse")]
    plag = text[text.index("### Plagioclase traverse"): text.index("### Joint fit")]
    for name in ("Roeder & Emslie (1970)", "Hart & Davis (1978)", "Helz & Thornber (1987)",
                 "Foreman-Mackey et al. (2013)", "Schwarz (1978)", "Kass & Raftery (1995)"):
        assert name in olivine, name
    assert "Sisson & Grove (1993)" in plag and "Blundy & Wood (1991)" in plag
    assert "Roeder" not in plag and "Helz" not in plag
    refs = text[text.index("### References"):]
    for key in ("roeder_emslie_1970", "wilks_1938", "crank_1975", "birge_1932"):
        assert " ".join(REFERENCES[key].full().split()) in " ".join(refs.split()), key


def test_citation_cff_is_valid_and_has_an_author_placeholder_to_fill():
    # CFF 1.2.0 required keys: cff-version, message, title, authors (each with a name
    # or family-names); version and date-released as the schema's string formats.
    root = Path(references.__file__).resolve().parents[1]
    text = (root / "CITATION.cff").read_text("utf-8")
    import yaml

    data = yaml.safe_load(text)
    assert data["cff-version"] == "1.2.0"
    for key in ("message", "title", "authors", "version", "date-released", "license"):
        assert data[key], key
    from zoning import __version__

    assert str(data["version"]) == __version__
    assert re.fullmatch(r"\d{4}-\d{2}-\d{2}", str(data["date-released"]))
    author = data["authors"][0]
    assert "family-names" in author and "given-names" in author
    assert "REPLACE" in author["family-names"] or "REPLACE" in author["given-names"]
