"""Small pieces the report's sections share: wording of intervals, units and zeros parts, and
long tables cut to a page-sized head.

Example
-------
>>> interval_labels(0.9)
('5%', '95%')
>>> zeros_label("zip"), zeros_label("hurdle-poisson"), zeros_label("poisson")
('P(extra zero)', 'P(Y = 0)', 'none')
"""

from __future__ import annotations

from typing import Any

import pandas as pd

from bayeszi.app.report.context import ReportInput, plain
from bayeszi.app.report.document import Table, Text
from bayeszi.app.report.write import slug
from bayeszi.base import names

#: Most rows of a long table shown in the page (all rows are in its CSV file).
SHOWN_ROWS = 25

#: The verdict of a check that found nothing wrong.
OK_VERDICT = ("in line with the model",)


def pct(x: float) -> str:
    """A share as a percentage with one decimal.

    >>> pct(0.4725)
    '47.2%'
    """
    return f"{100 * x:.1f}%"


def interval_labels(interval: float) -> tuple[str, str]:
    """Column names of the lower and upper bound of a central ``interval``."""
    lo, hi = (1 - interval) / 2, 1 - (1 - interval) / 2
    return f"{100 * lo:g}%", f"{100 * hi:g}%"


def zeros_label(family: str) -> str:
    """What the zeros part of ``family`` models, or ``"none"``."""
    return names.zeros_label(family) or "none"


def unit(inp: ReportInput) -> str:
    """One unit of exposure in words ("trap night"), "unit of COLUMN" or "record"."""
    if inp.unit:
        return inp.unit
    spec = inp.first.spec
    return f"unit of {spec.exposure}" if spec.exposure else "record"


def table_blocks(name: str, frame: pd.DataFrame, caption: str, index: bool = False,
                 **options: Any) -> list:
    """A table block, cut to :data:`SHOWN_ROWS` rows in the page with a note when longer.

    >>> [type(b).__name__ for b in table_blocks("t", pd.DataFrame({"a": range(30)}), "c")]
    ['Table', 'Text']
    """
    block = Table(name, frame, caption, index=index, shown_rows=SHOWN_ROWS, **options)
    if len(frame) <= SHOWN_ROWS:
        return [block]
    return [block, Text(f"The page shows the first {SHOWN_ROWS} of {len(frame)} rows; all rows "
                        f"are in tables/{slug(name)}.csv.", "note")]


__all__ = ["OK_VERDICT", "SHOWN_ROWS", "interval_labels", "pct", "table_blocks", "unit",
           "zeros_label"]


def scenario_label(scn: Any, row: pd.Series) -> str:
    """The varied settings of one scenario row ("water_temp = 8.0"), or "as given"."""
    parts = [f"{k} = {row[k]}" for k in scn.vary]
    return ", ".join(parts) if parts else "as given"


def label_contrast(t: pd.DataFrame, contrast_name: str, model: str, scn: Any,
                   base: pd.DataFrame) -> pd.DataFrame:
    """A contrast table for the report: the contrast, the model and each row's setting."""
    t = plain(t).reset_index(drop=True)
    t.insert(0, "setting", [scenario_label(scn, r) for _, r in base.iterrows()])
    t.insert(0, "model", model)
    t.insert(0, "contrast", contrast_name)
    return t
