"""Halftone screens (separation/halftone.py), measured on the films they make.

Sources: the printed fraction of a halftone is the inked area of its cells
(Murray 1936, the Murray-Davies relation), so a flat share must ink that
fraction of the film; a screen of f lines per inch at angle a has its
strongest spatial frequency at f cycles per inch in direction a (the
discrete Fourier transform, numpy.fft, is the reference). The frequency,
angle and mesh rules checked last are common practice, from memory.
"""

import math

import numpy as np
import pytest
from scipy import ndimage as ndi

from quantize.errors import SeparationError
from quantize.separation.halftone import Screen, default_angles, halftone, printable_share, screen_warnings


@pytest.mark.parametrize("shape", ["round", "elliptical", "square"])
@pytest.mark.parametrize("share", [0.1, 0.3, 0.5, 0.7, 0.9])
def test_a_flat_share_inks_that_fraction_of_the_film(shape, share):
    film = halftone(np.full((480, 480), share), Screen(lpi=60, angle=22.5, shape=shape), 600)
    assert film.dtype == bool
    assert abs(film.mean() - share) < 0.01


@pytest.mark.parametrize("lpi, angle", [(50, 30.0), (40, 75.0), (65, 0.0)])
def test_the_screen_has_its_frequency_and_angle(lpi, angle):
    dpi, n = 600, 1200
    film = halftone(np.full((n, n), 0.5), Screen(lpi=lpi, angle=angle), dpi).astype(float)
    spectrum = np.abs(np.fft.fft2(film - film.mean()))
    iy, ix = np.unravel_index(np.argmax(spectrum), spectrum.shape)
    fy, fx = np.fft.fftfreq(n)[iy] * dpi, np.fft.fftfreq(n)[ix] * dpi  # cycles per inch
    assert math.hypot(fx, fy) == pytest.approx(lpi, abs=dpi / n)  # within one frequency bin
    # A square grid repeats every 90 degrees; the peak may lie on either axis of the screen.
    found = math.degrees(math.atan2(fy, fx)) % 90.0
    assert min(abs(found - angle % 90.0), 90.0 - abs(found - angle % 90.0)) < 1.5


def test_a_ramp_inks_more_where_the_share_is_higher():
    ramp = np.tile(np.linspace(0, 1, 600), (240, 1))
    film = halftone(ramp, Screen(lpi=50), 600)
    columns = film.mean(axis=0)
    thirds = [columns[i * 200:(i + 1) * 200].mean() for i in range(3)]
    assert thirds[0] < thirds[1] < thirds[2]
    assert abs(thirds[1] - 0.5) < 0.02


def test_dots_below_the_minimum_are_dropped_or_grown_never_specks():
    screen = Screen(lpi=40, angle=45, min_dot_mm=0.2)
    dpi = 1200
    min_px = math.pi * (0.2 / 25.4 * dpi / 2) ** 2  # the minimum dot's area in film pixels
    assert halftone(np.full((400, 400), screen.min_share * 0.4), screen, dpi).sum() == 0
    film = halftone(np.full((400, 400), screen.min_share * 0.7), screen, dpi)
    assert abs(film.mean() - screen.min_share) < 0.01  # grown to the minimum
    labels, n = ndi.label(film)
    areas = np.bincount(labels.ravel())[1:]
    cut = np.unique(np.concatenate([labels[0], labels[-1], labels[:, 0], labels[:, -1]]))
    whole = np.delete(areas, cut[cut > 0] - 1)  # dots cut by the film's edge aside
    assert n > 0 and len(whole) and whole.min() >= 0.85 * min_px
    full = halftone(np.full((400, 400), 1 - screen.min_share * 0.4), screen, dpi)
    assert full.all()  # holes below half the minimum fill in


def test_printable_share_and_default_angles():
    assert printable_share(np.array([0.0, 0.01, 0.03, 0.5, 0.97, 0.99, 1.0]), 0.04).tolist() == \
        [0.0, 0.0, 0.04, 0.5, 0.96, 1.0, 1.0]
    for n in (1, 2, 3, 4, 6):
        angles = default_angles(n)
        assert len(angles) == n
        gaps = [abs(a - b) % 90.0 for i, a in enumerate(angles) for b in angles[i + 1:]]
        assert all(min(g, 90.0 - g) >= (30.0 if n <= 3 else 90.0 / n) - 1e-9 for g in gaps)


def test_screens_too_fine_for_the_film_or_the_mesh_are_warned():
    assert screen_warnings(Screen(lpi=55), 600, mesh=230) == []
    fine = screen_warnings(Screen(lpi=85), 600)
    assert len(fine) == 1 and "too fine for 600 dpi" in fine[0]
    coarse = screen_warnings(Screen(lpi=65), 1200, mesh=200)
    assert len(coarse) == 1 and "too coarse" in coarse[0]


@pytest.mark.parametrize("kw, message", [({"lpi": 0}, "lines per inch"), ({"lpi": 50, "shape": "star"}, "dot shape"),
                                         ({"lpi": 50, "min_dot_mm": -1}, "minimum dot"),
                                         ({"lpi": 50, "angle": float("nan")}, "angle")])
def test_bad_screens_are_refused(kw, message):
    with pytest.raises(SeparationError, match=message):
        Screen(**kw)
