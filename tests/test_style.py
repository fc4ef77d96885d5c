"""The tree is lint-clean under the project's ruff configuration (pyproject.toml)."""

import os
import subprocess
import sys

ROOT = os.path.join(os.path.dirname(os.path.abspath(__file__)), "..")


def test_ruff_is_clean_on_the_whole_tree():
    proc = subprocess.run([sys.executable, "-m", "ruff", "check", "--no-cache", ROOT], capture_output=True,
                          text=True)
    assert proc.returncode == 0, proc.stdout[-3000:] + proc.stderr[-1000:]
