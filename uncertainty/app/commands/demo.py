"""`fluidshift demo [--out DIR]`: the bundled demo study (invented scenario), end to end."""

from __future__ import annotations

import click

from uncertainty.app.commands.common import handle_errors
from uncertainty.app.commands.run import execute
from uncertainty.core.errors import InputError
from uncertainty.core.resources import studies_dir

DEMO = "demo.toml"


@click.command("demo")
@click.option("--out", "out", type=click.Path(file_okay=False), default="demo-results", show_default=True,
              help="Folder for the results bundle.")
@click.option("--seed", type=int, default=None, help="Override the demo study's seed.")
@click.option("--json", "as_json", is_flag=True, help="Print the results document on stdout and nothing else.")
@click.option("--quiet", is_flag=True, help="Print nothing but errors.")
@click.option("--verbose", is_flag=True, help="Show the libraries' own messages, hidden by default.")
@click.option("--force", is_flag=True, help="Recompute every section, and write into a folder that is not a bundle.")
@handle_errors
def command(out: str, seed: int | None, as_json: bool, quiet: bool, force: bool) -> None:
    """Run the bundled demo study end to end: every analysis, results bundle and HTML report.

    The demo is an invented scenario (its data are invented too) that exercises propagation,
    sensitivity, Bayesian updating, measurement ranking and trial design with modest sample
    sizes, so it finishes in a few minutes on a laptop. Open DIR/report.html afterwards.

    \b
    Examples:
      fluidshift demo
      fluidshift demo --out /tmp/demo --force
    """

    study = studies_dir() / DEMO
    if not study.is_file():
        raise InputError("the demo study is missing from this installation", file=str(study))
    execute(str(study), out, seed=seed, as_json=as_json, quiet=quiet, force=force)
