"""Posterior predictive checks of zeros and counts, in NumPy over posterior draws.

Every check answers one question about a fitted model and returns a DataFrame:

- :func:`zero_check`: does the model reproduce the share of zeros, overall and per group?
- :func:`count_frequencies`: observed against expected number of records with each count
  k = 0..K plus a tail bin (drawn by :func:`bayeszi.plots.checkplots.rootogram_figure`).
- :func:`dispersion_check`, :func:`max_count_check`: spread and largest count of replicated
  data sets against the observed ones; :func:`replicated_statistics` gives the draws.
- :func:`pearson_check`: the Pearson statistic, sum of (y - E[y])^2 / Var[y] over the
  records, as a posterior predictive discrepancy (observed against replicated data, draw by
  draw; Gelman, Meng & Stern 1996, Statistica Sinica 6:733-807), with its familiar reading
  per residual degree of freedom; :func:`pearson_draws` gives the draws.
- :func:`residuals`: randomized quantile residuals (Dunn & Smyth 1996, Journal of
  Computational and Graphical Statistics 5:236-244), from the posterior predictive CDF or
  from its leave-one-out version (PSIS weights through ArviZ).
- :func:`zero_sources`: for each observed zero, the posterior probability that it came from
  the zeros part rather than from the count process.

All numbers come from the closed forms of :mod:`bayeszi.families` applied to the per-draw
linear predictors of :func:`bayeszi.engine.draws.linear_predictors`, worked through the rows in
chunks so that no array holds more than about :data:`MAX_FLOATS` floats. Checks that need
replicated data draw them with ``family.random`` from a seeded NumPy generator, always in the
same chunks; :func:`replicated_data` draws them once for all of them (a report), and each
such check given them as ``replicates=`` returns what it returns alone with the same seed.

Example
-------
>>> import bayeszi as bz                                             # doctest: +SKIP
>>> m = bz.fit(df, counts="y ~ x1", zeros="~ w", family="zip")       # doctest: +SKIP
>>> zero_check(m).loc[0, ["observed share", "expected share", "tail prob"]]  # doctest: +SKIP
>>> count_frequencies(m).head()                                      # doctest: +SKIP
"""

from __future__ import annotations

import warnings
from collections.abc import Iterator, Sequence
from dataclasses import dataclass

import numpy as np
import pandas as pd
from scipy import stats

from bayeszi.base import names, options
from bayeszi.base.errors import BayesziError, BayesziWarning
from bayeszi.engine.draws import LinearPredictors, fitted_rows, linear_predictors, n_draws
from bayeszi.engine.record import FitRecord
from bayeszi.families import Family, get_family
from bayeszi.model.design import EncodedRows

__all__ = [
    "MAX_FLOATS",
    "count_frequencies",
    "default_kmax",
    "dispersion_check",
    "distinct_inputs",
    "expected_frequency_draws",
    "max_count_check",
    "statistics_check",
    "tail_probability",
    "model_label",
    "pearson_check",
    "pearson_draws",
    "replicated_frequency_draws",
    "replicated_statistics",
    "residual_df",
    "Replicates",
    "replicated_data",
    "residuals",
    "zero_check",
    "zero_source_tables",
    "zero_sources",
]

#: Upper bound on the number of float64 values in the largest working array of a chunk
#: (5e6 floats = 40 MB); rows are processed in chunks sized to respect it.
MAX_FLOATS = 5_000_000
#: Largest K accepted for the count-frequency table (bins 0..K plus a tail bin).
KMAX_LIMIT = 1000
#: The default K never exceeds this, so tables and plots stay readable.
KMAX_DEFAULT_CAP = 50
#: Tail probabilities below FLAG (or above 1 - FLAG) get a verdict in the tables.
FLAG = 0.05
#: Most levels a ``by`` column may have when it is not a grouping column of the fit.
MAX_BY_LEVELS = 500
#: A Pareto k above this makes a leave-one-out PIT value unreliable (Vehtari et al. 2024,
#: Journal of Machine Learning Research 25(72)).
PARETO_K_LIMIT = 0.7
#: Lower-tail floor of the residuals: the CDF is 1 - P(Y > y), which cannot resolve
#: probabilities below about 1e-16, so residuals below Phi^-1(1e-16) = -8.2 are floored.
_U_FLOOR = 1e-16


# =============================================================================================
# Shared plumbing
# =============================================================================================


def model_label(family: str) -> str:
    """One line saying what each part of ``family`` models (for titles and table notes).

    Example
    -------
    >>> model_label("zip")
    'zip: zeros part models P(extra zero); counts part models the Poisson mean'
    """
    law = "negative binomial" if get_family(family).has_dispersion else "Poisson"
    kind = names.zero_mechanism(family)
    if kind is None:
        return f"{family}: counts part only ({law} mean), no zeros part"
    counts = f"the {law} mean" if kind == "inflation" else f"the zero-truncated {law} for Y > 0"
    return f"{family}: zeros part models {names.zeros_label(family)}; counts part models {counts}"


def _draw_index(fitted: FitRecord, draws: int | None) -> np.ndarray | None:
    """The draws used (:func:`bayeszi.base.options.draw_subset`; None: all of them)."""
    return options.draw_subset(draws, n_draws(fitted))


def _n_used(fitted: FitRecord, index: np.ndarray | None) -> int:
    return n_draws(fitted) if index is None else len(index)


def _chunks(n_rows: int, n_draws_used: int, per_row: int,
            max_floats: int = MAX_FLOATS) -> Iterator[slice]:
    """Row slices such that draws x rows x per_row stays at or below ``max_floats``."""
    size = max(1, int(max_floats // max(1, n_draws_used * per_row)))
    for start in range(0, n_rows, size):
        yield slice(start, min(start + size, n_rows))


def _subset(rows: EncodedRows, sel: slice | np.ndarray) -> EncodedRows:
    offset = rows.log_offset[sel]
    return EncodedRows(
        rows.X_counts[sel],
        None if rows.X_zeros is None else rows.X_zeros[sel],
        offset,
        {k: v[sel] for k, v in rows.group_codes.items()},
        int(offset.shape[0]),
    )


def distinct_inputs(rows: EncodedRows) -> tuple[EncodedRows, np.ndarray]:
    """Records that share every model input (both design rows, log offset, group codes)
    have the same predictive distribution: keep one of each, with its number of records.

    With categorical covariates and whole-number effort this shrinks the work of the
    frequency table many times over; with continuous covariates it changes nothing.

    Example
    -------
    >>> rows, weight = distinct_inputs(fitted_rows(m))           # doctest: +SKIP
    >>> weight.sum() == m.design.n                                # doctest: +SKIP
    True
    """
    parts = [rows.X_counts, rows.log_offset[:, None]]
    if rows.X_zeros is not None:
        parts.append(rows.X_zeros)
    parts.extend(codes[:, None].astype(np.float64) for _, codes in sorted(rows.group_codes.items()))
    key = np.ascontiguousarray(np.hstack(parts))
    _, first, counts = np.unique(key, axis=0, return_index=True, return_counts=True)
    if first.size == rows.n:
        return rows, np.ones(rows.n)
    return _subset(rows, first), counts.astype(np.float64)


def _predictors(fitted: FitRecord, rows: EncodedRows, sel: slice | np.ndarray,
                index: np.ndarray | None) -> LinearPredictors:
    return linear_predictors(fitted, _subset(rows, sel), groups="known", draw_index=index)


def _family(fitted: FitRecord) -> Family:
    return get_family(fitted.spec.family)


def tail_probability(replicated: np.ndarray, observed: float) -> float:
    """P(T_rep > T_obs) + P(T_rep = T_obs) / 2 (ties counted half, so that a discrete
    statistic that the model reproduces exactly sits at 1/2 rather than near 1).

    Example
    -------
    >>> tail_probability([1, 2, 2, 3], 2)
    0.5
    """
    rep = np.asarray(replicated, dtype=np.float64)
    return float(np.mean(rep > observed) + 0.5 * np.mean(rep == observed))


def _verdict(tail: float, flag: float, more: str, fewer: str) -> str:
    if not np.isfinite(tail):
        return "not available"
    if tail < flag:
        return more
    if tail > 1 - flag:
        return fewer
    return "in line with the model"


def _check_flag(flag: float) -> float:
    if not isinstance(flag, (int, float)) or not 0 < flag < 0.5:
        raise BayesziError(f"flag must lie in (0, 0.5), got {flag!r}; e.g. flag=0.05")
    return float(flag)


#: What ``by`` accepts: a column name, a Series of labels aligned on the fitted data's index,
#: an array of labels in record order, or a list of these; None = the fit's grouping columns.
ByArg = str | pd.Series | np.ndarray | Sequence[str | pd.Series | np.ndarray] | None


@dataclass
class _Grouping:
    """One ``by`` column: integer codes per fitted row and the level labels."""

    name: str
    codes: np.ndarray
    levels: list[str]


def _labels_grouping(name: str, labels: np.ndarray) -> _Grouping:
    labels = np.asarray(labels).astype(str)
    levels = sorted(set(labels))
    if len(levels) > MAX_BY_LEVELS:
        raise BayesziError(
            f"by={name!r} has {len(levels)} distinct values, too many to check one by one "
            f"(at most {MAX_BY_LEVELS}); bin it first (e.g. pandas.cut) or choose a grouping "
            "column"
        )
    lookup = {lv: i for i, lv in enumerate(levels)}
    return _Grouping(name, np.array([lookup[v] for v in labels], dtype=np.int64), levels)


def _series_grouping(fitted: FitRecord, item: pd.Series | np.ndarray) -> _Grouping:
    """Labels given as a Series (aligned on the fitted data's index) or an array (in order)."""
    n = fitted.design.n
    if isinstance(item, pd.Series):
        name = str(item.name) if item.name is not None else "by"
        index = fitted.design.index
        if item.index.equals(index):
            return _labels_grouping(name, item.to_numpy())
        if item.index.is_unique and index.isin(item.index).all():
            return _labels_grouping(name, item.reindex(index).to_numpy())
        # a reloaded fit may hold its row labels as text: match them as text
        as_text = pd.Series(item.to_numpy(), index=item.index.astype(str))
        text_index = index.astype(str)
        if as_text.index.is_unique and text_index.isin(as_text.index).all():
            return _labels_grouping(name, as_text.reindex(text_index).to_numpy())
        raise BayesziError(
            f"by: the Series {name!r} does not cover the fitted records (its index lacks "
            "some of the fitted data's row labels); pass a column of the data frame that was "
            "fitted, e.g. by=df['site']"
        )
    arr = np.asarray(item)
    if arr.ndim != 1 or arr.shape[0] != n:
        raise BayesziError(
            f"by: an array of labels needs one label per fitted record ({n}), got shape "
            f"{arr.shape}; pass a column name or a Series of the fitted data frame"
        )
    return _labels_grouping("by", arr)


def _groupings(fitted: FitRecord, by: object) -> list[_Grouping]:
    """Resolve ``by``: None means the grouping columns of the fit (possibly none).

    Accepted: a column name, a Series of labels (aligned on the fitted data's index), an
    array of labels in the order of the fitted records, or a list of these.
    """
    design_groups = {g.name: g for g in fitted.design.groups}
    if by is None:
        items: list = list(design_groups)
    elif isinstance(by, (str, pd.Series, np.ndarray)):
        items = [by]
    else:
        items = list(by)  # type: ignore[call-overload]
    data = fitted.data
    out = []
    for item in items:
        if isinstance(item, (pd.Series, np.ndarray)):
            out.append(_series_grouping(fitted, item))
            continue
        name = item
        if name in design_groups:
            g = design_groups[name]
            out.append(_Grouping(name, np.asarray(g.codes), list(g.levels)))
            continue
        if data is None or name not in data.columns:
            avail = list(design_groups) + ([str(c) for c in data.columns] if data is not None
                                           else [])
            raise BayesziError(
                f"by={name!r} is not a column of the fitted data; columns available: "
                f"{sorted(set(avail))}. Pass one of them, or the labels themselves as a "
                f"Series of the fitted data frame (e.g. by=df[{name!r}])"
            )
        out.append(_labels_grouping(str(name), data[name].to_numpy()))
    return out


# =============================================================================================
# Count frequencies and the rootogram's numbers
# =============================================================================================


def default_kmax(y: np.ndarray) -> int:
    """K for the frequency table: the observed 99th percentile, rounded up, between 1 and 50.

    The bins 0..K then cover at least 99% of the records and the tail bin "K+1 or more" the
    rest; the cap keeps a long right tail from making the table unreadable.

    Example
    -------
    >>> default_kmax(np.array([0, 0, 1, 2, 3, 7]))
    7
    """
    y = np.asarray(y)
    if y.size == 0:
        return 1
    q = int(np.ceil(np.quantile(y, 0.99)))
    return int(min(max(q, 1), KMAX_DEFAULT_CAP))


def _kmax(kmax: int | None, y: np.ndarray) -> int:
    if kmax is None:
        return default_kmax(y)
    if isinstance(kmax, bool) or not isinstance(kmax, (int, np.integer)) or kmax < 0:
        raise BayesziError(f"kmax must be a whole number >= 0 or None, got {kmax!r}")
    if kmax > KMAX_LIMIT:
        raise BayesziError(f"kmax={kmax} is above the limit {KMAX_LIMIT}; choose a smaller "
                           "K (counts above it go into the tail bin)")
    return int(kmax)


def _bin_labels(kmax: int) -> list[str]:
    return [str(k) for k in range(kmax + 1)] + [f"{kmax + 1}+"]


def expected_frequency_draws(fitted: FitRecord, kmax: int | None = None,
                             draws: int | None = None, *,
                             max_floats: int = MAX_FLOATS) -> pd.DataFrame:
    """Expected number of records with count k = 0..K and in the tail bin, per posterior draw.

    Entry (s, k) is the sum over the fitted rows of P(Y = k | draw s) (``family.pmf_table``);
    the tail bin is the sum of P(Y >= K + 1) = 1 - P(Y <= K) per row, so every row of the
    result sums to the number of records. (The complement is exact to about 1e-15 per
    record, which is all a frequency needs, and avoids evaluating the incomplete beta
    function of the negative binomial's survival function, the costliest closed form, for
    every draw and record; the tests compare it with ``family.sf``.) Records that share every
    model input are computed once and counted with their number. Columns are labelled
    "0", "1", ..., "K+1+".

    Example
    -------
    >>> freq = expected_frequency_draws(m, kmax=8)              # doctest: +SKIP
    >>> np.allclose(freq.sum(axis=1), m.design.n)               # doctest: +SKIP
    True
    """
    fam = _family(fitted)
    y = fitted.design.y
    K = _kmax(kmax, y)
    index = _draw_index(fitted, draws)
    S = _n_used(fitted, index)
    rows, weight = distinct_inputs(fitted_rows(fitted))
    out = np.zeros((S, K + 2))
    # pmf_table holds (draws, rows, K + 1) floats plus a handful of (draws, rows) temporaries
    for sl in _chunks(rows.n, S, K + 8, max_floats):
        lp = _predictors(fitted, rows, sl, index)
        table = fam.pmf_table(K, lp.counts, lp.zeros, lp.log_alpha)
        w = weight[sl]
        out[:, : K + 1] += np.matmul(w, table)                 # (S, K + 1)
        out[:, K + 1] += np.maximum(1.0 - table.sum(axis=2), 0.0) @ w
        del table
    return pd.DataFrame(out, columns=_bin_labels(K))


def replicated_frequency_draws(fitted: FitRecord, kmax: int | None = None,
                               draws: int | None = None, seed: options.Seed = 0, *,
                               max_floats: int = MAX_FLOATS,
                               replicates: Replicates | None = None) -> pd.DataFrame:
    """Number of records with count k = 0..K and in the tail bin, in replicated data sets.

    Row s is one data set drawn from the model (``family.random``) at posterior draw s, for
    the fitted rows; columns as :func:`expected_frequency_draws`. Every row sums to the
    number of records. ``replicates`` (from :func:`replicated_data`) are read instead of
    drawing; they fix ``seed``, ``draws`` and K (``kmax`` None or theirs).

    Example
    -------
    >>> reps = replicated_frequency_draws(m, kmax=8, seed=1)    # doctest: +SKIP
    >>> reps["0"].quantile([0.05, 0.95])                        # doctest: +SKIP
    """
    if replicates is None:
        K = _kmax(kmax, fitted.design.y)
        freq = _replicate(fitted, draws, seed, kmax=K, max_floats=max_floats).frequencies
    else:
        rep = _drawn(replicates, fitted, draws, "frequencies")
        K = int(rep.kmax)
        if kmax is not None and _kmax(kmax, fitted.design.y) != K:
            raise BayesziError(f"kmax={kmax} but the replicates were drawn with kmax={K}; "
                               "leave kmax out or draw the replicates with the same kmax")
        freq = rep.frequencies
    return pd.DataFrame(freq, columns=_bin_labels(K))


def count_frequencies(fitted: FitRecord, kmax: int | None = None, interval: float = 0.9,
                      draws: int | None = None, seed: options.Seed = 0, *,
                      replicates: Replicates | None = None) -> pd.DataFrame:
    """Observed against expected number of records with each count, with posterior intervals.

    One row per bin k = 0..K and a tail bin "K+1+" (K from :func:`default_kmax` unless
    given). ``expected`` is the posterior mean of the expected frequency (sum over records of
    P(Y = k)), the interval columns its central posterior interval: the uncertainty in the
    model's expectation, not the sampling noise of a new data set. The ``replicated``
    interval columns add that noise: the central interval of the number of records with the
    count in data sets replicated from the posterior (one per draw,
    :func:`replicated_frequency_draws`, seeded by ``seed``); an observed frequency outside it
    is one the model rarely produces. The ``sqrt`` columns are the rootogram's coordinates;
    ``hanging bottom`` = sqrt(expected) - sqrt(observed) is where the observed bar ends when
    hung from the expected value (below 0: more records observed than expected).
    ``replicates`` (from :func:`replicated_data`) are read instead of drawing; they fix
    ``seed``, ``draws`` and K.

    Example
    -------
    >>> tab = count_frequencies(m)                               # doctest: +SKIP
    >>> tab.loc["0", ["observed", "expected"]]                   # doctest: +SKIP
    """
    iv = options.interval_bounds(interval)
    lo_name, hi_name = iv.names
    if replicates is not None:
        draws = _drawn(replicates, fitted, draws, "frequencies").draws
        kmax = replicates.kmax if kmax is None else kmax
    rng = options.rng(seed)
    freq = expected_frequency_draws(fitted, kmax, draws)
    K = freq.shape[1] - 2
    y = fitted.design.y
    observed = np.bincount(np.minimum(y, K + 1), minlength=K + 2)[: K + 2]
    vals = freq.to_numpy()
    expected = vals.mean(axis=0)
    lo, hi = np.quantile(vals, [iv.lower, iv.upper], axis=0)
    reps = replicated_frequency_draws(fitted, K, draws, rng,
                                      replicates=replicates).to_numpy()
    rep_lo, rep_hi = np.quantile(reps, [iv.lower, iv.upper], axis=0)
    table = pd.DataFrame({
        "k": np.arange(K + 2),
        "observed": observed.astype(np.int64),
        "expected": expected,
        lo_name: lo,
        hi_name: hi,
        f"replicated {lo_name}": rep_lo,
        f"replicated {hi_name}": rep_hi,
        "sqrt observed": np.sqrt(observed),
        "sqrt expected": np.sqrt(expected),
        "hanging bottom": np.sqrt(expected) - np.sqrt(observed),
    }, index=pd.Index(freq.columns, name="count"))
    table.attrs.update(interval=interval, kmax=K, family=fitted.spec.family,
                       response=fitted.spec.response)
    return table


# =============================================================================================
# Replicated data: drawn once, read by every check
# =============================================================================================


@dataclass
class Replicates:
    """Data sets replicated from a fitted model, one per posterior draw, reduced to what the
    checks read (the data sets themselves are not kept, so memory stays draws x bins).

    Made by :func:`replicated_data`. :func:`zero_check`, :func:`replicated_statistics`
    (hence :func:`dispersion_check` and :func:`max_count_check`),
    :func:`replicated_frequency_draws` (hence :func:`count_frequencies`),
    :func:`pearson_draws` and :func:`pearson_check` take them as ``replicates=`` and then
    give exactly the tables they give alone with the same ``seed`` and ``draws``: every check
    draws its data sets in the same chunks from the same seeded stream, so one set serves all.
    Per draw: ``zeros``, ``total``, ``sumsq`` (sum of squares), ``maximum`` of each data set
    and ``expected_zeros`` (sum of P(Y = 0)); per level of each ``by`` column the zeros and
    expected zeros (draws, levels); ``frequencies`` (draws, K + 2) the records per count
    0..K and K + 1 or more; ``pearson`` the Pearson statistic of the data and of the data
    set at each draw (None where not drawn).

    Example
    -------
    >>> reps = replicated_data(m, seed=1)                          # doctest: +SKIP
    >>> zero_check(m, replicates=reps).equals(zero_check(m, seed=1))  # doctest: +SKIP
    True
    """

    family: str
    records: int
    draws: int | None
    seed: options.Seed
    zeros: np.ndarray
    total: np.ndarray
    sumsq: np.ndarray
    maximum: np.ndarray
    expected_zeros: np.ndarray
    groupings: list[_Grouping]
    zeros_by: dict[str, np.ndarray]           # (S, levels)
    expected_zeros_by: dict[str, np.ndarray]  # (S, levels)
    kmax: int | None = None
    frequencies: np.ndarray | None = None     # (S, K + 2)
    pearson: tuple[np.ndarray, np.ndarray] | None = None  # observed, replicated


def replicated_data(fitted: FitRecord, by: ByArg = None, kmax: int | None = None,
                    draws: int | None = None, seed: options.Seed = 0, *,
                    max_floats: int = MAX_FLOATS) -> Replicates:
    """One replicated data set per posterior draw, drawn once for every check (see
    :class:`Replicates`): the statistics, the zeros per level of ``by`` (None: the fit's
    grouping columns, as :func:`zero_check`), the count frequencies 0..K (``kmax`` None:
    :func:`default_kmax`) and the Pearson statistic.

    Example
    -------
    >>> reps = replicated_data(m, seed=1)                           # doctest: +SKIP
    >>> count_frequencies(m, replicates=reps)                      # doctest: +SKIP
    """
    return _replicate(fitted, draws, seed, _groupings(fitted, by),
                      _kmax(kmax, fitted.design.y), pearson=True, max_floats=max_floats)


def _replicate(fitted: FitRecord, draws: int | None, seed: options.Seed,
               groupings: Sequence[_Grouping] = (), kmax: int | None = None,
               pearson: bool = False, *, max_floats: int = MAX_FLOATS) -> Replicates:
    """One replicated data set per posterior draw (``family.random``), reduced to statistics;
    with ``kmax`` also the frequencies and with ``pearson`` the Pearson statistics.

    The rows are always cut into the same chunks (10 floats per draw and row), so the same
    seed gives the same data sets whatever is asked for."""
    fam = _family(fitted)
    rng = options.rng(seed)
    index = _draw_index(fitted, draws)
    S = _n_used(fitted, index)
    rows = fitted_rows(fitted)
    y = fitted.design.y.astype(np.float64)
    rep = Replicates(
        fitted.spec.family, int(rows.n), draws, seed, np.zeros(S), np.zeros(S), np.zeros(S),
        np.zeros(S, dtype=np.int64), np.zeros(S), list(groupings),
        {g.name: np.zeros((S, len(g.levels))) for g in groupings},
        {g.name: np.zeros((S, len(g.levels))) for g in groupings}, kmax,
        None if kmax is None else np.zeros(S * (kmax + 2), dtype=np.int64),
        (np.zeros(S), np.zeros(S)) if pearson else None)
    for sl in _chunks(rows.n, S, 10, max_floats):
        lp = _predictors(fitted, rows, sl, index)
        y_rep = fam.random(rng, lp.counts, lp.zeros, lp.log_alpha)
        _add_statistics(rep, fam, lp, y_rep, sl)
        if rep.frequencies is not None:
            offsets = (np.arange(S, dtype=np.int64) * (kmax + 2))[:, None]
            rep.frequencies += np.bincount(
                (offsets + np.minimum(y_rep, kmax + 1).astype(np.int64)).ravel(),
                minlength=S * (kmax + 2))
        if rep.pearson is not None:
            shape = lp.counts.shape
            mean = np.broadcast_to(fam.mean(lp.counts, lp.zeros, lp.log_alpha), shape)
            var = np.broadcast_to(fam.variance(lp.counts, lp.zeros, lp.log_alpha), shape)
            rep.pearson[0][:] += ((y[sl][None, :] - mean) ** 2 / var).sum(axis=1)
            rep.pearson[1][:] += ((y_rep.astype(np.float64) - mean) ** 2 / var).sum(axis=1)
    if rep.frequencies is not None:
        rep.frequencies = rep.frequencies.reshape(S, kmax + 2)
    return rep


def _add_statistics(rep: Replicates, fam: Family, lp: LinearPredictors, y_rep: np.ndarray,
                    sl: slice) -> None:
    """Add one chunk of rows of the replicated data sets to the statistics of ``rep``."""
    p0 = np.broadcast_to(fam.prob_zero(lp.counts, lp.zeros, lp.log_alpha), y_rep.shape)
    is_zero = (y_rep == 0).astype(np.float64)
    rep.zeros += is_zero.sum(axis=1)
    rep.expected_zeros += p0.sum(axis=1)
    yf = y_rep.astype(np.float64)
    rep.total += yf.sum(axis=1)
    rep.sumsq += np.einsum("ij,ij->i", yf, yf)
    np.maximum(rep.maximum, y_rep.max(axis=1), out=rep.maximum)
    for g in rep.groupings:
        codes = g.codes[sl]
        onehot = np.zeros((codes.shape[0], len(g.levels)))
        onehot[np.arange(codes.shape[0]), codes] = 1.0
        rep.zeros_by[g.name] += is_zero @ onehot
        rep.expected_zeros_by[g.name] += p0 @ onehot


def _drawn(replicates: Replicates, fitted: FitRecord, draws: int | None, what: str
           ) -> Replicates:
    """``replicates`` if they were drawn from ``fitted`` with ``draws`` (None: as they were)
    and hold ``what`` ("frequencies", "pearson"); else a BayesziError saying what to pass."""
    if not isinstance(replicates, Replicates):
        raise BayesziError(f"replicates must come from replicated_data(), got "
                           f"{type(replicates).__name__}")
    if replicates.family != fitted.spec.family or replicates.records != fitted.design.n:
        raise BayesziError(
            f"these replicates were drawn from a {replicates.family} fit of "
            f"{replicates.records} records, not from this {fitted.spec.family} fit of "
            f"{fitted.design.n}; pass replicated_data(fitted) of the same fit")
    if draws is not None and draws != replicates.draws:
        raise BayesziError(
            f"draws={draws} but the replicates were drawn with draws={replicates.draws}; "
            "leave draws out or draw the replicates with the same draws")
    if what and getattr(replicates, what) is None:
        raise BayesziError(f"these replicates hold no {what}; draw them with "
                           "replicated_data(fitted, ...)")
    return replicates


# =============================================================================================
# Zero share, dispersion, maximum
# =============================================================================================


def _variance(total: np.ndarray, sumsq: np.ndarray, n: int) -> np.ndarray:
    if n < 2:
        return np.full_like(total, np.nan)
    return np.maximum(sumsq - total**2 / n, 0.0) / (n - 1)


def replicated_statistics(fitted: FitRecord, draws: int | None = None,
                          seed: options.Seed = 0, *,
                          replicates: Replicates | None = None) -> pd.DataFrame:
    """Summary statistics of one replicated data set per posterior draw.

    Each row is a data set drawn from the model (``family.random``) at one posterior draw,
    for the fitted rows; columns: ``zero share``, ``mean``, ``variance``,
    ``variance / mean`` and ``maximum``. ``attrs["observed"]`` holds the same statistics of
    the observed data. ``replicates`` (from :func:`replicated_data`) are read instead of
    drawing; they fix ``seed`` and ``draws``.

    Example
    -------
    >>> reps = replicated_statistics(m, seed=1)                    # doctest: +SKIP
    >>> (reps["zero share"] >= reps.attrs["observed"]["zero share"]).mean()  # doctest: +SKIP
    """
    rep = (_replicate(fitted, draws, seed) if replicates is None
           else _drawn(replicates, fitted, draws, ""))
    n = fitted.design.n
    mean = rep.total / n
    var = _variance(rep.total, rep.sumsq, n)
    with np.errstate(divide="ignore", invalid="ignore"):
        ratio = np.where(mean > 0, var / np.where(mean > 0, mean, 1.0), np.nan)
    out = pd.DataFrame({"zero share": rep.zeros / n, "mean": mean, "variance": var,
                        "variance / mean": ratio, "maximum": rep.maximum})
    out.attrs["observed"] = _observed_statistics(fitted.design.y)
    out.attrs["family"] = fitted.spec.family
    out.attrs["records"] = n
    return out


def _observed_statistics(y: np.ndarray) -> dict[str, float]:
    y = np.asarray(y, dtype=np.float64)
    n = y.size
    mean = float(y.mean())
    var = float(y.var(ddof=1)) if n > 1 else float("nan")
    return {"zero share": float(np.mean(y == 0)), "mean": mean, "variance": var,
            "variance / mean": var / mean if mean > 0 else float("nan"),
            "maximum": float(y.max())}


def statistics_check(reps: pd.DataFrame, statistics: Sequence[str], interval: float = 0.9,
                     flag: float = FLAG) -> pd.DataFrame:
    """The check table of ``statistics`` from replicates already drawn.

    ``reps`` is the table of :func:`replicated_statistics`; :func:`dispersion_check` is this
    with ``["mean", "variance", "variance / mean"]`` and :func:`max_count_check` with
    ``["maximum"]``. Use it to check several statistics against one set of replicates.

    Example
    -------
    >>> reps = replicated_statistics(m, seed=1)                    # doctest: +SKIP
    >>> statistics_check(reps, ["zero share", "maximum"])         # doctest: +SKIP
    """
    flag = _check_flag(flag)
    iv = options.interval_bounds(interval)
    lo_name, hi_name = iv.names
    observed = reps.attrs["observed"]
    wording = {
        "mean": ("observed mean higher than the model predicts",
                 "observed mean lower than the model predicts"),
        "variance": ("more spread than the model predicts", "less spread than the model predicts"),
        "variance / mean": ("more spread than the model predicts",
                            "less spread than the model predicts"),
        "maximum": ("largest count higher than the model predicts",
                    "largest count lower than the model predicts"),
        "zero share": ("more zeros than the model predicts", "fewer zeros than the model predicts"),
    }
    rows = []
    for name in statistics:
        vals = reps[name].to_numpy(dtype=np.float64)
        finite = vals[np.isfinite(vals)]
        obs = observed[name]
        if finite.size == 0 or not np.isfinite(obs):
            lo = hi = mean = tail = float("nan")
        else:
            lo, hi = np.quantile(finite, [iv.lower, iv.upper])
            mean = float(finite.mean())
            tail = tail_probability(finite, obs)
        rows.append({"statistic": name, "observed": obs, "replicated mean": mean,
                     f"replicated {lo_name}": lo, f"replicated {hi_name}": hi,
                     "tail prob": tail, "verdict": _verdict(tail, flag, *wording[name])})
    table = pd.DataFrame(rows).set_index("statistic")
    table.attrs.update(interval=interval, family=reps.attrs.get("family"),
                       draws=len(reps))
    return table


def dispersion_check(fitted: FitRecord, interval: float = 0.9, draws: int | None = None,
                     seed: options.Seed = 0,
                     flag: float = FLAG, *,
                     replicates: Replicates | None = None) -> pd.DataFrame:
    """Mean, variance and variance-to-mean ratio of the data against replicated data sets.

    One row per statistic: the observed value, the mean and central ``interval`` of the
    statistic over data sets replicated from the posterior (one per draw), the tail
    probability P(replicated > observed) + P(replicated = observed)/2 and a verdict
    (tail probability below ``flag`` or above 1 - ``flag``). ``replicates`` (from
    :func:`replicated_data`) are read instead of drawing; they fix ``seed`` and ``draws``.

    Example
    -------
    >>> dispersion_check(m).loc["variance / mean", "tail prob"]    # doctest: +SKIP
    """
    flag = _check_flag(flag)
    options.interval_bounds(interval)
    reps = replicated_statistics(fitted, draws, seed, replicates=replicates)
    return statistics_check(reps, ["mean", "variance", "variance / mean"], interval, flag)


def max_count_check(fitted: FitRecord, interval: float = 0.9, draws: int | None = None,
                    seed: options.Seed = 0,
                    flag: float = FLAG, *,
                    replicates: Replicates | None = None) -> pd.DataFrame:
    """Largest observed count against the largest count of replicated data sets.

    Same columns as :func:`dispersion_check`, one row ``maximum``. A tail probability near 0
    means the model rarely produces a count as large as the largest one observed (a heavier
    tail, e.g. a negative binomial, may be needed); near 1, the model's tail is too heavy.
    ``replicates`` as :func:`dispersion_check`.

    Example
    -------
    >>> max_count_check(m)                                         # doctest: +SKIP
    """
    flag = _check_flag(flag)
    options.interval_bounds(interval)
    reps = replicated_statistics(fitted, draws, seed, replicates=replicates)
    return statistics_check(reps, ["maximum"], interval, flag)


def zero_check(fitted: FitRecord, by: ByArg = None,
               interval: float = 0.9, draws: int | None = None,
               seed: options.Seed = 0, flag: float = FLAG, *,
               replicates: Replicates | None = None) -> pd.DataFrame:
    """Observed share of zeros against the model, overall and per level of ``by``.

    ``by`` names grouping columns; None checks the grouping columns of the fit (sites,
    years) and ``[]`` none; any factor-like column used by the model works too, and labels
    the model does not use can be passed as a Series of the fitted data frame
    (``by=df["site"]``) or an array in record order. The first row covers all
    records (group "all records"); the levels of each ``by`` column follow, most zero-heavy
    relative to the model first.

    Columns: ``records``, ``observed zeros``, ``observed share``; ``expected share`` (the
    posterior mean of the average P(Y = 0) over the records); the central ``interval`` of the
    zero share of data sets replicated from the posterior (one per draw, ``family.random``
    with ``seed``); ``tail prob`` = P(replicated zeros > observed) + P(equal)/2; and a
    verdict when the tail probability is below ``flag`` ("more zeros than the model
    predicts") or above 1 - ``flag`` ("fewer zeros ..."). ``replicates`` (from
    :func:`replicated_data` with the same ``by``) are read instead of drawing; they fix
    ``seed`` and ``draws``.

    Example
    -------
    >>> tab = zero_check(m, by="site")                           # doctest: +SKIP
    >>> tab[tab["verdict"].str.startswith("more")]               # doctest: +SKIP
    """
    flag = _check_flag(flag)
    iv = options.interval_bounds(interval)
    groupings = _groupings(fitted, by)
    if replicates is None:
        rep = _replicate(fitted, draws, seed, groupings)
    else:
        rep = _drawn(replicates, fitted, draws, "")
        _same_groupings(rep, groupings)
        seed = rep.seed
    y = fitted.design.y
    is_zero = y == 0
    rows = [_zero_row(iv, flag, "all records", "", int(y.size), int(is_zero.sum()), rep.zeros,
                      rep.expected_zeros)]
    for g in groupings:
        records = np.bincount(g.codes, minlength=len(g.levels))
        obs = np.bincount(g.codes, weights=is_zero, minlength=len(g.levels)).astype(np.int64)
        block = [_zero_row(iv, flag, g.name, lv, int(records[j]), int(obs[j]),
                           rep.zeros_by[g.name][:, j], rep.expected_zeros_by[g.name][:, j])
                 for j, lv in enumerate(g.levels) if records[j] > 0]
        block.sort(key=lambda r: (r["tail prob"], r["level"]))
        rows.extend(block)
    table = pd.DataFrame(rows)
    table.attrs.update(interval=interval, flag=flag, family=fitted.spec.family,
                       # a tuple, not an array: pandas compares attrs when concatenating
                       replicated_share=tuple((rep.zeros / y.size).tolist()),
                       draws=int(rep.zeros.size), seed=seed)
    return table


def _same_groupings(rep: Replicates, groupings: Sequence[_Grouping]) -> None:
    """A BayesziError unless ``rep`` counted the zeros of every level of ``groupings``."""
    drawn = {g.name: g for g in rep.groupings}
    for g in groupings:
        d = drawn.get(g.name)
        if d is None or d.levels != g.levels or not np.array_equal(d.codes, g.codes):
            raise BayesziError(
                f"the replicates hold no zero counts per level of {g.name!r} (drawn with by="
                f"{[d.name for d in rep.groupings]}); draw them with replicated_data(fitted, "
                "by=...) naming the same columns as the check")


def _zero_row(iv: options.Interval, flag: float, group: str, level: str, records: int,
              observed: int, reps: np.ndarray, expected: np.ndarray) -> dict:
    """One row of :func:`zero_check`: a set of records, its zeros and their replicates."""
    lo_name, hi_name = iv.names
    lo, hi = np.quantile(reps / records, [iv.lower, iv.upper])
    tail = tail_probability(reps, observed)
    return {"group": group, "level": level, "records": records,
            "observed zeros": observed, "observed share": observed / records,
            "expected share": float(np.mean(expected) / records),
            f"replicated {lo_name}": lo, f"replicated {hi_name}": hi, "tail prob": tail,
            "verdict": _verdict(tail, flag, "more zeros than the model predicts",
                                "fewer zeros than the model predicts")}


# =============================================================================================
# The Pearson statistic as a discrepancy
# =============================================================================================


def residual_df(fitted: FitRecord) -> int:
    """Records minus the fixed coefficients of both parts, minus 1 for a NB dispersion.

    This is the count a classical fit of the same formulas would use for its Pearson
    statistic per degree of freedom: the negative binomial's dispersion is estimated from
    the same data, so it is counted like a coefficient. Partially pooled group effects (and
    varying slopes) are not counted: pooling makes their effective number lie anywhere
    between 0 and their number of levels, so any fixed count would be arbitrary. With
    groups the ratio is therefore only a rough reading; the tail probability of
    :func:`pearson_check` does not depend on it.

    Example
    -------
    >>> residual_df(m)       # 1976 records, 6 + 2 coefficients, a dispersion   # doctest: +SKIP
    1967
    """
    design = fitted.design
    n_coef = len(design.counts.terms) + (0 if design.zeros is None else len(design.zeros.terms))
    return int(design.n - n_coef - int(_family(fitted).has_dispersion))


def pearson_draws(fitted: FitRecord, draws: int | None = None, seed: options.Seed = 0, *,
                  max_floats: int = MAX_FLOATS,
                  replicates: Replicates | None = None) -> pd.DataFrame:
    """The Pearson statistic of the observed and of one replicated data set, per draw.

    At posterior draw s, T(y, s) = sum over records of (y_i - E_s[Y_i])^2 / Var_s[Y_i], with
    E and Var from the family's closed forms (``family.mean``, ``family.variance``) at that
    draw; column ``observed`` is T of the data, ``replicated`` T of a data set drawn from
    the model at the same draw (``family.random`` with ``seed``), judged by the same draw's
    moments (Gelman, Meng & Stern 1996). Rows are worked through in chunks (at most about
    ``max_floats`` floats at a time), all draws at once. ``attrs`` holds ``records``,
    ``residual df`` (:func:`residual_df`), ``family``, ``seed``. ``replicates`` (from
    :func:`replicated_data`) are read instead of drawing; they fix ``seed`` and ``draws``.

    Example
    -------
    >>> t = pearson_draws(m, seed=1)                                   # doctest: +SKIP
    >>> (t["replicated"] >= t["observed"]).mean()                      # doctest: +SKIP
    """
    if replicates is None:
        rep = _replicate(fitted, draws, seed, pearson=True, max_floats=max_floats)
    else:
        rep = _drawn(replicates, fitted, draws, "pearson")
        seed = rep.seed
    observed, replicated = rep.pearson
    out = pd.DataFrame({"observed": observed, "replicated": replicated})
    out.attrs.update(records=int(rep.records), family=fitted.spec.family, seed=seed,
                     **{"residual df": residual_df(fitted)})
    return out


def pearson_check(fitted: FitRecord, interval: float = 0.9, draws: int | None = None,
                  seed: options.Seed = 0, flag: float = FLAG, *,
                  replicates: Replicates | None = None) -> pd.DataFrame:
    """The Pearson statistic of the data against replicated data, draw by draw.

    Two rows: ``Pearson statistic`` (T of :func:`pearson_draws`) and ``per residual df``
    (T divided by :func:`residual_df`, the classical dispersion reading: near 1 for counts
    as spread as the model says, far above 1 for overdispersion). Columns: the posterior
    ``observed mean`` and central ``interval`` of T(y) (it has a posterior distribution,
    because E and Var do), the same for T(y_rep), the tail probability
    P(T(y_rep) > T(y)) + P(T(y_rep) = T(y)) / 2 over the draws (ties half, as in every
    check here; the same in both rows) and a verdict (below ``flag``: "more spread than the
    model predicts"; above 1 - ``flag``: "less spread ..."). ``attrs`` has ``residual df``.

    Unlike the classical ratio, the tail probability needs no reference distribution and
    works the same for every family, zero-inflated and hurdle included. ``replicates`` as
    :func:`pearson_draws`.

    Example
    -------
    >>> pearson_check(m).loc["per residual df", ["observed mean", "tail prob"]]  # doctest: +SKIP
    """
    flag = _check_flag(flag)
    iv = options.interval_bounds(interval)
    lo_name, hi_name = iv.names
    t = pearson_draws(fitted, draws, seed, replicates=replicates)
    seed = t.attrs["seed"]
    dof = t.attrs["residual df"]
    # draw by draw: the share of replicated T above the observed T at the same draw
    tail = tail_probability(t["replicated"].to_numpy() - t["observed"].to_numpy(), 0.0)
    verdict = _verdict(tail, flag, "more spread than the model predicts",
                       "less spread than the model predicts")
    rows = []
    for name, scale in (("Pearson statistic", 1.0),
                        ("per residual df", 1.0 / dof if dof > 0 else float("nan"))):
        obs, rep = t["observed"].to_numpy() * scale, t["replicated"].to_numpy() * scale
        o_lo, o_hi = np.quantile(obs, [iv.lower, iv.upper])
        r_lo, r_hi = np.quantile(rep, [iv.lower, iv.upper])
        rows.append({"statistic": name, "observed mean": float(obs.mean()),
                     f"observed {lo_name}": o_lo, f"observed {hi_name}": o_hi,
                     "replicated mean": float(rep.mean()), f"replicated {lo_name}": r_lo,
                     f"replicated {hi_name}": r_hi, "tail prob": tail, "verdict": verdict})
    table = pd.DataFrame(rows).set_index("statistic")
    table.attrs.update(interval=interval, flag=flag, family=fitted.spec.family, seed=seed,
                       draws=len(t), records=t.attrs["records"], **{"residual df": dof})
    return table


# =============================================================================================
# Randomized quantile residuals
# =============================================================================================

RESIDUAL_METHODS = ("posterior", "loo")


def _relative_efficiency(fitted: FitRecord) -> float:
    """Mean relative ESS (ess / draws) of the posterior, as ArviZ's ``loo`` computes it
    (:func:`bayeszi.engine.loglik.relative_efficiency`), at most 1."""
    from bayeszi.engine.loglik import relative_efficiency

    post = fitted.idata.posterior
    if post.sizes["chain"] * post.sizes["draw"] < 8:
        return 1.0
    return min(relative_efficiency(post), 1.0)


def residuals(fitted: FitRecord, method: str = "posterior",
              seed: options.Seed = 0,
              draws: int | None = None) -> pd.DataFrame:
    """Randomized quantile residuals (Dunn & Smyth 1996) of the fitted records.

    For a record with count y and predictive CDF F, u is drawn uniformly between F(y - 1) and
    F(y) and the residual is Phi^-1(u); under the model the residuals are standard normal.

    ``method="posterior"`` (default) uses the posterior predictive CDF of each record,
    F(y) = mean over draws of P(Y <= y | draw): one residual per record with no extra noise
    from picking a single draw (a single draw per record would mix parameter noise into
    every residual). It is slightly optimistic, because each record helped fit the draws it
    is judged by; with many records per parameter this is negligible.
    ``method="loo"`` weights the draws by Pareto-smoothed importance weights
    (:func:`arviz.psislw`) to leave each record out (LOO-PIT, randomized the same way);
    records whose Pareto k exceeds 0.7 get a warning and a ``pareto k`` column shows all.

    The CDF comes from the closed forms: P(Y >= y + 1) from ``family.sf`` and
    P(Y >= y) = P(Y >= y + 1) + P(Y = y), so F(y) = 1 - P(Y >= y + 1) is exact in the upper
    tail; residuals below about -8.2 (F below 1e-16) are floored there.

    Columns: ``y``, ``expected count`` (posterior mean of E[Y]), ``PIT low`` = F(y - 1),
    ``PIT high`` = F(y), ``PIT`` (the randomized u), ``residual``; index as the fitted data.

    Example
    -------
    >>> res = residuals(m, seed=1)                                # doctest: +SKIP
    >>> from scipy import stats; stats.kstest(res["residual"], "norm").pvalue  # doctest: +SKIP
    """
    if method not in RESIDUAL_METHODS:
        raise BayesziError(f"method must be one of {RESIDUAL_METHODS}, got {method!r}")
    rng = options.rng(seed)
    index = _draw_index(fitted, draws)
    cdf = _predictive_cdf(fitted, method, index)
    y = fitted.design.y
    pit, f_low, f_high, resid = _randomize(cdf.s_low, cdf.s_high, rng)
    table = pd.DataFrame({"y": y, "expected count": cdf.mean, "PIT low": f_low,
                          "PIT high": f_high, "PIT": pit, "residual": resid},
                         index=fitted.design.index)
    if method == "loo":
        table["pareto k"] = cdf.pareto_k
        _warn_pareto(fitted, cdf.pareto_k)
    table.attrs.update(method=method, family=fitted.spec.family, seed=seed,
                       draws=_n_used(fitted, index))
    return table


@dataclass
class _PredictiveCdf:
    """Per record: P(Y >= y + 1), P(Y >= y), the mean E[Y] and (LOO only) Pareto k."""

    s_low: np.ndarray
    s_high: np.ndarray
    mean: np.ndarray
    pareto_k: np.ndarray


def _predictive_cdf(fitted: FitRecord, method: str, index: np.ndarray | None) -> _PredictiveCdf:
    """The posterior (or leave-one-out) predictive CDF at each record's y and y - 1."""
    fam = _family(fitted)
    S = _n_used(fitted, index)
    rows = fitted_rows(fitted)
    y = fitted.design.y
    n = rows.n
    out = _PredictiveCdf(np.empty(n), np.empty(n), np.empty(n), np.full(n, np.nan))
    reff = _relative_efficiency(fitted) if method == "loo" else 1.0
    for sl in _chunks(n, S, 8):
        lp = _predictors(fitted, rows, sl, index)
        yc = y[sl][None, :]
        shape = lp.counts.shape
        # P(Y >= y + 1) from the survival function, P(Y >= y) = that + P(Y = y): a sum of
        # positive terms, accurate in both tails, and one incomplete beta/gamma per value.
        sf_lo = np.broadcast_to(fam.sf(yc + 1, lp.counts, lp.zeros, lp.log_alpha), shape)
        loglik = np.broadcast_to(fam.logpmf(yc, lp.counts, lp.zeros, lp.log_alpha), shape)
        sf_hi = sf_lo + np.exp(loglik)
        mu = np.broadcast_to(fam.mean(lp.counts, lp.zeros, lp.log_alpha), shape)
        if method == "posterior":
            out.s_high[sl] = sf_hi.mean(axis=0)
            out.s_low[sl] = sf_lo.mean(axis=0)
            out.mean[sl] = mu.mean(axis=0)
        else:
            w, out.pareto_k[sl] = _loo_weights(loglik, reff)  # (rows, S), rows sum to 1
            out.s_high[sl] = np.einsum("rs,sr->r", w, sf_hi)
            out.s_low[sl] = np.einsum("rs,sr->r", w, sf_lo)
            out.mean[sl] = np.einsum("rs,sr->r", w, mu)
    return out


def _loo_weights(loglik: np.ndarray, reff: float) -> tuple[np.ndarray, np.ndarray]:
    """Pareto-smoothed leave-one-out weights (rows, draws) and Pareto k per row."""
    import arviz as az

    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        lw, k = az.psislw(-loglik.T, reff)
    return np.exp(lw), np.asarray(k)


def _randomize(s_low: np.ndarray, s_high: np.ndarray, rng: np.random.Generator
               ) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """(PIT, F(y - 1), F(y), residual) from the survival probabilities, one uniform each."""
    s_high = np.clip(s_high, 0.0, 1.0)
    s_low = np.clip(np.minimum(s_low, s_high), 0.0, 1.0)
    u01 = rng.random(s_high.size)
    v = s_low + u01 * (s_high - s_low)         # 1 - u, accurate when u is near 1
    f_low = 1.0 - s_high
    f_high = 1.0 - s_low
    u = f_low + u01 * (f_high - f_low)
    upper_tail = f_high >= 0.5
    resid = np.where(upper_tail, stats.norm.isf(np.maximum(v, 1e-300)),
                     stats.norm.ppf(np.maximum(u, _U_FLOOR)))
    pit = np.clip(np.where(upper_tail, 1.0 - v, u), f_low, f_high)
    return pit, f_low, f_high, resid


def _warn_pareto(fitted: FitRecord, pareto_k: np.ndarray) -> None:
    bad = np.flatnonzero(pareto_k > PARETO_K_LIMIT)
    if bad.size:
        shown = ", ".join(str(fitted.design.index[i]) for i in bad[:8])
        more = f" and {bad.size - 8} more" if bad.size > 8 else ""
        warnings.warn(
            f"leave-one-out residuals: {bad.size} record(s) have Pareto k above "
            f"{PARETO_K_LIMIT} (rows {shown}{more}); their LOO-PIT values are unreliable. "
            "Look at these records, or use method='posterior'",
            BayesziWarning, stacklevel=3)


# =============================================================================================
# Zero sources
# =============================================================================================

_SOURCE_COLUMN = "P(zero from zeros part)"


def _source_note(fam: Family) -> str:
    if fam.zeros_kind == "inflation":
        return ("zero-inflated: probability that this zero is an extra zero (zeros part, "
                f"{names.zeros_label(fam.name)}) rather than a count-process zero")
    if fam.zeros_kind == "hurdle":
        return f"hurdle: {names.zeros_origin(fam.name)}; the counts part only describes Y > 0"
    return f"no zeros part: {names.zeros_origin(fam.name)}"


def zero_sources(fitted: FitRecord, by: ByArg = None,
                 interval: float = 0.9, draws: int | None = None) -> pd.DataFrame:
    """Where the observed zeros come from: the zeros part or the count process.

    For each observed zero under a zero-inflated family, the posterior probability that it
    is an extra zero, E[p / (p + (1 - p) f(0))] over the draws (``family``'s
    ``prob_extra_zero_given_zero``; Lambert 1992, Technometrics 34:1-14, for the ZIP). For a
    hurdle family the answer is 1 for every zero (all zeros come from the zeros part); for
    the Poisson and negative binomial it is 0 (no zeros part). A ``note`` column says which.

    With ``by=None`` (or ``by=[]``): one row per observed zero (index as the fitted data)
    with the probability and its central posterior ``interval``; the grouping columns of the
    fit are shown beside it. With ``by`` naming columns: one row per level, with the
    observed zeros, the expected number of extra zeros among them (posterior mean and
    interval of the per-draw sum) and their share.

    Example
    -------
    >>> zero_sources(m, by="site").head()                          # doctest: +SKIP
    """
    per_zero, per_level = zero_source_tables(
        fitted, None if by is None or (isinstance(by, (list, tuple)) and len(by) == 0) else by,
        interval, draws)
    return per_zero if per_level is None else per_level


def zero_source_tables(fitted: FitRecord, by: ByArg = None, interval: float = 0.9,
                       draws: int | None = None) -> tuple[pd.DataFrame, pd.DataFrame | None]:
    """Both tables of :func:`zero_sources` from one pass over the draws: one row per observed
    zero, and (with ``by``) one row per level; the same numbers as the two calls
    ``zero_sources(fitted)`` and ``zero_sources(fitted, by=by)``, at the cost of one.

    Example
    -------
    >>> per_zero, per_site = zero_source_tables(m, by="site")        # doctest: +SKIP
    """
    iv = options.interval_bounds(interval)
    note = _source_note(_family(fitted))
    zero_rows = np.flatnonzero(fitted.design.y == 0)
    index = _draw_index(fitted, draws)
    groupings = _groupings(fitted, by) if by is not None else []
    src = _zero_source_draws(fitted, zero_rows, index, groupings, iv)
    tables = [_sources_per_zero(fitted, zero_rows, src, iv, note),
              _sources_per_level(fitted, zero_rows, groupings, src, iv, note)
              if by is not None else None]
    for table in tables:
        if table is not None:
            table.attrs.update(interval=interval, family=fitted.spec.family, message=note)
    return tables[0], tables[1]


@dataclass
class _ZeroSources:
    """Per observed zero: posterior mean and interval of P(extra zero | Y = 0); per ``by``
    column, the per-draw expected number of extra zeros of each level (draws, levels)."""

    mean: np.ndarray
    lo: np.ndarray
    hi: np.ndarray
    sums: dict[str, np.ndarray]


def _zero_source_draws(fitted: FitRecord, zero_rows: np.ndarray, index: np.ndarray | None,
                       groupings: Sequence[_Grouping], iv: options.Interval) -> _ZeroSources:
    fam = _family(fitted)
    S = _n_used(fitted, index)
    nz = zero_rows.size
    out = _ZeroSources(np.zeros(nz), np.zeros(nz), np.zeros(nz),
                       {g.name: np.zeros((S, len(g.levels))) for g in groupings})
    if fam.zeros_kind is None or fam.zeros_kind == "hurdle":
        value = 1.0 if fam.zeros_kind == "hurdle" else 0.0
        out.mean[:], out.lo[:], out.hi[:] = value, value, value
        for g in groupings:
            out.sums[g.name][:] = value * np.bincount(g.codes[zero_rows], minlength=len(g.levels))
        return out
    rows = fitted_rows(fitted)
    for sl in _chunks(nz, S, 6):
        pick = zero_rows[sl]
        lp = _predictors(fitted, rows, pick, index)
        prob = fam.prob_extra_zero_given_zero(lp.counts, lp.zeros, lp.log_alpha)
        prob = np.broadcast_to(prob, (S, pick.size))
        out.mean[sl] = prob.mean(axis=0)
        out.lo[sl], out.hi[sl] = np.quantile(prob, [iv.lower, iv.upper], axis=0)
        for g in groupings:
            onehot = np.zeros((pick.size, len(g.levels)))
            onehot[np.arange(pick.size), g.codes[pick]] = 1.0
            out.sums[g.name] += prob @ onehot
    return out


def _sources_per_zero(fitted: FitRecord, zero_rows: np.ndarray, src: _ZeroSources,
                      iv: options.Interval, note: str) -> pd.DataFrame:
    lo_name, hi_name = iv.names
    table = pd.DataFrame({_SOURCE_COLUMN: src.mean, lo_name: src.lo, hi_name: src.hi},
                         index=fitted.design.index[zero_rows])
    for g in fitted.design.groups:
        table.insert(0, g.name, [g.levels[c] for c in g.codes[zero_rows]])
    table["note"] = note
    return table


def _sources_per_level(fitted: FitRecord, zero_rows: np.ndarray,
                       groupings: Sequence[_Grouping], src: _ZeroSources,
                       iv: options.Interval, note: str) -> pd.DataFrame:
    lo_name, hi_name = iv.names
    out = []
    for g in groupings:
        records = np.bincount(g.codes, minlength=len(g.levels))
        zeros = np.bincount(g.codes[zero_rows], minlength=len(g.levels))
        s = src.sums[g.name]
        qlo, qhi = np.quantile(s, [iv.lower, iv.upper], axis=0)
        for j, lv in enumerate(g.levels):
            if records[j] == 0:
                continue
            exp_extra = float(s[:, j].mean())
            out.append({"group": g.name, "level": lv, "records": int(records[j]),
                        "observed zeros": int(zeros[j]), "expected extra zeros": exp_extra,
                        lo_name: float(qlo[j]), hi_name: float(qhi[j]),
                        "share extra": exp_extra / zeros[j] if zeros[j] else float("nan"),
                        "note": note})
    return pd.DataFrame(out)
