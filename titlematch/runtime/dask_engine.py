"""Run row-wise steps on a Dask cluster (optional: ``pip install titlematch[dask]``).

Two entries:

* :class:`DaskChunkMap` is what ``run_chunked(..., engine="dask")`` uses: chunks are read here,
  sent to the workers a few at a time, and their results come back in chunk order, so the run
  directory, journal and output are exactly those of the local engine.
* :func:`process_dask` applies a step to a ``dask.dataframe.DataFrame`` partition by partition.

Either way the step (with whatever heavy object it holds: a title dictionary, a register index)
goes to each worker once (scattered with ``broadcast=True``, or as one task the partitions depend
on), instead of once per chunk. Dask
moves objects between processes with its own serialisation; titlematch itself loads artefacts
only from data files (see :mod:`titlematch.io.artefact`).

Importing this module does not import Dask; that happens when an engine is started.
"""
from __future__ import annotations

import logging
import os
from collections import deque
from collections.abc import Callable, Iterable, Iterator

import pandas as pd

from ..io import InputError

INSTALL_HINT = "pip install titlematch[dask]"


def require_dask():
    """Import and return ``dask.dataframe`` and ``distributed``, or raise a clear InputError."""
    try:
        import dask.dataframe as dd
        import distributed
    except ImportError as exc:
        raise InputError(f"the dask engine needs the dask and distributed packages ({exc}); "
                         f"install them with: {INSTALL_HINT}") from None
    return dd, distributed


def _as_local_strings(frame: pd.DataFrame) -> pd.DataFrame:
    """Dask may hold text as pyarrow strings; steps get what the local engine gives them: Python str."""
    converted = {c: object for c, dtype in frame.dtypes.items() if isinstance(dtype, pd.StringDtype)}
    if not converted:
        return frame
    frame = frame.astype(converted)
    for column in converted:
        frame[column] = frame[column].where(frame[column].notna(), "")
    return frame


def _apply(frame: pd.DataFrame, process: Callable[[pd.DataFrame], pd.DataFrame]) -> pd.DataFrame:
    return process(_as_local_strings(frame))


def _apply_to_chunk(chunk, process: Callable[[pd.DataFrame], pd.DataFrame]) -> pd.DataFrame:
    return process(chunk.frame)


class _QuietDistributedLogs:
    """Raise the distributed loggers to WARNING while our own local cluster runs; ``close`` restores them."""

    def __init__(self) -> None:
        names = ["distributed"] + [n for n in logging.root.manager.loggerDict if n.startswith("distributed.")]
        self._levels = {name: logging.getLogger(name).level for name in names}
        for name in names:
            logging.getLogger(name).setLevel(logging.WARNING)

    def close(self) -> None:
        for name, level in self._levels.items():
            logging.getLogger(name).setLevel(level)


class DaskChunkMap:
    """Map a step over chunks on a Dask cluster, results in chunk order, a bounded number in flight.

    Parameters
    ----------
    process : the step; picklable (a module-level function or an object holding its model).
    scheduler : a scheduler address ("tcp://host:8786"), a ``distributed.Client``, or None to
        start a local cluster with one single-threaded worker process per core.
    window : chunks in flight at once; default twice the worker threads (memory stays bounded).

    Example::

        with DaskChunkMap(step, scheduler="tcp://10.0.0.5:8786") as mapper:
            for chunk, result in mapper.map(TableReader("titles.csv").chunks()):
                print(chunk.index, len(result))
    """

    def __init__(self, process: Callable[[pd.DataFrame], pd.DataFrame], *, scheduler=None,
                 window: int | None = None) -> None:
        self.process = process
        self.scheduler = scheduler
        self.window = window
        self._own: list = []

    def __enter__(self) -> "DaskChunkMap":
        _, distributed = require_dask()
        if isinstance(self.scheduler, distributed.Client):
            self.client = self.scheduler
        elif self.scheduler:
            try:
                self.client = distributed.Client(self.scheduler, timeout="20s")
            except OSError as exc:
                raise InputError(f"cannot reach the Dask scheduler at {self.scheduler}: {exc}") from None
            self._own.append(self.client)
        else:
            self._quiet_logs = _QuietDistributedLogs()  # a cluster of our own: its chatter is noise
            cluster = distributed.LocalCluster(n_workers=os.cpu_count() or 1, threads_per_worker=1,
                                               processes=True, dashboard_address=None)
            self.client = distributed.Client(cluster)
            self._own += [self.client, cluster, self._quiet_logs]
        try:
            threads = sum(self.client.nthreads().values())
            if not threads:
                raise InputError(f"the Dask cluster at {self.client.scheduler.address} has no workers")
            self.window = self.window or max(2, 2 * threads)
            self._shipped = self.client.scatter(self.process, broadcast=True, hash=False)
        except BaseException:
            self.__exit__()
            raise
        return self

    def __exit__(self, *exc) -> None:
        shipped = getattr(self, "_shipped", None)
        if shipped is not None:
            shipped.release()  # on a shared cluster, do not leave the step in the workers' memory
        for thing in self._own:
            thing.close()
        self._own.clear()

    def map(self, chunks: Iterable, work: Callable | None = None) -> Iterator[tuple[object, object]]:
        """Yield ``(chunk, work(chunk, process))`` in the order of ``chunks``.

        ``work`` runs on a worker; by default it is ``process(chunk.frame)``. The runner passes
        :func:`titlematch.runtime.runner.work_on_chunk`, so workers also check and encode each chunk.
        """
        work = work or _apply_to_chunk
        pending: deque = deque()
        for chunk in chunks:
            pending.append((chunk, self.client.submit(work, chunk, self._shipped, pure=False)))
            if len(pending) >= self.window:
                yield self._collect(pending.popleft())
        while pending:
            yield self._collect(pending.popleft())

    @staticmethod
    def _collect(item) -> tuple[object, object]:
        chunk, future = item
        result = future.result()
        future.release()
        return chunk, result


def process_dask(ddf, process: Callable[[pd.DataFrame], pd.DataFrame], *, meta: pd.DataFrame | None = None):
    """Apply a step to every partition of a Dask DataFrame; rows stay in order.

    Parameters
    ----------
    ddf : ``dask.dataframe.DataFrame`` with the columns the step reads (text columns may be
        pyarrow strings; the step receives Python strings with missing values as "").
    process : the step, as for :func:`titlematch.runtime.runner.run_chunked`; it becomes one task of the
        graph that every partition depends on, so each worker receives it once.
    meta : an empty frame with the output columns and dtypes; by default the step's output for
        an empty frame.

    Returns
    -------
    dask.dataframe.DataFrame, lazy; ``.compute()`` gives the rows the local step gives, in order.
    Rows the step refuses keep their ``REJECT_REASON_COLUMN`` here (no rejects file is written).

    Example::

        import dask.dataframe as dd
        ddf = dd.read_parquet("titles/")
        process_dask(ddf, NormalizeStep("title", "title")).to_parquet("normalized/")
    """
    dd, _ = require_dask()
    import dask

    if not isinstance(ddf, dd.DataFrame):
        raise TypeError(f"ddf must be a dask.dataframe.DataFrame, got {type(ddf).__name__}")
    if meta is None:
        meta = process(_as_local_strings(ddf._meta.copy()))
    # one task holds the step; every partition task depends on it, so a worker fetches it once,
    # whichever scheduler computes the result (threads, processes or a distributed cluster)
    shipped = dask.delayed(process, pure=False)
    return ddf.map_partitions(_apply, shipped, meta=meta, enforce_metadata=False)
