"""The preview section: how far each model's quick approximate preview (made before
sampling, when the study asked for one) was from its posterior; and the page of a study run
with previews only (no sampling), every table labelled approximate.

Example
-------
>>> section_preview(ctx) is None     # no previews asked for           # doctest: +SKIP
True
"""

from __future__ import annotations

from collections.abc import Mapping
from typing import Any

import pandas as pd

from bayeszi.app.report.context import ReportContext
from bayeszi.app.report.document import Document, Section, Text
from bayeszi.app.report.sections.common import table_blocks
from bayeszi.app.report.sections.sensitivity import collinearity_blocks
from bayeszi.fitting.preview import HEADING, Preview, preview_gap

ABOUT = (
    "A preview is the Laplace approximation at the posterior mode: a normal distribution "
    "fitted to the curvature of the log posterior at its highest point, on the sampler's "
    "unconstrained scale. It takes seconds, but it is approximate: exact "
    "only for a normal posterior, poor for skewed ones, for group sds (the mode of a "
    "hierarchical model is a poor centre) and for weakly identified terms. Use it to catch "
    "a model that makes no sense before sampling, never as the reported answer.")


def _timing_row(name: str, p: Preview, f: Any, gap: pd.DataFrame) -> dict[str, Any]:
    design = p.record.design
    terms = {("counts", t) for t in design.counts.terms}
    terms |= {("zeros", t) for t in (design.zeros.terms if design.zeros is not None else [])}
    coef = gap.loc[[i for i in gap.index if i in terms]]
    return {"model": name, "preview seconds": p.seconds,
            "sampling seconds": float(f.timing.get("sample_s", float("nan"))),
            "largest gap, coefficients (posterior sds)": float(coef["gap in sd"].abs().max()),
            "largest gap, all rows (posterior sds)": float(gap["gap in sd"].abs().max())}


def section_preview(ctx: ReportContext) -> Section | None:
    """Each preview against the posterior that followed (None when there were none)."""
    previews = ctx.inp.previews
    if not previews:
        return None
    blocks: list = [Text(ABOUT, "note")]
    rows = []
    for name, p in previews.items():
        f = ctx.fits.get(name)
        if f is None:
            continue
        gap = preview_gap(p, f)
        rows.append(_timing_row(name, p, f, gap))
        blocks += table_blocks(f"preview_gap_{name}", gap,
                               f"Model {name}: approximate preview means against the posterior "
                               "(NUTS) means, and the gap in posterior sds", index=True)
    if rows:
        blocks.insert(1, table_blocks("preview_summary", pd.DataFrame(rows),
                                      "Preview time against sampling time, and the largest "
                                      "gap between preview and posterior means")[0])
    return Section("preview", "Approximate previews against the posterior", blocks)


def preview_document(title: str, summary: str, previews: Mapping[str, Preview],
                     interval: float = 0.9) -> Document:
    """The page of a study run with previews only: each model's approximate coefficient
    table and collinear predictors, labelled approximate throughout.

    Example
    -------
    >>> doc = preview_document("t", "", {"zinb": p})                    # doctest: +SKIP
    >>> doc.sections[0].id                                              # doctest: +SKIP
    'preview'
    """
    blocks: list = [Text(HEADING + ".", "warning"), Text(ABOUT, "note")]
    for name, p in previews.items():
        blocks += table_blocks(f"preview_{name}", p.coefficients(interval=interval),
                               f"Model {name} ({p.spec.family}): APPROXIMATE coefficients "
                               f"(Laplace approximation, {p.seconds:.1f} s)", index=True)
        blocks += [Text(f"Model {name}: {t}.", "warning") for t in p.problems()]
        blocks += collinearity_blocks(name, p.record)
    return Document(f"{title} (approximate preview)", summary,
                    [Section("preview", "Approximate previews (no sampling)", blocks)])


__all__ = ["ABOUT", "preview_document", "section_preview"]
