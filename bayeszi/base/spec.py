"""A frozen, validated description of one candidate model.

A :class:`ModelSpec` is pure data (no pandas, no PyMC): the two formulas, the family, the
exposure or offset column, the grouping columns and the sampler settings. It can be written
to and read from a plain dictionary (and so JSON or TOML).

Example
-------
>>> from bayeszi.base.spec import ModelSpec
>>> s = ModelSpec(counts="y ~ x", zeros="~ 1", family="zip", exposure="hours")
>>> s.response
'y'
>>> ModelSpec.from_dict(s.to_dict()) == s
True
"""

from __future__ import annotations

import dataclasses
import re
from collections.abc import Iterable, Mapping
from dataclasses import dataclass, field
from typing import Any

import numpy as np

from bayeszi.base import names
from bayeszi.base.errors import BayesziError
from bayeszi.base.renamed import refuse_renamed, translate_saved

PARTS = ("counts", "zeros")


@dataclass(frozen=True)
class SamplerSettings:
    """NUTS settings. ``cores=None`` uses as many cores as chains (up to the machine's).

    ``until_enough=True`` draws in blocks of ``block_draws`` per chain until every reported
    parameter's R-hat, bulk ESS and tail ESS pass the warning thresholds, or until
    ``draws_limit`` draws per chain; ``draws`` is then not used
    (:mod:`bayeszi.model.enough` for PyMC's NUTS, :mod:`bayeszi.model.enough_nutpie` for
    nutpie).
    """

    draws: int = 1000
    warmup_steps: int = 1000
    chains: int = 2
    cores: int | None = None
    acceptance_target: float = 0.9
    seed: int | None = None
    progressbar: bool | None = None
    sampler: str = "auto"
    until_enough: bool = False
    block_draws: int = 200
    draws_limit: int = 4000

    def __post_init__(self) -> None:
        for name in ("draws", "warmup_steps", "chains", "block_draws", "draws_limit"):
            value = getattr(self, name)
            if not _is_whole(value) or value < 1:
                example = {"draws": 1000, "warmup_steps": 1000, "chains": 2, "block_draws": 200,
                           "draws_limit": 4000}[name]
                raise BayesziError(
                    f"setting '{name}' must be a positive whole number, got {value!r}; "
                    f"for example {name}={example}"
                )
            object.__setattr__(self, name, int(value))
        if self.cores is not None:
            if not _is_whole(self.cores) or self.cores < 1:
                raise BayesziError(f"setting 'cores' must be a positive whole number or None, "
                                   f"got {self.cores!r}")
            object.__setattr__(self, "cores", int(self.cores))
        ta = self.acceptance_target
        if isinstance(ta, (bool, np.bool_)) or not isinstance(ta, (int, float, np.number)) \
                or not 0.5 <= float(ta) < 1.0:
            raise BayesziError(
                f"setting 'acceptance_target' must lie in [0.5, 1), got {ta!r}; 0.9 is the "
                "default, raise it toward 0.99 if there are divergences"
            )
        object.__setattr__(self, "acceptance_target", float(ta))
        if self.seed is not None:
            if not _is_whole(self.seed) or self.seed < 0:
                raise BayesziError(f"setting 'seed' must be a non-negative whole number or None, "
                                   f"got {self.seed!r}")
            object.__setattr__(self, "seed", int(self.seed))
        if self.progressbar is not None and not isinstance(self.progressbar, (bool, np.bool_)):
            raise BayesziError(f"setting 'progressbar' must be True, False or None, got "
                               f"{self.progressbar!r}")
        if self.progressbar is not None:
            object.__setattr__(self, "progressbar", bool(self.progressbar))
        if not isinstance(self.sampler, str) or self.sampler not in ("auto", "pymc", "nutpie"):
            raise BayesziError(
                f"setting 'sampler' must be 'auto', 'pymc' or 'nutpie', got {self.sampler!r}"
            )
        self._check_until_enough()

    def _check_until_enough(self) -> None:
        """``until_enough`` is True or False and, when True, has what it needs."""
        if not isinstance(self.until_enough, (bool, np.bool_)):
            raise BayesziError(f"setting 'until_enough' must be True or False, got "
                               f"{self.until_enough!r}")
        object.__setattr__(self, "until_enough", bool(self.until_enough))
        if not self.until_enough:
            return
        if self.block_draws > self.draws_limit:
            raise BayesziError(
                f"setting 'block_draws' ({self.block_draws}) is above 'draws_limit' "
                f"({self.draws_limit}); lower block_draws or raise draws_limit")
        if self.chains < 2:
            raise BayesziError(
                "until_enough needs chains=2 or more: R-hat, one of the measures it waits for, "
                "compares chains; set chains=2 or until_enough=False")

    @property
    def most_draws(self) -> int:
        """The most draws per chain a fit can take: ``draws_limit`` when drawing until
        enough, else ``draws``.

        >>> SamplerSettings(until_enough=True).most_draws
        4000
        """
        return self.draws_limit if self.until_enough else self.draws

    @classmethod
    def from_mapping(cls, d: Any, where: str = "sampler settings") -> SamplerSettings:
        """Build from a mapping, refusing unknown keys by name."""
        if isinstance(d, SamplerSettings):
            return d
        if not isinstance(d, Mapping):
            raise BayesziError(f"{where} must be a mapping like {{'draws': 1000}}, got {d!r}")
        refuse_renamed(d, where)
        known = {f.name for f in dataclasses.fields(cls)}
        bad = sorted(str(k) for k in set(d) - known)
        if bad:
            raise BayesziError(f"unknown sampler setting(s) {bad}; known: {sorted(known)}")
        return cls(**d)


def _is_whole(value: Any) -> bool:
    """A whole number (Python or NumPy integer, or a float like 1000.0), not a bool."""
    if isinstance(value, (bool, np.bool_)):
        return False
    if isinstance(value, (int, np.integer)):
        return True
    return isinstance(value, (float, np.floating)) and np.isfinite(value) \
        and float(value).is_integer()


def _column(value: Any, what: str) -> str | None:
    """None or a non-empty column name."""
    if value is None:
        return None
    if not isinstance(value, str) or not value.strip():
        raise BayesziError(f"{what} must be a column name (text) or None, got {value!r}")
    return value


def _column_list(value: Any, what: str) -> tuple[str, ...]:
    """A column name or a list of them, as a tuple (order kept)."""
    if value is None:
        return ()
    if isinstance(value, str):
        value = (value,)
    if isinstance(value, (Mapping, set, frozenset, bytes)) or not isinstance(value, Iterable):
        raise BayesziError(f"{what} must be a column name or a list of column names, got "
                           f"{value!r}")
    out = tuple(value)
    for v in out:
        if not isinstance(v, str) or not v.strip():
            raise BayesziError(f"{what} must be column names (text), got {v!r} in {list(out)}")
    return out


def _plain_priors(value: Any) -> Any:
    """Priors in plain (JSON) form: prior distributions (``bayeszi.priors.normal(...)``) become
    their mappings ``{"distribution": "normal", "mean": 0.0, "sd": 1.0}`` and NumPy numbers
    become Python numbers, so that a spec can always be saved. Whether the values make
    priors is checked when the model's priors are resolved (bayeszi.model.priors)."""
    if hasattr(value, "to_mapping"):
        return value.to_mapping()
    if isinstance(value, Mapping):
        return {str(k): _plain_priors(v) for k, v in value.items()}
    if isinstance(value, (list, tuple)):
        return [_plain_priors(v) for v in value]
    if isinstance(value, np.generic):
        return value.item()
    if value is None or isinstance(value, (str, int, float, bool)):
        return value
    raise BayesziError(f"priors hold {value!r} ({type(value).__name__}); use bayeszi.priors "
                       "functions such as normal(mean=0, sd=1), or mappings such as "
                       "{'distribution': 'normal', 'mean': 0, 'sd': 1} (see docs/priors.md)")


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
    priors : prior overrides; see :mod:`bayeszi.model.priors`.
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
        # checked in this order, so that the first problem named is the same every time
        checked: dict[str, Any] = {"family": names.check_family(self.family),
                                   "counts": _checked_counts(self.counts),
                                   "zeros": _checked_zeros(self.zeros),
                                   "exposure": _column(self.exposure, "exposure"),
                                   "offset": _column(self.offset, "offset")}
        groups = _column_list(self.groups, "groups")
        if len(set(groups)) != len(groups):
            raise BayesziError(f"groups lists a column twice: {list(groups)}")
        checked["groups"] = groups
        checked["varying"] = _checked_varying(self.varying, groups)
        checked["nested"] = _checked_nested(self.nested, groups)
        if not isinstance(self.correlated, (bool, np.bool_)):
            raise BayesziError(f"correlated must be True or False, got {self.correlated!r}")
        checked["correlated"] = bool(self.correlated)
        if self.correlated and not groups:
            raise BayesziError("correlated=True needs groups: pass groups='your_site_column'")
        if checked["exposure"] is not None and checked["offset"] is not None:
            raise BayesziError(
                "give either exposure (effort column, logged for you) or offset (a ready-made "
                "log offset column), not both"
            )
        checked["priors"] = _checked_priors(self.priors)
        checked["sampler"] = SamplerSettings.from_mapping(self.sampler)
        for key, value in checked.items():
            object.__setattr__(self, key, value)

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
        return names.zero_mechanism(self.family) is not None

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
        if not isinstance(d, Mapping):
            raise BayesziError(f"a model spec must be a mapping of settings, got "
                               f"{type(d).__name__}")
        unknown = sorted(str(k) for k in set(d) - known)
        if unknown:
            raise BayesziError(f"unknown model setting(s) {unknown}; known: {sorted(known)}")
        d = dict(d)
        if "sampler" in d and d["sampler"] is not None:
            raw = d["sampler"]
            d["sampler"] = SamplerSettings.from_mapping(
                translate_saved(raw) if isinstance(raw, Mapping) else raw)
        return cls(**d)


def _one_part(rhs: str, part: str) -> None:
    """Refuse formula syntax that would split a formula into several parts."""
    if "|" in rhs:
        raise BayesziError(
            f"the {part} formula '~ {rhs.strip()}' contains '|'; bayeszi takes group effects "
            "from the groups= argument (e.g. groups='site', varying={'counts': ['depth']}), not "
            "from formula syntax. Remove the '|' part"
        )
    if "~" in rhs:
        raise BayesziError(
            f"the {part} formula '~ {rhs.strip()}' has a second '~'; write one formula per part: "
            "counts='y ~ a + b' and zeros='~ c'"
        )


def _checked_counts(counts: object) -> str:
    """The counts formula, refused unless it is 'response ~ predictors'."""
    if not isinstance(counts, str) or "~" not in counts:
        raise BayesziError(
            f"counts formula must look like 'response ~ predictors', got {counts!r}"
        )
    lhs, rhs = counts.split("~", 1)
    if not lhs.strip():
        raise BayesziError(
            f"counts formula {counts!r} has no response on the left of '~'; "
            "write e.g. 'crayfish ~ water_temp'"
        )
    if not rhs.strip():
        raise BayesziError(f"counts formula {counts!r} has nothing right of '~'; "
                           "use '~ 1' for an intercept only")
    _one_part(rhs, "counts")
    return counts


def _checked_zeros(zeros: object) -> str:
    """The zeros formula normalised to '~ rhs' ('~ 1' when empty or None)."""
    zeros = "~ 1" if zeros is None else zeros
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
    _one_part(zeros[1:], "zeros")
    return zeros


def _checked_varying(raw: object, groups: tuple[str, ...]) -> dict[str, tuple[str, ...]]:
    """Varying slopes per part, refused without groups or with an unknown part."""
    raw = {} if raw is None else raw
    if not isinstance(raw, Mapping):
        raise BayesziError(f"varying must map a part to terms, e.g. {{'counts': ['depth']}}, "
                           f"got {raw!r}")
    varying = {}
    for part, terms in raw.items():
        if part not in PARTS:
            raise BayesziError(f"varying has unknown part {part!r}; use 'counts' or 'zeros'")
        terms = _column_list(terms, f"varying[{part!r}]")
        if terms:
            varying[part] = terms
    if varying and not groups:
        raise BayesziError("varying slopes need groups: pass groups='your_site_column'")
    return varying


def _checked_nested(raw: object, groups: tuple[str, ...]) -> dict[str, str]:
    """Grouping column -> the column it is nested in; both must be named properly."""
    raw = {} if raw is None else raw
    if not isinstance(raw, Mapping):
        raise BayesziError(f"nested must map a grouping column to the column it is nested in, "
                           f"e.g. {{'reach': 'river'}}, got {raw!r}")
    nested = dict(raw)
    for inner, outer in nested.items():
        if inner not in groups:
            raise BayesziError(f"nested names {inner!r}, which is not among groups "
                               f"{list(groups)}")
        if not isinstance(outer, str) or not outer.strip():
            raise BayesziError(f"nested[{inner!r}] must be a column name, got {outer!r}")
    return nested


def _checked_priors(raw: object) -> dict[str, Any]:
    """Prior overrides as plain JSON-friendly values."""
    priors = {} if raw is None else raw
    if not isinstance(priors, Mapping):
        raise BayesziError(
            "priors must be a dict such as {'counts': {'depth': bayeszi.priors.normal(mean=0, "
            "sd=0.5)}}, "
            f"got {priors!r}; see docs/priors.md"
        )
    return _plain_priors(priors)
