"""The checks of transport/checks.py on real data (issue 11: no silent wrong numbers).

Data: the LJ viscosity logs and the n-hexane log of tests/data (LAMMPS, see their READMEs).
Thinning a finely sampled real log to every k-th row gives the same run sampled coarsely,
with the finely sampled result as the truth it should reproduce.
"""

from __future__ import annotations

from dataclasses import replace
from pathlib import Path
from types import SimpleNamespace

import numpy as np
import pytest

from transport._pieces import _WEIGHTS_ALL
from transport.checks import (
    STRESS_MIN_FIRST,
    STRESS_WARN_FIRST,
    check_viscosity_result,
    stress_first_lag,
)
from transport.errors import InputError, RunTooShortError
from transport.estimate import Estimate
from transport.io import load_stress
from transport.viscosity import analyse_viscosity

DATA = Path(__file__).parent / "data"
LJ = DATA / "lj_viscosity" / "lj_visc_rep1.log.gz"
HEXANE = DATA / "alkane" / "hexane.log.xz"


@pytest.fixture(scope="module")
def lj():
    # T* = 0.722 is the set point of the NVE replicas (README: mean 0.7248 for rep1)
    return load_stress(LJ, units="lj", temperature=0.722)


def _thinned(s, k):
    return replace(s, pressure=np.ascontiguousarray(s.pressure[:, ::k]), dt=s.dt * k)


def test_first_lag_correlation_of_the_thinned_lj_log(lj):
    # measured once with the same formula (plain numpy): 0.929 at 0.02 tau; thinning
    # by k multiplies the lag by k, so rho(1) must fall steeply (0.37 at k=5, 0.053 at
    # k=25); the brackets are the measured values +-0.05 (this run's own noise is ~0.01)
    r = [stress_first_lag([[row[::k] for row in lj.pressure]], _WEIGHTS_ALL)
         for k in (1, 5, 25)]
    assert 0.88 < r[0] < 0.98
    assert 0.32 < r[1] < 0.42 and STRESS_MIN_FIRST < r[1] < STRESS_WARN_FIRST
    assert 0.0 < r[2] < 0.1 < STRESS_MIN_FIRST


def test_coarse_stress_is_refused_with_the_interval_to_use(lj):
    # every 25th row: 0.5 tau between samples; Green–Kubo would be 6.8 where the
    # finely sampled run gives 3.2 (measured on the 4 replicas, see STRESS_MIN_FIRST)
    with pytest.raises(InputError) as exc:
        analyse_viscosity(_thinned(lj, 25), method="both")
    msg = str(exc.value)
    for word in ("sampled too coarsely", "0.5 tau", "fix: write the pressure tensor at "
                 "least every", str(LJ)):
        assert word in msg
    assert not isinstance(exc.value, RunTooShortError)


def test_coarse_but_usable_stress_gives_a_warning(lj):
    est = analyse_viscosity(_thinned(lj, 5)).green_kubo
    assert any("sampled coarsely" in w for w in est.warnings)
    fine = analyse_viscosity(lj).green_kubo
    assert not any("sampled coarsely" in w for w in fine.warnings)


def test_an_interval_reaching_zero_is_run_too_short():
    # the first 60 ps of the n-hexane production (issue 11: "2.1 +- 261 mPa s" from a
    # 60 ps log): the 95% interval includes negative viscosities
    s = load_stress(HEXANE, units="real", temperature=298.0).sliced(0, 15000)
    with pytest.raises(RunTooShortError) as exc:
        analyse_viscosity(s, method="both")
    err = exc.value
    assert isinstance(err.partial, Estimate)
    assert err.partial.interval[0] <= 0 < err.partial.interval[1]
    assert err.extra_time > 0 and err.time_unit == "ps"
    for word in ("95% interval", "negative viscosities", "60 ps", "extend the run by"):
        assert word in str(err)


def _estimate(value, stderr):
    return Estimate("shear_viscosity", "green_kubo", value, stderr,
                    (value - 2 * stderr, value + 2 * stderr), "mPa s")


class _Analysis:
    def __init__(self, *est):
        self.estimates = est


def _series():
    from transport.units import get_unit_system

    return SimpleNamespace(units=get_unit_system("real"), duration=1e-10,  # 100 ps
                           source=SimpleNamespace(path="run.log"))


def test_projection_follows_one_over_square_root_of_the_length():
    ok = _Analysis(_estimate(1.0, 0.1))
    assert check_viscosity_result(ok, [_series()]) is ok
    # value 1, stderr 1, quantile 2: the interval +-50% needs (2 * 2 * 1 / 1)^2 = 16x
    # the 100 ps run (the error bar falls as 1/sqrt(length))
    with pytest.raises(RunTooShortError) as exc:
        check_viscosity_result(_Analysis(_estimate(1.0, 1.0)), [_series()])
    assert exc.value.needed_time == pytest.approx(1600.0)
    assert exc.value.extra_time == pytest.approx(1500.0)
    with pytest.raises(RunTooShortError) as exc:
        check_viscosity_result(_Analysis(_estimate(-0.5, 1.0)), [_series()])
    assert exc.value.extra_time is None and "not positive" in str(exc.value)


def test_a_temperature_in_other_units_than_the_file_is_refused():
    # issue 11: --temperature 300 on a reduced-units log whose column averages 0.725
    # (README: mean T* of rep1 0.7248) made the viscosity 400x too small
    with pytest.raises(InputError) as exc:
        load_stress(LJ, units="lj", temperature=300.0)
    msg = str(exc.value)
    for word in ("--temperature 300", "'Temp'", "0.72", "fix: pass the run's set point"):
        assert word in msg, word
    # 1e30 and a value 10% off the mean are refused too; 2% off passes (the tolerance
    # is 5% plus 3 standard errors of the column's mean)
    with pytest.raises(InputError, match="not a plausible temperature"):
        load_stress(LJ, units="lj", temperature=1e30)
    with pytest.raises(InputError, match="differs from the mean"):
        load_stress(LJ, units="lj", temperature=0.7248 * 1.1)
    assert load_stress(LJ, units="lj", temperature=0.7248 * 1.02).temperature == \
        pytest.approx(0.7248 * 1.02)


def test_json_warnings_hold_only_warnings_and_notes_go_apart():
    from transport.errors import Note
    from transport.report.jsonout import build_document

    e = Estimate("shear_viscosity", "green_kubo", 1.0, 0.1, (0.8, 1.2), "mPa s",
                 warnings=(Note("20 independent pieces"), "the running integral rises"))
    assert e.warnings == ("the running integral rises",)
    assert e.notes == ("20 independent pieces",)
    rec = e.to_record()
    assert rec["warnings"] == ["the running integral rises"]
    assert rec["notes"] == ["20 independent pieces"]
    doc = build_document("viscosity", inputs=[], settings={}, results=[e],
                         warnings=["a run-level warning", Note("a run-level note")],
                         notes=["said so"])
    assert doc["warnings"] == ["a run-level warning", "the running integral rises"]
    assert doc["notes"] == ["said so", "a run-level note", "20 independent pieces"]


def test_outputs_get_the_umask_mode_and_leave_no_temporary_file(tmp_path):
    # issue 11: outputs were created 0600 whatever the umask; temporaries left behind
    import os

    from transport.report.figures import new_figure, save_figure
    from transport.report.jsonout import write_json

    old = os.umask(0o022)
    try:
        write_json({"a": 1}, tmp_path / "out.json")
        fig, _ = new_figure(1)
        save_figure(fig, tmp_path / "fig.png")
        os.umask(0o077)
        write_json({"a": 1}, tmp_path / "private.json")
    finally:
        os.umask(old)
    assert (tmp_path / "out.json").stat().st_mode & 0o777 == 0o644
    assert (tmp_path / "fig.png").stat().st_mode & 0o777 == 0o644
    assert (tmp_path / "private.json").stat().st_mode & 0o777 == 0o600
    assert sorted(p.name for p in tmp_path.iterdir()) == ["fig.png", "out.json",
                                                          "private.json"]


def test_a_cutoff_or_window_at_the_maximum_lag_is_a_warning(lj):
    # issue 11: a Green–Kubo cutoff at the maximum lag was only in the JSON's cutoff_rule.
    # With the longest lag at 0.3 tau the LJ running integral (which levels off at 2-3 tau,
    # tests/data README) is still rising: the spread cannot reach 0.4 of the mean there
    r = analyse_viscosity(lj, method="both", max_lag=0.3)
    gk, ei = r.green_kubo, r.einstein
    assert gk.diagnostics["cutoff_rule"].startswith("maximum lag")
    assert any("cutoff is the maximum lag" in w for w in gk.warnings)
    assert any("window ends at the maximum lag" in w for w in ei.warnings)
    full = analyse_viscosity(lj).green_kubo
    assert not any("maximum lag (" in w for w in full.warnings)


def test_an_unwritable_output_folder_is_named_not_a_temporary_file(tmp_path):
    # issue 11: the message named the temporary file, after the computation
    import os

    from transport.report.jsonout import folder_not_writable, write_json

    assert folder_not_writable(tmp_path / "new" / "out.json") is None
    assert not (tmp_path / "new").exists()  # nothing created by the probe
    afile = tmp_path / "afile"
    afile.write_text("x")
    assert "is a file, not a folder" in folder_not_writable(afile / "out.json")
    locked = tmp_path / "locked"
    locked.mkdir()
    locked.chmod(0o500)
    try:
        if os.access(locked, os.W_OK) and os.geteuid() == 0:
            # root writes anywhere by permission bits; the probe agrees with the writer
            assert folder_not_writable(locked / "out.json") is None
        else:
            assert str(locked) in folder_not_writable(locked / "out.json")
            with pytest.raises(OSError) as exc:
                write_json({"a": 1}, locked / "out.json")
            assert exc.value.filename == str(locked)
    finally:
        locked.chmod(0o700)
    assert sorted(p.name for p in tmp_path.iterdir()) == ["afile", "locked"]
    if Path("/proc/self").exists():  # Linux: a folder nobody may create files in
        assert "'/proc'" in folder_not_writable("/proc/out.json")
        with pytest.raises(OSError) as exc:
            write_json({"a": 1}, "/proc/out.json")
        assert exc.value.filename == "/proc"
