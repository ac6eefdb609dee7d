"""Report files: every figure is rendered to PNG once (page and file share the bytes); SVG
only when asked for (vector figures)."""

from __future__ import annotations

import base64
import os

import matplotlib

matplotlib.use("Agg")
import matplotlib.pyplot as plt  # noqa: E402
import pandas as pd  # noqa: E402

from bayeszi.app.report.document import Document, Figure, Section, Table  # noqa: E402
from bayeszi.app.report.output import OutputFolder  # noqa: E402
from bayeszi.app.report.write import write_document  # noqa: E402


def _doc() -> Document:
    fig, ax = plt.subplots(figsize=(3, 2))
    ax.plot([0, 1], [1, 0])
    return Document("t", sections=[Section("s", "S", [
        Table("rows", pd.DataFrame({"y": [1]}), "c"), Figure("line", fig, "a line")])])


def test_png_only_by_default_and_the_page_embeds_the_same_bytes(tmp_path):
    with OutputFolder(str(tmp_path / "out")) as out:
        files = write_document(_doc(), out)
        dest = out.commit()
    assert sorted(files) == ["figures/line.png", "report.html", "tables/rows.csv"]
    png = open(os.path.join(dest, "figures", "line.png"), "rb").read()
    page = open(os.path.join(dest, "report.html"), encoding="utf-8").read()
    assert base64.b64encode(png).decode() in page


def test_vector_figures_add_svg(tmp_path):
    with OutputFolder(str(tmp_path / "out")) as out:
        files = write_document(_doc(), out, vector=True)
        dest = out.commit()
    assert "figures/line.svg" in files
    svg = open(os.path.join(dest, "figures", "line.svg"), encoding="utf-8").read()
    assert svg.lstrip().startswith("<?xml") and "<svg" in svg
