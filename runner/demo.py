"""Synthetic greenhouse yield data for trying foldwise end to end.

Each row is one greenhouse bay over one growing season: 250 bays, each grown for 12
seasons (2013-2024), so 3000 rows with 12 rows per bay. The target ``yield_kg_m2`` is
marketable fruit in kilograms per square metre per season, driven by the climate settings,
the cultivar, the growing system and the bay itself. Growers keep each bay's setpoints
much the same from season to season, and every bay has a lasting effect of its own (soil,
shading, drainage) that no column records. So the rows of one bay are alike, and a model
can learn a bay from its settings: folds that split a bay's rows across fitting and
validation score such memorising as skill. The data are generated here, from the formula
below; they describe no real greenhouse.

Columns (identifiers, 17 features, target)
------------------------------------------
    bay_id          ``B001`` ... ``B250``: the bay (a group key, not a feature)
    season          2013 ... 2024: the growing season
Categorical (strings):
    cultivar        one of ``CULTIVARS`` (5 levels, equally likely), chosen each season
    glazing         the bay's glass: ``single_glass``, ``double_glass``, ``diffuse_glass``
                    (p = 0.45, 0.30, 0.25), fixed per bay
    irrigation      the bay's system: ``drip``, ``ebb_flow``, ``nutrient_film``
                    (p = 0.5, 0.3, 0.2), fixed per bay
Bay settings: the bay's usual value U(lo, hi), plus N(0, 0.05 x (hi - lo)) each season,
clipped to [lo, hi] (U = uniform, N = normal):
    day_temp_c              (16, 30)      day temperature setpoint, deg C
    rel_humidity_pct        (55, 95)
    co2_ppm                 (380, 1400)
    light_hours             (0, 12)       supplemental lighting, hours per day
    substrate_ec_ms_cm      (1.5, 4.5)    electrical conductivity, mS/cm
    plant_density_m2        (1.8, 4.5)    plants per square metre
Other settings:
    night_temp_c            day_temp_c - U(2, 8), each season
    substrate_ph            N(5.9, 0.35), each season
    bay_area_m2             U(80, 400), fixed per bay
Sensor readings (proxies only; not used by the formula), with drop-outs:
    leaf_temp_c             day_temp_c - 0.8 + 0.15*(light_hours - 6) + N(0, 0.9);
                            NaN in 10 % of rows
    par_umol_m2_s           (180 + 28*light_hours) * T[glazing] + N(0, 40);
                            NaN in 12 % of rows
No effect on the target:
    bay_row                 integer 1..48, the bay's row in its house, fixed per bay
    logger_battery_pct      U(20, 100)

Target formula
--------------
With D = day_temp_c, c = cultivar, g = glazing, i = irrigation, s = season::

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
                + 0.2 * (s - 2013)                            # slow gains from season to season
                + BAY[bay_id]                                 # the bay's own effect, N(0, 3.0) per bay
                + N(0, 2.2)

    BASE  = {aurelia: 28, bramble_red: 31, castellan: 26, dunmore: 33, ember_cherry: 24}
    T_OPT = {aurelia: 21, bramble_red: 23, castellan: 25, dunmore: 22, ember_cherry: 26}
    T     = {single_glass: 0.80, double_glass: 0.70, diffuse_glass: 0.95}   # light transmission
    IRR   = {drip: 0.0, ebb_flow: 1.0, nutrient_film: 2.0}

The target is computed from unrounded values; the frame then holds settings and
target rounded to 2 decimals and sensor readings to 1. Rows come season by season,
bays in turn. Generation is deterministic for a given ``seed``
(``numpy.random.default_rng``).

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
SEASONS = 12
FIRST_SEASON = 2013
ADJUST = 0.05
BAY_SD = 3.0
TREND = 0.2


def make_greenhouse(n_rows: int = 3000, *, seed: int = 7) -> pd.DataFrame:
    """Return ``n_rows`` simulated bay-seasons with target ``yield_kg_m2``.

    See the module docstring for the columns and the exact formula.
    """
    if n_rows < 1:
        raise ValueError("n_rows must be at least 1")
    rng = np.random.default_rng(seed)
    n = int(n_rows)
    n_bays = -(-n // SEASONS)
    bay = np.arange(n) % n_bays  # season by season, every bay in turn
    season = FIRST_SEASON + np.arange(n) // n_bays

    def bay_setting(lo: float, hi: float) -> np.ndarray:
        """The bay's own setpoint, adjusted a little each season, kept within [lo, hi]."""
        usual = rng.uniform(lo, hi, n_bays)
        return np.clip(usual[bay] + rng.normal(0.0, ADJUST * (hi - lo), n), lo, hi)

    cultivar = rng.choice(np.array(CULTIVARS), size=n)
    glazing = rng.choice(np.array(list(TRANSMISSION)), size=n_bays, p=[0.45, 0.30, 0.25])[bay]
    irrigation = rng.choice(np.array(list(IRRIGATION)), size=n_bays, p=[0.5, 0.3, 0.2])[bay]

    day = bay_setting(16.0, 30.0)
    night = day - rng.uniform(2.0, 8.0, n)
    rh = bay_setting(55.0, 95.0)
    co2 = bay_setting(380.0, 1400.0)
    light = bay_setting(0.0, 12.0)
    ec = bay_setting(1.5, 4.5)
    ph = rng.normal(5.9, 0.35, n)
    density = bay_setting(1.8, 4.5)
    area = rng.uniform(80.0, 400.0, n_bays)[bay]

    trans = pd.Series(glazing).map(TRANSMISSION).to_numpy(dtype=float)
    leaf = day - 0.8 + 0.15 * (light - 6.0) + rng.normal(0.0, 0.9, n)
    par = (180.0 + 28.0 * light) * trans + rng.normal(0.0, 40.0, n)
    leaf[rng.random(n) < LEAF_MISSING] = np.nan
    par[rng.random(n) < PAR_MISSING] = np.nan

    bay_row = rng.integers(1, 49, n_bays)[bay]
    battery = rng.uniform(20.0, 100.0, n)
    bay_effect = rng.normal(0.0, BAY_SD, n_bays)[bay]

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
        + TREND * (season - FIRST_SEASON)
        + bay_effect
        + rng.normal(0.0, NOISE_SD, n)
    )

    return pd.DataFrame(
        {
            "bay_id": [f"B{b + 1:03d}" for b in bay],
            "season": season,
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


def write_demo_csv(frame: pd.DataFrame, path) -> Path:
    """Write a demo table as CSV to `path`, whole or not at all. An existing file is
    replaced only if it is an earlier demo file of the same columns (its header line), so
    a data file or a spec named by mistake is kept."""
    from .read.filenames import check_replaceable, make_folder, write_whole

    out = Path(path)
    header = ",".join(frame.columns) + "\n"
    hint = "Name a new file, or remove that one first if it is yours to lose."
    check_replaceable(out, header.encode(), "demo data file", hint)
    make_folder(out.parent, f"the folder of {out}", "Name a file in a folder.")
    text = frame.to_csv(index=False, lineterminator="\n")
    write_whole([(out, text.encode())], ".demo-")
    return out


def write_greenhouse(path, n_rows: int = 3000, *, seed: int = 7) -> Path:
    """Write :func:`make_greenhouse` output as CSV to ``path`` and return it."""
    return write_demo_csv(make_greenhouse(n_rows, seed=seed), path)


MAX_DEMO_ROWS = 10_000_000
"""The most rows a demo generator makes: about 2 GB of CSV, past any demo's need."""


def _whole_number(option: str, lo: int, hi: int):
    """An argparse type: a whole number in lo ... hi, else a usage error (exit 2)."""
    def parse(text: str) -> int:
        try:
            value = int(text)
        except ValueError:
            raise argparse.ArgumentTypeError(f"{text!r} is not a whole number") from None
        if not lo <= value <= hi:
            raise argparse.ArgumentTypeError(f"{value} is outside {lo:,} ... {hi:,}")
        return value

    parse.__name__ = option
    return parse


def demo_main(description: str, write, rows_help: str, argv=None) -> None:
    """The command line of a demo data generator: OUT, --rows, --seed; a refusal is one
    paragraph on stderr with exit status 2."""
    import inspect
    import sys

    from .errors import OutputError

    defaults = inspect.signature(write).parameters
    parser = argparse.ArgumentParser(description=description)
    parser.add_argument("out", help="CSV file to write")
    parser.add_argument("--rows", type=_whole_number("--rows", 1, MAX_DEMO_ROWS),
                        default=defaults["n_rows"].default,
                        help=f"{rows_help}; 1 ... {MAX_DEMO_ROWS:,}")
    seed = defaults["seed"].default
    parser.add_argument("--seed", type=_whole_number("--seed", 0, 2**32 - 1), default=seed,
                        help=f"random seed, 0 ... 2**32 - 1 (default {seed})")
    args = parser.parse_args(argv)
    try:
        print(write(args.out, args.rows, seed=args.seed))
    except OutputError as exc:
        print(f"Error: {exc}", file=sys.stderr)
        sys.exit(2)


def _main(argv=None) -> None:
    demo_main("Write the synthetic greenhouse yield CSV.", write_greenhouse,
              "number of bay-seasons (default 3000: 250 bays x 12 seasons)", argv)


if __name__ == "__main__":
    _main()
