"""Fit a set of candidate models (families x zeros formulas) to the same data in one call.

:func:`fit_candidates` turns the arguments into one validated spec per candidate, checks the
data against every candidate before any sampling starts (so a problem in the data, e.g. no
zeros for a hurdle family, is reported at once and each data warning is shown once, not once
per candidate), then fits the candidates one after the other behind a single progress
display. The result is a dict ``name -> FittedModel`` ready for :func:`bayeszi.rank_models`.

The steps are public and shared with the study runner and the command line, so there is one
of each: :class:`Candidate` (a name and a spec), :func:`check_candidates` (the pre-sampling
check) and :func:`fit_each` (the fit-many loop, reporting to a :class:`FitProgress` such as
:class:`ProgressDisplay`).

Families without a zeros part (``poisson``, ``negbin``) are fitted once, whatever the
number of zeros formulas.

Example
-------
>>> import bayeszi as bz                                                     # doctest: +SKIP
>>> fits = bz.fit_candidates(df, counts="crayfish ~ water_temp + depth",
...                          zeros=["~ 1", "~ barrier"],
...                          families=["poisson", "negbin", "zip", "zinb"],
...                          exposure="trap_nights", groups="reach", seed=1)  # doctest: +SKIP
>>> list(fits)                                                               # doctest: +SKIP
['poisson', 'negbin', 'zip ~ 1', 'zip ~ barrier', 'zinb ~ 1', 'zinb ~ barrier']
>>> bz.rank_models(fits)                                                         # doctest: +SKIP
"""

from __future__ import annotations

import sys
import time
import warnings
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from typing import IO, Any, Protocol

import pandas as pd

from bayeszi.base.errors import BayesziError, BayesziWarning
from bayeszi.base.renamed import refusing_renamed
from bayeszi.base.spec import ModelSpec
from bayeszi.families import FAMILY_NAMES, get_family
from bayeszi.fitting import api
from bayeszi.fitting.fitted import FittedModel
from bayeszi.model.collinearity import warn_collinear
from bayeszi.model.design import Design, build_design
from bayeszi.model.patterns import find_patterns
from bayeszi.model.priors import resolve
from bayeszi.model.sample import fit_work, nutpie_problem, slow_fit_warning
from bayeszi.model.validate import check_frame


@dataclass(frozen=True)
class Candidate:
    """One candidate model: its name in the results and its validated spec.

    Example
    -------
    >>> Candidate("zip", api.make_spec("y ~ x", family="zip")).spec.family
    'zip'
    """

    name: str
    spec: ModelSpec


def _zeros_formulas(zeros: str | Sequence[str] | Mapping[str, str] | None
                    ) -> list[tuple[str | None, str]]:
    """(label, formula) pairs; label None means 'name the candidate by its formula'."""
    if zeros is None:
        return [(None, "~ 1")]
    if isinstance(zeros, str):
        return [(None, zeros)]
    if isinstance(zeros, Mapping):
        pairs = [(str(k), v) for k, v in zeros.items()]
    elif isinstance(zeros, Sequence):
        pairs = [(None, v) for v in zeros]
    else:
        raise BayesziError(f"zeros must be a formula, a list of formulas or a dict "
                           f"label -> formula, got {type(zeros).__name__}")
    if not pairs:
        raise BayesziError("zeros lists no formula; give at least one, e.g. zeros='~ 1'")
    for _, f in pairs:
        if not isinstance(f, str):
            raise BayesziError(f"zeros formulas must be strings like '~ barrier', got {f!r}")
    return pairs


def _family_names(families: str | Sequence[str]) -> list[str]:
    if isinstance(families, str):
        families = [families]
    out: list[str] = []
    for f in families:
        name = get_family(f).name  # unknown names raise with a suggestion
        if name not in out:
            out.append(name)
    if not out:
        raise BayesziError(f"families lists no family; choose from {list(FAMILY_NAMES)}")
    return out


def candidate_specs(counts: str, families: str | Sequence[str] = FAMILY_NAMES,
                    zeros: str | Sequence[str] | Mapping[str, str] | None = "~ 1",
                    **settings: Any) -> list[Candidate]:
    """The candidates :func:`fit_candidates` would fit, as named validated specs.

    ``settings`` are :func:`bayeszi.make_spec` keywords (exposure, groups, priors, draws, ...).
    For families without a zeros part the zeros-only settings (``varying["zeros"]``,
    ``priors["zeros"]``, ``correlated``) are dropped.

    Example
    -------
    >>> [c.name for c in candidate_specs("y ~ x", ["poisson", "zip"], ["~ 1", "~ w"])]
    ['poisson', 'zip ~ 1', 'zip ~ w']
    """
    pairs = _zeros_formulas(zeros)
    seen: set[str] = set()
    unique = []
    for label, f in pairs:
        key = " ".join(f.split())
        if key not in seen:
            seen.add(key)
            unique.append((label, f))
    out: list[Candidate] = []
    for fam_name in _family_names(families):
        fam = get_family(fam_name)
        options = unique if fam.zeros_kind else [(None, "~ 1")]
        for label, formula in options:
            kw = dict(settings)
            if not fam.zeros_kind:
                kw["varying"] = {k: v for k, v in dict(kw.get("varying") or {}).items()
                                 if k != "zeros"} or None
                kw["priors"] = {k: v for k, v in dict(kw.get("priors") or {}).items()
                                if k != "zeros"} or None
                kw["correlated"] = False
            if not fam.zeros_kind or len(unique) == 1:
                name = fam_name
            else:
                name = f"{fam_name} {label if label is not None else ' '.join(formula.split())}"
            try:
                spec = api.make_spec(counts, formula, fam_name, **kw)
            except BayesziError as err:
                raise BayesziError(f"candidate {name!r}: {err}") from None
            out.append(Candidate(name, spec))
    names = [c.name for c in out]
    if len(set(names)) != len(names):
        raise BayesziError(f"two candidates got the same name ({names}); give the zeros "
                           "formulas distinct labels with a dict, e.g. {'flat': '~ 1'}")
    return out


class ProgressDisplay:
    """One progress display for a whole set of fits: a line updated in place on a terminal,
    one line per finished candidate otherwise. Disabled, it shows nothing.

    Example
    -------
    >>> import io
    >>> buf = io.StringIO()
    >>> p = ProgressDisplay(1, True, buf)
    >>> p.start("zip"); p.finish("zip", 3.2)
    >>> buf.getvalue()
    'candidate 1/1 zip: 3 s (total 0m00s)\\n'
    """

    def __init__(self, total: int, enabled: bool, stream: IO[str] | None = None) -> None:
        self.total = total
        self.enabled = enabled
        self.stream = stream or sys.stderr
        self.tty = bool(getattr(self.stream, "isatty", lambda: False)())
        self.t0 = time.perf_counter()
        self.done_count = 0

    def _bar(self) -> str:
        width = 20
        filled = round(width * self.done_count / max(self.total, 1))
        return "[" + "#" * filled + "-" * (width - filled) + "]"

    def _elapsed(self) -> str:
        s = int(time.perf_counter() - self.t0)
        return f"{s // 60}m{s % 60:02d}s"

    def start(self, name: str) -> None:
        """Candidate ``name`` starts sampling."""
        if self.enabled and self.tty:
            self.stream.write(f"\rfitting candidates {self._bar()} {self.done_count}/"
                              f"{self.total}, now {name} ({self._elapsed()})\x1b[K")
            self.stream.flush()

    def finish(self, name: str, seconds: float, warned: Sequence[str] = ()) -> None:
        """Candidate ``name`` is fitted after ``seconds`` (its warnings are shown elsewhere)."""
        self.done_count += 1
        if not self.enabled:
            return
        if self.tty:
            self.stream.write(f"\rfitting candidates {self._bar()} {self.done_count}/"
                              f"{self.total}, {name} took {seconds:.0f} s "
                              f"({self._elapsed()})\x1b[K")
            if self.done_count == self.total:
                self.stream.write("\n")
        else:
            self.stream.write(f"candidate {self.done_count}/{self.total} {name}: "
                              f"{seconds:.0f} s (total {self._elapsed()})\n")
        self.stream.flush()


class FitProgress(Protocol):
    """What :func:`fit_each` reports to: the start and the end of each candidate's fit.

    ``warned`` lists the bayeszi warnings raised while fitting that candidate.

    Example
    -------
    >>> class Lines:
    ...     def start(self, name): print("fitting", name)
    ...     def finish(self, name, seconds, warned=()): print(name, "done")
    >>> fit_each(df, check_candidates(df, cands), Lines())             # doctest: +SKIP
    """

    def start(self, name: str) -> None: ...

    def finish(self, name: str, seconds: float, warned: Sequence[str] = ()) -> None: ...


@dataclass(frozen=True)
class CheckedCandidates:
    """Candidates whose designs and priors were built from the data without sampling.

    Made only by :func:`check_candidates`; :func:`fit_each` fits them. ``designs`` maps each
    candidate's name to its design; ``shown`` holds the data warnings already shown (each
    once), which the fits raise again and which are then not shown a second time.

    Example
    -------
    >>> checked = check_candidates(df, candidate_specs("y ~ x", "zip"))   # doctest: +SKIP
    >>> checked.designs["zip"].n == len(df)                             # doctest: +SKIP
    True
    """

    candidates: tuple[Candidate, ...]
    designs: Mapping[str, Design]
    shown: frozenset[str]
    noun: str = "candidate"


@dataclass(frozen=True)
class CandidateFits:
    """What :func:`fit_each` returns: the fits and the bayeszi warnings of each, by name.

    Example
    -------
    >>> run = fit_each(df, check_candidates(df, cands))                 # doctest: +SKIP
    >>> list(run.fits) == list(run.warnings) == [c.name for c in cands]  # doctest: +SKIP
    True
    """

    fits: dict[str, FittedModel]
    warnings: dict[str, list[str]]


def check_candidates(data: pd.DataFrame, candidates: Sequence[Candidate],
                     noun: str = "candidate") -> CheckedCandidates:
    """Build every candidate's design and priors before any sampling.

    A problem is a :class:`BayesziError` prefixed with ``noun`` and the candidate's name
    (``"candidate 'zip': ..."``). Each data warning, collinear predictors included
    (:mod:`bayeszi.model.collinearity`), is shown once, naming the candidates it concerns
    unless it concerns all of them; so is the warning that a big fit will be slow because
    nutpie cannot be imported (:func:`bayeszi.model.sample.slow_fit_warning`).

    Example
    -------
    >>> checked = check_candidates(df, candidate_specs("y ~ x", ["poisson", "zip"]))
    ...                                                                     # doctest: +SKIP
    >>> sorted(checked.designs)                                             # doctest: +SKIP
    ['poisson', 'zip']
    """
    designs: dict[str, Design] = {}
    seen: dict[str, tuple[type[Warning], list[str]]] = {}
    for c in candidates:
        with warnings.catch_warnings(record=True) as caught:
            warnings.simplefilter("always")
            try:
                designs[c.name] = build_design(data, c.spec)
                resolve(designs[c.name], c.spec.priors)
                warn_collinear(designs[c.name])
            except BayesziError as err:
                raise BayesziError(f"{noun} {c.name!r}: {err}") from None
            _warn_if_slow(c.spec, designs[c.name])
        for w in caught:
            seen.setdefault(str(w.message), (w.category, []))[1].append(c.name)
    for text, (category, names) in seen.items():
        who = "" if len(names) == len(candidates) else f" ({noun}(s) {', '.join(names)})"
        warnings.warn(text + who, category, stacklevel=2)
    return CheckedCandidates(tuple(candidates), designs, frozenset(seen), noun)


def _warn_if_slow(spec: ModelSpec, design: Design) -> None:
    """Before sampling: the warning a big fit gets when nutpie cannot be imported (the fit
    raises the same text again, which is then not shown twice)."""
    if spec.sampler.sampler != "auto" or nutpie_problem() is None:
        return
    work = fit_work(find_patterns(design).n_patterns, spec.sampler)
    message = slow_fit_warning(spec.sampler.sampler, work)
    if message is not None:
        warnings.warn(message, BayesziWarning, stacklevel=3)


def fit_each(data: pd.DataFrame, checked: CheckedCandidates,
             progress: FitProgress | None = None) -> CandidateFits:
    """Fit checked candidates one after the other (the one fit-many loop).

    bayeszi warnings raised while fitting a candidate are collected per candidate and shown
    prefixed with its name, except the data warnings the check showed already; other
    warnings (about the installation, say) are shown once. A fit that fails is a
    :class:`BayesziError` naming the candidate.

    Example
    -------
    >>> run = fit_each(df, check_candidates(df, cands), ProgressDisplay(len(cands), True))
    ...                                                                     # doctest: +SKIP
    >>> run.fits["zip"], run.warnings["zip"]                                # doctest: +SKIP
    """
    out = CandidateFits({}, {})
    shown = set(checked.shown)
    for c in checked.candidates:
        if progress is not None:
            progress.start(c.name)
        t0 = time.perf_counter()
        with warnings.catch_warnings(record=True) as caught:
            warnings.simplefilter("always")
            try:
                out.fits[c.name] = api.fit_spec(data, c.spec)
            except BayesziError as err:
                raise BayesziError(f"{checked.noun} {c.name!r}: {err}") from None
        out.warnings[c.name] = _show(caught, f"{checked.noun} {c.name!r}", shown)
        if progress is not None:
            progress.finish(c.name, time.perf_counter() - t0, out.warnings[c.name])
    return out


def _show(caught: Sequence[warnings.WarningMessage], who: str, shown: set[str]) -> list[str]:
    """Show caught warnings not shown yet; return the bayeszi ones' texts (each once)."""
    mine: list[str] = []
    for w in caught:
        if issubclass(w.category, (DeprecationWarning, FutureWarning)):
            continue
        text = str(w.message)
        if issubclass(w.category, BayesziWarning):
            if text in mine:
                continue
            mine.append(text)
            if text not in shown:
                warnings.warn(f"{who}: {text}", w.category, stacklevel=3)
        elif text not in shown:  # about the installation, not the candidate: once
            shown.add(text)
            warnings.warn(text, w.category, stacklevel=3)
    return mine


@refusing_renamed
def fit_candidates(data: pd.DataFrame, counts: str,
                   families: str | Sequence[str] = FAMILY_NAMES,
                   zeros: str | Sequence[str] | Mapping[str, str] | None = "~ 1",
                   exposure: str | None = None, offset: str | None = None,
                   groups: str | Sequence[str] | None = None,
                   varying: Mapping[str, Sequence[str]] | None = None,
                   nested: Mapping[str, str] | None = None, correlated: bool = False,
                   priors: Mapping[str, Any] | None = None, draws: int = 1000,
                   warmup_steps: int = 1000, chains: int = 2, cores: int | None = None,
                   acceptance_target: float = 0.9, seed: int | None = None,
                   progressbar: bool | None = None, sampler: str = "auto",
                   until_enough: bool = False, block_draws: int = 200, draws_limit: int = 4000
                   ) -> dict[str, FittedModel]:
    """Fit every family in ``families`` with every zeros formula in ``zeros`` to ``data``.

    Parameters
    ----------
    data, counts, exposure, offset, groups, varying, nested, correlated, priors : as in
        :func:`bayeszi.fit`, shared by all candidates.
    families : family names (default: all six).
    zeros : one zeros formula, a list of them, or a dict label -> formula (labels name the
        candidates). Families without a zeros part are fitted once.
    draws, warmup_steps, chains, cores, acceptance_target, seed, sampler : NUTS settings for every
        candidate (each gets the same seed).
    until_enough, block_draws, draws_limit : draws until enough, for every candidate, as in
        :func:`bayeszi.fit`.
    progressbar : one progress display for the whole set (default: when stderr is a
        terminal); the per-fit sampler bars are off.

    Returns
    -------
    dict name -> FittedModel, in the order of ``families`` then ``zeros``. Names are the
    family, followed by the zeros formula (or its label) when several are given.

    Example
    -------
    >>> fits = fit_candidates(df, "y ~ x1 + x2", ["poisson", "zinb"], zeros="~ w",
    ...                       exposure="exposure", draws=500, seed=1)       # doctest: +SKIP
    >>> sorted(fits)                                                        # doctest: +SKIP
    ['poisson', 'zinb']
    """
    data = check_frame(data)
    cands = candidate_specs(counts, families, zeros, exposure=exposure, offset=offset,
                            groups=groups, varying=varying, nested=nested,
                            correlated=correlated, priors=priors, draws=draws,
                            warmup_steps=warmup_steps, chains=chains, cores=cores,
                            acceptance_target=acceptance_target, seed=seed,
                            progressbar=False, sampler=sampler, until_enough=until_enough,
                            block_draws=block_draws, draws_limit=draws_limit)
    checked = check_candidates(data, cands)
    show = sys.stderr.isatty() if progressbar is None else bool(progressbar)
    return fit_each(data, checked, ProgressDisplay(len(cands), show)).fits


__all__ = ["Candidate", "CandidateFits", "CheckedCandidates", "FitProgress", "ProgressDisplay",
           "candidate_specs", "check_candidates", "fit_candidates", "fit_each"]
