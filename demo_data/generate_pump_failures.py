"""Generate the invented Larkmere Water pump-failure table (synthetic data).

Larkmere Water is a made-up water utility; its sites, pump makers and pumps are invented,
and every number below comes from a seeded random generator, not from any real utility.
The scenario: each row is one pump at one month-end, summarised from its sensors over the
previous 30 days (run hours, vibration, bearing temperature, discharge pressure, motor
current, starts) plus its age and the months since it was last serviced. The question a
reliability team would ask of it is whether the pump fails within the next 30 days
(``failed_within_30d``, 0 or 1).

The label is drawn from a logistic model of a few features, one interaction (old pumps that
start and stop often wear faster), two threshold effects (hot bearings; pressure far from the
pump type's nominal) and a per-site shift, so a linear model does decently and a tree
ensemble can do a little better. A few cells in three sensor columns are left empty, as real
telemetry gaps would be.

Run ``python demo_data/generate_pump_failures.py`` from anywhere; it writes
``pump_failures.csv`` next to this file, byte-identical on every run.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd

SEED = 20240611
N_PUMPS = 1500
OUTPUT = Path(__file__).resolve().parent / "pump_failures.csv"

# Invented site names; the effect is each site's shift in failure log-odds (water hardness,
# grit, maintenance crew habits), unknown to the model unless it sees the site.
SITES = {
    "Harrow Reach": 0.35,
    "Cobble Fen": -0.30,
    "Marlow Sluice": 0.10,
    "Thistle Weir": -0.15,
    "Ashby Cut": 0.45,
    "Wrenfold": -0.40,
    "Quarry Lees": 0.25,
    "Saltmarsh Gate": 0.05,
    "Bramble Hythe": -0.20,
    "Oxen Ford": 0.30,
    "Fennick Down": -0.05,
    "Pellow Mere": -0.35,
}

# Invented pump makers: (share of the fleet, shift in failure log-odds).
MANUFACTURERS = {
    "Calder Hydraulics": (0.35, 0.0),
    "Norvane Pumps": (0.25, 0.30),
    "Osk & Tilley": (0.25, -0.25),
    "Brightwell Flow": (0.15, 0.15),
}

# pump type: (share, typical discharge pressure in bar, typical motor current in A)
PUMP_TYPES = {
    "centrifugal": (0.5, 4.0, 45.0),
    "submersible": (0.3, 2.5, 30.0),
    "booster": (0.2, 6.5, 20.0),
}

MISSING_SHARE = {"bearing_temp_c": 0.04, "motor_current_a": 0.03, "months_since_service": 0.05}


def make_pumps(rng: np.random.Generator, n: int) -> pd.DataFrame:
    """Draw one month-end sensor summary per pump, before the label."""
    site = rng.choice(list(SITES), size=n)
    maker_names = list(MANUFACTURERS)
    maker = rng.choice(maker_names, size=n, p=[MANUFACTURERS[m][0] for m in maker_names])
    type_names = list(PUMP_TYPES)
    pump_type = rng.choice(type_names, size=n, p=[PUMP_TYPES[t][0] for t in type_names])
    base_pressure = np.array([PUMP_TYPES[t][1] for t in pump_type])
    base_current = np.array([PUMP_TYPES[t][2] for t in pump_type])

    age = rng.gamma(shape=2.2, scale=4.5, size=n).clip(0.2, 40.0)
    run_hours = rng.normal(480.0, 140.0, size=n).clip(20.0, 720.0)
    months_since_service = rng.poisson(lam=7.0, size=n).clip(0, 36)
    # Vibration rises with age and with time since service; log-normal noise on top.
    vibration = (1.2 + 0.06 * age + 0.08 * months_since_service) * rng.lognormal(0.0, 0.35, size=n)
    bearing_temp = 48.0 + 3.2 * vibration + 0.01 * run_hours + rng.normal(0.0, 5.0, size=n)
    pressure = base_pressure * rng.normal(1.0, 0.12, size=n)
    current = base_current * (1.0 + 0.02 * vibration) * rng.normal(1.0, 0.08, size=n)
    # Boosters cycle on demand, so they start far more often.
    start_rate = np.where(pump_type == "booster", 90.0, 25.0)
    starts = rng.poisson(start_rate * rng.lognormal(0.0, 0.4, size=n))

    return pd.DataFrame(
        {
            "pump_id": [f"P-{i:04d}" for i in range(1, n + 1)],
            "site": site,
            "manufacturer": maker,
            "pump_type": pump_type,
            "age_years": age,
            "run_hours_30d": run_hours,
            "vibration_rms_mm_s": vibration,
            "bearing_temp_c": bearing_temp,
            "discharge_pressure_bar": pressure,
            "motor_current_a": current,
            "starts_30d": starts,
            "months_since_service": months_since_service,
        }
    )


def failure_log_odds(pumps: pd.DataFrame) -> np.ndarray:
    """Log-odds of failing within 30 days, from the complete (pre-gap) readings."""

    def z(column: str) -> np.ndarray:
        values = pumps[column].to_numpy(dtype=float)
        return (values - values.mean()) / values.std()

    # Old pumps that start often wear their seals and windings fastest; a young pump shrugs
    # off frequent starts, so the effect is a product, not a sum.
    wear = z("age_years") * z("starts_30d")
    # Bearings degrade sharply once they run hot, not gradually.
    hot_bearing = (pumps["bearing_temp_c"].to_numpy() > 66.0).astype(float)
    # Running far from the pump type's nominal pressure, above (blockage) or below
    # (cavitation, leaks), strains the pump either way.
    nominal = pumps["pump_type"].map(lambda t: PUMP_TYPES[t][1]).to_numpy()
    off_duty = np.abs(pumps["discharge_pressure_bar"].to_numpy() / nominal - 1.0) > 0.15
    site_shift = pumps["site"].map(SITES).to_numpy()
    maker_shift = pumps["manufacturer"].map(lambda m: MANUFACTURERS[m][1]).to_numpy()
    return (
        -2.10
        + 0.55 * z("vibration_rms_mm_s")
        + 0.35 * z("months_since_service")
        + 0.20 * z("age_years")
        + 1.30 * wear
        + 1.50 * hot_bearing
        + 1.40 * off_duty
        + site_shift
        + maker_shift
    )


def punch_gaps(rng: np.random.Generator, pumps: pd.DataFrame) -> pd.DataFrame:
    """Blank a small share of cells in a few sensor columns, as telemetry gaps."""
    out = pumps.copy()
    for column, share in MISSING_SHARE.items():
        blank = np.zeros(len(out), dtype=bool)
        blank[rng.choice(len(out), size=round(share * len(out)), replace=False)] = True
        # Nullable integers keep whole numbers written as "7", not "7.0", around the gaps.
        if pd.api.types.is_integer_dtype(out[column]):
            out[column] = out[column].astype("Int64")
        out[column] = out[column].mask(blank)
    return out


def round_for_output(pumps: pd.DataFrame) -> pd.DataFrame:
    """Round readings to the resolution a sensor summary would report."""
    out = pumps.copy()
    out["age_years"] = out["age_years"].round(1)
    out["run_hours_30d"] = out["run_hours_30d"].round(1)
    for column in ["vibration_rms_mm_s", "discharge_pressure_bar"]:
        out[column] = out[column].round(2)
    for column in ["bearing_temp_c", "motor_current_a"]:
        out[column] = out[column].round(1)
    return out


def generate(seed: int = SEED, n: int = N_PUMPS) -> pd.DataFrame:
    """Build the whole table deterministically from ``seed``."""
    rng = np.random.default_rng(seed)
    pumps = make_pumps(rng, n)
    probability = 1.0 / (1.0 + np.exp(-failure_log_odds(pumps)))
    pumps["failed_within_30d"] = (rng.random(n) < probability).astype(int)
    return round_for_output(punch_gaps(rng, pumps))


def main() -> None:
    table = generate()
    table.to_csv(OUTPUT, index=False, lineterminator="\n", na_rep="")
    rate = table["failed_within_30d"].mean()
    print(f"wrote {OUTPUT} ({len(table)} rows, failure rate {rate:.3f})")


if __name__ == "__main__":
    main()
