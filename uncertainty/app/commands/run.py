"""`fluidshift run STUDY --out DIR`: every section of a study; results bundle and HTML report.

`fluidshift run A.toml B.toml ... --out DIR`: several studies, one bundle each (DIR/A, DIR/B), one
study per task of the executor (in-process, ``--workers N`` or ``--scheduler ADDRESS``)."""

from __future__ import annotations

from pathlib import Path

import click

from uncertainty.app.commands.common import emit_json, handle_errors, studies_options
from uncertainty.app.run import run, run_many
from uncertainty.core.errors import FluidshiftError, InputError
from uncertainty.core.parallel import make_executor


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


def execute(study: str, out: str, *, seed: int | None, as_json: bool, quiet: bool, force: bool,
            workers: int | None = None, scheduler: str | None = None) -> None:
    """Call uncertainty.app.run.run and print its summary or JSON (also when a gate failed); with
    ``workers`` or ``scheduler`` the sections send their tasks to a dask cluster."""

    try:
        if workers is None and scheduler is None:
            result = run(study, out, force=force, progress=not (quiet or as_json), seed=seed)
        else:
            with make_executor(workers, scheduler) as ex:
                result = run(study, out, force=force, progress=not (quiet or as_json), seed=seed, executor=ex)
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


def execute_many(studies: list[str], outs: list[str], *, seed: int | None, as_json: bool, quiet: bool, force: bool,
                 workers: int | None, scheduler: str | None) -> None:
    """Call uncertainty.app.run.run_many on an executor; print every study's summary (or one JSON
    document ``{"runs": [results.json, ...]}``), then raise the first failure, if any."""
    show = not (quiet or as_json)
    results: list = []
    try:
        with make_executor(workers, scheduler, progress=show) as ex:
            results = run_many(studies, outs, force=force, progress=show, seed=seed, executor=ex)
    except FluidshiftError as exc:
        results = list(getattr(exc, "results", None) or [])
        if not results:
            raise
        _print_many(results, as_json, quiet)
        raise
    _print_many(results, as_json, quiet)


def _print_many(results: list, as_json: bool, quiet: bool) -> None:
    if as_json:
        emit_json({"runs": [None if r is None else r.to_dict() for r in results]})
        return
    for r in results:
        print_summary(r, quiet)


@click.command("run")
@studies_options
@click.option("--force", is_flag=True, help="Recompute every section, and write into a folder that is not a bundle.")
@click.option("--workers", type=int, default=None,
              help="On a local dask cluster of N processes: several studies one per task; one study, "
                   "its sections' tasks.")
@click.option("--scheduler", default=None,
              help="On a running dask scheduler at ADDRESS: several studies one per task; one study, "
                   "its sections' tasks.")
@handle_errors
def command(studies: tuple[str, ...], seed: int | None, as_json: bool, out: str | None, quiet: bool, force: bool,
            workers: int | None, scheduler: str | None) -> None:
    """Run every analysis section of STUDY and write a results bundle.

    Sections run in the order check, propagate, sensitivity, infer (when the study has
    observations), rank, design. The bundle folder (--out, default STUDY-NAME-results) gets
    results.json, tables/*.csv, figures/*.png and *.svg, posterior.nc when inference ran, and a
    self-contained report.html. Re-running the same study into the same folder reuses sections
    whose inputs and seed are unchanged; --force recomputes them.

    One study with --workers or --scheduler: its sections run here and send their independent
    tasks (propagate's replicate chunks, sensitivity's model runs, rank's candidates, design points,
    schedule trials) to dask workers, with the in-process numbers.

    Several study files run one study per task, in-process or on dask workers (--workers,
    --scheduler; the study files and bundles must be on a file system every worker sees); each
    gets its own bundle, OUT/STUDY-NAME (default STUDY-NAME-results), with the numbers of running
    it alone. With --json: {"runs": [results.json of each study]}.

    Exit status: 0 done; 2 bad input; 3 a quality gate failed (bundle written, flagged).

    \b
    Examples:
      fluidshift run studies/demo.toml --out demo-results
      fluidshift run my-study.toml --out results --seed 7 --force
      fluidshift run a.toml b.toml c.toml --out results --workers 2
    """
    if len(studies) == 1:  # one study: its sections here, their tasks on the cluster when one is given
        study = studies[0]
        out = out or f"{Path(study).stem}-results"
        execute(study, out, seed=seed, as_json=as_json, quiet=quiet, force=force, workers=workers,
                scheduler=scheduler)
        return
    stems = [Path(s).stem for s in studies]
    clash = sorted({s for s in stems if stems.count(s) > 1})
    if clash:
        raise InputError("two study files have the same name; their bundles would collide", key="STUDY",
                         value=clash[0])
    outs = [str(Path(out) / s) if out else f"{s}-results" for s in stems]
    execute_many(list(studies), outs, seed=seed, as_json=as_json, quiet=quiet, force=force, workers=workers,
                 scheduler=scheduler)
