"""Film geometry and resampling: each ink's area at the artwork's resolution onto the film grid.

The printed size comes from the user (a width or a height in mm) or from the
file's physical size (its pixels at its resolution). The film grid has that
size at the film resolution. Every ink's area is resampled as a coverage
image (1 inside the ink, 0 outside) with Pillow's bicubic filter, which is
interpolating when it enlarges and area-averaging when it reduces, and every
film pixel goes to the ink (or the substrate, or "no print" where the
artwork is transparent) whose resampled coverage is largest. With two inks
meeting, that is a threshold at 0.5 coverage; with more, the plates stay
disjoint and together cover the same area as the artwork. Edges follow the
interpolated contour, so a 150 dpi edge on a 600 dpi film steps by about a
film pixel, not by four.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from quantize.core.units import mm_to_px, px_to_mm
from quantize.errors import SeparationError

__all__ = ["FilmGrid", "film_grid", "resample_indices", "sample_at_artwork"]


@dataclass(frozen=True)
class FilmGrid:
    """The films' pixel grid and the printed size.

    Attributes
    ----------
    width_px, height_px : int
        Film size in pixels.
    dpi : float
        Film resolution.
    width_mm, height_mm : float
        Printed size of the artwork (the film's pixels at ``dpi``).
    size_from : str
        Where the size came from: ``"print width"``, ``"print height"`` or
        ``"artwork at N dpi"``.
    """

    width_px: int
    height_px: int
    dpi: float
    width_mm: float
    height_mm: float
    size_from: str

    @property
    def shape(self) -> tuple[int, int]:
        return self.height_px, self.width_px

    def to_dict(self) -> dict:
        return {"size_px": [self.width_px, self.height_px], "dpi": self.dpi,
                "size_mm": [round(self.width_mm, 3), round(self.height_mm, 3)], "size_from": self.size_from}


def film_grid(art_shape: tuple[int, int], art_dpi: float, *, film_dpi: float, print_width_mm: float | None = None,
              print_height_mm: float | None = None) -> FilmGrid:
    """The film grid for an artwork of ``art_shape`` pixels at ``art_dpi``.

    Parameters
    ----------
    art_shape : (int, int)
        Artwork height and width in pixels.
    art_dpi : float
        The artwork's resolution: its physical size when no print size is given.
    film_dpi : float
        Film resolution.
    print_width_mm, print_height_mm : float, optional
        The printed width or height (at most one); the other side keeps the
        artwork's aspect ratio.

    Returns
    -------
    FilmGrid

    Raises
    ------
    SeparationError
        Both sizes given, or a film smaller than one pixel.

    Examples
    --------
    >>> g = film_grid((150, 300), 150, film_dpi=600)
    >>> g.width_px, g.height_px, round(g.width_mm, 2)
    (1200, 600, 50.8)
    >>> film_grid((150, 300), 150, film_dpi=600, print_width_mm=25.4).shape
    (300, 600)
    """
    h, w = art_shape
    if print_width_mm is not None and print_height_mm is not None:
        raise SeparationError("give the print width or the print height, not both: the other follows the "
                              "artwork's proportions")
    if print_width_mm is not None:
        wmm, hmm, src = print_width_mm, print_width_mm * h / w, "print width"
    elif print_height_mm is not None:
        wmm, hmm, src = print_height_mm * w / h, print_height_mm, "print height"
    else:
        wmm, hmm, src = px_to_mm(w, art_dpi), px_to_mm(h, art_dpi), f"artwork at {art_dpi:g} dpi"
    wpx, hpx = int(round(mm_to_px(wmm, film_dpi))), int(round(mm_to_px(hmm, film_dpi)))
    if wpx < 1 or hpx < 1:
        raise SeparationError(f"a print of {wmm:.3g} x {hmm:.3g} mm is smaller than one film pixel at "
                              f"{film_dpi:g} dpi")
    # The film holds whole pixels: report the size the film prints, not the one asked for.
    return FilmGrid(wpx, hpx, float(film_dpi), px_to_mm(wpx, film_dpi), px_to_mm(hpx, film_dpi), src)


def _resample(cov: np.ndarray, shape: tuple[int, int]) -> np.ndarray:
    from PIL import Image

    img = Image.fromarray(np.ascontiguousarray(cov, np.float32), mode="F")
    return np.asarray(img.resize((shape[1], shape[0]), Image.Resampling.BICUBIC), np.float32)


def resample_indices(indices: np.ndarray, opaque: np.ndarray, shape: tuple[int, int],
                     *, fill: int = 0) -> tuple[np.ndarray, np.ndarray]:
    """Each colour's area resampled to ``shape``; every pixel to the colour of largest coverage.

    Parameters
    ----------
    indices : (H, W) ndarray of int
        Palette index per artwork pixel.
    opaque : (H, W) bool ndarray
        Artwork pixels that print; the rest is a class of its own ("no print").
    shape : (int, int)
        Film height and width.
    fill : int
        Index given to film pixels that do not print.

    Returns
    -------
    indices : (h, w) ndarray
        Palette index per film pixel (``fill`` where nothing prints).
    opaque : (h, w) bool ndarray
        Film pixels that print.

    Examples
    --------
    >>> idx = np.zeros((4, 4), np.uint8); idx[:, 2:] = 1
    >>> out, op = resample_indices(idx, np.ones((4, 4), bool), (8, 8))
    >>> out[0].tolist(), bool(op.all())
    ([0, 0, 0, 0, 1, 1, 1, 1], True)
    """
    idx = np.asarray(indices)
    op = np.asarray(opaque, bool)
    if idx.shape == tuple(shape):  # the same grid: nothing to resample
        return np.where(op, idx, fill).astype(idx.dtype), op.copy()
    classes = [int(c) for c in np.unique(idx[op])]
    best = np.full(shape, -np.inf, np.float32)
    out = np.full(shape, -1, np.int64)
    for c in classes + ([-1] if not op.all() else []):
        cov = ~op if c < 0 else (idx == c) & op
        r = _resample(cov, shape)
        better = r > best  # ties keep the earlier class: the result never depends on float noise order
        best[better] = r[better]
        out[better] = c
    film_op = out >= 0
    return np.where(film_op, out, fill).astype(idx.dtype), film_op


def sample_at_artwork(film: np.ndarray, art_shape: tuple[int, int]) -> np.ndarray:
    """The film's value at the centre of every artwork pixel (for comparing with the source).

    Examples
    --------
    >>> f = np.arange(16).reshape(4, 4)
    >>> sample_at_artwork(f, (2, 2)).tolist()
    [[5, 7], [13, 15]]
    """
    fh, fw = film.shape
    h, w = art_shape
    rows = np.minimum(((np.arange(h) + 0.5) * fh / h).astype(np.intp), fh - 1)
    cols = np.minimum(((np.arange(w) + 0.5) * fw / w).astype(np.intp), fw - 1)
    return film[np.ix_(rows, cols)]
