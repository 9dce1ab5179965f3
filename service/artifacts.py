"""Loading a stored or exported pipeline safely: SHA-256, optional HMAC, trusted types only.

Artifacts are skops files, never pickles. Without ``TUTTI_ARTIFACT_KEY`` a tampered artifact
still cannot run code (only the trusted types load) but could change predictions; with a key,
its HMAC must match too.
"""

from __future__ import annotations

import hashlib
import hmac
import io
import json
import warnings
import zipfile
from pathlib import Path
from typing import Any

from tuttiml.service.errors import ArtifactError
from tuttiml.service.trusted import LEGACY_MODULES, TRUSTED_TYPES


def seal(blob: bytes, key: str | None) -> str | None:
    """HMAC-SHA256 of an artifact when a key is set (what :func:`check_integrity` checks)."""
    if not key:
        return None
    return hmac.new(key.encode(), blob, hashlib.sha256).hexdigest()


def check_integrity(blob: bytes, meta: dict[str, Any], key: str | None) -> None:
    """Refuse bytes whose SHA-256 (and HMAC, when a key is set) do not match the metadata."""
    digest = hashlib.sha256(blob).hexdigest()
    if meta.get("sha256") and digest != meta["sha256"]:
        raise ArtifactError(
            f"artifact SHA-256 mismatch (stored {str(meta['sha256'])[:12]}…, got {digest[:12]}…): "
            "the file is corrupted or was modified; export it again.",
            field="sha256",
            value=digest,
        )
    if key:
        mac = meta.get("hmac")
        want = seal(blob, key)
        if not mac or not want or not hmac.compare_digest(str(mac), want):
            raise ArtifactError(
                "artifact HMAC does not match TUTTI_ARTIFACT_KEY: it was not written by a worker "
                "holding this key (or it was tampered with); refusing to load it.",
                field="hmac",
                value=mac,
            )


def _version_warning(meta: dict[str, Any]) -> None:
    try:
        import sklearn

        made = (meta.get("versions") or {}).get("scikit-learn")
        if made and made != sklearn.__version__:
            warnings.warn(
                f"pipeline was fitted with scikit-learn {made}, this is {sklearn.__version__}; "
                "predictions may differ. Install the same version to be sure.",
                stacklevel=3,
            )
    except ImportError:
        pass


def upgrade_legacy_paths(blob: bytes) -> bytes:
    """Map class paths of files exported before the ``tuttiml`` namespace to today's.

    Such files name ``workers.ensembling.*``; importing that would pick up whatever package
    called ``workers`` the user's application has. Only the schema's module names change, so
    the estimators load exactly as they were fitted. Other bytes come back unchanged.
    """
    try:
        with zipfile.ZipFile(io.BytesIO(blob)) as src:
            schema = src.read("schema.json").decode()
            if not any(f'"{old}"' in schema for old in LEGACY_MODULES):
                return blob
            for old, new in LEGACY_MODULES.items():
                schema = schema.replace(f'"__module__": "{old}"', f'"__module__": "{new}"')
            out = io.BytesIO()
            with zipfile.ZipFile(out, "w", compression=zipfile.ZIP_DEFLATED) as dst:
                for item in src.infolist():
                    data = schema.encode() if item.filename == "schema.json" else src.read(item)
                    dst.writestr(item, data)
            return out.getvalue()
    except (zipfile.BadZipFile, KeyError):
        return blob  # not a skops archive: the checks below say so


def load_pipeline(blob: bytes, meta: dict[str, Any], *, key: str | None = None) -> Any:
    """Verify and load a fitted pipeline from skops bytes.

    Raises:
        ArtifactError: integrity check failed, untrusted types inside, or unreadable bytes.
    """
    import skops.io as sio

    check_integrity(blob, meta, key)
    blob = upgrade_legacy_paths(blob)
    try:
        found = set(sio.get_untrusted_types(data=blob))
    except Exception as exc:
        raise ArtifactError(
            f"artifact is not a readable skops file ({type(exc).__name__}: {exc}); "
            "export it again.",
            field="artifact",
        ) from exc
    extra = found - set(TRUSTED_TYPES)
    if extra:
        raise ArtifactError(
            f"artifact holds types outside tutti's trusted list: {sorted(extra)}; refusing to "
            "load it (it was not produced by tutti, or by another version).",
            field="artifact",
            value=sorted(extra),
        )
    _version_warning(meta)
    try:
        return sio.loads(blob, trusted=sorted(found))
    except Exception as exc:
        raise ArtifactError(
            f"artifact could not be loaded ({type(exc).__name__}: {exc}); export it again.",
            field="artifact",
        ) from exc


def sidecar(path: Path) -> Path:
    """Where an exported file's metadata lives (``model.skops`` → ``model.skops.json``)."""
    return path.with_name(path.name + ".json")


def write_export(path: Path, blob: bytes, meta: dict[str, Any]) -> None:
    path.write_bytes(blob)
    sidecar(path).write_text(json.dumps(meta, indent=2, default=str))


def read_export(path: Path, *, key: str | None = None) -> tuple[Any, dict[str, Any]]:
    """Load an exported pipeline and its metadata (the sidecar is optional without a key)."""
    if not path.exists():
        raise ArtifactError(
            f"model file {path} does not exist; create it with `tutti export JOB -o {path}`.",
            field="model",
            value=str(path),
        )
    blob = path.read_bytes()
    meta: dict[str, Any] = {}
    side = sidecar(path)
    if side.exists():
        try:
            meta = json.loads(side.read_text())
        except ValueError as exc:
            raise ArtifactError(
                f"metadata file {side} is not valid JSON; export the model again.",
                field="model",
            ) from exc
    elif key:
        raise ArtifactError(
            f"metadata file {side} is missing, so the HMAC cannot be checked; export again.",
            field="model",
        )
    return load_pipeline(blob, meta, key=key), meta
