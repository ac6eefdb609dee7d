"""Draws until enough with nutpie (bayeszi/model/enough_nutpie.py) and the choice of the
small-fit backend (bayeszi/model/sample.py).

The exactness check compares against ``nutpie.sample`` itself: a run looked at block by block
and stopped when the judge accepts must hold, value for value, the first draws of one fixed
nutpie run with the same seed and warm-up (a property of the code, no tolerance). nutpie is
compiled with numba here (a dependency); the JAX backend differs only in the compile.
"""

from __future__ import annotations

import numpy as np
import nutpie
import pymc as pm
import pytest

from bayeszi.model import sample as S
from bayeszi.model.enough import STOP_ENOUGH, BlockPlan
from bayeszi.model.enough_nutpie import nutpie_until_enough
from bayeszi.model.reuse import DensityCache, using


@pytest.fixture(scope="module")
def model() -> pm.Model:
    rng = np.random.default_rng(0)
    x = rng.normal(size=60)
    y = rng.poisson(np.exp(0.5 + 0.3 * x))
    with pm.Model() as m:
        a = pm.Normal("a", 0, 1)
        b = pm.Normal("b", 0, 1)
        pm.Deterministic("ab", a + b)
        pm.Poisson("y", pm.math.exp(a + b * x), observed=y)
    return m


def test_stopped_run_holds_the_first_draws_of_a_fixed_run(model):
    compiled = S.compile_nutpie(model, "nutpie")
    fixed = nutpie.sample(compiled, draws=180, tune=150, chains=2, cores=2, seed=7,
                          progress_bar=False, save_warmup=False, target_accept=0.9)
    seen: list[int] = []

    def judge(idata):
        seen.append(int(idata.posterior.sizes["draw"]))
        assert "reached_max_treedepth" in idata.sample_stats  # read as PyMC's draws
        return seen[-1] >= 120

    run = nutpie_until_enough(model, compiled, chains=2, cores=2, warmup_steps=150,
                              plan=BlockPlan(60, 600), acceptance_target=0.9, seed=7,
                              judge=judge)
    assert seen == [60, 120]
    assert (run.draws, run.stop, run.blocks) == (120, STOP_ENOUGH, 2)
    for name in ("a", "b", "ab"):
        np.testing.assert_array_equal(run.idata.posterior[name].values,
                                      fixed.posterior[name].values[:, :120])
    assert "observed_data" in run.idata.groups()


def test_auto_takes_jax_for_small_fits_only_when_it_imports(monkeypatch):
    monkeypatch.setattr(S, "jax_problem", lambda: None)
    assert S.choose_sampler("auto", S.NUTPIE_MIN_WORK / 2) == "nutpie-jax"
    assert S.choose_until_enough("auto") == "nutpie-jax"
    assert S.choose_sampler("pymc", 1.0) == "pymc"  # asked for by name: kept
    assert S.choose_until_enough("pymc") == "pymc"
    assert S.sampler_label("nutpie-jax") == f"nutpie-{S.nutpie_version()}-jax"
    with using(DensityCache()):  # a strata run reusing PyMC's compiled density
        assert S.choose_sampler("auto", S.NUTPIE_MIN_WORK / 2) == "pymc"
        assert S.choose_until_enough("auto") == "pymc"
    monkeypatch.setattr(S, "jax_problem", lambda: "ModuleNotFoundError: No module named 'jax'")
    assert S.choose_sampler("auto", S.NUTPIE_MIN_WORK / 2) == "pymc"
    assert S.choose_until_enough("auto") == "pymc"
