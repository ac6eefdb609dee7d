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
    from bayeszi.app.report.context import ReportInput
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
    for mode in ("with", "without"):
        if mode == "without":
            monkeypatch.setattr(ahead, "available_workers", lambda: 0)
        doc, _, warned = build_document(inp, ahead=True)
        with OutputFolder(str(tmp_path / mode)) as out:
            write_document(doc, out)
            out.commit()
        built[mode] = (doc, warned)
    assert "Outcome" in kinds  # the first build took answers from a worker
    (doc_a, warned_a), (doc_b, warned_b) = built["with"], built["without"]
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
    figures = sorted(p.name for p in (tmp_path / "with" / "figures").iterdir())
    assert figures and figures == sorted(p.name for p in (tmp_path / "without" / "figures")
                                         .iterdir())
    for name in figures:
        assert ((tmp_path / "with" / "figures" / name).read_bytes()
                == (tmp_path / "without" / "figures" / name).read_bytes()), name


@pytest.mark.parametrize("n", [0, 1, 3])
def test_take_of_an_unplanned_key_computes_here(n):
    with WorkAhead([[("a", lambda done: 1)]], workers=1) as w:
        assert w.take(("other", n), lambda: n).replay() == n
