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
   flat; a gentle shading is.  How much the lightness of flat pixels varies
   about a plane fitted to each region's (``Regions.texture``) tells a
   photograph's texture, under the threshold, from an ink's noise, and
   the part of it at 9 to 33 px (``Regions.grain``) a photograph's grain
   from a scan's noise, which lies under 9 px.
3. Flat pixels that touch (8-connected) form a region, if its core holds
   a disc of :data:`MIN_CORE_RADIUS` pixels (thin flat runs are hairlines
   and the length of a seam).  A region's colour
   is the mean CIELAB of its flat pixels in the unsmoothed picture.  Its area
   counts the pixels within :data:`RIM` pixels of it (8-neighbour steps) that
   belong to no other region: the window took that rim off every region's
   edge.

4. Spots too small or too noisy to be flat inside, and strokes 1-3 px
   wide, become regions too (:func:`_structures`): touching pixels whose
   smoothed colour is :data:`UNEXPLAINED_DE` from every flat colour and
   that are no seam, a mix of the colours on either side of them.  A spot
   is kept if its colour is that far from every flat colour, a stroke if it
   is that far from every mix of flat colours (its smoothed colour, from
   every mix of the flat colours beside it: :func:`_sides`).  A stroke narrower than
   :data:`PRINTABLE_WIDTH` (a line too thin to print, whose ink no pixel
   holds), or within :data:`LINE_MIX_DE` of a mix of such a line's colour
   and its ground, is no ink (:func:`_unprintable_lines`).  They add no
   flat share.
5. Where spots and strokes are looked for (artwork), a region whose core
   holds under :data:`INTERIOR_SHARE` of the picture takes its colour from
   its interior, not its flat core (:func:`_interior_colours`), and a thin
   run of a mix of two colours, JPEG's chroma spread from lettering, is no
   region (:func:`_bleeds`).
6. What is left, structures of unexplained non-seam pixels too small to
   keep, is measured (:func:`_specks`): in artwork they are fragments of
   lettering, blends of its inks; where they cover :data:`SPECK_SHARE` in
   colours no mix of flat colours makes, they are a photograph's detail
   (``Regions.speck_share``; fit/inkcount.judge).

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

from quantize.colour.spaces import clip_to_gamut, delta_e_ciede2000, lab_to_srgb, srgb_to_lab

from .picture import Picture

__all__ = ["Regions", "find_regions", "FLAT_THRESHOLD", "SMOOTHING", "RIM", "MIN_CORE_RADIUS", "ANALYSIS_PIXELS",
           "UNEXPLAINED_DE", "STRUCTURE_MIN_SHARE", "STRUCTURE_MIN_PIXELS", "SEAM_TOLERANCE", "SPOT_MIN_DEEP",
           "SPOT_SPREAD", "EVEN_DE", "MIX_COLOURS", "INTERIOR_SHARE", "INTERIOR_REACH", "INTERIOR_RIM",
           "BLEED_DEPTH", "BLEED_SHARE", "BLEED_DE", "BLEED_CHROMA_SHIFT", "PRINTABLE_WIDTH",
           "LINE_MIX_DE", "SIDE_REACH", "SPECK_SHARE", "GRAIN_REACH", "GRAIN_SURROUND", "GRAIN_QUANTILE",
           "sorted_by_region"]

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
#: ΔE (chroma weighted, as the flatness test weighs it) from every flat
#: region's colour beyond which a pixel is a colour no flat region explains:
#: the distance at which two inks count as two (fit/inkcount.DISTINCT_DE).
UNEXPLAINED_DE = 10.0
#: The smallest structure of unexplained, non-seam pixels that is kept as an
#: ink of its own: 0.02 % of the analysed pixels and at least 12 pixels.
#: A 1-pixel line of 0.1 % of a 320 x 320 image is about 100 px long; noise
#: specks and JPEG blocks left after the seam test are a few pixels each.
STRUCTURE_MIN_SHARE = 0.0002
STRUCTURE_MIN_PIXELS = 12
#: Pixels 2 px or more inside a structure (two 3 x 3 erosions after its
#: one-pixel holes are closed) that make it a spot rather than a stroke: a
#: disc of 0.27 % of a 320 x 320 image through a simulated scan kept 38, a
#: stroke or a shape's tail up to 4 px wide keeps none, and the insides of
#: lettering where strokes close in 14-44.
SPOT_MIN_DEEP = 20
#: How even a spot is: 80 % of its inner pixels within this ΔE (chroma
#: weighted) of their mean.  Spots of 0.27 % through a simulated scan or
#: JPEG q75 measured 4.6-5.5; the insides of scanned lettering 7.5-13.
SPOT_SPREAD = 6.5
#: The most flat colours (the distinct ones of most pixels) whose mixes may
#: explain a stroke: 12 make 220 trios, about 100 000 mixes.  Artwork has
#: fewer inks; a photograph's hundred would make millions.
MIX_COLOURS = 12
#: A pixel whose colour lies within this share of the distance between two
#: pixels on either side of it (2 px away, four directions), and at least
#: ``UNEXPLAINED_DE / 2`` from each of them, is a seam: a mix of its two
#: neighbours, anti-aliased, blurred or compressed.  A stroke of its own ink
#: is far from the segment between the inks on either side of it.
SEAM_TOLERANCE = 0.3
#: A region is even when 90 % of its pixels are within this ΔE00 of its
#: colour: flat ink, scanned or compressed, stays under 3 in the generated
#: tests (the same bound as fit/inkcount.TONE_SPREAD_DE).
EVEN_DE = 3.5
#: A region whose flat core holds fewer than this share of the analysed
#: pixels takes its colour from its interior (:func:`_interior_colours`):
#: a larger region's core is its interior less the 3 px rim.
INTERIOR_SHARE = 0.02
#: How far, in pixels, a small region's footprint reaches beyond its core,
#: and the rim taken off the footprint before its colour is read.  The
#: footprint ends at the half-way line of the blurred edge; the next pixel
#: in is still mixed by a 0.8 px blur and JPEG's 2 x 2 chroma.  On 60
#: generated files (tuning seeds) with a 0.2-0.5 % spot through a simulated
#: scan or JPEG 4:2:0 q75, the median of the footprint less 1 px came within
#: ΔE00 1.7 of the ink (the flat core's mean: up to 3.7; less 2 px: up to
#: 3.6, too few pixels left; the mean less 1 px: up to 2.0).
INTERIOR_REACH = 6
INTERIOR_RIM = 1
#: A flat region at most this deep (px: three 3 x 3 erosions leave nothing
#: of its core), under this share of the picture, and within this ΔE (chroma
#: weighted) of a mix of two of the largest region colours is JPEG's chroma
#: spread from lettering, not an ink (:func:`_bleeds`).  On generated
#: lettering through JPEG 4:2:0 q75 and q90 (12 files, tuning), such
#: regions lay within 0.9 of a mix and 2-3 px deep; 0.2-0.5 % spots (60
#: files) 3-6 px deep and 6.4 or more from any mix; other small regions of
#: an ink 2.3 or more.
BLEED_DEPTH = 3
BLEED_SHARE = 0.01
BLEED_DE = 1.5
#: How far (in mix weight) a bleed's chroma may sit from its lightness's
#: mix: JPEG 4:2:0 averages the chroma of a hairline over 2 x 2 pixels with
#: its ground, so a thin run along it can hold the lightness of a 50 % mix
#: and the chroma of a 20 % one.  On the generated lettering such a run
#: (at the end of a hairline, where the picture's edge cuts the window)
#: lay 4.8 from every mix of one weight and 0.26 from one with a shift of
#: 0.35; the 0.2-0.5 % spots thin enough to be tested (60 files, tuning
#: seeds 0-29, JPEG q75 and scan) stayed 5.1 or more from these mixes (at a
#: shift of 0.5: 2.4).
BLEED_CHROMA_SHIFT = 0.35
#: The narrowest stroke kept as an ink, in pixels of its own colour
#: (:func:`_stroke_width`).  A 1 px line gives 1 to 2 (1 / m where m is the
#: coverage of its darker pixels), a 2 px line 2 and a 3 px line 3; on
#: generated linework (tuning seeds 30-39) the pieces of 1 px lines measured
#: 1.0-1.35 (73 of 84) or, where they fall half on two pixels, 1.9 or more;
#: 2 px lines 1.66 or more and 3 px lines 2.5 or more.  At 300 dpi 1.5 px is 0.13 mm, below the finest
#: line a screen usually holds (about 0.15-0.2 mm; common practice, from
#: memory).
PRINTABLE_WIDTH = 1.5
#: A stroke within this ΔE (chroma weighted) of a 10-90 % mix of two of the
#: colours around it, a thin line's among them, is that line's blend with
#: its ground (:func:`_unprintable_lines`).  Wider than :data:`BLEED_DE`: a
#: stroke's colour is the median of a few dozen pixels over grounds that
#: vary along it.  On generated 1 px linework (tuning seeds 30-39) the
#: blends lay within 1.8 of such a mix; the pieces of 2 and 3 px lines in
#: their own ink, 4.8 or more.
LINE_MIX_DE = 3.0
#: How far (px) from a stroke :func:`_sides` looks for the flat regions on
#: either side of it: a flat core begins 3-4 px past a blurred edge (the
#: 5 x 5 window and the smoothing), so a 3 px line's sides lie within 6.
SIDE_REACH = 8
#: Share of the analysed pixels in *specks* (:func:`_specks`) at which a
#: picture is detail, not ink: structures of unexplained, non-seam pixels
#: smaller than the structure minimum whose colour no mix of up to three
#: flat colours explains.  Artwork's leftovers are the fragments of lettering
#: and hairlines, blends of its inks; a photograph's are its small detail
#: (the galaxies of a deep-field photo on its flat black sky).  On the
#: project's generated art and scikit-image's logo (the tests' 133 cases) specks
#: covered 0.16 % at most (the logo; lettering and 1 px hairlines 0.01 %); on
#: scikit-image's deep-field photo at full size and at 0.4, 0.6 and 0.8 of
#: it, 1.7 % to 2.3 %.  0.5 % lies between, about 3 times from each.
SPECK_SHARE = 0.005
#: Half-widths (px) of the windows of :func:`_grain`: the lightness's
#: distance from each region's plane is averaged over 9 x 9 flat pixels, less
#: its average over 33 x 33 (a band of scales, as a difference of two box
#: filters passes), and that is squared and averaged over 9 x 9 again.  A
#: photograph's grain (the blotches of a brick, the faint sky of a deep-field
#: photo) lies in that band and survives; scan noise and JPEG's, a pixel or a
#: block across, mostly average out of the small window, and what a plane
#: leaves of a shading that clips at full ink (a kink across the sheet) out of
#: the difference.  Chosen on the tuning set of fit/inkcount.TONE_GRAIN_L:
#: with the 9 x 9 average alone, shaded and scanned flat art (seed 5102, its
#: ground's green at 254 clipped by the shading) measured 0.174, as much as
#: scikit-image's brick at 0.4 (0.181); less the 25 x 25, 33 x 33, 41 x 41 and
#: 49 x 49 averages it measured 0.082 to 0.097, and the brick at 0.4 to 1 of
#: its size stood 1.32, 1.47, 1.47 and 1.50 times above the generated scans
#: (this band alone, on 122 tuning files; docs/method.md *Grain*).
GRAIN_REACH = 4
GRAIN_SURROUND = 16
#: The share of the flat pixels below which the grain is read: its first
#: quartile, so that three quarters of the flat area must hold it.  Artwork may
#: hold some tone (scikit-image's logo: a tinted photograph over about a third
#: of its flat area; its white ground, 32 % of it, is even).
GRAIN_QUANTILE = 0.25
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
    even_share : float
        Share of the flat pixels (0-1) in regions that are even on their own:
        90 % of their pixels within :data:`EVEN_DE` of their colour.  A
        logo with a tinted photograph in one corner keeps most of its flat
        area even; a photograph does not.
    speck_share : float
        Share of the opaque pixels (at the analysis scale) in specks: bits
        of colour too small to be a structure that no mix of flat colours
        explains (:func:`_specks`).  Counted, largest speck first, until it
        is settled whether it reaches :data:`SPECK_SHARE`, so above it (or
        below) it is a lower bound.  0 where spots and strokes were not
        looked for.
    texture : float
        How much the lightness varies all through the flat regions: the
        median distance (L*) of their pixels' smoothed lightness from a
        plane fitted to each region's (:func:`_texture`).  A plane is an
        even ink or a gentle shading across it; what is left is noise the
        smoothing averaged (flat ink, scanned: under 0.3) or a photograph's
        texture (0 without regions).
    grain : float
        Lightness variation at the scale of a photograph's grain: the first
        quartile over the flat pixels of the RMS, over a 9 x 9 window, of the
        9 x 9 mean less the 33 x 33 mean of their lightness's distance from
        their region's plane (:func:`_grain`; 0 without regions).
    grain_ratio : float
        How that band compares with the finer variation (the distance less
        its 9 x 9 mean), RMS over the same window: the median over the flat
        pixels of their ratio.  Noise, white after a scan's blur, puts most
        of its variation under 9 px (generated scans: 0.15 to 0.51); a
        photograph's surface does not (scikit-image's brick: 0.57 to 0.66; 0
        without regions).
    ramp_spread : float
        The spread measured from each region's plane instead of its mean
        colour: the 90th percentile CIEDE2000 of the flat pixels from a plane
        fitted to their region's L*, a* and b* (:func:`_ramp_spread`).  Well
        under ``spread`` where the regions' colours run in ramps (shading, a
        colour wheel); about equal where they vary in strokes or grain (0:
        not measured).
    """

    lab: np.ndarray
    area: np.ndarray
    n_pixels: int
    flat_share: float
    labels: np.ndarray
    scale: int
    spread: float
    centre: np.ndarray
    even_share: float = 1.0
    speck_share: float = 0.0
    texture: float = 0.0
    grain: float = 0.0
    grain_ratio: float = 0.0
    ramp_spread: float = 0.0

    @property
    def share(self) -> np.ndarray:
        """Each region's area as a share of the opaque pixels (0-1)."""
        return self.area / max(self.n_pixels, 1)

    def __len__(self) -> int:
        return len(self.area)


# --------------------------------------------------------------------------- grid operations in numpy
# scipy.ndimage would do all of these, but importing it costs 0.2-0.3 s, more
# than the whole analysis of an everyday file; these are the few it needs.


def _overlap(shape, dy: int, dx: int):
    """Slices ``(dst, src)`` with ``out[dst]`` the pixels whose ``(y + dy, x + dx)`` lies inside, at ``a[src]``."""
    h, w = shape[:2]
    ys, yd = (slice(dy, h), slice(0, max(h - dy, 0))) if dy >= 0 else (slice(0, max(h + dy, 0)), slice(-dy, h))
    xs, xd = (slice(dx, w), slice(0, max(w - dx, 0))) if dx >= 0 else (slice(0, max(w + dx, 0)), slice(-dx, w))
    return (yd, xd), (ys, xs)


def _gaussian(a: np.ndarray, sigma: float) -> np.ndarray:
    """Separable Gaussian blur of a 2-D array (radius 4 sigma, edges mirrored)."""
    r = int(4 * sigma + 0.5)
    taps = np.exp(-0.5 * (np.arange(-r, r + 1) / sigma) ** 2)
    taps /= taps.sum()
    h, w = a.shape
    padded = np.pad(a, ((r, r), (0, 0)), mode="symmetric")
    out = np.empty_like(a, dtype=np.float64)
    # Down the columns, then along the rows, a band of rows at a time: the
    # band's sums stay in the cache, and each output is the same sum of the
    # same products, in the same order, as over the whole picture at once.
    band = max(1, _BAND_VALUES // max(w, 1))
    for y0 in range(0, h, band):
        n = min(band, h - y0)
        term = np.empty((n, w))
        down = np.zeros((n, w))
        for i, t in enumerate(taps):
            down += np.multiply(padded[y0 + i:y0 + i + n], t, out=term)
        row = np.pad(down, ((0, 0), (r, r)), mode="symmetric")
        across = out[y0:y0 + n]
        across[:] = 0.0
        for i, t in enumerate(taps):
            across += np.multiply(row[:, i:i + w], t, out=term)
    return out


#: Values of a band of rows that the blur and the window ranges work on at a
#: time: 32 768 float64 values, 256 KiB, stay in a core's cache.
_BAND_VALUES = 32_768


def _window_range(a: np.ndarray, size: int) -> np.ndarray:
    """Max minus min of a 2-D array over a ``size x size`` window (edges: the window inside)."""
    r = size // 2
    h, w = a.shape
    out = np.empty((h, w), dtype=np.result_type(a, np.float64))
    band = max(1, _BAND_VALUES // max(w, 1))
    # A band of rows at a time, as the blur: a maximum is exact in any order.
    for y0 in range(0, h, band):
        n = min(band, h - y0)
        s0 = max(y0 - r, 0)
        block = a[s0:min(y0 + n + r, h)]
        off = y0 - s0
        hi = block[off:off + n].copy()
        lo = hi.copy()
        for d in range(1, r + 1):  # down the columns: the rows within r that exist
            for sgn in (-d, d):
                i0, i1 = max(0, -(off + sgn)), min(n, len(block) - off - sgn)
                if i1 > i0:
                    np.maximum(hi[i0:i1], block[off + sgn + i0:off + sgn + i1], out=hi[i0:i1])
                    np.minimum(lo[i0:i1], block[off + sgn + i0:off + sgn + i1], out=lo[i0:i1])
        h2, l2 = hi.copy(), lo.copy()
        for d in range(1, r + 1):  # along the rows
            for sgn in (-d, d):
                dst, src = _overlap((n, w), 0, sgn)
                np.maximum(h2[dst], hi[src], out=h2[dst])
                np.minimum(l2[dst], lo[src], out=l2[dst])
        np.subtract(h2, l2, out=out[y0:y0 + n])
    return out


def _erode(mask: np.ndarray, offsets) -> np.ndarray:
    """Pixels of ``mask`` whose every offset neighbour is in ``mask`` (outside counts as in)."""
    out = mask.copy()
    for dy, dx in offsets:
        dst, src = _overlap(mask.shape, dy, dx)
        out[dst] &= mask[src]
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
        # The largest label of the 3 x 3 square, by columns then rows; an
        # empty pixel's own 0 changes no maximum, so it is its neighbours'.
        best = out.copy()
        np.maximum(best[1:], out[:-1], out=best[1:])
        np.maximum(best[:-1], out[1:], out=best[:-1])
        square = best.copy()
        np.maximum(square[:, 1:], best[:, :-1], out=square[:, 1:])
        np.maximum(square[:, :-1], best[:, 1:], out=square[:, :-1])
        np.copyto(out, square, where=empty)
    return out



def _weighted_lab_distance(a: np.ndarray, b: np.ndarray) -> np.ndarray:
    """Lab distance with chroma differences divided by CIEDE2000's ``S_C`` at ``a``'s chroma (as the flat test)."""
    weight = 1.0 + 0.045 * np.hypot(a[..., 1], a[..., 2])
    d = a - b
    return np.sqrt(d[..., 0] ** 2 + (d[..., 1] ** 2 + d[..., 2] ** 2) / weight**2)


def _seams(smooth: np.ndarray, where: np.ndarray | None = None) -> np.ndarray:
    """Pixels whose colour is a mix of two pixels 2 px away on either side of them (any of four directions).

    With ``where`` (a bool mask) only those pixels are tested (the rest are
    False): the same values there, at a fraction of the cost when few are asked.
    """
    h, w = smooth.shape[:2]
    if where is None:
        where = np.ones((h, w), bool)
    ys, xs = np.nonzero(where)
    here = smooth[ys, xs]
    seam = np.zeros(len(ys), bool)
    for dy, dx in ((0, 2), (2, 0), (2, 2), (2, -2)):
        a, b = _neighbour(smooth, ys - dy, xs - dx), _neighbour(smooth, ys + dy, xs + dx)
        ab = b - a
        length2 = np.einsum("ij,ij->i", ab, ab)
        t = np.einsum("ij,ij->i", here - a, ab) / np.maximum(length2, 1e-12)
        rest = here - a - t[:, None] * ab
        off = np.sqrt(np.einsum("ij,ij->i", rest, rest))
        apart = np.sqrt(length2)
        with np.errstate(invalid="ignore"):
            mix = ((off <= SEAM_TOLERANCE * apart) & (t > 0) & (t < 1)
                   & (_weighted_lab_distance(here, a) >= UNEXPLAINED_DE / 2)
                   & (_weighted_lab_distance(here, b) >= UNEXPLAINED_DE / 2))
        seam |= mix
    out = np.zeros((h, w), bool)
    out[ys, xs] = seam
    return out


def _neighbour(smooth: np.ndarray, ys: np.ndarray, xs: np.ndarray) -> np.ndarray:
    """``smooth[ys, xs]`` with NaN where the position lies outside the picture."""
    h, w = smooth.shape[:2]
    ok = (ys >= 0) & (ys < h) & (xs >= 0) & (xs < w)
    out = np.full((len(ys), smooth.shape[2]), np.nan)
    out[ok] = smooth[ys[ok], xs[ok]]
    return out


#: Barycentric weights of mixes of three colours, in steps of 0.05.
_MIX_WEIGHTS = np.array([(a, b, 20 - a - b) for a in range(21) for b in range(21 - a)], dtype=np.float64) / 20.0


def _mixes(flat_lab: np.ndarray, flat_count: np.ndarray):
    """Every mix of up to three of the largest distinct flat colours.

    Mixes of encoded sRGB values, as image filters and resamplers average
    them, and of CIELAB values, as the analysis smooths them.  Only the
    :data:`MIX_COLOURS` distinct colours of most pixels take part: the
    number of mixes grows with the cube of the colours, and a photograph
    has a hundred.  Returns the mixes (m, 3), the three colours each is
    made of (m, 3; indices into the third value, -1 for a colour of the trio
    with no weight in the mix) and those colours (n, 3).
    """
    # Regions of one ink count once (3 apart in CIELAB).
    labs = _largest_distinct(flat_lab, flat_count, distance=lambda a, b: float(np.linalg.norm(a - b)))
    n = len(labs)
    if n < 3:
        labs = np.vstack([labs, np.repeat(labs[:1], 3 - n, axis=0)])
    trios = np.array([(i, j, k) for i in range(len(labs)) for j in range(i + 1, len(labs))
                      for k in range(j + 1, len(labs))])
    i, j, k = trios.T
    trio_lab = np.stack([labs[i], labs[j], labs[k]], axis=1)  # (t, 3, 3)
    trio_rgb = clip_to_gamut(lab_to_srgb(trio_lab))
    in_srgb = srgb_to_lab(np.einsum("wa,tac->twc", _MIX_WEIGHTS, trio_rgb).reshape(-1, 3))
    mixes = np.vstack([in_srgb, np.einsum("wa,tac->twc", _MIX_WEIGHTS, trio_lab).reshape(-1, 3)])
    # The colours a mix holds: those of the trio with a weight (-1 for none).
    members = np.where(trios < n, trios, 0)[:, None, :] * (_MIX_WEIGHTS[None] > 0) - (_MIX_WEIGHTS[None] == 0)
    members = np.tile(members.reshape(-1, 3), (2, 1))
    return mixes, members, labs[:n]


def _stroke_width(lab: np.ndarray, pixels: np.ndarray, colour: np.ndarray) -> float:
    """How wide a stroke is, in pixels of its own ``colour``: the ink it lays across itself.

    For each of the stroke's ``pixels`` (flat indices into ``lab``), the
    pixels up to 2 px on either side along its row, and along its column,
    are read as coverages: the share of the way from the ground (the mean
    of the two pixels 3 px away) to ``colour``, in encoded sRGB, as
    resampling and JPEG mix them.  A pixel's value is the area of it the
    stroke covers, so the sum along a row is the length of the row the
    stroke crosses, ``w / sin(angle)``, and along a column ``w / cos(angle)``:
    ``w = 1 / sqrt(1 / row**2 + 1 / column**2)`` at any angle.  (Along a
    stroke the pixels 3 px away are the stroke, no ground, and the pixel
    is no more inked than they are: that direction adds nothing.  A stroke
    more than about 6 px long along a row, shallower than 30 degrees at
    3 px, is measured on its column alone, up to 15 % wide.)  Returns the median over the pixels.  A line 1 px wide
    read at its darker pixels, of coverage ``m``, gives ``1 / m``, under 2
    unless it falls half on each of two pixels; a line 2 px wide gives 2.
    """
    h, w = lab.shape[:2]
    ys, xs = np.divmod(pixels, w)
    rgb = clip_to_gamut(lab_to_srgb(colour))
    inverse2 = np.zeros(len(pixels))
    for dy, dx in ((0, 1), (1, 0)):
        ring = [_neighbour(lab, ys + k * dy, xs + k * dx) for k in range(-3, 4)]
        enc = [clip_to_gamut(lab_to_srgb(np.nan_to_num(r))) for r in ring]
        ground = 0.5 * (enc[0] + enc[6])
        v = rgb - ground
        norm = np.maximum(np.einsum("ij,ij->i", v, v), 1e-12)
        cover = [np.clip(np.einsum("ij,ij->i", e - ground, v) / norm, 0.0, 1.5) for e in enc[1:6]]
        crossed = sum(cover)
        # Across the stroke the pixel itself is inked against the ground 3 px
        # away, and that ground is no part of the stroke.
        with np.errstate(invalid="ignore"):
            across = ((cover[2] >= 0.5)
                      & (_weighted_lab_distance(ring[0], np.broadcast_to(colour, ring[0].shape)) >= UNEXPLAINED_DE / 2)
                      & (_weighted_lab_distance(ring[6], np.broadcast_to(colour, ring[6].shape)) >= UNEXPLAINED_DE / 2))
        inverse2 += np.where(across, 1.0 / np.maximum(crossed, 1e-6) ** 2, 0.0)
    width = 1.0 / np.sqrt(inverse2[inverse2 > 0])
    return float(np.median(width)) if len(width) else float("inf")


def _is_even(colours: np.ndarray) -> bool:
    """Whether 80 % of ``colours`` lie within :data:`SPOT_SPREAD` (ΔE, chroma weighted) of their mean.

    The inside of lettering, where strokes close in, can be as deep as a
    spot, but its colours run from the ink of the strokes to the ground.
    """
    mean = np.broadcast_to(colours.mean(axis=0), colours.shape)
    return float(np.percentile(_weighted_lab_distance(colours, mean), 80)) <= SPOT_SPREAD


def _structures(lab, smooth, opaque, flat_lab, flat_count, region_labels, min_pixels):
    """Coherent structures of a colour no flat region has: small spots and thin strokes.

    A pixel counts when its smoothed colour is :data:`UNEXPLAINED_DE` or
    more from every flat region's colour and it is no seam between two
    colours (:func:`_seams`).  Such pixels that touch form a structure, kept
    with ``min_pixels`` or more.  A structure with at least
    :data:`SPOT_MIN_DEEP` pixels 2 px inside it, and inner pixels of one
    colour (:data:`SPOT_SPREAD`), is a spot: its colour is
    the mean of its inner pixels (whose 3 x 3 neighbours all belong to it),
    and it is kept if
    that is :data:`UNEXPLAINED_DE` from every flat colour.  Otherwise it is
    a stroke of 1-3 px: its colour is the median of its half farthest from
    the flat colours (the pixels the stroke covers most), and it is kept if
    it is no mix of the flat colours (:func:`_stroke_is_mix`; the flat
    regions' label image ``region_labels`` says what lies beside it).
    Structures under ``min_pixels`` are no ink, but measured as specks
    (:func:`_specks`).  Returns the label image (0 outside), the colours and
    the speck share.
    """
    far = np.full(smooth.shape[:2], np.inf)
    inv_w2 = 1.0 / (1.0 + 0.045 * np.hypot(smooth[..., 1], smooth[..., 2])) ** 2
    distinct = []
    for c in flat_lab:  # regions within 1 of each other add nothing here
        if all(np.abs(c - d).max() >= 1.0 for d in distinct):
            distinct.append(c)
            d2 = (smooth[..., 0] - c[0]) ** 2 + ((smooth[..., 1] - c[1]) ** 2 + (smooth[..., 2] - c[2]) ** 2) * inv_w2
            np.minimum(far, d2, out=far)
    far = np.sqrt(far)
    # The picture's own border is no structure: blur and JPEG treat it apart.
    inside = np.zeros_like(opaque)
    inside[2:-2, 2:-2] = True
    unexplained = (far >= UNEXPLAINED_DE) & _erode(opaque, _SQUARE) & inside
    mask = unexplained & ~_seams(smooth, unexplained)
    labels, n = _label(mask)
    if not n:
        return labels, np.zeros((0, 3)), 0.0
    count = np.bincount(labels.ravel(), minlength=n + 1)
    keep = count >= min_pixels
    keep[0] = False
    mixes = None
    specks = np.flatnonzero(~keep[1:]) + 1
    if count[specks].sum() >= SPECK_SHARE * np.count_nonzero(opaque):  # only then can the specks decide anything
        mixes = _mixes(flat_lab, flat_count)
    speck_share = _specks(smooth, labels, count, specks, mixes, np.count_nonzero(opaque))
    relabel = np.cumsum(keep) * keep
    labels = relabel[labels]
    n = int(keep.sum())
    inner = _erode(labels > 0, _SQUARE)
    # Depth is measured with the holes noise leaves in a spot closed (one
    # dilation and one erosion), then two erosions.
    closed = _erode(_grow((labels > 0).astype(np.int32), np.ones_like(opaque), 1) > 0, _SQUARE)
    deep = _erode(_erode(closed, _SQUARE), _SQUARE)
    colours, kept, strokes, sizes, widths = [], np.zeros(n + 1, bool), [], [], []
    # Each structure's pixels as a slice of one sort: no full-picture mask per structure.
    flat_labels = labels.ravel()
    order = np.argsort(flat_labels, kind="stable")
    bounds = np.cumsum(np.bincount(flat_labels, minlength=n + 1))
    n_deep = np.bincount(flat_labels[deep.ravel()], minlength=n + 1)
    lab2, smooth2, far2, inner2 = lab.reshape(-1, 3), smooth.reshape(-1, 3), far.ravel(), inner.ravel()
    mix_ink = None
    for i in range(1, n + 1):
        own = order[bounds[i - 1]:bounds[i]]
        core = own[inner2[own]]
        # A spot holds a disc of radius 2 px inside its seams; a stroke, or
        # the thin tail of a shape, does not.
        stroke = not (n_deep[i] >= SPOT_MIN_DEEP and len(core) >= STRUCTURE_MIN_PIXELS and _is_even(lab2[core]))
        if not stroke:
            colour = lab2[core].mean(axis=0)
            explained = _weighted_lab_distance(np.broadcast_to(colour, flat_lab.shape), flat_lab).min() < UNEXPLAINED_DE
        else:
            d = far2[own]
            full = own[d >= np.median(d)]
            colour = np.median(lab2[full], axis=0)
            if mixes is None:
                mixes = _mixes(flat_lab, flat_count)
            if mix_ink is None:
                mix_ink = _ink_of_regions(flat_lab, mixes[2])[region_labels]
            explained = _stroke_is_mix(colour, np.median(smooth2[full], axis=0), mixes,
                                       _sides(mix_ink, own))
        if not explained:
            colours.append(colour)
            strokes.append(stroke)
            sizes.append(len(own))
            widths.append(_stroke_width(lab, full, colour) if stroke else np.inf)
            kept[i] = True
    colours, strokes, sizes = np.asarray(colours).reshape(-1, 3), np.asarray(strokes, bool), np.asarray(sizes, float)
    line = _unprintable_lines(colours, strokes, sizes, np.asarray(widths, np.float64), flat_lab, flat_count)
    if line.any():
        kept[np.flatnonzero(kept)[line]] = False
        colours, strokes, sizes = colours[~line], strokes[~line], sizes[~line]
    labels = (np.cumsum(kept) * kept)[labels]
    colours = _one_ink_per_linework(colours, strokes, sizes)
    return labels, colours, speck_share


def _specks(smooth, labels, count, specks, mixes, n_opaque: int) -> float:
    """Share of the ``n_opaque`` pixels in specks whose colour no mix of flat colours explains.

    A speck is a structure (``labels``; ``count`` pixels each) of
    unexplained, non-seam pixels too small to be kept (``specks``, the label
    numbers).  In artwork the specks are the fragments of lettering and
    hairlines, blends of its inks; in a photograph they are its small detail,
    stars and distant galaxies, whose colours no mix of its flat areas makes.
    A speck's colour is the median of its smoothed pixels (as the
    unexplained test reads them), explained by a mix of up to three flat
    colours (``mixes``, :func:`_mixes`) within :data:`UNEXPLAINED_DE`, as a
    stroke's is (:func:`_stroke_is_mix`).  Largest first, and only until the
    sum is settled against :data:`SPECK_SHARE` (each speck costs a pass over
    the mixes within :data:`UNEXPLAINED_DE` of its lightness, of up to 100 000); ``mixes`` None: the specks cannot reach it (0).
    """
    if mixes is None or not len(specks):
        return 0.0
    goal = SPECK_SHARE * n_opaque
    specks = specks[np.argsort(-count[specks], kind="stable")]
    left = float(count[specks].sum())
    flat_labels = labels.ravel()
    order = np.argsort(flat_labels, kind="stable")
    bounds = np.concatenate([[0], np.cumsum(np.bincount(flat_labels, minlength=len(count)))])
    # By lightness: a mix more than UNEXPLAINED_DE lighter or darker is that far off whatever its chroma.
    mix = mixes[0][np.argsort(mixes[0][:, 0], kind="stable")]
    smooth2 = smooth.reshape(-1, 3)
    found = 0.0
    for i in specks:
        if found >= goal or found + left < goal:
            break
        left -= count[i]
        colour = np.median(smooth2[order[bounds[i]:bounds[i + 1]]], axis=0)
        lo, hi = np.searchsorted(mix[:, 0], [colour[0] - UNEXPLAINED_DE, colour[0] + UNEXPLAINED_DE])
        near = mix[lo:hi]
        if not len(near) or _weighted_lab_distance(np.broadcast_to(colour, near.shape), near).min() >= UNEXPLAINED_DE:
            found += count[i]
    return found / max(n_opaque, 1)


def _ink_of_regions(flat_lab: np.ndarray, mix_labs: np.ndarray) -> np.ndarray:
    """For label image values (0 = no region, ``i + 1`` = region ``i``): the mix colour each region is.

    A region is a mix colour when within 3 (CIELAB) of it, as
    :func:`_largest_distinct` groups them; -1 for a region that is none,
    -2 where no region is.
    """
    d = np.linalg.norm(flat_lab[:, None, :] - mix_labs[None, :, :], axis=2)
    ink = np.where(d.min(axis=1) < 3.0, d.argmin(axis=1), -1) if len(mix_labs) else np.full(len(flat_lab), -1)
    return np.concatenate([[-2], ink]).astype(np.intp)


#: The diagonal steps of :func:`_sides` are sqrt(2) px long.
_SIDE_STEPS = ((0, 1, 1.0), (1, 0, 1.0), (1, 1, 2**0.5), (1, -1, 2**0.5))


def _sides(ink: np.ndarray, pixels: np.ndarray):
    """The inks on either side of a stroke: the commonest pair, or None where no flat region is near.

    ``ink`` holds the mix colour of the flat region at each pixel (-1 for a
    region that is no mix colour, -2 where no region is); ``pixels`` are flat indices of
    the stroke's pixels.  From each pixel the nearest flat region is looked
    for in both senses of four directions, up to :data:`SIDE_REACH` px; the
    direction with both found nearest is across the stroke, and its pair
    (sorted) is the pixel's.  A seam between inks A and B has A on one side
    and B on the other along its length; a line through one ground has that
    ground on both sides.  Returns ``(a, b)`` with ``a <= b``, or None when
    no pixel has flat regions on both sides or the commonest pair holds a
    region that is no mix colour (-1).
    """
    h, w = ink.shape
    ys, xs = np.divmod(pixels, w)
    best = np.full(len(pixels), np.inf)
    pair = np.full((len(pixels), 2), -1, np.intp)
    for dy, dx, step in _SIDE_STEPS:
        hits, dists = [], []
        for sgn in (-1, 1):
            hit = np.full(len(pixels), -2, np.intp)
            dist = np.full(len(pixels), np.inf)
            for k in range(SIDE_REACH, 0, -1):  # the nearest, written last, wins
                yy, xx = ys + sgn * k * dy, xs + sgn * k * dx
                ok = (yy >= 0) & (yy < h) & (xx >= 0) & (xx < w)
                at = np.full(len(pixels), -2, np.intp)
                at[ok] = ink[yy[ok], xx[ok]]
                # -2: no region there; -1: a region that is no mix colour.
                found = at > -2
                hit[found], dist[found] = at[found], k * step
            hits.append(hit)
            dists.append(dist)
        total = dists[0] + dists[1]
        better = total < best
        best[better] = total[better]
        pair[better] = np.sort(np.stack([hits[0], hits[1]], axis=1)[better], axis=1)
    pair = pair[np.isfinite(best)]
    if not len(pair):
        return None
    values, counts = np.unique(pair, axis=0, return_counts=True)
    a, b = values[np.argmax(counts)]
    return None if a < 0 else (int(a), int(b))


def _stroke_is_mix(colour: np.ndarray, smoothed: np.ndarray, mixes, sides) -> bool:
    """Whether a stroke is a mix of flat colours, within :data:`UNEXPLAINED_DE`.

    ``colour`` is the stroke's own (the median of the pixels it covers
    most): a mix of any flat colours explains it, as a blurred sliver of a
    flat ink between two others is one.  ``smoothed`` is the same on the
    smoothed picture, whose noise is averaged away but which mixes every
    stroke with what lies beside it, so only a mix of those colours may
    explain it (:func:`_sides`).  A seam between inks A and B, or a sliver
    of a third ink between them, is a mix of A, B and perhaps that third.
    A stroke with one ground G on both sides is a thin line of a flat ink X
    over G, a mix of G and X: a line of an ink of its own over G, smoothed,
    is a mix of G and that ink, and would pass for a mix of G with a flat
    ink near it, or of two other inks.  Within :data:`LINE_MIX_DE`, as
    close as the blends of thin lines come, any mix explains the smoothed
    colour too.  Without flat regions on both sides (``sides`` None) every
    mix of up to three may explain either.
    """
    mix, members, _ = mixes
    if not len(mix):
        return False
    near = mix
    if sides is not None:
        a, b = sides
        holds = (members == a).any(axis=1) & (members == b).any(axis=1)
        if a == b:
            holds &= np.count_nonzero(members >= 0, axis=1) <= 2
        near = mix[holds]
    def reach(t, m):
        return float(_weighted_lab_distance(np.broadcast_to(t, m.shape), m).min()) if len(m) else np.inf

    # Within LINE_MIX_DE a smoothed colour is a blend whatever lies beside it.
    return (reach(colour, mix) < UNEXPLAINED_DE or reach(smoothed, near) < UNEXPLAINED_DE
            or reach(smoothed, mix) < LINE_MIX_DE)


def _unprintable_lines(colours, stroke, size, width, flat_lab, flat_count):
    """Which strokes are too thin to print, or the blend of such a line with its ground.

    A stroke narrower than :data:`PRINTABLE_WIDTH` (:func:`_stroke_width`)
    is a line below what a screen holds; its ink cannot be read from it
    either (a 1 px anti-aliased line falls across two pixels, each a blend
    with the ground).  Where such a line falls half on each of two pixels,
    its pieces look 2 px wide in the blend's colour; where it falls on one,
    they hold its ink.  So a stroke within :data:`LINE_MIX_DE` of a 10-90 %
    mix of two of the colours around it (the :data:`MIX_COLOURS` largest
    distinct flat colours and as many strokes' colours, the thin ones
    included, by pixels: :func:`_pair_mixes`) is
    the blend of a line with its ground, a seam as :func:`_bleeds` finds
    JPEG's, and goes too.  Spots are left alone.
    """
    line = stroke & (width < PRINTABLE_WIDTH)
    if not stroke.any() or not len(flat_lab):
        return line
    pair_colours = np.vstack([_largest_distinct(flat_lab, flat_count),
                              _largest_distinct(colours[stroke], size[stroke])])
    mix = _pair_mixes(pair_colours)
    for i in np.flatnonzero(stroke & ~line):
        line[i] = _mix_distance(colours[i], pair_colours, mix) < LINE_MIX_DE
    return line


def _one_ink_per_linework(colours: np.ndarray, stroke: np.ndarray, size: np.ndarray) -> np.ndarray:
    """Strokes of one lightness and roughly one chroma get one colour, their size-weighted mean.

    JPEG keeps chroma at half resolution (4:2:0), so the chroma of a line
    1-3 px wide takes on the ground around each of its pieces; its lightness
    survives.  Pieces within :data:`UNEXPLAINED_DE` / 2 in L* and twice
    :data:`UNEXPLAINED_DE` in chroma-weighted a*, b* (directly or through a
    chain) are one ink.
    """
    idx = np.flatnonzero(stroke)
    if len(idx) < 2:
        return colours
    c = colours[idx]
    close_l = np.abs(c[:, None, 0] - c[None, :, 0]) < UNEXPLAINED_DE / 2
    ab = np.hypot(c[:, None, 1] - c[None, :, 1], c[:, None, 2] - c[None, :, 2])
    weight = 1.0 + 0.045 * np.hypot(c[:, 1], c[:, 2])
    close = close_l & (ab / np.maximum(weight[:, None], weight[None, :]) < 2 * UNEXPLAINED_DE)
    group = np.arange(len(idx))
    while True:  # single linkage: every piece takes the lowest number it reaches
        new = np.array([group[close[i]].min() for i in range(len(idx))])
        if np.array_equal(new, group):
            break
        group = new
    out = colours.copy()
    for g in np.unique(group):
        m = group == g
        out[idx[m]] = (c[m] * size[idx[m], None]).sum(axis=0) / size[idx[m]].sum()
    return out


def _bleeds(labels, colours, share):
    """Which regions are thin runs of a mix of two other regions' colours.

    JPEG keeps chroma at half resolution and quantises it coarsely: the
    chroma of lettering and thin strokes spreads into the ground around
    them, and a thick stroke's inside, or the ground between letters, can
    be flat at a colour between the ink and the ground.  Such a region is
    at most :data:`BLEED_DEPTH` px deep, under :data:`BLEED_SHARE` of the
    picture, and within :data:`BLEED_DE` (chroma weighted) of a mix, 10-90 %
    in encoded sRGB as JPEG's YCbCr averages, of two of the
    :data:`MIX_COLOURS` largest distinct region colours, neither of its own
    ink (within 3).  (The ground may be a region far from it: between
    lines of text nothing is flat.)  A compact spot is deeper, whatever its
    colour.
    """
    drop = np.zeros(len(colours), bool)
    mix, pair_colours = None, None
    small = np.flatnonzero(share < BLEED_SHARE)
    if not len(small):
        return drop
    flat_labels = labels.ravel()
    order = np.argsort(flat_labels, kind="stable")
    bounds = np.concatenate([[0], np.cumsum(np.bincount(flat_labels, minlength=len(colours) + 1))])
    for i in small:
        ys, xs = np.divmod(order[bounds[i + 1]:bounds[i + 2]], labels.shape[1])
        if not len(ys):
            continue
        core = np.pad(labels[ys.min():ys.max() + 1, xs.min():xs.max() + 1] == i + 1, 1)
        for _ in range(BLEED_DEPTH):
            core = _erode(core, _SQUARE)
        if core.any():
            continue
        if mix is None:  # every mix of two of the largest distinct colours, once
            pair_colours = _largest_distinct(colours, share)
            mix = _pair_mixes(pair_colours, chroma_shift=BLEED_CHROMA_SHIFT)
        drop[i] = _mix_distance(colours[i], pair_colours, mix) < BLEED_DE
    return drop


#: JPEG's YCbCr from encoded sRGB (ITU-T T.871, the JFIF colour space).
_YCC = np.array([[0.299, 0.587, 0.114], [-0.168736, -0.331264, 0.5], [0.5, -0.418688, -0.081312]])


def _pair_mixes(pair_colours: np.ndarray, *, chroma_shift: float = 0.0) -> np.ndarray:
    """Every 10-90 % mix of two of ``pair_colours``, in encoded sRGB (as JPEG's YCbCr and resampling average).

    With ``chroma_shift``, the chroma (JPEG's Cb, Cr) of each mix may lie
    that far (in mix weight, steps of 0.05) from its luma's: JPEG 4:2:0
    averages a thin feature's chroma over 2 x 2 pixels with its ground's.
    Returns CIELAB colours of shape (m, n, n, 3): the mix of colours ``i``
    and ``j`` at ``[:, i, j]``.
    """
    rgb = clip_to_gamut(lab_to_srgb(pair_colours))
    luma = np.linspace(0.1, 0.9, 33)
    shifts = np.arange(-chroma_shift, chroma_shift + 1e-9, 0.05) if chroma_shift else np.zeros(1)
    wy = np.repeat(luma, len(shifts))
    wc = np.clip(wy + np.tile(shifts, len(luma)), 0.1, 0.9)
    ycc = rgb @ _YCC.T
    mixed = np.empty((len(wy), len(rgb), len(rgb), 3))
    for c, w in ((0, wy), (1, wc), (2, wc)):
        w = w[:, None, None]
        mixed[..., c] = w * ycc[None, :, None, c] + (1 - w) * ycc[None, None, :, c]
    return srgb_to_lab(np.clip(mixed @ np.linalg.inv(_YCC).T, 0.0, 1.0))


def _mix_distance(colour: np.ndarray, pair_colours: np.ndarray, mix: np.ndarray) -> float:
    """Distance (chroma weighted) from ``colour`` to the nearest mix of two pair colours other than its own ink.

    Pair colours within 3 of ``colour`` are its own ink and take no part;
    with fewer than two others left it is no mix (inf).
    """
    other = _weighted_lab_distance(pair_colours, np.broadcast_to(colour, pair_colours.shape)) >= 3.0
    if np.count_nonzero(other) < 2:
        return float("inf")
    return float(_weighted_lab_distance(mix, np.broadcast_to(colour, mix.shape))[:, other][:, :, other].min())


def _largest_distinct(colours, weight, *, distance=None):
    """The :data:`MIX_COLOURS` distinct colours (3 apart by ``distance``, chroma weighted by default) of most weight."""
    distance = _weighted_lab_distance if distance is None else distance
    distinct: list[np.ndarray] = []
    total: list[float] = []
    for i in np.argsort(-weight, kind="stable"):
        d = [j for j, c in enumerate(distinct) if distance(colours[i], c) < 3.0]
        if d:
            total[d[0]] += weight[i]
        else:
            distinct.append(colours[i])
            total.append(float(weight[i]))
    top = np.argsort(-np.asarray(total), kind="stable")[:MIX_COLOURS]
    return np.asarray(distinct)[top].reshape(-1, 3)


def _interior_colours(lab, smooth, labels, colours, count, limit):
    """The colours of the smaller regions, read from their interiors rather than their flat cores.

    The flat core of a small spot is the part of it where JPEG's chroma and
    the scan's noise happen to be even, often a corner: its mean can lie
    ΔE00 3-5 from the ink.  The ink is what the spot's interior holds.  The
    spot's footprint is the pixels, connected to its core within
    :data:`INTERIOR_REACH` px, whose smoothed colour is nearer its colour
    than that of every other region around it (the half-way line of a
    blurred edge is the edge) and within twice :data:`UNEXPLAINED_DE` of
    it.  :data:`INTERIOR_RIM` px are taken off it, the rim that blur,
    anti-aliasing and half-resolution chroma mix with the ground, and its
    colour is the median of the rest (JPEG's chroma blocks leave outliers).
    Regions of ``limit`` core pixels or more, footprints with fewer than
    :data:`STRUCTURE_MIN_PIXELS` inner pixels (strokes) and footprints
    whose colour is :data:`UNEXPLAINED_DE` from the core's keep their
    colour.  (The ground between letters can take the colour JPEG spread
    around them: :func:`_bleeds` then drops it.)
    """
    out = colours.copy()
    h, w = labels.shape
    small = np.flatnonzero(count < limit)
    if not len(small) or len(colours) < 2:
        return out
    pad = INTERIOR_REACH + 1
    flat_labels = labels.ravel()
    order = np.argsort(flat_labels, kind="stable")
    bounds = np.concatenate([[0], np.cumsum(np.bincount(flat_labels, minlength=len(colours) + 1))])
    for i in small:
        own = order[bounds[i + 1]:bounds[i + 2]]
        if not len(own):
            continue
        ys, xs = np.divmod(own, w)
        y0, y1 = max(ys.min() - pad, 0), min(ys.max() + pad + 1, h)
        x0, x1 = max(xs.min() - pad, 0), min(xs.max() + pad + 1, w)
        win, win_labels = smooth[y0:y1, x0:x1], labels[y0:y1, x0:x1]
        # Its rivals are the regions around it, other than those of its own ink
        # (within 3).  The colour being corrected can be 4 off and JPEG's chroma
        # rings inside a spot, so only a pixel twice UNEXPLAINED_DE away is
        # certainly no part of it (the bound where no rival is near).
        near = np.unique(labels[max(y0 - pad, 0):y1 + pad, max(x0 - pad, 0):x1 + pad])
        near = near[near > 0] - 1
        rivals = near[_weighted_lab_distance(colours[near], np.broadcast_to(colours[i], colours[near].shape)) >= 3.0]
        own_d = _weighted_lab_distance(win, np.broadcast_to(colours[i], win.shape))
        member = own_d < 2 * UNEXPLAINED_DE
        for c in colours[rivals]:
            member &= own_d <= _weighted_lab_distance(win, np.broadcast_to(c, win.shape))
        seed = (win_labels == i + 1).astype(np.int32)
        # The window reaches a pixel past the footprint's farthest growth, so
        # erosion (which counts outside as in) sees its whole edge.
        inner = _grow(seed, member, INTERIOR_REACH) > 0
        for _ in range(INTERIOR_RIM):
            inner = _erode(inner, _SQUARE)
        if np.count_nonzero(inner) >= STRUCTURE_MIN_PIXELS:
            colour = np.median(lab[y0:y1, x0:x1][inner], axis=0)
            # A footprint that far off its core's colour is not that region's.
            if _weighted_lab_distance(colour, colours[i]) < UNEXPLAINED_DE:
                out[i] = colour
    return out


def sorted_by_region(values: np.ndarray, label: np.ndarray, n: int):
    """``values`` sorted by region, then by value: (sorted values, start and count of each region 1..n).

    ``label`` holds each value's region, 1 to ``n`` (no 0).  A region's
    ``q`` quantile is then one lookup: ``sorted[start + rank]``.
    """
    order = np.lexsort((values, label))
    count = np.bincount(label, minlength=n + 1)[1:]
    return values[order], np.cumsum(count) - count, count


def _even_share(de: np.ndarray, label: np.ndarray, n: int) -> float:
    """Share of the pixels in regions whose 90th percentile ``de`` is at most :data:`EVEN_DE`."""
    de, start, count = sorted_by_region(de, label, n)
    have = count > 0
    p90 = np.full(n, np.inf)
    p90[have] = de[start[have] + (0.9 * (count[have] - 1)).astype(np.intp)]
    return float(count[p90 <= EVEN_DE].sum()) / max(int(count.sum()), 1)


def find_regions(picture: Picture, *, threshold: float = FLAT_THRESHOLD,
                 max_pixels: int = ANALYSIS_PIXELS, structures=True) -> Regions:
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
    structures : bool or callable, default=True
        Whether to look for small spots and thin strokes too (the costliest
        step on a photograph).  A callable is asked with the flat regions'
        ``flat_share``, ``spread``, ``even_share``, ``texture``, ``grain``,
        ``grain_ratio`` and ``ramp_spread`` (as keywords): the fitting engine
        looks for them only in a picture that those alone would not call
        continuous tone.

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
    # Kept with the picture: a command may judge a picture before fitting it, and the fit asks again.
    return picture._derived.get(("flat regions", threshold, max_pixels, structures),
                                lambda: _find_regions(picture, threshold, max_pixels, structures))


def _find_regions(picture: Picture, threshold: float, max_pixels: int, structures) -> Regions:
    """:func:`find_regions`, computed."""
    h, w = picture.shape
    scale = 1
    while (h // scale) * (w // scale) > max_pixels:
        scale += 1
    # Every scale-th pixel: the smoothing below averages what a box filter
    # would, and features thinner than the reduction are no region anyway.
    opaque = picture.opaque[::scale, ::scale]
    lab = srgb_to_lab(picture.rgb[::scale, ::scale] / float(picture.max_code))
    smooth = np.stack([_gaussian(lab[..., c], SMOOTHING[c > 0]) for c in range(3)], axis=-1)
    labels, n, flat = _flat_cores(smooth, opaque, threshold)
    (mean, area, centre, spread, even_share, texture, grain, grain_ratio,
     ramp_spread) = _core_colours(labels, n, lab, smooth, opaque, scale)
    n_opaque = int(np.count_nonzero(picture.opaque))
    flat_share = float(np.count_nonzero(flat)) / max(int(np.count_nonzero(opaque)), 1)
    # Spots too small or too noisy to be flat, and strokes too thin: regions
    # too, after the flat ones (which alone decide flat_share and spread).
    # Without a flat region nothing explains any colour: noise or a photograph, no spots or strokes.
    if callable(structures):
        structures = bool(structures(flat_share=flat_share, spread=spread, even_share=even_share, texture=texture,
                                     grain=grain, grain_ratio=grain_ratio, ramp_spread=ramp_spread))
    speck_share = 0.0
    if len(area) and structures:
        labels, mean, area, centre, speck_share = _with_structures(lab, smooth, opaque, labels, mean, area, centre,
                                                                   scale)
        # Artwork only: a photograph's hundred small regions are left as they are, at no cost.
        core = np.bincount(labels.ravel(), minlength=len(area) + 1)[1:]
        mean = _interior_colours(lab, smooth, labels, np.asarray(mean, dtype=np.float64).reshape(-1, 3), core,
                                 INTERIOR_SHARE * np.count_nonzero(opaque))
        keep = ~_bleeds(labels, mean, area / max(n_opaque, 1))
        if not keep.all():
            labels = (np.concatenate([[0], np.cumsum(keep)]) * np.concatenate([[False], keep]))[labels]
            mean, area, centre = mean[keep], area[keep], centre.reshape(-1, 2)[keep]
    return Regions(lab=np.asarray(mean, dtype=np.float64).reshape(-1, 3), area=area, n_pixels=n_opaque,
                   flat_share=flat_share, labels=labels, scale=scale, spread=spread,
                   centre=centre, even_share=even_share, speck_share=speck_share, texture=texture, grain=grain,
                   grain_ratio=grain_ratio, ramp_spread=ramp_spread)


def _flat_cores(smooth, opaque, threshold: float):
    """Label the flat cores of a smoothed CIELAB picture: (labels, their number, the flat mask)."""
    span = [_window_range(smooth[..., c], _WINDOW) for c in range(3)]
    weight = 1.0 + 0.045 * np.hypot(smooth[..., 1], smooth[..., 2])
    spread = np.sqrt(span[0] ** 2 + (span[1] ** 2 + span[2] ** 2) / weight**2)
    # A transparent pixel is no ink; nor is an opaque one beside it.
    flat = (spread < threshold) & _erode(opaque, _SQUARE)
    labels, n = _label(flat)
    if n:
        # A seam can be flat along its length: a core with no pixel at least
        # MIN_CORE_RADIUS (2 px) from its edge -- no pixel whose 3 x 3
        # neighbours are all flat -- is a line or a stroke's edge, not an
        # area of ink.
        # A core only in the picture's outer 3 px is the border's own blur.
        band = np.zeros_like(flat)
        band[3:-3, 3:-3] = True
        thick = np.zeros(n + 1, bool)
        thick[np.unique(labels[_erode(flat, _SQUARE) & band])] = True
        thick[0] = False
        flat = thick[labels]
        # Whole components dropped: the rest keep their raster order, so a
        # renumbering is the labelling of the thick cores.
        labels = (np.cumsum(thick) * thick)[labels]
        n = int(np.count_nonzero(thick))
    return labels, n, flat


def _core_colours(labels, n: int, lab, smooth, opaque, scale: int):
    """Mean colour, area (full-size pixels, rim included) and centre of each core, and how even they are inside.

    Returns (mean, area, centre, spread, even share, texture, grain, grain ratio, ramp spread).
    """
    if not n:
        return np.zeros((0, 3)), np.zeros(0), np.zeros((0, 2)), float("inf"), 0.0, 0.0, 0.0, 0.0, float("inf")
    # The mean of a flat core: its pixels lie within the threshold of each
    # other, and a bincount is a fraction of a per-label median's cost.
    count = np.bincount(labels.ravel(), minlength=n + 1)[1:]
    mean = np.stack([np.bincount(labels.ravel(), weights=lab[..., c].ravel(), minlength=n + 1)[1:] / count
                     for c in range(3)], axis=1)
    grown = _grow(labels, opaque, RIM)
    area = np.bincount(grown.ravel(), minlength=n + 1)[1:].astype(np.float64) * scale * scale
    centre = _centres(labels, n, count)
    inside = labels > 0
    step = max(1, int(np.count_nonzero(inside)) // 50_000)  # a percentile needs no more
    de = np.asarray(delta_e_ciede2000(lab[inside][::step], mean[labels[inside][::step] - 1]))
    return (mean, area, centre, float(np.percentile(de, 90)), _even_share(de, labels[inside][::step], n),
            _texture(labels, n, smooth, inside, step), *_grain(labels, n, lab, inside),
            _ramp_spread(labels, n, lab, inside, step))


def _plane_residuals(labels, n: int, values, inside, step: int) -> np.ndarray:
    """Distance of every ``step``-th pixel of ``inside`` from a plane fitted to its region's ``values``.

    ``values`` is (h, w) or (h, w, c); the residuals are (m,) or (m, c), one
    least-squares plane ``a + b x + c y`` per region and channel.
    """
    yy, xx = np.nonzero(inside)
    lbl = labels[inside][::step] - 1
    count = np.maximum(np.bincount(lbl, minlength=n), 1).astype(np.float64)  # a region the sampling missed: 1

    def total(w):
        return np.bincount(lbl, weights=w, minlength=n)

    # Coordinates from each region's centre keep the 3 x 3 normal equations well conditioned.
    x, y = xx[::step].astype(np.float64), yy[::step].astype(np.float64)
    x -= (total(x) / count)[lbl]
    y -= (total(y) / count)[lbl]
    m = np.zeros((n, 3, 3))
    m[:, 0, 0] = count
    m[:, 1, 1], m[:, 2, 2] = total(x * x) + 1e-9, total(y * y) + 1e-9  # a one-pixel-wide region: no slope across it
    m[:, 1, 2] = m[:, 2, 1] = total(x * y)
    out = []
    for v in np.moveaxis(np.atleast_3d(values), -1, 0):
        v = v[inside][::step]
        rhs = np.stack([total(v), total(x * v), total(y * v)], axis=1)
        coef = np.linalg.solve(m, rhs[..., None])[..., 0]
        out.append(v - coef[lbl, 0] - coef[lbl, 1] * x - coef[lbl, 2] * y)
    return out[0] if np.ndim(values) == 2 else np.stack(out, axis=1)


def _texture(labels, n: int, smooth, inside, step: int) -> float:
    """Median distance (L*) of the flat pixels' smoothed lightness from a plane fitted to each region's."""
    return float(np.median(np.abs(_plane_residuals(labels, n, smooth[..., 0], inside, step))))


def _box_sum(a: np.ndarray, reach: int) -> np.ndarray:
    """Sum of a 2-D array over the ``(2 reach + 1)`` square window around each pixel (zero outside)."""
    c = np.cumsum(np.pad(a, ((reach + 1, reach), (0, 0))), axis=0)
    a = c[2 * reach + 1:] - c[:-2 * reach - 1]
    c = np.cumsum(np.pad(a, ((0, 0), (reach + 1, reach))), axis=1)
    return c[:, 2 * reach + 1:] - c[:, :-2 * reach - 1]


def _grain(labels, n: int, lab, inside) -> tuple[float, float]:
    """Lightness variation of the flat areas at the scale of a photograph's grain, and against finer variation.

    The lightness's distance from its region's plane is split into bands by
    box averages over the flat pixels of the :data:`GRAIN_REACH` and
    :data:`GRAIN_SURROUND` windows around each flat pixel: the *grain* band
    (the small average less the large) and the *fine* band (the distance less
    the small average).  Each band's square is averaged over the small window
    again (the local energy of a band-pass filtered image, as texture energy
    measures take it: K. I. Laws, "Rapid texture identification", Proc. SPIE
    238, 376-381, 1980).  Returns (the :data:`GRAIN_QUANTILE` of the grain
    band's root over the flat pixels, the median over them of the grain band's
    root over the fine band's): ``Regions.grain`` and ``Regions.grain_ratio``.
    """
    residual = np.zeros(labels.shape)
    residual[inside] = _plane_residuals(labels, n, lab[..., 0], inside, 1)
    flat = inside.astype(np.float64)
    count = np.maximum(_box_sum(flat, GRAIN_REACH), 1.0)
    wide = np.maximum(_box_sum(flat, GRAIN_SURROUND), 1.0)
    # The residual is 0 off the flat pixels, so the sums are over flat pixels only.
    local = _box_sum(residual, GRAIN_REACH) / count
    grain = np.sqrt(_box_sum((local - _box_sum(residual, GRAIN_SURROUND) / wide) ** 2 * flat, GRAIN_REACH) / count)
    fine = np.sqrt(_box_sum((residual - local) ** 2 * flat, GRAIN_REACH) / count)
    grain, fine = grain[inside], fine[inside]
    return (float(np.quantile(grain, GRAIN_QUANTILE)),
            float(np.median(grain / np.maximum(fine, 1e-9))))


def _ramp_spread(labels, n: int, lab, inside, step: int) -> float:
    """90th percentile CIEDE2000 of the flat pixels from a plane fitted to their region's L*, a*, b*."""
    colours = lab[inside][::step]
    ramp = colours - _plane_residuals(labels, n, lab, inside, step)
    return float(np.percentile(delta_e_ciede2000(colours, ramp), 90))


def _centres(labels, n: int, count):
    """Centre of each of the ``n`` labels, as fractions of the width and the height."""
    yy, xx = np.indices(labels.shape)
    return np.stack([np.bincount(labels.ravel(), weights=xx.ravel(), minlength=n + 1)[1:],
                     np.bincount(labels.ravel(), weights=yy.ravel(), minlength=n + 1)[1:]],
                    axis=1) / count[:, None] / np.array([labels.shape[1], labels.shape[0]])


def _with_structures(lab, smooth, opaque, labels, mean, area, centre, scale: int):
    """The flat regions with the small spots and thin strokes added after them.

    Returns (labels, mean, area, centre, speck share: :func:`_specks`).
    """
    min_pixels = max(STRUCTURE_MIN_PIXELS, int(STRUCTURE_MIN_SHARE * np.count_nonzero(opaque)))
    s_labels, s_lab, speck_share = _structures(lab, smooth, opaque, np.asarray(mean).reshape(-1, 3),
                                               np.asarray(area, dtype=np.float64), labels, min_pixels)
    if not len(s_lab):
        return labels, mean, area, centre, speck_share
    s_count = np.bincount(s_labels.ravel(), minlength=len(s_lab) + 1)[1:]
    # Their anti-aliased rim, one pixel that no flat region holds, is theirs.
    grown = _grow(s_labels, opaque & (labels == 0), 1)
    s_area = np.bincount(grown.ravel(), minlength=len(s_lab) + 1)[1:].astype(np.float64) * scale * scale
    s_centre = _centres(s_labels, len(s_lab), s_count)
    labels = np.where(s_labels > 0, s_labels + len(area), labels)
    return (labels, np.vstack([np.asarray(mean).reshape(-1, 3), s_lab]), np.concatenate([area, s_area]),
            np.vstack([centre.reshape(-1, 2), s_centre]), speck_share)
