"""tutti's job side: submit ensemble searches, follow them and take away the best pipeline."""

from tuttiml.service.errors import (
    ArtifactError,
    EnsembleSearchError,
    InvalidDataError,
    InvalidSpecError,
    JobNotFoundError,
)
from tuttiml.service.spec import Metric, SearchSpec, Task

__all__ = [
    "ArtifactError",
    "Client",
    "EnsembleSearchError",
    "InvalidDataError",
    "InvalidSpecError",
    "Job",
    "JobNotFoundError",
    "Metric",
    "SearchSpec",
    "Task",
]


def __getattr__(name: str) -> object:
    # Client pulls in redis and rq; keep `import service` light for spec-only users.
    if name in ("Client", "Job"):
        from tuttiml.service import client

        return getattr(client, name)
    raise AttributeError(name)
