"""Robust refinement of a k-means palette (an explicit step after the fit).

k-means minimises squared error, so a few far-off pixels weigh as much as
many close ones.  In flat artwork the far-off pixels are anti-aliased edges
and compression ringing: k-means spends a centre on that cloud of in-between
colours and merges two real inks to pay for it.  This step re-fits the
palette under the truncated loss ``min(d**2, tau**2)``:

1. Trimmed Lloyd iterations: each free centre moves to the weighted mean of
   its *inlier* points (closer than ``tau``); points further than ``tau``
   from every centre pull on none.
2. Swaps: the free centre whose removal costs least is moved to the
   heaviest point that no centre explains (further than ``tau``), followed
   by trimmed Lloyd again; a swap is kept only if the truncated cost falls.

The truncated cost never rises.  The caller (:func:`quantize.fit.engine.fit_sizes`)
keeps the refined palette only where it lowers the mean ΔE00, and still
reports the k-means cost of the original fit.

References
----------
.. [1] J. A. Cuesta-Albertos, A. Gordaliza and C. Matrán, "Trimmed k-means:
   an attempt to robustify quantizers", Annals of Statistics 25(2),
   553-576, 1997.
.. [2] T. Kanungo, D. M. Mount, N. S. Netanyahu, C. D. Piatko,
   R. Silverman and A. Y. Wu, "A local search approximation algorithm for
   k-means clustering", Computational Geometry 28(2-3), 89-112, 2004.
"""

from __future__ import annotations

import numpy as np

from quantize.kernels.nearest import LloydAssigner, assign_nearest, centre_sums

__all__ = ["robust_refine", "truncated_cost", "median_polish", "ciede2000_medians", "compass_polish", "REFINE_TAU"]

#: Inlier radius in fitting-space units (about ΔE 8 in CIELAB).
REFINE_TAU = 8.0


def truncated_cost(points, weights, centres, tau: float = REFINE_TAU) -> float:
    """Weighted sum of ``min(d**2, tau**2)`` to the nearest centre."""
    _, d2 = assign_nearest(points, centres)
    return float((weights * np.minimum(d2, tau * tau)).sum())


def _trimmed_lloyd(points, w, centres, n_fixed, t2, max_iter):
    k, d = centres.shape
    nearest = LloydAssigner(points)
    labels, d2 = nearest.assign(centres)
    cost = float((w * np.minimum(d2, t2)).sum())
    for _ in range(max_iter):
        wi = np.where(d2 < t2, w, 0.0)
        ws, s = centre_sums(points, wi, labels, k)
        new = centres.copy()
        upd = ws > 0
        upd[:n_fixed] = False
        new[upd] = s[upd] / ws[upd, None]
        nl, nd2 = nearest.assign(new)
        ncost = float((w * np.minimum(nd2, t2)).sum())
        if not ncost < cost:
            break
        centres, labels, d2, cost, gain = new, nl, nd2, ncost, cost - ncost
        # Stop once a step gains less than a part in 10^5: later steps move
        # centres by a small fraction of a ΔE.
        if gain < 1e-5 * cost:
            break
    return centres, labels, d2, cost


def robust_refine(points, weights, centres, *, n_fixed: int = 0, tau: float = REFINE_TAU,
                  max_iter: int = 50, max_swaps: int | None = None, tries: int = 3) -> np.ndarray:
    """Refine centres under the truncated loss with trimmed Lloyd steps and swaps.

    Parameters
    ----------
    points : ndarray of shape (n, d)
        Colours in the fitting space (clean, float64).
    weights : ndarray of shape (n,)
        Pixel counts.
    centres : ndarray of shape (k, d)
        Start, e.g. a k-means solution; the first ``n_fixed`` are locked.
    tau : float, default=8.0
        Inlier radius in fitting-space units.
    max_iter : int, default=50
        Trimmed Lloyd iterations per round.
    max_swaps : int, optional
        Swaps at most (default ``k``).
    tries : int, default=3
        Removal candidates tried per swap, cheapest first.

    Returns
    -------
    ndarray of shape (k, d)
        Refined centres; locked ones unchanged.  The truncated cost is never
        higher than at the start.
    """
    pts = np.ascontiguousarray(points, dtype=np.float64)
    w = np.asarray(weights, dtype=np.float64)
    c = np.array(centres, dtype=np.float64)
    k = c.shape[0]
    t2 = float(tau) ** 2
    c, labels, d2, cost = _trimmed_lloyd(pts, w, c, n_fixed, t2, max_iter)
    if k - n_fixed < 1:
        return c
    for _ in range(k if max_swaps is None else max_swaps):
        outl = d2 >= t2
        if not outl.any():
            break
        target = int(np.argmax(np.where(outl, w, -1.0)))
        # Removal cost of each free centre: its points fall back to their
        # second-nearest centre (capped at tau).
        removal = np.full(k, np.inf)
        for j in range(n_fixed, k):
            mine = labels == j
            if not mine.any():
                removal[j] = 0.0
                continue
            others = np.delete(c, j, axis=0)
            _, d2o = assign_nearest(pts[mine], others)
            removal[j] = float((w[mine] * (np.minimum(d2o, t2) - np.minimum(d2[mine], t2))).sum())
        improved = False
        for j in np.argsort(removal, kind="stable")[:tries]:
            if not np.isfinite(removal[j]):
                break
            trial = c.copy()
            trial[j] = pts[target]
            tc, tl, td2, tcost = _trimmed_lloyd(pts, w, trial, n_fixed, t2, max_iter)
            if tcost < cost * (1 - 1e-9):
                c, labels, d2, cost = tc, tl, td2, tcost
                improved = True
                break
        if not improved:
            break
    return c


def median_polish(points, weights, centres, *, n_fixed: int = 0, iters: int = 10) -> np.ndarray:
    """Move free centres toward weighted geometric medians (k-medians steps).

    Mean ΔE grows with distance, not squared distance, so the centre that
    minimises it sits nearer the geometric median of its colours than the
    mean.  Each step assigns points to their nearest centre and applies one
    Weiszfeld update per cluster (distances floored at 0.5 so a point on a
    centre does not dominate).

    References
    ----------
    .. [1] E. Weiszfeld, "Sur le point pour lequel la somme des distances de
       n points donnés est minimum", Tôhoku Mathematical Journal 43,
       355-386, 1937.
    """
    pts = np.ascontiguousarray(points, dtype=np.float64)
    w = np.asarray(weights, dtype=np.float64)
    c = np.array(centres, dtype=np.float64)
    k = c.shape[0]
    for _ in range(iters):
        labels, d2 = assign_nearest(pts, c)
        ww = w / np.maximum(np.sqrt(d2), 0.5)
        s, sums = centre_sums(pts, ww, labels, k)
        upd = s > 0
        upd[:n_fixed] = False
        c[upd] = sums[upd] / s[upd, None]
    return c


#: Distance floor of the k-medians weights, in ΔE00: a colour sitting on its
#: centre would otherwise take all the weight.
_FLOOR = 0.3


def compass_polish(lab, weights, centres, labels, *, n_fixed: int = 0,
                   steps=(1.0, 0.5, 0.25), max_rounds: int = 3, compiled_always: bool = False) -> np.ndarray:
    """Compass search on each free centre's sum of ΔE00, labels held fixed.

    Every free centre tries a step of ``s`` along +-L*, +-a* and +-b* and
    keeps it if its cluster's pixel-weighted sum of CIEDE2000 falls; when no
    centre moves, the step halves along ``steps``.  Unlike the Weiszfeld
    step this sees the true cost, including how CIEDE2000's weights change
    with the centre's own chroma and hue.  ``compiled_always`` runs the
    compiled CIEDE2000 loops whatever the size
    (:class:`~quantize.kernels.nearest.CiedeColumns`).

    References
    ----------
    .. [1] T. G. Kolda, R. M. Lewis and V. Torczon, "Optimization by direct
       search: new perspectives on some classical and modern methods",
       SIAM Review 45(3), 385-482, 2003.

    Examples
    --------
    >>> import numpy as np
    >>> lab = np.array([[50.0, 0, 0], [50, 0, 0], [54, 0, 0]])
    >>> compass_polish(lab, np.ones(3), np.array([[53.0, 0, 0]]), np.zeros(3, int)).round(2).tolist()
    [[50.0, 0.0, 0.0]]
    """
    from quantize.kernels.nearest import CiedeColumns

    return _compass(CiedeColumns(lab, compiled_always=compiled_always), np.asarray(weights, dtype=np.float64), centres,
                    np.asarray(labels, dtype=np.intp), n_fixed, steps, max_rounds)


def _compass(cols, w, centres, labels, n_fixed, steps, max_rounds):
    """:func:`compass_polish` on colours held as :class:`~quantize.kernels.nearest.CiedeColumns`.

    With the labels fixed, each centre's sum depends on that centre alone,
    so a centre that kept its place through a whole round of six trials
    keeps it through every later round of the same step: the next rounds
    measure only the colours of centres that moved.
    """
    c = np.array(centres, dtype=np.float64)
    k = c.shape[0]
    free = np.arange(k) >= n_fixed
    de = cols.to(c, labels)
    for step in steps:
        active = free.copy()
        for _ in range(max_rounds):
            rows = np.flatnonzero(active[labels])
            if rows.size == 0:
                break
            part = cols if rows.size == labels.size else cols.subset(rows)
            lab_r, w_r, de_r = labels[rows], w[rows], de[rows]
            moved_now = np.zeros(k, dtype=bool)
            for axis in range(3):
                for sign in (1.0, -1.0):
                    trial = c.copy()
                    trial[active, axis] += sign * step
                    de_t = part.to(trial, lab_r)
                    better = active & (np.bincount(lab_r, weights=w_r * (de_r - de_t), minlength=k) > 0)
                    if better.any():
                        c[better] = trial[better]
                        de_r = np.where(better[lab_r], de_t, de_r)
                        moved_now |= better
            de[rows] = de_r
            active = moved_now
            if not active.any():
                break
    return c


def ciede2000_medians(lab, weights, centres, *, n_fixed: int = 0, iters: int = 8,
                      rtol: float = 1e-4, polish=(1.0, 0.5), compiled_always: bool = False) -> np.ndarray:
    """Weighted k-medians under CIEDE2000: lower the pixel-weighted sum of ΔE00.

    Alternates two steps, neither of which can raise the sum:

    1. Assignment: every colour to its nearest centre by CIEDE2000 (exact).
    2. Update: each free centre takes one Weiszfeld step, to the mean of its
       colours weighted by ``weight / ΔE00`` (floored at 0.3).  Near a centre
       CIEDE2000 behaves like a Euclidean distance under a fixed quadratic
       form, and for any fixed form that weighted mean is the Weiszfeld
       update.  Because the form does change across a cluster, the move is
       kept only where it lowers that cluster's sum of ΔE00.

    It stops after ``iters`` rounds or when a round gains less than ``rtol``
    of the sum; then :func:`compass_polish` with the step sizes ``polish``
    (in ΔE units; empty for none) and a last assignment.

    Parameters
    ----------
    lab : ndarray of shape (n, 3)
        Colours in CIELAB (clean, float64).
    weights : ndarray of shape (n,)
        Pixel counts.
    centres : ndarray of shape (k, 3)
        Start in CIELAB; the first ``n_fixed`` are locked.
    iters : int, default=8
    rtol : float, default=1e-4
    polish : sequence of float, default=(1.0, 0.5)
    compiled_always : bool, default=False
        Run the compiled CIEDE2000 loops whatever the size
        (:class:`~quantize.kernels.nearest.CiedeColumns`); the result agrees
        with the default's to rounding, not bit for bit.

    Returns
    -------
    ndarray of shape (k, 3)
        Centres in CIELAB; locked ones unchanged.

    References
    ----------
    .. [1] E. Weiszfeld, "Sur le point pour lequel la somme des distances de
       n points donnés est minimum", Tôhoku Mathematical Journal 43,
       355-386, 1937.
    .. [2] G. Sharma, W. Wu and E. N. Dalal, "The CIEDE2000 color-difference
       formula: implementation notes, supplementary test data, and
       mathematical observations", Color Research & Application 30(1),
       21-30, 2005.

    Examples
    --------
    >>> import numpy as np
    >>> lab = np.array([[50.0, 0, 0], [51, 0, 0], [52, 0, 0], [70, 40, 20]])
    >>> c = ciede2000_medians(lab, np.ones(4), np.array([[40.0, 0, 0], [70, 40, 20]]), n_fixed=1)
    >>> c[0].tolist(), bool(abs(c[1, 0] - 70) < 1)
    ([40.0, 0.0, 0.0], True)
    """
    from quantize.kernels.nearest import CiedeColumns

    cols = CiedeColumns(lab, compiled_always=compiled_always)
    lab = cols.lab
    w = np.asarray(weights, dtype=np.float64)
    c = np.array(centres, dtype=np.float64)
    k = c.shape[0]
    labels, de = cols.nearest(c)
    cost = float((w * de).sum())
    for _ in range(iters):
        ww = w / np.maximum(de, _FLOOR)
        s, sums = centre_sums(lab, ww, labels, k)
        new = c.copy()
        upd = s > 0
        upd[:n_fixed] = False
        new[upd] = sums[upd] / s[upd, None]
        de_new = cols.to(new, labels)
        gain = np.bincount(labels, weights=w * (de - de_new), minlength=k)
        keep = upd & (gain > 0)
        if not keep.any():
            break
        c[keep] = new[keep]
        labels, de = cols.nearest(c)
        new_cost = float((w * de).sum())
        done = new_cost > cost * (1.0 - rtol)
        cost = new_cost
        if done:
            break
    if len(polish):
        c = _compass(cols, w, c, labels, n_fixed, polish, 3)
    return c
