"""The fast fit path gives the same numbers as the plain one.

Checks:
- patterns: pooling records into weighted patterns loses nothing (every record's inputs are
  recovered from its pattern) and happens only when it pays;
- the fused pattern log density equals the family's own NumPy log-pmf row by row
  (``bayeszi.families``, itself checked against scipy.stats in tests/test_families.py) and
  its weighted sum equals the sum over records of the same density with nothing pooled,
  with the same gradient;
- one ZINB value is also checked directly against scipy.stats.nbinom composed into the ZINB
  (source: scipy.stats; the composition p + (1 - p) f(0) is the definition of zero inflation);
- the model's log density, prior predictive draws and stored pointwise log-likelihood are per
  original record; the sampler choice falls back to PyMC's NUTS when nutpie is missing and
  is recorded in the fit.

Tolerances are rounding only: the formulas are algebraically identical, so differences are a
few ulp of the largest term (|log p| up to ~1e3 here), hence 1e-12 relative.
"""

from __future__ import annotations

import warnings

import numpy as np
import pandas as pd
import pytest
from scipy import stats

import bayeszi.model.sample as S
from bayeszi.base.errors import BayesziError, BayesziWarning
from bayeszi.base.spec import ModelSpec, SamplerSettings
from bayeszi.families import FAMILY_NAMES, get_family
from bayeszi.model.build import build_model
from bayeszi.model.design import build_design
from bayeszi.model.patterns import find_patterns, pattern_logp
from bayeszi.model.priors import resolve

pt = pytest.importorskip("pytensor.tensor")
import pytensor  # noqa: E402


def _discrete_frame(n: int, seed: int = 5) -> pd.DataFrame:
    rng = np.random.default_rng(seed)
    y = rng.negative_binomial(0.7, 0.25, n)
    y[rng.random(n) < 0.4] = 0
    return pd.DataFrame({
        "y": y.astype(np.int64),
        "f": rng.choice(["a", "b", "c"], n),
        "w": rng.integers(0, 2, n),
        "effort": rng.integers(1, 4, n).astype(float),
        "site": rng.choice([f"s{i}" for i in range(8)], n),
    })


def _spec(family: str) -> ModelSpec:
    return ModelSpec(counts="y ~ C(f)", zeros="~ w", family=family, exposure="effort",
                     groups=("site",))


# ---------------------------------------------------------------------------- patterns
def test_patterns_recover_every_record():
    df = _discrete_frame(3000)
    design = build_design(df, _spec("zinb"))
    pats = find_patterns(design)
    assert pats.pooled and pats.n_patterns < design.n / 2
    inv = pats.inverse
    pd_ = pats.design
    np.testing.assert_array_equal(pd_.y[inv], design.y)
    np.testing.assert_array_equal(pd_.counts.X[inv], design.counts.X)
    np.testing.assert_array_equal(pd_.zeros.X[inv], design.zeros.X)
    np.testing.assert_array_equal(pd_.log_offset[inv], design.log_offset)
    np.testing.assert_array_equal(pd_.groups[0].codes[inv], design.groups[0].codes)
    assert pats.weights.sum() == design.n
    np.testing.assert_array_equal(np.bincount(inv), pats.weights)
    # zero counts first, then positive counts
    assert np.all(pd_.y[: pats.n_zero] == 0) and np.all(pd_.y[pats.n_zero:] > 0)
    # the centring of the fitted data is kept, not recomputed on the patterns
    np.testing.assert_array_equal(pd_.counts.center, design.counts.center)


def test_no_pooling_with_continuous_covariates():
    rng = np.random.default_rng(2)
    df = pd.DataFrame({"y": rng.poisson(1.0, 500), "x": rng.normal(size=500)})
    design = build_design(df, ModelSpec(counts="y ~ x", family="zip"))
    pats = find_patterns(design)
    assert not pats.pooled and pats.n_patterns == design.n
    assert np.all(pats.weights == 1)
    np.testing.assert_array_equal(pats.design.y[pats.inverse], design.y)
    np.testing.assert_array_equal(pats.design.counts.X[pats.inverse], design.counts.X)


# ---------------------------------------------------------------------------- log density
def _compiled(family: str, pats, weighted: bool):
    ec, ez = pt.dvector("ec"), pt.dvector("ez")
    la = pt.dscalar("la")
    out = pattern_logp(family, pats, weighted=weighted)(None, ec, ez, la)
    return pytensor.function([ec, ez, la], out, on_unused_input="ignore")


def _compiled_both(family: str, pats):
    """(per pattern, weighted) in one compiled function."""
    ec, ez = pt.dvector("ec"), pt.dvector("ez")
    la = pt.dscalar("la")
    outs = [pattern_logp(family, pats, weighted=w)(None, ec, ez, la) for w in (False, True)]
    return pytensor.function([ec, ez, la], outs, on_unused_input="ignore")


@pytest.mark.parametrize("family", FAMILY_NAMES)
def test_pattern_logp_equals_family_logpmf(family):
    df = _discrete_frame(2500)
    spec = _spec(family)
    design = build_design(df, spec)
    pats = find_patterns(design)
    fam = get_family(family)
    fn = _compiled_both(family, pats)
    rng = np.random.default_rng(11)
    P = pats.n_patterns
    # typical and extreme values: tiny and huge means, near-Poisson and strong dispersion
    for la in (-20.0, -6.0, -1.0, 0.0, 2.5):
        ec = rng.uniform(-25.0, 7.0, P)
        ez = rng.uniform(-25.0, 25.0, P)
        per_pattern, weighted = fn(ec, ez, la)
        rows = per_pattern[pats.inverse]
        ref = fam.logpmf(design.y, ec[pats.inverse], ez[pats.inverse], la)
        assert np.all(np.isfinite(rows))
        np.testing.assert_allclose(rows, ref, rtol=1e-12, atol=1e-12)
        # the weighted pattern sum is the sum over all records
        total = weighted.sum()
        np.testing.assert_allclose(total, ref.sum(), rtol=1e-12)


@pytest.mark.parametrize("family", ["zinb", "hurdle-negbin", "zip"])
def test_pattern_gradient_equals_rowwise_gradient(family):
    # The pooled, weighted density against the same density with one pattern per record
    # (nothing pooled): equal sums and equal gradients with respect to the pooled inputs.
    df = _discrete_frame(1200, seed=9)
    design = build_design(df, _spec(family))
    pats = find_patterns(design)
    rows = find_patterns(design, min_saving=1.0)
    assert pats.pooled and not rows.pooled
    # each per-record pattern's pooled pattern: record r is rows.inverse[r] and pats.inverse[r]
    pooled_of = np.empty(design.n, dtype=np.int64)
    pooled_of[rows.inverse] = pats.inverse
    ec, ez = pt.dvector("ec"), pt.dvector("ez")
    la = pt.dscalar("la")
    fast = pattern_logp(family, pats)(None, ec, ez, la).sum()
    slow = pattern_logp(family, rows, weighted=False)(None, ec[pooled_of], ez[pooled_of], la).sum()
    wrt = [ec, ez, la]
    outs = [[v, *pytensor.grad(v, wrt, disconnected_inputs="ignore")] for v in (fast, slow)]
    f_fast, f_slow = (pytensor.function(wrt, o, on_unused_input="ignore") for o in outs)
    fam = get_family(family)
    rng = np.random.default_rng(4)
    for la_v in (-8.0, -0.5, 1.0):
        args = (rng.uniform(-4.0, 4.0, pats.n_patterns), rng.uniform(-5.0, 5.0, pats.n_patterns),
                la_v)
        got_fast, got_slow = f_fast(*args), f_slow(*args)
        for g_fast, g_slow in zip(got_fast, got_slow, strict=True):
            np.testing.assert_allclose(g_fast, g_slow, rtol=1e-10, atol=1e-10)
        ref = fam.logpmf(design.y, args[0][pats.inverse], args[1][pats.inverse], la_v).sum()
        np.testing.assert_allclose(got_fast[0], ref, rtol=1e-12)


def test_zinb_value_against_scipy():
    # y = (0, 3) at mu = 2.5, alpha = 0.8, p = 0.3, one pattern each.
    df = pd.DataFrame({"y": [0, 3]})
    design = build_design(df, ModelSpec(counts="y ~ 1", family="zinb"))
    pats = find_patterns(design)
    mu, alpha, p = 2.5, 0.8, 0.3
    fn = _compiled("zinb", pats, weighted=False)
    got = fn(np.full(2, np.log(mu)), np.full(2, np.log(p / (1 - p))), np.log(alpha))
    nb = stats.nbinom(1.0 / alpha, 1.0 / (1.0 + alpha * mu))  # scipy: n, p
    want = [np.log(p + (1 - p) * nb.pmf(0)), np.log((1 - p) * nb.pmf(3))]
    np.testing.assert_allclose(got, want, rtol=1e-13)


def test_model_density_and_prior_draws_per_record():
    df = _discrete_frame(1500, seed=3)
    spec = _spec("zinb")
    design = build_design(df, spec)
    built = build_model(design, resolve(design, None))
    model, pats = built.model, built.likelihood.patterns
    assert pats.pooled
    point = model.initial_point()
    total = model.compile_logp(vars=[model["y"]])(point)
    # the same density row by row from the family, at the same point (no group effects
    # at the initial point: z = 0)
    b = point["counts_std_coef"]
    eta_c = design.counts.X_std @ b + design.log_offset
    eta_z = design.zeros.X_std @ point["zeros_std_coef"]
    la = 2.0 * np.log(np.exp(point["dispersion_sqrt_log__"]))
    ref = get_family("zinb").logpmf(design.y, eta_c, eta_z, la).sum()
    np.testing.assert_allclose(total, ref, rtol=1e-12)
    import pymc as pm

    with model, warnings.catch_warnings():
        warnings.simplefilter("ignore")
        prior = pm.sample_prior_predictive(5, random_seed=1)
    assert prior.prior_predictive["y"].shape == (1, 5, design.n)


# ---------------------------------------------------------------------------- sampler choice
def test_sampler_fallback_when_nutpie_missing(monkeypatch):
    monkeypatch.setattr(S, "nutpie_version", lambda: None)
    with pytest.warns(BayesziWarning, match="nutpie cannot be imported"):
        assert S.choose_sampler("nutpie") == "pymc"
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        assert S.choose_sampler("auto", 1e12) == "pymc"
        assert S.choose_sampler("pymc") == "pymc"


def test_sampler_auto_weighs_the_work(monkeypatch):
    monkeypatch.setattr(S, "nutpie_version", lambda: "9.9")
    big, small = S.NUTPIE_MIN_WORK, S.NUTPIE_MIN_WORK / 10
    assert S.choose_sampler("auto", big) == "nutpie"
    assert S.choose_sampler("auto", small) == "pymc"
    assert S.choose_sampler("nutpie", small) == "nutpie"
    assert S.choose_sampler("pymc", big) == "pymc"
    monkeypatch.setattr(S, "nutpie_version", lambda: None)
    assert S.choose_sampler("auto", big) == "pymc"


def test_fit_work_counts_patterns():
    df = _discrete_frame(1500, seed=3)
    design = build_design(df, _spec("zinb"))
    n_pat = build_model(design, resolve(design, None)).n_rows
    work = S.fit_work(n_pat, SamplerSettings(draws=100, warmup_steps=200, chains=3))
    assert work == n_pat * 300 * 3


def _small_fit(sampler: str):
    import bayeszi as bz

    df = _discrete_frame(400, seed=8)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        return bz.fit(df, counts="y ~ C(f)", zeros="~ w", family="zinb", exposure="effort",
                      groups="site", draws=150, warmup_steps=150, chains=2, cores=1, seed=3,
                      sampler=sampler, progressbar=False)


def _check_fit(fitted, label_start: str, folder):
    import bayeszi as bz
    from bayeszi.engine.draws import fitted_rows, linear_predictors

    assert fitted.idata.sample_stats.attrs["bayeszi_sampler"].startswith(label_start)
    # the sampler used travels with the saved fit
    again = bz.load(fitted.save(str(folder / "fit.nc")))
    assert again.idata.sample_stats.attrs["bayeszi_sampler"] == \
        fitted.idata.sample_stats.attrs["bayeszi_sampler"]
    ll = fitted.idata.log_likelihood["y"]
    assert ll.dims == ("chain", "draw", "obs") and ll.sizes["obs"] == fitted.design.n
    assert fitted.idata.observed_data["y"].sizes["obs"] == fitted.design.n
    lp = linear_predictors(fitted, fitted_rows(fitted))
    ref = get_family("zinb").logpmf(fitted.design.y, lp.counts, lp.zeros, lp.log_alpha)
    np.testing.assert_allclose(ll.values.reshape(ref.shape), ref, rtol=1e-12, atol=1e-12)


def test_pymc_fit_records_sampler_and_rowwise_loglik(cached_fit, tmp_path):
    fitted = cached_fit("perf_pymc_small", lambda: _small_fit("pymc"))
    _check_fit(fitted, "pymc-nuts", tmp_path)


@pytest.mark.slow
def test_nutpie_fit_records_sampler_and_rowwise_loglik(cached_fit, tmp_path):
    fitted = cached_fit("perf_nutpie_small", lambda: _small_fit("nutpie"))
    _check_fit(fitted, "nutpie-", tmp_path)
    # nutpie's sample statistics carry what the diagnostics count, under the names they read
    stats_ = fitted.idata.sample_stats
    diag = fitted.diagnostics()
    assert (diag.chains, diag.draws) == (2, 300)
    assert diag.divergences == int(stats_["diverging"].values.sum())
    assert diag.max_treedepth_hits == int(stats_["reached_max_treedepth"].values.sum())


def test_settings_accept_sampler_names_and_refuse_others():
    for name in ("auto", "pymc", "nutpie"):
        assert SamplerSettings(sampler=name).sampler == name
    for bad in ("stan", "NUTS", 3, None):
        with pytest.raises(BayesziError, match=r"setting 'sampler' must be 'auto', 'pymc' or "
                                               r"'nutpie', got"):
            SamplerSettings(sampler=bad)
