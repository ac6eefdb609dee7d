"""The six count families of bayeszi: log-likelihoods, random draws and closed-form moments.

Every family is described by three per-row quantities, always on the unconstrained scale:

``eta_c``
    log of the count-process mean ``mu`` (log link; already includes ``log(exposure)``).
``eta_z``
    logit of the zeros-part probability ``p``. In the zero-inflated families (``zip``,
    ``zinb``) ``p`` is the chance of an *extra* (structural) zero; in the hurdle families
    (``hurdle-poisson``, ``hurdle-negbin``) ``p`` is ``P(Y = 0)`` itself. Ignored (may be
    ``None``) for ``poisson`` and ``negbin``.
``log_alpha``
    log of the negative-binomial overdispersion ``alpha``: variance ``mu + alpha * mu**2``,
    ``alpha -> 0`` is the Poisson. Ignored (may be ``None``) for the Poisson-based families.

Each :class:`Family` offers a PyTensor log-probability for the PyMC model (:meth:`Family.logp`),
and NumPy versions of everything needed after sampling (log-pmf, draws, mean, variance,
``P(Y = 0)``, tail probabilities, pmf tables), so predictions never need PyMC. All functions
broadcast over their inputs (for instance draws x rows) and work on the log scale; see
``docs/families.md`` for the formulas.

Example
-------
>>> import numpy as np
>>> from bayeszi.families import get_family
>>> zip_ = get_family("zip")
>>> zip_.zeros_label
'P(extra zero)'
>>> eta_c, eta_z = np.log(2.0), 0.0          # mu = 2, p = 0.5
>>> round(float(zip_.mean(eta_c, eta_z, None)), 6)          # (1 - p) mu
1.0
>>> round(float(zip_.prob_zero(eta_c, eta_z, None)), 6)     # p + (1 - p) exp(-mu)
0.567668
>>> round(float(np.exp(zip_.logpmf(0, eta_c, eta_z, None))), 6)
0.567668
>>> rng = np.random.default_rng(1)
>>> zip_.random(rng, eta_c, eta_z, None, size=5).dtype
dtype('int64')
"""

from __future__ import annotations

import functools
import math
from collections.abc import Callable
from dataclasses import dataclass
from typing import Any

import numpy as np
from scipy import special as sc

from bayeszi.base.errors import BayesziError
from bayeszi.base.names import FAMILY_NAMES, check_family

__all__ = ["FAMILY_NAMES", "Family", "get_family"]


# ---------------------------------------------------------------------------------------------
# Switch points between two ways of computing the same quantity. Each pair of formulas agrees
# to about 1e-14 (relative) at its switch point, so the switch is invisible to the sampler.
# ---------------------------------------------------------------------------------------------
#: alpha at or below this uses the Stirling form of lgamma(y + 1/alpha) - lgamma(1/alpha):
#: theta = 1/alpha >= 1e4, where Stirling's series with its 1/(12 x) term is exact to 3e-15.
_ALPHA_STIRLING = 1e-4
_LOG_ALPHA_STIRLING = math.log(_ALPHA_STIRLING)
#: arguments below this use a power series (10 terms: truncation error < 1e-19 relative).
_SERIES_CUT = 1e-2
_LOG_SERIES_CUT = math.log(_SERIES_CUT)
#: t = -log f(0) below this: log(1 - exp(-t)) = log t - t/2 + t^2/24 + O(t^4).
_TRUNC_CUT = 1e-5
_LOG_TRUNC_CUT = math.log(_TRUNC_CUT)
#: pmf_table restarts its ratio recurrence from the exact log-pmf every this many k.
_REANCHOR = 32

# Power-series coefficients (lowest order first), each for |x| <= _SERIES_CUT.
#: L(x) = log1p(x) / x = sum_k (-x)^k / (k + 1)
_L_COEF = tuple((-1.0) ** k / (k + 1) for k in range(10))
#: G(x) = 1 - log1p(x) / x = x * sum_k (-x)^k / (k + 2)
_G_COEF = tuple((-1.0) ** k / (k + 2) for k in range(10))
#: H(u) = ((1 + u) log1p(u) - u) / u = u * sum_k (-u)^k / ((k + 1)(k + 2))
_H_COEF = tuple((-1.0) ** k / ((k + 1) * (k + 2)) for k in range(10))
#: E(t) = expm1(-t) + t = t^2 * sum_k (-t)^k / (k + 2)!
_E_COEF = tuple((-1.0) ** k / math.factorial(k + 2) for k in range(10))


def _horner(x: Any, coefs: tuple[float, ...]) -> Any:
    """Evaluate ``sum_k coefs[k] * x**k`` (NumPy arrays or PyTensor tensors)."""
    out = coefs[-1] * x + coefs[-2]
    for c in reversed(coefs[:-2]):
        out = out * x + c
    return out


# =============================================================================================
# NumPy building blocks
# =============================================================================================


def _f64(x: Any, what: str, family: str) -> np.ndarray:
    if x is None:
        raise BayesziError(
            f"family {family!r} needs {what}, but None was given; pass the linear predictor "
            f"of that part (an array that broadcasts against eta_c)."
        )
    return np.asarray(x, dtype=np.float64)


def _piecewise(cond: np.ndarray, f_true: Callable, f_false: Callable, *args: np.ndarray):
    """``where(cond, f_true(*args), f_false(*args))``, each formula run only on its elements.

    Saves the work of the unused formula (often a whole array: ``alpha`` is usually shared by
    all rows of a draw) and keeps each formula inside the range where it is valid.
    """
    cond = np.asarray(cond)
    if cond.all():
        return f_true(*args)
    if not cond.any():
        return f_false(*args)
    shape = np.broadcast_shapes(cond.shape, *(np.shape(a) for a in args))
    cond = np.broadcast_to(cond, shape)
    full = [np.broadcast_to(a, shape) for a in args]
    out = np.empty(shape, dtype=np.float64)
    out[cond] = f_true(*(a[cond] for a in full))
    inv = ~cond
    out[inv] = f_false(*(a[inv] for a in full))
    return out


def _np_softplus(x: np.ndarray) -> np.ndarray:
    """log(1 + exp(x)), exact for all x."""
    return np.logaddexp(0.0, x)


def _np_log1p_ratio(lx: np.ndarray) -> np.ndarray:
    """L(x) = log1p(x) / x for x = exp(lx) > 0, in (0, 1]; L -> 1 as x -> 0."""

    def series(lx):
        return _horner(np.exp(lx), _L_COEF)

    def direct(lx):
        out = _np_softplus(lx)
        scale = np.negative(lx)
        out *= np.exp(scale, out=scale)
        return out

    return _piecewise(lx < _LOG_SERIES_CUT, series, direct, lx)


def _np_one_minus_log1p_ratio(lx: np.ndarray) -> np.ndarray:
    """G(x) = 1 - log1p(x) / x = (x - log1p(x)) / x >= 0 for x = exp(lx), without cancellation."""

    def series(lx):
        x = np.exp(lx)
        return x * _horner(x, _G_COEF)

    def direct(lx):
        out = _np_softplus(lx)
        scale = np.negative(lx)
        out *= np.exp(scale, out=scale)
        return np.subtract(1.0, out, out=out)

    return _piecewise(lx < _LOG_SERIES_CUT, series, direct, lx)


def _np_expm1m_plus(t: np.ndarray) -> np.ndarray:
    """E(t) = exp(-t) - 1 + t >= 0, without cancellation for small t."""

    def series(t):
        return t * t * _horner(t, _E_COEF)

    def direct(t):
        out = np.expm1(-t)
        out += t
        return out

    return _piecewise(t < _SERIES_CUT, series, direct, t)


def _np_h_ratio(u: np.ndarray) -> np.ndarray:
    """H(u) = ((1 + u) log1p(u) - u) / u for u >= 0; H -> u/2 as u -> 0."""

    def series(u):
        return u * _horner(u, _H_COEF)

    def direct(u):
        return (1.0 + u) * np.log1p(u) / u - 1.0

    return _piecewise(u < _SERIES_CUT, series, direct, u)


def _np_nb_stirling_part(y: np.ndarray, la: np.ndarray) -> np.ndarray:
    """D(y, theta) = lgamma(y + theta) - lgamma(theta) - y log(theta) for theta = exp(-la) >= 1e4.

    From Stirling's series lgamma(x) = (x - 1/2) log x - x + log(2 pi)/2 + 1/(12 x) + O(x^-3):
    D = y H(u) - log1p(u)/2 - alpha^2 y / (12 (1 + u)) with u = alpha y, free of cancellation;
    D ~ alpha y (y - 1)/2 as alpha -> 0 (the Poisson limit). The first neglected term,
    [1/theta^3 - 1/(theta + y)^3]/360, is below 3e-15 for theta >= 1e4.
    """
    alpha = np.exp(la)
    u = alpha * y
    out = _np_h_ratio(u)
    out *= y
    out -= 0.5 * np.log1p(u)
    out -= alpha * alpha * y / (12.0 * (1.0 + u))
    return out


def _np_count_logf(y, eta_c, la, nb: bool) -> np.ndarray:
    """log f(y): Poisson(mu) or NB(mu, alpha) log-pmf of the untruncated count process."""
    if not nb:
        out = np.multiply(y, eta_c)
        out -= np.exp(eta_c)
        out -= sc.gammaln(np.add(y, 1.0))
        return out

    # NB log f = lgamma(y+theta) - lgamma(theta) - lgamma(y+1) + theta log(theta/(theta+mu))
    #            + y log(mu/(theta+mu)),  theta = 1/alpha, and with x = alpha mu:
    #   theta log(theta/(theta+mu)) = -theta log1p(x),   log(mu/(theta+mu)) = log_sigmoid(log x).
    def moderate_theta(y, eta_c, la):  # alpha > 1e-4: theta <= 1e4, lgamma difference is exact
        theta = np.exp(-la)
        lx = eta_c + la
        out = np.multiply(y, sc.log_expit(lx))  # full broadcast shape from the start
        work = np.add(y, theta)
        sc.gammaln(work, out=work)
        out += work
        out -= sc.gammaln(theta)
        # reuse the work array for -theta log1p(x) when shapes allow (they do for draws x rows)
        work = np.logaddexp(0.0, lx, out=work if work.shape == lx.shape else None)
        work *= theta
        out -= work
        return out

    def huge_theta(y, eta_c, la):  # alpha <= 1e-4: Stirling form of the lgamma difference
        lx = eta_c + la
        out = np.multiply(y, np.subtract(eta_c, _np_softplus(lx)))
        work = _np_log1p_ratio(lx)
        work *= np.exp(eta_c)  # theta log1p(x) = mu L(x)
        out -= work
        out += _np_nb_stirling_part(y, la)
        return out

    out = _piecewise(la > _LOG_ALPHA_STIRLING, moderate_theta, huge_theta, y, eta_c, la)
    out -= sc.gammaln(np.add(y, 1.0))
    return out


def _np_nb_neg_logf0(eta_c, la) -> np.ndarray:
    """t = -log f(0) = (1/alpha) log1p(alpha mu) = mu L(alpha mu) > 0 for the NB."""

    def moderate_theta(eta_c, la):
        out = np.logaddexp(0.0, eta_c + la)
        out *= np.exp(-la)
        return out

    def huge_theta(eta_c, la):
        out = _np_log1p_ratio(eta_c + la)
        out *= np.exp(eta_c)
        return out

    return _piecewise(la > _LOG_ALPHA_STIRLING, moderate_theta, huge_theta, eta_c, la)


def _np_count_logf0(eta_c, la, nb: bool) -> np.ndarray:
    """log f(0) = -mu (Poisson) or -(1/alpha) log1p(alpha mu) (NB)."""
    return np.negative(_np_nb_neg_logf0(eta_c, la) if nb else np.exp(eta_c))


def _np_count_log1m_f0(eta_c, la, nb: bool) -> tuple[np.ndarray, np.ndarray]:
    """(log f(0), log(1 - f(0))) of the count process, both exact to rounding.

    log(1 - f0) = log(-expm1(-t)) with t = -log f0; for t < 1e-5 (tiny mu, where t may even
    underflow) it is log t - t/2 + t^2/24 + O(t^4), with log t = eta_c + log L(alpha mu) (NB).
    """
    t = _np_nb_neg_logf0(eta_c, la) if nb else np.exp(eta_c)
    t = np.asarray(t, dtype=np.float64)  # a fresh array of ours (0-d for scalars)
    out = np.negative(t, out=np.empty_like(t))
    np.expm1(out, out=out)
    np.negative(out, out=out)
    with np.errstate(divide="ignore"):
        np.log(out, out=out)
    small = t < _TRUNC_CUT
    if small.any():
        ts = t[small]
        if nb:
            ec, lz = _np_take(small, eta_c, la)
            logt = ec + np.log(_np_log1p_ratio(ec + lz))
        else:
            (logt,) = _np_take(small, eta_c)
        out[small] = logt - 0.5 * ts + ts * ts / 24.0
    np.negative(t, out=t)
    return t, out


def _np_take(mask: np.ndarray, *arrays: np.ndarray) -> list[np.ndarray]:
    return [np.broadcast_to(a, mask.shape)[mask] for a in arrays]


# =============================================================================================
# PyTensor building blocks (mirror the NumPy ones; every switch branch gets inputs clamped to
# its own range so that the untaken branch stays finite and its gradient never turns NaN)
# =============================================================================================


def _pt():
    import pytensor.tensor as pt  # imported lazily: predictions need no PyTensor

    return pt


def _pt_logaddexp(a, b):
    """Stable log(exp(a) + exp(b)) (pytensor's own logaddexp is the naive formula)."""
    pt = _pt()
    return pt.switch(pt.ge(a, b), a + pt.softplus(b - a), b + pt.softplus(a - b))


def _pt_log1p_ratio(lx):
    pt = _pt()
    lx_s = pt.minimum(lx, _LOG_SERIES_CUT)
    lx_d = pt.maximum(lx, _LOG_SERIES_CUT)
    series = _horner(pt.exp(lx_s), _L_COEF)
    direct = pt.softplus(lx_d) * pt.exp(-lx_d)
    return pt.switch(pt.lt(lx, _LOG_SERIES_CUT), series, direct)


def _pt_h_ratio(u):
    pt = _pt()
    u_s = pt.minimum(u, _SERIES_CUT)
    u_d = pt.maximum(u, _SERIES_CUT)
    series = u_s * _horner(u_s, _H_COEF)
    direct = (1.0 + u_d) * pt.log1p(u_d) / u_d - 1.0
    return pt.switch(pt.lt(u, _SERIES_CUT), series, direct)


def _pt_lgamma_ratio(y, la):
    pt = _pt()
    la_d = pt.maximum(la, _LOG_ALPHA_STIRLING)
    theta = pt.exp(-la_d)
    direct = pt.gammaln(y + theta) - pt.gammaln(theta) + y * la_d
    la_s = pt.minimum(la, _LOG_ALPHA_STIRLING)
    alpha = pt.exp(la_s)
    u = alpha * y
    stirling = y * _pt_h_ratio(u) - 0.5 * pt.log1p(u) - alpha * alpha * y / (12.0 * (1.0 + u))
    return pt.switch(pt.gt(la, _LOG_ALPHA_STIRLING), direct, stirling)


def _pt_count_logf(y, eta_c, la, nb: bool):
    pt = _pt()
    if not nb:
        return y * eta_c - pt.exp(eta_c) - pt.gammaln(y + 1.0)
    lx = eta_c + la
    return (
        y * (eta_c - pt.softplus(lx))
        - pt.gammaln(y + 1.0)
        - pt.exp(eta_c) * _pt_log1p_ratio(lx)
        + _pt_lgamma_ratio(y, la)
    )


def _pt_count_log1m_f0(eta_c, la, nb: bool):
    """(log f(0), log(1 - f(0))) as tensors."""
    pt = _pt()
    if nb:
        ratio = _pt_log1p_ratio(eta_c + la)
        t = pt.exp(eta_c) * ratio
        logt = eta_c + pt.log(ratio)
    else:
        t = pt.exp(eta_c)
        logt = eta_c
    t_s = pt.minimum(t, _TRUNC_CUT)
    logt_s = pt.minimum(logt, _LOG_TRUNC_CUT)
    t_d = pt.maximum(t, _TRUNC_CUT)
    series = logt_s - 0.5 * t_s + t_s * t_s / 24.0
    direct = pt.log1mexp(-t_d)
    return -t, pt.switch(pt.lt(t, _TRUNC_CUT), series, direct)


def _full(x: np.ndarray, shape: tuple[int, ...]) -> np.ndarray:
    """x itself if it already has ``shape``, else a broadcast (writable) copy."""
    return x if np.shape(x) == shape else np.array(np.broadcast_to(x, shape), dtype=np.float64)


def _lift(v: Any) -> Any:
    return None if v is None else np.atleast_1d(v)


def _array_method(method: Callable) -> Callable:
    """Run a NumPy method on inputs lifted to at least 1-d (a view, no copy), so that the in-place
    arithmetic inside never meets a NumPy scalar; all-scalar calls get a 0-d array back.
    (Lifting a 0-d input to shape (1,) never changes a broadcast shape with other arrays.)"""

    @functools.wraps(method)
    def wrapper(self, *args, **kwargs):
        scalar = all(np.ndim(v) == 0 for v in (*args, *kwargs.values()) if v is not None)
        out = method(self, *map(_lift, args), **{k: _lift(v) for k, v in kwargs.items()})
        return np.asarray(out).reshape(()) if scalar else out

    return wrapper


# =============================================================================================
# The family object
# =============================================================================================


@dataclass(frozen=True)
class Family:
    """One likelihood family; all methods are vectorised over broadcastable arrays.

    Parameters are passed on the linear-predictor scale (``eta_c``, ``eta_z``, ``log_alpha``,
    see the module docstring). Arguments a family does not use are ignored and may be ``None``.

    Example
    -------
    >>> fam = get_family("hurdle-negbin")
    >>> fam.zeros_kind, fam.has_dispersion, fam.zeros_label
    ('hurdle', True, 'P(Y = 0)')
    >>> float(fam.prob_zero(0.0, 0.0, -1.0))   # hurdle: P(Y = 0) = p = logistic(0)
    0.5
    """

    name: str
    zeros_kind: str | None
    has_dispersion: bool
    zeros_label: str

    # ------------------------------------------------------------------ input helpers
    def _la(self, log_alpha: Any) -> np.ndarray | None:
        return _f64(log_alpha, "log_alpha", self.name) if self.has_dispersion else None

    def _ez(self, eta_z: Any) -> np.ndarray | None:
        return _f64(eta_z, "eta_z", self.name) if self.zeros_kind is not None else None

    def _inputs(self, eta_c, eta_z, log_alpha):
        return _f64(eta_c, "eta_c", self.name), self._ez(eta_z), self._la(log_alpha)

    def _shape(self, *arrays: np.ndarray | None) -> tuple[int, ...]:
        return np.broadcast_shapes(*(np.shape(a) for a in arrays if a is not None))

    # ------------------------------------------------------------------ log-probability
    def logp(self, y: Any, eta_c: Any, eta_z: Any, log_alpha: Any):
        """Elementwise log-pmf as a PyTensor tensor (symbolic inputs welcome; for PyMC).

        Zero rows take the closed form of log P(0) through a switch; gradients with respect to
        ``eta_c``, ``eta_z`` and ``log_alpha`` are finite over the whole supported range.

        Example
        -------
        >>> import pytensor.tensor as pt
        >>> eta = pt.dvector("eta")
        >>> out = get_family("poisson").logp([0, 3], eta, None, None)
        >>> round(float(out.eval({eta: [0.0, 0.0]})[1]), 6)   # log(e^-1 / 3!)
        -2.791759
        """
        pt = _pt()
        nb = self.has_dispersion
        y = pt.as_tensor_variable(y)
        eta_c = pt.as_tensor_variable(eta_c)
        if nb and log_alpha is None:
            raise BayesziError(f"family {self.name!r} needs log_alpha, but None was given.")
        la = pt.as_tensor_variable(log_alpha) if nb else None
        logf = _pt_count_logf(y, eta_c, la, nb)
        if self.zeros_kind is None:
            return logf
        if eta_z is None:
            raise BayesziError(f"family {self.name!r} needs eta_z, but None was given.")
        eta_z = pt.as_tensor_variable(eta_z)
        log_p = -pt.softplus(-eta_z)
        log_1mp = -pt.softplus(eta_z)
        logf0, log1m_f0 = _pt_count_log1m_f0(eta_c, la, nb)
        is_zero = pt.eq(y, 0)
        if self.zeros_kind == "inflation":
            return pt.switch(is_zero, _pt_logaddexp(log_p, log_1mp + logf0), log_1mp + logf)
        return pt.switch(is_zero, log_p, log_1mp + logf - log1m_f0)

    @_array_method
    def logpmf(self, y: Any, eta_c: Any, eta_z: Any, log_alpha: Any) -> np.ndarray:
        """Elementwise log-pmf in NumPy (float64), same values as :meth:`logp`.

        ``y`` holds non-negative integer counts (checked upstream, not here).

        Example
        -------
        >>> round(float(get_family("poisson").logpmf(3, 0.0, None, None)), 6)
        -2.791759
        """
        eta_c, eta_z, la = self._inputs(eta_c, eta_z, log_alpha)
        y = np.asarray(y)
        nb = self.has_dispersion
        logf = _np_count_logf(y, eta_c, la, nb)
        if self.zeros_kind is None:
            return np.asarray(logf)
        return self._finish_logpmf(y, logf, eta_c, eta_z, la)

    def _finish_logpmf(self, y, logf, eta_c, eta_z, la) -> np.ndarray:
        """Add the zeros part to log f(y): ZI log((1-p) f), hurdle log((1-p) f / (1 - f0))."""
        shape = self._shape(logf, eta_z)
        # logf is a fresh array of ours: reuse it in place when it already has the full shape
        if isinstance(logf, np.ndarray) and logf.ndim and logf.shape == shape:
            out = logf
        else:
            out = np.array(np.broadcast_to(logf, shape), dtype=np.float64)
        out += sc.log_expit(-eta_z)  # log(1 - p)
        nb = self.has_dispersion
        zero = np.broadcast_to(np.asarray(y) == 0, shape)
        pos = ~zero
        if self.zeros_kind == "hurdle":
            if pos.any():  # on the full array: cheaper in memory than gathering the positives
                out -= _np_count_log1m_f0(eta_c, la if nb else 0.0, nb)[1]
            if zero.any():
                (ez,) = _np_take(zero, eta_z)
                out[zero] = sc.log_expit(ez)
            return out
        if zero.any():
            ec, ez, lz = _np_take(zero, eta_c, eta_z, la if nb else 0.0)
            out[zero] = np.logaddexp(
                sc.log_expit(ez), sc.log_expit(-ez) + _np_count_logf0(ec, lz, nb)
            )
        return out

    # ------------------------------------------------------------------ random draws
    def random(
        self,
        rng: np.random.Generator,
        eta_c: Any,
        eta_z: Any,
        log_alpha: Any,
        size: int | tuple[int, ...] | None = None,
    ) -> np.ndarray:
        """Draw counts (int64) with NumPy's ``Generator``; ``size`` defaults to the broadcast shape.

        NB draws use the gamma-Poisson mixture. Hurdle positives are drawn exactly from the
        zero-truncated law through the first arrival time ``T`` of the (mixed) Poisson process
        on [0, 1]: given ``T < 1``, ``Y = 1 + Poisson(lambda (1 - T))``; for the NB the rate
        ``lambda`` given ``T = t`` is Gamma(theta + 1, scale alpha mu / (1 + alpha mu t)).
        No rejection loops, so tiny ``mu`` costs nothing extra.

        Example
        -------
        >>> rng = np.random.default_rng(0)
        >>> draws = get_family("hurdle-poisson").random(rng, -3.0, 0.0, None, size=1000)
        >>> int(draws.min()), bool((draws > 0).mean() < 0.6)
        (0, True)
        """
        eta_c, eta_z, la = self._inputs(eta_c, eta_z, log_alpha)
        shape = self._shape(eta_c, eta_z, la)
        if size is not None:
            size = (int(size),) if np.isscalar(size) else tuple(int(s) for s in size)
            try:
                fits = np.broadcast_shapes(shape, size) == size
            except ValueError:
                fits = False
            if not fits:
                raise BayesziError(
                    f"size {size} does not hold the parameters' broadcast shape {shape}; "
                    f"pass size=None or a shape the parameters broadcast to."
                )
            shape = size
        # work on flat copies (also makes scalar calls return an array of shape ())
        n = math.prod(shape)
        eta_c = np.broadcast_to(eta_c, shape).reshape(n)
        la = np.broadcast_to(la, shape).reshape(n) if la is not None else None
        nb = self.has_dispersion
        if self.zeros_kind == "hurdle":
            counts = self._random_positive(rng, eta_c, la, nb)
        else:
            mu = rng.gamma(np.exp(-la), np.exp(eta_c + la)) if nb else np.exp(eta_c)
            counts = _poisson(rng, mu)
        if self.zeros_kind is not None:
            p = sc.expit(np.broadcast_to(eta_z, shape).reshape(n))
            counts[rng.random(n) < p] = 0
        return counts.reshape(shape)

    @staticmethod
    def _random_positive(rng, eta_c, la, nb) -> np.ndarray:
        """Exact draws from the zero-truncated count process (see :meth:`random`)."""
        v = rng.random(eta_c.shape)
        log_f0, _ = _np_count_log1m_f0(eta_c, la if nb else 0.0, nb)
        q = -np.expm1(log_f0)  # 1 - f(0)
        w = np.log1p(-v * q)  # log P(T > t) at the drawn t, in [log f0, 0]
        if not nb:
            rest = np.maximum(np.exp(eta_c) + w, 0.0)  # mu (1 - t), t = -w / mu
        else:
            s = np.exp(eta_c + la)  # alpha mu
            t = np.clip(np.expm1(-np.exp(la) * w) / s, 0.0, 1.0)
            lam = rng.gamma(np.exp(-la) + 1.0, s / (1.0 + s * t))
            rest = lam * (1.0 - t)
        return 1 + _poisson(rng, rest)

    # ------------------------------------------------------------------ moments
    @_array_method
    def mean(self, eta_c: Any, eta_z: Any, log_alpha: Any) -> np.ndarray:
        """E[Y]: mu (plain), (1 - p) mu (ZI), (1 - p) mu / (1 - f(0)) (hurdle).

        Example
        -------
        >>> float(get_family("zinb").mean(np.log(4.0), 0.0, 0.0))
        2.0
        """
        eta_c, eta_z, la = self._inputs(eta_c, eta_z, log_alpha)
        shape = self._shape(eta_c, eta_z, la)
        if self.zeros_kind is None:
            return _full(np.exp(eta_c), shape)
        if self.zeros_kind == "inflation":  # product form: half the cost, same accuracy
            return _full(np.exp(eta_c) * sc.expit(-eta_z), shape)
        log_mean = eta_c + sc.log_expit(-eta_z)
        log_mean = log_mean - _np_count_log1m_f0(eta_c, la, self.has_dispersion)[1]
        return _full(np.exp(log_mean), shape)

    @_array_method
    def variance(self, eta_c: Any, eta_z: Any, log_alpha: Any) -> np.ndarray:
        """Var[Y] in closed form (formulas in ``docs/families.md``).

        Example
        -------
        >>> float(get_family("zip").variance(np.log(2.0), 0.0, None))  # mu(1-p)(1+p mu)
        2.0
        """
        eta_c, eta_z, la = self._inputs(eta_c, eta_z, log_alpha)
        nb = self.has_dispersion
        mu = np.exp(eta_c)
        alpha = np.exp(la) if nb else 0.0
        if self.zeros_kind is None:
            return mu * (1.0 + alpha * mu)
        p = sc.expit(eta_z)
        one_m_p = sc.expit(-eta_z)
        if self.zeros_kind == "inflation":
            # (1 - p)(sigma^2 + p mu^2), sigma^2 = mu + alpha mu^2
            return mu * one_m_p * (1.0 + mu * (p + alpha))
        # hurdle: m+ = mu / q, q = 1 - f(0); E[Y] = (1-p) m+, E[Y^2] = (1-p)(sigma^2 + mu^2)/q,
        # Var = (1-p) m+ [mu (1 + alpha) + p m+ - (m+ - 1)], with m+ - 1 = (mu - q)/q and
        # mu - q = mu G(alpha mu) + E(mu L(alpha mu)) >= 0 computed without cancellation.
        log_f0, log_q = _np_count_log1m_f0(eta_c, la if nb else 0.0, nb)
        if nb:
            mu_minus_q = _np_one_minus_log1p_ratio(eta_c + la)
            mu_minus_q *= mu
            np.negative(log_f0, out=log_f0)  # t = mu L(alpha mu)
            mu_minus_q += _np_expm1m_plus(log_f0)
        else:
            mu_minus_q = _np_expm1m_plus(mu)
        del log_f0
        np.negative(log_q, out=log_q)
        np.exp(log_q, out=log_q)  # now 1 / q
        mu_minus_q *= log_q  # (mu - q) / q = m+ - 1
        m_plus = np.multiply(mu, log_q)
        del log_q
        bracket = np.multiply(p, m_plus)
        bracket += mu * (1.0 + alpha)
        bracket -= mu_minus_q
        del mu_minus_q
        bracket *= m_plus
        bracket *= one_m_p
        return bracket

    @_array_method
    def prob_zero(self, eta_c: Any, eta_z: Any, log_alpha: Any) -> np.ndarray:
        """P(Y = 0).

        Example
        -------
        >>> round(float(get_family("poisson").prob_zero(0.0, None, None)), 6)   # exp(-1)
        0.367879
        """
        return np.exp(self.log_prob_zero(eta_c, eta_z, log_alpha))

    @_array_method
    def log_prob_zero(self, eta_c: Any, eta_z: Any, log_alpha: Any) -> np.ndarray:
        """log P(Y = 0), stable (log-sum-exp for ZI, log-sigmoid for hurdle).

        Example
        -------
        >>> bool(get_family("hurdle-poisson").log_prob_zero(5.0, 0.0, None) == np.log(0.5))
        True
        """
        eta_c, eta_z, la = self._inputs(eta_c, eta_z, log_alpha)
        if self.zeros_kind == "hurdle":
            return _full(sc.log_expit(eta_z), self._shape(eta_c, eta_z, la))
        log_f0 = _np_count_logf0(eta_c, la, self.has_dispersion)
        if self.zeros_kind is None:
            return log_f0
        # log(p + (1 - p) f0) <= 0 exactly; rounding can give +1e-17 when f0 is near 1
        return np.minimum(np.logaddexp(sc.log_expit(eta_z), sc.log_expit(-eta_z) + log_f0), 0.0)

    @_array_method
    def prob_extra_zero_given_zero(self, eta_c: Any, eta_z: Any, log_alpha: Any) -> np.ndarray:
        """Share of zeros that come from the zeros part: ZI p / P(0); hurdle 1; plain 0.

        Example
        -------
        >>> round(float(get_family("zip").prob_extra_zero_given_zero(0.0, 0.0, None)), 6)
        0.731059
        """
        eta_c, eta_z, la = self._inputs(eta_c, eta_z, log_alpha)
        shape = self._shape(eta_c, eta_z, la)
        if self.zeros_kind is None:
            return np.zeros(shape)
        if self.zeros_kind == "hurdle":
            return np.ones(shape)
        log_p0 = self.log_prob_zero(eta_c, eta_z, la)
        return np.minimum(np.exp(sc.log_expit(eta_z) - log_p0), 1.0)

    @_array_method
    def positive_mean(self, eta_c: Any, eta_z: Any, log_alpha: Any) -> np.ndarray:
        """Mean of the count part: mu (plain, ZI); E[Y | Y > 0] = mu / (1 - f(0)) (hurdle).

        Example
        -------
        >>> round(float(get_family("hurdle-poisson").positive_mean(0.0, 0.0, None)), 6)
        1.581977
        """
        eta_c, eta_z, la = self._inputs(eta_c, eta_z, log_alpha)
        shape = self._shape(eta_c, eta_z, la)
        if self.zeros_kind != "hurdle":
            return _full(np.exp(eta_c), shape)
        log_q = _np_count_log1m_f0(eta_c, la, self.has_dispersion)[1]
        return _full(np.exp(eta_c - log_q), shape)

    # ------------------------------------------------------------------ tails and tables
    @_array_method
    def sf(self, k: Any, eta_c: Any, eta_z: Any, log_alpha: Any) -> np.ndarray:
        """P(Y >= k) for integer k >= 0, computed directly (not as 1 - cdf), so tiny tails keep
        their relative accuracy.

        Poisson: P(Y >= k) = P(k, mu), the regularised lower incomplete gamma; NB: the
        regularised incomplete beta I_x(k, 1/alpha) with x = alpha mu / (1 + alpha mu).

        Example
        -------
        >>> round(float(get_family("poisson").sf(1, 0.0, None, None)), 6)   # 1 - exp(-1)
        0.632121
        """
        eta_c, eta_z, la = self._inputs(eta_c, eta_z, log_alpha)
        k = np.asarray(k, dtype=np.float64)
        nb = self.has_dispersion
        kpos = np.maximum(np.ceil(k), 1.0)  # P(Y >= k) = P(Y >= ceil(k))
        if nb:
            tail = sc.betainc(kpos, np.exp(-la), sc.expit(eta_c + la))
        else:
            tail = sc.gammainc(kpos, np.exp(eta_c))
        if self.zeros_kind == "hurdle":
            # P(X >= k | X >= 1) of the count process: exactly 1 at k = 1; 0 where the tail
            # underflows (also when mu itself underflows and 1 - f(0) is 0: 0/0, limit 0)
            with np.errstate(over="ignore", invalid="ignore"):
                ratio = tail * np.exp(-_np_count_log1m_f0(eta_c, la, nb)[1])
            ratio = np.where(kpos <= 1, 1.0, np.where(tail == 0, 0.0, ratio))
            tail = np.minimum(ratio * sc.expit(-eta_z), 1.0)
        elif self.zeros_kind is not None:
            tail = np.minimum(tail * np.exp(sc.log_expit(-eta_z)), 1.0)
        return np.where(k <= 0, 1.0, tail)

    def pmf_table(self, kmax: int, eta_c: Any, eta_z: Any, log_alpha: Any) -> np.ndarray:
        """P(Y = k) for k = 0..kmax, as an array of shape (broadcast shape, kmax + 1).

        Uses the ratio recurrence f(k+1)/f(k) = mu/(k+1) (Poisson) or
        (k + theta)/(k + 1) * alpha mu/(1 + alpha mu) (NB) on the log scale, restarted from the
        exact log f(k) every 32 steps so that rounding cannot build up for large kmax.

        Example
        -------
        >>> get_family("zip").pmf_table(3, 0.0, 0.0, None).shape
        (4,)
        """
        if int(kmax) != kmax or kmax < 0:
            raise BayesziError(f"kmax must be a non-negative integer, got {kmax!r}.")
        kmax = int(kmax)
        eta_c, eta_z, la = self._inputs(eta_c, eta_z, log_alpha)
        nb = self.has_dispersion
        final_shape = (*self._shape(eta_c, eta_z, la), kmax + 1)
        eta_c, eta_z, la = _lift(eta_c), _lift(eta_z), _lift(la)  # see _array_method
        shape = self._shape(eta_c, eta_z, la)
        # k-major buffer: each k writes one contiguous block (strided writes along the last
        # axis cost about a third more); the returned view puts k last.
        buf = np.empty((kmax + 1, *shape), dtype=np.float64)
        out = np.moveaxis(buf, 0, -1)
        log_f0, log1m_f0 = _np_count_log1m_f0(eta_c, la if nb else 0.0, nb)
        buf[0] = np.exp(self.log_prob_zero(eta_c, eta_z, la))
        if kmax == 0:
            return out.reshape(final_shape)
        # log of the factor applied to every k >= 1: (1 - p), or (1 - p)/(1 - f0) for hurdles.
        if self.zeros_kind is None:
            log_scale = 0.0
        else:
            log_scale = sc.log_expit(-eta_z)
            if self.zeros_kind == "hurdle":
                log_scale = log_scale - log1m_f0
        if nb:
            step = eta_c - _np_softplus(eta_c + la)  # log(mu / (1 + alpha mu))
            alpha = np.exp(la)
        else:
            step = eta_c
        log_fk = np.array(np.broadcast_to(log_f0, shape), dtype=np.float64)
        for k in range(kmax):
            if (k + 1) % _REANCHOR == 0:  # exact value now and then: no drift over many k
                log_fk[...] = _np_count_logf(float(k + 1), eta_c, la, nb)
            else:
                log_fk += step
                log_fk -= math.log(k + 1.0)
                if nb and k > 0:
                    log_fk += np.log1p(alpha * k)
            np.exp(log_fk + log_scale, out=buf[k + 1])
        return out.reshape(final_shape)


_FAMILIES: dict[str, Family] = {
    "poisson": Family("poisson", None, False, ""),
    "negbin": Family("negbin", None, True, ""),
    "zip": Family("zip", "inflation", False, "P(extra zero)"),
    "zinb": Family("zinb", "inflation", True, "P(extra zero)"),
    "hurdle-poisson": Family("hurdle-poisson", "hurdle", False, "P(Y = 0)"),
    "hurdle-negbin": Family("hurdle-negbin", "hurdle", True, "P(Y = 0)"),
}
assert tuple(_FAMILIES) == FAMILY_NAMES


#: the largest Poisson mean drawn (NumPy refuses means near 2**63; counts this large are far
#: beyond any data the model was fitted to)
_MAX_DRAW_MEAN = 1e18


def _poisson(rng: np.random.Generator, lam: np.ndarray) -> np.ndarray:
    """Poisson draws as int64, refusing means that are not finite or too large to draw."""
    lam = np.asarray(lam, dtype=np.float64)
    bad = ~(lam <= _MAX_DRAW_MEAN)  # also catches NaN
    if bad.any():
        worst = lam[bad][0]
        raise BayesziError(
            f"cannot draw counts whose expected value is {worst:.3g} (at {int(bad.sum())} "
            "draw-row pair(s)): the linear predictor is far beyond anything in the fitted "
            "data, usually because of extreme predictor or exposure values in the rows asked "
            "about. Check those values"
        )
    return rng.poisson(lam).astype(np.int64, copy=False)


def get_family(name: str) -> Family:
    """Return the :class:`Family` called ``name`` (one of :data:`FAMILY_NAMES`).

    Example
    -------
    >>> get_family("negbin").has_dispersion
    True
    >>> get_family("zinbb")  # doctest: +ELLIPSIS
    Traceback (most recent call last):
    ...
    bayeszi.base.errors.BayesziError: unknown family 'zinbb'; did you mean 'zinb'? ...
    """
    return _FAMILIES[check_family(name)]
