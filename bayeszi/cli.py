"""The ``bayeszi`` command line.

Exit codes: 0 success, 2 user error (one line, no traceback), 1 internal failure.

Example
-------
>>> from bayeszi.cli import main
>>> main(["--version"])                      # doctest: +SKIP
"""

from __future__ import annotations

import argparse
import sys
import warnings
from collections.abc import Sequence

from bayeszi.errors import BayesziError


def _demo(args: argparse.Namespace) -> int:
    import bayeszi as bz
    from bayeszi.data import load_crayfish

    df = load_crayfish()
    print(f"bayeszi demo: crayfish trapping, {len(df)} trap-line checks on "
          f"{df['reach'].nunique()} reaches", flush=True)
    with warnings.catch_warnings():
        warnings.simplefilter("default")
        m = bz.fit(df, counts="crayfish ~ water_temp + C(substrate) + depth + canopy",
                   zeros="~ barrier", family="zinb", exposure="trap_nights", groups="reach",
                   draws=args.draws, tune=args.tune, chains=args.chains, seed=args.seed)
    print(m)
    return 0


def build_parser() -> argparse.ArgumentParser:
    """The argument parser with every subcommand."""
    from bayeszi import __version__

    p = argparse.ArgumentParser(prog="bayeszi", description="Bayesian regression for counts "
                                "with excess zeros.")
    p.add_argument("--version", action="version", version=f"bayeszi {__version__}")
    sub = p.add_subparsers(dest="command", required=True)
    d = sub.add_parser("demo", help="fit the shipped crayfish study and show the results")
    d.add_argument("--out", default="bayeszi-demo", help="output folder (default: %(default)s)")
    d.add_argument("--draws", type=int, default=1000)
    d.add_argument("--tune", type=int, default=1000)
    d.add_argument("--chains", type=int, default=2)
    d.add_argument("--seed", type=int, default=20261201)
    d.set_defaults(func=_demo)
    return p


def main(argv: Sequence[str] | None = None) -> int:
    """Run the command line; returns the exit code."""
    parser = build_parser()
    try:
        args = parser.parse_args(argv)
    except SystemExit as exc:  # argparse: 0 for --help/--version, 2 for usage errors
        return int(exc.code or 0)
    try:
        return int(args.func(args))
    except BayesziError as err:
        print(f"bayeszi: error: {err}", file=sys.stderr)
        return 2
    except KeyboardInterrupt:
        print("bayeszi: interrupted; nothing was written", file=sys.stderr)
        return 130
    except Exception as err:  # internal failure: say so plainly
        print(f"bayeszi: internal error ({type(err).__name__}: {err}); please report it",
              file=sys.stderr)
        return 1


if __name__ == "__main__":
    sys.exit(main())
