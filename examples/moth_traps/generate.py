"""Seeded generator of the moth light-trap example (an invented survey, simulated from scratch).

Story: a monitoring programme runs light traps at sites in four regions. On each trap
night every trap is emptied and the moths of four groups are counted, so one trap night
gives one record per group. A group's catch depends on the night's minimum temperature
(warm nights, more flight), on a bright moon (fewer moths come to the light) and on the
hours the lamp burned (the exposure). Some records are extra zeros: a group is simply
absent from a site, more often where there is little woodland around it. The groups and
regions differ, which is the point of the example: the same study is run once per
group x region stratum (``strata = ["group", "region"]`` in the study file) and an
overview puts the strata side by side. The ``island`` region has two traps only, so its
strata hold too few records and are skipped with a reason.

True model, per stratum (group g, region r; zero-inflated negative binomial)::

    counts part (exposure ``trap_hours``):
        log mu = log(trap_hours) + b0[g, r] + b_temp[g] * min_temp_c
                 + b_moon[g] * bright_moon + v[g, site]
        with min_temp_c = min_temp - 10 (deg C above 10)
    zeros part, P(extra zero) (the group is absent from the trap):
        logit p = a0[g] + a_wood[g] * woodland
    Y ~ p * 0 + (1 - p) * NB(mu, alpha[g]),   variance mu + alpha mu^2
    b0[g, r] = b0[g] + shift[g, r], shift ~ Normal(0, 0.3); v ~ Normal(0, SITE_SD)

Every drawn value is in ``truth.json``; with the CSV it gives each row's true ``mu`` and
``p`` (:func:`true_parts`). Needs numpy and pandas only. ``python generate.py`` rewrites
``catches.csv`` and ``truth.json`` beside this script, byte-identical for the same seed;
files are written to temporary names and then renamed.

Example
-------
>>> data, truth = simulate(seed=1, sites=2, nights=3)
>>> sorted(data["group"].unique())
['emerald', 'hawk', 'pug', 'tiger']
>>> len(data) == 4 * 3 * (2 * 3 + 2)   # groups x nights x (3 regions x 2 sites + island)
True
"""

from __future__ import annotations

import argparse
import json
import os
import tempfile
from collections.abc import Mapping, Sequence
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd

try:  # the package's error class when installed; a plain ValueError otherwise
    from bayeszi.base.errors import BayesziError
except ImportError:  # pragma: no cover
    BayesziError = ValueError  # type: ignore[misc,assignment]

GENERATOR_VERSION = "1.0.0"
DEFAULT_SEED = 20241203
CSV_NAME = "catches.csv"
TRUTH_NAME = "truth.json"

#: the moth groups, with their true values (invented): counts intercept per trap hour at
#: 10 deg C and a dark sky, per-degree and bright-moon effects, zeros part intercept and
#: woodland effect, NB overdispersion. Six are defined; the example uses the first four.
GROUPS: dict[str, dict[str, float]] = {
    "emerald": {"b0": -1.0, "b_temp": 0.10, "b_moon": -0.50, "a0": 0.6, "a_wood": -2.5,
                "alpha": 0.5},
    "hawk": {"b0": -2.0, "b_temp": 0.16, "b_moon": -0.20, "a0": 0.2, "a_wood": -1.5,
             "alpha": 0.8},
    "pug": {"b0": -0.3, "b_temp": 0.05, "b_moon": -0.70, "a0": -0.4, "a_wood": -1.0,
            "alpha": 0.4},
    "tiger": {"b0": -1.5, "b_temp": 0.12, "b_moon": -0.35, "a0": 0.9, "a_wood": -3.0,
              "alpha": 0.6},
    "footman": {"b0": -0.8, "b_temp": 0.08, "b_moon": -0.45, "a0": 0.0, "a_wood": -2.0,
                "alpha": 0.5},
    "carpet": {"b0": -1.2, "b_temp": 0.14, "b_moon": -0.30, "a0": 0.4, "a_wood": -1.8,
               "alpha": 0.7},
}
N_GROUPS = 4
#: regions and how many traps each has (the island's two give too few records)
REGIONS: dict[str, int | None] = {"coast": None, "lowland": None, "upland": None, "island": 2}
#: regions defined beyond the example's (for bigger runs, e.g. the strata benchmark)
MORE_REGIONS = ("heath", "valley", "moor")
SHIFT_SD = 0.3
SITE_SD = 0.4
TEMP_CENTRE = 10.0
COLUMNS = ("group", "region", "site", "night", "trap_hours", "min_temp", "bright_moon",
           "woodland", "catch")


def _check_int(name: str, value: Any, low: int, high: int | None = None) -> int:
    bad = not isinstance(value, (int, np.integer)) or isinstance(value, bool) or value < low \
        or (high is not None and value > high)
    if bad:
        top = f" and at most {high}" if high is not None else ""
        raise BayesziError(f"setting '{name}' must be a whole number of at least {low}{top}, "
                           f"got {value!r}")
    return int(value)


def _regions(sites: int, n_regions: int, island: bool) -> dict[str, int]:
    """Traps per region: ``n_regions`` regions of ``sites`` traps, and the island's two."""
    names = [r for r in REGIONS if r != "island"] + list(MORE_REGIONS)
    out = {r: sites for r in names[:n_regions]}
    if island:
        out["island"] = int(REGIONS["island"] or 2)
    return out


def _site_frame(rng: np.random.Generator, regions: Mapping[str, int], nights: int
                ) -> pd.DataFrame:
    """One row per trap night: region, site, night, hours, temperature, moon, woodland."""
    rows = []
    k = 0
    for region, n_sites in regions.items():
        for _ in range(n_sites):
            k += 1
            rows.append((region, f"T{k:03d}", float(np.round(rng.beta(1.6, 1.6), 2))))
    site_region = np.array([r[0] for r in rows])
    site_id = np.array([r[1] for r in rows])
    woodland = np.array([r[2] for r in rows])
    s = np.repeat(np.arange(len(rows)), nights)
    n = s.size
    moon_cycle = rng.integers(0, 28)  # a trap is run every third night, staggered by site
    night = np.tile(np.arange(1, nights + 1), len(rows))
    day = (3 * (night - 1) + s % 3 + moon_cycle) % 28
    bright = (day >= 11) & (day <= 17)  # the week around full moon
    return pd.DataFrame({
        "region": site_region[s], "site": site_id[s], "night": night.astype(np.int64),
        "trap_hours": np.round(rng.uniform(5.0, 11.0, n), 1),
        "min_temp": np.round(rng.normal(11.0, 3.5, n), 1),
        "bright_moon": bright.astype(np.int64),
        "woodland": woodland[s],
    })


def simulate(seed: int = DEFAULT_SEED, sites: int = 8, nights: int = 10,
             n_groups: int = N_GROUPS, n_regions: int = 3, island: bool = True
             ) -> tuple[pd.DataFrame, dict[str, Any]]:
    """Simulate the survey and return ``(data, truth)`` in memory.

    Parameters
    ----------
    seed : seed of NumPy's PCG64 generator.
    sites : traps per region (the island always has two).
    nights : trap nights per trap.
    n_groups : how many of the six moth groups are counted (the first ``n_groups``).
    n_regions : regions besides the island (at most 6).
    island : whether the two-trap island region is surveyed.

    Each group x region stratum holds ``sites x nights`` records.

    Example
    -------
    >>> data, truth = simulate(seed=2, sites=3, nights=4, n_groups=2, island=False)
    >>> len(data), sorted(truth["strata"])[:1]
    (72, ['emerald / coast'])
    """
    seed = _check_int("seed", seed, 0)
    sites = _check_int("sites", sites, 1)
    nights = _check_int("nights", nights, 1)
    n_groups = _check_int("n_groups", n_groups, 1, len(GROUPS))
    n_regions = _check_int("n_regions", n_regions, 1, 3 + len(MORE_REGIONS))
    rng = np.random.Generator(np.random.PCG64(seed))
    regions = _regions(sites, n_regions, bool(island))
    base = _site_frame(rng, regions, nights)
    groups = list(GROUPS)[:n_groups]
    frames, strata, site_effects = [], {}, {}
    temp_c = base["min_temp"].to_numpy() - TEMP_CENTRE
    for g in groups:
        p = GROUPS[g]
        shift = {r: round(float(rng.normal(0.0, SHIFT_SD)), 4) for r in regions}
        sites_g = base["site"].unique()
        v = {s: round(float(rng.normal(0.0, SITE_SD)), 4) for s in sites_g}
        site_effects[g] = v
        for r in regions:
            strata[f"{g} / {r}"] = {"b0": round(p["b0"] + shift[r], 4)}
        eta_c = (np.log(base["trap_hours"].to_numpy()) + p["b0"]
                 + base["region"].map(shift).to_numpy() + p["b_temp"] * temp_c
                 + p["b_moon"] * base["bright_moon"].to_numpy()
                 + base["site"].map(v).to_numpy())
        eta_z = p["a0"] + p["a_wood"] * base["woodland"].to_numpy()
        mu, pz = np.exp(eta_c), 1.0 / (1.0 + np.exp(-eta_z))
        absent = rng.random(len(base)) < pz
        theta = 1.0 / p["alpha"]
        nb = rng.negative_binomial(theta, theta / (theta + mu))
        frame = base.assign(group=g, catch=np.where(absent, 0, nb).astype(np.int64))
        frames.append(frame)
    data = pd.concat(frames, ignore_index=True)[list(COLUMNS)]
    truth = _truth(seed, groups, regions, strata, site_effects, data)
    return data, truth


def _truth(seed: int, groups: Sequence[str], regions: Mapping[str, int],
           strata: Mapping[str, Any], site_effects: Mapping[str, Any], data: pd.DataFrame
           ) -> dict[str, Any]:
    per_stratum = data.groupby(["group", "region"], sort=False)["catch"]
    summary = {f"{g} / {r}": {"records": int(c.size),
                              "zero_share": round(float(np.mean(c == 0)), 4)}
               for (g, r), c in per_stratum}
    return {
        "scenario": "invented: moth light-trap catches of four groups in four regions "
                    "(simulated)",
        "generator": "examples/moth_traps/generate.py",
        "generator_version": GENERATOR_VERSION,
        "seed": seed,
        "rng": "numpy.random.Generator(PCG64(seed))",
        "family": "zinb",
        "counts_formula": "catch ~ I(min_temp - 10) + bright_moon",
        "zeros_formula": "~ woodland",
        "zeros_meaning": "P(extra zero): the group is absent from the trap",
        "exposure": "trap_hours",
        "temperature_centre": TEMP_CENTRE,
        "groups": {g: dict(GROUPS[g]) for g in groups},
        "regions": dict(regions),
        "strata": {k: {**v, **summary[k]} for k, v in strata.items()},
        "shift_sd": SHIFT_SD,
        "site_sd": SITE_SD,
        "site_effects": site_effects,
        "regenerate": ("python examples/moth_traps/generate.py [--seed SEED] [--sites N] "
                       "[--nights N] [--out-dir DIR]; same seed -> byte-identical CSV"),
    }


def true_parts(data: pd.DataFrame, truth: Mapping[str, Any]) -> tuple[np.ndarray, np.ndarray]:
    """The true NB mean ``mu`` and P(extra zero) ``p`` of every row.

    Example
    -------
    >>> data, truth = simulate(seed=3, sites=2, nights=2)
    >>> mu, p = true_parts(data, truth)
    >>> bool((mu > 0).all() and ((p > 0) & (p < 1)).all())
    True
    """
    g = data["group"].to_numpy()
    key = (data["group"] + " / " + data["region"]).to_numpy()
    par = {k: np.array([truth["groups"][x][k] for x in g]) for k in
           ("b_temp", "b_moon", "a0", "a_wood")}
    b0 = np.array([truth["strata"][k]["b0"] for k in key])
    v = np.array([truth["site_effects"][x][s] for x, s in zip(g, data["site"], strict=True)])
    eta_c = (np.log(data["trap_hours"].to_numpy(dtype=float)) + b0
             + par["b_temp"] * (data["min_temp"].to_numpy(dtype=float) - TEMP_CENTRE)
             + par["b_moon"] * data["bright_moon"].to_numpy(dtype=float) + v)
    eta_z = par["a0"] + par["a_wood"] * data["woodland"].to_numpy(dtype=float)
    return np.exp(eta_c), 1.0 / (1.0 + np.exp(-eta_z))


def csv_text(data: pd.DataFrame) -> str:
    """The exact CSV text the generator writes (``\\n`` line ends, no index)."""
    return data.to_csv(index=False, lineterminator="\n")


def _write_all(files: Mapping[Path, str]) -> None:
    """Write every file to a temporary name in its folder, then rename them all."""
    temps: list[tuple[str, Path]] = []
    try:
        for path, text in files.items():
            fd, tmp = tempfile.mkstemp(dir=path.parent, prefix=f".{path.name}.", suffix=".tmp")
            temps.append((tmp, path))
            with os.fdopen(fd, "w", encoding="utf-8", newline="\n") as fh:
                fh.write(text)
            os.chmod(tmp, 0o644)
        for tmp, path in temps:
            os.replace(tmp, path)
    finally:
        for tmp, _ in temps:
            if os.path.exists(tmp):
                os.unlink(tmp)


def main(seed: int = DEFAULT_SEED, sites: int = 8, nights: int = 10,
         out_dir: str | Path | None = None) -> dict:
    """Simulate the survey and write ``catches.csv`` and ``truth.json``; returns the truth.

    ``out_dir`` defaults to the folder of this script.
    """
    out = Path(out_dir) if out_dir is not None else Path(__file__).resolve().parent
    if not out.is_dir():
        raise BayesziError(f"output folder '{out}' does not exist; create it first")
    data, truth = simulate(seed=seed, sites=sites, nights=nights)
    _write_all({out / CSV_NAME: csv_text(data),
                out / TRUTH_NAME: json.dumps(truth, indent=2) + "\n"})
    return truth


def _cli() -> None:
    parser = argparse.ArgumentParser(description="Regenerate the moth light-trap example.")
    parser.add_argument("--seed", type=int, default=DEFAULT_SEED)
    parser.add_argument("--sites", type=int, default=8, help="traps per region")
    parser.add_argument("--nights", type=int, default=10, help="trap nights per trap")
    parser.add_argument("--out-dir", default=None, help="folder to write to")
    args = parser.parse_args()
    truth = main(seed=args.seed, sites=args.sites, nights=args.nights, out_dir=args.out_dir)
    print(json.dumps({k: v["records"] for k, v in truth["strata"].items()}))


if __name__ == "__main__":
    _cli()
