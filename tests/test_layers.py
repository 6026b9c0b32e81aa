"""Imports point down only (docs/architecture.md): a module may import its own layer or a lower one.

Reads every module's import statements with ``ast`` (nothing is executed), so an upward import fails here even
when it sits inside a function.
"""

from __future__ import annotations

import ast
from pathlib import Path

import pytest

PACKAGE = Path(__file__).resolve().parents[1] / "hostapp" / "taprig"

# Rank of each top-level subpackage; higher may import lower or equal, never higher.
RANK = {
    "protocol": 0,
    "physics": 0,
    "rig": 1,
    "reduce": 2,
    "analysis": 2,
    "sim": 3,
    "link": 4,
    "session": 4,
    "runtime": 5,
    "cli": 6,
    "web": 6,
    "report": 6,
    "bench": 6,
}

# Foundations are pure and must not depend on each other's siblings at their own rank either.
FORBIDDEN_SAME_RANK = {("protocol", "physics"), ("physics", "protocol"), ("link", "session"), ("session", "link")}

PURE = {"protocol", "physics", "rig", "reduce", "analysis"}
IMPURE_MODULES = {"threading", "socket", "serial", "sqlite3", "subprocess", "flask", "multiprocessing"}


def _layer_of(path: Path) -> str | None:
    rel = path.relative_to(PACKAGE).parts
    return rel[0] if len(rel) > 1 else None


def _imports(path: Path) -> list[str]:
    tree = ast.parse(path.read_text(encoding="utf-8"), filename=str(path))
    names = []
    for node in ast.walk(tree):
        if isinstance(node, ast.Import):
            names += [alias.name for alias in node.names]
        elif isinstance(node, ast.ImportFrom) and node.module and node.level == 0:
            names.append(node.module)
    return names


MODULES = sorted(p for p in PACKAGE.rglob("*.py") if _layer_of(p) in RANK)


@pytest.mark.parametrize("path", MODULES, ids=lambda p: str(p.relative_to(PACKAGE)))
def test_imports_point_down(path: Path) -> None:
    here = _layer_of(path)
    for name in _imports(path):
        parts = name.split(".")
        if parts[0] != "taprig" or len(parts) < 2 or parts[1] not in RANK:
            continue
        there = parts[1]
        assert RANK[there] <= RANK[here], f"{path.name} ({here}) imports {name} from a higher layer"
        assert (here, there) not in FORBIDDEN_SAME_RANK, f"{path.name} ({here}) imports {name} across the layer"


@pytest.mark.parametrize("path", [p for p in MODULES if _layer_of(p) in PURE], ids=lambda p: str(p.relative_to(PACKAGE)))
def test_pure_layers_do_no_io(path: Path) -> None:
    top = {name.split(".")[0] for name in _imports(path)}
    assert not top & IMPURE_MODULES, f"{path.name} is in a pure layer but imports {sorted(top & IMPURE_MODULES)}"


def test_every_layer_is_ranked() -> None:
    # A new subpackage must be given its place in the layer table before it can be used.
    layers = {p.name for p in PACKAGE.iterdir() if p.is_dir() and (p / "__init__.py").exists()}
    assert layers <= set(RANK), f"unranked subpackages: {sorted(layers - set(RANK))}"
