"""Child Python processes for the tests that kill a writer with SIGKILL."""

from __future__ import annotations

import os
import subprocess
import sys
import textwrap

from tests.support import REPO


def child_process(code: str, *args: str) -> subprocess.Popen:
    """A Python child process running ``code`` with the repository importable."""
    env = dict(os.environ, PYTHONPATH=os.pathsep.join([str(REPO), os.environ.get("PYTHONPATH", "")]))
    return subprocess.Popen([sys.executable, "-c", textwrap.dedent(code), *args], cwd=REPO, env=env,
                            stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True)


def read_lines(proc: subprocess.Popen, n: int) -> list[str]:
    lines = []
    while len(lines) < n:
        line = proc.stdout.readline()
        if not line:
            raise AssertionError(f"child ended early: {proc.stderr.read()}")
        lines.append(line.strip())
    return lines
