"""`fluidshift sensitivity STUDY`: Sobol', Morris or Shapley indices with intervals and a ranking."""

from __future__ import annotations

from typing import Any

import click

from uncertainty.app.commands.common import emit_json, handle_errors, study_options


def _fmt(x: float) -> str:
    return "nan" if x != x else f"{x:.3f}"


def table(result: Any) -> str:
    """Plain-text table of a SensitivityResult in ranking order."""
    keys = {"sobol": ["S1", "ST"], "shapley": ["Sh", "S1", "ST"], "morris": ["mu_star", "sigma"]}[result.method]
    lines = [f"{result.method} indices of {result.output} ({result.layer} layer), ranked by "
             f"{result.rank_key}"]
    head = f"{'rank':<6}{'input':<12}" + "".join(
        f"{k:>10}{'95% interval':>22}" if f"{k}_ci" in result.indices[result.ranking[0]] else f"{k:>10}"
        for k in keys)
    lines += [head, "-" * len(head)]
    for i, p in enumerate(result.ranking, 1):
        ix = result.indices[p]
        row = f"{i:<6}{p:<12}"
        for k in keys:
            if result.method == "morris":
                row += f"{ix[k]:>10.3g}"
            else:
                row += f"{_fmt(ix[k]):>10}"
            if f"{k}_ci" in ix:
                lo, hi = ix[f"{k}_ci"]
                ci = f"[{lo:.3g}, {hi:.3g}]" if result.method == "morris" else f"[{_fmt(lo)}, {_fmt(hi)}]"
                row += f"{ci:>22}"
        lines.append(row)
    lines.append(f"{result.samples} base samples, {result.evaluations} model runs, "
                 f"{result.replicates} independent replicates, seed {result.seed}")
    if result.convergence:
        key = result.rank_key
        size = {"sobol": "base samples N", "morris": "trajectories",
                "shapley": "samples (outer draws or orders)"}[result.method]
        cell = (lambda v: f"{v:.3g}") if result.method == "morris" else _fmt
        lines.append("")
        lines.append(f"convergence ({key} by {size}):")
        lines.append(f"{'N':>8}" + "".join(f"{p:>12}" for p in result.ranking))
        for row in result.convergence:
            lines.append(f"{row['samples']:>8}" + "".join(f"{cell(row['indices'][p][key]):>12}"
                                                          for p in result.ranking))
    for n in result.notes:
        lines.append(f"note: {n}")
    for w in result.warnings:
        lines.append(f"warning: {w}")
    return "\n".join(lines)


@click.command("sensitivity", short_help="Global sensitivity indices (Sobol', Morris, Shapley) and a ranking.")
@study_options
@click.option("--method", type=click.Choice(["sobol", "morris", "shapley"]), default=None,
              help="Sobol' (independent inputs), Morris screening, or Shapley effects (correlated inputs).")
@click.option("--samples", type=int, default=None,
              help="Base samples N (Sobol', a power of two), trajectories (Morris) or outer draws (Shapley).")
@click.option("--output", default=None, help="The model output to analyse (default Jv).")
@click.option("--layer", type=click.Choice(["individual", "typical"]), default=None,
              help="The individual (default: typical and between-subject parts together) or the typical subject.")
@click.option("--second-order", is_flag=True, default=None, help="Also Sobol' second-order indices.")
@handle_errors
def command(study: str, seed: int | None, as_json: bool, out: str | None, quiet: bool, method: str | None,
            samples: int | None, output: str | None, layer: str | None, second_order: bool | None) -> None:
    """Which input drives the output's uncertainty: indices with 95% intervals, a ranking by total
    index (Shapley effect for correlated inputs), warnings and a convergence table."""
    from uncertainty.analyses.sensitivity import sensitivity
    from uncertainty.study import load_study

    s = load_study(study)
    result = sensitivity(s, method=method, samples=samples, output=output, seed=seed, layer=layer,
                         second_order=second_order or None)
    if out:
        import os

        os.makedirs(out, exist_ok=True)
        result.to_dataframe().to_csv(os.path.join(out, f"sensitivity_{result.output}.csv"))
        result.plot(out)
    if as_json:
        emit_json(result.to_dict())
    elif not quiet:
        click.echo(table(result))
        if out:
            click.echo(f"tables and figures written to {out}")
