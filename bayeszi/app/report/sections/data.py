"""The data section: rows, zero share, exposure and groups of the data the models were fitted to.

Example
-------
>>> section_data(ctx).blocks[1].name                                   # doctest: +SKIP
'data_summary'
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from bayeszi.app.report import figures as F
from bayeszi.app.report.context import ReportContext
from bayeszi.app.report.document import Figure, Section, Table, Text
from bayeszi.app.report.sections.common import pct, unit


def _rows(ctx: ReportContext, groups: dict) -> list[tuple[str, object]]:
    """(quantity, value) rows of the data summary table."""
    fit = ctx.inp.first
    spec = fit.spec
    y = fit.design.y
    rows = [
        ("records (rows used)", int(fit.design.n)),
        ("rows in the data file", int(len(ctx.inp.data))),
        (f"response: {spec.response}, mean", float(y.mean())),
        (f"response: {spec.response}, variance", float(y.var(ddof=1)) if y.size > 1 else np.nan),
        (f"response: {spec.response}, largest", int(y.max())),
        ("records with a zero", int((y == 0).sum())),
        ("zero share", float((y == 0).mean())),
    ]
    if spec.exposure or spec.offset:
        expo = np.exp(fit.design.log_offset)
        name = spec.exposure or f"exp({spec.offset})"
        rows += [(f"exposure {name}: total", float(expo.sum())),
                 (f"exposure {name}: smallest", float(expo.min())),
                 (f"exposure {name}: median", float(np.median(expo))),
                 (f"exposure {name}: largest", float(expo.max())),
                 (f"{spec.response} per unit of {name} (total / total)",
                  float(y.sum() / expo.sum()))]
    for g in groups.values():
        per = g.counts_per_level
        rows += [(f"group {g.name}: levels", int(len(g.levels))),
                 (f"group {g.name}: records per level, smallest", int(per.min())),
                 (f"group {g.name}: records per level, median", float(np.median(per))),
                 (f"group {g.name}: records per level, largest", int(per.max()))]
    return rows


def section_data(ctx: ReportContext) -> Section:
    """Rows, zero share, exposure and groups of the data the models were fitted to."""
    fit = ctx.inp.first
    spec = fit.spec
    y = fit.design.y
    groups = {}
    for f in ctx.fits.values():
        for g in f.design.groups:
            groups.setdefault(g.name, g)
    table = pd.DataFrame(_rows(ctx, groups), columns=["quantity", "value"]
                         ).astype({"value": object})
    text = (f"{fit.design.n} records of {spec.response}; {int((y == 0).sum())} of them "
            f"({pct(float((y == 0).mean()))}) are zero.")
    if spec.exposure:
        text += (f" Effort is given by {spec.exposure} (exposure); rates in this report are "
                 f"per {unit(ctx.inp)}.")
    if groups:
        text += " Records are grouped by " + ", ".join(
            f"{g.name} ({len(g.levels)} levels)" for g in groups.values()) + "."
    return Section("data", "The data", [
        Text(text), Table("data_summary", table, "The data at a glance"),
        Figure("data_counts", F.count_histogram(y, spec.response),
               f"How many records hold each value of {spec.response}; the zero bar "
               "is orange.")])


__all__ = ["section_data"]
