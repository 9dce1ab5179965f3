"""The one import namespace, the stable path of exported estimators and old exported files."""

from __future__ import annotations

import shutil
import subprocess
import sys
import zipfile
from pathlib import Path

import numpy as np
import pytest

ROOT = Path(__file__).resolve().parents[2]
FIXTURES = ROOT / "tests" / "fixtures"


def test_one_import_gives_client_spec_and_version(tmp_path: Path) -> None:
    # Run from an empty folder that holds a user's own `service.py` and `workers/`: they must
    # not shadow tutti (the reason for the namespace).
    (tmp_path / "service.py").write_text("raise RuntimeError('user service imported')\n")
    (tmp_path / "workers").mkdir()
    (tmp_path / "workers" / "__init__.py").write_text("raise RuntimeError('user workers')\n")
    code = (
        "import tuttiml; from tuttiml import Client, SearchSpec; "
        "import tuttiml.estimators; print(tuttiml.__version__, Client.__name__, "
        "SearchSpec.__name__)"
    )
    out = subprocess.run(
        [sys.executable, "-c", code], cwd=tmp_path, capture_output=True, text=True, check=True
    )
    name, version = "tuttiml", out.stdout.split()[0]
    from importlib.metadata import version as dist_version

    assert version == dist_version(name)
    assert out.stdout.split()[1:] == ["Client", "SearchSpec"]


def test_exported_classes_record_the_stable_path() -> None:
    import skops.io as sio
    from sklearn.datasets import load_iris
    from sklearn.linear_model import LogisticRegression
    from sklearn.pipeline import make_pipeline

    from tuttiml.estimators import FrameNormalizer

    X, y = load_iris(return_X_y=True, as_frame=True)
    pipe = make_pipeline(FrameNormalizer(), LogisticRegression(max_iter=300)).fit(X, y)
    found = sio.get_untrusted_types(data=sio.dumps(pipe))
    assert "tuttiml.estimators.FrameNormalizer" in found
    assert not [t for t in found if t.startswith(("workers.", "tuttiml.workers."))]


def test_file_exported_by_0_1_0_still_loads_and_predicts_the_same() -> None:
    # tests/fixtures/exported_0_1_0.skops was written by tutti 0.1.0 (commit 6c1df23), whose
    # classes lived at workers.ensembling.*: a FrameNormalizer + BlendingClassifier pipeline
    # fitted on scikit-learn's iris table. Its predictions on every 10th row were recorded then.
    from sklearn.datasets import load_iris
    from tuttiml.service.artifacts import read_export

    path = FIXTURES / "exported_0_1_0.skops"
    with zipfile.ZipFile(path) as z:
        assert '"workers.ensembling"' in z.read("schema.json").decode()  # really the old paths
    model, meta = read_export(path)
    X, _ = load_iris(return_X_y=True, as_frame=True)
    want = np.array(RECORDED_0_1_0)
    np.testing.assert_allclose(model.predict_proba(X.iloc[::10]), want, atol=1e-6)
    assert meta["versions"]["tutti"] == "0.1.0"
    assert "workers" not in sys.modules  # the alias imported nothing called `workers`


def test_legacy_rewrite_leaves_other_archives_alone() -> None:
    from tuttiml.service.artifacts import upgrade_legacy_paths

    assert upgrade_legacy_paths(b"not a zip") == b"not a zip"


@pytest.fixture(scope="module")
def wheel_files(tmp_path_factory: pytest.TempPathFactory) -> list[str]:
    # Build from a copy of the sources, so no build/ or egg-info lands in the checkout.
    src = tmp_path_factory.mktemp("src")
    for name in ("pyproject.toml", "README.md"):
        shutil.copy(ROOT / name, src / name)
    for name in ("service", "workers", "tuttiml"):
        shutil.copytree(ROOT / name, src / name, ignore=shutil.ignore_patterns("__pycache__"))
    out = tmp_path_factory.mktemp("wheel")
    cmd = [sys.executable, "-m", "pip", "wheel", "--no-deps", "--no-build-isolation", "-q"]
    subprocess.run([*cmd, "-w", str(out), str(src)], check=True, capture_output=True)
    (whl,) = out.glob("tuttiml-*.whl")
    with zipfile.ZipFile(whl) as z:
        return z.namelist()


def test_wheel_installs_nothing_named_service_or_workers_at_the_top(
    wheel_files: list[str],
) -> None:
    tops = {name.split("/")[0] for name in wheel_files}
    assert not tops & {"service", "workers"}, sorted(tops)
    assert "tuttiml/service/client.py" in wheel_files
    assert "tuttiml/workers/families/boosting.py" in wheel_files
    assert "tuttiml/estimators.py" in wheel_files
    assert "tuttiml/workers/portfolio.json" in wheel_files  # package data: the portfolio


def test_wheel_ships_every_module_of_the_checkout(wheel_files: list[str]) -> None:
    # A new subpackage missing from pyproject's package list would silently not install.
    want = {
        f"tuttiml/{wing}/{p.relative_to(ROOT / wing).as_posix()}"
        for wing in ("service", "workers")
        for p in (ROOT / wing).rglob("*.py")
    } | {f"tuttiml/{p.name}" for p in (ROOT / "tuttiml").glob("*.py")}
    assert want - set(wheel_files) == set()


RECORDED_0_1_0 = [
    [0.899349, 0.048075, 0.052576],
    [0.898283, 0.048775, 0.052943],
    [0.892094, 0.052874, 0.055032],
    [0.895791, 0.050417, 0.053792],
    [0.90031, 0.047447, 0.052243],
    [0.049198, 0.869584, 0.081218],
    [0.049283, 0.887833, 0.062883],
    [0.084529, 0.251019, 0.664452],
    [0.046266, 0.891585, 0.062149],
    [0.0483, 0.876239, 0.075461],
    [0.038066, 0.032761, 0.929174],
    [0.049876, 0.058583, 0.891541],
    [0.0391, 0.034678, 0.926222],
    [0.039376, 0.035201, 0.925423],
    [0.038913, 0.034325, 0.926762],
]
