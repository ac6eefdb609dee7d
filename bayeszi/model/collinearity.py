"""Which predictors carry the same information? A collinearity reading before sampling.

When two or more predictors of one part move together, the data cannot tell their effects
apart: the likelihood is nearly flat along the direction in which one coefficient rises and
another falls, and the prior decides where the posterior sits along it (the usual cause of
a prior that dominates or conflicts with the data, :mod:`bayeszi.answers.sensitivity`).
:func:`collinearity` reads each part's design matrix, before any sampling, and names

* each pair of predictors (from different formula terms) whose correlation is at least
  :data:`CORRELATION_LIMIT` in absolute value, and
* each formula term whose variance inflation factor is at least :data:`VIF_LIMIT`.

The variance inflation factor of a predictor is ``1 / (1 - R^2)``, with ``R^2`` from
regressing it on the part's other predictors: the factor by which collinearity inflates the
variance of its estimate (common practice). For a term with several columns (a factor with
three or more levels) the generalized form of Fox & Monette (1992, JASA 87:178-183, from
memory), ``GVIF = det(R_term) det(R_rest) / det(R)``, is put on the same footing as
``GVIF^(1/df)``; dummies of one factor are never compared with each other.

Example
-------
>>> import numpy as np, pandas as pd
>>> from bayeszi.base.spec import ModelSpec
>>> from bayeszi.model.design import build_design
>>> rng = np.random.default_rng(1)
>>> a = rng.normal(size=200)
>>> df = pd.DataFrame({"y": rng.poisson(2, 200), "a": a, "b": a + 0.1 * rng.normal(size=200),
...                    "c": rng.normal(size=200)})
>>> d = build_design(df, ModelSpec(counts="y ~ a + b + c", family="poisson"))
>>> t = collinearity(d)
>>> sorted(t.loc[t["flagged"], "term"])
['a', 'b']
"""

from __future__ import annotations

import warnings
from typing import Any

import numpy as np
import pandas as pd

from bayeszi.base.errors import BayesziWarning
from bayeszi.model.term_labels import TIMES, variable_of

CORRELATION_LIMIT = 0.8
"""|correlation| of two predictors at or above which they are named (common practice)."""
VIF_LIMIT = 5.0
"""Variance inflation factor at or above which a term is named: a common rule of thumb puts
the line at 5 or 10 (James, Witten, Hastie & Tibshirani 2013, An Introduction to Statistical
Learning, sec. 3.3.3, from memory); 5 is the cautious end, because here a weak likelihood
hands the estimate to the prior rather than only widening it."""

__all__ = ["CORRELATION_LIMIT", "VIF_LIMIT", "collinearity", "collinearity_problems",
           "warn_collinear"]


def _term_columns(pdes: Any) -> list[tuple[str, list[int]]]:
    """(label, column indices) of each formula term of a part, intercept left out: a
    one-column term by its readable label, a factor by its column's name."""
    slices = getattr(getattr(pdes, "model_spec", None), "term_slices", None)
    out: list[tuple[str, list[int]]] = []
    if slices:
        for term, sl in slices.items():
            cols = [j for j in range(sl.start, sl.stop) if j != pdes.intercept]
            if not cols:
                continue
            if len(cols) == 1:
                label = pdes.labels[cols[0]]
            else:
                label = TIMES.join(variable_of(str(f)) for f in getattr(term, "factors", [term]))
            out.append((label, cols))
        return out
    return [(t, [j]) for j, t in enumerate(pdes.labels) if j != pdes.intercept]


def _inflation(R: np.ndarray, idx: list[int], rest: list[int]) -> float:
    """GVIF^(1/df) of the columns ``idx`` against ``rest`` (the VIF for one column), from
    log-determinants; inf when the predictors are exactly collinear."""
    sign, logdet = np.linalg.slogdet(R)
    s1, l1 = np.linalg.slogdet(R[np.ix_(idx, idx)])
    s2, l2 = np.linalg.slogdet(R[np.ix_(rest, rest)])
    if sign <= 0 or s1 <= 0 or s2 <= 0 or logdet < -30:
        return float("inf")
    return float(np.exp((l1 + l2 - logdet) / len(idx)))


def _part_rows(part: str, pdes: Any) -> list[dict[str, Any]]:
    """Rows of :func:`collinearity` for one part."""
    terms = _term_columns(pdes)
    cols = [j for _, js in terms for j in js]
    if len(terms) < 2:
        return []
    X = np.asarray(pdes.X, dtype=float)[:, cols]
    with np.errstate(invalid="ignore", divide="ignore"):
        R = np.corrcoef(X, rowvar=False)
    pos = {j: i for i, j in enumerate(cols)}
    rows = []
    for label, js in terms:
        idx = [pos[j] for j in js]
        rest = [i for i in range(len(cols)) if i not in idx]
        vif = _inflation(R, idx, rest)
        partners = []
        for other, ks in terms:
            if other == label:
                continue
            r = max((abs(R[pos[j], pos[k]]) for j in js for k in ks), default=0.0)
            if r >= CORRELATION_LIMIT:
                partners.append(f"{other} ({r:.2f})")
        rows.append({"part": part, "term": label, "variance inflation": vif,
                     "correlated with": ", ".join(partners),
                     "flagged": bool(vif >= VIF_LIMIT or partners)})
    return rows


def collinearity(design: Any) -> pd.DataFrame:
    """One row per formula term of each part (intercepts left out): ``variance inflation``
    (the VIF, or GVIF^(1/df) for a factor), ``correlated with`` (the other terms whose
    |correlation| with it reaches :data:`CORRELATION_LIMIT`, with the value) and ``flagged``.
    Parts with fewer than two terms give no rows.

    Example
    -------
    >>> collinearity(fitted.design).query("flagged")           # doctest: +SKIP
    """
    rows: list[dict[str, Any]] = []
    for part, pdes in (("counts", design.counts), ("zeros", design.zeros)):
        if pdes is not None:
            rows += _part_rows(part, pdes)
    cols = ["part", "term", "variance inflation", "correlated with", "flagged"]
    return pd.DataFrame(rows, columns=cols)


def collinearity_problems(table: pd.DataFrame) -> list[str]:
    """One plain-language warning per part with flagged terms (empty when none).

    Example
    -------
    >>> collinearity_problems(collinearity(design))            # doctest: +SKIP
    []
    """
    out = []
    for part, sub in table.loc[table["flagged"].astype(bool)].groupby("part", sort=False):
        named = "; ".join(
            f"{r['term']} (variance inflation {r['variance inflation']:.1f}"
            + (f", correlated with {r['correlated with']}" if r["correlated with"] else "")
            + ")" for r in sub.to_dict("records"))
        out.append(
            f"collinear predictors in the {part} part: {named}. The data can hardly tell "
            f"their effects apart (variance inflation of at least {VIF_LIMIT:g} or "
            f"|correlation| of at least {CORRELATION_LIMIT}), so the prior may decide how the "
            "effect is shared between them. Consider dropping or combining them; check the "
            "prior sensitivity after the fit (docs/sensitivity.md)")
    return out


def warn_collinear(design: Any) -> pd.DataFrame:
    """Issue one :class:`BayesziWarning` per part with collinear predictors; returns the
    :func:`collinearity` table.

    Example
    -------
    >>> warn_collinear(design)                                 # doctest: +SKIP
    """
    table = collinearity(design)
    for text in collinearity_problems(table):
        warnings.warn(text, BayesziWarning, stacklevel=3)
    return table
