"""Benchmark: bayeszi predictions vs ``pm.sample_posterior_predictive`` on the same model.

Setting: the demo model (ZINB, counts ``crayfish ~ water_temp + C(substrate) + depth +
canopy``, zeros ``~ barrier``, exposure ``trap_nights``, groups ``reach``) on 10,000 simulated
trap-line checks (the crayfish generator with 200 reaches), with 4,000 posterior draws
(4 chains x 1,000). Sampling 4,000 draws by NUTS on 10,000 rows would take long on a laptop
and is not what is measured, so the posterior is written by hand: each draw is the
generator's true parameters plus small normal noise (coefficients sd 0.05, reach effects
sd 0.1, group sds and the dispersion times a lognormal factor). Both contenders read the
same InferenceData and the same PyMC model (built by :func:`bayeszi.model.build.build_model` on
the 10,000 rows), so they answer the same question.

Measured, each in the same process, one after the other:

* bayeszi ``predict(what="mean")``: closed-form E[Y] per draw, summarised per row;
* bayeszi ``predict(what=["mean", "p_zero", "p_nonzero"])``;
* bayeszi ``prediction_draws(what="new_count")``: 4,000 x 10,000 predictive counts
  (the same output as PyMC's) and ``predict(what="new_count")`` (their summaries);
* PyMC ``pm.sample_posterior_predictive`` of ``y``, followed by the same summaries
  (mean, sd, 5% and 95% per row) of its draws.

Time is wall-clock (``time.perf_counter``) and CPU time of this process
(``time.process_time``, steadier on a shared machine), best of ``--repeat`` runs after one
warm-up run (PyMC compiles its sampling function on the first call; that first call is
reported too). Peak memory is the peak of Python and NumPy allocations traced by
``tracemalloc`` in a separate run of each step (tracing slows allocation, so it is not
timed). The ratios compare PyMC's draws plus the same per-row summaries with bayeszi.

Usage::

    python benchmarks/bench_predict.py                  # 10,000 rows x 4,000 draws
    python benchmarks/bench_predict.py --rows 2000 --draws 1000 --out bench.json

The JSON written with ``--out`` goes to a temporary name first and is then renamed.
"""

from __future__ import annotations

import argparse
import json
import os
import tempfile
import time
import tracemalloc
import warnings
from collections.abc import Callable
from typing import Any

import arviz as az
import numpy as np
import pandas as pd

import bayeszi as bz
from bayeszi.data import simulate_crayfish
from bayeszi.engine.fit import add_user_scale
from bayeszi.fitting.fitted import FittedModel
from bayeszi.model.build import build_model
from bayeszi.model.design import build_design
from bayeszi.model.diagnostics import diagnose
from bayeszi.model.priors import resolve

COUNTS = "crayfish ~ water_temp + C(substrate) + depth + canopy"
ZEROS = "~ barrier"


def make_rows(n_rows: int, seed: int) -> tuple[pd.DataFrame, dict[str, Any]]:
    """``n_rows`` simulated trap-line checks (the crayfish generator, 200+ reaches)."""
    n_reaches = 200
    while True:
        data, truth = simulate_crayfish(seed=seed, n_reaches=n_reaches, n_rivers=10)
        if len(data) >= n_rows:
            return data.iloc[:n_rows].reset_index(drop=True), truth
        n_reaches = int(n_reaches * 1.5)


def hand_posterior(data: pd.DataFrame, truth: dict[str, Any], chains: int, draws: int,
                   seed: int) -> tuple[FittedModel, Any]:
    """A fitted model and its PyMC model, with draws written by hand (see module doc)."""
    spec = bz.make_spec(counts=COUNTS, zeros=ZEROS, family="zinb", exposure="trap_nights",
                        groups="reach")
    design = build_design(data, spec)
    priors = resolve(design, spec.priors)
    model = build_model(design, priors).model
    rng = np.random.default_rng(seed)
    shape = (chains, draws)
    levels = design.groups[0].levels

    def to_std(beta: np.ndarray, pdes: Any) -> np.ndarray:
        out = beta * pdes.scale
        out[..., 0] = beta[..., 0] + beta[..., 1:] @ pdes.center[1:]
        return out

    post: dict[str, np.ndarray] = {}
    for part, pdes in (("counts", design.counts), ("zeros", design.zeros)):
        true_b = np.array([truth[part][t] for t in pdes.terms])
        beta = true_b + rng.normal(0, 0.05, (*shape, len(true_b)))
        post[f"{part}_std_coef"] = to_std(beta, pdes)
        sd = truth["group_sd"][part]["reach"] * np.exp(rng.normal(0, 0.1, shape))
        eff_true = np.array([truth["group_effects"][part]["reach"][lv] for lv in levels])
        eff = eff_true + rng.normal(0, 0.1, (*shape, len(levels)))
        post[f"{part}_sd_reach"] = sd
        post[f"{part}_z_reach"] = eff / sd[..., None]
        post[f"{part}_effect_reach"] = eff
    alpha = truth["alpha"] * np.exp(rng.normal(0, 0.05, shape))
    post["dispersion"] = alpha
    post["dispersion_sqrt"] = np.sqrt(alpha)
    dims = {"counts_std_coef": ["counts_term"], "zeros_std_coef": ["zeros_term"],
            "counts_z_reach": ["reach"], "zeros_z_reach": ["reach"],
            "counts_effect_reach": ["reach"], "zeros_effect_reach": ["reach"]}
    coords = {"counts_term": design.counts.terms, "zeros_term": design.zeros.terms,
              "reach": levels}
    idata = az.from_dict(posterior=post, coords=coords, dims=dims,
                         sample_stats={"diverging": np.zeros(shape, dtype=bool)})
    add_user_scale(idata, design)
    # diagnostics computed once here, outside the timed steps
    fitted = FittedModel(spec, design, idata, priors, data[design.used_columns].copy(),
                         diagnose(idata))
    return fitted, model


def pymc_predictive(fitted: FittedModel, model: Any) -> np.ndarray:
    """``pm.sample_posterior_predictive`` of y, as an array (draws, rows)."""
    import pymc as pm

    with model, warnings.catch_warnings():
        warnings.simplefilter("ignore")
        pp = pm.sample_posterior_predictive(fitted.idata, var_names=["y"], progressbar=False,
                                            random_seed=1, return_inferencedata=True)
    y = pp.posterior_predictive["y"].values
    return y.reshape(-1, y.shape[-1])


def summaries(draws: np.ndarray) -> pd.DataFrame:
    """The per-row summaries predict() reports, computed from a (draws, rows) array."""
    q = np.quantile(draws, [0.05, 0.95], axis=0)
    return pd.DataFrame({"mean": draws.mean(axis=0), "sd": draws.std(axis=0, ddof=1),
                         "5%": q[0], "95%": q[1]})


def measure(fn: Callable[[], Any], repeat: int) -> tuple[dict[str, float], Any]:
    """Timings (first call, best wall and CPU of ``repeat`` more) and traced peak MiB."""
    t0, c0 = time.perf_counter(), time.process_time()
    result = fn()
    first = time.perf_counter() - t0
    wall = cpu = np.inf
    for _ in range(repeat):
        del result
        t0, c0 = time.perf_counter(), time.process_time()
        result = fn()
        wall = min(wall, time.perf_counter() - t0)
        cpu = min(cpu, time.process_time() - c0)
    del result
    tracemalloc.start()
    tracemalloc.reset_peak()
    result = fn()
    peak = tracemalloc.get_traced_memory()[1] / 2**20
    tracemalloc.stop()
    return {"first_s": first, "wall_s": wall, "cpu_s": cpu, "peak_mib": peak}, result


def main(argv: list[str] | None = None) -> int:
    p = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    p.add_argument("--rows", type=int, default=10_000)
    p.add_argument("--draws", type=int, default=4_000, help="total draws (4 chains)")
    p.add_argument("--repeat", type=int, default=2,
                   help="timed runs per step after the first (best kept)")
    p.add_argument("--seed", type=int, default=7)
    p.add_argument("--out", default=None, help="write the results as JSON here")
    args = p.parse_args(argv)
    # the hand-written draws are independent, so R-hat / ESS flags on them mean nothing
    warnings.simplefilter("ignore", bz.BayesziWarning)
    chains = 4
    per_chain = max(1, args.draws // chains)
    data, truth = make_rows(args.rows, args.seed)
    fitted, model = hand_posterior(data, truth, chains, per_chain, args.seed)
    n_draws = chains * per_chain
    print(f"{len(data)} rows x {n_draws} draws, {len(fitted.design.groups[0].levels)} reaches")
    steps: dict[str, Callable[[], Any]] = {
        "bayeszi predict(what='mean')": lambda: fitted.predict(what="mean"),
        "bayeszi predict(what=['mean', 'p_zero', 'p_nonzero'])":
            lambda: fitted.predict(what=["mean", "p_zero", "p_nonzero"]),
        "bayeszi prediction_draws(what='new_count')":
            lambda: fitted.prediction_draws(what="new_count", seed=1),
        "bayeszi predict(what='new_count')":
            lambda: fitted.predict(what="new_count", seed=1),
        "pymc sample_posterior_predictive":
            lambda: pymc_predictive(fitted, model),
        "pymc sample_posterior_predictive + summaries":
            lambda: summaries(pymc_predictive(fitted, model)),
    }
    results: dict[str, dict[str, float]] = {}
    kept: dict[str, Any] = {}
    print(f"{'step':56s} {'first s':>8s} {'wall s':>8s} {'cpu s':>8s} {'peak MiB':>9s}")
    for name, fn in steps.items():
        r, res = measure(fn, args.repeat)
        results[name] = r
        kept[name] = res
        print(f"{name:56s} {r['first_s']:8.2f} {r['wall_s']:8.2f} {r['cpu_s']:8.2f} "
              f"{r['peak_mib']:9.1f}", flush=True)
    ref = results["pymc sample_posterior_predictive + summaries"]
    print("\nratio pymc (draws + summaries) / bayeszi:")
    for name in steps:
        if name.startswith("bayeszi"):
            r = results[name]
            print(f"  {name:54s} wall x{ref['wall_s'] / r['wall_s']:5.1f}  "
                  f"cpu x{ref['cpu_s'] / r['cpu_s']:5.1f}  "
                  f"memory x{ref['peak_mib'] / max(r['peak_mib'], 1e-9):5.1f}")
    # sanity: both predictive means agree with the closed-form E[Y] within Monte Carlo error
    closed = kept["bayeszi predict(what='mean')"]["mean"].to_numpy()
    ours = kept["bayeszi prediction_draws(what='new_count')"].values
    theirs = kept["pymc sample_posterior_predictive"]
    se = theirs.std(axis=0, ddof=1) / np.sqrt(n_draws)
    z_ours = (ours.mean(axis=0) - closed) / se
    z_theirs = (theirs.mean(axis=0) - closed) / se
    print("\nsanity, mean |z| of predictive means vs closed-form E[Y] (about 0.8 expected): "
          f"bayeszi {np.mean(np.abs(z_ours)):.2f}, pymc {np.mean(np.abs(z_theirs)):.2f}")
    if args.out:
        payload = {"rows": len(data), "draws": n_draws, "results": results,
                   "sanity_mean_abs_z": {"bayeszi": float(np.mean(np.abs(z_ours))),
                                         "pymc": float(np.mean(np.abs(z_theirs)))}}
        folder = os.path.dirname(os.path.abspath(args.out))
        fd, tmp = tempfile.mkstemp(dir=folder, suffix=".tmp")
        with os.fdopen(fd, "w") as fh:
            json.dump(payload, fh, indent=2)
        os.replace(tmp, args.out)
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
