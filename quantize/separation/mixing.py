"""How much of each ink to print so that the mixture on the substrate matches a colour.

Opaque inks printed side by side as halftone dots or index pixels (no ink
on another) leave the substrate showing in the rest of each small area, and
the eye mixes the reflected light.  With shares ``a_i`` of the inks and
``a_0 = 1 - sum(a_i)`` of bare substrate, the reflectance of the mixture per
channel is (Murray-Davies; with the Yule-Nielsen factor ``n`` for light
scattered in the paper)::

    R^(1/n) = a_0 * R_substrate^(1/n) + sum_i a_i * R_ink_i^(1/n)

so the reachable colours are the convex hull of the substrate and the inks
in that space.  :func:`ink_shares` finds, for each colour, the shares whose
mixture lies nearest to it there: the Euclidean projection onto the hull,
a least-squares problem over the simplex, solved by accelerated projected
gradient steps (the simplex projection of Duchi et al. 2008).

Reflectances are linear-light sRGB (IEC 61966-2-1) values of the colours'
sRGB previews: a stand-in for measured spectra, so the shares are a starting
point to proof, not a print prediction.  With more than three inks the
shares of a colour are not unique (four or more points span the 3-D
space); the solver returns one of the nearest mixtures.

References
----------
.. [1] A. Murray, "Monochrome reproduction in photoengraving", Journal of the
   Franklin Institute 221(6), 721-744, 1936.
.. [2] J. A. C. Yule and W. J. Nielsen, "The penetration of light into paper
   and its effect on halftone reproduction", Proc. TAGA 3, 65-76, 1951.
.. [3] J. Duchi, S. Shalev-Shwartz, Y. Singer and T. Chandra, "Efficient
   projections onto the l1-ball for learning in high dimensions", ICML 2008.
.. [4] D. R. Wyble and R. S. Berns, "A critical review of spectral models
   applied to binary color printing", Color Res. Appl. 25(1), 4-19, 2000
   (Demichel's equations: the areas of overlapping independent screens).
.. [5] A. Beck and M. Teboulle, "A fast iterative shrinkage-thresholding
   algorithm for linear inverse problems", SIAM J. Imaging Sci. 2(1),
   183-202, 2009 (the accelerated steps).
"""

from __future__ import annotations

import numpy as np

from quantize.colour.spaces import srgb_to_linear
from quantize.errors import SeparationError

__all__ = ["ink_shares", "mix", "project_simplex", "printed_shares"]


def project_simplex(v: np.ndarray) -> np.ndarray:
    """Each row of ``v`` projected onto the probability simplex (non-negative, summing to 1).

    Examples
    --------
    >>> project_simplex(np.array([[0.2, 0.2, 0.2], [2.0, 0.0, -1.0]])).round(4).tolist()
    [[0.3333, 0.3333, 0.3333], [1.0, 0.0, 0.0]]
    """
    v = np.asarray(v, dtype=np.float64)
    k = v.shape[1]
    u = -np.sort(-v, axis=1)
    css = np.cumsum(u, axis=1) - 1.0
    idx = np.arange(1, k + 1)
    cond = u - css / idx > 0
    rho = k - 1 - np.argmax(cond[:, ::-1], axis=1)  # the last index where cond holds
    theta = css[np.arange(len(v)), rho] / (rho + 1.0)
    return np.maximum(v - theta[:, None], 0.0)


def _to_space(rgb8: np.ndarray, n: float) -> np.ndarray:
    return srgb_to_linear(np.asarray(rgb8, dtype=np.float64) / 255.0) ** (1.0 / n)


def mix(shares: np.ndarray, ink_rgb8, substrate_rgb8, *, n: float = 1.0) -> np.ndarray:
    """The linear-light sRGB reflectance of ink shares (rows of ``shares``) printed on the substrate."""
    inks = _to_space(np.asarray(ink_rgb8).reshape(-1, 3), n)
    sub = _to_space(np.asarray(substrate_rgb8).reshape(3), n)
    a = np.asarray(shares, dtype=np.float64)
    return ((1.0 - a.sum(axis=1, keepdims=True)) * sub + a @ inks) ** n


def ink_shares(rgb8, ink_rgb8, substrate_rgb8, *, n: float = 1.0, iters: int = 200) -> np.ndarray:
    """Per colour, the share of each ink to print on the substrate to match it.

    Parameters
    ----------
    rgb8 : array_like of shape (m, 3)
        The colours to match, 8-bit sRGB.
    ink_rgb8 : array_like of shape (k, 3)
        The inks' colours (opaque), 8-bit sRGB.
    substrate_rgb8 : array_like of shape (3,)
    n : float, default=1.0
        The Yule-Nielsen factor (1: Murray-Davies; 1.5 to 2 is often used
        for uncoated paper, common practice from memory).
    iters : int, default=200
        Accelerated projected gradient steps.

    Returns
    -------
    ndarray of shape (m, k)
        Shares from 0 to 1, each row summing to at most 1 (the rest is bare
        substrate).

    Examples
    --------
    >>> inks = np.array([[200, 30, 40], [20, 40, 120]])
    >>> half = mix(np.array([[0.5, 0.0]]), inks, [255, 255, 255])
    >>> target = np.round(255 * (np.where(half > 0.0031308, 1.055 * half ** (1 / 2.4) - 0.055, 12.92 * half)))
    >>> ink_shares(target, inks, [255, 255, 255]).round(2).tolist()
    [[0.5, 0.0]]
    """
    target = np.asarray(rgb8, dtype=np.float64).reshape(-1, 3)
    inks = np.asarray(ink_rgb8, dtype=np.float64).reshape(-1, 3)
    if inks.shape[0] == 0:
        raise SeparationError("no inks to mix")
    if not (np.isfinite(n) and n >= 1.0):
        raise SeparationError(f"the Yule-Nielsen factor must be 1 or more, got {n!r}")
    t = _to_space(target, n)
    # Vertices of the hull: the substrate first, then the inks.
    verts = np.vstack([_to_space(np.asarray(substrate_rgb8, dtype=np.float64).reshape(1, 3), n), _to_space(inks, n)])
    gram = verts @ verts.T
    step = 1.0 / max(float(np.linalg.eigvalsh(gram).max()), 1e-12)
    w = np.full((len(t), len(verts)), 1.0 / len(verts))
    tv = t @ verts.T
    # Accelerated projected gradient (FISTA, Beck & Teboulle 2009): the same fixed point in far fewer steps.
    z, theta = w, 1.0
    for _ in range(iters):
        w_next = project_simplex(z - step * (z @ gram - tv))
        theta_next = 0.5 * (1.0 + np.sqrt(1.0 + 4.0 * theta * theta))
        z = w_next + ((theta - 1.0) / theta_next) * (w_next - w)
        w, theta = w_next, theta_next
    return w[:, 1:]


def printed_shares(visible: np.ndarray) -> np.ndarray:
    """The share each ink must print so that ``visible`` of it shows under the inks printed after it.

    Columns of ``visible`` are inks in print order.  Halftone screens at
    different angles overlap at random (independently), so an opaque ink
    printed with area ``a_i`` shows on ``a_i * prod_{j > i} (1 - a_j)`` of
    the area (Demichel's equations, as reviewed by Wyble & Berns 2000).
    Solving from the last ink back gives ``a_i = v_i / (1 - sum_{j > i} v_j)``.

    Examples
    --------
    >>> printed_shares(np.array([[0.25, 0.5]])).tolist()
    [[0.5, 0.5]]
    """
    v = np.clip(np.asarray(visible, dtype=np.float64), 0.0, 1.0)
    later = np.cumsum(v[:, ::-1], axis=1)[:, ::-1] - v  # sum of the shares printed after each ink
    free = 1.0 - later
    with np.errstate(divide="ignore", invalid="ignore"):
        a = np.where(free > 1e-9, v / np.maximum(free, 1e-9), np.where(v > 0, 1.0, 0.0))
    return np.clip(a, 0.0, 1.0)
