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


def _imports_of(path: Path, package_root: Path) -> set[str]:
    """Modules of the package that ``path`` imports anywhere (top level, functions,
    type-checking blocks), as dotted names."""
    here = ".".join(path.relative_to(package_root.parent).with_suffix("").parts)
    parts = here.split(".")
    if path.name == "__init__.py":
        parts = parts[:-1]
    out: set[str] = set()
    for node in ast.walk(ast.parse(path.read_text())):
        if isinstance(node, ast.ImportFrom):
            if node.level:
                base = parts[: len(parts) - node.level]
                mod = ".".join(base + ([node.module] if node.module else []))
            else:
                mod = node.module or ""
            names = [f"{mod}.{a.name}" for a in node.names] + [mod]
        elif isinstance(node, ast.Import):
            names = [a.name for a in node.names]
        else:
            continue
        out |= {n for n in names if n.split(".")[0] == "service"}
    return out


def test_no_import_cycles_in_the_package():
    root = CORE.parent
    modules = {
        ".".join(p.relative_to(root.parent).with_suffix("").parts): p
        for p in root.rglob("*.py")
        if p.name != "__init__.py"
    }
    graph = {
        m: {n for n in _imports_of(p, root) if n in modules and n != m} for m, p in modules.items()
    }
    state: dict[str, int] = {}
    stack: list[str] = []

    def visit(m: str) -> None:
        state[m] = 1
        stack.append(m)
        for n in sorted(graph[m]):
            if state.get(n) == 1:
                cycle = [*stack[stack.index(n) :], n]
                raise AssertionError("import cycle: " + " -> ".join(cycle))
            if n not in state:
                visit(n)
        stack.pop()
        state[m] = 2

    for m in sorted(modules):
        if m not in state:
            visit(m)
