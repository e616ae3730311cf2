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
from PIL import Image
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


def test_scanned_lettering_with_low_contrast_hairlines_is_judged_artwork():
    # Generated lettering, 6 inks (seed 1011), through the scan simulation: its olive
    # ground (54 % of the image) holds 1 px strokes and small lettering of
    # low-contrast inks that stay under the flatness threshold, so only 18 % of
    # its flat area is even (spread 3.64 > 3.5) and the spread rule called it
    # continuous tone.  That variation is strokes, neither all through the ground
    # (texture 0.25 < inkcount.TONE_SPREAD_TEXTURE_L 0.4) nor a ramp (a plane per
    # region leaves 98 % of the spread > inkcount.TONE_RAMP_SHARE 0.8).  A tuning
    # case of both constants (docs/method.md 6a).  Expected: artwork (its painted inks).
    rgb, _ = lettering_artwork(6, 1011)
    j = judge([_regions(scan(rgb, 1011))])
    assert j.kind == "artwork", j.reason


@pytest.mark.parametrize("name", PHOTOS)
def test_photos_and_ramps_are_judged_continuous_tone(name):
    j = judge([_regions(getattr(skimage.data, name)())])
    assert j.kind == "continuous tone", j.reason


def _sample(name, scale=1.0, quality=None):
    """A scikit-image sample image (grey taken as RGB), resized by ``scale`` (Pillow's Lanczos), maybe through JPEG."""
    img = Image.fromarray(getattr(skimage.data, name)())
    if scale != 1:
        img = img.resize((int(img.width * scale), int(img.height * scale)), Image.LANCZOS)
    rgb = np.asarray(img.convert("RGB"))
    return np.ascontiguousarray(rgb) if quality is None else jpeg(rgb, quality)


@pytest.mark.parametrize("scale", [0.5, 0.6])
def test_a_small_colour_wheel_is_continuous_tone(scale):
    # scikit-image's colour wheel at 0.5 and 0.6 of its size (Lanczos): only the spread
    # rule calls it continuous tone (spread 26 and 31, 48 and 39 % of the flat area
    # even; texture 0.07 and 0.55).  That rule now asks for variation all through the
    # flat areas or in ramps (docs/method.md 6a, *Strokes through a ground*): planes
    # fitted to its regions leave 0.53 and 0.57 of the spread (<= inkcount.TONE_RAMP_SHARE
    # 0.8), a ramp.  Tuning cases of that constant.  Expected: continuous tone.
    j = judge([_regions(_sample("colorwheel", scale))])
    assert j.kind == "continuous tone", j.reason


@pytest.mark.parametrize("scale, quality", [(1.0, None), (0.4, None), (0.55, None), (0.85, None), (0.75, 75)])
def test_a_photograph_of_a_wall_is_judged_continuous_tone(scale, quality):
    # scikit-image's brick (a photograph of a brick wall, grey, taken as RGB): 36 to
    # 60 % of it is flat and even (spread 1.13 at full size), its texture 0.31 to
    # 0.39 (under inkcount.TONE_TEXTURE_L 0.55), no specks, and it was judged
    # artwork.  The blotches of each brick lie at 9 to 33 px, where scan noise leaves
    # little: grain 0.151 to 0.177 >= inkcount.TONE_GRAIN_L 0.12, and 0.57 to 0.66 of
    # the variation under 9 px >= inkcount.TONE_GRAIN_RATIO 0.45.  Full size and
    # 0.4 were tuning (with 0.3 to 0.9); 0.55, 0.85 and 0.75 through JPEG q75 held
    # out (grain 0.172, 0.154, 0.164; ratio 0.63, 0.59, 0.54).  Expected: continuous tone.
    j = judge([_regions(_sample("brick", scale, quality))])
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
