"""Energy files (.edr) against GROMACS' own tables of them, and against pyedr.

The reference outside the reading library: pyedr ships, beside its test .edr files, the
.xvg tables GROMACS' `gmx energy` wrote from them (test_energy_file_matches_the_xvg_...).
The comparison with pyedr's reading (the library the reader uses) checks that nothing is
lost or reordered on the way, bit for bit.

Files: MDAnalysisTests' test.edr (4 frames with the 9-component pressure tensor, volume and
temperature) and the test files shipped with pyedr (blocks.edr: 11 frames; double.edr: 201
frames without volume; irregular.edr: uneven frame times).
"""

from __future__ import annotations

import gzip
import warnings
from pathlib import Path

import numpy as np
import pytest

pyedr = pytest.importorskip("pyedr")

from transport.errors import InputError  # noqa: E402
from transport.io import load_stress, read_table  # noqa: E402

PAIRS = [("Pres-XX", None), ("Pres-YY", None), ("Pres-ZZ", None),
         ("Pres-XY", "Pres-YX"), ("Pres-XZ", "Pres-ZX"), ("Pres-YZ", "Pres-ZY")]


def mda_file(name: str) -> Path:
    mdt = pytest.importorskip("MDAnalysisTests")
    p = Path(mdt.__file__).parent / "data" / name
    if not p.exists():  # pragma: no cover
        pytest.skip(f"{name} not shipped by this MDAnalysisTests")
    return p


def pyedr_file(name: str) -> Path:
    p = Path(pyedr.__file__).parent / "tests" / "data" / name
    if not p.exists():  # pragma: no cover
        pytest.skip(f"{name} not shipped by this pyedr")
    return p


def reference(path: Path) -> dict[str, np.ndarray]:
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        return pyedr.edr_to_dict(str(path))


@pytest.mark.parametrize("path", [mda_file("test.edr"), pyedr_file("blocks.edr")],
                         ids=["mdanalysis-test.edr", "pyedr-blocks.edr"])
def test_energy_file_matches_pyedr(path):
    ref = reference(path)
    t = read_table(path)
    assert t.source.format == "edr" and t.units.name == "gromacs"
    assert t.n == len(ref["Time"])
    for k, v in ref.items():
        np.testing.assert_array_equal(t.columns[k], v)
    s = load_stress(path)
    for i, (a, b) in enumerate(PAIRS):
        expect = ref[a] if b is None else (ref[a] + ref[b]) / 2  # symmetrised off-diagonals
        np.testing.assert_allclose(s.pressure[i], expect * 1e5, rtol=1e-15)  # bar -> Pa
    dt = (ref["Time"][-1] - ref["Time"][0]) / (len(ref["Time"]) - 1)
    assert s.dt == pytest.approx(dt * 1e-12, rel=1e-12)  # ps -> s
    assert s.t0 == pytest.approx(ref["Time"][0] * 1e-12)
    np.testing.assert_allclose(s.volume, ref["Volume"] * 1e-27, rtol=1e-15)  # nm^3 -> m^3
    assert s.temperature == pytest.approx(ref["Temperature"].mean(), rel=1e-15)
    assert s.temperature_source == "mean of column 'Temperature'"
    assert "off-diagonal pairs averaged" in s.source.description


def test_energy_file_without_volume_needs_one():
    path = pyedr_file("double.edr")
    ref = reference(path)
    with pytest.raises(InputError, match=r"no volume.*pass --volume \(in nm\^3\)"):
        load_stress(path)
    s = load_stress(path, volume=27.0, temperature=470.0)  # its column's mean: 471.3 K
    assert s.n == len(ref["Time"]) == 201
    assert s.volume == pytest.approx(27.0e-27, rel=1e-15)


def test_uneven_frame_times_are_refused():
    path = pyedr_file("irregular.edr")
    with pytest.raises(InputError, match="not evenly spaced"):
        load_stress(path)


def test_units_other_than_the_files_are_refused_and_compressed_files_read(tmp_path):
    path = mda_file("test.edr")
    with pytest.raises(InputError, match="--units real disagrees"):
        read_table(path, units="real")
    gz = tmp_path / "ener.edr.gz"
    gz.write_bytes(gzip.compress(path.read_bytes()))
    a, b = read_table(path), read_table(gz)
    assert b.compression == "gzip"
    for k in a.columns:
        np.testing.assert_array_equal(a.columns[k], b.columns[k])


def test_damaged_energy_files(tmp_path):
    single = mda_file("single_frame.edr")
    with pytest.raises(InputError, match="only 1 rows"):
        load_stress(single)
    junk = tmp_path / "junk.edr"
    junk.write_bytes(b"\xff\xff\x26\xfd" + bytes(range(256)) * 4)
    with pytest.raises(InputError, match="cannot be read as an energy file"):
        read_table(junk)


def read_xvg(path: Path) -> dict[str, tuple[np.ndarray, np.ndarray]]:
    """Columns of a GROMACS ``.xvg`` table (written by ``gmx energy``, not by pyedr), by
    legend, as (values, half a unit of the last printed digit)."""
    names, rows, halves = ["Time"], [], []
    for line in path.read_text().splitlines():
        if line.startswith("@") and " legend \"" in line and line.split()[1].startswith("s"):
            names.append(line.split('"')[1])
        elif line.strip() and not line.startswith(("#", "@")):
            tok = line.split()
            rows.append([float(x) for x in tok])
            halves.append([0.5 * 10.0 ** -len(x.partition(".")[2]) for x in tok])
    vals, half = np.array(rows).T, np.array(halves).T
    return {n: (vals[i], half[i]) for i, n in enumerate(names)}


@pytest.mark.parametrize("name", ["1.edr", "1_d.edr", "4.edr"])
def test_energy_file_matches_the_xvg_gromacs_wrote(name):
    # Reference outside pyedr: pyedr ships, beside each test .edr, the .xvg table that
    # GROMACS' own `gmx energy` wrote from it. Tolerance: half a unit of the last printed
    # digit (6 decimals, or 12 for double-precision files) plus float32 storage of
    # single-precision files (relative 6e-8).
    edr = pyedr_file(name)
    ref = read_xvg(pyedr_file(name.replace(".edr", ".xvg")))
    t = read_table(edr)
    shared = [k for k in ref if k in t.columns]
    tensor = {k.split(" (")[0]: k for k in shared if k.startswith("Pres-")}
    assert len(shared) >= 20 and len(tensor) == 9 and "Time" in shared, shared
    for k in shared:
        v, half = ref[k]
        assert t.columns[k].shape == v.shape, k
        np.testing.assert_allclose(t.columns[k], v, rtol=6e-8, atol=half.max() * 1.0001,
                                   err_msg=k)
    # no --temperature: the file's own temperature column is used (these short GROMACS test
    # runs sit at 160-200 K, and a 300 K set point would rightly be refused)
    s = load_stress(edr, volume=27.0)
    for i, (a, b) in enumerate(PAIRS):
        va, half = ref[tensor[a]]
        expect = va if b is None else (va + ref[tensor[b]][0]) / 2
        tol = half.max() * 1e5 * 1.0001  # printed bar -> Pa
        np.testing.assert_allclose(s.pressure[i], expect * 1e5, rtol=6e-8, atol=tol)
    times = ref["Time"][0]
    assert s.dt == pytest.approx((times[-1] - times[0]) / (times.size - 1) * 1e-12,
                                 rel=1e-6)  # 1e-6 ps printed over the whole span
