"""Rows pooled into weighted patterns, and the fast log density the model uses over them.

Two records that agree in every model input (both design matrices, the log offset, every
group code) and in the count have the same log density, so the sampler needs it once per
*pattern*, times the number of records in the pattern. With categorical covariates and
whole-number effort this shrinks 200,000 records to a few thousand patterns; with
continuous covariates almost every record is its own pattern and nothing is pooled.

Either way the patterns are ordered with the zero counts first, the layout that
:meth:`bayeszi.families.Family.pt_logp_observed` (the family's PyTensor density) splits by a
fixed slice instead of a per-element switch: zero counts need only log P(0) (no gamma
functions), positive counts the count part, whose one gamma-function term that depends on
the dispersion, ``lgamma(y + theta) - lgamma(theta)``, is computed once per distinct count
value and looked up. The density comes from the same kernels and zero mechanisms as the
NumPy :meth:`~bayeszi.families.Family.logpmf` and agrees with it to rounding
(tests/test_performance.py, tests/test_families.py) for ``alpha * mu`` above about 1e-300.

The model's density is the weighted sum over patterns, so a gradient costs O(patterns).
The pointwise log-likelihood that LOO needs is computed after sampling, in NumPy, by
:func:`bayeszi.engine.pointwise.pattern_log_likelihood`, once per pattern and draw;
:mod:`bayeszi.engine.loglik` stores it per record (or, for very large fits, per pattern with
each record's pattern) and gives LOO one value per original record either way.

Example
-------
>>> import pandas as pd
>>> from bayeszi.base.spec import ModelSpec
>>> from bayeszi.model.design import build_design
>>> df = pd.DataFrame({"y": [0, 2, 0, 2, 1], "f": list("aabab")})
>>> pats = find_patterns(build_design(df, ModelSpec(counts="y ~ C(f)", family="poisson")))
>>> pats.n_patterns, pats.n_zero, pats.weights.tolist()   # (0,a) (0,b) (2,a) (1,b)
(4, 2, [1, 1, 2, 1])
>>> pats.inverse.tolist()
[0, 2, 1, 2, 3]
"""

from __future__ import annotations

import dataclasses
from collections.abc import Callable
from dataclasses import dataclass
from typing import Any

import numpy as np

from bayeszi.families import get_family
from bayeszi.model.design import Design

#: pool rows only when that removes at least this share of them; otherwise keep one
#: pattern per record (only reordered, zero counts first).
MIN_SAVING = 0.2


@dataclass
class Patterns:
    """Distinct rows of a design, zero counts first.

    Attributes
    ----------
    design : the design with one row per pattern (same terms, centring, group levels).
    inverse : for each original record, the index of its pattern (length ``n``).
    weights : number of records in each pattern.
    n_zero : patterns ``0 .. n_zero - 1`` have count 0, the rest a positive count.
    pooled : whether any two records were pooled (False: one pattern per record).
    """

    design: Design
    inverse: np.ndarray
    weights: np.ndarray
    n_zero: int
    pooled: bool

    @property
    def n_patterns(self) -> int:
        """Number of patterns."""
        return int(self.weights.size)

    @property
    def n_rows(self) -> int:
        """Number of original records."""
        return int(self.inverse.size)


def _row_keys(design: Design) -> np.ndarray:
    """Every model input of a record and its count, one row per record (float64)."""
    cols = [design.y.astype(np.float64)[:, None], design.log_offset[:, None], design.counts.X]
    if design.zeros is not None:
        cols.append(design.zeros.X)
    cols.extend(g.codes.astype(np.float64)[:, None] for g in design.groups)
    return np.ascontiguousarray(np.hstack(cols))


def find_patterns(design: Design, min_saving: float = MIN_SAVING) -> Patterns:
    """Group the records of ``design`` into patterns (see the module example).

    Records are pooled only when that removes at least ``min_saving`` of them; otherwise
    each record is its own pattern. Patterns are ordered zero counts first, then by first
    appearance, so the result does not depend on how ties are sorted.
    """
    n = design.n
    keys = _row_keys(design)
    _, first, inverse = np.unique(keys, axis=0, return_index=True, return_inverse=True)
    inverse = inverse.reshape(-1)
    pooled = first.size <= (1.0 - min_saving) * n
    if not pooled:
        first = np.arange(n)
        inverse = np.arange(n)
    # order: zero counts first, then by first appearance in the data
    zero = design.y[first] == 0
    order = np.lexsort((first, ~zero))
    first = first[order]
    rank = np.empty_like(order)
    rank[order] = np.arange(order.size)
    inverse = rank[inverse]
    weights = np.bincount(inverse, minlength=first.size)
    return Patterns(_subset(design, first), inverse, weights, int(zero.sum()), bool(pooled))


def _subset(design: Design, rows: np.ndarray) -> Design:
    """``design`` restricted to ``rows`` (in that order); encodings and levels unchanged."""
    counts = dataclasses.replace(design.counts, X=design.counts.X[rows])
    zeros = None
    if design.zeros is not None:
        zeros = dataclasses.replace(design.zeros, X=design.zeros.X[rows])
    groups = [dataclasses.replace(g, codes=g.codes[rows]) for g in design.groups]
    return dataclasses.replace(
        design, n=int(rows.size), y=design.y[rows], log_offset=design.log_offset[rows],
        counts=counts, zeros=zeros, groups=groups, index=design.index[rows],
    )


# =============================================================================================
# The log density over patterns (PyTensor)
# =============================================================================================


def pattern_logp(family: str, patterns: Patterns, weighted: bool = True
                 ) -> Callable[..., Any]:
    """The log density of the observed counts, one value per pattern, for ``pm.CustomDist``.

    The returned ``logp(value, eta_c, eta_z, log_alpha)`` takes ``eta_c`` and ``eta_z`` with
    one entry per pattern and a scalar ``log_alpha``. With ``weighted=True`` (the model's
    density) each pattern's value is multiplied by its number of records, so the values sum
    to the log-likelihood of all records at O(patterns) cost; with ``weighted=False`` it is
    the log density of one record of each pattern. The observed counts are built in
    (``value`` is not read): PyMC calls the density of an observed variable only at its
    observed value. The values are those of :meth:`bayeszi.families.Family.logpmf`.

    Example
    -------
    >>> import pandas as pd, pytensor.tensor as pt
    >>> from bayeszi.base.spec import ModelSpec
    >>> from bayeszi.model.design import build_design
    >>> df = pd.DataFrame({"y": [0, 3, 0], "f": list("aaa")})
    >>> pats = find_patterns(build_design(df, ModelSpec(counts="y ~ C(f)", family="poisson")))
    >>> eta = pt.dvector("eta")
    >>> lp = pattern_logp("poisson", pats)(None, eta, None, None)   # patterns y=0 (x2), y=3
    >>> [round(v, 6) for v in lp.eval({eta: [0.0, 0.0]}).tolist()]   # 2 * (-1), log(e^-1/3!)
    [-2.0, -2.791759]
    """
    fam = get_family(family)
    weights = patterns.weights.astype(np.float64)
    use_weights = weighted and bool(np.any(weights != 1.0))

    def logp(value: Any, eta_c: Any, eta_z: Any, log_alpha: Any) -> Any:
        import pytensor.tensor as pt

        lp = fam.pt_logp_observed(patterns.design.y, eta_c, eta_z, log_alpha)
        return lp * pt.as_tensor_variable(weights) if use_weights else lp

    return logp


def pattern_random(family: str, patterns: Patterns) -> Callable[..., np.ndarray]:
    """Draws for ``pm.CustomDist``: pattern-level predictors, one count per original record."""
    fam = get_family(family)
    inverse = patterns.inverse

    def random(eta_c, eta_z, log_alpha, rng=None, size=None):
        eta_c = np.asarray(eta_c)[..., inverse]
        if fam.zeros_kind is not None:
            eta_z = np.asarray(eta_z)[..., inverse]
        return fam.random(rng, eta_c, eta_z, log_alpha, size=size)

    return random


@dataclass
class Likelihood:
    """What a built model (``BuiltModel.likelihood``) keeps: its family, its patterns (the
    sampler choice and :func:`bayeszi.engine.pointwise.pattern_log_likelihood` read them) and
    its linear predictors as PyTensor tensors of the free variables (tests evaluate the
    model's own density with them)."""

    family: str
    patterns: Patterns
    eta_c: Any
    eta_z: Any
    log_alpha: Any
