"""Large result columns in memory the process already holds (issue 16).

A run's tables are written into fresh arrays. Touching a fresh page costs a page fault and the
zeroing of the page; on a virtual machine that hands memory back to its host when the guest frees
it (free page reporting, as on this project's VMs), the first touch of memory freed a few seconds
ago also waits for the host: measured here at ~2.5 s per GiB, against ~0.2 s per GiB for memory the
process freed a moment ago and ~0.05 s per GiB to write memory already mapped. The returned tables
are ~90 bytes per patient, so a run of 10^7 patients spent more time obtaining its columns than
simulating (benchmarks/RESULTS.md, scaling row). The C allocator keeps and reuses freed blocks
only below its mmap threshold (at most 32 MiB), so small runs never paid this and large ones always
did.

:func:`empty` hands out columns of at least :data:`MIN_BYTES` from buffers the process keeps after
the tables that used them are gone: a buffer is free again when no array refers to it any more
(numpy views keep their owner alive, so the owner's reference count says whether any table, frame,
Arrow array or view still uses it). Kept buffers are bounded by :func:`set_limit` (default: an
eighth of the machine's memory, at most 4 GiB); :func:`release` drops the free ones. Contents of a
handed-out column are undefined, as with ``numpy.empty``: every caller writes every row it returns.
"""

from __future__ import annotations

import os
import sys
import threading
from typing import Callable

import numpy as np
from numpy.typing import DTypeLike, NDArray

__all__ = ["MIN_BYTES", "empty", "kept_bytes", "limit", "on_release", "release", "set_limit"]

#: Columns smaller than this come from ``numpy.empty`` (the C allocator already reuses them).
MIN_BYTES = 1 << 20


def _default_limit() -> int:
    try:
        ram = os.sysconf("SC_PAGE_SIZE") * os.sysconf("SC_PHYS_PAGES")
    except (ValueError, OSError, AttributeError):  # not a POSIX system: a fixed budget
        ram = 8 << 30
    return int(min(4 << 30, ram // 8))


_lock = threading.Lock()
_kept: list[NDArray[np.uint8]] = []
_limit = _default_limit()
_release_hooks: list[Callable[[], int]] = []


def _unused(i: int) -> bool:
    # references: the list slot and getrefcount's own argument; any array viewing the buffer adds one
    return sys.getrefcount(_kept[i]) == 2


def empty(n: int, dtype: DTypeLike = np.float64) -> NDArray:
    """An uninitialised 1-d array of ``n`` items of ``dtype``, taken from a kept buffer no array
    uses any more when one fits (at least the size, at most twice it), otherwise a new one (kept
    while the kept buffers stay within :func:`limit`)."""
    dt = np.dtype(dtype)
    nbytes = int(n) * dt.itemsize
    if nbytes < MIN_BYTES or _limit <= 0:
        return np.empty(int(n), dtype=dt)
    with _lock:
        best = -1
        for i in range(len(_kept)):  # by index: a loop variable would count as a reference
            size = _kept[i].nbytes
            if nbytes <= size <= 2 * nbytes and _unused(i) and (best < 0 or size < _kept[best].nbytes):
                best = i
        if best >= 0:
            return _kept[best][:nbytes].view(dt)
        total = sum(b.nbytes for b in _kept)
        i = len(_kept) - 1
        while total + nbytes > _limit and i >= 0:  # make room: drop free buffers, newest first
            if _unused(i):
                total -= _kept.pop(i).nbytes
            i -= 1
        buf = np.empty(nbytes, dtype=np.uint8)
        if total + nbytes <= _limit:
            _kept.append(buf)
        return buf.view(dt)


def on_release(hook: Callable[[], int]) -> None:
    """Have :func:`release` also call ``hook``, which drops other memory the engine keeps between
    runs (the idle chunk workspaces of :mod:`sim.engine.histories`) and returns its bytes."""
    _release_hooks.append(hook)


def release() -> int:
    """Drop the kept buffers no array uses (returned to the C allocator, and so to the system) and
    what the :func:`on_release` hooks keep; returns the bytes dropped."""
    with _lock:
        dropped = 0
        for i in range(len(_kept) - 1, -1, -1):
            if _unused(i):
                dropped += _kept.pop(i).nbytes
    return dropped + sum(hook() for hook in _release_hooks)


def kept_bytes() -> tuple[int, int]:
    """Bytes of the kept buffers: ``(in use, free)``."""
    with _lock:
        used = sum(_kept[i].nbytes for i in range(len(_kept)) if not _unused(i))
        return used, sum(b.nbytes for b in _kept) - used


def limit() -> int:
    """The most bytes kept buffers may hold."""
    return _limit


def set_limit(nbytes: int) -> None:
    """Keep at most ``nbytes`` of buffers (0: keep none, every column is a plain ``numpy.empty``);
    free buffers beyond the new limit are dropped."""
    global _limit
    if int(nbytes) < 0:
        raise ValueError(f"buffer limit: {nbytes!r} bytes; must be >= 0")
    with _lock:
        _limit = int(nbytes)
        total = sum(b.nbytes for b in _kept)
        for i in range(len(_kept) - 1, -1, -1):
            if total <= _limit:
                break
            if _unused(i):
                total -= _kept.pop(i).nbytes
