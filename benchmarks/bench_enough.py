"""Draws until enough against the fixed 1,000 + 1,000, on the demo study's three candidates.

For each candidate, in one process (so every mode finds the same warm compile cache), the
fit is run in each mode, modes rotated between candidates so machine noise falls on all:

* ``fixed``: 1000 warm-up steps + 1000 draws per chain, PyMC's pm.sample (chains in
  processes, as before);
* ``enough``: 1000 warm-up steps, then blocks of 200 draws per chain until every reported
  R-hat and ESS passes (at most 4000), chains one after the other in this process;
* ``enough-w500``: the same with 500 warm-up steps (how much warm-up is needed).

Reported per fit: wall seconds of sampling, draws per chain, why it stopped, the smallest
bulk ESS and the largest R-hat, and min bulk ESS per second.

Run:  python benchmarks/bench_enough.py [--out results.json]

Example
-------
>>> row = time_fit(data, candidate, "enough")          # doctest: +SKIP
>>> row["draws"] % 200                                  # doctest: +SKIP
0
"""

from __future__ import annotations

import argparse
import dataclasses
import os
import sys
import time
import warnings

sys.path.insert(0, os.path.dirname(os.path.abspath(__file__)))
from bench_results import save_result  # noqa: E402

MODES = {
    "fixed": {"until_enough": False, "draws": 1000, "warmup_steps": 1000},
    "enough": {"until_enough": True, "warmup_steps": 1000},
    "enough-w500": {"until_enough": True, "warmup_steps": 500},
}


def time_fit(data, candidate, mode: str) -> dict:
    """Fit one candidate in one mode; its timings and diagnostics."""
    from bayeszi.fitting import api
    from bayeszi.model.enough import stop_reason

    spec = dataclasses.replace(candidate.spec, sampler=dataclasses.replace(
        candidate.spec.sampler, progressbar=False, **MODES[mode]))
    t0 = time.perf_counter()
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        fit = api.fit_spec(data, spec)
    wall = time.perf_counter() - t0
    table = fit.sampling.table
    min_ess = float(table[["bulk ESS"]].min().iloc[0])
    return {"model": candidate.name, "mode": mode, "wall_s": wall,
            "sample_s": fit.timing["sample_s"], "draws": int(fit.idata.posterior.sizes["draw"]),
            "stop": stop_reason(fit.idata), "min_bulk_ess": min_ess,
            "min_tail_ess": float(table["tail ESS"].min()),
            "max_rhat": float(table["R-hat"].max()),
            "min_bulk_ess_per_s": min_ess / fit.timing["sample_s"]}


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    ap.add_argument("--out", default=None, help="write the results as JSON here")
    a = ap.parse_args()
    from bayeszi.app.study import demo_study_path, load_study

    study = load_study(demo_study_path())
    data = study.load_data()
    study.check(data)
    # compile once before timing, so no mode pays the first compile
    time_fit(data, study.candidates[0], "enough-w500")
    order = list(MODES)
    rows = []
    for i, cand in enumerate(study.candidates):
        for mode in order[i % len(order):] + order[:i % len(order)]:
            row = time_fit(data, cand, mode)
            rows.append(row)
            print(f"{row['model']:16s} {mode:12s} sample {row['sample_s']:6.1f} s  "
                  f"draws {row['draws']:5d}  min bulk ESS {row['min_bulk_ess']:6.0f}  "
                  f"max R-hat {row['max_rhat']:.3f}  {row['stop']}", flush=True)
    save_result(a.out, {"rows": rows})


if __name__ == "__main__":
    main()
