"""The documentation stays true to the code.

- ``docs/api.md`` is exactly what ``docs/make_api.py`` writes from the current docstrings,
  and it has an entry for every name ``bayeszi`` exports and every public method of
  ``FittedModel``;
- every docstring example under ``bayeszi/`` passes ``doctest`` (lines marked
  ``# doctest: +SKIP`` are skipped);
- the examples of the ``FittedModel`` methods, which doctest must skip because they need a
  fitted model, run against a small fit of the crayfish demo data;
- the Python blocks of ``docs/guide.md`` marked ``<!-- test -->`` run in order, in one
  namespace, on a slice of the shipped data (8 of the 40 crayfish reaches, 6 of the 30
  cameras) with a short sampler run (2 chains x 150 draws, one core);
- links between the documentation pages and to headings resolve.

The short runs prove that the code shown works with the installed version; their numbers are
not checked here (the statistical tests are in the other test files).
"""

from __future__ import annotations

import doctest
import importlib
import importlib.util
import re
import sys
import traceback
import warnings
from pathlib import Path
from typing import Any

import pandas as pd
import pytest

import bayeszi

ROOT = Path(__file__).resolve().parents[1]
DOCS = ROOT / "docs"

#: Sampler settings of every fit made here: enough to run the code, not to trust its numbers.
SHORT = {"draws": 150, "warmup_steps": 150, "chains": 2, "cores": 1, "progressbar": False}
#: The guide's first fit; the examples of the FittedModel methods use the same (cached) fit.
DEMO_FIT = {"counts": "crayfish ~ water_temp + substrate + depth + canopy",
            "zeros": "~ barrier", "family": "zinb", "exposure": "trap_nights",
            "groups": "reach", "seed": 1}
#: Reaches R01..R08 (two of them above a barrier) and cameras C01..C06, all seasons.
N_REACHES, N_CAMERAS = 8, 6

#: Entries of docs/api.md whose docstring has no example yet (listed so that no new public
#: object arrives without one; remove a name here once its docstring shows an example).
KNOWN_WITHOUT_EXAMPLE = {
    "bayeszi.fit_spec", "bayeszi.make_spec", "bayeszi.load", "bayeszi.FittedModel",
    "bayeszi.ModelSpec", "bayeszi.SamplerSettings", "bayeszi.BayesziError",
    "bayeszi.BayesziWarning", "FittedModel.diagnostics", "FittedModel.sampler_problems",
    "FittedModel.coefficients", "FittedModel.save",
    "bayeszi.app.study.Contrast", "bayeszi.app.study.Scenario",
    "bayeszi.app.study.Study", "bayeszi.app.study.demo_study_path", "bayeszi.app.study.load_study",
    "bayeszi.app.study.read_table", "bayeszi.app.study.sha256_of",
    "bayeszi.app.report.report_saved", "bayeszi.app.report.run_study",
    "bayeszi.app.cli.main",
}


def _make_api() -> Any:
    """docs/make_api.py as a module (loaded once)."""
    if "bayeszi_docs_make_api" not in sys.modules:
        spec = importlib.util.spec_from_file_location("bayeszi_docs_make_api",
                                                      DOCS / "make_api.py")
        assert spec is not None and spec.loader is not None
        module = importlib.util.module_from_spec(spec)
        sys.modules[spec.name] = module  # its dataclasses look themselves up there
        spec.loader.exec_module(module)
    return sys.modules["bayeszi_docs_make_api"]


def _modules() -> list[str]:
    """Every module under bayeszi/, found on disk (nothing is imported to collect them)."""
    out = []
    for path in sorted((ROOT / "bayeszi").rglob("*.py")):
        parts = list(path.relative_to(ROOT).with_suffix("").parts)
        if parts[-1] == "__init__":
            parts = parts[:-1]
        out.append(".".join(parts))
    return out


# ---------------------------------------------------------------------- the API reference
def test_api_reference_is_current():
    api = _make_api()
    written = (DOCS / "api.md").read_text(encoding="utf-8")
    assert api.render() == written, (
        "docs/api.md is not what the docstrings give now; run: python docs/make_api.py")


def test_api_reference_names_every_public_object():
    from bayeszi.fitting.fitted import FittedModel

    text = (DOCS / "api.md").read_text(encoding="utf-8")
    headings = set(re.findall(r"^###? `([^`]+)`", text, flags=re.M))
    exported = set(bayeszi.__all__)
    missing = sorted(f"bayeszi.{n}" for n in exported if f"bayeszi.{n}" not in headings)
    methods = [n for n, v in vars(FittedModel).items()
               if not n.startswith("_") and (callable(v) or isinstance(v, property))]
    assert methods, "FittedModel has no public methods?"
    missing += [f"FittedModel.{n}" for n in methods if f"FittedModel.{n}" not in headings]
    missing += [m for m in _modules() if f"`{m}`" not in text]
    assert not missing, f"not in docs/api.md: {missing}; run: python docs/make_api.py"


def test_every_new_public_object_has_an_example():
    api = _make_api()
    without = set(api.missing_examples())
    new = sorted(without - KNOWN_WITHOUT_EXAMPLE)
    assert not new, (f"docstrings without an example (add a short one under 'Example'): {new}")
    fixed = sorted(KNOWN_WITHOUT_EXAMPLE - without)
    assert not fixed, (f"these now have an example (or are gone): remove them from "
                       f"KNOWN_WITHOUT_EXAMPLE in tests/test_docs.py: {fixed}")


# ---------------------------------------------------------------------- docstring examples
@pytest.mark.parametrize("name", _modules())
def test_docstring_examples(name, tmp_path, monkeypatch):
    monkeypatch.chdir(tmp_path)  # examples that write files write them here
    module = importlib.import_module(name)
    finder = doctest.DocTestFinder()
    runner = doctest.DocTestRunner(optionflags=doctest.ELLIPSIS | doctest.NORMALIZE_WHITESPACE)
    report: list[str] = []
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        for test in finder.find(module, name):
            runner.run(test, out=report.append)
    result = runner.summarize(verbose=False)
    assert result.failed == 0, "".join(report)


# ---------------------------------------------------------------------- small fits
def _crayfish_slice() -> pd.DataFrame:
    from bayeszi.data import load_crayfish

    df = load_crayfish()
    keep = sorted(df["reach"].unique())[:N_REACHES]
    return df[df["reach"].isin(keep)].reset_index(drop=True)


def _short_fit(cache: Any) -> Any:
    """``bayeszi.fit`` with the sampler cut to :data:`SHORT`, each distinct call made once."""
    from bayeszi.fitting.api import fit as real_fit

    def fit(data: pd.DataFrame, *args: Any, **kwargs: Any) -> Any:
        kwargs.update(SHORT)
        key = repr((len(data), list(data.columns), args, sorted(kwargs.items(), key=str)))
        return cache(f"test_docs {key}", lambda: real_fit(data, *args, **kwargs))

    return fit


def test_fitted_method_examples_run(cached_fit, tmp_path, monkeypatch):
    """Each FittedModel method's docstring example, executed against a small fit."""
    monkeypatch.chdir(tmp_path)
    df = _crayfish_slice()
    m = _short_fit(cached_fit)(df, **DEMO_FIT)
    _, methods = _make_api().fitted_methods()
    parser = doctest.DocTestParser()
    failures, ran = [], 0
    for entry in methods:
        if not entry.example:
            continue
        namespace = {"bz": bayeszi, "bayeszi": bayeszi, "pd": pd, "df": df, "m": m,
                     "fitted": m, "new_df": df.head(5)}
        try:
            with warnings.catch_warnings():
                warnings.simplefilter("ignore")
                for example in parser.get_examples(entry.example):
                    exec(compile(example.source, entry.name, "exec"), namespace)
            ran += 1
        except Exception:
            failures.append(f"{entry.name}:\n{entry.example_shown}\n{traceback.format_exc()}")
    assert not failures, "\n\n".join(failures)
    assert ran >= 10, f"only {ran} FittedModel examples found"


# ---------------------------------------------------------------------- the guide
_BLOCK = re.compile(r"(?:<!--\s*(test|no test:[^>]*?)\s*-->\s*\n)?```python\n(.*?)```", re.S)


def _guide_pages() -> list[Path]:
    return [DOCS / "guide.md", *sorted((DOCS / "guide").glob("*.md"))]


def _guide_blocks() -> list[tuple[str, str, str]]:
    """(page, marker, code) for every Python block of the guide, in reading order."""
    out = []
    for page in _guide_pages():
        if page.exists():
            for marker, code in _BLOCK.findall(page.read_text(encoding="utf-8")):
                out.append((page.name, marker, code))
    return out


def test_guide_blocks_are_marked():
    blocks = _guide_blocks()
    assert blocks, "docs/guide.md has no Python blocks"
    unmarked = [code.splitlines()[0] for _, marker, code in blocks if not marker]
    assert not unmarked, ("mark each Python block of the guide '<!-- test -->' or "
                          f"'<!-- no test: why -->': {unmarked}")


def _example_files(folder: Path) -> None:
    """Slices of the example data where the guide reads them (paths from the repo root)."""
    target = folder / "examples" / "camera_traps"
    target.mkdir(parents=True)
    cams = pd.read_csv(ROOT / "examples" / "camera_traps" / "detections.csv")
    keep = sorted(cams["camera"].unique())[:N_CAMERAS]
    cams[cams["camera"].isin(keep)].to_csv(target / "detections.csv", index=False)


def test_guide_runs_end_to_end(cached_fit, tmp_path, monkeypatch):
    import bayeszi.data

    monkeypatch.chdir(tmp_path)
    _example_files(tmp_path)
    small = _crayfish_slice()
    monkeypatch.setattr(bayeszi.data, "load_crayfish", lambda: small.copy())
    monkeypatch.setattr(bayeszi, "fit", _short_fit(cached_fit))
    blocks = [(page, code) for page, marker, code in _guide_blocks() if marker == "test"]
    assert len(blocks) >= 10, f"only {len(blocks)} tested blocks in the guide"
    namespace: dict[str, Any] = {"__name__": "guide"}
    for i, (page, code) in enumerate(blocks, 1):
        try:
            with warnings.catch_warnings():
                warnings.simplefilter("ignore")
                exec(compile(code, f"{page} block {i}", "exec"), namespace)
        except Exception:
            pytest.fail(f"{page}, tested block {i} fails:\n{code}\n{traceback.format_exc()}")
    # the walkthrough wrote what it says it writes
    for name in ("rootogram.png", "residuals.png", "comparison.png", "crayfish_zinb.nc"):
        assert (tmp_path / name).is_file(), name


# ---------------------------------------------------------------------- links
_LINK = re.compile(r"\]\(([^)\s]+)\)")


def _anchors(text: str) -> set[str]:
    api = _make_api()
    body = re.sub(r"```.*?```", "", text, flags=re.S)
    return {api.anchor(h) for h in re.findall(r"^#{1,6} (.+)$", body, flags=re.M)}


@pytest.mark.parametrize("page", ["guide.md", "index.md", "api.md"])
def test_links_resolve(page):
    text = (DOCS / page).read_text(encoding="utf-8")
    bad = []
    for target in _LINK.findall(text):
        if "://" in target:
            continue
        path, _, frag = target.partition("#")
        file = (DOCS / path) if path else DOCS / page
        if not file.exists():
            bad.append(f"{target} (no file)")
        elif frag and file.suffix == ".md" and frag not in _anchors(
                file.read_text(encoding="utf-8")):
            bad.append(f"{target} (no such heading)")
    assert not bad, f"broken links in docs/{page}: {bad}"
