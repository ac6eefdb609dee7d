"""The groups section: group effects and pooling, for the models that have groups.

Example
-------
>>> section_groups(ctx).blocks[1].name                                 # doctest: +SKIP
'pooling'
"""

from __future__ import annotations

import pandas as pd

from bayeszi.app.report import figures as F
from bayeszi.app.report.context import ReportContext, plain
from bayeszi.app.report.document import Figure, Section, Table, Text
from bayeszi.app.report.sections.common import interval_labels, table_blocks
from bayeszi.base.names import DIAGNOSTIC_COLUMNS

INTRO = ("Group effects are partially pooled: each level's effect is pulled toward a typical "
         "level, the more so the fewer records it has. The pooling factor is near 0 when a "
         "level's own records decide its effect and near 1 when the level is pulled all the way "
         "to the typical value.")


def section_groups(ctx: ReportContext) -> Section | None:
    """Group effects and pooling for models with groups (None when no model has groups)."""
    with_groups = {n: f for n, f in ctx.fits.items() if f.design.groups}
    if not with_groups:
        return None
    interval = ctx.inp.interval
    frames = []
    for name, f in with_groups.items():
        ps = plain(f.pooling_summary(interval=interval)).reset_index()
        ps.insert(0, "model", name)
        frames.append(ps)
    blocks: list = [Text(INTRO), Table(
        "pooling", pd.concat(frames, ignore_index=True),
        "Spread of the group effects and how strongly they are pooled")]
    pref = ctx.preferred if ctx.preferred in with_groups else next(iter(with_groups))
    f = with_groups[pref]
    effects = f.group_effects(interval=interval)
    lo, hi = interval_labels(interval)
    blocks += table_blocks(f"group_effects_{pref}", effects,
                           f"Model {pref}: the effect of each group level (exp scale: rate "
                           "ratio or odds ratio against a typical level)", index=True,
                           columns=["group", "level", "part", "effect", "records", "exp(mean)",
                                    f"exp {lo}", f"exp {hi}", "pooling", *DIAGNOSTIC_COLUMNS[:2],
                                    "flag"])
    for g in f.design.groups:
        blocks.append(Figure(f"group_effects_{pref}_{g.name}", F.group_effect_intervals(
            effects, g.name, f"Model {pref}: {g.name} effects"),
            f"Model {pref}: each {g.name}'s effect on the exp scale against a typical level, "
            f"with {interval:.0%} intervals, sorted."))
    return Section("groups", "Group effects and pooling", blocks)


__all__ = ["section_groups"]
