"""Trapping measured on the films written: overlap at joins in film pixels, against the request.

The geometry reference is scipy.ndimage's exact Euclidean distance
transform and plane geometry (a disc of radius r has area pi r^2); mm to
pixels by 25.4 mm per inch.
"""

from __future__ import annotations

import json

import numpy as np
import pytest
from films import read_films
from click.testing import CliRunner
from PIL import Image
from scipy import ndimage as ndi

from quantize.errors import SeparationError
from quantize.palette import Palette
from quantize.separation.plates import SeparationSettings, separate

SHIRT, YELLOW, RED, NAVY = (20, 20, 22), (245, 210, 40), (200, 16, 46), (25, 30, 90)
NAMES = ("shirt", "Yellow", "Red", "Navy")
MM_PER_INCH = 25.4


def _palette():
    return Palette(np.array([SHIRT, YELLOW, RED, NAVY], np.uint8), np.array([True, False, False, False]), names=NAMES)



@pytest.mark.parametrize("trap_mm", [0.1, 0.2, 0.33])
def test_abutting_rectangles_overlap_by_the_trap_width(trap_mm, tmp_path):
    img = np.empty((80, 160, 3), np.uint8)
    img[:] = SHIRT
    img[10:70, 10:80] = YELLOW
    img[10:70, 80:150] = NAVY
    sep = separate(img, _palette(), dpi=150, settings=SeparationSettings(film_dpi=600, trap_mm=trap_mm))
    films, _ = read_films(sep, tmp_path)
    y, n = films["Yellow"], films["Navy"]
    want = trap_mm / MM_PER_INCH * 600
    overlap = (y & n)[100:180]  # rows well inside both rectangles
    widths = overlap.sum(axis=1)
    assert np.all(np.abs(widths - want) <= 0.5)
    # The darker never spreads: navy's film is its knock-out area; yellow never reaches the shirt.
    np.testing.assert_array_equal(n, sep.indices == sep.palette.names.index("Navy"))
    shirt = sep.indices == sep.substrate
    assert not (y & shirt).any() and not (n & shirt).any()
    # The overlap sits on navy's side of the join: its first column is navy's first.
    cols = np.flatnonzero(overlap[40])
    assert cols[0] == np.flatnonzero(n[140])[0]


def test_a_light_disc_in_a_dark_field_grows_and_a_dark_disc_shrinks_the_light_hole(tmp_path):
    h = w = 100
    yy, xx = np.mgrid[:h, :w]
    disc = (yy + 0.5 - 50) ** 2 + (xx + 0.5 - 50) ** 2 < 30 ** 2
    trap_mm = 0.25
    want = trap_mm / MM_PER_INCH * 600
    for inside, outside in ((YELLOW, NAVY), (NAVY, YELLOW)):
        img = np.empty((h, w, 3), np.uint8)
        img[:] = outside
        img[disc] = inside
        sep = separate(img, _palette(), dpi=200, settings=SeparationSettings(film_dpi=600, trap_mm=trap_mm))
        films, _ = read_films(sep, tmp_path / str(inside))
        yellow_ko = sep.indices == sep.palette.names.index("Yellow")
        y = films["Yellow"]
        if inside == YELLOW:
            r0, r1 = np.sqrt(yellow_ko.sum() / np.pi), np.sqrt(y.sum() / np.pi)
            assert abs((r1 - r0) - want) <= 0.5
        else:  # the hole in the yellow is the navy disc; the yellow closes in on it
            r0, r1 = np.sqrt((~yellow_ko).sum() / np.pi), np.sqrt((~y).sum() / np.pi)
            assert abs((r0 - r1) - want) <= 0.5
        # Every added pixel lies within the width of yellow's edge (scipy's EDT, less the half pixel to
        # the edge), and every navy pixel well within it is added.
        dist = ndi.distance_transform_edt(~yellow_ko) - 0.5
        added = y & ~yellow_ko
        assert dist[added].max() <= want + 1e-9
        assert added[(dist <= want - 1.0) & ~yellow_ko].all()


def test_pair_overrides_and_no_spread_without_a_darker_neighbour(tmp_path):
    img = np.empty((60, 240, 3), np.uint8)
    img[:] = SHIRT
    img[5:55, 5:60] = YELLOW
    img[5:55, 60:120] = RED
    img[5:55, 120:180] = NAVY
    img[5:55, 180:235] = YELLOW  # yellow next to navy again, and next to the shirt
    st = SeparationSettings(film_dpi=300, trap_mm=0.2, trap_pairs=(("Red", "Navy", 0.5),))
    sep = separate(img, _palette(), dpi=300, settings=st)
    films, written = read_films(sep, tmp_path)
    y, r, n = films["Yellow"], films["Red"], films["Navy"]
    px = 300 / MM_PER_INCH
    assert abs((y & r)[30].sum() - 0.2 * px) <= 0.5  # yellow under red, the default
    assert abs((r & n)[30].sum() - 0.5 * px) <= 0.5  # red under navy, the pair's own width
    assert abs((y & n)[30].sum() - 0.2 * px) <= 0.5  # the second yellow under navy
    assert not (r & y)[30, :60].any()  # red is darker than yellow: it does not spread into it
    doc = json.loads(written["manifest"].read_text())
    widths = {(t["lighter"], t["darker"]): t["width_mm"] for t in doc["traps"]}
    assert widths == {("Yellow", "Red"): 0.2, ("Red", "Navy"): 0.5, ("Yellow", "Navy"): 0.2}
    with pytest.raises(SeparationError, match="'Teal' is not a printed ink"):
        separate(img, _palette(), dpi=300, settings=SeparationSettings(trap_pairs=(("Teal", "Navy", 0.2),)))


def test_a_keyline_overprints_and_the_inks_beside_it_continue_under_it(tmp_path):
    img = np.empty((60, 130, 3), np.uint8)
    img[:] = SHIRT
    img[5:55, 5:60] = YELLOW
    img[5:55, 60:70] = NAVY  # the keyline
    img[5:55, 70:125] = RED
    img[55:59, 5:125] = NAVY  # the keyline continues along the shirt: nothing goes under its outer half
    st = SeparationSettings(film_dpi=300, trap_mm=0, overprint=("Navy",))
    sep = separate(img, _palette(), dpi=300, settings=st)
    films, _ = read_films(sep, tmp_path)
    y, r, n = films["Yellow"], films["Red"], films["Navy"]
    key = sep.indices == sep.palette.names.index("Navy")
    np.testing.assert_array_equal(n, key)  # the keyline film is itself
    assert (y | r)[10:50, 60:70].all()  # under the bar (away from its ends on the shirt): the inks beside it
    assert y[30, 60:65].all() and r[30, 65:70].all() and not (y & r).any()
    assert not (y | r)[57:59].any()  # the half of the keyline nearer the shirt has nothing under it


def test_a_lighter_ink_printed_after_the_darker_is_a_note():
    img = np.empty((40, 80, 3), np.uint8)
    img[:] = SHIRT
    img[5:35, 5:40] = YELLOW
    img[5:35, 40:75] = NAVY
    sep = separate(img, _palette(), dpi=300, order=["Navy", "Yellow"], settings=SeparationSettings(film_dpi=300))
    assert any("Yellow spreads under Navy but prints after it" in n for n in sep.notes)


def test_cli_trap_options(tmp_path):
    from quantize.cli.separate import separate as command

    img = np.empty((40, 80, 3), np.uint8)
    img[:] = SHIRT
    img[5:35, 5:40] = YELLOW
    img[5:35, 40:75] = NAVY
    Image.fromarray(img).save(tmp_path / "a.png", dpi=(300, 300))
    _palette().save(tmp_path / "p.json")
    res = CliRunner().invoke(command, [str(tmp_path / "a.png"), "-o", str(tmp_path / "o"), "--palette",
                                       str(tmp_path / "p.json"), "--film-dpi", "300", "--trap", "0",
                                       "--trap-pair", "Yellow/Navy=0.4", "--json"])
    assert res.exit_code == 0, res.output
    doc = json.loads(res.output)
    assert doc["traps"][0]["width_mm"] == 0.4 and doc["settings"]["trap_pairs"] == [["Yellow", "Navy", 0.4]]
    bad = CliRunner().invoke(command, [str(tmp_path / "a.png"), "-o", str(tmp_path / "o2"), "--palette",
                                       str(tmp_path / "p.json"), "--trap-pair", "Yellow-Navy"])
    assert bad.exit_code != 0 and "write INK/INK=MM" in bad.output


def test_inks_touching_at_a_corner_get_no_specks():
    img = np.empty((60, 60, 3), np.uint8)
    img[:] = SHIRT
    img[10:30, 10:30] = YELLOW
    img[30:50, 30:50] = NAVY  # meets the yellow at one corner only
    sep = separate(img, _palette(), dpi=300, settings=SeparationSettings(film_dpi=300, trap_mm=0.3))
    y = sep.plates[[p.name for p in sep.plates].index("Yellow")].mask
    from skimage.measure import label

    assert label(y, connectivity=1).max() == 1  # one piece (side by side): no speck across the corner
    assert not (y & (sep.indices == sep.substrate)).any()
