"""The full validation runs (docs/validation.md), as tests: SBC of all six families with and
without groups, coverage of the reported 90% intervals, and randhie against statsmodels.

Run with ``pytest -m slow tests/test_validation_slow.py`` (about 45 minutes on 2 idle
cores at the default sizes). The replicate counts can be set through the environment
(``BAYESZI_SBC_REPS``, ``BAYESZI_COVERAGE_REPS``); results go to a temporary folder, not to
validation/results (which holds the documented run).

Criteria (stated in validation/sbc.py, coverage.py and randhie.py, with their reasons):
- SBC (Talts et al. 2018, arXiv:1804.06788): per family, the Bonferroni-adjusted smallest
  chi-square p-value of rank uniformity over its quantities is at least 0.01;
- coverage: per family, the Bonferroni-adjusted smallest exact binomial p-value of the
  covered count against Binomial(R, 0.9) is at least 0.01;
- randhie (statsmodels as the reference): posterior means within 0.5 posterior sd of the
  MLE, or, where the likelihood is not near-normal in a parameter, of the mean of its
  profile likelihood x prior; LOO and AIC order every pair of models the same way unless
  LOO calls it a tie.
"""

from __future__ import annotations

import os
import sys

import pytest

sys.path.insert(0, os.path.dirname(os.path.dirname(os.path.abspath(__file__))))

from validation import coverage, randhie, sbc  # noqa: E402

SBC_REPS = int(os.environ.get("BAYESZI_SBC_REPS", "20"))
COVERAGE_REPS = int(os.environ.get("BAYESZI_COVERAGE_REPS", "20"))


@pytest.mark.slow
def test_sbc_all_families_calibrated(tmp_path):
    res = sbc.run(reps=SBC_REPS, out=str(tmp_path), quiet=True)
    fam = res["families"]
    assert len(fam) == 6 and (fam["failed fits"] == 0).all(), fam
    assert (fam["verdict"] == "pass").all(), fam.to_string()


@pytest.mark.slow
def test_reported_intervals_cover_90_percent(tmp_path):
    res = coverage.run(reps=COVERAGE_REPS, out=str(tmp_path), quiet=True)
    fam = res["families"]
    assert (fam["failed fits"] == 0).all(), fam
    assert (fam["verdict"] == "pass").all(), fam.to_string()


@pytest.mark.slow
def test_randhie_agrees_with_statsmodels(tmp_path):
    res = randhie.run(out=str(tmp_path), quiet=True)
    est = res["estimates"]
    assert est["MLE converged"].all()
    bad = est[~est["within tolerance"]]
    assert bad.empty, bad[["family", "part", "term", "posterior mean", "MLE",
                           "gap (posterior sd)"]].to_string()
    assert res["pairs"]["consistent"].all(), res["pairs"].to_string()
    # the best model by LOO is the best by AIC (randhie: hurdle-negbin, see docs/validation.md)
    loo = res["loo"]
    assert loo.index[0] == loo["AIC"].idxmin(), loo.to_string()
