"""A stand-in for a cluster of workers, for the identical-numbers tests of the executor's users."""

from __future__ import annotations

from uncertainty.core.parallel import InProcess, task_seeds


class Backwards(InProcess):
    """A stand-in for a cluster of ``workers``: runs the tasks last first (as workers may finish them),
    every task on a copy of the task function and of the task pickled as dask sends them (cloudpickle),
    results in task order."""

    def __init__(self, workers: int = 3) -> None:
        super().__init__()
        self.workers = workers

    def map(self, fn, tasks, *, seed, label="tasks"):
        import cloudpickle

        tasks = list(tasks)
        seeds = task_seeds(seed, len(tasks))
        out = {i: cloudpickle.loads(cloudpickle.dumps(fn))(*cloudpickle.loads(cloudpickle.dumps((tasks[i], seeds[i]))))
               for i in reversed(range(len(tasks)))}
        return [out[i] for i in range(len(tasks))]
