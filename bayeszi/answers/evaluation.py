"""The machinery behind predictions and contrasts (internal): options, rows, chunks, draws.

:func:`make_setup` checks the shared options once; :func:`prepare_rows` encodes the rows
asked about; :func:`evaluate` computes the draws of each quantity chunk by chunk (rows that
share a new group stay in one chunk, :func:`plan_chunks`); :func:`summarise` turns draws into
mean, sd and interval. The public functions are in :mod:`bayeszi.answers.predict` and
:mod:`bayeszi.answers.contrast`.

Example
-------
>>> [len(c) for c in plan_chunks(5, 2)]
[2, 2, 1]
"""

from __future__ import annotations

import warnings
from collections.abc import Callable, Sequence
from dataclasses import dataclass, replace
from typing import Any

import numpy as np
import pandas as pd
from scipy import special as sc
from scipy.sparse import coo_matrix
from scipy.sparse.csgraph import connected_components

from bayeszi.base import names, options
from bayeszi.base.errors import BayesziError, BayesziWarning
from bayeszi.engine.draws import LinearPredictors, fitted_rows, linear_predictors, n_draws
from bayeszi.engine.record import FitRecord
from bayeszi.families import Family, get_family
from bayeszi.model import validate as V
from bayeszi.model.design import EncodedRows

QUANTITIES: tuple[str, ...] = ("mean", "rate", "p_zero", "p_zeros_part", "p_nonzero",
                               "count_part_mean", "at_least", "new_count")
#: the group modes (:data:`bayeszi.base.options.GROUP_MODES`), in order
GROUP_MODES: tuple[str, ...] = tuple(options.GROUP_MODES)
#: values per (draws x rows) block: 2**16 float64 values are 512 KiB per array, small enough
#: to stay in the CPU cache through the chain of NumPy steps (measured 2-3x faster here than
#: 1 MiB or 8 MiB blocks; benchmarks/bench_predict.py).
CHUNK_ELEMENTS = 1 << 16


# ============================================================================ set-up and checks
@dataclass
class Setup:
    """What one call computes: the fit (thinned to the draws used), its family, the group
    mode, and the positions of the draws used among all (chains x draws)."""

    fitted: FitRecord
    family: Family
    mode: str
    k: int | None
    draw_ids: np.ndarray
    n_draws: int
    n_average: int
    rng: np.random.Generator


def make_setup(fitted: FitRecord, groups: str, k: int | None, draws: int | None,
               seed: options.Seed, n_average: int) -> Setup:
    """Validate the shared options and bundle them (used by predictions and contrasts)."""
    groups = options.check_group_mode(groups)
    n_average = options.check_whole(n_average, "n_average", example=30)
    rng = options.rng(seed)
    total = n_draws(fitted)
    subset = options.draw_subset(draws, total)
    draw_ids = np.arange(total) if subset is None else subset
    if subset is not None:
        fitted = thinned(fitted, draw_ids)
    if draws == 1:
        warnings.warn("draws=1: a single posterior draw has no spread, so the sd column is "
                      "empty (NaN) and both interval bounds equal the mean; use draws=2 or "
                      "more for uncertainty", BayesziWarning, stacklevel=3)
    return Setup(fitted, get_family(fitted.spec.family), groups, k, draw_ids, len(draw_ids),
                 n_average, rng)


def thinned(fitted: FitRecord, draw_ids: np.ndarray) -> FitRecord:
    """A shallow copy of ``fitted`` whose posterior holds only the draws ``draw_ids`` (one
    chain), so that each chunk reads the thinned draws instead of indexing all of them."""
    import copy

    import arviz as az
    import xarray as xr

    post = fitted.idata.posterior
    data_vars = {name: (da.dims, da.values.reshape((-1,) + da.shape[2:])[draw_ids][None])
                 for name, da in post.data_vars.items()}
    coords = {k: post.coords[k].values for k in post.coords if k not in ("chain", "draw")}
    coords.update(chain=[0], draw=draw_ids)
    out = copy.copy(fitted)
    out.idata = az.InferenceData(posterior=xr.Dataset(data_vars, coords=coords))
    return out


def _is_int(x: object) -> bool:
    return isinstance(x, int | np.integer) and not isinstance(x, bool)


def check_what(fitted: FitRecord, what: str | Sequence[str], k: int | None, groups: str,
               allow: Sequence[str] = QUANTITIES) -> list[str]:
    """Return ``what`` as a list of known quantity names, or fail saying what to ask."""
    if not isinstance(what, str | Sequence):
        raise BayesziError(f"what must be a quantity name or a list of them, got {what!r}; "
                           f"choose from {list(allow)}")
    whats = [what] if isinstance(what, str) else list(what)
    if not whats:
        raise BayesziError(f"what is empty; ask for one or more of {list(allow)}")
    fam = get_family(fitted.spec.family)
    for w in whats:
        if w not in allow:
            import difflib

            near = difflib.get_close_matches(str(w), allow, n=1)
            hint = f" (did you mean {near[0]!r}?)" if near else ""
            raise BayesziError(f"unknown quantity what={w!r}{hint}; choose from {list(allow)}")
        if w == "p_zeros_part" and fam.zeros_kind is None:
            raise BayesziError(f"family {fam.name!r} has no zeros part, so there is no "
                               f"zeros-part probability; ask for what='p_zero' ({names.PROB_ZERO})")
        if w == "new_count" and groups == "average":
            raise BayesziError("a new count averaged over groups is a new count at a new group: "
                               "use groups='new' with what='new_count'")
    if "at_least" in whats:
        if not _is_int(k) or k < 0:
            raise BayesziError(f"what='at_least' needs a whole number k >= 0 (P(Y >= k)), got "
                               f"k={k!r}; e.g. k=1 for P(Y >= 1)")
    elif k is not None:
        raise BayesziError("k is used only with what='at_least'; drop k or add 'at_least'")
    if len(set(whats)) != len(whats):
        raise BayesziError(f"what lists a quantity twice: {whats}")
    return whats


def quantity_label(fitted: FitRecord, what: str, k: int | None = None) -> str:
    """The plain-language name of a quantity for this fit's family, as shown in tables."""
    fam = get_family(fitted.spec.family)
    spec = fitted.spec
    effort = spec.exposure or (f"exp({spec.offset})" if spec.offset else None)
    if what == "mean":
        return "E[Y], expected count"
    if what == "rate":
        return (f"E[Y] per unit of {effort}" if effort
                else "E[Y] per unit exposure (no exposure in the model: equals E[Y])")
    if what == "p_zero":
        return names.PROB_ZERO
    if what == "p_zeros_part":
        return names.zeros_part_label(fam.name)
    if what == "p_nonzero":
        return "P(Y > 0), encounter probability"
    if what == "count_part_mean":
        if fam.zeros_kind == "inflation":
            return "mu, mean count when not an extra zero"
        if fam.zeros_kind == "hurdle":
            return "E[Y | Y > 0], mean count once above zero"
        return "E[Y], mean of the count process"
    if what == "at_least":
        return f"P(Y >= {k})"
    return "new count Y, posterior predictive"


def groups_label(fitted: FitRecord, mode: str, n_average: int) -> str:
    """How group effects entered, as shown in the ``groups`` column."""
    columns = [g.name for g in fitted.design.groups]
    if not columns:
        return "no groups in model"
    s = ", ".join(columns)
    return {"known": f"known {s}", "new": f"new {s}",
            "average": f"average over {s} ({n_average} draws each)",
            "typical": f"typical {s} (effect 0)"}[mode]


def sampler_note(fitted: FitRecord) -> list[str]:
    """Warn when the draws behind an answer came with sampler problems; return them."""
    probs = fitted.sampling.problems()
    if probs:
        more = f" (and {len(probs) - 1} more; see fitted.sampler_problems())" \
            if len(probs) > 1 else ""
        warnings.warn("these answers rest on posterior draws with sampler problems: "
                      f"{probs[0]}{more}", V.BayesziWarning, stacklevel=4)
    return probs


# ============================================================================ rows
@dataclass
class Rows:
    """Rows ready for prediction: encoded design, the index to report under, and group labels.

    ``labels`` holds, per grouping column, the label of each row (used for new groups: rows
    sharing a label share a new effect); rows without the column get a label of their own.
    """

    encoded: EncodedRows
    index: pd.Index
    labels: dict[str, np.ndarray]


def prepare_rows(fitted: FitRecord, data: pd.DataFrame | None, groups: str,
                 exposure: float | None = None, tag: str = "") -> Rows:
    """Validate and encode ``data`` (None: the fitted rows); see :func:`predict`."""
    d = fitted.design
    spec = fitted.spec
    if exposure is not None:
        if spec.exposure is None and spec.offset is None:
            raise BayesziError("exposure= was given, but the model was fitted without exposure "
                               "or offset; drop exposure=")
        if isinstance(exposure, bool) or not isinstance(exposure, int | float | np.number) \
                or not np.isfinite(exposure) or exposure <= 0:
            raise BayesziError(f"exposure must be one positive number (the effort for every "
                               f"row, e.g. exposure=1 for a rate per unit), got {exposure!r}")
    if data is None:
        enc = fitted_rows(fitted)
        index = d.index
        labels = {g.name: np.asarray(g.levels, dtype=object)[g.codes] for g in d.groups}
    else:
        data = V.check_frame(data)
        effort_col = spec.exposure or spec.offset
        if exposure is None and effort_col is not None and effort_col not in data.columns:
            kind = "exposure" if spec.exposure else "offset (log effort)"
            raise BayesziError(
                f"the data have no {kind} column {effort_col!r}, which the model needs for "
                f"each row's effort. Add the column, or pass exposure=1 to predict for one "
                f"unit of {spec.exposure or 'effort'} (or exposure=<effort> for another value)"
            )
        enc = d.encode(data, need_exposure=exposure is None)
        index = data.index
        labels = {}
        for g in d.groups:
            outer = spec.nested.get(g.name)
            if g.name in enc.group_labels and (outer is None or outer in data.columns):
                labels[g.name] = np.asarray(enc.group_labels[g.name], dtype=object)
            else:
                labels[g.name] = own_labels(len(data), tag)
        if groups == "known":
            _check_known(fitted, data, enc, labels)
    if exposure is not None:
        enc = replace(enc, log_offset=np.full(enc.n, np.log(float(exposure))))
    return Rows(enc, index, labels)


def own_labels(n: int, tag: str = "") -> np.ndarray:
    """Labels that give each of ``n`` rows a group of its own: tuples ``(tag, i)``, which
    cannot equal the string labels of the data (see :func:`is_own_label`)."""
    out = np.empty(n, dtype=object)
    for i in range(n):
        out[i] = (tag, i)
    return out


def is_own_label(labels: np.ndarray) -> np.ndarray:
    """Which labels were made by :func:`own_labels` (rows without a group column)."""
    return np.fromiter((isinstance(v, tuple) for v in labels), dtype=bool, count=len(labels))


def _check_known(fitted: FitRecord, data: pd.DataFrame, enc: EncodedRows,
                 labels: dict[str, np.ndarray]) -> None:
    for g in fitted.design.groups:
        if g.name not in data.columns:
            raise options.missing_group_column(g.name)
        bad = enc.group_codes[g.name] < 0
        if bad.any():
            unseen = sorted(set(labels[g.name][bad]))
            raise options.unseen_levels(g.name, unseen, V.rows_text(data.index, bad),
                                        list(g.levels))


def take_rows(enc: EncodedRows, idx: np.ndarray) -> EncodedRows:
    """The encoded rows at positions ``idx``."""
    return EncodedRows(enc.X_counts[idx], None if enc.X_zeros is None else enc.X_zeros[idx],
                       enc.log_offset[idx], {k: v[idx] for k, v in enc.group_codes.items()},
                       len(idx))


def concat_rows(parts: Sequence[Rows]) -> Rows:
    """Stack several :class:`Rows` (same fit) into one."""
    encs = [p.encoded for p in parts]
    Xz = None if encs[0].X_zeros is None else np.vstack([e.X_zeros for e in encs])
    codes = {k: np.concatenate([e.group_codes[k] for e in encs])
             for k in encs[0].group_codes if all(k in e.group_codes for e in encs)}
    enc = EncodedRows(np.vstack([e.X_counts for e in encs]), Xz,
                      np.concatenate([e.log_offset for e in encs]), codes,
                      sum(e.n for e in encs))
    labels = {k: np.concatenate([p.labels[k] for p in parts]) for k in parts[0].labels}
    index = parts[0].index.append([p.index for p in parts[1:]]) if len(parts) > 1 \
        else parts[0].index
    return Rows(enc, index, labels)


# ============================================================================ the engine
def plan_chunks(n_units: int, target: int, links: Sequence[np.ndarray] = ()) -> list[np.ndarray]:
    """Split units ``0..n_units-1`` into chunks of about ``target`` units.

    Units that share an id in any of ``links`` (directly or through others) stay in one
    chunk, so that a new group's drawn effect is the same for all of its rows.

    Example
    -------
    >>> [c.tolist() for c in plan_chunks(5, 2, [np.array([0, 1, 0, 2, 1])])]
    [[0, 2], [1, 4], [3]]
    """
    target = max(1, int(target))
    if not links:
        return [np.arange(s, min(s + target, n_units)) for s in range(0, n_units, target)]
    src, dst = [], []
    for ids in links:
        order = np.argsort(ids, kind="stable")
        same = ids[order][1:] == ids[order][:-1]
        src.append(order[:-1][same])
        dst.append(order[1:][same])
    a, b = np.concatenate(src), np.concatenate(dst)
    graph = coo_matrix((np.ones(len(a)), (a, b)), shape=(n_units, n_units))
    _, comp = connected_components(graph, directed=False)
    order = np.argsort(comp, kind="stable")
    sorted_comp = comp[order]
    start = np.r_[True, sorted_comp[1:] != sorted_comp[:-1]]
    first = np.maximum.accumulate(np.where(start, np.arange(n_units), 0))
    chunk_of = first // target  # a component goes whole into the chunk where it starts
    cuts = np.flatnonzero(np.diff(chunk_of)) + 1
    return np.split(order, cuts)


def _linear(setup: Setup, enc: EncodedRows, ids: dict[str, np.ndarray]) -> LinearPredictors:
    mode = setup.mode
    if mode == "known":
        return linear_predictors(setup.fitted, enc, "known", setup.rng)
    if mode == "typical":
        return linear_predictors(setup.fitted, enc, "none", setup.rng)
    return linear_predictors(setup.fitted, replace(enc, group_codes=ids), "new", setup.rng)


def quantity(setup: Setup, what: str, lp: LinearPredictors, log_offset: np.ndarray,
             memo: dict[str, np.ndarray] | None = None) -> np.ndarray:
    """One quantity per draw and row, shape (draws, rows), from linear predictors ``lp``.

    ``memo`` keeps log P(Y = 0) between ``p_zero`` and ``p_nonzero`` of the same ``lp``.
    """
    fam = setup.family
    ec, ez, la = lp.counts, lp.zeros, lp.log_alpha
    memo = {} if memo is None else memo
    if what in ("p_zero", "p_nonzero"):
        if "log_p0" not in memo:
            memo["log_p0"] = fam.log_prob_zero(ec, ez, la)
        return np.exp(memo["log_p0"]) if what == "p_zero" else -np.expm1(memo["log_p0"])
    if what == "mean":
        return fam.mean(ec, ez, la)
    if what == "rate":
        return fam.mean(ec, ez, la) * np.exp(-log_offset)[None, :]
    if what == "p_zeros_part":
        return sc.expit(ez)
    if what == "count_part_mean":
        return fam.positive_mean(ec, ez, la)
    if what == "at_least":
        return fam.sf(setup.k, ec, ez, la)
    if what == "new_count":
        return fam.random(setup.rng, ec, ez, la)
    if what.startswith("pmf:"):
        return fam.pmf_table(int(what[4:]), ec, ez, la)
    raise AssertionError(what)  # pragma: no cover - checked by check_what


def values(setup: Setup, enc: EncodedRows, ids: dict[str, np.ndarray],
           whats: Sequence[str]) -> dict[str, np.ndarray]:
    """All of ``whats`` per draw for the rows ``enc`` (new-group ids ``ids``)."""
    groups = setup.fitted.design.groups
    if setup.mode != "average" or not groups:
        lp = _linear(setup, enc, ids)
        memo: dict[str, np.ndarray] = {}
        return {w: quantity(setup, w, lp, enc.log_offset, memo) for w in whats}
    # Population average: for each posterior draw, average over n_average new groups. All
    # rows of one replicate share the same new effects (common random numbers).
    zeros_ids = {g.name: np.zeros(enc.n, dtype=np.int64) for g in groups}
    acc: dict[str, np.ndarray] = {}
    for _ in range(setup.n_average):
        lp = linear_predictors(setup.fitted, replace(enc, group_codes=zeros_ids), "new",
                               setup.rng)
        memo = {}
        for w in whats:
            q = quantity(setup, w, lp, enc.log_offset, memo)
            if w in acc:
                acc[w] += q
            else:
                acc[w] = np.array(q, dtype=np.float64)
    return {w: a / setup.n_average for w, a in acc.items()}


def evaluate(setup: Setup, rows: Rows, whats: Sequence[str], unit_rows: Sequence[np.ndarray],
             consume: Callable[[np.ndarray, list[dict[str, np.ndarray]]], None],
             width: int = 1) -> None:
    """Compute ``whats`` chunk by chunk and hand each chunk to ``consume``.

    A unit is a set of rows computed together: ``unit_rows[j][u]`` is the row of unit ``u``
    in scenario ``j`` (one scenario for predictions, two for contrasts). ``consume(units,
    parts)`` gets the unit positions and, per scenario, a dict of (draws, len(units)) arrays.
    ``width`` is the number of values per draw and row (e.g. pmf columns), for sizing chunks.
    """
    n_units = len(unit_rows[0])
    target = max(1, CHUNK_ELEMENTS // (setup.n_draws * len(unit_rows) * width))
    all_ids: dict[str, np.ndarray] = {}
    links: list[np.ndarray] = []
    if setup.mode == "new":
        for g in setup.fitted.design.groups:
            ids = pd.factorize(pd.Series(rows.labels[g.name], dtype=object))[0]
            all_ids[g.name] = ids.astype(np.int64)
            links.extend(ids[u] for u in unit_rows)
    for units in plan_chunks(n_units, target, links):
        idx = np.concatenate([u[units] for u in unit_rows])
        enc = take_rows(rows.encoded, idx)
        vals = values(setup, enc, {g: v[idx] for g, v in all_ids.items()}, whats)
        m = len(units)
        parts = [{w: v[:, j * m:(j + 1) * m] for w, v in vals.items()}
                 for j in range(len(unit_rows))]
        consume(units, parts)


def summarise(v: np.ndarray, lo: float, hi: float, integer: bool = False) -> np.ndarray:
    """Posterior mean, sd and the two quantiles over draws (axis 0): shape (4, rows)."""
    out = np.empty((4, v.shape[1]))
    out[0] = v.mean(axis=0)
    out[1] = v.std(axis=0, ddof=1) if v.shape[0] > 1 else np.nan
    out[2:] = np.quantile(v, [lo, hi], axis=0, method="inverted_cdf" if integer else "linear")
    return out


# ============================================================================ public answers


def compare_draws(a: np.ndarray, b: np.ndarray, lo: float, hi: float) -> np.ndarray:
    """Summaries (10, rows) of base draws ``a`` and scenario draws ``b`` (draws, rows): the
    two means, the difference's mean, sd and bounds, the ratio's median and bounds, and
    P(ratio > 1) -- the columns of :func:`bayeszi.answers.contrast.contrast`.

    Example
    -------
    >>> compare_draws(np.array([[1.0], [2.0]]), np.array([[2.0], [2.0]]), 0.05, 0.95)[:3, 0]
    array([1.5, 2. , 0.5])
    """
    diff = b - a
    with np.errstate(divide="ignore", invalid="ignore"):
        ratio = b / a
    out = np.empty((10, a.shape[1]))
    out[0], out[1], out[2] = a.mean(axis=0), b.mean(axis=0), diff.mean(axis=0)
    out[3] = diff.std(axis=0, ddof=1) if diff.shape[0] > 1 else np.nan
    out[4:6] = np.quantile(diff, [lo, hi], axis=0)
    out[6:9] = np.quantile(ratio, [0.5, lo, hi], axis=0)
    out[9] = (b > a).mean(axis=0)
    return out


def contrast_table(out: np.ndarray, label: dict[str, str], iv: options.Interval,
                    index: pd.Index) -> pd.DataFrame:
    """The contrast table: the rows of :func:`compare_draws` named, labels in front."""
    lo_name, hi_name = iv.names
    cols = ["base", "scenario", "difference", "difference sd", f"difference {lo_name}",
            f"difference {hi_name}", "ratio (median)", f"ratio {lo_name}", f"ratio {hi_name}",
            "P(ratio > 1)"]
    table = pd.DataFrame(dict(zip(cols, out, strict=True)), index=index)
    for pos, (key, val) in enumerate(label.items()):
        table.insert(pos, key, val)
    return table


def comparison_row(label: dict[str, str], comparison: str, per_draw: np.ndarray,
                   n_pairs: int, iv: options.Interval) -> dict[str, Any]:
    """One row of the comparison table: the summaries of one comparison's draws."""
    lo_name, hi_name = iv.names
    qs = np.quantile(per_draw, [iv.lower, iv.upper])
    return {**label, "comparison": comparison, "mean": per_draw.mean(),
            "sd": per_draw.std(ddof=1) if len(per_draw) > 1 else np.nan,
            lo_name: qs[0], hi_name: qs[1], "P(> 0)": (per_draw > 0).mean(),
            "pairs": n_pairs}
