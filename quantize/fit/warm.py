"""Warm starts: size k started from the size k - 1 solution (``FitSettings(warm=True)``).

Beside the fresh restarts, size k gets two starts from the k - 1 fit: its
costliest cluster split in two along its principal axis, and its centres
plus one greedy k-means++ addition.  The start of lowest cost is kept.
Adding a centre cannot raise a solution's cost and Lloyd steps never do, so
the best cost at k is at most the cost at k - 1; a last check on every
distinct colour makes that exact.  The price: the palette of size k then
depends on the sizes fitted before it, so warm starts are off by default.

References
----------
.. [1] Y. Linde, A. Buzo and R. M. Gray, "An algorithm for vector quantizer
   design", IEEE Transactions on Communications 28(1), 84-95, 1980
   (growing a codebook by splitting).
"""

from __future__ import annotations

import numpy as np

from quantize.kernels.nearest import assign_nearest

from .clustering import INITS, KMeansResult, lloyd_from

__all__ = ["STARTS", "split_worst", "add_one", "warm_coarse", "warm_fine"]

#: How the kept candidate of a size was started.
STARTS = {
    "fresh": "best of the fresh k-means++ restarts",
    "split": "the k-1 palette with its worst cluster split in two",
    "add": "the k-1 palette plus one k-means++ addition",
}


def split_worst(points, weights, res, n_fixed):
    """Start centres for k + 1: the costliest cluster split along its principal axis.

    A Gaussian cut through its mean along an axis of variance ``lam`` has
    half-means at ``+-sqrt(2 lam / pi)``: the two new centres go there.  A
    locked centre stays and gains a partner on one side.  None when the
    worst cluster is a single colour.
    """
    centres = res.centres
    labels, d2 = assign_nearest(points, centres)
    cost = np.bincount(labels, weights=weights * d2, minlength=len(centres))
    j = int(np.argmax(cost))
    members = labels == j
    w = weights[members]
    if cost[j] <= 0 or w.sum() <= 0:
        return None
    x = points[members]
    mu = (w[:, None] * x).sum(axis=0) / w.sum()
    cov = ((x - mu).T * w) @ (x - mu) / w.sum()
    lam, vec = np.linalg.eigh(cov)
    step = np.sqrt(2.0 * max(lam[-1], 0.0) / np.pi) * vec[:, -1]
    if not np.any(step):
        return None
    start = np.vstack([centres, centres[j] + step])
    if j >= n_fixed:
        start[j] = centres[j] - step
    return start


def add_one(points, weights, res, rng):
    """Start centres for k + 1: the k centres plus one greedy k-means++ draw."""
    return INITS["k-means++"](points, weights, len(res.centres) + 1, res.centres, rng)


def warm_coarse(bin_pts, bin_w, fresh, prev, n_fixed, tol, rng):
    """The best of ``fresh`` and the two starts from ``prev`` on the binned sample; and its start name."""
    best, start = fresh, "fresh"
    for name, c0 in (("split", split_worst(bin_pts, bin_w, prev, n_fixed)),
                     ("add", add_one(bin_pts, bin_w, prev, rng))):
        if c0 is None or len(c0) != len(fresh.centres):
            continue
        cand = lloyd_from(bin_pts, bin_w, c0, n_fixed=n_fixed, abs_tol=tol)
        if cand.inertia < best.inertia:
            best, start = cand, name
    return best, start


def warm_fine(points, weights, fine, prev, n_fixed, tol, steps, rng):
    """``fine``, or ``prev`` plus one addition if binning misled the choice and that costs less.

    One addition to the previous full-data solution cannot cost more than
    it did; Lloyd from there is kept only if rounding did not make it end
    higher than its start.
    """
    if fine.inertia <= prev.inertia:
        return fine, False
    c0 = add_one(points, weights, prev, rng)
    if len(c0) != len(fine.centres):
        return fine, False
    res = lloyd_from(points, weights, c0, n_fixed=n_fixed, max_iter=steps, abs_tol=tol)
    labels, d2 = assign_nearest(points, c0)
    c_start = float((weights * d2).sum())  # summed in the same order: at most the old cost
    if res.inertia > c_start:
        res = KMeansResult(centres=c0, labels=labels, inertia=c_start, n_iter=0, history=(c_start,),
                           k_requested=len(c0))
    return (res, True) if res.inertia <= fine.inertia else (fine, False)
