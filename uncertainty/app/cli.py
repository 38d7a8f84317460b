"""Command line: a thin click group whose commands are imported only when they are invoked.

Each command lives in ``uncertainty/app/commands/<module>.py`` as a click command named ``command``
(or a group). Keeping the imports lazy keeps ``fluidshift --help`` free of numpy-heavy, pymc and
matplotlib imports.
"""

from __future__ import annotations

import importlib
import os
import sys

import click

from uncertainty.core.errors import FluidshiftError, one_line

#: Environment set for this process (and the workers it starts) unless the user set it: numba's LLVM optimisation
#: level 1 instead of 3. nutpie compiles a model's log density through numba; for the 3-subject whole-body
#: benchmark model that took 156 s instead of 244 s, at the same cost per gradient (0.98 against 0.97 ms;
#: benchmarks/benchmark_whole_body_inference.py). Read by numba at its import, so it is set before any command
#: module is imported; level 0 was slower still to compile (over 18 min, stopped).
QUICK_COMPILE_ENV = {"NUMBA_OPT": "1"}
for _key, _value in QUICK_COMPILE_ENV.items():
    os.environ.setdefault(_key, _value)

# name -> (module under uncertainty.app.commands, one-line help shown by `fluidshift --help`)
COMMANDS: dict[str, tuple[str, str]] = {
    "filtration": ("filtration", "One deterministic evaluation of Jv with a breakdown of forces."),
    "oncotic": ("oncotic", "Colloid osmotic pressure from a protein concentration."),
    "priors": ("priors", "List prior sets or show one, each value with its origin."),
    "check": ("check", "Validate a study file and show the resolved priors."),
    "propagate": ("propagate", "Distribution of Jv and other outputs (Monte Carlo / QMC)."),
    "sensitivity": ("sensitivity", "Global sensitivity indices (Sobol', Morris, Shapley) and a ranking."),
    "infer": ("infer", "Posterior from the study's observations, with diagnostics."),
    "rank": ("rank", "Which measurement would narrow the Jv interval most."),
    "design": ("design", "Power, assurance and sample size for a trial."),
    "calibrate": ("calibrate", "Simulation-based calibration of the study's inference model."),
    "run": ("run", "Run every section of a study; results bundle and HTML report."),
    "demo": ("demo", "Run the bundled demo study (invented data) end to end."),
    "validate": ("validate", "Published measurements beside the model's predictions."),
}


class LazyGroup(click.Group):
    """A click group that imports a command's module only when that command runs."""

    def list_commands(self, ctx: click.Context) -> list[str]:
        return list(COMMANDS)

    def get_command(self, ctx: click.Context, cmd_name: str) -> click.Command | None:
        if cmd_name not in COMMANDS:
            return None
        module_name, short_help = COMMANDS[cmd_name]
        module = importlib.import_module(f"uncertainty.app.commands.{module_name}")
        command = module.command
        command.short_help = command.short_help or short_help
        return command

    def invoke(self, ctx: click.Context) -> object:
        """Run the command; bad input found while its options are parsed (a ``Count`` too large for
        memory) is reported like any other: one line on stderr and its exit status, no traceback."""
        try:
            return super().invoke(ctx)
        except FluidshiftError as exc:
            click.echo(one_line(f"fluidshift: error: {exc}"), err=True)
            sys.exit(exc.exit_code)

    def format_commands(self, ctx: click.Context, formatter: click.HelpFormatter) -> None:
        # Short help from the table above, so that --help imports no command module.
        rows = [(name, help_) for name, (_, help_) in COMMANDS.items()]
        with formatter.section("Commands"):
            formatter.write_dl(rows)


@click.group(cls=LazyGroup, context_settings={"help_option_names": ["-h", "--help"]})
@click.version_option(version=None, package_name="fluidshift", prog_name="fluidshift",
                      message="%(prog)s %(version)s")
def main() -> None:
    """fluidshift: uncertainty around net capillary filtration (Jv).

    Turns priors over the Starling quantities into a distribution of Jv, ranks the inputs
    by global sensitivity, updates the priors from observations and sizes trials.

    \b
    Examples:
      fluidshift filtration --set Pc=25 --set Pi=-2 --set pi_c=25 --set pi_i=8 \\
                            --set sigma=0.9 --set Kf=0.004
      fluidshift oncotic 7 g/dL
      fluidshift demo --out demo-results

    Research tool, not a diagnostic device.
    """
