"""`fluidshift run STUDY --out DIR`: every section of a study; results bundle and HTML report."""

from __future__ import annotations

from pathlib import Path

import click

from uncertainty.app.commands.common import emit_json, handle_errors, study_options
from uncertainty.app.run import run
from uncertainty.core.errors import FluidshiftError


def print_summary(result: object, quiet: bool) -> None:
    """Print the run's one-screen summary (rich) on stdout and where the bundle is."""
    if quiet or result is None:
        return
    from rich.console import Console
    from rich.panel import Panel

    lines = list(getattr(result, "summary", []))
    out = getattr(result, "out_dir", None)
    if out is not None:
        lines += ["", f"Bundle: {out}/  (results.json, tables/, figures/, report.html)",
                  f"Report: {Path(out) / 'report.html'}"]
    Console(highlight=False).print(Panel("\n".join(lines), title="fluidshift run", expand=False))


def execute(study: str, out: str, *, seed: int | None, as_json: bool, quiet: bool, force: bool) -> None:
    """Call uncertainty.app.run.run and print its summary or JSON (also when a gate failed)."""

    try:
        result = run(study, out, force=force, progress=not (quiet or as_json), seed=seed)
    except FluidshiftError as exc:
        partial = getattr(exc, "result", None)
        if partial is not None and hasattr(partial, "to_dict"):
            if as_json:
                emit_json(partial.to_dict())
            else:
                print_summary(partial, quiet)
        raise
    if as_json:
        emit_json(result.to_dict())
    else:
        print_summary(result, quiet)


@click.command("run")
@study_options
@click.option("--force", is_flag=True, help="Recompute every section, and write into a folder that is not a bundle.")
@handle_errors
def command(study: str, seed: int | None, as_json: bool, out: str | None, quiet: bool, force: bool) -> None:
    """Run every analysis section of STUDY and write a results bundle.

    Sections run in the order check, propagate, sensitivity, infer (when the study has
    observations), rank, design. The bundle folder (--out, default STUDY-NAME-results) gets
    results.json, tables/*.csv, figures/*.png and *.svg, posterior.nc when inference ran, and a
    self-contained report.html. Re-running the same study into the same folder reuses sections
    whose inputs and seed are unchanged; --force recomputes them.

    Exit status: 0 done; 2 bad input; 3 a quality gate failed (bundle written, flagged).

    \b
    Examples:
      fluidshift run studies/demo.toml --out demo-results
      fluidshift run my-study.toml --out results --seed 7 --force
    """
    out = out or f"{Path(study).stem}-results"
    execute(study, out, seed=seed, as_json=as_json, quiet=quiet, force=force)
