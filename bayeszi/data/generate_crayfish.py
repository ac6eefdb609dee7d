"""Seeded generator of the crayfish demo data (an invented scenario, simulated from scratch).

Story: invasive crayfish are trapped on about 40 stream reaches nested in 6 rivers. Each
reach is visited repeatedly over several years and seasons; on each visit a few trap lines
are set and checked. One record is one trap line check. Some reaches lie above a barrier
(a weir or culvert downstream), and crayfish mostly cannot reach them: there, most records
are *extra* zeros (the animal is absent), the rest ordinary "none caught this time" zeros
of a negative binomial catch.

True model (ZINB, the parameters are written to ``crayfish_truth.json``)::

    counts part, per trap night (exposure ``trap_nights``):
        log mu = log(trap_nights) + Intercept + water_temp*b1 + C(substrate) effects
                 + depth*b2 + canopy*b3 + u_counts[reach]
        Y | present ~ NB(mean mu, variance mu + alpha*mu^2)
    zeros part, P(extra zero):
        logit p = Intercept + barrier*a1 + u_zeros[reach]
    u_counts ~ Normal(0, sd_counts), u_zeros ~ Normal(0, sd_zeros), drawn once per reach.
    Y = 0 with probability p (extra zero), else the NB draw.

``river`` has no effect of its own (its true SD is 0); it is there for nested groupings.
Covariates are rounded before the means are computed, so the truth file together with the
CSV reproduces every row's true ``mu`` and ``p`` exactly (see :func:`true_parts`).

The script needs numpy and pandas only. Run ``python generate_crayfish.py`` (or
``python -m bayeszi.data.generate_crayfish``) to regenerate the shipped files; the same
seed gives byte-identical files. Outputs are written to temporary names and then renamed.

Example
-------
>>> from bayeszi.data.generate_crayfish import simulate
>>> data, truth = simulate(seed=1, n_reaches=6)
>>> sorted(data["reach"].unique())[:2]
['R01', 'R02']
>>> truth["zeros"]["barrier"]
3.0
"""

from __future__ import annotations

import argparse
import json
import os
import tempfile
from collections.abc import Mapping
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd

try:  # the package's error class when installed; a plain ValueError when run standalone
    from bayeszi.base.errors import BayesziError
except ImportError:  # pragma: no cover - only when the script is copied out of the package
    BayesziError = ValueError  # type: ignore[misc,assignment]

GENERATOR_VERSION = "1.0.0"
DEFAULT_SEED = 20240611
CSV_NAME = "crayfish.csv"
TRUTH_NAME = "crayfish_truth.json"

COUNTS_FORMULA = "crayfish ~ water_temp + C(substrate) + depth + canopy"
ZEROS_FORMULA = "~ barrier"
EXPOSURE = "trap_nights"

# True coefficients, named as formulaic names the columns of the formulas above
# (treatment coding, reference substrate "cobble", the first level alphabetically).
COUNTS_COEF: dict[str, float] = {
    "Intercept": -0.1,
    "water_temp": 0.08,  # warmer water, more active crayfish (per deg C)
    "C(substrate)[T.gravel]": -0.35,  # fewer shelters than cobble
    "C(substrate)[T.silt]": -0.9,
    "depth": 0.4,  # per metre
    "canopy": -0.6,  # shaded reaches are less productive
}
ZEROS_COEF: dict[str, float] = {"Intercept": -1.5, "barrier": 3.0}
ALPHA = 0.4  # NB overdispersion: variance mu + alpha*mu^2
SD_COUNTS = 0.5  # SD of reach effects, counts part (log scale)
SD_ZEROS = 0.8  # SD of reach effects, zeros part (logit scale)

SEASONS = ("spring", "summer", "autumn")
SEASON_TEMP = np.array([10.5, 17.5, 12.5])  # mean water temperature, deg C
SEASON_LEAF = np.array([0.75, 1.0, 0.85])  # share of full canopy in leaf
SUBSTRATES = ("cobble", "gravel", "silt")
DOMINANT_SUBSTRATE_PROBS = (0.35, 0.35, 0.30)
RIVER_NAMES = ("Alder", "Birch", "Cedar", "Hazel", "Rowan", "Willow",
               "Aspen", "Holly", "Larch", "Elm")
TRAP_NIGHTS = np.arange(1, 7)
TRAP_NIGHT_PROBS = (0.10, 0.18, 0.24, 0.22, 0.16, 0.10)
FIRST_YEAR = 2021

COLUMNS = ("reach", "river", "year", "season", "visit", "trap_line", "trap_nights",
           "water_temp", "substrate", "depth", "canopy", "barrier", "crayfish")


def _check_range(name: str, value: Any, low: int = 1) -> tuple[int, int]:
    ok = (isinstance(value, (tuple, list)) and len(value) == 2
          and all(isinstance(v, (int, np.integer)) and not isinstance(v, bool) for v in value)
          and low <= value[0] <= value[1])
    if not ok:
        raise BayesziError(
            f"setting '{name}' must be a pair of whole numbers (lowest, highest) with "
            f"{low} <= lowest <= highest, got {value!r}; for example {name}=(4, 8)"
        )
    return int(value[0]), int(value[1])


def _check_share(name: str, value: Any) -> float:
    if not isinstance(value, (int, float)) or isinstance(value, bool) or not 0 <= value <= 1:
        raise BayesziError(f"setting '{name}' must be a share between 0 and 1, got {value!r}")
    return float(value)


def _check_int(name: str, value: Any, low: int) -> int:
    if not isinstance(value, (int, np.integer)) or isinstance(value, bool) or value < low:
        raise BayesziError(
            f"setting '{name}' must be a whole number of at least {low}, got {value!r}"
        )
    return int(value)


def _river_names(n_rivers: int) -> list[str]:
    if n_rivers <= len(RIVER_NAMES):
        return list(RIVER_NAMES[:n_rivers])
    width = len(str(n_rivers))
    return [f"River{k + 1:0{width}d}" for k in range(n_rivers)]


def simulate(
    seed: int = DEFAULT_SEED,
    n_reaches: int = 40,
    n_rivers: int = 6,
    barrier_share: float = 0.3,
    sparse_share: float = 0.125,
    visits: tuple[int, int] = (6, 12),
    sparse_visits: tuple[int, int] = (2, 3),
    lines_per_visit: tuple[int, int] = (4, 8),
) -> tuple[pd.DataFrame, dict[str, Any]]:
    """Simulate crayfish trap line checks and return ``(data, truth)`` in memory.

    Parameters
    ----------
    seed : seed of NumPy's PCG64 generator; the same seed gives the same data.
    n_reaches : number of stream reaches (ids ``R01``, ``R02``, ...).
    n_rivers : number of rivers; reaches are split into contiguous blocks, one per river.
    barrier_share : share of reaches with a barrier downstream (rounded to whole reaches).
    sparse_share : share of reaches visited only ``sparse_visits`` times.
    visits, sparse_visits : (lowest, highest) number of visits per ordinary / sparse reach.
    lines_per_visit : (lowest, highest) number of trap lines checked per visit.

    Returns
    -------
    data : one row per trap line check, columns as in :data:`COLUMNS`.
    truth : every true parameter, the drawn reach effects, the seed and a summary.

    Example
    -------
    >>> data, truth = simulate(seed=3, n_reaches=8, n_rivers=2)
    >>> data["river"].nunique(), len(truth["group_effects"]["counts"]["reach"])
    (2, 8)
    """
    seed = _check_int("seed", seed, 0)
    n_reaches = _check_int("n_reaches", n_reaches, 2)
    n_rivers = _check_int("n_rivers", n_rivers, 1)
    if n_rivers > n_reaches:
        raise BayesziError(
            f"setting 'n_rivers' ({n_rivers}) cannot exceed 'n_reaches' ({n_reaches}); "
            "every river needs at least one reach"
        )
    barrier_share = _check_share("barrier_share", barrier_share)
    sparse_share = _check_share("sparse_share", sparse_share)
    v_lo, v_hi = _check_range("visits", visits)
    s_lo, s_hi = _check_range("sparse_visits", sparse_visits)
    l_lo, l_hi = _check_range("lines_per_visit", lines_per_visit)

    rng = np.random.Generator(np.random.PCG64(seed))

    # --- reach level -------------------------------------------------------------------
    width = max(2, len(str(n_reaches)))
    reach_ids = np.array([f"R{i + 1:0{width}d}" for i in range(n_reaches)])
    river_names = np.array(_river_names(n_rivers))
    river_of = np.concatenate(
        [np.full(len(block), k) for k, block in
         enumerate(np.array_split(np.arange(n_reaches), n_rivers))]
    )
    barrier = np.zeros(n_reaches, dtype=np.int64)
    barrier[rng.choice(n_reaches, size=round(barrier_share * n_reaches), replace=False)] = 1
    sparse = np.zeros(n_reaches, dtype=bool)
    sparse[rng.choice(n_reaches, size=round(sparse_share * n_reaches), replace=False)] = True
    dominant = rng.choice(len(SUBSTRATES), size=n_reaches, p=DOMINANT_SUBSTRATE_PROBS)
    depth_mean = rng.uniform(0.3, 0.9, n_reaches)
    canopy_full = rng.beta(2.0, 2.0, n_reaches)
    # shaded or spring-fed reaches run cooler
    temp_offset = rng.normal(0.0, 1.2, n_reaches) - 2.0 * (canopy_full - 0.5)
    # reach effects are rounded first, so the truth file holds exactly what was used
    u_counts = np.round(rng.normal(0.0, SD_COUNTS, n_reaches), 4)
    u_zeros = np.round(rng.normal(0.0, SD_ZEROS, n_reaches), 4)
    n_visits = np.where(sparse, rng.integers(s_lo, s_hi + 1, n_reaches),
                        rng.integers(v_lo, v_hi + 1, n_reaches))
    first_season = rng.integers(0, len(SEASONS), n_reaches)

    # --- visit level: seasons cycle spring, summer, autumn over the years --------------
    v_reach = np.repeat(np.arange(n_reaches), n_visits)
    v_starts = np.repeat(np.cumsum(n_visits) - n_visits, n_visits)
    v_number = np.arange(len(v_reach)) - v_starts + 1
    position = first_season[v_reach] + v_number - 1
    v_season = position % len(SEASONS)
    v_year = FIRST_YEAR + position // len(SEASONS)
    v_temp = SEASON_TEMP[v_season] + temp_offset[v_reach] + rng.normal(0.0, 1.5, len(v_reach))
    n_lines = rng.integers(l_lo, l_hi + 1, len(v_reach))

    # --- record level: one trap line check -----------------------------------------------
    rec_visit = np.repeat(np.arange(len(v_reach)), n_lines)
    rec_starts = np.repeat(np.cumsum(n_lines) - n_lines, n_lines)
    trap_line = np.arange(len(rec_visit)) - rec_starts + 1
    reach = v_reach[rec_visit]
    season = v_season[rec_visit]
    n = len(rec_visit)
    water_temp = np.round(np.clip(v_temp[rec_visit] + rng.normal(0.0, 0.3, n), 1.0, 26.0), 1)
    keep = rng.random(n) < 0.7
    other = (dominant[reach] + rng.integers(1, len(SUBSTRATES), n)) % len(SUBSTRATES)
    substrate = np.where(keep, dominant[reach], other)
    depth = np.round(np.clip(depth_mean[reach] * np.exp(rng.normal(0.0, 0.3, n)), 0.1, 1.5), 2)
    canopy = np.round(
        np.clip(canopy_full[reach] * SEASON_LEAF[season] + rng.normal(0.0, 0.05, n), 0.0, 1.0), 2
    )
    trap_nights = rng.choice(TRAP_NIGHTS, size=n, p=TRAP_NIGHT_PROBS)

    data = pd.DataFrame({
        "reach": reach_ids[reach],
        "river": river_names[river_of[reach]],
        "year": v_year[rec_visit].astype(np.int64),
        "season": np.array(SEASONS)[season],
        "visit": v_number[rec_visit].astype(np.int64),
        "trap_line": trap_line.astype(np.int64),
        "trap_nights": trap_nights.astype(np.int64),
        "water_temp": water_temp,
        "substrate": np.array(SUBSTRATES)[substrate],
        "depth": depth,
        "canopy": canopy,
        "barrier": barrier[reach],
    })
    truth = _truth(seed, reach_ids, u_counts, u_zeros, river_names)
    mu, p = true_parts(data, truth)
    extra = rng.random(n) < p
    present = rng.negative_binomial(1.0 / ALPHA, 1.0 / (1.0 + ALPHA * mu))
    data["crayfish"] = np.where(extra, 0, present).astype(np.int64)

    truth["summary"] = {
        "rows": int(n),
        "reaches": int(n_reaches),
        "rivers": int(n_rivers),
        "barrier_reaches": int(barrier.sum()),
        "zero_share": round(float(np.mean(data["crayfish"] == 0)), 4),
        "extra_zero_share": round(float(np.mean(extra)), 4),
        "max_count": int(data["crayfish"].max()),
        "mean_per_trap_night_present": round(
            float(data["crayfish"][~extra].sum() / data["trap_nights"][~extra].sum()), 4
        ),
    }
    return data, truth


def _truth(seed: int, reach_ids: np.ndarray, u_counts: np.ndarray, u_zeros: np.ndarray,
           river_names: np.ndarray) -> dict[str, Any]:
    return {
        "scenario": "invented: invasive crayfish trapping on stream reaches (simulated)",
        "generator": "bayeszi.data.generate_crayfish",
        "generator_version": GENERATOR_VERSION,
        "seed": seed,
        "rng": "numpy.random.Generator(PCG64(seed))",
        "family": "zinb",
        "counts_formula": COUNTS_FORMULA,
        "zeros_formula": ZEROS_FORMULA,
        "zeros_meaning": "P(extra zero): crayfish absent from the reach on that check",
        "exposure": EXPOSURE,
        "groups": ["reach"],
        "counts": dict(COUNTS_COEF),
        "zeros": dict(ZEROS_COEF),
        "alpha": ALPHA,
        "alpha_meaning": "negative binomial variance is mu + alpha * mu^2",
        "group_sd": {"counts": {"reach": SD_COUNTS, "river": 0.0},
                     "zeros": {"reach": SD_ZEROS, "river": 0.0}},
        "group_effects": {
            "counts": {"reach": {r: float(u) for r, u in zip(reach_ids, u_counts, strict=True)}},
            "zeros": {"reach": {r: float(u) for r, u in zip(reach_ids, u_zeros, strict=True)}},
        },
        "levels": {"substrate": list(SUBSTRATES), "season": list(SEASONS),
                   "river": [str(r) for r in river_names]},
        "regenerate": (
            "python -m bayeszi.data.generate_crayfish  (or: python generate_crayfish.py "
            "--seed SEED --n N_REACHES --out-dir DIR); same seed -> byte-identical CSV"
        ),
        "true_parts": (
            "mu = trap_nights * exp(counts terms + group_effects.counts.reach[reach]); "
            "p = 1 / (1 + exp(-(zeros terms + group_effects.zeros.reach[reach]))); "
            "see bayeszi.data.generate_crayfish.true_parts"
        ),
    }


def true_parts(data: pd.DataFrame, truth: Mapping[str, Any]) -> tuple[np.ndarray, np.ndarray]:
    """Return the true NB mean ``mu`` and P(extra zero) ``p`` of every row of ``data``.

    Uses the coefficients and reach effects stored in ``truth``; with the shipped CSV and
    truth file it reproduces exactly the values the generator drew from.

    Example
    -------
    >>> data, truth = simulate(seed=2, n_reaches=4, n_rivers=1)
    >>> mu, p = true_parts(data, truth)
    >>> bool((mu > 0).all() and ((p > 0) & (p < 1)).all())
    True
    """
    b = truth["counts"]
    a = truth["zeros"]
    eff_c = truth["group_effects"]["counts"]["reach"]
    eff_z = truth["group_effects"]["zeros"]["reach"]
    substrate = data["substrate"].astype(str)
    eta_c = (
        np.log(data["trap_nights"].to_numpy(dtype=float))
        + b["Intercept"]
        + b["water_temp"] * data["water_temp"].to_numpy(dtype=float)
        + b["C(substrate)[T.gravel]"] * (substrate == "gravel").to_numpy(dtype=float)
        + b["C(substrate)[T.silt]"] * (substrate == "silt").to_numpy(dtype=float)
        + b["depth"] * data["depth"].to_numpy(dtype=float)
        + b["canopy"] * data["canopy"].to_numpy(dtype=float)
        + data["reach"].map(eff_c).to_numpy(dtype=float)
    )
    eta_z = (
        a["Intercept"]
        + a["barrier"] * data["barrier"].to_numpy(dtype=float)
        + data["reach"].map(eff_z).to_numpy(dtype=float)
    )
    return np.exp(eta_c), 1.0 / (1.0 + np.exp(-eta_z))


def _write_all(files: Mapping[Path, str]) -> None:
    """Write every file to a temporary name in its folder, then rename them all."""
    temps: list[tuple[str, Path]] = []
    try:
        for path, text in files.items():
            fd, tmp = tempfile.mkstemp(dir=path.parent, prefix=f".{path.name}.", suffix=".tmp")
            temps.append((tmp, path))
            with os.fdopen(fd, "w", encoding="utf-8", newline="\n") as fh:
                fh.write(text)
            os.chmod(tmp, 0o644)  # mkstemp makes private files; shipped data is world-readable
        for tmp, path in temps:
            os.replace(tmp, path)
    finally:
        for tmp, _ in temps:
            if os.path.exists(tmp):
                os.unlink(tmp)


def csv_text(data: pd.DataFrame) -> str:
    """The exact CSV text the generator writes (``\\n`` line ends, no index)."""
    return data.to_csv(index=False, lineterminator="\n")


def main(seed: int = DEFAULT_SEED, n: int = 40, out_dir: str | Path | None = None) -> dict:
    """Simulate ``n`` reaches and write ``crayfish.csv`` and ``crayfish_truth.json``.

    ``out_dir`` defaults to the folder of this script (the packaged data). Returns the truth.
    """
    out = Path(out_dir) if out_dir is not None else Path(__file__).resolve().parent
    if not out.is_dir():
        raise BayesziError(f"output folder '{out}' does not exist; create it first")
    data, truth = simulate(seed=seed, n_reaches=n)
    _write_all({
        out / CSV_NAME: csv_text(data),
        out / TRUTH_NAME: json.dumps(truth, indent=2) + "\n",
    })
    return truth


def _cli() -> None:
    parser = argparse.ArgumentParser(description="Regenerate the crayfish demo data.")
    parser.add_argument("--seed", type=int, default=DEFAULT_SEED)
    parser.add_argument("--n", type=int, default=40, help="number of reaches")
    parser.add_argument("--out-dir", default=None, help="folder to write to")
    args = parser.parse_args()
    truth = main(seed=args.seed, n=args.n, out_dir=args.out_dir)
    print(json.dumps(truth["summary"]))


if __name__ == "__main__":
    _cli()
