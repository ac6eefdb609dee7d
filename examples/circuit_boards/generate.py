"""Seeded generator of the circuit-board example (an invented scenario, simulated from scratch).

Story: a plant solders circuit boards on three lines (A, B, C). From each lot a number of
boards is inspected (``boards_inspected``, 5 to 50, the exposure) and the solder defects
are counted. Some lots come from a line that was perfectly calibrated that shift: those lots
show no defects at all (extra zeros). The chance of that depends on the line and on the
humidity in the hall. Otherwise defects per board rise with the solder bath's distance from
its set point, with humidity, and for lots built with parts from a new supplier. No groups.

True model (ZIP, parameters written to ``truth.json``)::

    counts part, per inspected board (exposure ``boards_inspected``):
        log mu = log(boards_inspected) + Intercept + solder_temp_dev*b1 + humidity*b2
                 + new_supplier*b3
        Y | not extra zero ~ Poisson(mu)
    zeros part, P(extra zero) (a perfectly calibrated shift):
        logit p = Intercept + C(line) effects + humidity*a1

``solder_temp_dev`` is the absolute deviation of the bath temperature from its set point
(deg C, 0 or more); ``humidity`` is relative humidity in percent. Covariates are rounded
before the means are computed, so ``truth.json`` with the CSV reproduces every row's true
``mu`` and ``p`` (see :func:`true_parts`).

Needs numpy and pandas only. ``python generate.py`` rewrites ``lots.csv`` and ``truth.json``
beside this script, byte-identical for the same seed; files are written to temporary names
and then renamed.

Example
-------
>>> data, truth = simulate(seed=1, n_lots=20)
>>> list(data.columns)[:3]
['lot', 'line', 'boards_inspected']
>>> truth["family"]
'zip'
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
DEFAULT_SEED = 20241105
CSV_NAME = "lots.csv"
TRUTH_NAME = "truth.json"

COUNTS_FORMULA = "defects ~ solder_temp_dev + humidity + new_supplier"
ZEROS_FORMULA = "~ C(line) + humidity"
EXPOSURE = "boards_inspected"

COUNTS_COEF: dict[str, float] = {
    "Intercept": -3.4,
    "solder_temp_dev": 0.15,  # per deg C away from the set point
    "humidity": 0.02,  # per percentage point
    "new_supplier": 0.5,
}
# Treatment coding, reference line "A" (first level alphabetically), as formulaic names it.
ZEROS_COEF: dict[str, float] = {
    "Intercept": 0.8,
    "C(line)[T.B]": -0.5,
    "C(line)[T.C]": 0.7,  # the newest line holds its calibration best
    "humidity": -0.04,
}
LINES = ("A", "B", "C")
LINE_PROBS = (0.40, 0.35, 0.25)
COLUMNS = ("lot", "line", "boards_inspected", "solder_temp_dev", "humidity", "new_supplier",
           "defects")


def _check_int(name: str, value: Any, low: int) -> int:
    if not isinstance(value, (int, np.integer)) or isinstance(value, bool) or value < low:
        raise BayesziError(
            f"setting '{name}' must be a whole number of at least {low}, got {value!r}"
        )
    return int(value)


def simulate(seed: int = DEFAULT_SEED, n_lots: int = 800) -> tuple[pd.DataFrame, dict[str, Any]]:
    """Simulate ``n_lots`` inspected lots and return ``(data, truth)`` in memory.

    Example
    -------
    >>> data, truth = simulate(seed=2, n_lots=10)
    >>> len(data), sorted(truth["zeros"])
    (10, ['C(line)[T.B]', 'C(line)[T.C]', 'Intercept', 'humidity'])
    """
    seed = _check_int("seed", seed, 0)
    n = _check_int("n_lots", n_lots, 1)
    rng = np.random.Generator(np.random.PCG64(seed))
    width = max(4, len(str(n)))
    line = rng.choice(len(LINES), size=n, p=LINE_PROBS)
    boards = rng.integers(5, 51, n)
    temp_dev = np.round(np.abs(rng.normal(0.0, 3.0, n)), 1)
    humidity = np.round(np.clip(rng.normal(50.0, 9.0, n), 25.0, 80.0), 1)
    new_supplier = (rng.random(n) < 0.3).astype(np.int64)
    data = pd.DataFrame({
        "lot": [f"L{i + 1:0{width}d}" for i in range(n)],
        "line": np.array(LINES)[line],
        "boards_inspected": boards.astype(np.int64),
        "solder_temp_dev": temp_dev,
        "humidity": humidity,
        "new_supplier": new_supplier,
    })
    truth = _truth(seed)
    mu, p = true_parts(data, truth)
    extra = rng.random(n) < p
    defects = rng.poisson(mu)
    data["defects"] = np.where(extra, 0, defects).astype(np.int64)
    truth["summary"] = {
        "rows": int(n),
        "zero_share": round(float(np.mean(data["defects"] == 0)), 4),
        "extra_zero_share": round(float(np.mean(extra)), 4),
        "max_count": int(data["defects"].max()),
        "defects_per_board_not_extra": round(
            float(data["defects"][~extra].sum() / data["boards_inspected"][~extra].sum()), 4
        ),
    }
    return data, truth


def _truth(seed: int) -> dict[str, Any]:
    return {
        "scenario": "invented: solder defects per inspected lot of circuit boards (simulated)",
        "generator": "examples/circuit_boards/generate.py",
        "generator_version": GENERATOR_VERSION,
        "seed": seed,
        "rng": "numpy.random.Generator(PCG64(seed))",
        "family": "zip",
        "counts_formula": COUNTS_FORMULA,
        "zeros_formula": ZEROS_FORMULA,
        "zeros_meaning": "P(extra zero): the lot's line was perfectly calibrated that shift",
        "exposure": EXPOSURE,
        "groups": [],
        "counts": dict(COUNTS_COEF),
        "zeros": dict(ZEROS_COEF),
        "levels": {"line": list(LINES)},
        "regenerate": ("python examples/circuit_boards/generate.py [--seed SEED] [--n LOTS] "
                       "[--out-dir DIR]; same seed -> byte-identical CSV"),
    }


def true_parts(data: pd.DataFrame, truth: Mapping[str, Any]) -> tuple[np.ndarray, np.ndarray]:
    """Return the true Poisson mean ``mu`` and P(extra zero) ``p`` for every row.

    Example
    -------
    >>> data, truth = simulate(seed=3, n_lots=5)
    >>> mu, p = true_parts(data, truth)
    >>> bool((mu > 0).all() and ((p > 0) & (p < 1)).all())
    True
    """
    b, a = truth["counts"], truth["zeros"]
    line = data["line"].astype(str)
    humidity = data["humidity"].to_numpy(dtype=float)
    eta_c = (
        np.log(data["boards_inspected"].to_numpy(dtype=float))
        + b["Intercept"]
        + b["solder_temp_dev"] * data["solder_temp_dev"].to_numpy(dtype=float)
        + b["humidity"] * humidity
        + b["new_supplier"] * data["new_supplier"].to_numpy(dtype=float)
    )
    eta_z = (
        a["Intercept"]
        + a["C(line)[T.B]"] * (line == "B").to_numpy(dtype=float)
        + a["C(line)[T.C]"] * (line == "C").to_numpy(dtype=float)
        + a["humidity"] * humidity
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


def main(seed: int = DEFAULT_SEED, n: int = 800, out_dir: str | Path | None = None) -> dict:
    """Simulate ``n`` lots and write ``lots.csv`` and ``truth.json``.

    ``out_dir`` defaults to the folder of this script. Returns the truth.
    """
    out = Path(out_dir) if out_dir is not None else Path(__file__).resolve().parent
    if not out.is_dir():
        raise BayesziError(f"output folder '{out}' does not exist; create it first")
    data, truth = simulate(seed=seed, n_lots=n)
    _write_all({
        out / CSV_NAME: csv_text(data),
        out / TRUTH_NAME: json.dumps(truth, indent=2) + "\n",
    })
    return truth


def _cli() -> None:
    parser = argparse.ArgumentParser(description="Regenerate the circuit-board example data.")
    parser.add_argument("--seed", type=int, default=DEFAULT_SEED)
    parser.add_argument("--n", type=int, default=800, help="number of lots")
    parser.add_argument("--out-dir", default=None, help="folder to write to")
    args = parser.parse_args()
    print(json.dumps(main(seed=args.seed, n=args.n, out_dir=args.out_dir)["summary"]))


if __name__ == "__main__":
    _cli()
