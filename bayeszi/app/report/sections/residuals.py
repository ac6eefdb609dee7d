"""The residuals section: randomized quantile residuals of every model, with the figure of
the preferred one.

Example
-------
>>> section_residuals(ctx).blocks[1].name                              # doctest: +SKIP
'residuals_summary'
"""

from __future__ import annotations

import pandas as pd

from bayeszi.answers.residual_checks import BAND_LEVEL, residual_statistics
from bayeszi.app.report.context import ReportContext
from bayeszi.app.report.document import Figure, Section, Table, Text
from bayeszi.plots.checkplots import residual_figure

INTRO = ("Randomized quantile residuals (Dunn & Smyth 1996) are standard normal when the model "
         "is right: mean 0, sd 1, about 4.6% beyond +-2 and 0.3% beyond +-3 (normal "
         "probabilities). Their PIT values (the normal probabilities of the residuals) are "
         "then uniform between 0 and 1. The table measures how far their distribution is from "
         "the uniform: the largest gap with its Kolmogorov-Smirnov p-value, and the share of "
         "the curve in the figure that leaves its band. With many records a small, harmless "
         "misfit gives a small p-value; judge the size of the gap and the figure too.")

#: a sd of the residuals this far from 1 is flagged
SD_FLAG = 0.15


def _row(name: str, res: pd.DataFrame) -> dict:
    """One model's line of the summary table, with its flags in words."""
    stats = residual_statistics(res, BAND_LEVEL)
    outside = stats[f"share of ECDF outside the {100 * BAND_LEVEL:g}% band"]
    flags = []
    if abs(stats["sd of residuals"] - 1) > SD_FLAG:
        flags.append("sd far from 1")
    if outside > 0:
        flags.append("PIT values leave the band")
    return {"model": name, **stats, "flag": "; ".join(flags)}


def _caption(name: str, against: str | None) -> str:
    by = f"the column {against}" if against else "the log of the expected count"
    return (f"Model {name}. Left: share of PIT values at or below u, minus u, with the "
            f"{100 * BAND_LEVEL:g}% band that the whole curve of uniform values stays inside "
            "(points outside it are marked); a curve above the band means too many small PIT "
            "values (counts below what the model expects), below it too many large ones. "
            f"Right: mean residual in bins of {by}, with +-2 standard errors; bins whose "
            "interval misses the zero line point at a trend the model misses.")


def section_residuals(ctx: ReportContext) -> Section:
    """Randomized quantile residuals: a summary per model, the figure of the preferred one."""
    rows, figs = [], []
    against = ctx.inp.residuals_against
    for name in ctx.fits:
        res = ctx.residuals(name)
        rows.append(_row(name, res))
        if name == ctx.preferred:
            fig = residual_figure(res, against=against, data=ctx.inp.data)
            figs.append(Figure(f"residuals_{name}", fig, _caption(name, against)))
    return Section("residuals", "Residuals", [
        Text(INTRO), Table("residuals_summary", pd.DataFrame(rows), "Residual summary per model"),
        *figs])


__all__ = ["section_residuals"]
