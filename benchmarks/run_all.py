"""Run every benchmark in this folder in turn (what `make bench` does) and keep the tables.

Each benchmark prints its own table of ratios measured side by side in one run. The output
of the whole run is also written to ``benchmarks/results/bench-YYYY-MM-DD.md`` (Markdown
tables as they are, everything else in a fenced block under each script), headed by the
machine's description and the date, so that numbers are committed when they change.

Options: ``--quick`` for small sizes (a smoke test of the scripts, not a measurement; no
file is written); ``--only NAME[,NAME]`` to run some scripts (e.g. ``bench_viscosity``);
``--scratch DIR`` for the generated inputs (default ``/tmp/transport-bench``; removed
afterwards by the scripts that create big files).
"""

from __future__ import annotations

import argparse
import datetime as dt
import os
import platform
import subprocess
import sys
from pathlib import Path

HERE = Path(__file__).resolve().parent

QUICK = {
    "bench_read_log.py": ["--rows", "2e5", "--repeat", "1"],
    "bench_viscosity.py": ["--rows", "2e5", "--repeat", "1"],
}


def full_args(scratch: Path) -> dict[str, list[str]]:
    """The arguments of the measured run (sizes of issue 16)."""
    return {
        "bench_read_log.py": ["--scratch", str(scratch), "--keep"],
        "bench_viscosity.py": ["--scratch", str(scratch), "--repeat", "3"],
        "bench_diffusion.py": ["--atoms", "2000", "--frames", "1000", "--large",
                               "--repeat", "3"],
    }


def machine() -> list[str]:
    """Lines describing the machine and the software (for the results file)."""
    cpu = platform.processor() or "?"
    try:
        for line in Path("/proc/cpuinfo").read_text().splitlines():
            if line.startswith("model name"):
                cpu = line.split(":", 1)[1].strip()
                break
    except OSError:
        pass
    mem = "?"
    try:
        for line in Path("/proc/meminfo").read_text().splitlines():
            if line.startswith("MemTotal"):
                mem = f"{int(line.split()[1]) / 1024**2:.1f} GiB"
                break
    except OSError:
        pass
    versions = []
    for mod in ("numpy", "scipy", "pandas", "MDAnalysis", "transport"):
        try:
            m = __import__(mod)
            versions.append(f"{mod} {m.__version__}")
        except ImportError:
            versions.append(f"{mod} (not installed)")
    return [
        f"- date: {dt.datetime.now(dt.timezone.utc):%Y-%m-%d %H:%M} UTC",
        f"- machine: {platform.platform()}; CPU {cpu}; {os.cpu_count()} logical cores "
        "(shared with other users: see the load averages); memory " + mem,
        f"- Python {platform.python_version()}; " + "; ".join(versions),
        f"- load average at the start: {' '.join(f'{x:.2f}' for x in os.getloadavg())}",
    ]


def _markdown(name: str, output: str) -> list[str]:
    tables = [ln for ln in output.splitlines() if ln.startswith(("|", "####"))]
    rest = [ln for ln in output.splitlines() if not ln.startswith(("|", "####"))]
    out = [f"### {name}", ""]
    for ln in tables:
        if ln.startswith("####") and out[-1] != "":
            out.append("")
        out.append(ln)
        if ln.startswith("####"):
            out.append("")
    if tables:
        out.append("")
    out += ["```", *[ln for ln in rest if ln.strip()], "```", ""]
    return out


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--quick", action="store_true")
    ap.add_argument("--only", default="", help="comma-separated script names")
    ap.add_argument("--scratch", type=Path, default=Path("/tmp/transport-bench"))
    args = ap.parse_args(argv)
    only = {s if s.endswith(".py") else s + ".py" for s in args.only.split(",") if s}
    full = full_args(args.scratch)
    failed = []
    report = ["# Benchmarks", "", *machine(), ""]
    for script in sorted(HERE.glob("bench_*.py")):
        if only and script.name not in only:
            continue
        if args.quick:
            sargs = QUICK.get(script.name, ["--quick"])
            if script.name in QUICK:
                sargs = [*sargs, "--scratch", str(args.scratch)]
        else:
            sargs = full.get(script.name, [])
        print(f"\n=== {script.name} {' '.join(sargs)}", flush=True)
        proc = subprocess.Popen([sys.executable, str(script), *sargs],
                                stdout=subprocess.PIPE, text=True)
        lines = []
        assert proc.stdout is not None
        for line in proc.stdout:
            print(line, end="", flush=True)
            lines.append(line)
        if proc.wait():
            failed.append(script.name)
        report += _markdown(f"{script.name} {' '.join(sargs)}", "".join(lines))
    report.append(f"load average at the end: "
                  f"{' '.join(f'{x:.2f}' for x in os.getloadavg())}")
    if not args.quick:
        out = HERE / "results" / f"bench-{dt.datetime.now(dt.timezone.utc):%Y-%m-%d}.md"
        out.parent.mkdir(exist_ok=True)
        tmp = out.with_suffix(".md.partial")
        tmp.write_text("\n".join(report) + "\n")
        os.replace(tmp, out)
        print(f"\nwritten: {out}")
    if failed:
        print(f"\nfailed: {', '.join(failed)}")
    return 1 if failed else 0


if __name__ == "__main__":
    sys.exit(main())
