"""`fluidshift sensitivity STUDY`: Sobol', Morris or Shapley indices with intervals and a ranking."""

from __future__ import annotations

import click

from uncertainty.analyses.sensitivity import sensitivity
from uncertainty.app.commands.common import SENSITIVITY_BYTES, Count, handle_errors, run_and_show, study_options
from uncertainty.study import load_study


@click.command("sensitivity", short_help="Global sensitivity indices (Sobol', Morris, Shapley) and a ranking.")
@study_options
@click.option("--method", type=click.Choice(["sobol", "morris", "shapley"]), default=None,
              help="Sobol' (independent inputs), Morris screening, or Shapley effects (correlated inputs).")
@click.option("--samples", type=Count(SENSITIVITY_BYTES), default=None,
              help="Base samples N (Sobol', a power of two), trajectories (Morris) or random orders (Shapley).")
@click.option("--output", default=None,
              help="The model output to analyse (default Jv); whole_body: 'NAME at 60 min' or 'NAME over time'.")
@click.option("--layer", type=click.Choice(["individual", "typical"]), default=None,
              help="The individual (default: typical and between-subject parts together) or the typical subject.")
@click.option("--second-order", is_flag=True, default=None, help="Also Sobol' second-order indices.")
@click.option("--tol", type=float, default=None, is_flag=False, flag_value=0.01,
              help="Double the samples until the 95% half-width of every S1 and ST (Sobol') or Sh "
                   "(Shapley) is below TOL (absolute), or every mu* half-width below TOL x the largest mu* "
                   "(Morris); --tol alone means 0.01; exit 3 if --max-samples comes first.")
@click.option("--max-samples", type=Count(SENSITIVITY_BYTES), default=None,
              help="Upper limit on the samples for --tol doubling (default 131072).")
@click.option("--workers", type=int, default=None, help="Model runs in chunks on a local dask cluster of N processes.")
@click.option("--scheduler", default=None, help="Model runs in chunks on a running dask scheduler at ADDRESS.")
@handle_errors
def command(study: str, seed: int | None, as_json: bool, out: str | None, quiet: bool, method: str | None,
            samples: int | None, output: str | None, layer: str | None, second_order: bool | None,
            tol: float | None, max_samples: int | None, workers: int | None, scheduler: str | None) -> None:
    """Which input drives the output's uncertainty: indices with 95% intervals, a ranking by total
    index (Shapley effect for correlated inputs), warnings and a convergence table.

    With --workers or --scheduler the model runs go to dask workers in fixed chunks of rows; the
    samples are drawn here, so the numbers are the same as in-process. With --tol the samples
    double (Sobol' and Shapley keep every earlier run) until every headline figure is within TOL; the
    output says whether the tolerance was met or the --max-samples cap stopped it (then exit 3).

    \b
    Examples:
      fluidshift sensitivity studies/demo.toml --method shapley --tol
      fluidshift sensitivity studies/demo.toml --method sobol --tol 0.005 --max-samples 65536"""
    s = load_study(study)
    opts = {"method": method, "samples": samples, "output": output, "seed": seed, "layer": layer,
            "second_order": second_order or None, "tol": tol, "max_samples": max_samples}
    run_and_show(sensitivity, s, opts, workers=workers, scheduler=scheduler, as_json=as_json, out=out,
                 quiet=quiet)
