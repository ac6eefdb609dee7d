"""Seeded benchmark data: an invented crayfish trapping survey of any size.

Two layouts of the same ZINB with reach effects in both parts:

``continuous``
    water temperature and depth are real numbers, so almost no two rows share covariates.
``discrete``
    every covariate is a category or a whole number (substrate class, season, barrier,
    trap nights 1-4), so many rows repeat exactly and can be pooled into weighted patterns.

Only NumPy is used, so the truth is known exactly. The data describe no real river.

Example
-------
>>> df, truth = make_data(200, layout="discrete", seed=1)
>>> sorted(df.columns)[:3]
['barrier', 'crayfish', 'reach']
>>> int(df["trap_nights"].max()) <= 4
True
"""

from __future__ import annotations

from typing import Any

import numpy as np
import pandas as pd

SUBSTRATES = ("cobble", "gravel", "silt")
SEASONS = ("spring", "summer", "autumn", "winter")

#: formulas of the benchmark model, per layout (bayeszi notation)
FORMULAS = {
    "continuous": ("crayfish ~ water_temp + C(substrate) + depth", "~ barrier"),
    "discrete": ("crayfish ~ C(substrate) + C(season)", "~ barrier"),
}


def make_data(n: int, layout: str = "continuous", n_groups: int = 30,
              seed: int = 20240917) -> tuple[pd.DataFrame, dict[str, Any]]:
    """Simulate ``n`` trap line checks on ``n_groups`` reaches; returns (data, truth)."""
    if layout not in FORMULAS:
        raise ValueError(f"layout must be one of {sorted(FORMULAS)}, got {layout!r}")
    rng = np.random.Generator(np.random.PCG64(seed))
    reach = rng.integers(0, n_groups, n)
    barrier_of = (rng.random(n_groups) < 0.3).astype(np.int64)
    barrier = barrier_of[reach]
    substrate = rng.choice(len(SUBSTRATES), size=n, p=[0.4, 0.35, 0.25])
    trap_nights = rng.integers(1, 5, n)
    u_c = rng.normal(0.0, 0.5, n_groups)
    u_z = rng.normal(0.0, 0.8, n_groups)
    b_sub = np.array([0.0, 0.3, -0.5])
    if layout == "continuous":
        water_temp = np.round(rng.normal(14.0, 3.0, n), 3)
        depth = np.round(rng.uniform(0.2, 1.2, n), 4)
        eta_c = -0.2 + 0.08 * (water_temp - 14.0) + b_sub[substrate] - 0.6 * (depth - 0.7)
        cols = {"water_temp": water_temp, "depth": depth}
    else:
        season = rng.integers(0, len(SEASONS), n)
        b_sea = np.array([0.0, 0.4, 0.2, -0.6])
        eta_c = -0.2 + b_sub[substrate] + b_sea[season]
        cols = {"season": np.array(SEASONS)[season]}
    eta_c = eta_c + u_c[reach] + np.log(trap_nights)
    eta_z = -1.2 + 2.5 * barrier + u_z[reach]
    alpha = 0.6
    lam = rng.gamma(1.0 / alpha, alpha * np.exp(eta_c))
    y = rng.poisson(lam)
    y[rng.random(n) < 1.0 / (1.0 + np.exp(-eta_z))] = 0
    width = len(str(n_groups))
    df = pd.DataFrame({
        "reach": np.array([f"R{i + 1:0{width}d}" for i in range(n_groups)])[reach],
        "substrate": np.array(SUBSTRATES)[substrate],
        "barrier": barrier,
        "trap_nights": trap_nights,
        **cols,
        "crayfish": y.astype(np.int64),
    })
    truth = {"alpha": alpha, "u_counts": u_c, "u_zeros": u_z, "seed": seed, "layout": layout}
    return df, truth


#: formulas of the panel benchmark (bayeszi notation): feeder effects come from ``groups``
PANEL_FORMULAS = ("finches ~ frost_days + woodland_km + feeder_height",
                  "~ woodland_km + frost_days")


def make_panel(n_feeders: int = 6000, seed: int = 20261203
               ) -> tuple[pd.DataFrame, dict[str, Any]]:
    """An invented garden-feeder panel: ``n_feeders`` feeders, each counted in 1 to 6
    winters (3.3 on average, so 6,000 feeders give about 20,000 feeder-winters).

    Per feeder-winter: the number of a scarce finch seen (``finches``), the observer's
    hours of watching (``hours``, the exposure), frost days that winter (``frost_days``),
    and the feeder's distance to woodland (``woodland_km``) and height (``feeder_height``),
    which do not change between winters. ZINB with feeder intercepts in both parts: some
    feeders are never visited (extra zeros), and visited ones differ in how many come.

    Example
    -------
    >>> df, truth = make_panel(300, seed=1)
    >>> 800 < len(df) < 1200 and df["feeder"].nunique() <= 300
    True
    """
    rng = np.random.Generator(np.random.PCG64(seed))
    winters = 1 + rng.binomial(5, 0.46, n_feeders)
    feeder = np.repeat(np.arange(n_feeders), winters)
    n = feeder.size
    woodland = np.round(rng.gamma(2.0, 0.6, n_feeders), 3)
    height = np.round(rng.uniform(0.8, 2.5, n_feeders), 2)
    frost = np.round(np.clip(rng.normal(22.0, 9.0, n), 0.0, None), 1)
    hours = np.round(rng.uniform(2.0, 20.0, n), 1)
    u_c = rng.normal(0.0, 0.6, n_feeders)
    u_z = rng.normal(0.0, 1.0, n_feeders)
    eta_c = (-1.3 + 0.025 * (frost - 22.0) - 0.35 * (woodland[feeder] - 1.2)
             + 0.2 * (height[feeder] - 1.65) + u_c[feeder] + np.log(hours))
    eta_z = -0.6 + 0.7 * (woodland[feeder] - 1.2) - 0.02 * (frost - 22.0) + u_z[feeder]
    alpha = 0.8
    lam = rng.gamma(1.0 / alpha, alpha * np.exp(eta_c))
    y = rng.poisson(lam)
    y[rng.random(n) < 1.0 / (1.0 + np.exp(-eta_z))] = 0
    width = len(str(n_feeders))
    df = pd.DataFrame({
        "feeder": np.array([f"F{i + 1:0{width}d}" for i in range(n_feeders)])[feeder],
        "frost_days": frost,
        "woodland_km": woodland[feeder],
        "feeder_height": height[feeder],
        "hours": hours,
        "finches": y.astype(np.int64),
    })
    truth = {"alpha": alpha, "sd_counts": 0.6, "sd_zeros": 1.0, "u_counts": u_c,
             "u_zeros": u_z, "seed": seed}
    return df, truth
