"""Invented refrigeration-compressor data for the demo and the tests.

Cold-storage sites score their compressors for fault risk. Readings are drawn
with a fixed seed, and the labels come from known true coefficients (per
original unit), so a test can check that fitting recovers them. No real site,
unit or operator is described.
"""

from __future__ import annotations

import numpy as np

NUMERIC = {
    # name: (mean, standard deviation) of the reading
    "discharge_temp_c": (82.0, 7.0),
    "suction_pressure_kpa": (310.0, 45.0),
    "motor_current_a": (21.0, 3.0),
    "vibration_mm_s": (3.2, 1.1),
    "hours_since_service": (3500.0, 1800.0),
    "ambient_temp_c": (24.0, 6.0),
    "door_open_min_per_h": (6.0, 3.0),
}
REFRIGERANTS = ("R404A", "R448A", "R744", "R290")
ZONES = ("loading-dock", "chill-room", "frozen-store", "blast-freezer")

# True logit of a fault within 30 days, per original unit of each reading.
TRUE_FAULT = {
    "intercept": -2.2,
    "discharge_temp_c": 0.09,
    "suction_pressure_kpa": -0.012,
    "motor_current_a": 0.15,
    "vibration_mm_s": 0.55,
    "hours_since_service": 0.0003,
    "ambient_temp_c": 0.03,
    "door_open_min_per_h": 0.0,
    # category effects relative to the first level
    "refrigerant=R448A": 0.25,
    "refrigerant=R744": 0.6,
    "refrigerant=R290": -0.2,
    "site_zone=chill-room": 0.0,
    "site_zone=frozen-store": 0.35,
    "site_zone=blast-freezer": 0.7,
}
# The logit above is linear in (reading - CENTRE[reading]).
CENTRE = {name: mean for name, (mean, _) in NUMERIC.items()}
CENTRE.update(hours_since_service=3600.0, door_open_min_per_h=6.0, vibration_mm_s=3.2)
# Columns the demo's fault model reads; the others are labels or the unit identifier.
FEATURES_NUMERIC = tuple(NUMERIC)
FEATURES_CATEGORICAL = ("refrigerant", "site_zone")
LABELS = ("fault_30d", "fault_type", "alarms_per_week")


def true_fault_intercept() -> float:
    """The true intercept per original unit: the logit at all-zero readings and the
    first level of each categorical."""
    return TRUE_FAULT["intercept"] - sum(TRUE_FAULT[n] * c for n, c in CENTRE.items())


MISSING_RATE = {"vibration_mm_s": 0.06, "suction_pressure_kpa": 0.04, "refrigerant": 0.03}


def compressor_readings(n: int = 4000, seed: int = 20261201):
    """A DataFrame of readings with labels fault_30d, fault_type and alarms_per_week."""
    import pandas as pd

    rng = np.random.default_rng(seed)
    data = {}
    for name, (mean, sd) in NUMERIC.items():
        data[name] = rng.normal(mean, sd, n)
    data["hours_since_service"] = rng.uniform(0.0, 7200.0, n)
    data["door_open_min_per_h"] = rng.gamma(4.0, 1.5, n)
    data["vibration_mm_s"] = rng.lognormal(np.log(3.0), 0.35, n)
    data["refrigerant"] = rng.choice(REFRIGERANTS, n, p=(0.4, 0.3, 0.2, 0.1))
    data["site_zone"] = rng.choice(ZONES, n, p=(0.2, 0.35, 0.3, 0.15))
    frame = pd.DataFrame(data)
    centred = {name: frame[name] - centre for name, centre in CENTRE.items()}
    logit = np.full(n, TRUE_FAULT["intercept"])
    for name in NUMERIC:
        logit += TRUE_FAULT[name] * centred[name].to_numpy()
    for key, beta in TRUE_FAULT.items():
        if "=" in key:
            col, level = key.split("=")
            logit += beta * (frame[col] == level).to_numpy()
    frame["fault_30d"] = (rng.uniform(size=n) < 1.0 / (1.0 + np.exp(-logit))).astype(int)
    # Fault type: electrical follows motor current, mechanical vibration, leak low suction.
    scores = np.stack([
        np.zeros(n),
        -1.0 + 0.35 * centred["motor_current_a"].to_numpy(),
        -1.2 + 0.9 * centred["vibration_mm_s"].to_numpy(),
        -1.6 - 0.03 * centred["suction_pressure_kpa"].to_numpy(),
    ], axis=1)
    probs = np.exp(scores - scores.max(axis=1, keepdims=True))
    probs /= probs.sum(axis=1, keepdims=True)
    draws = (probs.cumsum(axis=1) > rng.uniform(size=(n, 1))).argmax(axis=1)
    frame["fault_type"] = np.array(["none", "electrical", "mechanical", "leak"])[draws]
    rate = np.exp(0.3 + 0.25 * centred["vibration_mm_s"].to_numpy()
                  + 0.08 * centred["door_open_min_per_h"].to_numpy())
    frame["alarms_per_week"] = rng.poisson(rate)
    frame.insert(0, "unit_id", [f"CU-{i:05d}" for i in range(n)])
    for col, rate_missing in MISSING_RATE.items():
        frame.loc[rng.uniform(size=n) < rate_missing, col] = None
    return frame
