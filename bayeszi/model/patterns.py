"""Rows pooled into weighted patterns, and the fast log density the model uses over them.

Two records that agree in every model input (both design matrices, the log offset, every
group code) and in the count have the same log density, so the sampler needs it once per
*pattern*, times the number of records in the pattern. With categorical covariates and
whole-number effort this shrinks 200,000 records to a few thousand patterns; with
continuous covariates almost every record is its own pattern and nothing is pooled.

Either way the patterns are ordered with the zero counts first. The log density is then
split by a fixed slice instead of a per-element switch: zero counts need only log P(0) (no
gamma functions), positive counts need the count part, and the one gamma-function term that
depends on the dispersion, ``lgamma(y + theta) - lgamma(theta)``, is computed once per
distinct count value and looked up. With ``s = log1p(alpha mu)`` the NB pieces are
``log f(0) = -s / alpha`` and ``log f(y) = D(y, theta) - lgamma(y + 1) + y (eta_c - s) - s /
alpha`` (``D`` as in :mod:`bayeszi.families`), so each record costs one ``log1p(exp(.))``
for the counts part and one for the zeros part. The values agree with
:meth:`~bayeszi.families.Family.logp` to rounding (tests/test_performance.py), for
``alpha * mu`` above about 1e-300.

The model's density is the weighted sum over patterns, so a gradient costs O(patterns).
The pointwise log-likelihood that LOO needs is computed after sampling by
:func:`pattern_log_likelihood`, once per pattern and draw; :mod:`bayeszi.engine.loglik` stores it
per record (or, for very large fits, per pattern with each record's pattern) and gives LOO
one value per original record either way.

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
from scipy import special as sc

from bayeszi.families import core as F
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


def _logaddexp(a: Any, b: Any) -> Any:
    """log(exp(a) + exp(b)) with one exp and one log1p: max(a, b) + log1p(exp(-|a - b|))."""
    pt = F._pt()
    return pt.maximum(a, b) + pt.softplus(-pt.abs(a - b))


def _split(x: Any, nz: int) -> tuple[Any, Any]:
    """(zero-count part, positive part) of a per-pattern tensor; length-1 tensors are shared."""
    if x.type.ndim == 0 or x.type.shape[-1] == 1:
        return x, x
    return x[..., :nz], x[..., nz:]


def pattern_logp(family: str, patterns: Patterns, weighted: bool = True
                 ) -> Callable[..., Any]:
    """The log density of the observed counts, one value per pattern, for ``pm.CustomDist``.

    The returned ``logp(value, eta_c, eta_z, log_alpha)`` takes ``eta_c`` and ``eta_z`` with
    one entry per pattern. With ``weighted=True`` (the model's density) each pattern's value
    is multiplied by its number of records, so the values sum to the log-likelihood of all
    records at O(patterns) cost; with ``weighted=False`` it is the log density of one record
    of each pattern (:func:`pattern_log_likelihood` computes it per pattern). The observed counts
    are built in (``value`` is not read): PyMC calls the density of an observed variable only
    at its observed value.

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
    fam = F.get_family(family)
    pt = F._pt()
    nb = fam.has_dispersion
    nz = patterns.n_zero
    P = patterns.n_patterns
    y_pos = patterns.design.y[nz:]
    y_vals, y_index = np.unique(y_pos, return_inverse=True)
    y_pos_f = y_pos.astype(np.float64)
    log_y_fact = sc.gammaln(y_pos_f + 1.0)  # a constant: computed once, here
    weights = patterns.weights.astype(np.float64)
    use_weights = weighted and bool(np.any(weights != 1.0))

    def logp(value: Any, eta_c: Any, eta_z: Any, log_alpha: Any) -> Any:
        y1 = pt.as_tensor_variable(y_pos_f)
        lyf = pt.as_tensor_variable(log_y_fact)
        eta_c = pt.as_tensor_variable(eta_c)
        la = pt.as_tensor_variable(log_alpha) if nb else None
        ec0, ec1 = _split(eta_c, nz)
        if fam.zeros_kind is not None:
            ez0, ez1 = _split(pt.as_tensor_variable(eta_z), nz)
        if nb:
            theta = pt.exp(-la)  # 1 / alpha: one number, not one per row
        pieces = []
        # --- zero counts: log P(0), no gamma functions
        if nz:
            if fam.zeros_kind == "hurdle":
                lp0 = -pt.softplus(-ez0) + pt.zeros_like(ec0)  # log p, one per pattern
            else:
                # log f(0) = -log1p(alpha mu) / alpha (NB), -mu (Poisson)
                lp0 = -theta * pt.softplus(ec0 + la) if nb else -pt.exp(ec0)
                if fam.zeros_kind == "inflation":
                    # log(p + (1 - p) f0) = log(1 - p) + log(exp(eta_z) + f0)
                    lp0 = _logaddexp(ez0, lp0) - pt.softplus(ez0)
            pieces.append(lp0)
        # --- positive counts: log f(y); the dispersion's gamma term once per distinct y
        if nz < P:
            if nb:
                # log f(y) = D(y, theta) - lgamma(y + 1) + y (eta_c - log1p(alpha mu))
                #            - log1p(alpha mu) / alpha     (D as in bayeszi.families)
                y_tab = pt.as_tensor_variable(y_vals.astype(np.float64))
                s1 = pt.softplus(ec1 + la)
                lp1 = (y1 * (ec1 - s1) - theta * s1 - lyf
                       + F._pt_lgamma_ratio(y_tab, la)[y_index])
            else:
                lp1 = y1 * ec1 - pt.exp(ec1) - lyf
            if fam.zeros_kind is not None:
                lp1 = lp1 - pt.softplus(ez1)  # log(1 - p)
            if fam.zeros_kind == "hurdle":
                lp1 = lp1 - F._pt_count_log1m_f0(ec1, la, nb)[1]  # / (1 - f(0))
            pieces.append(lp1)
        lp = pieces[0] if len(pieces) == 1 else pt.concatenate(pieces, axis=-1)
        return lp * pt.as_tensor_variable(weights) if use_weights else lp

    return logp


def pattern_random(family: str, patterns: Patterns) -> Callable[..., np.ndarray]:
    """Draws for ``pm.CustomDist``: pattern-level predictors, one count per original record."""
    fam = F.get_family(family)
    inverse = patterns.inverse

    def random(eta_c, eta_z, log_alpha, rng=None, size=None):
        eta_c = np.asarray(eta_c)[..., inverse]
        if fam.zeros_kind is not None:
            eta_z = np.asarray(eta_z)[..., inverse]
        return fam.random(rng, eta_c, eta_z, log_alpha, size=size)

    return random


@dataclass
class Likelihood:
    """What a built model keeps as ``model.bayeszi_likelihood``: its family, its patterns (the
    sampler choice and :func:`pattern_log_likelihood` read them) and its linear predictors as
    PyTensor tensors of the free variables (tests evaluate the model's own density with them
    and compare it with :func:`pattern_log_likelihood`)."""

    family: str
    patterns: Patterns
    eta_c: Any
    eta_z: Any
    log_alpha: Any
