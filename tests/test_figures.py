"""Figures: content checks (labels, plotted points, bands), not pixels."""

import warnings

import matplotlib
import numpy as np
import pandas as pd
import pytest
from _tolerances import GROWTH_ONLY
from matplotlib.collections import PolyCollection
from matplotlib.figure import Figure
from zoning.demo_data import DEMO_DIR
from zoning.fitting import fit_traverse
from zoning.io import figures, read_traverses

from zoning.exceptions import ZoningWarning

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
    assert "pure fractional (r = 0)" in labels and "pure equilibrium (r = 1)" in labels
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
    assert {"melt MgO", "melt FeO"} <= set(_labels(oxide))
    assert temp.get_ylabel() == "melt temperature [°C]" and len(temp.lines) == 1
    assert record.get_xlabel() == "F, fraction crystallized"
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
    assert ax_f.get_xlabel() == "F at rim" and ax_r.get_xlabel() == "retention r"
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
