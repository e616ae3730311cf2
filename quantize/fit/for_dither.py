"""Fit a palette for a dither: its colours must be able to mix the image's colours.

A dither reproduces a colour by mixing palette colours side by side, and
side-by-side colours mix by area in linear light.  So a dither can render
exactly the colours in the convex hull of the palette in linear RGB; a colour
outside it comes out as the nearest colour on the hull's surface, flat,
whatever the dither does (a band with a hard edge where a gradient leaves the
hull).  A palette fitted for nearest-colour mapping puts its colours at the
weighted centres of clusters, inside the image's colour cloud, so the cloud's
extremes (the darkest and the lightest sky, the deepest shadow) lie outside
it.

:func:`spread_for_dither` moves the free palette colours outward until the
image's colours, all but a trimmed share of the pixels, lie in or within a
small tolerance of the hull.  Each step finds, for every colour outside,
its nearest point on the hull (barycentric weights over the palette colours)
and moves each palette colour by the weighted mean of the residuals it
carries: a Gauss-Newton step on the summed squared distance to the hull.  A
moved colour is then put back inside the image's own colour range (the hull
of its extreme colours), so the palette gains no colour the image lacks.
Locked colours do not move, nor do colours that a flat area of the image
matches exactly (:func:`palette_for_dither`): moved, that area would be
dithered into speckles.  Nothing is random, so the same seed still gives the
same palette.  :class:`quantize.fit.settings.FitSettings` ``for_dither``
asks for it; the ``reduce`` command does when it dithers.

The nearest hull point is the projection onto the simplex of barycentric
weights, solved by accelerated projected gradient (FISTA, A. Beck and
M. Teboulle, "A fast iterative shrinkage-thresholding algorithm for linear
inverse problems", SIAM J. Imaging Sci. 2(1), 183-202, 2009) with the
sort-based Euclidean projection onto the simplex of J. Duchi, S.
Shalev-Shwartz, Y. Singer and T. Chandra, "Efficient projections onto the
l1-ball for learning in high dimensions", ICML 2008.
"""

from __future__ import annotations

from typing import cast

import numpy as np

__all__ = ["extreme_colours", "flat_colours", "hull_weights", "palette_for_dither", "project_simplex",
           "spread_for_dither"]

#: Distance from the hull (linear light, 0-1 per channel) below which a colour
#: counts as mixable: about 1/4 of an 8-bit step at mid tones.
TOLERANCE = 1e-3
#: Share of the pixels, the furthest outside, that may stay outside the hull:
#: single noisy or specular pixels should not pull a colour out of the cloud
#: (common practice, no source).
TRIM = 0.004
#: Outer steps of the spreading at most.
STEPS = 40
#: Cells of colours the spreading follows at most, unless the coarser cells are still more.
MAX_CELLS = 8000
#: Steps between checks of every colour against the hull.
FULL_CHECK = 8
#: A step that moves no colour further than this (linear light) ends the spreading.
MIN_STEP = 2e-4


def project_simplex(v: np.ndarray) -> np.ndarray:
    """Euclidean projection of each row of ``v`` onto the probability simplex (Duchi et al. 2008)."""
    n, k = v.shape
    u = -np.sort(-v, axis=1)
    css = np.cumsum(u, axis=1) - 1.0
    ind = np.arange(1, k + 1)
    cond = u - css / ind > 0
    rho = k - 1 - np.argmax(cond[:, ::-1], axis=1)
    theta = css[np.arange(n), rho] / (rho + 1)
    return np.maximum(v - theta[:, None], 0.0)


def hull_weights(points: np.ndarray, vertices: np.ndarray, *, iterations: int = 150,
                 start: np.ndarray | None = None) -> np.ndarray:
    """Barycentric weights of the point of the vertices' convex hull nearest each point.

    Parameters
    ----------
    points : ndarray of shape (n, 3)
    vertices : ndarray of shape (k, 3)
    iterations : int
        FISTA steps; the residual converges as 1/iterations^2.
    start : ndarray of shape (n, k), optional
        Weights to start from (a previous solution); default: each point's
        nearest vertex.

    Returns
    -------
    ndarray of shape (n, k)
        Non-negative weights summing to 1 per row; ``weights @ vertices`` is
        the nearest hull point.
    """
    n, k = len(points), len(vertices)
    # The gradient's Lipschitz constant: the largest eigenvalue of V V^T,
    # which is that of the 3 x 3 V^T V.
    lip = max(float(np.linalg.eigvalsh(vertices.T @ vertices)[-1]), 1e-12)
    if start is not None:
        x = project_simplex(np.asarray(start, np.float64))
    else:
        # The nearest vertex: exact for points that a vertex already is.
        d = ((points[:, None, :] - vertices[None, :, :]) ** 2).sum(axis=2)
        x = np.zeros((n, k))
        x[np.arange(n), d.argmin(axis=1)] = 1.0
    y, t = x.copy(), 1.0
    for _ in range(iterations):
        x_new = project_simplex(y - ((y @ vertices - points) @ vertices.T) / lip)
        t_new = 0.5 * (1.0 + np.sqrt(1.0 + 4.0 * t * t))
        y = x_new + ((t - 1.0) / t_new) * (x_new - x)
        x, t = x_new, t_new
    return x


def _outside(points, vertices, start=None, iterations=150):
    w = hull_weights(points, vertices, start=start, iterations=iterations)
    resid = points - w @ vertices
    return w, resid, np.sqrt((resid**2).sum(axis=1))


def _candidates(colours_lin: np.ndarray, weights: np.ndarray):
    """Pool the colours into cells of *encoded* sRGB (weighted means in linear light).

    The hull needs no more detail; cells in encoded values keep the dark
    tones apart, where linear-light cells would pool a whole shadow range.
    Cells are 4 codes wide, or 8 where that leaves more than
    :data:`MAX_CELLS` of them (photos: the time goes with the cells).
    """
    from quantize.colour.spaces import linear_to_srgb

    enc = linear_to_srgb(colours_lin)
    for bits in (6, 5):
        cells = np.minimum((enc * (1 << bits)).astype(np.int64), (1 << bits) - 1)
        key = (cells[:, 0] << (2 * bits)) | (cells[:, 1] << bits) | cells[:, 2]
        _, inv = np.unique(key, return_inverse=True)
        if inv.max(initial=0) < MAX_CELLS:
            break
    w = np.bincount(inv, weights=weights)
    pts = np.stack([np.bincount(inv, weights=weights * colours_lin[:, c]) for c in range(3)], axis=1) / w[:, None]
    return pts, w


def _directions(n: int = 256) -> np.ndarray:
    """``n`` directions spread evenly over the sphere (a Fibonacci lattice), always the same."""
    i = np.arange(n) + 0.5
    z = 1.0 - 2.0 * i / n
    r = np.sqrt(1.0 - z * z)
    phi = np.pi * (3.0 - np.sqrt(5.0)) * i
    return np.stack([r * np.cos(phi), r * np.sin(phi), z], axis=1)


def extreme_colours(points: np.ndarray) -> np.ndarray:
    """The points furthest along each of a fixed set of directions: the corners of their hull, nearly."""
    return points[np.unique((points @ _directions().T).argmax(axis=0))]


def spread_for_dither(pal_lin: np.ndarray, fixed: np.ndarray, colours_lin: np.ndarray, weights: np.ndarray, *,
                      tolerance: float = TOLERANCE, trim: float = TRIM, steps: int = STEPS) -> np.ndarray:
    """Move the free palette colours until the colours lie in or near their hull (linear light).

    Parameters
    ----------
    pal_lin : ndarray of shape (k, 3)
        The palette in linear RGB, 0-1.
    fixed : ndarray of shape (k,), bool
        Colours that must not move (locked, or used exactly by flat areas).
    colours_lin : ndarray of shape (n, 3)
        The image's distinct colours in linear RGB, 0-1.
    weights : ndarray of shape (n,)
        Their pixel counts.
    tolerance : float
        Distance from the hull (linear light) that counts as inside.
    trim : float
        Share of the pixels, the furthest out, that may stay outside.
    steps : int
        Outer steps at most.

    Returns
    -------
    ndarray of shape (k, 3)
        The moved palette in linear RGB, within 0-1; equal to ``pal_lin``
        when every colour already lies in the hull.
    """
    pal = np.array(pal_lin, dtype=np.float64)
    free = ~np.asarray(fixed, bool)
    if len(pal) < 2 or not free.any():
        return pal
    pts, w = _candidates(np.clip(colours_lin, 0.0, 1.0), np.asarray(weights, np.float64))
    corners = extreme_colours(pts)
    allowed = trim * w.sum()
    bary_all = None
    for step_no in range(steps):
        if step_no % FULL_CHECK == 0:
            # Every colour, now and then; in between only those outside at
            # the last full check (the hull mostly grows, so colours inside
            # it stay inside), which saves most of the time on photos.
            bary_all, _, dist_all = _outside(pts, pal, start=bary_all, iterations=150 if step_no == 0 else 60)
            track = np.flatnonzero(dist_all > 0.1 * tolerance)
            if len(track) == 0:
                break
        # Step 0 is a full check, so bary_all is set from then on.
        bary_all = cast(np.ndarray, bary_all)
        bary, resid, dist = _outside(pts[track], pal, start=bary_all[track], iterations=50)
        bary_all[track] = bary
        tw = w[track]
        order = np.argsort(-dist, kind="stable")
        active = np.zeros(len(track), bool)
        active[order[np.cumsum(tw[order]) > allowed]] = True  # the furthest pixels up to the trimmed share go
        active &= dist > tolerance
        if not active.any():
            if step_no % FULL_CHECK == 0:
                break
            continue
        # Each palette colour moves by the mean residual of the colours
        # whose nearest hull point it carries, weighted by pixels and share.
        bw = bary[active] * tw[active, None]
        mass = bw.sum(axis=0)
        move = (bw.T @ resid[active]) / np.maximum(mass, 1e-300)[:, None]
        move[~free | (mass <= 0.0)] = 0.0
        moved = np.flatnonzero(np.abs(move).sum(axis=1) > 0.0)
        if len(moved) == 0:  # only fixed colours carry the colours outside
            break
        # A moved colour stays within the image's own colour range (the hull
        # of its colours): reaching far past the cloud's curved edges would
        # put garish colours in the palette, whose mixtures show as noise.
        inside = hull_weights(pal[moved] + move[moved], corners, iterations=400) @ corners
        step = np.clip(inside, 0.0, 1.0) - pal[moved]
        pal[moved] += step
        if np.abs(step).max() < MIN_STEP:  # settled: further steps would not show in 8 bits
            break
    return pal


#: A palette colour that this share of the pixels matches exactly (a flat
#: area: sky-free artwork, a background, a hill) does not move: moved, the
#: flat area would no longer be exact and would be dithered into speckles
#: (common practice, no source).
FLAT_SHARE = 0.02


def _exact_keys(sample) -> tuple[np.ndarray, np.ndarray]:
    """One integer per distinct colour of the sample (8-bit R, G, B), and whether it is exactly an 8-bit colour."""
    codes = np.asarray(sample.codes, np.int64)
    if sample.bit_depth == 16:
        exact8 = (codes % 257 == 0).all(axis=1)
        codes = codes // 257
    else:
        exact8 = np.ones(len(codes), bool)
    return (codes[:, 0] << 16) | (codes[:, 1] << 8) | codes[:, 2], exact8


def flat_colours(rgb8: np.ndarray, sample) -> np.ndarray:
    """Which palette colours (8-bit sRGB, (k, 3)) a share of at least FLAT_SHARE of the sample's pixels is exactly."""
    key, exact8 = _exact_keys(sample)
    pal_key = (rgb8[:, 0].astype(np.int64) << 16) | (rgb8[:, 1].astype(np.int64) << 8) | rgb8[:, 2]
    total = float(sample.weights.sum())
    out = np.zeros(len(rgb8), bool)
    for j, pk in enumerate(pal_key):
        hit = exact8 & (key == pk)
        out[j] = hit.any() and float(sample.weights[hit].sum()) >= FLAT_SHARE * total
    return out


#: When the flat colours (:func:`flat_colours`) are exactly this share of the
#: pixels or more, the picture is flat artwork: the dither has nothing to mix
#: but anti-aliased edges, and a spare colour spread outward only made those
#: edges noisier (filtered ΔE00 0.001-0.003 higher on the poster and sticker
#: samples at 8 and 16 colours, docs/dithering.md); the palette stays as
#: fitted (common practice, no source, for the share).
ARTWORK_SHARE = 0.95


def _flat_share(rgb8, flat, sample) -> float:
    """Share of the sample's pixels that are exactly one of the ``flat`` palette colours."""
    key, exact8 = _exact_keys(sample)
    pal = rgb8[flat].astype(np.int64)
    hit = exact8 & np.isin(key, (pal[:, 0] << 16) | (pal[:, 1] << 8) | pal[:, 2])
    return float(sample.weights[hit].sum()) / float(sample.weights.sum())


def palette_for_dither(palette, sample):
    """``palette`` with its free colours spread so a dither can mix the sample's colours.

    Parameters
    ----------
    palette : Palette
    sample : ColourSample
        The image's distinct colours and their pixel counts
        (:func:`quantize.core.sampling.sample_picture`).

    Returns
    -------
    palette : Palette
        Same size, locked colours and space; the record (if any) is kept
        with a note added.  The palette itself when nothing moved, and for
        flat artwork (:data:`ARTWORK_SHARE`).
    moved : int
        How many colours moved.
    """
    import dataclasses

    from quantize.colour.spaces import linear_to_srgb, srgb_to_linear

    flat = flat_colours(palette.rgb8, sample)
    if flat.any() and _flat_share(palette.rgb8, flat, sample) >= ARTWORK_SHARE:
        return palette, 0
    fixed = palette.locked | flat
    pal_lin = srgb_to_linear(palette.rgb8 / 255.0)
    new = spread_for_dither(pal_lin, fixed, srgb_to_linear(sample.float_rgb()), sample.weights)
    rgb8 = np.clip(np.rint(linear_to_srgb(new) * 255.0), 0, 255).astype(np.uint8)
    rgb8[fixed] = palette.rgb8[fixed]
    # Two colours spread onto one 8-bit colour: the later keeps its fitted colour.
    for j in range(len(rgb8)):
        if (rgb8[:j] == rgb8[j]).all(axis=1).any():
            rgb8[j] = palette.rgb8[j]
    moved = int((rgb8 != palette.rgb8).any(axis=1).sum())
    if moved == 0 or len(np.unique(rgb8, axis=0)) < len(rgb8):
        return palette, 0
    fit = palette.fit
    if fit is not None:
        note = (f"{moved} of {palette.k} colours moved outward for dithering, so mixtures of them reach "
                "the image's extreme colours")
        fit = dataclasses.replace(fit, notes=tuple(fit.notes) + (note,))
    # The palette's own class, not an import of it: the render stage calls
    # this module's hull_weights, and the palette module imports the render stage.
    return type(palette)(rgb8, palette.locked, palette.space, names=palette.names, fit=fit), moved
