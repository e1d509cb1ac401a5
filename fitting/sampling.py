"""Posterior sampling with emcee and the summaries drawn from it.

The sampler is emcee's affine-invariant ensemble sampler (Foreman-Mackey et
al. 2013) used directly, with ``vectorize=True`` so that the log-posterior
of all walkers of one half-step is evaluated in a single batched call of the
forward model. Convergence is judged by the integrated autocorrelation time
(Goodman & Weare 2010; Sokal 1997) of each parameter.

References
----------
Foreman-Mackey, D., Hogg, D. W., Lang, D. & Goodman, J. (2013) emcee: the
MCMC hammer. Publications of the Astronomical Society of the Pacific 125,
306-312.
Goodman, J. & Weare, J. (2010) Ensemble samplers with affine invariance.
Communications in Applied Mathematics and Computational Science 5, 65-80.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass
from typing import TYPE_CHECKING

import emcee
import numpy as np

from zoning.exceptions import FitError, ZoningError

if TYPE_CHECKING:
    from zoning.fitting.problem import FitProblem

__all__ = [
    "ChainSummary",
    "Posterior",
    "run_ensemble",
    "sample_posterior",
    "credible_band",
    "DEFAULT_N_STEPS",
    "MAX_AUTO_STEPS",
    "BURN_FRACTION",
]

#: Default sampler steps per mineral. Plagioclase posteriors (melt Ca#,
#: KD(Ca-Na) and F) are skewed and mix more slowly: with 600 steps their 95%
#: bands came out too narrow in the coverage benchmark (benchmarks/fit.py).
DEFAULT_N_STEPS = {"olivine": 600, "plagioclase": 2000}
#: Longest run, per mineral, to which a fit continues its chain by itself
#: when the user gave no step count and the effective sample size after the
#: default steps is below MIN_ESS (a free section and diffusion together
#: lengthen the autocorrelation to 15-35 olivine steps).
MAX_AUTO_STEPS = {"olivine": 3000, "plagioclase": 6000}
#: Share of the sampler steps discarded as burn-in.
BURN_FRACTION = 0.25

#: Citation keys (:mod:`zoning.references`) of the sampler, its moves and its
#: convergence measure.
CITATIONS = ("foreman_mackey_2013", "goodman_weare_2010", "ter_braak_2006",
             "ter_braak_vrugt_2008", "gelman_1996", "sokal_1997")

#: Minimum effective sample size per quantity before the chain is trusted.
MIN_ESS = 1000.0
#: Minimum chain length after burn-in, in autocorrelation times (emcee
#: documentation: "at least 50 tau" for a reliable tau estimate).
MIN_TAU_MULTIPLE = 50.0
#: Relative size of the ball of starting walkers around the best fit
#: (fraction of each parameter's prior range).
BALL_FRACTION = 1e-3
#: Scale of the Gaussian proposal, 2.38 / sqrt(p) times the posterior sd
#: (optimal random-walk Metropolis scaling, Gelman, Roberts & Gilks 1996).
PROPOSAL_SCALE = 2.38
#: Share of production steps made by the Gaussian random-walk Metropolis
#: move, by differential-evolution moves, and (the rest) by the Student-t
#: independence move.
GAUSSIAN_SHARE = 0.3
DE_SHARE = 0.1
#: With several starting modes: share of steps that are differential-evolution
#: moves with gamma = 1, which jump between modes (ter Braak 2006).
MODE_JUMP_SHARE = 0.1
#: Degrees of freedom and widening of the Student-t independence proposal.
T_DOF = 5.0
T_WIDEN = 1.2
#: Shortest burn-in stage [steps]: the burn-in is split into a
#: differential-evolution stage and a production-move stage when it is at
#: least twice this long.
MIN_STAGE_STEPS = 50
#: Burn-in draws per coefficient of the largest quadratic of the ridge-
#: straightening map (_QuadraticShear): with fewer, the map is not used.
SHEAR_DRAWS_PER_COEF = 20
#: Shrink factor of the Laplace-shaped starting ball.
BALL_SHRINK = 1.0


@dataclass(frozen=True, eq=False)
class ChainSummary:
    """Flattened post-burn-in chain and its convergence diagnostics.

    Parameters
    ----------
    flat : ndarray, shape (k, p)
        Every post-burn-in draw of every walker.
    thinned : ndarray, shape (k', p)
        ``flat`` thinned by about half the shortest autocorrelation time.
    tau : ndarray, shape (p,)
        Integrated autocorrelation time per parameter [steps].
    ess : ndarray, shape (p,)
        Effective sample size per parameter (walkers x steps / tau).
    acceptance_fraction : float
        Mean acceptance fraction of the walkers.
    n_walkers, n_steps, burn_in, thin : int
        Sampler settings actually used.
    """

    flat: np.ndarray
    thinned: np.ndarray
    tau: np.ndarray
    ess: np.ndarray
    acceptance_fraction: float
    n_walkers: int
    n_steps: int
    burn_in: int
    thin: int


def _start_ball(best, lower, upper, n_walkers, rng, covariance=None):
    """Walkers in a small ball around ``best``, reflected into the bounds.

    With a covariance (e.g. the Laplace approximation at the best fit) the
    ball has its shape, shrunk by :data:`BALL_SHRINK`, so that the walkers
    start aligned with the posterior's correlations; otherwise it is a
    sphere of :data:`BALL_FRACTION` of each prior range.
    """
    best = np.asarray(best, dtype=float)
    p = best.size
    normal = rng.standard_normal((n_walkers, p))
    chol = None
    if covariance is not None:
        cov = np.asarray(covariance, dtype=float)
        if cov.shape == (p, p) and np.all(np.isfinite(cov)):
            # Cap each sd at a tenth of the prior range (flat directions).
            sd = np.sqrt(np.clip(np.diag(cov), 0.0, None))
            cap = np.minimum(sd, 0.1 * (upper - lower))
            factor = np.where(sd > 0, cap / np.where(sd > 0, sd, 1.0), 0.0)
            cov = cov * np.outer(factor, factor) + np.diag((1e-9 * (upper - lower)) ** 2)
            try:
                chol = np.linalg.cholesky(cov)
            except np.linalg.LinAlgError:
                chol = None
    if chol is not None:
        pos = best + BALL_SHRINK * normal @ chol.T
    else:
        pos = best + BALL_FRACTION * (upper - lower) * normal
    # Reflect into (lower, upper): walkers must start where the prior is > 0.
    pos = np.where(pos < lower, 2 * lower - pos, pos)
    pos = np.where(pos > upper, 2 * upper - pos, pos)
    return np.clip(pos, lower + 1e-12 * (upper - lower), upper - 1e-12 * (upper - lower))


def _mode_ball(centres, weights, lower, upper, n_walkers, rng, covariance=None):
    """Walkers shared among several starting points in proportion to ``weights``.

    Every centre gets at least two walkers (so that the ensemble moves see
    each mode); the first centre (the best fit) takes the rest.
    """
    centres = np.atleast_2d(np.asarray(centres, dtype=float))
    w = np.asarray(weights, dtype=float)
    w = w / w.sum()
    counts = np.maximum(2, np.floor(w * n_walkers).astype(int))
    counts[0] += n_walkers - counts.sum()
    while counts[0] < 2:  # more centres than walkers allow: drop the least likely
        keep = np.argsort(-w, kind="stable")[: max(1, centres.shape[0] - 1)]
        keep.sort()
        centres, w = centres[keep], w[keep] / w[keep].sum()
        counts = np.maximum(2, np.floor(w * n_walkers).astype(int))
        counts[0] += n_walkers - counts.sum()
    pos, home = [], []
    for c, k in zip(centres, counts, strict=True):
        pos.append(_start_ball(c, lower, upper, int(k), rng, covariance))
        home.append(np.repeat(c[None, :], int(k), axis=0))
    return np.vstack(pos), np.vstack(home)


def _finite_start(log_prob, start, best, max_halvings=40):
    """Pull starting walkers with zero posterior towards ``best`` until all are positive.

    Each walker outside the support (e.g. a melt ratio beyond its bounds
    after the change of coordinates, or a fraction the melt cannot reach) is
    moved half-way to the best fit, repeatedly; the best fit itself lies in
    the support. A walker that starts at zero posterior would otherwise make
    the sampler compare -inf with -inf (NaN) and could stay outside the prior.
    """
    start = np.array(start, dtype=float, copy=True)
    best = np.broadcast_to(np.asarray(best, dtype=float), start.shape)
    lp = np.asarray(log_prob(start), dtype=float)
    bad = ~np.isfinite(lp)
    for _ in range(max_halvings):
        if not bad.any():
            break
        start[bad] = best[bad] + 0.5 * (start[bad] - best[bad])
        lp[bad] = log_prob(start[bad])
        bad = ~np.isfinite(lp)
    start[bad] = best[bad]
    return start


def run_ensemble(
    log_prob: Callable[[np.ndarray], np.ndarray],
    best: np.ndarray,
    lower: np.ndarray,
    upper: np.ndarray,
    *,
    n_walkers: int,
    n_steps: int,
    burn_in: int,
    seed: int,
    covariance: np.ndarray | None = None,
    progress: bool = False,
    modes: np.ndarray | None = None,
    mode_weights: np.ndarray | None = None,
    max_steps: int | None = None,
) -> ChainSummary:
    """Sample a posterior with emcee, starting next to the best fit.

    Parameters
    ----------
    log_prob : callable
        ``log_prob(theta)`` with ``theta`` of shape (m, p) returns the
        log-posterior, shape (m,), ``-inf`` outside the prior.
    best : ndarray, shape (p,)
        Best fit (the walkers start in a small ball around it).
    lower, upper : ndarray, shape (p,)
        Prior bounds of each parameter.
    n_walkers : int
        Number of walkers (at least ``2 p``; even).
    n_steps : int
        Total number of steps, burn-in included.
    burn_in : int
        Steps discarded at the start.
    seed : int
        Seed of the starting ball and of the sampler's moves.
    covariance : ndarray, shape (p, p), optional
        Approximate posterior covariance at the best fit (shapes the
        starting ball).
    progress : bool, optional
        Show emcee's progress bar.
    modes : ndarray, shape (q, p), optional
        Further starting points (other optima of the posterior, e.g. where
        two processes trade off); walkers are shared among ``best`` and
        these in proportion to ``mode_weights``, so that the sampler
        starts in every mode instead of having to find the others.
    mode_weights : ndarray, shape (q + 1,), optional
        Relative weights of ``best`` and ``modes`` (default equal).
    max_steps : int, optional
        When given and the effective sample size after ``n_steps`` is below
        :data:`MIN_ESS`, the production chain is continued (same moves, from
        where it stopped) by the steps that size needs, with tau estimated
        again on the longer chain after every extension, until the size is
        reached or ``max_steps`` in all; ``n_steps`` of the result is the
        length actually run.

    Returns
    -------
    ChainSummary
    """
    lower = np.asarray(lower, dtype=float)
    upper = np.asarray(upper, dtype=float)
    n_par = lower.size
    rng = np.random.default_rng(seed)
    if modes is not None and np.size(modes):
        centres = np.vstack([np.asarray(best, dtype=float)[None, :], np.atleast_2d(modes)])
        weights = (np.ones(centres.shape[0]) if mode_weights is None
                   else np.asarray(mode_weights, dtype=float))
        ball, home = _mode_ball(centres, weights, lower, upper, n_walkers, rng, covariance)
        start = _finite_start(log_prob, ball, home)
    else:
        start = _finite_start(log_prob,
                              _start_ball(best, lower, upper, n_walkers, rng, covariance), best)

    def seeded(sampler):
        # emcee keeps its own legacy RandomState; seed it from our generator
        # so that the same seed always gives the same chain.
        sampler.random_state = np.random.RandomState(
            int(rng.integers(0, 2**31 - 1))
        ).get_state()
        return sampler

    # Burn-in, in two stages. First differential-evolution moves, which adapt
    # to the posterior's shape through the ensemble itself (emcee
    # documentation: "moves"); then the production moves shaped by the first
    # stage's draws. Those reach a ridge's far tail, which differential
    # evolution from a start at the best fit is slow to reach, and the
    # production proposal is shaped again from them.
    hop = modes is not None and bool(np.size(modes))
    burn_moves = [(emcee.moves.DEMove(), 0.8), (_GuardedSnooker(), 0.2)]
    if hop:
        burn_moves = [(emcee.moves.DEMove(), 0.8 - MODE_JUMP_SHARE),
                      (emcee.moves.DEMove(gamma0=1.0), MODE_JUMP_SHARE),
                      (_GuardedSnooker(), 0.2)]
    staged = burn_in >= 2 * MIN_STAGE_STEPS
    first = burn_in // 2 if staged else burn_in
    burn = seeded(emcee.EnsembleSampler(
        n_walkers, n_par, log_prob, vectorize=True, moves=burn_moves,
    ))
    # The starting ball may be very thin along well-determined directions;
    # emcee's check for linearly dependent walkers would then refuse it.
    state = (
        burn.run_mcmc(start, first, progress=progress, skip_initial_state_check=True)
        if first > 0
        else start
    )
    if hop and first > 0:
        state = _reset_stragglers(state, rng)
    # From here on the sampler works in coordinates in which the ridge seen
    # so far is straight (_Straightened; the same log-posterior values), fitted
    # to the first stage's draws and again to the second's, which reach
    # further along the ridge; the chain is mapped back at the end.
    coords = _Straightened(log_prob)
    moves = None
    if first >= 20:
        draws = burn.get_chain(discard=first // 2)
        if staged:
            coords.fit(draws)
        moves = _production_moves(coords.forward(draws), hop)
    if staged and moves is not None:
        second = seeded(emcee.EnsembleSampler(
            n_walkers, n_par, coords.log_prob, vectorize=True, moves=moves
        ))
        state = second.run_mcmc(coords.forward_state(state), burn_in - first,
                                progress=progress, skip_initial_state_check=True)
        draws, state = coords.inverse(second.get_chain()), coords.inverse_state(state)
        coords.fit(draws)
        moves = _production_moves(coords.forward(draws), hop) or moves
    state = coords.forward_state(state)
    # Production: Metropolis steps with a Gaussian proposal shaped by the
    # covariance of the burn-in's last stage (scaled by 2.38^2/p, Gelman,
    # Roberts & Gilks 1996), mixed with differential-evolution and
    # independence steps. The proposal is fixed during production, so the
    # chain is a valid MCMC.
    if moves is None:
        moves = [(emcee.moves.DEMove(), 1.0)]
    sampler = seeded(emcee.EnsembleSampler(
        n_walkers, n_par, coords.log_prob, vectorize=True, moves=moves
    ))
    sampler.run_mcmc(state, n_steps - burn_in, progress=progress, skip_initial_state_check=True)

    if max_steps is not None:
        # Continue (not restart) a chain whose effective sample is too small,
        # re-estimating tau after every extension: on a thin curved ridge the
        # estimate from a short chain is far too low (it grows with the
        # chain), and one extension sized by it stops short.
        while n_steps < max_steps:
            tau0 = _tau(coords.inverse(sampler.get_chain()))
            post_needed = 1.25 * MIN_ESS * float(np.max(tau0)) / n_walkers
            extra = int(np.ceil((post_needed - (n_steps - burn_in)) / 100.0) * 100)
            extra = min(extra, max_steps - n_steps)
            if extra <= 0:
                break
            sampler.run_mcmc(None, extra, progress=progress)
            n_steps += extra
    chain = coords.inverse(sampler.get_chain())  # (steps, walkers, p)
    # A walker that never moved in production (stranded in a small, narrow
    # mode that no move reaches or leaves) carries no information on the
    # posterior's shape and would give it a spike: leave it out.
    moved = np.any(np.ptp(chain, axis=0) > 0, axis=1)
    if 2 <= moved.sum() < chain.shape[1]:
        chain = chain[:, moved]
        log_prob_kept = sampler.get_log_prob()[:, moved]
    else:
        log_prob_kept = sampler.get_log_prob()
    n_walkers = chain.shape[1]
    n_kept = chain.shape[0]
    tau = _tau(chain)
    ess = n_kept * n_walkers / tau
    thin = max(1, int(0.5 * float(np.min(tau))))
    # Every walker starts where the posterior is positive and a move to a
    # point of zero posterior is never accepted, so every kept draw has a
    # finite log-posterior; the check below guards that invariant (a draw
    # outside the prior would reach the derived quantities otherwise).
    finite = np.isfinite(log_prob_kept)
    flat = chain.reshape(-1, n_par)[finite.reshape(-1)]
    thinned = chain[::thin].reshape(-1, n_par)[finite[::thin].reshape(-1)]
    return ChainSummary(
        flat=flat,
        thinned=thinned,
        tau=tau,
        ess=ess,
        acceptance_fraction=float(np.mean(sampler.acceptance_fraction)),
        n_walkers=int(n_walkers),
        n_steps=int(n_steps),
        burn_in=int(burn_in),
        thin=thin,
    )


class _GuardedSnooker(emcee.moves.DESnookerMove):
    """emcee's snooker move (ter Braak & Vrugt 2008) that stays put on a 0/0 direction.

    The snooker direction is the walker's difference to a randomly chosen
    walker of the other sets. When the two coincide (walkers that collapsed
    onto one point at a bound, or that were reset onto the same state) the
    direction is 0/0 and emcee's move proposes NaN coordinates, whose
    log-probability is NaN. Here such a walker proposes its own position
    (accepted, so the chain stays where it is), with the same random draws
    as emcee's move otherwise, so chains without coinciding walkers are
    unchanged.
    """

    def get_proposal(self, s, c, random):
        n_s = len(s)
        n_c = list(map(len, c))
        ndim = s.shape[1]
        q = np.empty_like(s)
        metropolis = np.empty(n_s, dtype=np.float64)
        for i in range(n_s):
            w = np.array([c[j][random.randint(n_c[j])] for j in range(3)])
            random.shuffle(w)
            z, z1, z2 = w
            delta = s[i] - z
            norm = np.linalg.norm(delta)
            if not norm > 0.0:
                q[i] = s[i]
                metropolis[i] = 0.0
                continue
            u = delta / np.sqrt(norm)
            q[i] = s[i] + u * self.gammas * (np.dot(u, z1) - np.dot(u, z2))
            with np.errstate(divide="ignore"):
                metropolis[i] = np.log(np.linalg.norm(q[i] - z)) - np.log(norm)
        return q, 0.5 * (ndim - 1.0) * metropolis


class _QuadraticShear:
    """Triangular map with a constant Jacobian that straightens a curved ridge.

    Built from burn-in draws ``u`` (k, p): the draws are standardized, put in
    an order in which each parameter is best predicted by the ones before it,
    and every parameter after the first is shifted by a quadratic (linear
    and squared terms and products) in those before it, fitted by least
    squares to the draws: ``w_k = z_k - q_k(z_1 .. z_{k-1})``. The order is
    found backwards: the last parameter is the one a quadratic in all the
    others predicts best (largest R^2), and so on. The map is a scaling
    followed by a lower-triangular map with unit diagonal, so its Jacobian
    is constant and cancels in every Metropolis-Hastings ratio: sampling
    ``w`` with the target ``log_prob(inverse(w))`` is sampling ``u``
    exactly, whatever the fitted coefficients. Where parameters trade off
    along a bent ridge (a thin direction whose position depends on the long
    ones through a curve) the ridge is nearly straight and uncorrelated in
    ``w``, which the ensemble's linear moves and the independence proposal
    follow. A transport map of the lowest useful order (triangular maps
    fitted to draws: Parno, M. D. & Marzouk, Y. M. 2018, Transport map
    accelerated Markov chain Monte Carlo, SIAM/ASA Journal on Uncertainty
    Quantification 6, 645-682; zoning.references key parno_marzouk_2018, from
    memory, not checked).
    """

    def __init__(self, u: np.ndarray):
        u = np.asarray(u, dtype=float)
        self.mean = u.mean(axis=0)
        sd = u.std(axis=0)
        self.sd = np.where(sd > 0, sd, 1.0)
        z = (u - self.mean) / self.sd
        remaining = list(range(u.shape[1]))
        tail = []
        while len(remaining) > 1:
            scores = []
            for v in remaining:
                others = [o for o in remaining if o != v]
                scores.append(-self._residual_var(z[:, others], z[:, v]))
            v = remaining[int(np.argmax(scores))]
            tail.insert(0, v)
            remaining.remove(v)
        self.order = np.array(remaining + tail)
        zo = z[:, self.order]
        self.coef = [None]
        for k in range(1, u.shape[1]):
            feats = self._features(zo[:, :k])
            coef, *_ = np.linalg.lstsq(feats, zo[:, k], rcond=None)
            self.coef.append(coef if np.all(np.isfinite(coef)) else np.zeros(feats.shape[1]))

    @classmethod
    def _residual_var(cls, x, y) -> float:
        feats = cls._features(x)
        coef, *_ = np.linalg.lstsq(feats, y, rcond=None)
        return float(np.var(y - feats @ coef)) if np.all(np.isfinite(coef)) else np.inf

    @staticmethod
    def _features(y: np.ndarray) -> np.ndarray:
        k = y.shape[1]
        quad = [y[:, a] * y[:, b] for a in range(k) for b in range(a, k)]
        return np.column_stack([np.ones(y.shape[0]), y, *quad])

    @staticmethod
    def n_features(p: int) -> int:
        """Coefficients of the last component's quadratic (p parameters)."""
        k = p - 1
        return 1 + k + k * (k + 1) // 2

    def forward(self, u: np.ndarray) -> np.ndarray:
        """Parameters u (m, p) -> straightened coordinates w (m, p)."""
        z = ((np.atleast_2d(u) - self.mean) / self.sd)[:, self.order]
        w = z.copy()
        for k in range(1, z.shape[1]):
            w[:, k] = z[:, k] - self._features(z[:, :k]) @ self.coef[k]
        return w

    def inverse(self, w: np.ndarray) -> np.ndarray:
        """Straightened coordinates w (m, p) -> parameters u (m, p)."""
        w = np.atleast_2d(w)
        z = w.copy()
        for k in range(1, w.shape[1]):
            z[:, k] = w[:, k] + self._features(z[:, :k]) @ self.coef[k]
        u = np.empty_like(z)
        u[:, self.order] = z
        return u * self.sd + self.mean


class _Straightened:
    """Sampler coordinates: the parameters, or a fitted :class:`_QuadraticShear` of them.

    Chains and states are converted with :meth:`forward`/:meth:`inverse`
    (any leading shape, parameters last); :meth:`log_prob` is the target in
    the current coordinates, with the same values as ``log_prob`` of the
    parameters (the map's Jacobian is constant).
    """

    def __init__(self, log_prob):
        self._log_prob = log_prob
        self.shear = None

    def fit(self, draws: np.ndarray) -> None:
        """Fit the map to draws of the parameters (any leading shape), when there are enough."""
        flat = draws.reshape(-1, draws.shape[-1])
        p = flat.shape[1]
        if p >= 2 and flat.shape[0] >= SHEAR_DRAWS_PER_COEF * _QuadraticShear.n_features(p):
            shear = _QuadraticShear(flat)
            w = shear.forward(flat)
            # a map fitted to degenerate draws (a walker set that never
            # moved) is not used
            if np.all(np.isfinite(w)) and np.allclose(shear.inverse(w), flat, rtol=1e-8,
                                                      atol=1e-10 * np.abs(flat).max()):
                self.shear = shear

    def forward(self, u: np.ndarray) -> np.ndarray:
        if self.shear is None:
            return u
        return self.shear.forward(u.reshape(-1, u.shape[-1])).reshape(u.shape)

    def inverse(self, w: np.ndarray) -> np.ndarray:
        if self.shear is None:
            return w
        return self.shear.inverse(w.reshape(-1, w.shape[-1])).reshape(w.shape)

    def forward_state(self, state):
        coords = np.asarray(state.coords if hasattr(state, "coords") else state, dtype=float)
        lp = getattr(state, "log_prob", None)
        rs = getattr(state, "random_state", None)
        return emcee.State(self.forward(coords), log_prob=lp, random_state=rs)

    def inverse_state(self, state):
        return emcee.State(self.inverse(np.asarray(state.coords, dtype=float)),
                           log_prob=state.log_prob, random_state=state.random_state)

    def log_prob(self, w: np.ndarray) -> np.ndarray:
        return self._log_prob(self.inverse(np.atleast_2d(w)))


def _production_moves(chain: np.ndarray, hop: bool):
    """Production moves shaped by burn-in draws ``chain`` (steps, walkers, p).

    Returns None when the draws' covariance is not positive definite.
    """
    n_par = chain.shape[-1]
    tail = chain.reshape(-1, n_par)
    cov = np.atleast_2d(np.cov(tail, rowvar=False))
    if not (np.all(np.isfinite(cov)) and np.all(np.linalg.eigvalsh(cov) > 0)):
        return None
    try:
        independence = _independence_move(tail.mean(axis=0), cov)
    except np.linalg.LinAlgError:
        independence = emcee.moves.GaussianMove(cov * PROPOSAL_SCALE**2 / n_par)
    moves = [
        (emcee.moves.GaussianMove(cov * PROPOSAL_SCALE**2 / n_par), GAUSSIAN_SHARE),
        (emcee.moves.DEMove(), DE_SHARE),
        (independence, 1.0 - GAUSSIAN_SHARE - DE_SHARE),
    ]
    if hop:
        moves.append((emcee.moves.DEMove(gamma0=1.0), MODE_JUMP_SHARE))
    return moves


def _tau(chain: np.ndarray) -> np.ndarray:
    """Integrated autocorrelation time per parameter of a (steps, walkers, p) chain [steps].

    A parameter whose walkers never moved has no finite tau: it counts as
    not converged (tau = chain length, so the ESS is tiny and a warning
    follows).
    """
    with np.errstate(invalid="ignore", divide="ignore"):
        # a walker that never moved has a zero autocorrelation at lag 0
        tau = emcee.autocorr.integrated_time(chain, c=5, tol=0, quiet=True)
    tau = np.asarray(tau, dtype=float)
    return np.maximum(np.where(np.isfinite(tau), tau, float(chain.shape[0])), 1.0)


#: At the end of the burn-in of a sampler started in several modes, walkers
#: whose log-posterior lies more than this below the ensemble's median are
#: moved onto other walkers (the modes they started in carry no mass; our
#: choice, about a 1e-4 density ratio).
STRAGGLER_LOG_PROB = 10.0


def _reset_stragglers(state, rng):
    """Move walkers far below the ensemble's median log-posterior onto good walkers."""
    coords = np.array(state.coords, dtype=float, copy=True)
    lp = np.asarray(state.log_prob, dtype=float)
    good = np.isfinite(lp) & (lp >= np.median(lp[np.isfinite(lp)]) - STRAGGLER_LOG_PROB)
    bad = ~good
    if not bad.any() or good.sum() < 2:
        return state
    donors = rng.choice(np.flatnonzero(good), size=int(bad.sum()))
    coords[bad] = coords[donors]
    new_lp = lp.copy()
    new_lp[bad] = lp[donors]
    return emcee.State(coords, log_prob=new_lp, random_state=state.random_state)


def _independence_move(mean, cov):
    """Metropolis-Hastings independence move with a Student-t proposal.

    Proposals are drawn from a multivariate t distribution (``T_DOF``
    degrees of freedom, covariance ``cov`` widened by ``T_WIDEN``) centred on
    ``mean``, independently of the current walker; the Hastings ratio
    q(x) / q(x') keeps the posterior invariant. Near-Gaussian posteriors are
    then sampled with autocorrelation times of a few steps.
    """
    from scipy import stats

    # Work on standardized variables (the parameters differ in scale by
    # orders of magnitude); the constant Jacobian cancels in the ratio.
    sd = np.sqrt(np.diag(cov))
    corr = cov / np.outer(sd, sd)
    dist = stats.multivariate_t(
        loc=np.zeros(mean.size), shape=corr * T_WIDEN**2, df=T_DOF
    )

    def proposal(x0, random):
        z1 = dist.rvs(size=x0.shape[0], random_state=random).reshape(x0.shape)
        z0 = (x0 - mean) / sd
        return mean + sd * z1, dist.logpdf(z0) - dist.logpdf(z1)

    return emcee.moves.MHMove(proposal)


def _piled_at(x, edge, width, densest):
    """Tell whether the posterior density next to ``edge`` is near its maximum."""
    near = np.mean(np.abs(x - edge) < width) / width
    return near >= 0.5 * densest


def credible_band(
    x: np.ndarray, lower: float, upper: float
) -> tuple[float, float, float, str]:
    """Posterior median and 95% band, one-sided where the posterior sits on a bound.

    The band is the central 2.5-97.5 percentile interval. When the
    posterior density next to a prior bound is at least half its maximum
    (the data push the quantity against its physical limit, e.g. retention
    at 0), that bound becomes the band end and the other end is the 95th
    (or 5th) percentile: a one-sided 95% limit. A central band would
    otherwise exclude the bound itself, where the truth may lie.

    Parameters
    ----------
    x : ndarray, shape (k,)
        Posterior draws.
    lower, upper : float
        Prior bounds (may be infinite).

    Returns
    -------
    median, lo95, hi95 : float
    kind : {"central", "upper_limit", "lower_limit", "bounds"}
        ``"upper_limit"`` when the band starts at ``lower`` (only an upper
        limit is supported by the data), ``"lower_limit"`` for the reverse,
        ``"bounds"`` when the posterior is piled at both bounds.
    """
    x = np.asarray(x, dtype=float)
    x = x[np.isfinite(x)]
    if x.size == 0:
        nan = float("nan")
        return nan, nan, nan, "central"
    lo, med, hi = np.percentile(x, [2.5, 50.0, 97.5])
    span = hi - lo
    if not span > 0:
        return float(med), float(lo), float(hi), "central"
    width = span / 10.0
    counts, _ = np.histogram(x, bins=np.arange(lo, hi + width, width))
    densest = counts.max() / (x.size * width)
    at_lower = np.isfinite(lower) and _piled_at(x, lower, width, densest)
    at_upper = np.isfinite(upper) and _piled_at(x, upper, width, densest)
    if at_lower and at_upper:
        return float(med), float(lower), float(upper), "bounds"
    if at_lower:
        return float(med), float(lower), float(np.percentile(x, 95.0)), "upper_limit"
    if at_upper:
        return float(med), float(np.percentile(x, 5.0)), float(upper), "lower_limit"
    return float(med), float(lo), float(hi), "central"


# --- stage 4 of a fit: sample the chosen model ------------------------------------


@dataclass(frozen=True, eq=False)
class Posterior:
    """Posterior draws of one model, in its free parameters.

    Parameters
    ----------
    chain : ChainSummary
        The sampler output (sampler coordinates) and diagnostics.
    flat : ndarray, shape (k, p)
        Every post-burn-in draw, in the problem's free parameters.
    samples : ndarray, shape (k', p)
        Thinned draws, in the problem's free parameters.
    short : tuple of str
        Parameters whose chain is too short (ESS or length in tau).
    message : str
        Plain-language remedy when ``short`` is not empty, else "".
    extended_from : int
        The default step count when the chain was continued past it because
        it gave too few effective draws (:data:`MAX_AUTO_STEPS`), else 0.
    """

    chain: ChainSummary
    flat: np.ndarray
    samples: np.ndarray
    short: tuple[str, ...] = ()
    message: str = ""
    extended_from: int = 0


def sampler_settings(mineral: str, n_walkers: int, n_steps: int | None) -> tuple[int, int]:
    """Check and complete the sampler settings; returns (n_walkers, n_steps)."""
    n_walkers = int(n_walkers)
    n_steps = int(DEFAULT_N_STEPS[mineral] if n_steps is None else n_steps)
    if n_steps < 100:
        raise ZoningError(
            f"n_steps must be at least 100; got {n_steps}. Use e.g. --steps 600."
        )
    return n_walkers, n_steps


def laplace_covariance(prob: FitProblem, u: np.ndarray) -> np.ndarray | None:
    """Covariance (J^T J)^-1 at the best fit, in sampler coordinates ``u``.

    Forward and backward differences come from one batched call; each
    column uses whichever is finite (the best fit may sit on a bound or next
    to the largest reachable F). Returns None when no usable approximation
    exists; the sampler then starts from a small sphere instead.
    """
    lo, hi = prob.sampler_bounds()
    h = 1e-6 * (hi - lo)
    p = u.size
    batch = prob.from_sampler(np.vstack([u, u + np.diag(h), u - np.diag(h)]))
    inside = np.all((batch >= prob.lower) & (batch <= prob.upper), axis=1)
    z = np.full((batch.shape[0], prob.n_data + 1), np.nan)
    if inside[0]:
        z[inside] = prob.residuals(prob.params(batch[inside]), int(inside.sum()))
    forward = (z[1 : p + 1] - z[0]) / h[:, None]
    backward = (z[0] - z[p + 1 :]) / h[:, None]
    ok_f = np.all(np.isfinite(forward), axis=1)
    jac = np.where(ok_f[:, None], forward, backward)
    if not np.all(np.isfinite(jac)):
        return None
    # Invert the Fisher matrix in range-normalised coordinates. A direction
    # the data do not inform (e.g. retention when F at the rim is ~0) has a
    # near-zero eigenvalue: give it a variance of the whole prior range, never
    # the zero variance a pseudo-inverse would give (the walkers would then
    # start, and stay, on one value and the band would look precise).
    span = hi - lo
    scaled = jac * span[:, None]
    try:
        eigval, eigvec = np.linalg.eigh(scaled @ scaled.T)
    except np.linalg.LinAlgError:
        return None
    variance = 1.0 / np.maximum(eigval, 1.0)
    return (eigvec * variance) @ eigvec.T * np.outer(span, span)


def sample_posterior(
    problem: FitProblem,
    theta_best: np.ndarray,
    *,
    n_walkers: int,
    n_steps: int,
    seed: int,
    progress: bool = False,
    modes: np.ndarray | None = None,
    mode_weights: np.ndarray | None = None,
    max_steps: int | None = None,
) -> Posterior:
    """Sample the posterior of ``problem`` starting at its best fit (stage 4).

    Parameters
    ----------
    problem : FitProblem
        The chosen model (its free parameters are sampled).
    theta_best : ndarray, shape (p,)
        Its best fit.
    n_walkers, n_steps : int
        Walkers (raised to at least 2 p + 2, made even) and steps, burn-in
        (:data:`BURN_FRACTION`) included.
    seed : int
        Seed of the sampler.
    progress : bool, optional
        Show the sampler's progress bar.
    modes : ndarray, shape (q, p), optional
        Other optima to start walkers in (problem's free parameters).
    mode_weights : ndarray, shape (q + 1,), optional
        Relative weights of ``theta_best`` and ``modes``.
    max_steps : int, optional
        Continue a chain whose effective sample size is too small, up to
        this many steps in all (see :func:`run_ensemble`); the result's
        ``extended_from`` then holds ``n_steps``.

    Returns
    -------
    Posterior

    Raises
    ------
    zoning.exceptions.FitError
        When the sampler cannot start (e.g. the best fit at the edge of what
        the melt can reach).
    """
    k_free = len(problem.free)
    n_walkers = max(int(n_walkers), 2 * k_free + 2)
    n_walkers += n_walkers % 2
    burn_in = int(n_steps * BURN_FRACTION)
    u_best = problem.to_sampler(theta_best)[0]
    u_lower, u_upper = problem.sampler_bounds()
    try:
        chain = run_ensemble(
            problem.log_prob_sampler,
            u_best,
            u_lower,
            u_upper,
            n_walkers=n_walkers,
            n_steps=n_steps,
            burn_in=burn_in,
            seed=seed,
            covariance=laplace_covariance(problem, u_best),
            progress=progress,
            modes=None if modes is None or not np.size(modes) else problem.to_sampler(modes),
            mode_weights=mode_weights,
            max_steps=max_steps,
        )
    except (ValueError, np.linalg.LinAlgError) as exc:
        raise FitError(
            f"posterior sampling of traverse {problem.traverse.name!r} failed ({exc}); the "
            "best fit may sit at the edge of what the melt can reach. Check --melt and "
            "--range, or try another --seed or more --walkers."
        ) from exc
    samples = problem.from_sampler(chain.thinned)
    flat = problem.from_sampler(chain.flat)
    extended_from = n_steps if chain.n_steps > n_steps else 0
    n_steps = chain.n_steps
    short = tuple(
        n
        for n, e, t in zip(problem.free, chain.ess, chain.tau, strict=True)
        if e < MIN_ESS or (n_steps - burn_in) < MIN_TAU_MULTIPLE * t
    )
    message = ""
    if short:
        post_needed = max(
            MIN_TAU_MULTIPLE * float(np.max(chain.tau)),
            MIN_ESS * float(np.max(chain.tau)) / n_walkers,
        )
        need = int(np.ceil(1.25 * post_needed / (1.0 - BURN_FRACTION) / 100.0) * 100)
        message = (
            f"posterior chain too short for {', '.join(short)} (effective sample size "
            f"{float(np.min(chain.ess)):.0f}, autocorrelation time "
            f"{float(np.max(chain.tau)):.0f} steps); run longer: --steps {need}."
        )
    return Posterior(chain=chain, flat=flat, samples=samples, short=short, message=message,
                     extended_from=extended_from)
