"""The whole_body form: solver accuracy against scipy's solve_ivp, conservation of water and protein, numpy
against PyTensor, the study keys ([[interventions]], [timeline], body_mass) and their refusals, propagate's
timeline entry, and the published time courses that need more than one reading of a course (each check names its
source; checks the model does not yet meet are strict xfails with the reason, never tuned away; the single
readings are rows of priors/validation.toml).
"""

from __future__ import annotations

import json
import math
from pathlib import Path

import numpy as np
import pytest
from click.testing import CliRunner
from scipy.integrate import solve_ivp
from toml_text import toml_text
from whole_body_inputs import BODY_KG, dose, params

from uncertainty.analyses.propagate import propagate
from uncertainty.app.cli import main
from uncertainty.physiology import whole_body as wb
from uncertainty.study import Study

# --- solver -----------------------------------------------------------------------------------------------

def test_rk4_agrees_with_solve_ivp_on_three_draws() -> None:
    # three different subjects (Kf and L scaled), crystalloid then a bleed; reference: DOP853 at rtol 1e-8,
    # integrated piecewise between the intervention boundaries (the rates are constant on each piece)
    body, beds, Cp0 = params(3, {"Kf": [0.6, 1.0, 1.8], "L": [1.5, 1.0, 0.7]})
    doses = dose("crystalloid", 1500.0, 30.0) + dose("bleed", 400.0, 10.0, start=60.0)
    end, every = 90.0, 10.0
    sim = wb.simulate(body, beds, Cp0, doses, end, every, max_step=0.5)
    for j in range(3):
        b = {k: (v[j] if np.ndim(v) else v) for k, v in body.items()}
        bd = {name: {k: (v[j] if np.ndim(v) else v) for k, v in p.items()} for name, p in beds.items()}
        state, rest = wb.initial_state(b, bd, Cp0[j])
        keys = list(state)
        y = np.array([float(state[k]) for k in keys])
        ref_pvc = [0.0]
        knots = [0.0, 30.0, 60.0, 70.0, end]  # where the intervention rates change
        for a, c in zip(knots[:-1], knots[1:], strict=True):
            t_eval = [t for t in np.arange(every, end + 1e-9, every) if a < t <= c]
            sol = solve_ivp(wb.rhs_vector, (a, c), y, method="DOP853", rtol=1e-8, atol=1e-8,
                            t_eval=t_eval if t_eval else None, args=(keys, doses, 0.5, b, bd, rest))
            if t_eval:
                ref_pvc += list(sol.y[keys.index("Vp")] - b["Vp0"])
            y = sol.y[:, -1] if not t_eval or t_eval[-1] == c else solve_ivp(
                wb.rhs_vector, (a, c), y, method="DOP853", rtol=1e-8, atol=1e-8,
                args=(keys, doses, 0.5, b, bd, rest)).y[:, -1]
        ours = [float(x[j]) for x in sim["plasma_volume_change"]]
        np.testing.assert_allclose(ours, ref_pvc, atol=0.05)  # mL, against changes of hundreds of mL


# Stored after the renal elimination moved to the published half-life form and infused albumin to its
# oncotic total-protein equivalent (the physiology changed, so the earlier reference of commit fc9e628 no longer
# applies), again after the muscle r prior was calibrated to the forearm Pc (median 0.101: the medians moved), and
# after the muscle and skin JL_max became the resting filtrate plus JL_reserve (the muscle median value moved from
# 0.014 to 0.019, the skin bed's ratio to it from 2.9 to 2.6);
# three subjects (Kf x 0.6/1/1.8, L x 1.5/1/0.7),
# 1500 mL crystalloid over 30 min then a 400 mL bleed over 10 min from 60 min, reported every 30 min to 120 min,
# steps of 0.5 min. A regression reference of this code, not a physiological check.
REFERENCE = {
    "plasma_volume_change": [
        [0.0, 0.0, 0.0],
        [958.2410960949378, 849.6566999252223, 680.5760030101087],
        [386.2865804744433, 266.17961925806685, 137.77040409364463],
        [63.61356215081196, 14.507258629629177, -14.427617245675265],
        [51.75874278526953, 26.977492186464588, 9.164638043745072],
    ],
    "infused_retained_fraction": [
        [math.nan, math.nan, math.nan],
        [0.6388273973966252, 0.5664377999501482, 0.45371733534007247],
        [0.2575243869829622, 0.1774530795053779, 0.09184693606242975],
        [0.05059582238363748, 0.011509420256256567, -0.011416918372472997],
        [0.0411669472392602, 0.0214027545079918, 0.007252197135328214],
    ],
    "hb_ratio": [
        [1.0, 1.0, 1.0],
        [0.8420891522072862, 0.8574319390014724, 0.8824683412053783],
        [0.9297186245988835, 0.9504890762383418, 0.9737468689586394],
        [0.9440183886789617, 0.9524366654107475, 0.9570869961702362],
        [0.9462546230180143, 0.9500500311153856, 0.9525304378361454],
    ],
    "interstitial_volume_change_muscle": [
        [0.0, -1.1368683772161603e-13, 5.684341886080802e-14],
        [165.00950029117985, 255.66148726850167, 397.11739573724276],
        [321.3243296108509, 464.29770281424965, 632.90676806644],
        [326.20015675130037, 447.8605269746063, 566.1058531699582],
        [309.9812436810379, 423.6448352587645, 535.0810914966586],
    ],
    "interstitial_volume_change_skin": [
        [2.842170943040401e-14, 0.0, 0.0],
        [74.60195946460496, 117.0550431855105, 185.1785892342681],
        [148.3482014549378, 220.7542714720463, 314.27989196631336],
        [155.47815288710615, 225.4654528048378, 308.87478682317294],
        [152.6395039913191, 225.26424249665217, 315.9522241462331],
    ],
    "urine_volume": [
        [0.0, 0.0, 0.0],
        [338.64744424046233, 314.1267700338959, 273.62801382224677],
        [717.0408885861068, 621.7684070987339, 488.04293880322234],
        [821.4969548842146, 682.1349967918255, 512.6520167135016],
        [888.909336215864, 730.5816652591068, 549.5070857760834],
    ],
    "lymph_flow": [
        [2.8654259265614774, 3.2630805772812685, 3.6421596848417312],
        [3.573643612067129, 3.989596638678519, 4.428807783172669],
        [4.225220483889823, 4.572657432593583, 4.90087349483629],
        [4.25871885595438, 4.551510255794574, 4.808267620771738],
        [4.206305914648988, 4.506859950289698, 4.776979856965134],
    ],
}


def test_simulate_matches_the_stored_reference() -> None:
    body, beds, Cp0 = params(3, {"Kf": [0.6, 1.0, 1.8], "L": [1.5, 1.0, 0.7]})
    doses = dose("crystalloid", 1500.0, 30.0) + dose("bleed", 400.0, 10.0, start=60.0)
    sim = wb.simulate(body, beds, Cp0, doses, 120.0, 30.0, max_step=0.5)
    for name, want in REFERENCE.items():
        got = np.array([np.broadcast_to(x, (3,)) for x in sim[name]], dtype=float)
        np.testing.assert_allclose(got, np.array(want), rtol=1e-10, atol=1e-10, equal_nan=True, err_msg=name)


def test_blocks_on_threads_give_the_same_numbers(monkeypatch: pytest.MonkeyPatch) -> None:
    """simulate_blocks (blocks of 4 draws here, the last one short, on 2 threads) equals one simulate call."""
    body, beds, Cp0 = params(10, {"Kf": np.linspace(0.5, 2.0, 10), "L": np.linspace(1.5, 0.7, 10)})
    doses = dose("crystalloid", 1500.0, 30.0) + dose("bleed", 400.0, 10.0, start=60.0)
    whole = wb.simulate(body, beds, Cp0, doses, 120.0, 30.0, max_step=1.0)
    monkeypatch.setattr(wb, "BLOCK_DRAWS", 4)
    blocks = wb.simulate_blocks(body, beds, Cp0, doses, 120.0, 30.0, max_step=1.0, threads=2)
    assert blocks["times_min"] == whole["times_min"]
    for name in wb.TIMELINE_UNITS:
        got = np.array(blocks[name])
        assert got.shape == (len(whole["times_min"]), 10), name
        np.testing.assert_array_equal(got, np.array([np.broadcast_to(x, (10,)) for x in whole[name]]), err_msg=name)


def test_rest_stays_at_rest() -> None:
    body, beds, Cp0 = params()
    sim = wb.simulate(body, beds, Cp0, [], 120.0, 30.0, max_step=1.0)
    for name in ("plasma_volume_change", "interstitial_volume_change_muscle", "interstitial_volume_change_skin"):
        assert abs(float(sim[name][-1][0])) < 1e-6, name
    assert abs(float(sim["hb_ratio"][-1][0]) - 1.0) < 1e-12


def _run(doses: list[wb.Dose], end: float):
    body, beds, Cp0 = params()
    state, rest = wb.initial_state(body, beds, Cp0)
    start = dict(state)
    dt, n, _ = wb.time_grid(end, 1.0, 0.5)
    given = protein = 0.0
    for i in range(n):
        rates = wb.step_rates(doses, i * dt, dt)
        state = wb._rk4(state, rates, dt, (body, beds, rest), np)
        given += rates[0] * dt
        protein += rates[1] * dt
    return body, beds, rest, start, state, given, protein


def test_water_is_conserved() -> None:
    # infused = plasma change + interstitial change + urine above basal + plasma bled (a conservation law)
    body, beds, rest, _, state, given, _ = _run(
        dose("albumin_20", 200.0, 20.0) + dose("bleed", 500.0, 15.0, start=40.0), 90.0)
    f = wb.fluxes(state, body, beds, rest)
    water = (state["Vp"] - body["Vp0"]) + f["Vx_muscle"] + f["Vx_skin"] + (state["U"] - body["u_basal"] * 90.0)
    assert float(water[0] + state["B"][0]) == pytest.approx(given, abs=1e-6)


def test_protein_is_conserved() -> None:
    # without bleeding, protein only enters (infused) and moves between plasma and interstitium
    _, _, _, start, state, _, protein = _run(dose("albumin_20", 200.0, 20.0), 90.0)
    total = [float(s["Qp"][0] + s["Qi_muscle"][0] + s["Qi_skin"][0]) for s in (start, state)]
    assert protein == pytest.approx(40.0)
    assert total[1] == pytest.approx(total[0] + protein, abs=1e-8)


def test_step_rates_deliver_the_volume() -> None:
    doses = dose("albumin_5", 1000.0, 45.0, start=2.3) + dose("bleed", 450.0, 0.0, start=7.0)
    dt = 0.5
    totals = np.sum([wb.step_rates(doses, i * dt, dt) for i in range(200)], axis=0) * dt
    assert totals == pytest.approx([1000.0, 50.0, 450.0])


def test_renal_clearance_follows_the_fluids_given() -> None:
    # closed form of the volume-weighted rule, k_r(t) = a k_r + b: crystalloid alone (1, 0), colloid alone (0, 7.1)
    # (Lee et al. 2010), 300 mL crystalloid then 100 mL albumin: (300/400, 100 x 7.1 / 400); bleeds do not enter
    cryst, alb = dose("crystalloid", 300.0, 30.0), dose("albumin_20", 100.0, 10.0, start=60.0)
    assert wb.renal_terms([], 10.0) == (1.0, 0.0)
    assert wb.renal_terms(cryst, 15.0) == pytest.approx((1.0, 0.0))
    assert wb.renal_terms(alb, 65.0) == pytest.approx((0.0, 7.1))
    assert wb.renal_terms(cryst + alb, 120.0) == pytest.approx((300.0 / 400.0, 100.0 * 7.1 / 400.0))
    assert wb.renal_terms(cryst + dose("bleed", 450.0, 10.0, start=40.0), 60.0) == pytest.approx((1.0, 0.0))
    # the study file's fluid names carry the clearance through to the doses
    s = Study.from_dict(_doc([{"kind": "infusion", "fluid": "albumin_5", "volume": "500 mL"}]))
    assert s.interventions[0].clearance == wb.K_R_COLLOID_ML_MIN


def test_crystalloid_clearance_is_the_published_half_life() -> None:
    # Hahn RG 2016 Biol Sex Differ 7:54 (abstract): half-life 38 min in males = urine over plasma volume
    # expansion, so urine above basal per mL of plasma expansion is ln 2 / 38 per min
    body = wb.body_parameters(73.0)
    assert body["k_r"] / body["Vp0"] == pytest.approx(math.log(2.0) / 38.0)


def test_albumin_counts_by_its_oncotic_pressure() -> None:
    # Landis-Pappenheimer cubics (oncotic.COEFFICIENTS, from memory): 5 g/dL albumin, 2.8 x 5 + 0.18 x 25 +
    # 0.012 x 125 = 20 mmHg, is the oncotic pressure of total protein C with 2.1 C + 0.16 C^2 + 0.009 C^3 = 20
    from uncertainty.physiology.oncotic import pi_cubic

    c = wb.total_protein_equivalent(5.0)
    assert float(pi_cubic(c, "total")) == pytest.approx(20.0, rel=1e-10)
    assert wb.infusion("albumin_20", 100.0).protein_equivalent == pytest.approx(wb.total_protein_equivalent(20.0))
    assert wb.infusion("crystalloid", 100.0).protein_equivalent == 0.0


def test_protein_from_oncotic_inverts_the_cubic() -> None:
    C = np.linspace(0.5, 12.0, 30)
    from uncertainty.physiology.oncotic import pi_cubic

    np.testing.assert_allclose(wb.protein_from_oncotic(pi_cubic(C, "total")), C, rtol=1e-12)


def test_numpy_and_pytensor_agree() -> None:
    # the right-hand side and the reported quantities at a state away from rest, with Kf symbolic
    # (FAST_COMPILE: the graph is large and only its values are compared)
    pytensor = pytest.importorskip("pytensor")
    pt = pytest.importorskip("pytensor.tensor")
    body, beds, Cp0 = params(4, {"Kf": [0.5, 1.0, 1.5, 2.0]})
    state, rest = wb.initial_state(body, beds, Cp0)
    state = {**state, "Vp": state["Vp"] + 600.0, "Pi_muscle": state["Pi_muscle"] + 0.7}
    kf = pt.dvector("kf")
    beds_sym = {name: {**p, "Kf": kf * (p["Kf"] / beds["muscle"]["Kf"])} for name, p in beds.items()}
    rates = (60.0, 0.0, 0.0)
    d_sym = wb.derivatives(state, rates, body, beds_sym, rest, xp=pt)
    r_sym = wb.report(state, 900.0, body, beds_sym, rest, xp=pt)
    keys = sorted(d_sym)
    outs = [d_sym[k] for k in keys] + [r_sym[k] for k in wb.TIMELINE_UNITS]
    f = pytensor.function([kf], [pt.as_tensor_variable(o) + 0.0 * kf for o in outs], mode="FAST_COMPILE")
    got = f(beds["muscle"]["Kf"])
    d_np = wb.derivatives(state, rates, body, beds, rest)
    r_np = wb.report(state, 900.0, body, beds, rest)
    want = [d_np[k] for k in keys] + [r_np[k] for k in wb.TIMELINE_UNITS]
    for g, w in zip(got, want, strict=True):
        np.testing.assert_allclose(g, np.broadcast_to(w, (4,)), rtol=1e-12, atol=1e-12)
    assert math.isclose(float(wb.protein_from_oncotic(25.0)), float(pytensor.function(
        [], wb.protein_from_oncotic(pt.constant(25.0), xp=pt), mode="FAST_COMPILE")()), rel_tol=1e-12)


@pytest.mark.slow
def test_pytensor_course_is_one_node_and_agrees_with_numpy() -> None:
    """simulate(xp=pytensor) solves the timeline in one compiled node: same numbers as the numpy loop (to
    rounding), and a graph whose size does not grow with the timeline's length."""
    pytensor = pytest.importorskip("pytensor")
    pt = pytest.importorskip("pytensor.tensor")
    body, beds, Cp0 = params(4, {"Kf": [0.5, 1.0, 1.5, 2.0]})
    kf = pt.dvector("kf")
    beds_sym = {name: {**p, "Kf": kf * (p["Kf"] / beds["muscle"]["Kf"])} for name, p in beds.items()}
    doses = dose("crystalloid", 1500.0, 30.0) + dose("bleed", 400.0, 10.0, start=40.0)
    sizes = []
    for end in (60.0, 240.0):
        sym = wb.simulate(body, beds_sym, Cp0, doses, end, 15.0, max_step=4.0, xp=pt)
        outs = [pt.as_tensor_variable(x) + 0.0 * kf for name in wb.TIMELINE_UNITS for x in sym[name]]
        sizes.append(len(list(pytensor.graph.basic.ancestors([outs[-1]]))))
    got = pytensor.function([kf], outs, mode="FAST_COMPILE")(beds["muscle"]["Kf"])
    want = wb.simulate(body, beds, Cp0, doses, 240.0, 15.0, max_step=4.0)
    assert sym["times_min"] == want["times_min"]
    flat = [np.broadcast_to(x, (4,)) for name in wb.TIMELINE_UNITS for x in want[name]]
    for g, w in zip(got, flat, strict=True):
        np.testing.assert_allclose(g, w, rtol=1e-9, atol=1e-9, equal_nan=True)
    assert sizes[1] < 1.2 * sizes[0]   # four times the timeline, about the same graph


# --- published time courses (typical subject at the prior medians) ------------------------------------------
# A published figure that reads one course at one time (or its peak) is a row of priors/validation.toml
# (whole_body.*: Ringer's at 15, 30 and 60 min, 5 % albumin at 2 h, 20 % albumin's peak expansion and 5-h urine, Hb 6 h
# after a donation), checked with the rest of that table by tests/test_validation.py and shown by `fluidshift
# validate`; here are the figures that need more than one reading of a course.

@pytest.fixture(scope="module")
def courses() -> dict[str, dict]:
    body, beds, Cp0 = params()
    runs = {"ringer": (dose("crystalloid", 25.0 * BODY_KG, 30.0), 120.0),
            "albumin_5": (dose("albumin_5", 1000.0, 30.0), 240.0),
            "bleed": (dose("bleed", 450.0, 10.0), 360.0)}
    out = {}
    for name, (doses, end) in runs.items():
        sim = wb.simulate(body, beds, Cp0, doses, end, 5.0, max_step=1.0)
        out[name] = {k: (np.array(sim["times_min"]) if k == "times_min" else np.array([float(x[0]) for x in v]))
                     for k, v in sim.items()}
    return out


def _at(c: dict, name: str, t: float) -> float:
    return float(c[name][list(c["times_min"]).index(t)])


def test_ringer_peak_urine_flow_as_in_volunteers(courses) -> None:
    # Rodhe P, Drobin D, Hahn RG et al. 2010 Comput Math Methods Med 11:341 (abstract): 25 mL/kg Ringer's acetate
    # over 30 min in conscious volunteers, maximum urinary output rate 19 (range 13-31) mL/min
    c = courses["ringer"]
    rate = np.diff(c["urine_volume"]) / np.diff(c["times_min"])  # mL/min over each 5-min interval
    assert 13.0 <= float(np.max(rate)) <= 31.0


def test_colloid_stays_longer_than_crystalloid(courses) -> None:
    # Hahn RG 2020 (abstract): colloids have no distribution phase, crystalloids do: at 60 min a larger share
    # of 5% albumin than of Ringer's is in the plasma.
    assert _at(courses["albumin_5"], "infused_retained_fraction", 60.0) > \
        2.0 * _at(courses["ringer"], "infused_retained_fraction", 60.0)


@pytest.mark.xfail(strict=True, reason=(
    "known gap: 20 % albumin's plasma expansion lasts about twice as long as in volunteers: the typical subject's "
    "expansion (peak 334 mL at 100 min) halves only by 890 min, 13.2 h after its peak. The infused protein leaves the "
    "plasma too slowly: 1.7 %/h of the infused amount over the first 5 h and 2.2 %/h over the next 5 (the Patlak "
    "escape of the two beds' PS medians), against 3.8 %/h in volunteers (Zdolsek M, Wuethrich PY, Gunnstrom M et al. "
    "2022, 'Plasma disappearance rate of albumin when infused as a 20 % solution', Crit Care 26, abstract read "
    "through the search tool: T1/2 16.2 h), so it holds the water in the plasma longer; the leaky viscera (gut, "
    "liver), which carry much of the body's albumin escape, are not modelled (a gut-wall bed was tried, see the "
    "validation row whole_body.infused_retained_fraction.ringer_15min)"))
def test_albumin_20_expansion_half_life_as_in_volunteers() -> None:
    # Zdolsek M, Sjoberg F, Hahn RG 2022 Intensive Care Med Exp 10:31 (abstract read through the search tool): 3 mL/kg
    # of 20 % albumin over 30 min in 12 volunteers, half-life of the plasma volume expansion median 5.6 h (5.4 h
    # over 120 min); Hasselgren E, Zdolsek M, Zdolsek JH et al. 2019 Anesth Analg, November issue, doi
    # 10.1213/ANE.0000000000004047 (key points read through the search tool): intravascular half-life of the infused
    # fluid 7 h in volunteers, 10 h in postoperative patients. Check: the typical subject's expansion falls from its
    # peak to half of it within 4-9 h (5.4-7 h widened; the half-life read from the course, not fitted).
    body, beds, Cp0 = params()
    sim = wb.simulate(body, beds, Cp0, dose("albumin_20", 3.0 * BODY_KG, 30.0), 1440.0, 10.0, max_step=1.0)
    t = np.array(sim["times_min"])
    pv = np.array([float(np.ravel(x)[0]) for x in sim["plasma_volume_change"]])
    k = int(np.argmax(pv))
    half = t[(t > t[k]) & (pv <= 0.5 * pv[k])]
    assert half.size and 240.0 <= half[0] - t[k] <= 540.0


def test_bleed_haemodilution_over_hours(courses) -> None:
    # Ruttman TG, Roche AM, Gasson J, James MFM 2003 (one-unit, 480 mL donation; abstract read through the
    # search tool): haematocrit falls about 4% during donation, then slowly and progressively to 8.3% below
    # the pre-donation value at 6 h; refill takes 6-8 h. Check: Hb keeps falling from 1 h to 6 h (its level at 6 h is
    # the validation row whole_body.hb_ratio.donation_6h).
    c = courses["bleed"]
    assert _at(c, "hb_ratio", 360.0) < _at(c, "hb_ratio", 60.0)
    # plasma refills: the share of the plasma lost still missing falls over the hours
    assert _at(c, "infused_retained_fraction", 360.0) < 0.5 * _at(c, "infused_retained_fraction", 15.0)


# --- study keys and refusals ----------------------------------------------------------------------------------

def _doc(interventions: list[dict] | None = None, **head) -> dict:
    doc = {"study": {"tissue": "skeletal_muscle", "model": "whole_body", "body_mass": "73 kg", **head},
           "timeline": {"end": "60 min", "report_every": "10 min", "draws": 16},
           "propagate": {"samples": 256, "outputs": ["Jv"]}}
    doc["interventions"] = interventions if interventions is not None else [
        {"kind": "infusion", "fluid": "crystalloid", "volume": "1000 mL", "start": "0 min", "duration": "20 min"}]
    return doc


def _toml(doc: dict) -> str:
    return toml_text(doc)


def test_study_resolves_interventions_in_canonical_units() -> None:
    s = Study.from_dict(_doc([{"kind": "infusion", "fluid": "albumin_20", "volume": "0.1 L", "duration": "0.5 h"},
                              {"kind": "bleed", "volume": 450, "start": 30, "duration": 10}]))
    assert s.timeline is not None and s.timeline.body_mass_kg == 73.0 and s.timeline.end == 60.0
    inf, bleed = s.interventions
    assert (inf.volume, inf.duration, inf.protein) == pytest.approx((100.0, 30.0, 20.0))
    assert (bleed.kind, bleed.volume, bleed.start) == ("bleed", 450.0, 30.0)


@pytest.mark.parametrize("entry, key", [
    ({"kind": "infusion", "fluid": "crystalloid", "volume": "-5 mL"}, "interventions[0].volume"),
    ({"kind": "infusion", "fluid": "crystalloid", "volume": "500 mL", "start": "2 h"}, "interventions[0].start"),
    ({"kind": "infusion", "fluid": "plasma", "volume": "500 mL"}, "interventions[0].fluid"),
    ({"kind": "bleed", "volume": "6 L"}, "interventions[0].volume"),
    ({"kind": "infusion", "fluid": "crystalloid", "volume": "5 mmHg"}, "interventions[0].volume"),
])
def test_bad_interventions_exit_2_naming_key_and_value(tmp_path: Path, entry: dict, key: str) -> None:
    path = tmp_path / "bad.toml"
    path.write_text(_toml(_doc([entry])), encoding="utf-8")
    res = CliRunner().invoke(main, ["check", str(path)])
    assert res.exit_code == 2, res.output
    assert key in res.output and "Traceback" not in res.output


def test_overlapping_bleeds_beyond_blood_volume_are_refused() -> None:
    # 70 mL/kg x 73 kg = 5110 mL of blood: two bleeds of 3 L reach it at the second
    from uncertainty.core.errors import StudyError

    with pytest.raises(StudyError) as exc:
        Study.from_dict(_doc([{"kind": "bleed", "volume": "3 L", "duration": "30 min"},
                              {"kind": "bleed", "volume": "3 L", "start": "10 min", "duration": "30 min"}]))
    assert exc.value.key == "interventions[1].volume"


def test_interventions_need_the_whole_body_form() -> None:
    from uncertainty.core.errors import StudyError

    with pytest.raises(StudyError) as exc:
        Study.from_dict(_doc(model="steady_state"))
    assert exc.value.key == "interventions"


def test_propagate_returns_the_timeline() -> None:
    s = Study.from_dict(_doc())
    doc = json.loads(json.dumps(propagate(s).to_dict()))
    tl = doc["timeline"]
    assert tl["times_min"] == [0.0, 10.0, 20.0, 30.0, 40.0, 50.0, 60.0]
    for layer in ("typical", "individual"):
        for name in wb.TIMELINE_UNITS:
            d = tl[layer][name]
            assert len(d["median"]) == len(d["ci95"]) == 7
        lo, hi = tl[layer]["plasma_volume_change"]["ci95"][2]
        assert 0 < lo <= tl[layer]["plasma_volume_change"]["median"][2] <= hi < 1000.0


def test_shipped_bleed_study_refills_over_hours() -> None:
    # studies/blood_loss_volunteer.toml (invented subject, 450 mL over 10 min), 32 draws per layer. Ruttman TG,
    # Roche AM, Gasson J, James MFM 2003 (one-unit, 480 mL donation; abstract read through the search tool):
    # haematocrit 8.3% below the pre-donation value at 6 h after a progressive fall. Check: the typical subject's
    # median Hb at 6 h lies 4-12% below rest and below its value at 1 h; the plasma deficit shrinks over the hours.
    from uncertainty.analyses.propagate.timeline import timeline
    from uncertainty.core.resources import studies_dir
    from uncertainty.study import load_study

    tl = timeline(load_study(studies_dir() / "blood_loss_volunteer.toml"), draws=32)
    times = tl["times_min"]
    hb = tl["typical"]["hb_ratio"]["median"]
    pv = tl["typical"]["plasma_volume_change"]["median"]
    assert 0.88 <= hb[times.index(360.0)] <= 0.96
    assert hb[times.index(360.0)] < hb[times.index(60.0)]
    assert pv[times.index(10.0)] < pv[times.index(60.0)] < pv[times.index(360.0)] < 0.0


def test_healthy_resting_muscle_pressure_has_the_measured_spread() -> None:
    # Scand J Clin Lab Invest 1990, pages 331-336 (abstract; authors not confirmed; the muscle Pi prior's and the
    # validation row skeletal_muscle.Pi.calf's source): wick-in-needle Pi in deep calf muscle -1.2 (SD 3.4) mmHg
    # between subjects, so about 2.3 % of healthy adults above -1.2 + 2 x 3.4 = 5.6 mmHg (normal theory, common
    # practice). The prior of healthy adults' resting state should put at most 5 % there (a judgement allowing for
    # tails heavier than normal). Until 2026-12-05 an absolute JL_max prior (median 0.014 mL/min/100 g) fell
    # below a draw's resting filtrate (about 0.004-0.006) often enough to put 12 % there (a strict xfail); with
    # JL_max the resting filtrate plus JL_reserve (priors/skeletal_muscle.toml) it is 2.6 % (seed 7, 4096 draws).
    s = Study.from_dict({"study": {"tissue": "skeletal_muscle", "model": "whole_body", "seed": 7,
                                   "body_mass": f"{BODY_KG:g} kg"},
                         "interventions": [{"kind": "infusion", "fluid": "crystalloid", "volume": "500 mL",
                                            "duration": "30 min"}],
                         "timeline": {"end": "60 min", "report_every": "15 min"},
                         "propagate": {"samples": 4096, "thresholds": [{"output": "Pi", "above": "5.6 mmHg"}]}})
    (event,) = propagate(s).to_dict()["thresholds"]
    assert event["individual"]["p"] <= 0.05
