"""Benchmark: peak memory and time of `transport viscosity --stream` on a very long log.

Generates (``bench_read_log.generate``, seeded) an engine-format log of ``--rows``
production rows (step, temperature, pressure, the six tensor components, volume: 10 columns;
10^8 rows are ~14.8 GB of text) and runs, each as a whole process with its peak resident
memory (``ru_maxrss`` of a one-child wrapper, file-backed pages included):

* ``stream``: ``transport viscosity LOG --temperature 300 --stream --no-cache`` (parsed rows
  in a scratch file, each piece correlated chunk by chunk);
* ``in-memory`` (only with ``--compare``, for sizes that fit): the same with
  ``--no-stream``; the Green–Kubo values of the two must agree.

Goal (issue 16): the 10^8-row, 6-component case within 1.5 GB. Needs free disk for the
log plus the scratch file (8 bytes x kept columns x rows: 6.4 GB at 10^8); check ``df``.

Usage::

    python benchmarks/bench_stream.py --rows 1e8
    python benchmarks/bench_stream.py --rows 1e7 --compare
"""

from __future__ import annotations

import json
import os
import shutil
import sys
import tempfile
from pathlib import Path

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE))

from bench_read_log import generate, parse_common_args, remove_generated  # noqa: E402
from bench_viscosity import _measure  # noqa: E402


def main(argv: list[str] | None = None) -> int:
    argv = list(sys.argv[1:] if argv is None else argv)
    compare = "--compare" in argv
    if compare:
        argv.remove("--compare")
    args = parse_common_args(__doc__, argv)
    rows = int(args.rows)
    log, bare = generate(args.scratch, rows)
    bare.unlink(missing_ok=True)  # only the log is read here
    cache = Path(tempfile.mkdtemp(prefix="transport-bench-cache-", dir=args.scratch))
    exe = Path(sys.executable).with_name("transport")
    print(f"data: {log} ({log.stat().st_size / 1e9:.1f} GB, {rows:.3g} rows); load "
          f"average {os.getloadavg()[0]:.2f}", flush=True)
    cases = ["stream", "in-memory"] if compare else ["stream"]
    got = {}
    try:
        for which in cases:
            out = cache / f"{which}.json"
            flag = "--stream" if which == "stream" else "--no-stream"
            got[which] = _measure([str(exe), "viscosity", str(log), "--temperature", "300",
                                   "--method", "green-kubo", "--no-cache", "--cache",
                                   str(cache), flag, "--json", str(out)])
            if out.is_file():
                res = json.loads(out.read_text())["results"][0]
                got[which]["value"] = res["value"]
                got[which]["stderr"] = res["stderr"]
    finally:
        shutil.rmtree(cache, ignore_errors=True)
    print(f"\n#### Streaming viscosity of a {rows:.3g}-row log (one round)\n")
    print("| case | wall s | peak RSS MB | goal | Green–Kubo mPa s |")
    print("|---|---:|---:|---|---|")
    for which in cases:
        g = got[which]
        if "error" in g:
            print(f"| {which} | failed: {g['error']} | | | |")
            continue
        goal = "<= 1536 (10^8 rows)" if which == "stream" else ""
        print(f"| {which} | {g['seconds']:.0f} | {g['peak_kib'] / 1024:.0f} | {goal} | "
              f"{g.get('value', float('nan')):.6g} +- {g.get('stderr', float('nan')):.2g} |")
    print(f"\n(whole processes; load average now {os.getloadavg()[0]:.2f}, 2 cores shared)")
    remove_generated(args, log, bare)
    return 0


if __name__ == "__main__":
    sys.exit(main())
