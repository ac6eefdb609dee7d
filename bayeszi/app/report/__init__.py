"""The report: one self-contained HTML page plus CSV tables and PNG/SVG figures.

- :mod:`bayeszi.app.report.pipeline`: :func:`run_study` (study file to report folder) and
  :func:`report_saved` (saved fits to report folder).
- :mod:`bayeszi.app.report.context`: what a report is made from, and the answers its sections
  share (LOO, the comparison, the preferred model), computed once.
- :mod:`bayeszi.app.report.sections`: the sections in page order, one module each.
- :mod:`bayeszi.app.report.document` / :mod:`bayeszi.app.report.write`: the page and the files.
- :mod:`bayeszi.app.report.output`: the output folder, written in full or not at all.

Example
-------
>>> from bayeszi.app.report import run_study                     # doctest: +SKIP
>>> from bayeszi.app.study import load_study                     # doctest: +SKIP
>>> run_study(load_study("study.toml"), "report")            # doctest: +SKIP
"""

from __future__ import annotations

from bayeszi.app.report.pipeline import report_saved, run_study

__all__ = ["report_saved", "run_study"]
