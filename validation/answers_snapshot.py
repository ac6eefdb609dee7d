"""Write the answer tables of fixed-seed demo fits to CSV, and compare two such snapshots.

A refactor that should not change any number is checked by running this before and after it
and comparing the folders: every table must agree to 1e-10 (relative), which is the
floating-point noise of NumPy reductions, far below any Monte Carlo error.

Usage (from the repository root)::

    python -m validation.answers_snapshot write OUT_DIR
    python -m validation.answers_snapshot compare OLD_DIR NEW_DIR

Only public names are used (``bayeszi.fit``, ``bayeszi.rank_models`` and the fitted model's
methods), so the script runs unchanged on both sides of a refactor.

Example
-------
>>> # python -m validation.answers_snapshot write /tmp/before     # doctest: +SKIP
"""

from __future__ import annotations

import os
import sys
import warnings

import numpy as np
import pandas as pd

COUNTS = "crayfish ~ water_temp + C(substrate) + depth + canopy"
SETTINGS = dict(exposure="trap_nights", draws=300, warmup_steps=300, chains=2, seed=20261202,
                progressbar=False, sampler="pymc")


def _fits():
    import bayeszi as bz
    from bayeszi.data import load_crayfish

    df = load_crayfish()
    fits = {
        "zinb": bz.fit(df, counts=COUNTS, zeros="~ barrier", family="zinb", groups="reach",
                       **SETTINGS),
        "hurdle": bz.fit(df, counts=COUNTS, zeros="~ barrier", family="hurdle-negbin",
                         groups="reach", **SETTINGS),
        "poisson": bz.fit(df, counts=COUNTS, family="poisson", **SETTINGS),
    }
    return bz, df, fits


def tables() -> dict[str, pd.DataFrame]:
    """Every answer table of the three demo fits, by file name."""
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        bz, df, fits = _fits()
        out: dict[str, pd.DataFrame] = {}
        new = df.head(12).copy()
        for name, m in fits.items():
            out[f"{name}_coefficients"] = m.coefficients().reset_index()
            out[f"{name}_zero_check"] = m.zero_check(by=[]).reset_index()
            out[f"{name}_count_frequencies"] = m.count_frequencies().reset_index()
            out[f"{name}_dispersion"] = m.dispersion_check().reset_index()
            out[f"{name}_max_count"] = m.max_count_check().reset_index()
            out[f"{name}_residuals"] = m.residuals().reset_index()
            out[f"{name}_zero_sources"] = m.zero_sources(by=[]).reset_index()
            out[f"{name}_predict_known"] = m.predict(
                new, what=["mean", "rate", "p_zero", "at_least"], k=2, seed=3).reset_index()
            out[f"{name}_predict_new"] = m.predict(
                new, what=["mean", "new_count"], groups="new", seed=3).reset_index()
            out[f"{name}_contrast"] = m.contrast(
                new, shift={"depth": 0.2}, what="rate", combine="mean", seed=3).reset_index()
            out[f"{name}_distribution"] = m.count_distribution(new, kmax=4, seed=3).reset_index()
            loo = m.loo()
            out[f"{name}_loo"] = pd.DataFrame({"elpd": [loo.elpd], "se": [loo.se],
                                               "p_loo": [loo.p_loo]})
        out["compare"] = bz.rank_models(fits).reset_index()
        reach = fits["zinb"].group_effects().reset_index()
        out["zinb_group_effects"] = reach
    return out


def write(folder: str) -> None:
    os.makedirs(folder, exist_ok=True)
    for name, t in tables().items():
        t.to_csv(os.path.join(folder, f"{name}.csv"), index=False)
    print(f"wrote {folder}")


def compare(old: str, new: str, rtol: float = 1e-10) -> int:
    """Print the tables that differ; returns the number of differing tables."""
    bad = 0
    names = sorted(set(os.listdir(old)) | set(os.listdir(new)))
    for name in names:
        a_path, b_path = os.path.join(old, name), os.path.join(new, name)
        if not (os.path.exists(a_path) and os.path.exists(b_path)):
            print(f"{name}: only in one snapshot")
            bad += 1
            continue
        a, b = pd.read_csv(a_path), pd.read_csv(b_path)
        if list(a.columns) != list(b.columns) or a.shape != b.shape:
            print(f"{name}: columns or shape differ: {list(a.columns)} vs {list(b.columns)}")
            bad += 1
            continue
        worst = 0.0
        for c in a.columns:
            if pd.api.types.is_numeric_dtype(a[c]) and pd.api.types.is_numeric_dtype(b[c]):
                x, y = a[c].to_numpy(float), b[c].to_numpy(float)
                same_nan = np.array_equal(np.isnan(x), np.isnan(y))
                d = np.abs(x - y) / np.maximum(np.abs(x), 1e-300)
                d = d[~np.isnan(x) & ~np.isnan(y)]
                rel = float(d.max()) if d.size else 0.0
                if not same_nan:
                    rel = np.inf
                worst = max(worst, rel)
            elif not a[c].astype(str).equals(b[c].astype(str)):
                print(f"{name}: text column {c!r} differs")
                worst = np.inf
        if worst > rtol:
            print(f"{name}: largest relative difference {worst:.3g}")
            bad += 1
    print(f"{len(names) - bad} of {len(names)} tables agree to {rtol:g}")
    return bad


if __name__ == "__main__":
    if len(sys.argv) >= 3 and sys.argv[1] == "write":
        write(sys.argv[2])
    elif len(sys.argv) >= 4 and sys.argv[1] == "compare":
        sys.exit(1 if compare(sys.argv[2], sys.argv[3]) else 0)
    else:
        sys.exit(__doc__)
