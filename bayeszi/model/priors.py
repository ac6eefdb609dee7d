"""Default priors and user overrides, in one place, with the reason for each default.

Coefficient priors are stated on the user's scale (per unit of the predictor as written in
the formula). Inside, bayeszi centres each predictor and divides continuous ones by two
standard deviations (Gelman, Jakulin, Pittau & Su 2008, Ann. Appl. Stat.); a default prior
is set on that internal scale and a user prior is carried there exactly (a coefficient
``beta`` per unit is ``beta * scale`` per internal unit). Intercept priors refer to the
linear predictor at the average of the predictors.

Overrides: ``priors={"counts": {"depth": Prior("normal", 0, 0.3)},
"zeros": {"Intercept": Prior("normal", 2, 1)}, "dispersion": Prior("exponential", 5),
"group_sd": {"counts": Prior("halfnormal", 0.5)}}``.

Example
-------
>>> from bayeszi.model.priors import Prior
>>> Prior("normal", 0, 0.5)
Prior(dist='normal', a=0.0, b=0.5, c=None)
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass
from typing import Any

import numpy as np

from bayeszi.base.errors import BayesziError
from bayeszi.base.names import zero_mechanism

COEF_DISTS = {"normal": 2, "student_t": 3, "laplace": 2}
SCALE_DISTS = {"halfnormal": 1, "exponential": 1, "halfstudent_t": 2}


@dataclass(frozen=True)
class Prior:
    """A prior distribution. ``normal(mu, sigma)``, ``student_t(mu, sigma, nu)``,
    ``laplace(mu, b)`` for coefficients; ``halfnormal(sigma)``, ``exponential(rate)``,
    ``halfstudent_t(sigma, nu)`` for standard deviations and the dispersion."""

    dist: str
    a: float = 0.0
    b: float | None = None
    c: float | None = None

    def __post_init__(self) -> None:
        known = {**COEF_DISTS, **SCALE_DISTS}
        if not isinstance(self.dist, str) or self.dist not in known:
            raise BayesziError(f"unknown prior {self.dist!r}; use one of {sorted(known)}")
        args = [v for v in (self.a, self.b, self.c) if v is not None]
        for v in args:
            if isinstance(v, (bool, np.bool_)) or not isinstance(v, (int, float, np.integer,
                                                                       np.floating)):
                raise BayesziError(f"prior {self.dist!r} takes numbers, got {v!r} among "
                                   f"{args}; e.g. Prior('normal', 0, 1)")
        if len(args) != known[self.dist]:
            raise BayesziError(
                f"prior {self.dist!r} takes {known[self.dist]} number(s), got {len(args)}: {args}"
            )
        for v in args:
            if not np.isfinite(float(v)):
                raise BayesziError(f"prior {self.dist!r} has a non-finite parameter {v!r}")
        object.__setattr__(self, "a", float(self.a))
        object.__setattr__(self, "b", None if self.b is None else float(self.b))
        object.__setattr__(self, "c", None if self.c is None else float(self.c))
        positive = args[1:] if self.dist in COEF_DISTS else args
        if any(float(v) <= 0 for v in positive):
            raise BayesziError(f"prior {self.dist!r} needs positive scale parameters, got {args}")

    @property
    def is_coef(self) -> bool:
        """Whether this prior suits a coefficient (real line)."""
        return self.dist in COEF_DISTS

    def scaled(self, factor: float, shift: float = 0.0) -> Prior:
        """The same prior for ``factor * beta + shift`` (location-scale families only)."""
        if not self.is_coef:
            raise BayesziError("only coefficient priors can be rescaled")
        return Prior(self.dist, self.a * factor + shift, self.b * abs(factor), self.c)

    def to_list(self) -> list[Any]:
        """JSON-friendly form ``[dist, a, b, c]`` without trailing ``None``."""
        out = [self.dist, self.a, self.b, self.c]
        while out[-1] is None:
            out.pop()
        return out


def as_prior(value: Any, where: str) -> Prior:
    """Accept a :class:`Prior`, or a list/tuple ``["normal", 0, 1]``, naming ``where`` on error."""
    if isinstance(value, Prior):
        return value
    if isinstance(value, (list, tuple)) and value and isinstance(value[0], str):
        if len(value) > 4:
            raise BayesziError(f"prior for {where} has too many numbers: {list(value)}; e.g. "
                               "['normal', 0, 1] or ['student_t', 0, 1, 3]")
        try:
            return Prior(*value)
        except BayesziError as err:
            raise BayesziError(f"prior for {where}: {err}") from None
    raise BayesziError(
        f"prior for {where} must be a Prior or a list like ['normal', 0, 1], got {value!r}"
    )


# Defaults, each with its reason (mirrored in docs/priors.md).
COUNTS_COEF_SD = 1.0
"""Normal(0, 1) per 2 sd of a continuous input (per unit of a binary one): a rate ratio
between 1/7 and 7 is 95% likely for such a change, wide for field data yet it keeps the prior
predictive from producing astronomically large counts when several terms add up."""
ZEROS_COEF_SD = 1.5
"""Normal(0, 1.5) on the logit scale per 2 sd: odds ratios up to about 20 remain plausible,
while the prior does not pile mass at probabilities of exactly 0 or 1 (a wider prior on the
logit scale does, which also makes separated data sample badly)."""
INTERCEPT_SD = 1.5
"""Intercepts are centred on the data (log mean rate, or logit of the zero share) with sd 1.5:
the data decide, the prior only rules out values many orders of magnitude away."""
DISPERSION_RATE = 3.0
"""sqrt(alpha) ~ Exponential(3): the penalised-complexity idea (Simpson et al. 2017,
Stat. Sci.) puts an exponential prior on the distance from the Poisson, which for the
negative binomial grows like sqrt(alpha) near alpha = 0 (from memory of that paper's NB
example); rate 3 gives P(alpha > 1) = exp(-3) = 0.05, shrinking toward the Poisson unless the
data ask for overdispersion."""
GROUP_SD = {"counts": 1.0, "zeros": 1.5}
"""Half-normal(1) for the sd of group effects on the log-rate scale (groups differing by a
factor of e^2 = 7 between typical high and low groups are unusual but allowed); half-normal
(1.5) on the logit scale, for the same reason as the zeros coefficients."""
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

    counts: dict[str, Prior]
    zeros: dict[str, Prior]
    dispersion: Prior
    group_sd: dict[str, Prior]
    lkj_eta: float
    user_scale: dict[str, dict[str, Prior]]

    def table(self) -> list[dict[str, Any]]:
        """Rows (part, term, prior on the user's scale) for reports."""
        rows = []
        for part in ("counts", "zeros"):
            for term, p in self.user_scale.get(part, {}).items():
                rows.append({"part": part, "term": term, "prior": _fmt(p)})
        rows.append({"part": "counts", "term": "sqrt(dispersion)", "prior": _fmt(self.dispersion)})
        for part, p in self.group_sd.items():
            rows.append({"part": part, "term": "group sd", "prior": _fmt(p)})
        return rows


def _fmt(p: Prior) -> str:
    args = ", ".join(f"{v:.3g}" for v in (p.a, p.b, p.c) if v is not None)
    return f"{p.dist}({args})"


def resolve(design: Any, overrides: Mapping[str, Any] | None) -> PriorSet:
    """Resolve defaults and ``overrides`` for a :class:`~bayeszi.model.design.Design`."""
    if overrides is not None and not isinstance(overrides, Mapping):
        raise BayesziError(f"priors must be a dict such as {{'counts': {{'depth': ['normal', 0, "
                           f"0.5]}}}}, got {overrides!r}")
    overrides = dict(overrides or {})
    unknown = sorted(set(overrides) - {"counts", "zeros", "dispersion", "group_sd", "lkj_eta"})
    if unknown:
        raise BayesziError(
            f"unknown prior key(s) {unknown}; use 'counts', 'zeros', 'dispersion', 'group_sd' "
            "or 'lkj_eta'"
        )
    c0, z0 = intercept_centres(design.y, design.log_offset,
                               zero_mechanism(design.spec.family))
    parts: dict[str, dict[str, Prior]] = {}
    user: dict[str, dict[str, Prior]] = {}
    for part, pdes, centre, sd in (("counts", design.counts, c0, COUNTS_COEF_SD),
                                   ("zeros", design.zeros, z0, ZEROS_COEF_SD)):
        if pdes is None:
            if overrides.get(part):
                raise BayesziError(f"priors were given for the {part} part, but family "
                                   f"{design.spec.family!r} has none")
            continue
        parts[part], user[part] = _part_priors(part, pdes, overrides.get(part) or {}, centre,
                                               sd)
    return PriorSet(parts.get("counts", {}), parts.get("zeros", {}),
                    _dispersion_prior(overrides), _group_sd_priors(overrides),
                    _lkj_eta(overrides), user)


def _part_priors(part: str, pdes: Any, given: Any, centre: float, sd: float
                 ) -> tuple[dict[str, Prior], dict[str, Prior]]:
    """(internal-scale, user-scale) coefficient priors of one part, overrides applied."""
    if not isinstance(given, Mapping):
        raise BayesziError(f"priors[{part!r}] must map term names to priors, got {given!r}")
    bad = sorted(set(given) - set(pdes.terms))
    if bad:
        raise BayesziError(f"priors[{part!r}] names unknown term(s) {bad}; terms of the "
                           f"{part} part: {pdes.terms}")
    internal: dict[str, Prior] = {}
    shown: dict[str, Prior] = {}
    for j, term in enumerate(pdes.terms):
        if term in given:
            p = as_prior(given[term], f"{part} term {term!r}")
            if not p.is_coef:
                raise BayesziError(f"prior for {part} term {term!r} must be one of "
                                   f"{sorted(COEF_DISTS)}, got {p.dist!r}")
            shown[term] = p
            internal[term] = p if j == pdes.intercept else p.scaled(pdes.scale[j])
        elif j == pdes.intercept:
            internal[term] = shown[term] = Prior("normal", centre, INTERCEPT_SD)
        else:
            internal[term] = Prior("normal", 0.0, sd)
            shown[term] = internal[term].scaled(1.0 / pdes.scale[j])
    return internal, shown


def _dispersion_prior(overrides: Mapping[str, Any]) -> Prior:
    """The prior on sqrt(alpha), positive-valued."""
    disp = as_prior(overrides.get("dispersion", Prior("exponential", DISPERSION_RATE)),
                    "dispersion")
    if disp.is_coef:
        raise BayesziError("the dispersion prior (on sqrt(alpha)) must be positive-valued: "
                           f"one of {sorted(SCALE_DISTS)}")
    return disp


def _group_sd_priors(overrides: Mapping[str, Any]) -> dict[str, Prior]:
    """The priors on the group sds of each part, positive-valued."""
    gsd_in = overrides.get("group_sd") or {}
    if not isinstance(gsd_in, Mapping):
        raise BayesziError("priors['group_sd'] must map 'counts'/'zeros' to priors")
    gsd = {}
    for part in ("counts", "zeros"):
        p = as_prior(gsd_in.get(part, Prior("halfnormal", GROUP_SD[part])), f"{part} group sd")
        if p.is_coef:
            raise BayesziError(f"the {part} group sd prior must be one of {sorted(SCALE_DISTS)}")
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
