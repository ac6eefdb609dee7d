"""Overdispersion on the crayfish demo data, read the classical way and the bayeszi way.

Fits a Poisson, a negative binomial and a zero-inflated negative binomial (ZINB) regression
to the invented crayfish data (no reach effects, to keep it short) and prints, for each:

1. the Pearson statistic per residual degree of freedom as a posterior predictive check
   (observed against replicated data, with its tail probability);
2. for the Poisson fit, the classical quasi-Poisson dispersion (Pearson statistic at the
   posterior mean of the coefficients over n - p) and what its sqrt(phi) widening would do
   to the water temperature coefficient, next to the negative binomial's own posterior sd;
3. the observed share of zeros against each model's expected share (a quasi-Poisson fit
   has no distribution, so it has no such number);
4. the PSIS-LOO comparison of the three (a quasi-Poisson fit has no likelihood, so no LOO).

Run from the repository root (about 3 minutes on two cores):

    python examples/switching/compare_dispersion.py

The numbers quoted in docs/switching.md come from this script with the seed below.
"""

from __future__ import annotations

import numpy as np
import pandas as pd

import bayeszi as bz
from bayeszi.data import load_crayfish

SEED = 20261202
SETTINGS = dict(draws=500, warmup_steps=500, chains=2, cores=1, seed=SEED, progressbar=False)
COUNTS = "crayfish ~ water_temp + substrate + depth + canopy"
TERM = "water_temp"


def fit_all(df: pd.DataFrame) -> dict[str, bz.FittedModel]:
    """The three fits: the barrier enters the counts of the one-part models, the zeros of ZINB."""
    return {
        "poisson": bz.fit(df, counts=COUNTS + " + barrier", family="poisson",
                          exposure="trap_nights", **SETTINGS),
        "negbin": bz.fit(df, counts=COUNTS + " + barrier", family="negbin",
                         exposure="trap_nights", **SETTINGS),
        "zinb": bz.fit(df, counts=COUNTS, zeros="~ barrier", family="zinb",
                       exposure="trap_nights", **SETTINGS),
    }


def quasi_poisson_phi(m: bz.FittedModel) -> float:
    """Pearson statistic of a Poisson fit at the posterior mean of its coefficients / (n - p)."""
    beta = m.idata.posterior["counts_coef"].mean(("chain", "draw")).to_numpy()
    mu = np.exp(m.design.counts.X @ beta + m.design.log_offset)
    y = m.design.y
    return float(np.sum((y - mu) ** 2 / mu) / (m.design.n - beta.size))


def main() -> None:
    """Fit, check and print."""
    df = load_crayfish()
    fits = fit_all(df)
    pd.set_option("display.width", 120)
    print(f"{len(df)} records, observed zero share {np.mean(df['crayfish'] == 0):.3f}\n")
    rows = []
    for name, m in fits.items():
        check = m.pearson_check(seed=SEED)
        p = check.loc["per residual df"]
        z = m.zero_check(by=[], seed=SEED).iloc[0]
        rows.append({"model": name, "residual df": check.attrs["residual df"],
                     "Pearson/df observed": p["observed mean"],
                     "observed 5%": p["observed 5%"], "observed 95%": p["observed 95%"],
                     "Pearson/df replicated": p["replicated mean"], "tail prob": p["tail prob"],
                     "expected zero share": z["expected share"]})
    print(pd.DataFrame(rows).set_index("model").round(3).to_string(), "\n")

    phi = quasi_poisson_phi(fits["poisson"])
    sd_pois = float(fits["poisson"].coefficients().loc[("counts", TERM), "sd"])
    sd_nb = float(fits["negbin"].coefficients().loc[("counts", TERM), "sd"])
    print(f"quasi-Poisson dispersion phi (Pearson / (n - p) at the posterior mean): {phi:.2f}")
    print(f"sd of the {TERM} coefficient: Poisson {sd_pois:.4f}, "
          f"Poisson x sqrt(phi) {sd_pois * np.sqrt(phi):.4f}, negative binomial {sd_nb:.4f}\n")

    table = bz.rank_models(fits)
    print(table[["LOO log score", "score se", "behind best", "behind se",
                 "effective parameters"]].round(1).to_string())


if __name__ == "__main__":
    main()
