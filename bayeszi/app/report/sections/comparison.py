"""The comparison section: the candidates ranked by PSIS-LOO (computed once, in the context).

Example
-------
>>> section_comparison(ctx).blocks[1].name                             # doctest: +SKIP
'loo_comparison'
"""

from __future__ import annotations

import pandas as pd

from bayeszi.answers import comparison as C
from bayeszi.app.report.context import ReportContext
from bayeszi.app.report.document import Section, Text
from bayeszi.app.report.sections.common import table_blocks

INTRO = ("Models are placed by their LOO log score: the expected log predictive density of a "
         "new record (elpd in Vehtari, Gelman & Gabry 2017), estimated by Pareto-smoothed "
         "importance sampling leave-one-out (PSIS-LOO). A higher score predicts better; a "
         "model whose score is behind the best by less than about twice the standard error "
         "of the difference is not clearly worse. Pareto k above 0.7 marks records whose "
         "LOO estimate is unreliable (Vehtari et al. 2024): 'rows low k' counts k <= 0.5, "
         "'rows moderate k' 0.5 < k <= 0.7, 'rows high k' k > 0.7.")


def loo_table(ctx: ReportContext) -> pd.DataFrame:
    """The comparison table, or with one model its LOO estimate as a one-row table."""
    if ctx.comparison is not None:
        return ctx.comparison.copy()
    name, est = next(iter(ctx.loo.items()))
    counts = est.k_counts()
    return pd.DataFrame([{"model": name, "family": est.fitted.spec.family,
                          C.SCORE: est.elpd, C.SCORE_SE: est.se, C.EFFECTIVE: est.p_loo,
                          C.K_LOW: counts["low"], C.K_MODERATE: counts["moderate"],
                          C.K_HIGH: counts["high"]}]).set_index("model")


def section_comparison(ctx: ReportContext) -> Section:
    """LOO comparison of the candidates, with a flag for unreliable LOO or sampler trouble."""
    table = loo_table(ctx)
    table["flag"] = [(f"Pareto k > {C.K_LIMIT}" if r[C.K_HIGH] else "")
                     + ("; sampler: " + r[C.SAMPLER] if r.get(C.SAMPLER, "ok") != "ok" else "")
                     for _, r in table.iterrows()]
    blocks: list = [Text(INTRO)]
    blocks += table_blocks("loo_comparison", table, "LOO comparison", index=True)
    return Section("comparison", "Model comparison (LOO)", blocks)


__all__ = ["loo_table", "section_comparison"]
