"""The ``bayeszi`` command line: ``run``, ``demo``, ``fit``, ``predict`` and ``report``.

Exit codes: 0 success; 2 user error (a one-line message, no traceback: a bad study file, a
missing column, an unwritable output folder, a bad flag, an unreachable scheduler); 3 a
study with strata ran but some strata failed (the others were written; ``--resume`` retries
the failed ones); 1 internal failure (a bug: the message says so; set ``BAYESZI_DEBUG=1``
to see the traceback); 130 interrupted (Ctrl-C). Progress and warnings go to
standard error, results (the fit summary, predictions without ``--out``) to standard output.
See docs/cli.md.

Example
-------
>>> from bayeszi.app.cli import main
>>> main(["--version"])                      # doctest: +SKIP
bayeszi 0.1.0
0
"""

from __future__ import annotations

import argparse
import atexit
import dataclasses
import os
import shlex
import sys
import tempfile
import warnings
from collections.abc import Sequence
from typing import Any, NoReturn

from bayeszi.base.errors import BayesziError
from bayeszi.base.renamed import refuse_renamed_flags

__all__ = ["build_parser", "main"]

DEMO_OUT = "bayeszi-demo"


class _Parser(argparse.ArgumentParser):
    """An argument parser whose usage errors are one line and exit with code 2."""

    def error(self, message: str) -> NoReturn:
        self.exit(2, f"{self.prog}: error: {message} (see {self.prog} --help)\n")


class _Console:
    """Progress and warnings on standard error, one line each; silent with ``--quiet``."""

    def __init__(self, quiet: bool = False) -> None:
        self.quiet = quiet

    def __call__(self, text: str) -> None:
        if not self.quiet:
            print(text, file=sys.stderr, flush=True)

    def show_warning(self, message: Any, category: type, filename: str, lineno: int,
                     file: Any = None, line: str | None = None) -> None:
        if issubclass(category, (DeprecationWarning, FutureWarning)):
            return
        print(f"bayeszi: warning: {' '.join(str(message).split())}", file=sys.stderr,
              flush=True)


def _command_line(argv: Sequence[str]) -> str:
    return "bayeszi " + shlex.join(list(argv))


# ---------------------------------------------------------------------- subcommands
def _overrides(args: argparse.Namespace) -> dict[str, Any]:
    out = {"draws": args.draws, "warmup_steps": args.warmup_steps, "chains": args.chains,
           "cores": args.cores}
    if getattr(args, "draws_limit", None) is not None:
        out.update(draws_limit=args.draws_limit, until_enough=True)
    return out


def _run(args: argparse.Namespace) -> int:
    from bayeszi.app.report import run_study
    from bayeszi.app.study import load_study

    # each fit's progress while it samples (in place on a terminal, else a line every 30 s)
    study = load_study(args.study).with_sampler(
        **_overrides(args), progressbar=not args.quiet).with_preview(args.preview)
    if study.strata:
        return _run_strata(args, study)
    asked = [f for f, v in (("--scheduler", getattr(args, "scheduler", None)),
                            ("--workers", getattr(args, "workers", None)),
                            ("--resume", getattr(args, "resume", False))) if v]
    if asked:
        raise BayesziError(f"{' and '.join(asked)} apply to studies with strata; this study "
                           "names none (add strata = [\"COLUMN\"] to [study], see "
                           "docs/strata.md)")
    dest = run_study(study, args.out, command=args.command_line, progress=args.console,
                     save_fits=args.save_fits, exact_refits=args.exact_refits or None,
                     vector_figures=args.vector_figures or None)
    print(os.path.join(dest, "report.html"))
    return 0


#: exit code of a strata run in which some strata failed (the others were written)
STRATA_FAILED = 3


def _run_strata(args: argparse.Namespace, study: Any) -> int:
    from bayeszi.app.stratarun import run_strata

    if args.save_fits:
        raise BayesziError("--save-fits is not offered for studies with strata; each stratum's "
                           "report folder holds its tables and figures")
    result = run_strata(study, args.out, scheduler=args.scheduler, workers=args.workers,
                        resume=args.resume, command=args.command_line, progress=args.console)
    print(result.overview)
    if result.failed:
        args.console(f"bayeszi: {result.failed} stratum(s) failed (reasons in the overview and "
                     "manifest.json); rerun with --resume to retry them")
        return STRATA_FAILED
    return 0


def _demo(args: argparse.Namespace) -> int:
    from bayeszi.app.study import demo_study_path

    args.study = demo_study_path()
    return _run(args)


def _check_file_destination(path: str, flag: str) -> str:
    path = os.path.abspath(path)
    folder = os.path.dirname(path)
    if os.path.isdir(path):
        raise BayesziError(f"{flag} {path!r} is a folder; give a file name")
    if not os.path.isdir(folder):
        raise BayesziError(f"cannot write {flag} {path!r}: folder {folder!r} does not exist")
    from bayeszi.engine.archive import check_writable

    # A real probe file: os.access says yes to root even where nothing can be written.
    return check_writable(path, what=f"{flag} output")


def _fit(args: argparse.Namespace) -> int:
    from bayeszi.app.report.pipeline import save_fit
    from bayeszi.app.study import read_table, sha256_of
    from bayeszi.fitting.api import make_spec
    from bayeszi.fitting.candidates import Candidate, check_candidates, fit_each

    out = _check_file_destination(args.out, "--out")
    data = read_table(args.data)
    spec = make_spec(args.counts, args.zeros, args.family, exposure=args.exposure,
                     offset=args.offset, groups=args.groups or None, draws=args.draws,
                     warmup_steps=args.warmup_steps, chains=args.chains, cores=args.cores,
                     acceptance_target=args.acceptance_target, seed=args.seed)
    spec = dataclasses.replace(spec, sampler=dataclasses.replace(
        spec.sampler, progressbar=not args.quiet))  # progress while it samples
    name = args.name or spec.family
    checked = check_candidates(data, [Candidate(name, spec)], noun="model")  # before sampling
    args.console(f"fitting {spec.family} to {len(data)} records of {args.data} ...")
    fitted = fit_each(data, checked).fits[name]
    provenance = {"data_path": os.path.abspath(args.data), "data_sha256": sha256_of(args.data),
                  "command": args.command_line, "model": name}
    save_fit(fitted, out, provenance)
    print(fitted)
    args.console(f"saved fit: {out}")
    return 0


def _predict(args: argparse.Namespace) -> int:
    from bayeszi.answers.predict import predict
    from bayeszi.app.study import read_table
    from bayeszi.fitting import api as bz

    out = _check_file_destination(args.out, "--out") if args.out else None
    fitted = bz.load(args.saved)
    data = read_table(args.new)
    whats = args.what or ["mean"]
    table = predict(fitted, data, what=whats, groups=args.groups, interval=args.interval,
                    k=args.k, exposure=args.exposure, draws=args.draws, seed=args.seed)
    stats_cols = [c for c in table.columns if c not in ("quantity", "groups")]
    wide = data.copy()
    n = len(data)
    for j, w in enumerate(whats):
        block = table.iloc[j * n:(j + 1) * n]
        for c in stats_cols:
            wide[w if c == "mean" else f"{w} {c}"] = block[c].to_numpy()
    wide["groups"] = table["groups"].iloc[0]
    text = wide.to_csv(index=False)
    if out is None:
        sys.stdout.write(text)
        return 0
    fd, tmp = tempfile.mkstemp(prefix=".bayeszi-", suffix=".csv.tmp", dir=os.path.dirname(out))
    try:
        with os.fdopen(fd, "w", encoding="utf-8", newline="") as fh:
            fh.write(text)
        os.replace(tmp, out)
    except BaseException:
        if os.path.exists(tmp):
            os.remove(tmp)
        raise
    args.console(f"predictions for {n} rows written: {out}")
    return 0


def _report(args: argparse.Namespace) -> int:
    from bayeszi.app.report import report_saved
    from bayeszi.base.options import interval_bounds

    interval_bounds(args.interval, name="--interval")
    dest = report_saved(args.saved, args.out, command=args.command_line, title=args.title,
                        interval=args.interval, progress=args.console,
                        exact_refits=args.exact_refits, vector_figures=args.vector_figures,
                        residuals_against=args.residuals_against)
    print(os.path.join(dest, "report.html"))
    return 0


# ---------------------------------------------------------------------- parser
def _sampler_flags(p: argparse.ArgumentParser, defaults: bool) -> None:
    note = "" if defaults else " (default: as the study file says)"
    p.add_argument("--draws", type=int, metavar="N", default=1000 if defaults else None,
                   help="posterior draws per chain" + (" (default: %(default)s)" if defaults
                                                       else note))
    p.add_argument("--warmup-steps", type=int, metavar="N",
                   default=1000 if defaults else None,
                   help="warm-up (adaptation) steps per chain"
                   + (" (default: %(default)s)" if defaults else note))
    p.add_argument("--chains", type=int, metavar="N", default=2 if defaults else None,
                   help="chains" + (" (default: %(default)s)" if defaults else note))
    p.add_argument("--cores", type=int, metavar="N", default=None,
                   help="cores to run chains on (default: one per chain, up to the machine's)")
    if not defaults:
        p.add_argument("--draws-limit", type=int, metavar="N", default=None,
                       help="draw in blocks until R-hat and ESS pass, at most N per chain "
                       "(a study file does this by default, up to 4000; --draws N asks for a "
                       "fixed number instead)")


def build_parser() -> argparse.ArgumentParser:
    """The argument parser with every subcommand.

    Example
    -------
    >>> build_parser().parse_args(["report", "a.nc", "--out", "r"]).interval
    0.9
    """
    from bayeszi.base.version import __version__

    p = _Parser(prog="bayeszi", description="Bayesian regression for counts with excess "
                "zeros: fit candidate models, compare and check them, and write a report.",
                epilog="Run 'bayeszi COMMAND --help' for a command's options; docs/cli.md has "
                "examples.")
    p.add_argument("--version", action="version", version=f"bayeszi {__version__}")
    sub = p.add_subparsers(dest="subcommand", required=True, metavar="COMMAND",
                           parser_class=_Parser)
    for add in (_add_run, _add_demo, _add_fit, _add_predict, _add_report):
        add(sub)
    return p


def _add_run(sub: Any) -> None:
    r = sub.add_parser("run", help="fit every model of a study file and write the report",
                       description="Fit every candidate model of STUDY (a TOML study file, "
                       "see docs/study-file.md), compare them by LOO, check them, predict the "
                       "scenarios and write the report folder DIR.")
    r.add_argument("study", metavar="STUDY.toml", help="the study file")
    r.add_argument("--out", required=True, metavar="DIR", help="report folder to write "
                   "(replaced if it holds an earlier bayeszi report)")
    _common_run_flags(r)
    r.add_argument("--scheduler", metavar="ADDRESS", default=None,
                   help="studies with strata: run them on the Dask cluster whose scheduler is "
                   "at ADDRESS, e.g. tcp://10.0.0.5:8786 (default: the study's [cluster], else "
                   "a local cluster sized to this machine)")
    r.add_argument("--workers", type=int, metavar="N", default=None,
                   help="studies with strata: worker processes of the local cluster "
                   "(default: one per core a fit uses)")
    r.add_argument("--resume", action="store_true",
                   help="studies with strata: keep the strata DIR already holds finished "
                   "(same data, same study) and run only the rest")
    r.set_defaults(func=_run)


def _add_demo(sub: Any) -> None:
    d = sub.add_parser("demo", help="run the shipped crayfish study",
                       description="Run the shipped crayfish study (invented trapping data on "
                       "40 stream reaches: ZINB with reach groups against two rivals) and "
                       "write its report. It takes a few minutes on two cores.")
    d.add_argument("--out", default=DEMO_OUT, metavar="DIR",
                   help="report folder to write (default: %(default)s)")
    _common_run_flags(d)
    d.set_defaults(func=_demo)


def _add_fit(sub: Any) -> None:
    from bayeszi.families import FAMILY_NAMES

    f = sub.add_parser("fit", help="fit one model from flags and save it",
                       description="Fit one model to a CSV file and save the fit (netCDF), "
                       "for 'bayeszi predict' and 'bayeszi report'.")
    f.add_argument("--data", required=True, metavar="CSV", help="the data (a CSV file)")
    f.add_argument("--counts", required=True, metavar="FORMULA",
                   help="counts formula with the response, e.g. 'crayfish ~ depth + canopy'")
    f.add_argument("--zeros", default="~ 1", metavar="FORMULA",
                   help="zeros formula, e.g. '~ barrier' (default: %(default)s)")
    f.add_argument("--family", default="zinb", help=f"one of {', '.join(FAMILY_NAMES)} "
                   "(default: %(default)s)")
    f.add_argument("--exposure", metavar="COLUMN", help="effort column (enters as log offset)")
    f.add_argument("--offset", metavar="COLUMN", help="a ready-made log-offset column")
    f.add_argument("--groups", nargs="+", metavar="COLUMN", help="grouping column(s)")
    _sampler_flags(f, defaults=True)
    f.add_argument("--acceptance-target", type=float, default=0.9, metavar="P",
                   help="the acceptance rate the warm-up tunes the step size to, in [0.5, 1); "
                        "raise toward 0.99 after divergences (default: %(default)s)")
    f.add_argument("--seed", type=int, default=None, help="random seed")
    f.add_argument("--name", default=None, help="the model's name in later reports "
                   "(default: the family)")
    f.add_argument("--out", required=True, metavar="FIT.nc", help="where to save the fit")
    f.add_argument("--quiet", action="store_true", help="no progress messages")
    f.set_defaults(func=_fit)


def _add_predict(sub: Any) -> None:
    from bayeszi.answers.predict import GROUP_MODES, QUANTITIES

    q = sub.add_parser("predict", help="predict for new rows from a saved fit (CSV out)",
                       description="Predict for the rows of NEW.csv from a saved fit; writes "
                       "the rows with the posterior mean, sd and interval of each quantity.")
    q.add_argument("saved", metavar="SAVED", help="a fit saved by 'bayeszi fit' or 'run "
                   "--save-fits'")
    q.add_argument("new", metavar="NEW.csv", help="rows to predict for")
    q.add_argument("--what", nargs="+", choices=QUANTITIES, metavar="QUANTITY",
                   help=f"one or more of {', '.join(QUANTITIES)} (default: mean)")
    q.add_argument("--groups", default="known", choices=GROUP_MODES,
                   help="group effects: %(choices)s (default: %(default)s)")
    q.add_argument("--interval", type=float, default=0.9, help="central interval "
                   "(default: %(default)s)")
    q.add_argument("--k", type=int, default=None, help="threshold of at_least: P(Y >= k)")
    q.add_argument("--exposure", type=float, default=None,
                   help="one effort for every row (e.g. 1 for a rate per unit)")
    q.add_argument("--draws", type=int, default=None, help="use this many posterior draws")
    q.add_argument("--seed", type=int, default=None, help="seed for new groups and new counts")
    q.add_argument("--out", metavar="PRED.csv", help="write here (default: standard output)")
    q.add_argument("--quiet", action="store_true", help="no progress messages")
    q.set_defaults(func=_predict)


def _add_report(sub: Any) -> None:
    rp = sub.add_parser("report", help="write a report from saved fits",
                        description="Write a report folder from one or more saved fits of "
                        "the same data (no scenarios: those live in a study file).")
    rp.add_argument("saved", nargs="+", metavar="SAVED", help="saved fits (.nc)")
    rp.add_argument("--out", required=True, metavar="DIR", help="report folder to write")
    rp.add_argument("--title", default=None, help="the report's title")
    rp.add_argument("--interval", type=float, default=0.9,
                    help="central interval in the tables (default: %(default)s)")
    rp.add_argument("--exact-refits", action="store_true",
                    help="refit each model without every record whose Pareto k is above 0.7 "
                    "and use the exact leave-one-out value (each refit is a full fit)")
    rp.add_argument("--residuals-against", default=None, metavar="COLUMN",
                    help="bin the residuals by this column of the fitted data in the residual "
                    "figure (default: the log of the expected count)")
    _vector_flag(rp)
    rp.add_argument("--quiet", action="store_true", help="no progress messages")
    rp.set_defaults(func=_report)


def _vector_flag(p: argparse.ArgumentParser) -> None:
    p.add_argument("--vector-figures", action="store_true",
                   help="also write every figure as SVG under DIR/figures/ (PNG only by "
                   "default; SVG roughly doubles the time spent writing figures)")


def _common_run_flags(p: argparse.ArgumentParser) -> None:
    from bayeszi.app.study import PREVIEWS

    _sampler_flags(p, defaults=False)
    p.add_argument("--preview", choices=PREVIEWS, default=None,
                   help="quick approximate preview of every model (Laplace approximation): "
                   "'first' previews, then samples; 'only' previews and stops, writing the "
                   "previews alone; 'no' samples at once (default: as the study file says, "
                   "else no)")
    p.add_argument("--save-fits", action="store_true",
                   help="also save every fit under DIR/fits/ (for predict and report)")
    p.add_argument("--exact-refits", action="store_true",
                   help="refit each model without every record whose Pareto k is above 0.7 "
                   "and use the exact leave-one-out value (each refit is a full fit)")
    _vector_flag(p)
    p.add_argument("--quiet", action="store_true", help="no progress messages")


def main(argv: Sequence[str] | None = None) -> int:
    """Run the command line; returns the exit code."""
    argv = list(sys.argv[1:] if argv is None else argv)
    try:
        refuse_renamed_flags(argv)
    except BayesziError as err:
        print(f"bayeszi: error: {err}", file=sys.stderr)
        return 2
    try:
        parser = build_parser()
        args = parser.parse_args(argv)
    except SystemExit as exc:  # argparse: 0 for --help/--version, 2 for usage errors
        return int(exc.code or 0)
    args.console = _Console(getattr(args, "quiet", False))
    args.command_line = _command_line(argv)
    old = warnings.showwarning
    warnings.showwarning = args.console.show_warning
    try:
        return int(args.func(args))
    except BayesziError as err:
        print(f"bayeszi: error: {' '.join(str(err).split())}", file=sys.stderr)
        return 2
    except KeyboardInterrupt as exc:
        said = " ".join(str(exc).split())  # a strata run says what it kept
        said = said if said.startswith("interrupted:") else "interrupted; nothing was written"
        print(f"bayeszi: {said}", file=sys.stderr)
        return 130
    except Exception as err:  # internal failure: say so plainly
        if os.environ.get("BAYESZI_DEBUG"):
            raise
        first = " ".join(str(err).split())[:300]
        print(f"bayeszi: internal error ({type(err).__name__}: {first}); please report it "
              "(set BAYESZI_DEBUG=1 to see where)", file=sys.stderr)
        return 1
    finally:
        warnings.showwarning = old


def run() -> None:
    """The ``bayeszi`` command: :func:`main`, then exit at once.

    The exit handlers run and the output is flushed, but the interpreter does not tear down
    its modules and objects one by one (about 1.5-2 s after a report, with PyMC, ArviZ and
    the fits loaded, for nothing: the process ends). :func:`main` itself returns normally,
    for callers in Python.
    """
    code = main()
    atexit._run_exitfuncs()
    for stream in (sys.stdout, sys.stderr):
        try:
            stream.flush()
        except (OSError, ValueError):  # closed or broken pipe: nothing more to say
            pass
    os._exit(code)


if __name__ == "__main__":
    run()
