"""Model comparison by PSIS-LOO: rankings on simulated data, exact refits, refusals, plot.

Sources of the check values:
- Simulated truth (tests/simulate.py): data drawn from a ZINB must rank a ZINB (or the
  hurdle-negbin, which describes the same data nearly as well) far above Poisson and above ZIP;
  Poisson data without extra zeros must leave Poisson and ZIP within 2 se of each other
  (the extra-zero probability is then near 0 and ZIP reduces to Poisson).
- statsmodels maximum likelihood (GLM Poisson, NegativeBinomial nb2, ZeroInflatedPoisson,
  ZeroInflatedNegativeBinomialP p=2, Logit + TruncatedLF* for hurdles): AIC = 2k - 2 loglik
  (Akaike 1974) orders the families; elpd_loo and -AIC/2 estimate the same out-of-sample fit
  for regular models with weak priors (asymptotic equivalence, Stone 1977, JRSS B; from memory),
  so pairs that LOO separates clearly must be ordered the same way.
- Brute-force leave-one-out refits (the definition of LOO) for the PSIS estimate (slow test).
- scipy.stats.poisson and Gauss-Hermite quadrature (numpy) for the held-out log-likelihood
  of exact refits.
- Pareto k threshold 0.7: Vehtari et al. 2024, JMLR.
"""

from __future__ import annotations

import dataclasses
import io
import itertools
import warnings

import arviz as az
import numpy as np
import pandas as pd
import pytest
import statsmodels.api as sm
from scipy import stats
from scipy.special import logsumexp
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
from bayeszi.answers.comparison import RefitWrapper, check_same_data, loo, rank_models
from bayeszi.engine.draws import linear_predictors
from bayeszi.fitting.candidates import ProgressDisplay, candidate_specs, fit_candidates
from bayeszi.plots.compareplots import plot_comparison

SMALL = {"draws": 400, "warmup_steps": 400, "chains": 2}
SIX = ["poisson", "negbin", "zip", "zinb", "hurdle-poisson", "hurdle-negbin"]


def post_shape(m) -> tuple[int, int]:
    post = m.idata.posterior
    return post.sizes["chain"], post.sizes["draw"]


def _logmeanexp(a: np.ndarray) -> float:
    a = np.asarray(a).ravel()
    return float(logsumexp(a) - np.log(a.size))


# ---------------------------------------------------------------------------- shared fits
def _zinb_data() -> pd.DataFrame:
    return simulate("zinb", n=1500, seed=21)[0]


@pytest.fixture(scope="module")
def zinb_fits(cached_fit):
    """The six families fitted to ZINB data through fit_candidates (one call)."""
    df = _zinb_data()
    return cached_fit("compare-zinb-six", lambda: fit_candidates(
        df, counts="y ~ x1 + x2", families=SIX, zeros="~ w", exposure="exposure", seed=4,
        progressbar=False, **SMALL))


@pytest.fixture(scope="module")
def poisson_fits(cached_fit):
    df = simulate("poisson", n=1500, seed=22)[0]
    return cached_fit("compare-poisson-two", lambda: fit_candidates(
        df, counts="y ~ x1 + x2", families=["poisson", "zip"], zeros="~ 1",
        exposure="exposure", seed=5, progressbar=False, **SMALL))


def _small_data() -> pd.DataFrame:
    """40 Poisson rows in 8 sites, one outlier (r20, site s4) and one lone-site row (r39)."""
    rng = np.random.default_rng(5)
    n = 40
    x = rng.normal(size=n)
    y = rng.poisson(np.exp(0.5 + 0.3 * x))
    df = pd.DataFrame({"y": y, "x": x, "site": [f"s{i % 8}" for i in range(n)],
                       "hours": rng.uniform(1.0, 2.0, n)},
                      index=[f"r{i}" for i in range(n)])
    df.loc["r20", "y"] = 22
    df.loc["r39", "site"] = "lone"
    return df


@pytest.fixture(scope="module")
def small_fit(cached_fit):
    df = _small_data()
    return cached_fit("compare-small-poisson", lambda: bz.fit(
        df, counts="y ~ x", family="poisson", groups="site", seed=2, progressbar=False,
        **SMALL))


# ---------------------------------------------------------------------------- rankings
def test_zinb_data_rank_zinb_far_above_poisson_and_above_zip(zinb_fits):
    table = rank_models(zinb_fits)
    best = table.index[0]
    # Source: simulated truth (ZINB); the hurdle-negbin fits such data nearly as well.
    assert best in ("zinb", "hurdle-negbin"), table
    assert table.loc["poisson", "behind in se"] < -4, table
    pair = rank_models({best: zinb_fits[best], "zip": zinb_fits["zip"]})
    assert pair.index[0] == best
    assert pair.loc["zip", "behind best"] < -2 * pair.loc["zip", "behind se"], pair
    # The table's own arithmetic, checked from the pointwise values (Vehtari et al. 2017,
    # Stat. Comput., eq. for se of a paired difference: sqrt(n var(d_i))).
    e_best = zinb_fits[best].loo().pointwise["elpd_i"].to_numpy()
    e_poi = zinb_fits["poisson"].loo().pointwise["elpd_i"].to_numpy()
    d = e_poi - e_best
    assert table.loc["poisson", "behind best"] == pytest.approx(d.sum(), rel=1e-10)
    assert table.loc["poisson", "behind se"] == pytest.approx(np.sqrt(d.size * d.var()), rel=1e-10)
    ref = az.loo(zinb_fits["poisson"].idata)
    assert table.loc["poisson", "LOO log score"] == pytest.approx(ref.elpd_loo, rel=1e-12)
    assert table["stacking weight"].sum() == pytest.approx(1.0, abs=1e-6)
    assert list(table["place"]) == list(range(1, 7))
    assert (table["values from"] == "PSIS").all()
    assert set(table["family"]) == set(SIX)
    assert (table[["rows low k", "rows moderate k", "rows high k"]].sum(axis=1) == 1500).all()


def test_poisson_data_leave_poisson_and_zip_within_two_se(poisson_fits):
    table = rank_models(poisson_fits)
    second = table.index[1]
    # Source: simulated truth (no extra zeros): the two models predict alike.
    assert abs(table.loc[second, "behind best"]) < 2 * table.loc[second, "behind se"], table


def _aic(family: str, df: pd.DataFrame) -> float:
    """AIC = 2k - 2 loglik of the statsmodels MLE (Akaike 1974); hurdle = Logit + truncated."""
    X = sm.add_constant(df[["x1", "x2"]].to_numpy(dtype=float))
    Z = sm.add_constant(df[["w"]].to_numpy(dtype=float))
    off = np.log(df["exposure"].to_numpy())
    y = df["y"].to_numpy()
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        if family == "poisson":
            fits = [sm.GLM(y, X, family=sm.families.Poisson(), offset=off).fit()]
        elif family == "negbin":
            fits = [sm.NegativeBinomial(y, X, loglike_method="nb2", offset=off).fit(
                disp=0, maxiter=200)]
        elif family == "zip":
            fits = [ZeroInflatedPoisson(y, X, exog_infl=Z, offset=off).fit(disp=0, maxiter=500)]
        elif family == "zinb":
            fits = [ZeroInflatedNegativeBinomialP(y, X, exog_infl=Z, offset=off, p=2).fit(
                disp=0, maxiter=500, method="bfgs")]
        else:
            pos = y > 0
            logit = sm.Logit((y == 0).astype(float), Z).fit(disp=0)
            if family == "hurdle-poisson":
                count = TruncatedLFPoisson(y[pos], X[pos], offset=off[pos]).fit(disp=0,
                                                                                 maxiter=500)
            else:
                count = TruncatedLFNegativeBinomialP(y[pos], X[pos], offset=off[pos], p=2).fit(
                    disp=0, maxiter=500)
            fits = [logit, count]
    k = sum(len(f.params) for f in fits)
    llf = sum(float(f.llf) for f in fits)
    return 2 * k - 2 * llf


def test_ranking_agrees_with_statsmodels_aic(zinb_fits):
    df = _zinb_data()
    aic = {f: _aic(f, df) for f in SIX}
    ests = {f: zinb_fits[f].loo() for f in SIX}
    decided = 0
    for a, b in itertools.combinations(SIX, 2):
        d = ests[a].pointwise["elpd_i"].to_numpy() - ests[b].pointwise["elpd_i"].to_numpy()
        se = np.sqrt(d.size * d.var())
        if abs(d.sum()) > 2 * se:  # pairs LOO separates clearly
            decided += 1
            assert np.sign(d.sum()) == np.sign(aic[b] - aic[a]), (a, b, d.sum(), se, aic)
    # Families with and without a dispersion or a zeros part are far apart on these data, so
    # most of the 15 pairs are decided (the check is not empty).
    assert decided >= 10, decided


# ---------------------------------------------------------------------------- fit_candidates
def test_fit_candidates_gives_one_fit_per_candidate_on_the_same_data(zinb_fits):
    assert list(zinb_fits) == SIX
    df = _zinb_data()
    for name, m in zinb_fits.items():
        assert m.spec.family == name
        assert m.design.n == len(df)
        assert (m.spec.zeros == "~ w") == (name not in ("poisson", "negbin"))
        assert m.spec.sampler.draws == 400 and m.spec.sampler.progressbar is False
    check_same_data(zinb_fits)  # does not raise


def test_candidate_names_and_zeros_settings():
    cands = candidate_specs("y ~ x", ["poisson", "zip", "hurdle-negbin"],
                            {"flat": "~ 1", "by w": "~ w"}, groups="site",
                            varying={"zeros": ["w"]},
                            priors={"zeros": {"w": bz.priors.normal(sd=1)}})
    assert [c.name for c in cands] == ["poisson", "zip flat", "zip by w",
                                       "hurdle-negbin flat", "hurdle-negbin by w"]
    assert cands[0].spec.varying == {} and "zeros" not in cands[0].spec.priors
    assert cands[2].spec.zeros == "~ w"
    assert [c.name for c in candidate_specs("y ~ x", "zinb", "~ w")] == ["zinb"]
    with pytest.raises(bz.BayesziError, match="zinbb"):
        candidate_specs("y ~ x", ["zinbb"])


def test_fit_candidates_checks_all_candidates_before_sampling(monkeypatch):
    import bayeszi.fitting.api

    def no_sampling(*a, **k):
        raise AssertionError("sampling started before the data were checked")

    monkeypatch.setattr(bayeszi.fitting.api, "fit_spec", no_sampling)
    df = pd.DataFrame({"y": [1, 2, 3, 1, 4, 2], "x": np.arange(6.0)})
    with pytest.raises(bz.BayesziError, match="candidate 'hurdle-poisson'.*no zeros"):
        fit_candidates(df, "y ~ x", ["poisson", "hurdle-poisson"], progressbar=False)
    with pytest.raises(bz.BayesziError, match="candidate 'poisson'.*'z'"):
        fit_candidates(df, "y ~ z", ["poisson"], progressbar=False)


def test_fit_candidates_shows_each_data_warning_once(monkeypatch):
    import bayeszi.fitting.api
    from bayeszi.model.design import build_design

    calls = []

    def fake_fit(data, spec):  # re-validates like fit_spec, but samples nothing
        calls.append(spec.family)
        build_design(data, spec)
        return spec.family

    monkeypatch.setattr(bayeszi.fitting.api, "fit_spec", fake_fit)
    df = pd.DataFrame({"y": [0, 2, 3, 0, 4, 2, 1, 0], "x": np.arange(8.0),
                       "site": list("aabbccdz")})
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        out = fit_candidates(df, "y ~ x", ["poisson", "zip"], groups="site",
                             progressbar=False)
    assert calls == ["poisson", "zip"] and list(out) == ["poisson", "zip"]
    single = [w for w in caught if "single record" in str(w.message)]
    assert len(single) == 1, [str(w.message) for w in caught]


def test_progress_is_one_display():
    buf = io.StringIO()
    p = ProgressDisplay(2, True, buf)
    p.start("zip")
    p.finish("zip", 3.2)
    p.start("zinb")
    p.finish("zinb", 5.0)
    lines = buf.getvalue().splitlines()
    assert len(lines) == 2 and all(line.startswith("candidate ") for line in lines)
    assert lines[1].startswith("candidate 2/2 zinb: 5 s")
    quiet = io.StringIO()
    ProgressDisplay(1, False, quiet).finish("x", 1.0)
    assert quiet.getvalue() == ""


# ---------------------------------------------------------------------------- Pareto k, refits
def test_high_pareto_k_rows_are_named_and_refitted_exactly(small_fit):
    with pytest.warns(bz.BayesziWarning, match=r"Pareto k above 0\.7 \(rows [^)]*r20"):
        est = small_fit.loo()
    k = est.pointwise["pareto_k"]
    assert k["r20"] > 0.7  # an outlier (22 where about 2 is expected) in a site of five
    assert est.flagged_rows == list(k.index[k > 0.7])
    assert sum(est.k_counts().values()) == 40
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        exact = small_fit.loo(exact_refits=True)
    assert exact.exact_rows == est.flagged_rows and exact.flagged_rows == []
    assert exact.elpd == pytest.approx(exact.pointwise["elpd_i"].sum(), rel=1e-12)
    same = exact.pointwise["value_from"] == "PSIS"
    assert np.allclose(exact.pointwise.loc[same, "elpd_i"], est.pointwise.loc[same, "elpd_i"])
    assert (exact.pointwise["pareto_k"] == est.pointwise["pareto_k"]).all()
    # The refit without r20 is reproducible (its seed comes from the model's seed and the
    # row) and its held-out value is the log mean of p(y_r20 | draw), with p from
    # scipy.stats.poisson at the refit's own coefficients and r20's site effect.
    w = RefitWrapper(small_fit)
    kept, held = w.sel_observations([20])
    refit = w.sample(kept)
    assert refit.design.n == 39 and "r20" not in refit.data.index
    ll = w.log_likelihood__i(held, w.get_inference_data(refit)).values.ravel()
    post = refit.idata.posterior
    eta = (post["counts_coef"].sel(counts_term="Intercept").values
           + post["counts_coef"].sel(counts_term="x").values * held["x"].iloc[0]
           + post["counts_effect_site"].sel(site="s4").values).ravel()
    ref = stats.poisson.logpmf(22, np.exp(eta))
    assert np.allclose(ll, ref, rtol=0, atol=1e-9)
    assert exact.pointwise.loc["r20", "elpd_i"] == pytest.approx(_logmeanexp(ref), abs=1e-9)
    # rank_models() says which values are exact.
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        table = rank_models({"exact": exact, "psis": small_fit})
    assert table.loc["exact", "values from"] == "PSIS + exact"
    assert table.loc["psis", "values from"] == "PSIS"
    assert table.loc["exact", "exact refits"] == len(est.flagged_rows)
    assert "r20" in table.loc["exact", "high-k rows"]
    fig = plot_comparison(table)  # the unresolved model is drawn hollow, with its row count
    notes = [t.get_text() for t in fig.axes[0].texts]
    assert any(f"k > 0.7: {len(est.flagged_rows)} rows" in t for t in notes), notes


def test_refit_of_a_lone_group_row_uses_a_new_group(small_fit):
    """r39 is the only record of site 'lone': left out, its site is new to the refit, so its
    value integrates the site effect over the population distribution. Reference: the same
    integral by 40-point Gauss-Hermite quadrature (numpy) of scipy's Poisson pmf."""
    w = RefitWrapper(small_fit)
    kept, held = w.sel_observations([39])
    refit = w.sample(kept)
    assert "lone" not in refit.design.groups[0].levels
    ll = w.log_likelihood__i(held, w.get_inference_data(refit)).values.ravel()
    fixed = linear_predictors(refit, refit.design.encode(held), groups="none").counts[:, 0]
    sd = refit.idata.posterior["counts_sd_site"].values.ravel()
    z, wq = np.polynomial.hermite_e.hermegauss(40)
    q = logsumexp(stats.poisson.logpmf(int(held["y"].iloc[0]),
                                       np.exp(fixed[:, None] + sd[:, None] * z[None, :])),
                  b=wq[None, :] / np.sqrt(2 * np.pi), axis=1)
    mc = _logmeanexp(ll)
    # Monte Carlo error of the log mean (one new-site draw per posterior draw): delta method
    # with ArviZ's MCSE of the mean of p (from the refit's own draws).
    p = np.exp(ll - ll.max())
    mcse = float(az.mcse(az.convert_to_dataset(p.reshape(post_shape(refit))), method="mean")
                 ["x"]) / p.mean()
    assert abs(mc - _logmeanexp(q)) < 4 * mcse + 1e-9, (mc, _logmeanexp(q), mcse)


def test_refits_are_refused_past_the_budget(small_fit):
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        with pytest.raises(bz.BayesziError, match="max_refits=0"):
            small_fit.loo(exact_refits=True, max_refits=0)
        with pytest.raises(bz.BayesziError, match="k_limit"):
            loo(small_fit, k_limit="high")
        with pytest.raises(bz.BayesziError, match="refit_settings"):
            loo(small_fit, exact_refits=True, refit_settings={"drawz": 10})


def test_high_k_advice_is_phrased_for_where_the_reader_is(small_fit):
    """In Python the warning names the keyword; in a report of a study run it names the
    study-file key and the command-line flag (a reader of a report did not write Python)."""
    from bayeszi.answers.comparison import refit_advice
    from bayeszi.app.report.pipeline import REFIT_ADVICE

    with pytest.warns(bz.BayesziWarning, match=r"exact_refits=True") as plain:
        loo(small_fit, k_limit=-np.inf)
    with refit_advice(REFIT_ADVICE), pytest.warns(bz.BayesziWarning) as study:
        loo(small_fit, k_limit=-np.inf)
    text = " ".join(str(w.message) for w in study)
    assert "exact_refits = true in the study file" in text and "--exact-refits" in text
    assert "exact_refits=True" not in text
    assert "exact_refits = true" not in " ".join(str(w.message) for w in plain)


def test_study_file_exact_refits_key(write_small_study, tmp_path):
    from bayeszi.app.study import load_study

    path = write_small_study(tmp_path, **{"interval = 0.9": "interval = 0.9\nexact_refits = true"})
    assert load_study(str(path)).exact_refits is True
    path = write_small_study(tmp_path, **{"interval = 0.9": "interval = 0.9\nexact_refits = 1"})
    with pytest.raises(bz.BayesziError, match=r"'exact_refits' in \[study\] must be true or false"):
        load_study(str(path))


# ---------------------------------------------------------------------------- refusals
def _variant(m, **design_changes):
    v = dataclasses.replace(m, design=dataclasses.replace(m.design, **design_changes))
    v.data = m.data.copy()
    return v


def test_compare_refuses_different_data(small_fit):
    m = small_fit
    y2 = m.design.y.copy()
    y2[3] += 1
    with pytest.raises(bz.BayesziError, match=r"response differs at 1 row\(s\), e\.g\. "
                                              r"row\(s\) r3"):
        rank_models({"a": m, "b": _variant(m, y=y2)})
    with_hours = _variant(m, log_offset=np.log(_small_data()["hours"].to_numpy()))
    with_hours.spec = dataclasses.replace(m.spec, exposure="hours")
    with pytest.raises(bz.BayesziError, match=r"exposure differs \(no exposure vs log\(hours\)\) "
                                              "at 40 row"):
        rank_models({"a": m, "b": with_hours})
    moved = _variant(m)
    moved.data["x"] = moved.data["x"] + np.where(np.arange(40) == 7, 0.5, 0.0)
    with pytest.raises(bz.BayesziError, match="column 'x' differs at 1 row.*r7"):
        rank_models({"a": m, "b": moved})
    relabelled = _variant(m)
    relabelled.data.index = [f"q{i}" for i in range(40)]
    with pytest.raises(bz.BayesziError, match="row labels differ"):
        rank_models({"a": m, "b": relabelled})
    w = RefitWrapper(m)
    kept, _ = w.sel_observations([5])
    shorter = dataclasses.replace(m, design=dataclasses.replace(m.design, n=39))
    shorter.data = kept
    with pytest.raises(bz.BayesziError, match="40 rows vs 39 rows"):
        rank_models({"a": m, "b": shorter})
    with pytest.raises(bz.BayesziError, match="at least two"):
        rank_models({"a": m})
    with pytest.raises(bz.BayesziError, match="not a fitted model"):
        rank_models({"a": m, "b": "zip"})
    bare = _variant(m)
    bare.idata = az.InferenceData(posterior=m.idata.posterior)
    with pytest.raises(bz.BayesziError, match="no stored pointwise log-likelihood"):
        bare.loo()


# ---------------------------------------------------------------------------- plot
def test_comparison_plot(zinb_fits, tmp_path):
    table = rank_models(zinb_fits)
    path = tmp_path / "comparison.png"
    fig = plot_comparison(table, path=path)
    ax = fig.axes[0]
    assert [t.get_text() for t in ax.get_yticklabels()] == list(table.index)
    assert path.stat().st_size > 1000
    assert [p.name for p in tmp_path.iterdir()] == ["comparison.png"]
    with pytest.raises(bz.BayesziError, match="folder"):
        plot_comparison(table, path=tmp_path / "nope" / "c.png")
    with pytest.raises(bz.BayesziError, match="lacks column"):
        plot_comparison(table.drop(columns=["stacking weight"]))


# ---------------------------------------------------------------------------- brute force
@pytest.mark.slow
def test_psis_loo_agrees_with_brute_force_refits():
    """30 rows: PSIS-LOO elpd within 1 se of the sum of 30 exact leave-one-out values."""
    df, _ = simulate("zip", n=30, seed=31)
    spec = bz.make_spec("y ~ x1", "~ 1", "zip", exposure="exposure", seed=7,
                        progressbar=False, **SMALL)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        m = bz.fit_spec(df, spec)
        est = m.loo()
        fam = bz.get_family("zip")
        exact = []
        for i in range(len(df)):
            refit = bz.fit_spec(df.drop(index=df.index[i]), dataclasses.replace(
                spec, sampler=dataclasses.replace(spec.sampler, seed=100 + i)))
            held = df.iloc[[i]]
            lp = linear_predictors(refit, refit.design.encode(held))
            ll = fam.logpmf(held["y"].to_numpy()[None, :], lp.counts, lp.zeros, lp.log_alpha)
            exact.append(_logmeanexp(ll))
    assert abs(est.elpd - sum(exact)) < est.se, (est.elpd, sum(exact), est.se)
