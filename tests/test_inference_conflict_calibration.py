"""Calibration of the prior-data conflict check and the wording of the power-scaling patterns.

With many readings drawn from the prior predictive itself (no conflict), a per-reading test at level a
raises a false alarm far more often than a; the single-step max-T adjustment (Westfall & Young 1993,
Resampling-Based Multiple Testing, Wiley; from memory) keeps the family-wise rate at a. Checked by
simulation with numpy only: typical value ~ N(0, 1), 30 readings ~ N(typical + subject, 1) with a
between-subject sd of 1 (an invented conflict-free model).
"""

from __future__ import annotations

import numpy as np
import pytest

from uncertainty.analyses.inference.checks import (
    PATTERNS,
    joint_tail_p,
    reconcile,
    scaling_pattern,
)

M, N_REP, N_SIM = 30, 200, 600


def _draw(rng, n):
    theta = rng.standard_normal((n, 1))
    return theta + rng.standard_normal((n, M)) + rng.standard_normal((n, M))


def test_max_t_adjustment_keeps_the_false_alarm_rate_at_its_level():
    rng = np.random.default_rng(20)
    level = 0.05    # a level with enough alarms in 600 simulations to measure the rate
    adjusted_alarm = raw_alarm = 0
    for _ in range(N_SIM):
        y = _draw(rng, 1)[0]
        raw, adj = joint_tail_p(_draw(rng, N_REP), y)
        adjusted_alarm += adj.min() < level
        raw_alarm += raw.min() < level
    se = np.sqrt(level * (1 - level) / N_SIM)
    assert abs(adjusted_alarm / N_SIM - level) < 3.5 * se, adjusted_alarm / N_SIM
    # the unadjusted rule (the smallest raw p below the level) alarms several times as often
    assert raw_alarm / N_SIM > 3 * level


def test_tail_probabilities_count_the_reading_itself():
    # a reading at the second of four values: 2 at or below, 3 at or above -> 2 * 2 / 4
    assert joint_tail_p(np.array([[0.0], [2.0], [3.0]]), np.array([1.0]))[0][0] == pytest.approx(1.0)
    assert joint_tail_p(np.array([[1.0], [2.0], [3.0]]), np.array([0.0]))[0][0] == pytest.approx(0.5)
    raw, adj = joint_tail_p(np.arange(1.0, 100.0)[:, None], np.array([1000.0]))
    assert raw[0] == pytest.approx(2 / 100) and adj[0] == pytest.approx(1 / 100)
    # a reading inside the bulk is not adjusted into a conflict
    assert joint_tail_p(np.arange(1.0, 100.0)[:, None], np.array([50.0]))[1][0] > 0.9


def test_power_scaling_patterns_have_one_sentence_each_and_meet_the_predictive_check():
    both = scaling_pattern("Pc", 0.09, 0.2)
    assert both["diagnosis"] == PATTERNS["both"] and "possible prior-data conflict" in both["sentence"]
    assert scaling_pattern("Pc", 0.09, 0.01)["diagnosis"] == PATTERNS["prior"]
    assert scaling_pattern("Pc", 0.01, 0.2)["diagnosis"] == "-"
    sens = {"Pc": {"prior": 0.09, "likelihood": 0.2, **both}}
    reconcile(sens, [{"observation": "observations[0]", "p_adjusted": 0.27, "conflict": False}])
    assert sens["Pc"]["predictive_check"] == "none" and "0.27" in sens["Pc"]["sentence"]
    sens = {"Pc": {"prior": 0.09, "likelihood": 0.2, **both}}
    reconcile(sens, [{"observation": "observations[0]", "p_adjusted": 0.002, "conflict": True}])
    assert sens["Pc"]["predictive_check"] == "conflict"
