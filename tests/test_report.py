"""Per-sample PDF report: content of the text page, pages, reproducibility."""

import dataclasses
import re
import warnings

import pytest
from _tolerances import GROWTH_ONLY
from zoning.demo_data import DEMO_DIR
from zoning.fitting import fit_traverse
from zoning.io import read_traverses
from zoning.io.report import CAUTIONS, report_pages, results_rows, write_report

from zoning.exceptions import ZoningWarning

FERROLYN = DEMO_DIR / "ferrolyn"


@pytest.fixture(scope="module")
def plag():
    traverse = read_traverses(FERROLYN / "FRL-12_pl1.xlsx", mineral="plagioclase")[0]
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", ZoningWarning)  # short chains warn, on purpose
        # numpy 'invalid value' from the fit's start grid on NaN model rows; the
        # figures and reports under test are not affected.
        warnings.simplefilter("ignore", RuntimeWarning)
        return fit_traverse(traverse, melt={"Na2O": 3.1}, kd=2.0, kd_sd=0.3,
                            n_walkers=16, n_steps=150, seed=5, **GROWTH_ONLY)


def _page_text(fig):
    return "\n".join(t.get_text() for t in fig.texts)


def test_first_page_has_results_warnings_settings_and_cautions(plag):
    pages = report_pages(plag)
    text = "\n".join(_page_text(p) for p in pages[:-3])
    for heading in ("Results (best value and 95% band)", "Model comparison", "Warnings",
                    "Settings", "Assumptions and cautions"):
        assert heading in text
    for word in ("Surface equilibrium", "Diffusion after growth", "Sectioning",
                 "Choice of Kd and reference melt"):
        assert word in text
    assert "FRL-12_pl1" in text and "Na2O=3.1" in text
    for warning in plag.warnings:
        assert warning[:30] in text.replace("\n", " ") or warning[:30] in text


def test_unconstrained_quantities_are_said_so_not_quoted_precisely(plag):
    # Mark retention as unconstrained, as the fit does when its band covers most of 0-1.
    est = dataclasses.replace(plag.estimates["retention"], constrained=False, note="")
    result = dataclasses.replace(plag, estimates={**plag.estimates, "retention": est})
    rows = results_rows(result)
    assert len(rows) == len(result.estimates)
    for row, e in zip(rows, result.estimates.values(), strict=True):
        if e.constrained:
            assert not row[1].startswith("(")
        else:
            assert row[1].startswith("(") and "not constrained" in row[4]
    assert sum(row[1].startswith("(") for row in rows) >= 1
    text = "\n".join(t.get_text() for t in report_pages(result)[0].texts)
    assert "not constrained by these data" in text


def test_report_pages_end_with_the_three_figures(plag):
    pages = report_pages(plag)
    profile, melt, corner = pages[-3:]
    assert profile.axes[0].get_ylabel() == "An [mol%]"
    assert melt.axes[0].get_ylabel() == "melt Ca# [fraction]"
    assert len(corner.axes) == len(plag.parameter_names) ** 2


def test_pdf_is_written_atomically_and_reproducibly(plag, tmp_path):
    a = write_report(plag, tmp_path / "a" / "report.pdf")
    b = write_report(plag, tmp_path / "b" / "report.pdf")
    assert a.read_bytes().startswith(b"%PDF")
    assert a.read_bytes() == b.read_bytes()
    n_pages = len(re.findall(rb"/Type\s*/Page[^s]", a.read_bytes()))
    assert n_pages == len(report_pages(plag))
    assert not list(tmp_path.rglob(".*.tmp"))


def test_cautions_name_the_four_ways_results_mislead():
    text = " ".join(CAUTIONS).lower()
    for phrase in ("surface", "diffus", "section", "kd", "reference melt"):
        assert phrase in text
