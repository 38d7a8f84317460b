"""The executor interface: same numbers for any worker count, checkpoints resume a sweep."""

from __future__ import annotations

import numpy as np
import pytest

from uncertainty.core.parallel import InProcess, make_executor, task_seeds


def _draw(task: int, ss: np.random.SeedSequence) -> float:
    rng = np.random.default_rng(ss)
    return float(task + rng.standard_normal())


def test_task_seeds_depend_on_index_only() -> None:
    a = task_seeds(7, 5)
    b = task_seeds(7, 9)
    # child i of SeedSequence(seed).spawn is fixed by (seed, i), whatever the number of tasks
    assert [s.generate_state(2).tolist() for s in a] == [s.generate_state(2).tolist() for s in b[:5]]
    assert a[0].generate_state(2).tolist() != a[1].generate_state(2).tolist()


def test_in_process_results_in_task_order() -> None:
    out = InProcess().map(_draw, [0, 10, 20], seed=3)
    assert out[1] - 10 == pytest.approx(np.random.default_rng(task_seeds(3, 3)[1]).standard_normal())


_calls: list[int] = []


def _counting(task: int, ss: np.random.SeedSequence) -> float:
    _calls.append(task)
    if task == 3 and len(_calls) < 10:
        raise KeyboardInterrupt  # an interruption half-way through the sweep
    return _draw(task, ss)


def test_checkpoint_resumes_after_interruption(tmp_path) -> None:
    _calls.clear()
    ex = InProcess(checkpoint_dir=tmp_path)
    with pytest.raises(KeyboardInterrupt):
        ex.map(_counting, [0, 1, 2, 3, 4], seed=11, label="sweep")
    assert _calls == [0, 1, 2, 3]
    _calls.extend([99] * 10)  # let task 3 succeed now
    out = ex.map(_counting, [0, 1, 2, 3, 4], seed=11, label="sweep")
    assert _calls[-2:] == [3, 4]  # tasks 0..2 were not run again
    assert out == InProcess().map(_draw, [0, 1, 2, 3, 4], seed=11)
    # a different seed is a different sweep: nothing reused
    _calls.clear()
    ex.map(_counting, [0, 1], seed=12, label="sweep")
    assert _calls == [0, 1]


@pytest.mark.slow
def test_one_and_two_dask_workers_give_identical_results() -> None:
    tasks = list(range(8))
    ref = InProcess().map(_draw, tasks, seed=2024)
    with make_executor(workers=1) as one:
        r1 = one.map(_draw, tasks, seed=2024)
    with make_executor(workers=2) as two:
        assert two.workers == 2
        r2 = two.map(_draw, tasks, seed=2024)
    assert r1 == ref
    assert r2 == ref
