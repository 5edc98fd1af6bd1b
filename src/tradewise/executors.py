"""Where evaluations run: in this process, in a local process pool, or on a Dask cluster."""

from __future__ import annotations

import concurrent.futures as cf
import os
from collections.abc import Callable, Iterator, Sequence
from typing import Any

from tradewise.errors import TradewiseError
from tradewise.models import Outcome

__all__ = ["InProcess", "ProcessPool", "DaskCluster", "make_executor"]

Model = Callable[[dict[str, Any]], Outcome]


class InProcess:
    """Evaluate one design after another in this process (the default)."""

    workers = 1
    name = "in-process"

    def run(self, model: Model, designs: Sequence[dict[str, Any]]) -> Iterator[tuple[int, Outcome]]:
        """Yield ``(position, outcome)`` for each design as it completes."""
        for i, design in enumerate(designs):
            yield i, model(design)

    def close(self) -> None:
        pass

    def __enter__(self):
        return self

    def __exit__(self, *exc: object) -> None:
        self.close()


class ProcessPool(InProcess):
    """Evaluate designs in ``workers`` local processes; results arrive as they complete.

    A worker process that dies takes its designs with it: the pool is
    restarted and those designs are tried once more, then recorded as failed.
    """

    name = "process pool"

    def __init__(self, workers: int) -> None:
        if workers < 1:
            raise TradewiseError(f"workers: got {workers}, allowed: 1 or more")
        self.workers = workers
        self._pool: cf.ProcessPoolExecutor | None = None

    def _get_pool(self) -> cf.ProcessPoolExecutor:
        if self._pool is None:
            self._pool = cf.ProcessPoolExecutor(max_workers=self.workers)
        return self._pool

    def run(self, model: Model, designs: Sequence[dict[str, Any]]) -> Iterator[tuple[int, Outcome]]:
        pending = list(range(len(designs)))
        tries = dict.fromkeys(pending, 0)
        while pending:
            pool = self._get_pool()
            futures = {pool.submit(model, designs[i]): i for i in pending}
            pending = []
            broken = False
            for future in cf.as_completed(futures):
                i = futures[future]
                try:
                    yield i, future.result()
                except cf.process.BrokenProcessPool:
                    broken = True
                    tries[i] += 1
                    if tries[i] >= 2:
                        yield i, Outcome("failed", {}, "the worker process evaluating this design died twice")
                    else:
                        pending.append(i)
            if broken:
                self._pool.shutdown(wait=False, cancel_futures=True)
                self._pool = None

    def close(self) -> None:
        if self._pool is not None:
            self._pool.shutdown(wait=True, cancel_futures=True)
            self._pool = None


class DaskCluster(InProcess):
    """Evaluate designs on Dask: a new local cluster of ``workers``, or an existing scheduler.

    dask.distributed is imported only here, when a cluster is asked for. A
    worker that dies is not fatal: Dask reschedules its tasks; a design whose
    task still fails for that reason is tried once more, then recorded as failed.
    """

    name = "dask"

    def __init__(self, workers: int | None = None, *, scheduler: str | None = None) -> None:
        try:
            from dask.distributed import Client, LocalCluster
        except ImportError:
            raise TradewiseError(
                "Dask is not installed; install the cluster extra: pip install 'tradewise[cluster]'"
            ) from None
        self._cluster = None
        if scheduler:
            try:
                self._client = Client(scheduler, timeout="20s")
            except OSError as exc:
                raise TradewiseError(f"--scheduler {scheduler}: cannot connect ({exc})") from None
        else:
            n = workers or os.cpu_count() or 1
            self._cluster = LocalCluster(
                n_workers=n, threads_per_worker=1, processes=True, dashboard_address=None
            )
            self._client = Client(self._cluster)
        self.workers = len(self._client.scheduler_info().get("workers", {})) or (workers or 1)

    def run(self, model: Model, designs: Sequence[dict[str, Any]]) -> Iterator[tuple[int, Outcome]]:
        from dask.distributed import as_completed

        pending = list(range(len(designs)))
        tries = dict.fromkeys(pending, 0)
        while pending:
            futures = {}
            for i in pending:
                future = self._client.submit(model, designs[i], pure=False, retries=1)
                futures[future] = i
            pending = []
            for future in as_completed(list(futures)):
                i = futures[future]
                try:
                    yield i, future.result()
                except Exception as exc:  # a killed worker surfaces as various errors
                    tries[i] += 1
                    if tries[i] >= 2:
                        yield i, Outcome("failed", {}, f"the Dask task failed twice: {type(exc).__name__}: {exc}")
                    else:
                        pending.append(i)

    def close(self) -> None:
        self._client.close()
        if self._cluster is not None:
            self._cluster.close()


def make_executor(workers: int | None = None, *, dask: bool = False, scheduler: str | None = None) -> InProcess:
    """Pick the executor from the user's options (``--workers``, ``--dask``, ``--scheduler``)."""
    if scheduler or dask:
        return DaskCluster(workers, scheduler=scheduler)
    if workers and workers > 1:
        return ProcessPool(workers)
    return InProcess()
