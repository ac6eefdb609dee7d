"""Write a :class:`~bayeszi.app.report.document.Document` into an output folder.

The folder gets ``report.html`` (self-contained: figures embedded), ``tables/NAME.csv`` for
every table (full precision) and ``figures/NAME.png`` for every figure, rendered once and
used for both the page and the file; ``vector=True`` adds ``figures/NAME.svg`` (each SVG
costs about as much again as its PNG). Where a second core is free, a forked worker renders
figures from the last one back while this process renders from the first
(:mod:`bayeszi.app.report.ahead`). Everything goes into the temporary folder of an
:class:`~bayeszi.app.report.output.OutputFolder`, which the caller commits.

Example
-------
>>> import os, tempfile, pandas as pd
>>> from bayeszi.app.report.document import Document, Section, Table
>>> from bayeszi.app.report.output import OutputFolder
>>> doc = Document("t", sections=[Section("s", "S", [Table("rows", pd.DataFrame({"y": [1]}),
...                                                       "c")])])
>>> with OutputFolder(os.path.join(tempfile.mkdtemp(), "out")) as out:
...     files = write_document(doc, out)
...     _ = out.commit()
>>> files
['tables/rows.csv', 'report.html']
"""

from __future__ import annotations

import io
import re
from collections.abc import Sequence

from bayeszi.app.report.ahead import WorkAhead
from bayeszi.app.report.document import Document, render_html
from bayeszi.app.report.output import OutputFolder

REPORT_NAME = "report.html"


def slug(name: str) -> str:
    """A file-name-safe form of ``name``.

    >>> slug("zinb reach (v2)")
    'zinb-reach-v2'
    """
    s = re.sub(r"[^A-Za-z0-9_.+-]+", "-", name.strip()).strip("-.")
    return s or "item"


def figure_bytes(figure, fmt: str, dpi: int = 110) -> bytes:
    """The figure rendered as ``png`` or ``svg`` bytes, drawn once: every report figure lays
    itself out (constrained layout or ``tight_layout``), so no tight bounding box is asked
    for (it would draw the figure, and rerun its layout, a second time)."""
    buf = io.BytesIO()
    meta = {"Software": None} if fmt == "png" else {"Date": None}
    figure.savefig(buf, format=fmt, dpi=dpi, metadata=meta)
    return buf.getvalue()


def write_document(doc: Document, out: OutputFolder, footer: Sequence[str] = (),
                   vector: bool = False) -> list[str]:
    """Write tables, figures (PNG; SVG too when ``vector``) and the page into ``out``;
    returns the relative file names."""
    import matplotlib.pyplot as plt

    files: list[str] = []
    seen: set[str] = set()
    for t in doc.tables():
        name = slug(t.name)
        if name in seen:
            raise ValueError(f"two report tables share the file name {name!r}")
        seen.add(name)
        frame = t.frame.reset_index() if t.index else t.frame
        files.append(out.write_text(f"tables/{name}.csv", frame.to_csv(index=False)))
    images: dict[str, bytes] = {}
    figures = list(doc.figures())
    names = [slug(f.name) for f in figures]
    for i, name in enumerate(names):
        if name in names[:i]:
            raise ValueError(f"two report figures share the file name {name!r}")
    formats = ("png", "svg") if vector else ("png",)

    def render(i: int) -> dict[str, bytes]:
        return {fmt: figure_bytes(figures[i].figure, fmt) for fmt in formats}

    # a worker renders from the last figure back while this process renders from the first
    # (each figure once, by whoever reaches it first; the same bytes either way)
    lane = [(i, lambda done, i=i: render(i)) for i in reversed(range(len(figures)))]
    with WorkAhead([lane] if len(figures) > 1 else []) as work:
        for i, (f, name) in enumerate(zip(figures, names, strict=True)):
            rendered = work.take(i, lambda i=i: render(i)).replay()
            images[f.name] = rendered["png"]
            for fmt in formats:
                files.append(out.write_bytes(f"figures/{name}.{fmt}", rendered[fmt]))
            plt.close(f.figure)
    files.append(out.write_text(REPORT_NAME, render_html(doc, images, footer)))
    return files
