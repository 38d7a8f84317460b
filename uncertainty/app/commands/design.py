"""`fluidshift design STUDY`: power, assurance and sample size for a trial."""

from __future__ import annotations

from pathlib import Path

import click

from uncertainty.analyses.design import MAX_TRIALS, MIN_TRIALS, MIN_TRIALS_REASON, design
from uncertainty.analyses.design.precision import design_within
from uncertainty.analyses.schedule import schedule
from uncertainty.app.commands.common import TRIAL_BYTES, Count, handle_errors, show_result, study_options
from uncertainty.core.errors import InputError, QualityGateError
from uncertainty.core.parallel import make_executor
from uncertainty.study import load_study


@click.command("design", short_help="Power, assurance and sample size for a trial.")
@study_options
@click.option("--exact", is_flag=True, help="Refit every simulated trial with full MCMC (slow).")
@click.option("--trials", type=Count(TRIAL_BYTES, "trials"), default=None, help="Simulated trials per design point.")
@click.option("--tol", type=float, default=None, is_flag=False, flag_value=0.01,
              help="Double the simulated trials per point until the 95% Monte Carlo half-width of power, "
                   "assurance and Bayesian success is below TOL (absolute; --tol alone means 0.01); exit 3 "
                   "if --max-trials comes first.")
@click.option("--max-trials", type=Count(TRIAL_BYTES, "trials"), default=None,
              help=f"Upper limit on the trials per point for --tol doubling (default {MAX_TRIALS}).")
@click.option("--workers", type=int, default=None,
              help="Run design points (or, with --schedule, trial protocols) on a local dask cluster of N processes.")
@click.option("--scheduler", default=None, help="Join a running dask scheduler at ADDRESS.")
@click.option("--checkpoint", type=click.Path(file_okay=False), default=None,
              help="Folder for finished design points (an interrupted run resumes).")
@click.option("--schedule", "cuff_schedule", is_flag=True,
              help="Instead of the trial: optimise the venous-cuff measurement schedule, or in a whole_body "
                   "study the blood-sampling times ([schedule] section, defaults when absent); JSON keys "
                   "optimised, equal_spacing, sd_ratio, prior_sd.")
@click.option("--protocol", "protocol", is_flag=True,
              help="Print the protocol-ready summary (Markdown) instead of the table; with --out also "
                   "write it to protocol.md there.")
@handle_errors
def command(study: str, seed: int | None, as_json: bool, out: str | None, quiet: bool, exact: bool,
            trials: int | None, tol: float | None, max_trials: int | None, workers: int | None,
            scheduler: str | None, checkpoint: str | None, cuff_schedule: bool, protocol: bool) -> None:
    """Power of the stated test (simulated, with Monte Carlo error, and exact noncentral t),
    assurance over the design prior, Bayesian success, n per arm for the targets, and the curves.

    With --schedule: the cuff pressures and K reading times of a venous-cuff protocol that minimise
    the expected posterior sd of Kf and Pvi (linearised Fisher information plus the prior precision),
    and the ratio of those sds to equal spacing (sd_ratio below 1 is a gain); the [design] section
    is not needed then. In a whole_body study --schedule chooses the blood-sampling times instead:
    [schedule] samples of its candidates (a baseline at 0 min always drawn) that most narrow its
    target (a quantity such as Kf, or "NAME at TIME") from serial haemoglobin.

    \b
    Examples:
      fluidshift design studies/heart_failure_trial.toml
      fluidshift design studies/heart_failure_trial.toml --tol 0.005 --out plan/
      fluidshift design studies/heart_failure_trial.toml --protocol
      fluidshift design studies/ringer_infusion_volunteer.toml --schedule"""
    if cuff_schedule:
        s = load_study(study)
        if workers is None and scheduler is None:
            show_result(schedule(s, seed=seed), as_json=as_json, out=out, quiet=quiet)
        else:  # the search's trial protocols as tasks (the same schedule as in-process)
            with make_executor(workers, scheduler) as ex:
                show_result(schedule(s, seed=seed, executor=ex), as_json=as_json, out=out, quiet=quiet)
        return
    if trials is not None and not MIN_TRIALS <= trials <= MAX_TRIALS:
        raise InputError(f"simulated trials per point must lie between {MIN_TRIALS} and {MAX_TRIALS} "
                         f"({MIN_TRIALS_REASON})", key="--trials", value=trials)
    s = load_study(study)
    with make_executor(workers, scheduler, checkpoint_dir=checkpoint, progress=not (quiet or as_json)) as ex:
        try:
            if tol is None:
                result = design(s, seed=seed, exact=exact, executor=ex, trials=trials)
            else:
                result = design_within(s, tol, max_trials=max_trials, seed=seed, exact=exact, executor=ex,
                                       trials=trials)
        except QualityGateError as exc:  # the cap stopped --tol: show what was computed, then exit 3
            if exc.result is not None:
                show_result(exc.result, as_json=as_json, out=out, quiet=quiet)
            raise
    if protocol and not as_json:
        text = result.protocol()
        if out:
            result.save(out)
            result.plot(out)
            Path(out, "protocol.md").write_text(text, encoding="utf-8")
        if not quiet:
            click.echo(text)
        return
    show_result(result, as_json=as_json, out=out, quiet=quiet)

