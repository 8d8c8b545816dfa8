"""The package's import layers (DEVELOPERS.md, Architecture): imports go one way only.

errors ← science ← inputs ← landscape ← model ← report ← workflow ← cli; every import counts,
function-local and type-only ones too. The exceptions still open are listed in KNOWN.
"""

from __future__ import annotations

import ast
from pathlib import Path

PACKAGE = Path(__file__).resolve().parent.parent / "nutricap"
ORDER = ["errors", "cautions", "science", "inputs", "landscape", "model", "report", "example"]
ORDER += ["workflow", "cli", "__main__"]
KNOWN = {
    # The landscape layer still builds (grid) or reads (density) the capacity problem.
    ("landscape/density.py", "model"),
    ("landscape/grid/supply.py", "model"),
}


def _layer(module: str) -> str:
    return module.split(".")[1]


def _imports(path: Path) -> set[str]:
    found = set()
    for node in ast.walk(ast.parse(path.read_text(encoding="utf-8"))):
        if isinstance(node, ast.ImportFrom) and node.module and node.module.startswith("nutricap."):
            found.add(node.module)
        elif isinstance(node, ast.ImportFrom) and node.module == "nutricap":
            found.update(f"nutricap.{alias.name}" for alias in node.names)
        elif isinstance(node, ast.Import):
            found.update(a.name for a in node.names if a.name.startswith("nutricap."))
    return found


def test_every_import_points_down_the_layers():
    upward = []
    for path in sorted(PACKAGE.rglob("*.py")):
        name = path.relative_to(PACKAGE).as_posix()
        if name == "__init__.py" or name.startswith("data/"):
            continue
        own = ORDER.index(_layer("nutricap." + name.removesuffix(".py").replace("/", ".")))
        for module in _imports(path):
            target = _layer(module)
            if target in ORDER and ORDER.index(target) > own and (name, target) not in KNOWN:
                upward.append(f"{name} imports {module}")
    assert upward == []


def test_known_exceptions_are_still_needed():
    """An exception that no longer holds is removed from KNOWN (the list only shrinks)."""
    for name, target in KNOWN:
        assert any(_layer(m) == target for m in _imports(PACKAGE / name)), name
