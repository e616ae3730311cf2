"""Clean-up on the film that keeps what matters: lines thickened, small elements grown or dropped whole.

Widths and places are measured on the films written, in film pixels and mm
(25.4 mm per inch); areas of dots against pi d^2 / 4.
"""

from __future__ import annotations

import json

import numpy as np
import pytest
from PIL import Image
from skimage.measure import label

from quantize.palette import Palette
from quantize.separation.cleanup import keep_detail
from quantize.separation.plates import SeparationSettings, separate

PAPER, INK, RED, BLUE = (250, 250, 245), (20, 20, 22), (200, 16, 46), (31, 58, 147)
MM_PER_INCH = 25.4


def _palette(*colours, names):
    lk = np.zeros(len(colours), bool)
    lk[0] = True
    return Palette(np.array(colours, np.uint8), lk, names=names)


def _film(sep, tmp_path, name):
    written = sep.write(tmp_path, stem="job", pdf=False)
    with Image.open(written["plates"][name][0]) as im:
        return ~np.asarray(im), written


def test_a_hairline_is_thickened_to_the_minimum_line_not_deleted(tmp_path):
    img = np.empty((100, 100, 3), np.uint8)
    img[:] = PAPER
    img[10:90, 50] = INK  # one pixel at 300 dpi: 0.085 mm
    sep = separate(img, _palette(PAPER, INK, names=("paper", "Ink")), dpi=300,
                   settings=SeparationSettings(film_dpi=600, min_line_mm=0.35))
    film, _ = _film(sep, tmp_path, "Ink")
    widths = film[40:160].sum(axis=1)
    want = 0.35 / MM_PER_INCH * 600  # 8.27 px; the film holds whole pixels, an odd count about the skeleton
    assert np.all(widths >= want - 0.5) and np.all(widths <= want + 1.5)
    assert sep.detail.lines_thickened == 1
    assert sep.thin_summary["lines"] == 0  # nothing thin left to report


def test_small_elements_are_grown_or_dropped_whole_with_their_place(tmp_path):
    img = np.empty((120, 120, 3), np.uint8)
    img[:] = PAPER
    yy, xx = np.mgrid[:120, :120]
    img[20:100, 20:60] = INK  # a large block: untouched
    img[(yy - 30) ** 2 + (xx - 90) ** 2 <= 2 ** 2] = INK  # 13 px at 300 dpi: 52 film px at 600 dpi
    img[100:101, 100:101] = INK  # a single pixel: 4 film px
    # A fine minimum line (0.1 mm), so the dot is no thin line part: it grows as an element.
    st = SeparationSettings(film_dpi=600, min_feature_mm=0.5, min_line_mm=0.1, keep_fraction=0.4)
    sep = separate(img, _palette(PAPER, INK, names=("paper", "Ink")), dpi=300, settings=st)
    film, written = _film(sep, tmp_path, "Ink")
    min_area = np.pi * (0.5 / MM_PER_INCH * 600) ** 2 / 4  # 109.6 film px
    lab, n = label(film, connectivity=2, return_num=True)
    areas = np.bincount(lab.ravel())[1:]
    assert n == 2 and areas.min() >= min_area  # the block and the grown dot; the speck is gone
    dot = lab == lab[60, 180]
    ys, xs = np.nonzero(dot)
    assert abs(ys.mean() - 60.5) < 1.5 and abs(xs.mean() - 180.5) < 1.5  # grown in place
    assert not film[195:210, 195:210].any()
    doc = json.loads(written["manifest"].read_text())
    d = doc["detail"]
    assert d["elements_grown"] == 1 and d["dropped_count"] == 1
    # Where the speck was drawn (8.47 mm from the top-left corner), within a film pixel or two.
    assert d["dropped"][0]["x_mm"] == pytest.approx(100 / 300 * MM_PER_INCH, abs=0.1)
    assert d["dropped"][0]["y_mm"] == pytest.approx(100 / 300 * MM_PER_INCH, abs=0.1)
    (warning,) = [n for n in sep.notes if n.startswith("warning: 1 small element(s) below the 0.5 mm minimum dot "
                                                       "are dropped whole")]
    x_mm, y_mm = (float(warning.split(f"{axis} ")[1].split(" mm")[0]) for axis in (" x", " y"))
    assert x_mm == pytest.approx(8.47, abs=0.1) and y_mm == pytest.approx(8.47, abs=0.1)


def test_a_sliver_between_two_colours_is_not_widened():
    idx = np.zeros((40, 60), int)
    idx[:, 30:] = 2
    idx[5:35, 29] = 1  # a one-pixel sliver of a third ink along the join
    out, rep = keep_detail(idx, np.ones(idx.shape, bool), [1, 2], min_area=9, line_px=5)
    assert rep.lines_thickened == 0 and (out == 1).sum() == 30
    idx2 = np.zeros((40, 60), int)
    idx2[5:35, 29] = 1  # the same line on one colour
    out2, rep2 = keep_detail(idx2, np.ones(idx2.shape, bool), [1], min_area=9, line_px=5)
    assert rep2.lines_thickened == 1 and (out2[20] == 1).sum() == 5


def test_an_ink_that_loses_all_its_area_is_a_warning():
    img = np.empty((60, 60, 3), np.uint8)
    img[:] = PAPER
    img[10:50, 10:50] = INK
    img[55, 55] = RED  # one pixel of red: 0.085 mm, far below the minimum dot
    pal = _palette(PAPER, INK, RED, names=("paper", "Ink", "Red"))
    sep = separate(img, pal, dpi=300, settings=SeparationSettings(film_dpi=300))
    assert [p.name for p in sep.plates] == ["Ink"]
    assert any(n.startswith("warning: the clean-up removed every area of Red") for n in sep.notes)


@pytest.mark.parametrize("r", [1, 3, 4, 8, 12])
def test_disk_erosion_and_dilation_by_runs_equal_scikit_image(r):
    # The run-window filter must give exactly scikit-image's binary erosion and
    # dilation by morphology.disk(r) (the reference), outside counted unprinted.
    from skimage import morphology

    from quantize.separation.cleanup import _disk_filter

    rng = np.random.default_rng(r)
    for _ in range(5):
        m = np.pad(rng.random(tuple(rng.integers(10, 70, 2))) < rng.uniform(0.3, 0.9), r + 2)
        fp = morphology.disk(r)
        assert np.array_equal(_disk_filter(m, r, erode=True), morphology.binary_erosion(m, fp))
        assert np.array_equal(_disk_filter(m, r, erode=False), morphology.binary_dilation(m, fp))


def test_thickened_lettering_keeps_an_even_outline():
    # Lettering drawn by Pillow at 4x and reduced to 150 dpi art, on 600 dpi films:
    # its diagonal strokes hover at the 0.35 mm minimum line, so their thin parts are
    # short pieces.  Thickening must follow the strokes' centre lines, not bead them
    # with a round cap per piece: most added pixels lie within 1.5 px of the plain
    # film's ink (measured: 70 % with the whole-ink skeleton, 43 % with each
    # piece's own skeleton, which beaded the strokes; invented demo lettering).
    from PIL import ImageDraw, ImageFont
    from scipy import ndimage as ndi

    big = Image.new("RGB", (1200, 240), (244, 236, 214))
    ImageDraw.Draw(big).text((20, 40), "AVWXYZ 4717", fill=(34, 28, 30), font=ImageFont.load_default(size=120))
    art = np.asarray(big.resize((300, 60), Image.Resampling.LANCZOS))
    pal = Palette(np.array([[244, 236, 214], [34, 28, 30]], np.uint8), np.array([True, False]))
    masks = {kd: separate(art, pal, dpi=150, settings=SeparationSettings(keep_detail=kd, trap_mm=0)).plates[0].mask
             for kd in (False, True)}
    added = masks[True] & ~masks[False]
    assert added.sum() > 200  # the strokes were thickened
    out = ndi.distance_transform_edt(~masks[False])[added]
    assert (out <= 1.5).mean() > 0.6
