"""Exact nearest colour and per-cluster sums: the engine's inner kernels.

Each function picks its implementation by the size of its input alone:
the numpy kernels of :mod:`quantize.kernels.vectorised` up to
:data:`COMPILED_FROM` point-palette pairs, which covers the distinct
colours of everyday images, and the compiled loops of
:mod:`quantize.kernels.engine_loops` above, loaded on first use in the
calling thread.  Never timing or load: the same input always takes the same
path, so a palette does not depend on how busy the machine is.  The
Euclidean assignment and the cluster sums of both paths are bit-identical
besides.  The kernels assume clean input (contiguous float64 arrays of
matching dimension).  Their plain brute-force twins live in
``tests/naive.py``.
"""

from __future__ import annotations

import numpy as np

from . import vectorised
from .loading import compiled, run_blocks

__all__ = ["COMPILED_FROM", "uses_compiled", "assign_nearest", "assign_nearest_numpy", "centre_sums",
           "nearest_ciede2000", "ciede2000_to"]

#: Point-palette pairs from which a call runs the compiled loops (2^21, about
#: two million).  Below, numpy takes less time than loading the compiler
#: does (about half a second, and 100 MB), even on a busy machine; above it
#: the compiled loops win: a 2..16 sweep of a 12 MP photo's 586 000 colours
#: took 8.1 s with the threshold at 2^24 and 5.1 s at 2^21
#: (benchmarks/bench_sweep.py), while 1 MP photos (fewer than 260 000
#: colours at k = 8) still never load the compiler
#: (benchmarks/bench_everyday.py).
COMPILED_FROM = 1 << 21


def uses_compiled(n: int, k: int) -> bool:
    """Whether a kernel call on ``n`` points and ``k`` palette colours runs the compiled loops."""
    return n * k >= COMPILED_FROM


def assign_nearest(points: np.ndarray, centres: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Exact nearest centre of every point by squared Euclidean distance.

    Returns
    -------
    labels : ndarray of shape (n,), intp
        The lowest index wins a tie.
    dist2 : ndarray of shape (n,), float64
    """
    points = np.ascontiguousarray(points, dtype=np.float64)
    centres = np.ascontiguousarray(centres, dtype=np.float64)
    if not uses_compiled(len(points), len(centres)):
        return vectorised.assign_euclid(points, centres)
    labels = np.empty(points.shape[0], dtype=np.intp)
    dist2 = np.empty(points.shape[0], dtype=np.float64)
    run_blocks(compiled("engine_loops").assign_euclid, len(points), len(centres), (points,), (centres,),
               (labels, dist2))
    return labels, dist2


#: The numpy kernel on its own, for callers and tests that want it whatever the size.
assign_nearest_numpy = vectorised.assign_euclid


def centre_sums(points: np.ndarray, weights: np.ndarray, labels: np.ndarray, k: int):
    """Per-label sum of weights, shape (k,), and of weighted points, shape (k, d).

    Always numpy: ``np.bincount`` runs at memory speed, and a compiled loop
    would not be faster.
    """
    points = np.ascontiguousarray(points, dtype=np.float64)
    weights = np.ascontiguousarray(weights, dtype=np.float64)
    labels = np.ascontiguousarray(labels, dtype=np.intp)
    return vectorised.centre_sums(points, weights, labels, k)


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
    if lab.shape[0] == 0:
        return np.empty(0, dtype=np.intp), np.empty(0)
    if not uses_compiled(len(lab), len(pal_lab)):
        return vectorised.nearest_ciede2000(lab, pal_lab)
    labels = np.empty(lab.shape[0], dtype=np.intp)
    de = np.empty(lab.shape[0], dtype=np.float64)
    order = np.argsort(pal_lab[:, 0], kind="stable")
    # S_L grows with the distance of the mean lightness from 50 (eq. 19 of
    # Sharma et al. 2005); no mean lies further from 50 than the furthest colour.
    far = max(float(np.abs(lab[:, 0] - 50.0).max()), float(np.abs(pal_lab[:, 0] - 50.0).max()))
    sl_max = 1.0 + 0.015 * far * far / np.sqrt(20.0 + far * far)
    # A CIEDE2000 costs about ten squared distances.
    run_blocks(compiled("engine_loops").assign_ciede2000, len(lab), 10 * len(pal_lab), (lab,),
               (pal_lab, order, sl_max), (labels, de))
    return labels, de


def ciede2000_to(lab: np.ndarray, pal_lab: np.ndarray, labels: np.ndarray) -> np.ndarray:
    """CIEDE2000 of every CIELAB colour to the palette colour ``labels`` names."""
    lab = np.ascontiguousarray(lab, dtype=np.float64)
    pal_lab = np.ascontiguousarray(pal_lab, dtype=np.float64)
    labels = np.ascontiguousarray(labels, dtype=np.intp)
    n = lab.shape[0]
    if not uses_compiled(n, 1):
        de = np.empty(n)
        for lo in range(0, n, vectorised.BLOCK):
            hi = min(n, lo + vectorised.BLOCK)
            p = pal_lab[labels[lo:hi]]
            de[lo:hi] = vectorised.ciede2000_pairs(lab[lo:hi, 0], lab[lo:hi, 1], lab[lo:hi, 2],
                                                   p[:, 0], p[:, 1], p[:, 2])
        return de
    de = np.empty(n, dtype=np.float64)
    run_blocks(compiled("engine_loops").ciede2000_to, n, 10, (lab, labels), (pal_lab,), (de,))
    return de
