"""90% interval coverage of bayeszi's reported intervals over replicated simulated data sets.

Each replicate draws the parameters from a fixed prior (validation/common.py), simulates a
data set of realistic shape (200 records, 8 sites, varying effort), fits it with that same
prior, and asks whether the 90% intervals that bayeszi *reports* hold the truth:

- the coefficient table, ``fitted.coefficients(interval=0.9)``: both parts' coefficients on
  the user's scale, the NB dispersion and both group sds;
- expected counts, ``fitted.predict(rows, what="mean", interval=0.9)``, for three fitted
  records (their own site's effect, ``groups="known"``) and three records at a new site
  (``groups="new"``; the truth there uses a new site effect drawn from the true spread).

With parameters drawn from the prior the fit uses, a Bayesian 90% central interval covers
the truth with probability exactly 0.9 (averaged over the prior), so the number of covered
replicates is Binomial(R, 0.9) per quantity when the computation is right. Each quantity gets
an exact two-sided binomial test (``scipy.stats.binomtest``) and the 99% band of
Binomial(R, 0.9); a family passes when the Bonferroni-adjusted smallest p-value over its
quantities is at least 0.01. The SBC run (validation/sbc.py) also reports coverage, from the
raw draws at smaller sizes; this script checks the user-facing tables.

Run from the repository root::

    python -m validation.coverage --reps 50
    python -m validation.coverage --reps 3 --families zip     # a quick look

Writes ``validation/results/coverage_replicates.csv``, ``coverage_summary.csv``,
``coverage_families.csv``, ``coverage_run.json`` and ``coverage.png``.

Example
-------
>>> rows = replicate("zip", 0, Config(draws=100, warmup_steps=150))     # doctest: +SKIP
>>> {r["quantity"] for r in rows} >= {"counts: x", "mean count, new site, row 1"}  # doctest: +SKIP
True
"""

from __future__ import annotations

import argparse
import os
import time
import warnings
from collections.abc import Sequence
from dataclasses import asdict, dataclass, field
from typing import Any

import numpy as np
import pandas as pd

import bayeszi as bz
from bayeszi.base.errors import BayesziError
from validation import common as C

#: The families of the demo and the two examples (ZINB, hurdle-NB, ZIP).
DEFAULT_FAMILIES = ("zinb", "hurdle-negbin", "zip")


@dataclass(frozen=True)
class Config:
    """Sizes and settings of one coverage run (defaults: the full run)."""

    rows: int = 200
    n_groups: int = 8
    mean_rows: int = 3          # fitted records and new-site records whose means are checked
    draws: int = 500            # per chain
    warmup_steps: int = 500
    seed: int = 20240902
    prior: C.SimPrior = field(default_factory=C.SimPrior)

    @property
    def fit_settings(self) -> C.FitSettings:
        """NUTS settings of the fits."""
        return C.FitSettings(draws=self.draws, warmup_steps=self.warmup_steps)


TABLE_ROWS = {  # (part, term) of fitted.coefficients() -> quantity name in common.py
    ("counts", "Intercept"): "counts: Intercept", ("counts", "x"): "counts: x",
    ("counts", "b"): "counts: b", ("zeros", "Intercept"): "zeros: Intercept",
    ("zeros", "w"): "zeros: w", ("counts", "dispersion (alpha)"): "dispersion",
    ("counts", f"{C.GROUP} effects: sd"): f"counts {C.GROUP} effects: sd",
    ("zeros", f"{C.GROUP} effects: sd"): f"zeros {C.GROUP} effects: sd",
}


def new_site_truth(rng: np.random.Generator, family: str, fitted_df: pd.DataFrame,
                   truth: dict[str, Any], n: int) -> tuple[pd.DataFrame, np.ndarray]:
    """``n`` new records at one new site and their true expected counts: the site's effects
    are drawn from the true group distribution; inputs are centred on the fitted data."""
    new = C.covariates(rng, n, 0)
    eta_c, eta_z, la = C.linear_predictors(family, new, truth, centre_on=fitted_df)
    eta_c = eta_c + rng.normal(0.0, truth["sd_counts"])
    if eta_z is not None:
        eta_z = eta_z + rng.normal(0.0, truth["sd_zeros"])
    new[C.GROUP] = "new site"
    return new, C.expected_count(family, eta_c, eta_z, la)


def replicate(family: str, rep: int, cfg: Config) -> list[dict[str, Any]]:
    """One replicate: truth, data, fit, and one row per checked interval."""
    rng = C.seed_for(cfg.seed, family, rep)
    df = C.covariates(rng, cfg.rows, cfg.n_groups)
    truth = C.draw_truth(rng, family, cfg.prior, cfg.n_groups)
    df["y"] = C.simulate_counts(rng, family, df, truth)
    true = C.true_quantities(family, df, truth, groups=True, n_mean_rows=cfg.mean_rows)
    new_rows, new_means = new_site_truth(rng, family, df, truth, cfg.mean_rows)
    base = {"family": family, "rep": rep, "n_rows": len(df),
            "zero_share": float(np.mean(df["y"] == 0)), "y_max": int(df["y"].max())}
    try:
        m, record = C.fit(df, family, True, cfg.prior, cfg.fit_settings,
                          seed=int(rng.integers(2**31 - 1)))
    except BayesziError as err:
        return [{**base, "quantity": q, "status": f"failed: {err}"} for q in true]
    intervals: dict[str, tuple[float, float]] = {}
    table = m.coefficients(interval=0.9)
    for key, name in TABLE_ROWS.items():
        if key in table.index:
            intervals[name] = (float(table.loc[key, "5%"]), float(table.loc[key, "95%"]))
    with warnings.catch_warnings():  # sampler trouble is already in the record
        warnings.simplefilter("ignore", bz.BayesziWarning)
        known = m.predict(df.iloc[:cfg.mean_rows], what="mean", groups="known", interval=0.9)
        fresh = m.predict(new_rows, what="mean", groups="new", interval=0.9,
                          seed=int(rng.integers(2**31 - 1)))
    for i in range(cfg.mean_rows):
        intervals[f"mean count, row {i + 1}"] = (float(known["5%"].iloc[i]),
                                                 float(known["95%"].iloc[i]))
        name = f"mean count, new site, row {i + 1}"
        true[name] = float(new_means[i])
        intervals[name] = (float(fresh["5%"].iloc[i]), float(fresh["95%"].iloc[i]))
    rows = []
    for name, value in true.items():
        if name not in intervals:  # quantities of the SBC run that the tables do not show
            continue
        lo, hi = intervals[name]
        rows.append({**base, "quantity": name, "truth": value, "lo90": lo, "hi90": hi,
                     "covered90": bool(lo <= value <= hi), "status": "ok", **record})
    return rows


# ============================================================================ summaries
def summary(reps: pd.DataFrame) -> pd.DataFrame:
    """Coverage rate per family and quantity with the binomial test and 99% band."""
    ok = reps[reps["status"] == "ok"]
    out = []
    for (family, quantity), sub in ok.groupby(["family", "quantity"], sort=False):
        out.append({"family": family, "quantity": quantity,
                    **C.coverage_test(sub["covered90"].astype(bool))})
    return pd.DataFrame(out)


def family_verdicts(summ: pd.DataFrame, reps: pd.DataFrame, alpha: float = 0.01
                    ) -> pd.DataFrame:
    """Per family: Bonferroni-adjusted smallest binomial p-value, pooled rates, trouble."""
    rows = []
    for family, sub in summ.groupby("family", sort=False):
        worst = sub.loc[sub["p"].idxmin()]
        fits = reps[reps["family"] == family].drop_duplicates("rep")
        okf = fits[fits["status"] == "ok"]
        p_adj = C.bonferroni(sub["p"])
        params = sub[~sub["quantity"].str.startswith("mean count")]
        means = sub[sub["quantity"].str.startswith("mean count")]
        rows.append({
            "family": family, "zeros part": bz.get_family(family).zeros_label or "none",
            "replicates": len(fits), "failed fits": int((fits["status"] != "ok").sum()),
            "coverage, parameters": float(params["covered"].sum() / params["n"].sum()),
            "coverage, expected counts": float(means["covered"].sum() / means["n"].sum()),
            "lowest": f"{worst['quantity']}: {worst['rate']:.2f}",
            "smallest p": float(worst["p"]), "Bonferroni p": p_adj,
            "verdict": "pass" if p_adj >= alpha else "FAIL",
            "fits with divergences": int((okf["divergences"] > 0).sum()),
            "fits with R-hat > 1.01": int((okf["max_rhat"] > 1.01).sum()),
        })
    return pd.DataFrame(rows)


def plot(summ: pd.DataFrame, path: str) -> str:
    """Coverage rate per quantity (rows) and family (colours) with the 99% binomial band."""
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    quantities = list(dict.fromkeys(summ["quantity"]))
    families = list(dict.fromkeys(summ["family"]))
    fig, ax = plt.subplots(figsize=(6.5, 0.32 * len(quantities) + 1.4))
    colours = ["#4477aa", "#ee6677", "#228833", "#ccbb44", "#66ccee", "#aa3377"]
    for k, family in enumerate(families):
        sub = summ[summ["family"] == family].set_index("quantity")
        ys = [quantities.index(q) + 0.22 * (k - (len(families) - 1) / 2) for q in sub.index]
        ax.hlines(ys, sub["band_lo"], sub["band_hi"], color=colours[k % 6], alpha=0.35, lw=4)
        zl = bz.get_family(family).zeros_label
        ax.plot(sub["rate"], ys, "o", color=colours[k % 6], ms=4,
                label=f"{family} (R = {int(sub['n'].max())}; zeros part: {zl or 'none'})")
    ax.axvline(0.9, color="0.3", lw=0.8)
    ax.set_yticks(range(len(quantities)), quantities, fontsize=7)
    ax.invert_yaxis()
    ax.set_xlabel("share of replicates whose reported 90% interval holds the truth "
                  "(bar: 99% binomial band)", fontsize=7)
    ax.tick_params(axis="x", labelsize=7)
    ax.legend(fontsize=6, loc="upper center", bbox_to_anchor=(0.5, -0.09), ncol=1)
    fig.tight_layout()
    C.save_figure(fig, path)
    plt.close(fig)
    return path


# ============================================================================ the run
def run(families: Sequence[str] = DEFAULT_FAMILIES, reps: int = 50, cfg: Config | None = None,
        out: str = C.RESULTS, resume: bool = False, quiet: bool = False,
        figures: bool = True) -> dict[str, pd.DataFrame]:
    """Run the coverage study and write its tables and figure; returns the tables.
    Replicates run rep-major (rep 0 of every family first) and are saved after each one."""
    cfg = cfg or Config()
    settings = {"families": list(families), "reps": reps, **asdict(cfg)}
    path = os.path.join(out, "coverage_replicates.csv")
    info_path = os.path.join(out, "coverage_run.json")
    rows: list[dict[str, Any]] = []
    done: set[tuple[str, int]] = set()
    if resume and os.path.exists(path):
        old = C.read_json(info_path).get("settings", {})
        same = {k: v for k, v in settings.items() if k != "reps"}
        if {k: old.get(k) for k in same} != C.jsonable(same):
            raise ValueError(f"--resume: the settings differ from the run in {info_path}")
        rows = pd.read_csv(path).to_dict("records")
        done = {(r["family"], int(r["rep"])) for r in rows}
    info = C.run_info(settings)
    C.write_json(info, info_path)  # now, so that a run cut short can be resumed
    t0 = time.perf_counter()
    for rep in range(reps):
        for family in families:
            if (family, rep) in done:
                continue
            t = time.perf_counter()
            new = replicate(family, rep, cfg)
            rows.extend(new)
            C.write_csv(pd.DataFrame(rows), path)
            C.say(f"coverage {family:14s} rep {rep:3d}: {time.perf_counter() - t:5.1f} s, "
                  f"{new[0]['status'][:60]}", quiet)
    info["wall_seconds_this_session"] = time.perf_counter() - t0
    C.write_json(info, info_path)
    return summarise(pd.DataFrame(rows), out, figures)


def summarise(reps: pd.DataFrame | None = None, out: str = C.RESULTS, figures: bool = True
              ) -> dict[str, pd.DataFrame]:
    """Tables and figure from the replicates (default: ``out/coverage_replicates.csv``)."""
    if reps is None:
        reps = pd.read_csv(os.path.join(out, "coverage_replicates.csv"))
    summ = summary(reps)
    verdicts = family_verdicts(summ, reps)
    C.write_csv(summ, os.path.join(out, "coverage_summary.csv"))
    C.write_csv(verdicts, os.path.join(out, "coverage_families.csv"))
    if figures:
        plot(summ, os.path.join(out, "coverage.png"))
    return {"replicates": reps, "summary": summ, "families": verdicts}


def main(argv: Sequence[str] | None = None) -> int:
    """Command line: ``python -m validation.coverage --help``."""
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    ap.add_argument("--reps", type=int, default=50, help="replicates per family")
    ap.add_argument("--families", nargs="+", default=list(DEFAULT_FAMILIES))
    ap.add_argument("--draws", type=int, default=Config.draws)
    ap.add_argument("--warmup-steps", type=int, default=Config.warmup_steps)
    ap.add_argument("--seed", type=int, default=Config.seed)
    ap.add_argument("--out", default=C.RESULTS)
    ap.add_argument("--resume", action="store_true", help="continue an interrupted run")
    ap.add_argument("--summarise-only", action="store_true",
                    help="only rebuild the tables and figure from OUT/coverage_replicates.csv")
    a = ap.parse_args(argv)
    if a.summarise_only:
        res = summarise(out=a.out)
    else:
        res = run(a.families, a.reps, Config(draws=a.draws, warmup_steps=a.warmup_steps,
                                             seed=a.seed), a.out,
                  a.resume)
    with pd.option_context("display.width", 200, "display.max_columns", 20):
        print(res["families"].to_string(index=False))
    return 0 if (res["families"]["verdict"] == "pass").all() else 1


if __name__ == "__main__":
    raise SystemExit(main())
