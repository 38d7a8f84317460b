"""Benchmark of the whole-body time course (printed, not asserted).

1. 65,536 draws (the typical subject of the skeletal-muscle prior set, scrambled Sobol') of a 4-hour
   timeline with a crystalloid infusion of 25 mL/kg over 30 min, reported every minute: time of
   ``physiology.whole_body.simulate`` (after the draws), wall and CPU (the process's CPU time: the machine may
   be shared). Target: at most 10 s on 2 cores.
2. The same number of steady-state draws (the whole_body form's scalar outputs, one safety-factor steady state
   per draw), per time step of the timeline. Target (issue 20): the timeline costs at most 5 x the steady draws
   times the number of steps; the printed ratio is timeline / (steady x steps).

Measured 2026-12-04 (idle 2-core machine): in blocks of 16,384 draws on 2 threads (``simulate_blocks``) 7.86 and
7.84 s wall (13.8 s CPU) in two runs, target met; the steady draws 0.25 s, ratio 0.13 (target <= 5, met). One
block on one thread had taken 15.3 s of CPU.

Run: python benchmarks/benchmark_whole_body.py [--draws N] [--step MIN]
"""

from __future__ import annotations

import argparse
import time

import numpy as np

from uncertainty.analyses.propagate.timeline import bed_ratios
from uncertainty.analyses.sampling import draw
from uncertainty.forms.evaluate import evaluate, input_values
from uncertainty.forms.whole_body import timeline_parameters
from uncertainty.physiology import whole_body as wb
from uncertainty.study import Study

BODY_KG = 73.0  # ICRP Publication 89 (2002) reference male
DOC = {"study": {"tissue": "skeletal_muscle", "model": "whole_body", "body_mass": "73 kg", "seed": 7},
       "interventions": [{"kind": "infusion", "fluid": "crystalloid", "volume": 25.0 * BODY_KG, "duration": 30.0}],
       "timeline": {"end": 240.0, "report_every": 1.0}}


def main() -> None:
    """Time the timeline and the steady draws; print the figures and the ratios."""
    ap = argparse.ArgumentParser()
    ap.add_argument("--draws", type=int, default=65536)
    ap.add_argument("--step", type=float, default=1.0, help="largest Runge-Kutta step, min (default 1)")
    args, _ = ap.parse_known_args()
    study = Study.from_dict(DOC)
    values = draw(study, args.draws, method="qmc", seed=7, layer="typical")
    v = input_values(study, values)
    body, beds, Cp0 = timeline_parameters(v, BODY_KG, bed_ratios(study.tissue))
    plan = study.timeline
    t0, c0 = time.perf_counter(), time.process_time()
    out = wb.simulate_blocks(body, beds, Cp0, plan.doses, plan.end, plan.report_every, max_step=args.step)
    t_tl, c_tl = time.perf_counter() - t0, time.process_time() - c0
    dt, n_steps, _ = wb.time_grid(plan.end, plan.report_every, args.step)
    t0 = time.perf_counter()
    evaluate(study, values)
    t_ss = time.perf_counter() - t0
    med = np.median(out["infused_retained_fraction"][30])
    print(f"timeline: {args.draws} draws, {plan.end:g} min, step {dt:g} min ({n_steps} steps), "
          f"reported every {plan.report_every:g} min: {t_tl:.2f} s wall, {c_tl:.2f} s CPU (target <= 10 s); "
          f"median retained fraction at 30 min {med:.3f}")
    print(f"steady state: {args.draws} draws {t_ss:.3f} s; ratio timeline / (steady x {n_steps} steps) = "
          f"{t_tl / (t_ss * n_steps):.2f} (target <= 5)")


if __name__ == "__main__":
    main()
