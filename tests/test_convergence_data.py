"""Run-length verdicts on real engine output (tests/data) and through the command line.

Real data: the Lennard-Jones logs and trajectory in tests/data (LAMMPS as the engine; see the
README beside each). The projection made from the first quarter of every replica is held
against the error bar the whole files give. Command line: ``--target``, ``--strict`` (exit
code 3), the JSON ``verdicts`` list and ``transport check``, on synthetic stress written to
``tmp_path`` (exact OU model, :mod:`transport.synthetic`) and on the real files.
"""

from __future__ import annotations

import json
from dataclasses import replace
from pathlib import Path

import numpy as np
import pytest
from click.testing import CliRunner

from transport.cli import main
from transport.diffusion import analyse_diffusion
from transport.io import load_stress
from transport.io.trajectory import load_trajectory
from transport.run_length import _positions_part, diffusion_verdicts, viscosity_verdicts
from transport.synthetic import OUStressModel
from transport.viscosity import analyse_viscosity

DATA = Path(__file__).parent / "data"
LJ_VISC = sorted((DATA / "lj_viscosity").glob("lj_visc_rep*.log.gz"))
LJ_DIFF = DATA / "lj_diffusion"
ARGON = DATA / "lammps_logs" / "argon_metal_computepressure.log"

VERDICT_FIELDS = {"quantity", "group", "long_enough", "relative_stderr",
                  "target_relative_stderr", "additional_time", "time_unit",
                  "additional_replicas", "wall_clock_hours", "reasons", "checks"}


# ---- real data: projection from the first quarter ----------------------------------------

def test_green_kubo_projection_from_the_first_quarter_of_real_logs():
    # Four LJ replicas of 1000 tau (NVE, T* = 0.722). The first 250 tau of each are analysed
    # as a run would be, and the verdict's projection to 4x the time is compared with the
    # error bar of the whole files. Factor allowed: 1.5. Reason: each Green–Kubo error bar
    # rests on 20 pieces (its jackknife scatters by ~25-30%, measured on OU data as the
    # scatter of disjoint parts), the quarter's and the whole's are partly independent, so
    # their ratio scatters by ~30%: 1.5 is ~1.3 sd. Measured: ratio 0.95 (exponent 0.46
    # measured, the cutoff growing with the run); 1/sqrt(T) alone gives 0.89.
    full = [load_stress(f, temperature=0.722) for f in LJ_VISC]
    quarter = [replace(s, pressure=np.ascontiguousarray(s.pressure[:, : s.n // 4]))
               for s in full]
    g = analyse_viscosity(quarter).green_kubo
    v = viscosity_verdicts(quarter, [g], target=0.02)[0]
    assert not v.long_enough  # 4.8% from the quarters against a 2% target
    assert v.scaling.window_growth is not None and v.scaling.window_growth > 0.5
    gf = analyse_viscosity(full).green_kubo
    predicted = v.relative_stderr * 4.0 ** -v.scaling.exponent
    ratio = predicted / (gf.stderr / gf.value)
    assert 1 / 1.5 <= ratio <= 1.5, ratio
    # every named check was made from the diagnostics (none missing)
    assert {c.name for c in v.checks} >= {"run_vs_decorrelation", "independent_pieces",
                                          "levels_off", "transient", "precision"}
    assert all(c.passed is not None for c in v.checks)


def test_diffusion_projection_from_the_first_quarter_of_a_real_trajectory():
    # LJ liquid, 1372 atoms, 100 tau. The first quarter (25 tau, 100 frames) holds 4 time
    # blocks, and its fit window (half a block) ends before the atoms pass their spacing
    # (rms 0.77 against (V/N)^(1/3) = 1.06 sigma): the verdict must say it is not long
    # enough whatever its precision. Its projection to the whole run is held within a factor
    # 2.5: the quarter's error bar rests on 4 blocks (uncertain by ~41%), the whole's on 8
    # (~27%), and the window grows with the run (the error falls slower than 1/sqrt(T)).
    # Measured: 0.46.
    s = load_trajectory(LJ_DIFF / "lj.data", [LJ_DIFF / "lj_diff.dcd"], units="lj",
                        timestep=0.005)
    q = [_positions_part(x, 0, x.n_frames // 4 + 1) for x in s]
    e = analyse_diffusion(q, vacf="no").msd
    v = diffusion_verdicts(q, e, target=0.01)[0]
    rms = {c.name: c for c in v.checks}["rms_displacement"]
    assert rms.passed is False and rms.blocking and not v.long_enough
    ef = analyse_diffusion(s, vacf="no").msd[0]
    ratio = v.relative_stderr * 4.0 ** -v.scaling.exponent / (ef.stderr / ef.value)
    assert 1 / 2.5 <= ratio <= 2.5, ratio


# ---- command line -------------------------------------------------------------------------

def _ou_npz(path, *, n, seed, tau=(0.01, 0.05)):
    # reduced units: eta = 3 exactly (V = 1000, T = 1); rows every 0.01 tau
    model = OUStressModel.for_viscosity(3.0, 1000.0, 1.0, times=list(tau), fractions=[0.3, 0.7])
    p = model.sample(n, 0.01, np.random.default_rng(seed))
    names = ("pxx", "pyy", "pzz", "pxy", "pxz", "pyz")
    np.savez(path, time=np.arange(n) * 0.01, volume=np.full(n, 1000.0),
             units=np.array("lj"), **{c: p[k] for k, c in enumerate(names)})
    return path


def _run(args):
    return CliRunner().invoke(main, ["--quiet", *map(str, args)], catch_exceptions=False)


def test_target_adds_verdicts_to_table_and_json(tmp_path):
    f = _ou_npz(tmp_path / "long.npz", n=100_000, seed=120)
    out = tmp_path / "res.json"
    r = _run(["viscosity", f, "--temperature", "1", "--skip", "0", "--target", "5%",
              "--json", out])
    assert r.exit_code == 0, r.output
    assert "run-length verdict" in r.output and "long enough" in r.output
    doc = json.loads(out.read_text())
    assert doc["settings"]["target"] == 0.05
    (v,) = doc["verdicts"]
    assert VERDICT_FIELDS <= set(v)
    assert v["long_enough"] is True and v["additional_time"] == 0
    assert v["relative_stderr"] == pytest.approx(doc["results"][0]["stderr"]
                                                 / doc["results"][0]["value"], rel=1e-9)


def test_strict_exit_code_and_target_forms(tmp_path):
    f = _ou_npz(tmp_path / "short.npz", n=6_000, seed=121)
    base = ["viscosity", f, "--temperature", "1", "--skip", "0"]
    r = _run([*base, "--target", "0.01"])  # 1%: far too short; a verdict is not an error
    assert r.exit_code == 0 and "too short" in r.output
    r = _run([*base, "--target", "1%", "--strict"])
    assert r.exit_code == 3 and "too short" in r.output
    r = _run([*base, "--target", "90%", "--strict"])  # a loose target is met
    assert r.exit_code == 0 and "long enough" in r.output
    r = _run([*base, "--strict"])
    assert r.exit_code == 2 and "--strict needs --target" in r.output
    r = _run([*base, "--target", "150%"])
    assert r.exit_code == 2 and "between 0 and 100%" in r.output


def test_check_prints_only_verdicts_with_the_default_target(tmp_path):
    f = _ou_npz(tmp_path / "s.npz", n=6_000, seed=122)
    out = tmp_path / "c.json"
    r = _run(["check", f, "--temperature", "1", "--json", out])
    assert r.exit_code == 0, r.output
    assert r.output.startswith("run-length verdict")
    assert "95% interval" not in r.output  # no results table
    doc = json.loads(out.read_text())
    assert doc["command"] == "check"
    assert doc["verdicts"][0]["target_relative_stderr"] == 0.05


def test_check_too_short_log_gives_hours_from_the_loop_time():
    # The argon log holds 1.2 ps of tensor data: too short for any error bar. The verdict
    # states the least additional time and, from the log's "Loop time of 0.361017 ... for
    # 3000 steps" at 0.004 ps per step, the hours it takes: 0.361017 / 12 ps = 0.030085 s per
    # ps (the engine's own "Performance: ... 8309.860 timesteps/s" line agrees:
    # 1 / (8309.86 x 0.004) = 0.030085).
    r = _run(["check", ARGON, "--strict", "--json", "-"])
    assert r.exit_code == 3
    v = json.loads(r.output)["verdicts"][0]
    assert v["long_enough"] is False and v["additional_time"] > 0
    assert v["wall_clock_hours"] == pytest.approx(
        v["additional_time"] * 0.361017 / 12.0 / 3600.0, rel=1e-9)
    speed = load_stress(ARGON).source.wall_seconds_per_time * 1e-12  # s per ps
    assert speed == pytest.approx(1.0 / (8309.860 * 0.004), rel=1e-6)


def test_check_tells_trajectories_from_stress_by_content():
    r = _run(["check", LJ_DIFF / "lj.data", LJ_DIFF / "lj_diff.dcd", "--units", "lj",
              "--timestep", "0.005", "--json", "-"])
    assert r.exit_code == 0, r.output
    doc = json.loads(r.output)
    (v,) = doc["verdicts"]
    assert v["quantity"] == "self_diffusion" and v["method"] == "msd_wls"
    assert v["long_enough"] is True  # 1.6% against 5%
    names = {c["name"] for c in v["checks"]}
    assert {"diffusive_regime", "window_use", "rms_displacement", "precision"} <= names
