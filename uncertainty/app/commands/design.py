"""`fluidshift design STUDY`: power, assurance and sample size for a trial."""

from __future__ import annotations

import click

from uncertainty.app.commands.common import emit_json, handle_errors, study_options


def _f(x: float | None, fmt: str = ".3f") -> str:
    return "-" if x is None else format(x, fmt)


def table(doc: dict) -> str:
    """Plain-text summary and curve of a design result."""
    lines = [f"{doc['design']} design ({doc['analysis']}), endpoint {doc['endpoint']} on the {doc['scale']} scale, "
             f"alpha {doc['alpha']:g} two-sided, {doc['path']} path, {doc['trials_per_point']} trials per point",
             f"n per arm for power {doc['target_power']:g}: {_f(doc['n_per_arm'], 'd') if doc['n_per_arm'] else '-'}"
             f" enrolled ({_f(doc['n_per_arm_analysed'], 'd') if doc['n_per_arm_analysed'] else '-'} completing);"
             f" power {_f(doc['power'])} +- {_f(doc['power_mc_se'])} (noncentral t {_f(doc['power_analytic'])})"]
    if doc.get("target_assurance") is not None:
        n_a = doc["n_per_arm_assurance"]
        lines.append(f"n per arm for assurance {doc['target_assurance']:g}: {n_a if n_a else '-'} enrolled")
    if doc.get("half_width"):
        hw = doc["half_width"]
        lines.append(f"n per arm for a 95% half-width <= {hw['target']:g} with probability "
                     f"{hw['probability_target']:g}: {hw['n_per_arm'] or '-'} enrolled")
    lines.append(f"{'n/arm':>6}{'enrol':>7}{'power':>8}{'+-':>7}{'nct':>8}{'assur.':>8}{'+-':>7}{'Bayes':>8}")
    for r in doc["curve"]:
        lines.append(f"{r['n_per_arm']:>6}{r['n_enrolled']:>7}{_f(r.get('power')):>8}{_f(r.get('power_mc_se')):>7}"
                     f"{_f(r.get('power_analytic')):>8}{_f(r.get('assurance')):>8}{_f(r.get('assurance_mc_se')):>7}"
                     f"{_f(r.get('bayesian_success')):>8}")
    lines += [f"note: {n}" for n in doc.get("notes", [])]
    return "\n".join(lines)


@click.command("design", short_help="Power, assurance and sample size for a trial.")
@study_options
@click.option("--exact", is_flag=True, help="Refit every simulated trial with full MCMC (slow).")
@click.option("--trials", type=int, default=None, help="Simulated trials per design point.")
@click.option("--workers", type=int, default=None, help="Run design points on a local dask cluster of N processes.")
@click.option("--scheduler", default=None, help="Join a running dask scheduler at ADDRESS.")
@click.option("--checkpoint", type=click.Path(file_okay=False), default=None,
              help="Folder for finished design points (an interrupted run resumes).")
@click.option("--schedule", "cuff_schedule", is_flag=True,
              help="Instead of the trial: optimise the venous-cuff measurement schedule ([schedule] section, "
                   "defaults when absent); JSON keys optimised, equal_spacing, sd_ratio, prior_sd.")
@handle_errors
def command(study: str, seed: int | None, as_json: bool, out: str | None, quiet: bool, exact: bool,
            trials: int | None, workers: int | None, scheduler: str | None, checkpoint: str | None,
            cuff_schedule: bool) -> None:
    """Power of the two-sided test (simulated, with Monte Carlo error, and exact noncentral t),
    assurance over the design prior, Bayesian success, n per arm for the targets, and the curves.

    With --schedule: the cuff pressures and K reading times of a venous-cuff protocol that minimise
    the expected posterior sd of Kf and Pvi (linearised Fisher information plus the prior precision),
    and the ratio of those sds to equal spacing (sd_ratio below 1 is a gain); the [design] section
    is not needed then."""
    from uncertainty.core.errors import InputError
    from uncertainty.study import load_study

    if cuff_schedule:
        _schedule(load_study(study), seed, as_json, out, quiet)
        return
    from uncertainty.analyses.design import MAX_TRIALS, MIN_TRIALS, MIN_TRIALS_REASON, design
    from uncertainty.core.parallel import make_executor

    if trials is not None and not MIN_TRIALS <= trials <= MAX_TRIALS:
        raise InputError(f"simulated trials per point must lie between {MIN_TRIALS} and {MAX_TRIALS} "
                         f"({MIN_TRIALS_REASON})", key="--trials", value=trials)
    s = load_study(study)
    with make_executor(workers, scheduler, checkpoint_dir=checkpoint, progress=not (quiet or as_json)) as ex:
        result = design(s, seed=seed, exact=exact, executor=ex, trials=trials)
    if out:
        import os

        os.makedirs(out, exist_ok=True)
        result.to_dataframe().to_csv(os.path.join(out, "design_curve.csv"), index=False)
        result.plot(out)
    if as_json:
        emit_json(result.to_dict())
    elif not quiet:
        click.echo(table(result.to_dict()))


def schedule_table(doc: dict) -> str:
    """Plain-text summary of a schedule result: optimised against equal spacing."""
    lines = [f"venous-cuff schedule: {doc['steps']} steps of {doc['step_min']:g} min, {doc['measurements']} readings "
             f"(noise sd {doc['noise_sd']:g} mL/100g), criterion {doc['criterion']} over {', '.join(doc['targets'])}"]
    for label in ("optimised", "equal_spacing"):
        d = doc[label]
        sd = d["posterior_sd"]
        lines.append(f"{label:<14} cuff {' '.join(f'{p:g}' for p in d['pressures'])} mmHg; readings at "
                     f"{' '.join(f'{t:g}' for t in d['times'])} min; sd Kf {sd['Kf']:.3g}, sd Pvi {sd['Pvi']:.3g} mmHg")
    r = doc["sd_ratio"]
    lines.append(f"prior sd Kf {doc['prior_sd']['Kf']:.3g}, Pvi {doc['prior_sd']['Pvi']:.3g} mmHg; "
                 f"sd ratio optimised / equal spacing: Kf {r['Kf']:.3f}, Pvi {r['Pvi']:.3f}")
    lines += [f"note: {n}" for n in doc.get("notes", [])]
    return "\n".join(lines)


def _schedule(study, seed: int | None, as_json: bool, out: str | None, quiet: bool) -> None:
    from uncertainty.analyses.schedule import schedule

    result = schedule(study, seed=seed)
    if out:
        import os

        os.makedirs(out, exist_ok=True)
        result.to_dataframe().to_csv(os.path.join(out, "schedule.csv"), index=False)
        result.plot(out)
    if as_json:
        emit_json(result.to_dict())
    elif not quiet:
        click.echo(schedule_table(result.to_dict()))
