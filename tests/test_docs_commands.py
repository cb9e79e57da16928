"""Every `benchlog` command line in the docs' code blocks (docs/*.md) is checked against the real command
line: a synopsis (`[--db URL]`, `PORT`, `...`) by the command's own parser, option by option; a
command as a user would type it is run, in a folder holding one small demo store made once per session
(`benchlog demo --cycles 200`), through the command line's entry point, and must exit 0 without a
traceback. (README's lines are run by tests/test_readme.py.)"""

from __future__ import annotations

import argparse
import os
import re
import shlex
import shutil
import subprocess
import sys
from pathlib import Path

import pytest

from tests.conftest import HANG_S

DOCS = Path(__file__).resolve().parents[1] / "docs"
# long computations, checked by their parser only (named here so that none is left out silently):
# the operating characteristic simulates thousands of qualifications (5-6 s a line), and a capture
# file of a night's recording is not part of the demo
PARSED_ONLY = {
    "plan --spec VS-505 --oc": "an operating characteristic takes seconds",
    "plan --spec VS-505 --oc --incumbent AG-MS5:L1 --units 16 --margin 0.2": "as above",
    "analyze night.rec --spec AG-R12": "needs a night's capture file",
}


def docs_commands() -> list[tuple[str, list[str]]]:
    """(file name, argv) of every `benchlog ...` line in the docs' code blocks (continuations joined)."""
    out = []
    for path in sorted(DOCS.glob("*.md")):
        for block in re.findall(r"```[a-z]*\n(.*?)```", path.read_text("utf-8"), re.S):
            for line in block.replace("\\\n", " ").splitlines():
                if not line.startswith("benchlog "):
                    continue
                argv = shlex.split(line, comments=True)
                out.append((path.name, argv))
    return out


def is_synopsis(argv: list[str]) -> bool:
    """A usage line, not a command to type: optional parts, alternatives, NAMES to fill in."""
    words = argv[2:]
    return any(
        w.startswith(("[", "(")) or w in ("|", "...") or (w.isupper() and len(w) > 1 and w.isalpha())
        for w in words
    ) or any(re.search(r"[A-Z]{2,}:|\|", w) for w in words if not w.startswith("--"))


def parser_of(name: str) -> argparse.ArgumentParser:
    import importlib

    mod = importlib.import_module(f"benchlog.views.cli.cmd_{name}")
    p = argparse.ArgumentParser(prog=f"benchlog {name}")
    mod.add_arguments(p)
    return p


def options(p: argparse.ArgumentParser) -> set[str]:
    out = set(p._option_string_actions)
    for a in p._actions:
        if isinstance(a, argparse._SubParsersAction):
            for sub in a.choices.values():
                out |= options(sub)
    return out


def test_every_docs_synopsis_names_real_options():
    lines = docs_commands()
    assert len(lines) >= 20
    for name, argv in lines:
        known = options(parser_of(argv[1]))  # an unknown command fails here
        for word in argv[2:]:
            opt = word.strip("[]()").split("=")[0]
            if opt.startswith("-") and not re.fullmatch(r"-?\d[\d.]*", opt):
                assert opt in known, f"{name}: {shlex.join(argv)}: no option {opt}"


@pytest.fixture(scope="session")
def demo_folder(tmp_path_factory) -> Path:
    """A folder with the demo's store (./benchlog.sqlite, and lab.sqlite as docs/debounce.md names it)."""
    folder = tmp_path_factory.mktemp("docs")
    env = {k: v for k, v in os.environ.items() if k != "BENCHLOG_DB"}
    done = subprocess.run(
        [sys.executable, "-m", "benchlog", "demo", "--no-dash", "--cycles", "200"],
        cwd=folder,
        env=env,
        capture_output=True,
        text=True,
        timeout=HANG_S,
    )
    assert done.returncode == 0, done.stderr
    shutil.copy(folder / "benchlog.sqlite", folder / "lab.sqlite")
    return folder


def test_every_docs_command_runs_on_the_demo(demo_folder, monkeypatch, capsys):
    # in this process (a process each would spend most of its time importing): the command line's own
    # entry point, as `python -m benchlog` calls it
    from benchlog.views.cli import main

    monkeypatch.delenv("BENCHLOG_DB", raising=False)
    monkeypatch.chdir(demo_folder)
    ran = 0
    for name, argv in docs_commands():
        line = shlex.join(argv[1:])
        if is_synopsis(argv) or line in PARSED_ONLY:
            continue
        code = main(argv[1:])
        err = capsys.readouterr().err
        said = f"{name}: {shlex.join(argv)}\n{err}"
        assert "Traceback" not in err and "internal error" not in err, said
        judged = argv[1] in ("qualify", "report")  # their exit status is the verdict (docs/commands.md)
        assert code in ((0, 1, 2) if judged else (0,)), said
        ran += 1
    assert ran >= 10
    assert set(PARSED_ONLY) <= {shlex.join(a[1:]) for _, a in docs_commands()}  # none stale
