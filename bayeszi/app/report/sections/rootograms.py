"""The rootograms section: observed against expected frequency of each count, per model.

Example
-------
>>> section_rootograms(ctx).blocks[1].name                             # doctest: +SKIP
'count_frequencies_zinb'
"""

from __future__ import annotations

from bayeszi.app.report.context import ReportContext, plain
from bayeszi.app.report.document import Figure, Section, Text
from bayeszi.app.report.sections.common import interval_labels, table_blocks
from bayeszi.plots.checkplots import rootogram_figure

INTRO = ("A hanging rootogram (Tukey) hangs the observed frequency of each count from the "
         "model's expected frequency, both on a square-root scale: bars ending above zero "
         "mean fewer records with that count than expected, below zero more. How far is too "
         "far is shown by the data sets the model replicates: the 'replicated' columns give "
         "the central interval of the number of records with each count in them.")
CAPTION = ("Model {name}: hanging rootogram. The step line is the square root of the expected "
           "number of records with each count; each bar, the square root of the observed "
           "number, hangs from it. The tick at each count's centre spans where the bar would "
           "end in {interval:.0%} of the model's replicated data sets: a bar ending below its "
           "tick means more records with that count than the model produces, above it fewer.")


def section_rootograms(ctx: ReportContext) -> Section:
    """Observed against expected frequency of each count (hanging rootograms)."""
    lo, hi = interval_labels(ctx.inp.interval)
    blocks: list = [Text(INTRO)]
    for name in ctx.fits:
        raw = ctx.count_frequencies(name)
        blocks += table_blocks(f"count_frequencies_{name}", plain(raw),
                               f"Model {name}: observed and expected number of records per "
                               "count, and the number in replicated data sets", index=True,
                               columns=["count", "observed", "expected", lo, hi,
                                        f"replicated {lo}", f"replicated {hi}"])
        blocks.append(Figure(f"rootogram_{name}", rootogram_figure(raw),
                             CAPTION.format(name=name, interval=ctx.inp.interval)))
    return Section("rootograms", "Rootograms", blocks)


__all__ = ["section_rootograms"]
