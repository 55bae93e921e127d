"""`transport inspect`: the report, the JSON document, and clean failures on bad input."""

from __future__ import annotations

import json

import numpy as np
import pytest
from click.testing import CliRunner

from transport.cli import main


def _hdr(cols: list[str]) -> str:
    return "   " + "".join(f"{c:<15}" for c in cols) + "\n"  # padded, as the engine does


def _row(step: int, vals: list[float]) -> str:
    return f"{step:10d}   " + " ".join(f"{v:<14.8g}" for v in vals) + " \n"


LOG = (
    "LAMMPS (22 Jul 2025 - Update 4)\n"
    "units           metal\n"
    "timestep        0.002\n"
    "thermo_style    custom step temp press\n"
    "run             100\n"
    + _hdr(["Step", "Temp", "Press"])
    + "".join(_row(s, [300.0 + s / 50, 1.5 + s / 500]) for s in (0, 50, 100))
    + "Loop time of 0.5 on 1 procs for 100 steps with 100 atoms\n"
    "thermo_style    custom step temp pxx pyy pzz pxy pxz pyz vol\n"
    "run             200\n"
    + _hdr(["Step", "Temp", "Pxx", "Pyy", "Pzz", "Pxy", "Pxz", "Pyz", "Volume"])
)


def make_log(tmp_path, rows: int = 21, tail: str = "Loop time of 1 on 1 procs\n"):
    rng = np.random.default_rng(5)
    body = "".join(_row(100 + 10 * i, [300.0, *rng.normal(size=6), 8000.0])
                   for i in range(rows))
    body = body.replace(f"\n{200:10d}", "\nWARNING: neighbor list overflow\n" + f"{200:10d}")
    p = tmp_path / "log.lammps"
    p.write_text(LOG + body + tail)
    return p


def run(args):
    return CliRunner().invoke(main, args)


def test_inspect_reports_runs_settings_and_warnings(tmp_path):
    p = make_log(tmp_path)
    res = run(["inspect", str(p)])
    assert res.exit_code == 0, res.output
    out = res.stdout
    assert "units      metal (units command at line 2)" in out
    assert "time step  0.002 ps (timestep command at line 3)" in out
    assert "thermo runs (2 found)" in out
    assert "no pressure tensor" in out  # run 1
    assert "step 100-300 every 10" in out and "21 rows kept" in out
    flat = " ".join(out.split())  # long lines are wrapped
    assert "skipped 1 line(s) of text inside thermo run 2 (first at line 24" in flat
    assert "pressure tensor found: 21 samples every 0.02 ps" in out  # 10 steps x 2 fs


def test_inspect_json_document(tmp_path):
    p = make_log(tmp_path)
    out = tmp_path / "out" / "inspect.json"
    res = run(["inspect", str(p), "--run", "2", "--json", str(out)])
    assert res.exit_code == 0, res.output
    doc = json.loads(out.read_text())
    assert doc["command"] == "inspect" and doc["results"] == []
    assert doc["settings"]["run"] == "2"
    assert [t["used"] for t in doc["tables"]] == [False, True]
    second = doc["tables"][1]
    assert second["rows"] == second["rows_used"] == 21
    assert second["columns"][:3] == ["Step", "Temp", "Pxx"]
    assert second["has_pressure_tensor"] and second["skipped_lines"] == 1
    assert doc["inputs"][0]["rows"] == 21 and doc["inputs"][0]["format"] == "lammps-log"
    assert doc["resolved"]["units"] == "metal" and doc["resolved"]["timestep"] == 0.002
    assert doc["resolved"]["stress"]["usable"] is True
    assert any("skipped 1 line" in w for w in doc["warnings"])
    # to standard output: the document only
    res = run(["inspect", str(p), "--json", "-"])
    assert json.loads(res.stdout)["command"] == "inspect"


def _bad_inputs(tmp_path):
    empty = tmp_path / "empty.log"
    empty.write_text("")
    garbage = tmp_path / "garbage.bin"
    garbage.write_bytes(np.random.default_rng(1).integers(0, 256, 4096, dtype=np.uint8)
                        .tobytes())
    prose = tmp_path / "notes.txt"
    prose.write_text("These are notes about a simulation.\nIt ran for 10 ns at 300 K.\n")
    header_only = tmp_path / "log.header"
    header_only.write_text("LAMMPS (x)\nunits real\nStep Temp Pxx Pyy\n")
    mismatch = make_log(tmp_path)
    text = mismatch.read_text().replace("       150   ", "       150   1.0  2.0\n", 1)
    mismatch = tmp_path / "log.mismatch"
    mismatch.write_text(text)
    return {
        "empty": (empty, "file is empty"),
        "binary": (garbage, "not a text file"),
        "prose": (prose, "no table found"),
        "header only": (header_only, "has no rows of numbers after it"),
        "missing": (tmp_path / "no_such.log", "file not found"),
        "mismatched row": (mismatch, "row has 3 values but the header"),
        "units clash": (make_log(tmp_path), "--units real disagrees"),
    }


@pytest.mark.parametrize("case", ["empty", "binary", "prose", "header only", "missing",
                                  "mismatched row", "units clash"])
def test_bad_input_is_one_clean_line_and_no_output_file(tmp_path, case):
    path, message = _bad_inputs(tmp_path)[case]
    out = tmp_path / "result.json"
    args = ["inspect", str(path), "--json", str(out)]
    if case == "units clash":
        args += ["--units", "real"]
    res = run(args)
    assert res.exit_code == 2
    err = res.stderr.strip()
    assert err.count("\n") == 0, err  # one line
    assert err.startswith("transport: error: ") and message in err
    assert str(path.name) in err
    assert "Traceback" not in res.output
    assert res.exception is None or isinstance(res.exception, SystemExit)
    assert not out.exists()


def test_bad_run_option_is_a_usage_error(tmp_path):
    res = run(["inspect", str(make_log(tmp_path)), "--run", "two"])
    assert res.exit_code == 2 and "--run" in res.stderr
