"""The comparison section: the candidates ranked by PSIS-LOO (computed once, in the context).

Example
-------
>>> section_comparison(ctx).blocks[1].name                             # doctest: +SKIP
'loo_comparison'
"""

from __future__ import annotations

import pandas as pd

from bayeszi.app.report.context import ReportContext
from bayeszi.app.report.document import Section, Text
from bayeszi.app.report.sections.common import table_blocks

INTRO = ("Models are ranked by their expected log predictive density for a new record (elpd), "
         "estimated by Pareto-smoothed importance sampling leave-one-out (PSIS-LOO). Higher "
         "elpd predicts better; a difference smaller than about twice its standard error is "
         "not a clear preference. Pareto k above 0.7 marks records whose LOO estimate is "
         "unreliable (Vehtari et al. 2024).")


def loo_table(ctx: ReportContext) -> pd.DataFrame:
    """The comparison table, or with one model its LOO estimate as a one-row table."""
    if ctx.comparison is not None:
        return ctx.comparison.copy()
    name, est = next(iter(ctx.loo.items()))
    counts = est.k_counts()
    return pd.DataFrame([{"model": name, "family": est.fitted.spec.family,
                          "elpd_loo": est.elpd, "se": est.se, "p_loo": est.p_loo,
                          "k_good": counts["good"], "k_ok": counts["ok"],
                          "k_bad": counts["bad"]}]).set_index("model")


def section_comparison(ctx: ReportContext) -> Section:
    """LOO comparison of the candidates, with a flag for unreliable LOO or sampler trouble."""
    table = loo_table(ctx)
    table["flag"] = [("Pareto k > 0.7" if r["k_bad"] else "")
                     + ("; sampler: " + r["sampler"] if r.get("sampler", "ok") != "ok" else "")
                     for _, r in table.iterrows()]
    blocks: list = [Text(INTRO)]
    blocks += table_blocks("loo_comparison", table, "LOO comparison", index=True)
    return Section("comparison", "Model comparison (LOO)", blocks)


__all__ = ["loo_table", "section_comparison"]
