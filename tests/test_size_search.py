"""The continuous-tone size search: the same smallest size as a full scan, with few full fits.

The search's answer may not depend on its guess (quantize/fit/size_search.py):
checked against a brute-force scan of every size on random monotone
step functions and on power-law error curves (quantisation error falling
with a power of the palette size; the exponent -1/3 of a uniform 3-D
distribution is high-rate quantisation theory, Gersho 1979, here from memory).
"""

import numpy as np
import pytest

from quantize.fit.size_search import guess_size, smallest_meeting


def _brute(meets, lo, hi):
    return next((k for k in range(lo, hi + 1) if meets(k)), None)


@pytest.mark.parametrize("seed", range(40))
def test_any_guess_finds_the_smallest_meeting_size(seed):
    rng = np.random.default_rng(seed)
    lo = int(rng.integers(1, 5))
    hi = lo + int(rng.integers(0, 300))
    threshold = int(rng.integers(lo, hi + 3))  # may lie above hi: then no size meets
    calls = []

    def meets(k):
        assert lo <= k <= hi, k
        calls.append(k)
        return k >= threshold

    truth = _brute(lambda k: k >= threshold, lo, hi)
    for guess in {lo, hi, int(rng.integers(lo, hi + 1)), min(max(threshold, lo), hi)}:
        calls.clear()
        assert smallest_meeting(meets, guess, lo, hi) == truth
        assert len(calls) <= 2 * int(np.log2(hi - lo + 2)) + 3


def test_a_right_guess_costs_two_calls():
    calls = []

    def meets(k):
        calls.append(k)
        return k >= 35

    assert smallest_meeting(meets, 35, 2, 256) == 35
    assert sorted(calls) == [34, 35]


@pytest.mark.parametrize("scale, exponent, goal", [(12.0, -1 / 3, 2.5), (9.0, -0.45, 2.5), (20.0, -0.3, 3.0),
                                                   (5.0, -1 / 3, 8.0), (30.0, -0.5, 0.5)])
def test_the_guess_lands_on_the_crossing_of_a_power_law(scale, exponent, goal):
    def err(k):
        return scale * k ** exponent

    truth = _brute(lambda k: err(k) <= goal, 2, 256)
    g = guess_size(err, 2, 256, goal)
    assert 2 <= g <= 256
    if truth is None:
        assert g == 256
    else:
        # log-log interpolation of an exact power law is exact, up to rounding the size up
        assert g == truth


@pytest.mark.parametrize("threshold", [1, 2, 3, 9, 10])
def test_every_guess_at_the_ends_of_the_range(threshold):
    # The smallest size of the range meeting (threshold 1 or 2 with lo = 2), the largest (10), none (above it).
    lo, hi = 2, 10
    for guess in range(lo, hi + 1):
        found = smallest_meeting(lambda k: k >= threshold, guess, lo, hi)
        assert found == _brute(lambda k: k >= threshold, lo, hi), guess


def test_a_cheap_error_of_zero_guesses_the_first_size_reaching_the_goal():
    # Exact at size 16 (as many colours as the image has): no power law to interpolate.
    assert guess_size(lambda k: 5.0 if k <= 8 else 0.0, 2, 256, 3.0) == 16
    # A jump between two doublings is interpolated like any other fall.
    assert guess_size(lambda k: 5.0 if k <= 8 else 2.0, 2, 256, 3.0) == 12
    assert guess_size(lambda k: 2.0, 2, 256, 3.0) == 2
    assert guess_size(lambda k: 5.0, 2, 256, 3.0) == 256


@pytest.mark.parametrize("scale, exponent, goal", [(12.0, -1 / 3, 2.5), (9.0, -0.45, 2.5), (30.0, -0.5, 3.0)])
def test_the_guess_never_tries_a_size_beyond_a_power_laws_crossing(scale, exponent, goal):
    # A size tried in vain above the answer is the costliest step of the search.
    tried = []

    def err(k):
        tried.append(k)
        return scale * k ** exponent

    g = guess_size(err, 2, 256, goal)
    assert max(tried) == g == _brute(lambda k: scale * k ** exponent <= goal, 2, 256)


def test_an_error_that_hardly_falls_steps_to_the_top_of_the_range():
    # 5.0, then a hair less at each doubling: the line predicts a size beyond any range.
    assert guess_size(lambda k: 5.0 - 1e-12 * k, 2, 256, 3.0) == 256
