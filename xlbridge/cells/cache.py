"""A small, thread-safe LRU cache for fits, keyed on the content of the cleaned inputs.

It lives outside ``xlbridge.worksheet`` on purpose: xlwings reloads the worksheet module
when its file changes, and the cache (with its fits) should survive that.
"""

from __future__ import annotations

import hashlib
import threading
from collections import OrderedDict
from collections.abc import Callable, Hashable
from typing import Generic, TypeVar

import numpy as np

__all__ = ["LRUCache", "content_key", "FIT_CACHE", "SCAN_CACHE"]

V = TypeVar("V")


def content_key(*parts: object) -> str:
    """Hex digest over arrays (dtype, shape and bytes, NaNs made canonical) and the repr
    of everything else, so equal content gives equal keys whatever object holds it."""
    h = hashlib.blake2b(digest_size=20)
    for part in parts:
        if isinstance(part, np.ndarray):
            a = np.ascontiguousarray(part)
            if a.dtype.kind == "f":
                # NaN payloads and signed zeros from different sources must not split keys
                a = np.where(np.isnan(a), np.nan, a) + 0.0
            h.update(f"<array {a.dtype.str} {a.shape}>".encode())
            h.update(a.tobytes())
        else:
            h.update(f"<{type(part).__name__} {part!r}>".encode())
    return h.hexdigest()


class LRUCache(Generic[V]):
    """At most ``maxsize`` entries, and at most ``max_weight`` in total by ``weigh`` (the
    newest entry is always kept); the least recently used entry is evicted first.

    ``get_or_compute`` never stores a failed computation, so an error is recomputed (and
    re-raised) on the next call instead of being remembered.
    """

    def __init__(self, maxsize: int = 32, max_weight: float | None = None,
                 weigh: Callable[[V], float] | None = None) -> None:
        if maxsize < 1:
            raise ValueError("maxsize must be at least 1")
        self.maxsize = maxsize
        self.max_weight = max_weight
        self._weigh = weigh
        self._data: OrderedDict[Hashable, V] = OrderedDict()
        self._weights: dict[Hashable, float] = {}
        self._lock = threading.Lock()
        self.hits = 0
        self.misses = 0

    def __len__(self) -> int:
        return len(self._data)

    def __contains__(self, key: Hashable) -> bool:
        return key in self._data

    def clear(self) -> None:
        with self._lock:
            self._data.clear()
            self._weights.clear()
            self.hits = self.misses = 0

    def get_or_compute(self, key: Hashable, compute: Callable[[], V]) -> V:
        with self._lock:
            if key in self._data:
                self._data.move_to_end(key)
                self.hits += 1
                return self._data[key]
            self.misses += 1
        # computed outside the lock: a slow fit must not block cache hits of other cells
        value = compute()
        weight = self._weigh(value) if self._weigh is not None else 0.0
        with self._lock:
            self._data[key] = value
            self._weights[key] = weight
            self._data.move_to_end(key)
            while len(self._data) > 1 and (
                    len(self._data) > self.maxsize
                    or (self.max_weight is not None
                        and sum(self._weights.values()) > self.max_weight)):
                old, _ = self._data.popitem(last=False)
                del self._weights[old]
        return value


def _fit_rows(result: object) -> float:
    used = getattr(result, "used", None)
    return float(getattr(used, "size", 0))


# a fit keeps a few float arrays per input row: bound the rows held, not only the count
FIT_CACHE: LRUCache = LRUCache(maxsize=32, max_weight=1_000_000, weigh=_fit_rows)

# degree scans refit every degree on every fold: worth keeping, fewer of them
SCAN_CACHE: LRUCache = LRUCache(maxsize=16)
