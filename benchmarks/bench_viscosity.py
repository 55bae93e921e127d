"""Benchmark: `transport viscosity` end to end against pandas merely reading the numbers.

Uses the log generator of ``bench_read_log.py`` (an engine-format thermo log of ``--rows``
production rows plus a file holding only its numeric lines). Side by side, each in a fresh
process, alternating, ``--repeat`` times (best kept, and the median over the rounds of each
round's ratio to pandas); before each run only the file it reads is in the page cache (see
``bench_read_log.warm_cache``):

* pandas: ``pd.read_csv(bare, sep=' ', skipinitialspace=True, header=None)``;
* ``transport.io.load_stress`` + ``transport.viscosity.analyse_viscosity`` (Green–Kubo with
  the automatic cutoff and error bar), which is what the ``viscosity`` command runs;
* the same with ``method="both"`` (Green–Kubo and Einstein).

Goal (issue): the Green–Kubo analysis end to end within 1.5x of the pandas read.

Usage::

    python benchmarks/bench_viscosity.py              # 10^7 rows (about 1.4 GB of text)
    python benchmarks/bench_viscosity.py --rows 1e6   # quick check
"""

from __future__ import annotations

import os
import statistics
import sys
from pathlib import Path

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE))

from bench_read_log import (  # noqa: E402
    generate,
    parse_common_args,
    remove_generated,
    run_child,
    warm_cache,
)

_CHILD = r"""
import json, resource, sys, time
import pandas as pd
from transport.io import load_stress
from transport.viscosity import analyse_viscosity
which, path = sys.argv[1], sys.argv[2]
base = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss
t = time.perf_counter()
if which == "pandas":
    df = pd.read_csv(path, sep=" ", skipinitialspace=True, header=None)
    rows = len(df)
    read = time.perf_counter() - t
else:
    s = load_stress(path, temperature=300.0)
    read = time.perf_counter() - t
    method = "both" if which == "gk+einstein" else "green-kubo"
    res = analyse_viscosity(s, method=method)
    rows = s.n
elapsed = time.perf_counter() - t
peak = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss - base
print(json.dumps({"seconds": elapsed, "read": read, "rows": rows, "extra_kib": peak}))
"""


def _child(which: str, path: Path) -> dict:
    return run_child(_CHILD, which, str(path))


def main(argv: list[str] | None = None) -> int:
    args = parse_common_args(__doc__, argv)
    rows = int(args.rows)
    log, bare = generate(args.scratch, rows)
    print(f"data: {log} ({log.stat().st_size / 1e6:.0f} MB); load average "
          f"{os.getloadavg()[0]:.2f}")
    best: dict[str, dict] = {}
    rounds: list[dict[str, float]] = []
    for _ in range(args.repeat):
        times: dict[str, float] = {}
        for which, path in (("pandas", bare), ("green-kubo", log), ("gk+einstein", log)):
            warm_cache(path, *({bare, log} - {path}))
            r = _child(which, path)
            times[which] = r["seconds"]
            if which not in best or r["seconds"] < best[which]["seconds"]:
                best[which] = r
        rounds.append(times)
    base = best["pandas"]["seconds"]
    print(f"\n{'what':<14}{'rows':>10}{'total s':>9}{'read s':>8}{'vs pandas':>11}"
          f"{'median ratio':>14}{'peak extra MB':>15}")
    for which, r in best.items():
        paired = statistics.median(t[which] / t["pandas"] for t in rounds)
        print(f"{which:<14}{r['rows']:>10d}{r['seconds']:>9.2f}{r['read']:>8.2f}"
              f"{r['seconds'] / base:>11.2f}{paired:>14.2f}"
              f"{r['extra_kib'] * 1024 / 1e6:>15.0f}")
    print("(best of the rounds; 'median ratio': median over rounds of the time over that "
          "round's pandas time)")
    print(f"\ngoal: green-kubo end to end within 1.5x of pandas; load average now "
          f"{os.getloadavg()[0]:.2f} (2 cores shared)")
    remove_generated(args, log, bare)
    return 0


if __name__ == "__main__":
    sys.exit(main())
