"""Every command's parser follows the command line's conventions (docs/commands.md):

- a cycle profile is one value ON_MS:OFF_MS:CYCLES, under `--profile`, wherever a command takes one;
- `--json` is a flag with one meaning: one JSON document on standard output instead of text;
- a file the command writes is named with `-o/--output`;
- every usage error exits 64, with one line naming the option as the user typed it;
- every command's help ends with the one exit-status table.
"""

from __future__ import annotations

import argparse
import re

import pytest

from benchlog.views.cli import _command_modules, build_parser, main
from benchlog.views.cli._exit import EXIT_TABLE, USAGE

COMMANDS = {m.NAME: m for m in _command_modules()}


def subparsers() -> dict[str, argparse.ArgumentParser]:
    root = build_parser()
    action = next(a for a in root._actions if isinstance(a, argparse._SubParsersAction))
    return dict(action.choices)


def options(p: argparse.ArgumentParser) -> dict[str, argparse.Action]:
    return {s: a for a in p._actions for s in a.option_strings}


def test_the_commands_users_script_against_stay():
    names = {"sim", "watch", "analyze", "record", "export", "db", "dash", "demo", "qualify", "plan"}
    names |= {"report", "debounce", "pullup"}
    assert names <= set(subparsers())


@pytest.mark.parametrize("name", sorted(COMMANDS))
def test_option_conventions(name):
    p = subparsers()[name]
    opts = options(p)
    assert "--cycle" not in opts and "--out" not in opts
    for a in p._actions:  # whatever takes a cycle profile is --profile ON_MS:OFF_MS:CYCLES, one value
        takes_profile = "ON_MS" in str(a.metavar) or "cycle profile" in (a.help or "").lower()
        if takes_profile or "--profile" in a.option_strings:
            assert a.option_strings == ["--profile"] and a.metavar == "ON_MS:OFF_MS:CYCLES", name
            assert a.nargs is None
    if "--json" in opts:
        assert isinstance(opts["--json"], argparse._StoreTrueAction), f"{name}: --json is a flag"
        assert "JSON" in opts["--json"].help and "standard output" in opts["--json"].help
    for s, a in opts.items():
        if s in ("-o", "--output"):
            assert a.option_strings == ["-o", "--output"] and a.metavar == "FILE"
    for a in p._actions:  # a positional is named to the user by its metavar, never by its dest
        if not a.option_strings and not isinstance(a, argparse._HelpAction):
            assert a.metavar and a.metavar.isupper(), f"{name}: positional {a.dest!r} has no metavar"
        if a.option_strings and a.metavar is not None:
            metas = a.metavar if isinstance(a.metavar, tuple) else (a.metavar,)
            assert all(re.fullmatch(r"[A-Z][A-Z0-9_:,.=/\-]*", m) for m in metas), (name, a.metavar)


@pytest.mark.parametrize("name", sorted(COMMANDS))
def test_every_help_ends_with_the_exit_table(name):
    help_text = subparsers()[name].format_help()
    assert EXIT_TABLE.strip() in help_text
    assert " 64 " in help_text and "exit 9" not in help_text


@pytest.mark.parametrize("name", sorted(COMMANDS))
def test_usage_errors_exit_64_with_one_line(name, capsys):
    with pytest.raises(SystemExit) as exc:
        main([name, "--no-such-option"])
    assert exc.value.code == USAGE == 64
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and err[0].startswith("benchlog: error: ") and "--help)" in err[0]


@pytest.mark.parametrize(
    "argv, shown",
    [
        (["export", "xyz"], "FORMAT"),  # a positional is named by its metavar
        (["db", "sideways"], "ACTION"),
        (["record", "--sim", "demo", "--bench", "B", "--profile", "50:50"], "ON_MS:OFF_MS:CYCLES"),
        (["sim", "--profile", "50:x:10"], "ON_MS:OFF_MS:CYCLES"),
        (["watch", "loop://", "--profile", "0:50:10"], "--profile"),
    ],
)
def test_bad_values_are_usage_errors_in_the_users_words(argv, shown, capsys):
    with pytest.raises(SystemExit) as exc:
        main(argv)
    err = capsys.readouterr().err
    assert exc.value.code == 64 and shown in err
    for leaked in ("argument what", "argument action", "duration", "try_rc", "_run"):
        assert leaked not in err


@pytest.mark.parametrize(
    "argv",
    [
        ["export", "vcd", "--db", "absent-but-unread.sqlite"],  # vcd needs exactly one --run
        ["record", "--bench", "B"],  # neither a port nor --sim
        ["watch"],  # no port
        ["plan", "--failures", "-1"],
    ],
)
def test_impossible_combinations_are_usage_errors(argv, capsys, tmp_path, monkeypatch):
    monkeypatch.chdir(tmp_path)
    assert main(argv) == 64
    assert capsys.readouterr().err.strip().count("\n") == 0


def test_no_command_is_a_usage_error(capsys):
    assert main([]) == 64


def test_sim_lists_only_presets_it_can_load(capsys):
    from benchlog.sim import load_preset

    assert main(["sim", "--list-presets"]) == 0
    names = capsys.readouterr().out.split()
    assert names and "thresholds" not in names
    for name in names:
        load_preset(name)  # every name listed starts a simulator
