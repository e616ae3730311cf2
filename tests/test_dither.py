"""Tests of quantize.render.dither and its compiled kernels.

Kernel twins (tests named ``test_twin_*``) also run with NUMBA_DISABLE_JIT=1
in a subprocess (``test_twins_pass_with_jit_disabled``), so the kernels'
Python is exercised as written.
"""

from __future__ import annotations

import os
import subprocess
import sys
import zlib
from pathlib import Path

import naive_dither as naive
import numpy as np
import pytest
from numpy.testing import assert_allclose, assert_array_equal

from quantize.colour.spaces import delta_e_ciede2000, linear_to_srgb, srgb_to_lab, srgb_to_linear
from quantize.core.picture import Picture
from quantize.palette import Palette
from quantize.render import dither as qd
from quantize.render.methods import DEFAULT_MODULATION

DIFFUSIONS = ("floyd-steinberg", "jarvis-judice-ninke", "stucki")
ORDERED = ("bayer2", "bayer4", "bayer8", "blue-noise", "clustered-dot")


@pytest.fixture(autouse=True)
def _private_cache(tmp_path_factory, monkeypatch):
    # The blue-noise mask is cached on disk: keep it out of the user's folders.
    monkeypatch.setenv("QUANTIZE_CACHE_DIR", str(tmp_path_factory.getbasetemp() / "qcache"))


def _palette(rgb, locked=None, space="lab"):
    return Palette(rgb8=np.array(rgb, dtype=np.uint8), locked=locked, space=space)


def _random_case(seed, h=9, w=11, k=5):
    rng = np.random.default_rng(seed)
    rgb8 = rng.integers(0, 256, (h, w, 3)).astype(np.uint8)
    pal = rng.integers(0, 256, (k, 3)).astype(np.uint8)
    return rgb8, pal


def _mean_colour_de(original_rgb8, mapped_rgb8, mask=None):
    """ΔE00 between the mean colours of two images, the means taken in linear
    light (what the eye integrates over an area)."""
    if mask is None:
        mask = np.ones(original_rgb8.shape[:2], bool)
    a = srgb_to_linear(original_rgb8[mask] / 255.0).mean(axis=0)
    b = srgb_to_linear(mapped_rgb8[mask] / 255.0).mean(axis=0)
    return float(delta_e_ciede2000(srgb_to_lab(linear_to_srgb(a)), srgb_to_lab(linear_to_srgb(b))))


# --------------------------------------------------------------------------- names and bad input

def test_registry_and_validator_list_every_name():
    with pytest.raises(ValueError) as exc:
        qd.check_dither("floyd")
    for name in qd.DITHERS:
        assert name in str(exc.value)
    assert "'floyd'" in str(exc.value)
    assert qd.check_dither("STUCKI").name == "stucki"


def test_cli_names_match_registry():
    from quantize.cli.dither_options import DITHER_NAMES

    assert DITHER_NAMES == tuple(qd.DITHERS)


@pytest.mark.parametrize("bad", [-0.1, 1.5, float("nan"), "much"])
def test_strength_outside_0_1_is_refused_naming_the_value(bad):
    pal = _palette([[0, 0, 0], [255, 255, 255]])
    with pytest.raises(ValueError, match="strength") as exc:
        pal.apply(np.zeros((4, 4, 3), np.uint8), dither="floyd-steinberg", strength=bad)
    assert repr(bad) in str(exc.value)


def test_unknown_dither_through_palette_apply():
    pal = _palette([[0, 0, 0], [255, 255, 255]])
    with pytest.raises(ValueError, match="valid names: none, floyd-steinberg"):
        pal.apply(np.zeros((4, 4, 3), np.uint8), dither="worms")


def test_diffusion_weights_sum_to_one_and_match_the_papers():
    # Floyd & Steinberg (1976): 7/16 right, 3/16 down-left, 5/16 down, 1/16 down-right.
    assert qd.DITHERS["floyd-steinberg"].weights == ((0, 1, 7 / 16), (1, -1, 3 / 16), (1, 0, 5 / 16),
                                                     (1, 1, 1 / 16))
    # Jarvis, Judice & Ninke (1976): /48, rows 7 5 / 3 5 7 5 3 / 1 3 5 3 1.
    jjn = {(dy, dx): w * 48 for dy, dx, w in qd.DITHERS["jarvis-judice-ninke"].weights}
    assert jjn[(0, 1)] == 7 and jjn[(0, 2)] == 5 and jjn[(1, 0)] == 7 and jjn[(2, -2)] == 1
    # Stucki (1981): /42, rows 8 4 / 2 4 8 4 2 / 1 2 4 2 1.
    st = {(dy, dx): w * 42 for dy, dx, w in qd.DITHERS["stucki"].weights}
    assert st[(0, 1)] == 8 and st[(1, 0)] == 8 and st[(1, -2)] == 2 and st[(2, 0)] == 4
    for name in DIFFUSIONS:
        assert sum(w for _, _, w in qd.DITHERS[name].weights) == pytest.approx(1.0)
        assert all(dy > 0 or dx > 0 for dy, dx, _ in qd.DITHERS[name].weights)  # only pixels ahead


# --------------------------------------------------------------------------- threshold matrices

def test_bayer_matrices():
    # Bayer (1973) 4x4 index matrix, as commonly reproduced (from memory).
    assert_array_equal(qd.bayer_matrix(4), [[0, 8, 2, 10], [12, 4, 14, 6], [3, 11, 1, 9], [15, 7, 13, 5]])
    for n in (2, 8):
        assert sorted(qd.bayer_matrix(n).ravel()) == list(range(n * n))
    with pytest.raises(ValueError, match="power of two, got 6"):
        qd.bayer_matrix(6)


def test_clustered_dot_grows_one_compact_dot():
    from skimage.measure import label

    m = qd.clustered_dot_matrix(8)
    assert sorted(m.ravel()) == list(range(64))
    centre = np.zeros((8, 8), bool)
    centre[3:5, 3:5] = True
    assert set(m[centre]) == {0, 1, 2, 3}  # the dot starts at the cell centre
    for level in range(1, 33):
        dot = m < level
        assert label(dot, connectivity=1).max() == 1, level  # one connected cluster, not scattered pixels
        ys, xs = np.nonzero(dot)
        # Compact: it fits in a square of side about that of a disc of its area (+2 px of slack).
        assert max(np.ptp(ys), np.ptp(xs)) + 1 <= 2 * np.sqrt(level / np.pi) + 2
    # Tiled, the paper-coloured remainder past 50 % is one cluster around the cell corner.
    tiled = np.tile(m, (2, 2))[4:12, 4:12]
    assert label(tiled >= 48, connectivity=1).max() == 1


def test_clustered_dot_smallest_dot_and_hole_are_two_by_two():
    from skimage.measure import label

    pal = _palette([[0, 0, 0], [255, 255, 255]])
    cells = 6 * 8

    def white_for(light):
        code = round(float(linear_to_srgb(light)) * 255)
        return pal.apply(np.full((cells, cells, 3), code, np.uint8), dither="clustered-dot").indices == 1

    # A tone just under the minimum dot's share rounds down to no dot at all.
    assert not white_for(1.5 / 64).any()
    # Just above it, every cell holds exactly the 2 x 2 minimum dot at its centre.
    white = white_for(3 / 64)
    lab = label(white, connectivity=1)
    assert lab.max() == 36 and white.sum() == 36 * 4
    assert (white.reshape(6, 8, 6, 8)[:, 3:5, :, 3:5]).all()
    # The same for the other ink: the minority colour always makes the dot.
    assert white_for(1 - 1.5 / 64).all()
    black = ~white_for(1 - 3 / 64)
    assert black.sum() == 36 * 4 and (black.reshape(6, 8, 6, 8)[:, 3:5, :, 3:5]).all()


def test_clustered_dot_size():
    # Hand calculation: 32 px of 25.4/300 mm form a disc of diameter 2 sqrt(32/pi) px.
    assert qd.clustered_dot_size_mm(0.5, dpi=300) == pytest.approx(2 * np.sqrt(32 / np.pi) * 25.4 / 300)
    with pytest.raises(ValueError, match="got 0"):
        qd.clustered_dot_size_mm(0.5, dpi=0)


def _low_frequency_share(pattern, radius=4):
    spec = np.abs(np.fft.fft2(pattern - pattern.mean())) ** 2
    f = np.fft.fftfreq(pattern.shape[0]) * pattern.shape[0]
    r = np.hypot(f[:, None], f[None, :])
    return spec[(r > 0) & (r <= radius)].sum() / spec.sum()


def test_blue_noise_is_a_permutation_without_low_frequencies(tmp_path, monkeypatch):
    monkeypatch.setenv("QUANTIZE_CACHE_DIR", str(tmp_path))
    qd.blue_noise_ranks.cache_clear()
    ranks = qd.blue_noise_ranks(32)
    assert sorted(ranks.ravel()) == list(range(32 * 32))
    white = np.random.default_rng(1).permutation(32 * 32).reshape(32, 32)
    # Ulichney (1993): a blue-noise pattern lacks low-frequency energy at every level.
    for level in (0.1, 0.25, 0.5):
        n = int(level * ranks.size)
        assert _low_frequency_share(ranks < n) < 0.3 * _low_frequency_share(white < n), level
    # Each level's ones are spread out: no two of the first 10 % touch.
    from skimage.measure import label

    first = ranks < ranks.size // 10
    assert label(first, connectivity=1).max() == first.sum()


def test_blue_noise_cache_is_written_reused_and_repaired(tmp_path, monkeypatch):
    monkeypatch.setenv("QUANTIZE_CACHE_DIR", str(tmp_path))
    qd.blue_noise_ranks.cache_clear()
    first = qd.blue_noise_ranks(16)
    files = list(tmp_path.glob("blue-noise-vac-16-*.npy"))
    assert len(files) == 1 and not list(tmp_path.glob(".tmp-*"))
    assert_array_equal(np.load(files[0]), first)
    # A damaged file is recomputed (deterministically) and replaced.
    files[0].write_bytes(b"not a numpy file")
    qd.blue_noise_ranks.cache_clear()
    assert_array_equal(qd.blue_noise_ranks(16), first)
    assert_array_equal(np.load(files[0]), first)
    # A foreign array of the right name is not trusted either.
    np.save(files[0], np.zeros((16, 16), np.int32))
    qd.blue_noise_ranks.cache_clear()
    assert_array_equal(qd.blue_noise_ranks(16), first)


def test_blue_noise_without_a_writable_cache(tmp_path, monkeypatch):
    blocker = tmp_path / "file"
    blocker.write_text("x")
    monkeypatch.setenv("QUANTIZE_CACHE_DIR", str(blocker / "sub"))  # cannot be created
    qd.blue_noise_ranks.cache_clear()
    assert sorted(qd.blue_noise_ranks(8).ravel()) == list(range(64))
    qd.blue_noise_ranks.cache_clear()


# --------------------------------------------------------------------------- kernels vs twins

def _arrays(rgb8, pal, *, clear=None, locked=None, space="lab"):
    palette = _palette(pal, locked=locked, space=space)
    alpha = None if clear is None else np.where(clear, 0, 255).astype(np.uint8)
    pic = Picture(rgb=rgb8, alpha=alpha)
    clear = np.zeros(rgb8.shape[:2], bool) if clear is None else clear
    pinned = np.full(rgb8.shape[:2], -1)
    for j in np.flatnonzero(palette.locked):
        pinned[np.all(rgb8 == pal[j], axis=2) & ~clear] = j
    return palette, pic, clear, pinned


@pytest.mark.parametrize("method", DIFFUSIONS)
@pytest.mark.parametrize("serpentine", [True, False])
@pytest.mark.parametrize("space,metric", [("lab", "space"), ("oklab", "space"), ("lab", "ciede2000")])
def test_twin_diffusion(method, serpentine, space, metric):
    rgb8, pal = _random_case(zlib.crc32(f"{method}{serpentine}{space}{metric}".encode()))
    clear = np.zeros(rgb8.shape[:2], bool)
    clear[2:4, 3:6] = True
    clear[0, -1] = True
    rgb8[5, :4] = pal[1]  # a run of an exact locked colour
    locked = np.array([False, True, False, False, False])
    palette, pic, clear, pinned = _arrays(rgb8, pal, clear=clear, locked=locked, space=space)
    got, _ = qd.dither_indices(pic, palette, method=method, strength=0.8, metric=metric, serpentine=serpentine)
    # The defaults: threshold modulation and reach as the library sets them.
    want = naive.diffuse(rgb8 / 255.0, clear, pinned, pal, weights=qd.DITHERS[method].weights, space=space,
                         metric=metric, strength=0.8, serpentine=serpentine,
                         mod=qd.threshold_matrix("blue-noise") - 0.5, mod_amp=DEFAULT_MODULATION * 0.8,
                         reach=qd.DEFAULT_REACH)
    assert_array_equal(got, want)
    plain, _ = qd.dither_indices(pic, palette, method=method, strength=0.8, metric=metric, serpentine=serpentine,
                                 modulation=0.0, reach=float("inf"))
    assert_array_equal(plain, naive.diffuse(rgb8 / 255.0, clear, pinned, pal, weights=qd.DITHERS[method].weights,
                                            space=space, metric=metric, strength=0.8, serpentine=serpentine))


@pytest.mark.parametrize("method", ORDERED)
@pytest.mark.parametrize("space,metric", [("lab", "space"), ("oklab", "space"), ("lab", "ciede2000")])
def test_twin_ordered(method, space, metric):
    rgb8, pal = _random_case(7, h=13, w=10)
    clear = np.zeros(rgb8.shape[:2], bool)
    clear[1, 1:5] = True
    rgb8[4:8, 2:9] = rgb8[4, 2]  # a flat patch: the per-colour memo is hit
    rgb8[9, :] = pal[2]  # a run of an exact locked colour
    locked = np.array([False, False, True, False, False])
    palette, pic, clear, pinned = _arrays(rgb8, pal, clear=clear, locked=locked, space=space)
    got, arrays = qd.dither_indices(pic, palette, method=method, strength=0.9, metric=metric)
    want = naive.ordered(rgb8 / 255.0, clear, pinned, pal, qd.threshold_matrix(qd.DITHERS[method].matrix),
                         space=space, metric=metric, strength=0.9)
    assert_array_equal(got, want)
    # The ΔE00 measured in the same pass.
    assert_allclose(arrays.delta_e, naive.pixel_delta_e(rgb8 / 255.0, clear, want, pal), atol=1e-9,
                    equal_nan=True)


@pytest.mark.parametrize("method", DIFFUSIONS)
@pytest.mark.parametrize("space,metric", [("lab", "space"), ("oklab", "space"), ("lab", "ciede2000")])
def test_twin_diffusion_with_threshold_modulation(method, space, metric):
    rgb8, pal = _random_case(zlib.crc32(f"mod{method}{space}{metric}".encode()), h=12, w=13)
    palette, pic, clear, pinned = _arrays(rgb8, pal, space=space)
    got, _ = qd.dither_indices(pic, palette, method=method, strength=0.7, metric=metric, modulation=9.0,
                               reach=float("inf"))
    mask = qd.threshold_matrix("blue-noise") - 0.5
    want = naive.diffuse(rgb8 / 255.0, clear, pinned, pal, weights=qd.DITHERS[method].weights, space=space,
                         metric=metric, strength=0.7, mod=mask, mod_amp=9.0 * 0.7)
    assert_array_equal(got, want)
    plain, _ = qd.dither_indices(pic, palette, method=method, strength=0.7, metric=metric, modulation=0.0,
                                 reach=float("inf"))
    # The modulation changes some choices (else this test could not fail).
    assert (got != plain).any()


@pytest.mark.parametrize("method", DIFFUSIONS)
@pytest.mark.parametrize("space,metric", [("lab", "space"), ("oklab", "space"), ("lab", "ciede2000")])
def test_twin_diffusion_with_a_reach(method, space, metric):
    rgb8, pal = _random_case(zlib.crc32(f"reach{method}{space}{metric}".encode()), h=12, w=13, k=6)
    palette, pic, clear, pinned = _arrays(rgb8, pal, space=space)
    for reach, mod in ((15.0, 0.0), (25.0, 6.0)):
        got, _ = qd.dither_indices(pic, palette, method=method, metric=metric, modulation=mod, reach=reach)
        want = naive.diffuse(rgb8 / 255.0, clear, pinned, pal, weights=qd.DITHERS[method].weights, space=space,
                             metric=metric, mod=qd.threshold_matrix("blue-noise") - 0.5, mod_amp=mod, reach=reach)
        assert_array_equal(got, want)
        free, _ = qd.dither_indices(pic, palette, method=method, metric=metric, modulation=mod, reach=float("inf"))
        # The reach changes some choices (else this test could not fail).
        assert (got != free).any()


@pytest.mark.parametrize("method", DIFFUSIONS)
@pytest.mark.parametrize("space,metric", [("lab", "space"), ("oklab", "space"), ("lab", "ciede2000")])
def test_twin_diffusion_with_a_hull_hold(method, space, metric):
    rgb8, pal = _random_case(zlib.crc32(f"hold{method}{space}{metric}".encode()), h=12, w=13, k=4)
    clear = np.zeros(rgb8.shape[:2], bool)
    clear[3, 2:5] = True
    palette, pic, clear, pinned = _arrays(rgb8, pal, clear=clear, space=space)
    # Every far pixel held (no smoothness asked): random pixels are rough.
    got, _ = qd.dither_indices(pic, palette, method=method, metric=metric, hull_hold=0.01,
                               hull_hold_step=float("inf"))
    want = naive.diffuse(rgb8 / 255.0, clear, pinned, pal, weights=qd.DITHERS[method].weights, space=space,
                         metric=metric, mod=qd.threshold_matrix("blue-noise") - 0.5, mod_amp=DEFAULT_MODULATION,
                         reach=qd.DEFAULT_REACH, hull_hold=0.01, hull_hold_step=float("inf"))
    assert_array_equal(got, want)
    free, _ = qd.dither_indices(pic, palette, method=method, metric=metric, hull_hold=float("inf"))
    # Four random colours leave most random pixels outside their hull: the
    # hold changes some choices (else this test could not fail).
    assert (got != free).any()


def _smooth_and_rough_case(seed, bits):
    """Smooth out-of-hull patches beside rough ones, a transparent run, and four palette colours inside the cube."""
    rng = np.random.default_rng(seed)
    h, w = 14, 15
    top = (1 << bits) - 1
    scale = top / 255.0
    base = np.array([240.0, 120.0, 40.0]) * scale  # an orange beyond what the palette mixes
    codes = np.broadcast_to(base, (h, w, 3)).copy()
    # A smooth run: steps of 1.6 8-bit codes per column (under 2); a 16-bit
    # picture's steps are 411 of its codes, far above 2 of them.
    codes[:7, :, 1] += np.arange(w) * 1.6 * scale
    # A rough run: steps of 2.4 codes per column (above 2).
    codes[7:, :, 1] += np.arange(w) * 2.4 * scale
    codes[10:12, 3:9] = rng.integers(0, top + 1, (2, 6, 3))  # texture
    rgb = np.rint(codes).astype(np.uint8 if bits == 8 else np.uint16)
    clear = np.zeros((h, w), bool)
    clear[5, 4:7] = True
    pal = np.array([[200, 60, 50], [40, 40, 40], [230, 220, 210], [60, 90, 160]], np.uint8)
    return rgb, clear, pal


@pytest.mark.parametrize("bits", [8, 16])
@pytest.mark.parametrize("method", DIFFUSIONS)
@pytest.mark.parametrize("space,metric", [("lab", "space"), ("lab", "ciede2000")])
def test_twin_diffusion_with_a_smooth_hull_hold(bits, method, space, metric):
    rgb, clear, pal = _smooth_and_rough_case(zlib.crc32(f"smooth{bits}{method}{space}{metric}".encode()), bits)
    palette = _palette(pal, space=space)
    alpha = np.where(clear, 0, (1 << bits) - 1).astype(rgb.dtype)
    pic = Picture(rgb=rgb, alpha=alpha, bit_depth=bits)
    none = np.full(clear.shape, -1)
    runs = {}
    for step in (2.0, float("inf")):
        got, _ = qd.dither_indices(pic, palette, method=method, metric=metric, hull_hold=0.01,
                                   hull_hold_step=step)
        want = naive.diffuse(rgb / float((1 << bits) - 1), clear, none, pal, weights=qd.DITHERS[method].weights,
                             space=space, metric=metric, hull_hold=0.01, hull_hold_step=step)
        assert_array_equal(got, want)
        runs[step] = got
    free, _ = qd.dither_indices(pic, palette, method=method, metric=metric, hull_hold=float("inf"))
    # The smooth-only hold differs both from no hold and from holding every
    # far pixel (else this test could not fail).
    assert (runs[2.0] != free).any()
    assert (runs[2.0] != runs[float("inf")]).any()


def test_smooth_pixels_counts_codes_on_the_eight_bit_scale_and_ignores_hidden_colours():
    rng = np.random.default_rng(11)
    for bits in (8, 16):
        top = (1 << bits) - 1
        codes = rng.integers(0, 4 * (top // 255) + 1, (9, 10, 3)).astype(np.uint8 if bits == 8 else np.uint16)
        clear = rng.random((9, 10)) < 0.2
        got = qd.smooth_pixels(codes, clear, 2.0, top)
        # Brute force, in 8-bit code units (a 16-bit code is 1/257 of one).
        unit = codes / (top / 255.0)
        want = np.ones((9, 10), bool)
        for y in range(9):
            for x in range(10):
                for yy, xx in ((y - 1, x), (y + 1, x), (y, x - 1), (y, x + 1)):
                    if 0 <= yy < 9 and 0 <= xx < 10 and not (clear[y, x] or clear[yy, xx]):
                        want[y, x] &= bool(np.abs(unit[y, x] - unit[yy, xx]).max() <= 2.0 + 1e-9)
        assert_array_equal(got, want)
        assert want.any() and not want.all()  # both kinds occur, so the check can fail
        hidden = codes.copy()
        hidden[clear] = top  # whatever hides under transparency must not matter
        assert_array_equal(qd.smooth_pixels(hidden, clear, 2.0, top), got)


def test_hull_distance_against_a_converged_projection():
    from quantize.fit.for_dither import hull_weights

    rng = np.random.default_rng(21)
    pts = rng.random((300, 3))
    for vertices in (rng.random((7, 3)) * 0.8 + 0.1,  # a solid hull: facets
                     np.linspace(0.1, 0.9, 4)[:, None].repeat(3, axis=1)):  # a grey line: no solid hull
        got = qd.hull_distance(pts, vertices)
        # Reference: the accelerated projected gradient run far past
        # convergence (Beck & Teboulle 2009), a different route to the same point.
        resid = pts - hull_weights(pts, vertices, iterations=20000) @ vertices
        assert_allclose(got, np.sqrt((resid**2).sum(axis=1)), atol=1e-6)
        assert (got == 0).any() == (vertices.shape[0] == 7)  # some inside a solid hull; none on a line
        assert (got > 0.05).any()


@pytest.mark.parametrize("bad", [-0.1, float("nan"), "x"])
def test_hull_hold_step_is_refused_when_negative(bad):
    with pytest.raises(ValueError, match="hull hold step"):
        qd.check_hull_hold_step(bad)


@pytest.mark.parametrize("bad", [-0.1, float("nan"), "x"])
def test_hull_hold_is_refused_when_negative(bad):
    with pytest.raises(ValueError, match="hull hold"):
        qd.check_hull_hold(bad)


@pytest.mark.parametrize("bad", [0, -3, float("nan"), "far"])
def test_reach_is_refused_unless_positive(bad):
    with pytest.raises(ValueError, match="dither reach"):
        qd.dither_indices(np.zeros((4, 4, 3), np.uint8), _palette([[0, 0, 0], [255, 255, 255]]),
                          method="floyd-steinberg", reach=bad)


def test_modulation_is_refused_when_negative():
    with pytest.raises(ValueError, match="threshold modulation"):
        qd.dither_indices(np.zeros((4, 4, 3), np.uint8), _palette([[0, 0, 0], [255, 255, 255]]),
                          method="floyd-steinberg", modulation=-1)


def test_summary_line_says_what_each_method_does():
    from quantize.render.methods import describe

    # Issue 17: an ordered dither's summary said "serpentine (error in linear light)".
    for name in ORDERED:
        line = describe(name, serpentine=True)
        assert "ordered" in line and "serpentine" not in line and "error" not in line, line
    for name in DIFFUSIONS:
        assert "error diffusion, serpentine scan" in describe(name)
        assert "raster scan" in describe(name, serpentine=False)


def test_twin_sixteen_bit_input():
    rng = np.random.default_rng(3)
    rgb16 = rng.integers(0, 65536, (6, 7, 3)).astype(np.uint16)
    pal = rng.integers(0, 256, (4, 3)).astype(np.uint8)
    palette = _palette(pal)
    pic = Picture(rgb=rgb16, bit_depth=16)
    got, _ = qd.dither_indices(pic, palette, method="floyd-steinberg", modulation=0.0, reach=float("inf"))
    want = naive.diffuse(rgb16 / 65535.0, np.zeros((6, 7), bool), np.full((6, 7), -1), pal,
                         weights=qd.DITHERS["floyd-steinberg"].weights)
    assert_array_equal(got, want)


def test_twin_pixel_delta_e_and_ciede2000_scalar():
    from test_colourspace import SHARMA_2005

    from quantize.kernels import dither_loops as dk

    # The scalar CIEDE2000 of the kernels against Sharma, Wu & Dalal (2005), Table 1.
    for row in SHARMA_2005:
        assert dk.ciede2000(*row[:6]) == pytest.approx(row[6], abs=1e-4)
        assert dk.ciede2000_angles(*row[:6]) == pytest.approx(row[6], abs=1e-4)
    # Random pairs and the awkward ones (neutral colours, opposite and nearly
    # opposite hues, equal colours) against the vectorised reference.
    rng = np.random.default_rng(4)
    lab1 = np.column_stack([rng.uniform(0, 100, 400), rng.uniform(-90, 90, (400, 2))])
    lab2 = np.column_stack([rng.uniform(0, 100, 400), rng.uniform(-90, 90, (400, 2))])
    lab2[:50, 1:] = -lab1[:50, 1:] + rng.normal(0, 1e-6, (50, 2))  # nearly opposite hues
    lab2[50:100, 1:] = -lab1[50:100, 1:] + rng.normal(0, 1e-2, (50, 2))
    lab1[100:120, 1:] = 0.0  # neutral
    lab2[110:130, 1:] = 0.0
    lab2[130:150] = lab1[130:150]
    lab2[150:200, 1:] = lab1[150:200, 1:] + rng.normal(0, 1e-5, (50, 2))  # tiny hue differences
    want = delta_e_ciede2000(lab1, lab2)
    for f in (dk.ciede2000, dk.ciede2000_angles):
        got = np.array([f(*p, *q) for p, q in zip(lab1, lab2)])
        assert_allclose(got, want, rtol=1e-9, atol=1e-9)
    # Exactly opposite hues sit on the formula's discontinuity (Sharma et al.
    # 2005, section 3): the vector form hands them to the angle form.
    for p in lab1[:20]:
        q = np.array([60.0, -p[1], -p[2]])
        assert dk.ciede2000(*p, *q) == dk.ciede2000_angles(*p, *q)
    rgb8, pal = _random_case(11)
    rgb8[4:7] = rgb8[4, 0]  # repeated colours go through the memo
    clear = np.zeros(rgb8.shape[:2], bool)
    clear[0, :3] = True
    palette, pic, clear, _ = _arrays(rgb8, pal, clear=clear)
    idx = np.random.default_rng(0).integers(0, len(pal), rgb8.shape[:2])
    out = np.full(rgb8.shape[:2], -1.0)
    arrays = qd._kernel_inputs(pic, palette, "space")
    for y0, y1 in [(0, 4), (4, 9)]:  # in bands, as beside the diffusion
        dk.delta_e_rows(arrays.codes, arrays.lut, arrays.state, idx, palette.lab, arrays.mat_lab, y0, y1, out)
    assert_allclose(out, naive.pixel_delta_e(rgb8 / 255.0, clear, idx, pal), atol=1e-9, equal_nan=True)


@pytest.mark.slow
def test_twins_pass_with_jit_disabled():
    """The kernel twins again, with numba's JIT off, so the kernels run as Python."""
    env = dict(os.environ, NUMBA_DISABLE_JIT="1")
    root = Path(__file__).resolve().parents[1]
    proc = subprocess.run([sys.executable, "-m", "pytest", str(Path(__file__)), "-q", "-k", "twin_",
                           "-p", "no:cacheprovider"], cwd=root, env=env, capture_output=True, text=True,
                          check=False)
    assert proc.returncode == 0, proc.stdout[-3000:] + proc.stderr[-2000:]
    assert " passed" in proc.stdout and "failed" not in proc.stdout


# --------------------------------------------------------------------------- behaviour

def _ramp(h=48, w=256):
    # A smooth two-colour ramp (dark blue to light orange), made here.
    t = np.linspace(0.0, 1.0, w)[None, :, None]
    a, b = np.array([0.10, 0.15, 0.45]), np.array([0.98, 0.75, 0.45])
    return np.rint(np.broadcast_to((1 - t) * a + t * b, (h, w, 3)) * 255).astype(np.uint8)


def _ramp_palette(ramp, k=4):
    row = ramp[0].astype(float)
    picks = np.linspace(0, row.shape[0] - 1, k).round().astype(int)
    return _palette(row[picks])


@pytest.mark.parametrize("method", DIFFUSIONS + ORDERED)
def test_mean_colour_kept_on_a_ramp(method):
    ramp = _ramp()
    pal = _ramp_palette(ramp)
    out = pal.apply(ramp, dither=method)
    # Issue requirement: mean colour (linear light) within ΔE00 1.0 of the original's.
    assert _mean_colour_de(ramp, out.rgb) < 1.0


def test_encoded_grey_renders_as_its_light():
    # IEC 61966-2-1: sRGB code 128 is 21.59 % linear light; a black/white
    # dither must cover that share in white, not 50 % (the gamma-encoding bias).
    pal = _palette([[0, 0, 0], [255, 255, 255]])
    grey = np.full((64, 64, 3), 128, np.uint8)
    for method in DIFFUSIONS + ("blue-noise",):
        share = float(pal.apply(grey, dither=method).indices.mean())
        assert share == pytest.approx(srgb_to_linear(128 / 255), abs=0.005), method


@pytest.fixture(scope="module")
def photo():
    from skimage import data

    from quantize.fit.engine import fit_palette

    img = data.chelsea()  # scikit-image sample photograph
    return img, fit_palette(img, k=16, restarts=2, seed=0)


@pytest.mark.parametrize("method", DIFFUSIONS + ("blue-noise", "bayer8"))
def test_mean_colour_kept_on_a_photo(photo, method):
    img, pal = photo
    out = pal.apply(img, dither=method)
    assert _mean_colour_de(img, out.rgb) < 1.0


def test_dithered_result_reports_plain_statistics(photo):
    from quantize.quality.stats import delta_e_stats

    img, pal = photo
    out = pal.apply(img, dither="floyd-steinberg", serpentine=False)
    assert set(out.delta_e) == {"mean", "median", "p95", "max"}
    de = delta_e_ciede2000(srgb_to_lab(img / 255.0), pal.lab[out.indices]).ravel()
    want = delta_e_stats(de, np.ones(de.size))
    for key in want:
        assert out.delta_e[key] == pytest.approx(want[key], abs=1e-9)
    assert out.coverage.sum() == pytest.approx(100.0)
    assert_allclose(out.coverage, 100 * np.bincount(out.indices.ravel(), minlength=pal.k) / de.size)
    assert out.dither.method == "floyd-steinberg" and out.dither.serpentine is False
    assert out.dither.error_space == "linear light"
    raster = pal.apply(img, dither="floyd-steinberg", serpentine=True)
    assert (raster.indices != out.indices).any()  # the scan order reaches the kernel
    # Band-by-band diffusion (measured on worker threads) equals one whole pass.
    whole, _ = qd.dither_indices(img, pal, method="floyd-steinberg", serpentine=False)
    assert_array_equal(whole, out.indices)


@pytest.mark.parametrize("method", DIFFUSIONS + ORDERED)
def test_strength_zero_is_the_undithered_mapping(method):
    img = _ramp(16, 64)
    pal = _ramp_palette(img, 3)
    # Dithers pick colours by the space's distance unless told otherwise.
    assert_array_equal(pal.apply(img, dither=method, strength=0.0).indices, pal.apply(img, metric="space").indices)
    assert_array_equal(pal.apply(img, dither=method, strength=0.0, metric="ciede2000").indices,
                       pal.apply(img).indices)


@pytest.mark.parametrize("method", DIFFUSIONS + ("bayer4",))
def test_transparent_pixels_take_no_part(method):
    ramp = _ramp(24, 64)
    pal = _ramp_palette(ramp)
    alpha = np.full(ramp.shape[:2], 255, np.uint8)
    alpha[8:14, 10:40] = 0
    a = Picture(rgb=ramp, alpha=alpha)
    other = ramp.copy()
    other[alpha == 0] = [255, 0, 255]  # whatever hides under transparency must not matter
    b = Picture(rgb=other, alpha=alpha)
    ra, rb = pal.apply(a, dither=method), pal.apply(b, dither=method)
    assert_array_equal(ra.indices, rb.indices)
    assert (ra.indices[alpha == 0] == 0).all()
    assert_array_equal(ra.alpha, alpha)
    assert _mean_colour_de(ramp, ra.rgb, alpha > 0) < 1.0  # no light lost into the hole
    de = delta_e_ciede2000(srgb_to_lab(ramp / 255.0), pal.lab[ra.indices])[alpha > 0]
    assert ra.delta_e["max"] == pytest.approx(de.max())


@pytest.mark.parametrize("method", DIFFUSIONS + ORDERED)
def test_locked_colour_stays_exact(method):
    img = _ramp(32, 96)
    pal_rgb = _ramp_palette(img).rgb8
    paper = pal_rgb[1]
    img[10:20, 20:70] = paper  # a flat patch of the locked colour inside the gradient
    patch = np.all(img == paper, axis=2)
    locked = _palette(pal_rgb, locked=[False, True, False, False])
    out = locked.apply(img, dither=method)
    assert (out.indices[patch] == 1).all()
    if method in DIFFUSIONS:
        # Without the lock, error flowing in from the gradient breaks the patch up.
        free = _palette(pal_rgb).apply(img, dither=method)
        assert (free.indices[patch] != 1).any()


def test_cam16ucs_palette_chooses_in_cielab_with_a_note():
    pal = _palette([[0, 0, 0], [255, 255, 255], [200, 30, 30]], space="cam16ucs")
    out = pal.apply(_ramp(8, 32), dither="floyd-steinberg")
    assert out.dither.choice_space == "lab"
    assert any("CIELAB" in n for n in out.notes)


@pytest.mark.parametrize("method", DIFFUSIONS + ORDERED)
@pytest.mark.parametrize("serpentine", [True, False])
def test_dither_info_records_what_reproduces_the_image(method, serpentine):
    img = _ramp(12, 48)
    pal = _ramp_palette(img, 3)
    out = pal.apply(img, dither=method, strength=0.7, serpentine=serpentine)
    info = out.dither
    assert (info.method, info.strength, info.metric, info.error_space) == (method, 0.7, "space", "linear light")
    if method in ORDERED:
        # An ordered dither has no scan order: the record says so, and the scan changes nothing.
        assert info.serpentine is None
        assert_array_equal(pal.apply(img, dither=method, strength=0.7, serpentine=not serpentine).indices,
                           out.indices)
    else:
        assert info.serpentine is serpentine
    # The record is enough to make the same image again.
    again, _ = qd.dither_indices(img, pal, method=info.method, strength=info.strength, metric=info.metric,
                                 serpentine=bool(info.serpentine))
    assert_array_equal(again, out.indices)


def test_dither_info_names_the_choice_space():
    img = _ramp(8, 32)
    rgb = _ramp_palette(img, 3).rgb8
    assert _palette(rgb, space="oklab").apply(img, dither="bayer4").dither.choice_space == "oklab"
    # CIEDE2000 is computed from CIELAB whatever the palette's space.
    out = _palette(rgb, space="oklab").apply(img, dither="bayer4", metric="ciede2000")
    assert (out.dither.choice_space, out.dither.metric) == ("lab", "ciede2000")
    assert _palette(rgb).apply(img).dither is None  # no dither, no record


def test_none_routes_to_plain_mapping():
    img = _ramp(8, 32)
    pal = _ramp_palette(img)
    assert_array_equal(qd.dither_picture(img, pal, method="none").indices, pal.apply(img, metric="space").indices)


# --------------------------------------------------------------------------- command-line options

def _command():
    """A stand-in command wired the way reduce/apply use the options."""
    import click

    from quantize.cli.dither_options import dither_options, pop_dither_options, run_dither_outputs

    @click.command()
    @click.argument("image")
    @click.argument("output")
    @dither_options
    def cmd(image, output, **opts):
        from PIL import Image

        choice = pop_dither_options(opts)
        assert not opts  # every dithering option was taken
        pal = _palette([[0, 0, 0], [128, 128, 128], [255, 255, 255]])
        res = pal.apply(image, **choice.apply_kwargs())
        res, summary, lines = run_dither_outputs(image, res, choice, inputs=[image])
        Image.fromarray(res.rgb).save(output)
        click.echo(f"ΔE00 plain: mean {res.delta_e['mean']:.2f}")
        for line in lines:
            click.echo(line)
        click.echo(f"summary keys: {sorted(summary)}")

    return cmd


@pytest.fixture
def ramp_file(tmp_path):
    from PIL import Image

    path = tmp_path / "ramp.png"
    Image.fromarray(np.repeat(np.rint(np.broadcast_to(np.linspace(0, 255, 96), (24, 96)))[..., None], 3, 2)
                    .astype(np.uint8)).save(path)
    return path


def test_cli_options_run_dither_filtered_report_and_error_map(ramp_file, tmp_path):
    from click.testing import CliRunner

    emap = tmp_path / "errors.png"
    res = CliRunner().invoke(_command(), [str(ramp_file), str(tmp_path / "out.png"), "--dither", "stucki",
                                          "--dither-strength", "0.5", "--raster", "--view-dpi", "150",
                                          "--view-distance", "500", "--error-map", str(emap),
                                          "--error-map-kind", "filtered"])
    assert res.exit_code == 0, res.output
    assert "dither: stucki at strength 0.5: error diffusion, raster scan (error in linear light)" in res.output
    assert "ΔE00 plain: mean" in res.output
    assert "ΔE00 filtered (S-CIELAB, 150 dpi at 500 mm, 51.5 px/degree): mean" in res.output
    assert f"error map (filtered ΔE00): {emap}" in res.output
    assert "summary keys: ['delta_e_filtered', 'dither', 'error_map', 'viewing']" in res.output
    from PIL import Image

    with Image.open(emap) as im:
        assert im.size == (560, 24 + 96)


@pytest.mark.parametrize("args,shown", [
    (["--dither", "wormy"], "'wormy' is not one of 'none', 'floyd-steinberg'"),
    (["--dither-strength", "1.5"], "1.5 is not in the range 0.0<=x<=1.0"),
    (["--view-dpi", "0", "--view-distance", "500"], "0.0 is not in the range 0.0<x<=10000"),
    (["--view-dpi", "300"], "--view-dpi and --view-distance go together"),
    (["--error-map", "e.png", "--error-map-kind", "filtered"], "needs --view-dpi and --view-distance"),
    (["--error-map", "e.jpg"], "name it *.png"),
])
def test_cli_bad_options_are_refused(ramp_file, tmp_path, args, shown):
    from click.testing import CliRunner

    res = CliRunner().invoke(_command(), [str(ramp_file), str(tmp_path / "o.png"), *args])
    assert res.exit_code == 2, res.output
    assert shown in res.output


def test_error_map_paths_never_collide():
    from quantize.cli.dither_options import DitherChoice, error_map_paths

    one = error_map_paths(DitherChoice(error_map="maps/e.png"), ["a/x.png"])
    assert one == [Path("maps/e.png")]
    many = error_map_paths(DitherChoice(error_map="maps/e.png"), ["a/x.png", "b/y.tif"])
    assert many == [Path("maps/e-x.png"), Path("maps/e-y.png")]
    assert error_map_paths(DitherChoice(), ["a.png"]) == [None]


# --------------------------------------------------------------------------- worms and speckles

def _vertical_ramp(h, w, stops):
    """A vertical gradient through encoded-sRGB ``stops`` (made here)."""
    stops = np.asarray(stops, float)
    t = np.linspace(0, 1, h) * (len(stops) - 1)
    i = np.minimum(t.astype(int), len(stops) - 2)
    f = (t - i)[:, None]
    rows = (1 - f) * stops[i] + f * stops[i + 1]
    return np.rint(np.broadcast_to(rows[:, None, :], (h, w, 3)) * 255).astype(np.uint8)


def test_worm_measure_of_isotropic_noise_and_of_oriented_lines():
    from quantize.render.worms import worm_anisotropy

    rng = np.random.default_rng(0)
    flat = np.full((256, 256, 3), 128, np.uint8)
    noise = np.where(rng.random((256, 256, 1)) < 0.2, 255, 0).astype(np.uint8).repeat(3, axis=2)
    # Independent pixels are isotropic; an average of 64 periodograms of
    # noise has a relative variance of 1/64 per bin (Bartlett 1950), the
    # level excess_db is measured from.
    got = worm_anisotropy(flat, noise)
    assert got.tiles == 64
    assert got.anisotropy_db == pytest.approx(-10 * np.log10(64), abs=1.0)
    assert abs(got.excess_db) < 1.0
    # Dots strung along diagonals: worms in their purest form.
    yy, xx = np.mgrid[:256, :256]
    chains = np.where(((xx + yy) % 7 == 0) & (rng.random((256, 256)) < 0.8), 255, 0).astype(np.uint8)
    assert worm_anisotropy(flat, chains[..., None].repeat(3, axis=2)).excess_db > 15.0
    with pytest.raises(ValueError, match="nothing is dithered"):
        worm_anisotropy(flat, flat)
    with pytest.raises(ValueError, match="differ in shape"):
        worm_anisotropy(flat, flat[:128])


#: Worm threshold in dB above the isotropic level: between isotropic noise
#: (0 dB) and dots strung on lines (about 21 dB); our choice, no outside source.
WORM_LIMIT_DB = 8.0
_SKY = [[0.11, 0.16, 0.38], [0.50, 0.33, 0.55], [0.98, 0.62, 0.40], [1.0, 0.85, 0.55]]
_GREY = [[0.02] * 3, [0.98] * 3]


@pytest.mark.parametrize("stops,k,scan", [
    (_SKY, 8, {}),  # the default serpentine scan breaks them here
    (_GREY, 8, {"modulation": 4.0}),  # on the grey ramp it takes threshold modulation too
])
def test_worms_of_raster_scanning_are_measured_and_broken_up(stops, k, scan):
    from quantize.fit.engine import fit_palette
    from quantize.quality.perception import filtered_delta_e
    from quantize.render.worms import worm_anisotropy

    img = _vertical_ramp(480, 320, stops)
    pal = fit_palette(img, k, for_dither=True)
    raster = qd.dither_picture(img, pal, method="floyd-steinberg", serpentine=False)
    better = qd.dither_picture(img, pal, method="floyd-steinberg", **scan)
    worms_raster = worm_anisotropy(img, raster.rgb).excess_db
    worms_better = worm_anisotropy(img, better.rgb).excess_db
    assert worms_raster > WORM_LIMIT_DB + 1.0, worms_raster  # plain raster Floyd-Steinberg shows worms here
    assert worms_better < WORM_LIMIT_DB, (worms_better, worms_raster)
    if scan:
        # The cure raises the filtered ΔE00 (S-CIELAB, Zhang & Wandell 1996)
        # over the default serpentine scan by no more than 0.01.
        view = {"dpi": 150, "distance_mm": 500}
        default = qd.dither_picture(img, pal, method="floyd-steinberg")
        assert (filtered_delta_e(img, better, **view)["mean"]
                <= filtered_delta_e(img, default, **view)["mean"] + 0.01)


def test_a_reach_removes_the_dark_speckles_in_the_orange_of_the_dusk_sky():
    from PIL import Image

    from quantize.fit.engine import fit_palette
    from quantize.quality.perception import filtered_delta_e

    path = Path(__file__).resolve().parents[1] / "sample_images" / "dusk_sky.png"
    with Image.open(path) as im:
        img = np.asarray(im.convert("RGB"))
    pal = fit_palette(img, 8, for_dither=True)  # as `reduce -k 8 --dither floyd-steinberg` fits it
    lab = srgb_to_lab(img / 255.0)
    orange = (lab[..., 0] > 55) & (lab[..., 2] > 20)  # the orange sky: light and yellowish
    assert orange.mean() > 0.1

    def speckles(result):
        # Pixels darker than L* 30 where the original is lighter than L* 55:
        # at least 25 L* off, a dark dot on a light ground.
        return float((srgb_to_lab(result.rgb / 255.0)[..., 0][orange] < 30).mean())

    # The reach alone, without the hull hold (tests/test_dither_hold.py).
    free = qd.dither_picture(img, pal, method="floyd-steinberg", hull_hold=float("inf"))
    near = qd.dither_picture(img, pal, method="floyd-steinberg", reach=40.0, hull_hold=float("inf"))
    # Unrestricted diffusion with no hold (the default until the hold)
    # reproduces the issue (measured 1.8 %); a reach of 40 leaves under
    # 0.1 %, a twentieth of it (our threshold).
    assert speckles(free) > 0.01
    assert speckles(near) < 0.001
    # Over the whole picture the result is also closer to the original as
    # seen (S-CIELAB filtered ΔE00, Zhang & Wandell 1996; measured 0.86
    # against 0.91), although over the orange band alone it is not (1.69
    # against 1.50): the dark dots were part of a mix that kept its mean colour.
    view = {"dpi": 150, "distance_mm": 500}
    assert filtered_delta_e(img, near, **view)["mean"] < filtered_delta_e(img, free, **view)["mean"]


def _sunset(h, w):
    """A dusk-sky ramp with a pale sun low in it and a dark hill in front (made here, linear-light blend)."""
    img = srgb_to_linear(_vertical_ramp(h, w, _SKY) / 255.0)
    yy, xx = np.mgrid[:h, :w]
    glow = np.exp(-(((yy - 0.8 * h) / (0.12 * h)) ** 2 + ((xx - 0.6 * w) / (0.12 * h)) ** 2))[..., None]
    img = (1 - glow) * img + glow * srgb_to_linear(np.array([1.0, 0.95, 0.75]))
    img[yy > 0.85 * h + 0.05 * h * np.sin(xx / w * 2 * np.pi)] = srgb_to_linear(np.array([0.23, 0.16, 0.30]))
    return np.rint(linear_to_srgb(img) * 255).astype(np.uint8)


@pytest.mark.parametrize("h,w", [(240, 320), (200, 300)])  # the second size was not looked at while choosing
def test_a_hull_hold_removes_the_rim_below_a_sun(h, w):
    from scipy.ndimage import uniform_filter

    from quantize.fit.engine import fit_palette
    from quantize.quality.perception import filtered_delta_e

    img = _sunset(h, w)
    pal = fit_palette(img, 8, for_dither=True)
    hill = srgb_to_lab(img / 255.0)[..., 0] < 30

    def local_mean(a):
        # 9 x 9 means in linear light: what the eye sees of a dither at arm's length (common practice, no source).
        return srgb_to_lab(linear_to_srgb(uniform_filter(srgb_to_linear(a / 255.0), size=(9, 9, 1), mode="nearest")))

    def rim(result):
        return float(delta_e_ciede2000(local_mean(img), local_mean(result.rgb))[hill].max())

    free = qd.dither_picture(img, pal, method="floyd-steinberg", hull_hold=float("inf"))
    # Smooth pixels up to 2 codes apart: this made sky is steeper than the
    # default's 1 code per pixel (with it, measured: the 200 x 300 hill's
    # worst local mean only drops from 32 to 20).
    held = qd.dither_picture(img, pal, method="floyd-steinberg", hull_hold=0.01, hull_hold_step=2.0)
    # Unheld, the error the sun's out-of-hull colours pile up is dumped into
    # the hill below them as a dark blue patch (measured: local means 32-33
    # ΔE00 off); held, the hill's worst local mean is under half of that.
    assert rim(free) > 25.0
    assert rim(held) < 0.5 * rim(free)
    # Closer to the original as seen (S-CIELAB filtered ΔE00, Zhang & Wandell
    # 1996; measured 1.85 -> 0.91 and 1.89 -> 0.98).
    view = {"dpi": 150, "distance_mm": 500}
    assert filtered_delta_e(img, held, **view)["mean"] < 0.8 * filtered_delta_e(img, free, **view)["mean"]
