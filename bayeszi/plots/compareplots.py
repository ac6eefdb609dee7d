"""The comparison plot: how far each model's elpd falls behind the best, and its weight.

Left panel: one row per model, best at the top; a dot at the elpd difference to the best
model, a thick bar for +-1 and a thin bar for +-2 standard errors of that difference, and a
dashed line at zero (the best model). Models whose LOO still rests on unreliable PSIS values
(Pareto k above the threshold) are drawn hollow and say how many rows; models with sampler
trouble are labelled too. Right panel: stacking weights as bars.

Example
-------
>>> table = bayeszi.rank_models(fits)                              # doctest: +SKIP
>>> fig = plot_comparison(table, path="comparison.png")        # doctest: +SKIP
"""

from __future__ import annotations

import os
import tempfile
from pathlib import Path

import matplotlib.pyplot as plt
import numpy as np
import pandas as pd
from matplotlib.axes import Axes
from matplotlib.figure import Figure

from bayeszi.answers import comparison as C
from bayeszi.base.errors import BayesziError

#: Our colours: slate for models that hold up, amber for caution.
INK = "#2f4858"
CAUTION = "#d98324"
BAND = "#9db4c0"

_NEEDED = (C.BEHIND, C.BEHIND_SE, C.WEIGHT, C.K_HIGH, C.EXACT_ROWS, C.SAMPLER, "family")


def _unresolved(row: pd.Series) -> int:
    return max(int(row[C.K_HIGH]) - int(row[C.EXACT_ROWS]), 0)


def plot_comparison(table: pd.DataFrame, title: str | None = None,
                    path: str | os.PathLike[str] | None = None, dpi: int = 150) -> Figure:
    """Draw the table returned by :func:`bayeszi.rank_models`; optionally write it to ``path``.

    The file (format from its extension, e.g. ``.png`` or ``.pdf``) is written under a
    temporary name and renamed, so a failed write leaves no half-written file.

    Example
    -------
    >>> fig = plot_comparison(bayeszi.rank_models(fits))    # doctest: +SKIP
    """
    _check_table(table)
    t = table.sort_values(C.BEHIND, ascending=False)
    n = len(t)
    ypos = np.arange(n)[::-1]
    fig, (ax, axw) = plt.subplots(1, 2, figsize=(8.5, 1.3 + 0.5 * n), sharey=True,
                                  layout="constrained",
                                  gridspec_kw={"width_ratios": [3.2, 1.0]})
    _elpd_panel(ax, t, ypos, table.attrs.get("k_limit", C.K_LIMIT))
    _weight_panel(axw, t, ypos)
    head = title or (f"Predictive accuracy by PSIS-LOO ({table.attrs.get('n_rows', '?')} rows;"
                     " higher is better)")
    fig.suptitle(head, fontsize=10.5, color=INK, x=0.02, ha="left")
    if path is not None:
        _save(fig, Path(path), dpi)
    return fig


def _check_table(table: object) -> None:
    if not isinstance(table, pd.DataFrame):
        raise BayesziError("plot_comparison() draws the DataFrame returned by "
                           "bayeszi.rank_models()")
    missing = [c for c in _NEEDED if c not in table.columns]
    if missing:
        raise BayesziError(f"the table lacks column(s) {missing}; pass the DataFrame returned "
                           "by bayeszi.rank_models() unchanged")
    if len(table) < 2:
        raise BayesziError("plot_comparison() needs at least two models")


def _elpd_panel(ax: Axes, t: pd.DataFrame, ypos: np.ndarray, k_limit: float) -> None:
    """Per model: the elpd difference to the best with 1 and 2 se bars, and notes."""
    for yv, (_, row) in zip(ypos, t.iterrows(), strict=True):
        d, s = float(row[C.BEHIND]), float(row[C.BEHIND_SE])
        open_ = _unresolved(row) > 0
        colour = CAUTION if open_ or row[C.SAMPLER] != "ok" else INK
        ax.plot([d - 2 * s, d + 2 * s], [yv, yv], color=BAND, lw=1.5, solid_capstyle="butt")
        ax.plot([d - s, d + s], [yv, yv], color=colour, lw=5, solid_capstyle="butt", alpha=0.8)
        ax.plot([d], [yv], marker="o", ms=7, color=colour,
                markerfacecolor="white" if open_ else colour, markeredgewidth=1.8, zorder=3)
        notes = []
        if open_:
            notes.append(f"k > {k_limit:g}: {_unresolved(row)} rows")
        if row[C.SAMPLER] != "ok":
            notes.append(f"sampler: {row[C.SAMPLER]}")
        if int(row[C.EXACT_ROWS]):
            notes.append(f"{int(row[C.EXACT_ROWS])} exact")
        if notes:
            ax.annotate("  " + "; ".join(notes), (d + 2 * s, yv), xytext=(4, 0),
                        textcoords="offset points", va="center", fontsize=7.5, color=colour)
    ax.axvline(0.0, color=INK, lw=0.8, ls="--")
    ax.set_yticks(ypos)
    ax.set_yticklabels([str(i) for i in t.index])
    ax.set_xlabel("LOO log score behind the best model\n(bars: 1 and 2 se of the difference)")
    lo = float(np.min(t[C.BEHIND] - 2 * t[C.BEHIND_SE]))
    span = max(abs(lo), 1.0)
    ax.set_xlim(lo - 0.05 * span, 0.3 * span)
    for side in ("top", "right"):
        ax.spines[side].set_visible(False)
    ax.grid(axis="x", color="#e6e6e6", lw=0.6)
    ax.set_axisbelow(True)


def _weight_panel(axw: Axes, t: pd.DataFrame, ypos: np.ndarray) -> None:
    """Stacking weights as horizontal bars, each with its value."""
    w = t[C.WEIGHT].to_numpy(dtype=float)
    axw.barh(ypos, w, height=0.5, color=INK, alpha=0.85)
    for yv, wv in zip(ypos, w, strict=True):
        inside = wv > 0.6
        axw.text(wv - 0.03 if inside else wv + 0.03, yv, f"{wv:.2f}", va="center",
                 ha="right" if inside else "left", fontsize=8,
                 color="white" if inside else INK)
    axw.set_xlim(0, 1.05)
    axw.set_xlabel("stacking weight")
    for side in ("top", "right", "left"):
        axw.spines[side].set_visible(False)
    axw.tick_params(left=False)


def _save(fig: Figure, path: Path, dpi: int) -> None:
    if not path.parent.exists():
        raise BayesziError(f"folder {str(path.parent)!r} does not exist; create it first")
    fmt = path.suffix.lstrip(".").lower() or "png"
    fd, tmp = tempfile.mkstemp(prefix=".tmp-", suffix=path.suffix, dir=path.parent)
    os.close(fd)
    try:
        fig.savefig(tmp, dpi=dpi, format=fmt)
        os.replace(tmp, path)
    except ValueError as err:
        raise BayesziError(f"cannot write a plot as {fmt!r} ({err}); use .png, .pdf or "
                           ".svg") from None
    finally:
        if os.path.exists(tmp):
            os.remove(tmp)


__all__ = ["plot_comparison"]
