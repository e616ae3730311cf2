"""A JPEG output's review page and error map show the JPEG as written, not the palette image (issue 17).

The JPEG is decoded with Pillow (an outside decoder); per-pixel CIEDE2000
comes from colour-science (``colour.delta_E``, method "CIE 2000", Sharma et
al. 2005) and sRGB to CIELAB from colour-science too (IEC 61966-2-1, D65).
The error map's colours are turned back into ΔE00 with matplotlib's own
"inferno" table, the scale the map is documented to use (0 to 10).  The
test photo is scikit-image's coffee picture, held out (no generator here was
tuned on it).
"""

from __future__ import annotations

import base64
import io
import json
import re

import numpy as np
import pytest
from click.testing import CliRunner
from PIL import Image

from quantize.cli.main import main

colour = pytest.importorskip("colour")
skimage_data = pytest.importorskip("skimage.data")
pytest.importorskip("matplotlib")

K = 6


def _lab(rgb8):
    """CIELAB (D65) of 8-bit sRGB by colour-science."""
    xyz = colour.sRGB_to_XYZ(np.asarray(rgb8, dtype=float) / 255.0)
    return colour.XYZ_to_Lab(xyz, colour.CCS_ILLUMINANTS["CIE 1931 2 Degree Standard Observer"]["D65"])


def _de00(a_rgb8, b_rgb8):
    return colour.delta_E(_lab(a_rgb8), _lab(b_rgb8), method="CIE 2000")


@pytest.fixture(scope="module")
def jpeg_case(tmp_path_factory):
    tmp = tmp_path_factory.mktemp("jpeg-review")
    rgb = np.ascontiguousarray(skimage_data.coffee()[::3, ::3])  # 200 x 134 px
    src = tmp / "coffee.png"
    Image.fromarray(rgb).save(src)
    out, rep, emap = tmp / "coffee.jpg", tmp / "rep", tmp / "emap.png"
    r = CliRunner().invoke(main, ["reduce", str(src), "-o", str(out), "-k", str(K), "--restarts", "2", "--json",
                                  "--report", str(rep), "--error-map", str(emap)])
    assert r.exit_code == 0, r.output
    doc = json.loads(r.stdout)
    palette = np.array([[int(row["hex"][i:i + 2], 16) for i in (1, 3, 5)] for row in doc["palette"]])
    decoded = np.asarray(Image.open(out).convert("RGB"))
    return rgb, palette, decoded, (rep / "index.html").read_text(encoding="utf-8"), emap


def _img_src(page, cls):
    return re.search(rf'<img class="{cls}"[^>]*?src="(data:[^"]+)"', page).group(1)


def _decode_uri(uri):
    return np.asarray(Image.open(io.BytesIO(base64.b64decode(uri.partition(",")[2]))).convert("RGB"))


def test_the_page_shows_the_jpeg_as_written(jpeg_case):
    rgb, palette, decoded, page, _ = jpeg_case
    shown = _decode_uri(_img_src(page, "after")).astype(int)
    assert shown.shape == decoded.shape
    # The JPEG's pixels: equal to Pillow's decoding of the file, with far more colours than the palette.
    assert np.abs(shown - decoded).mean() < 0.5
    assert len(np.unique(shown.reshape(-1, 3), axis=0)) > 50 * K
    # The palette image it was made from differs from them by more than JPEG noise would hide.
    nearest = np.argmin(np.stack([_de00(rgb, c) for c in palette]), axis=0)
    assert np.abs(shown - palette[nearest]).mean() > 1.0
    assert "of the JPEG as written" in page


def test_the_swatch_highlight_reads_each_jpeg_pixels_nearest_palette_colour(jpeg_case):
    _, palette, decoded, page, _ = jpeg_case
    mark = _decode_uri(_img_src(page, "mark-src"))
    # Reference: the palette colour nearest each decoded pixel, by colour-science's CIEDE2000.
    nearest = palette[np.argmin(np.stack([_de00(decoded, c) for c in palette]), axis=0)]
    assert (mark == nearest).all(axis=-1).mean() > 0.99


def _map_delta_e(emap_path, shape):
    """The error map's ΔE00 per pixel, read back through matplotlib's inferno table (scale 0-10)."""
    from matplotlib import colormaps

    lut = (np.asarray(colormaps["inferno"](np.linspace(0.0, 1.0, 256)))[:, :3] * 255 + 0.5).astype(int)
    px = np.asarray(Image.open(emap_path).convert("RGB")).astype(int)[:shape[0], :shape[1]]
    level = np.argmin(((px[..., None, :] - lut) ** 2).sum(-1), axis=-1)
    return level / 255.0 * 10.0


def test_the_error_map_is_that_of_the_decoded_jpeg(jpeg_case):
    rgb, palette, decoded, _, emap = jpeg_case
    shown = _map_delta_e(emap, rgb.shape)
    of_jpeg = np.minimum(_de00(rgb, decoded), 10.0)
    nearest = palette[np.argmin(np.stack([_de00(rgb, c) for c in palette]), axis=0)]
    of_palette_image = np.minimum(_de00(rgb, nearest), 10.0)
    # The map's scale steps are 10/255 ΔE00: within that of the JPEG's ΔE00, well away from the palette image's.
    assert np.abs(shown - of_jpeg).mean() < 0.04
    assert np.abs(shown - of_palette_image).mean() > 0.15


def test_a_swatch_click_on_the_jpeg_page_marks_its_nearest_pixels_in_a_browser(jpeg_case, tmp_path):
    """Headless Chromium (tests/browser.py): no console error; the share marked is that colour's share."""
    from browser import CHROMIUM, NO_CHROMIUM, console_lines, dump_until

    if CHROMIUM is None:
        pytest.skip(NO_CHROMIUM)
    _, palette, decoded, page, _ = jpeg_case
    nearest = np.argmin(np.stack([_de00(decoded, c) for c in palette]), axis=0)
    j = int(np.argsort(np.bincount(nearest.ravel(), minlength=len(palette)))[len(palette) // 2])
    share = float((nearest == j).mean())
    rgb = ",".join(str(int(v)) for v in palette[j])
    drive = ("<script>window.addEventListener('load', function () {"
             "var root = document.querySelector('.review'), out = {};"
             f"var b = root.querySelector('button.swatch[data-rgb=\"{rgb}\"]');"
             "setTimeout(function () { b.click(); out.marked = Number(root.dataset.marked);"
             "var pre = document.createElement('pre'); pre.id = 'drive'; pre.textContent = JSON.stringify(out);"
             "document.body.appendChild(pre); }, 100); });</script>")
    copy = tmp_path / "drive.html"
    copy.write_text(page.replace("</body>", drive + "</body>"), encoding="utf-8")
    text, run = dump_until(["--window-size=1280,1600"], copy.as_uri(), tmp_path, "drive")
    assert text, run.stderr[-500:]
    assert console_lines(run.stderr) == []
    assert json.loads(text)["marked"] == pytest.approx(share, abs=0.01)


@pytest.mark.parametrize("method, says, never", [
    ("bayer4", "ordered, 4 x 4 Bayer matrix, two palette colours mixed in linear light", "error in linear light"),
    ("stucki", "error diffusion, serpentine scan (error in linear light)", "mixed"),
])
def test_the_pages_dither_setting_says_what_the_method_does(tmp_path, method, says, never):
    """Issue 17: an ordered dither diffuses no error; the page's settings must not say it does."""
    rgb = np.ascontiguousarray(skimage_data.chelsea()[::6, ::6])
    src = tmp_path / "cat.png"
    Image.fromarray(rgb).save(src)
    r = CliRunner().invoke(main, ["reduce", str(src), "-o", str(tmp_path / "o.png"), "-k", "4", "--restarts", "1",
                                  "--dither", method, "--report", str(tmp_path / "rep")])
    assert r.exit_code == 0, r.output
    page = (tmp_path / "rep" / "index.html").read_text(encoding="utf-8")
    row = re.search(r'<td class="l">dither</td><td class="l">([^<]*)</td>', page).group(1)
    assert says in row and never not in row


def test_a_scaled_page_shows_the_jpegs_pixels_scaled(tmp_path):
    """Larger than the page's max_side: the JPEG's decoded pixels, scaled by nearest neighbour."""
    from quantize.fit.engine import fit_palette
    from quantize.io.read import as_picture
    from quantize.report.page import write_report

    pic = as_picture(np.ascontiguousarray(skimage_data.coffee()[::4, ::4]))  # 150 x 100 px
    pal = fit_palette(pic, K, restarts=1)
    res = pal.apply(pic)
    with pytest.warns(Warning):
        saved = res.write(tmp_path / "c.jpg", picture=pic)
    page = write_report(tmp_path / "rep", original_picture=pic, mapped=res, written=saved, max_side=60)
    shown = _decode_uri(_img_src(page.read_text(encoding="utf-8"), "after")).astype(int)
    decoded = np.asarray(Image.open(tmp_path / "c.jpg").convert("RGB")).astype(int)
    h, w = decoded.shape[:2]
    rows = (np.arange(shown.shape[0]) * h // shown.shape[0])[:, None]
    cols = (np.arange(shown.shape[1]) * w // shown.shape[1])[None, :]
    assert max(shown.shape[:2]) == 60
    # Exactly the JPEG's decoded pixels, subsampled; far from the palette image the JPEG was made from.
    assert np.abs(shown - decoded[rows, cols]).mean() == 0
    assert np.abs(shown - pal.rgb8[res.indices][rows, cols].astype(int)).mean() > 2.0
