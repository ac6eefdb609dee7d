"""Each user error of the core: a BayesziError whose message names the problem and the fix.

These checks need no reference values (they test our own messages); no sampling happens
because every error is raised before the model is built.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

import bayeszi as bz
from bayeszi.base.spec import ModelSpec
from bayeszi.model.design import build_design


@pytest.fixture
def df() -> pd.DataFrame:
    rng = np.random.default_rng(0)
    n = 60
    return pd.DataFrame({
        "y": rng.poisson(2, n) * rng.integers(0, 2, n),
        "x": rng.normal(size=n),
        "s": rng.choice(["a", "b", "c"], n),
        "e": rng.uniform(1, 3, n),
        "site": rng.choice([f"r{i}" for i in range(8)], n),
    })


def design(df, **kw):
    kw.setdefault("counts", "y ~ x")
    kw.setdefault("family", "zip")
    return build_design(df, ModelSpec(**kw))


def test_missing_column_suggests(df):
    with pytest.raises(bz.BayesziError, match=r"column 'xx'.*not in the data.*Did you mean"):
        design(df, counts="y ~ xx")


def test_missing_response(df):
    with pytest.raises(bz.BayesziError, match=r"column 'count'.*response"):
        design(df, counts="count ~ x")


def test_nan_lists_rows(df):
    df.loc[[3, 7], "x"] = np.nan
    with pytest.raises(bz.BayesziError, match=r"'x'.*2 missing or infinite.*row\(s\) 3, 7"):
        design(df)


def test_inf_lists_rows(df):
    df.loc[5, "x"] = np.inf
    with pytest.raises(bz.BayesziError, match=r"'x'.*row\(s\) 5"):
        design(df)


def test_negative_counts(df):
    df.loc[2, "y"] = -1
    with pytest.raises(bz.BayesziError, match=r"negative values at row\(s\) 2"):
        design(df)


def test_non_integer_counts(df):
    df["y"] = df["y"].astype(float)
    df.loc[4, "y"] = 1.5
    with pytest.raises(bz.BayesziError, match=r"non-integer values at row\(s\) 4"):
        design(df)


def test_missing_exposure_column(df):
    with pytest.raises(bz.BayesziError, match=r"column 'effort' \(exposure\)"):
        design(df, exposure="effort")


def test_non_positive_exposure(df):
    df.loc[[1, 9], "e"] = [0.0, -2.0]
    with pytest.raises(bz.BayesziError, match=r"exposure column 'e'.*row\(s\) 1, 9.*positive"):
        design(df, exposure="e")


def test_missing_exposure_value(df):
    df.loc[6, "e"] = np.nan
    with pytest.raises(bz.BayesziError, match=r"'e'.*row\(s\) 6"):
        design(df, exposure="e")


def test_unknown_family_suggests():
    with pytest.raises(bz.BayesziError, match=r"zinb"):
        ModelSpec(counts="y ~ x", family="zinbb")


def test_response_left_of_zeros_formula():
    with pytest.raises(bz.BayesziError, match=r"zeros formula.*response on the left"):
        ModelSpec(counts="y ~ x", zeros="y ~ x", family="zip")


def test_empty_data(df):
    with pytest.raises(bz.BayesziError, match=r"no rows"):
        design(df.iloc[:0])


def test_not_a_frame():
    with pytest.raises(bz.BayesziError, match=r"DataFrame"):
        build_design([1, 2, 3], ModelSpec(counts="y ~ x"))


def test_text_column_used_as_number(df):
    df["x"] = df["x"].round(3).astype(str)
    with pytest.raises(bz.BayesziError, match=r"'x'.*numbers stored as text.*to_numeric"):
        design(df)


def test_text_response(df):
    df["y"] = df["y"].astype(str)
    with pytest.raises(bz.BayesziError, match=r"response column 'y' holds text"):
        design(df)


def test_true_false_response_is_not_counts(df):
    df["y"] = df["y"] > 0
    with pytest.raises(bz.BayesziError, match=r"response column 'y' holds True/False: "
                                              r"presence/absence.*Bernoulli.*astype\(int\)"):
        design(df)


def test_zero_one_response_warns_it_may_be_presence(df):
    df["y"] = (df["y"] > 0).astype(int)
    with pytest.warns(bz.BayesziWarning, match=r"only 0 and 1.*presence/absence"):
        design(df)


def test_no_zeros_hurdle_is_error(df):
    df["y"] = df["y"] + 1
    with pytest.raises(bz.BayesziError, match=r"no zeros.*hurdle"):
        design(df, family="hurdle-poisson")


def test_no_zeros_inflated_warns(df):
    df["y"] = df["y"] + 1
    with pytest.warns(bz.BayesziWarning, match=r"no zeros"):
        design(df, family="zinb")


def test_constant_response(df):
    df["y"] = 0
    with pytest.raises(bz.BayesziError, match=r"constant"):
        design(df)


def test_bad_formula_syntax(df):
    with pytest.raises(bz.BayesziError, match=r"counts formula.*cannot be read"):
        design(df, counts="y ~ x +")


def test_counts_formula_without_response():
    with pytest.raises(bz.BayesziError, match=r"no response"):
        ModelSpec(counts="~ x")


def test_bad_sampler_setting():
    with pytest.raises(bz.BayesziError, match=r"acceptance_target"):
        bz.make_spec("y ~ x", acceptance_target=1.5)
    with pytest.raises(bz.BayesziError, match=r"'draw'.*did you mean 'draws'"):
        bz.make_spec("y ~ x", draw=10)


def test_constant_term(df):
    df["k"] = 1.0
    with pytest.raises(bz.BayesziError, match=r"term 'k'.*constant"):
        design(df, counts="y ~ x + k")


def test_group_problems(df):
    df["one"] = "only"
    with pytest.raises(bz.BayesziError, match=r"'one' has a single level"):
        design(df, groups=("one",))
    with pytest.raises(bz.BayesziError, match=r"column 'nosite' \(groups\)"):
        design(df, groups=("nosite",))
    df.loc[0, "site"] = "lonely"
    with pytest.warns(bz.BayesziWarning, match=r"single record"):
        design(df, groups=("site",))


def test_unknown_prior_term(df):
    with pytest.raises(bz.BayesziError, match=r"unknown term.*'nope'"):
        from bayeszi.model.priors import resolve

        resolve(design(df), {"counts": {"nope": bz.priors.normal(sd=1)}})


def test_unseen_level_on_encode(df):
    d = design(df, counts="y ~ x + C(s)")
    new = df.head(3).copy()
    new.loc[new.index[0], "s"] = "zzz"
    with pytest.raises(bz.BayesziError, match=r"'s' has level\(s\) \['zzz'\].*known levels"):
        d.encode(new)


def test_encode_matches_fit_encoding(df):
    d = design(df, counts="y ~ x + C(s) + np.log(e)")
    enc = d.encode(df.iloc[::-1])
    np.testing.assert_array_equal(enc.X_counts, d.counts.X[::-1])


def test_user_scale_round_trip(df):
    d = design(df, counts="y ~ x + C(s)")
    rng = np.random.default_rng(1)
    beta = rng.normal(size=len(d.counts.terms))
    # internal coefficients giving the same linear predictor as beta on the user's scale
    b_std = np.linalg.lstsq(d.counts.X_std, d.counts.X @ beta, rcond=None)[0]
    np.testing.assert_allclose(d.counts.to_user_scale(b_std), beta, atol=1e-10)
