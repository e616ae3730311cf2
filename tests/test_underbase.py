"""The underbase choke, its islands and bare areas, dark inks left off, the highlight white, the sequence.

Distances are held to scipy.ndimage's exact Euclidean distance transform
and to plane geometry (a disc of radius r has area pi r^2); sizes in mm to
25.4 mm per inch. The films are read back from the files written.
"""

from __future__ import annotations

import json

import numpy as np
import pytest
from films import read_films
from scipy import ndimage as ndi

from quantize.errors import SeparationError
from quantize.palette import Palette
from quantize.separation.cleanup import underbase_mask
from quantize.separation.plates import SeparationSettings, separate

BLACK, WHITE, YELLOW, NAVY = (20, 20, 22), (250, 250, 250), (245, 210, 40), (25, 30, 90)
MM_PER_INCH = 25.4


def _palette(*colours, names=()):
    lk = np.zeros(len(colours), bool)
    lk[0] = True  # the garment
    return Palette(np.array(colours, np.uint8), lk, names=names)



@pytest.mark.parametrize("choke_mm", [0.08, 0.25, 0.4])
def test_straight_edges_pull_back_by_the_choke_within_half_a_pixel(choke_mm, tmp_path):
    img = np.empty((100, 150, 3), np.uint8)
    img[:] = BLACK
    img[20:80, 30:120] = YELLOW
    sep = separate(img, _palette(BLACK, YELLOW, names=("shirt", "Yellow")), dpi=150, underbase=True,
                   choke_mm=choke_mm, settings=SeparationSettings(film_dpi=600))
    films, _ = read_films(sep, tmp_path)
    ink, base = films["Yellow"], films["underbase"]
    want = choke_mm / MM_PER_INCH * 600
    row = ink.shape[0] // 2
    cols_ink, cols_base = np.flatnonzero(ink[row]), np.flatnonzero(base[row])
    left = cols_base[0] - cols_ink[0]
    right = cols_ink[-1] - cols_base[-1]
    col = ink.shape[1] // 2
    top = np.flatnonzero(base[:, col])[0] - np.flatnonzero(ink[:, col])[0]
    for pulled in (left, right, top):
        assert abs(pulled - want) <= 0.5
    assert not (base & ~ink).any()


def test_a_disc_shrinks_by_the_choke_within_half_a_pixel(tmp_path):
    h = w = 120
    yy, xx = np.mgrid[:h, :w]
    img = np.empty((h, w, 3), np.uint8)
    img[:] = BLACK
    img[(yy + 0.5 - 60) ** 2 + (xx + 0.5 - 60) ** 2 < 40 ** 2] = YELLOW
    choke_mm = 0.3
    sep = separate(img, _palette(BLACK, YELLOW, names=("shirt", "Yellow")), dpi=200, underbase=True,
                   choke_mm=choke_mm, settings=SeparationSettings(film_dpi=600))
    films, _ = read_films(sep, tmp_path)
    ink, base = films["Yellow"], films["underbase"]
    r_ink, r_base = np.sqrt(ink.sum() / np.pi), np.sqrt(base.sum() / np.pi)
    want = choke_mm / MM_PER_INCH * 600
    assert abs((r_ink - r_base) - want) <= 0.5
    # Every underbase pixel's centre is at least the choke from the edge of the ink (scipy's EDT,
    # less the half pixel from the nearest clear centre to the edge), and the ring left out is no wider.
    dist = ndi.distance_transform_edt(ink) - 0.5
    assert dist[base].min() > want
    assert dist[ink & ~base].max() <= want + 1.0


def test_the_old_shortfall_is_gone():
    # 0.25 mm at 300 dpi is 2.95 px: the edge must move 3 px, not 2.
    p = np.zeros((40, 40), bool)
    p[5:35, 5:35] = True
    ub = underbase_mask(p, 0.25 / MM_PER_INCH * 300)
    assert np.flatnonzero(ub[20])[0] - 5 == 3
    assert (underbase_mask(p, 0.08 / MM_PER_INCH * 300) != p).any()  # 0.94 px: one pixel, not none


def test_islands_below_the_minimum_dot_are_removed_and_thin_areas_reported(tmp_path):
    img = np.empty((120, 200, 3), np.uint8)
    img[:] = BLACK
    img[10:60, 10:80] = WHITE  # a block: keeps its underbase
    yy, xx = np.mgrid[:120, :200]
    img[(yy - 90) ** 2 + (xx - 40) ** 2 <= 3 ** 2] = WHITE  # a dot 7 px = 0.59 mm across at 300 dpi
    img[10:110, 150:152] = WHITE  # a line 2 px = 0.17 mm wide, at x = 12.7 mm
    sep = separate(img, _palette(BLACK, WHITE, names=("shirt", "White")), dpi=300, underbase=True,
                   choke_mm=0.1, settings=SeparationSettings(film_dpi=600, min_feature_mm=0.5, keep_detail=False))
    films, written = read_films(sep, tmp_path)
    base = films["underbase"]
    from skimage.measure import label

    lab, n = label(base, connectivity=2, return_num=True)
    min_area = np.pi * (0.5 / MM_PER_INCH * 600) ** 2 / 4
    assert n >= 1 and np.bincount(lab.ravel())[1:].min() >= min_area
    assert not base[:, 290:310].any()  # the line (at 600 dpi: columns 300-303) has none
    assert not base[160:200, 60:100].any()  # nor has the dot
    doc = json.loads(written["manifest"].read_text())
    rep = doc["underbase_report"]
    assert rep["bare_areas"] == 2 and rep["islands_removed"] >= 1
    line = max(rep["bare"], key=lambda b: b["h_mm"])
    assert line["x_mm"] == pytest.approx(150 / 300 * MM_PER_INCH, abs=0.1)
    assert line["h_mm"] == pytest.approx(100 / 300 * MM_PER_INCH, abs=0.1)
    assert any(n.startswith("warning: 2 printed area(s) are too thin to carry an underbase") for n in sep.notes)


def test_dark_inks_can_be_left_off_the_base(tmp_path):
    img = np.empty((60, 120, 3), np.uint8)
    img[:] = BLACK
    img[10:50, 10:55] = YELLOW
    img[10:50, 65:110] = NAVY
    pal = _palette(BLACK, YELLOW, NAVY, names=("shirt", "Yellow", "Navy"))
    sep = separate(img, pal, dpi=300, underbase=True, settings=SeparationSettings(film_dpi=300, base_min_l=40))
    films, _ = read_films(sep, tmp_path)
    assert films["underbase"][:, :60].any() and not films["underbase"][:, 60:].any()
    assert any("left off the underbase" in n and "Navy" in n for n in sep.notes)


def test_highlight_white_and_the_default_sequence_with_a_flash(tmp_path):
    img = np.empty((60, 120, 3), np.uint8)
    img[:] = BLACK
    img[10:50, 10:40] = WHITE
    img[10:50, 45:75] = YELLOW
    img[10:50, 80:110] = NAVY
    pal = _palette(BLACK, WHITE, YELLOW, NAVY, names=("shirt", "White", "Yellow", "Navy"))
    sep = separate(img, pal, dpi=300, underbase=True,
                   settings=SeparationSettings(film_dpi=300, highlight_white=True, highlight_min_l=90))
    films, written = read_films(sep, tmp_path)
    white_area = np.zeros((60, 120), bool)
    white_area[10:50, 10:40] = True
    np.testing.assert_array_equal(films["highlight white"], white_area)
    doc = json.loads(written["manifest"].read_text())
    assert doc["print_order"] == ["underbase", "White", "Yellow", "Navy", "highlight white"]
    assert [s.get("film", "flash") for s in doc["print_sequence"]] == [
        "underbase", "flash", "White", "Yellow", "Navy", "highlight white"]
    assert doc["flash_steps"] == 1
    assert [p.order for p in sep.films()] == [1, 2, 3, 4, 5]
    assert written["plates"]["highlight white"][0].name == "job-05-highlight-white.tif"


def test_an_explicit_sequence_places_flashes_and_white_plates():
    img = np.empty((40, 80, 3), np.uint8)
    img[:] = BLACK
    img[5:35, 5:35] = YELLOW
    img[5:35, 45:75] = NAVY
    pal = _palette(BLACK, YELLOW, NAVY, names=("shirt", "Yellow", "Navy"))
    st = SeparationSettings(film_dpi=300)
    order = ["underbase", "flash", "Navy", "flash", "Yellow"]
    sep = separate(img, pal, dpi=300, underbase=True, order=order, settings=st)
    assert list(sep.sequence) == order
    assert [p.name for p in sep.films()] == ["underbase", "Navy", "Yellow"]
    assert sep.manifest()["flash_steps"] == 2
    with pytest.raises(SeparationError, match="no highlight white plate is made"):
        separate(img, pal, dpi=300, underbase=True, order=order + ["highlight white"], settings=st)
    with pytest.raises(SeparationError, match="leaves out the underbase"):
        separate(img, pal, dpi=300, underbase=True, order=["Navy", "flash", "Yellow"], settings=st)
