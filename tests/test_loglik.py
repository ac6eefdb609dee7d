"""The pointwise log-likelihood stored per pattern (bayeszi.engine.loglik) gives LOO exactly as
if it were stored per record. Reference: ``arviz.loo`` on the per-record array (ArviZ's PSIS-LOO,
Vehtari, Gelman & Gabry 2017), which smooths each column on its own, so identical columns
must get identical values."""

from __future__ import annotations

import warnings

import arviz as az
import numpy as np
import pandas as pd
import pytest
from graph_reference import graph_log_likelihood

import bayeszi as bz
from bayeszi.engine import loglik
from bayeszi.engine.pointwise import pattern_log_likelihood
from bayeszi.model.build import build_model


def _pattern_idata(seed: int = 3, chains: int = 2, draws: int = 200, n_pat: int = 12,
                   n: int = 90):
    rng = np.random.default_rng(seed)
    post = {"a": rng.normal(size=(chains, draws))}
    # columns of differing spread, a few heavy-tailed (high Pareto k)
    scale = np.r_[np.full(n_pat - 3, 0.2), [1.5, 3.0, 6.0]]
    pat = -1.0 - np.abs(rng.standard_t(3, size=(chains, draws, n_pat))) * scale
    inverse = np.r_[np.arange(n_pat), rng.integers(0, n_pat, size=n - n_pat)]
    rng.shuffle(inverse)
    return az.from_dict(posterior=post), pat, inverse


def test_loo_per_pattern_equals_arviz_per_record():
    idata_p, pat, inverse = _pattern_idata()
    obs = [f"r{i}" for i in range(inverse.size)]
    assert loglik.store(idata_p, pat, obs, inverse, limit_bytes=0) == "pattern"
    idata_r, _, _ = _pattern_idata()
    assert loglik.store(idata_r, pat, obs, inverse) == "record"
    assert idata_p.log_likelihood["y"].shape == (2, 200, 12)
    np.testing.assert_array_equal(loglik.record_values(idata_p), pat[..., inverse])
    np.testing.assert_array_equal(loglik.record_values(idata_r), pat[..., inverse])
    assert loglik.n_records(idata_p) == loglik.n_records(idata_r) == 90
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        got = loglik.loo(idata_p)
        ref = az.loo(idata_r, pointwise=True, var_name="y", scale="log")
        chunked = [loglik.loo(idata_p, chunk=5), loglik.loo(idata_r, chunk=7),
                   loglik.loo(idata_r)]
    for est in (got, *chunked):
        for key in ("elpd_loo", "se", "p_loo"):
            assert est[key] == pytest.approx(ref[key], rel=1e-12, abs=1e-12), key
        assert est.n_data_points == ref.n_data_points == 90
        assert est.n_samples == ref.n_samples and est.good_k == ref.good_k
        np.testing.assert_allclose(est.loo_i.values, ref.loo_i.values, rtol=1e-12)
        np.testing.assert_allclose(est.pareto_k.values, ref.pareto_k.values, rtol=1e-12)
        assert bool(est.warning) == bool(ref.warning)
    assert (ref.pareto_k.values > 0.7).any()  # the heavy columns do exercise high k


def test_unpooled_values_follow_the_record_order():
    """Patterns are ordered zeros first, so even a permutation must be undone."""
    idata, pat, _ = _pattern_idata(n_pat=5, n=5)
    inverse = np.array([3, 0, 4, 1, 2])
    assert loglik.store(idata, pat, list("abcde"), inverse, limit_bytes=0) == "record"
    np.testing.assert_array_equal(idata.log_likelihood["y"].values, pat[..., inverse])


def test_large_fit_stores_per_pattern_and_loo_is_unchanged(monkeypatch, tmp_path):
    """A fit whose per-record log-likelihood exceeds the limit stores it per pattern; LOO,
    compare and a save/load round trip give the per-record answer."""
    rng = np.random.default_rng(11)
    n = 400
    df = pd.DataFrame({"f": rng.choice(list("abc"), n), "effort": rng.integers(1, 3, n)})
    mu = np.exp(0.3 + 0.5 * (df["f"] == "b") + np.log(df["effort"]))
    df["y"] = np.where(rng.random(n) < 0.3, 0, rng.poisson(mu))
    kw = dict(counts="y ~ f", zeros="~ 1", family="zip", exposure="effort", draws=150,
              warmup_steps=200, chains=2, seed=5, progressbar=False)
    monkeypatch.setattr(loglik, "RECORD_LIMIT_BYTES", 0)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        m = bz.fit(df, **kw)
    assert loglik.stored_per(m.idata) == "pattern"
    n_pat = m.idata.log_likelihood["y"].sizes["obs_pattern"]
    assert n_pat < n / 4
    # the stored values are the model graph's density, and do not depend on the chunking
    ref_graph, stored = graph_log_likelihood(m, draws=10)
    np.testing.assert_allclose(stored, ref_graph, rtol=1e-9, atol=1e-9)
    pats = build_model(m.design, m.priors).likelihood.patterns
    np.testing.assert_array_equal(pattern_log_likelihood(m, pats, chunk=7),
                                  m.idata.log_likelihood["y"].values)
    est = m.loo()
    ref = az.loo(az.InferenceData(posterior=m.idata.posterior, log_likelihood=az.from_dict(
        log_likelihood={"y": loglik.record_values(m.idata)}).log_likelihood),
        pointwise=True, var_name="y")
    assert est.elpd == pytest.approx(float(ref.elpd_loo), rel=1e-12)
    assert est.se == pytest.approx(float(ref.se), rel=1e-12)
    assert len(est.pointwise) == n
    np.testing.assert_allclose(est.pointwise["elpd_i"].to_numpy(), ref.loo_i.values,
                               rtol=1e-12)
    path = str(tmp_path / "fit.nc")
    m.save(path)
    back = bz.load(path)
    assert loglik.stored_per(back.idata) == "pattern"
    assert back.loo().elpd == pytest.approx(est.elpd, rel=1e-12)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        table = bz.rank_models({"zip": m, "again": back})
    assert table.loc["zip", "LOO log score"] == pytest.approx(est.elpd, rel=1e-12)
