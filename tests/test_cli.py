"""The command as a user runs it: a subprocess, exit codes, and no traceback for mistakes."""

import subprocess
import sys
from pathlib import Path

from debrief import __version__

ROOT = Path(__file__).resolve().parents[1]


def run(*args, cwd=ROOT):
    return subprocess.run([sys.executable, "-m", "debrief", *args], cwd=cwd, capture_output=True, text=True, timeout=300)


def test_version():
    r = run("--version")
    assert r.returncode == 0 and r.stdout.strip() == f"debrief {__version__}"


def test_no_command_is_usage_error():
    r = run()
    assert r.returncode == 2 and "COMMAND" in r.stderr


def test_unknown_command_and_option():
    r = run("frobnicate")
    assert r.returncode == 2 and "invalid choice" in r.stderr and "Traceback" not in r.stderr
