"""A family is a count kernel times a zero mechanism; the six of them, by name.

:class:`Family` checks and broadcasts its inputs, then hands the work to its kernel
(:mod:`bayeszi.families.kernels`) and its mechanism (:mod:`bayeszi.families.mechanisms`).
All NumPy methods take ``eta_c``, ``eta_z`` and ``log_alpha`` (see :mod:`bayeszi.families`),
ignore the ones the family does not use, broadcast over the rest and return float64 arrays
(0-d for all-scalar calls). :meth:`Family.pt_logp_observed` is the model graph's log density
of the observed counts (``bayeszi.model.patterns.pattern_logp`` builds on it).

Example
-------
>>> fam = get_family("zinb")
>>> fam.kernel.name, fam.mechanism.kind
('negbin', 'inflation')
>>> float(fam.mean(np.log(4.0), 0.0, 0.0))   # (1 - p) mu
2.0
"""

from __future__ import annotations

import functools
import math
from collections.abc import Callable
from dataclasses import dataclass
from typing import Any

import numpy as np

from bayeszi.base.errors import BayesziError
from bayeszi.base.names import FAMILY_NAMES, check_family, zeros_label
from bayeszi.families import numerics as nx
from bayeszi.families.kernels import NEGBIN, POISSON, CountKernel
from bayeszi.families.mechanisms import HURDLE, INFLATION, NO_ZEROS, Mechanism

__all__ = ["FAMILY_NAMES", "Family", "get_family", "FAMILY_PARTS"]

#: pmf_table restarts its ratio recurrence from the exact log-pmf every this many k.
REANCHOR = 32
#: pmf_table steps on the natural scale (multiplications, no exp per k) when every
#: log P(Y = 1) / f(1) * f(0) is above this, so nothing it steps from underflows
LINEAR_FLOOR = -700.0


def _f64(x: Any, what: str, family: str) -> np.ndarray:
    if x is None:
        raise BayesziError(
            f"family {family!r} needs {what}, but None was given; pass the linear predictor "
            f"of that part (an array that broadcasts against eta_c)."
        )
    return np.asarray(x, dtype=np.float64)


def _lift(v: Any) -> Any:
    return None if v is None else np.atleast_1d(v)


def _split(x: Any, nz: int) -> tuple[Any, Any]:
    """(zero-count part, positive part) of a per-count tensor; length-1 tensors are shared."""
    if x.type.ndim == 0 or x.type.shape[-1] == 1:
        return x, x
    return x[..., :nz], x[..., nz:]


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


@dataclass(frozen=True)
class Family:
    """One likelihood family, a count kernel times a zero mechanism; all methods are
    vectorised over broadcastable arrays.

    Parameters are passed on the linear-predictor scale (``eta_c``, ``eta_z``, ``log_alpha``,
    see :mod:`bayeszi.families`). Arguments a family does not use are ignored and may be
    ``None``.

    Example
    -------
    >>> fam = get_family("hurdle-negbin")
    >>> fam.zeros_kind, fam.has_dispersion, fam.zeros_label
    ('hurdle', True, 'P(Y = 0)')
    >>> float(fam.prob_zero(0.0, 0.0, -1.0))   # hurdle: P(Y = 0) = p = logistic(0)
    0.5
    """

    name: str
    kernel: CountKernel
    mechanism: Mechanism

    @property
    def zeros_kind(self) -> str | None:
        """None, ``"inflation"`` or ``"hurdle"``: the zero mechanism."""
        return self.mechanism.kind

    @property
    def has_dispersion(self) -> bool:
        """Whether the kernel is the negative binomial (uses ``log_alpha``)."""
        return self.kernel.has_dispersion

    @property
    def zeros_label(self) -> str:
        """``P(extra zero)``, ``P(Y = 0)`` or ``""``: what the zeros part's probability is."""
        return zeros_label(self.name)

    # ------------------------------------------------------------------ input helpers
    def _inputs(self, eta_c: Any, eta_z: Any, log_alpha: Any):
        ez = _f64(eta_z, "eta_z", self.name) if self.zeros_kind is not None else None
        la = _f64(log_alpha, "log_alpha", self.name) if self.has_dispersion else None
        return _f64(eta_c, "eta_c", self.name), ez, la

    def _pt_needs(self, value: Any, what: str) -> Any:
        if value is None:
            raise BayesziError(f"family {self.name!r} needs {what}, but None was given.")
        return value

    # ------------------------------------------------------------------ log-probability
    @_array_method
    def logpmf(self, y: Any, eta_c: Any, eta_z: Any, log_alpha: Any) -> np.ndarray:
        """Elementwise log-pmf in NumPy (float64), the values of the model's density.

        ``y`` holds non-negative integer counts (checked upstream, not here).

        Example
        -------
        >>> round(float(get_family("poisson").logpmf(3, 0.0, None, None)), 6)
        -2.791759
        """
        eta_c, eta_z, la = self._inputs(eta_c, eta_z, log_alpha)
        return self.mechanism.logpmf(self.kernel, np.asarray(y), eta_c, eta_z, la)

    def pt_logp_observed(self, y: np.ndarray, eta_c: Any, eta_z: Any, log_alpha: Any) -> Any:
        """log P(Y = y) as a PyTensor tensor, for the model graph.

        ``y`` holds the observed counts, zeros first (a NumPy array, built in as constants);
        ``eta_c`` and ``eta_z`` have one entry per count (or one shared entry) and
        ``log_alpha`` is a scalar. The density is split by a fixed slice instead of a
        per-element switch: zero counts take the mechanism's log P(0) (no gamma functions),
        positive counts its log P(y); the values are those of :meth:`logpmf`.

        Example
        -------
        >>> import pytensor.tensor as pt
        >>> eta = pt.dvector("eta")
        >>> lp = get_family("poisson").pt_logp_observed(np.array([0, 3]), eta, None, None)
        >>> [round(v, 6) for v in lp.eval({eta: [0.0, 0.0]}).tolist()]   # -mu, log(e^-1/3!)
        [-1.0, -2.791759]
        """
        import pytensor.tensor as pt

        y = np.asarray(y)
        nz = int(np.count_nonzero(y == 0))
        if np.any(y[:nz] != 0):
            raise BayesziError("pt_logp_observed needs the observed counts sorted zeros first.")
        kernel, mech = self.kernel, self.mechanism
        ec0, ec1 = _split(pt.as_tensor_variable(eta_c), nz)
        ez0 = ez1 = None
        if self.zeros_kind is not None:
            ez0, ez1 = _split(pt.as_tensor_variable(self._pt_needs(eta_z, "eta_z")), nz)
        disp = None
        if self.has_dispersion:
            disp = kernel.pt_dispersion(self._pt_needs(log_alpha, "log_alpha"))
        pieces = []
        if nz:
            pieces.append(mech.pt_logp_zeros(kernel, ec0, ez0, disp))
        if nz < y.size:
            pieces.append(mech.pt_logp_positive(kernel, y[nz:], ec1, ez1, disp))
        return pieces[0] if len(pieces) == 1 else pt.concatenate(pieces, axis=-1)

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
        shape = nx.broadcast_shape(eta_c, eta_z, la)
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
        flat = [None if a is None else np.broadcast_to(a, shape).reshape(n)
                for a in (eta_c, eta_z, la)]
        return self.mechanism.random(rng, self.kernel, *flat).reshape(shape)

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
        shape = nx.broadcast_shape(eta_c, eta_z, la)
        return self.mechanism.mean(self.kernel, eta_c, eta_z, la, shape)

    @_array_method
    def variance(self, eta_c: Any, eta_z: Any, log_alpha: Any) -> np.ndarray:
        """Var[Y] in closed form (formulas in ``docs/families.md``).

        Example
        -------
        >>> float(get_family("zip").variance(np.log(2.0), 0.0, None))  # mu(1-p)(1+p mu)
        2.0
        """
        eta_c, eta_z, la = self._inputs(eta_c, eta_z, log_alpha)
        return self.mechanism.variance(self.kernel, eta_c, eta_z, la)

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
        shape = nx.broadcast_shape(eta_c, eta_z, la)
        return self.mechanism.log_prob_zero(self.kernel, eta_c, eta_z, la, shape)

    @_array_method
    def prob_extra_zero_given_zero(self, eta_c: Any, eta_z: Any, log_alpha: Any) -> np.ndarray:
        """Share of zeros that come from the zeros part: ZI p / P(0); hurdle 1; plain 0.

        Example
        -------
        >>> round(float(get_family("zip").prob_extra_zero_given_zero(0.0, 0.0, None)), 6)
        0.731059
        """
        eta_c, eta_z, la = self._inputs(eta_c, eta_z, log_alpha)
        shape = nx.broadcast_shape(eta_c, eta_z, la)
        return self.mechanism.prob_extra_zero_given_zero(self.kernel, eta_c, eta_z, la, shape)

    @_array_method
    def positive_mean(self, eta_c: Any, eta_z: Any, log_alpha: Any) -> np.ndarray:
        """Mean of the count part: mu (plain, ZI); E[Y | Y > 0] = mu / (1 - f(0)) (hurdle).

        Example
        -------
        >>> round(float(get_family("hurdle-poisson").positive_mean(0.0, 0.0, None)), 6)
        1.581977
        """
        eta_c, eta_z, la = self._inputs(eta_c, eta_z, log_alpha)
        shape = nx.broadcast_shape(eta_c, eta_z, la)
        return self.mechanism.positive_mean(self.kernel, eta_c, eta_z, la, shape)

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
        kpos = np.maximum(np.ceil(k), 1.0)  # P(Y >= k) = P(Y >= ceil(k))
        tail = self._kernel_tail(kpos, eta_c, la)
        tail = self.mechanism.scale_tail(self.kernel, tail, kpos, eta_c, eta_z, la)
        return np.where(k <= 0, 1.0, tail)

    def _kernel_tail(self, kpos: np.ndarray, eta_c: np.ndarray, la: Any) -> np.ndarray:
        """The kernel's P(X >= k), k >= 1, with P(X >= 1) = -expm1(log f(0)) in closed form
        (exact, and several times cheaper than the incomplete gamma or beta, which the
        other k still take): the zero counts of zero-heavy data are most of a residual's
        tails."""
        shape = nx.broadcast_shape(kpos, eta_c, la)
        one = np.broadcast_to(kpos == 1.0, shape)
        out = np.empty(shape)
        for mask, tail in ((one, self._tail_at_one), (~one, self.kernel.tail)):
            if mask.any():
                picked = nx.take(mask, kpos, eta_c, la)
                out[mask] = tail(*picked)
        return out

    def _tail_at_one(self, kpos: np.ndarray, eta_c: np.ndarray, la: Any) -> np.ndarray:
        """The kernel's P(X >= 1) = 1 - f(0) = -expm1(log f(0))."""
        return -np.expm1(-self.kernel.neg_logf0(eta_c, la))

    def pmf_table(self, kmax: int, eta_c: Any, eta_z: Any, log_alpha: Any) -> np.ndarray:
        """P(Y = k) for k = 0..kmax, as an array of shape (broadcast shape, kmax + 1).

        Uses the kernel's ratio recurrence f(k+1)/f(k) = mu/(k+1) (Poisson) or
        (k + theta)/(k + 1) * alpha mu/(1 + alpha mu) (NB), restarted from the exact log f(k)
        every 32 steps so that rounding cannot build up for large kmax. The recurrence runs
        on the natural scale (two multiplications per k) when the starting values are far
        from underflow (log above :data:`LINEAR_FLOOR`; the count laws are unimodal, so a
        value that underflows later lies in the falling tail, below 1e-300) and the NB's
        theta is at most 1e4; else on the log scale (an ``exp`` per k).

        Example
        -------
        >>> get_family("zip").pmf_table(3, 0.0, 0.0, None).shape
        (4,)
        """
        if int(kmax) != kmax or kmax < 0:
            raise BayesziError(f"kmax must be a non-negative integer, got {kmax!r}.")
        kmax = int(kmax)
        eta_c, eta_z, la = self._inputs(eta_c, eta_z, log_alpha)
        final_shape = (*nx.broadcast_shape(eta_c, eta_z, la), kmax + 1)
        eta_c, eta_z, la = _lift(eta_c), _lift(eta_z), _lift(la)  # see _array_method
        shape = nx.broadcast_shape(eta_c, eta_z, la)
        # k-major buffer: each k writes one contiguous block (strided writes along the last
        # axis cost about a third more); the returned view puts k last.
        buf = np.empty((kmax + 1, *shape), dtype=np.float64)
        out = np.moveaxis(buf, 0, -1)
        log_f0, log1m_f0 = self.kernel.log1m_f0(eta_c, la)
        buf[0] = np.exp(self.log_prob_zero(eta_c, eta_z, la))
        if kmax == 0:
            return out.reshape(final_shape)
        log_scale = self.mechanism.log_scale(eta_z, log1m_f0)  # P(Y = k) / f(k), k >= 1
        log_fk = np.array(np.broadcast_to(log_f0 + log_scale, shape), dtype=np.float64)
        linear = bool(np.all(log_fk > LINEAR_FLOOR)) and (
            not self.kernel.has_dispersion or bool(np.all(la > nx.LOG_ALPHA_STIRLING)))
        if linear:
            advance = self.kernel.pmf_multiplier(eta_c, la)
            fk = np.exp(log_fk)
        else:
            advance = self.kernel.pmf_stepper(eta_c, la)
            fk = log_fk
        for k in range(kmax):
            if (k + 1) % REANCHOR == 0:  # exact value now and then: no drift over many k
                np.add(self.kernel.logf(float(k + 1), eta_c, la), log_scale, out=fk)
                if linear:
                    np.exp(fk, out=fk)
            else:
                advance(fk, k)
            if linear:
                buf[k + 1] = fk
            else:
                np.exp(fk, out=buf[k + 1])
        return out.reshape(final_shape)


#: the (kernel, zero mechanism) of each family, in the order of FAMILY_NAMES
FAMILY_PARTS: dict[str, tuple[CountKernel, Mechanism]] = {
    "poisson": (POISSON, NO_ZEROS),
    "negbin": (NEGBIN, NO_ZEROS),
    "zip": (POISSON, INFLATION),
    "zinb": (NEGBIN, INFLATION),
    "hurdle-poisson": (POISSON, HURDLE),
    "hurdle-negbin": (NEGBIN, HURDLE),
}
_FAMILIES: dict[str, Family] = {name: Family(name, *parts) for name, parts in FAMILY_PARTS.items()}
assert tuple(_FAMILIES) == FAMILY_NAMES


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
