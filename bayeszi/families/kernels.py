"""The two count kernels: Poisson(mu) and negative binomial NB(mu, alpha).

A kernel is the untruncated count process ``f`` of a family. It provides, on the log scale
and from ``eta_c = log mu`` and ``la = log alpha`` (ignored, may be ``None``, by the Poisson):
``log f(y)``, ``log f(0)``, ``log(1 - f(0))``, the mean and variance, the upper tail
``P(X >= k)``, random draws (plain and zero-truncated) and the ratio ``f(k + 1) / f(k)``
that pmf tables step with. The zero mechanisms (:mod:`bayeszi.families.mechanisms`) combine
these pieces into the six families.

Where the model graph needs a piece too, its PyTensor version (``pt_`` prefix) sits beside
the NumPy one; ``tests/test_families.py`` checks each pair to 1e-12 on both sides of the
switch points. The NB is written with ``theta = 1/alpha`` and ``x = alpha mu``:
``log f(y) = lgamma(y + theta) - lgamma(theta) - lgamma(y + 1) - theta log1p(x)
+ y log(x / (1 + x))``, ``log f(0) = -theta log1p(x)``.

Example
-------
>>> import numpy as np
>>> round(float(POISSON.logf(np.array([3.0]), np.log([2.0]), None)[0]), 6)   # log(e^-2 2^3/3!)
-1.712318
>>> float(NEGBIN.variance(np.log(4.0), np.log(0.5)))       # mu + alpha mu^2
12.0
"""

from __future__ import annotations

import math
from collections.abc import Callable
from dataclasses import dataclass
from typing import Any

import numpy as np
from scipy import special as sc

from bayeszi.base.errors import BayesziError
from bayeszi.families import numerics as nx

__all__ = [
    "CountKernel", "PtDispersion", "PoissonKernel", "NegBinKernel", "POISSON", "NEGBIN",
    "pt_lgamma_ratio", "poisson_draws", "MAX_DRAW_MEAN",
]

#: the largest Poisson mean drawn (NumPy refuses means near 2**63; counts this large are far
#: beyond any data the model was fitted to)
MAX_DRAW_MEAN = 1e18


def poisson_draws(rng: np.random.Generator, lam: np.ndarray) -> np.ndarray:
    """Poisson draws as int64, refusing means that are not finite or too large to draw.

    Example
    -------
    >>> poisson_draws(np.random.default_rng(0), np.zeros(3)).tolist()
    [0, 0, 0]
    """
    lam = np.asarray(lam, dtype=np.float64)
    bad = ~(lam <= MAX_DRAW_MEAN)  # also catches NaN
    if bad.any():
        worst = lam[bad][0]
        raise BayesziError(
            f"cannot draw counts whose expected value is {worst:.3g} (at {int(bad.sum())} "
            "draw-row pair(s)): the linear predictor is far beyond anything in the fitted "
            "data, usually because of extreme predictor or exposure values in the rows asked "
            "about. Check those values"
        )
    return rng.poisson(lam).astype(np.int64, copy=False)


def _observed(y: np.ndarray) -> tuple[Any, Any]:
    """The observed counts and their log factorials as PyTensor constants."""
    import pytensor.tensor as pt

    y_f = np.asarray(y).astype(np.float64)
    return pt.as_tensor_variable(y_f), pt.as_tensor_variable(sc.gammaln(y_f + 1.0))


@dataclass(frozen=True)
class PtDispersion:
    """The NB dispersion as the PyTensor densities use it: ``log_alpha`` and ``theta``."""

    log_alpha: Any
    theta: Any


class CountKernel:
    """What the two kernels share: derived pieces built on each one's own formulas.

    Subclasses define ``logf``, ``neg_logf0``, ``log_neg_logf0_at``, ``alpha``,
    ``mean_minus_q``, ``tail``, ``pmf_stepper``, ``pmf_multiplier``, ``draw``,
    ``draw_positive`` and the PyTensor
    ``pt_dispersion``, ``pt_logf0``, ``pt_logf`` and ``pt_log1m_f0`` (which take the
    dispersion as ``pt_dispersion`` gives it).
    """

    name: str
    has_dispersion: bool

    def logf0(self, eta_c: np.ndarray, la: Any) -> np.ndarray:
        """log f(0).

        Example
        -------
        >>> float(POISSON.logf0(np.log(2.0), None))   # -mu
        -2.0
        """
        return np.negative(self.neg_logf0(eta_c, la))

    def log1m_f0(self, eta_c: np.ndarray, la: Any) -> tuple[np.ndarray, np.ndarray]:
        """(log f(0), log(1 - f(0))), both exact to rounding, also for tiny mu.

        Example
        -------
        >>> [round(float(v), 6) for v in POISSON.log1m_f0(np.log([2.0]), None)[1]]
        [-0.145413]
        """
        t = np.asarray(self.neg_logf0(eta_c, la), dtype=np.float64)  # fresh (0-d for scalars)
        out = nx.log1m_exp_neg(t, lambda mask: self.log_neg_logf0_at(mask, eta_c, la))
        np.negative(t, out=t)
        return t, out

    def variance(self, eta_c: np.ndarray, la: Any) -> np.ndarray:
        """Var = mu (1 + alpha mu) (alpha = 0 for the Poisson).

        Example
        -------
        >>> round(float(POISSON.variance(np.log(3.0), None)), 12)
        3.0
        """
        mu = np.exp(eta_c)
        return mu * (1.0 + self.alpha(la) * mu)

    def log_first_arrival(self, rng: np.random.Generator, eta_c: np.ndarray, la: Any):
        """w = log P(T > t) at a drawn first arrival time t < 1 of the (mixed) Poisson process
        on [0, 1], in [log f(0), 0]: the start of the exact zero-truncated draws.

        Example
        -------
        >>> w = NEGBIN.log_first_arrival(np.random.default_rng(0), np.zeros(4), np.zeros(4))
        >>> bool(np.all((w <= 0) & (w >= np.log(0.5))))   # f(0) = 1/2 at mu = alpha = 1
        True
        """
        v = rng.random(eta_c.shape)
        log_f0, _ = self.log1m_f0(eta_c, la)
        q = -np.expm1(log_f0)  # 1 - f(0)
        return np.log1p(-v * q)


@dataclass(frozen=True)
class PoissonKernel(CountKernel):
    """The Poisson(mu) count process, ``mu = exp(eta_c)``; ``la`` is ignored.

    Example
    -------
    >>> float(np.exp(POISSON.logf(0.0, np.log(2.0), None)))   # f(0) = exp(-mu)
    0.1353352832366127
    """

    name: str = "poisson"
    has_dispersion: bool = False

    # ------------------------------------------------------------------ NumPy
    def logf(self, y: Any, eta_c: np.ndarray, la: Any) -> np.ndarray:
        """log f(y) = y eta_c - mu - lgamma(y + 1)."""
        out = np.multiply(y, eta_c)
        out -= np.exp(eta_c)
        out -= sc.gammaln(np.add(y, 1.0))
        return out

    def neg_logf0(self, eta_c: np.ndarray, la: Any) -> np.ndarray:
        """t = -log f(0) = mu."""
        return np.exp(eta_c)

    def log_neg_logf0_at(self, mask: np.ndarray, eta_c: np.ndarray, la: Any) -> np.ndarray:
        """log t = eta_c at the elements of ``mask`` (see :meth:`log1m_f0`)."""
        (ec,) = nx.take(mask, eta_c)
        return ec

    def alpha(self, la: Any) -> Any:
        """The overdispersion: 0 for the Poisson."""
        return 0.0

    def mean_minus_q(self, eta_c: np.ndarray, la: Any, log_f0: np.ndarray) -> np.ndarray:
        """mu - (1 - f(0)) = E(mu) >= 0 without cancellation (``log_f0`` is not needed)."""
        return nx.expm1m_plus(np.exp(eta_c))

    def tail(self, kpos: np.ndarray, eta_c: np.ndarray, la: Any) -> np.ndarray:
        """P(X >= k) for k >= 1: the regularised lower incomplete gamma P(k, mu)."""
        return sc.gammainc(kpos, np.exp(eta_c))

    def pmf_stepper(self, eta_c: np.ndarray, la: Any) -> Callable[[np.ndarray, int], None]:
        """In-place update of log f(k) to log f(k + 1): ``+ log mu - log(k + 1)``."""
        step = eta_c

        def advance(log_fk: np.ndarray, k: int) -> None:
            log_fk += step
            log_fk -= math.log(k + 1.0)

        return advance

    def pmf_multiplier(self, eta_c: np.ndarray, la: Any) -> Callable[[np.ndarray, int], None]:
        """In-place update of f(k) to f(k + 1) on the natural scale: ``* mu / (k + 1)``
        (two multiplications instead of an ``exp`` per k; see ``Family.pmf_table``)."""
        mu = np.exp(eta_c)

        def advance(fk: np.ndarray, k: int) -> None:
            fk *= mu
            fk *= 1.0 / (k + 1.0)

        return advance

    def draw(self, rng: np.random.Generator, eta_c: np.ndarray, la: Any) -> np.ndarray:
        """Draws of the count process (flat arrays in, int64 out)."""
        return poisson_draws(rng, np.exp(eta_c))

    def draw_positive(self, rng: np.random.Generator, eta_c: np.ndarray, la: Any) -> np.ndarray:
        """Exact draws of X | X > 0 through the first arrival time T of the Poisson process
        on [0, 1]: given T < 1, ``X = 1 + Poisson(mu (1 - T))``; no rejection loop."""
        w = self.log_first_arrival(rng, eta_c, la)
        rest = np.maximum(np.exp(eta_c) + w, 0.0)  # mu (1 - t), t = -w / mu
        return 1 + poisson_draws(rng, rest)

    # ------------------------------------------------------------------ PyTensor
    def pt_dispersion(self, log_alpha: Any) -> None:
        """The Poisson has no dispersion: None (see :meth:`NegBinKernel.pt_dispersion`)."""
        return None

    def pt_logf0(self, eta_c: Any, disp: None) -> Any:
        """log f(0) = -mu as a tensor."""
        import pytensor.tensor as pt

        return -pt.exp(eta_c)

    def pt_logf(self, y: np.ndarray, eta_c: Any, disp: None) -> Any:
        """log f(y) as a tensor, for observed counts ``y`` (a NumPy array, built in as
        constants) and ``eta_c`` with one entry per count."""
        import pytensor.tensor as pt

        y1, lyf = _observed(y)
        return y1 * eta_c - pt.exp(eta_c) - lyf

    def pt_log1m_f0(self, eta_c: Any, disp: None) -> Any:
        """log(1 - f(0)) as a tensor (twin of :meth:`log1m_f0`)."""
        import pytensor.tensor as pt

        return nx.pt_log1m_exp_neg(pt.exp(eta_c), eta_c)


@dataclass(frozen=True)
class NegBinKernel(CountKernel):
    """NB(mu, alpha), variance ``mu + alpha mu^2``; ``alpha -> 0`` is the Poisson.

    For ``alpha <= 1e-4`` the difference ``lgamma(y + theta) - lgamma(theta)`` is taken from
    its Stirling form (:func:`~bayeszi.families.numerics.stirling_part`), and ``theta
    log1p(x)`` as ``mu L(x)`` (:func:`~bayeszi.families.numerics.log1p_ratio`).

    Example
    -------
    >>> round(float(NEGBIN.logf0(np.log(3.0), 0.0)), 12)   # -log1p(alpha mu) / alpha, alpha = 1
    -1.38629436112
    """

    name: str = "negbin"
    has_dispersion: bool = True

    # ------------------------------------------------------------------ NumPy
    def logf(self, y: Any, eta_c: np.ndarray, la: np.ndarray) -> np.ndarray:
        """log f(y); theta log(theta/(theta+mu)) = -theta log1p(x) and log(mu/(theta+mu)) =
        log_sigmoid(log x), x = alpha mu."""

        def moderate_theta(y, eta_c, la):  # alpha > 1e-4: theta <= 1e4, lgamma diff. exact
            theta = np.exp(-la)
            lx = eta_c + la
            out = np.multiply(y, sc.log_expit(lx))  # full broadcast shape from the start
            work = np.add(y, theta)
            sc.gammaln(work, out=work)
            out += work
            out -= sc.gammaln(theta)
            # reuse the work array for -theta log1p(x) when shapes allow (draws x rows)
            work = np.logaddexp(0.0, lx, out=work if work.shape == lx.shape else None)
            work *= theta
            out -= work
            return out

        def huge_theta(y, eta_c, la):  # alpha <= 1e-4: Stirling form of the lgamma diff.
            lx = eta_c + la
            out = np.multiply(y, np.subtract(eta_c, nx.softplus(lx)))
            work = nx.log1p_ratio(lx)
            work *= np.exp(eta_c)  # theta log1p(x) = mu L(x)
            out -= work
            out += nx.stirling_part(y, la)
            return out

        out = nx.piecewise(la > nx.LOG_ALPHA_STIRLING, moderate_theta, huge_theta, y, eta_c, la)
        out -= sc.gammaln(np.add(y, 1.0))
        return out

    def neg_logf0(self, eta_c: np.ndarray, la: np.ndarray) -> np.ndarray:
        """t = -log f(0) = theta log1p(alpha mu) = mu L(alpha mu) > 0."""

        def moderate_theta(eta_c, la):
            out = np.logaddexp(0.0, eta_c + la)
            out *= np.exp(-la)
            return out

        def huge_theta(eta_c, la):
            out = nx.log1p_ratio(eta_c + la)
            out *= np.exp(eta_c)
            return out

        return nx.piecewise(la > nx.LOG_ALPHA_STIRLING, moderate_theta, huge_theta, eta_c, la)

    def log_neg_logf0_at(self, mask: np.ndarray, eta_c: np.ndarray, la: np.ndarray):
        """log t = eta_c + log L(alpha mu) at the elements of ``mask``."""
        ec, lz = nx.take(mask, eta_c, la)
        return ec + np.log(nx.log1p_ratio(ec + lz))

    def alpha(self, la: np.ndarray) -> np.ndarray:
        """The overdispersion alpha = exp(la)."""
        return np.exp(la)

    def mean_minus_q(self, eta_c: np.ndarray, la: np.ndarray, log_f0: np.ndarray):
        """mu - (1 - f(0)) = mu G(alpha mu) + E(mu L(alpha mu)) >= 0, without cancellation
        (``log_f0`` is overwritten with t = -log f(0))."""
        out = nx.one_minus_log1p_ratio(eta_c + la)
        out *= np.exp(eta_c)
        np.negative(log_f0, out=log_f0)  # t = mu L(alpha mu)
        out += nx.expm1m_plus(log_f0)
        return out

    def tail(self, kpos: np.ndarray, eta_c: np.ndarray, la: np.ndarray) -> np.ndarray:
        """P(X >= k) for k >= 1: the regularised incomplete beta I_x(k, theta),
        x = alpha mu / (1 + alpha mu)."""
        return sc.betainc(kpos, np.exp(-la), sc.expit(eta_c + la))

    def pmf_stepper(self, eta_c: np.ndarray, la: np.ndarray) -> Callable[[np.ndarray, int], None]:
        """In-place update of log f(k) to log f(k + 1):
        ``+ log(mu / (1 + alpha mu)) - log(k + 1) + log1p(alpha k)``."""
        step = eta_c - nx.softplus(eta_c + la)  # log(mu / (1 + alpha mu))
        alpha = np.exp(la)

        def advance(log_fk: np.ndarray, k: int) -> None:
            log_fk += step
            log_fk -= math.log(k + 1.0)
            if k > 0:
                log_fk += np.log1p(alpha * k)

        return advance

    def pmf_multiplier(self, eta_c: np.ndarray, la: np.ndarray
                       ) -> Callable[[np.ndarray, int], None]:
        """In-place update of f(k) to f(k + 1) on the natural scale:
        ``* alpha mu / (1 + alpha mu) * (k + theta) / (k + 1)`` (for theta <= 1e4, where
        ``Family.pmf_table`` uses it)."""
        q = sc.expit(eta_c + la)  # alpha mu / (1 + alpha mu)
        theta = np.exp(-la)

        def advance(fk: np.ndarray, k: int) -> None:
            fk *= q
            fk *= (k + theta) / (k + 1.0)

        return advance

    def draw(self, rng: np.random.Generator, eta_c: np.ndarray, la: np.ndarray) -> np.ndarray:
        """Gamma-Poisson mixture draws (flat arrays in, int64 out)."""
        return poisson_draws(rng, rng.gamma(np.exp(-la), np.exp(eta_c + la)))

    def draw_positive(self, rng: np.random.Generator, eta_c: np.ndarray, la: np.ndarray):
        """Exact draws of X | X > 0: given the first arrival T = t < 1 of the mixed process,
        the rate is Gamma(theta + 1, scale alpha mu / (1 + alpha mu t)) and
        ``X = 1 + Poisson(rate (1 - t))``."""
        w = self.log_first_arrival(rng, eta_c, la)
        s = np.exp(eta_c + la)  # alpha mu
        t = np.clip(np.expm1(-np.exp(la) * w) / s, 0.0, 1.0)
        lam = rng.gamma(np.exp(-la) + 1.0, s / (1.0 + s * t))
        return 1 + poisson_draws(rng, lam * (1.0 - t))

    # ------------------------------------------------------------------ PyTensor
    def pt_dispersion(self, log_alpha: Any) -> PtDispersion:
        """log alpha and theta = 1/alpha as tensors, built once per density so that all its
        pieces share one node of each (and the gradient sums through it once)."""
        import pytensor.tensor as pt

        la = pt.as_tensor_variable(log_alpha)
        return PtDispersion(la, pt.exp(-la))  # theta: one number, not one per row

    def pt_logf0(self, eta_c: Any, disp: PtDispersion) -> Any:
        """log f(0) = -log1p(alpha mu) / alpha as a tensor."""
        import pytensor.tensor as pt

        return -disp.theta * pt.softplus(eta_c + disp.log_alpha)

    def pt_logf(self, y: np.ndarray, eta_c: Any, disp: PtDispersion) -> Any:
        """log f(y) = D(y, theta) - lgamma(y + 1) + y (eta_c - s) - s / alpha with s =
        log1p(alpha mu), for observed counts ``y`` (built in as constants); the
        dispersion's gamma term is computed once per distinct count and looked up."""
        import pytensor.tensor as pt

        la = disp.log_alpha
        y1, lyf = _observed(y)
        y_vals, y_index = np.unique(y, return_inverse=True)
        y_tab = pt.as_tensor_variable(y_vals.astype(np.float64))
        s1 = pt.softplus(eta_c + la)
        return y1 * (eta_c - s1) - disp.theta * s1 - lyf + pt_lgamma_ratio(y_tab, la)[y_index]

    def pt_log1m_f0(self, eta_c: Any, disp: PtDispersion) -> Any:
        """log(1 - f(0)) as a tensor (twin of :meth:`log1m_f0`)."""
        import pytensor.tensor as pt

        ratio = nx.pt_log1p_ratio(eta_c + disp.log_alpha)
        return nx.pt_log1m_exp_neg(pt.exp(eta_c) * ratio, eta_c + pt.log(ratio))


def pt_lgamma_ratio(y: Any, la: Any) -> Any:
    """lgamma(y + theta) - lgamma(theta) + y log(alpha), theta = 1/alpha, as a tensor: the
    direct form for alpha > 1e-4, the Stirling form
    (:func:`~bayeszi.families.numerics.pt_stirling_part`) below.

    Example
    -------
    >>> import pytensor.tensor as pt
    >>> y, la = pt.constant(np.float64(2.0)), pt.constant(np.float64(0.0))
    >>> round(float(pt_lgamma_ratio(y, la).eval()), 12)  # log 2
    0.69314718056
    """
    import pytensor.tensor as pt

    la_d = pt.maximum(la, nx.LOG_ALPHA_STIRLING)
    theta = pt.exp(-la_d)
    direct = pt.gammaln(y + theta) - pt.gammaln(theta) + y * la_d
    stirling = nx.pt_stirling_part(y, pt.minimum(la, nx.LOG_ALPHA_STIRLING))
    return pt.switch(pt.gt(la, nx.LOG_ALPHA_STIRLING), direct, stirling)


POISSON = PoissonKernel()
NEGBIN = NegBinKernel()
