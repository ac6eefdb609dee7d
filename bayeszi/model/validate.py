"""Checks on the user's data frame, each failing with a :class:`BayesziError` that says what
is wrong (column, first rows) and how to fix it.

Example
-------
>>> import pandas as pd
>>> from bayeszi.model.validate import check_columns
>>> check_columns(pd.DataFrame({"y": [0, 1]}), ["y"], role="response")
"""

from __future__ import annotations

import warnings
from collections.abc import Iterable, Sequence

import numpy as np
import pandas as pd

from bayeszi.base import names
from bayeszi.base.errors import BayesziError, BayesziWarning


def rows_text(index: pd.Index, mask: np.ndarray, most: int = 5) -> str:
    """The row labels where ``mask`` holds, at most ``most`` of them, for messages.

    Example
    -------
    >>> rows_text(pd.Index(list("abcdefg")), np.array([1, 0, 1, 1, 1, 1, 1, 1][:7], bool))
    'a, c, d, e, f and 1 more'
    """
    labels = list(index[np.asarray(mask)][:most])
    more = int(np.sum(mask)) - len(labels)
    text = ", ".join(str(v) for v in labels)
    return text + (f" and {more} more" if more > 0 else "")


def check_frame(data: object) -> pd.DataFrame:
    """Return ``data`` as a DataFrame, refusing anything else and empty frames."""
    if not isinstance(data, pd.DataFrame):
        raise BayesziError(
            f"data must be a pandas DataFrame, got {type(data).__name__}; "
            "read your file with pandas.read_csv first"
        )
    if len(data) == 0:
        raise BayesziError("data has no rows; check the file or the filter that produced it")
    if not data.columns.is_unique:
        dup = sorted({str(c) for c in data.columns[data.columns.duplicated()]})
        raise BayesziError(f"data has duplicated column names {dup}; rename them")
    return data


def check_columns(data: pd.DataFrame, columns: Iterable[str], role: str) -> None:
    """Fail if any of ``columns`` is missing from ``data``, listing close matches."""
    import difflib

    missing = [c for c in columns if c not in data.columns]
    if missing:
        c = missing[0]
        near = difflib.get_close_matches(str(c), [str(x) for x in data.columns], n=3)
        hint = f" Did you mean {near}?" if near else ""
        raise BayesziError(
            f"column {c!r} ({role}) is not in the data. Columns present: "
            f"{[str(x) for x in data.columns][:20]}.{hint}"
        )


def check_kinds(data: pd.DataFrame, columns: Sequence[str], role: str) -> None:
    """Refuse column types a formula, response or exposure cannot use as numbers: complex
    numbers, dates and times, periods, intervals, and cells holding lists or dicts.

    Example
    -------
    >>> when = pd.DataFrame({"day": pd.to_datetime(["2024-05-01", "2024-05-02"])})
    >>> check_kinds(when, ["day"], role="counts formula")  # doctest: +ELLIPSIS
    Traceback (most recent call last):
    ...
    bayeszi.base.errors.BayesziError: column 'day' (counts formula) holds dates, times or ...
    """
    for c in dict.fromkeys(columns):
        s = data[c]
        dt = s.dtype
        if pd.api.types.is_complex_dtype(dt):
            raise BayesziError(
                f"column {c!r} ({role}) holds complex numbers; give real numbers (e.g. "
                f"data[{c!r}].to_numpy().real if the imaginary parts are all 0)"
            )
        if pd.api.types.is_datetime64_any_dtype(dt) or pd.api.types.is_timedelta64_dtype(dt) \
                or isinstance(dt, (pd.PeriodDtype, pd.IntervalDtype)):
            raise BayesziError(
                f"column {c!r} ({role}) holds dates, times or intervals ({dt}); turn it into a "
                f"number first, e.g. data[{c!r}].dt.dayofyear or the days since a start date, "
                f"or into text labels for a category (data[{c!r}].astype(str))"
            )
        if pd.api.types.is_object_dtype(dt):
            odd = s.map(lambda v: isinstance(v, (list, dict, set, tuple, bytes))).to_numpy()
            if odd.any():
                raise BayesziError(
                    f"column {c!r} ({role}) holds lists, tuples, dicts or bytes in its cells, "
                    f"first at row(s) {rows_text(data.index, odd)}; each cell must be one number "
                    "or one text label"
                )


def check_finite(data: pd.DataFrame, columns: Sequence[str], role: str) -> None:
    """Fail on missing values (any column) or infinities (numeric columns)."""
    for c in columns:
        s = data[c]
        bad = s.isna().to_numpy()
        if pd.api.types.is_numeric_dtype(s) and not pd.api.types.is_bool_dtype(s):
            bad = bad | ~np.isfinite(s.to_numpy(dtype=float, na_value=np.nan))
        if bad.any():
            raise BayesziError(
                f"column {c!r} ({role}) has {int(bad.sum())} missing or infinite value(s), "
                f"first at row(s) {rows_text(data.index, bad)}; drop or fill those rows first"
            )


def looks_numeric_text(s: pd.Series) -> bool:
    """True when an object/string column holds numbers written as text."""
    if pd.api.types.is_numeric_dtype(s) or pd.api.types.is_bool_dtype(s):
        return False
    vals = s.dropna()
    if len(vals) == 0:
        return False
    conv = pd.to_numeric(vals.astype(str), errors="coerce")
    return bool(conv.notna().mean() > 0.8)


def check_response(data: pd.DataFrame, column: str, zeros_kind: str | None) -> np.ndarray:
    """Return the response as int64, failing on text, negatives, fractions or constants."""
    s = data[column]
    if not (pd.api.types.is_numeric_dtype(s) or pd.api.types.is_bool_dtype(s)):
        raise BayesziError(
            f"response column {column!r} holds text ({s.dtype}); counts must be numbers. "
            "Convert it with pandas.to_numeric and check the rows that fail"
        )
    if pd.api.types.is_bool_dtype(s):
        raise BayesziError(
            f"response column {column!r} holds True/False: presence/absence (detected or "
            "not), not counts. bayeszi's families model counts 0, 1, 2, ...; a yes/no outcome "
            "needs a Bernoulli (logistic) model, which bayeszi does not fit. If you have the "
            "counts behind it, use them; if the column really is a count of 0 or 1, convert "
            f"it with data[{column!r}].astype(int)"
        )
    y = s.to_numpy(dtype=float)
    neg = y < 0
    if neg.any():
        raise BayesziError(
            f"response column {column!r} has negative values at row(s) "
            f"{rows_text(data.index, neg)}; counts must be 0, 1, 2, ..."
        )
    frac = y != np.round(y)
    if frac.any():
        raise BayesziError(
            f"response column {column!r} has non-integer values at row(s) "
            f"{rows_text(data.index, frac)}; counts must be whole numbers (if these are rates, "
            "give the raw counts and put the effort in exposure=)"
        )
    if y.max() > 2**53:
        raise BayesziError(
            f"response column {column!r} has counts above 2^53 (about 9e15), which cannot be "
            "held exactly; check the column for a unit or reading error (a count that large "
            "is rarely a count)"
        )
    if np.all(y == y[0]):
        raise BayesziError(
            f"response column {column!r} is constant (every value is {y[0]:g}); there is "
            "nothing to model. Check the column and the rows selected"
        )
    if y.size >= 20 and y.max() == 1:
        warnings.warn(
            f"response column {column!r} holds only 0 and 1: if it records presence/absence "
            "rather than counts, a count model is the wrong tool (use a Bernoulli/logistic "
            "model); if these are real counts that never exceed 1, the count part is barely "
            "identified and its dispersion rests on the prior",
            BayesziWarning,
            stacklevel=3,
        )
    if not np.any(y == 0):
        if zeros_kind == "hurdle":
            raise BayesziError(
                f"response column {column!r} has no zeros, so a hurdle family cannot estimate "
                f"{names.PROB_ZERO}; use 'poisson' or 'negbin' instead"
            )
        if zeros_kind == "inflation":
            warnings.warn(
                f"response column {column!r} has no zeros; the extra-zero probability will be "
                "pushed toward 0 by the data and mostly reflects its prior. Consider 'poisson' "
                "or 'negbin'",
                BayesziWarning,
                stacklevel=3,
            )
    return y.astype(np.int64)


def check_exposure(data: pd.DataFrame, column: str) -> np.ndarray:
    """Return positive finite exposure values, or fail naming the rows."""
    s = data[column]
    if not pd.api.types.is_numeric_dtype(s) or pd.api.types.is_bool_dtype(s):
        raise BayesziError(
            f"exposure column {column!r} is not numeric ({s.dtype}); it must hold the effort "
            "(trap nights, hours, ...) as positive numbers"
        )
    e = s.to_numpy(dtype=float, na_value=np.nan)
    bad = ~np.isfinite(e) | (e <= 0)
    if bad.any():
        raise BayesziError(
            f"exposure column {column!r} has missing, zero or negative values at row(s) "
            f"{rows_text(data.index, bad)}; effort must be positive. Drop those rows or fix the "
            "effort"
        )
    return e


def check_offset(data: pd.DataFrame, column: str) -> np.ndarray:
    """Return a finite log-offset column, or fail naming the rows."""
    s = data[column]
    if not pd.api.types.is_numeric_dtype(s) or pd.api.types.is_bool_dtype(s):
        raise BayesziError(f"offset column {column!r} is not numeric ({s.dtype}); an offset holds "
                           "the log of each record's effort as a number")
    o = s.to_numpy(dtype=float, na_value=np.nan)
    bad = ~np.isfinite(o)
    if bad.any():
        raise BayesziError(
            f"offset column {column!r} has missing or infinite values at row(s) "
            f"{rows_text(data.index, bad)}; an offset is a log effort, so a zero effort gives "
            "-inf: drop those rows"
        )
    return o
