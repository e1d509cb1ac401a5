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

from dataclasses import dataclass

import numpy as np
from scipy.ndimage import median_filter

from zoning.exceptions import OrientationUncertainError, ProfileFormatError
from zoning.traverse import ORIENTATIONS

__all__ = [
    "LineFit",
    "project_traverse",
    "CoreDecision",
    "locate_core",
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


@dataclass(frozen=True, eq=False)
class CoreDecision:
    """Orientation of a traverse, its core and distances from the core.

    Parameters
    ----------
    orientation : {"core-to-rim", "rim-to-core", "rim-to-rim"}
        Orientation relative to increasing position.
    core_position_um : float
        Position of the core along the traverse [µm].
    distance_um : ndarray, shape (n,)
        ``|position - core|`` [µm]; NaN where the position is unknown.
    side : ndarray of str, shape (n,)
        "" for a half-profile; "A" (position below the core) or "B" (at or
        above the core) for a rim-to-rim traverse.
    basis : str
        Plain-language statement of how the decision was made.
    confidence : {"confirmed", "high", "low", "uncertain"}
        "confirmed" when the user gave the orientation or core, otherwise
        how well the evidence supports the decision.
    """

    orientation: str
    core_position_um: float
    distance_um: np.ndarray
    side: np.ndarray
    basis: str
    confidence: str = "low"


def _smooth(values: np.ndarray) -> np.ndarray:
    width = max(3, (values.size // 10) | 1)
    return median_filter(values, size=min(width, 11), mode="nearest")


def _noise(values: np.ndarray) -> float:
    if values.size < 3:
        return 0.0
    return robust_sigma(np.diff(values)) / np.sqrt(2.0)


def _end_slope(p: np.ndarray, v: np.ndarray, at_start: bool, length: float) -> tuple[float, float]:
    """Slope and change of a straight line through one end region."""
    frac = 0.25
    sel = p <= p[0] + frac * length if at_start else p >= p[-1] - frac * length
    if sel.sum() < 2:
        sel = np.zeros(p.size, bool)
        sel[:2] = at_start
        sel[-2:] = not at_start
    pp, vv = p[sel], v[sel]
    if np.ptp(pp) == 0:
        return 0.0, 0.0
    dp = pp - pp.mean()
    denom = float(np.dot(dp, dp))
    if not np.isfinite(denom) or denom == 0:
        return 0.0, 0.0
    slope = float(np.dot(dp, vv - vv.mean())) / denom  # least-squares slope
    if not np.isfinite(slope):
        return 0.0, 0.0
    return abs(slope), abs(slope * float(np.ptp(pp)))


def _mirror_centre(p: np.ndarray, s: np.ndarray, noise: float) -> tuple[float, float]:
    """Centre about which the smoothed profile is most nearly symmetric.

    Returns the centre [µm] and the RMS mismatch of the mirrored profile.
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
    return float(centres[k]), float(np.sqrt(cost[k]))


def locate_core(
    position_um,
    value,
    *,
    usable=None,
    orientation: str | None = None,
    core_position_um: float | None = None,
    record: str = "Fo",
) -> CoreDecision:
    """Decide the orientation of a traverse and measure distances from its core.

    Parameters
    ----------
    position_um : array_like, shape (n,)
        Position of each spot along the traverse [µm] (NaN if unknown).
    value : array_like, shape (n,)
        Zoning record of each spot, Fo or An [mol%].
    usable : array_like of bool, shape (n,), optional
        Spots to base the decision on (e.g. those passing the quality
        checks); default: all with finite position and value.
    orientation : {"core-to-rim", "rim-to-core", "rim-to-rim"}, optional
        User override of the orientation.
    core_position_um : float, optional
        User override of the core position [µm].
    record : str, optional
        Name of the record for the statement ("Fo" or "An").

    Returns
    -------
    CoreDecision
        Orientation, core position, distances, sides and the basis.

    Raises
    ------
    ProfileFormatError
        For an unknown orientation or a non-finite core position.

    Notes
    -----
    Automatic decision, on the usable spots sorted by position and smoothed
    with a running median:

    * rim-to-rim when both end regions (outer 15% of the length) differ from
      an interior extremum in the same direction by more than
      ``max(0.5 mol%, 3 x spot-to-spot noise)`` and the profile is roughly
      mirror-symmetric. The core is the centre of mirror symmetry of the
      profile, searched in the central 70% (ties go to the midpoint). Using
      the symmetry centre rather than the highest Fo/An keeps the core in the
      right place when the rims are reversely zoned;
    * otherwise a half-profile: the rim is the end with the clearly steeper
      gradient (x1.5), since growth and diffusion both steepen profiles
      towards the rim; when neither end is clearly steeper, normal zoning is
      assumed (the core has the higher Fo or An); a profile flat within the
      noise is taken as measured (core-to-rim).
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
    finite_pos = np.isfinite(p)
    use = finite_pos & np.isfinite(v)
    if usable is not None:
        use &= np.asarray(usable, dtype=bool)
    if not finite_pos.any():
        return CoreDecision(orientation or "core-to-rim", float("nan"), np.full(n, np.nan),
                            np.full(n, "", dtype=object),
                            "positions unknown; distances from the core cannot be computed")
    user_free = orientation is None and core_position_um is None
    pmin, pmax = float(np.nanmin(p)), float(np.nanmax(p))
    order = np.argsort(p[use], kind="stable")
    ps, vs = p[use][order], v[use][order]

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
            core, _ = _mirror_centre(ps, s, _noise(vs))
        else:
            core = 0.5 * (pmin + pmax)
        basis = f"orientation {orientation} given by the user"
        if orientation == "rim-to-rim":
            basis += f"; core placed at {core:.4g} µm (centre of symmetry of the {record} profile)"
    else:
        orientation, core, basis = _decide(ps, vs, pmin, pmax, record)

    confidence = "low" if user_free else "confirmed"
    distance = np.abs(p - core)
    side = np.full(n, "", dtype=object)
    if orientation == "rim-to-rim":
        side[finite_pos] = np.where(p[finite_pos] < core, "A", "B")
    else:
        beyond = (p < core - 1e-9) if orientation == "core-to-rim" else (p > core + 1e-9)
        if beyond.any():
            basis += (f"; {int(beyond.sum())} spot(s) lie beyond the core and are measured "
                      "by their distance from it")
    return CoreDecision(orientation, float(core), distance, side, basis, confidence)


def _decide(ps, vs, pmin, pmax, record) -> tuple[str, float, str]:
    """Automatic orientation decision (see :func:`locate_core`)."""
    if ps.size < 4 or ps[-1] - ps[0] <= 0:
        return ("core-to-rim", pmin,
                f"too few usable spots ({ps.size}) to tell the orientation; assumed "
                "core-to-rim as measured (override with --orientation / --core-um)")
    length = ps[-1] - ps[0]
    s = _smooth(vs)
    noise = _noise(vs)
    delta = max(MIN_ZONING_MOL_PCT, ZONING_NOISE_MULTIPLE * noise)
    a_sel = ps <= ps[0] + END_FRACTION * length
    b_sel = ps >= ps[-1] - END_FRACTION * length
    e_a, e_b = float(np.mean(s[a_sel])), float(np.mean(s[b_sel]))
    inner = (ps > ps[0] + CORE_SEARCH_MARGIN * length) & (ps < ps[-1] - CORE_SEARCH_MARGIN * length)
    if inner.sum() >= 2 and ps.size >= 7:
        m_max, m_min = float(s[inner].max()), float(s[inner].min())
        high = m_max - e_a > delta and m_max - e_b > delta
        low = e_a - m_min > delta and e_b - m_min > delta
        if high or low:
            core, rms = _mirror_centre(ps, s, noise)
            amplitude = (m_max if high else m_min) - 0.5 * (e_a + e_b)
            if rms < 0.5 * abs(amplitude):
                kind = "higher" if high else "lower"
                return ("rim-to-rim", core,
                        f"the interior of the {record} profile is {kind} than both ends "
                        f"({m_max if high else m_min:.1f} inside, {e_a:.1f} and {e_b:.1f} at "
                        f"the ends); core at {core:.4g} µm, the centre of symmetry of the "
                        f"profile (mirror mismatch {rms:.2g} mol%)")
    slope_a, change_a = _end_slope(ps, s, True, length)
    slope_b, change_b = _end_slope(ps, s, False, length)
    if abs(e_a - e_b) <= delta and max(change_a, change_b) <= delta:
        return ("core-to-rim", pmin,
                f"the {record} profile is flat within {delta:.2g} mol%; orientation cannot be "
                "told from the data, taken as measured: core-to-rim (override with --orientation)")
    if slope_b > STEEPNESS_RATIO * slope_a and change_b > delta:
        return ("core-to-rim", pmin,
                f"the {record} profile changes fastest at the high-position end "
                f"({slope_b:.3g} vs {slope_a:.3g} mol%/µm): that end is the rim, core-to-rim")
    if slope_a > STEEPNESS_RATIO * slope_b and change_a > delta:
        return ("rim-to-core", pmax,
                f"the {record} profile changes fastest at the low-position end "
                f"({slope_a:.3g} vs {slope_b:.3g} mol%/µm): that end is the rim, rim-to-core")
    if e_a >= e_b:
        return ("core-to-rim", pmin,
                f"neither end is clearly steeper; assuming normal zoning, the end with higher "
                f"{record} ({e_a:.1f} vs {e_b:.1f}) is the core: core-to-rim "
                "(override with --orientation if the crystal is reversely zoned)")
    return ("rim-to-core", pmax,
            f"neither end is clearly steeper; assuming normal zoning, the end with higher "
            f"{record} ({e_b:.1f} vs {e_a:.1f}) is the core: rim-to-core "
            "(override with --orientation if the crystal is reversely zoned)")


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
