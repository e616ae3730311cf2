"""Tests for quantize.core.sampling: distinct colours, pixel counts and the pixel index.

The reference for every check is a plain ``np.unique(..., axis=0)`` over the
opaque pixels' RGB rows, written out below: it sorts rows lexicographically
(R, then G, then B), which is the order the package documents for ``codes``,
and shares none of the package's packing, histogram or table code.  Both ways
the package collapses an image are checked against it: the dense 2**24-code
histogram (forced onto small images by lowering ``_DENSE_FROM``) and the sort.
Images are random (seeded), drawn from a small palette so colours repeat,
with transparent pixels whose RGB also occurs among the opaque ones, and one
real photograph from scikit-image's bundled samples.
"""

from __future__ import annotations

import time

import numpy as np
import pytest

from quantize.core import sampling as sampling
from quantize.core.picture import Picture
from quantize.core.sampling import pool_samples, sample_picture

RNG_SEED = 20240611


def reference_sample(rgb: np.ndarray, alpha: np.ndarray | None):
    """codes, weights and inverse the obvious way: np.unique over opaque rows."""
    flat = rgb.reshape(-1, 3)
    opaque = np.ones(flat.shape[0], bool) if alpha is None else alpha.ravel() > 0
    codes, inv, counts = np.unique(flat[opaque], axis=0, return_inverse=True, return_counts=True)
    inverse = np.full(flat.shape[0], -1, dtype=np.int32)
    inverse[opaque] = inv.ravel()
    return codes, counts.astype(np.float64), inverse


def reference_index_image(inverse: np.ndarray, labels: np.ndarray, dtype, shape) -> np.ndarray:
    """labels[inverse] on opaque pixels, 0 on transparent ones."""
    out = np.zeros(inverse.size, dtype=dtype)
    live = inverse >= 0
    out[live] = labels.astype(dtype)[inverse[live]]
    return out.reshape(shape)


def random_picture(rng, shape, *, bits: int = 8, alpha: str = "some", n_palette: int = 40) -> Picture:
    """Random image over a small palette (so colours repeat) plus some unique pixels."""
    top = (1 << bits) - 1
    dtype = np.uint8 if bits == 8 else np.uint16
    palette = rng.integers(0, top + 1, size=(n_palette, 3))
    palette[:2] = [[0, 0, 0], [top, top, top]]  # the extreme packed codes, next to the transparent slot
    rgb = palette[rng.integers(0, n_palette, size=shape)]
    loose = rng.random(shape) < 0.1
    rgb[loose] = rng.integers(0, top + 1, size=(int(loose.sum()), 3))
    a = None
    if alpha == "some":
        a = rng.integers(0, top + 1, size=shape)
        a[rng.random(shape) < 0.3] = 0
    elif alpha == "opaque":  # an alpha channel that hides nothing
        a = np.full(shape, top)
    return Picture(rgb=rgb.astype(dtype), alpha=None if a is None else a.astype(dtype), bit_depth=bits)


@pytest.fixture(params=["dense", "sorted"])
def path(request, monkeypatch):
    """Run the test through the dense histogram or through the sort."""
    monkeypatch.setattr(sampling, "_DENSE_FROM", 1 if request.param == "dense" else 1 << 62)
    return request.param


def check_against_reference(pic: Picture, path: str):
    smp = sampling._sample(pic)
    codes, weights, inverse = reference_sample(pic.rgb, pic.alpha)
    assert smp.codes.dtype == pic.rgb.dtype
    np.testing.assert_array_equal(smp.codes, codes)
    assert smp.weights.dtype == np.float64
    np.testing.assert_array_equal(smp.weights, weights)
    assert smp.inverse.dtype == np.int32
    np.testing.assert_array_equal(smp.inverse, inverse)
    assert smp.shape == pic.shape
    assert smp.n_pixels == int((inverse >= 0).sum())
    assert smp.bit_depth == pic.bit_depth
    # The dense path is taken only for 8-bit images: 16-bit ones always sort.
    assert (smp._packed is not None) == (path == "dense" and pic.bit_depth == 8)
    return smp, inverse


@pytest.mark.parametrize("alpha", ["none", "some", "opaque"])
@pytest.mark.parametrize("bits", [8, 16])
@pytest.mark.parametrize("shape", [(37, 23), (1, 1), (1, 97), (64, 1)])
def test_sample_matches_unique_reference(path, alpha, bits, shape):
    rng = np.random.default_rng([RNG_SEED, bits, *shape, ["none", "some", "opaque"].index(alpha)])
    check_against_reference(random_picture(rng, shape, bits=bits, alpha=alpha), path)


def test_sample_many_colours(path):
    # Every pixel its own random colour: counts of one, codes spread over the whole cube.
    rng = np.random.default_rng(RNG_SEED)
    rgb = rng.integers(0, 256, size=(120, 150, 3)).astype(np.uint8)
    alpha = (rng.random((120, 150)) > 0.5).astype(np.uint8) * 255
    check_against_reference(Picture(rgb=rgb, alpha=alpha), path)


def test_sample_non_contiguous_pixels(path):
    rng = np.random.default_rng(RNG_SEED + 1)
    base = random_picture(rng, (40, 60), alpha="none").rgb
    pic = Picture(rgb=base[::2, 1::3])  # a strided view, not a copy
    assert not pic.rgb.flags.c_contiguous
    check_against_reference(pic, path)


def test_sample_photo_from_scikit_image(path):
    # A real photograph (scikit-image's bundled "astronaut", 512 x 512) with a
    # transparent disc cut out of it.
    from skimage import data

    rgb = data.astronaut()
    yy, xx = np.mgrid[:512, :512]
    alpha = np.where((yy - 200) ** 2 + (xx - 300) ** 2 < 120**2, 0, 255).astype(np.uint8)
    smp, _ = check_against_reference(Picture(rgb=rgb, alpha=alpha), path)
    assert smp.n_colours > 10_000  # a photo, not a flat-colour image: the table is exercised widely


def test_large_image_takes_dense_path_by_default():
    # At the shipped threshold (no monkeypatch) an image of that size is histogrammed.
    rng = np.random.default_rng(RNG_SEED + 2)
    side = int(np.ceil(np.sqrt(sampling._DENSE_FROM / 0.6)))  # about 30 % of the pixels are transparent
    check_against_reference(random_picture(rng, (side, side + 1), alpha="some", n_palette=500), "dense")


def test_fully_transparent_picture(path):
    rgb = np.full((3, 4, 3), 9, np.uint8)
    smp = sampling._sample(Picture(rgb=rgb, alpha=np.zeros((3, 4), np.uint8)))
    assert smp.n_colours == 0 and smp.n_pixels == 0
    np.testing.assert_array_equal(smp.inverse, np.full(12, -1))
    np.testing.assert_array_equal(smp.index_image(np.zeros(0, np.int64), dtype=np.uint8), np.zeros((3, 4)))


def test_inverse_is_built_once(monkeypatch):
    monkeypatch.setattr(sampling, "_DENSE_FROM", 1)
    rng = np.random.default_rng(RNG_SEED + 3)
    smp = sampling._sample(random_picture(rng, (30, 20)))
    assert "inverse" not in smp._cache  # not built by sampling
    first = smp.inverse
    assert "inverse" in smp._cache and smp.inverse is first


@pytest.mark.parametrize("alpha", ["none", "some"])
@pytest.mark.parametrize("dtype", [np.uint8, np.uint16, np.int64])
def test_index_image_matches_labels_of_inverse(path, alpha, dtype):
    rng = np.random.default_rng([RNG_SEED, 7, ["none", "some"].index(alpha), np.dtype(dtype).itemsize])
    pic = random_picture(rng, (45, 31), alpha=alpha)
    smp, inverse = check_against_reference(pic, path)
    top = min(np.iinfo(dtype).max, 1000)
    labels = rng.integers(1, top + 1, size=smp.n_colours)  # no 0 label: a missed transparent pixel would show
    idx = smp.index_image(labels, dtype=dtype)
    assert idx.dtype == dtype and idx.shape == pic.shape
    np.testing.assert_array_equal(idx, reference_index_image(inverse, labels, dtype, pic.shape))
    if alpha == "some":
        assert (idx[pic.alpha == 0] == 0).all() and (idx[pic.alpha > 0] > 0).all()


@pytest.mark.parametrize("step", [2, 3, 7])
@pytest.mark.parametrize("alpha", ["none", "some"])
def test_index_image_every_step_th_pixel_is_the_full_image_subsampled(path, alpha, step):
    # index_image(step=s) is index_image()[::s, ::s], checked against the naive reference
    # (labels of np.unique's inverse), on both sampling paths (``path``) and with transparency.
    rng = np.random.default_rng([RNG_SEED, 11, step, ["none", "some"].index(alpha)])
    pic = random_picture(rng, (45, 31), alpha=alpha)
    smp, inverse = check_against_reference(pic, path)
    labels = rng.integers(1, 1000, size=smp.n_colours)
    idx = smp.index_image(labels, dtype=np.int32, step=step)
    full = reference_index_image(inverse, labels, np.int32, pic.shape)
    assert idx.shape == full[::step, ::step].shape
    np.testing.assert_array_equal(idx, full[::step, ::step])


def test_index_image_keeps_label_dtype_by_default(path):
    rng = np.random.default_rng(RNG_SEED + 4)
    pic = random_picture(rng, (20, 20))
    smp, inverse = check_against_reference(pic, path)
    labels = rng.integers(0, 7, size=smp.n_colours).astype(np.int16)
    idx = smp.index_image(labels)
    assert idx.dtype == np.int16
    np.testing.assert_array_equal(idx, reference_index_image(inverse, labels, np.int16, pic.shape))


def test_index_image_before_and_after_inverse_agree(monkeypatch):
    # Building the lazy inverse must not change what index_image returns.
    monkeypatch.setattr(sampling, "_DENSE_FROM", 1)
    rng = np.random.default_rng(RNG_SEED + 5)
    smp = sampling._sample(random_picture(rng, (25, 35)))
    labels = rng.integers(0, 256, size=smp.n_colours)
    before = smp.index_image(labels, dtype=np.uint8)
    inverse = smp.inverse
    np.testing.assert_array_equal(smp.index_image(labels, dtype=np.uint8), before)
    np.testing.assert_array_equal(before, reference_index_image(inverse, labels, np.uint8, smp.shape))


def test_index_image_rejects_bad_input():
    rng = np.random.default_rng(RNG_SEED + 6)
    smp = sample_picture(random_picture(rng, (10, 10)))
    with pytest.raises(ValueError, match="one value per distinct colour"):
        smp.index_image(np.zeros(smp.n_colours + 1, np.int64))
    pooled = pool_samples([smp, sample_picture(random_picture(rng, (8, 8)))])
    assert pooled.inverse is None
    with pytest.raises(ValueError, match="pooled"):
        pooled.index_image(np.zeros(pooled.n_colours, np.int64))


def test_picture_keeps_its_sample():
    # The picture owns its sample: fitting and mapping one picture collapse it once.  Another
    # picture of the same pixels is another object, with a sample of its own.
    rng = np.random.default_rng(RNG_SEED + 7)
    pic = random_picture(rng, (12, 9))
    first = sample_picture(pic)
    assert sample_picture(pic) is first
    twin = Picture(rgb=pic.rgb.copy(), alpha=pic.alpha.copy())
    other = sample_picture(twin)
    assert other is not first
    np.testing.assert_array_equal(other.codes, first.codes)
    np.testing.assert_array_equal(other.weights, first.weights)


def test_kept_mapping_is_returned_only_for_its_palette_and_metric():
    from quantize.palette import Palette

    rng = np.random.default_rng(RNG_SEED + 8)
    smp = sample_picture(random_picture(rng, (10, 10)))
    a = Palette(rgb8=np.array([[0, 0, 0], [255, 255, 255]], np.uint8), locked=None)
    b = Palette(rgb8=np.array([[0, 0, 0], [250, 255, 255]], np.uint8), locked=None)
    labels, de = np.zeros(smp.n_colours, np.intp), np.ones(smp.n_colours)
    smp.keep_mapping(a, "ciede2000", labels, de)
    got = smp.kept_mapping(a, "ciede2000")
    assert got[0] is labels and got[1] is de and not labels.flags.writeable
    assert smp.kept_mapping(a, "space") is None and smp.kept_mapping(b, "ciede2000") is None
    with pytest.raises(ValueError, match="one value per distinct colour"):
        smp.keep_mapping(b, "ciede2000", labels[:-1], de[:-1])


def _count_calls(monkeypatch, name: str) -> list:
    """Count calls of ``ColourSample.<name>``, each held open a moment so that other threads
    asking for the same value arrive while it is being computed."""
    calls = []
    real = getattr(sampling.ColourSample, name)

    def counted(self, *args):
        calls.append(args)
        time.sleep(0.05)
        return real(self, *args)

    monkeypatch.setattr(sampling.ColourSample, name, counted)
    return calls


def test_derived_arrays_are_computed_once_when_threads_share_a_sample(monkeypatch):
    # The fitting engine's worker threads share one sample; the sample of a picture and each
    # array derived from a sample are computed by one thread only, and every thread gets it.
    # The reference for the values is the colour module's own conversion of the distinct colours.
    from concurrent.futures import ThreadPoolExecutor

    from quantize.colour.spaces import srgb8_to_space

    rng = np.random.default_rng(RNG_SEED + 9)
    pic = random_picture(rng, (60, 50), n_palette=400)
    samplings = []
    real = sampling._sample

    def counted(picture):
        samplings.append(picture)
        time.sleep(0.05)
        return real(picture)

    monkeypatch.setattr(sampling, "_sample", counted)
    point_calls = _count_calls(monkeypatch, "_points_in")
    bin_calls = _count_calls(monkeypatch, "_cell_means")
    with ThreadPoolExecutor(max_workers=6) as pool:
        samples = list(pool.map(lambda _: sample_picture(pic), range(12)))
        smp = samples[0]
        points = list(pool.map(lambda _: smp.points("lab"), range(12)))
        binned = list(pool.map(lambda _: smp.binned("lab", max_points=100, bits=None), range(12)))
    assert len(samplings) == 1 and all(s is smp for s in samples)
    assert point_calls == [("lab",)]
    assert bin_calls == [("lab", 100, None)]
    assert all(p is points[0] for p in points) and all(b[0] is binned[0][0] for b in binned)
    np.testing.assert_allclose(points[0], srgb8_to_space(smp.codes, "lab"), rtol=0, atol=1e-12)
    assert len(binned[0][1]) < smp.n_colours and binned[0][1].sum() == pytest.approx(smp.weights.sum())


def test_derived_cache_stores_nothing_when_a_computation_fails():
    from quantize.core.derived import DerivedCache

    cache = DerivedCache()

    def fail():
        raise RuntimeError("out of memory, say")

    with pytest.raises(RuntimeError):
        cache.get("key", fail)
    assert "key" not in cache
    assert cache.get("key", lambda: 7) == 7 and cache.get("key", fail) == 7


def test_picture_and_sample_pickle_without_their_caches():
    # Batch and Dask workers may receive pictures and samples: the caches' locks do not travel,
    # and a copy computes what it needs afresh, to the same values.
    import pickle

    rng = np.random.default_rng(RNG_SEED + 10)
    pic = random_picture(rng, (8, 7))
    smp = sample_picture(pic)
    smp.points("lab")
    pic2, smp2 = pickle.loads(pickle.dumps((pic, smp)))
    assert "colour sample" not in pic2._derived and ("points", "lab") not in smp2._cache
    np.testing.assert_array_equal(sample_picture(pic2).codes, smp.codes)
    np.testing.assert_array_equal(smp2.points("lab"), smp.points("lab"))
