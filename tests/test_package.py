import subprocess
import sys

import benchlog
from benchlog.views.cli import main


def test_public_surface():
    assert benchlog.__all__ == ["__version__"]


def test_help_runs_for_every_command(capsys):
    assert main([]) == 64  # a usage error
    assert subprocess.run([sys.executable, "-m", "benchlog", "--help"], capture_output=True).returncode == 0
