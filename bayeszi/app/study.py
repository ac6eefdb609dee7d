"""Read and check a study file: the data, the candidate models, the sampler and the scenarios.

A study file is TOML in bayeszi's own schema (documented in docs/study-file.md). It is read
strictly: an unknown key anywhere is a :class:`~bayeszi.base.errors.BayesziError` that names the
key, where it sits and the keys allowed there. :func:`load_study` only reads and checks the
file itself; :meth:`Study.check` then checks the study against its data (columns, formulas,
priors, factor levels of the scenarios) without sampling, so a bad study fails in seconds.
Its candidates are :class:`bayeszi.fitting.candidates.Candidate` objects, checked and fitted
by the same functions as :func:`bayeszi.fit_candidates`.

Example
-------
>>> from bayeszi.app.study import load_study, demo_study_path
>>> study = load_study(demo_study_path())
>>> [c.name for c in study.candidates][:1]
['zinb-reach']
>>> study.response, study.exposure
('crayfish', 'trap_nights')
"""

from __future__ import annotations

import dataclasses
import difflib
import hashlib
import os
import re
import tomllib
from collections.abc import Iterator, Mapping
from dataclasses import dataclass, field
from importlib import resources
from typing import Any

import pandas as pd

from bayeszi.base.errors import BayesziError
from bayeszi.base.options import GROUP_MODES, check_group_mode
from bayeszi.base.renamed import refuse_renamed
from bayeszi.base.spec import ModelSpec, SamplerSettings
from bayeszi.fitting.candidates import Candidate, CheckedCandidates, check_candidates

# Allowed keys, per table. Kept here so that the error messages and docs/study-file.md agree.
TOP_KEYS = ("study", "sampler", "model", "scenario", "contrast", "overview", "cluster")
STUDY_KEYS = ("title", "summary", "data", "response", "exposure", "offset", "exposure_unit",
              "groups", "nested", "seed", "interval", "preferred", "predictions",
              "exact_refits", "residuals_against", "preview", "vector_figures", "strata",
              "min_records")
SAMPLER_KEYS = ("draws", "warmup_steps", "chains", "cores", "acceptance_target", "sampler",
                "until_enough", "block_draws", "draws_limit")
MODEL_KEYS = ("name", "family", "counts", "zeros", "groups", "varying", "nested",
              "correlated", "priors", "sampler")
MODEL_SAMPLER_KEYS = ("draws", "warmup_steps", "acceptance_target")
SCENARIO_KEYS = ("name", "values", "vary", "groups")
CONTRAST_KEYS = ("name", "scenario", "change")
#: [overview]: what the strata overview puts side by side (docs/strata.md)
OVERVIEW_KEYS = ("term", "part", "scenario", "at")
#: [cluster]: where the strata run (docs/strata.md)
CLUSTER_KEYS = ("scheduler", "workers", "reuse")
#: strata with fewer records are skipped (a rule of thumb, common practice: about ten
#: records per coefficient of a small two-part model; raise it for bigger models)
MIN_RECORDS = 30
#: values of ``predictions`` in [study]: every model's scenario predictions (the default),
#: only those of the models averaged by their stacking weights, or both
PREDICTIONS = ("models", "averaged", "both")
#: values of ``preview`` in [study]: no preview (the default), a quick approximate preview of
#: every candidate before sampling them, or the previews alone, without sampling
PREVIEWS = ("no", "first", "only")
SCENARIO_GROUPS = tuple(GROUP_MODES)
_NAME = re.compile(r"^[A-Za-z0-9][^\x00-\x1f/\\]{0,79}$")


def _where(table: str, index: int | None = None, name: str | None = None) -> str:
    if index is None:
        return f"[{table}]"
    label = f"[[{table}]] number {index + 1}"
    return label + (f" ({name!r})" if name else "")


def _strict(table: Any, known: tuple[str, ...], where: str) -> dict[str, Any]:
    """Refuse a non-table or any key not in ``known``, naming it and listing the known ones."""
    if not isinstance(table, Mapping):
        raise BayesziError(f"{where} must be a table of settings, got {type(table).__name__}")
    refuse_renamed(table, where)
    for key in table:
        if key not in known:
            near = difflib.get_close_matches(str(key), known, n=1)
            hint = f" (did you mean {near[0]!r}?)" if near else ""
            raise BayesziError(f"unknown key {key!r} in {where}{hint}; known keys there: "
                               f"{', '.join(known)}")
    return dict(table)


def _text(value: Any, key: str, where: str, required: bool = False) -> str | None:
    if value is None:
        if required:
            raise BayesziError(f"{where} needs {key!r}")
        return None
    if not isinstance(value, str) or not value.strip():
        raise BayesziError(f"{key!r} in {where} must be a non-empty text, got {value!r}")
    return value.strip()


def _names(value: Any, key: str, where: str) -> tuple[str, ...]:
    if value is None:
        return ()
    if isinstance(value, str):
        value = [value]
    if not isinstance(value, list) or not all(isinstance(v, str) and v for v in value):
        raise BayesziError(f"{key!r} in {where} must be a column name or a list of them, got "
                           f"{value!r}")
    return tuple(value)


def _scalar(value: Any, key: str, where: str) -> Any:
    if isinstance(value, bool):
        return int(value)
    if isinstance(value, (int, float, str)):
        return value
    raise BayesziError(f"{key!r} in {where} must be a number or a text label, got {value!r}")


@dataclass(frozen=True)
class Scenario:
    """A named setting of the predictors to predict at.

    ``values`` fixes columns to one value each; ``vary`` gives one column a list of values
    (one prediction row per value). ``groups`` says which group effects to use: ``"new"`` a
    group not in the data (drawn from the population), ``"known"`` the group named in
    ``values``, ``"average"`` the average over new groups, ``"typical"`` the population
    centre (group effects of 0); see :data:`bayeszi.base.options.GROUP_MODES`.
    """

    name: str
    values: Mapping[str, Any]
    vary: Mapping[str, tuple[Any, ...]] = field(default_factory=dict)
    groups: str = "new"

    def frame(self, exposure: str | None = None) -> pd.DataFrame:
        """The prediction rows (exposure set to 1 unit unless the scenario gives it)."""
        rows: list[dict[str, Any]] = [dict(self.values)]
        for col, options in self.vary.items():
            rows = [{**r, col: v} for r in rows for v in options]
        df = pd.DataFrame(rows)
        if exposure is not None and exposure not in df.columns:
            df[exposure] = 1.0
        return df


@dataclass(frozen=True)
class Contrast:
    """A comparison of scenario ``scenario`` with the same rows after ``change``."""

    name: str
    scenario: str
    change: Mapping[str, Any]


@dataclass(frozen=True)
class Overview:
    """What the strata overview compares across strata: the coefficient of ``term`` in
    ``part`` (as a rate or odds ratio) and the prediction of scenario ``scenario`` at the
    value ``at`` of its varied column (None: the first value; None scenario: the first).

    Example
    -------
    >>> Overview(term="depth").part
    'counts'
    """

    term: str | None = None
    part: str = "counts"
    scenario: str | None = None
    at: Any = None


@dataclass(frozen=True)
class Cluster:
    """Where the strata of a study run: a Dask scheduler's address (None: a local cluster
    of ``workers`` processes, None: sized to the machine) and whether fits of one model
    structure reuse its compiled density (``reuse``).

    Example
    -------
    >>> Cluster().reuse
    True
    """

    scheduler: str | None = None
    workers: int | None = None
    reuse: bool = True


@dataclass(frozen=True)
class Study:
    """A checked study file. Build it with :func:`load_study`."""

    path: str
    data_path: str
    response: str
    candidates: tuple[Candidate, ...]
    title: str = "bayeszi study"
    summary: str = ""
    exposure: str | None = None
    offset: str | None = None
    exposure_unit: str | None = None
    groups: tuple[str, ...] = ()
    seed: int | None = None
    interval: float = 0.9
    preferred: str | None = None
    predictions: str = "models"
    exact_refits: bool = False
    vector_figures: bool = False
    residuals_against: str | None = None
    preview: str = "no"
    sampler: SamplerSettings = field(default_factory=SamplerSettings)
    scenarios: tuple[Scenario, ...] = ()
    contrasts: tuple[Contrast, ...] = ()
    strata: tuple[str, ...] = ()
    min_records: int = MIN_RECORDS
    overview: Overview = field(default_factory=Overview)
    cluster: Cluster = field(default_factory=Cluster)

    # ------------------------------------------------------------------ data
    def load_data(self) -> pd.DataFrame:
        """Read the data file (CSV); a missing or unreadable file is a BayesziError."""
        return read_table(self.data_path, self.path)

    def data_sha256(self) -> str:
        """SHA-256 of the data file's bytes (for the reproducibility footer)."""
        return sha256_of(self.data_path)

    def study_sha256(self) -> str:
        """SHA-256 of the study file's bytes."""
        return sha256_of(self.path)

    @property
    def unit(self) -> str:
        """The exposure unit for plain-language text, e.g. ``"trap night"``."""
        if self.exposure_unit:
            return self.exposure_unit
        if self.exposure:
            return f"unit of {self.exposure}"
        return "record"

    def candidate(self, name: str) -> Candidate:
        """The candidate called ``name``."""
        for c in self.candidates:
            if c.name == name:
                return c
        raise BayesziError(f"no model called {name!r}; models: {[c.name for c in self.candidates]}")

    def scenario(self, name: str) -> Scenario:
        """The scenario called ``name``."""
        for s in self.scenarios:
            if s.name == name:
                return s
        raise BayesziError(f"no scenario called {name!r}; scenarios: "
                           f"{[s.name for s in self.scenarios]}")

    # ------------------------------------------------------------------ checks
    def check(self, data: pd.DataFrame) -> CheckedCandidates:
        """Check every candidate and scenario against ``data`` without sampling.

        Builds each candidate's design and priors (response, formulas, exposure, groups;
        each data warning shown once) and encodes every scenario and contrast row with it
        (columns present, factor levels known). Returns the checked candidates, ready for
        :func:`bayeszi.fitting.candidates.fit_each`.
        """
        if self.response not in data.columns:
            near = difflib.get_close_matches(self.response, [str(c) for c in data.columns], n=3)
            hint = f" Did you mean {near}?" if near else ""
            raise BayesziError(
                f"response {self.response!r} ([study] response) is not a column of "
                f"{os.path.basename(self.data_path)}; columns: {list(map(str, data.columns))[:20]}."
                f"{hint}"
            )
        self._check_residuals_against(data)
        checked = check_candidates(data, self.candidates, noun="model")
        designs = checked.designs
        used = sorted({c for d in designs.values() for c in d.used_columns} - {self.response})
        for s in self.scenarios:
            for col in [*s.values, *s.vary]:
                _known_column(col, used, f"scenario '{s.name}'")
            rows = s.frame(self.exposure)
            for name, d in designs.items():
                self._check_rows(s.name, rows, d, s.groups, name)
        for ct in self.contrasts:
            for col in ct.change:
                _known_column(col, used, f"contrast '{ct.name}'")
            s = self.scenario(ct.scenario)
            rows = s.frame(self.exposure).assign(**dict(ct.change))
            for name, d in designs.items():
                self._check_rows(f"{ct.scenario}' changed by contrast '{ct.name}", rows, d,
                                 s.groups, name)
        return checked

    def _check_residuals_against(self, data: pd.DataFrame) -> None:
        col = self.residuals_against
        if col is not None and col not in data.columns:
            near = difflib.get_close_matches(col, [str(c) for c in data.columns], n=1)
            hint = f" (did you mean {near[0]!r}?)" if near else ""
            raise BayesziError(
                f"'residuals_against' in [study] names {col!r}{hint}, which is not a column of "
                f"{os.path.basename(self.data_path)}; columns available: "
                f"{list(map(str, data.columns))}")

    @staticmethod
    def _check_rows(label: str, rows: pd.DataFrame, design: Any, groups: str, model: str
                    ) -> None:
        try:
            enc = design.encode(rows)
        except BayesziError as err:
            raise BayesziError(f"scenario '{label}' (model {model!r}): {err}") from None
        if groups == "known":
            for g in design.groups:
                codes = enc.group_codes.get(g.name)
                if codes is None:
                    raise BayesziError(
                        f"scenario '{label}' asks for known groups, but its values do not name "
                        f"the group column {g.name!r}; add e.g. {g.name} = {g.levels[0]!r}, or "
                        "use groups = \"new\""
                    )
                if (codes < 0).any():
                    raise BayesziError(
                        f"scenario '{label}': {g.name} level(s) not in the data; known levels: "
                        f"{g.levels[:20]}"
                    )

    # ------------------------------------------------------------------ overrides
    def with_preview(self, preview: str | None) -> Study:
        """A copy with the preview choice changed (``None`` keeps the study's)."""
        if preview is None:
            return self
        return dataclasses.replace(self, preview=check_preview(preview, "--preview"))

    def with_sampler(self, **changes: Any) -> Study:
        """A copy with sampler settings changed (``None`` values are ignored)."""
        changes = {k: v for k, v in changes.items() if v is not None}
        if not changes:
            return self
        if "draws" in changes:  # a fixed number asked for
            changes.setdefault("until_enough", False)
        if changes.get("chains") == 1:
            changes.setdefault("until_enough", False)
        sampler = dataclasses.replace(self.sampler, **changes)
        cands = tuple(Candidate(c.name, dataclasses.replace(
            c.spec, sampler=dataclasses.replace(c.spec.sampler, **changes)))
            for c in self.candidates)
        return dataclasses.replace(self, sampler=sampler, candidates=cands)


def _until_enough_default(raw: Mapping[str, Any]) -> dict[str, Any]:
    """[sampler] with ``until_enough`` filled in: a study file draws until enough unless it
    asks for a fixed ``draws`` or a single chain (R-hat needs two).

    >>> _until_enough_default({})["until_enough"], _until_enough_default({"draws": 500})
    (True, {'draws': 500, 'until_enough': False})
    """
    out = dict(raw)
    if out.get("until_enough") is True and "draws" in out:
        raise BayesziError("[sampler]: give 'draws' (a fixed number per chain) or "
                           "'until_enough = true' (blocks until R-hat and ESS pass, at most "
                           "'draws_limit'), not both")
    if "until_enough" not in out:
        out["until_enough"] = "draws" not in out and out.get("chains", 2) != 1
    return out


def _known_column(col: str, used: list[str], where: str) -> None:
    """A scenario or contrast may only set columns that some model uses."""
    if col not in used:
        near = difflib.get_close_matches(col, used, n=1)
        hint = f" (did you mean {near[0]!r}?)" if near else ""
        raise BayesziError(f"{where} sets column {col!r}{hint}, which no model uses, so it "
                           f"would change nothing; columns the models use: {used}")


# ---------------------------------------------------------------------- reading
def sha256_of(path: str) -> str:
    """SHA-256 hex digest of a file's bytes."""
    h = hashlib.sha256()
    with open(path, "rb") as fh:
        for chunk in iter(lambda: fh.read(1 << 20), b""):
            h.update(chunk)
    return h.hexdigest()


def read_table(path: str, named_in: str | None = None) -> pd.DataFrame:
    """Read a CSV data file; a missing, empty or unreadable file is a BayesziError."""
    where = f" (named in {named_in})" if named_in else ""
    if not os.path.isfile(path):
        raise BayesziError(f"data file {path!r}{where} does not exist; paths in a study file are "
                           "relative to the study file's folder")
    try:
        df = pd.read_csv(path, keep_default_na=True)
    except (pd.errors.ParserError, pd.errors.EmptyDataError, UnicodeDecodeError,
            OSError) as err:
        first = str(err).strip().splitlines()[0] if str(err).strip() else type(err).__name__
        raise BayesziError(f"data file {path!r}{where} cannot be read as CSV: {first}") from None
    if len(df) == 0:
        raise BayesziError(f"data file {path!r}{where} has no rows")
    return df


def demo_study_path() -> str:
    """Path of the shipped crayfish study (``bayeszi/data/crayfish_study.toml``)."""
    return str(resources.files("bayeszi.data").joinpath("crayfish_study.toml"))


def load_study(path: str) -> Study:
    """Read and check a study file (see docs/study-file.md); errors are BayesziErrors."""
    path = os.path.abspath(os.fspath(path))
    if not os.path.isfile(path):
        raise BayesziError(f"study file {path!r} does not exist")
    try:
        with open(path, "rb") as fh:
            raw = tomllib.load(fh)
    except tomllib.TOMLDecodeError as err:
        raise BayesziError(f"study file {os.path.basename(path)} is not valid TOML: {err}") \
            from None
    except UnicodeDecodeError:
        raise BayesziError(f"study file {os.path.basename(path)} is not UTF-8 text") from None
    return parse_study(raw, path)


def parse_study(raw: Mapping[str, Any], path: str) -> Study:
    """Build a :class:`Study` from a parsed TOML mapping (``path`` anchors relative paths).

    Example
    -------
    >>> study = parse_study({"study": {"data": "d.csv", "response": "y"},
    ...                      "model": [{"name": "p", "family": "poisson", "counts": "x"}]},
    ...                     "/tmp/study.toml")
    >>> study.data_path, study.candidates[0].spec.counts
    ('/tmp/d.csv', 'y ~ x')
    """
    top = _strict(raw, TOP_KEYS, "the study file (top level)")
    if "study" not in top:
        raise BayesziError("the study file needs a [study] table with at least 'data' and "
                           "'response'")
    st = _strict(top["study"], STUDY_KEYS, "[study]")
    data = _text(st.get("data"), "data", "[study]", required=True)
    response = _text(st.get("response"), "response", "[study]", required=True)
    assert data is not None and response is not None
    exposure = _text(st.get("exposure"), "exposure", "[study]")
    offset = _text(st.get("offset"), "offset", "[study]")
    groups = _names(st.get("groups"), "groups", "[study]")
    nested = st.get("nested", {})
    if not isinstance(nested, Mapping):
        raise BayesziError("'nested' in [study] must be a table like { reach = \"river\" }")
    seed, interval = _seed_and_interval(st)
    sampler_raw = _until_enough_default(
        _strict(top.get("sampler", {}), SAMPLER_KEYS, "[sampler]"))
    try:
        sampler = SamplerSettings(**sampler_raw, seed=seed)
    except BayesziError as err:
        raise BayesziError(f"[sampler]: {err}") from None
    cands = [_candidate(m, where, response, exposure, offset, groups, dict(nested), sampler)
             for m, where in _tables(top.get("model"), "model", MODEL_KEYS)]
    _unique([c.name for c in cands], "model")
    scenarios = [_scenario(s, where, response)
                 for s, where in _tables(top.get("scenario"), "scenario", SCENARIO_KEYS)]
    _unique([s.name for s in scenarios], "scenario")
    contrasts = [_contrast(c, where, [s.name for s in scenarios])
                 for c, where in _tables(top.get("contrast"), "contrast", CONTRAST_KEYS)]
    _unique([c.name for c in contrasts], "contrast")
    preferred = _text(st.get("preferred"), "preferred", "[study]")
    strata = _names(st.get("strata"), "strata", "[study]")
    _strata_columns(strata, response, exposure, offset, groups)
    if preferred is not None and preferred not in [c.name for c in cands]:
        raise BayesziError(f"'preferred' in [study] names {preferred!r}, which is not a model; "
                           f"models: {[c.name for c in cands]}")
    return Study(
        path=path, data_path=os.path.normpath(os.path.join(os.path.dirname(path), data)),
        response=response, candidates=tuple(cands),
        title=_text(st.get("title"), "title", "[study]") or "bayeszi study",
        summary=_text(st.get("summary"), "summary", "[study]") or "",
        exposure=exposure, offset=offset,
        exposure_unit=_text(st.get("exposure_unit"), "exposure_unit", "[study]"),
        groups=groups, seed=seed, interval=float(interval), preferred=preferred,
        predictions=_predictions(st), exact_refits=_flag(st, "exact_refits"),
        vector_figures=_flag(st, "vector_figures"),
        residuals_against=_text(st.get("residuals_against"), "residuals_against", "[study]"),
        preview=check_preview(st.get("preview", "no")),
        sampler=sampler, scenarios=tuple(scenarios), contrasts=tuple(contrasts),
        strata=strata, min_records=_min_records(st),
        overview=_overview(top.get("overview", {}), scenarios),
        cluster=_cluster(top.get("cluster", {})),
    )


def _flag(st: Mapping[str, Any], key: str) -> bool:
    """A true/false key of [study] (false when absent)."""
    value = st.get(key, False)
    if not isinstance(value, bool):
        raise BayesziError(f"'{key}' in [study] must be true or false, got {value!r}")
    return value


def _strata_columns(strata: tuple[str, ...], response: str, exposure: str | None,
                    offset: str | None, groups: tuple[str, ...]) -> None:
    """Strata columns may not be the response, the effort or a grouping column."""
    if len(set(strata)) != len(strata):
        raise BayesziError(f"'strata' in [study] names a column twice: {list(strata)}")
    for col in strata:
        role = {response: "the response", exposure: "the exposure", offset: "the offset"}
        if col in role:
            raise BayesziError(f"'strata' in [study] names {col!r}, which is {role[col]}; "
                               "strata are columns such as species or region")
        if col in groups:
            raise BayesziError(f"'strata' in [study] names {col!r}, which is also a grouping "
                               "column; within one stratum it would have one level. Keep it "
                               "in one of the two")


def _min_records(st: Mapping[str, Any]) -> int:
    value = st.get("min_records", MIN_RECORDS)
    if isinstance(value, bool) or not isinstance(value, int) or value < 1:
        raise BayesziError(f"'min_records' in [study] must be a whole number of at least 1, "
                           f"got {value!r}; strata with fewer records are skipped")
    return value


def _overview(raw: Any, scenarios: list[Scenario]) -> Overview:
    """The [overview] table (all keys optional), checked against the scenarios."""
    ov = _strict(raw, OVERVIEW_KEYS, "[overview]")
    term = _text(ov.get("term"), "term", "[overview]")
    part = ov.get("part", "counts")
    if part not in ("counts", "zeros"):
        raise BayesziError(f"'part' in [overview] must be 'counts' or 'zeros', got {part!r}")
    scenario = _text(ov.get("scenario"), "scenario", "[overview]")
    names = [x.name for x in scenarios]
    if scenario is not None and scenario not in names:
        raise BayesziError(f"'scenario' in [overview] names {scenario!r}, which is not a "
                           f"[[scenario]]; scenarios: {names}")
    at = ov.get("at")
    if at is not None:
        at = _scalar(at, "at", "[overview]")
        chosen = next((x for x in scenarios if x.name == scenario), scenarios[0] if
                      scenarios else None)
        options = [v for vs in (chosen.vary.values() if chosen else ()) for v in vs]
        if at not in options:
            raise BayesziError(f"'at' in [overview] is {at!r}, which is not a value the "
                               f"scenario varies; its values: {options}")
    return Overview(term=term, part=part, scenario=scenario, at=at)


def _cluster(raw: Any) -> Cluster:
    """The [cluster] table: a scheduler address, a local cluster's size, reuse on/off."""
    cl = _strict(raw, CLUSTER_KEYS, "[cluster]")
    scheduler = _text(cl.get("scheduler"), "scheduler", "[cluster]")
    workers = cl.get("workers")
    if workers is not None and (isinstance(workers, bool) or not isinstance(workers, int)
                                or workers < 1):
        raise BayesziError(f"'workers' in [cluster] must be a whole number of at least 1, "
                           f"got {workers!r}")
    reuse = cl.get("reuse", True)
    if not isinstance(reuse, bool):
        raise BayesziError(f"'reuse' in [cluster] must be true or false, got {reuse!r}")
    return Cluster(scheduler=scheduler, workers=workers, reuse=reuse)


def _predictions(st: Mapping[str, Any]) -> str:
    """The [study] ``predictions`` choice (:data:`PREDICTIONS`; default ``"models"``)."""
    predictions = st.get("predictions", "models")
    if predictions not in PREDICTIONS:
        raise BayesziError(f"'predictions' in [study] must be one of {list(PREDICTIONS)}, got "
                           f"{predictions!r}: 'models' for each model's scenario predictions, "
                           "'averaged' for the models averaged by their stacking weights, "
                           "'both' for both")
    return predictions


def check_preview(value: Any, where: str = "'preview' in [study]") -> str:
    """A checked preview choice (:data:`PREVIEWS`).

    Example
    -------
    >>> check_preview("first")
    'first'
    """
    if value not in PREVIEWS:
        raise BayesziError(f"{where} must be one of {list(PREVIEWS)}, got {value!r}: 'no' to "
                           "sample at once, 'first' for a quick approximate preview of every "
                           "model before sampling, 'only' for the previews alone (no sampling)")
    return str(value)


def _seed_and_interval(st: Mapping[str, Any]) -> tuple[int | None, float]:
    """The [study] seed (None or a whole number >= 0) and interval (strictly in (0, 1))."""
    seed = st.get("seed")
    if seed is not None and (not isinstance(seed, int) or isinstance(seed, bool) or seed < 0):
        raise BayesziError(f"'seed' in [study] must be a non-negative whole number, got {seed!r}")
    interval = st.get("interval", 0.9)
    if isinstance(interval, bool) or not isinstance(interval, (int, float)) \
            or not 0 < interval < 1:
        raise BayesziError(f"'interval' in [study] must lie strictly between 0 and 1, got "
                           f"{interval!r}; e.g. 0.9 for 90% intervals")
    return seed, float(interval)


def _tables(value: Any, table: str, known: tuple[str, ...]
            ) -> Iterator[tuple[dict[str, Any], str]]:
    """Each [[table]] in turn, checked for unknown keys, with where it sits (for messages)."""
    if table == "model":
        if not value:
            raise BayesziError("the study file names no candidate models; add at least one "
                               "[[model]] table with name, family and counts")
        if not isinstance(value, list):
            raise BayesziError("write each candidate as a [[model]] table (double brackets)")
    for i, item in enumerate(_list(value, table)):
        name = item.get("name") if isinstance(item, Mapping) else None
        where = _where(table, i, name if isinstance(name, str) else None)
        yield _strict(item, known, where), where


def _list(value: Any, table: str) -> list[Any]:
    if value is None:
        return []
    if not isinstance(value, list):
        raise BayesziError(f"write each {table} as a [[{table}]] table (double brackets)")
    return value


def _unique(names: list[str], table: str) -> None:
    seen: set[str] = set()
    for n in names:
        if n in seen:
            raise BayesziError(f"two [[{table}]] tables are both called {n!r}; names must differ")
        seen.add(n)


def _checked_name(value: Any, where: str) -> str:
    name = _text(value, "name", where, required=True)
    assert name is not None
    if not _NAME.match(name):
        raise BayesziError(
            f"name {name!r} in {where} must be 1-80 characters without / or \\, starting with a "
            "letter or digit (it also names output files)"
        )
    return name


def _rhs(value: Any, key: str, where: str, response: str | None) -> str | None:
    text = _text(value, key, where)
    if text is None:
        return None
    if "~" in text:
        lhs, rhs = text.split("~", 1)
        lhs = lhs.strip().strip("`")
        if lhs and key == "zeros":
            raise BayesziError(f"'zeros' in {where} has a response left of '~'; the zeros part "
                               "shares the study's response, so write only the right side, e.g. "
                               "zeros = \"barrier\"")
        if lhs and lhs != response:
            raise BayesziError(
                f"'counts' in {where} has response {lhs!r}, but [study] response is "
                f"{response!r}; write only the right side, e.g. counts = \"depth + canopy\""
            )
        text = rhs.strip()
    if not text:
        raise BayesziError(f"{key!r} in {where} is empty; write \"1\" for an intercept only")
    return text


def _candidate(m: dict[str, Any], where: str, response: str, exposure: str | None,
               offset: str | None, groups: tuple[str, ...], nested: dict[str, str],
               sampler: SamplerSettings) -> Candidate:
    name = _checked_name(m.get("name"), where)
    family = _text(m.get("family"), "family", where, required=True)
    counts = _rhs(m.get("counts"), "counts", where, response)
    if counts is None:
        raise BayesziError(f"{where} needs 'counts', the right side of the counts formula, e.g. "
                           "counts = \"depth + canopy\"")
    zeros = _rhs(m.get("zeros"), "zeros", where, response) or "1"
    m_groups = _names(m["groups"], "groups", where) if "groups" in m else groups
    varying = m.get("varying", {})
    if not isinstance(varying, Mapping):
        raise BayesziError(f"'varying' in {where} must be a table like {{ counts = [\"depth\"] }}")
    m_nested = m.get("nested", nested)
    if not isinstance(m_nested, Mapping):
        raise BayesziError(f"'nested' in {where} must be a table like {{ reach = \"river\" }}")
    m_nested = {k: v for k, v in dict(m_nested).items() if k in m_groups}
    correlated = m.get("correlated", False)
    if not isinstance(correlated, bool):
        raise BayesziError(f"'correlated' in {where} must be true or false")
    priors = m.get("priors", {})
    if not isinstance(priors, Mapping):
        raise BayesziError(f"'priors' in {where} must be a table; see docs/priors.md")
    own = _strict(m.get("sampler", {}), MODEL_SAMPLER_KEYS, f"{where} sampler")
    try:
        spec = ModelSpec(
            counts=f"{_quote(response)} ~ {counts}", zeros=f"~ {zeros}", family=family,
            exposure=exposure, offset=offset, groups=m_groups, varying=dict(varying),
            nested=m_nested, correlated=correlated, priors=dict(priors),
            sampler=dataclasses.replace(
                sampler, **own, **({"until_enough": False} if "draws" in own else {})),
        )
    except BayesziError as err:
        raise BayesziError(f"{where}: {err}") from None
    except TypeError as err:  # a wrongly typed setting inside ModelSpec
        raise BayesziError(f"{where}: {err}") from None
    return Candidate(name, spec)


def _quote(column: str) -> str:
    return column if column.isidentifier() else f"`{column}`"


def _scenario(s: dict[str, Any], where: str, response: str) -> Scenario:
    name = _checked_name(s.get("name"), where)
    values = s.get("values", {})
    if not isinstance(values, Mapping):
        raise BayesziError(f"'values' in {where} must be a table like {{ depth = 0.5 }}")
    values = {str(k): _scalar(v, f"values.{k}", where) for k, v in values.items()}
    vary = s.get("vary", {})
    if not isinstance(vary, Mapping):
        raise BayesziError(f"'vary' in {where} must be a table like {{ depth = [0.2, 0.5, 1] }}")
    if len(vary) > 1:
        raise BayesziError(f"'vary' in {where} may list one column; make one scenario per column")
    vary_t: dict[str, tuple[Any, ...]] = {}
    for k, v in vary.items():
        if not isinstance(v, list) or not v:
            raise BayesziError(f"'vary.{k}' in {where} must be a non-empty list of values")
        if k in values:
            raise BayesziError(f"column {k!r} is both fixed in 'values' and listed in 'vary' in "
                               f"{where}; keep one")
        vary_t[str(k)] = tuple(_scalar(x, f"vary.{k}", where) for x in v)
    if response in values or response in vary_t:
        raise BayesziError(f"{where} sets the response {response!r}; scenarios set predictors "
                           "only")
    if not values and not vary_t:
        raise BayesziError(f"{where} sets no predictor values; add values = {{ ... }}")
    groups = s.get("groups", "new")
    try:
        check_group_mode(groups)
    except BayesziError as err:
        raise BayesziError(f"{where}: {err}") from None
    return Scenario(name, values, vary_t, groups)


def _contrast(c: dict[str, Any], where: str, scenario_names: list[str]) -> Contrast:
    name = _checked_name(c.get("name"), where)
    scen = _text(c.get("scenario"), "scenario", where, required=True)
    if scen not in scenario_names:
        raise BayesziError(f"'scenario' in {where} names {scen!r}, which is not a [[scenario]]; "
                           f"scenarios: {scenario_names}")
    change = c.get("change", {})
    if not isinstance(change, Mapping) or not change:
        raise BayesziError(f"{where} needs 'change', a table of the values that differ, e.g. "
                           "change = { barrier = 1 }")
    change = {str(k): _scalar(v, f"change.{k}", where) for k, v in change.items()}
    return Contrast(name, scen, change)


__all__ = ["Cluster", "Contrast", "Overview", "Scenario", "Study", "demo_study_path",
           "load_study", "parse_study", "read_table", "sha256_of"]
