"""CIELAB images: TIFF CIELAB (8 and 16 bits), ICCLAB, Pillow's LAB mode, and damaged Lab TIFFs.

References used here:
- colour-science (colour.XYZ_to_Lab / Lab_to_XYZ, colour.chromatic_adaptation with the Bradford transform,
  colour.sRGB_to_XYZ / XYZ_to_sRGB) as the reference conversion, test-only.
- TIFF 6.0 section 23 for the 8-bit CIELAB codes (L* * 255 / 100, a*, b* as signed bytes); the 16-bit
  scaling (L* * 65535 / 100, a*, b* * 256 as signed 16-bit) is libtiff's, from memory.
- Pillow's own RGB -> LAB conversion, for its LAB mode files (its bands hold a*, b* + 128).
"""

from __future__ import annotations

import warnings

import numpy as np
import pytest
import tifffile
from click.testing import CliRunner
from PIL import Image

from quantize.cli.main import main
from quantize.errors import ImageReadError
from quantize.io.read import as_picture, check_image_file, load_image

colour = pytest.importorskip("colour")

_OBS = "CIE 1931 2 Degree Standard Observer"


def _ccs(name: str) -> np.ndarray:
    return colour.CCS_ILLUMINANTS[_OBS][name]


def _srgb_to_lab(rgb, white="D50") -> np.ndarray:
    """colour-science: sRGB (D65) -> XYZ -> Bradford to ``white`` -> CIELAB under ``white``."""
    xyz = colour.sRGB_to_XYZ(rgb)
    if white != "D65":
        xyz = colour.chromatic_adaptation(xyz, colour.xy_to_XYZ(_ccs("D65")), colour.xy_to_XYZ(_ccs(white)),
                                          method="Von Kries", transform="Bradford")
    return colour.XYZ_to_Lab(xyz, _ccs(white))


def _lab_to_srgb(lab, white="D50") -> np.ndarray:
    """colour-science: CIELAB under ``white`` -> XYZ -> Bradford to D65 -> sRGB, unclipped."""
    xyz = colour.Lab_to_XYZ(lab, _ccs(white))
    if white != "D65":
        xyz = colour.chromatic_adaptation(xyz, colour.xy_to_XYZ(_ccs(white)), colour.xy_to_XYZ(_ccs("D65")),
                                          method="Von Kries", transform="Bradford")
    return colour.XYZ_to_sRGB(xyz)


def _encode(lab: np.ndarray, bits: int) -> np.ndarray:
    """TIFF CIELAB codes of ``lab`` (TIFF 6.0 section 23; 16-bit as libtiff, from memory)."""
    if bits == 8:
        ab = np.clip(np.rint(lab[..., 1:]), -128, 127).astype(np.int8).view(np.uint8)
        return np.concatenate([np.rint(lab[..., :1] * 2.55).astype(np.uint8), ab], axis=-1)
    ab = np.clip(np.rint(lab[..., 1:] * 256), -32768, 32767).astype(np.int16).view(np.uint16)
    return np.concatenate([np.rint(lab[..., :1] * 655.35).astype(np.uint16), ab], axis=-1)


def _decode(codes: np.ndarray, bits: int) -> np.ndarray:
    """The same codes back to CIELAB, written out from the spec independently of the package."""
    signed = codes[..., 1:].view(np.int8 if bits == 8 else np.int16).astype(np.float64)
    top, scale = (255.0, 1.0) if bits == 8 else (65535.0, 256.0)
    return np.concatenate([codes[..., :1] * (100.0 / top), signed / scale], axis=-1)


def _held_out_rgb() -> np.ndarray:
    """An 8 x 12 crop of scikit-image's astronaut photograph (a colour sample no generator here tuned)."""
    from skimage import data

    return data.astronaut()[200:296:12, 150:294:12].astype(np.float64) / 255.0


def _read(path):
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        pic = load_image(path)
    return pic, [str(w.message) for w in caught]


@pytest.mark.parametrize("bits", [8, 16])
def test_cielab_tiff_matches_colour_science_round_trip(tmp_path, bits):
    rgb = _held_out_rgb()
    codes = _encode(_srgb_to_lab(rgb), bits)
    path = tmp_path / f"lab{bits}.tif"
    tifffile.imwrite(path, codes, photometric="cielab")
    pic, notes = _read(path)
    assert pic.bit_depth == bits and pic.rgb.dtype == (np.uint8 if bits == 8 else np.uint16)
    top = 255 if bits == 8 else 65535
    # Reference: colour-science decodes the very same codes (Lab_to_XYZ, Bradford D50 -> D65, XYZ_to_sRGB).
    expected = np.clip(_lab_to_srgb(_decode(codes, bits)), 0, 1)
    got = pic.rgb / top
    # colour-science's sRGB uses the 4-decimal IEC matrix, the package the matrix derived from the
    # primaries (docs/method.md): they differ by about 1e-4; 8-bit output adds half a code.
    assert np.abs(got - expected).max() < (0.6 / 255 + 3e-4 if bits == 8 else 3e-4)
    # And against the photograph itself: 16-bit Lab codes keep it to within one 8-bit code.
    if bits == 16:
        assert np.abs(got - rgb).max() < 1.0 / 255
    else:  # 8-bit codes round a*, b* to whole units; colour-science's own decode bounds what is possible
        assert np.abs(got - rgb).max() <= np.abs(expected - rgb).max() + 0.6 / 255 + 3e-4
    assert not [n for n in notes if "clipped" in n], notes  # the photograph lies inside sRGB
    assert check_image_file(path) == (rgb.shape[1], rgb.shape[0])


def test_known_patch_d50_lab_of_an_srgb_colour(tmp_path):
    # The D50 Lab of sRGB (0.8, 0.2, 0.3), by colour-science; the file holds it as 16-bit CIELAB.
    rgb = np.array([0.8, 0.2, 0.3])
    lab = _srgb_to_lab(rgb)
    assert 40 < lab[0] < 60 and lab[1] > 50  # a saturated red-pink: colour-science, sanity of the reference
    path = tmp_path / "patch.tif"
    tifffile.imwrite(path, np.broadcast_to(_encode(lab, 16), (4, 4, 3)).copy(), photometric="cielab")
    pic, _ = _read(path)
    assert np.abs(pic.rgb[0, 0] / 65535 - rgb).max() < 2e-4
    assert "D50" in pic.profile


def test_tagged_white_point_is_honoured(tmp_path):
    # Lab under D65 (WhitePoint tag 318 = the D65 chromaticity of CIE 15:2004): no adaptation is due.
    rgb = _held_out_rgb()
    codes = _encode(_srgb_to_lab(rgb, white="D65"), 16)
    path = tmp_path / "d65.tif"
    white = (3127, 10000, 3290, 10000)
    tifffile.imwrite(path, codes, photometric="cielab", extratags=[(318, 5, 2, white, True)])
    pic, _ = _read(path)
    assert np.abs(pic.rgb / 65535 - rgb).max() < 1.0 / 255
    assert "D65" in pic.profile
    # The same codes read as D50 (no tag) come out measurably different: the tag is what made it right.
    tifffile.imwrite(tmp_path / "untagged.tif", codes, photometric="cielab")
    assert np.abs(_read(tmp_path / "untagged.tif")[0].rgb / 65535 - rgb).max() > 2.0 / 255


def test_signed_sample_format_reads_the_same(tmp_path):
    codes = _encode(_srgb_to_lab(_held_out_rgb()), 16)
    tifffile.imwrite(tmp_path / "u.tif", codes, photometric="cielab")
    tifffile.imwrite(tmp_path / "s.tif", codes.view(np.int16), photometric="cielab")
    assert np.array_equal(_read(tmp_path / "u.tif")[0].rgb, _read(tmp_path / "s.tif")[0].rgb)


def test_pillow_lab_mode_file_and_image(tmp_path):
    rgb8 = (_held_out_rgb() * 255).round().astype(np.uint8)
    lab_img = Image.fromarray(rgb8).convert("LAB")
    # Pillow's bands hold a*, b* + 128 (ICC style): red's a* of about 81 (D50, colour-science) is 209.
    red = Image.new("RGB", (1, 1), (255, 0, 0)).convert("LAB").getpixel((0, 0))
    assert abs(red[1] - 128 - _srgb_to_lab(np.array([1.0, 0, 0]))[1]) < 1.0
    path = tmp_path / "pillow_lab.tif"
    lab_img.save(path)
    pic, _ = _read(path)
    from_image = as_picture(lab_img)
    # Both routes (tifffile's signed bytes, Pillow's offset bands) decode the same.
    assert np.array_equal(pic.rgb, from_image.rgb)
    # 8-bit Lab rounds a*, b* to whole units: a few 8-bit codes, never more.
    assert np.abs(pic.rgb.astype(int) - rgb8).max() <= 4
    assert np.abs(pic.rgb.astype(int) - rgb8).mean() < 1.0


def test_iccLab_8bit(tmp_path):
    rgb = _held_out_rgb()
    lab = _srgb_to_lab(rgb)
    codes = np.concatenate([np.rint(lab[..., :1] * 2.55), np.clip(np.rint(lab[..., 1:] + 128), 0, 255)],
                           axis=-1).astype(np.uint8)
    path = tmp_path / "icclab.tif"
    tifffile.imwrite(path, codes, photometric=9)  # ICCLAB: a*, b* offset by 128 (ICC.1:2010 6.3.4.2)
    expected = np.clip(_lab_to_srgb(np.concatenate([codes[..., :1] / 2.55, codes[..., 1:] - 128.0], -1)), 0, 1)
    assert np.abs(_read(path)[0].rgb / 255 - expected).max() < 0.6 / 255 + 3e-4


def test_out_of_gamut_pixels_are_clipped_with_one_note_counting_them(tmp_path):
    lab = np.broadcast_to(_srgb_to_lab(np.array([0.5, 0.5, 0.5])), (4, 5, 3)).copy()
    lab[0, :3] = [50.0, 120.0, -120.0]  # far outside sRGB (colour-science gives R or B well beyond 0-1)
    assert np.abs(_lab_to_srgb(lab[0, 0]) - 0.5).max() > 0.5
    path = tmp_path / "wide.tif"
    tifffile.imwrite(path, _encode(lab, 16), photometric="cielab")
    pic, notes = _read(path)
    clipped = [n for n in notes if "clipped" in n]
    assert len(clipped) == 1 and "3 of 20 pixels" in clipped[0] and clipped[0].startswith(str(path)), notes
    assert pic.rgb.min() >= 0 and np.abs(pic.rgb[1:] / 65535 - 0.5).max() < 2e-4


def _spp_damaged(path, src):
    """Copy ``src`` with its SamplesPerPixel tag (277) set to 2."""
    data = bytearray(src.read_bytes())
    with tifffile.TiffFile(src) as tif:
        offset = tif.pages[0].tags["SamplesPerPixel"].valueoffset
    data[offset:offset + 2] = (2).to_bytes(2, "little")
    path.write_bytes(bytes(data))


@pytest.mark.parametrize("damage", ["truncated", "samples", "itulab"])
def test_damaged_lab_tiff_is_refused_in_one_line(tmp_path, damage):
    good = tmp_path / "good.tif"
    tifffile.imwrite(good, _encode(_srgb_to_lab(_held_out_rgb()), 16), photometric="cielab")
    bad = tmp_path / f"bad-{damage}.tif"
    if damage == "truncated":
        bad.write_bytes(good.read_bytes()[: good.stat().st_size * 2 // 3])
    elif damage == "samples":
        _spp_damaged(bad, good)
    else:
        tifffile.imwrite(bad, np.zeros((4, 4, 3), np.uint8), photometric=10)
    with pytest.raises(ImageReadError) as info:
        _read(bad)
    text = str(info.value)
    assert text.startswith(str(bad)) and "\n" not in text, text
    res = CliRunner().invoke(main, ["reduce", str(bad), "-o", str(tmp_path / "o.png"), "-k", "3"])
    assert res.exit_code == 1 and "Traceback" not in res.output
    errors = [ln for ln in res.stderr.splitlines() if ln.startswith("quantize: error:")]
    assert len(errors) == 1 and str(bad) in errors[0], res.stderr
    assert not (tmp_path / "o.png").exists()


def test_reduce_reads_a_16bit_lab_tiff(tmp_path):
    # Three flat patches of known colours (invented, demo data) in 16-bit D50 CIELAB: a 3-colour reduction
    # gives back those colours, measured from the output file's pixels.
    inks = np.array([[0.8, 0.2, 0.3], [0.1, 0.4, 0.7], [0.95, 0.9, 0.6]])
    rgb = np.repeat(inks, 8, axis=0).reshape(3, 8, 3).repeat(8, axis=0)  # 24 x 8
    path = tmp_path / "art.tif"
    tifffile.imwrite(path, _encode(_srgb_to_lab(rgb), 16), photometric="cielab")
    out = tmp_path / "art.png"
    res = CliRunner().invoke(main, ["reduce", str(path), "-o", str(out), "-k", "3", "--restarts", "1"])
    assert res.exit_code == 0, res.output
    got = np.asarray(Image.open(out).convert("RGB")).reshape(-1, 3) / 255.0
    for ink in inks:
        assert np.abs(got - ink).max(axis=1).min() < 1.0 / 255


def test_alpha_and_planar_lab(tmp_path):
    # L* = 200 * 100 / 255 with a* = b* = 0 is a neutral grey: colour-science gives its sRGB code.
    grey = np.clip(_lab_to_srgb(np.array([200 * 100 / 255, 0.0, 0.0]), white="D50"), 0, 1)
    a = np.zeros((3, 4, 4), np.uint8)
    a[..., 0], a[..., 3] = 200, [0, 255, 128, 255]
    tifffile.imwrite(tmp_path / "la.tif", a, photometric="cielab", extrasamples=[2], planarconfig="contig")
    pic, _ = _read(tmp_path / "la.tif")
    assert np.array_equal(pic.alpha, a[..., 3]) and np.abs(pic.rgb / 255 - grey).max() < 0.6 / 255 + 3e-4
    tifffile.imwrite(tmp_path / "planar.tif", np.moveaxis(a[..., :3], -1, 0).copy(), photometric="cielab",
                     planarconfig="separate")
    assert np.array_equal(_read(tmp_path / "planar.tif")[0].rgb, pic.rgb)
