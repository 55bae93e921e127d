"""`transport average`: any column of any table, with correlation-aware error bars."""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import pytest
from click.testing import CliRunner
from conftest import committed
from scipy import stats

from transport.cli import main
from transport.stats import ar1

DATA = Path(__file__).parent / "data"


def _write_csv(path, *, seed, n=3000, dt=0.5, transient=0.0):
    """Invented run: density 0.8 g/cm^3 + AR(1) noise (phi 0.9, sd 0.01) + an optional
    exponential transient; potential energy -100 + AR(1) noise. Time in ps."""
    rng = np.random.default_rng(seed)
    t = np.arange(n) * dt
    dens = 0.8 + 0.01 * ar1(0.9, n, rng=rng) + transient * np.exp(-np.arange(n) / 100)
    pe = -100.0 + ar1(0.5, n, rng=rng)
    np.savetxt(path, np.c_[t, dens, pe], delimiter=",", header="Time,Density,PotEng",
               comments="")
    return path


def _run(args):
    return CliRunner().invoke(main, args, catch_exceptions=False)


def test_single_file_json_and_table(tmp_path):
    f = _write_csv(tmp_path / "run.csv", seed=1, n=30_000, transient=0.2)
    out = tmp_path / "avg.json"
    res = _run(["average", str(f), "--column", "Density", "--column", "PotEng",
                "--units", "metal", "--json", str(out)])
    assert res.exit_code == 0, res.output
    assert "Density" in res.output and "PotEng" in res.output
    doc = json.loads(out.read_text())
    assert doc["command"] == "average"
    assert doc["inputs"][0]["path"] == str(f)
    dens, pe = doc["results"]
    assert dens["quantity"] == "Density" and pe["quantity"] == "PotEng"
    assert dens["method"] == "autocorrelation_time"
    assert dens["window_unit"] == "ps"
    # known truth 0.8: within 4 reported standard errors (the error bar's calibration is
    # tested in test_stats_coverage.py)
    assert abs(dens["value"] - 0.8) <= 4 * dens["stderr"]
    assert dens["interval95"][0] < dens["value"] < dens["interval95"][1]
    # the 0.2 transient (20 sd of the noise, decay 100 rows = 50 ps) was detected and cut
    d = dens["diagnostics"]
    assert 50.0 <= d["t_equil"] <= 1000.0
    # tau_int = (1+phi)/(2(1-phi)) = 9.5 rows of 0.5 ps (AR(1), exact); its relative sd
    # sqrt(2(2M+1)/N) = 0.08 for M ~ 48 and N ~ 29700 (Madras & Sokal): 3 sd, so a
    # correlation time 2x off fails
    assert d["tau_int"] == pytest.approx(0.5 * 9.5, rel=0.25)
    assert dens["n_independent"] == pytest.approx(d["n_effective"])
    assert abs(pe["value"] + 100.0) <= 4 * pe["stderr"]


def test_skip_time_and_zero(tmp_path):
    f = _write_csv(tmp_path / "run.csv", seed=2)
    out = tmp_path / "a.json"
    assert _run(["average", str(f), "--column", "density", "--units", "metal",
                 "--skip", "100", "--json", str(out)]).exit_code == 0
    d = json.loads(out.read_text())["results"][0]["diagnostics"]
    assert d["t_equil"] == 100.0
    assert d["skip_samples"] == 200  # 100 ps at 0.5 ps per row
    assert _run(["average", str(f), "--column", "density", "--units", "metal",
                 "--skip", "0", "--json", str(out)]).exit_code == 0
    assert json.loads(out.read_text())["results"][0]["diagnostics"]["skip_samples"] == 0


def test_without_time_axis_times_are_rows(tmp_path):
    f = _write_csv(tmp_path / "run.csv", seed=3)
    res = _run(["average", str(f), "--column", "PotEng", "--json", "-"])
    assert res.exit_code == 0
    rec = json.loads(res.output)["results"][0]
    assert rec["window_unit"] == "samples"
    assert rec["window"] == [rec["diagnostics"]["skip_samples"], 2999]


def test_replicas_are_combined_and_said_so(tmp_path):
    files = [str(_write_csv(tmp_path / f"r{k}.csv", seed=10 + k)) for k in range(4)]
    out = tmp_path / "r.json"
    res = _run(["average", *files, "--column", "Density", "--units", "metal",
                "--skip", "0", "--json", str(out)])
    assert res.exit_code == 0, res.output
    assert "replicas (4 files)" in res.output
    results = json.loads(out.read_text())["results"]
    assert len(results) == 5
    per_file = np.array([r["value"] for r in results[:4]])
    comb = results[4]
    assert comb["method"] == "replicas_student_t"
    assert comb["n_independent"] == 4
    # Reference: scipy.stats.t.interval with n - 1 = 3 degrees of freedom
    lo, hi = stats.t.interval(0.95, 3, loc=per_file.mean(), scale=stats.sem(per_file))
    assert comb["value"] == pytest.approx(per_file.mean(), rel=1e-12)
    assert comb["interval95"] == pytest.approx([lo, hi], rel=1e-12)
    res = _run(["average", *files, "--column", "Density", "--no-replicas", "--units",
                "metal"])
    assert "replicas (" not in res.output


def test_unknown_column_lists_the_available_ones_and_writes_nothing(tmp_path):
    good = _write_csv(tmp_path / "good.csv", seed=4)
    bad = tmp_path / "bad.csv"
    np.savetxt(bad, np.c_[np.arange(50.0), np.ones(50)], delimiter=",", header="Time,Temp",
               comments="")
    out, plot = tmp_path / "o.json", tmp_path / "o.png"
    res = CliRunner().invoke(main, ["average", str(good), str(bad), "--column", "Density",
                                    "--json", str(out), "--plot", str(plot)])
    assert res.exit_code == 2
    line = res.stderr.strip()
    assert "\n" not in line
    assert str(bad) in line and "no column 'Density'" in line and "Time, Temp" in line
    assert "Traceback" not in res.output
    assert not out.exists() and not plot.exists()
    assert sorted(p.name for p in tmp_path.iterdir()) == ["bad.csv", "good.csv"]


def test_plot_is_written_atomically(tmp_path):
    f = _write_csv(tmp_path / "run.csv", seed=5, n=1000)
    plot = tmp_path / "figs" / "avg.png"
    res = _run(["average", str(f), "--column", "Density", "--column", "PotEng", "--units",
                "metal", "--plot", str(plot)])
    assert res.exit_code == 0
    assert plot.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
    assert [p.name for p in plot.parent.iterdir()] == ["avg.png"]  # no temporary left


def test_bad_plot_suffix_is_a_usage_error(tmp_path):
    f = _write_csv(tmp_path / "run.csv", seed=6, n=100)
    res = CliRunner().invoke(main, ["average", str(f), "--column", "Density", "--plot",
                                    str(tmp_path / "x.jpg")])
    assert res.exit_code == 2
    assert "--plot" in res.stderr


def test_too_few_rows_after_skip(tmp_path):
    f = _write_csv(tmp_path / "run.csv", seed=7, n=100)
    res = CliRunner().invoke(main, ["average", str(f), "--column", "Density", "--units",
                                    "metal", "--skip", "45"])
    assert res.exit_code == 2
    assert "only 10 samples remain" in res.stderr
    assert "fix:" in res.stderr


def test_real_engine_log(tmp_path):
    # A real, gzip-compressed thermo log of the MD engine (tests/data/lj_viscosity, see its
    # README): reduced units, time in tau, the production block chosen automatically.
    log = committed(DATA / "lj_viscosity" / "lj_visc_rep1.log.gz")
    out = tmp_path / "t.json"
    res = _run(["average", str(log), "--column", "Temp", "--column", "Press", "--json",
                str(out)])
    assert res.exit_code == 0, res.output
    temp, press = json.loads(out.read_text())["results"]
    assert temp["unit"] == "reduced (lj)" and press["unit"] == "eps/sigma^3"
    assert temp["window_unit"] == "tau"
    # issue 11: every printed value has a unit; TotEng of an lj run is reduced too
    res = _run(["average", str(log), "--column", "TotEng"])
    assert res.exit_code == 0 and "reduced (lj)" in res.stdout
    # NVE run started at the canonical mean energy of T* = 0.722 (README): the mean
    # temperature of this finite system lies within 1% of it (common practice: the NVE
    # temperature of 864 atoms fluctuates by ~sqrt(2/(3N)) ~ 3% per sample, and a single
    # velocity rescale leaves an offset of that order divided by sqrt(n_eff) of the
    # equilibration average)
    assert temp["value"] == pytest.approx(0.722, rel=0.01)
    # independent cross-check inside the result: blocking agrees with the tau-based error
    # within 3 combined sd: the blocking error's own sd and the tau-based error's relative
    # sd 0.5 sqrt(2(2M+1)/N) (Madras & Sokal)
    d = temp["diagnostics"]
    tau_err = temp["stderr"] * 0.5 * np.sqrt(2 * (2 * d["tau_window_samples"] + 1)
                                             / d["n_used"])
    assert abs(d["blocking_stderr"] - temp["stderr"]) <= 3 * np.hypot(
        d["blocking_stderr_error"], tau_err)


def test_non_finite_value_names_the_line(tmp_path):
    f = tmp_path / "nan.csv"
    rows = ["Time,Density"] + [f"{i},{1 + 0.01 * (i % 5)}" for i in range(40)]
    rows[6] = "5,nan"  # row 6 of the data, line 7 of the file
    f.write_text("\n".join(rows) + "\n")
    res = CliRunner().invoke(main, ["average", str(f), "--column", "Density"])
    assert res.exit_code == 2
    assert f"{f}:7:" in res.stderr and "row 6" in res.stderr
