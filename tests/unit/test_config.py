"""Settings read from the environment: values, and errors that name the variable."""

from __future__ import annotations

import pytest
from tuttiml.service.config import Settings


def test_explain_time_bounds_are_read_from_the_environment(
    monkeypatch: pytest.MonkeyPatch,
) -> None:
    monkeypatch.delenv("TUTTI_EXPLAIN_MIN_SECONDS", raising=False)
    monkeypatch.delenv("TUTTI_EXPLAIN_MAX_SECONDS", raising=False)
    s = Settings.from_env()
    assert (s.explain_min_seconds, s.explain_max_seconds) == (30.0, 900.0)
    monkeypatch.setenv("TUTTI_EXPLAIN_MIN_SECONDS", "4.5")
    monkeypatch.setenv("TUTTI_EXPLAIN_MAX_SECONDS", "60")
    s = Settings.from_env()
    assert (s.explain_min_seconds, s.explain_max_seconds) == (4.5, 60.0)


@pytest.mark.parametrize("raw", ["soon", "-1", "nan"])
@pytest.mark.parametrize(
    "name", ["TUTTI_EXPLAIN_MIN_SECONDS", "TUTTI_EXPLAIN_MAX_SECONDS", "TUTTI_LEASE_SECONDS"]
)
def test_a_bad_number_names_its_variable(
    monkeypatch: pytest.MonkeyPatch, name: str, raw: str
) -> None:
    monkeypatch.setenv(name, raw)
    with pytest.raises(ValueError, match=f"{name}=.*non-negative number.*unset it"):
        Settings.from_env()
