"""Column checks of `transport.io` (moved out of the `average` command into the library).

The answers are known by construction: the test writes the file, so it knows the line of
every row, the interval between rows and the units of each column.
"""

from __future__ import annotations

import numpy as np
import pytest

from transport.errors import InputError
from transport.io import checked_column, column_unit, even_time_axis, read_table


def _table(tmp_path, rows, header="Time,Density,Press"):
    p = tmp_path / "run.csv"
    p.write_text(header + "\n" + "\n".join(",".join(str(v) for v in r) for r in rows) + "\n")
    return str(p), read_table(p, units="metal")


def test_column_by_canonical_name_with_unit_and_time_axis(tmp_path):
    rows = [(0.5 * i, 0.8 + 0.001 * i, 1.0 + i) for i in range(20)]
    path, table = _table(tmp_path, rows)
    x, col = checked_column(table, "press", path=path)  # canonical name, any case
    assert col == "Press"
    np.testing.assert_allclose(x, [1.0 + i for i in range(20)])
    assert column_unit(table, "Press") == "bar"  # metal units: pressure in bar
    # LAMMPS `units metal` prints mass density in g/cm^3 (LAMMPS units documentation)
    assert column_unit(table, "Density") == "g/cm^3"
    assert column_unit(table, "Whatever") == ""  # no unit known for an unmapped column
    dt, t0, unit = even_time_axis(table)
    assert (dt, t0, unit) == (pytest.approx(0.5), 0.0, "ps")  # metal time unit: ps


def test_missing_column_lists_those_found(tmp_path):
    path, table = _table(tmp_path, [(0.5 * i, 1.0, 2.0) for i in range(20)])
    with pytest.raises(InputError, match="no column 'Energy'") as err:
        checked_column(table, "Energy", path=path)
    assert "Time, Density, Press" in err.value.one_line()


def test_non_finite_value_names_its_line(tmp_path):
    rows = [(0.5 * i, 1.0, 2.0) for i in range(20)]
    rows[6] = (3.0, float("nan"), 2.0)  # row 7, file line 8 (after the header)
    path, table = _table(tmp_path, rows)
    with pytest.raises(InputError, match="non-finite value") as err:
        checked_column(table, "Density", path=path)
    assert err.value.line == 8


def test_uneven_time_names_its_line(tmp_path):
    rows = [(0.5 * i, 1.0, 2.0) for i in range(20)]
    rows[10] = (5.2, 1.0, 2.0)  # row 11 jumps: file line 12
    _, table = _table(tmp_path, rows)
    with pytest.raises(InputError, match="not evenly spaced") as err:
        even_time_axis(table)
    assert err.value.line == 12
