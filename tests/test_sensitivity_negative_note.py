"""A negative estimate of a full first-order or total index gets a note: both are ratios of variances
(Var(E[Y | X_i]) / Var(Y), E[Var(Y | X_-i)] / Var(Y)), never below zero, dependence or not."""

from __future__ import annotations

from uncertainty.analyses.sensitivity import negative_index_notes


def test_negative_full_first_order_index_is_noted():
    indices = {"Pc": {"S1": -0.03, "S1_ci": [-0.08, 0.02], "ST": 0.4, "ST_ci": [0.35, 0.45]},
               "Kf": {"S1": 0.5, "S1_ci": [0.45, 0.55], "ST": 0.6, "ST_ci": [0.55, 0.65]}}
    notes = negative_index_notes(indices, ("S1", "ST"))
    assert len(notes) == 1 and notes[0].startswith("S1 of Pc") and "Monte Carlo error" in notes[0]
