"""The validation table: published measurements beside the model, and the plausibility guard.

The test that matters is ``test_rows_not_marked_as_gaps_lie_inside_their_band``: it fails when the
physiology drifts away from a published measurement it used to meet. A row the model cannot meet is
marked ``known_gap`` in priors/validation.toml with its reason, never tuned away.
"""

from __future__ import annotations

import json
import math
import re

import numpy as np
import pytest
from click.testing import CliRunner

from uncertainty.analyses.propagate import WHOLE_BODY_LYMPH_L_PER_DAY, propagate
from uncertainty.analyses.validation import (
    DEFAULT_SEED,
    KINDS,
    VERDICTS,
    ValidationResult,
    load_table,
    markdown,
    parse_row,
    validate,
)
from uncertainty.app.cli import main
from uncertainty.app.validation_doc import doc_path
from uncertainty.core.errors import StudyError
from uncertainty.priors import list_prior_sets, load_conditions
from uncertainty.study import Study

TISSUES = {"skeletal_muscle", "skin_subcutis", "lung", "myocardium", "intestinal_mucosa", "brain", "glomerulus"}

#: A source names a year, or says "common practice" / "from memory" (DESIGN.md section 6).
REGENERATE = "python -m uncertainty.app.validation_doc"

ORIGIN_RE = re.compile(r"common practice|from memory|\b(18|19|20)\d\d\b", re.I)


@pytest.fixture(scope="module")
def result() -> ValidationResult:
    return validate()


def test_table_parses_with_at_least_30_rows_across_the_seven_tissues() -> None:
    rows = load_table()
    assert len(rows) >= 30
    assert {r.tissue for r in rows} == TISSUES
    assert len({r.id for r in rows}) == len(rows)


def test_every_row_names_its_source_and_band() -> None:
    for r in load_table():
        assert r.source.strip() and ORIGIN_RE.search(r.source), r.id
        assert r.band.strip(), r.id
        assert r.low <= r.high, r.id
        assert r.kind in KINDS, r.id
        if r.value is not None and math.isfinite(r.high):
            assert r.low <= r.value <= r.high or r.known_gap or "judgement" in r.band, r.id


def test_rows_name_known_tissues_conditions_and_forms() -> None:
    conditions = load_conditions()
    for r in load_table():
        assert r.tissue in list_prior_sets(), r.id
        for c in list(r.conditions) + list((r.reference or {}).get("conditions", [])):
            assert c in conditions, (r.id, c)
            assert r.tissue in (conditions[c].applies_to or []), (r.id, c)


def test_the_table_is_not_a_prior_set() -> None:
    assert "validation" not in list_prior_sets()


def test_every_row_is_predicted_or_a_known_gap(result: ValidationResult) -> None:
    for rr in result.rows:
        assert rr.verdict in VERDICTS
        if not rr.row.known_gap:
            assert not rr.error, (rr.row.id, rr.error)
            assert math.isfinite(rr.median), rr.row.id


def test_rows_not_marked_as_gaps_lie_inside_their_band(result: ValidationResult) -> None:
    outside = [(rr.row.id, rr.median, (rr.row.low, rr.row.high)) for rr in result.rows
               if not rr.row.known_gap and not rr.inside]
    assert not outside, f"rows outside their published band (physiology drifted?): {outside}"


def test_the_bundled_sepsis_problem_is_a_known_gap(result: ValidationResult) -> None:
    # issue 15, "What was found" 1: 36 L/day of filtration into 25 kg of muscle
    rr = next(r for r in result.rows if r.row.id == "skeletal_muscle.Jv_L_per_day.sepsis")
    assert rr.verdict == "known gap" and rr.median > WHOLE_BODY_LYMPH_L_PER_DAY


def test_contrasts_are_paired_draw_by_draw(result: ValidationResult) -> None:
    refs = [rr for rr in result.rows if rr.row.reference and not rr.error]
    assert refs and all(rr.paired for rr in refs)


def test_results_repeat_with_the_fixed_seed(result: ValidationResult) -> None:
    again = validate("brain")
    first = {rr.row.id: rr.median for rr in result.rows if rr.row.tissue == "brain"}
    assert {rr.row.id: rr.median for rr in again.rows} == first


def test_docs_list_every_row_with_its_current_verdict(result: ValidationResult) -> None:
    text = doc_path().read_text(encoding="utf-8")
    fresh = markdown(result)
    for rr in result.rows:
        line = next((ln for ln in text.splitlines() if ln.startswith(f"| `{rr.row.id}` |")), None)
        assert line is not None, f"{rr.row.id} missing from docs/validation.md (regenerate: {REGENERATE})"
        assert line.rstrip().endswith(f"| {rr.verdict} |"), rr.row.id
    assert text.splitlines()[:8] == fresh.splitlines()[:8]


def test_parse_row_refuses_bad_rows() -> None:
    good = {"id": "x", "quantity": "Jv", "tissue": "brain", "model": "classic", "low": 0.0, "high": 1.0,
            "unit": "mL/min/100g", "origin": "common practice: test", "band": "test"}
    assert parse_row(good, 0).high == 1.0
    assert parse_row({**good, "high": "inf"}, 0).high == math.inf
    with pytest.raises(StudyError):
        parse_row({**good, "low": 2.0}, 0)
    with pytest.raises(StudyError):
        parse_row({**good, "colour": "red"}, 0)
    with pytest.raises(StudyError):
        parse_row({k: v for k, v in good.items() if k != "origin"}, 0)
    with pytest.raises(StudyError):
        parse_row({**good, "reference": {"op": "sum"}}, 0)


def test_validate_command_json_shape() -> None:
    res = CliRunner().invoke(main, ["validate", "--tissue", "brain", "--json"])
    assert res.exit_code == 0, res.output
    doc = json.loads(res.output)
    assert set(doc) >= {"rows", "counts", "samples", "seed", "layer", "closed_gaps"}
    # every brain row of the shipped table (3 before the crystalloid-term rows of issue 15 item 2)
    assert doc["layer"] == "typical" and len(doc["rows"]) == len(load_table(tissue="brain")) == 5
    for row in doc["rows"]:
        assert set(row) >= {"id", "quantity", "tissue", "model", "conditions", "low", "high", "unit", "source",
                            "median", "ci95", "verdict", "known_gap", "kind"}
        assert row["tissue"] == "brain" and len(row["ci95"]) == 2 and row["verdict"] in VERDICTS


def test_validate_command_table_and_out(tmp_path) -> None:
    res = CliRunner().invoke(main, ["validate", "--tissue", "glomerulus", "--out", str(tmp_path), "--sources"])
    assert res.exit_code == 0, res.output
    assert "glomerulus" in res.output and "source:" in res.output
    assert {p.name for p in tmp_path.iterdir()} == {"validation.json", "validation.csv", "validation.md"}


def test_validate_command_unknown_tissue_is_bad_input() -> None:
    res = CliRunner().invoke(main, ["validate", "--tissue", "liver"])
    assert res.exit_code == 2


def test_validate_command_keeps_one_model_form() -> None:
    # the shipped whole-body rows only (the ids of priors/validation.toml); an unknown form is bad input
    doc = json.loads(CliRunner().invoke(main, ["validate", "--form", "whole_body", "--json"]).stdout)
    ids = [r["id"] for r in doc["rows"]]
    assert ids and all(i.startswith("whole_body.") for i in ids) and "whole_body.hb_ratio.donation_6h" in ids
    res = CliRunner().invoke(main, ["validate", "--form", "no_such_form"])
    assert res.exit_code == 2 and "form" in res.output


# --------------------------------------------------------------------------- plausibility guard

def _study(tissue: str, model: str, conditions: list[str], mass: str) -> Study:
    return Study.from_dict({"study": {"tissue": tissue, "model": model, "conditions": conditions,
                                      "tissue_mass": mass, "seed": 3}})


def test_organ_filtration_beyond_lymph_return_is_flagged() -> None:
    r = propagate(_study("skeletal_muscle", "classic", ["sepsis"], "25 kg"), samples=512)
    doc = r.to_dict()
    assert doc["flags"] and doc["flags"][0]["kind"] == "implausible_flux"
    flag = doc["flags"][0]
    assert flag["median"] > flag["limit"] == WHOLE_BODY_LYMPH_L_PER_DAY and flag["unit"] == "L/day"
    assert flag["source"] and any("implausible organ-level filtration" in w for w in doc["warnings"])


def test_plausible_or_glomerular_filtration_is_not_flagged() -> None:
    assert propagate(_study("skeletal_muscle", "classic", [], "1 kg"), samples=512).flags == []
    # the kidney filters about 180 L/day, reabsorbed by the tubules, not returned by lymph
    assert propagate(_study("glomerulus", "glomerular", [], "0.3 kg"), samples=512).flags == []


# --------------------------------------------------------------------------- priors show: implied ranges

def test_priors_show_gives_derived_quantities_their_implied_range() -> None:
    res = CliRunner().invoke(main, ["priors", "show", "lung", "--json"])
    assert res.exit_code == 0, res.output
    rows = {r["symbol"]: r for r in json.loads(res.output)}
    pc = rows["Pc"]
    assert pc["dist"] == "derived" and pc["implied"] is True
    # Pc = LAP + 0.4 (PAP - LAP) at the medians LAP 8, PAP 14 (lung.toml) is 10.4 mmHg
    assert pc["median"] == pytest.approx(10.4, abs=0.1)
    lo, hi = pc["ci95"]
    ilo, ihi = pc["individual"]["ci95"]
    assert ilo < lo < pc["median"] < hi < ihi  # an individual adds the between-subject spread
    # pi_c from Cp 7.0 g/dL by Landis-Pappenheimer: about 25.6 mmHg (skeletal_muscle.toml note)
    assert rows["pi_c"]["median"] == pytest.approx(25.6, abs=0.2)
    text = CliRunner().invoke(main, ["priors", "show", "lung"]).output
    assert "implied (typical subject)" in text and "implied (an individual)" in text


def test_verdicts_on_a_small_table(tmp_path) -> None:
    # invented bands around the brain's classic Jv (near 0 mL/min/100g): one met, one missed, one missed but
    # marked as a known gap, one marked as a gap although met (its mark can go)
    rows = []
    for i, (low, high, gap) in enumerate([(-1.0, 1.0, ""), (5.0, 6.0, ""), (5.0, 6.0, "invented"),
                                          (-1.0, 1.0, "invented")]):
        rows.append(f'[[row]]\nid = "r{i}"\nquantity = "Jv"\ntissue = "brain"\nmodel = "classic"\n'
                    f'low = {low}\nhigh = {high}\nunit = "mL/min/100g"\norigin = "invented for a test (common '
                    f'practice)"\nband = "invented"\nknown_gap = "{gap}"\n')
    path = tmp_path / "table.toml"
    path.write_text("\n".join(rows), encoding="utf-8")
    res = validate(path=path, samples=256)
    assert [r.verdict for r in res.rows] == ["inside", "outside", "known gap", "known gap"]
    assert res.counts() == {"inside": 1, "outside": 1, "known gap": 2}
    assert res.closed_gaps() == ["r3"]


def test_whole_body_rows_read_a_course_at_a_time_or_its_peak(tmp_path) -> None:
    # an invented table of whole-body rows on one experiment (a 450 mL bleed over 10 min, 73 kg): Hb relative to
    # rest at 60 min, the peak of the urine volume (cumulative, so its largest value is its value at the end; little
    # after a bleed, the kidneys sparing the plasma)
    # and a refused join; the medians are the typical subject's, against the numpy course at the same draws
    from uncertainty.analyses.propagate.timeline import courses_at
    from uncertainty.analyses.sampling import draw
    from uncertainty.study import Study

    head = ('tissue = "skeletal_muscle"\nmodel = "whole_body"\nbody_mass = "73 kg"\nunit = "{unit}"\n'
            'interventions = [{{ kind = "bleed", volume = "450 mL", duration = "10 min" }}]\n'
            'timeline = {{ end = "120 min", report_every = "10 min" }}\nlow = 0.0\nhigh = 2.0\n'
            'origin = "invented for a test"\nband = "invented"\n')
    rows = [("hb", "hb_ratio at 60 min", "1"), ("peak", "peak urine_volume", "mL"),
            ("join", "hb_ratio at 60 min / hb_ratio at 30 min", "1"), ("nothing", "peak Jv", "1")]
    text = "\n".join(f'[[row]]\nid = "{i}"\nquantity = "{q}"\n' + head.format(unit=u) for i, q, u in rows)
    path = tmp_path / "table.toml"
    path.write_text(text, encoding="utf-8")
    res = validate(path=path, samples=64)
    hb, peak, join, nothing = res.rows
    study = Study.from_dict(hb.row.study_document())
    sim = courses_at(study, draw(study, 64, seed=DEFAULT_SEED, layer="typical"), 120.0, 10.0)
    want = np.median(np.asarray(sim["hb_ratio"][6], dtype=float))
    assert hb.median == pytest.approx(want, rel=1e-9) and 0.9 < hb.median < 1.0 and hb.verdict == "inside"
    end = np.median(np.asarray(sim["urine_volume"][-1], dtype=float))
    assert peak.median == pytest.approx(end, rel=1e-9) and end > 0.0 and peak.row.group == "whole body"
    assert "joined" in join.error and "no such time course" in nothing.error
