"""Seams between two inks: anti-aliased pixels go to one of the two, never to a third.

Exported artwork blends the two colours on either side of every edge. Mapped
to the nearest palette colour, such a blend often lands on a third ink (a
mid-tone between navy and cream is nearest to teal), and the film of that
third ink gets a hairline along the edge that the art never had.

:func:`resolve_seams` finds those pixels and gives each to one of the two inks
it is a blend of: the one it is closer to along the line between them in
CIELAB (projection onto the segment, cut at the middle).

A pixel is a seam pixel when

* within ``radius`` pixels it has two inks ``a`` and ``b`` other than its
  own (each on at least ``min_neighbours`` pixels),
* of all the pairs of inks in that window (its own ink included), the
  segment from ``a`` to ``b`` passes closest (ΔE00) to its colour: a pixel
  that blends its own ink with a neighbour keeps its ink, and
* its colour lies closer (ΔE00) to that segment than to its own ink (times
  ``ratio``): it is a blend of the two, not the third ink.

A deliberate line of a third ink keeps its own colour, far from the segment
between its neighbours, so it stays.

In a reduced image (every pixel exactly a palette colour) a sliver has the
third ink's own colour; only its width tells it apart. So a run of an ink one
pixel wide, with the two other inks as its 8-neighbours, is an edge blend
too when that ink lies between them: its projection falls inside the middle
of their CIELAB segment and the pixel is within a fraction of the segment's
ΔE00 of it. A drawn one-pixel line of such an in-between colour cannot be
told from a blend; separating the original artwork with the saved palette
keeps the blends' own colours and avoids the question.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

__all__ = ["SeamReport", "resolve_seams"]

_MAX_PASSES = 4
# A one-pixel run of an ink is an edge blend when that ink's projection falls inside this part of the
# segment between its two neighbours and the pixel lies within this fraction of the segment's ΔE00
# from it (common practice, no source: teal between navy and cream sits at about 0.35).
_BETWEEN = (0.1, 0.9)
_THIN_RESIDUAL = 0.4


@dataclass(frozen=True)
class SeamReport:
    """What :func:`resolve_seams` changed.

    Attributes
    ----------
    pixels_changed : int
        Pixels moved from a third ink to one of the two inks they blend.
    by_ink : dict
        Palette index -> pixels taken from that ink.
    radius : int
        Window radius in pixels.
    """

    pixels_changed: int
    by_ink: dict
    radius: int

    def to_dict(self) -> dict:
        """The report as the manifest lists it."""
        return {"pixels_changed": self.pixels_changed, "radius_px": self.radius,
                "taken_from": {str(k): v for k, v in sorted(self.by_ink.items())},
                "rule": "a pixel whose colour is a blend of two neighbouring inks (closer in ΔE00 to the "
                        "CIELAB segment between them than to its own ink), or a one-pixel run of an ink "
                        "that lies between the two inks on either side, goes to the nearer of the two "
                        "along that segment"}


def _offsets(radius: int) -> list[tuple[int, int]]:
    return [(dy, dx) for dy in range(-radius, radius + 1) for dx in range(-radius, radius + 1) if dy or dx]


def _grow(mask: np.ndarray, radius: int) -> np.ndarray:
    """Square dilation by ``radius`` pixels (separable: rows, then columns)."""
    out = mask.copy()
    for axis in (0, 1):
        src = out.copy()
        for r in range(1, radius + 1):
            if axis == 0:
                out[r:] |= src[:-r]
                out[:-r] |= src[r:]
            else:
                out[:, r:] |= src[:, :-r]
                out[:, :-r] |= src[:, r:]
    return out


def _neighbour_inks(indices: np.ndarray, usable: np.ndarray, radius: int,
                    focus: np.ndarray | None = None) -> tuple[tuple, np.ndarray]:
    """Coordinates of pixels (within ``focus``) whose window holds another ink, and the window's inks
    (-1: none) per pixel."""
    h, w = indices.shape
    lab = np.where(usable, indices.astype(np.int32), -1)
    pad = np.pad(lab, radius, constant_values=-1)
    offs = _offsets(radius)
    # A window holds another ink exactly when the pixel is within ``radius`` of an ink boundary.
    boundary = np.zeros((h, w), bool)
    boundary[1:] |= lab[1:] != lab[:-1]
    boundary[:-1] |= lab[1:] != lab[:-1]
    boundary[:, 1:] |= lab[:, 1:] != lab[:, :-1]
    boundary[:, :-1] |= lab[:, 1:] != lab[:, :-1]
    edge = _grow(boundary, radius) & usable
    if focus is not None:
        edge &= focus
    ys, xs = np.nonzero(edge)
    inks = np.empty((ys.size, len(offs)), np.int32)
    for j, (dy, dx) in enumerate(offs):
        inks[:, j] = pad[ys + radius + dy, xs + radius + dx]
    return (ys, xs), inks


def resolve_seams(indices: np.ndarray, colours: np.ndarray, colour_index: np.ndarray, ink_lab: np.ndarray, *,
                  opaque: np.ndarray | None = None, radius: int = 2, min_neighbours: int = 1,
                  ratio: float = 1.0) -> tuple[np.ndarray, SeamReport]:
    """Give each blended edge pixel to one of the two inks it blends.

    Parameters
    ----------
    indices : ndarray of int, shape (H, W)
        Palette index of every pixel (nearest colour).
    colours : ndarray, shape (n, 3)
        CIELAB (D65) of the source's distinct colours.
    colour_index : ndarray of int, shape (H, W)
        Row of ``colours`` of every pixel (a colour sample's index back to
        the pixels); only the edge pixels are looked up.
    ink_lab : ndarray, shape (k, 3)
        CIELAB of the palette colours.
    opaque : ndarray of bool, shape (H, W), optional
        Pixels that print; the others are neither changed nor neighbours.
    radius : int, default 2
        Half the window side in pixels: 2 finds blends up to 2 px wide (a
        JPEG's half-resolution chroma spreads an edge over two pixels).
    min_neighbours : int, default 1
        Pixels of each of the two inks in the window for them to count as
        sides (small text has strokes a pixel or two wide).
    ratio : float, default 1.0
        A pixel is a blend when its ΔE00 to the segment is below ``ratio``
        times its ΔE00 to its own ink.

    Returns
    -------
    indices : ndarray
        A new index image.
    report : SeamReport

    References
    ----------
    .. [1] G. Sharma, W. Wu and E. N. Dalal, "The CIEDE2000 color-difference
       formula: implementation notes, supplementary test data, and
       mathematical observations", Color Res. Appl. 30(1), 21-30, 2005.

    Examples
    --------
    >>> from quantize.colour.spaces import srgb8_to_space
    >>> inks = srgb8_to_space(np.array([[31, 45, 84], [32, 130, 128], [244, 236, 214]], np.uint8), "lab")
    >>> rgb = np.zeros((5, 9, 3), np.uint8); rgb[:, :4] = (31, 45, 84); rgb[:, 5:] = (244, 236, 214)
    >>> rgb[:, 4] = (110, 118, 126)  # a blend of navy and cream, nearest to teal
    >>> lab = srgb8_to_space(rgb.reshape(-1, 3), "lab")
    >>> idx = np.array([0] * 4 + [1] + [2] * 4)[None].repeat(5, 0)
    >>> out, rep = resolve_seams(idx, lab, np.arange(45).reshape(5, 9), inks)
    >>> out[0].tolist(), rep.pixels_changed
    ([0, 0, 0, 0, 0, 2, 2, 2, 2], 5)
    """
    out = np.array(indices, copy=True)
    usable = np.ones(out.shape, bool) if opaque is None else np.asarray(opaque, bool)
    by_ink: dict = {}
    # A pass can only see a side whose own pixels are already settled: in small text the
    # other ink's pixels are often blends themselves, so passes repeat while they change.
    focus = None
    for _ in range(_MAX_PASSES):
        ys, xs, new, was = _one_pass(out, colours, colour_index, ink_lab, usable, focus,
                                     radius=radius, min_neighbours=min_neighbours, ratio=ratio)
        if ys.size == 0:
            break
        for i, n in zip(*np.unique(was, return_counts=True)):
            by_ink[int(i)] = by_ink.get(int(i), 0) + int(n)
        out[ys, xs] = new
        # Only pixels whose window saw a change can change in the next pass.
        focus = np.zeros(out.shape, bool)
        focus[ys, xs] = True
        focus = _grow(focus, radius)
    return out, SeamReport(sum(by_ink.values()), by_ink, radius)


def _pairs(present: np.ndarray) -> list[tuple[int, int]]:
    """Pairs of inks (a < b) found together in at least one window: the only segments worth trying."""
    m = present.astype(np.int64)  # integer product: no multi-threaded BLAS call
    both = (m.T @ m) > 0
    return [(int(a), int(b)) for a, b in zip(*np.nonzero(np.triu(both, 1)))]


def _one_pass(out, colours, colour_index, ink_lab, usable, focus, *, radius, min_neighbours, ratio):
    """Pixels to move in one pass: (rows, columns, new ink, old ink)."""
    from quantize.colour.spaces import delta_e_ciede2000

    none = (np.empty(0, np.int64),) * 4
    k = ink_lab.shape[0]
    (ys, xs), inks = _neighbour_inks(out, usable, radius, focus)
    if ys.size == 0 or k < 3:
        return none
    own = out[ys, xs].astype(np.int64)
    ring1 = [j for j, (dy, dx) in enumerate(_offsets(radius)) if max(abs(dy), abs(dx)) == 1]
    counts = np.zeros((ys.size, k), np.int32)  # pixels of each ink in the window
    near = np.zeros((ys.size, k), np.int32)  # the same, over the 8 neighbours only
    for c in range(k):
        hit = inks == c
        counts[:, c] = hit.sum(axis=1)
        near[:, c] = hit[:, ring1].sum(axis=1)
    # A run of the own ink one pixel wide: itself plus at most two neighbours along the run.
    thin = near[np.arange(ys.size), own] <= 2
    area = counts >= min_neighbours
    # The own ink is always a candidate side: a pixel that blends its own ink with a neighbour stays.
    area[np.arange(ys.size), own] = True
    keep = area.sum(axis=1) >= 3
    ys, xs, own, area, near, thin = ys[keep], xs[keep], own[keep], area[keep], near[keep] > 0, thin[keep]
    if ys.size == 0:
        return none
    p = colours[colour_index[ys, xs]]
    d_own = delta_e_ciede2000(p, ink_lab[own])
    best = np.full(ys.size, np.inf)
    pick = np.full(ys.size, -1, np.int64)
    pair_has_own = np.zeros(ys.size, bool)
    for a, b in _pairs(area):
        rows = np.flatnonzero(area[:, a] & area[:, b])
        if rows.size == 0:
            continue
        seg = ink_lab[b] - ink_lab[a]
        t = np.clip(((p[rows] - ink_lab[a]) * seg).sum(axis=1) / max(float((seg * seg).sum()), 1e-12), 0.0, 1.0)
        res = delta_e_ciede2000(p[rows], ink_lab[a] + t[:, None] * seg)
        better = res < best[rows]
        best[rows[better]] = res[better]
        pick[rows[better]] = np.where(t[better] < 0.5, a, b)
        pair_has_own[rows[better]] = (own[rows[better]] == a) | (own[rows[better]] == b)
    move = (pick >= 0) & (best < ratio * d_own) & ~pair_has_own
    thin_pick = _thin_runs(p, own, ink_lab, near, thin & ~move)
    move |= thin_pick >= 0
    pick = np.where(thin_pick >= 0, thin_pick, pick)
    return ys[move], xs[move], pick[move], own[move]


def _thin_runs(p, own, ink_lab, near, thin):
    """New ink (-1: none) of pixels in a one-pixel run of an ink whose colour lies between the two inks
    on either side.

    Such a run is what an edge blend becomes once it is mapped (or reduced) to the third ink: its colour
    can no longer tell it from a drawn line, its width can.
    """
    from quantize.colour.spaces import delta_e_ciede2000

    pick = np.full(p.shape[0], -1, np.int64)
    best = np.full(p.shape[0], np.inf)
    for a, b in _pairs(near[thin]):
        rows = np.flatnonzero(thin & near[:, a] & near[:, b] & (own != a) & (own != b))
        if rows.size == 0:
            continue
        seg = ink_lab[b] - ink_lab[a]
        length = float(delta_e_ciede2000(ink_lab[a], ink_lab[b]))
        t_own = ((ink_lab[own[rows]] - ink_lab[a]) * seg).sum(axis=1) / max(float((seg * seg).sum()), 1e-12)
        t = np.clip(((p[rows] - ink_lab[a]) * seg).sum(axis=1) / max(float((seg * seg).sum()), 1e-12), 0, 1)
        res = delta_e_ciede2000(p[rows], ink_lab[a] + t[:, None] * seg)
        ok = (t_own > _BETWEEN[0]) & (t_own < _BETWEEN[1]) & (res <= _THIN_RESIDUAL * length) & (res < best[rows])
        best[rows[ok]] = res[ok]
        pick[rows[ok]] = np.where(t[ok] < 0.5, a, b)
    return pick
