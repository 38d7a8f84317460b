"""`fluidshift propagate STUDY`: distribution of Jv and other outputs (MC / QMC / LHS)."""

from __future__ import annotations

from typing import Any

import click

from uncertainty.app.commands.common import emit_json, handle_errors, study_options
from uncertainty.core.errors import QualityGateError


def _fmt(x: float) -> str:
    return "nan" if x != x else f"{x:.4g}"


def table(result: Any) -> str:
    """Plain-text table of a PropagateResult: one row per output, individual and typical."""
    lines = []
    head = f"{'output':<14}{'layer':<12}{'mean':>11}{'sd':>11}{'median':>11}{'95% interval':>26}" \
           f"{'MC se (ends)':>22}  unit"
    lines.append(head)
    lines.append("-" * len(head))
    for name in result.outputs:
        for layer in ("individual", "typical"):
            s = result.summaries[layer][name]
            ci = f"[{_fmt(s.ci95[0])}, {_fmt(s.ci95[1])}]"
            se = f"{_fmt(s.mc_se['ci95'][0])}, {_fmt(s.mc_se['ci95'][1])}"
            lines.append(f"{name if layer == 'individual' else '':<14}{layer:<12}{_fmt(s.mean):>11}"
                         f"{_fmt(s.sd):>11}{_fmt(s.median):>11}{ci:>26}{se:>22}  {s.unit}")
    if "Jv" in result.summaries["individual"]:
        ind, typ = result.summaries["individual"]["Jv"], result.summaries["typical"]["Jv"]
        lines.append("")
        lines.append(f"P(absorption, Jv < 0): individual {_fmt(ind.p_negative)} "
                     f"(MC se {_fmt(ind.p_negative_se)}), typical subject {_fmt(typ.p_negative)}")
    lines.append(f"{result.samples} draws, method {result.method}, {result.replicates} independent "
                 f"replicates, seed {result.seed}")
    for n in result.notes:
        lines.append(f"note: {n}")
    for w in result.warnings:
        lines.append(f"warning: {w}")
    return "\n".join(lines)


def _report(result: Any, as_json: bool, out: str | None, quiet: bool) -> None:
    if out:
        import os

        os.makedirs(out, exist_ok=True)
        result.to_dataframe().to_csv(os.path.join(out, "propagate_summary.csv"))
        result.plot(out)
    if as_json:
        emit_json(result.to_dict())
    elif not quiet:
        click.echo(table(result))
        if out:
            click.echo(f"tables and figures written to {out}")


@click.command("propagate", short_help="Distribution of Jv and other outputs (Monte Carlo / QMC).")
@study_options
@click.option("--samples", type=int, default=None, help="Total draws (split over 16 replicates).")
@click.option("--method", type=click.Choice(["qmc", "mc", "lhs"]), default=None,
              help="Sampling design: scrambled Sobol' QMC (default), plain MC, Latin hypercube.")
@click.option("--output", "outputs", multiple=True, help="An output to summarise (repeatable).")
@click.option("--tol", type=float, default=None,
              help="Double the sample until the MC standard error of the 95%-interval ends of the "
                   "first output is below TOL (its unit); exit 3 if --max-samples comes first.")
@click.option("--max-samples", type=int, default=None, help="Upper limit for --tol doubling.")
@handle_errors
def command(study: str, seed: int | None, as_json: bool, out: str | None, quiet: bool,
            samples: int | None, method: str | None, outputs: tuple[str, ...], tol: float | None,
            max_samples: int | None) -> None:
    """Distribution of Jv (and net pressure, forces, solved quantities) for the study's
    individual and its typical subject, with Monte Carlo errors and P(absorption)."""
    from uncertainty.analyses.propagate import propagate
    from uncertainty.study import load_study

    s = load_study(study)
    try:
        result = propagate(s, samples=samples, method=method, seed=seed, tol=tol,
                           max_samples=max_samples, outputs=list(outputs) or None)
    except QualityGateError as exc:
        if exc.result is not None:
            _report(exc.result, as_json, out, quiet)
        raise
    _report(result, as_json, out, quiet)
