"""The zero-checks section: the observed share of zeros against data replicated from each
model, overall and per group level.

Example
-------
>>> section_zero_checks(ctx).blocks[1].name                            # doctest: +SKIP
'zero_check'
"""

from __future__ import annotations

import pandas as pd

from bayeszi.answers.checks import zero_check
from bayeszi.app.report.context import ReportContext, plain
from bayeszi.app.report.document import Figure, Section, Table, Text
from bayeszi.app.report.sections.common import OK_VERDICT, table_blocks
from bayeszi.plots.checkplots import zero_check_figure

INTRO = ("Does each model reproduce the share of zeros? For every posterior draw a new data "
         "set is simulated from the model, and the observed zero share is set against those "
         "replicated shares. A tail probability near 0 means more zeros were observed than "
         "the model produces; near 1, fewer. Verdicts use 0.05 and 0.95.")


def section_zero_checks(ctx: ReportContext) -> Section:
    """Observed share of zeros against replicated data, per model and per group."""
    overall, by_group, figs = [], [], []
    for name, f in ctx.fits.items():
        raw = ctx.caught(f"zero check of {name}", zero_check, f, interval=ctx.inp.interval,
                         replicates=ctx.replicated(name))
        t = plain(raw)
        t.insert(0, "model", name)
        overall.append(t.iloc[:1])
        if len(t) > 1:
            by_group.append(t.iloc[1:])
        figs.append(Figure(f"zero_check_{name}", zero_check_figure(raw),
                           f"Model {name}: share of zeros in data sets replicated from the "
                           "model against the observed share (left), and per group level "
                           "(right, when the model has groups)."))
    blocks: list = [Text(INTRO), Table(
        "zero_check", pd.concat(overall, ignore_index=True).drop(columns=["level"]),
        "Zero share, all records", flag_column="verdict", ok_values=OK_VERDICT)]
    if by_group:
        groups = pd.concat(by_group, ignore_index=True)
        bad = ~groups["verdict"].isin(OK_VERDICT)
        blocks.append(Text(f"Per group level: {int(bad.sum())} of {len(groups)} model-by-level "
                           "checks are flagged (listed first below)."))
        blocks += table_blocks("zero_check_by_group",
                               pd.concat([groups[bad], groups[~bad]], ignore_index=True),
                               "Zero share per group level", flag_column="verdict",
                               ok_values=OK_VERDICT)
    return Section("zero-checks", "Zero-share checks", blocks + figs)


__all__ = ["section_zero_checks"]
