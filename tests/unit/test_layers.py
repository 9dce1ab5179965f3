"""The layer rules of DESIGN.md / STYLE.md, checked on every module's imports (parsed, not run)."""

from __future__ import annotations

import ast
import subprocess
import sys
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[2]
STDLIB = set(sys.stdlib_module_names)
NS = "tuttiml"
WINGS = {"service": ROOT / "service", "workers": ROOT / "workers", NS: ROOT / NS}


def _module_name(path: Path) -> str:
    """The dotted name ``path`` installs under (``service/x.py`` -> ``tuttiml.service.x``)."""
    for wing, folder in WINGS.items():
        if path.is_relative_to(folder):
            parts = list(path.relative_to(folder).with_suffix("").parts)
            head = [NS] if wing == NS else [NS, wing]
            if parts[-1] == "__init__":
                parts = parts[:-1]
            return ".".join(head + parts)
    raise ValueError(path)


def _is_type_checking(node: ast.If) -> bool:
    test = node.test
    return (isinstance(test, ast.Name) and test.id == "TYPE_CHECKING") or (
        isinstance(test, ast.Attribute) and test.attr == "TYPE_CHECKING"
    )


def _absolute(node: ast.ImportFrom, here: str, is_package: bool) -> str:
    if node.level == 0:
        return node.module or ""
    base = here.split(".") if is_package else here.split(".")[:-1]
    base = base[: len(base) - (node.level - 1)]
    return ".".join(base + ([node.module] if node.module else []))


def _imports(path: Path, *, top_level_only: bool = False, module: str | None = None) -> set[str]:
    """Every module ``path`` imports, relative imports resolved.

    With ``top_level_only`` the imports that run when the module is imported: the module body,
    ``try``/``with`` blocks and ``if`` blocks other than ``if TYPE_CHECKING:``, but not
    function or class bodies. ``module`` names a file outside the checkout.
    """
    here = module or _module_name(path)
    is_package = path.stem == "__init__"
    out: set[str] = set()

    def visit(nodes: list[ast.stmt], nested: bool) -> None:
        for node in nodes:
            if isinstance(node, ast.Import):
                out.update(a.name for a in node.names)
            elif isinstance(node, ast.ImportFrom):
                out.add(_absolute(node, here, is_package))
            elif isinstance(node, ast.If):
                if not _is_type_checking(node):
                    visit(node.body, nested)
                    visit(node.orelse, nested)
            elif isinstance(node, ast.Try):
                for block in (node.body, node.orelse, node.finalbody):
                    visit(block, nested)
                for handler in node.handlers:
                    visit(handler.body, nested)
            elif isinstance(node, ast.With):
                visit(node.body, nested)
            elif isinstance(node, (ast.FunctionDef, ast.AsyncFunctionDef, ast.ClassDef)):
                if not top_level_only:
                    visit(node.body, True)
            elif not top_level_only and hasattr(node, "body"):
                visit(node.body, True)  # for/while bodies

    visit(ast.parse(path.read_text()).body, False)
    return out


def _top(name: str) -> str:
    """The wing or library a module belongs to: ``tuttiml.service.x`` -> ``service``."""
    parts = name.split(".")
    if parts[0] == NS and len(parts) > 1 and parts[1] in ("service", "workers"):
        return parts[1]
    return parts[0]


def _modules(package: str) -> list[Path]:
    return sorted((ROOT / package).rglob("*.py"))


def test_import_reader_sees_guarded_and_relative_imports(tmp_path: Path) -> None:
    # A module that hides imports under try/if and imports relatively must not slip through.
    # (written outside the checkout: another test process may be listing service/ meanwhile)
    fake = tmp_path / "_layer_probe_tmp.py"
    fake.write_text(
        "try:\n    import optuna\nexcept ImportError:\n    pass\n"
        "if True:\n    import lightgbm\n"
        "from ..workers import search\n"
        "from typing import TYPE_CHECKING\nif TYPE_CHECKING:\n    import sklearn\n"
    )
    found = _imports(fake, top_level_only=True, module="tuttiml.service._layer_probe_tmp")
    assert {"optuna", "lightgbm", "tuttiml.workers"} <= found
    assert "sklearn" not in found


@pytest.mark.parametrize("path", _modules("service") + _modules("workers") + _modules(NS))
def test_no_bare_wing_imports(path: Path) -> None:
    # Installed, the wings exist only as tuttiml.service / tuttiml.workers.
    bare = {m for m in _imports(path) if m.split(".")[0] in ("service", "workers")}
    assert not bare, f"{path}: import through the namespace, not {sorted(bare)}"


@pytest.mark.parametrize("path", _modules("service"), ids=lambda p: p.name)
def test_service_never_imports_workers_or_ml_at_import_time(path: Path) -> None:
    everywhere = {_top(m) for m in _imports(path)}
    assert "workers" not in everywhere, f"{path.name} imports workers/"
    assert not everywhere & {"optuna", "lightgbm"}, f"{path.name} imports optuna/lightgbm"
    top = {_top(m) for m in _imports(path, top_level_only=True)}
    assert not top & {"sklearn", "skops"}, f"{path.name}: sklearn/skops only lazily"


@pytest.mark.parametrize(
    "name", ["spec", "errors", "config", "keys", "trusted", "version", "records"]
)
def test_contract_modules_import_only_stdlib_pydantic_and_each_other(name: str) -> None:
    allowed = STDLIB | {"pydantic", "service", "__future__"}
    for mod in _imports(ROOT / "service" / f"{name}.py"):
        assert _top(mod) in allowed, f"service/{name}.py imports {mod}"
        if _top(mod) == "service":
            assert mod.split(".")[2] in {"spec", "errors", "config", "keys"}, mod


#: Modules of tutti an exported estimator may import: both hold plain functions over numpy.
LIGHT_HELPERS = {
    "tuttiml.workers._sklearn_compat",
    "tuttiml.workers._estimator_base",
    "tuttiml.workers.framing",
    "tuttiml._timeunits",
}


@pytest.mark.parametrize("name", ["ensembling", "combining", "framing", "_estimator_base"])
def test_exported_estimator_modules_stay_light(name: str) -> None:
    allowed = STDLIB | {"numpy", "scipy", "sklearn", "lightgbm", "__future__"}
    for mod in _imports(ROOT / "workers" / f"{name}.py"):
        assert _top(mod) in allowed or mod in LIGHT_HELPERS, f"{name}: {mod}"


def test_the_shared_time_rule_imports_numpy_only() -> None:
    # service/data.py and the exported FrameNormalizer both call it, so it must stay light
    allowed = STDLIB | {"numpy", "__future__"}
    for mod in _imports(ROOT / NS / "_timeunits.py"):
        assert _top(mod) in allowed, f"_timeunits: {mod}"


def test_families_never_import_each_other() -> None:
    fam_dir = ROOT / "workers" / "families"
    names = {p.stem for p in fam_dir.glob("*.py") if not p.stem.startswith("_")}
    for path in fam_dir.glob("*.py"):
        if path.stem.startswith("_"):
            continue
        for mod in _imports(path):
            parts = mod.split(".")
            if parts[:3] == [NS, "workers", "families"] and len(parts) > 3:
                assert parts[3] not in names, f"{path.name} imports family {parts[3]}"


def test_workers_never_import_client_or_cli() -> None:
    for path in _modules("workers"):
        for mod in _imports(path):
            assert mod not in {"tuttiml.service.client", "tuttiml.service.cli"}, (
                f"{path.name}: {mod}"
            )


def test_registry_matches_known_families() -> None:
    from tuttiml.service.spec import KNOWN_FAMILIES
    from tuttiml.workers.families import FAMILIES

    assert tuple(sorted(FAMILIES)) == tuple(sorted(KNOWN_FAMILIES))


def test_importing_the_client_pulls_in_no_ml_library() -> None:
    code = (
        "import sys, tuttiml.service.client; bad = [m for m in ('sklearn', 'optuna', 'lightgbm', "
        "'tuttiml.workers') if m in sys.modules]; print(','.join(bad))"
    )
    out = subprocess.run(
        [sys.executable, "-c", code], capture_output=True, text=True, cwd=ROOT, check=True
    )
    assert out.stdout.strip() == ""


@pytest.mark.parametrize(
    "path",
    [p for p in _modules("service") + _modules("workers") if p.name != "store.py"],
    ids=lambda p: p.name,
)
def test_only_the_store_touches_the_redis_handle(path: Path) -> None:
    # The store is sealed: nothing outside service/store.py reaches `store.r` / `store._r`.
    for node in ast.walk(ast.parse(path.read_text())):
        if isinstance(node, ast.Attribute) and node.attr in ("r", "_r"):
            base = node.value
            name = base.id if isinstance(base, ast.Name) else getattr(base, "attr", "")
            assert "store" not in name, f"{path.name}:{node.lineno} uses the raw Redis handle"


def _import_graph() -> dict[str, set[str]]:
    """Module -> tutti modules it imports anywhere (function bodies included)."""
    paths = _modules("service") + _modules("workers") + _modules(NS)
    names = {_module_name(p): p for p in paths}
    graph: dict[str, set[str]] = {}
    for name, path in names.items():
        edges: set[str] = set()
        tree = ast.parse(path.read_text())
        for node in ast.walk(tree):
            if isinstance(node, ast.ImportFrom):
                base = _absolute(node, name, path.stem == "__init__")
                for alias in node.names:
                    sub = f"{base}.{alias.name}"
                    edges.add(sub if sub in names else base)
            elif isinstance(node, ast.Import):
                edges.update(a.name for a in node.names)
        graph[name] = {e for e in edges if e in names and e != name}
    return graph


def _cycles(graph: dict[str, set[str]]) -> list[list[str]]:
    """Strongly connected components with more than one module (Tarjan)."""
    index: dict[str, int] = {}
    low: dict[str, int] = {}
    stack: list[str] = []
    on: set[str] = set()
    out: list[list[str]] = []

    def visit(v: str) -> None:
        index[v] = low[v] = len(index)
        stack.append(v)
        on.add(v)
        for w in sorted(graph[v]):
            if w not in index:
                visit(w)
                low[v] = min(low[v], low[w])
            elif w in on:
                low[v] = min(low[v], index[w])
        if low[v] == index[v]:
            comp = []
            while True:
                w = stack.pop()
                on.discard(w)
                comp.append(w)
                if w == v:
                    break
            if len(comp) > 1:
                out.append(sorted(comp))

    for v in sorted(graph):
        if v not in index:
            visit(v)
    return out


def test_cycle_finder_sees_a_circle() -> None:
    assert _cycles({"a": {"b"}, "b": {"c"}, "c": {"a"}, "d": {"a"}}) == [["a", "b", "c"]]


def test_no_import_circles() -> None:
    # Package __init__ files re-export their modules; only module-to-module circles count.
    graph = {
        k: {e for e in v if not e.endswith(("tuttiml", ".service", ".workers"))}
        for k, v in _import_graph().items()
    }
    assert _cycles(graph) == []
