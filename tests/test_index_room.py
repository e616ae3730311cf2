"""A palette-size range reaching 256 leaves a transparent picture's index entry free (issue 17).

An indexed PNG, a GIF and a lossless WebP hold at most 256 colours in their
colour index (ISO/IEC 15948:2004 section 11.2.3 for PNG's PLTE; the GIF89a
specification's colour table of at most 2**8 entries; the WebP lossless
bitstream's colour-indexing transform, at most 256 colours).  A picture with
transparent pixels needs one entry for them.  The files are read back with
Pillow (an outside decoder): their entries counted, their clear pixels
compared with the input's alpha.

The test picture is scikit-image's astronaut photograph (held out: no
generator here was tuned on it), cropped, with an elliptical alpha mask
generated here: its outside fully clear, a soft rim partly transparent.
"""

from __future__ import annotations

import json

import numpy as np
import pytest
from click.testing import CliRunner
from PIL import Image

from quantize.cli.main import main
from quantize.fit.index_room import sizes_with_room
from quantize.fit.settings import FitSettings
from quantize.io.write import needs_clear_entry

skimage_data = pytest.importorskip("skimage.data")


def _astronaut_with_alpha(side=96):
    rgb = skimage_data.astronaut()[40:40 + 4 * side:4, 120:120 + 4 * side:4]  # every 4th pixel: a small photo
    h, w = rgb.shape[:2]
    yy, xx = np.mgrid[:h, :w]
    r = np.hypot((yy - h / 2) / (h * 0.45), (xx - w / 2) / (w * 0.42))
    alpha = np.clip((1.05 - r) * 255 / 0.1, 0, 255).astype(np.uint8)
    return np.ascontiguousarray(rgb), alpha


@pytest.fixture()
def astro(tmp_path):
    rgb, alpha = _astronaut_with_alpha()
    src = tmp_path / "in" / "astro.png"
    src.parent.mkdir()
    Image.fromarray(np.dstack([rgb, alpha])).save(src)
    assert len(np.unique(rgb[alpha >= 128].reshape(-1, 3), axis=0)) > 256  # enough colours to fill 256 entries
    return src, alpha


def _read_back(path, alpha_in):
    """Entries of the file's colour index and whether its clear pixels are exactly the input's below 128."""
    with Image.open(path) as im:
        im.load()
        if im.format == "WEBP":
            entries = len(np.unique(np.asarray(im.convert("RGBA")).reshape(-1, 4), axis=0))
        else:
            assert im.mode == "P"
            entries = len(im.getpalette()) // 3
        a_out = np.asarray(im.convert("RGBA"))[..., 3]
    return entries, bool(((alpha_in < 128) == (a_out == 0)).all())


# Target 0.01 is met by no palette, so the automatic rule takes the top of the range: 256 before the fix.
_TONE = ["--rule", "auto", "--kind", "photo", "--target", "0.01", "--restarts", "1"]


@pytest.mark.parametrize("ext", [".png", ".gif", ".webp"])
def test_reduce_caps_a_range_reaching_256_before_the_fit(astro, tmp_path, ext):
    src, alpha = astro
    out = tmp_path / f"out{ext}"
    r = CliRunner().invoke(main, ["reduce", str(src), "-o", str(out), "-k", "250-256", "--json", *_TONE])
    assert r.exit_code == 0, r.output
    doc = json.loads(r.stdout)
    assert doc["k"] == 255
    assert any("capped at 255" in n for n in doc["notes"])
    entries, clear_ok = _read_back(out, alpha)
    assert entries <= 256 and clear_ok


def test_reduce_caps_the_automatic_size_for_continuous_tone(astro, tmp_path):
    src, alpha = astro
    out = tmp_path / "out.png"
    r = CliRunner().invoke(main, ["reduce", str(src), "-o", str(out), "--json", *_TONE])  # no -k: up to 256
    assert r.exit_code == 0, r.output
    doc = json.loads(r.stdout)
    assert doc["k"] == 255 and any("capped at 255" in n for n in doc["notes"])
    entries, clear_ok = _read_back(out, alpha)
    assert entries == 256 and clear_ok  # 255 colours and the transparent entry


def test_a_fixed_256_stays_a_usage_error(astro, tmp_path):
    src, _ = astro
    r = CliRunner().invoke(main, ["reduce", str(src), "-o", str(tmp_path / "o.gif"), "-k", "256"])
    assert r.exit_code == 2 and "transparency" in r.output


def test_a_tiff_or_an_opaque_picture_is_not_capped(astro, tmp_path):
    src, _ = astro
    r = CliRunner().invoke(main, ["reduce", str(src), "-o", str(tmp_path / "o.tif"), "-k", "250-256", "--json",
                                  *_TONE])
    assert r.exit_code == 0, r.output
    assert json.loads(r.stdout)["k"] == 256  # TIFF keeps alpha outside any colour index
    assert not needs_clear_entry("a.png", np.full((2, 2), 128, np.uint8))  # thresholded opaque: no clear entry
    assert needs_clear_entry("a.webp", np.array([[127]], np.uint8))
    assert needs_clear_entry("a.png", np.array([[32767]], np.uint16), max_code=65535)


@pytest.mark.parametrize("shared", [False, True])
def test_batch_caps_as_reduce_does(astro, tmp_path, shared):
    src, alpha = astro
    out_dir = tmp_path / "batch"
    args = ["batch", str(src.parent), "-o", str(out_dir), "-k", "250-256", "--format", "gif", "--workers", "0",
            "--json", *_TONE] + (["--shared"] if shared else [])
    r = CliRunner().invoke(main, args)
    assert r.exit_code == 0, r.output
    doc = json.loads(r.stdout)
    assert doc["summary"]["failed"] == 0
    entries, clear_ok = _read_back(out_dir / "astro.gif", alpha)
    assert entries <= 256 and clear_ok
    with Image.open(out_dir / "astro.gif") as im:
        assert im.info.get("transparency") is not None  # GIF: exactly one transparent index
    row = json.loads((out_dir / "manifest.json").read_text())["images"][0]
    if shared:
        assert any("capped at 255" in n for n in doc["notes"])
    else:
        assert row["k"] == 255 and any("capped at 255" in n for n in row["notes"])
    # reduce, on the same picture and options, writes the same file
    same = tmp_path / "reduce.gif"
    r2 = CliRunner().invoke(main, ["reduce", str(src), "-o", str(same), "-k", "250-256", *_TONE])
    assert r2.exit_code == 0, r2.output
    if not shared:
        assert np.array_equal(np.asarray(Image.open(same).convert("RGBA")),
                              np.asarray(Image.open(out_dir / "astro.gif").convert("RGBA")))


def test_sizes_with_room_keeps_what_fits():
    s = FitSettings()
    assert sizes_with_room("2-255", s, reserve=1) == ("2-255", None)
    assert sizes_with_room((2, 256), s, reserve=1)[0] == (2, 255)
    assert sizes_with_room(256, s, reserve=1) == (256, None)  # a fixed size: the caller refuses it
    assert sizes_with_room("2-256", s, reserve=0) == ("2-256", None)
    assert sizes_with_room(None, FitSettings(rule="bic"), reserve=1) == (None, None)  # the default tops at 12
    assert sizes_with_room(None, FitSettings(kind="continuous tone"), reserve=1)[0] == (2, 255)
