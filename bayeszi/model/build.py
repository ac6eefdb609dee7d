"""Spec + design + priors -> a PyMC model with named coordinates.

Coordinates: ``counts_term`` and ``zeros_term`` (formula columns), ``obs`` (rows), one per
grouping column (its levels). Coefficients are sampled on the internal (centred, scaled)
scale as ``counts_std_coef`` / ``zeros_std_coef``. Group effects are non-centred
(``effect = sd z``), except the intercepts of data-rich levels (see
:func:`centred_levels`), which are sampled centred on their part's intercept.

Example
-------
>>> import pandas as pd
>>> from bayeszi.base.spec import ModelSpec
>>> from bayeszi.model.design import build_design
>>> from bayeszi.model.priors import resolve
>>> from bayeszi.model.build import build_model
>>> df = pd.DataFrame({"y": [0, 1, 3, 0, 2], "x": [0.1, 0.5, 0.9, 0.2, 0.4]})
>>> d = build_design(df, ModelSpec(counts="y ~ x", family="poisson"))
>>> m = build_model(d, resolve(d, None)).model
>>> sorted(m.named_vars)[:2]
['counts_std_coef', 'y']
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pymc as pm
import pytensor.tensor as pt

from bayeszi.base import names
from bayeszi.families import get_family
from bayeszi.model.design import Design, GroupDesign, PartDesign
from bayeszi.model.patterns import Likelihood, find_patterns, pattern_logp, pattern_random
from bayeszi.model.priors import Prior, PriorSet

#: Sample data-rich levels' intercepts centred (see :func:`centred_levels`); False: never.
CENTRING = True
#: A level is centred when its data variance on the intercept is below the between-level
#: variance divided by this (its data sd below half the spread of the levels).
CENTRE_MARGIN = 4.0
#: Levels with fewer records are never centred (measured: with 20 records per level the
#: centred form diverged in fits where the non-centred one did not; docs/performance.md).
CENTRE_MIN_RECORDS = 50
#: Information on the zeros-part logit is taken as the binomial information of the zero
#: share divided by this: extra zeros and count zeros cannot be told apart record by record.
ZEROS_DILUTION = 4.0


def _dist(name: str, p: Prior, dims: str | tuple[str, ...] | None = None,
          shape: int | None = None):
    kw = {"dims": dims} if dims is not None else ({"shape": shape} if shape else {})
    if p.dist == "normal":
        return pm.Normal(name, mu=p.a, sigma=p.b, **kw)
    if p.dist == "student_t":
        return pm.StudentT(name, mu=p.a, sigma=p.b, nu=p.c, **kw)
    if p.dist == "laplace":
        return pm.Laplace(name, mu=p.a, b=p.b, **kw)
    if p.dist == "halfnormal":
        return pm.HalfNormal(name, sigma=p.a, **kw)
    if p.dist == "exponential":
        return pm.Exponential(name, lam=p.a, **kw)
    return pm.HalfStudentT(name, sigma=p.a, nu=p.b, **kw)


def _coefficients(part: str, pdes: PartDesign, priors: dict[str, Prior]):
    name = names.std_coef(part)
    dims = names.term_dim(part)
    plist = [priors[t] for t in pdes.terms]
    if all(p.dist == "normal" for p in plist):
        mu = np.array([p.a for p in plist])
        sd = np.array([p.b for p in plist])
        return pm.Normal(name, mu=mu, sigma=sd, dims=dims)
    # Mixed families of priors: one raw variable per term, stacked.
    raws = [_dist(names.std_coef_raw(part, j), p) for j, p in enumerate(plist)]
    return pm.Deterministic(name, pt.stack(raws), dims=dims)


def _correlated_intercepts(g: GroupDesign, priors: PriorSet):
    """Counts and zeros intercepts of group ``g`` with correlation ``corr_{g}`` (non-centred).

    Each part keeps its own sd prior. For a 2 x 2 correlation matrix the LKJ(eta) density,
    proportional to det(R)^(eta - 1) = (1 - rho^2)^(eta - 1), is exactly a Beta(eta, eta)
    density for (rho + 1) / 2, so rho is sampled that way (``z_corr_{g}``, a raw variable
    like the z's). The effects are ``sd_c z_c`` and ``sd_z (rho z_c + sqrt(1 - rho^2) z_z)``
    with independent standard normal z's: correlation rho, sds sd_c and sd_z.
    """
    sd_c = _dist(names.group_sd("counts", g.name), priors.group_sd["counts"])
    sd_z = _dist(names.group_sd("zeros", g.name), priors.group_sd["zeros"])
    half = pm.Beta(names.corr_raw(g.name), alpha=priors.lkj_eta, beta=priors.lkj_eta)
    rho = pm.Deterministic(names.corr(g.name), 2.0 * half - 1.0)
    zc = pm.Normal(names.group_raw("counts", g.name), 0.0, 1.0, dims=g.name)
    zz = pm.Normal(names.group_raw("zeros", g.name), 0.0, 1.0, dims=g.name)
    ec = pm.Deterministic(names.effect("counts", g.name), sd_c * zc, dims=g.name)
    ez = pm.Deterministic(names.effect("zeros", g.name),
                          sd_z * (rho * zc + pt.sqrt(1.0 - rho**2) * zz), dims=g.name)
    return ec, ez


def _slopes(part: str, pdes: PartDesign, terms: tuple[str, ...], g: GroupDesign,
            prior: Prior, codes):
    """Group deviations of the slopes of ``terms`` (internal scale, non-centred): the part's
    linear predictor gains ``sum_t slope[group, t] * x_std[:, t]``."""
    idx = [pdes.terms.index(t) for t in terms]
    Xs = pt.as_tensor_variable(pdes.X_std[:, idx])
    dims = (g.name, names.slope_term_dim(part))
    sd = _dist(names.slope_sd(part, g.name), prior, dims=names.slope_term_dim(part))
    z = pm.Normal(names.slope_raw(part, g.name), 0.0, 1.0, dims=dims)
    slope = pm.Deterministic(names.slope(part, g.name), z * sd, dims=dims)
    return pt.sum(slope[codes] * Xs, axis=1)


def centred_levels(design: Design, part: str = "counts") -> dict[str, np.ndarray]:
    """Per grouping column, which levels get a centred ``part`` intercept (a boolean mask).

    Non-centred effects (``effect = sd z``) sample well when a level holds little data: the
    prior dominates. When the data pin a level's intercept far more tightly than the group
    sd spreads it, the non-centred z's and the sd (and the intercept) become strongly
    correlated and NUTS needs many short steps; sampling the level itself,
    ``level ~ Normal(intercept, sd)``, removes that (the centred form; Papaspiliopoulos,
    Roberts & Skold 2007, Stat. Sci., from memory): better when a level's data are more
    informative than the group-level prior, worse (a funnel, divergences) when they are not.
    The sd is not known before sampling, so the rule estimates both sides from the data by
    moments, ignoring covariates:

    - per level a crude intercept and its sampling variance: counts part, ``log`` of the
      level's summed count per unit of exposure ``m = sum(y) / sum(e)``, with the sandwich
      variance ``sum((y - m e)^2) / sum(y)^2`` (which grows with overdispersion and extra
      zeros); zeros part, the logit of the level's share of zero counts, variance
      :data:`ZEROS_DILUTION` ``/ (n p (1 - p))`` (binomial, inflated because a zero may be
      an ordinary count);
    - the between-level variance, ``var(estimates) - mean(sampling variances)`` (the
      method-of-moments estimate used in random-effects meta-analysis);
    - a level is centred when its sampling variance is below the between-level variance
      divided by :data:`CENTRE_MARGIN`, i.e. its data sd is below half the levels' spread,
      and it holds at least :data:`CENTRE_MIN_RECORDS` records. Nothing is centred when
      the spread is not clearly positive.

    Only with one grouping column of at least three levels, no correlated intercepts and an
    intercept in the part's formula. The model is the same either way; only its
    parametrisation differs (measured in docs/performance.md).

    Example
    -------
    >>> import pandas as pd
    >>> from bayeszi.base.spec import ModelSpec
    >>> from bayeszi.model.design import build_design
    >>> import numpy as np
    >>> rng = np.random.default_rng(1)
    >>> sizes, means = [60, 10, 60, 60], [20.0, 2.0, 5.0, 12.0]
    >>> df = pd.DataFrame({"y": np.concatenate([rng.poisson(m, k) for k, m in
    ...                                         zip(sizes, means)]),
    ...                    "s": np.repeat(list("abcd"), sizes)})
    >>> d = build_design(df, ModelSpec(counts="y ~ 1", family="poisson", groups=("s",)))
    >>> centred_levels(d)["s"].tolist()   # b: only 10 records
    [True, False, True, True]
    """
    spec = design.spec
    pdes = design.counts if part == "counts" else design.zeros
    if not CENTRING or len(design.groups) != 1 or spec.correlated or pdes is None \
            or pdes.intercept is None or len(design.groups[0].levels) < 3:
        return {}
    g = design.groups[0]
    n = np.bincount(g.codes, minlength=len(g.levels)).astype(float)
    est, var = _level_moments(design, g, part, n)
    between = float(np.var(est, ddof=1) - np.mean(var))
    if not between > 0:
        return {}
    mask = (var < between / CENTRE_MARGIN) & (n >= CENTRE_MIN_RECORDS)
    return {g.name: mask} if mask.any() else {}


def _level_moments(design: Design, g: GroupDesign, part: str, n: np.ndarray
                   ) -> tuple[np.ndarray, np.ndarray]:
    """Per level of ``g``: a crude intercept of ``part`` and its sampling variance, by
    moments and without covariates (see :func:`centred_levels`); ``n`` records per level."""
    J = len(g.levels)
    y = design.y.astype(float)
    if part == "counts":
        e = np.exp(design.log_offset)
        total = np.bincount(g.codes, weights=y, minlength=J) + 0.5
        m = total / np.bincount(g.codes, weights=e, minlength=J)
        var = (np.bincount(g.codes, weights=(y - m[g.codes] * e) ** 2, minlength=J)
               + 0.5) / total**2
        return np.log(m), var
    p = (np.bincount(g.codes, weights=(y == 0).astype(float), minlength=J) + 0.5) / (n + 1)
    return np.log(p / (1 - p)), ZEROS_DILUTION / ((n + 1) * p * (1 - p))


def group_level_columns(pdes: PartDesign, g: GroupDesign) -> tuple[np.ndarray, np.ndarray]:
    """Columns of ``pdes`` (intercept excluded) constant within every level of ``g`` (group-
    level predictors such as a reach's barrier), and their value per level.

    Example
    -------
    >>> d = fitted.design                                      # doctest: +SKIP
    >>> cols, values = group_level_columns(d.zeros, d.groups[0])  # doctest: +SKIP
    """
    X = pdes.X_std
    first = np.full(len(g.levels), -1)
    first[g.codes[::-1]] = np.arange(g.codes.size)[::-1]
    cols = [j for j in range(X.shape[1]) if j != pdes.intercept
            and np.allclose(X[:, j], X[first, j][g.codes], rtol=0, atol=1e-12)]
    cols_arr = np.asarray(cols, dtype=int)
    return cols_arr, X[np.ix_(first, cols_arr)]


def _level_centre(pdes: PartDesign, coef, g: GroupDesign):
    """Per level of ``g``: the part's intercept plus its group-level predictors (the centre
    of a centred level), as a tensor of the coefficients ``coef``."""
    cols, values = group_level_columns(pdes, g)
    return coef[pdes.intercept] + pt.dot(pt.as_tensor_variable(values), coef[cols])


def _intercepts(part: str, g: GroupDesign, sd, centre, centred: np.ndarray | None):
    """Intercept effects of group ``g`` in ``part``: non-centred, or centred for the levels
    in ``centred``: ``{part}_level_{g}`` ~ Normal(centre, sd) and effect = level - centre,
    with ``centre`` (one value per level) the part's intercept plus its group-level
    predictors (:func:`group_level_columns`)."""
    if centred is None:
        z = pm.Normal(names.group_raw(part, g.name), 0.0, 1.0, dims=g.name)
        return pm.Deterministic(names.effect(part, g.name), sd * z, dims=g.name)
    rich, poor = np.flatnonzero(centred), np.flatnonzero(~centred)
    level = pm.Normal(names.level(part, g.name), centre[rich], sd,
                      dims=names.centred_dim(part, g.name))
    eff = pt.zeros(len(g.levels))
    eff = pt.set_subtensor(eff[rich], level - centre[rich])
    if poor.size:
        z = pm.Normal(names.group_raw(part, g.name), 0.0, 1.0,
                      dims=names.noncentred_dim(part, g.name))
        eff = pt.set_subtensor(eff[poor], sd * z)
    return pm.Deterministic(names.effect(part, g.name), eff, dims=g.name)


def _group_terms(design: Design, priors: PriorSet, g: GroupDesign, eta_c, eta_z,
                 centres: dict | None = None, centred: dict | None = None):
    """Add group ``g``'s intercepts (both parts) and varying slopes to the linear predictors.

    Non-centred: effect = sd * z with z ~ Normal(0, 1), which samples well when a group
    holds few records (the usual case), except the intercepts of the levels in
    ``centred[part]`` (:func:`centred_levels`), centred on ``centres[part]``;
    ``{part}_effect_{g}`` are the effects.
    """
    spec = design.spec
    codes = pt.as_tensor_variable(g.codes)
    parts = ["counts"] + (["zeros"] if design.zeros is not None else [])
    if spec.correlated and design.zeros is not None:
        ec, ez = _correlated_intercepts(g, priors)
        eta_c = eta_c + ec[codes]
        eta_z = eta_z + ez[codes]
    else:
        for part in parts:
            sd = _dist(names.group_sd(part, g.name), priors.group_sd[part])
            mask = (centred or {}).get(part)
            eff = _intercepts(part, g, sd, (centres or {}).get(part), mask)
            if part == "counts":
                eta_c = eta_c + eff[codes]
            else:
                eta_z = eta_z + eff[codes]
    for part, terms in spec.varying.items():
        pdes = design.counts if part == "counts" else design.zeros
        contrib = _slopes(part, pdes, terms, g, priors.group_sd[part], codes)
        if part == "counts":
            eta_c = eta_c + contrib
        else:
            eta_z = eta_z + contrib
    return eta_c, eta_z


@dataclass(frozen=True)
class BuiltModel:
    """A PyMC model and what its likelihood was built on (family, row patterns, and the
    linear predictors as tensors of the free variables, which tests evaluate)."""

    model: pm.Model
    likelihood: Likelihood

    @property
    def n_rows(self) -> int:
        """Rows the density is computed over: patterns (pooled records)."""
        return self.likelihood.patterns.n_patterns


def build_model(design: Design, priors: PriorSet) -> BuiltModel:
    """Return the PyMC model of ``design`` under ``priors`` (see module example)."""
    spec = design.spec
    fam = get_family(spec.family)
    coords: dict[str, list[str]] = {names.term_dim("counts"): design.counts.terms,
                                    "obs": [str(i) for i in range(design.n)]}
    if design.zeros is not None:
        coords[names.term_dim("zeros")] = design.zeros.terms
    for g in design.groups:
        coords[g.name] = g.levels
    for part, terms in spec.varying.items():
        coords[names.slope_term_dim(part)] = list(terms)
    # which levels get centred intercepts: decided on the records, before pooling
    centred = {part: centred_levels(design, part) for part in ("counts", "zeros")}
    for part, masks in centred.items():
        for name, mask in masks.items():
            levels = np.asarray(coords[name], dtype=object)
            coords[names.centred_dim(part, name)] = list(levels[mask])
            if not mask.all():
                coords[names.noncentred_dim(part, name)] = list(levels[~mask])
    # Everything below works on patterns of identical records (see bayeszi/patterns.py):
    # one row per distinct record when records repeat, else one per record, zeros first.
    patterns = find_patterns(design)
    design = patterns.design

    with pm.Model(coords=coords) as model:
        Xc = pt.as_tensor_variable(design.counts.X_std)
        bc = _coefficients("counts", design.counts, priors.counts)
        eta_c = pt.dot(Xc, bc) + pt.as_tensor_variable(design.log_offset)
        eta_z = pt.as_tensor_variable(np.zeros(1))
        bz = None
        if design.zeros is not None:
            Xz = pt.as_tensor_variable(design.zeros.X_std)
            bz = _coefficients("zeros", design.zeros, priors.zeros)
            eta_z = pt.dot(Xz, bz)
        coefs = {"counts": (design.counts, bc), "zeros": (design.zeros, bz)}
        for g in design.groups:
            masks = {part: m[g.name] for part, m in centred.items() if g.name in m}
            centres = {part: _level_centre(*coefs[part], g) for part in masks}
            eta_c, eta_z = _group_terms(design, priors, g, eta_c, eta_z, centres, masks)
        if fam.has_dispersion:
            sqrt_alpha = _dist(names.DISPERSION_SQRT, priors.dispersion)
            log_alpha = 2.0 * pt.log(sqrt_alpha)
            pm.Deterministic(names.DISPERSION, sqrt_alpha**2)
        else:
            log_alpha = pt.as_tensor_variable(np.zeros(1))

        # ---- likelihood: per pattern, one value per original record (bayeszi/patterns.py)
        # The density sums each pattern once, weighted by its records; the pointwise
        # log-likelihood per record is computed after sampling, in NumPy
        # (bayeszi.engine.pointwise.pattern_log_likelihood, called by bayeszi.engine.fit).
        pm.CustomDist(names.RESPONSE, eta_c, eta_z, log_alpha,
                      logp=pattern_logp(fam.name, patterns),
                      random=pattern_random(fam.name, patterns),
                      observed=design.y[patterns.inverse], dims="obs", dtype="int64")
    return BuiltModel(model, Likelihood(fam.name, patterns, eta_c, eta_z, log_alpha))
