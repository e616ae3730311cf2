"""Films at print size: the film grid, smooth resampled edges, mirrored and negative films, the PDF.

Every check measures the files: pixel counts and stored resolutions of the
TIFFs, page sizes of the PDF. Sizes follow from 25.4 mm to the inch (the
international inch, 1959) and PDF's 72 points to the inch (ISO 32000-1,
8.3.2.3, default user space unit).
"""

from __future__ import annotations

import json
import re

import numpy as np
import pytest
from click.testing import CliRunner
from PIL import Image

from quantize.errors import SeparationError
from quantize.palette import Palette
from quantize.separation.film import film_grid, resample_indices
from quantize.separation.plates import SeparationSettings, separate

WHITE, RED, BLUE, GOLD = (255, 255, 255), (200, 16, 46), (31, 58, 147), (242, 183, 5)
MM_PER_INCH = 25.4  # exact by definition
PT_PER_INCH = 72.0  # ISO 32000-1, the PDF default user space unit


def _palette(*colours, names=()):
    lk = np.zeros(len(colours), bool)
    lk[0] = True
    return Palette(np.array(colours, np.uint8), lk, names=names)


def _three_inks(h=100, w=150):
    img = np.empty((h, w, 3), np.uint8)
    img[:] = WHITE
    yy, xx = np.mgrid[:h, :w]
    img[(yy - 50) ** 2 + (xx - 50) ** 2 < 30 ** 2] = RED  # a disc
    img[(yy > 0.35 * xx + 20) & (xx > 80)] = BLUE  # a wedge with a shallow diagonal edge
    img[60:90, 40:70][img[60:90, 40:70].sum(axis=2) == 3 * 255] = GOLD
    return img


def _media_boxes_mm(pdf: bytes) -> list[tuple[float, float]]:
    boxes = re.findall(rb"/MediaBox\s*\[\s*([-\d.]+)\s+([-\d.]+)\s+([-\d.]+)\s+([-\d.]+)\s*\]", pdf)
    return [((float(x1) - float(x0)) / PT_PER_INCH * MM_PER_INCH, (float(y1) - float(y0)) / PT_PER_INCH * MM_PER_INCH)
            for x0, y0, x1, y1 in boxes]


# --------------------------------------------------------------------------- size


def test_film_grid_keeps_the_files_physical_size_unless_a_print_size_is_given():
    g = film_grid((100, 150), 150, film_dpi=600)
    assert (g.width_px, g.height_px) == (600, 400)  # 150 px at 150 dpi = 1 in = 600 film px
    assert g.width_mm == pytest.approx(150 / 150 * MM_PER_INCH)
    g = film_grid((100, 150), 150, film_dpi=600, print_width_mm=100)
    assert g.width_px == round(100 / MM_PER_INCH * 600) and g.height_px == round(100 * 100 / 150 / MM_PER_INCH * 600)
    g = film_grid((100, 150), 72, film_dpi=300, print_height_mm=50)
    assert g.height_px == round(50 / MM_PER_INCH * 300) and g.width_px == round(75 / MM_PER_INCH * 300)
    with pytest.raises(SeparationError, match="not both"):
        film_grid((100, 150), 150, film_dpi=600, print_width_mm=10, print_height_mm=10)


def test_films_tiffs_and_pdf_pages_have_the_printed_size(tmp_path):
    img = _three_inks()
    sep = separate(img, _palette(WHITE, RED, BLUE, GOLD), dpi=150,
                   settings=SeparationSettings(print_width_mm=60.0, film_dpi=600))
    written = sep.write(tmp_path, stem="job", margin_mm=10)
    w_px, h_px = round(60 / MM_PER_INCH * 600), round(40 / MM_PER_INCH * 600)
    margin = round(10 / MM_PER_INCH * 600)
    for p in sep.films():
        with Image.open(written["plates"][p.name][0]) as im:
            assert im.size == (w_px, h_px) and im.mode == "1"
            assert im.info["dpi"] == pytest.approx((600, 600))
    pdf = written["pdf"].read_bytes()
    boxes = _media_boxes_mm(pdf)
    assert len(boxes) == len(sep.films()) == 3
    one_px_mm = MM_PER_INCH / 600
    for bw, bh in boxes:  # page = film + a 10 mm margin on every side, to the nearest film pixel
        assert bw == pytest.approx(60 + 20, abs=one_px_mm) and bh == pytest.approx(40 + 20, abs=one_px_mm)
        assert bw == pytest.approx((w_px + 2 * margin) / 600 * MM_PER_INCH, abs=1e-3)
    doc = json.loads(written["manifest"].read_text())
    assert doc["films_pdf"] == written["pdf"].name and doc["film"]["size_px"] == [w_px, h_px]


def test_artwork_dpi_override_is_reported_and_print_size_wins(tmp_path):
    img = _three_inks()
    path = tmp_path / "art.png"
    Image.fromarray(img).save(path, dpi=(150, 150))
    pal = _palette(WHITE, RED, BLUE, GOLD)
    own = separate(path, pal, settings=SeparationSettings(film_dpi=300, trap_mm=0))
    assert own.shape == (200, 300) and not any("records" in n for n in own.notes)  # 1 in x 2/3 in at 300 dpi
    half = separate(path, pal, dpi=300, settings=SeparationSettings(film_dpi=300, trap_mm=0))
    assert half.shape == (100, 150)
    assert any("given as 300 dpi; the file records 150 dpi" in n and "25.4 x 16.9 mm" in n for n in half.notes)
    sized = separate(path, pal, dpi=300, settings=SeparationSettings(film_dpi=300, print_width_mm=25.4))
    assert sized.shape == (200, 300)  # a print width makes the artwork's resolution irrelevant


# --------------------------------------------------------------------------- edges


def test_resampled_plates_stay_disjoint_and_cover_the_printed_area():
    img = _three_inks()
    sep = separate(img, _palette(WHITE, RED, BLUE, GOLD), dpi=150,
                   settings=SeparationSettings(film_dpi=600, trap_mm=0, min_feature_mm=0))
    masks = np.stack([p.mask for p in sep.plates]).astype(int)
    assert (masks.sum(axis=0) <= 1).all()
    assert ((masks.sum(axis=0) == 1) == (sep.indices != sep.substrate)).all()
    # Each ink's area scales with the square of the resolution ratio (4 x 4), within its edge.
    art = np.zeros((100, 150), int)
    for i, c in enumerate((RED, BLUE, GOLD), start=1):
        art[(img == c).all(axis=2)] = i
    for p in sep.plates:
        n_art = (art == p.index).sum()
        assert p.mask.sum() == pytest.approx(16 * n_art, rel=0.05)


def _edge_rows(mask: np.ndarray) -> np.ndarray:
    """Row of the first inked pixel in every column (the top edge of the ink)."""
    return mask.argmax(axis=0)


def test_a_diagonal_edge_steps_by_about_one_film_pixel_not_four():
    # A hard-edged (not anti-aliased) straight edge of slope 0.3 drawn at 150 dpi:
    # its staircase steps by one artwork pixel = 4 film pixels at 600 dpi.
    h, w = 60, 120
    yy, xx = np.mgrid[:h, :w]
    idx = (yy + 0.5 > 0.3 * (xx + 0.5) + 10).astype(np.uint8)
    op = np.ones((h, w), bool)
    film, _ = resample_indices(idx, op, (4 * h, 4 * w))
    rows = _edge_rows(film == 1)[20:-20].astype(int)
    steps = np.abs(np.diff(rows))
    nearest = np.repeat(np.repeat(idx, 4, axis=0), 4, axis=1)  # what nearest-neighbour would give
    near_steps = np.abs(np.diff(_edge_rows(nearest == 1)[20:-20].astype(int)))
    assert near_steps.max() == 4
    assert steps.max() <= 2 and np.mean(steps <= 1) > 0.9
    # The edge stays on the line the artwork draws: within an artwork pixel of it (the art's own staircase).
    x = np.arange(20, 4 * w - 20) + 0.5
    ideal = (0.3 * (x / 4) + 10) * 4
    assert np.abs(rows + 0.5 - ideal).max() <= 4


# --------------------------------------------------------------------------- files


def test_mirrored_and_negative_films(tmp_path):
    img = np.full((40, 60, 3), 255, np.uint8)
    img[5:20, 5:25] = RED  # top left
    pal = _palette(WHITE, RED)
    st = SeparationSettings(film_dpi=300)
    plain = separate(img, pal, dpi=300, settings=st)
    m = plain.plates[0].mask
    for mirror, negative in ((True, False), (False, True), (True, True)):
        sep = separate(img, pal, dpi=300, settings=SeparationSettings(film_dpi=300, mirror=mirror,
                                                                       negative=negative))
        out = tmp_path / f"{mirror}{negative}"
        written = sep.write(out, stem="job", marks=True, margin_mm=5)
        margin = round(5 / MM_PER_INCH * 300)
        with Image.open(written["plates"][sep.plates[0].name][0]) as im:
            black = ~np.asarray(im)
        art = black[margin:-margin, margin:-margin]
        expected = m[:, ::-1] if mirror else m
        np.testing.assert_array_equal(art, ~expected if negative else expected)
        assert art[10, 10] != mirror if not negative else art[10, 10] == mirror


def test_pdf_has_one_page_per_film_with_marks_and_label(tmp_path):
    img = _three_inks()
    sep = separate(img, _palette(WHITE, RED, BLUE, GOLD), dpi=150, underbase=True,
                   settings=SeparationSettings(film_dpi=300, trap_mm=0))
    written = sep.write(tmp_path, stem="job", marks=True, job="Spring tee", date="2026-12-04")
    pdf = written["pdf"].read_bytes()
    assert pdf.startswith(b"%PDF") and len(_media_boxes_mm(pdf)) == 4  # underbase + three inks
    margin = round(10 / MM_PER_INCH * 300)
    h, w = sep.shape
    for p in sep.films():
        with Image.open(written["plates"][p.name][0]) as im:
            ink = ~np.asarray(im)
        np.testing.assert_array_equal(ink[margin:margin + h, margin:margin + w], p.mask)
        assert ink[:margin, margin + w // 2 - 2:margin + w // 2 + 3].any()  # top centre mark
        assert ink[margin + h // 2 - 2:margin + h // 2 + 3, :margin].any()  # left centre mark
        assert ink[h + margin:, margin:margin + w // 2].any()  # the label
    # Each page carries a film image of the TIFF's pixel size (film and margins, marks included).
    sizes = [(int(a), int(b)) for a, b in re.findall(rb"/Width\s+(\d+)\s*/Height\s+(\d+)", pdf)]
    tiff_sizes = []
    for p in sep.films():
        with Image.open(written["plates"][p.name][0]) as im:
            tiff_sizes.append(im.size)
    assert sorted(sizes) == sorted(tiff_sizes)


def test_cli_print_width_in_inches_and_film_options(tmp_path):
    from quantize.cli.separate import separate as command

    path = tmp_path / "art.png"
    Image.fromarray(_three_inks()).save(path, dpi=(150, 150))
    pal = _palette(WHITE, RED, BLUE, GOLD)
    pal.save(tmp_path / "pal.json")
    res = CliRunner().invoke(command, [str(path), "-o", str(tmp_path / "out"), "--palette", str(tmp_path / "pal.json"),
                                       "--print-width", "4in", "--film-dpi", "300", "--mirror", "--job", "J1"])
    assert res.exit_code == 0, res.output
    assert "printed 101.6 x 67.7 mm (size from the print width" in res.output
    tifs = sorted((tmp_path / "out").glob("*.tif"))
    # The films, the PDF, the composite and the manifest.
    assert len(tifs) == 3 and f"wrote {len(tifs) + 3} file(s)" in res.output and "art-films.pdf" in res.output
    with Image.open(tifs[0]) as im:
        assert im.size == (1200, 800) and im.info["dpi"] == pytest.approx((300, 300))
    bad = CliRunner().invoke(command, [str(path), "-o", str(tmp_path / "o2"), "--palette", str(tmp_path / "pal.json"),
                                       "--print-width", "wide"])
    assert bad.exit_code != 0 and "is not a length" in bad.output


def test_a_diagonal_edge_on_the_written_film_has_no_staircase(tmp_path):
    # The same measure on a film written by separate: a 150 dpi hard edge of slope 0.3, films at 600 dpi.
    h, w = 60, 120
    yy, xx = np.mgrid[:h, :w]
    img = np.empty((h, w, 3), np.uint8)
    img[:] = WHITE
    img[yy + 0.5 > 0.3 * (xx + 0.5) + 10] = BLUE
    sep = separate(img, _palette(WHITE, BLUE), dpi=150, settings=SeparationSettings(film_dpi=600))
    written = sep.write(tmp_path, stem="diag", pdf=False)
    with Image.open(written["plates"][sep.plates[0].name][0]) as im:
        ink = ~np.asarray(im)
    assert ink.shape == (4 * h, 4 * w) and im.info["dpi"] == pytest.approx((600, 600))
    steps = np.abs(np.diff(ink.argmax(axis=0)[20:-20].astype(int)))
    assert steps.max() <= 2 and np.mean(steps <= 1) > 0.9
