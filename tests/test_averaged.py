"""Predictions and contrasts averaged over models by weight (bayeszi.answers.averaged).

The fits are hand-built (a design from simulated rows and a posterior written by hand, no
MCMC, as in tests/test_predict.py), so the mixture can be recomputed from the draws'
parameters: the pooled draws are each model's evenly spaced draws (the rule stated in the
module), the mixture's mean is sum_m (n_m / S) mean_m over those draws, and its quantiles are
those of the pooled draws. These are exact identities, so the tolerances are floating-point
ones (1e-10 relative).
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from scipy import special as sc
from simulate import fitted_from_user_draws, simulate

import bayeszi as bz
from bayeszi.answers.averaged import (
    allocate_draws,
    average_contrast,
    average_prediction_draws,
    average_predictions,
    plan_mixture,
)
from bayeszi.answers.contrast import contrast
from bayeszi.answers.predict import predict
from bayeszi.base import options
from bayeszi.families import get_family
from bayeszi.fitting.fitted import FittedModel
from bayeszi.model.design import build_design

pytestmark = pytest.mark.filterwarnings("ignore::bayeszi.BayesziWarning")

DATA, _ = simulate("zip", n=50, seed=11, n_sites=4, site_sd=(0.5, 0.5))
DATA["gear"] = np.random.default_rng(11).choice(["a", "b", "c"], size=len(DATA))
NEW = pd.DataFrame({"x1": [0.0, 1.0, 2.0], "x2": [0, 1, 0], "w": [-1.0, 0.0, 1.0],
                    "exposure": [1.0, 2.0, 1.0], "site": [0, 1, 7]})


def hand_fit(family: str, n_draws: int, seed: int, counts: str = "y ~ x1 + x2"
             ) -> tuple[FittedModel, dict]:
    """A fitted model of DATA with a hand-written posterior (user scale); and its draws."""
    fam = get_family(family)
    spec = bz.make_spec(counts=counts, zeros="~ w" if fam.zeros_kind else None,
                        family=family, exposure="exposure", groups="site")
    design = build_design(DATA, spec)
    rng = np.random.default_rng(seed)
    S, L, P = n_draws, len(design.groups[0].levels), len(design.counts.terms)
    par = {"b": rng.normal(0.3, 0.3, (S, P)), "eff_c": rng.normal(0, 0.5, (S, L))}

    sds = {"counts": np.full(S, 0.5), "zeros": np.full(S, 0.6)}
    effects = {"counts": par["eff_c"]}
    if fam.zeros_kind:
        par["g"] = rng.normal(0.0, 0.3, (S, 2)) + np.array([-0.5, 0.8])
        par["eff_z"] = rng.normal(0, 0.5, (S, L))
        effects["zeros"] = par["eff_z"]
    return fitted_from_user_draws(DATA, spec, par["b"], par.get("g"), None, effects, sds), par


POIS, POIS_PAR = hand_fit("poisson", 40, seed=1)
ZIP, ZIP_PAR = hand_fit("zip", 30, seed=2)
FITS = {"pois": POIS, "zip": ZIP}


def typical_mean_p0(par: dict, df: pd.DataFrame, x: list[str]) -> tuple[np.ndarray, ...]:
    """E[Y] and P(Y = 0) per (draw, row) with group effects 0, from the hand parameters."""
    X = np.column_stack([np.ones(len(df))] + [df[c].to_numpy(float) for c in x])
    mu = np.exp(par["b"] @ X.T + np.log(df["exposure"].to_numpy(float)))
    if "g" not in par:
        return mu, np.exp(-mu)
    p = sc.expit(par["g"] @ np.column_stack([np.ones(len(df)), df["w"]]).T)
    return (1 - p) * mu, p + (1 - p) * np.exp(-mu)


# ================================================================= the allocation rule
def test_allocate_draws_largest_remainder() -> None:
    assert allocate_draws({"a": 0.5, "b": 0.25, "c": 0.25}, 6) == {"a": 3, "b": 2, "c": 1}
    assert allocate_draws({"a": 1 / 3, "b": 1 / 3, "c": 1 / 3}, 10) == {"a": 4, "b": 3, "c": 3}
    assert allocate_draws({"a": 0.7, "b": 0.3}, 30) == {"a": 21, "b": 9}
    rng = np.random.default_rng(0)
    for _ in range(50):
        w = rng.dirichlet(np.ones(4))
        got = allocate_draws(dict(zip("abcd", w, strict=True)), 997)
        assert sum(got.values()) == 997
        assert all(abs(got[n] - wi * 997) < 1 for n, wi in zip("abcd", w, strict=True))


def test_plan_leaves_out_small_weights_and_renormalises() -> None:
    mix = plan_mixture(FITS, {"pois": 0.005, "zip": 0.995})
    assert mix.left_out == ["pois"] and mix.weights == {"zip": 1.0}
    assert mix.draws == {"zip": 30} and mix.total == 30
    mix = plan_mixture(FITS, {"pois": 3, "zip": 1}, draws=20)
    assert mix.weights == {"pois": 0.75, "zip": 0.25} and mix.draws == {"pois": 15, "zip": 5}
    table = pd.DataFrame({"stacking weight": [0.4, 0.6]}, index=["zip", "pois"])
    assert plan_mixture(FITS, table).draws == {"pois": 18, "zip": 12}


# ================================================================= one model at weight ~1
@pytest.mark.parametrize("groups", ["known", "new", "average", "typical"])
def test_one_model_at_weight_one_equals_its_predictions(groups: str) -> None:
    whats = ["mean", "rate", "p_zero", "p_zeros_part", "at_least", "count_part_mean"]
    if groups != "average":
        whats.append("new_count")
    data = DATA.iloc[:12] if groups == "known" else NEW
    got = average_predictions(FITS, data, what=whats, groups=groups, k=2, n_average=5,
                              weights={"pois": 0.004, "zip": 0.996}, draws=17, seed=9)
    want = predict(ZIP, data, what=whats, groups=groups, k=2, n_average=5, draws=17, seed=9)
    pd.testing.assert_frame_equal(got, want, check_exact=True)
    assert got.attrs["left_out"] == ["pois"] and got.attrs["draws_per_model"] == {"zip": 17}


def test_one_model_contrast_equals_its_contrast() -> None:
    w = {"pois": 0.0, "zip": 1.0}
    for kw in ({"shift": {"x1": 0.5}}, {"set_to": {"x2": 1}}):
        got = average_contrast(FITS, NEW, what="p_nonzero", groups="new", weights=w, seed=4,
                               **kw)
        want = contrast(ZIP, NEW, what="p_nonzero", groups="new", seed=4, **kw)
        pd.testing.assert_frame_equal(got, want, check_exact=True)
    got = average_contrast(FITS, shift={"x1": 1.0}, combine="mean", weights=w, seed=2)
    want = contrast(ZIP, shift={"x1": 1.0}, combine="mean", seed=2)
    pd.testing.assert_frame_equal(got, want, rtol=1e-12)  # sums taken in other chunks
    assert got.attrs["left_out"] == ["pois"]


# ================================================================= two models: closed form
def _pooled(weights: dict[str, float], df: pd.DataFrame) -> tuple[np.ndarray, np.ndarray]:
    """The mixture's E[Y] and P(Y = 0) draws by the stated rule, from the hand parameters."""
    mix = plan_mixture(FITS, weights)
    means, p0s = [], []
    for name, par in (("pois", POIS_PAR), ("zip", ZIP_PAR)):
        ids = options.draw_subset(mix.draws[name], len(par["b"]))
        ids = np.arange(len(par["b"])) if ids is None else ids
        m, p0 = typical_mean_p0(par, df, ["x1", "x2"])
        means.append(m[ids])
        p0s.append(p0[ids])
    return np.concatenate(means), np.concatenate(p0s)


def test_two_models_match_the_closed_form() -> None:
    weights = {"pois": 0.7, "zip": 0.3}
    got = average_predictions(FITS, NEW, what=["mean", "p_zero"], groups="typical",
                              weights=weights, interval=0.8)
    mean, p0 = _pooled(weights, NEW)
    assert len(mean) == 30 and got.attrs["draws_per_model"] == {"pois": 21, "zip": 9}
    for name, v in (("mean", mean), ("p_zero", p0)):
        t = got[got["quantity"] == got["quantity"].unique()[["mean", "p_zero"].index(name)]]
        n1 = 21
        closed = (n1 * v[:n1].mean(0) + (30 - n1) * v[n1:].mean(0)) / 30
        np.testing.assert_allclose(t["mean"], closed, rtol=1e-10)
        np.testing.assert_allclose(t["sd"], v.std(0, ddof=1), rtol=1e-10)
        np.testing.assert_allclose(t["10%"], np.quantile(v, 0.1, axis=0), rtol=1e-10)
        np.testing.assert_allclose(t["90%"], np.quantile(v, 0.9, axis=0), rtol=1e-10)
    # the mixture lies between the models: its mean is a weighted average of theirs
    only = [average_predictions(FITS, NEW, groups="typical", weights=w)["mean"]
            for w in ({"pois": 1, "zip": 0}, {"pois": 0, "zip": 1})]
    lo, hi = np.minimum(*only), np.maximum(*only)
    assert np.all((got["mean"].iloc[:3] >= lo - 1e-12) & (got["mean"].iloc[:3] <= hi + 1e-12))


def test_draws_carry_their_model_and_position() -> None:
    d = average_prediction_draws(FITS, NEW, "mean", groups="typical",
                                 weights={"pois": 0.5, "zip": 0.5}, draws=10)
    assert list(d["model"].values) == ["pois"] * 5 + ["zip"] * 5
    assert list(d["model_draw"].values[:5]) == options.draw_subset(5, 40).tolist()
    mean, _ = typical_mean_p0(ZIP_PAR, NEW, ["x1", "x2"])
    np.testing.assert_allclose(d.values[5:], mean[options.draw_subset(5, 30)], rtol=1e-10)


def test_contrast_of_the_mixture_matches_the_closed_form() -> None:
    weights = {"pois": 0.6, "zip": 0.4}
    got = average_contrast(FITS, NEW, set_to={"x2": 1}, groups="typical", weights=weights)
    mix = plan_mixture(FITS, weights)
    ratios = []
    for name, par in (("pois", POIS_PAR), ("zip", ZIP_PAR)):
        ids = options.draw_subset(mix.draws[name], len(par["b"]))
        ids = np.arange(len(par["b"])) if ids is None else ids
        r = np.exp(par["b"][ids, 2][:, None] * (1 - NEW["x2"].to_numpy()[None, :]))
        ratios.append(r)  # E[Y] ratio when x2 goes to 1: exp(b_x2 (1 - x2))
    r = np.concatenate(ratios)
    np.testing.assert_allclose(got["ratio (median)"], np.median(r, axis=0), rtol=1e-10)
    np.testing.assert_allclose(got["ratio 5%"], np.quantile(r, 0.05, axis=0), rtol=1e-10)
    np.testing.assert_allclose(got["P(ratio > 1)"], (r > 1).mean(0), rtol=1e-12)
    assert got.attrs["not_using_change"] == [] and got.attrs["weights"] == weights


def test_model_without_the_changed_column_keeps_its_weight_with_ratio_one() -> None:
    other, _ = hand_fit("zip", 30, seed=3, counts="y ~ x1")
    fits = {"pois": POIS, "zip1": other}
    got = average_contrast(fits, NEW, set_to={"x2": 1}, groups="typical",
                           weights={"pois": 0.5, "zip1": 0.5}, combine="mean")
    assert got.attrs["not_using_change"] == ["zip1"]
    # zip1's 15 draws have ratio exactly 1; a pois draw raises the mean iff b_x2 > 0
    ids = options.draw_subset(15, 40)
    assert got["P(ratio > 1)"].iloc[0] == (POIS_PAR["b"][ids, 2] > 0).sum() / 30
    assert got.attrs["draws_per_model"] == {"pois": 15, "zip1": 15}
    with pytest.raises(bz.BayesziError, match="no model with weight uses"):
        average_contrast(fits, NEW, set_to={"x2": 1}, weights={"pois": 0, "zip1": 1})


# ================================================================= seeds, totals, errors
def test_same_seed_same_table_other_seed_other_table() -> None:
    kw = dict(what=["new_count", "mean"], groups="new", weights={"pois": 0.5, "zip": 0.5})
    a = average_predictions(FITS, NEW, seed=5, **kw)
    b = average_predictions(FITS, NEW, seed=5, **kw)
    c = average_predictions(FITS, NEW, seed=6, **kw)
    pd.testing.assert_frame_equal(a, b, check_exact=True)
    assert not a["mean"].equals(c["mean"])


def test_combined_total_is_the_sum_of_the_pooled_draws() -> None:
    kw = dict(what="new_count", groups="new", weights={"pois": 0.3, "zip": 0.7}, seed=8)
    got = average_predictions(FITS, NEW, combine="sum", **kw)
    total = average_prediction_draws(FITS, NEW, **kw).sum("row").values
    assert got.index[0] == "sum over rows (3 rows)"
    assert got["mean"].iloc[0] == pytest.approx(total.mean(), rel=1e-12)
    assert got["95%"].iloc[0] == np.quantile(total, 0.95, method="inverted_cdf")


def test_quantities_a_model_cannot_give_name_the_model() -> None:
    with pytest.raises(bz.BayesziError, match="model 'pois'.*no zeros part"):
        average_predictions(FITS, NEW, what="p_zeros_part", weights={"pois": 1, "zip": 1})
    hurdle, _ = hand_fit("hurdle-poisson", 30, seed=4)
    with pytest.raises(bz.BayesziError, match="means different things.*zip.*hurdle"):
        average_predictions({"zip": ZIP, "hurdle": hurdle}, NEW, what="count_part_mean",
                            weights={"zip": 1, "hurdle": 1})


def test_bad_weights_and_settings_are_refused() -> None:
    with pytest.raises(bz.BayesziError, match="missing \\['zip'\\]"):
        average_predictions(FITS, NEW, weights={"pois": 1.0})
    with pytest.raises(bz.BayesziError, match=">= 0"):
        average_predictions(FITS, NEW, weights={"pois": -1.0, "zip": 2.0})
    with pytest.raises(bz.BayesziError, match="holds 30"):
        average_predictions(FITS, NEW, weights={"pois": 0.0, "zip": 1.0}, draws=35)
    with pytest.raises(bz.BayesziError, match="min_weight"):
        average_predictions(FITS, NEW, weights={"pois": 0.5, "zip": 0.5}, min_weight=0.6)
    with pytest.raises(bz.BayesziError, match="combine"):
        average_predictions(FITS, NEW, weights={"pois": 0.5, "zip": 0.5}, combine="total")
    other = DATA.copy()
    other.loc[other.index[0], "y"] += 1
    fit_b, _ = hand_fit("poisson", 10, seed=1)
    fit_b.data = other[fit_b.design.used_columns]
    with pytest.raises(bz.BayesziError, match="different data"):
        average_predictions({"a": POIS, "b": fit_b}, NEW, weights={"a": 1, "b": 1})


def test_public_names() -> None:
    assert bz.average_predictions is average_predictions
    assert bz.average_contrast is average_contrast


# ================================================================= study file and report
def _section(predictions: str, weights: dict[str, float]):
    """The predictions section for FITS with the given comparison weights (no LOO run)."""
    from bayeszi.app.report.context import ReportContext, ReportInput, WarningLog
    from bayeszi.app.report.sections.predictions import section_predictions
    from bayeszi.app.study import Contrast, Scenario

    scn = Scenario("deep", {"x1": 1.0, "x2": 0, "w": 0.0, "site": 0}, {"x1": (0.0, 2.0)},
                   groups="typical")
    inp = ReportInput("t", FITS, DATA, seed=3, scenarios=[scn],
                      contrasts=[Contrast("x2 on", "deep", {"x2": 1})], predictions=predictions)
    comparison = pd.DataFrame({"stacking weight": list(weights.values())}, index=list(weights))
    ctx = ReportContext(inp=inp, log=WarningLog(), loo={}, comparison=comparison,
                        preferred="pois", preferred_reason="", coefficients={}, problems={})
    return section_predictions(ctx), scn


def _table(section, name: str) -> pd.DataFrame:
    return next(b.frame for b in section.blocks if getattr(b, "name", None) == name)


def test_report_shows_the_averaged_model_with_the_comparison_weights() -> None:
    weights = {"zip": 0.55, "pois": 0.45}
    sec, scn = _section("both", weights)
    preds = _table(sec, "scenario_predictions")
    assert list(preds["model"].unique()) == ["pois", "zip", "averaged (stacking)"]
    got = preds[preds["model"] == "averaged (stacking)"]
    want = average_predictions(FITS, scn.frame("exposure"), what=["mean", "p_zero"],
                               groups="typical", weights=weights, seed=3)
    np.testing.assert_array_equal(got["mean"], want["mean"])
    assert list(got["x1"]) == [0.0, 2.0, 0.0, 2.0]
    contrasts = _table(sec, "contrasts")
    assert (contrasts["model"] == "averaged (stacking)").sum() == 4  # 2 rows x mean, p_zero
    text = " ".join(b.text for b in sec.blocks if hasattr(b, "text"))
    assert "No model carries more than 90%" in text and "averaging matters" in text
    only, _ = _section("averaged", weights)
    assert list(_table(only, "scenario_predictions")["model"].unique()) == \
        ["averaged (stacking)"]


def test_report_says_when_averaging_changes_little() -> None:
    sec, _ = _section("models", {"zip": 0.97, "pois": 0.03})
    text = " ".join(b.text for b in sec.blocks if hasattr(b, "text"))
    assert "zip carries more than 90%" in text and "changes little" in text
    assert "averaged (stacking)" not in set(_table(sec, "scenario_predictions")["model"])


def test_study_key_predictions() -> None:
    from bayeszi.app.study import parse_study

    raw = {"study": {"data": "d.csv", "response": "y", "predictions": "both"},
           "model": [{"name": "p", "family": "poisson", "counts": "x"}]}
    assert parse_study(raw, "/tmp/s.toml").predictions == "both"
    del raw["study"]["predictions"]
    assert parse_study(raw, "/tmp/s.toml").predictions == "models"
    raw["study"]["predictions"] = "mixed"
    with pytest.raises(bz.BayesziError, match="'predictions' in \\[study\\] must be one of"):
        parse_study(raw, "/tmp/s.toml")


# ================================================================= average predictive comparisons
def test_one_model_comparison_equals_its_average_comparison() -> None:
    from bayeszi.answers.contrast import average_comparison

    w = {"pois": 0.0, "zip": 1.0}
    for kw in ({"pairs": 10_000}, {"pairs": 300}, {"groups": "new", "pairs": 300}):
        got = bz.averaged_predictive_comparison(FITS, "x1", what="rate", weights=w, seed=5,
                                                **kw)
        want = average_comparison(ZIP, "x1", what="rate", seed=5, **kw)
        pd.testing.assert_frame_equal(got, want, check_exact=True)
    assert got.attrs["left_out"] == ["pois"]


def test_mixture_comparison_mean_is_the_weighted_mean_of_the_models() -> None:
    from bayeszi.answers.contrast import average_comparison

    poisw, _ = hand_fit("poisson", 40, seed=1, counts="y ~ x1 + x2 + w")  # same inputs as zip
    fits = {"pois": poisw, "zip": ZIP}
    weights = {"pois": 0.7, "zip": 0.3}
    got = bz.averaged_predictive_comparison(fits, "x2", groups="typical", weights=weights)
    per = [average_comparison(f, "x2", groups="typical", draws=n)["mean"].iloc[0]
           for f, n in ((poisw, 21), (ZIP, 9))]
    assert got["mean"].iloc[0] == pytest.approx((21 * per[0] + 9 * per[1]) / 30, rel=1e-10)
    assert got.attrs["draws_per_model"] == {"pois": 21, "zip": 9}
    assert got["pairs"].iloc[0] == (DATA["x2"] == 0).sum() * (DATA["x2"] == 1).sum() * 2
    with pytest.raises(bz.BayesziError, match="not a predictor of any model"):
        bz.averaged_predictive_comparison(fits, "site", weights=weights)


def test_one_model_comparison_of_a_category_equals_its_average_comparison() -> None:
    from bayeszi.answers.contrast import average_comparison

    gear, _ = hand_fit("zip", 30, seed=6, counts="y ~ x1 + C(gear)")
    fits = {"pois": POIS, "gear": gear}
    for levels in (None, ("c", "a")):
        got = bz.averaged_predictive_comparison(fits, "gear", what="p_zero", levels=levels,
                                                weights={"pois": 0.001, "gear": 0.999})
        want = average_comparison(gear, "gear", what="p_zero", levels=levels)
        pd.testing.assert_frame_equal(got, want, check_exact=True)
    both = bz.averaged_predictive_comparison(fits, "gear", weights={"pois": 0.5, "gear": 0.5})
    assert both.attrs["not_using_input"] == ["pois"]
    assert list(both["comparison"]) == ["b vs a", "c vs a"]


def test_default_weights_are_the_stacking_weights_of_compare() -> None:
    from scipy import stats

    from bayeszi.engine import loglik

    fits = {}
    for name, family, seed, S in (("pois", "poisson", 1, 40), ("zip", "zip", 2, 30)):
        fit, par = hand_fit(family, S, seed)
        levels = [str(v) for v in fit.design.groups[0].levels]
        site = np.array([levels.index(str(s)) for s in DATA["site"]])
        X = np.column_stack([np.ones(len(DATA)), DATA["x1"], DATA["x2"]])
        mu = np.exp(par["b"] @ X.T + np.log(DATA["exposure"].to_numpy()) + par["eff_c"][:, site])
        y = DATA["y"].to_numpy()
        ll = stats.poisson.logpmf(y, mu)
        if family == "zip":
            zeta = par["g"] @ np.column_stack([np.ones(len(DATA)), DATA["w"]]).T
            p = sc.expit(zeta + par["eff_z"][:, site])
            ll = np.log(np.where(y == 0, p, 0.0) + (1 - p) * np.exp(ll))
        loglik.store(fit.idata, ll[None], obs=list(range(len(DATA))))
        fits[name] = fit
    table = bz.rank_models(fits)
    assert abs(table["stacking weight"].sum() - 1) < 1e-9
    got = average_predictions(fits, NEW, groups="typical")
    want = average_predictions(fits, NEW, groups="typical", weights=table)
    pd.testing.assert_frame_equal(got, want, check_exact=True)
    assert got.attrs["given_weights"] == pytest.approx(table["stacking weight"].to_dict(),
                                                      abs=1e-12)
