"""Contrasts between two scenarios, and average predictive comparisons.

:func:`contrast` compares a quantity (any of :data:`bayeszi.answers.predict.QUANTITIES` except
``new_count``) between a ``base`` and a ``scenario``: either a second data frame, or the base
with some columns shifted (``shift={"depth": 0.5}`` adds 0.5) or set (``set_to={"barrier":
1}``). Per posterior draw it forms the ratio scenario / base and the difference
scenario - base, and reports their posterior summaries and P(ratio > 1), per row or for the
rows' sum or mean (``combine``). Both scenarios of a row share the row's group effect, also
a drawn new one.

:func:`average_comparison` is the average predictive comparison of Gelman & Pardoe (2007,
Sociological Methodology 37): the expected change of the quantity per unit change of one
input, averaged over the observed distribution of all other inputs, with the posterior
distribution of that average.

Example
-------
>>> m.contrast(shift={"depth": 0.5}, what="rate", combine="mean")     # doctest: +SKIP
>>> m.average_comparison("water_temp", what="mean")                   # doctest: +SKIP
"""

from __future__ import annotations

from collections.abc import Mapping
from typing import Any

import numpy as np
import pandas as pd

from bayeszi.answers.evaluation import (
    QUANTITIES,
    Rows,
    Setup,
    check_what,
    compare_draws,
    comparison_row,
    concat_rows,
    contrast_table,
    evaluate,
    groups_label,
    is_own_label,
    make_setup,
    prepare_rows,
    quantity_label,
    sampler_note,
)
from bayeszi.base import options
from bayeszi.base.errors import BayesziError
from bayeszi.engine.record import FitRecord

__all__ = ["contrast", "average_comparison"]

CONTRAST_QUANTITIES = tuple(q for q in QUANTITIES if q != "new_count")
COMBINE = (None, "sum", "mean")


# ============================================================================ scenarios
def _fitted_frame(fitted: FitRecord) -> pd.DataFrame:
    data = fitted.data
    if data is None:
        raise BayesziError("this fit does not hold its data; pass the rows as base=")
    return data


def _inputs(fitted: FitRecord) -> list[str]:
    """Columns that enter the predictions (everything used except the response)."""
    return [c for c in fitted.design.used_columns if c != fitted.spec.response]


def _apply_change(fitted: FitRecord, base: pd.DataFrame, shift: Mapping[str, Any] | None,
                 set_to: Mapping[str, Any] | None) -> tuple[pd.DataFrame, str]:
    """The base rows with ``shift`` added and ``set_to`` values set; and a description."""
    out = base.copy()
    described = []
    used = _inputs(fitted)
    group_cols = set(fitted.spec.groups) | set(fitted.spec.nested.values())
    for kind, change in (("shift", shift), ("set_to", set_to)):
        if change is None:
            continue
        if not isinstance(change, Mapping) or not change:
            raise BayesziError(f"{kind} must be a non-empty dict of column -> value, e.g. "
                               f"{kind}={{'depth': 0.5}}; got {change!r}")
        for col, value in change.items():
            if col == fitted.spec.response:
                raise BayesziError(f"{kind} names the response {col!r}; change a predictor")
            if col not in used:
                raise BayesziError(f"{kind} names column {col!r}, which the model does not use, "
                                   f"so changing it changes nothing; columns used: {used}")
            if col not in out.columns:
                raise BayesziError(f"{kind} names column {col!r}, which the base rows lack; "
                                   "add it to the data")
            if not np.isscalar(value):
                raise BayesziError(f"{kind}[{col!r}] must be one value, got {value!r}; for "
                                   "row-by-row values pass a whole scenario data frame")
            if kind == "shift":
                if col in group_cols or col in fitted.design.levels or \
                        not pd.api.types.is_numeric_dtype(out[col]) or \
                        pd.api.types.is_bool_dtype(out[col]) or \
                        isinstance(value, bool) or not isinstance(value, int | float | np.number):
                    raise BayesziError(f"shift adds a number to a numeric column; {col!r} with "
                                       f"{value!r} cannot be shifted. Use set_to={{{col!r}: "
                                       "<level>}} for a category or a group")
                out[col] = out[col] + value
                described.append(f"{col} {'+' if value >= 0 else '-'} {abs(value):g}")
            else:
                out[col] = value
                described.append(f"{col} = {value}")
    return out, "; ".join(described)


def _merge_labels(a: Rows, b: Rows, paired: bool) -> None:
    """Give paired rows without a group column their partner's label (same unit)."""
    for g in a.labels:
        la, lb = a.labels[g], b.labels[g]
        own_a, own_b = is_own_label(la), is_own_label(lb)
        if paired:
            lb[own_b] = la[own_b]
            la[own_a] = lb[own_a]


# ============================================================================ contrast
def contrast(fitted: FitRecord, base: pd.DataFrame | None = None,
             scenario: pd.DataFrame | None = None, *, shift: Mapping[str, Any] | None = None,
             set_to: Mapping[str, Any] | None = None, what: str = "mean",
             groups: str = "known", interval: float = 0.9, combine: str | None = None,
             k: int | None = None, exposure: float | None = None, n_average: int = 30,
             draws: int | None = None, seed: options.Seed = None) -> pd.DataFrame:
    """Ratio and difference of a quantity between a scenario and a base, with intervals.

    Parameters
    ----------
    base : the base rows (None: the fitted rows).
    scenario : a second data frame; or leave it out and give ``shift`` / ``set_to``.
    shift : ``{column: number}`` added to numeric columns of the base.
    set_to : ``{column: value}`` set in every base row (numbers, category levels, groups).
    what : one quantity of :func:`bayeszi.answers.predict.predict`, except ``new_count``.
    combine : None (row by row; base and scenario must have as many rows), ``"sum"`` or
        ``"mean"`` (compare the rows' total or average; the frames may differ in length).
    groups, interval, k, exposure, n_average, draws, seed : as in :func:`predict`.

    Returns
    -------
    DataFrame (one row per input row, or one row when combined) with ``quantity``,
    ``groups``, ``change``, the posterior means ``base`` and ``scenario``, ``difference``
    (mean, sd, interval), ``ratio`` (posterior median) with its interval, and
    ``P(ratio > 1)``.

    Example
    -------
    >>> m.contrast(set_to={"barrier": 1}, what="p_nonzero", combine="mean")  # doctest: +SKIP
    """
    w = _contrast_what(fitted, what, k, groups, combine)
    iv = options.interval_bounds(interval)
    setup = make_setup(fitted, groups, k, draws, seed, n_average)
    base_df, scenario_df, change = _scenarios(fitted, base, scenario, shift, set_to)
    ra = prepare_rows(fitted, None if base is None else base_df, groups, exposure, tag="a")
    rb = prepare_rows(fitted, scenario_df, groups, exposure, tag="b")
    na, nb = ra.encoded.n, rb.encoded.n
    if combine is None and na != nb:
        raise BayesziError(f"base has {na} rows and scenario {nb}; a row-by-row contrast needs "
                           "as many rows in each. Pass combine='sum' (totals) or "
                           "combine='mean' (averages over rows)")
    _merge_labels(ra, rb, na == nb)
    rows = concat_rows([ra, rb])
    probs = sampler_note(fitted)
    label = {"quantity": quantity_label(fitted, w, k),
             "groups": groups_label(fitted, groups, setup.n_average), "change": change}
    if combine is None:
        out = _row_by_row(setup, rows, w, na, nb, iv)
        table = contrast_table(out, label, iv, ra.index)
    else:
        out = _combined(setup, rows, w, na, nb, combine, iv)
        name = f"{combine} over rows ({na} base, {nb} scenario)"
        table = contrast_table(out, label, iv, pd.Index([name]))
    table.attrs["sampler_problems"] = probs
    table.attrs["draws"] = setup.n_draws
    return table


def _contrast_what(fitted: FitRecord, what: str, k: int | None, groups: str,
                   combine: str | None) -> str:
    """The quantity a contrast compares, refusing random counts and unknown ``combine``."""
    if what == "new_count":
        raise BayesziError("contrasts compare expected quantities; what='new_count' is a "
                           "random count. Use what='mean' (or 'p_zero', ...)")
    whats = check_what(fitted, what, k, groups, allow=CONTRAST_QUANTITIES)
    if combine not in COMBINE:
        raise BayesziError(f"combine must be None (row by row), 'sum' or 'mean', got "
                           f"{combine!r}")
    return whats[0]


def _scenarios(fitted: FitRecord, base: pd.DataFrame | None, scenario: pd.DataFrame | None,
               shift: Mapping[str, Any] | None, set_to: Mapping[str, Any] | None
               ) -> tuple[pd.DataFrame, pd.DataFrame, str]:
    """The base rows, the scenario rows and a description of the change."""
    base_df = _fitted_frame(fitted) if base is None else base
    if scenario is not None and (shift is not None or set_to is not None):
        raise BayesziError("give either scenario= (a data frame) or shift=/set_to= (changes to "
                           "the base), not both")
    if scenario is not None:
        return base_df, scenario, "scenario rows vs base rows"
    if shift is None and set_to is None:
        raise BayesziError("nothing to compare: pass scenario=<data frame>, or "
                           "shift={'column': amount} / set_to={'column': value}")
    scenario_df, change = _apply_change(fitted, base_df, shift, set_to)
    return base_df, scenario_df, change


def _row_by_row(setup: Setup, rows: Rows, w: str, na: int, nb: int,
                iv: options.Interval) -> np.ndarray:
    """Summaries (10, rows) of the paired base rows ``0..na-1`` and scenario rows after."""
    out = np.empty((10, na))

    def consume(units: np.ndarray, parts: list[dict[str, np.ndarray]]) -> None:
        out[:, units] = compare_draws(parts[0][w], parts[1][w], iv.lower, iv.upper)

    evaluate(setup, rows, [w], [np.arange(na), na + np.arange(nb)], consume)
    return out


def _combined(setup: Setup, rows: Rows, w: str, na: int, nb: int, combine: str,
              iv: options.Interval) -> np.ndarray:
    """Summaries (10, 1) of the base rows' and the scenario rows' sum (or mean) per draw."""
    tot = np.zeros((2, setup.n_draws))

    def consume_all(units: np.ndarray, parts: list[dict[str, np.ndarray]]) -> None:
        v = parts[0][w]
        in_a = units < na
        tot[0] += v[:, in_a].sum(axis=1)
        tot[1] += v[:, ~in_a].sum(axis=1)

    evaluate(setup, rows, [w], [np.arange(na + nb)], consume_all)
    if combine == "mean":
        tot /= np.array([[na], [nb]])
    return compare_draws(tot[0][:, None], tot[1][:, None], iv.lower, iv.upper)




# ============================================================================ APC
def average_comparison(fitted: FitRecord, input: str, data: pd.DataFrame | None = None, *,
                       what: str = "mean", groups: str = "known", interval: float = 0.9,
                       levels: tuple[str, str] | None = None, pairs: int = 10_000,
                       k: int | None = None, exposure: float | None = None,
                       n_average: int = 30, draws: int | None = None,
                       seed: options.Seed = None) -> pd.DataFrame:
    """Average predictive comparison of ``input`` (Gelman & Pardoe 2007), with intervals.

    Numeric input u (0/1 flags included): over pairs of rows (i, j), the change of the
    quantity when row i's u is set to row j's, with all other inputs v of row i kept, per
    unit of u:

        APC = sum_ij w_ij sign(u_j - u_i) [q(u_j, v_i) - q(u_i, v_i)] / sum_ij w_ij |u_j - u_i|

    with weights w_ij = 1 / (1 + (v_i - v_j)' S^-1 (v_i - v_j)), S the covariance of v
    (categories as 0/1 indicators), so pairs alike in v count most. All pairs are used when
    there are at most ``pairs`` of them, else ``pairs`` random pairs (seeded by ``seed``).
    Category input: the average over rows of q(level b) - q(level a); by default every
    level against the first.

    Returns
    -------
    DataFrame, one row per comparison: ``input``, ``comparison``, ``quantity``, ``groups``,
    posterior ``mean``, ``sd``, interval bounds, ``P(> 0)`` and ``pairs`` used.

    Example
    -------
    >>> m.average_comparison("depth", what="rate")                      # doctest: +SKIP
    """
    whats = check_what(fitted, what, k, groups, allow=CONTRAST_QUANTITIES)
    w = whats[0]
    iv = options.interval_bounds(interval)
    setup = make_setup(fitted, groups, k, draws, seed, n_average)
    pairs = options.check_whole(pairs, "pairs", example=10000)
    df = _fitted_frame(fitted) if data is None else data
    used, group_cols = _check_input(fitted, input, df)
    categorical = input in fitted.design.levels or not pd.api.types.is_numeric_dtype(df[input])
    probs = sampler_note(fitted)
    base_label = {"input": input, "quantity": quantity_label(fitted, w, k),
                  "groups": groups_label(fitted, groups, setup.n_average)}
    if categorical:
        rows = _level_comparisons(fitted, setup, df, input, levels, w, groups, exposure)
    else:
        if levels is not None:
            raise BayesziError(f"levels= is for category inputs; {input!r} is numeric")
        rows = [_numeric_apc(fitted, setup, df, input, used, group_cols, w, groups, exposure,
                             pairs)]
    table = pd.DataFrame([comparison_row(base_label, comparison, per_draw, n_pairs, iv)
                          for comparison, per_draw, n_pairs in rows])
    table.attrs["sampler_problems"] = probs
    table.attrs["draws"] = setup.n_draws
    return table


def _check_input(fitted: FitRecord, input: str, df: pd.DataFrame) -> tuple[list[str], list[str]]:
    """The model's inputs and grouping columns, refusing an ``input`` that is neither a
    predictor of the model nor a column of ``df``."""
    used = _inputs(fitted)
    group_cols = list(fitted.spec.groups) + list(fitted.spec.nested.values())
    if input not in used or input in group_cols:
        choices = [c for c in used if c not in group_cols]
        raise BayesziError(f"input {input!r} is not a predictor of the model; choose one of "
                           f"{choices}")
    if input not in df.columns:
        raise BayesziError(f"input {input!r} is not a column of the data; add it")
    return used, group_cols



def _paired_diffs(fitted: FitRecord, setup: Setup, base: pd.DataFrame,
                  scenario: pd.DataFrame, w: str, groups: str, exposure: float | None,
                  weight: np.ndarray) -> np.ndarray:
    """Per draw: sum over rows of weight * (q(scenario) - q(base))."""
    ra = prepare_rows(fitted, base, groups, exposure, tag="a")
    rb = prepare_rows(fitted, scenario, groups, exposure, tag="b")
    _merge_labels(ra, rb, True)
    rows = concat_rows([ra, rb])
    n = ra.encoded.n
    acc = np.zeros(setup.n_draws)

    def consume(units: np.ndarray, parts: list[dict[str, np.ndarray]]) -> None:
        acc[:] += (parts[1][w] - parts[0][w]) @ weight[units]

    evaluate(setup, rows, [w], [np.arange(n), n + np.arange(n)], consume)
    return acc


def _numeric_apc(fitted: FitRecord, setup: Setup, df: pd.DataFrame, input: str,
                 used: list[str], group_cols: list[str], w: str, groups: str,
                 exposure: float | None, pairs: int) -> tuple[str, np.ndarray, int]:
    u = df[input].to_numpy(dtype=float)
    n = len(df)
    if n < 2 or np.all(u == u[0]):
        raise BayesziError(f"input {input!r} takes a single value in the data; an average "
                           "comparison needs rows that differ in it")
    if n * (n - 1) <= pairs:
        i, j = np.divmod(np.arange(n * n), n)
        keep = i != j
        i, j = i[keep], j[keep]
    else:
        rng = np.random.default_rng(setup.rng.integers(2**62))
        i = rng.integers(0, n, pairs)
        j = (i + rng.integers(1, n, pairs)) % n  # j != i
    differ = u[i] != u[j]
    i, j = i[differ], j[differ]
    v = _other_inputs(df, [c for c in used if c != input and c not in group_cols], fitted)
    if v.shape[1]:
        dv = v[i] - v[j]
        prec = np.linalg.pinv(np.atleast_2d(np.cov(v, rowvar=False)))
        weight = 1.0 / (1.0 + np.einsum("pa,ab,pb->p", dv, prec, dv))
    else:
        weight = np.ones(len(i))
    du = u[j] - u[i]
    base = df.iloc[i].reset_index(drop=True)
    scenario = base.copy()
    scenario[input] = df[input].to_numpy()[j]
    num = _paired_diffs(fitted, setup, base, scenario, w, groups, exposure,
                        weight * np.sign(du))
    den = float(np.sum(weight * np.abs(du)))
    return f"per unit of {input}", num / den, int(len(i))


def _other_inputs(df: pd.DataFrame, cols: list[str], fitted: FitRecord) -> np.ndarray:
    """The other inputs v as a numeric matrix (categories as 0/1 indicators)."""
    blocks = []
    for c in cols:
        s = df[c]
        if c in fitted.design.levels or not pd.api.types.is_numeric_dtype(s):
            dummies = pd.get_dummies(s.astype(str), drop_first=True, dtype=float)
            if dummies.shape[1]:
                blocks.append(dummies.to_numpy())
        else:
            blocks.append(s.to_numpy(dtype=float)[:, None])
    return np.hstack(blocks) if blocks else np.empty((len(df), 0))


def _level_comparisons(fitted: FitRecord, setup: Setup, df: pd.DataFrame, input: str,
                       levels: tuple[str, str] | None, w: str, groups: str,
                       exposure: float | None) -> list[tuple[str, np.ndarray, int]]:
    known = fitted.design.levels.get(input, sorted(set(df[input].astype(str))))
    if levels is None:
        todo = [(known[0], b) for b in known[1:]]
    else:
        if not isinstance(levels, tuple | list) or len(levels) != 2:
            raise BayesziError(f"levels must be two levels (from, to) of {input!r}, e.g. "
                               f"levels=({known[0]!r}, {known[-1]!r}); got {levels!r}")
        bad = [lv for lv in levels if str(lv) not in known]
        if bad:
            raise BayesziError(f"level(s) {bad} of {input!r} were not in the fitted data; "
                               f"known levels: {known}")
        todo = [(str(levels[0]), str(levels[1]))]
    n = len(df)
    out = []
    for a, b in todo:
        base, scenario = df.copy(), df.copy()
        base[input] = a
        scenario[input] = b
        acc = _paired_diffs(fitted, setup, base, scenario, w, groups, exposure,
                            np.full(n, 1.0 / n))
        out.append((f"{b} vs {a}", acc, n))
    return out
