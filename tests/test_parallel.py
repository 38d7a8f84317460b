"""The executor interface: same numbers for any worker count, checkpoints resume a sweep."""

from __future__ import annotations

import importlib
import json
from pathlib import Path

import numpy as np
import pytest
import run_fakes
from click.testing import CliRunner
from executor_fakes import Backwards

from uncertainty.analyses.sensitivity import sensitivity
from uncertainty.app.cli import main
from uncertainty.core.errors import QualityGateError
from uncertainty.core.parallel import ChunkedModel, InProcess, make_executor, task_seeds
from uncertainty.core.resources import studies_dir
from uncertainty.core.serialise import to_json
from uncertainty.study import load_study

# the module itself: the package attribute uncertainty.app.run is the API function
run_mod = importlib.import_module("uncertainty.app.run")
DEMO = studies_dir() / "demo.toml"


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


#: a worker's state set by _set_warm (read back by _read_warm in the same worker process)
_WARM: list[str] = []


def _set_warm() -> None:
    _WARM.append("warm")


def _read_warm(task: int, ss: np.random.SeedSequence) -> tuple[int, int, bool]:
    import os

    import dask

    return task, os.getpid(), len(_WARM) == 1 and not dask.config.get("distributed.worker.profile.enabled")


def test_in_process_warm_runs_nothing() -> None:
    InProcess().warm(_set_warm)
    assert _WARM == []


@pytest.mark.slow
def test_warm_runs_once_in_every_worker_before_its_tasks() -> None:
    """Every task, on whichever worker, finds the warm-up done once in its process, and the workers of a
    LocalCluster we start have dask's sampling profiler off."""
    with make_executor(workers=2) as two:
        two.warm(_set_warm)
        out = two.map(_read_warm, list(range(12)), seed=1)
    assert [o[0] for o in out] == list(range(12))
    assert all(o[2] for o in out)
    assert _WARM == []  # (not in this process)


# --------------------------------------------------------------------------------------------
# Row chunks (sensitivity model runs)
# --------------------------------------------------------------------------------------------

def _rowwise(z: np.ndarray) -> np.ndarray:
    return z[:, 0] * 2.0 + z[:, 1] ** 2  # any row-wise function serves


def test_chunked_model_splits_rows_in_fixed_chunks_and_keeps_their_order() -> None:
    z = np.random.default_rng(5).standard_normal((1000, 2))
    seen: list[int] = []

    def model(chunk: np.ndarray) -> np.ndarray:
        seen.append(chunk.shape[0])
        return _rowwise(chunk)

    out = ChunkedModel(model, InProcess(), rows=300)(z)
    assert seen == [300, 300, 300, 100]  # the split is fixed by the row count, not by any worker count
    assert np.array_equal(out, _rowwise(z))


def test_sensitivity_through_an_executor_gives_the_default_numbers() -> None:
    study = load_study(DEMO)
    kw = {"method": "shapley", "samples": 128, "seed": 5}
    ref = to_json(sensitivity(study, **kw).to_dict())
    assert to_json(sensitivity(study, executor=InProcess(), **kw).to_dict()) == ref


@pytest.mark.slow
def test_sensitivity_on_one_and_two_workers_gives_the_in_process_numbers() -> None:
    study = load_study(DEMO)
    kw = {"method": "shapley", "samples": 128, "seed": 5}
    ref = to_json(sensitivity(study, **kw).to_dict())
    for n in (1, 2):
        with make_executor(workers=n) as ex:
            assert to_json(sensitivity(study, executor=ex, **kw).to_dict()) == ref


# --------------------------------------------------------------------------------------------
# `fluidshift run` over several studies (stand-in analyses, tests/run_fakes.py)
# --------------------------------------------------------------------------------------------

@pytest.fixture
def fakes(monkeypatch):
    monkeypatch.setattr(run_mod, "LOADER", run_fakes.load_fake)
    monkeypatch.setattr(run_mod, "ANALYSES", {**run_mod.ANALYSES, **run_fakes.FAKES})
    run_fakes.CALLS.clear()


def _studies(folder: Path, *names: str) -> list[Path]:
    paths = []
    for name in names:
        p = folder / f"{name}.toml"
        p.write_text(run_fakes.STUDY_TEXT)
        paths.append(p)
    return paths


def _numbers(doc: dict) -> dict:
    return {n: r["result"] for n, r in doc["sections"].items()}


def test_run_over_several_studies_gives_the_one_by_one_numbers(fakes, tmp_path) -> None:
    a, b = _studies(tmp_path, "a", "b")
    res = CliRunner().invoke(main, ["run", str(a), str(b), "--out", str(tmp_path / "many"), "--json", "--seed", "4"])
    assert res.exit_code == 0, res.output
    runs = json.loads(res.stdout)["runs"]
    assert [Path(r["study"]["path"]).name for r in runs] == ["a.toml", "b.toml"]
    assert (tmp_path / "many" / "a" / "report.html").is_file()
    alone = run_mod.run(b, tmp_path / "alone", progress=False, seed=4)  # the second study, run on its own
    assert _numbers(runs[1]) == _numbers(alone.doc) and _numbers(runs[0]) == _numbers(runs[1])


def test_run_over_several_studies_checks_every_file_first(fakes, tmp_path) -> None:
    a, = _studies(tmp_path, "a")
    bad = tmp_path / "bad.toml"
    bad.write_text("[study\n")
    res = CliRunner().invoke(main, ["run", str(a), str(bad), "--out", str(tmp_path / "many")])
    assert res.exit_code == 2 and "Traceback" not in res.output
    assert len(res.stderr.strip().splitlines()) == 1
    assert not (tmp_path / "many").exists() and run_fakes.CALLS == []  # nothing ran, nothing written


def test_run_over_studies_with_the_same_name_is_refused(fakes, tmp_path) -> None:
    (tmp_path / "x").mkdir()
    a, = _studies(tmp_path, "a")
    b, = _studies(tmp_path / "x", "a")
    res = CliRunner().invoke(main, ["run", str(a), str(b), "--out", str(tmp_path / "many")])
    assert res.exit_code == 2 and "same name" in res.stderr


def test_a_failing_study_keeps_the_others_and_sets_the_exit_status(fakes, tmp_path) -> None:
    a, b = _studies(tmp_path, "a", "b")
    b.write_text(run_fakes.STUDY_TEXT + "fail_gate = true\n")
    res = CliRunner().invoke(main, ["run", str(a), str(b), "--out", str(tmp_path / "many")])
    assert res.exit_code == 3 and "b.toml" in res.stderr
    assert (tmp_path / "many" / "a" / "report.html").is_file()
    assert (tmp_path / "many" / "b" / "report.html").is_file()


# --------------------------------------------------------------------------------------------
# propagate, rank and schedule: their tasks carry no state from one to the next
# --------------------------------------------------------------------------------------------

@pytest.mark.parametrize("method", ["qmc", "mc", "lhs"])
def test_replicate_stream_continues_where_the_earlier_takes_stopped(method) -> None:
    from scipy.stats import qmc

    from uncertainty.analyses.propagate import replicate_points
    from uncertainty.analyses.sampling import open_cube

    ss = task_seeds(4, 3)[2]
    parts = [replicate_points(3, method, ss, before, m) for before, m in (((), 8), ((8,), 8), ((8, 8), 16))]
    rng = np.random.default_rng(ss)
    if method == "qmc":  # one scrambled Sobol' sequence of 32 points (scipy), split 8 + 8 + 16
        whole = [qmc.Sobol(3, scramble=True, rng=rng).random(32)]
    elif method == "mc":
        whole = [rng.random((32, 3))]
    else:  # a fresh Latin hypercube per take, from the one stream
        whole = [qmc.LatinHypercube(3, rng=rng).random(m) for m in (8, 8, 16)]
    assert np.array_equal(np.vstack(parts), open_cube(np.vstack(whole)))


def test_propagate_chunks_depend_on_the_sample_size_only() -> None:
    from uncertainty.analyses.propagate import TASK_ROWS, replicate_chunks

    assert replicate_chunks(16, 256) == [range(16)]  # a small sample: one task
    assert replicate_chunks(16, TASK_ROWS // 4) == [range(i, i + 4) for i in range(0, 16, 4)]
    assert replicate_chunks(17, TASK_ROWS) == [range(i, i + 1) for i in range(17)]


def test_propagate_gives_the_same_numbers_whatever_order_its_chunks_run_in(monkeypatch) -> None:
    from uncertainty.analyses import propagate as prop
    from uncertainty.analyses.propagate import propagate

    monkeypatch.setattr(prop, "TASK_ROWS", 512)  # 128, then 256 draws a replicate: 4, then 2 replicates a task
    study = load_study(DEMO)
    kw = {"samples": 2048, "seed": 5, "tol": 1e-9, "max_samples": 4096}  # one doubling, then the gate stops it
    docs = []
    for ex in (None, Backwards()):
        with pytest.raises(QualityGateError) as exc:
            propagate(study, executor=ex, **kw)
        docs.append(to_json(exc.value.result.to_dict()))
    assert docs[0] == docs[1]


def test_rank_gives_the_same_numbers_whatever_order_its_candidates_run_in() -> None:
    from uncertainty.analyses.rank import Reading, rank_draws

    rng = np.random.default_rng(0)
    th = rng.standard_normal((600, 3))
    vals, y = {"a": th[:, 0], "b": th[:, 1], "c": th[:, 2]}, th @ np.array([2.0, 1.0, 0.5])
    cands = [Reading("A", "a", sd=1.0), Reading("B", "b", sd=0.2), Reading("C", "c", sd=3.0)]  # C: importance
    ref = rank_draws(vals, y, cands, seed=1)
    assert to_json(rank_draws(vals, y, cands, seed=1, executor=Backwards())) == to_json(ref)
    # a candidate's figures depend on its own stream only, not on the candidates before it
    alone = rank_draws(vals, y, cands[:1], seed=1)["candidates"][0]
    assert alone == next(r for r in ref["candidates"] if r["name"] == "A")


def test_schedule_search_in_batches_takes_the_moves_of_the_sequential_search() -> None:
    import tomllib

    from uncertainty.analyses import schedule as sch
    from uncertainty.study import ScheduleSection, Study

    forearm = studies_dir() / "forearm_volunteers.toml"
    model = sch.cuff_model(Study.from_dict(tomllib.loads(forearm.read_text(encoding="utf-8")), path=forearm),
                           ScheduleSection(linearisation_draws=2, step_min=2.0), seed=3)
    idx = tuple(model.names.index(sch.TARGETS[t]) for t in ("Kf", "Pvi"))
    results = []
    for ex in (None, Backwards(workers=3), Backwards(workers=7)):
        prob = sch.Problem(model, (10.0, 20.0, 35.0, 50.0, 60.0), 3, 0.5 * np.arange(1, 13), 3, 0.01,
                           sch.Criterion("A", idx, model.prior_cov))
        start = [10.0, 10.0, 10.0]
        res = sch.optimise(prob, start, sch.equal_times(prob.times, 3), executor=ex)
        results.append((res, prob.evaluations))
    assert results[0][0][0] != start  # the search moved (moves were accepted part-way through batches)
    assert results[1] == results[0] and results[2] == results[0]


def test_progress_stays_silent_when_stderr_is_not_a_terminal(capsys: pytest.CaptureFixture[str]) -> None:
    """A live bar redirected to a file or pipe would leave only blank lines there (common practice: no
    progress bars in logs)."""
    out = InProcess(progress=True).map(_draw, [1, 2, 3], seed=1, label="draws")
    assert len(out) == 3
    assert capsys.readouterr().err == ""
