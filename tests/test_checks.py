"""Posterior predictive checks (bayeszi.answers.checks, bayeszi.plots.checkplots) on simulated data.

Sources of the check values, named beside each test:
- Zero-inflated Poisson and its zero-source probability p / (p + (1 - p) exp(-mu)):
  Lambert (1992), Technometrics 34:1-14.
- Randomized quantile residuals are exactly N(0, 1) under the true model: Dunn & Smyth
  (1996), Journal of Computational and Graphical Statistics 5:236-244; the normality test is
  scipy.stats.kstest against scipy.stats.norm.
- Posterior predictive tail probabilities of a correctly specified model are no more spread
  than uniform (from memory: Meng 1994, Annals of Statistics 22:1142-1160), so a central
  (0.05, 0.95) or (0.01, 0.99) band holds at least 90% or 98% of them.
- Reference pmfs: scipy.stats.poisson.
- The simultaneous ECDF band holds the whole ECDF of n uniform values with probability 0.95
  (by construction, Sailynoja, Buerkner & Vehtari 2022, Statistics and Computing 32:32);
  the share of simulated samples inside it is checked within 3 binomial sds (common
  practice).
- Replicated frequencies average to the expected frequencies: E over replicates of the
  number of records with count k is the sum over records of P(Y = k) at each draw (linearity
  of expectation), checked within 4 Monte Carlo standard errors.
- The Pearson statistic as a posterior predictive discrepancy, sum (y - E[y])^2 / Var[y]
  at each draw, observed against replicated: Gelman, Meng & Stern (1996), Statistica Sinica
  6:733-807. Its direct computation here takes E and Var from scipy.stats.poisson / nbinom
  moments composed into the zero-inflated (Lambert 1992) and hurdle (Mullahy 1986, Journal
  of Econometrics 33:341-365) laws; for replicated data E[(Y - E Y)^2 / Var Y] = 1 exactly,
  so the replicated statistic averages n records at every draw.
Fits are small (1,500 records, 2 chains x 400 draws) and shared through ``cached_fit``.
"""

from __future__ import annotations

import re

import numpy as np
import pandas as pd
import pytest
from matplotlib.figure import Figure
from scipy import special, stats
from simulate import fitted_from_user_draws, simulate

import bayeszi as bz
from bayeszi.answers import checks, residual_checks
from bayeszi.engine.draws import fitted_rows, linear_predictors
from bayeszi.families import get_family
from bayeszi.fitting.fitted import FittedModel

SMALL = dict(draws=400, warmup_steps=400, chains=2, cores=1, seed=3, progressbar=False)


# ------------------------------------------------------------------------- fits


def _zip_data() -> pd.DataFrame:
    return simulate("zip", n=1500, seed=11)[0]


@pytest.fixture(scope="module")
def zip_poisson(cached_fit):
    """ZIP data (zero share ~0.46) fitted with a Poisson: too few zeros predicted."""
    return cached_fit("checks-zip-poisson", lambda: bz.fit(
        _zip_data(), counts="y ~ x1 + x2", family="poisson", exposure="exposure", **SMALL))


@pytest.fixture(scope="module")
def zip_zip(cached_fit):
    """ZIP data fitted with the true ZIP model."""
    return cached_fit("checks-zip-zip", lambda: bz.fit(
        _zip_data(), counts="y ~ x1 + x2", zeros="~ w", family="zip", exposure="exposure",
        **SMALL))


@pytest.fixture(scope="module")
def zinb_poisson(cached_fit):
    """ZINB data (alpha 0.5) fitted with a Poisson: zeros and spread both missed."""
    return cached_fit("checks-zinb-poisson", lambda: bz.fit(
        simulate("zinb", n=1500, seed=12)[0], counts="y ~ x1 + x2", family="poisson",
        exposure="exposure", **SMALL))


def _site_data() -> tuple[pd.DataFrame, dict]:
    # 20 sites whose chance of an extra zero differs (logit sd 1.2), counts part shared
    return simulate("zip", n=1500, seed=13, n_sites=20, site_sd=(0.0, 1.2))


@pytest.fixture(scope="module")
def zip_sites(cached_fit):
    """ZIP data with site-level zero inflation, fitted without site effects."""
    return cached_fit("checks-zip-sites", lambda: bz.fit(
        _site_data()[0], counts="y ~ x1 + x2", zeros="~ w", family="zip",
        exposure="exposure", **SMALL))


@pytest.fixture(scope="module")
def hurdle_groups(cached_fit):
    """A small hurdle-Poisson fit with site effects (groups in both parts)."""
    df, _ = simulate("hurdle-poisson", n=400, seed=14, n_sites=8, site_sd=(0.3, 0.3))
    return cached_fit("checks-hurdle-groups", lambda: bz.fit(
        df, counts="y ~ x1 + x2", zeros="~ w", family="hurdle-poisson", exposure="exposure",
        groups="site", draws=200, warmup_steps=200, chains=2, cores=1, seed=3, progressbar=False))


# ------------------------------------------------------------------------- no fit needed


def test_default_kmax_is_the_99th_percentile_capped():
    # the rule documented in checks.default_kmax: ceil of the 99% quantile, in [1, 50]
    y = np.arange(101)                     # 99% quantile = 99
    assert checks.default_kmax(y) == 50    # capped
    assert checks.default_kmax(np.zeros(10, dtype=int)) == 1
    y = np.r_[np.zeros(990, dtype=int), np.full(10, 7)]
    assert checks.default_kmax(y) == int(np.ceil(np.quantile(y, 0.99)))


def test_tail_probability_counts_ties_half():
    # definition in checks.tail_probability: P(rep > obs) + P(rep = obs) / 2
    rep = np.array([1, 2, 2, 3])
    assert checks.tail_probability(rep, 2) == pytest.approx(0.25 + 0.5 * 0.5)
    assert checks.tail_probability(rep, 5) == 0.0
    assert checks.tail_probability(rep, 0) == 1.0


def test_model_label_names_both_parts():
    assert "zeros part models P(extra zero)" in checks.model_label("zinb")
    assert "zeros part models P(Y = 0)" in checks.model_label("hurdle-negbin")
    assert "no zeros part" in checks.model_label("poisson")


# ------------------------------------------------------------------------- zero share


def test_poisson_fit_to_zip_data_misses_the_zeros(zip_poisson):
    table = zip_poisson.zero_check()
    overall = table.iloc[0]
    assert overall["group"] == "all records"
    assert overall["tail prob"] < 0.01
    assert overall["verdict"] == "more zeros than the model predicts"
    assert overall["observed share"] > overall["replicated 95%"]


def test_zip_fit_reproduces_the_zero_share(zip_zip):
    overall = zip_zip.zero_check().iloc[0]
    # correct model: tail probability is not extreme (Meng 1994, see module docstring)
    assert 0.05 < overall["tail prob"] < 0.95
    # expected share is the posterior mean of the average P(Y = 0): recompute it
    fam = get_family("zip")
    lp = linear_predictors(zip_zip, fitted_rows(zip_zip))
    p0 = fam.prob_zero(lp.counts, lp.zeros, lp.log_alpha).mean()
    assert overall["expected share"] == pytest.approx(p0, rel=1e-12)


def test_zero_check_per_site_points_at_the_zero_heavy_sites(zip_sites):
    df, truth = _site_data()
    # "site" is not used by the model, so its labels come as a Series of the fitted frame
    table = zip_sites.zero_check(by=df["site"])
    sites = table[table["group"] == "site"].set_index("level")
    assert len(sites) == 20
    # per-site observed zeros add up to the overall count
    assert sites["observed zeros"].sum() == table.iloc[0]["observed zeros"]
    assert sites["records"].sum() == len(df)
    # the model has no site effects: sites with a larger true extra-zero effect show more
    # zeros than it predicts. Truth: simulate()'s site_zeros, indexed by site number.
    effect = pd.Series(truth["site_zeros"], index=[f"s{i:02d}" for i in range(20)])
    excess = sites["observed share"] - sites["expected share"]
    rho = stats.spearmanr(excess, effect[excess.index]).statistic
    assert rho > 0.7
    more = sites.index[sites["verdict"].str.startswith("more")]
    fewer = sites.index[sites["verdict"].str.startswith("fewer")]
    assert len(more) >= 1 and len(fewer) >= 1
    assert effect[more].mean() > effect[fewer].mean()
    # rows of a group are sorted from most zero-heavy (smallest tail probability)
    assert np.all(np.diff(sites["tail prob"].to_numpy()) >= 0)


def test_zero_check_uses_the_fit_groups_by_default(hurdle_groups):
    table = hurdle_groups.zero_check()
    assert set(table["group"]) == {"all records", "site"}
    assert (table["group"] == "site").sum() == 8
    only_overall = hurdle_groups.zero_check(by=[])
    assert len(only_overall) == 1
    # tables stack with pandas (their attrs hold no arrays that pandas cannot compare)
    assert len(pd.concat([table, only_overall])) == len(table) + 1


# ------------------------------------------------------------------------- frequencies


def test_rootogram_shows_the_zero_deficit_of_a_poisson_fit(zip_poisson):
    tab = zip_poisson.count_frequencies()
    zero = tab.loc["0"]
    # the Poisson expects far fewer zeros than observed: the zero bar hangs below the line
    assert zero["observed"] > zero["95%"]
    assert zero["hanging bottom"] < 0
    fig = zip_poisson.rootogram()
    assert isinstance(fig, Figure)
    bar0 = fig.axes[0].patches[0]
    assert bar0.get_y() == pytest.approx(zero["hanging bottom"])
    assert bar0.get_y() < 0


def test_expected_frequencies_sum_to_n_and_tail_matches_the_survival_function(zip_zip):
    n = zip_zip.design.n
    freq = checks.expected_frequency_draws(zip_zip)
    K = freq.shape[1] - 2
    assert freq.columns[-1] == f"{K + 1}+"
    # every draw's expected frequencies over 0..K plus the tail bin add up to n
    np.testing.assert_allclose(freq.sum(axis=1), n, rtol=1e-12)
    # the tail bin (1 - P(Y <= K) per record) equals the closed-form survival function
    fam = get_family("zip")
    lp = linear_predictors(zip_zip, fitted_rows(zip_zip))
    tail = fam.sf(K + 1, lp.counts, lp.zeros, lp.log_alpha).sum(axis=1)
    np.testing.assert_allclose(freq.iloc[:, -1], tail, rtol=1e-9, atol=1e-9)
    table = zip_zip.count_frequencies()
    assert table["observed"].sum() == n
    assert table["expected"].sum() == pytest.approx(n, rel=1e-12)


def test_expected_frequencies_match_scipy_poisson(zip_zip):
    # reference: scipy.stats.poisson.pmf composed into the ZIP (Lambert 1992), per draw,
    # with mu and p rebuilt from the user-scale coefficients and the data
    df = _zip_data()
    post = zip_zip.idata.posterior
    b = post["counts_coef"].values.reshape(-1, 3)
    g = post["zeros_coef"].values.reshape(-1, 2)
    X = np.column_stack([np.ones(len(df)), df["x1"], df["x2"]])
    Z = np.column_stack([np.ones(len(df)), df["w"]])
    take = np.arange(0, b.shape[0], 40)            # 20 draws keep scipy quick
    mu = np.exp(b[take] @ X.T + np.log(df["exposure"].to_numpy()))
    p = special.expit(g[take] @ Z.T)
    kmax = 6
    ref = np.stack([((1 - p) * stats.poisson.pmf(k, mu) + p * (k == 0)).sum(axis=1)
                    for k in range(kmax + 1)], axis=1)
    full = checks.expected_frequency_draws(zip_zip, kmax=kmax).to_numpy()
    np.testing.assert_allclose(full[take, : kmax + 1], ref, rtol=1e-9)


def test_replicated_frequencies_average_to_the_expected_ones(zip_zip):
    n = zip_zip.design.n
    reps = checks.replicated_frequency_draws(zip_zip, kmax=6, seed=4).to_numpy()
    expected = checks.expected_frequency_draws(zip_zip, kmax=6).to_numpy()
    assert reps.shape == expected.shape
    assert (reps.sum(axis=1) == n).all()
    # linearity of expectation: the replicated mean is the expected mean, within 4 Monte
    # Carlo standard errors (replicate noise is independent across draws)
    se = reps.std(axis=0, ddof=1) / np.sqrt(reps.shape[0])
    assert (np.abs(reps.mean(axis=0) - expected.mean(axis=0)) < 4 * se + 1e-9).all()
    # the same seed gives the same data sets, another seed others
    again = checks.replicated_frequency_draws(zip_zip, kmax=6, seed=4)
    np.testing.assert_array_equal(reps, again.to_numpy())
    other = checks.replicated_frequency_draws(zip_zip, kmax=6, seed=5)
    assert not np.array_equal(reps, other.to_numpy())
    # in small chunks the rows still add up to the records
    small = checks.replicated_frequency_draws(zip_zip, kmax=6, seed=4, max_floats=20_000)
    assert (small.sum(axis=1) == n).all()


def test_rootogram_ticks_are_the_replicated_intervals(zip_zip, zip_poisson):
    table = zip_zip.count_frequencies(seed=2)
    # the true model: observed frequencies lie inside the 90% replicated interval for most
    # bins (each inside with chance about 0.9 at least; 10 bins outside would be rare)
    inside = (table["observed"] >= table["replicated 5%"]) & \
             (table["observed"] <= table["replicated 95%"])
    assert inside.mean() >= 0.7
    assert (table["replicated 5%"] <= table["expected"]).all()
    ax = zip_zip.rootogram(seed=2).axes[0]
    ticks = [c for c in ax.collections if "replicated data sets" in str(c.get_label())]
    assert len(ticks) == 1
    segs = ticks[0].get_segments()
    top = np.sqrt(table["expected"].to_numpy())
    np.testing.assert_allclose([s[0, 1] for s in segs],
                               top - np.sqrt(table["replicated 95%"].to_numpy()), rtol=1e-12)
    np.testing.assert_allclose([s[1, 1] for s in segs],
                               top - np.sqrt(table["replicated 5%"].to_numpy()), rtol=1e-12)
    # the expected numbers are a step outline, no line with markers
    assert not [ln for ln in ax.lines if ln.get_marker() not in ("None", "", None, "_")]
    # the Poisson fit of ZIP data: the zero bar ends far below its tick
    poor = zip_poisson.count_frequencies(seed=2).loc["0"]
    assert poor["observed"] > poor["replicated 95%"]


def test_chunking_does_not_change_expected_frequencies(zip_zip):
    a = checks.expected_frequency_draws(zip_zip, kmax=5, draws=100)
    b = checks.expected_frequency_draws(zip_zip, kmax=5, draws=100, max_floats=5_000)
    np.testing.assert_allclose(a.to_numpy(), b.to_numpy(), rtol=1e-12)
    assert len(a) == 100


# ------------------------------------------------------------------------- spread and maximum


def test_poisson_fit_to_zinb_data_misses_spread_and_maximum(zinb_poisson):
    disp = zinb_poisson.dispersion_check()
    assert disp.loc["variance / mean", "tail prob"] < 0.01
    assert disp.loc["variance / mean", "verdict"] == "more spread than the model predicts"
    mx = zinb_poisson.max_count_check()
    assert mx.loc["maximum", "tail prob"] < 0.01
    assert mx.loc["maximum", "observed"] == zinb_poisson.design.y.max()


def test_checks_from_one_set_of_replicates_equal_the_separate_checks(zip_zip):
    """The report draws replicates once and checks several statistics on them: the tables
    equal those of dispersion_check and max_count_check with the same seed."""
    reps = checks.replicated_statistics(zip_zip, seed=7)
    pd.testing.assert_frame_equal(
        checks.statistics_check(reps, ["mean", "variance", "variance / mean"], 0.8),
        zip_zip.dispersion_check(interval=0.8, seed=7))
    pd.testing.assert_frame_equal(checks.statistics_check(reps, ["maximum"]),
                                  zip_zip.max_count_check(seed=7))


def test_correct_model_reproduces_spread(zip_zip):
    disp = zip_zip.dispersion_check(seed=5)
    # correct model: not extreme (Meng 1994, see module docstring)
    assert 0.01 < disp.loc["variance / mean", "tail prob"] < 0.99
    reps = checks.replicated_statistics(zip_zip, draws=200, seed=5)
    assert len(reps) == 200
    obs = reps.attrs["observed"]
    y = zip_zip.design.y
    assert obs["variance / mean"] == pytest.approx(y.var(ddof=1) / y.mean())
    assert obs["maximum"] == y.max()
    # correct model: the maximum is not extreme either (same criterion as the spread)
    assert 0.01 < zip_zip.max_count_check(seed=5).loc["maximum", "tail prob"] < 0.99


def test_replicated_data_are_seeded(zip_zip):
    a = checks.replicated_statistics(zip_zip, draws=50, seed=9)
    b = checks.replicated_statistics(zip_zip, draws=50, seed=9)
    c = checks.replicated_statistics(zip_zip, draws=50, seed=10)
    pd.testing.assert_frame_equal(a, b)
    assert not a.equals(c)


# ------------------------------------------------------------------------- residuals


@pytest.mark.parametrize("method", ["posterior", "loo"])
def test_residuals_of_the_true_model_are_standard_normal(zip_zip, method):
    res = zip_zip.residuals(method=method, seed=1)
    assert len(res) == zip_zip.design.n
    # Dunn & Smyth (1996): N(0, 1) under the true model; scipy.stats.kstest vs norm
    assert stats.kstest(res["residual"], "norm").pvalue > 0.01
    assert np.all((res["PIT low"] <= res["PIT"]) & (res["PIT"] <= res["PIT high"]))
    if method == "loo":
        assert np.isfinite(res["pareto k"]).all()


def test_residuals_of_a_poisson_fit_to_zinb_data_are_not_normal(zinb_poisson):
    res = zinb_poisson.residuals(seed=1)
    assert stats.kstest(res["residual"], "norm").pvalue < 0.01


def test_residual_pit_bounds_are_the_posterior_cdf(zip_zip):
    # PIT high = posterior mean of P(Y <= y), checked with scipy's Poisson cdf (Lambert 1992)
    res = zip_zip.residuals(seed=1)
    df = _zip_data()
    post = zip_zip.idata.posterior
    b = post["counts_coef"].values.reshape(-1, 3)
    g = post["zeros_coef"].values.reshape(-1, 2)
    rows = np.arange(0, len(df), 50)
    X = np.column_stack([np.ones(len(df)), df["x1"], df["x2"]])[rows]
    Z = np.column_stack([np.ones(len(df)), df["w"]])[rows]
    mu = np.exp(b @ X.T + np.log(df["exposure"].to_numpy()[rows]))
    p = special.expit(g @ Z.T)
    y = df["y"].to_numpy()[rows]
    cdf = (p + (1 - p) * stats.poisson.cdf(y, mu)).mean(axis=0)
    np.testing.assert_allclose(res["PIT high"].to_numpy()[rows], cdf, rtol=1e-9, atol=1e-12)


@pytest.mark.parametrize("n", [30, 400])
def test_ecdf_band_holds_uniform_samples_with_its_level(n):
    # 400 simulated uniform samples of n values: the whole ECDF stays inside the band for
    # about 95% of them (3 binomial sds = 0.033); a pointwise band would hold far fewer
    rng = np.random.default_rng(8)
    inside = [not residual_checks.pit_ecdf(rng.uniform(size=n))["outside"].any()
              for _ in range(400)]
    assert abs(np.mean(inside) - 0.95) < 3 * np.sqrt(0.95 * 0.05 / 400)
    band = residual_checks.uniform_ecdf_band(n)
    assert len(band) == min(n, 100) - 1
    # the same n always gives the same band (fixed seed)
    pd.testing.assert_frame_equal(band, residual_checks.uniform_ecdf_band(n))


def test_pit_ecdf_flags_values_far_from_uniform():
    u = np.random.default_rng(9).uniform(size=500) ** 1.5   # too many small PIT values
    tab = residual_checks.pit_ecdf(u)
    assert tab["outside"].any()
    assert tab.loc[tab["outside"], "ECDF - u"].gt(0).all()


def test_binned_residuals_equal_a_hand_computation():
    x = pd.Series([5.0, 1.0, 4.0, 2.0, 6.0, 3.0], name="depth")
    r = np.array([0.5, -1.0, 0.0, 1.0, 1.5, 2.0])
    t = residual_checks.binned_residuals(r, x, bins=3)
    # by hand: sorted by depth the bins hold records with depth {1, 2}, {3, 4}, {5, 6}, i.e.
    # residuals (-1, 1), (2, 0), (0.5, 1.5); for a pair (a, b) sd = |a - b| / sqrt(2) and
    # se = sd / sqrt(2) = |a - b| / 2
    assert t["records"].tolist() == [2, 2, 2]
    np.testing.assert_allclose(t["mean residual"], [0.0, 1.0, 1.0])
    np.testing.assert_allclose(t["standard error"], [1.0, 1.0, 0.5])
    np.testing.assert_allclose(t["mean - 2 se"], [-2.0, -1.0, 0.0])
    np.testing.assert_allclose(t["mean + 2 se"], [2.0, 3.0, 2.0])
    np.testing.assert_allclose(t["predictor mean"], [1.5, 3.5, 5.5])
    assert t.attrs["kind"] == "equal-count bins"
    # a text column: one bin per level; a missing value is left out and counted
    g = pd.Series(["b", "a", "b", None, "a", "a"], name="substrate")
    t = residual_checks.binned_residuals(r, g)
    assert t["bin"].tolist() == ["a", "b"] and t.attrs["left out"] == 1
    np.testing.assert_allclose(t["mean residual"], [(-1.0 + 1.5 + 2.0) / 3, (0.5 + 0.0) / 2])
    # few distinct numbers: one bin per value
    t = residual_checks.binned_residuals(r, pd.Series([0, 1, 0, 1, 0, 1], name="barrier"))
    assert t["bin"].tolist() == ["0", "1"] and t.attrs["kind"] == "values"
    np.testing.assert_allclose(t["mean residual"], [(0.5 + 0.0 + 1.5) / 3, (-1 + 1 + 2) / 3])


def test_residual_statistics_match_scipy(zip_zip):
    res = zip_zip.residuals(seed=1)
    got = residual_checks.residual_statistics(res)
    r = res["residual"].to_numpy()
    ks = stats.kstest(r, "norm")     # the same distance: u = Phi(residual)
    assert got["largest ECDF gap (KS distance)"] == pytest.approx(ks.statistic, abs=1e-9)
    assert got["p-value of that gap (KS test)"] == pytest.approx(ks.pvalue, rel=1e-6)
    assert got["sd of residuals"] == pytest.approx(r.std(ddof=1), rel=1e-12)
    assert got["share beyond +-2"] == pytest.approx(np.mean(np.abs(r) > 2))
    # the true model: the PIT curve stays inside its 95% band
    assert got["share of ECDF outside the 95% band"] == 0.0


def test_residual_figure_bins_by_the_chosen_column_and_carries_no_test(zip_sites):
    df = _site_data()[0]
    fig = zip_sites.residual_plots(draws=200, against="x1", bins=5)
    assert len(fig.axes) == 2
    assert "Dunn & Smyth" in fig.get_suptitle()
    res = zip_sites.residuals(draws=200)
    want = residual_checks.binned_residuals(res["residual"].to_numpy(),
                                            df.loc[res.index, "x1"], bins=5)
    right = fig.axes[1]
    means = [ln for ln in right.lines if ln.get_marker() == "s"][0].get_ydata()
    np.testing.assert_allclose(means, want["mean residual"], rtol=1e-12)
    assert right.get_xlabel() == "x1"
    texts = [t.get_text() for t in fig.findobj(lambda o: hasattr(o, "get_text"))]
    texts += [fig.get_suptitle()] + [a.get_title() for a in fig.axes]
    pattern = re.compile(r"p\s*[=<>]|p-value|Kolmogorov|\bKS\b|statistic|Q-?Q|quantile-quantile",
                         re.I)
    assert not [t for t in texts if pattern.search(t)], texts
    default = zip_sites.residual_plots(draws=200)
    assert default.axes[1].get_xlabel() == residual_checks.DEFAULT_PREDICTOR


def test_residuals_against_a_wrong_column_is_refused(zip_zip):
    with pytest.raises(bz.BayesziError, match=r"against='depht' is not a column of the data; "
                                              r"columns available: \[.*'x1'"):
        zip_zip.residual_plots(against="depht")
    res = zip_zip.residuals(seed=1)
    with pytest.raises(bz.BayesziError, match=r"one value per fitted record"):
        residual_checks.residual_predictor(res, np.zeros(3))


# ------------------------------------------------------------------------- zero sources


def test_zero_sources_equal_lambert_closed_form(zip_zip):
    # Lambert (1992): P(extra zero | Y = 0) = p / (p + (1 - p) exp(-mu)), averaged over draws
    df = _zip_data()
    post = zip_zip.idata.posterior
    b = post["counts_coef"].values.reshape(-1, 3)
    g = post["zeros_coef"].values.reshape(-1, 2)
    zero = df["y"].to_numpy() == 0
    X = np.column_stack([np.ones(len(df)), df["x1"], df["x2"]])[zero]
    Z = np.column_stack([np.ones(len(df)), df["w"]])[zero]
    mu = np.exp(b @ X.T + np.log(df["exposure"].to_numpy()[zero]))
    p = special.expit(g @ Z.T)
    lambert = (p / (p + (1 - p) * np.exp(-mu))).mean(axis=0)
    table = zip_zip.zero_sources()
    assert list(table.index) == list(df.index[zero])
    np.testing.assert_allclose(table["P(zero from zeros part)"], lambert, rtol=1e-10)
    assert table["note"].iloc[0].startswith("zero-inflated")


def test_zero_sources_by_group_add_up(zip_sites):
    df, _ = _site_data()
    per_row = zip_sites.zero_sources()
    by_site = zip_sites.zero_sources(by=df["site"])
    assert set(by_site["group"]) == {"site"}
    assert by_site["observed zeros"].sum() == int((df["y"] == 0).sum())
    assert by_site["expected extra zeros"].sum() == pytest.approx(
        per_row["P(zero from zeros part)"].sum(), rel=1e-10)
    assert (by_site["5%"] <= by_site["expected extra zeros"]).all()
    assert ((by_site["share extra"] > 0) & (by_site["share extra"] <= 1)).all()


def test_both_zero_source_tables_in_one_pass_equal_the_two_calls(zip_sites):
    """zero_source_tables (what the report uses) gives exactly the per-zero table of
    zero_sources() and the per-level table of zero_sources(by=...) (same draws, one pass)."""
    site = _site_data()[0]["site"]
    per_zero, per_site = checks.zero_source_tables(zip_sites, by=site, interval=0.8)
    pd.testing.assert_frame_equal(per_zero, zip_sites.zero_sources(interval=0.8))
    pd.testing.assert_frame_equal(per_site, zip_sites.zero_sources(by=site, interval=0.8))
    assert checks.zero_source_tables(zip_sites)[1] is None


def test_zero_sources_say_where_zeros_come_from_without_inflation(hurdle_groups, zip_poisson):
    hurdle = hurdle_groups.zero_sources()
    assert (hurdle["P(zero from zeros part)"] == 1.0).all()
    assert hurdle["note"].iloc[0].startswith("hurdle: every zero comes from the zeros part")
    assert "site" in hurdle.columns
    by_site = hurdle_groups.zero_sources(by="site")
    np.testing.assert_array_equal(by_site["expected extra zeros"], by_site["observed zeros"])
    plain = zip_poisson.zero_sources()
    assert (plain["P(zero from zeros part)"] == 0.0).all()
    assert plain.attrs["message"].startswith("no zeros part")


# ------------------------------------------------------------------------- figures


def test_figures_are_built_and_labelled(zip_sites, hurdle_groups):
    fig = zip_sites.rootogram()
    text = fig.get_suptitle()
    assert "zeros part models P(extra zero)" in text
    assert "sqrt" in fig.axes[0].get_ylabel()
    fig = zip_sites.zero_check_plot(by=_site_data()[0]["site"], draws=200)
    assert isinstance(fig, Figure) and len(fig.axes) == 2
    fig = hurdle_groups.zero_check_plot()
    assert "P(Y = 0)" in fig.get_suptitle()
    fig = zip_sites.replicated_statistics_plot(draws=200)
    assert len(fig.axes) == 3


# ------------------------------------------------------------------------- bad input


def test_bad_settings_get_clear_errors(zip_zip):
    with pytest.raises(bz.BayesziError, match="by='nope'.*columns available"):
        zip_zip.zero_check(by="nope")
    with pytest.raises(bz.BayesziError, match="too many to check"):
        zip_zip.zero_check(by="x1")            # continuous: 1,500 distinct values
    with pytest.raises(bz.BayesziError, match="one label per fitted record"):
        zip_zip.zero_check(by=np.zeros(3))
    with pytest.raises(bz.BayesziError, match="does not cover"):
        zip_zip.zero_check(by=pd.Series(["a", "b"], name="g"))
    with pytest.raises(bz.BayesziError, match="kmax"):
        zip_zip.count_frequencies(kmax=-1)
    with pytest.raises(bz.BayesziError, match="interval must lie strictly between 0 and 1"):
        zip_zip.count_frequencies(interval=1.5)
    with pytest.raises(bz.BayesziError, match="draws must be a whole number >= 1 or None"):
        zip_zip.dispersion_check(draws=0)
    with pytest.raises(bz.BayesziError, match="draws=801 but the fit holds 800"):
        zip_zip.zero_check(draws=801)        # more than the fit holds: refused, not "all"
    with pytest.raises(bz.BayesziError, match="method"):
        zip_zip.residuals(method="pearson")
    with pytest.raises(bz.BayesziError, match="seed must be a whole number >= 0"):
        zip_zip.max_count_check(seed="abc")
    with pytest.raises(bz.BayesziError, match="flag"):
        checks.zero_check(zip_zip, flag=0.7)


# ------------------------------------------------------------------------- Pearson statistic

FAMILIES = ["poisson", "negbin", "zip", "zinb", "hurdle-poisson", "hurdle-negbin"]


def _hand_fit(family: str, n: int = 80, S: int = 500, seed: int = 21) -> tuple[FittedModel, dict]:
    """A fit whose posterior is written by hand (no sampling), as in tests/test_predict.py,
    without groups; returns the model and the per-draw user-scale parameters."""
    df = simulate(family, n=n, seed=seed)[0]
    fam = get_family(family)
    spec = bz.make_spec(counts="y ~ x1 + x2", zeros="~ w" if fam.zeros_kind else None,
                        family=family, exposure="exposure")
    rng = np.random.default_rng(seed)
    par = {"b": rng.normal(0.0, 0.2, (S, 3)) + np.array([0.3, 0.5, -0.4])}
    if fam.zeros_kind:
        par["g"] = rng.normal(0.0, 0.2, (S, 2)) + np.array([-0.6, 1.1])
    if fam.has_dispersion:
        par["alpha"] = rng.uniform(0.2, 1.0, S)
    m = fitted_from_user_draws(df, spec, par["b"], par.get("g"), par.get("alpha"))
    return m, par


def _hand_moments(family: str, m: FittedModel, par: dict) -> tuple[np.ndarray, np.ndarray]:
    """E[Y] and Var[Y] per (draw, record) from scipy.stats moments and the raw columns."""
    df = m.data
    X = np.column_stack([np.ones(len(df)), df["x1"], df["x2"]]).astype(float)
    mu = np.exp(par["b"] @ X.T + np.log(df["exposure"].to_numpy(float))[None, :])
    if "alpha" in par:  # NB with variance mu + alpha mu^2
        a = par["alpha"][:, None]
        law = stats.nbinom(1.0 / a, 1.0 / (1.0 + a * mu))
    else:
        law = stats.poisson(mu)
    m1, v1 = law.mean(), law.var()
    kind = get_family(family).zeros_kind
    if kind is None:
        return m1, v1
    p = special.expit(par["g"] @ np.column_stack([np.ones(len(df)), df["w"]]).T)
    scale = (1 - p) if kind == "inflation" else (1 - p) / (1 - law.pmf(0))
    mean, second = scale * m1, scale * (v1 + m1**2)
    return mean, second - mean**2


@pytest.mark.parametrize("family", FAMILIES)
def test_pearson_statistic_equals_a_direct_computation(family):
    m, par = _hand_fit(family)
    mean, var = _hand_moments(family, m, par)
    y = m.design.y
    t = checks.pearson_draws(m, seed=4)
    np.testing.assert_allclose(t["observed"], ((y - mean) ** 2 / var).sum(axis=1), rtol=1e-9)
    # each replicated record contributes 1 in expectation at every draw, so the replicated
    # statistic averages n; 4 Monte Carlo standard errors from the draws themselves
    rep = t["replicated"].to_numpy()
    assert abs(rep.mean() - y.size) < 4 * rep.std(ddof=1) / np.sqrt(rep.size)
    n_coef = 3 + (2 if get_family(family).zeros_kind else 0)
    dof = y.size - n_coef - int(get_family(family).has_dispersion)
    assert t.attrs["residual df"] == checks.residual_df(m) == dof
    table = m.pearson_check(interval=0.8, seed=4)
    obs = t["observed"].to_numpy()
    assert table.loc["Pearson statistic", "observed mean"] == pytest.approx(obs.mean())
    assert table.loc["per residual df", "observed 90%"] == pytest.approx(
        np.quantile(obs, 0.9) / dof)
    tail = np.mean(rep > obs) + 0.5 * np.mean(rep == obs)
    np.testing.assert_allclose(table["tail prob"], tail, rtol=1e-12)


def test_pearson_draws_do_not_depend_on_the_chunks():
    m, _ = _hand_fit("zinb")
    whole = checks.pearson_draws(m, draws=100, seed=2)
    pieces = checks.pearson_draws(m, draws=100, seed=2, max_floats=100 * 10 * 7)
    np.testing.assert_allclose(pieces["observed"], whole["observed"], rtol=1e-12)
    pd.testing.assert_frame_equal(whole, checks.pearson_draws(m, draws=100, seed=2))
    assert len(whole) == 100


@pytest.mark.parametrize("family", ["zinb", "hurdle-poisson"])
def test_one_set_of_replicates_gives_every_check_its_own_table(family):
    """replicated_data draws the data sets once; each check given them returns exactly the
    table it returns alone with the same seed and draws."""
    m, _ = _hand_fit(family, n=400, S=200)
    sites = np.array([f"s{i % 7}" for i in range(m.design.n)])
    reps = checks.replicated_data(m, by=sites, draws=150, seed=5)
    same = dict(draws=150, seed=5)
    pd.testing.assert_frame_equal(checks.zero_check(m, by=sites, interval=0.8, **same),
                                  checks.zero_check(m, by=sites, interval=0.8, replicates=reps))
    for fn in (checks.dispersion_check, checks.max_count_check, checks.pearson_check,
               checks.count_frequencies):
        alone, shared = fn(m, interval=0.8, **same), fn(m, interval=0.8, replicates=reps)
        pd.testing.assert_frame_equal(alone, shared, obj=fn.__name__)
        assert alone.attrs == shared.attrs
    stats_alone = checks.replicated_statistics(m, **same)
    pd.testing.assert_frame_equal(stats_alone, checks.replicated_statistics(m, replicates=reps))
    # one pass, one set of data sets: the zero count of each data set is its frequency of 0
    freq = checks.replicated_frequency_draws(m, replicates=reps).to_numpy()
    np.testing.assert_array_equal(freq[:, 0], reps.zeros)
    np.testing.assert_array_equal(freq.sum(axis=1), m.design.n)
    np.testing.assert_array_equal(reps.zeros_by["by"].sum(axis=1), reps.zeros)
    # in chunks of 9 rows the streams still agree, and another seed draws other data sets
    small = dict(draws=150, seed=5, max_floats=150 * 10 * 9)
    chunked = checks.replicated_data(m, by=sites, **small)
    pd.testing.assert_frame_equal(checks.pearson_draws(m, **small),
                                  checks.pearson_draws(m, replicates=chunked))
    pd.testing.assert_frame_equal(checks.replicated_frequency_draws(m, **small),
                                  checks.replicated_frequency_draws(m, replicates=chunked))
    other = checks.replicated_data(m, by=sites, draws=150, seed=6)
    assert not np.array_equal(other.zeros, reps.zeros)


def test_replicates_of_another_fit_or_setting_are_refused():
    m, _ = _hand_fit("zip", n=60, S=100)
    other, _ = _hand_fit("zinb", n=60, S=100)
    reps = checks.replicated_data(m, draws=50, seed=1)
    with pytest.raises(bz.BayesziError, match="drawn from a zip fit"):
        checks.zero_check(other, replicates=reps)
    with pytest.raises(bz.BayesziError, match="drawn with draws=50"):
        checks.pearson_check(m, draws=80, replicates=reps)
    with pytest.raises(bz.BayesziError, match="no zero counts per level of 'by'"):
        checks.zero_check(m, by=np.repeat(["a", "b"], 30), replicates=reps)
    with pytest.raises(bz.BayesziError, match="drawn with kmax="):
        checks.count_frequencies(m, kmax=int(reps.kmax) + 1, replicates=reps)
    no_freq = checks._replicate(m, 50, 1)
    with pytest.raises(bz.BayesziError, match="hold no frequencies"):
        checks.replicated_frequency_draws(m, replicates=no_freq)


@pytest.fixture(scope="module")
def negbin_pair(cached_fit):
    """Negative binomial data (alpha 0.5), 300 records, fitted by a Poisson and a negbin."""
    df = simulate("negbin", n=300, seed=16)[0]
    small = dict(draws=300, warmup_steps=300, chains=2, cores=1, seed=3, progressbar=False)
    return {fam: cached_fit(f"checks-negbin-{fam}", lambda fam=fam: bz.fit(
        df, counts="y ~ x1 + x2", family=fam, exposure="exposure", **small))
        for fam in ("poisson", "negbin")}


def test_pearson_check_flags_the_poisson_fit_of_overdispersed_counts(negbin_pair,
                                                                     zinb_poisson):
    for m in (negbin_pair["poisson"], zinb_poisson):
        table = m.pearson_check()
        assert table.loc["Pearson statistic", "tail prob"] < 0.01
        assert table.loc["per residual df", "verdict"] == "more spread than the model predicts"
        # the classical reading: far above 1 (alpha = 0.5 and means of a few counts)
        assert table.loc["per residual df", "observed 5%"] > 1.5
    # the negative binomial fit of the same data: a correct model, not extreme (Meng 1994)
    table = negbin_pair["negbin"].pearson_check()
    assert 0.01 < table.loc["Pearson statistic", "tail prob"] < 0.99
    assert table.loc["per residual df", "verdict"] == "in line with the model"


# ------------------------------------------------------------------------- negative binomial


@pytest.fixture(scope="module")
def synthetic_zinb():
    """The benchmark's ZINB with reach effects and a synthetic posterior (no sampling)."""
    import os
    import sys

    sys.path.insert(0, os.path.join(os.path.dirname(__file__), os.pardir, "benchmarks"))
    from bench_checks import synthetic_fit

    return synthetic_fit(rows=600, draws=200, chains=2, seed=3)


def test_zinb_zero_sources_and_frequencies_match_scipy(synthetic_zinb):
    m = synthetic_zinb
    lp = linear_predictors(m, fitted_rows(m))
    mu, p = np.exp(lp.counts), special.expit(lp.zeros)
    alpha = np.exp(lp.log_alpha)
    # scipy.stats.nbinom with n = 1/alpha, prob = 1/(1 + alpha mu): variance mu + alpha mu^2
    n_nb, prob = 1 / alpha, 1 / (1 + alpha * mu)
    f0 = stats.nbinom.pmf(0, n_nb, prob)
    zero = m.design.y == 0
    # Lambert's zero-source formula with the NB zero probability in place of exp(-mu)
    ref = (p / (p + (1 - p) * f0))[:, zero].mean(axis=0)
    np.testing.assert_allclose(m.zero_sources()["P(zero from zeros part)"], ref, rtol=1e-9)
    freq = checks.expected_frequency_draws(m, kmax=5).to_numpy()
    for k in range(6):
        want = ((1 - p) * stats.nbinom.pmf(k, n_nb, prob) + p * (k == 0)).sum(axis=1)
        np.testing.assert_allclose(freq[:, k], want, rtol=1e-9)
    np.testing.assert_allclose(freq.sum(axis=1), m.design.n, rtol=1e-12)
    # by-reach zero check uses the fit's groups
    table = m.zero_check(draws=50)
    assert (table["group"] == "reach").sum() == len(m.design.groups[0].levels)


def test_records_sharing_inputs_are_pooled_exactly(monkeypatch):
    import os
    import sys

    sys.path.insert(0, os.path.join(os.path.dirname(__file__), os.pardir, "benchmarks"))
    from bench_checks import synthetic_fit

    m = synthetic_fit(rows=4000, draws=30, chains=2, seed=4, layout="discrete")
    pooled, weight = checks.distinct_inputs(fitted_rows(m))
    # at most 30 reaches x 3 substrates x 4 seasons x 4 trap-night values (bench_data.py;
    # the barrier is a property of the reach)
    assert pooled.n <= 30 * 3 * 4 * 4 and weight.sum() == m.design.n
    fast = checks.expected_frequency_draws(m, kmax=6).to_numpy()
    monkeypatch.setattr(checks, "distinct_inputs",
                        lambda rows: (rows, np.ones(rows.n)))
    slow = checks.expected_frequency_draws(m, kmax=6).to_numpy()
    np.testing.assert_allclose(fast, slow, rtol=1e-11)


def test_benchmark_script_runs_small(capsys):
    import os
    import sys

    sys.path.insert(0, os.path.join(os.path.dirname(__file__), os.pardir, "benchmarks"))
    from bench_checks import main

    main(["--rows", "300", "--draws", "100", "--repeat", "1", "--only", "frequencies"])
    out = capsys.readouterr().out
    assert "expected frequencies" in out and "peak MB" in out


# ------------------------------------------------------------------------- heavier


@pytest.mark.slow
def test_grouped_zip_fit_passes_its_own_checks(cached_fit):
    df, _ = simulate("zip", n=1500, seed=15, n_sites=20, site_sd=(0.3, 0.8))
    m = cached_fit("checks-zip-groups", lambda: bz.fit(
        df, counts="y ~ x1 + x2", zeros="~ w", family="zip", exposure="exposure",
        groups="site", **SMALL))
    table = m.zero_check()
    assert 0.05 < table.iloc[0]["tail prob"] < 0.95
    sites = table[table["group"] == "site"]
    assert len(sites) == 20
    # correct model: each site's tail probability is outside (0.01, 0.99) with chance at most
    # 0.02 (Meng 1994), so three or more such sites out of 20 would happen < 1% of the time
    extreme = ((sites["tail prob"] < 0.01) | (sites["tail prob"] > 0.99)).sum()
    assert extreme <= 2
    res = m.residuals(seed=2)
    assert stats.kstest(res["residual"], "norm").pvalue > 0.01
    by_site = m.zero_sources(by="site")
    assert len(by_site) == 20
