"""Posterior means against statsmodels' maximum-likelihood estimates on 3,000 simulated rows.

Source of the check values: statsmodels (GLM Poisson, NegativeBinomial nb2,
ZeroInflatedPoisson, ZeroInflatedNegativeBinomialP with p=2, Logit, and the truncated
count models TruncatedLFPoisson / TruncatedLFNegativeBinomialP for the hurdle's positive
part). With 3,000 rows and weakly informative priors the posterior mean should sit within
3 posterior sd of the MLE; the simulated truth should lie inside the 99% interval.
"""

from __future__ import annotations

import warnings

import numpy as np
import pytest
import statsmodels.api as sm
from simulate import simulate
from statsmodels.discrete.count_model import (
    ZeroInflatedNegativeBinomialP,
    ZeroInflatedPoisson,
)
from statsmodels.discrete.truncated_model import (
    TruncatedLFNegativeBinomialP,
    TruncatedLFPoisson,
)

import bayeszi as bz

FAMILIES = ["poisson", "negbin", "zip", "zinb", "hurdle-poisson", "hurdle-negbin"]


def _mle(family: str, df):
    """statsmodels MLE: dict part -> {term: estimate}, plus alpha when present."""
    X = sm.add_constant(df[["x1", "x2"]].to_numpy(dtype=float))
    Z = sm.add_constant(df[["w"]].to_numpy(dtype=float))
    off = np.log(df["exposure"].to_numpy())
    y = df["y"].to_numpy()
    cterms = ["Intercept", "x1", "x2"]
    zterms = ["Intercept", "w"]
    out: dict = {}
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        if family == "poisson":
            r = sm.GLM(y, X, family=sm.families.Poisson(), offset=off).fit()
            out["counts"] = dict(zip(cterms, r.params, strict=True))
        elif family == "negbin":
            r = sm.NegativeBinomial(y, X, loglike_method="nb2", offset=off).fit(disp=0,
                                                                                maxiter=200)
            out["counts"] = dict(zip(cterms, r.params[:3], strict=True))
            out["alpha"] = r.params[3]
        elif family == "zip":
            r = ZeroInflatedPoisson(y, X, exog_infl=Z, offset=off).fit(disp=0, maxiter=500)
            out["zeros"] = dict(zip(zterms, r.params[:2], strict=True))
            out["counts"] = dict(zip(cterms, r.params[2:5], strict=True))
        elif family == "zinb":
            r = ZeroInflatedNegativeBinomialP(y, X, exog_infl=Z, offset=off, p=2).fit(
                disp=0, maxiter=500, method="bfgs")
            out["zeros"] = dict(zip(zterms, r.params[:2], strict=True))
            out["counts"] = dict(zip(cterms, r.params[2:5], strict=True))
            out["alpha"] = r.params[5]
        else:
            # Hurdle = Logit for P(Y = 0) plus a zero-truncated count model on y > 0.
            rz = sm.Logit((y == 0).astype(float), Z).fit(disp=0)
            out["zeros"] = dict(zip(zterms, rz.params, strict=True))
            pos = y > 0
            if family == "hurdle-poisson":
                rc = TruncatedLFPoisson(y[pos], X[pos], offset=off[pos]).fit(disp=0,
                                                                              maxiter=500)
                out["counts"] = dict(zip(cterms, rc.params[:3], strict=True))
            else:
                rc = TruncatedLFNegativeBinomialP(y[pos], X[pos], offset=off[pos], p=2).fit(
                    disp=0, maxiter=500)
                out["counts"] = dict(zip(cterms, rc.params[:3], strict=True))
                out["alpha"] = rc.params[3]
    return out


@pytest.mark.parametrize("family", FAMILIES)
def test_posterior_matches_mle_and_covers_truth(family, cached_fit):
    df, truth = simulate(family, n=3000, seed=11)
    m = cached_fit(f"mle-{family}", lambda: bz.fit(
        df, counts="y ~ x1 + x2", zeros="~ w", family=family, exposure="exposure",
        draws=500, warmup_steps=500, chains=2, seed=3))
    mle = _mle(family, df)
    post = m.idata.posterior
    for part in ("counts", "zeros"):
        if part not in mle:
            continue
        var = post[f"{part}_coef"]
        for term, est in mle[part].items():
            d = var.sel({f"{part}_term": term}).values.ravel()
            assert abs(d.mean() - est) < 3 * d.std(), (part, term, d.mean(), d.std(), est)
            lo, hi = np.quantile(d, [0.005, 0.995])
            true = truth[part][term]
            assert lo < true < hi, (part, term, lo, hi, true)
    if "alpha" in mle:
        d = post["dispersion"].values.ravel()
        assert abs(d.mean() - mle["alpha"]) < 3 * d.std(), (d.mean(), d.std(), mle["alpha"])
        lo, hi = np.quantile(d, [0.005, 0.995])
        assert lo < truth["alpha"] < hi
    # The stored groups a later LOO and report need are present.
    assert set(m.idata.groups()) >= {"posterior", "log_likelihood", "observed_data",
                                     "sample_stats"}
    assert m.idata.log_likelihood["y"].shape[-1] == len(df)
