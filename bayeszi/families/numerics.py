"""Stable numerical building blocks of the families, in NumPy and in PyTensor.

Each formula that both the NumPy paths (after sampling) and the model graph (PyTensor) need
is written here twice, once per array library, side by side and under the same name (the
PyTensor one with a ``pt_`` prefix); ``tests/test_families.py`` checks that every pair agrees
to 1e-12 on both sides of its switch point. Formulas only one side needs have no twin.

Switch points: each quantity has two formulas (a power series or Stirling form, and the
direct one) that agree to about 1e-14 (relative) at the switch, so the switch is invisible
to the sampler. The NumPy versions run each formula only on its own elements
(:func:`piecewise`); the PyTensor versions clamp each branch's input to its own range, so
that the branch not taken stays finite and its gradient never turns NaN.

Example
-------
>>> import numpy as np
>>> round(float(log1p_ratio(np.log(1e-3))), 12)        # log1p(x) / x, x = 1e-3
0.999500333084
>>> bool(abs(float(h_ratio(0.5)) - ((1.5 * np.log1p(0.5)) / 0.5 - 1.0)) < 1e-15)
True
"""

from __future__ import annotations

import math
from collections.abc import Callable
from typing import Any

import numpy as np

__all__ = [
    "ALPHA_STIRLING", "LOG_ALPHA_STIRLING", "SERIES_CUT", "LOG_SERIES_CUT", "TRUNC_CUT",
    "LOG_TRUNC_CUT", "horner", "piecewise", "take", "broadcast_shape", "as_shape", "softplus",
    "log1p_ratio", "pt_log1p_ratio", "one_minus_log1p_ratio", "expm1m_plus", "h_ratio",
    "pt_h_ratio", "stirling_part", "pt_stirling_part", "log1m_exp_neg", "pt_log1m_exp_neg",
    "pt_logaddexp",
]

#: alpha at or below this uses the Stirling form of lgamma(y + 1/alpha) - lgamma(1/alpha):
#: theta = 1/alpha >= 1e4, where Stirling's series with its 1/(12 x) term is exact to 3e-15.
ALPHA_STIRLING = 1e-4
LOG_ALPHA_STIRLING = math.log(ALPHA_STIRLING)
#: arguments below this use a power series (10 terms: truncation error < 1e-19 relative).
SERIES_CUT = 1e-2
LOG_SERIES_CUT = math.log(SERIES_CUT)
#: t = -log f(0) below this: log(1 - exp(-t)) = log t - t/2 + t^2/24 + O(t^4).
TRUNC_CUT = 1e-5
LOG_TRUNC_CUT = math.log(TRUNC_CUT)

# Power-series coefficients (lowest order first), each for |x| <= SERIES_CUT.
#: L(x) = log1p(x) / x = sum_k (-x)^k / (k + 1)
_L_COEF = tuple((-1.0) ** k / (k + 1) for k in range(10))
#: G(x) = 1 - log1p(x) / x = x * sum_k (-x)^k / (k + 2)
_G_COEF = tuple((-1.0) ** k / (k + 2) for k in range(10))
#: H(u) = ((1 + u) log1p(u) - u) / u = u * sum_k (-u)^k / ((k + 1)(k + 2))
_H_COEF = tuple((-1.0) ** k / ((k + 1) * (k + 2)) for k in range(10))
#: E(t) = expm1(-t) + t = t^2 * sum_k (-t)^k / (k + 2)!
_E_COEF = tuple((-1.0) ** k / math.factorial(k + 2) for k in range(10))


# =============================================================================================
# Array helpers (NumPy)
# =============================================================================================


def horner(x: Any, coefs: tuple[float, ...]) -> Any:
    """Evaluate ``sum_k coefs[k] * x**k`` (NumPy arrays or PyTensor tensors).

    Example
    -------
    >>> horner(2.0, (1.0, 0.0, 3.0))   # 1 + 3 x^2
    13.0
    """
    out = coefs[-1] * x + coefs[-2]
    for c in reversed(coefs[:-2]):
        out = out * x + c
    return out


def piecewise(cond: np.ndarray, f_true: Callable, f_false: Callable, *args: np.ndarray):
    """``where(cond, f_true(*args), f_false(*args))``, each formula run only on its elements.

    Saves the work of the unused formula (often a whole array: ``alpha`` is usually shared by
    all rows of a draw) and keeps each formula inside the range where it is valid.

    Example
    -------
    >>> x = np.array([-1.0, 4.0])
    >>> piecewise(x < 0, np.negative, np.sqrt, x).tolist()
    [1.0, 2.0]
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


def take(mask: np.ndarray, *arrays: np.ndarray | None) -> list[np.ndarray | None]:
    """Each array broadcast to ``mask``'s shape, at the elements where ``mask`` holds
    (``None`` stays ``None``: an input the family does not use).

    Example
    -------
    >>> take(np.array([True, False]), np.array([1.0, 2.0]), 3.0, None)
    [array([1.]), array([3.]), None]
    """
    return [None if a is None else np.broadcast_to(a, mask.shape)[mask] for a in arrays]


def broadcast_shape(*arrays: Any) -> tuple[int, ...]:
    """The broadcast shape of the arrays that are not ``None``.

    Example
    -------
    >>> broadcast_shape(np.zeros((3, 1)), None, np.zeros(4))
    (3, 4)
    """
    return np.broadcast_shapes(*(np.shape(a) for a in arrays if a is not None))


def as_shape(x: np.ndarray, shape: tuple[int, ...]) -> np.ndarray:
    """``x`` itself if it already has ``shape``, else a broadcast (writable) copy.

    Example
    -------
    >>> as_shape(np.ones(2), (3, 2)).shape
    (3, 2)
    """
    return x if np.shape(x) == shape else np.array(np.broadcast_to(x, shape), dtype=np.float64)


# =============================================================================================
# Stable formulas: NumPy and PyTensor side by side
# =============================================================================================


def softplus(x: np.ndarray) -> np.ndarray:
    """log(1 + exp(x)), exact for all x (NumPy; PyTensor has ``pt.softplus``).

    Example
    -------
    >>> float(softplus(0.0)) == float(np.log(2.0))
    True
    """
    return np.logaddexp(0.0, x)


def pt_logaddexp(a: Any, b: Any) -> Any:
    """log(exp(a) + exp(b)) with one exp and one log1p: max(a, b) + log1p(exp(-|a - b|)).

    PyTensor's own ``logaddexp`` is the naive formula; NumPy's ``np.logaddexp`` is stable
    and is used as is on the NumPy side.

    Example
    -------
    >>> import pytensor.tensor as pt
    >>> a = pt.constant(np.float64(1e3))
    >>> round(float(pt_logaddexp(a, a).eval()), 6)   # 1000 + log 2
    1000.693147
    """
    import pytensor.tensor as pt  # imported lazily: predictions need no PyTensor

    return pt.maximum(a, b) + pt.softplus(-pt.abs(a - b))


def log1p_ratio(lx: np.ndarray) -> np.ndarray:
    """L(x) = log1p(x) / x for x = exp(lx) > 0, in (0, 1]; L -> 1 as x -> 0.

    Example
    -------
    >>> float(log1p_ratio(-50.0))
    1.0
    """

    def series(lx):
        return horner(np.exp(lx), _L_COEF)

    def direct(lx):
        out = softplus(lx)
        scale = np.negative(lx)
        out *= np.exp(scale, out=scale)
        return out

    return piecewise(lx < LOG_SERIES_CUT, series, direct, lx)


def pt_log1p_ratio(lx: Any) -> Any:
    """PyTensor twin of :func:`log1p_ratio`.

    Example
    -------
    >>> import pytensor.tensor as pt
    >>> float(pt_log1p_ratio(pt.constant(np.float64(-50.0))).eval())
    1.0
    """
    import pytensor.tensor as pt

    lx_s = pt.minimum(lx, LOG_SERIES_CUT)
    lx_d = pt.maximum(lx, LOG_SERIES_CUT)
    series = horner(pt.exp(lx_s), _L_COEF)
    direct = pt.softplus(lx_d) * pt.exp(-lx_d)
    return pt.switch(pt.lt(lx, LOG_SERIES_CUT), series, direct)


def one_minus_log1p_ratio(lx: np.ndarray) -> np.ndarray:
    """G(x) = 1 - log1p(x) / x = (x - log1p(x)) / x >= 0 for x = exp(lx), without cancellation.

    Example
    -------
    >>> float(one_minus_log1p_ratio(-50.0)) > 0
    True
    """

    def series(lx):
        x = np.exp(lx)
        return x * horner(x, _G_COEF)

    def direct(lx):
        out = softplus(lx)
        scale = np.negative(lx)
        out *= np.exp(scale, out=scale)
        return np.subtract(1.0, out, out=out)

    return piecewise(lx < LOG_SERIES_CUT, series, direct, lx)


def expm1m_plus(t: np.ndarray) -> np.ndarray:
    """E(t) = exp(-t) - 1 + t >= 0, without cancellation for small t.

    Example
    -------
    >>> float(expm1m_plus(np.array(1e-9))) / 5e-19   # ~ t^2 / 2, no cancellation
    0.9999999996666666
    """

    def series(t):
        return t * t * horner(t, _E_COEF)

    def direct(t):
        out = np.expm1(-t)
        out += t
        return out

    return piecewise(t < SERIES_CUT, series, direct, t)


def h_ratio(u: np.ndarray) -> np.ndarray:
    """H(u) = ((1 + u) log1p(u) - u) / u for u >= 0; H -> u/2 as u -> 0.

    Example
    -------
    >>> round(float(h_ratio(np.array(1e-8))) / 5e-9, 6)   # ~ u / 2
    1.0
    """

    def series(u):
        return u * horner(u, _H_COEF)

    def direct(u):
        return (1.0 + u) * np.log1p(u) / u - 1.0

    return piecewise(u < SERIES_CUT, series, direct, u)


def pt_h_ratio(u: Any) -> Any:
    """PyTensor twin of :func:`h_ratio`.

    Example
    -------
    >>> import pytensor.tensor as pt
    >>> round(float(pt_h_ratio(pt.constant(np.float64(1e-8))).eval()) / 5e-9, 6)
    1.0
    """
    import pytensor.tensor as pt

    u_s = pt.minimum(u, SERIES_CUT)
    u_d = pt.maximum(u, SERIES_CUT)
    series = u_s * horner(u_s, _H_COEF)
    direct = (1.0 + u_d) * pt.log1p(u_d) / u_d - 1.0
    return pt.switch(pt.lt(u, SERIES_CUT), series, direct)


def stirling_part(y: np.ndarray, la: np.ndarray) -> np.ndarray:
    """D(y, theta) = lgamma(y + theta) - lgamma(theta) - y log(theta), theta = exp(-la) >= 1e4.

    From Stirling's series lgamma(x) = (x - 1/2) log x - x + log(2 pi)/2 + 1/(12 x) + O(x^-3):
    D = y H(u) - log1p(u)/2 - alpha^2 y / (12 (1 + u)) with u = alpha y, free of cancellation;
    D ~ alpha y (y - 1)/2 as alpha -> 0 (the Poisson limit). The first neglected term,
    [1/theta^3 - 1/(theta + y)^3]/360, is below 3e-15 for theta >= 1e4.

    Example
    -------
    >>> round(float(stirling_part(np.array(2.0), np.log(1e-8))) / 1e-8, 6)  # ~ alpha y (y - 1)/2
    1.0
    """
    alpha = np.exp(la)
    u = alpha * y
    out = h_ratio(u)
    out *= y
    out -= 0.5 * np.log1p(u)
    out -= alpha * alpha * y / (12.0 * (1.0 + u))
    return out


def pt_stirling_part(y: Any, la: Any) -> Any:
    """PyTensor twin of :func:`stirling_part`.

    Example
    -------
    >>> import pytensor.tensor as pt
    >>> la = pt.constant(np.log(1e-8))
    >>> round(float(pt_stirling_part(pt.constant(np.float64(2.0)), la).eval()) / 1e-8, 6)
    1.0
    """
    import pytensor.tensor as pt

    alpha = pt.exp(la)
    u = alpha * y
    return y * pt_h_ratio(u) - 0.5 * pt.log1p(u) - alpha * alpha * y / (12.0 * (1.0 + u))


def log1m_exp_neg(t: np.ndarray, log_t_at: Callable[[np.ndarray], np.ndarray]) -> np.ndarray:
    """log(1 - exp(-t)) for t > 0, exact to rounding: ``log(-expm1(-t))``, and for
    t < 1e-5 (where t itself may underflow) ``log t - t/2 + t^2/24 + O(t^4)``.

    ``log_t_at(mask)`` returns log t at the elements of ``mask`` (computed from the inputs of
    t, not from t, so that it survives the underflow); it is called only when some t is small.

    Example
    -------
    >>> t = np.array([1e-7, 2.0])
    >>> np.allclose(log1m_exp_neg(t, lambda m: np.log(t[m])), np.log(-np.expm1(-t)))
    True
    """
    out = np.negative(t, out=np.empty_like(t))
    np.expm1(out, out=out)
    np.negative(out, out=out)
    with np.errstate(divide="ignore"):
        np.log(out, out=out)
    small = t < TRUNC_CUT
    if small.any():
        ts = t[small]
        out[small] = log_t_at(small) - 0.5 * ts + ts * ts / 24.0
    return out


def pt_log1m_exp_neg(t: Any, log_t: Any) -> Any:
    """PyTensor twin of :func:`log1m_exp_neg`, given t and log t as tensors.

    Example
    -------
    >>> import pytensor.tensor as pt
    >>> t = pt.constant(np.float64(2.0))
    >>> bool(np.isclose(pt_log1m_exp_neg(t, pt.log(t)).eval(), np.log(-np.expm1(-2.0))))
    True
    """
    import pytensor.tensor as pt

    t_s = pt.minimum(t, TRUNC_CUT)
    logt_s = pt.minimum(log_t, LOG_TRUNC_CUT)
    t_d = pt.maximum(t, TRUNC_CUT)
    series = logt_s - 0.5 * t_s + t_s * t_s / 24.0
    direct = pt.log1mexp(-t_d)
    return pt.switch(pt.lt(t, TRUNC_CUT), series, direct)
