"""The report's sections, each computed from the fitted models through the public modules.

:func:`build_document` takes a :class:`ReportInput` (the fits, the data, the scenarios and
where everything came from) and returns the :class:`~bayeszi.app.report.document.Document` and
the lines of the reproducibility footer. Each section is one function. Sections that rest on
a module other than the core (comparison, checks, predictions) are added only when that
module is installed with the functions the section uses; otherwise the section is left out
and the page's introduction lists it as not available, so nothing stands in for a result.

Example
-------
>>> doc, footer = build_document(ReportInput(title="t", fits={"zinb": fitted},
...                                          data=df))                 # doctest: +SKIP
>>> [s.id for s in doc.sections][:3]                                    # doctest: +SKIP
['data', 'models', 'diagnostics']
"""

from __future__ import annotations

import importlib
import warnings
from collections.abc import Callable, Mapping, Sequence
from dataclasses import dataclass, field
from typing import TYPE_CHECKING, Any

import numpy as np
import pandas as pd

from bayeszi.app.report import figures as F
from bayeszi.app.report.document import Bullets, Document, Figure, Section, Table, Text
from bayeszi.app.report.footer import footer_lines
from bayeszi.app.report.reading import reading_lines
from bayeszi.families import get_family

if TYPE_CHECKING:
    from bayeszi.app.study import Contrast, Scenario
    from bayeszi.fitting.fitted import FittedModel

#: Most rows of a long table shown in the page (all rows are in its CSV file).
SHOWN_ROWS = 25


@dataclass
class ReportInput:
    """Everything a report is made from.

    ``fits`` maps model names to fitted models, in the order the study lists them;
    ``data`` is the data frame they were fitted to. ``provenance`` holds the reproducibility
    facts (``data_path``, ``data_sha256``, ``study_path``, ``study_sha256``, ``command``,
    ``saved_fits``); ``notes`` holds warnings raised while fitting, per model.
    """

    title: str
    fits: Mapping[str, FittedModel]
    data: pd.DataFrame
    summary: str = ""
    interval: float = 0.9
    unit: str | None = None
    seed: int | None = None
    scenarios: Sequence[Scenario] = ()
    contrasts: Sequence[Contrast] = ()
    preferred: str | None = None
    provenance: dict[str, Any] = field(default_factory=dict)
    notes: dict[str, list[str]] = field(default_factory=dict)

    @property
    def first(self) -> FittedModel:
        """The first fitted model (its spec names the response, exposure and groups)."""
        return next(iter(self.fits.values()))


#: Warnings left out of the report because another section already says the same.
REDUNDANT = ("these answers rest on posterior draws with sampler problems",)


@dataclass
class _State:
    """What sections learn and pass on: the preferred model, sections left out, warnings."""

    preferred: str
    preferred_reason: str
    left_out: list[str] = field(default_factory=list)
    warnings: list[str] = field(default_factory=list)
    comparison: pd.DataFrame | None = None


# ---------------------------------------------------------------------- helpers
def optional(module: str, *names: str) -> Any | None:
    """The module if it is installed and has all of ``names``, else None."""
    try:
        mod = importlib.import_module(module)
    except ImportError:
        return None
    return mod if all(hasattr(mod, n) for n in names) else None


def _caught(state: _State, where: str, fn: Callable[..., Any], *args: Any, **kwargs: Any
            ) -> Any:
    """Call ``fn(*args, **kwargs)`` recording its warnings (shown in the report)."""
    with warnings.catch_warnings(record=True) as seen:
        warnings.simplefilter("always")
        out = fn(*args, **kwargs)
    for w in seen:
        if issubclass(w.category, (DeprecationWarning, FutureWarning)):
            continue
        if any(str(w.message).startswith(r) for r in REDUNDANT):
            continue  # the diagnostics section states the sampler problems once
        text = f"{where}: {w.message}"
        if text not in state.warnings:
            state.warnings.append(text)
    return out


def _plain(frame: pd.DataFrame) -> pd.DataFrame:
    """A copy without ``attrs`` (arrays in attrs break pandas.concat)."""
    out = frame.copy()
    out.attrs = {}
    return out


def _pct(x: float) -> str:
    return f"{100 * x:.1f}%"


def _iv(inp: ReportInput) -> tuple[str, str]:
    lo, hi = (1 - inp.interval) / 2, 1 - (1 - inp.interval) / 2
    return f"{100 * lo:g}%", f"{100 * hi:g}%"


def _zeros_label(family: str) -> str:
    kind = get_family(family).zeros_kind
    if kind == "inflation":
        return "P(extra zero)"
    if kind == "hurdle":
        return "P(Y = 0)"
    return "none"


def _unit(inp: ReportInput) -> str:
    if inp.unit:
        return inp.unit
    spec = inp.first.spec
    return f"unit of {spec.exposure}" if spec.exposure else "record"


def _head(frame: pd.DataFrame, name: str) -> tuple[pd.DataFrame, Text | None]:
    if len(frame) <= SHOWN_ROWS:
        return frame, None
    return frame, Text(f"The page shows the first {SHOWN_ROWS} of {len(frame)} rows; all rows "
                       f"are in tables/{name}.csv.", "note")


def _table(name: str, frame: pd.DataFrame, caption: str, index: bool = False,
           **options: Any) -> list:
    """A table block, cut to :data:`SHOWN_ROWS` rows in the page with a note."""
    from bayeszi.app.report.write import slug

    full, note = _head(frame, slug(name))
    block = Table(name, full, caption, index=index, shown_rows=SHOWN_ROWS, **options)
    return [block] + ([note] if note else [])


OK_VERDICT = ("in line with the model",)


# ---------------------------------------------------------------------- sections
def section_data(inp: ReportInput, state: _State) -> Section:
    """Rows, zero share, exposure and groups of the data the models were fitted to."""
    fit = inp.first
    spec = fit.spec
    y = fit.design.y
    rows = [
        ("records (rows used)", int(fit.design.n)),
        ("rows in the data file", int(len(inp.data))),
        (f"response: {spec.response}, mean", float(y.mean())),
        (f"response: {spec.response}, variance", float(y.var(ddof=1)) if y.size > 1 else np.nan),
        (f"response: {spec.response}, largest", int(y.max())),
        ("records with a zero", int((y == 0).sum())),
        ("zero share", float((y == 0).mean())),
    ]
    if spec.exposure or spec.offset:
        expo = np.exp(fit.design.log_offset)
        name = spec.exposure or f"exp({spec.offset})"
        rows += [(f"exposure {name}: total", float(expo.sum())),
                 (f"exposure {name}: smallest", float(expo.min())),
                 (f"exposure {name}: median", float(np.median(expo))),
                 (f"exposure {name}: largest", float(expo.max())),
                 (f"{spec.response} per unit of {name} (total / total)",
                  float(y.sum() / expo.sum()))]
    groups = {}
    for f in inp.fits.values():
        for g in f.design.groups:
            groups.setdefault(g.name, g)
    for g in groups.values():
        per = g.counts_per_level
        rows += [(f"group {g.name}: levels", int(len(g.levels))),
                 (f"group {g.name}: records per level, smallest", int(per.min())),
                 (f"group {g.name}: records per level, median", float(np.median(per))),
                 (f"group {g.name}: records per level, largest", int(per.max()))]
    table = pd.DataFrame(rows, columns=["quantity", "value"]).astype({"value": object})
    text = (f"{fit.design.n} records of {spec.response}; {int((y == 0).sum())} of them "
            f"({_pct(float((y == 0).mean()))}) are zero.")
    if spec.exposure:
        text += (f" Effort is given by {spec.exposure} (exposure); rates in this report are "
                 f"per {_unit(inp)}.")
    if groups:
        text += " Records are grouped by " + ", ".join(
            f"{g.name} ({len(g.levels)} levels)" for g in groups.values()) + "."
    blocks: list = [Text(text), Table("data_summary", table, "The data at a glance")]
    blocks.append(Figure("data_counts", F.count_histogram(y, spec.response),
                         f"How many records hold each value of {spec.response}; the zero bar "
                         "is orange."))
    return Section("data", "The data", blocks)


def section_models(inp: ReportInput, state: _State) -> Section:
    """The candidate models (family, formulas, groups, sampler) and their priors."""
    rows, priors = [], []
    for name, f in inp.fits.items():
        s = f.spec
        post = f.idata.posterior
        fam = get_family(s.family)
        rows.append({
            "model": name, "family": s.family,
            "counts part (log mean)": f"{s.response} ~ {s.counts_rhs}"
            + (f" + log({s.exposure})" if s.exposure else "")
            + (f" + {s.offset} (offset)" if s.offset else ""),
            "zeros part": (f"logit {_zeros_label(s.family)} ~ {s.zeros_rhs}"
                           if fam.zeros_kind else "none"),
            "groups": ", ".join(s.groups) or "none",
            "varying slopes": "; ".join(f"{p}: {', '.join(t)}" for p, t in s.varying.items())
            or "none",
            "chains": int(post.sizes["chain"]), "draws per chain": int(post.sizes["draw"]),
            "tune": int(s.sampler.tune), "target_accept": float(s.sampler.target_accept),
            "seed": "" if s.sampler.seed is None else str(s.sampler.seed),
            "sampling seconds": float(f.timing.get("sample_s", np.nan)),
        })
        for r in f.priors.table():
            if r["term"] == "sqrt(dispersion)" and not fam.has_dispersion:
                continue
            if r["term"] == "group sd" and not s.groups:
                continue
            if r["term"] == "group sd" and r["part"] == "zeros" and not fam.zeros_kind:
                continue
            priors.append({"model": name, **r})
    blocks: list = [
        Text("Each candidate has a counts part (log link; the mean of the count process, with "
             "log exposure as an offset) and, except for the plain Poisson and negative "
             "binomial, a zeros part (logit link). In the zero-inflated families (zip, zinb) "
             "the zeros part models P(extra zero), a zero from a process that produces nothing "
             "at all; in the hurdle families it models P(Y = 0) itself."),
        Table("models", pd.DataFrame(rows), "Candidate models and sampler settings (NUTS)"),
        Text("Priors are stated on the scale of each predictor as written in the formula. "
             "Defaults are weakly informative; their reasons are in docs/priors.md."),
    ]
    blocks += _table("priors", pd.DataFrame(priors), "Priors used")
    return Section("models", "Models and priors", blocks)


def section_diagnostics(inp: ReportInput, state: _State) -> Section:
    """Divergences, R-hat and ESS per model, flagged parameters and sampler warnings."""
    rows, worst = [], []
    blocks: list = []
    for name, f in inp.fits.items():
        d = f.diagnostics()
        t = d.table
        th = d.thresholds
        probs = f.sampler_problems()
        rows.append({
            "model": name, "draws": int(d.draws), "divergences": int(d.divergences),
            "max tree depth hits": int(d.max_treedepth_hits),
            "largest R-hat": float(t["r_hat"].max()),
            "smallest bulk ESS": float(t["ess_bulk"].min()),
            "smallest tail ESS": float(t["ess_tail"].min()),
            "parameters flagged": len(set(d.bad_rhat) | set(d.bad_ess)),
            "flag": _short_flags(d),
        })
        bad = t[(t["r_hat"] > th.rhat) | (t["ess_bulk"] < th.ess) | (t["ess_tail"] < th.ess)]
        bad = bad.assign(order=bad["ess_bulk"].rank() - bad["r_hat"].rank()).sort_values("order")
        for key, r in bad.head(10).iterrows():
            flag = " ".join(x for x, on in (("R-hat", r["r_hat"] > th.rhat),
                                           ("low ESS", min(r["ess_bulk"], r["ess_tail"]) < th.ess))
                            if on)
            worst.append({"model": name, "parameter": str(key), "r_hat": float(r["r_hat"]),
                          "ess_bulk": float(r["ess_bulk"]), "ess_tail": float(r["ess_tail"]),
                          "flag": flag})
        for p in probs:
            blocks.append(Text(f"Model {name}: {p}.", "warning"))
        for n in inp.notes.get(name, []):
            if not any(n.startswith(p[:40]) for p in probs):
                blocks.append(Text(f"Model {name}, while fitting: {n}", "warning"))
    th = next(iter(inp.fits.values())).sampling.thresholds
    intro = Text(f"A model's draws are trusted when there are no divergent transitions, every "
                 f"R-hat is at most {th.rhat} and every bulk and tail ESS is at least "
                 f"{th.ess:.0f} (Vehtari et al. 2021). Flagged rows are highlighted.")
    blocks = [intro, Table("diagnostics", pd.DataFrame(rows), "Sampler diagnostics per model"),
              *blocks]
    if worst:
        blocks.append(Table("diagnostics_flagged", pd.DataFrame(worst),
                            "Flagged parameters (up to 10 per model, the worst first)"))
    else:
        blocks.append(Text("No parameter of any model was flagged."))
    return Section("diagnostics", "Convergence diagnostics", blocks)


def _short_flags(d: Mapping[str, Any]) -> str:
    out = []
    if d.divergences:
        out.append("divergences")
    if d.bad_rhat:
        out.append("R-hat")
    if d.bad_ess:
        out.append("low ESS")
    if d.max_treedepth_hits:
        out.append("tree depth")
    return ", ".join(out)


def section_comparison(inp: ReportInput, state: _State) -> Section | None:
    """LOO comparison of the candidates (needs :mod:`bayeszi.answers.comparison`)."""
    mod = optional("bayeszi.answers.comparison", "compare", "loo")
    if mod is None:
        state.left_out.append("LOO comparison (bayeszi.answers.comparison is not installed)")
        return None
    if len(inp.fits) >= 2:
        table = _plain(_caught(state, "LOO comparison", mod.compare, dict(inp.fits)))
        state.comparison = table
    else:
        name, f = next(iter(inp.fits.items()))
        est = _caught(state, "LOO", mod.loo, f, label=name)
        counts = est.k_counts()
        table = pd.DataFrame([{"model": name, "family": f.spec.family, "elpd_loo": est.elpd,
                               "se": est.se, "p_loo": est.p_loo, "k_good": counts["good"],
                               "k_ok": counts["ok"], "k_bad": counts["bad"]}]).set_index("model")
    table["flag"] = [("Pareto k > 0.7" if r["k_bad"] else "")
                     + ("; sampler: " + r["sampler"] if r.get("sampler", "ok") != "ok" else "")
                     for _, r in table.iterrows()]
    blocks: list = [Text(
        "Models are ranked by their expected log predictive density for a new record (elpd), "
        "estimated by Pareto-smoothed importance sampling leave-one-out (PSIS-LOO). Higher "
        "elpd predicts better; a difference smaller than about twice its standard error is "
        "not a clear preference. Pareto k above 0.7 marks records whose LOO estimate is "
        "unreliable (Vehtari et al. 2024).")]
    blocks += _table("loo_comparison", table, "LOO comparison", index=True)
    return Section("comparison", "Model comparison (LOO)", blocks)


def section_coefficients(inp: ReportInput, state: _State) -> Section:
    """Coefficient tables with rate ratios and odds ratios, and their figure."""
    lo, hi = _iv(inp)
    blocks: list = [Text(
        f"Posterior means, sds and central {inp.interval:.0%} intervals on the scale of the "
        "linear predictors, and the same on the exp scale: rate ratios for the counts part "
        "(the factor by which the mean count of the count process changes per unit of the "
        "term), odds ratios for the zeros part. Intercepts on the exp scale are the base rate "
        f"per {_unit(inp)} and the base odds at all terms zero (reference levels). "
        f"Columns {lo} and {hi} bound the interval.")]
    for name, f in inp.fits.items():
        table = f.coefficients(interval=inp.interval)
        blocks.append(Table(f"coefficients_{name}", table,
                            f"Model {name} ({f.spec.family}): coefficients", index=True))
        zl = _zeros_label(f.spec.family)
        blocks.append(Figure(f"ratios_{name}", F.ratio_intervals(
            table, f"Model {name}: effects on the exp scale", zl),
            (f"Model {name}: rate ratios (counts part) and odds ratios of {zl} (zeros part) "
             if f.design.zeros is not None else
             f"Model {name}: rate ratios (counts part; this family has no zeros part) ")
            + f"with {inp.interval:.0%} intervals; 1 means no effect."))
    return Section("coefficients", "Coefficients: rate ratios and odds ratios", blocks)


def section_groups(inp: ReportInput, state: _State) -> Section | None:
    """Group effects and pooling for models with groups (needs :mod:`bayeszi.answers.groups`)."""
    with_groups = {n: f for n, f in inp.fits.items() if f.design.groups}
    if not with_groups:
        return None
    mod = optional("bayeszi.answers.groups", "group_effects", "pooling_summary")
    if mod is None:
        state.left_out.append("group effects (bayeszi.answers.groups is not installed)")
        return None
    blocks: list = [Text(
        "Group effects are partially pooled: each level's effect is pulled toward a typical "
        "level, the more so the fewer records it has. The pooling factor is near 0 when a "
        "level's own records decide its effect and near 1 when the level is pulled all the way "
        "to the typical value.")]
    frames = []
    for name, f in with_groups.items():
        ps = _plain(f.pooling_summary(interval=inp.interval)).reset_index()
        ps.insert(0, "model", name)
        frames.append(ps)
    blocks.append(Table("pooling", pd.concat(frames, ignore_index=True),
                        "Spread of the group effects and how strongly they are pooled"))
    pref = state.preferred if state.preferred in with_groups else next(iter(with_groups))
    f = with_groups[pref]
    effects = f.group_effects(interval=inp.interval)
    lo, hi = _iv(inp)
    blocks += _table(f"group_effects_{pref}", effects,
                     f"Model {pref}: the effect of each group level (exp scale: rate ratio or "
                     "odds ratio against a typical level)", index=True,
                     columns=["group", "level", "part", "effect", "records", "exp(mean)",
                              f"exp {lo}", f"exp {hi}", "pooling", "r_hat", "ess_bulk", "flag"])
    for g in f.design.groups:
        blocks.append(Figure(f"group_effects_{pref}_{g.name}", F.group_effect_intervals(
            effects, g.name, f"Model {pref}: {g.name} effects"),
            f"Model {pref}: each {g.name}'s effect on the exp scale against a typical level, "
            f"with {inp.interval:.0%} intervals, sorted."))
    return Section("groups", "Group effects and pooling", blocks)


def _checks(state: _State, *names: str) -> Any | None:
    mod = optional("bayeszi.answers.checks", *names)
    return mod


def _plots(*names: str) -> Any | None:
    return optional("bayeszi.plots.checkplots", *names)


def section_zero_checks(inp: ReportInput, state: _State) -> Section | None:
    """Observed share of zeros against replicated data, per model and per group."""
    ck = _checks(state, "zero_check")
    if ck is None:
        state.left_out.append("zero-share checks (bayeszi.answers.checks is not installed)")
        return None
    overall, by_group = [], []
    plots = _plots("zero_check_figure")
    blocks: list = [Text(
        "Does each model reproduce the share of zeros? For every posterior draw a new data "
        "set is simulated from the model, and the observed zero share is set against those "
        "replicated shares. A tail probability near 0 means more zeros were observed than "
        "the model produces; near 1, fewer. Verdicts use 0.05 and 0.95.")]
    figs = []
    for name, f in inp.fits.items():
        raw = _caught(state, f"zero check of {name}", ck.zero_check, f,
                      interval=inp.interval, seed=inp.seed or 0)
        t = _plain(raw)
        t.insert(0, "model", name)
        overall.append(t.iloc[:1])
        if len(t) > 1:
            by_group.append(t.iloc[1:])
        if plots is not None:
            figs.append(Figure(f"zero_check_{name}", plots.zero_check_figure(raw),
                               f"Model {name}: share of zeros in data sets replicated from the "
                               "model against the observed share (left), and per group level "
                               "(right, when the model has groups)."))
    blocks.append(Table("zero_check", pd.concat(overall, ignore_index=True).drop(
        columns=["level"]), "Zero share, all records", flag_column="verdict",
        ok_values=OK_VERDICT))
    if by_group:
        groups = pd.concat(by_group, ignore_index=True)
        bad = ~groups["verdict"].isin(OK_VERDICT)
        blocks.append(Text(f"Per group level: {int(bad.sum())} of {len(groups)} model-by-level "
                           "checks are flagged (listed first below)."))
        blocks += _table("zero_check_by_group",
                         pd.concat([groups[bad], groups[~bad]], ignore_index=True),
                         "Zero share per group level", flag_column="verdict",
                         ok_values=OK_VERDICT)
    blocks += figs
    return Section("zero-checks", "Zero-share checks", blocks)


def section_spread(inp: ReportInput, state: _State) -> Section | None:
    """Mean, variance, variance-to-mean ratio and largest count against replicated data."""
    ck = _checks(state, "dispersion_check", "max_count_check")
    if ck is None:
        state.left_out.append("dispersion checks (bayeszi.answers.checks is not installed)")
        return None
    frames, figs = [], []
    plots = _plots("statistics_figure")
    for name, f in inp.fits.items():
        if plots is not None and hasattr(ck, "replicated_statistics"):
            reps = _caught(state, f"replicated statistics of {name}", ck.replicated_statistics,
                           f, seed=inp.seed or 0)
            figs.append(Figure(f"statistics_{name}", plots.statistics_figure(reps),
                               f"Model {name}: zero share, variance-to-mean ratio and largest "
                               "count of replicated data sets, with the observed values."))
        for fn in (ck.dispersion_check, ck.max_count_check):
            t = _plain(_caught(state, f"spread check of {name}", fn, f,
                               interval=inp.interval, seed=inp.seed or 0)).reset_index()
            t.insert(0, "model", name)
            frames.append(t)
    table = pd.concat(frames, ignore_index=True)
    return Section("spread", "Spread and largest count", [
        Text("The variance-to-mean ratio of the data against the same ratio in data sets "
             "replicated from each model: a ratio far above what a model replicates means the "
             "counts are overdispersed for that model (common practice, no single source)."),
        Table("spread_check", table, "Mean, variance, variance / mean and maximum",
              flag_column="verdict", ok_values=OK_VERDICT), *figs])


def section_rootograms(inp: ReportInput, state: _State) -> Section | None:
    """Observed against expected frequency of each count (hanging rootograms)."""
    ck = _checks(state, "count_frequencies")
    plots = _plots("rootogram_figure")
    if ck is None or plots is None:
        state.left_out.append("rootograms (the checks or their figures are not installed)")
        return None
    blocks: list = [Text(
        "A hanging rootogram (Tukey) hangs the observed frequency of each count from the "
        "model's expected frequency, both on a square-root scale: bars ending above zero "
        "mean fewer records with that count than expected, below zero more.")]
    for name, f in inp.fits.items():
        raw = _caught(state, f"rootogram of {name}", ck.count_frequencies, f,
                      interval=inp.interval)
        t = _plain(raw)
        lo, hi = _iv(inp)
        blocks += _table(f"count_frequencies_{name}", t,
                         f"Model {name}: observed and expected number of records per count",
                         index=True, columns=["count", "observed", "expected", lo, hi])
        blocks.append(Figure(f"rootogram_{name}", plots.rootogram_figure(raw),
                             f"Model {name}: hanging rootogram."))
    return Section("rootograms", "Rootograms", blocks)


def section_residuals(inp: ReportInput, state: _State) -> Section | None:
    """Randomized quantile residuals of the preferred model."""
    ck = _checks(state, "residuals")
    plots = _plots("residual_figure")
    if ck is None or plots is None:
        state.left_out.append("residuals (the checks or their figures are not installed)")
        return None
    rows, blocks = [], []
    for name, f in inp.fits.items():
        res = _caught(state, f"residuals of {name}", ck.residuals, f, seed=inp.seed or 0)
        r = res["residual"].to_numpy()
        rows.append({"model": name, "records": int(r.size), "mean": float(r.mean()),
                     "sd": float(r.std(ddof=1)), "share beyond +-2": float(np.mean(np.abs(r) > 2)),
                     "share beyond +-3": float(np.mean(np.abs(r) > 3)),
                     "flag": "sd far from 1" if abs(r.std(ddof=1) - 1) > 0.15 else ""})
        if name == state.preferred:
            blocks.append(Figure(f"residuals_{name}", plots.residual_figure(res),
                                 f"Model {name}: randomized quantile residuals against normal "
                                 "quantiles (left) and against the expected count (right)."))
    intro = Text(
        "Randomized quantile residuals (Dunn & Smyth 1996) are standard normal when the model "
        "is right: mean 0, sd 1, about 4.6% beyond +-2 and 0.3% beyond +-3 (normal "
        "probabilities). Patterns against the fitted values point at a missing term or a "
        "wrong family.")
    return Section("residuals", "Residuals", [intro, Table("residuals_summary", pd.DataFrame(rows),
                                                           "Residual summary per model"),
                                              *blocks])


def section_zero_sources(inp: ReportInput, state: _State) -> Section | None:
    """Where the zeros come from, per group level, for the preferred model."""
    ck = _checks(state, "zero_sources")
    if ck is None:
        state.left_out.append("zero sources (bayeszi.answers.checks is not installed)")
        return None
    f = inp.fits[state.preferred]
    fam = get_family(f.spec.family)
    blocks: list = []
    if fam.zeros_kind != "inflation":
        note = ("every zero comes from the zeros part, which models P(Y = 0) directly"
                if fam.zeros_kind == "hurdle"
                else "it has no zeros part, so every zero comes from the count process")
        return Section("zero-sources", "Where the zeros come from", [Text(
            f"The preferred model {state.preferred} is {f.spec.family}: {note}. There is "
            "nothing to split.")])
    blocks.append(Text(
        f"In {f.spec.family}, a zero can be an extra zero (the zeros part: nothing there to "
        "count) or an ordinary zero of the count process (there, but none this time). For "
        "each observed zero the model gives the probability that it is an extra zero; the "
        "table sums these per group level. The split rests on the model's form: the data "
        "alone cannot tell the two kinds of zero apart."))
    y = f.design.y
    if f.design.groups:
        by = [g.name for g in f.design.groups]
        t = _plain(_caught(state, "zero sources", ck.zero_sources, f, by=by,
                           interval=inp.interval))
        t = t.sort_values(["group", "share extra"], ascending=[True, False])
        blocks += _table(f"zero_sources_{state.preferred}", t,
                         f"Model {state.preferred}: expected extra zeros per group level",
                         columns=[c for c in t.columns if c != "note"])
    t_all = _caught(state, "zero sources", ck.zero_sources, f, interval=inp.interval)
    col = "P(zero from zeros part)"
    if col in t_all.columns:
        p = t_all[col].to_numpy()
        summary = pd.DataFrame([{
            "model": state.preferred, "observed zeros": int((y == 0).sum()),
            "expected extra zeros": float(p.sum()),
            "share of zeros that are extra": float(p.mean()) if p.size else np.nan,
            "zeros with P(extra) > 0.9": int((p > 0.9).sum()),
            "zeros with P(extra) < 0.1": int((p < 0.1).sum())}])
        blocks.insert(1, Table("zero_sources_summary", summary, "All zeros"))
    if f.design.groups:
        g = f.design.groups[0].name
        blocks.append(Figure(f"zero_sources_{state.preferred}", F.zero_sources_bars(
            t, g, f"Model {state.preferred}: where the zeros come from, per {g}"),
            f"Model {state.preferred}: observed zeros per {g}, split into the expected number "
            "of extra zeros (zeros part) and of ordinary zeros (count process)."))
    return Section("zero-sources", "Where the zeros come from", blocks)


def _scenario_label(scn: Scenario, row: pd.Series) -> str:
    parts = [f"{k} = {row[k]}" for k in scn.vary]
    return ", ".join(parts) if parts else "as given"


def section_predictions(inp: ReportInput, state: _State) -> Section | None:
    """Scenario predictions and contrasts (needs :mod:`bayeszi.answers.predict`)."""
    if not inp.scenarios:
        return None
    pr = optional("bayeszi.answers.predict", "predict")
    if pr is None:
        state.left_out.append("scenario predictions (bayeszi.answers.predict is not installed)")
        return None
    spec = inp.first.spec
    lo, hi = _iv(inp)
    unit = _unit(inp)
    blocks: list = [Text(
        f"Predictions at the settings the study names, for every model, with central "
        f"{inp.interval:.0%} intervals. Unless a scenario gives the exposure, it is one "
        f"{unit}, so E[Y] is the expected count per {unit}. 'new' groups draw a group effect "
        "from the population (a site not in the data); 'known' uses a fitted group's effect; "
        "'average' averages over the population of groups.")]
    tables, figs = [], []
    for scn in inp.scenarios:
        frame = scn.frame(spec.exposure)
        for name, f in inp.fits.items():
            whats = ["mean", "p_zero"]
            if get_family(f.spec.family).zeros_kind == "inflation":  # hurdle: equals p_zero
                whats.append("p_zeros_part")
            mode = scn.groups if f.design.groups else "typical"
            t = _caught(state, f"scenario '{scn.name}', model {name}", pr.predict, f, frame,
                        what=whats, groups=mode, interval=inp.interval, seed=inp.seed)
            t = _plain(t).reset_index(drop=True)
            reps = len(t) // len(frame)
            settings = pd.concat([frame] * reps, ignore_index=True)
            for col in scn.vary:
                t.insert(1, col, settings[col].to_numpy())
            t.insert(0, "model", name)
            t.insert(0, "scenario", scn.name)
            tables.append(t)
        if scn.vary:
            col = next(iter(scn.vary))
            sub = pd.concat([t for t in tables if t["scenario"].iloc[0] == scn.name])
            sub = sub[sub["quantity"] == sub["quantity"].iloc[0]]
            figs.append(Figure(f"scenario_{scn.name}", F.scenario_curve(
                sub, col, "mean", lo, hi, f"expected {spec.response} per {unit}",
                f"Scenario '{scn.name}'"),
                f"Scenario '{scn.name}': expected {spec.response} per {unit} across {col}, "
                f"per model, with {inp.interval:.0%} intervals."))
    table = pd.concat(tables, ignore_index=True)
    fixed = "; ".join(f"{s.name}: " + ", ".join(f"{k} = {v}" for k, v in s.values.items())
                      + f" (groups: {s.groups})" for s in inp.scenarios)
    blocks.append(Text(f"Settings held fixed: {fixed}."))
    blocks += _table("scenario_predictions", table, "Scenario predictions")
    blocks += figs
    if inp.contrasts:
        blocks += _contrast_blocks(inp, state)
    return Section("predictions", "Scenario predictions and contrasts", blocks)


def _contrast_blocks(inp: ReportInput, state: _State) -> list:
    mod = optional("bayeszi.answers.contrast", "contrast")
    if mod is None:
        state.left_out.append("contrasts (bayeszi.answers.contrast is not installed)")
        return []
    spec = inp.first.spec
    unit = _unit(inp)
    tables, skipped = [], []
    for ct in inp.contrasts:
        scn = next(s for s in inp.scenarios if s.name == ct.scenario)
        base = scn.frame(spec.exposure)
        for name, f in inp.fits.items():
            used = {c: v for c, v in ct.change.items() if c in f.design.used_columns}
            if not used:
                skipped.append(f"{ct.name} for {name} (the model does not use "
                               f"{', '.join(ct.change)})")
                continue
            mode = scn.groups if f.design.groups else "typical"
            for what in ("mean", "p_zero"):
                t = _caught(state, f"contrast '{ct.name}', model {name}", mod.contrast, f,
                            base, set_to=used, what=what, groups=mode,
                            interval=inp.interval, seed=inp.seed)
                t = _plain(t).reset_index(drop=True)
                t.insert(0, "setting", [_scenario_label(scn, r) for _, r in base.iterrows()])
                t.insert(0, "model", name)
                t.insert(0, "contrast", ct.name)
                tables.append(t)
    blocks: list = [Text(
        "Contrasts compare each scenario row with the same row after the change the study "
        "names, draw by draw, with the same group effect in both. 'base' and 'scenario' are "
        f"posterior means (E[Y] per {unit} or P(Y = 0)); the ratio is scenario / base.")]
    if tables:
        lo, hi = _iv(inp)
        blocks += _table("contrasts", pd.concat(tables, ignore_index=True),
                         "Contrasts (differences with their intervals are in the CSV file)",
                         columns=["contrast", "model", "setting", "quantity", "base", "scenario",
                                  "ratio (median)", f"ratio {lo}", f"ratio {hi}",
                                  "P(ratio > 1)"])
    if skipped:
        blocks.append(Text("Not computed (ratio 1 by construction): " + "; ".join(skipped)
                           + ".", "note"))
    return blocks


def section_reading(inp: ReportInput, state: _State) -> Section:
    """A plain-language reading of the preferred model."""
    name = state.preferred
    f = inp.fits[name]
    blocks: list = [Text(f"The preferred model is {name} ({f.spec.family}): "
                         f"{state.preferred_reason}")]
    probs = f.sampler_problems()
    if probs:
        blocks.append(Text("Read this with caution: the sampler reported problems for this "
                           "model (see Convergence diagnostics), so its numbers may shift "
                           "with a longer run.", "warning"))
    blocks.append(Bullets(reading_lines(f, inp.interval, _unit(inp))))
    return Section("reading", "Reading the preferred model", blocks)


def section_cautions(inp: ReportInput, state: _State) -> Section:
    """What the models assume, and who decides."""
    f = inp.fits[state.preferred]
    fam = get_family(f.spec.family)
    items = [
        f"The family is assumed: {f.spec.family}. Another family can fit the same data "
        "differently; the comparison and checks above test it only against the candidates "
        "and statistics shown.",
        "Effects are assumed additive on the log scale (counts) and the logit scale (zeros), "
        "with no interactions beyond those written in the formulas.",
    ]
    if f.spec.exposure:
        items.append(f"The expected count is assumed proportional to {f.spec.exposure}: twice "
                     "the effort, twice the expected count, all else equal.")
    if fam.zeros_kind == "inflation":
        items.append("Extra zeros and ordinary zeros cannot be told apart record by record; "
                     "their split comes from the model's form and predictors.")
    if f.design.groups:
        items.append("Records are assumed independent given the group effects; group levels "
                     "are assumed exchangeable, and predictions for new groups assume they "
                     "resemble the groups in the data.")
    else:
        items.append("Records are assumed independent given the predictors; repeated visits "
                     "to the same place, if any, are not modelled by this model.")
    items += [
        "Predictions outside the range of the data are extrapolations and rest entirely on "
        "the assumed form.",
        "Priors are weakly informative defaults unless the study set others; with few "
        "records per parameter they matter.",
        "Associations are not causes: predictors that were not randomised may stand in for "
        "others that were not measured.",
    ]
    out_of_range = _extrapolations(inp)
    blocks: list = [Bullets(items)]
    if out_of_range:
        blocks.append(Text("Scenario settings outside the range of the data: "
                           + "; ".join(out_of_range) + ".", "warning"))
    blocks.append(Text(
        "This report is a statistical summary, not a decision. Decisions on health, safety, "
        "trapping or control, a fishery's quota, or a product's release rest with qualified "
        "people and the local rules that govern them.", "warning"))
    return Section("cautions", "Cautions", blocks)


def _extrapolations(inp: ReportInput) -> list[str]:
    out = []
    data = inp.data
    for scn in inp.scenarios:
        values = {k: [v] for k, v in scn.values.items()}
        values.update({k: list(v) for k, v in scn.vary.items()})
        for col, vals in values.items():
            if col not in data.columns or not pd.api.types.is_numeric_dtype(data[col]):
                continue
            lo, hi = float(data[col].min()), float(data[col].max())
            bad = [v for v in vals if isinstance(v, (int, float)) and not lo <= v <= hi]
            if bad:
                out.append(f"scenario '{scn.name}': {col} = {bad} (data {lo:g} to {hi:g})")
    return out


# ---------------------------------------------------------------------- assembly
def choose_preferred(inp: ReportInput, comparison: pd.DataFrame | None) -> tuple[str, str]:
    """The preferred model and why: the study's choice, else the best by LOO, else the first."""
    names = list(inp.fits)
    if inp.preferred:
        return inp.preferred, "the study file names it as preferred."
    if comparison is not None and len(comparison) and str(comparison.index[0]) in inp.fits:
        best = str(comparison.index[0])
        return best, "it has the highest expected log predictive density (LOO) of the " \
                     f"{len(names)} candidates."
    if len(names) == 1:
        return names[0], "it is the only model in this report."
    return names[0], "it is listed first in the study (no LOO comparison was available)."


SECTIONS = (section_data, section_models, section_diagnostics, section_comparison,
            section_coefficients, section_groups, section_zero_checks, section_spread,
            section_rootograms, section_residuals, section_zero_sources, section_predictions,
            section_reading, section_cautions)


def build_document(inp: ReportInput, progress: Callable[[str], None] | None = None
                   ) -> tuple[Document, list[str], list[str]]:
    """Compute every section; returns (document, footer lines, warnings raised on the way)."""
    state = _State(preferred=next(iter(inp.fits)), preferred_reason="")
    sections: list[Section] = []
    for fn in SECTIONS:
        if progress:
            progress(fn.__name__.removeprefix("section_").replace("_", " "))
        if fn is section_coefficients:  # the comparison has run: settle the preferred model
            state.preferred, state.preferred_reason = choose_preferred(inp, state.comparison)
        section = fn(inp, state)
        if section is not None:
            sections.append(section)
    subtitle = inp.summary
    doc = Document(inp.title, subtitle, sections)
    if state.left_out:
        doc.sections[0].blocks.insert(0, Text(
            "Not in this report (the module is not available in this installation): "
            + "; ".join(state.left_out) + ".", "note"))
    if state.warnings:
        doc.section("diagnostics").blocks += [Text(w, "warning") for w in state.warnings]
    return doc, footer_lines(inp.provenance, inp.fits, inp.seed), state.warnings
