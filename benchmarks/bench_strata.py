"""Many strata: a plain loop of ``bayeszi.fit`` against the strata runner on a Dask cluster.

Data: the moth light-trap example's generator (examples/moth_traps/generate.py) at survey
size: 6 moth groups x 4 regions = 24 strata of 40 traps x 20 nights = 800 records each,
seed 20241203; two candidates per stratum (the example's ``zinb`` and ``zip``).

(a) ``loop``: one process fits every candidate of every stratum with ``bayeszi.fit`` (its
    defaults: 2 chains on 2 cores in parallel), one after the other; fits only, no report.
(b) ``runner``: ``bayeszi.app.stratarun.run_strata`` on a local Dask cluster of ``W``
    worker processes (each fit's chains one after the other on one core; compiled
    densities reused per worker), writing every stratum's full report (LOO, checks,
    scenarios, figures) and the overview. ``runner-noreuse``: the same with
    ``[cluster] reuse = false``.

Each run is a fresh Python process. Reported: wall seconds; per stratum, the seconds of its
task, of its fits and of pure sampling (PyMC's own clock of the draw loop,
``posterior.attrs["sampling_time"]``, summed over candidates) and of compiling; peak
resident memory of the whole process tree (sampled every 0.5 s with psutil).

Run from the repository root (the full size takes hours on a 2-core machine)::

    python benchmarks/bench_strata.py --runs loop runner --workers 2 --out benchmarks/results
    python benchmarks/bench_strata.py --strata 8 --draws 500 --runs loop runner \\
        --workers 1 2 --out benchmarks/results

Example
-------
>>> from bench_strata import survey                                  # doctest: +SKIP
>>> survey(24)["group"].nunique()                                    # doctest: +SKIP
6
"""

from __future__ import annotations

import argparse
import json
import os
import subprocess
import sys
import tempfile
import threading
import time
import warnings
from pathlib import Path

HERE = Path(__file__).resolve().parent
ROOT = HERE.parent
sys.path.insert(0, str(ROOT / "examples" / "moth_traps"))

SEED = 20241203
SITES, NIGHTS = 40, 20


def survey(n_strata: int):
    """The first ``n_strata`` group x region strata of the 24-stratum survey."""
    from generate import simulate

    data, _ = simulate(seed=SEED, sites=SITES, nights=NIGHTS, n_groups=6, n_regions=4,
                       island=False)
    keys = data[["group", "region"]].drop_duplicates().head(n_strata)
    return data.merge(keys, on=["group", "region"])


def write_study(folder: Path, n_strata: int, draws: int, reuse: bool) -> Path:
    """The example's study file over the benchmark's data, with ``draws`` and ``reuse``."""
    survey(n_strata).to_csv(folder / "data.csv", index=False)
    text = (ROOT / "examples" / "moth_traps" / "study.toml").read_text(encoding="utf-8")
    text = text.replace('data = "catches.csv"', 'data = "data.csv"')
    text = text.replace("draws = 1000", f"draws = {draws}")
    text = text.replace("warmup_steps = 1000", f"warmup_steps = {draws}")
    text = text.replace("reuse = true", f"reuse = {'true' if reuse else 'false'}")
    path = folder / "study.toml"
    path.write_text(text, encoding="utf-8")
    return path


class PeakMemory:
    """Peak resident memory (MB) of this process and all its descendants, sampled."""

    def __init__(self, every: float = 0.5) -> None:
        import psutil

        self.root, self.every, self.peak = psutil.Process(), every, 0.0
        self.stop = threading.Event()
        self.thread = threading.Thread(target=self._watch, daemon=True)

    def _watch(self) -> None:
        import psutil

        while not self.stop.is_set():
            total = 0
            for p in [self.root, *self.root.children(recursive=True)]:
                try:
                    total += p.memory_info().rss
                except (psutil.NoSuchProcess, psutil.AccessDenied):
                    pass
            self.peak = max(self.peak, total / 2**20)
            self.stop.wait(self.every)

    def __enter__(self) -> PeakMemory:
        self.thread.start()
        return self

    def __exit__(self, *exc) -> None:
        self.stop.set()
        self.thread.join()


def run_loop(study_path: Path) -> dict:
    """(a): bayeszi.fit per candidate per stratum, one process."""
    import bayeszi as bz
    from bayeszi.app.study import load_study

    study = load_study(str(study_path))
    data = study.load_data()
    out = {"run": "loop", "fits": []}
    t0 = time.perf_counter()
    with PeakMemory() as mem, warnings.catch_warnings():
        warnings.simplefilter("ignore")
        for (g, r), rows in data.groupby(["group", "region"], sort=True):
            rows = rows.reset_index(drop=True)
            for c in study.candidates:
                s = c.spec
                t1 = time.perf_counter()
                f = bz.fit(rows, counts=s.counts, zeros=s.zeros, family=s.family,
                           exposure=s.exposure, groups=list(s.groups), draws=s.sampler.draws,
                           warmup_steps=s.sampler.warmup_steps, chains=s.sampler.chains,
                           seed=s.sampler.seed, progressbar=False)
                out["fits"].append({
                    "stratum": f"{g} / {r}", "model": c.name,
                    "seconds": time.perf_counter() - t1,
                    "sampling_s": float(f.idata.posterior.attrs.get("sampling_time", 0.0))})
    out["wall_s"] = time.perf_counter() - t0
    out["peak_mb"] = mem.peak
    return out


def run_runner(study_path: Path, workers: int, label: str) -> dict:
    """(b): the strata runner on a local cluster of ``workers`` processes."""
    from bayeszi.app.stratarun import run_strata
    from bayeszi.app.study import load_study

    study = load_study(str(study_path))
    out_dir = Path(tempfile.mkdtemp(prefix="bench-strata-")) / "out"
    t0 = time.perf_counter()
    with PeakMemory() as mem, warnings.catch_warnings():
        warnings.simplefilter("ignore")
        result = run_strata(study, str(out_dir), workers=workers)
    wall = time.perf_counter() - t0
    manifest = json.loads((out_dir / "manifest.json").read_text(encoding="utf-8"))["strata"]
    return {"run": label, "workers": workers, "wall_s": wall, "peak_mb": mem.peak,
            "done": result.done, "failed": result.failed, "strata": manifest}


def summary(res: dict) -> dict:
    """Totals and per-stratum means of one run."""
    if res["run"] == "loop":
        fits = res["fits"]
        strata = {f["stratum"] for f in fits}
        sampling = sum(f["sampling_s"] for f in fits)
        return {"run": "loop", "workers": "-", "strata": len(strata), "wall_s": res["wall_s"],
                "per_stratum_s": sum(f["seconds"] for f in fits) / len(strata),
                "sampling_per_stratum_s": sampling / len(strata), "compile_s": None,
                "peak_mb": res["peak_mb"]}
    done = [e for e in res["strata"].values() if e["status"] == "done"]
    n = max(1, len(done))
    return {"run": res["run"], "workers": res["workers"], "strata": len(done),
            "wall_s": res["wall_s"],
            "per_stratum_s": sum(e["seconds"] for e in done) / n,
            "fits_per_stratum_s": sum(e.get("fits_s", 0.0) for e in done) / n,
            "sampling_per_stratum_s": sum(e.get("sampling_s", 0.0) for e in done) / n,
            "compile_s": sum(e.get("compile_s", 0.0) for e in done),
            "compiled": sum(e.get("compiled", 0) for e in done),
            "reused": sum(e.get("reused", 0) for e in done),
            "peak_mb": res["peak_mb"]}


def _one(args: argparse.Namespace) -> None:
    path = Path(args.study)
    if args.one == "loop":
        res = run_loop(path)
    else:
        res = run_runner(path, args.one_workers, args.one)
    print(json.dumps(res))


def main() -> None:
    p = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    p.add_argument("--strata", type=int, default=24)
    p.add_argument("--draws", type=int, default=1000, help="draws and warm-up steps per chain")
    p.add_argument("--runs", nargs="+", default=["loop", "runner"],
                   choices=["loop", "runner", "runner-noreuse"])
    p.add_argument("--workers", nargs="+", type=int, default=[2])
    p.add_argument("--out", default=None, help="folder for the JSON results")
    p.add_argument("--one", default=None, help=argparse.SUPPRESS)
    p.add_argument("--one-workers", type=int, default=2, help=argparse.SUPPRESS)
    p.add_argument("--study", default=None, help=argparse.SUPPRESS)
    args = p.parse_args()
    if args.one:
        return _one(args)
    results = []
    with tempfile.TemporaryDirectory() as tmp:
        for run in args.runs:
            reuse = run != "runner-noreuse"
            folder = Path(tmp) / run
            folder.mkdir()
            study = write_study(folder, args.strata, args.draws, reuse)
            for w in ([None] if run == "loop" else args.workers):
                cmd = [sys.executable, __file__, "--one", run, "--study", str(study)]
                if w is not None:
                    cmd += ["--one-workers", str(w)]
                env = {**os.environ, "PYTHONPATH": str(ROOT), "MPLBACKEND": "Agg"}
                text = subprocess.run(cmd, env=env, check=True, capture_output=True,
                                      text=True).stdout.strip().splitlines()[-1]
                res = json.loads(text)
                results.append(res)
                print(json.dumps(summary(res)), flush=True)
    if args.out:
        stamp = time.strftime("%Y-%m-%d")
        path = Path(args.out) / f"{stamp}_strata_{args.strata}x800_draws{args.draws}.json"
        path.write_text(json.dumps({"args": vars(args), "load_before": os.getloadavg(),
                                    "results": results}, indent=1, default=str) + "\n")
        print(f"written: {path}")


if __name__ == "__main__":
    main()
