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

from bayeszi.design import Design, PartDesign
from bayeszi.families import get_family
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


def _sd_dist(p: Prior):
    if p.dist == "halfnormal":
        return pm.HalfNormal.dist(sigma=p.a)
    if p.dist == "exponential":
        return pm.Exponential.dist(lam=p.a)
    return pm.HalfStudentT.dist(sigma=p.a, nu=p.b)


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

    with pm.Model(coords=coords) as model:
        Xc = pt.as_tensor_variable(design.counts.X_std)
        bc = _coefficients("counts", design.counts, priors.counts)
        eta_c = pt.dot(Xc, bc) + pt.as_tensor_variable(design.log_offset)
        eta_z = pt.as_tensor_variable(np.zeros(1))
        if design.zeros is not None:
            Xz = pt.as_tensor_variable(design.zeros.X_std)
            bz = _coefficients("zeros", design.zeros, priors.zeros)
            eta_z = pt.dot(Xz, bz)
        parts = ["counts"] + (["zeros"] if design.zeros is not None else [])
        for g in design.groups:
            codes = pt.as_tensor_variable(g.codes)
            if spec.correlated and design.zeros is not None:
                if all(priors.group_sd[p].dist == "halfnormal" for p in parts):
                    sd_dist = pm.HalfNormal.dist(sigma=np.array(
                        [priors.group_sd["counts"].a, priors.group_sd["zeros"].a]), shape=2)
                else:  # mixed kinds of sd prior: the counts one serves both
                    sd_dist = _sd_dist(priors.group_sd["counts"])
                chol, corr, sds = pm.LKJCholeskyCov(
                    f"{g.name}_chol", n=2, eta=priors.lkj_eta, sd_dist=sd_dist,
                    compute_corr=True)
                pm.Deterministic(f"counts_sd_{g.name}", sds[0])
                pm.Deterministic(f"zeros_sd_{g.name}", sds[1])
                pm.Deterministic(f"corr_{g.name}", corr[0, 1])
                z = pm.Normal(f"z_{g.name}", 0.0, 1.0, shape=(len(g.levels), 2))
                eff = pt.dot(z, chol.T)
                ec = pm.Deterministic(f"counts_effect_{g.name}", eff[:, 0], dims=g.name)
                ez = pm.Deterministic(f"zeros_effect_{g.name}", eff[:, 1], dims=g.name)
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
                idx = [pdes.terms.index(t) for t in terms]
                Xs = pt.as_tensor_variable(pdes.X_std[:, idx])
                base = priors.group_sd[part]
                sd = _dist(f"{part}_slope_sd_{g.name}", base, dims=f"{part}_slope_term")
                z = pm.Normal(f"{part}_slope_z_{g.name}", 0.0, 1.0,
                              dims=(g.name, f"{part}_slope_term"))
                slope = pm.Deterministic(f"{part}_slope_{g.name}", z * sd,
                                         dims=(g.name, f"{part}_slope_term"))
                contrib = pt.sum(slope[codes] * Xs, axis=1)
                if part == "counts":
                    eta_c = eta_c + contrib
                else:
                    eta_z = eta_z + contrib
        if fam.has_dispersion:
            sqrt_alpha = _dist("dispersion_sqrt", priors.dispersion)
            log_alpha = 2.0 * pt.log(sqrt_alpha)
            pm.Deterministic("dispersion", sqrt_alpha**2)
        else:
            log_alpha = pt.as_tensor_variable(np.zeros(1))

        def _random(ec, ez, la, rng=None, size=None):
            return fam.random(rng, ec, ez, la, size=size)

        pm.CustomDist("y", eta_c, eta_z, log_alpha, logp=fam.logp, random=_random,
                      observed=design.y, dims="obs", dtype="int64")
    return model
