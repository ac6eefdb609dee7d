"""Predictions, contrasts and average predictive comparisons.

Modules: bayeszi.answers.predict and bayeszi.answers.contrast.

Two kinds of fitted models are used:

* hand-built fits: a design from simulated rows and a small posterior written by hand (no
  MCMC), so every quantity can be recomputed from the draws' parameters with scipy.stats
  pmfs and the textbook compositions (zero-inflated: Lambert 1992, Technometrics; hurdle:
  Mullahy 1986, J. Econometrics; both from memory) and compared exactly;
* one real ZINB fit by NUTS (1,000 rows, 15 sites), for the Monte Carlo and interval checks,
  whose tolerances come from the draws themselves.
"""

from __future__ import annotations

import copy
import dataclasses
import warnings

import arviz as az
import numpy as np
import pandas as pd
import pytest
from scipy import special as sc
from scipy import stats
from simulate import fitted_from_user_draws, simulate

import bayeszi as bz
import bayeszi.answers.evaluation
import bayeszi.answers.predict
from bayeszi.answers.evaluation import plan_chunks
from bayeszi.base import options
from bayeszi.families import get_family
from bayeszi.fitting.fitted import FittedModel
from bayeszi.model.diagnostics import Diagnostics

pytestmark = pytest.mark.filterwarnings("ignore::bayeszi.BayesziWarning")

FAMILIES = ["poisson", "negbin", "zip", "zinb", "hurdle-poisson", "hurdle-negbin"]
GEARS = ["a", "b", "c"]


# ================================================================= hand-built fitted models
def _clean_diag(n: int, divergences: int = 0) -> Diagnostics:
    """Diagnostics without problems (two chains: one chain is a problem of its own)."""
    return Diagnostics(table=pd.DataFrame(columns=["R-hat", "bulk ESS", "tail ESS"]),
                       divergences=divergences, draws=n, chains=2)


def hand_fit(family: str, n_draws: int = 20, seed: int = 5, site_sd: float | None = None,
             n: int = 60) -> tuple[FittedModel, dict]:
    """A fitted model whose posterior is written by hand on the user's scale.

    Returns the model and the user-scale parameters per draw (the hand computation's input).
    """
    df, _ = simulate(family, n=n, seed=seed, n_sites=5, site_sd=(0.5, 0.5))
    rng = np.random.default_rng(seed)
    df["gear"] = rng.choice(GEARS, size=len(df))
    fam = get_family(family)
    spec = bz.make_spec(counts="y ~ x1 + x2 + C(gear)", zeros="~ w" if fam.zeros_kind else None,
                        family=family, exposure="exposure", groups="site")
    levels = sorted(df["site"].unique().tolist())
    S, L = n_draws, len(levels)
    b = rng.normal(0.0, 0.3, (S, 5)) + np.array([0.2, 0.4, -0.3, 0.2, -0.4])
    par = {"b": b, "eff_c": rng.normal(0, 0.5, (S, L))}
    sd = {"counts": np.full(S, 0.5 if site_sd is None else site_sd),
          "zeros": np.full(S, 0.6 if site_sd is None else site_sd)}
    if fam.zeros_kind:
        par["g"] = rng.normal(0.0, 0.3, (S, 2)) + np.array([-0.5, 0.8])
        par["eff_z"] = rng.normal(0, 0.5, (S, L))
    if fam.has_dispersion:
        par["alpha"] = rng.uniform(0.2, 1.5, S)
    effects = {"counts": par["eff_c"], **({"zeros": par["eff_z"]} if "eff_z" in par else {})}
    m = fitted_from_user_draws(df, spec, b, par.get("g"), par.get("alpha"), effects, sd)
    par["levels"] = m.design.groups[0].levels
    return m, par


def hand_parts(m: FittedModel, par: dict, df: pd.DataFrame, exposure=None, effects=True):
    """mu, p and alpha per (draw, row) from the user-scale parameters and the raw columns."""
    X = np.column_stack([np.ones(len(df)), df["x1"], df["x2"], df["gear"] == "b",
                         df["gear"] == "c"]).astype(float)
    site = np.array([par["levels"].index(s) for s in df["site"]])
    expo = df["exposure"].to_numpy(float) if exposure is None else np.full(len(df), exposure)
    eta = par["b"] @ X.T + np.log(expo)[None, :]
    if effects:
        eta = eta + par["eff_c"][:, site]
    mu = np.exp(eta)
    p = None
    if "g" in par:
        zeta = par["g"] @ np.column_stack([np.ones(len(df)), df["w"]]).T
        if effects:
            zeta = zeta + par["eff_z"][:, site]
        p = 1.0 / (1.0 + np.exp(-zeta))
    alpha = par.get("alpha")
    return mu, p, None if alpha is None else alpha[:, None], expo


def hand_quantities(family: str, mu, p, alpha, expo, k: int, kmax: int) -> dict:
    """Every quantity from scipy.stats pmfs composed into ZI / hurdle laws."""
    fam = get_family(family)
    if alpha is None:
        law = stats.poisson(mu)
    else:  # NB with variance mu + alpha mu^2: n = 1/alpha, success prob 1/(1 + alpha mu)
        law = stats.nbinom(1.0 / alpha, 1.0 / (1.0 + alpha * mu))
    f0 = law.pmf(0)
    pmf = np.stack([law.pmf(j) for j in range(kmax + 1)], axis=-1)
    if fam.zeros_kind is None:
        p0, mean, tail, part_mean = f0, mu, law.sf(k - 1), mu
        pmf_y = pmf
    elif fam.zeros_kind == "inflation":  # Lambert (1992)
        p0 = p + (1 - p) * f0
        mean, tail, part_mean = (1 - p) * mu, (1 - p) * law.sf(k - 1), mu
        pmf_y = (1 - p)[..., None] * pmf
        pmf_y[..., 0] = p0
    else:  # hurdle: P(0) = p, positives from the zero-truncated law (Mullahy 1986)
        p0 = p
        mean = (1 - p) * mu / (1 - f0)
        tail = (1 - p) * law.sf(k - 1) / (1 - f0)
        part_mean = mu / (1 - f0)
        pmf_y = ((1 - p) / (1 - f0))[..., None] * pmf
        pmf_y[..., 0] = p0
    out = {"mean": mean, "rate": mean / expo[None, :], "p_zero": p0, "p_nonzero": 1 - p0,
           "count_part_mean": part_mean, "at_least": tail, "pmf": pmf_y}
    if p is not None:
        out["p_zeros_part"] = p
    return out


@pytest.mark.parametrize("family", FAMILIES)
def test_every_quantity_equals_hand_computation_per_draw(family):
    m, par = hand_fit(family)
    new = m.data.head(25).copy()
    new["exposure"] = np.linspace(0.5, 4.0, len(new))
    mu, p, alpha, expo = hand_parts(m, par, new)
    k, kmax = 3, 6
    hand = hand_quantities(family, mu, p, alpha, expo, k, kmax)
    names = ["mean", "rate", "p_zero", "p_nonzero", "count_part_mean", "at_least"]
    if get_family(family).zeros_kind:
        names.append("p_zeros_part")
    for what in names:
        got = m.prediction_draws(new, what=what, k=k if what == "at_least" else None)
        np.testing.assert_allclose(got.values, hand[what], rtol=1e-10, atol=1e-300,
                                   err_msg=what)
    # a single posterior draw (draw 0): mean and both interval bounds are that draw's value
    single = m.predict(new, what=names[:3], draws=1)
    for what in names[:3]:
        rows = single[single["quantity"] == single["quantity"].unique()[names.index(what)]]
        for col in ("mean", "5%", "95%"):
            np.testing.assert_allclose(rows[col].to_numpy(), hand[what][0], rtol=1e-10)
        assert rows["sd"].isna().all()
    # thinning keeps evenly spaced draws, labelled by their position among all draws
    thin = m.prediction_draws(new, what="mean", draws=5)
    np.testing.assert_array_equal(thin["draw"], [0, 5, 10, 14, 19])
    np.testing.assert_allclose(thin.values, hand["mean"][[0, 5, 10, 14, 19]], rtol=1e-10)
    # the predictive pmf is the per-draw pmf averaged over draws
    dist = m.count_distribution(new, kmax=kmax)
    np.testing.assert_allclose(dist[[f"P(Y = {j})" for j in range(kmax + 1)]].to_numpy(),
                               hand["pmf"].mean(axis=0), rtol=1e-10, atol=1e-300)
    np.testing.assert_allclose(dist.drop(columns="groups").sum(axis=1), 1.0, rtol=1e-12)


def test_typical_groups_leave_group_effects_out():
    m, par = hand_fit("zinb")
    new = m.data.head(10)
    mu, p, alpha, expo = hand_parts(m, par, new, effects=False)
    got = m.prediction_draws(new, what="p_zero", groups="typical")
    law = stats.nbinom(1.0 / alpha, 1.0 / (1.0 + alpha * mu))
    np.testing.assert_allclose(got.values, p + (1 - p) * law.pmf(0), rtol=1e-10)


def test_new_and_average_groups_with_zero_spread_equal_typical():
    # with every group sd 0, a new group's effect is exactly 0
    m, _ = hand_fit("hurdle-negbin", site_sd=0.0)
    new = m.data.head(10).drop(columns="site")
    typical = m.prediction_draws(new, what="mean", groups="typical").values
    for mode in ("new", "average"):
        got = m.prediction_draws(new, what="mean", groups=mode, seed=1).values
        np.testing.assert_allclose(got, typical, rtol=1e-12)


def test_population_average_matches_lognormal_mean():
    # Poisson with a normal site effect of sd s on the log mean: averaging over sites
    # multiplies E[Y] by exp(s^2 / 2), the lognormal mean (common fact, no source needed).
    s, M = 0.5, 4000
    m, _ = hand_fit("poisson", site_sd=s, n_draws=10)
    new = m.data.head(8)
    typical = m.prediction_draws(new, what="mean", groups="typical").values
    avg = m.prediction_draws(new, what="mean", groups="average", n_average=M, seed=3).values
    factor = avg / typical
    # Monte Carlo sd of the average of M lognormal factors, relative to their mean
    rel_sd = np.sqrt(np.expm1(s**2) / M)
    assert np.all(np.abs(factor / np.exp(s**2 / 2) - 1) < 4.5 * rel_sd)


def test_hurdle_exposure_moves_counts_part_only():
    # hurdle-poisson: P(Y = 0) = p does not depend on exposure, and doubling mu changes
    # E[Y] = (1 - p) mu / (1 - exp(-mu)) by the factor 2 / (1 + exp(-mu)), not 2.
    m, par = hand_fit("hurdle-poisson")
    new = m.data.head(12)
    one = m.prediction_draws(new, what="mean", exposure=1.0).values
    two = m.prediction_draws(new, what="mean", exposure=2.0).values
    mu1, *_ = hand_parts(m, par, new, exposure=1.0)
    np.testing.assert_allclose(two / one, 2.0 / (1.0 + np.exp(-mu1)), rtol=1e-10)
    z1 = m.prediction_draws(new, what="p_zero", exposure=1.0).values
    z2 = m.prediction_draws(new, what="p_zero", exposure=2.0).values
    np.testing.assert_array_equal(z1, z2)


def test_category_average_comparison_is_mean_difference_between_levels():
    m, _ = hand_fit("zip")
    data = m.data
    apc = m.average_comparison("gear", what="rate")
    assert list(apc["comparison"]) == ["b vs a", "c vs a"]
    base = m.prediction_draws(data.assign(gear="a"), what="rate").values
    for pos, level in enumerate(["b", "c"]):
        other = m.prediction_draws(data.assign(gear=level), what="rate").values
        per_draw = (other - base).mean(axis=1)
        assert apc["mean"].iloc[pos] == pytest.approx(per_draw.mean(), rel=1e-10)
        assert apc["95%"].iloc[pos] == pytest.approx(np.quantile(per_draw, 0.95), rel=1e-10)


def test_unseen_factor_level_names_known_levels():
    m, _ = hand_fit("zinb")
    new = m.data.head(3).copy()
    new["gear"] = ["a", "mud", "b"]
    _raises(r"'gear'.*\['mud'\].*known levels: \['a', 'b', 'c'\]", m.predict, new)


def test_sampler_problems_are_warned_and_kept():
    m, _ = hand_fit("poisson")
    m = dataclasses.replace(m, sampling=_clean_diag(20, divergences=3))
    with pytest.warns(bz.BayesziWarning, match="3 divergent"):
        table = m.predict(m.data.head(2))
    assert "3 divergent" in table.attrs["sampler_problems"][0]


def test_chunks_keep_linked_rows_together():
    ids = np.array([0, 1, 0, 2, 1, 3, 3, 0])
    chunks = plan_chunks(len(ids), 2, [ids])
    assert sorted(np.concatenate(chunks).tolist()) == list(range(len(ids)))
    for c in chunks:  # a label never spans two chunks
        for other in chunks:
            if other is not c:
                assert not set(ids[c]) & set(ids[other])


def test_many_small_chunks_give_the_same_answers(monkeypatch):
    m, par = hand_fit("negbin", n=400, n_draws=100)
    rows = m.data
    monkeypatch.setattr(bayeszi.answers.evaluation, "CHUNK_ELEMENTS", 2000)  # 10 rows per chunk
    got = m.predict(rows, what="p_zero")
    mu, _, alpha, _ = hand_parts(m, par, rows)
    p0 = (1 + alpha * mu) ** (-1 / alpha)  # NB P(0) (common fact)
    np.testing.assert_allclose(got["mean"], p0.mean(axis=0), rtol=1e-10)
    np.testing.assert_allclose(got["95%"], np.quantile(p0, 0.95, axis=0), rtol=1e-10)
    # new groups: rows of one site share its drawn effect in every draw, across chunks, so
    # the ratio of two rows' means is the ratio of their fixed parts (log link)
    new = rows.assign(site=rows["site"].map(lambda s: "new-" + s))
    draws = m.prediction_draws(new, what="mean", groups="new", seed=2).values
    mu0, *_ = hand_parts(m, par, rows, effects=False)
    for site in new["site"].unique():
        pos = np.flatnonzero(new["site"].to_numpy() == site)
        np.testing.assert_allclose(draws[:, pos] / draws[:, pos[:1]],
                                   mu0[:, pos] / mu0[:, pos[:1]], rtol=1e-10)
    # and different new sites get different effects
    first = [np.flatnonzero(new["site"].to_numpy() == s)[0] for s in new["site"].unique()]
    ratio = draws[:, first] / mu0[:, first]
    assert np.all(np.std(np.log(ratio), axis=1) > 0.05)
    # rows without the group column are a new group each: no two share an effect
    alone = m.prediction_draws(rows.drop(columns="site").head(30), what="mean", groups="new",
                               seed=2).values / mu0[:, :30]
    spread = np.log(alone) - np.log(alone[:, :1])
    assert np.all(np.abs(spread[:, 1:]).min(axis=0) > 1e-8)


# ================================================================= a real fit
def _zinb(cached_fit):
    def make():
        df, truth = simulate("zinb", n=1000, seed=21, n_sites=15, site_sd=(0.6, 0.8))
        m = bz.fit(df, counts="y ~ x1 + x2", zeros="~ w", family="zinb",
                   exposure="exposure", groups="site", draws=300, warmup_steps=400, chains=2,
                   seed=4, progressbar=False)
        return m, df
    return cached_fit("predict-zinb", make)


def test_single_real_draw_equals_hand_computation(cached_fit):
    m, df = _zinb(cached_fit)
    one = copy.copy(m)
    one.idata = az.InferenceData(posterior=m.idata.posterior.isel(chain=[1], draw=[17]))
    post = one.idata.posterior
    b = post["counts_coef"].values.reshape(-1)  # user scale: Intercept, x1, x2
    g = post["zeros_coef"].values.reshape(-1)
    alpha = float(post["dispersion"].values.reshape(-1)[0])
    levels = list(post["site"].values)
    new = df.sample(30, random_state=2)
    site = [levels.index(s) for s in new["site"]]
    mu = np.exp(b[0] + b[1] * new["x1"] + b[2] * new["x2"] + np.log(new["exposure"])
                + post["counts_effect_site"].values.reshape(-1)[site]).to_numpy()
    p = sc.expit(g[0] + g[1] * new["w"]
                 + post["zeros_effect_site"].values.reshape(-1)[site]).to_numpy()
    law = stats.nbinom(1 / alpha, 1 / (1 + alpha * mu))
    hand = {"mean": (1 - p) * mu, "p_zero": p + (1 - p) * law.pmf(0),
            "p_zeros_part": p, "at_least": (1 - p) * law.sf(1)}
    table = one.predict(new, what=list(hand), k=2)
    for what, value in hand.items():
        label = {"mean": "E[Y], expected count", "p_zero": "P(Y = 0)",
                 "p_zeros_part": "P(extra zero), zeros part", "at_least": "P(Y >= 2)"}[what]
        rows = table[table["quantity"] == label]
        for col in ("mean", "5%", "95%"):
            np.testing.assert_allclose(rows[col].to_numpy(), value, rtol=1e-10, err_msg=what)


def test_monte_carlo_zero_share_matches_closed_form(cached_fit):
    m, df = _zinb(cached_fit)
    R = 400
    picks = df.iloc[[3, 10, 500]]
    reps = picks.loc[picks.index.repeat(R)]
    counts = m.prediction_draws(reps, what="new_count", seed=11).values  # (S, 3R)
    p0 = m.prediction_draws(picks, what="p_zero").values  # (S, 3), closed form per draw
    S = p0.shape[0]
    share = (counts == 0).reshape(S, 3, R).mean(axis=(0, 2))
    expected = p0.mean(axis=0)
    # given the posterior draws, the zero share is an average of S * R independent
    # Bernoulli(p0_s) indicators: its sd is sqrt(sum_s p0_s (1 - p0_s) / R) / S
    mc_sd = np.sqrt((p0 * (1 - p0)).sum(axis=0) / R) / S
    assert np.all(np.abs(share - expected) < 4 * mc_sd), (share, expected, mc_sd)


def test_new_group_intervals_wider_than_well_visited_known_group(cached_fit):
    m, df = _zinb(cached_fit)
    busiest = df["site"].value_counts().idxmax()
    rows = df[df["site"] == busiest].head(8)
    assert (df["site"] == busiest).sum() >= 60
    for what in ("mean", "p_zeros_part"):
        known = m.predict(rows, what=what, groups="known")
        new = m.predict(rows, what=what, groups="new", seed=5)
        assert (known["groups"] == "known site").all() and (new["groups"] == "new site").all()
        assert np.all((new["95%"] - new["5%"]) > (known["95%"] - known["5%"])), what


def test_new_group_mean_agrees_with_population_average(cached_fit):
    m, df = _zinb(cached_fit)
    rows = df.head(5).drop(columns="site")
    new = m.prediction_draws(rows, what="p_zero", groups="new", seed=6).values
    avg = m.prediction_draws(rows, what="p_zero", groups="average", n_average=50,
                             seed=7).values
    S = new.shape[0]
    # new-group draws scatter around the per-draw population average; their mean differs
    # from the average's mean by Monte Carlo error of about sd(new - avg) / sqrt(S)
    tol = 4.5 * (new - avg).std(axis=0, ddof=1) / np.sqrt(S)
    assert np.all(np.abs(new.mean(axis=0) - avg.mean(axis=0)) < tol)
    assert np.all(avg.std(axis=0) < new.std(axis=0))


@pytest.mark.parametrize("groups", ["known", "new"])
def test_doubling_exposure_doubles_mean_not_extra_zero_probability(cached_fit, groups):
    m, df = _zinb(cached_fit)
    rows = df.head(20)
    twice = rows.assign(exposure=2 * rows["exposure"])
    for what, factor in (("mean", 2.0), ("rate", 1.0), ("p_zeros_part", 1.0)):
        a = m.prediction_draws(rows, what=what, groups=groups, seed=9).values
        b = m.prediction_draws(twice, what=what, groups=groups, seed=9).values
        np.testing.assert_allclose(b, factor * a, rtol=1e-12, err_msg=what)


@pytest.mark.parametrize("groups", ["known", "new", "average", "typical"])
def test_shift_contrast_of_mean_is_the_rate_ratio(cached_fit, groups):
    # log link: raising x1 by 1 multiplies E[Y] by exp(beta_x1) in every draw, whatever the
    # group effect, provided both scenarios of a row share it
    m, df = _zinb(cached_fit)
    beta = m.idata.posterior["counts_coef"].sel(counts_term="x1").values.reshape(-1)
    rr = np.exp(beta)
    rows = df.head(15).drop(columns="site") if groups != "known" else df.head(15)
    table = m.contrast(rows, shift={"x1": 1.0}, groups=groups, seed=3, n_average=5)
    np.testing.assert_allclose(table["ratio (median)"], np.median(rr), rtol=1e-10)
    np.testing.assert_allclose(table["ratio 5%"], np.quantile(rr, 0.05), rtol=1e-10)
    assert np.all(table["P(ratio > 1)"] == np.mean(beta > 0))
    assert (table["change"] == "x1 + 1").all()


def test_two_frame_contrasts_and_totals(cached_fit):
    m, df = _zinb(cached_fit)
    base = df.head(10)
    twice = base.assign(exposure=2 * base["exposure"])
    table = m.contrast(base, twice, what="mean")
    np.testing.assert_allclose(table["ratio (median)"], 2.0, rtol=1e-12)
    np.testing.assert_allclose(table["scenario"], 2 * table["base"], rtol=1e-12)
    # totals over frames of different length: ratio of per-draw sums
    longer = df.head(25)
    total = m.contrast(base, longer, what="mean", combine="sum")
    a = m.prediction_draws(base, what="mean").values.sum(axis=1)
    b = m.prediction_draws(longer, what="mean").values.sum(axis=1)
    assert len(total) == 1
    assert total["ratio (median)"].iloc[0] == pytest.approx(np.median(b / a), rel=1e-10)
    assert total["difference"].iloc[0] == pytest.approx((b - a).mean(), rel=1e-10)
    assert total["P(ratio > 1)"].iloc[0] == np.mean(b > a)


def test_average_comparison_against_pairwise_definition(cached_fit):
    # Gelman & Pardoe (2007), Sociol. Methodol. 37, the weighted pairwise average predictive
    # comparison (formula and weights 1 / (1 + Mahalanobis^2) from memory), computed here
    # by brute force over all pairs of 12 rows
    m, df = _zinb(cached_fit)
    data = df.iloc[:12].reset_index(drop=True)
    apc = m.average_comparison("x1", data, what="p_zero")
    u = data["x1"].to_numpy()
    v = data[["x2", "w", "exposure"]].to_numpy(float)
    prec = np.linalg.pinv(np.cov(v, rowvar=False))
    q_own = m.prediction_draws(data, what="p_zero").values
    i, j = np.where(~np.eye(12, dtype=bool))
    moved = data.iloc[i].reset_index(drop=True).assign(x1=u[j])
    q_moved = m.prediction_draws(moved, what="p_zero").values
    dv = v[i] - v[j]
    w = 1 / (1 + np.einsum("pa,ab,pb->p", dv, prec, dv))
    du = u[j] - u[i]
    per_draw = ((q_moved - q_own[:, i]) @ (w * np.sign(du))) / np.sum(w * np.abs(du))
    assert apc["pairs"].iloc[0] == 132
    assert apc["mean"].iloc[0] == pytest.approx(per_draw.mean(), rel=1e-10)
    assert apc["5%"].iloc[0] == pytest.approx(np.quantile(per_draw, 0.05), rel=1e-10)
    assert apc["P(> 0)"].iloc[0] == np.mean(per_draw > 0)


def test_fitted_rows_by_default_and_tidy_output(cached_fit):
    m, df = _zinb(cached_fit)
    table = m.predict(what=["mean", "p_nonzero"])
    assert len(table) == 2 * len(df)
    assert list(table.columns) == ["quantity", "groups", "mean", "sd", "5%", "95%"]
    assert set(table["quantity"]) == {"E[Y], expected count", "P(Y > 0), encounter probability"}
    np.testing.assert_array_equal(table.index[: len(df)], df.index)
    assert np.all(table["5%"] <= table["mean"]) and np.all(table["mean"] <= table["95%"])
    t80 = m.predict(df.head(3), interval=0.8)
    assert list(t80.columns[-2:]) == ["10%", "90%"]


# ================================================================= bad input
def _raises(match: str, fn, *args, **kwargs) -> None:
    with pytest.raises(bz.BayesziError, match=match):
        fn(*args, **kwargs)


def test_bad_input_says_what_to_do(cached_fit):
    m, df = _zinb(cached_fit)
    rows = df.head(4)
    _raises(r"column 'x1'.*not in the data", m.predict, rows.drop(columns="x1"))
    _raises(r"no exposure column 'exposure'.*exposure=1", m.predict,
            rows.drop(columns="exposure"))
    table = m.predict(rows.drop(columns="exposure"), what="rate", exposure=1)
    np.testing.assert_allclose(table["mean"], m.predict(rows, what="rate")["mean"],
                               rtol=1e-12)  # ZI: rate per unit effort does not depend on it
    unknown = rows.assign(site=["s00", "zz", "s01", "zz"])
    _raises(r"'site' has level\(s\) \['zz'\].*groups='new'", m.predict, unknown)
    assert len(m.predict(unknown, groups="new", seed=1)) == 4
    _raises(r"need the grouping column 'site'.*groups='new'", m.predict,
            rows.drop(columns="site"))
    _raises(r"unknown quantity what='men'.*did you mean 'mean'", m.predict, rows, what="men")
    _raises(r"at_least' needs a whole number k", m.predict, rows, what="at_least")
    _raises(r"k is used only", m.predict, rows, what="mean", k=2)
    _raises(r"groups must be one of", m.predict, rows, groups="fresh")
    _raises(r"interval must lie", m.predict, rows, interval=90)
    _raises(r"draws=5000 but the fit holds 600", m.predict, rows, draws=5000)
    _raises(r"positive number", m.predict, rows, exposure=-1)
    _raises(r"groups='new' with what='new_count'", m.predict, rows, what="new_count",
            groups="average")
    _raises(r"not both", m.contrast, rows, rows, shift={"x1": 1})
    _raises(r"nothing to compare", m.contrast, rows)
    _raises(r"'depth', which the model does not use", m.contrast, rows, shift={"depth": 1})
    _raises(r"'site' with 's01' cannot be shifted", m.contrast, rows, shift={"site": "s01"})
    _raises(r"combine='sum'", m.contrast, rows, df.head(5))
    _raises(r"random count", m.contrast, rows, shift={"x1": 1}, what="new_count")
    _raises(r"not a predictor", m.average_comparison, "y")
    _raises(r"levels= is for category", m.average_comparison, "x1", levels=("a", "b"))


def test_plain_families_have_no_zeros_part_probability():
    m, _ = hand_fit("negbin", n_draws=3)
    _raises(r"no zeros part.*what='p_zero'", m.predict, m.data.head(2), what="p_zeros_part")
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        m.predict(m.data.head(2), what="p_zero")


# ================================================================= one wording per option
#: every answer method of a fitted model, with the shared options it takes
ANSWERS = {
    "coefficients": (lambda m, **kw: m.coefficients(**kw), ("interval",)),
    "group_effects": (lambda m, **kw: m.group_effects(**kw), ("interval",)),
    "zero_check": (lambda m, **kw: m.zero_check(**kw), ("interval", "draws", "seed")),
    "count_frequencies": (lambda m, **kw: m.count_frequencies(**kw),
                          ("interval", "draws", "seed")),
    "dispersion_check": (lambda m, **kw: m.dispersion_check(**kw),
                         ("interval", "draws", "seed")),
    "max_count_check": (lambda m, **kw: m.max_count_check(**kw),
                        ("interval", "draws", "seed")),
    "residuals": (lambda m, **kw: m.residuals(**kw), ("draws", "seed")),
    "zero_sources": (lambda m, **kw: m.zero_sources(**kw), ("interval", "draws")),
    "predict": (lambda m, **kw: m.predict(m.data.head(3), **kw),
                ("interval", "draws", "seed", "groups")),
    "prediction_draws": (lambda m, **kw: m.prediction_draws(m.data.head(3), **kw),
                         ("draws", "seed", "groups")),
    "count_distribution": (lambda m, **kw: m.count_distribution(m.data.head(3), **kw),
                           ("draws", "seed", "groups")),
    "contrast": (lambda m, **kw: m.contrast(shift={"x1": 0.5}, **kw),
                 ("interval", "draws", "seed", "groups")),
    "average_comparison": (lambda m, **kw: m.average_comparison("x1", **kw),
                           ("interval", "draws", "seed", "groups")),
}
BAD = {"interval": 1.5, "draws": 10**9, "seed": -1, "groups": "fresh"}


def _message(check, *args) -> str:
    with pytest.raises(bz.BayesziError) as err:
        check(*args)
    return str(err.value)


@pytest.mark.parametrize("option", list(BAD))
def test_every_answer_words_a_bad_option_the_same_way(option):
    m, _ = hand_fit("zinb")
    expected = {"interval": lambda: _message(options.interval_bounds, BAD["interval"]),
                "draws": lambda: _message(options.draw_subset, BAD["draws"], m.n_draws),
                "seed": lambda: _message(options.rng, BAD["seed"]),
                "groups": lambda: _message(options.check_group_mode, BAD["groups"])}[option]()
    if option == "draws":   # more than the fit holds is an error, never "all of them"
        assert "the fit holds 20 posterior draws" in expected
    asked = [name for name, (_, takes) in ANSWERS.items() if option in takes]
    assert len(asked) >= 5
    for name in asked:
        call = ANSWERS[name][0]
        with pytest.raises(bz.BayesziError) as err:
            call(m, **{option: BAD[option]})
        assert str(err.value) == expected, name


def test_a_generator_seed_is_used_as_it_is():
    m, _ = hand_fit("zinb")
    rows = m.data.head(4)
    by_int = m.prediction_draws(rows, what="new_count", groups="new", seed=7)
    by_gen = m.prediction_draws(rows, what="new_count", groups="new",
                                seed=np.random.default_rng(7))
    np.testing.assert_array_equal(by_int.values, by_gen.values)
    gen = np.random.default_rng(7)
    first = m.residuals(seed=gen)["PIT"].to_numpy()
    second = m.residuals(seed=gen)["PIT"].to_numpy()   # the generator has moved on
    assert not np.array_equal(first, second)
    np.testing.assert_array_equal(first, m.residuals(seed=7)["PIT"].to_numpy())
