"""The ``tutti`` command: argument parsing only; ``service.commands`` does the work.

One small function per command adds its sub-parser. The global options (``--redis-url``,
``--prefix``) are accepted before or after the command. Old command and option names keep
working as hidden aliases that print a deprecation warning.
"""

from __future__ import annotations

import argparse
import contextlib
import difflib
import os
import sys
from collections.abc import Callable
from typing import Any

from redis.exceptions import ConnectionError as RedisConnectionError
from redis.exceptions import TimeoutError as RedisTimeoutError
from tuttiml.service import commands as c
from tuttiml.service.errors import EnsembleSearchError
from tuttiml.service.terminal import BAR_MIN_BYTES, upload_bar
from tuttiml.service.version import __version__

# a name tests import from here
_upload_bar = upload_bar
__all__ = ["BAR_MIN_BYTES", "build_parser", "main"]

EPILOG = (
    "Set TUTTI_REDIS_URL (or --redis-url) to share one Redis between machines.\n"
    "Start here: tutti demo · tutti submit --help · README.md"
)
#: Old command names: name -> (new name, release that removes the old one).
RENAMED = {"worker": "start-workers", "workers": "list-workers"}
REMOVED_IN = "0.3"
WORKER_COMMANDS = ("start-workers", "worker")

_REDIS_HELP = (
    "Redis URL shared by clients and workers (default: $TUTTI_REDIS_URL, else the embedded "
    "server under $TUTTI_HOME)"
)
_PREFIX_HELP = "key prefix of the store (default: $TUTTI_PREFIX, else tutti)"


class _Formatter(argparse.RawDescriptionHelpFormatter):
    """Keeps the line breaks of descriptions and examples; wider option column."""

    def __init__(self, prog: str) -> None:
        super().__init__(prog, max_help_position=32, width=min(_columns(), 100))


def _columns() -> int:
    try:
        return os.get_terminal_size().columns
    except OSError:
        return 100


def _global_options(parser: argparse.ArgumentParser, *, after: bool) -> None:
    """``--redis-url`` and ``--prefix``; after the command they default to 'not given'."""
    default = argparse.SUPPRESS if after else None
    group = parser.add_argument_group("connection (before or after the command)")
    group.add_argument("--redis-url", metavar="URL", default=default, help=_REDIS_HELP)
    group.add_argument("--prefix", metavar="PREFIX", default=default, help=_PREFIX_HELP)


def _command(
    sub: Any, name: str, text: str, example: str, func: Callable[..., int], **kw: Any
) -> argparse.ArgumentParser:
    """A sub-parser with a one-line help, its description, an example and the global options."""
    if kw.pop("listed", True):
        kw["help"] = text  # a command without help is left out of `tutti --help`
    p: argparse.ArgumentParser = sub.add_parser(
        name,
        description=kw.pop("description", text[0].upper() + text[1:] + "."),
        epilog=f"example:\n  {example}",
        formatter_class=_Formatter,
        allow_abbrev=False,
        **kw,
    )
    p.set_defaults(func=func)
    _global_options(p, after=True)
    return p


def _job(p: argparse.ArgumentParser) -> None:
    p.add_argument("job", metavar="JOB", help="job id, as printed by submit and listed by status")


def _json(p: argparse.ArgumentParser, what: str) -> None:
    p.add_argument(
        "--json", action="store_true", help=f"print {what} as JSON (README: JSON output)"
    )


def _add_submit(sub: Any) -> None:
    from tuttiml.service.spec_options import add_spec_options

    p = _command(
        sub,
        "submit",
        "submit a search job for a CSV or Parquet table",
        "tutti submit stations.csv --target failed_within_30d --max-trials 60 --wait",
        c.cmd_submit,
        description=(
            "Validate the spec and the table, store them and queue the search; prints the "
            "job id.\nNothing is stored when a field or the table is refused. Workers run the "
            "job: tutti start-workers.\nMetrics per task: binary roc_auc (default), log_loss, "
            "accuracy, balanced_accuracy, f1;\nmulticlass log_loss (default), accuracy, "
            "balanced_accuracy, f1_macro; regression rmse (default), mae, r2."
        ),
    )
    p.add_argument("data", metavar="DATA", help="the table: a .csv or .parquet file")
    p.add_argument(
        "--wait",
        action="store_true",
        help="follow the job's progress until it is final, then print its leaderboard",
    )
    add_spec_options(p)


def _add_status(sub: Any) -> None:
    p = _command(
        sub,
        "status",
        "list jobs, or show one",
        "tutti status 20261202-153000-a1b2c3 --json",
        c.cmd_status,
    )
    p.add_argument("job", metavar="JOB", nargs="?", help="one job id (default: every job)")
    _json(p, "a list of status objects")


def _add_wait(sub: Any) -> None:
    p = _command(
        sub,
        "wait",
        "follow a job's progress (search, then finalize) until it is final",
        "tutti wait 20261202-153000-a1b2c3",
        c.cmd_wait,
        description=(
            "Draw a job's progress line until it is finished, failed or cancelled, then print "
            "its leaderboard.\nWhile finalizing, the line says what finalize is doing. Exit "
            "code 0 when the job finished, 1 otherwise."
        ),
    )
    _job(p)
    p.add_argument(
        "--timeout",
        metavar="SECONDS",
        type=float,
        default=None,
        help="stop following after this many seconds; the job goes on (default: no limit)",
    )
    p.add_argument(
        "--explanations",
        action="store_true",
        help="also wait for the explanations that run after the model is committed "
        "(default: return once the model is ready)",
    )


def _add_leaderboard(sub: Any) -> None:
    p = _command(
        sub,
        "leaderboard",
        "a job's candidates, best first, with the exported one marked",
        "tutti leaderboard 20261202-153000-a1b2c3 --limit 10",
        c.cmd_leaderboard,
    )
    _job(p)
    p.add_argument(
        "--limit", metavar="N", type=int, default=None, help="show the best N rows (default: all)"
    )
    _json(p, "the metric and every row")


def _add_export(sub: Any) -> None:
    p = _command(
        sub,
        "export",
        "write a job's fitted pipeline to a skops file",
        "tutti export 20261202-153000-a1b2c3 -o model.skops",
        c.cmd_export,
    )
    _job(p)
    p.add_argument(
        "-o", "--output", metavar="FILE", required=True, help="skops file to write (required)"
    )
    p.add_argument(
        "--max-predict-ms",
        metavar="MS",
        type=float,
        default=None,
        help="best refitted pipeline whose predict_ms (per 1,000 rows) is within MS "
        "(default: the exported candidate)",
    )


def _add_report(sub: Any) -> None:
    p = _command(
        sub,
        "report",
        "write a job's self-contained HTML report",
        "tutti report 20261202-153000-a1b2c3 -o report.html",
        c.cmd_report,
    )
    _job(p)
    p.add_argument(
        "-o", "--output", metavar="FILE", required=True, help="HTML file to write (required)"
    )


def _add_predict(sub: Any) -> None:
    p = _command(
        sub,
        "predict",
        "predict a CSV or Parquet table with an exported pipeline",
        "tutti predict model.skops new.csv --keep station_id -o predictions.parquet",
        c.cmd_predict,
        description=(
            "Predict every row of a table with an exported pipeline. Output columns: the kept "
            "columns,\nprediction, and for classifiers proba_<class> per class."
        ),
    )
    p.add_argument("model", metavar="MODEL", help="skops file written by tutti export")
    p.add_argument("data", metavar="DATA", help="the rows to predict: a .csv or .parquet file")
    p.add_argument(
        "-o",
        "--output",
        metavar="FILE",
        default=None,
        help="file to write: Parquet when it ends in .parquet, else CSV (default: CSV on stdout)",
    )
    p.add_argument(
        "--keep",
        metavar="COLUMN",
        action="append",
        default=None,
        help="copy this input column into the output (e.g. an id to join on); repeatable or "
        "comma-separated (default: none)",
    )


def _add_cancel(sub: Any) -> None:
    p = _command(
        sub,
        "cancel",
        "stop a job; finalize still fits the best candidate so far",
        "tutti cancel 20261202-153000-a1b2c3",
        c.cmd_cancel,
    )
    _job(p)


def _add_delete(sub: Any) -> None:
    p = _command(
        sub,
        "delete",
        "remove a job and all its data (asks first)",
        "tutti delete 20261202-153000-a1b2c3 --yes",
        c.cmd_delete,
    )
    _job(p)
    p.add_argument(
        "-y", "--yes", action="store_true", help="delete without asking (needed off a terminal)"
    )


def _add_logs(sub: Any) -> None:
    p = _command(
        sub,
        "logs",
        "a job's worker log lines and failure tracebacks",
        "tutti logs 20261202-153000-a1b2c3 --follow",
        c.cmd_logs,
    )
    _job(p)
    p.add_argument(
        "--tail", metavar="N", type=int, default=200, help="print the last N lines (default: 200)"
    )
    p.add_argument(
        "-f",
        "--follow",
        action="store_true",
        help="keep printing new lines until the job is final",
    )
    p.add_argument("--poll", type=float, default=1.0, help=argparse.SUPPRESS)


def _add_extend(sub: Any) -> None:
    p = _command(
        sub,
        "extend",
        "continue a finished or cancelled job on the same study, then finalize again",
        "tutti extend 20261202-153000-a1b2c3 --more-trials 40",
        c.cmd_extend,
    )
    _job(p)
    p.add_argument(
        "--more-trials",
        metavar="N",
        type=int,
        default=None,
        help="trials to add to max_trials (default: the job's max_trials again)",
    )
    p.add_argument(
        "--wall-seconds",
        metavar="SECONDS",
        type=float,
        default=None,
        help="wall-clock budget of the continuation (default: the job's wall_seconds)",
    )


def _add_purge(sub: Any) -> None:
    p = _command(
        sub,
        "purge",
        "delete finished, failed and cancelled jobs older than a duration",
        "tutti purge --older-than 30d --dry-run",
        c.cmd_purge,
    )
    p.add_argument(
        "--older-than",
        metavar="AGE",
        type=c.duration,
        required=True,
        help="age since submission: a number with s, m, h, d or w, e.g. 30d (required)",
    )
    p.add_argument(
        "--dry-run", action="store_true", help="list the jobs that would go; delete nothing"
    )


def _add_list_workers(sub: Any, name: str = "list-workers", listed: bool = True) -> None:
    p = _command(
        sub,
        name,
        "live worker processes and what each is doing",
        "tutti list-workers",
        c.cmd_list_workers,
        listed=listed,
    )
    _json(p, "a list of worker objects")
    if not listed:
        p.set_defaults(renamed_from=name)


def _add_doctor(sub: Any) -> None:
    p = _command(
        sub,
        "doctor",
        "check the Redis server's persistence, eviction policy and password",
        "tutti doctor",
        c.cmd_doctor,
    )
    _json(p, "the findings")


def _add_server(sub: Any) -> None:
    p = _command(
        sub,
        "server",
        "the embedded Redis server: status, start or stop",
        "tutti server stop",
        c.cmd_server,
        description=(
            "The embedded Redis server tutti starts when no URL is set (data under "
            "$TUTTI_HOME).\nStopping it keeps every job: the next command starts it again."
        ),
    )
    p.add_argument(
        "action",
        metavar="ACTION",
        choices=["status", "start", "stop"],
        help="one of status, start, stop",
    )
    _json(p, "the server's state")


def _add_start_workers(sub: Any) -> None:
    for name, listed in (("start-workers", True), ("worker", False)):
        _command(
            sub,
            name,
            "run worker processes on this machine (tutti start-workers --help)",
            "tutti start-workers --processes 2",
            _handed_over,
            listed=listed,
            add_help=False,
        )


def _handed_over(args: argparse.Namespace) -> int:
    """Never called: ``main`` hands ``start-workers`` to the worker launcher before parsing."""
    raise AssertionError("start-workers is run by the worker launcher")


def _add_demo(sub: Any) -> None:
    p = _command(
        sub,
        "demo",
        "run a search on generated data with local workers, end to end",
        "tutti demo --max-trials 20 --wall-seconds 60",
        c.cmd_demo,
    )
    p.add_argument(
        "--max-trials", metavar="N", type=int, default=40, help="most trials (default: 40)"
    )
    p.add_argument(
        "--wall-seconds",
        metavar="SECONDS",
        type=float,
        default=120.0,
        help="wall-clock budget (default: 120)",
    )
    p.add_argument(
        "--processes", metavar="N", type=int, default=2, help="worker processes (default: 2)"
    )
    for old, new, kind in (("--trials", "max_trials", int), ("--seconds", "wall_seconds", float)):
        p.add_argument(
            old,
            dest=new,
            type=_deprecated(old, "--" + new.replace("_", "-"), kind),
            help=argparse.SUPPRESS,
        )


def _deprecated(old: str, new: str, kind: type) -> Callable[[str], Any]:
    def parse(text: str) -> Any:
        _warn_renamed(old, new)
        return kind(text)

    return parse


def _warn_renamed(old: str, new: str) -> None:
    print(
        f"tutti: warning: {old} is deprecated and will be removed in tutti {REMOVED_IN}; "
        f"use {new}",
        file=sys.stderr,
    )


_ADDERS = (
    _add_submit,
    _add_status,
    _add_wait,
    _add_leaderboard,
    _add_export,
    _add_predict,
    _add_report,
    _add_logs,
    _add_cancel,
    _add_extend,
    _add_delete,
    _add_purge,
    _add_start_workers,
    _add_list_workers,
    _add_doctor,
    _add_server,
    _add_demo,
)


def build_parser() -> argparse.ArgumentParser:
    """The ``tutti`` parser: global options, then one sub-parser per command."""
    p = argparse.ArgumentParser(
        prog="tutti",
        description="Ensemble search on CPU workers through a Redis queue.",
        epilog=EPILOG,
        formatter_class=_Formatter,
        allow_abbrev=False,
    )
    p.add_argument("--version", action="version", version=f"tutti {__version__}")
    _global_options(p, after=False)
    sub = p.add_subparsers(dest="command", metavar="COMMAND", title="commands", required=True)
    for add in _ADDERS:
        add(sub)
    _add_list_workers(sub, "workers", listed=False)
    return p


def _command_index(argv: list[str]) -> int:
    """Position of the command word in ``argv`` (after any global options)."""
    i = 0
    while i < len(argv):
        if argv[i] in ("--redis-url", "--prefix"):
            i += 2
        elif argv[i].startswith(("--redis-url=", "--prefix=")):
            i += 1
        else:
            break
    return i


def _run_workers(argv: list[str], i: int) -> int:
    """``tutti [globals] start-workers …``: exec the worker launcher with what follows."""
    if argv[i] in RENAMED:
        _warn_renamed(f"tutti {argv[i]}", f"tutti {RENAMED[argv[i]]}")
    head, rest = argv[:i], argv[i + 1 :]
    args = build_parser().parse_args([*head, "status"])
    if args.redis_url and "--redis-url" not in rest:
        rest = ["--redis-url", args.redis_url, *rest]
    if args.prefix and "--prefix" not in rest:
        rest = ["--prefix", args.prefix, *rest]
    os.execv(sys.executable, [sys.executable, "-m", "tuttiml.workers", *rest])
    return 0  # pragma: no cover


def _unknown_options(parser: argparse.ArgumentParser, args: Any, extra: list[str]) -> None:
    """Refuse unknown options, naming the closest known one."""
    sub = next(a for a in parser._actions if isinstance(a, argparse._SubParsersAction))
    cmd = sub.choices[args.command]
    known = [s for a in cmd._actions for s in a.option_strings if a.help != argparse.SUPPRESS]
    lines, after_option = [], False
    for token in extra:
        word = token.split("=", 1)[0]
        if not word.startswith("-"):
            if not after_option:  # a value of the unknown option before it is no news
                lines.append(f"unexpected argument {token!r}")
            after_option = False
            continue
        after_option = "=" not in token
        guess = difflib.get_close_matches(word, known, n=1, cutoff=0.6)
        lines.append(f"unknown option {word}" + (f"; did you mean {guess[0]}?" if guess else ""))
    cmd.exit(2, f"{cmd.prog}: error: {'; '.join(lines)} (see {cmd.prog} --help)\n")


def main(argv: list[str] | None = None) -> int:
    argv = list(sys.argv[1:] if argv is None else argv)
    i = _command_index(argv)
    if i < len(argv) and argv[i] in WORKER_COMMANDS:
        return _run_workers(argv, i)
    parser = build_parser()
    args, extra = parser.parse_known_args(argv)
    if extra:
        _unknown_options(parser, args, extra)
    for name in ("redis_url", "prefix"):
        if not hasattr(args, name):
            setattr(args, name, None)
    if getattr(args, "renamed_from", None):
        _warn_renamed(f"tutti {args.renamed_from}", f"tutti {RENAMED[args.renamed_from]}")
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
