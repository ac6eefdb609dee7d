"""Formulas to numeric matrices, with the encoding kept for new data.

:func:`build_design` turns a data frame and a :class:`~bayeszi.base.spec.ModelSpec` into a
:class:`Design`: the response, the log offset, one matrix per part (columns named by term,
on the user's own scale), the centring and scaling the sampler uses inside, and the group
codes. :meth:`Design.encode` encodes new data exactly as the fitted data were encoded (same
factor levels, same columns), refusing unseen levels with the list of known ones.

Example
-------
>>> import pandas as pd
>>> from bayeszi.base.spec import ModelSpec
>>> from bayeszi.model.design import build_design
>>> df = pd.DataFrame({"y": [0, 1, 3, 0], "x": [0.1, 0.5, 0.9, 0.2], "s": list("abab")})
>>> d = build_design(df, ModelSpec(counts="y ~ x + C(s)", family="zip"))
>>> d.counts.terms
['Intercept', 'x', 'C(s)[T.b]']
>>> d.counts.labels
['Intercept', 'x', 's: b (vs a)']

Text and category columns are categories with or without ``C()``; the first level (in sorted
order, or the category order of a pandas Categorical) is the reference. Terms keep the
formula library's names inside (they index the stored draws); people read the labels of
:func:`bayeszi.model.term_labels.term_labels`, and :meth:`PartDesign.term_of` accepts
either.
"""

from __future__ import annotations

import re
import warnings
from dataclasses import dataclass, field
from typing import Any

import numpy as np
import pandas as pd
from formulaic import Formula, model_matrix
from formulaic.errors import FormulaicError

from bayeszi.base import names
from bayeszi.base.errors import BayesziError
from bayeszi.base.spec import ModelSpec
from bayeszi.families import get_family
from bayeszi.model import validate as V
from bayeszi.model.term_labels import term_labels, unique_labels


@dataclass
class PartDesign:
    """One part's design matrix on the user's scale, with the sampler's internal scaling.

    ``X_std = (X - center) / scale``; the intercept column keeps center 0 and scale 1.
    ``terms`` are the formula library's column names (the coordinates of the draws);
    ``labels`` are what people read, one per term (see :mod:`bayeszi.model.term_labels`).
    """

    part: str
    rhs: str
    terms: list[str]
    X: np.ndarray
    center: np.ndarray
    scale: np.ndarray
    intercept: int | None
    model_spec: Any = field(repr=False, default=None)
    labels: list[str] = field(default_factory=list)

    def __post_init__(self) -> None:
        if len(self.labels) != len(self.terms):
            self.labels = list(self.terms)

    def label(self, term: str) -> str:
        """The readable label of ``term`` (a term name; anything else is returned as is)."""
        return self.labels[self.terms.index(term)] if term in self.terms else term

    def term_of(self, key: str) -> str | None:
        """The term named by ``key``, a term name or a label; None when neither."""
        if key in self.terms:
            return key
        return self.terms[self.labels.index(key)] if key in self.labels else None

    @property
    def X_std(self) -> np.ndarray:
        """The centred and scaled matrix the sampler sees."""
        return (self.X - self.center) / self.scale

    def to_user_scale(self, b_std: np.ndarray) -> np.ndarray:
        """Map coefficients on the internal scale (last axis = terms) to the user's scale."""
        beta = b_std / self.scale
        if self.intercept is not None:
            shift = np.tensordot(beta, self.center, axes=([-1], [0]))
            beta = beta.copy()
            beta[..., self.intercept] = beta[..., self.intercept] - shift
        return beta


@dataclass
class GroupDesign:
    """Codes of one grouping column (nested groups get combined labels ``outer/inner``)."""

    name: str
    levels: list[str]
    codes: np.ndarray
    counts_per_level: np.ndarray


@dataclass
class Design:
    """Everything numeric a model needs, and how to encode new rows the same way."""

    spec: ModelSpec
    n: int
    y: np.ndarray
    log_offset: np.ndarray
    counts: PartDesign
    zeros: PartDesign | None
    groups: list[GroupDesign]
    levels: dict[str, list[str]]
    used_columns: list[str]
    index: pd.Index
    #: formula variables that were numeric when fitting, with their (min, max) there
    ranges: dict[str, tuple[float, float]] = field(default_factory=dict)

    def parameter_labels(self) -> dict[str, str]:
        """Diagnostics-table keys of the coefficients whose term has a label of its own,
        mapped to the key people read: ``counts_coef[C(s)[T.b]]`` -> ``counts_coef[s: b (vs
        a)]``."""
        out = {}
        for pdes in (self.counts, self.zeros):
            if pdes is None:
                continue
            for term, label in zip(pdes.terms, pdes.labels, strict=True):
                if label != term:
                    out[names.summary_key(names.coef(pdes.part), term)] = \
                        names.summary_key(names.coef(pdes.part), label)
        return out

    def encode(self, data: pd.DataFrame, *, need_exposure: bool = True) -> EncodedRows:
        """Encode new rows like the fitted data; unknown groups get code -1."""
        data = V.check_frame(data)
        needed = [c for c in self.used_columns if c != self.spec.response]
        needed = [c for c in needed if c not in self.spec.groups]
        if not need_exposure:
            needed = [c for c in needed if c not in (self.spec.exposure, self.spec.offset)]
        V.check_columns(data, needed, role="needed by the fitted model")
        V.check_kinds(data, [c for c in needed if c in self.ranges or c in
                             (self.spec.exposure, self.spec.offset)],
                      role="needed by the fitted model")
        V.check_finite(data, needed, role="needed by the fitted model")
        _check_still_numeric(data, self.ranges)
        data = _tidy_categories(data, list(self.levels))
        for col, known in self.levels.items():
            if col not in data.columns:
                continue
            vals = data[col].astype(str)
            unseen = sorted(set(vals) - set(known))
            if unseen:
                raise BayesziError(
                    f"column {col!r} has level(s) {unseen[:10]} not seen when fitting; known "
                    f"levels: {known[:30]}. Recode them to a known level or refit with them"
                )
        Xc = _materialize(self.counts, data)
        Xz = _materialize(self.zeros, data) if self.zeros is not None else None
        _warn_far_outside(data, self.ranges)
        log_offset = np.zeros(len(data))
        if self.spec.exposure is not None and self.spec.exposure in data.columns:
            log_offset = np.log(V.check_exposure(data, self.spec.exposure))
        elif self.spec.offset is not None and self.spec.offset in data.columns:
            log_offset = V.check_offset(data, self.spec.offset)
        codes: dict[str, np.ndarray] = {}
        labels_by: dict[str, np.ndarray] = {}
        for g in self.groups:
            if g.name in data.columns:
                labels = _group_labels(data, g.name, self.spec.nested)
                lookup = {lv: i for i, lv in enumerate(g.levels)}
                codes[g.name] = np.array([lookup.get(lv, -1) for lv in labels], dtype=np.int64)
                labels_by[g.name] = np.asarray(labels, dtype=object)
        return EncodedRows(Xc, Xz, log_offset, codes, len(data), labels_by)


@dataclass
class EncodedRows:
    """New rows encoded for prediction."""

    X_counts: np.ndarray
    X_zeros: np.ndarray | None
    log_offset: np.ndarray
    group_codes: dict[str, np.ndarray]
    n: int
    group_labels: dict[str, np.ndarray] = field(default_factory=dict)


def _materialize(part: PartDesign, data: pd.DataFrame) -> np.ndarray:
    try:
        mm = part.model_spec.get_model_matrix(data)
    except FormulaicError as err:
        raise BayesziError(f"{part.part} formula '~ {part.rhs}' could not be applied to the new "
                           f"data: {_first_line(err)}") from None
    except Exception as err:  # a transform raised inside formulaic (e.g. on a wrong type)
        raise BayesziError(f"{part.part} formula '~ {part.rhs}' failed on the new data: "
                           f"{_first_line(err).rstrip('.')}{_TRANSFORM_HINT}") from None
    X = np.asarray(mm, dtype=float)
    if X.shape[1] != len(part.terms):
        raise BayesziError(
            f"{part.part} formula '~ {part.rhs}' gives terms {_labels_of(mm)} on the new data "
            f"but {part.labels} when fitting; give each column the same type (number or "
            "category) as in the fitted data"
        )
    return X


_TRANSFORM_HINT = (". A transform in the formula (log, sqrt, ...) may have met values outside "
                   "its domain (zero or negative), or a column has the wrong type; transform or "
                   "clean the data first")


def _check_still_numeric(data: pd.DataFrame, ranges: dict[str, tuple[float, float]]) -> None:
    """A predictor that was numeric when fitting must be numeric in new data."""
    for col in ranges:
        if col not in data.columns:
            continue
        s = data[col]
        if pd.api.types.is_numeric_dtype(s) or pd.api.types.is_bool_dtype(s):
            continue
        fix = (f"convert it with pandas.to_numeric(data[{col!r}])" if V.looks_numeric_text(s)
               else "give it numbers like the fitted data had")
        raise BayesziError(
            f"column {col!r} was numeric when fitting but is {s.dtype} (text or categories) in "
            f"the new data; {fix}"
        )


def _warn_far_outside(data: pd.DataFrame, ranges: dict[str, tuple[float, float]]) -> None:
    """Warn when new values lie far outside the fitted range (more than one range width
    beyond it): predictions there are extrapolations, and absurd values can overflow."""
    far = []
    for col, (lo, hi) in ranges.items():
        if col not in data.columns:
            continue
        v = data[col].to_numpy(dtype=float, na_value=np.nan)
        width = hi - lo if hi > lo else max(abs(lo), 1.0)
        out = (v < lo - width) | (v > hi + width)
        if out.any():
            far.append(f"{col!r} (fitted range {lo:.4g} to {hi:.4g}; e.g. {v[out][0]:.4g} at "
                       f"row(s) {V.rows_text(data.index, out)})")
    if far:
        warnings.warn(
            "new values far outside the range of the fitted data in " + "; ".join(far)
            + ". Predictions there are extrapolations that the data do not support, and extreme "
            "values can overflow to inf or NaN; check the values",
            V.BayesziWarning,
            stacklevel=4,
        )


def _tidy_categories(data: pd.DataFrame, columns: list[str]) -> pd.DataFrame:
    """Drop unused categories of pandas Categorical columns (they would give all-zero
    indicator columns that no record supports)."""
    fix = [c for c in columns if c in data.columns
           and isinstance(data[c].dtype, pd.CategoricalDtype)
           and len(data[c].cat.categories) > data[c].nunique(dropna=True)]
    if not fix:
        return data
    data = data.copy()
    for c in fix:
        data[c] = data[c].cat.remove_unused_categories()
    return data


def _labels_of(mm: Any) -> list[str]:
    """Readable labels of a formulaic model matrix's columns."""
    terms = [str(c) for c in mm.columns]
    try:
        labels = term_labels(mm.model_spec)
    except Exception:  # an unexpected formulaic structure: the column names are still true
        return terms
    return unique_labels(labels, terms) if len(labels) == len(terms) else terms


def _first_line(err: Exception) -> str:
    return str(err).strip().splitlines()[0] if str(err).strip() else type(err).__name__


def _required(rhs: str, part: str) -> list[str]:
    try:
        formula = Formula(rhs)
        variables = sorted(formula.required_variables)
    except Exception as err:  # FormulaicError, or a parser error of another kind
        raise BayesziError(f"{part} formula '~ {rhs}' cannot be read: {_first_line(err)}. "
                           "Check for a stray operator or unbalanced brackets") from None
    return variables


def _categorical_vars(rhs: str, data: pd.DataFrame, variables: list[str]) -> list[str]:
    out = []
    for v in variables:
        s = data[v]
        wrapped = re.search(r"\bC\(\s*" + re.escape(v) + r"\b", rhs) is not None
        if wrapped or not pd.api.types.is_numeric_dtype(s) or pd.api.types.is_bool_dtype(s):
            out.append(v)
    return out


def _check_text_as_number(rhs: str, data: pd.DataFrame, variables: list[str], part: str) -> None:
    for v in variables:
        wrapped = re.search(r"\bC\(\s*" + re.escape(v) + r"\b", rhs) is not None
        if not wrapped and V.looks_numeric_text(data[v]):
            raise BayesziError(
                f"column {v!r} in the {part} formula holds numbers stored as text; convert it "
                f"with pandas.to_numeric(data[{v!r}]) or, if it is a category, write C({v})"
            )


def _part(part: str, rhs: str, data: pd.DataFrame) -> PartDesign:
    try:
        mm = model_matrix(rhs, data, na_action="raise")
    except FormulaicError as err:
        raise BayesziError(f"{part} formula '~ {rhs}' cannot be used: {_first_line(err)}") from None
    except Exception as err:  # a transform raised (e.g. log of a negative) inside formulaic
        raise BayesziError(f"{part} formula '~ {rhs}' failed on the data: "
                           f"{_first_line(err).rstrip('.')}{_TRANSFORM_HINT}") from None
    if not hasattr(mm, "columns"):  # several formula parts: refused in ModelSpec already
        raise BayesziError(f"{part} formula '~ {rhs}' has several parts; write one formula per "
                           "part and give group effects with groups=")
    X = np.asarray(mm, dtype=float)
    terms = [str(c) for c in mm.columns]
    labels = _labels_of(mm)
    if X.shape[1] == 0:
        raise BayesziError(f"{part} formula '~ {rhs}' has no terms; use '~ 1' for an intercept")
    if not np.all(np.isfinite(X)):
        bad = ~np.all(np.isfinite(X), axis=1)
        cols = [t for t, ok in zip(labels, np.all(np.isfinite(X), axis=0), strict=True) if not ok]
        raise BayesziError(
            f"{part} formula '~ {rhs}' gives non-finite values in term(s) {cols} at row(s) "
            f"{V.rows_text(data.index, bad)} (e.g. log of zero); transform the data first"
        )
    intercept = terms.index("Intercept") if "Intercept" in terms else None
    center = np.zeros(X.shape[1])
    scale = np.ones(X.shape[1])
    for j in range(X.shape[1]):
        if j == intercept:
            continue
        col = X[:, j]
        sd = col.std()
        if sd == 0:
            raise BayesziError(
                f"term {labels[j]!r} of the {part} formula is constant in the data (every row "
                f"{col[0]:g}); it cannot be estimated. Drop it from the formula"
            )
        binary = np.all((col == 0) | (col == 1))
        if intercept is not None:
            center[j] = col.mean()
        # Gelman et al. (2008): continuous inputs scaled by 2 sd, binary inputs left as they are.
        scale[j] = 1.0 if binary else 2.0 * sd
    Xs = (X - center) / scale
    rank = np.linalg.matrix_rank(Xs)
    if rank < X.shape[1]:
        warnings.warn(
            f"the {part} formula's terms {labels} are collinear (rank {rank} of {X.shape[1]}): "
            "some coefficients are not identified by the data and will show only their prior. "
            "Drop one of the redundant terms",
            V.BayesziWarning,
            stacklevel=4,
        )
    return PartDesign(part, rhs, terms, X, center, scale, intercept, mm.model_spec, labels)


def _label_strings(s: pd.Series) -> pd.Series:
    """Group labels as text; whole-number floats lose their ``.0`` so that a column read as
    integers when fitting and as floats later (say after a merge) gives the same labels."""
    if pd.api.types.is_float_dtype(s):
        v = s.to_numpy(dtype=float)
        if np.all(np.isfinite(v)) and np.all(v == np.round(v)):
            return pd.Series(v.astype(np.int64), index=s.index).astype(str)
    return s.astype(str)


def _group_labels(data: pd.DataFrame, name: str, nested: dict[str, str]) -> list[str]:
    """Labels of grouping column ``name``; a nested group's are ``outer/inner``, so that
    reach "R1" of one river and reach "R1" of another are two groups."""
    labels = _label_strings(data[name])
    outer = nested.get(name)
    if outer is not None:
        labels = _label_strings(data[outer]) + "/" + labels
    return list(labels)


def _level_order(levels: set[str]) -> list[str]:
    """Sorted levels: numerically when every label is a number (2 before 10), else as text."""
    try:
        return sorted(levels, key=float)
    except ValueError:
        return sorted(levels)


def _check_group_labels(data: pd.DataFrame, columns: list[str]) -> None:
    """Refuse missing or blank labels in grouping (and nesting) columns, saying what it means."""
    for c in columns:
        s = data[c]
        bad = s.isna().to_numpy()
        if not pd.api.types.is_numeric_dtype(s):
            bad = bad | (s.astype(str).str.strip() == "").to_numpy()
        if bad.any():
            raise BayesziError(
                f"grouping column {c!r} has {int(bad.sum())} missing or blank label(s), first at "
                f"row(s) {V.rows_text(data.index, bad)}; a record without a group cannot share "
                "in its group's effect. Drop those rows, or give them a label of their own (e.g. "
                "'unknown'), which the model then treats as one more group"
            )


def _check_group_roles(spec: ModelSpec, data: pd.DataFrame, c_vars: list[str],
                       z_vars: list[str], has_zeros: bool) -> None:
    """Settings that contradict each other: a grouping column that is also a categorical
    predictor, correlated intercepts without a zeros part, a varying intercept."""
    for rhs, variables, part in ((spec.counts_rhs, c_vars, "counts"),
                                 (spec.zeros_rhs, z_vars, "zeros")):
        both = _categorical_vars(rhs, data, [v for v in variables if v in spec.groups])
        if both:
            raise BayesziError(
                f"column {both[0]!r} is both a grouping column and a categorical predictor of "
                f"the {part} formula: each level's effect would be estimated twice, once freely "
                "and once pooled, and neither is identified. Remove it from the formula (the "
                "group effects already give each level its own intercept) or from groups"
            )
    if spec.correlated and not has_zeros:
        raise BayesziError(
            f"correlated=True links each group's counts and zeros intercepts, but family "
            f"{spec.family!r} has no zeros part; drop correlated=True or choose a family with "
            "one (zip, zinb, hurdle-poisson, hurdle-negbin)"
        )
    for part, terms in spec.varying.items():
        if "Intercept" in terms:
            raise BayesziError(
                f"varying[{part!r}] lists 'Intercept'; every group already has its own "
                "intercept in both parts. List only slope terms, e.g. varying={'counts': "
                "['depth']}"
            )


def build_design(data: pd.DataFrame, spec: ModelSpec) -> Design:
    """Validate ``data`` against ``spec`` and encode it. See the module example."""
    data = V.check_frame(data)
    fam = get_family(spec.family)
    V.check_columns(data, [spec.response], role="response, left of the counts formula")
    c_vars = _required(spec.counts_rhs, "counts")
    z_vars = _required(spec.zeros_rhs, "zeros") if fam.zeros_kind else []
    if spec.response in c_vars or spec.response in z_vars:
        raise BayesziError(
            f"the response {spec.response!r} also appears as a predictor; remove it from the "
            "right side of the formulas"
        )
    V.check_columns(data, c_vars, role="counts formula")
    V.check_columns(data, z_vars, role="zeros formula")
    extra = [c for c in (spec.exposure, spec.offset) if c is not None]
    V.check_columns(data, extra, role="exposure" if spec.exposure else "offset")
    nest_outer = [spec.nested[g] for g in spec.groups if g in spec.nested]
    V.check_columns(data, list(spec.groups) + nest_outer, role="groups")
    _check_group_labels(data, list(dict.fromkeys([*spec.groups, *nest_outer])))
    used = list(dict.fromkeys([spec.response, *c_vars, *z_vars, *extra,
                               *spec.groups, *nest_outer]))
    V.check_kinds(data, [spec.response, *c_vars, *z_vars, *extra], role="used by the model")
    V.check_finite(data, used, role="used by the model")
    y = V.check_response(data, spec.response, fam.zeros_kind)
    _check_text_as_number(spec.counts_rhs, data, c_vars, "counts")
    _check_text_as_number(spec.zeros_rhs, data, z_vars, "zeros")
    log_offset = np.zeros(len(data))
    if spec.exposure is not None:
        log_offset = np.log(V.check_exposure(data, spec.exposure))
    elif spec.offset is not None:
        log_offset = V.check_offset(data, spec.offset)
    data = _tidy_categories(data, list(dict.fromkeys([*c_vars, *z_vars])))
    counts = _part("counts", spec.counts_rhs, data)
    zeros = _part("zeros", spec.zeros_rhs, data) if fam.zeros_kind else None
    levels: dict[str, list[str]] = {}
    for rhs, variables in ((spec.counts_rhs, c_vars), (spec.zeros_rhs, z_vars)):
        for v in _categorical_vars(rhs, data, variables):
            levels[v] = sorted(set(data[v].astype(str)))
    _check_group_roles(spec, data, c_vars, z_vars, fam.zeros_kind is not None)
    groups = [_group(data, g, spec.nested) for g in spec.groups]
    _check_distinct_groups(groups)
    _check_varying_terms(spec, counts, zeros, groups)
    _check_separation(y, counts, zeros, fam.zeros_kind)
    ranges = {}
    for v in dict.fromkeys([*c_vars, *z_vars]):
        if v not in levels:
            col = data[v].to_numpy(dtype=float)
            ranges[v] = (float(col.min()), float(col.max()))
    return Design(spec, len(data), y, log_offset, counts, zeros, groups, levels, used,
                  data.index, ranges)


def _check_varying_terms(spec: ModelSpec, counts: PartDesign, zeros: PartDesign | None,
                         groups: list[GroupDesign]) -> None:
    """Varying slopes must name columns of their part's design that vary within groups."""
    for part, terms in spec.varying.items():
        pd_ = counts if part == "counts" else zeros
        if pd_ is None:
            raise BayesziError(f"varying slopes were asked for the {part} part, but family "
                               f"{spec.family!r} has no {part} part")
        missing = [t for t in terms if t not in pd_.terms]
        if missing:
            raise BayesziError(
                f"varying slope term(s) {missing} are not columns of the {part} design; "
                f"available: {pd_.terms}"
            )
    for part, terms in spec.varying.items():
        _check_slopes_vary(counts if part == "counts" else zeros, terms, groups)


def _group(data: pd.DataFrame, name: str, nested: dict[str, str]) -> GroupDesign:
    """Codes of grouping column ``name``, with warnings about groups too few or too small to
    say much on their own."""
    labels = _group_labels(data, name, nested)
    levels = _level_order(set(labels))
    lookup = {lv: i for i, lv in enumerate(levels)}
    codes = np.array([lookup[lv] for lv in labels], dtype=np.int64)
    per = np.bincount(codes, minlength=len(levels))
    if len(levels) < 2:
        raise BayesziError(
            f"grouping column {name!r} has a single level ({levels[0]!r}); a group effect needs "
            "at least two groups (five or more to estimate their spread). Drop it from groups"
        )
    if len(levels) < 5:
        warnings.warn(
            f"grouping column {name!r} has only {len(levels)} levels; the spread (sd) of its "
            "effects is poorly determined by so few groups and leans on its prior, and "
            "predictions for a new group are correspondingly uncertain",
            V.BayesziWarning,
            stacklevel=3,
        )
    singles = np.flatnonzero(per == 1)
    if singles.size:
        shown = [levels[i] for i in singles[:5]]
        warnings.warn(
            f"grouping column {name!r} has {singles.size} level(s) with a single record (e.g. "
            f"{shown}); their effects are shrunk strongly toward the typical group and say "
            "little about those groups themselves. This is not an error: the pooling is the "
            "honest answer for so little data",
            V.BayesziWarning,
            stacklevel=3,
        )
    return GroupDesign(name, levels, codes, per)


def _same_partition(a: np.ndarray, b: np.ndarray) -> bool:
    pairs = np.unique(np.stack([a, b]), axis=1)
    return pairs.shape[1] == len(np.unique(a)) == len(np.unique(b))


def _check_distinct_groups(groups: list[GroupDesign]) -> None:
    """Two grouping columns that split the records the same way cannot be told apart."""
    for i, g in enumerate(groups):
        for h in groups[i + 1:]:
            if _same_partition(g.codes, h.codes):
                raise BayesziError(
                    f"grouping columns {g.name!r} and {h.name!r} split the records into the "
                    "same groups, so their effects cannot be told apart (only their sum is "
                    "identified). Keep one of them in groups"
                )


def _check_slopes_vary(pdes: PartDesign | None, terms: tuple[str, ...],
                       groups: list[GroupDesign]) -> None:
    """Warn when a varying-slope term never changes within a group."""
    if pdes is None:
        return
    for t in terms:
        x = pdes.X[:, pdes.terms.index(t)]
        shown = pdes.label(t)
        for g in groups:
            lo = np.full(len(g.levels), np.inf)
            hi = np.full(len(g.levels), -np.inf)
            np.minimum.at(lo, g.codes, x)
            np.maximum.at(hi, g.codes, x)
            if np.all(hi - lo <= 1e-12 * max(1.0, float(np.abs(x).max()))):
                warnings.warn(
                    f"term {shown!r} of the {pdes.part} part has one value within each level of "
                    f"{g.name!r}, so a slope varying by {g.name} cannot be told apart from each "
                    f"{g.name}'s own intercept; its sd will show mostly its prior. Drop {t!r} "
                    "from varying (a group-level predictor needs no varying slope)",
                    V.BayesziWarning,
                    stacklevel=3,
                )


def _check_separation(y: np.ndarray, counts: PartDesign, zeros: PartDesign | None,
                      zeros_kind: str | None) -> None:
    """Warn when single terms separate the records so that a coefficient is not identified.

    Zeros part: a 0/1 term whose records (at 1, or at 0) are all zero or all non-zero, or a
    numeric term above (or below) some value of which every record is zero and on the other
    side every record non-zero: the zeros-part probability is then pushed to 0 or 1 there and
    the coefficient shows mostly its prior. Counts part: a 0/1 term whose records are all zero
    pushes its rate ratio toward 0. Only single terms are checked (combinations are not).
    """
    zero = y == 0
    notes = []
    if zeros is not None and 0 < zero.sum() < len(y):
        what = names.ZEROS_LABELS["hurdle" if zeros_kind == "hurdle" else "inflation"]
        for j, label in enumerate(zeros.labels):
            if j == zeros.intercept:
                continue
            x = zeros.X[:, j]
            if np.all((x == 0) | (x == 1)):
                for v in (1.0, 0.0):
                    z = zero[x == v]
                    if z.size and (z.all() or not z.any()):
                        kind = "zero" if z.all() else "non-zero"
                        notes.append(f"zeros-part term {label!r}: every record where it is "
                                     f"{v:g} is {kind}, so {what} there is pushed to "
                                     f"{1 if z.all() else 0}")
                        break
            else:
                lo0, hi0 = x[zero].min(), x[zero].max()
                lo1, hi1 = x[~zero].min(), x[~zero].max()
                if hi0 < lo1 or hi1 < lo0:
                    side = "below" if hi0 < lo1 else "above"
                    notes.append(f"zeros-part term {label!r}: every zero lies {side} every "
                                 f"non-zero count along it, so {what} jumps from 0 to 1")
    for j, label in enumerate(counts.labels):
        if j == counts.intercept:
            continue
        x = counts.X[:, j]
        if np.all((x == 0) | (x == 1)) and (x == 1).any() and zero[x == 1].all():
            notes.append(f"counts-part term {label!r}: every record where it is 1 is zero, so "
                         "its rate ratio is pushed toward 0")
    if notes:
        warnings.warn(
            "perfect separation: " + "; ".join(notes[:5])
            + (f" (and {len(notes) - 5} more)" if len(notes) > 5 else "")
            + ". The data cannot bound these coefficients, so their estimates and intervals "
            "rest on the priors (see docs/priors.md). Consider merging sparse levels, dropping "
            "the term, or a prior that states what is plausible",
            V.BayesziWarning,
            stacklevel=3,
        )
