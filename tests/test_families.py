"""Tests of bayeszi.families against outside references (no MCMC; all fast).

References used (named beside each check):
- scipy.stats.poisson / scipy.stats.nbinom log-pmfs, composed by hand into the zero-inflated and
  hurdle pmfs (nbinom with n = 1/alpha, p = 1/(1 + alpha mu)).
- Where scipy itself is inaccurate (see ``_scipy_nb_unreliable``), an exact product formula
  summed with ``math.fsum``, and a few points against mpmath at 50 digits (a test dependency).
- ZIP moments and P(extra zero | zero): Lambert (1992), Technometrics 34(1), 1-14.
- ZINB variance mu(1-p)(1+mu(p+alpha)) with NB variance mu + alpha mu^2: the usual "NB2"
  parametrisation (common practice; the formula also follows from the mixture in one line).
- Hurdle moments: derived below from the truncated pmf (our own derivation, stated in a comment).
"""

from __future__ import annotations

import doctest
import functools
import itertools
import math

import numpy as np
import pandas as pd
import pytensor
import pytensor.tensor as pt
import pytest
from scipy import special as sc
from scipy import stats

from bayeszi.base.errors import BayesziError
from bayeszi.base.spec import ModelSpec
from bayeszi.families import FAMILY_NAMES, Family, get_family, kernels, mechanisms, numerics
from bayeszi.families import family as family_module
from bayeszi.model.design import build_design
from bayeszi.model.patterns import find_patterns, pattern_logp

# ----------------------------------------------------------------------------- grids
# p within 1e-12 of 0 and 1: eta_z = logit(p) written exactly, log((1 - 1e-12) / 1e-12).
_LOGIT_EDGE = math.log(1e12 - 1.0)
P_ETA = (-_LOGIT_EDGE, math.log(0.3 / 0.7), _LOGIT_EDGE)  # p = 1e-12, 0.3, 1 - 1e-12
MU_GRID = (1e-6, 1e-3, 1.0, 50.0, 1e6)
ALPHA_GRID = (1e-6, 0.5, 1e3)
Y_GRID = (0, 1, 2, 7, 10_000, 1_000_000)

# Tolerance for log-pmfs: 1e-8 relative, or 1e-10 absolute on the log scale (a 1e-10 relative
# error in the probability) for values near 0. Both references are accurate to ~1e-10 here.
RTOL, ATOL = 1e-8, 1e-10


def _grid(families_uses_alpha: bool):
    alphas = ALPHA_GRID if families_uses_alpha else (1.0,)
    pts = np.array(list(itertools.product(Y_GRID, MU_GRID, P_ETA, alphas)), dtype=float)
    return pts[:, 0], pts[:, 1], pts[:, 2], pts[:, 3]


# ----------------------------------------------------------------------------- references
def _scipy_nb_unreliable(mu: float, alpha: float) -> bool:
    """scipy's nbinom takes p = 1/(1 + alpha mu); when alpha mu < 1e-7 the double nearest to p
    leaves 1 - p with at most ~9 correct digits, so y log(1 - p) and log(1 - p^n) lose more than
    our 1e-8 tolerance (checked against the product formula: errors up to 1e-4 at alpha mu=1e-12).
    """
    return alpha * mu < 1e-7


@functools.cache
def _nb_logf_product(y: int, mu: float, alpha: float) -> float:
    """Exact NB log-pmf from Gamma(y + theta)/Gamma(theta) = prod_{j<y} (theta + j), i.e.
    log f = sum_j log1p(j alpha) + y log mu - lgamma(y + 1) - (1/alpha + y) log1p(alpha mu),
    every term accurate to rounding and summed exactly with math.fsum."""
    terms = np.log1p(np.arange(int(y), dtype=float) * alpha).tolist()
    terms += [y * math.log(mu), -math.lgamma(y + 1.0), -(1.0 / alpha + y) * math.log1p(alpha * mu)]
    return math.fsum(terms)


def ref_count_logf(y: float, mu: float, alpha: float, nb: bool) -> float:
    if not nb:
        return float(stats.poisson.logpmf(y, mu))
    if _scipy_nb_unreliable(mu, alpha):
        return _nb_logf_product(int(y), mu, alpha)
    return float(stats.nbinom.logpmf(y, 1.0 / alpha, 1.0 / (1.0 + alpha * mu)))


def ref_count_log1m_f0(mu: float, alpha: float, nb: bool) -> float:
    """log(1 - f(0)) = log P(count > 0)."""
    if not nb:
        return float(stats.poisson.logsf(0, mu))
    if _scipy_nb_unreliable(mu, alpha):
        # closed form 1 - f(0) = 1 - (1 + alpha mu)^(-1/alpha), via expm1/log1p (exact to rounding)
        return math.log(-math.expm1(-math.log1p(alpha * mu) / alpha))
    return float(stats.nbinom.logsf(0, 1.0 / alpha, 1.0 / (1.0 + alpha * mu)))


def ref_logpmf(fam: Family, y: float, mu: float, eta_z: float, alpha: float) -> float:
    """Hand-built composition: ZI P(0) = p + (1-p) f(0), P(y) = (1-p) f(y);
    hurdle P(0) = p, P(y) = (1-p) f(y) / (1 - f(0))."""
    nb = fam.has_dispersion
    logf = ref_count_logf(y, mu, alpha, nb)
    if fam.zeros_kind is None:
        return logf
    log_p, log_1mp = float(sc.log_expit(eta_z)), float(sc.log_expit(-eta_z))
    if fam.zeros_kind == "inflation":
        if y == 0:
            return float(np.logaddexp(log_p, log_1mp + logf))
        return log_1mp + logf
    if y == 0:
        return log_p
    return log_1mp + logf - ref_count_log1m_f0(mu, alpha, nb)


def _reference_on_grid(fam: Family):
    y, mu, ez, alpha = _grid(fam.has_dispersion)
    ref = np.array([ref_logpmf(fam, *pt_) for pt_ in zip(y, mu, ez, alpha, strict=True)])
    return y, np.log(mu), ez, np.log(alpha), ref


@functools.cache
def _graph_fn(name: str, y: tuple[int, ...], grads: bool):
    """The model graph's density of the counts ``y`` (``pattern_logp``, weighted=False, one
    record per pattern) and, with ``grads``, its derivatives per record with respect to
    eta_c, eta_z and the scalar log_alpha; compiled once per family and counts."""
    # the patterns only carry the counts (pattern_logp takes the family by name), so the
    # design is built as for a Poisson: no zeros part to check, no zero count required
    design = build_design(pd.DataFrame({"y": np.array(y, dtype=np.int64)}),
                          ModelSpec(counts="y ~ 1", family="poisson"))
    pats = find_patterns(design, min_saving=1.0)  # never pooled: one pattern per record
    assert not pats.pooled
    ec, ez, u = pt.dvector("eta_c"), pt.dvector("eta_z"), pt.dvector("u")
    la = pt.dscalar("log_alpha")
    out = pattern_logp(name, pats, weighted=False)(None, ec, ez, la)
    outs = [out]
    if grads:
        outs += pytensor.grad(out.sum(), [ec, ez], disconnected_inputs="ignore")
        # per-record d/dlog_alpha: the gradient of sum(u * out) w.r.t. the scalar, then u
        d_a = pytensor.grad((u * out).sum(), la, disconnected_inputs="ignore")
        outs.append(pytensor.grad(d_a, u, disconnected_inputs="ignore"))
    fn = pytensor.function([ec, ez, la, u], outs, on_unused_input="ignore")
    return pats.inverse, fn


def graph_density(name: str, y, ec, ez, la, grads: bool = False) -> list[np.ndarray]:
    """[log p, (d/deta_c, d/deta_z, d/dlog_alpha)] per record from the model graph. The
    model has one log_alpha for all records, so records are evaluated in groups of equal
    log_alpha (the grids here are products: every group holds the same counts)."""
    y, ec, ez, la = (np.broadcast_to(np.asarray(a, dtype=float), np.shape(y))
                     for a in (y, ec, ez, la))
    outs = [np.empty(y.shape) for _ in range(4 if grads else 1)]
    for a in np.unique(la):
        rows = np.flatnonzero(la == a)
        inverse, fn = _graph_fn(name, tuple(y[rows].astype(int).tolist()), grads)
        per_pattern = [np.empty(rows.size) for _ in range(2)]
        per_pattern[0][inverse], per_pattern[1][inverse] = ec[rows], ez[rows]
        for out, res in zip(outs, fn(*per_pattern, a, np.ones(rows.size)), strict=True):
            out[rows] = np.asarray(res)[inverse]
    return outs


# ----------------------------------------------------------------------------- log-pmf accuracy
@pytest.mark.parametrize("name", FAMILY_NAMES)
def test_numpy_logpmf_matches_scipy_composition(name):
    fam = get_family(name)
    y, ec, ez, la, ref = _reference_on_grid(fam)
    ours = fam.logpmf(y, ec, ez, la)
    assert ours.dtype == np.float64 and ours.shape == ref.shape
    assert np.isfinite(ref).all()
    np.testing.assert_allclose(ours, ref, rtol=RTOL, atol=ATOL)


@pytest.mark.parametrize("name", FAMILY_NAMES)
def test_model_graph_density_matches_scipy_composition(name):
    fam = get_family(name)
    y, ec, ez, la, ref = _reference_on_grid(fam)
    (value,) = graph_density(name, y, ec, ez, la)
    np.testing.assert_allclose(value, ref, rtol=RTOL, atol=ATOL)


def test_product_reference_agrees_with_scipy_where_scipy_is_reliable():
    # Guards the product-formula reference itself: on points where scipy's nbinom is reliable
    # both must agree (scipy.stats.nbinom, n = 1/alpha, p = 1/(1 + alpha mu)).
    checked = 0
    for y, mu, alpha in itertools.product((0, 1, 7, 10_000), MU_GRID, ALPHA_GRID):
        if _scipy_nb_unreliable(mu, alpha):
            continue
        sp = float(stats.nbinom.logpmf(y, 1.0 / alpha, 1.0 / (1.0 + alpha * mu)))
        assert _nb_logf_product(y, mu, alpha) == pytest.approx(sp, rel=RTOL, abs=ATOL)
        checked += 1
    assert checked >= 30


def test_scipy_is_inaccurate_where_we_say_so():
    # The reason for the product-formula reference: at alpha mu = 1e-12 scipy's nbinom log-pmf of
    # y = 1 is off by more than 1e-6 (p = 1/(1 + 1e-12) cannot be stored accurately).
    mu, alpha = 1e-6, 1e-6
    sp = float(stats.nbinom.logpmf(1, 1.0 / alpha, 1.0 / (1.0 + alpha * mu)))
    exact = _nb_logf_product(1, mu, alpha)
    assert abs(sp - exact) > 1e-6
    ours = float(get_family("negbin").logpmf(1, math.log(mu), None, math.log(alpha)))
    assert ours == pytest.approx(exact, rel=1e-14)


def test_mpmath_reference():
    import mpmath

    mpmath.mp.dps = 50
    fam = get_family("negbin")
    for y, mu, alpha in [(1, 1e-6, 1e-6), (10_000, 50.0, 1e-6), (7, 1e-3, 1e3), (2, 1.0, 0.5)]:
        th, m = mpmath.mpf(1) / alpha, mpmath.mpf(mu)
        exact = (
            mpmath.loggamma(y + th)
            - mpmath.loggamma(th)
            - mpmath.loggamma(y + 1)
            + th * mpmath.log(th / (th + m))
            + y * mpmath.log(m / (th + m))
        )
        ours = float(fam.logpmf(y, math.log(mu), None, math.log(alpha)))
        assert ours == pytest.approx(float(exact), rel=1e-12, abs=1e-12)


def test_poisson_limit_of_negbin_for_tiny_alpha():
    # NB(mu, alpha) -> Poisson(mu) as alpha -> 0 (common knowledge). At alpha = 1e-14 the NB
    # log-pmf differs from Poisson by about alpha((y - mu)^2 - y)/2, far below 1e-9 here; a naive
    # lgamma difference with theta = 1e14 would be off by ~1e-2.
    y = np.array([0, 1, 3, 40, 1000])
    eta_c = np.log([0.5, 2.0, 3.0, 35.0, 990.0])
    nb = get_family("negbin").logpmf(y, eta_c, None, math.log(1e-14))
    po = stats.poisson.logpmf(y, np.exp(eta_c))
    np.testing.assert_allclose(nb, po, rtol=0, atol=1e-9)


# ----------------------------------------------------------------------------- finiteness
EXTREME_ETA_C = np.log([1e-6, 1e-3, 1.0, 50.0, 1e6])
EXTREME_ETA_Z = np.array([-27.7, -10.0, 0.0, 10.0, 27.7])
EXTREME_LOG_ALPHA = np.log([1e-6, 1e-3, 0.5, 1e3])
EXTREME_Y = np.array([0, 1, 2, 1000, 10_000, 1_000_000])


def _extreme_grid():
    g = itertools.product(EXTREME_Y, EXTREME_ETA_C, EXTREME_ETA_Z, EXTREME_LOG_ALPHA)
    return tuple(np.array(list(g), dtype=float).T)


@pytest.mark.parametrize("name", FAMILY_NAMES)
def test_values_and_gradients_finite_on_extreme_grid(name):
    fam = get_family(name)
    y, ec, ez, la = _extreme_grid()
    value, d_c, d_z, d_a = graph_density(name, y, ec, ez, la, grads=True)
    for what, arr in [("logp", value), ("d/deta_c", d_c), ("d/deta_z", d_z), ("d/dlog_alpha", d_a)]:
        bad = ~np.isfinite(arr)
        assert not bad.any(), f"{name}: {what} not finite at {np.c_[y, ec, ez, la][bad][:5]}"
    assert np.all(value <= 1e-12)
    assert np.isfinite(fam.logpmf(y, ec, ez, la)).all()
    for method in (fam.mean, fam.variance, fam.log_prob_zero, fam.positive_mean):
        assert np.isfinite(method(ec, ez, la)).all(), method.__name__
    p0 = fam.prob_zero(ec, ez, la)  # may underflow to 0 (e^-1e6); its log is checked above
    assert ((p0 >= 0) & (p0 <= 1)).all()
    assert (fam.variance(ec, ez, la) > 0).all()


@pytest.mark.parametrize("name", FAMILY_NAMES)
def test_finite_beyond_the_supported_range(name):
    # Robustness for the sampler's early wanderings: alpha down to e^-60, mu down to e^-60.
    fam = get_family(name)
    g = itertools.product([0, 1, 5], [-60.0, -20.0, 20.0], [-40.0, 40.0], [-60.0, -25.0, 9.0])
    y, ec, ez, la = np.array(list(g), dtype=float).T
    outputs = graph_density(name, y, ec, ez, la, grads=True)
    assert all(np.isfinite(o).all() for o in outputs)
    assert np.isfinite(fam.logpmf(y, ec, ez, la)).all()


@pytest.mark.parametrize("name", FAMILY_NAMES)
def test_gradients_match_finite_differences(name):
    # Central differences of the NumPy log-pmf (step 1e-5: error ~1e-10 x third derivative).
    fam = get_family(name)
    g = itertools.product(
        [0, 1, 4, 30], np.log([0.01, 2.0, 40.0]), [-1.5, 0.7], np.log([1e-5, 0.3, 20.0])
    )
    y, ec, ez, la = np.array(list(g), dtype=float).T
    _, d_c, d_z, d_a = graph_density(name, y, ec, ez, la, grads=True)
    h = 1e-5
    num_c = (fam.logpmf(y, ec + h, ez, la) - fam.logpmf(y, ec - h, ez, la)) / (2 * h)
    num_z = (fam.logpmf(y, ec, ez + h, la) - fam.logpmf(y, ec, ez - h, la)) / (2 * h)
    num_a = (fam.logpmf(y, ec, ez, la + h) - fam.logpmf(y, ec, ez, la - h)) / (2 * h)
    np.testing.assert_allclose(d_c, num_c, rtol=1e-6, atol=1e-7)
    np.testing.assert_allclose(d_z, num_z, rtol=1e-6, atol=1e-7)
    np.testing.assert_allclose(d_a, num_a, rtol=1e-6, atol=1e-7)


# ----------------------------------------------------------------------------- pmf tables
SETTINGS = [  # (mu, p via eta_z, alpha)
    (3.0, -0.8473, 0.5),
    (0.05, 1.2, 2.0),
    (40.0, 0.0, 1e-6),
    (0.01, -2.0, 30.0),
    (1e-6, 0.3, 1e-3),
]


def _kmax_for(fam: Family, mu: float, eta_z: float, alpha: float) -> int:
    # smallest kmax with P(Y > kmax) < 1e-14, found with sf (itself checked below)
    k = 64
    while fam.sf(k + 1, math.log(mu), eta_z, math.log(alpha)) > 1e-14:
        k *= 2
    return k


@pytest.mark.parametrize("name", FAMILY_NAMES)
@pytest.mark.parametrize("setting", SETTINGS)
def test_pmf_table_sums_to_one_and_matches_logpmf(name, setting):
    fam = get_family(name)
    mu, ez, alpha = setting
    ec, la = math.log(mu), math.log(alpha)
    kmax = _kmax_for(fam, mu, ez, alpha)
    table = fam.pmf_table(kmax, ec, ez, la)
    assert table.shape == (kmax + 1,)
    assert math.fsum(table) == pytest.approx(1.0, abs=1e-12)
    k = np.arange(kmax + 1)
    logpmf = fam.logpmf(k, ec, ez, la)
    keep = logpmf > -700  # where exp() is not denormal
    np.testing.assert_allclose(table[keep], np.exp(logpmf[keep]), rtol=1e-10, atol=0)


@pytest.mark.parametrize("name", FAMILY_NAMES)
def test_pmf_table_on_both_scales_matches_logpmf(name):
    """pmf_table steps on the natural scale unless a starting value is near underflow (a
    mean of 2,000 here) or the NB's theta is above 1e4: both ways give exp(logpmf)."""
    fam = get_family(name)
    k = np.arange(81)
    for mus, alpha in (([0.01, 0.7, 4.0, 30.0], 0.6), ([0.7, 4.0, 2000.0], 0.6),
                       ([0.7, 4.0, 30.0], 1e-6)):
        ec = np.log(np.array(mus))[:, None]
        table = fam.pmf_table(80, ec, 0.4, math.log(alpha))
        logpmf = fam.logpmf(k[None, :], ec, 0.4, math.log(alpha))
        keep = logpmf > -700  # where exp() is not denormal
        np.testing.assert_allclose(table[:, 0, :][keep], np.exp(logpmf[keep]), rtol=1e-11,
                                   atol=0, err_msg=f"{mus} {alpha}")


def test_pmf_table_vectorised_shape_and_values():
    fam = get_family("hurdle-negbin")
    ec = np.log([[0.5, 3.0, 10.0]] * 2)  # 2 "draws" x 3 "rows"
    ez = np.array([-1.0, 0.0, 2.0])
    la = np.log([[0.2], [1.5]])
    table = fam.pmf_table(6, ec, ez, la)
    assert table.shape == (2, 3, 7)
    for d, r in itertools.product(range(2), range(3)):
        expect = np.exp(fam.logpmf(np.arange(7), ec[d, r], ez[r], la[d, 0]))
        np.testing.assert_allclose(table[d, r], expect, rtol=1e-12)


# ------------------------------------------------------------------ moments by simulation
N_DRAWS = 400_000
MOMENT_SETTINGS = [(2.5, -0.4, 0.7), (12.0, 0.9, 0.15), (0.2, -1.0, 3.0)]  # (mu, eta_z, alpha)


def closed_form_moments(fam: Family, mu: float, eta_z: float, alpha: float):
    """(mean, variance, P(Y=0)) from published / derived formulas, written out independently."""
    p = float(sc.expit(eta_z))
    a = alpha if fam.has_dispersion else 0.0
    f0 = (1.0 + a * mu) ** (-1.0 / a) if a > 0 else math.exp(-mu)
    var_f = mu + a * mu**2  # NB2 variance (common practice); Poisson when a = 0
    if fam.zeros_kind is None:
        return mu, var_f, f0
    if fam.zeros_kind == "inflation":
        # Lambert (1992): ZIP mean (1-p) mu, variance mu (1-p)(1 + p mu);
        # ZINB: mu (1-p)(1 + mu (p + alpha)), which reduces to Lambert's at alpha = 0.
        return (1 - p) * mu, mu * (1 - p) * (1 + mu * (p + a)), p + (1 - p) * f0
    # Hurdle, derived from P(y) = (1-p) f(y)/(1 - f0) for y > 0:
    #   E[Y]   = (1-p)/(1-f0) * sum_{y>0} y f(y)   = (1-p) mu / (1-f0)
    #   E[Y^2] = (1-p)/(1-f0) * sum_{y>0} y^2 f(y) = (1-p)(var_f + mu^2)/(1-f0)
    #   Var[Y] = E[Y^2] - E[Y]^2;  P(Y=0) = p.
    mean = (1 - p) * mu / (1 - f0)
    return mean, (1 - p) * (var_f + mu**2) / (1 - f0) - mean**2, p


@pytest.mark.parametrize("name", FAMILY_NAMES)
@pytest.mark.parametrize("setting", MOMENT_SETTINGS)
def test_closed_form_moments_match_formulas(name, setting):
    fam = get_family(name)
    mu, ez, alpha = setting
    mean, var, p0 = closed_form_moments(fam, mu, ez, alpha)
    args = (math.log(mu), ez, math.log(alpha))
    assert float(fam.mean(*args)) == pytest.approx(mean, rel=1e-12)
    assert float(fam.variance(*args)) == pytest.approx(var, rel=1e-11)
    assert float(fam.prob_zero(*args)) == pytest.approx(p0, rel=1e-12)
    # and against the pmf itself, summed: E[Y], E[Y^2]
    table = fam.pmf_table(_kmax_for(fam, mu, ez, alpha), *args)
    k = np.arange(table.size)
    m1, m2 = math.fsum(k * table), math.fsum(k**2 * table)
    assert m1 == pytest.approx(mean, rel=1e-10)
    assert m2 - m1**2 == pytest.approx(var, rel=1e-9)


@pytest.mark.parametrize("name", FAMILY_NAMES)
@pytest.mark.parametrize("setting", MOMENT_SETTINGS)
def test_simulated_draws_reproduce_moments(name, setting):
    fam = get_family(name)
    mu, ez, alpha = setting
    mean, var, p0 = closed_form_moments(fam, mu, ez, alpha)
    seed = 1000 + 10 * FAMILY_NAMES.index(name) + MOMENT_SETTINGS.index(setting)
    rng = np.random.default_rng(seed)
    y = fam.random(rng, math.log(mu), ez, math.log(alpha), size=N_DRAWS)
    assert y.dtype == np.int64 and y.shape == (N_DRAWS,) and y.min() >= 0
    n = y.size
    # 5 Monte-Carlo standard errors: mean sd/sqrt(n); variance sd((y - ybar)^2)/sqrt(n);
    # P(Y=0) sqrt(p0 (1 - p0) / n).
    assert abs(y.mean() - mean) < 5 * math.sqrt(var / n)
    dev2 = (y - y.mean()) ** 2
    assert abs(dev2.mean() - var) < 5 * dev2.std() / math.sqrt(n)
    assert abs((y == 0).mean() - p0) < 5 * math.sqrt(p0 * (1 - p0) / n)


@pytest.mark.parametrize("name", ["hurdle-poisson", "hurdle-negbin", "zinb"])
@pytest.mark.parametrize("setting", [(1e-3, 0.0, 0.5), (1.0, -1.0, 1e3), (30.0, 0.5, 1e-6)])
def test_simulated_frequencies_match_pmf(name, setting):
    # Frequencies of k = 0..5 and of "k > 5" within 5 binomial standard errors of the pmf,
    # including tiny mu (truncated draws where 1 - f(0) ~ 1e-3) and heavy tails (alpha = 1e3).
    fam = get_family(name)
    mu, ez, alpha = setting
    args = (math.log(mu), ez, math.log(alpha))
    rng = np.random.default_rng(7)
    y = fam.random(rng, *args, size=N_DRAWS)
    probs = fam.pmf_table(5, *args)
    probs = np.append(probs, fam.sf(6, *args))
    counts = np.bincount(np.minimum(y, 6), minlength=7)
    se = np.sqrt(probs * (1 - probs) / N_DRAWS)
    assert np.all(np.abs(counts / N_DRAWS - probs) < 5 * se + 1e-12)


def test_hurdle_positive_draws_at_tiny_mu():
    # For mu = 1e-6, Y | Y > 0 is 1 with probability 1 - mu/2 + O(mu^2) (Poisson truncated at 0);
    # draws must be positive whenever the zeros part says "present", and nearly all ones.
    fam = get_family("hurdle-poisson")
    y = fam.random(np.random.default_rng(3), math.log(1e-6), -_LOGIT_EDGE, None, size=200_000)
    assert (y >= 1).all()
    assert (y == 1).mean() > 0.9999


def test_random_broadcasts_and_checks_size():
    fam = get_family("zinb")
    ec = np.zeros((4, 3))
    out = fam.random(np.random.default_rng(0), ec, np.zeros(3), np.zeros((4, 1)))
    assert out.shape == (4, 3) and out.dtype == np.int64
    assert fam.random(np.random.default_rng(0), 0.0, 0.0, 0.0, size=(2, 5)).shape == (2, 5)
    with pytest.raises(BayesziError, match="size"):
        fam.random(np.random.default_rng(0), ec, 0.0, 0.0, size=(2, 3))


# ----------------------------------------------------------------------------- sf and zero shares
@pytest.mark.parametrize("name", FAMILY_NAMES)
@pytest.mark.parametrize("setting", SETTINGS)
def test_sf_equals_one_minus_cumsum_and_tail_sums(name, setting):
    fam = get_family(name)
    mu, ez, alpha = setting
    args = (math.log(mu), ez, math.log(alpha))
    kmax = _kmax_for(fam, mu, ez, alpha)
    table = fam.pmf_table(kmax, *args)
    k = np.arange(kmax + 1)
    sf = fam.sf(k, *args)
    assert sf[0] == 1.0
    # body: 1 - cumsum(pmf) (P(Y >= k) = 1 - sum_{j<k} P(j)), accurate to ~1e-15 absolute
    one_minus_cdf = 1.0 - np.concatenate([[0.0], np.cumsum(table)[:-1]])
    np.testing.assert_allclose(sf, one_minus_cdf, rtol=0, atol=1e-12)
    # tail: sums of the pmf from the far end keep relative accuracy where 1 - cdf has none
    tail = np.cumsum(table[::-1])[::-1]
    keep = tail > 1e-280
    np.testing.assert_allclose(sf[keep], tail[keep], rtol=1e-8, atol=1e-14)


def test_sf_is_stable_far_in_the_tail():
    # P(Y >= 60) for Poisson(1) = sum_{j>=60} e^-1/j! ~ 1.2e-82 (series summed exactly here):
    # computing 1 - cdf would return 0.
    exact = math.fsum(math.exp(-1.0 - math.lgamma(j + 1.0)) for j in range(60, 200))
    got = float(get_family("poisson").sf(60, 0.0, None, None))
    assert got == pytest.approx(exact, rel=1e-10)
    # ZIP: (1-p) times the same
    got_zip = float(get_family("zip").sf(60, 0.0, 0.0, None))
    assert got_zip == pytest.approx(0.5 * exact, rel=1e-10)


def test_prob_extra_zero_given_zero_zip_lambert():
    # Lambert (1992): P(structural zero | Y = 0) = p / (p + (1-p) exp(-mu)).
    mu = np.array([1e-6, 0.1, 1.0, 5.0, 50.0])
    eta_z = np.array([-27.6, -2.0, 0.0, 1.0, 27.6])
    p = sc.expit(eta_z)
    expect = p / (p + (1 - p) * np.exp(-mu))
    got = get_family("zip").prob_extra_zero_given_zero(np.log(mu), eta_z, None)
    np.testing.assert_allclose(got, expect, rtol=1e-12)


def test_prob_extra_zero_given_zero_other_families():
    mu, eta_z, alpha = np.array([0.3, 4.0]), np.array([0.2, -1.0]), np.array([0.5, 2.0])
    p = sc.expit(eta_z)
    f0 = (1 + alpha * mu) ** (-1 / alpha)  # NB2 f(0)
    got = get_family("zinb").prob_extra_zero_given_zero(np.log(mu), eta_z, np.log(alpha))
    np.testing.assert_allclose(got, p / (p + (1 - p) * f0), rtol=1e-12)
    for name, value in [("hurdle-poisson", 1.0), ("hurdle-negbin", 1.0), ("poisson", 0.0)]:
        out = get_family(name).prob_extra_zero_given_zero(np.log(mu), eta_z, np.log(alpha))
        assert out.shape == (2,) and np.all(out == value)


def test_positive_mean():
    mu, eta_z, alpha = np.array([1e-6, 0.5, 8.0]), np.zeros(3), np.array([0.5, 0.5, 2.0])
    ec, la = np.log(mu), np.log(alpha)
    # ZI and plain: the count-process mean mu
    np.testing.assert_allclose(get_family("zinb").positive_mean(ec, eta_z, la), mu, rtol=1e-14)
    # hurdle: E[Y | Y > 0] = mu / (1 - f0); for mu -> 0 this tends to 1
    f0 = (1 + alpha * mu) ** (-1 / alpha)
    q = -np.expm1(np.log1p(alpha * mu) * (-1 / alpha))
    got = get_family("hurdle-negbin").positive_mean(ec, eta_z, la)
    np.testing.assert_allclose(got[1:], mu[1:] / (1 - f0[1:]), rtol=1e-12)
    np.testing.assert_allclose(got, mu / q, rtol=1e-9)
    assert got[0] == pytest.approx(1.0, abs=1e-6)


# ----------------------------------------------------------------------------- API and errors
def test_family_attributes():
    expect = {
        "poisson": (None, False, ""),
        "negbin": (None, True, ""),
        "zip": ("inflation", False, "P(extra zero)"),
        "zinb": ("inflation", True, "P(extra zero)"),
        "hurdle-poisson": ("hurdle", False, "P(Y = 0)"),
        "hurdle-negbin": ("hurdle", True, "P(Y = 0)"),
    }
    assert tuple(expect) == FAMILY_NAMES
    for name, (kind, disp, label) in expect.items():
        fam = get_family(name)
        assert (fam.name, fam.zeros_kind, fam.has_dispersion, fam.zeros_label) == (
            name,
            kind,
            disp,
            label,
        )


def test_unknown_family_suggests_nearest_name():
    with pytest.raises(BayesziError, match="'zinb'") as info:
        get_family("zinbb")
    assert isinstance(info.value, ValueError)
    with pytest.raises(BayesziError, match="hurdle-poisson"):
        get_family("hurdle_poisson")
    with pytest.raises(BayesziError, match="one of"):
        get_family("gaussian")


def test_missing_part_is_a_clear_error():
    with pytest.raises(BayesziError, match="eta_z"):
        get_family("zip").logpmf([0, 1], 0.0, None, None)
    with pytest.raises(BayesziError, match="log_alpha"):
        get_family("negbin").mean(0.0, None, None)
    with pytest.raises(BayesziError, match="eta_z"):
        get_family("hurdle-poisson").pt_logp_observed(np.array([0, 1]), pt.dvector(), None, None)
    with pytest.raises(BayesziError, match="log_alpha"):
        get_family("zinb").pt_logp_observed(np.array([0, 1]), pt.dvector(), pt.dvector(), None)
    with pytest.raises(BayesziError, match="zeros first"):
        get_family("zip").pt_logp_observed(np.array([1, 0]), pt.dvector(), pt.dvector(), None)


def test_unused_parts_are_ignored():
    a = get_family("poisson").logpmf([0, 3], [0.1, 0.2], None, None)
    b = get_family("poisson").logpmf([0, 3], [0.1, 0.2], "anything", 12.0)
    np.testing.assert_array_equal(a, b)


def test_broadcasting_draws_by_rows():
    fam = get_family("zinb")
    rng = np.random.default_rng(5)
    y = np.array([0, 2, 0, 9])
    ec = rng.normal(size=(3, 4))
    ez = rng.normal(size=4)
    la = rng.normal(size=(3, 1))
    out = fam.logpmf(y, ec, ez, la)
    assert out.shape == (3, 4)
    for d, r in itertools.product(range(3), range(4)):
        assert out[d, r] == pytest.approx(float(fam.logpmf(y[r], ec[d, r], ez[r], la[d, 0])))


def test_model_graph_density_works_inside_a_pymc_model():
    # pattern_logp as the model uses it (pm.CustomDist, pooled patterns, weighted), at a
    # point, against the NumPy log-pmf summed over the records.
    pm = pytest.importorskip("pymc")
    y = np.array([0, 0, 3, 1, 0, 7, 3, 0])
    design = build_design(pd.DataFrame({"y": y}), ModelSpec(counts="y ~ 1", family="zinb"))
    pats = find_patterns(design)
    assert pats.pooled and pats.n_patterns == 4
    with pm.Model() as model:
        b = pm.Normal("b", 0.0, 1.0)
        z = pm.Normal("z", 0.0, 1.0)
        la = pm.Normal("la", 0.0, 1.0)
        pm.CustomDist("y", b, z, la, logp=pattern_logp("zinb", pats),
                      observed=design.y[pats.inverse])
    point = {"b": 0.3, "z": -0.2, "la": -0.5}
    got = model.compile_logp(vars=[model["y"]], sum=True)(point)
    expect = get_family("zinb").logpmf(y, 0.3, -0.2, -0.5).sum()
    assert got == pytest.approx(expect, rel=1e-12)
    dlogp = model.compile_dlogp()(point)
    assert np.isfinite(dlogp).all()


def test_module_docstring_examples_run():
    modules = (family_module, kernels, mechanisms, numerics)
    results = [doctest.testmod(m, optionflags=doctest.ELLIPSIS) for m in modules]
    assert all(r.attempted > 3 and r.failed == 0 for r in results)
    assert sum(r.attempted for r in results) > 30


# Parameter points that reach every internal branch: alpha below/above the Stirling switch,
# alpha mu below/above the series switch, -log f(0) below/above the truncation switch.
BRANCH_POINTS = [
    (math.log(1e-7), 0.3, math.log(1e-6)),
    (math.log(1e4), -0.5, math.log(1e-6)),
    (math.log(3.0), 1.0, math.log(0.5)),
    (math.log(1e-3), 0.0, math.log(2.0)),
    (math.log(50.0), -2.0, math.log(1e3)),
]


@pytest.mark.parametrize("name", FAMILY_NAMES)
@pytest.mark.parametrize("point", BRANCH_POINTS)
def test_scalar_and_array_inputs_agree(name, point):
    fam = get_family(name)
    ec, ez, la = point
    y = np.array([0, 1, 3, 25])
    as_arrays = (np.full(4, ec), np.full(4, ez), np.full(4, la))
    # y array with scalar parameters, and all-scalar calls returning 0-d arrays
    np.testing.assert_allclose(fam.logpmf(y, ec, ez, la), fam.logpmf(y, *as_arrays), rtol=1e-14)
    for i, yi in enumerate(y):
        out = fam.logpmf(int(yi), ec, ez, la)
        assert isinstance(out, np.ndarray) and out.shape == ()
        assert float(out) == pytest.approx(fam.logpmf(y, *as_arrays)[i], rel=1e-14)
    for method in (
        fam.mean,
        fam.variance,
        fam.prob_zero,
        fam.log_prob_zero,
        fam.prob_extra_zero_given_zero,
        fam.positive_mean,
    ):
        scalar = method(ec, ez, la)
        assert isinstance(scalar, np.ndarray) and scalar.shape == ()
        assert float(scalar) == pytest.approx(method(*as_arrays)[0], rel=1e-14)
    assert float(fam.sf(3, ec, ez, la)) == pytest.approx(fam.sf(y, *as_arrays)[2], rel=1e-14)
    table = fam.pmf_table(25, ec, ez, la)
    assert table.shape == (26,)
    np.testing.assert_allclose(table[y], np.exp(fam.logpmf(y, *as_arrays)), rtol=1e-10)
    draws = fam.random(np.random.default_rng(0), ec, ez, la)
    assert draws.shape == () and draws.dtype == np.int64


@pytest.mark.parametrize("name", FAMILY_NAMES)
def test_every_method_broadcasts_like_elementwise_calls(name):
    # Parameters of different shapes (draws x 1 dispersion and zeros parts, rows-only counts
    # part, rows-only data), with values on both sides of every internal switch.
    fam = get_family(name)
    y = np.array([0, 1, 4, 0, 30])
    ec = np.log([1e-7, 0.02, 3.0, 50.0, 1e4])
    ez = np.array([[-3.0], [0.5], [27.0]])
    la = np.log([[1e-7], [0.3], [1e3]])
    # outputs take the broadcast shape of the inputs the family uses (unused ones are ignored)
    shape = (5,) if name == "poisson" else (3, 5)
    cases = [
        (lambda *a: fam.logpmf(y, *a), lambda d, r: fam.logpmf(y[r], ec[r], ez[d, 0], la[d, 0])),
        (fam.mean, lambda d, r: fam.mean(ec[r], ez[d, 0], la[d, 0])),
        (fam.variance, lambda d, r: fam.variance(ec[r], ez[d, 0], la[d, 0])),
        (fam.log_prob_zero, lambda d, r: fam.log_prob_zero(ec[r], ez[d, 0], la[d, 0])),
        (fam.positive_mean, lambda d, r: fam.positive_mean(ec[r], ez[d, 0], la[d, 0])),
        (
            fam.prob_extra_zero_given_zero,
            lambda d, r: fam.prob_extra_zero_given_zero(ec[r], ez[d, 0], la[d, 0]),
        ),
        (lambda *a: fam.sf(y, *a), lambda d, r: fam.sf(y[r], ec[r], ez[d, 0], la[d, 0])),
    ]
    for vectorised, single in cases:
        out = vectorised(ec, ez, la)
        assert out.shape == shape
        expect = np.array([[float(single(d, r)) for r in range(5)] for d in range(3)])
        np.testing.assert_allclose(np.broadcast_to(out, (3, 5)), expect, rtol=1e-13)
    table = fam.pmf_table(8, ec, ez, la)
    assert table.shape == (*shape, 9)
    table = np.broadcast_to(table, (3, 5, 9))
    for d, r in itertools.product(range(3), range(5)):
        np.testing.assert_allclose(table[d, r], fam.pmf_table(8, ec[r], ez[d, 0], la[d, 0]))
    draws = fam.random(np.random.default_rng(1), ec, ez, la)
    assert draws.shape == shape and draws.dtype == np.int64 and draws.min() >= 0


@pytest.mark.parametrize("name", ["negbin", "zinb", "hurdle-negbin"])
def test_negbin_near_internal_switches(name):
    # Both sides of the theta = 1e4 switch (lgamma difference vs. its Stirling form), where the
    # Stirling correction terms are largest, against the scipy composition (reliable here:
    # alpha mu >= 5e-7), and continuity across the switch.
    fam = get_family(name)
    pts = list(
        itertools.product([1, 7, 10_000, 1_000_000], [0.01, 50.0, 1e4, 1e6], [5e-5, 1e-4, 2e-4])
    )
    y, mu, alpha = np.array(pts, dtype=float).T
    ez = np.full(y.shape, -0.4)
    ref = np.array([ref_logpmf(fam, *p) for p in zip(y, mu, ez, alpha, strict=True)])
    ours = fam.logpmf(y, np.log(mu), ez, np.log(alpha))
    np.testing.assert_allclose(ours, ref, rtol=RTOL, atol=ATOL)
    (graph,) = graph_density(name, y, np.log(mu), ez, np.log(alpha))
    np.testing.assert_allclose(graph, ref, rtol=RTOL)
    cut = math.log(1e-4)
    below = fam.logpmf(y, np.log(mu), ez, cut - 1e-12)
    above = fam.logpmf(y, np.log(mu), ez, cut + 1e-12)
    # allowed jump: the rounding of the lgamma-difference side, a few eps x lgamma(y + theta)
    # (about 3e-9 at y = 1e6), plus 1e-10 relative
    allowed = 8 * np.finfo(float).eps * sc.gammaln(y + 1e4) + 1e-10 * np.abs(above)
    assert np.all(np.abs(below - above) <= allowed)


# ----------------------------------------------------------------------------- structure
def test_each_family_is_a_kernel_times_a_mechanism():
    # The table of docs/families.md ("Kernels x mechanisms"), object by object.
    documented = {
        "poisson": ("poisson", None),
        "negbin": ("negbin", None),
        "zip": ("poisson", "inflation"),
        "zinb": ("negbin", "inflation"),
        "hurdle-poisson": ("poisson", "hurdle"),
        "hurdle-negbin": ("negbin", "hurdle"),
    }
    kernel_of = {"poisson": kernels.POISSON, "negbin": kernels.NEGBIN}
    mechanism_of = {None: mechanisms.NO_ZEROS, "inflation": mechanisms.INFLATION,
                    "hurdle": mechanisms.HURDLE}
    assert tuple(documented) == FAMILY_NAMES
    for name, (kernel, mechanism) in documented.items():
        fam = get_family(name)
        assert fam.kernel is kernel_of[kernel] and fam.kernel.name == kernel
        assert fam.mechanism is mechanism_of[mechanism] and fam.zeros_kind == mechanism
        assert fam.has_dispersion == (kernel == "negbin")
    # every pairing occurs once: 2 kernels x 3 mechanisms
    pairs = {(get_family(n).kernel, get_family(n).mechanism) for n in FAMILY_NAMES}
    assert len(pairs) == 6


# ------------------------------------------------------------- NumPy and PyTensor twins agree
# Each formula that exists in both array libraries is checked at 1e-12 on both sides of its
# switch point (the two sides use different formulas; the tolerance is rounding only).
TWIN_RTOL = TWIN_ATOL = 1e-12


def _lgamma_rounding(y, la) -> np.ndarray:
    """Rounding of the NB's lgamma(y + theta) - lgamma(theta) in the direct form (theta up to
    1e4, lgamma(theta) up to 8e4): a few ulp of lgamma(y + theta), ~1e-11 near the switch.
    Both twins carry it (the reason for the Stirling form beyond); they may differ by it."""
    return 8 * np.finfo(float).eps * sc.gammaln(np.add(y, np.exp(-np.asarray(la))))


def _pt_eval(fn, *arrays):
    """Evaluate a PyTensor formula at NumPy inputs (float64 vectors or scalars)."""
    inputs = [pt.dvector() if np.ndim(a) else pt.dscalar() for a in arrays]
    return pytensor.function(inputs, fn(*inputs))(*arrays)


def _around(cut: float, log: bool = False) -> np.ndarray:
    """Points on both sides of a switch point, within 1e-12 and up to a factor 30 away."""
    rel = np.array([-0.97, -0.5, -1e-3, -1e-9, -1e-12, 0.0, 1e-12, 1e-9, 1e-3, 0.5, 30.0])
    pts = cut * (1.0 + rel)
    return np.log(pts) if log else pts


def test_numerics_twins_agree_across_their_switch_points():
    lx = np.concatenate([_around(numerics.SERIES_CUT, log=True), np.log([1e-300, 1e-8, 5.0])])
    np.testing.assert_allclose(_pt_eval(numerics.pt_log1p_ratio, lx), numerics.log1p_ratio(lx),
                               rtol=TWIN_RTOL, atol=TWIN_ATOL)
    u = np.concatenate([_around(numerics.SERIES_CUT), [1e-300, 1e-8, 5.0, 1e6]])
    np.testing.assert_allclose(_pt_eval(numerics.pt_h_ratio, u), numerics.h_ratio(u),
                               rtol=TWIN_RTOL, atol=TWIN_ATOL)
    y, la = (a.ravel() for a in np.meshgrid([1.0, 7.0, 300.0, 1e6],
                                            _around(numerics.ALPHA_STIRLING, log=True)[:6]))
    np.testing.assert_allclose(_pt_eval(numerics.pt_stirling_part, y, la),
                               numerics.stirling_part(y, la), rtol=TWIN_RTOL, atol=TWIN_ATOL)
    t = np.concatenate([_around(numerics.TRUNC_CUT), [1e-300, 1e-9, 0.7, 40.0]])
    np.testing.assert_allclose(
        _pt_eval(lambda t: numerics.pt_log1m_exp_neg(t, pt.log(t)), t),
        numerics.log1m_exp_neg(t.copy(), lambda m: np.log(t[m])), rtol=TWIN_RTOL, atol=TWIN_ATOL)
    a, b = np.array([-800.0, 0.0, 3.0, 700.0]), np.array([-1.0, 1e-300, 3.0, -700.0])
    np.testing.assert_allclose(_pt_eval(numerics.pt_logaddexp, a, b), np.logaddexp(a, b),
                               rtol=TWIN_RTOL, atol=TWIN_ATOL)


# alpha on both sides of the Stirling switch (1e-4); mu so that alpha mu crosses the series
# switch (1e-2) and t = -log f(0) crosses the truncation switch (1e-5).
TWIN_ALPHAS = _around(numerics.ALPHA_STIRLING)[[0, 2, 4, 5, 6, 8, 10]]
TWIN_MUS = np.array([1e-9, 2e-6, 9.99e-6, 1e-5, 1.001e-5, 1e-3, 0.3, 9.9, 100.0, 101.0, 2500.0])


@pytest.mark.parametrize("kernel", [kernels.POISSON, kernels.NEGBIN], ids=lambda k: k.name)
@pytest.mark.parametrize("alpha", TWIN_ALPHAS)
def test_kernel_twins_agree_across_the_switch_points(kernel, alpha):
    la = math.log(alpha)
    disp = kernel.pt_dispersion(pt.constant(la))
    y, ec = (a.ravel() for a in np.meshgrid([1, 2, 7, 60], np.log(TWIN_MUS)))
    logf = pytensor.function([v := pt.dvector()], kernel.pt_logf(y, v, disp))(ec)
    ref = kernel.logf(y, ec, la)
    atol = TWIN_ATOL + (_lgamma_rounding(y, la) if kernel.has_dispersion else 0.0)
    assert np.all(np.abs(logf - ref) <= atol + TWIN_RTOL * np.abs(ref))
    ec = np.log(TWIN_MUS)
    f0 = _pt_eval(lambda v: kernel.pt_logf0(v, disp), ec)
    log1m = _pt_eval(lambda v: kernel.pt_log1m_f0(v, disp), ec)
    log_f0, log1m_f0 = kernel.log1m_f0(ec, la)
    np.testing.assert_allclose(f0, log_f0, rtol=TWIN_RTOL, atol=TWIN_ATOL)
    np.testing.assert_allclose(log1m, log1m_f0, rtol=TWIN_RTOL, atol=TWIN_ATOL)


@pytest.mark.parametrize("name", FAMILY_NAMES)
def test_mechanism_twins_agree_across_the_switch_points(name):
    # The model graph's density (zero and positive counts) against the NumPy log-pmf.
    fam = get_family(name)
    g = itertools.product([0, 1, 3, 60], np.log(TWIN_MUS), [-30.0, -1.2, 0.0, 2.0, 30.0],
                          np.log(TWIN_ALPHAS))
    y, ec, ez, la = np.array(list(g), dtype=float).T
    (graph,) = graph_density(name, y, ec, ez, la)
    ref = fam.logpmf(y, ec, ez, la)
    atol = TWIN_ATOL + (_lgamma_rounding(y, la) * (y > 0) if fam.has_dispersion else 0.0)
    assert np.all(np.abs(graph - ref) <= atol + TWIN_RTOL * np.abs(ref))
