"""The ``bayeszi`` command line: help, exit codes, a full round trip on a small study, the
saved-fit commands, and bad study files failing cleanly before any sampling.

The small study (about 300 simulated crayfish records on 6 reaches, two models, 2 chains x
150 draws) is run once per session through ``bayeszi run``: the ``small_run`` fixture of
tests/conftest.py, shared with tests/test_report.py.
"""

from __future__ import annotations

import hashlib
import os
import re
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

import bayeszi
from bayeszi.app.cli import main
from bayeszi.data import simulate_crayfish

# Short test fits raise sampler warnings on every API call; the report shows them already.
pytestmark = pytest.mark.filterwarnings("ignore::bayeszi.model.validate.BayesziWarning")


def one_line_error(err: str) -> str:
    """The single error line, after checking there is exactly one and no traceback."""
    lines = [ln for ln in err.strip().splitlines() if ln.strip()]
    assert "Traceback" not in err
    errors = [ln for ln in lines if "error" in ln]
    assert len(errors) == 1, err
    return errors[0]


# ---------------------------------------------------------------------- help and exit codes
@pytest.mark.parametrize("command", [[], ["run"], ["demo"], ["fit"], ["predict"], ["report"]])
def test_help_everywhere(command, capsys):
    assert main([*command, "--help"]) == 0
    out = capsys.readouterr().out
    assert out.startswith("usage: bayeszi")
    if command:
        assert "--out" in out or "--what" in out


def test_version(capsys):
    assert main(["--version"]) == 0
    assert capsys.readouterr().out.strip() == f"bayeszi {bayeszi.__version__}"


def test_the_command_exits_with_mains_code_and_flushes_its_output(tmp_path):
    """The installed command (``run``) skips the interpreter's teardown: its exit code and
    everything it printed must still arrive, and exit handlers must still run."""
    import subprocess
    import sys

    marker = tmp_path / "exit-handler-ran"
    code = ("import atexit, sys; from bayeszi.app import cli; "
            f"atexit.register(lambda: open({str(marker)!r}, 'w').close()); "
            "sys.argv = ['bayeszi', '--version']; cli.run()")
    done = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True,
                          timeout=120)
    assert (done.returncode, done.stdout.strip()) == (0, f"bayeszi {bayeszi.__version__}")
    assert marker.exists()
    done = subprocess.run([sys.executable, "-m", "bayeszi.app.cli", "run"],
                          capture_output=True, text=True, timeout=120)
    assert done.returncode == 2 and "--out" in one_line_error(done.stderr)


def test_usage_error_is_one_line_exit_2(capsys):
    assert main(["run"]) == 2
    line = one_line_error(capsys.readouterr().err)
    assert "--out" in line and "STUDY.toml" in line
    assert main(["frobnicate"]) == 2
    assert "invalid choice" in one_line_error(capsys.readouterr().err)


def test_internal_failure_is_exit_1_without_traceback(monkeypatch, tmp_path, capsys):
    import bayeszi.app.study

    def broken(path):
        raise RuntimeError("simulated bug")

    monkeypatch.setattr(bayeszi.app.study, "load_study", broken)
    assert main(["run", str(tmp_path / "x.toml"), "--out", str(tmp_path / "o")]) == 1
    line = one_line_error(capsys.readouterr().err)
    assert "internal error" in line and "simulated bug" in line
    assert not (tmp_path / "o").exists()


# ---------------------------------------------------------------------- round trip
def test_run_round_trip(small_run):
    assert small_run["rc"] == 0
    out = small_run["out"]
    assert small_run["stdout"].strip() == str(out / "report.html")
    assert (out / "report.html").is_file()
    assert (out / ".bayeszi-report").is_file()
    tables = {p.name for p in (out / "tables").iterdir()}
    assert {"coefficients_zinb-reach.csv", "coefficients_poisson.csv", "loo_comparison.csv",
            "scenario_predictions.csv", "contrasts.csv", "zero_check.csv"} <= tables
    figs = sorted(p.name for p in (out / "figures").iterdir())
    pngs = {f[:-4] for f in figs if f.endswith(".png")}
    svgs = {f[:-4] for f in figs if f.endswith(".svg")}
    assert pngs == svgs and len(pngs) >= 8
    for name in pngs:
        assert (out / "figures" / f"{name}.svg").read_text(encoding="utf-8").lstrip() \
            .startswith("<?xml")
    assert sorted(p.name for p in (out / "fits").iterdir()) == ["poisson.nc", "zinb-reach.nc"]
    models = pd.read_csv(out / "tables" / "models.csv")
    # the small study fixes draws = 150: each model says so (draws until enough is off)
    assert list(models["why sampling stopped"]) == ["fixed number of draws asked for"] * 2
    assert list(models["draws per chain"]) == [150, 150]
    parent = out.parent
    assert not [p for p in os.listdir(parent) if ".partial-" in p or ".old-" in p]


def test_predict_from_saved_fit_equals_api(small_run, tmp_path, capsys):
    fit_path = small_run["out"] / "fits" / "zinb-reach.nc"
    new = pd.DataFrame({"water_temp": [10.0, 18.0], "substrate": ["cobble", "silt"],
                        "depth": [0.5, 0.9], "barrier": [0, 1], "trap_nights": [2, 1],
                        "reach": ["R01", "R02"]})
    new_csv = tmp_path / "new.csv"
    new.to_csv(new_csv, index=False)
    pred_csv = tmp_path / "pred.csv"
    rc = main(["predict", str(fit_path), str(new_csv), "--what", "mean", "p_zero",
               "--groups", "known", "--seed", "3", "--out", str(pred_csv), "--quiet"])
    assert rc == 0
    got = pd.read_csv(pred_csv)
    assert len(got) == len(new)
    fitted = bayeszi.load(str(fit_path))
    # the CLI's numbers against the API's on the same saved draws (same seed)
    api = fitted.predict(new, what=["mean", "p_zero"], groups="known", seed=3)
    np.testing.assert_allclose(got["mean"], api["mean"].iloc[:2], rtol=1e-12)
    np.testing.assert_allclose(got["p_zero"], api["mean"].iloc[2:], rtol=1e-12)
    np.testing.assert_allclose(got["mean 95%"], api["95%"].iloc[:2], rtol=1e-12)
    assert list(got["water_temp"]) == [10.0, 18.0]


def test_predict_to_stdout_and_unknown_level(small_run, tmp_path, capsys):
    fit_path = small_run["out"] / "fits" / "poisson.nc"
    new_csv = tmp_path / "new.csv"
    pd.DataFrame({"water_temp": [12.0], "depth": [0.4], "trap_nights": [3]}).to_csv(
        new_csv, index=False)
    assert main(["predict", str(fit_path), str(new_csv), "--quiet"]) == 0
    lines = capsys.readouterr().out.strip().splitlines()
    assert lines[0].startswith("water_temp,depth,trap_nights,mean,mean sd")
    assert len(lines) == 2
    bad_csv = tmp_path / "bad.csv"
    pd.DataFrame({"water_temp": [12.0], "substrate": ["sand"], "depth": [0.4], "barrier": [0],
                  "trap_nights": [3], "reach": ["R01"]}).to_csv(bad_csv, index=False)
    zinb = small_run["out"] / "fits" / "zinb-reach.nc"
    assert main(["predict", str(zinb), str(bad_csv), "--quiet"]) == 2
    line = one_line_error(capsys.readouterr().err)
    assert "'substrate'" in line and "sand" in line


def test_report_from_saved_fits(small_run, tmp_path, capsys):
    fits = [small_run["out"] / "fits" / n for n in ("zinb-reach.nc", "poisson.nc")]
    out = tmp_path / "again"
    assert main(["report", *map(str, fits), "--out", str(out), "--quiet"]) == 0
    html = (out / "report.html").read_text(encoding="utf-8")
    ids = re.findall(r'<section data-section="([^"]+)"', html)
    assert "comparison" in ids and "coefficients" in ids
    assert "predictions" not in ids  # saved fits carry no scenarios
    for f in fits:
        digest = hashlib.sha256(f.read_bytes()).hexdigest()
        assert f"sha256 {digest}" in html
    data_digest = hashlib.sha256(small_run["data"].read_bytes()).hexdigest()
    assert f"sha256 {data_digest}" in html  # the data hash travels inside the saved fit


def test_report_refuses_residuals_against_a_column_the_fits_lack(small_run, tmp_path, capsys):
    fits = [small_run["out"] / "fits" / n for n in ("zinb-reach.nc", "poisson.nc")]
    out = tmp_path / "again"
    rc = main(["report", *map(str, fits), "--out", str(out), "--residuals-against", "canopy",
               "--quiet"])
    assert rc == 2
    line = one_line_error(capsys.readouterr().err)
    assert re.search(r"residuals_against='canopy' is not a column of the fitted data.*"
                     r"columns available: \[.*'depth'", line), line
    assert not out.exists()


def test_fit_command_writes_a_loadable_fit(tmp_path, capsys):
    data, _ = simulate_crayfish(seed=5, n_reaches=4, n_rivers=1)
    csv = tmp_path / "d.csv"
    data.to_csv(csv, index=False)
    out = tmp_path / "m.nc"
    rc = main(["fit", "--data", str(csv), "--counts", "crayfish ~ depth", "--family", "poisson",
               "--exposure", "trap_nights", "--draws", "100", "--warmup-steps", "150",
               "--seed", "2", "--out", str(out), "--quiet"])
    assert rc == 0
    printed = capsys.readouterr().out
    fitted = bayeszi.load(str(out))
    assert fitted.spec.family == "poisson" and fitted.design.n == len(data)
    # the printed summary is the fit's own text
    assert "bayeszi fit: family poisson" in printed
    assert fitted.idata.posterior.sizes["draw"] == 100


def test_fit_command_bad_column_fails_before_sampling(tmp_path, capsys, no_sampling):
    data, _ = simulate_crayfish(seed=5, n_reaches=4, n_rivers=1)
    csv = tmp_path / "d.csv"
    data.to_csv(csv, index=False)
    rc = main(["fit", "--data", str(csv), "--counts", "crayfish ~ deepness",
               "--out", str(tmp_path / "m.nc")])
    assert rc == 2
    assert "'deepness'" in one_line_error(capsys.readouterr().err)
    assert not (tmp_path / "m.nc").exists() and not no_sampling


# ---------------------------------------------------------------------- bad study files
BAD_STUDIES = {
    "unknown top-level key": ({"[[scenario]]\nname = \"open reach\"":
                               "[[scenarios]]\nname = \"open reach\""},
                              r"unknown key 'scenarios' in the study file \(top level\) "
                              r"\(did you mean 'scenario'\?\)"),
    "unknown sampler key": ({"[sampler]": "[sampler]\nwarmup = 3\n"},
                            r"unknown key 'warmup' in \[sampler\].*known keys there: draws"),
    "unknown study key": ({'response = "crayfish"': 'response = "crayfish"\nreponse = "x"'},
                          r"unknown key 'reponse' in \[study\] \(did you mean 'response'\?\)"),
    "unknown model key": ({'family = "poisson"': 'family = "poisson"\nformula = "y ~ x"'},
                          r"unknown key 'formula' in \[\[model\]\] number 2 \('poisson'\)"),
    "missing data file": ({'data = "crayfish.csv"': 'data = "nowhere.csv"'},
                          r"data file .*nowhere\.csv.* does not exist"),
    "bad formula": ({'counts = "water_temp + depth"': 'counts = "water_temp + * depth"'},
                    r"model 'poisson'.*counts formula"),
    "unknown family": ({'family = "poisson"': 'family = "poison"'},
                       r"\[\[model\]\] number 2.*poison"),
    "response not in data": ({'response = "crayfish"': 'response = "lobster"'},
                             r"response 'lobster' \(\[study\] response\) is not a column"),
    "predictor not in data": ({'counts = "water_temp + depth"': 'counts = "water_temp + dept"'},
                              r"model 'poisson'.*column 'dept'"),
    "unknown scenario level": ({'substrate = "cobble"': 'substrate = "sand"'},
                               r"scenario 'open reach'.*'substrate'.*sand"),
    "not TOML": ({"[sampler]": "[sampler\n"}, r"is not valid TOML"),
    "scenario column no model uses": ({"depth = 0.6": "deep = 0.6"},
                                      r"scenario 'open reach' sets column 'deep' \(did you "
                                      r"mean 'depth'\?\), which no model uses"),
    "residuals against a missing column": ({'residuals_against = "depth"':
                                            'residuals_against = "depht"'},
                                           r"'residuals_against' in \[study\] names 'depht' "
                                           r"\(did you mean 'depth'\?\), which is not a column "
                                           r"of crayfish.csv; columns available: \["),
    "contrast of a missing scenario": ({'scenario = "open reach"': 'scenario = "closed"'},
                                       r"names 'closed', which is not a \[\[scenario\]\]"),
}


@pytest.mark.parametrize("case", sorted(BAD_STUDIES))
def test_bad_study_file_one_message_exit_2_nothing_written(case, tmp_path, capsys,
                                                           no_sampling, write_small_study):
    replace, pattern = BAD_STUDIES[case]
    study = write_small_study(tmp_path, **replace)
    out = tmp_path / "report"
    rc = main(["run", str(study), "--out", str(out)])
    assert rc == 2
    line = one_line_error(capsys.readouterr().err)
    assert line.startswith("bayeszi: error: ")
    assert re.search(pattern, line), line
    assert not out.exists() and not no_sampling
    assert sorted(os.listdir(tmp_path)) == ["crayfish.csv", "study.toml"]


def test_unwritable_output_refused_before_sampling(tmp_path, capsys, no_sampling,
                                                  write_small_study):
    study = write_small_study(tmp_path)
    blocker = tmp_path / "a-file"
    blocker.write_text("not a folder")
    assert main(["run", str(study), "--out", str(blocker / "report")]) == 2
    assert "does not exist" in one_line_error(capsys.readouterr().err)
    if os.path.isdir("/proc/self"):  # a folder nobody, not even root, can create files in
        assert main(["run", str(study), "--out", "/proc/bayeszi-test-report"]) == 2
        assert "cannot write the report" in one_line_error(capsys.readouterr().err)
    if os.geteuid() != 0:  # root writes anywhere; the permission case needs a normal user
        ro = tmp_path / "ro"
        ro.mkdir()
        ro.chmod(0o500)
        try:
            assert main(["run", str(study), "--out", str(ro / "report")]) == 2
            assert "not writable" in one_line_error(capsys.readouterr().err)
        finally:
            ro.chmod(0o700)
    # a folder holding someone else's files is never replaced
    other = tmp_path / "theirs"
    other.mkdir()
    (other / "notes.txt").write_text("keep me")
    assert main(["run", str(study), "--out", str(other)]) == 2
    assert "not a bayeszi report" in one_line_error(capsys.readouterr().err)
    assert (other / "notes.txt").read_text() == "keep me"
    assert sorted(os.listdir(tmp_path)) == ["a-file", "crayfish.csv", "study.toml", "theirs"]
    assert not no_sampling


def test_demo_study_is_valid_and_small():
    """The shipped demo study reads and checks against its data (no sampling here)."""
    from bayeszi.app.study import demo_study_path, load_study

    study = load_study(demo_study_path())
    study.check(study.load_data())
    families = [c.spec.family for c in study.candidates]
    assert families[0] == "zinb" and study.candidates[0].spec.groups == ("reach",)
    # no fixed draws: each model draws until enough, in blocks of 200 per chain (docs/cli.md)
    assert all(c.spec.sampler.until_enough and c.spec.sampler.block_draws == 200
               for c in study.candidates)


def test_study_file_documents_every_key():
    """docs/study-file.md names every key the reader accepts."""
    from bayeszi.app import study as S

    doc = (Path(__file__).parents[1] / "docs" / "study-file.md").read_text(encoding="utf-8")
    for key in {*S.STUDY_KEYS, *S.SAMPLER_KEYS, *S.MODEL_KEYS, *S.SCENARIO_KEYS,
                *S.CONTRAST_KEYS}:
        assert f"`{key}`" in doc, key


@pytest.mark.slow
def test_demo_runs(tmp_path, capsys):
    """The README's main job, end to end (a few minutes on two cores)."""
    import time

    t0 = time.perf_counter()
    assert main(["demo", "--out", str(tmp_path / "demo"), "--quiet"]) == 0
    html = (tmp_path / "demo" / "report.html").read_text(encoding="utf-8")
    assert "zinb-reach" in html
    print(f"demo took {time.perf_counter() - t0:.0f} s")
