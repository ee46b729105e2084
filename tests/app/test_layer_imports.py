"""What each layer may import (DEVELOPERS.md, "Contracts"): checked on the source, so a new import that
breaks a rule fails here rather than in review."""

from __future__ import annotations

import ast
import pathlib
import re

ROOT = pathlib.Path(__file__).resolve().parents[2]


def _imports(path: pathlib.Path) -> list:
    """(line, module) of every import in a file, including those inside functions; relative
    imports resolved against the file's package."""
    package = list(path.relative_to(ROOT).with_suffix("").parts[:-1])
    found = []
    for node in ast.walk(ast.parse(path.read_text(encoding="utf-8"))):
        if isinstance(node, ast.Import):
            found += [(node.lineno, alias.name) for alias in node.names]
        elif isinstance(node, ast.ImportFrom):
            if node.level:
                base = package[:len(package) - node.level + 1]
                module = ".".join(base + ([node.module] if node.module else []))
            else:
                module = node.module or ""
            found.append((node.lineno, module))
    return found


def _offenders(folder: str, forbidden) -> list:
    return [f"{path.relative_to(ROOT)}:{line}: {module}"
            for path in sorted((ROOT / folder).rglob("*.py")) for line, module in _imports(path)
            if forbidden(module)]


def test_the_faces_never_import_the_engine():
    """caseview/gui and caseview/cli go through the application layer (caseview.operations and the
    other caseview packages); neither calls hmm directly, so the window and the command line cannot drift."""
    engine = re.compile(r"^hmm(\.|$)")
    assert _offenders("caseview/gui", engine.match) == []
    assert _offenders("caseview/cli", engine.match) == []


def test_the_engine_imports_only_numpy_scipy_and_itself():
    # numpy, scipy and the standard library's pure-computation modules (threads for the likelihood's workers)
    allowed = re.compile(r"^(hmm|numpy|scipy|__future__|dataclasses|math|numbers|typing|functools|itertools|"
                         r"collections|warnings|enum|abc|time|operator|concurrent|threading|os)(\.|$)")
    assert _offenders("hmm", lambda module: not allowed.match(module)) == []


def test_the_application_layer_imports_no_view():
    assert _offenders("caseview/operations", lambda module: module.startswith("caseview.gui")) == []


def test_the_project_never_skips_its_own_modules():
    """An import error of caseview or hmm must fail the tests, not skip them (pytest.importorskip)."""
    pattern = re.compile(r"importorskip\(\s*[\"'](caseview|hmm)\b")
    offenders = [str(path.relative_to(ROOT)) for path in (ROOT / "tests").rglob("*.py")
                 if pattern.search(path.read_text(encoding="utf-8"))]
    assert offenders == []
