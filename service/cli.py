"""The ``tutti`` command: argument parsing only; the work is done by the client."""

from __future__ import annotations

import argparse
import contextlib
import json
import os
import sys
import time
from collections.abc import Callable
from pathlib import Path
from typing import Any, TextIO

from redis.exceptions import ConnectionError as RedisConnectionError
from redis.exceptions import TimeoutError as RedisTimeoutError
from tuttiml.service.errors import EnsembleSearchError, InvalidSpecError

#: Tables whose Parquet bytes reach this size get an upload progress bar (one store chunk).
BAR_MIN_BYTES = 64 * 1024 * 1024
EPILOG = "Set TUTTI_REDIS_URL (or --redis-url) to share one Redis between machines."


def _client(args: argparse.Namespace) -> Any:
    from tuttiml.service.client import Client

    return Client(url=args.redis_url, prefix=args.prefix)


def _parse_value(text: str) -> Any:
    try:
        return json.loads(text)
    except ValueError:
        return text


def cmd_submit(args: argparse.Namespace) -> int:
    fields: dict[str, Any] = {"target": args.target}
    for name in (
        "task",
        "metric",
        "folds",
        "max_trials",
        "wall_seconds",
        "trial_timeout",
        "seed",
        "parallelism",
        "holdout",
        "group_column",
        "order_column",
        "name",
    ):
        value = getattr(args, name)
        if value is not None:
            fields[name] = value
    if args.families:
        fields["families"] = [f.strip() for f in args.families.split(",") if f.strip()]
    for item in args.set or []:
        key, eq, value = item.partition("=")
        if not eq:
            raise InvalidSpecError(
                f"--set {item!r}: use FIELD=VALUE, e.g. --set library_size=8",
                field="set",
                value=item,
            )
        fields[key.strip()] = _parse_value(value)
    client = _client(args)
    job = client.submit(args.data, **fields, upload_progress=_upload_bar(sys.stderr))
    print(job.id)
    if args.wait:
        status = job.wait(progress=True)
        board = job.leaderboard()
        if len(board):
            _print_board(board, limit=10)
        if status["state"] != "finished":  # failed or cancelled: scripts must see it
            reason = status.get("reason") or status.get("stop_reason") or "no reason recorded"
            print(
                f"tutti: job {job.id} ended {status['state']}: {reason}; "
                f"see `tutti logs {job.id}`",
                file=sys.stderr,
            )
            return 1
    return 0


def _upload_bar(out: TextIO, min_bytes: int = BAR_MIN_BYTES) -> Callable[[int, int], None]:
    """A one-line upload progress bar on ``out`` for tables of at least ``min_bytes``.

    Redraws in place on a terminal; elsewhere (logs, CI) it prints one line per quarter.
    """
    t0 = time.monotonic()
    tty = out.isatty()
    shown = [-1]

    def show(done: int, total: int) -> None:
        if total < min_bytes:
            return
        frac = done / total if total else 1.0
        step = int(frac * 4)
        if not tty and step == shown[0]:
            return
        shown[0] = step
        bar = "#" * round(30 * frac)
        line = (
            f"upload [{bar:<30}] {done / 1e6:,.0f}/{total / 1e6:,.0f} MB "
            f"{time.monotonic() - t0:.1f} s"
        )
        out.write(f"\r{line}" if tty else f"{line}\n")
        if tty and done >= total:
            out.write("\n")
        out.flush()

    return show


def _fmt(value: Any, digits: int = 4) -> str:
    if value is None or (isinstance(value, float) and value != value):
        return "—"
    if isinstance(value, float):
        return f"{value:.{digits}f}"
    return str(value)


def _print_table(rows: list[list[str]], header: list[str]) -> None:
    widths = [
        max(len(h), *(len(r[i]) for r in rows)) if rows else len(h) for i, h in enumerate(header)
    ]
    print("  ".join(h.ljust(w) for h, w in zip(header, widths, strict=True)))
    print("  ".join("─" * w for w in widths))
    for r in rows:
        print("  ".join(c.ljust(w) for c, w in zip(r, widths, strict=True)))


def cmd_status(args: argparse.Namespace) -> int:
    from tuttiml.service.client import _fmt_seconds

    client = _client(args)
    jobs = [client.job(args.job)] if args.job else client.jobs()
    rows = []
    statuses = [job.status() for job in jobs]
    for st in statuses:
        rows.append(
            [
                st["job"],
                st["state"],
                f"{st['trials_done']}/{st['budget']}",
                str(st["failed"]),
                f"{st['metric']} {_fmt(st['best'])}",
                _fmt_seconds(st["elapsed"]),
                _fmt_seconds(st["eta"]) if st["eta"] is not None else "—",
                _explained(st),
                st.get("reason") or st.get("stop_reason") or "",
            ]
        )
    if args.json:
        print(json.dumps(statuses, indent=2, default=str))
        return 0
    if not rows:
        print("no jobs yet: submit one with `tutti submit data.csv --target COLUMN`")
        return 0
    head = ["job", "state", "trials", "failed", "best", "elapsed", "left", "explanations", "note"]
    _print_table(rows, head)
    if len(statuses) == 1:  # one job: each explanation part and whether it ran
        for part, status in statuses[0]["explain_parts"].items():
            print(f"  {part}: {status}")
    return 0


def _explained(st: dict[str, Any]) -> str:
    """``pending``, ``running``, ``done`` (with how many parts did not run) or ``failed``."""
    state = st.get("explanations")
    if not state:
        return "—"
    missing = sum(1 for v in st.get("explain_parts", {}).values() if v.startswith("not run"))
    return f"{state} ({missing} not run)" if missing else str(state)


def _print_board(board: Any, limit: int | None = None) -> None:
    metric = board.attrs.get("metric", "score")
    print(f"metric: {metric} ({board.attrs.get('direction', '')})")
    has_sig = "p_value" in board.columns
    rows = []
    for _, r in board.head(limit).iterrows() if limit else board.iterrows():
        row = [
            str(r["rank"]),
            str(r["candidate"]),
            str(r["family"]),
            str(r["members"])[:40],
            _fmt(r[metric]),
            _fmt(r[f"{metric}_std"]),
            _fmt(r["fit_seconds"], 2),
            _fmt(r["predict_ms_per_1000"], 1),
        ]
        if has_sig:
            p = r.get("p_value")
            flag = "" if p is None or p != p else ("" if r.get("distinguishable") else " ≈#1")
            row.append(_fmt(p, 3) + flag)
        rows.append(row)
    header = ["rank", "candidate", "family", "members", metric, "± std", "fit s", "predict ms/1k"]
    if has_sig:
        header.append("p vs #1")
    _print_table(rows, header)
    if has_sig:
        print(
            "p vs #1: corrected repeated k-fold t-test against rank 1 (≈#1: not "
            "distinguishable at 5%); not corrected for having picked the best of many."
        )


def cmd_leaderboard(args: argparse.Namespace) -> int:
    board = _client(args).job(args.job).leaderboard()
    if args.json:
        out = {
            "metric": board.attrs.get("metric"),
            "direction": board.attrs.get("direction"),
            "rows": json.loads(board.to_json(orient="records")),
        }
        print(json.dumps(out, indent=2))
    else:
        _print_board(board, limit=args.limit)
    return 0


def cmd_report(args: argparse.Namespace) -> int:
    path = _client(args).job(args.job).report(args.output)
    print(f"wrote {path}")
    return 0


def cmd_export(args: argparse.Namespace) -> int:
    path = _client(args).job(args.job).export(args.output, max_predict_ms=args.max_predict_ms)
    print(f"wrote {path} (+ {path.name}.json)")
    return 0


def cmd_predict(args: argparse.Namespace) -> int:
    import numpy as np
    import pandas as pd
    from tuttiml.service.artifacts import read_export
    from tuttiml.service.config import Settings
    from tuttiml.service.data import read_table

    model, meta = read_export(Path(args.model), key=Settings.from_env().artifact_key)
    frame = read_table(args.data)
    pred = model.predict(frame)
    out = pd.DataFrame({"prediction": pred})
    if hasattr(model, "predict_proba") and meta.get("task") != "regression":
        proba = np.asarray(model.predict_proba(frame))
        for j, c in enumerate(model.classes_):
            out[f"proba_{c}"] = proba[:, j]
    if args.output:
        out.to_csv(args.output, index=False)
        print(f"wrote {len(out)} predictions to {args.output}")
    else:
        out.to_csv(sys.stdout, index=False)
    return 0


def cmd_cancel(args: argparse.Namespace) -> int:
    changed = _client(args).job(args.job).cancel()
    print(f"{args.job}: {'cancelled' if changed else 'already cancelled'}")
    return 0


def cmd_logs(args: argparse.Namespace) -> int:
    for line in _client(args).job(args.job).logs()[-args.tail :]:
        print(line)
    return 0


def cmd_delete(args: argparse.Namespace) -> int:
    n = _client(args).job(args.job).delete()
    print(f"deleted {args.job} ({n} keys)")
    return 0


def cmd_extend(args: argparse.Namespace) -> int:
    job = (
        _client(args)
        .job(args.job)
        .extend(more_trials=args.more_trials, wall_seconds=args.wall_seconds)
    )
    print(f"{job.id}: queued again ({job.status()['budget']} trials in all)")
    return 0


def cmd_purge(args: argparse.Namespace) -> int:
    gone = _client(args).purge(_duration(args.older_than))
    print(f"deleted {len(gone)} job(s)" + (": " + ", ".join(gone) if gone else ""))
    return 0


def _duration(text: str) -> float:
    units = {"s": 1, "m": 60, "h": 3600, "d": 86400, "w": 604800}
    try:
        if text[-1] in units:
            return float(text[:-1]) * units[text[-1]]
        return float(text)
    except (ValueError, IndexError):
        raise SystemExit(
            f"--older-than {text!r}: use a number with s, m, h, d or w, e.g. 30d"
        ) from None


def cmd_workers(args: argparse.Namespace) -> int:
    import time

    rows = []
    for w in _client(args).workers():
        doing = (
            f"job {w['job']} trial {w.get('trial')} ({w.get('family')})"
            if w.get("job")
            else "idle"
        )
        rows.append(
            [
                str(w["name"]),
                str(w.get("host", "")),
                str(w.get("pid", "")),
                doing,
                f"{time.time() - float(w.get('started_at', time.time())):.0f} s",
            ]
        )
    if not rows:
        print("no live workers: start some with `tutti worker --processes N`")
        return 0
    _print_table(rows, ["worker", "host", "pid", "doing", "up"])
    return 0


def cmd_doctor(args: argparse.Namespace) -> int:
    client = _client(args)
    findings = client.doctor()
    for f in findings:
        print(f"[{f.level:7}] {f.check}: {f.detail}")
    return 1 if any(f.level == "problem" for f in findings) else 0


def cmd_server(args: argparse.Namespace) -> int:
    from tuttiml.service.config import Settings
    from tuttiml.service.server import EmbeddedServer

    server = EmbeddedServer(Settings.from_env().home)
    if args.action == "status":
        st = server.status()
        print(json.dumps(st, indent=2))
        return 0
    if args.action == "start":
        print(server.ensure_running())
        return 0
    stopped = server.stop()
    print("stopped" if stopped else "not running")
    return 0


def cmd_worker(args: argparse.Namespace, rest: list[str]) -> int:
    argv = [sys.executable, "-m", "tuttiml.workers", *rest]
    os.execv(sys.executable, argv)
    return 0  # pragma: no cover


def cmd_demo(args: argparse.Namespace) -> int:
    from tuttiml.service.demo import run_demo

    return run_demo(
        trials=args.trials,
        seconds=args.seconds,
        processes=args.processes,
        redis_url=args.redis_url,
        prefix=args.prefix,
        show_board=_print_board,
    )


def build_parser() -> argparse.ArgumentParser:
    p = argparse.ArgumentParser(
        prog="tutti",
        description="Ensemble search on CPU workers through a Redis queue.",
        epilog=EPILOG,
    )
    p.add_argument(
        "--redis-url",
        default=None,
        help="Redis URL (default TUTTI_REDIS_URL or the embedded server)",
    )
    p.add_argument("--prefix", default=None, help="key prefix (default tutti)")
    sub = p.add_subparsers(dest="command", required=True)

    s = sub.add_parser("submit", help="submit a search job from a CSV or Parquet file")
    s.add_argument("data")
    s.add_argument("--target", required=True)
    s.add_argument("--task", choices=["auto", "binary", "multiclass", "regression"])
    s.add_argument("--metric")
    s.add_argument("--folds", type=int)
    s.add_argument("--max-trials", dest="max_trials", type=int)
    s.add_argument("--wall-seconds", dest="wall_seconds", type=float)
    s.add_argument("--trial-timeout", dest="trial_timeout", type=float)
    s.add_argument("--families", help="comma-separated subset, e.g. boosting,bagging")
    s.add_argument("--seed", type=int)
    s.add_argument("--parallelism", type=int, help="search shards (≈ worker processes to use)")
    s.add_argument("--holdout", type=float)
    s.add_argument("--group-column", dest="group_column")
    s.add_argument("--order-column", dest="order_column")
    s.add_argument("--name")
    s.add_argument(
        "--set", action="append", metavar="FIELD=VALUE", help="any other spec field (JSON value)"
    )
    s.add_argument("--wait", action="store_true", help="follow progress, then print the board")
    s.set_defaults(func=cmd_submit)

    s = sub.add_parser("status", help="list jobs, or show one")
    s.add_argument("job", nargs="?")
    s.add_argument("--json", action="store_true")
    s.set_defaults(func=cmd_status)

    s = sub.add_parser("leaderboard", help="a job's candidates, best first")
    s.add_argument("job")
    s.add_argument("--json", action="store_true")
    s.add_argument("--limit", type=int, default=None)
    s.set_defaults(func=cmd_leaderboard)

    s = sub.add_parser("export", help="write a job's best pipeline to a skops file")
    s.add_argument("job")
    s.add_argument("-o", "--output", required=True)
    s.add_argument(
        "--max-predict-ms",
        dest="max_predict_ms",
        type=float,
        default=None,
        help="best pipeline predicting 1,000 rows within this many ms",
    )
    s.set_defaults(func=cmd_export)

    s = sub.add_parser("report", help="write a job's self-contained HTML report")
    s.add_argument("job")
    s.add_argument("-o", "--output", required=True)
    s.set_defaults(func=cmd_report)

    s = sub.add_parser("predict", help="predict a CSV/Parquet file with an exported pipeline")
    s.add_argument("model")
    s.add_argument("data")
    s.add_argument("-o", "--output")
    s.set_defaults(func=cmd_predict)

    for name, func, text in (
        ("cancel", cmd_cancel, "stop a job (best-so-far is kept)"),
        ("delete", cmd_delete, "remove a job and all its data"),
    ):
        s = sub.add_parser(name, help=text)
        s.add_argument("job")
        s.set_defaults(func=func)

    s = sub.add_parser("logs", help="a job's worker log lines and failure tracebacks")
    s.add_argument("job")
    s.add_argument("--tail", type=int, default=200)
    s.set_defaults(func=cmd_logs)

    s = sub.add_parser("extend", help="continue a finished or cancelled job, then refit")
    s.add_argument("job")
    s.add_argument("--more-trials", dest="more_trials", type=int, default=None)
    s.add_argument("--wall-seconds", dest="wall_seconds", type=float, default=None)
    s.set_defaults(func=cmd_extend)

    s = sub.add_parser("purge", help="delete final jobs older than a duration")
    s.add_argument("--older-than", dest="older_than", required=True, help="e.g. 30d, 12h")
    s.set_defaults(func=cmd_purge)

    s = sub.add_parser("workers", help="live workers and what each is doing")
    s.set_defaults(func=cmd_workers)

    s = sub.add_parser("doctor", help="check the Redis server's settings")
    s.set_defaults(func=cmd_doctor)

    s = sub.add_parser("server", help="the embedded Redis server")
    s.add_argument("action", choices=["status", "start", "stop"])
    s.set_defaults(func=cmd_server)

    s = sub.add_parser(
        "worker", help="run worker processes (same as python -m workers)", add_help=False
    )
    s.set_defaults(func=None)

    s = sub.add_parser("demo", help="run the demo search on generated data")
    s.add_argument("--trials", type=int, default=40)
    s.add_argument("--seconds", type=float, default=120.0)
    s.add_argument("--processes", type=int, default=2)
    s.set_defaults(func=cmd_demo)
    return p


def main(argv: list[str] | None = None) -> int:
    argv = list(sys.argv[1:] if argv is None else argv)
    parser = build_parser()
    # `tutti [--redis-url U] [--prefix P] worker …` hands what follows to the worker launcher
    i = 0
    while i < len(argv) and argv[i] in ("--redis-url", "--prefix"):
        i += 2
    if i < len(argv) and argv[i] == "worker":
        head, rest = argv[:i], argv[i + 1 :]
        args = parser.parse_args([*head, "status"])
        if args.redis_url and "--redis-url" not in rest:
            rest = ["--redis-url", args.redis_url, *rest]
        if args.prefix and "--prefix" not in rest:
            rest = ["--prefix", args.prefix, *rest]
        return cmd_worker(args, rest)
    args = parser.parse_args(argv)
    try:
        code = int(args.func(args) or 0)
        sys.stdout.flush()  # a closed pipe shows here, inside the handlers below
        return code
    except EnsembleSearchError as exc:
        print(f"tutti: error: {exc}", file=sys.stderr)
        return 2
    except BrokenPipeError:  # the reader went away (`tutti leaderboard J --json | head`)
        return _reader_gone()
    except (ConnectionError, RedisConnectionError, RedisTimeoutError) as exc:
        # redis' own ConnectionError is not the builtin one: both end here, without traceback
        print(
            f"tutti: error: cannot reach Redis at {_where(args)} ({exc}); start that server or "
            "point TUTTI_REDIS_URL / --redis-url at one that runs (`tutti doctor` checks it).",
            file=sys.stderr,
        )
        return 2
    except KeyboardInterrupt:
        return 130


def _where(args: argparse.Namespace) -> str:
    """The Redis a command talked to, for messages (password masked)."""
    from tuttiml.service.connection import masked_url

    url = getattr(args, "redis_url", None) or os.environ.get("TUTTI_REDIS_URL")
    return masked_url(url) if url else "the embedded server (`tutti server status`)"


def _reader_gone() -> int:
    """Exit quietly when stdout's reader closed the pipe, as other command-line tools do.

    stdout is pointed at /dev/null so the interpreter's final flush does not fail again.
    """
    with contextlib.suppress(OSError, ValueError):
        devnull = os.open(os.devnull, os.O_WRONLY)
        os.dup2(devnull, sys.stdout.fileno())
    return 141  # 128 + SIGPIPE, what a shell reports for a writer killed by the signal


if __name__ == "__main__":
    sys.exit(main())
