"""Benchmark: `transport diffusion` end to end against MDAnalysis merely reading the frames.

A trajectory of Brownian particles with known D, wrapped into a cubic box (as an engine
writes it), is generated once per size in ``benchmarks/_scratch/`` as a PDB topology with a
DCD and an XTC file (``--atoms`` x ``--frames``; ``--large`` adds 10^4 atoms x 10^3 frames).
Then, side by side, each in a fresh process, alternating, ``--repeat`` times:

* ``mda-read``: MDAnalysis opens the Universe, iterates over every frame and copies the
  positions into a preallocated float32 array (the floor of any analysis through it);
* ``lib``: ``transport.io.trajectory.load_trajectory`` + ``transport.diffusion.
  analyse_diffusion`` (unwrapping, drift removal, FFT MSD, window, weighted fit on time
  blocks), which is what
  the ``diffusion`` command runs;
* ``cli``: the ``transport diffusion TOPOLOGY TRAJECTORY -q`` command itself;
* ``mda-msd``: ``MDAnalysis.analysis.msd.EinsteinMSD(fft=False)`` (direct average over all
  origins for every lag, O(T^2)). Too slow for every frame: it is run on the first
  ``--direct-frames`` and on half as many, ``t(T) = a T + b T^2`` is fitted through the two
  times (reading is linear, the double loop over lags and origins quadratic) and evaluated
  at ``--frames`` (the measured exponent is printed; with a non-positive ``b`` the plain
  ``T^2`` scaling of the longer run is used). The coordinates are wrapped, so its MSD values
  mean nothing here; only its time is used.

Times: ``work`` is measured inside the child after its imports (the criterion of the issue:
the analysis within 1.5x of the MDAnalysis read, and at least 10x faster than the direct
MSD); ``process`` is the whole child from start to exit, imports included (for the command
line that includes importing the ``transport`` package, as its console script does; the
command runs through ``transport.cli.main``). Peak memory is the child's high-water resident
set (``VmHWM``), with the growth after the imports beside it (``+work``). Best of the
repeats and the median of ``work``; the ratio to ``mda-read`` is given for the best times
and as the median of the per-round ratios (work for ``lib``; process for ``cli``, whose
work includes importing MDAnalysis). The machine is shared: the load average is printed
before and after.

Usage::

    python benchmarks/bench_diffusion.py                 # 1,000 atoms x 2,000 frames
    python benchmarks/bench_diffusion.py --large         # also 10^4 atoms x 10^3 frames
    python benchmarks/bench_diffusion.py --quick         # smoke test of the script
"""

from __future__ import annotations

import argparse
import json
import os
import shutil
import statistics
import subprocess
import sys
import time
import warnings
from pathlib import Path

import numpy as np

HERE = Path(__file__).resolve().parent
SCRATCH = HERE / "_scratch"

#: Self-diffusion of the generated particles (Angstrom^2/ps = 1e-9 m^2/s x 10), time
#: between frames (ps) and number density (atoms per Angstrom^3, a liquid's).
D_A2PS, DT_PS, DENSITY = 0.1, 2.0, 1000 / 40.0**3

_PEAK = r"""
import resource


def _peak_kib():
    # VmHWM counts this process image only (ru_maxrss after fork + exec also carries the
    # parent's peak on Linux)
    try:
        with open("/proc/self/status") as fh:
            for line in fh:
                if line.startswith("VmHWM:"):
                    return int(line.split()[1])
    except OSError:
        pass
    return resource.getrusage(resource.RUSAGE_SELF).ru_maxrss
"""

_CHILD = _PEAK + r"""
import json, sys, time, warnings
t_start = time.perf_counter()
warnings.simplefilter("ignore")
import numpy as np
import MDAnalysis as mda
kind, top, traj = sys.argv[1], sys.argv[2], sys.argv[3]
if kind == "lib":
    from transport.diffusion import analyse_diffusion
    from transport.io.trajectory import load_trajectory
if kind == "mda-msd":
    from MDAnalysis.analysis.msd import EinsteinMSD
t_imported = time.perf_counter()
peak_imported = _peak_kib()
out = {}
t = time.perf_counter()
if kind == "mda-read":
    u = mda.Universe(top, traj)
    pos = np.empty((len(u.trajectory), u.atoms.n_atoms, 3), dtype=np.float32)
    for i, ts in enumerate(u.trajectory):
        pos[i] = ts.positions
elif kind == "lib":
    series = load_trajectory(top, traj)
    t_read = time.perf_counter() - t
    res = analyse_diffusion(series)
    e = res.msd[0]
    out.update(read=t_read, value=e.value, stderr=e.stderr, interval=list(e.interval),
               unwrap=series[0].unwrap)
elif kind == "mda-msd":
    u = mda.Universe(top, traj)
    EinsteinMSD(u, select="all", msd_type="xyz", fft=False).run(stop=int(sys.argv[4]))
work = time.perf_counter() - t
out.update(work=work, imports=t_imported - t_start, peak_imported_kib=peak_imported,
           peak_kib=_peak_kib())
print(json.dumps(out))
"""

#: The command itself: the console script's import of the CLI, then the click command.
_CLI_CHILD = _PEAK + r"""
import json, sys, time
t_start = time.perf_counter()
from transport.cli import main
t_imported = time.perf_counter()
peak_imported = _peak_kib()
main(sys.argv[1:], standalone_mode=False)
work = time.perf_counter() - t_imported
print(json.dumps({"work": work, "imports": t_imported - t_start,
                  "peak_imported_kib": peak_imported, "peak_kib": _peak_kib()}),
      file=sys.stderr)
"""


def generate(n_atoms: int, n_frames: int, seed: int = 1) -> tuple[Path, dict[str, Path]]:
    """Topology and DCD/XTC files of wrapped Brownian motion (made once, then reused)."""
    import MDAnalysis as mda
    from MDAnalysis.coordinates.memory import MemoryReader

    from transport.synthetic import brownian_positions

    folder = SCRATCH / f"diffusion_{n_atoms}x{n_frames}"
    top = folder / "top.pdb"
    trajs = {fmt: folder / f"traj.{fmt}" for fmt in ("dcd", "xtc")}
    done = folder / "complete"
    if done.exists():
        return top, trajs
    shutil.rmtree(folder, ignore_errors=True)
    folder.mkdir(parents=True)
    box = (n_atoms / DENSITY) ** (1.0 / 3.0)
    rng = np.random.default_rng(seed)
    x = brownian_positions(n_frames, n_atoms, DT_PS, D_A2PS, box, rng).astype(np.float32)
    dims = np.array([box, box, box, 90.0, 90.0, 90.0])
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        u = mda.Universe.empty(n_atoms, n_residues=n_atoms, atom_resindex=np.arange(n_atoms),
                               trajectory=True)
        u.add_TopologyAttr("names", ["C"] * n_atoms)
        u.add_TopologyAttr("types", ["C"] * n_atoms)
        u.add_TopologyAttr("resnames", ["LIQ"] * n_atoms)
        u.add_TopologyAttr("resids", np.arange(1, n_atoms + 1))
        u.add_TopologyAttr("masses", np.full(n_atoms, 12.0))
        u.load_new(x, format=MemoryReader, dt=DT_PS, dimensions=np.tile(dims, (n_frames, 1)))
        u.atoms.write(str(top))
        for path in trajs.values():
            # DCD stores one frame interval in its header (given here); XTC a time per frame
            with mda.Writer(str(path), n_atoms, dt=DT_PS) as w:
                for _ in u.trajectory:
                    w.write(u.atoms)
        # MDAnalysis's own first read of the XTC leaves its offsets cache here, so every
        # later run (MDAnalysis's and ours, which copies it) starts from the same state
        len(mda.Universe(str(top), str(trajs["xtc"])).trajectory)
    done.write_text("ok\n")
    return top, trajs


def _run(cmd: list[str]) -> tuple[float, str, str]:
    """Wall time (s), stdout and stderr of a child process."""
    t = time.perf_counter()
    proc = subprocess.run(cmd, capture_output=True, text=True)
    wall = time.perf_counter() - t
    if proc.returncode:
        raise RuntimeError(f"child {cmd[3:5]} failed:\n{proc.stderr[-2000:]}")
    return wall, proc.stdout, proc.stderr


def _child(kind: str, top: Path, traj: Path, *extra: str) -> dict:
    wall, out, _ = _run([sys.executable, "-c", _CHILD, kind, str(top), str(traj), *extra])
    res = json.loads(out.strip().splitlines()[-1])
    res.update(process=wall)
    return res


def _cli(top: Path, traj: Path) -> dict:
    wall, out, err = _run([sys.executable, "-c", _CLI_CHILD, "-q", "diffusion", str(top),
                           str(traj)])
    res = json.loads(err.strip().splitlines()[-1])
    res.update(process=wall, output=out)
    return res


def _direct_msd(top: Path, traj: Path, n_frames: int, short: int) -> tuple[float, float, float]:
    """(extrapolated seconds at n_frames, time at `short`, measured exponent)."""
    half = max(short // 2, 4)
    t_half = _child("mda-msd", top, traj, str(half))["work"]
    t_short = _child("mda-msd", top, traj, str(short))["work"]
    expo = float(np.log(t_short / t_half) / np.log(short / half))
    # t = a T + b T^2 through (half, t_half) and (short, t_short)
    b = (t_short / short - t_half / half) / (short - half)
    a = t_half / half - b * half
    if b > 0:
        est = a * n_frames + b * n_frames**2
    else:
        est = t_short * (n_frames / short) ** 2
    return est, t_short, expo


def bench_size(n_atoms: int, n_frames: int, repeat: int, direct_frames: int) -> list[str]:
    top, trajs = generate(n_atoms, n_frames)
    truth = D_A2PS * 10 * (1 - 1 / n_atoms)  # 1e-9 m^2/s; drift removal takes 1/N
    lines = [f"\n{n_atoms} atoms x {n_frames} frames (wrapped Brownian motion, D = "
             f"{D_A2PS * 10:g}e-9 m^2/s; with the centre-of-mass drift removed the truth is "
             f"{truth:.4f})"]
    head = (f"{'format':6} {'run':10} {'work s':>8} {'median':>8} {'process s':>10} "
            f"{'peak MiB':>9} {'+work MiB':>10}  ratio")
    lines.append(head)
    for fmt, traj in trajs.items():
        runs: dict[str, list[dict]] = {"mda-read": [], "lib": [], "cli": []}
        for _ in range(repeat):
            runs["mda-read"].append(_child("mda-read", top, traj))
            runs["lib"].append(_child("lib", top, traj))
            runs["cli"].append(_cli(top, traj))
        best = {k: min(v, key=lambda r: r["work"]) for k, v in runs.items()}
        base_work = best["mda-read"]["work"]
        base_proc = min(r["process"] for r in runs["mda-read"])
        for kind in ("mda-read", "lib", "cli"):
            rs = runs[kind]
            proc = min(r["process"] for r in rs)
            work = best[kind]["work"]
            med = statistics.median(r["work"] for r in rs)
            peak = max(r["peak_kib"] for r in rs) / 1024
            extra = max(r["peak_kib"] - r["peak_imported_kib"] for r in rs) / 1024
            # the rounds ran side by side: the median of the per-round ratios is steadier
            # than the ratio of the best times on a shared machine
            key = "work" if kind == "lib" else "process"
            paired = statistics.median(
                r[key] / b[key] for r, b in zip(rs, runs["mda-read"], strict=True))
            ratio = ("baseline" if kind == "mda-read" else
                     f"work {work / base_work:.2f}x, process {proc / base_proc:.2f}x; "
                     f"median per round ({key}) {paired:.2f}x")
            lines.append(f"{fmt:6} {kind:10} {work:8.3f} {med:8.3f} {proc:10.3f} "
                         f"{peak:9.0f} {extra:10.0f}  {ratio}")
        e = best["lib"]
        lines.append(f"{'':6} lib: read {e['read']:.3f} s of {e['work']:.3f} s; D = "
                     f"{e['value']:.4f} +- {e['stderr']:.4f} [{e['interval'][0]:.4f}, "
                     f"{e['interval'][1]:.4f}] (truth {truth:.4f}); unwrapping: {e['unwrap']}")
        if fmt == "dcd":
            est, t_short, expo = _direct_msd(top, traj, n_frames, direct_frames)
            lines.append(f"{fmt:6} {'mda-msd':10} {est:8.1f} {'':8} {'':10} {'':9} {'':10}  "
                         f"extrapolated from {t_short:.2f} s on {direct_frames} frames "
                         f"(time ~ T^{expo:.2f}); {est / e['work']:.0f}x the lib's work")
    return lines


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--atoms", type=int, default=1000)
    ap.add_argument("--frames", type=int, default=2000)
    ap.add_argument("--repeat", type=int, default=5)
    ap.add_argument("--direct-frames", type=int, default=250,
                    help="frames for MDAnalysis's direct O(T^2) MSD (extrapolated)")
    ap.add_argument("--large", action="store_true",
                    help="also 10^4 atoms x 10^3 frames")
    ap.add_argument("--quick", action="store_true", help="small sizes, one repeat")
    args = ap.parse_args(argv)
    sizes = [(args.atoms, args.frames, args.direct_frames)]
    if args.quick:
        sizes, args.repeat = [(200, 400, 60)], 1
    elif args.large:
        sizes.append((10_000, 1_000, 100))
    print(f"load average before: {' '.join(f'{x:.2f}' for x in os.getloadavg())} "
          f"({os.cpu_count()} CPUs)")
    for n_atoms, n_frames, direct in sizes:
        for line in bench_size(n_atoms, n_frames, args.repeat, direct):
            print(line, flush=True)
    print(f"load average after: {' '.join(f'{x:.2f}' for x in os.getloadavg())}")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
