"""Seeded generator of the camera-trap example (an invented scenario, simulated from scratch).

Story: 30 trail cameras watch for a forest mammal through four seasons. One record is one
camera week: how many independent detections the camera logged, over how many days it was
working (``active_days``, the exposure), whether the station was baited that week, and the
forest cover and distance to the nearest road around the camera. Cameras are crossed with
seasons: every camera runs in every season, for 10 to 15 weeks each.

True model (hurdle negative binomial, parameters written to ``truth.json``)::

    zeros part, P(Y = 0) (no detection that week):
        logit P0 = Intercept + forest_cover*a1 + dist_road_km*a2
                   + v_zeros[camera] + v_zeros[season]
    counts part, given at least one detection (exposure ``active_days``):
        log mu = log(active_days) + Intercept + bait*b1 + forest_cover*b2
                 + v_counts[camera] + v_counts[season]
        Y | Y > 0 ~ zero-truncated NB(mu, alpha), where mu and alpha are the mean and
        overdispersion of the untruncated NB (variance mu + alpha*mu^2).
    Group effects ~ Normal(0, SD), one SD per part and grouping column.

Covariates are rounded before the means are computed, so ``truth.json`` with the CSV
reproduces every row's true ``mu`` and ``P0`` exactly (see :func:`true_parts`).

Needs numpy and pandas only. ``python generate.py`` rewrites ``detections.csv`` and
``truth.json`` beside this script, byte-identical for the same seed; files are written to
temporary names and then renamed.

Example
-------
>>> data, truth = simulate(seed=1, n_cameras=3)
>>> sorted(data["season"].unique())
['autumn', 'spring', 'summer', 'winter']
>>> truth["family"]
'hurdle-negbin'
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

try:  # the package's error class when installed; a plain ValueError otherwise
    from bayeszi.base.errors import BayesziError
except ImportError:  # pragma: no cover
    BayesziError = ValueError  # type: ignore[misc,assignment]

GENERATOR_VERSION = "1.0.0"
DEFAULT_SEED = 20240917
CSV_NAME = "detections.csv"
TRUTH_NAME = "truth.json"

COUNTS_FORMULA = "detections ~ bait + forest_cover"
ZEROS_FORMULA = "~ forest_cover + dist_road_km"
EXPOSURE = "active_days"
GROUPS = ("camera", "season")

COUNTS_COEF: dict[str, float] = {
    "Intercept": -1.2,
    "bait": 0.6,  # a baited station draws repeat visits
    "forest_cover": 0.8,
}
ZEROS_COEF: dict[str, float] = {
    "Intercept": 1.6,
    "forest_cover": -2.2,  # more forest, less often missed
    "dist_road_km": -0.3,  # away from roads, less disturbance
}
ALPHA = 0.7
GROUP_SD: dict[str, dict[str, float]] = {
    "counts": {"camera": 0.3, "season": 0.2},
    "zeros": {"camera": 0.7, "season": 0.5},
}

SEASONS = ("winter", "spring", "summer", "autumn")
COLUMNS = ("camera", "season", "week", "active_days", "bait", "forest_cover",
           "dist_road_km", "detections")


def _check_int(name: str, value: Any, low: int) -> int:
    if not isinstance(value, (int, np.integer)) or isinstance(value, bool) or value < low:
        raise BayesziError(
            f"setting '{name}' must be a whole number of at least {low}, got {value!r}"
        )
    return int(value)


def _check_range(name: str, value: Any) -> tuple[int, int]:
    ok = (isinstance(value, (tuple, list)) and len(value) == 2
          and all(isinstance(v, (int, np.integer)) and not isinstance(v, bool) for v in value)
          and 1 <= value[0] <= value[1])
    if not ok:
        raise BayesziError(
            f"setting '{name}' must be a pair of whole numbers (lowest, highest) with "
            f"1 <= lowest <= highest, got {value!r}; for example {name}=(10, 15)"
        )
    return int(value[0]), int(value[1])


def _zero_truncated_nb(rng: np.random.Generator, mu: np.ndarray, alpha: float) -> np.ndarray:
    """Draw NB(mu, alpha) conditional on Y > 0 by redrawing the zeros (rejection)."""
    out = np.zeros(len(mu), dtype=np.int64)
    todo = np.arange(len(mu))
    for _ in range(100_000):
        if todo.size == 0:
            return out
        m = mu[todo]
        draw = rng.negative_binomial(1.0 / alpha, 1.0 / (1.0 + alpha * m))
        out[todo] = draw
        todo = todo[draw == 0]
    raise RuntimeError("zero-truncated draw did not finish; a mean is far too small")


def simulate(
    seed: int = DEFAULT_SEED,
    n_cameras: int = 30,
    weeks: tuple[int, int] = (10, 15),
) -> tuple[pd.DataFrame, dict[str, Any]]:
    """Simulate camera weeks and return ``(data, truth)`` in memory.

    Parameters
    ----------
    seed : seed of NumPy's PCG64 generator.
    n_cameras : number of cameras (ids ``C01``, ``C02``, ...); each runs in all 4 seasons.
    weeks : (lowest, highest) number of weeks a camera runs in one season.

    Example
    -------
    >>> data, truth = simulate(seed=2, n_cameras=4, weeks=(2, 2))
    >>> len(data), len(truth["group_effects"]["zeros"]["camera"])
    (32, 4)
    """
    seed = _check_int("seed", seed, 0)
    n_cameras = _check_int("n_cameras", n_cameras, 1)
    w_lo, w_hi = _check_range("weeks", weeks)
    rng = np.random.Generator(np.random.PCG64(seed))
    n_seasons = len(SEASONS)

    # --- camera level ------------------------------------------------------------------
    width = max(2, len(str(n_cameras)))
    camera_ids = np.array([f"C{i + 1:0{width}d}" for i in range(n_cameras)])
    forest = np.round(rng.beta(2.0, 1.6, n_cameras), 2)
    dist_road = np.round(np.clip(np.exp(rng.normal(np.log(1.2), 0.8, n_cameras)), 0.05, 12.0), 2)
    effects: dict[str, dict[str, np.ndarray]] = {}
    for part in ("counts", "zeros"):
        effects[part] = {
            "camera": np.round(rng.normal(0.0, GROUP_SD[part]["camera"], n_cameras), 4),
            "season": np.round(rng.normal(0.0, GROUP_SD[part]["season"], n_seasons), 4),
        }

    # --- camera x season blocks, then weeks -----------------------------------------------
    block_camera = np.repeat(np.arange(n_cameras), n_seasons)
    block_season = np.tile(np.arange(n_seasons), n_cameras)
    n_weeks = rng.integers(w_lo, w_hi + 1, len(block_camera))
    rec_block = np.repeat(np.arange(len(block_camera)), n_weeks)
    week = np.arange(len(rec_block)) - np.repeat(np.cumsum(n_weeks) - n_weeks, n_weeks) + 1
    cam = block_camera[rec_block]
    season = block_season[rec_block]
    n = len(rec_block)
    full_week = rng.random(n) < 0.75  # batteries and memory cards fail now and then
    active_days = np.where(full_week, 7, rng.integers(1, 7, n))
    bait = (rng.random(n) < 0.35).astype(np.int64)

    data = pd.DataFrame({
        "camera": camera_ids[cam],
        "season": np.array(SEASONS)[season],
        "week": week.astype(np.int64),
        "active_days": active_days.astype(np.int64),
        "bait": bait,
        "forest_cover": forest[cam],
        "dist_road_km": dist_road[cam],
    })
    truth = _truth(seed, camera_ids, effects)
    mu, p_zero = true_parts(data, truth)
    missed = rng.random(n) < p_zero
    positive = _zero_truncated_nb(rng, mu, ALPHA)
    data["detections"] = np.where(missed, 0, positive).astype(np.int64)
    truth["summary"] = {
        "rows": int(n),
        "cameras": int(n_cameras),
        "seasons": n_seasons,
        "zero_share": round(float(np.mean(data["detections"] == 0)), 4),
        "max_count": int(data["detections"].max()),
        "mean_given_detection": round(float(data["detections"][~missed].mean()), 4),
    }
    return data, truth


def _truth(seed: int, camera_ids: np.ndarray,
           effects: Mapping[str, Mapping[str, np.ndarray]]) -> dict[str, Any]:
    group_effects = {
        part: {
            "camera": {c: float(u) for c, u in
                       zip(camera_ids, effects[part]["camera"], strict=True)},
            "season": {s: float(u) for s, u in
                       zip(SEASONS, effects[part]["season"], strict=True)},
        }
        for part in ("counts", "zeros")
    }
    return {
        "scenario": "invented: camera-trap detections of a forest mammal (simulated)",
        "generator": "examples/camera_traps/generate.py",
        "generator_version": GENERATOR_VERSION,
        "seed": seed,
        "rng": "numpy.random.Generator(PCG64(seed))",
        "family": "hurdle-negbin",
        "counts_formula": COUNTS_FORMULA,
        "zeros_formula": ZEROS_FORMULA,
        "zeros_meaning": "P(Y = 0): no detection in that camera week (hurdle)",
        "counts_meaning": ("mean of the untruncated NB per active day; positive counts follow "
                           "that NB conditional on Y > 0"),
        "exposure": EXPOSURE,
        "groups": list(GROUPS),
        "counts": dict(COUNTS_COEF),
        "zeros": dict(ZEROS_COEF),
        "alpha": ALPHA,
        "alpha_meaning": "negative binomial variance is mu + alpha * mu^2 (before truncation)",
        "group_sd": {part: dict(sds) for part, sds in GROUP_SD.items()},
        "group_effects": group_effects,
        "levels": {"season": list(SEASONS)},
        "regenerate": ("python examples/camera_traps/generate.py [--seed SEED] [--n CAMERAS] "
                       "[--out-dir DIR]; same seed -> byte-identical CSV"),
    }


def true_parts(data: pd.DataFrame, truth: Mapping[str, Any]) -> tuple[np.ndarray, np.ndarray]:
    """Return the true untruncated NB mean ``mu`` and ``P(Y = 0)`` for every row.

    Example
    -------
    >>> data, truth = simulate(seed=3, n_cameras=2)
    >>> mu, p0 = true_parts(data, truth)
    >>> bool((mu > 0).all() and ((p0 > 0) & (p0 < 1)).all())
    True
    """
    b, a = truth["counts"], truth["zeros"]
    ge = truth["group_effects"]
    forest = data["forest_cover"].to_numpy(dtype=float)
    eta_c = (
        np.log(data["active_days"].to_numpy(dtype=float))
        + b["Intercept"] + b["bait"] * data["bait"].to_numpy(dtype=float)
        + b["forest_cover"] * forest
        + data["camera"].map(ge["counts"]["camera"]).to_numpy(dtype=float)
        + data["season"].map(ge["counts"]["season"]).to_numpy(dtype=float)
    )
    eta_z = (
        a["Intercept"] + a["forest_cover"] * forest
        + a["dist_road_km"] * data["dist_road_km"].to_numpy(dtype=float)
        + data["camera"].map(ge["zeros"]["camera"]).to_numpy(dtype=float)
        + data["season"].map(ge["zeros"]["season"]).to_numpy(dtype=float)
    )
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


def main(seed: int = DEFAULT_SEED, n: int = 30, out_dir: str | Path | None = None) -> dict:
    """Simulate ``n`` cameras and write ``detections.csv`` and ``truth.json``.

    ``out_dir`` defaults to the folder of this script. Returns the truth.
    """
    out = Path(out_dir) if out_dir is not None else Path(__file__).resolve().parent
    if not out.is_dir():
        raise BayesziError(f"output folder '{out}' does not exist; create it first")
    data, truth = simulate(seed=seed, n_cameras=n)
    _write_all({
        out / CSV_NAME: csv_text(data),
        out / TRUTH_NAME: json.dumps(truth, indent=2) + "\n",
    })
    return truth


def _cli() -> None:
    parser = argparse.ArgumentParser(description="Regenerate the camera-trap example data.")
    parser.add_argument("--seed", type=int, default=DEFAULT_SEED)
    parser.add_argument("--n", type=int, default=30, help="number of cameras")
    parser.add_argument("--out-dir", default=None, help="folder to write to")
    args = parser.parse_args()
    print(json.dumps(main(seed=args.seed, n=args.n, out_dir=args.out_dir)["summary"]))


if __name__ == "__main__":
    _cli()
