"""Every command line in the README runs as written, in a fresh folder, after `benchlog demo`: each in
its own process, as a newcomer would type it (no terminal: the demo and the dashboard print instead)."""

from __future__ import annotations

import os
import re
import shlex
import signal
import subprocess
import sys
from pathlib import Path

from tests.conftest import _TRAMPOLINE, HANG_S

README = Path(__file__).resolve().parents[1] / "README.md"


def readme_commands() -> list[list[str]]:
    """`benchlog ...` command lines of the README's code blocks (continuations joined, comments cut)."""
    text = README.read_text("utf-8")
    out = []
    for block in re.findall(r"```\n(.*?)```", text, re.S):
        for line in block.replace("\\\n", " ").splitlines():
            for part in line.split("&&"):
                argv = shlex.split(part, comments=True)
                if argv and argv[0] == "benchlog":
                    out.append(argv)
    return out


def run(argv: list[str], cwd: Path, env: dict) -> subprocess.CompletedProcess:
    cmd = [sys.executable, "-m", "benchlog", *argv[1:]]
    return subprocess.run(cmd, cwd=cwd, env=env, capture_output=True, text=True, timeout=900)


def record_then_stop(argv: list[str], cwd: Path, env: dict) -> tuple[int, str, str]:
    """A night-long recording, stopped as Ctrl-C stops it once it reports its first progress."""
    # started with SIGINT as a terminal leaves it: pytest may run as a background job, which inherits
    # SIGINT ignored, and Ctrl-C would then do nothing
    cmd = [sys.executable, "-c", _TRAMPOLINE, "default", sys.executable, "-m", "benchlog", *argv[1:]]
    proc = subprocess.Popen(cmd, cwd=cwd, env=env, stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True)
    try:
        for line in proc.stderr:
            if re.match(r"run \d+: [1-9]", line.strip()):  # cycles are being recorded
                break
        proc.send_signal(signal.SIGINT)
        out, err = proc.communicate(timeout=HANG_S)  # a ceiling only a hang reaches
    finally:
        if proc.poll() is None:
            proc.kill()
            proc.communicate()
    return proc.returncode, out, err


def test_every_readme_command_runs_after_the_demo(tmp_path):
    env = {k: v for k, v in os.environ.items() if k != "BENCHLOG_DB"}
    commands = readme_commands()
    names = [argv[1] for argv in commands]
    assert names[0] == "demo" and {
        "dash",
        "qualify",
        "report",
        "plan",
        "debounce",
        "export",
        "record",
        "scope",
    } <= set(names)
    for argv in commands:
        if argv[1] == "record":
            code, out, err = record_then_stop(argv, tmp_path, env)
            assert code == 0, err
            assert "ended (stopped)" in out
            continue
        done = run(argv, tmp_path, env)
        said = f"{shlex.join(argv)}\n{done.stderr}"
        assert "Traceback" not in done.stderr and "internal error" not in done.stderr, said
        judged = argv[1] in ("qualify", "report")  # their exit status is the verdict
        assert done.returncode in ((0, 1, 2) if judged else (0,)), said
        if argv[1] == "demo":
            assert (tmp_path / "benchlog.sqlite").exists()
    assert (tmp_path / "verdict.json").stat().st_size > 0
    assert (tmp_path / "qualification.html").stat().st_size > 0
    assert (tmp_path / "relays.csv").read_text().count("\n") > 1000
    assert (tmp_path / "benchlog-captures" / "truth.json").exists()  # the demo's analog captures
