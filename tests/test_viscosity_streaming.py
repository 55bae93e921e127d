"""Streaming viscosity (chunk-by-chunk correlations) equals the in-memory analysis.

Reference: the in-memory estimators of transport.viscosity, themselves checked against the
analytic Ornstein–Uhlenbeck viscosity in test_viscosity.py. Same data both ways; only
rounding may differ (FFT lag sums accumulated block by block in another order).
"""

from __future__ import annotations

import gzip
import json

import numpy as np
import pytest
from conftest import DATA, committed

import transport.io as tio
import transport.viscosity_streaming as vstream
from transport._memory import file_backed, release_pages
from transport.series import StressSeries
from transport.synthetic import OUStressModel
from transport.viscosity import analyse_viscosity

V, KT, ETA, DT = 1000.0, 1.0, 3.0, 0.01
MODEL = OUStressModel.for_viscosity(ETA, V, KT, times=[0.05, 0.5], fractions=[0.3, 0.7],
                                    mean_pressure=2.0, pressure_noise=0.5)

# Curves (running integral, its spread, Helfand MSD): both ways are sums of the same products
# in another order; measured 1e-15 relative to the curve's largest value, 1e-12 allows the
# rounding to grow with the number of blocks. Values, error bars: the Green–Kubo plateau comes
# from a nonlinear least-squares fit, which amplifies input rounding by its conditioning
# (measured 5e-11 relative); 1e-8 keeps a margin and is still far below any statistical error.
CURVE_RTOL = 1e-12
VALUE_RTOL = 1e-8
# Curves derived by a fit ("fit", "sigma_fit") carry the fit's amplification (VALUE_RTOL);
# the local slope divides MSD differences by dt, which multiplies the MSD's relative rounding
# by up to max_lag (5000 samples here): measured 3e-12, VALUE_RTOL covers it.
DERIVED = {"fit", "sigma_fit", "local_slope"}


def _same(a, b):
    assert a.value == pytest.approx(b.value, rel=VALUE_RTOL)
    assert a.stderr == pytest.approx(b.stderr, rel=VALUE_RTOL)
    np.testing.assert_allclose(a.interval, b.interval, rtol=VALUE_RTOL)
    assert a.window == pytest.approx(b.window, rel=1e-12)  # same lag index both ways
    assert a.diagnostics.get("cutoff") == b.diagnostics.get("cutoff")
    assert a.diagnostics.get("fit_window") == b.diagnostics.get("fit_window")
    assert a.n_independent == b.n_independent
    assert a.warnings == b.warnings
    for name, curve in a.curves.items():
        scale = np.max(np.abs(curve)) or 1.0
        tol = VALUE_RTOL if name in DERIVED else CURVE_RTOL
        np.testing.assert_allclose(b.curves[name], curve, rtol=0, atol=tol * scale,
                                   err_msg=name)


@pytest.mark.parametrize("chunk", [7_777, 1 << 20])  # many chunks per piece; one chunk
@pytest.mark.parametrize("components", ["all", "off_diagonal"])
def test_stream_equals_in_memory_one_run(monkeypatch, chunk, components):
    monkeypatch.setattr(vstream, "CHUNK", chunk)
    s = StressSeries(MODEL.sample(200_000, DT, np.random.default_rng(3)), DT, V, KT, "lj")
    a = analyse_viscosity(s, method="both", skip="auto", components=components)
    b = analyse_viscosity(s, method="both", skip="auto", components=components, stream=True)
    _same(a.green_kubo, b.green_kubo)
    _same(a.einstein, b.einstein)


def test_stream_long_lag_path_equals_in_memory(monkeypatch):
    # lags above LONG_LAG: one correlator per component, blocks of 2 max_lag, pieces in turn
    monkeypatch.setattr(vstream, "CHUNK", 30_000)
    monkeypatch.setattr(vstream, "LONG_LAG", 10)
    s = StressSeries(MODEL.sample(150_000, DT, np.random.default_rng(4)), DT, V, KT, "lj")
    a = analyse_viscosity(s, method="both", skip=None)
    b = analyse_viscosity(s, method="both", skip=None, stream=True)
    _same(a.green_kubo, b.green_kubo)
    _same(a.einstein, b.einstein)


def test_stream_equals_in_memory_replicas_offset_and_given_cutoff(monkeypatch):
    # two replicas of unequal length, a nonzero mean shear stress (the offset path) and a
    # given cutoff and fit window
    monkeypatch.setattr(vstream, "CHUNK", 10_000)
    rng = np.random.default_rng(11)
    runs = []
    for n in (120_000, 90_000):
        p = MODEL.sample(n, DT, rng)
        p[3] += 0.05  # mean P_xy: significant, removed as an offset (a note)
        runs.append(StressSeries(p, DT, V, KT, "lj"))
    kw = dict(method="both", skip=None, cutoff=2.0, fit_window=(1.0, 6.0))
    a = analyse_viscosity(runs, **kw)
    b = analyse_viscosity(runs, stream=True, **kw)
    assert any("mean was removed" in w for w in a.green_kubo.warnings)
    _same(a.green_kubo, b.green_kubo)
    _same(a.einstein, b.einstein)


def test_stream_from_memory_mapped_series(tmp_path, monkeypatch):
    # the pressure on disk, mapped read-only; pages are released chunk by chunk
    monkeypatch.setattr(vstream, "CHUNK", 50_000)
    p = MODEL.sample(150_000, DT, np.random.default_rng(5))
    np.save(tmp_path / "p.npy", p)
    mm = np.load(tmp_path / "p.npy", mmap_mode="r")
    a = analyse_viscosity(StressSeries(p, DT, V, KT, "lj"), method="both", skip=None)
    b = analyse_viscosity(StressSeries(mm, DT, V, KT, "lj"), method="both", skip=None,
                          stream=True)
    _same(a.green_kubo, b.green_kubo)
    _same(a.einstein, b.einstein)
    release_pages(mm)  # still readable afterwards (the data stay in the file)
    np.testing.assert_array_equal(mm[:, -3:], p[:, -3:])


# ---- the reader side: parsed rows kept in a scratch file --------------------------------

LOG_GZ = DATA / "lj_viscosity" / "lj_visc_rep1.log.gz"


@pytest.fixture
def plain_log(tmp_path):
    """A plain-text copy of a committed engine log (real data, 5x10^4 lines)."""
    p = tmp_path / "rep1.log"
    p.write_bytes(gzip.decompress(committed(LOG_GZ).read_bytes()))
    return p


def test_streamed_read_equals_in_memory_read_and_leaves_nothing(plain_log, tmp_path):
    scratch = tmp_path / "scratch"
    mem = tio.load_stress(plain_log, temperature=0.7248, stream=False, scratch=scratch)
    disk = tio.load_stress(plain_log, temperature=0.7248, stream=True, scratch=scratch)
    assert file_backed(disk.pressure) is not None and file_backed(mem.pressure) is None
    # the same parse written to another place: equal to the bit
    np.testing.assert_array_equal(disk.pressure, mem.pressure)
    assert (disk.dt, disk.volume, disk.source) == (mem.dt, mem.volume, mem.source)
    assert list(scratch.iterdir()) == []  # the scratch file is unlinked once mapped
    a = analyse_viscosity(mem, method="both")
    b = analyse_viscosity(disk, method="both")  # streams: the pressure is file-backed
    _same(a.green_kubo, b.green_kubo)
    _same(a.einstein, b.einstein)


def test_automatic_streaming_follows_available_memory(plain_log, tmp_path, monkeypatch):
    import transport._memory as mem

    scratch = tmp_path / "scratch"
    monkeypatch.setattr(mem, "available_bytes", lambda: 10**12)  # plenty: in memory
    assert file_backed(tio.load_stress(plain_log, temperature=0.7248, scratch=scratch)
                       .pressure) is None
    monkeypatch.setattr(mem, "available_bytes", lambda: 10**6)  # 1 MB: to the scratch file
    assert file_backed(tio.load_stress(plain_log, temperature=0.7248, scratch=scratch)
                       .pressure) is not None


def test_cli_stream_flag_gives_the_same_json(plain_log, tmp_path):
    from click.testing import CliRunner

    from transport.cli import main

    out = {}
    for flag in ("--no-stream", "--stream"):
        path = tmp_path / f"{flag[2:]}.json"
        res = CliRunner().invoke(main, ["viscosity", str(plain_log), "--temperature", "0.7248",
                                        "--cache", str(tmp_path / "c"), flag,
                                        "--json", str(path)])
        assert res.exit_code == 0, res.output
        out[flag] = json.loads(path.read_text())["results"][0]
    a, b = out["--no-stream"], out["--stream"]
    assert b["value"] == pytest.approx(a["value"], rel=VALUE_RTOL)
    assert b["stderr"] == pytest.approx(a["stderr"], rel=VALUE_RTOL)
    assert b["window"] == a["window"]
