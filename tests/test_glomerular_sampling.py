"""Posterior sampling of the glomerular form (issue 8): the RK4 scan compiles and samples in nutpie.

The scan of ``physiology.iteration.fixed_steps`` once failed in nutpie ("Argument ... given to the scan
node is not compatible ...") because nutpie rebuilds the graph with value variables of a now-known
length 1; the inputs are now padded so their static length is never 1.
"""

from __future__ import annotations

import numpy as np
import pytest

from uncertainty.study import Study

HEAD = {"title": "invented: glomerular sampling check", "tissue": "glomerulus", "model": "glomerular",
        "tissue_mass": "0.3 kg", "seed": 3}


@pytest.mark.slow  # compiles the glomerular scan with numba (nutpie) and samples 2 short chains
def test_glomerular_study_samples_with_nutpie():
    pytest.importorskip("nutpie")
    from uncertainty.analyses.inference import fit

    # invented reading: whole-kidney GFR 100 mL/min, sd 5 (below the textbook prior of about 125 mL/min,
    # common practice), so the posterior must move down from the prior
    s = Study.from_dict({"study": dict(HEAD),
                         "observations": [{"kind": "GFR", "value": 100.0, "sd": 5.0, "unit": "mL/min"}]})
    res = fit(s, sampler="nutpie", chains=2, draws=40, tune=60, seed=11)
    post = res.idata.posterior
    pred = np.asarray(post["obs0__GFR__pred"]).ravel()
    assert pred.size == 80 and np.all(np.isfinite(pred))
    for name in ("Kf", "Pc", "Pi", "Cp", "RPF"):
        assert np.all(np.isfinite(np.asarray(post[f"{name}__subject"])))
    # the prior median GFR is about 125 mL/min (forward model at the textbook medians, tests of the
    # form); with one reading at 100 +- 5 the posterior mean lies between them, near the reading
    assert 90.0 < float(pred.mean()) < 115.0
    # The summary's "Kf is only bounded below" note follows the posterior draws of the individual: recompute
    # the equilibrium share with physiology.glomerulus directly (RPF over 0.3 kg = 3 x 100 g, closed form).
    from uncertainty.physiology.glomerulus import MATERIAL_SHARE, glomerular_filtration

    d = {k: np.asarray(post[f"{k}__subject"]).reshape(-1) for k in ("Kf", "Pc", "Pi", "Cp", "RPF")}
    direct = glomerular_filtration(d["Kf"], d["Pc"] - d["Pi"], d["RPF"] / 3.0, d["Cp"])
    filtering = direct["no_filtration"] < 0.5
    share = float(np.mean(filtering & (direct["equilibrium"] > 0.5)))
    noted = [n for n in res.doc["notes"] if "bound Kf only from below" in n or "nothing filters" in n]
    assert bool(noted) == (share > MATERIAL_SHARE or not filtering.all())
    if share > MATERIAL_SHARE:
        assert f"in {100 * share:.0f}% of evaluations" in noted[0]


@pytest.mark.slow  # numba compile of a short scan and its gradient
def test_glomerular_gradient_in_numba_matches_central_differences():
    # Regression: with the parameters as scan non-sequences, the numba back-end returned dGFR/d(dP) in
    # place of dGFR/dC_A (pytensor 2.38). Check every gradient against central differences of the numpy
    # path (same 4-step RK4 arithmetic; closed-form check: the derivative of the same function).
    pytensor = pytest.importorskip("pytensor")
    pt = pytest.importorskip("pytensor.tensor")
    from uncertainty.physiology.glomerulus import glomerular_filtration

    x = (4.2, 42.0, 216.0, 7.0)  # Kf, dP, Q_A, C_A: human textbook magnitudes per 100 g (common practice)
    sym = pt.dvectors("Kf", "dP", "Q", "C")
    gfr = glomerular_filtration(*sym, xp=pt, n_steps=4)["GFR"].sum()
    f = pytensor.function(list(sym), pytensor.grad(gfr, list(sym)), mode="NUMBA")
    got = [float(g[0]) for g in f(*[np.array([v]) for v in x])]
    for i in range(4):
        hi, lo = list(x), list(x)
        d = 1e-6 * x[i]
        hi[i] += d
        lo[i] -= d
        fd = (glomerular_filtration(*hi, n_steps=4)["GFR"] - glomerular_filtration(*lo, n_steps=4)["GFR"]) / (2 * d)
        assert got[i] == pytest.approx(float(fd), rel=1e-6), i
    assert got[3] < 0 < got[1]  # more protein filters less, more pressure filters more (Deen et al. 1972)
