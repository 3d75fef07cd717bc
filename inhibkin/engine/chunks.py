"""Chunked execution: a batch cut into chunks along its first axis, run locally or on
the workers of a ``dask.distributed`` client, and put back together in input order.

Every engine result depends only on its own problem's data, so the answers do not
depend on the chunk size or on where a chunk ran; the test suite checks that a
LocalCluster run equals the local run exactly.
"""

from __future__ import annotations

import dataclasses

import numpy as np
import pandas as pd

from .allocation import engine_thresholds

__all__ = ["DEFAULT_CHUNK_SIZE", "run_chunks", "concat_batches"]

#: Problems per chunk on a client when no chunk size is given: large enough that numpy,
#: not scheduling, dominates a task, small enough to spread over a few workers.
DEFAULT_CHUNK_SIZE = 2000


def _call(func, piece, options):
    with engine_thresholds():
        return func(*piece, **options)


def run_chunks(func, arrays, options, *, client=None, chunk_size=None) -> list:
    """Apply ``func(*chunk_arrays, **options)`` to consecutive row ranges of ``arrays``.

    Parameters
    ----------
    func : callable
        A module-level function (it is pickled to the workers).
    arrays : tuple of numpy.ndarray or None
        Arrays sharing their first dimension (None entries are passed as None).
    options : dict
        Keyword arguments for every call.
    client : dask.distributed.Client, optional
        When given, the chunks run as tasks on its workers.
    chunk_size : int, optional
        Rows per chunk; default one chunk locally, :data:`DEFAULT_CHUNK_SIZE` on a client.

    Returns
    -------
    list
        One result per chunk, in row order (at least one, possibly for zero rows).
    """
    n_rows = next(len(a) for a in arrays if a is not None)
    if chunk_size is None:
        chunk_size = DEFAULT_CHUNK_SIZE if client is not None else max(n_rows, 1)
    if chunk_size < 1:
        raise ValueError(f"chunk_size must be a positive integer, got {chunk_size!r}")
    starts = range(0, n_rows, int(chunk_size)) if n_rows else [0]
    pieces = [tuple(None if a is None else a[lo:lo + chunk_size] for a in arrays)
              for lo in starts]
    if client is None:
        return [func(*piece, **options) for piece in pieces]
    scattered = client.scatter(pieces)
    futures = [client.submit(_call, func, piece, options, pure=False) for piece in scattered]
    return client.gather(futures)


def _concat_values(values):
    first = values[0]
    if dataclasses.is_dataclass(first):
        return concat_batches(values)
    if isinstance(first, tuple):
        return tuple(np.concatenate(parts) for parts in zip(*values))
    return np.concatenate(values)


def concat_batches(parts):
    """Join chunk results (frozen dataclasses naming their per-row ``batch_fields``).

    Per-row fields are concatenated; dict fields are joined key by key (their values
    being results or tuples of arrays); a table with a ``compound`` column (row numbers
    within its chunk) is stacked with the numbers shifted to the whole batch's; every
    other field is taken from the first part.
    """
    if len(parts) == 1:
        return parts[0]
    first = parts[0]
    rows = set(type(first).batch_fields)
    joined = {}
    for f in dataclasses.fields(first):
        values = [getattr(p, f.name) for p in parts]
        if f.name in rows:
            joined[f.name] = np.concatenate(values)
        elif isinstance(values[0], pd.DataFrame) and "compound" in values[0]:
            offsets = np.cumsum([0] + [len(p) for p in parts[:-1]])
            joined[f.name] = pd.concat([v.assign(compound=v["compound"] + at)
                                        for v, at in zip(values, offsets)], ignore_index=True)
        elif isinstance(values[0], dict):
            joined[f.name] = {key: _concat_values([v[key] for v in values])
                              for key in values[0]}
        else:
            joined[f.name] = values[0]
    return type(first)(**joined)
