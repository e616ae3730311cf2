"""The substrate is never a plate by accident: inferred from the border and said, or refused.

Artwork is drawn here (invented colours); what is checked is measured from
the files written: the plate TIFFs on disk, the manifest, the summary.
"""

from __future__ import annotations

import io
import json

import numpy as np
import pytest
from click.testing import CliRunner
from PIL import Image, ImageDraw

from quantize.errors import SeparationError
from quantize.palette import Palette
from quantize.separation.choice import choose_palette, resolve_substrate
from quantize.separation.plates import separate
from quantize.separation.substrate import border_colour

from quantize.separation.plates import SeparationSettings

# The films on the artwork's own grid (300 dpi), so that they compare pixel for pixel
# with the drawing; films at print size are tests/test_film.py's.
AT_ART = SeparationSettings(film_dpi=300)

CREAM, NAVY, RED, GOLD = (244, 236, 214), (31, 45, 84), (200, 40, 50), (236, 178, 52)
GARMENT, WHITE = (27, 94, 62), (250, 250, 250)


def _art(ground, *shapes, size=(160, 120), jpeg=False):
    img = Image.new("RGB", size, ground)
    d = ImageDraw.Draw(img)
    for colour, box in shapes:
        d.ellipse(box, fill=colour)
    if jpeg:
        buf = io.BytesIO()
        img.save(buf, format="JPEG", quality=80)
        buf.seek(0)
        img = Image.open(buf).convert("RGB")
    return np.asarray(img).copy()


def _mixed_border():
    """Four bands, each touching the border as much as the others: no colour dominates it."""
    img = np.empty((120, 120, 3), np.uint8)
    img[:60, :60], img[:60, 60:], img[60:, :60], img[60:, 60:] = CREAM, NAVY, RED, GOLD
    return img


def _cli():
    from quantize.cli.main import main

    return lambda *a: CliRunner().invoke(main, [str(x) for x in a])


def _films(folder):
    return sorted(p for p in folder.iterdir() if p.suffix == ".tif")


def _ink_pixels(tif):
    return int((~np.asarray(Image.open(tif))).sum())  # ink is black (False) on the film


@pytest.mark.parametrize("ground,kind", [(CREAM, "paper"), (GARMENT, "garment")])
def test_the_border_colour_is_the_substrate_and_gets_no_plate(tmp_path, ground, kind):
    img = _art(ground, (NAVY, (20, 20, 80, 80)), (RED if kind == "paper" else WHITE, (90, 40, 150, 100)), jpeg=True)
    path = tmp_path / f"{kind}.png"
    Image.fromarray(img).save(path)
    r = _cli()("separate", path, "-o", tmp_path / "films", "-n", "2")
    assert r.exit_code == 0, r.output
    films = _films(tmp_path / "films")
    assert len(films) == 2  # two inks, no film of the ground
    # No film prints the ground: the corners (bare ground in the drawing) are clear on every film.
    for f in films:
        film = ~np.asarray(Image.open(f))
        assert not film[:5, :5].any() and not film[-5:, -5:].any()
    doc = json.loads(next((tmp_path / "films").glob("*-manifest.json")).read_text(encoding="utf-8"))
    # JPEG moves the ground by a code or two: the inferred colour is the ground's mean.
    got = np.array([int(doc["substrate"]["hex"][i:i + 2], 16) for i in (1, 3, 5)])
    assert np.abs(got - np.array(ground)).max() <= 3
    assert "inferred from the image border" in doc["substrate"]["from"]
    assert any("inferred from the image border" in n for n in doc["notes"])
    assert "inferred from the image border" in r.output and doc["substrate"]["hex"] in r.output


def test_a_reduced_poster_on_cream_paper_makes_no_plate_of_the_paper(tmp_path):
    # The README's example, on drawn art: reduce keeps the palette unlocked; separate must still leave
    # the cream unprinted.
    img = _art(CREAM, (NAVY, (20, 20, 80, 80)), (RED, (90, 40, 150, 100)), (GOLD, (60, 70, 110, 115)))
    src = tmp_path / "poster.png"
    Image.fromarray(img).save(src)
    run = _cli()
    r = run("reduce", src, "-o", tmp_path / "poster-reduced.png", "-k", "4", "--keep-palette")
    assert r.exit_code == 0, r.output
    r = run("separate", tmp_path / "poster-reduced.png", "-o", tmp_path / "films",
            "--palette", tmp_path / "poster-reduced.palette.json", "--dpi", "300", "--film-dpi", "300")
    assert r.exit_code == 0, r.output
    films = _films(tmp_path / "films")
    assert len(films) == 3
    cream = (img == CREAM).all(axis=-1)
    # No film prints the bare cream of the drawing (before: a plate of it); the clean-up may merge a
    # cream speck of a pixel or two caught between two shapes.
    printed_cream = sum(int((~np.asarray(Image.open(f)) & cream).sum()) for f in films)
    assert printed_cream <= 0.001 * cream.sum()
    assert sum(_ink_pixels(f) for f in films) < 0.5 * img.shape[0] * img.shape[1]


def test_a_mixed_border_is_refused_with_a_message_that_names_the_option(tmp_path):
    path = tmp_path / "quarters.png"
    Image.fromarray(_mixed_border()).save(path)
    r = _cli()("separate", path, "-o", tmp_path / "films", "-n", "3")
    assert r.exit_code == 1
    line = r.output.strip()
    assert len(line.splitlines()) == 1 and "Traceback" not in line
    assert str(path) in line and "--substrate" in line and "none" in line and "border" in line
    assert not (tmp_path / "films").exists()
    # Given explicitly, it goes through; "none" prints every colour.
    r = _cli()("separate", path, "-o", tmp_path / "films", "-n", "3", "--substrate", "#f4ecd6")
    assert r.exit_code == 0, r.output
    assert len(_films(tmp_path / "films")) == 3
    r = _cli()("separate", path, "-o", tmp_path / "all", "--palette", _palette_file(tmp_path), "--substrate", "none")
    assert r.exit_code == 0, r.output
    assert len(_films(tmp_path / "all")) == 4 and "every colour prints" in r.output


def _palette_file(tmp_path):
    p = tmp_path / "four.json"
    Palette(np.array([CREAM, NAVY, RED, GOLD], np.uint8), None).save(p)
    return p


def test_library_inference_rules():
    art = _art(CREAM, (NAVY, (20, 20, 80, 80)))
    rgb, share, second = border_colour(_as_picture(art))
    assert rgb.tolist() == list(CREAM) and share == 1.0 and second == 0.0
    # A palette lacking the border colour gets it added, locked; one within ΔE00 5 is reused.
    pal, sub, said = resolve_substrate(art, Palette(np.array([NAVY], np.uint8), None), None)
    assert pal.k == 2 and pal.hex[sub] == "#f4ecd6" and pal.locked[sub] and "border" in said
    pal, sub, _ = resolve_substrate(art, Palette(np.array([NAVY, (243, 236, 215)], np.uint8), None), None)
    assert pal.k == 2 and sub == 1
    # Several locked colours: the one on most pixels.
    two = Palette(np.array([NAVY, CREAM], np.uint8), np.array([True, True]))
    pal, sub, said = resolve_substrate(art, two, None)
    assert sub == 1 and "largest locked colour" in said
    with pytest.raises(SeparationError, match="--substrate"):
        separate(_mixed_border(), Palette(np.array([CREAM, NAVY, RED, GOLD], np.uint8), None))


def test_a_transparent_border_means_no_substrate():
    rgba = np.zeros((40, 40, 4), np.uint8)
    rgba[8:32, 8:32] = (*RED, 255)
    rgba[16:24, 16:24] = (*NAVY, 255)
    sep = separate(rgba, Palette(np.array([RED, NAVY], np.uint8), None), dpi=300, settings=AT_ART, min_feature_mm=0)
    assert sep.substrate is None and len(sep.plates) == 2
    assert any("transparent" in n for n in sep.notes)
    # A faint shadow (alpha 2 of 255) around the art is still a transparent border.
    rgba[:8, :, 3] = 2
    sep = separate(rgba, Palette(np.array([RED, NAVY], np.uint8), None), dpi=300, settings=AT_ART, min_feature_mm=0)
    assert sep.substrate is None


def test_fitted_inks_lock_the_border_colour():
    art = _art(GARMENT, (WHITE, (20, 20, 80, 80)), (GOLD, (90, 40, 150, 100)))
    pal, info = choose_palette(art, n=2)
    assert pal.hex[info["substrate"]] == "#{:02x}{:02x}{:02x}".format(*GARMENT) and pal.k == 3
    assert "image border" in info["substrate_from"]


def _as_picture(a):
    from quantize.io.read import as_picture

    return as_picture(a)
