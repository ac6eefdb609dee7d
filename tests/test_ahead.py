"""Work done ahead in forked workers (bayeszi/app/report/ahead.py): results and warnings
arrive as if computed here, the report computes whatever no worker has begun (and the
worker then skips it), a failing or dying worker costs nothing but time, and a report built
with workers equals one built without, table for table and figure byte for figure byte."""

from __future__ import annotations

import os
import threading
import time
import warnings

import numpy as np
import pytest

import bayeszi
from bayeszi.app.report import ahead
from bayeszi.app.report.ahead import WorkAhead, available_workers
from bayeszi.base.errors import BayesziWarning


def _until_begun(work: WorkAhead, key: str) -> None:
    """Wait (at most 30 s) until the worker has begun ``key``: a task asked for before then
    would be the report's own."""
    stop = time.monotonic() + 30
    while not work.begun(key) and time.monotonic() < stop:
        time.sleep(0.01)
    assert work.begun(key)


def test_results_and_warnings_come_from_the_worker():
    def task(done):
        warnings.warn("checked in the worker", BayesziWarning, stacklevel=1)
        return os.getpid()

    with WorkAhead([[("pid", task), ("twice", lambda done: 2 * done["pid"])]],
                   workers=1) as work:
        assert work.started == 1
        _until_begun(work, "pid")
        with warnings.catch_warnings(record=True) as seen:
            warnings.simplefilter("always")
            pid = work.take("pid", lambda: os.getpid()).replay()
        twice = work.take("twice", lambda: -1).replay()
    assert pid != os.getpid()  # computed in the worker process
    assert twice == 2 * pid    # a later task reads the lane's earlier result
    assert [(w.category, str(w.message)) for w in seen] == [
        (BayesziWarning, "checked in the worker")]


def test_what_no_worker_has_begun_is_computed_here_and_skipped_there(tmp_path):
    def slow(done):
        time.sleep(1.0)
        return "slow, in the worker"

    def marked(done):
        (tmp_path / "worker-ran-b").write_text("b")
        return "b, in the worker"

    with WorkAhead([[("slow", slow), ("b", marked)]], workers=1) as work:
        _until_begun(work, "slow")
        # the worker is busy with "slow" for a second: "b" is still free, so it is ours
        assert work.take("b", lambda: "b, here").replay() == "b, here"
        assert work.take("slow", lambda: "slow, here").replay() == "slow, in the worker"
        time.sleep(0.3)
    assert not (tmp_path / "worker-ran-b").exists()


def test_a_failing_or_dying_worker_leaves_the_work_here():
    def fails(done):
        raise ValueError("no")

    def dies(done):
        os._exit(3)

    with WorkAhead([[("fails", fails), ("after", lambda done: "worker")]], workers=1) as w:
        _until_begun(w, "fails")
        _until_begun(w, "after")
        assert w.take("fails", lambda: "here").replay() == "here"
        assert w.take("after", lambda: "here").replay() == "worker"
    with WorkAhead([[("unpicklable", lambda done: (lambda: 1)),
                     ("next", lambda done: "worker")]], workers=1) as w:
        _until_begun(w, "next")
        assert w.take("unpicklable", lambda: "here").replay() == "here"
        assert w.take("next", lambda: "here").replay() == "worker"
    with WorkAhead([[("dies", dies), ("never", lambda done: "worker")]], workers=1) as w:
        _until_begun(w, "dies")
        assert w.take("dies", lambda: "here").replay() == "here"
        assert w.take("never", lambda: "here").replay() == "here"


def test_no_workers_where_they_cannot_help_or_fork_safely(monkeypatch):
    monkeypatch.setenv(ahead.WORKERS_ENV, "0")
    assert available_workers() == 0
    monkeypatch.delenv(ahead.WORKERS_ENV)
    found = []
    t = threading.Thread(target=lambda: found.append(available_workers()))
    t.start()
    t.join()
    assert found == [0]  # not the main thread (a Dask worker's task, a server's handler)
    assert WorkAhead([[("x", lambda done: 1)]], workers=0).started == 0


def test_a_report_with_workers_equals_one_without(small_run, monkeypatch, tmp_path):
    from bayeszi.app.report.context import ReportInput, start_fit_work
    from bayeszi.app.report.output import OutputFolder
    from bayeszi.app.report.sections import build_document
    from bayeszi.app.report.write import write_document

    fits = {n: bayeszi.load(str(small_run["out"] / "fits" / f"{n}.nc"))
            for n in ("zinb-reach", "poisson")}
    inp = ReportInput("t", fits, fits["poisson"].data, seed=7)
    kinds: list[str] = []
    real_take = WorkAhead.take

    def counted(self, key, compute):
        out = real_take(self, key, compute)
        kinds.append(type(out).__name__)
        return out

    monkeypatch.setattr(WorkAhead, "take", counted)
    monkeypatch.setattr(ahead, "available_workers", lambda: 1)
    built = {}
    for mode in ("started", "with", "without"):
        if mode == "without":
            monkeypatch.setattr(ahead, "available_workers", lambda: 0)
        # "started": each fit's work begun before the report, as bayeszi run does
        started = [start_fit_work(n, f, inp.seed, inp.interval) for n, f in fits.items()
                   ] if mode == "started" else []
        doc, _, warned = build_document(inp, ahead=True, started=started)
        with OutputFolder(str(tmp_path / mode)) as out:
            write_document(doc, out)
            out.commit()
        built[mode] = (doc, warned)
        if mode != "without":
            assert "Outcome" in kinds  # this build took answers from a worker
            kinds.clear()
    _same_report(tmp_path, built, "with", "without")
    _same_report(tmp_path, built, "started", "without")


def _same_report(tmp_path, built, mode_a: str, mode_b: str) -> None:
    """Every table equal (exactly) and every PNG byte-identical between two builds."""
    (doc_a, warned_a), (doc_b, warned_b) = built[mode_a], built[mode_b]
    assert warned_a == warned_b
    tables_a = {t.name: t.frame for t in doc_a.tables()}
    tables_b = {t.name: t.frame for t in doc_b.tables()}
    assert list(tables_a) == list(tables_b)
    for name, frame in tables_a.items():
        other = tables_b[name]
        assert frame.columns.equals(other.columns), name
        for col in frame.columns:
            a, b = frame[col].to_numpy(), other[col].to_numpy()
            if a.dtype.kind == "f":
                np.testing.assert_array_equal(a, b, err_msg=f"{name}: {col}")
            else:
                assert list(a) == list(b), f"{name}: {col}"
    figures = sorted(p.name for p in (tmp_path / mode_a / "figures").iterdir())
    assert figures and figures == sorted(p.name for p in (tmp_path / mode_b / "figures")
                                         .iterdir())
    for name in figures:
        assert ((tmp_path / mode_a / "figures" / name).read_bytes()
                == (tmp_path / mode_b / "figures" / name).read_bytes()), name


@pytest.mark.parametrize("n", [0, 1, 3])
def test_take_of_an_unplanned_key_computes_here(n):
    with WorkAhead([[("a", lambda done: 1)]], workers=1) as w:
        assert w.take(("other", n), lambda: n).replay() == n


def test_fit_each_tells_of_each_fit_as_it_is_made(monkeypatch):
    """on_fit hears of every candidate right after its fit, before the next one starts (so
    bayeszi run can start the report's work on it while the next candidate fits)."""
    import pandas as pd

    from bayeszi.base.spec import ModelSpec
    from bayeszi.fitting import candidates as C

    order: list[str] = []

    def fake_fit(data, spec):
        order.append(f"fit {spec.family}")
        return spec.family

    monkeypatch.setattr(C.api, "fit_spec", fake_fit)
    df = pd.DataFrame({"y": [0, 1, 0, 3, 2, 0, 1, 4], "x": np.linspace(0, 1, 8)})
    checked = C.check_candidates(df, [C.Candidate(f, ModelSpec(counts="y ~ x", family=f))
                                      for f in ("poisson", "negbin")], noun="model")
    run = C.fit_each(df, checked, on_fit=lambda name, f: order.append(f"heard {name} {f}"))
    assert order == ["fit poisson", "heard poisson poisson", "fit negbin",
                     "heard negbin negbin"]
    assert run.fits == {"poisson": "poisson", "negbin": "negbin"}


def test_loo_takes_the_pareto_smoothing_started_on_a_fit(small_run, monkeypatch):
    """Work started on a fit does LOO's Pareto smoothing first; LOO takes it from there (an
    Outcome, not computed here) and the estimates equal those computed without it."""
    from bayeszi.app.report.ahead import AheadGroup
    from bayeszi.app.report.context import WarningLog, loo_answers, start_fit_work

    fits = {n: bayeszi.load(str(small_run["out"] / "fits" / f"{n}.nc"))
            for n in ("zinb-reach", "poisson")}
    taken: dict = {}
    real_take = WorkAhead.take

    def recorded(self, key, compute):
        out = real_take(self, key, compute)
        taken[key] = type(out).__name__
        return out

    monkeypatch.setattr(WorkAhead, "take", recorded)
    monkeypatch.setattr(ahead, "available_workers", lambda: 1)
    work = start_fit_work("poisson", fits["poisson"], 7, 0.9)
    with AheadGroup([work]) as group:
        _until_begun(work, ("psis", "poisson"))
        ests, comparison = loo_answers(fits, WarningLog(), ahead=group)
    assert taken[("psis", "poisson")] == "Outcome"
    assert ("psis", "zinb-reach") not in taken  # planned by nobody: computed here
    plain_ests, plain_comparison = loo_answers(fits, WarningLog())
    for name, est in ests.items():
        assert (est.elpd, est.se, est.p_loo) == (plain_ests[name].elpd, plain_ests[name].se,
                                                 plain_ests[name].p_loo)
        np.testing.assert_array_equal(est.pointwise["pareto_k"],
                                      plain_ests[name].pointwise["pareto_k"])
    assert comparison.equals(plain_comparison)
