"""From a study file (or saved fits) to a finished report folder.

:func:`run_study` checks the output folder and the study against its data before any
sampling, fits every candidate, builds the report and moves the finished folder into place.
:func:`report_saved` does the same from fits saved with :meth:`FittedModel.save`.

Example
-------
>>> from bayeszi.app.study import load_study, demo_study_path          # doctest: +SKIP
>>> run_study(load_study(demo_study_path()), "demo-report")          # doctest: +SKIP
'/abs/path/demo-report'
"""

from __future__ import annotations

import json
import os
from collections.abc import Callable, Sequence
from typing import TYPE_CHECKING, Any

import pandas as pd

from bayeszi.answers.comparison import refit_advice
from bayeszi.app.report.context import ReportInput
from bayeszi.app.report.document import Document
from bayeszi.app.report.footer import footer_lines
from bayeszi.app.report.output import OutputFolder
from bayeszi.app.report.sections import build_document
from bayeszi.app.report.sections.preview import preview_document
from bayeszi.app.report.write import REPORT_NAME, slug, write_document
from bayeszi.base.errors import BayesziError
from bayeszi.fitting.candidates import fit_each
from bayeszi.fitting.preview import preview_each

if TYPE_CHECKING:
    from bayeszi.app.study import Study
    from bayeszi.fitting.fitted import FittedModel

Progress = Callable[[str], None]
PROVENANCE_ATTR = "bayeszi_provenance"


def _quiet(_: str) -> None:
    return None


class _StudyProgress:
    """Progress lines of a study's fits ("[1/3] fitting zinb-reach ...") for :func:`fit_each`,
    with an estimate of the time the remaining fits take once one has finished."""

    def __init__(self, study: Study, say: Progress) -> None:
        self.say = say
        self.specs = {c.name: c.spec for c in study.candidates}
        self.position = {c.name: i for i, c in enumerate(study.candidates, start=1)}
        self.seconds: list[float] = []

    def start(self, name: str) -> None:
        spec = self.specs[name]
        s = spec.sampler
        draws = (f"blocks of {s.block_draws} draws until enough, at most {s.draws_limit}"
                 if s.until_enough else f"{s.draws} draws")
        self.say(f"[{self.position[name]}/{len(self.specs)}] fitting {name} ({spec.family}, "
                 f"{s.chains} chains x {s.warmup_steps} warm-up steps + {draws}) ...")

    def finish(self, name: str, seconds: float, warned: Sequence[str] = ()) -> None:
        self.seconds.append(seconds)
        left = len(self.specs) - len(self.seconds)
        guess = (f"; about {_duration(left * sum(self.seconds) / len(self.seconds))} for the "
                 f"{left} fit(s) left" if left else "")
        self.say(f"[{self.position[name]}/{len(self.specs)}] {name} done in {seconds:.0f} s"
                 + (f" ({len(warned)} warning(s))" if warned else "") + guess)


def _duration(seconds: float) -> str:
    """``"40 s"`` or ``"3 min"``.

    >>> _duration(40.2), _duration(185)
    ('40 s', '3 min')
    """
    return f"{seconds:.0f} s" if seconds < 90 else f"{seconds / 60:.0f} min"


def save_fit(fitted: FittedModel, path: str, provenance: dict[str, Any]) -> str:
    """Save ``fitted`` to ``path`` with ``provenance`` (data hash, command, model name) in it.

    :func:`load_saved` reads the provenance back for the report's footer.

    Example
    -------
    >>> save_fit(fitted, "fits/zinb.nc", {"model": "zinb"})        # doctest: +SKIP
    '/abs/path/fits/zinb.nc'
    """
    fitted.idata.posterior.attrs[PROVENANCE_ATTR] = json.dumps(provenance)
    try:
        return fitted.save(path)
    finally:
        fitted.idata.posterior.attrs.pop(PROVENANCE_ATTR, None)


#: How a report's reader asks for exact LOO refits (they ran a study, not Python).
REFIT_ADVICE = ("set exact_refits = true in the study file's [study] table, or add "
                "--exact-refits to bayeszi run or bayeszi report")


def run_study(study: Study, out: str, command: str = "", progress: Progress = _quiet,
              save_fits: bool = False, exact_refits: bool | None = None,
              vector_figures: bool | None = None, data: pd.DataFrame | None = None,
              provenance: dict[str, Any] | None = None,
              inspect: Callable[[dict[str, FittedModel]], None] | None = None) -> str:
    """Fit, compare, check and predict as ``study`` says; write the report folder ``out``.

    Nothing is sampled before the output folder, the data and every candidate and scenario
    have been checked. ``exact_refits`` (None: as the study says) refits the rows of high
    Pareto k exactly for LOO. With ``study.preview`` ``"first"`` every candidate is previewed
    (approximately, :mod:`bayeszi.fitting.preview`) before sampling and the report compares
    the previews with the posteriors; with ``"only"`` the folder holds the previews alone and
    nothing is sampled. ``vector_figures`` (None: as the study says) also writes every figure
    as SVG. ``data`` replaces the study's data file (one stratum's rows, say);
    ``provenance`` adds to the footer's facts; ``inspect`` is called with the fits before the
    report is built. Returns the absolute path of the finished folder.
    """
    folder = OutputFolder(out)  # fails before any work when out cannot be written
    with folder:
        given = data is not None
        data = study.load_data() if data is None else data
        checked = study.check(data)
        source = "given" if given else os.path.basename(study.data_path)
        progress(f"{study.title}: {len(data)} records from {source}, "
                 f"{len(study.candidates)} candidate model(s)")
        provenance = {
            "data_path": study.data_path, "data_sha256": study.data_sha256(),
            "study_path": study.path, "study_sha256": study.study_sha256(),
            "command": command, **(provenance or {}),
        }
        previews = {}
        if study.preview in ("first", "only"):
            previews = preview_each(data, checked, progress)
        if study.preview == "only":
            doc = preview_document(study.title, study.summary, previews, study.interval)
            return _write(doc, footer_lines(provenance, {}, study.seed), folder, progress,
                          study.vector_figures if vector_figures is None else vector_figures)
        run = fit_each(data, checked, _StudyProgress(study, progress))
        fits, notes = run.fits, run.warnings
        if inspect is not None:
            inspect(fits)
        if save_fits:
            from bayeszi.app.study import sha256_of

            saved = {}
            for name, f in fits.items():
                rel = f"fits/{slug(name)}.nc"
                progress(f"saving {rel}")
                path = save_fit(f, folder.path(rel), {**provenance, "model": name})
                saved[rel] = sha256_of(path)
            provenance["saved_fits"] = saved
        inp = ReportInput(
            title=study.title, summary=study.summary, fits=fits, data=data,
            interval=study.interval, unit=study.exposure_unit, seed=study.seed,
            scenarios=study.scenarios, contrasts=study.contrasts, preferred=study.preferred,
            predictions=study.predictions,
            exact_refits=study.exact_refits if exact_refits is None else exact_refits,
            residuals_against=study.residuals_against,
            provenance=provenance, notes=notes, previews=previews)
        vector = study.vector_figures if vector_figures is None else vector_figures
        return _finish(inp, folder, progress, vector)


def _finish(inp: ReportInput, folder: OutputFolder, progress: Progress,
            vector: bool = False) -> str:
    progress("building the report ...")
    with refit_advice(REFIT_ADVICE):
        doc, footer, warned = build_document(inp, progress=lambda s: progress(f"  {s}"))
    for w in warned:
        progress(f"      warning: {' '.join(w.split())}")
    return _write(doc, footer, folder, progress, vector)


def _write(doc: Document, footer: Sequence[str], folder: OutputFolder, progress: Progress,
           vector: bool = False) -> str:
    """Write ``doc`` into ``folder`` (SVG figures too when ``vector``), move it into place
    and return where it went."""
    files = write_document(doc, folder, footer, vector=vector)
    dest = folder.commit()
    progress(f"report written: {os.path.join(dest, REPORT_NAME)} ({len(files)} files)")
    return dest


def load_saved(paths: Sequence[str]) -> tuple[dict[str, FittedModel], dict[str, Any]]:
    """Load saved fits, named after their files (or the model name stored in them)."""
    from bayeszi.app.study import sha256_of
    from bayeszi.fitting import api as bz

    if not paths:
        raise BayesziError("name at least one saved fit (a .nc file written by fit or run)")
    fits: dict[str, FittedModel] = {}
    provenance: dict[str, Any] = {"saved_fits": {}}
    for p in paths:
        f = bz.load(p)
        meta = json.loads(f.idata.posterior.attrs.pop(PROVENANCE_ATTR, "{}") or "{}")
        name = meta.get("model") or os.path.splitext(os.path.basename(p))[0]
        base, k = name, 2
        while name in fits:
            name, k = f"{base}-{k}", k + 1
        fits[name] = f
        provenance["saved_fits"][os.path.abspath(p)] = sha256_of(p)
        for key in ("data_path", "data_sha256", "study_path", "study_sha256", "command"):
            if key in meta and key not in provenance:
                provenance[key] = meta[key]
    first = next(iter(fits.values()))
    for name, f in fits.items():
        same = (f.design.n == first.design.n and f.spec.response == first.spec.response
                and (f.design.y == first.design.y).all())
        if not same:
            raise BayesziError(
                f"saved fit {name!r} was fitted to other records than "
                f"{next(iter(fits))!r} ({f.design.n} vs {first.design.n} records of "
                f"{f.spec.response!r}); a report compares fits of the same data only"
            )
    if "command" in provenance:
        provenance["fit command"] = provenance.pop("command")
    return fits, provenance


def report_saved(paths: Sequence[str], out: str, command: str = "", title: str | None = None,
                 interval: float = 0.9, progress: Progress = _quiet,
                 exact_refits: bool = False, residuals_against: str | None = None,
                 vector_figures: bool = False) -> str:
    """Write a report folder ``out`` from saved fits (no scenarios: the study is not known).

    ``exact_refits`` refits the rows of high Pareto k exactly for LOO; ``residuals_against``
    names a column of the fitted data to bin the residuals by in the residual figure
    (default: the log of the expected count); ``vector_figures`` also writes every figure
    as SVG.
    """
    folder = OutputFolder(out)
    with folder:
        fits, provenance = load_saved(paths)
        provenance["command"] = command
        first = next(iter(fits.values()))
        data = first.data
        if residuals_against is not None and residuals_against not in data.columns:
            raise BayesziError(
                f"residuals_against={residuals_against!r} is not a column of the fitted data "
                f"(a saved fit keeps the columns its model uses); columns available: "
                f"{list(map(str, data.columns))}")
        seeds = {f.spec.sampler.seed for f in fits.values()}
        inp = ReportInput(
            title=title or f"bayeszi report: {', '.join(fits)}", fits=fits, data=data,
            interval=interval, seed=seeds.pop() if len(seeds) == 1 else None,
            exact_refits=exact_refits, residuals_against=residuals_against,
            provenance=provenance)
        return _finish(inp, folder, progress, vector_figures)
