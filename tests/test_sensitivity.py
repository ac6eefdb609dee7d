"""Is the prior deciding the answer? Power-scaling sensitivity, collinearity and the preview.

* power-scaling on a conjugate normal model, whose power-scaled posteriors are normal in
  closed form, against the estimate from draws;
* a deliberately conflicting prior is flagged, the default prior is not (simulated truth);
* the log prior per draw is the priors' density and survives saving and loading;
* collinear simulated predictors are named before sampling;
* the preview's means lie near the posterior means of a well-identified model;
* the preview in the study file and on the command line samples nothing with ``only``.
"""

from __future__ import annotations

import warnings

import numpy as np
import pandas as pd
import pytest
from scipy import integrate, stats
from simulate import correlated_costs, simulate

import bayeszi as bz
from bayeszi.answers import sensitivity as S
from bayeszi.base.errors import BayesziError, BayesziWarning
from bayeszi.fitting.preview import Preview
from bayeszi.model import collinearity as C
from bayeszi.model.design import build_design

pytestmark = pytest.mark.filterwarnings("ignore:PyTensor could not link to a BLAS")


# ============================================================================ conjugate case
def _cjs(P: np.ndarray, Q: np.ndarray, x: np.ndarray) -> float:
    """Cumulative Jensen-Shannon distance of two CDFs tabulated on the grid ``x``, normalised
    by the integrals of the CDFs over the grid (Nguyen & Vreeken 2015, as used by Kallioinen
    et al. 2023), by Simpson's rule."""
    M = 0.5 * (P + Q)
    with np.errstate(divide="ignore", invalid="ignore"):
        tp = np.where(P > 0, P * np.log2(P / M), 0.0)
        tq = np.where(Q > 0, Q * np.log2(Q / M), 0.0)
    ip, iq = integrate.simpson(P, x=x), integrate.simpson(Q, x=x)
    pq = integrate.simpson(tp, x=x) + 0.5 / np.log(2) * (iq - ip)
    qp = integrate.simpson(tq, x=x) + 0.5 / np.log(2) * (ip - iq)
    return float(np.sqrt((max(pq, 0) + max(qp, 0)) / (ip + iq)))


def _normal_posterior(n, ybar, sigma, mu0, tau, a_prior=1.0, a_lik=1.0):
    """Mean and sd of theta | y for y_i ~ N(theta, sigma^2), theta ~ N(mu0, tau^2), with the
    prior raised to ``a_prior`` and the likelihood to ``a_lik`` (conjugate, closed form)."""
    prec = a_prior / tau**2 + a_lik * n / sigma**2
    return (a_prior * mu0 / tau**2 + a_lik * n * ybar / sigma**2) / prec, prec**-0.5


def _exact_sensitivity(base, scaled, lo, hi, delta=0.01):
    """The power-scaling sensitivity from the exact normal CDFs of the base and the
    power-scaled posteriors on the range [lo, hi] of the draws (the estimator's ECDFs live
    there): the larger distance of the variable and its negation, averaged over alpha =
    1/(1 + delta) and 1 + delta, divided by log2(1 + delta)."""
    x = np.linspace(lo, hi, 20001)
    m, s = base
    total = 0.0
    for alpha in (1 / (1 + delta), 1 + delta):
        ma, sa = scaled(alpha)
        d_up = _cjs(stats.norm.cdf(x, m, s), stats.norm.cdf(x, ma, sa), x)
        d_neg = _cjs(stats.norm.sf(x, m, s)[::-1], stats.norm.sf(x, ma, sa)[::-1], -x[::-1])
        total += max(d_up, d_neg)
    return total / (2 * np.log2(1 + delta))


@pytest.mark.parametrize("tau", [1.0, 0.25])
def test_power_scaling_matches_the_conjugate_normal_closed_form(tau):
    """Exact posterior draws, so the only errors are the importance-sampling estimate's;
    the tolerance is 4 standard errors of the mean difference over 12 replicates."""
    rng = np.random.default_rng(2)
    n, sigma, mu0 = 20, 1.0, 0.0
    y = rng.normal(1.5, sigma, n)
    base = _normal_posterior(n, y.mean(), sigma, mu0, tau)
    diffs = {S.PRIOR: [], S.DATA: []}
    exact_prior = []
    for _ in range(12):
        theta = rng.normal(*base, size=(2, 2000))
        lp = stats.norm.logpdf(theta, mu0, tau)
        ll = stats.norm.logpdf(y[:, None, None], theta, sigma).sum(axis=0)
        got = S.power_scaling(lp, ll, {"theta": theta}).loc["theta"]
        lo, hi = theta.min(), theta.max()
        exact = {
            S.PRIOR: _exact_sensitivity(base, lambda a: _normal_posterior(
                n, y.mean(), sigma, mu0, tau, a_prior=a), lo, hi),
            S.DATA: _exact_sensitivity(base, lambda a: _normal_posterior(
                n, y.mean(), sigma, mu0, tau, a_lik=a), lo, hi)}
        exact_prior.append(exact[S.PRIOR])
        for k in diffs:
            diffs[k].append(got[k] - exact[k])
    for k, d in diffs.items():
        d = np.asarray(d)
        assert abs(d.mean()) <= 4 * d.std(ddof=1) / np.sqrt(d.size), (k, d)
    # tau = 1: N(0, 1) against data at 1.5 with 20 records: just under the threshold;
    # tau = 0.25: a prior as strong as 16 records, far from the data: a conflict
    assert (np.mean(exact_prior) >= S.THRESHOLD) == (tau == 0.25)


def test_reading_follows_the_two_thresholds():
    assert S.reading(0.2, 0.3) == S.CONFLICT
    assert S.reading(0.06, 0.01) == S.DOMINATES
    assert S.reading(0.049, 0.3) == "" and S.reading(0.0, 0.0) == ""
    assert S.reading(0.05, 0.05) == S.CONFLICT  # "at least" the threshold


# ============================================================================ real fits
FIT = dict(counts="y ~ x1 + x2", zeros=None, family="poisson", exposure="exposure",
           draws=300, warmup_steps=300, chains=2, cores=1, seed=3, progressbar=False)
CONFLICTING = {"counts": {"x1": bz.priors.normal(mean=-0.5, sd=0.1)}}  # the data: x1 near 0.5


@pytest.fixture(scope="module")
def poisson_data() -> pd.DataFrame:
    return simulate("poisson", n=300, seed=4)[0]


@pytest.fixture(scope="module")
def default_fit(cached_fit, poisson_data):
    return cached_fit("sensitivity-default", lambda: bz.fit(poisson_data, **FIT))


def test_default_prior_is_not_flagged(default_fit):
    table = default_fit.prior_sensitivity()
    assert (table[S.READING] == "").all(), table
    assert (table[S.PRIOR] < S.THRESHOLD).all()
    assert (table[S.DATA] >= S.THRESHOLD).all()  # 300 records: the data decide
    assert (default_fit.coefficients()[S.TABLE_COLUMN] == "").all()
    assert default_fit.prior_problems() == []
    assert "Prior sensitivity: no parameter reaches 0.05" in str(default_fit)


def test_conflicting_prior_is_flagged_and_warned(poisson_data):
    with pytest.warns(BayesziWarning, match=r"prior-data conflict for counts part: [^;]*\bx1\b"
                                            r".*state a prior for these terms"):
        m = bz.fit(poisson_data, priors=CONFLICTING, **FIT)
    assert m.prior_sensitivity().loc["counts_coef[x1]", S.READING] == S.CONFLICT
    assert m.coefficients().loc[("counts", "x1"), S.TABLE_COLUMN] == S.CONFLICT
    assert "Prior sensitivity warnings:" in str(m)


def test_log_prior_is_the_prior_density_and_survives_save_and_load(tiny_fit, tmp_path):
    """The stored log prior equals scipy's densities of the resolved priors at the draws
    (constrained scale, no Jacobian), and a save/load round trip keeps it."""
    post, lp, pri = tiny_fit.idata.posterior, tiny_fit.idata.log_prior, tiny_fit.priors
    for j, term in enumerate(tiny_fit.design.counts.terms):
        p = pri.counts[term]
        want = stats.norm.logpdf(post["counts_std_coef"].values[..., j], p["mean"], p["sd"])
        np.testing.assert_allclose(lp["counts_std_coef"].values[..., j], want, rtol=1e-10)
    # PyTensor keeps the rate 3.0 as a float32 constant and takes its reciprocal in float32
    # (measured: differences up to 8e-8): log(scale) off by ~3e-8 and x / scale by ~3e-7 x,
    # so this one agrees to 1e-6 absolute for sqrt(dispersion) below 2
    x = post["dispersion_sqrt"].values
    assert x.max() < 2
    want = stats.expon.logpdf(x, scale=1 / pri.dispersion["rate"])
    np.testing.assert_allclose(lp["dispersion_sqrt"].values, want, rtol=0, atol=1e-6)
    want = stats.halfnorm.logpdf(post["counts_sd_g"].values, scale=pri.group_sd["counts"]["sd"])
    np.testing.assert_allclose(lp["counts_sd_g"].values, want, rtol=1e-10)
    assert "counts_z_g" not in lp  # the group effects' own density is not power-scaled
    path = tiny_fit.save(str(tmp_path / "fit.nc"))
    back = bz.load(path)
    for v in lp.data_vars:
        np.testing.assert_array_equal(back.idata.log_prior[v].values, lp[v].values)
    a, b = tiny_fit.prior_sensitivity(), back.prior_sensitivity()
    np.testing.assert_allclose(a[[S.PRIOR, S.DATA]], b[[S.PRIOR, S.DATA]], rtol=1e-8)
    assert list(a[S.READING]) == list(b[S.READING])


def test_a_fit_saved_without_log_prior_gets_it_on_load(tiny_fit, tmp_path):
    old = bz.FittedModel.from_record(tiny_fit)
    old.idata = tiny_fit.idata.copy()
    del old.idata["log_prior"]
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        back = bz.load(old.save(str(tmp_path / "old.nc")))
    for v in tiny_fit.idata.log_prior.data_vars:
        np.testing.assert_allclose(back.idata.log_prior[v].values,
                                   tiny_fit.idata.log_prior[v].values, rtol=1e-12)


def test_a_fit_without_log_prior_says_so():
    from simulate import fitted_from_user_draws

    df, _ = simulate("poisson", n=50, seed=2)
    spec = bz.make_spec("y ~ x1", None, "poisson")
    m = fitted_from_user_draws(df, spec, np.random.default_rng(1).normal(size=(40, 2)))
    with pytest.raises(BayesziError, match="holds no log prior per draw"):
        m.prior_sensitivity()
    assert S.TABLE_COLUMN not in m.coefficients().columns


# ============================================================================ collinearity
def test_collinear_predictors_are_named_before_sampling(no_sampling):
    df = correlated_costs()
    rhs = "cost1 + cost2 + cost3 + age + dist"
    table = C.collinearity(build_design(df, bz.make_spec("y ~ " + rhs, "~ " + rhs,
                                                         "hurdle-negbin")))
    for part in ("counts", "zeros"):
        flagged = table[(table["part"] == part) & table["flagged"]]
        assert sorted(flagged["term"]) == ["cost1", "cost2", "cost3"]
    # equicorrelation 0.92 among three: VIF = 1 / (1 - 2 r^2 / (1 + r)) ~ 9 (common practice)
    assert (table.loc[table["flagged"], "variance inflation"] > C.VIF_LIMIT).all()
    assert (table.loc[~table["flagged"], "variance inflation"] < 1.1).all()
    with pytest.warns(BayesziWarning, match=r"collinear predictors in the counts part: cost1 "
                                            r"\(variance inflation [0-9.]+, correlated with "
                                            r"cost2 \(0\.9\d\)"), \
            pytest.raises(BayesziError, match="sampling reached"):
        bz.fit(df, counts="y ~ " + rhs, zeros="~ " + rhs, family="hurdle-negbin")
    assert len(no_sampling) == 1  # the warning came first, then sampling was reached


def test_a_factor_is_read_as_one_term():
    """Dummies of one factor are not compared with each other; the factor's GVIF^(1/df) is
    near 1 when it is independent of the other predictor."""
    rng = np.random.default_rng(5)
    df = pd.DataFrame({"y": rng.poisson(2, 400), "x": rng.normal(size=400),
                       "f": rng.choice(["a", "b", "c"], 400, p=[0.8, 0.1, 0.1])})
    table = C.collinearity(build_design(df, bz.make_spec("y ~ x + C(f)", None, "poisson")))
    assert len(table) == 2 and not table["flagged"].any()
    assert (table["variance inflation"] < 1.1).all()


# ============================================================================ the preview
def test_preview_means_lie_near_the_posterior_means(default_fit, poisson_data):
    """Well identified (300 records, 3 terms): each gap must be within the Monte Carlo error
    of both means (4 sds of it: ESS of the fit, 1000 preview draws) plus 0.1 posterior sd
    allowed for the normal approximation itself; the sds within the same reasoning."""
    p = bz.preview(poisson_data, counts=FIT["counts"], zeros=None, family="poisson",
                   exposure="exposure", seed=3)
    assert p.converged and p.problems() == []
    gap = bz.preview_gap(p, default_fit)
    ess = default_fit.coefficients().loc[gap.index, "bulk ESS"].to_numpy(float)
    mc = np.sqrt(1 / ess + 1 / 1000)
    assert (gap["gap in sd"].abs().to_numpy() <= 4 * mc + 0.1).all(), gap
    ratio = (gap["approximate sd"] / gap["posterior sd"]).to_numpy()
    assert (np.abs(ratio - 1) <= 4 * np.sqrt(1 / (2 * ess) + 1 / 2000) + 0.1).all(), gap
    table = p.coefficients()
    assert (table["method"] == "approximate (Laplace)").all()
    assert list(table.index) == list(default_fit.coefficients().index)
    assert str(p).startswith("PREVIEW, APPROXIMATE")


def test_report_compares_previews_with_posteriors(default_fit, poisson_data):
    """The report's preview section (study preview = "first"): the gap table is
    preview_gap's, and the summary row gives both times and the largest gap."""
    from bayeszi.app.report.context import ReportInput, build_context
    from bayeszi.app.report.document import Table
    from bayeszi.app.report.sections.preview import section_preview

    p = bz.preview(poisson_data, counts=FIT["counts"], zeros=None, family="poisson",
                   exposure="exposure", seed=3)
    inp = ReportInput(title="t", fits={"poisson": default_fit}, data=poisson_data)
    assert section_preview(build_context(inp)) is None  # no previews, no section
    inp.previews = {"poisson": p}
    section = section_preview(build_context(inp))
    tables = {b.name: b.frame for b in section.blocks if isinstance(b, Table)}
    pd.testing.assert_frame_equal(tables["preview_gap_poisson"], bz.preview_gap(p, default_fit))
    row = tables["preview_summary"].iloc[0]
    assert row["preview seconds"] == p.seconds
    assert row["sampling seconds"] == default_fit.timing["sample_s"]
    assert row["largest gap, coefficients (posterior sds)"] == pytest.approx(
        tables["preview_gap_poisson"]["gap in sd"].abs().max())


def test_preview_candidates_names_like_fit_candidates(poisson_data):
    ps = bz.preview_candidates(poisson_data, "y ~ x1", ["poisson", "zip"], zeros=["~ 1", "~ w"],
                               exposure="exposure", seed=1)
    assert list(ps) == ["poisson", "zip ~ 1", "zip ~ w"]
    assert all(isinstance(p, Preview) and p.seconds > 0 for p in ps.values())


def test_preview_refuses_bad_draws(poisson_data):
    with pytest.raises(BayesziError, match="draws of a preview must be a whole number"):
        bz.preview(poisson_data, counts="y ~ x1", family="poisson", draws=3)


def test_study_preview_key_is_checked(write_small_study, tmp_path):
    from bayeszi.app.study import load_study

    good = load_study(write_small_study(tmp_path, **{"interval = 0.9": 'interval = 0.9\n'
                                                     'preview = "first"'}))
    assert good.preview == "first" and good.with_preview("only").preview == "only"
    bad = write_small_study(tmp_path, **{"interval = 0.9": 'interval = 0.9\npreview = "yes"'})
    with pytest.raises(BayesziError, match=r"'preview' in \[study\] must be one of"):
        load_study(bad)


def test_cli_preview_only_samples_nothing(write_small_study, tmp_path, no_sampling, capsys):
    from bayeszi.app.cli import main

    study = write_small_study(tmp_path)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        rc = main(["run", str(study), "--out", str(tmp_path / "rep"), "--preview", "only",
                   "--quiet"])
    assert rc == 0 and no_sampling == []
    html = (tmp_path / "rep" / "report.html").read_text(encoding="utf-8")
    assert "(approximate preview)" in html and "PREVIEW, APPROXIMATE" in html
    for name in ("zinb-reach", "poisson"):
        csv = pd.read_csv(tmp_path / "rep" / "tables" / f"preview_{name}.csv")
        assert (csv["method"] == "approximate (Laplace)").all()


# ============================================================================ done when
@pytest.mark.slow
def test_correlated_costs_default_flags_and_wide_priors_do_not():
    """The issue's case: collinear costs with strong effects, 300 records, hurdle negbin on
    the same predictors in both parts. The default priors are flagged on collinear
    coefficients of both parts; wide priors (normal, sd 10, on the user's scale) leave no
    coefficient flagged."""
    df = correlated_costs()
    rhs = "cost1 + cost2 + cost3 + age + dist"
    kw = dict(counts="y ~ " + rhs, zeros="~ " + rhs, family="hurdle-negbin", draws=1000,
              warmup_steps=1000, chains=2, cores=1, seed=1, progressbar=False)
    wide = {p: {t: bz.priors.normal(mean=0, sd=10)
                for t in ("cost1", "cost2", "cost3", "age", "dist")} for p in ("counts", "zeros")}
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        default = bz.fit(df, **kw).prior_sensitivity()
        widened = bz.fit(df, priors=wide, **kw).prior_sensitivity()
    coef = default.index.str.contains("_coef\\[cost")
    for part in ("counts", "zeros"):
        rows = default[coef & (default["part"] == part)]
        assert (rows[S.READING] != "").any(), default
    wcoef = widened.index.str.contains("_coef\\[")
    assert (widened.loc[wcoef, S.READING] == "").all(), widened
