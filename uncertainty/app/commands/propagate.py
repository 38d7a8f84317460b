"""`fluidshift propagate STUDY`: distribution of Jv and other outputs (MC / QMC / LHS)."""

from __future__ import annotations

import click

from uncertainty.analyses.propagate import propagate
from uncertainty.app.commands.common import PROPAGATE_BYTES, Count, handle_errors, run_and_show, study_options
from uncertainty.study import load_study


@click.command("propagate", short_help="Distribution of Jv and other outputs (Monte Carlo / QMC).")
@study_options
@click.option("--samples", type=Count(PROPAGATE_BYTES), default=None, help="Total draws (split over 16 replicates).")
@click.option("--method", type=click.Choice(["qmc", "mc", "lhs"]), default=None,
              help="Sampling design: scrambled Sobol' QMC (default), plain MC, Latin hypercube.")
@click.option("--output", "outputs", multiple=True, help="An output to summarise (repeatable).")
@click.option("--tol", type=float, default=None,
              help="Double the sample until the 95% Monte Carlo margin (t x standard error) of the "
                   "95%-interval ends of the first output is below TOL (its unit); exit 3 if --max-samples "
                   "comes first.")
@click.option("--max-samples", type=Count(PROPAGATE_BYTES), default=None, help="Upper limit for --tol doubling.")
@click.option("--workers", type=int, default=None,
              help="Draw and evaluate the replicates in chunks on a local dask cluster of N processes.")
@click.option("--scheduler", default=None,
              help="Draw and evaluate the replicates in chunks on a running dask scheduler at ADDRESS.")
@handle_errors
def command(study: str, seed: int | None, as_json: bool, out: str | None, quiet: bool,
            samples: int | None, method: str | None, outputs: tuple[str, ...], tol: float | None,
            max_samples: int | None, workers: int | None, scheduler: str | None) -> None:
    """Distribution of Jv (and net pressure, forces, solved quantities) for the study's
    individual and its typical subject, with Monte Carlo errors and P(absorption).

    With --workers or --scheduler the replicates are drawn and evaluated on dask workers, a few
    replicates per task (at least 32768 draws a task: a small sample is one task), each from its own
    stream of the seed: the numbers are those in-process."""
    s = load_study(study)
    opts = {"samples": samples, "method": method, "seed": seed, "tol": tol, "max_samples": max_samples,
            "outputs": list(outputs) or None}
    run_and_show(propagate, s, opts, workers=workers, scheduler=scheduler, as_json=as_json, out=out, quiet=quiet)
