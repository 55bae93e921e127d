"""Thermo-log reader: runs, restarts, interleaved text, damage, compression, settings.

Small logs are written here in the engine's own layout (right-aligned step, values padded
to 14 characters, trailing blanks, as in the engine's 2025 output); the expected numbers
are the ones written, so every check compares the reader with data it did not produce.
Real logs made by the engine are under tests/data (see their README files).
"""

from __future__ import annotations

import bz2
import gzip
import hashlib
import lzma
from pathlib import Path

import numpy as np
import pytest
from conftest import committed, examples
from hypothesis import given, settings
from hypothesis import strategies as st

import transport.io._scan as scan_mod
from transport.errors import InputError
from transport.io import load_stress, parse_run, read_table

COLS = ["Step", "Temp", "Press", "Pxx", "Pyy", "Pzz", "Pxy", "Pxz", "Pyz", "Volume"]


def header(cols: list[str]) -> str:
    return "   " + "".join(f"{c:<15}" for c in cols) + "\n"


def row(step: int, values) -> str:
    return f"{step:10d}   " + " ".join(f"{v:<14.8g}" for v in values) + " \n"


def values_for(steps, ncol: int, seed: int) -> np.ndarray:
    """Rows of values (rounded to what %.8g prints) for the given steps; the first and
    last columns (temperature, volume in COLS) are positive."""
    rng = np.random.default_rng(seed)
    v = rng.normal(size=(len(steps), ncol)) * 100.0
    v[:, 0] = 300.0 + np.abs(v[:, 0]) / 100.0  # near the 300 K the tests pass as set point
    v[:, -1] = 40000.0 + np.abs(v[:, -1])
    return np.array([[float(f"{x:.8g}") for x in r] for r in v])


def block(steps, vals, cols=COLS, loop=True, junk=None) -> str:
    junk = junk or {}
    out = [header(cols)]
    for i, (s, v) in enumerate(zip(steps, vals, strict=True)):
        if i in junk:
            out.append(junk[i])
        out.append(row(s, v))
    if loop:
        out.append(f"Loop time of 1.234 on 1 procs for {steps[-1] - steps[0]} steps with "
                   "100 atoms\n\nPerformance: 1.0 ns/day\n")
    return "".join(out)


PREAMBLE = """LAMMPS (22 Jul 2025 - Update 4)
units           real
atom_style      atomic
  1 by 1 by 1 MPI processor grid
  4000 atoms
timestep        2.0
thermo          10
"""


def write(tmp_path: Path, text: str, name: str = "log.lammps") -> Path:
    p = tmp_path / name
    p.write_text(text)
    return p


# ---- runs -------------------------------------------------------------------------------

def test_consecutive_runs_are_joined_and_the_repeated_step_kept_once(tmp_path):
    s1, s2 = list(range(0, 101, 10)), list(range(100, 201, 10))
    v1 = values_for(s1, 9, 1)
    v2 = values_for(s2, 9, 2)
    v2[0] = v1[-1]  # the engine prints the joint step twice with the same values
    p = write(tmp_path, PREAMBLE + "run 100\n" + block(s1, v1) + "run 100\n" + block(s2, v2))
    t = read_table(p)
    assert t.n == 21
    np.testing.assert_array_equal(t.column("step"), np.arange(0, 201, 10))
    np.testing.assert_array_equal(t.column("pxy"), np.concatenate([v1[:, 5], v2[1:, 5]]))
    assert [b.used for b in t.blocks] == [True, True]
    assert "repeated" in t.source.description and t.warnings == ()
    # lines: row 0 is the line after the first header; rows of run 2 follow its header
    text = p.read_text().splitlines()
    assert text[t.line_of(0) - 1].split()[0] == "0"
    assert text[t.line_of(11) - 1].split()[0] == "110"


def test_rows_off_the_output_interval_at_run_ends_are_dropped(tmp_path):
    # `run 55` with output every 10 prints steps 0..50 and 55; the next run starts at 55
    s1 = [*range(0, 51, 10), 55]
    s2 = [55, 60, 70, 80, 90, 95]
    v1, v2 = values_for(s1, 9, 3), values_for(s2, 9, 4)
    p = write(tmp_path, PREAMBLE + block(s1, v1) + block(s2, v2))
    t = read_table(p)
    np.testing.assert_array_equal(t.column("step"), [0, 10, 20, 30, 40, 50, 60, 70, 80, 90])
    assert "off the output interval" in t.source.description
    s = load_stress(p, temperature=300.0)
    assert s.n == 10
    assert s.dt == pytest.approx(10 * 2.0e-15, rel=1e-15)  # 10 steps x 2 fs


def test_restart_with_overlapping_steps_keeps_the_later_data(tmp_path):
    s1, s2 = list(range(0, 151, 10)), list(range(100, 301, 10))
    v1, v2 = values_for(s1, 9, 5), values_for(s2, 9, 6)
    p = write(tmp_path, PREAMBLE + block(s1, v1) + "read_restart r.100\nrun 200\n"
              + block(s2, v2))
    t = read_table(p)
    np.testing.assert_array_equal(t.column("step"), np.arange(0, 301, 10))
    np.testing.assert_array_equal(t.column("pxx"), np.concatenate([v1[:10, 2], v2[:, 2]]))
    assert any("overlap" in w and "kept the later data" in w for w in t.warnings)


def test_a_run_replaced_by_a_restart_from_an_earlier_step_is_left_out(tmp_path):
    # run 1: 0..100; run 2: 100..150; restart from step 100 again: run 3: 100..200
    s1, s2, s3 = list(range(0, 101, 10)), list(range(100, 151, 10)), list(range(100, 201, 10))
    v1, v2, v3 = values_for(s1, 9, 7), values_for(s2, 9, 8), values_for(s3, 9, 9)
    v3[0] = v1[-1]
    p = write(tmp_path, PREAMBLE + block(s1, v1) + block(s2, v2) + block(s3, v3))
    t = read_table(p)
    np.testing.assert_array_equal(t.column("step"), np.arange(0, 201, 10))
    np.testing.assert_array_equal(t.column("pyz"), np.concatenate([v1[:, 7], v3[1:, 7]]))
    assert [b.used for b in t.blocks] == [True, False, True]
    assert any("thermo run 2" in w and "restart" in w for w in t.warnings)


def test_equilibration_without_the_tensor_is_skipped(tmp_path):
    eq_cols = ["Step", "Temp", "E_pair", "TotEng", "Press"]
    s0 = list(range(0, 1001, 100))
    s1 = list(range(1000, 1201, 10))
    p = write(tmp_path, PREAMBLE + block(s0, values_for(s0, 4, 1), eq_cols)
              + "thermo_style custom step temp press pxx pyy pzz pxy pxz pyz vol\n"
              + block(s1, values_for(s1, 9, 2)))
    t = read_table(p)
    assert [b.used for b in t.blocks] == [False, True]
    assert not t.blocks[0].has_tensor and t.blocks[1].has_tensor
    assert t.n == len(s1)
    assert "thermo run 2 of 2" in t.source.description


def test_several_unrelated_production_runs_take_the_last_and_say_so(tmp_path):
    s = list(range(0, 201, 10))
    v1, v2 = values_for(s, 9, 11), values_for(s, 9, 12)
    p = write(tmp_path, PREAMBLE + block(s, v1) + "reset_timestep 0\n" + block(s, v2))
    t = read_table(p)
    np.testing.assert_array_equal(t.column("pxz"), v2[:, 6])
    assert any("2 thermo runs carry the pressure tensor" in w for w in t.warnings)
    # choosing explicitly
    t1 = read_table(p, run=1)
    np.testing.assert_array_equal(t1.column("pxz"), v1[:, 6])
    assert read_table(p, run="last").n == len(s)
    # joining runs that start again at step 0 gives an uneven time axis: refused with the
    # line where it breaks (the first row of run 2)
    with pytest.raises(InputError, match="not evenly spaced") as exc:
        load_stress(p, run="all", temperature=300.0)
    lines = p.read_text().splitlines()
    assert lines[exc.value.line - 1].split()[0] == "0"
    assert exc.value.line > t.blocks[1].header_line


def test_run_choice_errors(tmp_path):
    s = list(range(0, 101, 10))
    eq_cols = ["Step", "Temp", "Press"]
    p = write(tmp_path, PREAMBLE + block(s, values_for(s, 2, 1), eq_cols)
              + block(s, values_for(s, 9, 2)))
    with pytest.raises(InputError, match="thermo run 3 requested but the file has 2"):
        read_table(p, run=3)
    with pytest.raises(InputError, match="different columns") as exc:
        read_table(p, run="all")
    assert exc.value.line == read_table(p).blocks[1].header_line
    with pytest.raises(InputError, match="expected a run number"):
        read_table(p, run="second")


# ---- text and damage inside blocks -------------------------------------------------------

def test_warning_lines_inside_a_block_are_skipped_and_reported(tmp_path):
    s = list(range(0, 301, 10))
    v = values_for(s, 9, 13)
    junk = {5: "WARNING: Bond/angle/dihedral extent > half of periodic box length\n",
            17: "WARNING: Dihedral problem: 1 100 4 5 6 7\n  continued text 1 2 3\n"}
    p = write(tmp_path, PREAMBLE + block(s, v, junk=junk))
    t = read_table(p)
    np.testing.assert_array_equal(t.column("step"), s)
    np.testing.assert_array_equal(t.column("Volume"), v[:, 8])
    lines = p.read_text().splitlines()
    first_warning = next(i for i, x in enumerate(lines, 1) if x.startswith("WARNING"))
    assert any(f"skipped 3 line(s) of text inside thermo run 1 (first at line "
               f"{first_warning}" in w for w in t.warnings)
    # rows after the text map to their own lines
    for r in (0, 5, 6, 17, 18, len(s) - 1):
        assert lines[t.line_of(r) - 1].split()[0] == str(s[r])


def test_truncated_last_line_is_dropped_with_a_warning(tmp_path):
    s = list(range(0, 101, 10))
    v = values_for(s, 9, 14)
    text = PREAMBLE + block(s, v, loop=False)
    cut = text + row(110, v[0])[:25]  # the run stopped while writing this line
    p = write(tmp_path, cut)
    t = read_table(p)
    assert t.n == len(s)
    n_lines = cut.count("\n") + 1
    assert any(f"line {n_lines} is incomplete" in w for w in t.warnings)


def test_short_last_row_before_an_error_is_dropped(tmp_path):
    s = list(range(0, 101, 10))
    v = values_for(s, 9, 15)
    text = (PREAMBLE + block(s, v, loop=False) + "       110   1.0  2.0\n"
            + "ERROR: Lost atoms: original 4000 current 3999 (src/thermo.cpp:481)\n"
            + "Last command: run 1000\n")
    p = write(tmp_path, text)
    t = read_table(p)
    assert t.n == len(s)
    bad = text.splitlines().index("       110   1.0  2.0") + 1
    assert any(f"line {bad} has 3 of 10 values" in w for w in t.warnings)
    assert "error at line" in t.blocks[0].ended_by or "ERROR" in t.blocks[0].ended_by


def test_row_with_missing_values_inside_a_block_is_an_error(tmp_path):
    s = list(range(0, 101, 10))
    text = PREAMBLE + block(s, values_for(s, 9, 16))
    lines = text.splitlines(keepends=True)
    k = next(i for i, x in enumerate(lines) if x.strip().startswith("50 "))
    lines[k] = "        50   1.5   2.5\n"
    p = write(tmp_path, "".join(lines))
    with pytest.raises(InputError, match="row has 3 values but the header") as exc:
        read_table(p)
    assert exc.value.line == k + 1


def test_row_with_extra_values_inside_a_block_is_an_error(tmp_path):
    s = list(range(0, 101, 10))
    text = PREAMBLE + block(s, values_for(s, 9, 16))
    lines = text.splitlines(keepends=True)
    k = next(i for i, x in enumerate(lines) if x.strip().startswith("50 "))
    lines[k] = lines[k].rstrip() + "  7.5 \n"
    p = write(tmp_path, "".join(lines))
    with pytest.raises(InputError, match="more values than the 10 names") as exc:
        read_table(p)
    assert exc.value.line == k + 1


def test_non_number_inside_a_row_is_an_error_with_its_line(tmp_path):
    s = list(range(0, 101, 10))
    text = PREAMBLE + block(s, values_for(s, 9, 17))
    lines = text.splitlines(keepends=True)
    k = next(i for i, x in enumerate(lines) if x.strip().startswith("70 "))
    lines[k] = lines[k].replace(lines[k].split()[3], "1.2.3", 1)
    p = write(tmp_path, "".join(lines))
    with pytest.raises(InputError, match=r"'1\.2\.3' is not a number") as exc:
        read_table(p)
    assert exc.value.line == k + 1


@settings(max_examples=examples(20), deadline=None)
@given(chunk=st.integers(16, 5000), seed=st.integers(0, 2**32 - 1))
def test_chunk_boundaries_do_not_change_the_result(tmp_path_factory, chunk, seed):
    """Blocks, warnings and headers that straddle the scanner's chunks give the same table
    (chunks from smaller than one line to many lines; the default is 32 MiB)."""
    rng = np.random.default_rng(seed)
    s1, s2 = list(range(0, 301, 10)), list(range(300, 1001, 10))
    v1, v2 = values_for(s1, 9, 21), values_for(s2, 9, 22)
    v2[0] = v1[-1]
    junk = {int(i): "WARNING: something happened here\n"
            for i in rng.choice(np.arange(1, len(s2) - 1), 6, replace=False)}
    text = PREAMBLE + block(s1, v1) + "run 700\n" + block(s2, v2, junk=junk)
    p = write(tmp_path_factory.mktemp("chunks"), text)
    ref = read_table(p)
    with pytest.MonkeyPatch.context() as mp:
        mp.setattr(scan_mod, "CHUNK_BYTES", chunk)
        mp.setattr(scan_mod, "SLACK_BYTES", 64)
        mp.setattr(scan_mod, "_workers", lambda: 2)  # parse jobs in threads, as for big files
        t = read_table(p)
    assert t.n == ref.n == 101
    for name in COLS:
        np.testing.assert_array_equal(t.column(name), ref.column(name))
    assert t.line_map == ref.line_map
    assert t.warnings == ref.warnings
    assert t.source.sha256 == ref.source.sha256 == hashlib.sha256(p.read_bytes()).hexdigest()
    np.testing.assert_array_equal(t.column("pxy"), np.concatenate([v1[:, 5], v2[1:, 5]]))
    lines = text.splitlines()
    for r in range(0, t.n, 7):
        assert int(lines[t.line_of(r) - 1].split()[0]) == t.column("step")[r]


def test_threaded_parse_reports_the_first_error_in_the_file(tmp_path):
    """With rows parsed in worker threads, a bad value in the last rows of a block is
    reported, not the error in the header that follows it (a column named twice), although
    the scanner reads that header while the rows are still being parsed."""
    steps = list(range(0, 2001, 10))
    vals = values_for(steps, 9, 5)
    text = PREAMBLE + block(steps, vals) + "run 100\n" + header([*COLS[:4], "Pxx"]) + \
        row(2000, [1.0, 2.0, 3.0, 4.0])
    lines = text.splitlines(keepends=True)
    k = next(i for i, x in enumerate(lines) if x.strip().startswith("1990 "))
    lines[k] = lines[k].replace(lines[k].split()[2], "x7", 1)
    p = write(tmp_path, "".join(lines))
    with pytest.MonkeyPatch.context() as mp:
        mp.setattr(scan_mod, "CHUNK_BYTES", 512)
        mp.setattr(scan_mod, "SLACK_BYTES", 64)
        mp.setattr(scan_mod, "_workers", lambda: 2)
        with pytest.raises(InputError, match=r"'x7' is not a number") as exc:
            read_table(p)
    assert exc.value.line == k + 1
    with pytest.raises(InputError, match="appears 2 times"):  # the later error, alone
        read_table(write(tmp_path, text, "clean.log"))


@pytest.mark.parametrize("cols", [
    ["Step", "Temp", "Pxx", "Pyy", "Pzz", "Pxy", "Pxz", "Pyz", "Volume"],   # engine order
    ["Step", "Pxy", "Temp", "Pzz", "Pxx", "Volume", "Pyz", "Pyy", "Pxz"],   # shuffled
])
def test_tensor_columns_in_any_order_give_the_same_pressure(tmp_path, cols):
    """The reader stores the kept columns in tensor order whatever the file's order, and
    the pressure is converted in that storage (1 atm = 101325 Pa, exact by definition)."""
    steps = list(range(0, 501, 10))
    vals = values_for(steps, len(cols) - 1, 9)
    v = cols.index("Volume") - 1
    vals[:, v] = [float(f"{x:.8g}") for x in 40000.0 + np.abs(vals[:, v])]  # as printed
    vals[:, cols.index("Temp") - 1] = 300.0  # the set point given below (it is compared)
    p = write(tmp_path, PREAMBLE + block(steps, vals, cols=cols))
    s = load_stress(p, temperature=300.0)
    for k, c in enumerate(["Pxx", "Pyy", "Pzz", "Pxy", "Pxz", "Pyz"]):
        np.testing.assert_allclose(s.pressure[k], vals[:, cols.index(c) - 1] * 101325.0,
                                   rtol=1e-15)
    np.testing.assert_allclose(s.volume, vals[:, v] * 1e-30, rtol=1e-15)


# ---- compression ---------------------------------------------------------------------------

@pytest.mark.parametrize(("suffix", "opener"), [(".gz", gzip.open), (".bz2", bz2.open),
                                                (".xz", lzma.open)])
def test_compressed_logs_read_the_same(tmp_path, suffix, opener):
    s = list(range(0, 201, 10))
    v = values_for(s, 9, 23)
    text = PREAMBLE + block(s, v, junk={4: "WARNING: x\n"})
    plain = write(tmp_path, text)
    comp = tmp_path / ("log.lammps" + suffix)
    with opener(comp, "wt") as fh:
        fh.write(text)
    a, b = read_table(plain), read_table(comp)
    assert b.compression == {".gz": "gzip", ".bz2": "bzip2", ".xz": "xz"}[suffix]
    for name in COLS:
        np.testing.assert_array_equal(a.column(name), b.column(name))
    assert a.line_map == b.line_map
    # the checksum is of the file as stored (compressed bytes)
    assert b.source.sha256 == hashlib.sha256(comp.read_bytes()).hexdigest()
    assert a.source.sha256 == hashlib.sha256(plain.read_bytes()).hexdigest()
    # found by content, not by name
    renamed = tmp_path / "mystery.dat"
    renamed.write_bytes(comp.read_bytes())
    assert read_table(renamed).n == len(s)


# ---- definitions echoed in the log -------------------------------------------------------------

def test_pressure_compute_and_variables_are_resolved(tmp_path):
    cols = ["Step", "Temp", "c_myP", "c_myP[1]", "c_myP[2]", "c_myP[3]", "c_myP[4]",
            "c_myP[5]", "c_myP[6]", "v_sxy", "Volume"]
    s = list(range(0, 101, 10))
    v = values_for(s, 10, 24)
    text = (PREAMBLE + "compute myP all pressure thermo_temp\n"
            + "variable sxy equal c_myP[4]\n" + block(s, v, cols))
    t = read_table(write(tmp_path, text))
    assert [t.canonical[c] for c in ("pxx", "pyy", "pzz", "pxy", "pxz", "pyz")] == \
        [f"c_myP[{k}]" for k in range(1, 7)]  # vector order xx yy zz xy xz yz (manual)
    assert t.warnings == ()
    # a variable defined from a keyword stands for it
    cols2 = ["Step", "v_a", "v_b", "v_c", "v_d", "v_e", "v_f", "Vol"]
    text2 = (PREAMBLE + "".join(f"variable {n} equal {k}\n" for n, k in
                                zip("abcdef", ["pxx", "pyy", "pzz", "pxy", "pxz", "pyz"],
                                    strict=True))
             + block(s, values_for(s, 7, 25), cols2))
    t2 = read_table(write(tmp_path, text2, "log2"))
    assert t2.canonical["pxz"] == "v_e" and t2.canonical["volume"] == "Vol"


def test_partial_pressure_compute_is_flagged(tmp_path):
    cols = ["Step", *(f"c_vir[{k}]" for k in range(1, 7)), "Volume"]
    s = list(range(0, 101, 10))
    text = (PREAMBLE + "compute vir all pressure NULL virial\n"
            + block(s, values_for(s, 7, 26), cols))
    t = read_table(write(tmp_path, text))
    assert t.canonical["pxy"] == "c_vir[4]"
    assert any("partial pressure" in w for w in t.warnings)


# ---- units and time step ------------------------------------------------------------------------

def _simple(tmp_path, preamble: str, name="log.lammps") -> Path:
    s = list(range(0, 101, 10))
    return write(tmp_path, preamble + block(s, values_for(s, 9, 27)), name)


def test_units_and_timestep_come_from_the_log(tmp_path):
    p = _simple(tmp_path, PREAMBLE)
    s = load_stress(p, temperature=300.0)
    t = read_table(p)
    assert t.units.name == "real" and t.units_source == "units command at line 2"
    assert t.timestep == 2.0 and t.timestep_source == "timestep command at line 6"
    # real: atm -> Pa (101325 exactly), fs -> s, Angstrom^3 -> m^3
    np.testing.assert_allclose(s.pressure[3], t.column("pxy") * 101325.0, rtol=1e-15)
    assert s.dt == pytest.approx(10 * 2.0 * 1e-15, rel=1e-15)
    np.testing.assert_allclose(s.volume, t.column("volume") * 1e-30, rtol=1e-15)
    assert s.temperature == 300.0 and s.temperature_source == "set point given by the user"
    # agreeing user values are accepted
    assert load_stress(p, units="real", timestep=2.0, temperature=300.0).dt == s.dt


def test_user_units_or_timestep_that_disagree_with_the_log_are_refused(tmp_path):
    p = _simple(tmp_path, PREAMBLE)
    with pytest.raises(InputError, match="--units metal disagrees") as exc:
        read_table(p, units="metal")
    assert exc.value.line == 2
    with pytest.raises(InputError, match="--timestep 1 disagrees") as exc:
        read_table(p, timestep=1.0)
    assert exc.value.line == 6
    with pytest.raises(InputError, match="unknown unit system 'parsecs'"):
        read_table(p, units="parsecs")


def test_last_setting_before_the_run_applies(tmp_path):
    pre = PREAMBLE + "timestep 0.5\nunits metal\ntimestep 0.001\n"
    t = read_table(_simple(tmp_path, pre))
    assert t.units.name == "metal" and t.timestep == 0.001
    # the engine's own run header wins over an earlier command
    pre2 = PREAMBLE + "run 100\n  Unit style    : real\n  Current step  : 0\n" \
        "  Time step     : 4\n"
    t2 = read_table(_simple(tmp_path, pre2, "log2"))
    assert t2.timestep == 4.0 and "run header" in t2.timestep_source


def test_missing_timestep_uses_the_units_default_with_a_warning(tmp_path):
    pre = "LAMMPS (22 Jul 2025)\nunits lj\n"
    t = read_table(_simple(tmp_path, pre))
    # lj default time step 0.005 tau (the engine's timestep documentation; from memory)
    assert t.timestep == 0.005
    assert any("sets no time step" in w for w in t.warnings)
    # a user value is used instead of the default
    assert read_table(_simple(tmp_path, pre, "b"), timestep=0.002).timestep == 0.002


def test_no_units_anywhere_asks_for_units(tmp_path):
    p = _simple(tmp_path, "LAMMPS (22 Jul 2025)\n")
    with pytest.raises(InputError, match=r"does not say its units.*fix: pass --units"):
        load_stress(p)
    with pytest.raises(InputError, match=r"does not give the time step.*pass --timestep"):
        load_stress(p, units="metal")
    s = load_stress(p, units="metal", timestep=0.001, temperature=300.0)
    assert s.dt == pytest.approx(10 * 0.001e-12, rel=1e-15)


def test_time_column_gives_dt_without_a_timestep(tmp_path):
    cols = ["Step", "Time", "Pxx", "Pyy", "Pzz", "Pxy", "Pxz", "Pyz", "Lx", "Ly", "Lz"]
    s = list(range(0, 201, 20))
    v = values_for(s, 10, 28)
    v[:, 0] = np.array(s) * 0.5  # time = step * 0.5 fs
    v[:, 7:10] = [30.0, 31.0, 32.0]
    p = write(tmp_path, "LAMMPS (x)\nunits real\n" + block(s, v, cols))
    st = load_stress(p, timestep=None, temperature=250.0)
    assert st.dt == pytest.approx(20 * 0.5e-15, rel=1e-12)
    assert st.volume == pytest.approx(30.0 * 31.0 * 32.0 * 1e-30, rel=1e-15)


def test_minimization_output_is_not_joined_with_the_run(tmp_path):
    s0, s1 = list(range(0, 51, 10)), list(range(50, 151, 10))
    p = write(tmp_path, PREAMBLE + "minimize 1e-4 1e-6 100 1000\n"
              + block(s0, values_for(s0, 9, 29)) + "run 100\n" + block(s1, values_for(s1, 9, 30)))
    t = read_table(p)
    assert [b.kind for b in t.blocks] == ["minimize", "run"]
    assert [b.used for b in t.blocks] == [False, True]


# ---- real logs written by the engine --------------------------------------------------

DATA = Path(__file__).parent / "data"
LOGS = DATA / "lammps_logs"


def blocks_by_hand(path: Path) -> list[tuple[list[str], np.ndarray]]:
    """Thermo blocks found the obvious way: a line starting with 'Step' opens a block,
    'Loop time' closes it, every line between is a row (np.loadtxt does the numbers)."""
    opener = gzip.open if path.suffix == ".gz" else open
    out, cur, names = [], None, None
    with opener(path, "rt") as fh:
        for line in fh:
            if line.split()[:1] == ["Step"]:
                names, cur = line.split(), []
            elif cur is not None and line.startswith("Loop time"):
                out.append((names, np.loadtxt(cur, ndmin=2)))
                cur = None
            elif cur is not None:
                cur.append(line)
    return out


def need(path: Path) -> Path:
    """A committed log: missing is a failure (conftest.committed), not a skip."""
    return committed(path)


def test_real_log_two_runs_in_real_units():
    p = need(LOGS / "argon_real_tworuns.log")
    (n1, b1), (n2, b2) = blocks_by_hand(p)
    assert n1 == n2 and b1[-1, 0] == b2[0, 0] == 2000
    expect = np.vstack([b1, b2[1:]])  # step 2000 kept once
    t = read_table(p)
    s = load_stress(p, temperature=94.4)
    assert t.n == s.n == expect.shape[0] == 401
    assert t.units.name == "real" and t.timestep == 4.0  # README: timestep 4.0 fs
    for j, name in enumerate(n1):
        np.testing.assert_array_equal(t.column(name), expect[:, j])
    pxy = expect[:, n1.index("Pxy")]
    # 1 atm = 101325 Pa (SI Brochure); mean compared to rounding of the sum
    assert s.pressure[3].mean() == pytest.approx(pxy.mean() * 101325.0, rel=1e-12)
    assert s.dt == pytest.approx(10 * 4.0e-15, rel=1e-15)
    # README: box volume 12367.418 A^3 (constant, NVT)
    assert s.volume == pytest.approx(12367.418e-30, rel=1e-7)


def test_real_log_restart_overlap_keeps_the_continuation():
    p = need(LOGS / "lj_restart_overlap.log")
    blocks = blocks_by_hand(p)
    assert len(blocks) == 3
    (names, b1), (_, b2), (_, b3) = blocks
    expect = np.vstack([b1[b1[:, 0] < 1000], b3])  # README: keep 0..1000 and 1000..2000
    t = read_table(p)
    assert t.n == expect.shape[0] == 201
    for j, name in enumerate(names):
        np.testing.assert_array_equal(t.column(name), expect[:, j])
    assert not np.array_equal(b2[1:6], b3[1:6])  # the superseded run differs
    assert any("restart" in w for w in t.warnings)
    assert t.units.name == "lj" and t.timestep == 0.005


def test_real_log_compute_pressure_in_metal_units():
    p = need(LOGS / "argon_metal_computepressure.log")
    blocks = blocks_by_hand(p)
    names, prod = blocks[-1]
    t = read_table(p)
    s = load_stress(p, temperature=94.4)
    assert t.n == s.n == prod.shape[0] == 301
    assert t.units.name == "metal" and t.timestep == 0.004
    for k in range(6):  # c_myP[k+1] is component k (vector order xx yy zz xy xz yz)
        col = prod[:, names.index(f"c_myP[{k + 1}]")]
        np.testing.assert_allclose(s.pressure[k], col * 1e5, rtol=1e-15)  # bar -> Pa
    assert s.dt == pytest.approx(10 * 0.004e-12, rel=1e-15)


def test_real_lj_viscosity_log_production_block():
    p = committed(DATA / "lj_viscosity" / "lj_visc_rep1.log.gz")
    names, prod = blocks_by_hand(p)[-1]
    s = load_stress(p, temperature=0.722)
    t = read_table(p)
    # README: production 200000 steps, output every 4 steps -> 50001 rows; dt = 4 x 0.005
    assert t.n == s.n == prod.shape[0] == 50001
    assert s.dt == pytest.approx(0.02, rel=1e-12)
    assert s.units.reduced
    assert s.volume == pytest.approx(1023.454, rel=1e-6)  # README: volume 1023.454
    for j, name in enumerate(names):
        assert t.column(name).mean() == pytest.approx(prod[:, j].mean(), rel=1e-12, abs=1e-15)


def test_variable_defined_as_something_else_is_not_guessed_from_its_name(tmp_path):
    cols = ["Step", "v_pxx", "v_pyy", "v_pzz", "v_pxy", "v_pxz", "v_pyz", "Vol"]
    s = list(range(0, 101, 10))
    defs = "".join(f"variable {c} equal {c}\n" for c in ["pxx", "pyy", "pzz", "pxz", "pyz"])
    text = PREAMBLE + defs + "variable pxy equal pxy*101325\n" + block(
        s, values_for(s, 7, 31), cols)
    t = read_table(write(tmp_path, text))
    assert "pxy" not in t.canonical and t.canonical["pxz"] == "v_pxz"
    with pytest.raises(InputError, match="no pressure-tensor column for pxy"):
        load_stress(write(tmp_path, text, "b.log"), temperature=300.0)
    # without echoed definitions the names are taken at their word
    t2 = read_table(write(tmp_path, PREAMBLE + block(s, values_for(s, 7, 31), cols), "c.log"))
    assert t2.canonical["pxy"] == "v_pxy"


def test_windows_line_ends_read_the_same(tmp_path):
    s = list(range(0, 101, 10))
    text = PREAMBLE + block(s, values_for(s, 9, 32), junk={3: "WARNING: x\n"})
    a = read_table(write(tmp_path, text))
    b = read_table(write(tmp_path, text.replace("\n", "\r\n"), "crlf.log"))
    for name in COLS:
        np.testing.assert_array_equal(a.column(name), b.column(name))
    assert a.line_map == b.line_map and a.timestep == b.timestep == 2.0


def test_run_choices_parse():
    assert parse_run(None) is None and parse_run("auto") is None
    assert parse_run(2) == 2 and parse_run("3") == 3
    assert parse_run("2-4") == (2, 4) and parse_run("2:4") == (2, 4)
    assert parse_run("ALL") == "all" and parse_run("last") == "last"
    for bad in ("0", "4-2", "x", True, -1):
        with pytest.raises(ValueError):
            parse_run(bad)
