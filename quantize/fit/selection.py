"""Palette-size selection: how many colours a job needs.

Two rules choose k from the candidates fitted over a range by counting
pixels; the default ``"auto"`` rule, which looks at where the colours sit,
lives in :mod:`quantize.fit.inkcount` and the engine (with no picture to look
at, it falls back to ``"bic"``):

``"bic"``
    A penalised error-versus-palette-size score in the form of the Bayesian
    information criterion, on a heavy-tailed (Cauchy) per-pixel error::

        R_k     = sum_i w_i * tau**2 * ln(1 + (dE_i / tau)**2) / sum_i w_i
        score_k = m * ln(R_k + s0**2) + p_k * ln(m),   p_k = k * (d + 1)

    ``dE_i`` is the CIEDE2000 difference of distinct colour i to the palette
    colour it is mapped to, ``w_i`` its pixel count, ``d = 3`` the colour
    dimensions (a palette entry costs d coordinates and one pixel share).
    The smallest score wins.

    * ``R_k`` is the mean negative log-likelihood of a Cauchy error of scale
      ``tau`` (5 ΔE00), up to constants: quadratic for small differences,
      only logarithmic for large ones.  Anti-aliased edge pixels and
      compression ringing sit between inks at large ΔE; under a squared error
      they would ask for colours of their own, under this one they cannot.
    * ``s0`` (2 ΔE00, about the difference a trained eye sees between
      neighbouring patches; common practice, no single source) is an error
      floor: below it a palette cannot be told apart from the original, so
      no colour is bought to go lower.
    * ``m``, the sample-size term, counts *effectively independent*
      observations, not pixels.  Neighbouring pixels of an image are close
      copies of one another, and counting each as an independent draw makes
      ``ln(n)/n`` vanish: the rule would then buy a colour for every sliver
      of noise.  ``m`` defaults to 192, which makes the rule add a colour only
      when it cuts ``R_k + s0**2`` by about a tenth
      (``exp(-(d+1) ln(m) / m)`` = 0.90).  The value was calibrated on
      generated flat-colour artwork (3 to 10 inks, anti-aliased, with and
      without JPEG quality 85, four artworks per ink count): the rule returns
      the true ink count on all of it (``tests/test_selection.py``).  Raise
      it to make the rule buy colours more readily, lower it for fewer.

``"target"``
    The smallest k whose ΔE00 statistic (``mean`` or ``p95``) is at or below
    a target.  If no k in the range meets it, the largest k is taken and the
    result says so.

References
----------
.. [1] G. Schwarz, "Estimating the dimension of a model", Annals of
   Statistics 6(2), 461-464, 1978.
.. [2] D. Pelleg and A. Moore, "X-means: extending k-means with efficient
   estimation of the number of clusters", Proceedings of the 17th
   International Conference on Machine Learning, 727-734, 2000.
.. [3] P. J. Huber and E. M. Ronchetti, Robust Statistics, 2nd ed., Wiley,
   2009 (heavy-tailed error models such as the Cauchy loss).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

__all__ = [
    "RULES",
    "check_rule",
    "robust_error",
    "bic_scores",
    "choose_k",
    "Choice",
    "TAU",
    "ERROR_FLOOR",
    "EFFECTIVE_SAMPLES",
]

TAU = 5.0
ERROR_FLOOR = 2.0
EFFECTIVE_SAMPLES = 192
_DIMS = 3

#: Rule names and a one-line description of each.
RULES = {
    "auto": "artwork: the fewest inks that print every flat area; continuous tone: the smallest palette "
            "meeting a ΔE00 target (quantize.fit.inkcount)",
    "bic": "penalised robust ΔE00 error versus palette size (BIC form)",
    "target": "smallest palette whose ΔE00 statistic meets a target",
}
_TARGET_STATS = ("mean", "p95")


def check_rule(name: str) -> str:
    """Return ``name`` if it is a known rule, else raise ValueError listing them."""
    if name not in RULES:
        raise ValueError(f"unknown palette-size rule {name!r}; choose one of: {', '.join(RULES)}")
    return name


def robust_error(delta_e, weights, *, tau: float = TAU) -> float:
    """Pixel-weighted mean Cauchy loss ``tau**2 ln(1 + (dE/tau)**2)`` (``R_k`` above)."""
    de = np.asarray(delta_e, dtype=np.float64)
    w = np.asarray(weights, dtype=np.float64)
    return float((w * (tau * tau) * np.log1p((de / tau) ** 2)).sum() / w.sum())


def bic_scores(ks, errors, *, m: float = EFFECTIVE_SAMPLES, floor: float = ERROR_FLOOR) -> np.ndarray:
    """The penalised score of each candidate k (smaller is better).

    Parameters
    ----------
    ks : array_like of int
        Palette sizes.
    errors : array_like of float
        ``R_k`` of each, from :func:`robust_error`.
    m : float, default=192
        Effective sample size (see the module notes).
    floor : float, default=2.0
        Error floor ``s0`` in ΔE00.
    """
    ks = np.asarray(ks, dtype=np.float64)
    r = np.asarray(errors, dtype=np.float64)
    return m * np.log(r + floor**2) + ks * (_DIMS + 1) * np.log(m)


@dataclass(frozen=True)
class Choice:
    """The chosen palette size and why."""

    k: int
    rule: str
    reason: str
    scores: tuple = ()


def choose_k(ks, stats, robust, *, rule: str = "bic", target: float | None = None,
             target_stat: str = "mean", m: float = EFFECTIVE_SAMPLES) -> Choice:
    """Pick k from fitted candidates.

    Parameters
    ----------
    ks : sequence of int
        Candidate sizes, ascending.
    stats : sequence of dict
        ΔE00 statistics (``mean``, ``median``, ``p95``, ``max``) per candidate.
    robust : sequence of float
        ``R_k`` per candidate.
    rule : {"bic", "target"}
    target : float, optional
        ΔE00 target; required for ``rule="target"``.
    target_stat : {"mean", "p95"}
        The statistic the target applies to.
    m : float
        Effective sample size of the ``"bic"`` rule.

    Returns
    -------
    Choice
    """
    check_rule(rule)
    if rule == "auto":  # decided from the image's regions by the engine; on a bare table, the penalised rule
        rule = "bic"
    ks = [int(k) for k in ks]
    scores = tuple(float(s) for s in bic_scores(ks, robust, m=m))
    if rule == "bic":
        i = int(np.argmin(scores))
        reason = f"penalised score {scores[i]:.1f}, the lowest over k = {ks[0]}..{ks[-1]}"
        return Choice(ks[i], rule, reason, scores)
    if target is None or not target > 0:
        raise ValueError(f"the target rule needs a positive ΔE00 target, got {target!r}")
    if target_stat not in _TARGET_STATS:
        raise ValueError(f"target statistic must be one of {', '.join(_TARGET_STATS)}, got {target_stat!r}")
    for k, s in zip(ks, stats):
        if s[target_stat] <= target:
            return Choice(k, rule, f"smallest k with ΔE00 {target_stat} {s[target_stat]:.2f} <= {target:g}", scores)
    return Choice(ks[-1], rule,
                  f"no k up to {ks[-1]} meets ΔE00 {target_stat} <= {target:g} "
                  f"(best {stats[-1][target_stat]:.2f}); took the largest", scores)
