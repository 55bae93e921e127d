"""Speed and memory of the correlation functions (ratios measured side by side).

1. FFT autocorrelation of 10^7 samples (all lags) against one bare numpy rfft/irfft pair
   of the same padded length (``scipy.fft.next_fast_len(2N - 1)`` in both): goal <= 1.2x.
2. Bounded-memory (streaming) autocorrelation of 10^8 samples up to lag 10^4, the series
   generated chunk by chunk from a seeded AR(1) so that it never sits in memory whole:
   goal peak RSS < 1.5 GB, measured in a fresh subprocess with resource.getrusage.

Run: ``.venv/bin/python benchmarks/bench_acf.py [--quick]``. Timings are best of 3 and
depend on what else the machine is doing; the ratios are what matters.
"""

from __future__ import annotations

import argparse
import json
import subprocess
import sys
import textwrap
import time

import numpy as np
import scipy.fft as sfft

from transport.stats import autocorrelation


def _best(fn, repeat=3):
    times = []
    for _ in range(repeat):
        t = time.perf_counter()
        fn()
        times.append(time.perf_counter() - t)
    return min(times)


def bench_full_acf(n: int) -> float:
    rng = np.random.default_rng(1)
    x = rng.standard_normal(n)
    length = sfft.next_fast_len(2 * n - 1, real=True)

    def bare_numpy():
        np.fft.irfft(np.fft.rfft(x, n=length), n=length)

    def bare_scipy():
        sfft.irfft(sfft.rfft(x, n=length), n=length)

    def ours():
        autocorrelation(x)

    ours()  # warm up (plans, page faults)
    t_np, t_sp, t_ours = [], [], []
    for _ in range(3):  # interleaved so that machine load hits all three alike
        t_np.append(_best(bare_numpy, 1))
        t_sp.append(_best(bare_scipy, 1))
        t_ours.append(_best(ours, 1))
    a, b, c = min(t_np), min(t_sp), min(t_ours)
    print(f"[acf] N = {n:.0e}, padded length {length}")
    print(f"  bare numpy rfft+irfft : {a:7.3f} s")
    print(f"  bare scipy rfft+irfft : {b:7.3f} s")
    print(f"  autocorrelation()     : {c:7.3f} s  (mean removal, |X|^2, normalisation)")
    print(f"  ratio to numpy pair   : {c / a:5.2f}  (goal <= 1.2)")
    print(f"  ratio to scipy pair   : {c / b:5.2f}")
    print(f"  per point             : {c / n * 1e9:5.1f} ns")
    return c / n


_CHILD = textwrap.dedent(
    """
    import json, resource, sys, time
    import numpy as np
    from transport.stats import StreamingCorrelator, ar1
    n, max_lag, chunk, phi, corr = (int(sys.argv[1]), int(sys.argv[2]), int(sys.argv[3]),
                                    float(sys.argv[4]), sys.argv[5] == "1")
    rss0 = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss  # KiB on Linux
    rng = np.random.default_rng(2026)
    sc = StreamingCorrelator(1, max_lag) if corr else None
    prev = None
    t = time.perf_counter()
    done = 0
    while done < n:
        m = min(chunk, n - done)
        x = ar1(phi, m, rng=rng, previous=prev)
        prev = x[-1]
        if sc is not None:
            sc.update(x)
        done += m
    res = sc.result()[0] if sc is not None else None
    elapsed = time.perf_counter() - t
    rss = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss
    hwm = None
    try:  # peak RSS of this process image alone (ru_maxrss may include the parent's)
        with open("/proc/self/status") as fh:
            hwm = next(int(s.split()[1]) for s in fh if s.startswith("VmHWM:"))
    except (OSError, StopIteration):
        pass
    out = {"elapsed": elapsed, "rss0_kib": rss0, "rss_kib": rss, "hwm_kib": hwm}
    if res is not None:
        k = np.arange(res.size)
        out["max_dev_rho"] = float(np.max(np.abs(res / res[0] - phi ** k)))
        out["fft_length"] = sc.fft_length
        out["block"] = sc.block_size
    print(json.dumps(out))
    """
)


def _child(n, max_lag, chunk, phi, corr):
    cp = subprocess.run([sys.executable, "-c", _CHILD, str(n), str(max_lag), str(chunk),
                         str(phi), "1" if corr else "0"], capture_output=True, text=True,
                        check=True)
    return json.loads(cp.stdout)


def bench_streaming(n: int, max_lag: int, chunk: int) -> float:
    phi = 0.99
    gen = _child(n, max_lag, chunk, phi, corr=False)
    run = _child(n, max_lag, chunk, phi, corr=True)
    t_corr = run["elapsed"] - gen["elapsed"]
    gib = 2**20  # KiB per GiB
    print(f"[streaming] N = {n:.0e} samples, max lag {max_lag}, chunks of {chunk}, "
          f"FFT length {run['fft_length']} (block {run['block']})")
    print(f"  generation only       : {gen['elapsed']:7.2f} s")
    print(f"  generation + streaming: {run['elapsed']:7.2f} s  -> correlation "
          f"{t_corr:6.2f} s, {t_corr / n * 1e9:5.1f} ns per sample")
    print(f"  peak RSS (getrusage)  : {run['rss_kib'] / gib:6.3f} GiB (after imports "
          f"{run['rss0_kib'] / gib:5.3f} GiB; generation alone {gen['rss_kib'] / gib:5.3f} GiB)")
    if run["hwm_kib"] is not None:
        print(f"  peak RSS (VmHWM)      : {run['hwm_kib'] / gib:6.3f} GiB (generation alone "
              f"{gen['hwm_kib'] / gib:5.3f} GiB)")
    print(f"  ratio to 1.5 GB goal  : {run['rss_kib'] * 1024 / 1.5e9:5.2f}  (goal < 1)")
    print(f"  the whole series would need {n * 8 / 2**30:5.2f} GiB as float64")
    # sanity: AR(1) has rho(k) = phi^k; the statistical sd of each estimate is about
    # sqrt((1 + phi^2) / ((1 - phi^2) N)) (Bartlett), 1e-3 at N = 1e8, 3e-3 at 1e7
    sd = np.sqrt((1 + phi**2) / ((1 - phi**2) * n))
    print(f"  max |rho(k) - phi^k|  : {run['max_dev_rho']:.1e}  (statistical sd {sd:.0e} "
          "per lag)")
    return t_corr / n


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--quick", action="store_true", help="10x smaller sizes")
    args = ap.parse_args()
    scale = 10 if args.quick else 1
    # streaming first: a child's ru_maxrss on Linux starts from the parent's RSS at fork,
    # so the parent must not yet hold the large arrays of the full-FFT benchmark
    per_stream = bench_streaming(10**8 // scale, 10**4, 10**6)
    per_full = bench_full_acf(10**7 // scale)
    print(f"[ratio] streaming (lags <= 1e4) per sample / full FFT ACF per sample: "
          f"{per_stream / per_full:5.2f}")


if __name__ == "__main__":
    main()
