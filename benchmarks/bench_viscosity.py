"""Benchmark: `transport viscosity` end to end against pandas and a plain user script.

Uses the log generator of ``bench_read_log.py`` (an engine-format thermo log of ``--rows``
production rows plus a file holding only its numeric lines). Side by side, each in a fresh
process, alternating, ``--repeat`` rounds; before each run only the file it reads is in the
page cache (see ``bench_read_log.warm_cache``). Every case is timed as a whole process
(interpreter start and imports included) and its peak resident memory is the child's
``ru_maxrss`` (``resource.getrusage(RUSAGE_CHILDREN)`` in a one-child wrapper):

* ``pandas``: ``pd.read_csv(bare, sep=' ', skipinitialspace=True, header=None)``, pandas'
  C parser reading only the numeric block (the floor of any analysis of the text);
* ``user-script``: what a user might write without this tool: the same pandas read, the
  FFT autocorrelation (zero padded to 2n, divided by the pairs per lag) of the three
  off-diagonal components, averaged, and its cumulative trapezoid integral times V/(k_B T)
  up to the first quarter of the run (no cutoff choice, no error bar);
* ``cli-first``: ``transport viscosity LOG --temperature 300`` with an empty parse cache
  (Green–Kubo with the automatic cutoff and the error bar over independent pieces);
* ``cli-cached``: the same command again, served from the parse cache it just filled;
* ``cli-no-cache``: ``transport viscosity --no-cache ...`` (parsing the text, writing no
  cache: the cost of writing the cache is cli-first minus this).

A case that fails is reported as failed (its error's last line) and the others go on.

Ratios are the median over the rounds of each round's time over that round's pandas time
(and, for ``cli-cached``, over that round's ``cli-first``). Goals (issue 16): cli-first at
most 1.0x pandas; no slower than the user script; cli-cached at most 0.1x cli-first.

Usage::

    python benchmarks/bench_viscosity.py              # 10^7 rows (about 1.4 GB of text)
    python benchmarks/bench_viscosity.py --rows 1e6   # quick check
"""

from __future__ import annotations

import json
import os
import shutil
import statistics
import subprocess
import sys
import tempfile
from pathlib import Path

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE))

from bench_read_log import (  # noqa: E402
    generate,
    parse_common_args,
    remove_generated,
    warm_cache,
)

_USER = r"""
import sys
import numpy as np, pandas as pd, scipy.fft as sfft
from scipy.integrate import cumulative_trapezoid
df = pd.read_csv(sys.argv[1], sep=" ", skipinitialspace=True, header=None)
x = df[[6, 7, 8]].to_numpy().T * 101325.0      # Pxy Pxz Pyz, atm -> Pa
vol = float(df[9].mean()) * 1e-30              # Angstrom^3 -> m^3
n = x.shape[1]
f = sfft.rfft(x, n=sfft.next_fast_len(2 * n), axis=1)
acf = sfft.irfft(f * f.conj(), axis=1)[:, : n // 4].mean(axis=0) / (n - np.arange(n // 4))
dt = 10 * 1e-15                                  # 10 steps of 1 fs
eta = cumulative_trapezoid(acf, dx=dt, initial=0.0) * vol / (1.380649e-23 * 300.0)
print(eta[-1])
"""

_WRAP = r"""
import json, resource, subprocess, sys, time
t = time.perf_counter()
r = subprocess.run(sys.argv[1:], stdout=subprocess.DEVNULL, stderr=subprocess.PIPE, text=True)
wall = time.perf_counter() - t
if r.returncode:
    sys.exit(f"{sys.argv[1:]} failed: {r.stderr[-2000:]}")
peak = resource.getrusage(resource.RUSAGE_CHILDREN).ru_maxrss
print(json.dumps({"seconds": wall, "peak_kib": peak}))
"""

_PANDAS = ("import sys, pandas as pd; "
           "pd.read_csv(sys.argv[1], sep=' ', skipinitialspace=True, header=None)")


def _cmd(which: str, log: Path, bare: Path, cache: Path) -> list[str]:
    exe = Path(sys.executable)
    cli = [str(exe.with_name("transport")), "viscosity", str(log), "--temperature", "300",
           "--method"]
    if which == "pandas":
        return [str(exe), "-c", _PANDAS, str(bare)]
    if which == "user-script":
        return [str(exe), "-c", _USER, str(bare)]
    if which in ("cli-first", "cli-cached"):
        return [*cli, "green-kubo", "--cache", str(cache)]
    return [*cli, "green-kubo", "--no-cache"]


def _measure(cmd: list[str]) -> dict:
    res = subprocess.run([sys.executable, "-c", _WRAP, *cmd], capture_output=True, text=True)
    if res.returncode:
        err = (res.stderr.strip().splitlines() or ["?"])[-1]
        return {"seconds": float("nan"), "peak_kib": float("nan"), "error": err[-300:]}
    return json.loads(res.stdout.strip().splitlines()[-1])


def main(argv: list[str] | None = None) -> int:
    args = parse_common_args(__doc__, argv)
    rows = int(args.rows)
    log, bare = generate(args.scratch, rows)
    cache = Path(tempfile.mkdtemp(prefix="transport-bench-cache-", dir=args.scratch))
    print(f"data: {log} ({log.stat().st_size / 1e6:.0f} MB, {rows:.3g} rows); load "
          f"average {os.getloadavg()[0]:.2f}", flush=True)
    cases = ("pandas", "user-script", "cli-first", "cli-cached", "cli-no-cache")
    rounds: list[dict[str, dict]] = []
    try:
        for _ in range(args.repeat):
            got: dict[str, dict] = {}
            shutil.rmtree(cache, ignore_errors=True)
            for which in cases:
                path = bare if which in ("pandas", "user-script") else log
                warm_cache(path, *({bare, log} - {path}))
                got[which] = _measure(_cmd(which, log, bare, cache))
            rounds.append(got)
    finally:
        shutil.rmtree(cache, ignore_errors=True)

    def med(which: str, key: str = "seconds") -> float:
        return statistics.median(r[which][key] for r in rounds)

    def ratio(which: str, base: str) -> float:
        return statistics.median(r[which]["seconds"] / r[base]["seconds"] for r in rounds)

    goals = {"cli-first": ("pandas", 1.0), "cli-cached": ("cli-first", 0.1)}
    print(f"\n#### Viscosity of a {rows:.3g}-row log ({args.repeat} rounds, medians)\n")
    print("| case | wall s | vs pandas | vs user script | vs cli-first | goal | "
          "peak RSS MB |")
    print("|---|---:|---:|---:|---:|---|---:|")
    for which in cases:
        errors = [r[which]["error"] for r in rounds if "error" in r[which]]
        if errors:
            print(f"| {which} | failed: {errors[0]} | | | | | |")
            continue
        goal = goals.get(which)
        gtxt = "" if goal is None else f"<= {goal[1]}x {goal[0]}"
        if which == "cli-first":
            gtxt += "; <= 1.0x user script"
        print(f"| {which} | {med(which):.2f} | {ratio(which, 'pandas'):.2f} | "
              f"{ratio(which, 'user-script'):.2f} | {ratio(which, 'cli-first'):.2f} | "
              f"{gtxt} | {med(which, 'peak_kib') / 1024:.0f} |")
    print("\n(whole processes, imports included; ratios are medians of per-round ratios; "
          f"load average now {os.getloadavg()[0]:.2f}, 2 cores shared)")
    remove_generated(args, log, bare)
    return 0


if __name__ == "__main__":
    sys.exit(main())
