"""The models section: the candidate models (family, formulas, groups, sampler) and their priors.

Example
-------
>>> section_models(ctx).title                                          # doctest: +SKIP
'Models and priors'
"""

from __future__ import annotations

from typing import Any

import numpy as np
import pandas as pd

from bayeszi.app.report.context import ReportContext
from bayeszi.app.report.document import Section, Table, Text
from bayeszi.app.report.sections.common import table_blocks, zeros_label
from bayeszi.base.names import ALL_GROUPS_SD_LABEL
from bayeszi.families import get_family

INTRO = ("Each candidate has a counts part (log link; the mean of the count process, with "
         "log exposure as an offset) and, except for the plain Poisson and negative "
         "binomial, a zeros part (logit link). In the zero-inflated families (zip, zinb) "
         "the zeros part models P(extra zero), a zero from a process that produces nothing "
         "at all; in the hurdle families it models P(Y = 0) itself.")


def _model_row(name: str, f: Any) -> dict[str, Any]:
    """One row of the models table: formulas, groups and sampler settings."""
    s = f.spec
    post = f.idata.posterior
    return {
        "model": name, "family": s.family,
        "counts part (log mean)": f"{s.response} ~ {s.counts_rhs}"
        + (f" + log({s.exposure})" if s.exposure else "")
        + (f" + {s.offset} (offset)" if s.offset else ""),
        "zeros part": (f"logit {zeros_label(s.family)} ~ {s.zeros_rhs}"
                       if get_family(s.family).zeros_kind else "none"),
        "groups": ", ".join(s.groups) or "none",
        "varying slopes": "; ".join(f"{p}: {', '.join(t)}" for p, t in s.varying.items())
        or "none",
        "chains": int(post.sizes["chain"]), "draws per chain": int(post.sizes["draw"]),
        "warm-up steps": int(s.sampler.warmup_steps),
        "acceptance target": float(s.sampler.acceptance_target),
        "seed": "" if s.sampler.seed is None else str(s.sampler.seed),
        "sampling seconds": float(f.timing.get("sample_s", np.nan)),
    }


def _prior_rows(name: str, f: Any) -> list[dict[str, Any]]:
    """The priors a model uses (terms the family or the groups do not have left out)."""
    s = f.spec
    fam = get_family(s.family)
    out = []
    for r in f.priors.table():
        if r["term"] == "sqrt(dispersion)" and not fam.has_dispersion:
            continue
        if r["term"] == ALL_GROUPS_SD_LABEL and not s.groups:
            continue
        if r["term"] == ALL_GROUPS_SD_LABEL and r["part"] == "zeros" and not fam.zeros_kind:
            continue
        out.append({"model": name, **r})
    return out


def section_models(ctx: ReportContext) -> Section:
    """The candidate models (family, formulas, groups, sampler) and their priors."""
    rows = [_model_row(n, f) for n, f in ctx.fits.items()]
    priors = [r for n, f in ctx.fits.items() for r in _prior_rows(n, f)]
    blocks: list = [
        Text(INTRO),
        Table("models", pd.DataFrame(rows), "Candidate models and sampler settings (NUTS)"),
        Text("Priors are stated on the scale of each predictor as written in the formula. "
             "Defaults are weakly informative; their reasons are in docs/priors.md."),
    ]
    blocks += table_blocks("priors", pd.DataFrame(priors), "Priors used")
    return Section("models", "Models and priors", blocks)


__all__ = ["section_models"]
