"""Edges: an anti-aliased pixel between two inks prints one of those two, never a third.

The reference is the drawing itself: the art is drawn as an ink-number image
at 4x, each ink painted in its colour and box-filtered down (anti-aliased
edges, as exported vector art has), so the inks that truly cover each final
pixel are known (those present in its 4 x 4 block). A pixel printed with an
ink that does not cover it is a sliver the art does not have. Artwork and
colours are invented.
"""

from __future__ import annotations

import io

import numpy as np
import pytest
from PIL import Image, ImageDraw, ImageFont

from quantize.colour.spaces import srgb8_to_space
from quantize.palette import Palette
from quantize.render.mapping import map_picture
from quantize.separation.edges import resolve_seams
from quantize.separation.plates import SeparationSettings, separate

# The films on the artwork's own grid (300 dpi), so that they compare pixel for pixel
# with the drawing; films at print size are tests/test_film.py's.  No traps and no thickening:
# a trap spreads one of the two inks at a join (tests/test_trap.py), and keeping detail thickens
# a thin line into the room beside it (tests/test_film_cleanup.py); both spread an ink on
# purpose, which is not an edge sliver.
AT_ART = SeparationSettings(film_dpi=300, trap_mm=0, keep_detail=False)

NAVY, CREAM, TEAL, RED, BLUSH = (31, 45, 84), (244, 236, 214), (32, 130, 128), (200, 40, 50), (242, 176, 162)
GARMENT, WHITE, GREEN = (24, 24, 28), (250, 250, 250), (40, 140, 60)
SS = 4  # supersampling factor


def _draw(inks, paint, size=240):
    """(rgb uint8, allowed bool (H, W, k)): the art, and which inks cover each final pixel."""
    big = size * SS
    lab = Image.new("L", (big, big), 0)
    paint(ImageDraw.Draw(lab))
    labels = np.asarray(lab)
    rgb = np.array(inks, np.uint8)[labels]
    small = np.asarray(Image.fromarray(rgb).resize((size, size), Image.Resampling.BOX)).copy()
    blocks = labels.reshape(size, SS, size, SS).transpose(0, 2, 1, 3).reshape(size, size, SS * SS)
    allowed = np.stack([(blocks == k).any(-1) for k in range(len(inks))], axis=-1)
    return small, allowed


def _poster(draw):
    """Cream text at four sizes on navy, a blush disc with red stripes, a deliberate 2-px teal line."""
    for i, fs in enumerate((9, 14, 22, 34)):
        draw.text((4 * SS, (6 + 40 * i) * SS), "Kite Harbour 87", fill=1, font=ImageFont.load_default(size=fs * SS))
    draw.ellipse([150 * SS, 150 * SS, 220 * SS, 220 * SS], fill=4)
    for j in range(5):
        draw.rectangle([160 * SS, (160 + 12 * j) * SS, 210 * SS, (164 + 12 * j) * SS - 1], fill=3)
    draw.rectangle([10 * SS, 200 * SS, 100 * SS - 1, 202 * SS - 1], fill=2)  # 2 px at the final size


def _garment(draw):
    """White lettering and a white disc on a dark garment; a green badge."""
    for i, fs in enumerate((10, 16, 28)):
        draw.text((6 * SS, (8 + 50 * i) * SS), "NORTH QUAY", fill=1, font=ImageFont.load_default(size=fs * SS))
    draw.ellipse([30 * SS, 170 * SS, 90 * SS, 230 * SS], fill=1)
    draw.rectangle([140 * SS, 160 * SS, 220 * SS, 220 * SS], fill=2)


POSTER = ([NAVY, CREAM, TEAL, RED, BLUSH], _poster)
SHIRT = ([GARMENT, WHITE, GREEN], _garment)


def _jpeg(rgb, quality=85):
    buf = io.BytesIO()
    Image.fromarray(rgb).save(buf, format="JPEG", quality=quality, subsampling="4:2:0")
    buf.seek(0)
    return np.asarray(Image.open(buf).convert("RGB")).copy()


def _grow(mask, r):
    """Square dilation by r pixels (JPEG's half-resolution chroma moves an edge by up to a pixel)."""
    out = mask.copy()
    pad = np.pad(mask, ((r, r), (r, r), (0, 0)))
    h, w = mask.shape[:2]
    for dy in range(2 * r + 1):
        for dx in range(2 * r + 1):
            out |= pad[dy:dy + h, dx:dx + w]
    return out


def _slivers(indices, allowed):
    """Pixels printed with an ink that does not cover them in the drawing."""
    return ~np.take_along_axis(allowed, indices[..., None].astype(np.int64), axis=2)[..., 0]


def _thin_slivers(sep, allowed):
    """Pixels of a plate thinner than 2 px (gone after an opening by a 2 x 2 square, scipy.ndimage as
    the reference) whose ink does not cover them in the drawing."""
    from scipy import ndimage as ndi

    wrong = _slivers(sep.indices, allowed)
    return sum(int((p.mask & ~ndi.binary_opening(p.mask, np.ones((2, 2), bool)) & wrong).sum()) for p in sep.plates)


@pytest.mark.parametrize("art", [POSTER, SHIRT], ids=["poster", "garment"])
def test_anti_aliased_edges_print_only_the_inks_that_cover_them(art):
    inks, paint = art
    rgb, allowed = _draw(inks, paint)
    pal = Palette(np.array(inks, np.uint8), np.r_[True, np.zeros(len(inks) - 1, bool)])
    before = _slivers(map_picture(rgb, pal, nearest="ciede2000").indices, allowed).sum()
    assert before > 100  # the plain nearest colour does make slivers of a third ink on this art
    sep = separate(rgb, pal, dpi=300, settings=AT_ART, min_feature_mm=0, min_line_mm=0)  # no clean-up: the edge step alone
    assert _slivers(sep.indices, allowed).sum() == 0
    assert sep.edges.pixels_changed >= before
    # Default clean-up on top (it may merge a glyph part below 0.5 mm into a neighbour: a clean-up
    # matter, not an edge): no plate has a thin region of an ink that does not cover it.
    assert _thin_slivers(separate(rgb, pal, dpi=300, settings=AT_ART), allowed) == 0


def test_jpeg_edges_keep_at_most_a_trace_and_no_plate_keeps_a_sliver_region():
    inks, paint = POSTER
    rgb, allowed = _draw(inks, paint)
    jpg = _jpeg(rgb)
    near = _grow(allowed, 1)
    pal = Palette(np.array(inks, np.uint8), np.r_[True, np.zeros(len(inks) - 1, bool)])
    before = _slivers(map_picture(jpg, pal, nearest="ciede2000").indices, near).sum()
    alone = separate(jpg, pal, dpi=300, settings=AT_ART, min_feature_mm=0, min_line_mm=0)
    after = _slivers(alone.indices, near).sum()
    assert before > 300 and after <= 0.1 * before  # at least 90 % of the slivers go (measured: 92 %)
    # With the default clean-up (0.5 mm at 300 dpi) the traces left are merged too; without the
    # edge step, the clean-up alone leaves some.
    assert _thin_slivers(separate(jpg, pal, dpi=300, settings=AT_ART), near) == 0
    assert _thin_slivers(separate(jpg, pal, dpi=300, settings=AT_ART, edges=False), near) > 0


def test_a_drawn_thin_line_of_a_third_ink_is_kept():
    inks, paint = POSTER
    rgb, _ = _draw(inks, paint)
    pal = Palette(np.array(inks, np.uint8), np.r_[True, np.zeros(len(inks) - 1, bool)])
    for img in (rgb, _jpeg(rgb)):
        sep = separate(img, pal, dpi=300, settings=AT_ART, min_feature_mm=0, min_line_mm=0)
        line = sep.indices[200:202, 12:98]  # the 2-px teal line, away from its ends
        assert (line == 2).all()


def test_a_reduced_image_loses_its_one_pixel_slivers_but_not_its_lines():
    # A reduced image: every pixel is exactly a palette colour, so a sliver has the third ink's own
    # colour; only its width (one pixel, between two inks whose segment passes near it) tells it apart.
    inks, paint = POSTER
    rgb, allowed = _draw(inks, paint)
    pal = Palette(np.array(inks, np.uint8), np.r_[True, np.zeros(len(inks) - 1, bool)])
    idx = map_picture(rgb, pal, nearest="ciede2000").indices
    reduced = pal.rgb8[idx]
    sep = separate(reduced, pal, dpi=300, settings=AT_ART, min_feature_mm=0, min_line_mm=0)
    before, after = _slivers(idx, allowed), _slivers(sep.indices, allowed)
    assert after.sum() <= 0.15 * before.sum()  # measured: 63 of 572 left, the rest one pixel wide no more
    assert not (after & ~before).any()  # no pixel that printed a covering ink now prints another
    assert (sep.indices[200:202, 12:98] == 2).all()  # the drawn 2-px teal line stays
    # The composite is the edge-corrected reduced image, pixel for pixel.
    np.testing.assert_array_equal(sep.palette.rgb8[sep.composite_indices()], sep.rgb)


def test_a_blend_goes_to_the_nearer_ink_along_the_segment():
    # Between navy and cream, blends of 35 % and 55 % cream (mixed in sRGB, as a box filter mixes
    # them) are nearest to teal by ΔE00. Each must go to the end of the navy-cream segment it is
    # nearer along, the projection computed here with scikit-image's CIELAB (IEC 61966-2-1 sRGB, D65).
    from skimage.color import deltaE_ciede2000, rgb2lab

    inks = np.array([NAVY, TEAL, CREAM], np.uint8)
    blends = [np.round((1 - f) * np.array(NAVY) + f * np.array(CREAM)).astype(np.uint8) for f in (0.35, 0.55)]
    ref = rgb2lab(np.vstack([inks, blends])[None] / 255.0)[0]
    seg = ref[2] - ref[0]
    t = [(ref[3 + i] - ref[0]) @ seg / (seg @ seg) for i in range(2)]
    expect = [0 if ti < 0.5 else 2 for ti in t]
    assert expect == [0, 2]  # one blend each way
    for i in range(2):  # and teal is the nearest ink of both
        assert np.argmin(deltaE_ciede2000(ref[3 + i][None], ref[:3])) == 1
    rgb = np.zeros((6, 10, 3), np.uint8)
    rgb[:, :4], rgb[:, 6:], rgb[:, 4], rgb[:, 5] = NAVY, CREAM, blends[0], blends[1]
    idx = map_picture(rgb, Palette(inks, None), nearest="ciede2000").indices
    assert (idx[:, 4:6] == 1).all()
    out, rep = resolve_seams(idx, srgb8_to_space(rgb.reshape(-1, 3), "lab"), np.arange(60).reshape(6, 10),
                             srgb8_to_space(inks, "lab"))
    assert (out[:, 4] == expect[0]).all() and (out[:, 5] == expect[1]).all()
    assert (out[:, :4] == 0).all() and (out[:, 6:] == 2).all()
    assert rep.pixels_changed == 12 and rep.by_ink == {1: 12}


def test_transparent_pixels_are_neither_changed_nor_neighbours():
    inks = np.array([NAVY, TEAL, CREAM], np.uint8)
    ink_lab = srgb8_to_space(inks, "lab")
    rgb = np.zeros((5, 9, 3), np.uint8)
    rgb[:, :4], rgb[:, 5:], rgb[:, 4] = NAVY, CREAM, (110, 118, 126)
    lab = srgb8_to_space(rgb.reshape(-1, 3), "lab")
    idx = np.array([0] * 4 + [1] + [2] * 4)[None].repeat(5, 0)
    opaque = np.ones((5, 9), bool)
    opaque[:, 5:] = False  # the cream side is transparent: no seam
    out, rep = resolve_seams(idx, lab, np.arange(45).reshape(5, 9), ink_lab, opaque=opaque)
    assert rep.pixels_changed == 0 and (out == idx).all()


def test_manifest_counts_the_edge_pixels_the_composite_shows(tmp_path):
    # With the clean-up off, the composite written differs from the plain nearest-colour image exactly
    # at the pixels the edge step moved; the manifest must count the same, per ink by name.
    import json

    inks, paint = SHIRT
    rgb, _ = _draw(inks, paint)
    pal = Palette(np.array(inks, np.uint8), np.r_[True, np.zeros(len(inks) - 1, bool)],
                  names=("tee", "White", "Green"))
    written = separate(rgb, pal, dpi=300, settings=AT_ART, min_feature_mm=0, min_line_mm=0).write(tmp_path, stem="job")
    comp = np.asarray(Image.open(written["composite"]).convert("RGB"))
    plain = pal.rgb8[map_picture(rgb, pal, nearest="ciede2000").indices]
    moved = (comp != plain).any(axis=-1)
    doc = json.loads(written["manifest"].read_text(encoding="utf-8"))
    assert doc["edges"]["pixels_changed"] == int(moved.sum()) > 0
    was = {name: int((moved & (plain == pal.rgb8[i]).all(axis=-1)).sum()) for i, name in enumerate(pal.names)}
    assert doc["edges"]["taken_from"] == {k: v for k, v in was.items() if v}
