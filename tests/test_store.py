"""The results store: keys, one writer at a time, first row kept (stdlib sqlite3)."""

from __future__ import annotations

import sqlite3
import threading

import pytest

from transport.store import ResultStore, run_key


def test_key_changes_with_content_settings_and_version():
    k = run_key("abc", {"method": "green-kubo"}, "0.1.0")
    assert k == run_key("abc", {"method": "green-kubo"}, "0.1.0")
    assert k != run_key("abd", {"method": "green-kubo"}, "0.1.0")
    assert k != run_key("abc", {"method": "both"}, "0.1.0")
    assert k != run_key("abc", {"method": "green-kubo"}, "0.2.0")


def test_one_writer_at_a_time_and_first_row_kept(tmp_path):
    path = tmp_path / "s.sqlite"
    a = ResultStore(path)
    b = ResultStore(path, timeout=0.2)
    a._db.execute("BEGIN IMMEDIATE")  # a writer holds the database
    # sqlite3 documents 'database is locked' after the busy timeout (one writer at a time)
    with pytest.raises(sqlite3.OperationalError, match="locked"):
        b.put_many([("k", "run", "h", {}, "v", {"x": 2})])
    a._db.execute("INSERT INTO runs VALUES ('k', 'run', 'h', '{}', 'v', 0, '{\"x\": 1}')")
    a._db.execute("COMMIT")
    b.put_many([("k", "run", "h", {}, "v", {"x": 2})])  # same key: the first row stays
    assert b.get_many(["k", "missing"]) == {"k": {"x": 1}}
    assert a.count() == 1
    a.close()
    b.close()


def test_concurrent_writers_all_rows_land(tmp_path):
    path = tmp_path / "s.sqlite"
    ResultStore(path).close()

    def write(n0):
        with ResultStore(path) as s:
            for i in range(n0, n0 + 20):
                s.put_many([(f"k{i}", "r", "h", {}, "v", {"i": i})])

    threads = [threading.Thread(target=write, args=(n,)) for n in (0, 10, 20)]
    for t in threads:
        t.start()
    for t in threads:
        t.join()
    with ResultStore(path) as s:
        assert s.count() == 40  # keys 0..39; overlaps written once
        assert s.get_many(["k15"]) == {"k15": {"i": 15}}


def test_not_a_database_is_one_line(tmp_path):
    p = tmp_path / "s.sqlite"
    p.write_text("hello, not sqlite " * 100)
    from transport.errors import InputError

    with pytest.raises(InputError, match="cannot use the results store"):
        ResultStore(p)
