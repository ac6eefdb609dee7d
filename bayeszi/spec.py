"""A frozen, validated description of one candidate model.

A :class:`ModelSpec` is pure data (no pandas, no PyMC): the two formulas, the family, the
exposure or offset column, the grouping columns and the sampler settings. It can be written
to and read from a plain dictionary (and so JSON or TOML).

Example
-------
>>> from bayeszi.spec import ModelSpec
>>> s = ModelSpec(counts="y ~ x", zeros="~ 1", family="zip", exposure="hours")
>>> s.response
'y'
>>> ModelSpec.from_dict(s.to_dict()) == s
True
"""

from __future__ import annotations

import dataclasses
import re
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field
from typing import Any

from bayeszi.errors import BayesziError
from bayeszi.families import get_family

PARTS = ("counts", "zeros")


@dataclass(frozen=True)
class SamplerSettings:
    """NUTS settings. ``cores=None`` uses as many cores as chains (up to the machine's)."""

    draws: int = 1000
    tune: int = 1000
    chains: int = 2
    cores: int | None = None
    target_accept: float = 0.9
    seed: int | None = None
    progressbar: bool | None = None
    sampler: str = "auto"

    def __post_init__(self) -> None:
        for name in ("draws", "tune", "chains"):
            value = getattr(self, name)
            if not isinstance(value, int) or isinstance(value, bool) or value < 1:
                raise BayesziError(
                    f"setting '{name}' must be a positive whole number, got {value!r}; "
                    f"for example {name}=1000"
                )
        if self.cores is not None and (not isinstance(self.cores, int) or self.cores < 1):
            raise BayesziError(f"setting 'cores' must be a positive whole number or None, got "
                               f"{self.cores!r}")
        ta = self.target_accept
        if not isinstance(ta, (int, float)) or not 0.5 <= float(ta) < 1.0:
            raise BayesziError(
                f"setting 'target_accept' must lie in [0.5, 1), got {ta!r}; 0.9 is the default, "
                "raise it toward 0.99 if there are divergences"
            )
        if self.seed is not None and (not isinstance(self.seed, int) or self.seed < 0):
            raise BayesziError(f"setting 'seed' must be a non-negative whole number, got "
                               f"{self.seed!r}")
        if self.sampler not in ("auto", "pymc", "nutpie"):
            raise BayesziError(
                f"setting 'sampler' must be 'auto', 'pymc' or 'nutpie', got {self.sampler!r}"
            )


def _plain_priors(value: Any) -> Any:
    """Priors in plain (JSON) form: ``Prior`` objects become ``[dist, a, b, ...]`` lists."""
    if hasattr(value, "to_list"):
        return value.to_list()
    if isinstance(value, Mapping):
        return {str(k): _plain_priors(v) for k, v in value.items()}
    if isinstance(value, (list, tuple)):
        return [_plain_priors(v) for v in value]
    return value


@dataclass(frozen=True)
class ModelSpec:
    """One candidate model.

    Parameters
    ----------
    counts : formula for the count part, with the response on the left (``"y ~ a + b"``).
    zeros : formula for the zeros part, no response (``"~ c"``). Ignored by ``poisson`` and
        ``negbin``. In zero-inflated families it models P(extra zero); in hurdle families
        P(Y = 0).
    family : one of ``poisson``, ``negbin``, ``zip``, ``zinb``, ``hurdle-poisson``,
        ``hurdle-negbin``.
    exposure : column of effort; enters the counts part as ``log(exposure)``.
    offset : column holding a ready-made log offset for the counts part.
    groups : grouping columns giving partially pooled intercepts in both parts.
    varying : per part, terms whose slopes vary by group, e.g. ``{"counts": ("depth",)}``.
    nested : maps a grouping column to the column it is nested in, e.g.
        ``{"reach": "river"}`` when reach labels repeat across rivers.
    correlated : give each group correlated counts and zeros intercepts (LKJ prior).
    priors : prior overrides; see :mod:`bayeszi.priors`.
    """

    counts: str
    zeros: str = "~ 1"
    family: str = "zinb"
    exposure: str | None = None
    offset: str | None = None
    groups: tuple[str, ...] = ()
    varying: Mapping[str, tuple[str, ...]] = field(default_factory=dict)
    nested: Mapping[str, str] = field(default_factory=dict)
    correlated: bool = False
    priors: Mapping[str, Any] = field(default_factory=dict)
    sampler: SamplerSettings = field(default_factory=SamplerSettings)

    def __post_init__(self) -> None:
        fam = get_family(self.family)  # raises with a suggestion
        object.__setattr__(self, "family", fam.name)
        if not isinstance(self.counts, str) or "~" not in self.counts:
            raise BayesziError(
                f"counts formula must look like 'response ~ predictors', got {self.counts!r}"
            )
        lhs, rhs = self.counts.split("~", 1)
        if not lhs.strip():
            raise BayesziError(
                f"counts formula {self.counts!r} has no response on the left of '~'; "
                "write e.g. 'crayfish ~ water_temp'"
            )
        if not rhs.strip():
            raise BayesziError(f"counts formula {self.counts!r} has nothing right of '~'; "
                               "use '~ 1' for an intercept only")
        zeros = "~ 1" if self.zeros is None else self.zeros
        if not isinstance(zeros, str):
            raise BayesziError(f"zeros formula must be a string like '~ barrier', got {zeros!r}")
        zeros = zeros.strip()
        if not zeros.startswith("~"):
            if "~" in zeros:
                raise BayesziError(
                    f"zeros formula {zeros!r} has a response on the left of '~'; the zeros part "
                    "shares the counts response, so write only the right side, e.g. '~ barrier'"
                )
            zeros = "~ " + zeros
        if not zeros[1:].strip():
            zeros = "~ 1"
        object.__setattr__(self, "zeros", zeros)
        groups = self.groups
        if isinstance(groups, str):
            groups = (groups,)
        groups = tuple(groups or ())
        for g in groups:
            if not isinstance(g, str) or not g:
                raise BayesziError(f"groups must be column names, got {g!r}")
        if len(set(groups)) != len(groups):
            raise BayesziError(f"groups lists a column twice: {list(groups)}")
        object.__setattr__(self, "groups", groups)
        varying = {}
        for part, terms in dict(self.varying or {}).items():
            if part not in PARTS:
                raise BayesziError(
                    f"varying has unknown part {part!r}; use 'counts' or 'zeros'"
                )
            if isinstance(terms, str):
                terms = (terms,)
            varying[part] = tuple(terms)
        if varying and not groups:
            raise BayesziError("varying slopes need groups: pass groups='your_site_column'")
        object.__setattr__(self, "varying", varying)
        nested = dict(self.nested or {})
        for inner, outer in nested.items():
            if inner not in groups:
                raise BayesziError(
                    f"nested names {inner!r}, which is not among groups {list(groups)}"
                )
            if not isinstance(outer, str):
                raise BayesziError(f"nested[{inner!r}] must be a column name, got {outer!r}")
        object.__setattr__(self, "nested", nested)
        if self.correlated and not groups:
            raise BayesziError("correlated=True needs groups: pass groups='your_site_column'")
        if self.exposure is not None and self.offset is not None:
            raise BayesziError(
                "give either exposure (effort column, logged for you) or offset (a ready-made "
                "log offset column), not both"
            )
        object.__setattr__(self, "priors", _plain_priors(self.priors or {}))
        if isinstance(self.sampler, Mapping):
            object.__setattr__(self, "sampler", SamplerSettings(**self.sampler))

    # ------------------------------------------------------------------ properties
    @property
    def response(self) -> str:
        """The response column named on the left of the counts formula."""
        lhs = self.counts.split("~", 1)[0].strip()
        return re.sub(r"^`(.*)`$", r"\1", lhs)

    @property
    def counts_rhs(self) -> str:
        """The right side of the counts formula."""
        return self.counts.split("~", 1)[1].strip()

    @property
    def zeros_rhs(self) -> str:
        """The right side of the zeros formula."""
        return self.zeros.split("~", 1)[1].strip()

    @property
    def has_zeros_part(self) -> bool:
        """Whether the family has a zeros part at all."""
        return get_family(self.family).zeros_kind is not None

    # ------------------------------------------------------------------ (de)serialise
    def to_dict(self) -> dict[str, Any]:
        """A plain dictionary (JSON/TOML-friendly)."""
        d = dataclasses.asdict(self)
        d["groups"] = list(self.groups)
        d["varying"] = {k: list(v) for k, v in self.varying.items()}
        d["nested"] = dict(self.nested)
        return d

    @classmethod
    def from_dict(cls, d: Mapping[str, Any]) -> ModelSpec:
        """Inverse of :meth:`to_dict`; unknown keys are a :class:`BayesziError`."""
        known = {f.name for f in dataclasses.fields(cls)}
        unknown = sorted(set(d) - known)
        if unknown:
            raise BayesziError(f"unknown model setting(s) {unknown}; known: {sorted(known)}")
        d = dict(d)
        if "sampler" in d and isinstance(d["sampler"], Mapping):
            sk = {f.name for f in dataclasses.fields(SamplerSettings)}
            bad = sorted(set(d["sampler"]) - sk)
            if bad:
                raise BayesziError(f"unknown sampler setting(s) {bad}; known: {sorted(sk)}")
            d["sampler"] = SamplerSettings(**d["sampler"])
        if "groups" in d and isinstance(d["groups"], Sequence) and not isinstance(d["groups"], str):
            d["groups"] = tuple(d["groups"])
        return cls(**d)
