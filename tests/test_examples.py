"""Each example study under examples/ runs end to end through ``bayeszi run`` at small size.

The study file is used as shipped except for its data line, which points at a subsample of
the example's data (whole groups, so the pooled structure stays), and the sampler is cut to
2 chains x 100 draws, run one after the other (no worker processes to start). That is enough
to prove the study file, its scenarios and every report section work; the numbers of such
short runs are not checked here.
"""

from __future__ import annotations

import re
from pathlib import Path

import pandas as pd
import pytest

from bayeszi.app.cli import main
from bayeszi.app.study import load_study

ROOT = Path(__file__).parents[1]
EXAMPLES = ["camera_traps", "circuit_boards", "crayfish"]
#: records kept per example (whole groups for grouped studies)
TARGET_ROWS = 320


def _subsample(study, data: pd.DataFrame) -> pd.DataFrame:
    """Whole levels of the first grouping column (those named by scenarios first)."""
    if not study.groups:
        return data.head(TARGET_ROWS)
    g = study.groups[0]
    needed = [str(s.values[g]) for s in study.scenarios if g in s.values]
    sizes = data[g].astype(str).value_counts()
    keep = list(dict.fromkeys(needed))
    for level in sorted(sizes.index):
        if sizes[keep].sum() >= TARGET_ROWS:
            break
        if level not in keep:
            keep.append(level)
    return data[data[g].astype(str).isin(keep)].reset_index(drop=True)


def _small_copy(name: str, folder: Path) -> Path:
    source = ROOT / "examples" / name / "study.toml"
    study = load_study(str(source))
    small = _subsample(study, study.load_data())
    small.to_csv(folder / "data.csv", index=False)
    text = source.read_text(encoding="utf-8")
    text, n = re.subn(r'(?m)^data = ".*"$', 'data = "data.csv"', text)
    assert n == 1
    path = folder / "study.toml"
    path.write_text(text, encoding="utf-8")
    return path


# crayfish in the default run; the other two (about 75 s together) with the slow set, to keep
# the default run well inside CI's 20 minutes
@pytest.mark.parametrize("name", [pytest.param(n, marks=pytest.mark.slow) if n != "crayfish"
                                  else n for n in EXAMPLES])
def test_example_study_runs_small(name, tmp_path, capsys):
    study_path = _small_copy(name, tmp_path)
    out = tmp_path / "report"
    rc = main(["run", str(study_path), "--out", str(out), "--draws", "100", "--warmup-steps", "150",
               "--cores", "1", "--quiet"])
    err = capsys.readouterr().err
    assert rc == 0, err
    html = (out / "report.html").read_text(encoding="utf-8")
    ids = re.findall(r'<section data-section="([^"]+)"', html)
    study = load_study(str(ROOT / "examples" / name / "study.toml"))
    for required in ("data", "models", "diagnostics", "comparison", "coefficients",
                     "zero-checks", "rootograms", "residuals", "predictions", "reading",
                     "cautions"):
        assert required in ids, (name, required)
    assert ("groups" in ids) == bool(study.groups)
    for cand in study.candidates:
        assert (out / "tables" / f"coefficients_{cand.name}.csv").is_file()
        assert cand.name in html
    assert (out / "tables" / "contrasts.csv").is_file()


@pytest.mark.parametrize("name", EXAMPLES)
def test_example_study_checks_against_full_data(name):
    """The shipped study files are valid for their full data (no sampling)."""
    study = load_study(str(ROOT / "examples" / name / "study.toml"))
    data = study.load_data()
    study.check(data)
    assert len(study.candidates) >= 2 and study.scenarios and study.contrasts
    assert "Simulated" in study.summary or "simulated" in study.summary
