"""Per-draw linear predictors of any rows, from the posterior, in NumPy.

:func:`linear_predictors` returns ``eta_c`` (log count mean, offset included), ``eta_z``
(logit of the zeros-part probability) and ``log_alpha`` as arrays of shape (draws, rows),
ready for the closed forms in :mod:`bayeszi.families`. Group effects are taken for a known
group (its posterior effect) or drawn for a new group from the population distribution;
callers chunk rows to bound memory.

Example
-------
>>> eta = linear_predictors(fitted, fitted.design.encode(df.head(5)))   # doctest: +SKIP
>>> eta.counts.shape                                                      # doctest: +SKIP
(2000, 5)
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from bayeszi.base import names, options
from bayeszi.engine.record import Posterior
from bayeszi.model.design import Design, EncodedRows, GroupDesign

#: how :func:`linear_predictors` takes group effects: the user-facing modes of
#: :data:`bayeszi.base.options.GROUP_MODES` map onto these ("typical" is "none"; "average"
#: averages "new" draws), and only callers inside bayeszi pass them
ENGINE_MODES = ("known", "new", "none")


@dataclass
class LinearPredictors:
    """Arrays of shape (draws, rows); ``log_alpha`` is (draws, 1) or None."""

    counts: np.ndarray
    zeros: np.ndarray | None
    log_alpha: np.ndarray | None

    def add(self, part: str, contrib: np.ndarray) -> None:
        """Add ``contrib`` (draws, rows) to the linear predictor of ``part`` (a part these
        rows do not have is left alone)."""
        if part == "counts":
            self.counts = self.counts + contrib
        elif self.zeros is not None:
            self.zeros = self.zeros + contrib


def stacked(fitted: Posterior, name: str) -> np.ndarray:
    """Posterior draws of ``name`` with chains and draws flattened to one leading axis."""
    v = fitted.idata.posterior[name].values
    return v.reshape((-1,) + v.shape[2:])


def n_draws(fitted: Posterior) -> int:
    """Number of posterior draws (chains x draws)."""
    post = fitted.idata.posterior
    return int(post.sizes["chain"] * post.sizes["draw"])


def _new_effects(fitted: Posterior, g: str, n_new: int, rng: np.random.Generator
                 ) -> tuple[np.ndarray, np.ndarray | None]:
    """Effects of ``n_new`` new groups of ``g``, one set per draw, shape (draws, n_new)."""
    post = fitted.idata.posterior
    S = n_draws(fitted)
    zc = rng.standard_normal((S, n_new))
    sd_c = stacked(fitted, names.group_sd("counts", g))[:, None]
    if names.group_sd("zeros", g) not in post:
        return sd_c * zc, None
    zz = rng.standard_normal((S, n_new))
    sd_z = stacked(fitted, names.group_sd("zeros", g))[:, None]
    if names.corr(g) in post:
        r = stacked(fitted, names.corr(g))[:, None]
        zz = r * zc + np.sqrt(np.clip(1 - r**2, 0, None)) * zz
    return sd_c * zc, sd_z * zz


def _new_group_ids(rows: EncodedRows, name: str) -> np.ndarray:
    """One id per distinct group of ``name``: by code when every row has a code (callers may
    pass their own ids as codes), else by label (unseen labels all have code -1), else each
    row its own group (no column)."""
    codes = rows.group_codes.get(name)
    labels = rows.group_labels.get(name)
    if codes is not None and (labels is None or np.all(codes >= 0)):
        _, inv = np.unique(codes, return_inverse=True)
    elif labels is not None:
        _, inv = np.unique(np.asarray(labels, dtype=str), return_inverse=True)
    else:
        return np.arange(rows.n)
    return inv.reshape(-1)


class _Draws:
    """Reads posterior variables at the selected draws (all when ``draw_index`` is None)."""

    def __init__(self, fitted: Posterior, draw_index: np.ndarray | None) -> None:
        self.fitted = fitted
        self.sel = slice(None) if draw_index is None else draw_index

    def __call__(self, name: str) -> np.ndarray:
        return stacked(self.fitted, name)[self.sel]

    def has(self, name: str) -> bool:
        return name in self.fitted.idata.posterior


def _population_part(take: _Draws, design: Design, rows: EncodedRows
                     ) -> tuple[LinearPredictors, dict[str, np.ndarray | None]]:
    """The linear predictors without group effects, and the standardised design rows."""
    Xc = (rows.X_counts - design.counts.center) / design.counts.scale
    eta_c = take(names.std_coef("counts")) @ Xc.T + rows.log_offset[None, :]
    eta_z, Xz = None, None
    if design.zeros is not None and rows.X_zeros is not None:
        Xz = (rows.X_zeros - design.zeros.center) / design.zeros.scale
        eta_z = take(names.std_coef("zeros")) @ Xz.T
    log_alpha = np.log(take(names.DISPERSION))[:, None] if take.has(names.DISPERSION) else None
    return LinearPredictors(eta_c, eta_z, log_alpha), {"counts": Xc, "zeros": Xz}


def _known_codes(g: GroupDesign, rows: EncodedRows) -> np.ndarray:
    """Each row's level of ``g``, refusing rows without the column or with unseen levels."""
    codes = rows.group_codes.get(g.name)
    if codes is None:
        raise options.missing_group_column(g.name)
    bad = codes < 0
    if np.any(bad):
        labels = rows.group_labels.get(g.name)
        unseen = sorted(set(map(str, labels[bad]))) if labels is not None else []
        where = ", ".join(str(i) for i in np.flatnonzero(bad)[:5])
        raise options.unseen_levels(g.name, unseen, where, list(g.levels))
    return codes


def _slope_columns(design: Design, part: str, terms: tuple[str, ...]) -> list[int]:
    pdes = design.counts if part == "counts" else design.zeros
    return [pdes.terms.index(t) for t in terms]


def _add_known(lp: LinearPredictors, take: _Draws, fitted: Posterior, g: GroupDesign,
               rows: EncodedRows, X_std: dict[str, np.ndarray | None]) -> None:
    """Add each row's fitted effects of group ``g``: intercepts and varying slopes."""
    codes = _known_codes(g, rows)
    lp.add("counts", np.take(take(names.effect("counts", g.name)), codes, axis=1))
    if lp.zeros is not None and take.has(names.effect("zeros", g.name)):
        lp.add("zeros", np.take(take(names.effect("zeros", g.name)), codes, axis=1))
    for part, terms in fitted.spec.varying.items():
        idx = _slope_columns(fitted.design, part, terms)
        slope = take(names.slope(part, g.name))[:, codes, :]  # draws, rows, terms
        lp.add(part, np.einsum("srt,rt->sr", slope, X_std[part][:, idx]))


def _add_new(lp: LinearPredictors, take: _Draws, fitted: Posterior, g: GroupDesign,
             rows: EncodedRows, X_std: dict[str, np.ndarray | None],
             rng: np.random.Generator) -> None:
    """Add effects of group ``g`` drawn for new levels: one per distinct group id."""
    inv = _new_group_ids(rows, g.name)
    n_new = int(inv.max()) + 1 if inv.size else 0
    nc, nz = _new_effects(fitted, g.name, n_new, rng)
    lp.add("counts", nc[take.sel][:, inv])
    if nz is not None:
        lp.add("zeros", nz[take.sel][:, inv])
    for part, terms in fitted.spec.varying.items():
        idx = _slope_columns(fitted.design, part, terms)
        sd = take(names.slope_sd(part, g.name))  # draws, terms
        z = rng.standard_normal((sd.shape[0], n_new, len(idx)))
        slope = (z * sd[:, None, :])[:, inv, :]
        lp.add(part, np.einsum("srt,rt->sr", slope, X_std[part][:, idx]))


def linear_predictors(fitted: Posterior, rows: EncodedRows, groups: str = "known",
                      rng: np.random.Generator | None = None,
                      draw_index: np.ndarray | None = None) -> LinearPredictors:
    """Linear predictors per posterior draw for encoded ``rows``.

    groups (one of :data:`ENGINE_MODES`): ``"known"`` uses each row's fitted group effect
    (an unknown group is an error), ``"new"`` draws a fresh effect per distinct group label
    from the population distribution (rows without a group column count as one new group
    each), ``"none"`` leaves group effects out (the population centre, not the population
    average; the user-facing mode ``"typical"``). ``draw_index`` picks a subset of draws.
    """
    if groups not in ENGINE_MODES:
        raise ValueError(f"linear_predictors takes groups in {ENGINE_MODES}, got {groups!r}")
    rng = rng or np.random.default_rng()
    take = _Draws(fitted, draw_index)
    lp, X_std = _population_part(take, fitted.design, rows)
    for g in fitted.design.groups:
        if groups == "known":
            _add_known(lp, take, fitted, g, rows, X_std)
        elif groups == "new":
            _add_new(lp, take, fitted, g, rows, X_std, rng)
    return lp


def design_rows(design: Design) -> EncodedRows:
    """The rows of ``design`` (the fitted data, or its patterns) as :class:`EncodedRows`."""
    d = design
    return EncodedRows(d.counts.X, None if d.zeros is None else d.zeros.X, d.log_offset,
                       {g.name: g.codes for g in d.groups}, d.n,
                       {g.name: np.asarray(g.levels, dtype=object)[g.codes] for g in d.groups})


def fitted_rows(fitted: Posterior) -> EncodedRows:
    """The fitted data encoded as :class:`EncodedRows` (known groups)."""
    return design_rows(fitted.design)
