"""`fluidshift filtration`: one deterministic evaluation of the Starling sum, with its forces."""

from __future__ import annotations

import click

from uncertainty.app.commands.common import emit_json, handle_errors
from uncertainty.core.errors import InputError

SIX = ("Pc", "Pi", "pi_c", "pi_i", "sigma", "Kf")
#: quantities --set accepts beyond the six: Pc from Pa, Pv, r; pi_c / pi_i from protein.
EXTRA = ("Pa", "Pv", "r", "Cp", "Ci")
FORCE_LABEL = {
    "Pc": "capillary hydrostatic (Pc)",
    "Pi": "interstitial hydrostatic (-Pi)",
    "pi_c": "plasma oncotic (-sigma*pi_c)",
    "pi_i": "interstitial oncotic (+sigma*pi_i)",
}


def parse_settings(settings: tuple[str, ...], basis: str, density: float) -> dict[str, float]:
    """Parse ``SYMBOL=VALUE[ UNIT]`` pairs into canonical values; bad ones raise InputError."""
    from uncertainty.core.units import to_canonical

    values: dict[str, float] = {}
    for item in settings:
        if "=" not in item:
            raise InputError("expected SYMBOL=VALUE", key="--set", value=item)
        symbol, _, text = item.partition("=")
        symbol, text = symbol.strip(), text.strip()
        if symbol not in SIX + EXTRA:
            raise InputError(f"unknown quantity '{symbol}' (known: {', '.join(SIX + EXTRA)})",
                             key="--set", value=item)
        if symbol in values:
            raise InputError(f"'{symbol}' is set twice", key="--set", value=item)
        values[symbol] = to_canonical(symbol, text, basis=basis, density=density)
    return values


def check_ranges(values: dict[str, float]) -> None:
    """Refuse values outside the physical range of each quantity."""
    limits = {"sigma": (0.0, 1.0, "must lie in 0..1"), "Kf": (0.0, None, "must be positive"),
              "pi_c": (0.0, None, "cannot be negative"), "pi_i": (0.0, None, "cannot be negative"),
              "r": (0.0, None, "must be positive"), "Cp": (0.0, None, "cannot be negative"),
              "Ci": (0.0, None, "cannot be negative")}
    for symbol, (low, high, why) in limits.items():
        if symbol not in values:
            continue
        x = values[symbol]
        strict = symbol in ("Kf", "r")
        if (x <= low if strict else x < low) or (high is not None and x > high):
            raise InputError(f"{symbol} {why}", key=symbol, value=x)


def resolve(values: dict[str, float], tissue: str | None, basis: str = "100g",
            density: float = 1.05) -> tuple[dict[str, float], dict[str, str]]:
    """Fill the six Starling quantities: derived ones first, then prior medians of ``tissue``.

    ``values`` are canonical on ``basis`` (Kf in mL/min/mmHg per 100 g or per 100 mL); prior medians
    (per 100 g) are converted to that basis at ``density`` (g/mL) before they fill a gap.
    Returns the six values and, for each, where it came from ("set", "derived", "tissue median").
    """
    from uncertainty.physiology import capillary, oncotic

    source = {k: "set" for k in values}
    out = {k: v for k, v in values.items() if k in SIX}
    if "Pc" not in out and {"Pa", "Pv", "r"} <= values.keys():
        out["Pc"] = float(capillary.mean_capillary_pressure(values["Pa"], values["Pv"], values["r"]))
        source["Pc"] = "derived from Pa, Pv, r"
    if "pi_c" not in out and "Cp" in values:
        out["pi_c"] = float(oncotic.pi_total_protein(values["Cp"]))
        source["pi_c"] = "derived from Cp"
    if "pi_i" not in out and "Ci" in values:
        out["pi_i"] = float(oncotic.pi_total_protein(values["Ci"]))
        source["pi_i"] = "derived from Ci"
    missing = [s for s in SIX if s not in out]
    if missing and tissue:
        from uncertainty.core.units import CANONICAL, takes_basis, to_canonical
        from uncertainty.priors import prior_medians

        medians = prior_medians(tissue)
        for s in missing:
            if s in medians:
                x = float(medians[s])
                if basis != "100g" and takes_basis(s):  # medians are per 100 g
                    x = to_canonical(s, x, CANONICAL[s], basis=basis, density=density)
                out[s] = x
                source[s] = f"{tissue} prior median"
        missing = [s for s in SIX if s not in out]
    if missing:
        hint = "" if tissue else " (or give --tissue to use a prior set's medians)"
        raise InputError(f"missing {', '.join(missing)}: set them with --set SYMBOL=VALUE{hint}",
                         key="--set", value=None)
    check_ranges(out)
    return out, {s: source[s] for s in SIX}


@click.command("filtration")
@click.option("--set", "settings", multiple=True, metavar="SYMBOL=VALUE",
              help="A quantity, optionally with a unit: Pc=30, 'Pi=-3 mmHg', 'Pc=4 kPa', "
                   "Kf=0.004, sigma=0.9; also Pa, Pv, r (for Pc) and Cp, Ci (g/dL, for pi_c, pi_i).")
@click.option("--tissue", default=None, help="Fill unset quantities with this prior set's medians.")
@click.option("--basis", type=click.Choice(["100g", "100mL"]), default="100g", show_default=True,
              help="Tissue basis of Kf and Jv.")
@click.option("--density", type=float, default=1.05, show_default=True,
              help="Tissue density (g/mL) for converting per 100 mL <-> per 100 g.")
@click.option("--json", "as_json", is_flag=True, help="Print one JSON document and nothing else.")
@handle_errors
def command(settings: tuple[str, ...], tissue: str | None, basis: str, density: float,
            as_json: bool) -> None:
    """One deterministic Starling evaluation: Jv = Kf [(Pc - Pi) - sigma (pi_c - pi_i)].

    Pressures in mmHg unless a unit is given, Kf in mL/min/mmHg per 100 g (or --basis 100mL).

    \b
    Examples:
      fluidshift filtration --set Pc=25 --set Pi=-2 --set pi_c=25 --set pi_i=8 \\
                            --set sigma=0.9 --set Kf=0.004
      fluidshift filtration --set "Pc=3.3 kPa" --set Cp=7 --tissue skeletal_muscle --json
    """
    from uncertainty.physiology import starling

    values = parse_settings(settings, basis, density)
    six, source = resolve(values, tissue, basis, density)
    forces = {k: float(v) for k, v in starling.forces(six["Pc"], six["Pi"], six["pi_c"], six["pi_i"],
                                                       six["sigma"]).items()}
    net = float(starling.net_pressure(six["Pc"], six["Pi"], six["pi_c"], six["pi_i"], six["sigma"]))
    jv = float(starling.filtration(six["Kf"], six["Pc"], six["Pi"], six["pi_c"], six["pi_i"], six["sigma"]))
    direction = str(starling.direction(jv))
    per = "100g" if basis == "100g" else "100mL"
    units = {"Jv": f"mL/min/{per}", "net_pressure": "mmHg", "forces": "mmHg",
             "Kf": f"mL/min/mmHg/{per}", "Pc": "mmHg", "Pi": "mmHg", "pi_c": "mmHg", "pi_i": "mmHg",
             "sigma": "1"}
    if as_json:
        emit_json({"Jv": jv, "net_pressure": net, "direction": direction, "forces": forces,
                   "inputs": six, "sources": source, "units": units})
        return
    total = sum(abs(v) for v in forces.values())
    tiny = abs(net) < 1e-9 * max(total, 1.0)
    click.echo(f"{'force':<38}{'mmHg':>9}{'direction':>11}{'share':>8}{'of net':>9}")
    for key, value in forces.items():
        sign = "outward" if value > 0 else ("inward" if value < 0 else "none")
        share = f"{100 * abs(value) / total:.0f}%" if total > 0 else "-"
        of_net = "-" if tiny else f"{100 * value / net:.0f}%"
        click.echo(f"{FORCE_LABEL[key]:<38}{value:>9.2f}{sign:>11}{share:>8}{of_net:>9}")
    click.echo(f"{'net pressure (sum)':<38}{net:>9.2f}{'':>19}{'' if tiny else '100%':>9}")
    click.echo("share: the force's part of all forces acting, in absolute value; of net: the signed force as a "
               "percentage of the net pressure (the column sums to 100%)")
    click.echo(f"\nJv = {jv:.4g} {units['Jv']}  ({direction}; Kf = {six['Kf']:.4g} {units['Kf']})")
    derived = [f"{k}: {v}" for k, v in source.items() if v != "set"]
    if derived:
        click.echo("from: " + "; ".join(derived))
