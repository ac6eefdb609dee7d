"""A quick, approximate look at every candidate before sampling.

:func:`preview` (one model) and :func:`preview_candidates` (families x zeros formulas, as
:func:`bayeszi.fit_candidates`) return :class:`Preview` objects whose coefficient table has
the same rows and estimate columns as a fit's, from the Laplace approximation at the
posterior mode (:mod:`bayeszi.engine.preview`), in seconds instead of minutes. They are
approximations: every table carries the column ``method`` reading ``approximate (Laplace)``,
and the printed text says so. Use them to catch a model that makes no sense before waiting
for NUTS, never as the reported answer; :func:`preview_gap` shows how far a preview was from
the fit that followed.

Example
-------
>>> import bayeszi as bz                                                  # doctest: +SKIP
>>> p = bz.preview(df, counts="crayfish ~ water_temp + depth", zeros="~ barrier",
...                family="zinb", exposure="trap_nights", groups="reach")  # doctest: +SKIP
>>> print(p)                                                              # doctest: +SKIP
"""

from __future__ import annotations

import time
import warnings
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np
import pandas as pd

from bayeszi.base.errors import BayesziError, BayesziWarning
from bayeszi.base.renamed import refusing_renamed
from bayeszi.base.spec import ModelSpec
from bayeszi.engine.preview import PREVIEW_DRAWS, PreviewRecord, preview_record
from bayeszi.families import FAMILY_NAMES
from bayeszi.fitting import api
from bayeszi.fitting.candidates import CheckedCandidates, candidate_specs, check_candidates
from bayeszi.fitting.fitted import FittedModel, coefficient_rows
from bayeszi.model.design import Design
from bayeszi.model.validate import check_frame

#: the column (and its value) that labels every preview table
METHOD = "method"
APPROXIMATE = "approximate (Laplace)"
HEADING = ("PREVIEW, APPROXIMATE: Laplace approximation at the posterior mode, not a fit; "
           "sample the model (bayeszi.fit) before reporting any number")

__all__ = ["APPROXIMATE", "METHOD", "Preview", "preview", "preview_candidates",
           "preview_each", "preview_gap", "preview_spec"]


@dataclass(eq=False)
class Preview:
    """An approximate posterior of one model (see the module text). ``record`` holds the
    spec, design, priors and approximate draws; ``seconds`` the time it took.

    Example
    -------
    >>> p = preview(df, counts="crayfish ~ depth", family="zip")         # doctest: +SKIP
    >>> p.converged, p.coefficients()["method"].iloc[0]                 # doctest: +SKIP
    (True, 'approximate (Laplace)')
    """

    record: PreviewRecord
    seconds: float

    @property
    def spec(self) -> ModelSpec:
        """The model's spec."""
        return self.record.spec

    @property
    def converged(self) -> bool:
        """Whether the mode was found and the curvature there was positive definite."""
        return self.record.converged

    def coefficients(self, interval: float = 0.9, groups: bool = True) -> pd.DataFrame:
        """The coefficient table of a fit (estimate columns), from the approximation, with
        the column ``method`` = ``approximate (Laplace)`` on every row.

        Example
        -------
        >>> p.coefficients()["method"].unique().tolist()         # doctest: +SKIP
        ['approximate (Laplace)']
        """
        table = coefficient_rows(self.record, interval, groups)
        table.insert(2, METHOD, APPROXIMATE)
        return table.set_index(["part", "term"])

    def problems(self) -> list[str]:
        """What makes this preview less trustworthy than usual (empty when nothing)."""
        res = self.record.result
        out = []
        if not res.converged:
            out.append(f"the optimiser did not settle on the mode ({res.message}); the "
                       "preview may be far off")
        if not res.curvature_ok:
            out.append("the log density is not curved like a normal at the mode found (the "
                       "Hessian is not positive definite), so the preview's sds mean little; "
                       "a term may not be identified")
        return out

    def __str__(self) -> str:
        table = self.coefficients().drop(columns=[METHOD])
        lines = [HEADING,
                 f"  family {self.spec.family}, {self.record.design.n} records, response "
                 f"'{self.spec.response}'; {self.seconds:.1f} s",
                 f"  counts part ~ {self.spec.counts_rhs}"]
        if self.record.design.zeros is not None:
            lines.append(f"  zeros part ~ {self.spec.zeros_rhs}")
        with pd.option_context("display.width", 140, "display.max_columns", 20,
                               "display.float_format", lambda v: f"{v:.3g}"):
            lines += ["", table.to_string(na_rep="")]
        lines += [f"  - {p}" for p in self.problems()]
        return "\n".join(lines)

    __repr__ = __str__


def preview_spec(data: pd.DataFrame, spec: ModelSpec, draws: int = PREVIEW_DRAWS,
                 design: Design | None = None) -> Preview:
    """The preview of a ready :class:`ModelSpec` on ``data`` (see :func:`preview`).

    Example
    -------
    >>> p = preview_spec(df, bz.make_spec("crayfish ~ depth", family="zip"))  # doctest: +SKIP
    """
    if not isinstance(spec, ModelSpec):
        raise BayesziError(f"preview_spec() needs a ModelSpec (see bayeszi.make_spec), got "
                           f"{type(spec).__name__}")
    if isinstance(draws, bool) or not isinstance(draws, (int, np.integer)) or draws < 10:
        raise BayesziError(f"draws of a preview must be a whole number of at least 10, got "
                           f"{draws!r}")
    t0 = time.perf_counter()
    rec = preview_record(data, spec, design=design, draws=int(draws))
    out = Preview(rec, time.perf_counter() - t0)
    for text in out.problems():
        warnings.warn(f"preview: {text}", BayesziWarning, stacklevel=3)
    return out


@refusing_renamed
def preview(data: pd.DataFrame, counts: str, zeros: str | None = "~ 1", family: str = "zinb",
            exposure: str | None = None, offset: str | None = None,
            groups: str | Sequence[str] | None = None,
            varying: Mapping[str, Sequence[str]] | None = None,
            nested: Mapping[str, str] | None = None, correlated: bool = False,
            priors: Mapping[str, Any] | None = None, draws: int = PREVIEW_DRAWS,
            seed: int | None = None) -> Preview:
    """An approximate coefficient table of one model in seconds, before sampling.

    The arguments are those of :func:`bayeszi.fit` (no sampler settings); ``draws`` are
    taken from the approximating normal for the table. The result is labelled approximate
    everywhere; it is not a fit.

    Example
    -------
    >>> p = preview(df, counts="crayfish ~ depth", family="zip", exposure="trap_nights")
    ...                                                                   # doctest: +SKIP
    >>> p.coefficients().loc[("counts", "depth"), "mean"]                 # doctest: +SKIP
    """
    spec = api.make_spec(counts, zeros, family, exposure, offset, groups, varying, nested,
                         correlated, priors, seed=seed)
    return preview_spec(check_frame(data), spec, draws=draws)


def preview_each(data: pd.DataFrame, checked: CheckedCandidates,
                 say: Any = None) -> dict[str, Preview]:
    """Preview checked candidates one after the other (no sampling); ``say`` (a callable
    taking a line of text) reports each.

    Example
    -------
    >>> ps = preview_each(df, check_candidates(df, cands), print)         # doctest: +SKIP
    preview of zip (approximate): 2.1 s
    """
    out: dict[str, Preview] = {}
    for c in checked.candidates:
        try:
            out[c.name] = preview_spec(data, c.spec, design=checked.designs[c.name])
        except BayesziError as err:
            raise BayesziError(f"{checked.noun} {c.name!r}: {err}") from None
        if say is not None:
            say(f"preview of {c.name} (approximate): {out[c.name].seconds:.1f} s")
    return out


@refusing_renamed
def preview_candidates(data: pd.DataFrame, counts: str,
                       families: str | Sequence[str] = FAMILY_NAMES,
                       zeros: str | Sequence[str] | Mapping[str, str] | None = "~ 1",
                       exposure: str | None = None, offset: str | None = None,
                       groups: str | Sequence[str] | None = None,
                       varying: Mapping[str, Sequence[str]] | None = None,
                       nested: Mapping[str, str] | None = None, correlated: bool = False,
                       priors: Mapping[str, Any] | None = None, seed: int | None = None
                       ) -> dict[str, Preview]:
    """Preview every candidate :func:`bayeszi.fit_candidates` would fit, named the same way.

    Example
    -------
    >>> ps = preview_candidates(df, "crayfish ~ depth", ["poisson", "zinb"],
    ...                         exposure="trap_nights")                   # doctest: +SKIP
    >>> {n: round(p.seconds) for n, p in ps.items()}                      # doctest: +SKIP
    """
    data = check_frame(data)
    cands = candidate_specs(counts, families, zeros, exposure=exposure, offset=offset,
                            groups=groups, varying=varying, nested=nested,
                            correlated=correlated, priors=priors, seed=seed)
    return preview_each(data, check_candidates(data, cands))


def preview_gap(approx: Preview, fitted: FittedModel) -> pd.DataFrame:
    """How far a preview's means were from the fit's: per parameter, both means, the
    posterior sd and the gap in posterior sds.

    Example
    -------
    >>> preview_gap(p, m)["gap in sd"].abs().max()                        # doctest: +SKIP
    """
    a = approx.coefficients()
    f = fitted.coefficients()
    both = a.index.intersection(f.index)
    out = pd.DataFrame({"approximate mean": a.loc[both, "mean"],
                        "approximate sd": a.loc[both, "sd"],
                        "posterior mean": f.loc[both, "mean"],
                        "posterior sd": f.loc[both, "sd"]})
    out["gap in sd"] = (out["approximate mean"] - out["posterior mean"]) / out["posterior sd"]
    return out
