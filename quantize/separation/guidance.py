"""Guidance per film, measured on the film: the smallest dot and line it holds, its area, a mesh to start from.

The smallest dot is the smallest separate piece of the film, as the
diameter of a disc of the same area. The smallest line is the narrowest
place along the ridge of the distance map (the local maxima of the
Euclidean distance to the edge, :func:`scipy.ndimage.distance_transform_edt`:
the middle of every line), on ridges at least four widths long (a bump of
a pixel on an edge is no line): twice that distance less a pixel, which is
low by up to a film pixel on lines along rows or columns and by up to two on
slanted ones (an estimate on the safe side).
The area is the film's inked pixels at its resolution.

The mesh suggestion follows a rule of thumb (common practice, from memory;
no source): the finest detail should span at least two threads of the
mesh, so the thread count per inch should be at least 2 x 25.4 / (finest
detail in mm); the suggestion is the first of the usual counts (110, 156,
200, 230, 305 threads per inch, common practice) that meets it, and no
finer than 156 for white plates (underbase, highlight white), which need a
heavy deposit (common practice). It is a starting point: the shop's
screens, emulsion and inks decide.
"""

from __future__ import annotations

import numpy as np

from quantize.core.units import MM_PER_INCH, px_to_mm

__all__ = ["MESH_COUNTS", "MESH_RULE", "mesh_for", "mesh_for_screen", "plate_guidance"]

#: Usual screen mesh counts, threads per inch (common practice, from memory).
MESH_COUNTS = (110, 156, 200, 230, 305)
#: The rule as the manifest states it.
MESH_RULE = ("common practice, from memory (no source): the finest detail spans at least two threads, so "
             "threads per inch >= 2 x 25.4 / finest detail in mm; the first of 110, 156, 200, 230, 305 that "
             "meets it; white plates no finer than 156 (a heavy deposit)")
_WHITE_MAX = 156


def mesh_for(finest_mm: float | None, *, white: bool = False) -> dict:
    """The mesh suggestion for a film whose finest detail is ``finest_mm``.

    Examples
    --------
    >>> mesh_for(0.5)["threads_per_inch"], mesh_for(0.2)["threads_per_inch"], mesh_for(2.0)["threads_per_inch"]
    (110, 305, 110)
    >>> mesh_for(0.2, white=True)["threads_per_inch"]
    156
    """
    if finest_mm is None or finest_mm <= 0:
        return {"threads_per_inch": None, "needed": None, "note": "no detail on the film"}
    needed = 2.0 * MM_PER_INCH / finest_mm
    fits = [m for m in MESH_COUNTS if m >= needed]
    mesh = fits[0] if fits else MESH_COUNTS[-1]
    note = "" if fits else "detail finer than a 305 mesh holds: thicken it, or expect it to close or break"
    if white and mesh > _WHITE_MAX:
        mesh = _WHITE_MAX
        note = "a white plate on a coarse mesh: its finest detail may not hold"
    return {"threads_per_inch": mesh, "needed": round(needed, 1), "note": note}


def mesh_for_screen(lpi: float) -> dict:
    """The mesh suggestion for a halftone of ``lpi`` lines per inch: the first usual count with
    :data:`quantize.separation.halftone.THREADS_PER_LINE` threads per line (common practice, from memory).

    Examples
    --------
    >>> mesh_for_screen(55)["threads_per_inch"], mesh_for_screen(45)["threads_per_inch"]
    (230, 200)
    """
    from .halftone import THREADS_PER_LINE

    needed = THREADS_PER_LINE * lpi
    fits = [m for m in MESH_COUNTS if m >= needed]
    return {"threads_per_inch": fits[0] if fits else MESH_COUNTS[-1], "needed": needed,
            "note": "" if fits else f"{lpi:g} lpi needs a mesh finer than {MESH_COUNTS[-1]}"}


def plate_guidance(mask: np.ndarray, dpi: float, *, white: bool = False) -> dict:
    """The smallest dot and line, the area and a mesh suggestion for one film.

    Parameters
    ----------
    mask : (H, W) bool ndarray
        Where the film prints.
    dpi : float
        Film resolution.
    white : bool
        An underbase or highlight white (see :func:`mesh_for`).

    Returns
    -------
    dict
        ``smallest_dot_mm`` (diameter of a disc of the smallest piece's
        area), ``smallest_line_mm`` (narrowest place on the ridge of the
        distance map, on the safe side by up to a film pixel or two), ``area_cm2``, ``box_cm`` (width and height of the
        inked area), ``pieces`` and ``mesh`` (see :func:`mesh_for`).

    Examples
    --------
    >>> m = np.zeros((100, 100), bool); m[10:90, 10:15] = True
    >>> g = plate_guidance(m, 254)
    >>> g["smallest_line_mm"], g["area_cm2"]
    (0.5, 0.04)
    """
    from scipy import ndimage as ndi
    from skimage.measure import label

    mask = np.asarray(mask, bool)
    px_cm = MM_PER_INCH / 10.0 / dpi
    if not mask.any():
        return {"smallest_dot_mm": None, "smallest_line_mm": None, "area_cm2": 0.0, "box_cm": [0.0, 0.0],
                "pieces": 0, "mesh": mesh_for(None)}
    # Everything below is measured on the inked box only (plus a clear border).
    rows, cols = np.flatnonzero(mask.any(axis=1)), np.flatnonzero(mask.any(axis=0))
    box_h, box_w = int(rows[-1] - rows[0] + 1), int(cols[-1] - cols[0] + 1)
    mask = mask[rows[0]:rows[-1] + 1, cols[0]:cols[-1] + 1]
    lab, n = label(mask, connectivity=2, return_num=True)
    areas = np.bincount(lab.ravel())[1:]
    dot_px = 2.0 * np.sqrt(areas.min() / np.pi)
    # Width on the ridge of the distance map (its local maxima: the middle of every line and dot; line
    # ends and corners are no maxima). A line n pixels wide has its middle (n + 1) / 2 from the nearest
    # clear centre.
    dist = ndi.distance_transform_edt(np.pad(mask, 1))[1:-1, 1:-1]
    ridge = mask & (dist >= ndi.maximum_filter(dist, size=3))
    # A one-pixel bump on an edge is a ridge of a pixel or two; a line is a ridge several times longer than
    # it is wide. Only ridges at least four widths (and four pixels) long count.
    rlab, rn = ndi.label(ridge, structure=np.ones((3, 3)))
    line_px = None
    if rn:
        idx = np.arange(1, rn + 1)
        length = ndi.sum_labels(ridge, rlab, idx)
        width = 2.0 * ndi.minimum(dist, rlab, idx) - 1.0
        lines = (length >= np.maximum(4.0 * width, 4.0))
        line_px = float(width[lines].min()) if lines.any() else None
    dot_mm = round(px_to_mm(dot_px, dpi), 3)
    line_mm = None if line_px is None else round(px_to_mm(max(line_px, 1.0), dpi), 3)
    finest = dot_mm if line_mm is None else min(dot_mm, line_mm)
    return {"smallest_dot_mm": dot_mm, "smallest_line_mm": line_mm,
            "area_cm2": round(float(mask.sum()) * px_cm * px_cm, 3),
            "box_cm": [round(box_w * px_cm, 2), round(box_h * px_cm, 2)],
            "pieces": int(n), "mesh": mesh_for(finest, white=white)}
