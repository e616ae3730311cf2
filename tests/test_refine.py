"""The k-medians refinements under CIEDE2000 (quantize.fit.refine).

Sources: CIEDE2000 per Sharma, Wu & Dalal (2005) (the kernels are held to
their Table 1 in test_engine_kernels.py); scikit-image's bundled photos as
real data; scikit-learn's KMeans (test-only) as the reference k-means whose
palette the refinement must improve on.
"""

from __future__ import annotations

import naive
import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from numpy.testing import assert_array_equal

from quantize.colour.spaces import srgb8_to_space
from quantize.fit.refine import ciede2000_medians, compass_polish


def _weighted_de(lab, w, centres):
    labels, de = naive.nearest_ciede2000(lab, centres)
    return float((w * de[np.arange(len(lab)), labels]).sum())


@settings(max_examples=25, deadline=None)
@given(st.integers(0, 10_000), st.integers(1, 6), st.integers(0, 2))
def test_medians_never_raise_the_sum_and_keep_locked_centres(seed, k, n_fixed):
    rng = np.random.default_rng(seed)
    lab = srgb8_to_space(rng.integers(0, 256, (300, 3)).astype(np.uint8), "lab")
    w = rng.integers(1, 50, 300).astype(float)
    start = lab[rng.choice(300, size=k + n_fixed, replace=False)]
    out = ciede2000_medians(lab, w, start, n_fixed=n_fixed, iters=6)
    assert out.shape == start.shape
    assert_array_equal(out[:n_fixed], start[:n_fixed])
    assert _weighted_de(lab, w, out) <= _weighted_de(lab, w, start) * (1 + 1e-12)


@settings(max_examples=25, deadline=None)
@given(st.integers(0, 10_000), st.integers(1, 5))
def test_compass_polish_never_raises_the_cost_for_fixed_labels(seed, k):
    from quantize.kernels.nearest import ciede2000_to

    rng = np.random.default_rng(seed)
    lab = srgb8_to_space(rng.integers(0, 256, (200, 3)).astype(np.uint8), "lab")
    w = rng.integers(1, 20, 200).astype(float)
    centres = lab[:k] + rng.normal(size=(k, 3))
    labels = rng.integers(0, k, 200)
    out = compass_polish(lab, w, centres, labels, n_fixed=1)
    assert_array_equal(out[0], centres[0])
    before = (w * ciede2000_to(lab, centres, labels)).sum()
    after = (w * ciede2000_to(lab, out, labels)).sum()
    assert after <= before


def test_medians_weighted_equal_repeated():
    # A colour of weight 3 counts as three copies of it.
    rng = np.random.default_rng(1)
    lab = srgb8_to_space(rng.integers(0, 256, (120, 3)).astype(np.uint8), "lab")
    w = rng.integers(1, 4, 120)
    rep = np.repeat(lab, w, axis=0)
    start = lab[:4]
    a = ciede2000_medians(lab, w.astype(float), start, iters=5, polish=())
    b = ciede2000_medians(rep, np.ones(len(rep)), start, iters=5, polish=())
    np.testing.assert_allclose(a, b, atol=1e-9)


@pytest.mark.parametrize("k", [4, 8])
def test_refined_palette_beats_reference_kmeans_on_a_photo(k):
    # scikit-image's 'coffee' photo; the reference is scikit-learn's KMeans in
    # CIELAB (test-only), its centres mapped by Euclidean distance as a plain
    # recipe would.  The CIEDE2000 k-medians start from those centres, so a
    # lower mean ΔE00 is the least they must achieve.
    skimage_data = pytest.importorskip("skimage.data")
    sklearn_cluster = pytest.importorskip("sklearn.cluster")
    from quantize.core.sampling import sample_picture
    from quantize.io.read import as_picture
    from quantize.kernels.nearest import assign_nearest, ciede2000_to, nearest_ciede2000

    smp = sample_picture(as_picture(skimage_data.coffee()[::2, ::2]))
    lab, w = smp.points("lab"), smp.weights
    km = sklearn_cluster.KMeans(n_clusters=k, n_init=4, random_state=0).fit(lab, sample_weight=w)
    ref = km.cluster_centers_
    ref_de = ciede2000_to(lab, ref, assign_nearest(lab, ref)[0])
    ours = ciede2000_medians(lab, w, ref, iters=20)
    our_de = nearest_ciede2000(lab, ours)[1]
    assert (w * our_de).sum() < 0.97 * (w * ref_de).sum()


def _compass_every_round(lab, w, centres, labels, n_fixed, steps, max_rounds):
    """The compass search measuring every colour in every round (the plain form of _compass)."""
    from quantize.kernels.nearest import CiedeColumns

    cols = CiedeColumns(lab)
    c = np.array(centres, dtype=np.float64)
    k = c.shape[0]
    free = np.arange(k) >= n_fixed
    de = cols.to(c, labels)
    for step in steps:
        for _ in range(max_rounds):
            moved = False
            for axis in range(3):
                for sign in (1.0, -1.0):
                    trial = c.copy()
                    trial[free, axis] += sign * step
                    de_t = cols.to(trial, labels)
                    better = free & (np.bincount(labels, weights=w * (de - de_t), minlength=k) > 0)
                    if better.any():
                        c[better] = trial[better]
                        de = np.where(better[labels], de_t, de)
                        moved = True
            if not moved:
                break
    return c


@settings(max_examples=20, deadline=None)
@given(st.integers(0, 10_000), st.integers(1, 7))
def test_compass_measuring_only_moved_centres_equals_measuring_all(seed, k):
    # With the labels fixed each centre's sum depends on that centre alone, so
    # skipping the colours of centres that stayed put through a round must
    # give exactly the plain search's centres.
    rng = np.random.default_rng(seed)
    lab = srgb8_to_space(rng.integers(0, 256, (400, 3)).astype(np.uint8), "lab")
    w = rng.integers(1, 20, 400).astype(float)
    centres = lab[:k] + rng.normal(scale=3.0, size=(k, 3))
    labels = naive.nearest_ciede2000(lab, centres)[0]
    ours = compass_polish(lab, w, centres, labels, n_fixed=1, steps=(1.0, 0.5, 0.25))
    plain = _compass_every_round(lab, w, centres, labels, 1, (1.0, 0.5, 0.25), 3)
    assert_array_equal(ours, plain)


def test_float32_columns_match_colour_science_and_the_full_scan():
    # The k-medians measure ΔE00 on float32 columns; against colour-science's
    # CIEDE2000 (reference library) they must agree to float32 rounding, and
    # the nearest colour must be the full scan's wherever the two best
    # differ by more than that rounding.
    colour = pytest.importorskip("colour")
    from quantize.kernels.nearest import CiedeColumns

    rng = np.random.default_rng(7)
    lab = srgb8_to_space(rng.integers(0, 256, (5000, 3)).astype(np.uint8), "lab")
    pal = srgb8_to_space(rng.integers(0, 256, (12, 3)).astype(np.uint8), "lab")
    cols = CiedeColumns(lab)
    labels = rng.integers(0, 12, 5000)
    ref_to = colour.difference.delta_E_CIE2000(lab, pal[labels])
    # float32 keeps about 7 digits; a few operations lose one more (relative 2e-5).
    np.testing.assert_allclose(cols.to(pal, labels), ref_to, rtol=2e-5, atol=2e-4)
    got_labels, got_de = cols.nearest(pal)
    table = np.stack([colour.difference.delta_E_CIE2000(lab, c) for c in pal], axis=1)
    order = np.sort(table, axis=1)
    clear = order[:, 1] - order[:, 0] > 1e-3
    assert clear.mean() > 0.99
    assert_array_equal(got_labels[clear], table.argmin(axis=1)[clear])
    np.testing.assert_allclose(got_de, order[:, 0], rtol=2e-5, atol=2e-4)
