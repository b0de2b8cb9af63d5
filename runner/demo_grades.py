"""Synthetic grading data for trying foldwise on a class target.

Each row is one harvested batch of tomatoes at a packing house; the target ``grade`` is the
inspector's grade of the batch, ``A``, ``B`` or ``C``. The data are generated here, from the
formula below; they describe no real packing house.

Columns (10 features + target)
------------------------------
Categorical (strings):
    cultivar            one of ``CULTIVARS`` (4 levels, equally likely)
    picking_crew        ``north``, ``south``, ``night`` (p = 0.4, 0.4, 0.2)
Numeric, drawn independently (U = uniform, N = normal):
    days_on_vine        U(40, 75)      days from flowering to picking
    harvest_temp_c      U(12, 34)      air temperature at picking
    firmness_n          N(38, 7)       penetrometer force, newtons
    brix                N(5.0, 0.8)    soluble solids, degrees Brix
    colour_index        U(0, 10)       0 green ... 10 deep red
    transport_hours     U(0.5, 12)
    blemish_pct         share of fruit with blemishes, ~ Beta(2, 18) * 100; NaN in 8 % of rows
Pure noise:
    scale_battery_pct   U(20, 100)

Grade formula
-------------
A latent quality score::

    q = QUALITY[cultivar]
      + 0.9 * (brix - 5)                         # sweeter is better
      - 0.004 * (firmness_n - 40)**2             # too soft or too hard
      - 0.05 * (colour_index - 7)**2             # ripe but not over-ripe
      - 0.06 * blemish_pct (missing: its mean)   # visible damage
      - 0.05 * max(0, harvest_temp_c - 26)       # heat at picking bruises fruit
      - 0.04 * transport_hours
      - 0.4 * [picking_crew == night]
      + N(0, 0.45)

    QUALITY = {amber_star: 0.3, red_sable: 0.0, tessa: -0.2, victor: 0.5}

The grade is A for the top 30 % of q, C for the bottom 25 %, B between. Generation is
deterministic for a given ``seed`` (``numpy.random.default_rng``)."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd

from .demo import demo_main, write_demo_csv

__all__ = ["make_grades", "write_grades", "CULTIVARS", "TARGET"]

TARGET = "grade"
CULTIVARS = ("amber_star", "red_sable", "tessa", "victor")
QUALITY = {"amber_star": 0.3, "red_sable": 0.0, "tessa": -0.2, "victor": 0.5}
CREWS = ("north", "south", "night")


def make_grades(n_rows: int = 1500, *, seed: int = 5) -> pd.DataFrame:
    """Return ``n_rows`` simulated batches with target ``grade`` (see the module docstring)."""
    if n_rows < 1:
        raise ValueError("n_rows must be at least 1")
    rng = np.random.default_rng(seed)
    n = int(n_rows)
    cultivar = rng.choice(np.array(CULTIVARS), size=n)
    crew = rng.choice(np.array(CREWS), size=n, p=[0.4, 0.4, 0.2])
    days = rng.uniform(40.0, 75.0, n)
    temp = rng.uniform(12.0, 34.0, n)
    firmness = rng.normal(38.0, 7.0, n)
    brix = rng.normal(5.0, 0.8, n)
    colour = rng.uniform(0.0, 10.0, n)
    transport = rng.uniform(0.5, 12.0, n)
    blemish = rng.beta(2.0, 18.0, n) * 100.0
    battery = rng.uniform(20.0, 100.0, n)
    q = (pd.Series(cultivar).map(QUALITY).to_numpy(dtype=float)
         + 0.9 * (brix - 5.0)
         - 0.004 * (firmness - 40.0) ** 2
         - 0.05 * (colour - 7.0) ** 2
         - 0.06 * blemish
         - 0.05 * np.maximum(0.0, temp - 26.0)
         - 0.04 * transport
         - 0.4 * (crew == "night")
         + rng.normal(0.0, 0.45, n))
    low, high = np.quantile(q, [0.25, 0.70])
    grade = np.where(q >= high, "A", np.where(q < low, "C", "B"))
    shown_blemish = blemish.copy()
    shown_blemish[rng.random(n) < 0.08] = np.nan
    return pd.DataFrame({
        "cultivar": cultivar, "picking_crew": crew, "days_on_vine": days.round(1),
        "harvest_temp_c": temp.round(1), "firmness_n": firmness.round(1),
        "brix": brix.round(2), "colour_index": colour.round(2),
        "transport_hours": transport.round(1), "blemish_pct": shown_blemish.round(2),
        "scale_battery_pct": battery.round(1), TARGET: grade})


def write_grades(path, n_rows: int = 1500, *, seed: int = 5) -> Path:
    """Write :func:`make_grades` output as CSV to ``path`` and return it."""
    return write_demo_csv(make_grades(n_rows, seed=seed), path)


def _main(argv=None) -> None:
    demo_main("Write the synthetic batch grading CSV.", write_grades,
              "number of batches (default 1500)", argv)


if __name__ == "__main__":
    _main()
