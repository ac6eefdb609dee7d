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

import numpy as np
import pandas as pd
from matplotlib.axes import Axes
from matplotlib.figure import Figure
from scipy import stats

from bayeszi.answers.checks import model_label
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

    On the square-root scale, a sand bar of height sqrt(observed) hangs from the teal curve
    sqrt(expected); the teal band is the posterior interval of sqrt(expected). Where a bar
    stops above the zero line the model expects more records with that count than were
    seen; where it reaches below, fewer. The zero bin is hatched, the tail bin labelled
    "K+1+". Pass ``ax`` to draw into an existing Axes (its figure is returned).

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
                               "expected curve")
    else:
        fig = ax.figure
    k = np.arange(len(table))
    top = table["sqrt expected"].to_numpy()
    bottom = table["hanging bottom"].to_numpy()
    height = table["sqrt observed"].to_numpy()
    ax.bar(k, height, bottom=bottom, width=0.8, color=OBSERVED, edgecolor=OBSERVED_EDGE,
           linewidth=0.6, label="observed records (bar hangs from the curve)", zorder=2)
    if len(k):
        ax.patches[0].set_hatch("///")
    ax.fill_between(k, np.sqrt(table[lo_name].to_numpy()), np.sqrt(table[hi_name].to_numpy()),
                    color=EXPECTED_BAND, alpha=0.7, step=None, zorder=3,
                    label=f"{interval:.0%} posterior interval of the expected number")
    ax.plot(k, top, color=EXPECTED, marker="o", markersize=3.5, linewidth=1.6, zorder=4,
            label="expected number (posterior mean)")
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


def residual_figure(res: pd.DataFrame) -> Figure:
    """QQ plot and residual-versus-expected plot of randomized quantile residuals.

    ``res`` is a :func:`~bayeszi.answers.checks.residuals` table. Left: sorted residuals against
    standard normal quantiles, with a pointwise 95% band for n independent N(0, 1) values
    (from the Beta distribution of uniform order statistics) and the Kolmogorov-Smirnov
    p-value against N(0, 1). Right: residual against the posterior mean of E[Y] (log
    scale), zeros and positive counts in different colours, with lines at 0 and +-2.

    Example
    -------
    >>> fig = residual_figure(residuals(m))                         # doctest: +SKIP
    """
    r = res["residual"].to_numpy(dtype=np.float64)
    n = r.size
    method = res.attrs.get("method", "posterior")
    how = ("posterior predictive CDF" if method == "posterior"
           else "leave-one-out predictive CDF (PSIS weights)")
    fig = _new_figure(10.0, 4.3)
    _subtitle(fig, res.attrs.get("family"),
              f"randomized quantile residuals (Dunn & Smyth 1996) from the {how}; "
              f"one uniform draw per record (seed {res.attrs.get('seed')})")
    ax = fig.add_subplot(1, 2, 1)
    order = np.sort(r)
    i = np.arange(1, n + 1)
    theory = stats.norm.ppf((i - 0.5) / n)
    band_lo = stats.norm.ppf(stats.beta.ppf(0.025, i, n + 1 - i))
    band_hi = stats.norm.ppf(stats.beta.ppf(0.975, i, n + 1 - i))
    ax.fill_between(theory, band_lo, band_hi, color=EXPECTED_BAND, alpha=0.6,
                    label="95% pointwise band under the model")
    ax.plot(theory, order, ".", color=OBSERVED_EDGE, markersize=2.5, label="residuals")
    lim = [float(min(theory[0], order[0])), float(max(theory[-1], order[-1]))]
    ax.plot(lim, lim, color=EXPECTED, linewidth=1.0)
    p = stats.kstest(r, "norm").pvalue if n else float("nan")
    ax.text(0.03, 0.97, f"Kolmogorov-Smirnov vs N(0, 1): p = {p:.3g}", transform=ax.transAxes,
            fontsize=8, va="top")
    ax.set_xlabel("standard normal quantile")
    ax.set_ylabel("residual (sorted)")
    ax.set_title("QQ plot", fontsize=9, loc="left")
    ax.legend(fontsize=7, frameon=False, loc="lower right")

    ax2 = fig.add_subplot(1, 2, 2)
    mu = res["expected count"].to_numpy(dtype=np.float64)
    zero = res["y"].to_numpy() == 0
    ax2.scatter(mu[~zero], r[~zero], s=5, color=OBSERVED_EDGE, alpha=0.5, label="observed y > 0",
                linewidths=0)
    ax2.scatter(mu[zero], r[zero], s=5, color=FEWER, alpha=0.5, label="observed y = 0",
                linewidths=0)
    for level, style in ((0.0, "-"), (2.0, ":"), (-2.0, ":")):
        ax2.axhline(level, color=NEUTRAL, linewidth=0.8, linestyle=style)
    if np.all(mu > 0):
        ax2.set_xscale("log")
    ax2.set_xlabel("expected count, posterior mean of E[Y] (both parts)")
    ax2.set_ylabel("residual")
    ax2.set_title("residual against expected count", fontsize=9, loc="left")
    ax2.legend(fontsize=7, frameon=False, loc="lower right", markerscale=2)
    return fig
