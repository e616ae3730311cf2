"""Trapping: where two inks meet, the lighter spreads under the darker, so misregistration shows no gap.

At every join between two printed inks, the lighter one (higher L*) grows
into the darker one's area by the trap width, measured from the edge
between them: a film pixel of the darker ink is added to the lighter plate
when its centre lies within the width of that edge
(:func:`quantize.separation.distance.distance_to_edge`). A join along a row
or column overlaps by ``round(width)`` pixels: within half a pixel of the
request.
The darker ink never spreads, and nothing spreads onto bare substrate (or
where nothing prints).

A keyline ink can overprint instead of knocking out: the inks beside it
continue under it (each keyline pixel goes, on the films of the other
inks, to the ink nearest to it; next to the substrate it stays clear) and
the keyline prints on top.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from .distance import distance_to_edge

__all__ = ["TrapResult", "trap_plates"]


@dataclass(frozen=True, eq=False)
class TrapResult:
    """Plate masks after trapping and what changed.

    Attributes
    ----------
    masks : dict of int -> (H, W) bool ndarray
        Palette index -> where that ink prints, traps and keyline fills included.
    joins : list of dict
        One per ink pair that touch: ``lighter``, ``darker`` (palette
        indices), ``width_px`` asked for, ``pixels`` added to the lighter
        plate; for keyline fills ``overprint`` (the keyline's index) and
        ``under`` (the ink filled under it).
    """

    masks: dict
    joins: list


def _bbox(mask: np.ndarray, pad: int) -> tuple[slice, slice] | None:
    rows, cols = np.flatnonzero(mask.any(axis=1)), np.flatnonzero(mask.any(axis=0))
    if rows.size == 0:
        return None
    h, w = mask.shape
    return (slice(max(int(rows[0]) - pad, 0), min(int(rows[-1]) + pad + 1, h)),
            slice(max(int(cols[0]) - pad, 0), min(int(cols[-1]) + pad + 1, w)))


def trap_plates(indices: np.ndarray, opaque: np.ndarray, printed: list[int], ink_l: np.ndarray, *,
                width_px: float, pair_px: dict | None = None, overprint: tuple = ()) -> TrapResult:
    """Spread each lighter ink under its darker neighbours; fill under overprinting keylines.

    Parameters
    ----------
    indices : (H, W) ndarray of int
        Palette index per film pixel (knocked out: one ink per pixel).
    opaque : (H, W) bool ndarray
        Film pixels that print.
    printed : list of int
        Palette indices of the printed inks (the substrate is not one).
    ink_l : (k,) ndarray
        L* of every palette colour.
    width_px : float
        Trap width in film pixels (0: no trap).
    pair_px : dict, optional
        ``frozenset({a, b}) -> width_px`` for pairs with their own width.
    overprint : tuple of int
        Keyline inks that overprint.

    Returns
    -------
    TrapResult

    Examples
    --------
    >>> idx = np.zeros((10, 20), int); idx[:, 10:] = 1
    >>> res = trap_plates(idx, np.ones((10, 20), bool), [0, 1], np.array([90.0, 30.0]), width_px=3)
    >>> int(res.masks[0][0].sum()), int(res.masks[1][0].sum())
    (13, 10)
    """
    from scipy import ndimage as ndi

    pair_px = pair_px or {}
    base = {i: (indices == i) & opaque for i in printed}
    masks = {i: m.copy() for i, m in base.items()}
    joins = []
    keys = [i for i in overprint if i in base]
    if keys:
        joins += _fill_under_keylines(indices, opaque, printed, base, masks, keys)
    spreading = [i for i in printed if i not in keys]
    widest = max([width_px, *pair_px.values()]) if pair_px else width_px
    for i in spreading:
        darker = [j for j in spreading if ink_l[j] < ink_l[i]]
        if not darker or widest <= 0:
            continue
        box = _bbox(base[i], int(math.ceil(widest)) + 2)
        if box is None:
            continue
        # Distance from every pixel centre to the edge of ink i, in its neighbourhood only.
        dist = distance_to_edge(~base[i][box])
        for j in darker:
            w = pair_px.get(frozenset((i, j)), width_px)
            if w <= 0:
                continue
            reach = base[j][box] & (dist <= w)
            if reach.any():
                # Only spread that touches ink i: a piece reached across a corner would be a speck on the film.
                lab, _ = ndi.label(reach | base[i][box])
                reach &= np.isin(lab, np.unique(lab[base[i][box]]))
            if reach.any():
                masks[i][box] |= reach
                joins.append({"lighter": i, "darker": j, "width_px": w, "pixels": int(reach.sum())})
    return TrapResult(masks=masks, joins=joins)


def _fill_under_keylines(indices, opaque, printed, base, masks, keys) -> list[dict]:
    """Each keyline pixel goes, under the keyline, to the nearest pixel's ink that is not a keyline."""
    from scipy import ndimage as ndi

    keyed = np.isin(indices, keys) & opaque
    if not keyed.any():
        return []
    # Nearest non-keyline pixel of every keyline pixel (transparent pixels count as clear).
    _, (ny, nx) = ndi.distance_transform_edt(keyed, return_indices=True)
    near = np.where(opaque, indices, -1)[ny, nx]
    joins = []
    for j in printed:
        if j in keys:
            continue
        under = keyed & (near == j)
        if under.any():
            masks[j] |= under
            for k in keys:
                n = int((under & base[k]).sum())
                if n:
                    joins.append({"overprint": k, "under": j, "pixels": n})
    return joins
