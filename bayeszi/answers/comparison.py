"""Predictive accuracy by PSIS-LOO (through ArviZ): one fit, or a ranked comparison of many.

:func:`loo` estimates a fit's expected log pointwise predictive density (elpd) by
Pareto-smoothed importance sampling leave-one-out (``arviz.loo`` on the stored
log-likelihood ``y``), keeps the Pareto k of every row and warns, naming the rows, where k
exceeds 0.7 (Vehtari et al. 2024, JMLR). On request those rows are re-evaluated exactly:
``arviz.reloo`` refits the model without each of them through :class:`RefitWrapper` and
scores the held-out row under the refit's draws.

:func:`rank_models` checks that all models were fitted to the same rows, response and exposure,
and returns a table ranked by elpd with its standard error, the difference to the best model
and the standard error of that difference, p_loo, stacking weights, Pareto-k counts, and a
column saying which values are PSIS estimates and which come from exact refits.

Example
-------
>>> import bayeszi as bz                                              # doctest: +SKIP
>>> fits = bz.fit_candidates(df, counts="y ~ x", zeros="~ w",
...                          families=["poisson", "zip", "zinb"])    # doctest: +SKIP
>>> table = bz.rank_models(fits)                                      # doctest: +SKIP
>>> table[["LOO log score", "behind best", "behind se", "stacking weight"]]  # doctest: +SKIP
"""

from __future__ import annotations

import contextlib
import contextvars
import dataclasses
import warnings
from collections.abc import Iterator, Mapping
from dataclasses import dataclass, field
from typing import Any

import arviz as az
import numpy as np
import pandas as pd
import xarray as xr

from bayeszi.base.errors import BayesziError, BayesziWarning
from bayeszi.base.renamed import refusing_renamed
from bayeszi.engine import loglik
from bayeszi.engine.fit import fit_record
from bayeszi.engine.record import FitRecord
from bayeszi.families import get_family

#: Pareto k at or below this counts as low: PSIS is reliable and converges quickly (Vehtari,
#: Gelman & Gabry 2017, Stat. Comput.; from memory).
K_LOW_LIMIT = 0.5
#: Pareto k above this makes the PSIS estimate of a row unreliable (Vehtari et al. 2024, JMLR).
K_LIMIT = 0.7
#: Most exact refits one model may ask for before :func:`loo` refuses (each is a full fit).
MAX_REFITS = 20

PSIS = "PSIS"
EXACT = "exact refit"

# The ranking table's headings, in plain words (docs/glossary.md; elpd and p_loo, the paper's
# symbols, appear in the prose only).
PLACE = "place"
SCORE = "LOO log score"
SCORE_SE = "score se"
BEHIND = "behind best"
BEHIND_SE = "behind se"
BEHIND_IN_SE = "behind in se"
EFFECTIVE = "effective parameters"
WEIGHT = "stacking weight"
K_LOW = "rows low k"
K_MODERATE = "rows moderate k"
K_HIGH = "rows high k"
HIGH_K_ROWS = "high-k rows"
EXACT_ROWS = "exact refits"
VALUES = "values from"
SAMPLER = "sampler"


#: How the reader asks for exact refits, phrased for where they are: the Python default here;
#: the command line and the report set their own with :func:`refit_advice`.
_REFIT_ADVICE: contextvars.ContextVar[str] = contextvars.ContextVar(
    "refit_advice", default="pass exact_refits=True (fitted.loo or bayeszi.rank_models)")


@contextlib.contextmanager
def refit_advice(text: str) -> Iterator[None]:
    """Within the block, warnings about high Pareto k say ``text`` as the way to ask for
    exact refits (e.g. a study-file key or a command-line flag instead of a keyword).

    >>> with refit_advice("add --exact-refits"):
    ...     _REFIT_ADVICE.get()
    'add --exact-refits'
    """
    token = _REFIT_ADVICE.set(text)
    try:
        yield
    finally:
        _REFIT_ADVICE.reset(token)


# ---------------------------------------------------------------------------- results
@dataclass(eq=False)
class LooEstimate:
    """The LOO estimate of one fit.

    Attributes
    ----------
    fitted : the fitted model.
    elpd, se, p_loo : elpd_loo, its standard error and the effective number of parameters.
    pointwise : one row per data row (indexed by the data's row labels) with the response
        ``y``, ``elpd_i`` (the row's log predictive density when left out), ``pareto_k`` (from
        PSIS, kept even after an exact refit) and ``value_from`` (``"PSIS"`` or
        ``"exact refit"``).
    k_limit : rows with Pareto k above this are flagged (0.7 by default).
    elpd_data : the ArviZ ``ELPDData`` behind the numbers (after ``reloo`` the refitted rows
        carry k = 0 there, as ArviZ does).
    notes : what happened during exact refits (rows that could not be refitted, sampler
        trouble in a refit).

    Example
    -------
    >>> est = fitted.loo()                        # doctest: +SKIP
    >>> est.elpd, est.se, est.k_counts()          # doctest: +SKIP
    """

    fitted: FitRecord = field(repr=False)
    elpd: float
    se: float
    p_loo: float
    pointwise: pd.DataFrame = field(repr=False)
    k_limit: float
    elpd_data: Any = field(repr=False)
    notes: list[str] = field(default_factory=list)

    @property
    def n_draws(self) -> int:
        """Posterior draws behind the PSIS values."""
        return int(self.elpd_data["n_samples"])

    @property
    def flagged_rows(self) -> list:
        """Row labels whose Pareto k exceeds the threshold and that are still PSIS values."""
        p = self.pointwise
        return list(p.index[(p["pareto_k"] > self.k_limit) & (p["value_from"] == PSIS)])

    @property
    def exact_rows(self) -> list:
        """Row labels whose value comes from an exact refit."""
        p = self.pointwise
        return list(p.index[p["value_from"] == EXACT])

    def k_counts(self) -> dict[str, int]:
        """Rows by PSIS Pareto k: ``low`` (k <= 0.5), ``moderate`` (0.5 < k <= the limit)
        and ``high`` (k > the limit), counted before any exact refit."""
        k = self.pointwise["pareto_k"].to_numpy()
        return {"low": int(np.sum(k <= K_LOW_LIMIT)),
                "moderate": int(np.sum((k > K_LOW_LIMIT) & (k <= self.k_limit))),
                "high": int(np.sum(k > self.k_limit))}

    def __str__(self) -> str:
        c = self.k_counts()
        lines = [
            f"PSIS-LOO of a {self.fitted.spec.family} fit to {len(self.pointwise)} rows "
            f"({self.n_draws} draws)",
            f"  LOO log score {self.elpd:.1f} (se {self.se:.1f}), effective parameters "
            f"{self.p_loo:.1f}",
            f"  Pareto k: {c['low']} rows at most {K_LOW_LIMIT}, {c['moderate']} in "
            f"({K_LOW_LIMIT}, {self.k_limit}], {c['high']} above {self.k_limit}",
        ]
        if self.exact_rows:
            lines.append(f"  exact refits for row(s) {_labels(self.exact_rows)}")
        if self.flagged_rows:
            lines.append(f"  unreliable PSIS values for row(s) {_labels(self.flagged_rows)}; "
                         f"{_REFIT_ADVICE.get()} to refit without them")
        lines.extend(f"  note: {n}" for n in self.notes)
        return "\n".join(lines)

    __repr__ = __str__


def _labels(labels: list, most: int = 10) -> str:
    shown = ", ".join(str(v) for v in labels[:most])
    more = len(labels) - most
    return shown + (f" and {more} more" if more > 0 else "")


# ---------------------------------------------------------------------------- exact refits
class RefitWrapper(az.SamplingWrapper):
    """Lets ``arviz.reloo`` refit a bayeszi model without chosen rows.

    ``sel_observations`` splits the fitted data into the rows kept and the rows held out,
    ``sample`` refits the same spec (same formulas, family, priors and sampler settings; a
    seed derived from the held-out row) with :func:`bayeszi.fit_spec`, and
    ``log_likelihood__i`` scores the held-out rows under each refit draw with the family's
    closed-form log-pmf. A held-out row keeps its group's fitted effect when its group is still
    in the reduced data; when the row was its group's only record, the group is new to the
    refit and its effect is drawn from the population distribution (``groups="new"``).

    Example
    -------
    >>> wrapper = RefitWrapper(fitted)                              # doctest: +SKIP
    >>> exact = az.reloo(wrapper, loo_orig=az.loo(fitted.idata, pointwise=True))  # doctest: +SKIP
    """

    def __init__(self, fitted: FitRecord, settings: Mapping[str, Any] | None = None) -> None:
        super().__init__(model=fitted, idata_orig=fitted.idata)
        self.fitted = fitted
        self.data = _training_frame(fitted)
        base = dataclasses.replace(fitted.spec.sampler, progressbar=False)
        if settings:
            try:
                base = dataclasses.replace(base, **dict(settings))
            except TypeError:
                known = [f.name for f in dataclasses.fields(base)]
                raise BayesziError(f"refit_settings {sorted(settings)} must be sampler "
                                   f"settings: {known}") from None
        self.settings = base
        self.notes: list[str] = []
        self._held: np.ndarray = np.zeros(0, dtype=int)
        self._current: FitRecord | None = None

    def _seed(self) -> int:
        base = self.settings.seed if self.settings.seed is not None else 0
        first = int(self._held[0]) if self._held.size else 0
        return int((base + 7919 * (first + 1)) % (2**31 - 1))

    def sel_observations(self, idx: Any) -> tuple[pd.DataFrame, pd.DataFrame]:
        """Return (rows kept, rows held out) for row positions ``idx``."""
        pos = np.atleast_1d(np.asarray(idx, dtype=int)).ravel()
        keep = np.ones(len(self.data), dtype=bool)
        keep[pos] = False
        self._held = pos
        return self.data.iloc[keep], self.data.iloc[pos]

    def sample(self, modified_observed_data: pd.DataFrame) -> FitRecord:
        """Refit the model's spec to the reduced data."""
        if not isinstance(modified_observed_data, pd.DataFrame):
            raise TypeError("sample() needs the reduced data frame from sel_observations()")
        spec = dataclasses.replace(
            self.fitted.spec, sampler=dataclasses.replace(self.settings, seed=self._seed()))
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            refit = fit_record(modified_observed_data, spec)
        trouble = refit.sampling.problems()
        if trouble:
            rows = _labels(list(self.data.index[self._held]))
            self.notes.append(f"the refit without row(s) {rows} had sampler trouble: "
                              + "; ".join(trouble))
        return refit

    def get_inference_data(self, fitted_model: FitRecord) -> az.InferenceData:
        """The refit's draws (the refit itself is kept for scoring the held-out rows)."""
        idata = fitted_model.idata
        self._current = fitted_model
        return idata

    def log_likelihood__i(self, excluded_obs: pd.DataFrame, idata__i: az.InferenceData
                          ) -> xr.DataArray:
        """log p(y_i | draw) of the held-out rows under each refit draw, dims (chain, draw)
        (summed over the held-out rows when there are several)."""
        from bayeszi.engine.draws import linear_predictors

        refit = self._current
        if refit is None or refit.idata is not idata__i or not isinstance(excluded_obs,
                                                                           pd.DataFrame):
            raise TypeError("log_likelihood__i() scores the rows of the latest refit")
        rows = refit.design.encode(excluded_obs)
        unseen = any(np.any(c < 0) for c in rows.group_codes.values())
        rng = np.random.default_rng(self._seed())
        lp = linear_predictors(refit, rows, groups="new" if unseen else "known", rng=rng)
        y = excluded_obs[refit.spec.response].to_numpy(dtype=np.int64)
        fam = get_family(refit.spec.family)
        ll = fam.logpmf(y[None, :], lp.counts, lp.zeros, lp.log_alpha).sum(axis=1)
        post = idata__i.posterior
        return xr.DataArray(ll.reshape(post.sizes["chain"], post.sizes["draw"]),
                            dims=("chain", "draw"))


def _refit_problem(fitted: FitRecord, pos: int) -> str | None:
    """Why the model cannot be refitted without row ``pos`` (None when it can)."""
    from bayeszi.model.design import build_design

    data = _training_frame(fitted)
    keep = np.ones(len(data), dtype=bool)
    keep[pos] = False
    try:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            reduced = build_design(data.iloc[keep], fitted.spec)
            reduced.encode(data.iloc[[pos]])
    except BayesziError as err:
        return str(err)
    return None


# ---------------------------------------------------------------------------- LOO of one fit
def _training_frame(fitted: FitRecord) -> pd.DataFrame:
    return fitted.data


def _check_loglik(fitted: FitRecord, label: str) -> None:
    idata = fitted.idata
    if loglik.stored_per(idata) is None:
        raise BayesziError(f"model {label!r} has no stored pointwise log-likelihood 'y'; "
                           "refit it with bayeszi.fit (it stores one) before computing LOO")
    n_obs = loglik.n_records(idata)
    if n_obs != fitted.design.n:
        raise BayesziError(f"model {label!r}: the stored log-likelihood has {n_obs} rows but "
                           f"the design {fitted.design.n}; the fit is inconsistent, refit it")


def _psis(fitted: FitRecord, k_limit: float, label: str) -> LooEstimate:
    """PSIS-LOO of one fit, without warnings (callers warn)."""
    _check_loglik(fitted, label)
    with warnings.catch_warnings():
        # ArviZ's generic Pareto-k advice is replaced by ours, which names the rows.
        warnings.simplefilter("ignore", UserWarning)
        warnings.simplefilter("ignore", RuntimeWarning)
        elpd = loglik.loo(fitted.idata)
    data = _training_frame(fitted)
    pointwise = pd.DataFrame({
        "y": fitted.design.y,
        "elpd_i": np.asarray(elpd.loo_i).ravel(),
        "pareto_k": np.asarray(elpd.pareto_k).ravel(),
        "value_from": PSIS,
    }, index=data.index)
    return LooEstimate(fitted, float(elpd.elpd_loo), float(elpd.se), float(elpd.p_loo),
                       pointwise, float(k_limit), elpd)


def _check_threshold(k_limit: float) -> float:
    try:
        k = float(k_limit)
    except (TypeError, ValueError):
        raise BayesziError(f"k_limit must be a number, got {k_limit!r}; 0.7 is the "
                           "usual limit (Vehtari et al. 2024)") from None
    if not np.isfinite(k) and k != -np.inf:
        raise BayesziError(f"k_limit must be finite, got {k_limit!r}")
    return k


def _check_refit_args(max_refits: Any, refit_settings: Any) -> None:
    """Refuse a non-numeric refit budget or non-mapping refit settings before any work."""
    if isinstance(max_refits, bool) or not isinstance(max_refits, (int, np.integer)) \
            or max_refits < 0:
        raise BayesziError(f"max_refits must be a whole number >= 0, got {max_refits!r}")
    if refit_settings is not None and not isinstance(refit_settings, Mapping):
        raise BayesziError(
            f"refit_settings must map sampler settings to values, e.g. {{'draws': 500}}, got "
            f"{refit_settings!r}"
        )


def _check_refit_budget(est: LooEstimate, max_refits: int, label: str) -> None:
    n = len(est.flagged_rows)
    if n > max_refits:
        raise BayesziError(
            f"model {label!r} has {n} rows with Pareto k above {est.k_limit} (e.g. rows "
            f"{_labels(est.flagged_rows, 5)}); exact refits would take {n} full fits, more than "
            f"max_refits={max_refits}. Raise max_refits to go ahead, or first improve the model "
            "for these rows (many high k values usually mean the model is misspecified or very "
            "flexible: try another family or fewer group effects)"
        )


def _refine(est: LooEstimate, refit_settings: Mapping[str, Any] | None) -> LooEstimate:
    """Replace the flagged rows' PSIS values by exact refits through ``arviz.reloo``."""
    flagged = est.flagged_rows
    if not flagged:
        return est
    fitted = est.fitted
    positions = [int(i) for i in np.flatnonzero(
        (est.pointwise["pareto_k"].to_numpy() > est.k_limit)
        & (est.pointwise["value_from"].to_numpy() == PSIS))]
    notes = list(est.notes)
    to_refit = []
    for pos in positions:
        why = _refit_problem(fitted, pos)
        if why is None:
            to_refit.append(pos)
        else:
            notes.append(f"row {est.pointwise.index[pos]} cannot be left out and refitted "
                         f"({why}); its PSIS value is kept")
    if not to_refit:
        return dataclasses.replace(est, notes=notes)
    orig = est.elpd_data.copy()
    # reloo refits every row whose k exceeds its threshold: hide the rows we cannot refit.
    skip = np.ones(len(est.pointwise), dtype=bool)
    skip[to_refit] = False
    k_for_reloo = orig.pareto_k.copy()
    k_for_reloo.values[skip & (k_for_reloo.values > est.k_limit)] = -np.inf
    orig["pareto_k"] = k_for_reloo
    wrapper = RefitWrapper(fitted, refit_settings)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", UserWarning)
        new = az.reloo(wrapper, loo_orig=orig, k_thresh=est.k_limit, verbose=False)
    notes.extend(wrapper.notes)
    pointwise = est.pointwise.copy()
    pointwise["elpd_i"] = np.asarray(new.loo_i).ravel()
    pointwise.iloc[to_refit, pointwise.columns.get_loc("value_from")] = EXACT
    # Hidden rows get their own k back in the ArviZ object; refitted rows keep ArviZ's 0.
    k_out = np.asarray(new.pareto_k).copy()
    k_out[skip] = est.pointwise["pareto_k"].to_numpy()[skip]
    new.pareto_k.values[:] = k_out
    return LooEstimate(fitted, float(new.elpd_loo), float(new.se), float(new.p_loo),
                       pointwise, est.k_limit, new, notes)


def _warn_flagged(est: LooEstimate, label: str) -> None:
    rows = est.flagged_rows
    if rows:
        warnings.warn(
            f"model {label!r}: {len(rows)} row(s) have Pareto k above {est.k_limit} "
            f"(rows {_labels(rows)}), so their PSIS-LOO values are unreliable (Vehtari et al. "
            f"2024). To refit without each of them, {_REFIT_ADVICE.get()}; see "
            "docs/compare.md for what high k says about the model",
            BayesziWarning, stacklevel=3)
    for note in est.notes:
        warnings.warn(f"model {label!r}: {note}", BayesziWarning, stacklevel=3)


@refusing_renamed
def loo(fitted: FitRecord, exact_refits: bool = False, k_limit: float = K_LIMIT,
        max_refits: int = MAX_REFITS, refit_settings: Mapping[str, Any] | None = None,
        label: str | None = None) -> LooEstimate:
    """PSIS-LOO of one fit, with exact refits of the rows PSIS cannot handle on request.

    Parameters
    ----------
    fitted : a model from :func:`bayeszi.fit` (or :func:`bayeszi.load`).
    exact_refits : refit the model without each row whose Pareto k exceeds ``k_limit``
        and use the exact leave-one-out value for it (``arviz.reloo``); each refit is a full
        fit with the model's own sampler settings.
    k_limit : Pareto k above which a row's PSIS value is unreliable (0.7, Vehtari et al.
        2024, JMLR).
    max_refits : refuse exact refits when more rows than this are flagged.
    refit_settings : sampler settings for the refits (e.g. ``{"draws": 500}``); the seed of
        each refit is derived from the model's seed and the held-out row.
    label : the model's name in messages.

    Returns
    -------
    LooEstimate

    Example
    -------
    >>> est = loo(fitted)                       # doctest: +SKIP
    >>> est.pointwise.sort_values("pareto_k").tail(3)   # doctest: +SKIP
    """
    label = label or fitted.spec.family
    _check_refit_args(max_refits, refit_settings)
    est = _psis(fitted, _check_threshold(k_limit), label)
    if exact_refits and est.flagged_rows:
        _check_refit_budget(est, max_refits, label)
        est = _refine(est, refit_settings)
    _warn_flagged(est, label)
    return est


# ---------------------------------------------------------------------------- same data
def _frames_differ(a: pd.Series, b: pd.Series) -> np.ndarray:
    """Row mask where two columns differ (exact comparison; text compared as text)."""
    if pd.api.types.is_numeric_dtype(a) and pd.api.types.is_numeric_dtype(b) \
            and not pd.api.types.is_bool_dtype(a) and not pd.api.types.is_bool_dtype(b):
        x = a.to_numpy(dtype=float)
        y = b.to_numpy(dtype=float)
        return ~((x == y) | (np.isnan(x) & np.isnan(y)))
    return a.astype(str).to_numpy() != b.astype(str).to_numpy()


def _exposure_text(m: FitRecord) -> str:
    if m.spec.exposure:
        return f"log({m.spec.exposure})"
    if m.spec.offset:
        return f"offset {m.spec.offset}"
    return "no exposure"


def check_same_data(models: Mapping[str, FitRecord]) -> None:
    """Refuse, naming what differs, models fitted to different rows, responses or exposure.

    Compares the number of rows, the row labels, the response values, the log offset, and
    every data column two models share.

    Example
    -------
    >>> check_same_data({"zip": fit_a, "zinb": fit_b})    # doctest: +SKIP
    """
    names = list(models)
    ref_name = names[0]
    ref = models[ref_name]
    ref_data = _training_frame(ref)
    for name in names[1:]:
        m = models[name]
        data = _training_frame(m)
        head = f"models {ref_name!r} and {name!r} were fitted to different data:"
        tail = "; fit every candidate to the same data frame (bayeszi.fit_candidates does)"
        if m.design.n != ref.design.n:
            raise BayesziError(f"{head} {ref.design.n} rows vs {m.design.n} rows{tail}")
        if not ref_data.index.equals(data.index):
            diff = np.flatnonzero(ref_data.index.to_numpy() != data.index.to_numpy())
            at = int(diff[0]) if diff.size else 0
            raise BayesziError(
                f"{head} the row labels differ ({diff.size} of {ref.design.n}, first at "
                f"position {at}: {ref_data.index[at]!r} vs {data.index[at]!r}){tail}")
        y_diff = ref.design.y != m.design.y
        if y_diff.any():
            what = ("response" if ref.spec.response == m.spec.response else
                    f"response ({ref.spec.response!r} vs {m.spec.response!r})")
            raise BayesziError(
                f"{head} the {what} differs at {int(y_diff.sum())} row(s), e.g. row(s) "
                f"{_labels(list(data.index[y_diff]), 5)}{tail}")
        off_diff = ~np.isclose(ref.design.log_offset, m.design.log_offset, rtol=1e-12,
                               atol=1e-12)
        if off_diff.any():
            raise BayesziError(
                f"{head} the exposure differs ({_exposure_text(ref)} vs {_exposure_text(m)}) "
                f"at {int(off_diff.sum())} row(s), e.g. row(s) "
                f"{_labels(list(data.index[off_diff]), 5)}; rates per unit effort are only "
                f"comparable with the same exposure{tail}")
        for col in [c for c in ref_data.columns if c in data.columns]:
            bad = _frames_differ(ref_data[col], data[col])
            if bad.any():
                raise BayesziError(
                    f"{head} column {col!r} differs at {int(bad.sum())} row(s), e.g. row(s) "
                    f"{_labels(list(data.index[bad]), 5)}{tail}")


# ---------------------------------------------------------------------------- comparison
def _sampler_flag(m: FitRecord) -> str:
    d = m.sampling
    out = []
    if d.divergences:
        out.append(f"{d.divergences} divergences")
    if d.bad_rhat:
        out.append("R-hat")
    if d.bad_ess:
        out.append("low ESS")
    return ", ".join(out) if out else "ok"


@refusing_renamed
def rank_models(models: Mapping[str, FitRecord | LooEstimate], exact_refits: bool = False,
            k_limit: float = K_LIMIT, max_refits: int = MAX_REFITS,
            refit_settings: Mapping[str, Any] | None = None) -> pd.DataFrame:
    """Rank models fitted to the same data by PSIS-LOO elpd (higher is better).

    Parameters
    ----------
    models : name -> fitted model (or a :class:`LooEstimate` already computed for one).
    exact_refits, k_limit, max_refits, refit_settings : as in :func:`loo`; the refit
        budget is checked for every model before any refit starts.

    Returns
    -------
    DataFrame indexed by model name, best first, with columns ``place`` (1 = best),
    ``family``, ``LOO log score`` (elpd_loo, the expected log predictive density of a new
    record, estimated by leaving each out) and its ``score se``, ``behind best`` (this model
    minus the best, so 0 or negative), ``behind se`` (standard error of that difference, from
    the paired pointwise values), ``behind in se`` (their ratio), ``effective parameters``
    (p_loo), ``stacking weight`` (Yao et al. 2018, Bayesian Anal.), ``rows low k`` /
    ``rows moderate k`` / ``rows high k`` (rows with PSIS Pareto k <= 0.5, in (0.5, limit],
    above the limit), ``high-k rows`` (their labels), ``exact refits`` (how many values come
    from exact refits), ``values from`` (``"PSIS"`` or ``"PSIS + exact"``), and ``sampler``
    (``"ok"`` or the sampler trouble of that fit).

    Example
    -------
    >>> table = rank_models({"poisson": m1, "zinb": m2})    # doctest: +SKIP
    >>> table.loc["poisson", "behind in se"] < -2          # doctest: +SKIP
    """
    fits, given = _fits_of(models)
    check_same_data(fits)
    k_limit = _check_threshold(k_limit)
    ests = {name: g if (g := given.get(name)) is not None and g.k_limit == k_limit
            else _psis(m, k_limit, name) for name, m in fits.items()}
    if exact_refits:
        for name, est in ests.items():
            _check_refit_budget(est, max_refits, name)
        ests = {name: _refine(est, refit_settings) for name, est in ests.items()}
    for name, est in ests.items():
        _warn_flagged(est, name)
    troubled = {name: _sampler_flag(m) for name, m in fits.items()}
    bad = {n: t for n, t in troubled.items() if t != "ok"}
    if bad:
        warnings.warn("compared fits with sampler trouble (their LOO values share it): "
                      + "; ".join(f"{n}: {t}" for n, t in bad.items()),
                      BayesziWarning, stacklevel=2)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        az_table = az.compare({n: e.elpd_data for n, e in ests.items()}, ic="loo",
                              method="stacking", scale="log")
    order = list(az_table.index)
    best_i = ests[order[0]].pointwise["elpd_i"].to_numpy()
    rows = [_ranked_row(name, place, ests[name], best_i, name == order[0],
                        float(az_table.loc[name, "weight"]), troubled[name], k_limit)
            for place, name in enumerate(order, start=1)]
    table = pd.DataFrame(rows).set_index("model")
    table.attrs.update({"k_limit": k_limit, "n_rows": len(best_i), "scale": "log",
                        "weights": "stacking"})
    return table


def _fits_of(models: object) -> tuple[dict[str, FitRecord], dict[str, LooEstimate]]:
    """The fits to compare by name, and the LOO estimates given for some of them."""
    if not isinstance(models, Mapping) or len(models) < 2:
        raise BayesziError("rank_models() needs a dict of at least two named fits, e.g. "
                           "{'zip': fit_a, 'zinb': fit_b}; for one fit use fitted.loo()")
    fits: dict[str, FitRecord] = {}
    given: dict[str, LooEstimate] = {}
    for name, value in models.items():
        if isinstance(value, LooEstimate):
            given[str(name)] = value
            fits[str(name)] = value.fitted
        elif isinstance(value, FitRecord):
            fits[str(name)] = value
        else:
            raise BayesziError(f"rank_models(): {name!r} is a {type(value).__name__}, not a fitted "
                               "model; pass the results of bayeszi.fit")
    if len(fits) < len(models):
        raise BayesziError("rank_models(): two models share a name once turned into text; rename")
    return fits, given


def _ranked_row(name: str, place: int, est: LooEstimate, best_i: np.ndarray, is_best: bool,
                weight: float, sampler: str, k_limit: float) -> dict[str, Any]:
    """One row of :func:`rank_models`: a model's LOO against the best model's pointwise values."""
    diff_i = est.pointwise["elpd_i"].to_numpy() - best_i
    diff = float(diff_i.sum())
    diff_se = float(np.sqrt(len(best_i) * np.var(diff_i)))
    counts = est.k_counts()
    k = est.pointwise["pareto_k"].to_numpy()
    n_exact = len(est.exact_rows)
    return {
        "model": name, PLACE: place, "family": est.fitted.spec.family,
        SCORE: est.elpd, SCORE_SE: est.se, BEHIND: diff, BEHIND_SE: diff_se,
        BEHIND_IN_SE: diff / diff_se if not is_best and diff_se > 0 else np.nan,
        EFFECTIVE: est.p_loo, WEIGHT: weight,
        K_LOW: counts["low"], K_MODERATE: counts["moderate"], K_HIGH: counts["high"],
        HIGH_K_ROWS: _labels(list(est.pointwise.index[k > k_limit])),
        EXACT_ROWS: n_exact, VALUES: "PSIS + exact" if n_exact else PSIS,
        SAMPLER: sampler,
    }


HEADINGS = (PLACE, "family", SCORE, SCORE_SE, BEHIND, BEHIND_SE, BEHIND_IN_SE, EFFECTIVE, WEIGHT,
            K_LOW, K_MODERATE, K_HIGH, HIGH_K_ROWS, EXACT_ROWS, VALUES, SAMPLER)


__all__ = ["HEADINGS", "K_LIMIT", "K_LOW_LIMIT", "LooEstimate", "RefitWrapper",
           "check_same_data", "loo", "rank_models", "refit_advice"]
