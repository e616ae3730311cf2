"""Compiled kernels of the dithering stage (numba, cached on disk).

This module imports numba at its top, so it is imported only when a dither
is used (``quantize.render.dither`` imports it inside its functions).  The kernels
assume clean input: C-contiguous arrays of the dtypes the Python fronts in
:mod:`quantize.render.dither` prepare.  Plain-Python twins of every kernel live in
``tests/naive_dither.py``.

Shared conventions

* ``codes`` (H, W, 3) uint8 or uint16 sRGB codes, ``lut`` the linear-light
  value of every code (IEC 61966-2-1 decoding), so no power is evaluated per
  pixel.
* ``state`` (H, W) uint8: :data:`OPEN` (dither normally), :data:`CLEAR`
  (fully transparent: index 0, never dithered into, receives no error),
  :data:`PINNED` (the pixel is exactly a locked palette colour: it takes
  ``pinned[y, x]``, gives and receives no error) or :data:`FAR` (dithered
  like an open pixel, but its colour lies outside the palette's hull, so
  its diffusion target is held within the palette's range, ``box``).
* ``space`` 0 = CIELAB, 1 = OKLab x 100 (the working scales of
  :mod:`quantize.colour.spaces`); ``mat`` is linear RGB -> X/Xn, Y/Yn, Z/Zn for
  CIELAB, linear RGB -> LMS for OKLab, and ``mat2`` is Ottosson's M2.
* ``metric`` 0 = Euclidean distance in the space, 1 = CIEDE2000 (then
  ``pal_pts`` must hold CIELAB).
* ``pal_lin`` / ``pal_pts`` / ``pal_lab`` (k, 3): the palette in linear RGB,
  in the working space and in CIELAB; ``mat_lab`` is the CIELAB matrix, used
  to measure ΔE00 whatever the working space.

References: CIE 15:2004 (CIELAB), B. Ottosson (2020) (OKLab), G. Sharma,
W. Wu and E. N. Dalal, "The CIEDE2000 color-difference formula:
implementation notes, supplementary test data, and mathematical
observations", Color Res. Appl. 30(1), 21-30, 2005; the dithering methods
are cited in :mod:`quantize.render.dither`.
"""

from __future__ import annotations

import math

import numba
import numpy as np

__all__ = [
    "CLEAR",
    "FAR",
    "OPEN",
    "PINNED",
    "bracket",
    "ciede2000",
    "ciede2000_angles",
    "delta_e_rows",
    "diffuse",
    "diffuse_rows",
    "error_rows",
    "ordered",
]

OPEN, CLEAR, PINNED, FAR = 0, 1, 2, 3
#: Bounds of a diffusion target in linear light.  Wide enough that the error
#: of a normal dither never reaches them (clipping at 0-1 would discard the
#: negative error a dark pixel receives next to a light choice, and brighten
#: the image), narrow enough that colours outside the palette's hull cannot
#: pile up error without end (common practice, no source).
LOW, HIGH = -1.0, 2.0

_DELTA = 6.0 / 29.0
_DELTA3 = _DELTA**3
_SLOPE = 1.0 / (3.0 * _DELTA * _DELTA)
_POW25_7 = 25.0**7
_C30, _S30 = math.cos(math.radians(30.0)), math.sin(math.radians(30.0))
_C6, _S6 = math.cos(math.radians(6.0)), math.sin(math.radians(6.0))
_C63, _S63 = math.cos(math.radians(63.0)), math.sin(math.radians(63.0))


@numba.njit(cache=True, nogil=True)
def _f_lab(t):
    # CIE 15:2004 eq. 8.8: cube root above (6/29)^3, linear segment below.
    if t > _DELTA3:
        return np.cbrt(t)
    return t * _SLOPE + 4.0 / 29.0


@numba.njit(cache=True, nogil=True)
def to_space(r, g, b, mat, mat2, space):
    """Linear RGB (r, g, b) -> working-space triple (L 0-100)."""
    u = mat[0, 0] * r + mat[0, 1] * g + mat[0, 2] * b
    v = mat[1, 0] * r + mat[1, 1] * g + mat[1, 2] * b
    w = mat[2, 0] * r + mat[2, 1] * g + mat[2, 2] * b
    if space == 0:
        fx, fy, fz = _f_lab(u), _f_lab(v), _f_lab(w)
        return 116.0 * fy - 16.0, 500.0 * (fx - fy), 200.0 * (fy - fz)
    cu, cv, cw = np.cbrt(u), np.cbrt(v), np.cbrt(w)
    return (100.0 * (mat2[0, 0] * cu + mat2[0, 1] * cv + mat2[0, 2] * cw),
            100.0 * (mat2[1, 0] * cu + mat2[1, 1] * cv + mat2[1, 2] * cw),
            100.0 * (mat2[2, 0] * cu + mat2[2, 1] * cv + mat2[2, 2] * cw))


@numba.njit(cache=True, nogil=True)
def primed_c(a1, b1, c1, a2, b2, c2):
    """a' and C' of both colours from a, b and C*ab (Sharma et al. 2005, eqs. 2-6)."""
    cbar = 0.5 * (c1 + c2)
    c7 = cbar * cbar
    c7 = c7 * c7 * c7 * cbar  # products: a power call costs several times more
    g = 0.5 * (1.0 - math.sqrt(c7 / (c7 + _POW25_7)))
    a1p, a2p = (1.0 + g) * a1, (1.0 + g) * a2
    return a1p, a2p, math.sqrt(a1p * a1p + b1 * b1), math.sqrt(a2p * a2p + b2 * b2)


@numba.njit(cache=True, nogil=True)
def _primed(a1, b1, a2, b2):
    """a' and C' of both colours (Sharma et al. 2005, eqs. 2-6)."""
    return primed_c(a1, b1, math.sqrt(a1 * a1 + b1 * b1), a2, b2, math.sqrt(a2 * a2 + b2 * b2))


@numba.njit(cache=True, nogil=True)
def _weighted(L1, L2, c1p, c2p, dl, dc, dh, t, hdeg):
    """The weighted total of eqs. 17-22, given the differences, T and the mean hue in degrees."""
    u = (hdeg - 275.0) / 25.0
    dtheta = math.radians(30.0) * math.exp(-u * u)
    lbar = 0.5 * (L1 + L2)
    cbarp = 0.5 * (c1p + c2p)
    c7p = cbarp * cbarp
    c7p = c7p * c7p * c7p * cbarp
    rc = 2.0 * math.sqrt(c7p / (c7p + _POW25_7))
    l50 = (lbar - 50.0) * (lbar - 50.0)
    sl = 1.0 + 0.015 * l50 / math.sqrt(20.0 + l50)
    sc = 1.0 + 0.045 * cbarp
    sh = 1.0 + 0.015 * cbarp * t
    rt = -math.sin(2.0 * dtheta) * rc
    x, y, z = dl / sl, dc / sc, dh / sh
    return math.sqrt(max(x * x + y * y + z * z + rt * y * z, 0.0))


@numba.njit(cache=True, nogil=True)
def ciede2000(L1, a1, b1, L2, a2, b2):
    """CIEDE2000 of two CIELAB colours (kL = kC = kH = 1), Sharma et al. (2005).

    Works with the hue directions as unit vectors instead of angles: the
    mean hue of the standard (halfway along the shorter arc, eqs. 14) is the
    bisector of the two vectors, the hue difference's half-angle sine comes
    from their dot and cross products, and T from multiple-angle identities.
    That leaves one atan2, one exp and one sin per pair (the angle form takes
    eleven such calls).  Opposite hues, where the bisector is undefined, go
    through the angle form of :func:`ciede2000_angles`.
    """
    a1p, a2p, c1p, c2p = _primed(a1, b1, a2, b2)
    return from_primed(L1, a1, b1, L2, a2, b2, a1p, a2p, c1p, c2p)


@numba.njit(cache=True, nogil=True)
def from_primed(L1, a1, b1, L2, a2, b2, a1p, a2p, c1p, c2p):
    """The rest of :func:`ciede2000`, given a' and C' of both colours."""
    cc = c1p * c2p
    if cc == 0.0:
        # Eq. 10-14 for a neutral colour: no hue difference, and the mean
        # hue is the other colour's hue (h = 0 when both are neutral).
        sin_half = 0.0
        if c1p > 0.0:
            ch, sh = a1p / c1p, b1 / c1p
        elif c2p > 0.0:
            ch, sh = a2p / c2p, b2 / c2p
        else:
            ch, sh = 1.0, 0.0
    else:
        u1x, u1y = a1p / c1p, b1 / c1p
        u2x, u2y = a2p / c2p, b2 / c2p
        vx, vy = u1x + u2x, u1y + u2y
        vv = vx * vx + vy * vy
        # Within ~0.06 degrees of opposite the bisector loses digits.
        if vv < 1e-6:
            return ciede2000_angles(L1, a1, b1, L2, a2, b2)
        inv = 1.0 / math.sqrt(vv)
        ch, sh = vx * inv, vy * inv
        cos_d = u1x * u2x + u1y * u2y
        sin_d = u1x * u2y - u1y * u2x
        # sin(dh/2) by the formula that does not cancel in each half-range.
        if cos_d > 0.0:
            sin_half = sin_d / (2.0 * math.sqrt(0.5 * (1.0 + cos_d)))
        else:
            sin_half = math.copysign(math.sqrt(max(0.5 * (1.0 - cos_d), 0.0)), sin_d)
    dl = L2 - L1
    dc = c2p - c1p
    dh = 2.0 * math.sqrt(cc) * sin_half
    c2h, s2h = 2.0 * ch * ch - 1.0, 2.0 * sh * ch
    c3h, s3h = ch * (2.0 * c2h - 1.0), sh * (2.0 * c2h + 1.0)
    c4h, s4h = 2.0 * c2h * c2h - 1.0, 2.0 * s2h * c2h
    t = (1.0 - 0.17 * (ch * _C30 + sh * _S30) + 0.24 * c2h + 0.32 * (c3h * _C6 - s3h * _S6)
         - 0.20 * (c4h * _C63 + s4h * _S63))
    hdeg = math.degrees(math.atan2(sh, ch))
    if hdeg < 0.0:
        hdeg += 360.0
    return _weighted(L1, L2, c1p, c2p, dl, dc, dh, t, hdeg)


@numba.njit(cache=True, nogil=True)
def ciede2000_angles(L1, a1, b1, L2, a2, b2):
    """CIEDE2000 in the angle form of Sharma et al. (2005), eqs. 1-22."""
    a1p, a2p, c1p, c2p = _primed(a1, b1, a2, b2)
    h1p = math.atan2(b1, a1p) if (a1p != 0.0 or b1 != 0.0) else 0.0
    h2p = math.atan2(b2, a2p) if (a2p != 0.0 or b2 != 0.0) else 0.0
    if h1p < 0.0:
        h1p += 2.0 * math.pi
    if h2p < 0.0:
        h2p += 2.0 * math.pi
    dl = L2 - L1
    dc = c2p - c1p
    cc = c1p * c2p
    if cc == 0.0:
        dhp = 0.0
        hbar = h1p + h2p
    else:
        dhp = h2p - h1p
        if dhp > math.pi:
            dhp -= 2.0 * math.pi
        elif dhp < -math.pi:
            dhp += 2.0 * math.pi
        hbar = h1p + h2p
        if abs(h1p - h2p) > math.pi:
            hbar += 2.0 * math.pi if hbar < 2.0 * math.pi else -2.0 * math.pi
        hbar *= 0.5
    dh = 2.0 * math.sqrt(cc) * math.sin(0.5 * dhp)
    t = (1.0 - 0.17 * math.cos(hbar - math.radians(30.0)) + 0.24 * math.cos(2.0 * hbar)
         + 0.32 * math.cos(3.0 * hbar + math.radians(6.0)) - 0.20 * math.cos(4.0 * hbar - math.radians(63.0)))
    return _weighted(L1, L2, c1p, c2p, dl, dc, dh, t, math.degrees(hbar))


@numba.njit(cache=True, nogil=True)
def _nearest_euclid(p0, p1, p2, pal_pts):
    best = np.inf
    arg = 0
    for j in range(pal_pts.shape[0]):
        d0 = p0 - pal_pts[j, 0]
        d1 = p1 - pal_pts[j, 1]
        d2 = p2 - pal_pts[j, 2]
        s = d0 * d0 + d1 * d1 + d2 * d2
        # Strict '<': the lowest index wins a tie, as in the undithered mapping.
        if s < best:
            best = s
            arg = j
    return arg


@numba.njit(cache=True, nogil=True)
def _nearest(p0, p1, p2, pal_pts, metric):
    if metric == 0:
        return _nearest_euclid(p0, p1, p2, pal_pts)
    best = np.inf
    arg = 0
    for j in range(pal_pts.shape[0]):
        s = ciede2000(p0, p1, p2, pal_pts[j, 0], pal_pts[j, 1], pal_pts[j, 2])
        if s < best:
            best = s
            arg = j
    return arg


@numba.njit(cache=True, nogil=True)
def _reachable(o0, o1, o2, pal_pts, reach, allowed, dist):
    """Mark in ``allowed`` the palette colours within ``reach`` of the nearest one, seen from (o0, o1, o2).

    Distances are Euclidean in the choice space (``dist``, length k, is
    scratch space); the nearest colour itself is always marked.
    """
    k = pal_pts.shape[0]
    best = np.inf
    for j in range(k):
        d0 = o0 - pal_pts[j, 0]
        d1 = o1 - pal_pts[j, 1]
        d2 = o2 - pal_pts[j, 2]
        dist[j] = math.sqrt(d0 * d0 + d1 * d1 + d2 * d2)
        best = min(best, dist[j])
    for j in range(k):
        allowed[j] = dist[j] <= best + reach


@numba.njit(cache=True, nogil=True)
def _nearest_allowed(p0, p1, p2, pal_pts, metric, allowed):
    """:func:`_nearest` among the palette colours marked in ``allowed`` (lowest index wins a tie)."""
    best = np.inf
    arg = -1
    for j in range(pal_pts.shape[0]):
        if not allowed[j]:
            continue
        if metric == 0:
            d0 = p0 - pal_pts[j, 0]
            d1 = p1 - pal_pts[j, 1]
            d2 = p2 - pal_pts[j, 2]
            s = d0 * d0 + d1 * d1 + d2 * d2
        else:
            s = ciede2000(p0, p1, p2, pal_pts[j, 0], pal_pts[j, 1], pal_pts[j, 2])
        if s < best or arg < 0:
            best = s
            arg = j
    return arg


@numba.njit(cache=True, nogil=True)
def diffuse(codes, lut, state, pinned, pal_lin, pal_pts, mat, mat2, space, metric,
            off_dy, off_dx, off_w, strength, serpentine, mod, mod_amp, reach, box, out):
    """Error diffusion over the whole image; see :func:`diffuse_rows`."""
    err = np.zeros((error_rows(off_dy), state.shape[1], 3))
    diffuse_rows(codes, lut, state, pinned, pal_lin, pal_pts, mat, mat2, space, metric,
                 off_dy, off_dx, off_w, strength, serpentine, mod, mod_amp, reach, box, err, 0, state.shape[0],
                 out)


@numba.njit(cache=True, nogil=True)
def error_rows(off_dy):
    """Rows of error buffer a kernel needs: its reach below the current row, plus 1."""
    rows = 1
    for i in range(off_dy.shape[0]):
        rows = max(rows, off_dy[i] + 1)
    return rows


@numba.njit(cache=True, nogil=True)
def diffuse_rows(codes, lut, state, pinned, pal_lin, pal_pts, mat, mat2, space, metric,
                 off_dy, off_dx, off_w, strength, serpentine, mod, mod_amp, reach, box, err, y0, y1, out):
    """Error diffusion in linear light of rows y0..y1; writes palette indices into ``out``.

    The target of each open pixel is its linear RGB plus the error it has
    received, held within LOW-HIGH; it takes the nearest palette colour (in the
    working space) and passes ``strength * (target - colour)`` on to the
    open neighbours of the kernel (``off_dy``, ``off_dx``, ``off_w``, with
    ``dx`` mirrored on right-to-left rows), renormalised over the neighbours
    that exist and are open, so no error falls off an edge or into a hole.
    ``err`` (:func:`error_rows`, W, 3), zero at the start, carries the error
    between calls, so consecutive bands of rows give the same result as one
    call over the whole image.

    Threshold modulation: the *choice* is made with the target's lightness
    (the first coordinate of the working space, L* or OKLab L x 100) moved by
    ``mod_amp * mod[y % mh, x % mw]`` (``mod`` a tiled mask of values in
    -0.5-0.5); the error passed on is still measured from the unmoved
    target, so the mean light is kept.  The mask's fixed, patternless offsets
    stop the long regular runs (worms) that form where a target sits just
    beside a palette colour.  ``mod_amp = 0`` is plain error diffusion.

    Reach: a pixel may take only the palette colours whose distance (choice
    space, Euclidean) from the pixel's *own* colour exceeds the distance of
    its own nearest colour by at most ``reach``.  Received error can then
    push a pixel to a neighbouring palette colour, but not to a far one (a
    dark purple dot in an orange sky, where the palette holds no dark
    orange); the error that is not discharged stays in the diffusion.
    ``reach = inf`` lets every colour be chosen.

    Pixels outside the hull (state :data:`FAR`): the target is held within
    ``box`` (2, 3), the lowest and highest linear value of each channel over
    the palette, instead of LOW-HIGH.  Error that pushes such a pixel further
    out than any palette colour reaches can never be discharged there; held,
    it would pile up across a whole out-of-gamut area and come out as far
    colours (dark dots in a light area) or be dumped at its edge (a dark rim).
    """
    h, w = state.shape
    mh, mw = mod.shape
    rows = err.shape[0]
    n_off = off_dy.shape[0]
    ring = np.empty(n_off, dtype=np.int64)  # buffer row of each offset, once per image row
    allowed = np.ones(pal_pts.shape[0], dtype=np.bool_)
    dist = np.empty(pal_pts.shape[0])  # scratch of _reachable, allocated once
    restrict = reach != np.inf
    for y in range(y0, y1):
        cur = y % rows
        for i in range(n_off):
            ring[i] = (y + off_dy[i]) % rows
        backward = serpentine and (y % 2 == 1)
        for step in range(w):
            x = w - 1 - step if backward else step
            s = state[y, x]
            if s == CLEAR:
                out[y, x] = 0
                continue
            if s == PINNED:
                out[y, x] = pinned[y, x]
                continue
            if s == FAR:
                r = min(max(lut[codes[y, x, 0]] + err[cur, x, 0], box[0, 0]), box[1, 0])
                g = min(max(lut[codes[y, x, 1]] + err[cur, x, 1], box[0, 1]), box[1, 1])
                b = min(max(lut[codes[y, x, 2]] + err[cur, x, 2], box[0, 2]), box[1, 2])
            else:
                r = min(max(lut[codes[y, x, 0]] + err[cur, x, 0], LOW), HIGH)
                g = min(max(lut[codes[y, x, 1]] + err[cur, x, 1], LOW), HIGH)
                b = min(max(lut[codes[y, x, 2]] + err[cur, x, 2], LOW), HIGH)
            p0, p1, p2 = to_space(r, g, b, mat, mat2, space)
            shift = mod_amp * mod[y % mh, x % mw]
            if restrict:
                o0, o1, o2 = to_space(lut[codes[y, x, 0]], lut[codes[y, x, 1]], lut[codes[y, x, 2]], mat, mat2,
                                      space)
                _reachable(o0, o1, o2, pal_pts, reach, allowed, dist)
                j = _nearest_allowed(p0 + shift, p1, p2, pal_pts, metric, allowed)
            else:
                j = _nearest(p0 + shift, p1, p2, pal_pts, metric)
            out[y, x] = j
            er = strength * (r - pal_lin[j, 0])
            eg = strength * (g - pal_lin[j, 1])
            eb = strength * (b - pal_lin[j, 2])
            # One pass hands out the shares; only where some neighbour is
            # missing (edge, hole, pinned) does a second pass top them up to
            # w / total.  The weights sum to 1.
            total = 0.0
            for i in range(n_off):
                yy = y + off_dy[i]
                xx = x - off_dx[i] if backward else x + off_dx[i]
                if yy < h and 0 <= xx < w and (state[yy, xx] == OPEN or state[yy, xx] == FAR):
                    f = off_w[i]
                    total += f
                    row = ring[i]
                    err[row, xx, 0] += er * f
                    err[row, xx, 1] += eg * f
                    err[row, xx, 2] += eb * f
            if 0.0 < total < 1.0 - 1e-9:
                extra = 1.0 / total - 1.0
                for i in range(n_off):
                    yy = y + off_dy[i]
                    xx = x - off_dx[i] if backward else x + off_dx[i]
                    if yy < h and 0 <= xx < w and (state[yy, xx] == OPEN or state[yy, xx] == FAR):
                        f = off_w[i] * extra
                        row = ring[i]
                        err[row, xx, 0] += er * f
                        err[row, xx, 1] += eg * f
                        err[row, xx, 2] += eb * f
        err[cur, :, :] = 0.0


@numba.njit(cache=True, parallel=True, nogil=True)
def bracket(colours, lut, pal_lin, pal_pts, pal_lab, mat, mat2, mat_lab, space, metric,
            near, other, share, de_near, de_other):
    """The two palette colours that bracket each distinct colour (ordered dithers).

    For each colour (codes, shape (n, 3)): its nearest palette colour ``p``
    (working space) in ``near``; in ``other`` the partner ``q``, the palette
    colour whose segment p-q passes closest to the colour in linear RGB; in
    ``share`` the colour's position ``alpha`` along that segment (0 at p,
    clipped to 0-1; 0 and q = p when no segment helps); and the CIEDE2000 of
    the colour to p and to q.
    """
    k = pal_lin.shape[0]
    # Segment directions and their inverse squared lengths, once per palette.
    seg = np.zeros((k, k, 3))
    inv_len2 = np.zeros((k, k))
    for p in range(k):
        for q in range(k):
            dd = 0.0
            for c in range(3):
                seg[p, q, c] = pal_lin[q, c] - pal_lin[p, c]
                dd += seg[p, q, c] * seg[p, q, c]
            if dd > 0.0:
                inv_len2[p, q] = 1.0 / dd
    for i in numba.prange(colours.shape[0]):
        r, g, b = lut[colours[i, 0]], lut[colours[i, 1]], lut[colours[i, 2]]
        p0, p1, p2 = to_space(r, g, b, mat, mat2, space)
        if space == 0:
            L, A, B = p0, p1, p2
        else:
            L, A, B = to_space(r, g, b, mat_lab, mat2, 0)
        j = _nearest(p0, p1, p2, pal_pts, metric)
        er, eg, eb = r - pal_lin[j, 0], g - pal_lin[j, 1], b - pal_lin[j, 2]
        best = er * er + eg * eg + eb * eb
        partner = j
        alpha = 0.0
        for q in range(k):
            il = inv_len2[j, q]
            if q == j or il == 0.0:
                continue
            dr, dg, db = seg[j, q, 0], seg[j, q, 1], seg[j, q, 2]
            a = (er * dr + eg * dg + eb * db) * il
            if a <= 0.0:
                continue
            a = min(a, 1.0)
            rr, rg, rb = er - a * dr, eg - a * dg, eb - a * db
            dist = rr * rr + rg * rg + rb * rb
            if dist < best:
                best = dist
                partner = q
                alpha = a
        near[i], other[i], share[i] = j, partner, alpha
        de_near[i] = ciede2000(L, A, B, pal_lab[j, 0], pal_lab[j, 1], pal_lab[j, 2])
        if partner == j:
            de_other[i] = de_near[i]
        else:
            de_other[i] = ciede2000(L, A, B, pal_lab[partner, 0], pal_lab[partner, 1], pal_lab[partner, 2])


@numba.njit(cache=True, parallel=True, nogil=True)
def ordered(inverse, state, pinned, thresholds, strength, near, other, share, de_near, de_other, out, de):
    """Ordered dither of pixels through the per-colour table of :func:`bracket`.

    ``inverse`` (H, W) is each pixel's row in that table.  A pixel becomes
    its colour's partner q where the tiled threshold is below
    ``strength * alpha``, else its nearest colour p: over an area a fraction
    alpha of q in linear light, the mix the eye integrates.  ``de`` gets each
    pixel's CIEDE2000 (NaN where clear).
    """
    h, w = state.shape
    th, tw = thresholds.shape
    for y in numba.prange(h):
        for x in range(w):
            s = state[y, x]
            if s == CLEAR:
                out[y, x] = 0
                de[y, x] = np.nan
                continue
            i = inverse[y, x]
            if s == PINNED:
                # Exactly a locked colour, hence (palettes hold no repeats) its own nearest.
                out[y, x] = pinned[y, x]
                de[y, x] = de_near[i]
            elif thresholds[y % th, x % tw] < strength * share[i]:
                out[y, x] = other[i]
                de[y, x] = de_other[i]
            else:
                out[y, x] = near[i]
                de[y, x] = de_near[i]


#: log2 of the entries of a ΔE00 memo table (1 MiB per table).
_CACHE_BITS = 16


@numba.njit(cache=True, nogil=True)
def _slot(key):
    # Knuth's multiplicative hashing of the key folded to 32 bits; the
    # product stays below 2**64, so nothing overflows with or without the JIT.
    folded = np.uint64((key ^ (key >> 32)) & 0xFFFFFFFF)
    mixed = (folded * np.uint64(2654435761)) & np.uint64(0xFFFFFFFF)
    return np.int64(mixed >> np.uint64(32 - _CACHE_BITS))


@numba.njit(cache=True, nogil=True)
def delta_e_rows(codes, lut, state, indices, pal_lab, mat, y0, y1, out):
    """CIEDE2000 of each pixel of rows y0..y1 to its palette colour (NaN where clear).

    Runs on the calling thread, so it can measure finished rows beside the
    sequential diffusion.  A small direct-mapped memo of (codes, index) ->
    ΔE00 lets repeated colours (flat artwork, smooth photo areas) skip the
    formula; a hit returns the very value computed before.
    """
    w = state.shape[1]
    empty = np.zeros((3, 3))
    size = 1 << _CACHE_BITS
    keys = np.full(size, -1, dtype=np.int64)
    vals = np.empty(size)
    for y in range(y0, y1):
        for x in range(w):
            if state[y, x] == CLEAR:
                out[y, x] = np.nan
                continue
            j = indices[y, x]
            r, g, b = codes[y, x, 0], codes[y, x, 1], codes[y, x, 2]
            key = ((np.int64(r) << 32) | (np.int64(g) << 16) | np.int64(b)) * 256 + j
            slot = _slot(key)
            if keys[slot] == key:
                out[y, x] = vals[slot]
                continue
            L, a, bb = to_space(lut[r], lut[g], lut[b], mat, empty, 0)
            v = ciede2000(L, a, bb, pal_lab[j, 0], pal_lab[j, 1], pal_lab[j, 2])
            keys[slot] = key
            vals[slot] = v
            out[y, x] = v
