"""Split a study's data into strata and decide, before any sampling, which strata can run.

A study file's ``strata`` (in ``[study]``) names one or more columns, e.g. ``["group",
"region"]``; every combination of their values present in the data is one *stratum*, which
gets the whole single-study pipeline (every candidate, LOO, checks, scenarios) on its own
rows. :func:`plan_strata` checks the strata columns (present, no missing values), splits
the rows, and checks each stratum as the single-study run would (columns, formulas,
factor levels of the scenarios) without sampling. A stratum with fewer than
``min_records`` records, or one whose check fails (all counts zero, no zeros for a hurdle
family, a scenario level it lacks), is *skipped* with the reason; the others run.

Each stratum has a key: a hash of its rows (as CSV) and of the study (the study file's
bytes, the effective settings of every candidate, the strata columns, whether compiled
densities are reused, bayeszi's version). A finished stratum whose key is unchanged is not
run again by ``--resume`` (:mod:`bayeszi.app.manifest`).

Example
-------
>>> import pandas as pd
>>> df = pd.DataFrame({"sp": ["a", "a", "b"], "y": [0, 1, 2]})
>>> [(name, len(rows)) for name, _, rows in split_rows(df, ("sp",))]
[('a', 2), ('b', 1)]
"""

from __future__ import annotations

import dataclasses
import difflib
import hashlib
import json
import warnings
from collections.abc import Iterator, Sequence
from dataclasses import dataclass, field
from typing import Any

import pandas as pd

from bayeszi.app.report.write import slug
from bayeszi.app.study import Study
from bayeszi.base.errors import BayesziError
from bayeszi.base.version import __version__
from bayeszi.model.validate import rows_text

#: how the values of several strata columns are joined in a stratum's name
JOIN = " / "


@dataclass(frozen=True)
class Stratum:
    """One stratum: its name ("emerald / coast"), the values that define it, its folder
    name, its key and size, and why it is skipped (empty when it runs).

    Example
    -------
    >>> Stratum("a", (("sp", "a"),), "a", "k", 40, 0.5).runs
    True
    """

    name: str
    values: tuple[tuple[str, Any], ...]
    folder: str
    key: str
    records: int
    zero_share: float
    skipped: str = ""
    rows: pd.DataFrame | None = field(default=None, compare=False, repr=False)

    @property
    def runs(self) -> bool:
        """Whether the stratum is fitted (it is not skipped)."""
        return not self.skipped


@dataclass(frozen=True)
class StrataPlan:
    """Every stratum of a study, in order, and the study's key.

    Example
    -------
    >>> plan = plan_strata(study, data)                               # doctest: +SKIP
    >>> [s.name for s in plan.running]                                # doctest: +SKIP
    ['emerald / coast', 'emerald / lowland']
    """

    study_key: str
    strata: tuple[Stratum, ...]

    @property
    def running(self) -> list[Stratum]:
        """The strata that are fitted."""
        return [s for s in self.strata if s.runs]

    @property
    def skipped(self) -> list[Stratum]:
        """The strata that are skipped, with their reasons."""
        return [s for s in self.strata if not s.runs]


def check_columns(data: pd.DataFrame, columns: Sequence[str]) -> None:
    """Refuse strata columns that are missing or hold missing values, naming them.

    Example
    -------
    >>> check_columns(pd.DataFrame({"sp": ["a", None]}), ["sp"])
    Traceback (most recent call last):
    ...
    bayeszi.base.errors.BayesziError: strata column 'sp' ([study] strata) has missing ...
    """
    if not columns:
        raise BayesziError("the study names no strata; add strata = [\"COLUMN\"] to [study]")
    have = [str(c) for c in data.columns]
    for col in columns:
        if col not in data.columns:
            near = difflib.get_close_matches(col, have, n=1)
            hint = f" (did you mean {near[0]!r}?)" if near else ""
            raise BayesziError(f"strata column {col!r} ([study] strata) is not a column of the "
                               f"data{hint}; columns: {have[:20]}")
        missing = data[col].isna().to_numpy()
        if missing.any():
            raise BayesziError(
                f"strata column {col!r} ([study] strata) has missing values at row(s) "
                f"{rows_text(data.index, missing)}; fill them in or drop those rows, since a "
                "record without its stratum cannot be placed")


def split_rows(data: pd.DataFrame, columns: Sequence[str]
               ) -> Iterator[tuple[str, tuple[tuple[str, Any], ...], pd.DataFrame]]:
    """Each stratum's name, defining values and rows (renumbered from 0), sorted by value.

    Example
    -------
    >>> df = pd.DataFrame({"sp": ["b", "a", "a"], "area": ["x", "y", "y"], "y": [1, 0, 2]})
    >>> [(name, values) for name, values, _ in split_rows(df, ("sp", "area"))]
    [('a / y', (('sp', 'a'), ('area', 'y'))), ('b / x', (('sp', 'b'), ('area', 'x')))]
    """
    for values, rows in data.groupby(list(columns), sort=True, dropna=False):
        values = values if isinstance(values, tuple) else (values,)
        pairs = tuple((c, _plain(v)) for c, v in zip(columns, values, strict=True))
        name = JOIN.join(str(v) for _, v in pairs)
        yield name, pairs, rows.reset_index(drop=True)


def _plain(value: Any) -> Any:
    """A NumPy scalar as the Python number or text it holds."""
    return value.item() if hasattr(value, "item") else value


def rows_sha256(rows: pd.DataFrame) -> str:
    """SHA-256 of a stratum's rows written as CSV (no index), the hash its key rests on.

    >>> rows_sha256(pd.DataFrame({"y": [1]}))[:12]
    'b6ff7597e869'
    """
    text = rows.to_csv(index=False, lineterminator="\n")
    return hashlib.sha256(text.encode("utf-8")).hexdigest()


def study_key(study: Study) -> str:
    """A hash of everything about the study that changes a stratum's results.

    Example
    -------
    >>> len(study_key(load_study("examples/moth_traps/study.toml")))  # doctest: +SKIP
    64
    """
    facts = {
        "study_sha256": study.study_sha256(),
        "candidates": [[c.name, _result_settings(c.spec.to_dict())] for c in study.candidates],
        "strata": list(study.strata),
        "reuse": study.cluster.reuse,
        "bayeszi": __version__,
    }
    text = json.dumps(facts, sort_keys=True, default=str)
    return hashlib.sha256(text.encode("utf-8")).hexdigest()


def _result_settings(spec: dict[str, Any]) -> dict[str, Any]:
    """A spec as a dictionary without the settings that change no number (the progress
    display), so that a run from the command line and one from Python share keys."""
    sampler = {k: v for k, v in dict(spec.get("sampler", {})).items() if k != "progressbar"}
    return {**spec, "sampler": sampler}


def stratum_study(study: Study, name: str) -> Study:
    """The single study one stratum runs: the study with the stratum's name in its title.

    Example
    -------
    >>> stratum_study(study, "pug / coast").title                    # doctest: +SKIP
    'Moths at light traps: pug / coast'
    """
    return dataclasses.replace(study, title=f"{study.title}: {name}", strata=())


def _reason(study: Study, name: str, rows: pd.DataFrame) -> str:
    """Why the stratum cannot run ("" when it can), found without sampling."""
    if len(rows) < study.min_records:
        return (f"only {len(rows)} records; a stratum needs at least {study.min_records} "
                "(min_records in [study])")
    try:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")  # shown again, in the stratum's own report
            stratum_study(study, name).check(rows)
    except BayesziError as err:
        return " ".join(str(err).split())
    return ""


def plan_strata(study: Study, data: pd.DataFrame) -> StrataPlan:
    """Split ``data`` by the study's strata columns and check every stratum (no sampling).

    A stratum that cannot run is kept in the plan with its reason; a study whose strata
    columns are missing or hold missing values is a :class:`BayesziError`.

    Example
    -------
    >>> study = load_study("examples/moth_traps/study.toml")          # doctest: +SKIP
    >>> plan = plan_strata(study, study.load_data())                  # doctest: +SKIP
    >>> plan.skipped[0].name, plan.skipped[0].skipped                 # doctest: +SKIP
    ('emerald / island', 'only 20 records; a stratum needs at least 40 (min_records in [study])')
    """
    check_columns(data, study.strata)
    key = study_key(study)
    response = study.response
    out: list[Stratum] = []
    folders: set[str] = set()
    for name, pairs, rows in split_rows(data, study.strata):
        folder = base = slug(name.replace(JOIN, "-"))
        k = 2
        while folder.lower() in folders:
            folder, k = f"{base}-{k}", k + 1
        folders.add(folder.lower())
        share = float((rows[response] == 0).mean()) if response in rows.columns else float("nan")
        digest = hashlib.sha256(f"{key}:{rows_sha256(rows)}".encode()).hexdigest()
        out.append(Stratum(name, pairs, folder, digest, len(rows), share,
                           _reason(study, name, rows), rows))
    return StrataPlan(key, tuple(out))


__all__ = ["JOIN", "StrataPlan", "Stratum", "check_columns", "plan_strata", "rows_sha256",
           "split_rows", "study_key", "stratum_study"]
