"""A plain-language reading of a fitted model, for the report's reading section.

Each coefficient becomes one sentence: which term, by what factor the expected count per
unit of exposure (counts part) or the odds of an extra zero or of a zero count (zeros part)
is multiplied, with its interval, and whether the interval settles the direction. Then the
zeros part's average probability, the overdispersion, the spread of group effects, and a
reminder that these are associations.

Example
-------
>>> table = fitted.coefficients(interval=0.9)                             # doctest: +SKIP
>>> for line in reading_lines(fitted, table, 0.9, unit="trap night"):    # doctest: +SKIP
...     print(line)
Each one-unit increase in water_temp: the expected crayfish per trap night (the count
process) is multiplied by 1.08 (90% interval 1.06 to 1.09); higher.
"""

from __future__ import annotations

from typing import TYPE_CHECKING, Any

import numpy as np
import pandas as pd

from bayeszi.app.report.document import format_number
from bayeszi.base import names
from bayeszi.families import get_family
from bayeszi.model.term_labels import indicator_parts

if TYPE_CHECKING:
    from bayeszi.fitting.fitted import FittedModel


def _term_phrase(label: str, design: Any, part: str) -> str:
    """The subject of a coefficient's sentence, from its label in the coefficients table."""
    parts = indicator_parts(label)
    if parts is not None:
        col, level, ref = parts
        return f"{col} {level} (against {ref})"
    pdes = design.counts if part == "counts" else design.zeros
    term = pdes.term_of(label) if pdes is not None else None
    if term is not None:
        col = pdes.X[:, pdes.terms.index(term)]
        if np.all((col == 0) | (col == 1)):
            return f"{label} = 1 (against 0)"
    return f"Each one-unit increase in {label}"


def _direction(lo: float, hi: float, up: str, down: str) -> str:
    if lo > 1:
        return up
    if hi < 1:
        return down
    return "the data do not settle the direction"


def reading_lines(f: FittedModel, coefficients: pd.DataFrame, interval: float = 0.9,
                  unit: str = "record") -> list[str]:
    """Plain-language sentences about fitted model ``f``: one per effect, then the zero share,
    the overdispersion, the group spread and a reminder that associations are not causes.

    ``coefficients`` is ``f.coefficients(interval=interval)``; ``unit`` names one unit of
    exposure ("trap night"), used in "per trap night".
    """
    spec = f.spec
    fam = get_family(spec.family)
    table = coefficients.reset_index()
    lo, hi = f"{100 * (1 - interval) / 2:g}%", f"{100 * (1 + interval) / 2:g}%"
    elo, ehi = f"exp {lo}", f"exp {hi}"
    pc = f"{interval:.0%}"
    out = []
    for _, r in table[(table["part"] == "counts") & (table["exp scale"] == "rate ratio")
                      ].iterrows():
        phrase = _term_phrase(r["term"], f.design, "counts")
        d = _direction(r[elo], r[ehi], "higher", "lower")
        what = "the count process" if fam.zeros_kind else spec.response
        out.append(
            f"{phrase}: the expected {spec.response} per {unit} "
            f"({what}) is multiplied by {F_(r['exp(mean)'])} ({pc} interval "
            f"{F_(r[elo])} to {F_(r[ehi])}); {d}.")
    if fam.zeros_kind:
        target = ("an extra zero (nothing there to count)" if fam.zeros_kind == "inflation"
                  else "a zero count (P(Y = 0))")
        for _, r in table[(table["part"] == "zeros") & (table["exp scale"].str.startswith(
                "odds ratio"))].iterrows():
            phrase = _term_phrase(r["term"], f.design, "zeros")
            d = _direction(r[elo], r[ehi], "more likely", "less likely")
            out.append(f"{phrase}: the odds of {target} are multiplied "
                       f"by {F_(r['exp(mean)'])} ({pc} interval {F_(r[elo])} to "
                       f"{F_(r[ehi])}); {d}.")
        share = _mean_zeros_part(f)
        if share is not None:
            what = names.zeros_label(fam.name)
            out.append(f"Averaged over the records, the zeros part puts {what} at "
                       f"{100 * share:.1f}%.")
    disp = table[table["term"] == "dispersion (alpha)"]
    if len(disp):
        r = disp.iloc[0]
        out.append(f"The overdispersion alpha is {F_(r['mean'])} ({pc} interval "
                   f"{F_(r[lo])} to {F_(r[hi])}): the variance of the count process is "
                   f"mu + alpha mu^2, so at a mean of 5 it is {F_(1 + 5 * r['mean'])} times "
                   "a Poisson's (alpha = 0 is the Poisson).")
    for g in f.design.groups:
        sd = table[(table["part"] == "counts") & (table["term"] == names.group_sd_label(g.name))]
        if len(sd):
            s = float(sd.iloc[0]["mean"])
            out.append(f"Levels of {g.name} differ beyond the predictors: the sd of their effects "
                       f"on the log rate is {F_(s)}, so a {g.name} one sd above typical has a "
                       f"rate about {F_(np.exp(s))} times a typical one's.")
    out.append("These are associations within the data, each holding the other terms fixed; "
               "they show cause only as far as the design of the data collection supports it.")
    return out


def F_(v: float) -> str:
    """Number formatting for sentences (3 significant digits)."""
    return format_number(float(v))


def _mean_zeros_part(f: FittedModel) -> float | None:
    from scipy.special import expit

    from bayeszi.engine.draws import fitted_rows, linear_predictors

    lp = linear_predictors(f, fitted_rows(f), groups="known")
    if lp.zeros is None:
        return None
    return float(expit(lp.zeros).mean())


__all__ = ["reading_lines"]
