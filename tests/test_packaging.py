"""The built wheel carries the grammar and maps the three folders into one namespace."""

from __future__ import annotations

import subprocess
import sys
import zipfile
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]


def test_wheel_ships_grammar_and_namespace(tmp_path):
    subprocess.run(
        [sys.executable, "-m", "pip", "wheel", "--no-deps", "--no-build-isolation",
         "-q", "-w", str(tmp_path), str(ROOT)],
        check=True, capture_output=True, text=True)
    wheel = next(tmp_path.glob("plansieve-*.whl"))
    names = set(zipfile.ZipFile(wheel).namelist())
    assert "plansieve/critics/pddl.lark" in names
    # the default prompt templates of the HTTP guesser
    for part in ("system", "task", "retry"):
        assert f"plansieve/adapters/prompts/{part}.txt" in names
    for module in ("plansieve/__init__.py", "plansieve/cli.py", "plansieve/critics/simulator.py",
                   "plansieve/loop/__init__.py", "plansieve/adapters/__init__.py"):
        assert module in names
    # nothing leaks out as a bare top-level package
    assert not any(n.startswith(("critics/", "loop/", "adapters/", "tests/")) for n in names)


def test_code_never_imports_the_folders_by_bare_name():
    bare = ("from critics", "import critics", "from loop", "import loop",
            "from adapters", "import adapters")
    for folder in ("critics", "loop", "adapters", "plansieve", "tests", "examples", "bench"):
        for path in (ROOT / folder).rglob("*.py"):
            for line in path.read_text().splitlines():
                assert not line.strip().startswith(bare), f"{path}: {line.strip()}"
