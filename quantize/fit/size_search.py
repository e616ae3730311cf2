"""The smallest palette size that meets a ΔE00 target, found with few full fits.

A continuous-tone image's automatic size is the smallest palette whose
fully refined fit meets the target (:func:`quantize.fit.engine.fit_palette`).
A full fit of a size costs five to ten times its k-means fit alone, and
the refinements lower the mean ΔE00 by a few per cent, nearly the same share
at every size.  So the search first reads the k-means fits, which are
cheap, to guess where the target is crossed, and then spends full fits
only around that guess: usually two (the size found and the one below it).

The search assumes, as any bisection over sizes does, that a larger palette
never has a higher error; under that assumption the answer is the same
whatever the guess, which steers only how many full fits are needed.
"""

from __future__ import annotations

import math
from typing import Callable

__all__ = ["REFINE_GAIN", "guess_size", "smallest_meeting"]

#: The usual ratio of a refined palette's mean ΔE00 to its k-means fit's.
#: Measured at the size each search found, on scikit-image's astronaut,
#: chelsea, coffee, rocket and hubble_deep_field photos: 0.946, 0.975,
#: 0.932, 0.964 and 0.910; varying this much, it puts the first guess a
#: size or two off either way.  Of 0.95 and 0.97, 0.97 needed fewer full
#: fits over those five photos at full and half size (36 against 40; a
#: second guess along the cheap fits' slope once the first full fit is
#: known needed 35, not worth its code).  It moves only the first full
#: fit, never the answer.
REFINE_GAIN = 0.97


def guess_size(cheap_error: Callable[[int], float], lo: int, hi: int, goal: float) -> int:
    """Where ``cheap_error`` first falls to ``goal``: secant steps on log-log scales, then interpolation.

    Quantisation error falls roughly with a power of the palette size, a
    straight line on log-log scales.  From ``lo`` the size doubles until two
    sizes miss the goal; the line through the last two then predicts the
    crossing, and the next size tried is that prediction (never more than
    double the last size), so the search rarely overshoots far: a large
    size tried in vain costs most, and may load the compiled loops a small
    image would not otherwise need.

    Parameters
    ----------
    cheap_error : callable
        A size's error from a cheap fit; assumed to fall as the size grows.
    lo, hi : int
        The sizes searched, ``1 <= lo <= hi``.
    goal : float
        The error to reach.

    Returns
    -------
    int
        A size in ``[lo, hi]``: ``lo`` if it already reaches the goal, ``hi``
        if no size does, else a size between the last size that missed and
        the first that reached it, where the line between the two crosses
        the goal.
    """
    missed: list[tuple[int, float]] = []
    k = lo
    while True:
        err = cheap_error(k)
        if err <= goal:
            return _crossing(missed[-1], (k, err), goal) if missed else k
        if k >= hi:
            return hi
        missed.append((k, err))
        step = min(2 * k, hi)
        if len(missed) >= 2 and missed[-1][1] < missed[-2][1]:
            step = min(max(_crossing(missed[-2], missed[-1], goal, extrapolate=True), k + 1), step)
        k = step


def _crossing(a: tuple[int, float], b: tuple[int, float], goal: float, *, extrapolate: bool = False) -> int:
    """The size where the line on log-log scales through ``a`` and ``b`` reaches ``goal``, rounded up.

    Interpolating (``a`` missed, ``b`` reached it), the size lies in
    ``(a, b]``; extrapolating (both missed, ``b`` the lower) it lies above ``b``.
    """
    (k0, e0), (k1, e1) = a, b
    if not 0 < e1 < e0:  # no fall to follow: the size that reached it, or one step on
        return k1 if not extrapolate else k1 + 1
    t = math.log(e0 / goal) / math.log(e0 / e1)
    log_size = math.log(k0) + t * (math.log(k1) - math.log(k0))
    size = math.ceil(math.exp(min(log_size, 40.0)))  # a hair's fall predicts an astronomic size: capped
    return size if extrapolate else min(max(size, k0 + 1), k1)


def smallest_meeting(meets: Callable[[int], bool], guess: int, lo: int, hi: int) -> int | None:
    """The smallest size in ``[lo, hi]`` for which ``meets`` holds, starting at ``guess``.

    ``meets`` is assumed monotone (false below some size, true from it on).
    From the guess the search steps 1, 2, 4, ... sizes down while the size
    meets, or up while it does not, then bisects the bracket found; a right
    guess costs two calls.

    Returns
    -------
    int or None
        The size, or None when not even ``hi`` meets.
    """
    if meets(guess):
        b, step = guess, 1
        while True:
            j = b - step
            if j < lo:
                a = lo - 1
                break
            if not meets(j):
                a = j
                break
            b, step = j, 2 * step
    else:
        a, step = guess, 1
        while True:
            if a >= hi:
                return None
            j = min(a + step, hi)
            if meets(j):
                b = j
                break
            a, step = j, 2 * step
    while b - a > 1:
        mid = (a + b) // 2
        if meets(mid):
            b = mid
        else:
            a = mid
    return b
