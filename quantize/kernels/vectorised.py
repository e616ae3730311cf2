"""The engine's kernels as whole-array numpy code: no compiler to load.

Most jobs give the kernels a few thousand to a few hundred thousand
distinct colours and a palette of at most a few dozen.  At that size these
functions finish in milliseconds, less than loading a JIT compiler would
take, so :mod:`quantize.kernels.nearest` runs them and loads the compiled
loops of :mod:`quantize.kernels.engine_loops` only for large inputs.  The
choice depends on the input's size alone, never on timing.

The kernels assume clean input: C-contiguous float64 arrays of matching
dimension.  Rows are handled in blocks of :data:`BLOCK`, which keeps the
temporaries in cache and the memory bounded whatever the number of rows.
Their plain brute-force twins live in ``tests/naive.py``.

References: G. Sharma, W. Wu and E. N. Dalal, "The CIEDE2000 color-difference
formula: implementation notes, supplementary test data, and mathematical
observations", Color Res. Appl. 30(1), 21-30, 2005.
"""

from __future__ import annotations

import math

import numpy as np

__all__ = ["BLOCK", "assign_euclid", "assign_euclid_two", "squared_to", "centre_sums", "ciede2000_pairs",
           "nearest_ciede2000", "nearest_ciede2000_columns", "ciede2000_to_columns"]

#: Rows per block: about a dozen float64 temporaries of this length stay
#: in a core's cache, which makes numpy two to three times faster than on
#: whole arrays of a hundred thousand colours.
BLOCK = 1 << 13

_POW25_7 = 25.0**7
_C30, _S30 = math.cos(math.radians(30.0)), math.sin(math.radians(30.0))
_C6, _S6 = math.cos(math.radians(6.0)), math.sin(math.radians(6.0))
_C63, _S63 = math.cos(math.radians(63.0)), math.sin(math.radians(63.0))


def _square_tables(points: np.ndarray, centres: np.ndarray):
    """(lo, hi, table) per block of rows: squared distances of points[lo:hi] to every centre.

    The squared distance is summed coordinate by coordinate in order (no
    ``|x|^2 - 2 x.c + |c|^2`` expansion, whose rounding can pick the wrong
    centre in a near tie), exactly as :func:`squared_to` and the compiled
    :func:`quantize.kernels.engine_loops.assign_euclid` sum it.
    """
    n, d = points.shape
    k = centres.shape[0]
    # A (rows, k) table per block, a few numpy calls per coordinate: a loop
    # over the centres would make k times as many calls on short rows.
    rows = max(1, (8 * BLOCK) // k)
    for lo in range(0, n, rows):
        hi = min(n, lo + rows)
        acc = np.subtract(points[lo:hi, 0, None], centres[None, :, 0])
        np.multiply(acc, acc, out=acc)
        for t in range(1, d):
            u = np.subtract(points[lo:hi, t, None], centres[None, :, t])
            np.multiply(u, u, out=u)
            acc += u
        yield lo, hi, acc


def assign_euclid(points: np.ndarray, centres: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Nearest centre of every point by squared Euclidean distance.

    Bit-identical to the compiled
    :func:`quantize.kernels.engine_loops.assign_euclid` (see
    :func:`_square_tables`).

    Parameters
    ----------
    points : ndarray of shape (n, d)
    centres : ndarray of shape (k, d)

    Returns
    -------
    labels : ndarray of shape (n,), intp
        Index of the nearest centre; the lowest index wins a tie.
    dist2 : ndarray of shape (n,), float64
        Squared distance to that centre (infinite when there is none).
    """
    labels, dist2, _ = assign_euclid_two(points, centres, second=False)
    return labels, dist2


def assign_euclid_two(points: np.ndarray, centres: np.ndarray, *, second: bool = True):
    """:func:`assign_euclid`, and the squared distance to the second-nearest centre.

    Returns
    -------
    labels, dist2 : as :func:`assign_euclid`
    second2 : ndarray of shape (n,) or None
        Squared distance to the nearest centre but ``labels`` (infinite when
        there is one centre); None unless ``second``.
    """
    n = points.shape[0]
    k = centres.shape[0]
    if k == 0:  # no centre is infinitely far, as in the compiled loop
        return np.zeros(n, dtype=np.intp), np.full(n, np.inf), (np.full(n, np.inf) if second else None)
    labels = np.empty(n, dtype=np.intp)
    dist2 = np.empty(n, dtype=np.float64)
    second2 = np.full(n, np.inf) if second else None
    for lo, hi, acc in _square_tables(points, centres):
        # argmin takes the first minimum: the lowest index wins a tie.
        best = acc.argmin(axis=1)
        rows = np.arange(hi - lo)
        labels[lo:hi] = best
        dist2[lo:hi] = acc[rows, best]
        if second2 is not None and k > 1:
            acc[rows, best] = np.inf
            second2[lo:hi] = acc.min(axis=1)
    return labels, dist2, second2


def squared_to(columns, centres: np.ndarray, labels: np.ndarray) -> np.ndarray:
    """Squared distance of every point to the centre ``labels`` names, summed as :func:`assign_euclid` sums it.

    ``columns`` holds the points' coordinates as contiguous columns (a
    sequence of d arrays of shape (n,)): each step then reads memory in
    order.
    """
    acc = np.subtract(columns[0], np.take(centres[:, 0], labels))
    np.multiply(acc, acc, out=acc)
    for t in range(1, len(columns)):
        u = np.subtract(columns[t], np.take(centres[:, t], labels))
        np.multiply(u, u, out=u)
        acc += u
    return acc


def centre_sums(points: np.ndarray, weights: np.ndarray, labels: np.ndarray, k: int):
    """Per-label sum of weights, shape (k,), and of weighted points, shape (k, d).

    ``np.bincount`` adds each rounded product in index order, as the
    compiled :func:`quantize.kernels.engine_loops.centre_sums` does, so both
    give bit-identical sums.
    """
    wsum = np.bincount(labels, weights=weights, minlength=k)
    sums = np.stack([np.bincount(labels, weights=weights * points[:, t], minlength=k)
                     for t in range(points.shape[1])], axis=1)
    return wsum, sums


def _sqrt_c7_ratio(c):
    c7 = c * c
    c7 = c7 * c7 * c7 * c
    return np.sqrt(c7 / (c7 + _POW25_7))


def _primed(a1, b1, c1, a2, b2, c2):
    """a' and C' of both colours (Sharma et al. 2005, eqs. 2-6)."""
    g1 = 1.0 + 0.5 * (1.0 - _sqrt_c7_ratio(0.5 * (c1 + c2)))
    a1p, a2p = g1 * a1, g1 * a2
    return a1p, a2p, np.sqrt(a1p * a1p + b1 * b1), np.sqrt(a2p * a2p + b2 * b2)


def _angle_form(L1, a1, b1, L2, a2, b2):
    """CIEDE2000 in the angle form of eqs. 1-22, for hues too near opposite for the bisector."""
    c1, c2 = np.sqrt(a1 * a1 + b1 * b1), np.sqrt(a2 * a2 + b2 * b2)
    a1p, a2p, c1p, c2p = _primed(a1, b1, c1, a2, b2, c2)
    h1 = np.arctan2(b1, a1p) % (2.0 * np.pi)
    h2 = np.arctan2(b2, a2p) % (2.0 * np.pi)
    cc = c1p * c2p
    # Exactly opposite hues are 180 degrees apart, decided from the coordinates (as colour.spaces does).
    opposite = (a1p * b2 == a2p * b1) & (a1p * a2p + b1 * b2 < 0.0)
    dhp = h2 - h1
    wrapped = np.where(dhp > np.pi, dhp - 2.0 * np.pi, np.where(dhp < -np.pi, dhp + 2.0 * np.pi, dhp))
    dhp = np.where(opposite, dhp, wrapped)
    hbar = h1 + h2
    shift = (np.abs(h1 - h2) > np.pi) & (cc != 0.0) & ~opposite
    hbar = np.where(shift, np.where(hbar < 2.0 * np.pi, hbar + 2.0 * np.pi, hbar - 2.0 * np.pi), hbar)
    hbar = np.where(cc != 0.0, 0.5 * hbar, hbar)
    dh = 2.0 * np.sqrt(cc) * np.sin(0.5 * np.where(cc != 0.0, dhp, 0.0))
    t = (1.0 - 0.17 * np.cos(hbar - math.radians(30.0)) + 0.24 * np.cos(2.0 * hbar)
         + 0.32 * np.cos(3.0 * hbar + math.radians(6.0)) - 0.20 * np.cos(4.0 * hbar - math.radians(63.0)))
    return _weighted(L1, L2, c1p, c2p, L2 - L1, c2p - c1p, dh, t, np.degrees(hbar))


def _weighted(L1, L2, c1p, c2p, dl, dc, dh, t, hdeg):
    """The weighted total of eqs. 17-22, given the differences, T and the mean hue in degrees."""
    u = (hdeg - 275.0) / 25.0
    # Clamped where exp underflows to a float32 denormal (slow): the term is below 1e-26 there.
    dtheta = math.radians(30.0) * np.exp(-np.minimum(u * u, 60.0))
    cbarp = 0.5 * (c1p + c2p)
    rc = 2.0 * _sqrt_c7_ratio(cbarp)
    l50 = 0.5 * (L1 + L2) - 50.0
    l50 = l50 * l50
    x = dl / (1.0 + 0.015 * l50 / np.sqrt(20.0 + l50))
    y = dc / (1.0 + 0.045 * cbarp)
    z = dh / (1.0 + 0.015 * cbarp * t)
    s = x * x + y * y + z * z - np.sin(2.0 * dtheta) * rc * y * z
    return np.sqrt(np.maximum(s, 0.0))


def ciede2000_pairs(L1, a1, b1, L2, a2, b2) -> np.ndarray:
    """CIEDE2000 of colour pairs (kL = kC = kH = 1), broadcasting to a 1-d result.

    The hue directions are handled as unit vectors, as the compiled
    :func:`quantize.kernels.dither_loops.ciede2000` does: the mean hue is the
    bisector u of the two directions, sin(dh'/2) is their cross product over
    |u|, T follows from multiple-angle identities, and a pair costs one
    arctan2, one exp and one sin.  Pairs with a neutral colour and pairs
    whose hues are within about 0.06 degrees of opposite (where the bisector
    loses digits) go through the angle form.  Equal to the angle form of
    :func:`quantize.colour.spaces.delta_e_ciede2000` to rounding.

    Parameters
    ----------
    L1, a1, b1, L2, a2, b2 : float64 ndarray of shape (n,) or float
        At least one of them 1-d.
    """
    c1, c2 = np.sqrt(a1 * a1 + b1 * b1), np.sqrt(a2 * a2 + b2 * b2)
    a1p, a2p, c1p, c2p = _primed(a1, b1, c1, a2, b2, c2)
    cc = c1p * c2p
    with np.errstate(divide="ignore", invalid="ignore"):
        i1, i2 = 1.0 / c1p, 1.0 / c2p
        u1x, u1y, u2x, u2y = a1p * i1, b1 * i1, a2p * i2, b2 * i2
        vx, vy = u1x + u2x, u1y + u2y
        vv = vx * vx + vy * vy
        inv = 1.0 / np.sqrt(vv)
        ch, sh = vx * inv, vy * inv
        # |u1 + u2| = 2 cos(dh'/2), so the cross product over it is sin(dh'/2).
        dh = 2.0 * np.sqrt(cc) * ((u1x * u2y - u1y * u2x) * inv)
    c2h, s2h = 2.0 * ch * ch - 1.0, 2.0 * sh * ch
    c3h, s3h = ch * (2.0 * c2h - 1.0), sh * (2.0 * c2h + 1.0)
    c4h, s4h = 2.0 * c2h * c2h - 1.0, 2.0 * s2h * c2h
    t = (1.0 - 0.17 * (ch * _C30 + sh * _S30) + 0.24 * c2h + 0.32 * (c3h * _C6 - s3h * _S6)
         - 0.20 * (c4h * _C63 + s4h * _S63))
    hdeg = np.degrees(np.arctan2(sh, ch))
    hdeg += 360.0 * (hdeg < 0.0)
    with np.errstate(invalid="ignore"):
        de = _weighted(L1, L2, c1p, c2p, L2 - L1, c2p - c1p, dh, t, hdeg)
    # NaN where a colour is neutral (0/0) and where the bisector vanishes.
    redo = ~(vv >= 1e-6)
    if np.any(redo):
        full = np.broadcast_arrays(L1, a1, b1, L2, a2, b2, de)
        rows = np.nonzero(np.broadcast_to(redo, de.shape))
        de[rows] = _angle_form(*(v[rows] for v in full[:6]))
    return de


def _lightness2(L1, L2):
    """(dL'/S_L)^2: CIEDE2000's lightness term (eqs. 16-17, 19), a lower bound on its square."""
    l50 = 0.5 * (L1 + L2) - 50.0
    l50 = l50 * l50
    x = (L2 - L1) / (1.0 + 0.015 * l50 / np.sqrt(20.0 + l50))
    return x * x


def nearest_ciede2000(lab: np.ndarray, pal_lab: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Exact nearest palette colour of every CIELAB colour by CIEDE2000, and its ΔE00.

    Each colour is first measured against its nearest palette colour in
    CIELAB.  Another palette colour is measured only where CIEDE2000's
    lightness term alone (a lower bound on its square) does not exceed that
    first square; all the pairs left are measured in one call.  The result
    equals a full scan, the lowest index winning a tie.

    Parameters
    ----------
    lab : ndarray of shape (n, 3)
    pal_lab : ndarray of shape (k, 3), k >= 1

    Returns
    -------
    labels : ndarray of shape (n,), intp
    delta_e : ndarray of shape (n,), float64
    """
    return nearest_ciede2000_columns(lab[:, 0], lab[:, 1], lab[:, 2], pal_lab)


def nearest_ciede2000_columns(L: np.ndarray, a: np.ndarray, b: np.ndarray, pal_lab: np.ndarray
                              ) -> tuple[np.ndarray, np.ndarray]:
    """:func:`nearest_ciede2000` of colours given as three columns, computed in their dtype.

    Contiguous float32 columns take about a third of the time of the
    columns of a float64 (n, 3) array; the result is then the full scan's
    under float32 rounding.

    Returns
    -------
    labels : ndarray of shape (n,), intp
    delta_e : ndarray of shape (n,), the columns' dtype
    """
    n, k = L.shape[0], pal_lab.shape[0]
    pal = pal_lab.astype(L.dtype, copy=False)
    labels = np.empty(n, dtype=np.intp)
    de = np.empty(n, dtype=L.dtype)
    pL, pa, pb = pal[:, 0], pal[:, 1], pal[:, 2]
    block = max(64, (4 * BLOCK) // k)  # about 2 BLOCK measured pairs per block
    for lo in range(0, n, block):
        hi = min(n, lo + block)
        Lb, ab, bb = L[lo:hi], a[lo:hi], b[lo:hi]
        rows = np.arange(hi - lo)
        # The nearest palette colour in CIELAB: the first guess only; the
        # bound below makes the result exact whatever the guess.
        d2 = np.square(Lb[:, None] - pL[None, :])
        d2 += np.square(ab[:, None] - pa[None, :])
        d2 += np.square(bb[:, None] - pb[None, :])
        start = d2.argmin(axis=1)
        d0 = ciede2000_pairs(Lb, ab, bb, pL[start], pa[start], pb[start])
        # Margins of 1e-6 keep rounding in the bound from skipping a tie.
        limit = d0 * d0 * (1.0 + 1e-6) + 1e-30
        open_ = _lightness2(Lb[:, None], pL[None, :]) <= limit[:, None]
        open_[rows, start] = False
        r, c = np.nonzero(open_)
        # Every pair not measured stays infinite: argmin over the full row
        # is then the full scan's choice, lowest index first on a tie.
        table = np.full((hi - lo, k), np.inf, dtype=L.dtype)
        table[rows, start] = d0
        table[r, c] = ciede2000_pairs(Lb[r], ab[r], bb[r], pL[c], pa[c], pb[c])
        best = table.argmin(axis=1)
        labels[lo:hi] = best
        de[lo:hi] = table[rows, best]
    return labels, de


def ciede2000_to_columns(L: np.ndarray, a: np.ndarray, b: np.ndarray, pal_lab: np.ndarray,
                         labels: np.ndarray) -> np.ndarray:
    """CIEDE2000 of every colour (three columns) to the palette colour ``labels`` names, in the columns' dtype."""
    n = L.shape[0]
    pal = pal_lab.astype(L.dtype, copy=False)
    de = np.empty(n, dtype=L.dtype)
    for lo in range(0, n, BLOCK):
        hi = min(n, lo + BLOCK)
        lb = labels[lo:hi]
        de[lo:hi] = ciede2000_pairs(L[lo:hi], a[lo:hi], b[lo:hi], pal[lb, 0], pal[lb, 1], pal[lb, 2])
    return de
