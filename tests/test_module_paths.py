"""Every module the documentation names exists: the dotted paths (``planner.x.y``, with an attribute
after the module where one is named) and the file paths (``planner/x/y.py``) in README.md,
DEVELOPERS.md, the Unreleased section of CHANGELOG.md, and the docstrings and comments of the package.
A module moved or renamed without its mentions fails here, naming the file and line of the stale one."""

from __future__ import annotations

import ast
import importlib
import importlib.util
import io
import re
import tokenize

from .conftest import ROOT

DOTTED = re.compile(r"(?<![\w./])planner(?:\.[A-Za-z_]\w*)+")
FILE = re.compile(r"(?<![\w./])planner/(?:[A-Za-z_]\w*/)*[A-Za-z_]\w*\.py\b")


def _unreleased(lines: list[str]) -> range:
    """The line numbers (from 1) of the changelog's Unreleased section: older sections describe the
    tree of their time."""
    start = lines.index("## Unreleased")
    ends = [i for i in range(start + 1, len(lines)) if lines[i].startswith("## ")]
    return range(start + 1, (ends[0] if ends else len(lines)) + 1)


def _python_texts(path) -> list[tuple[int, str]]:
    """(line, text) of every comment and docstring of a module."""
    source = path.read_text(encoding="utf-8")
    out = [
        (tok.start[0], tok.string)
        for tok in tokenize.generate_tokens(io.StringIO(source).readline)
        if tok.type == tokenize.COMMENT
    ]
    for node in ast.walk(ast.parse(source)):
        if isinstance(node, ast.Module | ast.ClassDef | ast.FunctionDef | ast.AsyncFunctionDef):
            body = node.body
            if body and isinstance(body[0], ast.Expr) and isinstance(body[0].value, ast.Constant):
                if isinstance(body[0].value.value, str):
                    out.append((body[0].lineno, body[0].value.value))
    return out


def _sources() -> list[tuple[str, int, str]]:
    """(where, line, text) of every piece of text the test reads."""
    texts = []
    for name in ("README.md", "DEVELOPERS.md"):
        for i, line in enumerate((ROOT / name).read_text(encoding="utf-8").splitlines(), 1):
            texts.append((name, i, line))
    changes = (ROOT / "CHANGELOG.md").read_text(encoding="utf-8").splitlines()
    texts += [("CHANGELOG.md", i, changes[i - 1]) for i in _unreleased(changes)]
    for path in sorted((ROOT / "planner").rglob("*.py")):
        rel = str(path.relative_to(ROOT))
        texts += [(rel, line, text) for line, text in _python_texts(path)]
    return texts


def _resolves(dotted: str) -> bool:
    """A module, or a module followed by attributes that it has."""
    parts = dotted.split(".")
    for k in range(len(parts), 0, -1):
        name = ".".join(parts[:k])
        try:
            found = importlib.util.find_spec(name) is not None
        except ModuleNotFoundError:
            found = False
        if not found:
            continue
        obj = importlib.import_module(name)
        for attr in parts[k:]:
            if not hasattr(obj, attr):
                return False
            obj = getattr(obj, attr)
        return True
    return False


def test_the_matchers_find_what_they_should():
    text = "see `planner.inputs.files`, planner/jobs/compile.py and planner.jobs.plan.design.Design."
    assert DOTTED.findall(text) == ["planner.inputs.files", "planner.jobs.plan.design.Design"]
    assert FILE.findall(text) == ["planner/jobs/compile.py"]
    assert _resolves("planner.jobs.plan.design.Design") and _resolves("planner.templates")
    assert not _resolves("planner.jobs.checks") and not _resolves("planner.jobs.plan.design.NoSuchThing")


def test_every_module_named_in_the_docs_exists():
    stale = []
    for where, line, text in _sources():
        for dotted in set(DOTTED.findall(text)):
            if not _resolves(dotted):
                stale.append(f"{where}:{line}: {dotted}")
        for path in set(FILE.findall(text)):
            if not (ROOT / path).is_file():
                stale.append(f"{where}:{line}: {path}")
    assert not stale, "modules named but not in the tree:\n" + "\n".join(sorted(stale))
