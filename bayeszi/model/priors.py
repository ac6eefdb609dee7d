"""Default priors and user overrides, in one place, with the reason for each default.

Coefficient priors are stated on the user's scale (per unit of the predictor as written in
the formula). Inside, bayeszi centres each predictor and divides continuous ones by two
standard deviations (Gelman, Jakulin, Pittau & Su 2008, Ann. Appl. Stat.); a default prior
is set on that internal scale and a user prior is carried there exactly (a coefficient
``beta`` per unit is ``beta * scale`` per internal unit). Intercept priors refer to the
linear predictor at the average of the predictors.

Overrides name the part, then the term (by its label as tables show it, e.g.
``"substrate: gravel (vs cobble)"``, or by the formula's own term name), and give a prior
distribution of :mod:`bayeszi.model.distributions` (``bayeszi.priors``) or its mapping form::

    priors={"counts": {"depth": normal(mean=0, sd=0.3)},
            "zeros": {"Intercept": {"distribution": "normal", "mean": 2, "sd": 1}},
            "dispersion": exponential(rate=5),
            "group_sd": {"counts": half_normal(sd=0.5)}}

Example
-------
>>> import pandas as pd
>>> from bayeszi.base.spec import ModelSpec
>>> from bayeszi.model.design import build_design
>>> df = pd.DataFrame({"y": [0, 1, 3, 0, 2, 5], "s": list("abcabc")})
>>> d = build_design(df, ModelSpec(counts="y ~ s", family="poisson"))
>>> ps = resolve(d, {"counts": {"s: b (vs a)": normal(mean=0.5, sd=0.2)}})
>>> [r["prior"] for r in ps.table() if r["term"] == "s: b (vs a)"]
['Normal, mean 0.5, sd 0.2']
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass
from typing import Any

import numpy as np

from bayeszi.base.errors import BayesziError
from bayeszi.base.names import ALL_GROUPS_SD_LABEL, zero_mechanism
from bayeszi.model.distributions import (
    PARAMETERS,
    REAL_LINE,
    Prior,  # noqa: F401  (0.1's import path: says what to write)
    PriorDistribution,
    as_distribution,
    exponential,
    half_normal,
    normal,
)

POSITIVE = tuple(d for d in PARAMETERS if d not in REAL_LINE)


# Defaults, each with its reason (mirrored in docs/priors.md).
COUNTS_COEF_SD = 1.0
"""Normal, mean 0, sd 1, per 2 sd of a continuous input (per unit of a binary one): a rate ratio
between 1/7 and 7 is 95% likely for such a change, wide for field data yet it keeps the prior
predictive from producing astronomically large counts when several terms add up."""
ZEROS_COEF_SD = 1.5
"""Normal, mean 0, sd 1.5, on the logit scale per 2 sd: odds ratios up to about 20 remain plausible,
while the prior does not pile mass at probabilities of exactly 0 or 1 (a wider prior on the
logit scale does, which also makes separated data sample badly)."""
INTERCEPT_SD = 1.5
"""Intercepts are centred on the data (log mean rate, or logit of the zero share) with sd 1.5:
the data decide, the prior only rules out values many orders of magnitude away."""
DISPERSION_RATE = 3.0
"""sqrt(alpha): Exponential, rate 3: the penalised-complexity idea (Simpson et al. 2017,
Stat. Sci.) puts an exponential prior on the distance from the Poisson, which for the
negative binomial grows like sqrt(alpha) near alpha = 0 (from memory of that paper's NB
example); rate 3 gives P(alpha > 1) = exp(-3) = 0.05, shrinking toward the Poisson unless the
data ask for overdispersion."""
GROUP_SD = {"counts": 1.0, "zeros": 1.5}
"""Half-normal, sd 1, for the sd of group effects on the log-rate scale (groups differing by a
factor of e^2 = 7 between typical high and low groups are unusual but allowed); half-normal,
sd 1.5, on the logit scale, for the same reason as the zeros coefficients."""
LKJ_ETA = 2.0
"""LKJ(2) on the correlation of a group's counts and zeros intercepts: mildly favours small
correlations, so the data must show a correlation before it is reported."""


def _logit(p: float) -> float:
    p = min(max(p, 0.01), 0.99)
    return float(np.log(p / (1 - p)))


def intercept_centres(y: np.ndarray, log_offset: np.ndarray, zeros_kind: str | None
                      ) -> tuple[float, float]:
    """Data-based centres of the counts and zeros intercept priors.

    Counts: log of the mean rate among non-zero records' scale, using all records for the
    rate (``sum y / sum exposure``), raised by the share of non-zeros when a zeros part can
    absorb the zeros. Zeros: for hurdles the logit of the observed zero share; for zero
    inflation the logit of the zero share in excess of a Poisson with the observed mean.
    """
    expo = np.exp(log_offset)
    rate = max(float(y.sum()) / float(expo.sum()), 1e-3)
    zero_share = float(np.mean(y == 0))
    if zeros_kind is None:
        return float(np.log(rate)), 0.0
    if zeros_kind == "hurdle":
        return float(np.log(rate / max(1 - zero_share, 0.01))), _logit(zero_share)
    ybar = float(y.mean())
    p0 = float(np.exp(-ybar))
    excess = (zero_share - p0) / max(1 - p0, 1e-3)
    return float(np.log(rate / max(1 - max(excess, 0.0), 0.05))), _logit(max(excess, 0.05))


@dataclass(frozen=True)
class PriorSet:
    """The resolved priors of one model, per part and term, on the internal scale."""

    counts: dict[str, PriorDistribution]
    zeros: dict[str, PriorDistribution]
    dispersion: PriorDistribution
    group_sd: dict[str, PriorDistribution]
    lkj_eta: float
    user_scale: dict[str, dict[str, PriorDistribution]]
    #: per part, each term's readable label (what the table shows)
    labels: dict[str, dict[str, str]]

    def table(self) -> list[dict[str, Any]]:
        """Rows (part, term label, prior on the user's scale) for reports."""
        rows = []
        for part in ("counts", "zeros"):
            shown = self.labels.get(part, {})
            for term, p in self.user_scale.get(part, {}).items():
                rows.append({"part": part, "term": shown.get(term, term), "prior": str(p)})
        rows.append({"part": "counts", "term": "sqrt(dispersion)", "prior": str(self.dispersion)})
        for part, p in self.group_sd.items():
            rows.append({"part": part, "term": ALL_GROUPS_SD_LABEL, "prior": str(p)})
        return rows


def resolve(design: Any, overrides: Mapping[str, Any] | None) -> PriorSet:
    """Resolve defaults and ``overrides`` for a :class:`~bayeszi.model.design.Design`."""
    if overrides is not None and not isinstance(overrides, Mapping):
        raise BayesziError("priors must be a dict such as {'counts': {'depth': {'distribution': "
                           f"'normal', 'mean': 0, 'sd': 0.5}}}}, got {overrides!r}")
    overrides = dict(overrides or {})
    unknown = sorted(set(overrides) - {"counts", "zeros", "dispersion", "group_sd", "lkj_eta"})
    if unknown:
        raise BayesziError(
            f"unknown prior key(s) {unknown}; use 'counts', 'zeros', 'dispersion', 'group_sd' "
            "or 'lkj_eta'"
        )
    c0, z0 = intercept_centres(design.y, design.log_offset,
                               zero_mechanism(design.spec.family))
    parts: dict[str, dict[str, PriorDistribution]] = {}
    user: dict[str, dict[str, PriorDistribution]] = {}
    labels: dict[str, dict[str, str]] = {}
    for part, pdes, centre, sd in (("counts", design.counts, c0, COUNTS_COEF_SD),
                                   ("zeros", design.zeros, z0, ZEROS_COEF_SD)):
        if pdes is None:
            if overrides.get(part):
                raise BayesziError(f"priors were given for the {part} part, but family "
                                   f"{design.spec.family!r} has none")
            continue
        parts[part], user[part] = _part_priors(part, pdes, overrides.get(part) or {}, centre,
                                               sd)
        labels[part] = dict(zip(pdes.terms, pdes.labels, strict=True))
    return PriorSet(parts.get("counts", {}), parts.get("zeros", {}),
                    _dispersion_prior(overrides), _group_sd_priors(overrides),
                    _lkj_eta(overrides), user, labels)


def _given_by_term(part: str, pdes: Any, given: Any) -> dict[str, Any]:
    """The user's priors of one part keyed by term name; keys may be labels or term names."""
    if not isinstance(given, Mapping):
        raise BayesziError(f"priors[{part!r}] must map terms to priors, got {given!r}")
    out: dict[str, Any] = {}
    for key, value in given.items():
        term = pdes.term_of(key) if isinstance(key, str) else None
        if term is None:
            raise BayesziError(f"priors[{part!r}] names unknown term {key!r}; terms of the "
                               f"{part} part: {pdes.labels}")
        if term in out:
            raise BayesziError(f"priors[{part!r}] gives term {pdes.label(term)!r} two priors "
                               f"(under {term!r} and under its label); keep one")
        out[term] = value
    return out


def _part_priors(part: str, pdes: Any, given: Any, centre: float, sd: float
                 ) -> tuple[dict[str, PriorDistribution], dict[str, PriorDistribution]]:
    """(internal-scale, user-scale) coefficient priors of one part, overrides applied."""
    by_term = _given_by_term(part, pdes, given)
    internal: dict[str, PriorDistribution] = {}
    shown: dict[str, PriorDistribution] = {}
    for j, term in enumerate(pdes.terms):
        if term in by_term:
            where = f"{part} term {pdes.label(term)!r}"
            p = as_distribution(by_term[term], where)
            if not p.real_line:
                raise BayesziError(f"prior for {where} must be one of {list(REAL_LINE)} (a "
                                   f"coefficient can be negative), got {p.distribution!r}")
            shown[term] = p
            internal[term] = p if j == pdes.intercept else p.scaled(pdes.scale[j])
        elif j == pdes.intercept:
            internal[term] = shown[term] = normal(mean=centre, sd=INTERCEPT_SD)
        else:
            internal[term] = normal(mean=0.0, sd=sd)
            shown[term] = internal[term].scaled(1.0 / pdes.scale[j])
    return internal, shown


def _dispersion_prior(overrides: Mapping[str, Any]) -> PriorDistribution:
    """The prior on sqrt(alpha), positive-valued."""
    disp = as_distribution(overrides.get("dispersion", exponential(rate=DISPERSION_RATE)),
                           "the dispersion")
    if disp.real_line:
        raise BayesziError("the dispersion prior (on sqrt(alpha)) must be positive-valued: "
                           f"one of {list(POSITIVE)}")
    return disp


def _group_sd_priors(overrides: Mapping[str, Any]) -> dict[str, PriorDistribution]:
    """The priors on the group sds of each part, positive-valued."""
    gsd_in = overrides.get("group_sd") or {}
    if not isinstance(gsd_in, Mapping):
        raise BayesziError("priors['group_sd'] must map 'counts'/'zeros' to priors, e.g. "
                           "{'counts': {'distribution': 'half_normal', 'sd': 0.5}}")
    gsd = {}
    for part in ("counts", "zeros"):
        p = as_distribution(gsd_in.get(part, half_normal(sd=GROUP_SD[part])),
                            f"the {part} group sd")
        if p.real_line:
            raise BayesziError(f"the {part} group sd prior must be one of {list(POSITIVE)}")
        gsd[part] = p
    return gsd


def _lkj_eta(overrides: Mapping[str, Any]) -> float:
    """The LKJ shape of correlated intercepts, a positive number."""
    eta = overrides.get("lkj_eta", LKJ_ETA)
    if isinstance(eta, (bool, np.bool_)) or not isinstance(eta, (int, float, np.integer,
                                                                  np.floating)) \
            or not np.isfinite(eta) or not eta > 0:
        raise BayesziError(f"priors['lkj_eta'] must be a positive number (e.g. 2, the default), "
                           f"got {eta!r}")
    return float(eta)
