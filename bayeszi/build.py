"""Spec + design + priors -> a PyMC model with named coordinates.

Coordinates: ``counts_term`` and ``zeros_term`` (formula columns), ``obs`` (rows), one per
grouping column (its levels). Coefficients are sampled on the internal (centred, scaled)
scale as ``counts_std_coef`` / ``zeros_std_coef``. Group effects are non-centred
(``effect = sd z``), except the counts intercepts of data-rich levels (see
:func:`centred_levels`), which are sampled centred on the counts intercept.

Example
-------
>>> import pandas as pd
>>> from bayeszi.spec import ModelSpec
>>> from bayeszi.design import build_design
>>> from bayeszi.priors import resolve
>>> from bayeszi.build import build_model
>>> df = pd.DataFrame({"y": [0, 1, 3, 0, 2], "x": [0.1, 0.5, 0.9, 0.2, 0.4]})
>>> d = build_design(df, ModelSpec(counts="y ~ x", family="poisson"))
>>> m = build_model(d, resolve(d, None))
>>> sorted(m.named_vars)[:2]
['counts_std_coef', 'y']
"""

from __future__ import annotations

import numpy as np
import pymc as pm
import pytensor.tensor as pt

from bayeszi.design import Design, GroupDesign, PartDesign
from bayeszi.families import get_family
from bayeszi.patterns import Likelihood, find_patterns, pattern_logp, pattern_random
from bayeszi.priors import Prior, PriorSet

#: A level's counts intercept is sampled centred when its records' counts sum to at least
#: this much (and the model has one grouping column, no correlated intercepts): see
#: :func:`centred_levels` and docs/performance.md.
CENTRE_MIN_COUNT = 30


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
    name = f"{part}_std_coef"
    dims = f"{part}_term"
    plist = [priors[t] for t in pdes.terms]
    if all(p.dist == "normal" for p in plist):
        mu = np.array([p.a for p in plist])
        sd = np.array([p.b for p in plist])
        return pm.Normal(name, mu=mu, sigma=sd, dims=dims)
    # Mixed families of priors: one raw variable per term, stacked.
    raws = [_dist(f"{part}_std_coef_{j}", p) for j, p in enumerate(plist)]
    return pm.Deterministic(name, pt.stack(raws), dims=dims)


def _correlated_intercepts(g: GroupDesign, priors: PriorSet):
    """Counts and zeros intercepts of group ``g`` with correlation ``corr_{g}`` (non-centred).

    Each part keeps its own sd prior. For a 2 x 2 correlation matrix the LKJ(eta) density,
    proportional to det(R)^(eta - 1) = (1 - rho^2)^(eta - 1), is exactly a Beta(eta, eta)
    density for (rho + 1) / 2, so rho is sampled that way (``z_corr_{g}``, a raw variable
    like the z's). The effects are ``sd_c z_c`` and ``sd_z (rho z_c + sqrt(1 - rho^2) z_z)``
    with independent standard normal z's: correlation rho, sds sd_c and sd_z.
    """
    sd_c = _dist(f"counts_sd_{g.name}", priors.group_sd["counts"])
    sd_z = _dist(f"zeros_sd_{g.name}", priors.group_sd["zeros"])
    half = pm.Beta(f"z_corr_{g.name}", alpha=priors.lkj_eta, beta=priors.lkj_eta)
    rho = pm.Deterministic(f"corr_{g.name}", 2.0 * half - 1.0)
    zc = pm.Normal(f"counts_z_{g.name}", 0.0, 1.0, dims=g.name)
    zz = pm.Normal(f"zeros_z_{g.name}", 0.0, 1.0, dims=g.name)
    ec = pm.Deterministic(f"counts_effect_{g.name}", sd_c * zc, dims=g.name)
    ez = pm.Deterministic(f"zeros_effect_{g.name}",
                          sd_z * (rho * zc + pt.sqrt(1.0 - rho**2) * zz), dims=g.name)
    return ec, ez


def _slopes(part: str, pdes: PartDesign, terms: tuple[str, ...], g: GroupDesign,
            prior: Prior, codes):
    """Group deviations of the slopes of ``terms`` (internal scale, non-centred): the part's
    linear predictor gains ``sum_t slope[group, t] * x_std[:, t]``."""
    idx = [pdes.terms.index(t) for t in terms]
    Xs = pt.as_tensor_variable(pdes.X_std[:, idx])
    dims = (g.name, f"{part}_slope_term")
    sd = _dist(f"{part}_slope_sd_{g.name}", prior, dims=f"{part}_slope_term")
    z = pm.Normal(f"{part}_slope_z_{g.name}", 0.0, 1.0, dims=dims)
    slope = pm.Deterministic(f"{part}_slope_{g.name}", z * sd, dims=dims)
    return pt.sum(slope[codes] * Xs, axis=1)


def centred_levels(design: Design) -> dict[str, np.ndarray]:
    """Per grouping column, which levels get a centred counts intercept (a boolean mask).

    Non-centred effects (``effect = sd z``) sample well when a level holds little data: the
    prior dominates. When the data pin a level's counts intercept far more tightly than the
    group sd spreads it, the non-centred z's and the sd (and the intercept) become strongly
    correlated and NUTS needs many short steps; sampling the level itself,
    ``level ~ Normal(intercept, sd)``, removes that (the centred form; Papaspiliopoulos,
    Roberts & Skold 2007, Stat. Sci., from memory). A level's counts carry about ``sum(y)``
    units of information on its log mean (Poisson; less under overdispersion), so a level is
    centred when its counts sum to :data:`CENTRE_MIN_COUNT` or more: its data sd on the log
    scale, about ``1/sqrt(30) = 0.18``, is then below the group sds seen in practice. Only
    with one grouping column, no correlated intercepts and an intercept in the counts
    formula; the zeros part stays non-centred (one binary outcome per record carries much
    less information; measured in docs/performance.md). The model is the same either way,
    only its parametrisation differs.

    Example
    -------
    >>> import pandas as pd
    >>> from bayeszi.spec import ModelSpec
    >>> from bayeszi.design import build_design
    >>> df = pd.DataFrame({"y": [9, 8, 7, 9, 0, 1], "s": list("aaaabb")})
    >>> d = build_design(df, ModelSpec(counts="y ~ 1", family="poisson", groups=("s",)))
    >>> centred_levels(d)["s"].tolist()
    [True, False]
    """
    spec = design.spec
    if len(design.groups) != 1 or spec.correlated or design.counts.intercept is None:
        return {}
    g = design.groups[0]
    total = np.bincount(g.codes, weights=design.y.astype(float), minlength=len(g.levels))
    mask = total >= CENTRE_MIN_COUNT
    return {g.name: mask} if mask.any() else {}


def _counts_intercepts(g: GroupDesign, sd, intercept, centred: np.ndarray | None):
    """Counts intercept effects of group ``g``: non-centred, or centred for the levels in
    ``centred`` (``counts_level_{g}`` ~ Normal(intercept, sd), effect = level - intercept)."""
    if centred is None:
        z = pm.Normal(f"counts_z_{g.name}", 0.0, 1.0, dims=g.name)
        return pm.Deterministic(f"counts_effect_{g.name}", sd * z, dims=g.name)
    rich, poor = np.flatnonzero(centred), np.flatnonzero(~centred)
    level = pm.Normal(f"counts_level_{g.name}", intercept, sd, dims=f"{g.name}_centred")
    eff = pt.zeros(len(g.levels))
    eff = pt.set_subtensor(eff[rich], level - intercept)
    if poor.size:
        z = pm.Normal(f"counts_z_{g.name}", 0.0, 1.0, dims=f"{g.name}_noncentred")
        eff = pt.set_subtensor(eff[poor], sd * z)
    return pm.Deterministic(f"counts_effect_{g.name}", eff, dims=g.name)


def _group_terms(design: Design, priors: PriorSet, g: GroupDesign, eta_c, eta_z,
                 intercept=None, centred: np.ndarray | None = None):
    """Add group ``g``'s intercepts (both parts) and varying slopes to the linear predictors.

    Non-centred: effect = sd * z with z ~ Normal(0, 1), which samples well when a group
    holds few records (the usual case), except the counts intercepts of the levels in
    ``centred`` (:func:`centred_levels`); ``{part}_effect_{g}`` are the effects.
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
            sd = _dist(f"{part}_sd_{g.name}", priors.group_sd[part])
            if part == "counts":
                eff = _counts_intercepts(g, sd, intercept, centred)
                eta_c = eta_c + eff[codes]
            else:
                z = pm.Normal(f"{part}_z_{g.name}", 0.0, 1.0, dims=g.name)
                eff = pm.Deterministic(f"{part}_effect_{g.name}", sd * z, dims=g.name)
                eta_z = eta_z + eff[codes]
    for part, terms in spec.varying.items():
        pdes = design.counts if part == "counts" else design.zeros
        contrib = _slopes(part, pdes, terms, g, priors.group_sd[part], codes)
        if part == "counts":
            eta_c = eta_c + contrib
        else:
            eta_z = eta_z + contrib
    return eta_c, eta_z


def build_model(design: Design, priors: PriorSet) -> pm.Model:
    """Return the PyMC model of ``design`` under ``priors`` (see module example)."""
    spec = design.spec
    fam = get_family(spec.family)
    coords: dict[str, list[str]] = {"counts_term": design.counts.terms,
                                    "obs": [str(i) for i in range(design.n)]}
    if design.zeros is not None:
        coords["zeros_term"] = design.zeros.terms
    for g in design.groups:
        coords[g.name] = g.levels
    for part, terms in spec.varying.items():
        coords[f"{part}_slope_term"] = list(terms)
    centred = centred_levels(design)
    for name, mask in centred.items():
        levels = coords[name]
        coords[f"{name}_centred"] = [lv for lv, c in zip(levels, mask, strict=True) if c]
        if not mask.all():
            coords[f"{name}_noncentred"] = [lv for lv, c in zip(levels, mask, strict=True)
                                            if not c]
    # Everything below works on patterns of identical records (see bayeszi/patterns.py):
    # one row per distinct record when records repeat, else one per record, zeros first.
    patterns = find_patterns(design)
    design = patterns.design

    with pm.Model(coords=coords) as model:
        Xc = pt.as_tensor_variable(design.counts.X_std)
        bc = _coefficients("counts", design.counts, priors.counts)
        eta_c = pt.dot(Xc, bc) + pt.as_tensor_variable(design.log_offset)
        eta_z = pt.as_tensor_variable(np.zeros(1))
        if design.zeros is not None:
            Xz = pt.as_tensor_variable(design.zeros.X_std)
            bz = _coefficients("zeros", design.zeros, priors.zeros)
            eta_z = pt.dot(Xz, bz)
        for g in design.groups:
            icpt = bc[design.counts.intercept] if g.name in centred else None
            eta_c, eta_z = _group_terms(design, priors, g, eta_c, eta_z, icpt,
                                        centred.get(g.name))
        if fam.has_dispersion:
            sqrt_alpha = _dist("dispersion_sqrt", priors.dispersion)
            log_alpha = 2.0 * pt.log(sqrt_alpha)
            pm.Deterministic("dispersion", sqrt_alpha**2)
        else:
            log_alpha = pt.as_tensor_variable(np.zeros(1))

        # ---- likelihood: per pattern, one value per original record (bayeszi/patterns.py)
        # The density sums each pattern once, weighted by its records; the pointwise
        # log-likelihood per record is computed after sampling (bayeszi.sample.run_nuts).
        pm.CustomDist("y", eta_c, eta_z, log_alpha,
                      logp=pattern_logp(fam.name, patterns),
                      random=pattern_random(fam.name, patterns),
                      observed=design.y[patterns.inverse], dims="obs", dtype="int64")
    model.bayeszi_likelihood = Likelihood(  # type: ignore[attr-defined]
        fam.name, patterns, eta_c, eta_z, log_alpha)
    return model
