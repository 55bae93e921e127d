"""Malformed and unusual input through the command line: `inspect`, `average`, `viscosity`.

The contract (DESIGN.md, helper rules): bad input gives exactly one line on stderr that
names the file (and the line where one applies), what was expected and the fix; exit code
2; no traceback; no output file (--json, --plot) and no partial one; the inputs are never
modified. Unexpected internal errors give one line with exit code 1 and a hint to use
--debug, which shows the traceback. Unusual but valid input (CRLF line endings, Latin-1
text, a log cut inside its last line, a plain-text file named .gz) works.

Every file here is built in tmp_path from an invented thermo log of our own (random
numbers, no physics): the checks are about the handling of the files, not the values.
"""

from __future__ import annotations

import gzip
import hashlib
import io
import json
import os
import shutil
import subprocess
import sys
import tempfile
from pathlib import Path
from types import SimpleNamespace

import numpy as np
import pytest
from click.testing import CliRunner
from scipy import signal

from transport.cli import main

COLS = ["Step", "Temp", "Pxx", "Pyy", "Pzz", "Pxy", "Pxz", "Pyz", "Volume"]
PXY = COLS.index("Pxy")


def _hdr(cols: list[str]) -> str:
    return "   " + "".join(f"{c:<15}" for c in cols) + "\n"  # padded, as the engine does


def _rows(n: int, *, seed: int = 0, start: int = 0, every: int = 10,
          ncols: int = len(COLS)) -> list[str]:
    """Rows of the production run: step, temperature, six pressures (bar), volume."""
    rng = np.random.default_rng(seed)
    # the pressures are a moving average of three white-noise rows (correlation 2/3, 1/3,
    # 0 at lags 1, 2, 3), so that the stress is resolved by the sampling (white noise is
    # refused as sampled too coarsely) and decorrelates within a few rows
    noise = rng.normal(0.0, 100.0 / np.sqrt(3.0), (n + 2, 6))
    press = signal.lfilter([1.0, 1.0, 1.0], [1.0], noise, axis=0)[2:]
    vals = np.column_stack([300.0 + rng.normal(size=n), press,
                            np.full(n, 8000.0)])[:, : ncols - 1]
    return [f"{start + every * i:10d}   " + " ".join(f"{v:<14.8g}" for v in row) + " \n"
            for i, row in enumerate(vals)]


def _set(rows: list[str], i: int, col: int, token: str) -> None:
    toks = rows[i].split()
    toks[col] = token
    rows[i] = "   ".join(toks) + " \n"


def make_log(path, *, n: int = 1000, rows: list[str] | None = None, units: str | None = "metal",
             timestep: str | None = "0.002", cols: list[str] = COLS, end: str = "Loop time "
             "of 1.0 on 1 procs for 4000 steps with 256 atoms\n", seed: int = 0):
    """An invented engine log: an equilibration run without the pressure tensor, then the
    production run. Returns (path, line of the production header)."""
    pre = ["LAMMPS (22 Jul 2025 - Update 4)\n"]
    if units:
        pre.append(f"units           {units}\n")
    if timestep:
        pre.append(f"timestep        {timestep}\n")
    pre += ["thermo_style    custom step temp press\n", "run             20\n",
            _hdr(["Step", "Temp", "Press"]),
            "         0   300            1.5           \n",
            "        10   301            1.7           \n",
            "        20   302            1.6           \n",
            "Loop time of 0.1 on 1 procs for 20 steps with 256 atoms\n",
            "thermo_style    custom " + " ".join(c.lower() for c in cols) + "\n",
            "run             4000\n"]
    header_line = len(pre) + 1
    body = rows if rows is not None else _rows(n, seed=seed, ncols=len(cols))
    text = "".join(pre) + _hdr(cols) + "".join(body) + end
    path.write_text(text, newline="")
    return path, header_line


def _csv(path, header: str, rows: list[str], newline: str = "\n"):
    path.write_text(header + newline + newline.join(rows) + newline, newline="")
    return path


def _npz(path, **arrays):
    buf = io.BytesIO()
    np.savez(buf, **arrays)
    path.write_bytes(buf.getvalue())
    return path


def _digest(folder) -> dict[str, str]:
    out = {}
    for p in sorted(folder.rglob("*")):
        if p.is_file():
            try:
                out[str(p)] = hashlib.sha256(p.read_bytes()).hexdigest()
            except PermissionError:
                out[str(p)] = f"unreadable {p.stat().st_mtime_ns}"
    return out


def invoke(args: list[str]):
    return CliRunner().invoke(main, args)


#: The unprivileged user the permission case runs as when the suite runs as root.
NOBODY = 65534


def invoke_as_nobody(args: list[str]) -> SimpleNamespace:
    """Run the command in a forked child that has dropped root for uid/gid 65534.

    Root reads any file whatever its mode (CAP_DAC_OVERRIDE), so a file with mode 0 is
    only unreadable to an unprivileged user; CI containers often run as root. The child
    reports the CliRunner result through a pipe.
    """
    r, w = os.pipe()
    pid = os.fork()
    if pid == 0:  # pragma: no cover - child
        code = 1
        try:
            os.close(r)
            os.setgroups([])
            os.setgid(NOBODY)
            os.setuid(NOBODY)
            res = CliRunner().invoke(main, args)
            exc = res.exception
            payload = {"exit_code": res.exit_code, "stdout": res.stdout,
                       "stderr": res.stderr, "output": res.output,
                       "exception": None if exc is None or isinstance(exc, SystemExit)
                       else repr(exc)}
            with os.fdopen(w, "w") as fh:
                json.dump(payload, fh)
            code = 0
        finally:
            os._exit(code)
    os.close(w)
    with os.fdopen(r) as fh:
        text = fh.read()
    _, status = os.waitpid(pid, 0)
    assert os.WIFEXITED(status) and os.WEXITSTATUS(status) == 0 and text, text
    payload = json.loads(text)
    if payload["exception"] is not None:
        payload["exception"] = RuntimeError(payload["exception"])
    return SimpleNamespace(**payload)


# ---- the cases --------------------------------------------------------------------------
# Each builder gets a folder and returns (input files, extra options, commands to try,
# the name the message must carry, a fragment the message must carry or a tuple of
# alternatives).

ALL = ("inspect", "average", "viscosity")
READ = ALL  # the file cannot be read at all: every command fails
ANALYSE = ("average", "viscosity")  # readable (inspect reports it) but unusable


def _c_empty(d):
    (d / "empty.log").write_text("")
    return [d / "empty.log"], [], READ, "empty.log", "file is empty"


def _c_header_only(d):
    p, hl = make_log(d / "log.header", rows=[], end="")
    return [p], [], READ, f"log.header:{hl}:", "has no rows of numbers after it"


def _c_garbage(d):
    (d / "garbage.log").write_bytes(
        np.random.default_rng(1).integers(0, 256, 4096, dtype=np.uint8).tobytes())
    return [d / "garbage.log"], [], READ, "garbage.log", "not a text file"


def _c_utf16(d):
    p, _ = make_log(d / "utf16.log")
    p.write_bytes(p.read_text().encode("utf-16"))
    return [p], [], READ, "utf16.log", "UTF-16"


def _gz_log(d, name, n=400):
    p, _ = make_log(d / "plain.log", n=n)
    data = gzip.compress(p.read_bytes())
    p.unlink()
    return data


def _c_cr_only(d):
    p, _ = make_log(d / "mac.log")
    p.write_bytes(p.read_bytes().replace(b"\n", b"\r"))
    return [p], [], READ, "mac.log", "carriage return alone"


def _c_gzip_truncated(d):
    data = _gz_log(d, "t")
    (d / "cut.log.gz").write_bytes(data[: len(data) // 2])
    return [d / "cut.log.gz"], [], READ, "cut.log.gz", "cannot be decompressed"


def _c_gzip_truncated_late(d):
    # cut far beyond the first 64 KiB that format detection reads: fails while scanning
    data = _gz_log(d, "t", n=3000)
    (d / "late.log.gz").write_bytes(data[: int(len(data) * 0.9)])
    return [d / "late.log.gz"], [], READ, "late.log.gz", "cannot be decompressed"


def _c_gzip_corrupt(d):
    data = _gz_log(d, "c")
    (d / "bad.log.gz").write_bytes(data[:100] + bytes(200) + data[300:])
    return [d / "bad.log.gz"], [], READ, "bad.log.gz", "cannot be decompressed"


def _c_gz_not_gzip(d):
    (d / "fake.log.gz").write_bytes(bytes(range(256)) * 8)
    return [d / "fake.log.gz"], [], READ, "fake.log.gz", "not gzip-compressed"


def _c_header_row_mismatch(d):
    # a column dropped from the header but not from the rows
    p, hl = make_log(d / "mismatch.log", cols=[c for c in COLS if c != "Pyz"],
                     rows=_rows(400))
    return [p], [], READ, f"mismatch.log:{hl}:", "names 8 columns but the row after it"


def _c_missing_tensor_column(d):
    cols = [c for c in COLS if c != "Pyz"]
    p, hl = make_log(d / "nopyz.log", cols=cols)
    return [p], [], ("viscosity",), f"nopyz.log:{hl}:", "no pressure-tensor column for pyz"


def _c_short_row(d):
    rows = _rows(400)
    rows[200] = " ".join(rows[200].split()[:7]) + "\n"
    p, hl = make_log(d / "short.log", rows=rows)
    return [p], [], READ, f"short.log:{hl + 201}:", "row has 7 values but the header"


def _c_long_row(d):
    rows = _rows(400)
    rows[200] = rows[200].rstrip("\n") + " 5.0 6.0\n"
    p, hl = make_log(d / "long.log", rows=rows)
    return [p], [], READ, f"long.log:{hl + 201}:", "more values than the 9 names"


def _bad_value(d, name, token, fragment):
    rows = _rows(400)
    _set(rows, 150, PXY, token)
    p, hl = make_log(d / name, rows=rows)
    return [p], [], ANALYSE, f"{name}:{hl + 151}:", fragment


def _c_nan(d):
    return _bad_value(d, "nan.log", "nan", "non-finite value")


def _c_inf(d):
    return _bad_value(d, "inf.log", "-inf", "non-finite value")


def _c_huge(d):
    # 1e300 squared overflows double precision: refused at the line, not a silent inf
    return _bad_value(d, "huge.log", "1e300", "too large to analyse")


def _c_token(d):
    rows = _rows(400)
    _set(rows, 150, 3, "abc")
    p, hl = make_log(d / "token.log", rows=rows)
    return [p], [], READ, f"token.log:{hl + 151}:", "'abc' is not a number"


def _c_bad_number(d):
    rows = _rows(400)
    _set(rows, 150, 4, "1.2.3")
    p, hl = make_log(d / "token2.log", rows=rows)
    return [p], [], READ, f"token2.log:{hl + 151}:", "'1.2.3' is not a number"


def _c_no_units(d):
    p, _ = make_log(d / "nounits.log", units=None, timestep=None)
    return [p], [], ("viscosity",), "nounits.log", "pass --units"


def _c_unknown_units(d):
    p, _ = make_log(d / "log.nounits", units=None)
    return [p], ["--units", "furlongs"], READ, "log.nounits", "unknown unit system 'furlongs'"


def _c_gap(d):
    p, hl = make_log(d / "gap.log", rows=_rows(200) + _rows(200, seed=3, start=2010))
    return [p], [], ANALYSE, f"gap.log:{hl + 201}:", "not evenly spaced"


def _c_duplicate_step(d):
    rows = _rows(400)
    rows.insert(200, rows[199])
    p, hl = make_log(d / "dup.log", rows=rows)
    return [p], [], ANALYSE, f"dup.log:{hl + 201}:", "repeated"


def _tensor_rows(n=1000):
    rng = np.random.default_rng(2)
    # correlated over a few rows, as in _rows (white noise is refused as too coarse)
    press = signal.lfilter([1.0, 1.0, 1.0], [1.0], rng.normal(size=(n + 2, 6)), axis=0)[2:]
    return [f"{i * 0.01:.2f}," + ",".join(f"{v:.6g}" for v in row) + ",1000"
            for i, row in enumerate(press)]


def _c_csv_duplicate_names(d):
    p = _csv(d / "dupnames.csv", "time,pxx,pyy,pzz,pxy,pxz,pyz,pxy", _tensor_rows())
    return [p], ["--units", "metal"], READ, "dupnames.csv:1:", "appears 2 times"


def _c_decimal_commas(d):
    # spreadsheet export in a decimal-comma locale: ';' separators, '1,5' numbers
    rows = [r.replace(",", ";").replace(".", ",") for r in _tensor_rows()]
    p = _csv(d / "comma.csv", "time;pxx;pyy;pzz;pxy;pxz;pyz;vol", rows)
    return [p], ["--units", "metal"], READ, "comma.csv:2:", "decimal commas"


def _c_fortran_exponents(d):
    rows = [" ".join(f"{float(v):.6E}".replace("E", "D") for v in r.split(","))
            for r in _tensor_rows()]
    p = _csv(d / "fortran.dat", "time pxx pyy pzz pxy pxz pyz vol", rows)
    return [p], ["--units", "metal"], READ, "fortran.dat:2:", "Fortran 'D' exponents"


def _c_csv_duplicate_plain_name(d):
    rows = [f"{i},{i % 7},{-i % 5}" for i in range(100)]
    p = _csv(d / "dupplain.csv", "step,PotEng,PotEng", rows)
    return [p], ["--column", "PotEng"], ("average",), "dupplain.csv:1:", "more than once"


def _c_csv_unequal_rows(d):
    rows = _tensor_rows()
    rows[100] = "1.00,1,2"
    p = _csv(d / "unequal.csv", "time,pxx,pyy,pzz,pxy,pxz,pyz,vol", rows)
    return [p], ["--units", "metal"], READ, "unequal.csv:102:", "row has 3 values"


def _c_npz_without_arrays(d):
    p = _npz(d / "other.npz", energy=np.arange(50.0), step=np.arange(50.0))
    return [p], [], ANALYSE, "other.npz", "energy"


def _c_npy_wrong_shape(d):
    buf = io.BytesIO()
    np.save(buf, np.zeros((10, 7)))
    (d / "plain.npy").write_bytes(buf.getvalue())
    return [d / "plain.npy"], [], READ, "plain.npy", "unnamed array of shape (10, 7)"


def _c_directory(d):
    (d / "run1").mkdir()
    return [d / "run1"], [], READ, "run1", "is a directory"


def _c_nonexistent(d):
    return [d / "no_such.log"], [], READ, "no_such.log", "file not found"


def _c_unreadable(d):
    p, _ = make_log(d / "secret.log")
    p.chmod(0)
    # the readers say "cannot be read"; `inspect` declares FILE a readable click.Path, so
    # click refuses it first ("is not readable"): one line naming the file either way
    return [p], [], READ, "secret.log", ("cannot be read", "is not readable")


def _c_single_row(d):
    p, _ = make_log(d / "one.log", n=1)
    return [p], [], ANALYSE, "one.log", ("got 1;", "only 1 rows")


def _c_too_short(d):
    # 30 samples hold fewer than 4 pieces of 10 decorrelation times: the error says by how
    # much to extend the run
    p, _ = make_log(d / "brief.log", n=30)
    return [p], [], ("viscosity",), "brief.log", "extend the run by about"


def _c_constant_tensor(d):
    rows = _rows(400)
    for i in range(400):
        for c in range(2, 8):
            _set(rows, i, c, "0")
    p, _ = make_log(d / "flat.log", rows=rows)
    return [p], [], ("viscosity",), "flat.log", "does not fluctuate"


def _option_case(option: list[str], commands, fragment, **log_kw):
    def build(d):
        p, _ = make_log(d / "opt.log", **log_kw)
        return [p], option, commands, "opt.log", fragment
    return build


CASES = {
    "empty file": _c_empty,
    "only a header": _c_header_only,
    "binary garbage": _c_garbage,
    "UTF-16 text": _c_utf16,
    "CR-only line endings": _c_cr_only,
    "gzip truncated": _c_gzip_truncated,
    "gzip truncated after 64 KiB": _c_gzip_truncated_late,
    "gzip corrupt": _c_gzip_corrupt,
    ".gz that is not gzip": _c_gz_not_gzip,
    "header and rows disagree": _c_header_row_mismatch,
    "missing pressure-tensor column": _c_missing_tensor_column,
    "short row mid-production": _c_short_row,
    "long row mid-production": _c_long_row,
    "NaN": _c_nan,
    "inf": _c_inf,
    "1e300 (squares overflow)": _c_huge,
    "non-numeric token": _c_token,
    "malformed number": _c_bad_number,
    "decimal commas": _c_decimal_commas,
    "Fortran D exponents": _c_fortran_exponents,
    "no units line, no --units": _c_no_units,
    "unknown --units": _c_unknown_units,
    "step gap": _c_gap,
    "duplicate step, not a restart": _c_duplicate_step,
    "CSV duplicated column names": _c_csv_duplicate_names,
    "CSV duplicated plain column": _c_csv_duplicate_plain_name,
    "CSV rows of unequal length": _c_csv_unequal_rows,
    "npz without the arrays": _c_npz_without_arrays,
    "npy of the wrong shape": _c_npy_wrong_shape,
    "directory": _c_directory,
    "nonexistent file": _c_nonexistent,
    "no read permission": _c_unreadable,
    "single data row": _c_single_row,
    "run too short": _c_too_short,
    "constant pressure tensor": _c_constant_tensor,
    "negative --temperature": _option_case(["--temperature", "-5"], ("viscosity",),
                                           "--temperature -5.0 is not a positive"),
    "zero --temperature": _option_case(["--temperature", "0"], ("viscosity",),
                                       "is not a positive"),
    "negative --volume": _option_case(["--volume", "-8000"], ("viscosity",),
                                      "--volume -8000.0 is not a positive",
                                      cols=COLS[:-1]),
    "zero --volume": _option_case(["--volume", "0"], ("viscosity",), "is not a positive",
                                  cols=COLS[:-1]),
    "negative --timestep": _option_case(["--timestep", "-1"], READ,
                                        "time step -1.0 is not positive", timestep=None),
    "zero --timestep": _option_case(["--timestep", "0"], READ,
                                    "time step 0.0 is not positive", timestep=None),
}


def _args(command: str, files, extra, out) -> list[str]:
    files = [str(f) for f in files]
    if command == "inspect":
        extra = [e for e in extra if e not in ("--column",)]
        return ["inspect", *files[:1], *extra, "--json", str(out / "r.json")]
    cols = [] if command != "average" or "--column" in extra else ["--column", "Pxy"]
    if command == "viscosity":
        extra = [e for i, e in enumerate(extra)
                 if e != "--column" and (i == 0 or extra[i - 1] != "--column")]
    return [command, *files, *cols, *extra, "--json", str(out / "r.json"), "--plot",
            str(out / "r.png")]


@pytest.mark.parametrize("case", list(CASES))
def test_bad_input_one_line_exit_2_nothing_written(tmp_path, case, request):
    run = invoke
    if case == "no read permission" and os.geteuid() == 0:
        # as root, run the commands as 'nobody' (invoke_as_nobody) from a folder that user
        # can reach: pytest's own temporary folders are private to root
        base = Path(tempfile.mkdtemp(prefix="transport-perm-"))
        request.addfinalizer(lambda: shutil.rmtree(base, ignore_errors=True))
        base.chmod(0o777)
        tmp_path = base
        run = invoke_as_nobody
    d = tmp_path / "in"
    d.mkdir()
    files, extra, commands, name, fragment = CASES[case](d)
    before = _digest(d)
    out = tmp_path / "out"  # does not exist: it is created only for a successful write
    for command in commands:
        res = run(_args(command, files, extra, out))
        err = res.stderr.strip()
        where = f"{case} / {command}: {err!r}"
        assert res.exit_code == 2, where
        assert err and "\n" not in err, where  # exactly one non-empty line
        assert err.startswith("transport: error: "), where
        fragments = fragment if isinstance(fragment, tuple) else (fragment,)
        assert name in err and any(f in err for f in fragments), where
        assert "; fix: " in err or "--help" in err, where
        assert "Traceback" not in res.output and "Traceback" not in err, where
        assert res.exception is None or isinstance(res.exception, SystemExit), where
        assert res.stdout == "", where
        assert not out.exists(), where
    assert _digest(d) == before  # inputs untouched


# ---- options that are wrong on their own -----------------------------------------------

@pytest.mark.parametrize("command", ["average", "viscosity"])
def test_unsupported_plot_suffix(tmp_path, command):
    p, _ = make_log(tmp_path / "run.log")
    args = [command, str(p), *(["--column", "Pxy"] if command == "average" else []),
            "--plot", str(tmp_path / "out" / "fig.jpg")]
    res = invoke(args)
    err = res.stderr.strip()
    assert res.exit_code == 2 and "\n" not in err, err
    assert "fig.jpg" in err and ".png" in err and "--plot" in err
    assert not (tmp_path / "out").exists()


@pytest.mark.parametrize("option,value", [("--cutoff", "inf"), ("--cutoff", "0"),
                                          ("--max-lag", "-1"), ("--skip", "nan"),
                                          ("--fit-window", "5:1"), ("--fit-window", "nan:1"),
                                          ("--temperature", "abc"), ("--run", "x")])
def test_bad_option_values_are_one_line(tmp_path, option, value):
    p, _ = make_log(tmp_path / "run.log")
    res = invoke(["viscosity", str(p), option, value, "--method", "both"])
    err = res.stderr.strip()
    assert res.exit_code == 2 and err and "\n" not in err, err
    assert option in err, err  # the message names the option at fault
    assert "Traceback" not in res.output


@pytest.mark.parametrize("args", [["--bogus"], ["viscosity"], ["frobnicate"],
                                  ["average", "x.log"], ["inspect"]])
def test_usage_errors_are_one_line(args):
    res = invoke(args)
    err = res.stderr.strip()
    assert res.exit_code == 2 and err.startswith("transport: error: "), err
    assert "\n" not in err and "--help" in err


def test_output_that_would_overwrite_an_input_is_refused(tmp_path):
    p, _ = make_log(tmp_path / "run.log")
    before = p.read_bytes()
    for command, extra in (("viscosity", []), ("average", ["--column", "Pxy"]),
                           ("inspect", [])):
        res = invoke([command, str(p), *extra, "--json", str(p)])
        assert res.exit_code == 2, res.stderr
        assert "would be overwritten" in res.stderr and "\n" not in res.stderr.strip()
    assert p.read_bytes() == before


def test_same_file_twice_is_not_two_replicas(tmp_path):
    p, _ = make_log(tmp_path / "run.log")
    for args in (["viscosity", str(p), str(p)], ["average", str(p), str(p), "--column", "Pxy"]):
        res = invoke(args)
        assert res.exit_code == 2 and "given twice" in res.stderr, res.stderr


def test_json_folder_is_created_but_not_under_a_file(tmp_path):
    # Decision: a missing folder for --json / --plot is created (after the computation
    # succeeded); a path that runs through an existing file is refused before any reading.
    p, _ = make_log(tmp_path / "run.log")
    out = tmp_path / "new" / "deeper" / "visc.json"
    res = invoke(["viscosity", str(p), "--json", str(out)])
    assert res.exit_code == 0, res.stderr
    assert json.loads(out.read_text())["command"] == "viscosity"
    blocked = tmp_path / "run.log" / "visc.json"
    res = invoke(["viscosity", str(p), "--json", str(blocked)])
    assert res.exit_code == 2 and "is a file, not a folder" in res.stderr
    assert "\n" not in res.stderr.strip()


@pytest.mark.parametrize("command", ["inspect", "average", "viscosity"])
def test_json_to_stdout_is_the_document_only(tmp_path, command):
    p, _ = make_log(tmp_path / "run.log")
    extra = ["--column", "Pxy"] if command == "average" else []
    res = invoke([command, str(p), *extra, "--json", "-"])
    assert res.exit_code == 0, res.stderr
    doc = json.loads(res.stdout)  # the whole of stdout is one JSON document
    assert doc["command"] == command
    assert res.stdout.strip().endswith("}")


def test_inspect_reports_unusable_data_with_its_line(tmp_path):
    # inspect is the diagnosis tool: a readable file whose data cannot be analysed is
    # reported (exit 0) with the line and the fix, rather than refused
    rows = _rows(400)
    _set(rows, 150, PXY, "nan")
    p, hl = make_log(tmp_path / "nan.log", rows=rows)
    res = invoke(["inspect", str(p)])
    assert res.exit_code == 0, res.stderr
    flat = " ".join(res.stdout.split())
    assert "not usable as a stress series" in flat and f"(line {hl + 151})" in flat


# ---- unusual but valid input works --------------------------------------------------------

def _viscosity_json(path, *extra) -> dict:
    res = invoke(["viscosity", str(path), "--temperature", "300", "--json", "-", *extra])
    assert res.exit_code == 0, res.stderr
    return json.loads(res.stdout)


def _average_json(path, *extra) -> dict:
    res = invoke(["average", str(path), "--column", "Pxy", "--json", "-", *extra])
    assert res.exit_code == 0, res.stderr
    return json.loads(res.stdout)


def test_crlf_line_endings_give_the_same_results(tmp_path):
    p, _ = make_log(tmp_path / "lf.log")
    q = tmp_path / "crlf.log"
    q.write_bytes(p.read_bytes().replace(b"\n", b"\r\n"))
    a, b = _viscosity_json(p), _viscosity_json(q)
    assert a["results"][0]["value"] == b["results"][0]["value"]
    assert a["inputs"][0]["rows"] == b["inputs"][0]["rows"] == 1000
    a, b = _average_json(p)["results"][0], _average_json(q)["results"][0]
    assert (a["value"], a["stderr"]) == (b["value"], b["stderr"])
    # a CRLF table (comma- and tab-separated) too
    rows = _tensor_rows()
    c1 = _csv(tmp_path / "lf.csv", "time,pxx,pyy,pzz,pxy,pxz,pyz,vol", rows)
    c2 = _csv(tmp_path / "crlf.csv", "time,pxx,pyy,pzz,pxy,pxz,pyz,vol", rows, "\r\n")
    c3 = _csv(tmp_path / "crlf.tsv", "time\tpxx\tpyy\tpzz\tpxy\tpxz\tpyz\tvol",
              [r.replace(",", "\t") for r in rows], "\r\n")
    ref = _viscosity_json(c1, "--units", "metal")["results"][0]["value"]
    for c in (c2, c3):
        assert _viscosity_json(c, "--units", "metal")["results"][0]["value"] == ref


def test_log_cut_inside_its_last_line_works_with_a_warning(tmp_path):
    rows = _rows(1001)
    whole, _ = make_log(tmp_path / "whole.log", rows=rows[:1000], end="")
    cut, _ = make_log(tmp_path / "cut.log", rows=[*rows[:1000], rows[1000][:25]], end="")
    a, b = _viscosity_json(whole), _viscosity_json(cut)
    assert a["results"][0]["value"] == b["results"][0]["value"]
    assert any("incomplete" in w for w in b["warnings"])
    res = invoke(["average", str(cut), "--column", "Pxy"])
    assert res.exit_code == 0 and "incomplete" in res.stderr


def test_latin1_bom_and_plain_text_named_gz_are_read(tmp_path):
    p, _ = make_log(tmp_path / "utf8.log")
    ref = _viscosity_json(p)["results"][0]["value"]
    latin = tmp_path / "latin1.log"
    latin.write_bytes(p.read_bytes().replace(b"LAMMPS (", "# r\xe9sum\xe9 \xb5s\nLAMMPS ("
                                             .encode("latin-1"), 1))
    assert _viscosity_json(latin)["results"][0]["value"] == ref
    bom = tmp_path / "bom.log"
    bom.write_bytes(b"\xef\xbb\xbf" + p.read_bytes())  # UTF-8 byte-order mark
    assert _viscosity_json(bom)["results"][0]["value"] == ref
    fake = tmp_path / "plain.log.gz"
    fake.write_bytes(p.read_bytes())
    doc = _viscosity_json(fake)
    assert doc["results"][0]["value"] == ref
    assert any("not compressed" in w for w in doc["warnings"])


# ---- internal errors ----------------------------------------------------------------------

def test_internal_error_is_one_line_exit_1_and_debug_raises(tmp_path, monkeypatch):
    import transport.viscosity

    def boom(*a, **k):
        raise RuntimeError("boom")

    monkeypatch.setattr(transport.viscosity, "analyse_viscosity", boom)
    p, _ = make_log(tmp_path / "run.log")
    out = tmp_path / "out"
    res = invoke(["viscosity", str(p), "--json", str(out / "r.json")])
    err = res.stderr.strip()
    assert res.exit_code == 1 and "\n" not in err, err
    assert "internal error" in err and "RuntimeError: boom" in err and "--debug" in err
    assert "Traceback" not in res.output and not out.exists()
    res = invoke(["--debug", "viscosity", str(p)])
    assert res.exit_code == 1 and isinstance(res.exception, RuntimeError)


def test_debug_prints_the_traceback(tmp_path):
    # a real process, so that what reaches the terminal is checked
    p, _ = make_log(tmp_path / "run.log")
    code = ("import sys, transport.viscosity as v\n"
            "def boom(*a, **k): raise RuntimeError('boom')\n"
            "v.analyse_viscosity = boom\n"
            "from transport.cli import main\n"
            "main(sys.argv[1:], prog_name='transport')\n")
    run = [sys.executable, "-c", code]
    quiet = subprocess.run([*run, "viscosity", str(p)], capture_output=True, text=True)
    assert quiet.returncode == 1 and quiet.stderr.strip().count("\n") == 0, quiet.stderr
    loud = subprocess.run([*run, "--debug", "viscosity", str(p)], capture_output=True,
                          text=True)
    assert loud.returncode == 1
    assert "Traceback (most recent call last)" in loud.stderr and "RuntimeError: boom" in \
        loud.stderr
    # bad input under --debug shows its traceback too
    bad = subprocess.run([*run[:2], "from transport.cli import main; main()", "--debug",
                          "viscosity", str(tmp_path / "missing.log")], capture_output=True,
                         text=True)
    assert bad.returncode == 1 and "InputError" in bad.stderr and "Traceback" in bad.stderr
