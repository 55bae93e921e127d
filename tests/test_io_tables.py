"""Plain-text, CSV and NumPy tables."""

from __future__ import annotations

import gzip

import numpy as np
import pytest

from transport.errors import InputError
from transport.io import load_stress, read_table, sniff_format

TENSOR = ["pxx", "pyy", "pzz", "pxy", "pxz", "pyz"]


def tensor_values(n: int, seed: int) -> np.ndarray:
    rng = np.random.default_rng(seed)
    return np.round(rng.normal(size=(n, 6)) * 50.0, 6)


def test_time_averaging_output_with_comment_header(tmp_path):
    # layout of the engine's time-averaging output: comment lines, then '# TimeStep v_...'
    v = tensor_values(12, 1)
    lines = ["# Time-averaged data for fix pave\n",
             "# TimeStep v_pxx v_pyy v_pzz v_pxy v_pxz v_pyz\n"]
    lines += [f"{100 * i} " + " ".join(repr(float(x)) for x in r) + "\n"
              for i, r in enumerate(v)]
    p = tmp_path / "pressure.ave"
    p.write_text("".join(lines))
    assert sniff_format(p) == ("table", None)
    t = read_table(p)
    assert t.canonical["step"] == "TimeStep" and t.canonical["pxy"] == "v_pxy"
    s = load_stress(p, units="real", timestep=1.0, volume=27000.0)
    np.testing.assert_array_equal(s.pressure, v.T * 101325.0)  # atm -> Pa, exact factor
    assert s.dt == pytest.approx(100 * 1e-15, rel=1e-15)
    assert s.volume == pytest.approx(27000.0e-30, rel=1e-15)  # Angstrom^3 -> m^3
    assert t.source.description.startswith("table (lines 3-14)")


@pytest.mark.parametrize("sep", [",", ", ", "\t", ";", "  "])
def test_delimiters_are_sniffed(tmp_path, sep):
    v = tensor_values(6, 2)
    head = sep.join(["time", "P_xx", "P_yy", "P_zz", "P_xy", "P_xz", "P_yz"])
    body = "".join(sep.join([f"{0.5 * i:g}", *(repr(float(x)) for x in r)]) + "\n"
                   for i, r in enumerate(v))
    p = tmp_path / "t.txt"
    p.write_text(head + "\n" + body)
    t = read_table(p)
    assert t.n == 6
    np.testing.assert_array_equal(t.column("pxz"), v[:, 4])
    s = load_stress(p, units="metal", volume=1000.0)
    assert s.dt == pytest.approx(0.5e-12, rel=1e-12)  # time column in ps


def test_quoted_csv_header_and_gzip(tmp_path):
    v = tensor_values(5, 3)
    text = '"step","pxx","pyy","pzz","pxy","pxz","pyz","vol"\n' + "".join(
        ",".join([str(2 * i), *(repr(float(x)) for x in r), "8000"]) + "\n"
        for i, r in enumerate(v))
    p = tmp_path / "t.csv.gz"
    with gzip.open(p, "wt") as fh:
        fh.write(text)
    assert sniff_format(p) == ("table", "gzip")
    s = load_stress(p, units="lj", timestep=0.005)
    np.testing.assert_array_equal(s.pressure[3], v[:, 3])  # reduced units: no conversion
    assert s.volume == 8000.0 and s.dt == pytest.approx(0.01)


def test_comment_lines_inside_a_table_are_skipped(tmp_path):
    v = tensor_values(8, 4)
    rows = [f"{i} " + " ".join(repr(float(x)) for x in r) + "\n" for i, r in enumerate(v)]
    rows.insert(4, "# restarted here\n")
    p = tmp_path / "t.dat"
    p.write_text("# step pxx pyy pzz pxy pxz pyz\n" + "".join(rows))
    t = read_table(p)
    np.testing.assert_array_equal(t.column("pyz"), v[:, 5])
    assert any("skipped 1 line(s) of text" in w and "line 6" in w for w in t.warnings)


def test_npz_with_named_arrays_and_settings(tmp_path):
    v = tensor_values(10, 5)
    p = tmp_path / "p.npz"
    np.savez(p, step=np.arange(10) * 4, volume=np.full(10, 512.0), units=np.array("metal"),
             timestep=np.array(0.002), **{c: v[:, k] for k, c in enumerate(TENSOR)})
    t = read_table(p)
    assert t.units.name == "metal" and t.timestep == 0.002
    s = load_stress(p)
    np.testing.assert_array_equal(s.pressure, v.T * 1e5)  # bar -> Pa
    assert s.dt == pytest.approx(4 * 0.002e-12, rel=1e-12)
    with pytest.raises(InputError, match="disagrees with the file"):
        load_stress(p, units="real")


def test_structured_npy(tmp_path):
    v = tensor_values(7, 6)
    rec = np.rec.fromarrays([np.arange(7.0), *v.T, np.full(7, 300.0)],
                            names=["time", *TENSOR, "temp"])
    p = tmp_path / "p.npy"
    np.save(p, rec)
    s = load_stress(p, units="real", volume=1000.0)
    np.testing.assert_array_equal(s.pressure[0], v[:, 0] * 101325.0)
    assert s.temperature == 300.0 and "mean of column 'temp'" in s.temperature_source
    assert any("set point is preferred" in w for w in s.warnings)


@pytest.mark.parametrize(
    ("make", "match"),
    [
        (lambda p: np.save(p, np.zeros((5, 7))), "unnamed array"),
        (lambda p: np.savez(p, a=np.zeros(3), b=np.zeros(4)), "different lengths"),
        (lambda p: np.savez(p, a=np.zeros((3, 3))), "no 1-D number columns"),
    ],
)
def test_bad_numpy_files(tmp_path, make, match):
    p = tmp_path / "bad.npz"
    make(p)
    p = next(tmp_path.glob("bad*"))
    with pytest.raises(InputError, match=match):
        read_table(p)


def test_table_without_header_or_units(tmp_path):
    p = tmp_path / "nohead.txt"
    p.write_text("1 2 3\n4 5 6\n")
    with pytest.raises(InputError, match=r"no table found.*add a header line"):
        read_table(p)
    q = tmp_path / "t.csv"
    q.write_text("step,pxx,pyy,pzz,pxy,pxz,pyz\n" + "".join(
        f"{i},1,2,3,4,5,6\n" for i in range(5)))
    with pytest.raises(InputError, match="does not say its units"):
        load_stress(q, volume=1.0)
    with pytest.raises(InputError, match=r"no volume.*pass --volume \(in Angstrom\^3\)"):
        load_stress(q, units="real", timestep=1.0)


def test_missing_tensor_columns_list_what_was_found(tmp_path):
    q = tmp_path / "t.csv"
    q.write_text("step,temp,pxy,pxz\n" + "".join(f"{i},300,1,2\n" for i in range(5)))
    with pytest.raises(InputError) as exc:
        load_stress(q, units="real", timestep=1.0, volume=1.0)
    msg = str(exc.value)
    assert "pxx, pyy, pzz, pyz" in msg and "columns found: step temp pxy pxz" in msg
    assert exc.value.line == 1


def test_byte_order_mark_crlf_and_a_misleading_name(tmp_path):
    text = "\ufeffstep,pxx,pyy,pzz,pxy,pxz,pyz\r\n" + "".join(
        f"{i},1,2,3,{i / 10},5,6\r\n" for i in range(6)) + "\r\n"
    p = tmp_path / "run.log"  # named like a log, holds a CSV table
    p.write_bytes(text.encode("utf-8"))
    t = read_table(p)
    assert t.source.format == "table" and t.canonical["step"] == "step"
    np.testing.assert_array_equal(t.column("pxy"), np.arange(6) / 10)


def test_formats_are_sniffed_by_content(tmp_path):
    np.savez(tmp_path / "a.npz", x=np.zeros(3))
    np.save(tmp_path / "b.npy", np.zeros(3))
    (tmp_path / "a.npz").rename(tmp_path / "arrays.data")  # no telling suffix
    assert sniff_format(tmp_path / "arrays.data") == ("npz", None)
    assert sniff_format(tmp_path / "b.npy") == ("npy", None)
    log = tmp_path / "output.txt"
    log.write_text("LAMMPS (22 Jul 2025)\nunits lj\n")
    assert sniff_format(log) == ("lammps-log", None)
    gz = tmp_path / "x.gz"
    gz.write_bytes(gzip.compress(b"# step pxy\n0 1\n"))
    assert sniff_format(gz) == ("table", "gzip")
    with pytest.raises(InputError, match="file is empty after gzip decompression"):
        (tmp_path / "e.gz").write_bytes(gzip.compress(b""))
        sniff_format(tmp_path / "e.gz")
