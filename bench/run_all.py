"""Run every ``bench_*.py`` script in this folder, one after another, and show their output.

Each script runs in its own interpreter (the one running this file), so one
script's warmed caches or memory cannot flatter the next. The exit status is
non-zero when any script failed; a missed speed target is printed, not failed.
"""

from __future__ import annotations

import subprocess
import sys
import time
from pathlib import Path

HERE = Path(__file__).resolve().parent


def main() -> int:
    scripts = sorted(HERE.glob("bench_*.py"))
    if not scripts:
        print("no bench_*.py scripts found in", HERE)
        return 1
    failed: list[str] = []
    for script in scripts:
        print(f"=== {script.name}", flush=True)
        t0 = time.perf_counter()
        rc = subprocess.call([sys.executable, str(script)], cwd=HERE.parent)
        print(f"=== {script.name}: exit {rc}, {time.perf_counter() - t0:.1f} s\n", flush=True)
        if rc != 0:
            failed.append(script.name)
    if failed:
        print("failed:", ", ".join(failed))
        return 1
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
