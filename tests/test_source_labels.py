"""Every check against an outside source names it.

A test whose docstring leans on something outside the project (a library used as a reference, a
textbook result, a published rule or specification) carries a line that starts with ``Source:``
(the source, checked), ``From memory:`` (a source cited without checking it here) or
``Common practice:`` (a fact of the trade with no single source). In a module whose docstring
claims outside sources for all of its checks (the phrase below), every test carries one.
"""

from __future__ import annotations

import ast
import re
from pathlib import Path

import pytest

TESTS = Path(__file__).resolve().parent
LABEL = re.compile(r"^\s*(Source:|From memory:|Common practice:)", re.M)
#: Words that mean a docstring relies on something outside the project.
OUTSIDE = re.compile(
    r"\b(scipy|lapack|numpy's|stream|textbook|specification|published|reference:|timeit|pytest-benchmark|"
    r"mccalpin|holm \(|wilcoxon)\b",
    re.I,
)
MODULE_CLAIM = re.compile(r"sources outside the project", re.I)


def unlabelled_tests(source: str) -> list[str]:
    """Names of test functions in ``source`` that need a source label and have none."""
    tree = ast.parse(source)
    whole_module = bool(MODULE_CLAIM.search(ast.get_docstring(tree) or ""))
    missing = []
    for node in ast.walk(tree):
        if isinstance(node, (ast.FunctionDef, ast.AsyncFunctionDef)) and node.name.startswith("test_"):
            doc = ast.get_docstring(node) or ""
            if (whole_module or OUTSIDE.search(doc)) and not LABEL.search(doc):
                missing.append(node.name)
    return missing


def test_the_scan_finds_a_missing_label() -> None:
    claimed = '"""Checked against sources outside the project."""\ndef test_a():\n    """Plain check."""\n'
    mentioned = 'def test_b():\n    """Reference: scipy.linalg.solve."""\n'
    labelled = 'def test_c():\n    """Reference: scipy.linalg.solve.\n\n    Source: SciPy 1.17 docs."""\n'
    assert unlabelled_tests(claimed) == ["test_a"]
    assert unlabelled_tests(mentioned) == ["test_b"]
    assert unlabelled_tests(labelled) == []


@pytest.mark.parametrize("path", sorted(TESTS.rglob("test_*.py")), ids=lambda p: str(p.relative_to(TESTS)))
def test_every_outside_check_names_its_source(path: Path) -> None:
    missing = unlabelled_tests(path.read_text())
    assert not missing, f"{path.name}: tests without a Source:/From memory:/Common practice: line: {missing}"
