"""Spec + design + priors -> a PyMC model with named coordinates.

Coordinates: ``counts_term`` and ``zeros_term`` (formula columns), ``obs`` (rows), one per
grouping column (its levels). Coefficients are sampled on the internal (centred, scaled)
scale as ``counts_std_coef`` / ``zeros_std_coef``; group effects are non-centred.

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


def _group_terms(design: Design, priors: PriorSet, g: GroupDesign, eta_c, eta_z):
    """Add group ``g``'s intercepts (both parts) and varying slopes to the linear predictors.

    Non-centred throughout: effect = sd * z with z ~ Normal(0, 1), which samples well when a
    group holds few records (the usual case); ``{part}_effect_{g}`` are the effects.
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
            z = pm.Normal(f"{part}_z_{g.name}", 0.0, 1.0, dims=g.name)
            eff = pm.Deterministic(f"{part}_effect_{g.name}", sd * z, dims=g.name)
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
            eta_c, eta_z = _group_terms(design, priors, g, eta_c, eta_z)
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
