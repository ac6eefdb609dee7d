"""Big fits: the sampler choice with and without nutpie, the warning before a slow fit, the
progress line, and nutpie agreeing with PyMC's NUTS on a small panel.

"nutpie cannot be imported" is made real by putting ``None`` in ``sys.modules["nutpie"]``
(Python then raises ImportError on ``import nutpie``), so the import check itself runs.
The agreement test (slow) compares posterior means of the two samplers within 4.5 Monte
Carlo standard errors of their difference (ArviZ's ``mcse`` of each mean, combined).
"""

from __future__ import annotations

import io
import sys
import warnings

import numpy as np
import pytest
import simulate

import bayeszi as bz
import bayeszi.model.progress as P
import bayeszi.model.sample as S
from bayeszi.base.errors import BayesziError, BayesziWarning
from bayeszi.fitting.api import make_spec
from bayeszi.fitting.candidates import Candidate, check_candidates

BIG = S.SLOW_WITHOUT_NUTPIE_WORK


@pytest.fixture
def no_nutpie(monkeypatch):
    """nutpie cannot be imported (as on a machine where it failed to install)."""
    monkeypatch.setitem(sys.modules, "nutpie", None)


def test_nutpie_is_importable_in_the_default_install():
    assert S.nutpie_problem() is None
    assert S.nutpie_version() is not None


def test_auto_takes_nutpie_for_big_fits_and_pymc_for_small_ones():
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        assert S.choose_sampler("auto", BIG) == "nutpie"
        assert S.choose_sampler("auto", S.NUTPIE_MIN_WORK) == "nutpie"
        assert S.choose_sampler("auto", S.NUTPIE_MIN_WORK / 2) == "pymc"
        assert S.choose_sampler("pymc", BIG) == "pymc"


def test_without_nutpie_a_big_fit_warns_and_uses_pymc(no_nutpie):
    assert S.nutpie_problem().startswith("ModuleNotFoundError: import of nutpie")
    assert S.nutpie_version() is None
    match = (r"this is a big fit \(about 20 million record evaluations\), and nutpie.*cannot "
             r"be imported here \(ModuleNotFound")
    with pytest.warns(BayesziWarning, match=match) as rec:
        assert S.choose_sampler("auto", BIG) == "pymc"
    text = str(rec[0].message)
    assert "pip install" in text and "sampler='pymc'" in text
    # smaller fits, and PyMC's NUTS asked for by name, go ahead without a word
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        assert S.choose_sampler("auto", BIG / 2) == "pymc"
        assert S.choose_sampler("pymc", 100 * BIG) == "pymc"
    with pytest.warns(BayesziWarning, match="sampler='nutpie' was asked for but nutpie cannot"):
        assert S.choose_sampler("nutpie", 1.0) == "pymc"


def _big_panel_spec(**kw):
    # 2,000 iterations x 2 chains would need 5,000 patterns; 30,000 iterations pass the
    # threshold with the small panel's 500 records, and nothing is sampled here
    df = simulate.panel(150)
    spec = make_spec("y ~ x + u", "~ u", "zinb", exposure="e", groups="unit", draws=15_000,
                     warmup_steps=15_000, chains=2, **kw)
    assert S.fit_work(len(df), spec.sampler) >= BIG
    return df, spec


def test_the_slow_fit_warning_comes_before_sampling(no_nutpie, monkeypatch):
    df, spec = _big_panel_spec()

    def stop(*args, **kwargs):
        raise BayesziError("sampling reached")

    monkeypatch.setattr(S, "_sample_pymc", stop)
    with pytest.warns(BayesziWarning, match="this is a big fit"), \
            pytest.raises(BayesziError, match="sampling reached"):
        bz.fit_spec(df, spec)
    # the check of a study's or the command line's candidates shows it before any fit
    with pytest.warns(BayesziWarning, match="this is a big fit"):
        checked = check_candidates(df, [Candidate("zinb", spec)], noun="model")
    # remembered as shown, so the fit's own copy of it is not shown a second time
    assert [t for t in checked.shown if t.startswith("this is a big fit")]


def test_no_slow_fit_warning_when_pymc_is_asked_for(no_nutpie):
    df, spec = _big_panel_spec(sampler="pymc")
    with warnings.catch_warnings(record=True) as rec:
        warnings.simplefilter("always")
        checked = check_candidates(df, [Candidate("zinb", spec)], noun="model")
    assert [str(w.message) for w in rec if "single record" in str(w.message)]  # data note
    assert not [w for w in rec if "big fit" in str(w.message)]
    assert not [t for t in checked.shown if "big fit" in t]


def test_progress_line_reports_iterations_elapsed_and_time_left(monkeypatch, capsys):
    monkeypatch.setattr(P, "LINE_EVERY_S", 0.0)  # every update makes a line
    df = simulate.tiny_data()
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        bz.fit(df, counts="y ~ x", zeros="~ w", family="zip", draws=40, warmup_steps=30, chains=2,
               cores=1, seed=2, sampler="pymc", progressbar=True)
    lines = capsys.readouterr().err.strip().splitlines()
    ours = [ln for ln in lines if ln.startswith("sampling (PyMC's NUTS, 2 chain(s)): ")]
    assert len(ours) == 141  # one per iteration (2 x 70) and the closing line
    assert ours[0].startswith("sampling (PyMC's NUTS, 2 chain(s)): 1 of 140 iterations, ")
    assert "elapsed, about " in ours[0] and ours[0].endswith(" left")
    assert ours[-1].startswith("sampling (PyMC's NUTS, 2 chain(s)): 140 of 140 iterations")
    assert " done in " in ours[-1]
    # nothing else: PyMC's own bar and advice stay hidden
    assert lines == ours


def test_progress_off_writes_nothing(capsys):
    df = simulate.tiny_data()
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        bz.fit(df, counts="y ~ x", zeros="~ w", family="zip", draws=20, warmup_steps=20, chains=2,
               cores=1, seed=2, sampler="pymc", progressbar=False)
    assert capsys.readouterr().err == ""


def test_progress_estimate_and_terminal_redraw():
    buf = io.StringIO()
    buf.isatty = lambda: True  # type: ignore[method-assign]
    ticks = iter([0.0, 10.0, 10.2, 20.0, 40.0])
    p = P.SamplingProgress(400, "nutpie, 2 chain(s)", stream=buf, clock=ticks.__next__)
    p.update(100, 0)      # t = 10: shown; 300 left at 10 s per 100
    p.update(150, 0)      # t = 10.2: too soon to redraw
    p.update(300, 2)      # t = 20
    p.close()             # t = 40
    frames = buf.getvalue().split("\r")[1:]
    assert frames[0] == ("sampling (nutpie, 2 chain(s)): 100 of 400 iterations, 0m10s "
                         "elapsed, about 0m30s left\x1b[K")
    assert frames[1] == ("sampling (nutpie, 2 chain(s)): 300 of 400 iterations, 2 divergent, "
                         "0m20s elapsed, about 0m07s left\x1b[K")
    assert frames[2].startswith("sampling (nutpie, 2 chain(s)): 300 of 400 iterations")
    assert buf.getvalue().endswith("\n") and len(frames) == 3


def _panel_fit(sampler: str, progress: bool = False):
    df = simulate.panel(150)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        return bz.fit(df, counts="y ~ x + u", zeros="~ u", family="zinb", exposure="e",
                      groups="unit", draws=400, warmup_steps=400, chains=2, cores=1, seed=5,
                      sampler=sampler, progressbar=progress)


@pytest.mark.slow
def test_nutpie_agrees_with_pymc_on_a_small_panel(monkeypatch, capsys):
    import arviz as az

    monkeypatch.setattr(P, "LINE_EVERY_S", 0.0)
    a = _panel_fit("nutpie", progress=True)
    err = capsys.readouterr().err.strip().splitlines()
    assert a.idata.sample_stats.attrs["bayeszi_sampler"].startswith("nutpie-")
    # bayeszi's progress line, fed by nutpie's callback; nutpie's own bar stays hidden
    assert err and all(ln.startswith("sampling (nutpie, 2 chain(s)): ") for ln in err)
    assert err[-1].startswith("sampling (nutpie, 2 chain(s)): 1,600 of 1,600 iterations")
    b = _panel_fit("pymc")
    names = ["counts_coef", "zeros_coef", "dispersion", "counts_sd_unit", "zeros_sd_unit"]
    for name in names:
        ma = a.idata.posterior[name].mean(("chain", "draw")).values
        mb = b.idata.posterior[name].mean(("chain", "draw")).values
        se = np.hypot(az.mcse(a.idata, var_names=[name])[name].values,
                      az.mcse(b.idata, var_names=[name])[name].values)
        assert np.all(np.abs(ma - mb) < 4.5 * se), (name, ma, mb, se)
