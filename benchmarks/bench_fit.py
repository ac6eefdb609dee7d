"""Fit speed: a plain hand-written PyMC ZINB against bayeszi's fit of the same model.

Both fits see the same simulated data (benchmarks/bench_data.py, fixed seed): a ZINB with
reach intercepts in the counts and the zeros part, continuous or discrete covariates.

(a) ``plain``: the model as one would write it by hand in PyMC, covariates as they come,
    ``pm.ZeroInflatedNegativeBinomial``, non-centred reach effects, ``pm.sample`` defaults
    (1,000 warm-up steps + 1,000 draws, 2 chains on 2 cores).
(b) ``bayeszi``: ``bayeszi.fit`` with its defaults, with the sampler named after the colon
    (``bayeszi:pymc`` or ``bayeszi:nutpie``). Its wall time includes everything a user waits
    for: design, model, compile, sampling, the pointwise log-likelihood and the diagnostics.

Each fit runs in its own fresh Python process (so compile time and peak memory are its own)
and the runs of one size are interleaved (a, b, a, b, ...; the order rotates per repeat), so
that load from other work on the machine hits both alike; compare the ratios within a run.

Reported per fit: wall seconds, the minimum bulk ESS over the model's parameters
(coefficients, dispersion, group sds and every group effect), min ESS per wall second,
divergences, mean leapfrog steps per draw, peak resident memory of the main process and
of its largest worker process, and the ratio of each (b) to the (a) of the same repeat.

``--gradient`` instead times one evaluation of the log density and its gradient for both
models, interleaved in one process (sizes where a full fit is too slow).

Run from the repository root::

    python benchmarks/bench_fit.py --sizes 2000 --layouts continuous discrete \
        --runs plain bayeszi:pymc bayeszi:nutpie --repeats 2 --out benchmarks/results
    python benchmarks/bench_fit.py --gradient --sizes 2000 20000 200000

Example
-------
>>> from bench_fit import plain_model                                 # doctest: +SKIP
"""

from __future__ import annotations

import argparse
import json
import os
import resource
import statistics
import subprocess
import sys
import time
import warnings
from pathlib import Path

import numpy as np

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE))

from bench_data import FORMULAS, make_data  # noqa: E402

N_GROUPS = 30
SEED = 20240917
#: bayeszi's parameters whose minimum bulk ESS is reported (coefficients, dispersion, group
#: sds and every group effect)
BAYESZI_PARAMETERS = ["counts_coef", "zeros_coef", "dispersion", "counts_sd_reach",
                      "zeros_sd_reach", "counts_effect_reach", "zeros_effect_reach"]


# ---------------------------------------------------------------------------- (a) plain PyMC
def plain_model(df, layout: str):
    """The hand-written PyMC ZINB with reach effects in both parts (covariates as given)."""
    import pandas as pd
    import pymc as pm

    codes, levels = pd.factorize(df["reach"], sort=True)
    if layout == "continuous":
        X = np.column_stack([df["water_temp"], df["depth"], df["substrate"] == "gravel",
                             df["substrate"] == "silt"]).astype(float)
    else:
        X = pd.get_dummies(df[["substrate", "season"]], drop_first=True).to_numpy(float)
    log_e = np.log(df["trap_nights"].to_numpy(float))
    barrier = df["barrier"].to_numpy(float)
    with pm.Model(coords={"reach": list(levels)}) as model:
        a = pm.Normal("a", 0.0, 2.0)
        b = pm.Normal("b", 0.0, 1.0, shape=X.shape[1])
        sd_c = pm.HalfNormal("sd_c", 1.0)
        z_c = pm.Normal("z_c", 0.0, 1.0, dims="reach")
        g0 = pm.Normal("g0", 0.0, 1.5)
        g1 = pm.Normal("g1", 0.0, 1.5)
        sd_z = pm.HalfNormal("sd_z", 1.5)
        z_z = pm.Normal("z_z", 0.0, 1.0, dims="reach")
        alpha = pm.Exponential("alpha", 1.0)  # NB variance mu + alpha mu^2
        mu = pm.math.exp(a + pm.math.dot(X, b) + sd_c * z_c[codes] + log_e)
        p_extra = pm.math.invlogit(g0 + g1 * barrier + sd_z * z_z[codes])
        # PyMC's n is 1/alpha; psi is the share of counts from the NB part
        pm.ZeroInflatedNegativeBinomial("y", psi=1.0 - p_extra, mu=mu, alpha=1.0 / alpha,
                                        observed=df["crayfish"].to_numpy())
    return model


def _plain_fit(df, layout: str, seed: int) -> dict:
    import pymc as pm

    t0 = time.perf_counter()
    model = plain_model(df, layout)
    with model:
        idata = pm.sample(chains=2, cores=2, random_seed=seed, progressbar=False,
                          compute_convergence_checks=False, callback=_progress_callback())
    wall = time.perf_counter() - t0
    post = idata.posterior
    post["effect_c"] = post["sd_c"] * post["z_c"]
    post["effect_z"] = post["sd_z"] * post["z_z"]
    names = ["a", "b", "g0", "g1", "sd_c", "sd_z", "alpha", "effect_c", "effect_z"]
    return _summary(idata, names, wall, "pymc-nuts")


def _progress_callback():
    """With BENCH_PROGRESS set to a file name, append "chain iteration seconds" to it every
    100 iterations of the plain fit (to follow a fit that runs for hours); else None."""
    path = os.environ.get("BENCH_PROGRESS")
    if not path:
        return None
    t0 = time.perf_counter()
    done: dict[int, int] = {}

    def callback(trace, draw):
        done[draw.chain] = done.get(draw.chain, 0) + 1
        if done[draw.chain] % 100 == 0:
            with open(path, "a") as fh:
                fh.write(f"{draw.chain} {done[draw.chain]} {time.perf_counter() - t0:.0f}\n")

    return callback


# ---------------------------------------------------------------------------- (b) bayeszi
def _bayeszi_fit(df, layout: str, seed: int, sampler: str) -> dict:
    import bayeszi as bz

    counts, zeros = FORMULAS[layout]
    t0 = time.perf_counter()
    fitted = bz.fit(df, counts=counts, zeros=zeros, family="zinb", exposure="trap_nights",
                    groups="reach", seed=seed, progressbar=False, sampler=sampler)
    wall = time.perf_counter() - t0
    out = _summary(fitted.idata, BAYESZI_PARAMETERS, wall,
                   fitted.idata.sample_stats.attrs["bayeszi_sampler"])
    out["timing"] = fitted.timing
    return out


def _summary(idata, names: list[str], wall: float, sampler: str) -> dict:
    import arviz as az

    ess = az.ess(idata, var_names=names, method="bulk")
    per_var = {v: float(np.min(ess[v].values)) for v in names}
    stats = idata.sample_stats
    steps = stats["n_steps"] if "n_steps" in stats else stats.get("tree_size")
    self_kb = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss
    child_kb = resource.getrusage(resource.RUSAGE_CHILDREN).ru_maxrss
    min_ess = min(per_var.values())
    return {
        "sampler": sampler,
        "wall_s": wall,
        "min_ess_bulk": min_ess,
        "min_ess_var": min(per_var, key=per_var.get),
        "ess_per_s": min_ess / wall,
        "divergences": int(np.asarray(stats["diverging"]).sum()),
        "mean_steps": float(np.asarray(steps).mean()) if steps is not None else float("nan"),
        "peak_rss_main_mb": self_kb / 1024.0,
        "peak_rss_worker_mb": child_kb / 1024.0,
    }


def child(run: str, n: int, layout: str, seed: int) -> dict:
    """One fit in this process; returns its figures."""
    warnings.simplefilter("ignore")
    df, _ = make_data(n, layout, n_groups=N_GROUPS, seed=seed)
    if run == "plain":
        out = _plain_fit(df, layout, seed)
    else:
        out = _bayeszi_fit(df, layout, seed, run.split(":", 1)[1] if ":" in run else "auto")
    out.update(run=run, n=n, layout=layout, seed=seed)
    return out


# ---------------------------------------------------------------------------- gradient timing
def _grad_fn(model):
    import pymc as pm

    fn = model.logp_dlogp_function(ravel_inputs=True)
    fn.set_extra_values({})
    point = model.initial_point()
    x = pm.blocking.DictToArrayBijection.map(
        {v.name: point[v.name] for v in model.value_vars}).data
    return fn, x


def _bayeszi_model(df, layout: str, rowwise: bool = False):
    """bayeszi's model; ``rowwise=True`` rebuilds the earlier likelihood for comparison:
    no patterns, and the family's generic per-row density (one switch per row)."""
    import bayeszi.model.build as B
    from bayeszi.base.spec import ModelSpec
    from bayeszi.families import get_family
    from bayeszi.model.design import build_design
    from bayeszi.model.patterns import find_patterns
    from bayeszi.model.priors import resolve

    counts, zeros = FORMULAS[layout]
    spec = ModelSpec(counts=counts, zeros=zeros, family="zinb", exposure="trap_nights",
                     groups=("reach",))
    design = build_design(df, spec)
    priors = resolve(design, None)
    if not rowwise:
        return B.build_model(design, priors)  # a BuiltModel: the model and its patterns
    fam = get_family("zinb")
    saved = B.find_patterns, B.pattern_logp

    def identity(d):
        pats = find_patterns(d, min_saving=2.0)  # never pools
        pats.inverse = np.arange(d.n)
        pats.design = d
        return pats

    B.find_patterns = identity
    B.pattern_logp = lambda name, pats: (lambda v, ec, ez, la: fam.logp(design.y, ec, ez, la))
    try:
        return B.build_model(design, priors).model
    finally:
        B.find_patterns, B.pattern_logp = saved


def gradient(sizes: list[int], layouts: list[str], rounds: int, seed: int,
             before: bool = False) -> list[dict]:
    """Time logp + gradient of (a), (b) and optionally the earlier (b), round by round."""
    warnings.simplefilter("ignore")
    rows = []
    for n in sizes:
        for layout in layouts:
            df, _ = make_data(n, layout, n_groups=N_GROUPS, seed=seed)
            makers = {"plain": (plain_model, {}), "bayeszi": (_bayeszi_model, {})}
            if before:
                makers["bayeszi_rowwise"] = (_bayeszi_model, {"rowwise": True})
            fns, compile_s, n_pat = {}, {}, None
            for name, (make, kw) in makers.items():
                t0 = time.perf_counter()
                model = make(df, layout, **kw)
                if hasattr(model, "likelihood"):  # bayeszi's BuiltModel
                    n_pat, model = model.n_rows, model.model
                fns[name] = _grad_fn(model)
                compile_s[name] = time.perf_counter() - t0
            calls = max(3, int(2e6 // n))
            times: dict[str, list[float]] = {k: [] for k in fns}
            for fn, x in fns.values():
                fn(x)
            for _ in range(rounds):
                for name, (fn, x) in fns.items():
                    t = time.perf_counter()
                    for _ in range(calls):
                        fn(x)
                    times[name].append((time.perf_counter() - t) / calls * 1e3)
            row = {"n": n, "layout": layout, "patterns": n_pat}
            for name, ts in times.items():
                row[f"{name}_ms"] = statistics.median(ts)
                row[f"{name}_build_compile_s"] = compile_s[name]
                if name != "plain":
                    ratios = [a / b for a, b in zip(times["plain"], ts, strict=True)]
                    row[f"ratio_{name}"] = statistics.median(ratios)
                    row[f"ratio_{name}_range"] = [min(ratios), max(ratios)]
            print(json.dumps(row), flush=True)
            rows.append(row)
    return rows


# ---------------------------------------------------------------------------- driver
def _run_child(run: str, n: int, layout: str, seed: int, timeout: float) -> dict:
    cmd = [sys.executable, __file__, "--child", run, "--n", str(n), "--layout", layout,
           "--seed", str(seed)]
    t0 = time.perf_counter()
    try:
        res = subprocess.run(cmd, capture_output=True, text=True, timeout=timeout,
                             env={**os.environ, "PYTHONWARNINGS": "ignore"})
    except subprocess.TimeoutExpired:
        return {"run": run, "n": n, "layout": layout, "error": f"timeout after {timeout:.0f} s"}
    lines = [ln for ln in res.stdout.splitlines() if ln.startswith("{")]
    if res.returncode != 0 or not lines:
        tail = (res.stderr or "").strip().splitlines()[-3:]
        return {"run": run, "n": n, "layout": layout, "error": " | ".join(tail)}
    out = json.loads(lines[-1])
    out["process_s"] = time.perf_counter() - t0
    out["load_average_1min_after"] = os.getloadavg()[0]
    return out


def table(results: list[dict]) -> str:
    """A markdown table of the fits, with ratios against the plain fit of the same repeat."""
    head = ("| rows | layout | repeat | run | sampler | wall s | min bulk ESS | ESS/s | "
            "ratio ESS/s | ratio wall | div | steps/draw | peak MB main / worker |")
    lines = [head, "|" + "---|" * (head.count("|") - 1)]
    base = {(r["n"], r["layout"], r.get("repeat")): r for r in results
            if r.get("run") == "plain" and "error" not in r}
    for r in results:
        if "error" in r:
            lines.append(f"| {r['n']} | {r['layout']} | {r.get('repeat')} | {r['run']} | "
                         f"failed: {r['error'][:80]} |" + " |" * 8)
            continue
        a = base.get((r["n"], r["layout"], r.get("repeat")))
        ratio = f"{r['ess_per_s'] / a['ess_per_s']:.2f}" if a else "-"
        wall_ratio = f"{a['wall_s'] / r['wall_s']:.2f}" if a else "-"
        lines.append(
            f"| {r['n']} | {r['layout']} | {r.get('repeat')} | {r['run']} | {r['sampler']} | "
            f"{r['wall_s']:.1f} | {r['min_ess_bulk']:.0f} ({r['min_ess_var']}) | "
            f"{r['ess_per_s']:.1f} | {ratio} | {wall_ratio} | {r['divergences']} | "
            f"{r['mean_steps']:.1f} | {r['peak_rss_main_mb']:.0f} / "
            f"{r['peak_rss_worker_mb']:.0f} |")
    return "\n".join(lines)


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    ap.add_argument("--sizes", type=int, nargs="+", default=[2000])
    ap.add_argument("--layouts", nargs="+", default=["continuous", "discrete"],
                    choices=sorted(FORMULAS))
    ap.add_argument("--runs", nargs="+", default=["plain", "bayeszi:auto"],
                    help="plain, bayeszi:auto, bayeszi:pymc, bayeszi:nutpie")
    ap.add_argument("--repeats", type=int, default=1)
    ap.add_argument("--seed", type=int, default=SEED)
    ap.add_argument("--timeout", type=float, default=3600.0, help="seconds per fit")
    ap.add_argument("--out", default=None, help="folder for results.json and results.md")
    ap.add_argument("--gradient", action="store_true", help="time logp+gradient only")
    ap.add_argument("--rounds", type=int, default=7, help="interleaved rounds (--gradient)")
    ap.add_argument("--before", action="store_true",
                    help="with --gradient: also time the earlier row-by-row likelihood")
    ap.add_argument("--child", default=None, help=argparse.SUPPRESS)
    ap.add_argument("--n", type=int, default=None, help=argparse.SUPPRESS)
    ap.add_argument("--layout", default=None, help=argparse.SUPPRESS)
    args = ap.parse_args(argv)
    if args.child:
        print(json.dumps(child(args.child, args.n, args.layout, args.seed)), flush=True)
        return 0
    if args.gradient:
        rows = gradient(args.sizes, args.layouts, args.rounds, args.seed, args.before)
        if args.out:
            Path(args.out).mkdir(parents=True, exist_ok=True)
            Path(args.out, "gradient.json").write_text(json.dumps(rows, indent=1))
        return 0
    results = []
    for rep in range(args.repeats):
        for n in args.sizes:
            for layout in args.layouts:
                k = rep % len(args.runs)
                for run in args.runs[k:] + args.runs[:k]:
                    r = _run_child(run, n, layout, args.seed, args.timeout)
                    r["repeat"] = rep
                    print(json.dumps(r), flush=True)
                    results.append(r)
    text = table(results)
    print(text)
    if args.out:
        Path(args.out).mkdir(parents=True, exist_ok=True)
        Path(args.out, "results.json").write_text(json.dumps(results, indent=1))
        Path(args.out, "results.md").write_text(text + "\n")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
