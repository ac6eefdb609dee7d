"""The residuals section: randomized quantile residuals of every model, with the figure of
the preferred one.

Example
-------
>>> section_residuals(ctx).blocks[1].name                              # doctest: +SKIP
'residuals_summary'
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from bayeszi.answers.checks import residuals
from bayeszi.app.report.context import ReportContext
from bayeszi.app.report.document import Figure, Section, Table, Text
from bayeszi.plots.checkplots import residual_figure

INTRO = ("Randomized quantile residuals (Dunn & Smyth 1996) are standard normal when the model "
         "is right: mean 0, sd 1, about 4.6% beyond +-2 and 0.3% beyond +-3 (normal "
         "probabilities). Patterns against the fitted values point at a missing term or a "
         "wrong family.")


def section_residuals(ctx: ReportContext) -> Section:
    """Randomized quantile residuals: a summary per model, the figure of the preferred one."""
    rows, figs = [], []
    for name, f in ctx.fits.items():
        res = ctx.caught(f"residuals of {name}", residuals, f, seed=ctx.inp.seed or 0)
        r = res["residual"].to_numpy()
        rows.append({"model": name, "records": int(r.size), "mean": float(r.mean()),
                     "sd": float(r.std(ddof=1)), "share beyond +-2": float(np.mean(np.abs(r) > 2)),
                     "share beyond +-3": float(np.mean(np.abs(r) > 3)),
                     "flag": "sd far from 1" if abs(r.std(ddof=1) - 1) > 0.15 else ""})
        if name == ctx.preferred:
            figs.append(Figure(f"residuals_{name}", residual_figure(res),
                               f"Model {name}: randomized quantile residuals against normal "
                               "quantiles (left) and against the expected count (right)."))
    return Section("residuals", "Residuals", [
        Text(INTRO), Table("residuals_summary", pd.DataFrame(rows), "Residual summary per model"),
        *figs])


__all__ = ["section_residuals"]
