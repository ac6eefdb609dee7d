"""Tests of the seeded data generators and the data shipped with bayeszi.

Three generators: the packaged crayfish demo (ZINB with reach effects), the camera-trap
example (hurdle negative binomial, cameras crossed with seasons) and the circuit-board
example (ZIP, no groups). The checks:

* the default seed rewrites every shipped file byte for byte;
* each shipped data set is sane (no gaps, counts are whole and non-negative, exposure is
  positive, zero share and group counts as described in the generator's docstring);
* the coefficient names in each truth file are exactly the column names formulaic gives
  the truth formulas (so a user's fit can be matched to the truth term by term);
* at a large simulated size the empirical zero share, share of ones and mean match the
  closed-form expectation from the truth parameters, computed with scipy.stats pmfs and
  moments, within a Monte-Carlo tolerance of 4 standard errors (rows are independent given
  covariates and group effects; 4 SE gives a false alarm about once in 16,000 checks).
"""

from __future__ import annotations

import doctest
import importlib.util
import json
from pathlib import Path
from types import ModuleType

import numpy as np
import pandas as pd
import pytest
from formulaic import model_matrix
from scipy import stats

ROOT = Path(__file__).resolve().parents[1]
CRAYFISH_DIR = ROOT / "bayeszi" / "data"
CAMERA_DIR = ROOT / "examples" / "camera_traps"
BOARDS_DIR = ROOT / "examples" / "circuit_boards"


def _load(path: Path, name: str) -> ModuleType:
    """Import a generator script by its path, as a user running it would."""
    spec = importlib.util.spec_from_file_location(name, path)
    assert spec is not None and spec.loader is not None
    module = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(module)
    return module


crayfish_gen = _load(CRAYFISH_DIR / "generate_crayfish.py", "_gen_crayfish")
camera_gen = _load(CAMERA_DIR / "generate.py", "_gen_camera_traps")
boards_gen = _load(BOARDS_DIR / "generate.py", "_gen_circuit_boards")

GENERATORS = {
    "crayfish": (crayfish_gen, CRAYFISH_DIR),
    "camera_traps": (camera_gen, CAMERA_DIR),
    "circuit_boards": (boards_gen, BOARDS_DIR),
}
RESPONSE = {"crayfish": "crayfish", "camera_traps": "detections", "circuit_boards": "defects"}
# Zero-share ranges stated in the task brief (crayfish) and chosen for the examples.
ZERO_SHARE_RANGE = {"crayfish": (0.40, 0.55), "camera_traps": (0.35, 0.60),
                    "circuit_boards": (0.20, 0.40)}


def _shipped(name: str) -> tuple[pd.DataFrame, dict]:
    gen, folder = GENERATORS[name]
    data = pd.read_csv(folder / gen.CSV_NAME, keep_default_na=False)
    truth = json.loads((folder / gen.TRUTH_NAME).read_text(encoding="utf-8"))
    return data, truth


# --- reproducibility -----------------------------------------------------------------------

@pytest.mark.parametrize("name", sorted(GENERATORS))
def test_default_seed_rewrites_shipped_files_byte_for_byte(name: str, tmp_path: Path) -> None:
    gen, folder = GENERATORS[name]
    gen.main(out_dir=tmp_path)
    for fname in (gen.CSV_NAME, gen.TRUTH_NAME):
        assert (tmp_path / fname).read_bytes() == (folder / fname).read_bytes(), (
            f"{fname} differs from the shipped file; rerun {folder / 'generate*.py'}"
        )
    # written to temporary names and renamed: nothing else is left behind
    assert sorted(p.name for p in tmp_path.iterdir()) == sorted([gen.CSV_NAME, gen.TRUTH_NAME])


@pytest.mark.parametrize("name", sorted(GENERATORS))
def test_same_seed_same_data_other_seed_other_data(name: str) -> None:
    gen, _ = GENERATORS[name]
    a, ta = gen.simulate(seed=5)
    b, tb = gen.simulate(seed=5)
    c, _ = gen.simulate(seed=6)
    pd.testing.assert_frame_equal(a, b)
    assert ta == tb
    assert gen.csv_text(a) != gen.csv_text(c)


@pytest.mark.parametrize("name", sorted(GENERATORS))
def test_missing_output_folder_is_a_clear_error(name: str, tmp_path: Path) -> None:
    from bayeszi.base.errors import BayesziError

    gen, _ = GENERATORS[name]
    missing = tmp_path / "nowhere"
    with pytest.raises(BayesziError, match="does not exist"):
        gen.main(out_dir=missing)
    assert not missing.exists()


def test_bad_settings_are_clear_errors() -> None:
    from bayeszi.base.errors import BayesziError

    with pytest.raises(BayesziError, match="n_reaches"):
        crayfish_gen.simulate(n_reaches=0)
    with pytest.raises(BayesziError, match="n_rivers"):
        crayfish_gen.simulate(n_reaches=3, n_rivers=4)
    with pytest.raises(BayesziError, match="lines_per_visit"):
        crayfish_gen.simulate(lines_per_visit=(5, 2))
    with pytest.raises(BayesziError, match="barrier_share"):
        crayfish_gen.simulate(barrier_share=1.5)
    with pytest.raises(BayesziError, match="weeks"):
        camera_gen.simulate(weeks=(0, 3))
    with pytest.raises(BayesziError, match="n_lots"):
        boards_gen.simulate(n_lots=-1)


@pytest.mark.parametrize("module", [crayfish_gen, camera_gen, boards_gen])
def test_docstring_examples_run(module: ModuleType) -> None:
    result = doctest.testmod(module, verbose=False)
    assert result.attempted > 0 and result.failed == 0


# --- sanity of the shipped data ------------------------------------------------------------

@pytest.mark.parametrize("name", sorted(GENERATORS))
def test_shipped_data_common_sanity(name: str) -> None:
    gen, _ = GENERATORS[name]
    data, truth = _shipped(name)
    assert list(data.columns) == list(gen.COLUMNS)
    assert not data.isna().any().any()
    y = data[RESPONSE[name]]
    assert pd.api.types.is_integer_dtype(y) and (y >= 0).all()
    exposure = data[truth["exposure"]]
    assert pd.api.types.is_integer_dtype(exposure) and (exposure > 0).all()
    lo, hi = ZERO_SHARE_RANGE[name]
    zero_share = float((y == 0).mean())
    assert lo <= zero_share <= hi
    summary = truth["summary"]
    assert summary["rows"] == len(data)
    assert summary["zero_share"] == round(zero_share, 4)
    assert summary["max_count"] == int(y.max())


def test_crayfish_shipped_structure() -> None:
    data, truth = _shipped("crayfish")
    assert 1800 <= len(data) <= 2200  # "about 2,000 records"
    assert data["reach"].nunique() == 40
    assert data["river"].nunique() == 6
    assert set(data["season"]) == {"spring", "summer", "autumn"}
    assert set(data["substrate"]) == {"silt", "gravel", "cobble"}
    assert (data.groupby("reach")["river"].nunique() == 1).all()  # reaches nest in rivers
    assert (data.groupby("reach")["barrier"].nunique() == 1).all()  # barrier is reach-level
    visits = data.groupby("reach")["visit"].max()
    assert visits.min() >= 2 and visits.max() <= 12
    assert (visits <= 3).sum() >= 3  # a few sparsely visited reaches, so pooling shows
    assert ((visits >= 6) & (visits <= 12)).sum() >= 30
    assert data["trap_nights"].between(1, 6).all()
    assert data["water_temp"].between(1, 26).all()
    assert data["depth"].between(0.1, 1.5).all()
    assert data["canopy"].between(0, 1).all()
    assert data["crayfish"].max() < 150
    # warmer in summer than in spring (season drives water temperature)
    temp = data.groupby("season")["water_temp"].mean()
    assert temp["summer"] > temp["autumn"] > temp["spring"]
    zero_by_barrier = data.groupby("barrier")["crayfish"].apply(lambda s: (s == 0).mean())
    assert zero_by_barrier[1] > zero_by_barrier[0] + 0.3
    present = truth["summary"]["mean_per_trap_night_present"]
    assert 1.0 <= present <= 5.0  # "a few crayfish" per trap night where present


def test_camera_traps_shipped_structure() -> None:
    data, _ = _shipped("camera_traps")
    assert 1300 <= len(data) <= 1700  # "about 1,500 camera weeks"
    assert data["camera"].nunique() == 30
    assert set(data["season"]) == {"winter", "spring", "summer", "autumn"}
    cells = data.groupby(["camera", "season"]).size()
    assert len(cells) == 30 * 4  # cameras fully crossed with seasons
    assert data["active_days"].between(1, 7).all()
    assert set(data["bait"]) == {0, 1}
    assert data["forest_cover"].between(0, 1).all()
    assert (data["dist_road_km"] > 0).all()
    assert (data.groupby("camera")[["forest_cover", "dist_road_km"]].nunique() == 1).all().all()


def test_circuit_boards_shipped_structure() -> None:
    data, _ = _shipped("circuit_boards")
    assert len(data) == 800 and data["lot"].is_unique
    assert set(data["line"]) == {"A", "B", "C"}
    assert data["boards_inspected"].between(5, 50).all()
    assert (data["solder_temp_dev"] >= 0).all()
    assert data["humidity"].between(0, 100).all()
    assert set(data["new_supplier"]) == {0, 1}


# --- truth files: names match formula terms, rows recomputable ------------------------------

def _design(formula: str, data: pd.DataFrame) -> pd.DataFrame:
    rhs = formula.split("~", 1)[1]
    return model_matrix(rhs, data)


@pytest.mark.parametrize("name", sorted(GENERATORS))
def test_truth_names_are_the_formula_terms(name: str) -> None:
    data, truth = _shipped(name)
    assert truth["counts_formula"].split("~")[0].strip() == RESPONSE[name]
    for part in ("counts", "zeros"):
        columns = list(_design(truth[f"{part}_formula"], data).columns)
        assert columns == list(truth[part]), part
    for part, effects in truth.get("group_effects", {}).items():
        for column, levels in effects.items():
            assert set(levels) == set(data[column].astype(str)), (part, column)


def _true_parts(data: pd.DataFrame, truth: dict) -> tuple[np.ndarray, np.ndarray]:
    """Row-wise true count mean and zeros-part probability, from formulaic designs.

    Written independently of the generators' own ``true_parts``: coefficients are matched
    to design columns by name, exposure enters as log(exposure), group effects are added.
    """
    etas = {}
    for part in ("counts", "zeros"):
        x = _design(truth[f"{part}_formula"], data)
        coef = pd.Series(truth[part])
        eta = x[coef.index].to_numpy(dtype=float) @ coef.to_numpy(dtype=float)
        for column, levels in truth.get("group_effects", {}).get(part, {}).items():
            eta = eta + data[column].astype(str).map(levels).to_numpy(dtype=float)
        etas[part] = eta
    mu = data[truth["exposure"]].to_numpy(dtype=float) * np.exp(etas["counts"])
    return mu, stats.logistic.cdf(etas["zeros"])


@pytest.mark.parametrize("name", sorted(GENERATORS))
def test_generator_true_parts_agree_with_formula_designs(name: str) -> None:
    gen, _ = GENERATORS[name]
    data, truth = _shipped(name)
    mu, p = _true_parts(data, truth)
    mu_gen, p_gen = gen.true_parts(data, truth)
    np.testing.assert_allclose(mu_gen, mu, rtol=1e-12)
    np.testing.assert_allclose(p_gen, p, rtol=1e-12)


# --- simulated truth at large size ----------------------------------------------------------

def _row_moments(name: str, mu: np.ndarray, p: np.ndarray, truth: dict) -> dict[str, tuple]:
    """Per-row P(Y=0), P(Y=1), E[Y] and Var[Y] from scipy.stats distributions.

    ZIP / ZINB: Y = 0 with probability p, else a Poisson / NB draw (Lambert 1992 for ZIP).
    Hurdle NB: Y = 0 with probability p, else NB conditioned on Y > 0.
    NB with mean mu and variance mu + alpha mu^2 is scipy's nbinom(n=1/alpha, p=1/(1+alpha mu)).
    """
    if name == "circuit_boards":
        count = stats.poisson(mu)
    else:
        alpha = truth["alpha"]
        count = stats.nbinom(1.0 / alpha, 1.0 / (1.0 + alpha * mu))
    m1, var = count.mean(), count.var()
    m2 = var + m1**2
    f0, f1 = count.pmf(0), count.pmf(1)
    if name == "camera_traps":  # hurdle: positives follow the count law truncated at zero
        keep = (1.0 - p) / (1.0 - f0)
        p0, p1, mean, second = p, keep * f1, keep * m1, keep * m2
    else:  # zero-inflated: extra zeros mixed with the full count law
        p0, p1, mean, second = p + (1 - p) * f0, (1 - p) * f1, (1 - p) * m1, (1 - p) * m2
    return {
        "zero_share": (p0, p0 * (1 - p0)),
        "one_share": (p1, p1 * (1 - p1)),
        "mean": (mean, second - mean**2),
    }


LARGE = {  # about 40,000 rows each
    "crayfish": {"n_reaches": 800, "n_rivers": 60},
    "camera_traps": {"n_cameras": 800},
    "circuit_boards": {"n_lots": 40_000},
}


@pytest.mark.parametrize("name", sorted(GENERATORS))
def test_large_simulation_matches_closed_form_expectation(name: str) -> None:
    gen, _ = GENERATORS[name]
    data, truth = gen.simulate(seed=12345, **LARGE[name])
    assert 35_000 <= len(data) <= 45_000
    y = data[RESPONSE[name]].to_numpy()
    mu, p = _true_parts(data, truth)
    observed = {"zero_share": np.mean(y == 0), "one_share": np.mean(y == 1), "mean": y.mean()}
    for key, (expected_rows, var_rows) in _row_moments(name, mu, p, truth).items():
        expected = expected_rows.mean()
        se = np.sqrt(var_rows.sum()) / len(y)  # independent rows given covariates and effects
        assert abs(observed[key] - expected) < 4 * se, (key, observed[key], expected, se)


@pytest.mark.parametrize(
    ("name", "part", "column"),
    [("crayfish", "counts", "reach"), ("crayfish", "zeros", "reach"),
     ("camera_traps", "counts", "camera"), ("camera_traps", "zeros", "camera")],
)
def test_drawn_group_effects_have_the_true_sd(name: str, part: str, column: str) -> None:
    gen, _ = GENERATORS[name]
    _, truth = gen.simulate(seed=777, **LARGE[name])
    effects = np.array(list(truth["group_effects"][part][column].values()))
    sd = truth["group_sd"][part][column]
    # SE of a normal sample SD is about sd / sqrt(2 (n - 1)) (common practice, large n)
    se = sd / np.sqrt(2 * (len(effects) - 1))
    assert abs(effects.std(ddof=1) - sd) < 4 * se
    assert abs(effects.mean()) < 4 * sd / np.sqrt(len(effects))


# --- the package interface ----------------------------------------------------------------

def test_load_crayfish_types_and_content() -> None:
    from bayeszi.data import crayfish_truth, load_crayfish, simulate_crayfish

    df = load_crayfish()
    for column in ("reach", "river", "season", "substrate"):
        assert df[column].map(type).eq(str).all(), column
    for column in ("year", "visit", "trap_line", "trap_nights", "barrier", "crayfish"):
        assert df[column].dtype == np.int64, column
    for column in ("water_temp", "depth", "canopy"):
        assert df[column].dtype == np.float64, column
    data, truth = simulate_crayfish()  # default arguments: the shipped data in memory
    pd.testing.assert_frame_equal(df, data, check_dtype=False)
    assert crayfish_truth() == json.loads(json.dumps(truth))


def test_packaged_generator_is_importable_and_matches_the_script() -> None:
    from bayeszi.data import crayfish_true_parts, crayfish_truth, generate_crayfish, load_crayfish

    assert generate_crayfish.DEFAULT_SEED == crayfish_gen.DEFAULT_SEED
    mu, p = crayfish_true_parts(load_crayfish(), crayfish_truth())
    mu_ref, p_ref = _true_parts(load_crayfish(), crayfish_truth())
    np.testing.assert_allclose(mu, mu_ref, rtol=1e-12)
    np.testing.assert_allclose(p, p_ref, rtol=1e-12)


def test_simulate_crayfish_small_and_bad_input() -> None:
    from bayeszi.base.errors import BayesziError
    from bayeszi.data import simulate_crayfish

    data, truth = simulate_crayfish(seed=3, n_reaches=8, n_rivers=2)
    assert data["reach"].nunique() == 8 and truth["seed"] == 3
    assert truth["summary"]["barrier_reaches"] == 2  # round(0.3 * 8)
    with pytest.raises(BayesziError, match="seed"):
        simulate_crayfish(seed=-1)
