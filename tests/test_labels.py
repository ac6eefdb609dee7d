"""Term labels people read, and priors written as named distributions.

- A text column is a category with or without ``C()``: the same design matrix, the same
  readable labels (``s: b (vs a)``, the reference level named), the same reference level; a
  pandas Categorical's first category is its reference either way.
- Coefficient tables show the labels; a prior keyed by a label (or by the formula's own term
  name) changes the built model's prior, checked on the PyMC model without sampling.
- Priors are written as ``bayeszi.priors`` functions or as mappings; the 0.1 forms
  (``Prior("normal", 0, 1)``, ``["normal", 0, 1]``) are refused with the form to write
  instead, and a fit saved with the 0.1 list form still loads, showing the labels.
"""

from __future__ import annotations

import warnings

import numpy as np
import pandas as pd
import pytest
from simulate import fitted_from_user_draws, tiny_data

import bayeszi as bz
from bayeszi.base.spec import ModelSpec
from bayeszi.model.build import build_model
from bayeszi.model.design import build_design
from bayeszi.model.priors import resolve


def _frame(n: int = 90, seed: int = 3) -> pd.DataFrame:
    rng = np.random.default_rng(seed)
    return pd.DataFrame({"y": rng.poisson(2.0, n), "depth": rng.normal(size=n),
                         "substrate": rng.choice(["silt", "cobble", "gravel"], n),
                         "w": rng.normal(size=n)})


@pytest.mark.parametrize("rhs", ["depth + {s}", "depth * {s}"])
def test_text_column_without_c_is_the_same_category(rhs):
    df = _frame()
    plain = build_design(df, ModelSpec(counts="y ~ " + rhs.format(s="substrate"),
                                       family="poisson"))
    wrapped = build_design(df, ModelSpec(counts="y ~ " + rhs.format(s="C(substrate)"),
                                         family="poisson"))
    np.testing.assert_array_equal(plain.counts.X, wrapped.counts.X)
    assert plain.counts.labels == wrapped.counts.labels
    # cobble comes first in sorted order, so it is the reference either way
    assert plain.counts.labels[:4] == ["Intercept", "depth", "substrate: gravel (vs cobble)",
                                       "substrate: silt (vs cobble)"]
    if "*" in rhs:
        assert plain.counts.labels[4:] == ["depth × substrate: gravel (vs cobble)",
                                           "depth × substrate: silt (vs cobble)"]
    assert not any("[T." in t or "C(" in t for t in plain.counts.labels)


def test_categorical_order_sets_the_reference_with_or_without_c():
    df = _frame()
    df["substrate"] = pd.Categorical(df["substrate"], categories=["silt", "cobble", "gravel"])
    for rhs in ("substrate", "C(substrate)"):
        d = build_design(df, ModelSpec(counts="y ~ " + rhs, family="poisson"))
        assert d.counts.labels == ["Intercept", "substrate: cobble (vs silt)",
                                   "substrate: gravel (vs silt)"], rhs
        assert d.counts.X[:, 1].tolist() == (df["substrate"] == "cobble").astype(float).tolist()


def test_coefficients_table_shows_the_labels():
    df = _frame(60)
    spec = ModelSpec(counts="y ~ depth + substrate", family="poisson")
    b = np.random.default_rng(0).normal(size=(40, 4))
    m = fitted_from_user_draws(df, spec, b)
    terms = list(m.coefficients().loc["counts"].index)
    assert terms == ["Intercept", "depth", "substrate: gravel (vs cobble)",
                     "substrate: silt (vs cobble)"]
    row = m.coefficients().loc[("counts", "substrate: silt (vs cobble)")]
    assert row["mean"] == pytest.approx(b[:, 3].mean(), rel=1e-12)


def _std_prior(model, part: str, j: int) -> tuple[float, float]:
    """(mu, sigma) of the normal prior of coefficient ``j`` of ``part`` in a built model."""
    rv = model[f"{part}_std_coef"]
    mu, sigma = (np.asarray(p.eval()) for p in rv.owner.inputs[-2:])
    return float(mu[j]), float(sigma[j])


@pytest.mark.parametrize("key", ["substrate: gravel (vs cobble)", "substrate[T.gravel]"])
def test_prior_keyed_by_label_or_term_name_reaches_the_model(key):
    df = _frame()
    design = build_design(df, ModelSpec(counts="y ~ depth + substrate", family="poisson"))
    j = design.counts.terms.index("substrate[T.gravel]")
    before = _std_prior(build_model(design, resolve(design, None)).model, "counts", j)
    for prior in (bz.priors.normal(mean=0.7, sd=0.2),
                  {"distribution": "normal", "mean": 0.7, "sd": 0.2}):
        ps = resolve(design, {"counts": {key: prior}})
        after = _std_prior(build_model(design, ps).model, "counts", j)
        # a 0/1 indicator keeps scale 1 inside, so the prior arrives unchanged
        assert design.counts.scale[j] == 1.0
        assert after == pytest.approx((0.7, 0.2)) and before == pytest.approx((0.0, 1.0))
        row = [r for r in ps.table() if r["term"] == "substrate: gravel (vs cobble)"]
        assert row == [{"part": "counts", "term": "substrate: gravel (vs cobble)",
                        "prior": "Normal, mean 0.7, sd 0.2"}]


def test_prior_on_a_scaled_input_is_carried_inside():
    """A slope prior is per unit of the input; inside, the input is divided by 2 sd, so the
    prior's mean and sd are multiplied by that scale (bayeszi/model/priors.py)."""
    df = _frame()
    design = build_design(df, ModelSpec(counts="y ~ depth + substrate", family="poisson"))
    ps = resolve(design, {"counts": {"depth": bz.priors.laplace(centre=0.5, scale=0.1)}})
    s = design.counts.scale[1]
    assert s == pytest.approx(2 * df["depth"].std(ddof=0), rel=1e-12)
    assert ps.counts["depth"] == bz.priors.laplace(centre=0.5 * s, scale=0.1 * s)
    rv = build_model(design, ps).model["counts_std_coef_1"]  # mixed kinds: one per term
    mu, b = (float(np.asarray(p.eval())) for p in rv.owner.inputs[-2:])
    assert (mu, b) == pytest.approx((0.5 * s, 0.1 * s), rel=1e-12)


def test_display_and_mapping_forms():
    assert str(bz.priors.normal(mean=0, sd=1)) == "Normal, mean 0, sd 1"
    assert str(bz.priors.half_normal(sd=1)) == "Half-normal, sd 1"
    assert str(bz.priors.student_t(scale=2.5, df=3)) == "Student-t, centre 0, scale 2.5, df 3"
    assert str(bz.priors.half_student_t(scale=1, df=4)) == "Half-Student-t, scale 1, df 4"
    assert str(bz.priors.exponential(rate=3)) == "Exponential, rate 3"
    p = bz.priors.student_t(centre=1, scale=2, df=5)
    spec = bz.make_spec("y ~ x", priors={"counts": {"x": p}})
    assert spec.priors == {"counts": {"x": {"distribution": "student_t", "centre": 1.0,
                                            "scale": 2.0, "df": 5.0}}}
    assert ModelSpec.from_dict(spec.to_dict()) == spec


@pytest.mark.parametrize("old, new", [
    (("normal", 0, 1), 'bayeszi.priors.normal(mean=0, sd=1)'),
    (("halfnormal", 0.5), '{distribution = "half_normal", sd = 0.5}'),
    (("student_t", 0, 2, 3), '{distribution = "student_t", centre = 0, scale = 2, df = 3}'),
])
def test_old_prior_class_names_the_new_form(old, new):
    with pytest.raises(bz.BayesziError, match="bayeszi.Prior is gone") as err:
        bz.Prior(*old)
    assert new in str(err.value)


def test_old_list_form_in_the_api_names_the_new_form(no_sampling):
    with pytest.raises(bz.BayesziError) as err:
        bz.fit(tiny_data(), counts="y ~ x + f", zeros="~ w", family="zip",
               priors={"counts": {"f: b (vs a)": ["normal", 0, 0.5]}})
    text = str(err.value)
    assert "counts term 'f: b (vs a)'" in text and "old list form" in text
    assert '{distribution = "normal", mean = 0, sd = 0.5}' in text
    assert "bayeszi.priors.normal(mean=0, sd=0.5)" in text
    assert no_sampling == []  # refused before any sampling


def test_old_list_form_in_a_study_file_names_the_new_form(tmp_path, write_small_study):
    from bayeszi.app.study import load_study

    label = '"substrate: silt (vs cobble)" = '
    path = write_small_study(tmp_path, **{
        label + '{ distribution = "normal", mean = 0, sd = 0.8 }': label + '["normal", 0, 0.8]'})
    study = load_study(str(path))
    with pytest.raises(bz.BayesziError) as err, warnings.catch_warnings():
        warnings.simplefilter("ignore")
        study.check(study.load_data())
    text = str(err.value)
    assert "counts term 'substrate: silt (vs cobble)'" in text and "old list form" in text
    assert '{distribution = "normal", mean = 0, sd = 0.8}' in text


def test_fit_saved_with_old_list_priors_loads_with_labels(tiny_fit, tmp_path):
    """A fit saved by bayeszi 0.1 kept its priors as lists; it still loads, and its tables
    show today's labels and prior display."""
    import dataclasses

    from bayeszi.engine import archive

    old_spec = dataclasses.replace(tiny_fit.spec)
    object.__setattr__(old_spec, "priors", {"counts": {"C(f)[T.b]": ["normal", 0, 1]},
                                            "group_sd": {"zeros": ["halfnormal", 1.5]}})
    path = archive.save(dataclasses.replace(tiny_fit, spec=old_spec), str(tmp_path / "old.nc"))
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        back = bz.load(path)
    assert back.spec.priors["counts"]["C(f)[T.b]"] == {"distribution": "normal", "mean": 0,
                                                       "sd": 1}
    assert ("counts", "f: b (vs a)") in back.coefficients().index
    table = {(r["part"], r["term"]): r["prior"] for r in back.priors.table()}
    assert table[("counts", "f: b (vs a)")] == "Normal, mean 0, sd 1"
    assert table[("zeros", "effects of every group: sd")] == "Half-normal, sd 1.5"
