"""The spread section: mean, variance, variance-to-mean ratio and largest count against data
replicated from each model, and the Pearson statistic draw by draw.

Example
-------
>>> section_spread(ctx).blocks[1].name                                 # doctest: +SKIP
'spread_check'
"""

from __future__ import annotations

import pandas as pd

from bayeszi.answers.checks import pearson_check, replicated_statistics, statistics_check
from bayeszi.app.report.context import ReportContext, plain
from bayeszi.app.report.document import Figure, Section, Table, Text
from bayeszi.app.report.sections.common import OK_VERDICT
from bayeszi.plots.checkplots import statistics_figure

INTRO = ("The variance-to-mean ratio of the data against the same ratio in data sets "
         "replicated from each model: a ratio far above what a model replicates means the "
         "counts are overdispersed for that model (common practice, no single source).")
PEARSON = ("The Pearson statistic, the sum over records of (y - E[y])^2 / Var[y] with E and "
           "Var from the model at each posterior draw, for the data and for a data set "
           "replicated at the same draw (Gelman, Meng & Stern 1996, Statistica Sinica). Per "
           "residual degree of freedom (records minus the coefficients of both parts, minus "
           "the negative binomial's dispersion; group effects not counted) it reads like the "
           "classical dispersion ratio: near 1 when the counts are as spread as the model "
           "says. The tail probability compares the two draw by draw.")


def section_spread(ctx: ReportContext) -> Section:
    """Mean, variance, variance-to-mean ratio and largest count against replicated data."""
    frames, figs = [], []
    for name, f in ctx.fits.items():
        reps = ctx.caught(f"replicated statistics of {name}", replicated_statistics, f,
                          replicates=ctx.replicated(name))
        figs.append(Figure(f"statistics_{name}", statistics_figure(reps),
                           f"Model {name}: zero share, variance-to-mean ratio and largest "
                           "count of replicated data sets, with the observed values."))
        # the report's one set of replicates per model, for the figure and both checks (the
        # numbers of dispersion_check and max_count_check with the report's seed)
        for stats in (["mean", "variance", "variance / mean"], ["maximum"]):
            t = plain(ctx.caught(f"spread check of {name}", statistics_check, reps, stats,
                                 interval=ctx.inp.interval)).reset_index()
            t.insert(0, "model", name)
            frames.append(t)
    return Section("spread", "Spread and largest count", [
        Text(INTRO),
        Table("spread_check", pd.concat(frames, ignore_index=True),
              "Mean, variance, variance / mean and maximum", flag_column="verdict",
              ok_values=OK_VERDICT), *figs, Text(PEARSON), _pearson_table(ctx)])


def _pearson_table(ctx: ReportContext) -> Table:
    """:func:`pearson_check` of every model in one table, with the residual df."""
    frames = []
    for name, f in ctx.fits.items():
        check = ctx.caught(f"Pearson check of {name}", pearson_check, f,
                           interval=ctx.inp.interval, replicates=ctx.replicated(name))
        t = plain(check).reset_index()
        t.insert(0, "model", name)
        t.insert(2, "residual df", check.attrs["residual df"])
        frames.append(t)
    return Table("pearson_check", pd.concat(frames, ignore_index=True),
                 "Pearson statistic: observed against replicated, and per residual df",
                 flag_column="verdict", ok_values=OK_VERDICT)


__all__ = ["section_spread"]
