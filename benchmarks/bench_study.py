"""Analysing the runs of a study: serial (one thread, and threaded) vs a local process pool
vs a 2-worker Dask cluster.

16 replicas (two candidates x 8 replicas of synthetic stress, written as .npz; by default
10^6 rows each, a 4 ns run sampled every 4 fs) are analysed four ways in one run:

- serial, one thread: ``workers=1`` with ``TRANSPORT_THREADS=1`` (the baseline of the issue's
  speed-up: one core doing everything);
- serial, threaded: ``workers=1`` as a user gets it (the Green–Kubo pieces and FFTs already
  run in threads on every CPU);
- the local pool of 2 processes (one thread each), timed with its start-up: the forkserver,
  its preloaded imports and the workers (what a user waits for);
- a ``dask.distributed.LocalCluster`` of 2 single-threaded worker processes on loopback:
  the cluster's start-up is timed apart (a ``--scheduler`` user's cluster is already
  running); the analysis time includes the workers' first imports.

The same three local ways are then timed end to end as a user runs them: ``transport -q
compare study.toml --no-store --workers 1`` (with ``TRANSPORT_THREADS=1``, then without)
and ``--workers 2``, each a fresh process (imports, analysis, pooling, ranking draws,
output). The store is off, so every way analyses every run; the records must be identical. The load
average (1 min) is read before and after each row: the machine is shared. The Markdown table
goes to ``benchmarks/results/study_parallel.md`` (``--out`` to change).

Run: ``python benchmarks/bench_study.py [--rows 1000000] [--quick]``
"""

from __future__ import annotations

import argparse
import json
import os
import platform
import shutil
import subprocess
import sys
import tempfile
import time
from collections.abc import Callable
from pathlib import Path
from typing import Any

import numpy as np

from transport._study_data import write_synthetic_study
from transport._threads import THREADS_ENV, available_cpus
from transport.study import load_study
from transport.study_analysis import analyse_study


def _timed(fn: Callable[[], Any]) -> tuple[Any, float, float, float]:
    before = os.getloadavg()[0]
    t0 = time.perf_counter()
    out = fn()
    return out, time.perf_counter() - t0, before, os.getloadavg()[0]


def _single_threaded(study: Any) -> Any:
    old = os.environ.get(THREADS_ENV)
    os.environ[THREADS_ENV] = "1"
    try:
        return analyse_study(study, workers=1).records
    finally:
        if old is None:
            del os.environ[THREADS_ENV]
        else:
            os.environ[THREADS_ENV] = old


def _cli(manifest: Path, workers: int, threads: str | None) -> None:
    exe = shutil.which("transport", path=str(Path(sys.executable).parent)) or "transport"
    env = {k: v for k, v in os.environ.items() if k not in (THREADS_ENV, "OMP_NUM_THREADS")}
    if threads is not None:
        env[THREADS_ENV] = threads
    subprocess.run([exe, "-q", "compare", str(manifest), "--no-store", "--workers",
                    str(workers)], check=True, env=env, stdout=subprocess.DEVNULL)


def main() -> None:
    ap = argparse.ArgumentParser()
    ap.add_argument("--rows", type=float, default=1_000_000)
    ap.add_argument("--quick", action="store_true")
    ap.add_argument("--out", default=str(Path(__file__).parent / "results" /
                                         "study_parallel.md"))
    a = ap.parse_args()
    rows = 20_000 if a.quick else int(a.rows)
    cpus = available_cpus()  # now: a LocalCluster sets OMP_NUM_THREADS=1 in this process
    rows_out: list[tuple[str, float, float, float, Any]] = []
    notes: list[str] = []
    cli_rows: list[tuple[str, float, float, float]] = []
    with tempfile.TemporaryDirectory() as d:
        manifest = write_synthetic_study(
            d, truth={"a": {"T": 5.0}, "b": {"T": 6.0}}, references={"T": (5.0, 0.1)},
            temperatures={"T": 350.0}, replicas=8, rows=rows,
            rng=np.random.default_rng(0), file_format="npz", target=None)
        study = load_study(manifest)
        analyse_study(study, workers=1)  # warm the page cache and this process's imports
        for name, fn in (("serial, one thread", lambda: _single_threaded(study)),
                         (f"serial, threaded ({cpus} threads)",
                          lambda: analyse_study(study, workers=1).records),
                         ("local pool, 2 processes x 1 thread (start-up included)",
                          lambda: analyse_study(study, workers=2).records)):
            recs, t, l0, l1 = _timed(fn)
            rows_out.append((name, t, l0, l1, recs))
        try:
            from dask.distributed import LocalCluster
        except ImportError:
            notes.append("dask not installed: the cluster row is left out.")
        else:
            cl, t_up, l0, _ = _timed(lambda: LocalCluster(
                n_workers=2, threads_per_worker=1, processes=True, host="127.0.0.1",
                dashboard_address=None))
            with cl:
                recs, t, _, l1 = _timed(lambda: analyse_study(
                    study, scheduler=cl.scheduler_address).records)
            rows_out.append(("Dask LocalCluster, 2 workers x 1 thread (running cluster)",
                             t, l0, l1, recs))
            notes.append(f"Starting the LocalCluster took a further {t_up:.1f} s "
                         f"(with it: {t + t_up:.1f} s).")
        for name, w, th in (("CLI `--workers 1`, one thread", 1, "1"),
                            ("CLI `--workers 1`, threaded", 1, None),
                            ("CLI `--workers 2` (pool, 1 thread each)", 2, None)):
            _, t, l0, l1 = _timed(lambda w=w, th=th: _cli(manifest, w, th))
            cli_rows.append((name, t, l0, l1))
    base1, base_t = rows_out[0][1], rows_out[1][1]
    ref = json.dumps(rows_out[0][4], sort_keys=True)
    lines = [f"# Study analysis: 16 replicas of {rows:,} rows (4 fs) each", "",
             f"Measured {time.strftime('%Y-%m-%d %H:%M UTC', time.gmtime())} on "
             f"{platform.machine()} with {cpus} CPUs available "
             f"(os.cpu_count {os.cpu_count()}); the machine is shared with other work, "
             "so the load average (1 min) before and after each row is given.", "",
             "| executor | wall time (s) | vs serial one thread | vs serial threaded "
             "| load before / after | records identical |",
             "|---|---|---|---|---|---|"]
    for name, t, l0, l1, recs in rows_out:
        same = json.dumps(recs, sort_keys=True) == ref
        lines.append(f"| {name} | {t:.1f} | {base1 / t:.2f}x | {base_t / t:.2f}x "
                     f"| {l0:.2f} / {l1:.2f} | {same} |")
    if cli_rows:
        c1, ct = cli_rows[0][1], cli_rows[1][1]
        lines += ["", "End to end (`transport compare`, a fresh process each: imports, "
                  "analysis, comparison, output):", "",
                  "| command | wall time (s) | vs one thread | vs threaded "
                  "| load before / after |", "|---|---|---|---|---|"]
        lines += [f"| {n} | {t:.1f} | {c1 / t:.2f}x | {ct / t:.2f}x | {l0:.2f} / {l1:.2f} |"
                  for n, t, l0, l1 in cli_rows]
    text = "\n".join([*lines, "", *notes]) + "\n"
    print(text)
    if not a.quick:
        Path(a.out).parent.mkdir(parents=True, exist_ok=True)
        Path(a.out).write_text(text, encoding="utf-8")


if __name__ == "__main__":
    main()
