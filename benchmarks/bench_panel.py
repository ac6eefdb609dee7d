"""A panel with thousands of groups: bayeszi against a plain hand-written PyMC model.

The data are benchmarks/bench_data.py's invented garden-feeder panel (:func:`make_panel`,
fixed seed): about 20,000 feeder-winters from 6,000 feeders (1 to 6 winters each), a ZINB
with feeder intercepts in both parts and continuous predictors (frost days, distance to
woodland, feeder height) and observation hours as exposure.

(a) ``plain``: the model as one would write it by hand in PyMC: predictors as they come,
    ``pm.ZeroInflatedNegativeBinomial``, non-centred feeder effects, ``pm.sample`` defaults
    (1,000 warm-up steps + 1,000 draws, 2 chains on 2 cores). It runs under a time cap
    (``--cap``); a fit that does not finish is reported as a bound, with how far it got
    (a progress file written every 100 iterations).
(b) ``bayeszi``: ``bayeszi.fit`` with its defaults (sampler ``auto``); its wall time covers
    everything a user waits for (design, model, compile, sampling, the pointwise
    log-likelihood, the diagnostics). Then ``fitted.loo()``.

Each fit runs in its own process, one after the other, in one run. Reported per fit: wall
and CPU seconds, minimum bulk ESS over the model's parameters (coefficients, dispersion,
group sds and every group effect) and where, ESS per wall second, divergences, leapfrog
steps per draw, peak resident memory (main process / largest worker), and for (b) the time
and peak memory of LOO (``ru_maxrss`` after it, and ``tracemalloc``'s peak during it).
A finished (a) gets LOO too, by ``pm.compute_log_likelihood`` and ``arviz.loo``.

``--gradient`` instead times one evaluation of the log density and its gradient: (a) with
PyTensor's C backend, (b) with the C backend and with numba (what nutpie runs), median of
interleaved rounds; with ``--variants`` also bayeszi's model without group effects (what
gathering 12,000 effects into records costs).

Run from the repository root (the machine should be otherwise idle; on a shared one the
seconds move with the load: compare within a run)::

    python benchmarks/bench_panel.py --runs bayeszi plain --cap 1500 --out benchmarks/results
    python benchmarks/bench_panel.py --gradient --variants
    python benchmarks/bench_panel.py --runs bayeszi:auto:until_enough=1:warmup_steps=300

Example
-------
>>> from bench_panel import plain_model                              # doctest: +SKIP
"""

from __future__ import annotations

import argparse
import json
import os
import resource
import signal
import statistics
import subprocess
import sys
import threading
import time
import tracemalloc
import warnings
from pathlib import Path

import numpy as np

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE))

from bench_data import PANEL_FORMULAS, make_panel  # noqa: E402

SEED = 20261203
N_FEEDERS = 6000
#: bayeszi's parameters whose minimum bulk ESS is reported
BAYESZI_PARAMETERS = ["counts_coef", "zeros_coef", "dispersion", "counts_sd_feeder",
                      "zeros_sd_feeder", "counts_effect_feeder", "zeros_effect_feeder"]
PLAIN_PARAMETERS = ["a", "b", "g0", "g", "sd_c", "sd_z", "alpha", "effect_c", "effect_z"]


def _spec_kwargs() -> dict:
    counts, zeros = PANEL_FORMULAS
    return {"counts": counts, "zeros": zeros, "family": "zinb", "exposure": "hours",
            "groups": "feeder"}


# ---------------------------------------------------------------------------- (a) plain PyMC
def plain_model(df):
    """The hand-written PyMC ZINB with feeder effects in both parts (predictors as given)."""
    import pandas as pd
    import pymc as pm

    codes, levels = pd.factorize(df["feeder"], sort=True)
    Xc = df[["frost_days", "woodland_km", "feeder_height"]].to_numpy(float)
    Xz = df[["woodland_km", "frost_days"]].to_numpy(float)
    log_e = np.log(df["hours"].to_numpy(float))
    with pm.Model(coords={"feeder": list(levels)}) as model:
        a = pm.Normal("a", 0.0, 2.0)
        b = pm.Normal("b", 0.0, 1.0, shape=Xc.shape[1])
        sd_c = pm.HalfNormal("sd_c", 1.0)
        z_c = pm.Normal("z_c", 0.0, 1.0, dims="feeder")
        g0 = pm.Normal("g0", 0.0, 1.5)
        g = pm.Normal("g", 0.0, 1.0, shape=Xz.shape[1])
        sd_z = pm.HalfNormal("sd_z", 1.5)
        z_z = pm.Normal("z_z", 0.0, 1.0, dims="feeder")
        alpha = pm.Exponential("alpha", 1.0)  # NB variance mu + alpha mu^2
        mu = pm.math.exp(a + pm.math.dot(Xc, b) + sd_c * z_c[codes] + log_e)
        p_extra = pm.math.invlogit(g0 + pm.math.dot(Xz, g) + sd_z * z_z[codes])
        # PyMC's n is 1/alpha; psi is the share of counts from the NB part
        pm.ZeroInflatedNegativeBinomial("y", psi=1.0 - p_extra, mu=mu, alpha=1.0 / alpha,
                                        observed=df["finches"].to_numpy())
    return model


def _plain_fit(df, seed: int, progress_file: str | None) -> dict:
    import pymc as pm

    t0 = time.perf_counter()
    model = plain_model(df)
    with model:
        idata = pm.sample(chains=2, cores=2, random_seed=seed, progressbar=False,
                          compute_convergence_checks=False,
                          callback=_progress_callback(progress_file))
    wall = time.perf_counter() - t0
    post = idata.posterior
    post["effect_c"] = post["sd_c"] * post["z_c"]
    post["effect_z"] = post["sd_z"] * post["z_z"]
    out = _summary(idata, PLAIN_PARAMETERS, wall, "pymc-nuts")

    def loo():
        import arviz as az

        with model:
            pm.compute_log_likelihood(idata, progressbar=False)
        return float(az.loo(idata).elpd_loo)

    out.update(_measure_loo(loo))
    return out


def _progress_callback(path: str | None):
    """Append "chain iteration seconds" to ``path`` at a chain's iterations 1, 10 and every
    100th (seconds from the start of sampling)."""
    if not path:
        return None
    t0 = time.perf_counter()
    done: dict[int, int] = {}

    def callback(trace, draw):
        done[draw.chain] = done.get(draw.chain, 0) + 1
        if done[draw.chain] in (1, 10) or done[draw.chain] % 100 == 0:
            with open(path, "a") as fh:
                fh.write(f"{draw.chain} {done[draw.chain]} {time.perf_counter() - t0:.0f}\n")

    return callback


# ---------------------------------------------------------------------------- (b) bayeszi
def _run_options(run: str) -> tuple[str, dict]:
    """``bayeszi[:sampler[:name=value...]]`` as the sampler and fit() options, e.g.
    ``bayeszi:auto:until_enough=1:warmup_steps=300``."""
    parts = run.split(":")
    sampler = parts[1] if len(parts) > 1 and parts[1] else "auto"
    options = {}
    for item in parts[2:]:
        key, value = item.split("=", 1)
        options[key] = bool(int(value)) if key == "until_enough" else int(value)
    return sampler, options


def _bayeszi_fit(df, seed: int, run: str) -> dict:
    import bayeszi as bz

    sampler, options = _run_options(run)
    t0 = time.perf_counter()
    fitted = bz.fit(df, **_spec_kwargs(), seed=seed, progressbar=False, sampler=sampler,
                    **options)
    wall = time.perf_counter() - t0
    out = _summary(fitted.idata, BAYESZI_PARAMETERS, wall,
                   fitted.idata.sample_stats.attrs["bayeszi_sampler"])
    out["timing"] = fitted.timing
    attrs = fitted.idata.sample_stats.attrs
    out["draws_per_chain"] = int(fitted.idata.posterior.sizes["draw"])
    out["stop"] = str(attrs.get("bayeszi_stop", "fixed number"))
    out["options"] = options
    out.update(_measure_loo(lambda: fitted.loo().elpd))
    return out


def _measure_loo(compute) -> dict:
    """Seconds, result and memory of ``compute()`` (LOO)."""
    rss_before = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024.0
    tracemalloc.start()
    t0 = time.perf_counter()
    elpd = compute()
    seconds = time.perf_counter() - t0
    _, peak = tracemalloc.get_traced_memory()
    tracemalloc.stop()
    return {"loo_s": seconds, "elpd_loo": elpd, "loo_traced_peak_mb": peak / 2**20,
            "peak_rss_before_loo_mb": rss_before,
            "peak_rss_after_loo_mb": resource.getrusage(resource.RUSAGE_SELF).ru_maxrss
            / 1024.0}


def _summary(idata, names: list[str], wall: float, sampler: str) -> dict:
    import arviz as az

    ess = az.ess(idata, var_names=names, method="bulk")
    per_var = {v: float(np.min(ess[v].values)) for v in names}
    stats = idata.sample_stats
    steps = stats["n_steps"] if "n_steps" in stats else stats.get("tree_size")
    me = resource.getrusage(resource.RUSAGE_SELF)
    kids = resource.getrusage(resource.RUSAGE_CHILDREN)
    min_ess = min(per_var.values())
    return {
        "sampler": sampler,
        "wall_s": wall,
        "cpu_s": me.ru_utime + me.ru_stime + kids.ru_utime + kids.ru_stime,
        "min_ess_bulk": min_ess,
        "min_ess_var": min(per_var, key=per_var.get),
        "ess_bulk_by_parameter": per_var,
        "ess_per_s": min_ess / wall,
        "divergences": int(np.asarray(stats["diverging"]).sum()),
        "mean_steps": float(np.asarray(steps).mean()) if steps is not None else float("nan"),
        "peak_rss_main_mb": me.ru_maxrss / 1024.0,
        "peak_rss_worker_mb": kids.ru_maxrss / 1024.0,
    }


def child(run: str, seed: int, progress_file: str | None) -> dict:
    """One fit in this process; returns its figures."""
    warnings.simplefilter("ignore")
    df, _ = make_panel(N_FEEDERS, seed=seed)
    if run == "plain":
        out = _plain_fit(df, seed, progress_file)
    else:
        out = _bayeszi_fit(df, seed, run)
    out.update(run=run, records=len(df), groups=int(df["feeder"].nunique()), seed=seed)
    return out


# ---------------------------------------------------------------------------- gradient timing
def _c_function(model):
    import pymc as pm

    fn = model.logp_dlogp_function(ravel_inputs=True)
    fn.set_extra_values({})
    point = model.initial_point()
    x = pm.blocking.DictToArrayBijection.map(
        {v.name: point[v.name] for v in model.value_vars}).data
    return fn, x


def _numba_function(model):
    import nutpie

    compiled = nutpie.compile_pymc_model(model)
    return compiled.logp_func, np.zeros(compiled.n_dim)


def _bayeszi_model(df, groups: bool = True):
    from bayeszi.fitting.api import make_spec
    from bayeszi.model.build import build_model
    from bayeszi.model.design import build_design
    from bayeszi.model.priors import resolve

    kw = _spec_kwargs()
    if not groups:
        kw.pop("groups")
    design = build_design(df, make_spec(**kw))
    return build_model(design, resolve(design, None)).model


def gradient(seed: int, rounds: int, variants: bool) -> dict:
    """Milliseconds per log density + gradient evaluation, median of interleaved rounds."""
    warnings.simplefilter("ignore")
    df, _ = make_panel(N_FEEDERS, seed=seed)
    makers = {"plain C": lambda: _c_function(plain_model(df)),
              "bayeszi C": lambda: _c_function(_bayeszi_model(df)),
              "bayeszi numba": lambda: _numba_function(_bayeszi_model(df))}
    if variants:
        makers["bayeszi numba, no group effects"] = \
            lambda: _numba_function(_bayeszi_model(df, groups=False))
    fns = {name: make() for name, make in makers.items()}
    times: dict[str, list[float]] = {k: [] for k in fns}
    for fn, x in fns.values():
        fn(x)
    calls = 100
    for _ in range(rounds):
        for name, (fn, x) in fns.items():
            t = time.perf_counter()
            for _ in range(calls):
                fn(x)
            times[name].append((time.perf_counter() - t) / calls * 1e3)
    row = {"records": len(df), "groups": int(df["feeder"].nunique()),
           "ms": {k: statistics.median(v) for k, v in times.items()},
           "ms_range": {k: [min(v), max(v)] for k, v in times.items()},
           "load_average": os.getloadavg()}
    print(json.dumps(row), flush=True)
    return row


# ---------------------------------------------------------------------------- driver
def _run_child(run: str, seed: int, cap: float, folder: Path) -> dict:
    progress = folder / f"progress_{run.replace(':', '_')}.txt"
    progress.unlink(missing_ok=True)
    cmd = [sys.executable, __file__, "--child", run, "--seed", str(seed),
           "--progress-file", str(progress)]
    t0 = time.perf_counter()
    # own process group, so that a fit stopped at the cap takes its worker processes along
    proc = subprocess.Popen(cmd, stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True,
                            start_new_session=True,
                            env={**os.environ, "PYTHONWARNINGS": "ignore"})
    watch = _MemoryWatch(proc.pid)
    watch.start()
    try:
        stdout, stderr = proc.communicate(timeout=cap)
    except subprocess.TimeoutExpired:
        watch.stop()
        os.killpg(proc.pid, signal.SIGKILL)
        proc.communicate()
        lines = progress.read_text().split("\n") if progress.exists() else []
        last = {}
        for ln in filter(None, lines):
            chain, it, sec = ln.split()
            last[int(chain)] = (int(it), int(sec))
        return {"run": run, "stopped_after_s": cap, "iterations_done_by_chain": last,
                "error": f"not finished within the cap of {cap:.0f} s",
                "polled_peak_rss_mb": watch.peaks(), "load_average_after": os.getloadavg()}
    watch.stop()
    res = subprocess.CompletedProcess(cmd, proc.returncode, stdout, stderr)
    lines = [ln for ln in res.stdout.splitlines() if ln.startswith("{")]
    if res.returncode != 0 or not lines:
        tail = (res.stderr or "").strip().splitlines()[-3:]
        return {"run": run, "error": " | ".join(tail)}
    out = json.loads(lines[-1])
    out["process_s"] = time.perf_counter() - t0
    out["polled_peak_rss_mb"] = watch.peaks()
    out["load_average_after"] = os.getloadavg()
    return out


class _MemoryWatch(threading.Thread):
    """Every 2 s, the resident memory of a fit's process and of its workers (the processes
    of its session), from /proc: peaks that survive a fit stopped at the cap."""

    def __init__(self, pid: int) -> None:
        super().__init__(daemon=True)
        self.pid, self.main, self.worker = pid, 0.0, 0.0
        self.done = threading.Event()

    def run(self) -> None:
        while not self.done.wait(2.0):
            for entry in Path("/proc").iterdir():
                if not entry.name.isdigit():
                    continue
                try:
                    stat = (entry / "stat").read_text().rsplit(")", 1)[1].split()
                    if int(stat[3]) != self.pid:  # session id
                        continue
                    rss = int(stat[21]) * os.sysconf("SC_PAGE_SIZE") / 2**20
                except (OSError, IndexError, ValueError):
                    continue
                if int(entry.name) == self.pid:
                    self.main = max(self.main, rss)
                else:
                    self.worker = max(self.worker, rss)

    def stop(self) -> None:
        self.done.set()

    def peaks(self) -> dict:
        return {"main": self.main, "largest_worker": self.worker}


def table(results: list[dict]) -> str:
    """A markdown table of the fits."""
    head = ("| run | sampler | wall s | CPU s | min bulk ESS (where) | ESS/s | div | "
            "steps/draw | peak MB main / worker | LOO s | peak MB after LOO | LOO alloc MB |")
    lines = [head, "|" + "---|" * (head.count("|") - 1)]
    for r in results:
        if "error" in r:
            done = r.get("iterations_done_by_chain")
            mem = r.get("polled_peak_rss_mb") or {}
            lines.append(f"| {r['run']} | - | > {r.get('stopped_after_s', 0):.0f} "
                         f"| - | {r['error'][:60]}; (iterations, s) per chain: {done} |"
                         + " - |" * 4 + f" {mem.get('main', 0):.0f} / "
                         f"{mem.get('largest_worker', 0):.0f} (polled) |" + " - |" * 3)
            continue
        lines.append(
            f"| {r['run']} | {r['sampler']} | {r['wall_s']:.0f} | {r['cpu_s']:.0f} | "
            f"{r['min_ess_bulk']:.0f} ({r['min_ess_var']}) | {r['ess_per_s']:.2f} | "
            f"{r['divergences']} | {r['mean_steps']:.1f} | {r['peak_rss_main_mb']:.0f} / "
            f"{r['peak_rss_worker_mb']:.0f} | {r['loo_s']:.1f} | "
            f"{r['peak_rss_after_loo_mb']:.0f} | {r['loo_traced_peak_mb']:.0f} |")
    return "\n".join(lines)


def main(argv: list[str] | None = None) -> int:
    """Command line: ``python benchmarks/bench_panel.py --help``."""
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    ap.add_argument("--runs", nargs="+", default=["bayeszi", "plain"],
                    help="bayeszi, bayeszi:pymc, bayeszi:nutpie, plain (in this order); "
                         "fit() options after the sampler, e.g. "
                         "bayeszi:auto:until_enough=1:warmup_steps=300")
    ap.add_argument("--seed", type=int, default=SEED)
    ap.add_argument("--cap", type=float, default=1500.0, help="seconds per fit")
    ap.add_argument("--out", default=None, help="folder for panel.json and panel.md")
    ap.add_argument("--gradient", action="store_true", help="time logp+gradient only")
    ap.add_argument("--variants", action="store_true",
                    help="with --gradient: also bayeszi's model without group effects")
    ap.add_argument("--rounds", type=int, default=7, help="interleaved rounds (--gradient)")
    ap.add_argument("--child", default=None, help=argparse.SUPPRESS)
    ap.add_argument("--progress-file", default=None, help=argparse.SUPPRESS)
    args = ap.parse_args(argv)
    if args.child:
        print(json.dumps(child(args.child, args.seed, args.progress_file)), flush=True)
        return 0
    folder = Path(args.out or ".")
    folder.mkdir(parents=True, exist_ok=True)
    if args.gradient:
        row = gradient(args.seed, args.rounds, args.variants)
        if args.out:
            _write(folder / "panel_gradient.json", json.dumps(row, indent=1))
        return 0
    results = []
    for run in args.runs:
        r = _run_child(run, args.seed, args.cap, folder)
        print(json.dumps(r), flush=True)
        results.append(r)
    text = table(results)
    print(text)
    if args.out:
        _write(folder / "panel.json", json.dumps(results, indent=1))
        _write(folder / "panel.md", text + "\n")
    return 0


def _write(path: Path, text: str) -> None:
    tmp = path.with_suffix(path.suffix + ".tmp")
    tmp.write_text(text)
    os.replace(tmp, path)


if __name__ == "__main__":
    raise SystemExit(main())
