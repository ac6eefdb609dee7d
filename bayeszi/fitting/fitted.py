"""The fitted model: spec, design state and draws, and the questions they answer.

Example
-------
>>> import bayeszi as bz                                         # doctest: +SKIP
>>> m = bz.fit(df, counts="crayfish ~ depth", family="zip")      # doctest: +SKIP
>>> m.coefficients()                                             # doctest: +SKIP
"""

from __future__ import annotations

from dataclasses import fields
from typing import Any

import numpy as np
import pandas as pd

from bayeszi.answers import checks as check_answers
from bayeszi.answers import comparison as loo_answers
from bayeszi.answers import contrast as contrast_answers
from bayeszi.answers import groups as group_answers
from bayeszi.answers import predict as predict_answers
from bayeszi.base import names, options
from bayeszi.base.renamed import refusing_renamed
from bayeszi.engine import archive
from bayeszi.engine.record import FitRecord
from bayeszi.families import get_family
from bayeszi.model.diagnostics import Diagnostics
from bayeszi.plots import checkplots


def _label(part: str, family: str, term: str) -> str:
    if part == "counts":
        return "base rate" if term == "Intercept" else "rate ratio"
    what = names.zeros_odds_label(family)
    return f"base odds of {what}" if term == "Intercept" else f"odds ratio of {what}"


class FittedModel(FitRecord):
    """A fitted bayeszi model. Build one with :func:`bayeszi.fit`; see docs/api.md.

    Its fields are those of :class:`bayeszi.engine.record.FitRecord`: ``spec``, ``design``,
    ``idata``, ``priors``, ``data`` (the used columns of the fitted data), ``sampling``
    (the sampler diagnostics) and ``timing``.
    """

    @classmethod
    def from_record(cls, record: FitRecord) -> FittedModel:
        """The fitted model of a finished record (the one way to make one).

        Example
        -------
        >>> same = bz.FittedModel.from_record(m)  # any FitRecord  # doctest: +SKIP
        >>> same.spec == m.spec and same.idata is m.idata         # doctest: +SKIP
        True
        """
        return cls(**{f.name: getattr(record, f.name) for f in fields(FitRecord)})

    # ------------------------------------------------------------------ diagnostics
    def diagnostics(self) -> Diagnostics:
        """Divergences, per-parameter R-hat/ESS (``table``) and flagged parameter names."""
        return self.sampling

    def sampler_problems(self) -> list[str]:
        """Plain-language sampler problems with what to try (empty when all is well)."""
        return self.sampling.problems()

    # ------------------------------------------------------------------ tables
    def coefficients(self, interval: float = 0.9, groups: bool = True) -> pd.DataFrame:
        """Coefficient table of both parts on the user's scale.

        Rows are labelled by part and term (its readable label, e.g. ``substrate: gravel
        (vs cobble)``; see :mod:`bayeszi.model.term_labels`); columns: posterior mean, sd, the
        central ``interval`` bounds, the exp scale (rate ratio for counts, odds ratio for
        zeros) with its bounds, R-hat, bulk and tail ESS and a flag. Group sds (and
        correlations) and the NB dispersion are listed too, without an exp scale.
        """
        iv = options.interval_bounds(interval)
        rows: list[dict] = []
        add = _RowAdder(rows, iv, self.sampling.table)
        post = self.idata.posterior
        for part, pdes in (("counts", self.design.counts), ("zeros", self.design.zeros)):
            if pdes is None:
                continue
            var = post[names.coef(part)]
            for term, label in zip(pdes.terms, pdes.labels, strict=True):
                add(part, label, var.sel({names.term_dim(part): term}).values,
                    names.summary_key(names.coef(part), label),
                    _label(part, self.spec.family, term))
        if names.DISPERSION in post:
            add("counts", "dispersion (alpha)", post[names.DISPERSION].values, names.DISPERSION,
                None)
        if groups:
            for g in self.design.groups:
                _group_rows(self, add, g.name)
        table = pd.DataFrame(rows)
        th = self.sampling.thresholds
        table["flag"] = [_flag_for(r, th) for r in table.to_dict("records")]
        return table.set_index(["part", "term"])

    def __str__(self) -> str:
        return format_fit(self)

    def __repr__(self) -> str:
        return format_fit(self)

    # ------------------------------------------------------------------ groups (groups issue)
    def group_effects(self, interval: float = 0.9, part: str | None = None,
                      group: str | None = None) -> pd.DataFrame:
        """Each group level's effect, per part, with intervals, exp scale and pooling factor.

        See :func:`bayeszi.answers.groups.group_effects` for the columns.

        Example
        -------
        >>> m.group_effects(part="counts").loc["reach"]   # doctest: +SKIP
        """
        return group_answers.group_effects(self, interval=interval, part=part, group=group)

    def pooling_summary(self, interval: float = 0.9) -> pd.DataFrame:
        """How spread out each batch of group effects is and how strongly it is pooled.

        See :func:`bayeszi.answers.groups.pooling_summary`.

        Example
        -------
        >>> m.pooling_summary()[["sd", "pooling"]]   # doctest: +SKIP
        """
        return group_answers.pooling_summary(self, interval=interval)

    # ------------------------------------------------------------------ checks
    # (posterior predictive check methods go here; the work is done in bayeszi/checks.py
    # and the figures in bayeszi/checkplots.py)
    def zero_check(self, by: str | list | pd.Series | None = None, interval: float = 0.9,
                   draws: int | None = None, seed: options.Seed = 0) -> pd.DataFrame:
        """Observed share of zeros against replicated data, overall and per group.

        ``by=None`` checks the fit's grouping columns; name a column the model uses, pass
        labels as a Series of the fitted data frame (``by=df["site"]``), or ``by=[]`` for
        the overall row only. See :func:`bayeszi.answers.checks.zero_check`.

        Example
        -------
        >>> m.zero_check(by="reach")                              # doctest: +SKIP
        """
        return check_answers.zero_check(self, by=by, interval=interval, draws=draws, seed=seed)

    def zero_check_plot(self, by: str | list | pd.Series | None = None, interval: float = 0.9,
                        draws: int | None = None, seed: options.Seed = 0):
        """Figure of :meth:`zero_check`: replicated zero share and the levels of one group.

        Example
        -------
        >>> m.zero_check_plot(by="reach").savefig("zeros.png")    # doctest: +SKIP
        """
        return checkplots.zero_check_figure(self.zero_check(by=by, interval=interval, draws=draws,
                                                 seed=seed))

    def count_frequencies(self, kmax: int | None = None, interval: float = 0.9,
                          draws: int | None = None, seed: options.Seed = 0) -> pd.DataFrame:
        """Observed against expected number of records with each count 0..K and K+1 or more.

        With the posterior interval of the expected number and the interval of the number
        in replicated data sets (seeded by ``seed``). See
        :func:`bayeszi.answers.checks.count_frequencies`.

        Example
        -------
        >>> m.count_frequencies().loc["0", ["observed", "expected"]]   # doctest: +SKIP
        """
        return check_answers.count_frequencies(self, kmax=kmax, interval=interval, draws=draws,
                                               seed=seed)

    def rootogram(self, kmax: int | None = None, interval: float = 0.9,
                  draws: int | None = None, ax: Any = None, seed: options.Seed = 0):
        """Hanging rootogram (Tukey 1977) of :meth:`count_frequencies`, as a Figure.

        Example
        -------
        >>> m.rootogram().savefig("rootogram.png")                # doctest: +SKIP
        """
        return checkplots.rootogram_figure(self.count_frequencies(kmax=kmax, interval=interval,
                                                                  draws=draws, seed=seed), ax=ax)

    def dispersion_check(self, interval: float = 0.9, draws: int | None = None,
                         seed: options.Seed = 0) -> pd.DataFrame:
        """Mean, variance and variance/mean of the data against replicated data sets.

        Example
        -------
        >>> m.dispersion_check().loc["variance / mean"]           # doctest: +SKIP
        """
        return check_answers.dispersion_check(self, interval=interval, draws=draws, seed=seed)

    def max_count_check(self, interval: float = 0.9, draws: int | None = None,
                        seed: options.Seed = 0) -> pd.DataFrame:
        """Largest observed count against the largest counts of replicated data sets.

        Example
        -------
        >>> m.max_count_check()                                   # doctest: +SKIP
        """
        return check_answers.max_count_check(self, interval=interval, draws=draws, seed=seed)

    def pearson_check(self, interval: float = 0.9, draws: int | None = None,
                      seed: options.Seed = 0) -> pd.DataFrame:
        """Pearson statistic sum (y - E[y])^2 / Var[y] of the data against replicated data.

        Also per residual degree of freedom (the classical dispersion reading). See
        :func:`bayeszi.answers.checks.pearson_check`.

        Example
        -------
        >>> m.pearson_check().loc["per residual df", "observed mean"]   # doctest: +SKIP
        """
        return check_answers.pearson_check(self, interval=interval, draws=draws, seed=seed)

    def replicated_statistics_plot(self, draws: int | None = None, seed: options.Seed = 0):
        """Figure: zero share, variance/mean and largest count of replicated data sets.

        Example
        -------
        >>> m.replicated_statistics_plot().savefig("replicated.png")   # doctest: +SKIP
        """
        stats = check_answers.replicated_statistics(self, draws=draws, seed=seed)
        return checkplots.statistics_figure(stats)

    def residuals(self, method: str = "posterior", seed: options.Seed = 0,
                  draws: int | None = None) -> pd.DataFrame:
        """Randomized quantile residuals (Dunn & Smyth 1996), one per fitted record.

        ``method="posterior"`` or ``"loo"`` (leave-one-out, PSIS). See
        :func:`bayeszi.answers.checks.residuals`.

        Example
        -------
        >>> m.residuals()["residual"].describe()                  # doctest: +SKIP
        """
        return check_answers.residuals(self, method=method, seed=seed, draws=draws)

    def residual_plots(self, method: str = "posterior", seed: options.Seed = 0,
                       draws: int | None = None, against: Any = None,
                       bins: int | None = None):
        """Figure of :meth:`residuals`: their PIT values against the uniform, and their mean
        in bins of ``against``.

        ``against`` is a column of the fitted data (or a Series of the fitted frame; default:
        the log of the expected count); ``bins`` the number of equal-count bins (default:
        about 30 records each, at most 20). See
        :func:`bayeszi.plots.checkplots.residual_figure`.

        Example
        -------
        >>> m.residual_plots(against="depth").savefig("residuals.png")   # doctest: +SKIP
        """
        res = self.residuals(method=method, seed=seed, draws=draws)
        return checkplots.residual_figure(res, against=against, data=self.data, bins=bins)

    def zero_sources(self, by: str | list | pd.Series | None = None, interval: float = 0.9,
                     draws: int | None = None) -> pd.DataFrame:
        """For each observed zero (or per level of ``by``): P(it came from the zeros part).

        Zero-inflated: the posterior probability of an extra zero; hurdle: 1 (all zeros come
        from the zeros part); Poisson/negbin: 0. See :func:`bayeszi.answers.checks.zero_sources`.

        Example
        -------
        >>> m.zero_sources(by="reach")                            # doctest: +SKIP
        """
        return check_answers.zero_sources(self, by=by, interval=interval, draws=draws)

    # ------------------------------------------------------------------ LOO (comparison.py)
    @refusing_renamed
    def loo(self, exact_refits: bool = False, k_limit: float = 0.7, max_refits: int = 20,
            refit_settings: dict[str, Any] | None = None) -> Any:
        """Expected log predictive density by PSIS-LOO, with each row's Pareto k.

        Rows with k above ``k_limit`` (0.7, Vehtari et al. 2024) are named in a warning;
        ``exact_refits=True`` refits the model without each of them (at most ``max_refits``)
        and uses the exact leave-one-out value. Returns a
        :class:`bayeszi.answers.comparison.LooEstimate` (``.elpd``, ``.se``, ``.p_loo``,
        ``.pointwise``, ``.k_counts()``). See :func:`bayeszi.answers.comparison.loo`.

        Example
        -------
        >>> est = fitted.loo()                                   # doctest: +SKIP
        >>> round(est.elpd), est.k_counts()                      # doctest: +SKIP
        """
        return loo_answers.loo(self, exact_refits=exact_refits, k_limit=k_limit,
                               max_refits=max_refits, refit_settings=refit_settings)

    # ------------------------------------------------------------------ predictions
    def predict(self, data: pd.DataFrame | None = None, what: str | list[str] = "mean",
                groups: str = "known", interval: float = 0.9, *, k: int | None = None,
                exposure: float | None = None, n_average: int = 30,
                draws: int | None = None, seed: options.Seed = None) -> pd.DataFrame:
        """Posterior mean, sd and interval of a quantity per row (see docs/predict.md).

        ``what``: mean, rate, p_zero, p_zeros_part, p_nonzero, count_part_mean, at_least
        (with ``k``), new_count, or a list. ``groups``: known, new, average or typical.

        Example
        -------
        >>> m.predict(new_df, what="rate", groups="new", exposure=1, seed=1)  # doctest: +SKIP
        """
        return predict_answers.predict(self, data, what, groups, interval, k=k, exposure=exposure,
                       n_average=n_average, draws=draws, seed=seed)

    def prediction_draws(self, data: pd.DataFrame | None = None, what: str = "mean",
                         groups: str = "known", *, k: int | None = None,
                         exposure: float | None = None, n_average: int = 30,
                         draws: int | None = None, seed: options.Seed = None) -> Any:
        """The draws behind :meth:`predict` as an xarray.DataArray (draw x row).

        Example
        -------
        >>> m.prediction_draws(new_df, what="new_count", groups="new", seed=1)  # doctest: +SKIP
        """
        return predict_answers.prediction_draws(self, data, what, groups, k=k, exposure=exposure,
                                n_average=n_average, draws=draws, seed=seed)

    def count_distribution(self, data: pd.DataFrame | None = None, kmax: int = 10,
                           groups: str = "known", *, exposure: float | None = None,
                           n_average: int = 30, draws: int | None = None,
                           seed: options.Seed = None) -> pd.DataFrame:
        """Posterior predictive P(Y = 0..kmax) and P(Y > kmax) per row.

        Example
        -------
        >>> m.count_distribution(new_df, kmax=5)                         # doctest: +SKIP
        """
        return predict_answers.count_distribution(self, data, kmax, groups, exposure=exposure,
                                  n_average=n_average, draws=draws, seed=seed)

    def contrast(self, base: pd.DataFrame | None = None, scenario: pd.DataFrame | None = None,
                 *, shift: dict[str, Any] | None = None, set_to: dict[str, Any] | None = None,
                 what: str = "mean", groups: str = "known", interval: float = 0.9,
                 combine: str | None = None, k: int | None = None,
                 exposure: float | None = None, n_average: int = 30,
                 draws: int | None = None, seed: options.Seed = None) -> pd.DataFrame:
        """Ratio and difference of a quantity, scenario vs base, with P(ratio > 1).

        Example
        -------
        >>> m.contrast(shift={"depth": 0.5}, what="rate", combine="mean")  # doctest: +SKIP
        """
        return contrast_answers.contrast(
            self, base, scenario, shift=shift, set_to=set_to, what=what, groups=groups,
            interval=interval, combine=combine, k=k, exposure=exposure, n_average=n_average,
            draws=draws, seed=seed)

    def average_comparison(self, input: str, data: pd.DataFrame | None = None, *,
                           what: str = "mean", groups: str = "known", interval: float = 0.9,
                           levels: tuple[str, str] | None = None, pairs: int = 10_000,
                           k: int | None = None, exposure: float | None = None,
                           n_average: int = 30, draws: int | None = None,
                           seed: options.Seed = None) -> pd.DataFrame:
        """Average predictive comparison of one input (Gelman & Pardoe 2007).

        Example
        -------
        >>> m.average_comparison("depth", what="rate")                   # doctest: +SKIP
        """
        return contrast_answers.average_comparison(self, input, data, what=what, groups=groups,
                                  interval=interval, levels=levels, pairs=pairs, k=k,
                                  exposure=exposure, n_average=n_average, draws=draws,
                                  seed=seed)

    # ------------------------------------------------------------------ persistence
    def save(self, path: str) -> str:
        """Write the fit to one netCDF file (draws, spec, design data); returns the path."""
        return archive.save(self, path)


class _RowAdder:
    """Appends one coefficient-table row per call: summaries of the draws, the exp scale
    when ``scale`` names it, and the diagnostics of ``key``."""

    def __init__(self, rows: list[dict], iv: options.Interval, diag: pd.DataFrame) -> None:
        self.rows, self.iv, self.diag = rows, iv, diag

    def __call__(self, part: str, term: str, draws: np.ndarray, key: str,
                 scale: str | None) -> None:
        lo_name, hi_name = self.iv.names
        d = np.asarray(draws).reshape(-1)
        lo, hi = np.quantile(d, [self.iv.lower, self.iv.upper])
        row = {"part": part, "term": term, "mean": d.mean(), "sd": d.std(ddof=1),
               lo_name: lo, hi_name: hi, "exp scale": scale or "",
               "exp(mean)": np.nan, f"exp {lo_name}": np.nan, f"exp {hi_name}": np.nan}
        if scale:
            e = np.exp(d)
            row["exp(mean)"] = float(e.mean())
            row[f"exp {lo_name}"], row[f"exp {hi_name}"] = np.exp([lo, hi])
        if key in self.diag.index:
            row.update(self.diag.loc[key, list(names.DIAGNOSTIC_COLUMNS)].to_dict())
        self.rows.append(row)


def _group_rows(m: FitRecord, add: _RowAdder, group: str) -> None:
    """The coefficient-table rows of one grouping column: sds (and correlation)."""
    post = m.idata.posterior
    for part in names.PARTS:
        name = names.group_sd(part, group)
        if name in post:
            add(part, names.group_sd_label(group), post[name].values, name, None)
        sname = names.slope_sd(part, group)
        if sname in post:
            pdes = m.design.counts if part == "counts" else m.design.zeros
            for t in m.spec.varying.get(part, ()):
                j = pdes.terms.index(t)
                v = post[sname].sel({names.slope_term_dim(part): t}).values / pdes.scale[j]
                add(part, names.slope_sd_label(group, t), v, names.summary_key(sname, t), None)
    if names.corr(group) in post:
        add("both", names.corr_label(group), post[names.corr(group)].values,
            names.corr(group), None)


def _flag_for(row: dict, th: Any) -> str:
    out = []
    r = row.get(names.RHAT)
    if r is not None and np.isfinite(r) and r > th.rhat:
        out.append("R-hat")
    eb, et = row.get(names.BULK_ESS), row.get(names.TAIL_ESS)
    if eb is not None and np.isfinite(eb) and (eb < th.ess or et < th.ess):
        out.append("low ESS")
    return " ".join(out)


def format_fit(m: FittedModel) -> str:
    """The readable text shown by ``print(fitted)``."""
    fam = get_family(m.spec.family)
    lines = [
        f"bayeszi fit: family {m.spec.family}, {m.design.n} records, response "
        f"'{m.spec.response}'",
        f"  counts part: log mean of the count process ~ {m.spec.counts_rhs}"
        + (f" + log({m.spec.exposure})" if m.spec.exposure else "")
        + (f" + {m.spec.offset} (offset)" if m.spec.offset else ""),
    ]
    if fam.zeros_kind is not None:
        lines.append(f"  zeros part: logit {names.zeros_label(fam.name)} ~ {m.spec.zeros_rhs}")
    if m.design.groups:
        lines.append("  groups: " + ", ".join(
            f"{g.name} ({len(g.levels)} levels)" for g in m.design.groups))
    post = m.idata.posterior
    lines.append(f"  draws: {post.sizes['chain']} chains x {post.sizes['draw']}")
    table = m.coefficients()
    with pd.option_context("display.width", 140, "display.max_columns", 20,
                           "display.float_format", lambda v: f"{v:.3g}"):
        shown = table.drop(columns=[names.TAIL_ESS], errors="ignore")
        lines.append("")
        lines.append(shown.to_string(na_rep=""))
    probs = m.sampler_problems()
    lines.append("")
    if probs:
        lines.append("Sampler warnings:")
        lines.extend(f"  - {p}" for p in probs)
    else:
        th = m.sampling.thresholds
        lines.append(f"Sampler: no divergences, all R-hat <= {th.rhat}, "
                     f"all ESS >= {th.ess:.0f}.")
    return "\n".join(lines)
