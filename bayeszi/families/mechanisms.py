"""The three zero mechanisms: none, zero inflation and hurdle.

A mechanism says how a count kernel ``f`` (:mod:`bayeszi.families.kernels`) and the
zeros-part probability ``p = logistic(eta_z)`` make the law of ``Y``:

- ``NO_ZEROS`` (``poisson``, ``negbin``): ``P(y) = f(y)``; ``eta_z`` is ignored.
- ``INFLATION`` (``zip``, ``zinb``): ``P(0) = p + (1 - p) f(0)``, ``P(y) = (1 - p) f(y)``.
- ``HURDLE`` (``hurdle-poisson``, ``hurdle-negbin``): ``P(0) = p``,
  ``P(y) = (1 - p) f(y) / (1 - f(0))``.

Each mechanism combines the kernel's pieces into the log-pmf, log P(Y = 0), the mean,
variance, tail scaling, pmf-table scaling, P(extra zero | zero), the mean of the count part
and random draws (NumPy), and into the log density of zero and of positive observed counts
(PyTensor, ``pt_`` methods, used by the model graph; they take the dispersion as the
kernel's ``pt_dispersion`` gives it). Every method takes the kernel first.
``tests/test_families.py`` checks the PyTensor and NumPy log densities against each other.

Example
-------
>>> import numpy as np
>>> from bayeszi.families.kernels import POISSON
>>> round(float(np.exp(INFLATION.log_prob_zero(POISSON, np.log(2.0), 0.0, None, ()))), 6)
0.567668
>>> float(np.exp(HURDLE.log_prob_zero(POISSON, np.log(2.0), 0.0, None, ())))
0.5
"""

from __future__ import annotations

from typing import Any

import numpy as np
from scipy import special as sc

from bayeszi.families import numerics as nx
from bayeszi.families.kernels import CountKernel

__all__ = ["Mechanism", "Inflation", "Hurdle", "NO_ZEROS", "INFLATION", "HURDLE"]


class Mechanism:
    """No zeros part: ``Y`` follows the kernel itself (also the base of the other two).

    Example
    -------
    >>> from bayeszi.families.kernels import NEGBIN
    >>> float(NO_ZEROS.mean(NEGBIN, np.log(4.0), None, 0.0, ()))
    4.0
    """

    #: None, "inflation" or "hurdle" (as :data:`bayeszi.base.names.ZERO_MECHANISMS`)
    kind: str | None = None

    # ------------------------------------------------------------------ NumPy
    def logpmf(self, kernel: CountKernel, y: np.ndarray, eta_c: np.ndarray,
               eta_z: Any, la: Any) -> np.ndarray:
        """log P(Y = y)."""
        return np.asarray(kernel.logf(y, eta_c, la))

    def log_prob_zero(self, kernel: CountKernel, eta_c: np.ndarray, eta_z: Any, la: Any,
                      shape: tuple[int, ...]) -> np.ndarray:
        """log P(Y = 0) = log f(0)."""
        return kernel.logf0(eta_c, la)

    def mean(self, kernel: CountKernel, eta_c: np.ndarray, eta_z: Any, la: Any,
             shape: tuple[int, ...]) -> np.ndarray:
        """E[Y] = mu."""
        return nx.as_shape(np.exp(eta_c), shape)

    def variance(self, kernel: CountKernel, eta_c: np.ndarray, eta_z: Any, la: Any):
        """Var[Y] = mu (1 + alpha mu)."""
        return kernel.variance(eta_c, la)

    def prob_extra_zero_given_zero(self, kernel: CountKernel, eta_c: np.ndarray, eta_z: Any,
                                   la: Any, shape: tuple[int, ...]) -> np.ndarray:
        """Share of the zeros that come from the zeros part: none here."""
        return np.zeros(shape)

    def positive_mean(self, kernel: CountKernel, eta_c: np.ndarray, eta_z: Any, la: Any,
                      shape: tuple[int, ...]) -> np.ndarray:
        """Mean of the count part: mu."""
        return nx.as_shape(np.exp(eta_c), shape)

    def scale_tail(self, kernel: CountKernel, tail: np.ndarray, kpos: np.ndarray,
                   eta_c: np.ndarray, eta_z: Any, la: Any) -> np.ndarray:
        """P(Y >= k) from the kernel's P(X >= k), k >= 1."""
        return tail

    def log_scale(self, eta_z: Any, log1m_f0: np.ndarray) -> Any:
        """log of the factor P(Y = k) / f(k) for k >= 1 (pmf tables)."""
        return 0.0

    def random(self, rng: np.random.Generator, kernel: CountKernel, eta_c: np.ndarray,
               eta_z: Any, la: Any) -> np.ndarray:
        """Draws (flat arrays of one length in, int64 out)."""
        return kernel.draw(rng, eta_c, la)

    # ------------------------------------------------------------------ PyTensor
    def pt_logp_zeros(self, kernel: CountKernel, eta_c: Any, eta_z: Any, disp: Any) -> Any:
        """log P(Y = 0) as a tensor, one value per entry of ``eta_c``."""
        return kernel.pt_logf0(eta_c, disp)

    def pt_logp_positive(self, kernel: CountKernel, y: np.ndarray, eta_c: Any, eta_z: Any,
                         disp: Any) -> Any:
        """log P(Y = y) as a tensor for observed positive counts ``y`` (NumPy constants)."""
        return kernel.pt_logf(y, eta_c, disp)


class _TwoPart(Mechanism):
    """What zero inflation and the hurdle share: the factor (1 - p) on every positive count.

    Each subclass defines ``_set_zeros`` (its log P(0), and for the hurdle the truncation)
    and may override ``_count_draws``.
    """

    def logpmf(self, kernel: CountKernel, y: np.ndarray, eta_c: np.ndarray,
               eta_z: np.ndarray, la: Any) -> np.ndarray:
        """log P(Y = y): log((1 - p) f(y)) for y > 0 (hurdle: / (1 - f(0))), then the zeros."""
        logf = kernel.logf(y, eta_c, la)
        shape = nx.broadcast_shape(logf, eta_z)
        # logf is a fresh array of ours: reuse it in place when it already has the full shape
        if isinstance(logf, np.ndarray) and logf.ndim and logf.shape == shape:
            out = logf
        else:
            out = np.array(np.broadcast_to(logf, shape), dtype=np.float64)
        out += sc.log_expit(-eta_z)  # log(1 - p)
        zero = np.broadcast_to(np.asarray(y) == 0, shape)
        return self._set_zeros(kernel, out, zero, eta_c, eta_z, la)

    def scale_tail(self, kernel: CountKernel, tail: np.ndarray, kpos: np.ndarray,
                   eta_c: np.ndarray, eta_z: np.ndarray, la: Any) -> np.ndarray:
        """(1 - p) P(X >= k)."""
        return np.minimum(tail * np.exp(sc.log_expit(-eta_z)), 1.0)

    def log_scale(self, eta_z: np.ndarray, log1m_f0: np.ndarray) -> Any:
        """log(1 - p)."""
        return sc.log_expit(-eta_z)

    def random(self, rng: np.random.Generator, kernel: CountKernel, eta_c: np.ndarray,
               eta_z: np.ndarray, la: Any) -> np.ndarray:
        """Kernel draws (hurdle: zero-truncated), then a zero with probability p."""
        counts = self._count_draws(rng, kernel, eta_c, la)
        p = sc.expit(eta_z)
        counts[rng.random(eta_c.size) < p] = 0
        return counts

    def _count_draws(self, rng, kernel, eta_c, la) -> np.ndarray:
        return kernel.draw(rng, eta_c, la)


class Inflation(_TwoPart):
    """Zero inflation: an extra zero with probability p, else a draw of the kernel.

    Example
    -------
    >>> from bayeszi.families.kernels import POISSON
    >>> float(INFLATION.variance(POISSON, np.log(2.0), 0.0, None))   # mu (1 - p)(1 + p mu)
    2.0
    """

    kind = "inflation"

    def _set_zeros(self, kernel, out, zero, eta_c, eta_z, la) -> np.ndarray:
        """log P(0) = log(p + (1 - p) f(0)) at the zero counts."""
        if zero.any():
            ec, ez, lz = nx.take(zero, eta_c, eta_z, la)
            out[zero] = np.logaddexp(sc.log_expit(ez), sc.log_expit(-ez) + kernel.logf0(ec, lz))
        return out

    def log_prob_zero(self, kernel: CountKernel, eta_c: np.ndarray, eta_z: np.ndarray,
                      la: Any, shape: tuple[int, ...]) -> np.ndarray:
        """log(p + (1 - p) f(0)), a stable log-sum-exp."""
        log_f0 = kernel.logf0(eta_c, la)
        # <= 0 exactly; rounding can give +1e-17 when f0 is near 1
        return np.minimum(np.logaddexp(sc.log_expit(eta_z), sc.log_expit(-eta_z) + log_f0), 0.0)

    def mean(self, kernel: CountKernel, eta_c: np.ndarray, eta_z: np.ndarray, la: Any,
             shape: tuple[int, ...]) -> np.ndarray:
        """(1 - p) mu, in product form (half the cost, same accuracy)."""
        return nx.as_shape(np.exp(eta_c) * sc.expit(-eta_z), shape)

    def variance(self, kernel: CountKernel, eta_c: np.ndarray, eta_z: np.ndarray, la: Any):
        """(1 - p)(sigma^2 + p mu^2) = mu (1 - p)(1 + mu (p + alpha))."""
        mu = np.exp(eta_c)
        return mu * sc.expit(-eta_z) * (1.0 + mu * (sc.expit(eta_z) + kernel.alpha(la)))

    def prob_extra_zero_given_zero(self, kernel: CountKernel, eta_c: np.ndarray,
                                   eta_z: np.ndarray, la: Any, shape: tuple[int, ...]):
        """p / P(Y = 0)."""
        log_p0 = self.log_prob_zero(kernel, eta_c, eta_z, la, shape)
        return np.minimum(np.exp(sc.log_expit(eta_z) - log_p0), 1.0)

    def pt_logp_zeros(self, kernel: CountKernel, eta_c: Any, eta_z: Any, disp: Any) -> Any:
        """log(p + (1 - p) f0) = log(exp(eta_z) + f0) - log(1 + exp(eta_z)) as a tensor."""
        import pytensor.tensor as pt

        return nx.pt_logaddexp(eta_z, kernel.pt_logf0(eta_c, disp)) - pt.softplus(eta_z)

    def pt_logp_positive(self, kernel: CountKernel, y: np.ndarray, eta_c: Any, eta_z: Any,
                         disp: Any) -> Any:
        """log((1 - p) f(y)) as a tensor for observed positive counts ``y``."""
        import pytensor.tensor as pt

        return kernel.pt_logf(y, eta_c, disp) - pt.softplus(eta_z)


class Hurdle(_TwoPart):
    """Hurdle: a zero with probability p, else a draw of the zero-truncated kernel.

    Example
    -------
    >>> from bayeszi.families.kernels import POISSON
    >>> round(float(HURDLE.positive_mean(POISSON, 0.0, 0.0, None, ())), 6)  # 1 / (1 - e^-1)
    1.581977
    """

    kind = "hurdle"

    def _set_zeros(self, kernel, out, zero, eta_c, eta_z, la) -> np.ndarray:
        """Divide the positive counts by (1 - f(0)); log P(0) = log p at the zero counts."""
        if (~zero).any():  # on the full array: cheaper in memory than gathering the positives
            out -= kernel.log1m_f0(eta_c, la)[1]
        if zero.any():
            (ez,) = nx.take(zero, eta_z)
            out[zero] = sc.log_expit(ez)
        return out

    def log_prob_zero(self, kernel: CountKernel, eta_c: np.ndarray, eta_z: np.ndarray,
                      la: Any, shape: tuple[int, ...]) -> np.ndarray:
        """log p (a log-sigmoid)."""
        return nx.as_shape(sc.log_expit(eta_z), shape)

    def mean(self, kernel: CountKernel, eta_c: np.ndarray, eta_z: np.ndarray, la: Any,
             shape: tuple[int, ...]) -> np.ndarray:
        """(1 - p) mu / (1 - f(0))."""
        log_mean = eta_c + sc.log_expit(-eta_z)
        log_mean = log_mean - kernel.log1m_f0(eta_c, la)[1]
        return nx.as_shape(np.exp(log_mean), shape)

    def variance(self, kernel: CountKernel, eta_c: np.ndarray, eta_z: np.ndarray, la: Any):
        """(1 - p) m+ [mu (1 + alpha) + p m+ - (m+ - 1)] with m+ = mu / q, q = 1 - f(0).

        From E[Y] = (1-p) m+ and E[Y^2] = (1-p)(sigma^2 + mu^2)/q; m+ - 1 = (mu - q)/q with
        mu - q computed without cancellation (the kernel's ``mean_minus_q``).
        """
        mu = np.exp(eta_c)
        log_f0, log_q = kernel.log1m_f0(eta_c, la)
        mu_minus_q = kernel.mean_minus_q(eta_c, la, log_f0)
        del log_f0
        np.negative(log_q, out=log_q)
        np.exp(log_q, out=log_q)  # now 1 / q
        mu_minus_q *= log_q  # (mu - q) / q = m+ - 1
        m_plus = np.multiply(mu, log_q)
        del log_q
        bracket = np.multiply(sc.expit(eta_z), m_plus)
        bracket += mu * (1.0 + kernel.alpha(la))
        bracket -= mu_minus_q
        del mu_minus_q
        bracket *= m_plus
        bracket *= sc.expit(-eta_z)
        return bracket

    def prob_extra_zero_given_zero(self, kernel: CountKernel, eta_c: np.ndarray,
                                   eta_z: np.ndarray, la: Any, shape: tuple[int, ...]):
        """1: every zero comes from the zeros part."""
        return np.ones(shape)

    def positive_mean(self, kernel: CountKernel, eta_c: np.ndarray, eta_z: np.ndarray,
                      la: Any, shape: tuple[int, ...]) -> np.ndarray:
        """E[Y | Y > 0] = mu / (1 - f(0))."""
        log_q = kernel.log1m_f0(eta_c, la)[1]
        return nx.as_shape(np.exp(eta_c - log_q), shape)

    def scale_tail(self, kernel: CountKernel, tail: np.ndarray, kpos: np.ndarray,
                   eta_c: np.ndarray, eta_z: np.ndarray, la: Any) -> np.ndarray:
        """(1 - p) P(X >= k | X >= 1): exactly (1 - p) at k = 1; 0 where the tail underflows
        (also when mu itself underflows and 1 - f(0) is 0: 0/0, limit 0)."""
        with np.errstate(over="ignore", invalid="ignore"):
            ratio = tail * np.exp(-kernel.log1m_f0(eta_c, la)[1])
        ratio = np.where(kpos <= 1, 1.0, np.where(tail == 0, 0.0, ratio))
        return np.minimum(ratio * sc.expit(-eta_z), 1.0)

    def log_scale(self, eta_z: np.ndarray, log1m_f0: np.ndarray) -> Any:
        """log((1 - p) / (1 - f(0)))."""
        return sc.log_expit(-eta_z) - log1m_f0

    def _count_draws(self, rng, kernel, eta_c, la) -> np.ndarray:
        return kernel.draw_positive(rng, eta_c, la)

    def pt_logp_zeros(self, kernel: CountKernel, eta_c: Any, eta_z: Any, disp: Any) -> Any:
        """log p as a tensor, one value per entry of ``eta_c``."""
        import pytensor.tensor as pt

        return -pt.softplus(-eta_z) + pt.zeros_like(eta_c)

    def pt_logp_positive(self, kernel: CountKernel, y: np.ndarray, eta_c: Any, eta_z: Any,
                         disp: Any) -> Any:
        """log((1 - p) f(y) / (1 - f(0))) as a tensor for observed positive counts ``y``."""
        import pytensor.tensor as pt

        return kernel.pt_logf(y, eta_c, disp) - pt.softplus(eta_z) - kernel.pt_log1m_f0(eta_c, disp)


NO_ZEROS = Mechanism()
INFLATION = Inflation()
HURDLE = Hurdle()
