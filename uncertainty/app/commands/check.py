"""`fluidshift check STUDY`: validate a study file and show the resolved priors (exit 2 on bad input)."""

from __future__ import annotations

import click

from uncertainty.app.commands.common import emit_json, handle_errors
from uncertainty.app.commands.priors import rows_table
from uncertainty.app.section_checks import check_study
from uncertainty.study import TOP_LEVEL, data_notes, load_study, resolved_rows


@click.command("check", short_help="Validate a study file and show the resolved priors.")
@click.argument("study", type=click.Path())
@click.option("--json", "as_json", is_flag=True, help="Print one JSON document on stdout and nothing else.")
@click.option("--quiet", is_flag=True, help="Print nothing but errors.")
@handle_errors
def command(study: str, as_json: bool, quiet: bool) -> None:
    """Validate STUDY: priors after tissue, conditions and overrides; correlations; sections; data files.
    With [[observations]] or [infer], the inference model is declared (not compiled, not sampled), so
    that whatever `infer` would refuse stops here (exit 2)."""

    s = load_study(study)
    model = check_study(s)
    rows = resolved_rows(s)
    notes = list(s.notes) + data_notes(s.observations)
    sections = [n for n in TOP_LEVEL if n not in ("study", "parameters", "correlations")
                and getattr(s, n) is not None]
    if as_json:
        doc = {"valid": True, "path": s.file, "hash": s.hash, "title": s.title, "tissue": s.tissue,
               "conditions": s.conditions, "model": s.model, "seed": s.seed,
               "tissue_mass_kg": s.tissue_mass_kg, "names": s.names, "priors": rows,
               "correlations": [list(p) for p in s.correlations], "sections": sections,
               "outputs": s.outputs(), "notes": notes, "inference_model": model}
        if s.between_correlations:  # only when declared: the document is unchanged otherwise
            doc["between_subject_correlations"] = [list(p) for p in s.between_correlations]
        emit_json(doc)
        return
    if quiet:
        return
    click.echo(f"{s.file}: valid")
    click.echo(f"title: {s.title}" if s.title else "title: -")
    click.echo(f"tissue {s.tissue}, model {s.model}, conditions: {', '.join(s.conditions) or 'none'}, "
               f"seed {s.seed}" + (f", tissue mass {s.tissue_mass_kg:g} kg" if s.tissue_mass_kg else ""))
    click.echo(rows_table(rows, with_origin=False))
    if s.correlations:
        click.echo("correlations (normal scores): " + "; ".join(f"{a}-{b} {r:g}" for a, b, r in s.correlations))
    if s.between_correlations:
        click.echo("between-subject correlations (normal scores): "
                   + "; ".join(f"{a}-{b} {r:g}" for a, b, r in s.between_correlations))
    click.echo(f"uncertain inputs: {', '.join(s.names)}")
    click.echo(f"sections: {', '.join(sections) or 'none'}")
    if model is not None:
        click.echo(f"inference model (declared, not sampled): {model['subjects']} subject(s)"
                   + (f" in groups {', '.join(model['groups'])}" if model["groups"] else "")
                   + f", {len(model['terms'])} likelihood term(s) over {model['readings']} reading(s), "
                   f"{model['free_variables']} free variable(s)")
    for n in notes:
        click.echo(f"note: {n}")
