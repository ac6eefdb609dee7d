"""Predictions and contrasts averaged over candidate models by their stacking weights.

When several candidates fitted to the same data predict about equally well, picking one
discards the others' view. Stacking (Yao, Vehtari, Simpson & Gelman 2018, Bayesian Analysis
13(3)) chooses the weights w_m of a mixture of the models' posterior predictive
distributions that maximise its leave-one-out log score; :func:`bayeszi.rank_models` reports
them in its ``weight`` column. The averaged answer is the mixture: its draws are the pooled
draws of the models, each model giving a share of them equal to its weight, so intervals
carry the uncertainty about which model is right as well as each model's own.

The rule (:func:`plan_mixture`):

1. weights (default: the stacking weights of :func:`bayeszi.rank_models`) are divided by their
   sum; models below ``min_weight`` (default :data:`MIN_WEIGHT` = 0.01) are left out and the
   others' weights divided again by their sum;
2. of S draws in all (``draws``; default the fewest draws any kept model holds), model m
   gives n_m = floor(w_m S) plus one for the S - sum floor(w_m S) models with the largest
   remainders w_m S - floor(w_m S) (ties: the order of ``fits``) -- the largest-remainder
   rule, so the n_m add up to S exactly (:func:`allocate_draws`);
3. model m's n_m draws are evenly spaced over its posterior, the same subset
   ``predict(..., draws=n_m)`` uses; the random parts (new groups, group averages, new
   counts) come from one generator made from ``seed``, used by the kept models in turn in
   the order of ``fits``.

So with one model kept the answer equals that model's :func:`bayeszi.answers.predict.predict`
with ``draws=S`` and the same seed, exactly. :func:`average_contrast` and
:func:`averaged_predictive_comparison` do the same for contrasts and for the average
predictive comparisons of :mod:`bayeszi.answers.contrast`.

Example
-------
>>> allocate_draws({"zip": 0.62, "hurdle": 0.38}, 10)
{'zip': 6, 'hurdle': 4}
>>> import bayeszi as bz                                                # doctest: +SKIP
>>> bz.average_predictions({"zip": m1, "hurdle": m2}, new_df, what="rate",
...                        groups="new", seed=1)                        # doctest: +SKIP
"""

from __future__ import annotations

import warnings
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from typing import TYPE_CHECKING, Any

import numpy as np
import pandas as pd

from bayeszi.answers.comparison import WEIGHT, check_same_data, rank_models
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
    summarise,
)
from bayeszi.base import options
from bayeszi.base.errors import BayesziError, BayesziWarning
from bayeszi.engine.draws import n_draws
from bayeszi.engine.record import FitRecord

if TYPE_CHECKING:
    import xarray as xr

__all__ = ["MIN_WEIGHT", "Mixture", "allocate_draws", "average_contrast",
           "average_prediction_draws", "average_predictions", "averaged_predictive_comparison",
           "check_quantities", "fitted_data", "model_setups", "plan_mixture",
           "pool"]

#: models whose (normalised) weight is below this are left out of an average
MIN_WEIGHT = 0.01
#: quantities whose meaning depends on the family (see :func:`check_quantities`)
FAMILY_MEANING = ("p_zeros_part", "count_part_mean")
COMBINE = (None, "sum", "mean")


# ============================================================================ the mixture
@dataclass(frozen=True)
class Mixture:
    """Which models an average uses and how many draws each gives.

    ``given``: every model's weight divided by their sum; ``weights``: the kept models'
    weights divided again by their sum; ``draws``: the draws each kept model gives (they add
    up to ``total``); ``left_out``: the models below ``min_weight``.

    Example
    -------
    >>> Mixture({"a": 0.995, "b": 0.005}, {"a": 1.0}, {"a": 10}, ["b"], 0.01, 10).left_out
    ['b']
    """

    given: dict[str, float]
    weights: dict[str, float]
    draws: dict[str, int]
    left_out: list[str]
    min_weight: float
    total: int

    def attrs(self) -> dict[str, Any]:
        """What a table's ``attrs`` say about the mixture."""
        return {"models": list(self.weights), "weights": dict(self.weights),
                "given_weights": dict(self.given), "draws_per_model": dict(self.draws),
                "left_out": list(self.left_out), "min_weight": self.min_weight}


def allocate_draws(weights: Mapping[str, float], total: int) -> dict[str, int]:
    """Split ``total`` draws in proportion to ``weights`` (summing to 1) by largest remainder.

    Each model gets floor(w * total); the draws still missing go one each to the models with
    the largest remainders, ties to the earlier model. The counts add up to ``total``.

    Example
    -------
    >>> allocate_draws({"a": 0.5, "b": 0.25, "c": 0.25}, 6)
    {'a': 3, 'b': 2, 'c': 1}
    """
    names = list(weights)
    exact = np.array([weights[n] for n in names], dtype=float) * total
    floor = np.floor(exact).astype(np.int64)
    missing = int(total - floor.sum())
    order = np.argsort(-(exact - floor), kind="stable")
    floor[order[:missing]] += 1
    return {n: int(c) for n, c in zip(names, floor, strict=True)}


def _check_fits(fits: object) -> dict[str, FitRecord]:
    """The models as a dict name -> fit, refusing anything else or different data."""
    if not isinstance(fits, Mapping) or not fits:
        raise BayesziError("fits must be a dict of named fitted models, e.g. {'zip': fit_a, "
                           "'hurdle': fit_b}")
    out: dict[str, FitRecord] = {}
    for name, fit in fits.items():
        if not isinstance(fit, FitRecord):
            raise BayesziError(f"model {name!r} is a {type(fit).__name__}, not a fitted model; "
                               "pass the results of bayeszi.fit")
        out[str(name)] = fit
    if len(out) < len(fits):
        raise BayesziError("two models share a name once turned into text; rename them")
    if len(out) > 1:
        check_same_data(out)
    return out


def _given_weights(fits: Mapping[str, FitRecord], weights: object) -> dict[str, float]:
    """The weights of all models divided by their sum (None: the stacking weights)."""
    if weights is None:
        if len(fits) == 1:
            return {next(iter(fits)): 1.0}
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            weights = rank_models(fits)
    if isinstance(weights, pd.DataFrame):
        if WEIGHT not in weights.columns:
            raise BayesziError(f"weights is a table without a {WEIGHT!r} column; pass the "
                               "table of bayeszi.rank_models or a dict model name -> weight")
        weights = {str(n): float(w) for n, w in weights[WEIGHT].items()}
    if not isinstance(weights, Mapping):
        raise BayesziError(f"weights must be a dict model name -> weight, the table of "
                           f"bayeszi.rank_models, or None (stacking weights); got {weights!r}")
    missing = [n for n in fits if n not in weights]
    extra = [str(n) for n in weights if n not in fits]
    if missing or extra:
        raise BayesziError(f"weights must name exactly the models {list(fits)}; missing "
                           f"{missing}, not a model {extra}")
    vals = {n: weights[n] for n in fits}
    bad = {n: w for n, w in vals.items() if isinstance(w, bool) or not isinstance(
        w, int | float | np.number) or not np.isfinite(w) or w < 0}
    if bad or sum(vals.values()) <= 0:
        raise BayesziError(f"weights must be finite numbers >= 0, not all 0; got {vals}")
    s = float(sum(vals.values()))
    return {n: float(w) / s for n, w in vals.items()}


def plan_mixture(fits: Mapping[str, FitRecord], weights: object = None,
                 draws: int | None = None, min_weight: float = MIN_WEIGHT) -> Mixture:
    """The models kept, their weights and their draws (see the module docstring's rule).

    Example
    -------
    >>> plan_mixture({"zip": m1, "hurdle": m2}, {"zip": 3, "hurdle": 1}).draws
    ...                                                                 # doctest: +SKIP
    {'zip': 3000, 'hurdle': 1000}
    """
    fits = _check_fits(fits)
    given = _given_weights(fits, weights)
    if isinstance(min_weight, bool) or not isinstance(min_weight, int | float) \
            or not 0 <= min_weight < 1:
        raise BayesziError(f"min_weight must be a number in [0, 1), got {min_weight!r}; "
                           f"e.g. min_weight={MIN_WEIGHT}")
    kept = {n: w for n, w in given.items() if w >= min_weight and w > 0}
    if not kept:
        raise BayesziError(f"every model's weight is below min_weight={min_weight}; lower it")
    s = sum(kept.values())
    kept = {n: w / s for n, w in kept.items()}
    held = {n: n_draws(fits[n]) for n in kept}
    total = min(held.values()) if draws is None else options.check_whole(draws, "draws",
                                                                         example=1000)
    counts = allocate_draws(kept, total)
    for n, c in counts.items():
        if c > held[n]:
            raise BayesziError(f"draws={total} asks model {n!r} (weight {kept[n]:.3f}) for {c} "
                               f"draws but it holds {held[n]}; pass draws=None or fewer")
    return Mixture(given, kept, counts, [n for n in given if n not in kept],
                   float(min_weight), total)


# ============================================================================ pooled draws
def check_quantities(fits: Mapping[str, FitRecord], models: Sequence[str],
                     what: str | Sequence[str], k: int | None, groups: str,
                     allow: Sequence[str] = QUANTITIES) -> list[str]:
    """``what`` as a list, checked for every model in ``models``; errors name the model.

    A quantity whose meaning depends on the family (the zeros-part probability, the counts
    part's mean) is refused when the models give it different meanings.

    Example
    -------
    >>> check_quantities({"zip": m1, "hurdle": m2}, ["zip", "hurdle"], "p_zero", None,
    ...                  "known")                                       # doctest: +SKIP
    ['p_zero']
    """
    whats: list[str] = []
    for name in models:
        try:
            whats = check_what(fits[name], what, k, groups, allow)
        except BayesziError as e:
            raise BayesziError(f"model {name!r}: {e}") from None
    for w in whats:
        if w in FAMILY_MEANING:
            meant = {n: quantity_label(fits[n], w, k) for n in models}
            if len(set(meant.values())) > 1:
                said = "; ".join(f"{n}: {m}" for n, m in meant.items())
                raise BayesziError(f"what={w!r} means different things in these models "
                                   f"({said}), so it cannot be averaged; ask for 'p_zero' or "
                                   "'mean', or average models of one zero mechanism")
    return whats


def model_setups(fits: Mapping[str, FitRecord], mix: Mixture, groups: str, k: int | None,
                 n_average: int, seed: options.Seed) -> dict[str, Setup]:
    """One prediction set-up per model that gives draws, sharing one generator (in order).

    Example
    -------
    >>> model_setups(fits, plan_mixture(fits, w), "new", None, 30, 1)["zip"].n_draws
    ...                                                                 # doctest: +SKIP
    620
    """
    rng = options.rng(seed)
    if mix.total == 1:
        warnings.warn("draws=1: a single draw has no spread, so the sd column is empty (NaN) "
                      "and both interval bounds equal the mean", BayesziWarning, stacklevel=3)
    out = {}
    for name, n in mix.draws.items():
        if n:
            with warnings.catch_warnings():  # one model giving 1 draw is no problem here
                warnings.simplefilter("ignore", BayesziWarning)
                out[name] = make_setup(fits[name], groups, k, n, rng, n_average)
    return out


def _model_rows(fit: FitRecord, name: str, data: pd.DataFrame | None, groups: str,
                exposure: float | None, tag: str = "") -> Rows:
    try:
        return prepare_rows(fit, data, groups, exposure, tag)
    except BayesziError as e:
        raise BayesziError(f"model {name!r}: {e}") from None


def pool(setups: Mapping[str, Setup], rows: Mapping[str, Rows], whats: Sequence[str],
         unit_rows: Sequence[np.ndarray], total: int) -> list[dict[str, np.ndarray]]:
    """The pooled draws, per scenario ``j`` a dict of (total, len(unit_rows[j])) arrays.

    Model after model (in the order of ``setups``), each model's draws fill the next block
    of rows of the pooled arrays; see :func:`bayeszi.answers.evaluation.evaluate`.
    Memory: ``total`` x rows x 8 bytes per quantity and scenario.

    Example
    -------
    >>> pool(setups, rows, ["mean"], [np.arange(n)], mix.total)[0]["mean"].shape
    ...                                                                 # doctest: +SKIP
    (1000, 12)
    """
    out = [{w: np.empty((total, len(u)), dtype=np.int64 if w == "new_count" else np.float64)
            for w in whats} for u in unit_rows]
    start = 0
    for name, setup in setups.items():
        stop = start + setup.n_draws

        def consume(units: np.ndarray, parts: list[dict[str, np.ndarray]],
                    a: int = start, b: int = stop) -> None:
            for j, part in enumerate(parts):
                for w in whats:
                    out[j][w][a:b, units] = part[w]

        evaluate(setup, rows[name], whats, unit_rows, consume)
        start = stop
    return out


def _groups_text(fits: Mapping[str, FitRecord], setups: Mapping[str, Setup], groups: str,
                 n_average: int) -> str:
    """The ``groups`` column: one label if all models agree, else one per model."""
    labels = {n: groups_label(fits[n], groups, n_average) for n in setups}
    if len(set(labels.values())) == 1:
        return next(iter(labels.values()))
    return "; ".join(f"{n}: {lab}" for n, lab in labels.items())


def _problems(fits: Mapping[str, FitRecord], setups: Mapping[str, Setup]) -> list[str]:
    return [f"{n}: {p}" for n in setups for p in sampler_note(fits[n])]


@dataclass
class _Pooled:
    fits: dict[str, FitRecord]
    mix: Mixture
    whats: list[str]
    setups: dict[str, Setup]
    rows: dict[str, Rows]
    draws: dict[str, np.ndarray]
    problems: list[str]


def _pooled_predictions(fits: Mapping[str, FitRecord], data: pd.DataFrame | None,
                        what: str | Sequence[str], groups: str, k: int | None,
                        exposure: float | None, n_average: int, draws: int | None,
                        seed: options.Seed, weights: object, min_weight: float) -> _Pooled:
    mix = plan_mixture(fits, weights, draws, min_weight)
    fits = {str(n): f for n, f in fits.items()}
    whats = check_quantities(fits, list(mix.weights), what, k, groups)
    setups = model_setups(fits, mix, groups, k, n_average, seed)
    rows = {n: _model_rows(fits[n], n, data, groups, exposure) for n in setups}
    problems = _problems(fits, setups)
    n = next(iter(rows.values())).encoded.n
    pooled = pool(setups, rows, whats, [np.arange(n)], mix.total)[0]
    return _Pooled(fits, mix, whats, setups, rows, pooled, problems)


# ============================================================================ predictions
def average_predictions(fits: Mapping[str, FitRecord], data: pd.DataFrame | None = None,
                        what: str | Sequence[str] = "mean", groups: str = "known",
                        interval: float = 0.9, *, weights: object = None,
                        min_weight: float = MIN_WEIGHT, combine: str | None = None,
                        k: int | None = None, exposure: float | None = None,
                        n_average: int = 30, draws: int | None = None,
                        seed: options.Seed = None) -> pd.DataFrame:
    """Predictions of the stacking mixture of ``fits``, per row of ``data`` or combined.

    Parameters
    ----------
    fits : model name -> fitted model, all fitted to the same data.
    weights : model name -> weight, the table of :func:`bayeszi.rank_models`, or None (compute
        the stacking weights, which runs PSIS-LOO for every model).
    min_weight : models below this weight are left out (see the module docstring).
    combine : None (row by row), ``"sum"`` (the rows' total per draw, e.g. a total catch
        with ``what="new_count"``) or ``"mean"`` (their average).
    draws : S, the draws of the mixture in all (None: the fewest any kept model holds).
    data, what, groups, interval, k, exposure, n_average, seed : as in
        :func:`bayeszi.answers.predict.predict`.

    Returns
    -------
    The table of :func:`~bayeszi.answers.predict.predict` (one row per input row and
    quantity, or one per quantity when combined). ``attrs``: ``models``, ``weights``,
    ``given_weights``, ``draws_per_model``, ``left_out``, ``min_weight``, ``draws``,
    ``sampler_problems``. The pooled draws are held whole: S x rows x 8 bytes per quantity.

    Example
    -------
    >>> average_predictions({"zip": m1, "hurdle": m2}, new_df, what=["mean", "p_zero"],
    ...                     groups="new", seed=1)                       # doctest: +SKIP
    """
    iv = options.interval_bounds(interval)
    _check_combine(combine)
    p = _pooled_predictions(fits, data, what, groups, k, exposure, n_average, draws, seed,
                            weights, min_weight)
    first = next(iter(p.setups))
    index = p.rows[first].index
    n = len(index)
    if combine is not None:
        p.draws = {w: v.sum(axis=1, keepdims=True) / (n if combine == "mean" else 1)
                   for w, v in p.draws.items()}
        index = pd.Index([f"{combine} over rows ({n} rows)"])
    glabel = _groups_text(p.fits, p.setups, groups, n_average)
    lo_name, hi_name = iv.names
    frames = []
    for w in p.whats:
        s = summarise(p.draws[w], iv.lower, iv.upper,
                      integer=w == "new_count" and combine != "mean")
        frames.append(pd.DataFrame({"quantity": quantity_label(p.fits[first], w, k),
                                    "groups": glabel, "mean": s[0], "sd": s[1],
                                    lo_name: s[2], hi_name: s[3]}, index=index))
    table = frames[0] if len(frames) == 1 else pd.concat(frames)
    table.attrs.update(p.mix.attrs())
    table.attrs["sampler_problems"] = p.problems
    table.attrs["draws"] = p.mix.total
    return table


def _check_combine(combine: object) -> None:
    if combine not in COMBINE:
        raise BayesziError(f"combine must be None (row by row), 'sum' or 'mean', got "
                           f"{combine!r}")


def average_prediction_draws(fits: Mapping[str, FitRecord], data: pd.DataFrame | None = None,
                             what: str = "mean", groups: str = "known", *,
                             weights: object = None, min_weight: float = MIN_WEIGHT,
                             k: int | None = None, exposure: float | None = None,
                             n_average: int = 30, draws: int | None = None,
                             seed: options.Seed = None) -> xr.DataArray:
    """The pooled draws behind :func:`average_predictions`, dims (draw, row).

    Coordinates along ``draw``: ``model`` (the model each draw comes from) and
    ``model_draw`` (its position among that model's chains x draws). Sums over rows are
    valid draws of a total, as in :func:`bayeszi.answers.predict.prediction_draws`.

    Example
    -------
    >>> d = average_prediction_draws(fits, new_df, "new_count", groups="new", seed=1)
    ...                                                                 # doctest: +SKIP
    >>> d.sum("row").quantile([0.05, 0.95])                             # doctest: +SKIP
    """
    import xarray as xr

    if not isinstance(what, str):
        raise BayesziError(f"average_prediction_draws takes one quantity name, got {what!r}")
    p = _pooled_predictions(fits, data, what, groups, k, exposure, n_average, draws, seed,
                            weights, min_weight)
    first = next(iter(p.setups))
    models = np.concatenate([np.full(s.n_draws, n, dtype=object) for n, s in p.setups.items()])
    ids = np.concatenate([s.draw_ids for s in p.setups.values()])
    return xr.DataArray(
        p.draws[what], dims=("draw", "row"),
        coords={"draw": np.arange(p.mix.total), "model": ("draw", models),
                "model_draw": ("draw", ids), "row": np.asarray(p.rows[first].index)},
        name=what,
        attrs={"quantity": quantity_label(p.fits[first], what, k),
               "groups": _groups_text(p.fits, p.setups, groups, n_average),
               "weights": "; ".join(f"{n}: {w:.3f}" for n, w in p.mix.weights.items()),
               "left_out": ", ".join(p.mix.left_out),
               "sampler_problems": "; ".join(p.problems)})


# ============================================================================ contrasts
def _scenario_frame(fits: Mapping[str, FitRecord], models: Sequence[str], base: pd.DataFrame,
                    shift: Mapping[str, Any] | None, set_to: Mapping[str, Any] | None
                    ) -> tuple[pd.DataFrame, str, list[str]]:
    """The base with ``shift`` added and ``set_to`` set; a description; the models (of
    ``models``) that use none of the changed columns (their scenario equals their base)."""
    out, described, changed = base.copy(), [], []
    response = fits[models[0]].spec.response
    for kind, change in (("shift", shift), ("set_to", set_to)):
        if change is None:
            continue
        if not isinstance(change, Mapping) or not change:
            raise BayesziError(f"{kind} must be a non-empty dict of column -> value, e.g. "
                               f"{kind}={{'depth': 0.5}}; got {change!r}")
        for col, value in change.items():
            if col == response or col not in out.columns:
                raise BayesziError(f"{kind} names {col!r}, which is the response or not a "
                                   "column of the base rows; change a predictor in the data")
            if not np.isscalar(value):
                raise BayesziError(f"{kind}[{col!r}] must be one value, got {value!r}")
            if kind == "shift":
                if not pd.api.types.is_numeric_dtype(out[col]) or isinstance(value, bool) \
                        or pd.api.types.is_bool_dtype(out[col]) \
                        or not isinstance(value, int | float | np.number):
                    raise BayesziError(f"shift adds a number to a numeric column; {col!r} with "
                                       f"{value!r} cannot be shifted; use set_to=")
                out[col] = out[col] + value
                described.append(f"{col} {'+' if value >= 0 else '-'} {abs(value):g}")
            else:
                out[col] = value
                described.append(f"{col} = {value}")
            changed.append(col)
    unused = [n for n in models if not set(changed) & set(fits[n].design.used_columns)]
    if len(unused) == len(models):
        raise BayesziError(f"no model with weight uses the changed column(s) {changed}, so "
                           f"the change changes nothing; models: {list(models)}")
    return out, "; ".join(described), unused


def _pair_labels(a: Rows, b: Rows) -> None:
    """Paired rows without a group column share one label (one unit, one new effect)."""
    for g in a.labels:
        la, lb = a.labels[g], b.labels[g]
        own_a, own_b = is_own_label(la), is_own_label(lb)
        lb[own_b] = la[own_b]
        la[own_a] = lb[own_a]


def _contrast_rows(fit: FitRecord, name: str, base: pd.DataFrame | None,
                   scenario: pd.DataFrame, groups: str, exposure: float | None
                   ) -> tuple[Rows, int, int]:
    """The base rows then the scenario rows of one model, and how many of each."""
    ra = _model_rows(fit, name, base, groups, exposure, tag="a")
    rb = _model_rows(fit, name, scenario, groups, exposure, tag="b")
    if ra.encoded.n == rb.encoded.n:
        _pair_labels(ra, rb)
    return concat_rows([ra, rb]), ra.encoded.n, rb.encoded.n




def fitted_data(fits: Mapping[str, FitRecord], models: Sequence[str]) -> pd.DataFrame:
    """The rows the models were fitted to (the same for all, :func:`check_same_data`), with
    the columns any of ``models`` used.

    Example
    -------
    >>> list(fitted_data({"a": m1, "b": m2}, ["a", "b"]).columns)      # doctest: +SKIP
    ['crayfish', 'trap_nights', 'water_temp', 'barrier']
    """
    frames = [fits[n].data for n in models]
    if any(f is None for f in frames):
        raise BayesziError("these fits do not hold their data; pass the rows as base= (or "
                           "data=)")
    out = frames[0]
    for f in frames[1:]:
        more = [c for c in f.columns if c not in out.columns]
        if more:
            out = pd.concat([out, f[more]], axis=1)
    return out


def _contrast_frames(fits: Mapping[str, FitRecord], models: Sequence[str],
                     base: pd.DataFrame | None, scenario: pd.DataFrame | None,
                     shift: Mapping[str, Any] | None, set_to: Mapping[str, Any] | None
                     ) -> tuple[pd.DataFrame, pd.DataFrame, str, list[str]]:
    """Base rows, scenario rows, the change in words, and the models it does not touch."""
    base_df = fitted_data(fits, models) if base is None else base
    if scenario is not None and (shift is not None or set_to is not None):
        raise BayesziError("give either scenario= (a data frame) or shift=/set_to= (changes to "
                           "the base), not both")
    if scenario is not None:
        return base_df, scenario, "scenario rows vs base rows", []
    if shift is None and set_to is None:
        raise BayesziError("nothing to compare: pass scenario=<data frame>, or "
                           "shift={'column': amount} / set_to={'column': value}")
    scenario_df, change, unused = _scenario_frame(fits, models, base_df, shift, set_to)
    return base_df, scenario_df, change, unused


def _contrast_quantity(fits: Mapping[str, FitRecord], models: Sequence[str], what: str,
                       k: int | None, groups: str) -> str:
    """The one quantity a contrast compares, refusing random counts."""
    if what == "new_count":
        raise BayesziError("contrasts compare expected quantities; what='new_count' is a "
                           "random count. Use what='mean' (or 'p_zero', ...)")
    return check_quantities(fits, models, what, k, groups,
                            allow=[q for q in QUANTITIES if q != "new_count"])[0]


def average_contrast(fits: Mapping[str, FitRecord], base: pd.DataFrame | None = None,
                     scenario: pd.DataFrame | None = None, *,
                     shift: Mapping[str, Any] | None = None,
                     set_to: Mapping[str, Any] | None = None, what: str = "mean",
                     groups: str = "known", interval: float = 0.9,
                     combine: str | None = None, weights: object = None,
                     min_weight: float = MIN_WEIGHT, k: int | None = None,
                     exposure: float | None = None, n_average: int = 30,
                     draws: int | None = None, seed: options.Seed = None) -> pd.DataFrame:
    """Ratio and difference between a scenario and a base, on the stacking mixture of ``fits``.

    Per pooled draw (each from one model, both scenarios of a draw from the same model and
    the same group effects), the ratio scenario / base and the difference scenario - base,
    as :func:`bayeszi.answers.contrast.contrast` forms them for one model. A model that does
    not use a changed column keeps its weight: its scenario equals its base (ratio 1), which
    is its answer; such models are listed in ``attrs["not_using_change"]``.

    Parameters
    ----------
    base, scenario, shift, set_to, what, groups, interval, combine, k, exposure,
    n_average, seed : as in :func:`bayeszi.answers.contrast.contrast`.
    weights, min_weight, draws : as in :func:`average_predictions`.

    Returns
    -------
    The table of :func:`~bayeszi.answers.contrast.contrast`; ``attrs`` as in
    :func:`average_predictions` (``left_out``: models below ``min_weight``) plus
    ``not_using_change``.

    Example
    -------
    >>> average_contrast({"zip": m1, "hurdle": m2}, set_to={"barrier": 1},
    ...                  what="p_nonzero", combine="mean")              # doctest: +SKIP
    """
    _check_combine(combine)
    iv = options.interval_bounds(interval)
    mix = plan_mixture(fits, weights, draws, min_weight)
    fits = {str(n): f for n, f in fits.items()}
    models = list(mix.weights)
    w = _contrast_quantity(fits, models, what, k, groups)
    base_df, scenario_df, change, unused = _contrast_frames(fits, models, base, scenario,
                                                            shift, set_to)
    setups = model_setups(fits, mix, groups, k, n_average, seed)
    built = {n: _contrast_rows(fits[n], n, None if base is None else base_df, scenario_df,
                               groups, exposure) for n in setups}
    rows = {n: r for n, (r, _, _) in built.items()}
    _, na, nb = next(iter(built.values()))
    problems = _problems(fits, setups)
    first = next(iter(setups))
    label = {"quantity": quantity_label(fits[first], w, k),
             "groups": _groups_text(fits, setups, groups, n_average), "change": change}
    out, index = _contrast_values(setups, rows, w, na, nb, combine, mix.total, iv)
    table = contrast_table(out, label, iv, rows[first].index[:na] if index is None else index)
    table.attrs.update(mix.attrs())
    table.attrs.update(sampler_problems=problems, draws=mix.total,
                       not_using_change=[n for n in unused if n in setups])
    return table


def _contrast_values(setups: Mapping[str, Setup], rows: Mapping[str, Rows], w: str, na: int,
                     nb: int, combine: str | None, total: int, iv: options.Interval
                     ) -> tuple[np.ndarray, pd.Index | None]:
    """Summaries of the pooled base and scenario draws: per row (index None) or combined."""
    if combine is None and na != nb:
        raise BayesziError(f"base has {na} rows and scenario {nb}; a row-by-row contrast needs "
                           "as many rows in each. Pass combine='sum' or combine='mean'")
    if combine is None:
        parts = pool(setups, rows, [w], [np.arange(na), na + np.arange(nb)], total)
        return compare_draws(parts[0][w], parts[1][w], iv.lower, iv.upper), None
    v = pool(setups, rows, [w], [np.arange(na + nb)], total)[0][w]
    a, b = v[:, :na].sum(axis=1), v[:, na:].sum(axis=1)
    if combine == "mean":
        a, b = a / na, b / nb
    name = f"{combine} over rows ({na} base, {nb} scenario)"
    return compare_draws(a[:, None], b[:, None], iv.lower, iv.upper), pd.Index([name])


# ============================================================================ APC
def _accumulate(setups: Mapping[str, Setup], rows: Mapping[str, Rows], w: str, n: int,
                weight: np.ndarray, total: int) -> np.ndarray:
    """Per pooled draw: sum over pairs of weight * (q(scenario) - q(base)); the base rows
    are ``0..n-1`` of each model's rows and the scenario rows the ``n`` after them."""
    acc = np.zeros(total)
    start = 0
    for name, setup in setups.items():
        stop = start + setup.n_draws

        def consume(units: np.ndarray, parts: list[dict[str, np.ndarray]],
                    a: int = start, b: int = stop) -> None:
            acc[a:b] += (parts[1][w] - parts[0][w]) @ weight[units]

        evaluate(setup, rows[name], [w], [np.arange(n), n + np.arange(n)], consume)
        start = stop
    return acc


def _pair_weights(df: pd.DataFrame, others: Sequence[str], levels: Mapping[str, Any],
                  i: np.ndarray, j: np.ndarray) -> np.ndarray:
    """Weights 1 / (1 + d' S^-1 d) of pairs (i, j) by their other inputs (Gelman & Pardoe
    2007), categories as 0/1 indicators; all 1 without other inputs."""
    blocks = []
    for c in others:
        s = df[c]
        if c in levels or not pd.api.types.is_numeric_dtype(s):
            dummies = pd.get_dummies(s.astype(str), drop_first=True, dtype=float)
            if dummies.shape[1]:
                blocks.append(dummies.to_numpy())
        else:
            blocks.append(s.to_numpy(dtype=float)[:, None])
    if not blocks:
        return np.ones(len(i))
    v = np.hstack(blocks)
    dv = v[i] - v[j]
    prec = np.linalg.pinv(np.atleast_2d(np.cov(v, rowvar=False)))
    return 1.0 / (1.0 + np.einsum("pa,ab,pb->p", dv, prec, dv))


def _apc_pairs(df: pd.DataFrame, input: str, pairs: int, rng: np.random.Generator
               ) -> tuple[np.ndarray, np.ndarray]:
    """All ordered pairs of rows (or ``pairs`` random ones) that differ in ``input``."""
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
        pair_rng = np.random.default_rng(rng.integers(2**62))
        i = pair_rng.integers(0, n, pairs)
        j = (i + pair_rng.integers(1, n, pairs)) % n  # j != i
    differ = u[i] != u[j]
    return i[differ], j[differ]


def _apc_inputs(fits: Mapping[str, FitRecord], models: Sequence[str], input: str,
                df: pd.DataFrame) -> tuple[list[str], list[str], dict[str, Any]]:
    """The other inputs (of any weighted model), the models not using ``input``, and the
    category levels the models know."""
    used: list[str] = []
    group_cols: set[str] = set()
    levels: dict[str, Any] = {}
    for n in models:
        f = fits[n]
        used += [c for c in f.design.used_columns if c != f.spec.response and c not in used]
        group_cols |= set(f.spec.groups) | set(f.spec.nested.values())
        levels = {**f.design.levels, **levels}
    if input not in used or input in group_cols:
        raise BayesziError(f"input {input!r} is not a predictor of any model with weight; "
                           f"choose one of {[c for c in used if c not in group_cols]}")
    if input not in df.columns:
        raise BayesziError(f"input {input!r} is not a column of the data; add it")
    unused = [n for n in models if input not in fits[n].design.used_columns]
    others = [c for c in used if c != input and c not in group_cols]
    return others, unused, levels


def _level_pairs(input: str, df: pd.DataFrame, known: Sequence[str],
                 levels: tuple[str, str] | None) -> list[tuple[str, str]]:
    """The (from, to) levels of a category input: each against the first, or ``levels``."""
    if levels is None:
        return [(known[0], b) for b in known[1:]]
    if not isinstance(levels, tuple | list) or len(levels) != 2:
        raise BayesziError(f"levels must be two levels (from, to) of {input!r}, e.g. "
                           f"levels=({known[0]!r}, {known[-1]!r}); got {levels!r}")
    bad = [lv for lv in levels if str(lv) not in known]
    if bad:
        raise BayesziError(f"level(s) {bad} of {input!r} were not in the fitted data; "
                           f"known levels: {list(known)}")
    return [(str(levels[0]), str(levels[1]))]


def _apc_draws(fits: Mapping[str, FitRecord], setups: Mapping[str, Setup], base: pd.DataFrame,
               scenario: pd.DataFrame, w: str, groups: str, exposure: float | None,
               weight: np.ndarray, total: int) -> np.ndarray:
    """Per pooled draw: sum over rows of weight * (q(scenario) - q(base))."""
    rows = {n: _contrast_rows(fits[n], n, base, scenario, groups, exposure)[0] for n in setups}
    return _accumulate(setups, rows, w, len(base), weight, total)


def averaged_predictive_comparison(
        fits: Mapping[str, FitRecord], input: str, data: pd.DataFrame | None = None, *,
        what: str = "mean", groups: str = "known", interval: float = 0.9,
        levels: tuple[str, str] | None = None, pairs: int = 10_000, weights: object = None,
        min_weight: float = MIN_WEIGHT, k: int | None = None, exposure: float | None = None,
        n_average: int = 30, draws: int | None = None, seed: options.Seed = None
) -> pd.DataFrame:
    """Average predictive comparison of ``input`` on the stacking mixture of ``fits``.

    The comparison of :func:`bayeszi.answers.contrast.average_comparison` (Gelman & Pardoe
    2007), with the same pairs of rows and pair weights for every model (the other inputs v
    are those of any weighted model), computed per pooled draw by the model the draw comes
    from. A weighted model that does not use ``input`` gives 0 (no effect) with its weight;
    ``attrs["not_using_input"]`` names such models. The random pairs (when there are more
    than ``pairs``) are drawn first from the generator of ``seed``.

    Parameters
    ----------
    input, data, what, groups, interval, levels, pairs, k, exposure, n_average, seed : as
        in :func:`bayeszi.answers.contrast.average_comparison`.
    weights, min_weight, draws : as in :func:`average_predictions`.

    Example
    -------
    >>> averaged_predictive_comparison({"zip": m1, "hurdle": m2}, "depth",
    ...                                what="rate", seed=1)             # doctest: +SKIP
    """
    iv = options.interval_bounds(interval)
    mix = plan_mixture(fits, weights, draws, min_weight)
    fits = {str(n): f for n, f in fits.items()}
    models = list(mix.weights)
    w = _contrast_quantity(fits, models, what, k, groups)
    pairs = options.check_whole(pairs, "pairs", example=10000)
    df = fitted_data(fits, models) if data is None else data
    others, unused, known = _apc_inputs(fits, models, input, df)
    setups = model_setups(fits, mix, groups, k, n_average, seed)
    problems = _problems(fits, setups)
    if input in known or not pd.api.types.is_numeric_dtype(df[input]):
        results = []
        for a, b in _level_pairs(input, df, known.get(input, sorted(set(df[input].astype(
                str)))), levels):
            base, scenario = df.assign(**{input: a}), df.assign(**{input: b})
            acc = _apc_draws(fits, setups, base, scenario, w, groups, exposure,
                             np.full(len(df), 1.0 / len(df)), mix.total)
            results.append((f"{b} vs {a}", acc, len(df)))
    else:
        if levels is not None:
            raise BayesziError(f"levels= is for category inputs; {input!r} is numeric")
        results = [_numeric_comparison(fits, setups, df, input, others, known, w, groups,
                                       exposure, pairs, mix.total)]
    first = next(iter(setups))
    label = {"input": input, "quantity": quantity_label(fits[first], w, k),
             "groups": _groups_text(fits, setups, groups, n_average)}
    table = pd.DataFrame([comparison_row(label, c, d, n, iv) for c, d, n in results])
    table.attrs.update(mix.attrs())
    table.attrs.update(sampler_problems=problems, draws=mix.total,
                       not_using_input=[n for n in unused if n in setups])
    return table


def _numeric_comparison(fits: Mapping[str, FitRecord], setups: Mapping[str, Setup],
                        df: pd.DataFrame, input: str, others: Sequence[str],
                        known: Mapping[str, Any], w: str, groups: str,
                        exposure: float | None, pairs: int, total: int
                        ) -> tuple[str, np.ndarray, int]:
    """The per-draw APC of a numeric input: pairs, their weights, the weighted changes."""
    i, j = _apc_pairs(df, input, pairs, next(iter(setups.values())).rng)
    weight = _pair_weights(df, others, known, i, j)
    du = df[input].to_numpy(dtype=float)[j] - df[input].to_numpy(dtype=float)[i]
    base = df.iloc[i].reset_index(drop=True)
    scenario = base.copy()
    scenario[input] = df[input].to_numpy()[j]
    num = _apc_draws(fits, setups, base, scenario, w, groups, exposure,
                     weight * np.sign(du), total)
    return f"per unit of {input}", num / float(np.sum(weight * np.abs(du))), int(len(i))


