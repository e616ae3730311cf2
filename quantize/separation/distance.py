"""Distance from film pixel centres to the edge of an area, to a fraction of a pixel.

A film holds an area as whole pixels; its edge, as drawn, runs between them.
The Euclidean distance transform (:func:`scipy.ndimage.distance_transform_edt`)
gives the distance from each pixel centre to the nearest centre on the other
side; the edge lies between that centre and this one. How far before that
centre depends on the edge's direction: on an edge along a row or a column
the nearest centre is half a pixel from it; on a diagonal, half a diagonal's
projection (0.5 / sqrt 2); on other slopes the pixels step irregularly and
the nearest centre lies, on average, about a quarter pixel from the edge.
Taking those offsets off the transform moves a straight edge by
``round(distance)`` pixels along rows and columns and a disc's radius by
the distance within half a pixel (tested against the transform itself and
pi r^2 in tests/test_trap.py and tests/test_underbase.py).
"""

from __future__ import annotations

import numpy as np

__all__ = ["distance_to_edge"]

_DIAGONAL = 0.5 / np.sqrt(2.0)
_OTHER = 0.25


def distance_to_edge(outside: np.ndarray) -> np.ndarray:
    """Distance in pixels from the centre of every pixel where ``outside`` is True to the area's edge.

    Parameters
    ----------
    outside : (H, W) bool ndarray
        True away from the area (the distances are measured there); the
        area is where it is False, and must not be empty.

    Returns
    -------
    (H, W) float ndarray
        0 inside the area.

    Examples
    --------
    >>> a = np.ones((1, 8), bool); a[0, :3] = False
    >>> distance_to_edge(a).round(2).tolist()
    [[0.0, 0.0, 0.0, 0.5, 1.5, 2.5, 3.5, 4.5]]
    """
    from scipy import ndimage as ndi

    d, (iy, ix) = ndi.distance_transform_edt(outside, return_indices=True)
    h, w = outside.shape  # two axes, spelt out: numpy's stubs cannot count them from an ndarray's shape
    yy, xx = np.indices((h, w), sparse=True)
    dy, dx = np.abs(iy - yy), np.abs(ix - xx)
    off = np.where((dx == 0) | (dy == 0), 0.5, np.where(dx == dy, _DIAGONAL, _OTHER))
    return np.where(outside, d - off, 0.0)
