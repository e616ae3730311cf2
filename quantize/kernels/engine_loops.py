"""Compiled kernels of the fitting and mapping stages (numba, cached on disk).

Imported only through :mod:`quantize.kernels.nearest`, on first use, for
inputs too large for the numpy kernels of :mod:`quantize.kernels.vectorised`
(:func:`quantize.kernels.nearest.uses_compiled`).  The kernels assume clean
input: C-contiguous float64 arrays of matching dimension, preallocated
outputs.  Each point's result depends on that point alone, so
:mod:`quantize.kernels.nearest` runs large inputs in row blocks on several
threads (the kernels release the interpreter lock) and the result does not
depend on the number of threads.  Plain numpy twins live in
``tests/naive.py``.

References: G. Sharma, W. Wu and E. N. Dalal, "The CIEDE2000 color-difference
formula: implementation notes, supplementary test data, and mathematical
observations", Color Res. Appl. 30(1), 21-30, 2005 (the scalar CIEDE2000 is
the one of :mod:`quantize.kernels.dither_loops`).
"""

from __future__ import annotations

import numba
import numpy as np

from .dither_loops import ciede2000, from_primed, primed_c

__all__ = ["assign_euclid", "assign_euclid_two", "centre_sums", "assign_ciede2000", "ciede2000_to"]

_POW25_7 = 25.0**7
#: The largest value of CIEDE2000's hue weighting T over all hues (found by
#: evaluating eq. 15 of Sharma et al. 2005 on a 0.0001-degree grid, rounded up).
_T_MAX = 1.5725
#: sin(60 degrees): the largest |sin(2 dtheta)| in the rotation term R_T.
_SIN60 = 0.8660254037844387


@numba.njit(cache=True, nogil=True)
def assign_euclid(points, centres, labels, dist2):
    """Nearest centre by squared Euclidean distance; the lowest index wins a tie.

    The squared distance is summed coordinate by coordinate in order, as the
    numpy twin does, so both give bit-identical distances.
    """
    n, d = points.shape
    k = centres.shape[0]
    if d == 3:  # colours: unrolled, the same sums in the same order
        for i in range(n):
            p0, p1, p2 = points[i, 0], points[i, 1], points[i, 2]
            best = np.inf
            arg = 0
            for j in range(k):
                u0 = p0 - centres[j, 0]
                u1 = p1 - centres[j, 1]
                u2 = p2 - centres[j, 2]
                s = u0 * u0
                s += u1 * u1
                s += u2 * u2
                if s < best:
                    best = s
                    arg = j
            labels[i] = arg
            dist2[i] = best
        return
    for i in range(n):
        best = np.inf
        arg = 0
        for j in range(k):
            s = 0.0
            for t in range(d):
                u = points[i, t] - centres[j, t]
                s += u * u
            if s < best:
                best = s
                arg = j
        labels[i] = arg
        dist2[i] = best


@numba.njit(cache=True, nogil=True)
def assign_euclid_two(points, centres, labels, dist2, second2):
    """:func:`assign_euclid`, and the squared distance to the nearest centre but the label's.

    ``second2`` is infinite with one centre; a tie puts the tied distance
    in both.  Summed as :func:`assign_euclid` sums it, bit for bit.
    """
    n, d = points.shape
    k = centres.shape[0]
    for i in range(n):
        best = np.inf
        second = np.inf
        arg = 0
        for j in range(k):
            s = 0.0
            if d == 3:
                u0 = points[i, 0] - centres[j, 0]
                u1 = points[i, 1] - centres[j, 1]
                u2 = points[i, 2] - centres[j, 2]
                s = u0 * u0
                s += u1 * u1
                s += u2 * u2
            else:
                u = points[i, 0] - centres[j, 0]
                s = u * u
                for t in range(1, d):
                    u = points[i, t] - centres[j, t]
                    s += u * u
            if s < best:
                second = best
                best = s
                arg = j
            elif s < second:
                second = s
        labels[i] = arg
        dist2[i] = best
        second2[i] = second


@numba.njit(cache=True, nogil=True)
def centre_sums(points, weights, labels, wsum, sums):
    """Add each point's weight and weighted coordinates to its label's sums (zeroed by the caller).

    Point by point in index order, each product rounded before it is
    added: what ``np.bincount(labels, weights=weights * points[:, t])``
    does, so both give bit-identical sums.  Serial on purpose: splitting
    the rows would change the order of the additions.
    """
    for i in range(points.shape[0]):
        j = labels[i]
        w = weights[i]
        wsum[j] += w
        for t in range(points.shape[1]):
            sums[j, t] += w * points[i, t]


@numba.njit(cache=True, nogil=True)
def _lightness2(L1, L2):
    """(dL'/S_L)^2: the lightness term of CIEDE2000's square (eqs. 16-17, 19)."""
    lbar = 0.5 * (L1 + L2)
    l50 = (lbar - 50.0) * (lbar - 50.0)
    x = (L2 - L1) / (1.0 + 0.015 * l50 / np.sqrt(20.0 + l50))
    return x * x


@numba.njit(cache=True, nogil=True)
def _lower_bound2(L1, L2, dc, dp2, c1p, c2p):
    """A lower bound on the square of CIEDE2000 that needs no angle.

    With x = dL'/S_L, y = dC'/S_C and z = dH'/S_H the square is
    x^2 + y^2 + z^2 + R_T y z (eq. 22).  Everything but T and R_T is known
    from a' and C': |dH'|^2 = |a'b' difference|^2 - dC'^2 (eqs. 10-12), so
    |z| >= |dH'| / (1 + 0.015 C' T_max), and |R_T| <= sin 60 * R_C.  The
    bound is the smallest value of the form over those ranges.
    """
    cbarp = 0.5 * (c1p + c2p)
    y = abs(dc) / (1.0 + 0.045 * cbarp)
    c7p = cbarp * cbarp
    c7p = c7p * c7p * c7p * cbarp
    r = _SIN60 * 2.0 * np.sqrt(c7p / (c7p + _POW25_7))
    zlo = np.sqrt(max(dp2 - dc * dc, 0.0)) / (1.0 + 0.015 * cbarp * _T_MAX)
    if zlo > 0.5 * r * y:
        zz = zlo * zlo - r * y * zlo
    else:
        zz = -0.25 * r * r * y * y
    return _lightness2(L1, L2) + y * y + zz


@numba.njit(cache=True, nogil=True)
def assign_ciede2000(lab, pal_lab, order, sl_max, labels, de):
    """Nearest palette colour by CIEDE2000, exactly, and its ΔE00.

    The colour nearest in CIELAB is measured first.  The others are visited
    outward in lightness from the colour's own (``order`` sorts the palette
    by L*): since S_L <= ``sl_max`` over the data, once (dL* / sl_max)^2
    exceeds the best square so far no colour further out in that direction
    can be nearer.  A visited colour whose angle-free lower bound
    (:func:`_lower_bound2`) is not below the best square is skipped too.  The
    result equals a full scan with :func:`quantize.kernels.dither_loops.ciede2000`,
    the lowest index winning a tie.
    """
    n = lab.shape[0]
    k = pal_lab.shape[0]
    pc = np.empty(k)
    sorted_l = np.empty(k)
    for j in range(k):
        pc[j] = np.sqrt(pal_lab[j, 1] * pal_lab[j, 1] + pal_lab[j, 2] * pal_lab[j, 2])
        sorted_l[j] = pal_lab[order[j], 0]
    inv_sl2 = 1.0 / (sl_max * sl_max)
    for i in range(n):
        L, a, b = lab[i, 0], lab[i, 1], lab[i, 2]
        c = np.sqrt(a * a + b * b)
        j0 = 0
        e0 = np.inf
        for j in range(k):
            u, v, w = L - pal_lab[j, 0], a - pal_lab[j, 1], b - pal_lab[j, 2]
            s = u * u + v * v + w * w
            if s < e0:
                e0 = s
                j0 = j
        a1p, a2p, c1p, c2p = primed_c(a, b, c, pal_lab[j0, 1], pal_lab[j0, 2], pc[j0])
        best = from_primed(L, a, b, pal_lab[j0, 0], pal_lab[j0, 1], pal_lab[j0, 2], a1p, a2p, c1p, c2p)
        arg = j0
        start = np.searchsorted(sorted_l, L)
        for direction in (-1, 1):
            r = start - 1 if direction < 0 else start
            while 0 <= r < k:
                j = order[r]
                r += direction
                L2 = pal_lab[j, 0]
                # Margins of 1e-9 keep rounding in the bounds from skipping a tie.
                limit = best * best * (1.0 + 1e-9) + 1e-300
                if (L2 - L) * (L2 - L) * inv_sl2 > limit:
                    break
                if j == j0 or _lightness2(L, L2) > limit:
                    continue
                a2, b2 = pal_lab[j, 1], pal_lab[j, 2]
                a1p, a2p, c1p, c2p = primed_c(a, b, c, a2, b2, pc[j])
                dc = c2p - c1p
                dp2 = (a2p - a1p) * (a2p - a1p) + (b2 - b) * (b2 - b)
                if _lower_bound2(L, L2, dc, dp2, c1p, c2p) > limit:
                    continue
                s = from_primed(L, a, b, L2, a2, b2, a1p, a2p, c1p, c2p)
                if s < best or (s == best and j < arg):
                    best = s
                    arg = j
        labels[i] = arg
        de[i] = best


@numba.njit(cache=True, nogil=True)
def ciede2000_to(lab, labels, pal_lab, de):
    """CIEDE2000 of every colour to the palette colour its label names."""
    for i in range(lab.shape[0]):
        j = labels[i]
        de[i] = ciede2000(lab[i, 0], lab[i, 1], lab[i, 2], pal_lab[j, 0], pal_lab[j, 1], pal_lab[j, 2])
