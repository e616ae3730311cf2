"""Loading the compiled loops, their disk cache, and running them on row blocks.

The loops themselves are numba functions in :mod:`quantize.kernels.engine_loops`
and :mod:`quantize.kernels.dither_loops`.  Loading a JIT compiler costs about
half a second and a hundred megabytes even from its disk cache, so nothing
loads it in advance: a kernel module is imported on first use, in the
calling thread, by :func:`compiled` -- the one way the package loads
compiled code.  Only error diffusion, ordered dithers and inputs too large
for the numpy kernels of :mod:`quantize.kernels.vectorised` get there
(:func:`quantize.kernels.nearest.uses_compiled`; a fit on such an input
loads them at its start, :func:`quantize.kernels.nearest.load_for`).  Once
loaded, the Euclidean kernels, whose two paths are bit-identical, run
compiled on every size.  This module changes no process-wide state: no
garbage-collector settings, no import hooks.
"""

from __future__ import annotations

import os
import threading

import numpy as np

__all__ = ["compiled", "forget_cached", "with_fresh_cache", "compile_pending", "compile_all", "run_blocks",
           "KERNEL_MODULES"]

#: Point-centre pairs per thread below which one thread does the work:
#: handing a block to another thread costs tens of microseconds.
_PER_THREAD = 1 << 19

_lock = threading.Lock()


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
    """The compiled-kernel module ``quantize.kernels.<name>``, imported where numba can cache it.

    numba keeps compiled code beside the module or, if that folder is
    read-only, in the user's cache folder.  When neither can be written (a
    read-only install run by a user without a writable home) its import
    fails; the cache then goes to a private folder in the system's
    temporary folder, and only the first run there compiles.

    Raises
    ------
    QuantizeError
        numba cannot be imported or has nowhere to cache; the message is one
        line that says what to do.
    """
    import sys

    full = f"{__package__}.{name}"
    module = sys.modules.get(full)
    if module is not None:
        return module
    try:
        return _import(full)
    except Exception as exc:
        from quantize.errors import QuantizeError

        reason = (str(exc) or type(exc).__name__).splitlines()[0]
        if "NUMBA_CACHE_DIR" not in reason:
            reason += "; reinstall quantize with its dependencies (pip install --force-reinstall .)"
        raise QuantizeError(f"the compiled kernels (numba) failed to load: {reason}") from exc


def _import(full: str):
    import importlib

    try:
        return importlib.import_module(full)
    except RuntimeError as exc:
        if "no locator available" not in str(exc):
            raise
        import numba

        # numba.config sets its settings at run time from the environment: numba's own
        # type information does not declare them.
        cache_dir = numba.config.CACHE_DIR  # type: ignore[attr-defined]
        if cache_dir:
            raise RuntimeError(f"numba cannot write its cache folder {cache_dir}; set "
                               "NUMBA_CACHE_DIR to a writable folder") from exc
        folder = _fallback_cache_dir()
        os.makedirs(folder, mode=0o700, exist_ok=True)
        if not _private(folder):
            # numba loads pickled code from its cache: never from a folder
            # that somebody else could have written.
            raise RuntimeError(f"numba has nowhere to cache compiled code, and {folder} is not a private "
                               "folder of this user; set NUMBA_CACHE_DIR to a writable folder") from exc
        numba.config.CACHE_DIR = folder  # type: ignore[attr-defined]  # set at run time, as above
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
            flush = getattr(getattr(obj, "_cache", None), "flush", None)
            if callable(flush):
                try:
                    flush()
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
    link: BaseException | None = exc
    while link is not None:
        if any(marker in frame.filename for frame in traceback.extract_tb(link.__traceback__)):
            return True
        link = link.__cause__ or link.__context__
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


def _after_fork_in_child() -> None:
    # A forked child has only the forking thread: the pool's workers are
    # gone.  Start afresh when needed.
    global _lock
    _lock = threading.Lock()
    _pool.clear()


if hasattr(os, "register_at_fork"):  # POSIX
    os.register_at_fork(after_in_child=_after_fork_in_child)


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


def _njit_functions(source: str) -> list[tuple[str, int]]:
    """(name, line of the decorator) of every compiled function in a kernel module's source."""
    lines = source.splitlines()
    found = []
    for i, line in enumerate(lines):
        if line.startswith("@numba.njit(") and i + 1 < len(lines) and lines[i + 1].startswith("def "):
            found.append((lines[i + 1][4:].split("(")[0], i + 1))
    return found


def _writable(folder: str) -> bool:
    while not os.path.isdir(folder):  # numba creates it
        parent = os.path.dirname(folder)
        if parent == folder:
            return False
        folder = parent
    return os.access(folder, os.W_OK)


def _cache_folder(source_path: str) -> str:
    """The folder numba keeps this file's compiled code in: the first of its choices it can write."""
    import hashlib
    import sys

    where = os.path.dirname(os.path.abspath(source_path))
    sub = f"{os.path.basename(where)}_{hashlib.sha1(where.encode()).hexdigest()}"
    if os.environ.get("NUMBA_CACHE_DIR"):
        return os.path.join(os.environ["NUMBA_CACHE_DIR"], sub)
    folders = [os.path.join(where, "__pycache__")]
    if sys.platform.startswith(("linux", "freebsd")):
        home = os.environ.get("XDG_CACHE_HOME") or os.path.expanduser("~/.cache")
        folders.append(os.path.join(home, "numba", sub))
    for folder in folders:
        if _writable(folder):
            return folder
    return os.path.join(_fallback_cache_dir(), sub)


def compile_pending() -> bool:
    """Whether the compiled kernels still have to be compiled: numba has no fresh on-disk cache of them.

    A cheap look at the files numba's cache would hold (numba itself is not
    imported): an index file for every compiled function, stamped for the
    current source.  Compiling takes tens of seconds, once; a command line
    can say so first (:func:`compile_all`).  A newer numba, which does not
    read an older one's cache, is not noticed: its first run compiles
    without a word.
    """
    import hashlib
    import struct
    import sys
    from importlib.util import find_spec

    if find_spec("numba") is None:
        return False  # nothing to compile with; loading will say so
    tag = f"py{sys.version_info[0]}{sys.version_info[1]}"
    here = os.path.dirname(os.path.abspath(__file__))
    for name in KERNEL_MODULES:
        path = os.path.join(here, f"{name}.py")
        with open(path, "rb") as f:
            source = f.read()
        # numba stamps each index with the source's SHA-256 (up to 0.6x: its
        # modification time and size), pickled as raw bytes.
        stamps = (hashlib.sha256(source).digest(), struct.pack(">d", os.stat(path).st_mtime))
        functions = _njit_functions(source.decode("utf-8"))
        folder = _cache_folder(path)
        if not all(_fresh(os.path.join(folder, f"{name}.{fn}-{line}.{tag}.nbi"), stamps)
                   for fn, line in functions):
            return True
    return False


def _fresh(index: str, stamps: tuple[bytes, ...]) -> bool:
    try:
        with open(index, "rb") as f:
            data = f.read()
    except OSError:
        return False
    return any(stamp in data for stamp in stamps)


def compile_all() -> None:
    """Compile every kernel for the argument types the package passes, and cache them on disk.

    What a first run does once after install, so that no later run
    compiles; :func:`compile_pending` says whether it is needed.
    """
    ek = compiled("engine_loops")
    dk = compiled("dither_loops")

    def run():
        pts, lab, de = np.zeros((2, 3)), np.zeros(2, dtype=np.intp), np.zeros(2)
        ek.assign_euclid(pts, pts, lab, de)
        ek.assign_euclid_two(pts, pts, lab, de, np.zeros(2))
        ek.centre_sums(pts, de, lab, de, pts.copy())
        ek.assign_ciede2000(pts, pts, lab, 1.0, lab, de)
        ek.ciede2000_to(pts, lab, pts, de)
        lut, mat, pal = np.zeros(65536), np.eye(3), np.zeros((2, 3))
        state, pinned = np.zeros((2, 2), dtype=np.uint8), np.zeros((2, 2), dtype=np.uint16)
        out, de2 = np.zeros((2, 2), dtype=np.uint8), np.zeros((2, 2))
        dy, dx, w = np.array([0, 1]), np.array([1, 0]), np.array([0.5, 0.5])
        mod = np.zeros((1, 1))  # threshold modulation mask
        near, other = np.zeros(4, dtype=np.int64), np.zeros(4, dtype=np.int64)
        share, de_near, de_other = np.zeros(4), np.zeros(4), np.zeros(4)
        dk.to_space(0.0, 0.0, 0.0, mat, mat, 0)
        for depth in (np.uint8, np.uint16):  # 8- and 16-bit images
            codes = np.zeros((2, 2, 3), dtype=depth)
            for metric in (0, 1):
                dk.diffuse(codes, lut, state, pinned, pal, pal, mat, mat, 0, metric, dy, dx, w, 1.0, True, mod, 0.0,
                           np.inf, pal, out)
            err = np.zeros((dk.error_rows(dy), 2, 3))
            dk.diffuse_rows(codes, lut, state, pinned, pal, pal, mat, mat, 0, 0, dy, dx, w, 1.0, True, mod, 0.0,
                            np.inf, pal, err, 0, 2, out)
            dk.delta_e_rows(codes, lut, state, out, pal, mat, 0, 2, de2)
            dk.bracket(codes.reshape(-1, 3), lut, pal, pal, pal, mat, mat, mat, 0, 0, near, other, share,
                       de_near, de_other)
        dk.ordered(np.zeros((2, 2), dtype=np.int32), state, pinned, de2, 1.0, near, other, share, de_near,
                   de_other, out, de2)

    with_fresh_cache(run)
