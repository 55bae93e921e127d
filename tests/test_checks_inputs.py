"""Damaged and awkward variants of the real logs in tests/data, made inside the tests
(issue 11): each gives an error or a warning that names the problem and the fix.

Source file: tests/data/lammps_logs/argon_real_tworuns.log (LAMMPS, `units real`, two
consecutive runs of 201 rows each printing step temp press pxx pyy pzz pxy pxz pyz vol
etotal; see its README). The engine prints press = (pxx + pyy + pzz)/3 from the same
virial, so the unmodified file agrees to 1e-8 (measured).
"""

from __future__ import annotations

import hashlib
from pathlib import Path

import pytest

from transport.errors import InputError
from transport.io import load_stress

LOG = Path(__file__).parent / "data" / "lammps_logs" / "argon_real_tworuns.log"
HEADERS = (45, 276)  # 1-based lines of the two thermo headers (checked below)


def _lines() -> list[str]:
    lines = LOG.read_text().splitlines(keepends=True)
    for h in HEADERS:
        assert lines[h - 1].split()[:3] == ["Step", "Temp", "Press"]
    return lines


def _edit(lines: list[str], line: int, col: str, fn) -> None:
    """Apply fn to the token of column `col` on 1-based `line` (header of its run above)."""
    head = max(h for h in HEADERS if h < line)
    k = lines[head - 1].split().index(col)
    toks = lines[line - 1].split()
    toks[k] = fn(toks[k])
    lines[line - 1] = "   " + "   ".join(toks) + "\n"


def _write(tmp_path: Path, lines: list[str], name: str = "argon.log") -> Path:
    p = tmp_path / name
    p.write_text("".join(lines))
    return p


def _digest(p: Path) -> str:
    return hashlib.sha256(p.read_bytes()).hexdigest()


def test_the_real_log_reads_without_these_warnings():
    s = load_stress(LOG, temperature=96.3)
    assert not any("robust" in w or "disagree" in w or "left out" in w for w in s.warnings)


def test_one_absurd_cell_is_refused_with_its_line(tmp_path):
    # issue 11: one cell of 1e12 gave a viscosity of 2.4e20 +- 2.4e20 without a warning
    lines = _lines()
    _edit(lines, 400, "Pxy", lambda t: "1e12")
    p = _write(tmp_path, lines)
    before = _digest(p)
    with pytest.raises(InputError) as exc:
        load_stress(p, temperature=96.3)
    msg = str(exc.value)
    for word in (f"{p}:400:", "'Pxy'", "1e+12", "robust standard deviations",
                 "damaged value", "fix: repair or remove"):
        assert word in msg, word
    assert _digest(p) == before  # the input is not touched


def test_a_scaled_component_disagrees_with_the_pressure_column(tmp_path):
    # a whole component x1e12 keeps its shape (no outlier), but its diagonal no longer
    # adds up to the engine's own pressure column
    lines = _lines()
    for ln in range(277, 478):
        _edit(lines, ln, "Pyy", lambda t: f"{float(t) * 1e12:.8g}")
    for ln in range(46, 247):
        _edit(lines, ln, "Pyy", lambda t: f"{float(t) * 1e12:.8g}")
    s = load_stress(_write(tmp_path, lines), temperature=96.3)
    hit = [w for w in s.warnings if "disagree with the pressure column 'Press'" in w]
    assert len(hit) == 1 and "Pxx, Pyy, Pzz" in hit[0]


def test_a_later_run_with_fewer_components_is_named_with_its_size(tmp_path):
    # issue 11: the later run printed fewer components and was dropped without a word
    lines = _lines()
    for ln in range(276, 478):
        toks = lines[ln - 1].split()
        del toks[7:9]  # Pxz, Pyz
        lines[ln - 1] = "   " + "   ".join(toks) + "\n"
    s = load_stress(_write(tmp_path, lines), temperature=96.3)
    assert s.n == 201  # the first run alone
    hit = [w for w in s.warnings if "later thermo run 2" in w]
    assert len(hit) == 1
    for word in ("only 4 of the 6", "201 rows", "step 2000-4000", "left out", "--run"):
        assert word in hit[0], word


METAL = LOG.parent / "argon_metal_computepressure.log"  # run 2: 301 rows from line 86


def test_skip_auto_removes_a_first_row_ten_standard_deviations_away(tmp_path):
    # issue 11: `average --skip auto` kept a first row at 229 K in a run at 86.5 K
    import json

    import numpy as np
    from click.testing import CliRunner

    from transport.cli import main
    from transport.io import read_table

    temp = np.asarray(read_table(METAL).column("Temp"), dtype=float)
    med = float(np.median(temp))
    sd = 1.4826 * float(np.median(np.abs(temp - med)))
    lines = METAL.read_text().splitlines(keepends=True)
    assert lines[84].split()[:2] == ["Step", "Temp"]
    toks = lines[85].split()
    toks[1] = f"{med + 12.0 * sd:.6g}"  # 12 robust standard deviations above
    lines[85] = "   " + "   ".join(toks) + "\n"
    p = tmp_path / "transient.log"
    p.write_text("".join(lines))
    res = CliRunner().invoke(main, ["--quiet", "average", str(p), "--column", "Temp",
                                    "--skip", "auto", "--json", "-"])
    assert res.exit_code == 0, res.output
    r = json.loads(res.stdout)["results"][0]
    assert r["diagnostics"]["skip_samples"] >= 1
    # the truth: the same run without its first row (plain numpy mean of rows 2..301);
    # the remaining skip (if any) moves the mean by far less than its error bar
    assert abs(r["value"] - temp[1:].mean()) < r["stderr"]


def test_volume_zero_is_refused_even_with_a_volume_column():
    # issue 11: `--volume 0` on a log with a volume column was accepted with a note
    with pytest.raises(InputError) as exc:
        load_stress(LOG, temperature=96.3, volume=0.0)
    assert "--volume 0.0 is not a positive number" in str(exc.value)
    assert "column 'Volume'" in str(exc.value)


def test_replicas_in_different_units_are_named_as_such():
    # issue 11: reported as "different sampling intervals [0.0, 0.02]" with a wrong fix
    from transport.viscosity import analyse_viscosity

    lj = load_stress(LOG.parent.parent / "lj_viscosity" / "lj_visc_rep1.log.gz",
                     temperature=0.722)
    real = load_stress(LOG, temperature=96.3)
    with pytest.raises(InputError) as exc:
        analyse_viscosity([lj, real])
    msg = str(exc.value)
    assert "different unit systems: lj" in msg and "real" in msg
    assert "sampling" not in msg and "--units" in msg
