"""Write docs/api.md, the API reference, from the docstrings of the installed bayeszi.

Usage (from the repository root)::

    python docs/make_api.py            # rewrite docs/api.md
    python docs/make_api.py --check    # exit 1 if docs/api.md is not what the code gives
    python docs/make_api.py --missing  # list the entries whose docstring has no example

What the page holds, in order:

1. every name exported by ``bayeszi`` (its ``__all__``; the lazily loaded names of
   ``_LAZY`` are in it), with signature, the first paragraph of the docstring and its
   example;
2. the fitted model: the fields of :class:`bayeszi.FittedModel` and every public method;
3. the modules a user calls directly (``PUBLIC_MODULES``): their ``__all__`` (or, without
   one, the public functions and classes defined in them);
4. the ``bayeszi`` command line, read from :func:`bayeszi.app.cli.build_parser`;
5. one line for every other module under ``bayeszi/``, so a new module shows up at once.

The text depends only on the code (no dates, no paths, no memory addresses), so running the
script twice gives the same file and ``tests/test_docs.py`` can check that the page is
current. Examples are shown as written in the docstrings, without ``# doctest:`` directives.
"""

from __future__ import annotations

import argparse
import ast
import dataclasses
import difflib
import importlib
import importlib.util
import inspect
import pkgutil
import re
import sys
import textwrap
from collections.abc import Iterator
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

ROOT = Path(__file__).resolve().parents[1]
OUT = ROOT / "docs" / "api.md"
if str(ROOT) not in sys.path:  # document this working tree, installed or not
    sys.path.insert(0, str(ROOT))

#: Modules documented name by name, in this order, with the topic page that explains them.
PUBLIC_MODULES: dict[str, str] = {
    "bayeszi.data": "guide.md",
    "bayeszi.model.distributions": "priors.md",
    "bayeszi.fitting.candidates": "compare.md",
    "bayeszi.answers.comparison": "compare.md",
    "bayeszi.plots.compareplots": "compare.md",
    "bayeszi.engine.loglik": "compare.md",
    "bayeszi.answers.checks": "checks.md",
    "bayeszi.answers.residual_checks": "checks.md",
    "bayeszi.plots.checkplots": "checks.md",
    "bayeszi.answers.groups": "groups.md",
    "bayeszi.answers.predict": "predict.md",
    "bayeszi.answers.contrast": "predict.md",
    "bayeszi.families": "families.md",
    "bayeszi.answers.sensitivity": "sensitivity.md",
    "bayeszi.model.collinearity": "sensitivity.md",
    "bayeszi.fitting.preview": "sensitivity.md",
    "bayeszi.app.study": "study-file.md",
    "bayeszi.app.strata": "strata.md",
    "bayeszi.app.stratarun": "strata.md",
    "bayeszi.app.report": "cli.md",
    "bayeszi.app.cli": "cli.md",
}

#: Order of the top-level names; names not listed here follow, sorted.
TOP_ORDER = ("fit", "fit_candidates", "compare", "fit_spec", "make_spec", "prior_predictive",
             "load", "FittedModel", "priors", "ModelSpec", "SamplerSettings", "get_family",
             "FAMILY_NAMES", "BayesziError", "BayesziWarning", "__version__")

#: Width at which a signature is split to one parameter per line.
SIGNATURE_WIDTH = 92

_DIRECTIVE = re.compile(r"\s*#\s*doctest:.*$")
_ROLE = re.compile(r":(?:func|meth|class|mod|data|attr|exc|obj):`~?([^`]+)`")
_SECTION = re.compile(r"^(\w[\w ]*)\n-{3,}\s*$", re.M)


@dataclass
class Entry:
    """One documented object: where it appears, how it is called, what it says."""

    name: str                    # the name shown, e.g. "bayeszi.fit" or "FittedModel.predict"
    kind: str                    # "function", "class", "method", "property", "constant"
    signature: str = ""
    summary: str = ""
    example: str = ""            # doctest text as written, directives kept
    members: list[tuple[str, str]] = field(default_factory=list)  # classes: (name, first line)
    value: str = ""              # constants: their repr
    source: str = ""             # module the object is defined in
    params: list[tuple[str, str]] = field(default_factory=list)  # "Parameters" section
    refs: list[str] = field(default_factory=list)  # names the docstring points to
    bases: str = ""              # exceptions and warnings: their base class

    @property
    def example_shown(self) -> str:
        """The example without ``# doctest:`` directives."""
        return "\n".join(_DIRECTIVE.sub("", line).rstrip() for line in self.example.splitlines())


# ---------------------------------------------------------------------- docstrings
def plain(text: str) -> str:
    """Docstring markup as Markdown: roles and double backticks become code spans."""
    def role(m: re.Match[str]) -> str:
        target = m.group(1)
        return f"`{target.split('.')[-1] if '~' in m.group(0) else target}`"

    return _ROLE.sub(role, text).replace("``", "`")


def split_doc(doc: str | None) -> tuple[str, str]:
    """``(first paragraph, example)`` of a docstring; either may be empty.

    The example is the body of an ``Example``/``Examples`` section, or else the first block
    of ``>>>`` lines with their output.
    """
    doc = inspect.cleandoc(doc or "")
    if not doc:
        return "", ""
    first = doc.split("\n\n", 1)[0]
    if _SECTION.match(first):
        first = ""
    summary = plain(" ".join(line.strip() for line in first.splitlines()))
    heads = list(_SECTION.finditer(doc))
    example = ""
    for i, m in enumerate(heads):
        if m.group(1).strip().lower() in ("example", "examples"):
            end = heads[i + 1].start() if i + 1 < len(heads) else len(doc)
            example = doc[m.end():end].strip("\n")
            break
    if not example and ">>>" in doc:
        lines = doc.splitlines()
        start = next(i for i, line in enumerate(lines) if line.lstrip().startswith(">>>"))
        block = []
        for line in lines[start:]:
            if not line.strip():
                break
            block.append(line)
        example = "\n".join(block)
    example = textwrap.dedent(example).strip("\n")
    if ">>>" not in example:  # prose only, not an example a reader can run
        example = ""
    return summary, example


def params_section(doc: str | None) -> list[tuple[str, str]]:
    """``(names, text)`` pairs of a numpy-style ``Parameters`` section."""
    doc = inspect.cleandoc(doc or "")
    heads = list(_SECTION.finditer(doc))
    for i, m in enumerate(heads):
        if m.group(1).strip().lower() != "parameters":
            continue
        end = heads[i + 1].start() if i + 1 < len(heads) else len(doc)
        out: list[tuple[str, list[str]]] = []
        for line in doc[m.end():end].splitlines():
            if not line.strip():
                continue
            if not line.startswith((" ", "\t")) and " : " in line:
                names, text = line.split(" : ", 1)
                out.append((names.strip(), [text.strip()]))
            elif not line.startswith((" ", "\t")) and line.rstrip().endswith(" :"):
                out.append((line.rstrip()[:-2].strip(), []))
            elif out:
                out[-1][1].append(line.strip())
        return [(n, plain(" ".join(t))) for n, t in out]
    return []


def references(doc: str | None) -> list[str]:
    """Dotted names the docstring points to with ``:func:`` and the like, in order."""
    seen: list[str] = []
    for m in _ROLE.finditer(inspect.cleandoc(doc or "")):
        name = m.group(1)
        if name not in seen:
            seen.append(name)
    return seen


def attribute_docs(module: Any) -> dict[str, str]:
    """Docs of module-level constants: a string right after the assignment, or ``#:`` lines
    right above it."""
    try:
        source = inspect.getsource(module)
    except (OSError, TypeError):
        return {}
    lines = source.splitlines()
    out: dict[str, str] = {}
    body = ast.parse(source).body
    for i, node in enumerate(body):
        targets: list[ast.expr] = []
        if isinstance(node, ast.Assign):
            targets = node.targets
        elif isinstance(node, ast.AnnAssign):
            targets = [node.target]
        names = [t.id for t in targets if isinstance(t, ast.Name)]
        if not names:
            continue
        doc = ""
        nxt = body[i + 1] if i + 1 < len(body) else None
        if (isinstance(nxt, ast.Expr) and isinstance(nxt.value, ast.Constant)
                and isinstance(nxt.value.value, str)):
            doc = nxt.value.value
        else:
            comments = []
            j = node.lineno - 2
            while j >= 0 and lines[j].lstrip().startswith("#:"):
                comments.insert(0, lines[j].lstrip()[2:].strip())
                j -= 1
            doc = " ".join(comments)
        for name in names:
            if doc:
                out[name] = plain(" ".join(inspect.cleandoc(doc).split("\n\n")[0].split()))
    return out


# ---------------------------------------------------------------------- signatures
def _annotation(a: Any) -> str:
    if a is inspect.Parameter.empty:
        return ""
    text = a if isinstance(a, str) else inspect.formatannotation(a)
    return text.replace("'", "")


def _default(value: Any) -> str:
    if inspect.isclass(value) or callable(value):
        return getattr(value, "__name__", type(value).__name__)
    if isinstance(value, (set, frozenset)):  # hash order differs between runs
        inner = ", ".join(sorted(repr(v) for v in value))
        return f"{{{inner}}}" if value else f"{type(value).__name__}()"
    text = repr(value)
    return re.sub(r" at 0x[0-9a-fA-F]+", "", text)


def signature(name: str, obj: Any, drop_first: bool = False, is_class: bool = False) -> str:
    """``name(param: type = default, ...) -> type``, split over lines when long.

    For classes the private fields (``_name``) and the ``-> None`` of ``__init__`` are left
    out.
    """
    try:
        sig = inspect.signature(obj)
    except (TypeError, ValueError):
        return f"{name}(...)"
    params = list(sig.parameters.values())
    if drop_first and params:
        params = params[1:]
    if is_class:
        params = [p for p in params if not p.name.startswith("_")]
        sig = sig.replace(return_annotation=inspect.Signature.empty)
    parts: list[str] = []
    star_done = False
    for i, p in enumerate(params):
        if p.kind is p.KEYWORD_ONLY and not star_done:
            if not any(q.kind is q.VAR_POSITIONAL for q in params[:i]):
                parts.append("*")
            star_done = True
        if p.kind is p.VAR_POSITIONAL:
            star_done = True
        prefix = {p.VAR_POSITIONAL: "*", p.VAR_KEYWORD: "**"}.get(p.kind, "")
        text = prefix + p.name
        ann = _annotation(p.annotation)
        if ann:
            text += f": {ann}"
        if p.default is not inspect.Parameter.empty:
            text += (" = " if ann else "=") + _default(p.default)
        parts.append(text)
        if p.kind is p.POSITIONAL_ONLY and (i + 1 == len(params)
                                             or params[i + 1].kind is not p.POSITIONAL_ONLY):
            parts.append("/")
    ret = _annotation(sig.return_annotation)
    tail = f" -> {ret}" if ret else ""
    one = f"{name}({', '.join(parts)}){tail}"
    if len(one) <= SIGNATURE_WIDTH:
        return one
    return f"{name}(\n" + "".join(f"    {p},\n" for p in parts) + f"){tail}"


# ---------------------------------------------------------------------- entries
def describe(name: str, obj: Any, *, kind: str | None = None, drop_first: bool = False,
             const_doc: str = "") -> Entry:
    """An :class:`Entry` for any function, class, property or constant."""
    short = name.split(".")[-1]
    if isinstance(obj, property):
        summary, example = split_doc(obj.fget.__doc__ if obj.fget else None)
        ret = ""
        if obj.fget is not None:
            ret = _annotation(inspect.signature(obj.fget).return_annotation)
        return Entry(name, "property", short + (f" -> {ret}" if ret else ""), summary, example)
    if inspect.isclass(obj) and issubclass(obj, BaseException):
        summary, example = split_doc(obj.__doc__)
        return Entry(name, "class", "", summary, example, source=obj.__module__,
                     refs=references(obj.__doc__),
                     bases=", ".join(b.__name__ for b in obj.__bases__))
    if inspect.isclass(obj):
        summary, example = split_doc(obj.__doc__)
        members = []
        for mname, member in vars(obj).items():
            if mname.startswith("_"):
                continue
            target = member.fget if isinstance(member, property) else member
            if isinstance(target, (staticmethod, classmethod)):
                target = target.__func__
            if not (inspect.isfunction(target) or isinstance(member, property)):
                continue
            first, _ = split_doc(getattr(target, "__doc__", None))
            members.append((mname, first))
        return Entry(name, "class", signature(short, obj, is_class=True), summary, example,
                     members, source=obj.__module__, params=params_section(obj.__doc__),
                     refs=references(obj.__doc__))
    if inspect.isfunction(obj) or inspect.ismethod(obj) or inspect.isbuiltin(obj):
        summary, example = split_doc(obj.__doc__)
        return Entry(name, kind or "function", signature(short, obj, drop_first), summary,
                     example, source=getattr(obj, "__module__", "") or "",
                     params=params_section(obj.__doc__), refs=references(obj.__doc__))
    if inspect.ismodule(obj):
        summary, example = split_doc(obj.__doc__)
        return Entry(name, "module", "", summary, example, source=obj.__name__)
    value = _default(obj)
    if len(value) > 300:
        value = value[:297] + "..."
    return Entry(name, "constant", "", const_doc, "", value=value)


def top_level() -> list[Entry]:
    """Every name in ``bayeszi.__all__``."""
    import bayeszi

    names = list(bayeszi.__all__)
    ordered = [n for n in TOP_ORDER if n in names] + sorted(n for n in names
                                                           if n not in TOP_ORDER)
    lazy = getattr(bayeszi, "_LAZY", {})
    out = []
    for n in ordered:
        obj = getattr(bayeszi, n)
        const_doc = ""
        if not (inspect.isclass(obj) or callable(obj)):
            mod = importlib.import_module(lazy.get(n, "bayeszi"))
            const_doc = attribute_docs(mod).get(n, "")
            if n == "__version__":
                const_doc = "The installed version of bayeszi."
        entry = describe(f"bayeszi.{n}", obj, const_doc=const_doc)
        out.append(entry)
    return out


def fitted_methods() -> tuple[list[tuple[str, str]], list[Entry]]:
    """The fields of FittedModel and an entry for each public method, in source order."""
    from bayeszi.fitting.fitted import FittedModel

    fields = [(f.name, _annotation(f.type)) for f in dataclasses.fields(FittedModel)
              if not f.name.startswith("_")]
    entries = []
    for name, member in vars(FittedModel).items():
        if name.startswith("_"):
            continue
        if isinstance(member, property):
            entries.append(describe(f"FittedModel.{name}", member))
        elif inspect.isfunction(member):
            entries.append(describe(f"FittedModel.{name}", member, kind="method",
                                    drop_first=True))
        elif isinstance(member, (staticmethod, classmethod)):
            entries.append(describe(f"FittedModel.{name}", member.__func__, kind="method",
                                    drop_first=isinstance(member, classmethod)))
    return fields, entries


def module_names(module: Any) -> list[str]:
    """``__all__``, or the public functions and classes the module defines."""
    if hasattr(module, "__all__"):
        return list(module.__all__)
    return [n for n, o in vars(module).items()
            if not n.startswith("_") and (inspect.isfunction(o) or inspect.isclass(o))
            and getattr(o, "__module__", None) == module.__name__]


def public_modules() -> list[str]:
    """The modules of :data:`PUBLIC_MODULES` that exist (a missing one is named on stderr)."""
    out = []
    for name in PUBLIC_MODULES:
        if importlib.util.find_spec(name) is None:
            print(f"make_api: module {name} is gone; update PUBLIC_MODULES", file=sys.stderr)
        else:
            out.append(name)
    return out


def module_entries(modname: str) -> tuple[Entry, list[Entry]]:
    """The module's own entry and one per public name."""
    module = importlib.import_module(modname)
    head = describe(modname, module)
    consts = attribute_docs(module)
    out = []
    for n in module_names(module):
        obj = getattr(module, n)
        out.append(describe(f"{modname}.{n}", obj, const_doc=consts.get(n, "")))
    return head, out


def all_modules() -> list[str]:
    """Every module under bayeszi/, sorted."""
    import bayeszi

    return sorted(m.name for m in pkgutil.walk_packages(bayeszi.__path__, "bayeszi."))


def internal_modules() -> list[Entry]:
    """One entry (first paragraph only) for each module not documented name by name."""
    return [describe(name, importlib.import_module(name)) for name in all_modules()
            if name not in PUBLIC_MODULES]


def entries() -> Iterator[Entry]:
    """Every entry with a signature (top level, FittedModel, public modules), in page order."""
    yield from top_level()
    yield from fitted_methods()[1]
    for modname in public_modules():
        yield from module_entries(modname)[1]


# ---------------------------------------------------------------------- command line
def cli_lines() -> list[str]:
    """The subcommands and their arguments, read from the argument parser."""
    from bayeszi.app.cli import build_parser

    parser = build_parser()
    sub = next(a for a in parser._actions if isinstance(a, argparse._SubParsersAction))
    helps = {c.dest: c.help for c in sub._choices_actions}
    lines = [plain(parser.description or ""), ""]
    for cmd, p in sub.choices.items():
        lines += [f"### `bayeszi {cmd}`", "", plain(p.description or helps.get(cmd) or ""), ""]
        lines += ["| argument | meaning |", "|---|---|"]
        for action in p._actions:
            if isinstance(action, argparse._HelpAction):
                continue
            if action.option_strings:
                arg = ", ".join(action.option_strings)
                if action.nargs != 0:
                    meta = action.metavar or action.dest.upper()
                    arg += f" {meta}" + (f" [{meta} ...]" if action.nargs in ("+", "*") else "")
            else:
                arg = action.metavar or action.dest
                if action.nargs in ("+", "*"):
                    arg += " ..."
            req = " (required)" if action.required and action.option_strings else ""
            params = dict(vars(action), prog=p.prog)
            if action.choices is not None:
                params["choices"] = ", ".join(map(str, action.choices))
            text = (action.help or "") % params
            lines.append(f"| `{arg}`{req} | {text.replace('|', '/')} |")
        lines.append("")
    return lines


# ---------------------------------------------------------------------- rendering
def anchor(heading: str) -> str:
    """The anchor GitHub-style Markdown renderers give a heading."""
    text = heading.strip().lower().replace("`", "")
    text = re.sub(r"[^\w\- ]", "", text)
    return text.replace(" ", "-")


def render_entry(e: Entry, known: set[str] | frozenset[str] = frozenset(),
                 level: str = "###") -> list[str]:
    """The Markdown of one entry; ``known`` holds the names that have an entry on the page."""
    lines = [f"{level} `{e.name}`", ""]
    if e.kind == "constant":
        if e.summary:
            lines += [e.summary, ""]
        lines += ["```python", f"{e.name.split('.')[-1]} = {e.value}", "```", ""]
        return lines
    shown = f"class {e.name.split('.')[-1]}({e.bases})" if e.bases else e.signature
    if e.kind == "module":  # a public module: where its functions are listed
        shown = f"import {e.name}  # the module {e.source}, listed below"
    lines += ["```python", shown, "```", ""]
    if e.source and e.kind in ("function", "class") and not e.name.startswith(e.source + "."):
        lines += [f"*Defined in `{e.source}`.*", ""]
    if e.summary:
        lines += [e.summary, ""]
    if e.params:
        lines += ["Parameters:", ""]
        lines += [f"- `{n}`" + (f": {t}" if t else "") for n, t in e.params]
        lines.append("")
    if e.members:
        lines += ["Methods and properties:", ""]
        lines += [f"- `{n}`" + (f": {s}" if s else "") for n, s in e.members]
        lines.append("")
    see = [r for r in e.refs if r in known and r != e.name and f"`{r}`" not in e.summary]
    if see:
        lines += ["See also: " + ", ".join(f"[`{r}`](#{anchor(r)})" for r in see) + ".", ""]
    if e.example:
        lines += ["Example:", "", "```python", e.example_shown, "```", ""]
    else:
        lines += ["*No example in the docstring yet.*", ""]
    return lines


def render() -> str:
    """The whole of docs/api.md as a string."""
    import bayeszi

    top = top_level()
    fields, methods = fitted_methods()
    mods = {m: module_entries(m) for m in public_modules()}
    known = {e.name for e in top} | {e.name for e in methods}
    known |= {e.name for _, items in mods.values() for e in items}
    lines = [
        "# API reference",
        "",
        f"Generated from the docstrings of bayeszi {bayeszi.__version__} by "
        "`python docs/make_api.py`; do not edit by hand (rerun the script, and "
        "`tests/test_docs.py` checks that this page is current). Each entry gives the "
        "signature, the first paragraph of the docstring and its example. The user guide "
        "is [guide.md](guide.md); the topic pages are listed in [index.md](index.md).",
        "",
        "Examples refer to a data frame `df` (for instance `bayeszi.data.load_crayfish()`), "
        "a fitted model `m` (also called `fitted`) and new rows `new_df`. "
        "`tests/test_docs.py` runs every example: with `doctest` where it stands alone, and "
        "the examples of the `FittedModel` methods against a small fit of the crayfish data; "
        "other examples that need a fit of their own are marked to be skipped by doctest, and "
        "the guide's tested walkthrough covers the same calls.",
        "",
        "## Contents",
        "",
        "- [The package: `import bayeszi as bz`](#the-package-import-bayeszi-as-bz)",
        "- [The fitted model: `FittedModel`](#the-fitted-model-fittedmodel)",
    ]
    for m in mods:
        lines.append(f"- [`{m}`](#{anchor('module ' + m)})")
    lines += ["- [The command line: `bayeszi`](#the-command-line-bayeszi)",
              "- [Other modules](#other-modules)", ""]

    lines += ["## The package: `import bayeszi as bz`", "",
              "| name | what it is |", "|---|---|"]
    for e in top:
        lines.append(f"| [`{e.name}`](#{anchor(e.name)}) | {e.summary or e.kind} |")
    lines.append("")
    for e in top:
        if e.name == "bayeszi.FittedModel":
            lines += [f"### `{e.name}`", "", "```python", e.signature, "```", "",
                      e.summary, "", "See [the fitted model](#the-fitted-model-fittedmodel) "
                      "below for its fields and methods.", ""]
            continue
        lines += render_entry(e, known)

    lines += ["## The fitted model: `FittedModel`", "",
              "`bayeszi.fit` returns a `FittedModel`; `bayeszi.load` gives a saved one back. "
              "Its fields:", "",
              "| field | type |", "|---|---|"]
    lines += [f"| `{n}` | `{t}` |" for n, t in fields]
    lines += ["", "Methods, in the order the class defines them:", "",
              "| method | what it answers |", "|---|---|"]
    for e in methods:
        lines.append(f"| [`{e.name.split('.', 1)[1]}`](#{anchor(e.name)}) | {e.summary} |")
    lines.append("")
    for e in methods:
        lines += render_entry(e, known)

    for m, (head, items) in mods.items():
        lines += [f"## Module `{m}`", "", head.summary, "",
                  f"Topic page: [{PUBLIC_MODULES[m]}]({PUBLIC_MODULES[m]}).", ""]
        if head.example:
            lines += ["Example:", "", "```python", head.example_shown, "```", ""]
        for e in items:
            lines += render_entry(e, known)

    lines += ["## The command line: `bayeszi`", "",
              "Read from `bayeszi.app.cli.build_parser()`; [cli.md](cli.md) has examples, exit "
              "codes and the report folder.", ""]
    lines += cli_lines()

    lines += ["## Other modules", "",
              "The pipeline's inner modules, for readers of the code (see "
              "[architecture.md](architecture.md)). Their functions are not meant to be "
              "called directly and may change.", "",
              "| module | job |", "|---|---|"]
    for e in internal_modules():
        lines.append(f"| `{e.name}` | {e.summary} |")
    lines.append("")
    text = "\n".join(lines)
    return re.sub(r"\n{3,}", "\n\n", text).rstrip("\n") + "\n"


def missing_examples() -> list[str]:
    """Names of the entries (top level, FittedModel, public modules) without an example."""
    return [e.name for e in entries() if e.kind not in ("constant",) and not e.example]


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description="Write docs/api.md from the docstrings.")
    ap.add_argument("--check", action="store_true",
                    help="do not write; exit 1 if docs/api.md is not current")
    ap.add_argument("--missing", action="store_true",
                    help="list the entries whose docstring has no example")
    args = ap.parse_args(argv)
    if args.missing:
        for name in missing_examples():
            print(name)
        return 0
    text = render()
    if args.check:
        old = OUT.read_text(encoding="utf-8") if OUT.exists() else ""
        if old == text:
            return 0
        sys.stdout.writelines(difflib.unified_diff(old.splitlines(True), text.splitlines(True),
                                                   "docs/api.md", "regenerated", n=1))
        print("docs/api.md is not current: run python docs/make_api.py", file=sys.stderr)
        return 1
    tmp = OUT.with_suffix(".md.tmp")
    tmp.write_text(text, encoding="utf-8")
    tmp.replace(OUT)
    print(f"wrote {OUT.relative_to(ROOT)} ({len(text.splitlines())} lines)")
    return 0


if __name__ == "__main__":
    sys.exit(main())
