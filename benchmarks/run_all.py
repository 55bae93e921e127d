"""Run every benchmark in this folder in turn (what `make bench` does).

Each benchmark prints its own table of ratios measured side by side in one run. Pass
``--quick`` for small sizes (a smoke test of the scripts, not a measurement).
"""

from __future__ import annotations

import subprocess
import sys
from pathlib import Path

HERE = Path(__file__).resolve().parent

QUICK = {
    "bench_read_log.py": ["--rows", "2e5", "--repeat", "1"],
    "bench_viscosity.py": ["--rows", "2e5", "--repeat", "1"],
}


def main() -> int:
    quick = "--quick" in sys.argv[1:]
    failed = []
    for script in sorted(HERE.glob("bench_*.py")):
        args = QUICK.get(script.name, []) if quick else []
        if quick and script.name not in QUICK:
            args = ["--quick"]
        print(f"\n=== {script.name} {' '.join(args)}", flush=True)
        r = subprocess.run([sys.executable, str(script), *args])
        if r.returncode:
            failed.append(script.name)
    if failed:
        print(f"\nfailed: {', '.join(failed)}")
    return 1 if failed else 0


if __name__ == "__main__":
    sys.exit(main())
