"""Forward propagation: analytic moments of the Starling product form, RQMC vs MC, P(absorption),
the --tol gate, NaN draws, labelled results, bad input."""

from __future__ import annotations

import math

import numpy as np
import pytest
from fakes_uncertainty import CLASSIC, SIGMA, classic_study, evaluate
from scipy import stats

from uncertainty.analyses.propagate import propagate, summarize
from uncertainty.core.errors import InputError, QualityGateError


def product_moments():
    """Mean and variance of Jv = Kf D, D = Pc - Pi - sigma (pi_c - pi_i), independent normal inputs,
    sigma fixed (closed form: E[KD] = E[K]E[D]; Var = (VK + mK^2)(VD + mD^2) - mK^2 mD^2)."""
    (mK, sK), (mPc, sPc), (mPi, sPi), (mpc, spc), (mpi, spi) = (CLASSIC[k] for k in
                                                                ("Kf", "Pc", "Pi", "pi_c", "pi_i"))
    mD = mPc - mPi - SIGMA * (mpc - mpi)
    VD = sPc**2 + sPi**2 + SIGMA**2 * (spc**2 + spi**2)
    VK = sK**2
    return mK * mD, (VK + mK**2) * (VD + mD**2) - mK**2 * mD**2, mD, VD


def test_typical_mean_and_variance_match_closed_form():
    mean, var, _, _ = product_moments()
    r = propagate(classic_study(), samples=2**15, method="qmc", seed=1, evaluate=evaluate)
    s = r.summaries["typical"]["Jv"]
    assert abs(s.mean - mean) < 5 * s.mc_se["mean"] + 1e-7
    assert abs(s.sd - math.sqrt(var)) < 5 * s.mc_se["sd"] + 1e-7
    # net pressure is normal (closed form): median = mean, interval = mean +- 1.96 sd
    _, _, mD, VD = product_moments()
    n = r.summaries["typical"]["net_pressure"]
    assert abs(n.ci95[0] - (mD - 1.959964 * math.sqrt(VD))) < 5 * n.mc_se["ci95"][0] + 1e-3


def test_p_absorption_matches_normal_cdf():
    # Typical layer: Kf > 0 with overwhelming probability, so P(Jv < 0) = P(D < 0) = Phi(-mD/sD).
    _, _, mD, VD = product_moments()
    r = propagate(classic_study(), samples=2**15, seed=4, evaluate=evaluate)
    d = r.to_dict()
    expected = stats.norm.cdf(-mD / math.sqrt(VD))
    assert abs(d["typical_p_absorption"] - expected) < 5 * r.summaries["typical"]["Jv"].p_negative_se + 1e-4
    assert 0 <= d["p_absorption"] <= 1


def test_individual_layer_widens_the_interval():
    r = propagate(classic_study(), samples=2**14, seed=2, evaluate=evaluate)
    ind, typ = r.summaries["individual"]["Jv"], r.summaries["typical"]["Jv"]
    assert ind.sd > typ.sd
    # Pc has sd 3 typical + sd 3 between subjects: individual force_Pc sd = sqrt(18) (closed form)
    assert abs(r.summaries["individual"]["force_Pc"].sd - math.sqrt(18)) < 0.02


def test_mc_standard_error_matches_clt():
    # plain MC: the replicate-based se of the mean equals sd / sqrt(n) in expectation (CLT);
    # with 16 replicates the estimate scatters by about 1/sqrt(2*15) = 18 %.
    r = propagate(classic_study(), samples=2**14, method="mc", seed=9, evaluate=evaluate)
    s = r.summaries["typical"]["Jv"]
    ratio = s.mc_se["mean"] / (s.sd / math.sqrt(s.n))
    assert 0.5 < ratio < 1.6


def test_rqmc_beats_mc_at_equal_budget(capsys):
    # Owen (1997): scrambled-net variance is o(1/n) for smooth integrands; measured ratio reported.
    true_mean, _, _, _ = product_moments()
    err = {}
    for method in ("qmc", "mc"):
        e = [propagate(classic_study(), samples=4096, method=method, seed=s, outputs=["Jv"],
                       evaluate=evaluate).summaries["typical"]["Jv"].mean - true_mean for s in range(12)]
        err[method] = math.sqrt(np.mean(np.square(e)))
    ratio = err["qmc"] / err["mc"]
    print(f"RQMC/MC RMS error ratio of the Jv mean at n=4096: {ratio:.3f}")
    assert ratio < 0.5


def test_tol_doubles_until_reached_and_gate_fails_at_max():
    r = propagate(classic_study(), samples=2048, seed=3, tol=2e-3, evaluate=evaluate)
    assert r.converged is True
    # the gate is the 95% Monte Carlo margin: t quantile with R - 1 = 15 df (scipy.stats.t) x replicate se
    assert stats.t.ppf(0.975, 15) * max(r.summaries["individual"]["Jv"].mc_se["ci95"]) < 2e-3
    assert [h["samples"] for h in r.history] == [2048 * 2**i for i in range(len(r.history))]
    with pytest.raises(QualityGateError) as exc:
        propagate(classic_study(), samples=1024, seed=3, tol=1e-9, max_samples=8192, evaluate=evaluate)
    assert exc.value.exit_code == 3 and exc.value.result is not None
    assert exc.value.result.converged is False and exc.value.result.samples == 8192


def test_too_few_samples_are_raised_with_a_note():
    r = propagate(classic_study(), samples=1, method="mc", seed=2, evaluate=evaluate)
    assert r.samples == 16 * 128 and any("raised to 2048" in n for n in r.notes)


def test_interval_end_errors_are_calibrated_at_the_smallest_size():
    # Normal draws with known quantiles (scipy.stats.norm.ppf): at 128 draws per replicate the t interval
    # (15 df) of each 95%-interval end covers the true quantile close to 95% of the time.
    rng = np.random.default_rng(11)
    truth = stats.norm.ppf([0.025, 0.975])
    t15, hits, reps = stats.t.ppf(0.975, 15), 0, 600
    for _ in range(reps):
        s = summarize("y", [rng.standard_normal(128) for _ in range(16)])
        hits += sum(abs(s.ci95[i] - truth[i]) < t15 * s.mc_se["ci95"][i] for i in (0, 1))
    assert 0.91 <= hits / (2 * reps) <= 0.985


def test_nan_draws_are_counted_not_averaged():
    def sometimes_nan(study, values, xp=np):
        out = evaluate(study, values)
        out["Jv"] = np.where(values["Pc"] > 28.0, np.nan, out["Jv"])
        return out

    r = propagate(classic_study(), samples=4096, seed=5, evaluate=sometimes_nan)
    typ = r.summaries["typical"]["Jv"]
    raw = r.draws["typical"]["Jv"]
    assert typ.nan_draws == int(np.isnan(raw).sum()) > 0
    assert typ.mean == pytest.approx(np.nanmean(raw))
    assert any("not finite" in w for w in r.warnings)
    assert r.to_dict()["nan_draws"]["typical"]["Jv"] == typ.nan_draws


def test_json_keys_and_labels(tmp_path):
    r = propagate(classic_study(), samples=3000, method="lhs", seed=1, evaluate=evaluate)
    d = r.to_dict()
    assert set(d["outputs"]["Jv"]) >= {"mean", "sd", "median", "ci95", "mc_se"}
    assert set(d["typical"]["Jv"]) >= {"mean", "sd", "median", "ci95", "mc_se"}
    assert "p_absorption" in d and d["samples"] == 3008  # 16 x 188, rounded up with a note
    assert any("rounded up" in n for n in d["notes"])
    df = r.to_dataframe()
    assert ("typical", "Jv") in df.index
    paths = r.plot(str(tmp_path))
    assert {p.rsplit(".", 1)[1] for p in paths} == {"png", "svg"}


def test_labelled_draws_carry_names_units_and_replicates():
    r = propagate(classic_study(), samples=2048, seed=6, tol=5e-3, outputs=["Jv"], evaluate=evaluate)
    ds = r.to_xarray()
    assert ds["Jv"].attrs["units"] == r.units["Jv"] and list(ds["layer"].values) == ["individual", "typical"]
    assert np.array_equal(ds["Jv"].sel(layer="typical").values, r.draws["typical"]["Jv"], equal_nan=True)
    # the replicate labels reproduce the reported MC standard error of the mean (sd of the R replicate
    # means / sqrt(R), the module's own definition): wrong labels would not
    means = ds["Jv"].sel(layer="typical").groupby("replicate").mean().values
    assert means.size == r.replicates
    se = np.std(means, ddof=1) / math.sqrt(r.replicates)
    assert se == pytest.approx(r.summaries["typical"]["Jv"].mc_se["mean"], rel=1e-9)


def test_fewer_than_16_replicates_refused():
    with pytest.raises(InputError, match="at least 16") as exc:
        propagate(classic_study(), samples=1024, replicates=8, evaluate=evaluate)
    assert exc.value.key == "propagate.replicates"


def test_qmc_non_power_of_two_rounds_up_with_note():
    r = propagate(classic_study(), samples=3000, method="qmc", seed=1, outputs=["Jv"], evaluate=evaluate)
    assert r.samples == 4096 and any("power of two" in n for n in r.notes)


def test_same_seed_same_numbers():
    a = propagate(classic_study(), samples=2048, seed=3, evaluate=evaluate).to_dict()
    b = propagate(classic_study(), samples=2048, seed=3, evaluate=evaluate).to_dict()
    assert a["outputs"]["Jv"] == b["outputs"]["Jv"]


def test_bad_input():
    s = classic_study()
    with pytest.raises(InputError, match="no such output"):
        propagate(s, samples=1024, outputs=["Jw"], evaluate=evaluate)
    with pytest.raises(InputError):
        propagate(s, samples=0, evaluate=evaluate)
    with pytest.raises(InputError):
        propagate(s, samples=1024, method="grid", evaluate=evaluate)
    with pytest.raises(InputError):
        propagate(s, samples=1024, tol=-1, evaluate=evaluate)


def test_summarize_replicate_se():
    rng = np.random.default_rng(0)
    reps = [rng.normal(size=1000) for _ in range(16)]
    s = summarize("x", reps)
    assert abs(s.median) < 0.1 and abs(s.ci95[1] - 1.96) < 0.1  # standard normal quantiles
    assert 0.5 < s.mc_se["mean"] / (1 / math.sqrt(16000)) < 1.6


@pytest.mark.parametrize("tissue", ["skeletal_muscle", "skin_subcutis", "lung", "intestinal_mucosa", "myocardium"])
def test_steady_state_jv_positive_for_ordinary_tissues(tissue):
    from uncertainty.study import Study

    s = Study.from_dict({"study": {"title": "check (invented)", "tissue": tissue, "model": "steady_state",
                                   "seed": 3}})
    r = propagate(s, samples=4096, outputs=["Jv", "Pi", "pi_i"])
    # Levick & Michel 2010 (Cardiovasc Res 87:198): no sustained absorption at steady state in
    # ordinary tissues (the lymph balance JL = Jv >= 0), so P(Jv < 0) is exactly 0 in both layers
    assert r.summaries["individual"]["Jv"].nan_draws == 0
    assert r.to_dict()["p_absorption"] == 0.0 and r.to_dict()["typical_p_absorption"] == 0.0
    assert r.units["Jv"].startswith("mL/min")


def _demo_path():
    from pathlib import Path

    return str(Path(__file__).resolve().parents[1] / "studies" / "demo.toml")


def test_command_json_gate_and_bad_input(tmp_path):
    import json

    from click.testing import CliRunner

    from uncertainty.app.cli import main

    runner = CliRunner()
    res = runner.invoke(main, ["propagate", _demo_path(), "--samples", "1024", "--json",
                               "--out", str(tmp_path)])
    assert res.exit_code == 0, res.output
    doc = json.loads(res.stdout)
    assert {"outputs", "typical", "p_absorption"} <= set(doc)
    assert (tmp_path / "propagate_Jv.png").exists() and (tmp_path / "propagate_Jv.svg").exists()
    res = runner.invoke(main, ["propagate", _demo_path(), "--samples", "1024", "--tol", "1e-12",
                               "--max-samples", "4096", "--json"])
    assert res.exit_code == 3 and json.loads(res.stdout)["converged"] is False
    res = runner.invoke(main, ["propagate", _demo_path(), "--output", "Jw"])
    assert res.exit_code == 2 and "no such output" in res.stderr and "Traceback" not in res.output
    res = runner.invoke(main, ["propagate", _demo_path(), "--samples", "0"])
    assert res.exit_code == 2
