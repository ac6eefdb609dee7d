"""The diagnostics section: divergences, R-hat and ESS per model, flagged parameters and the
warnings raised while fitting.

Example
-------
>>> section_diagnostics(ctx).blocks[1].name                            # doctest: +SKIP
'diagnostics'
"""

from __future__ import annotations

from typing import Any

import pandas as pd

from bayeszi.app.report.context import ReportContext
from bayeszi.app.report.document import Section, Table, Text
from bayeszi.base.names import BULK_ESS as BULK
from bayeszi.base.names import RHAT
from bayeszi.base.names import TAIL_ESS as TAIL
from bayeszi.model.diagnostics import Diagnostics


def short_flags(d: Diagnostics) -> str:
    """The kinds of sampler trouble of a fit, comma-separated ("" when none)."""
    out = []
    if d.divergences:
        out.append("divergences")
    if d.bad_rhat:
        out.append("R-hat")
    if d.bad_ess:
        out.append("low ESS")
    if d.max_treedepth_hits:
        out.append("tree depth")
    return ", ".join(out)


def _summary_row(name: str, d: Diagnostics) -> dict[str, Any]:
    t = d.table
    return {
        "model": name, "draws": int(d.draws), "divergences": int(d.divergences),
        "max tree depth hits": int(d.max_treedepth_hits),
        "largest R-hat": float(t[RHAT].max()),
        "smallest bulk ESS": float(t[BULK].min()),
        "smallest tail ESS": float(t[TAIL].min()),
        "parameters flagged": len(set(d.bad_rhat) | set(d.bad_ess)),
        "flag": short_flags(d),
    }


def _worst_rows(name: str, d: Diagnostics) -> list[dict[str, Any]]:
    """Up to 10 flagged parameters of a fit, the worst first."""
    t, th = d.table, d.thresholds
    bad = t[(t[RHAT] > th.rhat) | (t[BULK] < th.ess) | (t[TAIL] < th.ess)]
    bad = bad.assign(order=bad[BULK].rank() - bad[RHAT].rank()).sort_values("order")
    out = []
    for key, r in bad.head(10).iterrows():
        flag = " ".join(x for x, on in (("R-hat", r[RHAT] > th.rhat),
                                       ("low ESS", min(r[BULK], r[TAIL]) < th.ess))
                        if on)
        out.append({"model": name, "parameter": str(key), RHAT: float(r[RHAT]),
                    BULK: float(r[BULK]), TAIL: float(r[TAIL]),
                    "flag": flag})
    return out


def section_diagnostics(ctx: ReportContext) -> Section:
    """Divergences, R-hat and ESS per model, flagged parameters and sampler warnings."""
    rows, worst = [], []
    notes: list = []
    for name, f in ctx.fits.items():
        d = f.diagnostics()
        probs = ctx.problems[name]
        rows.append(_summary_row(name, d))
        worst += _worst_rows(name, d)
        notes += [Text(f"Model {name}: {p}.", "warning") for p in probs]
        notes += [Text(f"Model {name}, while fitting: {n}", "warning")
                  for n in ctx.inp.notes.get(name, [])
                  if not any(n.startswith(p[:40]) for p in probs)]
    th = ctx.inp.first.sampling.thresholds
    intro = Text(f"A model's draws are trusted when there are no divergent transitions, every "
                 f"R-hat is at most {th.rhat} and every bulk and tail ESS is at least "
                 f"{th.ess:.0f} (Vehtari et al. 2021). Flagged rows are highlighted.")
    blocks = [intro, Table("diagnostics", pd.DataFrame(rows), "Sampler diagnostics per model"),
              *notes]
    if worst:
        blocks.append(Table("diagnostics_flagged", pd.DataFrame(worst),
                            "Flagged parameters (up to 10 per model, the worst first)"))
    else:
        blocks.append(Text("No parameter of any model was flagged."))
    return Section("diagnostics", "Convergence diagnostics", blocks)


__all__ = ["section_diagnostics", "short_flags"]
