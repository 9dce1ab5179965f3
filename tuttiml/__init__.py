"""tuttiml: ensemble search over a Redis job queue. The one import users need.

``from tuttiml import Client, SearchSpec`` submits and follows jobs; workers start with
``python -m tuttiml.workers`` (or the ``tutti worker`` command). The job side lives in
``tuttiml.service``, the execution side in ``tuttiml.workers``; classes that end up inside
exported pipelines are re-exported at one stable path, ``tuttiml.estimators``.
"""

from tuttiml.service import (
    ArtifactError,
    EnsembleSearchError,
    InvalidDataError,
    InvalidSpecError,
    JobNotFoundError,
    Metric,
    SearchSpec,
    Task,
)
from tuttiml.service.version import __version__

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
    "__version__",
]


def __getattr__(name: str) -> object:
    # Client pulls in redis and rq; keep `import tuttiml` light for spec-only users.
    if name in ("Client", "Job"):
        from tuttiml.service import client

        return getattr(client, name)
    raise AttributeError(name)
