"""How many inks the art needs: judging the image, and checking a palette against its regions.

The penalised rule of :mod:`quantize.fit.selection` counts pixels.  A printer
counts areas: an ink covering 0.3 % of a poster in one compact spot is an ink,
and the thousands of pixels along the anti-aliased edges between two inks are
not.  This module works on the flat regions of :mod:`quantize.core.regions`:

* :func:`ink_groups` merges regions of one colour (an ink split by the shapes
  it prints, or by noise) into groups with their total area;
* :func:`judge` tells flat artwork from continuous tone (photos, gradients),
  with the reason;
* :func:`missing_inks` lists the groups a palette does not print: those of at
  least :data:`MIN_SHARE` of the image whose colour is :data:`FOUND_DE` or
  more from every palette colour.

Constants and why (docs/method.md §"How many inks"):

* :data:`DISTINCT_DE` = 10 ΔE00: two inks this far apart are two inks.  A
  palette colour serving two inks 10 apart lies about 5 from at least one of
  them, so a group counts as printed only when a palette colour is within
  :data:`FOUND_DE` = 5.
* :data:`MIN_SHARE` = 0.1 % of the image, and at least :data:`MIN_PIXELS`
  pixels: on a 30 x 40 cm poster that is a 12 mm disc, a dot a customer sees;
  below it a region is a speck the screen may not hold anyway (common
  practice, no single source).
* :data:`SAME_INK_DE` = 3 ΔE00: regions closer than this are one ink (JPEG and
  scan noise move a region's colour by 1-2).
* Continuous tone: an image is judged continuous tone when less than
  :data:`MIN_FLAT_SHARE` of it is flat (texture everywhere), or when its flat
  regions themselves vary: the colours inside them lie, at the 90th
  percentile, more than :data:`TONE_SPREAD_DE` from their region's colour
  (shading and gradients, not ink), and less than :data:`MIN_EVEN_SHARE` of
  the flat area is in regions that are even on their own.  Flat artwork, scanned or JPEG-compressed,
  stays under 3 in the project's generated tests; photos and colour ramps
  exceed 4.  Or when :data:`~quantize.core.regions.SPECK_SHARE` (0.5 %) or
  more of it is specks: bits of colour too small to be an ink that no mix of
  its flat colours explains (a photograph's small detail on an even ground,
  such as a deep-field photo's galaxies on its black sky; artwork's are
  fragments of lettering, blends of its inks).  Or when its lightness varies
  all through its flat areas: half of their pixels lie :data:`TONE_TEXTURE_L`
  (L* 0.55) or more from a plane fitted to their region (a smooth photograph
  whose texture stays under the flatness threshold, such as scikit-image's
  moon; flat ink, scanned or shaded, stays under 0.3).  Or when they hold a
  photograph's grain: :data:`TONE_GRAIN_L` (L* 0.12) or more at scales of 9
  to 33 px in three quarters of them, and at least :data:`TONE_GRAIN_RATIO`
  (0.45) of their variation under 9 px (scikit-image's brick; scan noise
  lies under 9 px).  The spread rule holds only where the variation lies all
  through the flat areas (texture :data:`TONE_SPREAD_TEXTURE_L`, L* 0.4, or
  more) or runs in ramps (planes fitted to the regions take a fifth off the
  spread, :data:`TONE_RAMP_SHARE`): strokes of low-contrast inks through a
  ground, under the flatness threshold, are neither.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Sequence

import numpy as np

from quantize.colour.spaces import delta_e_ciede2000
from quantize.core.regions import SPECK_SHARE, Regions

__all__ = ["InkGroups", "Judgement", "ink_groups", "artwork_like", "judge", "missing_inks", "lost_inks", "group_sample",
           "KINDS", "DISTINCT_DE", "FOUND_DE", "MIN_SHARE", "MIN_PIXELS", "SAME_INK_DE", "MIN_FLAT_SHARE",
           "TONE_SPREAD_DE", "MIN_EVEN_SHARE", "TONE_TEXTURE_L", "TONE_GRAIN_L", "TONE_GRAIN_RATIO",
           "TONE_SPREAD_TEXTURE_L", "TONE_RAMP_SHARE", "TONE_TARGET_DE", "TONE_MAX_K", "auto_choice"]

DISTINCT_DE = 10.0
FOUND_DE = DISTINCT_DE / 2
MIN_SHARE = 0.001
MIN_PIXELS = 16
SAME_INK_DE = 3.0
MIN_FLAT_SHARE = 0.35
TONE_SPREAD_DE = 3.5
#: Artwork may hold some tone (a tinted photograph in a logo): its colours
#: vary inside some flat areas, but most of its flat area stays even.  At
#: least this share of even flat area makes it artwork: scikit-image's logo
#: has 70 %, its sample photographs and colour wheel 32 % at most.
MIN_EVEN_SHARE = 0.5
#: Lightness (L*) that half of the flat pixels lie farther than from a plane
#: fitted to their region's lightness (``Regions.texture``), at which the flat
#: areas are tone, not ink.  A plane takes out an even ink and a gentle
#: shading across it; scan noise and JPEG leave under 0.3, the texture of a
#: photograph does not.  Flat ink is read in lightness only: JPEG's chroma
#: blocks move a* and b* more than the eye's detail does.  On the tests'
#: artwork (all that ``judge`` saw in the suite) and on 132 generated files
#: with fresh seeds (lettering and flat art through the scan and JPEG, shaded
#: and scanned flat art at 160 and 200 px), 0.27 at most, scikit-image's
#: logo 0.30; scikit-image's moon (grey, taken as RGB) at full size and at
#: 0.3 to 0.8 of it, 1.07 to 1.12: 0.55 lies about 2 times from each.
TONE_TEXTURE_L = 0.55
#: A photograph's grain, not ink: the flat areas are continuous tone when
#: three quarters of their pixels hold this much lightness (L*) in the band of
#: 9 to 33 px (``Regions.grain``) and, at the median flat pixel, that band
#: holds at least :data:`TONE_GRAIN_RATIO` of the variation under 9 px
#: (``Regions.grain_ratio``).  Scan noise is white after the scan's blur: what
#: it leaves in the band grows with it, but its finer variation grows faster,
#: so a noisy scan fails the ratio; JPEG'd and shaded flat art, with ratios up
#: to 5, holds under L* 0.07 in the band.  Tuning (288 generated files:
#: lettering seeds 1000-1023 through the scan and JPEG q75, 5000-5023 also
#: shaded then scanned; flat art seeds 1100-1111 at 160 and 200 px through the
#: scan, JPEG and shading then the scan, 5100-5111 at 200 and 320 px also
#: shaded alone; 54 scans of lettering and flat art, seeds 1000-1011 and
#: 1100-1105, with 4, 6 and 8 codes of noise against the simulation's 3):
#: ratio 0.39 at most where the band holds over 0.101 (0.30 with 0.12 or
#: more), band 0.100 at most where the ratio is 0.45 or more (lettering seed
#: 1022 through the scan, ratio 0.51); scikit-image's brick at 0.3 to 1 of its
#: size, band 0.151 to 0.177 and ratio 0.57 to 0.66; its logo, band 0.04 at
#: most.  0.12 lies 1.2 times from the lettering and 1.26 from the brick;
#: the ratio 0.45, 1.5 and 1.27 times from the noisy scans and the brick.
TONE_GRAIN_L = 0.12
TONE_GRAIN_RATIO = 0.45
#: The spread rule (colours vary inside the flat areas, which are not even)
#: holds only for variation that lies all through the flat areas (texture, L*
#: this much or more) or runs in ramps (``TONE_RAMP_SHARE``).  Variation in
#: neither is strokes of other inks running through a ground, under the
#: flatness threshold: the generated lettering with 6 inks (seed 1011),
#: through the scan, spread 3.64 and 18 % even, has texture 0.25 (the tuning
#: lettering 0.28 at most); the photographs the spread rule alone called
#: continuous tone, scikit-image's camera at 0.3 of its size and its colour
#: wheel at 0.6, 0.53 and 0.55.  0.4 lies about 1.4 times from each (its
#: wheel at 0.5, texture 0.07, is a ramp).  docs/method.md 6a.
TONE_SPREAD_TEXTURE_L = 0.4
#: The flat areas' colours run in ramps when a plane fitted to each region
#: (``Regions.ramp_spread``) takes a fifth or more off the spread: measured
#: from its region's plane, the 90th percentile is at most this share of the
#: spread.  scikit-image's colour wheel, 0.34 to 0.62 at 0.5 to 1 of its size;
#: the lettering 0.98, the photographs with texture 0.78 to 1.
TONE_RAMP_SHARE = 0.8
#: The visual target of the automatic size for continuous tone: mean ΔE00
#: 2.5.  On scikit-image's sample photos each doubling of the palette beyond
#: it buys less than 0.5 ΔE00 (astronaut 2.34 at 64 colours, 1.82 at 128),
#: and it is a little above the 2 ΔE00 error floor of the penalised rule
#: (common practice, no single source; docs/method.md).
TONE_TARGET_DE = 2.5
#: The largest palette the automatic size gives continuous tone: what an
#: indexed PNG or GIF holds.
TONE_MAX_K = 256
#: What a user may say an image is, overriding the judgement.
KINDS = ("auto", "artwork", "continuous tone")


@dataclass(frozen=True, eq=False)
class InkGroups:
    """Regions of one colour merged.

    Attributes
    ----------
    lab : ndarray of shape (g, 3)
        Area-weighted median colour of each group (CIELAB, D65).
    share : ndarray of shape (g,)
        Share of the opaque pixels of all images (0-1).
    largest : ndarray of shape (g,)
        Share of the group's largest single region.
    where : ndarray of shape (g, 2)
        Centre of that largest region, (x, y) as shares of its image's width
        and height.
    of_region : ndarray of shape (r,), int
        The group of every region, the images' regions in turn.
    """

    lab: np.ndarray
    share: np.ndarray
    largest: np.ndarray
    where: np.ndarray
    of_region: np.ndarray

    def __len__(self) -> int:
        return len(self.share)


def _weighted_median(values: np.ndarray, weights: np.ndarray) -> float:
    order = np.argsort(values, kind="stable")
    cum = np.cumsum(weights[order])
    return float(values[order][np.searchsorted(cum, 0.5 * cum[-1])])


def ink_groups(regions: Sequence[Regions]) -> InkGroups:
    """Merge the regions of one or several images into groups of one ink each.

    Regions whose colours are within :data:`SAME_INK_DE` of each other, directly
    or through a chain of such regions, form one group; each image's regions
    count by their share of that image, so the images of a set count alike.

    Examples
    --------
    >>> import numpy as np
    >>> from quantize.core.picture import Picture
    >>> from quantize.core.regions import find_regions
    >>> rgb = np.full((60, 90, 3), 250, np.uint8); rgb[:, 30:40] = (200, 30, 40); rgb[:, 70:80] = (200, 30, 40)
    >>> g = ink_groups([find_regions(Picture(rgb))])
    >>> len(g), [round(float(s), 2) for s in g.share]
    (2, [0.78, 0.22])
    """
    labs = [r.lab for r in regions]
    shares = [r.share / len(regions) for r in regions]
    lab = np.concatenate(labs) if labs else np.zeros((0, 3))
    share = np.concatenate(shares) if shares else np.zeros(0)
    centre = np.concatenate([r.centre for r in regions]) if regions else np.zeros((0, 2))
    n = len(share)
    if n == 0:
        return InkGroups(np.zeros((0, 3)), np.zeros(0), np.zeros(0), np.zeros((0, 2)), np.zeros(0, np.intp))
    # Single linkage under CIEDE2000: union-find over the pairs closer than SAME_INK_DE.
    parent = np.arange(n)

    def root(i):
        while parent[i] != i:
            parent[i] = parent[parent[i]]
            i = parent[i]
        return i

    for i in range(n):
        close = np.flatnonzero(delta_e_ciede2000(np.broadcast_to(lab[i], lab[i + 1:].shape), lab[i + 1:])
                               < SAME_INK_DE) + i + 1
        for j in close:
            a, b = root(i), root(int(j))
            if a != b:
                parent[b] = a
    roots = np.array([root(i) for i in range(n)])
    out_lab, out_share, out_largest, out_where = [], [], [], []
    unique_roots, of_root = np.unique(roots, return_inverse=True)
    for r in unique_roots:
        m = np.flatnonzero(roots == r)
        w = share[m]
        out_lab.append([_weighted_median(lab[m, c], w) for c in range(3)])
        out_share.append(w.sum())
        out_largest.append(w.max())
        out_where.append(centre[m[np.argmax(w)]])
    order = np.argsort(-np.asarray(out_share), kind="stable")
    rank = np.empty_like(order)
    rank[order] = np.arange(len(order))
    return InkGroups(np.asarray(out_lab)[order], np.asarray(out_share)[order], np.asarray(out_largest)[order],
                     np.asarray(out_where).reshape(-1, 2)[order], rank[of_root.ravel()])


@dataclass(frozen=True)
class Judgement:
    """What kind of image this is, for choosing its palette size.

    Attributes
    ----------
    kind : {"artwork", "continuous tone"}
    reason : str
        One sentence a user can check.
    flat_share : float
        Share of flat pixels (0-1).
    spread : float
        90th percentile ΔE00 of flat pixels from their region's colour.
    """

    kind: str
    reason: str
    flat_share: float
    spread: float


def _tone_in_spread(*, spread: float, even_share: float, texture: float, ramp: bool) -> bool:
    """The spread rule: colours vary inside the flat areas, not evenly, and all through them or in ramps."""
    return (spread > TONE_SPREAD_DE and even_share < MIN_EVEN_SHARE
            and (texture >= TONE_SPREAD_TEXTURE_L or ramp))


def _grainy(grain: float, grain_ratio: float) -> bool:
    """Whether the flat areas hold a photograph's grain (:data:`TONE_GRAIN_L`, :data:`TONE_GRAIN_RATIO`)."""
    return grain >= TONE_GRAIN_L and grain_ratio >= TONE_GRAIN_RATIO


def _ramp(r) -> bool:
    """Whether planes fitted to the regions take :data:`TONE_RAMP_SHARE` or less of the spread (a ramp)."""
    return r.ramp_spread <= TONE_RAMP_SHARE * r.spread


def artwork_like(*, flat_share: float, spread: float, even_share: float, texture: float = 0.0, grain: float = 0.0,
                 grain_ratio: float = 0.0, ramp_spread: float = 0.0) -> bool:
    """Whether one picture's flat regions alone would be judged artwork by :func:`judge`.

    The measures are those of :class:`~quantize.core.regions.Regions`; a
    ``ramp_spread`` of 0 (not measured) takes any variation for a ramp.
    """
    return not (flat_share < MIN_FLAT_SHARE or texture >= TONE_TEXTURE_L or _grainy(grain, grain_ratio)
                or _tone_in_spread(spread=spread, even_share=even_share, texture=texture,
                                   ramp=ramp_spread <= TONE_RAMP_SHARE * spread))


def judge(regions: Sequence[Regions]) -> Judgement:
    """Flat artwork or continuous tone, from the images' regions and how even they are.

    Several images (a product set) are judged together: the flat and speck
    shares are pooled by pixels, the spread, texture and grain are the
    largest of any image.
    """
    total = sum(r.n_pixels for r in regions) or 1
    flat = sum(r.flat_share * r.n_pixels for r in regions) / total
    spread = max(r.spread for r in regions)
    if flat < MIN_FLAT_SHARE:
        return Judgement("continuous tone", f"only {flat:.0%} of the image is flat colour (texture everywhere)",
                         flat, spread)
    specks = sum(r.speck_share * r.n_pixels for r in regions) / total
    if specks >= SPECK_SHARE:
        return Judgement("continuous tone", f"at least {specks:.1%} of the image is small detail in colours that no "
                         f"mix of its flat colours makes (artwork leaves under {SPECK_SHARE:.1%}: the fragments of "
                         "its lettering are blends of its inks)", flat, spread)
    texture = max(r.texture for r in regions)
    if texture >= TONE_TEXTURE_L:
        return Judgement("continuous tone", f"its lightness varies all through its flat areas (half of their pixels "
                         f"lie L* {texture:.2f} or more from an even ramp across their area; flat ink, scanned or "
                         f"shaded, stays well under {TONE_TEXTURE_L:g})", flat, spread)
    grainy = [r for r in regions if _grainy(r.grain, r.grain_ratio)]
    if grainy:
        r = max(grainy, key=lambda r: r.grain)
        return Judgement("continuous tone", f"its flat areas hold a photograph's grain (in three quarters of them the "
                         f"lightness varies L* {r.grain:.2f} or more over 9 to 33 pixels, {r.grain_ratio:.0%} of its "
                         f"variation under 9 pixels; the noise of flat ink lies under 9 pixels, its band under "
                         f"{TONE_GRAIN_RATIO:.0%} of that)", flat, spread)
    even = min(r.even_share for r in regions)
    ramp = any(_ramp(r) for r in regions)
    if _tone_in_spread(spread=spread, even_share=even, texture=texture, ramp=ramp):
        where = ("in ramps across them" if ramp else
                 f"all through them (half of their pixels lie L* {texture:.2f} or more from an even ramp)")
        return Judgement("continuous tone", f"colours vary inside its flat areas (90 % within ΔE00 {spread:.1f} "
                         f"of their area's colour; flat ink stays within {TONE_SPREAD_DE:g}; only {even:.0%} of the "
                         f"flat area is even), {where}", flat, spread)
    if spread > TONE_SPREAD_DE and even >= MIN_EVEN_SHARE:
        return Judgement("artwork", f"{flat:.0%} of the image is flat areas, {even:.0%} of them of even colour "
                         "(the rest holds some tone)", flat, spread)
    if spread > TONE_SPREAD_DE:
        return Judgement("artwork", f"{flat:.0%} of the image is flat areas of even colour but for strokes running "
                         f"through them (90 % within ΔE00 {spread:.1f} of their area's colour, only {even:.0%} of the "
                         f"flat area even, but its lightness varies under L* {TONE_SPREAD_TEXTURE_L:g} in half of it "
                         "and no ramp explains it)", flat, spread)
    return Judgement("artwork", f"{flat:.0%} of the image is flat areas of even colour (90 % within ΔE00 "
                     f"{spread:.1f} of their area's colour)", flat, spread)


def missing_inks(groups: InkGroups, palette_lab: np.ndarray, n_pixels: int) -> np.ndarray:
    """Indices of the groups that no palette colour prints.

    A group is missing when it covers at least :data:`MIN_SHARE` of the image
    (and :data:`MIN_PIXELS` pixels of ``n_pixels``) and every palette colour
    is :data:`FOUND_DE` or more from it.
    """
    if len(groups) == 0:
        return np.zeros(0, dtype=np.intp)
    pal = np.asarray(palette_lab, dtype=np.float64)
    de = np.min([np.asarray(delta_e_ciede2000(groups.lab, np.broadcast_to(p, groups.lab.shape))) for p in pal],
                axis=0)
    big = (groups.share >= MIN_SHARE) & (groups.share * n_pixels >= MIN_PIXELS)
    return np.flatnonzero(big & (de >= FOUND_DE))


def lost_inks(groups: InkGroups, palette_lab: np.ndarray, served: np.ndarray | None = None) -> list[dict]:
    """The groups of at least :data:`MIN_SHARE` that are :data:`DISTINCT_DE` or more from every palette colour.

    ``served``, if given, is one flag per group: a group whose pixels were
    read and found mapped within :data:`DISTINCT_DE` is not lost, whatever its
    colour (a photograph's smooth gradient can be one flat area whose median
    colour it does not hold).

    Each is a dict: ``lab`` (its colour), ``share`` (percent of the image),
    ``where`` ((x, y) percent of the width and height, the centre of its
    largest region), ``nearest`` (palette index it maps to) and
    ``delta_e`` (ΔE00 to that colour).
    """
    if len(groups) == 0:
        return []
    pal = np.asarray(palette_lab, dtype=np.float64)
    de = np.stack([delta_e_ciede2000(groups.lab, np.broadcast_to(p, groups.lab.shape)) for p in pal], axis=1)
    nearest = np.argmin(de, axis=1)
    out = []
    lost = (groups.share >= MIN_SHARE) & (de.min(axis=1) >= DISTINCT_DE)
    if served is not None:
        lost &= ~np.asarray(served, bool)
    for g in np.flatnonzero(lost):
        out.append({"lab": [round(float(v), 2) for v in groups.lab[g]], "share": round(float(100.0 * groups.share[g]), 3),
                    "where": [round(100.0 * float(v), 1) for v in groups.where[g]],
                    "nearest": int(nearest[g]), "delta_e": round(float(de[g, nearest[g]]), 2)})
    return out


def group_sample(groups: InkGroups, n_pixels: int):
    """The ink groups as a weighted colour sample: one 16-bit colour per group, weighted by its pixels.

    The fitting engine then finds the palette of the inks themselves, with
    no anti-aliased edge or noise pixel pulling a colour toward it.
    """
    from quantize.colour.spaces import clip_to_gamut, lab_to_srgb
    from quantize.core.sampling import ColourSample

    codes = np.rint(clip_to_gamut(lab_to_srgb(groups.lab)) * 65535).astype(np.uint16)
    weights = np.maximum(groups.share * n_pixels, 1e-9)
    # Two groups can round to one code: merge their weights.
    uniq, inv = np.unique(codes, axis=0, return_inverse=True)
    w = np.bincount(inv.ravel(), weights=weights, minlength=len(uniq))
    return ColourSample(codes=uniq, weights=w, bit_depth=16, n_pixels=int(n_pixels))


def auto_choice(ks, palettes_lab, stats, robust, regions: Sequence[Regions] | None, n_pixels: int, *,
                kind: str = "auto", target: float | None = None, target_stat: str = "mean"):
    """The automatic rule's pick among palettes already fitted (a sweep's rows).

    Artwork: the smallest size whose palette prints every ink group of at
    least :data:`MIN_SHARE` within :data:`FOUND_DE`; continuous tone: the
    smallest whose ΔE00 ``target_stat`` meets ``target`` (default
    :data:`TONE_TARGET_DE`).  Without regions (a bare colour sample) the
    penalised rule picks, on ``robust`` (each size's ``R_k``).  Returns a
    :class:`quantize.fit.selection.Choice`.
    """
    from .selection import Choice, choose_k

    if not regions:
        c = choose_k(ks, stats, robust, rule="bic")
        return Choice(c.k, "auto", "no regions to judge (a colour sample): " + c.reason, c.scores)
    judgement = judge(regions)
    kind = judgement.kind if kind == "auto" else kind
    if kind == "artwork":
        groups = ink_groups(regions)
        for k, lab in zip(ks, palettes_lab):
            if len(missing_inks(groups, lab, n_pixels)) == 0:
                return Choice(int(k), "auto", f"artwork: the fewest inks ({k}) within ΔE00 {FOUND_DE:g} of every "
                                              "flat area of at least 0.1 % of the image")
        return Choice(int(ks[-1]), "auto", "artwork: no size of the range prints every flat area; took the largest")
    goal = TONE_TARGET_DE if target is None else target
    for k, st in zip(ks, stats):
        if st[target_stat] <= goal:
            return Choice(int(k), "auto", f"continuous tone: the smallest palette with ΔE00 {target_stat} "
                                          f"{st[target_stat]:.2f} <= {goal:g}")
    return Choice(int(ks[-1]), "auto", f"continuous tone: no size of the range meets ΔE00 {target_stat} <= {goal:g}; "
                                       "took the largest")
