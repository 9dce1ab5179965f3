"""The key schema is pinned: every key under the prefix, no two builders collide."""

from __future__ import annotations

from hypothesis import given
from hypothesis import strategies as st
from tuttiml.service.keys import Keys


def test_key_schema_is_pinned() -> None:
    k = Keys("tt")
    assert k.job("a1") == "tt:job:a1"
    assert k.trials("a1") == "tt:job:a1:trials"
    assert k.board("a1") == "tt:job:a1:board"
    assert k.oof("a1", 3) == "tt:job:a1:oof:3"
    assert k.journal("a1") == "tt:job:a1:journal"
    assert k.lock("a1", "library") == "tt:job:a1:lock:library"
    assert k.data_chunk("d", 0) == "tt:data:d:chunk:0"
    assert k.queue_name == "tt-search"


ids = st.from_regex(r"[A-Za-z0-9_-]{1,12}", fullmatch=True)


@given(ids, ids, st.integers(0, 10**6), st.integers(0, 10**6))
def test_builders_never_collide(a: str, b: str, i: int, j: int) -> None:
    k = Keys("p")
    built = {
        ("job", a): k.job(a),
        ("trials", a): k.trials(a),
        ("board", a): k.board(a),
        ("oof", a, i): k.oof(a, i),
        ("lease", a, i): k.trial_lease(a, i),
        ("journal", a): k.journal(a),
        ("tickets", a): k.tickets(a),
        ("lock", a): k.lock(a, "library"),
        ("library", a): k.library(a, "lock"),
    }
    other = {
        ("job", b): k.job(b),
        ("trials", b): k.trials(b),
        ("board", b): k.board(b),
        ("oof", b, j): k.oof(b, j),
        ("lease", b, j): k.trial_lease(b, j),
        ("journal", b): k.journal(b),
        ("tickets", b): k.tickets(b),
        ("lock", b): k.lock(b, "library"),
        ("library", b): k.library(b, "lock"),
    }
    for key1, v1 in built.items():
        for key2, v2 in other.items():
            if v1 == v2:
                assert key1 == key2
    assert all(v.startswith("p:") for v in built.values())
