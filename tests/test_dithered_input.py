"""Dithered input keeps its dots on the films; flat art is still cleaned.

The dithers are made by ``quantize reduce --dither`` from a gradient drawn
here; the films are read back from the TIFFs written and compared, pixel by
pixel, with the reduced image.
"""

from __future__ import annotations

import json

import numpy as np
import pytest
from artwork import flat_artwork, lettering_artwork
from click.testing import CliRunner
from PIL import Image

from quantize.palette import Palette
from quantize.render.mapping import map_picture
from quantize.separation.dithered import DITHER_SHARE, alternation_share
from quantize.separation.plates import separate

from quantize.separation.plates import SeparationSettings

# The films on the artwork's own grid (300 dpi), so that they compare pixel for pixel
# with the drawing; films at print size are tests/test_film.py's.
AT_ART = SeparationSettings(film_dpi=300)


def _cli():
    from quantize.cli.main import main

    return lambda *a: CliRunner().invoke(main, [str(x) for x in a])


def _gradient(h=150, w=200):
    """A dusk-like two-way gradient (invented), smooth, so any dot pattern comes from the dither."""
    y, x = np.mgrid[0:h, 0:w] / np.array([h - 1, w - 1])[:, None, None]
    top, bottom, side = np.array([40, 44, 92]), np.array([236, 150, 120]), np.array([250, 214, 140])
    rgb = top * (1 - y[..., None]) + bottom * y[..., None]
    rgb = rgb * (1 - 0.4 * x[..., None]) + side * 0.4 * x[..., None]
    return np.round(rgb).astype(np.uint8)


def _kept_share(folder, reduced_rgb, doc):
    """Share of pixels whose film (read from the TIFFs) prints the reduced image's colour there."""
    agree = np.zeros(reduced_rgb.shape[:2], bool)
    for p in doc["plates"]:
        film = ~np.asarray(Image.open(folder / p["files"][0]))
        colour = np.array([int(p["hex"][i:i + 2], 16) for i in (1, 3, 5)], np.uint8)
        agree |= film & (reduced_rgb == colour).all(axis=-1)
    return float(agree.mean())


@pytest.fixture(scope="module", params=["clustered-dot", "floyd-steinberg"])
def dithered(request, tmp_path_factory):
    d = tmp_path_factory.mktemp(request.param)
    Image.fromarray(_gradient()).save(d / "sky.png")
    r = _cli()("reduce", d / "sky.png", "-o", d / "sky-reduced.png", "-k", "5", "--dither", request.param,
               "--keep-palette")
    assert r.exit_code == 0, r.output
    return d, np.asarray(Image.open(d / "sky-reduced.png").convert("RGB"))


def test_a_dither_made_by_reduce_keeps_its_pixels_on_the_films(dithered):
    d, reduced = dithered
    r = _cli()("separate", d / "sky-reduced.png", "-o", d / "films", "--palette", d / "sky-reduced.palette.json",
               "--substrate", "none", "--dpi", "300", "--film-dpi", "300")
    assert r.exit_code == 0, r.output
    doc = json.loads((d / "films" / "sky-reduced-manifest.json").read_text(encoding="utf-8"))
    assert _kept_share(d / "films", reduced, doc) >= 0.99
    assert "looks dithered" in r.output and any("looks dithered" in n for n in doc["notes"])
    assert doc["dither"]["detected"] and doc["dither"]["kept"]


def test_cleaning_a_dither_as_flat_art_is_a_choice_and_it_loses_dots(dithered):
    d, reduced = dithered
    r = _cli()("separate", d / "sky-reduced.png", "-o", d / "clean", "--palette", d / "sky-reduced.palette.json",
               "--substrate", "none", "--dpi", "300", "--film-dpi", "300", "--dithered", "clean")
    assert r.exit_code == 0, r.output
    doc = json.loads((d / "clean" / "sky-reduced-manifest.json").read_text(encoding="utf-8"))
    assert _kept_share(d / "clean", reduced, doc) < 0.99  # what "auto" protects against
    assert "cleaned as flat art, as asked" in r.output


def test_alternation_share_hand_worked():
    # A 4 x 4 checkerboard: every pixel differs from all its neighbours (corners have two, edges three).
    assert alternation_share(np.indices((4, 4)).sum(axis=0) % 2) == 1.0
    # A vertical boundary: each pixel differs from at most one neighbour.
    assert alternation_share(np.repeat([[0, 0, 1, 1]], 4, axis=0)) == 0.0
    # One isolated pixel in a 3 x 3 block differs from its four neighbours; they differ from it only.
    one = np.zeros((3, 3), int)
    one[1, 1] = 1
    assert alternation_share(one) == pytest.approx(1 / 9)
    # Transparent neighbours do not count.
    assert alternation_share(one, opaque=np.ones((3, 3), bool) & (one == 1)) == 0.0


@pytest.mark.parametrize("seed", [0, 1, 2])
def test_flat_artwork_is_not_taken_for_a_dither(seed):
    # Anti-aliased and JPEG-compressed flat art (tests/artwork.py) keeps its clean-up.
    for img, inks in (flat_artwork(5, seed, size=160, jpeg_quality=75), lettering_artwork(4, seed)[:2]):
        pal = Palette(np.asarray(inks, np.uint8), np.r_[True, np.zeros(len(inks) - 1, bool)])
        assert alternation_share(map_picture(img, pal, nearest="ciede2000").indices) < DITHER_SHARE
        sep = separate(img, pal, dpi=300, settings=AT_ART)
        assert not sep.dither["kept"] and sep.cleanup.min_feature_mm == 0.5


def test_keep_is_honoured_on_flat_art_and_a_bad_choice_is_refused():
    img, inks = flat_artwork(4, 3, size=96, jpeg_quality=75)
    pal = Palette(np.asarray(inks, np.uint8), np.r_[True, np.zeros(len(inks) - 1, bool)])
    sep = separate(img, pal, dpi=300, settings=AT_ART, dithered="keep")
    assert sep.dither["kept"] and sep.cleanup.pixels_changed == 0 and sep.edges is None
    np.testing.assert_array_equal(sep.indices, map_picture(img, pal, nearest="ciede2000").indices)
    from quantize.errors import SeparationError

    with pytest.raises(SeparationError, match="dithered"):
        separate(img, pal, dpi=300, settings=AT_ART, dithered="sometimes")
