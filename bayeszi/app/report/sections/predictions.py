"""The predictions section: every model's predictions at the study's scenarios (and/or those
of the models averaged by their stacking weights, :mod:`.averaging`, as the study's
``predictions`` says), with a curve per scenario that varies a column, followed by the
contrasts (:mod:`.contrasts`).

Example
-------
>>> section_predictions(ctx).title                                     # doctest: +SKIP
'Scenario predictions and contrasts'
"""

from __future__ import annotations

from typing import TYPE_CHECKING

import pandas as pd

from bayeszi.answers.predict import predict
from bayeszi.app.report import figures as F
from bayeszi.app.report.context import ReportContext
from bayeszi.app.report.document import Figure, Section, Text
from bayeszi.app.report.sections.averaging import (
    averaged_scenario_table,
    averaging_note,
    label_rows,
    shows_average,
    shows_models,
)
from bayeszi.app.report.sections.common import interval_labels, table_blocks, unit
from bayeszi.app.report.sections.contrasts import contrast_blocks
from bayeszi.families import get_family

if TYPE_CHECKING:
    from bayeszi.app.study import Scenario


def _scenario_tables(ctx: ReportContext, scn: Scenario) -> list[pd.DataFrame]:
    """One prediction table per model at the rows of scenario ``scn`` (and one for the
    averaged model when the study asks for it)."""
    frame = scn.frame(ctx.inp.first.spec.exposure)
    tables = []
    for name, f in ctx.fits.items() if shows_models(ctx) else ():
        whats = ["mean", "p_zero"]
        if get_family(f.spec.family).zeros_kind == "inflation":  # hurdle: equals p_zero
            whats.append("p_zeros_part")
        mode = scn.groups if f.design.groups else "typical"
        t = ctx.caught(f"scenario '{scn.name}', model {name}", predict, f, frame,
                       what=whats, groups=mode, interval=ctx.inp.interval, seed=ctx.inp.seed)
        tables.append(label_rows(t, scn, frame, name))
    if shows_average(ctx):
        tables.append(averaged_scenario_table(ctx, scn))
    return tables


def _curve(ctx: ReportContext, scn: Scenario, tables: list[pd.DataFrame]) -> Figure:
    """Expected count across the varied column of ``scn``, per model."""
    inp = ctx.inp
    response, per = inp.first.spec.response, unit(inp)
    lo, hi = interval_labels(inp.interval)
    col = next(iter(scn.vary))
    sub = pd.concat(tables)
    sub = sub[sub["quantity"] == sub["quantity"].iloc[0]]
    return Figure(f"scenario_{scn.name}", F.scenario_curve(
        sub, col, "mean", lo, hi, f"expected {response} per {per}", f"Scenario '{scn.name}'"),
        f"Scenario '{scn.name}': expected {response} per {per} across {col}, "
        f"per model, with {inp.interval:.0%} intervals.")


def section_predictions(ctx: ReportContext) -> Section | None:
    """Scenario predictions and contrasts (None when the study names no scenario)."""
    inp = ctx.inp
    if not inp.scenarios:
        return None
    per = unit(inp)
    whose = {"models": "for every model", "averaged": "for the candidate models averaged by "
             "their stacking weights", "both": "for every model and for the models averaged by "
             "their stacking weights"}[inp.predictions if shows_average(ctx) else "models"]
    blocks: list = [Text(
        f"Predictions at the settings the study names, {whose}, with central "
        f"{inp.interval:.0%} intervals. Unless a scenario gives the exposure, it is one "
        f"{per}, so E[Y] is the expected count per {per}. 'new' groups draw a group effect "
        "from the population (a site not in the data); 'known' uses a fitted group's effect; "
        "'average' averages over the population of groups.")]
    note = averaging_note(ctx)
    if note is not None:
        blocks.append(note)
    tables, figs = [], []
    for scn in inp.scenarios:
        mine = _scenario_tables(ctx, scn)
        tables += mine
        if scn.vary:
            figs.append(_curve(ctx, scn, mine))
    fixed = "; ".join(f"{s.name}: " + ", ".join(f"{k} = {v}" for k, v in s.values.items())
                      + f" (groups: {s.groups})" for s in inp.scenarios)
    blocks.append(Text(f"Settings held fixed: {fixed}."))
    blocks += table_blocks("scenario_predictions", pd.concat(tables, ignore_index=True),
                           "Scenario predictions")
    blocks += figs
    if inp.contrasts:
        blocks += contrast_blocks(ctx)
    return Section("predictions", "Scenario predictions and contrasts", blocks)


__all__ = ["section_predictions"]
