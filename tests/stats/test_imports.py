"""calibrant.stats imports only the standard library, numpy, scipy and itself (docs/architecture.md)."""

from __future__ import annotations

import ast
import sys
from pathlib import Path

import calibrant.stats

STATS_DIR = Path(calibrant.stats.__file__).parent
ALLOWED_THIRD_PARTY = {"numpy", "scipy"}


def _imports(path: Path) -> list[str]:
    tree = ast.parse(path.read_text(), filename=str(path))
    names = []
    for node in ast.walk(tree):
        if isinstance(node, ast.Import):
            names += [a.name for a in node.names]
        elif isinstance(node, ast.ImportFrom):
            if node.level:  # relative import: inside calibrant.stats by construction
                names.append("calibrant.stats")
            elif node.module:
                names.append(node.module)
    return names


def _allowed(name: str) -> bool:
    top = name.split(".", maxsplit=1)[0]
    if name == "calibrant.stats" or name.startswith("calibrant.stats."):
        return True
    return top in ALLOWED_THIRD_PARTY or top in sys.stdlib_module_names or top == "__future__"


def test_every_stats_module_imports_only_allowed_packages() -> None:
    modules = sorted(STATS_DIR.rglob("*.py"))
    assert len(modules) > 5  # the scan found the package
    bad = {str(m.relative_to(STATS_DIR)): [n for n in _imports(m) if not _allowed(n)]
           for m in modules}
    assert {k: v for k, v in bad.items() if v} == {}


def test_the_check_rejects_forbidden_imports(tmp_path: Path) -> None:
    f = tmp_path / "m.py"
    f.write_text("import sqlalchemy\nfrom calibrant.store import x\nimport pandas as pd\n"
                 "from fastapi import FastAPI\nimport numpy\n")
    assert [n for n in _imports(f) if not _allowed(n)] == [
        "sqlalchemy", "calibrant.store", "pandas", "fastapi"]
