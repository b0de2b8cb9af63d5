"""Synthetic greenhouse yield data for trying foldwise end to end.

Each row is one greenhouse bay over one growing season. The target
``yield_kg_m2`` is marketable fruit in kilograms per square metre per season,
driven by the climate settings, the cultivar and the growing system. The data
are generated here, from the formula below; they describe no real greenhouse.

Columns (16 features + target)
------------------------------
Categorical (strings), drawn independently:
    cultivar        one of ``CULTIVARS`` (5 levels, equally likely)
    glazing         ``single_glass``, ``double_glass``, ``diffuse_glass`` (p = 0.45, 0.30, 0.25)
    irrigation      ``drip``, ``ebb_flow``, ``nutrient_film`` (p = 0.5, 0.3, 0.2)
Numeric settings, drawn independently (U = uniform, N = normal):
    day_temp_c              U(16, 30)     day temperature setpoint, deg C
    night_temp_c            day_temp_c - U(2, 8)
    rel_humidity_pct        U(55, 95)
    co2_ppm                 U(380, 1400)
    light_hours             U(0, 12)      supplemental lighting, hours per day
    substrate_ec_ms_cm      U(1.5, 4.5)   electrical conductivity, mS/cm
    substrate_ph            N(5.9, 0.35)
    plant_density_m2        U(1.8, 4.5)   plants per square metre
    bay_area_m2             U(80, 400)
Sensor readings (proxies only; not used by the formula), with drop-outs:
    leaf_temp_c             day_temp_c - 0.8 + 0.15*(light_hours - 6) + N(0, 0.9);
                            NaN in 10 % of rows
    par_umol_m2_s           (180 + 28*light_hours) * T[glazing] + N(0, 40);
                            NaN in 12 % of rows
Pure noise:
    bay_row                 integer 1..48
    logger_battery_pct      U(20, 100)

Target formula
--------------
With D = day_temp_c, c = cultivar, g = glazing, i = irrigation::

    yield_kg_m2 = BASE[c]
                - 0.20 * (D - T_OPT[c])**2                    # temperature optimum, per cultivar
                + 0.25 * (night_temp_c - (D - 5))             # small night-drop effect
                + 14.0 * (1 - exp(-(co2_ppm - 380) / 350))    # saturating CO2 response
                + 1.6 * T[g] * max(0, light_hours - 5)        # light helps only past 5 h; glazing x light
                - 0.45 * max(0, rel_humidity_pct - 85)        # disease pressure above 85 % RH
                - 1.5 * (substrate_ec_ms_cm - 2.8)**2         # EC optimum
                - 3.0 * (substrate_ph - 5.9)**2               # pH optimum
                + 6.0 * log(plant_density_m2 / 1.8)           # diminishing returns of density
                + IRR[i]
                + N(0, 2.2)

    BASE  = {aurelia: 28, bramble_red: 31, castellan: 26, dunmore: 33, ember_cherry: 24}
    T_OPT = {aurelia: 21, bramble_red: 23, castellan: 25, dunmore: 22, ember_cherry: 26}
    T     = {single_glass: 0.80, double_glass: 0.70, diffuse_glass: 0.95}   # light transmission
    IRR   = {drip: 0.0, ebb_flow: 1.0, nutrient_film: 2.0}

The target is computed from unrounded values; the frame then holds settings and
target rounded to 2 decimals and sensor readings to 1.
Generation is deterministic for a given ``seed`` (``numpy.random.default_rng``).

A 100-tree random forest reaches a 5-fold cross-validated R^2 of about 0.8 on
the default 3000 rows; a linear model on one-hot encoded inputs about 0.6.

Usage::

    python -m runner.demo OUT.csv [--rows N] [--seed S]
"""

from __future__ import annotations

import argparse
from pathlib import Path

import numpy as np
import pandas as pd

TARGET = "yield_kg_m2"

CULTIVARS = ("aurelia", "bramble_red", "castellan", "dunmore", "ember_cherry")
BASE = {"aurelia": 28.0, "bramble_red": 31.0, "castellan": 26.0, "dunmore": 33.0, "ember_cherry": 24.0}
T_OPT = {"aurelia": 21.0, "bramble_red": 23.0, "castellan": 25.0, "dunmore": 22.0, "ember_cherry": 26.0}
TRANSMISSION = {"single_glass": 0.80, "double_glass": 0.70, "diffuse_glass": 0.95}
IRRIGATION = {"drip": 0.0, "ebb_flow": 1.0, "nutrient_film": 2.0}

NOISE_SD = 2.2
LEAF_MISSING = 0.10
PAR_MISSING = 0.12


def make_greenhouse(n_rows: int = 3000, *, seed: int = 7) -> pd.DataFrame:
    """Return ``n_rows`` simulated greenhouse bays with target ``yield_kg_m2``.

    See the module docstring for the columns and the exact formula.
    """
    if n_rows < 1:
        raise ValueError("n_rows must be at least 1")
    rng = np.random.default_rng(seed)
    n = int(n_rows)

    cultivar = rng.choice(np.array(CULTIVARS), size=n)
    glazing = rng.choice(np.array(list(TRANSMISSION)), size=n, p=[0.45, 0.30, 0.25])
    irrigation = rng.choice(np.array(list(IRRIGATION)), size=n, p=[0.5, 0.3, 0.2])

    day = rng.uniform(16.0, 30.0, n)
    night = day - rng.uniform(2.0, 8.0, n)
    rh = rng.uniform(55.0, 95.0, n)
    co2 = rng.uniform(380.0, 1400.0, n)
    light = rng.uniform(0.0, 12.0, n)
    ec = rng.uniform(1.5, 4.5, n)
    ph = rng.normal(5.9, 0.35, n)
    density = rng.uniform(1.8, 4.5, n)
    area = rng.uniform(80.0, 400.0, n)

    trans = pd.Series(glazing).map(TRANSMISSION).to_numpy(dtype=float)
    leaf = day - 0.8 + 0.15 * (light - 6.0) + rng.normal(0.0, 0.9, n)
    par = (180.0 + 28.0 * light) * trans + rng.normal(0.0, 40.0, n)
    leaf[rng.random(n) < LEAF_MISSING] = np.nan
    par[rng.random(n) < PAR_MISSING] = np.nan

    bay_row = rng.integers(1, 49, n)
    battery = rng.uniform(20.0, 100.0, n)

    base = pd.Series(cultivar).map(BASE).to_numpy(dtype=float)
    t_opt = pd.Series(cultivar).map(T_OPT).to_numpy(dtype=float)
    irr = pd.Series(irrigation).map(IRRIGATION).to_numpy(dtype=float)

    y = (
        base
        - 0.20 * (day - t_opt) ** 2
        + 0.25 * (night - (day - 5.0))
        + 14.0 * (1.0 - np.exp(-(co2 - 380.0) / 350.0))
        + 1.6 * trans * np.maximum(0.0, light - 5.0)
        - 0.45 * np.maximum(0.0, rh - 85.0)
        - 1.5 * (ec - 2.8) ** 2
        - 3.0 * (ph - 5.9) ** 2
        + 6.0 * np.log(density / 1.8)
        + irr
        + rng.normal(0.0, NOISE_SD, n)
    )

    return pd.DataFrame(
        {
            "cultivar": cultivar,
            "glazing": glazing,
            "irrigation": irrigation,
            "day_temp_c": day.round(2),
            "night_temp_c": night.round(2),
            "rel_humidity_pct": rh.round(2),
            "co2_ppm": co2.round(2),
            "light_hours": light.round(2),
            "substrate_ec_ms_cm": ec.round(2),
            "substrate_ph": ph.round(2),
            "plant_density_m2": density.round(2),
            "bay_area_m2": area.round(2),
            "leaf_temp_c": leaf.round(1),
            "par_umol_m2_s": par.round(1),
            "bay_row": bay_row,
            "logger_battery_pct": battery.round(2),
            TARGET: y.round(2),
        }
    )


def write_greenhouse(path, n_rows: int = 3000, *, seed: int = 7) -> Path:
    """Write :func:`make_greenhouse` output as CSV to ``path`` and return it."""
    out = Path(path)
    out.parent.mkdir(parents=True, exist_ok=True)
    make_greenhouse(n_rows, seed=seed).to_csv(out, index=False)
    return out


def _main(argv=None) -> None:
    parser = argparse.ArgumentParser(description="Write the synthetic greenhouse yield CSV.")
    parser.add_argument("out", help="CSV file to write")
    parser.add_argument("--rows", type=int, default=3000, help="number of bays (default 3000)")
    parser.add_argument("--seed", type=int, default=7, help="random seed (default 7)")
    args = parser.parse_args(argv)
    print(write_greenhouse(args.out, args.rows, seed=args.seed))


if __name__ == "__main__":
    _main()
