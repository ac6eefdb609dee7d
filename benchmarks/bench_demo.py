"""Where ``bayeszi demo`` spends its time, phase by phase, with a clean and a warm cache.

Each run is a fresh process (``python -m bayeszi.app.cli demo``), as a new user starts it.
Its progress lines (standard error) are time-stamped as they arrive, and the gaps between
them are the phases: start-up until the first line, each candidate's fit, the report's
context (LOO and shared answers), each report section, and writing. A *clean* run points
PyTensor's compile cache (``PYTENSOR_FLAGS=compiledir=...``) and numba's cache
(``NUMBA_CACHE_DIR``) at empty folders; a *warm* run reuses the folders of the clean run
before it. Runs alternate clean and warm so that machine noise falls on both.

Run:  python benchmarks/bench_demo.py [--repeat 2] [--draws N] [--out results.json]

Example
-------
>>> phases = time_demo(cache_dir, clean=True)          # doctest: +SKIP
>>> phases["total"] > phases["start-up"]               # doctest: +SKIP
True
"""

from __future__ import annotations

import argparse
import os
import shutil
import subprocess
import sys
import tempfile
import threading
import time

sys.path.insert(0, os.path.dirname(os.path.abspath(__file__)))
from bench_results import save_result  # noqa: E402


def _read_lines(stream, stamps: list[tuple[float, str]]) -> None:
    for line in iter(stream.readline, ""):
        stamps.append((time.perf_counter(), line.rstrip("\n")))


def _phase_name(line: str) -> str:
    """A short name of the phase a progress line starts."""
    text = line.strip()
    if text.startswith("warning:"):  # printed after the document is built: writing follows
        return "writing the report files"
    if text.startswith("fitting") or text.startswith("[") or " of " in text[:12]:
        return "fit: " + text[:60]
    return text[:60]


def time_demo(cache: str, clean: bool, extra: list[str] | None = None) -> dict[str, float]:
    """Run ``bayeszi demo`` once in a fresh process; seconds per phase and in total."""
    if clean and os.path.isdir(cache):
        shutil.rmtree(cache)
    os.makedirs(cache, exist_ok=True)
    env = {**os.environ, "PYTENSOR_FLAGS": f"compiledir={os.path.join(cache, 'pytensor')}",
           "NUMBA_CACHE_DIR": os.path.join(cache, "numba"), "MPLBACKEND": "Agg"}
    out = tempfile.mkdtemp(prefix="bench-demo-")
    stamps: list[tuple[float, str]] = []
    t0 = time.perf_counter()
    # run from the empty output folder: ``python -m`` puts the current directory first on
    # sys.path, so run from a checkout it would time that checkout whatever PYTHONPATH says
    proc = subprocess.Popen([sys.executable, "-m", "bayeszi.app.cli", "demo", "--out",
                             os.path.join(out, "report"), *(extra or [])],
                            stderr=subprocess.PIPE, stdout=subprocess.DEVNULL, text=True,
                            env=env, cwd=out)
    reader = threading.Thread(target=_read_lines, args=(proc.stderr, stamps))
    reader.start()
    rc = proc.wait()
    reader.join()
    total = time.perf_counter() - t0
    shutil.rmtree(out, ignore_errors=True)
    if rc != 0:
        raise RuntimeError(f"bayeszi demo failed ({rc}): {stamps[-3:]}")
    phases: dict[str, float] = {"start-up": stamps[0][0] - t0 if stamps else total}
    for (t_a, line), (t_b, _) in zip(stamps, [*stamps[1:], (t0 + total, "")], strict=True):
        name = _phase_name(line)
        phases[name] = phases.get(name, 0.0) + (t_b - t_a)
    phases["total"] = total
    return phases


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    ap.add_argument("--repeat", type=int, default=2)
    ap.add_argument("--draws", type=int, default=None,
                    help="override the demo's draws (default: as the demo study says)")
    ap.add_argument("--warmup-steps", type=int, default=None,
                    help="override the demo's warm-up steps")
    ap.add_argument("--vector-figures", action="store_true",
                    help="also write SVG figures (as before they were made optional)")
    ap.add_argument("--out", default=None, help="write the results as JSON here")
    a = ap.parse_args()
    extra = ["--draws", str(a.draws)] if a.draws else []
    extra += ["--warmup-steps", str(a.warmup_steps)] if a.warmup_steps else []
    extra += ["--vector-figures"] if a.vector_figures else []
    cache = tempfile.mkdtemp(prefix="bench-demo-cache-")
    runs = []
    for i in range(a.repeat):
        for clean in (True, False):  # a warm run always follows the clean run it reuses
            phases = time_demo(cache, clean, extra)
            runs.append({"run": i, "cache": "clean" if clean else "warm", "phases": phases})
            print(f"run {i} {'clean' if clean else 'warm '}: {phases['total']:.1f} s")
            for name, sec in phases.items():
                if name != "total" and sec >= 0.5:
                    print(f"    {sec:7.1f} s  {name}")
    shutil.rmtree(cache, ignore_errors=True)
    save_result(a.out, {"runs": runs, "args": extra})


if __name__ == "__main__":
    main()
