"""One small executor interface for independent tasks (design points, simulated trials, replicates).

``executor.map(fn, tasks, seed=...)`` calls ``fn(task, seedseq)`` for every task and returns the
results in task order. ``seedseq`` is child ``i`` of ``numpy.random.SeedSequence(seed).spawn(len(tasks))``,
so a task's random stream depends only on the study seed and the task's index: the results are the
same in-process, on 1 worker or on many.

- :class:`InProcess` (default) runs the tasks one after another in this process.
- :class:`DaskExecutor` sends them to a ``dask.distributed`` cluster: ``workers=N`` starts a
  LocalCluster of N processes with one thread each (one core per task); ``scheduler=ADDRESS`` joins
  an existing cluster. dask is imported only when this executor is made.

``executor.warm(fn)`` starts ``fn()`` once on every worker in the background (in-process: nothing), so
that a one-off set-up of the workers (a model compile) overlaps with what this process does before
:meth:`~InProcess.map`; the set-up must keep what it makes in the worker process for the tasks to find.

Both show progress (rich, on stderr) when asked: tasks done of all and time left; and can
checkpoint finished tasks to a folder, so that an interrupted sweep resumes where it stopped (a
checkpoint is keyed by the label, the seed, the tasks and the task function's ``checkpoint_key``
attribute when it has one, a string naming what the function computes, e.g. a digest of the study
and its section; so a changed sweep never reuses stale results).

A worker lost mid-run (its process killed, its machine gone) is handled by dask: every task is
submitted with ``retries`` (default :data:`RETRIES`), so the scheduler runs it again on another worker;
as a task's random stream comes from its index, a retried task gives the same result. Ctrl-C cancels
the outstanding tasks and closes the client (and the local cluster) without worker tracebacks.

:class:`ChunkedModel` evaluates a deterministic row-wise model ``model(z) -> y`` on a large array in
row chunks of a fixed size (:data:`CHUNK_ROWS`, never derived from the number of workers), one chunk
per task, so the numbers are those of one call on the whole array.
"""

from __future__ import annotations

import contextlib
import hashlib
import os
import pickle
import sys
from collections.abc import Callable, Iterator, Sequence
from pathlib import Path
from typing import Any

import numpy as np

from uncertainty.core.errors import InputError

TaskFn = Callable[[Any, np.random.SeedSequence], Any]

#: how often dask runs a task again after its worker failed or was lost (``retries=`` of ``submit``)
RETRIES = 2
#: rows of one task of :class:`ChunkedModel` (fixed: the split never depends on the worker count)
CHUNK_ROWS = 4096
#: dask settings of a LocalCluster we start: no sampling profiler in the workers (it walks the task thread's
#: stack every 10 ms, holding the GIL the task needs; its flame graphs are not used)
WORKER_CONFIG = {"distributed.worker.profile.enabled": False}


def task_seeds(seed: int, n: int) -> list[np.random.SeedSequence]:
    """Independent seed sequences for ``n`` tasks: child ``i`` of ``SeedSequence(seed)`` (no unit)."""
    return np.random.SeedSequence(int(seed)).spawn(int(n))


class _Checkpoint:
    """Finished task results kept in one pickle file, rewritten atomically after each task."""

    def __init__(self, folder: str | os.PathLike | None, label: str, seed: int, tasks: Sequence,
                 fn: TaskFn | None = None) -> None:
        self.path: Path | None = None
        self.done: dict[int, Any] = {}
        if folder is None:
            return
        key = getattr(fn, "checkpoint_key", None)  # read only when checkpointing
        digest = hashlib.sha256(pickle.dumps((label, int(seed), list(tasks), key))).hexdigest()[:16]
        folder = Path(folder)
        folder.mkdir(parents=True, exist_ok=True)
        safe = "".join(c if c.isalnum() or c in "-_" else "_" for c in label) or "tasks"
        self.path = folder / f"{safe}-{digest}.pkl"
        if self.path.exists():
            try:
                with open(self.path, "rb") as fh:
                    self.done = pickle.load(fh)
            except (OSError, pickle.UnpicklingError, EOFError):
                self.done = {}

    def add(self, index: int, result: Any) -> None:
        self.done[index] = result
        if self.path is None:
            return
        tmp = self.path.with_suffix(".tmp")
        with open(tmp, "wb") as fh:
            pickle.dump(self.done, fh)
        os.replace(tmp, self.path)


class _Progress:
    """A rich progress bar on stderr (tasks done of all, time left), or nothing.

    Nothing unless stderr is a terminal: redirected to a file or a pipe, a live bar leaves only blank lines.
    """

    def __init__(self, show: bool, label: str, total: int, already: int) -> None:
        self.bar = None
        if show and total > 0 and sys.stderr.isatty():
            from rich.console import Console
            from rich.progress import BarColumn, MofNCompleteColumn, Progress, TextColumn, TimeRemainingColumn

            self.bar = Progress(TextColumn("{task.description}"), BarColumn(), MofNCompleteColumn(),
                                TimeRemainingColumn(),
                                transient=True, console=Console(stderr=True))
            self.task = self.bar.add_task(label or "tasks", total=total, completed=already)
            self.bar.start()

    def step(self) -> None:
        if self.bar is not None:
            self.bar.advance(self.task)

    def close(self) -> None:
        if self.bar is not None:
            self.bar.stop()


class InProcess:
    """Run tasks in this process, in order."""

    workers = 1

    def __init__(self, *, checkpoint_dir: str | os.PathLike | None = None, progress: bool = False) -> None:
        self.checkpoint_dir = checkpoint_dir
        self.progress = progress

    def warm(self, fn: Callable[[], Any]) -> None:
        """Nothing in-process: a task's set-up runs with the first task, in this process alike."""

    def map(self, fn: TaskFn, tasks: Sequence, *, seed: int, label: str = "tasks") -> list:
        """Return ``[fn(task_i, seedseq_i)]`` in task order (seeds from :func:`task_seeds`)."""
        tasks = list(tasks)
        seeds = task_seeds(seed, len(tasks))
        ckpt = _Checkpoint(self.checkpoint_dir, label, seed, tasks, fn)
        bar = _Progress(self.progress, label, len(tasks), len(ckpt.done))
        try:
            for i, (task, ss) in enumerate(zip(tasks, seeds, strict=True)):
                if i not in ckpt.done:
                    ckpt.add(i, fn(task, ss))
                    bar.step()
        finally:
            bar.close()
        return [ckpt.done[i] for i in range(len(tasks))]

    def close(self) -> None:
        """Nothing to release."""

    def __enter__(self) -> InProcess:
        return self

    def __exit__(self, *exc: object) -> None:
        self.close()


class DaskExecutor(InProcess):
    """Run tasks on a dask.distributed cluster (a LocalCluster of ``workers`` processes, or ``scheduler``).

    Every task is submitted with ``retries`` (a task whose worker died runs again elsewhere, with the
    same seed, so the same result). A LocalCluster started here has dask's sampling profiler of the
    workers turned off (:data:`WORKER_CONFIG`): it reads the task thread's stack every 10 ms under the GIL,
    a cost on every task that tells nothing we use.
    """

    def __init__(self, workers: int | None = None, scheduler: str | None = None, *,
                 checkpoint_dir: str | os.PathLike | None = None, progress: bool = False,
                 retries: int = RETRIES) -> None:
        super().__init__(checkpoint_dir=checkpoint_dir, progress=progress)
        try:
            from dask.distributed import Client, LocalCluster
        except ImportError as exc:  # pragma: no cover - dask is installed in our environment
            raise InputError("dask.distributed is not installed (pip install 'fluidshift[cluster]')",
                             key="--workers", value=workers) from exc
        import logging

        self._logging: int = logging.root.manager.disable  # the level close() restores
        self.retries = int(retries)
        self._sent: dict[int, tuple[Any, Any]] = {}  # id(task function) -> (it, its scattered future)
        self._warming: list[Any] = []  # futures of warm() (held so that they run to their end)
        self.cluster = None
        self.client: Any = None
        if scheduler:
            try:
                self.client = Client(scheduler, timeout="20s")
            except (OSError, TimeoutError, ValueError) as exc:
                raise InputError(f"cannot reach the dask scheduler ({type(exc).__name__})",
                                 key="--scheduler", value=scheduler) from None
        else:
            n = int(workers or 1)
            if n < 1:
                raise InputError("need at least one worker", key="--workers", value=workers)
            import logging

            import dask

            # (Ctrl-C during these few seconds of start-up is ignored; the nannies pass the config on)
            with _children_ignore_sigint(), dask.config.set(WORKER_CONFIG):
                self.cluster = LocalCluster(n_workers=n, threads_per_worker=1, processes=True,
                                            dashboard_address=None, silence_logs=logging.ERROR)
            self.client = Client(self.cluster)
        self.workers = len(self.client.scheduler_info().get("workers", {})) or int(workers or 1)

    def _shared(self, fn: Any) -> Any:
        """The future of ``fn`` scattered to every worker (once per function: a task function often holds a
        study, sent to each worker once, not with every task; kept, with ``fn`` so that its id stays unique,
        until close())."""
        if id(fn) not in self._sent:
            self._sent[id(fn)] = (fn, self.client.scatter(fn, broadcast=True, hash=False))
        return self._sent[id(fn)][1]

    def warm(self, fn: Callable[[], Any]) -> None:
        """Start ``fn()`` on every worker of the cluster now, one task per worker, and return at once.

        For a set-up each worker process would otherwise do in its first task (a model compile of some
        seconds), started while this process still prepares the tasks. ``fn`` keeps what it makes in the
        worker process (a module-level cache) for the tasks to find; an error in it is held back (the
        first task that needs the set-up meets it again and reports it). Workers that join later do the
        set-up in their first task.
        """
        shared = self._shared(fn)
        for address in self.client.scheduler_info(n_workers=-1).get("workers", {}):
            self._warming.append(self.client.submit(_warm, shared, workers=[address], allow_other_workers=False,
                                                    pure=False))

    def map(self, fn: TaskFn, tasks: Sequence, *, seed: int, label: str = "tasks") -> list:
        """Return ``[fn(task_i, seedseq_i)]`` in task order, computed on the cluster.

        A task that raises on its worker raises here (after its retries when the worker was lost);
        the other tasks are cancelled.
        """
        from dask.distributed import as_completed

        tasks = list(tasks)
        seeds = task_seeds(seed, len(tasks))
        ckpt = _Checkpoint(self.checkpoint_dir, label, seed, tasks, fn)
        todo = [i for i in range(len(tasks)) if i not in ckpt.done]
        bar = _Progress(self.progress, label, len(tasks), len(ckpt.done))
        futures: dict[Any, int] = {}
        try:
            if todo:  # the task function goes to every worker once, not with every task
                shared = self._shared(fn)
                futures = {self.client.submit(_apply, shared, tasks[i], seeds[i], pure=False,
                                              retries=self.retries): i for i in todo}
            for fut in as_completed(list(futures)):
                ckpt.add(futures[fut], fut.result())
                bar.step()
        except BaseException:
            import logging

            # interrupted (Ctrl-C) or failed: the run ends here; the libraries' messages about the
            # cancelled tasks are held back until close() has shut the cluster down
            logging.disable(logging.CRITICAL)
            with contextlib.suppress(Exception):
                if futures or self._warming:
                    self.client.cancel(list(futures) + self._warming)
            raise
        finally:
            bar.close()
        return [ckpt.done[i] for i in range(len(tasks))]

    def close(self) -> None:
        """Close the client and, when we started it, the local cluster, quietly (no worker tracebacks
        on Ctrl-C: the libraries' log messages are held back while they shut down)."""
        import logging

        previous = self._logging
        logging.disable(logging.CRITICAL)
        self._sent.clear()
        self._warming.clear()
        try:
            if self.client is not None:
                self.client.close()
            if self.cluster is not None:
                self.cluster.close()
        except Exception:  # noqa: BLE001 - a cluster already gone is closed enough
            pass
        finally:
            logging.disable(previous)


@contextlib.contextmanager
def _children_ignore_sigint() -> Iterator[None]:
    """Worker processes started inside inherit an ignored SIGINT: Ctrl-C reaches only this process,
    which cancels the tasks and closes the cluster (no traceback from every worker). Outside the
    main thread, where signals cannot be set, nothing changes."""
    import signal

    try:
        previous = signal.signal(signal.SIGINT, signal.SIG_IGN)
    except ValueError:
        yield
        return
    try:
        yield
    finally:
        signal.signal(signal.SIGINT, previous)


def _warm(fn: Callable[[], Any]) -> None:
    """``fn()`` on a worker, any error held back (:meth:`DaskExecutor.warm`)."""
    try:
        fn()
    except Exception:  # noqa: BLE001 - the first task that needs the set-up raises it again, with its message
        pass


def _apply(fn: TaskFn, task: Any, ss: np.random.SeedSequence) -> Any:
    """``fn(task, ss)`` on a worker (``fn`` arrives scattered once per worker)."""
    return fn(task, ss)


class ChunkedModel:
    """A row-wise model ``model(z) -> y`` evaluated through an executor, one task per row chunk.

    ``z`` (rows, columns) is split into consecutive chunks of ``rows`` rows (fixed, whatever the number
    of workers); the outputs are concatenated in row order, so the numbers equal one call of ``model``
    on the whole array for a model whose rows do not interact. Picklable when ``model`` is.
    """

    def __init__(self, model: Callable[[np.ndarray], np.ndarray], executor: InProcess, *,
                 rows: int = CHUNK_ROWS, label: str = "model runs") -> None:
        self.model, self.executor, self.rows, self.label = model, executor, int(rows), label
        self.task = _Rows(model)  # one task function for every call (sent to the workers once)

    def __call__(self, z: np.ndarray) -> np.ndarray:
        """The model's output (n,) on the rows of ``z`` (n, k), evaluated chunk by chunk."""
        z = np.asarray(z)
        if z.shape[0] <= self.rows:
            parts = self.executor.map(self.task, [z], seed=0, label=self.label)
        else:
            chunks = [z[i:i + self.rows] for i in range(0, z.shape[0], self.rows)]
            parts = self.executor.map(self.task, chunks, seed=0, label=self.label)
        return np.concatenate([np.asarray(p, dtype=float) for p in parts])


class _Rows:
    """Task function of :class:`ChunkedModel`: the model on one chunk (the seed is not used)."""

    def __init__(self, model: Callable[[np.ndarray], np.ndarray]) -> None:
        self.model = model

    def __call__(self, chunk: np.ndarray, ss: np.random.SeedSequence) -> np.ndarray:
        return np.asarray(self.model(chunk), dtype=float)


def make_executor(workers: int | None = None, scheduler: str | None = None, *,
                  checkpoint_dir: str | os.PathLike | None = None, progress: bool = False) -> InProcess:
    """In-process when neither ``workers`` nor ``scheduler`` is given, else a :class:`DaskExecutor`.

    Parameters
    ----------
    workers : int or None
        Number of single-threaded worker processes of a new LocalCluster.
    scheduler : str or None
        Address (``tcp://host:port``) of a running scheduler to join.
    checkpoint_dir : path or None
        Folder for finished tasks (an interrupted sweep resumes).
    progress : bool
        Show a progress bar on stderr.

    Returns
    -------
    InProcess
        The executor (a :class:`DaskExecutor` for a cluster); use it as a context manager.

    Raises
    ------
    InputError
        Fewer than one worker, or a scheduler that cannot be reached (exit 2).
    """
    if workers is not None and int(workers) < 1:
        raise InputError("need at least one worker", key="--workers", value=workers)
    if scheduler or workers is not None:
        return DaskExecutor(workers, scheduler, checkpoint_dir=checkpoint_dir, progress=progress)
    return InProcess(checkpoint_dir=checkpoint_dir, progress=progress)
