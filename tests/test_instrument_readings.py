"""What an instrument reads: a difference (the implanted osmometer's pi_i - Pi) or a scaled reading in its
own unit (the albumin escape rate TER in %/h from PS), the same in the loader, the measurement kind,
study resolution and rank."""

from __future__ import annotations

import textwrap
from pathlib import Path
from typing import Any

import numpy as np
import pytest
from click.testing import CliRunner

from uncertainty.analyses.inference.observations import measurement
from uncertainty.analyses.inference.problem import normalise_observations
from uncertainty.analyses.rank import candidates_of, rank
from uncertainty.app.cli import main
from uncertainty.core.errors import StudyError
from uncertainty.priors import load_instruments
from uncertainty.study import Study

# Plasma volume 44.3 mL/kg in healthy men (Haskell A et al. 1998 Acta Physiol Scand 164:277, abstract); 100 %,
# 60 min/h and 10 (100 g)/kg are unit definitions. Every 100 g of body exchanges at the tissue PS.
PV_ML_PER_KG = 44.3
HAND_SCALE = 100.0 * 60.0 * 10.0 / PV_ML_PER_KG  # (%/h) per (mL/min/100 g)


def _instrument_file(tmp_path: Path, extra: str) -> Path:
    (tmp_path / "instruments.toml").write_text(textwrap.dedent("""
        [instruments.osm]
        label = "test fixture"
        measures = "pi_i"
        sd = 1.0
        unit = "mmHg"
        origin = "test fixture"
    """) + textwrap.dedent(extra))
    return tmp_path


@pytest.mark.parametrize(("extra", "key"), [
    ('minus = "Kf"\n', "instruments.osm.minus"),       # another unit (mL/min/mmHg/100g)
    ('minus = "nonsense"\n', "instruments.osm.minus"),  # not a quantity
    ('minus = "pi_i"\n', "instruments.osm.minus"),      # itself
    ("minus = 3\n", "instruments.osm.minus"),
    ('reads = "TER"\n', "instruments.osm.scale"),       # a reading in another unit needs its scale
    ('reads = "TER"\nscale = { value = 2.0 }\n', "instruments.osm.scale.origin"),
    ('reads = "TER"\nscale = { value = -2.0, origin = "x" }\n', "instruments.osm.scale.value"),
    ('scale = { value = 2.0, origin = "x" }\n', "instruments.osm.scale"),
])
def test_loader_refuses_a_bad_reading_model(tmp_path: Path, extra: str, key: str) -> None:
    with pytest.raises(StudyError) as info:
        load_instruments(_instrument_file(tmp_path, extra))
    assert info.value.key == key


def test_loader_reads_a_difference(tmp_path: Path) -> None:
    inst = load_instruments(_instrument_file(tmp_path, 'minus = "Pi"\n'))["osm"]
    assert inst.quantities == ("pi_i", "Pi") and inst.unit == "mmHg" and inst.describe() == "pi_i - Pi (mmHg)"


def test_shipped_osmometer_reads_pi_i_minus_pi_and_escape_rate_reads_ter() -> None:
    insts = load_instruments()
    osm, ter = insts["implanted_osmometer"], insts["transcapillary_escape_rate"]
    assert osm.measures == "pi_i" and osm.minus == "Pi" and osm.bias is not None
    # the bias numbers and their source (Noddeland et al. 1982 Microvasc Res 24:104) are kept
    assert osm.bias.params == {"mean": -3.0, "sd": 2.5} and "Noddeland" in osm.bias.origin
    assert ter.measures == "PS" and ter.reads == "TER" and ter.unit == "%/h" and ter.cv is not None
    assert ter.scale == pytest.approx(HAND_SCALE, rel=1e-4) and "Haskell" in ter.scale_origin


@pytest.mark.parametrize(("pi_i", "Pi"), [(10.0, -1.0), (15.5, 2.0), (8.0, -8.5)])
def test_osmometer_true_reading_is_the_difference(pi_i: float, Pi: float) -> None:
    osm = load_instruments()["implanted_osmometer"]
    assert osm.true_reading({"pi_i": pi_i, "Pi": Pi}.__getitem__) == pytest.approx(pi_i - Pi)


def test_escape_rate_conversion_against_a_hand_calculation() -> None:
    ter = load_instruments()["transcapillary_escape_rate"]
    ps = 0.002  # mL/min/100 g, the skeletal-muscle prior median (priors/skeletal_muscle.toml)
    # 0.002 mL/min per 100 g x 700 (100 g) in a 70 kg body = 1.4 mL/min = 84 mL/h of plasma cleared of albumin,
    # out of 44.3 x 70 = 3101 mL of plasma: 2.71 %/h (normal about 5 %/h: Fleck A et al. 1985 Lancet 1:781)
    by_hand = 100.0 * (ps * 700 * 60) / (PV_ML_PER_KG * 70)
    assert ter.true_reading({"PS": ps}.__getitem__) == pytest.approx(by_hand, rel=1e-4)
    assert 1.0 < by_hand < 10.0


class _Ctx:
    """The part of the model-building context the measurement kind uses, with known values."""

    def __init__(self, values: dict[str, float], problem: Any) -> None:
        import pytensor.tensor as pt

        self.vals, self.problem = values, problem
        self.instrument_bias = {"implanted_osmometer": pt.as_tensor_variable(0.0)}  # bias held at zero
        self.extra_params: list[str] = []
        self.extra_priors: dict[str, Any] = {}
        self.terms: list[Any] = []

    def subject_index(self, obs: Any) -> int:
        return 0

    def value(self, name: str) -> Any:
        import pytensor.tensor as pt

        return pt.as_tensor_variable(np.array([self.vals[name]]))

    def add_term(self, term: Any) -> None:
        self.terms.append(term)


def test_measurement_kind_predicts_what_the_instrument_reads() -> None:
    import pymc as pm

    vals = {"pi_i": 12.0, "Pi": -2.5, "PS": 0.004}
    obs = normalise_observations([
        {"kind": "measurement", "parameter": "pi_i", "value": 14.0, "instrument": "implanted_osmometer"},
        {"kind": "measurement", "parameter": "PS", "value": 6.0, "unit": "%/h",
         "instrument": "transcapillary_escape_rate"},
    ])
    with pm.Model() as model:
        for o in obs:
            measurement.add(_Ctx(vals, None), o)
    pred = [float(model[f"obs{i}__measurement__pred"].eval(mode="FAST_COMPILE")) for i in range(2)]  # no C compile
    assert pred[0] == pytest.approx(12.0 - (-2.5))
    assert pred[1] == pytest.approx(HAND_SCALE * 0.004, rel=1e-4)


def _study(extra: dict | None = None) -> Study:
    # Jv = Kf (Pc - Pi - sigma (pi_c - pi_i)) is linear in pi_i and Pi once the rest is fixed (invented values)
    doc = {"study": {"title": "instrument rank check (invented)", "tissue": "skin_subcutis", "model": "classic",
                     "seed": 3},
           "parameters": {"Kf": 0.004, "Pc": 20.0, "pi_c": 25.0, "sigma": 0.9,
                          "pi_i": {"dist": "normal", "mean": 12.0, "sd": 2.0, "unit": "mmHg"},
                          "Pi": {"dist": "normal", "mean": -1.0, "sd": 1.0, "unit": "mmHg"}},
           "rank": {"candidates": [
               {"name": "osmometer", "parameter": "pi_i", "instrument": "implanted_osmometer"},
               {"name": "escape rate", "parameter": "PS", "instrument": "transcapillary_escape_rate"}]}}
    doc.update(extra or {})
    return Study.from_dict(doc)


def test_observation_in_percent_per_hour_resolves_to_ter() -> None:
    s = _study({"observations": [{"kind": "measurement", "parameter": "PS", "value": 0.05, "unit": "1/h",
                                  "instrument": "transcapillary_escape_rate"}]})
    ob = s.observations[0]
    assert ob.value == pytest.approx(5.0) and ob.unit == "%/h" and ob.cv == pytest.approx(0.25)


def test_rank_simulates_each_instruments_reading() -> None:
    study = _study()
    cands = {c.name: c for c in candidates_of(study)}
    draws = {"pi_i": np.array([10.0, 14.0]), "Pi": np.array([-1.0, 1.0]), "PS": np.array([0.002, 0.004])}
    assert np.allclose(cands["osmometer"].truth(draws), [11.0, 13.0])
    assert np.allclose(cands["escape rate"].truth(draws), HAND_SCALE * draws["PS"], rtol=1e-4)
    doc = rank(study, samples=4096, method="regression").to_dict()
    rows = {r["name"]: r for r in doc["candidates"]}
    # linear-Gaussian closed form (normal conditioning, common practice): reading X = pi_i - Pi + b + e with
    # b ~ N(-3, 2.5^2) (the instrument's bias prior), e ~ N(0, 1.4^2); Y = Kf (sigma pi_i - Pi) + const.
    # Reduction = Cov(Y, X)^2 / Var(X) = Kf^2 (sigma 4 + 1)^2 / (4 + 1 + 2.5^2 + 1.4^2)
    closed = 0.004**2 * (0.9 * 4 + 1) ** 2 / (4 + 1 + 2.5**2 + 1.4**2)
    got = rows["osmometer"]["expected_variance_reduction"]
    assert abs(got - closed) < 4 * rows["osmometer"]["mc_se"] + 0.1 * closed
    # PS does not enter the classic form's Jv: its reading removes (almost) nothing
    assert abs(rows["escape rate"]["expected_variance_reduction"]) < 0.05 * doc["prior"]["var"]


def test_check_refuses_an_osmometer_reading_without_an_uncertain_pi() -> None:
    path = Path(__file__).parent / "bad_studies" / "osmometer_without_Pi.toml"
    result = CliRunner().invoke(main, ["check", str(path)])
    assert result.exit_code == 2
    err = result.stderr.strip()
    assert len(err.splitlines()) == 1 and "observations[0].instrument" in err and "pi_i - Pi" in err


def test_a_reading_named_for_the_other_quantity_is_still_refused() -> None:
    with pytest.raises(StudyError) as info:
        _study({"observations": [{"kind": "measurement", "parameter": "Pi", "value": 10.8,
                                  "instrument": "implanted_osmometer"}]})
    assert info.value.key == "observations[0].instrument" and "measures pi_i, not Pi" in info.value.reason
