"""Centred counts intercepts for data-rich levels (bayeszi.build.centred_levels): the same
model as the non-centred form, only sampled differently. Checked here: which levels are
centred, that the stored log-likelihood equals the family's density rebuilt from the draws,
and that the posterior agrees with the non-centred fit of the same data within Monte Carlo
error (a tolerance from the two fits' own MCSEs)."""

from __future__ import annotations

import warnings

import arviz as az
import numpy as np
import pandas as pd

import bayeszi as bz
from bayeszi import build
from bayeszi.design import build_design
from bayeszi.draws import linear_predictors
from bayeszi.families import get_family
from bayeszi.predict import fitted_rows
from bayeszi.priors import resolve
from bayeszi.spec import ModelSpec


def _sites(seed: int = 21) -> pd.DataFrame:
    """Six sites: four with many visits and high counts, two with a few low counts."""
    rng = np.random.default_rng(seed)
    visits = np.r_[[40] * 4, [4] * 2]
    site = np.repeat([f"s{i}" for i in range(6)], visits)
    effect = dict(zip([f"s{i}" for i in range(6)], rng.normal(0, 0.5, 6), strict=True))
    x = rng.normal(size=site.size)
    mu = np.exp(1.2 + 0.4 * x + np.array([effect[s] for s in site]))
    mu[np.isin(site, ["s4", "s5"])] *= 0.3
    y = rng.negative_binomial(4, 4 / (4 + mu))
    return pd.DataFrame({"y": y, "x": x, "site": site})


def _fit(df: pd.DataFrame, seed: int = 3):
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        return bz.fit(df, counts="y ~ x", zeros=None, family="negbin", groups="site",
                      draws=600, tune=600, chains=2, seed=seed, progressbar=False)


def test_which_levels_are_centred():
    df = _sites()
    totals = df.groupby("site")["y"].sum()
    d = build_design(df, ModelSpec(counts="y ~ x", zeros=None, family="negbin",
                                   groups=("site",)))
    mask = build.centred_levels(d)["site"]
    np.testing.assert_array_equal(mask, (totals >= build.CENTRE_MIN_COUNT).to_numpy())
    assert mask[:4].all() and not mask[4:].any(), totals
    model = build.build_model(d, resolve(d, None))
    free = {v.name for v in model.free_RVs}
    assert {"counts_level_site", "counts_z_site"} <= free
    assert list(model.coords["site_centred"]) == ["s0", "s1", "s2", "s3"]
    assert list(model.coords["site_noncentred"]) == ["s4", "s5"]
    # never with two grouping columns or correlated intercepts
    df["season"] = np.resize(["a", "b", "c"], len(df))
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        d2 = build_design(df, ModelSpec(counts="y ~ x", zeros=None, family="negbin",
                                        groups=("site", "season")))
    assert build.centred_levels(d2) == {}


def test_centred_fit_matches_noncentred_fit(monkeypatch, cached_fit):
    df = _sites()
    centred = cached_fit("centring-mixed", lambda: _fit(df))
    assert "counts_level_site" in centred.idata.posterior
    # the stored log-likelihood is the family's density at the draws
    lp = linear_predictors(centred, fitted_rows(centred), groups="known")
    ll = get_family("negbin").logpmf(centred.design.y, lp.counts, lp.zeros, lp.log_alpha)
    stored = centred.idata.log_likelihood["y"].values.reshape(ll.shape)
    np.testing.assert_allclose(ll, stored, rtol=1e-9, atol=1e-9)
    monkeypatch.setattr(build, "CENTRE_MIN_COUNT", np.inf)
    plain = _fit(df, seed=4)
    assert "counts_level_site" not in plain.idata.posterior
    for var in ("counts_coef", "counts_sd_site", "counts_effect_site", "dispersion"):
        a, b = centred.idata.posterior[var], plain.idata.posterior[var]
        se = np.sqrt(az.mcse(centred.idata, var_names=[var])[var].values ** 2
                     + az.mcse(plain.idata, var_names=[var])[var].values ** 2)
        gap = np.abs(a.mean(("chain", "draw")).values - b.mean(("chain", "draw")).values)
        # 4.5 combined MCSEs: with about 10 values compared, a false alarm has odds < 1e-4
        assert np.all(gap < 4.5 * se), (var, gap, se)


def test_new_site_prediction_is_wider_than_a_known_rich_site(cached_fit):
    """A new site's effect is drawn from Normal(0, sd), so its expected count is far less
    certain than that of a data-rich (centred) known site at the same covariates."""
    df = _sites()
    m = cached_fit("centring-mixed", lambda: _fit(df))
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        known = m.predict(pd.DataFrame({"x": [0.0], "site": ["s0"]}), groups="known")
        new = m.predict(pd.DataFrame({"x": [0.0], "site": ["unseen"]}), groups="new",
                        seed=1)
    assert np.isfinite(new["sd"].iloc[0]) and np.isfinite(known["sd"].iloc[0])
    assert new["sd"].iloc[0] > 2 * known["sd"].iloc[0]
