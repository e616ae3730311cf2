"""The cache of values derived from an immutable object, owned by that object.

A :class:`~quantize.core.picture.Picture` keeps its colour sample in one, and
a :class:`~quantize.core.sampling.ColourSample` its perceptual coordinates,
binned means and pixel index: each is a pure function of pixels or colours
that never change, asked for by several stages and, in the fitting engine,
by several worker threads at once.
"""

from __future__ import annotations

import threading
from collections.abc import Callable, Hashable
from typing import Any

__all__ = ["DerivedCache"]


class DerivedCache:
    """Values derived from one immutable object, each computed once and kept.

    Each value is computed under a lock of its own key: a second thread
    asking for a value being computed waits for it instead of computing it
    again, and threads asking for different values do not wait for each
    other.  A computation that raises stores nothing.  The cache belongs to
    one object and lives as long as it; a pickled copy of that object starts
    with an empty cache.

    Examples
    --------
    >>> cache = DerivedCache()
    >>> cache.get("answer", lambda: 6 * 7), cache.get("answer", lambda: 0)
    (42, 42)
    """

    def __init__(self) -> None:
        self._values: dict[Hashable, Any] = {}
        self._locks: dict[Hashable, threading.Lock] = {}
        self._guard = threading.Lock()  # guards the two dicts, never held while computing

    def get(self, key: Hashable, compute: Callable[[], Any]) -> Any:
        """The value under ``key``, from ``compute()`` on the first call."""
        with self._guard:
            if key in self._values:
                return self._values[key]
            lock = self._locks.setdefault(key, threading.Lock())
        with lock:
            with self._guard:
                if key in self._values:  # computed while this thread waited
                    return self._values[key]
            value = compute()
            with self._guard:
                self._values[key] = value
                self._locks.pop(key, None)
        return value

    def peek(self, key: Hashable, default: Any = None) -> Any:
        """The value under ``key`` if one is kept, else ``default``; computes nothing."""
        with self._guard:
            return self._values.get(key, default)

    def put(self, key: Hashable, value: Any) -> None:
        """Keep ``value`` under ``key``, replacing what was there."""
        with self._guard:
            self._values[key] = value

    def __contains__(self, key: Hashable) -> bool:
        with self._guard:
            return key in self._values

    def __reduce__(self):
        # Locks do not pickle, and derived values are cheaper to recompute than to ship.
        return (DerivedCache, ())
