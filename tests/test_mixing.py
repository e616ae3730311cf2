"""Ink shares on the substrate (separation/mixing.py).

Sources: the mixture of opaque inks printed side by side is the
area-weighted sum of their reflectances (Murray 1936), or of their
reflectances to the power 1/n (Yule & Nielsen 1951); the sRGB encoding of
the targets is colour-science's IEC 61966-2-1 implementation, independent
of the project's own.
"""

import colour
import numpy as np
import pytest

from quantize.errors import SeparationError
from quantize.separation.mixing import ink_shares, project_simplex

INKS = np.array([[200, 30, 40], [20, 40, 120], [240, 200, 30]])  # invented demo inks
PAPER = np.array([245, 240, 225])


def _printed(shares, n=1.0):
    """8-bit sRGB of shares printed on the paper, by the mixing law and colour-science's sRGB."""
    lin = colour.cctf_decoding(np.vstack([PAPER, INKS]) / 255.0, function="sRGB") ** (1.0 / n)
    w = np.hstack([1.0 - shares.sum(axis=1, keepdims=True), shares])
    return 255.0 * colour.cctf_encoding((w @ lin) ** n, function="sRGB")


@pytest.mark.parametrize("n", [1.0, 2.0])
def test_the_shares_of_a_printed_mixture_come_back(n):
    rng = np.random.default_rng(int(n))
    w = rng.dirichlet(np.ones(4), 300)
    shares = w[:, 1:]
    got = ink_shares(np.round(_printed(shares, n)), INKS, PAPER, n=n)
    assert got.shape == shares.shape
    assert (got >= 0).all() and (got.sum(axis=1) <= 1 + 1e-9).all()
    # Rounding the target to 8 bits moves it by half a code: the shares stay within 0.02.
    assert np.abs(got - shares).max() < 0.02


def test_a_colour_the_inks_cannot_make_gets_the_nearest_mixture():
    green = np.array([[30, 200, 60]])
    got = ink_shares(green, INKS, PAPER)
    lin = colour.cctf_decoding(np.vstack([PAPER, INKS]) / 255.0, function="sRGB")
    target = colour.cctf_decoding(green / 255.0, function="sRGB")

    def err(a):
        w = np.hstack([1.0 - a.sum(axis=1, keepdims=True), a])
        return ((w @ lin - target) ** 2).sum(axis=1)

    trials = np.random.default_rng(3).dirichlet(np.ones(4), 5000)[:, 1:]
    assert err(got)[0] <= err(trials).min() + 1e-9


def test_simplex_projection_is_the_nearest_point():
    rng = np.random.default_rng(5)
    v = rng.normal(0, 1, (200, 5))
    p = project_simplex(v)
    assert np.allclose(p.sum(axis=1), 1.0) and (p >= 0).all()
    trials = rng.dirichlet(np.ones(5), 3000)
    for i in range(0, 200, 20):
        assert ((p[i] - v[i]) ** 2).sum() <= ((trials - v[i]) ** 2).sum(axis=1).min() + 1e-12


def test_bad_inputs_are_refused():
    with pytest.raises(SeparationError, match="no inks"):
        ink_shares([[10, 20, 30]], np.zeros((0, 3)), PAPER)
    with pytest.raises(SeparationError, match="Yule-Nielsen"):
        ink_shares([[10, 20, 30]], INKS, PAPER, n=0.5)
