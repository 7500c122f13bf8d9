"""A process-wide cache bounded in bytes, shared by every browser session of one server.

Streamlit's own caches bound the number of entries, not their size: four people uploading
large tables grow the server without limit. Here each entry's size is measured when it is
stored and the least recently used entries are dropped once the total passes the limit.
One lock per key makes concurrent sessions that ask for the same thing compute it once.
"""
from __future__ import annotations

import os
import sys
import threading
from collections import OrderedDict
from typing import Any, Callable, Hashable

import pandas as pd

MB = 1024 * 1024


def size_of(value: Any) -> int:
    """Approximate bytes held by ``value`` (DataFrames deep, results through their tables)."""
    if isinstance(value, (bytes, bytearray, str)):
        return len(value)
    if isinstance(value, pd.DataFrame):
        return int(value.memory_usage(index=True, deep=True).sum())
    if isinstance(value, tuple):
        return sum(size_of(v) for v in value)
    slices = getattr(value, "slices", None)
    if isinstance(slices, pd.DataFrame):  # an AuditResult: its tables dominate
        fair = getattr(value, "fairness", None)
        groups = getattr(fair, "groups", None)
        return size_of(slices) + (size_of(groups) if isinstance(groups, pd.DataFrame) else 0) + 64 * 1024
    df = getattr(value, "df", None)
    if isinstance(df, pd.DataFrame):
        return size_of(df) + 64 * 1024
    return sys.getsizeof(value)


class SizedCache:
    """Least-recently-used cache whose entries together stay under ``max_bytes``.

    An entry larger than the whole limit is returned but not kept.
    """

    def __init__(self, name: str, max_bytes: int):
        self.name = name
        self.max_bytes = int(max_bytes)
        self._items: OrderedDict[Hashable, tuple[Any, int]] = OrderedDict()
        self._lock = threading.Lock()
        self._key_locks: dict[Hashable, threading.Lock] = {}
        self.hits = self.misses = 0

    @property
    def bytes(self) -> int:
        with self._lock:
            return sum(s for _, s in self._items.values())

    def __len__(self) -> int:
        return len(self._items)

    def get(self, key: Hashable):
        with self._lock:
            if key in self._items:
                self._items.move_to_end(key)
                self.hits += 1
                return self._items[key][0]
        return None

    def get_or_make(self, key: Hashable, make: Callable[[], Any]) -> Any:
        hit = self.get(key)
        if hit is not None:
            return hit
        with self._lock:
            key_lock = self._key_locks.setdefault(key, threading.Lock())
        with key_lock:
            hit = self.get(key)  # another session may have made it while we waited
            if hit is not None:
                return hit
            self.misses += 1
            value = make()  # exceptions propagate and nothing is stored
            self.put(key, value)
        with self._lock:
            self._key_locks.pop(key, None)
        return value

    def put(self, key: Hashable, value: Any) -> None:
        size = size_of(value)
        if size > self.max_bytes:
            return
        with self._lock:
            self._items.pop(key, None)
            self._items[key] = (value, size)
            total = sum(s for _, s in self._items.values())
            while total > self.max_bytes and len(self._items) > 1:
                _, (_, dropped) = self._items.popitem(last=False)
                total -= dropped

    def clear(self) -> None:
        with self._lock:
            self._items.clear()


def _limit(var: str, default_mb: int) -> int:
    try:
        return int(float(os.environ.get(var, default_mb)) * MB)
    except ValueError:
        return default_mb * MB


#: Parsed tables (the largest objects), audit results, and built reports. Limits in MB can be
#: set with FISSURE_TABLES_MB, FISSURE_RESULTS_MB and FISSURE_REPORTS_MB.
TABLES = SizedCache("tables", _limit("FISSURE_TABLES_MB", 400))
RESULTS = SizedCache("results", _limit("FISSURE_RESULTS_MB", 150))
REPORTS = SizedCache("reports", _limit("FISSURE_REPORTS_MB", 60))
