"""`fluidshift rank STUDY`: which measurement would narrow the Jv interval most."""

from __future__ import annotations

import click

from uncertainty.analyses.rank import DEFAULT_MAX_SAMPLES, rank
from uncertainty.app.commands.common import RANK_BYTES, Count, handle_errors, run_and_show, study_options
from uncertainty.study import load_study


@click.command("rank", short_help="Which measurement would narrow the Jv interval most.")
@study_options
@click.option("--samples", type=Count(RANK_BYTES), default=None, help="Prior draws (at least 4096).")
@click.option("--method", type=click.Choice(["auto", "regression", "importance"]), default="auto",
              help="EVSI estimator: regression on the simulated reading, likelihood reweighting, or auto.")
@click.option("--from-prior", "from_prior", is_flag=True,
              help="Rank from the prior even when the study has observations (no MCMC).")
@click.option("--tol", type=float, default=None, is_flag=False, flag_value=0.05,
              help="Double the draws until the 95% Monte Carlo half-width of every candidate's expected "
                   "variance reduction is below TOL times it (relative; times 1% of the output's variance "
                   "for a candidate removing less); --tol alone means 0.05; exit 3 if --max-samples comes first.")
@click.option("--max-samples", type=Count(RANK_BYTES), default=None,
              help=f"Upper limit on the draws for --tol doubling (default {DEFAULT_MAX_SAMPLES}).")
@click.option("--workers", type=int, default=None,
              help="Each candidate's figures and each joint fit as a task on a local dask cluster of N processes.")
@click.option("--scheduler", default=None,
              help="Each candidate's figures and each joint fit as a task on a running dask scheduler at ADDRESS.")
@handle_errors
def command(study: str, seed: int | None, as_json: bool, out: str | None, quiet: bool, samples: int | None,
            method: str, from_prior: bool, tol: float | None, max_samples: int | None, workers: int | None,
            scheduler: str | None) -> None:
    """Expected posterior variance and 95% interval width of the output after each candidate
    measurement, the perfect-information bound, narrowing per cost, and the best pair / set within
    the budget (fitted jointly). With [[observations]] the figures start from the current posterior
    (thinned MCMC draws; exit 3 if the chains fail the gate) unless --from-prior is given.

    With --workers or --scheduler the candidates (their simulated readings and the preposterior
    loop over them) and the joint fits run on dask workers, each candidate with its own stream of
    the seed: the numbers are those in-process.

    With --tol (or [rank] tol) the draws double, earlier draws and their simulated readings kept,
    until every candidate's expected variance reduction is within TOL of itself; the output says
    whether the tolerance was met or the --max-samples cap stopped it (then exit 3).

    \b
    Examples:
      fluidshift rank studies/demo.toml --tol
      fluidshift rank studies/demo.toml --tol 0.02 --max-samples 131072 --workers 2"""
    s = load_study(study)
    opts = {"seed": seed, "samples": samples, "method": method, "from_prior": from_prior, "tol": tol,
            "max_samples": max_samples}
    run_and_show(rank, s, opts, workers=workers, scheduler=scheduler, as_json=as_json, out=out, quiet=quiet)
