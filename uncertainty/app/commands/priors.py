"""`fluidshift priors list` / `fluidshift priors show TISSUE`: prior sets, each value with its origin."""

from __future__ import annotations

from typing import Any

import click
import numpy as np

from uncertainty.analyses.sampling import draw
from uncertainty.app.commands.common import emit_json, handle_errors
from uncertainty.core import units
from uncertainty.priors import (
    list_prior_sets,
    load_conditions,
    load_instruments,
    load_prior_set,
    prior_medians,
    prior_rows,
)
from uncertainty.study import Study

#: Draws (scrambled Sobol') and seed for the ranges derived quantities imply; fixed so the table repeats.
IMPLIED_SAMPLES = 8192
IMPLIED_SEED = 1


def _fmt(x: Any) -> str:
    if x is None:
        return "-"
    if isinstance(x, float):
        return f"{x:.4g}"
    return str(x)


def rows_table(rows: list[dict[str, Any]], *, with_origin: bool = True) -> str:
    """Plain-text table of prior rows (symbol, distribution, median, 95 % interval, unit, spread, origin)."""
    w = max([9, *(len(str(r["symbol"])) + 1 for r in rows)])   # the longest symbol and a space
    head = f"{'symbol':<{w}}{'distribution':<42}{'median':>11}{'95% interval':>24}  {'unit':<18}{'between':<12}"
    lines = [head, "-" * len(head)]
    for r in rows:
        if r["dist"] == "derived":
            desc = r.get("derivation", "derived")
            if r.get("median") is not None:
                ci = "[" + ", ".join(_fmt(x) for x in r["ci95"]) + "]"
                lines.append(f"{r['symbol']:<{w}}{'implied (typical subject)':<42}{_fmt(r['median']):>11}{ci:>24}  "
                             f"{r['unit']:<18}")
                ind = r.get("individual")
                if ind:
                    ci = "[" + ", ".join(_fmt(x) for x in ind["ci95"]) + "]"
                    lines.append(f"{'':<{w}}{'implied (an individual)':<42}{_fmt(ind['median']):>11}{ci:>24}  "
                                 f"{r['unit']:<18}")
                lines.append(f"{'':<{w}}{desc}")
            else:
                lines.append(f"{r['symbol']:<{w}}{desc}")
        else:
            params = ", ".join(f"{k}={_fmt(v)}" for k, v in (r.get("params") or {}).items())
            dist = f"{r['dist']}({params})"
            ci = "[" + ", ".join(_fmt(x) for x in r["ci95"]) + "]"
            bs = r.get("between_subject")
            bs_text = ", ".join(f"{k}={_fmt(v)}" for k, v in bs.items()) if bs else "-"
            lines.append(f"{r['symbol']:<{w}}{dist:<42}{_fmt(r['median']):>11}{ci:>24}  {r['unit']:<18}{bs_text:<12}")
        if with_origin and r.get("origin"):
            lines.append(f"{'':<{w}}origin: {r['origin']}")
    return "\n".join(lines)


def implied_ranges(tissue: str, model: str = "classic", *, samples: int = IMPLIED_SAMPLES,
                   seed: int = IMPLIED_SEED) -> dict[str, dict[str, Any]]:
    """Median and 95 % range each derived quantity of a prior set takes over its declared priors.

    The tissue's priors (with their correlations) are drawn for the typical subject (the priors'
    uncertainty) and for an individual (plus the between-subject spread), and each derivation (pi_c from
    protein, Pc from Pa, Pv and r or from LAP and PAP) is evaluated draw by draw.

    Parameters
    ----------
    tissue : str
        A prior set name.
    model : str
        The model form the in-memory study uses (the set's first by default); it decides which priors
        are drawn, never the derivations.
    samples : int
        Draws per layer (scrambled Sobol').
    seed : int
        Seed of the draws.

    Returns
    -------
    dict
        target -> ``{"median", "ci95": [lo, hi], "individual": {"median", "ci95"}, "implied": True}`` in
        the target's canonical unit.

    Raises
    ------
    StudyError
        An unknown tissue.
    """
    study = Study.from_dict({"study": {"title": f"implied ranges of {tissue}", "tissue": tissue,
                                       "model": model, "seed": seed}})
    out: dict[str, dict[str, Any]] = {}
    for layer in ("typical", "individual"):
        values = dict(draw(study, samples, seed=seed, layer=layer))
        for target, d in study.derived.items():  # in computation order: PAP before the Pc that reads it
            values[target] = d.compute(values)
            y = np.asarray(values[target], dtype=float)
            y = y[np.isfinite(y)]
            if y.size == 0:
                continue
            lo, med, hi = (float(q) for q in np.quantile(y, [0.025, 0.5, 0.975]))
            stats = {"median": med, "ci95": [lo, hi]}
            if layer == "typical":
                out[target] = {**stats, "implied": True}
            elif target in out:
                out[target]["individual"] = stats
    return out


@click.group("priors", short_help="List prior sets or show one, each value with its origin.")
def command() -> None:
    """Prior sets (tissues) shipped with fluidshift, each value with its origin."""


@command.command("list")
@click.option("--json", "as_json", is_flag=True, help="Print one JSON document on stdout and nothing else.")
@handle_errors
def list_cmd(as_json: bool) -> None:
    """List the prior sets (tissues), the conditions and the instruments."""

    sets = [load_prior_set(n) for n in list_prior_sets()]
    conditions = load_conditions()
    instruments = load_instruments()
    if as_json:
        emit_json({
            "prior_sets": [{"name": s.name, "description": s.description, "basis": s.basis,
                            "models": list(s.models)} for s in sets],
            "conditions": [{"name": c.name, "label": c.label, "applies_to": list(c.applies_to or [])}
                           for c in conditions.values()],
            "instruments": [{"name": i.name, "label": i.label, "measures": i.measures, "minus": i.minus,
                             "reads": i.describe(), "unit": i.unit}
                            for i in instruments.values()],
        })
        return
    click.echo("prior sets (tissues):")
    for s in sets:
        first = s.description.split(". ")[0].strip().rstrip(".")
        click.echo(f"  {s.name:<20}{first}")
    if conditions:
        click.echo("conditions:")
        for c in conditions.values():
            where = f"  [{', '.join(c.applies_to)}]" if c.applies_to else ""
            click.echo(f"  {c.name:<24}{c.label}{where}")
    if instruments:
        click.echo("instruments:")
        for i in instruments.values():
            click.echo(f"  {i.name:<36}{i.label}; reads {i.describe()}")


@command.command("show")
@click.argument("tissue")
@click.option("--json", "as_json", is_flag=True, help="Print one JSON document on stdout and nothing else.")
@handle_errors
def show_cmd(tissue: str, as_json: bool) -> None:
    """Show the priors of TISSUE: distribution, median, 95 % interval, unit, spread and origin."""

    pset = load_prior_set(tissue)
    rows = prior_rows(pset.priors, pset.derived)
    implied: dict[str, dict[str, Any]] = {}
    for model in pset.models:  # a derivation only some forms read (the muscle JL_max) from the first that does
        if any(r["dist"] == "derived" and r["symbol"] not in implied for r in rows):
            implied = {**implied_ranges(tissue, model), **implied}
    for r in rows:
        if r["dist"] == "derived" and r["symbol"] in implied:
            r.update(implied[r["symbol"]])
    if as_json:
        emit_json(rows)
        return
    click.echo(f"{pset.name}: {pset.description}")
    click.echo(f"basis of quoted values: per {pset.basis}; density {pset.density:g} g/mL; values below in "
               "canonical units (per 100 g)")
    click.echo(rows_table(rows))
    if implied:
        click.echo(f"implied: median and 95 % range of a derived quantity over the declared priors and their "
                   f"correlations ({IMPLIED_SAMPLES} scrambled Sobol' draws, seed {IMPLIED_SEED}); the typical "
                   "subject has the priors' uncertainty, an individual adds the between-subject spread")
    for (a, b, rho), origin in zip(pset.correlations, pset.correlation_origins, strict=False):
        click.echo(f"correlation {a}-{b}: {rho:g}  (origin: {origin})")
    for (a, b, rho), origin in zip(pset.between_correlations, pset.between_correlation_origins, strict=False):
        click.echo(f"between-subject correlation {a}-{b}: {rho:g}  (origin: {origin})")
    lines = instrument_lines(tissue)
    if lines:
        click.echo(f"instruments for {tissue} (what each reads, noise and bias in the unit of the reading):")
        for line in lines:
            click.echo(line)


def instrument_lines(tissue: str) -> list[str]:
    """Text lines describing the instruments listed for ``tissue`` (or for every tissue).

    Parameters
    ----------
    tissue : str
        A prior set's name.

    Returns
    -------
    list of str
        Per instrument: its name, what it reads (a difference such as pi_i - Pi, or a scaled reading with the
        scale's value and origin, in the canonical unit of the reading), its noise (sd in that unit, or cv,
        dimensionless) and its bias prior (mean and sd in that unit).
    """
    out = []
    medians = prior_medians(tissue)
    for inst in load_instruments().values():
        if inst.tissues is not None and tissue not in inst.tissues:
            continue
        noise = f"sd {inst.sd:g} {inst.unit}" if inst.sd is not None else f"cv {inst.cv:g}"
        bias = ""
        if inst.bias is not None:
            frozen = inst.bias.frozen()
            bias = f", bias {float(frozen.mean()):+.3g} (sd {float(frozen.std()):.3g}) {inst.unit}"
        out.append(f"  {inst.name:<36}reads {inst.describe()}; {noise}{bias}")
        if inst.reads is not None:
            at = ""
            if all(q in medians for q in inst.quantities):
                at = f"; at this set's median {inst.measures} it reads {inst.true_reading(medians.__getitem__):.3g} "
                at += inst.unit
            out.append(f"    scale {inst.scale:g} {inst.unit} per {units.CANONICAL[inst.measures]} of "
                       f"{inst.measures}{at} (origin: {inst.scale_origin})")
        if inst.minus is not None:
            out.append(f"    a study using it needs {inst.minus} uncertain or solved by its form")
    return out
