"""Figures for the posterior predictive checks of :mod:`bayeszi.answers.checks`.

Each function takes the table a check returned and draws it as a matplotlib
:class:`~matplotlib.figure.Figure` (built without pyplot, so no global figure state is
touched and nothing is shown unless you ask). Every figure says in its subtitle what each
part of the model describes, e.g. "zeros part models P(extra zero)".

Example
-------
>>> from bayeszi.answers import checks, checkplots                          # doctest: +SKIP
>>> fig = checkplots.rootogram_figure(checks.count_frequencies(m))  # doctest: +SKIP
>>> fig.savefig("rootogram.png", dpi=150)                           # doctest: +SKIP
"""

from __future__ import annotations

from typing import Any

import numpy as np
import pandas as pd
from matplotlib.axes import Axes
from matplotlib.figure import Figure

from bayeszi.answers.checks import model_label
from bayeszi.answers.residual_checks import binned_residuals, pit_ecdf, residual_predictor
from bayeszi.base import names, options
from bayeszi.base.errors import BayesziError

__all__ = [
    "residual_figure",
    "rootogram_figure",
    "statistics_figure",
    "zero_check_figure",
]

# Our palette: deep teal for what the model expects, sand for what was observed, brick and
# slate for "more" and "fewer" than expected.
EXPECTED = "#1f6f6b"
EXPECTED_BAND = "#9ccfc9"
OBSERVED = "#d8b27a"
OBSERVED_EDGE = "#7a5a2e"
MORE = "#b5472f"
FEWER = "#3d5a80"
NEUTRAL = "#555555"
#: most levels drawn in the per-group panel of the zero check
MAX_LEVELS_SHOWN = 40


def _new_figure(width: float, height: float) -> Figure:
    return Figure(figsize=(width, height), layout="constrained")


def _subtitle(fig: Figure, family: str | None, extra: str = "") -> None:
    text = model_label(family) if family else ""
    if extra:
        text = f"{text}\n{extra}" if text else extra
    if text:
        fig.suptitle(text, x=0.01, ha="left", fontsize=8, color=NEUTRAL)


# =============================================================================================
# Rootogram
# =============================================================================================


def rootogram_figure(table: pd.DataFrame, ax: Axes | None = None) -> Figure:
    """Hanging rootogram (Tukey 1977, Exploratory Data Analysis) of a
    :func:`~bayeszi.answers.checks.count_frequencies` table.

    On the square-root scale, a teal step outline gives sqrt(expected) over each count; from
    it hangs a sand bar of height sqrt(observed), so the bar ends at
    sqrt(expected) - sqrt(observed). A slate tick at each count's centre spans where the bar
    may end when the data are like the model's replicated data sets: from
    sqrt(expected) - sqrt(replicated upper) to sqrt(expected) - sqrt(replicated lower). A bar
    ending below its tick means more records with that count than the model produces, above
    it fewer. The zero bin is hatched, the tail bin labelled "K+1+". Pass ``ax`` to draw
    into an existing Axes (its figure is returned).

    Example
    -------
    >>> fig = rootogram_figure(count_frequencies(m))                # doctest: +SKIP
    """
    interval = table.attrs.get("interval", 0.9)
    lo_name, hi_name = _interval_names(interval)
    family = table.attrs.get("family")
    response = table.attrs.get("response", "y")
    if ax is None:
        fig = _new_figure(7.5, 4.6)
        ax = fig.add_subplot(1, 1, 1)
        kind = names.zero_mechanism(family) if family else None
        source = "combine both parts" if kind else "come from the counts part"
        _subtitle(fig, family, f"expected frequencies {source}; bars hang from the "
                               "expected value")
    else:
        fig = ax.figure
    k = np.arange(len(table))
    top = table["sqrt expected"].to_numpy()
    ax.bar(k, table["sqrt observed"].to_numpy(), bottom=table["hanging bottom"].to_numpy(),
           width=0.8, color=OBSERVED, edgecolor=OBSERVED_EDGE, linewidth=0.6,
           label="observed records (bar hangs from the expected value)", zorder=2)
    if len(k):
        ax.patches[0].set_hatch("///")
        ax.stairs(top, np.arange(len(k) + 1) - 0.5, baseline=None, color=EXPECTED,
                  linewidth=1.8, zorder=4, label="expected number (posterior mean)")
    _replicated_ticks(ax, table, interval, lo_name, hi_name)
    ax.axhline(0.0, color="black", linewidth=0.9, linestyle=(0, (4, 2)), zorder=5)
    labels = list(table.index.astype(str))
    step = max(1, int(np.ceil(len(k) / 20)))
    shown = [i for i in range(len(k)) if i % step == 0 or i == len(k) - 1]
    ax.set_xticks(shown, [labels[i] for i in shown])
    ax.set_xlabel(f"count of {response} (last bin: {labels[-1]} and more)"
                  if labels else f"count of {response}")
    ax.set_ylabel("sqrt(number of records)")
    ax.set_title("Hanging rootogram: observed counts against the model's expectation",
                 fontsize=10, loc="left")
    ax.legend(fontsize=7.5, frameon=False, loc="upper right")
    ax.grid(axis="y", color="#dddddd", linewidth=0.5, zorder=0)
    ax.set_axisbelow(True)
    return fig


def _replicated_ticks(ax: Axes, table: pd.DataFrame, interval: float, lo_name: str,
                      hi_name: str) -> None:
    """At each count's centre, where a hanging bar ends in ``interval`` of replicated data."""
    lo_col, hi_col = f"replicated {lo_name}", f"replicated {hi_name}"
    if lo_col not in table.columns or not len(table):
        return
    top = table["sqrt expected"].to_numpy()
    low = top - np.sqrt(table[hi_col].to_numpy())
    high = top - np.sqrt(table[lo_col].to_numpy())
    k = np.arange(len(table))
    ax.vlines(k, low, high, color=FEWER, linewidth=2.2, zorder=6,
              label=f"where the bar ends in {interval:.0%} of replicated data sets")
    ax.plot(np.repeat(k, 2), np.concatenate([low, high]).reshape(2, -1).T.ravel(),
            linestyle="none", marker="_", markersize=7, color=FEWER, zorder=6)


def _interval_names(interval: float) -> tuple[str, str]:
    return options.interval_bounds(interval).names


# =============================================================================================
# Replicated statistics
# =============================================================================================

_STAT_TEXT = {
    "zero share": "share of zeros",
    "variance / mean": "variance / mean",
    "maximum": "largest count",
    "mean": "mean count",
    "variance": "variance",
}


def _tail_text(values: np.ndarray, observed: float) -> str:
    tail = float(np.mean(values > observed) + 0.5 * np.mean(values == observed))
    if tail == 0.0:
        return f"tail prob < {1 / values.size:.2g}"
    if tail == 1.0:
        return f"tail prob > {1 - 1 / values.size:.4g}"
    return f"tail prob {tail:.3f}"


def _histogram_panel(ax: Axes, values: np.ndarray, observed: float, title: str,
                     step: float | None = None) -> None:
    """Histogram of replicated values; ``step`` is the spacing of a discrete statistic."""
    values = np.asarray(values, dtype=np.float64)
    values = values[np.isfinite(values)]
    if values.size:
        if step:
            lo, hi = float(values.min()), float(values.max())
            width = step * max(1.0, np.ceil((hi - lo) / step / 40))
            bins = np.arange(lo - step / 2, hi + width, width)
        else:
            bins = 30
        ax.hist(values, bins=bins, color=EXPECTED_BAND, edgecolor=EXPECTED, linewidth=0.5,
                label="replicated data sets")
        ax.text(0.98, 0.95, _tail_text(values, observed), transform=ax.transAxes, ha="right",
                va="top", fontsize=8,
                bbox={"facecolor": "white", "edgecolor": "none", "alpha": 0.85})
    ax.axvline(observed, color=MORE, linewidth=2.0, label="observed")
    ax.set_title(title, fontsize=9, loc="left")
    ax.set_ylabel("replicated data sets")


def statistics_figure(reps: pd.DataFrame,
                      statistics: tuple[str, ...] = ("zero share", "variance / mean",
                                                     "maximum")) -> Figure:
    """Histograms of statistics over replicated data sets, with the observed value marked.

    ``reps`` is the table of :func:`~bayeszi.answers.checks.replicated_statistics`. The tail
    probability printed in each panel is P(replicated > observed) + P(equal)/2.

    Example
    -------
    >>> fig = statistics_figure(replicated_statistics(m))            # doctest: +SKIP
    """
    observed = reps.attrs["observed"]
    n = int(reps.attrs.get("records", 0))
    fig = _new_figure(3.3 * len(statistics), 3.4)
    _subtitle(fig, reps.attrs.get("family"),
              f"{len(reps)} data sets replicated from the posterior (one per draw)")
    for i, name in enumerate(statistics):
        ax = fig.add_subplot(1, len(statistics), i + 1)
        step = {"maximum": 1.0, "zero share": 1.0 / n if n else None}.get(name)
        _histogram_panel(ax, reps[name].to_numpy(), observed[name],
                         _STAT_TEXT.get(name, name), step=step)
        ax.set_xlabel(_STAT_TEXT.get(name, name))
    handles, labels = fig.axes[0].get_legend_handles_labels()
    fig.legend(handles, labels, loc="outside lower center", ncols=2, fontsize=7.5,
               frameon=False)
    return fig


# =============================================================================================
# Zero check
# =============================================================================================


def _zeros_origin(family: str | None) -> str:
    kind = names.zero_mechanism(family) if family else None
    origin = names.zeros_origin(family or None)
    if kind == "inflation":
        return f"{origin}; the check compares all zeros with the model"
    if kind == "hurdle":
        return origin
    return f"{origin} (no zeros part)"


def zero_check_figure(table: pd.DataFrame, group: str | None = None) -> Figure:
    """The zero check drawn: overall replicated zero share, and the levels of one group.

    ``table`` is a :func:`~bayeszi.answers.checks.zero_check` table. The left panel is the histogram
    of the zero share over replicated data sets with the observed share marked; the right
    panel (when the table has group rows) shows, per level of ``group`` (default: the first
    one in the table), the replicated interval (grey), the expected share (teal) and the
    observed share, coloured brick when there are more zeros than predicted and slate when
    fewer. At most 40 levels are drawn: the most extreme by tail probability.

    Example
    -------
    >>> fig = zero_check_figure(zero_check(m, by="site"))           # doctest: +SKIP
    """
    groups = [g for g in dict.fromkeys(table["group"]) if g != "all records"]
    if group is None and groups:
        group = groups[0]
    overall = table.iloc[0]
    two = group is not None
    fig = _new_figure(10.0 if two else 5.0, 4.8 if two else 3.6)
    _subtitle(fig, table.attrs.get("family"), _zeros_origin(table.attrs.get("family")))
    ax0 = fig.add_subplot(1, 2 if two else 1, 1)
    reps = table.attrs.get("replicated_share")
    if reps is not None:
        _histogram_panel(ax0, np.asarray(reps), float(overall["observed share"]),
                         "share of zeros, all records", step=1.0 / int(overall["records"]))
    ax0.set_xlabel("share of records with count 0")
    ax0.legend(fontsize=7, frameon=False, loc="upper center", bbox_to_anchor=(0.5, -0.12),
               ncols=2)
    if not two:
        return fig
    if group not in groups:
        raise BayesziError(f"group {group!r} is not in the zero-check table; it has {groups}")
    _levels_panel(fig.add_subplot(1, 2, 2), table, group)
    return fig


def _levels_panel(ax: Axes, table: pd.DataFrame, group: str) -> None:
    """Per level of ``group`` (at most :data:`MAX_LEVELS_SHOWN`, the most extreme): the
    replicated interval, the expected share and the observed share."""
    interval = table.attrs.get("interval", 0.9)
    lo_name, hi_name = _interval_names(interval)
    lo_col, hi_col = f"replicated {lo_name}", f"replicated {hi_name}"
    part = table[table["group"] == group].copy()
    n_levels = len(part)
    part = part.assign(_extreme=np.abs(part["tail prob"] - 0.5))
    part = part.nlargest(MAX_LEVELS_SHOWN, "_extreme") if n_levels > MAX_LEVELS_SHOWN else part
    part = part.sort_values("observed share")
    yy = np.arange(len(part))
    ax.hlines(yy, part[lo_col], part[hi_col], color="#b8b8b8", linewidth=3.0,
              label=f"{interval:.0%} of replicated data sets")
    ax.plot(part["expected share"], yy, "|", color=EXPECTED, markersize=10, mew=2,
            label="expected share (posterior mean)")
    colours = [MORE if v.startswith("more") else FEWER if v.startswith("fewer") else NEUTRAL
               for v in part["verdict"]]
    ax.scatter(part["observed share"], yy, c=colours, s=22, zorder=3,
               label="observed share (brick: more zeros, slate: fewer)")
    ax.set_yticks(yy, part["level"].astype(str), fontsize=7 if len(part) > 20 else 8)
    ax.set_xlabel("share of records with count 0")
    shown = "" if n_levels <= MAX_LEVELS_SHOWN else f" ({len(part)} most extreme of {n_levels})"
    ax.set_title(f"share of zeros per {group}{shown}", fontsize=9, loc="left")
    ax.legend(fontsize=7, frameon=False, loc="upper center", bbox_to_anchor=(0.5, -0.12),
              ncols=2)
    ax.grid(axis="x", color="#e5e5e5", linewidth=0.5)


# =============================================================================================
# Residuals
# =============================================================================================


def residual_figure(res: pd.DataFrame, against: Any = None, data: pd.DataFrame | None = None,
                    bins: int | None = None) -> Figure:
    """Randomized quantile residuals drawn two ways: their PIT values against the uniform,
    and their mean in bins of a predictor.

    ``res`` is a :func:`~bayeszi.answers.checks.residuals` table. Left: the ECDF of the PIT
    values minus u, with the simultaneous 95% band of
    :func:`~bayeszi.answers.residual_checks.uniform_ecdf_band` (the whole curve stays inside
    it for 95% of uniform samples of that size); a curve bowing up means too many small PIT
    values (counts below what the model expects), a curve bowing down too many large ones.
    Right: the mean residual in bins of ``against`` (a column of ``data``, the fitted data;
    default: the log of the expected count), each with +-2 standard errors
    (:func:`~bayeszi.answers.residual_checks.binned_residuals`), and a line at 0. The figure
    carries no test statistic: :func:`~bayeszi.answers.residual_checks.residual_statistics`
    gives the numbers.

    Example
    -------
    >>> fig = residual_figure(residuals(m), against="depth", data=m.data)   # doctest: +SKIP
    """
    predictor = residual_predictor(res, against, data)
    binned = binned_residuals(res["residual"].to_numpy(), predictor, bins)
    method = res.attrs.get("method", "posterior")
    how = ("posterior predictive CDF" if method == "posterior"
           else "leave-one-out predictive CDF (PSIS weights)")
    fig = _new_figure(10.0, 4.3)
    _subtitle(fig, res.attrs.get("family"),
              f"randomized quantile residuals (Dunn & Smyth 1996) from the {how}; "
              f"one uniform draw per record (seed {res.attrs.get('seed')})")
    _pit_panel(fig.add_subplot(1, 2, 1), pit_ecdf(res["PIT"].to_numpy()))
    _binned_panel(fig.add_subplot(1, 2, 2), binned)
    return fig


def _pit_panel(ax: Axes, ecdf: pd.DataFrame) -> None:
    """ECDF(u) - u of the PIT values against the simultaneous band for uniform values."""
    u = ecdf["u"].to_numpy()
    level = ecdf.attrs.get("level", 0.95)
    ax.fill_between(u, ecdf["lower - u"], ecdf["upper - u"], step="mid", color=EXPECTED_BAND,
                    alpha=0.45, linewidth=0, label=f"{level:.0%} band for uniform values")
    for col in ("lower - u", "upper - u"):
        ax.step(u, ecdf[col], where="mid", color=EXPECTED, linewidth=0.8)
    ax.step(u, ecdf["ECDF - u"], where="mid", color=OBSERVED_EDGE, linewidth=1.6,
            label="share of PIT values <= u, minus u")
    out = ecdf["outside"].to_numpy()
    if out.any():
        ax.plot(u[out], ecdf["ECDF - u"].to_numpy()[out], "o", color=MORE, markersize=3.5,
                label="outside the band")
    ax.axhline(0.0, color=NEUTRAL, linewidth=0.8)
    ax.set_xlim(0, 1)
    ax.set_xlabel("u (PIT value)")
    ax.set_ylabel("ECDF(u) - u")
    ax.set_title(f"PIT values of {ecdf.attrs.get('records', 0)} records\nagainst the uniform",
                 fontsize=9, loc="left")
    ax.legend(fontsize=7, frameon=False, loc="upper center", bbox_to_anchor=(0.5, -0.14),
              ncols=2)


def _binned_panel(ax: Axes, binned: pd.DataFrame) -> None:
    """Mean residual per bin with +-2 standard errors, and the zero line."""
    levels = binned.attrs.get("kind") == "levels"
    x = np.arange(len(binned)) if levels else binned["predictor mean"].to_numpy()
    mean = binned["mean residual"].to_numpy()
    ax.axhline(0.0, color=NEUTRAL, linewidth=0.9)
    ax.vlines(x, binned["mean - 2 se"], binned["mean + 2 se"], color=EXPECTED, linewidth=2.0,
              label="+-2 standard errors")
    ax.plot(x, mean, "s", color=OBSERVED_EDGE, markersize=4.5, label="mean residual in the bin")
    name = binned.attrs.get("predictor", "")
    if levels:
        ax.set_xticks(x, binned["bin"], fontsize=7 if len(x) > 12 else 8,
                      rotation=45 if len(x) > 6 else 0)
    left = binned.attrs.get("left out", 0)
    note = f"; {left} without a value left out" if left else ""
    if binned.attrs.get("kind") == "equal-count bins":
        what = f"{len(binned)} bins of about {int(binned['records'].median())} records"
    else:
        what = "one bin per value"
    ax.set_xlabel(name)
    ax.set_ylabel("mean residual")
    ax.set_title(f"mean residual by {name}\n{what}{note}", fontsize=9, loc="left")
    ax.legend(fontsize=7, frameon=False, loc="upper center", bbox_to_anchor=(0.5, -0.14),
              ncols=2)
    ax.grid(axis="y", color="#e5e5e5", linewidth=0.5)
