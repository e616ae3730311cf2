"""Tests for quantize.io.read: decoding, ICC conversion, orientation, atomic writes.

Every test image is made in tmp_path, by Pillow, tifffile, or the small PNG and
ICC writers below. The writers follow the published specifications, so the
16-bit and colour-managed routes are checked against data the package did not
make. Colour conversions are compared with colour-science and with LittleCMS.
"""

from __future__ import annotations

import io
import os
import struct
import warnings
import zlib
from pathlib import Path

import numpy as np
import pytest
import tifffile
from PIL import Image, ImageCms, ImageOps

from quantize.core.picture import ImageWarning, Picture, ProfileWarning
from quantize.errors import ImageReadError, OutputError, QuantizeError
from quantize.io import _decode, _deep
from quantize.io import read as images
from quantize.io.read import as_picture, load_image
from quantize.io.write import atomic_write_bytes, atomic_write_text, save_image

RNG_SEED = 20240601


def _rng():
    return np.random.default_rng(RNG_SEED)


# --------------------------------------------------------------------------- spec writers

def _chunk(kind: bytes, data: bytes) -> bytes:
    # ISO/IEC 15948:2004 5.3: length, type, data, CRC-32 over type and data.
    return struct.pack(">I", len(data)) + kind + data + struct.pack(">I", zlib.crc32(kind + data) & 0xFFFFFFFF)


def _filter_rows(rows: np.ndarray, bpp: int, start: int) -> bytes:
    """Filter scanlines (uint8, shape (h, n)) cycling through types 0-4 (ISO/IEC 15948 clause 9)."""
    out = []
    prev = np.zeros(rows.shape[1], dtype=np.int64)
    for y, row in enumerate(rows.astype(np.int64)):
        kind = (start + y) % 5
        left = np.concatenate([np.zeros(bpp, np.int64), row[:-bpp]])
        upleft = np.concatenate([np.zeros(bpp, np.int64), prev[:-bpp]])
        if kind == 0:
            pred = 0
        elif kind == 1:
            pred = left
        elif kind == 2:
            pred = prev
        elif kind == 3:
            pred = (left + prev) // 2
        else:
            p = left + prev - upleft
            pa, pb, pc = np.abs(p - left), np.abs(p - prev), np.abs(p - upleft)
            pred = np.where((pa <= pb) & (pa <= pc), left, np.where(pb <= pc, prev, upleft))
        out.append(bytes([kind]) + ((row - pred) % 256).astype(np.uint8).tobytes())
        prev = row
    return b"".join(out)


_ADAM7 = [(0, 0, 8, 8), (4, 0, 8, 8), (0, 4, 4, 8), (2, 0, 4, 4), (0, 2, 2, 4), (1, 0, 2, 2), (0, 1, 1, 2)]


def _png16(values: np.ndarray, *, interlace: bool = False, extra: bytes = b"") -> bytes:
    """A 16-bit PNG (colour type from the channel count) using every filter type."""
    values = values if values.ndim == 3 else values[..., None]
    h, w, c = values.shape
    ctype = {1: 0, 2: 4, 3: 2, 4: 6}[c]
    bpp = 2 * c
    if interlace:
        parts, start = [], 0
        for x0, y0, dx, dy in _ADAM7:
            sub = values[y0::dy, x0::dx]
            if sub.size:
                parts.append(_filter_rows(sub.astype(">u2").reshape(sub.shape[0], -1).view(np.uint8), bpp, start))
                start += sub.shape[0]
        raw = b"".join(parts)
    else:
        raw = _filter_rows(values.astype(">u2").reshape(h, -1).view(np.uint8), bpp, 0)
    ihdr = struct.pack(">IIBBBBB", w, h, 16, ctype, 0, 0, int(interlace))
    return (
        b"\x89PNG\r\n\x1a\n" + _chunk(b"IHDR", ihdr) + extra
        + _chunk(b"IDAT", zlib.compress(raw)) + _chunk(b"IEND", b"")
    )  # fmt: skip


def _iccp(profile: bytes) -> bytes:
    return _chunk(b"iCCP", b"test profile\x00\x00" + zlib.compress(profile))


def _exif_bytes(orientation: int) -> bytes:
    exif = Image.Exif()
    exif[0x0112] = orientation
    return exif.tobytes()


def _exif_chunk(orientation: int) -> bytes:
    data = _exif_bytes(orientation)
    return _chunk(b"eXIf", data[6:] if data.startswith(b"Exif\x00\x00") else data)


def _s15(v: float) -> bytes:
    return struct.pack(">i", int(round(v * 65536)))  # ICC.1:2010 4.6 s15Fixed16Number


def _curv_gamma(g: float) -> bytes:
    return b"curv\0\0\0\0" + struct.pack(">IH", 1, int(round(g * 256))) + b"\0\0"


def _curv_table(table: np.ndarray) -> bytes:
    return b"curv\0\0\0\0" + struct.pack(">I", len(table)) + np.asarray(table, ">u2").tobytes()


def _para(ftype: int, *params: float) -> bytes:
    return b"para\0\0\0\0" + struct.pack(">HH", ftype, 0) + b"".join(_s15(p) for p in params)


def _icc_profile(description: str, *, colorants=None, trc: bytes, space: bytes = b"RGB ") -> bytes:
    """A version 2.1 display profile: matrix/TRC for RGB, kTRC for grey (ICC.1:2010 8.4, 9.2)."""
    desc_ascii = description.encode("ascii") + b"\0"
    desc = b"desc\0\0\0\0" + struct.pack(">I", len(desc_ascii)) + desc_ascii + b"\0" * 8 + b"\0" * 70
    tags = [(b"desc", desc), (b"cprt", b"text\0\0\0\0Test data, no rights\0")]
    tags.append((b"wtpt", b"XYZ \0\0\0\0" + _s15(0.9642) + _s15(1.0) + _s15(0.8249)))
    if space == b"GRAY":
        tags.append((b"kTRC", trc))
    else:
        for i, sig in enumerate((b"rXYZ", b"gXYZ", b"bXYZ")):
            tags.append((sig, b"XYZ \0\0\0\0" + b"".join(_s15(v) for v in colorants[:, i])))
        tags += [(b"rTRC", trc), (b"gTRC", trc), (b"bTRC", trc)]
    first = 128 + 4 + 12 * len(tags)
    table, body = b"", b""
    for sig, data in tags:
        data += b"\0" * (-len(data) % 4)
        table += sig + struct.pack(">II", first + len(body), len(data))
        body += data
    header = (
        struct.pack(">I", first + len(body)) + b"\0" * 4 + bytes([2, 0x10, 0, 0])
        + b"mntr" + space + b"XYZ " + b"\0" * 12 + b"acsp" + b"\0" * 24
        + struct.pack(">I", 0) + _s15(0.9642) + _s15(1.0) + _s15(0.8249) + b"\0" * 48
    )  # fmt: skip
    assert len(header) == 128
    return header + struct.pack(">I", len(tags)) + table + body


def _space(name: str):
    """A colour-science RGB space with its matrices derived from the published primaries.

    colour-science otherwise uses the 4-decimal matrices printed in the standards,
    which differ from the primaries by up to ~1e-4. Profiles and LittleCMS derive
    them from the primaries.
    """
    import colour

    cs = colour.RGB_COLOURSPACES[name].copy()
    cs.use_derived_transformation_matrices(True)
    return cs


def _d50_colorants(name: str) -> np.ndarray:
    """Colorant columns of a published RGB space, Bradford-adapted to the ICC PCS white."""
    import colour

    cs = _space(name)
    adapt = colour.adaptation.matrix_chromatic_adaptation_VonKries(
        colour.xy_to_XYZ(cs.whitepoint), np.array([0.9642, 1.0, 0.8249]), transform="Bradford"
    )
    return adapt @ cs.matrix_RGB_to_XYZ


# Adobe RGB (1998) Color Image Encoding v2005-05: gamma 563/256, exactly a u8Fixed8.
def _adobe_rgb_profile() -> bytes:
    return _icc_profile("Test Adobe RGB (1998)", colorants=_d50_colorants("Adobe RGB (1998)"), trc=_curv_gamma(563 / 256))


# Display P3 (SMPTE EG 432-1 primaries, D65) with the IEC 61966-2-1 sRGB curve as a type 3 'para'.
def _display_p3_profile() -> bytes:
    trc = _para(3, 2.4, 1 / 1.055, 0.055 / 1.055, 1 / 12.92, 0.04045)
    return _icc_profile("Test Display P3", colorants=_d50_colorants("Display P3"), trc=trc)


def _colour_rgb_to_srgb(rgb01: np.ndarray, space: str) -> np.ndarray:
    import colour

    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        out = colour.RGB_to_RGB(
            rgb01, _space(space), _space("sRGB"), apply_cctf_decoding=True, apply_cctf_encoding=True
        )
    return np.clip(out, 0.0, 1.0)


def _mode(path) -> str:
    with Image.open(path) as im:
        return im.mode


def _one_line_naming(exc: pytest.ExceptionInfo, path) -> None:
    message = str(exc.value)
    assert os.fspath(path) in message
    assert "\n" not in message and "Traceback" not in message


# --------------------------------------------------------------------------- modes

def test_mode_1_gives_black_and_white(tmp_image_factory):
    bits = _rng().integers(0, 2, (6, 9)).astype(bool)
    path = tmp_image_factory("bits.png", Image.fromarray(bits))
    assert _mode(path) == "1"
    pic = load_image(path)
    # A 1-bit sample is 0 or full scale (ISO/IEC 15948 13.12, sample depth scaling).
    assert pic.bit_depth == 8 and pic.alpha is None
    assert np.array_equal(pic.rgb, np.repeat(np.where(bits, 255, 0)[..., None], 3, axis=2))


def test_mode_l_and_la(tmp_image_factory):
    grey = _rng().integers(0, 256, (5, 8), dtype=np.uint8)
    alpha = _rng().integers(1, 256, (5, 8), dtype=np.uint8)
    pic = load_image(tmp_image_factory("grey.png", grey))
    assert np.array_equal(pic.rgb, np.repeat(grey[..., None], 3, axis=2))
    pic = load_image(tmp_image_factory("greya.png", Image.fromarray(np.dstack([grey, alpha]), "LA")))
    assert np.array_equal(pic.rgb[..., 1], grey) and np.array_equal(pic.alpha, alpha)


def test_palette_with_trns_alpha_per_entry(tmp_image_factory):
    # PNG tRNS for colour type 3: one alpha byte per palette entry (ISO/IEC 15948 11.3.2.1).
    palette = np.array([[250, 240, 220], [200, 30, 40], [20, 40, 90], [0, 128, 0]], np.uint8)
    entry_alpha = bytes([255, 0, 128, 255])
    idx = _rng().integers(0, 4, (7, 6)).astype(np.uint8)
    img = Image.frombytes("P", (6, 7), idx.tobytes())
    img.putpalette(palette.tobytes())
    path = tmp_image_factory("pal.png", img, transparency=entry_alpha)
    pic = load_image(path)
    assert np.array_equal(pic.rgb, palette[idx])
    assert np.array_equal(pic.alpha, np.frombuffer(entry_alpha, np.uint8)[idx])


def test_palette_with_single_transparent_index(tmp_image_factory):
    palette = np.array([[9, 9, 9], [200, 30, 40], [20, 40, 90]], np.uint8)
    idx = np.array([[0, 1, 2], [2, 1, 0]], np.uint8)
    img = Image.frombytes("P", (3, 2), idx.tobytes())
    img.putpalette(palette.tobytes())
    pic = load_image(tmp_image_factory("pal1.gif", img, transparency=1))
    assert np.array_equal(pic.alpha, np.where(idx == 1, 0, 255))
    assert np.array_equal(pic.rgb[idx != 1], palette[idx[idx != 1]])


def test_rgb_rgba_and_colour_key(tmp_image_factory):
    rgb = _rng().integers(0, 256, (6, 7, 3), dtype=np.uint8)
    alpha = _rng().integers(1, 256, (6, 7), dtype=np.uint8)
    assert np.array_equal(load_image(tmp_image_factory("rgb.png", rgb)).rgb, rgb)
    pic = load_image(tmp_image_factory("rgba.png", np.dstack([rgb, alpha])))
    assert np.array_equal(pic.rgb, rgb) and np.array_equal(pic.alpha, alpha)
    # tRNS for colour type 2: a single colour is fully transparent (ISO/IEC 15948 11.3.2.1).
    key = tuple(int(v) for v in rgb[0, 0])
    pic = load_image(tmp_image_factory("key.png", rgb, transparency=key))
    assert np.array_equal(pic.alpha == 0, (rgb == rgb[0, 0]).all(axis=2))


def test_cmyk_without_profile_warns_and_uses_naive_formula(tmp_image_factory):
    cmyk = np.array([[[0, 0, 0, 0], [255, 0, 0, 0], [0, 0, 0, 255]],
                     [[0, 255, 0, 0], [0, 0, 255, 0], [64, 128, 192, 32]]], np.uint8)  # fmt: skip
    path = tmp_image_factory("cmyk.tif", Image.fromarray(cmyk, "CMYK"))
    with pytest.warns(ProfileWarning, match="without an embedded ICC profile"):
        pic = load_image(path)
    # Naive complement R = (1 - C)(1 - K), etc. Common practice, no source.
    c, k = cmyk[..., :3] / 255.0, cmyk[..., 3:] / 255.0
    expected = np.rint(255 * (1 - c) * (1 - k))
    assert np.abs(pic.rgb.astype(int) - expected).max() <= 1
    assert pic.warnings and "cmyk.tif" in pic.warnings[0]


def test_i16_png_keeps_16_bits(tmp_image_factory):
    grey = np.array([[0, 1, 1000], [12345, 65534, 65535]], np.uint16)  # mostly not multiples of 257
    path = tmp_image_factory("g16.png", Image.fromarray(grey))
    pic = load_image(path)
    assert pic.bit_depth == 16 and pic.rgb.dtype == np.uint16
    assert np.array_equal(pic.rgb, np.repeat(grey[..., None], 3, axis=2))


def test_i16_big_endian_pil_image():
    grey = np.array([[7, 300], [40000, 65535]], np.uint16)
    img = Image.frombytes("I;16B", (2, 2), grey.astype(">u2").tobytes())
    pic = as_picture(img)
    assert pic.source == "<image>" and np.array_equal(pic.rgb[..., 0], grey)


def test_mode_i_is_16_bit_codes_and_clips(tmp_image_factory):
    # Convention of load_image (documented there; Pillow's own scale for deep grey), no external source.
    vals = np.array([[0, 513], [65535, 70000]], np.int32)
    path = tmp_image_factory("int.tif", Image.fromarray(vals))
    assert _mode(path) == "I"
    with pytest.warns(ImageWarning, match="clipped"):
        pic = load_image(path)
    assert np.array_equal(pic.rgb[..., 0], [[0, 513], [65535, 65535]])


@pytest.mark.parametrize(
    ("values", "expected"),
    [
        (np.array([[0.0, 0.25], [0.5, 1.0]]), [[0, 16384], [32768, 65535]]),  # 0-1 scale
        (np.array([[0.0, 51.0], [127.5, 255.0]]), [[0, 13107], [32768, 65535]]),  # 0-255 scale
    ],
)
def test_mode_f_scaling(tmp_image_factory, values, expected):
    # Convention of load_image (documented there), no external source; rint(0.5 * 65535) rounds half to even.
    path = tmp_image_factory("float.tif", Image.fromarray(values.astype(np.float32)))
    assert _mode(path) == "F"
    assert np.array_equal(load_image(path).rgb[..., 0], expected)


def test_mode_f_nan_is_an_error(tmp_image_factory):
    path = tmp_image_factory("nan.tif", Image.fromarray(np.array([[0.0, np.nan]], np.float32)))
    with pytest.raises(ImageReadError, match="NaN") as exc:
        load_image(path)
    _one_line_naming(exc, path)


def test_animated_gif_uses_first_frame(tmp_path):
    frames = [Image.new("RGB", (4, 4), c) for c in ((255, 0, 0), (0, 0, 255))]
    path = tmp_path / "anim.gif"
    frames[0].save(path, save_all=True, append_images=frames[1:])
    with pytest.warns(ImageWarning, match="2 frames"):
        pic = load_image(path)
    assert tuple(pic.rgb[0, 0]) == (255, 0, 0)


# --------------------------------------------------------------------------- orientation

def _corner_image() -> np.ndarray:
    a = np.zeros((3, 4, 3), np.uint8)  # stored 4 wide, 3 high
    a[0, 0], a[0, -1], a[-1, 0], a[-1, -1] = (255, 0, 0), (0, 255, 0), (0, 0, 255), (255, 255, 0)
    return a


def test_exif_orientation_6_png(tmp_image_factory):
    stored = _corner_image()
    pic = load_image(tmp_image_factory("o6.png", stored, exif=_exif_bytes(6), dpi=(100, 300)))
    # Exif 2.32 (CIPA DC-008) Orientation 6: row 0 is the visual right side, column 0 the top;
    # shown upright the image is the stored one turned 90 degrees clockwise.
    assert pic.shape == (4, 3)
    assert tuple(pic.rgb[0, -1]) == (255, 0, 0)  # stored top-left -> top-right
    assert tuple(pic.rgb[-1, -1]) == (0, 255, 0)  # stored top-right -> bottom-right
    assert tuple(pic.rgb[0, 0]) == (0, 0, 255)  # stored bottom-left -> top-left
    assert pic.dpi == pytest.approx((300, 100), abs=0.01)  # axes swap with the image


def test_exif_orientation_6_jpeg(tmp_image_factory):
    stored = np.zeros((60, 80, 3), np.uint8)
    stored[:30, :40] = (230, 30, 30)  # top-left quadrant red
    path = tmp_image_factory("o6.jpg", stored, exif=_exif_bytes(6), quality=95)
    pic = load_image(path)
    assert pic.shape == (80, 60)
    # Same Exif rule as above; JPEG is lossy, so compare loosely, well inside the quadrant.
    assert np.abs(pic.rgb[5, -5].astype(int) - (230, 30, 30)).max() <= 12
    assert pic.rgb[-5, 5].max() <= 12


@pytest.mark.parametrize("orientation", range(1, 9))
def test_16_bit_orientation_matches_pillow_exif_transpose(tmp_path, orientation):
    values = _rng().integers(0, 65536, (5, 7, 3), dtype=np.uint16)
    png = tmp_path / f"o{orientation}.png"
    png.write_bytes(_png16(values, extra=_exif_chunk(orientation)))
    tif = tmp_path / f"o{orientation}.tif"
    tifffile.imwrite(tif, values, photometric="rgb", extratags=[(274, "H", 1, orientation, True)])
    for path in (png, tif):
        # Reference: Pillow's exif_transpose applied to Pillow's own (8-bit, high-byte) decode.
        with Image.open(path) as im:
            reference = np.asarray(ImageOps.exif_transpose(im))
        pic = load_image(path)
        assert pic.bit_depth == 16
        assert np.array_equal(pic.rgb >> 8, reference)


# --------------------------------------------------------------------------- 16 bits

@pytest.mark.parametrize("channels", [1, 2, 3, 4])
@pytest.mark.parametrize("interlace", [False, True])
def test_16_bit_png_all_filters_exact(tmp_path, channels, interlace):
    values = _rng().integers(0, 65536, (19, 23, channels), dtype=np.uint16)
    values[..., -1] |= 1  # keep alpha (when present) off zero, and every value odd-ended
    path = tmp_path / "deep.png"
    path.write_bytes(_png16(values, interlace=interlace))
    pic = load_image(path)
    assert pic.bit_depth == 16
    assert (pic.rgb % 257 != 0).any()  # 16 bits really kept, not 8 bits scaled up
    colour = values[..., :3] if channels >= 3 else np.repeat(values[..., :1], 3, axis=2)
    assert np.array_equal(pic.rgb, colour)
    if channels in (2, 4):
        assert np.array_equal(pic.alpha, values[..., -1])
    else:
        assert pic.alpha is None


def test_16_bit_png_unexpected_pillow_decoder_warns(tmp_path, monkeypatch):
    # If a future Pillow decodes 16-bit PNG with another rawmode, the file is read at
    # 8 bits with a warning, never joined wrongly.
    monkeypatch.setitem(_decode.PNG16_RAWMODE, 2, "RGB;16X")
    values = _rng().integers(0, 65536, (4, 5, 3), dtype=np.uint16)
    path = tmp_path / "future.png"
    path.write_bytes(_png16(values))
    with pytest.warns(ImageWarning, match="read at 8 bits"):
        pic = load_image(path)
    assert pic.bit_depth == 8 and np.array_equal(pic.rgb, values >> 8)


def test_16_bit_png_colour_key(tmp_path):
    values = _rng().integers(0, 65536, (4, 5, 3), dtype=np.uint16)
    values[1, 2] = (1000, 2000, 3001)
    trns = _chunk(b"tRNS", struct.pack(">HHH", 1000, 2000, 3001))
    path = tmp_path / "key16.png"
    path.write_bytes(_png16(values, extra=trns))
    alpha = load_image(path).alpha
    # tRNS colour type 2 at bit depth 16 compares all 16 bits (ISO/IEC 15948 11.3.2.1).
    assert alpha is not None and alpha[1, 2] == 0 and (alpha > 0).sum() == 19


@pytest.mark.parametrize(
    ("shape", "options"),
    [
        ((9, 11, 3), {"photometric": "rgb"}),
        ((9, 11, 3), {"photometric": "rgb", "byteorder": ">", "compression": "zlib"}),
        ((3, 9, 11), {"photometric": "rgb", "planarconfig": "separate"}),
        ((9, 11, 4), {"photometric": "rgb", "extrasamples": ["unassalpha"], "compression": "zlib"}),
        ((9, 11, 2), {"photometric": "minisblack", "extrasamples": ["unassalpha"]}),
    ],
)
def test_16_bit_tiff_exact(tmp_path, shape, options):
    values = _rng().integers(1, 65536, shape, dtype=np.uint16)
    path = tmp_path / "deep.tif"
    tifffile.imwrite(path, values, **options)
    pic = load_image(path)
    if options.get("planarconfig") == "separate":
        values = np.moveaxis(values, 0, -1)
    assert pic.bit_depth == 16 and (pic.rgb % 257 != 0).any()
    n = 3 if options["photometric"] == "rgb" else 1
    colour = values[..., :n] if n == 3 else np.repeat(values[..., :1], 3, axis=2)
    assert np.array_equal(pic.rgb, colour)
    if "extrasamples" in options:
        assert np.array_equal(pic.alpha, values[..., -1])


def test_16_bit_tiff_associated_alpha_is_unpremultiplied(tmp_path):
    colour = np.array([[[40000, 20000, 1234], [65535, 0, 30000]]], np.uint16)
    alpha = np.array([[32768, 65535]], np.uint16)
    stored = np.rint(colour * (alpha[..., None] / 65535)).astype(np.uint16)
    path = tmp_path / "assoc.tif"
    tifffile.imwrite(path, np.dstack([stored, alpha]), photometric="rgb", extrasamples=["assocalpha"])
    pic = load_image(path)
    # TIFF 6.0 ExtraSamples = 1: colour is premultiplied by alpha. Rounding of the stored
    # product at alpha ~ 0.5 can move the result by up to 2 codes.
    assert np.abs(pic.rgb.astype(int) - colour).max() <= 2
    assert np.array_equal(pic.alpha, alpha)


def test_16_bit_tiff_without_codec_uses_pillow_route(tmp_path, monkeypatch):
    # Stand-in for an LZW file when imagecodecs is absent: tifffile is told it cannot decode.
    values = _rng().integers(0, 65536, (8, 10, 4), dtype=np.uint16)
    path = tmp_path / "codec.tif"
    tifffile.imwrite(path, values, photometric="rgb", extrasamples=["unassalpha"], compression="zlib")
    monkeypatch.setattr(_deep, "_tifffile_decodes", lambda page: False)
    pic = load_image(path)
    assert pic.bit_depth == 16
    assert np.array_equal(pic.rgb, values[..., :3]) and np.array_equal(pic.alpha, values[..., 3])


def test_16_bit_tiff_without_codec_planar_falls_back_to_8_bits(tmp_path, monkeypatch):
    values = _rng().integers(0, 65536, (3, 8, 10), dtype=np.uint16)
    path = tmp_path / "planar.tif"
    tifffile.imwrite(path, values, photometric="rgb", planarconfig="separate", compression="zlib")
    monkeypatch.setattr(_deep, "_tifffile_decodes", lambda page: False)
    with pytest.warns(ImageWarning, match="imagecodecs"):
        pic = load_image(path)
    assert pic.bit_depth == 8
    assert np.array_equal(pic.rgb, np.moveaxis(values, 0, -1) >> 8)  # Pillow keeps the high byte


def test_16_bit_tiff_resolution(tmp_path):
    path = tmp_path / "dpi.tif"
    tifffile.imwrite(path, np.ones((4, 4, 3), np.uint16), photometric="rgb", resolution=(118.11, 59.055),
                     resolutionunit="CENTIMETER")  # fmt: skip
    assert load_image(path).dpi == pytest.approx((300.0, 150.0), abs=0.01)  # 1 inch = 2.54 cm


# --------------------------------------------------------------------------- ICC

def _random_rgb8(shape=(16, 16, 3)) -> np.ndarray:
    return _rng().integers(0, 256, shape, dtype=np.uint8)


@pytest.mark.parametrize(
    ("space", "profile", "suffix"),
    [("Adobe RGB (1998)", _adobe_rgb_profile, ".png"), ("Display P3", _display_p3_profile, ".tif")],
)
def test_8_bit_profile_matches_colour_science(tmp_image_factory, space, profile, suffix):
    rgb = _random_rgb8()
    pic = load_image(tmp_image_factory("tagged" + suffix, rgb, icc_profile=profile()))
    expected = np.rint(_colour_rgb_to_srgb(rgb / 255.0, space) * 255)
    # colour-science RGB_to_RGB (both spaces D65, so no adaptation): LittleCMS should agree within 1 code.
    assert np.abs(pic.rgb.astype(int) - expected).max() <= 1
    assert pic.profile is not None and pic.profile.startswith("Test ") and pic.bit_depth == 8
    assert (pic.rgb != rgb).any()  # the conversion did something


def test_16_bit_png_profile_matches_colour_science(tmp_path):
    values = _rng().integers(0, 65536, (12, 12, 3), dtype=np.uint16)
    path = tmp_path / "adobe16.png"
    path.write_bytes(_png16(values, extra=_iccp(_adobe_rgb_profile())))
    pic = load_image(path)
    assert pic.bit_depth == 16 and pic.profile == "Test Adobe RGB (1998)"
    expected = _colour_rgb_to_srgb(values / 65535.0, "Adobe RGB (1998)")
    # Colorants stored as s15Fixed16 (ICC.1:2010 4.6) are off by up to 2**-17, so allow 2e-4.
    assert np.abs(pic.float_rgb() - expected).max() < 2e-4


def test_16_bit_tiff_profile_matches_colour_science(tmp_path):
    values = _rng().integers(0, 65536, (12, 12, 3), dtype=np.uint16)
    path = tmp_path / "p3.tif"
    tifffile.imwrite(path, values, photometric="rgb", iccprofile=_display_p3_profile())
    pic = load_image(path)
    assert pic.bit_depth == 16 and pic.profile == "Test Display P3"
    expected = _colour_rgb_to_srgb(values / 65535.0, "Display P3")
    assert np.abs(pic.float_rgb() - expected).max() < 2e-4  # as above: s15Fixed16 parameters


_TRC_VARIANTS = {
    "identity": b"curv\0\0\0\0" + struct.pack(">I", 0),
    "gamma 1.8": _curv_gamma(1.8),
    "table": _curv_table(np.rint(np.linspace(0, 1, 1024) ** 2.2 * 65535)),
    "para 0": _para(0, 2.2),
    "para 1": _para(1, 2.4, 1.1, -0.1),
    "para 2": _para(2, 2.4, 1.1, -0.1, 0.05),
    "para 3": _para(3, 2.4, 1 / 1.055, 0.055 / 1.055, 1 / 12.92, 0.04045),
    "para 4": _para(4, 2.2, 0.95, 0.05, 0.5, 0.1, 0.02, 0.01),
}


@pytest.mark.parametrize("variant", sorted(_TRC_VARIANTS))
def test_16_bit_float_route_matches_littlecms(tmp_path, variant):
    # Reference: LittleCMS 2 (through Pillow's ImageCms) on the same profile and 8-bit data.
    trc = _TRC_VARIANTS[variant]
    profile = _icc_profile("Test curve " + variant, colorants=_d50_colorants("Adobe RGB (1998)"), trc=trc)
    rgb8 = _random_rgb8((24, 24, 3))
    reference = ImageCms.profileToProfile(
        Image.fromarray(rgb8), ImageCms.ImageCmsProfile(io.BytesIO(profile)), ImageCms.createProfile("sRGB"),
        renderingIntent=ImageCms.Intent.RELATIVE_COLORIMETRIC, outputMode="RGB",
    )  # fmt: skip
    path = tmp_path / "curve.png"
    path.write_bytes(_png16(rgb8.astype(np.uint16) * 257, extra=_iccp(profile)))  # v * 257: exact 8 -> 16 bits
    pic = load_image(path)
    assert pic.bit_depth == 16
    ours = np.rint(pic.rgb / 257.0)
    assert np.abs(ours - np.asarray(reference)).max() <= 1


@pytest.mark.parametrize("gamma", [1.0, 2.2])
def test_grey_profile_8_and_16_bit(tmp_path, tmp_image_factory, gamma):
    profile = _icc_profile(f"Test grey {gamma}", trc=_curv_gamma(gamma), space=b"GRAY")
    grey = np.arange(0, 256, 5, dtype=np.uint8).reshape(4, 13)
    # Grey with TRC gamma g has linear value v**g, then is sRGB-encoded (IEC 61966-2-1 eq. 5).
    # The gamma is stored as u8Fixed8 (ICC.1:2010 10.5), so 2.2 becomes 563/256.
    # With gamma 1.0 this also catches LittleCMS's coarse optimised grey transform
    # (up to 10 codes off in the shadows).
    import colour

    stored = round(gamma * 256) / 256
    expected = colour.cctf_encoding((grey / 255.0) ** stored, function="sRGB")
    pic8 = load_image(tmp_image_factory("grey.png", grey, icc_profile=profile))
    assert np.abs(pic8.rgb[..., 0] - expected * 255).max() <= 1
    path = tmp_path / "grey16.png"
    path.write_bytes(_png16(grey.astype(np.uint16) * 257, extra=_iccp(profile)))
    pic16 = load_image(path)
    assert pic16.bit_depth == 16 and np.abs(pic16.float_rgb()[..., 1] - expected).max() < 1e-4


def test_corrupt_profile_warns_and_keeps_srgb(tmp_path, tmp_image_factory):
    rgb = _random_rgb8((6, 6, 3))
    junk = b"\x00\x00\x01\x00not an ICC profile at all" * 4
    path = tmp_image_factory("junk.png", rgb, icc_profile=junk)
    with pytest.warns(ProfileWarning, match="unreadable") as record:
        pic = load_image(path)
    assert "junk.png" in str(record[0].message) and record[0].filename == __file__  # stacklevel=2
    assert np.array_equal(pic.rgb, rgb) and pic.profile is None
    assert len(pic.warnings) == 1 and "treated as sRGB" in pic.warnings[0]
    deep = tmp_path / "junk16.png"
    values = _rng().integers(0, 65536, (4, 4, 3), dtype=np.uint16)
    deep.write_bytes(_png16(values, extra=_iccp(junk)))
    with pytest.warns(ProfileWarning, match="unreadable"):
        assert np.array_equal(load_image(deep).rgb, values)


def test_rgb_profile_on_cmyk_warns_and_converts_naively(tmp_image_factory):
    cmyk = np.zeros((2, 2, 4), np.uint8)
    cmyk[0, 0] = (255, 0, 0, 0)
    path = tmp_image_factory("mismatch.tif", Image.fromarray(cmyk, "CMYK"), icc_profile=_adobe_rgb_profile())
    with pytest.warns(ProfileWarning, match="cannot convert CMYK"):
        pic = load_image(path)
    assert tuple(pic.rgb[0, 0]) == (0, 255, 255) and tuple(pic.rgb[1, 1]) == (255, 255, 255)


def test_grey_profile_on_16_bit_rgb_is_refused(tmp_path):
    values = _rng().integers(0, 65536, (4, 4, 3), dtype=np.uint16)
    path = tmp_path / "wrong16.png"
    path.write_bytes(_png16(values, extra=_iccp(_icc_profile("Test grey", trc=_curv_gamma(1.0), space=b"GRAY"))))
    with pytest.warns(ProfileWarning, match="for GRAY data"):
        pic = load_image(path)
    assert np.array_equal(pic.rgb, values) and pic.profile is None


def test_table_profile_on_16_bit_is_converted_at_8_bits(tmp_path, monkeypatch):
    # Stands in for a LUT-based profile: the matrix/TRC reader declines it.
    from quantize.io import _icc as _icc

    monkeypatch.setattr(_icc, "_matrix_trc", lambda icc: None)
    values = _rng().integers(0, 65536, (6, 6, 3), dtype=np.uint16)
    profile = _adobe_rgb_profile()
    path = tmp_path / "lut16.png"
    path.write_bytes(_png16(values, extra=_iccp(profile)))
    with pytest.warns(ProfileWarning, match="reduced to 8 bits"):
        pic = load_image(path)
    assert pic.bit_depth == 8 and pic.profile == "Test Adobe RGB (1998)"
    expected = np.rint(_colour_rgb_to_srgb(np.rint(values / 257.0) / 255.0, "Adobe RGB (1998)") * 255)
    assert np.abs(pic.rgb.astype(int) - expected).max() <= 1


# --------------------------------------------------------------------------- bad input

def _bad_files(tmp_path: Path) -> dict[str, Path]:
    png = io.BytesIO()
    Image.fromarray(_random_rgb8((64, 64, 3))).save(png, format="PNG")
    jpg = io.BytesIO()
    Image.fromarray(_random_rgb8((64, 64, 3))).save(jpg, format="JPEG")
    deep = _png16(_rng().integers(0, 65536, (32, 32, 3), dtype=np.uint16))
    files = {
        "empty.png": b"",
        "cut.png": png.getvalue()[: len(png.getvalue()) // 2],
        "cut.jpg": jpg.getvalue()[: len(jpg.getvalue()) // 2],
        "cut16.png": deep[: len(deep) // 2],
        "notes.png": b"shopping list: ink, squeegee, tape\n",
    }
    paths = {}
    for name, data in files.items():
        paths[name] = tmp_path / name
        paths[name].write_bytes(data)
    paths["folder.png"] = tmp_path / "folder.png"
    paths["folder.png"].mkdir()
    paths["missing.png"] = tmp_path / "missing.png"
    return paths


@pytest.mark.parametrize(
    ("name", "reason"),
    [
        ("empty.png", "empty"),
        ("cut.png", "truncated|damaged|decode"),
        ("cut.jpg", "truncated|damaged"),
        ("cut16.png", "truncated|damaged|decode"),
        ("notes.png", "not an image"),
        ("folder.png", "folder"),
        ("missing.png", "no such file"),
    ],
)
def test_bad_files_raise_image_read_error(tmp_path, name, reason):
    path = _bad_files(tmp_path)[name]
    with pytest.raises(ImageReadError, match=reason) as exc:
        load_image(path)
    _one_line_naming(exc, path)
    assert isinstance(exc.value, QuantizeError)


@pytest.mark.parametrize("kind", ["png", "png16", "tif16"])
def test_pixel_limit(tmp_path, kind):
    path = tmp_path / f"big.{kind[:3]}"
    if kind == "png":
        Image.new("RGB", (20, 20)).save(path)
    elif kind == "png16":
        path.write_bytes(_png16(np.ones((20, 20, 3), np.uint16)))
    else:
        tifffile.imwrite(path, np.ones((20, 20, 3), np.uint16), photometric="rgb")
    with pytest.raises(ImageReadError, match="400 pixels exceeds the limit of 399") as exc:
        load_image(path, max_pixels=399)
    _one_line_naming(exc, path)
    assert load_image(path, max_pixels=400).shape == (20, 20)


def test_pixel_limit_none_lifts_pillows_own(tmp_path, monkeypatch):
    path = tmp_path / "big.png"
    Image.new("RGB", (20, 20)).save(path)
    monkeypatch.setattr(Image, "MAX_IMAGE_PIXELS", 50)  # Pillow refuses above 2 x 50
    with pytest.raises(ImageReadError, match="400 pixels"):
        load_image(path, max_pixels=50)
    assert load_image(path, max_pixels=None).shape == (20, 20)
    assert Image.MAX_IMAGE_PIXELS == 50  # restored afterwards


def test_fully_transparent_is_refused(tmp_image_factory):
    path = tmp_image_factory("ghost.png", np.zeros((4, 4, 4), np.uint8))
    with pytest.raises(ImageReadError, match="every pixel is fully transparent; nothing to reduce") as exc:
        load_image(path)
    _one_line_naming(exc, path)


def test_unsupported_mode():
    with pytest.raises(ImageReadError, match="unsupported colour mode 'HSV'"):
        as_picture(Image.new("HSV", (2, 2)))


# --------------------------------------------------------------------------- as_picture

def test_as_picture_passes_pictures_and_paths(tmp_image_factory):
    rgb = _random_rgb8((3, 3, 3))
    path = tmp_image_factory("p.png", rgb)
    pic = as_picture(path)
    assert as_picture(pic) is pic
    assert as_picture(str(path)).source == str(path) and np.array_equal(pic.rgb, rgb)


def test_as_picture_arrays():
    grey = np.array([[0, 128], [255, 7]], np.uint8)
    assert np.array_equal(as_picture(grey).rgb, np.repeat(grey[..., None], 3, axis=2))
    deep = _rng().integers(0, 65536, (2, 3, 3), dtype=np.uint16)
    pic = as_picture(deep)
    assert pic.bit_depth == 16 and np.array_equal(pic.rgb, deep) and pic.source == "<array>"
    rgba = np.zeros((1, 3, 4))
    rgba[0, :, :3] = [[0.5, 0.25, 1000 / 65535], [1.0, 0.0, 0.0], [0.0, 0.0, 0.0]]
    rgba[0, :, 3] = [1.0, 0.5, 0.0]
    pic = as_picture(rgba)
    # rint is round-half-even (IEEE 754; numpy.rint): 0.5 * 65535 = 32767.5 -> 32768.
    assert list(pic.rgb[0, 0]) == [32768, 16384, 1000]  # 1000 is no multiple of 257: precision kept
    assert list(pic.alpha[0]) == [65535, 32768, 0]
    assert list(pic.opaque[0]) == [True, True, False]


@pytest.mark.parametrize(
    ("array", "match"),
    [
        (np.zeros((2, 2, 2), np.uint8), "shape"),
        (np.zeros((2, 2, 5), np.uint8), "shape"),
        (np.zeros(5, np.uint8), "shape"),
        (np.zeros((0, 3, 3), np.uint8), "shape"),
        (np.zeros((2, 2, 3), np.int64), "dtype"),
        (np.zeros((2, 2), bool), "dtype"),
        (np.full((2, 2, 3), 1.5), "0-1"),
        (np.full((2, 2, 3), np.nan), "NaN"),
    ],
)
def test_as_picture_bad_arrays(array, match):
    with pytest.raises(ValueError, match=match):
        as_picture(array)


def test_as_picture_pil_image_and_type_error():
    img = Image.fromarray(np.dstack([_random_rgb8((2, 2, 3)), np.full((2, 2), 9, np.uint8)]))
    pic = as_picture(img)
    assert pic.source == "<image>" and np.array_equal(pic.alpha, np.full((2, 2), 9))
    with pytest.raises(TypeError, match="list"):
        as_picture([[0, 1]])


def test_picture_validates_and_is_read_only():
    rgb = np.zeros((2, 2, 3), np.uint8)
    pic = Picture(rgb=rgb)
    with pytest.raises(ValueError):
        pic.rgb[0, 0, 0] = 1
    rgb[0, 0, 0] = 255  # the caller's own array stays writable
    assert pic.float_rgb()[0, 0, 0] == 1.0 and pic.float_alpha() is None
    with pytest.raises(ValueError, match="bit_depth"):
        Picture(rgb=rgb, bit_depth=16)
    with pytest.raises(ValueError, match="alpha"):
        Picture(rgb=rgb, alpha=np.zeros((3, 3), np.uint8))


# --------------------------------------------------------------------------- save_image

PALETTE = np.array([[244, 236, 216], [200, 40, 50], [20, 45, 90], [240, 180, 40]], np.uint8)


def _indices(shape=(12, 16)) -> np.ndarray:
    return _rng().integers(0, len(PALETTE), shape)


def test_indexed_png_round_trip(tmp_path):
    idx = _indices()
    path = save_image(tmp_path / "out.png", idx, PALETTE)
    with Image.open(path) as im:
        assert im.mode == "P"
        assert np.array_equal(np.asarray(im), idx)  # indices kept as given
        assert np.array_equal(np.asarray(im.convert("RGB")), PALETTE[idx])
    assert np.array_equal(load_image(path).rgb, PALETTE[idx])


def test_png_binary_transparency_uses_trns(tmp_path):
    idx = _indices()
    alpha = np.where(_rng().random(idx.shape) < 0.3, 0, 255).astype(np.uint8)
    path = save_image(tmp_path / "t.png", idx, PALETTE, alpha=alpha)
    with Image.open(path) as im:
        assert im.mode == "P" and im.info["transparency"] == len(PALETTE)
        assert np.array_equal(np.asarray(im)[alpha > 0], idx[alpha > 0])
    pic = load_image(path)
    assert np.array_equal(pic.alpha, alpha)
    assert np.array_equal(pic.rgb[alpha > 0], PALETTE[idx][alpha > 0])


def test_png_partial_alpha_stays_a_palette_image_and_large_palettes_use_rgb(tmp_path):
    idx = _indices((4, 5))
    alpha = np.full(idx.shape, 255, np.uint16) * 257
    alpha[0, 0], alpha[1, 1] = 0, 128 * 257  # uint16 alpha as a Picture carries it
    path = save_image(tmp_path / "partial.png", idx, PALETTE, alpha=alpha)
    with Image.open(path) as im:
        assert im.mode == "P"  # partial alpha goes into the palette (tests/test_outputs.py)
    pic = load_image(path)
    assert pic.alpha[0, 0] == 0 and pic.alpha[1, 1] == 128
    assert np.array_equal(pic.rgb[pic.alpha > 0], PALETTE[idx][pic.alpha > 0])
    many = np.tile(np.arange(300, dtype=np.uint16)[:, None] % 256, (1, 3)).astype(np.uint8)
    with Image.open(save_image(tmp_path / "k300.png", np.arange(300).reshape(15, 20), many)) as im:
        assert im.mode == "RGB"


@pytest.mark.parametrize("suffix", [".png", ".tif", ".jpg"])
def test_dpi_kept(tmp_path, suffix):
    path = save_image(tmp_path / ("dpi" + suffix), _indices(), PALETTE, dpi=(300, 150))
    # PNG pHYs stores whole pixels per metre (ISO/IEC 15948 11.3.5.3): up to 0.0127 dpi off.
    assert load_image(path).dpi == pytest.approx((300, 150), abs=0.013)


def test_tiff_is_lzw_rgba(tmp_path):
    idx = _indices()
    alpha = np.where(idx == 0, 0, 255).astype(np.uint8)
    path = save_image(tmp_path / "out.tiff", idx, PALETTE, alpha=alpha)
    with Image.open(path) as im:
        assert im.mode == "RGBA" and im.info["compression"] == "tiff_lzw"
    pic = load_image(path)
    assert np.array_equal(pic.rgb, PALETTE[idx]) and np.array_equal(pic.alpha, alpha)


def test_jpeg_flattens_onto_white_with_warning(tmp_path):
    idx = np.zeros((32, 32), int)
    idx[:, 16:] = 1
    alpha = np.full(idx.shape, 255, np.uint8)
    alpha[:16] = 0
    with pytest.warns(ImageWarning, match="flattened onto white"):
        path = save_image(tmp_path / "out.jpg", idx, PALETTE, alpha=alpha)
    pic = load_image(path)
    assert pic.alpha is None
    # JPEG quality 95 is lossy: compare well inside flat areas.
    assert pic.rgb[4, 4].min() >= 250  # transparent -> white
    assert np.abs(pic.rgb[28, 28].astype(int) - PALETTE[1]).max() <= 6


def test_refuses_existing_without_force(tmp_path):
    path = tmp_path / "out.png"
    path.write_bytes(b"keep me")
    with pytest.raises(OutputError, match="already exists") as exc:
        save_image(path, _indices(), PALETTE)
    _one_line_naming(exc, path)
    assert path.read_bytes() == b"keep me"
    save_image(path, _indices(), PALETTE, force=True)
    assert load_image(path).shape == (12, 16)


def test_never_overwrites_an_input(tmp_path, monkeypatch):
    source = tmp_path / "in.png"
    Image.fromarray(_random_rgb8((4, 4, 3))).save(source)
    before = source.read_bytes()
    link = tmp_path / "link.png"
    link.symlink_to(source)
    monkeypatch.chdir(tmp_path)
    for target in (source, Path("in.png"), Path("sub/../in.png"), link):
        (tmp_path / "sub").mkdir(exist_ok=True)
        with pytest.raises(OutputError, match="input"):
            save_image(target, _indices(), PALETTE, force=True, inputs=[source])
    with pytest.raises(OutputError, match="input"):
        atomic_write_text(source, "x", force=True, inputs=["./in.png"])
    assert source.read_bytes() == before


def test_bad_destinations(tmp_path, monkeypatch):
    with pytest.raises(OutputError, match=r"unsupported output extension '\.bmp'.*\.png, .*\.tif"):
        save_image(tmp_path / "out.bmp", _indices(), PALETTE)
    with pytest.raises(OutputError, match="does not exist"):
        save_image(tmp_path / "nowhere" / "out.png", _indices(), PALETTE)
    (tmp_path / "dir.png").mkdir()
    with pytest.raises(OutputError, match="is a folder"):
        save_image(tmp_path / "dir.png", _indices(), PALETTE)
    # Tests may run as root, for whom permission bits do not bind; simulate a read-only folder.
    monkeypatch.setattr(images.os, "access", lambda path, mode: False)
    with pytest.raises(OutputError, match="not writable"):
        save_image(tmp_path / "out.png", _indices(), PALETTE)


@pytest.mark.parametrize("suffix", [".png", ".tif"])
def test_failed_write_leaves_nothing_behind(tmp_path, monkeypatch, suffix):
    # Indexed PNGs come from quantize's own encoder, TIFFs from Pillow: a
    # failure while encoding or writing either leaves the old file as it was
    # (tests/test_write_faults.py fills a disk for real).
    path = tmp_path / f"out{suffix}"
    save_image(path, _indices(), PALETTE)
    before = path.read_bytes()

    def broken_save(self, fp, *args, **kwargs):
        fp.write(b"II*\x00 half a file")
        raise OSError(28, "No space left on device")

    def broken_fsync(fd):
        raise OSError(28, "No space left on device")

    monkeypatch.setattr(Image.Image, "save", broken_save)
    monkeypatch.setattr(os, "fsync", broken_fsync)
    with pytest.raises(OutputError, match="No space left on device") as exc:
        save_image(path, np.zeros((12, 16), int), PALETTE, force=True)
    _one_line_naming(exc, path)
    assert path.read_bytes() == before
    assert sorted(p.name for p in tmp_path.iterdir()) == [path.name]


def test_atomic_text_and_bytes(tmp_path):
    path = tmp_path / "report.json"
    assert atomic_write_text(path, '{"inks": 6, "name": "crème"}\n') == path
    assert path.read_text(encoding="utf-8") == '{"inks": 6, "name": "crème"}\n'
    mask = os.umask(0o022)
    os.umask(mask)
    assert path.stat().st_mode & 0o777 == 0o666 & ~mask  # not mkstemp's 0600
    with pytest.raises(OutputError, match="already exists"):
        atomic_write_bytes(path, b"other")
    os.chmod(path, 0o640)
    atomic_write_bytes(path, b"other", force=True)
    assert path.read_bytes() == b"other" and path.stat().st_mode & 0o777 == 0o640
    assert sorted(p.name for p in tmp_path.iterdir()) == ["report.json"]


@pytest.mark.parametrize(
    ("indices", "palette", "kwargs", "match"),
    [
        (np.zeros((2, 2), float), PALETTE, {}, "integer"),
        (np.zeros((2, 2, 1), int), PALETTE, {}, r"\(H, W\)"),
        (np.full((2, 2), 4), PALETTE, {}, "outside the palette"),
        (np.zeros((2, 2), int), PALETTE.astype(np.int32), {}, "uint8"),
        (np.zeros((2, 2), int), PALETTE[:, :2], {}, r"\(k, 3\)"),
        (np.zeros((2, 2), int), PALETTE, {"alpha": np.zeros((3, 3), np.uint8)}, "alpha"),
        (np.zeros((2, 2), int), PALETTE, {"dpi": (300, -1)}, "dpi"),
    ],
)
def test_save_image_validates_arrays(tmp_path, indices, palette, kwargs, match):
    with pytest.raises(ValueError, match=match):
        save_image(tmp_path / "x.png", indices, palette, **kwargs)
    assert not list(tmp_path.iterdir())


# --------------------------------------------------------------------------- PNG data that ends early

def _png(width, height, rows: bytes, *, interlace=0) -> bytes:
    """An 8-bit RGB PNG from filtered row bytes (PNG specification, ISO/IEC 15948)."""
    def chunk(kind, body):
        return struct.pack(">I", len(body)) + kind + body + struct.pack(">I", zlib.crc32(kind + body) & 0xFFFFFFFF)

    ihdr = struct.pack(">IIBBBBB", width, height, 8, 2, 0, 0, interlace)
    return (b"\x89PNG\r\n\x1a\n" + chunk(b"IHDR", ihdr) + chunk(b"IDAT", zlib.compress(rows))
            + chunk(b"IEND", b""))


def _rows(pixels: np.ndarray) -> bytes:
    return b"".join(b"\x00" + row.tobytes() for row in pixels)


def _adam7(pixels: np.ndarray) -> bytes:
    # The seven passes of Adam7 interlacing (PNG specification, section 8.2).
    passes = ((0, 0, 8, 8), (4, 0, 8, 8), (0, 4, 4, 8), (2, 0, 4, 4), (0, 2, 2, 4), (1, 0, 2, 2), (0, 1, 1, 2))
    return b"".join(_rows(pixels[y0::dy, x0::dx]) for x0, y0, dx, dy in passes if pixels[y0::dy, x0::dx].size)


@pytest.fixture()
def cat_pixels():
    # A 29 x 37 crop of scikit-image's "chelsea" sample photo: odd sizes exercise
    # the partial Adam7 blocks.
    from skimage import data

    return np.ascontiguousarray(data.chelsea()[100:129, 200:237])


def test_a_png_whose_data_ends_before_its_last_row_is_refused(tmp_path, cat_pixels):
    h, w = cat_pixels.shape[:2]
    path = tmp_path / "short.png"
    path.write_bytes(_png(w, h + 10, _rows(cat_pixels)))  # the header promises 10 rows more
    with Image.open(path) as im:
        im.load()  # Pillow itself reads it, the missing rows as zeros
        assert not np.asarray(im)[h:].any()
    with pytest.raises(ImageReadError, match="truncated or damaged") as exc:
        load_image(path)
    _one_line_naming(exc, path)


def test_complete_pngs_with_black_last_rows_are_read(tmp_path, cat_pixels):
    pixels = cat_pixels.copy()
    pixels[-3:] = 0  # black last rows make the reader count the data, and it is all there
    for interlace, rows in ((0, _rows(pixels)), (1, _adam7(pixels))):
        path = tmp_path / f"black-{interlace}.png"
        path.write_bytes(_png(pixels.shape[1], pixels.shape[0], rows, interlace=interlace))
        with Image.open(path) as im:
            np.testing.assert_array_equal(np.asarray(im.convert("RGB")), pixels)  # Pillow agrees it is whole
        np.testing.assert_array_equal(load_image(path).rgb, pixels)


def test_an_interlaced_png_that_ends_early_is_refused(tmp_path, cat_pixels):
    data = _adam7(cat_pixels)
    path = tmp_path / "short-interlaced.png"
    path.write_bytes(_png(cat_pixels.shape[1], cat_pixels.shape[0], data[: len(data) * 3 // 4], interlace=1))
    with pytest.raises(ImageReadError, match="truncated or damaged") as exc:
        load_image(path)
    _one_line_naming(exc, path)


def test_a_16_bit_png_whose_data_ends_early_is_refused(tmp_path, cat_pixels):
    # 16-bit colour PNGs take the reader that keeps both bytes; the same check applies.
    # Samples are scikit-image's "chelsea" crop scaled to 16 bits (x 257).
    deep = (cat_pixels.astype(">u2") * 257).astype(">u2")
    h, w = deep.shape[:2]

    def chunk(kind, body):
        return struct.pack(">I", len(body)) + kind + body + struct.pack(">I", zlib.crc32(kind + body) & 0xFFFFFFFF)

    def png16(height):
        ihdr = struct.pack(">IIBBBBB", w, height, 16, 2, 0, 0, 0)
        return (b"\x89PNG\r\n\x1a\n" + chunk(b"IHDR", ihdr) + chunk(b"IDAT", zlib.compress(_rows(deep)))
                + chunk(b"IEND", b""))

    whole = tmp_path / "whole16.png"
    whole.write_bytes(png16(h))
    pic = load_image(whole)
    assert pic.bit_depth == 16
    np.testing.assert_array_equal(pic.rgb, deep.astype(np.uint16))
    short = tmp_path / "short16.png"
    short.write_bytes(png16(h + 7))
    with pytest.raises(ImageReadError, match="truncated or damaged") as exc:
        load_image(short)
    _one_line_naming(exc, short)


# --------------------------------------------------------------------------- CMYK through a press profile

_D50_XY = (0.3457, 0.3585)  # CIE 15:2004 table T.3, the ICC PCS illuminant's chromaticity


def _press_lab(cmyk01: np.ndarray, *, paper: float = 0.9) -> np.ndarray:
    """An invented press (demo data, not a real characterisation): each ink absorbs part of the light,
    black darkens everything; the paper reflects `paper`. CMYK 0-1 -> CIELAB (D50) via colour-science."""
    colour = pytest.importorskip("colour")
    c = np.asarray(cmyk01, float)
    linear = paper * (1 - 0.85 * c[..., :3]) ** 1.6 * (1 - 0.92 * c[..., 3:4]) ** 1.6
    xyz = colour.RGB_to_XYZ(linear, colour.RGB_COLOURSPACES["sRGB"], illuminant=np.array(_D50_XY),
                            chromatic_adaptation_transform="Bradford")
    return colour.XYZ_to_Lab(xyz, np.array(_D50_XY))


def _s15(v: float) -> bytes:
    return struct.pack(">i", int(round(v * 65536)))  # s15Fixed16Number, ICC.1:2001-04 5.1.3


def _cmyk_profile(path: Path, *, grid: int = 6, paper: float = 0.9, name: bytes = b"Test press") -> Path:
    """A version 2 output profile (ICC.1:2001-04) whose A2B0 lut16Type (6.5.7) samples :func:`_press_lab`
    on a grid; Lab PCS in the 16-bit legacy encoding (L* 0-100 -> 0-0xFF00, a*/b* (v + 128) * 256)."""
    nodes = np.linspace(0, 1, grid)
    at = np.stack(np.meshgrid(nodes, nodes, nodes, nodes, indexing="ij"), -1).reshape(-1, 4)  # C varies slowest
    lab = _press_lab(at, paper=paper)
    clut = np.column_stack([np.rint(np.clip(lab[:, 0], 0, 100) * 652.8),
                            np.rint((np.clip(lab[:, 1:], -128, 127.99) + 128) * 256)]).astype(">u2").tobytes()
    identity = struct.pack(">2H", 0, 65535)
    mft2 = (b"mft2" + bytes(4) + bytes([4, 3, grid, 0]) + b"".join(_s15(v) for v in (1, 0, 0, 0, 1, 0, 0, 0, 1))
            + struct.pack(">HH", 2, 2) + identity * 4 + clut + identity * 3)
    text = name + b"\0"
    tags = [(b"desc", b"desc" + bytes(4) + struct.pack(">I", len(text)) + text + bytes(8 + 3 + 67)),
            (b"wtpt", b"XYZ " + bytes(4) + _s15(0.9642) + _s15(1.0) + _s15(0.8249)),
            (b"cprt", b"text" + bytes(4) + b"Test data\0"),
            (b"A2B0", mft2)]
    start, table, data = 128 + 4 + 12 * len(tags), b"", b""
    for sig, body in tags:
        data += bytes(-(start + len(data)) % 4)  # tag data starts on a 4-byte boundary
        table += sig + struct.pack(">II", start + len(data), len(body))
        data += body
    header = (struct.pack(">I", start + len(data)) + bytes(4) + bytes([2, 0x10, 0, 0]) + b"prtrCMYKLab "
              + bytes(12) + b"acsp" + bytes(24 + 4) + _s15(0.9642) + _s15(1.0) + _s15(0.8249) + bytes(48))
    assert len(header) == 128
    path.write_bytes(header + struct.pack(">I", len(tags)) + table + data)
    return path


def _de00_to_reference(rgb8: np.ndarray, cmyk8: np.ndarray, **press) -> np.ndarray:
    """ΔE00 of decoded sRGB codes from the press model's own colour, each through colour-science
    (CIELAB D50 -> XYZ -> Bradford to D65 -> sRGB, IEC 61966-2-1), the reference quantised to 8 bits."""
    colour = pytest.importorskip("colour")
    d50 = np.array(_D50_XY)
    want = colour.XYZ_to_sRGB(colour.Lab_to_XYZ(_press_lab(cmyk8 / 255.0, **press), d50), illuminant=d50,
                              chromatic_adaptation_transform="Bradford")
    lab = [colour.XYZ_to_Lab(colour.sRGB_to_XYZ(v)) for v in (rgb8 / 255.0, np.rint(np.clip(want, 0, 1) * 255) / 255)]
    return colour.delta_E(lab[0], lab[1], method="CIE 2000")


def _cmyk_grid_image(path: Path) -> np.ndarray:
    # Values on the profile's grid nodes (multiples of 51), so its interpolation adds no error of its own.
    cmyk = (np.random.default_rng(3).integers(0, 6, (12, 16, 4)) * 51).astype(np.uint8)
    Image.fromarray(cmyk, "CMYK").save(path)
    return cmyk


def test_cmyk_without_profile_is_read_through_the_profile_given(tmp_path):
    cmyk = _cmyk_grid_image(tmp_path / "art.tif")
    press = _cmyk_profile(tmp_path / "press.icc")
    with warnings.catch_warnings():
        warnings.simplefilter("error", ProfileWarning)  # the profile given is no guess: no warning
        pic = load_image(tmp_path / "art.tif", cmyk_profile=press)
    assert _de00_to_reference(pic.rgb, cmyk).max() < 1.0
    assert pic.profile == f"Test press (assumed: {press})"  # says which was assumed
    # The naive formula is far from this press: the check above can fail.
    with pytest.warns(ProfileWarning, match="--cmyk-profile"):
        naive = load_image(tmp_path / "art.tif")
    assert _de00_to_reference(naive.rgb, cmyk).max() > 5.0


def test_assume_cmyk_profile_applies_within_its_block_and_is_restored(tmp_path):
    _cmyk_grid_image(tmp_path / "art.tif")
    press = _cmyk_profile(tmp_path / "press.icc")
    direct = load_image(tmp_path / "art.tif", cmyk_profile=press)
    with images.assume_cmyk_profile(press):
        assert images.assumed_cmyk_profile() == str(press)
        inside = load_image(tmp_path / "art.tif")
        as_pic = as_picture(tmp_path / "art.tif")
    assert images.assumed_cmyk_profile() is None
    np.testing.assert_array_equal(inside.rgb, direct.rgb)
    np.testing.assert_array_equal(as_pic.rgb, direct.rgb)


def test_an_embedded_cmyk_profile_wins_over_the_one_given(tmp_path):
    cmyk = _cmyk_grid_image(tmp_path / "plain.tif")
    own = _cmyk_profile(tmp_path / "own.icc", paper=0.7, name=b"Own press")
    Image.fromarray(cmyk, "CMYK").save(tmp_path / "tagged.tif", icc_profile=own.read_bytes())
    pic = load_image(tmp_path / "tagged.tif", cmyk_profile=_cmyk_profile(tmp_path / "other.icc"))
    assert pic.profile == "Own press"
    assert _de00_to_reference(pic.rgb, cmyk, paper=0.7).max() < 1.0


def test_a_cmyk_profile_that_is_not_one_is_refused_naming_it(tmp_path):
    _cmyk_grid_image(tmp_path / "art.tif")
    rgb = tmp_path / "srgb.icc"
    rgb.write_bytes(ImageCms.ImageCmsProfile(ImageCms.createProfile("sRGB")).tobytes())
    junk = tmp_path / "junk.icc"
    junk.write_bytes(b"\0" * 500)
    for bad, words in ((rgb, "not CMYK"), (junk, "not an ICC profile"), (tmp_path / "none.icc", "no such")):
        with pytest.raises(ImageReadError, match=words) as err:
            load_image(tmp_path / "art.tif", cmyk_profile=bad)
        assert str(err.value).startswith(str(bad))


def test_cmyk_profile_option_on_reduce_and_batch(tmp_path):
    from click.testing import CliRunner

    from quantize.cli.main import main

    (tmp_path / "in").mkdir()
    cmyk = _cmyk_grid_image(tmp_path / "in" / "art.tif")
    press = _cmyk_profile(tmp_path / "press.icc")
    out = tmp_path / "r.tif"
    res = CliRunner().invoke(main, ["reduce", str(tmp_path / "in" / "art.tif"), "-o", str(out), "-k", "256",
                                    "--cmyk-profile", str(press)])
    assert res.exit_code == 0 and "naive" not in res.output, res.output
    with Image.open(out) as im:  # 192 pixels, so at most 192 colours: all kept, and the file shows the reading
        assert _de00_to_reference(np.asarray(im.convert("RGB")), cmyk).max() < 1.5
    res = CliRunner().invoke(main, ["batch", str(tmp_path / "in"), "-o", str(tmp_path / "b"), "-k", "256",
                                    "--format", "tif", "--workers", "2", "--cmyk-profile", str(press)])
    assert res.exit_code == 0, res.output
    with Image.open(tmp_path / "b" / "art.tif") as im:  # read in a worker process
        assert _de00_to_reference(np.asarray(im.convert("RGB")), cmyk).max() < 1.5
    import json

    manifest = json.loads((tmp_path / "b" / "manifest.json").read_text())
    assert manifest["settings"]["cmyk_profile"] == str(press)  # a rerun with another profile redoes the images
    res = CliRunner().invoke(main, ["reduce", str(tmp_path / "in" / "art.tif"), "-o", str(tmp_path / "x.png"),
                                    "--cmyk-profile", str(tmp_path / "in" / "art.tif")])
    assert res.exit_code == 2 and "not an ICC profile" in res.output and not (tmp_path / "x.png").exists()
