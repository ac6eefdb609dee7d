"""Compare two SBC runs of the same replicates (same seed, so the same simulated data sets):
per family and configuration, the fits with divergences and with R-hat > 1.01, the median
smallest bulk and tail ESS; per family, the 90% coverage and the smallest chi-square p of the
rank histograms (5 bins) with its Bonferroni adjustment. Only replicates in both runs count.

Used for the earlier mass-matrix windows (docs/performance.md, "A better start for
warm-up"): the old run is validation/results/sbc_ranks.csv (PyMC's windows), the new one
benchmarks/results/2026-12-03_sbc_early_windows_ranks.csv (``python -m validation.sbc
--reps 20 --families negbin zinb hurdle-negbin --out DIR`` with the early windows, stopped
after 14 replicates).

Example
-------
>>> # python benchmarks/compare_sbc_runs.py OLD.csv NEW.csv     # doctest: +SKIP
"""

from __future__ import annotations

import argparse

import numpy as np
import pandas as pd
from scipy import stats

KEYS = ["family", "groups", "rep"]


def fits_table(old: pd.DataFrame, new: pd.DataFrame) -> pd.DataFrame:
    """Sampler records per family and configuration, old/new, on the common replicates."""
    a_all = old.drop_duplicates(KEYS).set_index(KEYS)
    b_all = new.drop_duplicates(KEYS).set_index(KEYS)
    common = a_all.index.intersection(b_all.index)
    rows = []
    for (fam, g), b in b_all.loc[common].groupby(level=[0, 1]):
        a = a_all.loc[b.index]

        def pair(fn, a=a, b=b):
            return f"{fn(a):.0f}/{fn(b):.0f}"

        rows.append({"family": fam, "groups": g, "fits": len(a),
                     "with divergences old/new": pair(lambda d: (d.divergences > 0).sum()),
                     "R-hat > 1.01 old/new": pair(lambda d: (d.max_rhat > 1.01).sum()),
                     "median min bulk ESS old/new": pair(lambda d: d.min_ess_bulk.median()),
                     "median min tail ESS old/new": pair(lambda d: d.min_ess_tail.median())})
    return pd.DataFrame(rows)


def ranks_line(d: pd.DataFrame) -> str:
    """Coverage and rank uniformity of one run's ranks of one family."""
    ps = [stats.chisquare(np.histogram(q["rank"], bins=5, range=(0, 100))[0]).pvalue
          for _, q in d.groupby("quantity") if len(q) >= 10]
    return (f"ranks {len(d)}, 90% covered {d.covered90.mean():.3f}, quantities {len(ps)}, "
            f"smallest p {min(ps):.3f}, Bonferroni {min(1.0, min(ps) * len(ps)):.3f}")


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    ap.add_argument("old")
    ap.add_argument("new")
    a = ap.parse_args()
    old, new = pd.read_csv(a.old), pd.read_csv(a.new)
    common = new.set_index(KEYS).index.unique().intersection(old.set_index(KEYS).index.unique())
    old = old.set_index(KEYS).loc[lambda x: x.index.isin(common)].reset_index()
    new = new.set_index(KEYS).loc[lambda x: x.index.isin(common)].reset_index()
    print(fits_table(old, new).to_string(index=False))
    for fam in new.family.unique():
        for name, d in (("old", old), ("new", new)):
            print(fam, name, ranks_line(d[d.family == fam]))


if __name__ == "__main__":
    main()
