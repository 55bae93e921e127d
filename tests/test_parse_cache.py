"""The parse cache (``transport.io._cache``): hits, misses, eviction, failures, interruption.

The reference each check compares against is a fresh parse of the same file with the cache
off (``load_stress`` without ``cache``), which the rest of the suite checks against the
engine's own output and published values.
"""

from __future__ import annotations

import gzip
import os
import signal
import subprocess
import sys
import time
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from conftest import DATA, committed

import transport.io as tio
from transport.errors import Note
from transport.io._cache import ParseCache, cache_folder, max_bytes

LOG_GZ = DATA / "lj_viscosity" / "lj_visc_rep1.log.gz"


@pytest.fixture
def plain_log(tmp_path: Path) -> Path:
    """A plain-text copy of a committed engine log (real data, 5x10^4 lines)."""
    p = tmp_path / "rep1.log"
    p.write_bytes(gzip.decompress(committed(LOG_GZ).read_bytes()))
    return p


def _count_parses(monkeypatch: pytest.MonkeyPatch) -> list[int]:
    calls: list[int] = []
    real = tio._read

    def counting(*a, **k):
        calls.append(1)
        return real(*a, **k)

    monkeypatch.setattr(tio, "_read", counting)
    return calls


def _same_series(a, b) -> None:
    # a copy of the same float64 values: equal to the bit
    np.testing.assert_array_equal(a.pressure, b.pressure)
    assert a.dt == b.dt and a.temperature == b.temperature
    np.testing.assert_array_equal(a.volume, b.volume)
    assert a.source == b.source
    assert a.warnings == b.warnings


def test_hit_gives_the_fresh_parse_without_parsing(plain_log, tmp_path, monkeypatch):
    fresh = tio.load_stress(plain_log)
    cache = ParseCache(tmp_path / "cache")
    calls = _count_parses(monkeypatch)
    first = tio.load_stress(plain_log, cache=cache)
    second = tio.load_stress(plain_log, cache=ParseCache(tmp_path / "cache"))
    assert len(calls) == 1  # parsed once, then served
    _same_series(first, fresh)
    _same_series(second, fresh)
    files = sorted(p.suffix for p in (tmp_path / "cache").iterdir())
    assert files == [".json", ".npy"]
    # never beside the input
    assert sorted(p.name for p in plain_log.parent.iterdir()) == ["cache", "rep1.log"]


def test_other_settings_are_other_entries(plain_log, tmp_path, monkeypatch):
    cache = ParseCache(tmp_path / "cache")
    calls = _count_parses(monkeypatch)
    a = tio.load_stress(plain_log, cache=cache, run="last")
    b = tio.load_stress(plain_log, cache=cache)
    assert len(calls) == 2  # the settings are part of the key
    assert a.source.description != b.source.description  # what was read, in words
    assert len(list((tmp_path / "cache").glob("*.json"))) == 2


def test_changed_bytes_same_size_and_mtime_is_a_miss(plain_log, tmp_path, monkeypatch):
    cache = ParseCache(tmp_path / "cache")
    before = tio.load_stress(plain_log, cache=cache)
    st = plain_log.stat()
    lines = plain_log.read_bytes().split(b"\n")
    # the last production row (Step Temp Press Pxx ...): change the last digit of Pxx,
    # keeping the length
    i = next(k for k in range(len(lines) - 1, 0, -1)
             if lines[k].startswith(b"    200000 "))
    toks = lines[i].split()
    j = lines[i].index(toks[3]) + len(toks[3]) - 1
    old = lines[i][j:j + 1]
    new = b"1" if old != b"1" else b"2"
    lines[i] = lines[i][:j] + new + lines[i][j + 1:]
    plain_log.write_bytes(b"\n".join(lines))
    os.utime(plain_log, ns=(st.st_atime_ns, st.st_mtime_ns))
    assert (plain_log.stat().st_size, plain_log.stat().st_mtime_ns) == \
        (st.st_size, st.st_mtime_ns)
    calls = _count_parses(monkeypatch)
    after = tio.load_stress(plain_log, cache=cache)
    assert len(calls) == 1  # parsed again, not served
    _same_series(after, tio.load_stress(plain_log))
    assert not np.array_equal(after.pressure, before.pressure)


def _rewrite_same_size_and_mtime(path: Path) -> None:
    """Change one digit of the last production row's Pxx, then put the mtime back."""
    st = path.stat()
    lines = path.read_bytes().split(b"\n")
    i = next(k for k in range(len(lines) - 1, 0, -1)
             if lines[k].startswith(b"    200000 "))
    toks = lines[i].split()
    j = lines[i].index(toks[3]) + len(toks[3]) - 1
    lines[i] = lines[i][:j] + (b"1" if lines[i][j:j + 1] != b"1" else b"2") + lines[i][j + 1:]
    path.write_bytes(b"\n".join(lines))
    os.utime(path, ns=(st.st_atime_ns, st.st_mtime_ns))
    assert (path.stat().st_size, path.stat().st_mtime_ns) == (st.st_size, st.st_mtime_ns)


def test_settled_entry_is_served_without_reading_the_file(plain_log, tmp_path, monkeypatch):
    # an entry stored well after the input's last change is trusted on its key (device,
    # inode, size, mtime, ctime): no checksum of the input's bytes on a hit
    import transport.io._cache as cmod
    import transport.io._open as omod

    monkeypatch.setattr(cmod, "RACY_NS", 0)
    cache = ParseCache(tmp_path / "cache")
    first = tio.load_stress(plain_log, cache=cache)

    def no_hash(*a, **k):
        raise AssertionError("the input was hashed on a settled hit")

    monkeypatch.setattr(omod, "FileHash", no_hash)
    calls = _count_parses(monkeypatch)
    _same_series(tio.load_stress(plain_log, cache=cache), first)
    assert calls == []


def test_settled_entry_rewritten_same_size_and_mtime_is_a_miss(plain_log, tmp_path,
                                                               monkeypatch):
    # without the checksum, the status-change time (set by the kernel on the write and on
    # os.utime, never set back by a user) makes the rewritten file another key
    import transport.io._cache as cmod

    monkeypatch.setattr(cmod, "RACY_NS", 0)
    cache = ParseCache(tmp_path / "cache")
    before = tio.load_stress(plain_log, cache=cache)
    _rewrite_same_size_and_mtime(plain_log)
    calls = _count_parses(monkeypatch)
    after = tio.load_stress(plain_log, cache=cache)
    assert len(calls) == 1  # parsed again, not served
    assert not np.array_equal(after.pressure, before.pressure)


def test_least_recently_used_entries_are_evicted(plain_log, tmp_path, monkeypatch):
    other = tmp_path / "rep1_copy.log"
    other.write_bytes(plain_log.read_bytes())
    folder = tmp_path / "cache"
    tio.load_stress(plain_log, cache=ParseCache(folder))
    one_entry = sum(p.stat().st_size for p in folder.iterdir())
    # room for one entry and a half: storing the second must remove the first
    cache = ParseCache(folder, limit=int(1.5 * one_entry))
    tio.load_stress(other, cache=cache)
    assert len(list(folder.glob("*.json"))) == len(list(folder.glob("*.npy"))) == 1
    assert sum(p.stat().st_size for p in folder.iterdir()) <= cache.limit
    calls = _count_parses(monkeypatch)
    tio.load_stress(other, cache=cache)
    assert calls == []  # the newer entry stayed
    tio.load_stress(plain_log, cache=cache)
    assert calls == [1]  # the older one was removed


def test_limit_and_folder_from_the_environment(monkeypatch, tmp_path):
    monkeypatch.setenv("TRANSPORT_CACHE_MAX", "2G")
    assert max_bytes() == 2 * 10**9
    monkeypatch.delenv("TRANSPORT_CACHE_MAX")
    assert max_bytes() == 4 * 10**9
    monkeypatch.setenv("TRANSPORT_CACHE", str(tmp_path / "x"))
    assert cache_folder() == tmp_path / "x"
    monkeypatch.delenv("TRANSPORT_CACHE")
    monkeypatch.setenv("XDG_CACHE_HOME", str(tmp_path / "xdg"))
    assert cache_folder() == tmp_path / "xdg" / "transport"
    assert cache_folder(tmp_path / "given") == tmp_path / "given"


def test_unwritable_folder_gives_a_note_and_the_result(plain_log, tmp_path):
    blocker = tmp_path / "a_file"
    blocker.write_text("not a folder\n")
    # a folder below a regular file cannot be created, even by root
    s = tio.load_stress(plain_log, cache=ParseCache(blocker / "cache"))
    fresh = tio.load_stress(plain_log)
    np.testing.assert_array_equal(s.pressure, fresh.pressure)
    notes = [w for w in s.warnings if isinstance(w, Note)]
    assert len(notes) == 1 and "parse cache" in notes[0] and "not written" in notes[0]


def test_cli_no_cache_and_cache_dir(plain_log, tmp_path):
    from click.testing import CliRunner

    from transport.cli import main

    folder = tmp_path / "c"
    r = CliRunner().invoke(main, ["viscosity", str(plain_log), "--no-cache",
                                  "--cache", str(folder)])
    assert r.exit_code == 0, r.output
    assert not folder.exists()
    r2 = CliRunner().invoke(main, ["viscosity", str(plain_log), "--cache", str(folder)])
    assert r2.exit_code == 0, r2.output
    assert sorted(p.suffix for p in folder.iterdir()) == [".json", ".npy"]
    r3 = CliRunner().invoke(main, ["viscosity", str(plain_log), "--cache", str(folder)])
    assert r3.output == r2.output  # served from the cache: the same report


def test_killed_run_leaves_no_half_written_entry(tmp_path):
    """Kill a run while it writes its entry (SIGKILL: no clean-up can run), then check
    that no entry looks complete without being so, and that the next run removes the
    temporary and serves the right numbers."""
    rng = np.random.default_rng(11)
    n = 300_000  # ~22 MB to write and fsync: a window wide enough to be caught by polling
    log = tmp_path / "big.log"
    frame = pd.DataFrame(rng.normal(0.0, 1.0, (n, 6)),
                         columns=["Pxx", "Pyy", "Pzz", "Pxy", "Pxz", "Pyz"])
    frame.insert(0, "Volume", 1000.0)
    frame.insert(0, "Temp", 1.0)
    frame.insert(0, "Step", np.arange(n))
    with open(log, "w") as fh:
        fh.write("units lj\ntimestep 0.005\n")
        frame.to_csv(fh, sep=" ", index=False, float_format="%.6f")
        fh.write("Loop time of 1.0 on 1 procs for 100 steps with 800 atoms\n")
    folder = tmp_path / "cache"
    code = ("import sys; from transport.io import load_stress; "
            "from transport.io._cache import ParseCache; "
            "load_stress(sys.argv[1], cache=ParseCache(sys.argv[2]))")
    proc = subprocess.Popen([sys.executable, "-c", code, str(log), str(folder)])
    seen_partial = False
    deadline = time.monotonic() + 120
    while proc.poll() is None and time.monotonic() < deadline:
        if folder.is_dir() and any(p.name.startswith(".partial-") for p in folder.iterdir()):
            seen_partial = True
            os.kill(proc.pid, signal.SIGKILL)
            break
        time.sleep(0.0005)
    proc.wait()
    assert seen_partial, "the run ended before its entry was being written"
    assert not list(folder.glob("*.json"))  # no entry: its record is written last
    fresh = tio.load_stress(log)
    again = tio.load_stress(log, cache=ParseCache(folder))
    np.testing.assert_array_equal(again.pressure, fresh.pressure)
    names = sorted(p.name for p in folder.iterdir())
    assert not [nm for nm in names if nm.startswith(".partial-")]  # the dead run's, removed
    assert [Path(nm).suffix for nm in names] == [".json", ".npy"]
