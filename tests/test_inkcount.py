"""Judging an image and checking a palette against its inks (quantize.fit.inkcount).

Artwork comes from tests/artwork.py (invented data with known inks); the
photos are scikit-image's sample images.  ΔE00 is measured with
colour-science's CIEDE2000 (Sharma, Wu & Dalal 2005).
"""

from __future__ import annotations

import numpy as np
import pytest
import skimage.data
from colour import delta_E
from skimage.color import rgb2lab

from artwork import add_spot, flat_artwork, jpeg, lettering_artwork, scan, scanned_inks, shaded
from quantize.core.picture import Picture
from quantize.core.regions import find_regions
from quantize.fit.inkcount import FOUND_DE, MIN_SHARE, ink_groups, judge, missing_inks


def _lab(rgb8):
    return rgb2lab(np.asarray(rgb8, dtype=np.float64)[None] / 255.0)[0]


def _regions(rgb):
    return find_regions(Picture(np.ascontiguousarray(rgb[..., :3])))


ARTWORK = {
    "flat 4": lambda: flat_artwork(4, 4)[0],
    "flat 8 jpeg": lambda: jpeg(flat_artwork(8, 8)[0]),
    "flat 6 scan": lambda: scan(flat_artwork(6, 6)[0], 6),
    "lettering 4 jpeg": lambda: jpeg(lettering_artwork(4, 4)[0]),
    "lettering 5 scan": lambda: scan(lettering_artwork(5, 5)[0], 5),
    "flat 5 shaded": lambda: shaded(flat_artwork(5, 5)[0]),
    "10 close inks": lambda: flat_artwork(10, 10, min_de=16)[0],
}
#: scikit-image's photographs and its colour ramp: continuous tone by any reading.
PHOTOS = ["astronaut", "chelsea", "coffee", "rocket", "hubble_deep_field", "colorwheel", "immunohistochemistry"]


@pytest.mark.parametrize("name", sorted(ARTWORK))
def test_artwork_is_judged_artwork(name):
    j = judge([_regions(ARTWORK[name]())])
    assert j.kind == "artwork", j.reason


@pytest.mark.xfail(strict=True, reason=(
    "open (issue 14): generated demo lettering (6 inks, seed 1011) through the scan simulation is judged "
    "continuous tone: flat 0.747, spread 3.64 (> 3.5), even share 0.18 (< 0.5), specks 0, lightness texture "
    "0.25 (< 0.55).  Its olive background (54 % of the image) holds the 1 px strokes and small lettering of "
    "low-contrast inks, which stay under the flatness threshold: its median ΔE00 from its colour is 0.51 but "
    "11 % of its pixels lie over 3.5 (90th percentile 3.75), so it is not even.  Requiring the spread rule's "
    "tone to be everywhere (texture >= 0.3) would fix it but leaves scikit-image's deep-field photo at full "
    "size, 0.6 and 0.8 (texture 0.36-0.39, called continuous tone by that rule only) too close; docs/method.md 6a"))
def test_scanned_lettering_with_low_contrast_hairlines_is_judged_artwork():
    rgb, _ = lettering_artwork(6, 1011)
    j = judge([_regions(scan(rgb, 1011))])
    assert j.kind == "artwork", j.reason


@pytest.mark.parametrize("name", PHOTOS)
def test_photos_and_ramps_are_judged_continuous_tone(name):
    j = judge([_regions(getattr(skimage.data, name)())])
    assert j.kind == "continuous tone", j.reason


@pytest.mark.parametrize("case", ["flat", "jpeg", "scan"])
def test_each_ink_is_one_group(case):
    rgb, inks = flat_artwork(6, 21)
    if case == "jpeg":
        rgb = jpeg(rgb)
    elif case == "scan":
        rgb, inks = scan(rgb, 21), scanned_inks(inks)
    g = ink_groups([_regions(rgb)])
    big = g.share >= MIN_SHARE
    assert big.sum() == len(inks)
    de = np.array([delta_E(np.broadcast_to(t, g.lab[big].shape), g.lab[big], method="CIE 2000").min()
                   for t in _lab(inks)])
    assert de.max() < 2.0


@pytest.mark.parametrize("share", [0.003, 0.005])
def test_a_palette_without_the_small_ink_misses_it_and_one_with_it_does_not(share):
    rgb, inks = add_spot(*flat_artwork(5, 13), share, seed=13)
    regions = _regions(jpeg(rgb))
    g = ink_groups([regions])
    without = missing_inks(g, _lab(inks[:-1]), regions.n_pixels)
    assert len(without) == 1
    # The group missed is the spot's colour.
    assert delta_E(g.lab[without[0]], _lab(inks[-1:])[0], method="CIE 2000") < FOUND_DE
    assert len(missing_inks(g, _lab(inks), regions.n_pixels)) == 0


def test_two_images_count_alike_whatever_their_size():
    small, _ = flat_artwork(3, 1, size=160)
    large, _ = flat_artwork(3, 2, size=480)
    g = ink_groups([_regions(small), _regions(large)])
    assert g.share.sum() == pytest.approx(1.0, abs=0.05)
    one = ink_groups([_regions(small)])
    # The small image's inks keep half their share when pooled with one other image.
    for lab, share in zip(one.lab, one.share):
        de = delta_E(np.broadcast_to(lab, g.lab.shape), g.lab, method="CIE 2000")
        assert g.share[np.argmin(de)] >= 0.5 * share - 0.02
