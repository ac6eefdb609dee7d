"""The report's sections, in page order: one module each, one function of the shared context.

Each section is a function ``section_NAME(ctx) -> Section | None`` (None: nothing to show,
e.g. no scenarios) in its own module here, reading the
:class:`~bayeszi.app.report.context.ReportContext`: the input, plus the answers several
sections need (LOO, the comparison, the preferred model, coefficient tables, sampler
problems), computed once by :func:`~bayeszi.app.report.context.build_context`. A section
computes only what is its own. To add a section, write its module and list its function in
:data:`SECTIONS`.

:func:`build_document` computes the context, then every section in order, and returns the
:class:`~bayeszi.app.report.document.Document`, the lines of the reproducibility footer and
the warnings raised on the way (also shown at the end of the diagnostics section).

Example
-------
>>> doc, footer, warned = build_document(ReportInput(title="t", fits={"zinb": fitted},
...                                                  data=df))         # doctest: +SKIP
>>> [s.id for s in doc.sections][:3]                                    # doctest: +SKIP
['data', 'models', 'diagnostics']
"""

from __future__ import annotations

from collections.abc import Callable

from bayeszi.app.report.context import ReportContext, ReportInput, build_context
from bayeszi.app.report.document import Document, Section, Text
from bayeszi.app.report.footer import footer_lines
from bayeszi.app.report.sections.cautions import section_cautions
from bayeszi.app.report.sections.coefficients import section_coefficients
from bayeszi.app.report.sections.comparison import section_comparison
from bayeszi.app.report.sections.data import section_data
from bayeszi.app.report.sections.diagnostics import section_diagnostics
from bayeszi.app.report.sections.groups import section_groups
from bayeszi.app.report.sections.models import section_models
from bayeszi.app.report.sections.predictions import section_predictions
from bayeszi.app.report.sections.preview import section_preview
from bayeszi.app.report.sections.reading import section_reading
from bayeszi.app.report.sections.residuals import section_residuals
from bayeszi.app.report.sections.rootograms import section_rootograms
from bayeszi.app.report.sections.sensitivity import section_sensitivity
from bayeszi.app.report.sections.spread import section_spread
from bayeszi.app.report.sections.zero_checks import section_zero_checks
from bayeszi.app.report.sections.zero_sources import section_zero_sources

SectionFn = Callable[[ReportContext], Section | None]

#: The sections in page order.
SECTIONS: tuple[SectionFn, ...] = (
    section_data, section_models, section_diagnostics, section_comparison,
    section_coefficients, section_sensitivity, section_preview, section_groups,
    section_zero_checks, section_spread, section_rootograms, section_residuals,
    section_zero_sources, section_predictions, section_reading, section_cautions,
)


def build_document(inp: ReportInput, progress: Callable[[str], None] | None = None,
                   ahead: bool = True) -> tuple[Document, list[str], list[str]]:
    """Compute the context and every section; returns (document, footer lines, warnings).
    ``ahead``: let worker processes compute the heaviest answers meanwhile (same results;
    see :mod:`bayeszi.app.report.ahead`)."""
    say = progress or (lambda _: None)
    say("LOO and the answers the sections share")
    ctx = build_context(inp, ahead=ahead)
    sections: list[Section] = []
    try:
        for fn in SECTIONS:
            say(fn.__name__.removeprefix("section_").replace("_", " "))
            section = fn(ctx)
            if section is not None:
                sections.append(section)
    finally:
        ctx.close()
    doc = Document(inp.title, inp.summary, sections)
    if ctx.warnings:
        doc.section("diagnostics").blocks += [Text(w, "warning") for w in ctx.warnings]
    return doc, footer_lines(inp.provenance, inp.fits, inp.seed), ctx.warnings


__all__ = ["SECTIONS", "ReportInput", "build_document"]
