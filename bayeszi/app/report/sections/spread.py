"""The spread section: mean, variance, variance-to-mean ratio and largest count against data
replicated from each model.

Example
-------
>>> section_spread(ctx).blocks[1].name                                 # doctest: +SKIP
'spread_check'
"""

from __future__ import annotations

import pandas as pd

from bayeszi.answers.checks import replicated_statistics, statistics_check
from bayeszi.app.report.context import ReportContext, plain
from bayeszi.app.report.document import Figure, Section, Table, Text
from bayeszi.app.report.sections.common import OK_VERDICT
from bayeszi.plots.checkplots import statistics_figure

INTRO = ("The variance-to-mean ratio of the data against the same ratio in data sets "
         "replicated from each model: a ratio far above what a model replicates means the "
         "counts are overdispersed for that model (common practice, no single source).")


def section_spread(ctx: ReportContext) -> Section:
    """Mean, variance, variance-to-mean ratio and largest count against replicated data."""
    seed = ctx.inp.seed or 0
    frames, figs = [], []
    for name, f in ctx.fits.items():
        reps = ctx.caught(f"replicated statistics of {name}", replicated_statistics, f,
                          seed=seed)
        figs.append(Figure(f"statistics_{name}", statistics_figure(reps),
                           f"Model {name}: zero share, variance-to-mean ratio and largest "
                           "count of replicated data sets, with the observed values."))
        # one set of replicates per model for the figure and both checks (same numbers as
        # dispersion_check and max_count_check with this seed, drawn once)
        for stats in (["mean", "variance", "variance / mean"], ["maximum"]):
            t = plain(ctx.caught(f"spread check of {name}", statistics_check, reps, stats,
                                 interval=ctx.inp.interval)).reset_index()
            t.insert(0, "model", name)
            frames.append(t)
    return Section("spread", "Spread and largest count", [
        Text(INTRO),
        Table("spread_check", pd.concat(frames, ignore_index=True),
              "Mean, variance, variance / mean and maximum", flag_column="verdict",
              ok_values=OK_VERDICT), *figs])


__all__ = ["section_spread"]
