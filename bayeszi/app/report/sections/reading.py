"""The reading section: a plain-language reading of the preferred model (its coefficient table
and sampler problems come from the context).

Example
-------
>>> section_reading(ctx).title                                         # doctest: +SKIP
'Reading the preferred model'
"""

from __future__ import annotations

from bayeszi.app.report.context import ReportContext
from bayeszi.app.report.document import Bullets, Section, Text
from bayeszi.app.report.reading import reading_lines
from bayeszi.app.report.sections.common import unit


def section_reading(ctx: ReportContext) -> Section:
    """Why the preferred model, a caution on sampler problems, and its reading in sentences."""
    name = ctx.preferred
    f = ctx.fits[name]
    blocks: list = [Text(f"The preferred model is {name} ({f.spec.family}): "
                         f"{ctx.preferred_reason}")]
    if ctx.problems[name]:
        blocks.append(Text("Read this with caution: the sampler reported problems for this "
                           "model (see Convergence diagnostics), so its numbers may shift "
                           "with a longer run.", "warning"))
    blocks.append(Bullets(reading_lines(f, ctx.coefficients[name], ctx.inp.interval,
                                        unit(ctx.inp))))
    return Section("reading", "Reading the preferred model", blocks)


__all__ = ["section_reading"]
