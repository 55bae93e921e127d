"""Parsing the numeric rows of one block: pandas' C parser in worker threads.

The block scanner (`_scan.py`) finds the headers and the extent of each block's rows and
hands their text here as jobs; each job is parsed by pandas' C parser, which releases the
GIL, and its kept columns are copied into the block's preallocated arrays. Errors come back
as data (row, message) for the scanner to turn into one InputError naming the file line.
"""

from __future__ import annotations

import csv
import re
from collections.abc import Callable
from concurrent.futures import Future
from dataclasses import dataclass
from typing import TYPE_CHECKING, Any

import numpy as np

from .._threads import available_cpus

if TYPE_CHECKING:
    import pandas as pd

    from ._scan import ScanBlock

_FIELDS_RE = re.compile(r"Expected (\d+) fields in line (\d+), saw (\d+)")

def _split_fields(line: str, sep: str) -> list[str]:
    if sep in (" ", r"\s+"):
        return line.split()
    parts = [p.strip() for p in line.split(sep)]
    while parts and parts[-1] == "":
        parts.pop()
    return parts



def _fill(stream: Any, buf: bytearray, start: int) -> int:
    """Read into buf[start:] until it is full or the stream ends; bytes read."""
    total = 0
    with memoryview(buf) as mv:
        while start + total < len(buf):
            got = stream.readinto(mv[start + total:])
            if not got:
                break
            total += got
    return total


@dataclass
class _Job:
    """Rows of one block to parse: their text and where the values go."""

    blk: ScanBlock
    buffer: bytearray
    source: _ViewReader
    lines: list[tuple[int, int]]  # (file line of the first row, rows) of each segment
    row0: int
    rows: int
    arrays: list[np.ndarray]  # the block's rows as when the job was made
    trailing: bool  # whether rows end with a separator, as known when the job was made
    future: Future[_Found] | None = None

    def file_line(self, k: int) -> int:
        """1-based file line of row k (0-based) of this job."""
        for ln, nl in self.lines:
            if k < nl:
                return ln + k
            k -= nl
        return self.lines[-1][0] + self.lines[-1][1] - 1  # pragma: no cover


@dataclass
class _Found:
    """What a parse job found: an error (message, row, InputError keywords) or a short row."""

    error: tuple[str, int, dict[str, str]] | None = None
    short_last: tuple[int, int] | None = None  # (row, values seen) of a short final row
    trailing_off: bool = False
    lo: np.ndarray | None = None  # smallest value of each kept column (nan if any is nan)
    hi: np.ndarray | None = None  # largest value of each kept column (nan if any is nan)


def _read_rows(job: _Job, trailing: bool) -> pd.DataFrame:
    """Parse rows with one spare column that catches rows with too many values.

    When the rows end with a separator (the engine pads every value, so each row ends in
    blanks) the spare column always exists and only the needed columns are converted;
    otherwise every column is converted, since pandas silently ignores surplus values
    outside `usecols`.
    """
    blk = job.blk  # names, separator and kept columns are fixed for the block
    kw: dict[str, Any] = dict(header=None, names=list(range(blk.ncols + 1)),
                              dtype=np.float64, engine="c", low_memory=False)
    if trailing:
        kw["usecols"] = sorted({*blk.keep, blk.ncols - 1, blk.ncols})
    if blk.sep == r"\s+":
        kw["sep"] = r"\s+"
    else:
        kw["sep"] = blk.sep
        kw["skipinitialspace"] = True
    if blk.sep in (" ", r"\s+"):
        kw["quoting"] = csv.QUOTE_NONE  # a stray quote is a bad value, not a string
    import pandas as pd  # imported on first use: reading trajectories does not need it

    job.source.seek(0)
    return pd.read_csv(job.source, **kw)


def _parse_job(job: _Job) -> _Found:
    """Parse a job's rows and write its kept columns into the block's arrays.

    Runs in a worker thread: pandas' C parser and numpy's copies release the GIL. Touches
    only the job's own rows of the arrays; everything else is reported back.
    """
    from pandas.errors import ParserError

    found = _Found()
    blk = job.blk
    ncols = blk.ncols
    per_row = dict(expected=f"{ncols} values per row", fix="repair or remove the damaged line")
    trailing = job.trailing
    try:
        try:
            df = _read_rows(job, trailing)
        except ParserError as exc:
            if not (trailing and "Too many columns specified" in str(exc)):
                raise
            trailing, found.trailing_off = False, True
            df = _read_rows(job, trailing)
    except ParserError as exc:
        m = _FIELDS_RE.search(str(exc))
        if m:
            found.error = (f"row has {m.group(3)} values but the header at line "
                           f"{blk.header_line} names {ncols}", int(m.group(2)) - 1, per_row)
        else:
            found.error = (f"cannot parse the rows of block {blk.index} ({exc})", 0, {})
        return found
    except ValueError:
        k, tok = _find_bad_token(job.source.text(), blk.sep)
        found.error = (f"{tok!r} is not a number", k, dict(
            expected=f"{ncols} numbers per row (header at line {blk.header_line})",
            fix="repair or remove the damaged line"))
        return found
    if len(df) != job.rows:
        # Only a quoted field spanning lines can do this (rows are counted by newlines).
        found.error = (f"cannot parse the rows of block {blk.index} (pandas read "
                       f"{len(df)} rows from {job.rows} lines; a quoted value spans lines?)",
                       0, {})
        return found
    if ncols in df.columns:
        bad = np.flatnonzero(~np.isnan(df[ncols].to_numpy()))
        if bad.size:
            found.error = (f"row has more values than the {ncols} names of the header at "
                           f"line {blk.header_line}", int(bad[0]),
                           dict(expected=f"{ncols} values per row",
                                fix="repair or remove the line"))
            return found
    nan_rows = np.flatnonzero(np.isnan(df[ncols - 1].to_numpy()))
    if nan_rows.size:
        lines = job.source.text().split(b"\n")
        for r in nan_rows.tolist():
            ntok = len(_split_fields(lines[r].decode("utf-8", "replace"), blk.sep))
            if ntok >= ncols:
                continue  # a genuine 'nan' written by the engine
            if r != job.rows - 1:
                found.error = (f"row has {ntok} values but the header at line "
                               f"{blk.header_line} names {ncols}", r, per_row)
                return found
            found.short_last = (r, ntok)
    end = job.row0 + job.rows
    lo, hi = np.empty(len(blk.keep)), np.empty(len(blk.keep))
    for j, (a, col) in enumerate(zip(job.arrays, blk.keep, strict=True)):
        v = df[col].to_numpy()
        a[job.row0: end] = v
        lo[j], hi[j] = v.min(), v.max()  # while the values are in the cache
    found.lo, found.hi = lo, hi
    return found


class _ViewReader:
    """Minimal file object over memoryviews joined by newlines, for pandas.

    The first read returns all the text, whatever size pandas asks for: its C parser takes
    any length, and then tokenises it without taking the GIL again (asking in 256 kB pieces
    would make a worker thread wait for the GIL over a hundred times per chunk).
    """

    def __init__(self, views: list[memoryview]) -> None:
        self._views = views
        self._done = False

    def read(self, n: int = -1) -> bytes:
        if self._done:
            return b""
        self._done = True
        return self.text()

    def seek(self, pos: int) -> None:
        if pos != 0:  # pragma: no cover - pandas only rewinds
            raise ValueError("only a rewind is supported")
        self._done = False

    def text(self) -> bytes:
        views = self._views
        return bytes(views[0]) if len(views) == 1 else b"\n".join(bytes(v) for v in views)

    def release(self) -> None:
        for v in self._views:
            v.release()

    def __iter__(self) -> Any:  # pandas checks for an iterable file object
        return iter(())


class _InlinePool:
    """Runs each job at once in the calling thread (small files: no threads to start)."""

    def submit(self, fn: Callable[[_Job], _Found], job: _Job) -> Future[_Found]:
        fut: Future[_Found] = Future()
        try:
            fut.set_result(fn(job))
        except BaseException as exc:  # handed to the caller by fut.result()
            fut.set_exception(exc)
        return fut

    def shutdown(self, wait: bool = True, cancel_futures: bool = False) -> None:
        pass


def _workers() -> int:
    """Parse threads: the CPUs this process may use, at most 4."""
    return min(available_cpus(), 4)


def _find_bad_token(data: bytes, sep: str) -> tuple[int, str]:
    for k, raw in enumerate(data.split(b"\n")):
        for tok in _split_fields(raw.decode("utf-8", "replace"), sep):
            try:
                float(tok)
            except ValueError:
                return k, tok
    return 0, "?"  # pragma: no cover - only called after pandas found one
