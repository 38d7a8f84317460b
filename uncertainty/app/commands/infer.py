"""`fluidshift infer STUDY`: posterior from the study's observations, with diagnostics and checks."""

from __future__ import annotations

from typing import Any

import click

from uncertainty.app.commands.common import emit_json, handle_errors, study_options
from uncertainty.core.errors import QualityGateError


def _fmt(x: Any) -> str:
    if x is None:
        return "-"
    x = float(x)
    return "nan" if x != x else f"{x:.4g}"


def _ci(block: dict[str, Any], key: str = "ci95") -> str:
    lo, hi = block[key]
    return f"[{_fmt(lo)}, {_fmt(hi)}]"


def table(doc: dict[str, Any]) -> str:
    """Plain-text summary of an inference result document."""
    u = doc["units"].get("Jv", "")
    lines = [f"Jv ({doc['level']}): mean {_fmt(doc['Jv']['mean'])} {u}, sd {_fmt(doc['Jv']['sd'])}, "
             f"95% equal-tailed {_ci(doc['Jv'])}, 95% HDI {_ci(doc['Jv'], 'hdi95')}"]
    lines.append(f"Jv typical subject: {_ci(doc['typical']['Jv'])}   new subject: "
                 f"{_ci(doc['new_subject']['Jv'])}")
    if doc["subjects"]:
        lines.append("")
        lines.append(f"{'subject':<10}{'group':<8}{'Jv mean':>11}{'95% interval':>26}")
        for sid, b in doc["subjects"].items():
            lines.append(f"{sid:<10}{b.get('group', ''):<8}{_fmt(b['Jv']['mean']):>11}{_ci(b['Jv']):>26}")
    lines.append("")
    head = f"{'quantity':<24}{'prior mean':>11}{'prior sd':>11}{'post mean':>11}{'post sd':>11}" \
           f"{'95% interval':>26}{'contraction':>13}"
    lines += [head, "-" * len(head)]
    rows = list(doc["parameters"].items()) + [(k, v) for k, v in doc["other_parameters"].items()
                                              if "prior" in v]
    for name, p in rows:
        flag = "  prior-bound" if p.get("prior_bound") else ""
        lines.append(f"{name:<24}{_fmt(p['prior']['mean']):>11}{_fmt(p['prior']['sd']):>11}"
                     f"{_fmt(p['mean']):>11}{_fmt(p['sd']):>11}{_ci(p):>26}{_fmt(p['contraction']):>13}{flag}")
    d = doc["diagnostics"]
    lines.append("")
    lines.append(f"diagnostics: R-hat max {_fmt(d['r_hat_max'])}, bulk ESS min {_fmt(d['ess_bulk_min'])}, "
                 f"tail ESS min {_fmt(d['ess_tail_min'])}, divergences {d['divergences']}, "
                 f"BFMI min {_fmt(d['bfmi_min'])}: {'passed' if d['passed'] else 'FAILED'}")
    checks = doc.get("checks", {})
    for row in checks.get("prior_data_conflict", []) if isinstance(checks.get("prior_data_conflict"), list) \
            else []:
        if row["conflict"]:
            lines.append(f"prior-data conflict: {row['observation']} ({row['label']}), tail p {_fmt(row['p_tail'])}")
    sens = checks.get("prior_sensitivity", {})
    flagged = [k for k, v in sens.items() if isinstance(v, dict) and v.get("diagnosis", "-") != "-"]
    if flagged:
        lines.append("prior-sensitive (power scaling): " + ", ".join(
            f"{k} ({sens[k]['diagnosis']})" for k in flagged))
    if "comparison" in doc:
        c = doc["comparison"]
        lines.append(f"model comparison ({c.get('method', '')}): " + ", ".join(
            f"{m} elpd {_fmt(v['elpd'])} (se {_fmt(v['se'])})" for m, v in c.get("models", {}).items())
            + (f"; preferred {c['preferred']}" if c.get("preferred") else ""))
    for n in doc["notes"]:
        lines.append(f"note: {n}")
    lines.append(f"{doc['chains']} chains x {doc['draws']} draws, sampler {doc['sampler']}, seed {doc['seed']}")
    return "\n".join(lines)


def _report(result: Any, as_json: bool, out: str | None, quiet: bool) -> None:
    if out:
        result.save(out)
        result.plot(out)
    if as_json:
        emit_json(result.to_dict())
    elif not quiet:
        click.echo(table(result.to_dict()))
        if out:
            click.echo(f"posterior.nc, tables and figures written to {out}")


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
@handle_errors
def command(study: str, seed: int | None, as_json: bool, out: str | None, quiet: bool, sampler: str | None,
            chains: int | None, draws: int | None, tune: int | None, target_accept: float | None, start: str | None,
            compare_models: bool, no_checks: bool, r_hat_max: float | None, ess_min: float | None,
            divergences_max: int | None) -> None:
    """Update the study's priors from its [[observations]]: credible intervals for Jv (individual,
    per subject, typical and new subject), prior vs posterior per quantity with contraction,
    diagnostics (R-hat, ESS, divergences, BFMI) and model checks. Exit 3 if the chains fail the
    quality gate; the posterior is saved as posterior.nc with --out. Sampler settings and gate come
    from the study's [infer] section where it has one; each flag overrides its key.

    \b
    Examples:
      fluidshift infer studies/demo.toml
      fluidshift infer studies/demo.toml --json --out demo-posterior
      fluidshift infer my-study.toml --sampler pymc --target-accept 0.99
    """
    from uncertainty.analyses.inference import infer
    from uncertainty.analyses.inference.api import settings
    from uncertainty.study import load_study

    s = load_study(study)
    gate = settings(s)["gate"]  # the study's [infer] thresholds (or the defaults), each flag overriding
    gate.update({k: v for k, v in (("r_hat_max", r_hat_max), ("ess_bulk_min", ess_min),
                                   ("divergences_max", divergences_max)) if v is not None})
    try:
        result = infer(s, sampler=sampler, seed=seed, chains=chains, draws=draws, tune=tune, gate=gate,
                       compare_models=compare_models, checks=not no_checks, target_accept=target_accept,
                       start=start)
    except QualityGateError as exc:
        if exc.result is not None:
            _report(exc.result, as_json, out, quiet)
        raise
    _report(result, as_json, out, quiet)
