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

from bayeszi.base.errors import BayesziError
from bayeszi.engine.record import Posterior
from bayeszi.model.design import Design, EncodedRows

GROUP_MODES = ("known", "new", "none")


@dataclass
class LinearPredictors:
    """Arrays of shape (draws, rows); ``log_alpha`` is (draws, 1) or None."""

    counts: np.ndarray
    zeros: np.ndarray | None
    log_alpha: np.ndarray | None


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
    sd_c = stacked(fitted, f"counts_sd_{g}")[:, None]
    if f"zeros_sd_{g}" not in post:
        return sd_c * zc, None
    zz = rng.standard_normal((S, n_new))
    sd_z = stacked(fitted, f"zeros_sd_{g}")[:, None]
    if f"corr_{g}" in post:
        r = stacked(fitted, f"corr_{g}")[:, None]
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


def linear_predictors(fitted: Posterior, rows: EncodedRows, groups: str = "known",
                      rng: np.random.Generator | None = None,
                      draw_index: np.ndarray | None = None) -> LinearPredictors:
    """Linear predictors per posterior draw for encoded ``rows``.

    groups: ``"known"`` uses each row's fitted group effect (an unknown group is an error),
    ``"new"`` draws a fresh effect per distinct group label from the population
    distribution (rows without a group column count as one new group each), ``"none"``
    leaves group effects out (the population centre, not the population average).
    ``draw_index`` picks a subset of draws.
    """
    if groups not in GROUP_MODES:
        raise BayesziError(f"groups must be one of {GROUP_MODES}, got {groups!r}")
    rng = rng or np.random.default_rng()
    d = fitted.design
    spec = fitted.spec
    sel = slice(None) if draw_index is None else draw_index

    def take(name: str) -> np.ndarray:
        return stacked(fitted, name)[sel]

    Xc = (rows.X_counts - d.counts.center) / d.counts.scale
    eta_c = take("counts_std_coef") @ Xc.T + rows.log_offset[None, :]
    eta_z = None
    if d.zeros is not None and rows.X_zeros is not None:
        Xz = (rows.X_zeros - d.zeros.center) / d.zeros.scale
        eta_z = take("zeros_std_coef") @ Xz.T
    X_std = {"counts": Xc, "zeros": None if eta_z is None else Xz}
    for g in d.groups:
        codes = rows.group_codes.get(g.name)
        if groups == "none":
            continue
        if groups == "known":
            if codes is None:
                raise BayesziError(
                    f"known-group predictions need the grouping column {g.name!r} in the data; "
                    "add it, or ask for groups='new' (a new site) or 'average'"
                )
            if np.any(codes < 0):
                raise BayesziError(
                    f"grouping column {g.name!r} has level(s) not seen when fitting, e.g. "
                    f"row {int(np.flatnonzero(codes < 0)[0])}; known levels: {g.levels[:20]}. "
                    "Use groups='new' to predict for new groups"
                )
            eff_c = np.take(take(f"counts_effect_{g.name}"), codes, axis=1)
            eff_z = (np.take(take(f"zeros_effect_{g.name}"), codes, axis=1)
                     if eta_z is not None and f"zeros_effect_{g.name}" in fitted.idata.posterior
                     else None)
        else:
            inv = _new_group_ids(rows, g.name)
            uniq = np.arange(inv.max() + 1 if inv.size else 0)
            nc, nz = _new_effects(fitted, g.name, len(uniq), rng)
            if draw_index is not None:
                nc = nc[sel]
                nz = None if nz is None else nz[sel]
            eff_c = nc[:, inv]
            eff_z = None if nz is None else nz[:, inv]
        eta_c = eta_c + eff_c
        if eta_z is not None and eff_z is not None:
            eta_z = eta_z + eff_z
        if groups == "known":
            for part, terms in spec.varying.items():
                pdes = d.counts if part == "counts" else d.zeros
                idx = [pdes.terms.index(t) for t in terms]
                slope = take(f"{part}_slope_{g.name}")[:, codes, :]  # draws, rows, terms
                contrib = np.einsum("srt,rt->sr", slope, X_std[part][:, idx])
                if part == "counts":
                    eta_c = eta_c + contrib
                elif eta_z is not None:
                    eta_z = eta_z + contrib
        elif groups == "new":
            for part, terms in spec.varying.items():
                pdes = d.counts if part == "counts" else d.zeros
                idx = [pdes.terms.index(t) for t in terms]
                sd = take(f"{part}_slope_sd_{g.name}")  # draws, terms
                inv = _new_group_ids(rows, g.name)
                uniq = np.arange(inv.max() + 1 if inv.size else 0)
                z = rng.standard_normal((sd.shape[0], len(uniq), len(idx)))
                slope = (z * sd[:, None, :])[:, inv, :]
                contrib = np.einsum("srt,rt->sr", slope, X_std[part][:, idx])
                if part == "counts":
                    eta_c = eta_c + contrib
                elif eta_z is not None:
                    eta_z = eta_z + contrib
    log_alpha = None
    if "dispersion" in fitted.idata.posterior:
        log_alpha = np.log(take("dispersion"))[:, None]
    return LinearPredictors(eta_c, eta_z, log_alpha)


def design_rows(design: Design) -> EncodedRows:
    """The rows of ``design`` (the fitted data, or its patterns) as :class:`EncodedRows`."""
    d = design
    return EncodedRows(d.counts.X, None if d.zeros is None else d.zeros.X, d.log_offset,
                       {g.name: g.codes for g in d.groups}, d.n,
                       {g.name: np.asarray(g.levels, dtype=object)[g.codes] for g in d.groups})


def fitted_rows(fitted: Posterior) -> EncodedRows:
    """The fitted data encoded as :class:`EncodedRows` (known groups)."""
    return design_rows(fitted.design)
