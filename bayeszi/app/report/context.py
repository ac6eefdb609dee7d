"""What a report is made from, and the answers computed once for all its sections.

:class:`ReportInput` is what the caller gives (the fits, the data, the scenarios, where
everything came from). :func:`build_context` turns it into a :class:`ReportContext`: the
input plus every answer that more than one section reads, computed once per report: the
PSIS-LOO estimate of each model, the LOO comparison table, the preferred model (and why),
each model's coefficient table and sampler problems; and, drawn when a section first asks
(:meth:`ReportContext.replicated`), one set of data sets replicated from each model that every
check reads. Sections read the context and compute only what is theirs alone; warnings raised
on the way are collected in ``context.warnings``.

Example
-------
>>> ctx = build_context(ReportInput(title="t", fits={"zip": m1, "zinb": m2}, data=df))
...                                                                    # doctest: +SKIP
>>> ctx.preferred, ctx.comparison.index[0]                             # doctest: +SKIP
('zinb', 'zinb')
"""

from __future__ import annotations

import warnings
from collections.abc import Callable, Mapping, Sequence
from dataclasses import dataclass, field
from typing import TYPE_CHECKING, Any

import pandas as pd

from bayeszi.answers.checks import Replicates, count_frequencies, replicated_data, residuals
from bayeszi.answers.comparison import WEIGHT, LooEstimate, loo, rank_models
from bayeszi.app.report.ahead import Task, WorkAhead

if TYPE_CHECKING:
    from bayeszi.app.study import Contrast, Scenario
    from bayeszi.fitting.fitted import FittedModel
    from bayeszi.fitting.preview import Preview

#: Warnings left out of the report because another section already says the same.
REDUNDANT = ("these answers rest on posterior draws with sampler problems",)


@dataclass
class ReportInput:
    """Everything a report is made from.

    ``fits`` maps model names to fitted models, in the order the study lists them;
    ``data`` is the data frame they were fitted to. ``provenance`` holds the reproducibility
    facts (``data_path``, ``data_sha256``, ``study_path``, ``study_sha256``, ``command``,
    ``saved_fits``); ``notes`` holds warnings raised while fitting, per model; ``previews``
    the approximate previews made before sampling, per model (none unless asked for).
    ``predictions`` says whose scenario predictions the report shows: ``"models"`` (each
    model's), ``"averaged"`` (the models averaged by their stacking weights) or ``"both"``.
    ``residuals_against`` names the column of ``data`` that the residual figure bins the
    residuals by (None: the log of the expected count).

    Example
    -------
    >>> ReportInput(title="t", fits={"zinb": fitted}, data=df).first is fitted  # doctest: +SKIP
    True
    """

    title: str
    fits: Mapping[str, FittedModel]
    data: pd.DataFrame
    summary: str = ""
    interval: float = 0.9
    unit: str | None = None
    seed: int | None = None
    scenarios: Sequence[Scenario] = ()
    contrasts: Sequence[Contrast] = ()
    preferred: str | None = None
    predictions: str = "models"
    exact_refits: bool = False
    residuals_against: str | None = None
    provenance: dict[str, Any] = field(default_factory=dict)
    notes: dict[str, list[str]] = field(default_factory=dict)
    previews: Mapping[str, Preview] = field(default_factory=dict)

    @property
    def first(self) -> FittedModel:
        """The first fitted model (its spec names the response, exposure and groups)."""
        return next(iter(self.fits.values()))


class WarningLog:
    """Warnings raised while the report is computed, each once, prefixed with where.

    Example
    -------
    >>> log = WarningLog()
    >>> log.caught("sum", lambda: warnings.warn("odd") or 1)
    1
    >>> log.lines
    ['sum: odd']
    """

    def __init__(self) -> None:
        self.lines: list[str] = []

    def caught(self, where: str, fn: Callable[..., Any], *args: Any, **kwargs: Any) -> Any:
        """Call ``fn(*args, **kwargs)`` recording its warnings (shown in the report)."""
        with warnings.catch_warnings(record=True) as seen:
            warnings.simplefilter("always")
            out = fn(*args, **kwargs)
        for w in seen:
            if issubclass(w.category, (DeprecationWarning, FutureWarning)):
                continue
            if any(str(w.message).startswith(r) for r in REDUNDANT):
                continue  # the diagnostics section states the sampler problems once
            text = f"{where}: {w.message}"
            if text not in self.lines:
                self.lines.append(text)
        return out


@dataclass
class ReportContext:
    """The report's input and the answers several sections share, each computed once.

    ``loo`` holds each model's PSIS-LOO estimate; ``comparison`` the LOO comparison table
    (None with one model); ``coefficients`` and ``problems`` each model's coefficient table
    (at the report's interval) and sampler problems; ``preferred`` the model the reading and
    the per-model figures are about, and ``preferred_reason`` why; ``replicates`` the data
    sets replicated from each model so far (see :meth:`replicated`).

    Example
    -------
    >>> build_context(inp).loo["zinb"].elpd                            # doctest: +SKIP
    -2403.1
    """

    inp: ReportInput
    log: WarningLog
    loo: dict[str, LooEstimate]
    comparison: pd.DataFrame | None
    preferred: str
    preferred_reason: str
    coefficients: dict[str, pd.DataFrame]
    problems: dict[str, list[str]]
    replicates: dict[str, Replicates] = field(default_factory=dict)
    ahead: WorkAhead | None = None

    @property
    def fits(self) -> Mapping[str, FittedModel]:
        """The fitted models by name, in the study's order."""
        return self.inp.fits

    @property
    def warnings(self) -> list[str]:
        """Warnings raised while the report was computed (shown in the diagnostics section)."""
        return self.log.lines

    def stacking_weights(self) -> dict[str, float] | None:
        """The stacking weights of the LOO comparison (None with one model), by model name.

        Example
        -------
        >>> ctx.stacking_weights()                                     # doctest: +SKIP
        {'zinb': 0.71, 'hurdle': 0.29}
        """
        if self.comparison is None or WEIGHT not in self.comparison.columns:
            return None
        return {str(n): float(w) for n, w in self.comparison[WEIGHT].items()}

    def caught(self, where: str, fn: Callable[..., Any], *args: Any, **kwargs: Any) -> Any:
        """Call ``fn`` recording its warnings under ``where`` (see :class:`WarningLog`)."""
        return self.log.caught(where, fn, *args, **kwargs)

    @property
    def seed(self) -> int:
        """The seed of every random draw of the report (the study's, else 0)."""
        return self.inp.seed or 0

    def replicated(self, name: str) -> Replicates:
        """Data sets replicated from model ``name``, one per posterior draw, drawn on the first
        call (:func:`~bayeszi.answers.checks.replicated_data` with the report's seed) and read
        by every check after: zero shares, spread, rootograms, the Pearson statistic.

        Example
        -------
        >>> zero_check(ctx.fits["zinb"], replicates=ctx.replicated("zinb"))  # doctest: +SKIP
        """
        if name not in self.replicates:
            self.replicates[name] = self.shared(
                ("replicated", name), f"replicated data of {name}",
                lambda: replicated_data(self.fits[name], seed=self.seed))
        return self.replicates[name]

    def shared(self, key: tuple[str, str], where: str, compute: Callable[[], Any]) -> Any:
        """The answer ``compute()``, taken from the work done ahead under ``key`` when a
        worker computed it (:mod:`bayeszi.app.report.ahead`), else computed here; its
        warnings are recorded under ``where`` either way.

        Example
        -------
        >>> ctx.shared(("residuals", "zinb"), "residuals of zinb",
        ...            lambda: residuals(ctx.fits["zinb"], seed=ctx.seed))  # doctest: +SKIP
        """
        if self.ahead is None:
            return self.caught(where, compute)
        return self.caught(where, self.ahead.take(key, compute).replay)

    def residuals(self, name: str) -> pd.DataFrame:
        """The randomized quantile residuals of model ``name`` at the report's seed."""
        return self.shared(("residuals", name), f"residuals of {name}",
                           lambda: residuals(self.fits[name], seed=self.seed))

    def count_frequencies(self, name: str) -> pd.DataFrame:
        """Observed, expected and replicated records per count of model ``name`` (the
        rootogram's table), from :meth:`replicated`."""
        return self.shared(("rootogram", name), f"rootogram of {name}",
                           lambda: count_frequencies(self.fits[name],
                                                     interval=self.inp.interval,
                                                     replicates=self.replicated(name)))

    def close(self) -> None:
        """Stop the workers of the work done ahead, if any are still running."""
        if self.ahead is not None:
            self.ahead.close()


def plain(frame: pd.DataFrame) -> pd.DataFrame:
    """A copy without ``attrs`` (arrays in attrs break pandas.concat).

    >>> plain(pd.DataFrame({"a": [1]})).attrs
    {}
    """
    out = frame.copy()
    out.attrs = {}
    return out


def loo_answers(fits: Mapping[str, FittedModel], log: WarningLog, exact_refits: bool = False
                ) -> tuple[dict[str, LooEstimate], pd.DataFrame | None]:
    """PSIS-LOO of every model, once each, and with two or more models their comparison;
    with ``exact_refits`` the rows of high Pareto k are refitted exactly.

    With several models the estimates' own warnings are left to :func:`rank_models`, which
    repeats them for every model it ranks.
    """
    if len(fits) < 2:
        return {n: log.caught("LOO", loo, f, label=n, exact_refits=exact_refits)
                for n, f in fits.items()}, None
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        ests = {n: loo(f, label=n, exact_refits=exact_refits) for n, f in fits.items()}
    return ests, plain(log.caught("LOO comparison", rank_models, ests))


def choose_preferred(inp: ReportInput, comparison: pd.DataFrame | None) -> tuple[str, str]:
    """The preferred model and why: the study's choice, else the best by LOO, else the first.

    Example
    -------
    >>> choose_preferred(ReportInput("t", {"a": m}, df, preferred="a"), None)  # doctest: +SKIP
    ('a', 'the study file names it as preferred.')
    """
    names = list(inp.fits)
    if inp.preferred:
        return inp.preferred, "the study file names it as preferred."
    if comparison is not None and len(comparison) and str(comparison.index[0]) in inp.fits:
        best = str(comparison.index[0])
        return best, "it has the highest expected log predictive density (LOO) of the " \
                     f"{len(names)} candidates."
    if len(names) == 1:
        return names[0], "it is the only model in this report."
    return names[0], "it is listed first in the study (no LOO comparison was available)."


def plan_ahead(inp: ReportInput) -> list[list[Task]]:
    """The report's work that workers can do ahead (:mod:`bayeszi.app.report.ahead`), in two
    lanes of about equal cost: the replicated data sets of every model, then their
    rootogram tables; and every model's residuals, last model first (the report, when it
    gets there, computes the first ones itself if no worker has begun them). Each task is
    exactly the call :class:`ReportContext` makes when a section needs it.

    >>> [len(lane) for lane in plan_ahead(ReportInput("t", {"a": m, "b": m}, df))]
    ...                                                                # doctest: +SKIP
    [4, 2]
    """
    seed = inp.seed or 0
    replicates: list[Task] = []
    rootograms: list[Task] = []
    resid: list[Task] = []
    for name, f in inp.fits.items():
        replicates.append((("replicated", name),
                           lambda done, f=f: replicated_data(f, seed=seed)))
        rootograms.append((("rootogram", name),
                           lambda done, f=f, name=name: count_frequencies(
                               f, interval=inp.interval,
                               replicates=done[("replicated", name)])))
        resid.append((("residuals", name), lambda done, f=f: residuals(f, seed=seed)))
    return [replicates + rootograms, resid[::-1]]


def build_context(inp: ReportInput, ahead: bool = True) -> ReportContext:
    """Compute the answers several sections share, once each (see :class:`ReportContext`);
    with ``ahead``, workers start on the heaviest answers at once (see :func:`plan_ahead`)."""
    work = WorkAhead(plan_ahead(inp)) if ahead else None
    try:
        log = WarningLog()
        ests, comparison = loo_answers(inp.fits, log, inp.exact_refits)
        preferred, reason = choose_preferred(inp, comparison)
        return ReportContext(
            inp=inp, log=log, loo=ests, comparison=comparison, preferred=preferred,
            preferred_reason=reason,
            coefficients={n: f.coefficients(interval=inp.interval)
                          for n, f in inp.fits.items()},
            problems={n: f.sampler_problems() for n, f in inp.fits.items()}, ahead=work)
    except BaseException:
        if work is not None:
            work.close()
        raise


__all__ = ["REDUNDANT", "ReportContext", "ReportInput", "WarningLog", "build_context",
           "choose_preferred", "loo_answers", "plain", "plan_ahead"]
