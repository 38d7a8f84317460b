"""Make the INVENTED demo data of the example studies (seeded, deterministic).

Every number written here is invented for demonstration: none is a measurement of a real person.
The generating models are deliberately simple (the fitted venous-cuff curve of
physiology.interstitium.volume_time_course for the forearm, an exponential approach of arm swelling
over weeks), and the parameter values are chosen to sit inside the shipped priors.

Run from anywhere:  python studies/data/make_demo_data.py
It rewrites the CSVs beside this file and prints the observation blocks pasted into the studies.
"""

from __future__ import annotations

import csv
from pathlib import Path

import numpy as np

HERE = Path(__file__).resolve().parent
SEED = 20240611

# --- (a) forearm volunteers: cumulative venous-cuff protocol (invented) -----------------------------
CUFF_STEPS = [(0.0, 20.0), (4.0, 30.0), (8.0, 40.0), (12.0, 50.0), (16.0, 60.0)]  # (at_min, to mmHg)
END_MIN = 20.0
SAMPLE_EVERY_MIN = 0.25
TRANSMISSION = 0.91  # cuff-to-vein, as reported by Christ et al. 1997 (used here only to invent data)
# The curve is the one the volume_time_course inference fits (physiology.interstitium.volume_time_course,
# venous phase above the resting venous pressure, filtration above Pvi, the same corner rounding), so
# the invented data are consistent with the fitted model. Common to all subjects (invented):
R_RATIO = 0.12      # post- to pre-capillary resistance ratio (the skeletal_muscle prior median)
TAU_VENOUS = 0.5    # venous filling time constant, min
TAU_SLOW = 30.0     # slow-phase time constant C_tis / (Kf + L), min
L_LYMPH = 0.004     # lymph conductance, mL/min/mmHg/100 mL (only C_tis = TAU_SLOW (Kf + L) depends on it)
NOISE_SD = 0.01     # reading noise, mL/100 mL


def forearm_volumes(rng: np.random.Generator, n_subjects: int = 16) -> list[dict[str, object]]:
    """Invented limb-volume change (mL/100 mL) against time for each subject and group."""
    from uncertainty.analyses.inference.observations.volume_time_course import SMOOTH_MMHG
    from uncertainty.physiology.interstitium import cuff_curve

    rows: list[dict[str, object]] = []
    times = np.arange(0.0, END_MIN + 1e-9, SAMPLE_EVERY_MIN)
    at = [a for a, _ in CUFF_STEPS]
    cuffs = [c for _, c in CUFF_STEPS]
    for s in range(n_subjects):
        group = "A" if s < n_subjects // 2 else "B"
        kf = 0.0035 * np.exp(rng.normal(0.0, 0.36)) * (0.75 if group == "B" else 1.0)  # mL/min/mmHg/100mL
        pvi = rng.normal(15.0, 4.0)                     # mmHg
        cv = 0.045 * np.exp(rng.normal(0.0, 0.25))      # venous compliance, mL/100mL/mmHg
        rng.normal()  # drawn and unused: keeps the later invented data sets' values unchanged
        pv0 = rng.normal(9.0, 2.0)                      # resting venous pressure, mmHg
        c_tis = TAU_SLOW * (kf + L_LYMPH)
        curve = cuff_curve(times, at, cuffs, kf, c_tis, L_LYMPH, cv, Pv_rest=pv0, Pvi=pvi, tau_v=TAU_VENOUS,
                           r=R_RATIO, transmission=TRANSMISSION, smooth=SMOOTH_MMHG)
        noise = rng.normal(0.0, NOISE_SD, size=times.size)
        # the gauge is zeroed at the first reading, so every reading carries minus that reading's
        # noise: a per-subject offset (the protocol bias term of the fitted model), first reading 0
        volume = curve + noise - noise[0]
        for t, noisy in zip(times, volume, strict=True):
            rows.append({"subject": f"V{s + 1:02d}", "time_min": round(float(t), 2),
                         "volume": round(float(noisy), 4), "group": group})
    return rows


def forearm_lymph(rng: np.random.Generator) -> list[tuple[str, float]]:
    """Invented resting pre-nodal lymph flows (mL/min/100 mL) for three volunteers."""
    return [(f"V{k:02d}", round(float(0.004 * np.exp(rng.normal(0.0, 0.3))), 5)) for k in (2, 7, 11)]


# --- (b) septic-shock cohort (invented) -----------------------------------------------------------

def septic_cohort(rng: np.random.Generator, n: int = 10) -> list[dict[str, object]]:
    """Invented ICU patients: plasma total protein, some oncotic and interstitial pressures."""
    rows = []
    for k in range(n):
        cp = rng.normal(5.4, 0.6)
        pi_c = 2.1 * cp + 0.16 * cp**2 + 0.009 * cp**3 + rng.normal(0.0, 0.5)
        rows.append({"subject": f"P{k + 1:02d}", "Cp_g_dL": round(float(cp), 2),
                     "pi_c_mmHg": round(float(pi_c), 1) if k < 4 else "",
                     "Pi_mmHg": round(float(rng.normal(1.0, 1.5)), 1) if k in (1, 4, 8) else ""})
    return rows


# --- (c) arm after lymph-node surgery (invented) --------------------------------------------------

WEEKS = [0, 2, 4, 6, 8, 12, 16, 20, 26]


def arm_swelling(rng: np.random.Generator, n: int = 12) -> tuple[list[dict[str, object]], list[dict[str, object]]]:
    """Invented excess arm volume (mL per 100 mL of the other arm) over weeks, and per-patient rates."""
    rows, summary = [], []
    for k in range(n):
        amp = rng.normal(22.0, 6.0)
        tweeks = 10.0 * np.exp(rng.normal(0.0, 0.25))
        vols = [amp * (1 - np.exp(-w / tweeks)) + rng.normal(0.0, 1.0) for w in WEEKS]
        for w, v in zip(WEEKS, vols, strict=True):
            rows.append({"subject": f"A{k + 1:02d}", "week": w, "time_min": w * 7 * 1440,
                         "volume": round(float(v), 2)})
        # early swelling rate: least-squares slope over weeks 2-8, in mL/min/100 mL
        w = np.array(WEEKS[1:5], float) * 7 * 1440
        slope, _ = np.polyfit(w, np.array(vols[1:5]), 1)
        summary.append({"subject": f"A{k + 1:02d}", "swelling_rate": float(slope),
                        "ratio": round(float(np.clip(rng.normal(0.52, 0.08), 0.2, 0.9)), 2),
                        "pi_i": round(float(rng.normal(13.0, 2.0)), 1)})
    return rows, summary


def icu_weights(n: int = 6) -> list[dict[str, object]]:
    """Invented daily bed-scale weights (kg) of n septic patients over four days (studies/icu_fluid_balance.toml).

    Its own random stream, so that the other files do not change when this one does.
    """
    rng = np.random.default_rng([SEED, 16])
    rows: list[dict[str, object]] = []
    for p in range(1, n + 1):
        w0 = 70.0 + rng.normal(0.0, 8.0)      # invented admission weight, kg
        gain = rng.uniform(0.3, 1.2)          # invented weight gain, kg/day
        for day in range(4):
            rows.append({"patient_id": f"ICU{p:02d}", "day": day,
                         "weight_kg": f"{w0 + gain * day + rng.normal(0.0, 0.4):.1f}"})  # invented scale noise
    return rows


def _write(name: str, rows: list[dict[str, object]]) -> None:
    with (HERE / name).open("w", newline="") as fh:
        w = csv.DictWriter(fh, fieldnames=list(rows[0]))
        w.writeheader()
        w.writerows(rows)


def main() -> None:
    """Write the invented CSVs and print the observation blocks used in the studies."""
    rng = np.random.default_rng(SEED)
    _write("forearm_cuff_volumes_invented.csv", forearm_volumes(rng))
    print("# forearm_volunteers lymph_flow (invented)")
    for subj, v in forearm_lymph(rng):
        print(f"subject={subj} value={v}")
    cohort = septic_cohort(rng)
    _write("septic_cohort_invented.csv", cohort)
    print("# septic_shock_cohort (invented)")
    for row in cohort:
        print(row)
    weeks, summary = arm_swelling(rng)
    _write("arm_volume_weeks_invented.csv", weeks)
    print("# arm_after_node_surgery (invented)")
    for row in summary:
        print({**row, "swelling_rate": f"{row['swelling_rate']:.3g}"})
    _write("icu_weights_invented.csv", icu_weights())


if __name__ == "__main__":
    main()
