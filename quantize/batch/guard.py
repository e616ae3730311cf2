"""What keeps a batch's output folder consistent when runs are killed or overlap.

- **A lock** (:func:`output_lock`): one run at a time per output folder. The
  lock file holds the owner's process id; a lock whose process is gone was
  left by a killed run and is taken over.
- **A journal** (:data:`JOURNAL`): each worker appends a line for every
  output it has written, the moment it is written (one ``write`` of a short
  line to a file opened for appending, which POSIX keeps whole). A run
  killed before it wrote its manifest leaves the journal, and the next run
  treats the files listed there as its own to skip or replace. The journal
  is removed once a manifest lists those files.
- **Leftover temporary files** (:func:`remove_stale_parts`): the atomic
  writer's ``.NAME.XXXX.part`` files in the output tree, left by a killed
  run, are removed by the next run (it holds the lock, so none is another
  run's file in progress).
"""

from __future__ import annotations

import contextlib
import json
import os
import re
from pathlib import Path

from quantize.errors import OutputError

__all__ = ["JOURNAL", "LOCK", "clear_journal", "journal_output", "journal_outputs", "output_lock", "remove_stale_parts"]

#: The journal of outputs written, in the output folder.
JOURNAL = ".quantize-batch-journal.jsonl"
#: The lock file, in the output folder.
LOCK = ".quantize-batch.lock"
#: The atomic writer's temporary names (io.write: mkstemp(prefix=".NAME.", suffix=".part")).
_PART = re.compile(r"^\..+\.[A-Za-z0-9_]{6,}\.part$")


def _alive(pid: int) -> bool:
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    except PermissionError:  # someone else's live process
        return True
    return True


@contextlib.contextmanager
def output_lock(dst: Path):
    """Hold the output folder's lock for a run; refuse when a live run holds it."""
    path = dst / LOCK
    for _ in range(2):
        try:
            fd = os.open(path, os.O_WRONLY | os.O_CREAT | os.O_EXCL, 0o644)
        except FileExistsError:
            try:
                pid = int(path.read_text(encoding="ascii").strip() or "0")
            except (OSError, ValueError):
                pid = 0
            if pid > 0 and pid != os.getpid() and _alive(pid):
                raise OutputError(f"{dst}: another batch (process {pid}) is writing into this folder; wait for "
                                  f"it to finish (or remove {LOCK} if no batch is running)") from None
            with contextlib.suppress(FileNotFoundError):
                path.unlink()  # left by a run that was killed
            continue
        with os.fdopen(fd, "w", encoding="ascii") as fh:
            fh.write(f"{os.getpid()}\n")
        break
    else:  # pragma: no cover - another run took it between our two attempts
        raise OutputError(f"{dst}: another batch took this folder's lock; try again")
    try:
        yield
    finally:
        with contextlib.suppress(FileNotFoundError):
            path.unlink()


def journal_output(output_dir: str, rel: str, output_rel: str) -> None:
    """Record that ``output_rel`` of input ``rel`` is written (called by the worker that wrote it)."""
    line = (json.dumps({"input": rel, "output": output_rel}, ensure_ascii=True) + "\n").encode("ascii")
    fd = os.open(os.path.join(output_dir, JOURNAL), os.O_WRONLY | os.O_CREAT | os.O_APPEND, 0o644)
    try:
        os.write(fd, line)
    finally:
        os.close(fd)


def journal_outputs(dst: Path) -> dict[str, set[str]]:
    """Input -> outputs the journal records (a damaged or cut line is skipped)."""
    out: dict[str, set[str]] = {}
    try:
        text = (dst / JOURNAL).read_text(encoding="ascii", errors="replace")
    except (FileNotFoundError, IsADirectoryError):
        return out
    for line in text.splitlines()[:1_000_000]:
        try:
            item = json.loads(line)
            rel, o = item["input"], item["output"]
        except (ValueError, KeyError, TypeError):
            continue
        if isinstance(rel, str) and isinstance(o, str):
            out.setdefault(rel, set()).add(o)
    return out


def clear_journal(dst: Path) -> None:
    """Remove the journal once a manifest lists what it recorded."""
    with contextlib.suppress(FileNotFoundError):
        (dst / JOURNAL).unlink()


def remove_stale_parts(dst: Path) -> int:
    """Remove the atomic writer's leftover temporary files under ``dst``; how many."""
    n = 0
    for root, _dirs, files in os.walk(dst):
        for name in files:
            if _PART.match(name):
                with contextlib.suppress(OSError):
                    os.unlink(os.path.join(root, name))
                    n += 1
    return n
