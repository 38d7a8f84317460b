"""`fluidshift infer STUDY`: posterior from the study's observations, with diagnostics and checks."""

from __future__ import annotations

import sys

import click

from uncertainty.analyses import inference
from uncertainty.analyses.inference.api import settings
from uncertainty.app.commands.common import handle_errors, run_and_show, study_options
from uncertainty.study import load_study


def stderr_is_terminal() -> bool:
    """True when stderr is a terminal (the sampler's live progress table goes there).

    Returns
    -------
    bool
        ``sys.stderr.isatty()``.
    """
    return sys.stderr.isatty()


@click.command("infer", short_help="Posterior from the study's observations, with diagnostics.")
@study_options
@click.option("--sampler", type=click.Choice(["nutpie", "pymc"]), default=None,
              help="nutpie or PyMC's own NUTS.  [default: the study's [infer], else nutpie]")
@click.option("--chains", type=click.IntRange(1, 64), default=None, help="[default: [infer], else 4]")
@click.option("--draws", type=click.IntRange(50, 10**6), default=None,
              help="Posterior draws per chain.  [default: [infer], else 1000]")
@click.option("--tune", type=click.IntRange(50, 10**6), default=None,
              help="Warm-up steps per chain.  [default: [infer], else 1000]")
@click.option("--target-accept", type=click.FloatRange(0.5, 0.999), default=None,
              help="NUTS target acceptance rate; raise it (e.g. 0.99) when a few divergences remain.  "
                   "[default: [infer], else 0.95]")
@click.option("--start", type=click.Choice(["auto", "mode", "prior"]), default=None,
              help="Where chains start: around the posterior mode (mode), at the priors' central points "
                   "(prior), or the mode only for kinds that need it, such as volume time courses (auto).  "
                   "[default: [infer], else auto]")
@click.option("--compare-models", is_flag=True,
              help="Compare the classic and revised forms by PSIS-LOO (leave one subject out with subjects).")
@click.option("--no-checks", is_flag=True, help="Skip prior/posterior predictive and power-scaling checks.")
@click.option("--r-hat-max", type=float, default=None, help="Quality gate: largest R-hat.  [default: [infer], "
              "else 1.01]")
@click.option("--ess-min", type=float, default=None, help="Quality gate: smallest bulk ESS.  [default: [infer], "
              "else 400]")
@click.option("--divergences-max", type=int, default=None,
              help="Quality gate: divergent transitions allowed.  [default: [infer], else 0]")
@click.option("--workers", type=int, default=None,
              help="Run each chain as a task on a local dask cluster of N processes (each compiles the model "
                   "once; on one machine the default, all chains in this process, is as fast).")
@click.option("--scheduler", default=None,
              help="Run each chain as a task on the workers of a running dask scheduler at ADDRESS (a long "
                   "fit gains across machines).")
@handle_errors
def command(study: str, seed: int | None, as_json: bool, out: str | None, quiet: bool, sampler: str | None,
            chains: int | None, draws: int | None, tune: int | None, target_accept: float | None, start: str | None,
            compare_models: bool, no_checks: bool, r_hat_max: float | None, ess_min: float | None,
            divergences_max: int | None, workers: int | None, scheduler: str | None) -> None:
    """Update the study's priors from its [[observations]]: credible intervals for Jv (individual,
    per subject, typical and new subject), prior vs posterior per quantity with contraction,
    diagnostics (R-hat, ESS, divergences, BFMI) and model checks. Exit 3 if the chains fail the
    quality gate (its message names each failed check and what to raise); the posterior is saved as
    posterior.nc with --out, and after a failed gate every file written starts with GATE-FAILED_.
    On a terminal the sampler shows its progress on stderr (per chain: draws, divergences so far,
    time left). Sampler settings and gate come from the study's [infer] section where it has one;
    each flag overrides its key.

    \b
    Examples:
      fluidshift infer studies/demo.toml
      fluidshift infer studies/demo.toml --json --out demo-posterior
      fluidshift infer my-study.toml --sampler pymc --target-accept 0.99
      fluidshift infer my-study.toml --scheduler tcp://10.0.0.5:8786
    """
    s = load_study(study)
    gate = settings(s)["gate"]  # the study's [infer] thresholds (or the defaults), each flag overriding
    gate.update({k: v for k, v in (("r_hat_max", r_hat_max), ("ess_bulk_min", ess_min),
                                   ("divergences_max", divergences_max)) if v is not None})
    local = workers is None and scheduler is None  # else a chain per task on the workers
    opts = {"sampler": sampler, "seed": seed, "chains": chains, "draws": draws, "tune": tune, "gate": gate,
            "compare_models": compare_models, "checks": not no_checks, "target_accept": target_accept,
            "start": start, "progress": not quiet and stderr_is_terminal() and local}
    run_and_show(inference.infer, s, opts, workers=workers, scheduler=scheduler, as_json=as_json, out=out,
                 quiet=quiet, progress=not (quiet or as_json))
