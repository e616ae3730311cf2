"""Weighted k-means: k-means++ seeding, Lloyd iterations, restarts, locked centres.

The clustering stage.  Points are colours in a perceptual space and weights
are pixel counts, so a weighted point is exactly equivalent to that many
repeated points.  The assignment step is exact nearest-centre search,
compiled with numba; everything else is plain numpy.
"""

from __future__ import annotations

import math
import warnings
from dataclasses import dataclass, field

from typing import TYPE_CHECKING, Any, cast

import numpy as np
from numpy.typing import ArrayLike

from quantize.kernels.nearest import LloydAssigner, assign_nearest, centre_sums

if TYPE_CHECKING:
    from quantize.core.choices import SeedingName

__all__ = ["kmeans", "KMeansResult", "INITS", "check_init", "PaletteSizeWarning"]


class PaletteSizeWarning(UserWarning):
    """The palette came out smaller than asked (too few distinct colours)."""


@dataclass(frozen=True, eq=False)
class KMeansResult:
    """Outcome of :func:`kmeans`.

    Attributes
    ----------
    centres : ndarray of shape (k, d)
        Cluster centres; locked centres first, unchanged.
    labels : ndarray of shape (n,)
        Index of the nearest centre of every point.
    inertia : float
        Weighted sum of squared distances of the points to their centres.
    n_iter : int
        Lloyd iterations of the kept restart.
    history : tuple of float
        Inertia after each assignment step of the kept restart
        (non-increasing), then the polished inertia if a jump move lowered
        it.
    k_requested : int
        The ``k`` asked for; ``len(centres)`` is smaller when there were too
        few distinct points.
    runs : tuple of (ndarray, float)
        The converged centres and inertia of every restart, in the order
        they ran (the kept one included).  Later steps may start from
        restarts that are not the lowest in inertia.
    """

    centres: np.ndarray
    labels: np.ndarray
    inertia: float
    n_iter: int
    history: tuple = field(default=())
    k_requested: int = 0
    runs: tuple = ()


def _weighted_pick(rng: np.random.Generator, pot: np.ndarray, size: int) -> np.ndarray:
    """Indices drawn with probability proportional to ``pot`` (with replacement)."""
    cum = np.cumsum(pot)
    idx = np.searchsorted(cum, rng.random(size) * cum[-1], side="right")
    return np.minimum(idx, pot.size - 1)


# Weighted sums are written (w * x).sum(), not w @ x: a 1-D matmul goes to
# multi-threaded BLAS, whose spinning threads slow a shared machine badly.
def _sq_dist_to(points: np.ndarray, centre: np.ndarray) -> np.ndarray:
    diff = points - centre
    return np.einsum("ij,ij->i", diff, diff)


def _first_centres(points, weights, fixed, rng):
    """The locked centres, or one weighted random point; and each point's squared distance to them."""
    centres = [c for c in fixed]
    if centres:
        _, d2 = assign_nearest(points, np.asarray(centres))
    else:
        first = _weighted_pick(rng, weights, 1)[0]
        centres.append(points[first])
        d2 = _sq_dist_to(points, points[first])
    return centres, d2


def _init_kmeanspp(points, weights, k, fixed, rng):
    """Greedy weighted k-means++ (D² sampling, several candidates per step)."""
    n_trials = 2 + int(np.log(k))
    centres, d2 = _first_centres(points, weights, fixed, rng)
    while len(centres) < k:
        pot = weights * d2
        if pot.sum() <= 0:
            break
        cands = _weighted_pick(rng, pot, n_trials)
        # One candidate at a time: temporaries stay the size of the data.
        best_cost, best_d2, best_c = np.inf, None, None
        for c in cands:
            nd2 = np.minimum(d2, _sq_dist_to(points, points[c]))
            cost = float((weights * nd2).sum())
            if cost < best_cost:
                best_cost, best_d2, best_c = cost, nd2, c
        centres.append(points[best_c])
        d2 = best_d2
    return np.array(centres, dtype=np.float64)


def _count_distinct_upto(points, fixed, need):
    """How many distinct points differ from ``fixed``, counting no further than ``need``.

    Farthest-point steps find one new distinct point each while any point is
    still away from every centre: O(n * need), no sort of the data.
    """
    if need <= 0:
        return 0
    if len(fixed):
        _, d2 = assign_nearest(points, fixed)
        found = 0
    else:
        d2 = _sq_dist_to(points, points[0])
        found = 1
    while found < need:
        far = int(np.argmax(d2))
        if d2[far] <= 0:
            break
        found += 1
        d2 = np.minimum(d2, _sq_dist_to(points, points[far]))
    return found


def _init_random(points, weights, k, fixed, rng):
    """k - len(fixed) distinct points drawn at random, weighted by count."""
    uniq, inv = np.unique(points, axis=0, return_inverse=True)
    w = np.bincount(inv.ravel(), weights=weights, minlength=uniq.shape[0])
    if len(fixed):
        _, d2 = assign_nearest(uniq, fixed)
        w = np.where(d2 > 0, w, 0.0)
    free = min(k - len(fixed), int((w > 0).sum()))
    pick = rng.choice(uniq.shape[0], size=free, replace=False, p=w / w.sum())
    return np.vstack([fixed.reshape(-1, points.shape[1]), uniq[pick]])


def _init_farthest(points, weights, k, fixed, rng):
    """Farthest-point traversal from a weighted random start (or the locked centres)."""
    centres, d2 = _first_centres(points, weights, fixed, rng)
    while len(centres) < k:
        far = int(np.argmax(d2))
        if d2[far] <= 0:
            break
        centres.append(points[far])
        d2 = np.minimum(d2, _sq_dist_to(points, points[far]))
    return np.array(centres, dtype=np.float64)


#: Seeding methods by name.
INITS = {
    "k-means++": _init_kmeanspp,
    "random": _init_random,
    "farthest": _init_farthest,
}


def check_init(name: str) -> str:
    """Return ``name`` if it is a known seeding method, else raise ValueError."""
    if name not in INITS:
        raise ValueError(f"unknown seeding {name!r}; choose one of: {', '.join(INITS)}")
    return name


def _lloyd(points, weights, centres, n_fixed, max_iter, tol):
    """Lloyd iterations from ``centres``; empty free clusters are re-seeded."""
    k, d = centres.shape
    centres = centres.copy()
    history = []
    nearest = LloydAssigner(points, weights)
    labels, d2 = nearest.assign(centres)
    history.append(float((weights * d2).sum()))
    n_iter = 0
    for n_iter in range(1, max_iter + 1):
        wsum, new = nearest.sums(labels, k)
        filled = wsum > 0
        new[filled] /= wsum[filled, None]
        new[~filled] = centres[~filled]
        new[:n_fixed] = centres[:n_fixed]
        empty = np.flatnonzero(~filled[n_fixed:]) + n_fixed
        if empty.size:
            # Move each empty centre onto the point that costs most now: the
            # cost can only fall, and no centre is dropped.
            pot = weights * d2
            for e in empty:
                far = int(np.argmax(pot))
                if pot[far] <= 0:
                    break
                new[e] = points[far]
                pot[far] = 0.0
        shift = float(((new - centres) ** 2).sum())
        centres = new
        new_labels, d2 = nearest.assign(centres)
        history.append(float((weights * d2).sum()))
        unchanged = np.array_equal(new_labels, labels)
        labels = new_labels
        if unchanged or shift <= tol:
            break
    return centres, labels, history, n_iter


#: Jump moves that may fail in a row before :func:`_jump_polish` stops.  With
#: every restart polished, 16 brought k-means to scikit-learn's inertia or
#: lower (same data, weights and number of restarts) for every k from 2 to
#: 32 on a cloud of blobs and uniform noise and on a photo's CIELAB colours
#: (tests/test_kmeans.py); at 8 it still missed one k of 62.  Chosen by
#: that measurement.
JUMP_PATIENCE = 16


def _removal_costs(points, weights, centres, labels, d2, n_fixed):
    """What the inertia would rise by if each centre alone were removed; locked ones cost infinity."""
    k = len(centres)
    cost = np.full(k, np.inf)
    for j in range(n_fixed, k):
        sel = np.flatnonzero(labels == j)
        if not sel.size:
            cost[j] = 0.0
            continue
        _, d2o = assign_nearest(points[sel], np.delete(centres, j, axis=0))
        cost[j] = float((weights[sel] * (d2o - d2[sel])).sum())
    return cost


def _jump_polish(points, weights, centres, n_fixed, max_iter, tol, rng):
    """Relocate one centre at a time to escape the local minimum Lloyd stopped in.

    A jump moves a free centre onto a point drawn by D² sampling, runs
    Lloyd from there, and keeps the result only if its inertia is lower.
    The centres are tried in the order of what removing each alone would
    cost, cheapest first; :data:`JUMP_PATIENCE` failures in a row end the
    search.  This is the jump neighbourhood of Hansen & Mladenović's J-means
    (2001), with the removed centre chosen by its cost and the new place
    drawn as k-means++ does.

    Returns the centres, labels, inertia and whether any jump was kept.
    """
    labels, d2 = assign_nearest(points, centres)
    best = float((weights * d2).sum())
    free = len(centres) - n_fixed
    if free < 1 or len(centres) == 1:  # one centre: its mean is the optimum already
        return centres, labels, best, False
    order = np.argsort(_removal_costs(points, weights, centres, labels, d2, n_fixed), kind="stable")
    fails, improved = 0, False
    while fails < JUMP_PATIENCE:
        pot = weights * d2
        if pot.sum() <= 0:
            break
        trial = centres.copy()
        trial[order[fails % free]] = points[_weighted_pick(rng, pot, 1)[0]]
        c, lab, hist, _ = _lloyd(points, weights, trial, n_fixed, max_iter, tol)
        if hist[-1] < best * (1.0 - 1e-12):
            centres, labels, best, improved, fails = c, lab, hist[-1], True, 0
            d2 = assign_nearest(points, centres)[1]
            order = np.argsort(_removal_costs(points, weights, centres, labels, d2, n_fixed), kind="stable")
        else:
            fails += 1
    return centres, labels, best, improved


def _hartigan_gains(points, weights, means, wsum, labels, n_fixed):
    """Each point's best inertia drop from moving it alone to another cluster, and that cluster.

    Moving weight ``w`` at ``x`` from free cluster ``a`` to free cluster
    ``b`` changes the inertia by ``w Wb/(Wb+w) |x-mb|² - w Wa/(Wa-w) |x-ma|²``
    (Hartigan & Wong 1979, weighted); a locked cluster's mean does not move,
    so its factor is 1.  Rows go in blocks so the distance table stays small.
    """
    n, k = len(points), len(means)
    locked = np.arange(k) < n_fixed
    gain, dest = np.zeros(n), np.zeros(n, dtype=np.intp)
    for lo in range(0, n, 1 << 15):
        sl = slice(lo, min(n, lo + (1 << 15)))
        x, wi, a = points[sl], weights[sl], labels[sl]
        d2 = np.einsum("ijk,ijk->ij", x[:, None, :] - means[None], x[:, None, :] - means[None])
        rows = np.arange(len(a))
        own, wa = d2[rows, a], wsum[a]
        # A point alone in its free cluster stays: moving it would empty the cluster.
        left = np.where(locked[a], np.inf, wa - wi)
        rem = np.where(left > 1e-12 * wi, wi * np.where(locked[a], 1.0, wa / np.maximum(left, 1e-300)) * own, 0.0)
        factor = np.where(locked[None], 1.0, wsum[None] / (wsum[None] + wi[:, None]))
        add = wi[:, None] * factor * d2
        add[rows, a] = np.inf
        dest[sl] = np.argmin(add, axis=1)
        gain[sl] = rem - add[rows, dest[sl]]
    return gain, dest


def _hartigan_polish(points, weights, centres, labels, n_fixed, max_pass=50):
    """Move single points between clusters while that lowers the inertia (Hartigan & Wong 1979).

    Lloyd's fixed points include partitions where moving one point still
    pays, because moving it also shifts both means; this finds those moves.
    Candidates are screened in blocks, then moved one by one with their gain
    recomputed against the current means.  Returns the means.
    """
    k = len(centres)
    wsum, sums = centre_sums(points, weights, labels, k)
    means = centres.copy()
    filled = wsum > 0
    means[filled] = sums[filled] / wsum[filled, None]
    means[:n_fixed] = centres[:n_fixed]
    labels = labels.copy()
    locked = np.arange(k) < n_fixed
    for _ in range(max_pass):
        gain, _ = _hartigan_gains(points, weights, means, wsum, labels, n_fixed)
        cand = np.flatnonzero(gain > 1e-12 * np.abs(gain).max(initial=0.0))
        moved = 0
        for i in cand[np.argsort(-gain[cand], kind="stable")]:
            g, b = _hartigan_gains(points[i:i + 1], weights[i:i + 1], means, wsum, labels[i:i + 1], n_fixed)
            if g[0] <= 0:
                continue
            a, b, x, wi = labels[i], b[0], points[i], weights[i]
            if not locked[a]:
                means[a] = (wsum[a] * means[a] - wi * x) / (wsum[a] - wi)
            if not locked[b]:
                means[b] = (wsum[b] * means[b] + wi * x) / (wsum[b] + wi)
            wsum[a] -= wi
            wsum[b] += wi
            labels[i] = b
            moved += 1
        if not moved:
            break
    return means


def _polish(points, weights, centres, n_fixed, max_iter, tol, rng):
    """Jump moves, then Hartigan's single-point moves, then Lloyd: centres, labels, inertia."""
    centres, labels, cost, _ = _jump_polish(points, weights, centres, n_fixed, max_iter, tol, rng)
    means = _hartigan_polish(points, weights, centres, labels, n_fixed)
    c, lab, hist, _ = _lloyd(points, weights, means, n_fixed, max_iter, tol)
    if hist[-1] < cost:
        return c, lab, hist[-1]
    return centres, labels, cost


def tolerance_scale(points: np.ndarray, weights: np.ndarray) -> float:
    """Weighted mean per-coordinate variance: the scale of the stopping tolerance."""
    mu = (weights[:, None] * points).sum(axis=0) / weights.sum()
    mean_var = float((weights * ((points - mu) ** 2).sum(axis=1)).sum()) / weights.sum() / points.shape[1]
    return max(mean_var, 1e-12)


def lloyd_from(points: np.ndarray, weights: np.ndarray, centres: np.ndarray, *, n_fixed: int = 0,
               max_iter: int = 300, abs_tol: float = 0.0) -> KMeansResult:
    """Lloyd iterations from ``centres`` on clean data, for the engine's inner loops.

    :func:`kmeans` without the checks: ``points`` (n, d) and ``weights``
    (n,) contiguous float64, positive weights, the first ``n_fixed`` centres
    locked.  ``abs_tol`` is the absolute squared-shift tolerance, e.g.
    ``1e-4 * tolerance_scale(points, weights)``.  The fitting and sweep
    stages validate their sample once and call this per palette size.

    Examples
    --------
    >>> import numpy as np
    >>> pts = np.array([[0.0, 0, 0], [0, 0, 2], [10, 0, 0], [10, 0, 2]])
    >>> res = lloyd_from(pts, np.ones(4), np.array([[1.0, 0, 0], [9, 0, 0]]))
    >>> res.centres.tolist(), float(res.inertia)
    ([[0.0, 0.0, 1.0], [10.0, 0.0, 1.0]], 4.0)
    """
    c, labels, history, n_iter = _lloyd(points, weights, np.array(centres, dtype=np.float64), n_fixed,
                                        max_iter, abs_tol)
    return KMeansResult(centres=c, labels=labels, inertia=history[-1], n_iter=n_iter,
                        history=tuple(history), k_requested=len(c))


#: Largest coordinate magnitude: squared distances of larger values overflow float64.
_MAX_COORD = 1e150


def _whole(value, name: str, low: int) -> int:
    """``value`` as an int of at least ``low``; a float, bool or string is refused, not truncated."""
    if isinstance(value, bool) or not isinstance(value, (int, np.integer)):
        raise ValueError(f"{name} must be a whole number, got {value!r}")
    if value < low:
        raise ValueError(f"{name} must be at least {low}, got {value}")
    return int(value)


def kmeans(
    points: ArrayLike,
    k: int,
    *,
    weights: ArrayLike | None = None,
    restarts: int = 8,
    seed: int | np.random.Generator | None = 0,
    fixed: ArrayLike | None = None,
    init: SeedingName = "k-means++",
    init_centres: ArrayLike | None = None,
    max_iter: int = 300,
    tol: float = 1e-4,
    polish: bool = True,
) -> KMeansResult:
    """Weighted k-means clustering with k-means++ seeding and restarts.

    Each restart seeds ``k`` centres, then alternates the assignment step
    (every point to its nearest centre, exactly) and the update step (every
    free centre to the weighted mean of its points) until no label changes
    or the centres move less than ``tol``.  The restart of lowest inertia is
    kept.  A free centre that loses all its points is moved onto the point
    that currently costs most, so the result always has ``k`` centres.
    With ``polish``, the kept centres then go through jump moves: one centre
    at a time is moved elsewhere and Lloyd rerun, kept only if the inertia
    falls.

    Parameters
    ----------
    points : array_like of shape (n, d)
        The data, e.g. distinct colours in CIELAB.
    k : int
        Number of centres, locked ones included.  Capped at the number of
        distinct points (with a :class:`PaletteSizeWarning`).
    weights : array_like of shape (n,), optional
        Non-negative weight of each point (pixel counts); default all 1.
        A point of weight w is equivalent to w repeated points.
    restarts : int, default=8
        Number of independent seedings; the lowest-inertia result is kept.
    seed : int, numpy Generator or None, default=0
        Source of randomness, threaded through every restart.  The same
        seed gives a bit-identical result.
    fixed : array_like of shape (m, d), optional
        Locked centres: they are the first ``m`` centres of the result and
        never move; the other ``k - m`` are fitted around them.
    init : {"k-means++", "random", "farthest"}, default="k-means++"
        Seeding: greedy weighted D² sampling (k-means++); ``k`` distinct
        points drawn at random with probability proportional to weight; or
        farthest-point traversal from a weighted random start.
    init_centres : array_like of shape (k, d), optional
        Start from these centres instead of seeding (one run, no restarts);
        the first ``m`` must equal ``fixed``.
    max_iter : int, default=300
        Lloyd iterations per restart at most.
    tol : float, default=1e-4
        Stop when the summed squared centre shift falls below ``tol`` times
        the weighted mean variance of the data.
    polish : bool, default=True
        Improve every restart by jump moves and single-point moves (see
        Notes) and keep the best.  It costs two to four times the restarts'
        own time and never raises the inertia.  With
        it, the inertia reached is at most scikit-learn's ``KMeans`` with as
        many restarts on the project's test clouds (``tests/test_kmeans.py``).

    Returns
    -------
    KMeansResult

    Raises
    ------
    ValueError
        Bad shapes, negative or all-zero weights, ``k < 1``, more locked
        centres than ``k``, or an unknown ``init``.

    Notes
    -----
    Lloyd's iterations stop in a local minimum, and restarts only sample
    other minima.  With ``polish``, each restart's centres then go through
    jump moves [4]_: the free centre whose removal raises the inertia least
    is put on a point drawn with probability proportional to its weighted
    squared distance (as k-means++ seeds), Lloyd reruns, and the result is
    kept if the inertia fell.  After a failed jump the next-cheapest centre
    is tried; :data:`JUMP_PATIENCE` failures in a row end the search.  Then
    single points move between clusters while that lowers the inertia
    (Hartigan's method [5]_, whose stable partitions are a subset of
    Lloyd's), and Lloyd runs once more.  ``runs`` keeps the restarts as they
    converged; the result is the best polished one, so its inertia may be
    lower than every run's.

    References
    ----------
    .. [1] S. Lloyd, "Least squares quantization in PCM", IEEE Transactions
       on Information Theory 28(2), 129-137, 1982.
    .. [2] D. Arthur and S. Vassilvitskii, "k-means++: the advantages of
       careful seeding", Proceedings of the 18th ACM-SIAM Symposium on
       Discrete Algorithms (SODA), 1027-1035, 2007.
    .. [3] T. F. Gonzalez, "Clustering to minimize the maximum intercluster
       distance", Theoretical Computer Science 38, 293-306, 1985
       (farthest-point traversal).
    .. [4] P. Hansen and N. Mladenović, "J-Means: a new local search
       heuristic for minimum sum of squares clustering", Pattern Recognition
       34(2), 405-413, 2001.
    .. [5] J. A. Hartigan and M. A. Wong, "Algorithm AS 136: a k-means
       clustering algorithm", Journal of the Royal Statistical Society,
       Series C 28(1), 100-108, 1979.

    Examples
    --------
    >>> import numpy as np
    >>> pts = np.array([[0.0, 0, 0], [0, 0, 1], [10, 0, 0], [10, 0, 1]])
    >>> res = kmeans(pts, 2, seed=1)
    >>> sorted(res.centres[:, 0].tolist()), float(res.inertia)
    ([0.0, 10.0], 1.0)
    """
    pts, w, fx, ic = _checked(points, weights, fixed, init_centres)
    d = pts.shape[1]
    k = _whole(k, "k", 1)
    restarts = _whole(restarts, "restarts", 1)
    max_iter = _whole(max_iter, "max_iter", 1)
    if isinstance(tol, bool) or not isinstance(tol, (int, float, np.floating)) or not (math.isfinite(tol) and tol >= 0):
        raise ValueError(f"tol must be a finite number of 0 or more, got {tol!r}")
    check_init(init)
    m = fx.shape[0]
    if m > k:
        raise ValueError(f"{m} locked centres do not fit in k={k}")
    rng = np.random.default_rng(seed)

    # Zero-weight points cannot hold a centre; distinct positive points bound k.
    keep = w > 0
    if not keep.all():
        pts, w = pts[keep], w[keep]
    if ic is not None:
        k_eff = ic.shape[0]
    else:
        k_eff = m + _count_distinct_upto(pts, fx, k - m)
    if k_eff < k:
        warnings.warn(
            f"only {k_eff} distinct colours are available; the palette has {k_eff}, not {k}",
            PaletteSizeWarning,
            stacklevel=2,
        )
    abs_tol = tol * tolerance_scale(pts, w)

    if ic is not None:
        start = ic
        if start.shape != (k_eff, d):
            raise ValueError(f"init_centres must have shape ({k_eff}, {d}), got {start.shape}")
        start = start.copy()
        start[:m] = fx
        starts = [start]
    else:
        starts = None

    best = None
    runs = []
    for r in range(1 if starts else restarts):
        c0 = starts[r] if starts else INITS[init](pts, w, k_eff, fx, rng)
        if c0.shape[0] < k_eff:  # seeding ran out of distinct points
            c0 = np.vstack([c0, np.repeat(c0[-1:], k_eff - c0.shape[0], axis=0)])
        centres, labels, history, n_iter = _lloyd(pts, w, c0, m, max_iter, abs_tol)
        runs.append((centres, history[-1]))
        if best is None or history[-1] < best[2][-1]:
            best = (centres, labels, history, n_iter)
    # restarts >= 1 (checked above), so the loop ran and best is set
    best = cast("tuple[Any, Any, Any, Any]", best)
    centres, labels, history, n_iter = best
    if polish:
        # Every restart is polished, after all of them ran: the restarts draw
        # the same numbers with and without the polish.
        for c0, _ in runs:
            c, lab, cost = _polish(pts, w, c0, m, max_iter, abs_tol, rng)
            if cost < history[-1]:
                centres, labels, history = c, lab, list(best[2]) + [cost]
    if not keep.all():
        full = np.full(keep.size, -1, dtype=labels.dtype)
        full[keep] = labels
        # Zero-weight points still get their nearest centre.
        full[~keep] = assign_nearest(np.ascontiguousarray(np.asarray(points, float)[~keep]), centres)[0]
        labels = full
    return KMeansResult(
        centres=centres,
        labels=labels,
        inertia=history[-1],
        n_iter=n_iter,
        history=tuple(history),
        k_requested=k,
        runs=tuple(runs),
    )


def _checked(points, weights, fixed, init_centres):
    """:func:`kmeans`'s arrays, validated: points (n, d), weights (n,), locked centres (m, d), start or None."""
    pts = np.ascontiguousarray(points, dtype=np.float64)
    if pts.ndim != 2 or pts.shape[0] == 0:
        raise ValueError(f"points must have shape (n, d) with n >= 1, got {pts.shape}")
    n, d = pts.shape
    w = np.ones(n) if weights is None else np.ascontiguousarray(weights, dtype=np.float64)
    if w.shape != (n,):
        raise ValueError(f"weights must have shape ({n},), got {w.shape}")
    if not np.all(np.isfinite(w)) or (w < 0).any() or w.sum() <= 0:
        raise ValueError("weights must be finite, non-negative and not all zero")
    if d == 0:
        raise ValueError(f"points must have at least one coordinate, got shape {pts.shape}")
    if not np.all(np.isfinite(pts)):
        raise ValueError("points must be finite")
    if np.abs(pts).max() > _MAX_COORD:
        raise ValueError(f"points must lie within ±{_MAX_COORD:g} (their squared distances would overflow)")
    fx = np.zeros((0, d)) if fixed is None else np.asarray(fixed, dtype=np.float64).reshape(-1, d)
    if not np.all(np.isfinite(fx)):
        raise ValueError("fixed centres must be finite")
    ic = None
    if init_centres is not None:
        ic = np.asarray(init_centres, dtype=np.float64)
        if ic.ndim != 2 or ic.shape[1] != d or not np.all(np.isfinite(ic)):
            raise ValueError(f"init_centres must be finite with shape (k, {d}), got shape {ic.shape}")
    return pts, w, fx, ic
