"""The overview of a strata run: every stratum side by side, each linked to its own report.

:func:`write_overview` reads what each finished stratum's report wrote (its CSV tables:
the LOO comparison, the diagnostics, the coefficients and the scenario predictions) and the
run's manifest, and writes ``OUT/overview/`` (``report.html``, ``tables/``, ``figures/``)
as one folder, written in full or not at all. The page holds

- a table of the strata: records, share of zeros, the preferred model (the study's
  ``preferred``, else the best by LOO) and its stacking weight, the sampler flags of the
  preferred model and any prior-sensitivity flags its report raised, and for strata that
  did not run, why (``tables/strata.csv``);
- the chosen coefficient (``[overview] term`` and ``part``) of each stratum's preferred
  model as a rate ratio or odds ratio with its interval (``tables/coefficient_by_stratum.csv``
  and a figure);
- the chosen scenario prediction (``[overview] scenario`` at its varied column's value
  ``at``) of each stratum's preferred model with its interval
  (``tables/scenario_by_stratum.csv`` and a figure);
- links to every stratum's page.

Example
-------
>>> write_overview(study, plan, manifest, "moth-report")               # doctest: +SKIP
'/abs/moth-report/overview/report.html'
"""

from __future__ import annotations

import os
from collections.abc import Callable
from typing import TYPE_CHECKING, Any

import numpy as np
import pandas as pd
from matplotlib.figure import Figure as MplFigure

from bayeszi.answers.sensitivity import READING
from bayeszi.app.report.document import Document, Figure, Links, Section, Table, Text
from bayeszi.app.report.figures import _plain_log_axis
from bayeszi.app.report.output import OutputFolder
from bayeszi.app.report.sections.common import interval_labels
from bayeszi.app.report.write import REPORT_NAME, slug, write_document

if TYPE_CHECKING:
    from bayeszi.app.manifest import Manifest
    from bayeszi.app.strata import StrataPlan
    from bayeszi.app.study import Study

OVERVIEW_FOLDER = "overview"


def _read(folder: str, name: str) -> pd.DataFrame | None:
    path = os.path.join(folder, "tables", f"{slug(name)}.csv")
    return pd.read_csv(path) if os.path.isfile(path) else None


def preferred_model(study: Study, folder: str) -> tuple[str, float]:
    """A finished stratum's preferred model and its stacking weight (1 when alone)."""
    names = [c.name for c in study.candidates]
    loo = _read(folder, "loo_comparison")
    weight_col = "stacking weight"
    if study.preferred:
        name = study.preferred
    elif loo is not None and len(loo):
        name = str(loo.sort_values("place").iloc[0]["model"]) if "place" in loo else \
            str(loo.iloc[0]["model"])
    else:
        name = names[0]
    weight = 1.0
    if loo is not None and weight_col in loo.columns and len(loo) > 1:
        row = loo[loo["model"].astype(str) == name]
        weight = float(row[weight_col].iloc[0]) if len(row) else float("nan")
    return name, weight


def _flags(folder: str, model: str) -> tuple[str, str]:
    """The preferred model's sampler flags and the readings of its prior-sensitivity table
    (each distinct reading once, with the parameters it concerns)."""
    diag = _read(folder, "diagnostics")
    sampler = ""
    if diag is not None and "flag" in diag.columns:
        row = diag[diag["model"].astype(str) == model]
        sampler = "" if row.empty or pd.isna(row["flag"].iloc[0]) else str(row["flag"].iloc[0])
    sens = _read(folder, f"sensitivity_{model}")
    if sens is None or READING not in sens.columns:
        return sampler, ""
    flagged = sens[sens[READING].fillna("").astype(str).str.strip() != ""]
    label = [c for c in ("part", "term") if c in flagged.columns] or [flagged.columns[0]]
    readings: dict[str, list[str]] = {}
    for _, r in flagged.iterrows():
        readings.setdefault(str(r[READING]), []).append(" ".join(str(r[c]) for c in label))
    return sampler, "; ".join(f"{k} ({', '.join(v[:3])}{' ...' if len(v) > 3 else ''})"
                              for k, v in readings.items())


def _coefficient(study: Study, folder: str, model: str, stratum: str) -> dict[str, Any] | None:
    table = _read(folder, f"coefficients_{model}")
    if table is None:
        return None
    part = study.overview.part
    rows = table[(table["part"] == part) & (table["term"] != "Intercept")]
    term = study.overview.term or (str(rows["term"].iloc[0]) if len(rows) else None)
    row = rows[rows["term"].astype(str) == term] if term else rows.iloc[0:0]
    lo, hi = interval_labels(study.interval)
    out: dict[str, Any] = {"stratum": stratum, "model": model, "part": part, "term": term}
    if row.empty:
        out["note"] = f"model {model} has no {part} term {term!r}"
        return out
    r = row.iloc[0]
    out.update({"scale": r.get("exp scale", ""), "ratio": r["exp(mean)"],
                f"ratio {lo}": r[f"exp {lo}"], f"ratio {hi}": r[f"exp {hi}"],
                "mean": r["mean"], lo: r[lo], hi: r[hi], "note": ""})
    return out


def _scenario(study: Study, folder: str, model: str, stratum: str) -> dict[str, Any] | None:
    if not study.scenarios:
        return None
    name = study.overview.scenario or study.scenarios[0].name
    scn = study.scenario(name)
    table = _read(folder, "scenario_predictions")
    if table is None:
        return None
    rows = table[(table["scenario"] == name) & (table["model"].astype(str) == model)]
    out: dict[str, Any] = {"stratum": stratum, "model": model, "scenario": name}
    if scn.vary:
        col, values = next(iter(scn.vary.items()))
        at = study.overview.at if study.overview.at is not None else values[0]
        same = np.isclose(pd.to_numeric(rows[col], errors="coerce"), float(at)) \
            if isinstance(at, (int, float)) else rows[col].astype(str) == str(at)
        rows = rows[same]
        out["setting"] = f"{col} = {at}"
    if rows.empty:
        out["note"] = f"no prediction of model {model} in scenario {name!r}"
        return out
    lo, hi = interval_labels(study.interval)
    quantity = rows["quantity"].iloc[0]
    r = rows[rows["quantity"] == quantity].iloc[0]
    out.update({"quantity": quantity, "mean": r["mean"], lo: r[lo], hi: r[hi], "note": ""})
    return out


def _interval_figure(frame: pd.DataFrame, value: str, lo: str, hi: str, xlabel: str,
                     title: str, log: bool) -> MplFigure:
    """Each stratum's value with its interval, one row per stratum."""
    fig = MplFigure(figsize=(7.0, 1.0 + 0.32 * max(3, len(frame))))
    ax = fig.add_subplot()
    rows = frame.iloc[::-1]
    y = np.arange(len(rows))
    ax.hlines(y, rows[lo], rows[hi], color="#2b6a99", lw=2.0)
    ax.plot(rows[value], y, "o", color="#2b6a99")
    if log:
        ax.axvline(1.0, color="#6b7785", lw=1, ls="--")
        _plain_log_axis(ax)
    ax.set_yticks(y)
    ax.set_yticklabels(rows["stratum"], fontsize=8)
    ax.set_xlabel(xlabel)
    ax.set_title(title, fontsize=11)
    ax.spines[["top", "right"]].set_visible(False)
    fig.tight_layout()
    return fig


def overview_tables(study: Study, plan: StrataPlan, manifest: Manifest, out: str
                    ) -> tuple[pd.DataFrame, pd.DataFrame, pd.DataFrame]:
    """The strata table, the coefficient by stratum and the scenario by stratum."""
    rows, coefs, scens = [], [], []
    for s in plan.strata:
        entry = manifest.entries.get(s.name, {})
        status = entry.get("status", "not run")
        folder = os.path.join(out, entry.get("folder", ""))
        row: dict[str, Any] = {"stratum": s.name, **dict(s.values), "status": status,
                               "records": s.records, "zero share": s.zero_share}
        if status == "done":
            model, weight = preferred_model(study, folder)
            sampler, sens = _flags(folder, model)
            row.update({"preferred model": model, "stacking weight": weight,
                        "sampler flags": sampler, "sensitivity flags": sens,
                        "report": os.path.relpath(os.path.join(folder, REPORT_NAME),
                                                  os.path.join(out, OVERVIEW_FOLDER))})
            for found, into in ((_coefficient(study, folder, model, s.name), coefs),
                                (_scenario(study, folder, model, s.name), scens)):
                if found is not None:
                    into.append(found)
        row["reason"] = entry.get("reason", s.skipped)
        rows.append(row)
    return pd.DataFrame(rows), pd.DataFrame(coefs), pd.DataFrame(scens)


def _sections(study: Study, strata: pd.DataFrame, coefs: pd.DataFrame,
              scens: pd.DataFrame) -> list[Section]:
    lo, hi = interval_labels(study.interval)
    done = strata[strata["status"] == "done"]
    summary = (f"{len(strata)} strata by {', '.join(study.strata)}: {len(done)} done, "
               f"{int((strata['status'] == 'failed').sum())} failed, "
               f"{int((strata['status'] == 'skipped').sum())} skipped. Each stratum ran every "
               "candidate model on its own records; the numbers below are those of its "
               "preferred model (the study's choice, else the best by LOO).")
    shown = [c for c in strata.columns if c != "report"]
    sections = [Section("strata", "Strata", [
        Text(summary),
        Table("strata", strata, "Strata: size, preferred model, flags", columns=shown,
              flag_column="reason"),
        Links([(f"{r['stratum']}: report", r["report"]) for _, r in done.iterrows()]),
    ])]
    usable = coefs[coefs.get("note", pd.Series(dtype=str)).fillna("") == ""] \
        if len(coefs) else coefs
    if len(usable):
        term, part = usable["term"].iloc[0], usable["part"].iloc[0]
        what = "rate ratio" if part == "counts" else "odds ratio"
        sections.append(Section("coefficient", f"{term} ({part} part) across strata", [
            Text(f"The {what} of {term} in each stratum's preferred model, with its central "
                 f"{study.interval:.0%} interval; 1 means no effect."),
            Table("coefficient_by_stratum", coefs, f"{term}: {what} by stratum", flag_column=None),
            Figure("coefficient_by_stratum", _interval_figure(
                usable, "ratio", f"ratio {lo}", f"ratio {hi}", f"{what} of {term}",
                f"{term} ({part} part) by stratum", log=True),
                f"{what.capitalize()} of {term} by stratum, {study.interval:.0%} intervals."),
        ]))
    usable = scens[scens["note"].fillna("") == ""] if len(scens) else scens
    if len(usable):
        r = usable.iloc[0]
        where = f" at {r['setting']}" if "setting" in usable.columns else ""
        sections.append(Section("scenario", f"Scenario '{r['scenario']}' across strata", [
            Text(f"{r['quantity']} in scenario '{r['scenario']}'{where}, per stratum's "
                 f"preferred model, with its central {study.interval:.0%} interval."),
            Table("scenario_by_stratum", scens, f"Scenario '{r['scenario']}' by stratum",
                  flag_column=None),
            Figure("scenario_by_stratum", _interval_figure(
                usable, "mean", lo, hi, str(r["quantity"]), f"'{r['scenario']}'{where}",
                log=False), f"{r['quantity']} by stratum, {study.interval:.0%} intervals."),
        ]))
    return sections


def write_overview(study: Study, plan: StrataPlan, manifest: Manifest, out: str,
                   progress: Callable[[str], None] = lambda _: None) -> str:
    """Write ``out/overview/`` (see the module text); returns the page's path."""
    strata, coefs, scens = overview_tables(study, plan, manifest, out)
    doc = Document(f"{study.title}: overview of the strata", study.summary,
                   _sections(study, strata, coefs, scens))
    footer = [f"Strata manifest: {os.path.join(out, 'manifest.json')}",
              f"Study file: {study.path} (sha256 {study.study_sha256()})"]
    with OutputFolder(os.path.join(out, OVERVIEW_FOLDER)) as folder:
        write_document(doc, folder, footer)
        dest = folder.commit()
    page = os.path.join(dest, REPORT_NAME)
    progress(f"overview written: {page}")
    return page


__all__ = ["OVERVIEW_FOLDER", "overview_tables", "preferred_model", "write_overview"]
