"""Core fit behaviour: tables, warnings, save/load, priors, the prior predictive.

Sources: the prior-predictive rule is our own stated plausibility rule (common practice: a
prior predictive check compares prior draws with the scale of the data); everything else
checks our own behaviour (exact round trips, messages, public names).
"""

from __future__ import annotations

import warnings

import numpy as np
import pandas as pd
import pytest
from simulate import simulate

import bayeszi as bz
from bayeszi.data import load_crayfish

DEMO = dict(counts="crayfish ~ water_temp + C(substrate) + depth + canopy", zeros="~ barrier",
            family="zinb", exposure="trap_nights")


@pytest.fixture(scope="module")
def small_fit(cached_fit):
    df, _ = simulate("zip", n=400, seed=5)
    df["kind"] = np.where(df["x2"] == 1, "b", "a")
    return cached_fit("core-small-zip", lambda: bz.fit(
        df, counts="y ~ x1 + C(kind)", zeros="~ w", family="zip", exposure="exposure",
        draws=200, warmup_steps=300, chains=2, seed=7, prior_draws=50))


def test_table_layout(small_fit):
    t = small_fit.coefficients(interval=0.8)
    assert list(t.index.names) == ["part", "term"]
    assert ("counts", "kind: b (vs a)") in t.index and ("zeros", "w") in t.index
    assert {"mean", "sd", "10%", "90%", "exp scale", "R-hat", "bulk ESS", "flag"} <= set(t)
    assert t.loc[("counts", "x1"), "exp scale"] == "rate ratio"
    assert t.loc[("zeros", "w"), "exp scale"] == "odds ratio of P(extra zero)"
    row = t.loc[("counts", "x1")]
    d = small_fit.idata.posterior["counts_coef"].sel(counts_term="x1").values.ravel()
    assert row["mean"] == pytest.approx(d.mean())
    assert row["exp(mean)"] == pytest.approx(np.exp(d).mean())
    text = str(small_fit)
    assert "logit P(extra zero) ~ w" in text and "log(exposure)" in text


def test_user_scale_coefficients_reproduce_the_linear_predictor(small_fit):
    d = small_fit.design
    post = small_fit.idata.posterior
    b_std = post["counts_std_coef"].values[0, :5]
    beta = post["counts_coef"].values[0, :5]
    np.testing.assert_allclose(b_std @ d.counts.X_std.T, beta @ d.counts.X.T, atol=1e-10)


def test_idata_groups(small_fit):
    groups = set(small_fit.idata.groups())
    assert {"posterior", "log_likelihood", "observed_data", "sample_stats", "prior",
            "prior_predictive"} <= groups
    assert small_fit.idata.prior_predictive["y"].shape[-1] == small_fit.design.n


def test_save_load_exact(small_fit, tmp_path):
    path = tmp_path / "fit.nc"
    small_fit.save(str(path))
    assert [p.name for p in tmp_path.iterdir()] == ["fit.nc"]  # no temporary left behind
    back = bz.load(str(path))
    assert back.spec == small_fit.spec
    for grp in small_fit.idata.groups():
        a, b = small_fit.idata[grp], back.idata[grp]
        for v in a.data_vars:
            np.testing.assert_array_equal(a[v].values, b[v].values)
    np.testing.assert_array_equal(back.design.counts.X, small_fit.design.counts.X)
    np.testing.assert_array_equal(back.design.counts.center, small_fit.design.counts.center)
    pd.testing.assert_frame_equal(back.coefficients(), small_fit.coefficients())


def test_load_damaged_file(small_fit, tmp_path):
    path = tmp_path / "fit.nc"
    small_fit.save(str(path))
    raw = path.read_bytes()
    path.write_bytes(raw[: len(raw) // 3])
    with pytest.raises(bz.BayesziError, match="not a readable bayeszi fit"):
        bz.load(str(path))
    with pytest.raises(bz.BayesziError, match="no saved fit"):
        bz.load(str(tmp_path / "missing.nc"))


def test_save_to_missing_folder(small_fit, tmp_path):
    with pytest.raises(bz.BayesziError, match="does not exist"):
        small_fit.save(str(tmp_path / "nope" / "fit.nc"))


def test_sampler_trouble_is_warned():
    df, _ = simulate("poisson", n=200, seed=9)
    with pytest.warns(bz.BayesziWarning, match=r"ESS below 400.*Run more draws"):
        m = bz.fit(df, counts="y ~ x1", family="poisson", draws=30, warmup_steps=30, chains=2,
                   seed=1)
    assert m.sampler_problems()
    assert "Sampler warnings" in str(m)
    assert (m.coefficients()["flag"] != "").any()


def test_prior_override_is_used():
    df, _ = simulate("poisson", n=300, seed=2)
    pp = bz.prior_predictive(df, counts="y ~ x1", family="poisson",
                             priors={"counts": {"x1": bz.priors.normal(mean=5.0, sd=0.01)}},
                             draws=2000, seed=1)
    from bayeszi.model.design import build_design

    d = build_design(df, bz.make_spec("y ~ x1", family="poisson"))
    j = d.counts.terms.index("x1")
    # The user's prior is per unit of x1; inside it is carried to the 2-sd scale exactly, so
    # prior draws divided by that scale have mean 5 and sd 0.01 (Monte Carlo error ~ 2e-4).
    per_unit = pp.prior["counts_std_coef"].values[..., j].ravel() / d.counts.scale[j]
    assert per_unit.mean() == pytest.approx(5.0, abs=1e-3)
    assert per_unit.std() == pytest.approx(0.01, rel=0.05)


def test_prior_predictive_on_demo_is_plausible():
    """Stated rule: with the default priors, the 99th percentile of prior predictive counts
    on the demo design lies below 20x the largest observed count, and the observed zero
    share lies inside the central 90% of the prior predictive zero shares."""
    df = load_crayfish()
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        pp = bz.prior_predictive(df, groups="reach", draws=400, seed=3, **DEMO)
    y = pp.prior_predictive["y"].values.reshape(400, -1)
    assert np.quantile(y, 0.99) < 20 * df["crayfish"].max()
    shares = (y == 0).mean(axis=1)
    lo, hi = np.quantile(shares, [0.05, 0.95])
    assert lo < (df["crayfish"] == 0).mean() < hi


def test_offset_equals_exposure():
    df, _ = simulate("poisson", n=300, seed=4)
    df["log_e"] = np.log(df["exposure"])
    a = bz.fit(df, counts="y ~ x1", family="poisson", exposure="exposure", draws=100,
               warmup_steps=200, chains=1, seed=2)
    b = bz.fit(df, counts="y ~ x1", family="poisson", offset="log_e", draws=100,
               warmup_steps=200, chains=1, seed=2)
    np.testing.assert_allclose(a.design.log_offset, b.design.log_offset)
    np.testing.assert_allclose(a.idata.posterior["counts_coef"].values,
                               b.idata.posterior["counts_coef"].values)


def test_spec_json_round_trip():
    import json

    s = bz.make_spec("y ~ x", zeros="~ w", family="hurdle-negbin", groups=["a", "b"],
                     priors={"counts": {"x": bz.priors.normal(mean=0, sd=1)}}, seed=3)
    assert bz.ModelSpec.from_dict(json.loads(json.dumps(s.to_dict()))) == s


#: Module paths of the flat layout before the layers (0.1.0), kept as aliases of the modules
#: at their new place (bayeszi/__init__.py); a sample of them.
OLD_PATHS = {"bayeszi.comparison": "bayeszi.answers.comparison",
             "bayeszi.candidates": "bayeszi.fitting.candidates",
             "bayeszi.api": "bayeszi.fitting.api", "bayeszi.checks": "bayeszi.answers.checks",
             "bayeszi.predict": "bayeszi.answers.predict", "bayeszi.cli": "bayeszi.app.cli"}


def test_public_names_survive_every_submodule_import():
    """Importing a submodule binds its name on the parent package, so a module named like a
    public function (a ``bayeszi/compare.py``, say) would replace ``bayeszi.compare`` once it
    is imported. After importing every module of the package and the old 0.1.0 paths, each
    public name is the object it was before, none but ``priors`` is a module, ``rank_models``,
    ``fit_candidates`` and ``fit`` are the functions of their home modules, and each old path is the very module
    at its new place."""
    import importlib
    import types
    from pathlib import Path

    before = {name: getattr(bz, name) for name in bz.__all__}
    root = Path(bz.__file__).parent
    for path in sorted(root.rglob("*.py")):
        parts = path.relative_to(root.parent).with_suffix("").parts
        importlib.import_module(".".join(parts[:-1] if parts[-1] == "__init__" else parts))
    for old, new in OLD_PATHS.items():
        assert importlib.import_module(old) is importlib.import_module(new), old
    for name in bz.__all__:
        assert getattr(bz, name) is before[name], name
        if name != "priors":  # the one public module: bz.priors.normal(mean=0, sd=1)
            assert not isinstance(before[name], types.ModuleType), name
    home = importlib.import_module
    assert bz.priors is home("bayeszi.model.distributions")
    assert bz.rank_models is home("bayeszi.answers.comparison").rank_models
    assert bz.fit_candidates is home("bayeszi.fitting.candidates").fit_candidates
    assert bz.fit is home("bayeszi.fitting.api").fit
