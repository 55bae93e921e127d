"""Benchmark: FFT mean-squared displacement against MDAnalysis's direct MSD.

Brownian positions of ``--atoms`` particles over ``--frames`` frames (float32, as the
trajectory reader stores them) are analysed, side by side in one run:

* ``transport``: :func:`transport.diffusion.species_msd` (FFT per particle, in chunks of
  particles, centre-of-mass drift removed) on a :class:`~transport.series.PositionSeries`,
  and the whole estimate :func:`transport.diffusion.analyse_diffusion` (MSD, window, GLS);
* MDAnalysis: ``MDAnalysis.analysis.msd.EinsteinMSD(fft=False)`` (direct average over all
  origins for every lag, O(T^2)) on an in-memory Universe. Its cost grows as T^2 (number of
  lags times number of origins), so it is timed on ``--direct-frames`` frames and scaled by
  ``(frames / direct_frames)^2`` (the scaling is checked on two lengths and printed).

Both MSD curves are compared on the shorter run (relative difference printed). DESIGN.md
quotes 0.26 s against 85 s (about 300x) for 1,000 atoms x 2,000 frames on this machine.

Usage::

    python benchmarks/bench_msd.py                  # 1,000 atoms x 2,000 frames
    python benchmarks/bench_msd.py --direct-frames 250
    python benchmarks/bench_msd.py --quick          # smoke test of the script
"""

from __future__ import annotations

import argparse
import time
import warnings

import numpy as np


def _best(fn, repeat: int) -> float:
    best = np.inf
    for _ in range(repeat):
        t0 = time.perf_counter()
        fn()
        best = min(best, time.perf_counter() - t0)
    return best


def _direct(x: np.ndarray) -> tuple[float, np.ndarray]:
    import MDAnalysis as mda
    from MDAnalysis.analysis.msd import EinsteinMSD
    from MDAnalysis.coordinates.memory import MemoryReader

    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        u = mda.Universe.empty(x.shape[1], trajectory=True)
        u.load_new(np.ascontiguousarray(x), format=MemoryReader)
        t0 = time.perf_counter()
        res = EinsteinMSD(u, select="all", msd_type="xyz", fft=False).run()
        return time.perf_counter() - t0, res.results.timeseries


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--atoms", type=int, default=1000)
    ap.add_argument("--frames", type=int, default=2000)
    ap.add_argument("--direct-frames", type=int, default=500,
                    help="frames for the direct O(T^2) method (scaled to --frames)")
    ap.add_argument("--repeat", type=int, default=3)
    ap.add_argument("--quick", action="store_true", help="small sizes (smoke test)")
    args = ap.parse_args(argv)
    if args.quick:
        args.atoms, args.frames, args.direct_frames, args.repeat = 100, 400, 100, 1

    from transport.diffusion import analyse_diffusion, species_msd
    from transport.io.trajectory import positions_from_arrays
    from transport.synthetic import brownian_positions

    rng = np.random.default_rng(1)
    box = 40.0
    x = brownian_positions(args.frames, args.atoms, 1.0, 0.05, box, rng,
                           wrap=False).astype(np.float32)
    series = positions_from_arrays(x, box, 1.0, unwrap="none")
    idx = np.arange(args.atoms)
    t_fft = _best(lambda: species_msd(series, idx), args.repeat)
    t_all = _best(lambda: analyse_diffusion(series), args.repeat)
    print(f"{args.atoms} atoms x {args.frames} frames")
    print(f"transport FFT MSD (all lags)           {t_fft:9.3f} s")
    print(f"transport whole estimate (MSD+GLS)     {t_all:9.3f} s")

    short = args.direct_frames
    half = max(short // 2, 10)
    t_half, _ = _direct(x[:half])
    t_short, ref = _direct(x[:short])
    expo = np.log(t_short / t_half) / np.log(short / half)
    scaled = t_short * (args.frames / short) ** 2
    sub = positions_from_arrays(x[:short], box, 1.0, unwrap="none")
    ours = species_msd(sub, idx, remove_drift=False)
    rel = np.max(np.abs(ours[1:] - ref[1:]) / ref[1:])
    print(f"MDAnalysis EinsteinMSD(fft=False)      {t_short:9.3f} s on {short} frames "
          f"({t_half:.3f} s on {half}: time ~ T^{expo:.2f})")
    print(f"  scaled to {args.frames} frames (x (T/T0)^2)   {scaled:9.1f} s")
    print(f"ratio direct / FFT MSD                 {scaled / t_fft:9.0f} x")
    print(f"ratio direct / whole estimate          {scaled / t_all:9.0f} x")
    print(f"max relative difference of the MSD curves on {short} frames: {rel:.2e}")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
