"""Exact nearest colour and per-cluster sums: the engine's inner kernels.

Each function picks its implementation by the size of its input alone:
the numpy kernels of :mod:`quantize.kernels.vectorised` up to
:data:`COMPILED_FROM` point-palette pairs, which covers the distinct
colours of everyday images, and the compiled loops of
:mod:`quantize.kernels.engine_loops` above, loaded on first use in the
calling thread.  Never timing or load: the same input always takes the same
CIEDE2000 path, so a palette does not depend on how busy the machine is.
The Euclidean assignment and the cluster sums of both paths are
bit-identical, so those run compiled whenever the compiled loops are
loaded, whatever the size: only their time depends on it.  The kernels
assume clean input (contiguous float64 arrays of matching dimension).
Their plain brute-force twins live in ``tests/naive.py``.
"""

from __future__ import annotations

import numpy as np

from . import vectorised
from .loading import compiled, run_blocks

__all__ = ["COMPILED_FROM", "SAMPLE_COMPILED_FROM", "uses_compiled", "sample_runs_compiled", "load_for",
           "assign_nearest", "assign_nearest_numpy", "LloydAssigner", "centre_sums", "nearest_ciede2000",
           "ciede2000_to", "CiedeColumns"]

#: Point-palette pairs from which a call runs the compiled loops (2^24,
#: about 17 million).  Below, numpy takes less time than loading the
#: compiler does (about half a second, and 100 MB), even on a busy machine.
#: Whole `quantize reduce` processes, this threshold against 2^21 (the
#: ninth session's), quiet machine, same images written: a 1 MP photo
#: (60 000 distinct colours) at -k 37 1.18 s against 1.62 s, -k 64 1.42
#: against 1.89, -k 128 1.98 against 2.22, with no -k (the continuous-tone
#: search, 37 colours) 2.25-2.29 against 2.35-2.44 s; 162 000 colours at
#: -k 16 1.06 against 1.65 s; every one 119-143 MiB against 208-252.
#: The price: a whole sweep 2..16 of that 162 000-colour file, which calls
#: the search at every size in one process, took 4.9-5.0 s (5.7-5.9 s CPU)
#: on numpy against 4.2-4.7 s (4.7-4.9 s CPU) with the compiled loops, at
#: 150 MiB against 259.  Single fits, what `reduce` runs, won.
#: A large sample runs compiled whatever its palette's size
#: (:data:`SAMPLE_COMPILED_FROM`).
COMPILED_FROM = 1 << 24

#: Distinct colours from which a sample runs the compiled loops at every
#: palette size (2^18, 262 144).  Samples this large come from photos of
#: several megapixels, whose sweeps call the nearest-colour search and
#: CIEDE2000 often enough to repay the loading: on numpy, sizes 2 and 3 of
#: the 12 MP sweep photo's 586 000 colours took 0.25 s each against
#: 0.08-0.1 s compiled, more than everything else the sweep gained or lost
#: since the flat-module layout (benchmarks/compare_sweep_trees.py), and its
#: refinements' many small numpy calls contended for the interpreter lock.
SAMPLE_COMPILED_FROM = 1 << 18


def uses_compiled(n: int, k: int) -> bool:
    """Whether a kernel call on ``n`` points and ``k`` palette colours runs the compiled loops."""
    return n * k >= COMPILED_FROM


def sample_runs_compiled(n_colours: int) -> bool:
    """Whether a fit to ``n_colours`` distinct colours runs every CIEDE2000 compiled (size alone).

    From :data:`SAMPLE_COMPILED_FROM` colours the sample's own mapping
    runs the compiled loops at every palette size, so the fit loads them
    anyway; its refinements' many small CIEDE2000 measurements on the binned
    sample then run compiled too (``FitSettings.compiled_always``).  On
    numpy they cost a 2..16 sweep of the 12 MP photo about 15 % more CPU
    with both cores busy, where the compiled loops release the interpreter
    lock and numpy's many small calls contend for it
    (benchmarks/compare_sweep_trees.py).  The choice depends on the sample
    alone, so a palette size fitted alone or within a range, on a busy or
    idle machine, gives the same palette.
    """
    return n_colours >= SAMPLE_COMPILED_FROM


def _nearest_compiled(n: int, k: int) -> bool:
    """Whether a nearest-colour search of ``n`` colours among ``k`` runs the compiled loops (size alone)."""
    return sample_runs_compiled(n) or uses_compiled(n, k)


def _euclid_compiled(n: int, k: int) -> bool:
    """Whether a Euclidean kernel call runs the compiled loops: by size, or whenever they are loaded.

    The Euclidean assignment of both paths is bit-identical (tested), so
    which path runs never changes a result, only its time; once a job has
    loaded the compiled loops (:func:`load_for`) they are four to twelve
    times as fast as numpy on every size (benchmarks/bench_everyday.py).
    """
    import sys

    return n * k >= COMPILED_FROM or f"{__package__}.engine_loops" in sys.modules


def load_for(n: int, k: int, *, always: bool = False) -> None:
    """Load the compiled loops now if a job on ``n`` distinct colours and ``k`` palette colours will need them.

    A fit calls this first: a job whose final mapping will run the compiled
    loops anyway (:func:`uses_compiled`), or that runs its CIEDE2000
    compiled at every size (``always``), then runs its restarts' Euclidean
    assignments on them too.  The choice is by size and ``always`` alone.
    """
    if always or _nearest_compiled(n, k):
        compiled("engine_loops")


def assign_nearest(points: np.ndarray, centres: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Exact nearest centre of every point by squared Euclidean distance.

    Returns
    -------
    labels : ndarray of shape (n,), intp
        The lowest index wins a tie.
    dist2 : ndarray of shape (n,), float64
    """
    points = np.ascontiguousarray(points, dtype=np.float64)
    centres = np.ascontiguousarray(centres, dtype=np.float64)
    if not _euclid_compiled(len(points), len(centres)):
        return vectorised.assign_euclid(points, centres)
    labels = np.empty(points.shape[0], dtype=np.intp)
    dist2 = np.empty(points.shape[0], dtype=np.float64)
    run_blocks(compiled("engine_loops").assign_euclid, len(points), len(centres), (points,), (centres,),
               (labels, dist2))
    return labels, dist2


#: The numpy kernel on its own, for callers and tests that want it whatever the size.
assign_nearest_numpy = vectorised.assign_euclid

def _assign_two(points: np.ndarray, centres: np.ndarray):
    """Labels, squared distances and second-nearest squared distances, on the path the size picks."""
    if not _euclid_compiled(len(points), len(centres)):
        return vectorised.assign_euclid_two(points, centres)
    n = points.shape[0]
    labels = np.empty(n, dtype=np.intp)
    dist2 = np.empty(n, dtype=np.float64)
    second2 = np.empty(n, dtype=np.float64)
    run_blocks(compiled("engine_loops").assign_euclid_two, n, len(centres), (points,), (centres,),
               (labels, dist2, second2))
    return labels, dist2, second2


#: Relative and absolute margins of the bounds' tests: far above the rounding
#: of distances of order 100, so that a bound never decides a near tie.
_MARGIN, _ABS_MARGIN = 1e-9, 1e-9


class LloydAssigner:
    """The nearest centre of every point, step after step of a Lloyd-type loop.

    Gives exactly what :func:`assign_nearest` gives for each new set of
    centres (the same labels, the lowest index winning a tie, and
    bit-identical squared distances), but measures every centre only for
    the points whose label may have changed.  It keeps, per point, a lower
    bound on the distance to every centre but its own, lowered after each
    step by the furthest any other centre moved, and it knows half the gap
    from each centre to its nearest neighbour; a point whose distance to
    its own centre is below either is certain to keep it (Hamerly 2010).
    That distance is measured exactly for every point at every step, so
    the squared distances returned are exact too.  In the late steps of a
    fit few points are near a boundary, and a step costs little more than
    one distance per point.

    With ``weights`` it also gives the per-cluster sums of the update step
    (:meth:`sums`), as :func:`centre_sums` gives them, bit for bit, from
    weighted coordinates computed once.

    Parameters
    ----------
    points : ndarray of shape (n, d)
        Clean, contiguous float64; kept by reference, not copied.
    weights : ndarray of shape (n,), optional
        Fixed point weights, for :meth:`sums`.

    References
    ----------
    .. [1] G. Hamerly, "Making k-means even faster", Proceedings of the 2010
       SIAM International Conference on Data Mining, 130-140.
    """

    def __init__(self, points: np.ndarray, weights: np.ndarray | None = None) -> None:
        self.points = points
        self._weights = weights
        self._columns_: list[np.ndarray] | None = None
        self._weighted_: list[np.ndarray] | None = None
        self._labels: np.ndarray | None = None
        self._lower: np.ndarray | None = None
        self._centres: np.ndarray | None = None

    @property
    def _columns(self) -> list[np.ndarray]:
        # Contiguous columns, made on the numpy path's first use: its
        # per-step passes over every point then read in order.
        if self._columns_ is None:
            self._columns_ = [np.ascontiguousarray(self.points[:, t]) for t in range(self.points.shape[1])]
        return self._columns_

    @property
    def _weighted(self) -> list[np.ndarray]:
        # The products are rounded as centre_sums rounds them, so the sums agree bit for bit.
        if self._weighted_ is None:
            self._weighted_ = [self._weights * c for c in self._columns]
        return self._weighted_

    def sums(self, labels: np.ndarray, k: int) -> tuple[np.ndarray, np.ndarray]:
        """:func:`centre_sums` of the points with the weights given at construction."""
        if self._weights is None:
            raise ValueError("LloydAssigner.sums needs the weights given at construction")
        if _euclid_compiled(len(self.points), k):
            return centre_sums(self.points, self._weights, labels, k)
        wsum = np.bincount(labels, weights=self._weights, minlength=k)
        sums = np.stack([np.bincount(labels, weights=wc, minlength=k) for wc in self._weighted], axis=1)
        return wsum, sums

    def assign(self, centres: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """Labels (intp, a new array) and squared distances of every point to ``centres`` (k, d)."""
        pts = self.points
        centres = np.ascontiguousarray(centres, dtype=np.float64)
        k = centres.shape[0]
        if _euclid_compiled(len(pts), k):
            # The compiled loop measures every centre faster than the bounds' numpy passes.
            return assign_nearest(pts, centres)
        if self._labels is None or self._centres is None or self._centres.shape != centres.shape or k < 2:
            labels, d2, second = _assign_two(pts, centres)
            self._labels, self._lower, self._centres = labels, np.sqrt(second), centres.copy()
            return labels.copy(), d2
        labels, lower = self._labels, self._lower
        moved = np.sqrt(((centres - self._centres) ** 2).sum(axis=1))
        top = np.argsort(moved, kind="stable")[-2:]
        # Every centre but a point's own moved at most this far.
        lower -= np.where(labels == top[1], moved[top[0]], moved[top[1]])
        gap = np.sqrt(vectorised.assign_euclid_two(centres, centres, second=True)[2]) * 0.5
        d2 = vectorised.squared_to(self._columns, centres, labels)
        sure = np.sqrt(d2) * (1.0 + _MARGIN) + _ABS_MARGIN < np.maximum(lower, gap[labels])
        redo = np.flatnonzero(~sure)
        if redo.size:
            lab_r, d2_r, second_r = _assign_two(np.ascontiguousarray(pts[redo]), centres)
            labels[redo] = lab_r
            d2[redo] = d2_r
            lower[redo] = np.sqrt(second_r)
        self._centres = centres.copy()
        return labels.copy(), d2


def centre_sums(points: np.ndarray, weights: np.ndarray, labels: np.ndarray, k: int):
    """Per-label sum of weights, shape (k,), and of weighted points, shape (k, d).

    ``np.bincount`` per coordinate, or once the compiled loops are loaded
    their serial loop, which adds the same rounded products in the same
    order (bit-identical, tested) in one pass instead of four.
    """
    points = np.ascontiguousarray(points, dtype=np.float64)
    weights = np.ascontiguousarray(weights, dtype=np.float64)
    labels = np.ascontiguousarray(labels, dtype=np.intp)
    if not _euclid_compiled(len(points), k):
        return vectorised.centre_sums(points, weights, labels, k)
    wsum = np.zeros(k)
    sums = np.zeros((k, points.shape[1]))
    compiled("engine_loops").centre_sums(points, weights, labels, wsum, sums)
    return wsum, sums


def nearest_ciede2000(lab: np.ndarray, pal_lab: np.ndarray, *, compiled_always: bool = False
                      ) -> tuple[np.ndarray, np.ndarray]:
    """Exact nearest palette colour of every CIELAB colour by CIEDE2000.

    The compiled loops run from :data:`COMPILED_FROM` pairs or
    :data:`SAMPLE_COMPILED_FROM` colours, or at every size with
    ``compiled_always`` (a process that fits many images).  The
    two paths agree to rounding, not bit for bit: a near tie, within the
    last bits of a ΔE00, may go to either colour.

    Returns
    -------
    labels : ndarray of shape (n,), intp
        The lowest index wins a tie.
    delta_e : ndarray of shape (n,), float64
    """
    lab = np.ascontiguousarray(lab, dtype=np.float64)
    pal_lab = np.ascontiguousarray(pal_lab, dtype=np.float64)
    if lab.shape[0] == 0:
        return np.empty(0, dtype=np.intp), np.empty(0)
    if not (compiled_always or _nearest_compiled(len(lab), len(pal_lab))):
        return vectorised.nearest_ciede2000(lab, pal_lab)
    labels = np.empty(lab.shape[0], dtype=np.intp)
    de = np.empty(lab.shape[0], dtype=np.float64)
    order = np.argsort(pal_lab[:, 0], kind="stable")
    # S_L grows with the distance of the mean lightness from 50 (eq. 19 of
    # Sharma et al. 2005); no mean lies further from 50 than the furthest colour.
    far = max(float(np.abs(lab[:, 0] - 50.0).max()), float(np.abs(pal_lab[:, 0] - 50.0).max()))
    sl_max = 1.0 + 0.015 * far * far / np.sqrt(20.0 + far * far)
    # A CIEDE2000 costs about ten squared distances.
    run_blocks(compiled("engine_loops").assign_ciede2000, len(lab), 10 * len(pal_lab), (lab,),
               (pal_lab, order, sl_max), (labels, de))
    return labels, de


def ciede2000_to(lab: np.ndarray, pal_lab: np.ndarray, labels: np.ndarray, *,
                 compiled_always: bool = False) -> np.ndarray:
    """CIEDE2000 of every CIELAB colour to the palette colour ``labels`` names (paths as :func:`nearest_ciede2000`)."""
    lab = np.ascontiguousarray(lab, dtype=np.float64)
    pal_lab = np.ascontiguousarray(pal_lab, dtype=np.float64)
    labels = np.ascontiguousarray(labels, dtype=np.intp)
    n = lab.shape[0]
    if not (compiled_always or uses_compiled(n, 1)):
        de = np.empty(n)
        for lo in range(0, n, vectorised.BLOCK):
            hi = min(n, lo + vectorised.BLOCK)
            p = pal_lab[labels[lo:hi]]
            de[lo:hi] = vectorised.ciede2000_pairs(lab[lo:hi, 0], lab[lo:hi, 1], lab[lo:hi, 2],
                                                   p[:, 0], p[:, 1], p[:, 2])
        return de
    de = np.empty(n, dtype=np.float64)
    run_blocks(compiled("engine_loops").ciede2000_to, n, 10, (lab, labels), (pal_lab,), (de,))
    return de


class CiedeColumns:
    """Colours held for many CIEDE2000 measurements against moving palettes.

    The k-medians steps of :mod:`quantize.fit.refine` measure the same
    colours against a few palettes that differ a little at each step, dozens
    of times.  They only compare sums of ΔE00 to decide which moves to
    keep, and float32's relative rounding (6e-8) is far below what decides
    them, so on the numpy path the colours are held once as contiguous
    float32 columns, which numpy processes about three times as fast as the
    rows of a float64 array.  Where a call's size picks the compiled loops
    (:func:`uses_compiled`), or at every size with ``compiled_always``,
    they run in float64 as elsewhere.  Either way the path depends on the
    sizes and that choice alone, so results never depend on timing.  The
    palette a job writes is still mapped and measured in float64
    (:func:`nearest_ciede2000`).

    Parameters
    ----------
    lab : ndarray of shape (n, 3)
        Clean CIELAB colours, float64.
    compiled_always : bool, default=False
        Run the compiled loops whatever the size.
    """

    def __init__(self, lab: np.ndarray, *, compiled_always: bool = False) -> None:
        self.lab = np.ascontiguousarray(lab, dtype=np.float64)
        self.n = self.lab.shape[0]
        self.compiled_always = compiled_always
        # The float32 columns serve the numpy path only.
        self._columns_: tuple[np.ndarray, np.ndarray, np.ndarray] | None = None

    @property
    def _columns(self) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        if self._columns_ is None:
            L, a, b = (np.ascontiguousarray(self.lab[:, t], dtype=np.float32) for t in range(3))
            self._columns_ = (L, a, b)
        return self._columns_

    def subset(self, rows: np.ndarray) -> "CiedeColumns":
        """The colours ``rows`` (indices), held the same way."""
        out = CiedeColumns.__new__(CiedeColumns)
        out.lab = self.lab[rows]
        out.n = out.lab.shape[0]
        out.compiled_always = self.compiled_always
        out._columns_ = None
        if self._columns_ is not None:
            L, a, b = self._columns_
            out._columns_ = (L[rows], a[rows], b[rows])
        return out

    def _compiled(self, k: int) -> bool:
        return self.compiled_always or uses_compiled(self.n, k)

    def nearest(self, centres: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """Nearest of ``centres`` (k, 3) by CIEDE2000 for every colour: labels and ΔE00 (float64)."""
        if self.n == 0:
            return np.empty(0, dtype=np.intp), np.empty(0)
        if self._compiled(len(centres)):
            return nearest_ciede2000(self.lab, centres, compiled_always=True)
        labels, de = vectorised.nearest_ciede2000_columns(*self._columns, np.asarray(centres, dtype=np.float64))
        return labels, de.astype(np.float64)

    def to(self, centres: np.ndarray, labels: np.ndarray) -> np.ndarray:
        """CIEDE2000 of every colour to the centre ``labels`` names (float64)."""
        if self._compiled(1):
            return ciede2000_to(self.lab, centres, labels, compiled_always=True)
        return vectorised.ciede2000_to_columns(*self._columns, np.asarray(centres, dtype=np.float64),
                                               labels).astype(np.float64)
