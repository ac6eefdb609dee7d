"""The cautions section: what the models assume, scenario settings outside the data, and who
decides.

Example
-------
>>> section_cautions(ctx).title                                        # doctest: +SKIP
'Cautions'
"""

from __future__ import annotations

import pandas as pd

from bayeszi.app.report.context import ReportContext, ReportInput
from bayeszi.app.report.document import Bullets, Section, Text
from bayeszi.families import get_family

CLOSING = [
    "Predictions outside the range of the data are extrapolations and rest entirely on "
    "the assumed form.",
    "Priors are weakly informative defaults unless the study set others; with few "
    "records per parameter they matter.",
    "Associations are not causes: predictors that were not randomised may stand in for "
    "others that were not measured.",
]
DECISION = ("This report is a statistical summary, not a decision. Decisions on health, safety, "
            "trapping or control, a fishery's quota, or a product's release rest with qualified "
            "people and the local rules that govern them.")


def extrapolations(inp: ReportInput) -> list[str]:
    """Scenario settings outside the range of a numeric data column, one text each."""
    out = []
    data = inp.data
    for scn in inp.scenarios:
        values = {k: [v] for k, v in scn.values.items()}
        values.update({k: list(v) for k, v in scn.vary.items()})
        for col, vals in values.items():
            if col not in data.columns or not pd.api.types.is_numeric_dtype(data[col]):
                continue
            lo, hi = float(data[col].min()), float(data[col].max())
            bad = [v for v in vals if isinstance(v, (int, float)) and not lo <= v <= hi]
            if bad:
                out.append(f"scenario '{scn.name}': {col} = {bad} (data {lo:g} to {hi:g})")
    return out


def _assumptions(ctx: ReportContext) -> list[str]:
    f = ctx.fits[ctx.preferred]
    items = [
        f"The family is assumed: {f.spec.family}. Another family can fit the same data "
        "differently; the comparison and checks above test it only against the candidates "
        "and statistics shown.",
        "Effects are assumed additive on the log scale (counts) and the logit scale (zeros), "
        "with no interactions beyond those written in the formulas.",
    ]
    if f.spec.exposure:
        items.append(f"The expected count is assumed proportional to {f.spec.exposure}: twice "
                     "the effort, twice the expected count, all else equal.")
    if get_family(f.spec.family).zeros_kind == "inflation":
        items.append("Extra zeros and ordinary zeros cannot be told apart record by record; "
                     "their split comes from the model's form and predictors.")
    if f.design.groups:
        items.append("Records are assumed independent given the group effects; group levels "
                     "are assumed exchangeable, and predictions for new groups assume they "
                     "resemble the groups in the data.")
    else:
        items.append("Records are assumed independent given the predictors; repeated visits "
                     "to the same place, if any, are not modelled by this model.")
    return items + CLOSING


def section_cautions(ctx: ReportContext) -> Section:
    """What the models assume, and who decides."""
    blocks: list = [Bullets(_assumptions(ctx))]
    out_of_range = extrapolations(ctx.inp)
    if out_of_range:
        blocks.append(Text("Scenario settings outside the range of the data: "
                           + "; ".join(out_of_range) + ".", "warning"))
    blocks.append(Text(DECISION, "warning"))
    return Section("cautions", "Cautions", blocks)


__all__ = ["extrapolations", "section_cautions"]
