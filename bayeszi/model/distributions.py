"""Prior distributions as people write them: small functions with named arguments, or the same
as a plain mapping (a Python dict, or an inline table of a study file).

- coefficients (any real value): ``normal(mean=0, sd=1)``, ``student_t(centre=0, scale=1,
  df=3)`` (heavier tails), ``laplace(centre=0, scale=1)`` (a sharper peak at the centre);
- standard deviations and the dispersion (positive): ``half_normal(sd=1)``,
  ``half_student_t(scale=1, df=3)``, ``exponential(rate=1)``.

As a mapping, name the function as ``distribution`` beside the same arguments:
``{distribution = "normal", mean = 0, sd = 1}`` in a study file, ``{"distribution":
"normal", "mean": 0, "sd": 1}`` in Python.

``mean`` and ``centre`` may be left out (0). A half-normal's ``sd`` and a half-Student-t's
``scale`` are those of the distribution folded at zero. Each function returns a frozen
:class:`PriorDistribution`, which prints as ``Normal, mean 0, sd 1``. The module is public
as ``bayeszi.priors`` (``from bayeszi.priors import normal``).

Example
-------
>>> import bayeszi as bz
>>> print(bz.priors.normal(mean=0, sd=0.5), "|", bz.priors.half_normal(sd=1))
Normal, mean 0, sd 0.5 | Half-normal, sd 1
>>> bz.priors.as_distribution({"distribution": "exponential", "rate": 3}, "the dispersion")
exponential(rate=3.0)
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass
from typing import Any

import numpy as np

from bayeszi.base.errors import BayesziError

#: Each distribution's parameters in order, and the defaults of those that have one.
PARAMETERS: dict[str, tuple[str, ...]] = {
    "normal": ("mean", "sd"),
    "student_t": ("centre", "scale", "df"),
    "laplace": ("centre", "scale"),
    "half_normal": ("sd",),
    "half_student_t": ("scale", "df"),
    "exponential": ("rate",),
}
DEFAULTS = {"mean": 0.0, "centre": 0.0}
#: Distributions on the real line (coefficients); the others are positive (sds, dispersion).
REAL_LINE = ("normal", "student_t", "laplace")
#: Names shown to people.
SHOWN = {"normal": "Normal", "student_t": "Student-t", "laplace": "Laplace",
         "half_normal": "Half-normal", "half_student_t": "Half-Student-t",
         "exponential": "Exponential"}
#: The spellings of bayeszi 0.1 (list form ``["halfnormal", 1]``), for the upgrade message
#: and for reading saved fits.
_OLD_NAMES = {"normal": "normal", "student_t": "student_t", "laplace": "laplace",
              "halfnormal": "half_normal", "halfstudent_t": "half_student_t",
              "exponential": "exponential"}


def _number(value: Any) -> bool:
    return not isinstance(value, (bool, np.bool_)) and isinstance(
        value, (int, float, np.integer, np.floating))


def _fmt(v: float) -> str:
    return f"{v:.3g}"


@dataclass(frozen=True)
class PriorDistribution:
    """One prior distribution and its named parameters; make it with :func:`normal` and the
    other functions of this module, or :func:`as_distribution` from a mapping.

    Example
    -------
    >>> p = student_t(centre=0, scale=2.5, df=3)
    >>> p["scale"], str(p)
    (2.5, 'Student-t, centre 0, scale 2.5, df 3')
    """

    distribution: str
    parameters: tuple[tuple[str, float], ...]

    def __post_init__(self) -> None:
        _check(self.distribution, dict(self.parameters), "this prior")

    def __getitem__(self, name: str) -> float:
        return dict(self.parameters)[name]

    @property
    def real_line(self) -> bool:
        """Whether this prior suits a coefficient (any real value)."""
        return self.distribution in REAL_LINE

    def __str__(self) -> str:
        args = ", ".join(f"{k} {_fmt(v)}" for k, v in self.parameters)
        return f"{SHOWN[self.distribution]}, {args}"

    def __repr__(self) -> str:
        args = ", ".join(f"{k}={v!r}" for k, v in self.parameters)
        return f"{self.distribution}({args})"

    def to_mapping(self) -> dict[str, Any]:
        """The plain mapping form, ``{"distribution": "normal", "mean": 0.0, "sd": 1.0}``."""
        return {"distribution": self.distribution, **dict(self.parameters)}

    def scaled(self, factor: float, shift: float = 0.0) -> PriorDistribution:
        """The same prior for ``factor * beta + shift`` (real-line distributions only)."""
        if not self.real_line:
            raise BayesziError("only coefficient priors can be rescaled")
        loc, spread = PARAMETERS[self.distribution][:2]
        values = dict(self.parameters)
        values[loc] = values[loc] * factor + shift
        values[spread] = values[spread] * abs(factor)
        return _make(self.distribution, values)


def _check(distribution: str, values: dict[str, Any], where: str) -> None:
    """Refuse an unknown distribution, missing or unknown parameters, and bad numbers."""
    if distribution not in PARAMETERS:
        new = _OLD_NAMES.get(distribution)
        hint = f"write {new!r}" if new else f"use one of {sorted(PARAMETERS)}"
        raise BayesziError(f"prior for {where}: unknown distribution {distribution!r}; {hint}")
    need = PARAMETERS[distribution]
    missing = [k for k in need if k not in values]
    unknown = sorted(set(values) - set(need))
    if missing or unknown:
        raise BayesziError(
            f"prior for {where}: a {distribution} prior takes {', '.join(need)}; "
            + (f"{missing} missing" if missing else f"{unknown} unknown")
            + f". Write e.g. {_example(distribution)}")
    for k in need:
        v = values[k]
        if not _number(v) or not np.isfinite(float(v)):
            raise BayesziError(f"prior for {where}: {k} must be a finite number, got {v!r}")
        if k not in DEFAULTS and float(v) <= 0:
            raise BayesziError(f"prior for {where}: {k} must be positive, got {v!r}")


def _example(distribution: str) -> str:
    values = {"mean": 0, "centre": 0, "sd": 1, "scale": 1, "df": 3, "rate": 1}
    return _mapping_text(distribution, {k: values[k] for k in PARAMETERS[distribution]})


def _mapping_text(distribution: str, values: Mapping[str, Any]) -> str:
    """The study-file inline table of a prior, ``{distribution = "normal", mean = 0, sd = 1}``."""
    args = "".join(f", {k} = {float(v):g}" for k, v in values.items())
    return f'{{distribution = "{distribution}"{args}}}'


def _make(distribution: str, values: Mapping[str, Any], where: str = "") -> PriorDistribution:
    """The distribution, defaults filled in, checked; ``where`` names it in errors."""
    given = {**{k: v for k, v in DEFAULTS.items() if k in PARAMETERS.get(distribution, ())},
             **values}
    _check(distribution, given, where or f"a {distribution} prior")
    return PriorDistribution(distribution, tuple(
        (k, float(given[k])) for k in PARAMETERS[distribution]))


def normal(*, mean: float = 0.0, sd: float) -> PriorDistribution:
    """Normal prior for a coefficient.

    >>> print(normal(mean=0.1, sd=0.05))
    Normal, mean 0.1, sd 0.05
    """
    return _make("normal", {"mean": mean, "sd": sd})


def student_t(*, centre: float = 0.0, scale: float, df: float) -> PriorDistribution:
    """Student-t prior for a coefficient: heavier tails than the normal for small ``df``.

    >>> print(student_t(scale=1, df=3))
    Student-t, centre 0, scale 1, df 3
    """
    return _make("student_t", {"centre": centre, "scale": scale, "df": df})


def laplace(*, centre: float = 0.0, scale: float) -> PriorDistribution:
    """Laplace (double exponential) prior for a coefficient; sd = scale * sqrt(2).

    >>> print(laplace(scale=0.5))
    Laplace, centre 0, scale 0.5
    """
    return _make("laplace", {"centre": centre, "scale": scale})


def half_normal(*, sd: float) -> PriorDistribution:
    """Half-normal prior for a standard deviation: a normal with this ``sd``, folded at zero.

    >>> print(half_normal(sd=0.5))
    Half-normal, sd 0.5
    """
    return _make("half_normal", {"sd": sd})


def half_student_t(*, scale: float, df: float) -> PriorDistribution:
    """Half-Student-t prior for a standard deviation (a Student-t folded at zero).

    >>> print(half_student_t(scale=1, df=3))
    Half-Student-t, scale 1, df 3
    """
    return _make("half_student_t", {"scale": scale, "df": df})


def exponential(*, rate: float) -> PriorDistribution:
    """Exponential prior for a standard deviation or the dispersion; its mean is 1 / rate.

    >>> print(exponential(rate=3))
    Exponential, rate 3
    """
    return _make("exponential", {"rate": rate})


def as_distribution(value: Any, where: str) -> PriorDistribution:
    """A :class:`PriorDistribution` from itself or its mapping form, naming ``where`` (e.g.
    ``counts term 'depth'``) in any error. The list form of bayeszi 0.1 is refused with the
    mapping to write instead.

    >>> as_distribution({"distribution": "normal", "sd": 0.5}, "counts term 'depth'")
    normal(mean=0.0, sd=0.5)
    """
    if isinstance(value, PriorDistribution):
        return value
    if isinstance(value, Mapping):
        values = {str(k): v for k, v in value.items()}
        distribution = values.pop("distribution", None)
        if not isinstance(distribution, str):
            raise BayesziError(
                f"prior for {where} needs a 'distribution' (one of {sorted(PARAMETERS)}), got "
                f"{dict(value)!r}; e.g. {_example('normal')}")
        return _make(distribution, values, where)
    old = upgrade_old(value)
    if old is not None:
        raise BayesziError(
            f"prior for {where} is written in the old list form {list(value)!r}; write "
            f"{_mapping_text(old['distribution'], _params(old))} in a study file, or "
            f"{_call_text(old)} in Python")
    raise BayesziError(f"prior for {where} must be a mapping such as {_example('normal')} or "
                       f"a bayeszi.priors function such as normal(mean=0, sd=1), got {value!r}")


def _params(mapping: Mapping[str, Any]) -> dict[str, Any]:
    return {k: v for k, v in mapping.items() if k != "distribution"}


def _call_text(mapping: Mapping[str, Any]) -> str:
    args = ", ".join(f"{k}={float(v):g}" for k, v in _params(mapping).items())
    return f"bayeszi.priors.{mapping['distribution']}({args})"


def upgrade_old(value: Any) -> dict[str, Any] | None:
    """The mapping form of a prior written as a bayeszi 0.1 list (``["normal", 0, 1]``), or
    None when ``value`` is not such a list. Used to read fits saved by that version and to say
    what to write instead.

    >>> upgrade_old(["halfnormal", 0.5])
    {'distribution': 'half_normal', 'sd': 0.5}
    """
    if not isinstance(value, (list, tuple)) or not value or value[0] not in _OLD_NAMES:
        return None
    distribution = _OLD_NAMES[value[0]]
    numbers = list(value[1:])
    if len(numbers) != len(PARAMETERS[distribution]):
        return None
    return {"distribution": distribution, **dict(zip(PARAMETERS[distribution], numbers,
                                                     strict=True))}


def upgrade_saved_priors(priors: Any) -> Any:
    """Prior overrides of a saved fit with every bayeszi 0.1 list turned into its mapping
    (anything else unchanged), so that fits saved by that version still load.

    >>> upgrade_saved_priors({"counts": {"x": ["normal", 0, 1]}})
    {'counts': {'x': {'distribution': 'normal', 'mean': 0, 'sd': 1}}}
    """
    if isinstance(priors, Mapping):
        return {k: upgrade_saved_priors(v) for k, v in priors.items()}
    new = upgrade_old(priors)
    return priors if new is None else new


def Prior(distribution: Any = None, *numbers: Any, **named: Any) -> PriorDistribution:  # noqa: N802
    """The prior class of bayeszi 0.1, now refused with the form to write instead.

    >>> Prior("normal", 0, 1)
    Traceback (most recent call last):
    ...
    bayeszi.base.errors.BayesziError: bayeszi.Prior is gone; write bayeszi.priors.normal(mean=0, sd=1) in Python, or {distribution = "normal", mean = 0, sd = 1} in a study file
    """  # noqa: E501
    old = upgrade_old([distribution, *numbers, *named.values()])
    if old is None:
        raise BayesziError("bayeszi.Prior is gone; write a prior with a bayeszi.priors function "
                           f"such as normal(mean=0, sd=1), or a mapping such as "
                           f"{_example('normal')}")
    raise BayesziError(f"bayeszi.Prior is gone; write {_call_text(old)} in Python, or "
                       f"{_mapping_text(old['distribution'], _params(old))} in a study file")


__all__ = ["PriorDistribution", "normal", "student_t", "laplace", "half_normal",
           "half_student_t", "exponential", "as_distribution"]
