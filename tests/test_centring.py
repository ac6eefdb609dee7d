"""Centred intercepts for data-rich levels (bayeszi.model.build.centred_levels): the same
model as the non-centred form, only sampled differently. Checked here: which levels are
centred, that the stored log-likelihood equals the family's density rebuilt from the draws,
and that the posterior agrees with the non-centred fit of the same data within Monte Carlo
error (a tolerance from the two fits' own MCSEs)."""

from __future__ import annotations

import warnings

import arviz as az
import numpy as np
import pandas as pd
import pytest
from graph_reference import graph_log_likelihood

import bayeszi as bz
from bayeszi.base.spec import ModelSpec
from bayeszi.model import build
from bayeszi.model.design import build_design
from bayeszi.model.priors import resolve


def _sites(seed: int = 21) -> pd.DataFrame:
    """Six sites: four with many visits and high counts, one with many visits and low
    counts, one with four visits."""
    rng = np.random.default_rng(seed)
    visits = np.r_[[80] * 4, 60, 4]
    site = np.repeat([f"s{i}" for i in range(6)], visits)
    effect = dict(zip([f"s{i}" for i in range(6)], rng.normal(0, 0.5, 6), strict=True))
    x = rng.normal(size=site.size)
    mu = np.exp(1.2 + 0.4 * x + np.array([effect[s] for s in site]))
    mu[site == "s4"] *= 0.3
    y = rng.negative_binomial(4, 4 / (4 + mu))
    return pd.DataFrame({"y": y, "x": x, "site": site})


def _fit(df: pd.DataFrame, seed: int = 3):
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        return bz.fit(df, counts="y ~ x", zeros=None, family="negbin", groups="site",
                      draws=600, tune=600, chains=2, seed=seed, progressbar=False)


def test_which_levels_are_centred():
    """The documented moment rule (bayeszi.model.build.centred_levels), recomputed here: per site
    m = (sum(y) + 0.5) / visits and v = (sum((y - m)^2) + 0.5) / (sum(y) + 0.5)^2; a site is
    centred when v < (var(log m) - mean(v)) / 4 and it has at least 50 records."""
    df = _sites()
    by = df.groupby("site", sort=True)
    total = by["y"].sum().to_numpy() + 0.5
    size = by.size().to_numpy()
    m = total / size
    v = np.array([((grp["y"] - mj) ** 2).sum() + 0.5 for (_, grp), mj in zip(by, m,
                                                                          strict=True)])
    v = v / total**2
    between = np.var(np.log(m), ddof=1) - np.mean(v)
    d = build_design(df, ModelSpec(counts="y ~ x", zeros=None, family="negbin",
                                   groups=("site",)))
    mask = build.centred_levels(d)["site"]
    np.testing.assert_array_equal(mask, (v < between / build.CENTRE_MARGIN)
                                  & (size >= build.CENTRE_MIN_RECORDS))
    assert mask[:4].all() and not mask[5], (total, v, between)  # s5: 4 records
    model = build.build_model(d, resolve(d, None)).model
    free = {v.name for v in model.free_RVs}
    assert {"counts_level_site", "counts_z_site"} <= free
    levels = np.array([f"s{i}" for i in range(6)])
    assert list(model.coords["counts_site_centred"]) == list(levels[mask])
    assert list(model.coords["counts_site_noncentred"]) == list(levels[~mask])
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
    # the stored log-likelihood (NumPy, from the draws) is the density of the model's graph
    ref, stored = graph_log_likelihood(centred)
    np.testing.assert_allclose(stored, ref, rtol=1e-9, atol=1e-9)
    monkeypatch.setattr(build, "CENTRING", False)
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


def test_no_centring_without_spread_and_zeros_part_centred_on_group_predictors():
    """Levels that do not differ (between-level variance not positive) stay non-centred; a
    data-rich zeros part is centred on its intercept plus the group-level predictor."""
    rng = np.random.default_rng(5)
    n = 3000
    site = rng.integers(0, 6, n)
    flat = pd.DataFrame({"y": rng.poisson(3.0, n), "site": [f"s{i}" for i in site]})
    d = build_design(flat, ModelSpec(counts="y ~ 1", family="poisson", groups=("site",)))
    assert build.centred_levels(d) == {}
    barrier = (site % 2).astype(float)
    extra = rng.random(n) < 1 / (1 + np.exp(-(-1.5 + 2.0 * barrier + rng.normal(0, 0.5, 6)[site])))
    y = np.where(extra, 0, rng.poisson(np.exp(1.0 + rng.normal(0, 0.5, 6)[site])))
    df = pd.DataFrame({"y": y, "barrier": barrier, "site": [f"s{i}" for i in site]})
    d = build_design(df, ModelSpec(counts="y ~ 1", zeros="~ barrier", family="zip",
                                   groups=("site",)))
    assert build.centred_levels(d, "zeros")["site"].all()
    cols, values = build.group_level_columns(d.zeros, d.groups[0])
    assert cols.tolist() == [d.zeros.terms.index("barrier")]
    np.testing.assert_allclose(values[:, 0], d.zeros.X_std[:, cols[0]][
        [int(np.flatnonzero(d.groups[0].codes == j)[0]) for j in range(6)]])
    model = build.build_model(d, resolve(d, None)).model
    assert {"zeros_level_site", "counts_level_site"} <= {v.name for v in model.free_RVs}
    assert np.isfinite(model.compile_logp()(model.initial_point()))


def test_centred_fit_saves_loads_and_reports(cached_fit, tmp_path):
    """A fit with centred levels round-trips through save/load (same effects, same LOO, same
    group tables) and its group tables cover every site: one batch (site, counts, intercept)
    of 6 levels with 4 to 80 records (the data of :func:`_sites`), whose sd is the posterior
    mean of the drawn counts_sd_site."""
    df = _sites()
    m = cached_fit("centring-mixed", lambda: _fit(df))
    path = str(tmp_path / "centred.nc")
    m.save(path)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        back = bz.load(path)
        np.testing.assert_array_equal(back.idata.posterior["counts_effect_site"].values,
                                      m.idata.posterior["counts_effect_site"].values)
        assert back.loo().elpd == pytest.approx(m.loo().elpd, rel=1e-12)
        eff = back.group_effects()
        pool = back.pooling_summary()
        pd.testing.assert_frame_equal(eff, m.group_effects())
        pd.testing.assert_frame_equal(pool, m.pooling_summary())
    assert len(eff.loc["site"]) == 6
    assert list(pool.index) == [("site", "counts", "intercept")]
    row = pool.iloc[0]
    assert (row["levels"], row["records min"], row["records max"]) == (6, 4, 80)
    sd = m.idata.posterior["counts_sd_site"].values
    assert row["sd"] == pytest.approx(sd.mean(), rel=1e-12)
    assert 0 < row["pooling"] < 1


def test_varying_slope_with_centred_intercepts_builds():
    """Centred intercepts combine with a varying slope for the same grouping column."""
    df = _sites()
    d = build_design(df, ModelSpec(counts="y ~ x", zeros=None, family="negbin",
                                   groups=("site",), varying={"counts": ("x",)}))
    model = build.build_model(d, resolve(d, None)).model
    free = {v.name for v in model.free_RVs}
    assert {"counts_level_site", "counts_slope_z_site"} <= free
    assert np.isfinite(model.compile_logp()(model.initial_point()))


def test_diagnostics_skip_raw_variables_by_name_prefix():
    """Raw sampler variables (z's, centred levels, correlation transforms) are left out of
    the diagnostics table by their exact prefixes; a grouping column whose own name holds
    '_z_' or '_level_' keeps its effects and sds in the table."""
    from bayeszi.model.diagnostics import parameter_names

    names = ["counts_z_site", "zeros_slope_z_site", "counts_level_site", "z_corr_site",
             "counts_effect_zone_z_1", "counts_sd_water_level_x", "counts_coef",
             "counts_std_coef"]
    idata = az.from_dict(posterior={v: np.zeros((2, 5)) for v in names})
    assert parameter_names(idata) == ["counts_effect_zone_z_1", "counts_sd_water_level_x",
                                      "counts_coef"]
