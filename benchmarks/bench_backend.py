"""Compile backends for a small fit: the demo's first candidate, clean and warm caches.

The fit is the demo study's first candidate (``zinb-reach``: ZINB with reach effects in
both parts, 2,000 invented records), 2 chains on 2 cores, 500 warm-up steps and a fixed
800 draws per chain (as many as draws until enough takes on it), the same seed for every
backend. Backends:

* ``pymc-c``: today's path: PyMC's NUTS step method, PyTensor's default C backend, each
  chain in a forked worker process (:mod:`bayeszi.model.chains`, as ``bayeszi demo``);
* ``pymc-numba`` / ``pymc-py``: the same with PyTensor's numba mode, or with no C compiler
  (``PYTENSOR_FLAGS=cxx=``: every operation in Python/NumPy, nothing compiled; over ten
  minutes of sampling here, so leave it out with ``--backends``);
* ``nutpie-numba``: ``nutpie.compile_pymc_model(model)`` (numba), chains as nutpie's threads;
* ``nutpie-jax``: ``backend="jax", gradient_backend="jax"``, JAX's persistent compilation
  cache on. JAX is not a dependency of bayeszi: install it aside
  (``pip install --target /tmp/jaxpkgs "jax[cpu]"``) and pass ``--jax-path /tmp/jaxpkgs``.

Each measurement is a fresh Python process. A *clean* run points every compile cache at an
empty folder (``PYTENSOR_FLAGS=compiledir=...``, ``NUMBA_CACHE_DIR``,
``JAX_COMPILATION_CACHE_DIR``); the *warm* run after it reuses them. Backends rotate between
repeats so that machine load falls on all. Reported per run: seconds to import and build
the model, to compile (up to a first gradient: JAX compiles on first call), to warm up and
draw, in all; seconds per leapfrog step per chain while sampling; one gradient evaluation
alone (median of 300, one thread); min bulk ESS over the posterior and per sampling second.

Figures and what was concluded: docs/performance.md, "Compile backends for small fits".

Run:  python benchmarks/bench_backend.py [--backends pymc-c nutpie-numba ...] [--repeat 2]
      [--jax-path /tmp/jaxpkgs] [--out results.json]

Example
-------
>>> row = measure("nutpie-numba")             # in a child process        # doctest: +SKIP
>>> row["compile_s"] < row["total_s"]                                      # doctest: +SKIP
True
"""

from __future__ import annotations

import argparse
import json
import os
import shutil
import subprocess
import sys
import tempfile
import time

sys.path.insert(0, os.path.dirname(os.path.abspath(__file__)))
from bench_results import save_result  # noqa: E402

WARMUP, DRAWS, CHAINS = 500, 800, 2
BACKENDS = ["pymc-c", "nutpie-numba", "nutpie-jax", "pymc-numba", "pymc-py"]
PYMC_MODES = {"pymc-c": None, "pymc-numba": "NUMBA", "pymc-py": None}


def _model():
    """The demo's first candidate as a PyMC model, and its sampler settings."""
    from bayeszi.app.study import demo_study_path, load_study
    from bayeszi.model.build import build_model
    from bayeszi.model.design import build_design
    from bayeszi.model.priors import resolve

    study = load_study(demo_study_path())
    data = study.load_data()
    study.check(data)
    spec = study.candidates[0].spec
    design = build_design(data, spec)
    return build_model(design, resolve(design, spec.priors)).model, spec.sampler


def _summary(idata, sample_s: float) -> dict:
    import arviz as az
    import numpy as np

    ess = az.ess(idata.posterior, method="bulk")
    min_ess = float(min(np.nanmin(ess[v].values) for v in ess.data_vars))
    return {"min_bulk_ess": min_ess, "min_bulk_ess_per_s": min_ess / sample_s,
            "divergences": int(idata.sample_stats["diverging"].sum()),
            "draws": int(idata.posterior.sizes["draw"])}


def _gradient_s(fn, n: int = 300) -> float:
    """Median seconds of one call of ``fn`` (after one untimed call)."""
    import statistics

    fn()
    times = []
    for _ in range(n):
        t = time.perf_counter()
        fn()
        times.append(time.perf_counter() - t)
    return statistics.median(times)


def _run_pymc(model, sampler, backend: str) -> dict:
    import numpy as np
    import pymc as pm
    from pymc.backends.ndarray import NDArray
    from pymc.blocking import DictToArrayBijection

    from bayeszi.model.chains import open_chains
    from bayeszi.model.enough import _as_idata, _quiet, _record

    mode = PYMC_MODES[backend]
    t0 = time.perf_counter()
    with model, _quiet():
        rngs = np.random.default_rng(sampler.seed).spawn(CHAINS)
        seeds = [int(r.integers(2**30)) for r in rngs]
        points, step = pm.init_nuts(
            init="jitter+adapt_diag", chains=CHAINS, model=model, random_seed=seeds,
            progressbar=False, target_accept=sampler.acceptance_target, tune=WARMUP,
            compile_kwargs={"mode": mode} if mode else None)
        t1 = time.perf_counter()
        runner = open_chains(step, points, rngs, WARMUP, processes=True)
        t2 = time.perf_counter()
        traces = [NDArray(model=model, test_point=points[0]) for _ in points]
        _record(traces, step, runner.draw(DRAWS))
        t3 = time.perf_counter()
        runner.close()
        idata = _as_idata(model, traces)
    q = DictToArrayBijection.map(points[0])
    steps = float(idata.sample_stats["n_steps"].sum("draw").mean())
    out = {"compile_s": t1 - t0, "warmup_s": t2 - t1, "draws_s": t3 - t2,
           "sample_s": t3 - t1, "s_per_step": (t3 - t2) / steps,
           "gradient_s": _gradient_s(lambda: step._logp_dlogp_func(q))}
    return {**out, **_summary(idata, t3 - t1)}


def _run_nutpie(model, sampler, backend: str) -> dict:
    import functools

    import numpy as np
    import nutpie

    kw = {"backend": "jax", "gradient_backend": "jax"} if backend == "nutpie-jax" else {}
    t0 = time.perf_counter()
    compiled = nutpie.compile_pymc_model(model, **kw)
    point = np.zeros(compiled.n_dim)
    if backend == "nutpie-jax":  # the function nutpie calls per gradient
        grad = functools.partial(compiled._make_logp_func(), **compiled._shared_data)
    else:  # the numba-compiled PyTensor function nutpie's callback wraps
        grad = compiled.logp_func
    grad(point)  # a first gradient: JAX compiles here
    t1 = time.perf_counter()
    idata = nutpie.sample(compiled, draws=DRAWS, tune=WARMUP, chains=CHAINS, cores=CHAINS,
                          seed=sampler.seed, progress_bar=False, save_warmup=True,
                          target_accept=sampler.acceptance_target)
    t2 = time.perf_counter()
    steps = float(idata.sample_stats["n_steps"].sum("draw").mean()
                  + idata.warmup_sample_stats["n_steps"].sum("draw").mean())
    out = {"compile_s": t1 - t0, "sample_s": t2 - t1, "s_per_step": (t2 - t1) / steps,
           "gradient_s": _gradient_s(lambda: grad(point))}
    return {**out, **_summary(idata, t2 - t1)}


def measure(backend: str) -> dict:
    """One measurement of ``backend`` in this process (caches as the environment says)."""
    import warnings

    warnings.simplefilter("ignore")
    t0 = time.perf_counter()
    model, sampler = _model()
    if backend.startswith("nutpie"):
        import nutpie  # noqa: F401
        if backend == "nutpie-jax":
            import jax  # noqa: F401
    build = time.perf_counter() - t0
    run = _run_nutpie if backend.startswith("nutpie") else _run_pymc
    row = run(model, sampler, backend)
    return {"backend": backend, "import_build_s": build, **row,
            "total_s": time.perf_counter() - t0}


def _child(backend: str, cache: str, clean: bool, jax_path: str | None) -> dict:
    """``measure(backend)`` in a fresh process; clean empties the caches first."""
    if clean and os.path.isdir(cache):
        shutil.rmtree(cache)
    os.makedirs(cache, exist_ok=True)
    flags = f"compiledir={os.path.join(cache, 'pytensor')}"
    if backend == "pymc-py":
        flags += ",cxx="
    here = os.path.dirname(os.path.dirname(os.path.abspath(__file__)))
    path = os.pathsep.join([here, *([jax_path] if jax_path else []),
                            os.environ.get("PYTHONPATH", "")]).rstrip(os.pathsep)
    env = {**os.environ, "PYTENSOR_FLAGS": flags, "PYTHONPATH": path,
           "NUMBA_CACHE_DIR": os.path.join(cache, "numba"),
           "JAX_COMPILATION_CACHE_DIR": os.path.join(cache, "jax"),
           "JAX_PERSISTENT_CACHE_MIN_COMPILE_TIME_SECS": "0",
           "JAX_PERSISTENT_CACHE_MIN_ENTRY_SIZE_BYTES": "-1", "MPLBACKEND": "Agg"}
    t0 = time.perf_counter()
    proc = subprocess.run([sys.executable, os.path.abspath(__file__), "--one", backend],
                          env=env, capture_output=True, text=True)
    wall = time.perf_counter() - t0
    if proc.returncode != 0:
        return {"backend": backend, "error": proc.stderr[-2000:], "process_s": wall}
    row = json.loads(proc.stdout.strip().splitlines()[-1])
    return {**row, "process_s": wall, "cache": "clean" if clean else "warm",
            "load_avg_1m": os.getloadavg()[0]}


def _line(row: dict) -> str:
    if "error" in row:
        return f"{row['backend']:13s} FAILED: {row['error'][-300:]}"
    return (f"{row['backend']:13s} {row['cache']:5s} process {row['process_s']:6.1f} s  "
            f"compile {row['compile_s']:6.1f}  sample {row['sample_s']:6.1f}  "
            f"grad {row['gradient_s'] * 1e6:7.0f} us  step {row['s_per_step'] * 1e6:7.0f} us  "
            f"ESS {row['min_bulk_ess']:5.0f} ({row['min_bulk_ess_per_s']:5.1f}/s)  "
            f"load {row['load_avg_1m']:.1f}")


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    ap.add_argument("--backends", nargs="+", default=BACKENDS, choices=BACKENDS)
    ap.add_argument("--repeat", type=int, default=2)
    ap.add_argument("--jax-path", default=None, help="folder JAX is installed in (aside)")
    ap.add_argument("--out", default=None, help="write the results as JSON here")
    ap.add_argument("--one", default=None, help=argparse.SUPPRESS)
    a = ap.parse_args()
    if a.one:
        print(json.dumps(measure(a.one)))
        return
    caches = {b: tempfile.mkdtemp(prefix=f"bench-backend-{b}-") for b in a.backends}
    rows = []
    for i in range(a.repeat):
        k = i % len(a.backends)
        for backend in a.backends[k:] + a.backends[:k]:
            for clean in (True, False):  # a warm run reuses the clean run's caches
                row = _child(backend, caches[backend], clean, a.jax_path)
                rows.append({"repeat": i, **row})
                print(_line(row), flush=True)
    for cache in caches.values():
        shutil.rmtree(cache, ignore_errors=True)
    save_result(a.out, {"warmup": WARMUP, "draws": DRAWS, "chains": CHAINS, "rows": rows})


if __name__ == "__main__":
    main()
