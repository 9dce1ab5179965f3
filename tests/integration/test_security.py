"""Forged entries planted straight into Redis must not run code; artifacts are checked on load.

Each attack aims at a marker file under ``tmp_path`` that only a successful attack would
create. Real Redis servers and real worker processes (burst mode); a small real job runs
beside the forged entries so the worker serves both and then exits.
"""

from __future__ import annotations

import hashlib
import io
import os
import pickle
import secrets
import subprocess
import sys
import time
from collections import Counter
from collections.abc import Iterator
from pathlib import Path
from typing import Any

import pandas as pd
import pytest
import redis
import rq
from rq.job import Job as RQJob
from sklearn.datasets import load_breast_cancer
from tuttiml.service.client import Client
from tuttiml.service.errors import ArtifactError
from tuttiml.service.queue import ALLOWED_TASKS
from tuttiml.service.trusted import TRUSTED_TYPES

from tests.conftest import ROOT, RedisProcess, start_workers

pytestmark = pytest.mark.integration

WORKER_EXIT_SECONDS = 180
SMALL_JOB: dict[str, Any] = {
    "target": "benign",
    "families": ["single"],
    "max_trials": 2,
    "parallelism": 1,
    "folds": 3,
    "library_size": 0,
    "wall_seconds": 600,
    "trial_timeout": 120,
    "seed": 0,
}
FAST_SHARDS = {"TUTTI_SHARD_SECONDS": "8"}
TRAIN_ROWS = 469  # the small jobs train on these; the last 100 rows stay unseen


def _table() -> pd.DataFrame:
    # Source: scikit-learn's bundled Wisconsin breast cancer data (no download).
    return load_breast_cancer(as_frame=True).frame.rename(columns={"target": "benign"})


class _TouchOnUnpickle:
    """Unpickling this runs ``os.system("touch <path>")``: a stand-in for any payload."""

    def __init__(self, path: Path) -> None:
        self.path = path

    def __reduce__(self) -> tuple[Any, ...]:
        return (os.system, (f"touch {self.path}",))


def _evil_pickle(path: Path) -> bytes:
    return pickle.dumps(_TouchOnUnpickle(path))


def test_the_pickle_payload_is_live(tmp_path: Path) -> None:
    """Control: the payload the other tests plant really creates its marker when unpickled."""
    control = tmp_path / "control"
    pickle.loads(_evil_pickle(control))  # the point of this control: it runs the payload
    assert control.exists()


def _wait_exit(proc: subprocess.Popen[bytes], log: Path) -> None:
    try:
        proc.wait(timeout=WORKER_EXIT_SECONDS)
    except subprocess.TimeoutExpired:
        os.killpg(proc.pid, 9)
        proc.wait(10)
        pytest.fail(f"worker did not exit within {WORKER_EXIT_SECONDS} s:\n{_tail(log)}")


def _predicts_held_rows(job: Any) -> None:
    """The job's pipeline loads and predicts rows it never trained on (the loader returns or
    raises, so merely getting an object proves nothing)."""
    frame = _table()
    held = frame.iloc[TRAIN_ROWS:]
    pred = job.best_pipeline().predict(held.drop(columns="benign"))
    # the UCI documentation of this data (wdbc.names) reports about 97.5% accuracy with
    # repeated 10-fold CV (from memory); a two-trial job clears 0.9 on new rows
    assert (pred == held["benign"].to_numpy()).mean() >= 0.9


def _tail(log: Path, n: int = 4000) -> str:
    return log.read_text(errors="replace")[-n:] if log.exists() else "(no log)"


def _run_small_job_with_worker(
    client: Client, url: str, prefix: str, log: Path, env: dict[str, str] | None = None
) -> Any:
    job = client.submit(_table().iloc[:TRAIN_ROWS], **SMALL_JOB)
    proc = start_workers(url, prefix, 1, log=log, env={**FAST_SHARDS, **(env or {})})
    _wait_exit(proc, log)
    status = job.status()
    assert status["state"] == "finished", (status, _tail(log), job.logs()[-20:])
    return job, proc


# --------------------------------------------------------------------------------------------
# 1-3. Forged queue entries and planted snapshots, served by one worker run
#
# Every attack is planted before the worker starts: forged JSON and pickle entries queued ahead
# of a real job, and pickled "snapshots" wherever Optuna's stock Redis journal would look for
# them. One burst worker must refuse each forged entry, never unpickle anything, finish the real
# job and exit 0. (One run instead of one per attack: the worker start-up is the slow part.)


def _snapshot_keys(prefix: str, journal: str, job_id: str) -> list[str]:
    # optuna/storages/journal/_redis.py: save_snapshot/load_snapshot use f"{prefix}:snapshot"
    # (prefix defaults to ""); cover our journal key and the other plausible prefixes
    return [
        f"{journal}:snapshot",
        f"{prefix}:snapshot",
        f"{prefix}:job:{job_id}:snapshot",
        f"{prefix}:job:{job_id}:journal:snapshot",
        ":snapshot",
    ]


@pytest.fixture(scope="module")
def attacked(redis_url: str, tmp_path_factory: pytest.TempPathFactory) -> Iterator[dict[str, Any]]:
    """The worker run with every forged entry and snapshot planted (shared by 1-3 below)."""
    prefix = f"t{secrets.token_hex(4)}"
    base = tmp_path_factory.mktemp("attacked")
    client = Client(url=redis_url, prefix=prefix)
    conn = redis.Redis.from_url(redis_url)
    markers = {name: base / f"pwned-{name}" for name in ("json", "pickle-func", "pickle-arg")}
    try:
        forged_json = rq.Queue(client.keys.queue_name, connection=conn, serializer="json").enqueue(
            "os.system", f"touch {markers['json']}"
        )
        pickled = rq.Queue(client.keys.queue_name, connection=conn)  # RQ's default: pickle
        # (a) a call of os.system itself; (b) an allowed task name whose argument runs code
        # when unpickled, so a worker that unpickled before checking the name would be lost
        by_func = pickled.enqueue(os.system, f"touch {markers['pickle-func']}")
        by_arg = pickled.enqueue(
            "tuttiml.workers.tasks.run_shard", _TouchOnUnpickle(markers["pickle-arg"]), 0
        )
        job = client.submit(_table().iloc[:TRAIN_ROWS], **SMALL_JOB)
        journal = client.keys.journal(job.id)
        snapshots = {}
        for i, key in enumerate(_snapshot_keys(prefix, journal, job.id)):
            snapshots[key] = base / f"pwned-snapshot-{i}"
            client.redis.set(key, _evil_pickle(snapshots[key]))
        log = base / "workers.log"
        proc = start_workers(redis_url, prefix, 1, log=log, env=FAST_SHARDS)
        _wait_exit(proc, log)
        yield {
            "client": client,
            "conn": conn,
            "job": job,
            "proc": proc,
            "log": log,
            "markers": markers,
            "forged_json": forged_json,
            "pickled": pickled,
            "by_pickle": (by_func, by_arg),
            "journal": journal,
            "snapshots": snapshots,
        }
    finally:
        client.redis.delete(":snapshot")
        client.close()
        for pattern in (f"{prefix}:*", f"rq:*{prefix}-*"):
            keys = list(conn.scan_iter(match=pattern, count=1000))
            if keys:
                conn.delete(*keys)


def _served_the_real_job(run: dict[str, Any]) -> None:
    log, job = run["log"], run["job"]
    assert run["proc"].returncode == 0, _tail(log)  # the worker survived every attack
    status = job.status()
    assert status["state"] == "finished", (status, _tail(log), job.logs()[-20:])
    _predicts_held_rows(job)


def test_forged_json_job_is_refused_by_the_allow_list(attacked: dict[str, Any]) -> None:
    run = attacked
    assert not run["markers"]["json"].exists()
    _served_the_real_job(run)
    fetched = RQJob.fetch(run["forged_json"].id, connection=run["conn"], serializer="json")
    assert fetched.get_status() == "failed"
    result = fetched.latest_result()
    exc_text = (result.exc_string if result is not None else None) or str(fetched.exc_info)
    assert "PermissionError" in exc_text and "refused task 'os.system'" in exc_text, exc_text
    # the refusal names what tutti workers do run (each allow-listed task)
    assert "tutti workers run only tuttiml.workers.tasks." in exc_text
    assert all(task in exc_text for task in ALLOWED_TASKS), exc_text
    assert "refused forged or foreign task 'os.system'" in run["log"].read_text()


def test_forged_pickle_jobs_are_never_unpickled(attacked: dict[str, Any]) -> None:
    run = attacked
    assert not run["markers"]["pickle-func"].exists()
    assert not run["markers"]["pickle-arg"].exists()
    _served_the_real_job(run)
    for forged in run["by_pickle"]:
        # read the status without deserialising the payload
        status = run["conn"].hget(f"rq:job:{forged.id}", "status")
        assert status == b"failed", (forged.id, status, _tail(run["log"]))
    assert "refused forged or foreign task None" in run["log"].read_text()
    assert run["pickled"].count == 0


def test_planted_journal_snapshots_are_never_read(attacked: dict[str, Any]) -> None:
    run = attacked
    _served_the_real_job(run)
    assert run["job"].status()["complete"] >= 1
    created = [k for k, m in run["snapshots"].items() if m.exists()]
    assert created == [], f"a planted snapshot was unpickled: {created}"
    # the journal itself is JSON (one entry per list item), not a pickle
    first = run["client"].redis.lindex(run["journal"], 0)
    assert first is not None and first.startswith(b"{")


# --------------------------------------------------------------------------------------------
# 4. Tampered, untrusted and corrupted artifacts


@pytest.fixture(scope="module")
def signed_job(redis_url: str, tmp_path_factory: pytest.TempPathFactory) -> Iterator[Any]:
    """One small job fitted by a worker holding TUTTI_ARTIFACT_KEY (shared by the tests below)."""
    prefix = f"t{secrets.token_hex(4)}"
    key = secrets.token_hex(16)
    log = tmp_path_factory.mktemp("signed") / "workers.log"
    with pytest.MonkeyPatch.context() as mp:
        mp.setenv("TUTTI_ARTIFACT_KEY", key)
        client = Client(url=redis_url, prefix=prefix)
    assert client.settings.artifact_key == key
    try:
        job, _ = _run_small_job_with_worker(
            client, redis_url, prefix, log, env={"TUTTI_ARTIFACT_KEY": key}
        )
        yield job
    finally:
        client.close()
        r = redis.Redis.from_url(redis_url)
        for pattern in (f"{prefix}:*", f"rq:*{prefix}-*"):
            keys = list(r.scan_iter(match=pattern, count=1000))
            if keys:
                r.delete(*keys)


def _skops(obj: Any) -> bytes:
    import skops.io as sio

    return sio.dumps(obj)


def _with_blob(job: Any, blob: bytes, **meta_changes: Any) -> dict[str, Any]:
    """Store ``blob`` as the job's best artifact with a matching SHA-256; return the old meta."""
    original_blob, meta = job.store.get_artifact(job.id, "best")
    new_meta = {**meta, "sha256": hashlib.sha256(blob).hexdigest(), **meta_changes}
    job.store.put_artifact(job.id, "best", blob, new_meta)
    return {"blob": original_blob, "meta": meta}


def _restore(job: Any, saved: dict[str, Any]) -> None:
    job.store.put_artifact(job.id, "best", saved["blob"], saved["meta"])


def test_signed_artifact_loads_and_a_swapped_one_is_refused(
    signed_job: Any, redis_url: str, monkeypatch: pytest.MonkeyPatch, tmp_path: Path
) -> None:
    from sklearn.dummy import DummyClassifier

    job = signed_job
    meta = job.artifact_meta()
    assert meta.get("hmac") and len(meta["sha256"]) == 64
    frame = _table()
    raw = frame.drop(columns="benign")
    model = job.best_pipeline()  # signed by the worker, verified with the same key
    before = model.predict(raw.tail(20))
    assert job.client.settings.artifact_key is not None

    # a different, perfectly valid skops file with a correct SHA-256, but no valid HMAC
    dummy = DummyClassifier(strategy="constant", constant=0).fit(raw, frame["benign"])
    blob = _skops(dummy)
    assert blob[:2] == b"PK"  # a zip, like every skops file
    saved = _with_blob(job, blob)
    try:
        with pytest.raises(ArtifactError, match="HMAC does not match TUTTI_ARTIFACT_KEY") as info:
            job.best_pipeline()
        assert info.value.field == "hmac"
        with pytest.raises(ArtifactError, match="HMAC"):
            job.export(tmp_path / "never-written.skops")
        assert not (tmp_path / "never-written.skops").exists()
        # a forged HMAC computed with the wrong key fails the same way
        _with_blob(job, blob, hmac=hashlib.sha256(blob).hexdigest())
        with pytest.raises(ArtifactError, match="HMAC"):
            job.best_pipeline()
        # without a key only SHA-256 and the trusted types protect: the swap goes unnoticed
        monkeypatch.delenv("TUTTI_ARTIFACT_KEY", raising=False)
        plain = Client(url=redis_url, prefix=job.client.settings.prefix)
        try:
            swapped = plain.job(job.id).best_pipeline()
            assert (swapped.predict(raw.head(5)) == 0).all()
        finally:
            plain.close()
    finally:
        _restore(job, saved)
    # restored: the signed pipeline is back and predicts exactly as before the swap
    assert list(job.best_pipeline().predict(raw.tail(20))) == list(before)


class UntrustedThing:
    """Not on the trusted list; loading it would create the marker file."""

    def __init__(self, marker: str) -> None:
        self.marker = marker

    def __setstate__(self, state: dict[str, Any]) -> None:
        Path(state["marker"]).touch()
        self.__dict__.update(state)


@pytest.mark.parametrize("kind", ["counter", "custom class"])
def test_untrusted_types_in_an_artifact_are_refused(
    signed_job: Any, redis_url: str, monkeypatch: pytest.MonkeyPatch, tmp_path: Path, kind: str
) -> None:
    marker = tmp_path / "pwned-untrusted"
    if kind == "counter":
        payload: Any = {"counts": Counter("abracadabra"), "marker": str(marker)}
        expected = "collections.Counter"
    else:
        payload = {"thing": UntrustedThing(str(marker))}
        expected = "UntrustedThing"
    assert not any(expected in t for t in TRUSTED_TYPES)
    blob = _skops(payload)
    monkeypatch.delenv("TUTTI_ARTIFACT_KEY", raising=False)
    plain = Client(url=redis_url, prefix=signed_job.client.settings.prefix)
    assert plain.settings.artifact_key is None
    saved = _with_blob(signed_job, blob)
    try:
        with pytest.raises(ArtifactError, match="outside tutti's trusted list") as info:
            plain.job(signed_job.id).best_pipeline()
        assert expected in str(info.value)
        assert any(expected in t for t in info.value.value)
        assert not marker.exists()
    finally:
        _restore(signed_job, saved)
        plain.close()


def test_corrupted_artifacts_fail_the_sha256_check(
    signed_job: Any, redis_url: str, monkeypatch: pytest.MonkeyPatch, tmp_path: Path
) -> None:
    job = signed_job
    original, meta = job.store.get_artifact(job.id, "best")
    flipped = bytearray(original)
    for i in range(len(flipped) // 2, len(flipped) // 2 + 16):
        flipped[i] ^= 0xFF
    job.store.put_artifact(job.id, "best", bytes(flipped), meta)  # the old SHA-256 stays
    try:
        with pytest.raises(ArtifactError, match="SHA-256 mismatch") as info:
            job.best_pipeline()
        assert info.value.field == "sha256" and "export it again" in str(info.value)
    finally:
        job.store.put_artifact(job.id, "best", original, meta)

    # the exported file: intact it predicts, with bytes flipped `tutti predict` refuses it
    model_path = tmp_path / "model.skops"
    job.export(model_path)
    csv = tmp_path / "rows.csv"
    _table().drop(columns="benign").head(20).to_csv(csv, index=False)
    env = {k: v for k, v in os.environ.items() if k != "TUTTI_ARTIFACT_KEY"}
    env["PYTHONPATH"] = str(ROOT)

    def predict(extra_env: dict[str, str] | None = None) -> subprocess.CompletedProcess[str]:
        return subprocess.run(
            [sys.executable, "-m", "tuttiml.service.cli", "predict", str(model_path), str(csv)],
            cwd=ROOT,
            env={**env, **(extra_env or {})},
            capture_output=True,
            text=True,
            timeout=120,
        )

    ok = predict()
    assert ok.returncode == 0, ok.stderr
    assert len(pd.read_csv(io.StringIO(ok.stdout))) == 20

    wrong_key = predict({"TUTTI_ARTIFACT_KEY": "not-the-key"})
    assert wrong_key.returncode == 2, wrong_key.stderr
    assert "HMAC does not match" in wrong_key.stderr and "Traceback" not in wrong_key.stderr

    data = bytearray(model_path.read_bytes())
    for i in range(100, 116):
        data[i] ^= 0xFF
    model_path.write_bytes(bytes(data))
    bad = predict()
    assert bad.returncode == 2, (bad.stdout, bad.stderr)
    assert bad.stdout == ""
    assert "tutti: error: artifact SHA-256 mismatch" in bad.stderr
    assert "Traceback" not in bad.stderr


# --------------------------------------------------------------------------------------------
# 5. A Redis server with a password


def test_password_protected_redis_end_to_end(prefix: str, tmp_path: Path) -> None:
    server = RedisProcess(tmp_path, password="s3cret").start()
    try:
        assert server.url.startswith("redis://:s3cret@127.0.0.1:")
        with pytest.raises(redis.AuthenticationError):
            redis.Redis.from_url(server.url.replace(":s3cret@", ""), socket_timeout=2).ping()
        client = Client(url=server.url, prefix=prefix)
        try:
            job, proc = _run_small_job_with_worker(
                client, server.url, prefix, tmp_path / "workers.log"
            )
            assert proc.returncode == 0
            raw = _table().drop(columns="benign").head(10)
            assert len(job.best_pipeline().predict(raw)) == 10
            assert client.job(job.id).leaderboard().shape[0] >= 1
        finally:
            client.close()
    finally:
        server.kill()


def test_wrong_password_gets_a_prompt_clear_error(tmp_path: Path) -> None:
    server = RedisProcess(tmp_path, password="s3cret").start()
    try:
        wrong = server.url.replace(":s3cret@", ":wrong@")
        env = {**os.environ, "PYTHONPATH": str(ROOT)}
        started = time.monotonic()
        try:
            res = subprocess.run(
                [sys.executable, "-m", "tuttiml.service.cli", "--redis-url", wrong, "status"],
                cwd=ROOT,
                env=env,
                capture_output=True,
                text=True,
                timeout=30,
            )
        except subprocess.TimeoutExpired:
            pytest.fail("no error within 30 s with a wrong password (the client keeps retrying)")
        assert time.monotonic() - started < 30
        assert res.returncode == 2, res.stderr
        assert "Traceback" not in res.stderr
        assert "password" in res.stderr.lower() or "authentication" in res.stderr.lower()
    finally:
        server.kill()


# --------------------------------------------------------------------------------------------
# 6. docker-compose.yml


def test_docker_compose_keeps_redis_private_and_persistent() -> None:
    yaml = pytest.importorskip("yaml")
    doc = yaml.safe_load((ROOT / "docker-compose.yml").read_text())
    services = doc["services"]
    redis_svc = services["redis"]
    command = redis_svc["command"]
    words = command.split() if isinstance(command, str) else [str(w) for w in command]
    assert "--requirepass" in words
    password = words[words.index("--requirepass") + 1]
    assert password.startswith("${") and "?" in password  # required, never a default
    assert words[words.index("--appendonly") + 1] == "yes"
    assert words[words.index("--maxmemory-policy") + 1] == "noeviction"
    assert "ports" not in redis_svc
    worker = services["worker"]
    wcmd = worker["command"]
    wwords = wcmd.split() if isinstance(wcmd, str) else [str(w) for w in wcmd]
    assert wwords[:2] == ["tutti", "start-workers"]
    assert "ports" not in worker
    url = worker["environment"]["TUTTI_REDIS_URL"]
    assert url.startswith("redis://:${TUTTI_REDIS_PASSWORD}@redis:")


def test_an_undecodable_queue_entry_does_not_break_the_sweep_count(
    client: Client, redis_url: str
) -> None:
    job = client.submit(_table(), **SMALL_JOB)
    conn = redis.Redis.from_url(redis_url)
    rq.Queue(client.keys.queue_name, connection=conn).enqueue(os.system, "true")  # never run
    assert client.queue.queued_for(job.id) == 1
