"""Palette-size selection on artwork the tests generate.

The artwork (tests/artwork.py) has a known number of flat inks, with
anti-aliased edges and optionally JPEG quality-85 noise; the default rule
must return exactly that number.  This is the project's own requirement for
the rule (generated data, no outside source).
"""

import numpy as np
import pytest
from artwork import flat_artwork

from quantize import fit_palette
from quantize.fit.selection import bic_scores, check_rule, choose_k


@pytest.mark.parametrize("n_inks", range(3, 11))
@pytest.mark.parametrize("jpeg", [None, 85])
def test_default_rule_finds_the_ink_count(n_inks, jpeg):
    rgb, _ = flat_artwork(n_inks, seed=100 + n_inks, jpeg_quality=jpeg)
    pal = fit_palette(rgb, k=(2, 12), seed=0)
    assert pal.k == n_inks, pal.fit.reason


@pytest.mark.parametrize("n_inks", [4, 7])
def test_rule_holds_for_other_artwork_seeds(n_inks):
    for seed in (1, 2):
        rgb, _ = flat_artwork(n_inks, seed=seed, jpeg_quality=85)
        assert fit_palette(rgb, k=(2, 12), seed=seed).k == n_inks


def test_target_rule_takes_smallest_k_meeting_target():
    rgb, _ = flat_artwork(6, seed=3, jpeg_quality=85)
    pal = fit_palette(rgb, k=(2, 12), rule="target", target=2.0, target_stat="mean")
    cands = {c.k: c.delta_e["mean"] for c in pal.fit.candidates}
    assert cands[pal.k] <= 2.0
    assert all(cands[k] > 2.0 for k in cands if k < pal.k)


def test_target_rule_unreachable_takes_largest_and_says_so():
    rgb, _ = flat_artwork(6, seed=3, jpeg_quality=85)
    pal = fit_palette(rgb, k=(2, 4), rule="target", target=0.01)
    assert pal.k == 4 and "no k" in pal.fit.reason


def test_penalty_grows_with_k_at_equal_error():
    s = bic_scores([2, 3, 4], [5.0, 5.0, 5.0])
    assert np.all(np.diff(s) > 0)


def test_rule_validation():
    with pytest.raises(ValueError, match="bic, target"):
        check_rule("elbow")
    with pytest.raises(ValueError, match="positive"):
        choose_k([2, 3], [{"mean": 1}] * 2, [1, 1], rule="target", target=None)


def test_pooled_artworks_count_the_union_of_their_inks():
    # Two generated 4-ink artworks with different inks (seeds 1 and 2), pooled:
    # the rule must count 8.  The closest pair across the two sets is about
    # ΔE00 8 apart (checked below), plainly two colours to a viewer.
    from skimage.color import deltaE_ciede2000, rgb2lab

    a, inks_a = flat_artwork(4, seed=1, jpeg_quality=85)
    b, inks_b = flat_artwork(4, seed=2, jpeg_quality=85)
    la, lb = rgb2lab(inks_a[None] / 255.0)[0], rgb2lab(inks_b[None] / 255.0)[0]
    assert min(deltaE_ciede2000(x[None], lb).min() for x in la) > 5
    assert fit_palette([a, b], k=(2, 12)).k == 8
    assert fit_palette([a, a], k=(2, 12)).k == 4
