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
import time
import warnings
from collections.abc import Callable, Sequence
from typing import TYPE_CHECKING, Any

from bayeszi.app.report.output import OutputFolder
from bayeszi.app.report.sections import ReportInput, build_document
from bayeszi.app.report.write import REPORT_NAME, slug, write_document
from bayeszi.base.errors import BayesziError

if TYPE_CHECKING:
    from bayeszi.app.study import Study
    from bayeszi.fitting.fitted import FittedModel

Progress = Callable[[str], None]
PROVENANCE_ATTR = "bayeszi_provenance"


def _quiet(_: str) -> None:
    return None


def fit_study(study: Study, data: Any, progress: Progress = _quiet
                   ) -> tuple[dict[str, FittedModel], dict[str, list[str]]]:
    """Fit every candidate of ``study`` in order; returns the fits and their warnings."""
    from bayeszi.base.errors import BayesziWarning
    from bayeszi.fitting import api as bz

    fits: dict[str, FittedModel] = {}
    notes: dict[str, list[str]] = {}
    n = len(study.candidates)
    shown: set[str] = set()
    for i, cand in enumerate(study.candidates, start=1):
        s = cand.spec.sampler
        progress(f"[{i}/{n}] fitting {cand.name} ({cand.spec.family}, {s.chains} chains x "
                 f"{s.tune} tune + {s.draws} draws) ...")
        t0 = time.perf_counter()
        with warnings.catch_warnings(record=True) as seen:
            warnings.simplefilter("always")
            try:
                fits[cand.name] = bz.fit_spec(data, cand.spec)
            except BayesziError as err:
                raise BayesziError(f"model {cand.name!r}: {err}") from None
        msgs, other = [], []
        for w in seen:
            if issubclass(w.category, (DeprecationWarning, FutureWarning)):
                continue
            text = str(w.message)
            # bayeszi's own warnings concern the model and go into the report; others
            # (e.g. about the installation) are shown on the console only
            into = msgs if issubclass(w.category, BayesziWarning) else other
            if text not in into:
                into.append(text)
        notes[cand.name] = msgs
        progress(f"[{i}/{n}] {cand.name} done in {time.perf_counter() - t0:.0f} s"
                 + (f" ({len(msgs)} warning(s))" if msgs else ""))
        for text in msgs + [t for t in other if t not in shown]:
            progress(f"      warning: {' '.join(text.split())}")
        shown.update(other)
    return fits, notes


def save_fit(fitted: FittedModel, path: str, provenance: dict[str, Any]) -> str:
    fitted.idata.posterior.attrs[PROVENANCE_ATTR] = json.dumps(provenance)
    try:
        return fitted.save(path)
    finally:
        fitted.idata.posterior.attrs.pop(PROVENANCE_ATTR, None)


def run_study(study: Study, out: str, command: str = "", progress: Progress = _quiet,
              save_fits: bool = False) -> str:
    """Fit, compare, check and predict as ``study`` says; write the report folder ``out``.

    Nothing is sampled before the output folder, the data and every candidate and scenario
    have been checked. Returns the absolute path of the finished folder.
    """
    folder = OutputFolder(out)  # fails before any work when out cannot be written
    with folder:
        data = study.load_data()
        study.check(data)
        progress(f"{study.title}: {len(data)} records from {os.path.basename(study.data_path)}, "
                 f"{len(study.candidates)} candidate model(s)")
        fits, notes = fit_study(study, data, progress)
        provenance: dict[str, Any] = {
            "data_path": study.data_path, "data_sha256": study.data_sha256(),
            "study_path": study.path, "study_sha256": study.study_sha256(),
            "command": command,
        }
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
            provenance=provenance, notes=notes)
        return _finish(inp, folder, progress)


def _finish(inp: ReportInput, folder: OutputFolder, progress: Progress) -> str:
    progress("building the report ...")
    doc, footer, warned = build_document(inp, progress=lambda s: progress(f"  {s}"))
    for w in warned:
        progress(f"      warning: {' '.join(w.split())}")
    files = write_document(doc, folder, footer)
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
                 interval: float = 0.9, progress: Progress = _quiet) -> str:
    """Write a report folder ``out`` from saved fits (no scenarios: the study is not known)."""
    folder = OutputFolder(out)
    with folder:
        fits, provenance = load_saved(paths)
        provenance["command"] = command
        first = next(iter(fits.values()))
        data = first._data  # type: ignore[attr-defined]
        seeds = {f.spec.sampler.seed for f in fits.values()}
        inp = ReportInput(
            title=title or f"bayeszi report: {', '.join(fits)}", fits=fits, data=data,
            interval=interval, seed=seeds.pop() if len(seeds) == 1 else None,
            provenance=provenance)
        return _finish(inp, folder, progress)
