"""Readable labels for the columns of a design matrix.

The formula library names an indicator column after its factor expression and coding
(``C(substrate)[T.gravel]``); people read :func:`term_labels` instead: the column, the level
and the level it is compared with (``substrate: gravel (vs cobble)``), and the pieces of an
interaction joined by ``×`` (``depth × substrate: gravel (vs cobble)``). A text column
written without ``C()`` gets the same label as with it. Numeric terms, transforms and the
intercept keep the name written in the formula.

Example
-------
>>> import pandas as pd
>>> from formulaic import model_matrix
>>> df = pd.DataFrame({"x": [0.1, 0.5, 0.9, 0.2], "s": list("abab")})
>>> term_labels(model_matrix("x * s", df).model_spec)
['Intercept', 'x', 's: b (vs a)', 'x × s: b (vs a)']
"""

from __future__ import annotations

import re
from typing import Any

#: Joins the pieces of an interaction term in a label.
TIMES = " × "

_C_CALL = re.compile(r"^C\(\s*(`[^`]*`|[^,()]+?)\s*[,)]")


def variable_of(expr: str) -> str:
    """The column a factor expression encodes: ``C(substrate, ...)`` -> ``substrate``.

    >>> variable_of("C(substrate)"), variable_of("C(`river name`, levels=['a'])")
    ('substrate', 'river name')
    """
    m = _C_CALL.match(expr)
    return m.group(1).strip("`") if m else expr


def _reference(state: dict[str, Any]) -> str | None:
    """The reference level of a treatment-coded factor's encoder state, else None."""
    contrasts = state.get("contrasts")
    coding = getattr(contrasts, "contrasts", None)
    levels = list(getattr(contrasts, "levels", None) or state.get("categories") or [])
    if type(coding).__name__ != "TreatmentContrasts" or not levels:
        return None
    base = getattr(coding, "base", None)
    if base is None or type(base).__name__ == "Sentinel":  # formulaic's UNSET: first level
        return str(levels[0])
    return str(base)


def _piece(expr: str, inner: str | None, states: dict[str, Any]) -> str:
    """The label of one factor of a column: ``expr`` with its bracketed coding ``inner``."""
    if inner is None:
        return expr
    var = variable_of(expr)
    state = states.get(expr, (None, {}))[1] or {}
    if inner.startswith("T."):
        ref = _reference(state)
        level = inner[2:]
        return f"{var}: {level} (vs {ref})" if ref is not None else f"{var}: {level}"
    if inner.startswith("S."):
        return f"{var}: {inner[2:]} (vs the mean of all levels)"
    return f"{var}: {inner}"


def _split(column: str, factors: list[str]) -> list[tuple[str, str | None]] | None:
    """Cut a column name into (factor expression, bracket content) pairs; None when the name
    does not have the expected shape."""
    out: list[tuple[str, str | None]] = []
    rest = column
    for i, expr in enumerate(factors):
        if not rest.startswith(expr):
            return None
        rest = rest[len(expr):]
        inner = None
        if rest.startswith("["):
            last = i == len(factors) - 1
            end = len(rest) - 1 if last else rest.find("]:" + factors[i + 1])
            if end < 0 or rest[end] != "]":
                return None
            inner, rest = rest[1:end], rest[end + 1:]
        out.append((expr, inner))
        if i < len(factors) - 1:
            if not rest.startswith(":"):
                return None
            rest = rest[1:]
    return out if rest == "" else None


def term_labels(model_spec: Any) -> list[str]:
    """One readable label per column of ``model_spec`` (a formulaic ``ModelSpec``), in column
    order; a column whose name cannot be read keeps its name. See the module example."""
    states = dict(getattr(model_spec, "encoder_state", {}) or {})
    labels: list[str] = []
    for block in model_spec.structure:
        factors = [str(f.expr) for f in block.term.factors]
        for column in block.columns:
            column = str(column)
            pieces = _split(column, factors) if factors != ["1"] else None
            if pieces is None:
                labels.append(column)
            else:
                labels.append(TIMES.join(_piece(e, inner, states) for e, inner in pieces))
    return labels


_INDICATOR = re.compile(r"^(?P<var>.+?): (?P<level>.+) \(vs (?P<ref>.+)\)$")


def indicator_parts(label: str) -> tuple[str, str, str] | None:
    """(column, level, reference level) of a label of one level's indicator, else None.

    >>> indicator_parts("substrate: gravel (vs cobble)"), indicator_parts("depth")
    (('substrate', 'gravel', 'cobble'), None)
    """
    m = _INDICATOR.match(label) if TIMES not in label else None
    return (m["var"], m["level"], m["ref"]) if m else None


def unique_labels(labels: list[str], terms: list[str]) -> list[str]:
    """``labels``, except that a label shared by two columns, or equal to another column's
    term name, falls back to the column's own term name (so every label names one column).

    >>> unique_labels(["a", "a", "c"], ["t1", "t2", "t3"])
    ['t1', 't2', 'c']
    """
    out = []
    for j, lab in enumerate(labels):
        clash = labels.count(lab) > 1 or (lab in terms and terms.index(lab) != j)
        out.append(terms[j] if clash else lab)
    return out
