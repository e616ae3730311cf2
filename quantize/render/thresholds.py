"""Threshold arrays of the ordered dithers.

An ordered dither compares each pixel's mixing fraction with a threshold
that repeats across the image in a small tile.  This module builds those
tiles: Bayer's dispersed-dot matrices, a clustered-dot cell for screens
(round dots of at least :data:`CLUSTERED_MIN_DOT` pixels), and a blue-noise
mask by Ulichney's void-and-cluster method, generated here once and kept in
:func:`cache_dir`.  :func:`threshold_matrix` turns any of them into
thresholds in (0, 1); :mod:`quantize.render.dither` applies them.
"""

from __future__ import annotations

import functools
import io
import os
from pathlib import Path

import numpy as np

__all__ = [
    "CLUSTERED_CELL",
    "CLUSTERED_MIN_DOT",
    "bayer_matrix",
    "blue_noise_ranks",
    "cache_dir",
    "clustered_dot_matrix",
    "clustered_dot_size_mm",
    "threshold_matrix",
]


def bayer_matrix(n: int) -> np.ndarray:
    """Bayer's dispersed-dot index matrix of size ``n`` (a power of two).

    Built by the recursion M(2n) = [[4M, 4M+2], [4M+3, 4M+1]] from M(1) = [[0]].

    Returns
    -------
    ndarray of shape (n, n), int
        A permutation of 0 .. n*n - 1.

    References
    ----------
    .. [1] B. E. Bayer, "An optimum method for two-level rendition of
       continuous-tone pictures", IEEE International Conference on
       Communications, 1973, 26-11 to 26-15.

    Examples
    --------
    >>> bayer_matrix(2)
    array([[0, 2],
           [3, 1]])
    """
    if n < 1 or n & (n - 1):
        raise ValueError(f"Bayer matrix size must be a power of two, got {n!r}")
    m = np.zeros((1, 1), dtype=np.int64)
    while m.shape[0] < n:
        m = np.block([[4 * m, 4 * m + 2], [4 * m + 3, 4 * m + 1]])
    return m


#: Cell of the clustered-dot screen in pixels (the screen ruling is dpi / cell).
CLUSTERED_CELL = 8
#: Smallest dot (and smallest hole) of the clustered-dot screen, in pixels:
#: the 2 x 2 block at the cell centre (at the cell corners for holes).
CLUSTERED_MIN_DOT = 4


def clustered_dot_matrix(cell: int = 8) -> np.ndarray:
    """A clustered-dot index matrix: one round dot per ``cell`` x ``cell`` pixels.

    Cells are ranked by the spot function cos(2 pi u) + cos(2 pi v) (u, v the
    offset from the cell centre in cell widths): the dot grows from the
    centre as a disc, meets its neighbours in a checkerboard at 50 % and then
    leaves shrinking round holes at the corners.  Ties are broken by angle so
    the order is fixed.  At ``dpi`` the screen has ``dpi / cell`` lines per
    inch, and a dot covering a fraction c of its cell is about
    ``2 * sqrt(c * cell**2 / pi)`` pixels across (:func:`clustered_dot_size_mm`).
    The ``clustered-dot`` dither (:func:`threshold_matrix`) also gives the
    first :data:`CLUSTERED_MIN_DOT` ranks one threshold, so its smallest dot
    is the 2 x 2 pixel block at the cell centre, never a lone pixel.

    References
    ----------
    .. [1] R. Ulichney, *Digital Halftoning*, MIT Press, 1987, chapter 6.

    Examples
    --------
    >>> m = clustered_dot_matrix(4)
    >>> sorted(m.ravel().tolist()) == list(range(16))
    True
    """
    if cell < 2:
        raise ValueError(f"clustered-dot cell must be at least 2 pixels, got {cell!r}")
    c = (np.arange(cell) + 0.5) / cell - 0.5
    u, v = np.meshgrid(c, c, indexing="ij")
    spot = np.cos(2 * np.pi * u) + np.cos(2 * np.pi * v)
    angle = np.arctan2(v, u)
    order = np.lexsort((angle.ravel(), -np.round(spot.ravel(), 12)))
    ranks = np.empty(cell * cell, dtype=np.int64)
    ranks[order] = np.arange(cell * cell)
    return ranks.reshape(cell, cell)


def clustered_dot_size_mm(coverage: float, *, dpi: float, cell: int = 8) -> float:
    """Diameter in mm of the clustered dot that covers ``coverage`` (0-1) of its cell.

    The dot covers ``round(coverage * cell**2)`` pixels of 25.4/dpi mm; this
    is the diameter of a disc of that area.

    Examples
    --------
    >>> round(clustered_dot_size_mm(1 / 64, dpi=300), 3)  # one pixel
    0.096
    """
    if dpi <= 0:
        raise ValueError(f"dpi must be positive, got {dpi!r}")
    pixels = max(round(coverage * cell * cell), 0)
    return float(2.0 * np.sqrt(pixels / np.pi) * 25.4 / dpi)


def cache_dir() -> Path:
    """Folder for generated masks: ``$QUANTIZE_CACHE_DIR``, else ``$XDG_CACHE_HOME/quantize``
    (``~/.cache/quantize``)."""
    env = os.environ.get("QUANTIZE_CACHE_DIR")
    if env:
        return Path(env)
    base = os.environ.get("XDG_CACHE_HOME") or os.path.join(os.path.expanduser("~"), ".cache")
    return Path(base) / "quantize"


def _void_and_cluster(size: int, sigma: float, seed: int) -> np.ndarray:
    """Ulichney's void-and-cluster ranks on a size x size torus (numpy, exact
    incremental energies, first index wins a tie, so the result is fixed)."""
    n = size * size
    d = np.minimum(np.arange(size), size - np.arange(size)).astype(np.float64)
    gauss = np.exp(-(d[:, None] ** 2 + d[None, :] ** 2) / (2.0 * sigma * sigma))
    rolled = {}

    def kernel_at(i):
        if i not in rolled:
            rolled[i] = np.roll(gauss, (i // size, i % size), axis=(0, 1)).ravel()
        return rolled[i]

    rng = np.random.default_rng(seed)
    ones = np.zeros(n, dtype=bool)
    ones[rng.choice(n, n // 10, replace=False)] = True
    energy = np.zeros(n)
    for i in np.flatnonzero(ones):
        energy += kernel_at(i)

    def tightest_cluster(pattern, e):
        return int(np.argmax(np.where(pattern, e, -np.inf)))

    def largest_void(pattern, e):
        return int(np.argmin(np.where(pattern, np.inf, e)))

    # Relax the random start into the prototype: move the tightest cluster
    # into the largest void until that is where it came from.
    for _ in range(10 * n):
        c = tightest_cluster(ones, energy)
        ones[c] = False
        energy -= kernel_at(c)
        v = largest_void(ones, energy)
        ones[v] = True
        energy += kernel_at(v)
        if v == c:
            break
    ranks = np.empty(n, dtype=np.int64)
    # Phase 1: remove clusters from a copy of the prototype, ranks going down.
    pat, e = ones.copy(), energy.copy()
    for rank in range(int(ones.sum()) - 1, -1, -1):
        c = tightest_cluster(pat, e)
        pat[c] = False
        e -= kernel_at(c)
        ranks[c] = rank
    # Phases 2 and 3: fill voids, ranks going up.  Past half full Ulichney
    # swaps roles and picks the tightest cluster of zeros; with a linear
    # filter that is the same pixel as the largest void of ones.
    pat, e = ones.copy(), energy.copy()
    for rank in range(int(ones.sum()), n):
        v = largest_void(pat, e)
        pat[v] = True
        e += kernel_at(v)
        ranks[v] = rank
    return ranks.reshape(size, size)


@functools.lru_cache(maxsize=8)
def blue_noise_ranks(size: int = 64, *, sigma: float = 1.5, seed: int = 0) -> np.ndarray:
    """Blue-noise index matrix by the void-and-cluster method, generated here.

    Computed once per process and kept in :func:`cache_dir` as a ``.npy``
    file (written atomically; an unreadable or foreign file is recomputed, an
    unwritable folder only costs the computation).  Never downloaded.

    Parameters
    ----------
    size : int, default=64
        Side of the square, toroidal mask.
    sigma : float, default=1.5
        Spread in pixels of the Gaussian filter that measures clusters and
        voids (the value Ulichney recommends, from memory).
    seed : int, default=0
        Seed of the random starting pattern (10 % ones).

    Returns
    -------
    ndarray of shape (size, size), int64, read-only
        A permutation of 0 .. size*size - 1.

    References
    ----------
    .. [1] R. Ulichney, "The void-and-cluster method for dither array
       generation", Proc. SPIE 1913, 332-343, 1993, doi:10.1117/12.152707.

    Examples
    --------
    >>> r = blue_noise_ranks(16)  # doctest: +SKIP
    >>> sorted(r.ravel().tolist()) == list(range(256))  # doctest: +SKIP
    True
    """
    if size < 4:
        raise ValueError(f"blue-noise mask size must be at least 4, got {size!r}")
    path = cache_dir() / f"blue-noise-vac-{size}-s{sigma:g}-seed{seed}-v1.npy"
    ranks = None
    try:
        got = np.load(path, allow_pickle=False)
        if got.shape == (size, size) and np.array_equal(np.sort(got.ravel()), np.arange(size * size)):
            ranks = got.astype(np.int64)
    except (OSError, ValueError, EOFError):
        pass
    if ranks is None:
        ranks = _void_and_cluster(size, sigma, seed)
        _save_cache(path, ranks)
    ranks.flags.writeable = False
    return ranks


def _save_cache(path: Path, ranks: np.ndarray) -> None:
    """Keep ``ranks`` in the cache file, atomically: another process may be reading it."""
    from quantize.errors import OutputError
    from quantize.io.write import atomic_write_bytes

    buf = io.BytesIO()
    np.save(buf, ranks.astype(np.int32))
    try:
        path.parent.mkdir(parents=True, exist_ok=True)
        atomic_write_bytes(path, buf.getvalue(), force=True)
    except (OSError, OutputError):
        pass  # a read-only cache costs only the computation


def threshold_matrix(name: str) -> np.ndarray:
    """Thresholds in (0, 1) of an ordered method: (rank + 0.5) / cells.

    ``name`` is ``bayer2``, ``bayer4``, ``bayer8``, ``blue-noise`` or
    ``clustered-dot``.
    """
    if name.startswith("bayer"):
        ranks = bayer_matrix(int(name[5:]))
    elif name == "blue-noise":
        ranks = blue_noise_ranks(64)
    elif name == "clustered-dot":
        ranks = clustered_dot_matrix(CLUSTERED_CELL)
    else:
        raise ValueError(f"unknown threshold matrix {name!r}")
    thresholds = (ranks + 0.5) / ranks.size
    if name == "clustered-dot":
        # The first dot pixels (and the last hole pixels) share one threshold,
        # their mean, so a dot or a hole is never smaller than MIN_DOT pixels:
        # single pixels do not hold ink on a screen.  Tones between are
        # rounded to none or a whole minimum dot.
        for part in (ranks < CLUSTERED_MIN_DOT, ranks >= ranks.size - CLUSTERED_MIN_DOT):
            thresholds[part] = thresholds[part].mean()
    return thresholds
