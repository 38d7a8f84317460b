"""The lung's pulmonary arterial pressure through the transpulmonary gradient (issue 15 item 9).

PAP = LAP + TPG with TPG lognormal (priors/lung.toml), so no individual has PAP below LAP; Pc = LAP + 0.4
(PAP - LAP) (Gaar et al. 1967, Am J Physiol 213:910). Before, LAP and PAP were drawn independently between
subjects and about 8.5 % of individuals had PAP < LAP (issue 15).
"""

from __future__ import annotations

import numpy as np
import pytest

from uncertainty.analyses.sampling import draw
from uncertainty.forms.evaluate import evaluate
from uncertainty.priors.derived import compute_all
from uncertainty.study import Study


def _study(model: str = "classic", **extra) -> Study:
    head = {"title": "invented: transpulmonary gradient check", "tissue": "lung", "model": model, "seed": 5,
            **extra.pop("head", {})}
    return Study.from_dict({"study": head, **extra})


@pytest.mark.parametrize("conditions", [[], ["heart_failure_left"]])
def test_no_individual_has_pap_below_lap(conditions) -> None:
    s = _study(head={"conditions": conditions})
    assert "TPG" in s.priors and "PAP" in s.derived and "PAP" not in s.priors
    v = compute_all(s.derived, draw(s, 4096, seed=1, layer="individual"))
    assert np.all(v["PAP"] > v["LAP"])  # TPG > 0 in every draw (lognormal)
    np.testing.assert_allclose(v["PAP"], v["LAP"] + v["TPG"], rtol=1e-14)
    # Gaar et al. 1967: Pc lies between LAP and PAP, 0.4 of the way up
    assert np.all((v["Pc"] > v["LAP"]) & (v["Pc"] < v["PAP"]))


def test_median_pc_unchanged_by_the_reparameterisation() -> None:
    # Before: LAP 8 and PAP 14 mmHg medians gave Pc = 8 + 0.4 x 6 = 10.4 mmHg (Gaar et al. 1967). The TPG
    # median 6 mmHg keeps it; tolerance 0.3 mmHg, about the Monte Carlo error of a median of 4096 individual
    # draws (Pc sd about 2.9 mmHg: 1.25 x 2.9 / 64 = 0.06) plus the lognormal's small mean shift (judgement)
    s = _study()
    for layer in ("typical", "individual"):
        v = compute_all(s.derived, draw(s, 4096, seed=2, layer=layer))
        assert np.median(v["Pc"]) == pytest.approx(10.4, abs=0.3), layer
        assert np.median(v["PAP"]) == pytest.approx(14.0, abs=0.5), layer  # Kovacs et al. 2009: 14.0 mmHg


def test_a_study_that_declares_pap_still_works() -> None:
    # declaring PAP replaces the derivation PAP = LAP + TPG, with a note; TPG is then not an input
    s = _study(parameters={"PAP": {"dist": "normal", "mean": 20.0, "sd": 1.0, "unit": "mmHg"}})
    assert "PAP" in s.priors and "PAP" not in s.derived and "TPG" not in s.priors
    assert any("replaces the derivation PAP" in n for n in s.notes)
    out = evaluate(s, {"LAP": 8.0, "PAP": 20.0})
    assert out["Pc"] == pytest.approx(8.0 + 0.4 * 12.0)  # Gaar et al. 1967, closed form


def test_priors_show_gives_pap_its_implied_range() -> None:
    from uncertainty.app.commands.priors import implied_ranges

    r = implied_ranges("lung", samples=1024)
    assert {"PAP", "Pc"} <= set(r)
    # median near 14 mmHg (normal resting mean PAP 14.0 +/- 3.3: Kovacs G et al. 2009 Eur Respir J 34:888)
    assert r["PAP"]["median"] == pytest.approx(14.0, abs=0.5)
    lo, hi = r["PAP"]["individual"]["ci95"]
    assert lo > 5.0 and hi < 25.0  # individuals within the published normal range +/- 3 SD


def test_alveolar_water_balances_flooding_and_clearance() -> None:
    from uncertainty.physiology import lung

    # 13 %/h clearance (Ware & Matthay 2001 Am J Respir Crit Care Med 163:1376) of 0.13 mL/min/100 g flooding:
    # the alveoli hold 0.13 / (0.13 / 60) = 60 mL/100 g at steady state (closed form)
    assert lung.alveolar_water(0.13, 0.13 / 60.0) == pytest.approx(60.0)


def test_lung_floods_past_the_guyton_lindsey_threshold_not_below() -> None:
    from uncertainty.physiology import lung
    from uncertainty.priors import prior_medians

    m = prior_medians("lung")
    args = dict(Cp=m["Cp"], C_high=m["C_tis_high"], P_break=m["Pi_break"], JL_max=m["JL_max"],
                G_flood=m["G_flood"], P_flood=m["P_flood"], k_AFC=m["k_AFC"])

    def at(lap: float) -> dict:
        return lung.lung_water(m["Kf"], lap, lap + m["TPG"], m["sigma"], m["PS"], m["pi_c"], m["L"], m["Pi_L0"],
                               m["C_tis"], -3.0, m["EVLW0"], **args)

    # Guyton & Lindsey 1959 Circ Res 7:649 (abstract): no transudation below LAP about 24 mmHg, accumulation in
    # proportion to the excess above it; at the medians no flooding at 20, flooding and EVLW >= 1.3 x at 35
    normal, below, above = at(8.0), at(20.0), at(35.0)
    assert float(below["flooding"]) < 0.0125  # < 1 % of the normal lung water an hour (validation.toml band)
    assert float(above["flooding"]) > 0.0125
    assert float(above["EVLW"]) > 1.3 * float(normal["EVLW"])
