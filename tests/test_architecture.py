"""The numerical core stays free of web imports, so it can be used and tested without HTTP."""

import ast
from pathlib import Path

import pytest

CORE = Path(__file__).resolve().parents[1] / "service" / "core"
WEB = {"fastapi", "starlette", "pydantic", "pydantic_settings", "uvicorn", "httpx", "httpx2"}


@pytest.mark.parametrize("path", sorted(CORE.glob("*.py")), ids=lambda p: p.name)
def test_core_module_has_no_web_import(path):
    tree = ast.parse(path.read_text())
    for node in ast.walk(tree):
        if isinstance(node, ast.Import):
            names = [a.name for a in node.names]
        elif isinstance(node, ast.ImportFrom) and node.level == 0:
            names = [node.module or ""]
        else:
            continue
        for name in names:
            assert name.split(".")[0] not in WEB, f"{path.name} imports {name}"


def test_core_modules_exist():
    assert len(list(CORE.glob("*.py"))) >= 8
