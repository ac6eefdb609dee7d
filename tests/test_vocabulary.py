"""Our own vocabulary stays: the names bayeszi used before 0.2, borrowed from other programs'
arguments and tables, must not come back into what a user reads or types.

The report (HTML and every CSV heading) comes from the small study run once in
tests/conftest.py (``small_run``); the command line's help is read for every sub-command;
the study-file keys are the parser's own lists. An old name a user still types (a keyword, a
study-file key, a flag, ``bz.compare``) gets a BayesziError that names its replacement.
"""

from __future__ import annotations

import contextlib
import csv
import io
import re
import warnings

import pytest

import bayeszi as bz
from bayeszi.app import study as study_mod
from bayeszi.app.cli import build_parser, main
from bayeszi.base.renamed import RENAMED, RENAMED_FLAGS

#: Old names as whole words, with what replaced them (docs/glossary.md).
OLD_WORDS = {
    r"\btune\b": "warmup_steps", r"\btarget_accept\b": "acceptance_target",
    r"--target-accept\b": "--acceptance-target", r"\bk_threshold\b": "k_limit",
    r"\br_hat\b": "R-hat", r"\bess_bulk\b": "bulk ESS", r"\bess_tail\b": "tail ESS",
    r"\bk_(good|ok|bad)\b": "rows low/moderate/high k", r"\belpd_(loo|diff)\b": "LOO log score",
    r"\bdiff_se\b": "behind se", r"\bdiff_in_se\b": "behind in se",
    r"\bbad_k_rows\b": "high-k rows", r"\bsd\(\w+": "<group> effects: sd",
    r"\bcorr\(\w+": "<group> effects: counts-zeros correlation",
    r"\[T\.": "<column>: <level> (vs <reference>)",
}
#: Old headings of the comparison table, as whole cells (p_loo and elpd may stay in prose).
OLD_HEADINGS = {"rank", "elpd_loo", "se", "elpd_diff", "diff_se", "p_loo", "weight",
                "k_good", "k_ok", "k_bad", "warning", "scale", "dse", "d_loo"}


def _old_words_in(text: str) -> list[str]:
    return [f"{pat} (now {new})" for pat, new in OLD_WORDS.items() if re.search(pat, text)]


def _visible(html: str) -> str:
    """The page's text without tags, embedded images, styles and scripts."""
    html = re.sub(r"<(style|script)\b.*?</\1>", " ", html, flags=re.S)
    html = re.sub(r'src="data:[^"]*"', " ", html)
    return re.sub(r"<[^>]+>", " ", html)


def test_report_page_has_no_old_names(small_run) -> None:
    assert small_run["rc"] == 0
    text = _visible((small_run["out"] / "report.html").read_text(encoding="utf-8"))
    assert not _old_words_in(text)


def test_csv_headings_have_no_old_names(small_run) -> None:
    files = sorted(small_run["out"].rglob("*.csv"))
    assert files, "the report folder holds no CSV tables"
    for path in files:
        with path.open(encoding="utf-8") as fh:
            heading = next(csv.reader(fh))
        found = _old_words_in(" | ".join(heading))
        assert not found, (path.name, found)
        if "comparison" in path.name or "loo" in path.name:
            assert not OLD_HEADINGS & set(heading), (path.name, heading)


def _help_texts() -> dict[str, str]:
    parser = build_parser()
    texts = {"bayeszi": parser.format_help()}
    for action in parser._subparsers._group_actions:  # argparse's own sub-command listing
        for name, sub in action.choices.items():
            texts[name] = sub.format_help()
    return texts


def test_command_line_help_has_no_old_names() -> None:
    texts = _help_texts()
    assert {"run", "fit", "demo", "predict", "report"} <= set(texts)
    for name, text in texts.items():
        assert not _old_words_in(text), (name, _old_words_in(text))
    assert "--warmup-steps" in texts["fit"] and "--acceptance-target" in texts["fit"]


def test_study_file_keys_have_no_old_names() -> None:
    keys = set()
    for attr in dir(study_mod):
        if attr.endswith("_KEYS"):
            keys |= set(getattr(study_mod, attr))
    assert "warmup_steps" in keys and "acceptance_target" in keys
    assert not keys & set(RENAMED), keys & set(RENAMED)


@pytest.mark.parametrize("old,new", sorted(RENAMED.items()))
def test_old_keyword_names_the_new_one(old: str, new: str) -> None:
    call = {"tune": lambda: bz.fit(None, "y ~ x", tune=500),
            "target_accept": lambda: bz.make_spec("y ~ x", target_accept=0.95),
            "k_threshold": lambda: bz.rank_models({}, k_threshold=0.5)}[old]
    with pytest.raises(bz.BayesziError, match=rf"'{old}'.*now called '{new}'"):
        call()


def test_old_study_keys_name_the_new_ones(write_small_study, tmp_path) -> None:
    for old, new in (("warmup_steps = 200", "tune = 200"),
                     ("cores = 1", "cores = 1\ntarget_accept = 0.95")):
        path = write_small_study(tmp_path, **{old: new})
        key = new.split("\n")[-1].split(" =")[0]
        with pytest.raises(bz.BayesziError, match=rf"'{key}' in \[sampler\] is now called "
                                                  rf"'{RENAMED[key]}'"):
            study_mod.load_study(str(path))


@pytest.mark.parametrize("flag,new", sorted(RENAMED_FLAGS.items()))
def test_old_flags_exit_2_naming_the_new_flag(flag: str, new: str, tmp_path) -> None:
    err = io.StringIO()
    with contextlib.redirect_stderr(err), warnings.catch_warnings():
        warnings.simplefilter("ignore")
        rc = main(["fit", "--data", "x.csv", "--counts", "y ~ x", flag, "300",
                   "--out", str(tmp_path / "f.nc")])
    assert rc == 2
    assert new in err.getvalue() and err.getvalue().count("\n") == 1
    assert not (tmp_path / "f.nc").exists()


def test_old_function_name_names_the_new_one() -> None:
    with pytest.raises(bz.BayesziError, match=r"bayeszi\.compare is now bayeszi\.rank_models"):
        bz.compare  # noqa: B018
