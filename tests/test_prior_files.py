"""The shipped data files: prior sets, conditions, instruments and example studies.

Checks that every number in priors/ names its origin beside it (DESIGN.md section 6), that quantity
names are the trade symbols of DESIGN.md section 2, that the priors are plausible (normal priors on
positive quantities with negligible mass below zero, beta means inside 0..1, lognormal where a
quantity is a positive scale), that everything loads through uncertainty.priors, and that every study
in studies/ parses and says "invented".
"""

from __future__ import annotations

import math
import re
import tomllib
from collections.abc import Iterator
from pathlib import Path
from typing import Any

import pytest
from scipy import stats

ROOT = Path(__file__).resolve().parents[1]
PRIORS = ROOT / "priors"
STUDIES = ROOT / "studies"

#: The seven tissue names fixed by DESIGN.md section 3 (priors/ layout).
TISSUES = {"skeletal_muscle", "skin_subcutis", "lung", "myocardium", "intestinal_mucosa", "brain", "glomerulus"}

#: Trade symbols of DESIGN.md section 2, plus LAP / PAP (Gaar derivation, model.py contract in
#: DEVELOPERS.md) and Pi_L0 / JL_max (lymph relation, physiology.interstitium contract).
SYMBOLS = {
    "Pc", "Pi", "pi_c", "pi_i", "pi_g", "sigma", "Kf", "Jv", "JL", "Pa", "Pv", "r", "Cp", "Ci", "PS",
    "C_tis", "L", "Pvi", "tissue_mass", "LAP", "PAP", "Pi_L0", "JL_max",
    "JL_reserve",  # lymph flow's rise above its resting flow: JL_max = resting filtrate + JL_reserve (muscle set)
    "k_AFC",  # alveolar fluid clearance rate (1/min): alveolar water of the flooded lung (physiology.lung)
    "P_imb",  # shift of the interstitial pressure-volume relation of an injured matrix (burns)
    "TPG",  # transpulmonary gradient PAP - LAP: the lung's PAP = LAP + TPG (issue 15 item 9)
    "RPF",  # renal plasma flow, an input of the glomerular form (issue 8)
    "J_epi",  # epithelial fluid into the mucosal interstitium, revised form of the intestinal mucosa
    "EVLW0",  # extravascular lung water at the reference Pi, steady lung forms (physiology.lung)
    # safety factors of the steady forms (issue 15 item 1): compliance past the break of the pressure-volume
    # curve, the break pressure, and in the lung the alveolar flooding pressure and conductance
    "C_tis_high", "Pi_break", "P_flood", "G_flood",
    "sigma_s",  # reflection coefficient of the blood-brain barrier to small solutes (crystalloid term)
    "M_lung",  # blood-free lung mass per kg predicted body weight: EVLW -> EVLWI (issue 15 item 1)
    "alpha_L", "r_S", "r_L",  # two-pore form: large-pore share of Kf, pore radii (issue 15 item 2)
    "t_el",  # whole-body form: elimination half-life of infused crystalloid (volume kinetics; issue 20)
}

#: Quantities that may be negative (DESIGN.md section 4: "Negative pressures are valid where the
#: physiology allows them (Pi)"); Pi_L0 is an interstitial pressure too.
MAY_BE_NEGATIVE = {"Pi", "Pi_L0", "Pi_break", "P_flood"}

#: Positive scale quantities that DESIGN/issue 3 want lognormal (or fixed).
LOGNORMAL = {"Kf", "PS", "C_tis", "L"}

#: Accepted kinds of origin (DESIGN.md section 6). A published source is recognised by a year.
ORIGIN_RE = re.compile(r"common practice|from memory|\b(18|19|20)\d\d\b", re.I)

PRIOR_FILES = sorted(p for p in PRIORS.glob("*.toml") if p.stem not in ("conditions", "instruments", "validation"))


def _load(path: Path) -> dict[str, Any]:
    with path.open("rb") as fh:
        return tomllib.load(fh)


def _numbers(node: Any, path: tuple[Any, ...] = (), origins: tuple[str, ...] = ()) -> Iterator[
        tuple[tuple[Any, ...], float, tuple[str, ...]]]:
    """Every numeric leaf with its key path and the origin strings of the tables enclosing it."""
    if isinstance(node, dict):
        here = origins + ((node["origin"],) if isinstance(node.get("origin"), str) else ())
        for k, v in node.items():
            yield from _numbers(v, path + (k,), here)
    elif isinstance(node, list):
        for i, v in enumerate(node):
            yield from _numbers(v, path + (i,), origins)
    elif isinstance(node, (int, float)) and not isinstance(node, bool):
        yield path, float(node), origins


def _bad_origins(doc: dict[str, Any]) -> list[str]:
    bad = []
    for path, value, origins in _numbers(doc):
        if not any(o.strip() and ORIGIN_RE.search(o) for o in origins):
            bad.append(".".join(map(str, path)) + f" = {value}")
    return bad


# --------------------------------------------------------------------------- raw files


def test_the_seven_tissue_sets_exist() -> None:
    assert {p.stem for p in PRIOR_FILES} == TISSUES


@pytest.mark.parametrize("path", sorted(PRIORS.glob("*.toml")), ids=lambda p: p.name)
def test_every_number_names_its_origin(path: Path) -> None:
    bad = _bad_origins(_load(path))
    assert not bad, f"{path.name}: numbers without an origin beside them: {bad}"


def test_origin_check_catches_a_missing_origin() -> None:
    doc = {"priors": {"Kf": {"dist": "lognormal", "median": 0.004, "gsd": 1.4, "origin": ""},
                      "Pi": {"dist": "normal", "mean": -1, "sd": 1, "origin": "looked nice"},
                      "sigma": {"dist": "beta", "mean": 0.9, "sd": 0.03, "origin": "from memory: x"},
                      "PS": {"dist": "lognormal", "median": 0.01, "gsd": 1.5, "origin": "textbook estimate"}}}
    bad = _bad_origins(doc)
    assert "priors.Kf.median = 0.004" in bad and "priors.Pi.mean = -1.0" in bad
    # DESIGN.md section 6 knows three kinds of origin; "textbook estimate" alone names none of them
    assert "priors.PS.median = 0.01" in bad
    assert not any(b.startswith("priors.sigma") for b in bad)


@pytest.mark.parametrize("path", PRIOR_FILES, ids=lambda p: p.stem)
def test_prior_set_names_and_plausibility(path: Path) -> None:
    doc = _load(path)
    assert doc["set"]["name"] == path.stem
    priors = doc["priors"]
    derived = doc.get("derived", {})
    for sym in list(priors) + list(derived):
        assert sym in SYMBOLS, f"{path.name}: {sym} is not a DESIGN.md trade symbol"
    for sym, spec in derived.items():
        # an input is a prior, or another derived quantity (the lung's Pc reads PAP = LAP + TPG)
        assert all(i in priors or (i in derived and i != sym) for i in spec["inputs"]), (sym, spec["inputs"])
    for row in doc.get("correlations", []):
        assert set(row["pair"]) <= SYMBOLS and -1 < row["rho"] < 1
    for sym, decl in priors.items():
        decl = decl.get("from_protein", decl)
        dist = decl["dist"]
        if dist == "normal" and sym not in MAY_BE_NEGATIVE:
            # DESIGN.md section 4: a normal prior on a positive quantity needs mass below zero < 1e-6
            assert stats.norm.cdf(0.0, decl["mean"], decl["sd"]) < 1e-6, (path.name, sym)
        if dist == "beta":
            m, s = decl["mean"], decl["sd"]
            assert 0 < m < 1 and s * s < m * (1 - m), (path.name, sym)
        if sym in LOGNORMAL:
            assert dist == "lognormal" and decl["gsd"] > 1, (path.name, sym)
        if sym == "sigma":
            assert dist in ("beta", "fixed", "uniform", "triangular", "truncnormal"), path.name
        if sym == "Pa" or (sym == "Pv" and "whole_body" in doc["set"].get("models", [])):
            # common practice: arterial and (supine peripheral) venous pressures are positive; an additive
            # between-subject sd let hierarchical fits whose shared spread widened put subjects at negative
            # pressures (Pv -8 to -21 mmHg, Pa -19 mmHg), so these layers are on a log scale (cv)
            assert set(decl.get("between_subject", {"cv": 0})) == {"cv"}, (path.name, sym)
    # every quantity the classic form needs, Pc as a prior or derived
    assert {"Kf", "Pi", "pi_c", "pi_i", "sigma"} <= set(priors), path.name
    assert "Pc" in priors or "Pc" in derived, path.name
    models = doc["set"].get("models", ["classic", "steady_state", "revised"])
    if "steady_state" in models:
        assert {"PS", "C_tis", "L", "Pi_L0"} <= set(priors), path.name


def test_tissue_specific_statements() -> None:
    glom = _load(PRIORS / "glomerulus.toml")["set"]
    # issue 8: the glomerulus set offers the glomerular form; never the lymph-balance forms
    assert "not uniform" in glom["description"] and glom["models"] == ["classic", "glomerular"]
    gut = _load(PRIORS / "intestinal_mucosa.toml")["set"]["description"]
    assert "flushes interstitial protein" in gut and "sustained" in gut.lower()
    lung = _load(PRIORS / "lung.toml")
    assert lung["derived"]["Pc"]["rule"] == "gaar" and lung["derived"]["Pc"]["fraction"] == 0.4
    # issue 15 item 9: PAP = LAP + TPG (derived), so no subject has PAP below LAP
    assert {"LAP", "TPG"} <= set(lung["priors"]) and "Pc" not in lung["priors"] and "PAP" not in lung["priors"]
    assert lung["derived"]["PAP"]["rule"] == "transpulmonary" and lung["derived"]["Pc"]["inputs"] == ["LAP", "PAP"]


def test_condition_and_instrument_names() -> None:
    conds = _load(PRIORS / "conditions.toml")["conditions"]
    assert {"heart_failure_left", "heart_failure_right", "sepsis", "burns", "lymphatic_obstruction",
            "hypoproteinaemia", "venous_congestion", "posture"} <= set(conds)
    for name, c in conds.items():
        assert c["label"] and c["note"], name
        assert set(c.get("applies_to", [])) <= TISSUES, name
        for row in c["modify"]:
            assert row["parameter"] in SYMBOLS, (name, row["parameter"])
            assert row.get("origin"), (name, row["parameter"])
    # Lymphatic obstruction: the pi_i change is centred near zero and wide (Bates, Levick & Mortimer
    # 1994 J Physiol 477:355: oedema pi_i slightly lower, not higher, than the control arm).
    rows = {r["parameter"]: r for r in conds["lymphatic_obstruction"]["modify"]}
    assert abs(rows["pi_i"]["shift"]) < rows["pi_i"]["extra_sd"]
    # Low protein: pi_i falls too (Koomans et al. 1985 Nephron 40:391).
    rows = {r["parameter"]: r for r in conds["hypoproteinaemia"]["modify"]}
    assert rows["pi_i"]["multiply"] < 1
    insts = _load(PRIORS / "instruments.toml")["instruments"]
    for name, i in insts.items():
        assert i["measures"] in SYMBOLS and i["cost"] > 0 and ("sd" in i) != ("cv" in i), name
        assert set(i.get("tissues", [])) <= TISSUES, name
    # the wick / implanted-osmometer disagreement (Noddeland et al. 1982) is declared as bias priors
    assert insts["wick_fluid"]["bias"]["mean"] > insts["implanted_osmometer"]["bias"]["mean"]
    assert insts["servo_null_micropipette"]["tissues"] == ["skin_subcutis"]


def test_posture_shift_matches_rho_g_h() -> None:
    # hydrostatic pressure of a blood column: rho g h with rho 1.05 g/mL; 1 mmHg = 133.322 Pa
    # (common practice, definition of the mmHg); 30 cm default height from the file.
    c = _load(PRIORS / "conditions.toml")["conditions"]["posture"]
    h_cm = c["height"]["value"]
    expected = 1050 * 9.80665 * (h_cm / 100) / 133.322
    for row in c["modify"]:
        assert row["shift"] == pytest.approx(expected, rel=5e-3)
        assert row["per_cm"] * h_cm == pytest.approx(row["shift"], rel=5e-3)


# --------------------------------------------------------------------------- through the loaders


def test_every_set_loads() -> None:
    from uncertainty import priors

    assert set(priors.list_prior_sets()) == TISSUES
    for name in TISSUES:
        s = priors.load_prior_set(name)
        assert s.name == name and s.priors
        for p in s.priors.values():
            assert p.origin, (name, p.symbol)


def test_every_condition_applies_to_its_tissues() -> None:
    from uncertainty import priors

    conds = priors.load_conditions()
    assert len(conds) >= 8
    for cname, cond in conds.items():
        for tissue in cond.applies_to or sorted(TISSUES):
            s = priors.load_prior_set(tissue)
            notes: list[str] = []
            out = cond.apply(s, notes=notes)
            changed = [k for k in out if out[k] is not s.priors.get(k)]
            assert changed or notes, (cname, tissue)


def test_every_instrument_loads() -> None:
    from uncertainty import priors

    insts = priors.load_instruments()
    assert len(insts) >= 8
    for inst in insts.values():
        assert (inst.sd is None) != (inst.cv is None) and inst.origin


def test_medians_agree_with_published_values() -> None:
    from uncertainty import priors
    from uncertainty.physiology.starling import filtration

    m = priors.prior_medians("skeletal_muscle")
    # forearm venous-occlusion Pc 17.0 +/- 1.6 mmHg (SE, n = 6): Perry et al. 1986 J Appl Physiol 60:2114
    assert 15.0 < m["Pc"] < 21.0
    # serum colloid osmotic pressure 26.9 (SD 4.1) mmHg: Noddeland 1982 Scand J Clin Lab Invest 42:123
    assert abs(m["pi_c"] - 26.9) < 4.1
    lung = priors.prior_medians("lung")
    # Gaar et al. 1967: Pc = LAP + 0.4 (PAP - LAP)
    assert lung["Pc"] == pytest.approx(lung["LAP"] + 0.4 * (lung["PAP"] - lung["LAP"]))
    g = priors.prior_medians("glomerulus")
    jv = float(filtration(g["Kf"], g["Pc"], g["Pi"], g["pi_c"], g["pi_i"], g["sigma"]))
    # textbook estimate: GFR about 125 mL/min for both kidneys (about 0.3 kg: 3 x 100 g)
    assert jv * 3 == pytest.approx(125.0, rel=0.1)


# --------------------------------------------------------------------------- studies


STUDY_FILES = sorted(STUDIES.rglob("*.toml"))


def test_there_are_example_studies() -> None:
    names = {p.stem for p in STUDY_FILES}
    assert {"forearm_volunteers", "septic_shock_cohort", "arm_after_node_surgery", "demo"} <= names


@pytest.mark.parametrize("path", STUDY_FILES, ids=lambda p: p.name)
def test_study_parses_and_says_invented(path: Path) -> None:
    text = path.read_text()
    doc = tomllib.loads(text)
    study = doc["study"]
    assert "invented" in (study.get("title", "") + study.get("description", "")).lower()
    assert any(line.lstrip().startswith("#") and "invented" in line.lower() for line in text.splitlines())
    for obs in doc.get("observations", []):
        if "file" in obs:
            assert (path.parent / obs["file"]).is_file(), obs["file"]


def test_demo_csvs_say_invented_in_the_generator() -> None:
    gen = STUDIES / "data" / "make_demo_data.py"
    assert gen.is_file() and "invented" in gen.read_text().split('"""')[1].lower()
    csvs = sorted((STUDIES / "data").glob("*.csv"))
    assert csvs
    for c in csvs:  # no comment lines inside the CSVs (the loaders read plain tables): the name says it
        assert "invented" in c.name, c.name


@pytest.mark.parametrize("path", STUDY_FILES, ids=lambda p: p.name)
def test_study_loads(path: Path) -> None:
    study = pytest.importorskip("uncertainty.study")
    s = study.load_study(path)
    assert s.tissue in TISSUES and math.isfinite(float(s.seed))


def test_demo_data_regenerates_identically(tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    import importlib.util

    spec = importlib.util.spec_from_file_location("make_demo_data", STUDIES / "data" / "make_demo_data.py")
    mod = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(mod)
    monkeypatch.setattr(mod, "HERE", tmp_path)
    mod.main()
    for c in sorted((STUDIES / "data").glob("*.csv")):
        assert (tmp_path / c.name).read_text() == c.read_text(), c.name


def test_posture_height_rescales_the_shift() -> None:
    # rho g h of blood (common practice: rho 1.05 g/mL, 1 mmHg = 133.322 Pa): 45 cm below the heart
    # raises Pa and Pv by about 34.8 mmHg; without posture_height the file's 30 cm applies.
    from uncertainty.study import Study

    base = {"tissue": "skeletal_muscle"}
    plain = Study.from_dict({"study": base})
    default = Study.from_dict({"study": {**base, "conditions": ["posture"]}})
    tall = Study.from_dict({"study": {**base, "conditions": ["posture"], "posture_height": "45 cm"}})
    expected = 1050 * 9.80665 * 0.45 / 133.322
    for sym in ("Pa", "Pv"):
        rise = tall.priors[sym].mean() - plain.priors[sym].mean()
        assert rise == pytest.approx(expected, rel=5e-3)
        assert default.priors[sym].mean() - plain.priors[sym].mean() == pytest.approx(expected * 30 / 45, rel=5e-3)
