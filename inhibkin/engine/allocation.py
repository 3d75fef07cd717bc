"""The C allocator's thresholds while a chunk runs on a Dask worker.

A Dask worker started by a nanny (a LocalCluster of processes, ``dask worker``) gets
``MALLOC_TRIM_THRESHOLD_=65536`` in its environment (the ``distributed.nanny.pre-spawn-environ``
setting) so that freed memory goes back to the system. On glibc that variable also fixes
the mmap threshold at 128 KB, where it otherwise grows with the blocks freed: every array
of the batched engine above 128 KB (a chunk of 256 compounds' grids makes them by the
thousand) is then mapped fresh from the system and faulted in page by page, and freed
again. Measured on 2,000 compounds in one process: 22.5 s of CPU, 35.3 s with that
variable set (12 s of it in the kernel), 21.1 s with the thresholds below.

:func:`engine_thresholds` sets the mmap threshold to glibc's own ceiling for it and the
trim threshold to twice that while a chunk runs, then puts back the values the
environment gave and hands the freed memory back to the system (``malloc_trim``), so
the worker holds no more between tasks than Dask expects. It does nothing where the
variable is not set (the allocator keeps its own thresholds) or the C library is not
glibc.
"""

from __future__ import annotations

import ctypes
import ctypes.util
import os
import threading
from contextlib import contextmanager

__all__ = ["engine_thresholds"]

# mallopt parameters and glibc's defaults (malloc.h; malloc/malloc.c: DEFAULT_MMAP_THRESHOLD
# 128 KB, DEFAULT_MMAP_THRESHOLD_MAX 4 MB x sizeof(long), 32 MB on 64-bit systems).
_M_TRIM_THRESHOLD = -1
_M_MMAP_THRESHOLD = -3
_DEFAULT_MMAP_THRESHOLD = 128 * 1024
_CHUNK_MMAP_THRESHOLD = 32 * 1024 * 1024
_CHUNK_TRIM_THRESHOLD = 2 * _CHUNK_MMAP_THRESHOLD

# Chunks running now in this process (a worker may run several in threads): the
# environment's thresholds come back when the last one ends.
_LOCK = threading.Lock()
_RUNNING = [0]


def _glibc():
    """The C library when it is glibc (it has mallopt and malloc_trim), else None."""
    try:
        libc = ctypes.CDLL(ctypes.util.find_library("c") or "libc.so.6")
    except OSError:
        return None
    if not (hasattr(libc, "mallopt") and hasattr(libc, "malloc_trim")):
        return None
    return libc


def _environment_thresholds():
    """(trim, mmap) thresholds the environment fixed, or None when it fixed none."""
    trim = os.environ.get("MALLOC_TRIM_THRESHOLD_")
    if trim is None or not trim.strip().isdigit():
        return None
    mmap = os.environ.get("MALLOC_MMAP_THRESHOLD_", "")
    return int(trim), int(mmap) if mmap.strip().isdigit() else _DEFAULT_MMAP_THRESHOLD


@contextmanager
def engine_thresholds():
    """Within the block, the allocator's thresholds suit large short-lived arrays (see
    the module's docstring); afterwards, the environment's again."""
    fixed = _environment_thresholds()
    libc = _glibc() if fixed is not None else None
    if libc is None:
        yield
        return
    with _LOCK:
        _RUNNING[0] += 1
        libc.mallopt(_M_MMAP_THRESHOLD, _CHUNK_MMAP_THRESHOLD)
        libc.mallopt(_M_TRIM_THRESHOLD, _CHUNK_TRIM_THRESHOLD)
    try:
        yield
    finally:
        with _LOCK:
            _RUNNING[0] -= 1
            if not _RUNNING[0]:
                trim, mmap = fixed
                libc.mallopt(_M_TRIM_THRESHOLD, trim)
                libc.mallopt(_M_MMAP_THRESHOLD, mmap)
                libc.malloc_trim(0)
