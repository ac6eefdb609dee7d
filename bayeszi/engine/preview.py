"""A quick approximate posterior before sampling: the Laplace approximation at the mode.

:func:`laplace` finds the mode of the model's log posterior density on the sampler's
unconstrained scale (logs of sds and of sqrt(dispersion), the rest as they are; the Jacobian
of those transforms included), by quasi-Newton optimisation (SciPy's L-BFGS-B) with PyMC's
compiled gradient, and takes the curvature there (the Hessian, from differences of that
gradient) as the precision of a multivariate normal. Draws from that normal, mapped back to
the model's variables, stand in for posterior draws: :func:`preview_record` returns them with
the design, so the same coefficient table can be made from them.

It is deterministic for a given seed and takes seconds where NUTS takes minutes, but it is an
approximation: it is exact only for a normal posterior, and it is poor for skewed posteriors,
for group sds near zero and for weakly identified terms (which is where NUTS is needed).
Every table made from it is labelled approximate.

Why this and not Pathfinder or the Laplace routines of pymc-extras: pymc-extras 0.11 and
later need Python 3.12 (bayeszi supports 3.11), and 0.10.0, the last for 3.11, pins
pymc >= 5.28.1 (narrower than bayeszi's pymc >= 5.16) and brings ten more packages
(scikit-learn, preliz, pydantic, ...). The approximation needs only what PyMC and SciPy ship.

Example
-------
>>> rec = preview_record(df, spec)                     # doctest: +SKIP
>>> rec.idata.posterior.sizes["draw"], rec.converged    # doctest: +SKIP
(1000, True)
"""

from __future__ import annotations

import time
import warnings
from dataclasses import dataclass, field

import arviz as az
import numpy as np
import pandas as pd
import pymc as pm
from pymc.blocking import DictToArrayBijection, RaveledVars
from scipy import optimize

from bayeszi.base.errors import BayesziError
from bayeszi.base.spec import ModelSpec
from bayeszi.engine.fit import add_user_scale
from bayeszi.engine.record import Posterior
from bayeszi.model.build import build_model
from bayeszi.model.design import Design, build_design
from bayeszi.model.priors import PriorSet, resolve

#: Draws taken from the approximating normal for the tables.
PREVIEW_DRAWS = 1000
#: Relative step of the central differences of the gradient that give the Hessian.
HESSIAN_STEP = 1e-5

__all__ = ["PREVIEW_DRAWS", "LaplaceResult", "PreviewRecord", "laplace", "preview_record"]


@dataclass(frozen=True)
class LaplaceResult:
    """The normal approximation on the unconstrained scale and how it was found.

    ``converged`` is False when the optimiser stopped without meeting its tolerance;
    ``curvature_ok`` is False when the Hessian at the end was not positive definite (the
    approximation was then made from its absolute eigenvalues and is not to be trusted).
    """

    mode: np.ndarray
    cov: np.ndarray
    converged: bool
    curvature_ok: bool
    evaluations: int
    message: str


@dataclass(eq=False)
class PreviewRecord(Posterior):
    """Approximate draws of a model (one chain) with its spec, design and priors."""

    priors: PriorSet
    result: LaplaceResult
    timing: dict[str, float] = field(default_factory=dict)

    @property
    def converged(self) -> bool:
        """Whether the mode was found and the curvature there was positive definite."""
        return self.result.converged and self.result.curvature_ok


def _objective(model: pm.Model, rvs: list, start: dict):
    """(-logp and its gradient as one function of the flat unconstrained vector, x0): one
    compiled function, as NUTS uses (``Model.logp_dlogp_function``)."""
    values = [model.rvs_to_values[rv] for rv in rvs]
    x0 = DictToArrayBijection.map({v.name: start[v.name] for v in values})
    both = model.logp_dlogp_function(grad_vars=rvs, initial_point=start, ravel_inputs=True)
    both.set_extra_values({})

    def fun(x: np.ndarray) -> tuple[float, np.ndarray]:
        logp, grad = both(x)
        return -float(logp), -np.asarray(grad, dtype=float)

    return fun, x0


def _hessian(fun, x: np.ndarray) -> np.ndarray:
    """Central differences of the gradient, symmetrised: the Hessian of -logp at ``x``."""
    n = x.size
    H = np.empty((n, n))
    for j in range(n):
        h = HESSIAN_STEP * max(1.0, abs(x[j]))
        up, down = x.copy(), x.copy()
        up[j] += h
        down[j] -= h
        H[:, j] = (fun(up)[1] - fun(down)[1]) / (2 * h)
    return 0.5 * (H + H.T)


def _covariance(H: np.ndarray) -> tuple[np.ndarray, bool]:
    """The inverse of ``H``, and whether ``H`` was positive definite (else its absolute
    eigenvalues, floored, are used)."""
    vals, vecs = np.linalg.eigh(H)
    ok = bool(np.all(vals > 0) and np.all(np.isfinite(vals)))
    if not ok:
        vals = np.maximum(np.abs(vals), 1e-8)
    return (vecs / vals) @ vecs.T, ok


def laplace(model: pm.Model) -> LaplaceResult:
    """The Laplace approximation of ``model``'s posterior on the unconstrained scale.

    Example
    -------
    >>> res = laplace(build_model(design, priors).model)   # doctest: +SKIP
    >>> res.converged, res.mode.shape                      # doctest: +SKIP
    (True, (14,))
    """
    rvs = list(model.free_RVs)
    start = model.initial_point()
    fun, x0 = _objective(model, rvs, start)
    with warnings.catch_warnings(), np.errstate(all="ignore"):
        warnings.simplefilter("ignore")
        opt = optimize.minimize(fun, x0.data, jac=True, method="L-BFGS-B",
                                options={"maxiter": 5000, "maxfun": 20000})
        H = _hessian(fun, opt.x)
    if not np.all(np.isfinite(opt.x)) or not np.all(np.isfinite(H)):
        raise BayesziError("the preview found no finite posterior mode (the log density is "
                           "not finite there); sample the model instead")
    cov, ok = _covariance(H)
    return LaplaceResult(opt.x, cov, bool(opt.success), ok, int(opt.nfev), str(opt.message))


def _draws(model: pm.Model, res: LaplaceResult, draws: int, seed: int | None
           ) -> az.InferenceData:
    """Draws of every model variable (free and deterministic) from the normal of ``res``."""
    rvs = list(model.free_RVs)
    start = model.initial_point()
    values = [model.rvs_to_values[rv] for rv in rvs]
    x0 = DictToArrayBijection.map({v.name: start[v.name] for v in values})
    outs = [v for v in model.unobserved_value_vars if v.name in
            {rv.name for rv in rvs} | {d.name for d in model.deterministics}]
    fn = model.compile_fn(inputs=model.value_vars, outs=outs, on_unused_input="ignore")
    rng = np.random.default_rng(seed)
    L = np.linalg.cholesky(res.cov + 1e-12 * np.eye(res.mode.size))
    flat = res.mode + rng.standard_normal((draws, res.mode.size)) @ L.T
    got: dict[str, list[np.ndarray]] = {v.name: [] for v in outs}
    for x in flat:
        point = DictToArrayBijection.rmap(RaveledVars(x, x0.point_map_info), start)
        for v, val in zip(outs, fn(point), strict=True):
            got[v.name].append(np.asarray(val))
    dims = {k: list(v) for k, v in model.named_vars_to_dims.items() if k in got}
    return az.from_dict(posterior={k: np.stack(v)[None] for k, v in got.items()},
                        coords={k: list(v) for k, v in model.coords.items()}, dims=dims)


def preview_record(data: pd.DataFrame, spec: ModelSpec, design: Design | None = None,
                   draws: int = PREVIEW_DRAWS, seed: int | None = None) -> PreviewRecord:
    """The Laplace approximation of ``spec`` on ``data``, as approximate draws (no warnings).

    ``seed`` defaults to the spec's sampler seed.

    Example
    -------
    >>> rec = preview_record(df, spec)                     # doctest: +SKIP
    >>> float(rec.idata.posterior["counts_coef"].mean())   # doctest: +SKIP
    """
    t0 = time.perf_counter()
    design = build_design(data, spec) if design is None else design
    priors = resolve(design, spec.priors)
    model = build_model(design, priors).model
    t1 = time.perf_counter()
    res = laplace(model)
    t2 = time.perf_counter()
    idata = _draws(model, res, draws, spec.sampler.seed if seed is None else seed)
    add_user_scale(idata, design)
    timing = {"build_s": t1 - t0, "mode_s": t2 - t1, "draws_s": time.perf_counter() - t2}
    return PreviewRecord(spec, design, idata, priors, res, timing)
