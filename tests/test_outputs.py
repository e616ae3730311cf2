"""Web and catalogue outputs, measured by reading the written files back.

Sources: the PNG specification (ISO/IEC 15948:2004: colour type 3 with one
tRNS alpha per palette entry, section 11.3.2.1) and the GIF 89a
specification (one transparent colour index), through Pillow's decoders
as reference readers; WebP lossless through Pillow's libwebp decoder;
CIELAB (D65) and CIEDE2000 from colour-science (Sharma et al. 2005 as it
implements them) as the reference for the ΔE00 of a decoded JPEG.
"""

from __future__ import annotations

import json

import numpy as np
import pytest
from click.testing import CliRunner
from PIL import Image

from quantize.cli.main import main
from quantize.core.picture import ImageWarning
from quantize.errors import OutputError
from quantize.io.read import as_picture
from quantize.io.write import ALPHA_STEPS, save_image, write_image
from quantize.palette import Palette

PALETTE = np.array([[200, 30, 40], [20, 120, 200], [250, 240, 220], [30, 30, 30]], np.uint8)


def _sticker(size=64, k=4, seed=0):
    """Flat colour bands inside a disc whose edge is anti-aliased over a few pixels
    (invented demo data): many alpha levels, as on a sticker cut-out."""
    rng = np.random.default_rng(seed)
    yy, xx = np.mgrid[:size, :size]
    idx = ((xx * k) // size).astype(np.uint8)
    r = np.hypot(yy - size / 2 + 0.5, xx - size / 2 + 0.5)
    alpha = np.clip((size * 0.42 - r) / 4.0, 0, 1)  # a 4-pixel ramp from opaque to clear
    a8 = np.rint(alpha * 255).astype(np.uint8)
    a8[rng.random(a8.shape) < 0.01] = 255  # a few stray opaque pixels outside
    return idx, a8


def _rgba(path):
    with Image.open(path) as im:
        return np.asarray(im.convert("RGBA"))


def test_partial_alpha_is_kept_in_the_palette_of_an_indexed_png(tmp_path):
    idx, a8 = _sticker()
    assert len(np.unique(a8)) > 50  # the input really has many alpha levels
    w = write_image(tmp_path / "s.png", idx, PALETTE, alpha=a8)
    with Image.open(w.path) as im:
        assert im.mode == "P"
        trns = im.info["transparency"]  # PNG tRNS: one alpha per entry
        entries = np.array(im.getpalette(), np.uint8).reshape(-1, 3)
        file_idx = np.asarray(im)
    n = file_idx.max() + 1
    assert n <= 256 and w.palette_entries == n
    # The first k entries are the palette, opaque and in order.
    assert np.array_equal(entries[:4], PALETTE)
    alpha_of_entry = np.frombuffer(trns, np.uint8)
    alpha_of_entry = np.concatenate([alpha_of_entry, np.full(256, 255, np.uint8)])[:n]
    assert (alpha_of_entry[:4] == 255).all()
    rgba = _rgba(w.path)
    shown = a8 > 0
    # Every visible pixel shows its own palette colour, and alpha moves by at most half a step.
    visible = rgba[..., 3] > 0
    assert np.array_equal(rgba[visible][:, :3], PALETTE[idx][visible])
    change = np.abs(rgba[..., 3].astype(int) - a8)
    assert change.max() == w.alpha_max_change <= w.alpha_step // 2
    assert w.alpha_step == 1  # 4 colours and their edge levels fit 256 entries exactly
    assert np.array_equal(rgba[..., 3], a8)
    assert len(np.unique(rgba[..., 3][shown])) > 50


def test_alpha_levels_are_the_finest_that_fit(tmp_path):
    # 40 colours over a smooth alpha ramp: not every (colour, alpha) pair fits 256 entries.
    rng = np.random.default_rng(4)
    pal = rng.integers(0, 256, (40, 3)).astype(np.uint8)
    idx = rng.integers(0, 40, (60, 256)).astype(np.uint8)
    a8 = np.tile(np.arange(256, dtype=np.uint8), (60, 1))
    w = write_image(tmp_path / "ramp.png", idx, pal, alpha=a8)

    def entries(step):  # naive count: palette, one clear entry, each (colour, level) used
        q = (a8.astype(int) + step // 2) // step * step
        part = (q > 0) & (q < 255)
        return 40 + int((q == 0).any()) + len(set(zip(idx[part].tolist(), q[part].tolist())))

    assert entries(w.alpha_step) <= 256
    finer = ALPHA_STEPS[ALPHA_STEPS.index(w.alpha_step) - 1]
    assert entries(finer) > 256
    rgba = _rgba(w.path)
    assert np.abs(rgba[..., 3].astype(int) - a8).max() <= w.alpha_step // 2
    with Image.open(w.path) as im:
        assert im.mode == "P"


def _webp_colour_table(data: bytes) -> int | None:
    """Entries of a lossless WebP's colour-indexing transform, if it is the first transform.

    RFC 9649 (WebP lossless bitstream): a VP8L chunk starts with the byte 0x2f, then
    14 + 14 bits of width and height less one, an alpha bit and 3 version bits; then
    for each transform a 1 bit and a 2-bit type, type 3 being colour indexing, whose
    next 8 bits are the table size less one.
    """
    assert data[:4] == b"RIFF" and data[8:12] == b"WEBP"
    pos = 12
    while pos < len(data):
        tag, n = data[pos:pos + 4], int.from_bytes(data[pos + 4:pos + 8], "little")
        if tag == b"VP8L":
            body = data[pos + 8:pos + 8 + n]
            assert body[0] == 0x2F
            bits = int.from_bytes(body[1:9], "little")
            if (bits >> 32) & 1 and (bits >> 33) & 3 == 3:
                return ((bits >> 35) & 0xFF) + 1
            return None
        pos += 8 + n + (n & 1)
    return None


def test_lossless_webp_decodes_to_exactly_the_png(tmp_path):
    idx, a8 = _sticker(seed=2)
    png = write_image(tmp_path / "s.png", idx, PALETTE, alpha=a8)
    webp = write_image(tmp_path / "s.webp", idx, PALETTE, alpha=a8)
    with Image.open(webp.path) as im:
        assert im.format == "WEBP"
    # Lossless, and stored as a palette: a colour index of the PNG's entries.
    assert _webp_colour_table(webp.path.read_bytes()) == webp.palette_entries == png.palette_entries
    a, b = _rgba(png.path), _rgba(webp.path)
    assert np.array_equal(a, b)  # same colours and alpha, pixel for pixel
    colours = {tuple(c) for c in b[b[..., 3] > 0][:, :3]}
    assert colours <= {tuple(c) for c in PALETTE.tolist()}
    # Without alpha, too.
    w = write_image(tmp_path / "o.webp", idx, PALETTE)
    assert _webp_colour_table(w.path.read_bytes()) == 4
    with Image.open(w.path) as im:
        assert np.array_equal(np.asarray(im.convert("RGB")), PALETTE[idx])


def test_gif_has_one_transparent_index_and_thresholds_alpha(tmp_path):
    idx, a8 = _sticker(seed=3)
    with pytest.warns(ImageWarning, match="partly transparent pixels made opaque or clear"):
        path = save_image(tmp_path / "s.gif", idx, PALETTE, alpha=a8)
    with Image.open(path) as im:
        assert im.mode == "P"
        clear = im.info["transparency"]
        file_idx = np.asarray(im)
        entries = np.array(im.getpalette(), np.uint8).reshape(-1, 3)
    assert isinstance(clear, int)
    # Alpha 128 and above is opaque, below it fully transparent.
    assert np.array_equal(file_idx == clear, a8 < 128)
    opaque = a8 >= 128
    assert np.array_equal(entries[file_idx][opaque], PALETTE[idx][opaque])


def test_tiff_keeps_alpha_exactly(tmp_path):
    idx, a8 = _sticker(seed=5)
    w = write_image(tmp_path / "s.tif", idx, PALETTE, alpha=a8)
    rgba = _rgba(w.path)
    assert np.array_equal(rgba[..., 3], a8)
    assert np.array_equal(rgba[a8 > 0][:, :3], PALETTE[idx][a8 > 0])


def test_256_colours_with_transparency(tmp_path):
    big = np.tile(np.arange(256, dtype=np.uint8)[:, None], (1, 3))
    idx = np.arange(256).reshape(16, 16)
    # Entry 0 is used only by clear pixels: the transparent entry takes its place.
    w = write_image(tmp_path / "k256.png", idx, big, alpha=idx > 0)
    with Image.open(w.path) as im:
        assert im.mode == "P"
    rgba = _rgba(w.path)
    assert np.array_equal(rgba[..., 3] > 0, idx > 0)
    assert np.array_equal(rgba[idx > 0][:, :3], big[idx][idx > 0])
    # Every colour visible and one pixel clear: no palette image can hold it, and no RGBA
    # fallback is written in its place.
    idx2 = np.concatenate([idx, idx[:1]])
    alpha = np.full(idx2.shape, 255, np.uint8)
    alpha[-1, 0] = 0
    for ext in ("png", "gif", "webp"):
        with pytest.raises(OutputError, match="do not fit the 256 entries"):
            write_image(tmp_path / f"full.{ext}", idx2, big, alpha=alpha)
        assert not (tmp_path / f"full.{ext}").exists()


def test_reduce_refuses_256_colours_with_transparency_before_fitting(tmp_path, monkeypatch):
    import quantize.fit.engine as engine

    rng = np.random.default_rng(11)
    rgb = rng.integers(0, 256, (40, 40, 3)).astype(np.uint8)  # 1600 pixels: well over 256 distinct colours
    alpha = np.full((40, 40), 255, np.uint8)
    alpha[:4] = 0  # a clear band: it needs a fully transparent entry in the colour index
    src = tmp_path / "many.png"
    Image.fromarray(np.dstack([rgb, alpha])).save(src)
    fits = []
    real = engine.fit_palette
    monkeypatch.setattr(engine, "fit_palette", lambda *a, **kw: fits.append(1) or real(*a, **kw))
    for ext in ("png", "gif", "webp"):
        out = tmp_path / f"out.{ext}"
        r = CliRunner().invoke(main, ["reduce", str(src), "-o", str(out), "-k", "256"])
        assert r.exit_code == 2, r.output
        line = [ln for ln in r.output.splitlines() if ln.startswith("Error:")]
        assert len(line) == 1 and str(out) in line[0] and "transparency" in line[0] and "256 entries" in line[0]
        assert not out.exists() and "Traceback" not in r.output
    assert fits == []  # refused before any fitting work
    # 255 colours leave the transparent entry its room: written, an indexed PNG whose clear band is clear.
    out = tmp_path / "k255.png"
    r = CliRunner().invoke(main, ["reduce", str(src), "-o", str(out), "-k", "255", "--restarts", "1"])
    assert r.exit_code == 0, r.output
    assert fits == [1]
    with Image.open(out) as im:
        assert im.mode == "P"
    assert (_rgba(out)[:4, :, 3] == 0).all()


def _lab_colour_science(rgb8):
    # colour-science's sRGB with its matrix derived from the IEC 61966-2-1 primaries and
    # white, as quantize uses (its default is the 4-decimal matrix: close, not equal).
    colour = pytest.importorskip("colour")
    space = colour.RGB_COLOURSPACES["sRGB"].copy()
    space.use_derived_transformation_matrices(True)
    return colour.XYZ_to_Lab(colour.RGB_to_XYZ(rgb8 / 255.0, space, apply_cctf_decoding=True))


def test_jpeg_warns_and_its_delta_e_is_that_of_the_decoded_file(tmp_path):
    colour = pytest.importorskip("colour")
    rng = np.random.default_rng(7)
    rgb = rng.integers(0, 256, (48, 64, 3)).astype(np.uint8)
    rgb[:, 32:] = rgb[:, 32:] // 64 * 64 + 20  # a noisy half and a posterised half
    pic = as_picture(rgb)
    from quantize import fit_palette

    pal = fit_palette(pic, 5, seed=1, restarts=2)
    res = pal.apply(pic)
    with pytest.warns(ImageWarning, match="no longer the palette's 5 colours"):
        saved = res.write(tmp_path / "o.jpg", picture=pic)
    with Image.open(saved.file.path) as im:
        decoded = np.asarray(im.convert("RGB"))
    assert len(np.unique(decoded.reshape(-1, 3), axis=0)) > 5
    de = colour.delta_E(_lab_colour_science(rgb), _lab_colour_science(decoded), method="CIE 2000").ravel()
    assert saved.delta_e["mean"] == pytest.approx(de.mean(), abs=1e-6)
    assert saved.delta_e["max"] == pytest.approx(de.max(), abs=1e-6)
    assert saved.delta_e["mean"] != pytest.approx(res.delta_e["mean"], abs=1e-3)  # not the palette's
    assert saved.n_bytes == saved.file.path.stat().st_size


def test_jpeg_coverage_and_filtered_delta_e_are_those_of_the_decoded_file(tmp_path):
    # Coverage of a JPEG: the share of its decoded pixels nearest (CIEDE2000, colour-science as the
    # reference, Sharma et al. 2005) to each palette colour.  The JPEG is decoded here with Pillow.
    colour = pytest.importorskip("colour")
    from quantize.quality.perception import filtered_delta_e

    # Black, white and six greys 3 codes apart, as 1-px noise: the JPEG's ringing moves many grey
    # pixels nearer another grey, so its coverage differs from the palette image's.
    rng = np.random.default_rng(21)
    levels = np.array([0, 255, 120, 123, 126, 129, 132, 135], np.uint8)
    rgb = np.repeat(levels[rng.integers(0, 8, (48, 64))][..., None], 3, axis=2)
    src = tmp_path / "noise.png"
    Image.fromarray(rgb).save(src)
    out = tmp_path / "noise.jpg"
    r = _run("reduce", src, "-o", out, "-k", "8", "--restarts", "1", "--keep-palette", "--json",
             "--view-dpi", "150", "--view-distance", "400")
    assert r.exit_code == 0, r.output
    summary = json.loads(r.stdout)
    pal = Palette.load(tmp_path / "noise.palette.json")
    with Image.open(out) as im:
        decoded = np.asarray(im.convert("RGB"))
    de = colour.delta_E(_lab_colour_science(decoded)[:, :, None, :], _lab_colour_science(pal.rgb8)[None, None],
                        method="CIE 2000")
    nearest = de.argmin(axis=2)
    expected = 100.0 * np.bincount(nearest.ravel(), minlength=pal.k) / nearest.size
    reported = np.array([row["coverage"] for row in summary["palette"]])
    np.testing.assert_allclose(reported, expected, atol=1e-3)  # the summary rounds to 3 decimals
    palette_image = pal.apply(rgb).coverage
    assert np.abs(palette_image - expected).max() > 0.5  # the check can tell the file from the palette image
    # The filtered ΔE00 (S-CIELAB, checked in test_perception) of the pixels decoded here.
    want = filtered_delta_e(rgb, decoded, dpi=150, distance_mm=400)
    assert summary["delta_e_filtered"] == pytest.approx(want, abs=1e-9)
    assert summary["file"]["delta_e_filtered"] == summary["delta_e_filtered"]
    assert want["mean"] != pytest.approx(filtered_delta_e(rgb, pal.apply(rgb).rgb, dpi=150, distance_mm=400)["mean"],
                                         abs=1e-3)


def test_lossless_outputs_report_the_mapping_figures(tmp_path):
    # A lossless file shows exactly the mapped colours, so its ΔE00 is recomputed from the
    # file with colour-science and compared with what the tool reports.
    colour = pytest.importorskip("colour")
    rng = np.random.default_rng(8)
    rgb = rng.integers(0, 256, (40, 50, 3)).astype(np.uint8)
    pic = as_picture(rgb)
    from quantize import fit_palette

    res = fit_palette(pic, 6, seed=0, restarts=2).apply(pic)
    for ext in ("png", "webp", "gif", "tif"):
        saved = res.write(tmp_path / f"o.{ext}", picture=pic)
        decoded = _rgba(saved.file.path)[..., :3]
        de = colour.delta_E(_lab_colour_science(rgb), _lab_colour_science(decoded), method="CIE 2000")
        assert saved.delta_e["mean"] == pytest.approx(de.mean(), abs=1e-6), ext
        assert saved.n_bytes == saved.file.path.stat().st_size


def _run(*args):
    return CliRunner().invoke(main, [str(a) for a in args], catch_exceptions=False)


@pytest.fixture()
def sticker_file(tmp_path):
    idx, a8 = _sticker(size=48, seed=9)
    rgba = np.dstack([PALETTE[idx], a8])
    p = tmp_path / "sticker.png"
    Image.fromarray(rgba).save(p)
    return p


def test_cli_reduce_reports_the_file_it_wrote(sticker_file, tmp_path):
    out = tmp_path / "s.webp"
    r = _run("reduce", sticker_file, "-o", out, "-k", "4", "--json")
    assert r.exit_code == 0, r.output
    summary = json.loads(r.stdout)
    assert summary["file"]["bytes"] == out.stat().st_size
    assert summary["file"]["format"] == "WEBP"
    rgba = _rgba(out)
    assert len({tuple(c) for c in rgba[rgba[..., 3] > 0][:, :3]}) <= 4
    r = _run("reduce", sticker_file, "-o", tmp_path / "s.jpg", "-k", "4")
    assert r.exit_code == 0, r.output
    assert "kB" in r.output and "no longer 4 colours" in r.output
    r = _run("reduce", sticker_file, "-o", tmp_path / "s.bmp", "-k", "4")
    assert r.exit_code == 2  # a usage error, as click reports bad options
    assert "unsupported output extension '.bmp'" in r.output and "Traceback" not in r.output


def test_reduce_apply_and_batch_write_the_same_palette_image(sticker_file, tmp_path):
    ref = tmp_path / "ref.png"
    r = _run("reduce", sticker_file, "-o", ref, "-k", "4", "--keep-palette")
    assert r.exit_code == 0, r.output
    pal = tmp_path / "ref.palette.json"
    r = _run("apply", pal, sticker_file, "-o", tmp_path / "applied", "--json")
    assert r.exit_code == 0, r.output
    applied = tmp_path / "applied" / "sticker.png"
    assert json.loads(r.stdout)["images"][0]["file"]["bytes"] == applied.stat().st_size
    src = tmp_path / "in"
    src.mkdir()
    (src / "sticker.png").write_bytes(sticker_file.read_bytes())
    r = _run("batch", src, "-o", tmp_path / "batched", "--palette", pal, "--workers", "0", "--json")
    assert r.exit_code == 0, r.output
    batched = tmp_path / "batched" / "sticker.png"
    manifest = json.loads((tmp_path / "batched" / "manifest.json").read_text())
    assert manifest["images"][0]["bytes"] == batched.stat().st_size
    for path in (ref, applied, batched):
        with Image.open(path) as im:
            assert im.mode == "P" and "transparency" in im.info
    assert np.array_equal(_rgba(ref), _rgba(applied))
    assert np.array_equal(_rgba(ref), _rgba(batched))
    r = _run("batch", src, "-o", tmp_path / "gifs", "--palette", pal, "--workers", "0", "--format", "gif")
    assert r.exit_code == 0, r.output
    with Image.open(tmp_path / "gifs" / "sticker.gif") as im:
        assert im.mode == "P" and isinstance(im.info["transparency"], int)


def test_a_jpeg_with_no_opaque_pixel_is_written_and_says_its_delta_e_is_not_measured(tmp_path):
    # Every pixel half transparent: the JPEG flattens them all onto white, so no pixel
    # shows an input colour to compare with.
    rgba = np.dstack([PALETTE[_sticker(size=32)[0]], np.full((32, 32), 128, np.uint8)])
    src = tmp_path / "veil.png"
    Image.fromarray(rgba).save(src)
    out = tmp_path / "veil.jpg"
    r = _run("reduce", src, "-o", out, "-k", "3")
    assert r.exit_code == 0, r.output
    assert "not measured" in r.output and out.exists()
    folder = tmp_path / "in"
    folder.mkdir()
    (folder / "veil.png").write_bytes(src.read_bytes())
    r = _run("batch", folder, "-o", tmp_path / "out", "-k", "3", "--format", "jpg", "--workers", "0")
    assert r.exit_code == 0, r.output
    row = json.loads((tmp_path / "out" / "manifest.json").read_text())["images"][0]
    assert row["status"] == "ok" and row["delta_e"] is None
    assert row["bytes"] == (tmp_path / "out" / "veil.jpg").stat().st_size


def test_more_than_256_colours_png_and_webp_keep_every_colour_and_alpha(tmp_path):
    # Not a palette image: RGB(A), exact; a GIF cannot hold them and says so.
    rng = np.random.default_rng(11)
    pal = rng.integers(0, 256, (300, 3)).astype(np.uint8)
    idx = np.arange(300).reshape(15, 20)
    a8 = rng.integers(0, 256, idx.shape).astype(np.uint8)
    for ext in ("png", "webp"):
        w = write_image(tmp_path / f"many.{ext}", idx, pal, alpha=a8)
        assert w.palette_entries is None
        rgba = _rgba(w.path)
        assert np.array_equal(rgba[..., 3], a8)
        assert np.array_equal(rgba[a8 > 0][:, :3], pal[idx][a8 > 0])
    with pytest.raises(OutputError, match="300 colours and transparency do not fit"):
        write_image(tmp_path / "many.gif", idx, pal, alpha=a8)
