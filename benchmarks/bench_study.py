"""Analysing the runs of a study: serial vs a local process pool vs a 2-worker Dask cluster.

16 replicas (two candidates x 8 replicas of synthetic stress, written as .npz) are analysed
three ways in one run, side by side: ``workers=1`` (in process), the local pool with 2
processes, and a ``dask.distributed.LocalCluster`` of 2 single-threaded worker processes on
loopback. The store is off, so every way analyses every run; the records must be identical.
Timings include the pool's or cluster's start-up (what a user waits for). The Markdown table
goes to ``benchmarks/results/study_parallel.md`` (``--out`` to change).

Run: ``python benchmarks/bench_study.py [--rows 100000] [--quick]``
"""

from __future__ import annotations

import argparse
import json
import os
import platform
import tempfile
import time
from pathlib import Path

import numpy as np

from transport._study_data import write_synthetic_study
from transport._threads import available_cpus
from transport.study import load_study
from transport.study_analysis import analyse_study


def main() -> None:
    ap = argparse.ArgumentParser()
    ap.add_argument("--rows", type=float, default=100_000)
    ap.add_argument("--quick", action="store_true")
    ap.add_argument("--out", default=str(Path(__file__).parent / "results" /
                                         "study_parallel.md"))
    a = ap.parse_args()
    rows = 20_000 if a.quick else int(a.rows)
    with tempfile.TemporaryDirectory() as d:
        manifest = write_synthetic_study(
            d, truth={"a": {"T": 5.0}, "b": {"T": 6.0}}, references={"T": (5.0, 0.1)},
            temperatures={"T": 350.0}, replicas=8, rows=rows,
            rng=np.random.default_rng(0), file_format="npz", target=None)
        study = load_study(manifest)
        times, recs = {}, {}
        t0 = time.perf_counter()
        recs["serial"] = analyse_study(study, workers=1).records
        times["serial"] = time.perf_counter() - t0
        t0 = time.perf_counter()
        recs["local pool (2 processes)"] = analyse_study(study, workers=2).records
        times["local pool (2 processes)"] = time.perf_counter() - t0
        try:
            from dask.distributed import LocalCluster

            t0 = time.perf_counter()
            with LocalCluster(n_workers=2, threads_per_worker=1, processes=True,
                              host="127.0.0.1", dashboard_address=None) as cl:
                recs["Dask LocalCluster (2 workers)"] = analyse_study(
                    study, scheduler=cl.scheduler_address).records
            times["Dask LocalCluster (2 workers)"] = time.perf_counter() - t0
        except ImportError:
            print("dask not installed: the cluster row is left out")
    ref = json.dumps(recs["serial"], sort_keys=True)
    lines = [f"# Study analysis: 16 replicas of {rows} rows (4 fs) each", "",
             f"Measured {time.strftime('%Y-%m-%d %H:%M UTC', time.gmtime())} on "
             f"{platform.machine()} with {available_cpus()} CPUs available "
             f"(os.cpu_count {os.cpu_count()}); machine shared with other work, so the "
             "ratios are lower bounds of an idle machine's.", "",
             "| executor | wall time (s) | speed-up vs serial | records identical |",
             "|---|---|---|---|"]
    for k, t in times.items():
        same = json.dumps(recs[k], sort_keys=True) == ref
        lines.append(f"| {k} | {t:.1f} | {times['serial'] / t:.2f}x | {same} |")
    text = "\n".join(lines) + "\n"
    print(text)
    if not a.quick:
        Path(a.out).parent.mkdir(parents=True, exist_ok=True)
        Path(a.out).write_text(text, encoding="utf-8")


if __name__ == "__main__":
    main()
