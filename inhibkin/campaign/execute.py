"""Where a campaign's chunks run: in this process, on local processes or on Dask.

:func:`run` calls one chunk function (the grid route's
:func:`~inhibkin.campaign.grid.fit_grid_chunk` or the dose route's
:func:`~inhibkin.campaign.dose.fit_dose_chunk`) on every chunk and gives the results
back in input order, whatever ran them, so a campaign's table does not depend on where
it was computed. A worker that dies loses only its chunks, which are run again; a
compound that kills its worker every time comes back failed, never missing.
"""

from __future__ import annotations

import multiprocessing
from collections import deque
from concurrent.futures import ProcessPoolExecutor, as_completed

import numpy as np

from ..engine.allocation import engine_thresholds
from ..interrupt import check as check_interrupt
from ..progress import progress_bar

__all__ = ["run", "grid_chunks", "MAX_ROWS_PER_CHUNK"]

#: A chunk sent to a worker closes at ``chunk_size`` compounds or this many rows,
#: whichever comes first, so no single task carries a large slice of the table.
MAX_ROWS_PER_CHUNK = 50_000
# Passes of the lost chunks over a full local pool before they are run one at a time.
_PARALLEL_PASSES = 2


def grid_chunks(groups, chunk_size, max_rows=MAX_ROWS_PER_CHUNK):
    """Consecutive chunks of at most ``chunk_size`` compounds and about ``max_rows``
    rows (None: no limit on rows, for chunks that are never sent to a worker)."""
    max_rows = np.inf if max_rows is None else max_rows
    chunk, rows = [], 0
    for compound, frame in groups:
        if chunk and (len(chunk) >= chunk_size or rows + len(frame) > max_rows):
            yield chunk
            chunk, rows = [], 0
        chunk.append((compound, frame))
        rows += len(frame)
    if chunk:
        yield chunk


def run(function, chunks, arguments, *, workers, client, quiet, sizes, split, lost):
    """``function(chunk, *arguments)`` for every chunk, on whatever runs them; the results
    in chunk order. ``sizes`` are the compounds per chunk, for the progress bar.

    A worker process that dies (killed, out of memory, a crash in compiled code) loses
    the chunks it held; they are run again (see :func:`_run_local`, :func:`_run_dask`).
    ``split(chunk)`` cuts a chunk into one-compound chunks, and ``lost(chunk, reason)``
    gives the failed results of a one-compound chunk that killed its worker every time,
    so no compound is ever dropped: each comes back fitted or failed with the reason.
    """
    # Results of the pieces of each chunk, keyed by their place in it: () for the whole
    # chunk, (j,) for its j-th piece after a split; sorted keys give the input order.
    pieces = [{} for _ in chunks]
    with progress_bar(sum(sizes), quiet=quiet, desc="fitting") as bar:
        def done(task, result):
            check_interrupt()
            k, path, _ = task
            pieces[k][path] = result
            bar.update(len(result))

        tasks = [(k, (), chunk) for k, chunk in enumerate(chunks)]
        if client is not None:
            _run_dask(client, function, tasks, arguments, split, lost, done)
        elif workers is not None and workers > 1:
            _run_local(workers, function, tasks, arguments, split, lost, done)
        else:
            for task in tasks:
                done(task, function(task[2], *arguments))
    return [item for parts in pieces for path in sorted(parts) for item in parts[path]]


def _run_local(workers, function, tasks, arguments, split, lost, done):
    """Chunks on local processes, with the chunks of a dead worker run again.

    When a worker dies the pool breaks and every chunk not yet finished is lost, the
    culprit among them. Those chunks get one more pass on a fresh pool (a death from
    outside — memory, a signal — rarely repeats); what is lost again is then run one
    chunk at a time on a single worker, where a death points at the chunk that caused
    it: that chunk is split and its compounds run one by one, and a compound that still
    kills its worker is reported failed.
    """
    from concurrent.futures.process import BrokenProcessPool

    # spawn: a fresh interpreter per worker, safe beside threads (dask, BLAS) and the
    # same on Linux, macOS and Windows.
    context = multiprocessing.get_context("spawn")
    for _ in range(_PARALLEL_PASSES):
        if not tasks:
            return
        lost_tasks = []
        with ProcessPoolExecutor(max_workers=workers, mp_context=context) as pool:
            futures = {pool.submit(function, task[2], *arguments): task for task in tasks}
            for future in as_completed(futures):
                try:
                    result = future.result()
                except BrokenProcessPool:
                    lost_tasks.append(futures[future])
                    continue
                done(futures[future], result)
        tasks = sorted(lost_tasks, key=lambda task: task[:2])
    queue = deque(tasks)
    pool = None
    try:
        while queue:
            task = queue.popleft()
            k, path, chunk = task
            pool = pool or ProcessPoolExecutor(max_workers=1, mp_context=context)
            try:
                result = pool.submit(function, chunk, *arguments).result()
            except BrokenProcessPool as err:
                pool.shutdown()
                pool = None
                parts = split(chunk)
                if len(parts) > 1:
                    queue.extendleft(reversed([(k, path + (j,), part)
                                               for j, part in enumerate(parts)]))
                    continue
                result = lost(chunk, f"the worker process died every time this compound "
                                     f"was fitted, the last time with it alone ({err})")
            done(task, result)
    finally:
        if pool is not None:
            pool.shutdown()


def _run_dask(client, function, tasks, arguments, split, lost, done):
    """Chunks on a Dask cluster, with the chunks of a dead worker run again.

    The scheduler itself reruns the tasks of a worker that dies, until a task has been
    on ``distributed.scheduler.allowed-failures`` dying workers; then it gives up on it
    (``KilledWorker``), whether it caused the deaths or only shared a worker with the
    task that did. Such a chunk is split and its compounds submitted one by one; a
    compound given up on by itself is run once more at the end, alone on the cluster,
    where a death can only be its own, and is reported failed if it dies again.

    Each chunk's result travels as one object (:class:`_Packed`).
    """
    from distributed import KilledWorker
    from distributed import as_completed as dask_completed

    futures = {client.submit(_packed, function, task[2], *arguments, pure=False): task
               for task in tasks}
    queue = dask_completed(list(futures))
    suspects = []
    for future in queue:
        task = futures.pop(future)
        k, path, chunk = task
        try:
            result = future.result().items
        except KilledWorker:
            parts = split(chunk)
            if len(parts) > 1:
                for j, part in enumerate(parts):
                    piece = client.submit(_packed, function, part, *arguments, pure=False)
                    futures[piece] = (k, path + (j,), part)
                    queue.add(piece)
            else:
                suspects.append(task)
            continue
        done(task, result)
    for task in sorted(suspects, key=lambda task: task[:2]):
        try:
            result = client.submit(_packed, function, task[2], *arguments,
                                   pure=False).result().items
        except KilledWorker as err:
            result = lost(task[2], f"the Dask workers running this compound died, the last "
                                   f"time with it alone; the scheduler gave up on it ({err})")
        done(task, result)


class _Packed:
    """A chunk's results as one object, so that Dask pickles them in one piece.

    Dask serialises the items of a returned list one by one, so the compounds of a
    chunk, which share one batch of arrays (:class:`inhibkin.campaign.lazy.BatchFit`),
    would each carry a copy of it: a chunk's worth of copies, over 20 GB in the client
    at 10,000 compounds. One object keeps the sharing, as the local process pool does.
    """

    __slots__ = ("items",)

    def __init__(self, items):
        self.items = items


def _packed(function, chunk, *arguments) -> _Packed:
    """``function(chunk, *arguments)``, on the worker, as one :class:`_Packed`, with the
    allocator's thresholds set for the engine's arrays (:mod:`inhibkin.engine.allocation`:
    a nanny's environment made a worker's chunks take 1.8 times the CPU of the same
    chunks in this process)."""
    with engine_thresholds():
        return _Packed(function(chunk, *arguments))
