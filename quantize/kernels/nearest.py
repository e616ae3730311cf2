"""Exact nearest colour and per-cluster sums: the engine's inner kernels.

The kernels assume clean input (contiguous float64 arrays of matching
dimension).  Their plain brute-force twins live in ``tests/naive.py``.
While the compiled loops load (:mod:`quantize.kernels.loading`), the
Euclidean assignment and the cluster sums run as numpy code that gives
bit-identical results (:func:`assign_nearest_numpy` and ``np.bincount``), so
a palette never depends on how long the load took; the CIEDE2000 kernels
wait for it.
"""

from __future__ import annotations

import numpy as np

from .loading import engine, is_loaded, is_loading, run_blocks

__all__ = ["assign_nearest", "assign_nearest_numpy", "centre_sums", "nearest_ciede2000", "ciede2000_to"]

#: Below this many point-centre pairs the numpy kernel runs instead of
#: waiting for the compiler (it takes a few milliseconds there).
_SMALL = 1 << 15

#: Points per block: keeps the temporaries in cache.
_BLOCK = 1 << 16


def assign_nearest(points: np.ndarray, centres: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Exact nearest centre of every point by squared Euclidean distance.

    Compiled, or :func:`assign_nearest_numpy` for small inputs and while the
    compiled kernels are still loading; both give bit-identical labels and
    distances.
    """
    points = np.ascontiguousarray(points, dtype=np.float64)
    centres = np.ascontiguousarray(centres, dtype=np.float64)
    if not is_loaded() and (points.shape[0] * centres.shape[0] < _SMALL or is_loading()):
        # Do not wait for the compiler: the restarts run meanwhile.
        return assign_nearest_numpy(points, centres)
    labels = np.empty(points.shape[0], dtype=np.intp)
    dist2 = np.empty(points.shape[0], dtype=np.float64)
    run_blocks(engine().assign_euclid, len(points), len(centres), (points,), (centres,), (labels, dist2))
    return labels, dist2


def centre_sums(points: np.ndarray, weights: np.ndarray, labels: np.ndarray, k: int):
    """Per-label sum of weights, shape (k,), and of weighted points, shape (k, d).

    Bit-identical to ``np.bincount`` per coordinate, which runs instead while
    the compiled kernels load.
    """
    points = np.ascontiguousarray(points, dtype=np.float64)
    weights = np.ascontiguousarray(weights, dtype=np.float64)
    labels = np.ascontiguousarray(labels, dtype=np.intp)
    if not is_loaded() and (points.shape[0] < _SMALL or is_loading()):
        wsum = np.bincount(labels, weights=weights, minlength=k)
        sums = np.stack([np.bincount(labels, weights=weights * points[:, t], minlength=k)
                         for t in range(points.shape[1])], axis=1)
        return wsum, sums
    wsum = np.zeros(k)
    sums = np.zeros((k, points.shape[1]))
    engine().centre_sums(points, weights, labels, sums, wsum)
    return wsum, sums


def nearest_ciede2000(lab: np.ndarray, pal_lab: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Exact nearest palette colour of every CIELAB colour by CIEDE2000.

    Returns
    -------
    labels : ndarray of shape (n,), intp
        The lowest index wins a tie.
    delta_e : ndarray of shape (n,), float64
    """
    lab = np.ascontiguousarray(lab, dtype=np.float64)
    pal_lab = np.ascontiguousarray(pal_lab, dtype=np.float64)
    labels = np.empty(lab.shape[0], dtype=np.intp)
    de = np.empty(lab.shape[0], dtype=np.float64)
    if lab.shape[0] == 0:
        return labels, de
    order = np.argsort(pal_lab[:, 0], kind="stable")
    # S_L grows with the distance of the mean lightness from 50 (eq. 19 of
    # Sharma et al. 2005); no mean lies further from 50 than the furthest colour.
    far = max(float(np.abs(lab[:, 0] - 50.0).max()), float(np.abs(pal_lab[:, 0] - 50.0).max()))
    sl_max = 1.0 + 0.015 * far * far / np.sqrt(20.0 + far * far)
    # A CIEDE2000 costs about ten squared distances.
    run_blocks(engine().assign_ciede2000, len(lab), 10 * len(pal_lab), (lab,), (pal_lab, order, sl_max),
         (labels, de))
    return labels, de


def ciede2000_to(lab: np.ndarray, pal_lab: np.ndarray, labels: np.ndarray) -> np.ndarray:
    """CIEDE2000 of every CIELAB colour to the palette colour ``labels`` names."""
    lab = np.ascontiguousarray(lab, dtype=np.float64)
    pal_lab = np.ascontiguousarray(pal_lab, dtype=np.float64)
    labels = np.ascontiguousarray(labels, dtype=np.intp)
    de = np.empty(lab.shape[0], dtype=np.float64)
    run_blocks(engine().ciede2000_to, len(lab), 10, (lab, labels), (pal_lab,), (de,))
    return de


def assign_nearest_numpy(points: np.ndarray, centres: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
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
