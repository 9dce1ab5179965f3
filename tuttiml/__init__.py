"""tuttiml: ensemble search over a Redis job queue. The one import users need.

``from tuttiml import Client, SearchSpec`` submits and follows jobs; workers start with
``python -m tuttiml.workers`` (or the ``tutti worker`` command). The job side lives in
``tuttiml.service``, the execution side in ``tuttiml.workers``; classes that end up inside
exported pipelines are re-exported at one stable path, ``tuttiml.estimators``.
"""

from tuttiml import service as _service
from tuttiml.service.version import __version__

# The public names are listed once, in service/__init__.py; Client and Job load lazily there.
__all__ = [*_service.__all__, "__version__"]


def __getattr__(name: str) -> object:
    if name in _service.__all__:
        return getattr(_service, name)
    raise AttributeError(name)
