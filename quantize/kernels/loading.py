"""Loading the compiled loops, their disk cache, and running them on row blocks.

The loops themselves are numba functions in :mod:`quantize.kernels.engine_loops`
and :mod:`quantize.kernels.dither_loops`.  Loading a JIT compiler costs about
half a second even from its disk cache, so :func:`warm_up` starts that load
in a background thread as soon as an entry point knows it will fit or map:
the image decodes and is sampled while the compiler loads.  This module
changes no process-wide state: no garbage-collector settings, no import
hooks.
"""

from __future__ import annotations

import os
import threading

import numpy as np

__all__ = ["compiled", "forget_cached", "with_fresh_cache", "warm_up", "is_loaded", "is_loading", "engine",
           "run_blocks", "KERNEL_MODULES"]

#: Point-centre pairs per thread below which one thread does the work:
#: handing a block to another thread costs tens of microseconds.
_PER_THREAD = 1 << 19

_lock = threading.Lock()
_state: dict = {}


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
KERNEL_MODULES = ("engine_loops", "dither_loops")


def _from_the_cache(exc: BaseException) -> bool:
    """Whether ``exc`` was raised while numba read its on-disk cache."""
    import os.path
    import traceback

    marker = os.path.join("numba", "core", "caching")
    while exc is not None:
        if any(marker in frame.filename for frame in traceback.extract_tb(exc.__traceback__)):
            return True
        exc = exc.__cause__ or exc.__context__
    return False


def with_fresh_cache(run):
    """``run()``; if numba failed reading its cache, empty the cache and ``run()`` once more.

    A cache file that cannot be read back (a damaged disk, a copy cut short)
    fails the first call that loads it; the second compiles afresh and
    writes the cache anew.  Any other failure, out of memory included, is
    raised as it is: recompiling would not change it.
    """
    try:
        return run()
    except Exception as exc:
        if not _from_the_cache(exc) or not forget_cached(*KERNEL_MODULES):
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
    try:
        ek = compiled("engine_loops")
        with_fresh_cache(lambda: _warm_calls(ek))
        _state["module"] = ek
    except BaseException as exc:  # re-raised in the caller's thread by engine()
        _state["error"] = exc


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


def is_loading() -> bool:
    """Whether the background load is still running."""
    t = _state.get("thread")
    return t is not None and t.is_alive()


def is_loaded() -> bool:
    """Whether the compiled engine loops are loaded and ready."""
    return "module" in _state


def _threads() -> int:
    # NUMBA_NUM_THREADS is what a batch worker sets to share the cores.
    try:
        return max(1, int(os.environ.get("NUMBA_NUM_THREADS") or _CPUS))
    except ValueError:
        return 1


_CPUS = os.cpu_count() or 1


_pool: dict = {}


def run_blocks(kernel, n: int, k: int, row_args: tuple, shared: tuple, outs: tuple) -> None:
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


def engine():
    """The loaded engine-loop module, waiting for the load; a failed load is a QuantizeError."""
    warm_up()
    _state["thread"].join()
    if "error" in _state:
        from quantize.errors import QuantizeError

        exc = _state["error"]
        reason = (str(exc) or type(exc).__name__).splitlines()[0]
        if "NUMBA_CACHE_DIR" not in reason:
            reason += "; reinstall quantize with its dependencies (pip install --force-reinstall .)"
        raise QuantizeError(f"the compiled kernels (numba) failed to load: {reason}") from exc
    return _state["module"]
