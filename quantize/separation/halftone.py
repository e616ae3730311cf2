"""Amplitude-modulated halftone screens: an ink's share per film pixel becomes a 1-bit film.

A screen is a grid of cells, ``lines per inch`` of them to the inch along
its two axes, turned by its screen angle.  Each cell prints one dot whose
area is the ink's share there (the Murray-Davies view of a halftone: the
printed fraction is the inked area).  Which film pixels a dot of a given
size covers follows from a *spot function* S of the position in the cell
(round, elliptical or square dots): a pixel inks when the share of the cell
whose S is below its own is less than the ink's share.  Ranking S by area
makes the inked fraction of a cell equal to the share for every dot shape
(up to the film's pixel grid), so no tone curve is needed to undo the shape.

The dot a screen cannot hold is never left as a speck: a share whose dot
would be smaller than the minimum printable dot is dropped (below half of
it) or grown to it, and a share whose hole would be smaller than that
minimum is filled or opened to it, as :func:`printable_share` says.

References
----------
.. [1] A. Murray, "Monochrome reproduction in photoengraving", Journal of the
   Franklin Institute 221(6), 721-744, 1936 (area coverage of a halftone).
.. [2] Adobe Systems, *PostScript Language Reference*, 3rd ed., 1999,
   section 7.4.2 (spot functions of a halftone screen).

Default frequencies, angles and the checks of :func:`screen_warnings` are
common practice, from memory, and marked so where they are set.
"""

from __future__ import annotations

import functools
import math
from dataclasses import dataclass

import numpy as np

from quantize.core.units import MM_PER_INCH
from quantize.errors import SeparationError

__all__ = ["Screen", "DOT_SHAPES", "THREADS_PER_LINE", "halftone", "printable_share", "screen_warnings", "default_angles",
           "drop_specks"]

#: Dot shapes: round (a circle grows from the cell's centre), elliptical
#: (an ellipse of axes 1 : 0.7, so dots join along one axis first) and square.
DOT_SHAPES = ("round", "elliptical", "square")

#: Mesh threads per screen line a halftone needs (common practice, from memory): finer lines are cut by
#: the threads.
THREADS_PER_LINE = 4

#: Samples per cell side used to rank a spot function by area.
_RANK_SAMPLES = 256


@dataclass(frozen=True)
class Screen:
    """One ink's screen.

    Attributes
    ----------
    lpi : float
        Screen frequency in lines per inch (cells per inch along each axis).
    angle : float
        Screen angle in degrees, counter-clockwise from the film's x axis.
    shape : {"round", "elliptical", "square"}
    min_dot_mm : float
        The smallest dot (and hole) the screen holds, as a diameter in mm;
        0 for no limit.
    """

    lpi: float
    angle: float = 22.5
    shape: str = "round"
    min_dot_mm: float = 0.0

    def __post_init__(self):
        if not (isinstance(self.lpi, (int, float)) and math.isfinite(self.lpi) and self.lpi > 0):
            raise SeparationError(f"screen frequency must be a positive number of lines per inch, got {self.lpi!r}")
        if not (isinstance(self.angle, (int, float)) and math.isfinite(self.angle)):
            raise SeparationError(f"screen angle must be a number of degrees, got {self.angle!r}")
        if self.shape not in DOT_SHAPES:
            raise SeparationError(f"dot shape must be one of {', '.join(DOT_SHAPES)}, got {self.shape!r}")
        if not (isinstance(self.min_dot_mm, (int, float)) and math.isfinite(self.min_dot_mm)
                and self.min_dot_mm >= 0):
            raise SeparationError(f"minimum dot must be a size of 0 mm or more, got {self.min_dot_mm!r}")

    @property
    def cell_mm(self) -> float:
        """The side of one cell in mm."""
        return MM_PER_INCH / self.lpi

    @property
    def min_share(self) -> float:
        """The share of a cell that a dot of the minimum diameter covers (at most 0.5)."""
        return min(0.5, math.pi * (self.min_dot_mm / 2.0) ** 2 / self.cell_mm**2)


def _spot(shape: str, x: np.ndarray, y: np.ndarray) -> np.ndarray:
    """The spot function at cell coordinates ``x``, ``y`` in [-1, 1): lower values ink first."""
    if shape == "round":
        return x * x + y * y
    if shape == "elliptical":
        return x * x + (y / 0.7) ** 2
    return np.maximum(np.abs(x), np.abs(y))


@functools.lru_cache(maxsize=None)
def _reach_table(shape: str) -> np.ndarray:
    """Per sample of a fine grid over one cell, the share at which the dot reaches it.

    The spot function's samples ranked by value: the share of the cell whose
    value lies below a sample's. Read-only, cached.
    """
    t = (np.arange(_RANK_SAMPLES) + 0.5) / _RANK_SAMPLES * 2.0 - 1.0
    x, y = np.broadcast_arrays(t[:, None], t[None, :])
    spot = _spot(shape, x, y)
    # Ties (a square dot's rings, a round dot's circles) are broken by distance from the centre, then by
    # place, so that every sample has its own rank and a flat share inks exactly that share of a cell.
    order = np.lexsort(((x + 2.0 * y).ravel(), (x * x + y * y).ravel(), spot.ravel()))
    rank = np.empty(order.size, np.int64)
    rank[order] = np.arange(order.size)
    reach = (rank / order.size).reshape(spot.shape).astype(np.float32)
    reach.flags.writeable = False
    return reach


def printable_share(share: np.ndarray, min_share: float) -> np.ndarray:
    """``share`` with dots and holes below ``min_share`` of a cell dropped or grown to it.

    A share below half the minimum prints nothing, one from half the
    minimum up to it prints the minimum dot; the same for holes near full
    cover.  Between, the share is unchanged.

    Examples
    --------
    >>> printable_share(np.array([0.01, 0.03, 0.5, 0.97, 0.99]), 0.04).tolist()
    [0.0, 0.04, 0.5, 0.96, 1.0]
    """
    s = np.clip(np.asarray(share, dtype=np.float64), 0.0, 1.0)
    if min_share <= 0:
        return s
    out = s.copy()
    low = s < min_share
    out[low] = np.where(s[low] < min_share / 2.0, 0.0, min_share)
    high = s > 1.0 - min_share
    out[high] = np.where(s[high] > 1.0 - min_share / 2.0, 1.0, 1.0 - min_share)
    return out


def halftone(share: np.ndarray, screen: Screen, dpi: float, *, row0: int = 0) -> np.ndarray:
    """The 1-bit film of an ink's share per film pixel under ``screen``.

    Parameters
    ----------
    share : (H, W) array of float
        The ink's share of each film pixel, 0 to 1.
    screen : Screen
    dpi : float
        The film's resolution.
    row0 : int, default 0
        The film row of ``share``'s first row: a film made in strips of
        rows is the same film as one made whole.

    Returns
    -------
    (H, W) bool ndarray
        True where the film prints.

    Examples
    --------
    >>> film = halftone(np.full((300, 300), 0.25), Screen(lpi=60, angle=45), 600)
    >>> round(float(film.mean()), 2)
    0.25
    """
    share = np.asarray(share, dtype=np.float64)
    if share.ndim != 2:
        raise SeparationError(f"a halftone needs a 2-D share per film pixel, got shape {share.shape}")
    if not (isinstance(dpi, (int, float)) and math.isfinite(dpi) and dpi > 0):
        raise SeparationError(f"film resolution must be positive, got {dpi!r}")
    h, w = share.shape
    # Pixel centres in cells of the turned screen.
    scale = screen.lpi / float(dpi)
    a = math.radians(screen.angle)
    ys, xs = (np.arange(row0, row0 + h) + 0.5)[:, None], (np.arange(w) + 0.5)[None, :]
    u = (xs * math.cos(a) + ys * math.sin(a)) * scale
    v = (-xs * math.sin(a) + ys * math.cos(a)) * scale
    # The area of the cell whose spot value is below this pixel's: the share at which its dot reaches it,
    # read from the ranked samples of the cell nearest the pixel's place in it (1/256 of a cell).
    col = np.minimum(((u - np.floor(u)) * _RANK_SAMPLES).astype(np.intp), _RANK_SAMPLES - 1)
    row = np.minimum(((v - np.floor(v)) * _RANK_SAMPLES).astype(np.intp), _RANK_SAMPLES - 1)
    reach = _reach_table(screen.shape)[col, row]
    printed = printable_share(share, screen.min_share)
    # A full share inks every pixel, even where the spot function peaks above the ranked samples.
    return (reach < printed) | (printed >= 1.0)


def drop_specks(film: np.ndarray, min_area_px: float, *, printable: np.ndarray | None = None) -> tuple[int, int]:
    """Remove, in place, inked pieces and holes of fewer than ``min_area_px`` pixels.

    :func:`printable_share` keeps every dot of a flat tone at or above the
    minimum; where the tone changes within a cell, or where the film's pixel
    grid cuts a dot, a smaller piece can remain. Pieces are 4-connected (a
    diagonal touch does not hold two dots together on a screen). A piece or
    hole that touches the edge of the printed area is cut by it and is kept.

    Parameters
    ----------
    film : (H, W) bool ndarray
        Changed in place.
    min_area_px : float
        The minimum dot's area in film pixels.
    printable : (H, W) bool ndarray, optional
        Where anything prints (default: everywhere); holes are looked for
        only there.

    Returns
    -------
    (int, int)
        Pieces removed and holes filled.

    Examples
    --------
    >>> f = np.zeros((20, 20), bool); f[2, 2] = True; f[8:14, 8:14] = True
    >>> drop_specks(f, 4.0), int(f.sum())
    ((1, 0), 36)
    """
    from scipy import ndimage as ndi

    if min_area_px <= 1:
        return 0, 0
    counts = []
    for want in (True, False):
        region = film if want else ~film
        if not want and printable is not None:
            region &= printable
        lab, n = ndi.label(region)
        if n == 0:
            counts.append(0)
            continue
        area = np.bincount(lab.ravel(), minlength=n + 1)
        edge = np.zeros(n + 1, bool)
        for side in (lab[0], lab[-1], lab[:, 0], lab[:, -1]):
            edge[side] = True
        if printable is not None and not printable.all():
            # Pieces beside a pixel that prints nothing are cut by the print's edge.
            edge[np.unique(lab[ndi.binary_dilation(~printable, structure=np.ones((3, 3), bool))])] = True
        small = (area < min_area_px) & ~edge
        small[0] = False
        if small.any():
            film[small[lab]] = not want
        counts.append(int(small.sum()))
    return counts[0], counts[1]


def default_angles(n: int) -> list[float]:
    """Screen angles for ``n`` inks, kept apart: 30 degrees for up to three, else spread over 90.

    Common practice, from memory: halftone screens of different inks are
    set at least 15 to 30 degrees apart so that their patterns do not beat
    (moire); a square grid repeats every 90 degrees.

    Examples
    --------
    >>> default_angles(3)
    [22.5, 52.5, 82.5]
    """
    if n < 1:
        return []
    step = 30.0 if n <= 3 else 90.0 / n
    return [round(22.5 + i * step, 4) % 180.0 for i in range(n)]


def screen_warnings(screen: Screen, dpi: float, mesh: float | None = None) -> list[str]:
    """What the film resolution and the mesh say about a screen (common practice, from memory).

    - Film pixels per cell: fewer than 10 along a side give fewer than about
      100 distinct dot sizes (a cell of n x n pixels has n^2 + 1 levels),
      and tones band.
    - Mesh: the mesh count should be at least 4 times the screen frequency,
      or the threads cut the dots.
    """
    out = []
    per_cell = float(dpi) / screen.lpi
    if per_cell < 10:
        out.append(f"{screen.lpi:g} lpi is too fine for {dpi:g} dpi film: {per_cell:.1f} film pixels per cell, "
                   f"about {int(per_cell * per_cell) + 1} tone levels (at least 10 pixels per cell is common practice)")
    if mesh is not None and mesh < THREADS_PER_LINE * screen.lpi:
        out.append(f"a {mesh:g} mesh is too coarse for {screen.lpi:g} lpi: common practice asks at least 4 threads "
                   f"per screen line ({THREADS_PER_LINE * screen.lpi:g} mesh or finer, or "
                   f"{mesh / THREADS_PER_LINE:g} lpi or coarser)")
    if screen.min_dot_mm > 0 and screen.min_share >= 0.5:
        out.append(f"the minimum dot of {screen.min_dot_mm:g} mm covers half a {screen.cell_mm:.2f} mm cell: "
                   f"{screen.lpi:g} lpi cannot print tones at this minimum")
    return out
