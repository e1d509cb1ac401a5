"""Figures of a fit: profile, melt path, posterior, and the batch overview.

Every function draws with matplotlib only, into a figure it creates (a
:class:`matplotlib.figure.Figure` that needs no GUI and no pyplot state, so
it is safe in worker processes) or into the ``ax``/``fig`` given by the
caller, e.g. in a notebook::

    fig, ax = plt.subplots()
    profile_figure(result, ax=ax)

Colours are the Okabe & Ito (2008) colour-blind-safe palette; sizes fit a
thesis page (full text width 160 mm, half width 80 mm); :func:`save_figure`
writes PNG at 300 dpi and a vector PDF. Results are read by attribute
(:class:`zoning.fitting.FitResult`); this module does not import the fitting
package.
"""

from __future__ import annotations

import os
from collections.abc import Mapping, Sequence
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd
from matplotlib.figure import Figure
from matplotlib.lines import Line2D
from matplotlib.ticker import MaxNLocator
from scipy.ndimage import gaussian_filter

__all__ = [
    "PALETTE",
    "TEXT_WIDTH_IN",
    "profile_figure",
    "melt_path_figure",
    "corner_figure",
    "overview_figure",
    "loop_figure",
    "save_figure",
    "sample_figures",
    "save_sample_figures",
    "quantity_label",
]

#: Okabe & Ito (2008) colour-blind-safe palette ("Color Universal Design").
PALETTE = {
    "black": "#000000",
    "orange": "#E69F00",
    "sky": "#56B4E9",
    "green": "#009E73",
    "yellow": "#F0E442",
    "blue": "#0072B2",
    "vermillion": "#D55E00",
    "purple": "#CC79A7",
    "grey": "#7F7F7F",
}

#: Full text width of a thesis page (160 mm) [in].
TEXT_WIDTH_IN = 160 / 25.4

#: Hollow markers for flagged spots, one per distinct reason.
_FLAG_MARKERS = ("o", "s", "^", "D", "v", "P", "X", "<", ">", "h")

_LABELS = {
    "melt_mg_number": "parent melt Mg#",
    "melt_ca_number": "parent melt Ca#",
    "f_rim": "F at rim",
    "f_core": "F at core",
    "retention": "retention r",
    "kd": "Kd",
    "growth_exponent": "growth exponent n",
    "core_offset_um": "core offset [µm]",
    "melt0_ni_ppm": "parent melt Ni [ppm]",
    "melt0_sr_ppm": "parent melt Sr [ppm]",
    "melt0_mgo_wt": "parent melt MgO [wt%]",
    "melt_mgo_wt": "parent melt MgO [wt%]",
    "melt_cao_wt": "parent melt CaO [wt%]",
    "temperature_c": "parent temperature [°C]",
}


#: Short labels for the crowded axes of the corner plot.
_SHORT = {
    "melt_mg_number": "parent Mg#",
    "melt_ca_number": "parent Ca#",
    "f_rim": "F rim",
    "f_core": "F core",
    "retention": "r",
    "growth_exponent": "n",
    "core_offset_um": "offset [µm]",
    "melt0_ni_ppm": "Ni [ppm]",
    "melt0_sr_ppm": "Sr [ppm]",
    "melt0_mgo_wt": "MgO [wt%]",
}


def quantity_label(name: str) -> str:
    """Readable axis label of a fitted quantity.

    Parameters
    ----------
    name : str
        Quantity name as in :attr:`FitResult.estimates`.

    Returns
    -------
    str
    """
    return _LABELS.get(name, name.replace("_", " "))


def _major_label(mineral: str) -> str:
    return "Fo [mol%]" if mineral == "olivine" else "An [mol%]"


def _new_figure(width: float, height: float) -> Figure:
    return Figure(figsize=(width, height), layout="constrained")


def _trace_oxides(result) -> list[str]:
    cols = [c for c in result.spots.columns if c.endswith("_observed") and c != "observed"]
    return [c[: -len("_observed")] for c in cols]


def _flag_groups(spots: pd.DataFrame) -> list[tuple[str, pd.DataFrame]]:
    """Spots not used in the fit, grouped by the reason shown in the legend."""
    unused = spots[~spots["used"].astype(bool)]
    reasons = []
    for _, row in unused.iterrows():
        reason = str(row.get("reason", "") or "")
        if row.get("status", "ok") == "ok" or not reason:
            reason = "outside fitted range" if row.get("status", "ok") == "ok" else "flagged"
        reasons.append(reason)
    unused = unused.assign(_why=reasons)
    return [(why, grp) for why, grp in unused.groupby("_why", sort=True)]


def _short(text: str, n: int = 48) -> str:
    return text if len(text) <= n else text[: n - 1] + "…"


def _sides(result, spots: pd.DataFrame) -> pd.Series:
    """Half-profile ("A"/"B", "" for one half) of each spot, from the traverse."""
    t = getattr(result, "traverse", None)
    tsp = getattr(t, "spots", None)
    if tsp is None or "side" not in tsp or "row" not in tsp or "row" not in spots:
        return pd.Series("", index=spots.index)
    side = dict(zip(tsp["row"].tolist(), tsp["side"].fillna("").astype(str), strict=True))
    return spots["row"].map(side).fillna("").astype(str)


def _draw_spots(ax, spots: pd.DataFrame, x: str, y: str, sig: str | None, mineral_color: str,
                flag_labels: bool = True, sides: pd.Series | None = None):
    used = spots[spots["used"].astype(bool)]
    side = (sides if sides is not None else pd.Series("", index=spots.index)).loc[used.index]
    halves = sorted(v for v in side.unique() if v)
    groups = [("", used)] if len(halves) < 2 else [(h, used[side == h]) for h in halves]
    styles = {"": ("o", mineral_color), halves[0] if halves else "A": ("o", mineral_color)}
    if len(halves) >= 2:
        styles[halves[1]] = ("D", PALETTE["purple"])
    for half, grp in groups:
        xs = grp[x].to_numpy(float)
        ys = grp[y].to_numpy(float)
        es = grp[sig].to_numpy(float) if sig and sig in grp else None
        if es is not None and not np.isfinite(es).any():
            es = None
        marker, colour = styles.get(half, ("o", mineral_color))
        label = (f"measured ({len(grp)} spots used)" if not half
                 else f"measured, half {half} ({len(grp)} spots used)")
        ax.errorbar(
            xs, ys, yerr=es, fmt=marker, ms=4, color=colour, ecolor=colour,
            elinewidth=0.8, capsize=0, label=label, zorder=4,
        )
    for k, (why, grp) in enumerate(_flag_groups(spots)):
        gx = grp[x].to_numpy(float)
        gy = grp[y].to_numpy(float)
        ok = np.isfinite(gx) & np.isfinite(gy)
        if not ok.any():
            continue
        ax.plot(
            gx[ok], gy[ok], linestyle="none", marker=_FLAG_MARKERS[k % len(_FLAG_MARKERS)],
            ms=5, mfc="none", mec=PALETTE["vermillion"], mew=1.0,
            label=f"not used: {_short(why)}" if flag_labels else None, zorder=5,
        )


def _shade_reversals(ax, result) -> None:
    rev = getattr(result, "reversals", None)
    if rev is None or len(rev) == 0 or "start_um" not in rev:
        return
    for i, (_, r) in enumerate(rev.iterrows()):
        ax.axvspan(
            float(r["start_um"]), float(r["end_um"]), color=PALETTE["yellow"], alpha=0.3,
            lw=0, label="reversal (recharge/mixing?)" if i == 0 else None, zorder=0,
        )


def _zoom_to_used(ax, spots: pd.DataFrame, y: str, sig: str | None,
                  curves: list[np.ndarray]) -> None:
    """Scale the y axis to the used spots and the model; pin far-off spots at the edge.

    A flagged spot far from the rest (e.g. a glass hit) would otherwise
    squash the profile; it is drawn at the edge of the panel with a note.
    """
    used = spots[spots["used"].astype(bool)]
    vals = [used[y].to_numpy(float)]
    if sig and sig in used:
        e = np.nan_to_num(used[sig].to_numpy(float))
        vals += [vals[0] - e, vals[0] + e]
    vals += [np.asarray(c, float) for c in curves]
    allv = np.concatenate([v.ravel() for v in vals]) if vals else np.array([])
    allv = allv[np.isfinite(allv)]
    if allv.size == 0:
        return
    lo, hi = float(allv.min()), float(allv.max())
    pad = 0.08 * (hi - lo) if hi > lo else max(abs(hi) * 0.05, 1e-3)
    lo, hi = lo - pad, hi + pad
    ax.set_ylim(lo, hi)
    for line in ax.lines:
        if not line.get_label().startswith("not used") and line.get_markerfacecolor() != "none":
            continue
        ys = np.asarray(line.get_ydata(), float)
        off = (ys < lo) | (ys > hi)
        if not off.any() or line.get_linestyle() not in ("None", "none", ""):
            continue
        xs = np.asarray(line.get_xdata(), float)
        clipped = np.clip(ys, lo, hi)
        line.set_ydata(clipped)
        line.set_clip_on(False)
        for xv, yv, orig in zip(xs[off], clipped[off], ys[off], strict=True):
            ax.annotate(f"{orig:.3g} (off scale)", (xv, yv), xytext=(5, -10 if yv >= hi else 4),
                        textcoords="offset points", fontsize="xx-small",
                        color=PALETTE["vermillion"], zorder=10)


def profile_figure(result, *, ax=None, fig: Figure | None = None) -> Figure:
    """Measured profile, best fit, 95% band and the two limiting models.

    Panels (top to bottom): Fo or An versus distance from the core with
    error bars (spots not used in the fit drawn hollow, with their reason in
    the legend), the best-fit curve, its 95% band, the best pure-fractional
    (r = 0) and pure-equilibrium (r = 1) curves; one panel per fitted trace
    oxide; the residuals (observed - model).

    Parameters
    ----------
    result : FitResult
        A fit of one traverse.
    ax : matplotlib.axes.Axes, optional
        Draw only the main panel into this Axes (e.g. in a notebook).
    fig : matplotlib.figure.Figure, optional
        Draw all panels into this (empty) figure.

    Returns
    -------
    matplotlib.figure.Figure
    """
    traces = _trace_oxides(result)
    if ax is not None:
        _profile_main(ax, result)
        ax.legend(fontsize="x-small", loc="best")
        return ax.figure
    n = 2 + len(traces)
    if fig is None:
        fig = _new_figure(TEXT_WIDTH_IN, 3.2 + 1.6 * (n - 1))
    ratios = [3] + [2] * len(traces) + [1.3]
    axes = fig.subplots(n, 1, sharex=True, gridspec_kw={"height_ratios": ratios})
    _profile_main(axes[0], result)
    axes[0].set_xlabel("")
    axes[0].legend(fontsize="x-small", loc="best", ncol=2)
    axes[0].set_title(f"{result.sample} ({result.mineral}): measured profile and fit",
                      fontsize="medium")
    for a, oxide in zip(axes[1:-1], traces, strict=True):
        _profile_trace(a, result, oxide)
    _profile_residuals(axes[-1], result)
    axes[-1].set_xlabel("Distance from core [µm]")
    return fig


def _profile_main(ax, result) -> None:
    curve = result.curve
    spots = result.spots
    d = curve["distance_um"].to_numpy(float)
    _shade_reversals(ax, result)
    if {"lo95", "hi95"} <= set(curve.columns):
        ax.fill_between(
            d, curve["lo95"].to_numpy(float), curve["hi95"].to_numpy(float),
            color=PALETTE["sky"], alpha=0.45, lw=0, label="95% band", zorder=1,
        )
    if "fractional" in curve:
        ax.plot(d, curve["fractional"], color=PALETTE["orange"], ls="--", lw=1.2,
                label="pure fractional (r = 0)", zorder=2)
    if "equilibrium" in curve:
        ax.plot(d, curve["equilibrium"], color=PALETTE["green"], ls=":", lw=1.5,
                label="pure equilibrium (r = 1)", zorder=2)
    grown = "best_grown" in curve and bool(np.any(
        np.abs(curve["best_grown"].to_numpy(float) - curve["best"].to_numpy(float)) > 0))
    if grown:  # diffusion after growth fitted: the profile as grown, before relaxing
        ax.plot(d, curve["best_grown"], color=PALETTE["blue"], ls="-.", lw=1.1,
                label="best fit as grown (before diffusion)", zorder=3)
    if "best" in curve:
        ax.plot(d, curve["best"], color=PALETTE["blue"], lw=1.8,
                label="best fit (relaxed)" if grown else "best fit", zorder=3)
    _draw_spots(ax, spots, "distance_um", "observed", "sigma", PALETTE["black"],
                sides=_sides(result, spots))
    _zoom_to_used(ax, spots, "observed", "sigma",
                  [curve[c].to_numpy(float) for c in ("best", "lo95", "hi95", "fractional",
                                                      "equilibrium", "best_grown")
                   if c in curve])
    ax.set_ylabel(_major_label(result.mineral))
    ax.set_xlabel("Distance from core [µm]")


def _profile_trace(ax, result, oxide: str) -> None:
    curve = result.curve
    spots = result.spots
    d = curve["distance_um"].to_numpy(float)
    if {f"{oxide}_lo95", f"{oxide}_hi95"} <= set(curve.columns):
        ax.fill_between(d, curve[f"{oxide}_lo95"], curve[f"{oxide}_hi95"],
                        color=PALETTE["sky"], alpha=0.45, lw=0, label="95% band")
    if f"{oxide}_best" in curve:
        ax.plot(d, curve[f"{oxide}_best"], color=PALETTE["blue"], lw=1.8, label="best fit")
    sig = f"{oxide}_sigma" if f"{oxide}_sigma" in spots else None
    _draw_spots(ax, spots, "distance_um", f"{oxide}_observed", sig, PALETTE["black"],
                flag_labels=False, sides=_sides(result, spots))
    _zoom_to_used(ax, spots, f"{oxide}_observed", sig,
                  [curve[c].to_numpy(float) for c in (f"{oxide}_best", f"{oxide}_lo95",
                                                      f"{oxide}_hi95") if c in curve])
    ax.set_ylabel(f"{oxide} [wt%]")
    ax.legend(fontsize="x-small", loc="best")


def _profile_residuals(ax, result) -> None:
    spots = result.spots
    used = spots[spots["used"].astype(bool)]
    x = used["distance_um"].to_numpy(float)
    r = used["residual"].to_numpy(float)
    s = used["sigma"].to_numpy(float) if "sigma" in used else None
    if s is not None and not np.isfinite(s).any():
        s = None
    ax.axhline(0.0, color=PALETTE["grey"], lw=0.8)
    ax.errorbar(x, r, yerr=s, fmt="o", ms=3, color=PALETTE["black"], elinewidth=0.8)
    unit = "Fo" if result.mineral == "olivine" else "An"
    ax.set_ylabel(f"residual\n[mol% {unit}]")


def _f_of_distance(result, distance: np.ndarray) -> np.ndarray:
    curve = result.curve
    d = curve["distance_um"].to_numpy(float)
    f = curve["f"].to_numpy(float)
    order = np.argsort(d)
    return np.interp(distance, d[order], f[order], left=np.nan, right=np.nan)


def melt_path_figure(result, *, ax=None, fig: Figure | None = None) -> Figure:
    """Melt evolution with the crystallized fraction F, and the crystal record.

    Panels: melt Mg# (olivine) or Ca# (plagioclase) versus F with the
    parent marked; the oxides of the exchanging pair in the melt; the melt
    temperature where a law gives it; the crystal composition recorded
    (best-fit curve and the measured spots placed at their F). For a fit
    with the binary-loop law the loop itself (liquidus and solidus) is drawn
    with the equilibrium and fractional paths.

    Parameters
    ----------
    result : FitResult
        A fit of one traverse.
    ax : matplotlib.axes.Axes, optional
        Draw only the melt-ratio panel into this Axes.
    fig : matplotlib.figure.Figure, optional
        Draw all panels into this (empty) figure.

    Returns
    -------
    matplotlib.figure.Figure
    """
    if ax is not None:
        _melt_ratio_panel(ax, result)
        return ax.figure
    if fig is None:
        fig = _new_figure(TEXT_WIDTH_IN, 5.2)
    axes = fig.subplots(2, 2, sharex=True).ravel()
    _melt_ratio_panel(axes[0], result)
    _melt_oxide_panel(axes[1], result)
    _temperature_panel(axes[2], result)
    _record_panel(axes[3], result)
    for a in axes[2:]:
        a.set_xlabel("F, fraction crystallized")
    fig.suptitle(f"{result.sample}: melt path of the best fit", fontsize="medium")
    if _is_loop(result):
        _loop_inset(fig, result)
    return fig


def _melt_ratio_panel(ax, result) -> None:
    curve = result.curve
    f = curve["f"].to_numpy(float)
    name = "melt_mg_number" if result.mineral == "olivine" else "melt_ca_number"
    label = "melt Mg#" if result.mineral == "olivine" else "melt Ca#"
    if "melt_ratio" in curve:
        ax.plot(f, curve["melt_ratio"], color=PALETTE["blue"], lw=1.8, label=label)
    est = result.estimates.get(name)
    if est is not None and np.isfinite(est.best):
        f0 = float(np.nanmin(f)) if len(f) else 0.0
        ax.plot([f0], [est.best], marker="*", ms=11, color=PALETTE["vermillion"],
                linestyle="none", label="parent", zorder=5)
        if np.isfinite(est.lo95) and np.isfinite(est.hi95):
            # Non-negative by construction (best is the median, inside its
            # band); clipped so that a result from elsewhere cannot crash it.
            err = [[max(est.best - est.lo95, 0.0)], [max(est.hi95 - est.best, 0.0)]]
            ax.errorbar([f0], [est.best], yerr=err,
                        color=PALETTE["vermillion"], capsize=3, lw=1)
    ax.set_ylabel(label + " [fraction]")
    ax.legend(fontsize="x-small")


def _melt_oxide_panel(ax, result) -> None:
    curve = result.curve
    f = curve["f"].to_numpy(float)
    cols = [c for c in curve.columns if c.startswith("melt_") and c.endswith("_wt")]
    colours = [PALETTE["orange"], PALETTE["green"], PALETTE["purple"], PALETTE["sky"]]
    drawn = 0
    for c, col in zip(cols, colours * 3, strict=False):
        y = curve[c].to_numpy(float)
        if np.isfinite(y).any():
            oxide = c[len("melt_"):-len("_wt")]
            ax.plot(f, y, color=col, lw=1.6, label=f"melt {_oxide_name(oxide)}")
            drawn += 1
    if drawn:
        ax.legend(fontsize="x-small")
    else:
        ax.text(0.5, 0.5, "no melt oxide path", transform=ax.transAxes, ha="center")
    ax.set_ylabel("melt oxide [wt%]")


def _oxide_name(key: str) -> str:
    names = {"mgo": "MgO", "feo": "FeO", "cao": "CaO", "na2o": "Na2O", "k2o": "K2O",
             "sio2": "SiO2", "al2o3": "Al2O3"}
    return names.get(key.lower(), key)


def _temperature_panel(ax, result) -> None:
    curve = result.curve
    t = curve["temperature_c"].to_numpy(float) if "temperature_c" in curve else np.array([])
    if t.size and np.isfinite(t).any() and np.nanmax(t) - np.nanmin(t) < 1e-9:
        ax.plot(curve["f"], t, color=PALETTE["grey"], lw=1.2, ls="--")
        ax.text(0.5, 0.6, f"temperature fixed at {np.nanmax(t):.0f} °C\n(given, not modelled)",
                transform=ax.transAxes, ha="center", va="center", color=PALETTE["grey"],
                fontsize="small")
        ax.set_ylabel("melt temperature [°C]")
    elif t.size and np.isfinite(t).any():
        ax.plot(curve["f"], t, color=PALETTE["vermillion"], lw=1.6)
        ax.set_ylabel("melt temperature [°C]")
    else:
        ax.text(0.5, 0.5, "no temperature law\nfor this model", transform=ax.transAxes,
                ha="center", va="center", color=PALETTE["grey"])
        ax.set_ylabel("melt temperature [°C]")


def _record_panel(ax, result) -> None:
    curve = result.curve
    if "best" in curve:
        ax.plot(curve["f"], curve["best"], color=PALETTE["blue"], lw=1.8, label="recorded (fit)")
    spots = result.spots
    used = spots[spots["used"].astype(bool)]
    fx = _f_of_distance(result, used["distance_um"].to_numpy(float))
    ax.plot(fx, used["observed"].to_numpy(float), "o", ms=3.5, color=PALETTE["black"],
            label="measured, at fitted F")
    ax.set_ylabel("crystal " + _major_label(result.mineral))
    ax.legend(fontsize="x-small")


def _is_loop(result) -> bool:
    law = str(result.settings.get("law", "") or result.settings.get("partitioning", ""))
    return "loop" in law.lower()


def _loop_inset(fig: Figure, result) -> None:
    """Replace the temperature panel by the binary loop for a loop-law fit."""
    name = "melt_mg_number" if result.mineral == "olivine" else "melt_ca_number"
    est = result.estimates.get(name)
    if est is None or not np.isfinite(est.best):
        return
    ax = fig.axes[2]
    ax.clear()
    loop_figure(result.mineral, est.best, ax=ax)


def loop_figure(mineral: str, bulk: float, *, ax=None, fig: Figure | None = None,
                f_max: float = 0.99) -> Figure:
    """Binary solid-solution loop with the equilibrium and fractional paths.

    Draws the liquidus and solidus of the forsterite-fayalite or
    anorthite-albite loop of :mod:`zoning.loops` (temperature versus
    composition), the bulk composition, and the liquid and crystal
    compositions along the equilibrium (r = 1) and fractional (r = 0)
    paths: fractional crystallization drives the last liquid and the last
    crystal beyond the equilibrium end point of the same bulk composition.

    Parameters
    ----------
    mineral : {"olivine", "plagioclase"}
        Selects the loop.
    bulk : float
        Bulk liquid composition: melt Mg# or Ca# [fraction].
    ax : matplotlib.axes.Axes, optional
        Draw into this Axes.
    fig : matplotlib.figure.Figure, optional
        Draw into this (empty) figure.
    f_max : float, optional
        Largest crystallized fraction of the fractional path [fraction].

    Returns
    -------
    matplotlib.figure.Figure
    """
    from zoning.loops import LOOPS

    loop = LOOPS[mineral]
    if ax is None:
        fig = fig if fig is not None else _new_figure(TEXT_WIDTH_IN / 2 + 0.6, 3.2)
        ax = fig.add_subplot(1, 1, 1)
    end = "Fo" if mineral == "olivine" else "An"
    curves = loop.curves()
    t = curves["temperature_c"]
    ax.plot(100 * curves["x_liquid"], t, color=PALETTE["grey"], lw=1.0, label="liquidus")
    ax.plot(100 * curves["x_solid"], t, color=PALETTE["grey"], lw=1.0, ls="--",
            label="solidus")
    eq = loop.path(np.linspace(0.0, 1.0, 120), bulk, 1.0)
    fr = loop.path(np.linspace(0.0, f_max, 120), bulk, 0.0)
    ax.plot(100 * fr["x_liquid"], fr["temperature_c"], color=PALETTE["orange"], lw=5,
            alpha=0.55, solid_capstyle="butt", label="fractional (r = 0): liquid")
    ax.plot(100 * fr["x_solid"], fr["temperature_c"], color=PALETTE["orange"], lw=5,
            alpha=0.55, ls=(0, (1, 1)), label="fractional: crystal rim")
    ax.plot(100 * eq["x_liquid"], eq["temperature_c"], color=PALETTE["green"], lw=1.8,
            label="equilibrium (r = 1): liquid")
    ax.plot(100 * eq["x_solid"], eq["temperature_c"], color=PALETTE["green"], lw=1.8, ls=":",
            label="equilibrium: crystal")
    for path, colour, marker, what in ((eq, PALETTE["green"], "s", "equilibrium"),
                                       (fr, PALETTE["orange"], "v", "fractional")):
        ax.plot(100 * path["x_liquid"][-1], path["temperature_c"][-1], marker=marker, ms=7,
                color=colour, linestyle="none", label=f"{what}: last liquid")
    ax.axvline(100 * bulk, color=PALETTE["grey"], lw=0.8, label=f"bulk {end}{100 * bulk:.0f}")
    ax.set_xlabel(f"{end} [mol%]")
    ax.set_ylabel("temperature [°C]")
    ax.set_xlim(0, 100)
    ax.legend(fontsize="xx-small", loc="upper left")
    return ax.figure


def _hist_levels(h: np.ndarray, fractions=(0.68, 0.95)) -> list[float]:
    flat = np.sort(h.ravel())[::-1]
    cum = np.cumsum(flat)
    if cum[-1] <= 0:
        return []
    cum /= cum[-1]
    levels = [flat[min(np.searchsorted(cum, q), len(flat) - 1)] for q in fractions]
    return sorted(set(float(v) for v in levels if v > 0))


def corner_figure(
    result, *, fig: Figure | None = None, names: Sequence[str] | None = None,
    max_points: int = 3000, seed: int = 0,
) -> Figure:
    """Pairwise posterior plot with marginal histograms.

    Lower triangle: the posterior draws as light points with the 68% and 95%
    highest-density contours of their 2-d histogram; diagonal: the marginal
    histogram with the best value (solid) and the 95% band (dashed).

    Parameters
    ----------
    result : FitResult
        A fit with posterior ``samples``.
    fig : matplotlib.figure.Figure, optional
        Draw into this (empty) figure.
    names : sequence of str, optional
        Parameters to show (default: all of ``result.parameter_names``).
    max_points : int, optional
        Most points drawn per panel (a fixed-seed subsample; contours and
        histograms use every draw).
    seed : int, optional
        Seed of the subsample (figures are reproducible).

    Returns
    -------
    matplotlib.figure.Figure
    """
    all_names = list(result.parameter_names)
    names = list(names) if names is not None else all_names
    idx = [all_names.index(n) for n in names]
    samples = np.asarray(result.samples, float)
    p = len(names)
    if fig is None:
        side = min(TEXT_WIDTH_IN, 1.7 * max(p, 2))
        fig = _new_figure(side, side)
    if samples.ndim != 2 or samples.shape[0] < 2 or p == 0:
        ax = fig.add_subplot(1, 1, 1)
        ax.text(0.5, 0.5, "no posterior draws", ha="center", va="center", transform=ax.transAxes)
        ax.set_axis_off()
        return fig
    x = samples[:, idx]
    rng = np.random.default_rng(seed)
    pick = (rng.choice(len(x), size=max_points, replace=False)
            if len(x) > max_points else np.arange(len(x)))
    axes = fig.subplots(p, p, squeeze=False)
    for i in range(p):
        for j in range(p):
            ax = axes[i, j]
            if j > i:
                ax.set_axis_off()
                continue
            est = result.estimates.get(names[j])
            if i == j:
                ax.hist(x[:, i], bins=40, color=PALETTE["sky"], edgecolor="none")
                if est is not None:
                    if np.isfinite(est.best):
                        ax.axvline(est.best, color=PALETTE["blue"], lw=1.2)
                    for v in (est.lo95, est.hi95):
                        if np.isfinite(v):
                            ax.axvline(v, color=PALETTE["blue"], lw=1, ls="--")
                ax.set_yticks([])
            else:
                ax.plot(x[pick, j], x[pick, i], ".", ms=1.5, color=PALETTE["grey"],
                        alpha=0.35, rasterized=True)
                h, xe, ye = np.histogram2d(x[:, j], x[:, i], bins=24)
                h = gaussian_filter(h, 1.0)
                levels = _hist_levels(h)
                if len(levels) >= 1 and np.ptp(xe) > 0 and np.ptp(ye) > 0:
                    xc = 0.5 * (xe[1:] + xe[:-1])
                    yc = 0.5 * (ye[1:] + ye[:-1])
                    ax.contour(xc, yc, h.T, levels=levels, colors=[PALETTE["blue"]],
                               linewidths=0.9)
            if i == p - 1:
                ax.set_xlabel(_SHORT.get(names[j], quantity_label(names[j])), fontsize="small")
            else:
                ax.set_xticklabels([])
            if j == 0 and i > 0:
                ax.set_ylabel(_SHORT.get(names[i], quantity_label(names[i])), fontsize="small")
            elif i != j:
                ax.set_yticklabels([])
            ax.tick_params(labelsize="x-small")
            ax.xaxis.set_major_locator(MaxNLocator(3))
            if i != j:
                ax.yaxis.set_major_locator(MaxNLocator(3))
    fig.suptitle(f"{result.sample}: posterior ({len(x)} draws)", fontsize="medium")
    return fig


def _summary_from(results_or_summary) -> pd.DataFrame:
    if isinstance(results_or_summary, pd.DataFrame):
        return results_or_summary
    from zoning.io.results import summary_table

    return summary_table(list(results_or_summary))


def overview_figure(results_or_summary, *, fig: Figure | None = None) -> Figure:
    """Parent Mg#/Ca#, F at the rim and retention of every sample side by side.

    One row per sample; points are best values, bars the 95% bands.
    Olivine (parent melt Mg#) and plagioclase (parent melt Ca#) share the
    first panel with different markers; samples that failed are listed with
    a cross.

    Parameters
    ----------
    results_or_summary : pandas.DataFrame or sequence of FitResult
        A batch ``summary.csv`` table (columns as written by ``zoning fit``)
        or the fit results themselves.
    fig : matplotlib.figure.Figure, optional
        Draw into this (empty) figure.

    Returns
    -------
    matplotlib.figure.Figure
    """
    df = _summary_from(results_or_summary).reset_index(drop=True)
    n = len(df)
    if fig is None:
        fig = _new_figure(TEXT_WIDTH_IN, min(1.4 + 0.24 * max(n, 1), 9.5))
    axes = fig.subplots(1, 3, sharey=True)
    y = np.arange(n)[::-1].astype(float)
    names = df["sample"].astype(str).tolist() if "sample" in df else [str(i) for i in range(n)]
    failed = (df["error"].fillna("").astype(str) != "").to_numpy() if "error" in df else np.zeros(
        n, bool)
    mineral = df["mineral"].fillna("").astype(str).to_numpy() if "mineral" in df else np.full(n, "")
    styles = {"olivine": ("o", PALETTE["blue"]), "plagioclase": ("s", PALETTE["vermillion"])}
    panels = [
        ({"olivine": "melt_mg_number", "plagioclase": "melt_ca_number"},
         "parent melt Mg# (ol) / Ca# (pl)"),
        ({"olivine": "f_rim", "plagioclase": "f_rim"}, "F at rim"),
        ({"olivine": "retention", "plagioclase": "retention"}, "retention r"),
    ]
    for ax, (cols, label) in zip(axes, panels, strict=True):
        for mineral_name, col in cols.items():
            if col not in df:
                continue
            marker, colour = styles[mineral_name]
            best = _numeric(df, col)
            lo = _numeric(df, f"{col}_lo95")
            hi = _numeric(df, f"{col}_hi95")
            ok = np.isfinite(best) & ~failed & (mineral == mineral_name)
            constrained = _constrained_column(df, col)
            xerr = np.abs(np.vstack([np.where(np.isfinite(lo), best - lo, 0.0),
                                     np.where(np.isfinite(hi), hi - best, 0.0)]))
            for filled in (True, False):
                sel = ok & (constrained == filled)
                if sel.any():
                    ax.errorbar(best[sel], y[sel], xerr=xerr[:, sel], fmt=marker, ms=5,
                                color=colour, mfc=colour if filled else "white", capsize=2,
                                elinewidth=1)
        ax.set_xlabel(label, fontsize="small")
        ax.grid(axis="x", color="#dddddd", lw=0.6)
        ax.tick_params(labelsize="x-small")
        for k in np.flatnonzero(failed):
            ax.text(0.02, y[k], "× failed", transform=ax.get_yaxis_transform(),
                    va="center", fontsize="x-small", color=PALETTE["vermillion"])
    axes[1].set_xlim(-0.02, 1.02)
    axes[2].set_xlim(-0.02, 1.02)
    axes[0].set_yticks(y)
    short = {"olivine": " (ol)", "plagioclase": " (pl)"}
    axes[0].set_yticklabels([s + short.get(m, "") for s, m in zip(names, mineral, strict=True)],
                            fontsize="x-small")
    axes[0].set_ylim(-0.7, n - 0.3)
    handles = [
        Line2D([], [], marker="o", color=PALETTE["blue"], ls="none", label="olivine"),
        Line2D([], [], marker="s", color=PALETTE["vermillion"], ls="none", label="plagioclase"),
        Line2D([], [], marker="o", color=PALETTE["grey"], mfc="white", ls="none",
               label="not constrained by the data"),
    ]
    fig.legend(handles=handles, loc="outside lower center", ncol=3, fontsize="x-small")
    fig.suptitle("Batch overview: best values and 95% bands", fontsize="medium")
    return fig


def _numeric(df: pd.DataFrame, col: str) -> np.ndarray:
    if col not in df:
        return np.full(len(df), np.nan)
    return pd.to_numeric(df[col], errors="coerce").to_numpy(float)


def _constrained_column(df: pd.DataFrame, col: str) -> np.ndarray:
    """Return True where the summary says the quantity is constrained (default True)."""
    for name in (f"{col}_constrained",):
        if name in df:
            v = df[name]
            if v.dtype == object:
                v = v.astype(str).str.lower().isin(["true", "1", "yes"])
            return v.fillna(True).astype(bool).to_numpy()
    return np.ones(len(df), bool)


def save_figure(fig: Figure, stem: str | os.PathLike, *, dpi: int = 300) -> dict[str, Path]:
    """Write ``<stem>.png`` (at `dpi`) and ``<stem>.pdf``, each atomically.

    Parameters
    ----------
    fig : matplotlib.figure.Figure
        The figure.
    stem : str or path-like
        Path without suffix; folders are created.
    dpi : int, optional
        Resolution of the PNG [dots per inch] (default 300).

    Returns
    -------
    dict
        ``{"png": path, "pdf": path}``.
    """
    stem = Path(stem)
    stem.parent.mkdir(parents=True, exist_ok=True)
    out = {}
    for fmt in ("png", "pdf"):
        path = stem.with_name(f"{stem.name}.{fmt}")
        tmp = stem.with_name(f".{stem.name}.{fmt}.{os.getpid()}.tmp")
        try:
            meta: dict[str, Any] = {"Software": None} if fmt == "png" else {"CreationDate": None}
            fig.savefig(tmp, format=fmt, dpi=dpi, metadata=meta)
            os.replace(tmp, path)
        finally:
            if tmp.exists():
                tmp.unlink()
        out[fmt] = path
    return out


def sample_figures(result) -> dict[str, Figure]:
    """Draw the three figures of one fit.

    Parameters
    ----------
    result : FitResult
        A fit of one traverse.

    Returns
    -------
    dict
        ``{"profile": Figure, "melt_path": Figure, "posterior": Figure}``.
    """
    return {
        "profile": profile_figure(result),
        "melt_path": melt_path_figure(result),
        "posterior": corner_figure(result),
    }


def save_sample_figures(
    result, folder: str | os.PathLike, *, figures: Mapping[str, Figure] | None = None
) -> Mapping[str, dict[str, Path]]:
    """Draw and save the three figures of one fit into a folder.

    Parameters
    ----------
    result : FitResult
        A fit of one traverse.
    folder : str or path-like
        Destination folder.
    figures : mapping, optional
        Figures already drawn by :func:`sample_figures`. Their layout is
        fixed after saving, so that saving them again is faster.

    Returns
    -------
    dict
        ``{"profile": {...}, "melt_path": {...}, "posterior": {...}}`` with
        the PNG and PDF paths of each.
    """
    folder = Path(folder)
    figures = figures if figures is not None else sample_figures(result)
    paths = {}
    for name, fig in figures.items():
        paths[name] = save_figure(fig, folder / name)
        # Keep the layout found for the PNG: later saves (the PDF report) reuse it.
        fig.set_layout_engine("none")
    return paths
