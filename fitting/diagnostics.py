"""Residual and profile diagnostics: runs of same-sign residuals and reversals.

Two things a closed-system crystallization model cannot make are located
here by distance so that the user can act on them:

* **runs** of residuals of one sign longer than chance allows, which show
  that the model misses a systematic feature of the profile (wrong Kd,
  diffusion after growth, an unmodelled process);
* **reversals** of the measured profile: a zone that goes back towards the
  core composition (higher Fo or An further out), i.e. recharge or mixing.
  Every closed-system model of this package makes a profile that evolves
  monotonically away from the core composition, so such a zone can only be
  fitted piecewise (``--range A:B``).
"""

from __future__ import annotations

import numpy as np
import pandas as pd
from scipy.signal import lfilter

__all__ = [
    "longest_run_probability",
    "longest_run_threshold",
    "residual_runs",
    "runs_test_z",
    "reversal_threshold",
    "find_reversals",
    "noise_scatter",
    "reversal_sigma",
]

#: Width of the running median applied before looking for reversals
#: [spots]. A single stray spot cannot make a reversal on its own.
REVERSAL_WINDOW = 3

#: Minimum rise back towards the core composition, in units of the per-spot
#: 1-sigma, for a zone to count as a reversal (common practice: ~3 sigma).
REVERSAL_N_SIGMA = 3.0

#: Largest number of simulated noise values held at once by
#: :func:`reversal_threshold` (memory bound for long traverses).
_SIMULATION_BLOCK = 1 << 20


def _sign_runs(signs: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Start index, length and sign of each run of equal signs."""
    n = signs.size
    if n == 0:
        empty = np.zeros(0, dtype=int)
        return empty, empty, empty
    change = np.flatnonzero(np.diff(signs) != 0) + 1
    starts = np.concatenate(([0], change))
    ends = np.concatenate((change, [n]))
    return starts, ends - starts, signs[starts]


def longest_run_probability(n: int, length: int) -> float:
    r"""Probability that ``n`` random signs hold a run of ``length`` or more equal ones [1].

    Parameters
    ----------
    n : int
        Number of residuals (independent signs, probability 1/2 each).
    length : int
        Run length [spots].

    Returns
    -------
    float
        P(longest run of equal signs >= ``length``).

    Notes
    -----
    A sign sequence whose runs are all shorter than ``L`` is a first sign
    (2 choices) followed by a composition of ``n`` into parts ``1..L-1``
    (the run lengths). With :math:`u_m` the number of such compositions of
    ``m`` divided by :math:`2^m`,

    .. math::

        u_0 = 1, \qquad u_m = \sum_{k=1}^{L-1} 2^{-k} u_{m-k},
        \qquad P(\text{longest} < L) = 2 u_n \quad (n \ge 1),

    a linear recursion evaluated as a recursive filter
    (:func:`scipy.signal.lfilter`) in O(n L) time and O(n) memory
    (Feller 1968, on runs in Bernoulli trials; Schilling 1990).

    References
    ----------
    Feller, W. (1968) An Introduction to Probability Theory and Its
    Applications, vol. 1, 3rd ed. Wiley, ch. XIII (from memory).
    Schilling, M. F. (1990) The longest run of heads. The College
    Mathematics Journal 21, 196-207 (from memory).
    """
    n = int(n)
    length = int(length)
    if n <= 0 or length > n:
        return 0.0
    if length <= 1:
        return 1.0
    denominator = np.concatenate(([1.0], -(0.5 ** np.arange(1, length))))
    impulse = np.zeros(n + 1)
    impulse[0] = 1.0
    u = lfilter([1.0], denominator, impulse)
    return float(min(max(1.0 - 2.0 * u[n], 0.0), 1.0))


def longest_run_threshold(n: int, alpha: float = 0.05) -> int:
    """Shortest run length that chance alone reaches with probability <= alpha [spots].

    For ``n`` independent residuals with random signs (probability 1/2
    each), the distribution of the longest run of equal signs is exact
    (:func:`longest_run_probability`); the threshold is found by bisection
    over run lengths up to the union bound ``1 + log2(n / alpha)``, so the
    cost is O(n log(n) log log(n)) time and O(n) memory (about 10 ms for
    62,000 spots; ``benchmarks/long.py``).

    Parameters
    ----------
    n : int
        Number of residuals.
    alpha : float, optional
        False-alarm probability (default 0.05, i.e. the 95% level).

    Returns
    -------
    int
        Smallest ``L`` with P(longest run >= L) <= ``alpha``; ``n + 1`` when
        no run length is that unlikely (very short profiles).
    """
    n = int(n)
    if n <= 0:
        return 1
    if not alpha > 0:
        return n + 1
    # Union bound: P(longest >= L) <= n 2^(1-L) <= alpha once L >= 1 + log2(n/alpha).
    hi = int(min(n + 1, 2 + np.ceil(np.log2(n / alpha))))
    if longest_run_probability(n, hi) > alpha:
        return n + 1
    lo = 1
    while lo < hi:  # P(longest >= L) falls as L grows
        mid = (lo + hi) // 2
        if longest_run_probability(n, mid) <= alpha:
            hi = mid
        else:
            lo = mid + 1
    return lo


def runs_test_z(residual: np.ndarray) -> float:
    """Wald-Wolfowitz runs test statistic of the residual signs.

    Parameters
    ----------
    residual : ndarray, shape (n,)
        Residuals ordered by distance.

    Returns
    -------
    float
        ``(R - E[R]) / sd(R)`` with ``R`` the number of runs; strongly
        negative values mean too few runs (systematic misfit). NaN when the
        signs are all equal or fewer than 2 residuals are given.

    References
    ----------
    Wald, A. & Wolfowitz, J. (1940) On a test whether two samples are from
    the same population. Annals of Mathematical Statistics 11, 147-162.
    """
    r = np.asarray(residual, dtype=float)
    r = r[np.isfinite(r) & (r != 0)]
    n_pos = int((r > 0).sum())
    n_neg = int((r < 0).sum())
    n = n_pos + n_neg
    if n_pos == 0 or n_neg == 0:
        return float("nan")
    runs = 1 + int(np.count_nonzero(np.diff(np.sign(r))))
    mean = 2.0 * n_pos * n_neg / n + 1.0
    var = 2.0 * n_pos * n_neg * (2.0 * n_pos * n_neg - n) / (n * n * (n - 1.0))
    if var <= 0:
        return float("nan")
    return float((runs - mean) / np.sqrt(var))


def residual_runs(
    distance_um: np.ndarray, residual: np.ndarray, alpha: float = 0.05
) -> pd.DataFrame:
    """Find runs of same-sign residuals longer than chance allows at level ``alpha``.

    Parameters
    ----------
    distance_um : ndarray, shape (n,)
        Distance of each spot from the core [µm], increasing.
    residual : ndarray, shape (n,)
        Observed minus model of each spot (any unit).
    alpha : float, optional
        False-alarm probability for the longest run (default 0.05).

    Returns
    -------
    pandas.DataFrame
        Columns ``start_um``, ``end_um``, ``sign`` (+1: data above the
        model, -1: below), ``n_spots``; empty when no run is that long.
    """
    d = np.asarray(distance_um, dtype=float)
    r = np.asarray(residual, dtype=float)
    keep = np.isfinite(d) & np.isfinite(r)
    d, r = d[keep], r[keep]
    columns = ["start_um", "end_um", "sign", "n_spots"]
    if d.size < 3:
        return pd.DataFrame(columns=columns)
    signs = np.where(r >= 0, 1, -1)
    starts, lengths, run_signs = _sign_runs(signs)
    limit = longest_run_threshold(d.size, alpha)
    long = lengths >= limit
    return pd.DataFrame(
        {
            "start_um": d[starts[long]],
            "end_um": d[starts[long] + lengths[long] - 1],
            "sign": run_signs[long].astype(int),
            "n_spots": lengths[long].astype(int),
        },
        columns=columns,
    )


def _running_median(y: np.ndarray, window: int) -> np.ndarray:
    """Centred running median along the last axis (ends padded by repetition).

    A median, unlike a mean, ignores a single stray spot, so one outlier can
    never make a reversal on its own.
    """
    half = window // 2
    pad = [(0, 0)] * (y.ndim - 1) + [(half, half)]
    padded = np.pad(y, pad, mode="edge")
    if window == 3:  # exact median of three by comparisons, several times faster
        a, b, c = padded[..., :-2], padded[..., 1:-1], padded[..., 2:]
        return np.maximum(np.minimum(a, b), np.minimum(np.maximum(a, b), c))
    windows = np.lib.stride_tricks.sliding_window_view(padded, window, axis=-1)
    return np.median(windows, axis=-1)


def _max_rise(y: np.ndarray) -> np.ndarray:
    """Largest rise above the running minimum along the last axis."""
    return np.max(y - np.minimum.accumulate(y, axis=-1), axis=-1)


def reversal_threshold(n: int, sigma: float, *, n_sim: int = 2000, seed: int = 12345) -> float:
    """Smallest rise that counts as a reversal [same unit as ``sigma``].

    The larger of ``REVERSAL_N_SIGMA * sigma`` and the 99th percentile of the
    largest rise that pure noise makes on a flat profile of ``n`` spots
    (after the same running median), estimated from ``n_sim`` simulated
    profiles with a fixed seed (so the threshold is reproducible). A flat
    profile is the worst case: a zoned profile hides noise rises.

    Parameters
    ----------
    n : int
        Number of spots.
    sigma : float
        Typical per-spot 1-sigma [mol%].
    n_sim : int, optional
        Number of simulated noise profiles.
    seed : int, optional
        Seed of the simulation.

    Returns
    -------
    float
        Threshold on the rise of the running median.
    """
    if n < 2 or not np.isfinite(sigma) or sigma <= 0:
        return float("inf")
    rng = np.random.default_rng(seed)
    # Simulated in blocks of rows (same random stream as one (n_sim, n) draw),
    # so memory stays O(n) with a small constant for long traverses.
    rows = max(1, min(n_sim, _SIMULATION_BLOCK // n))
    rises = np.empty(n_sim)
    for start in range(0, n_sim, rows):
        stop = min(start + rows, n_sim)
        noise = rng.standard_normal((stop - start, n)) * sigma
        rises[start:stop] = _max_rise(_running_median(noise, REVERSAL_WINDOW))
    return float(max(REVERSAL_N_SIGMA * sigma, np.quantile(rises, 0.99)))


def noise_scatter(distance_um: np.ndarray, value: np.ndarray) -> float:
    """Spot-to-spot scatter of a profile, estimated from the data alone [unit of ``value``].

    Pseudo-residuals of Gasser, Sroka & Jennen-Steinmetz (1986): for each
    interior spot, ``e_i = a_i y_(i-1) + b_i y_(i+1) - y_i`` with the
    linear-interpolation weights ``a_i = (x_(i+1) - x_i) / (x_(i+1) - x_(i-1))``
    and ``b_i = 1 - a_i``, scaled by ``c_i = (a_i^2 + b_i^2 + 1)^(-1/2)`` so
    that ``c_i e_i`` has the variance of one spot's noise wherever the
    profile is locally linear. A smooth zoning trend (also a reversal spread
    over several spots) hardly enters; the robust scale 1.4826 x median
    absolute value keeps single stray spots and sharp steps from inflating it.

    Parameters
    ----------
    distance_um : ndarray, shape (n,)
        Distance [µm], increasing (ties are skipped).
    value : ndarray, shape (n,)
        Measured values.

    Returns
    -------
    float
        Estimated 1-sigma of one spot; NaN with fewer than 5 usable triples.

    References
    ----------
    Gasser, T., Sroka, L. & Jennen-Steinmetz, C. (1986) Residual variance and
    residual pattern in nonlinear regression. Biometrika 73, 625-633 (from
    memory).
    """
    x = np.asarray(distance_um, dtype=float)
    y = np.asarray(value, dtype=float)
    ok = np.isfinite(x) & np.isfinite(y)
    x, y = x[ok], y[ok]
    if x.size < 7:
        return float("nan")
    span = x[2:] - x[:-2]
    good = (x[1:-1] > x[:-2]) & (x[2:] > x[1:-1])
    if good.sum() < 5:
        return float("nan")
    a = np.where(good, (x[2:] - x[1:-1]) / np.where(good, span, 1.0), 0.5)
    b = 1.0 - a
    e = a * y[:-2] + b * y[2:] - y[1:-1]
    c = 1.0 / np.sqrt(a**2 + b**2 + 1.0)
    return float(1.4826 * np.median(np.abs(c * e)[good]))


def reversal_sigma(
    distance_um: np.ndarray, value: np.ndarray, sigma: np.ndarray | float,
    sigma_scale: float = 1.0,
) -> float:
    """Per-spot 1-sigma that reversals are tested against [unit of ``value``].

    ``max(stated, min(stated x sigma_scale, scatter))``: never below the
    stated analytical sigma; raised when the data scatter more than stated
    (:func:`noise_scatter`), so that noise is never read as recharge; but not
    beyond the sigma the fit used after scaling (the Birge ratio, which also
    grows with a real reversal the model cannot follow, so it alone would
    hide one).

    Parameters
    ----------
    distance_um, value : ndarray, shape (n,)
        The measured profile.
    sigma : ndarray, shape (n,), or float
        Stated per-spot 1-sigma (the median is used).
    sigma_scale : float, optional
        Factor the fit applied to every sigma.

    Returns
    -------
    float
    """
    stated = float(np.nanmedian(np.broadcast_to(np.asarray(sigma, dtype=float),
                                                np.shape(value))))
    scatter = noise_scatter(distance_um, value)
    scaled = stated * float(sigma_scale)
    if not np.isfinite(scatter):
        return stated
    return float(max(stated, min(scaled, scatter)))


def find_reversals(
    distance_um: np.ndarray, value: np.ndarray, sigma: np.ndarray | float
) -> pd.DataFrame:
    """Zones where the measured profile goes back towards the core composition.

    Crystallization lowers Fo and An as the crystal grows, so a reversal is
    a rise of the profile with distance. The profile is smoothed with a
    running median over :data:`REVERSAL_WINDOW` spots; an episode starts at
    the lowest point so far and is a reversal when the smoothed profile
    then rises by more than :func:`reversal_threshold`. The episode ends
    when the profile falls back by more than the threshold (normal zoning
    resumed) or at a new low.

    Parameters
    ----------
    distance_um : ndarray, shape (n,)
        Distance from the core [µm], increasing.
    value : ndarray, shape (n,)
        Measured Fo or An [mol%].
    sigma : ndarray, shape (n,), or float
        Per-spot 1-sigma [mol%]; the median is used.

    Returns
    -------
    pandas.DataFrame
        ``start_um`` (the low point before the rise), ``end_um`` (the top of
        the rise), ``amplitude`` (rise of the smoothed profile [mol%]),
        ``n_spots`` (spots from the low to the top, inclusive); empty when
        there is none.
    """
    d = np.asarray(distance_um, dtype=float)
    y = np.asarray(value, dtype=float)
    columns = ["start_um", "end_um", "amplitude", "n_spots"]
    if d.size < REVERSAL_WINDOW + 1:
        return pd.DataFrame(columns=columns)
    s = np.broadcast_to(np.asarray(sigma, dtype=float), y.shape)
    threshold = reversal_threshold(d.size, float(np.nanmedian(s)))
    smooth = _running_median(y, REVERSAL_WINDOW)
    found = []
    trough = peak = 0
    # Sequential scan with a state (trough, peak): a loop over spots is the
    # natural form here (n is the number of spots of one traverse).
    for i in range(1, smooth.size):
        significant = smooth[peak] - smooth[trough] > threshold
        if significant and (smooth[peak] - smooth[i] > threshold or smooth[i] < smooth[trough]):
            found.append((trough, peak))
            trough = peak = i
        elif smooth[i] < smooth[trough] and not significant:
            trough = peak = i
        elif smooth[i] > smooth[peak]:
            peak = i
    if smooth[peak] - smooth[trough] > threshold:
        found.append((trough, peak))
    return pd.DataFrame(
        {
            "start_um": [d[a] for a, _ in found],
            "end_um": [d[b] for _, b in found],
            "amplitude": [float(smooth[b] - smooth[a]) for a, b in found],
            "n_spots": [int(b - a + 1) for a, b in found],
        },
        columns=columns,
    )
