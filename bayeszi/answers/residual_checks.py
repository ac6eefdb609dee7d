"""What the randomized quantile residuals say, as numbers: PIT band, binned means, statistics.

The residuals themselves come from :func:`bayeszi.answers.checks.residuals` (Dunn & Smyth
1996): under the model their PIT values u are uniform on (0, 1) and the residuals standard
normal. This module turns them into what the residual figure draws and the report tabulates:

- :func:`uniform_ecdf_band` and :func:`pit_ecdf`: the empirical distribution function of the
  PIT values minus u, on a fixed grid, with a simultaneous band that the ECDF of n uniform
  values stays inside with probability 0.95;
- :func:`residual_predictor` and :func:`binned_residuals`: the mean residual in equal-count
  bins of a predictor the user picks, with +-2 standard errors;
- :func:`residual_statistics`: the numbers (mean, sd, shares beyond +-2 and +-3, the largest
  ECDF gap and its Kolmogorov-Smirnov p-value, the share of the grid outside the band).

Example
-------
>>> import numpy as np, pandas as pd
>>> x = pd.Series([5.0, 1.0, 4.0, 2.0, 6.0, 3.0], name="depth")
>>> r = np.array([0.5, -1.0, 0.0, 1.0, 1.5, 2.0])
>>> binned_residuals(r, x, bins=3)["mean residual"].tolist()
[0.0, 1.0, 1.0]
"""

from __future__ import annotations

from functools import lru_cache
from typing import Any

import numpy as np
import pandas as pd
from scipy import stats

from bayeszi.base.errors import BayesziError

__all__ = [
    "BAND_LEVEL",
    "binned_residuals",
    "default_bins",
    "pit_ecdf",
    "residual_predictor",
    "residual_statistics",
    "uniform_ecdf_band",
]

#: probability that the ECDF of n uniform values stays inside the whole band
BAND_LEVEL = 0.95
#: most points of the grid the ECDF is compared with the band on
GRID_POINTS = 100
#: seed and number of simulated uniform samples behind the band (fixed: the band is the same
#: for every call with the same n)
BAND_SEED = 20240917
BAND_TRIALS = 1000
#: records per bin the default number of bins aims at, and the most bins
RECORDS_PER_BIN = 30
MAX_BINS = 20
#: most levels of a text column drawn one bin per level
MAX_LEVELS = 40
#: the default predictor (``against=None``)
DEFAULT_PREDICTOR = "log expected count"


# =============================================================================================
# The PIT values against the uniform
# =============================================================================================


def _grid(n: int) -> np.ndarray:
    """Interior grid j/K, j = 1..K-1, with K = min(n, GRID_POINTS): fixed before the data."""
    k = min(int(n), GRID_POINTS)
    return np.arange(1, k) / k


@lru_cache(maxsize=16)
def _band_counts(n: int, level: float) -> tuple[np.ndarray, np.ndarray]:
    # Simultaneous band for the ECDF of n uniform values (Sailynoja, Buerkner & Vehtari 2022,
    # Statistics and Computing 32:32): pointwise binomial intervals whose common level is
    # raised, by simulating BAND_TRIALS uniform samples with a fixed seed, until the ECDF
    # stays inside all of them together with probability ``level``. ArviZ's helper does it.
    from arviz.stats.ecdf_utils import ecdf_confidence_band

    grid = _grid(n)
    lower, upper = ecdf_confidence_band(
        n, grid, grid, prob=level, method="simulated", rvs=stats.uniform(0, 1).rvs,
        num_trials=BAND_TRIALS, random_state=np.random.default_rng(BAND_SEED))
    return np.rint(lower * n).astype(np.int64), np.rint(upper * n).astype(np.int64)


def uniform_ecdf_band(n: int, level: float = BAND_LEVEL) -> pd.DataFrame:
    """The simultaneous ``level`` band for the ECDF of ``n`` independent uniform values.

    One row per grid point u = j/K (j = 1..K-1, K = min(n, 100)); ``lower`` and ``upper``
    bound the ECDF there. The ECDF of n uniform values stays inside at every grid point at
    once with probability ``level`` (by simulation with a fixed seed, so the band of a given
    n is always the same). Empty for n < 2.

    Example
    -------
    >>> band = uniform_ecdf_band(200)
    >>> len(band), bool((band["lower"] < band["u"]).all() and (band["u"] < band["upper"]).all())
    (99, True)
    """
    n = int(n)
    if not 0 < level < 1:
        raise BayesziError(f"level must lie strictly between 0 and 1, got {level!r}")
    if n < 2:
        return pd.DataFrame({"u": [], "lower": [], "upper": []})
    lo, hi = _band_counts(n, float(level))
    return pd.DataFrame({"u": _grid(n), "lower": lo / n, "upper": hi / n})


def pit_ecdf(pit: Any, level: float = BAND_LEVEL) -> pd.DataFrame:
    """ECDF of the PIT values on the grid of :func:`uniform_ecdf_band`, against its band.

    Columns: ``u``, ``ECDF`` (share of PIT values <= u), ``ECDF - u``, ``lower - u``,
    ``upper - u`` and ``outside`` (True where the ECDF leaves the band).

    Example
    -------
    >>> tab = pit_ecdf(np.random.default_rng(1).uniform(size=300))
    >>> list(tab.columns)
    ['u', 'ECDF', 'ECDF - u', 'lower - u', 'upper - u', 'outside']
    """
    u = np.sort(np.asarray(pit, dtype=np.float64))
    u = u[np.isfinite(u)]
    band = uniform_ecdf_band(u.size, level)
    grid = band["u"].to_numpy()
    count = np.searchsorted(u, grid, side="right")
    n = max(u.size, 1)
    outside = (count < np.rint(band["lower"].to_numpy() * n)) | \
              (count > np.rint(band["upper"].to_numpy() * n))
    out = pd.DataFrame({"u": grid, "ECDF": count / n, "ECDF - u": count / n - grid,
                        "lower - u": band["lower"] - grid, "upper - u": band["upper"] - grid,
                        "outside": outside})
    out.attrs.update(level=level, records=int(u.size))
    return out


def residual_statistics(res: pd.DataFrame, level: float = BAND_LEVEL) -> dict[str, float]:
    """The numbers the residual figure leaves out, for a :func:`~bayeszi.answers.checks.residuals`
    table.

    ``mean residual`` and ``sd of residuals`` (0 and 1 under the model), the shares beyond
    +-2 and +-3 (4.6% and 0.3% for standard normal values), ``largest ECDF gap (KS
    distance)``: the largest distance between the ECDF of the PIT values and the uniform
    distribution function, with its Kolmogorov-Smirnov p-value (``scipy.stats.kstest``), and
    the share of the grid where the ECDF is outside the simultaneous ``level`` band.

    Example
    -------
    >>> res = pd.DataFrame({"PIT": np.linspace(0.005, 0.995, 100)})
    >>> res["residual"] = stats.norm.ppf(res["PIT"])
    >>> round(residual_statistics(res)["largest ECDF gap (KS distance)"], 3)
    0.005
    """
    r = res["residual"].to_numpy(dtype=np.float64)
    pit = res["PIT"].to_numpy(dtype=np.float64)
    n = r.size
    ks = stats.kstest(pit, "uniform") if n else None
    ecdf = pit_ecdf(pit, level)
    pct = f"{100 * level:g}%"
    return {
        "records": n,
        "mean residual": float(r.mean()) if n else float("nan"),
        "sd of residuals": float(r.std(ddof=1)) if n > 1 else float("nan"),
        "share beyond +-2": float(np.mean(np.abs(r) > 2)) if n else float("nan"),
        "share beyond +-3": float(np.mean(np.abs(r) > 3)) if n else float("nan"),
        "largest ECDF gap (KS distance)": float(ks.statistic) if ks else float("nan"),
        "p-value of that gap (KS test)": float(ks.pvalue) if ks else float("nan"),
        f"share of ECDF outside the {pct} band": float(ecdf["outside"].mean())
        if len(ecdf) else float("nan"),
    }


# =============================================================================================
# Binned residuals against a predictor
# =============================================================================================


def residual_predictor(res: pd.DataFrame, against: Any = None,
                       data: pd.DataFrame | None = None) -> pd.Series:
    """The values to bin the residuals of ``res`` by, one per record, as a named Series.

    ``against=None``: the log of the posterior mean of E[Y] (``expected count``). A column
    name: that column of ``data`` (the data the model was fitted to; the rows of ``res`` are
    picked by their labels), or else a column of ``res`` (``y``, ``expected count``). A
    Series is aligned on the row labels of ``res``; an array must hold one value per record.

    Example
    -------
    >>> res = pd.DataFrame({"expected count": [1.0, np.e], "residual": [0.1, -0.2]})
    >>> residual_predictor(res).round(3).tolist()
    [0.0, 1.0]
    """
    if against is None:
        mu = res["expected count"].to_numpy(dtype=np.float64)
        with np.errstate(divide="ignore"):
            return pd.Series(np.log(mu), index=res.index, name=DEFAULT_PREDICTOR)
    if isinstance(against, str):
        if data is not None and against in data.columns:
            return _aligned(data[against], res.index, against)
        if against in res.columns and against not in ("residual", "PIT", "PIT low",
                                                      "PIT high"):
            return res[against].rename(against)
        avail = [str(c) for c in data.columns] if data is not None else ["y", "expected count"]
        raise BayesziError(
            f"against={against!r} is not a column of the data; columns available: {avail}. "
            "Pass one of them (the residuals are binned by its values)")
    if isinstance(against, pd.Series):
        name = str(against.name) if against.name is not None else "against"
        return _aligned(against, res.index, name)
    arr = np.asarray(against)
    if arr.ndim != 1 or arr.shape[0] != len(res):
        raise BayesziError(f"against: an array needs one value per fitted record ({len(res)}), "
                           f"got shape {arr.shape}; pass a column name instead")
    return pd.Series(arr, index=res.index, name="against")


def _aligned(values: pd.Series, index: pd.Index, name: str) -> pd.Series:
    """``values`` picked by the row labels ``index`` (matched as text when needed)."""
    if values.index.equals(index):
        return values.rename(name)
    if values.index.is_unique and index.isin(values.index).all():
        return values.reindex(index).rename(name)
    text = pd.Series(values.to_numpy(), index=values.index.astype(str))
    if text.index.is_unique and index.astype(str).isin(text.index).all():
        return pd.Series(text.reindex(index.astype(str)).to_numpy(), index=index, name=name)
    raise BayesziError(f"against={name!r}: its rows do not cover the fitted records; pass a "
                       "column of the data frame the model was fitted to")


def default_bins(n: int) -> int:
    """Bins for ``n`` records: about 30 records each (so each bin's mean residual is close to
    normal and its standard error steady; common practice), between 1 and 20 bins.

    Example
    -------
    >>> default_bins(100), default_bins(1500), default_bins(20)
    (3, 20, 1)
    """
    return int(min(max(int(n) // RECORDS_PER_BIN, 1), MAX_BINS))


def binned_residuals(residual: Any, predictor: pd.Series, bins: int | None = None
                     ) -> pd.DataFrame:
    """Mean residual per bin of ``predictor``, with +-2 standard errors.

    A numeric predictor is cut into ``bins`` bins of equal numbers of records (sorted by the
    predictor; tied values may fall in neighbouring bins), unless it takes at most ``bins``
    distinct values (with ``bins=None``: at most 20), when each value gets its own bin, as
    does each level of a text or category predictor (at most 40 levels). Records without a
    predictor value are left out (their number is ``attrs["left out"]``). ``bins=None``:
    :func:`default_bins` of the records.

    Columns: ``bin``, ``records``, ``predictor low``, ``predictor high``, ``predictor mean``
    (NaN for text), ``mean residual``, ``standard error`` (sd within the bin over the square
    root of its records; NaN for a bin of one), ``mean - 2 se`` and ``mean + 2 se``.

    Example
    -------
    >>> t = binned_residuals([1.0, 3.0, -1.0, 1.0], pd.Series([1, 2, 3, 4], name="x"), bins=2)
    >>> t[["records", "mean residual", "standard error"]].to_numpy().tolist()
    [[2.0, 2.0, 1.0], [2.0, 0.0, 1.0]]
    """
    r = np.asarray(residual, dtype=np.float64)
    x = pd.Series(np.asarray(predictor), name=predictor.name)
    if r.shape != (len(x),):
        raise BayesziError(f"binned_residuals: {r.size} residuals but {len(x)} predictor values")
    keep = x.notna().to_numpy() & np.isfinite(r)
    numeric = pd.api.types.is_numeric_dtype(x) and not pd.api.types.is_bool_dtype(x)
    if numeric:
        keep &= np.isfinite(x.to_numpy(dtype=np.float64, na_value=np.nan))
    r, x = r[keep], x[keep].reset_index(drop=True)
    k = default_bins(r.size) if bins is None else int(bins)
    if k < 1:
        raise BayesziError(f"bins must be a whole number >= 1 or None, got {bins!r}")
    members, kind = _members(x, k, MAX_BINS if bins is None else k, numeric)
    rows = [_bin_row(r[idx], x.iloc[idx], label, numeric) for label, idx in members]
    table = pd.DataFrame(rows, columns=["bin", "records", "predictor low", "predictor high",
                                        "predictor mean", "mean residual", "standard error",
                                        "mean - 2 se", "mean + 2 se"])
    table.attrs.update(predictor=str(predictor.name), kind=kind,
                       **{"left out": int((~keep).sum())})
    return table


def _members(x: pd.Series, k: int, few: int, numeric: bool
             ) -> tuple[list[tuple[str, np.ndarray]], str]:
    """(label, record positions) per bin, and what the bins are: ``k`` equal-count bins, or
    one per value when there are at most ``few`` values."""
    if numeric:
        values = x.to_numpy(dtype=np.float64)
        distinct = np.unique(values)
        if distinct.size > few:
            order = np.argsort(values, kind="stable")
            parts = [p for p in np.array_split(order, k) if p.size]
            return [(str(i + 1), np.sort(p)) for i, p in enumerate(parts)], "equal-count bins"
        return [(f"{v:g}", np.flatnonzero(values == v)) for v in distinct], "values"
    labels = x.astype(str).to_numpy()
    levels = sorted(set(labels))
    if len(levels) > MAX_LEVELS:
        raise BayesziError(
            f"against={x.name!r} has {len(levels)} distinct text values, too many to show one "
            f"by one (at most {MAX_LEVELS}); pick a numeric column or one with fewer levels")
    return [(lv, np.flatnonzero(labels == lv)) for lv in levels], "levels"


def _bin_row(r: np.ndarray, x: pd.Series, label: str, numeric: bool) -> list[Any]:
    n = r.size
    mean = float(r.mean())
    se = float(r.std(ddof=1) / np.sqrt(n)) if n > 1 else float("nan")
    if numeric:
        xv = x.to_numpy(dtype=np.float64)
        low, high, centre = float(xv.min()), float(xv.max()), float(xv.mean())
    else:
        low = high = centre = float("nan")
    return [label, n, low, high, centre, mean, se, mean - 2 * se, mean + 2 * se]
