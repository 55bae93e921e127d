"""Conversion of tables to stress series: unit invariance, volume, temperature, time axis."""

from __future__ import annotations

import numpy as np
import pytest
from conftest import examples
from hypothesis import given, settings
from hypothesis import strategies as st

from transport.errors import InputError
from transport.io import Table, load_stress, load_stress_many, stress_from_table
from transport.series import Source
from transport.units import get_unit_system

TENSOR = ["pxx", "pyy", "pzz", "pxy", "pxz", "pyz"]
SI_SYSTEMS = ["real", "metal", "si", "cgs", "electron", "micro", "nano", "gromacs"]


def table_in(units: str, p_si: np.ndarray, dt_si: float, vol_si: np.ndarray, stride: int,
             temp: np.ndarray) -> Table:
    """The same physical data expressed in the engine units `units`, rows numbered by step
    with the time step chosen so that `stride` steps last `dt_si` seconds."""
    u = get_unit_system(units)
    n = p_si.shape[1]
    cols = {c: p_si[k] / u.pressure for k, c in enumerate(TENSOR)}
    cols["Step"] = np.arange(n, dtype=float) * stride
    cols["Vol"] = vol_si / u.volume
    cols["Temp"] = temp
    canonical = {c: c for c in TENSOR} | {"step": "Step", "volume": "Vol",
                                          "temperature": "Temp"}
    return Table(columns=cols, canonical=canonical, units=u, timestep=dt_si / stride / u.time,
                 source=Source(path="mem", format="table"))


@settings(max_examples=examples(60), deadline=None)
@given(
    a=st.sampled_from(SI_SYSTEMS), b=st.sampled_from(SI_SYSTEMS),
    seed=st.integers(0, 2**32 - 1), n=st.integers(4, 40), stride=st.integers(1, 50),
    log_dt=st.floats(-16.0, -11.0), log_p=st.floats(3.0, 9.0),
)
def test_conversion_is_independent_of_the_engine_units(a, b, seed, n, stride, log_dt, log_p):
    """Rescaling invariance: the same physics written in two unit systems gives the same SI
    series (to rounding of the two scale factors)."""
    rng = np.random.default_rng(seed)
    p_si = rng.normal(size=(6, n)) * 10.0**log_p
    vol_si = (1.0 + 0.01 * rng.random(n)) * 1e-26
    temp = 300.0 + rng.random(n)
    dt_si = 10.0**log_dt
    sa = stress_from_table(table_in(a, p_si, dt_si, vol_si, stride, temp), temperature=300.0)
    sb = stress_from_table(table_in(b, p_si, dt_si, vol_si, stride, temp), temperature=300.0)
    # each side multiplies and divides by the same factor: a few ulps of error
    np.testing.assert_allclose(sa.pressure, p_si, rtol=1e-14)
    np.testing.assert_allclose(sb.pressure, sa.pressure, rtol=1e-14)
    assert sa.dt == pytest.approx(dt_si, rel=1e-13) and sb.dt == pytest.approx(sa.dt, rel=1e-13)
    np.testing.assert_allclose(sb.volume, sa.volume, rtol=1e-14)
    assert sa.units.name == a and sb.units.name == b


def test_reduced_units_are_not_converted():
    rng = np.random.default_rng(3)
    p = rng.normal(size=(6, 10))
    t = table_in("lj", p, 0.005 * 4, np.full(10, 1000.0), 4, np.full(10, 0.7))
    s = stress_from_table(t)
    np.testing.assert_array_equal(s.pressure, p)
    assert s.dt == pytest.approx(0.02) and s.volume == 1000.0  # constant -> a scalar
    assert s.temperature == pytest.approx(0.7) and s.units.reduced


def test_nine_components_are_symmetrised():
    rng = np.random.default_rng(4)
    n = 8
    cols = {f"P{a}{b}": rng.normal(size=n) for a in "xyz" for b in "xyz"}
    cols["Time"] = np.arange(n) * 0.01
    canonical = {f"p{a}{b}": f"P{a}{b}" for a in "xyz" for b in "xyz"} | {"time": "Time"}
    t = Table(columns=cols, canonical=canonical, units=get_unit_system("gromacs"),
              source=Source(path="mem", format="edr"))
    s = stress_from_table(t, volume=10.0)
    for k, (a, b) in enumerate(["xx", "yy", "zz", "xy", "xz", "yz"]):
        expect = cols[f"P{a}{b}"] if a == b else (cols[f"P{a}{b}"] + cols[f"P{b}{a}"]) / 2
        np.testing.assert_allclose(s.pressure[k], expect * 1e5, rtol=1e-15)
    assert s.volume == pytest.approx(10.0e-27)


def _csv(tmp_path, steps, name="t.csv", extra="") -> str:
    lines = ["step,pxx,pyy,pzz,pxy,pxz,pyz,vol" + extra]
    lines += [f"{s},1,2,3,4,5,6,100" + ("," + "310" if extra else "") for s in steps]
    p = tmp_path / name
    p.write_text("\n".join(lines) + "\n")
    return p


def test_uneven_steps_name_the_line(tmp_path):
    steps = [0, 10, 20, 30, 45, 55, 65]
    p = _csv(tmp_path, steps)
    with pytest.raises(InputError, match="step 45 follows 30") as exc:
        load_stress(p, units="real", timestep=1.0)
    assert exc.value.line == 6  # header is line 1, step 45 is the fifth row


def test_time_column_tolerates_print_rounding(tmp_path):
    # times printed with 8 significant digits as engines do: at t ~ 1000 ps an interval of
    # 0.00123 ps is cut to 4 decimals, so the printed spacings are 0.0012 or 0.0013 (up to
    # 8% off), within the reader's tolerance of 5e-7 x the largest time (5e-4 ps)
    n, step = 200, 0.00123
    t = np.arange(n) * step + 1000.0
    lines = ["time,pxx,pyy,pzz,pxy,pxz,pyz"] + [f"{x:.8g},1,2,3,4,5,6" for x in t]
    printed = np.array([float(ln.split(",")[0]) for ln in lines[1:]])
    assert np.ptp(np.diff(printed)) > 5e-5  # the rounding really is exercised
    p = tmp_path / "t.csv"
    p.write_text("\n".join(lines) + "\n")
    s = load_stress(p, units="metal", volume=1.0)
    # the interval is the mean over the series: off by at most the rounding of the two
    # end times (5e-5 ps each) over n - 1 intervals
    assert abs(s.dt - step * 1e-12) <= 1e-4 / (n - 1) * 1e-12
    assert s.t0 == pytest.approx(1000.0e-12, rel=1e-15)
    # a real gap is not rounding: drop the row on line 51; the break is then on line 51,
    # whose time follows the one on line 50 by two intervals
    lines.pop(50)
    p.write_text("\n".join(lines) + "\n")
    with pytest.raises(InputError, match="not evenly spaced") as exc:
        load_stress(p, units="metal", volume=1.0)
    assert exc.value.line == 51


def test_temperature_and_volume_rules(tmp_path):
    p = _csv(tmp_path, range(0, 50, 5), extra=",temp")
    s = load_stress(p, units="real", timestep=2.0)
    assert s.temperature == 310.0 and s.temperature_source == "mean of column 'temp'"
    assert any("pass --temperature" in w for w in s.warnings)
    s = load_stress(p, units="real", timestep=2.0, temperature=300.0)
    assert s.temperature == 300.0 and not any("--temperature" in w for w in s.warnings)
    # the file's volume wins over a different --volume, with a warning
    s = load_stress(p, units="real", timestep=2.0, temperature=300.0, volume=150.0)
    assert s.volume == pytest.approx(100.0e-30)
    assert any("--volume 150" in w and "used the file" in w for w in s.warnings)


def test_load_stress_many_reads_each_file(tmp_path):
    a = _csv(tmp_path, range(0, 50, 5), "a.csv")
    b = _csv(tmp_path, range(0, 100, 10), "b.csv")
    out = load_stress_many([a, b], units="metal", timestep=0.001)
    assert [s.n for s in out] == [10, 10]
    assert [s.dt for s in out] == pytest.approx([5e-15, 1e-14], rel=1e-12)
    assert [s.source.path for s in out] == [str(a), str(b)]
    with pytest.raises(InputError, match="no input files"):
        load_stress_many([])
    with pytest.raises(InputError, match="file not found") as exc:
        load_stress_many([a, tmp_path / "missing.csv"], units="metal", timestep=0.001)
    assert exc.value.path.endswith("missing.csv")


def test_stress_series_leaves_the_callers_array_writeable_and_takes_strided_rows():
    """Rows that are further apart than n values (the reader's own storage) are used as
    they are, and the caller's array is not made read-only (common practice for numpy
    containers: a read-only view of the input)."""
    from transport.series import StressSeries

    store = np.arange(6 * 40, dtype=np.float64).reshape(6, 40) + 1.0
    s = StressSeries(pressure=store[:, :30], dt=1.0, volume=1.0, temperature=1.0, units="lj")
    assert store.flags.writeable and not s.pressure.flags.writeable
    assert np.shares_memory(s.pressure, store)  # no copy
    np.testing.assert_array_equal(s.pressure, store[:, :30])
    f = StressSeries(pressure=np.asfortranarray(store), dt=1.0, volume=1.0, temperature=1.0,
                     units="lj")
    assert f.pressure.strides[1] == 8  # rows made contiguous
