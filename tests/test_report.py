"""PDF reports: the text of the written PDF (read back with pypdf), layout, reproducibility."""

import dataclasses
import datetime as dt
import re
import warnings

import _joint_synthetic as js
import pytest
from _tolerances import GROWTH_ONLY
from pypdf import PdfReader
from zoning.demo_data import DEMO_DIR
from zoning.fitting import fit_sample, fit_traverse
from zoning.io import read_traverses
from zoning.io.report import (
    CAUTIONS,
    SAMPLE_SECTIONS,
    TRAVERSE_SECTIONS,
    Paragraph,
    methods_paragraph,
    report_pages,
    results_rows,
    section,
    settings_rows,
    wrap_text,
    write_report,
    write_sample_report,
)

from zoning.exceptions import ZoningWarning
from zoning.references import REFERENCES, MethodUse

FERROLYN = DEMO_DIR / "ferrolyn"
DATE = dt.datetime(2026, 3, 14, 9, 26, tzinfo=dt.timezone.utc)


def _quiet_fit(func, *args, **kw):
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", ZoningWarning)  # short chains warn, on purpose
        # numpy 'invalid value' from the fit's start grid on NaN model rows; the
        # reports under test are not affected.
        warnings.simplefilter("ignore", RuntimeWarning)
        return func(*args, **kw)


@pytest.fixture(scope="module")
def plag():
    traverse = read_traverses(FERROLYN / "FRL-12_pl1.xlsx", mineral="plagioclase")[0]
    return _quiet_fit(fit_traverse, traverse, melt={"Na2O": 3.1}, kd=2.0, kd_sd=0.3,
                      n_walkers=16, n_steps=150, seed=5, **GROWTH_ONLY)


@pytest.fixture(scope="module")
def olivine():
    traverse = read_traverses(FERROLYN / "FRL-07_ol1.csv", mineral="olivine")[0]
    return _quiet_fit(fit_traverse, traverse, melt={"FeO": 9.8}, n_walkers=16, n_steps=120,
                      seed=3, **GROWTH_ONLY)


@pytest.fixture(scope="module")
def joint():
    traverses, _ = js.sample(n_hosts=3, antecryst=True, n_spots=15, seed=21)
    return _quiet_fit(fit_sample, traverses, melt=js.MELT, n_chains=12, n_sweeps=200, seed=2)


@pytest.fixture(scope="module")
def olivine_pdf(olivine, tmp_path_factory):
    return _pdf_text(write_report(olivine, tmp_path_factory.mktemp("ol") / "report.pdf",
                                  figures=[], date=DATE))


class _PdfText(str):
    """Text of a PDF compared without white space.

    Text extraction puts line breaks where the report wraps, and older pypdf
    releases insert spaces inside kerned words ("Di fferential"); comparing
    with every white-space character removed checks the words and their order
    whatever the version.
    """

    def __contains__(self, phrase):
        return "".join(str(phrase).split()) in "".join(self.split())

    def count(self, phrase, *args):
        return "".join(self.split()).count("".join(str(phrase).split()), *args)


def _pdf_text(path):
    return _PdfText("\n".join(page.extract_text() for page in PdfReader(path).pages))


def test_olivine_report_has_methods_references_definitions_and_date(olivine, olivine_pdf):
    text = olivine_pdf
    assert "2026-03-14 09:26 UTC" in text
    assert f"zoning {olivine.versions['zoning']}" in text
    assert "Methods" in text
    assert f"The olivine traverse {olivine.sample}" in text
    # The laws of an olivine fit, by their in-text citation (registry: zoning.references).
    for phrase in ("Roeder & Emslie 1970", "Hart & Davis 1978", "Helz & Thornber 1987",
                   "Foreman-Mackey et al. 2013", "Schwarz 1978", "Kass & Raftery 1995"):
        assert phrase in text, phrase
    # Every method used is in the reference list in full.
    keys = {m.key for m in olivine.methods if m.key}
    assert {"roeder_emslie_1970", "hart_davis_1978", "helz_thornber_1987"} <= keys
    for key in keys:
        assert REFERENCES[key].full() in text, key
    assert "Mg#: melt Mg number, Mg/(Mg + Fe2+) in moles" in text
    assert "Fo: forsterite content of olivine" in text
    assert "Fe3+/FeT" in text


def test_report_states_data_quality_warnings_and_cautions(olivine, olivine_pdf):
    text = olivine_pdf
    flagged = olivine.spots[~olivine.spots["used"]]
    assert len(flagged) == olivine.n_spots - olivine.n_used > 0
    assert (f"{olivine.n_spots} spots read, {olivine.n_used} used in the fit, "
            f"{len(flagged)} left out") in text
    for reason in flagged["reason"]:
        assert reason in text
    for caution in CAUTIONS:
        assert caution in text
    # How the orientation was decided travels with the numbers.
    t = olivine.traverse
    assert f"Orientation {t.orientation}, core at {t.core_position_um:g} µm" in text
    # The thermometer's calibration warning of this fit reaches the report.
    calib = [w for w in olivine.warnings if "calibration range" in w]
    assert calib and "approximate calibration range of the Helz & Thornber (1987)" in text


def test_plagioclase_report_has_no_olivine_only_settings(plag, tmp_path):
    text = _pdf_text(write_report(plag, tmp_path / "report.pdf", figures=[], date=DATE))
    settings = dict((row[0], row[1]) for row in settings_rows(plag))
    for olivine_only in ("melt Fe3+/FeT", "glass thermometer"):
        assert olivine_only not in settings
        assert olivine_only not in text
    assert "nan" not in str(text).lower().replace("nano", "")
    assert "Ca#: melt Ca number, Ca/(Ca + Na) in moles" in text
    assert "Mg#: melt Mg number" not in text
    assert text.count("random seed") == 1
    assert "Sisson & Grove 1993" in text  # the plagioclase exchange law


def test_settings_rows_list_each_setting_once(olivine, plag):
    for result in (olivine, plag):
        names = [row[0] for row in settings_rows(result)]
        assert len(names) == len(set(names))
        values = " ".join(row[1] for row in settings_rows(result))
        assert "nan" not in values.lower()
    ol = dict(settings_rows(olivine))
    assert ol["melt Fe3+/FeT"].startswith("0.10")
    assert ol["glass thermometer"] == "Helz & Thornber (1987) (helz_thornber_1987)"
    assert ol["random seed"] == str(olivine.seed)


def test_unconstrained_quantities_are_said_so_not_quoted_precisely(plag):
    # Mark retention as unconstrained, as the fit does when its band covers most of 0-1.
    est = dataclasses.replace(plag.estimates["retention"], constrained=False, note="")
    result = dataclasses.replace(plag, estimates={**plag.estimates, "retention": est})
    rows = results_rows(result)
    assert len(rows) == len(result.estimates)
    for row, e in zip(rows, result.estimates.values(), strict=True):
        assert (row[1] == "not constrained") == (not e.constrained)
        if not e.constrained:
            assert "not constrained" in row[4]
    text = "\n".join(t.get_text() for p in report_pages(result, figures=[]) for t in p.texts)
    assert "not constrained" in text


def test_sample_report_carries_crystal_table_verdicts_and_shared_bands(joint, tmp_path):
    text = _pdf_text(write_sample_report(joint, tmp_path / "report.pdf", figures=[],
                                         date=DATE))
    assert f"zoning sample report: {joint.name}" in text
    assert "2026-03-14 09:26 UTC" in text
    assert "Crystals" in text and "consistency test" in text
    for c in joint.crystals:
        assert c.name in text
    verdicts = {c.verdict for c in joint.crystals}
    assert "likely antecryst" in verdicts
    for v in verdicts:
        assert v in text
    assert f"Verdict: {joint.verdict}." in text
    assert "parent melt Mg#" in text and "95% band" in text
    assert "Methods" in text and "fitted jointly" in text
    assert "Wilks 1938" in text and REFERENCES["wilks_1938"].full() in text
    assert "Mg#: melt Mg number, Mg/(Mg + Fe2+) in moles" in text
    # the joint result records its own methods: the exchange law of its Kd prior,
    # the sequential outlier test and the sampler's adaptation and convergence check
    keys = {m.key for m in joint.methods}
    for key in ("roeder_emslie_1970", "wilks_1938", "rosner_1983", "roberts_rosenthal_2009",
                "vehtari_2021"):
        assert key in keys
        assert REFERENCES[key].full() in text, key
    assert "joint fits model growth only" in text


def test_every_text_of_every_page_lies_inside_the_page(olivine, plag, joint):
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from zoning.io.report import sample_report_pages

    pages = (report_pages(olivine, figures=[]) + report_pages(plag, figures=[])
             + sample_report_pages(joint, figures=[]))
    for fig in pages:
        renderer = FigureCanvasAgg(fig).get_renderer()
        page = fig.bbox
        for t in fig.texts:
            box = t.get_window_extent(renderer)
            assert box.x0 >= page.x0 and box.x1 <= page.x1, t.get_text()
            assert box.y0 >= page.y0 and box.y1 <= page.y1, t.get_text()


def test_wrapping_breaks_between_words_and_never_overflows():
    text = ("Olivine-melt Fe-Mg exchange coefficient K_D(Fe-Mg) = 0.30 ± 0.03 " * 8
            + "/a/very/long/folder/name/without/any/spaces/that/is/wider/than/a/line.csv")
    width = 200.0
    lines = wrap_text(text, width, 8.0)
    from zoning.io.report import _width

    assert all(_width(line, 8.0) <= width for line in lines)
    # Rejoined, the words are intact (the long path is split only after '/').
    words = text.split()
    assert " ".join(lines[:-3]).split() == words[: len(" ".join(lines[:-3]).split())]
    assert "".join(line for line in lines if "/" in line).endswith("line.csv")
    assert all(line.endswith("/") or "/" not in line or line.endswith(".csv")
               for line in lines)


def test_methods_paragraph_is_built_from_the_records_only():
    uses = [MethodUse("olivine-melt Fe-Mg exchange coefficient", "roeder_emslie_1970",
                      "K_D(Fe-Mg) = 0.30"),
            MethodUse("a brand-new process", "schwarz_1978", "its detail"),
            MethodUse("melt Fe3+/FeT", "", "Fe3+/FeT = 0.10 (given by the user)")]
    text = methods_paragraph(uses, lead="Lead.", closing="End.")
    assert text.startswith("Lead. Olivine-melt Fe-Mg exchange coefficient: K_D(Fe-Mg) = 0.30 "
                           "(Roeder & Emslie 1970).")
    assert "A brand-new process: its detail (Schwarz 1978)." in text
    assert "Melt Fe3+/FeT: Fe3+/FeT = 0.10 (given by the user)." in text
    assert text.endswith("End.")


def test_a_new_section_is_one_function(olivine):
    @section("Extra section for the test", traverse=15, sample=15)
    def _extra(ctx):
        return [Paragraph(f"extra text about {ctx.result.mineral}")]

    try:
        titles = [s.title for s in TRAVERSE_SECTIONS]
        assert titles.index("Extra section for the test") == titles.index(
            "Results (best value and 95% band)") + 1
        text = "\n".join(t.get_text() for p in report_pages(olivine, figures=[])
                         for t in p.texts)
        assert "Extra section for the test" in text and "extra text about olivine" in text
    finally:
        for registry in (TRAVERSE_SECTIONS, SAMPLE_SECTIONS):
            registry[:] = [s for s in registry if s.content is not _extra]


def test_report_pages_end_with_the_three_figures(plag):
    pages = report_pages(plag)
    profile, melt, corner = pages[-3:]
    assert profile.axes[0].get_ylabel() == "An [mol%]"
    assert melt.axes[0].get_ylabel().startswith("melt Ca#")
    assert len(corner.axes) == len(plag.parameter_names) ** 2


def test_pdf_is_written_atomically_and_reproducibly(plag, tmp_path):
    a = write_report(plag, tmp_path / "a" / "report.pdf", date=DATE)
    b = write_report(plag, tmp_path / "b" / "report.pdf", date=DATE)
    assert a.read_bytes().startswith(b"%PDF")
    assert a.read_bytes() == b.read_bytes()
    n_pages = len(re.findall(rb"/Type\s*/Page[^s]", a.read_bytes()))
    assert n_pages == len(report_pages(plag, date=DATE)) == len(PdfReader(a).pages)
    assert not list(tmp_path.rglob(".*.tmp"))


def test_report_says_how_to_reproduce(plag):
    settings = {**plag.settings, "command": "zoning fit FRL-12_pl1.xlsx --melt Na2O=3.1",
                "command_folder": "/data/ferrolyn"}
    text = "\n".join(t.get_text() for p in report_pages(
        dataclasses.replace(plag, settings=settings), figures=[]) for t in p.texts)
    assert "Reproduce (run in /data/ferrolyn): zoning fit FRL-12_pl1.xlsx --melt Na2O=3.1" in text
    entry = {**plag.settings, "project_entry": {"sample": "FRL-12 pl1", "file": "/d/x.xlsx"}}
    text = "\n".join(t.get_text() for p in report_pages(
        dataclasses.replace(plag, settings=entry), figures=[]) for t in p.texts)
    assert "sample entry 'FRL-12 pl1'" in " ".join(text.split())


def test_cautions_name_the_four_ways_results_mislead():
    text = " ".join(CAUTIONS).lower()
    for phrase in ("surface", "diffus", "section", "kd", "reference melt"):
        assert phrase in text
    # what each process does to the answer, measured (benchmarks/fit.py part 4)
    assert "unmodelled cut at h/r = 0.5 raised r" in text
    assert "unmodelled diffusion of a fractional crystal (r = 0) by l = 50 µm" in text
    assert "joint fits fit it per crystal only when asked" in text
    assert "joint fits take every cut through the core" in text


def test_table_words_are_never_cut(joint, olivine):
    from zoning.io.report import crystal_rows, sample_report_pages

    for pages, rows in ((sample_report_pages(joint, figures=[]), crystal_rows(joint)),
                        (report_pages(olivine, figures=[]), settings_rows(olivine))):
        tokens = {w for p in pages for t in p.texts for w in t.get_text().split()}
        for row in rows:
            for cell in row:
                for word in str(cell).split():
                    if len(word) < 30:  # a long path may break after '/'
                        assert word in tokens, (word, cell)
    header = {w for p in sample_report_pages(joint, figures=[]) for t in p.texts
              for w in t.get_text().split()}
    assert {"group", "verdict", "consistency"} <= header


def test_crystal_table_gives_each_crystals_processes_when_fitted(joint):
    from zoning.fitting.results import Estimate
    from zoning.io.report import crystal_process_rows, sample_report_pages

    # growth only (the fixture): no process table
    assert crystal_process_rows(joint) == (("crystal",), [])
    pages = sample_report_pages(joint, figures=[])
    text = " ".join(" ".join(t.get_text() for p in pages for t in p.texts).split())
    assert "diffusion length L [µm] (95% band)" not in text
    # each crystal with a fitted L (values put in by hand; the table shows them)
    crystals = []
    for i, c in enumerate(joint.crystals):
        e = Estimate("diffusion_length_um", "µm", best=12.0 + i, lo95=3.0, hi95=40.0 + i,
                     lower=0.0, upper=300.0, constrained=i != 0)
        crystals.append(dataclasses.replace(
            c, estimates={**c.estimates, "diffusion_length_um": e}))
    relaxed = dataclasses.replace(joint, crystals=tuple(crystals))
    titles, rows = crystal_process_rows(relaxed)
    assert titles == ("crystal", "diffusion length L [µm] (95% band)")
    assert rows[0] == [joint.crystals[0].name, "12 (3–40), not constrained"]
    assert rows[1] == [joint.crystals[1].name, "13 (3–41)"]
    text = " ".join(t.get_text() for p in sample_report_pages(relaxed, figures=[])
                    for t in p.texts)
    assert "diffusion length L [µm] (95% band)" in " ".join(text.split())
    assert "13 (3–41)" in text
