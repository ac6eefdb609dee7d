"""Group effects and how strongly they are pooled, as tables.

:func:`group_effects` lists every level's effect of every grouping column, per part: the
intercept effect (how far the level sits from a typical level, on the log-rate scale for
counts and the logit scale for zeros) and, with varying slopes, each slope's deviation on the
user's scale; with the central interval, the exp scale (a rate ratio or odds ratio against a
typical level), the number of records, the level's pooling factor and the sampler's
diagnostics. :func:`pooling_summary` gives one row per grouping column, part and effect: the
spread (sd) of the effects and how much the data of the levels were pooled toward the
population overall and for the best- and worst-sampled levels.

Pooling factors
---------------
For one level j with effect u_j ~ Normal(0, sd^2), the level's pooling factor is
``var(u_j | data) / E(sd^2 | data)``: about 1 when its own records say little (its effect is
pulled all the way to the typical value and keeps the population's uncertainty), about 0 when
its own records decide. In the normal model with known variances this ratio is exactly the
factor by which the level's own estimate is shrunk toward zero (the textbook normal-normal
result, common practice); for counts it holds approximately. The batch pooling factor of a
grouping column is ``1 - V(E(u_j | data)) / E(V(u_j) | data)``, with V the variance across
levels (Gelman & Pardoe 2006, Technometrics 48:241-251, from memory): 0 means no pooling,
1 complete pooling.

Example
-------
>>> table = group_effects(fitted, interval=0.9, part="counts")   # doctest: +SKIP
>>> table.loc[("reach", "R07", "counts", "intercept")]           # doctest: +SKIP
>>> pooling_summary(fitted)                                      # doctest: +SKIP
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from bayeszi.base import names, options
from bayeszi.base.errors import BayesziError
from bayeszi.engine.draws import stacked
from bayeszi.engine.record import FitRecord

PARTS = names.PARTS
INDEX = ["group", "level", "part", "effect"]


def _exp_label(fitted: FitRecord, part: str, effect: str) -> str:
    if part == "counts":
        if effect == "intercept":
            return "rate ratio to a typical group"
        return f"factor on the rate ratio per unit of {effect}"
    what = names.zeros_odds_label(fitted.spec.family)
    if effect == "intercept":
        return f"odds ratio of {what} to a typical group"
    return f"factor on the odds ratio of {what} per unit of {effect}"


def _check_args(fitted: FitRecord, interval: float, part: str | None,
                group: str | None) -> tuple[list[str], list]:
    if not fitted.design.groups:
        raise BayesziError(
            "this model has no group effects; fit it with groups='your_site_column' to get them"
        )
    options.interval_bounds(interval)
    parts = [p for p in PARTS if names.term_dim(p) in fitted.idata.posterior.coords]
    if part is not None and part not in parts:
        raise BayesziError(f"part must be one of {parts} for family {fitted.spec.family!r} "
                           f"(or None for all), got {part!r}")
    columns = [g.name for g in fitted.design.groups]
    if group is not None and group not in columns:
        raise BayesziError(f"group must be one of the grouping columns {columns} (or None for "
                           f"all), got {group!r}")
    parts = [part] if part is not None else parts
    groups = [g for g in fitted.design.groups if group is None or g.name == group]
    return parts, groups


def _batches(fitted: FitRecord, parts: list[str], groups: list):
    """Yield (group, part, effect name, draws (S, levels) on the user's scale, sd draws (S,)
    on the same scale, diagnostics key per level)."""
    post = fitted.idata.posterior
    for g in groups:
        for part in parts:
            name = names.effect(part, g.name)
            if name in post:
                keys = [names.summary_key(name, lv) for lv in g.levels]
                yield g, part, "intercept", stacked(fitted, name), \
                    stacked(fitted, names.group_sd(part, g.name)), keys
            sname = names.slope(part, g.name)
            if sname in post:
                pdes = fitted.design.counts if part == "counts" else fitted.design.zeros
                slopes = stacked(fitted, sname)
                sds = stacked(fitted, names.slope_sd(part, g.name))
                for k, t in enumerate(fitted.spec.varying.get(part, ())):
                    scale = pdes.scale[pdes.terms.index(t)]
                    keys = [names.summary_key(sname, lv, t) for lv in g.levels]
                    yield g, part, pdes.label(t), slopes[:, :, k] / scale, sds[:, k] / scale, \
                        keys


def level_pooling(draws: np.ndarray, sd: np.ndarray) -> np.ndarray:
    """Per-level pooling factor ``var(u_j | data) / E(sd^2 | data)`` from draws (S, levels)
    of the effects and (S,) of their sd.

    Example
    -------
    >>> rng = np.random.default_rng(0)
    >>> sd = np.full(4000, 0.5)
    >>> u = rng.normal(0.0, 0.5, (4000, 2)) * [1.0, 0.2]   # level 2 pinned by its data
    >>> np.round(level_pooling(u, sd), 1).tolist()
    [1.0, 0.0]
    """
    return draws.var(axis=0, ddof=1) / float(np.mean(sd**2))


def batch_pooling(draws: np.ndarray) -> float:
    """Gelman & Pardoe's pooling factor ``1 - V(E(u_j)) / E(V(u_j))`` of one batch of effects
    (draws of shape (S, levels)); V is the variance across levels.

    Example
    -------
    >>> rng = np.random.default_rng(0)
    >>> round(batch_pooling(rng.normal(size=(4000, 30))), 2)   # nothing learnt: full pooling
    1.0
    """
    across = draws.var(axis=1, ddof=1).mean()
    return float(1.0 - draws.mean(axis=0).var(ddof=1) / across) if across > 0 else 1.0


def group_effects(fitted: FitRecord, interval: float = 0.9, part: str | None = None,
                  group: str | None = None) -> pd.DataFrame:
    """Each group level's effect per part, with intervals, exp scale and pooling factor.

    Rows are indexed by (group, level, part, effect), where effect is ``"intercept"`` (the
    level's shift of the log rate, counts, or of the logit, zeros, from a typical level) or a
    varying-slope term (the level's deviation from the population slope, per unit of the
    term as written). Columns: ``records`` (of the level in the fitted data), posterior
    ``mean``, ``sd``, the central ``interval`` bounds, ``exp scale`` (what the exp columns
    mean), ``exp(mean)`` (posterior mean of the exp) and exp bounds, ``pooling`` (about 1:
    pulled to the typical level; about 0: the level's own data decide), ``R-hat``,
    ``bulk ESS``, ``tail ESS`` and ``flag``.

    Example
    -------
    >>> t = group_effects(fitted, part="zeros")                # doctest: +SKIP
    >>> t.xs("intercept", level="effect").sort_values("mean")  # doctest: +SKIP
    """
    parts, groups = _check_args(fitted, interval, part, group)
    iv = options.interval_bounds(interval)
    lo_q, hi_q = iv.lower, iv.upper
    lo_name, hi_name = iv.names
    table = fitted.sampling.table
    th = fitted.sampling.thresholds
    frames = []
    for g, prt, effect, draws, sd, keys in _batches(fitted, parts, groups):
        lo, hi = np.quantile(draws, [lo_q, hi_q], axis=0)
        frame = pd.DataFrame({
            "group": g.name, "level": g.levels, "part": prt, "effect": effect,
            "records": g.counts_per_level.astype(np.int64),
            "mean": draws.mean(axis=0), "sd": draws.std(axis=0, ddof=1),
            lo_name: lo, hi_name: hi,
            "exp scale": _exp_label(fitted, prt, effect),
            "exp(mean)": np.exp(draws).mean(axis=0),
            f"exp {lo_name}": np.exp(lo), f"exp {hi_name}": np.exp(hi),
            "pooling": level_pooling(draws, sd),
        })
        stats = table.reindex(keys)[list(names.DIAGNOSTIC_COLUMNS)].to_numpy()
        frame[list(names.DIAGNOSTIC_COLUMNS)] = stats
        frames.append(frame)
    out = pd.concat(frames, ignore_index=True)
    flags = []
    for r, eb, et in out[list(names.DIAGNOSTIC_COLUMNS)].itertuples(index=False):
        f = []
        if np.isfinite(r) and r > th.rhat:
            f.append("R-hat")
        if np.isfinite(eb) and (eb < th.ess or et < th.ess):
            f.append("low ESS")
        flags.append(" ".join(f))
    out["flag"] = flags
    return out.set_index(INDEX)


def pooling_summary(fitted: FitRecord, interval: float = 0.9) -> pd.DataFrame:
    """One row per (group, part, effect): how spread out the effects are, how much pooling.

    Columns: ``levels``; ``records min`` / ``records median`` / ``records max`` per level;
    the effects' ``sd`` (posterior mean) with its central ``interval``; ``pooling`` (the
    batch pooling factor, 0 = none, 1 = complete); ``pooling, fewest records`` and
    ``pooling, most records`` (mean pooling factor of the quarter of levels with the fewest
    and with the most records: the first is larger when pooling works as it should).

    Example
    -------
    >>> pooling_summary(fitted)[["sd", "pooling"]]     # doctest: +SKIP
    """
    parts, groups = _check_args(fitted, interval, None, None)
    iv = options.interval_bounds(interval)
    lo_name, hi_name = iv.names
    rows = []
    for g, prt, effect, draws, sd, _ in _batches(fitted, parts, groups):
        n = g.counts_per_level
        lam = level_pooling(draws, sd)
        order = np.argsort(n, kind="stable")
        q = max(1, len(n) // 4)
        lo, hi = np.quantile(sd, [iv.lower, iv.upper])
        rows.append({
            "group": g.name, "part": prt, "effect": effect, "levels": len(g.levels),
            "records min": int(n.min()), "records median": float(np.median(n)),
            "records max": int(n.max()),
            "sd": float(sd.mean()), f"sd {lo_name}": lo, f"sd {hi_name}": hi,
            "pooling": batch_pooling(draws),
            "pooling, fewest records": float(lam[order[:q]].mean()),
            "pooling, most records": float(lam[order[-q:]].mean()),
        })
    return pd.DataFrame(rows).set_index(["group", "part", "effect"])


__all__ = ["group_effects", "pooling_summary", "level_pooling", "batch_pooling"]
