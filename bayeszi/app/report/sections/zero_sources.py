"""The zero-sources section: where the zeros come from, per group level, for the preferred
model (zero-inflated families only; the others have nothing to split).

Example
-------
>>> section_zero_sources(ctx).title                                    # doctest: +SKIP
'Where the zeros come from'
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from bayeszi.answers.checks import zero_source_tables
from bayeszi.app.report import figures as F
from bayeszi.app.report.context import ReportContext, plain
from bayeszi.app.report.document import Figure, Section, Table, Text
from bayeszi.app.report.sections.common import table_blocks
from bayeszi.families import get_family

TITLE = "Where the zeros come from"
COLUMN = "P(zero from zeros part)"


def _nothing_to_split(ctx: ReportContext, family: str, kind: str | None) -> Section:
    note = ("every zero comes from the zeros part, which models P(Y = 0) directly"
            if kind == "hurdle"
            else "it has no zeros part, so every zero comes from the count process")
    return Section("zero-sources", TITLE, [Text(
        f"The preferred model {ctx.preferred} is {family}: {note}. There is "
        "nothing to split.")])


def _summary(ctx: ReportContext, y: np.ndarray, table: pd.DataFrame) -> Table:
    p = table[COLUMN].to_numpy()
    return Table("zero_sources_summary", pd.DataFrame([{
        "model": ctx.preferred, "observed zeros": int((y == 0).sum()),
        "expected extra zeros": float(p.sum()),
        "share of zeros that are extra": float(p.mean()) if p.size else np.nan,
        "zeros with P(extra) > 0.9": int((p > 0.9).sum()),
        "zeros with P(extra) < 0.1": int((p < 0.1).sum())}]), "All zeros")


def section_zero_sources(ctx: ReportContext) -> Section:
    """Where the zeros come from, per group level, for the preferred model."""
    pref = ctx.preferred
    f = ctx.fits[pref]
    kind = get_family(f.spec.family).zeros_kind
    if kind != "inflation":
        return _nothing_to_split(ctx, f.spec.family, kind)
    blocks: list = [Text(
        f"In {f.spec.family}, a zero can be an extra zero (the zeros part: nothing there to "
        "count) or an ordinary zero of the count process (there, but none this time). For "
        "each observed zero the model gives the probability that it is an extra zero; the "
        "table sums these per group level. The split rests on the model's form: the data "
        "alone cannot tell the two kinds of zero apart.")]
    by = [g.name for g in f.design.groups] or None
    t_all, t = ctx.caught("zero sources", zero_source_tables, f, by=by,
                          interval=ctx.inp.interval)  # one pass over the draws for both
    if t is not None:
        t = plain(t).sort_values(["group", "share extra"], ascending=[True, False])
        blocks += table_blocks(f"zero_sources_{pref}", t,
                               f"Model {pref}: expected extra zeros per group level",
                               columns=[c for c in t.columns if c != "note"])
    if COLUMN in t_all.columns:
        blocks.insert(1, _summary(ctx, f.design.y, t_all))
    if f.design.groups:
        g = f.design.groups[0].name
        blocks.append(Figure(f"zero_sources_{pref}", F.zero_sources_bars(
            t, g, f"Model {pref}: where the zeros come from, per {g}"),
            f"Model {pref}: observed zeros per {g}, split into the expected number "
            "of extra zeros (zeros part) and of ordinary zeros (count process)."))
    return Section("zero-sources", TITLE, blocks)


__all__ = ["section_zero_sources"]
