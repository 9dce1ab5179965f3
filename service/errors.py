"""The exception hierarchy: one root, each error carrying the field and value it is about."""

from __future__ import annotations

from typing import Any


class EnsembleSearchError(Exception):
    """Root of every error tutti raises on purpose.

    Args:
        message: what went wrong and what to do about it.
        field: the spec field, column or key the problem is about, when there is one.
        value: the offending value, when there is one.
    """

    def __init__(self, message: str, *, field: str | None = None, value: Any = None) -> None:
        super().__init__(message)
        self.field = field
        self.value = value


class InvalidSpecError(EnsembleSearchError, ValueError):
    """A search spec (or CLI option) breaks a rule; the message lists every problem found."""

    def __init__(
        self,
        message: str,
        *,
        field: str | None = None,
        value: Any = None,
        problems: list[str] | None = None,
    ) -> None:
        super().__init__(message, field=field, value=value)
        self.problems = problems or [message]


class InvalidDataError(EnsembleSearchError, ValueError):
    """The table handed to tutti cannot be searched as it is (empty, missing target, …)."""


class JobNotFoundError(EnsembleSearchError, KeyError):
    """No job with this id exists in the store."""

    def __str__(self) -> str:  # KeyError would quote the message
        return str(self.args[0]) if self.args else ""


class ArtifactError(EnsembleSearchError):
    """A stored or exported pipeline is missing, corrupted, tampered with or untrusted."""


class StoreUnavailableError(EnsembleSearchError):
    """The Redis server cannot be reached (after retries)."""


class JobStateError(EnsembleSearchError):
    """The job is not in a state that allows the requested action."""
