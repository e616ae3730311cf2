"""Inner kernels shared by the clustering and mapping stages.

The kernels assume clean input (contiguous float64 arrays of matching
dimension).  Their plain brute-force twins live in ``tests/naive.py``.

The work runs in compiled loops (:mod:`quantize._engine_kernels`, numba).
Loading a JIT compiler costs about half a second even from its disk cache,
so :func:`warm_up` starts that load in a background thread as soon as an
entry point knows it will fit or map: the image decodes and is sampled
while the compiler loads (both release the interpreter lock for most of
their time).  Meanwhile the Euclidean assignment and the cluster sums run
as numpy code that gives bit-identical results (:func:`assign_nearest_numpy`
and ``np.bincount``), so a palette never depends on how long the load took;
the CIEDE2000 kernels wait for it.  DEVELOPERS.md ("The compiled kernels")
lists the rest: the thread pool, ``gc.freeze`` and the scipy import the load
declines.
"""

from __future__ import annotations

import os
import threading

import numpy as np

__all__ = ["assign_nearest", "assign_nearest_numpy", "centre_sums", "nearest_ciede2000", "ciede2000_to", "warm_up",
           "compiled", "forget_cached", "with_fresh_cache"]

#: Below this many point-centre pairs the numpy kernel runs instead of
#: waiting for the compiler (it takes a few milliseconds there).
_SMALL = 1 << 15
#: Point-centre pairs per thread below which one thread does the work:
#: handing a block to another thread costs tens of microseconds.
_PER_THREAD = 1 << 19

_lock = threading.Lock()
_state: dict = {}


class _NoScipyLinalgHere:
    """Import finder that declines ``scipy.linalg`` to the thread loading the kernels.

    On its first compilation numba imports ``scipy.linalg`` (a sixth of a
    second) only to learn whether BLAS is there for ``np.dot`` and
    friends, which these kernels never call.  Declined, numba notes "no
    BLAS": its ``np.correlate`` and ``np.convolve`` then use their own loop
    in this process, and its linear algebra imports scipy when first
    compiled.  Other threads, and this one after loading, import as usual.
    """

    def __init__(self, thread):
        self.thread = thread

    def find_spec(self, name, path=None, target=None):
        if threading.current_thread() is self.thread and (name == "scipy.linalg"
                                                          or name.startswith("scipy.linalg.")):
            raise ModuleNotFoundError(f"{name} is not needed by quantize's kernels", name=name)
        return None


def _fallback_cache_dir() -> str:
    import tempfile

    try:
        who = str(os.getuid())
    except AttributeError:  # Windows
        import getpass

        who = getpass.getuser()
    return os.path.join(tempfile.gettempdir(), f"quantize-numba-{who}")


def _private(folder: str) -> bool:
    """Whether ``folder`` is a real folder of this user that nobody else can write."""
    import stat

    st = os.lstat(folder)
    if not stat.S_ISDIR(st.st_mode):
        return False
    if hasattr(os, "getuid"):
        return st.st_uid == os.getuid() and not st.st_mode & 0o022
    return True


def compiled(name: str):
    """The compiled-kernel module ``quantize.<name>``, imported where numba can cache it.

    numba keeps compiled code beside the module or, if that folder is
    read-only, in the user's cache folder.  When neither can be written (a
    read-only install run by a user without a writable home) its import
    fails; the cache then goes to a private folder in the system's
    temporary folder, and only the first run there compiles.
    """
    import importlib
    import sys

    full = f"{__package__}.{name}"
    if full in sys.modules:
        return sys.modules[full]
    try:
        return importlib.import_module(full)
    except RuntimeError as exc:
        if "no locator available" not in str(exc):
            raise
        import numba

        if numba.config.CACHE_DIR:
            raise RuntimeError(f"numba cannot write its cache folder {numba.config.CACHE_DIR}; set "
                               "NUMBA_CACHE_DIR to a writable folder") from exc
        folder = _fallback_cache_dir()
        os.makedirs(folder, mode=0o700, exist_ok=True)
        if not _private(folder):
            # numba loads pickled code from its cache: never from a folder
            # that somebody else could have written.
            raise RuntimeError(f"numba has nowhere to cache compiled code, and {folder} is not a private "
                               "folder of this user; set NUMBA_CACHE_DIR to a writable folder") from exc
        numba.config.CACHE_DIR = folder
        return importlib.import_module(full)


def forget_cached(*names: str) -> bool:
    """Empty numba's on-disk cache index of every compiled function in these modules.

    For a cache that cannot be read back (a damaged file): the next call
    compiles afresh and writes the cache anew.  Returns whether any index
    was emptied.
    """
    import sys

    emptied = False
    for name in names:
        module = sys.modules.get(f"{__package__}.{name}")
        for obj in vars(module).values() if module else ():
            cache = getattr(obj, "_cache", None)
            if callable(getattr(cache, "flush", None)):
                try:
                    cache.flush()
                    emptied = True
                except OSError:
                    pass
    return emptied


#: The compiled-kernel modules (the engine's call the dither module's CIEDE2000).
_KERNEL_MODULES = ("_engine_kernels", "_dither_kernels")


def with_fresh_cache(run):
    """``run()``; if it fails, empty numba's cache of the kernel modules and ``run()`` once more.

    A cache file that cannot be read back (a damaged disk, a copy cut short)
    fails the first call that loads it; the second compiles afresh and
    writes the cache anew.  Out of memory is not retried, nor a failure
    where no cache index could be emptied.
    """
    try:
        return run()
    except MemoryError:
        raise
    except Exception:
        if not forget_cached(*_KERNEL_MODULES):
            raise
        return run()


def _warm_calls(ek) -> None:
    pts = np.zeros((2, 3))
    lab = np.zeros(2, dtype=np.intp)
    out = np.zeros(2)
    ek.assign_euclid(pts, pts, lab, out)
    ek.assign_ciede2000(pts, pts, lab, 1.0, lab, out)
    ek.ciede2000_to(pts, lab, pts, out)
    ek.centre_sums(pts, out, lab, np.zeros((2, 3)), np.zeros(2))


def _load():
    import sys

    finder = None
    if "scipy.linalg" not in sys.modules:
        finder = _NoScipyLinalgHere(threading.current_thread())
        sys.meta_path.insert(0, finder)
    try:
        ek = compiled("_engine_kernels")
        with_fresh_cache(lambda: _warm_calls(ek))
        _state["module"] = ek
        # The compiler leaves a few hundred thousand long-lived objects; the
        # cyclic collector would walk them on every full collection and once
        # more at interpreter exit (a quarter of a second).  Freezing moves
        # every object alive now to the permanent generation; reference
        # counting still frees them as usual.
        import gc

        gc.freeze()
    except BaseException as exc:  # re-raised in the caller's thread by _kernels()
        _state["error"] = exc
    finally:
        if finder is not None:
            sys.meta_path.remove(finder)


def _after_fork_in_child() -> None:
    # A forked child has only the forking thread: the pool's workers, and a
    # load still running in the parent, are gone.  Start afresh when needed.
    global _lock
    _lock = threading.Lock()
    _pool.clear()
    if "module" not in _state:
        _state.clear()


if hasattr(os, "register_at_fork"):  # POSIX
    os.register_at_fork(after_in_child=_after_fork_in_child)


def warm_up() -> None:
    """Start loading the compiled kernels in a background thread (idempotent)."""
    with _lock:
        if "thread" not in _state:
            t = threading.Thread(target=_load, name="quantize-kernels", daemon=True)
            _state["thread"] = t
            t.start()


def _loading() -> bool:
    t = _state.get("thread")
    return t is not None and t.is_alive()


def _threads() -> int:
    # NUMBA_NUM_THREADS is what a batch worker sets to share the cores.
    try:
        return max(1, int(os.environ.get("NUMBA_NUM_THREADS") or _CPUS))
    except ValueError:
        return 1


_CPUS = os.cpu_count() or 1


_pool: dict = {}


def _run(kernel, n: int, k: int, row_args: tuple, shared: tuple, outs: tuple) -> None:
    """``kernel(*rows, *shared, *outs)`` over row blocks, on threads when it pays.

    ``row_args`` and ``outs`` are split along their first axis; every row's
    result depends on that row alone, so the split does not change it.  The
    kernels release the interpreter lock; threads rather than a parallel
    JIT loop, because a loop whose threads spin while waiting for each other
    stalls on a machine shared with other work.
    """
    parts = min(_threads(), max(1, (n * k) // _PER_THREAD))
    if parts == 1:
        kernel(*row_args, *shared, *outs)
        return
    from concurrent.futures import ThreadPoolExecutor

    with _lock:
        pool = _pool.get(parts)
        if pool is None:
            pool = _pool[parts] = ThreadPoolExecutor(max_workers=parts, thread_name_prefix="quantize")
    edges = np.linspace(0, n, parts + 1).astype(int)
    jobs = [pool.submit(kernel, *(a[lo:hi] for a in row_args), *shared, *(o[lo:hi] for o in outs))
            for lo, hi in zip(edges[:-1], edges[1:])]
    for job in jobs:
        job.result()


def _kernels():
    warm_up()
    _state["thread"].join()
    if "error" in _state:
        from .errors import QuantizeError

        exc = _state["error"]
        reason = (str(exc) or type(exc).__name__).splitlines()[0]
        if "NUMBA_CACHE_DIR" not in reason:
            reason += "; reinstall quantize with its dependencies (pip install --force-reinstall .)"
        raise QuantizeError(f"the compiled kernels (numba) failed to load: {reason}") from exc
    return _state["module"]

#: Points per block: keeps the temporaries in cache.
_BLOCK = 1 << 16


def assign_nearest(points: np.ndarray, centres: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Exact nearest centre of every point by squared Euclidean distance.

    Compiled, or :func:`assign_nearest_numpy` for small inputs and while the
    compiled kernels are still loading; both give bit-identical labels and
    distances.
    """
    points = np.ascontiguousarray(points, dtype=np.float64)
    centres = np.ascontiguousarray(centres, dtype=np.float64)
    if "module" not in _state and (points.shape[0] * centres.shape[0] < _SMALL or _loading()):
        # Do not wait for the compiler: the restarts run meanwhile.
        return assign_nearest_numpy(points, centres)
    labels = np.empty(points.shape[0], dtype=np.intp)
    dist2 = np.empty(points.shape[0], dtype=np.float64)
    _run(_kernels().assign_euclid, len(points), len(centres), (points,), (centres,), (labels, dist2))
    return labels, dist2


def centre_sums(points: np.ndarray, weights: np.ndarray, labels: np.ndarray, k: int):
    """Per-label sum of weights, shape (k,), and of weighted points, shape (k, d).

    Bit-identical to ``np.bincount`` per coordinate, which runs instead while
    the compiled kernels load.
    """
    points = np.ascontiguousarray(points, dtype=np.float64)
    weights = np.ascontiguousarray(weights, dtype=np.float64)
    labels = np.ascontiguousarray(labels, dtype=np.intp)
    if "module" not in _state and (points.shape[0] < _SMALL or _loading()):
        wsum = np.bincount(labels, weights=weights, minlength=k)
        sums = np.stack([np.bincount(labels, weights=weights * points[:, t], minlength=k)
                         for t in range(points.shape[1])], axis=1)
        return wsum, sums
    wsum = np.zeros(k)
    sums = np.zeros((k, points.shape[1]))
    _kernels().centre_sums(points, weights, labels, sums, wsum)
    return wsum, sums


def nearest_ciede2000(lab: np.ndarray, pal_lab: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Exact nearest palette colour of every CIELAB colour by CIEDE2000.

    Returns
    -------
    labels : ndarray of shape (n,), intp
        The lowest index wins a tie.
    delta_e : ndarray of shape (n,), float64
    """
    lab = np.ascontiguousarray(lab, dtype=np.float64)
    pal_lab = np.ascontiguousarray(pal_lab, dtype=np.float64)
    labels = np.empty(lab.shape[0], dtype=np.intp)
    de = np.empty(lab.shape[0], dtype=np.float64)
    if lab.shape[0] == 0:
        return labels, de
    order = np.argsort(pal_lab[:, 0], kind="stable")
    # S_L grows with the distance of the mean lightness from 50 (eq. 19 of
    # Sharma et al. 2005); no mean lies further from 50 than the furthest colour.
    far = max(float(np.abs(lab[:, 0] - 50.0).max()), float(np.abs(pal_lab[:, 0] - 50.0).max()))
    sl_max = 1.0 + 0.015 * far * far / np.sqrt(20.0 + far * far)
    # A CIEDE2000 costs about ten squared distances.
    _run(_kernels().assign_ciede2000, len(lab), 10 * len(pal_lab), (lab,), (pal_lab, order, sl_max),
         (labels, de))
    return labels, de


def ciede2000_to(lab: np.ndarray, pal_lab: np.ndarray, labels: np.ndarray) -> np.ndarray:
    """CIEDE2000 of every CIELAB colour to the palette colour ``labels`` names."""
    lab = np.ascontiguousarray(lab, dtype=np.float64)
    pal_lab = np.ascontiguousarray(pal_lab, dtype=np.float64)
    labels = np.ascontiguousarray(labels, dtype=np.intp)
    de = np.empty(lab.shape[0], dtype=np.float64)
    _run(_kernels().ciede2000_to, len(lab), 10, (lab, labels), (pal_lab,), (de,))
    return de


def assign_nearest_numpy(points: np.ndarray, centres: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Exact nearest centre of every point by squared Euclidean distance.

    Distances are computed directly as sums of squared coordinate
    differences (no ``|x|^2 - 2 x.c + |c|^2`` expansion, whose rounding can
    pick the wrong centre for near ties).

    Parameters
    ----------
    points : ndarray of shape (n, d)
    centres : ndarray of shape (k, d)

    Returns
    -------
    labels : ndarray of shape (n,), intp
        Index of the nearest centre; the lowest index wins a tie.
    dist2 : ndarray of shape (n,), float64
        Squared distance to that centre.
    """
    points = np.ascontiguousarray(points, dtype=np.float64)
    centres = np.ascontiguousarray(centres, dtype=np.float64)
    n, d = points.shape
    labels = np.zeros(n, dtype=np.intp)
    dist2 = np.empty(n, dtype=np.float64)
    cols = [np.ascontiguousarray(points[:, t]) for t in range(d)]
    for lo in range(0, n, _BLOCK):
        hi = min(n, lo + _BLOCK)
        best = dist2[lo:hi]
        lab = labels[lo:hi]
        acc = np.empty(hi - lo)
        tmp = np.empty(hi - lo)
        for j in range(centres.shape[0]):
            np.subtract(cols[0][lo:hi], centres[j, 0], out=acc)
            np.multiply(acc, acc, out=acc)
            for t in range(1, d):
                np.subtract(cols[t][lo:hi], centres[j, t], out=tmp)
                np.multiply(tmp, tmp, out=tmp)
                acc += tmp
            if j == 0:
                best[:] = acc
            else:
                # Strict '<' keeps the lowest index on ties, like argmin.
                closer = acc < best
                np.copyto(best, acc, where=closer)
                lab[closer] = j
    return labels, dist2
