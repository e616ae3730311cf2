"""Tests of quantize.report.errormap: the per-pixel ΔE00 picture with its legend."""

from __future__ import annotations

import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest
from numpy.testing import assert_array_equal
from PIL import Image

from quantize.colour.spaces import delta_e_ciede2000, srgb_to_lab
from quantize.core.picture import Picture
from quantize.errors import OutputError
from quantize.palette import Palette
from quantize.report import errormap as em


@pytest.fixture(autouse=True)
def _private_cache(tmp_path_factory, monkeypatch):
    monkeypatch.setenv("QUANTIZE_CACHE_DIR", str(tmp_path_factory.getbasetemp() / "qcache"))


def _case():
    """Left half exactly a palette colour, right half off by a known ΔE00."""
    img = np.zeros((30, 40, 3), np.uint8)
    img[:, :20] = [200, 40, 60]
    img[:, 20:] = [180, 70, 60]
    pal = Palette(rgb8=np.array([[200, 40, 60], [20, 20, 20]], np.uint8), locked=None)
    de_right = float(delta_e_ciede2000(srgb_to_lab(np.array([180, 70, 60]) / 255),
                                       srgb_to_lab(np.array([200, 40, 60]) / 255)))
    return img, pal, de_right


def _cmap(value):
    from matplotlib import colormaps

    return np.round(np.asarray(colormaps[em.COLOUR_MAP](value))[:3] * 255)


def test_map_pixels_follow_the_colour_scale():
    img, pal, de_right = _case()
    res = pal.apply(img)
    assert res.indices.max() == 0 and 3 < de_right < 10  # the setup is what the test needs
    out = em.error_map_image(img, res, vmax=10.0)
    assert out.shape == (30 + 96, 560, 3) and out.dtype == np.uint8
    # matplotlib's colour map at ΔE/vmax (quantised to 256 steps).
    assert np.abs(out[:30, :20].astype(int) - _cmap(0.0)).max() <= 1
    assert np.abs(out[:30, 20:40].astype(int) - _cmap(round(de_right / 10 * 255) / 255)).max() <= 1
    assert (out[:30, 40:] == 255).all()  # beyond the image: plain background


def test_values_above_the_scale_take_the_top_colour():
    img, pal, de_right = _case()
    out = em.error_map_image(img, pal.apply(img), vmax=de_right / 2)
    assert np.abs(out[:30, 20:40].astype(int) - _cmap(1.0)).max() <= 1


def test_legend_is_drawn_below_the_map():
    img, pal, _ = _case()
    out = em.error_map_image(img, pal.apply(img))
    legend = out[30:].reshape(-1, 3).astype(int)
    for end in (0.0, 1.0):  # both ends of the colour scale appear in the bar
        assert (np.abs(legend - _cmap(end)).max(axis=1) <= 12).any(), end
    assert (legend.max(axis=1) < 60).sum() > 200  # dark text: title, ticks, statistics
    plain, other = out[30:], em.error_map_image(img, pal.apply(img), kind="filtered", ppd=30)[30:]
    assert (plain != other).any()  # the legend names the kind (different text)


def test_wide_image_keeps_its_own_width():
    img = np.zeros((5, 700, 3), np.uint8)
    out = em.error_map_image(img, img)
    assert out.shape == (5 + 96, 700, 3)


def test_transparent_pixels_are_grey():
    img, pal, _ = _case()
    alpha = np.full(img.shape[:2], 255, np.uint8)
    alpha[:5] = 0
    pic = Picture(rgb=img, alpha=alpha)
    out = em.error_map_image(pic, pal.apply(pic))
    assert (out[:5, :40] == 128).all()


def test_save_writes_png_atomically_and_refuses_to_overwrite(tmp_path):
    img, pal, _ = _case()
    res = pal.apply(img, dither="floyd-steinberg")
    path = tmp_path / "errors.png"
    em.save_error_map(path, img, res, kind="filtered", dpi=150, distance_mm=500)
    with Image.open(path) as im:
        assert im.format == "PNG" and im.size == (560, 126)
        saved = np.asarray(im.convert("RGB"))
    assert_array_equal(saved, em.error_map_image(img, res, kind="filtered", dpi=150, distance_mm=500))
    with pytest.raises(OutputError):
        em.save_error_map(path, img, res)
    em.save_error_map(path, img, res, force=True)
    assert [p.name for p in tmp_path.iterdir()] == ["errors.png"]  # no temporary left behind


@pytest.mark.parametrize("kwargs,match", [
    ({"kind": "worst"}, "valid names: plain, filtered"),
    ({"kind": "filtered"}, "viewing condition"),
    ({"kind": "filtered", "dpi": 300, "distance_mm": -1}, "got -1"),
    ({"vmax": 0}, "got 0"),
])
def test_bad_options(kwargs, match):
    img, pal, _ = _case()
    with pytest.raises(ValueError, match=match):
        em.error_map_image(img, pal.apply(img), **kwargs)


def test_matplotlib_is_imported_only_when_drawing():
    root = Path(__file__).resolve().parents[1]
    code = ("import sys; import quantize.report.errormap, quantize.quality.perception, quantize.render.dither, quantize.cli.dither_options; "
            "print(sorted(m for m in ('matplotlib', 'numba', 'colour') if m in sys.modules))")
    out = subprocess.run([sys.executable, "-c", code], cwd=root, capture_output=True, text=True, check=True)
    assert out.stdout.strip() == "[]"
