"""Run every benchmark script in this folder, one after another (``make bench``).

Each script prints its own figures and the ratios measured in the same run, with the
target and PASS/MISS beside each. Extra arguments (e.g. ``--quick``) are passed on.
"""

from __future__ import annotations

import subprocess
import sys
import time
from pathlib import Path

HERE = Path(__file__).resolve().parent


def main() -> int:
    scripts = sorted(HERE.glob("bench_*.py"))
    failures = 0
    for script in scripts:
        print(f"== {script.name}", flush=True)
        start = time.perf_counter()
        proc = subprocess.run([sys.executable, str(script), *sys.argv[1:]], check=False)
        print(f"   ({time.perf_counter() - start:.1f} s, exit {proc.returncode})\n", flush=True)
        failures += proc.returncode != 0
    return 1 if failures else 0


if __name__ == "__main__":
    sys.exit(main())
