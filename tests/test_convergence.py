"""R-hat and ESS for many parameters at once (bayeszi/model/convergence.py).

The reference is ArviZ itself (``az.rhat(method="rank")``, ``az.ess(method="bulk")``,
``az.ess(method="tail")`` and ``az.summary(kind="diagnostics")``), which implements
Vehtari, Gelman, Simpson, Carpenter and Bürkner (2021), Bayesian Analysis 16(2), 667-718.
Ours must give the same numbers by the same algorithm: agreement to 1e-9 relative is a
property of the code (floating-point order only), not a statistical tolerance.
"""

from __future__ import annotations

import arviz as az
import numpy as np
import pandas as pd
import pytest

from bayeszi.model.convergence import diagnostics_table, rhat_ess


def _arviz(draws: np.ndarray) -> np.ndarray:
    rows = []
    for x in draws:
        rhat = az.rhat(x, method="rank") if x.shape[0] > 1 else np.nan
        rows.append([rhat, az.ess(x, method="bulk"), az.ess(x, method="tail")])
    return np.asarray(rows, dtype=float)


def _ar1_draws(rng: np.random.Generator, params: int, chains: int, n: int) -> np.ndarray:
    """Chains from AR(1) processes with coefficients from -0.5 to 0.99 (slow mixing), some
    with chain offsets (R-hat well above 1)."""
    out = np.empty((params, chains, n))
    for i in range(params):
        phi = rng.uniform(-0.5, 0.99)
        e = rng.normal(size=(chains, n))
        for t in range(1, n):
            e[:, t] += phi * e[:, t - 1]
        out[i] = e + (i % 3 == 0) * rng.normal(size=(chains, 1)) * 2
    return out


def test_same_numbers_as_arviz_on_hard_cases():
    rng = np.random.default_rng(3)
    x = _ar1_draws(rng, 30, 2, 301)  # odd draws: the split leaves the middle one out
    x[5] = np.round(x[5])            # ties in the ranks
    x[6] = 3.0                       # constant draws
    x[7, 0, 10] = np.nan             # a NaN draw
    x[8] = (x[8] > 0.5).astype(float)  # two values only
    ours, ref = rhat_ess(x), _arviz(x)
    np.testing.assert_allclose(ours, ref, rtol=1e-9, equal_nan=True)
    assert np.isnan(ours[7]).all() and ours[6, 1] == 2 * x.shape[1] * (x.shape[2] // 2)


@pytest.mark.parametrize("chains, n", [(1, 50), (4, 5), (3, 4), (2, 7), (4, 600)])
def test_same_numbers_as_arviz_for_any_number_of_chains_and_draws(chains, n):
    rng = np.random.default_rng(chains * 100 + n)
    x = rng.normal(size=(5, chains, n))
    x[1] = np.cumsum(x[1], axis=-1)  # a random walk: R-hat high, ESS tiny
    np.testing.assert_allclose(rhat_ess(x), _arviz(x), rtol=1e-9, equal_nan=True)


def test_table_labels_and_values_equal_arviz_summary():
    rng = np.random.default_rng(5)
    post = az.from_dict(
        posterior={"a": rng.normal(size=(2, 200)),
                   "b": _ar1_draws(rng, 3, 2, 200).transpose(1, 2, 0),
                   "c": rng.normal(size=(2, 200, 2, 3))},
        coords={"term": ["x", "y", "z"], "row": ["r1", "r2"], "col": [1, 2, 3]},
        dims={"b": ["term"], "c": ["row", "col"]})
    names = ["a", "b", "c"]
    ref = az.summary(post, var_names=names, kind="diagnostics", round_to="none")
    ours = diagnostics_table(post.posterior, names)
    assert list(ours.index) == list(ref.index)
    pd.testing.assert_frame_equal(ours, ref[["r_hat", "ess_bulk", "ess_tail"]], rtol=1e-9)


def test_many_parameters_in_chunks_equal_one_by_one():
    """More parameters than one chunk: the chunking changes nothing."""
    from bayeszi.model import convergence

    rng = np.random.default_rng(8)
    x = rng.normal(size=(convergence.CHUNK + 7, 2, 40))
    whole = rhat_ess(x)
    np.testing.assert_allclose(whole[-7:], rhat_ess(x[-7:]), rtol=1e-12)
    np.testing.assert_allclose(whole[:3], _arviz(x[:3]), rtol=1e-9)


def test_passes_says_what_diagnose_says():
    """The short-cut check (small variables first) agrees with the full diagnosis, also
    when only one of thousands of group effects fails."""
    from bayeszi.model.diagnostics import diagnose, passes

    rng = np.random.default_rng(2)
    effects = rng.normal(size=(2, 500, 300))
    good = az.from_dict(posterior={"counts_coef": rng.normal(size=(2, 500, 3)),
                                   "counts_effect_site": effects},
                        sample_stats={"diverging": np.zeros((2, 500), bool)})
    stuck = effects.copy()
    stuck[1, :, 17] += 3.0  # one effect whose chains disagree
    bad = az.from_dict(posterior={"counts_coef": rng.normal(size=(2, 500, 3)),
                                  "counts_effect_site": stuck},
                       sample_stats={"diverging": np.zeros((2, 500), bool)})
    for idata, expected in ((good, True), (bad, False)):
        diag = diagnose(idata)
        assert passes(idata) is (not diag.bad_rhat and not diag.bad_ess) is expected
