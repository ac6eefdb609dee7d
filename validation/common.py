"""Shared pieces of the validation scripts: a fixed prior, simulated data, fits and tests.

Simulation-based calibration (SBC, Talts et al. 2018, arXiv:1804.06788) and prior-drawn
coverage are exact only when the parameters are drawn from the very prior the fit uses.
bayeszi's *default* priors depend on the data (the intercept priors are centred on the
observed rate and zero share), so here every prior is given explicitly through
``bayeszi.fit(priors=...)``; :class:`SimPrior` holds them and :func:`draw_truth` draws from
the same distributions.

Two facts about bayeszi's prior conventions matter (see bayeszi/model/priors.py):

- a slope prior is per unit of the predictor as written in the formula (bayeszi carries it to
  its internal scale exactly);
- an intercept prior refers to the linear predictor at the *average* of the predictors
  (bayeszi centres each predictor on its mean in the fitted data). So the simulation draws
  the centred intercept ``a`` and builds ``eta = a + sum_j beta_j (x_j - mean(x_j))``; the
  user-scale intercept is then ``a - sum_j beta_j mean(x_j)``.

Example
-------
>>> import numpy as np
>>> rng = np.random.default_rng(1)
>>> df = covariates(rng, 50, n_groups=5)
>>> truth = draw_truth(rng, "zinb", SimPrior(), n_groups=5)
>>> df["y"] = simulate_counts(rng, "zinb", df, truth)
>>> sorted(true_quantities("zinb", df, truth, groups=True))[:3]
['counts effect s01', 'counts site effects: sd', 'counts: Intercept']
"""

from __future__ import annotations

import json
import os
import platform
import tempfile
import time
import warnings
from collections.abc import Sequence
from dataclasses import asdict, dataclass
from typing import Any

import numpy as np
import pandas as pd
from scipy import stats

import bayeszi as bz

#: Formulas used throughout: a continuous (x) and a binary (b) input for the counts, a
#: continuous one (w) for the zeros part; effort enters as exposure.
COUNTS = "y ~ x + b"
ZEROS = "~ w"
COUNTS_TERMS = ("Intercept", "x", "b")
ZEROS_TERMS = ("Intercept", "w")
GROUP = "site"

RESULTS = os.path.join(os.path.dirname(os.path.abspath(__file__)), "results")


# ============================================================================ the fixed prior
@dataclass(frozen=True)
class SimPrior:
    """The prior used both to draw the truth and to fit (all explicit, none data-based).

    Chosen to give count data of the kind bayeszi is for (a mean near 2-3 per unit of effort,
    a zero share from ~10% to ~70%), not to be vague: SBC is valid for any proper prior, and
    a prior that produced counts in the millions would test only numerical overflow.
    """

    counts_intercept: tuple[float, float] = (0.8, 0.5)
    counts_slope_sd: float = 0.5
    zeros_intercept: tuple[float, float] = (-0.5, 0.7)
    zeros_slope_sd: float = 0.7
    dispersion_rate: float = 3.0  # sqrt(alpha) ~ Exponential(3), bayeszi's default
    group_sd: tuple[float, float] = (0.5, 0.5)  # half-normal scales, counts and zeros

    def bayeszi_priors(self, family: str, groups: bool) -> dict[str, Any]:
        """The ``priors=`` argument of :func:`bayeszi.fit` matching :func:`draw_truth`."""
        fam = bz.get_family(family)
        normal = bz.priors.normal
        out: dict[str, Any] = {"counts": {
            "Intercept": normal(mean=self.counts_intercept[0], sd=self.counts_intercept[1]),
            "x": normal(mean=0.0, sd=self.counts_slope_sd),
            "b": normal(mean=0.0, sd=self.counts_slope_sd)}}
        if fam.zeros_kind is not None:
            out["zeros"] = {"Intercept": normal(mean=self.zeros_intercept[0],
                                                sd=self.zeros_intercept[1]),
                            "w": normal(mean=0.0, sd=self.zeros_slope_sd)}
        if fam.has_dispersion:
            out["dispersion"] = bz.priors.exponential(rate=self.dispersion_rate)
        if groups:
            out["group_sd"] = {"counts": bz.priors.half_normal(sd=self.group_sd[0]),
                               "zeros": bz.priors.half_normal(sd=self.group_sd[1])}
        return out


def covariates(rng: np.random.Generator, n: int, n_groups: int = 0) -> pd.DataFrame:
    """``n`` rows of inputs: x ~ N(0, 1), b ~ Bernoulli(0.4), w ~ N(0, 1), exposure ~
    U(0.5, 2) and, with ``n_groups``, a balanced ``site`` label s01, s02, ... in random order."""
    df = pd.DataFrame({
        "x": rng.normal(0.0, 1.0, n),
        "b": (rng.random(n) < 0.4).astype(np.int64),
        "w": rng.normal(0.0, 1.0, n),
        "exposure": rng.uniform(0.5, 2.0, n),
    })
    if n_groups:
        codes = rng.permutation(np.arange(n) % n_groups)
        df[GROUP] = [f"s{c + 1:02d}" for c in codes]
    return df


def draw_truth(rng: np.random.Generator, family: str, prior: SimPrior, n_groups: int = 0
               ) -> dict[str, Any]:
    """One parameter set drawn from ``prior`` (intercepts centred; see the module notes)."""
    fam = bz.get_family(family)
    t: dict[str, Any] = {
        "counts_centred": np.array([rng.normal(*prior.counts_intercept),
                                    rng.normal(0.0, prior.counts_slope_sd),
                                    rng.normal(0.0, prior.counts_slope_sd)]),
    }
    if fam.zeros_kind is not None:
        t["zeros_centred"] = np.array([rng.normal(*prior.zeros_intercept),
                                       rng.normal(0.0, prior.zeros_slope_sd)])
    if fam.has_dispersion:
        t["alpha"] = float(rng.exponential(1.0 / prior.dispersion_rate)) ** 2
    if n_groups:
        t["sd_counts"] = abs(float(rng.normal(0.0, prior.group_sd[0])))
        t["effect_counts"] = rng.normal(0.0, t["sd_counts"], n_groups)
        if fam.zeros_kind is not None:
            t["sd_zeros"] = abs(float(rng.normal(0.0, prior.group_sd[1])))
            t["effect_zeros"] = rng.normal(0.0, t["sd_zeros"], n_groups)
    return t


def _site_codes(df: pd.DataFrame) -> np.ndarray:
    return df[GROUP].str[1:].astype(int).to_numpy() - 1


def linear_predictors(family: str, df: pd.DataFrame, truth: dict[str, Any],
                      centre_on: pd.DataFrame | None = None
                      ) -> tuple[np.ndarray, np.ndarray | None, float | None]:
    """True (eta_c, eta_z, log_alpha) of the rows of ``df``; the predictors are centred on
    the means of ``centre_on`` (default: ``df`` itself, the fitted data)."""
    ref = df if centre_on is None else centre_on
    a, bx, bb = truth["counts_centred"]
    eta_c = (a + bx * (df["x"] - ref["x"].mean()) + bb * (df["b"] - ref["b"].mean())
             + np.log(df["exposure"])).to_numpy()
    eta_z = None
    if "zeros_centred" in truth:
        az_, bw = truth["zeros_centred"]
        eta_z = (az_ + bw * (df["w"] - ref["w"].mean())).to_numpy()
    if GROUP in df.columns and "effect_counts" in truth:
        codes = _site_codes(df)
        eta_c = eta_c + truth["effect_counts"][codes]
        if eta_z is not None:
            eta_z = eta_z + truth["effect_zeros"][codes]
    log_alpha = float(np.log(truth["alpha"])) if "alpha" in truth else None
    return eta_c, eta_z, log_alpha


def simulate_counts(rng: np.random.Generator, family: str, df: pd.DataFrame,
                    truth: dict[str, Any]) -> np.ndarray:
    """Counts drawn with bayeszi's own NumPy generator (``get_family(f).random``), which
    tests/test_families.py checks against scipy.stats."""
    eta_c, eta_z, la = linear_predictors(family, df, truth)
    return bz.get_family(family).random(rng, eta_c, eta_z, la)


def expected_count(family: str, eta_c: np.ndarray, eta_z: np.ndarray | None,
                   log_alpha: float | None) -> np.ndarray:
    """E[Y] written out here, independently of bayeszi.families: mu (Poisson, NB),
    (1 - p) mu (zero inflation, Lambert 1992, Technometrics), (1 - p) mu / (1 - f(0)) for a
    hurdle with f(0) = exp(-mu) (Poisson) or (1 + alpha mu)^(-1/alpha) (NB, the NB2 form)."""
    fam = bz.get_family(family)
    mu = np.exp(eta_c)
    if fam.zeros_kind is None:
        return mu
    p = 1.0 / (1.0 + np.exp(-eta_z))
    if fam.zeros_kind == "inflation":
        return (1.0 - p) * mu
    if fam.has_dispersion:
        alpha = np.exp(log_alpha)
        f0 = np.exp(-np.log1p(alpha * mu) / alpha)
    else:
        f0 = np.exp(-mu)
    return (1.0 - p) * mu / (1.0 - f0)


def true_quantities(family: str, df: pd.DataFrame, truth: dict[str, Any], groups: bool,
                    n_mean_rows: int = 1) -> dict[str, float]:
    """The quantities checked, by name, at their true values (user-scale coefficients)."""
    a, bx, bb = truth["counts_centred"]
    out = {"counts: Intercept": float(a - bx * df["x"].mean() - bb * df["b"].mean()),
           "counts: x": float(bx), "counts: b": float(bb)}
    if "zeros_centred" in truth:
        az_, bw = truth["zeros_centred"]
        out["zeros: Intercept"] = float(az_ - bw * df["w"].mean())
        out["zeros: w"] = float(bw)
    if "alpha" in truth:
        out["dispersion"] = float(truth["alpha"])
    if groups:
        out[f"counts {GROUP} effects: sd"] = truth["sd_counts"]
        out["counts effect s01"] = float(truth["effect_counts"][0])
        if "sd_zeros" in truth:
            out[f"zeros {GROUP} effects: sd"] = truth["sd_zeros"]
            out["zeros effect s01"] = float(truth["effect_zeros"][0])
    mean = expected_count(family, *linear_predictors(family, df, truth))
    for i in range(n_mean_rows):
        out[f"mean count, row {i + 1}"] = float(mean[i])
    return out


def posterior_quantities(fitted: Any, df: pd.DataFrame, groups: bool, n_mean_rows: int = 1
                         ) -> dict[str, np.ndarray]:
    """Posterior draws (chains one after another) of every quantity of
    :func:`true_quantities`, taken from bayeszi's outputs: the user-scale coefficients in the
    posterior and the expected counts from ``fitted.prediction_draws``."""
    post = fitted.idata.posterior
    out: dict[str, np.ndarray] = {}
    for term in COUNTS_TERMS:
        out[f"counts: {term}"] = post["counts_coef"].sel(counts_term=term).values.ravel()
    if "zeros_coef" in post:
        for term in ZEROS_TERMS:
            out[f"zeros: {term}"] = post["zeros_coef"].sel(zeros_term=term).values.ravel()
    if "dispersion" in post:
        out["dispersion"] = post["dispersion"].values.ravel()
    if groups:
        out[f"counts {GROUP} effects: sd"] = post[f"counts_sd_{GROUP}"].values.ravel()
        out["counts effect s01"] = post[f"counts_effect_{GROUP}"].sel(
            {GROUP: "s01"}).values.ravel()
        if f"zeros_sd_{GROUP}" in post:
            out[f"zeros {GROUP} effects: sd"] = post[f"zeros_sd_{GROUP}"].values.ravel()
            out["zeros effect s01"] = post[f"zeros_effect_{GROUP}"].sel(
                {GROUP: "s01"}).values.ravel()
    with warnings.catch_warnings():  # sampler trouble is recorded by fit(), not repeated
        warnings.simplefilter("ignore", bz.BayesziWarning)
        means = fitted.prediction_draws(df.iloc[:n_mean_rows], what="mean", groups="known")
    for i in range(n_mean_rows):
        out[f"mean count, row {i + 1}"] = np.asarray(means.values[:, i], dtype=float)
    return out


# ============================================================================ fitting
@dataclass(frozen=True)
class FitSettings:
    """NUTS settings of every validation fit (cores=1 and two chains: a shared machine)."""

    draws: int = 300
    warmup_steps: int = 400
    chains: int = 2
    cores: int = 1
    acceptance_target: float = 0.9


def fit(df: pd.DataFrame, family: str, groups: bool, prior: SimPrior, settings: FitSettings,
        seed: int) -> tuple[Any, dict[str, Any]]:
    """Fit with :func:`bayeszi.fit`; return the fit and its sampler record (divergences,
    worst R-hat and ESS, seconds, bayeszi's warnings as text). Warnings are recorded, not
    hidden: they go into the results tables."""
    fam = bz.get_family(family)
    t0 = time.perf_counter()
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        m = bz.fit(df, counts=COUNTS, zeros=ZEROS if fam.zeros_kind else None, family=family,
                   exposure="exposure", groups=GROUP if groups else None,
                   priors=prior.bayeszi_priors(family, groups), draws=settings.draws,
                   warmup_steps=settings.warmup_steps, chains=settings.chains, cores=settings.cores,
                   acceptance_target=settings.acceptance_target, seed=seed, progressbar=False)
    diag = m.diagnostics()
    table = diag.table
    record = {
        "divergences": int(diag.divergences),
        "max_rhat": float(table["r_hat"].max()),
        "min_ess_bulk": float(table["ess_bulk"].min()),
        "min_ess_tail": float(table["ess_tail"].min()),
        "seconds": time.perf_counter() - t0,
        "warnings": " | ".join(sorted({str(w.message)[:120] for w in caught
                                       if issubclass(w.category, bz.BayesziWarning)})),
    }
    return m, record


def seed_for(*keys: int | str) -> np.random.Generator:
    """An independent generator for one replicate, from a base seed and labels."""
    ints = [k if isinstance(k, int) else int.from_bytes(str(k).encode(), "little") % 2**32
            for k in keys]
    return np.random.default_rng(np.random.SeedSequence(ints))


# ============================================================================ ranks and tests
def thin_index(total: int, keep: int) -> np.ndarray:
    """``keep`` evenly spaced positions among ``total`` draws (chains one after another)."""
    if keep > total:
        raise ValueError(f"cannot keep {keep} of {total} draws")
    return np.round(np.linspace(0, total - 1, keep)).astype(np.int64)


def rank_of(truth: float, draws: np.ndarray) -> int:
    """SBC rank: how many of the (thinned) draws lie below the true value, 0 .. len(draws)."""
    return int(np.sum(np.asarray(draws) < truth))


def rank_bins(n_ranks: int, replicates: int, choices: Sequence[int] = (20, 10, 5, 4, 2)
              ) -> int:
    """The most bins (each an equal share of the ``n_ranks`` possible ranks) such that every
    bin expects at least 5 replicates, the usual validity condition of the chi-square test
    (common practice, no source)."""
    for b in choices:
        if n_ranks % b == 0 and replicates / b >= 5:
            return b
    return 2 if n_ranks % 2 == 0 else 1


def rank_uniformity(ranks: Sequence[int], n_ranks: int, bins: int | None = None
                    ) -> dict[str, Any]:
    """Chi-square test that ``ranks`` (values 0 .. n_ranks - 1) are uniform, on ``bins``
    equal bins (default :func:`rank_bins`); uses ``scipy.stats.chisquare``."""
    r = np.asarray(ranks, dtype=np.int64)
    if r.size == 0:
        raise ValueError("no ranks to test")
    if r.min() < 0 or r.max() >= n_ranks:
        raise ValueError(f"ranks must lie in 0 .. {n_ranks - 1}, got {r.min()} .. {r.max()}")
    bins = bins or rank_bins(n_ranks, r.size)
    if n_ranks % bins:
        raise ValueError(f"{bins} bins do not split {n_ranks} ranks evenly")
    observed = np.bincount(r * bins // n_ranks, minlength=bins)
    expected = np.full(bins, r.size / bins)
    if bins < 2:
        return {"bins": bins, "chi2": np.nan, "p": np.nan, "observed": observed.tolist()}
    res = stats.chisquare(observed, expected)
    return {"bins": bins, "chi2": float(res.statistic), "p": float(res.pvalue),
            "observed": observed.tolist()}


def bonferroni(pvalues: Sequence[float]) -> float:
    """The smallest p-value times their number, capped at 1: a valid test of "all uniform"
    whatever the dependence between the tests (Bonferroni inequality)."""
    p = np.asarray([v for v in pvalues if np.isfinite(v)], dtype=float)
    return float(min(1.0, p.min() * p.size)) if p.size else float("nan")


def binomial_band(n: int, rate: float = 0.9, level: float = 0.99) -> tuple[int, int]:
    """Central ``level`` range of Binomial(n, rate): the covered counts consistent with a
    true coverage of ``rate`` (``scipy.stats.binom``)."""
    lo = int(stats.binom.ppf((1 - level) / 2, n, rate))
    hi = int(stats.binom.ppf(1 - (1 - level) / 2, n, rate))
    return lo, hi


def coverage_test(covered: Sequence[bool], rate: float = 0.9) -> dict[str, Any]:
    """Coverage count, rate, the 99% binomial band and the exact two-sided binomial p-value
    (``scipy.stats.binomtest``) against the nominal ``rate``."""
    c = np.asarray(covered, dtype=bool)
    lo, hi = binomial_band(c.size, rate)
    p = float(stats.binomtest(int(c.sum()), c.size, rate).pvalue) if c.size else float("nan")
    return {"n": int(c.size), "covered": int(c.sum()), "rate": float(c.mean()),
            "band_lo": lo / c.size, "band_hi": hi / c.size, "p": p}


# ============================================================================ output
def write_csv(frame: pd.DataFrame, path: str) -> str:
    """Write ``frame`` to ``path`` through a temporary file and a rename (never half-way)."""
    os.makedirs(os.path.dirname(os.path.abspath(path)), exist_ok=True)
    fd, tmp = tempfile.mkstemp(prefix=".tmp-", suffix=".csv",
                               dir=os.path.dirname(os.path.abspath(path)))
    os.close(fd)
    try:
        frame.to_csv(tmp, index=False)
        os.replace(tmp, path)
    except BaseException:
        if os.path.exists(tmp):
            os.remove(tmp)
        raise
    return path


def write_json(obj: Any, path: str) -> str:
    """Write ``obj`` as JSON through a temporary file and a rename."""
    os.makedirs(os.path.dirname(os.path.abspath(path)), exist_ok=True)
    fd, tmp = tempfile.mkstemp(prefix=".tmp-", suffix=".json",
                               dir=os.path.dirname(os.path.abspath(path)))
    with os.fdopen(fd, "w") as fh:
        json.dump(obj, fh, indent=2, default=str)
    os.replace(tmp, path)
    return path


def read_json(path: str) -> dict[str, Any]:
    """Read a JSON file written by :func:`write_json` (empty dict when absent)."""
    if not os.path.exists(path):
        return {}
    with open(path) as fh:
        return json.load(fh)


def jsonable(obj: Any) -> Any:
    """``obj`` as it reads back from JSON (tuples become lists and so on)."""
    return json.loads(json.dumps(obj, default=str))


def save_figure(fig: Any, path: str) -> str:
    """Save a matplotlib figure through a temporary file and a rename."""
    os.makedirs(os.path.dirname(os.path.abspath(path)), exist_ok=True)
    root, ext = os.path.splitext(path)
    tmp = f"{root}.tmp{ext}"
    fig.savefig(tmp, dpi=110, bbox_inches="tight")
    os.replace(tmp, path)
    return path


def run_info(settings: dict[str, Any]) -> dict[str, Any]:
    """What was run, where and with which versions (stored beside the results)."""
    import arviz
    import pymc

    return {"settings": settings, "python": platform.python_version(),
            "bayeszi": getattr(bz, "__version__", "?"), "pymc": pymc.__version__,
            "arviz": arviz.__version__, "numpy": np.__version__,
            "cpu_count": os.cpu_count(),
            "load_average_at_start": os.getloadavg() if hasattr(os, "getloadavg") else None,
            "started": time.strftime("%Y-%m-%d %H:%M:%S")}


def as_dict(obj: Any) -> dict[str, Any]:
    """A dataclass as a plain dict (for run_info)."""
    return asdict(obj)


def say(message: str, quiet: bool = False) -> None:
    """Print a timestamped progress line (unless ``quiet``)."""
    if not quiet:
        print(time.strftime("%H:%M:%S"), message, flush=True)
