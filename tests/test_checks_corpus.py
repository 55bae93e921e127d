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
    "one absurd cell, averaged": lambda d: (
        ["average", str(_spiked_log(d / "spike.log")), "--column", "Pxy"],
        ("spike.log:400:", "'Pxy'", "damaged value")),
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


def test_ctrl_c_during_the_computation_exits_130_with_nothing_written(tmp_path,
                                                                       monkeypatch):
    import transport.viscosity as visc

    def interrupted(*a, **k):
        raise KeyboardInterrupt

    monkeypatch.setattr(visc, "analyse_viscosity", interrupted)
    out = tmp_path / "out"
    res = CliRunner().invoke(main, ["--quiet", "viscosity", str(ARGON), "--temperature",
                                    "96.3", "--json", str(out / "r.json")])
    assert res.exit_code == 130, res.output
    assert res.stderr.strip() == "transport: interrupted; nothing was written"
    assert not out.exists()


def test_ctrl_c_while_writing_completes_the_outputs_and_exits_0(tmp_path, monkeypatch):
    # issue 11: SIGINT while writing outputs exited -2 (once losing them, exiting 0)
    import os
    import signal

    from transport.report import jsonout

    real = jsonout.write_json

    def write_then_interrupted(doc, path):
        os.kill(os.getpid(), signal.SIGINT)  # Ctrl-C arrives between the two outputs
        real(doc, path)

    monkeypatch.setattr(jsonout, "write_json", write_then_interrupted)
    before = signal.getsignal(signal.SIGINT)  # ignored when pytest runs in the background
    out = tmp_path / "out"
    res = CliRunner().invoke(main, ["viscosity", str(LJ_LOG), "--temperature", "0.722",
                                    "--json", str(out / "r.json"),
                                    "--plot", str(out / "r.png")])
    assert res.exit_code == 0, res.output
    assert sorted(p.name for p in out.iterdir()) == ["r.json", "r.png"]
    assert "interrupt received while the outputs were written" in res.stderr
    assert signal.getsignal(signal.SIGINT) == before  # restored


def test_an_unwritable_output_folder_is_refused_before_reading(tmp_path):
    if not Path("/proc/self").exists():
        pytest.skip("needs a folder nobody may write (Linux /proc)")
    res = CliRunner().invoke(main, ["viscosity", str(ARGON), "--temperature", "96.3",
                                    "--json", "/proc/r.json"])
    assert res.exit_code == 2
    assert "cannot write in the folder '/proc'" in res.stderr
    assert ".r.json." not in res.stderr  # no temporary file named


def test_sigint_to_a_real_process_leaves_nothing_or_everything(tmp_path):
    # the rule of issue 11: Ctrl-C either leaves no output and exits 130, or the command
    # completes and exits 0; here it arrives while the 12 MB n-hexane log is being read
    import shutil
    import signal
    import subprocess
    import sys
    import time

    exe = shutil.which("transport", path=str(Path(sys.executable).parent))
    if exe is None:
        pytest.skip("the transport command is not installed beside this Python")
    out = tmp_path / "out"
    proc = subprocess.Popen(
        [exe, "viscosity", str(DATA / "alkane" / "hexane.log.xz"), "--temperature", "298",
         "--json", str(out / "r.json"), "--plot", str(out / "r.png")],
        stdout=subprocess.PIPE, stderr=subprocess.PIPE,
        # a background pytest ignores SIGINT and its children would inherit that
        preexec_fn=lambda: signal.signal(signal.SIGINT, signal.SIG_DFL))
    time.sleep(1.5)
    proc.send_signal(signal.SIGINT)
    _, err = proc.communicate(timeout=300)
    if proc.returncode == 130:
        assert err.decode().strip() == "transport: interrupted; nothing was written"
        assert not out.exists() or not any(out.iterdir())
    else:
        assert proc.returncode == 0, err.decode()
        assert sorted(p.name for p in out.iterdir()) == ["r.json", "r.png"]


def test_diffusion_json_keeps_notes_out_of_the_warnings(tmp_path):
    # the engine's DCD has no velocities: that the VACF cross-check was not made is a
    # note; with --temperature given nothing else is a caution for this run
    out = tmp_path / "d.json"
    res = CliRunner().invoke(main, ["--quiet", "diffusion", str(LJ_TOP), str(LJ_DCD),
                                    "--units", "lj", "--temperature", "0.722",
                                    "--json", str(out)])
    assert res.exit_code == 0, res.output
    import json

    doc = json.loads(out.read_text())
    assert any("VACF cross-check not made" in n for n in doc["notes"])
    assert not any("VACF cross-check not made" in w for w in doc["warnings"])
