"""Open data: outpatient visits in statsmodels' ``randhie`` data set, bayeszi against MLE.

The data (20,190 person-years; ``mdvis``, the number of outpatient visits, is 0 for 31% of
them) ship with statsmodels (``statsmodels.datasets.randhie``). Three families are fitted
with bayeszi's *default* priors, with all nine covariates in both parts:

- ``negbin`` against ``statsmodels.api.NegativeBinomial`` (NB2, variance mu + alpha mu^2);
- ``zinb`` against ``ZeroInflatedNegativeBinomialP(p=2)`` (logit inflation = bayeszi's
  P(extra zero));
- ``hurdle-negbin`` against a ``Logit`` for P(Y = 0) plus ``TruncatedLFNegativeBinomialP(p=2)``
  on the positive counts (the hurdle likelihood factorises into exactly these two parts).

Checks, with the reasons for the tolerances:

1. Each posterior mean lies within ``TOLERANCE_SD`` = 0.5 posterior sd of its reference.
   The reference is the MLE where the log-likelihood is near-normal in that parameter: its
   profile falls by 1.5 to 2.5 (2 for an exact normal) at MLE - 2 se and at MLE + 2 se.
   Three things then separate posterior mean and MLE, each small at this size: the Monte
   Carlo error of a mean, sd / sqrt(ESS), under 0.05 sd for ESS > 400; the mean-mode gap of
   a near-normal posterior, about skewness / 2 posterior sds; and the prior's pull, for a
   normal prior N(m, s) about (m - MLE) se^2 / (s^2 + se^2) (the normal-normal update),
   listed per slope as "prior pull (sd)". Where the profile is *not* near-normal (a flat
   side, as for rare binary inputs in the ZINB inflation part) the MLE and its standard
   error do not summarise the likelihood, and the reference becomes the mean of the
   one-dimensional profile likelihood x prior, computed on a grid from statsmodels'
   log-likelihood alone (:func:`profile_posterior`). A gap beyond 0.5 sd means the fit and
   the likelihood describe different models.
2. The LOO ranking (``bayeszi.rank_models``) agrees with AIC = -2 log L + 2 k from the MLE fits:
   every pair of models is ordered the same way, unless LOO itself calls the pair a tie
   (difference within 2 standard errors of the difference).

Run from the repository root::

    python -m validation.randhie                 # draws=1000, warmup_steps=1000, 2 chains
    python -m validation.randhie --rows 4000     # a quicker look on a random subset

Writes ``validation/results/randhie_estimates.csv`` (one row per family and parameter),
``randhie_loo.csv``, ``randhie_pairs.csv``, ``randhie_run.json`` and ``randhie.png``.

Example
-------
>>> mle = mle_fit("negbin", load())                  # doctest: +SKIP
>>> [round(float(v), 3) for v in mle.pieces[0].params[[2, -1]]]   # idp, alpha  # doctest: +SKIP
[-0.268, 1.293]
"""

from __future__ import annotations

import argparse
import os
import time
import warnings
from collections.abc import Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np
import pandas as pd

import bayeszi as bz
from validation import common as C

FAMILIES = ("negbin", "zinb", "hurdle-negbin")
RESPONSE = "mdvis"
COVARIATES = ("lncoins", "idp", "lpi", "fmde", "physlm", "disea", "hlthg", "hlthf", "hlthp")
RHS = " + ".join(COVARIATES)
TERMS = ("Intercept", *COVARIATES)
TOLERANCE_SD = 0.5
#: A near-normal log-likelihood falls by 2 at 2 standard errors from its maximum; a profile
#: drop outside this range on either side marks a likelihood the MLE +/- se does not describe.
NORMAL_DROP = (1.5, 2.5)
#: LOO calls two models tied when their elpd difference is within this many standard errors.
TIE_SE = 2.0


def load(rows: int | None = None, seed: int = 5) -> pd.DataFrame:
    """The randhie data (all rows, or a random subset of ``rows``)."""
    import statsmodels.api as sm

    df = sm.datasets.randhie.load_pandas().data
    df = df[[RESPONSE, *COVARIATES]].astype(float)
    df[RESPONSE] = df[RESPONSE].round().astype(np.int64)
    if rows is not None and rows < len(df):
        df = df.sample(rows, random_state=seed).reset_index(drop=True)
    return df


@dataclass
class Piece:
    """One statsmodels model of a reference fit (a hurdle has two: the Logit for P(Y = 0)
    and the truncated counts), its estimates and the (part, term) each parameter stands for
    (part ``"alpha"`` is the NB dispersion)."""

    model: Any
    params: np.ndarray
    bse: np.ndarray
    names: list[tuple[str, str]]
    llf: float

    def profile(self, j: int, value: float) -> float:
        """Profile log-likelihood at parameter ``j`` = ``value`` (all others maximised, by
        BFGS from the MLE with statsmodels' score, then a trust-region Newton method with its
        Hessian where BFGS stops short), minus the maximum."""
        from scipy import optimize

        free = np.array([i for i in range(self.params.size) if i != j])

        def full(theta: np.ndarray) -> np.ndarray:
            q = self.params.copy()
            q[free] = theta
            q[j] = value
            return q

        def hess(t: np.ndarray) -> np.ndarray:
            return -self.model.hessian(full(t))[np.ix_(free, free)]

        def f(t: np.ndarray) -> float:
            return -self.model.loglike(full(t))

        def jac(t: np.ndarray) -> np.ndarray:
            return -self.model.score(full(t))[free]

        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            res = optimize.minimize(f, self.params[free], jac=jac, method="BFGS",
                                    options={"gtol": 1e-5, "maxiter": 3000})
            if not res.success:  # e.g. precision loss on badly scaled inputs: Newton steps
                res = optimize.minimize(f, res.x, jac=jac, hess=hess, method="trust-exact",
                                        options={"gtol": 1e-5, "maxiter": 200})
                # converged when a Newton step would gain less than 1e-4 in log-likelihood
                g = jac(res.x)
                gain = 0.5 * float(g @ np.linalg.lstsq(hess(res.x), g, rcond=None)[0])
                if not (res.success or abs(gain) < 1e-4):
                    raise RuntimeError(f"profile of {self.names[j]} at {value:g} did not "
                                       f"converge ({res.message}; Newton gain {gain:.2g})")
        return float(-res.fun - self.llf)


@dataclass
class MLE:
    """A statsmodels maximum-likelihood fit: its models, estimates and standard errors by
    part, log-likelihood, number of parameters and whether every optimiser converged."""

    pieces: list[Piece]
    converged: bool

    @property
    def llf(self) -> float:
        """Maximised log-likelihood (sum over the pieces)."""
        return float(sum(p.llf for p in self.pieces))

    @property
    def k(self) -> int:
        """Number of parameters."""
        return int(sum(p.params.size for p in self.pieces))

    @property
    def aic(self) -> float:
        """-2 log L + 2 k."""
        return -2.0 * self.llf + 2.0 * self.k

    def entries(self) -> list[tuple[str, str, Piece, int]]:
        """(part, term, piece, index in the piece) for every parameter."""
        return [(part, term, piece, i) for piece in self.pieces
                for i, (part, term) in enumerate(piece.names)]


def _piece(model: Any, result: Any, names: list[tuple[str, str]]) -> Piece:
    return Piece(model, np.asarray(result.params, dtype=float),
                 np.asarray(result.bse, dtype=float), names, float(result.llf))


def mle_fit(family: str, df: pd.DataFrame) -> MLE:
    """The statsmodels reference fit of ``family`` (see the module docstring)."""
    import statsmodels.api as sm
    from statsmodels.discrete.count_model import ZeroInflatedNegativeBinomialP
    from statsmodels.discrete.truncated_model import TruncatedLFNegativeBinomialP

    X = sm.add_constant(df[list(COVARIATES)].to_numpy(dtype=float))
    y = df[RESPONSE].to_numpy()
    counts = [("counts", t) for t in TERMS]
    zeros = [("zeros", t) for t in TERMS]
    alpha = [("alpha", "")]
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        if family == "negbin":
            m = sm.NegativeBinomial(y, X, loglike_method="nb2")
            r = m.fit(disp=0, maxiter=500)
            return MLE([_piece(m, r, counts + alpha)], bool(r.mle_retvals["converged"]))
        if family == "zinb":
            m = ZeroInflatedNegativeBinomialP(y, X, exog_infl=X, p=2)
            r = m.fit(disp=0, maxiter=3000, method="bfgs")
            return MLE([_piece(m, r, zeros + counts + alpha)],
                       bool(r.mle_retvals["converged"]))
        if family == "hurdle-negbin":
            mz = sm.Logit((y == 0).astype(float), X)
            rz = mz.fit(disp=0, maxiter=200)
            pos = y > 0
            # Newton's method: statsmodels' default optimiser for this model stops short of
            # the maximum on these data (converged=False, log L lower by about 1,000).
            mc = TruncatedLFNegativeBinomialP(y[pos], X[pos], p=2)
            rc = mc.fit(disp=0, maxiter=500, method="newton")
            return MLE([_piece(mz, rz, zeros), _piece(mc, rc, counts + alpha)],
                       bool(rz.mle_retvals["converged"] and rc.mle_retvals["converged"]))
    raise ValueError(f"no reference fit for family {family!r}")


def bayes_fit(family: str, df: pd.DataFrame, draws: int, warmup_steps: int, seed: int
              ) -> tuple[Any, dict[str, Any]]:
    """bayeszi's fit with its default priors; returns the fit and its sampler record."""
    t0 = time.perf_counter()
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        m = bz.fit(df, counts=f"{RESPONSE} ~ {RHS}", zeros=f"~ {RHS}", family=family,
                   draws=draws, warmup_steps=warmup_steps, chains=2, cores=1, seed=seed,
                   progressbar=False)
    diag = m.diagnostics()
    return m, {"divergences": int(diag.divergences),
               "max_rhat": float(diag.table["r_hat"].max()),
               "min_ess_bulk": float(diag.table["ess_bulk"].min()),
               "seconds": time.perf_counter() - t0,
               "warnings": " | ".join(sorted({str(w.message)[:160] for w in caught
                                              if issubclass(w.category, bz.BayesziWarning)}))}


def normal_shape(piece: Piece, j: int) -> tuple[float, float]:
    """The profile log-likelihood drop at MLE - 2 se and MLE + 2 se. A near-normal
    likelihood drops by 2.0 at both; :data:`NORMAL_DROP` bounds what counts as near-normal."""
    v, se = piece.params[j], piece.bse[j]
    return piece.profile(j, v - 2 * se), piece.profile(j, v + 2 * se)


def profile_posterior(piece: Piece, j: int, prior: Any, points: int = 49
                      ) -> tuple[float, float]:
    """Mean and sd of the one-dimensional approximation profile likelihood x prior of
    parameter ``j`` (flat where ``prior`` is None), on a grid covering both the likelihood
    (MLE +/- 8 se) and the prior (its mean +/- 4 sd), interpolated linearly on the log scale.
    The profile stands in for the marginal likelihood: they agree when the other parameters'
    spread changes little along this one (here: all other parameters are well determined)."""
    v, se = piece.params[j], piece.bse[j]
    lo, hi = v - 8 * se, v + 8 * se
    if prior is not None:
        lo, hi = min(lo, prior["mean"] - 4 * prior["sd"]), max(hi, prior["mean"] + 4 * prior["sd"])
    grid = np.union1d(np.linspace(lo, hi, points), [v])
    ll = np.array([0.0 if g == v else piece.profile(j, g) for g in grid])
    fine = np.linspace(lo, hi, 4001)
    logd = np.interp(fine, grid, ll)
    if prior is not None:
        logd = logd - 0.5 * ((fine - prior["mean"]) / prior["sd"]) ** 2
    w = np.exp(logd - logd.max())
    w /= w.sum()
    mean = float((fine * w).sum())
    return mean, float(np.sqrt(((fine - mean) ** 2 * w).sum()))


def agreement(family: str, fitted: Any, mle: MLE) -> pd.DataFrame:
    """One row per parameter: posterior mean and sd, MLE and its standard error, the shape
    of the likelihood, the reference the posterior mean is held to, and the check.

    Where the likelihood is near-normal (profile drops at MLE +/- 2 se within
    :data:`NORMAL_DROP`) the reference is the MLE. Where it is not, an MLE and its standard
    error do not describe the likelihood, and the reference is the mean of the
    one-dimensional profile likelihood x prior (:func:`profile_posterior`), computed from
    statsmodels' log-likelihood alone. Either way the check is |posterior mean - reference|
    <= :data:`TOLERANCE_SD` posterior sd."""
    post = fitted.idata.posterior
    rows = []
    for part, term, piece, j in mle.entries():
        value, se = float(piece.params[j]), float(piece.bse[j])
        if part == "alpha":
            d = post["dispersion"].values.ravel()
            label_part, label_term = "counts", "dispersion (alpha)"
        else:
            d = post[f"{part}_coef"].sel({f"{part}_term": term}).values.ravel()
            label_part, label_term = part, term
        mean, sd = float(d.mean()), float(d.std(ddof=1))
        prior = fitted.priors.user_scale.get(label_part, {}).get(label_term)
        normal_prior = (prior if prior is not None and prior.distribution == "normal"
                        and label_term != "Intercept" else None)
        pull = np.nan
        if normal_prior is not None:
            pull = (normal_prior["mean"] - value) * se**2 / (normal_prior["sd"]**2 + se**2) / sd
        try:
            down, up = normal_shape(piece, j)
            near_normal = bool(NORMAL_DROP[0] <= -down <= NORMAL_DROP[1]
                               and NORMAL_DROP[0] <= -up <= NORMAL_DROP[1])
            if near_normal:
                reference, ref_name, ref_sd = value, "MLE", np.nan
            else:
                reference, ref_sd = profile_posterior(piece, j, normal_prior)
                ref_name = "profile likelihood x prior"
        except RuntimeError as err:  # shown in the table and failing the check, not hidden
            down = up = reference = ref_sd = np.nan
            near_normal, ref_name = False, f"profile failed: {err}"
        gap = (mean - reference) / sd
        rows.append({"family": family, "part": label_part, "term": label_term,
                     "posterior mean": mean, "posterior sd": sd, "MLE": value, "MLE se": se,
                     "sd / se": sd / se, "profile drop at -2 se": down,
                     "profile drop at +2 se": up, "near-normal likelihood": near_normal,
                     "reference": ref_name, "reference mean": reference,
                     "reference sd": ref_sd, "gap (posterior sd)": gap,
                     "gap to MLE (posterior sd)": (mean - value) / sd,
                     "prior pull (sd)": pull,
                     "within tolerance": bool(abs(gap) <= TOLERANCE_SD)})
    return pd.DataFrame(rows)


def loo_vs_aic(fits: dict[str, Any], mles: dict[str, MLE]) -> pd.DataFrame:
    """``bayeszi.rank_models`` with each model's AIC and the pairwise consistency check."""
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        table = bz.rank_models(fits)
    table = table.copy()
    table["AIC"] = [mles[n].aic for n in table.index]
    table["-2 elpd_loo"] = -2.0 * table["elpd_loo"]
    table["k (MLE)"] = [mles[n].k for n in table.index]
    table["AIC rank"] = table["AIC"].rank().astype(int)
    table.attrs["warnings"] = " | ".join(sorted({str(w.message)[:200] for w in caught}))
    return table


def pairwise_consistency(fits: dict[str, Any], mles: dict[str, MLE]) -> pd.DataFrame:
    """Every pair: the elpd difference and its standard error (paired pointwise values), the
    AIC difference, and whether LOO and AIC order the pair the same way (or LOO calls it a
    tie within :data:`TIE_SE` standard errors)."""
    from bayeszi.answers.comparison import loo

    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        pw = {n: loo(m).pointwise["elpd_i"].to_numpy() for n, m in fits.items()}
    names = list(fits)
    rows = []
    for i, a in enumerate(names):
        for b in names[i + 1:]:
            diff_i = pw[a] - pw[b]
            diff = float(diff_i.sum())
            se = float(np.sqrt(diff_i.size * np.var(diff_i)))
            d_aic = mles[a].aic - mles[b].aic
            same = (diff > 0) == (d_aic < 0)
            rows.append({"pair": f"{a} vs {b}", "elpd diff (a - b)": diff, "se": se,
                         "AIC diff (a - b)": d_aic, "same order": bool(same),
                         "LOO tie": bool(abs(diff) <= TIE_SE * se),
                         "consistent": bool(same or abs(diff) <= TIE_SE * se)})
    return pd.DataFrame(rows)


def plot(est: pd.DataFrame, path: str) -> str:
    """Gap between posterior mean and reference, in posterior sds, per parameter and family
    (open circles: terms whose likelihood is not near-normal, referred to profile x prior;
    crosses: the same terms' gap to the MLE)."""
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    families = list(dict.fromkeys(est["family"]))
    fig, axes = plt.subplots(1, len(families), figsize=(3.2 * len(families), 5.2),
                             sharex=True, squeeze=False)
    for ax, family in zip(axes[0], families, strict=True):
        sub = est[est["family"] == family].reset_index(drop=True)
        zl = bz.get_family(family).zeros_label
        labels = [f"{p}: {t}" if p == "counts" else f"zeros [{zl}]: {t}"
                  for p, t in zip(sub["part"], sub["term"], strict=True)]
        y = np.arange(len(sub))
        ax.axvspan(-TOLERANCE_SD, TOLERANCE_SD, color="0.9")
        ax.axvline(0, color="0.4", lw=0.8)
        mle_ref = (sub["reference"] == "MLE").to_numpy()
        ax.plot(sub["gap (posterior sd)"][mle_ref], y[mle_ref], "o", ms=3.5, color="#4477aa",
                label="reference: MLE")
        if (~mle_ref).any():
            ax.plot(sub["gap (posterior sd)"][~mle_ref], y[~mle_ref], "o", ms=4.5,
                    mfc="none", color="#ee6677", label="reference: profile x prior")
            ax.plot(sub["gap to MLE (posterior sd)"][~mle_ref], y[~mle_ref], "x", ms=4,
                    color="#ee6677", label="same terms, gap to MLE")
            ax.legend(fontsize=5.5, loc="lower right")
        ax.set_yticks(y, labels, fontsize=6)
        ax.invert_yaxis()
        ax.set_title(family, fontsize=8)
        ax.set_xlabel("(posterior mean - reference) / posterior sd", fontsize=7)
        ax.tick_params(axis="x", labelsize=7)
    fig.suptitle(f"randhie, bayeszi (default priors) vs statsmodels MLE; grey: tolerance "
                 f"+/- {TOLERANCE_SD} sd", fontsize=8)
    fig.tight_layout()
    C.save_figure(fig, path)
    plt.close(fig)
    return path


def cached_fit(family: str, df: pd.DataFrame, draws: int, warmup_steps: int, seed: int,
               cache: str | None) -> tuple[Any, dict[str, Any]]:
    """:func:`bayes_fit`, kept in ``cache`` (a folder, or None for no cache) through
    ``fitted.save`` / ``bayeszi.load`` so that rerunning the checks needs no new sampling.
    A cached fit is used only when its family, draws, warmup_steps, seed and rows match."""
    path = None
    if cache:
        os.makedirs(cache, exist_ok=True)
        path = os.path.join(cache, f"randhie_{family}_{len(df)}_{draws}_{warmup_steps}_{seed}.nc")
        rec_path = path + ".json"
        if os.path.exists(path) and os.path.exists(rec_path):
            with warnings.catch_warnings():
                warnings.simplefilter("ignore")
                m = bz.load(path)
            return m, {**C.read_json(rec_path), "cached": True}
    m, record = bayes_fit(family, df, draws, warmup_steps, seed)
    if path:
        m.save(path)
        C.write_json(record, path + ".json")
    return m, record


def run(families: Sequence[str] = FAMILIES, rows: int | None = None, draws: int = 1000,
        warmup_steps: int = 1000, seed: int = 7, out: str = C.RESULTS, quiet: bool = False,
        figures: bool = True, cache: str | None = None) -> dict[str, Any]:
    """Fit, compare and write the tables and figure; returns them and the fits."""
    df = load(rows)
    settings = {"families": list(families), "rows": len(df), "draws": draws,
                "warmup_steps": warmup_steps,
                "chains": 2, "cores": 1, "seed": seed, "priors": "bayeszi defaults",
                "tolerance_sd": TOLERANCE_SD, "tie_se": TIE_SE}
    info = C.run_info(settings)
    fits, mles, records, tables = {}, {}, {}, []
    for family in families:
        mles[family] = mle_fit(family, df)
        fits[family], records[family] = cached_fit(family, df, draws, warmup_steps, seed, cache)
        records[family]["sampler"] = fits[family].idata.sample_stats.attrs.get(
            "bayeszi_sampler")
        C.say(f"randhie {family}: {records[family]['seconds']:.0f} s, "
              f"{records[family]['divergences']} divergences, MLE converged: "
              f"{mles[family].converged}", quiet)
        t = agreement(family, fits[family], mles[family])
        for k, v in records[family].items():
            t[k] = v
        t["MLE converged"] = mles[family].converged
        tables.append(t)
    est = pd.concat(tables, ignore_index=True)
    C.write_csv(est, os.path.join(out, "randhie_estimates.csv"))
    result: dict[str, Any] = {"estimates": est, "fits": fits, "mles": mles}
    if len(fits) >= 2:
        table = loo_vs_aic(fits, mles)
        pairs = pairwise_consistency(fits, mles)
        C.write_csv(table.reset_index(), os.path.join(out, "randhie_loo.csv"))
        C.write_csv(pairs, os.path.join(out, "randhie_pairs.csv"))
        info["loo_warnings"] = table.attrs.get("warnings", "")
        result.update({"loo": table, "pairs": pairs})
    if figures:
        plot(est, os.path.join(out, "randhie.png"))
    info["records"] = records
    info["mle"] = {f: {"llf": m.llf, "k": m.k, "aic": m.aic, "converged": m.converged}
                   for f, m in mles.items()}
    C.write_json(info, os.path.join(out, "randhie_run.json"))
    return result


def main(argv: Sequence[str] | None = None) -> int:
    """Command line: ``python -m validation.randhie --help``."""
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    ap.add_argument("--families", nargs="+", default=list(FAMILIES))
    ap.add_argument("--rows", type=int, default=None, help="random subset (default: all)")
    ap.add_argument("--draws", type=int, default=1000)
    ap.add_argument("--warmup-steps", type=int, default=1000)
    ap.add_argument("--seed", type=int, default=7)
    ap.add_argument("--out", default=C.RESULTS)
    ap.add_argument("--cache", default=None,
                    help="folder to keep the fits in (about 0.5 GB each) for reruns")
    a = ap.parse_args(argv)
    res = run(a.families, a.rows, a.draws, a.warmup_steps, a.seed, a.out, cache=a.cache)
    est = res["estimates"]
    with pd.option_context("display.width", 200, "display.max_columns", 20):
        print(est.groupby("family", sort=False)["gap (posterior sd)"]
              .agg(lambda g: g.abs().max()).rename("largest |gap| (sd)").to_string())
        if "loo" in res:
            print(res["loo"][["rank", "elpd_loo", "se", "elpd_diff", "diff_se", "p_loo",
                              "AIC", "AIC rank", "k_bad"]].to_string())
            print(res["pairs"].to_string(index=False))
    ok = bool(est["within tolerance"].all()) and ("pairs" not in res
                                                   or bool(res["pairs"]["consistent"].all()))
    return 0 if ok else 1


if __name__ == "__main__":
    raise SystemExit(main())
