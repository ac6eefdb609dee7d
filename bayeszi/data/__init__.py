"""The crayfish demo data: an invented, simulated trapping survey shipped with bayeszi.

One row is one trap line check on a stream reach. Reaches above a barrier mostly hold no
crayfish at all (extra zeros); elsewhere the catch follows a negative binomial with trap
nights as exposure and reach effects in both parts. The true parameters are shipped beside
the data, so a fit can be checked against the truth. The generator is
:mod:`bayeszi.data.generate_crayfish`; ``python -m bayeszi.data.generate_crayfish``
rewrites the shipped files byte for byte.

The data are simulated for demonstration only. They describe no real river, and no
management decision should rest on them.

Example
-------
>>> from bayeszi.data import load_crayfish, crayfish_truth
>>> df = load_crayfish()
>>> df["reach"].nunique(), sorted(df["substrate"].unique())
(40, ['cobble', 'gravel', 'silt'])
>>> crayfish_truth()["counts_formula"]
'crayfish ~ water_temp + C(substrate) + depth + canopy'
"""

from __future__ import annotations

import json
from importlib import resources
from typing import Any

import pandas as pd

# The generator is imported inside the functions, so that
# ``python -m bayeszi.data.generate_crayfish`` runs it without a double import.

__all__ = ["load_crayfish", "crayfish_truth", "simulate_crayfish", "crayfish_true_parts",
           "CRAYFISH_DTYPES"]

#: Column types of the crayfish data: labels as ``str``, counts and flags as ``int64``.
CRAYFISH_DTYPES: dict[str, Any] = {
    "reach": str,
    "river": str,
    "year": "int64",
    "season": str,
    "visit": "int64",
    "trap_line": "int64",
    "trap_nights": "int64",
    "water_temp": "float64",
    "substrate": str,
    "depth": "float64",
    "canopy": "float64",
    "barrier": "int64",
    "crayfish": "int64",
}


def load_crayfish() -> pd.DataFrame:
    """Read the packaged crayfish data (about 2,000 trap line checks on 40 reaches).

    Columns: ``reach``, ``river``, ``year``, ``season``, ``visit``, ``trap_line``,
    ``trap_nights`` (exposure), ``water_temp`` (deg C), ``substrate`` (cobble, gravel,
    silt), ``depth`` (m), ``canopy`` (cover fraction), ``barrier`` (0/1) and ``crayfish``
    (count caught). ``reach``, ``river``, ``season`` and ``substrate`` are strings.

    Example
    -------
    >>> df = load_crayfish()
    >>> int(df["crayfish"].min()), df["trap_nights"].dtype.name
    (0, 'int64')
    """
    from bayeszi.data.generate_crayfish import CSV_NAME

    source = resources.files(__name__).joinpath(CSV_NAME)
    with source.open("r", encoding="utf-8") as fh:
        return pd.read_csv(fh, dtype=CRAYFISH_DTYPES, keep_default_na=False)


def crayfish_truth() -> dict[str, Any]:
    """Return the true parameters behind :func:`load_crayfish` as a dictionary.

    Keys include ``counts`` and ``zeros`` (coefficients named as the formula terms
    ``crayfish ~ water_temp + C(substrate) + depth + canopy`` per trap night and
    ``~ barrier`` for P(extra zero)), ``alpha`` (NB variance mu + alpha mu^2),
    ``group_sd``, ``group_effects`` (every reach's drawn effect), ``seed`` and ``summary``.

    Example
    -------
    >>> t = crayfish_truth()
    >>> t["zeros"], t["group_sd"]["counts"]["reach"]
    ({'Intercept': -1.5, 'barrier': 3.0}, 0.5)
    """
    from bayeszi.data.generate_crayfish import TRUTH_NAME

    source = resources.files(__name__).joinpath(TRUTH_NAME)
    with source.open("r", encoding="utf-8") as fh:
        return json.load(fh)


def simulate_crayfish(
    seed: int | None = None,
    n_reaches: int = 40,
    n_rivers: int = 6,
    barrier_share: float = 0.3,
    sparse_share: float = 0.125,
    visits: tuple[int, int] = (6, 12),
    sparse_visits: tuple[int, int] = (2, 3),
    lines_per_visit: tuple[int, int] = (4, 8),
) -> tuple[pd.DataFrame, dict[str, Any]]:
    """Run the crayfish generator in memory and return ``(data, truth)``.

    ``seed=None`` uses the generator's fixed default seed, and with all arguments left at
    their defaults this is exactly the shipped data. Change ``n_reaches`` (and
    ``n_rivers``) for smaller or larger data sets; see
    :func:`bayeszi.data.generate_crayfish.simulate` for every argument.
    A bad argument raises :class:`bayeszi.base.errors.BayesziError`.

    Example
    -------
    >>> data, truth = simulate_crayfish(seed=7, n_reaches=5, n_rivers=1)
    >>> data["reach"].nunique(), truth["seed"]
    (5, 7)
    """
    from bayeszi.data import generate_crayfish

    return generate_crayfish.simulate(
        seed=generate_crayfish.DEFAULT_SEED if seed is None else seed, n_reaches=n_reaches,
        n_rivers=n_rivers, barrier_share=barrier_share, sparse_share=sparse_share,
        visits=visits, sparse_visits=sparse_visits, lines_per_visit=lines_per_visit,
    )


def crayfish_true_parts(data: pd.DataFrame, truth: dict[str, Any]) -> tuple[Any, Any]:
    """True NB mean ``mu`` and P(extra zero) ``p`` per row (see ``generate_crayfish``).

    Example
    -------
    >>> mu, p = crayfish_true_parts(load_crayfish(), crayfish_truth())
    >>> len(mu) == len(load_crayfish())
    True
    """
    from bayeszi.data.generate_crayfish import true_parts

    return true_parts(data, truth)
