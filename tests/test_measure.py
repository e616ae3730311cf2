"""ΔE statistics and coverage on weighted distinct colours.

Reference: numpy.quantile with method="inverted_cdf" (Hyndman & Fan 1996,
definition 1) on the pixels written out one by one.
"""

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from quantize.quality.stats import coverage_percent, delta_e_stats, weighted_quantile


@settings(max_examples=60, deadline=None)
@given(st.lists(st.tuples(st.floats(0, 60, allow_nan=False), st.integers(1, 20)), min_size=1, max_size=40),
       st.floats(0, 1))
def test_weighted_quantile_equals_repeated_pixels(pairs, q):
    v = np.array([p[0] for p in pairs])
    w = np.array([p[1] for p in pairs])
    expect = np.quantile(np.repeat(v, w), q, method="inverted_cdf")
    assert weighted_quantile(v, w, q) == expect


def test_stats_equal_per_pixel_computation():
    rng = np.random.default_rng(0)
    de = rng.gamma(2.0, 1.5, 500)
    w = rng.integers(1, 50, 500)
    pix = np.repeat(de, w)
    s = delta_e_stats(de, w)
    assert s["mean"] == pytest.approx(pix.mean(), rel=1e-12)
    assert s["median"] == np.quantile(pix, 0.5, method="inverted_cdf")
    assert s["p95"] == np.quantile(pix, 0.95, method="inverted_cdf")
    assert s["max"] == pix.max()


def test_zero_weight_colours_are_ignored():
    s = delta_e_stats([1.0, 99.0], [3, 0])
    assert s["max"] == 1.0 and s["mean"] == 1.0


def test_coverage_reports_unused_colours_as_zero():
    cov = coverage_percent([0, 0, 2], [1.0, 1.0, 2.0], 4)
    np.testing.assert_allclose(cov, [50.0, 0.0, 50.0, 0.0])
    assert cov.sum() == pytest.approx(100.0)


@pytest.mark.parametrize("seed", [0, 1, 2])
def test_large_inputs_select_the_same_quantiles_as_numpy(seed):
    # Above 65 536 values the quantiles come from one sorted bucket each; the
    # reference is numpy's inverted-CDF quantile over the repeated values
    # (Hyndman & Fan 1996, definition 1), with ties and zero weights present.
    rng = np.random.default_rng(seed)
    n = 100_000
    v = np.round(rng.gamma(2.0, 2.0, n), 2)
    w = rng.integers(0, 6, n)
    w[:3] = 1
    q = [0.0, 0.01, 0.5, 0.95, 0.999, 1.0]
    expect = np.quantile(np.repeat(v, w), q, method="inverted_cdf")
    np.testing.assert_array_equal(weighted_quantile(v, w.astype(float), q), expect)
