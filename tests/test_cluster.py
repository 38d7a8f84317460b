"""A real dask cluster: a scheduler and two workers started as separate processes on 127.0.0.1 (the
`dask scheduler` / `dask worker` commands of the cluster extra); study sections sent to it with
`--scheduler` give the in-process numbers. The processes are always shut down, and every wait has
a time limit, so a hung cluster fails the test instead of hanging CI.
"""

from __future__ import annotations

import json
import os
import shutil
import subprocess
import sys
import threading
import time
from collections.abc import Iterator
from pathlib import Path

import pytest
from click.testing import CliRunner

from uncertainty.app.cli import main
from uncertainty.app.run import run

pytestmark = pytest.mark.slow

ROOT = Path(__file__).resolve().parents[1]
LIMIT = 120.0  # seconds any single step may take before the test gives up (a hung cluster)

# invented study (small sizes so that each section takes a second or two)
STUDY = """# INVENTED study for the cluster test: invented numbers, no real subject.
[study]
title = "Cluster test: resting forearm muscle (invented)"
tissue = "skeletal_muscle"
model = "classic"
seed = {seed}

[propagate]
samples = 256

[sensitivity]
method = "shapley"
samples = 128

[design]
design = "parallel"
endpoint = "Kf"
effect = {{ parameter = "Kf", multiply = 0.7 }}
between_subject = {{ Kf = {{ cv = 0.38 }} }}
measurement = {{ cv = 0.2 }}
n_range = [10, 60]
n_points = 2
simulations = 100
"""


def _dask() -> str:
    return shutil.which("dask") or str(Path(sys.executable).with_name("dask"))


def _env() -> dict[str, str]:
    """The test's environment, with this checkout first on the workers' import path."""
    path = os.pathsep.join(p for p in (str(ROOT), os.environ.get("PYTHONPATH", "")) if p)
    return {**os.environ, "PYTHONPATH": path}


def _stop(procs: list[subprocess.Popen]) -> None:
    for p in reversed(procs):
        if p.poll() is None:
            p.terminate()
    for p in procs:
        try:
            p.wait(timeout=5)
        except subprocess.TimeoutExpired:
            p.kill()
            p.wait(timeout=10)


@pytest.fixture(scope="module")
def scheduler(tmp_path_factory: pytest.TempPathFactory) -> Iterator[str]:
    """Address of a scheduler on 127.0.0.1 with two single-threaded workers, each its own process."""
    from dask.distributed import Client

    folder = tmp_path_factory.mktemp("cluster")
    info = folder / "scheduler.json"
    log = open(folder / "cluster.log", "wb")  # noqa: SIM115 - closed in finally
    procs: list[subprocess.Popen] = []
    try:
        procs.append(subprocess.Popen(
            [_dask(), "scheduler", "--host", "127.0.0.1", "--port", "0", "--no-dashboard",
             "--scheduler-file", str(info), "--idle-timeout", "600"],
            env=_env(), cwd=folder, stdout=log, stderr=log))
        deadline = time.monotonic() + LIMIT
        while not info.is_file() or not info.read_text().strip():
            if procs[0].poll() is not None or time.monotonic() > deadline:
                pytest.fail("the dask scheduler did not start: " + (folder / "cluster.log").read_text()[-2000:])
            time.sleep(0.2)
        time.sleep(0.2)  # the file is written whole, but give the writer a moment
        address = json.loads(info.read_text())["address"]
        assert address.startswith("tcp://127.0.0.1:")
        for name in ("worker-a", "worker-b"):
            procs.append(subprocess.Popen(
                [_dask(), "worker", address, "--name", name, "--nthreads", "1", "--no-nanny",
                 "--no-dashboard", "--local-directory", str(folder), "--death-timeout", "60"],
                env=_env(), cwd=folder, stdout=log, stderr=log))
        with Client(address, timeout=f"{int(LIMIT)}s") as client:
            client.wait_for_workers(2, timeout=LIMIT)
        yield address
    finally:
        _stop(procs)
        log.close()


def _cluster_json(args: list[str], limit: float = LIMIT, codes: tuple[int, ...] = (0,)) -> dict:
    """`fluidshift ARGS --json` (its client joins the cluster) in a thread with a time limit: a hung
    cluster fails the test, and the fixture still stops the processes."""
    box: dict = {}
    worker = threading.Thread(target=lambda: box.update(res=CliRunner().invoke(main, [*args, "--json"])),
                              daemon=True)
    worker.start()
    worker.join(limit)
    if worker.is_alive():
        pytest.fail(f"fluidshift {args[0]} on the cluster did not finish within {limit:.0f} s")
    res = box["res"]
    assert res.exit_code in codes, res.output
    return json.loads(res.stdout)


def _in_process_json(args: list[str]) -> dict:
    res = CliRunner().invoke(main, [*args, "--json"])
    assert res.exit_code == 0, res.output
    return json.loads(res.stdout)


@pytest.fixture
def study(tmp_path: Path) -> Path:
    p = tmp_path / "study.toml"
    p.write_text(STUDY.format(seed=7))
    return p


def test_design_on_the_cluster_gives_the_in_process_numbers(scheduler: str, study: Path) -> None:
    ref = _in_process_json(["design", str(study)])
    got = _cluster_json(["design", str(study), "--scheduler", scheduler])
    assert got == ref


def test_sensitivity_on_the_cluster_gives_the_in_process_numbers(scheduler: str, study: Path) -> None:
    ref = _in_process_json(["sensitivity", str(study)])
    got = _cluster_json(["sensitivity", str(study), "--scheduler", scheduler])
    assert got == ref


def test_run_over_two_studies_on_the_cluster_gives_the_one_by_one_numbers(scheduler: str, tmp_path: Path) -> None:
    studies = []
    for seed in (7, 8):  # two propagate-only studies (a whole run per task; the sections are tested above)
        p = tmp_path / f"study-{seed}.toml"
        p.write_text(STUDY.format(seed=seed).split("[sensitivity]")[0])
        studies.append(p)
    out = tmp_path / "cluster"
    runs = _cluster_json(["run", *map(str, studies), "--out", str(out), "--scheduler", scheduler])["runs"]
    for path, doc in zip(studies, runs, strict=True):
        alone = run(path, tmp_path / f"alone-{path.stem}", progress=False).doc
        assert {n: r["result"] for n, r in doc["sections"].items()} == \
            {n: r["result"] for n, r in alone["sections"].items()}
        assert (out / path.stem / "report.html").is_file()


def test_propagate_on_the_cluster_gives_the_in_process_numbers(scheduler: str, study: Path) -> None:
    # 2^17 -> 2^18 draws (one doubling): 8192 a replicate, so each take is four tasks of four replicates
    args = ["propagate", str(study), "--output", "Jv", "--samples", "131072", "--tol", "1e-9",
            "--max-samples", "262144"]
    ref = CliRunner().invoke(main, [*args, "--json"])
    assert ref.exit_code == 3, ref.output  # the gate stops the doubling; the numbers are still printed
    box: dict = {}
    worker = threading.Thread(target=lambda: box.update(res=CliRunner().invoke(
        main, [*args, "--scheduler", scheduler, "--json"])), daemon=True)
    worker.start()
    worker.join(LIMIT)
    assert not worker.is_alive(), f"propagate on the cluster did not finish within {LIMIT:.0f} s"
    got = box["res"]
    assert got.exit_code == 3, got.output
    assert json.loads(got.stdout) == json.loads(ref.stdout) and json.loads(ref.stdout)["samples"] == 262144


def test_rank_on_the_cluster_gives_the_in_process_numbers(scheduler: str, tmp_path: Path) -> None:
    p = tmp_path / "rank.toml"  # two candidates (each a task), their pair a joint-fit task
    p.write_text(STUDY.format(seed=7).split("[sensitivity]")[0] + """
[rank]
candidates = [
  { name = "invented Pc reading", parameter = "Pc", sd = 1.5, cost = 1 },
  { name = "invented Kf reading", parameter = "Kf", cv = 0.3, cost = 1 },
]
""")
    ref = _in_process_json(["rank", str(p)])
    got = _cluster_json(["rank", str(p), "--scheduler", scheduler])
    assert got == ref and len(ref["candidates"]) == 2 and ref["best_pair"] is not None


def test_run_of_one_study_sends_its_sections_tasks_to_the_cluster(scheduler: str, tmp_path: Path) -> None:
    p = tmp_path / "study.toml"
    p.write_text(STUDY.format(seed=9).split("[sensitivity]")[0])  # propagate only: its replicate chunks
    doc = _cluster_json(["run", str(p), "--out", str(tmp_path / "cluster"), "--scheduler", scheduler])
    alone = run(p, tmp_path / "alone", progress=False).doc
    assert doc["sections"]["propagate"]["result"] == alone["sections"]["propagate"]["result"]


def test_infer_runs_its_chains_on_the_cluster_with_the_in_process_draws(scheduler: str, tmp_path: Path) -> None:
    # one reading of Pi (invented); each worker compiles the model once and samples the chains it is given
    from uncertainty.analyses.inference.api import fit
    from uncertainty.core.parallel import InProcess
    from uncertainty.core.serialise import to_json
    from uncertainty.study import load_study

    p = tmp_path / "infer.toml"
    p.write_text(STUDY.format(seed=7).split("[propagate]")[0] + """
[[observations]]
kind = "measurement"
parameter = "Pi"
value = -1.0
sd = 1.0
unit = "mmHg"
""")
    settings = ["--chains", "2", "--draws", "300", "--tune", "300", "--no-checks"]
    # a short run may fail the gate (exit 3, its numbers still printed): the draws are the point here
    got = _cluster_json(["infer", str(p), *settings, "--scheduler", scheduler], limit=4 * LIMIT, codes=(0, 3))
    ref = fit(load_study(p), executor=InProcess(), chains=2, draws=300, tune=300)
    assert got["parameters"]["Pi"] == json.loads(to_json(ref.doc["parameters"]))["Pi"]
    assert got["parameters"] == json.loads(to_json(ref.doc["parameters"]))



def test_calibrate_on_the_cluster_gives_the_in_process_ranks(scheduler: str, tmp_path: Path) -> None:
    # each worker compiles the model in a warm-up task while this process simulates the replicates
    from test_calibrate import STUDY as SBC_STUDY

    from uncertainty.analyses.calibrate import calibrate
    from uncertainty.core.errors import QualityGateError
    from uncertainty.core.parallel import make_executor
    from uncertainty.study import load_study

    def doc_of(executor: object = None) -> dict:   # a run with too few passing refits still has its ranks
        try:
            return calibrate(s, executor=executor, **opts).doc
        except QualityGateError as exc:
            return exc.result.doc

    p = tmp_path / "sbc.toml"
    p.write_text(SBC_STUDY)
    s = load_study(p)
    # small refits, gate lowered to what they give (test scaffolding, as in test_calibrate)
    opts = {"replicates": 30, "bins": 5, "draws": 19, "chains": 2, "posterior_draws": 400, "tune": 300,
            "gate": {"r_hat_max": 1.05, "ess_bulk_min": 100.0, "ess_tail_min": 100.0}}
    box: dict = {}

    def on_cluster() -> None:
        with make_executor(scheduler=scheduler) as ex:
            box["doc"] = doc_of(ex)

    worker = threading.Thread(target=on_cluster, daemon=True)
    worker.start()
    worker.join(4 * LIMIT)
    if worker.is_alive():
        pytest.fail(f"calibrate on the cluster did not finish within {4 * LIMIT:.0f} s")
    alone = doc_of()
    assert box["doc"]["failures"] == alone["failures"]
    for name, q in alone["quantities"].items():
        assert box["doc"]["quantities"][name]["ranks"] == q["ranks"]
