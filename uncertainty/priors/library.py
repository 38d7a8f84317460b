"""Prior sets: one TOML file per tissue in priors/, each value with its origin; entries and correlations.
"""

from __future__ import annotations

import dataclasses
import functools
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np

from uncertainty.core import units
from uncertainty.core.errors import UnitError, study_error
from uncertainty.core.resources import priors_dir
from uncertainty.core.toml_io import read_toml
from uncertainty.forms.catalogue import GENERAL_FORMS, MODEL_FORMS
from uncertainty.priors.declarations import (
    PROTEIN_INPUTS,
    Context,
    Prior,
    is_number,
    join_key,
    parse_prior,
)
from uncertainty.priors.derived import Derivation, computation_order, parse_derived


def parse_entry(symbol: str, decl: Any, *, ctx: Context | None = None, key: str | None = None,
                default_origin: str = "") -> tuple[dict[str, Prior], Derivation | None]:
    """Read one ``[parameters]`` / ``[priors]`` entry: a plain declaration or a ``from_protein`` one.

    Returns the priors it declares (one, or the protein concentrations) and the derivation, if any.
    """
    ctx = ctx or Context()
    key = key or symbol
    if isinstance(decl, Mapping) and "from_protein" in decl:
        extra = set(decl) - {"from_protein", "origin", "note"}
        if extra:
            k = sorted(extra)[0]
            raise study_error("a from_protein entry takes only from_protein, origin and note", ctx.file,
                       join_key(key, k), decl[k])
        if symbol not in ("pi_c", "pi_i"):
            raise study_error("from_protein derives pi_c or pi_i only", ctx.file, join_key(key, "from_protein"), symbol)
        spec = decl["from_protein"]
        fkey = join_key(key, "from_protein")
        origin = decl.get("origin", default_origin)
        if not isinstance(spec, Mapping):
            raise study_error("from_protein is a table (a declaration in g/dL)", ctx.file, fkey, spec)
        if "albumin" in spec or "globulin" in spec:
            extra = set(spec) - {"albumin", "globulin"}
            if extra:
                k = sorted(extra)[0]
                raise study_error("with albumin/globulin, from_protein takes only those two tables", ctx.file,
                           join_key(fkey, k), spec[k])
            if not ("albumin" in spec and "globulin" in spec):
                raise study_error("give both albumin and globulin (or a total-protein declaration with kind)",
                           ctx.file, fkey, sorted(spec))
            kind = "albumin_globulin"
            inputs = PROTEIN_INPUTS[(symbol, kind)]
            priors = {inputs[0]: parse_prior(inputs[0], spec["albumin"], ctx=ctx, key=join_key(fkey, "albumin"),
                                             default_origin=origin),
                      inputs[1]: parse_prior(inputs[1], spec["globulin"], ctx=ctx, key=join_key(fkey, "globulin"),
                                             default_origin=origin)}
        else:
            kind = spec.get("kind", "total")
            if kind not in ("total", "albumin"):
                raise study_error("kind is total or albumin", ctx.file, join_key(fkey, "kind"), kind)
            inner = {k: v for k, v in spec.items() if k != "kind"}
            (inp,) = PROTEIN_INPUTS[(symbol, kind)]
            priors = {inp: parse_prior(inp, inner, ctx=ctx, key=fkey, default_origin=origin)}
        if not origin:
            inner_origins = [spec.get("origin")] + [spec[k].get("origin") for k in ("albumin", "globulin")
                                                    if isinstance(spec.get(k), Mapping)]
            origin = next((o for o in inner_origins if isinstance(o, str) and o), "")
        return priors, Derivation(symbol, kind, PROTEIN_INPUTS[(symbol, kind)], origin=origin or "")
    return {symbol: parse_prior(symbol, decl, ctx=ctx, key=key, default_origin=default_origin)}, None


@dataclass
class PriorSet:
    """A tissue's priors (``priors/<name>.toml``).

    Attributes:
        name, description: the set's name (the tissue) and a sentence about it.
        basis: the basis its per-tissue values are quoted on (``"100g"`` or ``"100mL"``); values are
            stored per 100 g whatever the basis.
        density: tissue density in g/mL (with ``density_origin``).
        priors: symbol -> Prior (canonical units), including the protein concentrations that derive
            pi_c / pi_i and the pressures that derive Pc.
        derived: target -> Derivation (from_protein entries).
        correlations: (a, b, rho) normal-score correlations with their origins in ``correlation_origins``
            (typical-subject layer: uncertainty about the typical values).
        between_correlations: (a, b, rho) normal-score correlations of the between-subject layer (rows with
            ``layer = "between_subject"``: quantities coupled between people), origins in
            ``between_correlation_origins``.
        path: the file read.
    """

    name: str
    description: str = ""
    basis: str = "100g"
    density: float = 1.05
    density_origin: str = ""
    priors: dict[str, Prior] = field(default_factory=dict)
    derived: dict[str, Derivation] = field(default_factory=dict)
    correlations: list[tuple[str, str, float]] = field(default_factory=list)
    correlation_origins: list[str] = field(default_factory=list)
    between_correlations: list[tuple[str, str, float]] = field(default_factory=list)
    between_correlation_origins: list[str] = field(default_factory=list)
    path: str | None = None
    models: tuple[str, ...] = GENERAL_FORMS

    def copy(self) -> PriorSet:
        """A copy whose dictionaries and lists may be changed freely."""
        return dataclasses.replace(self, priors=dict(self.priors), derived=dict(self.derived),
                                   correlations=list(self.correlations),
                                   correlation_origins=list(self.correlation_origins),
                                   between_correlations=list(self.between_correlations),
                                   between_correlation_origins=list(self.between_correlation_origins))


#: Layers a ``[[correlations]]`` row may name: ``typical`` (the default) or ``between_subject``.
CORRELATION_LAYERS = ("typical", "between_subject")

#: TOML files in the priors folder that are not prior sets: the condition modifiers, the instruments and the
#: validation table (``uncertainty.analyses.validation``).
NOT_PRIOR_SETS = ("conditions", "instruments", "validation")


def data_dir(directory: str | Path | None) -> Path:
    if directory is not None:
        return Path(directory)

    return priors_dir()


@functools.lru_cache(maxsize=64)
def _load_prior_set_cached(path_str: str) -> PriorSet:
    path = Path(path_str)
    doc = read_toml(path)
    return prior_set_from_dict(doc, file=path_str)


def prior_set_from_dict(doc: Mapping[str, Any], *, file: Any = None, name: str | None = None) -> PriorSet:
    """Build a PriorSet from a parsed prior file (layout in DEVELOPERS.md)."""
    for k in doc:
        if k not in ("set", "priors", "derived", "correlations"):
            raise study_error("unknown section (allowed: set, priors, derived, correlations)", file, str(k), None)
    head = doc.get("set", {})
    if not isinstance(head, Mapping):
        raise study_error("[set] must be a table", file, "set", head)
    for k in head:
        if k not in ("name", "description", "basis", "density", "models", "origin", "note"):
            raise study_error("unknown key", file, f"set.{k}", head[k])
    models = head.get("models", list(GENERAL_FORMS))
    if not (isinstance(models, list) and models and all(m in MODEL_FORMS for m in models)):
        raise study_error("models lists model forms (" + ", ".join(MODEL_FORMS) + ")", file, "set.models", models)
    basis = head.get("basis", "100g")
    if basis not in ("100g", "100mL"):
        raise study_error("basis is 100g or 100mL", file, "set.basis", basis)
    dens = head.get("density", 1.05)
    density_origin = ""
    if isinstance(dens, Mapping):
        density_origin = str(dens.get("origin", ""))

        try:
            density = units.to_canonical("density", dens.get("value"), dens.get("unit"))
        except UnitError as exc:
            raise study_error(exc.reason, file, "set.density", dens.get("value")) from None
    elif is_number(dens):
        density = float(dens)
    else:
        raise study_error("density is a number (g/mL) or { value, unit, origin }", file, "set.density", dens)
    if not 0.5 < density < 3:
        raise study_error("tissue density (g/mL) out of range", file, "set.density", density)
    pset = PriorSet(name=str(head.get("name", name or "")), description=str(head.get("description", "")),
                    basis=basis, density=density, density_origin=density_origin, path=str(file) if file else None,
                    models=tuple(models))
    ctx = Context(file=file, density=density)
    entries = doc.get("priors", {})
    if not isinstance(entries, Mapping):
        raise study_error("[priors] must be a table", file, "priors", None)
    for sym, decl in entries.items():
        new, der = parse_entry(sym, decl, ctx=ctx, key=f"priors.{sym}")
        for s in new:
            if s in pset.priors:
                raise study_error("quantity declared twice", file, f"priors.{sym}", s)
        pset.priors.update(new)
        if der is not None:
            pset.derived[der.target] = der
    dsec = doc.get("derived", {})
    if not isinstance(dsec, Mapping):
        raise study_error("[derived] must be a table", file, "derived", None)
    for sym, spec in dsec.items():
        if sym in pset.priors or sym in pset.derived:
            raise study_error("a derived quantity has no prior of its own", file, f"derived.{sym}", sym)
        pset.derived[sym] = parse_derived(sym, spec, file=file, key=f"derived.{sym}")
    for sym, d in pset.derived.items():
        for inp in d.inputs:
            if inp not in pset.priors and (inp not in pset.derived or inp == sym):
                raise study_error(f"input {inp} of derived {sym} has no prior in this set", file,
                           f"derived.{sym}.inputs", inp)
    pset.derived = computation_order(pset.derived)
    rows = doc.get("correlations", [])
    if not isinstance(rows, list):
        raise study_error("[[correlations]] rows: pair = [a, b], rho, origin", file, "correlations", rows)
    for i, row in enumerate(rows):
        k = f"correlations[{i}]"
        if not isinstance(row, Mapping) or set(row) - {"pair", "rho", "origin", "note", "layer"}:
            raise study_error("a correlation row has pair = [a, b], rho, origin (and layer)", file, k, row)
        layer = row.get("layer", "typical")
        if layer not in CORRELATION_LAYERS:
            raise study_error("layer is typical (uncertainty about the typical values) or between_subject "
                              "(coupling between people)", file, f"{k}.layer", layer)
        pair, rho = row.get("pair"), row.get("rho")
        if not (isinstance(pair, list) and len(pair) == 2 and all(isinstance(p, str) for p in pair)):
            raise study_error("pair is two quantity names", file, f"{k}.pair", pair)
        if not is_number(rho) or not -1 < rho < 1:
            raise study_error("rho must lie strictly between -1 and 1", file, f"{k}.rho", rho)
        if layer == "between_subject":
            pset.between_correlations.append((pair[0], pair[1], float(rho)))
            pset.between_correlation_origins.append(str(row.get("origin", "")))
        else:
            pset.correlations.append((pair[0], pair[1], float(rho)))
            pset.correlation_origins.append(str(row.get("origin", "")))
    return pset


def list_prior_sets(directory: str | Path | None = None) -> list[str]:
    """Names of the shipped prior sets (tissues), sorted."""
    d = data_dir(directory)
    return sorted(p.stem for p in d.glob("*.toml") if p.stem not in NOT_PRIOR_SETS)


def load_prior_set(name: str, directory: str | Path | None = None) -> PriorSet:
    """The prior set of tissue ``name`` (``priors/<name>.toml``), as a fresh copy.

    Raises:
        StudyError: unknown tissue (key ``tissue``) or a malformed prior file.
    """
    d = data_dir(directory)
    if not isinstance(name, str) or not name or "/" in name or "\\" in name or name.startswith("."):
        raise study_error("unknown tissue", None, "tissue", name)
    path = d / f"{name}.toml"
    if name in NOT_PRIOR_SETS or not path.is_file():
        known = ", ".join(list_prior_sets(d)) or "none installed"
        raise study_error(f"unknown tissue (known: {known})", None, "tissue", name)
    pset = _load_prior_set_cached(str(path)).copy()
    if not pset.name:
        pset.name = name
    return pset


def prior_medians(tissue: str, directory: str | Path | None = None) -> dict[str, float]:
    """Median of every quantity of a tissue's prior set (canonical units), derived ones included.

    Derived quantities (pi_c from protein, Pc from Pa/Pv/r or LAP/PAP when Pc has no prior of its
    own) are evaluated at the medians of their inputs. Used by ``fluidshift filtration --tissue``.
    """
    pset = load_prior_set(tissue, directory)
    out = {s: p.median() for s, p in pset.priors.items()}
    for target, d in computation_order(pset.derived).items():
        out[target] = float(d.compute(out))
    return out


def prior_rows(priors: Mapping[str, Prior], derived: Mapping[str, Derivation] | None = None
               ) -> list[dict[str, Any]]:
    """Table rows (``Prior.to_row``) for each prior, then one row per derived quantity."""
    rows = [p.to_row() for p in priors.values()]
    for d in (derived or {}).values():
        rows.append({"symbol": d.target, "dist": "derived", "median": None, "ci95": None,
                     "unit": canonical_unit(d.target), "basis": None, "between_subject": None,
                     "origin": d.origin, "derivation": d.describe()})
    return rows


def canonical_unit(symbol: str) -> str:
    return units.CANONICAL.get(symbol, "")


def correlation_matrix(names: Sequence[str], pairs: Sequence[tuple[str, str, float]]) -> np.ndarray:
    """The symmetric correlation matrix over ``names`` with the given off-diagonal pairs."""
    idx = {n: i for i, n in enumerate(names)}
    c = np.eye(len(names))
    for a, b, rho in pairs:
        c[idx[a], idx[b]] = c[idx[b], idx[a]] = rho
    return c
