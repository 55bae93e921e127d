"""``transport diffusion --viscosity``: corrected entries beside the periodic-box ones.

Sources: Yeh & Hummer, J. Phys. Chem. B 108, 15873 (2004) (xi = 2.837297); the LJ data's
published references (tests/data/lj_diffusion/README.md: Meier, Laesecke & Kabelac,
J. Chem. Phys. 121, 9526 and 3671 (2004): D* ~ 0.0325 for N = 1372 in the periodic box,
eta* = 3.258, correction 0.00284 at T* = 0.722).
"""

from __future__ import annotations

import json
import math
from pathlib import Path

import numpy as np
import pytest
from click.testing import CliRunner

from transport.cli import main

DATA = Path(__file__).parent / "data"
LJ_TOP = DATA / "lj_diffusion" / "lj.data"
LJ_DCD = DATA / "lj_diffusion" / "lj_diff.dcd"
LJ_LOGS = sorted((DATA / "lj_viscosity").glob("lj_visc_rep*.log.gz"))
XI = 2.837297


def _run(*args: str):
    return CliRunner().invoke(main, ["-q", *map(str, args)])


def _lj_args(out: Path, *extra: str) -> list:
    return ["diffusion", LJ_TOP, LJ_DCD, "--units", "lj", "--timestep", "0.005",
            "--temperature", "0.722", "--vacf", "no", "--json", out, *extra]


@pytest.fixture(scope="module")
def lj_given(tmp_path_factory):
    out = tmp_path_factory.mktemp("lj") / "d.json"
    r = _run(*_lj_args(out, "--viscosity", "3.258+-0.05"))
    assert r.exit_code == 0, r.output
    return json.loads(out.read_text()), r.output


def test_given_viscosity_reproduces_the_published_correction(lj_given):
    doc, text = lj_given
    kinds = [(x["method"], x["corrected"]) for x in doc["results"]]
    assert kinds == [("msd_gls", None), ("msd_gls", "yeh_hummer")]
    pbc, cor = doc["results"]
    d = cor["diagnostics"]
    box = d["box_lengths"][0]
    assert box == pytest.approx(11.757173, rel=1e-5)  # the data's README
    # the README's value: 0.00284 for T* = 0.722, eta* = 3.258, L = 11.757173 (3 digits)
    assert d["correction"] == pytest.approx(0.00284, abs=5e-6)
    # and the formula evaluated here, to rounding
    corr = XI * 0.722 / (6 * math.pi * 3.258 * box)
    assert d["correction"] == pytest.approx(corr, rel=1e-9)
    assert cor["value"] == pytest.approx(pbc["value"] + corr, rel=1e-12)
    assert d["correction_stderr"] == pytest.approx(corr * 0.05 / 3.258, rel=1e-9)
    assert cor["stderr"] == pytest.approx(math.hypot(pbc["stderr"], corr * 0.05 / 3.258),
                                          rel=1e-9)
    assert doc["settings"]["viscosity"] == "3.258+-0.05"
    assert "yeh_hummer" in text


@pytest.mark.slow
def test_viscosity_auto_from_the_stress_of_the_same_model(tmp_path):
    # the LJ viscosity logs are the same model and state point (T* = 0.722, rho* = 0.8442)
    # in a smaller box (viscosity hardly depends on box size): Green-Kubo with the defaults
    out = tmp_path / "d.json"
    stress = [a for p in LJ_LOGS[:2] for a in ("--stress", p)]
    r = _run(*_lj_args(out, "--viscosity", "auto", *stress))
    assert r.exit_code == 0, r.output
    doc = json.loads(out.read_text())
    gk = next(x for x in doc["results"] if x["quantity"] == "shear_viscosity")
    assert gk["method"] == "green_kubo"
    pbc, cor = (x for x in doc["results"] if x["quantity"] == "self_diffusion")
    d = cor["diagnostics"]
    assert d["viscosity_used"] == gk["value"] and d["viscosity_stderr_used"] == gk["stderr"]
    corr = XI * 0.722 / (6 * math.pi * gk["value"] * d["box_lengths"][0])
    assert cor["value"] == pytest.approx(pbc["value"] + corr, rel=1e-9)
    # published: D_pbc 0.0325 + 0.00284 = 0.0353 for this N; the cutoff (4.0 vs 5.5 sigma)
    # moves D by a percent or two and the run's statistics by 1-2%: 6% tolerance
    assert cor["value"] == pytest.approx(0.0325 + 0.00284, rel=0.06)
    assert {i["path"] for i in doc["inputs"]} >= {str(p) for p in LJ_LOGS[:2]}


@pytest.mark.parametrize("args, message", [
    (["--viscosity", "auto"], "--stress"),
    (["--stress", "x.log"], "--viscosity auto"),
    (["--viscosity", "fast"], "VALUE"),
    (["--viscosity", "-1"], "positive"),
    (["--viscosity", "3+-nan"], "VALUE"),
])
def test_bad_viscosity_options_are_one_line_errors(tmp_path, args, message):
    out = tmp_path / "d.json"
    r = _run(*_lj_args(out, *args))
    assert r.exit_code == 2
    assert message in r.output and len(r.output.strip().splitlines()) == 1
    assert not out.exists()


def test_unknown_temperature_is_refused(tmp_path):
    # no --temperature and no velocities in the DCD: the correction cannot be made
    out = tmp_path / "d.json"
    r = _run("diffusion", LJ_TOP, LJ_DCD, "--units", "lj", "--timestep", "0.005",
             "--vacf", "no", "--viscosity", "3.258", "--json", out)
    assert r.exit_code == 2, r.output
    assert "--temperature" in r.output and len(r.output.strip().splitlines()) == 1
    assert not out.exists()


# ---- transport report on the command line ------------------------------------------------------

def _docs(tmp_path: Path) -> tuple[Path, Path]:
    from transport.estimate import Estimate
    from transport.report.jsonout import build_document, write_json

    d = Estimate("self_diffusion", "msd_gls", 0.0331, 0.0004, (0.0323, 0.0339), "reduced",
                 group="all", diagnostics={"box_lengths": [11.757173] * 3,
                                           "box_volume": 11.757173**3,
                                           "length_unit": "sigma", "temperature": 0.722})
    v = Estimate("shear_viscosity", "green_kubo", 3.2, 0.1, (3.0, 3.4), "reduced",
                 diagnostics={"temperature": [0.722], "volume_mean": [11.757173**3]})
    dp, vp = tmp_path / "d.json", tmp_path / "v.json"
    write_json(build_document("diffusion", inputs=[], settings={}, results=[d]), dp)
    write_json(build_document("viscosity", inputs=[], settings={}, results=[v]), vp)
    return dp, vp


def test_report_command_writes_the_folder(tmp_path):
    dp, vp = _docs(tmp_path)
    out = tmp_path / "rep"
    r = _run("report", dp, vp, "--out", out, "--title", "LJ check")
    assert r.exit_code == 0, r.output
    assert {p.name for p in out.iterdir()} == {"report.html", "report.md", "report.json",
                                               "figures"}
    merged = json.loads((out / "report.json").read_text())
    cor = [x for x in merged["results"] if x["corrected"] == "yeh_hummer"]
    assert cor and cor[0]["value"] == pytest.approx(
        0.0331 + XI * 0.722 / (6 * math.pi * 3.2 * 11.757173), rel=1e-9)
    assert "report written to" in r.output
    # again: the previous report is replaced
    assert _run("report", dp, vp, "--out", out).exit_code == 0


def test_report_command_refusals(tmp_path):
    dp, vp = _docs(tmp_path)
    r = _run("report", dp, vp, "--out", tmp_path)  # holds the inputs
    assert r.exit_code == 2 and "holds this input" in r.output
    r = _run("report", dp, vp, "--pair", "d.json")
    assert r.exit_code == 2 and "DIFFUSION.json=VISCOSITY.json" in r.output
    assert len(r.output.strip().splitlines()) == 1
    r = _run("report", dp, vp, "--pair", f"{dp}={dp}", "--out", tmp_path / "r2")
    assert r.exit_code == 2 and "no viscosity result" in r.output
    assert not (tmp_path / "r2").exists()
    rep = tmp_path / "r3"
    assert _run("report", dp, vp, "--out", rep).exit_code == 0
    r = _run("report", rep / "report.json", "--out", tmp_path / "r4")
    assert r.exit_code == 2 and "merged JSON" in r.output


def test_json_carries_thinned_curves(lj_given):
    doc, _ = lj_given
    curves = doc["curves"]
    assert len(curves) == len(doc["results"])
    c0 = curves[0]
    assert c0 is not None and len(c0["time"]) == len(c0["msd"]) <= 610
    assert np.all(np.diff(c0["time"]) > 0)
    assert curves[1] is None  # the corrected entry has no curves of its own
