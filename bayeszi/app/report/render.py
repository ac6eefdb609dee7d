"""Render a report's figures to PNG in a background thread while the report is computed.

The report's numbers are NumPy work that leaves the second core (and, inside NumPy's loops,
the interpreter) free; drawing a figure is mostly matplotlib's own Python. A
:class:`PngRenderer` takes each section's figures as soon as the section is built and draws
them, one at a time, in one worker thread, so that by the time the last section is done most
figures are already PNG bytes. Each figure is still drawn exactly once, with
:func:`~bayeszi.app.report.write.figure_bytes`; matplotlib keeps its font objects per thread,
and the report's figures are plain :class:`matplotlib.figure.Figure` objects that no other
code touches once their section is built.

Example
-------
>>> from matplotlib.figure import Figure as MplFigure
>>> from bayeszi.app.report.document import Figure
>>> fig = MplFigure(figsize=(2, 1))
>>> with PngRenderer() as png:
...     png.submit([Figure("f", fig, "a figure")])
...     png.png(fig)[:8] == b"\\x89PNG\\r\\n\\x1a\\n"
True
"""

from __future__ import annotations

from collections.abc import Iterable
from concurrent.futures import Future, ThreadPoolExecutor
from typing import Any

from bayeszi.app.report.document import Figure
from bayeszi.app.report.write import figure_bytes


class PngRenderer:
    """PNG bytes of report figures, drawn in one background thread in the order given."""

    def __init__(self) -> None:
        self._pool = ThreadPoolExecutor(max_workers=1, thread_name_prefix="bayeszi-png")
        self._futures: dict[int, Future[bytes]] = {}

    def submit(self, blocks: Iterable[Any]) -> None:
        """Start drawing every :class:`~bayeszi.app.report.document.Figure` in ``blocks``."""
        for b in blocks:
            if isinstance(b, Figure) and id(b.figure) not in self._futures:
                self._futures[id(b.figure)] = self._pool.submit(figure_bytes, b.figure, "png")

    def png(self, figure: Any) -> bytes:
        """The PNG bytes of ``figure``: waits for its drawing, or draws it here if it was never
        submitted; a drawing's error is raised here."""
        fut = self._futures.pop(id(figure), None)
        return figure_bytes(figure, "png") if fut is None else fut.result()

    def close(self) -> None:
        """Drop the drawings not yet started and wait for the one under way."""
        self._pool.shutdown(wait=True, cancel_futures=True)
        self._futures.clear()

    def __enter__(self) -> PngRenderer:
        return self

    def __exit__(self, *exc: object) -> None:
        self.close()


__all__ = ["PngRenderer"]
