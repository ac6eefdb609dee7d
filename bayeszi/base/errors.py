"""The one public exception of bayeszi, and its one warning class.

Every mistake a user can make (a missing column, a bad setting, an unreadable file) is
reported as a :class:`BayesziError` whose message names what is wrong and how to fix it.

Example
-------
>>> from bayeszi.base.errors import BayesziError
>>> isinstance(BayesziError("column 'y' is missing"), ValueError)
True
"""

from __future__ import annotations


class BayesziError(ValueError):
    """A user error: the message names the column, rows or setting and says how to fix it."""


class BayesziWarning(UserWarning):
    """A warning about the data or the sampler that the user should read."""
