"""Guidance per film, measured on generated films: smallest dot and line, area in cm², a mesh to start from.

Sizes follow from the drawing: 25.4 mm to the inch, a disc's area pi r^2,
a rectangle's area w x h. The mesh rule is a rule of thumb (common
practice, from memory); the tests hold the suggestion to the rule as stated.
"""

from __future__ import annotations

import json

import numpy as np
import pytest

from quantize.palette import Palette
from quantize.separation.guidance import MESH_COUNTS, mesh_for, plate_guidance
from quantize.separation.plates import SeparationSettings, separate

MM_PER_INCH = 25.4


def test_dot_line_and_area_measured_on_a_film():
    dpi = 600
    px = dpi / MM_PER_INCH  # film pixels per mm
    m = np.zeros((600, 600), bool)
    yy, xx = np.mgrid[:600, :600]
    r = 0.6 * px  # a 1.2 mm dot
    m[(yy + 0.5 - 100) ** 2 + (xx + 0.5 - 100) ** 2 < r * r] = True
    m[200:500, 300:309] = True  # a line 9 px = 0.381 mm wide, 300 px long
    m[50:150, 400:550] = True  # a block 100 x 150 px
    g = plate_guidance(m, dpi)
    assert g["pieces"] == 3
    assert g["smallest_dot_mm"] == pytest.approx(1.2, abs=1 / px)
    assert 9 / px - 1 / px - 1e-9 <= g["smallest_line_mm"] <= 9 / px + 1e-9  # on the safe side, within a pixel
    area_cm2 = (np.pi * r * r + 9 * 300 + 100 * 150) / (px * 10) ** 2
    assert g["area_cm2"] == pytest.approx(area_cm2, rel=0.01)
    # From the dot's left edge to the block's right, from the block's top to the line's bottom.
    assert g["box_cm"] == pytest.approx([(550 - (100 - r)) / px / 10, (500 - 50) / px / 10], abs=0.02)


def test_mesh_follows_the_stated_rule_and_is_monotone():
    previous = 0
    for finest in (3.0, 1.0, 0.5, 0.35, 0.3, 0.25, 0.2, 0.15):
        mesh = mesh_for(finest)["threads_per_inch"]
        needed = 2 * MM_PER_INCH / finest  # two threads across the finest detail
        assert mesh in MESH_COUNTS and mesh >= previous
        if needed <= MESH_COUNTS[-1]:
            assert mesh >= needed and all(m < needed for m in MESH_COUNTS if m < mesh)
        else:
            assert mesh == MESH_COUNTS[-1] and mesh_for(finest)["note"]
        previous = mesh
    assert mesh_for(0.15, white=True)["threads_per_inch"] <= 156


def test_separation_lists_guidance_for_every_film_with_the_rule(tmp_path):
    img = np.full((100, 100, 3), 250, np.uint8)
    img[10:90, 10:40] = (20, 20, 22)
    img[10:90, 60:62] = (200, 16, 46)  # 2 px at 300 dpi: a 0.17 mm line, thickened to the 0.35 mm minimum
    pal = Palette(np.array([(250, 250, 250), (20, 20, 22), (200, 16, 46)], np.uint8),
                  np.array([True, False, False]), names=("paper", "Ink", "Red"))
    sep = separate(img, pal, dpi=300, settings=SeparationSettings(film_dpi=600, trap_mm=0))
    doc = json.loads(sep.write(tmp_path, stem="job", pdf=False)["manifest"].read_text())
    films = doc["guidance"]["films"]
    assert set(films) == {"Ink", "Red"} and "two threads" in doc["guidance"]["mesh_rule"]
    px_cm = MM_PER_INCH / 10 / 600
    for p in sep.plates:
        assert films[p.name]["area_cm2"] == pytest.approx(p.mask.sum() * px_cm ** 2, abs=1e-3)
    # The block is 30 x 80 artwork pixels at 300 dpi: 0.254 cm x 0.677 cm.
    assert films["Ink"]["area_cm2"] == pytest.approx((30 / 300 * 2.54) * (80 / 300 * 2.54), rel=0.01)
    red_line = films["Red"]["smallest_line_mm"]
    assert 0.35 - 0.05 <= red_line <= 0.40  # thickened, then measured on the film
    assert films["Red"]["mesh"]["threads_per_inch"] >= films["Ink"]["mesh"]["threads_per_inch"]


def test_a_bump_on_an_edge_is_no_line():
    m = np.zeros((200, 200), bool)
    m[50:150, 50:150] = True
    m[49, 100] = True  # one pixel standing out of the top edge
    g = plate_guidance(m, 600)
    assert g["smallest_line_mm"] is None  # a square has no line, and the bump is none
    m[160:190, 20:180] = True  # a bar 30 px thick
    assert plate_guidance(m, 600)["smallest_line_mm"] == pytest.approx(29 * MM_PER_INCH / 600, abs=1e-3)
