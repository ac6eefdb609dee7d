"""R-hat and bulk and tail ESS of many parameters at once, as ArviZ computes them.

ArviZ's ``summary``, ``ess`` and ``rhat`` compute one scalar parameter at a time in a Python
loop: about 8 ms per parameter here, which is 98 s for a fit with 6,000 groups in two parts
(12,000 group effects; docs/performance.md). This module computes the same three numbers,
by the same algorithms, for every parameter together with NumPy and SciPy, in chunks:

- rank-normalised split R-hat, the larger of the bulk and folded (tail) values;
- bulk ESS of the rank-normalised split chains;
- tail ESS, the smaller ESS of the indicators of the 5% and 95% quantiles;

following Vehtari, Gelman, Simpson, Carpenter and Bürkner (2021), "Rank-normalization,
folding, and localization: an improved R-hat for assessing convergence of MCMC", Bayesian
Analysis 16(2), with Geyer's initial monotone sequence for the autocorrelation sum, exactly
as ArviZ 0.2x writes them (``arviz.stats.diagnostics``). tests/test_convergence.py checks
value for value against ArviZ, including ties, constant draws, NaN and short chains.

Example
-------
>>> rng = np.random.default_rng(0)
>>> draws = rng.normal(size=(3, 2, 400))          # parameters, chains, draws
>>> table = rhat_ess(draws)
>>> table.shape, bool(np.all(table[:, 1] > 300))
((3, 3), True)
"""

from __future__ import annotations

import numpy as np
import pandas as pd
from scipy import fft, special, stats

#: parameters per chunk: bounds the memory of the FFTs (chunk x chains x 2 draws complex)
CHUNK = 512
#: Blom's offset in the normal scores of ranks, as ArviZ uses it
BLOM = 3 / 8


def _split(x: np.ndarray) -> np.ndarray:
    """Each chain cut into its first and last halves (the middle draw of an odd count is
    left out): shape (parameters, 2 x chains, draws // 2)."""
    half = x.shape[2] // 2
    return np.concatenate([x[:, :, :half], x[:, :, x.shape[2] - half:]], axis=1)


def _z_scale(x: np.ndarray) -> np.ndarray:
    """Normal scores of the ranks of each parameter's draws (all chains together)."""
    flat = x.reshape(x.shape[0], -1)
    ranks = stats.rankdata(flat, method="average", axis=1)
    z = special.ndtri((ranks - BLOM) / (flat.shape[1] - 2 * BLOM + 1))  # = norm.ppf
    return z.reshape(x.shape)


def _autocov(x: np.ndarray) -> np.ndarray:
    """Autocovariance of each chain along the last axis, by FFT (divided by n)."""
    n = x.shape[-1]
    m = fft.next_fast_len(2 * n)
    centred = x - x.mean(axis=-1, keepdims=True)
    spec = np.fft.rfft(centred, n=m, axis=-1)
    spec *= np.conjugate(spec)
    return np.fft.irfft(spec, n=m, axis=-1)[..., :n] / n


def _ess(x: np.ndarray) -> np.ndarray:
    """ESS of each parameter's chains, shape (parameters, chains, draws) -> (parameters,)."""
    p, m, n = x.shape
    acov = _autocov(x)
    mean_var = acov[:, :, 0].mean(axis=1) * n / (n - 1.0)
    var_plus = mean_var * (n - 1.0) / n
    if m > 1:
        var_plus = var_plus + np.var(x.mean(axis=2), axis=1, ddof=1)
    with np.errstate(divide="ignore", invalid="ignore"):
        rho = 1.0 - (mean_var[:, None] - acov.mean(axis=1)) / var_plus[:, None]
    rho[:, 0] = 1.0
    kmax = max((n - 3) // 2, 0)  # the last pair Geyer's loop can reach
    evens = 2 * np.arange(kmax + 1)
    pairs = rho[:, evens] + rho[:, evens + 1]  # P_0 .. P_kmax
    nonpos = pairs <= 0.0
    first = np.where(nonpos.any(axis=1), nonpos.argmax(axis=1), pairs.shape[1])
    last = np.minimum(first, kmax)  # L: the last pair computed
    kept = np.arange(pairs.shape[1])[None, :] < last[:, None]  # pairs 0 .. L-1
    monotone = np.minimum.accumulate(np.where(kept, pairs, np.inf), axis=1)
    body = np.where(kept, monotone, 0.0).sum(axis=1)
    rows = np.arange(p)
    even = rho[rows, 2 * last]
    p_last = pairs[rows, last]
    end = np.where(last == 0, 1.0, np.where((p_last >= 0) | (even > 0), even, 0.0))
    tau = np.maximum(-1.0 + 2.0 * body + end, 1.0 / np.log10(m * n))
    ess = m * n / tau
    bad = np.isnan(np.where(kept, pairs, 0.0)).any(axis=1) | np.isnan(end) | \
        np.isnan(rho[:, 1])
    ess[bad] = np.nan
    flat = x.reshape(p, -1)
    constant = (flat.max(axis=1) - flat.min(axis=1)) < np.finfo(float).resolution
    ess[constant] = m * n
    return ess


def _rhat(y: np.ndarray) -> np.ndarray:
    """Potential scale reduction of each parameter's chains (no splitting here)."""
    n = y.shape[2]
    between = n * np.var(y.mean(axis=2), axis=1, ddof=1)
    within = np.var(y, axis=2, ddof=1).mean(axis=1)
    with np.errstate(divide="ignore", invalid="ignore"):
        return np.sqrt((between / within + n - 1) / n)


def _chunk_table(x: np.ndarray) -> np.ndarray:
    """R-hat, bulk ESS and tail ESS of a chunk of valid parameters (no NaN)."""
    split = _split(x)
    z_split = _z_scale(split)  # shared by bulk ESS and bulk R-hat
    bulk = _ess(z_split)
    flat = x.reshape(x.shape[0], -1)
    tails = []
    for prob in (0.05, 0.95):
        q = np.quantile(flat, prob, axis=1)
        tails.append(_ess(_split((x <= q[:, None, None]).astype(float))))
    tail = np.minimum(*tails)
    if x.shape[1] < 2:
        rhat = np.full(x.shape[0], np.nan)
    else:
        folded = np.abs(split - np.median(split.reshape(split.shape[0], -1), axis=1)[:, None, None])
        rhat = np.maximum(_rhat(z_split), _rhat(_z_scale(folded)))
    return np.column_stack([rhat, bulk, tail])


def rhat_ess(draws: np.ndarray) -> np.ndarray:
    """R-hat, bulk ESS and tail ESS (columns) of each parameter (rows) of ``draws``, shape
    (parameters, chains, draws). A parameter with a NaN draw, or fewer than 4 draws per
    chain, gets NaN; R-hat is NaN with one chain.

    Example
    -------
    >>> rhat_ess(np.zeros((1, 2, 3)))    # too few draws
    array([[nan, nan, nan]])
    """
    x = np.asarray(draws, dtype=float)
    out = np.full((x.shape[0], 3), np.nan)
    if x.ndim != 3 or x.shape[2] < 4 or x.shape[0] == 0:
        return out
    valid = np.flatnonzero(~np.isnan(x).any(axis=(1, 2)))
    for start in range(0, valid.size, CHUNK):
        idx = valid[start:start + CHUNK]
        out[idx] = _chunk_table(x[idx])
    return out


def _label(name: str, dims: tuple[str, ...], coords: dict, index: tuple[int, ...]) -> str:
    if not dims:
        return name
    return f"{name}[{', '.join(str(coords[d][i]) for d, i in zip(dims, index, strict=True))}]"


def diagnostics_table(posterior, var_names: list[str]) -> pd.DataFrame:
    """R-hat, bulk ESS and tail ESS of every scalar in ``var_names`` of an ArviZ posterior
    (an xarray Dataset with chain and draw dimensions), one row each, labelled as ArviZ's
    summary labels them (``name[level]``); columns ``r_hat``, ``ess_bulk``, ``ess_tail``.

    Example
    -------
    >>> import arviz as az
    >>> post = az.from_dict(posterior={"a": np.random.default_rng(1).normal(size=(2, 100))})
    >>> list(diagnostics_table(post.posterior, ["a"]).columns)
    ['r_hat', 'ess_bulk', 'ess_tail']
    """
    labels: list[str] = []
    blocks: list[np.ndarray] = []
    for name in var_names:
        da = posterior[name]
        extra = tuple(d for d in da.dims if d not in ("chain", "draw"))
        da = da.transpose("chain", "draw", *extra)
        values = np.asarray(da.values, dtype=float)
        shape = values.shape[2:]
        blocks.append(values.reshape(values.shape[0], values.shape[1], -1).transpose(2, 0, 1))
        coords = {d: np.asarray(da[d].values) for d in extra}
        labels.extend(_label(name, extra, coords, ix) for ix in np.ndindex(*shape))
    table = rhat_ess(np.concatenate(blocks, axis=0)) if blocks else np.zeros((0, 3))
    return pd.DataFrame(table, index=labels, columns=["r_hat", "ess_bulk", "ess_tail"])


__all__ = ["CHUNK", "diagnostics_table", "rhat_ess"]
