"""No function body longer than :data:`MAX_BODY_LINES` lines (STYLE.md: one job per function).

A function's body is measured from its first statement after the docstring to its last line,
comments and blank lines included: ``end_lineno - first_statement.lineno + 1``, read with
:mod:`ast`. Methods and nested functions are measured on their own (a nested function's lines
also count in the function around it). Every module of the stages, the package root, the
benchmarks and the tests is read. The only functions allowed to be longer are named in
:data:`LONG_ON_PURPOSE`, each with its reason; an entry that is no longer too long fails too,
so the list cannot outlive its reasons.
"""

from __future__ import annotations

import ast
from collections.abc import Iterator
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
FOLDERS = ("ingest", "model", "api", "dashboards", "_root", "benchmarks", "tests")
MAX_BODY_LINES = 80

#: ``path::qualified name`` -> why it may be longer than :data:`MAX_BODY_LINES`
LONG_ON_PURPOSE = {
    # migrations are a record of the schema as it was made: never edited once released
    "api/migrations/versions/0001_first_tables.py::upgrade": "released migration",
    "api/migrations/versions/0002_record.py::_runs_and_findings": "released migration",
}


def _body_lines(node: ast.FunctionDef | ast.AsyncFunctionDef) -> int:
    """Lines from the first statement after the docstring to the function's last line."""
    body = node.body
    first = body[0]
    docstring = (
        isinstance(first, ast.Expr)
        and isinstance(first.value, ast.Constant)
        and isinstance(first.value.value, str)
    )
    if docstring and len(body) > 1:
        first = body[1]
    assert node.end_lineno is not None
    return node.end_lineno - first.lineno + 1


def _functions(tree: ast.AST, prefix: str = "") -> Iterator[tuple[str, int]]:
    """(qualified name, body lines) of every function and method under ``tree``."""
    for child in ast.iter_child_nodes(tree):
        if isinstance(child, ast.FunctionDef | ast.AsyncFunctionDef):
            yield prefix + child.name, _body_lines(child)
            yield from _functions(child, f"{prefix}{child.name}.")
        elif isinstance(child, ast.ClassDef):
            yield from _functions(child, f"{prefix}{child.name}.")
        else:
            yield from _functions(child, prefix)


def _measured() -> dict[str, int]:
    found = {}
    for folder in FOLDERS:
        for path in sorted((ROOT / folder).rglob("*.py")):
            rel = path.relative_to(ROOT).as_posix()
            tree = ast.parse(path.read_text(encoding="utf-8"), filename=rel)
            for name, lines in _functions(tree):
                found[f"{rel}::{name}"] = lines
    return found


def test_body_lines_counts_from_the_first_statement_after_the_docstring() -> None:
    source = 'def f():\n    """Doc\n    string."""\n    a = 1\n\n    # note\n    return a\n'
    node = ast.parse(source).body[0]
    assert isinstance(node, ast.FunctionDef)
    assert _body_lines(node) == 4


def test_no_function_is_longer_than_the_limit() -> None:
    measured = _measured()
    too_long = sorted(
        f"{name}: {lines} lines"
        for name, lines in measured.items()
        if lines > MAX_BODY_LINES and name not in LONG_ON_PURPOSE
    )
    assert not too_long, (
        f"functions over {MAX_BODY_LINES} body lines (split them into functions with one job "
        "each):\n" + "\n".join(too_long)
    )


def test_every_long_function_on_the_list_is_still_long() -> None:
    measured = _measured()
    stale = sorted(name for name in LONG_ON_PURPOSE if measured.get(name, 0) <= MAX_BODY_LINES)
    assert not stale, "drop from LONG_ON_PURPOSE (gone or short now): " + ", ".join(stale)
