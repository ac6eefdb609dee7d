"""Run every stratum of a study on a Dask cluster and write one folder per stratum.

:func:`run_strata` plans the strata (:mod:`bayeszi.app.strata`), connects to a cluster
(:mod:`bayeszi.app.cluster`), and submits one task per stratum that still has to run. Each
task (:func:`run_stratum`, on a worker) is the single-study pipeline,
:func:`bayeszi.app.report.pipeline.run_study`, on the stratum's rows: its report folder is
written to a temporary name and renamed when complete, so a stratum folder is either whole
or absent. As each task ends, the manifest (:mod:`bayeszi.app.manifest`) records it; a
stratum that fails (bad data, a sampler error, a worker that died twice) is recorded with
its reason while the others go on, and ``resume=True`` later runs only what is not done.
A worker that dies once costs nothing but time: Dask runs its task again on another worker.
At the end, the overview page (:mod:`bayeszi.app.report.overview`) puts the strata side by
side.

On each worker, fits of one model structure share one compiled log density
(:mod:`bayeszi.model.reuse`) unless ``[cluster] reuse = false``.

Output folder::

    OUT/manifest.json            what is done, failed, skipped, and why
    OUT/strata/NAME/report.html  one complete single-study report per stratum
    OUT/overview/report.html     the strata side by side (tables/ and figures/ beside it)

Example
-------
>>> result = run_strata(load_study("examples/moth_traps/study.toml"), "moth-report")
...                                                                    # doctest: +SKIP
>>> result.done, result.failed, result.skipped                         # doctest: +SKIP
(12, 0, 4)
"""

from __future__ import annotations

import contextlib
import os
import shutil
import threading
import time
import warnings
from collections.abc import Callable
from dataclasses import dataclass, field
from typing import Any

import pandas as pd

from bayeszi.app.cluster import connect
from bayeszi.app.manifest import DONE, FAILED, MANIFEST_NAME, SKIPPED, Manifest
from bayeszi.app.report.pipeline import run_study
from bayeszi.app.strata import StrataPlan, Stratum, plan_strata, rows_sha256, stratum_study
from bayeszi.app.study import Study
from bayeszi.base.errors import BayesziError

Progress = Callable[[str], None]
#: marks a folder written by a strata run (so an unrelated folder is never used)
STRATA_MARKER = ".bayeszi-strata"
STRATA_FOLDER = "strata"


def _quiet(_: str) -> None:
    return None


@dataclass(frozen=True)
class StratumTask:
    """What a worker needs to run one stratum (sent to it by Dask).

    Example
    -------
    >>> s = plan.running[0]                                            # doctest: +SKIP
    >>> run_stratum(StratumTask(study, s.name, "out/strata/" + s.folder, s.rows))
    ...                                                                # doctest: +SKIP
    {'pid': 4242, 'status': 'done', 'warnings': 0, 'seconds': 41.2, ...}
    """

    study: Study
    name: str
    folder: str
    rows: pd.DataFrame
    command: str = ""


@dataclass
class StrataResult:
    """What a strata run did: counts, the output folder and the overview page.

    Example
    -------
    >>> StrataResult("/tmp/out", "").done
    0
    """

    out: str
    overview: str
    done: int = 0
    failed: int = 0
    skipped: int = 0
    resumed: int = 0
    reasons: dict[str, str] = field(default_factory=dict)


# ---------------------------------------------------------------------- on a worker
_WORKER_CACHE = threading.local()


def _cache() -> Any:
    """This worker thread's compiled-density cache (made on first use). One per thread: a
    cached function holds one stratum's data at a time, so two fits running side by side
    in one process (``dask worker --nthreads 2``) must not share it."""
    from bayeszi.model.reuse import DensityCache

    if not hasattr(_WORKER_CACHE, "cache"):
        _WORKER_CACHE.cache = DensityCache()
    return _WORKER_CACHE.cache


def _timings(fits: dict[str, Any], into: dict[str, float]) -> None:
    """Sampling seconds (PyMC's own clock of the draws) and whole-fit seconds of the fits."""
    into["sampling_s"] = sum(float(f.idata.posterior.attrs.get("sampling_time", 0.0))
                             for f in fits.values())
    into["sample_call_s"] = sum(float(f.timing.get("sample_s", 0.0)) for f in fits.values())
    into["fits_s"] = sum(sum(float(v) for v in f.timing.values()) for f in fits.values())


def run_stratum(task: StratumTask) -> dict[str, Any]:
    """Run one stratum's single study into ``task.folder``; returns what happened.

    Errors of the stratum (a BayesziError, a sampler failure) are returned as
    ``{"status": "failed", "reason": ...}``, not raised, so that one bad stratum stops
    nothing else. The result also holds the seconds of the task, of the fits
    (``fits_s``), of the draw loops alone (``sampling_s``) and, with reuse, how many
    densities were compiled or reused.

    Example
    -------
    >>> run_stratum(task)["status"]                                    # doctest: +SKIP
    'done'
    """
    from bayeszi.model.reuse import using

    t0 = time.perf_counter()
    timing: dict[str, float] = {}
    cache = _cache() if task.study.cluster.reuse else None
    before = cache.stats.as_dict() if cache is not None else {}
    facts = {"stratum": task.name, "stratum_records": len(task.rows),
             "stratum_sha256": rows_sha256(task.rows)}
    out: dict[str, Any] = {"pid": os.getpid()}
    try:
        with warnings.catch_warnings(record=True) as caught, \
                (using(cache) if cache is not None else contextlib.nullcontext()):
            warnings.simplefilter("always")
            run_study(stratum_study(task.study, task.name), task.folder, task.command,
                      data=task.rows, provenance=facts,
                      inspect=lambda fits: _timings(fits, timing))
        out["status"] = DONE
        out["warnings"] = len({str(w.message) for w in caught
                               if not issubclass(w.category, (DeprecationWarning,
                                                              FutureWarning))})
    except BayesziError as err:
        out.update(status=FAILED, reason=" ".join(str(err).split()))
    except Exception as err:  # a sampler or numerical failure of this stratum alone
        first = " ".join(str(err).split())[:300]
        out.update(status=FAILED, reason=f"{type(err).__name__}: {first}")
    out["seconds"] = round(time.perf_counter() - t0, 3)
    out.update({k: round(v, 3) for k, v in timing.items()})
    if cache is not None:
        after = cache.stats.as_dict()
        out["compiled"] = after["compiled"] - before["compiled"]
        out["reused"] = after["reused"] - before["reused"]
        out["compile_s"] = round(after["compile_s"] - before["compile_s"], 3)
    return out


# ---------------------------------------------------------------------- on the client
def check_strata_destination(out: str) -> str:
    """The absolute output folder: new, empty, or one an earlier strata run wrote.

    Example
    -------
    >>> import tempfile, os
    >>> out = os.path.join(tempfile.mkdtemp(), "strata-out")
    >>> check_strata_destination(out) == out
    True
    """
    dest = os.path.abspath(os.fspath(out))
    parent = os.path.dirname(dest)
    if not os.path.isdir(parent):
        raise BayesziError(f"cannot write to {out!r}: folder {parent!r} does not exist; create "
                           "it first or choose another --out")
    if not os.access(parent, os.W_OK | os.X_OK):
        raise BayesziError(f"cannot write to {out!r}: folder {parent!r} is not writable")
    if os.path.lexists(dest):
        if not os.path.isdir(dest) or os.path.islink(dest):
            raise BayesziError(f"cannot write to {out!r}: it exists and is not a folder")
        entries = os.listdir(dest)
        if entries and STRATA_MARKER not in entries:
            raise BayesziError(f"{out!r} exists and holds files that are not a bayeszi strata "
                               "run; choose another --out or empty that folder")
    return dest


def _prepare(dest: str) -> str:
    """Make the output folder and its strata folder; remove half-written stratum folders
    left by a run that was killed (temporary names, never complete reports)."""
    strata = os.path.join(dest, STRATA_FOLDER)
    os.makedirs(strata, exist_ok=True)
    with open(os.path.join(dest, STRATA_MARKER), "w", encoding="utf-8") as fh:
        fh.write("This folder was written by a bayeszi strata run (bayeszi run with strata).\n")
    _remove_partials(strata)
    return strata


def _remove_partials(strata: str) -> None:
    for name in os.listdir(strata):
        if name.startswith(".") and (".partial-" in name or ".old-" in name):
            shutil.rmtree(os.path.join(strata, name), ignore_errors=True)


def _entry(s: Stratum, folder: str, status: str, **more: Any) -> dict[str, Any]:
    return {"key": s.key, "status": status, "folder": os.path.join(STRATA_FOLDER, folder),
            "records": s.records, "zero_share": s.zero_share,
            "values": {c: v for c, v in s.values}, **more}


class _Display:
    """Progress lines: strata done, running, failed and waiting, with the elapsed time."""

    def __init__(self, total: int, say: Progress) -> None:
        self.total, self.say, self.t0 = total, say, time.perf_counter()
        self.done = self.failed = 0

    def line(self, running: int, event: str = "") -> None:
        s = int(time.perf_counter() - self.t0)
        waiting = max(0, self.total - self.done - self.failed - running)
        self.say(f"strata: {self.done} done, {running} running, {self.failed} failed, "
                 f"{waiting} waiting ({s // 60}m{s % 60:02d}s)" + (f"; {event}" if event else ""))


def _running(client: Any, keys: set[str]) -> int:
    try:
        processing = client.processing()
        threads = sum(client.nthreads().values())
    except Exception:  # the count is only for the display
        return 0
    # a worker holds queued tasks too; at most one per thread is running
    return min(threads, sum(1 for tasks in processing.values() for k in tasks if k in keys))


def _collect(client: Any, futures: dict[Any, Stratum], folders: dict[str, str],
             manifest: Manifest, result: StrataResult, say: Progress) -> None:
    """Record each stratum as its task ends; a Ctrl-C cancels the rest."""
    from distributed import as_completed

    display = _Display(len(futures), say)
    keys = {f.key for f in futures}
    display.line(_running(client, keys))
    try:
        with client.as_current():
            _each(as_completed(list(futures)), futures, folders, manifest, result,
                  display, client, keys)
    except KeyboardInterrupt:
        client.cancel(list(futures), force=True)
        raise


def _each(done: Any, futures: dict[Any, Stratum], folders: dict[str, str],
          manifest: Manifest, result: StrataResult, display: _Display, client: Any,
          keys: set[str]) -> None:
    """Record each finished task in the manifest and the display."""
    for fut in done:
        s = futures[fut]
        try:
            res = fut.result()
        except Exception as err:  # the task could not run: a worker died twice, ...
            text = " ".join(str(err).split())[:300]
            res = {"status": FAILED, "reason": f"{type(err).__name__}: {text} (the worker "
                   "running it stopped; rerun with --resume)"}
        # Done with: let the scheduler forget it, so that if the worker holding its result
        # dies later, Dask does not run the stratum again (a second run would rewrite a
        # finished folder and could leave a half-written one after this run has ended).
        fut.release()
        keys.discard(fut.key)
        status = res.pop("status")
        manifest.record(s.name, _entry(s, folders[s.name], status, **res))
        if status == DONE:
            display.done += 1
            result.done += 1
            event = f"{s.name} done in {res.get('seconds', 0):.0f} s"
        else:
            display.failed += 1
            result.failed += 1
            result.reasons[s.name] = res.get("reason", "")
            event = f"{s.name} failed: {res.get('reason', '')}"
        display.line(_running(client, keys), event)


def _submit(client: Any, study: Study, todo: list[Stratum], strata_dir: str,
            command: str) -> tuple[dict[Any, Stratum], dict[str, str]]:
    futures, folders = {}, {}
    for s in todo:
        folders[s.name] = s.folder
        task = StratumTask(study, s.name, os.path.join(strata_dir, s.folder), s.rows, command)
        fut = client.submit(run_stratum, task, key=f"stratum-{s.folder}-{s.key[:12]}",
                            pure=False)
        futures[fut] = s
    return futures, folders


def _nothing_runs(plan: StrataPlan) -> BayesziError:
    reasons = "; ".join(f"{s.name}: {s.skipped}" for s in plan.strata[:8])
    more = f" (and {len(plan.strata) - 8} more)" if len(plan.strata) > 8 else ""
    return BayesziError(f"no stratum can run: {reasons}{more}")


def run_strata(study: Study, out: str, scheduler: str | None = None,
               workers: int | None = None, resume: bool = False, command: str = "",
               progress: Progress = _quiet) -> StrataResult:
    """Run every stratum of ``study`` (see the module text); returns what was done.

    ``scheduler`` (a Dask scheduler's address) and ``workers`` (a local cluster's size)
    override the study's ``[cluster]``. Problems found before any sampling (strata columns,
    the output folder, an unreachable scheduler, no stratum that can run) are
    BayesziErrors, and nothing is written then.

    Example
    -------
    >>> result = run_strata(study, "moth-report", workers=2)          # doctest: +SKIP
    >>> result.failed, result.overview                                # doctest: +SKIP
    (0, '/abs/moth-report/overview/report.html')
    """
    if not study.strata:
        raise BayesziError("this study names no strata; add strata = [\"COLUMN\", ...] to "
                           "[study], or run it without --scheduler, --workers and --resume")
    dest = check_strata_destination(out)
    if study.sampler.cores is None:
        study = study.with_sampler(cores=1)  # a stratum's chains one after the other
    study = study.with_sampler(progressbar=False)  # workers show no sampling progress
    plan = plan_strata(study, study.load_data())
    if not plan.running:
        raise _nothing_runs(plan)
    scheduler = scheduler or study.cluster.scheduler
    workers = workers or study.cluster.workers
    progress(f"{study.title}: {len(plan.strata)} strata by {', '.join(study.strata)} "
             f"({len(plan.running)} to fit, {len(plan.skipped)} skipped)")
    with connect(scheduler, workers, study.sampler.cores or 1, progress) as client:
        strata_dir = _prepare(dest)
        path = os.path.join(dest, MANIFEST_NAME)
        manifest = Manifest.read(path, plan.study_key) if resume else \
            Manifest(path, plan.study_key)
        result = StrataResult(dest, "")
        for s in plan.skipped:
            manifest.record(s.name, _entry(s, s.folder, SKIPPED, reason=s.skipped))
            result.skipped += 1
            result.reasons[s.name] = s.skipped
            progress(f"skipped {s.name}: {s.skipped}")
        todo = [s for s in plan.running
                if not (resume and manifest.finished(s.name, s.key,
                                                     os.path.join(strata_dir, s.folder)))]
        result.resumed = len(plan.running) - len(todo)
        result.done = result.resumed
        if result.resumed:
            progress(f"resuming: {result.resumed} stratum(s) already done, {len(todo)} to run")
        futures, folders = _submit(client, study, todo, strata_dir, command)
        try:
            _collect(client, futures, folders, manifest, result, progress)
        except KeyboardInterrupt:
            raise KeyboardInterrupt(
                f"interrupted: {manifest.count(DONE)} finished stratum folder(s) under "
                f"{strata_dir} are complete and recorded in {path}; run again with --resume "
                "to do the rest") from None
        _remove_partials(strata_dir)
    from bayeszi.app.report.overview import write_overview

    result.overview = write_overview(study, plan, manifest, dest, progress)
    return result


__all__ = ["STRATA_FOLDER", "STRATA_MARKER", "StrataResult", "StratumTask",
           "check_strata_destination", "run_strata", "run_stratum"]
