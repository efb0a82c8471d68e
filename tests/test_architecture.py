"""The floors of the package: imports point only downwards, the core and the selection layer
stay free of web (and the core of plotting) imports, so they can be used and tested without
HTTP."""

import ast
import json
import re
from pathlib import Path

import pytest

CORE = Path(__file__).resolve().parents[1] / "service" / "core"
WEB = {"fastapi", "starlette", "pydantic", "pydantic_settings", "uvicorn", "httpx", "httpx2"}
PLOTTING = {"matplotlib"}
#: packages a floor must not import
FORBIDDEN = {"core": WEB | PLOTTING, "selection": WEB | PLOTTING, "report": WEB}
FLOOR_FILES = [
    (floor, p) for floor in FORBIDDEN for p in sorted((CORE.parent / floor).rglob("*.py"))
]


def _file_id(floor: str, p: Path) -> str:
    return f"{floor}/{p.relative_to(CORE.parent / floor).as_posix()}"


@pytest.mark.parametrize(
    ("floor", "path"), FLOOR_FILES, ids=[_file_id(f, p) for f, p in FLOOR_FILES]
)
def test_lower_floors_import_no_web_or_plotting_package(floor, path):
    tree = ast.parse(path.read_text())
    for node in ast.walk(tree):
        if isinstance(node, ast.Import):
            names = [a.name for a in node.names]
        elif isinstance(node, ast.ImportFrom) and node.level == 0:
            names = [node.module or ""]
        else:
            continue
        for name in names:
            assert name.split(".")[0] not in FORBIDDEN[floor], f"{floor}/{path.name} imports {name}"


def test_core_modules_exist():
    assert len(list(CORE.glob("*.py"))) >= 8


def _imports_of(path: Path, package_root: Path) -> set[str]:
    """Modules of the package that ``path`` imports anywhere (top level, functions,
    type-checking blocks), as dotted names."""
    here = ".".join(path.relative_to(package_root.parent).with_suffix("").parts)
    # a package's __init__ sits one level deeper than its name: `from . import x` there
    # is the package's own x
    parts = here.split(".")
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


def _import_graph(root: Path) -> dict[str, set[str]]:
    """Module (a package's ``__init__`` by the package's name) -> the modules and packages
    of ``root`` it imports anywhere; ``from pkg import name`` counts as importing ``pkg``
    unless ``name`` is a module of it."""
    modules = {}
    for p in root.rglob("*.py"):
        parts = p.relative_to(root.parent).with_suffix("").parts
        modules[".".join(parts[:-1] if p.name == "__init__.py" else parts)] = p

    def target(name: str) -> str | None:
        return next((t for t in (name, name.rsplit(".", 1)[0]) if t in modules), None)

    return {
        m: {t for n in _imports_of(p, root) if (t := target(n)) is not None and t != m}
        for m, p in modules.items()
    }


def test_no_import_cycles_in_the_package():
    graph = _import_graph(CORE.parent)
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

    for m in sorted(graph):
        if m not in state:
            visit(m)


def test_the_cycle_check_sees_a_cycle_through_a_package(tmp_path):
    pkg = tmp_path / "service" / "api" / "render"
    pkg.mkdir(parents=True)
    (pkg / "__init__.py").write_text("from . import area\n\ndef contract(x):\n    return x\n")
    (pkg / "area.py").write_text("from . import contract\n")
    (pkg / "registry.py").write_text("")
    graph = _import_graph(tmp_path / "service")
    assert graph["service.api.render"] == {"service.api.render.area"}
    assert graph["service.api.render.area"] == {"service.api.render"}  # the cycle
    (pkg / "area.py").write_text("from .registry import contract\n")
    assert _import_graph(tmp_path / "service")["service.api.render.area"] == {
        "service.api.render.registry"
    }


#: floors of the package, top to bottom; a module may import its own floor and those below
FLOORS = {
    "api": ("api", "selection", "report", "core", "base"),
    "selection": ("selection", "core"),
    "report": ("report", "core"),
    "core": ("core",),
}
#: top-level modules every floor above the core may read (configuration, version)
BASE = {"service.settings", "service.version"}


def _floor(module: str) -> str:
    parts = module.split(".")
    if len(parts) >= 2 and parts[1] in FLOORS:
        return parts[1]
    return "base" if module in BASE else "top"


def test_imports_point_only_downwards():
    """Every module and package ``__init__`` of a floor imports only its own floor and those
    below it."""
    wrong = []
    for m, targets in sorted(_import_graph(CORE.parent).items()):
        floor = _floor(m)
        if floor not in FLOORS:
            continue  # entry points (app, cli, batch, server) may import every floor
        wrong += [
            f"{m} ({floor}) imports {t} ({_floor(t)})"
            for t in sorted(targets)
            if _floor(t) not in FLOORS[floor]
        ]
    assert not wrong, "\n".join(wrong)


#: what only the web layer may write: a JSON Pointer into a request, an RFC 9457 problem
_POINTER_TEXT = re.compile(r"^/[A-Za-z_~]")
_PROBLEM_TEXT = ("urn:bestscale:problem", "problem+json")
DOMAIN_FILES = [
    (floor, p)
    for floor in ("core", "selection")
    for p in sorted((CORE.parent / floor).rglob("*.py"))
]


@pytest.mark.parametrize(
    ("floor", "path"), DOMAIN_FILES, ids=[_file_id(f, p) for f, p in DOMAIN_FILES]
)
def test_core_and_selection_name_places_without_json_pointers_or_problem_bodies(floor, path):
    """Errors below the web layer name domain locations (service/core/errors.py); only
    service/api/pointers.py spells them as JSON Pointers and service/api/errors.py builds
    problem bodies."""
    found = []
    for node in ast.walk(ast.parse(path.read_text())):
        if isinstance(node, ast.Constant) and isinstance(node.value, str):
            if _POINTER_TEXT.match(node.value) or any(t in node.value for t in _PROBLEM_TEXT):
                found.append(f"line {node.lineno}: {node.value[:40]!r}")
        elif isinstance(node, ast.JoinedStr) and node.values:
            first = node.values[0]
            if isinstance(first, ast.Constant) and _POINTER_TEXT.match(str(first.value)):
                found.append(f"line {node.lineno}: an f-string starting {first.value!r}")
        name = (
            node.id
            if isinstance(node, ast.Name)
            else node.attr
            if isinstance(node, ast.Attribute)
            else node.name
            if isinstance(node, (ast.FunctionDef, ast.ClassDef))
            else node.arg
            if isinstance(node, ast.arg)
            else ""
        )
        if "pointer" in name.lower() or (isinstance(node, ast.Constant) and node.value == "status"):
            found.append(f"line {node.lineno}: {name or node.value!r}")
    assert not found, f"{floor}/{path.name} builds request pointers or problems: {found}"


def test_the_pointer_check_sees_what_it_forbids(tmp_path):
    bad = tmp_path / "bad.py"
    bad.write_text(
        'def f(i):\n    return ("/data/columns", f"/predictors/{i}", {"status": 422})\n'
        "cell_pointer = 1\n"
    )
    with pytest.raises(AssertionError, match="builds request pointers") as exc:
        test_core_and_selection_name_places_without_json_pointers_or_problem_bodies("core", bad)
    for seen in ("/data/columns", "/predictors/", "status", "cell_pointer"):
        assert seen in str(exc.value)


def test_the_floors_hold_modules():
    root = CORE.parent
    for floor in FLOORS:
        assert len(list((root / floor).glob("*.py"))) >= 4, floor


#: modules that hold a class or function but no logic of their own to test, each with the
#: reason (modules with neither -- service/version.py, core/_types.py, the package
#: __init__ files -- need no test module and are not listed). Empty now: even the
#: declarative response models have tests/api/test_responses.py.
NO_LOGIC: dict[str, str] = {}
#: modules without a test module of their own yet, with the reason (keep this short)
NOT_YET: dict[str, str] = {}


def _test_module_for(path: Path) -> Path:
    """service/<floor>/<name>.py -> tests/<floor>/test_<name>.py (leading underscores of a
    private module dropped); service/<name>.py -> tests/test_<name>.py; a package's
    __init__.py -> the test module named after the package, beside the package's own."""
    root = CORE.parent
    tests = root.parent / "tests"
    rel = path.relative_to(root)
    if rel.name == "__init__.py":
        return tests.joinpath(*rel.parts[:-2], f"test_{rel.parts[-2].strip('_')}.py")
    return tests.joinpath(*rel.parts[:-1], f"test_{rel.stem.strip('_')}.py")


def _has_logic(path: Path) -> bool:
    tree = ast.parse(path.read_text())
    defs = (ast.FunctionDef, ast.AsyncFunctionDef, ast.ClassDef)
    return any(isinstance(node, defs) for node in tree.body)


def test_every_module_with_logic_has_its_own_test_module():
    root = CORE.parent
    missing = []
    for path in sorted(root.rglob("*.py")):
        rel = path.relative_to(root.parent).as_posix()
        if not _has_logic(path) or rel in NO_LOGIC or rel in NOT_YET:
            continue
        if not _test_module_for(path).is_file():
            missing.append(f"{rel} -> {_test_module_for(path).relative_to(root.parent)}")
    assert not missing, "modules without a test module of their own:\n" + "\n".join(missing)


def _module_name(path: Path) -> str:
    root = CORE.parent
    parts = path.relative_to(root.parent).with_suffix("").parts
    return ".".join(parts[:-1] if path.name == "__init__.py" else parts)


def _is_router(path: Path) -> bool:
    """True for a module of routes (an ``APIRouter``), which its tests reach over HTTP."""
    return "APIRouter(" in path.read_text()


def _siblings_imported(module: Path) -> set[str]:
    """Stems of the modules of its own package that ``module`` imports (``__init__`` for
    the package itself)."""
    out: set[str] = set()
    for node in ast.walk(ast.parse(module.read_text())):
        if isinstance(node, ast.ImportFrom) and node.level == 1:
            if node.module:
                out.add(node.module.split(".")[0])
            else:
                out |= {a.name for a in node.names}
    return out


def _reached_in_package(imported: set[str], path: Path) -> bool:
    """True when ``path`` sits in a package below a floor (not in a floor itself) and a
    module of that package the test imports (or the package itself) imports ``path``,
    directly or through other modules of that package: a family module reached through its
    package's registry, a module whose names the package re-exports."""
    if path.parent.parent in (CORE.parent, CORE.parent.parent):
        return False  # a floor's modules are each tested on their own
    package = _module_name(path.parent / "__init__.py")
    stems = {f.stem for f in path.parent.glob("*.py")}
    todo = [
        "__init__" if name == package else name.rsplit(".", 1)[1]
        for name in imported
        if name == package or name.rsplit(".", 1)[0] == package
    ]
    seen: set[str] = set()
    while todo:
        stem = todo.pop()
        if stem in seen or stem not in stems:
            continue
        seen.add(stem)
        todo.extend(_siblings_imported(path.parent / f"{stem}.py"))
    return path.stem in seen


def _exercises(test_path: Path, path: Path) -> bool:
    """True when ``test_path`` imports the module at ``path``, or a module of its package
    that uses it (:func:`_reached_in_package`), or, for a module of routes, the app that
    serves them."""
    wanted = {_module_name(path)} | ({"service.app"} if _is_router(path) else set())
    seen: set[str] = set()
    for node in ast.walk(ast.parse(test_path.read_text())):
        if isinstance(node, ast.ImportFrom) and node.level == 0 and node.module:
            seen |= {node.module} | {f"{node.module}.{a.name}" for a in node.names}
        elif isinstance(node, ast.Import):
            seen |= {a.name for a in node.names}
    if seen & wanted:
        return True
    return path.name != "__init__.py" and _reached_in_package(seen, path)


def test_every_test_module_imports_the_module_it_is_named_after():
    """A test module named after a module tests that module: it imports it (a module of
    routes may be reached through service.app instead)."""
    root = CORE.parent
    missing = []
    for path in sorted(root.rglob("*.py")):
        rel = path.relative_to(root.parent).as_posix()
        if not _has_logic(path) or rel in NO_LOGIC or rel in NOT_YET:
            continue
        test_path = _test_module_for(path)
        if test_path.is_file() and not _exercises(test_path, path):
            missing.append(f"{test_path.relative_to(root.parent)} never imports {rel}")
    assert not missing, "\n".join(missing)


def test_the_import_check_sees_a_test_module_that_ignores_its_module(tmp_path):
    fake = tmp_path / "test_fitting.py"
    fake.write_text("from service.core import folds\n\ndef test_x():\n    assert folds\n")
    assert not _exercises(fake, CORE / "fitting.py")
    fake.write_text("from service.core.fitting import ols\n")
    assert _exercises(fake, CORE / "fitting.py")
    fake.write_text("import service.core.fitting\n")
    assert _exercises(fake, CORE / "fitting.py")
    fake.write_text("def test_x():\n    from service.app import app\n")
    assert _exercises(fake, CORE.parent / "api" / "routes.py")
    assert not _exercises(fake, CORE.parent / "api" / "errors.py")
    # a package below a floor: its modules may be reached through the package's own imports
    fake.write_text("from service.core.transforms import Transform\n")
    assert _exercises(fake, CORE / "transforms" / "categorical.py")
    # ... but a floor's modules are not reached through one another
    fake.write_text("from service.core.crossval import cross_validate\n")
    assert not _exercises(fake, CORE / "fastcv.py")


def test_the_exception_lists_name_real_modules_that_need_them():
    root = CORE.parent.parent
    for rel in [*NO_LOGIC, *NOT_YET]:
        path = root / rel
        assert path.is_file(), f"{rel} is listed but does not exist"
        assert _has_logic(path), f"{rel} holds no class or function; list it nowhere"
        assert not _test_module_for(path).is_file(), f"{rel} has a test module now"


def test_the_mapping_of_modules_to_test_modules():
    root = CORE.parent
    tests = root.parent / "tests"
    assert _test_module_for(root / "core" / "fitting.py") == tests / "core" / "test_fitting.py"
    assert (
        _test_module_for(root / "core" / "_smear_tree.py") == tests / "core" / "test_smear_tree.py"
    )
    assert _test_module_for(root / "__main__.py") == tests / "test_main.py"
    assert _test_module_for(root / "demo" / "__init__.py") == tests / "test_demo.py"
    assert (
        _test_module_for(root / "api" / "routes" / "x.py") == tests / "api" / "routes" / "test_x.py"
    )


#: the settings that limit what a request may ask; only service/api/options.py reads them
LIMIT_SETTINGS = frozenset(
    {
        "max_rows",
        "max_columns",
        "max_table_columns",
        "max_uncompressed_bytes",
        "max_candidates",
        "default_max_candidates",
        "max_time_limit_s",
        "default_time_limit_s",
        "max_groups",
    }
)
LIMITS_READ_IN = ("service/settings.py", "service/api/options.py")


def _settings_limits_read(path: Path) -> list[str]:
    """Lines of ``path`` that read a limit setting: ``<...>settings()<...>.max_rows`` or an
    attribute of a name bound from ``get_settings()`` (``s = get_settings(); s.max_rows``)."""
    tree = ast.parse(path.read_text())
    bound = {
        t.id
        for node in ast.walk(tree)
        if isinstance(node, ast.Assign)
        and isinstance(node.value, ast.Call)
        and isinstance(node.value.func, ast.Name)
        and node.value.func.id == "get_settings"
        for t in node.targets
        if isinstance(t, ast.Name)
    }
    found = []
    for node in ast.walk(tree):
        if not (isinstance(node, ast.Attribute) and node.attr in LIMIT_SETTINGS):
            continue
        base = node.value
        via_call = (
            isinstance(base, ast.Call)
            and isinstance(base.func, ast.Name)
            and base.func.id == "get_settings"
        )
        if via_call or (isinstance(base, ast.Name) and base.id in bound):
            found.append(f"line {node.lineno}: .{node.attr}")
    return found


def test_request_limits_are_read_and_checked_in_one_module():
    """Every service limit on a request is checked by one helper in api/options.py (which
    hands the group limit to selection/request.py as a number); no other module reads the
    limit settings, so no second copy of a check can drift from the first."""
    root = CORE.parent
    wrong = {
        p.relative_to(root.parent).as_posix(): lines
        for p in sorted(root.rglob("*.py"))
        if p.relative_to(root.parent).as_posix() not in LIMITS_READ_IN
        and (lines := _settings_limits_read(p))
    }
    assert not wrong, wrong


def test_the_limit_check_sees_what_it_forbids(tmp_path):
    bad = tmp_path / "bad.py"
    bad.write_text(
        "def f(rows):\n    s = get_settings()\n    if rows > s.max_rows:\n        raise X\n"
        "    return get_settings().max_groups, opts.max_candidates\n"
    )
    assert _settings_limits_read(bad) == ["line 3: .max_rows", "line 5: .max_groups"]


#: field names of the contract that the shipped example responses do not show
MORE_CONTRACT_NAMES = frozenset(
    [
        "problem",
        "conditions_note",
        "hac_lags",
        "hac_lag_rule",
        "response_lambda",
        "share",
        "runner_up",
        "selected_cv",
        "nested_cv",
        "gap",
        "gap_std_error",
        "ratio",
        "resamples",
        "first_share",
        "basis",
        "selected",
        "wins",
        "interval_level",
        "first",
        "contenders",
        "contender_rule",
        "estimated_powers_left_out",
        "held_fixed",
        "rule_reproduces_rank_1",
        "outer_folds",
        "inner_folds",
        "outer_folds_used",
        "training_min",
        "training_max",
        "new_levels",
        "vanished_levels",
        "below",
        "above",
        "now_min",
        "now_max",
        "psi",
        "median_then",
        "median_now",
        "mean_then",
        "mean_now",
        "groups_failed",
        "per_fold",
        "conditions_note",
        "requested",
        "usable",
        "failed",
        "difference",
        "details",
        "problems",
        "not_run",
        "groups",
        "classical",
        "hc3",
        "hac",
        "r2",
        "df_model",
        "df_resid",
        "lags",
        "common_practice_range",
        "then",
        "now",
        "outside_range",
        "shift",
        "flags",
        "flagged",
        # the incumbent decision (service/api/render/incumbent.py)
        "decision",
        # the trust block (service/api/render/trust.py)
        "stability",
        "optimism",
        "stability_details",
        "time_limit_s",
        "winner_selected",
        "rows_held_out",
        "selected_specification",
        "same_as_winner",
        "inner_complete",
        "nested_error",
        "winner_error",
        # the coefficient table under Newey-West standard errors (service/api/render/estimates.py)
        "std_error_hac",
        "t_statistic_hac",
        "p_value_hac",
        "ci_low_hac",
        "ci_high_hac",
        # the model artifact's CV+ powers estimated per fold (service/api/render/model.py)
        "fold_powers",
        "columns",
    ]
)
#: files of the lower floors that still build contract dicts, and how many contract names
#: they write: each area moves to service/api/render/ in turn and its count here drops (a
#: count may only fall; the test fails when a file writes more, or fewer without this table
#: saying so)
NOT_YET_RENDERED = {
    "core/spec.py": 7,
    "core/transforms/categorical.py": 2,
    "core/transforms/family.py": 2,
    "core/transforms/log.py": 3,
    "core/transforms/powers.py": 5,
    "core/transforms/value.py": 2,
    "selection/candidates.py": 1,
}


def contract_names() -> frozenset[str]:
    """Every field name of the shipped example responses, and the few they do not show."""
    out: set[str] = set()

    def walk(o):
        if isinstance(o, dict):
            out.update(o)
            for v in o.values():
                walk(v)
        elif isinstance(o, list):
            for v in o:
                walk(v)

    for p in (CORE.parents[1] / "openapi_examples").glob("*.response.json"):
        walk(json.loads(p.read_text()))
    return frozenset(out) | MORE_CONTRACT_NAMES


def _key_text(node: ast.expr | None, names: frozenset[str]) -> str | None:
    """The contract name a key expression writes: a string constant that is one, or an
    f-string whose leading text starts one (``f"ci_low{suffix}"``)."""
    if isinstance(node, ast.Constant) and isinstance(node.value, str):
        return node.value if node.value in names else None
    if isinstance(node, ast.JoinedStr) and node.values:
        first = node.values[0]
        lead = first.value if isinstance(first, ast.Constant) else ""
        if isinstance(lead, str) and lead and any(n.startswith(lead) for n in names):
            return lead + "{...}"
    return None


def contract_keys_written(path: Path, names: frozenset[str]) -> list[str]:
    """The contract names ``path`` writes as keys: ``{"name": ...}``, ``dict(name=...)``,
    ``d["name"] = ...``, ``d.update(name=...)``, ``d.setdefault("name", ...)`` (f-string
    keys by their leading text)."""
    found = []
    for node in ast.walk(ast.parse(path.read_text())):
        if isinstance(node, ast.Dict):
            keys = [_key_text(k, names) for k in node.keys]
        elif isinstance(node, ast.Call) and isinstance(node.func, ast.Name):
            is_dict = node.func.id == "dict"
            keys = [k.arg if k.arg in names else None for k in node.keywords] if is_dict else []
        elif isinstance(node, ast.Call) and isinstance(node.func, ast.Attribute):
            if node.func.attr == "update":
                keys = [k.arg if k.arg in names else None for k in node.keywords]
            elif node.func.attr == "setdefault" and node.args:
                keys = [_key_text(node.args[0], names)]
            else:
                keys = []
        elif isinstance(node, ast.Subscript) and isinstance(node.ctx, ast.Store):
            keys = [_key_text(node.slice, names)]
        else:
            continue
        found += [f"line {node.lineno}: {k}" for k in keys if k is not None]
    return found


RENDER_FILES = [
    (floor, p)
    for floor in ("core", "selection", "report")
    for p in sorted((CORE.parent / floor).rglob("*.py"))
]


@pytest.mark.parametrize(
    ("floor", "path"), RENDER_FILES, ids=[_file_id(f, p) for f, p in RENDER_FILES]
)
def test_contract_field_names_are_written_only_in_the_render_package(floor, path):
    """service/api/render/ turns typed results into contract JSON; the floors below return
    typed results.  Files not yet moved keep a fixed allowance that may only fall."""
    rel = _file_id(floor, path) if path.is_relative_to(CORE.parent) else path.name
    found = contract_keys_written(path, contract_names())
    allowed = NOT_YET_RENDERED.get(rel, 0)
    assert len(found) <= allowed, f"{rel} writes contract field names: {found}"
    assert len(found) == allowed, (
        f"{rel} now writes {len(found)} contract names, not {allowed}: lower its allowance"
    )


def test_the_contract_name_check_sees_what_it_forbids(tmp_path):
    bad = tmp_path / "bad.py"
    bad.write_text(
        "def f(x, d, s):\n"
        '    d["rank"] = 1\n'
        '    d.update(rule="r", inner=2)\n'
        '    d.setdefault("estimates", {})\n'
        '    d[f"ci_low{s}"] = 3\n'
        '    return {"threshold": x, "inner": 1, f"zz{s}": 2}, dict(rank=2)\n'
    )
    found = contract_keys_written(bad, contract_names())
    assert sorted(f.split(": ")[1] for f in found) == sorted(
        ["rank", "rule", "estimates", "ci_low{...}", "threshold", "rank"]
    )
    with pytest.raises(AssertionError, match="writes contract field names"):
        test_contract_field_names_are_written_only_in_the_render_package("core", bad)


def test_the_allowances_name_files_that_exist():
    for rel in NOT_YET_RENDERED:
        assert (CORE.parent / rel).is_file(), rel


#: floors whose modules import only at module level (the entry points above them may defer
#: an import into a function, saying why: see DEVELOPERS.md, "Imports point downwards")
IMPORT_AT_TOP_FILES = [
    (floor, p)
    for floor in ("api", "selection", "report", "core")
    for p in sorted((CORE.parent / floor).rglob("*.py"))
]


def imports_in_functions(path: Path) -> list[str]:
    """``import`` statements inside the function bodies of ``path``, by line."""
    found = []
    for fn in ast.walk(ast.parse(path.read_text())):
        if isinstance(fn, (ast.FunctionDef, ast.AsyncFunctionDef)):
            found += [
                f"line {node.lineno}: {ast.unparse(node)}"
                for node in ast.walk(fn)
                if isinstance(node, (ast.Import, ast.ImportFrom))
            ]
    return found


@pytest.mark.parametrize(
    ("floor", "path"), IMPORT_AT_TOP_FILES, ids=[_file_id(f, p) for f, p in IMPORT_AT_TOP_FILES]
)
def test_the_floors_import_at_module_level_only(floor, path):
    """An import inside a function hides a dependency (often one that would be a cycle);
    the floors import everything at the top."""
    assert not imports_in_functions(path), f"{_file_id(floor, path)} imports inside functions"


def test_the_import_position_check_sees_what_it_forbids(tmp_path):
    bad = tmp_path / "bad.py"
    bad.write_text(
        "import math\n\ndef f():\n    from .x import y\n    return y\n\n"
        "class C:\n    async def g(self):\n        import json\n"
    )
    assert imports_in_functions(bad) == ["line 4: from .x import y", "line 9: import json"]
