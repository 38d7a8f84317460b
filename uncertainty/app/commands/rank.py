"""`fluidshift rank STUDY`: which measurement would narrow the Jv interval most."""

from __future__ import annotations

import click

from uncertainty.app.commands.common import emit_json, handle_errors, study_options


def table(doc: dict) -> str:
    """Plain-text table of a rank result (best first)."""
    lines = [f"expected effect of one measurement on {doc['output']} ({doc.get('from', 'prior')} 95% width "
             f"{doc['prior']['ci95_width']:.3g}; {doc['samples']} draws, seed {doc['seed']})",
             f"{'candidate':<28}{'reads':<7}{'Var reduction':>15}{'+-mc_se':>10}{'bound':>11}"
             f"{'95% width':>11}{'narrow/cost':>13}"]
    for r in doc["candidates"]:
        lines.append(f"{r['name'][:27]:<28}{r['parameter']:<7}{r['expected_variance_reduction']:>15.3g}"
                     f"{r['mc_se']:>10.2g}{r['perfect_information_bound']:>11.3g}{r['expected_ci95_width']:>11.3g}"
                     f"{r['per_cost']:>13.3g}")
    for key in ("best_pair", "best_set"):
        b = doc.get(key)
        if b:
            lines.append(f"{key}: {' + '.join(b['names'])} (cost {b['cost']:g}): Var reduction "
                         f"{b['expected_variance_reduction']:.3g} +- {b['mc_se']:.2g}, 95% width "
                         f"{b['expected_ci95_width']:.3g} (fitted jointly)")
    lines += [f"note: {n}" for n in doc.get("notes", [])]
    return "\n".join(lines)


@click.command("rank", short_help="Which measurement would narrow the Jv interval most.")
@study_options
@click.option("--samples", type=int, default=None, help="Prior draws (at least 4096).")
@click.option("--method", type=click.Choice(["auto", "regression", "importance"]), default="auto",
              help="EVSI estimator: regression on the simulated reading, likelihood reweighting, or auto.")
@click.option("--from-prior", "from_prior", is_flag=True,
              help="Rank from the prior even when the study has observations (no MCMC).")
@handle_errors
def command(study: str, seed: int | None, as_json: bool, out: str | None, quiet: bool, samples: int | None,
            method: str, from_prior: bool) -> None:
    """Expected posterior variance and 95% interval width of the output after each candidate
    measurement, the perfect-information bound, narrowing per cost, and the best pair / set within
    the budget (fitted jointly). With [[observations]] the figures start from the current posterior
    (thinned MCMC draws; exit 3 if the chains fail the gate) unless --from-prior is given."""
    from uncertainty.analyses.rank import rank
    from uncertainty.study import load_study

    result = rank(load_study(study), seed=seed, samples=samples, method=method, from_prior=from_prior)
    if out:
        import os

        os.makedirs(out, exist_ok=True)
        result.to_dataframe().to_csv(os.path.join(out, "rank.csv"), index=False)
        result.plot(out)
    if as_json:
        emit_json(result.to_dict())
    elif not quiet:
        click.echo(table(result.to_dict()))
