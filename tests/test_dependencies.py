"""What the package imports is declared in pyproject.toml with a lower bound, and no more is required than that:
psutil (memory figures of the benchmarks and soak tests) is an optional extra, imported only where it is used."""

from __future__ import annotations

import ast
import re
import sys
import tomllib
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
PACKAGE = ROOT / "hostapp" / "taprig"
PYPROJECT = tomllib.loads((ROOT / "pyproject.toml").read_text(encoding="utf-8"))
# import name → distribution name, where they differ
DISTRIBUTION = {"serial": "pyserial"}


def _names(requirements: list[str]) -> dict[str, str]:
    """Distribution name (lower case) → its requirement text; every one must carry a lower bound."""
    out = {}
    for text in requirements:
        name = re.match(r"[A-Za-z0-9_.-]+", text).group(0).lower()
        assert ">=" in text, f"{text}: no lower bound"
        out[name] = text
    return out


CORE = _names(PYPROJECT["project"]["dependencies"])
EXTRAS = {extra: _names(reqs) for extra, reqs in PYPROJECT["project"]["optional-dependencies"].items()}


def _imports() -> list[tuple[Path, str, bool]]:
    """(file, top-level module, at module level?) of every third-party import in the package."""
    found = []
    for path in PACKAGE.rglob("*.py"):
        tree = ast.parse(path.read_text(encoding="utf-8"))
        top_level = {id(node) for node in tree.body}
        for node in ast.walk(tree):
            if isinstance(node, ast.Import):
                names = [alias.name.split(".")[0] for alias in node.names]
            elif isinstance(node, ast.ImportFrom) and node.level == 0 and node.module:
                names = [node.module.split(".")[0]]
            else:
                continue
            for name in names:
                if name != "taprig" and name not in sys.stdlib_module_names and name != "__future__":
                    found.append((path, name, id(node) in top_level))
    return found


def test_every_import_is_declared_and_psutil_is_an_extra():
    imported = _imports()
    assert imported
    for path, name, module_level in imported:
        dist = DISTRIBUTION.get(name, name).lower()
        if dist in CORE:
            continue
        extras = [extra for extra, reqs in EXTRAS.items() if dist in reqs and extra != "test"]
        assert extras, f"{path.relative_to(ROOT)} imports {name}, declared nowhere"
        assert not module_level, f"{path.relative_to(ROOT)} imports the optional {name} at module level"
    assert "psutil" not in CORE and "psutil" in EXTRAS["bench"] and "psutil" in EXTRAS["test"]
    assert "duckdb" in EXTRAS["test"]
