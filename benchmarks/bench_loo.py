"""A big fit end to end: bayeszi's ZINB with reach effects on 200,000 records, then LOO.

The data are benchmarks/bench_data.py's invented crayfish survey (discrete layout by
default, so records pool into patterns). In one process the script fits with bayeszi's
defaults (2 chains x (1,000 warm-up steps + 1,000 draws); sampler ``auto``), then computes
``fitted.loo()`` and ``bayeszi.rank_models`` of the fit with itself, and reports:

- wall seconds of the fit (split into build and sampling, which includes the pointwise
  log-likelihood) and of LOO;
- min bulk ESS over the model's parameters and min ESS per wall second of the fit;
- how the log-likelihood is stored (per record or per pattern, bayeszi.engine.loglik) and its size;
- peak resident memory of the process after the fit and after LOO (``ru_maxrss``), of the
  sampler's worker processes, and the peak of Python-tracked allocations during LOO alone
  (``tracemalloc``, which sees NumPy's buffers).

Run from the repository root::

    python benchmarks/bench_loo.py --n 200000 --layout discrete --out benchmarks/results

Example
-------
>>> from bench_loo import run                                      # doctest: +SKIP
>>> run(20000, "discrete")["loo_peak_traced_mb"] < 2048             # doctest: +SKIP
True
"""

from __future__ import annotations

import argparse
import json
import os
import resource
import sys
import time
import tracemalloc
import warnings
from pathlib import Path

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE))

from bench_data import FORMULAS, make_data  # noqa: E402
from bench_fit import BAYESZI_PARAMETERS, N_GROUPS, SEED, _summary  # noqa: E402


def _rss_mb(who: int) -> float:
    return resource.getrusage(who).ru_maxrss / 1024.0


def run(n: int, layout: str = "discrete", seed: int = SEED, sampler: str = "auto") -> dict:
    """Fit, LOO and compare on ``n`` records; returns the figures (see the module doc)."""
    import bayeszi as bz
    from bayeszi.engine import loglik
    from bayeszi.model.patterns import find_patterns

    warnings.simplefilter("ignore")
    df, _ = make_data(n, layout, n_groups=N_GROUPS, seed=seed)
    counts, zeros = FORMULAS[layout]
    t0 = time.perf_counter()
    fitted = bz.fit(df, counts=counts, zeros=zeros, family="zinb", exposure="trap_nights",
                    groups="reach", seed=seed, progressbar=False, sampler=sampler)
    fit_s = time.perf_counter() - t0
    rss_fit = _rss_mb(resource.RUSAGE_SELF)
    summary = _summary(fitted.idata, BAYESZI_PARAMETERS, fit_s,
                       fitted.idata.sample_stats.attrs.get("bayeszi_sampler"))
    ll = fitted.idata.log_likelihood["y"]
    tracemalloc.start()
    t1 = time.perf_counter()
    est = fitted.loo()
    table = bz.rank_models({"a": fitted, "b": fitted})
    loo_s = time.perf_counter() - t1
    _, traced_peak = tracemalloc.get_traced_memory()
    tracemalloc.stop()
    return {
        "n": n, "layout": layout, "seed": seed, "sampler": summary["sampler"],
        "patterns": find_patterns(fitted.design).n_patterns,
        "fit_s": fit_s, "timing": fitted.timing,
        "min_ess_bulk": summary["min_ess_bulk"], "min_ess_var": summary["min_ess_var"],
        "ess_per_s": summary["ess_per_s"], "divergences": summary["divergences"],
        "mean_steps": summary["mean_steps"],
        "loglik_stored_per": loglik.stored_per(fitted.idata),
        "loglik_shape": list(ll.shape), "loglik_mb": ll.nbytes / 2**20,
        "loo_s": loo_s, "elpd_loo": est.elpd, "se": est.se, "p_loo": est.p_loo,
        "pareto_k_counts": {str(k): int(v) for k, v in est.k_counts().items()},
        "compare_rows": int(len(table)),
        "peak_rss_after_fit_mb": rss_fit,
        "peak_rss_after_loo_mb": _rss_mb(resource.RUSAGE_SELF),
        "peak_rss_workers_mb": _rss_mb(resource.RUSAGE_CHILDREN),
        "loo_peak_traced_mb": traced_peak / 2**20,
        "load_average": os.getloadavg(),
    }


def main(argv: list[str] | None = None) -> int:
    """Command line: ``python benchmarks/bench_loo.py --help``."""
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    ap.add_argument("--n", type=int, default=200_000)
    ap.add_argument("--layout", default="discrete", choices=sorted(FORMULAS))
    ap.add_argument("--seed", type=int, default=SEED)
    ap.add_argument("--sampler", default="auto")
    ap.add_argument("--out", default=None, help="folder for the JSON result")
    a = ap.parse_args(argv)
    res = run(a.n, a.layout, a.seed, a.sampler)
    text = json.dumps(res, indent=2, default=float)
    print(text)
    if a.out:
        os.makedirs(a.out, exist_ok=True)
        path = os.path.join(a.out, f"loo_{a.layout}_{a.n}.json")
        with open(path + ".tmp", "w") as fh:
            fh.write(text)
        os.replace(path + ".tmp", path)
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
