"""The contrasts of the predictions section: each scenario row against the same row after the
change a study's contrast names, draw by draw, per model (and/or for the averaged model).

Example
-------
>>> type(contrast_blocks(ctx)[0]).__name__                             # doctest: +SKIP
'Text'
"""

from __future__ import annotations

from typing import TYPE_CHECKING

import pandas as pd

from bayeszi.answers.contrast import contrast
from bayeszi.app.report.context import ReportContext
from bayeszi.app.report.document import Text
from bayeszi.app.report.sections.averaging import (
    averaged_contrast_tables,
    shows_average,
    shows_models,
)
from bayeszi.app.report.sections.common import interval_labels, label_contrast, table_blocks, unit

if TYPE_CHECKING:
    pass


def _tables(ctx: ReportContext) -> tuple[list[pd.DataFrame], list[str]]:
    """Contrast tables per contrast, model and quantity; and the pairs not computed."""
    inp = ctx.inp
    tables, skipped = [], []
    for ct in inp.contrasts:
        scn = next(s for s in inp.scenarios if s.name == ct.scenario)
        base = scn.frame(inp.first.spec.exposure)
        for name, f in ctx.fits.items() if shows_models(ctx) else ():
            used = {c: v for c, v in ct.change.items() if c in f.design.used_columns}
            if not used:
                skipped.append(f"{ct.name} for {name} (the model does not use "
                               f"{', '.join(ct.change)})")
                continue
            mode = scn.groups if f.design.groups else "typical"
            for what in ("mean", "p_zero"):
                t = ctx.caught(f"contrast '{ct.name}', model {name}", contrast, f,
                               base, set_to=used, what=what, groups=mode,
                               interval=inp.interval, seed=inp.seed)
                tables.append(label_contrast(t, ct.name, name, scn, base))
    return tables, skipped


def contrast_blocks(ctx: ReportContext) -> list:
    """The contrasts' introduction, table and the note on contrasts not computed."""
    tables, skipped = _tables(ctx)
    if shows_average(ctx):
        more, not_done = averaged_contrast_tables(ctx)
        tables += more
        skipped += not_done
    blocks: list = [Text(
        "Contrasts compare each scenario row with the same row after the change the study "
        "names, draw by draw, with the same group effect in both. 'base' and 'scenario' are "
        f"posterior means (E[Y] per {unit(ctx.inp)} or P(Y = 0)); the ratio is scenario / base.")]
    if tables:
        lo, hi = interval_labels(ctx.inp.interval)
        blocks += table_blocks("contrasts", pd.concat(tables, ignore_index=True),
                               "Contrasts (differences with their intervals are in the CSV "
                               "file)",
                               columns=["contrast", "model", "setting", "quantity", "base",
                                        "scenario", "ratio (median)", f"ratio {lo}",
                                        f"ratio {hi}", "P(ratio > 1)"])
    if skipped:
        blocks.append(Text("Not computed (ratio 1 by construction): " + "; ".join(skipped)
                           + ".", "note"))
    return blocks


__all__ = ["contrast_blocks"]
