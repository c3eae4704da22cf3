"""A cache whose entries are valid for one revision of what they were computed from.

The product history that the forecast uses is learned from the store, which costs a few
thousand fit rows a time. ``RevisionCache`` keeps one value per key together with the revision
it was computed at; ``get`` hands it back only while the caller's current revision is the same.
The revision lives in the database (``products.history_revision``), so every process (each
server worker, the CLI) sees an invalidation the moment the write that made it commits: there is
no time-to-live and nothing to forget by hand.

One instance belongs to one ``Database`` (``db.history``); it is thread-safe.
"""

from __future__ import annotations

import threading
from collections.abc import Callable, Hashable
from typing import Generic, TypeVar

T = TypeVar("T")


class RevisionCache(Generic[T]):
    def __init__(self) -> None:
        self._entries: dict[Hashable, tuple[int, T]] = {}
        self._lock = threading.Lock()
        self.misses = 0

    def get(self, key: Hashable, revision: int, compute: Callable[[], T]) -> T:
        """The value for ``key`` at ``revision``, computed (and kept) when it is not held."""
        with self._lock:
            hit = self._entries.get(key)
        if hit is not None and hit[0] == revision:
            return hit[1]
        value = compute()
        with self._lock:
            self.misses += 1
            held = self._entries.get(key)
            if held is None or held[0] <= revision:
                self._entries[key] = (revision, value)
        return value

    def clear(self) -> None:
        with self._lock:
            self._entries.clear()
