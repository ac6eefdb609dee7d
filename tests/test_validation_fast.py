"""The validation machinery (validation/), checked quickly: the prior of the simulation is the
prior of the fit, the helper formulas agree with independent ones, and a handful of SBC and
coverage replicates run end to end. The full runs are in tests/test_validation_slow.py and
docs/validation.md.
"""

from __future__ import annotations

import os
import sys

import numpy as np
import pandas as pd
import pytest
from scipy import stats

import bayeszi as bz
from bayeszi.model.design import build_design
from bayeszi.model.priors import resolve

sys.path.insert(0, os.path.dirname(os.path.dirname(os.path.abspath(__file__))))

from validation import common as C  # noqa: E402
from validation import coverage, randhie, sbc  # noqa: E402


def _data(family: str, n: int = 90, n_groups: int = 6, seed: int = 4):
    rng = np.random.default_rng(seed)
    df = C.covariates(rng, n, n_groups)
    truth = C.draw_truth(rng, family, C.SimPrior(), n_groups)
    df["y"] = C.simulate_counts(rng, family, df, truth)
    return df, truth


@pytest.mark.parametrize("family", ["poisson", "zinb", "hurdle-negbin"])
def test_fit_prior_is_the_simulation_prior(family):
    """SBC is exact only if bayeszi fits under the prior the truth was drawn from. bayeszi's
    convention (bayeszi/model/priors.py): a slope prior is per unit of the input and is carried to
    the internal scale by the input's scale; an intercept prior applies to the centred
    intercept, the predictor's centre being the input's mean in the fitted data."""
    df, truth = _data(family)
    prior = C.SimPrior()
    spec = bz.make_spec(C.COUNTS, C.ZEROS, family, exposure="exposure", groups=C.GROUP,
                        priors=prior.bayeszi_priors(family, True))
    design = build_design(df, spec)
    ps = resolve(design, spec.priors)
    d = design.counts
    np.testing.assert_allclose(d.center[1:], df[["x", "b"]].mean().to_numpy(), rtol=1e-12)
    assert ps.counts["Intercept"] == bz.priors.normal(mean=prior.counts_intercept[0],
                                                      sd=prior.counts_intercept[1])
    for j, term in enumerate(d.terms[1:], start=1):
        p = ps.counts[term]
        assert p.distribution == "normal" and p["mean"] == 0.0
        assert p["sd"] == pytest.approx(prior.counts_slope_sd * d.scale[j], rel=1e-12)
    assert ps.group_sd["counts"] == bz.priors.half_normal(sd=prior.group_sd[0])
    # the user-scale truth the validation ranks is bayeszi's own map of the internal truth
    a, bx, bb = truth["counts_centred"]
    user = d.to_user_scale(np.array([a, bx * d.scale[1], bb * d.scale[2]]))
    q = C.true_quantities(family, df, truth, groups=True)
    np.testing.assert_allclose([q["counts: Intercept"], q["counts: x"], q["counts: b"]], user,
                               rtol=1e-12)
    if design.zeros is not None:
        assert ps.zeros["Intercept"] == bz.priors.normal(mean=prior.zeros_intercept[0],
                                                         sd=prior.zeros_intercept[1])
        np.testing.assert_allclose(design.zeros.center[1], df["w"].mean(), rtol=1e-12)
    if bz.get_family(family).has_dispersion:
        assert ps.dispersion == bz.priors.exponential(rate=prior.dispersion_rate)


@pytest.mark.parametrize("family", list(bz.FAMILY_NAMES))
def test_expected_count_agrees_with_bayeszi_closed_form(family):
    """validation's E[Y] is written out independently (Lambert 1992, Technometrics, for the
    ZI mean; NB2 f(0) = (1 + alpha mu)^(-1/alpha)); it must match bayeszi.families."""
    rng = np.random.default_rng(1)
    ec, ez, la = rng.normal(0.5, 1.0, 50), rng.normal(0.0, 1.5, 50), np.log(0.7)
    fam = bz.get_family(family)
    ours = C.expected_count(family, ec, ez if fam.zeros_kind else None,
                            la if fam.has_dispersion else None)
    theirs = fam.mean(ec, ez if fam.zeros_kind else None, la if fam.has_dispersion else None)
    np.testing.assert_allclose(ours, theirs, rtol=1e-10)


def test_rank_uniformity_is_the_textbook_chi_square():
    """Pearson's statistic sum (O - E)^2 / E on equal bins, df = bins - 1 (common practice,
    no source), recomputed by hand against the helper."""
    ranks = np.array([0, 5, 24, 25, 49, 50, 51, 74, 75, 99, 99, 98, 10, 60, 80, 30, 31, 2,
                      3, 4])
    res = C.rank_uniformity(ranks, n_ranks=100, bins=4)
    observed = np.array([7, 4, 4, 5])  # counted by hand: ranks 0-24, 25-49, 50-74, 75-99
    assert res["observed"] == observed.tolist()
    stat = float(((observed - 5.0) ** 2 / 5.0).sum())
    assert res["chi2"] == pytest.approx(stat)
    assert res["p"] == pytest.approx(stats.chi2.sf(stat, 3))
    assert C.rank_bins(100, 20) == 4 and C.rank_bins(100, 50) == 10
    with pytest.raises(ValueError, match="0 .. 99"):
        C.rank_uniformity([0, 100], n_ranks=100)


def test_ranks_thinning_and_binomial_band():
    assert C.rank_of(0.5, np.array([0.1, 0.4, 0.6, 0.9])) == 2
    idx = C.thin_index(600, 99)
    assert idx[0] == 0 and idx[-1] == 599 and len(np.unique(idx)) == 99
    lo, hi = C.binomial_band(50, 0.9, 0.99)
    assert stats.binom.cdf(lo - 1, 50, 0.9) < 0.005 <= stats.binom.cdf(lo, 50, 0.9)
    assert hi <= 50 and C.bonferroni([0.2, 0.004, np.nan]) == pytest.approx(0.008)


def test_sbc_runs_end_to_end(tmp_path):
    """Three SBC replicates of the Poisson family: ranks in range, the uniformity test and
    the coverage table computed, figures written. The truth also sits within 5 posterior sds
    of the posterior mean (P(|z| > 5) is below 1e-6 for a near-normal posterior, so a sign
    or scale error in the pipeline fails here)."""
    cfg = sbc.Config(rows=60, draws=100, warmup_steps=150, seed=3)
    res = sbc.run(["poisson"], (False,), reps=3, cfg=cfg, out=str(tmp_path), quiet=True)
    ranks = res["ranks"]
    assert (ranks["status"] == "ok").all() and len(ranks) == 3 * 4
    assert ranks["rank"].between(0, cfg.keep).all()
    assert set(ranks["quantity"]) == {"counts: Intercept", "counts: x", "counts: b",
                                      "mean count, row 1"}
    z = (ranks["truth"] - ranks["post_mean"]) / ranks["post_sd"]
    assert z.abs().max() < 5, ranks[["quantity", "truth", "post_mean", "post_sd"]]
    unif = res["uniformity"].set_index("quantity")
    assert len(unif) == 4 and (unif["config"] == "no groups").all()
    for quantity, sub in ranks.groupby("quantity"):  # each p is that quantity's own test
        again = C.rank_uniformity(sub["rank"].astype(int), int(sub["n_ranks"].iloc[0]))
        assert unif.loc[quantity, "p"] == pytest.approx(again["p"], rel=1e-12), quantity
    fam = res["families"].iloc[0]
    assert fam["family"] == "poisson" and fam["replicates (no groups)"] == 3
    # Bonferroni over the 4 quantities: min(1, 4 x the smallest p)
    assert fam["smallest p"] == pytest.approx(unif["p"].min(), rel=1e-12)
    assert fam["Bonferroni p"] == pytest.approx(min(1.0, 4 * unif["p"].min()), rel=1e-12)
    for name in ("sbc_ranks.csv", "sbc_uniformity.csv", "sbc_families.csv",
                 "sbc_coverage.csv", "sbc_run.json", "sbc_poisson.png"):
        assert (tmp_path / name).exists(), name
    again = sbc.summarise(out=str(tmp_path), figures=False)  # rebuilt from the CSV alone
    pd.testing.assert_frame_equal(again["uniformity"], res["uniformity"])


def test_one_coverage_replicate():
    """One coverage replicate of ZIP with sites: every reported interval is ordered and
    the truth lies within a few interval widths of it."""
    cfg = coverage.Config(rows=120, n_groups=6, draws=150, warmup_steps=200, seed=5)
    rows = pd.DataFrame(coverage.replicate("zip", 0, cfg))
    assert (rows["status"] == "ok").all()
    assert set(rows["quantity"]) == {
        "counts: Intercept", "counts: x", "counts: b", "zeros: Intercept", "zeros: w",
        "counts site effects: sd", "zeros site effects: sd",
        *[f"mean count, row {i}" for i in (1, 2, 3)],
        *[f"mean count, new site, row {i}" for i in (1, 2, 3)]}
    assert (rows["lo90"] < rows["hi90"]).all()
    width = rows["hi90"] - rows["lo90"]
    mid = (rows["hi90"] + rows["lo90"]) / 2
    assert ((rows["truth"] - mid).abs() < 3 * width).all(), rows
    covered = rows.set_index("quantity")["covered90"].astype(bool)
    assert ((rows["lo90"] <= rows["truth"]) & (rows["truth"] <= rows["hi90"])).to_numpy() \
        .tolist() == rows["covered90"].astype(bool).tolist()
    summ = coverage.summary(rows).set_index("quantity")
    assert summ["n"].eq(1).all()
    np.testing.assert_array_equal(summ["rate"], covered[summ.index].astype(float))


def _poisson_two_groups(n0: int = 300, n1: int = 40, a: float = 0.4, b: float = 0.6,
                        seed: int = 8):
    """A Poisson GLM log mu = a + b x with binary x: its profile log-likelihood in b has a
    closed form (below), which the randhie reference machinery is checked against."""
    import statsmodels.api as sm

    rng = np.random.default_rng(seed)
    x = np.r_[np.zeros(n0), np.ones(n1)]
    y = rng.poisson(np.exp(a + b * x))
    X = sm.add_constant(x)
    model = sm.Poisson(y, X)
    res = model.fit(disp=0)
    piece = randhie.Piece(model, np.asarray(res.params), np.asarray(res.bse),
                          [("counts", "Intercept"), ("counts", "x")], float(res.llf))

    def closed_profile(beta: float) -> float:
        # maximising over a for fixed b: exp(a) = Y / (n0 + n1 e^b), so that
        # l_p(b) = Y log(Y / (n0 + n1 e^b)) + b Y1 - Y - sum log y!  (common practice,
        # derived here; the constant cancels against the maximum)
        Y, Y1 = y.sum(), y[x == 1].sum()
        return Y * np.log(Y / (n0 + n1 * np.exp(beta))) + beta * Y1 - Y

    peak = closed_profile(float(res.params[1]))
    return piece, (lambda beta: closed_profile(beta) - peak)


def test_randhie_profile_matches_the_closed_form():
    """Piece.profile (numerical re-maximisation over the other parameters through
    statsmodels' score and Hessian) equals the closed-form profile of a two-group Poisson
    GLM to 1e-6 in log-likelihood, at several distances from the MLE."""
    piece, closed = _poisson_two_groups()
    v, se = piece.params[1], piece.bse[1]
    for k in (-4, -2, -0.5, 1, 3):
        assert piece.profile(1, v + k * se) == pytest.approx(closed(v + k * se), abs=1e-6)
    down, up = randhie.normal_shape(piece, 1)
    assert down == pytest.approx(closed(v - 2 * se), abs=1e-6)
    assert up == pytest.approx(closed(v + 2 * se), abs=1e-6)


def test_randhie_profile_posterior_matches_quadrature():
    """profile_posterior (a 49-point grid, interpolated) against adaptive quadrature
    (scipy.integrate.quad) of the closed-form profile x a normal prior: mean and sd agree
    within 2% of the sd. With only 40 records in the x = 1 group the likelihood is not
    quite normal, and the prior N(0, 0.5) moves the mean by more than 0.1 se."""
    from scipy import integrate

    piece, closed = _poisson_two_groups()
    prior = bz.priors.normal(mean=0.0, sd=0.5)
    v, se = piece.params[1], piece.bse[1]
    lo, hi = min(v - 8 * se, -2.0), max(v + 8 * se, 2.0)

    def dens(t: float) -> float:
        return np.exp(closed(t) - 0.5 * (t / prior["sd"]) ** 2)

    z = integrate.quad(dens, lo, hi, points=[v])[0]
    mean = integrate.quad(lambda t: t * dens(t), lo, hi, points=[v])[0] / z
    var = integrate.quad(lambda t: (t - mean) ** 2 * dens(t), lo, hi, points=[v])[0] / z
    got_mean, got_sd = randhie.profile_posterior(piece, 1, prior)
    assert got_mean == pytest.approx(mean, abs=0.02 * np.sqrt(var))
    assert got_sd == pytest.approx(np.sqrt(var), rel=0.02)
    flat_mean, _ = randhie.profile_posterior(piece, 1, None)
    assert abs(flat_mean - v) < 0.2 * se  # the prior did move it: N(0, 0.5) vs MLE ~0.6
    assert abs(mean - flat_mean) > 0.1 * se
