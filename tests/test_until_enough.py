"""Draws until enough (bayeszi/model/enough.py): exact continuation, the stopping rule, the
settings and what a fit says about it.

The exactness checks compare against ``pm.sample`` itself: drawing in blocks through our
loop must give, value for value, the draws of one sequential ``pm.sample`` call with the
same seed, warm-up and total draws (a property of the code, no tolerance).
"""

from __future__ import annotations

import dataclasses

import numpy as np
import pandas as pd
import pymc as pm
import pytest
from simulate import poisson_pymc_model

import bayeszi as bz
from bayeszi.base.errors import BayesziError
from bayeszi.base.spec import SamplerSettings
from bayeszi.model.diagnostics import diagnose
from bayeszi.model.enough import (
    STOP_ENOUGH,
    STOP_FIXED,
    STOP_LIMIT,
    BlockPlan,
    sample_until_enough,
    stop_reason,
)


@pytest.fixture(scope="module")
def model() -> pm.Model:
    return poisson_pymc_model()


@pytest.fixture(scope="module")
def reference(model):
    with model:
        return pm.sample(draws=180, tune=150, chains=2, cores=1, random_seed=7,
                         target_accept=0.9, progressbar=False, compute_convergence_checks=False)


@pytest.mark.parametrize("processes", [False, True], ids=["here", "processes"])
def test_blocks_continue_the_chains_exactly_as_pm_sample(model, reference, processes):
    """Three blocks of 60 are, draw for draw, one pm.sample run of 180 (same seed), with the
    chains here or in worker processes: the step size, mass matrix and random streams carry
    across blocks."""
    run = sample_until_enough(model, chains=2, warmup_steps=150, plan=BlockPlan(60, 180),
                              acceptance_target=0.9, seed=7, judge=None, processes=processes)
    assert (run.draws, run.stop, run.blocks) == (180, STOP_FIXED, 3)
    for name in ("a", "b", "ab"):
        np.testing.assert_array_equal(run.idata.posterior[name].values,
                                      reference.posterior[name].values)
    for name in ("diverging", "tree_depth"):
        np.testing.assert_array_equal(run.idata.sample_stats[name].values,
                                      reference.sample_stats[name].values)


@pytest.mark.parametrize("processes", [False, True], ids=["here", "processes"])
def test_stops_at_the_first_block_the_judge_accepts(model, processes):
    """The judge sees 50, then 100 draws and stops there; with processes the block drawn
    ahead while it judged is dropped, and the draws are those of the chains here."""
    seen: list[int] = []

    def judge(idata):
        seen.append(int(idata.posterior.sizes["draw"]))
        return seen[-1] >= 100

    run = sample_until_enough(model, chains=2, warmup_steps=100, plan=BlockPlan(50, 400),
                              acceptance_target=0.9, seed=3, judge=judge, processes=processes)
    assert seen == [50, 100]
    assert (run.draws, run.stop) == (100, STOP_ENOUGH)
    assert run.idata.posterior.sizes["draw"] == 100
    here = sample_until_enough(model, chains=2, warmup_steps=100, plan=BlockPlan(100, 100),
                               acceptance_target=0.9, seed=3, judge=None)
    np.testing.assert_array_equal(run.idata.posterior["a"].values,
                                  here.idata.posterior["a"].values)


def test_limit_reached_when_never_enough(model):
    run = sample_until_enough(model, chains=2, warmup_steps=100, plan=BlockPlan(40, 100),
                              acceptance_target=0.9, seed=3, judge=lambda idata: False)
    assert (run.draws, run.stop, run.blocks) == (100, STOP_LIMIT, 3)


def test_block_sizes_fill_up_to_the_limit():
    assert BlockPlan(300, 1000).sizes() == [300, 300, 300, 100]
    assert BlockPlan(1000, 1000).sizes() == [1000]


@pytest.mark.parametrize("settings, words", [
    ({"until_enough": True, "chains": 1}, "chains=2"),
    ({"until_enough": True, "block_draws": 500, "draws_limit": 400}, "block_draws"),
    ({"until_enough": "yes"}, "True or False"),
    ({"draws_limit": 0}, "draws_limit"),
])
def test_settings_refused_with_the_fix(settings, words):
    with pytest.raises(BayesziError, match=words):
        SamplerSettings(**settings)


def test_a_fit_says_how_many_draws_and_why(tmp_path):
    """A seeded fit until enough: the stop reason agrees with its own diagnostics, the draw
    count is a whole number of blocks, and the same seed gives the same draws."""
    rng = np.random.default_rng(11)
    n = 150
    x = rng.normal(size=n)
    y = np.where(rng.random(n) < 0.3, 0, rng.poisson(np.exp(0.4 + 0.5 * x)))
    df = pd.DataFrame({"y": y, "x": x})
    kw = dict(counts="y ~ x", family="zip", seed=5, warmup_steps=200, until_enough=True,
              block_draws=150, draws_limit=600)
    m = bz.fit(df, **kw)
    draws = int(m.idata.posterior.sizes["draw"])
    assert draws % 150 == 0 and 150 <= draws <= 600
    diag = diagnose(m.idata)
    passed = not diag.bad_rhat and not diag.bad_ess
    assert stop_reason(m.idata).startswith("enough" if passed else "limit")
    assert f"{draws} draws per chain" in stop_reason(m.idata)
    assert stop_reason(m.idata) in str(m)
    if not passed:  # the warning says which setting to raise
        assert any("raise draws_limit" in p for p in m.sampler_problems())
    again = bz.fit(df, **kw)
    np.testing.assert_array_equal(again.idata.posterior["counts_coef"].values,
                                  m.idata.posterior["counts_coef"].values)
    path = m.save(str(tmp_path / "fit.nc"))
    assert stop_reason(bz.load(path).idata) == stop_reason(m.idata)


def test_a_study_file_draws_until_enough_unless_it_fixes_draws():
    from bayeszi.app.study import _until_enough_default

    assert _until_enough_default({})["until_enough"] is True
    assert _until_enough_default({"draws": 500})["until_enough"] is False
    assert _until_enough_default({"chains": 1})["until_enough"] is False
    assert _until_enough_default({"sampler": "nutpie"})["until_enough"] is True
    with pytest.raises(BayesziError, match="not both"):
        _until_enough_default({"draws": 500, "until_enough": True})


def test_command_line_draws_fix_the_number_and_draws_limit_asks_for_blocks():
    from bayeszi.app.cli import _overrides, build_parser
    from bayeszi.app.study import demo_study_path, load_study

    study = load_study(demo_study_path())
    args = build_parser().parse_args(["run", "s.toml", "--out", "o", "--draws", "300"])
    fixed = study.with_sampler(**_overrides(args))
    assert all(not c.spec.sampler.until_enough and c.spec.sampler.draws == 300
               for c in fixed.candidates)
    args = build_parser().parse_args(["run", "s.toml", "--out", "o", "--draws-limit", "800"])
    capped = fixed.with_sampler(**_overrides(args))
    assert all(c.spec.sampler.until_enough and c.spec.sampler.draws_limit == 800
               for c in capped.candidates)


# ----------------------------------------------------------------------- nutpie (big fits)
def _slow_normal_model() -> pm.Model:
    """A model slow enough (50,000 records) that the run is still going when the first
    blocks are judged, so the judging of a running sampler is what is tested."""
    y = np.random.default_rng(4).normal(1.0, 2.0, size=50_000)
    with pm.Model() as model:
        mu = pm.Normal("mu", 0, 5)
        sd = pm.HalfNormal("sd", 3)
        pm.Normal("y", mu, sd, observed=y)
    return model


def test_nutpie_until_enough_keeps_exactly_the_draws_of_a_fixed_run():
    """nutpie, stopped at a block boundary, keeps value for value the draws of a fixed
    nutpie run of that many draws with the same seed (a property of the code)."""
    from bayeszi.model.enough_nutpie import nutpie_until_enough
    from bayeszi.model.sample import _nutpie_draws, compile_nutpie

    model = _slow_normal_model()
    compiled = compile_nutpie(model)
    settings = SamplerSettings(draws=300, warmup_steps=100, chains=2, seed=9, sampler="nutpie")
    seen: list[int] = []

    def judge(idata):  # enough at 300 draws; records every block it is shown, in order
        seen.append(int(idata.posterior.sizes["draw"]))
        assert not np.isnan(idata.posterior["mu"].values).any()
        return seen[-1] >= 300

    run = nutpie_until_enough(model, settings, BlockPlan(100, 3000), judge, compiled=compiled)
    assert (run.draws, run.stop, run.blocks, seen) == (300, STOP_ENOUGH, 3, [100, 200, 300])
    fixed = _nutpie_draws(compiled, settings, progress=False)
    for name in ("mu", "sd"):
        np.testing.assert_array_equal(run.idata.posterior[name].values,
                                      fixed.posterior[name].values)
    assert "observed_data" in run.idata.groups()
    never = nutpie_until_enough(model, dataclasses.replace(settings, draws=200),
                                BlockPlan(100, 200), judge=lambda idata: False,
                                compiled=compiled)
    assert (never.draws, never.stop) == (200, STOP_LIMIT)


@pytest.mark.parametrize("processes", [False, True], ids=["here", "processes"])
def test_progress_counts_every_iteration_of_every_chain(model, processes):
    """The progress heard ends at chains x (warm-up + draws) iterations, never goes back,
    and its divergences are those of the draws (sample_stats), with the chains here or in
    worker processes."""
    heard: list[tuple[int, int]] = []
    run = sample_until_enough(model, chains=2, warmup_steps=40, plan=BlockPlan(30, 60),
                              acceptance_target=0.9, seed=4, judge=None, processes=processes,
                              on_progress=lambda done, div: heard.append((done, div)))
    assert heard[-1] == (2 * (40 + 60), int(run.idata.sample_stats["diverging"].sum()))
    done = [d for d, _ in heard]
    assert done == sorted(done)
    if not processes:  # here: one report per iteration
        assert done == list(range(1, 201))


def test_a_fixed_run_is_the_block_path_without_a_judge(model):
    """run_nuts's fixed draws equal, value for value, a block run of the same total whose
    judge never stops it early: fixed and until-enough fits start and continue alike."""
    from bayeszi.model.sample import run_nuts

    settings = SamplerSettings(draws=120, warmup_steps=100, chains=2, cores=1, seed=5,
                               sampler="pymc", progressbar=False)
    fixed = run_nuts(model, settings, rows=60)
    blocks = sample_until_enough(model, chains=2, warmup_steps=100, plan=BlockPlan(40, 120),
                                 acceptance_target=settings.acceptance_target, seed=5,
                                 judge=lambda idata: False)
    for name in ("a", "b"):
        np.testing.assert_array_equal(fixed.posterior[name].values,
                                      blocks.idata.posterior[name].values)
    assert fixed.posterior.attrs["sampling_time"] > 0
