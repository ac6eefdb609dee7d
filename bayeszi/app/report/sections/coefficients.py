"""The coefficients section: each model's coefficient table with rate ratios and odds ratios,
and its figure (the tables come from the context, shared with the reading section).

Example
-------
>>> [b.name for b in section_coefficients(ctx).blocks[1:3]]            # doctest: +SKIP
['coefficients_zinb', 'ratios_zinb']
"""

from __future__ import annotations

from bayeszi.app.report import figures as F
from bayeszi.app.report.context import ReportContext
from bayeszi.app.report.document import Figure, Section, Table, Text
from bayeszi.app.report.sections.common import interval_labels, unit, zeros_label


def section_coefficients(ctx: ReportContext) -> Section:
    """Coefficient tables with rate ratios and odds ratios, and their figure."""
    inp = ctx.inp
    lo, hi = interval_labels(inp.interval)
    blocks: list = [Text(
        f"Posterior means, sds and central {inp.interval:.0%} intervals on the scale of the "
        "linear predictors, and the same on the exp scale: rate ratios for the counts part "
        "(the factor by which the mean count of the count process changes per unit of the "
        "term), odds ratios for the zeros part. Intercepts on the exp scale are the base rate "
        f"per {unit(inp)} and the base odds at all terms zero (reference levels). "
        f"Columns {lo} and {hi} bound the interval.")]
    for name, f in ctx.fits.items():
        table = ctx.coefficients[name]
        blocks.append(Table(f"coefficients_{name}", table,
                            f"Model {name} ({f.spec.family}): coefficients", index=True))
        zl = zeros_label(f.spec.family)
        blocks.append(Figure(f"ratios_{name}", F.ratio_intervals(
            table, f"Model {name}: effects on the exp scale", zl),
            (f"Model {name}: rate ratios (counts part) and odds ratios of {zl} (zeros part) "
             if f.design.zeros is not None else
             f"Model {name}: rate ratios (counts part; this family has no zeros part) ")
            + f"with {inp.interval:.0%} intervals; 1 means no effect."))
    return Section("coefficients", "Coefficients: rate ratios and odds ratios", blocks)


__all__ = ["section_coefficients"]
