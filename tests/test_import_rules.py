"""The architecture's import rules, checked on the source (ARCHITECTURE.md, STYLE.md rule 1).

``ingest`` and ``model`` import nothing of ours, ``dashboards`` takes plain tables
(nothing of ours either), and only ``api`` assembles the application. Every
``import`` and ``from ... import`` of every module is read with :mod:`ast`,
including those inside functions.
"""

from __future__ import annotations

import ast
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[1]
STAGES = ("ingest", "model", "api", "dashboards")

#: which of our stages each stage may import
ALLOWED = {
    "ingest": {"ingest"},
    "model": {"model"},
    "dashboards": {"dashboards"},
    "api": {"api", "ingest", "model", "dashboards"},
}


def _our_imports(path: Path, stage: str) -> list[tuple[int, str]]:
    tree = ast.parse(path.read_text(encoding="utf-8"), filename=str(path))
    found: list[tuple[int, str]] = []
    for node in ast.walk(tree):
        if isinstance(node, ast.Import):
            names = [a.name for a in node.names]
        elif isinstance(node, ast.ImportFrom):
            if node.level:  # relative: stays inside its own stage by construction
                continue
            names = [node.module or ""]
        else:
            continue
        for name in names:
            parts = name.split(".")
            if parts[0] == "beamaudit":
                target = parts[1] if len(parts) > 1 else "beamaudit"
                found.append((node.lineno, target))
            elif parts[0] in STAGES and parts[0] != stage:
                found.append((node.lineno, f"bare {parts[0]}"))
    return found


@pytest.mark.parametrize("stage", STAGES)
def test_stage_imports_only_what_it_may(stage: str) -> None:
    bad = []
    for path in sorted((ROOT / stage).rglob("*.py")):
        for lineno, target in _our_imports(path, stage):
            if target == "beamaudit":
                continue  # the package root (version) is allowed everywhere
            if target not in ALLOWED[stage]:
                bad.append(f"{path.relative_to(ROOT)}:{lineno} imports {target}")
    assert not bad, "import rule broken:\n" + "\n".join(bad)
