"""Partially pooled group effects: bad input, model structure, recovery, shrinkage, coverage.

Sources of the check values:
- Simulated truth (NumPy only, :func:`reach_survey` below): known group sds, effects and
  expected counts; tolerances come from the posterior (95% intervals) or from binomial error
  of an interval coverage count (scipy.stats.binom), as stated beside each check.
- PyMC's own LKJCorr distribution (n = 2) as the reference density of the correlation prior.
- Pooling factor = posterior variance of an effect over the mean population variance: in the
  normal model this is the factor by which a group's estimate is shrunk toward zero (textbook
  normal-normal result, common practice, no source needed).
"""

from __future__ import annotations

import time
import warnings

import numpy as np
import pandas as pd
import pymc as pm
import pytensor
import pytensor.tensor as pt
import pytest
from graph_reference import graph_log_likelihood
from scipy import stats

import bayeszi as bz
from bayeszi.base.spec import ModelSpec
from bayeszi.engine.draws import fitted_rows, linear_predictors
from bayeszi.families import get_family
from bayeszi.model.build import build_model
from bayeszi.model.design import build_design
from bayeszi.model.priors import resolve

TRUE = {"counts": {"Intercept": 0.4, "x": 0.35}, "zeros": {"Intercept": -0.9, "w": 0.8},
        "alpha": 0.3}
SD = {"counts": 0.5, "zeros": 0.8}
SAMPLING = {"draws": 500, "warmup_steps": 500, "chains": 2, "cores": 1}


def reach_survey(seed: int, n_reaches: int = 40, visits: tuple[int, int] = (6, 12),
                 lines: int = 3, sd: dict | None = None, corr: float = 0.0,
                 slope_sd: float = 0.0, season_sd: tuple[float, float] = (0.0, 0.0),
                 repeat_labels: bool = False) -> tuple[pd.DataFrame, dict]:
    """A ZINB trapping survey: reaches visited 6-12 times, ``lines`` records per visit.

    Reach effects (counts, zeros) are bivariate normal with sds ``sd`` and correlation
    ``corr``; the slope of ``x`` varies by reach with sd ``slope_sd``; seasons (crossed with
    reaches) add effects with sds ``season_sd``. With ``repeat_labels`` reach labels restart
    in every river (R1, R2, ... in each), so that only (river, reach) identifies a reach.
    """
    sd = sd or SD
    rng = np.random.default_rng(seed)
    n_vis = rng.integers(visits[0], visits[1] + 1, n_reaches)
    cov = np.array([[sd["counts"] ** 2, corr * sd["counts"] * sd["zeros"]],
                    [corr * sd["counts"] * sd["zeros"], sd["zeros"] ** 2]])
    u = rng.multivariate_normal([0.0, 0.0], cov, n_reaches)
    b = rng.normal(0.0, slope_sd, n_reaches) if slope_sd else np.zeros(n_reaches)
    s_eff = np.column_stack([rng.normal(0.0, s, 3) if s else np.zeros(3) for s in season_sd])
    reach = np.repeat(np.repeat(np.arange(n_reaches), n_vis), lines)
    visit = np.repeat(np.concatenate([np.arange(k) for k in n_vis]), lines)
    season = visit % 3
    n = len(reach)
    x = rng.normal(0.0, 1.0, n)
    w = rng.normal(0.0, 1.0, n)
    expo = rng.integers(1, 6, n).astype(float)
    c, z = TRUE["counts"], TRUE["zeros"]
    eta = (np.log(expo) + c["Intercept"] + (c["x"] + b[reach]) * x + u[reach, 0]
           + s_eff[season, 0])
    zeta = z["Intercept"] + z["w"] * w + u[reach, 1] + s_eff[season, 1]
    mu, p = np.exp(eta), 1.0 / (1.0 + np.exp(-zeta))
    a = TRUE["alpha"]
    present = rng.poisson(rng.gamma(1.0 / a, a * mu))
    y = np.where(rng.uniform(size=n) < p, 0, present)
    n_rivers = 5
    river = np.array(["Alder", "Birch", "Cedar", "Hazel", "Rowan"])[np.arange(n_reaches)
                                                                      % n_rivers]
    if repeat_labels:  # R1 of Alder, R1 of Birch, ...
        labels = np.array([f"R{j // n_rivers + 1}" for j in range(n_reaches)])
    else:
        labels = np.array([f"R{j + 1:02d}" for j in range(n_reaches)])
    df = pd.DataFrame({"y": y.astype(np.int64), "x": x, "w": w, "nights": expo,
                       "reach": labels[reach], "river": river[reach],
                       "season": np.array(["spring", "summer", "autumn"])[season]})
    key = [f"{r}/{lab}" for r, lab in zip(river, labels, strict=True)] if repeat_labels \
        else list(labels)
    truth = {"u": dict(zip(key, u, strict=True)), "visits": dict(zip(key, n_vis, strict=True)),
             "mean": (1.0 - p) * mu, "expo": expo, "reach": reach, "key": key}
    return df, truth


def _design(df: pd.DataFrame, **kw) -> object:
    spec = ModelSpec(counts=kw.pop("counts", "y ~ x"), zeros=kw.pop("zeros", "~ w"),
                     family=kw.pop("family", "zinb"), **kw)
    return build_design(df, spec)


@pytest.fixture
def small() -> pd.DataFrame:
    df, _ = reach_survey(seed=5, n_reaches=10, visits=(2, 3), lines=2)
    return df


# ---------------------------------------------------------------------------- bad input
def test_missing_grouping_column_is_named(small):
    with pytest.raises(bz.BayesziError, match=r"column 'site' \(groups\) is not in the data"):
        _design(small, groups=("site",))
    with pytest.raises(bz.BayesziError, match=r"column 'basin' \(groups\)"):
        _design(small, groups=("reach",), nested={"reach": "basin"})


@pytest.mark.parametrize("column", ["reach", "river"])
@pytest.mark.parametrize("bad", [np.nan, None, "", "  "])
def test_missing_or_blank_label_is_an_error_that_says_what_it_means(small, column, bad):
    small[column] = small[column].astype(object)
    small.loc[small.index[[3, 7]], column] = bad
    with pytest.raises(bz.BayesziError,
                       match=rf"grouping column '{column}' has 2 missing or blank label.*row\(s\) "
                             r"3, 7.*cannot share in its group's effect.*label of their own"):
        _design(small, groups=("reach",), nested={"reach": "river"})


def test_single_level_is_an_error(small):
    small["one"] = "only"
    with pytest.raises(bz.BayesziError, match=r"'one' has a single level \('only'\).*at least two"):
        _design(small, groups=("one",))


def test_few_levels_and_single_records_warn_with_their_meaning(small):
    with pytest.warns(bz.BayesziWarning, match=r"'season' has only 3 levels.*leans on its prior"):
        _design(small, groups=("season",))
    small.loc[small.index[0], "reach"] = "lonely"
    with pytest.warns(bz.BayesziWarning,
                      match=r"1 level\(s\) with a single record \(e.g. \['lonely'\]\).*shrunk "
                            r"strongly toward the typical group"):
        _design(small, groups=("reach",))


def test_group_that_is_also_a_categorical_predictor_is_an_error(small):
    with pytest.raises(bz.BayesziError, match=r"'reach' is both a grouping column and a "
                                              r"categorical predictor of the counts formula"):
        _design(small, counts="y ~ x + C(reach)", groups=("reach",))
    with pytest.raises(bz.BayesziError, match=r"categorical predictor of the zeros formula"):
        _design(small, zeros="~ reach", groups=("reach",))
    # A numeric column may be both a trend term and a grouping (year-to-year deviations).
    small["year"] = np.arange(len(small)) % 4 + 2020
    d = _design(small, counts="y ~ x + year", groups=("reach", "year"))
    assert d.groups[1].levels == ["2020", "2021", "2022", "2023"]


def test_contradicting_group_settings(small):
    with pytest.raises(bz.BayesziError, match=r"correlated=True.*family 'negbin' has no zeros"):
        _design(small, family="negbin", groups=("reach",), correlated=True)
    with pytest.raises(bz.BayesziError, match=r"varying\['counts'\] lists 'Intercept'"):
        _design(small, groups=("reach",), varying={"counts": ("Intercept",)})
    with pytest.raises(bz.BayesziError, match=r"\['depth'\] are not columns of the counts"):
        _design(small, groups=("reach",), varying={"counts": ("depth",)})
    with pytest.raises(bz.BayesziError, match=r"zeros part, but family 'poisson' has no zeros"):
        _design(small, family="poisson", groups=("reach",), varying={"zeros": ("w",)})
    small["site"] = small["reach"].str.lower()
    with pytest.raises(bz.BayesziError, match=r"'reach' and 'site' split the records into the "
                                              r"same groups"):
        _design(small, groups=("reach", "site"))


def test_slope_that_cannot_vary_within_groups_warns(small):
    small["shade"] = small.groupby("reach")["x"].transform("mean")  # one value per reach
    with pytest.warns(bz.BayesziWarning, match=r"term 'shade' of the counts part has one value "
                                               r"within each level of 'reach'"):
        _design(small, counts="y ~ x + shade", groups=("reach",), varying={"counts": ("shade",)})


def test_nested_labels_and_numeric_labels_encode_consistently():
    df, truth = reach_survey(seed=2, n_reaches=10, visits=(2, 2), lines=1, repeat_labels=True)
    flat = _design(df, groups=("reach",))
    nested = _design(df, groups=("river", "reach"), nested={"reach": "river"})
    assert len(flat.groups[0].levels) == 2  # R1, R2 repeat across the 5 rivers
    assert nested.groups[1].levels == sorted(truth["key"])  # e.g. 'Alder/R1'
    new = df.iloc[[0, 5]].copy()
    new.loc[new.index[1], "river"] = "Unknown"
    codes = nested.encode(new).group_codes["reach"]
    assert nested.groups[1].levels[codes[0]] == f"{df['river'].iloc[0]}/{df['reach'].iloc[0]}"
    assert codes[1] == -1  # a reach of an unknown river is a new reach
    # Whole-number labels read as integers when fitting and as floats later are the same.
    df["site"] = (np.arange(len(df)) % 11).astype(np.int64)
    d = _design(df, groups=("site",))
    assert d.groups[0].levels[:3] == ["0", "1", "2"] and d.groups[0].levels[-1] == "10"
    as_float = df.assign(site=df["site"].astype(float))
    np.testing.assert_array_equal(d.encode(as_float).group_codes["site"], d.groups[0].codes)


# ---------------------------------------------------------------------------- model structure
def test_model_variables_for_every_group_option():
    df, _ = reach_survey(seed=3, n_reaches=10, visits=(3, 3), lines=1, repeat_labels=True)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")  # 'season' has only 3 levels
        d = _design(df, groups=("reach", "season"), nested={"reach": "river"},
                    correlated=True, varying={"counts": ("x",), "zeros": ("w",)})
    model = build_model(d, resolve(d, None)).model
    free = {v.name for v in model.free_RVs}
    for g, n_levels in (("reach", 10), ("season", 3)):
        # non-centred: the effects are deterministic functions of sd and standard normals
        assert {f"counts_sd_{g}", f"zeros_sd_{g}", f"counts_z_{g}", f"zeros_z_{g}",
                f"z_corr_{g}", f"counts_slope_z_{g}", f"zeros_slope_z_{g}"} <= free
        for name in (f"counts_effect_{g}", f"zeros_effect_{g}", f"corr_{g}"):
            assert name in model.named_vars and name not in free
        assert model.named_vars_to_dims[f"counts_effect_{g}"] == (g,)
        assert len(model.coords[g]) == n_levels
        assert model.named_vars_to_dims[f"counts_slope_{g}"] == (g, "counts_slope_term")
    assert np.isfinite(model.compile_logp(mode="FAST_COMPILE")(model.initial_point()))


@pytest.mark.parametrize("eta", [1.0, 2.0, 4.0])
def test_correlation_prior_is_the_lkj_density(eta):
    """The prior of corr_{g} has the shape of PyMC's LKJCorr (n = 2; its normalising constant
    differs from 1 in this PyMC version, so shapes are compared) and integrates to 1."""
    from scipy.integrate import quad

    df, _ = reach_survey(seed=3, n_reaches=8, visits=(3, 3), lines=1)
    d = _design(df, groups=("reach",), correlated=True)
    model = build_model(d, resolve(d, {"lkj_eta": eta})).model
    u = pt.dscalar("u")
    half_logp = pytensor.function([u], pm.logp(model["z_corr_reach"], u), mode="FAST_COMPILE")
    v = pt.dvector("v")
    lkj_logp = pytensor.function([v], pm.logp(pm.LKJCorr.dist(n=2, eta=eta), v),
                               mode="FAST_COMPILE")

    def ours(r: float) -> float:  # log density of rho = 2 * half - 1
        return float(half_logp((r + 1) / 2)) - np.log(2.0)

    rho = np.linspace(-0.95, 0.95, 9)
    ref = np.array([float(lkj_logp(np.array([r]))) for r in rho])
    diff = np.array([ours(r) for r in rho]) - ref
    np.testing.assert_allclose(diff, diff[0], atol=1e-8)
    total, _ = quad(lambda r: np.exp(ours(r)), -1, 1)
    assert abs(total - 1) < 1e-6, total


# ---------------------------------------------------------------------------- fits
def _main_data() -> tuple[pd.DataFrame, dict]:
    return reach_survey(seed=2024, n_reaches=40, visits=(6, 12), lines=3)


def _main_fit(cached_fit):
    df, _ = _main_data()
    return cached_fit("groups-reach-survey", lambda: bz.fit(
        df, counts="y ~ x", zeros="~ w", family="zinb", exposure="nights", groups="reach",
        seed=11, **SAMPLING))


def _pooled_out_fit(cached_fit):
    df, _ = _main_data()
    return cached_fit("groups-reach-survey-no-groups", lambda: bz.fit(
        df, counts="y ~ x", zeros="~ w", family="zinb", exposure="nights", seed=11,
        **SAMPLING))


def test_true_group_sds_inside_95_percent_intervals(cached_fit):
    m = _main_fit(cached_fit)
    table = m.coefficients(interval=0.95)
    for part in ("counts", "zeros"):
        row = table.loc[(part, "reach effects: sd")]
        assert row["2.5%"] < SD[part] < row["97.5%"], (part, row[["2.5%", "97.5%"]])
    assert m.diagnostics().divergences == 0


def test_sparsely_visited_reaches_shrink_more(cached_fit):
    m = _main_fit(cached_fit)
    _, truth = _main_data()
    eff = m.group_effects().xs("intercept", level="effect")
    visits = pd.Series(truth["visits"])
    for part in ("counts", "zeros"):
        t = eff.xs(("reach", part), level=("group", "part"))
        few = t.loc[visits.index[visits <= 7], "pooling"]
        many = t.loc[visits.index[visits >= 11], "pooling"]
        # Two-sample standard error of the difference of the mean pooling factors (spread
        # from reach to reach, Monte Carlo error included); more than 2 se is a one-sided
        # false alarm rate of about 2% were there no difference.
        se = np.sqrt(few.var() / len(few) + many.var() / len(many))
        assert few.mean() - many.mean() > 2 * se, (part, few.mean(), many.mean(), se)
        # Pooling grows as records shrink: rank correlation with the record count is negative.
        rho = stats.spearmanr(t["records"], t["pooling"]).statistic
        assert rho < -0.3, (part, rho)
    summary = m.pooling_summary()
    row = summary.loc[("reach", "counts", "intercept")]
    assert row["pooling, fewest records"] > row["pooling, most records"]
    assert 0 < row["pooling"] < 1


def test_shrinkage_toward_zero_against_each_reachs_own_estimate(cached_fit):
    """Measured shrinkage: regress the pooled effect on the reach's own (unpooled) estimate,
    i.e. the maximum-likelihood shift of its log rate with everything else at the posterior
    mean. The slope (1 = no shrinkage, 0 = complete) is smaller for sparsely visited reaches."""
    from scipy.optimize import minimize_scalar

    m = _main_fit(cached_fit)
    _, truth = _main_data()
    fam = get_family("zinb")
    rows = fitted_rows(m)
    lp = linear_predictors(m, rows, groups="none")
    ec, ez, la = lp.counts.mean(0), lp.zeros.mean(0), lp.log_alpha.mean(0)
    uz = m.idata.posterior["zeros_effect_reach"].mean(("chain", "draw")).values
    ez = ez + uz[m.design.groups[0].codes]
    y = m.design.y
    pooled = m.group_effects(part="counts").xs(("reach", "counts", "intercept"),
                                               level=("group", "part", "effect"))["mean"]
    own = {}
    for j, lv in enumerate(m.design.groups[0].levels):
        k = m.design.groups[0].codes == j

        def nll(s, k=k):
            return -fam.logpmf(y[k], ec[k] + s, ez[k], la).sum()

        own[lv] = minimize_scalar(nll, bounds=(-5, 5), method="bounded").x
    own = pd.Series(own)
    visits = pd.Series(truth["visits"])

    def slope(idx) -> float:  # least squares through the origin
        return float((pooled[idx] * own[idx]).sum() / (own[idx] ** 2).sum())

    few, many = visits.index[visits <= 7], visits.index[visits >= 11]
    diff = slope(few) - slope(many)
    # Tolerance: bootstrap over reaches (resampling each class) of the slope difference;
    # require it below zero by more than 2 bootstrap sd (one-sided, about 2%).
    rng = np.random.default_rng(0)
    boot = [slope(rng.choice(few, len(few))) - slope(rng.choice(many, len(many)))
            for _ in range(1000)]
    assert diff < -2 * np.std(boot), (slope(few), slope(many), np.std(boot))
    assert slope(many) < 1.0  # every reach is shrunk somewhat


def _reach_rates(m, df: pd.DataFrame, truth: dict, interval: float
                 ) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Posterior interval and truth of each reach's expected catch per trap night (the mean
    over its records of E[Y] / nights, known reaches)."""
    fam = get_family("zinb")
    lp = linear_predictors(m, fitted_rows(m), groups="known")
    rate = fam.mean(lp.counts, lp.zeros, lp.log_alpha) / truth["expo"][None, :]
    codes = truth["reach"]
    n_r = codes.max() + 1
    per = np.stack([np.bincount(codes, weights=r, minlength=n_r) for r in rate])
    per = per / np.bincount(codes, minlength=n_r)[None, :]
    true = np.bincount(codes, weights=truth["mean"] / truth["expo"]) / np.bincount(codes)
    lo, hi = np.quantile(per, [(1 - interval) / 2, (1 + interval) / 2], axis=0)
    return lo, hi, true


def test_reach_level_intervals_cover_with_groups_and_undercover_without(cached_fit):
    df, truth = _main_data()
    interval = 0.8
    n_reaches = 40
    # Binomial error of a coverage count over 40 reaches at the nominal 80%: the central 99%
    # range of Binomial(40, 0.8) (scipy.stats.binom). Coverage of neighbouring reaches is
    # not independent (shared coefficients), so this is a guide, not an exact test.
    low, high = stats.binom.ppf([0.005, 0.995], n_reaches, interval)
    lo, hi, true = _reach_rates(_main_fit(cached_fit), df, truth, interval)
    covered = int(np.sum((lo <= true) & (true <= hi)))
    assert low <= covered <= high, (covered, low, high)
    lo0, hi0, _ = _reach_rates(_pooled_out_fit(cached_fit), df, truth, interval)
    covered0 = int(np.sum((lo0 <= true) & (true <= hi0)))
    # Without reach effects the intervals ignore the reach-to-reach spread: coverage falls
    # below the lowest count the binomial error allows at the nominal rate.
    assert covered0 < low, (covered0, low)


def _all_options_fit(cached_fit):
    df, _ = reach_survey(seed=8, n_reaches=20, visits=(3, 4), lines=2, corr=-0.6,
                         slope_sd=0.3, season_sd=(0.3, 0.3), repeat_labels=True)
    return df, cached_fit("groups-all-options", lambda: bz.fit(
        df, counts="y ~ x", zeros="~ w", family="zinb", exposure="nights",
        groups=["reach", "season"], nested={"reach": "river"}, correlated=True,
        varying={"counts": ["x"]}, seed=4, draws=200, warmup_steps=200, chains=2, cores=1))


def test_nested_crossed_correlated_varying_fit_and_agree_with_the_draws(cached_fit):
    df, m = _all_options_fit(cached_fit)
    assert [len(g.levels) for g in m.design.groups] == [20, 3]  # 'R1'..'R4' in 5 rivers
    # The stored log-likelihood (NumPy, from the draws) equals the density of the model's own
    # graph (group intercepts, correlated zeros effects and varying slopes all included).
    ref, stored = graph_log_likelihood(m)
    np.testing.assert_allclose(stored, ref, rtol=1e-9, atol=1e-9)
    table = m.coefficients()
    for g in ("reach", "season"):
        for part in ("counts", "zeros"):
            assert np.isfinite(table.loc[(part, f"{g} effects: sd"), "mean"])
        assert -1 < table.loc[("both", f"{g} effects: counts-zeros correlation"), "mean"] < 1
        assert table.loc[("counts", f"{g} effects: sd of x slopes"), "mean"] > 0
    eff = m.group_effects()
    assert len(eff.loc["reach"]) == 20 * 3  # counts and zeros intercepts, x slope
    assert len(eff.loc["season"]) == 3 * 3
    # The table's numbers are the posterior's: effect means and the slope on the user's scale.
    post = m.idata.posterior
    lv = m.design.groups[0].levels[4]
    np.testing.assert_allclose(eff.loc[("reach", lv, "zeros", "intercept"), "mean"],
                               float(post["zeros_effect_reach"].sel(reach=lv).mean()))
    j = m.design.counts.terms.index("x")
    np.testing.assert_allclose(
        eff.loc[("reach", lv, "counts", "x"), "mean"],
        float(post["counts_slope_reach"].sel(reach=lv).mean()) / m.design.counts.scale[j])
    row = eff.loc[("reach", lv, "counts", "intercept")]
    np.testing.assert_allclose([row["exp 5%"], row["exp 95%"]], np.exp([row["5%"], row["95%"]]))
    assert set(m.pooling_summary().index) == {
        (g, p, e) for g in ("reach", "season") for p, e in
        (("counts", "intercept"), ("zeros", "intercept"), ("counts", "x"))}


def test_group_tables_refuse_bad_requests(cached_fit):
    _, m = _all_options_fit(cached_fit)
    with pytest.raises(bz.BayesziError, match=r"part must be one of \['counts', 'zeros'\]"):
        m.group_effects(part="zero")
    with pytest.raises(bz.BayesziError, match=r"group must be one of the grouping columns"):
        m.group_effects(group="site")
    with pytest.raises(bz.BayesziError, match=r"interval must lie strictly between 0 and 1"):
        m.group_effects(interval=90)
    only = m.group_effects(part="zeros", group="season")
    assert set(only.index.get_level_values("part")) == {"zeros"}
    assert set(only.index.get_level_values("group")) == {"season"}
    with pytest.raises(bz.BayesziError, match=r"no group effects; fit it with groups="):
        _pooled_out_fit(cached_fit).group_effects()


def test_group_effects_survive_save_and_load(cached_fit, tmp_path):
    _, m = _all_options_fit(cached_fit)
    again = bz.load(m.save(str(tmp_path / "fit.nc")))
    pd.testing.assert_frame_equal(m.group_effects(), again.group_effects())


# ---------------------------------------------------------------------------- slow checks
@pytest.mark.slow
def test_correlation_of_counts_and_zeros_intercepts_is_recovered():
    df, _ = reach_survey(seed=31, n_reaches=60, visits=(6, 12), lines=3, corr=-0.7)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        m = bz.fit(df, counts="y ~ x", zeros="~ w", family="zinb", exposure="nights",
                   groups="reach", correlated=True, seed=5, draws=1000, warmup_steps=1000, chains=2)
    row = m.coefficients(interval=0.95).loc[("both", "reach effects: counts-zeros correlation")]
    assert row["2.5%"] < -0.7 < row["97.5%"], row
    assert row["97.5%"] < 0, row  # the data show the (negative) correlation


DEMO = {"counts": "crayfish ~ water_temp + C(substrate) + depth + canopy", "zeros": "~ barrier",
        "family": "zinb", "exposure": "trap_nights"}


@pytest.mark.slow
def test_demo_fits_with_groups_without_divergences():
    from bayeszi.data import crayfish_truth, load_crayfish

    df = load_crayfish()
    truth = crayfish_truth()
    t0 = time.perf_counter()
    m = bz.fit(df, groups="reach", seed=1, **DEMO)  # default sampler settings
    took = time.perf_counter() - t0
    print(f"demo with groups: sampling {m.timing['sample_s']:.1f} s, total {took:.1f} s, "
          f"divergences {m.diagnostics().divergences}")
    assert m.diagnostics().divergences == 0
    table = m.coefficients(interval=0.95)
    for part in ("counts", "zeros"):
        row = table.loc[(part, "reach effects: sd")]
        true_sd = truth["group_sd"][part]["reach"]
        assert row["2.5%"] < true_sd < row["97.5%"], (part, row)
