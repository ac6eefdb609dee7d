"""The averaged model in the predictions section: the candidates' scenario predictions and
contrasts averaged by their stacking weights (:mod:`bayeszi.answers.averaged`), and a note on
whether averaging matters here.

The weights are those of the report's LOO comparison (``ctx.stacking_weights()``), so LOO is
not computed again. Averaging matters when the weights are split: no model carries more
than :data:`SPLIT` of the weight.

Example
-------
>>> averaging_note(ctx).text[:16]                                     # doctest: +SKIP
'Stacking weights'
"""

from __future__ import annotations

from typing import TYPE_CHECKING

import pandas as pd

from bayeszi.answers.averaged import (
    MIN_WEIGHT,
    average_contrast,
    average_predictions,
    plan_mixture,
)
from bayeszi.app.report.context import ReportContext, plain
from bayeszi.app.report.document import Text
from bayeszi.app.report.sections.common import label_contrast

if TYPE_CHECKING:
    from bayeszi.app.study import Scenario

#: the name of the averaged model in the report's tables and figures
AVERAGED = "averaged (stacking)"
#: above this weight one model carries the average, so averaging changes little
SPLIT = 0.9
#: the quantities shown for the averaged model (both mean the same in every family)
AVERAGED_WHATS = ("mean", "p_zero")


def shows_models(ctx: ReportContext) -> bool:
    """Whether the report shows each model's scenario predictions and contrasts."""
    return ctx.inp.predictions != "averaged" or ctx.stacking_weights() is None


def shows_average(ctx: ReportContext) -> bool:
    """Whether the report shows the averaged model (asked for, and two or more models)."""
    return ctx.inp.predictions in ("averaged", "both") and ctx.stacking_weights() is not None


def label_rows(t: pd.DataFrame, scn: Scenario, frame: pd.DataFrame, model: str
               ) -> pd.DataFrame:
    """A prediction table for the report: the varied columns, the model and the scenario."""
    t = plain(t).reset_index(drop=True)
    settings = pd.concat([frame] * (len(t) // len(frame)), ignore_index=True)
    for col in scn.vary:
        t.insert(1, col, settings[col].to_numpy())
    t.insert(0, "model", model)
    t.insert(0, "scenario", scn.name)
    return t


def averaged_scenario_table(ctx: ReportContext, scn: Scenario) -> pd.DataFrame:
    """The averaged model's E[Y] and P(Y = 0) at the rows of scenario ``scn``."""
    frame = scn.frame(ctx.inp.first.spec.exposure)
    t = ctx.caught(f"scenario '{scn.name}', {AVERAGED}", average_predictions, dict(ctx.fits),
                   frame, what=list(AVERAGED_WHATS), groups=scn.groups,
                   interval=ctx.inp.interval, weights=ctx.stacking_weights(),
                   seed=ctx.inp.seed)
    return label_rows(t, scn, frame, AVERAGED)


def averaged_contrast_tables(ctx: ReportContext) -> tuple[list[pd.DataFrame], list[str]]:
    """The averaged model's contrasts (one table per contrast and quantity), and the
    contrasts that no weighted model can answer (it uses none of the changed columns)."""
    inp = ctx.inp
    weights = ctx.stacking_weights()
    kept = list(plan_mixture(dict(ctx.fits), weights).weights)
    tables, skipped = [], []
    for ct in inp.contrasts:
        if not any(c in ctx.fits[n].design.used_columns for n in kept for c in ct.change):
            skipped.append(f"{ct.name} for the averaged model (no weighted model uses "
                           f"{', '.join(ct.change)})")
            continue
        scn = next(s for s in inp.scenarios if s.name == ct.scenario)
        base = scn.frame(inp.first.spec.exposure)
        for what in AVERAGED_WHATS:
            t = ctx.caught(f"contrast '{ct.name}', {AVERAGED}", average_contrast,
                           dict(ctx.fits), base, set_to=dict(ct.change), what=what,
                           groups=scn.groups, interval=inp.interval, weights=weights,
                           seed=inp.seed)
            tables.append(label_contrast(t, ct.name, AVERAGED, scn, base))
    return tables, skipped


def averaging_note(ctx: ReportContext) -> Text | None:
    """Whether averaging the candidates matters here (None with one model)."""
    weights = ctx.stacking_weights()
    if weights is None:
        return None
    ranked = sorted(weights.items(), key=lambda kv: -kv[1])
    shown = ", ".join(f"{n} {w:.2f}" for n, w in ranked)
    top, best = ranked[0]
    if best > SPLIT:
        text = (f"Stacking weights: {shown}. {top} carries more than {SPLIT:.0%} of the "
                "weight, so averaging the candidates changes little here: the averaged "
                f"predictions are close to {top}'s.")
    else:
        text = (f"Stacking weights: {shown}. No model carries more than {SPLIT:.0%} of the "
                "weight: the data do not settle which candidate predicts best, so averaging "
                "matters. The averaged model (stacking) pools the candidates' draws in "
                "proportion to their weights, so its intervals carry that model uncertainty.")
        if not shows_average(ctx):
            text += (" To show it, set predictions = \"both\" (or \"averaged\") in [study].")
    left = [n for n, w in ranked if w < MIN_WEIGHT]
    if left and shows_average(ctx):
        text += f" Left out of the average (weight below {MIN_WEIGHT}): {', '.join(left)}."
    return Text(text, "note")


__all__ = ["AVERAGED", "AVERAGED_WHATS", "SPLIT", "averaged_contrast_tables",
           "averaged_scenario_table", "averaging_note", "label_rows", "shows_average",
           "shows_models"]
