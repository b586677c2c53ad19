"""The caution beside every dose figure has one wording, ``beamaudit.CAUTION``, used everywhere.

Pages, API answers, exports, command output and the model's notices all carry the same sentence;
no module writes a variant of its own (docstrings and comments may describe it).
"""

from __future__ import annotations

import ast
from pathlib import Path

import beamaudit
from beamaudit import CAUTION

ROOT = Path(__file__).resolve().parents[1]


def test_the_caution_says_what_the_project_promises() -> None:
    # the founders' brief: estimates; QA and optimisation; a qualified medical physicist decides;
    # local regulations take precedence
    for words in (
        "estimate",
        "quality assurance and optimisation",
        "qualified medical physicist",
        "local regulations",
    ):
        assert words in CAUTION


def test_every_stage_uses_the_one_constant() -> None:
    from beamaudit.api.web.app import CAUTION as api_caution
    from beamaudit.dashboards import CAUTION as dashboards_caution
    from beamaudit.model.exposure import ESTIMATE_NOTICE

    assert api_caution is dashboards_caution is ESTIMATE_NOTICE is beamaudit.CAUTION


def _docstrings(tree: ast.AST) -> set[int]:
    ids = set()
    for node in ast.walk(tree):
        if isinstance(node, ast.Module | ast.ClassDef | ast.FunctionDef | ast.AsyncFunctionDef):
            body = node.body
            if body and isinstance(body[0], ast.Expr) and isinstance(body[0].value, ast.Constant):
                ids.add(id(body[0].value))
    return ids


def test_no_module_writes_a_variant_of_its_own() -> None:
    variants = []
    for stage in ("ingest", "model", "api", "dashboards"):
        for path in sorted((ROOT / stage).rglob("*.py")):
            tree = ast.parse(path.read_text(encoding="utf-8"))
            skip = _docstrings(tree)
            for node in ast.walk(tree):
                if (
                    isinstance(node, ast.Constant)
                    and isinstance(node.value, str)
                    and id(node) not in skip
                    and "medical physicist" in node.value
                ):
                    variants.append(f"{path.relative_to(ROOT)}:{node.lineno}")
    assert not variants, "caution written again instead of beamaudit.CAUTION:\n" + "\n".join(
        variants
    )
