"""Where a batch's per-image tasks run: worker processes or a Dask cluster.

Each mapper yields ``(item, result)`` pairs with at most one task per
worker in flight, so memory is bounded by the largest image; a task that
fails, or a worker that dies, yields its exception as the result, which
fails that image only.
"""

from __future__ import annotations

import contextlib
import os
import re
from typing import Any, Iterator

from quantize.errors import QuantizeError

__all__ = []


#: The signals a batch stops on (Ctrl-C and a scheduler's or ``kill``'s SIGTERM).
_STOP_SIGNALS = ("SIGINT", "SIGTERM")


@contextlib.contextmanager
def _stops_held():
    """Hold Ctrl-C and SIGTERM while worker processes are started; they arrive as soon as it ends.

    A new worker reads its start-up data from a pipe the batch writes to; an
    interrupt landing in between left the worker with half of it, and its
    traceback ("Ran out of input") on the terminal.  Held, the interrupt
    lands just after, when the worker can start and see the batch gone.
    Each worker inherits the mask and lifts it (:func:`_init_worker`).
    """
    import signal

    held = {getattr(signal, name) for name in _STOP_SIGNALS if hasattr(signal, name)}
    try:
        old = signal.pthread_sigmask(signal.SIG_BLOCK, held)
    except (AttributeError, OSError, ValueError):  # no POSIX signal masks here
        yield
        return
    try:
        yield
    finally:
        signal.pthread_sigmask(signal.SIG_SETMASK, old)


def _init_worker(threads: int) -> None:
    # Spawned workers import numba fresh, so this caps the thread pool of any
    # parallel kernel: two workers with two threads each on two cores only
    # fight over the cores.
    for var in ("NUMBA_NUM_THREADS", "OMP_NUM_THREADS", "OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS"):
        os.environ[var] = str(threads)
    import signal

    # The batch decides when to stop: a Ctrl-C at the terminal (sent to every process of the
    # group) lets a worker finish its image; SIGTERM, as the batch's own shut-down sends it,
    # still ends it.  Then the start-up mask the worker inherited (_stops_held) is lifted.
    signal.signal(signal.SIGINT, signal.SIG_IGN)
    if hasattr(signal, "pthread_sigmask"):
        signal.pthread_sigmask(signal.SIG_UNBLOCK, {getattr(signal, n) for n in _STOP_SIGNALS if hasattr(signal, n)})
    _exit_with_parent()


def _exit_with_parent(every: float = 0.5) -> None:
    """End this worker when the batch that started it is gone (killed: SIGKILL runs no clean-up).

    A worker left behind would block on its pipe for ever; the next run removes any temporary file
    it leaves (:func:`quantize.batch.guard.remove_stale_parts`).
    """
    import threading
    import time

    parent = os.getppid()

    def watch():
        while True:
            time.sleep(every)
            if os.getppid() != parent:
                os._exit(1)

    threading.Thread(target=watch, name="quantize-parent-watch", daemon=True).start()


def _one_line(exc: BaseException) -> str:
    text = (str(exc) or exc.__class__.__name__).splitlines()[0]
    if isinstance(exc, MemoryError):
        return "out of memory while processing this image"
    if isinstance(exc, (QuantizeError, ValueError, OSError)):
        return text
    return f"internal error ({exc.__class__.__name__}: {text}); please report it"



_DEAD_WORKER = ("a worker process stopped unexpectedly (out of memory, or a script that starts a batch "
                "outside an `if __name__ == '__main__':` block)")


def _local_map(fn, items: list, extra: tuple, workers: int) -> Iterator[tuple[dict, object]]:
    """Yield (item, result) with at most ``workers`` items in flight; a dead worker fails its item."""
    import multiprocessing
    from concurrent.futures import FIRST_COMPLETED, ProcessPoolExecutor, wait
    from concurrent.futures.process import BrokenProcessPool

    threads = max(1, (os.cpu_count() or 1) // workers)
    todo = list(reversed(items))
    while todo:
        with ProcessPoolExecutor(max_workers=workers, mp_context=multiprocessing.get_context("spawn"),
                                 initializer=_init_worker, initargs=(threads,)) as ex:
            pending: dict[Any, Any] = {}
            broken = False
            while todo or pending:
                while todo and len(pending) < workers and not broken:
                    item = todo.pop()
                    try:
                        with _stops_held():  # a submit may start a worker
                            future = ex.submit(fn, item, *extra)
                        pending[future] = item
                    except BrokenProcessPool:
                        todo.append(item)
                        broken = True
                if not pending:
                    break
                done, _ = wait(pending, return_when=FIRST_COMPLETED)
                for f in done:
                    item = pending.pop(f)
                    try:
                        yield item, f.result()
                    except BrokenProcessPool:
                        broken = True
                        yield item, RuntimeError(_DEAD_WORKER)
                if broken and not pending:
                    break  # start a fresh pool for what is left


#: A Dask scheduler address: protocol://host:port or host:port (the protocols dask.distributed speaks).
_ADDRESS = re.compile(r"^((tcp|tls|ucx|ws|wss)://)?(\[[0-9A-Fa-f:.]+\]|[A-Za-z0-9_.\-]+):\d{1,5}$|^inproc://\S+$")


def _dask_client(cluster):
    try:
        from dask.distributed import Client
    except ImportError:
        raise QuantizeError("--cluster needs dask.distributed; install it with: pip install 'quantize-palette[dask]'") \
            from None
    address = getattr(cluster, "scheduler_address", cluster)
    if isinstance(address, str) and not _ADDRESS.match(address):
        raise QuantizeError(f"--cluster {address[:200]!r} is not a scheduler address; give one such as "
                            "tcp://host:8786 or host:8786")
    try:
        return Client(address, timeout="20s", set_as_default=False)
    except (OSError, TimeoutError, ValueError) as exc:
        raise QuantizeError(f"cannot reach the Dask scheduler at {address} ({_one_line(exc)})") from None


def _dask_map(client, fn, items: list, extra: tuple) -> Iterator[tuple[dict, object]]:
    """Yield (item, result) from a Dask cluster, one item in flight per worker thread."""
    from dask.distributed import as_completed

    slots = max(1, sum(client.nthreads().values()))
    todo = list(reversed(items))
    owner, running = {}, {}
    ac = as_completed(loop=client.loop)

    def submit_next():
        item = todo.pop()
        fut = client.submit(fn, item, *extra, pure=False)
        owner[fut.key] = item
        running[fut.key] = fut
        ac.add(fut)

    while todo and len(owner) < slots:
        submit_next()
    try:
        for fut in ac:
            item = owner.pop(fut.key)
            running.pop(fut.key, None)
            try:
                result = fut.result()
            except Exception as exc:  # noqa: BLE001 - a lost worker or a task error fails this image only
                result = exc
            fut.release()
            yield item, result
            if todo:
                submit_next()
    finally:
        if running:
            # Stopped early: let the images already on the workers finish, so
            # that the manifest written next lists every file they wrote.
            for f in running.values():
                try:
                    f.result()
                except Exception:  # noqa: BLE001 - its failure is for the next run to find
                    pass


def _executor(cluster, workers):
    """(Dask client or None, mapper); ``mapper(fn, items, extra)`` yields (item, result)."""
    if cluster is not None:
        client = _dask_client(cluster)
        return client, lambda fn, items, extra: _dask_map(client, fn, items, extra)
    if workers == 0:
        return None, lambda fn, items, extra: ((it, fn(it, *extra)) for it in items)
    n_workers = workers or os.cpu_count() or 1
    return None, lambda fn, items, extra: _local_map(fn, items, extra, n_workers)
