"""Time and peak memory of the posterior predictive checks on 4,000 draws x 10,000 records.

The model is the benchmark ZINB with reach effects in both parts (``bench_data.py``,
continuous layout, 30 reaches). Sampling 4,000 draws for 10,000 records would take far
longer than the checks themselves, so the posterior is a synthetic one: draws scattered
around values that reproduce the simulated data (the checks cost the same whatever the
draws are). Peak memory is measured with ``tracemalloc`` (NumPy reports its buffers to it)
in a second, separate run, so the timing runs are not slowed by tracing.

Run:  python benchmarks/bench_checks.py [--draws 4000] [--rows 10000] [--repeat 3]
      [--layout continuous|discrete] [--only frequencies|all]

In the ``discrete`` layout many records share all model inputs; the frequency table then
computes each distinct input row once.

Example
-------
>>> fitted = synthetic_fit(rows=500, draws=100)        # doctest: +SKIP
>>> fitted.count_frequencies().shape[1]                # doctest: +SKIP
8
"""

from __future__ import annotations

import argparse
import os
import sys
import time
import tracemalloc
from collections.abc import Callable

import arviz as az
import numpy as np

sys.path.insert(0, os.path.dirname(os.path.abspath(__file__)))

from bench_data import FORMULAS, make_data  # noqa: E402

from bayeszi.answers import checks  # noqa: E402
from bayeszi.engine.fit import add_user_scale  # noqa: E402
from bayeszi.fitting.api import make_spec  # noqa: E402
from bayeszi.fitting.fitted import FittedModel  # noqa: E402
from bayeszi.model.design import build_design  # noqa: E402
from bayeszi.model.diagnostics import diagnose  # noqa: E402
from bayeszi.model.priors import resolve  # noqa: E402


def synthetic_fit(rows: int = 10_000, draws: int = 4_000, chains: int = 4,
                  seed: int = 7, layout: str = "continuous") -> FittedModel:
    """A FittedModel of the benchmark ZINB whose posterior is synthetic (see module doc)."""
    df, truth = make_data(rows, layout=layout, n_groups=30, seed=seed)
    counts, zeros = FORMULAS[layout]
    spec = make_spec(counts, zeros, family="zinb", exposure="trap_nights", groups="reach")
    design = build_design(df, spec)
    rng = np.random.default_rng(seed)
    per_chain = draws // chains
    shape = (chains, per_chain)
    # Internal-scale coefficients near the generating values (intercepts at the centred
    # predictors; the exact numbers do not change the cost).
    c_terms, z_terms = design.counts.terms, design.zeros.terms
    b_c = np.zeros(len(c_terms))
    b_c[design.counts.intercept] = -0.35
    b_z = np.zeros(len(z_terms))
    b_z[design.zeros.intercept] = -0.4
    posterior = {
        "counts_std_coef": b_c + 0.05 * rng.standard_normal((*shape, len(c_terms))),
        "zeros_std_coef": b_z + 0.1 * rng.standard_normal((*shape, len(z_terms))),
        "dispersion": np.exp(np.log(truth["alpha"]) + 0.05 * rng.standard_normal(shape)),
        "counts_sd_reach": np.abs(0.5 + 0.05 * rng.standard_normal(shape)),
        "zeros_sd_reach": np.abs(0.8 + 0.05 * rng.standard_normal(shape)),
        "counts_effect_reach": truth["u_counts"] + 0.05 * rng.standard_normal((*shape, 30)),
        "zeros_effect_reach": truth["u_zeros"] + 0.1 * rng.standard_normal((*shape, 30)),
    }
    levels = design.groups[0].levels
    idata = az.from_dict(
        posterior=posterior,
        coords={"counts_term": c_terms, "zeros_term": z_terms, "reach": levels},
        dims={"counts_std_coef": ["counts_term"], "zeros_std_coef": ["zeros_term"],
              "counts_effect_reach": ["reach"], "zeros_effect_reach": ["reach"]},
        sample_stats={"diverging": np.zeros(shape, dtype=bool)},
    )
    add_user_scale(idata, design)
    return FittedModel(spec, design, idata, resolve(design, spec.priors),
                       df[design.used_columns].copy(), diagnose(idata))


def measure(fn: Callable[[], object], repeat: int) -> tuple[float, float, float]:
    """(best wall s, CPU s of that run, peak traced MB of one extra run) of ``fn``.

    CPU time is reported beside wall time because a shared machine stretches wall time.
    """
    best = (float("inf"), float("inf"))
    for _ in range(repeat):
        w0, c0 = time.perf_counter(), time.process_time()
        fn()
        run = (time.perf_counter() - w0, time.process_time() - c0)
        best = min(best, run)
    tracemalloc.start()
    fn()
    _, peak = tracemalloc.get_traced_memory()
    tracemalloc.stop()
    return best[0], best[1], peak / 1e6


def main(argv: list[str] | None = None) -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--draws", type=int, default=4000)
    parser.add_argument("--rows", type=int, default=10_000)
    parser.add_argument("--repeat", type=int, default=3)
    parser.add_argument("--layout", choices=sorted(FORMULAS), default="continuous",
                        help="continuous covariates, or categories only (records repeat)")
    parser.add_argument("--only", choices=["frequencies", "all"], default="all",
                        help="time only the expected frequencies, or every check")
    args = parser.parse_args(argv)
    fitted = synthetic_fit(args.rows, args.draws, layout=args.layout)
    K = checks.default_kmax(fitted.design.y)
    post_mb = sum(v.nbytes for v in fitted.idata.posterior.data_vars.values()) / 1e6
    print(f"{args.draws} draws x {args.rows} records ({args.layout} layout), ZINB with 30 "
          f"reaches, K = {K} "
          f"(bins 0..{K} and {K + 1}+); posterior arrays {post_mb:.1f} MB; "
          f"chunk bound {checks.MAX_FLOATS:.0e} floats = {checks.MAX_FLOATS * 8 / 1e6:.0f} MB")
    jobs = {
        "expected frequencies (count_frequencies)": lambda: checks.count_frequencies(fitted),
        "zero check by reach (replicated data)": lambda: checks.zero_check(fitted),
        "randomized quantile residuals": lambda: checks.residuals(fitted),
        "zero sources": lambda: checks.zero_sources(fitted),
    }
    if args.only == "frequencies":
        jobs = dict(list(jobs.items())[:1])
    print(f"{'check':45s} {'wall s':>8s} {'CPU s':>8s} {'peak MB':>8s}")
    for name, fn in jobs.items():
        wall, cpu, peak = measure(fn, args.repeat)
        print(f"{name:45s} {wall:8.2f} {cpu:8.2f} {peak:8.1f}")


if __name__ == "__main__":
    main()
