"""Compiled inner kernels shared by the clustering and mapping stages.

Each kernel has a small Python front that prepares contiguous float64 arrays;
the kernels themselves assume clean input.  numba is imported on first use,
and compiled code is cached on disk, so a later process pays only the load.
The plain-numpy twin of every kernel lives in ``tests/naive.py``.
"""

from __future__ import annotations

import numpy as np

__all__ = ["assign_nearest"]

_compiled: dict = {}


def _assign_kernel():
    if "assign" not in _compiled:
        import numba

        # Serial on purpose: the work per call is small (distinct colours, not
        # pixels), and numba's worker threads cost more than they save when
        # the machine is shared.
        @numba.njit(cache=True, nogil=True, fastmath=False)
        def assign(points, centres, labels, dist2):
            n, d = points.shape
            k = centres.shape[0]
            for i in range(n):
                best = np.inf
                arg = 0
                for j in range(k):
                    s = 0.0
                    for t in range(d):
                        diff = points[i, t] - centres[j, t]
                        s += diff * diff
                    # Strict '<' keeps the lowest index on ties, like argmin.
                    if s < best:
                        best = s
                        arg = j
                labels[i] = arg
                dist2[i] = best

        _compiled["assign"] = assign
    return _compiled["assign"]


def assign_nearest(points: np.ndarray, centres: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Exact nearest centre of every point by squared Euclidean distance.

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
    n = points.shape[0]
    labels = np.empty(n, dtype=np.intp)
    dist2 = np.empty(n, dtype=np.float64)
    if n:
        _assign_kernel()(points, centres, labels, dist2)
    return labels, dist2
