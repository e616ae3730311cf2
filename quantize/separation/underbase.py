"""The white plates: the underbase under the colours, a highlight white on top, and the print sequence.

The underbase is the printed area (of the inks light enough to need one),
pulled back from its edges by the choke (:func:`quantize.separation.cleanup.underbase_mask`,
a Euclidean distance measured on the film grid), with islands smaller than
the minimum printable dot removed. Printed areas that keep no underbase
after the choke are reported with their place on the film: they print
straight on the substrate.

The highlight white is the area of the lightest inks (L* at or above a
threshold), printed again in white at the end.

The usual sequence of a print on a dark garment is underbase, flash (the
underbase is cured enough to print on), the colours from light to dark, and
the highlight white last (common practice, no source). A given order may
place the underbase, flashes and the highlight white itself.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from quantize.core.units import px_to_mm
from quantize.errors import SeparationError

from .cleanup import underbase_mask

__all__ = ["BasePlan", "FLASH", "HIGHLIGHT", "UNDERBASE", "highlight_mask", "print_sequence", "split_order",
           "underbase_plan"]

UNDERBASE = "underbase"
HIGHLIGHT = "highlight white"
FLASH = "flash"
_SPECIAL = {UNDERBASE, HIGHLIGHT, FLASH, "highlight-white", "highlight"}


@dataclass(frozen=True, eq=False)
class BasePlan:
    """An underbase and what it could not reach.

    Attributes
    ----------
    mask : (H, W) bool ndarray
        Where the underbase prints.
    islands_removed : int
        Pieces of underbase smaller than the minimum dot, removed.
    bare : list of dict
        Printed areas left without underbase by the choke (too thin to carry
        one): ``pixels`` and the bounding box ``x_mm``, ``y_mm``, ``w_mm``,
        ``h_mm`` (from the film's top-left corner), largest first.
    bare_count : int
        How many there are (``bare`` lists at most 20).
    """

    mask: np.ndarray
    islands_removed: int
    bare: list
    bare_count: int

    def to_dict(self) -> dict:
        return {"islands_removed": self.islands_removed, "bare_areas": self.bare_count, "bare": self.bare}


def underbase_plan(base: np.ndarray, *, choke_px: float, min_area_px: float, dpi: float,
                   limit: int = 20) -> BasePlan:
    """The underbase of ``base`` (the area that needs one), choked, without islands below the minimum dot.

    Parameters
    ----------
    base : (H, W) bool ndarray
        Film pixels that need an underbase.
    choke_px : float
        Pull-back from the edges, in film pixels.
    min_area_px : float
        Underbase pieces of fewer pixels are removed.
    dpi : float
        Film resolution, for the locations in mm.
    limit : int
        Most bare areas listed.

    Returns
    -------
    BasePlan

    Examples
    --------
    >>> b = np.zeros((40, 60), bool); b[5:35, 5:30] = True; b[5:35, 40:43] = True
    >>> plan = underbase_plan(b, choke_px=2, min_area_px=10, dpi=300)
    >>> int(plan.mask[:, 35:].sum()), plan.bare_count, plan.bare[0]["pixels"]
    (0, 1, 90)
    """
    from scipy import ndimage as ndi
    from skimage.measure import label

    base = np.asarray(base, bool)
    mask = underbase_mask(base, choke_px)
    lab, n = label(mask, connectivity=2, return_num=True)
    removed = 0
    if n:
        area = np.bincount(lab.ravel(), minlength=n + 1)
        small = area < min_area_px
        small[0] = False
        removed = int(small.sum())
        mask &= ~small[lab]
    # A printed area with no underbase left at all is too thin to carry one.
    plab, pn = label(base, connectivity=2, return_num=True)
    bare = []
    if pn:
        has = np.bincount(plab[mask], minlength=pn + 1) > 0
        parea = np.bincount(plab.ravel(), minlength=pn + 1)
        boxes = ndi.find_objects(plab)
        for j in range(1, pn + 1):
            if not has[j]:
                sy, sx = boxes[j - 1]
                bare.append({"pixels": int(parea[j]), **{k: round(px_to_mm(v, dpi), 2) for k, v in (
                    ("x_mm", sx.start), ("y_mm", sy.start), ("w_mm", sx.stop - sx.start),
                    ("h_mm", sy.stop - sy.start))}})
    bare.sort(key=lambda d: -d["pixels"])
    return BasePlan(mask=mask, islands_removed=removed, bare=bare[:limit], bare_count=len(bare))


def highlight_mask(indices: np.ndarray, opaque: np.ndarray, ink_l: np.ndarray, printed: list[int], *,
                   min_l: float, min_area_px: float) -> np.ndarray:
    """Where the highlight white prints: the inks with L* at or above ``min_l``, without specks.

    Examples
    --------
    >>> idx = np.zeros((20, 20), int); idx[2:12, 2:12] = 1; idx[15, 15] = 1
    >>> int(highlight_mask(idx, np.ones((20, 20), bool), np.array([20.0, 95.0]), [1], min_l=90,
    ...                    min_area_px=4).sum())
    100
    """
    from skimage.measure import label

    light = [i for i in printed if ink_l[i] >= min_l]
    mask = np.isin(indices, light) & opaque
    lab, n = label(mask, connectivity=2, return_num=True)
    if n:
        area = np.bincount(lab.ravel(), minlength=n + 1)
        small = area < min_area_px
        small[0] = False
        mask &= ~small[lab]
    return mask


def _key(item) -> str:
    return str(item).strip().casefold()


def split_order(order) -> tuple[list | None, list | None]:
    """The inks of a given order, and the order itself when it places the white plates or flashes.

    Returns
    -------
    inks : list or None
        The order without "underbase", "flash" and "highlight white"
        (None when nothing is left or no order was given).
    layout : list or None
        The whole order, when it names any of those; else None.

    Examples
    --------
    >>> split_order(["underbase", "flash", "Red", "Navy", "highlight white"])
    (['Red', 'Navy'], ['underbase', 'flash', 'Red', 'Navy', 'highlight white'])
    >>> split_order(["Red", "Navy"])
    (['Red', 'Navy'], None)
    """
    if order is None:
        return None, None
    inks = [x for x in order if not (isinstance(x, str) and _key(x) in _SPECIAL)]
    layout = list(order) if len(inks) != len(order) else None
    return (inks or None), layout


def print_sequence(ink_names: list[str], *, underbase: bool, highlight: bool, layout=None) -> list[str]:
    """The print sequence: film names and "flash" steps.

    Without ``layout``: underbase, flash, the inks as given, highlight white
    (common practice, no source). With one, its order, checked.

    Raises
    ------
    SeparationError
        The layout places a white plate that is not made, leaves one out,
        repeats one, starts or ends with a flash, or has two flashes in a row.

    Examples
    --------
    >>> print_sequence(["Yellow", "Navy"], underbase=True, highlight=True)
    ['underbase', 'flash', 'Yellow', 'Navy', 'highlight white']
    """
    if layout is None:
        return ([UNDERBASE, FLASH] if underbase else []) + list(ink_names) + ([HIGHLIGHT] if highlight else [])
    names = iter(ink_names)
    seq = []
    for item in layout:
        k = _key(item) if isinstance(item, str) else None
        if k == FLASH:
            seq.append(FLASH)
        elif k == UNDERBASE or k in {HIGHLIGHT, "highlight-white", "highlight"}:
            film = UNDERBASE if k == UNDERBASE else HIGHLIGHT
            made = underbase if film == UNDERBASE else highlight
            if not made:
                raise SeparationError(f"print order: {item!r} is listed but no {film} plate is made")
            if film in seq:
                raise SeparationError(f"print order: {item!r} is listed twice")
            seq.append(film)
        else:
            seq.append(next(names))
    for film, made in ((UNDERBASE, underbase), (HIGHLIGHT, highlight)):
        if made and film not in seq:
            raise SeparationError(f"print order leaves out the {film}; list it, or leave the order to the default")
    if seq and (seq[0] == FLASH or seq[-1] == FLASH):
        raise SeparationError("print order: a flash cures a layer before the next; it cannot come first or last")
    if any(a == b == FLASH for a, b in zip(seq, seq[1:])):
        raise SeparationError("print order: two flashes in a row")
    return seq
