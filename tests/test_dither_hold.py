"""The hull hold of error diffusion on smooth pixels (issue 17: dithering that looks right).

Colours and colour differences are measured with colour-science (IEC 61966-2-1
sRGB decoding and encoding, CIE 1976 L*a*b* under D65, CIEDE2000 after Sharma
et al. 2005), not with the project's own conversions, and always from the
output pixels.
"""

from __future__ import annotations

from pathlib import Path

import colour
import numpy as np
import pytest

from quantize.palette import Palette
from quantize.render import dither as qd

SAMPLES = Path(__file__).resolve().parents[1] / "sample_images"


def _lab(rgb8):
    """CIELAB (D65) of encoded 8-bit sRGB pixels, by colour-science."""
    return colour.XYZ_to_Lab(colour.sRGB_to_XYZ(np.asarray(rgb8, np.float64) / 255.0))


def _lab_of_mean(rgb):
    """CIELAB of the mean colour of sRGB pixels (0-1), the mean taken in linear light (what the eye integrates)."""
    lin = colour.cctf_decoding(np.asarray(rgb, np.float64).reshape(-1, 3), function="sRGB").mean(axis=0)
    return colour.XYZ_to_Lab(colour.sRGB_to_XYZ(colour.cctf_encoding(lin, function="sRGB")))


def _de00(lab1, lab2):
    return np.asarray(colour.delta_E(lab1, lab2, method="CIE 2000"))


@pytest.mark.parametrize("seed,amp", [(0, 20), (5, 40)])  # the second pair was not looked at while choosing
def test_the_smooth_hold_keeps_a_textured_patch_mean_better_than_holding_every_pixel(seed, amp):
    # A textured patch (uniform noise of +-amp codes, made here) whose mean
    # colour lies on the palette's hull, halfway between its red and its white
    # in linear light: half its pixels lie outside the hull.  Around it a
    # smooth grey ramp inside the hull.
    pal = np.array([[20, 20, 20], [240, 240, 235], [170, 50, 45], [60, 130, 70], [50, 70, 150], [128, 128, 128]],
                   np.uint8)
    lin = colour.cctf_decoding(pal / 255.0, function="sRGB")
    mean = colour.cctf_encoding(0.5 * lin[2] + 0.5 * lin[1], function="sRGB") * 255.0
    rng = np.random.default_rng(seed)
    img = np.broadcast_to(np.linspace(60, 200, 96)[None, :, None], (96, 96, 3)).copy()
    img[24:72, 24:72] = mean + rng.uniform(-amp, amp, (48, 48, 3))
    img = np.clip(np.rint(img), 0, 255).astype(np.uint8)
    patch = np.zeros((96, 96), bool)
    patch[24:72, 24:72] = True
    palette = Palette(rgb8=pal, locked=None)

    def mean_error(**hold):
        out = qd.dither_picture(img, palette, method="floyd-steinberg", **hold).rgb
        return float(_de00(_lab_of_mean(img[patch] / 255.0), _lab_of_mean(out[patch] / 255.0)))

    smooth = mean_error()  # the default: the hold on smooth pixels only
    every = mean_error(hull_hold=qd.DEFAULT_HULL_HOLD, hull_hold_step=float("inf"))
    # Measured: 0.68 / 3.25 (amp 20) and 1.07 / 5.08 (amp 40).  Held, the
    # outside pixels' excess is clipped away and the patch's mean drifts
    # inward; the texture is not smooth, so the smooth-only hold leaves it to
    # the diffusion, which carries the error and keeps the mean.
    assert qd.DEFAULT_HULL_HOLD < float("inf") and qd.DEFAULT_HULL_HOLD_STEP < float("inf")
    assert smooth < 1.5
    assert every > 2.0 * smooth


@pytest.fixture(scope="module")
def dusk():
    from quantize.fit.engine import fit_palette
    from quantize.io.read import load_image

    pic = load_image(SAMPLES / "dusk_sky.png")
    return pic, fit_palette(pic, 8, for_dither=True)


def test_the_default_dither_leaves_few_dark_speckles_in_the_dusk_orange(dusk):
    # What `reduce sample_images/dusk_sky.png -k 8 --dither floyd-steinberg`
    # does: the palette fitted for the dither, the default dither.
    pic, pal = dusk
    lab = _lab(pic.rgb)
    orange = (lab[..., 0] > 55) & (lab[..., 2] > 20)  # the light, yellowish glow

    def speckles(**kw):
        out = qd.dither_picture(pic, pal, method="floyd-steinberg", **kw).rgb
        return 100.0 * float((_lab(out)[..., 0][orange] < 30).mean())

    # Measured: 0.08 % with the default, 1.79 % without a hold (the default
    # until this session).  The bound of 0.3 % is our choice.
    assert orange.sum() > 100_000
    assert speckles() < 0.3
    assert speckles(hull_hold=float("inf")) > 1.0



def _streak_share(rgb, *, run=6, share=0.6, window=15):
    """Share of the pixels in horizontal runs of ``run`` or more of one colour where that colour is scarce.

    A colour is scarce at a run when it is under ``share`` of the pixels of the
    ``window`` x ``window`` squares around the run's pixels (mean): a run of a
    colour that fills its area is a flat patch, one of a colour mixed in with
    others is a streak.  Measured on the output pixels; the local shares with
    scipy.ndimage.uniform_filter.
    """
    from scipy.ndimage import uniform_filter

    key = (rgb[..., 0].astype(np.int64) << 16) | (rgb[..., 1].astype(np.int64) << 8) | rgb[..., 2]
    total = 0
    for value in np.unique(key):
        hit = key == value
        local = uniform_filter(hit.astype(float), size=window, mode="nearest")
        edges = np.diff(np.pad(hit.astype(np.int8), ((0, 0), (1, 1))), axis=1)
        ys, starts = np.nonzero(edges == 1)
        _, ends = np.nonzero(edges == -1)  # row-major order, so each start meets its own end
        for y, a, b in zip(ys, starts, ends):
            if b - a >= run and local[y, a:b].mean() < share:
                total += b - a
    return total / key.size


def test_the_default_dither_lays_no_light_streaks_in_the_dusk_sky(dusk):
    # Where the sky leaves the palette's hull, its colours (whole runs of one
    # code along a row) crossed the hold's distance row run by row run; a held
    # run took the lightest colour along its length.  Measured over the sky
    # above the hills (rows 0-559), against the dither with no hold.
    pic, pal = dusk
    default = _streak_share(qd.dither_picture(pic, pal, method="floyd-steinberg").rgb[:560])
    free = _streak_share(qd.dither_picture(pic, pal, method="floyd-steinberg", hull_hold=float("inf")).rgb[:560])
    # Measured: 0.0025 with the hold's onset spread (HULL_HOLD_ONSET 0.5),
    # 0.0049 with a single threshold (before), 0.0020 with no hold.  The bound
    # of 1.5 times the no-hold figure is our choice.
    assert free > 0.0
    assert default <= 1.5 * free

def _ramp(stops, h, w, bits):
    """A vertical ramp through ``stops`` (encoded sRGB 0-1), made here; 8 or 16 bits."""
    stops = np.asarray(stops, float)
    t = np.linspace(0, 1, h) * (len(stops) - 1)
    i = np.minimum(t.astype(int), len(stops) - 2)
    f = (t - i)[:, None]
    rows = (1 - f) * stops[i] + f * stops[i + 1]
    top = (1 << bits) - 1
    return np.rint(np.broadcast_to(rows[:, None, :], (h, w, 3)) * top).astype(np.uint8 if bits == 8 else np.uint16)


@pytest.mark.xfail(strict=True, reason="open (issue 17): measured 2.53 (8-bit, rows 233-235: the magenta end, "
                   "rows 228-239, lies ΔE00 0.5-2.5 outside the palette's hull) and 3.75 (16-bit, rows 122-131: "
                   "error piles up past the sand peak, 0.004-0.023 outside the hull, where no 16-bit pixel is "
                   "smooth enough to be held) with the default; 2.24 and 3.75 with no hold")
@pytest.mark.parametrize("bits", [8, 16])
def test_a_held_out_gradient_has_no_row_band_with_the_default_dither(bits):
    from quantize.fit.engine import fit_palette
    from quantize.io.read import as_picture

    # Issue 17's criterion on a ramp not used to choose anything (deep green,
    # sand, magenta): the local mean of the dithered image (9 rows, full
    # width, in linear light) follows the original's row by row within ΔE00 1.5.
    codes = _ramp([[0.05, 0.25, 0.12], [0.85, 0.78, 0.55], [0.70, 0.10, 0.45]], 240, 120, bits)
    pic = as_picture(codes)
    top = float((1 << bits) - 1)
    pal = fit_palette(pic, 8, for_dither=True)
    out = qd.dither_picture(pic, pal, method="floyd-steinberg").rgb / 255.0
    kernel = np.ones(9) / 9.0

    def local_means(rgb):
        rows = colour.cctf_decoding(rgb, function="sRGB").mean(axis=1)
        lin = np.stack([np.convolve(rows[:, c], kernel, mode="valid") for c in range(3)], axis=1)
        return colour.XYZ_to_Lab(colour.sRGB_to_XYZ(colour.cctf_encoding(lin, function="sRGB")))

    band = _de00(local_means(codes / top), local_means(out))
    assert band.max() <= 1.5


@pytest.mark.parametrize("hold", [0.01, float("inf")])
def test_a_bad_hold_step_is_refused_whatever_the_hold(hold):
    # Checked with the other diffusion options, also when the hold is off.
    img = np.zeros((4, 4, 3), dtype=np.uint8)
    pal = Palette(rgb8=np.array([[0, 0, 0], [255, 255, 255]], dtype=np.uint8), locked=None)
    with pytest.raises(ValueError, match="hull hold step"):
        qd.dither_picture(img, pal, method="floyd-steinberg", hull_hold=hold, hull_hold_step=-1)
