"""Figures: content checks (labels, plotted points, bands), not pixels."""

import dataclasses
import shutil
import warnings

import matplotlib
import numpy as np
import pandas as pd
import pytest
from _layout import layout_problems, legend_texts
from _tolerances import GROWTH_ONLY, RTOL_IDENTITY
from matplotlib.collections import PolyCollection
from matplotlib.figure import Figure
from zoning.demo_data import DEMO_DIR
from zoning.fitting import fit_traverse
from zoning.io import figures, read_traverses

from zoning.exceptions import ZoningError, ZoningWarning

matplotlib.use("Agg")
FERROLYN = DEMO_DIR / "ferrolyn"


def _fit(name, mineral, melt, temperature_c=None, **kw):
    traverse = read_traverses(FERROLYN / name, mineral=mineral, **kw)[0]
    fit_kw = {} if temperature_c is None else {"temperature_c": temperature_c}
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", ZoningWarning)  # short chains warn, on purpose
        # numpy 'invalid value' from the fit's start grid on NaN model rows; the
        # figures and reports under test are not affected.
        warnings.simplefilter("ignore", RuntimeWarning)
        return fit_traverse(traverse, melt=melt, n_walkers=16, n_steps=150, seed=2, **fit_kw,
                            **GROWTH_ONLY)


@pytest.fixture(scope="module")
def olivine():
    return _fit("FRL-07_ol1.csv", "olivine", {"FeO": 9.8})


@pytest.fixture(scope="module")
def recharge():
    return _fit("FRL-03_ol1.csv", "olivine", {"FeO": 10.4}, orientation="core-to-rim")


def _labels(ax):
    return [h.get_label() for h in ax.get_legend_handles_labels()[0]]


def test_profile_has_measured_points_band_limits_residuals_and_trace(olivine):
    fig = figures.profile_figure(olivine)
    main, trace, resid = fig.axes
    assert main.get_ylabel() == "Fo [mol%]"
    assert resid.get_xlabel() == "Distance from core [µm]"
    assert trace.get_ylabel() == "NiO [wt%]"
    assert resid.get_ylabel().startswith("residual")
    labels = _labels(main)
    assert "95% band" in labels and "best fit" in labels
    assert any(lab.startswith("pure fractional (r = 0)") for lab in labels)
    assert any(lab.startswith("pure equilibrium (r = 1)") for lab in labels)
    assert any(isinstance(c, PolyCollection) for c in main.collections)  # the band
    # Measured points: one filled marker per used spot, in the main and residual panels.
    measured = [c for c in main.containers if c.get_label().startswith("measured")]
    assert len(measured) == 1 and len(measured[0].lines[0].get_xdata()) == olivine.n_used
    assert measured[0].has_yerr
    assert f"measured ({olivine.n_used} spots used)" in labels
    assert len(resid.containers[0].lines[0].get_xdata()) == olivine.n_used


def test_flagged_spots_are_hollow_with_their_reason_in_the_legend(olivine):
    fig = figures.profile_figure(olivine)
    main = fig.axes[0]
    flagged = olivine.spots[~olivine.spots["used"]]
    hollow = [ln for ln in main.lines if ln.get_label().startswith("not used:")]
    assert sum(len(ln.get_xdata()) for ln in hollow) == len(flagged) == 3
    assert all(ln.get_markerfacecolor() == "none" for ln in hollow)
    legend = " ".join(ln.get_label() for ln in hollow)
    assert "total" in legend and "same position" in legend and "Al2O3" in legend


def test_profile_draws_into_a_given_axes(olivine):
    fig = Figure()
    ax = fig.add_subplot(1, 1, 1)
    out = figures.profile_figure(olivine, ax=ax)
    assert out is fig and len(fig.axes) == 1
    assert any(isinstance(c, PolyCollection) for c in ax.collections)


def test_reversal_is_shaded_on_the_profile(recharge):
    assert len(recharge.reversals) >= 1
    main = figures.profile_figure(recharge).axes[0]
    assert "reversal (recharge/mixing?)" in _labels(main)


def test_melt_path_panels_and_parent(olivine):
    fig = figures.melt_path_figure(olivine)
    ratio, oxide, temp, record = fig.axes
    assert ratio.get_ylabel() == "melt Mg# [fraction]"
    assert "parent" in _labels(ratio)
    star = [ln for ln in ratio.lines if ln.get_label() == "parent"][0]
    assert star.get_ydata()[0] == pytest.approx(olivine.estimates["melt_mg_number"].best)
    # The model's melt FeO is Fe2+ only; total iron is drawn beside it and
    # both say what they are.
    assert {"melt MgO", "melt FeO, Fe²⁺ only"} <= set(_labels(oxide))
    fe2 = [ln for ln in oxide.lines if ln.get_label() == "melt FeO, Fe²⁺ only"][0]
    total = [ln for ln in oxide.lines if ln.get_label().startswith("melt FeOT, total Fe")][0]
    fe3 = olivine.settings["fe3_fraction"]
    assert np.allclose(total.get_ydata() * (1 - fe3), fe2.get_ydata(), rtol=RTOL_IDENTITY)
    # The reference melt was given as 9.8 wt% FeO (total iron): the total-iron
    # path starts there.
    assert total.get_ydata()[0] == pytest.approx(9.8, rel=RTOL_IDENTITY)
    assert temp.get_ylabel() == "melt temperature [°C]" and len(temp.lines) == 1
    assert record.get_xlabel() == "F, fraction crystallized [0–1]"
    measured = [ln for ln in record.lines if ln.get_label().startswith("measured")][0]
    assert len(measured.get_xdata()) == olivine.n_used


def test_loop_figure_shows_fractional_path_beyond_equilibrium_end():
    fig = figures.loop_figure("olivine", 0.6)
    ax = fig.axes[0]
    ends = {ln.get_label(): ln for ln in ax.lines if "last liquid" in ln.get_label()}
    eq = ends["equilibrium: last liquid"].get_xdata()[0]
    fr = ends["fractional: last liquid"].get_xdata()[0]
    assert fr < eq  # fractional drives the last liquid further (textbook outcome)
    assert ax.get_xlabel() == "Fo [mol%]" and ax.get_ylabel() == "temperature [°C]"
    assert {"liquidus", "solidus"} <= set(_labels(ax))


def test_corner_plot_has_marginals_and_pairs(olivine):
    p = len(olivine.parameter_names)
    fig = figures.corner_figure(olivine)
    visible = [ax for ax in fig.axes if ax.axison]
    assert len(fig.axes) == p * p and len(visible) == p * (p + 1) // 2
    diag = [fig.axes[i * p + i] for i in range(p)]
    assert all(len(ax.patches) > 0 for ax in diag)  # histograms
    assert fig.axes[(p - 1) * p].get_xlabel() == "parent Mg#"
    assert fig.axes[p].get_ylabel() == "F rim"
    pair = fig.axes[1 * p + 0]
    assert len(pair.lines[0].get_xdata()) == min(3000, olivine.samples.shape[0])


def test_overview_one_row_per_sample_and_failed_listed(olivine, recharge):
    from zoning.io.results import summary_table

    df = summary_table([olivine, recharge])
    df = pd.concat([df, pd.DataFrame([{"sample": "broken", "error": "no oxide columns"}])],
                   ignore_index=True)
    df["error"] = df["error"].fillna("")
    fig = figures.overview_figure(df)
    ax_ratio, ax_f, ax_r = fig.axes
    ticks = [t.get_text() for t in ax_ratio.get_yticklabels()]
    assert ticks == ["FRL-07_ol1 (ol)", "FRL-03_ol1 (ol)", "broken"]
    assert ax_f.get_xlabel() == "F at rim [0–1]" and ax_r.get_xlabel() == "retention r [0–1]"
    assert any("failed" in t.get_text() for t in ax_r.texts)
    plotted = sum(len(ln.get_xdata()) for ln in ax_r.lines if ln.get_marker() == "o")
    assert plotted == 2


def test_save_figure_writes_png_at_300_dpi_and_pdf(tmp_path, olivine):
    fig = figures.profile_figure(olivine)
    paths = figures.save_figure(fig, tmp_path / "sub" / "profile")
    png = paths["png"].read_bytes()
    assert png.startswith(b"\x89PNG") and paths["pdf"].read_bytes().startswith(b"%PDF")
    width = int.from_bytes(png[16:20], "big")
    assert width == pytest.approx(fig.get_figwidth() * 300, abs=2)
    assert not list(tmp_path.rglob(".*.tmp"))


def test_figures_are_reproducible(olivine, tmp_path):
    a = figures.save_figure(figures.corner_figure(olivine), tmp_path / "a")
    b = figures.save_figure(figures.corner_figure(olivine), tmp_path / "b")
    assert a["png"].read_bytes() == b["png"].read_bytes()
    assert np.array_equal(a["pdf"].read_bytes(), b["pdf"].read_bytes())


def test_rim_to_rim_traverse_shows_both_halves():
    result = _fit("FRL-07_ol3.txt", "olivine", {"FeO": 9.8})
    main = figures.profile_figure(result).axes[0]
    halves = [c for c in main.containers if c.get_label().startswith("measured, half")]
    assert len(halves) == 2
    assert sum(len(c.lines[0].get_xdata()) for c in halves) == result.n_used


def test_far_off_flagged_spot_does_not_squash_the_profile():
    result = _fit("FRL-12_pl2.csv", "plagioclase", {"Na2O": 3.1})
    main = figures.profile_figure(result).axes[0]
    lo, hi = main.get_ylim()
    used = result.spots[result.spots["used"]]["observed"]
    assert lo > result.spots["observed"].min()  # the glass hit (An ~49) is off scale
    assert (hi - lo) < 2 * (used.max() - used.min()) + 2
    assert any("off scale" in t.get_text() for t in main.texts)


def test_fixed_temperature_is_not_drawn_as_a_modelled_path():
    result = _fit("FRL-12_pl1.xlsx", "plagioclase", {"Na2O": 3.1}, temperature_c=1150.0)
    temp = figures.melt_path_figure(result).axes[2]
    assert any("fixed at 1150" in t.get_text() for t in temp.texts)


# --- presets, formats, layout ------------------------------------------------

#: A flag reason longer than any legend line (several checks failing at once).
LONG_REASON = ("Al2O3 1.85 wt% > 0.5 (inclusion or glass in beam?); CaO 1.10 wt% > 0.6 "
               "(pyroxene, plagioclase or glass in beam?); total 97.73 wt% outside 98.5-101.5 "
               "(check the beam current, the standards and the oxide list of the export)")
LONG_NAME = "FRL-07 olivine 1, lava lobe B, thin section 3, rim-to-rim traverse of session two"


def _long(result):
    """The same fit with a long sample name and a long reason on its first flagged spot."""
    spots = result.spots.copy()
    unused = spots.index[~spots["used"].astype(bool)]
    if len(unused):
        spots.loc[unused[0], "reason"] = LONG_REASON
        spots.loc[unused[0], "status"] = "flagged"
    traverse = dataclasses.replace(result.traverse, name=LONG_NAME)
    return dataclasses.replace(result, traverse=traverse, spots=spots)


def _joint(files, mineral, melt, **kw):
    from zoning.fitting import fit_sample

    traverses = [t for f in files for t in read_traverses(FERROLYN / f, mineral=mineral)]
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", ZoningWarning)  # short chains warn, on purpose
        warnings.simplefilter("ignore", RuntimeWarning)
        result = fit_sample(traverses, melt=melt, n_chains=16, n_sweeps=100, seed=2, **kw)
    crystals = tuple(dataclasses.replace(c, name=f"{c.name} {LONG_NAME[7:40]}")
                     for c in result.crystals)
    return dataclasses.replace(result, name=LONG_NAME, crystals=crystals)


@pytest.fixture(scope="module")
def layout_cases(olivine):
    plag = _fit("FRL-12_pl2.csv", "plagioclase", {"Na2O": 3.1})
    ol, pl = _long(olivine), _long(plag)
    return {
        "olivine": {"fit": ol, "joint": _joint(["FRL-21_olivines.csv"], "olivine",
                                               {"FeO": 9.8})},
        "plagioclase": {"fit": pl, "joint": _joint(["FRL-12_pl1.xlsx", "FRL-12_pl2.csv"],
                                                   "plagioclase", {"Na2O": 3.1}, kd=2.0,
                                                   kd_sd=0.3)},
        "overview": [ol, pl, olivine, plag],
    }


def _draw(kind, mineral, style, cases):
    from zoning.io import joint_figures

    fit, joint = cases[mineral]["fit"], cases[mineral]["joint"]
    if kind == "profile":
        return figures.profile_figure(fit, style=style)
    if kind == "melt_path":
        return figures.melt_path_figure(fit, style=style)
    if kind == "melt_path_loop":  # a binary-loop fit puts the loop in the melt path figure
        looped = dataclasses.replace(fit, settings={**fit.settings, "law": "binary loop"})
        return figures.melt_path_figure(looped, style=style)
    if kind == "posterior":
        return figures.corner_figure(fit, style=style)
    if kind == "overview":
        return figures.overview_figure(cases["overview"], style=style)
    if kind == "loop":
        return figures.loop_figure(mineral, 0.7, style=style)
    if kind == "joint_sample":
        return joint_figures.sample_figure(joint, style=style)
    if kind == "joint_crystals":
        return joint_figures.crystals_figure(joint, style=style)
    raise AssertionError(kind)


FIGURE_KINDS = ("profile", "melt_path", "melt_path_loop", "posterior", "overview", "loop",
                "joint_sample", "joint_crystals")


@pytest.mark.parametrize("style", list(figures.FIGURE_STYLES))
@pytest.mark.parametrize("mineral", ["olivine", "plagioclase"])
@pytest.mark.parametrize("kind", FIGURE_KINDS)
def test_every_figure_lies_inside_its_page_at_every_preset(kind, mineral, style, layout_cases):
    fig = _draw(kind, mineral, style, layout_cases)
    st = figures.FIGURE_STYLES[style]
    if kind == "posterior":  # square, as wide as the preset allows
        assert fig.get_figwidth() == pytest.approx(min(st.width_in, st.max_height_in),
                                                   rel=RTOL_IDENTITY)
    else:
        assert fig.get_figwidth() == pytest.approx(st.width_in, rel=RTOL_IDENTITY)
    assert fig.get_figheight() <= max(st.max_height_in, 9.5)
    assert layout_problems(fig) == []


def test_long_reasons_and_names_are_wrapped_never_cut(layout_cases):
    for style in figures.FIGURE_STYLES:
        fig = figures.profile_figure(layout_cases["olivine"]["fit"], style=style)
        texts = legend_texts(fig)
        assert f"not used: {LONG_REASON}" in texts
        assert not any("…" in t or "..." in t for t in texts)
        assert " ".join(fig._suptitle.get_text().split()).startswith(LONG_NAME)
        joint = _draw("joint_sample", "olivine", style, layout_cases)
        names = [c.name for c in layout_cases["olivine"]["joint"].crystals]
        assert all(any(t.startswith(n) for t in legend_texts(joint)) for n in names)


def test_layout_check_finds_a_cut_marker_a_legend_off_the_page_and_one_over_data():
    # Negative controls of the layout helper itself.
    fig = Figure(figsize=(3, 2))
    ax = fig.add_subplot()
    ax.plot([0.0, 1.0], [0.0, 1.0], "o")
    ax.set_xlim(0.0, 1.0)  # both markers half outside the panel
    assert any("cut by the panel edge" in p for p in layout_problems(fig))
    fig = Figure(figsize=(3, 2))
    ax = fig.add_subplot()
    ax.plot([0.5], [0.5], "o", label="a point under its own legend")
    ax.legend(loc="center")
    assert any("legend covers" in p for p in layout_problems(fig))
    ax.legend(loc="upper left", bbox_to_anchor=(0.9, 1.0))
    assert any("outside the figure" in p for p in layout_problems(fig))


def test_presets_set_size_and_fonts(olivine):
    thesis = figures.profile_figure(olivine, style="thesis")
    column = figures.profile_figure(olivine, style="column")
    slide = figures.profile_figure(olivine, style="slide")
    assert column.get_figwidth() == pytest.approx(85 / 25.4, rel=RTOL_IDENTITY)
    assert thesis.get_figwidth() == pytest.approx(160 / 25.4, rel=RTOL_IDENTITY)
    sizes = [f.axes[0].yaxis.label.get_fontsize() for f in (column, thesis, slide)]
    assert sizes == [figures.FIGURE_STYLES[s].font_pt for s in ("column", "thesis", "slide")]
    # Tick labels are created when the figure is saved, after the style's
    # settings are gone: they must still have the preset's size.
    slide.canvas.draw() if hasattr(slide.canvas, "renderer") else None
    from matplotlib.backends.backend_agg import FigureCanvasAgg

    FigureCanvasAgg(slide).draw()
    assert slide.axes[0].get_yticklabels()[0].get_fontsize() == figures.FIGURE_STYLES[
        "slide"].tick_pt
    best = [ln for ln in slide.axes[0].lines if ln.get_label() == "best fit"][0]
    assert best.get_linewidth() == pytest.approx(1.8 * figures.FIGURE_STYLES["slide"].line_scale)
    with pytest.raises(ZoningError, match="unknown figure style 'poster'.*column"):
        figures.profile_figure(olivine, style="poster")


def test_figure_formats_are_parsed_and_written(tmp_path, olivine):
    assert figures.parse_figure_formats("svg, PNG") == ("png", "svg")
    assert figures.parse_figure_formats(None) == ("png", "pdf")
    assert figures.parse_figure_formats(["pdf"]) == ("pdf",)
    with pytest.raises(ZoningError, match="'tiff' is not known.*--figure-format"):
        figures.parse_figure_formats("png,tiff")
    with pytest.raises(ZoningError, match="is empty"):
        figures.parse_figure_formats(" , ")
    paths = figures.save_figure(figures.loop_figure("olivine", 0.7), tmp_path / "loop",
                                formats="svg,png")
    assert sorted(paths) == ["png", "svg"]
    assert paths["svg"].read_text().lstrip().startswith("<?xml")
    # Reproducible SVG: no date, fixed element ids.
    one = figures.save_figure(figures.loop_figure("olivine", 0.7), tmp_path / "a", formats="svg")
    two = figures.save_figure(figures.loop_figure("olivine", 0.7), tmp_path / "b", formats="svg")
    assert one["svg"].read_bytes() == two["svg"].read_bytes()


def test_curve_under_the_best_fit_is_marked_in_the_legend(olivine):
    fig = figures.profile_figure(olivine)
    main = fig.axes[0]
    best = [ln for ln in main.lines if ln.get_label() == "best fit"][0]
    lo, hi = main.get_ylim()
    for ln in main.lines:
        label = ln.get_label()
        if label.startswith("pure "):
            gap = np.max(np.abs(np.asarray(ln.get_ydata()) - best.get_ydata()))
            assert label.endswith(": under the best fit") == (gap <= 0.01 * (hi - lo))


# --- figures from every command ---------------------------------------------


def _cli(argv):
    from zoning.cli import main

    with warnings.catch_warnings():
        warnings.simplefilter("ignore", ZoningWarning)  # short chains warn, on purpose
        warnings.simplefilter("ignore", RuntimeWarning)
        return main(argv)


def test_zoning_fit_writes_the_figures_and_report_of_batch_and_says_where(tmp_path, capsys):
    export = tmp_path / "FRL-07_ol1.csv"
    shutil.copy(FERROLYN / "FRL-07_ol1.csv", export)
    fast = ["--melt", "FeO=9.8", "--walkers", "16", "--steps", "150", "--seed", "2"]
    out = tmp_path / "res"
    assert _cli(["fit", str(export), *fast, "--out", str(out), "--figure-format", "svg,png",
                 "--figure-style", "column"]) == 0
    text = capsys.readouterr().out
    folder = out / "FRL-07_ol1"
    names = {p.name for p in folder.iterdir()}
    assert {f"{stem}.{fmt}" for stem in figures.SAMPLE_FIGURES for fmt in ("png", "svg")} <= names
    assert "report.pdf" in names and not any(n.endswith(".pdf") and n != "report.pdf"
                                             for n in names)
    assert (folder / "report.pdf").read_bytes().startswith(b"%PDF")
    assert f"{folder}: figures profile, melt_path, posterior (png, svg); report.pdf" in text
    # The PNG has the width of the chosen preset (85 mm at 300 dpi).
    png = (folder / "profile.png").read_bytes()
    assert int.from_bytes(png[16:20], "big") == pytest.approx(85 / 25.4 * 300, abs=2)
    # --no-figures --no-report: the fit's tables only, and the console says so.
    bare = tmp_path / "bare"
    assert _cli(["fit", str(export), *fast, "--out", str(bare), "--no-figures",
                 "--no-report"]) == 0
    assert {p.name for p in (bare / "FRL-07_ol1").iterdir()} == {
        "fit.json", "profile.csv", "profile.json"}
    assert "no figures or reports" in capsys.readouterr().out
    # A bad format is one clear line naming what exists, exit code 2.
    assert _cli(["fit", str(export), *fast, "--out", str(bare), "--figure-format", "tif"]) == 2
    assert "zoning writes png, pdf, svg" in capsys.readouterr().err


def _one_sample(tmp_path, extra=""):
    shutil.copy(FERROLYN / "FRL-07_ol1.csv", tmp_path / "a.csv")
    path = tmp_path / "project.toml"
    path.write_text('[defaults]\nwalkers = 16\nsteps = 120\nseed = 2\nreport = false\n'
                    f'{extra}\n[samples."A"]\nfile = "a.csv"\nmelt = {{ FeO = 9.8 }}\n',
                    encoding="utf-8")
    return path


def test_figure_format_and_style_are_project_keys_and_part_of_the_fingerprint(tmp_path):
    from zoning.exceptions import ProjectError
    from zoning.workflow import fingerprint, read_project

    plain = fingerprint(read_project(_one_sample(tmp_path)).jobs[0])
    job = read_project(_one_sample(tmp_path, 'figure_format = "svg,png"')).jobs[0]
    assert job.figure_format == ("png", "svg") and job.figure_style == "thesis"
    svg = fingerprint(job)
    assert svg != plain
    same = read_project(_one_sample(tmp_path, 'figure_format = ["png", "svg"]')).jobs[0]
    assert fingerprint(same) == svg  # the same set, spelled another way
    column = read_project(_one_sample(tmp_path, 'figure_style = "column"')).jobs[0]
    assert column.figure_style == "column" and fingerprint(column) != plain
    with pytest.raises(ProjectError, match="'figure_format'.*png, pdf, svg"):
        read_project(_one_sample(tmp_path, 'figure_format = ["tiff"]'))
    with pytest.raises(ProjectError, match="'figure_style'.*'thesis', 'column', 'slide'"):
        read_project(_one_sample(tmp_path, 'figure_style = "poster"'))


def test_batch_rerun_with_other_figure_formats_is_not_unchanged(tmp_path):
    from zoning.workflow import read_project, run_batch

    out = tmp_path / "out"
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", ZoningWarning)
        warnings.simplefilter("ignore", RuntimeWarning)
        first = run_batch(read_project(_one_sample(tmp_path)), out, workers=1, progress=False)
        again = run_batch(read_project(_one_sample(tmp_path)), out, workers=1, progress=False)
        svg = run_batch(read_project(_one_sample(tmp_path, 'figure_format = "svg"\n'
                                                 'figure_style = "slide"')),
                        out, workers=1, progress=False)
    assert [o.status for o in (*first.outcomes, *again.outcomes, *svg.outcomes)] == [
        "fitted", "unchanged", "fitted"]
    names = {p.name for p in (out / "A").iterdir()}
    assert {"profile.svg", "melt_path.svg", "posterior.svg"} <= names
    assert not names & {"profile.png", "profile.pdf"}  # the folder holds this run's set
    assert (out / "overview.svg").exists()


def test_label_breaks_are_kept_when_labels_are_wrapped(olivine):
    fig = figures.profile_figure(olivine, style="column")
    assert fig.axes[-1].get_ylabel() == "residual\n[mol% Fo]"


# --- fits with sectioning and diffusion after growth ------------------------------


@pytest.fixture(scope="module")
def relaxed():
    """Olivine cut off-centre (h/R = 0.5) and relaxed by diffusion (L = 25 µm), with NiO."""
    from test_fit_processes import MELT, OL_TRUTH, _traverse

    traverse = _traverse(**OL_TRUTH, traces=("Ni",), section_h_over_r=0.5,
                         diffusion_length_um=25.0)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", ZoningWarning)  # short chains warn, on purpose
        warnings.simplefilter("ignore", RuntimeWarning)
        return fit_traverse(traverse, melt=MELT["olivine"], n_walkers=16, n_steps=150, seed=2,
                            traces=("NiO",), temperature_c=1150.0)


def _outside_page(fig) -> list[str]:
    """Drawn texts, legends and panels whose window extent leaves the figure (drawn first)."""
    from _layout import SLACK_PX, _axes, _drawn_texts
    from matplotlib.legend import Legend

    renderer = fig.canvas.get_renderer()
    page = fig.bbox
    arts = _drawn_texts(fig) + list(fig.findobj(Legend))
    arts += [ax for ax in _axes(fig) if ax.get_visible() and ax.axison]
    out = []
    for art in arts:
        box = art.get_window_extent(renderer)
        if (box.x0 < page.x0 - SLACK_PX or box.y0 < page.y0 - SLACK_PX
                or box.x1 > page.x1 + SLACK_PX or box.y1 > page.y1 + SLACK_PX):
            out.append(f"{type(art).__name__} {getattr(art, 'get_text', str)()!r}: {box}")
    return out


def test_diffusion_fit_figures_lie_inside_their_page(relaxed):
    assert {"section_h_over_r", "diffusion_length_um"} <= set(relaxed.parameter_names)
    for style in figures.FIGURE_STYLES:
        profile = figures.profile_figure(relaxed, style=style)
        assert layout_problems(profile) == []
        assert _outside_page(profile) == []
        texts = legend_texts(profile)
        assert not any("…" in t or "..." in t for t in texts)
        # One best-fit entry for all panels (the NiO panel's curve is relaxed too).
        best = [t for t in texts if t.startswith("best fit") and "as grown" not in t]
        assert best == ["best fit (relaxed)"]
        assert "best fit as grown (before diffusion)" in texts
        # The relaxed curve is the best fit against which hidden curves are marked.
        main = profile.axes[0]
        curve = [ln for ln in main.lines if ln.get_label() == "best fit (relaxed)"][0]
        lo, hi = main.get_ylim()
        pure = [ln for ln in main.lines if ln.get_label().startswith("pure ")]
        assert pure
        for ln in pure:
            gap = np.max(np.abs(np.asarray(ln.get_ydata()) - curve.get_ydata()))
            assert ln.get_label().endswith(": under the best fit") == (gap <= 0.01 * (hi - lo))

        corner = figures.corner_figure(relaxed, style=style)
        assert layout_problems(corner) == []
        assert _outside_page(corner) == []
        labels = {" ".join(ax.get_xlabel().split()) for ax in corner.axes}
        labels |= {" ".join(ax.get_ylabel().split()) for ax in corner.axes}
        assert {"h/R", "L [µm]"} <= labels
        bottom = [ax for ax in corner.axes if ax.get_xlabel()]
        assert all(len(ax.get_xticks()) <= 4 for ax in corner.axes if ax.axison)
        assert all(lab.get_rotation() == 90 for ax in bottom for lab in ax.get_xticklabels())


def test_process_parameters_have_readable_labels():
    assert figures.quantity_label("section_h_over_r") == "section h/R"
    assert figures.quantity_label("diffusion_length_um") == "diffusion length L [µm]"
    assert figures.quantity_label("diffusion_time_days") == "diffusion time [days]"


@pytest.mark.parametrize("chars", [-5, 0, 1, 3, 5])
def test_wrap_never_makes_one_letter_lines(chars):
    text = "a b c d e f g h i j k l m n o p"
    lines = figures._wrap(text, chars).split("\n")
    assert " ".join(lines) == text  # nothing cut
    assert len(lines) > 1 and all(len(line) >= 6 for line in lines[:-1])
