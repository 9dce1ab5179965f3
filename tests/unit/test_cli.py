"""The ``tutti`` command's surface: help, flags, global options, typos and old names."""

from __future__ import annotations

import argparse
import json
import re
import warnings
from pathlib import Path

import pytest
from tuttiml.service.cli import build_parser, main
from tuttiml.service.errors import InvalidSpecError
from tuttiml.service.spec import USER_FIELDS, SearchSpec
from tuttiml.service.spec_options import flag, spec_fields
from tuttiml.service.version import __version__


def _subparsers(parser: argparse.ArgumentParser) -> dict[str, argparse.ArgumentParser]:
    action = next(a for a in parser._actions if isinstance(a, argparse._SubParsersAction))
    return dict(action.choices)


def _listed(parser: argparse.ArgumentParser) -> list[str]:
    action = next(a for a in parser._actions if isinstance(a, argparse._SubParsersAction))
    return [a.dest for a in action._choices_actions]


def test_every_command_option_and_positional_has_help_and_an_example() -> None:
    parser = build_parser()
    subs = _subparsers(parser)
    for name in _listed(parser):
        sub = subs[name]
        assert "example:\n  tutti " + name in sub.format_help(), name
        for action in sub._actions:
            if action.help == argparse.SUPPRESS or isinstance(action, argparse._HelpAction):
                continue
            assert action.help and len(action.help) > 10, (name, action.dest)
            takes_value = action.nargs != 0 and action.option_strings
            if takes_value and action.dest not in ("redis_url", "prefix"):
                text = action.help
                assert "default" in text or "required" in text, (name, action.dest, text)


def test_spec_field_flags_cover_the_spec_and_show_default_and_choices() -> None:
    submit = _subparsers(build_parser())["submit"]
    flags = {s: a for a in submit._actions for s in a.option_strings}
    for field in USER_FIELDS:
        assert flag(field) in flags, f"spec field {field} has no flag"
    text = " ".join(submit.format_help().split())
    assert "--folds N number of cross-validation folds (default: 5)" in text
    assert "one of auto, binary, multiclass, regression (default: auto)" in text
    assert "one of normal, high (default: normal)" in text
    assert "from bagging, blending, boosting, single, stacking, voting (default: all)" in text


def test_flags_build_the_same_spec_as_the_python_api(tmp_path: Path) -> None:
    spec_file = tmp_path / "spec.json"
    spec_file.write_text(json.dumps({"target": "y", "folds": 3, "max_trials": 9}))
    args = build_parser().parse_args(
        [
            "submit",
            "t.csv",
            "--spec",
            str(spec_file),
            "--max-trials",
            "12",
            "--drop-columns",
            "id, notes",
            "--families",
            "boosting,bagging",
            "--halving-rows",
            "off",
            "--allow-leaks",
            "--set",
            "library_size=8",
            "--priority",
            "high",
        ]
    )
    fields = spec_fields(args)
    spec = SearchSpec(**fields)
    expected = SearchSpec(
        target="y",
        folds=3,
        max_trials=12,
        drop_columns=("id", "notes"),
        families=("boosting", "bagging"),
        halving_rows=None,
        allow_leaks=True,
        library_size=8,
        priority="high",
    )
    assert spec == expected


@pytest.mark.parametrize(
    ("argv", "message"),
    [
        (["--set", "max_trial=3"], "did you mean max_trials (--max-trials)?"),
        (["--set", "drop_columns"], "use FIELD=VALUE"),
    ],
)
def test_set_names_the_field_it_guesses(argv: list[str], message: str) -> None:
    args = build_parser().parse_args(["submit", "t.csv", "--target", "y", *argv])
    with pytest.raises(InvalidSpecError, match=re.escape(message)):
        spec_fields(args)


def test_missing_target_names_the_flag() -> None:
    args = build_parser().parse_args(["submit", "t.csv"])
    with pytest.raises(InvalidSpecError, match="add --target COLUMN"):
        spec_fields(args)


def test_an_option_typo_gets_a_suggestion(capsys: pytest.CaptureFixture[str]) -> None:
    with pytest.raises(SystemExit) as info:
        main(["submit", "t.csv", "--target", "y", "--max-trial", "3"])
    assert info.value.code == 2
    err = capsys.readouterr().err
    assert "unknown option --max-trial; did you mean --max-trials?" in err
    assert "unexpected argument '3'" not in err  # the typo's value is not a second problem


def test_abbreviations_are_refused_not_guessed(capsys: pytest.CaptureFixture[str]) -> None:
    with pytest.raises(SystemExit):
        main(["submit", "t.csv", "--target", "y", "--max-tr", "3"])
    assert "did you mean --max-trials?" in capsys.readouterr().err


def test_version(capsys: pytest.CaptureFixture[str]) -> None:
    with pytest.raises(SystemExit) as info:
        main(["--version"])
    assert info.value.code == 0
    assert capsys.readouterr().out.strip() == f"tutti {__version__}"


@pytest.mark.parametrize(
    "argv",
    [
        ["--redis-url", "redis://h:1/0", "--prefix", "p", "status"],
        ["status", "--redis-url", "redis://h:1/0", "--prefix", "p"],
        ["--prefix", "p", "status", "--redis-url", "redis://h:1/0"],
    ],
)
def test_global_options_before_or_after_the_command(argv: list[str]) -> None:
    args = build_parser().parse_args(argv)
    assert (args.redis_url, args.prefix) == ("redis://h:1/0", "p")


def test_global_options_default_once() -> None:
    parser = build_parser()
    top = " ".join(parser.format_help().split())
    sub = " ".join(_subparsers(parser)["leaderboard"].format_help().split())
    needle = "key prefix of the store (default: $TUTTI_PREFIX, else tutti)"
    assert needle in top and needle in sub
    args = parser.parse_args(["status"])
    assert (args.redis_url, args.prefix) == (None, None)


def test_old_names_are_hidden_but_work_with_a_warning(capsys: pytest.CaptureFixture[str]) -> None:
    parser = build_parser()
    listed = _listed(parser)
    assert "worker" not in listed and "workers" not in listed
    assert {"start-workers", "list-workers"} <= set(listed)
    assert "--trials" not in _subparsers(parser)["demo"].format_help()
    args = parser.parse_args(["demo", "--trials", "7", "--seconds", "30"])
    assert (args.max_trials, args.wall_seconds) == (7, 30.0)
    err = capsys.readouterr().err
    assert "--trials is deprecated" in err and "use --max-trials" in err
    assert "--seconds is deprecated" in err and "use --wall-seconds" in err


def test_worker_launcher_knows_exit_when_empty_and_the_old_burst(
    capsys: pytest.CaptureFixture[str],
) -> None:
    from tuttiml.workers.runner import parser

    p = parser()
    assert "--burst" not in p.format_help()
    assert "exit once the queues are empty" in " ".join(p.format_help().split())
    assert p.parse_args(["--exit-when-empty"]).exit_when_empty is True
    assert p.parse_args([]).exit_when_empty is False
    assert p.parse_args(["--burst"]).exit_when_empty is True
    assert "--burst is deprecated" in capsys.readouterr().err


def test_status_keys_are_one_vocabulary_and_old_keys_still_read() -> None:
    from tuttiml.service.client import STATUS_KEYS, JobStatus

    st = JobStatus({k: None for k in STATUS_KEYS} | {"max_trials": 9, "best_score": 0.5})
    assert json.loads(json.dumps(st)) == dict(st)  # only the new names go out
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        assert st["budget"] == 9 and st["best"] == 0.5
    assert [w.category for w in caught] == [DeprecationWarning, DeprecationWarning]
    assert "use 'max_trials'" in str(caught[0].message)
    with pytest.raises(KeyError):
        st["nonsense"]
