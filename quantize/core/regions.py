"""Where colours sit: the flat, coherent regions of a picture.

A printer counts inks by the areas that print one colour, not by how many
pixels of each colour a file holds.  Anti-aliased edges, the fringes of
text, JPEG ringing and scan noise put many pixels at colours between two
inks; they lie in thin seams along the edges of regions, never in a region's
inside.  :func:`find_regions` separates the two:

1. The picture goes to CIELAB and is smoothed by Gaussians of
   :data:`SMOOTHING` pixels (wider for a*, b* than for L*), which average
   away sensor and JPEG noise.
2. A pixel is *flat* when the colour range of the smoothed image in the
   5 x 5 window around it is below ``threshold``.  The range counts
   lightness as it is and chroma divided by ``1 + 0.045 C`` (the chroma
   weighting ``S_C`` of CIEDE2000, Sharma et al. 2005, eq. 17), so that
   the noise of a saturated ink counts as the eye and CIEDE2000 weigh it.
   An edge between two inks, however soft, crosses the window and is not
   flat; a gentle shading is.
3. Flat pixels that touch (8-connected) form a region, if its core holds
   a disc of :data:`MIN_CORE_RADIUS` pixels (thin flat runs are hairlines
   and the length of a seam).  A region's colour
   is the mean CIELAB of its flat pixels in the unsmoothed picture.  Its area
   counts the pixels within :data:`RIM` pixels of it (8-neighbour steps) that
   belong to no other region: the window took that rim off every region's
   edge.

Large pictures are analysed at a reduced scale (every n-th pixel of every
n-th row) so that the analysis stays a fraction of the fit's time and
memory; areas are reported in the full picture's pixels.

References
----------
.. [1] X. Zhang and B. A. Wandell, "A spatial extension of CIELAB for
   digital color-image reproduction", Journal of the Society for
   Information Display 5(1), 61-63, 1997.
.. [2] G. Sharma, W. Wu and E. N. Dalal, "The CIEDE2000 color-difference
   formula: implementation notes, supplementary test data, and
   mathematical observations", Color Research & Application 30(1),
   21-30, 2005.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from quantize.colour.spaces import delta_e_ciede2000, srgb_to_lab

from .picture import Picture

__all__ = ["Regions", "find_regions", "FLAT_THRESHOLD", "SMOOTHING", "RIM", "MIN_CORE_RADIUS", "ANALYSIS_PIXELS"]

#: Colour range (ΔE, chroma weighted as CIEDE2000 weighs it) within a 5 x 5
#: window below which a pixel is flat.  Chosen on generated flat artwork
#: with anti-aliased text and shapes, JPEG quality 75 and a simulated scan
#: (0.8 px blur, noise, paper tint): at 6 the inside of every ink region is
#: flat and no edge between two inks 10 ΔE00 apart is.
FLAT_THRESHOLD = 6.0
#: Standard deviations of the noise-averaging Gaussians, in pixels, for
#: lightness and for a*, b*.  Chroma gets the wider one: JPEG keeps it at
#: half resolution (4:2:0), and the eye resolves chroma less finely than
#: lightness (the reason S-CIELAB filters a*, b* more, Zhang & Wandell 1997).
SMOOTHING = (1.0, 1.0)
#: Width in pixels of the rim the 5 x 5 window takes off a region.
RIM = 3
#: The smallest inscribed radius, in pixels, of a region's flat core (some
#: pixel of it at least this far from every pixel that is not flat): with
#: the rim, an area of ink at least about 9 px across.  Thinner flat runs are
#: the insides of hairlines and blurred seams.
MIN_CORE_RADIUS = 2.0
#: Pictures above this many pixels are analysed at a reduced scale.
ANALYSIS_PIXELS = 300_000
_WINDOW = 5


@dataclass(frozen=True, eq=False)
class Regions:
    """The flat regions of a picture.

    Attributes
    ----------
    lab : ndarray of shape (n, 3)
        Mean CIELAB (D65) colour of each region's flat core.
    area : ndarray of shape (n,)
        Pixels of each region in the full picture, rim included.
    n_pixels : int
        Opaque pixels of the full picture.
    flat_share : float
        Share of the opaque pixels that are flat (0-1).
    labels : ndarray of shape (h, w), int
        Region number + 1 of every pixel at the analysis scale, 0 where no
        region is (edges, texture, transparency).
    scale : int
        The analysis scale: one label pixel stands for ``scale x scale``
        picture pixels.
    centre : ndarray of shape (n, 2)
        Centre of each region's flat core as (x, y) shares of the picture's
        width and height (0-1, from the top left).
    spread : float
        How even the regions are: the 90th percentile CIEDE2000 of their
        pixels from their region's mean colour (inf without regions).
        Flat ink, scanned or compressed, stays within a few ΔE00; shading
        and photographs do not.
    """

    lab: np.ndarray
    area: np.ndarray
    n_pixels: int
    flat_share: float
    labels: np.ndarray
    scale: int
    spread: float
    centre: np.ndarray

    @property
    def share(self) -> np.ndarray:
        """Each region's area as a share of the opaque pixels (0-1)."""
        return self.area / max(self.n_pixels, 1)

    def __len__(self) -> int:
        return len(self.area)


# --------------------------------------------------------------------------- grid operations in numpy
# scipy.ndimage would do all of these, but importing it costs 0.2-0.3 s, more
# than the whole analysis of an everyday file; these are the few it needs.


def _shifted(a: np.ndarray, dy: int, dx: int, fill) -> np.ndarray:
    """``a`` moved so that ``out[y, x] = a[y + dy, x + dx]``, ``fill`` outside."""
    out = np.full_like(a, fill)
    h, w = a.shape[:2]
    ys, yd = (slice(dy, h), slice(0, h - dy)) if dy >= 0 else (slice(0, h + dy), slice(-dy, h))
    xs, xd = (slice(dx, w), slice(0, w - dx)) if dx >= 0 else (slice(0, w + dx), slice(-dx, w))
    out[yd, xd] = a[ys, xs]
    return out


def _gaussian(a: np.ndarray, sigma: float) -> np.ndarray:
    """Separable Gaussian blur of a 2-D array (radius 4 sigma, edges mirrored)."""
    r = int(4 * sigma + 0.5)
    taps = np.exp(-0.5 * (np.arange(-r, r + 1) / sigma) ** 2)
    taps /= taps.sum()
    out = a
    for axis in (0, 1):
        pad = [(0, 0), (0, 0)]
        pad[axis] = (r, r)
        padded = np.pad(out, pad, mode="symmetric")
        n = out.shape[axis]
        acc = np.zeros_like(out)
        for i, t in enumerate(taps):
            acc += t * (padded[i:i + n] if axis == 0 else padded[:, i:i + n])
        out = acc
    return out


def _window_range(a: np.ndarray, size: int) -> np.ndarray:
    """Max minus min of a 2-D array over a ``size x size`` window (edges: the window inside)."""
    r = size // 2
    hi, lo = a.copy(), a.copy()
    for axis in (0, 1):
        h2, l2 = hi.copy(), lo.copy()
        for d in range(1, r + 1):
            for sgn in (-d, d):
                dy, dx = (sgn, 0) if axis == 0 else (0, sgn)
                np.maximum(h2, _shifted(hi, dy, dx, -np.inf), out=h2)
                np.minimum(l2, _shifted(lo, dy, dx, np.inf), out=l2)
        hi, lo = h2, l2
    return hi - lo


def _erode(mask: np.ndarray, offsets) -> np.ndarray:
    """Pixels of ``mask`` whose every offset neighbour is in ``mask`` (outside counts as in)."""
    out = mask.copy()
    for dy, dx in offsets:
        out &= _shifted(mask, dy, dx, True)
    return out


_SQUARE = [(dy, dx) for dy in (-1, 0, 1) for dx in (-1, 0, 1) if dy or dx]


def _label(mask: np.ndarray) -> tuple[np.ndarray, int]:
    """8-connected components of ``mask``: (labels 1..n, 0 outside; n), numbered in raster order of first pixel.

    Runs of each row are joined to the runs of the row above that touch them
    (diagonals included); the components of that run graph come from
    min-label propagation with pointer jumping.
    """
    h, w = mask.shape
    edge = np.diff(np.pad(mask.astype(np.int8), ((0, 0), (1, 1))), axis=1)
    rs, cs = np.nonzero(edge == 1)
    _, ce = np.nonzero(edge == -1)
    n_runs = len(rs)
    labels = np.zeros((h, w), np.int32)
    if n_runs == 0:
        return labels, 0
    width = w + 2
    key_s, key_e = rs * width + cs, rs * width + ce
    # Runs of the row above that touch run i: start < e_i + 1 and end > s_i - 1.
    lo = np.searchsorted(key_e, (rs - 1) * width + cs - 1, side="right")
    hi = np.searchsorted(key_s, (rs - 1) * width + ce + 1, side="left")
    hi = np.maximum(hi, lo)
    count = hi - lo
    a = np.repeat(np.arange(n_runs), count)
    b = np.arange(count.sum()) - np.repeat(np.cumsum(count) - count, count) + np.repeat(lo, count)
    comp = np.arange(n_runs)
    while True:
        old = comp.copy()
        m = np.minimum(comp[a], comp[b])
        np.minimum.at(comp, a, m)
        np.minimum.at(comp, b, m)
        comp = comp[comp]
        comp = comp[comp]
        if np.array_equal(comp, old):
            break
    roots, comp = np.unique(comp, return_inverse=True)
    length = ce - cs
    start = np.repeat(rs * w + cs - np.cumsum(length) + length, length)
    flat_index = np.arange(length.sum()) + start
    labels.ravel()[flat_index] = np.repeat(comp.ravel() + 1, length)
    return labels, len(roots)


def _grow(labels: np.ndarray, allowed: np.ndarray, steps: int) -> np.ndarray:
    """Labels spread ``steps`` pixels (8-neighbours) into unlabelled pixels of ``allowed``."""
    out = labels.copy()
    for _ in range(steps):
        empty = (out == 0) & allowed
        if not empty.any():
            break
        best = np.zeros_like(out)
        for dy, dx in _SQUARE:
            np.maximum(best, _shifted(out, dy, dx, 0), out=best)
        out[empty] = best[empty]
    return out



def find_regions(picture: Picture, *, threshold: float = FLAT_THRESHOLD,
                 max_pixels: int = ANALYSIS_PIXELS) -> Regions:
    """The flat, coherent regions of ``picture`` and their colours.

    Parameters
    ----------
    picture : Picture
    threshold : float, default=6.0
        Colour range in a 5 x 5 window (ΔE, chroma weighted) below which a
        pixel is flat; see the module notes.
    max_pixels : int, default=300_000
        Pictures larger than this are analysed at the smallest whole-pixel
        reduction that brings them below it.

    Returns
    -------
    Regions

    Examples
    --------
    >>> import numpy as np
    >>> from quantize.core.picture import Picture
    >>> rgb = np.full((60, 60, 3), 250, np.uint8); rgb[:, 30:] = (200, 30, 40)
    >>> r = find_regions(Picture(rgb))
    >>> len(r), [round(float(s), 2) for s in r.share]
    (2, [0.5, 0.5])
    """
    h, w = picture.shape
    scale = 1
    while (h // scale) * (w // scale) > max_pixels:
        scale += 1
    # Every scale-th pixel: the smoothing below averages what a box filter
    # would, and features thinner than the reduction are no region anyway.
    opaque = picture.opaque[::scale, ::scale]
    lab = srgb_to_lab(picture.rgb[::scale, ::scale] / float(picture.max_code))
    smooth = np.stack([_gaussian(lab[..., c], SMOOTHING[c > 0]) for c in range(3)], axis=-1)
    span = np.stack([_window_range(smooth[..., c], _WINDOW) for c in range(3)], axis=-1)
    weight = 1.0 + 0.045 * np.hypot(smooth[..., 1], smooth[..., 2])
    spread = np.sqrt(span[..., 0] ** 2 + (span[..., 1] ** 2 + span[..., 2] ** 2) / weight**2)
    # A transparent pixel is no ink; nor is an opaque one beside it.
    flat = (spread < threshold) & _erode(opaque, _SQUARE)
    labels, n = _label(flat)
    if n:
        # A seam can be flat along its length: a core with no pixel at least
        # MIN_CORE_RADIUS (2 px) from its edge -- no pixel whose 3 x 3
        # neighbours are all flat -- is a line or a stroke's edge, not an
        # area of ink.
        thick = np.zeros(n + 1, bool)
        thick[np.unique(labels[_erode(flat, _SQUARE)])] = True
        thick[0] = False
        flat = thick[labels]
        labels, n = _label(flat)
    if n:
        # The mean of a flat core: its pixels lie within the threshold of each
        # other, and a bincount is a fraction of a per-label median's cost.
        count = np.bincount(labels.ravel(), minlength=n + 1)[1:]
        mean = np.stack([np.bincount(labels.ravel(), weights=lab[..., c].ravel(), minlength=n + 1)[1:] / count
                         for c in range(3)], axis=1)
        grown = _grow(labels, opaque, RIM)
        area = np.bincount(grown.ravel(), minlength=n + 1)[1:].astype(np.float64) * scale * scale
        yy, xx = np.indices(labels.shape)
        centre = np.stack([np.bincount(labels.ravel(), weights=xx.ravel(), minlength=n + 1)[1:] / count,
                           np.bincount(labels.ravel(), weights=yy.ravel(), minlength=n + 1)[1:] / count],
                          axis=1) / np.array([labels.shape[1], labels.shape[0]])
        inside = labels > 0
        step = max(1, int(np.count_nonzero(inside)) // 50_000)  # a percentile needs no more
        spread = float(np.percentile(delta_e_ciede2000(lab[inside][::step], mean[labels[inside][::step] - 1]), 90))
    else:
        mean, area, spread, centre = np.zeros((0, 3)), np.zeros(0), float("inf"), np.zeros((0, 2))
    n_opaque = int(np.count_nonzero(picture.opaque))
    flat_share = float(np.count_nonzero(flat)) / max(int(np.count_nonzero(opaque)), 1)
    return Regions(lab=np.asarray(mean, dtype=np.float64).reshape(-1, 3), area=area, n_pixels=n_opaque,
                   flat_share=flat_share, labels=labels, scale=scale, spread=spread,
                   centre=centre)
