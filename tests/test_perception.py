"""Tests of quantize.quality.perception: S-CIELAB filtered ΔE00 (Zhang & Wandell 1996)."""

from __future__ import annotations

import math

import numpy as np
import pytest
from numpy.testing import assert_allclose

from quantize.colour.spaces import delta_e_ciede2000, linear_to_srgb, srgb_to_lab, srgb_to_xyz
from quantize.core.picture import Picture
from quantize.palette import Palette
from quantize.quality import perception as qp


@pytest.fixture(autouse=True)
def _private_cache(tmp_path_factory, monkeypatch):
    monkeypatch.setenv("QUANTIZE_CACHE_DIR", str(tmp_path_factory.getbasetemp() / "qcache"))


def _palette(rgb):
    return Palette(rgb8=np.array(rgb, dtype=np.uint8), locked=None)


# --------------------------------------------------------------------------- viewing condition

def test_pixels_per_degree_from_geometry():
    # Independent route: one pixel of pitch 25.4/dpi mm subtends 2 atan(p / 2d);
    # the two differ by the curvature of tan over half a degree (~3e-5).
    for dpi, d in [(300, 400), (96, 600), (150, 2000)]:
        pitch = 25.4 / dpi
        per_pixel = math.degrees(2 * math.atan(pitch / (2 * d)))
        assert qp.pixels_per_degree(dpi=dpi, distance_mm=d) == pytest.approx(1 / per_pixel, rel=1e-4)


@pytest.mark.parametrize("kwargs,shown", [
    ({"dpi": 0, "distance_mm": 500}, "got 0"),
    ({"dpi": -300, "distance_mm": 500}, "got -300"),
    ({"dpi": 300, "distance_mm": 0.0}, "got 0.0"),
    ({"dpi": 300, "distance_mm": float("nan")}, "got nan"),
    ({"ppd": -2}, "got -2"),
    ({"dpi": 300}, "distance_mm=None"),
    ({"dpi": 300, "distance_mm": 400, "ppd": 60}, "not both"),
])
def test_bad_viewing_condition_is_refused_naming_the_value(kwargs, shown):
    img = np.zeros((4, 4, 3), np.uint8)
    with pytest.raises(ValueError) as exc:
        qp.filtered_delta_e(img, img, **kwargs)
    assert shown in str(exc.value)


# --------------------------------------------------------------------------- filter

def test_published_parameters():
    # Zhang & Wandell (1996): the weights of each channel's Gaussians sum to 1
    # (normalised form of their table, as in their published code).
    for terms in qp.SCIELAB_KERNELS:
        assert sum(w for w, _ in terms) == pytest.approx(1.0, abs=1e-5)
    # Opponent transform of Poirson & Wandell used by S-CIELAB (Zhang & Wandell
    # 1996): O1 = 0.279 X + 0.72 Y - 0.107 Z, O2 = -0.449 X + 0.29 Y - 0.077 Z,
    # O3 = 0.086 X - 0.59 Y + 0.501 Z.
    xyz = np.array([0.3, 0.5, 0.2])
    o = qp.SCIELAB_OPPONENT @ xyz
    assert_allclose(o, [0.279 * 0.3 + 0.72 * 0.5 - 0.107 * 0.2, -0.449 * 0.3 + 0.29 * 0.5 - 0.077 * 0.2,
                        0.086 * 0.3 - 0.59 * 0.5 + 0.501 * 0.2], atol=1e-15)
    # A one-pixel kernel (a pixel wider than a degree) returns the input: the
    # way back to XYZ is the exact inverse.
    img = np.random.default_rng(0).random((5, 6, 3))
    assert_allclose(qp.scielab_filter(img, 1.0), img, atol=1e-13)


@pytest.mark.parametrize("ppd", [3.0, 24.0, 61.7, 120.0])
def test_kernels_sum_to_one_and_span_a_degree(ppd):
    for k in qp.scielab_kernels(ppd):
        assert k.shape[0] == k.shape[1] and k.shape[0] % 2 == 1
        assert abs(k.shape[0] - ppd) <= 2
        assert k.sum() == pytest.approx(1.0, abs=1e-12)
        assert_allclose(k, k.T, atol=1e-15)  # circularly symmetric Gaussians


def test_uniform_image_is_unchanged_by_the_filter():
    xyz = np.broadcast_to(srgb_to_xyz([0.3, 0.6, 0.2]), (20, 30, 3)).copy()
    assert_allclose(qp.scielab_filter(xyz, 40.0), xyz, atol=1e-12)


def test_flat_regions_give_the_plain_delta_e():
    # Zhang & Wandell (1996): over uniform regions S-CIELAB reduces to CIELAB.
    a = np.full((16, 16, 3), [200, 40, 90], np.uint8)
    b = np.full((16, 16, 3), [190, 60, 80], np.uint8)
    want = float(delta_e_ciede2000(srgb_to_lab(a[0, 0] / 255), srgb_to_lab(b[0, 0] / 255)))
    assert_allclose(qp.delta_e_map(a, b, kind="filtered", ppd=50), want, atol=1e-9)
    assert_allclose(qp.delta_e_map(a, b), want, atol=1e-12)


def test_fine_checkerboard_looks_like_its_mean_grey():
    # A 1-pixel black/white checkerboard seen at 60 px/degree is a uniform grey
    # of half the light (linear averaging by the eye); plain ΔE00 says ~40.
    cb = (np.indices((64, 64)).sum(axis=0) % 2 * 255).astype(np.uint8)
    cb = np.repeat(cb[..., None], 3, axis=2)
    grey = np.full((64, 64, 3), round(float(linear_to_srgb(0.5)) * 255), np.uint8)
    assert np.nanmean(qp.delta_e_map(grey, cb, kind="filtered", ppd=60)) < 1.0
    assert np.nanmean(qp.delta_e_map(grey, cb)) > 30.0
    # Seen so coarsely that a pixel spans half a degree, nothing is blurred.
    assert_allclose(qp.delta_e_map(grey, cb, kind="filtered", ppd=2), qp.delta_e_map(grey, cb), atol=1e-9)


# --------------------------------------------------------------------------- the checks

def _grey_ramp(h=48, w=256):
    return np.repeat(np.rint(np.broadcast_to(np.linspace(0, 255, w), (h, w)))[..., None], 3, 2).astype(np.uint8)


def _colour_ramp(h=48, w=256):
    t = np.linspace(0.0, 1.0, w)[None, :, None]
    a, b = np.array([0.10, 0.15, 0.45]), np.array([0.98, 0.75, 0.45])
    return np.rint(np.broadcast_to((1 - t) * a + t * b, (h, w, 3)) * 255).astype(np.uint8)


@pytest.mark.parametrize("make", [_grey_ramp, _colour_ramp])
@pytest.mark.parametrize("method", ["floyd-steinberg", "jarvis-judice-ninke", "stucki", "blue-noise", "bayer8"])
def test_ramp_in_four_colours_dither_wins_filtered_loses_plain(make, method):
    ramp = make()
    row = ramp[0]
    pal = _palette(row[np.linspace(0, row.shape[0] - 1, 4).round().astype(int)])
    flat, dithered = pal.apply(ramp), pal.apply(ramp, dither=method)
    view = {"dpi": 150, "distance_mm": 500}  # 51.5 px/degree: a print held at arm's length
    f_flat = qp.filtered_delta_e(ramp, flat, **view)["mean"]
    f_dith = qp.filtered_delta_e(ramp, dithered, **view)["mean"]
    assert f_dith < f_flat
    assert flat.delta_e["mean"] < dithered.delta_e["mean"]


@pytest.mark.parametrize("method", ["none", "floyd-steinberg", "blue-noise", "clustered-dot"])
def test_flat_colour_image_with_exact_palette_scores_zero(method):
    img = np.zeros((40, 40, 3), np.uint8)
    img[:] = [240, 235, 220]
    img[10:30, 5:25] = [200, 16, 46]
    img[25:35, 20:38] = [20, 40, 90]
    pal = _palette([[240, 235, 220], [200, 16, 46], [20, 40, 90], [128, 128, 128]])
    out = pal.apply(img, dither=method)
    assert out.delta_e == {"mean": 0.0, "median": 0.0, "p95": 0.0, "max": 0.0}
    assert qp.filtered_delta_e(img, out, dpi=300, distance_mm=400) == out.delta_e


# --------------------------------------------------------------------------- reporting

def test_with_filtered_delta_e_keeps_plain_and_names_filtered():
    ramp = _grey_ramp(16, 64)
    pal = _palette([[0, 0, 0], [128, 128, 128], [255, 255, 255]])
    res = pal.apply(ramp, dither="floyd-steinberg")
    both = qp.with_filtered_delta_e(ramp, res, dpi=300, distance_mm=400)
    # .delta_e holds both, named: the plain statistics unchanged, the filtered ones prefixed
    assert {k: both.delta_e[k] for k in res.delta_e} == res.delta_e
    assert {k: both.delta_e[f"filtered_{k}"] for k in ("mean", "median", "p95", "max")} \
        == both.filtered.stats
    assert set(res.delta_e) == {"mean", "median", "p95", "max"}  # the input is not modified
    assert set(both.filtered.stats) == {"mean", "median", "p95", "max"}
    assert both.filtered.viewing == {"dpi": 300, "distance_mm": 400,
                                     "ppd": round(qp.pixels_per_degree(dpi=300, distance_mm=400), 3)}
    assert res.filtered is None  # the input is not modified
    assert both.dither == res.dither and both.dither.method == "floyd-steinberg"


def test_transparent_pixels_are_left_out():
    rng = np.random.default_rng(2)
    rgb = rng.integers(0, 256, (20, 20, 3)).astype(np.uint8)
    alpha = np.full((20, 20), 255, np.uint8)
    alpha[:, :5] = 0
    pal = _palette([[0, 0, 0], [255, 255, 255], [255, 0, 0]])
    res = pal.apply(Picture(rgb=rgb, alpha=alpha), dither="floyd-steinberg")
    for kind in ("plain", "filtered"):
        de = qp.delta_e_map(Picture(rgb=rgb, alpha=alpha), res, kind=kind, ppd=20)
        assert np.isnan(de[:, :5]).all() and not np.isnan(de[:, 5:]).any()
    plain = qp.delta_e_map(Picture(rgb=rgb, alpha=alpha), res)
    assert res.delta_e["max"] == pytest.approx(np.nanmax(plain))
    assert res.delta_e["mean"] == pytest.approx(np.nanmean(plain))


def test_pixel_stats_equal_the_weighted_statistics():
    from quantize.quality.stats import delta_e_stats

    rng = np.random.default_rng(5)
    for n in (1, 2, 20, 101, 1000):
        v = np.round(rng.gamma(2.0, 2.0, n), 1)  # rounded, so ties occur
        want = delta_e_stats(v, np.ones(n))
        got = qp.pixel_delta_e_stats(v)
        assert got == pytest.approx(want, abs=1e-12), n
    with pytest.raises(ValueError, match="no opaque"):
        qp.pixel_delta_e_stats([])


def test_images_of_different_sizes_are_refused():
    with pytest.raises(ValueError, match="differ in size"):
        qp.delta_e_map(np.zeros((4, 4, 3), np.uint8), np.zeros((4, 5, 3), np.uint8))
    with pytest.raises(ValueError, match="valid names: plain, filtered"):
        qp.delta_e_map(np.zeros((4, 4, 3), np.uint8), np.zeros((4, 4, 3), np.uint8), kind="blurred")
