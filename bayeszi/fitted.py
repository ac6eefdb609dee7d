"""The fitted model: spec, design state and draws, and the questions they answer.

Example
-------
>>> import bayeszi as bz                                         # doctest: +SKIP
>>> m = bz.fit(df, counts="crayfish ~ depth", family="zip")      # doctest: +SKIP
>>> m.coefficients()                                             # doctest: +SKIP
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any

import arviz as az
import numpy as np
import pandas as pd

from bayeszi.design import Design
from bayeszi.families import get_family
from bayeszi.priors import PriorSet
from bayeszi.sample import diagnose, problems
from bayeszi.spec import ModelSpec


def add_user_scale(idata: az.InferenceData, design: Design) -> None:
    """Add ``counts_coef`` / ``zeros_coef`` on the user's scale to the posterior."""
    post = idata.posterior
    for part, pdes in (("counts", design.counts), ("zeros", design.zeros)):
        if pdes is None:
            continue
        std = post[f"{part}_std_coef"]
        beta = pdes.to_user_scale(std.values)
        post[f"{part}_coef"] = std.copy(data=beta)


def _label(part: str, family: str, term: str) -> str:
    fam = get_family(family)
    if part == "counts":
        return "base rate" if term == "Intercept" else "rate ratio"
    what = "P(extra zero)" if fam.zeros_kind == "inflation" else "P(Y = 0)"
    return f"base odds of {what}" if term == "Intercept" else f"odds ratio of {what}"


@dataclass
class FittedModel:
    """A fitted bayeszi model. Build one with :func:`bayeszi.fit`; see docs/api.md."""

    spec: ModelSpec
    design: Design
    idata: az.InferenceData
    priors: PriorSet
    timing: dict[str, float] = field(default_factory=dict)
    _diag: dict | None = field(default=None, repr=False)

    # ------------------------------------------------------------------ diagnostics
    def diagnostics(self) -> dict[str, Any]:
        """Divergences, per-parameter R-hat/ESS (``table``) and flagged parameter names."""
        if self._diag is None:
            self._diag = diagnose(self.idata)
        return self._diag

    def sampler_problems(self) -> list[str]:
        """Plain-language sampler problems with what to try (empty when all is well)."""
        return problems(self.diagnostics())

    # ------------------------------------------------------------------ tables
    def coefficients(self, interval: float = 0.9, groups: bool = True) -> pd.DataFrame:
        """Coefficient table of both parts on the user's scale.

        Rows are labelled by part and term; columns: posterior mean, sd, the central
        ``interval`` bounds, the exp scale (rate ratio for counts, odds ratio for zeros) with
        its bounds, R-hat, bulk and tail ESS and a flag. Group sds (and correlations) and the
        NB dispersion are listed too, without an exp scale.
        """
        if not 0 < interval < 1:
            from bayeszi.errors import BayesziError

            raise BayesziError(f"interval must lie in (0, 1), got {interval!r}; e.g. 0.9")
        lo_q, hi_q = (1 - interval) / 2, 1 - (1 - interval) / 2
        lo_name, hi_name = f"{100 * lo_q:g}%", f"{100 * hi_q:g}%"
        diag = self.diagnostics()["table"]
        post = self.idata.posterior
        rows = []

        def add(part: str, term: str, draws: np.ndarray, key: str, scale: str | None) -> None:
            d = np.asarray(draws).reshape(-1)
            lo, hi = np.quantile(d, [lo_q, hi_q])
            row = {"part": part, "term": term, "mean": d.mean(), "sd": d.std(ddof=1),
                   lo_name: lo, hi_name: hi, "exp scale": scale or "",
                   "exp(mean)": np.nan, f"exp {lo_name}": np.nan, f"exp {hi_name}": np.nan}
            if scale:
                e = np.exp(d)
                row["exp(mean)"] = float(e.mean())
                row[f"exp {lo_name}"], row[f"exp {hi_name}"] = np.exp([lo, hi])
            if key in diag.index:
                row.update(diag.loc[key, ["r_hat", "ess_bulk", "ess_tail"]].to_dict())
            rows.append(row)

        for part, pdes in (("counts", self.design.counts), ("zeros", self.design.zeros)):
            if pdes is None:
                continue
            var = post[f"{part}_coef"]
            for term in pdes.terms:
                add(part, term, var.sel({f"{part}_term": term}).values,
                    f"{part}_coef[{term}]", _label(part, self.spec.family, term))
        if "dispersion" in post:
            add("counts", "dispersion (alpha)", post["dispersion"].values, "dispersion", None)
        if groups:
            for g in self.design.groups:
                for part in ("counts", "zeros"):
                    name = f"{part}_sd_{g.name}"
                    if name in post:
                        add(part, f"sd({g.name})", post[name].values, name, None)
                    sname = f"{part}_slope_sd_{g.name}"
                    if sname in post:
                        pdes = self.design.counts if part == "counts" else self.design.zeros
                        for t in self.spec.varying.get(part, ()):
                            j = pdes.terms.index(t)
                            v = post[sname].sel({f"{part}_slope_term": t}).values / pdes.scale[j]
                            add(part, f"sd({g.name}: {t})", v, f"{sname}[{t}]", None)
                if f"corr_{g.name}" in post:
                    add("both", f"corr({g.name})", post[f"corr_{g.name}"].values,
                        f"corr_{g.name}", None)
        table = pd.DataFrame(rows)
        th = self.diagnostics()["thresholds"]
        table["flag"] = [_flag_for(r, th) for r in table.to_dict("records")]
        return table.set_index(["part", "term"])

    def __str__(self) -> str:
        return format_fit(self)

    def __repr__(self) -> str:
        return format_fit(self)

    # ------------------------------------------------------------------ groups (groups issue)
    # (group-level methods go here)

    # ------------------------------------------------------------------ checks (checks.py)
    # (posterior predictive check methods go here)

    # ------------------------------------------------------------------ LOO (compare.py)
    # (LOO methods go here)

    # ------------------------------------------------------------------ predictions (predict.py)
    # (prediction and contrast methods go here)

    # ------------------------------------------------------------------ persistence
    def save(self, path: str) -> str:
        """Write the fit to one netCDF file (draws, spec, design data); returns the path."""
        from bayeszi.store import save

        return save(self, path)


def _flag_for(row: dict, th: Any) -> str:
    out = []
    r = row.get("r_hat")
    if r is not None and np.isfinite(r) and r > th.rhat:
        out.append("R-hat")
    eb, et = row.get("ess_bulk"), row.get("ess_tail")
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
    if fam.zeros_kind == "inflation":
        lines.append(f"  zeros part: logit P(extra zero) ~ {m.spec.zeros_rhs}")
    elif fam.zeros_kind == "hurdle":
        lines.append(f"  zeros part: logit P(Y = 0) ~ {m.spec.zeros_rhs}")
    if m.design.groups:
        lines.append("  groups: " + ", ".join(
            f"{g.name} ({len(g.levels)} levels)" for g in m.design.groups))
    post = m.idata.posterior
    lines.append(f"  draws: {post.sizes['chain']} chains x {post.sizes['draw']}")
    table = m.coefficients()
    with pd.option_context("display.width", 140, "display.max_columns", 20,
                           "display.float_format", lambda v: f"{v:.3g}"):
        shown = table.drop(columns=["ess_tail"], errors="ignore")
        lines.append("")
        lines.append(shown.to_string(na_rep=""))
    probs = m.sampler_problems()
    lines.append("")
    if probs:
        lines.append("Sampler warnings:")
        lines.extend(f"  - {p}" for p in probs)
    else:
        d = m.diagnostics()
        lines.append(f"Sampler: no divergences, all R-hat <= {d['thresholds'].rhat}, "
                     f"all ESS >= {d['thresholds'].ess:.0f}.")
    return "\n".join(lines)
