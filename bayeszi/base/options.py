"""The arguments every answer shares, each with one meaning, one check and one wording.

- ``interval``: the probability of a central posterior interval, strictly between 0 and 1.
- ``draws``: a subset of the posterior draws, evenly spaced; ``None`` takes them all; more
  than the fit holds is an error.
- ``seed``: a whole number, a NumPy ``Generator`` (used as it is) or ``None``.
- ``groups``: how group effects enter a prediction (:data:`GROUP_MODES`).

Example
-------
>>> from bayeszi.base import options
>>> options.interval_bounds(0.9).names
('5%', '95%')
>>> options.draw_subset(3, total=9).tolist()
[0, 4, 8]
>>> options.check_group_mode("new")
'new'
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from bayeszi.base.errors import BayesziError

#: how group effects enter: the fitted effect of each row's level, a fresh level drawn from
#: the population, the average over such draws, or the population centre (effects of 0)
GROUP_MODES: dict[str, str] = {
    "known": "each row's fitted level (an unknown level is an error)",
    "new": "a new level per distinct label, drawn from the population of levels",
    "average": "the average over many new levels (the population average)",
    "typical": "group effects of 0 (the population centre, not its average)",
}


#: what ``seed`` accepts (see :func:`rng`)
Seed = int | np.random.Generator | None


@dataclass(frozen=True)
class Interval:
    """A central interval: its lower and upper probabilities and their column names."""

    lower: float
    upper: float

    @property
    def names(self) -> tuple[str, str]:
        """Column names of the bounds, e.g. ``('5%', '95%')``."""
        return f"{100 * self.lower:g}%", f"{100 * self.upper:g}%"


def _whole(x: object) -> bool:
    return isinstance(x, (int, np.integer)) and not isinstance(x, bool)


def interval_bounds(interval: object, name: str = "interval") -> Interval:
    """Check ``interval`` and return its bounds; the one wording for a bad value."""
    if isinstance(interval, bool) or not isinstance(interval, (int, float, np.floating)) \
            or not 0 < float(interval) < 1:
        raise BayesziError(f"{name} must lie strictly between 0 and 1, got {interval!r}; "
                           f"e.g. {name}=0.9 for a central 90% interval")
    lo = (1 - float(interval)) / 2
    return Interval(lo, 1 - lo)


def draw_subset(draws: object, total: int) -> np.ndarray | None:
    """Indices of ``draws`` evenly spaced posterior draws out of ``total`` (None: all)."""
    if draws is None:
        return None
    if not _whole(draws) or int(draws) < 1:
        raise BayesziError(f"draws must be a whole number >= 1 or None (all draws), got "
                           f"{draws!r}")
    if int(draws) > total:
        raise BayesziError(f"draws={draws} but the fit holds {total} posterior draws; pass "
                           f"draws=None to use them all or a number up to {total}")
    if int(draws) == total:
        return None
    return np.unique(np.round(np.linspace(0, total - 1, int(draws))).astype(np.int64))


def rng(seed: object) -> np.random.Generator:
    """A Generator from a whole number >= 0, a Generator (returned as it is) or None."""
    if isinstance(seed, np.random.Generator):
        return seed
    if seed is not None and (not _whole(seed) or int(seed) < 0):
        raise BayesziError(f"seed must be a whole number >= 0, a numpy Generator or None, "
                           f"got {seed!r}")
    return np.random.default_rng(None if seed is None else int(seed))


def check_group_mode(groups: object) -> str:
    """``groups`` if it is one of :data:`GROUP_MODES`; the one wording otherwise."""
    if isinstance(groups, str) and groups in GROUP_MODES:
        return groups
    said = "; ".join(f"'{k}' for {v}" for k, v in GROUP_MODES.items())
    raise BayesziError(f"groups must be one of {list(GROUP_MODES)}, got {groups!r}: {said}")


def check_whole(value: object, name: str, least: int = 1, example: int | None = None) -> int:
    """``value`` as an int if it is a whole number >= ``least``; else a BayesziError."""
    if not _whole(value) or int(value) < least:
        tip = f"; e.g. {name}={example}" if example is not None else ""
        raise BayesziError(f"{name} must be a whole number >= {least}, got {value!r}{tip}")
    return int(value)


def missing_group_column(group: str) -> BayesziError:
    """The one wording for known-group answers asked of rows that lack a grouping column.

    Example
    -------
    >>> str(missing_group_column("reach")).split(";")[0]
    "known-group predictions need the grouping column 'reach' in the data"
    """
    return BayesziError(
        f"known-group predictions need the grouping column {group!r} in the data; add "
        f"it, or ask for groups='new' (new {group} levels), groups='average' (averaged "
        f"over the {group} distribution) or groups='typical' (effect 0)"
    )


def unseen_levels(group: str, unseen: list, rows: str, known: list[str]) -> BayesziError:
    """The one wording for known-group answers asked of levels the fit has not seen.

    ``unseen`` are the new labels, ``rows`` says where they are, ``known`` the fitted levels.
    """
    more = f" (and {len(known) - 20} more)" if len(known) > 20 else ""
    return BayesziError(
        f"grouping column {group!r} has level(s) {unseen[:10]} at row(s) {rows} that were "
        f"not in the fitted data, so they have no estimated effect; known levels: "
        f"{known[:20]}{more}. Use groups='new' to predict for them as new {group} levels"
    )
