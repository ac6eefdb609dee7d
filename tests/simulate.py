"""Simulated data sets with known truth, drawn with NumPy alone (independent of bayeszi's
own random generators), shared by the tests.

* :func:`simulate`: any of the six families, with known coefficients and site effects;
* :func:`tiny_data`: a small zero-inflated frame for tests of messages and saved files (the
  ``tiny_fit`` fixture of tests/conftest.py fits a ZINB to it; hypothesis strategies draw
  rows of it);
* :func:`correlated_costs`: hurdle negative binomial records whose three "cost" predictors
  are strongly correlated, with strong effects in both parts (prior sensitivity tests).

Example
-------
>>> df, truth = simulate("zip", n=100, seed=1)
>>> sorted(df.columns)
['exposure', 'site', 'w', 'x1', 'x2', 'y']
>>> tiny_data().shape
(120, 6)
"""

from __future__ import annotations

import numpy as np
import pandas as pd

TRUTH = {
    "counts": {"Intercept": 0.3, "x1": 0.5, "x2": -0.4},
    "zeros": {"Intercept": -0.6, "w": 1.1},
    "alpha": 0.5,
}


def simulate(family: str, n: int = 3000, seed: int = 1, n_sites: int = 0,
             site_sd: tuple[float, float] = (0.0, 0.0), truth: dict | None = None
             ) -> tuple[pd.DataFrame, dict]:
    """Draw ``n`` rows from ``family`` with covariates x1 (continuous), x2 (0/1), w
    (continuous, zeros part) and exposure in [0.5, 3]; optional site intercepts."""
    t = truth or TRUTH
    rng = np.random.default_rng(seed)
    x1 = rng.normal(1.0, 0.8, n)
    x2 = rng.integers(0, 2, n)
    w = rng.normal(0.0, 1.0, n)
    expo = rng.uniform(0.5, 3.0, n)
    site = np.zeros(n, dtype=int)
    ec = np.zeros(0)
    ez = np.zeros(0)
    if n_sites:
        site = rng.integers(0, n_sites, n)
        ec = rng.normal(0, site_sd[0], n_sites)
        ez = rng.normal(0, site_sd[1], n_sites)
    c = t["counts"]
    z = t["zeros"]
    eta = c["Intercept"] + c["x1"] * x1 + c["x2"] * x2 + np.log(expo)
    zeta = z["Intercept"] + z["w"] * w
    if n_sites:
        eta = eta + ec[site]
        zeta = zeta + ez[site]
    mu = np.exp(eta)
    p = 1 / (1 + np.exp(-zeta))
    alpha = t["alpha"]
    nb = family in ("negbin", "zinb", "hurdle-negbin")

    def count(mu_: np.ndarray) -> np.ndarray:
        if nb:
            lam = rng.gamma(1 / alpha, alpha * mu_)
            return rng.poisson(lam)
        return rng.poisson(mu_)

    if family in ("poisson", "negbin"):
        y = count(mu)
    elif family in ("zip", "zinb"):
        y = np.where(rng.uniform(size=n) < p, 0, count(mu))
    else:  # hurdle: zero with prob p, else zero-truncated draw by rejection
        y = np.zeros(n, dtype=np.int64)
        pos = rng.uniform(size=n) >= p
        todo = np.flatnonzero(pos)
        while todo.size:
            draw = count(mu[todo])
            ok = draw > 0
            y[todo[ok]] = draw[ok]
            todo = todo[~ok]
    df = pd.DataFrame({"y": y.astype(np.int64), "x1": x1, "x2": x2, "w": w,
                       "exposure": expo, "site": [f"s{i:02d}" for i in site]})
    info = {"counts": dict(c), "zeros": dict(z), "alpha": alpha, "site_counts": ec,
            "site_zeros": ez, "mu": mu, "p": p}
    return df, info


def tiny_data(n: int = 120, seed: int = 11) -> pd.DataFrame:
    """Zero-inflated Poisson data with exposure ``e``, a factor ``f``, a 0/1 zeros term ``w``
    and 6 groups ``g``: log mean 0.2 + 0.5 x + 0.3 [f = b] + log e, extra zeros with
    probability 0.5 where w = 1 and 0.15 where w = 0 (no group effects)."""
    rng = np.random.default_rng(seed)
    df = pd.DataFrame({
        "x": rng.normal(size=n), "f": rng.choice(["a", "b", "c"], n),
        "e": rng.uniform(1.0, 3.0, n), "g": np.array([f"s{k}" for k in range(6)])[
            np.arange(n) % 6], "w": rng.integers(0, 2, n),
    })
    mu = np.exp(0.2 + 0.5 * df["x"] + 0.3 * (df["f"] == "b") + np.log(df["e"]))
    extra = rng.random(n) < np.where(df["w"] == 1, 0.5, 0.15)
    df["y"] = np.where(extra, 0, rng.poisson(mu))
    return df


def correlated_costs(n: int = 300, seed: int = 3, rho: float = 0.92) -> pd.DataFrame:
    """Hurdle negative binomial records (alpha 0.7) with three predictors ``cost1..cost3``
    that share one common factor (pairwise correlation ``rho``; on different units) and two
    independent ones (``age``, ``dist``). Both parts use all five, with strong effects of
    the costs: per sd of each cost's own noise-free scale, log mean +1.1, -0.9, +0.8 and
    logit P(Y = 0) +1.0, +0.9, -1.2."""
    rng = np.random.default_rng(seed)
    common = rng.normal(size=n)
    c1, c2, c3 = (np.sqrt(rho) * common + np.sqrt(1 - rho) * rng.normal(size=n)
                  for _ in range(3))
    u1, u2 = rng.normal(size=n), rng.normal(size=n)
    df = pd.DataFrame({"cost1": 10 + 2 * c1, "cost2": 50 + 5 * c2, "cost3": 3 + 0.5 * c3,
                       "age": 40 + 10 * u1, "dist": 5 + 2 * u2})
    mu = np.exp(1.0 + 1.1 * c1 - 0.9 * c2 + 0.8 * c3 + 0.3 * u1 - 0.2 * u2)
    p0 = 1 / (1 + np.exp(-(-0.3 + 1.0 * c1 + 0.9 * c2 - 1.2 * c3 + 0.4 * u1)))
    alpha = 0.7
    y = np.zeros(n, dtype=np.int64)
    todo = np.flatnonzero(rng.uniform(size=n) >= p0)
    while todo.size:  # zero-truncated negative binomial by rejection
        draw = rng.poisson(rng.gamma(1 / alpha, alpha * mu[todo]))
        ok = draw > 0
        y[todo[ok]] = draw[ok]
        todo = todo[~ok]
    df["y"] = y
    return df


def fitted_from_user_draws(df: pd.DataFrame, spec, b: np.ndarray, g: np.ndarray | None = None,
                           alpha: np.ndarray | None = None,
                           effects: dict[str, np.ndarray] | None = None,
                           sds: dict[str, np.ndarray] | None = None):
    """A fitted model whose posterior is written by hand on the user's scale (no sampling).

    ``b`` (draws x counts terms) and ``g`` (draws x zeros terms) are user-scale coefficients,
    ``alpha`` the NB dispersion per draw, ``effects``/``sds`` per part the effects
    (draws x levels) and sds (draws) of the spec's one grouping column. The diagnostics are
    clean (two chains: one chain is a problem of its own).
    """
    import arviz as az

    from bayeszi.engine.fit import add_user_scale
    from bayeszi.fitting.fitted import FittedModel
    from bayeszi.model.design import build_design
    from bayeszi.model.diagnostics import Diagnostics
    from bayeszi.model.priors import resolve

    design = build_design(df, spec)

    def to_std(beta: np.ndarray, pdes) -> np.ndarray:  # inverse of the centring and scaling
        out = beta * pdes.scale
        out[:, 0] = beta[:, 0] + beta[:, 1:] @ pdes.center[1:]
        return out

    post = {"counts_std_coef": to_std(b, design.counts)[None]}
    dims = {"counts_std_coef": ["counts_term"]}
    coords = {"counts_term": design.counts.terms}
    if g is not None:
        post["zeros_std_coef"] = to_std(g, design.zeros)[None]
        dims["zeros_std_coef"] = ["zeros_term"]
        coords["zeros_term"] = design.zeros.terms
    for part, eff in (effects or {}).items():
        name = design.groups[0].name
        post[f"{part}_sd_{name}"] = np.asarray(sds[part])[None]
        post[f"{part}_effect_{name}"] = eff[None]
        dims[f"{part}_effect_{name}"] = [name]
        coords[name] = design.groups[0].levels
    if alpha is not None:
        post.update({"dispersion": alpha[None], "dispersion_sqrt": np.sqrt(alpha)[None]})
    idata = az.from_dict(posterior=post, coords=coords, dims=dims)
    add_user_scale(idata, design)
    diag = Diagnostics(table=pd.DataFrame(columns=["R-hat", "bulk ESS", "tail ESS"]),
                       divergences=0, draws=len(b), chains=2)
    return FittedModel(spec, design, idata, resolve(design, None),
                       df[design.used_columns].copy(), diag)


def panel(n_groups: int = 150, seed: int = 21) -> pd.DataFrame:
    """A small panel: ``n_groups`` units seen 1-6 times each (3.3 on average), ZINB with a
    unit intercept in both parts (sds 0.6 and 1.0), a continuous predictor ``x`` per record
    and ``u`` per unit, exposure ``e``. The shape of benchmarks/bench_panel.py's panel, small."""
    rng = np.random.default_rng(seed)
    times = 1 + rng.binomial(5, 0.46, n_groups)
    unit = np.repeat(np.arange(n_groups), times)
    n = unit.size
    u = rng.gamma(2.0, 0.6, n_groups)[unit]
    x = rng.normal(0.0, 1.0, n)
    e = rng.uniform(2.0, 20.0, n)
    eta_c = -1.3 + 0.3 * x - 0.35 * u + rng.normal(0.0, 0.6, n_groups)[unit] + np.log(e)
    eta_z = -0.6 + 0.7 * u + rng.normal(0.0, 1.0, n_groups)[unit]
    y = rng.poisson(rng.gamma(1.0 / 0.8, 0.8 * np.exp(eta_c)))
    y[rng.random(n) < 1.0 / (1.0 + np.exp(-eta_z))] = 0
    return pd.DataFrame({"y": y.astype(np.int64), "x": x, "u": u, "e": e,
                         "unit": [f"p{i:04d}" for i in unit]})


def poisson_pymc_model():
    """A small hand-written PyMC Poisson regression (60 records, seeded), for tests of the
    sampler's machinery rather than of bayeszi's models."""
    import pymc as pm

    rng = np.random.default_rng(0)
    x = rng.normal(size=60)
    y = rng.poisson(np.exp(0.5 + 0.3 * x))
    with pm.Model() as model:
        a = pm.Normal("a", 0, 1)
        b = pm.Normal("b", 0, 1)
        pm.Deterministic("ab", a + b)
        pm.Poisson("y", pm.math.exp(a + b * x), observed=y)
    return model
