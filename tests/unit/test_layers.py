"""The layer rules of DESIGN.md / STYLE.md, checked on every module's imports (parsed, not run)."""

from __future__ import annotations

import ast
import subprocess
import sys
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[2]
STDLIB = set(sys.stdlib_module_names)


def _imports(path: Path, *, top_level_only: bool = False) -> set[str]:
    tree = ast.parse(path.read_text())
    nodes = tree.body if top_level_only else list(ast.walk(tree))
    out: set[str] = set()
    for node in nodes:
        if isinstance(node, ast.Import):
            out.update(a.name for a in node.names)
        elif isinstance(node, ast.ImportFrom) and node.module and node.level == 0:
            out.add(node.module)
        elif isinstance(node, ast.If):  # `if TYPE_CHECKING:` blocks are not runtime imports
            continue
    return out


def _top(name: str) -> str:
    return name.split(".")[0]


def _modules(package: str) -> list[Path]:
    return sorted((ROOT / package).rglob("*.py"))


@pytest.mark.parametrize("path", _modules("service"), ids=lambda p: p.name)
def test_service_never_imports_workers_or_ml_at_import_time(path: Path) -> None:
    everywhere = {_top(m) for m in _imports(path)}
    assert "workers" not in everywhere, f"{path.name} imports workers/"
    assert not everywhere & {"optuna", "lightgbm"}, f"{path.name} imports optuna/lightgbm"
    top = {_top(m) for m in _imports(path, top_level_only=True)}
    assert not top & {"sklearn", "skops"}, f"{path.name}: sklearn/skops only lazily"


@pytest.mark.parametrize("name", ["spec", "errors", "config", "keys", "trusted", "version"])
def test_contract_modules_import_only_stdlib_pydantic_and_each_other(name: str) -> None:
    allowed = STDLIB | {"pydantic", "service", "__future__"}
    for mod in _imports(ROOT / "service" / f"{name}.py"):
        assert _top(mod) in allowed, f"service/{name}.py imports {mod}"
        if _top(mod) == "service":
            assert mod.split(".")[1] in {"spec", "errors", "config", "keys"}, mod


@pytest.mark.parametrize("name", ["ensembling", "combining"])
def test_exported_estimator_modules_stay_light(name: str) -> None:
    allowed = STDLIB | {"numpy", "scipy", "sklearn", "lightgbm", "__future__"}
    for mod in _imports(ROOT / "workers" / f"{name}.py"):
        assert _top(mod) in allowed or mod == "workers._sklearn_compat", f"{name}: {mod}"


def test_families_never_import_each_other() -> None:
    fam_dir = ROOT / "workers" / "families"
    names = {p.stem for p in fam_dir.glob("*.py") if not p.stem.startswith("_")}
    for path in fam_dir.glob("*.py"):
        if path.stem.startswith("_"):
            continue
        for mod in _imports(path):
            parts = mod.split(".")
            if parts[:2] == ["workers", "families"] and len(parts) > 2:
                assert parts[2] not in names, f"{path.name} imports family {parts[2]}"


def test_workers_never_import_client_or_cli() -> None:
    for path in _modules("workers"):
        for mod in _imports(path):
            assert mod not in {"service.client", "service.cli"}, f"{path.name}: {mod}"


def test_registry_matches_known_families() -> None:
    from service.spec import KNOWN_FAMILIES
    from workers.families import FAMILIES

    assert tuple(sorted(FAMILIES)) == tuple(sorted(KNOWN_FAMILIES))


def test_importing_the_client_pulls_in_no_ml_library() -> None:
    code = (
        "import sys, service.client; bad = [m for m in ('sklearn', 'optuna', 'lightgbm', "
        "'workers') if m in sys.modules]; print(','.join(bad))"
    )
    out = subprocess.run(
        [sys.executable, "-c", code], capture_output=True, text=True, cwd=ROOT, check=True
    )
    assert out.stdout.strip() == ""
