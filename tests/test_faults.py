"""Faults lose nothing: Ctrl-C, damaged or foreign saved fits, unwritable destinations.

* Ctrl-C during sampling ends with a KeyboardInterrupt that says nothing was kept, through
  the API and the command line (exit 130), and leaves no partial file or folder. It is
  simulated both by a KeyboardInterrupt raised where PyMC samples and by a real SIGINT sent
  during real PyMC sampling (PyMC itself swallows that interrupt and returns the draws made so
  far; bayeszi must not hand those on as a fit).
* A truncated, bit-flipped, tampered or foreign file is a BayesziError, or (a flip in unused
  bytes) loads exactly the saved numbers: never wrong numbers in silence.
* A fit saved by another bayeszi version loads (with a warning naming both versions) when the
  file format is the same, and says why when it cannot.
* An unwritable destination is reported before sampling starts.

These tests check our own behaviour; no reference values are involved (common practice, no
source). The tiny fit is the session fixture ``tiny_fit`` of tests/conftest.py (shared with
tests/test_hardening.py).
"""

from __future__ import annotations

import copy
import json
import os
import re
import shutil
import signal
import warnings
from pathlib import Path
from typing import Any

import arviz as az
import numpy as np
import pandas as pd
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st
from simulate import tiny_data

import bayeszi
import bayeszi as bz
from bayeszi.app.cli import main
from bayeszi.base.errors import BayesziError
from bayeszi.engine import archive as store

PROC = "/proc/bayeszi-fault-test"  # nobody, not even root, can create files in /proc
HAVE_PROC = os.path.isdir("/proc/self")
AS_ROOT = getattr(os, "geteuid", lambda: 1)() == 0  # os.access says yes to root everywhere


@pytest.fixture(scope="module")
def saved(tiny_fit, tmp_path_factory) -> Path:
    path = tmp_path_factory.mktemp("saved") / "fit.nc"
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        tiny_fit.save(str(path))
    return path


def _copy(saved: Path, tmp_path: Path, name: str = "copy.nc") -> Path:
    dest = tmp_path / name
    shutil.copy(saved, dest)
    return dest


def _posterior_equal(a: Any, b: Any) -> None:
    for grp in ("posterior", "log_likelihood", "sample_stats", "observed_data"):
        for v in a.idata[grp].data_vars:
            np.testing.assert_array_equal(a.idata[grp][v].values, b.idata[grp][v].values)


def _quiet_load(path: Path) -> Any:
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        return bz.load(str(path))


# ============================================================================ Ctrl-C
def _interrupting_sample(*args: Any, **kwargs: Any) -> None:
    raise KeyboardInterrupt


@pytest.fixture
def pymc_sampler(monkeypatch):
    """Make sampler='auto' mean PyMC's NUTS, and make its chains' start (warm-up included)
    raise KeyboardInterrupt as a Ctrl-C there would."""
    import bayeszi.model.enough
    import bayeszi.model.sample

    monkeypatch.setattr(bayeszi.model.sample, "choose_sampler", lambda *args, **kwargs: "pymc")
    monkeypatch.setattr(bayeszi.model.enough, "open_chains", _interrupting_sample)


def small_frame() -> pd.DataFrame:
    rng = np.random.default_rng(4)
    return pd.DataFrame({"y": rng.poisson(1.5, 40), "x": rng.normal(size=40)})


def test_ctrl_c_raised_in_the_sampler_says_nothing_was_kept(monkeypatch, pymc_sampler):
    with pytest.raises(KeyboardInterrupt, match="sampling interrupted: nothing was kept"):
        bz.fit(small_frame(), counts="y ~ x", family="poisson", draws=20, warmup_steps=20,
               progressbar=False)


def test_real_sigint_during_real_sampling_is_not_swallowed(monkeypatch):
    """A real SIGINT in the middle of the draws (the 15th iteration) stops the fit with our
    message, whatever a sampler does with the KeyboardInterrupt (PyMC's pm.sample, for one,
    catches it and returns the draws made so far: pymc/sampling/mcmc.py), and bayeszi's
    handler is removed again."""
    import bayeszi.model.chains as chains
    import bayeszi.model.sample

    monkeypatch.setattr(bayeszi.model.sample, "choose_sampler", lambda *args, **kwargs: "pymc")
    real_steps = chains._steps
    seen: dict[str, Any] = {"n": 0}

    def steps_then_press_ctrl_c(step: Any, point: Any, state: Any, n: int, tick: Any) -> Any:
        def tick_and_press(stats: Any) -> None:
            tick(stats)
            seen["n"] += 1
            if seen["n"] == 15 and "sent" not in seen:
                seen["sent"] = True
                signal.raise_signal(signal.SIGINT)

        out = real_steps(step, point, state, n, tick_and_press)
        seen["returned"] = True  # the interrupt was swallowed
        return out

    monkeypatch.setattr(chains, "_steps", steps_then_press_ctrl_c)
    # Python's own Ctrl-C handler, as in a terminal: a shell starts background jobs with
    # SIGINT ignored, and bayeszi rightly leaves an ignored Ctrl-C ignored
    previous = signal.signal(signal.SIGINT, signal.default_int_handler)
    try:
        with pytest.raises(KeyboardInterrupt, match="sampling interrupted: nothing was kept"):
            bz.fit(small_frame(), counts="y ~ x", family="poisson", draws=30, warmup_steps=30,
                   chains=1, cores=1, seed=1, progressbar=False)
        # our handler was removed again
        assert signal.getsignal(signal.SIGINT) is signal.default_int_handler
    finally:
        signal.signal(signal.SIGINT, previous)
    assert seen.get("sent") and "returned" not in seen


def test_a_short_result_from_the_sampler_is_refused(tiny_fit, monkeypatch):
    """Whatever the reason, fewer draws than asked for never become a fit."""
    import bayeszi.engine.fit as engine_fit

    monkeypatch.setattr(engine_fit, "run_nuts",
                        lambda model, s, rows: tiny_fit.idata.isel(draw=slice(0, 5)))
    with pytest.raises(BayesziError, match=r"returned 2 chain\(s\) of 5 draws instead of 2 of "
                                           r"20"):
        bz.fit(tiny_data(), counts="y ~ x + C(f)", zeros="~ w", family="zinb", exposure="e",
               groups="g", draws=20, warmup_steps=20, progressbar=False)


def test_ctrl_c_in_cli_fit_exits_130_and_writes_nothing(tmp_path, monkeypatch, capsys,
                                                        pymc_sampler):
    small_frame().to_csv(tmp_path / "d.csv", index=False)
    rc = main(["fit", "--data", str(tmp_path / "d.csv"), "--counts", "y ~ x", "--family",
               "poisson", "--out", str(tmp_path / "fit.nc"), "--quiet"])
    assert rc == 130
    assert "interrupted" in capsys.readouterr().err
    assert sorted(os.listdir(tmp_path)) == ["d.csv"]


def test_ctrl_c_in_cli_run_leaves_no_partial_report(tmp_path, monkeypatch, capsys,
                                                     pymc_sampler):
    small_frame().to_csv(tmp_path / "d.csv", index=False)
    # a fixed number of draws (the chains' start is patched by the fixture)
    (tmp_path / "s.toml").write_text('[study]\ndata = "d.csv"\nresponse = "y"\n'
                                     '[sampler]\ndraws = 50\n[[model]]\n'
                                     'name = "p"\nfamily = "poisson"\ncounts = "x"\n')
    old = tmp_path / "old-report"  # an earlier report at the destination stays as it was
    old.mkdir()
    (old / ".bayeszi-report").write_text("marker")
    (old / "report.html").write_text("earlier report")
    rc = main(["run", str(tmp_path / "s.toml"), "--out", str(old), "--quiet"])
    assert rc == 130
    assert "interrupted" in capsys.readouterr().err
    assert sorted(os.listdir(tmp_path)) == ["d.csv", "old-report", "s.toml"]
    assert (old / "report.html").read_text() == "earlier report"


def _partial_writer(exc: BaseException):
    def to_netcdf(self: Any, filename: str, *args: Any, **kwargs: Any) -> None:
        with open(filename, "wb") as fh:
            fh.write(b"\x89HDF\r\n\x1a\n half a file")
        raise exc

    return to_netcdf


@pytest.mark.parametrize("exc, expect", [(KeyboardInterrupt(), KeyboardInterrupt),
                                         (OSError(28, "No space left on device"), BayesziError)])
def test_interrupted_or_failed_save_keeps_the_earlier_file(tiny_fit, tmp_path, monkeypatch, exc,
                                                           expect):
    target = tmp_path / "fit.nc"
    target.write_bytes(b"the earlier save")
    monkeypatch.setattr(az.InferenceData, "to_netcdf", _partial_writer(exc))
    with pytest.raises(expect):
        tiny_fit.save(str(target))
    assert sorted(os.listdir(tmp_path)) == ["fit.nc"]
    assert target.read_bytes() == b"the earlier save"


# ============================================================================ damaged files
@pytest.mark.parametrize("fraction", [0.0, 0.002, 0.1, 0.5, 0.9, 0.999])
def test_truncated_file_is_a_bayeszi_error(saved, tmp_path, fraction):
    raw = saved.read_bytes()
    bad = tmp_path / "cut.nc"
    bad.write_bytes(raw[: int(len(raw) * fraction)])
    with pytest.raises(BayesziError, match="not a readable bayeszi fit"):
        _quiet_load(bad)


@settings(max_examples=12, deadline=None, derandomize=True, database=None,
          suppress_health_check=[HealthCheck.function_scoped_fixture, HealthCheck.too_slow])
@given(where=st.floats(0.0, 1.0, exclude_max=True), flip=st.integers(1, 255))
def test_a_flipped_byte_is_refused_or_changes_nothing(tiny_fit, saved, tmp_path, where, flip):
    raw = bytearray(saved.read_bytes())
    pos = int(where * len(raw))
    raw[pos] ^= flip
    bad = tmp_path / "flipped.nc"
    bad.write_bytes(bytes(raw))
    try:
        back = _quiet_load(bad)
    except BayesziError as err:  # names the file and says what is wrong with it
        assert repr(str(bad)) in str(err), str(err)
        assert re.search(r"not a readable bayeszi fit|holds no bayeszi metadata|file format|"
                         r"cannot be rebuilt|does not fit together", str(err)), str(err)
        return
    _posterior_equal(tiny_fit, back)  # loaded: then exactly the saved numbers
    pd.testing.assert_frame_equal(back.data, tiny_fit.data)


def _edit(path: Path, change: Any) -> None:
    import h5py

    with h5py.File(path, "r+") as f:
        change(f)


def _edit_meta(path: Path, change: Any) -> None:
    """Change the bayeszi metadata in place without rewriting its checksum (on a file that
    has one, that is tampering)."""
    import h5py

    with h5py.File(path, "r+") as f:
        meta = json.loads(f["posterior"].attrs["bayeszi"])
        change(meta)
        f["posterior"].attrs["bayeszi"] = json.dumps(meta)


class _WrittenSpec:
    """Stands in for the ModelSpec that save() writes: the settings another writer wrote."""

    def __init__(self, settings: dict[str, Any]) -> None:
        self.settings = settings

    def to_dict(self) -> dict[str, Any]:
        return self.settings


def _save_as_another_writer(fitted: Any, path: Path, monkeypatch: pytest.MonkeyPatch,
                            version: str | None = None, spec_change: Any = None) -> Path:
    """``fitted`` saved through bayeszi's own save as another bayeszi version would write it:
    that version's number and spec settings in the metadata, and a checksum that matches."""
    record = copy.copy(fitted)
    if spec_change is not None:
        settings = copy.deepcopy(fitted.spec.to_dict())
        spec_change(settings)
        record.spec = _WrittenSpec(settings)
    with monkeypatch.context() as patch, warnings.catch_warnings():
        warnings.simplefilter("ignore")
        if version is not None:
            patch.setattr(store, "__version__", version)  # the writer's version only
        store.save(record, str(path))
    return path


def test_changed_draws_fail_the_checksum(saved, tmp_path):
    path = _copy(saved, tmp_path)

    def nudge(f: Any) -> None:
        f["posterior/counts_std_coef"][0, 0, 0] += 1e-9

    _edit(path, nudge)
    with pytest.raises(BayesziError, match="checksum"):
        _quiet_load(path)


def test_missing_fitted_data_is_named(saved, tmp_path):
    path = _copy(saved, tmp_path)

    def drop(f: Any) -> None:
        del f["constant_data"]

    _edit(path, drop)
    with pytest.raises(BayesziError, match="constant_data"):
        _quiet_load(path)


@pytest.mark.parametrize("change, pattern", [
    (lambda m: m.update(format=99), r"file format 99, newer than this bayeszi.*upgrade"),
    (lambda m: m.update(format=0), r"file format 0, older than this bayeszi.*refit"),
    (lambda m: m.update(format="1"), r"format number is '1'"),
    (lambda m: m.pop("column_kinds"), r"lacks 'column_kinds'"),
    (lambda m: m.update(checksum="0" * 64), r"checksum"),
    (lambda m: m["spec"].update(family="zip"), r"checksum"),  # tampering, not a writer
])
def test_tampered_metadata_says_why(saved, tmp_path, change, pattern):
    path = _copy(saved, tmp_path)
    _edit_meta(path, change)
    with pytest.raises(BayesziError, match=pattern):
        _quiet_load(path)


@pytest.mark.parametrize("version, spec_change, pattern", [
    ("9.0.0", lambda s: s.update(shrinkage=0.5),
     r"written by bayeszi 9\.0\.0, whose model settings this bayeszi .* cannot read: unknown "
     r"model setting\(s\) \['shrinkage'\].*Load it with bayeszi 9\.0\.0, or refit"),
    (None, lambda s: s.update(counts="y ~ x"),
     r"does not fit together.*counts terms .* stored"),
    (None, lambda s: s.update(family="zinbb"), r"unknown family 'zinbb'"),
])
def test_metadata_another_version_wrote_says_why_it_cannot_load(tiny_fit, tmp_path, monkeypatch,
                                                                version, spec_change, pattern):
    path = _save_as_another_writer(tiny_fit, tmp_path / "other.nc", monkeypatch, version,
                                   spec_change)
    with pytest.raises(BayesziError, match=pattern):
        _quiet_load(path)


def test_broken_metadata_json_and_foreign_files(tiny_fit, saved, tmp_path):
    path = _copy(saved, tmp_path)

    def garble(f: Any) -> None:
        f["posterior"].attrs["bayeszi"] = '{"format": 1, "spec": '

    _edit(path, garble)
    with pytest.raises(BayesziError, match="not valid JSON"):
        _quiet_load(path)
    foreign = tmp_path / "arviz.nc"
    tiny_fit.idata.to_netcdf(str(foreign))  # a plain ArviZ file, not written by bayeszi's save
    with pytest.raises(BayesziError, match="no bayeszi metadata.*fitted.save"):
        _quiet_load(foreign)
    text = tmp_path / "notes.nc"
    text.write_text("crayfish,trap_nights\n1,2\n")
    with pytest.raises(BayesziError, match="not a readable bayeszi fit"):
        _quiet_load(text)
    with pytest.raises(BayesziError, match="no saved fit"):
        _quiet_load(tmp_path)  # a folder


def test_other_version_same_format_loads_and_says_so(tiny_fit, tmp_path, monkeypatch):
    path = _save_as_another_writer(tiny_fit, tmp_path / "other.nc", monkeypatch, "0.0.7")
    with pytest.warns(bz.BayesziWarning, match=r"saved by bayeszi 0\.0\.7 and is loaded by "
                                               rf"bayeszi {bayeszi.__version__}"):
        back = bz.load(str(path))
    _posterior_equal(tiny_fit, back)
    pd.testing.assert_frame_equal(back.coefficients(), tiny_fit.coefficients())


def test_file_without_checksum_from_an_older_writer_loads(tiny_fit, saved, tmp_path):
    path = _copy(saved, tmp_path)
    _edit_meta(path, lambda m: m.pop("checksum"))
    _posterior_equal(tiny_fit, _quiet_load(path))


# ============================================================================ destinations
def test_save_refuses_unwritable_destinations(tiny_fit, tmp_path):
    blocker = tmp_path / "a-file"
    blocker.write_text("x")
    with pytest.raises(BayesziError, match="does not exist"):
        tiny_fit.save(str(blocker / "fit.nc"))
    with pytest.raises(BayesziError, match="is a folder"):
        tiny_fit.save(str(tmp_path))
    if HAVE_PROC:
        with pytest.raises(BayesziError, match="not writable"):
            tiny_fit.save(PROC + ".nc")
    assert sorted(os.listdir(tmp_path)) == ["a-file"]


def test_check_writable_probes_and_cleans_up(tmp_path):
    assert store.check_writable(str(tmp_path / "f.nc")) == str(tmp_path / "f.nc")
    assert os.listdir(tmp_path) == []
    if HAVE_PROC:
        with pytest.raises(BayesziError, match="not writable"):
            store.check_writable(PROC + ".nc")


def test_cli_fit_missing_folder_is_refused_before_sampling(tmp_path, no_sampling, capsys):
    small_frame().to_csv(tmp_path / "d.csv", index=False)
    calls = no_sampling
    rc = main(["fit", "--data", str(tmp_path / "d.csv"), "--counts", "y ~ x", "--out",
               str(tmp_path / "no-such-folder" / "fit.nc")])
    assert rc == 2 and not calls
    assert "does not exist" in capsys.readouterr().err


def test_cli_run_unwritable_folder_is_refused_before_sampling(tmp_path, no_sampling, capsys):
    if not HAVE_PROC:
        pytest.skip("needs /proc")
    small_frame().to_csv(tmp_path / "d.csv", index=False)
    (tmp_path / "s.toml").write_text('[study]\ndata = "d.csv"\nresponse = "y"\n[[model]]\n'
                                     'name = "p"\nfamily = "poisson"\ncounts = "x"\n')
    calls = no_sampling
    rc = main(["run", str(tmp_path / "s.toml"), "--out", PROC])
    assert rc == 2 and not calls
    assert "cannot write the report" in capsys.readouterr().err


@pytest.mark.skipif(not HAVE_PROC, reason="needs /proc")
def test_cli_fit_unwritable_folder_is_refused_before_sampling(tmp_path, no_sampling, capsys):
    small_frame().to_csv(tmp_path / "d.csv", index=False)
    calls = no_sampling
    rc = main(["fit", "--data", str(tmp_path / "d.csv"), "--counts", "y ~ x", "--out",
               PROC + ".nc"])
    assert rc == 2 and not calls


@pytest.mark.skipif(not HAVE_PROC, reason="needs /proc")
def test_cli_predict_unwritable_output_is_a_user_error(saved, tmp_path, capsys):
    tiny_data().head(5).to_csv(tmp_path / "new.csv", index=False)
    rc = main(["predict", str(saved), str(tmp_path / "new.csv"), "--out", PROC + ".csv"])
    assert rc == 2
    assert "internal error" not in capsys.readouterr().err
