"""Ratio benchmark for the executor (printed, not asserted).

[1] Sensitivity (Sobol', N = 16384, the six-quantity classic study) with its model runs in row chunks
    on a local dask cluster: time on 1 worker / time on 2 workers. Target: at least 1.7x.
[2] `fluidshift run` over four small studies (propagate and Sobol' sensitivity each), one study per
    task: time on 1 worker / time on 2 workers. Target: at least 1.6x.
[3] Executor overhead for a small in-process propagate (4096 draws): propagate wrapped in one task of
    the in-process executor against propagate called directly. Target: below 5 %. (Propagate itself
    now runs its replicate chunks through the in-process executor; the overhead of that split is in
    both times.)
[4] Propagate (classic six-quantity study, 2^21 draws) in chunks of replicates (one replicate, 131072
    draws, a task): time on 1 worker / time on 2 workers (no target in the issue; the draws come back
    to this process, so the transfer and the pooled summaries, done here, bound the gain).
[5] Propagate of the time-course form (studies/ringer_infusion_volunteer.toml, whole_body; its 2048
    steady-state draws are one task, the two layers of the time courses two more): 1 worker / 2 workers.
[6] Sensitivity of the time-course form (the same study, Shapley: its inputs are correlated, so
    Sobol' is refused; 2048 orders of infused_retained_fraction at 60 min, each run a time-course solve,
    model runs in row chunks): 1 worker / 2 workers. Target: at least 1.7x.

The clusters are started before the clock runs and warmed with one untimed pass; ratios need a machine
with at least two free cores (on a shared machine they fall towards 1).

Run: python benchmarks/benchmark_executor.py
"""

from __future__ import annotations

import sys
import tempfile
import time
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parent))

STUDY = """# INVENTED benchmark study: invented numbers, no real subject.
[study]
title = "executor benchmark {i} (invented)"
tissue = "skeletal_muscle"
model = "classic"
seed = {i}

[parameters]
{params}

[propagate]
samples = 4096

[sensitivity]
method = "sobol"
samples = 4096
"""


def _best(f, repeat: int = 3) -> float:
    times = []
    for _ in range(repeat):
        t = time.perf_counter()
        f()
        times.append(time.perf_counter() - t)
    return min(times)


def _params_toml() -> str:
    from benchmark_propagate import SIX

    def value(v: object) -> str:
        if isinstance(v, dict):
            return "{ " + ", ".join(f"{k} = {value(x)}" for k, x in v.items()) + " }"
        if isinstance(v, str):
            return f'"{v}"'
        if isinstance(v, list):
            return "[" + ", ".join(value(x) for x in v) + "]"
        return repr(v)

    return "\n".join(f"{name} = {value(decl)}" for name, decl in SIX.items())


def sensitivity_ratio() -> float:
    from benchmark_propagate import study

    from uncertainty.analyses.sensitivity import sensitivity
    from uncertainty.core.parallel import make_executor

    s = study()
    times = {}
    for n in (1, 2):
        with make_executor(workers=n) as ex:
            def go(ex=ex) -> None:
                sensitivity(s, method="sobol", samples=16384, layer="typical", seed=1, executor=ex)

            go()  # warm: the workers import the package and receive the study
            times[n] = _best(go, 2)
    ratio = times[1] / times[2]
    print(f"[1] sensitivity Sobol' N=16384 in row chunks: 1 worker {times[1]:.2f} s, 2 workers {times[2]:.2f} s"
          f" -> {ratio:.2f}x (target >= 1.7x)")
    return ratio


def run_ratio() -> float:
    from uncertainty.app.run import run_many
    from uncertainty.core.parallel import make_executor

    with tempfile.TemporaryDirectory() as tmp:
        folder = Path(tmp)
        params = _params_toml()
        studies = []
        for i in range(4):
            p = folder / f"study{i}.toml"
            p.write_text(STUDY.format(i=i + 1, params=params))
            studies.append(p)
        times = {}
        for n in (1, 2):
            outs = [folder / f"w{n}" / p.stem for p in studies]
            with make_executor(workers=n) as ex:
                run_many(studies, outs, force=True, progress=False, executor=ex)  # warm
                times[n] = _best(lambda ex=ex, outs=outs: run_many(studies, outs, force=True, progress=False,
                                                                   executor=ex), repeat=1)
    ratio = times[1] / times[2]
    print(f"[2] run over four studies: 1 worker {times[1]:.2f} s, 2 workers {times[2]:.2f} s -> {ratio:.2f}x"
          " (target >= 1.6x)")
    return ratio


def overhead() -> float:
    from benchmark_propagate import study

    from uncertainty.analyses.propagate import propagate
    from uncertainty.core.parallel import InProcess

    s = study()

    def direct() -> None:
        propagate(s, samples=4096, seed=1)

    def through() -> None:
        InProcess().map(lambda task, ss: propagate(s, samples=4096, seed=1), [None], seed=1)

    direct()
    through()
    t_direct, t_through = _best(direct, 7), _best(through, 7)
    share = t_through / t_direct - 1
    print(f"[3] small propagate (4096 draws): direct {t_direct * 1e3:.1f} ms, through the in-process executor "
          f"{t_through * 1e3:.1f} ms -> overhead {100 * share:+.1f} % (target < 5 %)")
    return share


def _one_vs_two(label: str, work, repeat: int = 2) -> float:
    """Best time of ``work(executor)`` on a LocalCluster of 1 and of 2 workers (each warmed once); the
    printed line and the ratio 1 worker / 2 workers."""
    from uncertainty.core.parallel import make_executor

    times = {}
    for n in (1, 2):
        with make_executor(workers=n) as ex:
            work(ex)  # warm: the workers import the package and receive the task function
            times[n] = _best(lambda ex=ex: work(ex), repeat)
    ratio = times[1] / times[2]
    print(f"{label}: 1 worker {times[1]:.2f} s, 2 workers {times[2]:.2f} s -> {ratio:.2f}x", flush=True)
    return ratio


def propagate_ratio() -> float:
    from benchmark_propagate import study

    from uncertainty.analyses.propagate import propagate

    s = study()
    return _one_vs_two("[4] propagate 2^21 draws in replicate chunks",
                       lambda ex: propagate(s, samples=2**21, seed=1, executor=ex))


def _ringer():
    from uncertainty.core.resources import studies_dir
    from uncertainty.study import load_study

    return load_study(studies_dir() / "ringer_infusion_volunteer.toml")


def whole_body_propagate_ratio() -> float:
    from uncertainty.analyses.propagate import propagate

    s = _ringer()
    return _one_vs_two("[5] propagate of the time-course form (ringer study)",
                       lambda ex: propagate(s, seed=1, executor=ex))


def whole_body_sensitivity_ratio() -> float:
    from uncertainty.analyses.sensitivity import sensitivity

    s = _ringer()
    # an output at a time, so every model run solves the time course (the study's default output, Jv, is a
    # steady-state sum that costs microseconds a run and leaves nothing to split)
    ratio = _one_vs_two("[6] sensitivity (Shapley, 2048 orders) of infused_retained_fraction at 60 min (ringer study)",
                        lambda ex: sensitivity(s, method="shapley", samples=2048, seed=1, executor=ex,
                                               output="infused_retained_fraction at 60 min"))
    print("    (target >= 1.7x)")
    return ratio


if __name__ == "__main__":
    import os

    print(f"load average before: {os.getloadavg()[0]:.2f} (1 min) on {os.cpu_count()} cores", flush=True)
    overhead()
    sensitivity_ratio()
    run_ratio()
    propagate_ratio()
    whole_body_propagate_ratio()
    whole_body_sensitivity_ratio()
    print(f"load average after: {os.getloadavg()[0]:.2f} (1 min)")
