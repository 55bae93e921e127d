"""The cases of issue 11 through the command line, made from the real files of tests/data
and from MDAnalysisTests files: each is a one-line error (exit 2) naming the problem and
the fix, with no traceback, nothing written, the inputs unchanged and reruns identical.

Sources: tests/data/lj_viscosity/lj_visc_rep1.log.gz (LJ, pressure tensor every 0.02 tau),
tests/data/lammps_logs/argon_real_tworuns.log, tests/data/lj_diffusion (lj.data and the
engine's DCD, header "Written by LAMMPS"), MDAnalysisTests' LAMMPS DCD
``ifabp_apo_100mM.dcd`` with its data file.
"""

from __future__ import annotations

import gzip
import hashlib
from pathlib import Path

import pytest
from click.testing import CliRunner

from transport.cli import main
from transport.io._dcd import _dcd_layout

DATA = Path(__file__).parent / "data"
LJ_LOG = DATA / "lj_viscosity" / "lj_visc_rep1.log.gz"
ARGON = DATA / "lammps_logs" / "argon_real_tworuns.log"
LJ_TOP, LJ_DCD = DATA / "lj_diffusion" / "lj.data", DATA / "lj_diffusion" / "lj_diff.dcd"


def _thinned_log(src: Path, dst: Path, k: int) -> Path:
    """The LJ log with only every k-th row of its production run (the header line whose
    columns include Pxy opens it, 'Loop time' closes it)."""
    lines = gzip.open(src, "rt").read().splitlines(keepends=True)
    head = max(i for i, ln in enumerate(lines) if ln.split()[:1] == ["Step"] and "Pxy" in ln)
    end = next(i for i in range(head, len(lines)) if lines[i].startswith("Loop time"))
    dst.write_text("".join(lines[: head + 1] + lines[head + 1: end: k] + lines[end:]))
    return dst


def _spiked_log(dst: Path) -> Path:
    lines = ARGON.read_text().splitlines(keepends=True)
    k = lines[275].split().index("Pxy")  # header of run 2 at line 276
    toks = lines[399].split()
    toks[k] = "1e12"
    lines[399] = "   " + "   ".join(toks) + "\n"
    dst.write_text("".join(lines))
    return dst


def _cut_dcd(dst: Path, frames: int) -> Path:
    lay = _dcd_layout(LJ_DCD)
    dst.write_bytes(LJ_DCD.read_bytes()[: lay.header + frames * lay.frame_bytes])
    return dst


def _ifabp(d: Path):
    md = pytest.importorskip("MDAnalysisTests.datafiles")
    return ["diffusion", md.LAMMPSdata2, md.LAMMPSdcd2], (
        "written by LAMMPS", "fix: pass --units")


CASES = {
    "LAMMPS DCD, time unit unknown": lambda d: (
        ["diffusion", str(LJ_TOP), str(LJ_DCD)], ("written by LAMMPS", "--timestep")),
    "LAMMPS DCD of MDAnalysisTests": _ifabp,
    "stress sampled every 0.5 tau": lambda d: (
        ["viscosity", str(_thinned_log(LJ_LOG, d / "coarse.log", 25)), "--temperature",
         "0.722"], ("sampled too coarsely", "fix: write the pressure tensor at least every")),
    "temperature in other units": lambda d: (
        ["viscosity", str(LJ_LOG), "--temperature", "300"],
        ("--temperature 300", "differs from the mean", "fix: pass the run's set point")),
    "temperature 1e30": lambda d: (
        ["viscosity", str(LJ_LOG), "--temperature", "1e30"], ("not a plausible temperature",)),
    "one absurd pressure cell": lambda d: (
        ["viscosity", str(_spiked_log(d / "spike.log")), "--temperature", "96.3"],
        ("spike.log:400:", "damaged value", "fix: repair or remove")),
    "volume 0 with a volume column": lambda d: (
        ["viscosity", str(ARGON), "--temperature", "96.3", "--volume", "0"],
        ("--volume 0.0 is not a positive number",)),
    "one-frame DCD": lambda d: (
        ["diffusion", str(LJ_TOP), str(_cut_dcd(d / "one.dcd", 1)), "--units", "lj"],
        ("has 1 frame(s)",)),
    "two-frame DCD": lambda d: (
        ["diffusion", str(LJ_TOP), str(_cut_dcd(d / "two.dcd", 2)), "--units", "lj"],
        ("has 2 frame(s)", "at least 3 frames")),
    "fit from two points": lambda d: (
        ["diffusion", str(LJ_TOP), str(_cut_dcd(d / "ten.dcd", 10)), "--units", "lj"],
        ("only 2 fit point(s)", "extend the run by")),
}


def _digest(folder: Path) -> dict[str, str]:
    return {p.name: hashlib.sha256(p.read_bytes()).hexdigest()
            for p in sorted(folder.iterdir()) if p.is_file()}


@pytest.mark.parametrize("name", list(CASES))
def test_case_is_one_line_exit_2_nothing_written(name, tmp_path):
    inp, out = tmp_path / "in", tmp_path / "out"
    inp.mkdir()
    args, words = CASES[name](inp)
    before = _digest(inp)
    runs = []
    for _ in range(2):
        res = CliRunner().invoke(main, ["--quiet", *args, "--json", str(out / "r.json"),
                                        "--plot", str(out / "r.png")])
        runs.append(res)
        assert res.exit_code == 2, (name, res.output)
        err = res.stderr.strip()
        assert err.startswith("transport: error: ") and "\n" not in err, (name, err)
        assert "Traceback" not in res.output
        for w in words:
            assert w in err, (name, w, err)
        assert not out.exists()  # nothing written
        assert _digest(inp) == before  # inputs unchanged
    assert runs[0].stderr == runs[1].stderr  # reruns identical
