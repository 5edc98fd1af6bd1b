"""Where evaluations run: in this process, in a local process pool, or on a Dask cluster.

Every executor has the same face: ``run(model, designs)`` yields
``(position, outcome)`` pairs as evaluations complete, in any order, exactly
one pair for each design. A model that fails gives a failed outcome (the
model objects catch their own errors); an executor adds the failures that
only it can see: a worker process that died, a task the cluster lost.
"""

from __future__ import annotations

import concurrent.futures as cf
import logging
import os
import shutil
import tempfile
import threading
import time
import uuid
from collections import deque
from collections.abc import Callable, Iterator, Sequence
from dataclasses import replace
from pathlib import Path
from typing import Any

from tradewise import format as fmt
from tradewise.errors import CaseError, ModelError
from tradewise.models import Outcome, stop_programs

__all__ = [
    "InProcess",
    "ProcessPool",
    "DaskCluster",
    "make_executor",
    "run_designs",
    "POOL_SLOWDOWN_TO_WARN",
]

#: A process pool is said to slow a model down when a design takes more than this many times the
#: model's median time per design of the run's wall time (the time it would take in this process).
#: Our own rule of thumb: at 2 the hand-off to a worker costs at least three times the model's work
#: with two workers, so the note is never a close call.
POOL_SLOWDOWN_TO_WARN = 2.0
#: Designs measured (in batches that did not start the pool) before the pool is judged.
_JUDGE_AFTER = 16
_log = logging.getLogger("tradewise")
#: On Dask, a model quicker than this (its median time a design in the last batch) gets tasks of
#: several designs, each task about this long: every task costs a round trip to the scheduler, a
#: gap in which its worker waits, which a 0.05 s model would otherwise pay once a design. Gaps
#: between one worker's designs on a local cluster of 2 (240 designs of 0.05 s, tasks queued on
#: the scheduler, 2 CPUs at load 3-6): tasks of about 0.1 s, median 8-12 ms, 1.8-3.1 s in all;
#: about 0.25 s, median 0.1 ms, 0.4-0.9 s in all (the last two designs a worker still go one a
#: task); holding two tasks a worker instead was no quicker.
_TASK_SECONDS = 0.25

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
        """Release the workers (nothing to do here)."""

    def __enter__(self):
        return self

    def __exit__(self, *exc: object) -> None:
        self.close()

    def __repr__(self) -> str:
        return f"{type(self).__name__}(workers={self.workers})"


def _watch_parent(parent: int) -> None:
    """Pool worker initializer: end this worker soon after the process ``parent`` that started it is gone.

    A run killed with SIGKILL cannot stop its pool; without this its workers
    would wait forever for work, and a command-model program they run would
    go on alone. The parent's id is handed over by the parent itself: read
    here, it would already be init's when the run was killed while the
    worker started, and the worker would then watch for ever.
    """

    def watch() -> None:
        while os.getppid() == parent:
            time.sleep(0.5)
        stop_programs()
        os._exit(1)

    threading.Thread(target=watch, name="tradewise-parent-watch", daemon=True).start()


def _marked_call(model: Model, design: dict[str, Any], mark: str) -> Outcome:
    """Run in a worker: leave a mark that the design was started, then evaluate it.

    When the pool breaks, the marks tell the designs that were being evaluated
    (one of them killed its worker) from those that were only queued.
    """
    with open(mark, "x"):
        pass
    return model(design)


_MARKS_PREFIX = "tradewise-pool-"


def _marks_folder() -> Path:
    """A new folder for the start marks of one batch, named after this process.

    A run killed with SIGKILL cannot remove its folder; the next pool to start
    removes the folders whose owner process is gone.
    """
    root = Path(tempfile.gettempdir())
    _remove_stranded_marks(root)
    return Path(tempfile.mkdtemp(prefix=f"{_MARKS_PREFIX}{os.getpid()}-", dir=root))


def _remove_stranded_marks(root: Path) -> None:
    if os.name != "posix":
        return  # no cheap, harmless test of whether a process id is alive
    for folder in root.glob(f"{_MARKS_PREFIX}*-*"):
        owner = folder.name[len(_MARKS_PREFIX) :].split("-", 1)[0]
        if not owner.isdigit() or not folder.is_dir() or folder.is_symlink():
            continue
        try:
            os.kill(int(owner), 0)
        except ProcessLookupError:
            shutil.rmtree(folder, ignore_errors=True)
        except (PermissionError, OverflowError):
            continue  # another user's live process, or not a process id at all


class ProcessPool(InProcess):
    """Evaluate designs in ``workers`` local processes; results arrive as they complete.

    When a worker process dies (a crash in a native library, ``os._exit``,
    the out-of-memory killer), the pool is restarted. Designs that had not
    started are sent again as if nothing happened. Designs that were being
    evaluated are suspects: each is tried once more, never beside another
    suspect, so a design that kills its worker a second time is recorded as
    failed while its innocent neighbours complete.

    Parameters
    ----------
    workers : int
        Number of worker processes, 1 or more.
    """

    name = "process pool"

    def __init__(self, workers: int) -> None:
        if not isinstance(workers, int) or isinstance(workers, bool) or workers < 1:
            raise CaseError(f"workers: got {workers!r}, allowed: a whole number, 1 or more")
        self.workers = workers
        self._pool: cf.ProcessPoolExecutor | None = None
        self.n_restarts = 0
        self._cost = _HandOff(workers)

    def _get_pool(self) -> cf.ProcessPoolExecutor:
        if self._pool is None:
            self._cost.started_pool = True
            self._pool = cf.ProcessPoolExecutor(
                max_workers=self.workers, initializer=_watch_parent, initargs=(os.getpid(),)
            )
        return self._pool

    def start(self) -> None:
        """Start the worker processes now rather than with the first batch."""
        self._get_pool().submit(int).result()

    def _drop_pool(self) -> None:
        if self._pool is not None:
            self._pool.shutdown(wait=True, cancel_futures=True)
            self._pool = None
            self.n_restarts += 1

    def run(self, model: Model, designs: Sequence[dict[str, Any]]) -> Iterator[tuple[int, Outcome]]:
        """Yield ``(position, outcome)`` for each design as it completes.

        Once per pool, when a model proves quicker than handing it a design, a
        notice on the "tradewise" logger says so (see :data:`POOL_SLOWDOWN_TO_WARN`).
        A batch model's shares are not judged: a share's hand-off is paid once
        for all its designs.
        """
        marks = _marks_folder()
        self._cost.begin()
        durations: list[float] = []
        try:
            for i, outcome in self._run(model, designs, marks):
                if isinstance(outcome, Outcome):  # a batch model's share (a list) is not judged
                    durations.append(outcome.duration)
                yield i, outcome
        finally:
            shutil.rmtree(marks, ignore_errors=True)
        self._cost.end(durations)

    def _run(
        self, model: Model, designs: Sequence[dict[str, Any]], marks: Path
    ) -> Iterator[tuple[int, Outcome]]:
        fresh: deque[int] = deque(range(len(designs)))
        suspects: deque[int] = deque()
        strikes = [0] * len(designs)
        attempt = [0] * len(designs)
        running: dict[cf.Future, int] = {}
        suspect: int | None = None  # the one suspect allowed to run at a time
        while fresh or suspects or running:
            pool = self._get_pool()
            while fresh:
                i = fresh.popleft()
                attempt[i] += 1
                running[
                    pool.submit(_marked_call, model, designs[i], str(marks / f"{i}.{attempt[i]}"))
                ] = i
            if suspects and suspect is None:
                i = suspect = suspects.popleft()
                attempt[i] += 1
                running[
                    pool.submit(_marked_call, model, designs[i], str(marks / f"{i}.{attempt[i]}"))
                ] = i
            done, _ = cf.wait(running, return_when=cf.FIRST_COMPLETED)
            lost: list[int] = []
            for future in done:
                i = running.pop(future)
                try:
                    outcome = future.result()
                except cf.process.BrokenProcessPool:
                    lost.append(i)
                    continue
                # Only a bug outside the model gets here; keep the run going.
                except Exception as exc:
                    outcome = Outcome(
                        "failed",
                        {},
                        f"the worker could not evaluate this design: {type(exc).__name__}: {exc}",
                    )
                if i == suspect:
                    suspect = None
                yield i, outcome
            if not lost:
                continue
            # The pool is broken: every future still running fails the same way; collect them all.
            cf.wait(running)
            for future, i in list(running.items()):
                try:
                    outcome = future.result()
                except cf.process.BrokenProcessPool:
                    lost.append(i)
                else:
                    yield i, outcome
            running.clear()
            suspect = None
            self._drop_pool()
            for i in sorted(lost):
                if not (marks / f"{i}.{attempt[i]}").exists():
                    # Never started, so not its fault; it goes back where it was.
                    (suspects.appendleft if strikes[i] else fresh.append)(i)
                    continue
                strikes[i] += 1
                if strikes[i] >= 2:
                    yield (
                        i,
                        Outcome(
                            "failed",
                            {},
                            "the worker process died while evaluating this design, twice "
                            "(a crash, os._exit or the out-of-memory killer)",
                        ),
                    )
                else:
                    suspects.append(i)

    def close(self) -> None:
        """Stop the worker processes."""
        if self._pool is not None:
            self._pool.shutdown(wait=True, cancel_futures=True)
            self._pool = None


class _HandOff:
    """What a process pool costs per design against the model's own time, told once when it loses.

    The wall time of a batch is taken from its start to its last result; a
    batch in which the pool (re)started is left out, since starting the worker
    processes is paid once and is not a cost per design.
    """

    def __init__(self, workers: int) -> None:
        self.workers = workers
        self.started_pool = False
        self.told = False
        self.wall = 0.0
        self.durations: list[float] = []
        self._start = 0.0

    def begin(self) -> None:
        self.started_pool = False
        self._start = time.perf_counter()

    def end(self, durations: list[float]) -> None:
        if self.told or not durations or self.started_pool:
            return
        self.wall += time.perf_counter() - self._start
        self.durations += durations
        if len(self.durations) < _JUDGE_AFTER:
            return
        n = len(self.durations)
        per_design = self.wall / n
        model = float(sorted(self.durations)[n // 2])
        if per_design > POOL_SLOWDOWN_TO_WARN * model:
            self.told = True
            # the worker time per design not spent in the model
            handing = max(0.0, (self.wall * self.workers - sum(self.durations)) / n)
            _log.warning(
                "Workers slow this model down: it takes %s a design (median) and handing each "
                "design to one of the %d worker processes costs about %s (the pool took %s of the "
                "run's time a design); it runs faster without --workers.",
                fmt.seconds(model),
                self.workers,
                fmt.seconds(handing),
                fmt.seconds(per_design),
            )
        self.wall, self.durations = 0.0, []


class DaskCluster(InProcess):
    """Evaluate designs on Dask: a new local cluster of ``workers``, or an existing scheduler.

    dask.distributed is imported only here, when a cluster is asked for.
    Each design is one task, submitted for a whole generation at once and
    collected as it completes. A worker that dies is restarted by its nanny
    and its task is sent again; on a local cluster started here a task that
    kills a worker a second time is recorded as failed (the scheduler's
    ``allowed-failures`` is set to 1, and each worker holds one task at a
    time so that only the guilty task is blamed). On an existing scheduler
    its own ``allowed-failures`` setting applies. The case folder must be at
    the same path on every worker machine.

    Starting a local cluster takes seconds (importing dask, then each worker
    process imports it again). With ``pool_while_starting`` the cluster is
    started in the background and the generations that begin before it is
    ready are evaluated on a local :class:`ProcessPool` of as many workers
    (the same machine, the same environment, and a worker that dies is
    survived there too); the first generation that begins once the cluster
    is up goes to it, and the pool is stopped.

    Parameters
    ----------
    workers : int, optional
        Worker processes of the local cluster (default: one per CPU).
    scheduler : str, optional
        Address of a running scheduler, e.g. ``tcp://10.0.0.5:8786``.
    pool_while_starting : bool
        Start a local cluster in the background, evaluating on a process
        pool meanwhile (:func:`make_executor` asks for this).
    """

    name = "dask"

    def __init__(
        self,
        workers: int | None = None,
        *,
        scheduler: str | None = None,
        pool_while_starting: bool = False,
    ) -> None:
        self._cluster = None
        self._client = None
        self._pool: ProcessPool | None = None
        self._starting: threading.Thread | None = None
        self._start_error: BaseException | None = None
        #: Designs evaluated on the cluster, and on the pool while the cluster started.
        self.on_cluster = 0
        self.on_pool = 0
        self._pace: tuple[Any, float] | None = None  # (model, its median time a design last batch)
        if scheduler:
            Client = _dask_client()
            try:
                self._client = Client(scheduler, timeout="20s")
            except (OSError, TimeoutError) as exc:
                raise ModelError(f"--scheduler {scheduler}: cannot connect ({exc})") from None
            self.workers = len(self._client.scheduler_info().get("workers", {})) or (workers or 1)
            self._ready_or_close()
            return
        if workers is not None and workers < 1:
            raise CaseError(f"workers: got {workers!r}, allowed: a whole number, 1 or more")
        n = workers or os.cpu_count() or 1
        self.workers = n
        if not pool_while_starting:
            self._ready_or_close(n)
            return
        import importlib.util

        if importlib.util.find_spec("distributed") is None:
            _dask_client()  # says what to install
        self._pool = ProcessPool(n)
        self._pool._cost.told = True  # its notice speaks of --workers; the pool is only a bridge
        # The pool's processes are forked now, before a thread of this process starts importing dask.
        self._pool.start()
        # Started with the first batch: by then the search has done its own importing (pymoo), which
        # would otherwise take turns with dask's on the interpreter lock and hold up that batch.
        self._starting = threading.Thread(
            target=self._start_behind, args=(n,), name="tradewise-dask-start", daemon=True
        )

    def _start_local(self, n: int) -> None:
        """Start a local cluster of ``n`` worker processes and prepare them (blocking)."""
        Client = _dask_client()
        import dask
        from dask.distributed import LocalCluster

        settings = {
            "distributed.scheduler.allowed-failures": 1,
            "distributed.scheduler.worker-saturation": 1.0,
        }
        with dask.config.set(settings):
            self._cluster = LocalCluster(
                n_workers=n, threads_per_worker=1, processes=True, dashboard_address=None
            )
        self._client = Client(self._cluster)
        self.workers = len(self._client.scheduler_info().get("workers", {})) or n
        self._prepare_workers()

    def _ready_or_close(self, n: int | None = None) -> None:
        """Start the local cluster of ``n`` workers (or only prepare the workers); close on failure."""
        try:
            if n is None:
                self._prepare_workers()
            else:
                self._start_local(n)
        except BaseException:
            self.close()
            raise

    def _start_behind(self, n: int) -> None:
        try:
            self._start_local(n)
        except BaseException as exc:  # told by the next run() or close()
            self._start_error = exc

    def _prepare_workers(self) -> None:
        """Import tradewise's model code on every worker now, as part of starting up.

        A worker's first design would otherwise pay for it, and a worker that
        cannot import tradewise (another environment on a remote machine) is
        reported here in one line instead of as failed designs.
        """
        try:
            self._client.run(_import_models)
        except Exception as exc:
            raise ModelError(
                f"Dask workers cannot run tradewise models ({type(exc).__name__}: {exc}); install tradewise "
                "in the workers' environment"
            ) from None

    def run(self, model: Model, designs: Sequence[dict[str, Any]]) -> Iterator[tuple[int, Outcome]]:
        """Yield ``(position, outcome)`` for each design as it completes."""
        if self._pool is not None:
            starting = self._starting
            if starting is not None and starting.ident is None:
                starting.start()  # and this batch goes to the pool, however quick the start
            elif starting is None or not starting.is_alive():
                starting = None
            if starting is not None:
                self.on_pool += len(designs)
                yield from self._paced(model, self._pool.run(model, designs))
                return
            self._pool.close()
            self._pool = None
            if self._start_error is not None:
                error, self._start_error = self._start_error, None
                self.close()
                raise error
        self.on_cluster += len(designs)
        yield from self._paced(model, self._run_on_cluster(model, designs))

    def _paced(self, model: Model, results: Iterator[tuple[int, Outcome]]):
        """Pass ``results`` on, keeping the model's median time a design for the next batch."""
        durations = []
        for i, outcome in results:
            if isinstance(outcome, Outcome) and outcome.status == "ok":
                durations.append(outcome.duration)
            yield i, outcome
        if durations and not getattr(model, "batch", False):
            self._pace = (model, sorted(durations)[len(durations) // 2])

    def _tasks(self, model: Model, n: int) -> list[list[int]]:
        """The positions of ``n`` designs grouped into the tasks of one batch.

        One design a task, unless the model (the same object as in the last
        batch) took less than half of :data:`_TASK_SECONDS` a design: then tasks of
        about that long, the last two designs a worker one a task so that the
        workers finish together.
        """
        singles = [[i] for i in range(n)]
        if self._pace is None or self._pace[0] is not model:
            return singles
        tail = 2 * self.workers
        size = min(
            int(_TASK_SECONDS / max(self._pace[1], 1e-6)),
            max(1, (n - tail) // self.workers),
        )
        if size < 2:
            return singles
        head = max(0, n - tail)
        return [list(range(a, min(a + size, head))) for a in range(0, head, size)] + [
            [i] for i in range(head, n)
        ]

    def _run_on_cluster(
        self, model: Model, designs: Sequence[dict[str, Any]]
    ) -> Iterator[tuple[int, Outcome]]:
        from dask.distributed import KilledWorker, as_completed

        tasks = self._tasks(model, len(designs))
        # One call for the whole generation: Dask then sees one large group of independent tasks and
        # queues them on the scheduler, handing each worker its next task only when it is free, so
        # a slow design never holds quick ones back behind it.
        keys = [f"tradewise-evaluate-{uuid.uuid4().hex}" for _ in tasks]
        if len(tasks) == len(designs):
            submitted = self._client.map(model, designs, key=keys)
        else:
            shares = [[designs[i] for i in task] for task in tasks]
            submitted = self._client.map(_evaluate_share, [model] * len(tasks), shares, key=keys)
        # A task of one design gives its outcome; a task of several (a share) their list.
        futures = {
            future: (task, len(tasks) < len(designs))
            for future, task in zip(submitted, tasks, strict=True)
        }
        tries = dict.fromkeys(range(len(designs)), 1)
        # Results are fetched as soon as each task finishes and the task is then released, so a
        # worker that dies later cannot take a finished result with it (Dask would compute it again).
        collector = as_completed(list(futures), with_results=True, raise_errors=False)
        try:
            for future, result in collector:
                task, shared = futures.pop(future)
                status = future.status
                del future
                if status == "finished":
                    for i, outcome in zip(task, result if shared else [result], strict=True):
                        yield i, outcome
                    continue
                error = result[1] if isinstance(result, tuple) else result
                if len(task) > 1:
                    # A share that failed is sent again a design a task, so that a design that kills
                    # its worker is told from its neighbours as when it was sent alone.
                    for i in task:
                        again = self._client.submit(model, designs[i], pure=False)
                        futures[again] = ([i], False)
                        collector.add(again)
                    continue
                (i,) = task
                if isinstance(error, KilledWorker):
                    yield (
                        i,
                        Outcome(
                            "failed",
                            {},
                            "the Dask worker died while evaluating this design, "
                            "each time it was tried (a crash, os._exit or running out of memory)",
                        ),
                    )
                # A lost connection, a cancelled task, an error outside the model: once more.
                elif tries[i] < 2:
                    tries[i] += 1
                    again = self._client.submit(model, designs[i], pure=False)
                    futures[again] = ([i], False)
                    collector.add(again)
                else:
                    yield (
                        i,
                        Outcome(
                            "failed",
                            {},
                            f"the Dask task failed twice: {type(error).__name__}: {error}",
                        ),
                    )
        finally:
            for future in futures:
                future.cancel()

    def close(self) -> None:
        """Leave the scheduler; stop the local cluster if this object started it."""
        if self._pool is not None:
            self._pool.close()
            self._pool = None
        if self._starting is not None:
            if self._starting.ident is not None:
                self._starting.join()  # a cluster half started cannot be stopped; let it come up
            self._starting = None
        if self._client is not None:
            self._client.close()
            self._client = None
        if self._cluster is not None:
            self._cluster.close()
            self._cluster = None


def _dask_client():
    """dask.distributed's Client class (ModelError naming the extra to install when it is missing)."""
    try:
        from dask.distributed import Client
    except ImportError:
        raise ModelError(
            "--dask/--scheduler: dask.distributed is not installed; install the cluster extra: "
            "pip install 'tradewise[cluster]'"
        ) from None
    return Client


def _evaluate_share(model: Model, designs: Sequence[dict[str, Any]]) -> list[Outcome]:
    """Run on a Dask worker: evaluate a few designs of a quick model, one after another."""
    return [model(design) for design in designs]


def _import_models() -> None:
    """Run on each Dask worker: load the modules that evaluating a design needs."""
    import tradewise.models  # noqa: F401


def run_designs(
    executor: InProcess, model: Model, designs: Sequence[dict[str, Any]]
) -> Iterator[tuple[int, Outcome]]:
    """Yield ``(position, outcome)`` for each design, whatever kind of model.

    A model that evaluates one design per call goes to ``executor.run`` as it
    is. A batch model (``model.batch``) gets the designs in one share per
    worker (one share in this process), each share one call; a failure the
    executor sees for a share (a worker that died twice, a lost task) is
    given to every design of that share.
    """
    if not getattr(model, "batch", False):
        yield from executor.run(model, designs)
        return
    n_shares = max(1, min(executor.workers, len(designs)))
    bounds = [round(k * len(designs) / n_shares) for k in range(n_shares + 1)]
    shares = [list(designs[a:b]) for a, b in zip(bounds, bounds[1:], strict=False)]
    for s, answer in executor.run(model, shares):
        first = bounds[s]
        if isinstance(answer, Outcome):
            for i in range(len(shares[s])):
                yield first + i, replace(answer)
            continue
        for i, outcome in enumerate(answer):
            yield first + i, outcome


def make_executor(
    workers: int | None = None, *, dask: bool = False, scheduler: str | None = None
) -> InProcess:
    """Pick the executor from the user's options (``--workers``, ``--dask``, ``--scheduler``).

    Examples
    --------
    >>> make_executor(None)
    InProcess(workers=1)
    """
    if scheduler or dask:
        return DaskCluster(workers, scheduler=scheduler, pool_while_starting=not scheduler)
    if workers and workers > 1:
        return ProcessPool(workers)
    return InProcess()
