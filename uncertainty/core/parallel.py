"""One small executor interface for independent tasks (design points, simulated trials, replicates).

``executor.map(fn, tasks, seed=...)`` calls ``fn(task, seedseq)`` for every task and returns the
results in task order. ``seedseq`` is child ``i`` of ``numpy.random.SeedSequence(seed).spawn(len(tasks))``,
so a task's random stream depends only on the study seed and the task's index: the results are the
same in-process, on 1 worker or on many.

- :class:`InProcess` (default) runs the tasks one after another in this process.
- :class:`DaskExecutor` sends them to a ``dask.distributed`` cluster: ``workers=N`` starts a
  LocalCluster of N processes with one thread each (one core per task); ``scheduler=ADDRESS`` joins
  an existing cluster. dask is imported only when this executor is made.

Both show progress (rich) when asked and can checkpoint finished tasks to a folder, so that an
interrupted sweep resumes where it stopped (a checkpoint is keyed by the label, the seed, the
tasks and the task function's ``checkpoint_key`` attribute when it has one, a string naming what
the function computes, e.g. a digest of the study and its section; so a changed sweep never reuses
stale results).
"""

from __future__ import annotations

import hashlib
import os
import pickle
from collections.abc import Callable, Sequence
from pathlib import Path
from typing import Any

import numpy as np

from uncertainty.core.errors import InputError

TaskFn = Callable[[Any, np.random.SeedSequence], Any]


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
    """A rich progress bar, or nothing."""

    def __init__(self, show: bool, label: str, total: int, already: int) -> None:
        self.bar = None
        if show and total > 0:
            from rich.progress import Progress

            self.bar = Progress(transient=True)
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
    """Run tasks on a dask.distributed cluster (a LocalCluster of ``workers`` processes, or ``scheduler``)."""

    def __init__(self, workers: int | None = None, scheduler: str | None = None, *,
                 checkpoint_dir: str | os.PathLike | None = None, progress: bool = False) -> None:
        super().__init__(checkpoint_dir=checkpoint_dir, progress=progress)
        try:
            from dask.distributed import Client, LocalCluster
        except ImportError as exc:  # pragma: no cover - dask is installed in our environment
            raise InputError("dask.distributed is not installed (pip install 'fluidshift[cluster]')",
                             key="--workers", value=workers) from exc
        self.cluster = None
        if scheduler:
            self.client = Client(scheduler)
        else:
            n = int(workers or 1)
            if n < 1:
                raise InputError("need at least one worker", key="--workers", value=workers)
            self.cluster = LocalCluster(n_workers=n, threads_per_worker=1, processes=True,
                                        dashboard_address=None)
            self.client = Client(self.cluster)
        self.workers = len(self.client.scheduler_info().get("workers", {})) or int(workers or 1)

    def map(self, fn: TaskFn, tasks: Sequence, *, seed: int, label: str = "tasks") -> list:
        """Return ``[fn(task_i, seedseq_i)]`` in task order, computed on the cluster."""
        from dask.distributed import as_completed

        tasks = list(tasks)
        seeds = task_seeds(seed, len(tasks))
        ckpt = _Checkpoint(self.checkpoint_dir, label, seed, tasks, fn)
        todo = [i for i in range(len(tasks)) if i not in ckpt.done]
        bar = _Progress(self.progress, label, len(tasks), len(ckpt.done))
        try:
            futures = {self.client.submit(fn, tasks[i], seeds[i], pure=False): i for i in todo}
            for fut in as_completed(list(futures)):
                ckpt.add(futures[fut], fut.result())
                bar.step()
        finally:
            bar.close()
        return [ckpt.done[i] for i in range(len(tasks))]

    def close(self) -> None:
        """Close the client and, when we started it, the local cluster."""
        self.client.close()
        if self.cluster is not None:
            self.cluster.close()


def make_executor(workers: int | None = None, scheduler: str | None = None, *,
                  checkpoint_dir: str | os.PathLike | None = None, progress: bool = False) -> InProcess:
    """In-process when neither ``workers`` nor ``scheduler`` is given, else a :class:`DaskExecutor`.

    ``workers``: number of single-threaded worker processes of a new LocalCluster;
    ``scheduler``: address (``tcp://host:port``) of a running scheduler to join.
    """
    if workers is not None and int(workers) < 1:
        raise InputError("need at least one worker", key="--workers", value=workers)
    if scheduler or workers is not None:
        return DaskExecutor(workers, scheduler, checkpoint_dir=checkpoint_dir, progress=progress)
    return InProcess(checkpoint_dir=checkpoint_dir, progress=progress)
