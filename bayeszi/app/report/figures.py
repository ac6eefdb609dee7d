"""Figures the report draws from the core results: the data's counts, coefficient intervals
on the rate-ratio and odds-ratio scale, and group effects.

The figures are plain :class:`matplotlib.figure.Figure` objects (no pyplot state), so they
can be made in any thread or backend. The checks' figures come from
:mod:`bayeszi.plots.checkplots`.

Example
-------
>>> import numpy as np
>>> fig = count_histogram(np.array([0, 0, 0, 1, 2, 5]), "crayfish")
>>> len(fig.axes)
1
"""

from __future__ import annotations

import numpy as np
import pandas as pd
from matplotlib.figure import Figure
from matplotlib.ticker import FuncFormatter, LogLocator

_BLUE = "#2b6a99"
_ORANGE = "#c77700"
_GREY = "#6b7785"


def _plain_log_axis(ax) -> None:
    """Log-scaled x axis with ticks written as plain numbers (0.5, 1, 2)."""
    ax.set_xscale("log")
    ax.xaxis.set_major_locator(LogLocator(base=10, subs=(1.0, 2.0, 5.0)))
    ax.xaxis.set_minor_formatter(FuncFormatter(lambda v, _: ""))
    ax.xaxis.set_major_formatter(FuncFormatter(lambda v, _: f"{v:g}"))


def count_histogram(y: np.ndarray, response: str) -> Figure:
    """Bar chart of how many records hold each count (zeros highlighted)."""
    y = np.asarray(y, dtype=np.int64)
    top = int(max(1, np.ceil(np.quantile(y, 0.99))))
    freq = np.bincount(np.minimum(y, top + 1), minlength=top + 2)
    fig = Figure(figsize=(7.0, 3.2))
    ax = fig.add_subplot()
    x = np.arange(top + 2)
    colors = [_ORANGE] + [_BLUE] * (top + 1)
    ax.bar(x, freq, color=colors, width=0.85)
    ax.set_xticks(x[:: max(1, (top + 2) // 12)])
    labels = [str(v) for v in x[:: max(1, (top + 2) // 12)]]
    if labels and x[:: max(1, (top + 2) // 12)][-1] == top + 1:
        labels[-1] = f"{top + 1}+"
    ax.set_xticklabels(labels)
    ax.set_xlabel(f"{response} per record (last bar: {top + 1} or more)")
    ax.set_ylabel("records")
    share = float(np.mean(y == 0))
    ax.set_title(f"Observed counts: {100 * share:.1f}% of {y.size} records are zero")
    ax.spines[["top", "right"]].set_visible(False)
    fig.tight_layout()
    return fig


def ratio_intervals(table: pd.DataFrame, title: str, zeros_label: str) -> Figure:
    """Rate ratios (counts) and odds ratios (zeros) with their intervals, log scale.

    ``table`` is :meth:`FittedModel.coefficients` output; intercepts and rows without an exp
    scale (sds, dispersion) are left out.
    """
    rows = table.reset_index()
    rows = rows[(rows["exp scale"] != "") & (rows["term"] != "Intercept")]
    lo_col, hi_col = [c for c in rows.columns if c.startswith("exp ") and c.endswith("%")][:2]
    parts = [p for p in ("counts", "zeros") if (rows["part"] == p).any()]
    fig = Figure(figsize=(7.0, 0.9 + 0.42 * max(1, len(rows))))
    if not parts:
        ax = fig.add_subplot()
        ax.text(0.5, 0.5, "no terms besides the intercepts", ha="center", va="center")
        ax.set_axis_off()
        return fig
    heights = [max(1, int((rows["part"] == p).sum())) for p in parts]
    axes = fig.subplots(len(parts), 1, gridspec_kw={"height_ratios": heights}, squeeze=False)
    for ax, part in zip(axes[:, 0], parts, strict=True):
        sub = rows[rows["part"] == part].iloc[::-1]
        ypos = np.arange(len(sub))
        med = sub["exp(mean)"].to_numpy()
        lo, hi = sub[lo_col].to_numpy(), sub[hi_col].to_numpy()
        color = _BLUE if part == "counts" else _ORANGE
        ax.hlines(ypos, lo, hi, color=color, lw=2.2)
        ax.plot(med, ypos, "o", color=color)
        ax.axvline(1.0, color=_GREY, lw=1, ls="--")
        _plain_log_axis(ax)
        ax.set_yticks(ypos)
        ax.set_yticklabels(list(sub["term"]))  # the readable labels of the table
        what = "rate ratio (counts part)" if part == "counts" else \
            f"odds ratio of {zeros_label} (zeros part)"
        ax.set_xlabel(what)
        ax.spines[["top", "right"]].set_visible(False)
    axes[0, 0].set_title(title)
    fig.tight_layout()
    return fig


def group_effect_intervals(table: pd.DataFrame, group: str, title: str) -> Figure:
    """Each level's intercept effect (exp scale) with its interval, per part, sorted.

    ``table`` is :func:`bayeszi.answers.groups.group_effects` output for one grouping column.
    """
    rows = table.reset_index()
    rows = rows[(rows["group"] == group) & (rows["effect"] == "intercept")]
    parts = list(dict.fromkeys(rows["part"]))
    lo_col, hi_col = [c for c in rows.columns if c.startswith("exp ") and c.endswith("%")][:2]
    n_levels = int(rows["level"].nunique())
    fig = Figure(figsize=(3.6 * len(parts) + 0.8, 0.8 + 0.17 * n_levels))
    axes = fig.subplots(1, len(parts), squeeze=False)
    for ax, part in zip(axes[0], parts, strict=True):
        sub = rows[rows["part"] == part].sort_values("mean")
        ypos = np.arange(len(sub))
        color = _BLUE if part == "counts" else _ORANGE
        ax.hlines(ypos, sub[lo_col], sub[hi_col], color=color, lw=1.4)
        ax.plot(sub["exp(mean)"], ypos, "o", color=color, ms=3)
        ax.axvline(1.0, color=_GREY, lw=1, ls="--")
        _plain_log_axis(ax)
        ax.set_yticks(ypos)
        ax.set_yticklabels(sub["level"], fontsize=7)
        ax.set_xlabel("rate ratio to a typical level" if part == "counts"
                      else "odds ratio to a typical level")
        ax.set_title(f"{part} part", fontsize=10)
        ax.spines[["top", "right"]].set_visible(False)
    fig.suptitle(title, fontsize=11)
    fig.tight_layout()
    return fig


def scenario_curve(table: pd.DataFrame, column: str, value: str, lo: str, hi: str,
                   ylabel: str, title: str) -> Figure:
    """A prediction across the values of one varied column, per model, with its interval."""
    fig = Figure(figsize=(6.4, 3.4))
    ax = fig.add_subplot()
    palette = [_BLUE, _ORANGE, "#4d8c57", "#8a4f9e", _GREY]
    numeric = pd.api.types.is_numeric_dtype(table[column])
    for i, (model, sub) in enumerate(table.groupby("model", sort=False)):
        c = palette[i % len(palette)]
        x = sub[column].to_numpy() if numeric else np.arange(len(sub))
        ax.plot(x, sub[value], "o-", color=c, label=str(model))
        ax.fill_between(x, sub[lo], sub[hi], color=c, alpha=0.18, lw=0)
        if not numeric:
            ax.set_xticks(x)
            ax.set_xticklabels(sub[column].astype(str))
    ax.set_xlabel(column)
    ax.set_ylabel(ylabel)
    ax.set_title(title, fontsize=11)
    ax.legend(frameon=False, fontsize=8)
    ax.spines[["top", "right"]].set_visible(False)
    fig.tight_layout()
    return fig


def zero_sources_bars(table: pd.DataFrame, group: str, title: str) -> Figure:
    """Observed zeros per level, split into expected extra zeros and ordinary zeros.

    ``table`` is :func:`bayeszi.answers.checks.zero_sources` output with ``by`` set (one row per
    level, columns ``observed zeros`` and ``expected extra zeros``).
    """
    rows = table[table["group"] == group].sort_values("expected extra zeros")
    fig = Figure(figsize=(7.0, 0.9 + 0.17 * max(4, len(rows))))
    ax = fig.add_subplot()
    ypos = np.arange(len(rows))
    extra = rows["expected extra zeros"].to_numpy()
    ordinary = np.clip(rows["observed zeros"].to_numpy() - extra, 0, None)
    ax.barh(ypos, extra, color=_ORANGE, label="expected extra zeros (zeros part)")
    ax.barh(ypos, ordinary, left=extra, color=_BLUE, alpha=0.55,
            label="ordinary zeros (count process)")
    ax.set_yticks(ypos)
    ax.set_yticklabels(rows["level"].astype(str), fontsize=7)
    ax.set_xlabel("observed zeros")
    ax.set_title(title, fontsize=10)
    ax.legend(frameon=False, fontsize=8, loc="lower right")
    ax.spines[["top", "right"]].set_visible(False)
    fig.tight_layout()
    return fig
