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
   counts the pixels within :data:`RIM` pixels of it that belong to no other
   region: the window took that rim off every region's edge.

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
#: The smallest inscribed radius, in pixels, of a region's flat core: with the
#: rim, an area of ink at least about 9 px across.  Thinner flat runs are the
#: insides of hairlines and blurred seams.
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
    from scipy import ndimage as ndi

    h, w = picture.shape
    scale = 1
    while (h // scale) * (w // scale) > max_pixels:
        scale += 1
    # Every scale-th pixel: the smoothing below averages what a box filter
    # would, and features thinner than the reduction are no region anyway.
    opaque = picture.opaque[::scale, ::scale]
    lab = srgb_to_lab(picture.rgb[::scale, ::scale] / float(picture.max_code))
    smooth = np.stack([ndi.gaussian_filter(lab[..., c], SMOOTHING[c > 0]) for c in range(3)], axis=-1)
    span = np.stack([ndi.maximum_filter(smooth[..., c], _WINDOW) - ndi.minimum_filter(smooth[..., c], _WINDOW)
                     for c in range(3)], axis=-1)
    weight = 1.0 + 0.045 * np.hypot(smooth[..., 1], smooth[..., 2])
    spread = np.sqrt(span[..., 0] ** 2 + (span[..., 1] ** 2 + span[..., 2] ** 2) / weight**2)
    # A transparent pixel is no ink; nor is an opaque one beside it.
    flat = (spread < threshold) & ndi.binary_erosion(opaque, np.ones((3, 3)), border_value=1)
    labels, n = ndi.label(flat, structure=np.ones((3, 3), dtype=bool))
    if n:
        # A seam can be flat along its length: a core too thin to hold a disc
        # of MIN_CORE_RADIUS is a line or a stroke's edge, not an area of ink.
        depth = np.zeros(n + 1)
        np.maximum.at(depth, labels.ravel(), ndi.distance_transform_edt(flat).ravel())
        thick = depth >= MIN_CORE_RADIUS
        thick[0] = False
        flat = thick[labels]
        labels, n = ndi.label(flat, structure=np.ones((3, 3), dtype=bool))
    if n:
        # The mean of a flat core: its pixels lie within the threshold of each
        # other, and a bincount is a fraction of a per-label median's cost.
        count = np.bincount(labels.ravel(), minlength=n + 1)[1:]
        mean = np.stack([np.bincount(labels.ravel(), weights=lab[..., c].ravel(), minlength=n + 1)[1:] / count
                           for c in range(3)], axis=1)
        dist, (iy, ix) = ndi.distance_transform_edt(labels == 0, return_indices=True)
        grown = np.where((dist <= RIM) & opaque, labels[iy, ix], 0)
        area = np.bincount(grown.ravel(), minlength=n + 1)[1:].astype(np.float64) * scale * scale
        yy, xx = np.indices(labels.shape)
        centre = np.stack([np.bincount(labels.ravel(), weights=xx.ravel(), minlength=n + 1)[1:] / count / labels.shape[1],
                           np.bincount(labels.ravel(), weights=yy.ravel(), minlength=n + 1)[1:] / count / labels.shape[0]],
                          axis=1)
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
