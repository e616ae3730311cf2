"""Tests of quantize.fit.for_dither: the palette spread so its hull holds the image's colours."""

from __future__ import annotations

import itertools

import numpy as np
import pytest
from numpy.testing import assert_allclose, assert_array_equal

from quantize.colour.spaces import srgb_to_linear
from quantize.fit import for_dither as fd


def _simplex_brute_force(v):
    """Projection onto the simplex by trying every support (KKT: on the support
    the weights are v - theta, zero elsewhere); the nearest feasible one wins."""
    best, arg = np.inf, None
    k = len(v)
    for r in range(1, k + 1):
        for s in itertools.combinations(range(k), r):
            w = np.zeros(k)
            idx = list(s)
            w[idx] = v[idx] - (v[idx].sum() - 1.0) / r
            if (w >= -1e-12).all():
                d = ((w - v) ** 2).sum()
                if d < best:
                    best, arg = d, w
    return arg


def test_simplex_projection_matches_brute_force():
    rng = np.random.default_rng(0)
    v = rng.normal(0, 1, (200, 5))
    got = fd.project_simplex(v)
    want = np.array([_simplex_brute_force(row) for row in v])
    assert_allclose(got, want, atol=1e-12)


def test_nearest_hull_point_matches_scipy():
    from scipy.optimize import minimize  # test-only reference

    rng = np.random.default_rng(1)
    verts = rng.uniform(0.2, 0.8, (5, 3))
    pts = rng.uniform(0, 1, (30, 3))
    w = fd.hull_weights(pts, verts, iterations=2000)
    assert_allclose(w.sum(axis=1), 1.0)
    assert (w >= 0).all()
    for p, wi in zip(pts, w):
        res = minimize(lambda x: ((x @ verts - p) ** 2).sum(), np.full(5, 0.2), method="SLSQP",
                       bounds=[(0, 1)] * 5, constraints=[{"type": "eq", "fun": lambda x: x.sum() - 1}],
                       options={"ftol": 1e-14, "maxiter": 500})
        assert np.linalg.norm(wi @ verts - p) == pytest.approx(np.linalg.norm(res.x @ verts - p), abs=1e-5)


def _gradient_colours():
    # A dark-blue to orange ramp (made here), every code once, equal weights.
    t = np.linspace(0, 1, 256)[:, None]
    rgb = (1 - t) * np.array([0.10, 0.14, 0.36]) + t * np.array([0.98, 0.62, 0.40])
    return srgb_to_linear(rgb), np.ones(len(t))


def test_spread_brings_the_ends_of_a_ramp_into_the_hull():
    lin, w = _gradient_colours()
    # A palette placed as a nearest-colour fit would: at cluster centres,
    # inside the ramp, so both ends lie outside its hull.
    pal = lin[[32, 96, 160, 224]]
    new = fd.spread_for_dither(pal, np.zeros(4, bool), lin, w, trim=0.0)
    # The furthest colour's distance from the hull (hull_weights is held to scipy above).
    far_before = np.linalg.norm(lin - fd.hull_weights(lin, pal, iterations=3000) @ pal, axis=1).max()
    far_after = np.linalg.norm(lin - fd.hull_weights(lin, new, iterations=3000) @ new, axis=1).max()
    assert far_before > 0.2
    # Known limit (docs/dithering.md): the step stalls short of closing the gap on a curved ramp.
    assert far_after < far_before / 3
    # The moved colours stay within the colours' own hull (no colour the image lacks).
    within = fd.hull_weights(new, lin, iterations=3000) @ lin
    assert np.abs(within - new).max() < 5e-3
    # Deterministic.
    assert_array_equal(new, fd.spread_for_dither(pal, np.zeros(4, bool), lin, w, trim=0.0))


def test_spread_keeps_locked_colours_and_a_covering_palette():
    lin, w = _gradient_colours()
    pal = lin[[32, 96, 160, 224]]
    fixed = np.array([True, False, False, True])
    new = fd.spread_for_dither(pal, fixed, lin, w)
    assert_array_equal(new[fixed], pal[fixed])
    # Colours outside only beside fixed palette colours: nothing can move.
    ends = lin[[10, 128, 245]]
    assert_array_equal(fd.spread_for_dither(ends, np.array([True, False, True]), lin[:8], w[:8]), ends)
    # A palette whose hull already holds every colour (the cube's corners) stays as it is.
    cube = np.array(list(itertools.product([0.0, 1.0], repeat=3)))
    assert_array_equal(fd.spread_for_dither(cube, np.zeros(8, bool), lin, w), cube)


# --------------------------------------------------------------------------- the fit for a dither, end to end

VIEW = {"dpi": 150, "distance_mm": 500}  # a print held at arm's length (51.5 px/degree)


def _sky(h=240, w=96):
    """A vertical dusk-sky gradient made here: dark blue, purple, orange, pale yellow (encoded sRGB stops)."""
    stops = np.array([[0.11, 0.16, 0.38], [0.50, 0.33, 0.55], [0.98, 0.62, 0.40], [1.0, 0.85, 0.55]])
    t = np.linspace(0, 1, h) * (len(stops) - 1)
    i = np.minimum(t.astype(int), len(stops) - 2)
    f = (t - i)[:, None]
    rows = (1 - f) * stops[i] + f * stops[i + 1]
    return np.rint(np.broadcast_to(rows[:, None, :], (h, w, 3)) * 255).astype(np.uint8)


def _row_band(original, mapped, half=4):
    """Per row, ΔE00 between the mean colours (linear light) of rows y-half..y+half, full width, of both images."""
    from quantize.colour.spaces import delta_e_ciede2000, linear_to_srgb, srgb_to_lab

    kernel = np.ones(2 * half + 1) / (2 * half + 1)

    def local_mean(img):
        rows = srgb_to_linear(img / 255.0).mean(axis=1)
        return np.stack([np.convolve(rows[:, c], kernel, mode="valid") for c in range(3)], axis=1)

    return delta_e_ciede2000(srgb_to_lab(linear_to_srgb(local_mean(original))),
                             srgb_to_lab(linear_to_srgb(local_mean(mapped))))


@pytest.fixture(scope="module")
def sky_palettes():
    from quantize.fit.engine import fit_palette

    img = _sky()
    return img, fit_palette(img, 8), fit_palette(img, 8, for_dither=True)


def test_dithered_gradient_has_no_row_band(sky_palettes):
    img, plain, for_dither = sky_palettes
    # Issue 17's criterion: the local mean of the dithered image follows the
    # original's, row by row, within ΔE00 1.5.  With the palette fitted as if
    # no dither followed, the ends of the ramp lie outside what its colours
    # can mix and come out as flat bands.
    before = _row_band(img, plain.apply(img, dither="floyd-steinberg").rgb)
    after = _row_band(img, for_dither.apply(img, dither="floyd-steinberg").rgb)
    assert before.max() > 1.5
    assert after.max() <= 1.5


@pytest.mark.filterwarnings("ignore::quantize.fit.clustering.PaletteSizeWarning")
def test_fit_for_dither_lowers_the_filtered_error(sky_palettes):
    from skimage import data

    from quantize.fit.engine import fit_palette
    from quantize.quality.perception import filtered_delta_e

    img, plain, for_dither = sky_palettes
    photo = data.chelsea()[::2, ::2]  # scikit-image sample photograph, halved for time
    cases = [(img, plain, for_dither), (photo, fit_palette(photo, 8, restarts=2),
                                        fit_palette(photo, 8, restarts=2, for_dither=True))]
    for image, before, after in cases:
        # S-CIELAB (Zhang & Wandell 1996) filtered ΔE00, the viewer's measure of a dither.
        fb = filtered_delta_e(image, before.apply(image, dither="floyd-steinberg"), **VIEW)["mean"]
        fa = filtered_delta_e(image, after.apply(image, dither="floyd-steinberg"), **VIEW)["mean"]
        assert fa < 0.8 * fb, (fa, fb)


def test_spread_keeps_flat_areas_and_locked_colours_exact():
    from quantize.core.sampling import sample_picture
    from quantize.io.read import as_picture
    from quantize.palette import Palette

    img = _sky(h=160, w=96).copy()
    img[:24] = np.rint(np.linspace(30, 58, 24)[:, None, None] * np.array([1.0, 40 / 58, 74 / 58]))  # night
    img[120:, :] = (58, 40, 74)  # a flat dark hill, a quarter of the picture
    # A palette as a fit gives it: the hill's colour exactly, the rest inside the sky.
    rgb8 = np.array([[58, 40, 74], [120, 84, 136], [200, 130, 120], [245, 160, 105], [250, 205, 135],
                     [255, 255, 255]], np.uint8)
    pal = Palette(rgb8, locked=np.array([False] * 5 + [True]))
    moved, n = fd.palette_for_dither(pal, sample_picture(as_picture(img)))
    assert n > 0 and moved.k == 6
    # The night lies beyond the hill's colour, yet that colour stays: moved,
    # the hill would no longer be exact and would be dithered into speckles.
    assert_array_equal(moved.rgb8[0], rgb8[0])
    assert_array_equal(moved.rgb8[5], rgb8[5])  # locked
    # Without the hull hold: error that enters a flat area at the palette's
    # darkest colour cannot always be discharged at its top and may flip a
    # few pixels at its far edge, with or without the hold (measured over 36
    # nearby hill sizes: 14 with some, no hold; 19, the default hold); this
    # picture happens to have none with no hold, 3 with the default.
    from quantize.render.dither import dither_picture

    out = dither_picture(img, moved, method="floyd-steinberg", hull_hold=float("inf")).rgb
    assert (out[124:, 4:-4] == (58, 40, 74)).all()
    # Same input, same palette.
    assert_array_equal(fd.palette_for_dither(pal, sample_picture(as_picture(img)))[0].rgb8, moved.rgb8)


def test_without_a_dither_the_palette_is_unchanged():
    from quantize.fit.engine import fit_palette
    from quantize.fit.settings import FitSettings

    img = _sky(h=96, w=32)
    assert_array_equal(fit_palette(img, 5).rgb8, fit_palette(img, 5, for_dither=False).rgb8)
    with pytest.raises(ValueError, match="for_dither must be True or False"):
        FitSettings(for_dither="yes")


def test_reduce_fits_for_the_dither_and_the_written_file_shows_no_band(tmp_path):
    from click.testing import CliRunner
    from PIL import Image

    from quantize.cli.main import main

    src = tmp_path / "sky.png"
    Image.fromarray(_sky()).save(src)
    outs = {}
    for dither in ("none", "floyd-steinberg"):
        out = tmp_path / f"{dither}.png"
        r = CliRunner().invoke(main, ["reduce", str(src), "-o", str(out), "-k", "8", "--dither", dither])
        assert r.exit_code == 0, r.output
        assert ("moved outward for dithering" in r.output) == (dither != "none")
        with Image.open(out) as im:
            assert im.mode == "P"
            outs[dither] = np.asarray(im.convert("RGB"))
    assert _row_band(_sky(), outs["floyd-steinberg"]).max() <= 1.5


def test_the_palette_file_records_that_it_was_fitted_for_a_dither(tmp_path):
    from quantize import fit_palette
    from quantize.palette import Palette

    rng = np.random.default_rng(3)
    img = np.clip(np.linspace(0, 255, 64)[None, :, None] + rng.normal(0, 3, (32, 64, 3)), 0, 255).astype(np.uint8)
    for flag in (True, False):
        pal = fit_palette(img, 4, for_dither=flag)
        pal.save(tmp_path / f"{flag}.json")
        assert Palette.load(tmp_path / f"{flag}.json").fit.for_dither is flag


def test_flat_artwork_keeps_its_palette(monkeypatch):
    from quantize.core.sampling import sample_picture
    from quantize.fit.engine import fit_palette
    from quantize.io.read import as_picture

    # Flat artwork made here: four inks in blocks, a disc with an
    # anti-aliased edge (its edge pixels are mixes in encoded values, as
    # drawing programs make them), two colours more than the inks.
    inks = np.array([[240, 236, 222], [200, 30, 45], [20, 60, 140], [250, 190, 30]], float)
    img = np.empty((160, 160, 3))
    img[:80, :80], img[:80, 80:], img[80:, :80], img[80:, 80:] = inks
    yy, xx = np.mgrid[:160, :160]
    cover = np.clip(30.5 - np.hypot(yy - 80, xx - 80), 0, 1)[..., None]
    img = np.rint(cover * inks[2] + (1 - cover) * img).astype(np.uint8)
    sample = sample_picture(as_picture(img))
    plain = fit_palette(img, 6, seed=0)
    flat = fd.flat_colours(plain.rgb8, sample)
    assert flat.sum() == 4  # the four inks, each exact over a large area
    # Nothing to mix but the edges: the palette stays as fitted.
    assert fd.palette_for_dither(plain, sample) == (plain, 0)
    # Without the rule a spare colour would move (so the check above can fail).
    monkeypatch.setattr(fd, "ARTWORK_SHARE", 1.01)
    assert fd.palette_for_dither(plain, sample)[1] > 0
