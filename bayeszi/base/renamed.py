"""Names bayeszi used before and the names that replaced them (one table, one error).

A setting, keyword argument, study-file key or command-line flag that was renamed is
refused with a :class:`BayesziError` that names its replacement, so an old script or study
file fails at once with the fix, instead of running with a setting silently ignored.
Saved fits are not user input: :func:`translate_saved` reads their old keys quietly.

Example
-------
>>> from bayeszi.base.renamed import new_name
>>> new_name("tune")
'warmup_steps'
"""

from __future__ import annotations

import functools
from collections.abc import Callable, Iterable, Mapping
from typing import Any, TypeVar

from bayeszi.base.errors import BayesziError

#: Old keyword / study-file key -> the name that replaced it.
RENAMED: dict[str, str] = {
    "tune": "warmup_steps",
    "target_accept": "acceptance_target",
    "k_threshold": "k_limit",
}

#: Old command-line flag -> the flag that replaced it.
RENAMED_FLAGS: dict[str, str] = {
    "--tune": "--warmup-steps",
    "--target-accept": "--acceptance-target",
}

#: Old public function name -> the function that replaced it.
RENAMED_FUNCTIONS: dict[str, str] = {
    "compare": "rank_models",
}

F = TypeVar("F", bound=Callable[..., Any])


def new_name(old: str) -> str | None:
    """The name that replaced ``old``, or None when ``old`` was never renamed."""
    return RENAMED.get(old) or RENAMED_FLAGS.get(old) or RENAMED_FUNCTIONS.get(old)


def refuse_renamed(keys: Iterable[Any], where: str) -> None:
    """Raise naming the replacement of the first renamed key in ``keys``.

    >>> refuse_renamed(["draws"], "the sampler settings")   # nothing renamed: no error
    """
    for key in keys:
        new = RENAMED.get(str(key))
        if new is not None:
            raise BayesziError(
                f"{key!r} in {where} is now called {new!r}; write {new} instead "
                f"(docs/glossary.md lists every name)")


def refusing_renamed(func: F) -> F:
    """Decorate a public function so that an old keyword gets a BayesziError naming the new.

    >>> @refusing_renamed
    ... def f(warmup_steps=1):
    ...     return warmup_steps
    >>> f(warmup_steps=3)
    3
    """
    @functools.wraps(func)
    def wrapper(*args: Any, **kwargs: Any) -> Any:
        refuse_renamed(kwargs, f"the arguments of {func.__name__}()")
        return func(*args, **kwargs)

    return wrapper  # type: ignore[return-value]


def refuse_renamed_flags(argv: Iterable[str]) -> None:
    """Raise naming the new flag when a command line holds a renamed one."""
    for arg in argv:
        flag = str(arg).split("=", 1)[0]
        if flag in RENAMED_FLAGS:
            raise BayesziError(f"the flag {flag} is now {RENAMED_FLAGS[flag]}; "
                               f"use {RENAMED_FLAGS[flag]} instead")


def refuse_renamed_function(module: str, name: str) -> None:
    """Raise for an old public function name (called from a module's ``__getattr__``)."""
    new = RENAMED_FUNCTIONS.get(name)
    if new is not None:
        raise BayesziError(f"{module}.{name} is now {module}.{new}; call {new}(...) instead")


def translate_saved(d: Mapping[str, Any]) -> dict[str, Any]:
    """Old keys of a saved fit's settings mapped to the new ones (saved files stay readable).

    >>> translate_saved({"tune": 500, "draws": 200})
    {'warmup_steps': 500, 'draws': 200}
    """
    return {RENAMED.get(str(k), k): v for k, v in d.items()}


__all__ = ["RENAMED", "RENAMED_FLAGS", "RENAMED_FUNCTIONS", "new_name", "refuse_renamed",
           "refusing_renamed", "refuse_renamed_flags", "refuse_renamed_function",
           "translate_saved"]
