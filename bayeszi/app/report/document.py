"""The report as data (sections of text, tables and figures) and its HTML rendering.

A :class:`Document` holds :class:`Section` objects, each a list of blocks:
:class:`Text`, :class:`Bullets`, :class:`Table` and :class:`Figure`. :func:`render_html`
turns it into one self-contained HTML page (inline style, figures embedded as base64 PNG,
no scripts, nothing fetched from the network). The writer in :mod:`bayeszi.app.report.write`
stores the same tables as CSV and the figures as PNG and SVG beside the page.

Example
-------
>>> import pandas as pd
>>> doc = Document("A study", sections=[Section("data", "The data", [
...     Text("Two rows."), Table("rows", pd.DataFrame({"y": [0, 3]}), "The records")])])
>>> "<h2 id=\\"data\\">" in render_html(doc, {})
True
"""

from __future__ import annotations

import base64
import html
import math
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field
from typing import Any

import numpy as np
import pandas as pd


@dataclass
class Text:
    """A paragraph. ``kind`` is ``"text"``, ``"warning"`` (shown boxed) or ``"note"``."""

    text: str
    kind: str = "text"


@dataclass
class Bullets:
    """A bulleted list of plain sentences."""

    items: Sequence[str]
    kind: str = "text"


@dataclass
class Links:
    """A list of links to other pages: ``(label, relative address)`` pairs."""

    items: Sequence[tuple[str, str]]


@dataclass
class Table:
    """A table: ``name`` names its CSV file; ``index`` keeps the frame's index as columns.

    The CSV file holds every row and column; the page shows the first ``shown_rows`` rows
    (all when None) and the ``columns`` named (all when None). A row is highlighted when its
    ``flag_column`` is non-empty and not one of ``ok_values``.
    """

    name: str
    frame: pd.DataFrame
    caption: str
    index: bool = False
    flag_column: str | None = "flag"
    shown_rows: int | None = None
    columns: Sequence[str] | None = None
    ok_values: Sequence[str] = ()


@dataclass
class Figure:
    """A matplotlib figure; ``name`` names its PNG (and SVG) files."""

    name: str
    figure: Any
    caption: str


Block = Text | Bullets | Links | Table | Figure


@dataclass
class Section:
    """A titled part of the report; ``id`` is its anchor and stays stable for tests."""

    id: str
    title: str
    blocks: list[Block] = field(default_factory=list)


@dataclass
class Document:
    """The whole report."""

    title: str
    subtitle: str = ""
    sections: list[Section] = field(default_factory=list)

    def section(self, section_id: str) -> Section:
        """The section with anchor ``section_id``."""
        for s in self.sections:
            if s.id == section_id:
                return s
        raise KeyError(section_id)

    def tables(self) -> list[Table]:
        """All tables in order."""
        return [b for s in self.sections for b in s.blocks if isinstance(b, Table)]

    def figures(self) -> list[Figure]:
        """All figures in order."""
        return [b for s in self.sections for b in s.blocks if isinstance(b, Figure)]


# ---------------------------------------------------------------------- numbers
def format_number(value: Any) -> str:
    """How numbers are shown in the page: 3 significant digits, whole numbers as they are.

    >>> format_number(0.0123456), format_number(1234.5), format_number(7), format_number(None)
    ('0.0123', '1234', '7', '')
    """
    if value is None:
        return ""
    if isinstance(value, (bool, np.bool_)):
        return "yes" if value else "no"
    if isinstance(value, (int, np.integer)):
        return str(int(value))
    if isinstance(value, (float, np.floating)):
        v = float(value)
        if math.isnan(v):
            return ""
        if math.isinf(v):
            return "inf" if v > 0 else "-inf"
        if v != 0 and (abs(v) >= 1e7 or abs(v) < 1e-4):
            return f"{v:.3g}"
        if abs(v) >= 100:
            return f"{v:.0f}"
        return f"{v:.3g}"
    return str(value)


# ---------------------------------------------------------------------- HTML
_STYLE = """
body { font-family: system-ui, -apple-system, "Segoe UI", sans-serif; color: #1b1b1b;
       max-width: 62rem; margin: 2rem auto; padding: 0 1rem; line-height: 1.45; }
h1 { font-size: 1.7rem; margin-bottom: .2rem; }
h2 { font-size: 1.3rem; border-bottom: 2px solid #d5dbe1; padding-bottom: .2rem;
     margin-top: 2.4rem; }
p.subtitle { color: #4a5561; margin-top: 0; }
nav ol { columns: 2; font-size: .95rem; }
table { border-collapse: collapse; margin: .6rem 0 1.2rem; font-size: .86rem; }
caption { caption-side: top; text-align: left; font-weight: 600; padding: .3rem 0; }
th, td { border-bottom: 1px solid #e1e5ea; padding: .2rem .55rem; text-align: right; }
th { background: #f1f4f7; }
td.text, th.text { text-align: left; }
tr.flagged td { background: #fff2d6; }
div.warning { border-left: 4px solid #c77700; background: #fff7e8; padding: .5rem .8rem;
              margin: .6rem 0; }
div.note { color: #4a5561; font-size: .92rem; }
figure { margin: 1rem 0 1.6rem; }
figure img { max-width: 100%; height: auto; border: 1px solid #e1e5ea; }
figcaption { font-size: .9rem; color: #333c45; margin-top: .3rem; }
footer { margin-top: 3rem; border-top: 2px solid #d5dbe1; font-size: .85rem; color: #333c45; }
.table-wrap { overflow-x: auto; }
"""


def _esc(text: Any) -> str:
    return html.escape(str(text), quote=True)


def _table_html(t: Table) -> str:
    df = t.frame.reset_index() if t.index else t.frame
    df = df.set_axis([str(c) for c in df.columns], axis=1)
    flags = df[t.flag_column].astype(str) if t.flag_column in df.columns else None
    if t.columns is not None:
        df = df[[c for c in t.columns if c in df.columns]]
    cols = list(df.columns)
    text_cols = {c for c in cols if not pd.api.types.is_numeric_dtype(df[c])}
    out = [f'<div class="table-wrap"><table data-name="{_esc(t.name)}">',
           f"<caption>{_esc(t.caption)}</caption>", "<thead><tr>"]
    out += [f'<th class="{"text" if c in text_cols else "num"}">{_esc(c)}</th>' for c in cols]
    out.append("</tr></thead><tbody>")
    shown = df if t.shown_rows is None else df.head(t.shown_rows)
    for i, row in enumerate(shown.itertuples(index=False, name=None)):
        values = dict(zip(cols, row, strict=True))
        flag = "" if flags is None else flags.iloc[i].strip()
        flagged = flag not in ("", "nan", "None") and flag not in t.ok_values
        out.append('<tr class="flagged">' if flagged else "<tr>")
        for c in cols:
            cls = "text" if c in text_cols else "num"
            out.append(f'<td class="{cls}">{_esc(format_number(values[c]))}</td>')
        out.append("</tr>")
    out.append("</tbody></table></div>")
    return "\n".join(out)


def _paragraphs(text: str) -> str:
    return "".join(f"<p>{_esc(p.strip())}</p>" for p in text.split("\n\n") if p.strip())


def _block_html(block: Block, images: Mapping[str, bytes]) -> str:
    if isinstance(block, Text):
        if block.kind == "text":
            return _paragraphs(block.text)
        return f'<div class="{_esc(block.kind)}">{_paragraphs(block.text)}</div>'
    if isinstance(block, Bullets):
        items = "".join(f"<li>{_esc(i)}</li>" for i in block.items)
        ul = f"<ul>{items}</ul>"
        return ul if block.kind == "text" else f'<div class="{_esc(block.kind)}">{ul}</div>'
    if isinstance(block, Links):
        items = "".join(f'<li><a href="{_esc(href)}">{_esc(label)}</a></li>'
                        for label, href in block.items)
        return f'<ul class="links">{items}</ul>'
    if isinstance(block, Table):
        return _table_html(block)
    if isinstance(block, Figure):
        data = base64.b64encode(images[block.name]).decode("ascii")
        return (f'<figure id="fig-{_esc(block.name)}"><img alt="{_esc(block.caption)}" '
                f'src="data:image/png;base64,{data}">'
                f"<figcaption>{_esc(block.caption)}</figcaption></figure>")
    raise TypeError(f"unknown report block {type(block).__name__}")


def render_html(doc: Document, images: Mapping[str, bytes], footer: Sequence[str] = ()) -> str:
    """The page as one HTML string; ``images`` maps figure names to PNG bytes."""
    parts = ["<!DOCTYPE html>", '<html lang="en"><head><meta charset="utf-8">',
             '<meta name="viewport" content="width=device-width, initial-scale=1">',
             f"<title>{_esc(doc.title)}</title><style>{_STYLE}</style></head><body>",
             f"<header><h1>{_esc(doc.title)}</h1>"]
    if doc.subtitle:
        parts.append(f'<p class="subtitle">{_esc(doc.subtitle)}</p>')
    parts.append("</header><nav><ol>")
    parts += [f'<li><a href="#{_esc(s.id)}">{_esc(s.title)}</a></li>' for s in doc.sections]
    parts.append("</ol></nav><main>")
    for s in doc.sections:
        parts.append(f'<section data-section="{_esc(s.id)}"><h2 id="{_esc(s.id)}">'
                     f"{_esc(s.title)}</h2>")
        parts += [_block_html(b, images) for b in s.blocks]
        parts.append("</section>")
    parts.append("</main>")
    if footer:
        parts.append('<footer id="reproducibility"><h2>Reproducibility</h2><ul>')
        parts += [f"<li>{_esc(line)}</li>" for line in footer]
        parts.append("</ul></footer>")
    parts.append("</body></html>")
    return "\n".join(parts) + "\n"
