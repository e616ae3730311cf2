"""quantize's indexed PNG encoder, read back by Pillow's PNG decoder.

Source: ISO/IEC 15948:2004 (PNG), through Pillow's decoder as the reference
reader (it checks every chunk's CRC and the zlib stream's Adler-32);
``Image.verify`` checks the chunk structure on its own.
"""

from __future__ import annotations

import io
import struct
import zlib

import numpy as np
import pytest
from PIL import Image

from quantize.io import _png as _png


def _decode(data: bytes) -> Image.Image:
    Image.open(io.BytesIO(data)).verify()
    im = Image.open(io.BytesIO(data))
    im.load()
    return im


@pytest.mark.parametrize("k", [1, 2, 3, 4, 5, 16, 17, 200, 256])
@pytest.mark.parametrize("width", [1, 7, 33])
def test_every_bit_depth_reads_back_exactly(k, width):
    rng = np.random.default_rng(k * 100 + width)
    idx = rng.integers(0, k, (5, width)).astype(np.uint8)
    pal = rng.integers(0, 256, (k, 3)).astype(np.uint8)
    im = _decode(_png.indexed_png(idx, pal))
    assert im.mode == "P" and im.size == (width, 5)
    np.testing.assert_array_equal(np.asarray(im), idx)
    assert im.getpalette()[: 3 * k] == pal.ravel().tolist()
    # The smallest PNG bit depth that holds k colours (IHDR byte 24).
    data = _png.indexed_png(idx, pal)
    assert data[24] == next(b for b in (1, 2, 4, 8) if k <= 1 << b)


def test_transparency_and_resolution():
    idx = np.array([[0, 1, 2], [2, 1, 0]], np.uint8)
    pal = np.array([[10, 20, 30], [200, 100, 0], [255, 255, 255]], np.uint8)
    im = _decode(_png.indexed_png(idx, pal, transparent=2, dpi=(300, 150)))
    assert im.info["transparency"] == 2
    rgba = np.asarray(im.convert("RGBA"))
    assert (rgba[..., 3] == np.where(idx == 2, 0, 255)).all()
    # pHYs holds whole pixels per metre (PNG section 11.3.5.3): 300 dpi is
    # 11811 px/m, so a resolution reads back within half a pixel per metre,
    # 0.0127 dpi.
    assert im.info["dpi"] == pytest.approx((300, 150), abs=0.0127)
    assert im.info["dpi"] == pytest.approx((299.9994, 150.0124), abs=1e-4)


def test_large_images_compress_in_bands_into_one_valid_stream(monkeypatch):
    # Force many bands on a modest image: the joined runs must still be one
    # zlib stream whose inflated bytes are the filtered scanlines.
    monkeypatch.setattr(_png, "_BAND_BYTES", 1 << 12)
    rng = np.random.default_rng(3)
    idx = (rng.random((300, 257)) * 16).astype(np.uint8)
    idx[100:200] = 5  # flat rows compress well, noisy ones do not
    pal = rng.integers(0, 256, (16, 3)).astype(np.uint8)
    data = _png.indexed_png(idx, pal)
    np.testing.assert_array_equal(np.asarray(_decode(data)), idx)
    # Collect the IDAT payload and inflate it with zlib itself.
    pos, stream = 8, b""
    while pos < len(data):
        (n,) = struct.unpack(">I", data[pos:pos + 4])
        if data[pos + 4:pos + 8] == b"IDAT":
            stream += data[pos + 8:pos + 8 + n]
        pos += 12 + n
    raw = zlib.decompress(stream)
    rows = np.frombuffer(raw, np.uint8).reshape(300, -1)
    assert (rows[:, 0] == 0).all()  # filter type None on every row
    assert rows.shape[1] == 1 + (257 + 1) // 2


def test_smaller_than_pillows_encoder_on_a_photo_result():
    # Common practice, no source: unfiltered rows suit palette images; on a
    # 16-colour reduction of scikit-image's 'chelsea' the file is not larger
    # than Pillow's own indexed PNG.
    data_mod = pytest.importorskip("skimage.data")
    im = Image.fromarray(data_mod.chelsea()).quantize(16, dither=Image.Dither.NONE)
    idx = np.asarray(im)
    pal = np.array(im.getpalette()[:48], np.uint8).reshape(16, 3)
    ours = _png.indexed_png(idx, pal)
    buf = io.BytesIO()
    im.save(buf, format="PNG")
    assert len(ours) <= len(buf.getvalue())
    np.testing.assert_array_equal(np.asarray(_decode(ours)), idx)


def test_one_alpha_per_palette_entry():
    # tRNS holds one alpha per palette entry (PNG section 11.3.2.1); entries past its end
    # are opaque, so trailing opaque entries are left out of the chunk.
    idx = np.array([[0, 1, 2, 3], [3, 2, 1, 0]], np.uint8)
    pal = np.array([[10, 20, 30], [200, 100, 0], [255, 255, 255], [0, 90, 0]], np.uint8)
    alpha = np.array([255, 40, 0, 255], np.uint8)
    data = _png.indexed_png(idx, pal, alpha=alpha)
    im = _decode(data)
    assert im.mode == "P"
    assert im.info["transparency"] == bytes([255, 40, 0])
    rgba = np.asarray(im.convert("RGBA"))
    np.testing.assert_array_equal(rgba[..., 3], alpha[idx])
    np.testing.assert_array_equal(rgba[..., :3], pal[idx])
    # All opaque: no tRNS chunk at all.
    assert b"tRNS" not in _png.indexed_png(idx, pal, alpha=np.full(4, 255, np.uint8))
