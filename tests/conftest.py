"""Shared fixtures: the fits and runs that more than one test file uses, each made once per
session, and a per-session cache for fits that the tests of one file share.

No test module imports another: what two test files share lives here (fixtures) or in a plain
helper module (tests/simulate.py: data sets with known truth; tests/graph_reference.py: the
model graph's own density), which this folder on ``sys.path`` makes importable.

* ``cached_fit("name", make)``: ``make()`` runs once per session per name;
* ``no_sampling``: every fit stops where sampling would start (a BayesziError), and the
  calls that got there are listed;
* ``tiny_fit``: a short ZINB fit of :func:`simulate.tiny_data` (test_hardening, test_faults);
* ``write_small_study(folder, **replace)``: the small crayfish study and its data;
* ``small_run``: that study run once through ``bayeszi run --save-fits`` (test_cli,
  test_report).

Example
-------
A test asks for ``cached_fit`` and calls ``cached_fit("name", lambda: bz.fit(...))``; the
second caller with the same name gets the same fitted model without sampling again. A test
that needs the tiny fit names it: ``def test_x(tiny_fit): ...``.
"""

from __future__ import annotations

import contextlib
import io
import os
import sys
import warnings
from collections.abc import Callable
from pathlib import Path
from typing import Any

import matplotlib
import pytest

matplotlib.use("Agg")
sys.path.insert(0, os.path.dirname(__file__))

_CACHE: dict[str, object] = {}


@pytest.fixture(scope="session")
def cached_fit() -> Callable[[str, Callable[[], object]], object]:
    """Return ``get(name, make)``: ``make()`` runs once per session per name."""

    def get(name: str, make: Callable[[], object]) -> object:
        if name not in _CACHE:
            with warnings.catch_warnings():
                warnings.simplefilter("ignore")
                _CACHE[name] = make()
        return _CACHE[name]

    return get


# ============================================================================ no sampling
@pytest.fixture
def no_sampling(monkeypatch: pytest.MonkeyPatch) -> list[tuple]:
    """Stop every fit where sampling would start: ``bayeszi.engine.fit.run_nuts``, the one
    call through which the API, the study runner and the command line all sample, records
    its arguments and raises a BayesziError ("sampling reached"). Returns the recorded calls,
    so a test of a check that must come first asserts the list is empty."""
    import bayeszi.engine.fit
    from bayeszi.base.errors import BayesziError

    calls: list[tuple] = []

    def run_nuts(*args: Any, **kwargs: Any) -> None:
        calls.append(args)
        raise BayesziError("sampling reached: every check before it passed")

    monkeypatch.setattr(bayeszi.engine.fit, "run_nuts", run_nuts)
    return calls


# ============================================================================ the tiny fit
@pytest.fixture(scope="session")
def tiny_fit() -> Any:
    """A short ZINB fit (2 chains x 100 draws) of :func:`simulate.tiny_data`: exposure, a
    factor, a 0/1 zeros term and 6 groups; for tests of messages and of saved files."""
    from simulate import tiny_data

    import bayeszi as bz

    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        return bz.fit(tiny_data(), counts="y ~ x + C(f)", zeros="~ w", family="zinb",
                      exposure="e", groups="g", draws=100, warmup_steps=150, chains=2, cores=1,
                      seed=5, progressbar=False)


# ============================================================================ the small study
SMALL_STUDY = """\
[study]
title = "Small crayfish study"
summary = "A small simulated study for the tests."
data = "{data}"
response = "crayfish"
exposure = "trap_nights"
exposure_unit = "trap night"
groups = ["reach"]
seed = 7
interval = 0.9
residuals_against = "depth"

[sampler]
draws = 150
warmup_steps = 200
chains = 2
cores = 1

[[model]]
name = "zinb-reach"
family = "zinb"
counts = "water_temp + substrate + depth"
zeros = "barrier"

[model.priors.counts]
"substrate: silt (vs cobble)" = {{ distribution = "normal", mean = 0, sd = 0.8 }}

[[model]]
name = "poisson"
family = "poisson"
counts = "water_temp + depth"
groups = []

[[scenario]]
name = "open reach"
values = {{ substrate = "cobble", depth = 0.6, barrier = 0 }}
vary = {{ water_temp = [8.0, 14.0, 20.0] }}

[[scenario]]
name = "reach R01"
values = {{ reach = "R01", water_temp = 14.0, substrate = "gravel", depth = 0.5, barrier = 0 }}
groups = "known"

[[contrast]]
name = "barrier downstream"
scenario = "open reach"
change = {{ barrier = 1 }}
"""


def _write_small_study(folder: Path, **replace: str) -> Path:
    """The small study (about 300 simulated crayfish records on 6 reaches, two models) and its
    data in ``folder``; ``replace`` swaps exact text snippets of the study file."""
    from bayeszi.data import simulate_crayfish

    data, _ = simulate_crayfish(seed=11, n_reaches=6, n_rivers=2)
    data.to_csv(folder / "crayfish.csv", index=False)
    text = SMALL_STUDY.format(data="crayfish.csv")
    for old, new in replace.items():
        assert old in text, old
        text = text.replace(old, new)
    path = folder / "study.toml"
    path.write_text(text, encoding="utf-8")
    return path


@pytest.fixture(scope="session")
def write_small_study() -> Callable[..., Path]:
    """``write(folder, **replace) -> study.toml path``: the small study and its data."""
    return _write_small_study


@pytest.fixture(scope="session")
def small_run(tmp_path_factory: pytest.TempPathFactory) -> dict[str, Any]:
    """The small study run once through ``bayeszi run --save-fits --quiet``: its exit code,
    study file, report folder, data file and what it printed."""
    from bayeszi.app.cli import main

    folder = tmp_path_factory.mktemp("small-study")
    study = _write_small_study(folder)
    out = folder / "report"
    buf = io.StringIO()
    with contextlib.redirect_stdout(buf), warnings.catch_warnings():
        warnings.simplefilter("ignore")
        rc = main(["run", str(study), "--out", str(out), "--save-fits", "--quiet"])
    return {"rc": rc, "study": study, "out": out, "data": folder / "crayfish.csv",
            "stdout": buf.getvalue()}
