"""Traverse geometry: project stage positions onto a line, find the core.

Two steps turn spot positions into distances from the crystal core:

1. :func:`project_traverse` fits a straight line through stage X/Y
   coordinates by total least squares (principal axis from a singular value
   decomposition), gives every spot its position along the line and its
   perpendicular distance from it, and marks spots far off the line.
2. :func:`locate_core` decides from the Fo or An profile whether the
   traverse runs core-to-rim, rim-to-core or rim-to-rim, finds the core and
   returns distances from it (two half-profiles, sides "A" and "B", for a
   rim-to-rim traverse). Users can override both the orientation and the
   core position; the decision and its basis are always stated.

Positions increase along the traverse in the order it was measured: for
stage X/Y input the first spot is at 0 and the line is oriented towards the
last spot; for a distance column the file's own values are used. The
orientations refer to increasing position: "core-to-rim" has the core at the
smallest position.

Deciding the orientation from the data is a judgement, not a measurement:
the rules below assume that the rim is where the composition changes
fastest (growth and diffusion both steepen profiles towards the rim) and,
when that is not clear, normal zoning (core richer in Fo or An than the
rim). Check the statement in the notes, and override it with
``orientation=`` / ``core_position_um=`` when you know better (for example
from a BSE image).
"""

from __future__ import annotations

import re
from collections.abc import Mapping, Sequence
from dataclasses import dataclass

import numpy as np
from scipy.ndimage import median_filter

from zoning.exceptions import OrientationUncertainError, ProfileFormatError
from zoning.traverse import ORIENTATIONS

__all__ = [
    "LineFit",
    "project_traverse",
    "CoreDecision",
    "Evidence",
    "locate_core",
    "glass_signature",
    "find_stray_positions",
    "robust_sigma",
    "require_orientation",
]

#: Smallest change between core and rim region taken as real zoning [mol%].
MIN_ZONING_MOL_PCT = 0.5
#: Multiple of the spot-to-spot noise that a zoning step must exceed.
ZONING_NOISE_MULTIPLE = 3.0
#: End regions of the traverse used to characterise the two ends (fraction of length).
END_FRACTION = 0.15
#: The core of a rim-to-rim traverse is searched within the central part
#: (fraction of length excluded at each end).
CORE_SEARCH_MARGIN = 0.15
#: One end counts as clearly steeper than the other by this factor.
STEEPNESS_RATIO = 1.5
#: End regions used for slopes and trends (fraction of the length at each end).
END_TREND_FRACTION = 0.25
#: Difference of the end slopes, in standard errors, that makes one end the rim.
SHAPE_Z = 3.0
#: End-to-end change of a trend, in standard errors, that counts.
TREND_Z = 3.0
#: A single trend this strong may decide alone (with "low" confidence).
STRONG_TREND_Z = 6.0
#: Both end quarters of the smoothed profile change by less than this
#: fraction of the change between them: the change lies inside the
#: traverse (a step), not at a rim.
STEP_FLATNESS = 0.25
#: Core positions whose mirror mismatch is within this many noise variances of
#: the best are all compatible with the profile ...
CORE_RANGE_NOISE = 0.25
#: ... and when they spread over more than this fraction of the length, the
#: core of a rim-to-rim traverse is vague (confidence at most "low").
CORE_RANGE_FRACTION = 0.1
#: Outermost part of each half compared between the two rims (fraction of the half).
RIM_ZONE_FRACTION = 0.15
#: A rim-to-rim profile must mirror itself within this fraction of its amplitude ...
SYMMETRY_TOLERANCE = 0.25
#: ... and its shorter half must cover this fraction of the traverse.
MIN_HALF_FRACTION = 0.25
#: Glass is looked for within this many spot spacings (or fraction of the
#: length, whichever is larger) of each end.
GLASS_END_STEPS = 2.0
GLASS_END_FRACTION = 0.05
#: Glass-borne oxides this many robust standard deviations above the median.
GLASS_MAD_MULTIPLE = 6.0
#: A spot labelled core or rim within this fraction of the length of an end is at that end.
NAME_END_FRACTION = 0.1
#: Spots labelled core must lie within this fraction of the length of each other.
NAME_CORE_SPREAD = 0.2


def robust_sigma(values) -> float:
    """Return the MAD-based standard deviation of the finite values.

    Parameters
    ----------
    values : array_like
        Sample.

    Returns
    -------
    float
        ``1.4826 * median(|v - median(v)|)`` (consistent with the standard
        deviation for normal data); NaN for an empty sample.
    """
    v = np.asarray(values, dtype=float)
    v = v[np.isfinite(v)]
    if v.size == 0:
        return float("nan")
    return float(1.4826 * np.median(np.abs(v - np.median(v))))


@dataclass(frozen=True, eq=False)
class LineFit:
    """Result of projecting stage coordinates onto the best-fit traverse line.

    Parameters
    ----------
    position_um : ndarray, shape (n,)
        Position along the line from the first spot [µm]; NaN where X or Y
        is missing.
    offline_um : ndarray, shape (n,)
        Perpendicular distance from the line [µm], >= 0.
    far : ndarray of bool, shape (n,)
        Spots further from the line than ``limit_um``.
    direction : tuple of float
        Unit vector of the line in stage coordinates (towards the last spot).
    scatter_um : float
        Robust (MAD-based) standard deviation of the signed off-line
        distances of the spots on the line [µm].
    limit_um : float
        Threshold used for ``far`` [µm].
    note : str
        Plain-language summary.
    """

    position_um: np.ndarray
    offline_um: np.ndarray
    far: np.ndarray
    direction: tuple[float, float]
    scatter_um: float
    limit_um: float
    note: str


def project_traverse(
    x_um,
    y_um,
    *,
    offline_limit_um: float = 5.0,
    offline_sigmas: float = 3.0,
) -> LineFit:
    """Project stage X/Y positions onto the best-fit straight traverse line.

    Parameters
    ----------
    x_um, y_um : array_like, shape (n,)
        Stage coordinates of the spots, in input order [µm].
    offline_limit_um : float, optional
        Smallest off-line distance that is flagged [µm] (default 5).
    offline_sigmas : float, optional
        Spots further than ``max(offline_sigmas * scatter, offline_limit_um)``
        from the line are marked ``far`` (default 3).

    Returns
    -------
    LineFit
        Positions, off-line distances and the spots far off the line.

    Notes
    -----
    The line is the principal axis of the centred coordinates (total least
    squares, via :func:`numpy.linalg.svd`), so X and Y errors are treated
    alike. It is fitted twice: the second fit leaves out the spots found far
    off the line in the first, so one stray spot cannot tilt the line.
    """
    x = np.asarray(x_um, dtype=float)
    y = np.asarray(y_um, dtype=float)
    if x.shape != y.shape or x.ndim != 1:
        raise ProfileFormatError(
            f"stage X and Y must be 1-D and of equal length; got shapes {x.shape} and {y.shape}."
        )
    n = x.size
    ok = np.isfinite(x) & np.isfinite(y)
    position = np.full(n, np.nan)
    offline = np.full(n, np.nan)
    far = np.zeros(n, dtype=bool)
    idx = np.flatnonzero(ok)
    if idx.size == 0:
        return LineFit(position, offline, far, (np.nan, np.nan), np.nan, np.nan,
                       "no spot has both stage X and Y; positions unknown")
    if idx.size == 1 or np.ptp(x[idx]) == 0 and np.ptp(y[idx]) == 0:
        position[idx] = 0.0
        offline[idx] = 0.0
        return LineFit(position, offline, far, (np.nan, np.nan), 0.0, offline_limit_um,
                       "all spots share one stage position; no traverse line")
    pts = np.column_stack([x[idx], y[idx]])
    # A stage glitch (a coordinate off by orders of magnitude) must not tilt
    # the first line: leave stray points out of it.
    with np.errstate(all="ignore"):
        radial = np.hypot(pts[:, 0] - np.median(pts[:, 0]), pts[:, 1] - np.median(pts[:, 1]))
    use = find_stray_positions(radial) == ""
    if use.sum() < 2:
        use = np.ones(idx.size, dtype=bool)
    limit = offline_limit_um
    scatter = 0.0
    for _ in range(2):
        centre = pts[use].mean(axis=0)
        try:
            _, _, vt = np.linalg.svd(pts[use] - centre, full_matrices=False)
            direction = vt[0]
        except np.linalg.LinAlgError:  # absurd coordinates (overflow): first-to-last line
            chord = pts[-1] - pts[0]
            norm = np.hypot(*chord)
            direction = chord / norm if np.isfinite(norm) and norm > 0 else np.array([1.0, 0.0])
        if np.dot(pts[-1] - pts[0], direction) < 0:
            direction = -direction
        normal = np.array([-direction[1], direction[0]])
        signed = (pts - centre) @ normal
        scatter = robust_sigma(signed[use])
        limit = max(offline_sigmas * scatter, offline_limit_um)
        new_use = np.abs(signed) <= limit
        if new_use.sum() < 2 or np.array_equal(new_use, use):
            break
        use = new_use
    along = (pts - pts[0]) @ direction
    position[idx] = along
    offline[idx] = np.abs(signed)
    far[idx] = np.abs(signed) > limit
    note = (
        f"stage X/Y projected onto the best-fit line (total least squares); off-line "
        f"scatter {scatter:.2g} µm (robust 1-sigma), {int(far.sum())} spot(s) beyond "
        f"{limit:.3g} µm"
    )
    return LineFit(position, offline, far, (float(direction[0]), float(direction[1])),
                   float(scatter), float(limit), note)


@dataclass(frozen=True)
class Evidence:
    """One piece of evidence on the orientation of a traverse.

    Parameters
    ----------
    line : {"names", "shape", "chemistry", "glass"}
        Line of evidence: what the file says, the shape of the major-element
        profile, the direction of major/minor/trace trends (which assumes
        normal growth), or glass in the beam at a crystal edge.
    cue : str
        What was looked at, e.g. "Fo", "NiO", "label 'rtoc'".
    supports : tuple of str
        Orientations compatible with the cue (empty: no vote; ``("complex",)``:
        the profile is not shaped like a growth profile).
    weight : float
        1 for a cue that can decide, 0.5 for a supporting cue that cannot
        decide alone, 0 for a cue reported but not used.
    detail : str
        The observation in plain words.
    core_position_um : float
        Core position the cue implies [µm] (NaN when it implies none).
    z : float
        Strength of a trend: end-to-end change over its standard error (NaN
        for cues that are not trends).
    leans : str
        For a shape cue too weak to vote: the orientation its steeper end
        would suggest ("" when neither end is steeper by the factor
        :data:`STEEPNESS_RATIO`). A decision from the chemistry alone is
        refused when the shape leans the other way.
    """

    line: str
    cue: str
    supports: tuple[str, ...]
    weight: float
    detail: str
    core_position_um: float = float("nan")
    z: float = float("nan")
    leans: str = ""


@dataclass(frozen=True, eq=False)
class CoreDecision:
    """Orientation of a traverse, its core and distances from the core.

    Parameters
    ----------
    orientation : {"core-to-rim", "rim-to-core", "rim-to-rim"}
        Orientation relative to increasing position (for an "uncertain"
        decision, the reading the distances assume until it is confirmed).
    core_position_um : float
        Position of the core along the traverse [µm].
    distance_um : ndarray, shape (n,)
        ``|position - core|`` [µm]; NaN where the position is unknown or not
        trusted (stray positions).
    side : ndarray of str, shape (n,)
        "" for a half-profile; "A" (position below the core) or "B" (at or
        above the core) for a rim-to-rim traverse.
    basis : str
        Plain-language statement of how the decision was made.
    confidence : {"confirmed", "high", "low", "uncertain"}
        "confirmed" when the user gave the orientation or core; "high" when
        independent lines of evidence agree and none disagrees; "low" when
        the decision rests on one line of evidence (or reverse zoning is
        read from shape and glass against the chemistry); "uncertain" when
        the evidence is weak or disagrees.
    evidence : tuple of Evidence
        Every cue looked at (empty for user decisions).
    """

    orientation: str
    core_position_um: float
    distance_um: np.ndarray
    side: np.ndarray
    basis: str
    confidence: str = "low"
    evidence: tuple[Evidence, ...] = ()


def _smooth(values: np.ndarray) -> np.ndarray:
    width = max(3, (values.size // 10) | 1)
    return median_filter(values, size=min(width, 11), mode="nearest")


def _noise(values: np.ndarray) -> float:
    if values.size < 3:
        return 0.0
    return robust_sigma(np.diff(values)) / np.sqrt(2.0)


def _mirror_centre(p: np.ndarray, s: np.ndarray, noise: float) -> tuple[float, float, list]:
    """Centre about which the smoothed profile is most nearly symmetric.

    Returns the centre [µm], the RMS mismatch of the mirrored profile and
    the range [lo, hi] of centres compatible with it within the noise. The
    grid and the candidate centres have fixed sizes, so the cost is O(n) in
    the number of spots.
    """
    length = p[-1] - p[0]
    grid_n = int(min(max(p.size, 64), 512))
    grid = np.linspace(p[0], p[-1], grid_n)
    g = np.interp(grid, p, s)
    centres = np.linspace(p[0] + CORE_SEARCH_MARGIN * length,
                          p[-1] - CORE_SEARCH_MARGIN * length, 241)
    mirrored = 2.0 * centres[:, None] - grid[None, :]
    inside = (mirrored >= p[0]) & (mirrored <= p[-1])
    reflected = np.interp(mirrored, grid, g)
    sq = np.where(inside, (g[None, :] - reflected) ** 2, 0.0)
    count = inside.sum(axis=1)
    cost = sq.sum(axis=1) / np.maximum(count, 1)
    best = cost.min()
    near = np.flatnonzero(cost <= best + 0.1 * noise**2 + 1e-12)
    mid = 0.5 * (p[0] + p[-1])
    k = near[np.argmin(np.abs(centres[near] - mid))]
    return float(centres[k]), float(np.sqrt(cost[k])), _acceptable(centres, cost, noise)


def _acceptable(centres, cost, noise):
    """Centres whose mismatch is within the noise of the best one."""
    ok = cost <= cost.min() + CORE_RANGE_NOISE * noise**2 + 1e-12
    return [float(centres[ok].min()), float(centres[ok].max())]


def _stretch_centre(p: np.ndarray, s: np.ndarray, noise: float) -> tuple[float, float, list]:
    """Core of a rim-to-rim profile whose two halves grew to different lengths.

    Both ends are taken as rims: each half is scaled to unit length and the
    centre is the one for which the two scaled halves agree best. Returns
    the centre [µm], the RMS mismatch and the range of compatible centres.
    Fixed-size grids: O(n).
    """
    length = p[-1] - p[0]
    centres = np.linspace(p[0] + CORE_SEARCH_MARGIN * length,
                          p[-1] - CORE_SEARCH_MARGIN * length, 241)
    u = np.linspace(0.0, 1.0, 65)
    x_a = centres[:, None] - u[None, :] * (centres[:, None] - p[0])
    x_b = centres[:, None] + u[None, :] * (p[-1] - centres[:, None])
    cost = np.mean((np.interp(x_a, p, s) - np.interp(x_b, p, s)) ** 2, axis=1)
    k = int(np.argmin(cost))
    return float(centres[k]), float(np.sqrt(cost[k])), _acceptable(centres, cost, noise)


def _rims_alike(ps, minor, core, mineral) -> list[str]:
    """Minor elements that make one end of a 'rim-to-rim' profile look like a core.

    Both ends of a rim-to-rim traverse are rims: a minor element with a
    known direction (NiO, MnO; K2O) must have moved away from its value at
    the core at both ends. When it clearly did at one end (3 standard
    errors) and not at the other (less than 1), the profile is more likely
    a half-profile whose interior extremum is an oscillation or a reversal.
    """
    half_a, half_b = core - ps[0], ps[-1] - core
    zones = (ps <= ps[0] + RIM_ZONE_FRACTION * half_a,
             ps >= ps[-1] - RIM_ZONE_FRACTION * half_b)
    centre = np.abs(ps - core) <= RIM_ZONE_FRACTION * min(half_a, half_b)
    odd = []
    for oxide, (direction, weight, _) in _TREND_RULES.get(mineral, {}).items():
        if oxide not in minor or weight < 1 or direction == 0:
            continue
        v = np.asarray(minor[oxide], dtype=float)
        fin = np.isfinite(v)
        vc = v[centre & fin]
        if vc.size < 2 or fin.sum() < 6:
            continue
        noise = max(_noise(v[fin]), 1e-12)
        z = []
        for zone in zones:
            ve = v[zone & fin]
            if ve.size < 2:
                break
            se = noise * np.sqrt(1.0 / ve.size + 1.0 / vc.size)
            z.append(direction * (ve.mean() - vc.mean()) / se)
        if len(z) == 2 and max(z) >= TREND_Z and min(z) < 1.0:
            which = "low" if z[0] < z[1] else "high"
            odd.append(f"{oxide} at the {which}-position end is like the core's")
    return odd


# ---------------------------------------------------------------------------
# lines of evidence

def _end_masks(ps: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Return the two end regions (outer :data:`END_TREND_FRACTION` of the length, >= 3 spots)."""
    length = ps[-1] - ps[0]
    a = ps <= ps[0] + END_TREND_FRACTION * length
    b = ps >= ps[-1] - END_TREND_FRACTION * length
    k = min(3, ps.size // 2)
    if a.sum() < k:
        a = np.zeros(ps.size, bool)
        a[:k] = True
    if b.sum() < k:
        b = np.zeros(ps.size, bool)
        b[-k:] = True
    return a, b


def _slope(p: np.ndarray, v: np.ndarray, noise: float) -> tuple[float, float]:
    """Least-squares slope of v against p and its standard error."""
    if p.size < 2:
        return 0.0, float("inf")
    dp = p - p.mean()
    sxx = float(dp @ dp)
    if not np.isfinite(sxx) or sxx <= 0:
        return 0.0, float("inf")
    dv = v - v.mean()
    slope = float(dp @ dv) / sxx
    res = dv - slope * dp
    scatter = float(np.sqrt(res @ res / max(p.size - 2, 1)))
    if not np.isfinite(slope):
        return 0.0, float("inf")
    return slope, max(scatter, noise) / np.sqrt(sxx)


def _shape_evidence(ps, vs, s, noise, delta, record) -> Evidence:
    """Where the major-element profile changes: the rim is the steep end."""
    length = ps[-1] - ps[0]
    # Rim-to-rim: the interior differs from both ends in the same direction.
    inner = (ps > ps[0] + CORE_SEARCH_MARGIN * length) & (ps < ps[-1] - CORE_SEARCH_MARGIN * length)
    e_a = float(np.mean(s[ps <= ps[0] + END_FRACTION * length]))
    e_b = float(np.mean(s[ps >= ps[-1] - END_FRACTION * length]))
    if inner.sum() >= 2 and ps.size >= 7:
        m_max, m_min = float(s[inner].max()), float(s[inner].min())
        high = m_max - e_a > delta and m_max - e_b > delta
        low = e_a - m_min > delta and e_b - m_min > delta
        if high or low:
            # equal halves (mirror) or halves grown to different lengths with both
            # ends at a rim (stretch): whichever matches the profile better
            core_m, rms_m, span_m = _mirror_centre(ps, s, noise)
            core_s, rms_s, span_s = _stretch_centre(ps, s, noise)
            core, rms, span = ((core_s, rms_s, span_s) if rms_s < rms_m else
                               (core_m, rms_m, span_m))
            if abs(rms_s**2 - rms_m**2) <= CORE_RANGE_NOISE * noise**2:  # both readings fit
                span = [min(span_m[0], span_s[0]), max(span_m[1], span_s[1])]
            extreme = m_max if high else m_min
            amplitude = abs(extreme - 0.5 * (e_a + e_b))
            short = min(core - ps[0], ps[-1] - core) / length
            kind = "higher" if high else "lower"
            seen = (f"the interior of the {record} profile is {kind} than both ends "
                    f"({extreme:.1f} inside, {e_a:.1f} and {e_b:.1f} at the ends)")
            if rms < SYMMETRY_TOLERANCE * amplitude and short >= MIN_HALF_FRACTION:
                vague = span[1] - span[0] > CORE_RANGE_FRACTION * length
                return Evidence("shape", record, ("rim-to-rim",), 0.5 if vague else 1.0,
                                f"{seen} and symmetric about {core:.4g} µm (mirror mismatch "
                                f"{rms:.2g} mol%): two rims with the core between them"
                                + ("" if high else " (reversely zoned rims)")
                                + (f"; the core could lie anywhere in {span[0]:.4g}-"
                                   f"{span[1]:.4g} µm" if vague else ""),
                                core_position_um=core)
            return Evidence("shape", record, ("complex",), 1.0,
                            f"{seen} but not symmetric about any point (best mirror mismatch "
                            f"{rms:.2g} mol% at {core:.4g} µm): a reversely or complexly "
                            "zoned half-profile, or a rim-to-rim traverse with unequal rims")
    a, b = _end_masks(ps)
    slope_a, se_a = _slope(ps[a], vs[a], noise)
    slope_b, se_b = _slope(ps[b], vs[b], noise)
    change_a = abs(slope_a) * float(np.ptp(ps[a]))
    change_b = abs(slope_b) * float(np.ptp(ps[b]))
    se = float(np.hypot(se_a, se_b))
    rate = f"({max(abs(slope_a), abs(slope_b)):.3g} vs {min(abs(slope_a), abs(slope_b)):.3g} " \
        "mol%/µm over the outer quarters)"
    if (abs(slope_b) - abs(slope_a) > SHAPE_Z * se and abs(slope_b) > STEEPNESS_RATIO * abs(slope_a)
            and change_b > delta):
        return Evidence("shape", record, ("core-to-rim",), 1.0,
                        f"the {record} profile changes fastest at the high-position end {rate}: "
                        "that end is the rim")
    if (abs(slope_a) - abs(slope_b) > SHAPE_Z * se and abs(slope_a) > STEEPNESS_RATIO * abs(slope_b)
            and change_a > delta):
        return Evidence("shape", record, ("rim-to-core",), 1.0,
                        f"the {record} profile changes fastest at the low-position end {rate}: "
                        "that end is the rim")
    total = e_b - e_a
    q1, q3 = np.interp([ps[0] + END_TREND_FRACTION * length, ps[-1] - END_TREND_FRACTION * length],
                       ps, s)
    end_changes = max(abs(q1 - s[0]), abs(s[-1] - q3))
    if abs(total) > delta and end_changes < STEP_FLATNESS * abs(q3 - q1):
        return Evidence("shape", record, ("complex",), 1.0,
                        f"the {record} profile is flat at both ends and changes by "
                        f"{abs(total):.2g} mol% inside the traverse: a step or complex zoning, "
                        "whose core cannot be told from the shape")
    if abs(total) <= delta and max(change_a, change_b) <= delta:
        return Evidence("shape", record, (), 0.0,
                        f"the {record} profile is flat within {delta:.2g} mol%")
    leans = ("core-to-rim" if abs(slope_b) > STEEPNESS_RATIO * abs(slope_a) else
             "rim-to-core" if abs(slope_a) > STEEPNESS_RATIO * abs(slope_b) else "")
    return Evidence("shape", record, (), 0.0,
                    f"neither end of the {record} profile is clearly steeper {rate}"
                    + (f", though the {'high' if leans == 'core-to-rim' else 'low'}-position "
                       "end is steeper within the scatter" if leans else ""), leans=leans)


#: Minor and trace elements whose change with crystallization has a known
#: direction: oxide -> (direction rimward in normal growth, weight, reason).
#: +1 rises, -1 falls, 0 reported only.
_TREND_RULES = {
    "olivine": {
        "NiO": (-1, 1.0, "Ni is compatible in olivine (D >> 1, Hart & Davis 1978), so the "
                         "melt and the olivine lose Ni as olivine crystallizes"),
        "MnO": (+1, 1.0, "Mn follows Fe2+ in olivine, so MnO rises as Fo falls (common "
                         "practice)"),
        "CaO": (+1, 0.5, "Ca is incompatible in olivine and accumulates in the melt; it falls "
                         "instead where clinopyroxene crystallizes, so it only supports "
                         "(common practice)"),
    },
    "plagioclase": {
        "K2O": (+1, 1.0, "K is incompatible in plagioclase (D about 0.1-0.3, Bindeman et al. "
                         "1998) and accumulates in the melt, so Or rises rimward (common "
                         "practice)"),
        "FeO": (0, 0.0, "FeO rises rimward in tholeiitic melts but falls once Fe-Ti oxides "
                        "crystallize (common practice): not used"),
        "MgO": (0, 0.0, "MgO falls rimward where mafic minerals co-crystallize and rises in "
                        "plagioclase-only crystallization: not used"),
        "SrO": (0, 0.0, "SrO depends on An and on the melt's Sr budget in opposite ways "
                        "(Blundy & Wood 1991): not used"),
    },
}

#: Smallest end-to-end change of a minor element taken as real [wt%]
#: (about the 1-sigma counting precision of routine microprobe analyses of
#: these oxides; common practice).
TREND_FLOOR_WT = 0.01


def _trend(ps, values, a, b):
    """Mean difference high-end minus low-end, and its z-score."""
    finite = np.isfinite(values)
    va, vb = values[a & finite], values[b & finite]
    if va.size < 3 or vb.size < 3 or finite.sum() < 6:
        return None
    noise = max(_noise(values[finite]), 1e-12)
    diff = float(vb.mean() - va.mean())
    se = noise * np.sqrt(1.0 / va.size + 1.0 / vb.size)
    return diff, diff / se, float(va.mean()), float(vb.mean())


def _chemistry_evidence(ps, vs, minor, mineral, record, delta) -> list[Evidence]:
    """Trends that point to the rim under normal growth (the major record first)."""
    a, b = _end_masks(ps)
    out = []
    t = _trend(ps, vs, a, b)
    if t is not None:
        diff, z, ma, mb = t
        if abs(diff) > delta and abs(z) >= TREND_Z:
            core_low = diff < 0
            out.append(Evidence(
                "chemistry", record, ("core-to-rim",) if core_low else ("rim-to-core",), 1.0,
                f"{record} is higher at the {'low' if core_low else 'high'}-position end "
                f"({max(ma, mb):.1f} vs {min(ma, mb):.1f} mol%): normal zoning puts the core "
                "there", z=abs(z)))
        else:
            out.append(Evidence("chemistry", record, (), 0.0,
                                f"{record} is about the same at both ends ({ma:.1f}, {mb:.1f})"))
    for oxide, (direction, weight, _reason) in _TREND_RULES.get(mineral, {}).items():
        if oxide not in minor:
            continue
        t = _trend(ps, np.asarray(minor[oxide], dtype=float), a, b)
        if t is None:
            continue
        diff, z, ma, mb = t
        if not (abs(diff) >= TREND_FLOOR_WT and abs(z) >= TREND_Z):
            if direction != 0:
                out.append(Evidence("chemistry", oxide, (), 0.0,
                                    f"{oxide} shows no clear trend ({ma:.3g} and {mb:.3g} wt% at "
                                    "the ends)"))
            continue
        rising = diff > 0  # towards the high-position end
        trend = f"{oxide} {'rises' if rising else 'falls'} towards the high-position end " \
                f"({ma:.3g} to {mb:.3g} wt%)"
        if direction == 0:
            out.append(Evidence("chemistry", oxide, (), 0.0, f"{trend} (not used: its direction "
                                "depends on the co-crystallizing minerals)"))
            continue
        rim_high = rising == (direction > 0)
        out.append(Evidence("chemistry", oxide,
                            ("core-to-rim",) if rim_high else ("rim-to-core",), weight,
                            f"{trend}: in normal growth the rim is at the "
                            f"{'high' if rim_high else 'low'}-position end"
                            + (" (supporting cue only)" if weight < 1 else ""), z=abs(z)))
    return out


#: Oxides that glass adds to an analysis of each mineral, and the smallest
#: excess over the traverse's median taken as glass in the beam [wt%]
#: (common practice: about 2% of basaltic glass in the excitation volume).
_GLASS_OXIDES = {
    "olivine": (("Al2O3", "TiO2", "Na2O", "K2O", "P2O5"), 0.3),
    "plagioclase": (("FeO", "MgO", "TiO2"), 0.5),
}


def glass_signature(oxides: Mapping[str, np.ndarray], mineral: str) -> np.ndarray:
    """Excess of glass-borne oxides over the traverse's median, per spot [wt%].

    Parameters
    ----------
    oxides : mapping of str to ndarray, shape (n,)
        Oxide contents of every spot [wt%] (NaN where not measured).
    mineral : {"olivine", "plagioclase"}
        Host mineral.

    Returns
    -------
    ndarray, shape (n,)
        Excess of the sum of the oxides glass brings in (olivine: Al2O3, TiO2,
        Na2O, K2O, P2O5; plagioclase: FeO, MgO, TiO2) over its median along
        the traverse; NaN when none of them is measured. For olivine, Al2O3
        that comes with Cr2O3 (a spinel, not glass) is not counted.
    """
    names, _ = _GLASS_OXIDES[mineral]
    present = [np.asarray(oxides[c], dtype=float) for c in names if c in oxides]
    if not present:
        n = len(next(iter(oxides.values()))) if oxides else 0
        return np.full(n, np.nan)
    stack = np.vstack(present)
    score = np.where(np.isfinite(stack), np.maximum(stack, 0.0), 0.0).sum(axis=0)
    score[~np.isfinite(stack).any(axis=0)] = np.nan
    base = np.nanmedian(score) if np.isfinite(score).any() else np.nan
    excess = score - base
    if mineral == "olivine" and "Cr2O3" in oxides:
        cr = np.asarray(oxides["Cr2O3"], dtype=float)
        cr_excess = np.where(np.isfinite(cr), cr - np.nanmedian(cr) if np.isfinite(cr).any()
                             else 0.0, 0.0)
        excess = np.where(cr_excess > 0.3 * excess, np.minimum(excess, 0.0), excess)
    return excess


def _glass_evidence(p, trusted, oxides, mineral) -> Evidence | None:
    """Glass in the beam at an end of the traverse marks a crystal edge (a rim)."""
    if not oxides or mineral not in _GLASS_OXIDES:
        return None
    excess = glass_signature(oxides, mineral)
    ok = trusted & np.isfinite(excess) & np.isfinite(p)
    if ok.sum() < 4:
        return None
    q = np.sort(p[ok])
    length = q[-1] - q[0]
    gaps = np.diff(q)
    gaps = gaps[gaps > 0]
    step = float(np.median(gaps)) if gaps.size else 0.0
    zone = max(GLASS_END_STEPS * step, GLASS_END_FRACTION * length)
    scale = robust_sigma(excess[ok])
    limit = max(GLASS_MAD_MULTIPLE * scale, _GLASS_OXIDES[mineral][1])
    glassy = ok & (excess > limit)
    at_a = glassy & (p <= q[0] + zone)
    at_b = glassy & (p >= q[-1] - zone)
    inner = int((glassy & ~at_a & ~at_b).sum())
    names = ", ".join(c for c in _GLASS_OXIDES[mineral][0] if c in oxides)
    extra = (f"; {inner} spot(s) with glass inside the traverse (inclusions, not used)"
             if inner else "")
    if at_a.any() and at_b.any():
        return Evidence("glass", "glass", ("rim-to-rim",), 1.0,
                        f"both ends have spots with glass in the beam ({names} up to "
                        f"{excess[glassy].max():.2g} wt% above the traverse's median): both "
                        f"ends touch the matrix{extra}")
    if at_b.any():
        return Evidence("glass", "glass", ("core-to-rim", "rim-to-rim"), 1.0,
                        f"the high-position end has {int(at_b.sum())} spot(s) with glass in the "
                        f"beam ({names} {excess[at_b].max():.2g} wt% above the median): that "
                        f"end touches the matrix, a rim{extra}")
    if at_a.any():
        return Evidence("glass", "glass", ("rim-to-core", "rim-to-rim"), 1.0,
                        f"the low-position end has {int(at_a.sum())} spot(s) with glass in the "
                        f"beam ({names} {excess[at_a].max():.2g} wt% above the median): that "
                        f"end touches the matrix, a rim{extra}")
    return Evidence("glass", "glass", (), 0.0, f"no glass in the beam at either end{extra}")


_L, _R = r"(?<![a-z])", r"(?![a-z])"
_SEP = r"[\s_\-]*(?:to|2)?[\s_\-]*"
#: Orientation phrases in traverse names, file names and labels (lower case).
_PHRASES = (
    ("rim-to-rim", re.compile(_L + r"(?:rim" + _SEP + r"rim|rtor|r2r)" + _R)),
    ("rim-to-core", re.compile(_L + r"(?:rim" + _SEP + r"core|rtoc|r2c)" + _R)),
    ("core-to-rim", re.compile(_L + r"(?:core" + _SEP + r"rim|ctor|c2r)" + _R)),
)
_CORE_WORD = re.compile(_L + r"core" + _R)
_RIM_WORD = re.compile(_L + r"rims?" + _R)


def _phrases(text: str) -> tuple[set[str], str]:
    """Orientation phrases found in ``text`` and the text without them."""
    found = set()
    low = str(text).lower()
    for name, pattern in _PHRASES:
        if pattern.search(low):
            found.add(name)
            low = pattern.sub(" ", low)
    return found, low


def _name_evidence(p, trusted, names, labels) -> Evidence | None:
    """Read what the file says: orientation phrases, spots labelled core or rim."""
    said: dict[str, list[str]] = {}
    for text in names:
        found, _ = _phrases(text)
        for f in found:
            said.setdefault(f, []).append(f"name '{text}'")
    core_spots = np.zeros(p.size, bool)
    rim_spots = np.zeros(p.size, bool)
    if labels is not None:
        lab = np.asarray(labels, dtype=object)
        for i, text in enumerate(lab):
            if not isinstance(text, str) or not text:
                continue
            found, rest = _phrases(text)
            for f in found:
                said.setdefault(f, []).append(f"label '{text}'")
            core_spots[i] = bool(_CORE_WORD.search(rest))
            rim_spots[i] = bool(_RIM_WORD.search(rest))
        valid = trusted & np.isfinite(p)
        # a word on (nearly) every spot describes the traverse, not a spot
        for m in (core_spots, rim_spots):
            if m[valid].sum() > 0.5 * max(valid.sum(), 1):
                m[:] = False
        core_spots &= valid
        rim_spots &= valid
    statements = {k: sorted(set(v))[:3] for k, v in said.items()}
    core_at = float("nan")
    ok = trusted & np.isfinite(p)
    if ok.sum() >= 2 and (core_spots.any() or rim_spots.any()):
        lo, hi = float(p[ok].min()), float(p[ok].max())
        end = NAME_END_FRACTION * (hi - lo)
        if core_spots.any():
            cp = p[core_spots]
            if np.ptp(cp) <= NAME_CORE_SPREAD * (hi - lo):
                core_at = float(np.median(cp))
                where = ("core-to-rim" if core_at <= lo + end else
                         "rim-to-core" if core_at >= hi - end else "rim-to-rim")
                statements.setdefault(where, []).append(
                    f"{int(core_spots.sum())} spot(s) labelled core at {core_at:.4g} µm")
        if rim_spots.any():
            r_lo = bool((p[rim_spots] <= lo + end).any())
            r_hi = bool((p[rim_spots] >= hi - end).any())
            where = ("rim-to-rim" if r_lo and r_hi else "core-to-rim" if r_hi else
                     "rim-to-core" if r_lo else "")
            if where:
                at = ("both ends" if r_lo and r_hi else
                      "the high-position end" if r_hi else "the low-position end")
                statements.setdefault(where, []).append(f"spot(s) labelled rim at {at}")
    if not statements:
        return None
    if len(statements) > 1:
        said_txt = "; ".join(f"{k}: {', '.join(v)}" for k, v in sorted(statements.items()))
        return Evidence("names", "names", ("complex",), 1.0,
                        f"the file's names and labels disagree ({said_txt})")
    (where, what), = statements.items()
    if where != "rim-to-rim":
        core_at = float("nan")
    return Evidence("names", "names", (where,), 1.0,
                    f"the file says {where} ({', '.join(what)})", core_position_um=core_at)


# ---------------------------------------------------------------------------
# decision

def locate_core(
    position_um,
    value,
    *,
    usable=None,
    orientation: str | None = None,
    core_position_um: float | None = None,
    record: str = "Fo",
    mineral: str | None = None,
    oxides: Mapping[str, np.ndarray] | None = None,
    names: Sequence[str] = (),
    labels=None,
    trusted=None,
) -> CoreDecision:
    """Decide the orientation of a traverse and measure distances from its core.

    Parameters
    ----------
    position_um : array_like, shape (n,)
        Position of each spot along the traverse [µm] (NaN if unknown).
    value : array_like, shape (n,)
        Zoning record of each spot, Fo or An [mol%].
    usable : array_like of bool, shape (n,), optional
        Spots whose composition may be used (e.g. those passing the quality
        checks); default: all with finite position and value. Glass at the
        ends is looked for among all spots, flagged or not.
    orientation : {"core-to-rim", "rim-to-core", "rim-to-rim"}, optional
        User override of the orientation.
    core_position_um : float, optional
        User override of the core position [µm].
    record : str, optional
        Name of the record for the statement ("Fo" or "An").
    mineral : {"olivine", "plagioclase"}, optional
        Host mineral; selects the minor-element and glass rules (default:
        olivine for record "Fo", plagioclase for "An").
    oxides : mapping of str to ndarray, shape (n,), optional
        Oxide contents of every spot [wt%] (NiO, MnO, CaO, K2O, Al2O3, ...),
        for the minor-element trends and glass at the ends.
    names : sequence of str, optional
        Traverse name, file name and similar texts that may state the
        orientation (``rtoc``, ``core-to-rim``, ...).
    labels : array_like of str, shape (n,), optional
        Comment/label of each spot ("core", "rim 2", ...).
    trusted : array_like of bool, shape (n,), optional
        Spots whose position can be trusted (default: all finite). Stray
        positions (see :func:`find_stray_positions`) are neither used to
        decide nor given a distance.

    Returns
    -------
    CoreDecision
        Orientation, core position, distances, sides, basis, confidence and
        the evidence.

    Raises
    ------
    ProfileFormatError
        For an unknown orientation or a non-finite core position.

    Notes
    -----
    Four lines of evidence are weighed (the README section "Orientation and
    core" states the rules for users):

    * names: an orientation phrase in the traverse or file name or a label
      (``core-to-rim``/``ctor``/``c2r``, ``rim-to-core``/``rtoc``/``r2c``,
      ``rim-to-rim``/``rtor``), spots labelled ``core`` or ``rim``;
    * shape of the Fo/An profile: the rim is the end that changes clearly
      faster (slopes of the outer quarters differ by more than 3 standard
      errors and a factor 1.5), since growth and diffusion both steepen
      profiles towards the rim; an interior extremum that is mirror
      symmetric means rim-to-rim (core at the centre of symmetry); an
      asymmetric interior extremum, or flat ends with the change inside
      (a step), is "complex";
    * chemistry, assuming normal growth: the core has the higher Fo/An; in
      olivine NiO falls and MnO (and, supporting only, CaO) rise rimward; in
      plagioclase K2O (Or) rises rimward. FeO, MgO and SrO of plagioclase are
      reported, not used. A cue counts when its end-to-end change exceeds
      3 standard errors (and 0.01 wt%, or the zoning threshold for Fo/An);
    * glass in the beam (olivine: Al2O3+TiO2+alkalis+P2O5; plagioclase:
      FeO+MgO+TiO2 well above the traverse's median) at an end: that end is
      a crystal edge, a rim.

    Confidence: the file's statement decides ("high") unless the shape or
    glass contradicts it ("uncertain"). Otherwise "high" needs two
    independent lines (shape, chemistry, glass) that agree and none that
    disagrees; one line alone gives "low" (chemistry alone only with two
    agreeing cues); shape and glass against the chemistry gives "low"
    (reversely zoned); any other disagreement, a complex shape, or no
    evidence (flat profile) gives "uncertain". A symmetric rim-to-rim
    profile is "high" when its interior is higher in Fo/An than the rims
    (normal zoning), "low" otherwise. An uncertain traverse is not fitted
    until the user confirms the orientation.
    """
    p = np.asarray(position_um, dtype=float)
    v = np.asarray(value, dtype=float)
    n = p.size
    if orientation is not None and orientation not in ORIENTATIONS:
        raise ProfileFormatError(
            f"unknown orientation {orientation!r}; expected one of {', '.join(ORIENTATIONS)}."
        )
    if core_position_um is not None and not np.isfinite(core_position_um):
        raise ProfileFormatError(
            f"core position {core_position_um!r} µm is not a finite number; "
            "give the core position along the traverse in µm (e.g. --core-um 120)."
        )
    trust = np.isfinite(p)
    if trusted is not None:
        trust &= np.asarray(trusted, dtype=bool)
    use = trust & np.isfinite(v)
    if usable is not None:
        use &= np.asarray(usable, dtype=bool)
    if not trust.any():
        return CoreDecision(orientation or "core-to-rim", float("nan"), np.full(n, np.nan),
                            np.full(n, "", dtype=object),
                            "positions unknown; distances from the core cannot be computed",
                            "confirmed" if orientation else "uncertain")
    user_free = orientation is None and core_position_um is None
    pmin, pmax = float(np.min(p[trust])), float(np.max(p[trust]))
    order = np.argsort(p[use], kind="stable")
    ps, vs = p[use][order], v[use][order]
    evidence: tuple[Evidence, ...] = ()
    confidence = "confirmed"

    if core_position_um is not None:
        core = float(core_position_um)
        if orientation is None:
            tol = 0.05 * (pmax - pmin)
            if core <= pmin + tol:
                orientation = "core-to-rim"
            elif core >= pmax - tol:
                orientation = "rim-to-core"
            else:
                orientation = "rim-to-rim"
            basis = (f"core position {core:g} µm given by the user; orientation "
                     f"{orientation} follows from it")
        else:
            basis = f"orientation {orientation} and core position {core:g} µm given by the user"
    elif orientation is not None:
        if orientation == "core-to-rim":
            core = pmin
        elif orientation == "rim-to-core":
            core = pmax
        elif ps.size >= 5:
            s = _smooth(vs)
            core, _, _ = _mirror_centre(ps, s, _noise(vs))
        else:
            core = 0.5 * (pmin + pmax)
        basis = f"orientation {orientation} given by the user"
        if orientation == "rim-to-rim":
            basis += f"; core placed at {core:.4g} µm (centre of symmetry of the {record} profile)"
    else:
        if mineral is None:
            mineral = "plagioclase" if record == "An" else "olivine"
        minor = {}
        if oxides:
            for k, arr in oxides.items():
                minor[k] = np.asarray(arr, dtype=float)[use][order]
        orientation, core, confidence, basis, evidence = _decide(
            ps, vs, pmin, pmax, record, mineral, minor, p, trust, oxides or {}, names, labels)

    distance = np.where(trust, np.abs(p - core), np.nan)
    side = np.full(n, "", dtype=object)
    if orientation == "rim-to-rim":
        side[trust] = np.where(p[trust] < core, "A", "B")
    else:
        beyond = trust & ((p < core - 1e-9) if orientation == "core-to-rim" else (p > core + 1e-9))
        if beyond.any():
            basis += (f"; {int(beyond.sum())} spot(s) lie beyond the core and are measured "
                      "by their distance from it")
    if not user_free:
        confidence = "confirmed"
    return CoreDecision(orientation, float(core), distance, side, basis, confidence, evidence)


def _core_for(orientation, pmin, pmax, shape_core, ps, vs):
    if orientation == "core-to-rim":
        return pmin
    if orientation == "rim-to-core":
        return pmax
    if np.isfinite(shape_core):
        return shape_core
    if ps.size >= 5:
        return _mirror_centre(ps, _smooth(vs), _noise(vs))[0]
    return 0.5 * (pmin + pmax)


def _decide(ps, vs, pmin, pmax, record, mineral, minor, p, trust, oxides, names, labels):
    """Automatic decision from the evidence (see :func:`locate_core`).

    Returns ``(orientation, core, confidence, basis, evidence)``.
    """
    name_ev = _name_evidence(p, trust, names, labels)
    glass_ev = _glass_evidence(p, trust, oxides, mineral)
    if ps.size < 4 or ps[-1] - ps[0] <= 0:
        evidence = tuple(e for e in (name_ev, glass_ev) if e is not None)
        basis = (f"too few usable spots ({ps.size}) to tell the orientation; distances "
                 "assume core-to-rim as measured")
        return "core-to-rim", pmin, "uncertain", basis, evidence
    s = _smooth(vs)
    noise = _noise(vs)
    delta = max(MIN_ZONING_MOL_PCT, ZONING_NOISE_MULTIPLE * noise)
    shape_ev = _shape_evidence(ps, vs, s, noise, delta, record)
    chem = _chemistry_evidence(ps, vs, minor, mineral, record, delta)
    evidence = tuple(e for e in (name_ev, shape_ev, *chem, glass_ev) if e is not None)

    def said(ev):
        return "; ".join(e.detail for e in ev if e is not None)

    # chemistry line: consensus of the full-weight cues; half-weight cues only support
    full = [e for e in chem if e.weight >= 1 and e.supports]
    half = [e for e in chem if 0 < e.weight < 1 and e.supports]
    chem_dirs = {e.supports[0] for e in full}
    chem_conflict = len(chem_dirs) > 1
    chem_dir = next(iter(chem_dirs)) if len(chem_dirs) == 1 else None
    half_against = [e for e in half if chem_dir and e.supports[0] != chem_dir]
    chem_strong = chem_dir is not None and (
        len(full) >= 2 or max(e.z for e in full) >= STRONG_TREND_Z)
    shape_sup = shape_ev.supports
    shape_core = shape_ev.core_position_um

    # 1. the file's own statement
    if name_ev is not None:
        if name_ev.supports == ("complex",):
            guess = shape_sup[0] if shape_sup and shape_sup[0] in ORIENTATIONS else "core-to-rim"
            core = _core_for(guess, pmin, pmax, shape_core, ps, vs)
            return guess, core, "uncertain", _uncertain(name_ev.detail, evidence, guess), evidence
        target = name_ev.supports[0]
        against = [e for e in (shape_ev, glass_ev)
                   if e is not None and e.supports and e.supports != ("complex",)
                   and target not in e.supports]
        core = name_ev.core_position_um if np.isfinite(name_ev.core_position_um) else \
            _core_for(target, pmin, pmax, shape_core, ps, vs)
        if against:
            return target, core, "uncertain", _uncertain(
                f"{name_ev.detail}, but {said(against)}", evidence, target), evidence
        if (target == "rim-to-rim" and not np.isfinite(name_ev.core_position_um)
                and shape_sup != ("rim-to-rim",)):
            return target, core, "uncertain", _uncertain(
                f"{name_ev.detail}, but the core cannot be placed: the {record} profile is "
                "not symmetric about any point", evidence, target), evidence
        note = ""
        if chem_dir and target != "rim-to-rim" and chem_dir != target:
            note = " (reversely zoned: the chemistry alone would read it the other way)"
        return target, core, "high", f"{target}, as the file says{note}: {said(evidence)}", \
            evidence

    # 2. shape: complex or rim-to-rim
    if shape_sup == ("complex",):
        guess = chem_dir or "core-to-rim"
        core = _core_for(guess, pmin, pmax, np.nan, ps, vs)
        return guess, core, "uncertain", _uncertain(shape_ev.detail, evidence, guess), evidence
    glass_sup = glass_ev.supports if glass_ev is not None else ()
    if shape_sup == ("rim-to-rim",):
        interior_high = "higher" in shape_ev.detail.split(" than both ends")[0]
        if glass_sup and "rim-to-rim" not in glass_sup:
            return "rim-to-rim", shape_core, "uncertain", _uncertain(
                f"{shape_ev.detail}, but {glass_ev.detail}", evidence, "rim-to-rim"), evidence
        differ = _rims_alike(ps, minor, shape_core, mineral)
        if differ:
            return "rim-to-rim", shape_core, "uncertain", _uncertain(
                f"{shape_ev.detail}, but {', '.join(differ)}, as in a half-profile",
                evidence, "rim-to-rim"), evidence
        confidence = ("high" if (interior_high or glass_sup == ("rim-to-rim",))
                      and shape_ev.weight >= 1 else "low")
        return "rim-to-rim", shape_core, confidence, \
            f"rim-to-rim, core at {shape_core:.4g} µm: {said(evidence)}", evidence
    if glass_sup == ("rim-to-rim",):
        guess = shape_sup[0] if shape_sup else (chem_dir or "core-to-rim")
        core = _core_for(guess, pmin, pmax, np.nan, ps, vs)
        return guess, core, "uncertain", _uncertain(
            f"{glass_ev.detail}, but the {record} profile is not symmetric: rim-to-rim with "
            "the core where?", evidence, guess), evidence
    if chem_conflict:
        guess = shape_sup[0] if shape_sup else "core-to-rim"
        core = _core_for(guess, pmin, pmax, np.nan, ps, vs)
        return guess, core, "uncertain", _uncertain(
            "the trends disagree: " + said(full), evidence, guess), evidence

    # 3. half profile: count the lines for each reading
    votes: dict[str, set[str]] = {"core-to-rim": set(), "rim-to-core": set()}
    if shape_sup:
        votes[shape_sup[0]].add("shape")
    if chem_dir:
        votes[chem_dir].add("chemistry")
    for o in glass_sup:
        if o in votes:
            votes[o].add("glass")
    for_l, for_h = votes["core-to-rim"], votes["rim-to-core"]
    if for_l and for_h:
        for winner, loser in ((for_l, for_h), (for_h, for_l)):
            if winner == {"shape", "glass"} and loser == {"chemistry"}:
                target = "core-to-rim" if winner is for_l else "rim-to-core"
                core = _core_for(target, pmin, pmax, np.nan, ps, vs)
                return target, core, "low", (
                    f"{target}, reversely zoned (the rim has the higher {record}): shape and "
                    f"glass agree against the normal-zoning reading: {said(evidence)}"), evidence
        guess = shape_sup[0] if shape_sup else "core-to-rim"
        core = _core_for(guess, pmin, pmax, np.nan, ps, vs)
        detail = (f"{'; '.join(sorted(for_l))} say(s) core-to-rim but "
                  f"{'; '.join(sorted(for_h))} say(s) rim-to-core — a reversely or complexly "
                  "zoned crystal?")
        return guess, core, "uncertain", _uncertain(detail, evidence, guess), evidence
    lines = for_l or for_h
    if not lines:
        reason = (shape_ev.detail + ", and nothing else points to either end"
                  if "flat" in shape_ev.detail else "no evidence points to either end")
        return "core-to-rim", pmin, "uncertain", _uncertain(reason, evidence, "core-to-rim"), \
            evidence
    target = "core-to-rim" if for_l else "rim-to-core"
    core = _core_for(target, pmin, pmax, np.nan, ps, vs)
    if len(lines) >= 2:
        confidence = "high"
        if half_against:
            confidence = "low"
    elif lines == {"chemistry"} and not chem_strong:
        return target, core, "uncertain", _uncertain(
            "only one weak trend points to an end, and it assumes normal zoning", evidence,
            target), evidence
    elif lines == {"chemistry"} and shape_ev.leans != target and (
            shape_ev.leans or any(e.cue == record and e.supports for e in chem)):
        # The normal-growth trends all follow Fo/An: where Fo/An changes, a normally
        # zoned crystal read backwards and a reversely zoned one look alike to them.
        # Only the shape (the steeper end) can tell them apart, so it must at least
        # lean their way. (With Fo/An flat, a minor-element trend is not explained
        # by reverse zoning of the major record and may decide with "low".)
        leaning = ("leans the other way" if shape_ev.leans else
                   "shows no steeper end")
        return target, core, "uncertain", _uncertain(
            f"only the trends point to an end (assuming normal zoning) and the shape "
            f"{leaning}: {shape_ev.detail}; a reversely zoned crystal would look the same",
            evidence, target), evidence
    else:
        confidence = "low"
    kind = {"high": "independent lines agree", "low": "one line of evidence"}[confidence] \
        if not half_against else "a supporting trend disagrees"
    return target, core, confidence, f"{target} ({kind}): {said(evidence)}", evidence


def _uncertain(reason: str, evidence, guess: str) -> str:
    rest = "; ".join(e.detail for e in evidence if e.detail not in reason)
    return (f"orientation uncertain: {reason}" + (f"; also: {rest}" if rest else "")
            + f". Distances assume {guess} until you confirm it")


# ---------------------------------------------------------------------------
# stray positions

#: A gap in the sorted positions this many times the median spot spacing
#: (and longer than the rest of the traverse) isolates a stray position.
STRAY_GAP_FACTOR = 100.0
#: Out-of-sequence jump, in median spot spacings, that marks a stray
#: position inside an otherwise ordered traverse.
STRAY_JUMP_FACTOR = 10.0
#: Largest share of the spots that can be called stray (more is not a typo).
STRAY_MAX_FRACTION = 0.1


def find_stray_positions(position_um) -> np.ndarray:
    """Flag positions that break the traverse's spacing by orders of magnitude.

    Parameters
    ----------
    position_um : array_like, shape (n,)
        Position of each spot along the traverse, in input order [µm]
        (NaN where unknown).

    Returns
    -------
    ndarray of object, shape (n,)
        Reason for each stray position ("" for the others).

    Notes
    -----
    Two checks, O(n log n) (one sort):

    * isolated positions: the sorted positions split at every gap longer
      than :data:`STRAY_GAP_FACTOR` times the median spacing and longer
      than the main group's extent; the spots outside the largest group
      are stray (e.g. 42.6 typed as 4260, 1e300, a stage glitch) when they
      are at most :data:`STRAY_MAX_FRACTION` of the spots;
    * out-of-sequence jumps: when the positions run monotonically in input
      order (90% of the steps in one direction), a spot that leaves the
      sequence by more than :data:`STRAY_JUMP_FACTOR` spacings while its
      neighbours continue it (42.6 typed as 426 inside a 0-400 µm traverse).
    """
    p = np.asarray(position_um, dtype=float)
    n = p.size
    reasons = np.full(n, "", dtype=object)
    idx = np.flatnonzero(np.isfinite(p))
    if idx.size < 5:
        return reasons
    limit = max(1, int(STRAY_MAX_FRACTION * idx.size))
    with np.errstate(all="ignore"):
        order = np.argsort(p[idx], kind="stable")
        q = p[idx][order]
        gaps = np.diff(q)
        positive = gaps[(gaps > 0) & np.isfinite(gaps)]
        if positive.size == 0:
            return reasons
        step = float(np.median(positive))
        cut = np.flatnonzero(~(gaps <= STRAY_GAP_FACTOR * step))  # inf/NaN gaps cut too
        stray = np.zeros(idx.size, bool)  # in sorted order
        if cut.size:
            bounds = np.concatenate(([0], cut + 1, [q.size]))
            sizes = np.diff(bounds)
            main = int(np.argmax(sizes))
            lo, hi = bounds[main], bounds[main + 1]
            extent = q[hi - 1] - q[lo]
            outside = q.size - sizes[main]
            near_gap_lo = gaps[lo - 1] if lo > 0 else np.inf
            near_gap_hi = gaps[hi - 1] if hi < q.size else np.inf
            if 0 < outside <= limit and min(near_gap_lo, near_gap_hi) > extent:
                stray[:lo] = True
                stray[hi:] = True
        main_q = q[~stray]
        span = (float(main_q[0]), float(main_q[-1]))
        for k in np.flatnonzero(stray):
            i = idx[order[k]]
            reasons[i] = (f"position {p[i]:.6g} µm lies far outside the rest of the traverse "
                          f"({span[0]:.4g}-{span[1]:.4g} µm, spots about {step:.3g} µm apart): "
                          "a typo or a stage glitch? not used to place the core")
        # out-of-sequence jumps (input order), among the spots not yet flagged
        keep = idx[~stray[np.argsort(order)]]
        r = p[keep]
        if r.size >= 6:
            d = np.diff(r)
            direction = np.sign(np.median(d))
            if direction != 0 and np.mean(d * direction >= 0) >= 0.9:
                prev, mid, nxt = r[:-2], r[1:-1], r[2:]
                in_order = (nxt - prev) * direction >= 0
                outside_pair = (mid - np.maximum(prev, nxt)) * (mid - np.minimum(prev, nxt)) > 0
                away = np.minimum(np.abs(mid - prev), np.abs(mid - nxt))
                jump = in_order & outside_pair & (away > STRAY_JUMP_FACTOR * step)
                hits = np.flatnonzero(jump) + 1
                if 0 < hits.size <= limit:
                    for j in hits:
                        i = keep[j]
                        reasons[i] = (
                            f"position {p[i]:.6g} µm breaks the sequence of its neighbours "
                            f"({r[j - 1]:.4g} and {r[j + 1]:.4g} µm, spots about {step:.3g} µm "
                            "apart): a typo or a stage glitch? not used to place the core")
    return reasons


def require_orientation(traverse) -> None:
    """Refuse a traverse whose orientation is uncertain and was not confirmed.

    Parameters
    ----------
    traverse : zoning.Traverse
        The traverse about to be fitted.

    Raises
    ------
    OrientationUncertainError
        When ``traverse.orientation_confidence`` is "uncertain"; the message
        gives the evidence and the options and project keys that confirm it.
    """
    if getattr(traverse, "orientation_confidence", "confirmed") != "uncertain":
        return
    basis = getattr(traverse, "orientation_basis", "") or "no evidence recorded"
    raise OrientationUncertainError(
        f"orientation uncertain for traverse {traverse.name!r} ({traverse.source}): {basis}. "
        "It was not fitted, because a wrong core or orientation gives wrong results without "
        "any sign. Look at the crystal (BSE image or map) and confirm: --orientation "
        "core-to-rim (or rim-to-core, rim-to-rim) and/or --core-um 0 (core position along "
        "the traverse [µm]); in a project file, orientation = \"core-to-rim\" and/or "
        "core_um = 0 for this sample."
    )
