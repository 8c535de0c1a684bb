"""Evaluations remembered by content within one engine.

A report asks an engine for the same evaluation more than once: the error
budget switches each noise source off in turn, and a source that does not
act on a run leaves a model equal to the total's, whose variables are then
averaged again over the same points.  On the three-dot
Hahn echo of tests/benchmarks/bench_simulate.py 38 of the 105 engine calls
were such repeats (measured).  An evaluation is a pure function of the model, the
points, the initial state, the options of the call and the engine's own
settings, so its result is kept under a digest of all of them and handed
out again (as a copy) when the same content comes back.

The digest (:func:`content_digest`) walks dataclasses, tuples, lists,
dicts, numbers, strings and numpy arrays (dtype, shape and every byte);
anything else makes the content unknown and the evaluation is not kept, so
a repeat is only ever found for equal content (SHA-256: about 0.9 GB/s
here, twice BLAKE2b's, so a three-dot report's 1.6 MB model costs 2 ms).
"""

from __future__ import annotations

import copy
import dataclasses
import hashlib
import threading

import numpy as np

MEMO_BYTES = 64 * 2 ** 20       # arrays kept per engine at most (emptied when full)
MEMO_ENTRY_BYTES = 16 * 2 ** 20  # an evaluation with more than this in arrays is not kept


class _Unknown(Exception):
    pass


def _feed(h, obj) -> None:
    if obj is None or isinstance(obj, (bool, int, float, complex, str)):
        h.update(f"{type(obj).__name__}:{obj!r};".encode())
    elif isinstance(obj, bytes):
        h.update(b"bytes:%d;" % len(obj))
        h.update(obj)
    elif isinstance(obj, np.ndarray):
        if obj.dtype.hasobject:
            raise _Unknown
        h.update(f"nd:{obj.dtype.str}:{obj.shape};".encode())
        h.update(memoryview(np.ascontiguousarray(obj)).cast("B"))
    elif isinstance(obj, np.generic):
        _feed(h, obj.item())
    elif isinstance(obj, (tuple, list)):
        h.update(f"{type(obj).__name__}:{len(obj)}(".encode())
        for x in obj:
            _feed(h, x)
        h.update(b")")
    elif isinstance(obj, dict):
        h.update(f"dict:{len(obj)}(".encode())
        for k in sorted(obj, key=repr):
            _feed(h, k)
            _feed(h, obj[k])
        h.update(b")")
    elif dataclasses.is_dataclass(obj) and not isinstance(obj, type):
        cls = type(obj)
        h.update(f"dc:{cls.__module__}.{cls.__qualname__}(".encode())
        for f in dataclasses.fields(obj):
            h.update(f.name.encode() + b"=")
            _feed(h, getattr(obj, f.name))
        h.update(b")")
    else:
        raise _Unknown


def content_digest(*parts) -> bytes | None:
    """A digest of the content of ``parts`` (module notes), or None when some
    part is of a kind whose content is not known here."""
    h = hashlib.sha256()
    try:
        _feed(h, parts)
    except _Unknown:
        return None
    return h.digest()


def _array_bytes(obj) -> int:
    if isinstance(obj, np.ndarray):
        return obj.nbytes
    if isinstance(obj, dict):
        return sum(_array_bytes(v) for v in obj.values())
    if isinstance(obj, (tuple, list)):
        return sum(_array_bytes(v) for v in obj)
    if dataclasses.is_dataclass(obj) and not isinstance(obj, type):
        return sum(_array_bytes(getattr(obj, f.name)) for f in dataclasses.fields(obj))
    return 0


class Memo:
    """Results by digest, at most ``limit`` bytes of arrays (emptied when
    full: the repeats of a report come close together); safe to share
    between the threads of a budget."""

    def __init__(self, limit: int | None = None, entry_limit: int | None = None):
        self.limit = MEMO_BYTES if limit is None else limit
        self.entry_limit = MEMO_ENTRY_BYTES if entry_limit is None else entry_limit
        self._kept: dict = {}
        self._bytes = 0
        self._lock = threading.Lock()

    def get(self, key):
        """A copy of what is kept under ``key``, or None."""
        if key is None:
            return None
        with self._lock:
            got = self._kept.get(key)
        return None if got is None else copy.deepcopy(got)

    def put(self, key, value) -> None:
        if key is None:
            return
        size = _array_bytes(value)
        if size > min(self.entry_limit, self.limit):
            return
        value = copy.deepcopy(value)
        with self._lock:
            if key in self._kept:
                return
            if self._bytes + size > self.limit:
                self._kept.clear()
                self._bytes = 0
            self._kept[key] = value
            self._bytes += size
