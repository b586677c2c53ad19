"""The architecture's import rules, checked on the source (ARCHITECTURE.md, STYLE.md rule 1).

``ingest`` and ``model`` import nothing of ours, ``dashboards`` takes plain tables
(nothing of ours either), and only ``api`` assembles the application. Inside ``api``
each folder is a room with one job, importing only the rooms DEVELOPERS.md's layout
table allows (:data:`API_ALLOWED`), and no module is imported from outside its own
package through an underscore name. Every ``import`` and ``from ... import`` of every
module is read with :mod:`ast`, including those inside functions.
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


#: modules of the package root (``_root/``, installed as ``beamaudit``) every stage may import
PACKAGE_ROOT_MODULES = {p.stem for p in (ROOT / "_root").glob("*.py")} - {"__init__", "__main__"}


def test_package_root_imports_no_stage() -> None:
    """The package root (version, caution, the error root) sits below every stage: it imports none
    of them (``__main__`` only starts the command line)."""
    bad = []
    for path in sorted((ROOT / "_root").glob("*.py")):
        if path.stem == "__main__":
            continue
        for lineno, target in _our_imports(path, "_root"):
            if target in STAGES:
                bad.append(f"{path.relative_to(ROOT)}:{lineno} imports {target}")
    assert not bad, "import rule broken:\n" + "\n".join(bad)


@pytest.mark.parametrize("stage", STAGES)
def test_stage_imports_only_what_it_may(stage: str) -> None:
    bad = []
    for path in sorted((ROOT / stage).rglob("*.py")):
        for lineno, target in _our_imports(path, stage):
            if target == "beamaudit" or target in PACKAGE_ROOT_MODULES:
                continue  # the package root (version, caution, error root) is allowed anywhere
            if target not in ALLOWED[stage]:
                bad.append(f"{path.relative_to(ROOT)}:{lineno} imports {target}")
    assert not bad, "import rule broken:\n" + "\n".join(bad)


# --- the rooms inside api (DEVELOPERS.md, "The layout of api/") ---------------------------------

API = ROOT / "api"
#: the modules at api/'s root: settings, logging, errors (they import no room)
API_ROOT_MODULES = {"__init__", "settings", "logs", "errors"}
#: folders of api/ that belong to a room without being one (the migrations are the store's)
API_FOLDER_ROOM = {"migrations": "store"}
#: which rooms each room of api may import (besides itself)
API_ALLOWED = {
    "root": set(),
    "review": {"root"},
    "store": {"root", "review"},
    "intake": {"root", "store"},
    "runs": {"root", "store", "review"},
    "web": {"root", "store", "review", "intake", "runs"},
    "demo": {"root", "store", "review", "intake", "runs", "web"},
    "cli": {"root", "store", "review", "intake", "runs", "web"},
}
#: single modules allowed one more room: only the CLI's demo command runs the demo
API_EXCEPTIONS = {"api/cli/demo.py": {"demo"}}


def _module_name(path: Path) -> tuple[str, str]:
    """``beamaudit.<dotted>`` of ``path`` and the package its relative imports start from."""
    parts = list(path.relative_to(ROOT).with_suffix("").parts)
    if parts[-1] == "__init__":
        parts = parts[:-1]
        return "beamaudit." + ".".join(parts), "beamaudit." + ".".join(parts)
    return "beamaudit." + ".".join(parts), "beamaudit." + ".".join(parts[:-1])


def _imported_modules(path: Path) -> list[tuple[int, str]]:
    """Every module ``path`` imports, dotted and absolute (relative imports resolved); for
    ``from package import name`` also ``package.name`` when ``name`` is a module of ours."""
    _, package = _module_name(path)
    tree = ast.parse(path.read_text(encoding="utf-8"), filename=str(path))
    found: list[tuple[int, str]] = []
    for node in ast.walk(tree):
        if isinstance(node, ast.Import):
            found.extend((node.lineno, a.name) for a in node.names)
        elif isinstance(node, ast.ImportFrom):
            if node.level:
                base = package.split(".")[: len(package.split(".")) - (node.level - 1)]
                module = ".".join([*base, node.module] if node.module else base)
            else:
                module = node.module or ""
            found.append((node.lineno, module))
            for a in node.names:
                if _our_module_path(f"{module}.{a.name}") is not None:
                    found.append((node.lineno, f"{module}.{a.name}"))
    return found


def _our_module_path(dotted: str) -> Path | None:
    """The file or package folder of one of our modules, None when it is no module of ours."""
    parts = dotted.split(".")
    if parts[0] != "beamaudit" or len(parts) < 2 or parts[1] not in STAGES:
        return None
    base = ROOT.joinpath(*parts[1:])
    for candidate in (base.with_suffix(".py"), base / "__init__.py"):
        if candidate.is_file():
            return candidate
    return None


def _api_room(parts: list[str]) -> str:
    """The room of ``beamaudit.api.<parts>``."""
    if not parts or parts[0] in API_ROOT_MODULES:
        return "root"
    return API_FOLDER_ROOM.get(parts[0], parts[0])


def test_every_api_folder_is_a_room() -> None:
    folders = {p.name for p in API.iterdir() if p.is_dir() and any(p.rglob("*.py"))}
    assert folders - set(API_FOLDER_ROOM) == set(API_ALLOWED) - {"root"}
    loose = {p.stem for p in API.glob("*.py")}
    assert loose <= API_ROOT_MODULES, f"modules at api/'s root outside the table: {loose}"


def test_api_rooms_import_only_what_they_may() -> None:
    bad = []
    for path in sorted(API.rglob("*.py")):
        rel = path.relative_to(ROOT)
        room = _api_room(list(path.relative_to(API).with_suffix("").parts))
        allowed = {room} | API_ALLOWED[room] | API_EXCEPTIONS.get(rel.as_posix(), set())
        for lineno, module in _imported_modules(path):
            parts = module.split(".")
            if parts[:2] != ["beamaudit", "api"]:
                continue
            target = _api_room(parts[2:])
            if target not in allowed:
                bad.append(f"{rel}:{lineno} ({room}) imports {module} ({target})")
    assert not bad, "api room rule broken:\n" + "\n".join(bad)


@pytest.mark.parametrize("stage", STAGES)
def test_no_underscore_module_from_outside_its_package(stage: str) -> None:
    bad = []
    for path in sorted((ROOT / stage).rglob("*.py")):
        _, package = _module_name(path)
        for lineno, module in _imported_modules(path):
            if _our_module_path(module) is None:
                continue
            parent, _, name = module.rpartition(".")
            if name.startswith("_") and not name.startswith("__") and parent != package:
                bad.append(f"{path.relative_to(ROOT)}:{lineno} imports {module}")
    assert not bad, "underscore module imported from another package:\n" + "\n".join(bad)


@pytest.mark.parametrize("stage", STAGES)
def test_no_underscore_name_from_outside_its_package(stage: str) -> None:
    """``from beamaudit.x.y import _name`` only inside the package ``beamaudit.x``."""
    bad = []
    for path in sorted((ROOT / stage).rglob("*.py")):
        _, package = _module_name(path)
        for node in ast.walk(ast.parse(path.read_text(encoding="utf-8"))):
            if not (isinstance(node, ast.ImportFrom) and node.level == 0 and node.module):
                continue
            if _our_module_path(node.module) is None:
                continue
            owner = node.module.rpartition(".")[0]
            private = [
                a.name for a in node.names if a.name.startswith("_") and not a.name.startswith("__")
            ]
            if private and package not in (owner, node.module):
                bad.append(
                    f"{path.relative_to(ROOT)}:{node.lineno} imports {private} of {node.module}"
                )
    assert not bad, "underscore name imported from another package:\n" + "\n".join(bad)


def test_one_error_root_per_stage_under_one_project_root() -> None:
    """Each stage's errors derive from its stage root, and every stage root from BeamauditError."""
    import importlib
    import inspect

    from beamaudit.errors import BeamauditError

    roots = {
        "ingest": "beamaudit.ingest.errors:IngestError",
        "model": "beamaudit.model.errors:ModelError",
        "api": "beamaudit.api.errors:ApiError",
        "dashboards": "beamaudit.dashboards.errors:DashboardError",
    }
    loose = []
    for stage, spec in roots.items():
        module_name, _, class_name = spec.partition(":")
        root = getattr(importlib.import_module(module_name), class_name)
        assert issubclass(root, BeamauditError), spec
        for path in sorted((ROOT / stage).rglob("*.py")):
            if "migrations" in path.parts or path.name == "__main__.py":
                continue
            tree = ast.parse(path.read_text(encoding="utf-8"))
            names = [
                n.name
                for n in tree.body
                if isinstance(n, ast.ClassDef)
                and n.name.endswith("Error")
                and not n.name.startswith("_")
            ]
            if not names:
                continue
            rel = path.relative_to(ROOT).with_suffix("")
            module = importlib.import_module("beamaudit." + ".".join(rel.parts))
            for name in names:
                cls = getattr(module, name)
                if (
                    inspect.isclass(cls)
                    and issubclass(cls, Exception)
                    and not issubclass(cls, root)
                ):
                    loose.append(f"{rel}.{name}")
    assert not loose, "errors outside their stage's root: " + ", ".join(loose)
