"""The embedding examples run as documented, so they cannot quietly rot."""

from __future__ import annotations

import subprocess
import sys
from pathlib import Path

import pytest

EXAMPLES = Path(__file__).resolve().parents[1] / "examples" / "embedding"


@pytest.mark.parametrize("script, args, expect", [
    ("custom_critic.py", [], "west-lane-quota failed"),
    ("custom_guesser.py", [], "verified"),
    ("gate_in_handler.py", ["--once"], '200 {"verified": true'),
])
def test_example_runs(script, args, expect):
    done = subprocess.run([sys.executable, str(EXAMPLES / script), *args], capture_output=True,
                          text=True, timeout=120)
    assert done.returncode == 0, done.stderr
    assert expect in done.stdout
