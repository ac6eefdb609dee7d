"""Simulation-based calibration (SBC) of bayeszi's six families, with and without groups.

Talts, Betancourt, Simpson, Vehtari & Gelman (2018, arXiv:1804.06788): draw parameters from
the prior, simulate a data set from them, fit, and rank each true value among ``L``
near-independent posterior draws. If the sampler and the model code are right, every rank is
uniform on 0 .. L whatever the prior; a bias shows as a sloped histogram, over-wide
posteriors as a hump, over-narrow ones as a U. Here ``L = 99`` (ranks 0 .. 99, 100 values)
from 2 chains thinned evenly, and uniformity is tested by a chi-square test on equal bins
(``scipy.stats.chisquare``), per quantity; a family passes when the Bonferroni-adjusted
smallest p-value over its quantities is at least 0.01.

The prior is fixed and passed to ``bayeszi.fit(priors=...)`` explicitly (bayeszi's defaults
centre the intercept priors on the data, which a prior for SBC cannot do); see
validation/common.py. Every fit's divergences, R-hat and ESS go into the results table;
no replicate is dropped (dropping replicates by their data or fit would bias the ranks).

Run from the repository root::

    python -m validation.sbc --reps 40            # the full run
    python -m validation.sbc --reps 5 --families poisson zinb --groups no   # a quick look

Writes ``validation/results/sbc_ranks.csv`` (one row per replicate and quantity),
``sbc_uniformity.csv``, ``sbc_families.csv``, ``sbc_coverage.csv``, ``sbc_run.json`` and one
rank-histogram figure per family, ``sbc_<family>.png``.

Example
-------
>>> rows = replicate("poisson", False, 0, Config(draws=100, warmup_steps=150))  # doctest: +SKIP
>>> rows[0]["rank"] in range(100)                                      # doctest: +SKIP
True
"""

from __future__ import annotations

import argparse
import os
import time
from collections.abc import Sequence
from dataclasses import asdict, dataclass, field
from typing import Any

import numpy as np
import pandas as pd

import bayeszi as bz
from bayeszi.base.errors import BayesziError
from validation import common as C


@dataclass(frozen=True)
class Config:
    """Sizes and settings of one SBC run (defaults: the full run of docs/validation.md)."""

    rows: int = 100                 # records per data set without groups
    group_rows: int = 120           # records per data set with groups
    n_groups: int = 6               # sites (a few groups)
    keep: int = 99                  # thinned draws per fit: ranks 0 .. 99
    draws: int = 300                # per chain
    warmup_steps: int = 400
    seed: int = 20240901
    prior: C.SimPrior = field(default_factory=C.SimPrior)

    @property
    def fit_settings(self) -> C.FitSettings:
        """NUTS settings of the fits."""
        return C.FitSettings(draws=self.draws, warmup_steps=self.warmup_steps)


def replicate(family: str, groups: bool, rep: int, cfg: Config) -> list[dict[str, Any]]:
    """One SBC replicate: truth from the prior, data, fit, one row per quantity."""
    rng = C.seed_for(cfg.seed, family, int(groups), rep)
    n_groups = cfg.n_groups if groups else 0
    df = C.covariates(rng, cfg.group_rows if groups else cfg.rows, n_groups)
    truth = C.draw_truth(rng, family, cfg.prior, n_groups)
    df["y"] = C.simulate_counts(rng, family, df, truth)
    true = C.true_quantities(family, df, truth, groups)
    base = {"family": family, "groups": groups, "rep": rep, "n_rows": len(df),
            "zero_share": float(np.mean(df["y"] == 0)), "y_max": int(df["y"].max())}
    try:
        m, record = C.fit(df, family, groups, cfg.prior, cfg.fit_settings,
                          seed=int(rng.integers(2**31 - 1)))
    except BayesziError as err:  # recorded and counted, never silently dropped
        return [{**base, "quantity": q, "truth": v, "rank": np.nan, "status": f"failed: {err}"}
                for q, v in true.items()]
    draws = C.posterior_quantities(m, df, groups)
    total = len(next(iter(draws.values())))
    idx = C.thin_index(total, cfg.keep)
    rows = []
    for name, value in true.items():
        d = draws[name]
        q05, q95 = np.quantile(d, [0.05, 0.95])
        rows.append({**base, "quantity": name, "truth": value,
                     "rank": C.rank_of(value, d[idx]), "n_ranks": cfg.keep + 1,
                     "post_mean": float(d.mean()), "post_sd": float(d.std(ddof=1)),
                     "q05": float(q05), "q95": float(q95),
                     "covered90": bool(q05 <= value <= q95), "status": "ok", **record})
    return rows


# ============================================================================ summaries
def uniformity(ranks: pd.DataFrame) -> pd.DataFrame:
    """Chi-square uniformity per family, configuration (no groups / groups / pooled) and
    quantity. Pooling the two configurations is valid: every replicate's rank is uniform on
    its own, and replicates are independent."""
    ok = ranks[ranks["status"] == "ok"]
    out = []
    for (family, quantity), sub in ok.groupby(["family", "quantity"], sort=False):
        n_ranks = int(sub["n_ranks"].iloc[0])
        parts = [("no groups", sub[~sub["groups"]]), ("groups", sub[sub["groups"]]),
                 ("pooled", sub)]
        for label, part in parts:
            if part.empty or (label == "pooled" and part["groups"].nunique() < 2):
                continue
            res = C.rank_uniformity(part["rank"].astype(int), n_ranks)
            out.append({"family": family, "config": label, "quantity": quantity,
                        "replicates": len(part), "bins": res["bins"], "chi2": res["chi2"],
                        "p": res["p"], "observed": " ".join(map(str, res["observed"]))})
    return pd.DataFrame(out)


def family_verdicts(unif: pd.DataFrame, ranks: pd.DataFrame, alpha: float = 0.01
                    ) -> pd.DataFrame:
    """Per family: the Bonferroni-adjusted smallest p-value over its quantities (pooled over
    both configurations where a quantity has both), sampler trouble and a pass/fail."""
    rows = []
    for family, sub in unif.groupby("family", sort=False):
        best = sub[sub["config"] == "pooled"]
        only = sub[~sub["quantity"].isin(best["quantity"]) & (sub["config"] != "pooled")]
        tested = pd.concat([best, only])
        worst = tested.loc[tested["p"].idxmin()]
        fr = ranks[(ranks["family"] == family)].drop_duplicates(["groups", "rep"])
        okf = fr[fr["status"] == "ok"]
        p_adj = C.bonferroni(tested["p"])
        rows.append({
            "family": family, "zeros part": bz.get_family(family).zeros_label or "none",
            "replicates (no groups)": int((~fr["groups"]).sum()),
            "replicates (groups)": int(fr["groups"].sum()),
            "failed fits": int((fr["status"] != "ok").sum()),
            "quantities tested": len(tested),
            "smallest p": float(worst["p"]), "at": f"{worst['quantity']} ({worst['config']})",
            "Bonferroni p": p_adj, "verdict": "pass" if p_adj >= alpha else "FAIL",
            "fits with divergences": int((okf["divergences"] > 0).sum()),
            "fits with R-hat > 1.01": int((okf["max_rhat"] > 1.01).sum()),
            "median min ESS (bulk)": float(okf["min_ess_bulk"].median()),
        })
    return pd.DataFrame(rows)


def coverage(ranks: pd.DataFrame) -> pd.DataFrame:
    """90% central-interval coverage per family, configuration and quantity (from the full,
    unthinned draws), with the 99% binomial band around 0.9."""
    ok = ranks[ranks["status"] == "ok"]
    out = []
    for (family, groups, quantity), sub in ok.groupby(["family", "groups", "quantity"],
                                                      sort=False):
        res = C.coverage_test(sub["covered90"].astype(bool))
        out.append({"family": family, "config": "groups" if groups else "no groups",
                    "quantity": quantity, **res})
    return pd.DataFrame(out)


# ============================================================================ figures
def plot_family(ranks: pd.DataFrame, family: str, path: str, ncols: int = 6) -> str:
    """Rank histograms of one family: a block of panels per configuration (no groups,
    groups), one panel per quantity, with the 99% band of a bin's count under uniformity
    (Binomial(R, 1/bins), grey) and its expectation (line)."""
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt
    from scipy import stats

    sub = ranks[(ranks["family"] == family) & (ranks["status"] == "ok")]
    configs = [g for g in (False, True) if (sub["groups"] == g).any()]
    blocks = [(g, list(dict.fromkeys(sub.loc[sub["groups"] == g, "quantity"])))
              for g in configs]
    nrows = sum(-(-len(q) // ncols) for _, q in blocks)
    fig, axes = plt.subplots(nrows, ncols, squeeze=False,
                             figsize=(2.1 * ncols, 1.9 * nrows + 0.5))
    for ax in axes.ravel():
        ax.axis("off")
    row = 0
    for g, quantities in blocks:
        for k, q in enumerate(quantities):
            ax = axes[row + k // ncols][k % ncols]
            ax.axis("on")
            part = sub[(sub["groups"] == g) & (sub["quantity"] == q)]
            n_ranks = int(part["n_ranks"].iloc[0])
            res = C.rank_uniformity(part["rank"].astype(int), n_ranks)
            b = res["bins"]
            lo, hi = stats.binom.ppf([0.005, 0.995], len(part), 1.0 / b)
            ax.axhspan(lo, hi, color="0.85", zorder=0)
            ax.axhline(len(part) / b, color="0.5", lw=0.8)
            ax.bar(np.arange(b) * n_ranks / b, res["observed"], width=n_ranks / b,
                   align="edge", color="#4477aa", edgecolor="white")
            ax.set_xlim(0, n_ranks)
            label = "groups" if g else "no groups"
            ax.set_title(f"{q} [{label}]\nR = {len(part)}, p = {res['p']:.2f}", fontsize=7)
            ax.tick_params(labelsize=6)
            if k % ncols == 0:
                ax.set_ylabel("replicates", fontsize=7)
            ax.set_xlabel("rank of truth (0-99)", fontsize=6)
        row += -(-len(quantities) // ncols)
    zl = bz.get_family(family).zeros_label
    fig.suptitle(f"SBC rank histograms, {family}" + (f" (zeros part: {zl})" if zl else "")
                 + "; grey: 99% band of a bin under uniformity", fontsize=8)
    fig.tight_layout()
    C.save_figure(fig, path)
    plt.close(fig)
    return path


# ============================================================================ the run
def _done(path: str) -> pd.DataFrame | None:
    return pd.read_csv(path) if os.path.exists(path) else None


def run(families: Sequence[str] = bz.FAMILY_NAMES, groups: Sequence[bool] = (False, True),
        reps: int = 40, cfg: Config | None = None, out: str = C.RESULTS, resume: bool = False,
        quiet: bool = False, figures: bool = True) -> dict[str, pd.DataFrame]:
    """Run SBC and write its tables and figures under ``out``; returns the tables.

    Replicates run in the order rep 0 of every configuration, then rep 1, ..., so a run cut
    short still has about equal numbers everywhere; the ranks file is rewritten (atomically)
    after each replicate. ``resume=True`` continues a run with the same settings.
    """
    cfg = cfg or Config()
    settings = {"families": list(families), "groups": list(groups), "reps": reps,
                **asdict(cfg)}
    ranks_path = os.path.join(out, "sbc_ranks.csv")
    info_path = os.path.join(out, "sbc_run.json")
    rows: list[dict[str, Any]] = []
    done: set[tuple[str, bool, int]] = set()
    if resume and (prev := _done(ranks_path)) is not None:
        old = C.read_json(info_path).get("settings", {})
        same = {k: v for k, v in settings.items() if k != "reps"}
        if {k: old.get(k) for k in same} != C.jsonable(same):
            raise ValueError(f"--resume: the settings differ from the run in {info_path}; "
                             "start afresh (without --resume) or use the same settings")
        rows = prev.to_dict("records")
        done = {(r["family"], bool(r["groups"]), int(r["rep"])) for r in rows}
    info = C.run_info(settings)
    C.write_json(info, info_path)  # now, so that a run cut short can be resumed
    t0 = time.perf_counter()
    for rep in range(reps):
        for family in families:
            for g in groups:
                if (family, g, rep) in done:
                    continue
                t = time.perf_counter()
                new = replicate(family, g, rep, cfg)
                rows.extend(new)
                C.write_csv(pd.DataFrame(rows), ranks_path)
                C.say(f"sbc {family:14s} groups={g!s:5s} rep {rep:3d}: "
                      f"{time.perf_counter() - t:5.1f} s, {new[0]['status'][:60]}", quiet)
    ranks = pd.DataFrame(rows)
    info.update({"wall_seconds_this_session": time.perf_counter() - t0})
    C.write_json(info, info_path)
    return summarise(ranks, out, figures)


def summarise(ranks: pd.DataFrame | None = None, out: str = C.RESULTS, figures: bool = True
              ) -> dict[str, pd.DataFrame]:
    """Tables and figures from the ranks (default: ``out/sbc_ranks.csv``), written to ``out``.
    Also what ``--summarise-only`` does, e.g. after a run was stopped part-way."""
    if ranks is None:
        ranks = pd.read_csv(os.path.join(out, "sbc_ranks.csv"))
    ranks = ranks.copy()
    ranks["groups"] = ranks["groups"].astype(bool)
    unif = uniformity(ranks)
    verdicts = family_verdicts(unif, ranks)
    cov = coverage(ranks)
    C.write_csv(unif, os.path.join(out, "sbc_uniformity.csv"))
    C.write_csv(verdicts, os.path.join(out, "sbc_families.csv"))
    C.write_csv(cov, os.path.join(out, "sbc_coverage.csv"))
    if figures:
        for family in ranks["family"].unique():
            plot_family(ranks, family, os.path.join(out, f"sbc_{family}.png"))
    return {"ranks": ranks, "uniformity": unif, "families": verdicts, "coverage": cov}


def main(argv: Sequence[str] | None = None) -> int:
    """Command line: ``python -m validation.sbc --help``."""
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    ap.add_argument("--reps", type=int, default=40, help="replicates per configuration")
    ap.add_argument("--families", nargs="+", default=list(bz.FAMILY_NAMES))
    ap.add_argument("--groups", choices=["no", "yes", "both"], default="both")
    ap.add_argument("--draws", type=int, default=Config.draws)
    ap.add_argument("--warmup-steps", type=int, default=Config.warmup_steps)
    ap.add_argument("--seed", type=int, default=Config.seed)
    ap.add_argument("--group-rows", type=int, default=Config.group_rows,
                    help="records per data set with groups (6 sites)")
    ap.add_argument("--out", default=C.RESULTS)
    ap.add_argument("--resume", action="store_true", help="continue an interrupted run")
    ap.add_argument("--summarise-only", action="store_true",
                    help="only rebuild the tables and figures from OUT/sbc_ranks.csv")
    a = ap.parse_args(argv)
    g = {"no": (False,), "yes": (True,), "both": (False, True)}[a.groups]
    if a.summarise_only:
        res = summarise(out=a.out)
    else:
        res = run(a.families, g, a.reps, Config(draws=a.draws, warmup_steps=a.warmup_steps,
                                                seed=a.seed,
                                                group_rows=a.group_rows), a.out, a.resume)
    with pd.option_context("display.width", 200, "display.max_columns", 20):
        print(res["families"].to_string(index=False))
    return 0 if (res["families"]["verdict"] == "pass").all() else 1


if __name__ == "__main__":
    raise SystemExit(main())
