"""Generate the bundled demo data: an invented hillside vineyard cooperative.

Scenario (fictional, for the demo only): a cooperative of 24 hillside vineyards records, for
each of 3,000 sampled vines over six seasons, soil and weather readings and the grape yield at
harvest. Members of the cooperative want to predict yield per vine (regression) and whether a
vine's fruit makes the premium grade (classification).

The yield depends on the readings through thresholds and interactions (frost nights, a pH
optimum, water stress), so single trees are unstable and bagging helps; vineyards add a shared
random effect (a natural grouping), varieties differ in size (natural strata), and rows are
ordered by harvest day (a natural order for block resampling).

Run from the repository root:  python demo-data/make_vineyards.py
It rewrites python/bagwise/data/vineyards.csv (shipped in the package) deterministically
(seed below); ``python make_vineyards.py OUT.csv`` writes elsewhere.
"""

from __future__ import annotations

import csv
import sys
from pathlib import Path

import numpy as np

SEED = 20261201
N_VINES = 3000
N_VINEYARDS = 24
VARIETIES = ("ridge_red", "slate_white", "valley_rose")
VARIETY_SHARES = (0.5, 0.3, 0.2)
SEASONS = (2020, 2021, 2022, 2023, 2024, 2025)

COLUMNS = (
    "vine_id", "season", "harvest_day", "vineyard", "variety", "slope_deg", "altitude_m",
    "soil_ph", "soil_moisture_pct", "nitrogen_ppm", "sun_hours", "rain_mm", "frost_nights",
    "vine_age_years", "yield_kg", "premium_grade",
)


def generate(seed: int = SEED) -> dict[str, np.ndarray]:
    rng = np.random.default_rng(seed)
    n = N_VINES
    season = rng.choice(SEASONS, size=n)
    harvest_day = rng.integers(245, 290, size=n)  # day of year
    order = np.lexsort((harvest_day, season))  # rows ordered by season, then harvest day
    season, harvest_day = season[order], harvest_day[order]

    vineyard = rng.integers(0, N_VINEYARDS, size=n)
    variety = rng.choice(len(VARIETIES), size=n, p=VARIETY_SHARES)
    vineyard_altitude = rng.uniform(180, 620, size=N_VINEYARDS)
    vineyard_effect = rng.normal(0.0, 0.35, size=N_VINEYARDS)
    season_sun = dict(zip(SEASONS, rng.normal(1450, 90, size=len(SEASONS))))
    season_rain = dict(zip(SEASONS, rng.gamma(9.0, 45.0, size=len(SEASONS))))

    slope = rng.gamma(3.0, 4.0, size=n).clip(0, 35)
    altitude = vineyard_altitude[vineyard] + rng.normal(0, 15, size=n)
    soil_ph = rng.normal(6.6, 0.45, size=n).clip(5.2, 8.1)
    moisture = rng.beta(4, 6, size=n) * 45
    nitrogen = rng.lognormal(3.2, 0.35, size=n)
    sun = np.array([season_sun[s] for s in season]) + rng.normal(0, 40, size=n) - 0.4 * slope
    rain = np.array([season_rain[s] for s in season]) * rng.lognormal(0, 0.15, size=n)
    frost = rng.poisson(np.clip((altitude - 250) / 90, 0.1, None))
    age = rng.integers(3, 45, size=n)

    # Yield (kg per vine): a pH optimum, water stress below a moisture threshold, sunshine
    # gains that saturate, frost losses, a vigour peak in mid-life, variety and vineyard.
    base = np.array([4.2, 3.4, 3.9])[variety]
    ph_term = -1.4 * (soil_ph - 6.5) ** 2
    stress = np.where(moisture < 12, -1.1 - 0.05 * (12 - moisture), 0.0)
    sun_term = 1.6 * np.tanh((sun - 1400) / 120)
    frost_term = -0.45 * np.minimum(frost, 5) * (altitude > 400)
    vigour = 0.9 * np.exp(-(((age - 18) / 11) ** 2))
    nitrogen_term = 0.35 * np.log(nitrogen / 25) * (rain > 350)
    mean_yield = (base + ph_term + stress + sun_term + frost_term + vigour + nitrogen_term
                  + vineyard_effect[vineyard])
    yield_kg = np.maximum(0.2, mean_yield + rng.normal(0, 0.55, size=n))

    # Premium grade: concentrated fruit from moderately stressed, sunny, low-yield vines.
    score = (1.3 * np.tanh((sun - 1420) / 100) - 0.55 * (yield_kg - 3.5)
             + 0.8 * (variety == 1) - 0.9 * (soil_ph > 7.2) + rng.logistic(0, 0.6, size=n))
    premium = (score > 0.4).astype(int)

    return {
        "vine_id": np.arange(1, n + 1), "season": season, "harvest_day": harvest_day,
        "vineyard": np.array([f"V{v + 1:02d}" for v in vineyard]),
        "variety": np.array(VARIETIES)[variety], "slope_deg": slope.round(1),
        "altitude_m": altitude.round(0).astype(int), "soil_ph": soil_ph.round(2),
        "soil_moisture_pct": moisture.round(1), "nitrogen_ppm": nitrogen.round(1),
        "sun_hours": sun.round(0).astype(int), "rain_mm": rain.round(0).astype(int),
        "frost_nights": frost, "vine_age_years": age, "yield_kg": yield_kg.round(2),
        "premium_grade": premium,
    }


def main() -> None:
    data = generate()
    packaged = Path(__file__).resolve().parents[1] / "python" / "bagwise" / "data"
    path = Path(sys.argv[1]) if len(sys.argv) > 1 else packaged / "vineyards.csv"
    with path.open("w", newline="") as handle:
        writer = csv.writer(handle)
        writer.writerow(COLUMNS)
        writer.writerows(zip(*(data[c].tolist() for c in COLUMNS)))
    print(f"wrote {path} ({N_VINES} rows, {path.stat().st_size / 1024:.0f} KiB)")


if __name__ == "__main__":
    main()
