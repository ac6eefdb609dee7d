"""Warm ``bayeszi demo`` runs of two checkouts, alternating, on one shared warm cache.

For a change that should shorten the demo: each run is a fresh process of
:func:`bench_demo.time_demo` with ``PYTHONPATH`` pointing at one checkout (the demo is
started in its empty output folder, so the checkout named is the one timed). One untimed
clean run of the first checkout fills the compile cache; then the runs follow the order
given, e.g. ``new,old,old,new,new,old``. Reported per run: the whole demo, start-up, the
fits (every fit and sampling line), the time after the last fit, and LOO's part of it.

Run:  python benchmarks/bench_demo_ab.py --new /work/main --old /work/wt-before \\
          --order new,old,old,new,new,old --out results.json

Example
-------
>>> summarise({"total": 80.0, "start-up": 5.0, "fit: [1/1] x": 60.0})   # doctest: +SKIP
{'total': 80.0, 'start': 5.0, 'fits': 60.0, 'after_fits': 15.0, 'loo': 0.0}
"""

from __future__ import annotations

import argparse
import os
import sys
import tempfile

sys.path.insert(0, os.path.dirname(os.path.abspath(__file__)))

from bench_demo import time_demo  # noqa: E402
from bench_results import save_result  # noqa: E402

LOO_PHASE = "LOO and the answers the sections share"


def summarise(phases: dict[str, float]) -> dict[str, float]:
    """The whole demo, start-up, the fits, the time after the last fit and LOO's part."""
    fits = sum(v for k, v in phases.items() if k.startswith(("fit", "sampling")))
    return {"total": phases["total"], "start": phases["start-up"], "fits": fits,
            "after_fits": phases["total"] - phases["start-up"] - fits,
            "loo": phases.get(LOO_PHASE, 0.0)}


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    ap.add_argument("--new", required=True, help="checkout of the change")
    ap.add_argument("--old", required=True, help="checkout to compare with")
    ap.add_argument("--order", default="new,old,old,new,new,old")
    ap.add_argument("--out", default=None, help="write the results as JSON here")
    a = ap.parse_args()
    paths = {"new": os.path.abspath(a.new), "old": os.path.abspath(a.old)}
    cache = tempfile.mkdtemp(prefix="bench-demo-ab-cache-")
    runs = []
    for i, name in enumerate(["new"] + a.order.split(",")):
        os.environ["PYTHONPATH"] = paths[name]
        row = {"variant": name, **summarise(time_demo(cache, clean=i == 0))}
        if i == 0:
            continue  # fills the cache
        runs.append(row)
        print(" ".join(f"{k} {v:.1f}" if isinstance(v, float) else str(v)
                       for k, v in row.items()), flush=True)
    save_result(a.out, {"runs": runs, "args": vars(a)})


if __name__ == "__main__":
    main()
