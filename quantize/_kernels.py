"""Inner kernels shared by the clustering and mapping stages.

The kernels assume clean input (contiguous float64 arrays of matching
dimension).  Their plain brute-force twins live in ``tests/naive.py``.

The assignment is plain numpy on purpose: it runs on distinct colours, not
pixels, so a handful of vectorised passes is fast enough, and loading a JIT
compiler would cost a second of start-up on every command.
"""

from __future__ import annotations

import numpy as np

__all__ = ["assign_nearest"]

#: Points per block: keeps the temporaries in cache.
_BLOCK = 1 << 16


def assign_nearest(points: np.ndarray, centres: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Exact nearest centre of every point by squared Euclidean distance.

    Distances are computed directly as sums of squared coordinate
    differences (no ``|x|^2 - 2 x.c + |c|^2`` expansion, whose rounding can
    pick the wrong centre for near ties).

    Parameters
    ----------
    points : ndarray of shape (n, d)
    centres : ndarray of shape (k, d)

    Returns
    -------
    labels : ndarray of shape (n,), intp
        Index of the nearest centre; the lowest index wins a tie.
    dist2 : ndarray of shape (n,), float64
        Squared distance to that centre.
    """
    points = np.ascontiguousarray(points, dtype=np.float64)
    centres = np.ascontiguousarray(centres, dtype=np.float64)
    n, d = points.shape
    labels = np.zeros(n, dtype=np.intp)
    dist2 = np.empty(n, dtype=np.float64)
    cols = [np.ascontiguousarray(points[:, t]) for t in range(d)]
    for lo in range(0, n, _BLOCK):
        hi = min(n, lo + _BLOCK)
        best = dist2[lo:hi]
        lab = labels[lo:hi]
        acc = np.empty(hi - lo)
        tmp = np.empty(hi - lo)
        for j in range(centres.shape[0]):
            np.subtract(cols[0][lo:hi], centres[j, 0], out=acc)
            np.multiply(acc, acc, out=acc)
            for t in range(1, d):
                np.subtract(cols[t][lo:hi], centres[j, t], out=tmp)
                np.multiply(tmp, tmp, out=tmp)
                acc += tmp
            if j == 0:
                best[:] = acc
            else:
                # Strict '<' keeps the lowest index on ties, like argmin.
                closer = acc < best
                np.copyto(best, acc, where=closer)
                lab[closer] = j
    return labels, dist2
