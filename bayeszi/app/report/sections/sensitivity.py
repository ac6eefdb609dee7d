"""The prior-sensitivity section: is the prior deciding the answer? Per model, the
power-scaling sensitivity of every parameter with its reading, and the collinear predictors
read before sampling.

Example
-------
>>> section_sensitivity(ctx).id                                        # doctest: +SKIP
'sensitivity'
"""

from __future__ import annotations

import pandas as pd

from bayeszi.answers import sensitivity as S
from bayeszi.app.report.context import ReportContext
from bayeszi.app.report.document import Section, Text
from bayeszi.app.report.sections.common import table_blocks
from bayeszi.base.errors import BayesziError
from bayeszi.model import collinearity as C

INTRO = (
    "Power-scaling (Kallioinen, Paananen, Buerkner & Vehtari 2023, Statistics and Computing) "
    "asks how much each number would move if the prior, or the data's likelihood, were made "
    "slightly stronger or weaker; it reweights the existing draws, with no refit. A "
    f"sensitivity of {S.THRESHOLD} or more (the paper's threshold) counts. Sensitive to both: "
    f"'{S.CONFLICT}', the prior pulls the number away from where the data put it. Sensitive "
    f"to the prior only: '{S.DOMINATES}', the data say little and the prior sets the number. "
    "Either way the number is not what the data alone say: collect more data, rethink "
    "predictors that carry the same information, or state a prior you can defend and show "
    "how the answer changes. The priors scaled are the top-level ones (coefficients, "
    "dispersion, group sds), not the group effects themselves.")
CAUTION = (
    "Where decisions follow from these numbers, the priors must be chosen and defended by a "
    "qualified person who knows the system, not left at bayeszi's defaults.")


def collinearity_blocks(name: str, f) -> list:
    """The collinearity table and warnings of one model (anything with a ``design``;
    nothing when no part has two terms)."""
    table = C.collinearity(f.design)
    if table.empty:
        return []
    shown = table.assign(flag=["collinear" if x else "" for x in table["flagged"]]).drop(
        columns=["flagged"])
    blocks = table_blocks(
        f"collinearity_{name}", shown,
        f"Model {name}: variance inflation of each term and the terms it is correlated with "
        f"(flagged from variance inflation {C.VIF_LIMIT:g} or |correlation| "
        f"{C.CORRELATION_LIMIT}), read from the data before sampling")
    blocks += [Text(f"Model {name}: {p}.", "warning") for p in C.collinearity_problems(table)]
    return blocks


def _sensitivity_blocks(ctx: ReportContext, name: str, f) -> tuple[list, int]:
    """The sensitivity table and warnings of one model, and how many rows are flagged."""
    try:
        table = ctx.caught(f"prior sensitivity of {name}", f.prior_sensitivity)
    except BayesziError:
        return [Text(f"Model {name}: the fit holds no log prior per draw, so its prior "
                     "sensitivity cannot be shown; refit it with this version.", "note")], 0
    shown = pd.DataFrame(table).reset_index(drop=True)
    blocks = table_blocks(f"sensitivity_{name}", shown,
                          f"Model {name}: power-scaling sensitivity to the prior and to the "
                          "data, and their reading", flag_column=S.READING)
    blocks += [Text(f"Model {name}: {p}.", "warning") for p in S.sensitivity_problems(table)]
    return blocks, int((table[S.READING] != "").sum())


def section_sensitivity(ctx: ReportContext) -> Section:
    """Prior sensitivity of every parameter and the collinear predictors, per model."""
    blocks: list = [Text(INTRO), Text(CAUTION, "warning")]
    flagged = 0
    for name, f in ctx.fits.items():
        more, n = _sensitivity_blocks(ctx, name, f)
        blocks += more
        flagged += n
        blocks += collinearity_blocks(name, f)
    if not flagged:
        blocks.insert(2, Text(f"No parameter of any model reaches a sensitivity of "
                              f"{S.THRESHOLD} to its prior."))
    return Section("sensitivity", "Is the prior deciding the answer? Prior sensitivity",
                   blocks)


__all__ = ["CAUTION", "INTRO", "collinearity_blocks", "section_sensitivity"]
