"""Predictions with uncertainty: expected counts, rates, zero and encounter probabilities.

Every answer is computed per posterior draw in NumPy from the closed forms of
:mod:`bayeszi.families` (or, for ``what="new_count"``, from its random generator), for the
fitted rows or for new rows, and summarised per row. Rows are processed in chunks so that
memory stays bounded whatever the number of rows and draws.

Quantities (``what``):

``mean``             E[Y], the expected count at the row's exposure.
``rate``             E[Y] / exposure, the expected count per unit of effort.
``p_zero``           P(Y = 0).
``p_zeros_part``     the zeros-part probability: P(extra zero) in ``zip`` / ``zinb``,
                     P(Y = 0) in the hurdle families.
``p_nonzero``        P(Y > 0), the encounter probability.
``count_part_mean``  mean of the counts part: mu, the mean when not an extra zero (``zip``,
                     ``zinb``), E[Y | Y > 0] (hurdle), E[Y] (``poisson``, ``negbin``).
``at_least``         P(Y >= k) for the ``k`` given.
``new_count``        a new count drawn from the posterior predictive distribution.

Group modes (``groups``): ``known`` (each row's fitted group effect), ``new`` (effects of
new groups drawn from the population distribution; rows sharing a label share an effect),
``average`` (the quantity averaged over the group distribution: ``n_average`` new-group
draws per posterior draw) and ``typical`` (group effects set to 0, the population centre).
The mode is always named in the output.

Example
-------
>>> import bayeszi as bz                                                # doctest: +SKIP
>>> m = bz.fit(df, counts="crayfish ~ depth", zeros="~ barrier", family="zinb",
...            exposure="trap_nights", groups="reach", seed=1)         # doctest: +SKIP
>>> m.predict(new_df, what="rate", groups="new", seed=2)               # doctest: +SKIP
"""

from __future__ import annotations

from collections.abc import Sequence
from typing import TYPE_CHECKING

import numpy as np
import pandas as pd

from bayeszi.answers.evaluation import (
    GROUP_MODES,
    QUANTITIES,
    check_what,
    evaluate,
    groups_label,
    make_setup,
    prepare_rows,
    quantity_label,
    sampler_note,
    summarise,
)
from bayeszi.base import options
from bayeszi.base.errors import BayesziError
from bayeszi.engine.record import FitRecord

if TYPE_CHECKING:
    import xarray as xr


__all__ = ["QUANTITIES", "GROUP_MODES", "predict", "prediction_draws", "count_distribution"]


def predict(fitted: FitRecord, data: pd.DataFrame | None = None,
            what: str | Sequence[str] = "mean", groups: str = "known", interval: float = 0.9,
            *, k: int | None = None, exposure: float | None = None, n_average: int = 30,
            draws: int | None = None, seed: options.Seed = None) -> pd.DataFrame:
    """Posterior summaries of a quantity for each row of ``data`` (None: the fitted rows).

    Parameters
    ----------
    what : a quantity name or a list of them (see the module docstring): ``mean``, ``rate``,
        ``p_zero``, ``p_zeros_part``, ``p_nonzero``, ``count_part_mean``, ``at_least`` (with
        ``k``) or ``new_count``.
    groups : ``known``, ``new``, ``average`` or ``typical`` (see the module docstring).
    interval : the central interval reported, e.g. 0.9 gives the 5% and 95% columns.
    k : the threshold of ``at_least``: P(Y >= k).
    exposure : one effort for every row (overrides the data's exposure column; for a model
        with an offset column it sets offset = log(exposure)); ``exposure=1`` predicts per
        unit of effort. Needed when the data lack the exposure column.
    n_average : new-group draws per posterior draw for ``groups="average"``.
    draws : use this many posterior draws, evenly spaced (None: all; more than the fit holds
        is an error).
    seed : seeds the random parts (new groups, averages, new counts): a whole number >= 0,
        a NumPy Generator (used as it is) or None.

    Returns
    -------
    DataFrame indexed like ``data`` (one row per input row and quantity) with columns
    ``quantity`` (its plain name), ``groups`` (how group effects entered), ``mean``, ``sd``
    and the interval bounds. ``attrs["sampler_problems"]`` lists any sampler trouble.

    Example
    -------
    >>> m.predict(new_df, what=["mean", "p_zero"], groups="new", seed=1)   # doctest: +SKIP
    """
    whats = check_what(fitted, what, k, groups)
    iv = options.interval_bounds(interval)
    setup = make_setup(fitted, groups, k, draws, seed, n_average)
    rows = prepare_rows(fitted, data, groups, exposure)
    probs = sampler_note(fitted)
    n = rows.encoded.n
    out = {w: np.empty((4, n)) for w in whats}

    def consume(units: np.ndarray, parts: list[dict[str, np.ndarray]]) -> None:
        for w in whats:
            out[w][:, units] = summarise(parts[0][w], iv.lower, iv.upper,
                                         integer=w == "new_count")

    evaluate(setup, rows, whats, [np.arange(n)], consume)
    glabel = groups_label(fitted, groups, setup.n_average)
    lo_name, hi_name = iv.names
    frames = [pd.DataFrame({"quantity": quantity_label(fitted, w, k), "groups": glabel,
                            "mean": out[w][0], "sd": out[w][1], lo_name: out[w][2],
                            hi_name: out[w][3]}, index=rows.index) for w in whats]
    table = frames[0] if len(frames) == 1 else pd.concat(frames)
    table.attrs["sampler_problems"] = probs
    table.attrs["draws"] = setup.n_draws
    return table


def prediction_draws(fitted: FitRecord, data: pd.DataFrame | None = None,
                     what: str = "mean", groups: str = "known", *, k: int | None = None,
                     exposure: float | None = None, n_average: int = 30,
                     draws: int | None = None, seed: options.Seed = None) -> xr.DataArray:
    """The draws behind :func:`predict` as an ``xarray.DataArray`` with dims (draw, row).

    Memory is draws x rows x 8 bytes (4,000 draws x 10,000 rows: 320 MB); use ``draws=``
    to thin. In ``groups="new"`` mode rows that share a group label share its drawn effect
    in every draw, so sums over rows are valid draws of a total.

    Example
    -------
    >>> d = m.prediction_draws(new_df, what="new_count", groups="new", seed=1)  # doctest: +SKIP
    >>> d.sum("row").quantile([0.05, 0.95])   # interval for the total catch  # doctest: +SKIP
    """
    import xarray as xr

    if not isinstance(what, str):
        raise BayesziError(f"prediction_draws takes one quantity name, got {what!r}; call it "
                           "once per quantity")
    whats = check_what(fitted, what, k, groups)
    setup = make_setup(fitted, groups, k, draws, seed, n_average)
    rows = prepare_rows(fitted, data, groups, exposure)
    probs = sampler_note(fitted)
    n = rows.encoded.n
    dtype = np.int64 if what == "new_count" else np.float64
    out = np.empty((setup.n_draws, n), dtype=dtype)

    def consume(units: np.ndarray, parts: list[dict[str, np.ndarray]]) -> None:
        out[:, units] = parts[0][what]

    evaluate(setup, rows, whats, [np.arange(n)], consume)
    return xr.DataArray(
        out, dims=("draw", "row"),
        coords={"draw": setup.draw_ids, "row": np.asarray(rows.index)},
        name=what,
        attrs={"quantity": quantity_label(fitted, what, k),
               "groups": groups_label(fitted, groups, setup.n_average),
               "sampler_problems": "; ".join(probs)},
    )


def count_distribution(fitted: FitRecord, data: pd.DataFrame | None = None, kmax: int = 10,
                       groups: str = "known", *, exposure: float | None = None,
                       n_average: int = 30, draws: int | None = None,
                       seed: options.Seed = None) -> pd.DataFrame:
    """Posterior predictive P(Y = 0), ..., P(Y = kmax) and P(Y > kmax) for each row.

    Closed forms (the family's pmf) averaged over posterior draws, so no simulation noise
    except from new-group or average draws. Columns add up to 1 per row.

    Example
    -------
    >>> m.count_distribution(new_df, kmax=5, groups="new", seed=1)      # doctest: +SKIP
    """
    kmax = options.check_whole(kmax, "kmax", least=0, example=10)
    setup = make_setup(fitted, groups, None, draws, seed, n_average)
    rows = prepare_rows(fitted, data, groups, exposure)
    probs = sampler_note(fitted)
    n = rows.encoded.n
    key = f"pmf:{int(kmax)}"
    out = np.empty((n, kmax + 1))

    def consume(units: np.ndarray, parts: list[dict[str, np.ndarray]]) -> None:
        out[units] = parts[0][key].mean(axis=0)

    evaluate(setup, rows, [key], [np.arange(n)], consume, width=kmax + 1)
    cols = {f"P(Y = {j})": out[:, j] for j in range(kmax + 1)}
    cols[f"P(Y > {kmax})"] = np.clip(1.0 - out.sum(axis=1), 0.0, 1.0)
    table = pd.DataFrame(cols, index=rows.index)
    table.insert(0, "groups", groups_label(fitted, groups, setup.n_average))
    table.attrs["sampler_problems"] = probs
    return table
