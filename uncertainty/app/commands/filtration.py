"""`fluidshift filtration`: one deterministic evaluation of the Starling sum, with its forces."""

from __future__ import annotations

from collections.abc import Sequence
from typing import Any

import click

from uncertainty.app.commands.common import emit_json, handle_errors
from uncertainty.core.errors import InputError
from uncertainty.core.units import CANONICAL, takes_basis, to_canonical
from uncertainty.physiology import capillary, oncotic, starling
from uncertainty.priors import load_conditions, load_prior_set
from uncertainty.priors.derived import computation_order

SIX = ("Pc", "Pi", "pi_c", "pi_i", "sigma", "Kf")
#: quantities --set accepts beyond the six: Pc from Pa, Pv, r; pi_c / pi_i from protein.
EXTRA = ("Pa", "Pv", "r", "Cp", "Ci")
#: the inputs Pc is derived from (Pappenheimer & Soto-Rivera 1948 resistance-ratio relation)
PC_INPUTS = ("Pa", "Pv", "r")
FORCE_LABEL = {
    "Pc": "capillary hydrostatic (Pc)",
    "Pi": "interstitial hydrostatic (-Pi)",
    "pi_c": "plasma oncotic (-sigma*pi_c)",
    "pi_i": "interstitial oncotic (+sigma*pi_i)",
}


def parse_settings(settings: tuple[str, ...], basis: str, density: float) -> dict[str, float]:
    """Parse ``SYMBOL=VALUE[ UNIT]`` pairs into canonical values; bad ones raise InputError."""

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


def tissue_medians(tissue: str, conditions: Sequence[str] = (),
                   notes: list[str] | None = None) -> tuple[dict[str, float], dict[str, Any]]:
    """Prior medians of a tissue's prior set after ``conditions`` (priors/conditions.toml), in order.

    Parameters
    ----------
    tissue : str
        A prior set in priors/ (e.g. ``skeletal_muscle``).
    conditions : sequence of str
        Condition names applied to the set's priors, in order, as ``[study] conditions`` would.
    notes : list of str, optional
        Receives the conditions' notes (a change skipped because the tissue has no such prior).

    Returns
    -------
    dict of str to float
        Median of every quantity, canonical units (per 100 g), derived ones (Pc) evaluated at the
        medians of their inputs.
    dict of str to Derivation
        The set's derivations after the conditions (``Pc`` from Pa, Pv, r or from LAP, PAP).

    Raises
    ------
    InputError
        An unknown condition, one listed twice, or one that does not apply to ``tissue`` (exit 2).
    """

    pset = load_prior_set(tissue)
    priors = dict(pset.priors)
    derived = dict(pset.derived)
    table = load_conditions() if conditions else {}
    for i, name in enumerate(conditions):
        key = f"--conditions[{i}]"
        if name in conditions[:i]:
            raise InputError("condition listed twice", key=key, value=name)
        cond = table.get(name)
        if cond is None:
            raise InputError(f"unknown condition (known: {', '.join(sorted(table))})", key=key, value=name)
        if cond.applies_to is not None and tissue not in cond.applies_to:
            raise InputError(f"condition {name} applies to {', '.join(cond.applies_to)} only", key=key, value=name)
        priors = cond.apply(priors, tissue=tissue, notes=notes, derived=derived, density=pset.density)
    out = {s: float(p.median()) for s, p in priors.items()}
    for target, d in computation_order(derived).items():
        out[target] = float(d.compute(out))
    return out, derived


def resolve(values: dict[str, float], tissue: str | None, basis: str = "100g",
            density: float = 1.05, conditions: Sequence[str] = (),
            notes: list[str] | None = None) -> tuple[dict[str, float], dict[str, str]]:
    """Fill the six Starling quantities: derived ones first, then prior medians of ``tissue``.

    ``values`` are canonical on ``basis`` (Kf in mL/min/mmHg per 100 g or per 100 mL); prior medians
    (per 100 g, after ``conditions``) are converted to that basis at ``density`` (g/mL) before they fill
    a gap. Pc comes from Pa, Pv and r when any of them is set and Pc is not: the ones not set are the
    tissue's medians (the tissue's own Pc derivation, with any condition's change of it), or all three
    must be set without a tissue.

    Parameters
    ----------
    values : dict of str to float
        The ``--set`` values, canonical units.
    tissue : str or None
        Prior set whose medians fill unset quantities.
    basis : str
        ``100g`` or ``100mL``: basis of Kf and Jv.
    density : float
        Tissue density, g/mL.
    conditions : sequence of str
        Conditions applied to the tissue's priors before their medians are taken (needs ``tissue``).
    notes : list of str, optional
        Receives the conditions' notes.

    Returns
    -------
    dict of str to float
        Pc, Pi, pi_c, pi_i (mmHg), sigma (1), Kf (mL/min/mmHg per basis).
    dict of str to str
        For each of the six, where its value came from ("set", "derived from ...", "<tissue> prior
        median").

    Raises
    ------
    InputError
        A quantity that cannot be filled, a value outside its range, conditions without a tissue or an
        unknown condition (exit 2).
    """

    if conditions and not tissue:
        raise InputError("--conditions modify a tissue's priors: give --tissue too", key="--conditions",
                         value=",".join(conditions))
    medians, derived = tissue_medians(tissue, conditions, notes) if tissue else ({}, {})
    label = f"{tissue} prior median" + (f" ({', '.join(conditions)})" if conditions else "")
    source = {k: "set" for k in values}
    out = {k: v for k, v in values.items() if k in SIX}
    pressures = [k for k in PC_INPUTS if k in values]
    if "Pc" not in out and pressures:
        d = derived.get("Pc")
        if d is not None and d.inputs == PC_INPUTS and all(k in medians for k in PC_INPUTS):
            vals = {k: values.get(k, medians[k]) for k in PC_INPUTS}
            out["Pc"] = float(d.compute(vals))
            filled = [k for k in PC_INPUTS if k not in values]
            source["Pc"] = f"derived from {', '.join(PC_INPUTS)}" + (
                f" ({', '.join(filled)}: {label})" if filled else "")
        elif set(PC_INPUTS) <= values.keys():
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
        for s in missing:
            if s in medians:
                x = float(medians[s])
                if basis != "100g" and takes_basis(s):  # medians are per 100 g
                    x = to_canonical(s, x, CANONICAL[s], basis=basis, density=density)
                out[s] = x
                source[s] = label
        missing = [s for s in SIX if s not in out]
    if missing:
        hint = "" if tissue else " (or give --tissue to use a prior set's medians)"
        if "Pc" in missing and pressures:
            hint += "; Pc is derived only when Pa, Pv and r are all set (or filled from --tissue)"
        raise InputError(f"missing {', '.join(missing)}: set them with --set SYMBOL=VALUE{hint}",
                         key="--set", value=None)
    check_ranges(out)
    return out, {s: source[s] for s in SIX}


def unused_settings(values: dict[str, float], source: dict[str, str], tissue: str | None) -> list[str]:
    """A warning for every ``--set`` quantity that the evaluation does not use.

    Parameters
    ----------
    values : dict of str to float
        The ``--set`` values (canonical units).
    source : dict of str to str
        Where each of the six came from (``resolve``).
    tissue : str or None
        The ``--tissue`` prior set.

    Returns
    -------
    list of str
        One line per unused quantity, saying why (e.g. Pa set but Pc set directly).
    """
    out = []
    for sym in values:
        if sym in SIX:
            continue
        if sym in PC_INPUTS:
            if source["Pc"].startswith("derived from Pa"):
                continue
            why = ("Pc is set directly" if source["Pc"] == "set" else
                   "Pc needs Pa, Pv and r: set all three, or give --tissue to fill the others" if not tissue else
                   f"the {tissue} prior set does not derive Pc from Pa, Pv and r")
        elif sym == "Cp":
            if source["pi_c"] == "derived from Cp":
                continue
            why = "pi_c is set directly"
        else:  # Ci
            if source["pi_i"] == "derived from Ci":
                continue
            why = "pi_i is set directly"
        out.append(f"--set {sym} is not used: {why}")
    return out


@click.command("filtration")
@click.option("--set", "settings", multiple=True, metavar="SYMBOL=VALUE",
              help="A quantity, optionally with a unit: Pc=30, 'Pi=-3 mmHg', 'Pc=4 kPa', "
                   "Kf=0.004, sigma=0.9; also Pa, Pv, r (for Pc) and Cp, Ci (g/dL, for pi_c, pi_i).")
@click.option("--tissue", default=None, help="Fill unset quantities with this prior set's medians.")
@click.option("--conditions", "conditions", multiple=True, metavar="NAME[,NAME]",
              help="Conditions from priors/conditions.toml (e.g. sepsis) applied to the --tissue priors "
                   "before their medians fill unset quantities; repeat or separate by commas.")
@click.option("--basis", type=click.Choice(["100g", "100mL"]), default="100g", show_default=True,
              help="Tissue basis of Kf and Jv.")
@click.option("--density", type=float, default=1.05, show_default=True,
              help="Tissue density (g/mL) for converting per 100 mL <-> per 100 g.")
@click.option("--json", "as_json", is_flag=True, help="Print one JSON document and nothing else.")
@handle_errors
def command(settings: tuple[str, ...], tissue: str | None, conditions: tuple[str, ...], basis: str,
            density: float, as_json: bool) -> None:
    """One deterministic Starling evaluation: Jv = Kf [(Pc - Pi) - sigma (pi_c - pi_i)].

    Pressures in mmHg unless a unit is given, Kf in mL/min/mmHg per 100 g (or --basis 100mL).

    \b
    Examples:
      fluidshift filtration --set Pc=25 --set Pi=-2 --set pi_c=25 --set pi_i=8 \\
                            --set sigma=0.9 --set Kf=0.004
      fluidshift filtration --set "Pc=3.3 kPa" --set Cp=7 --tissue skeletal_muscle --json
      fluidshift filtration --set Pa=68 --tissue skeletal_muscle --conditions sepsis

    A --set quantity that the evaluation does not use (Pa, Pv or r when Pc is set; Cp when pi_c is set)
    gives a warning line on stderr.
    """

    values = parse_settings(settings, basis, density)
    names = [c.strip() for item in conditions for c in item.split(",") if c.strip()]
    notes: list[str] = []
    six, source = resolve(values, tissue, basis, density, conditions=names, notes=notes)
    warnings = unused_settings(values, source, tissue)
    for w in warnings:
        click.echo(f"warning: {w}", err=True)
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
                   "inputs": six, "sources": source, "units": units, "conditions": names,
                   "warnings": warnings, "notes": notes})
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
    for n in notes:
        click.echo(f"note: {n}")
