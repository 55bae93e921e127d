"""Block scanner shared by the thermo-log and text-table readers.

The file is read in large chunks of bytes. In each chunk one regular expression finds the
lines whose first non-blank character cannot start a number ("special" lines: headers,
commands, warnings, comments, blank lines); everything between them is numeric data, handed
in bulk to pandas' C parser and copied into preallocated column arrays. Python only ever
loops over special lines and chunks, never over data rows; memory holds one chunk of text
plus the columns being filled.

A *block* is a header line followed by numeric rows with as many values as the header has
names. A special line inside a block is skipped as interleaved text when rows with the same
number of values follow it; otherwise it ends the block. The log flavour also follows the
commands echoed in the log (``units``, ``timestep``, ``compute ... pressure``, ``variable
... equal``, ``run``, ``minimize``) so that each block knows the settings in force.
"""

from __future__ import annotations

import re
from collections import deque
from collections.abc import Callable, Collection
from concurrent.futures import ThreadPoolExecutor
from dataclasses import dataclass, field
from typing import TYPE_CHECKING, Any

import numpy as np

from .._memory import bulk_empty, disk_empty, file_backed, release_pages, spills
from .._progress import progress_bar
from ..errors import InputError
from ._columns import TENSOR_ORDER, map_columns
from ._open import DECOMPRESSION_ERRORS, Opened
from ._rowparse import (
    _fill,
    _InlinePool,
    _Job,
    _parse_job,
    _split_fields,
    _ViewReader,
    _workers,
)

if TYPE_CHECKING:
    from pathlib import Path

__all__ = ["ScanBlock", "ScanResult", "scan"]

CHUNK_BYTES = 1 << 25  # 32 MiB of text per parse: big enough to amortise, small in memory
SLACK_BYTES = 1 << 16  # room kept for the carried-over lines
MAX_LINE_BYTES = 1 << 24
_SPECIAL = re.compile(rb"\n(?![ \t]*[0-9+\-.])")
_NUMERIC_START = re.compile(rb"[ \t]*[0-9+\-.]")
_IDENT = re.compile(r"^[A-Za-z_][A-Za-z0-9_/\[\]\.:\-]*$")
_NUMBER = re.compile(r"^[+-]?(?:\d+\.?\d*|\.\d+)(?:[eE][+-]?\d+)?$|^[+-]?(?:nan|inf)$", re.I)

# Thermo keywords as the engine prints them in headers, lower-cased with "_" and "/"
# removed (common practice: the engine's thermo_style documentation, from memory).
_THERMO_KEYWORDS = frozenset(
    """step elapsed elaplong dt time cpu tcpu scpu cpuremain cpuleft part timeremain
    timeoutleft atoms temp press pe ke etotal poteng kineng toteng enthalpy evdwl ecoul
    epair ebond eangle edihed eimp eimpro emol elong etail vol volume density lx ly lz xlo
    xhi ylo yhi zlo zhi xy xz yz xlat ylat zlat bonds angles dihedrals impropers pxx pyy
    pzz pxy pxz pyz fmax fnorm nbuild ndanger cella cellb cellc cellalpha cellbeta
    cellgamma""".split()
)

# Default time step of each unit style when the input sets none (the engine's `timestep`
# documentation; from memory): in that style's time unit.
DEFAULT_TIMESTEP = {
    "lj": 0.005, "real": 1.0, "metal": 0.001, "si": 1.0e-8, "cgs": 1.0e-8,
    "electron": 0.001, "micro": 2.0, "nano": 0.00045,
}

_RE_UNITS = re.compile(r"^\s*units\s+(\S+)\s*$")
_RE_TIMESTEP = re.compile(r"^\s*timestep\s+(\S+)\s*$")
_RE_UNIT_STYLE = re.compile(r"^\s*Unit style\s*:\s*(\S+)")
_RE_TIME_STEP = re.compile(r"^\s*Time step\s*:\s*(\S+)")
_RE_COMPUTE_P = re.compile(r"^\s*compute\s+(\S+)\s+\S+\s+pressure\s+(\S+)(.*)$")
_RE_VARIABLE = re.compile(r"^\s*variable\s+(\S+)\s+equal\s+(.+?)\s*$")
_RE_RUNCMD = re.compile(r"^\s*(run|minimize|rerun|min_modify)\b")
_RE_EPOCH = re.compile(r"^\s*(reset_timestep|clear)\b")
_RE_CINDEX = re.compile(r"^c_([^\[\]\s]+)\[(\d+)\]$")
#: "Loop time of 12.3 on 4 procs for 1000 steps with 500 atoms": the run's wall-clock time.
_LOOP_TIME = re.compile(
    r"Loop time of\s+([0-9.eE+-]+)\s+on\s+\d+\s+procs?\s+for\s+(\d+)\s+steps")
_END_MARKERS = ("Loop time of", "ERROR", "LAMMPS (", "Last command", "Total wall time")


@dataclass
class Setting:
    """A value the log sets, with where it was set."""

    value: Any
    line: int | None
    how: str  # "units command", "timestep command", "run header", "default for units lj"


@dataclass
class LogContext:
    """Settings in force at a point of the log (last setting before it applies)."""

    units: Setting | None = None
    timestep: Setting | None = None
    pressure_computes: dict[str, tuple[int, str]] = field(default_factory=dict)
    variables: dict[str, tuple[int, str]] = field(default_factory=dict)
    last_command: str = ""
    epoch: int = 0  # counts `reset_timestep` and `clear`: runs of different epochs never join

    def copy(self) -> LogContext:
        return LogContext(self.units, self.timestep, dict(self.pressure_computes),
                          dict(self.variables), self.last_command, self.epoch)


@dataclass
class ScanBlock:
    """One header + numeric rows found by the scanner."""

    index: int
    header_line: int
    names: list[str]
    sep: str
    trailing: bool
    keep: list[int]
    canonical: dict[str, str]
    kind: str = "table"
    context: LogContext | None = None
    arrays: list[np.ndarray] = field(default_factory=list)  # rows of `store`, then trimmed
    store: np.ndarray | None = None  # (kept columns, capacity): one row per kept column
    lo: np.ndarray | None = None  # bounds of each kept column over the rows read (nan if
    hi: np.ndarray | None = None  # any value is nan); those of a trimmed part lie within
    n: int = 0
    map_rows: list[int] = field(default_factory=list)
    map_lines: list[int] = field(default_factory=list)
    first_line: int | None = None
    last_line: int | None = None
    skipped: int = 0
    skipped_examples: list[tuple[int, str]] = field(default_factory=list)
    pending: list[tuple[int, str]] = field(default_factory=list)
    ended_by: str = "end of file"
    notes: list[str] = field(default_factory=list)
    warnings: list[str] = field(default_factory=list)
    short_last: tuple[int, int] | None = None  # (line, values seen) of a short final row
    closed: bool = False
    loop_seconds: float | None = None  # wall-clock time of the run ('Loop time of ...')
    loop_steps: int | None = None  # steps of the run that took loop_seconds

    @property
    def ncols(self) -> int:
        return len(self.names)

    def columns(self) -> dict[str, np.ndarray]:
        """Kept columns (views of the filled part)."""
        return {self.names[j]: a[: self.n] for j, a in zip(self.keep, self.arrays, strict=True)}

    def bounds(self) -> dict[str, tuple[float, float]]:
        """Smallest and largest value of each kept column (nan if a value is nan)."""
        if self.lo is None or self.hi is None:
            return {}
        return {self.names[j]: (float(self.lo[i]), float(self.hi[i]))
                for i, j in enumerate(self.keep)}

    def line_of(self, row: int) -> int | None:
        """1-based file line of block row `row`."""
        if not self.map_rows:
            return None
        i = int(np.searchsorted(self.map_rows, row, side="right")) - 1
        i = max(i, 0)
        return self.map_lines[i] + (row - self.map_rows[i])


@dataclass
class ScanResult:
    """What the scanner found in one file."""

    blocks: list[ScanBlock]
    lines: int
    context: LogContext
    notes: list[str]
    warnings: list[str]
    ended_incomplete: bool = False
    orphan_header: tuple[int, str] | None = None
    orphan_detail: str = ""  # why the orphan header took no rows, when known


def _unique(names: list[str]) -> list[str]:
    seen: dict[str, int] = {}
    out = []
    for nm in names:
        if nm in seen:
            seen[nm] += 1
            out.append(f"{nm}.{seen[nm]}")
        else:
            seen[nm] = 0
            out.append(nm)
    return out


def _has_trailing(line: bytes, sep: str) -> bool:
    line = line.rstrip(b"\r")
    if sep == " ":
        return line.endswith((b" ", b"\t"))
    if sep == r"\s+":
        return False
    return line.rstrip(b" \t").endswith(sep.encode())


def _is_number(tok: str) -> bool:
    return bool(_NUMBER.match(tok))


class _Scanner:
    def __init__(
        self,
        opened: Opened,
        *,
        mode: str,
        want: Callable[[dict[str, str]], Collection[str] | None] | None,
        progress: bool,
        spill: bool | None = False,
        scratch: Path | None = None,
    ) -> None:
        self.op = opened
        self.spill = spill
        self.scratch = scratch
        self.path = str(opened.path)
        self.mode = mode
        self.want = want
        self.progress = progress
        self.ctx = LogContext()
        self.blocks: list[ScanBlock] = []
        self.cur: ScanBlock | None = None
        self.notes: list[str] = []
        self.warnings: list[str] = []
        self.pending_segments: list[tuple[int, int, int, int]] = []  # start, end, line, rows
        self.inflight: deque[_Job] = deque()
        self.users: dict[int, int] = {}  # id of a text buffer -> parse jobs reading it
        self.spare: list[bytearray] = []  # text buffers no job reads
        self.pool: ThreadPoolExecutor | _InlinePool = _InlinePool()
        self.max_inflight = 1
        self.buf = bytearray(b"\n")
        self.remaining_hint = opened.size if opened.compression is None else 0
        self.orphan: tuple[int, str] | None = None
        self.orphan_detail = ""
        self.mismatch: tuple[int, int] | None = None  # (names, values) of a failed header

    # ---- helpers ---------------------------------------------------------------------
    def _err(self, message: str, line: int | None, **kw: Any) -> InputError:
        return InputError(message, path=self.path, line=line, **kw)

    def _header_tokens(self, text: str, nxt: bytes) -> tuple[list[str], str, bool] | None:
        """If `text` is a header for the data line `nxt`, its names, separator, trailing."""
        if not nxt or not _NUMERIC_START.match(nxt):
            return None
        nxt_s = nxt.decode("utf-8", "replace")
        if self.mode == "log":
            sep = " "
            toks = text.split()
            if not toks or not all(_IDENT.match(t) for t in toks):
                return None
            known = any(
                t.lower().replace("_", "").replace("/", "") in _THERMO_KEYWORDS
                or t[:2].lower() in ("c_", "v_", "f_")
                for t in toks
            )
            if not known:
                return None
        else:
            body = text.strip().lstrip("#").strip()
            if "," in nxt_s:
                sep = ","
            elif "\t" in nxt_s:
                sep = r"\s+"
            elif ";" in nxt_s:
                sep = ";"
            else:
                sep = " "
            toks = _split_fields(body, sep)
            if sep == r"\s+" and "\t" in body:
                toks = [t.strip() for t in body.split("\t") if t.strip()]
            toks = [t.strip().strip("\"'").strip() for t in toks]
            if not toks or any(t == "" for t in toks) or any(_is_number(t) for t in toks):
                return None
        ntok = len(_split_fields(nxt_s, sep))
        if ntok != len(toks):
            if all(_is_number(t) for t in _split_fields(nxt_s, sep)):
                self.mismatch = (len(toks), ntok)
            return None
        # All values on the data line must look like numbers.
        if not all(_is_number(t) for t in _split_fields(nxt_s, sep)):
            return None
        return toks, sep, _has_trailing(nxt, sep)

    # ---- log commands ------------------------------------------------------------------
    def _command(self, line: int, text: str) -> None:
        code = text.split("#", 1)[0]
        m = _RE_UNITS.match(code)
        if m:
            self.ctx.units = Setting(m.group(1).lower(), line, "units command")
            self.ctx.timestep = None  # the engine resets the time step to the style default
            return
        m = _RE_TIMESTEP.match(code)
        if m:
            try:
                self.ctx.timestep = Setting(float(m.group(1)), line, "timestep command")
            except ValueError:
                pass  # an unexpanded variable: the substituted echo, if any, follows
            return
        m = _RE_UNIT_STYLE.match(text)
        if m:
            self.ctx.units = Setting(m.group(1).lower(), line, "run header 'Unit style'")
            return
        m = _RE_TIME_STEP.match(text)
        if m:
            try:
                self.ctx.timestep = Setting(float(m.group(1)), line, "run header 'Time step'")
            except ValueError:
                pass
            return
        m = _RE_COMPUTE_P.match(code)
        if m:
            self.ctx.pressure_computes[m.group(1)] = (line, (m.group(2) + " " + m.group(3))
                                                      .strip())
            return
        m = _RE_VARIABLE.match(code)
        if m:
            self.ctx.variables[m.group(1)] = (line, m.group(2).strip().strip("\"'").strip())
            return
        m = _RE_RUNCMD.match(code)
        if m and m.group(1) != "min_modify":
            self.ctx.last_command = m.group(1)
            return
        if _RE_EPOCH.match(code):
            self.ctx.epoch += 1

    def _log_aliases(self, names: list[str], block_notes: list[str]
                     ) -> dict[str, str | None]:
        """Canonical names of c_ID[k] and v_name columns from echoed definitions."""
        ctx = self.ctx
        aliases: dict[str, str | None] = {}

        def resolve(expr: str, depth: int = 0) -> str | None:
            expr = expr.strip()
            m = _RE_CINDEX.match(expr)
            if m:
                cid, k = m.group(1), int(m.group(2))
                if cid in ctx.pressure_computes or cid == "thermo_press":
                    if 1 <= k <= 6:
                        return TENSOR_ORDER[k - 1]
                return None
            if expr.startswith("v_") and depth < 5 and expr[2:] in ctx.variables:
                return resolve(ctx.variables[expr[2:]][1], depth + 1)
            from ._columns import canonical_name

            if _IDENT.match(expr) and not expr.startswith(("c_", "f_", "v_")):
                return canonical_name(expr)
            return None

        for nm in names:
            if nm.startswith("c_") and nm[2:] in ctx.pressure_computes:
                aliases[nm] = "press"  # the scalar of a pressure compute
                continue
            if nm.startswith("c_"):
                canon = resolve(nm)
                if canon is not None:
                    aliases[nm] = canon
                    cid = _RE_CINDEX.match(nm).group(1)  # type: ignore[union-attr]
                    if cid in ctx.pressure_computes:
                        cline, args = ctx.pressure_computes[cid]
                        extra = args.split()[1:]
                        temp_id = args.split()[0] if args.split() else ""
                        if extra or temp_id.upper() == "NULL":
                            parts = " ".join(extra) if extra else "no kinetic part (NULL)"
                            block_notes.append(
                                f"compute {cid} (line {cline}) is a partial pressure "
                                f"({parts}), not the full pressure tensor"
                            )
            elif nm.startswith("v_") and nm[2:] in ctx.variables:
                canon = resolve(nm)
                aliases[nm] = canon  # None: defined as something else, never guessed
                if canon is None:
                    vline, expr = ctx.variables[nm[2:]]
                    block_notes.append(f"column {nm} is defined as {expr!r} (line {vline}); "
                                       "not read as a known quantity")
        return aliases

    # ---- blocks ------------------------------------------------------------------------
    def _open_block(self, line: int, names: list[str], sep: str, trailing: bool) -> None:
        from ._columns import canonical_name

        notes: list[str] = []
        for nm in dict.fromkeys(n for n in names if names.count(n) > 1):
            where = [i + 1 for i, n in enumerate(names) if n == nm]
            if canonical_name(nm) is not None:
                raise self._err(
                    f"column name {nm!r} appears {len(where)} times in the header (columns "
                    f"{', '.join(map(str, where))}): which one is meant is ambiguous", line,
                    expected="distinct column names", fix="rename or remove the repeated column")
            notes.append(f"duplicate column name {nm!r} (columns "
                         f"{', '.join(map(str, where))}): the repeats are read as "
                         f"{nm}.1, {nm}.2, ...")
        names = _unique(names)
        if self.mode == "log":
            aliases = self._log_aliases(names, notes)
            ctx = self.ctx.copy()
            kind = {"minimize": "minimize", "rerun": "rerun"}.get(ctx.last_command, "run")
        else:
            aliases, ctx, kind = {}, None, "table"
        canonical, dup_notes = map_columns(names, aliases)
        notes.extend(dup_notes)
        wanted = self.want(canonical) if self.want is not None else None
        if wanted is None:
            keep = list(range(len(names)))
        else:
            found = [names.index(canonical[c]) for c in wanted if c in canonical]
            # In the caller's order when it gives one (rows of the store follow it).
            keep = list(dict.fromkeys(found)) if isinstance(wanted, (list, tuple)) \
                else sorted(set(found))
        blk = ScanBlock(
            index=len(self.blocks) + 1, header_line=line, names=names, sep=sep,
            trailing=trailing, keep=keep, canonical=canonical, kind=kind, context=ctx,
        )
        blk.notes.extend(notes)
        self.blocks.append(blk)
        self.cur = blk

    def _close_block(self, reason: str) -> None:
        blk = self.cur
        if blk is None:
            return
        self._flush()
        self._drain()
        if blk.short_last is not None:
            line, seen = blk.short_last
            blk.n -= 1
            blk.last_line = line - 1 if blk.n else None
            blk.warnings.append(
                f"line {line} has {seen} of {blk.ncols} values (the run probably stopped "
                f"while writing it); dropped"
            )
            blk.short_last = None
        if blk.pending:
            ln, text = blk.pending[0]
            if reason == "end of file" and text.startswith("ERROR"):
                reason = f"error at line {ln}"
            blk.notes.append(
                f"{len(blk.pending)} line(s) of text after the last row (first at line {ln}: "
                f"{text[:60]!r})"
            )
        blk.ended_by = reason
        for j, a in enumerate(blk.arrays):
            blk.arrays[j] = a[: blk.n]
        blk.store = None  # the rows keep it alive as long as they are used
        blk.closed = True
        self.cur = None

    # ---- data ----------------------------------------------------------------------------
    def _accept(self, start: int, end: int) -> bool:
        """Whether rows in buf[start:end] continue the current block (after any text)."""
        blk = self.cur
        if blk is None:
            return False
        if blk.pending:
            # Text inside the block: interleaved if the rows after it have the block's width.
            first_end = self.buf.find(b"\n", start, end)
            first = bytes(self.buf[start: first_end if first_end >= 0 else end])
            ntok = len(_split_fields(first.decode("utf-8", "replace"), blk.sep))
            if ntok != blk.ncols:
                ln, _ = blk.pending[0]
                self._close_block(f"text at line {ln}")
                return False
            blk.skipped += len(blk.pending)
            room = 3 - len(blk.skipped_examples)
            blk.skipped_examples.extend(blk.pending[: max(room, 0)])
            blk.pending = []
        return True

    def _flush(self) -> None:
        """Hand the pending data segments of the current block to a parse job.

        The rows of the segments are counted here (every segment line is one row: blank and
        text lines are never inside a segment), reserved in the block's arrays and recorded
        in the line map; the job parses them (in a worker thread when the file is big) and
        writes the kept columns straight into the reserved rows. Its findings are applied in
        file order by :meth:`_complete`.
        """
        segs = self.pending_segments
        self.pending_segments = []
        blk = self.cur
        if not segs or blk is None:
            return
        rows = sum(nl for _, _, _, nl in segs)
        self._reserve(blk, rows, sum(e - s for s, e, _, _ in segs))
        buf = self.buf
        self.users[id(buf)] = self.users.get(id(buf), 0) + 1
        with memoryview(buf) as mv:
            source = _ViewReader([mv[s:e] for s, e, _, _ in segs])
        job = _Job(
            blk=blk, buffer=buf, source=source, lines=[(ln, nl) for _, _, ln, nl in segs],
            row0=blk.n,
            rows=rows, arrays=list(blk.arrays), trailing=blk.trailing,
        )
        for ln, nl in job.lines:
            contiguous = bool(blk.map_rows) and (
                blk.map_lines[-1] + (blk.n - blk.map_rows[-1]) == ln)
            if not contiguous:
                blk.map_rows.append(blk.n)
                blk.map_lines.append(ln)
            if blk.first_line is None:
                blk.first_line = ln
            blk.last_line = ln + nl - 1
            blk.n += nl
        if len(self.inflight) >= self.max_inflight:
            self._complete(self.inflight.popleft())
        job.future = self.pool.submit(_parse_job, job)
        self.inflight.append(job)

    def _reserve(self, blk: ScanBlock, rows: int, nbytes: int) -> None:
        """Make room for `rows` more rows in the block's arrays.

        Capacity is estimated from the bytes left in the file; capacity never written costs
        no resident memory. Growing (rare: when the estimate was short, e.g. for compressed
        input) waits for the jobs still writing into the old store, then copies it.
        """
        need = blk.n + rows
        if blk.store is not None and blk.store.shape[1] >= need:
            return
        self._drain()
        per_row = max(nbytes / max(rows, 1), 1.0)
        cap = need + int(self.remaining_hint / per_row * 1.05) + 1024
        old = blk.store
        if old is not None:
            cap = max(cap, 2 * need)
        shape = (len(blk.keep), cap)
        on_disk = spills(self.spill, self.scratch, shape)
        store = disk_empty(shape, self.scratch) if on_disk else bulk_empty(shape)
        if old is not None:
            store[:, : blk.n] = old[:, : blk.n]
        blk.store = store
        blk.arrays = list(store)

    def _complete(self, job: _Job) -> None:
        """Apply the findings of a finished parse job (jobs complete in file order).

        An error found in the job's rows is raised after the later jobs are abandoned, so
        that it is the one reported.
        """
        try:
            self._apply(job)
        except BaseException:
            jobs, self.inflight = self.inflight, deque()
            for rest in jobs:
                if rest.future is not None:
                    rest.future.cancel()
            raise

    def _apply(self, job: _Job) -> None:
        assert job.future is not None
        found = job.future.result()
        job.source.release()
        self._release(job.buffer)
        blk = job.blk
        if found.trailing_off:
            blk.trailing = False  # these rows do not end with a separator
        if blk.short_last is not None:
            line, seen = blk.short_last
            raise self._err(
                f"row has {seen} values but the header at line {blk.header_line} names "
                f"{blk.ncols}", line,
                expected=f"{blk.ncols} values per row", fix="repair or remove the damaged line",
            )
        if found.error is not None:
            message, k, kw = found.error
            raise self._err(message, job.file_line(k), **kw)
        if found.short_last is not None:
            r, seen = found.short_last
            blk.short_last = (job.file_line(r), seen)
        if blk.store is not None and file_backed(blk.store) is not None:
            release_pages(blk.store)  # the written rows stay in the scratch file
        if found.lo is not None and found.hi is not None:
            blk.lo = found.lo if blk.lo is None else np.minimum(blk.lo, found.lo)
            blk.hi = found.hi if blk.hi is None else np.maximum(blk.hi, found.hi)

    def _release(self, buf: bytearray) -> None:
        """A job is done with `buf`: keep it for reuse once nothing else uses it."""
        left = self.users.pop(id(buf)) - 1
        if left:
            self.users[id(buf)] = left
        elif buf is not self.buf:
            self.spare.append(buf)

    def _next_buffer(self, carry: int, k: int, fill: int) -> None:
        """Continue in a buffer no job is reading, starting with the carried-over bytes."""
        old = self.buf
        new = self.spare.pop() if self.spare else bytearray(CHUNK_BYTES + SLACK_BYTES)
        new[0:carry] = old[k:fill]
        self.buf = new
        if id(old) not in self.users:
            self.spare.append(old)

    def _drain(self) -> None:
        """Wait for every parse job in flight and apply its findings, in file order."""
        while self.inflight:
            self._complete(self.inflight.popleft())

    # ---- the chunk loop ----------------------------------------------------------------------
    def run(self) -> ScanResult:
        total = self.op.size
        bar = progress_bar(self.progress and total > (16 << 20), total=total, unit="B",
                           unit_scale=True, desc=self.op.path.name)
        self.buf = bytearray(CHUNK_BYTES + SLACK_BYTES)
        self.buf[0:1] = b"\n"
        workers = _workers() if total > CHUNK_BYTES else 1
        if workers > 1:
            self.pool = ThreadPoolExecutor(max_workers=workers, thread_name_prefix="parse")
            self.max_inflight = workers + 1  # bounded memory: a few chunks of text at most
        try:
            try:
                lines, incomplete = self._loop(self.op.stream, bar)
            except InputError:
                self._raise_earlier()
                raise
        finally:
            self.pool.shutdown(wait=True, cancel_futures=True)
            bar.close()
        self.buf = bytearray()
        return ScanResult(self.blocks, lines, self.ctx, self.notes, self.warnings, incomplete,
                          self.orphan, self.orphan_detail)

    def _raise_earlier(self) -> None:
        """Raise the error of a parse job still in flight: its rows come before."""
        try:
            self._drain()
        except InputError as exc:
            raise exc from None

    def _loop(self, stream: Any, bar: Any) -> tuple[int, bool]:
        """Read the file chunk by chunk; the number of lines and whether the last is cut."""
        line_base = 1  # file line number of the line that starts at buf[1]
        incomplete = False
        seen_raw = 0
        fill = 1
        eof = False
        while not eof:
            if len(self.buf) - fill < SLACK_BYTES:
                if len(self.buf) > MAX_LINE_BYTES + CHUNK_BYTES:
                    raise self._err(
                        "has a line longer than 16 MB", line_base,
                        expected="a text table or thermo log",
                        fix="check that this is the right file",
                    )
                self.buf.extend(bytes(len(self.buf)))
            try:
                got = _fill(stream, self.buf, fill)
            except DECOMPRESSION_ERRORS as exc:
                raise self._err(
                    f"cannot be decompressed ({exc})", None,
                    fix="check that the file was copied completely",
                ) from None
            bar.update(self.op.raw.bytes_read - seen_raw)
            seen_raw = self.op.raw.bytes_read
            if got:
                fill += got
                if self.op.compression is None:
                    self.remaining_hint = max(self.op.size - seen_raw, 0)
                last_nl = self.buf.rfind(b"\n", 0, fill)
                k = self.buf.rfind(b"\n", 0, last_nl) if last_nl > 0 else -1
                if k <= 0:
                    continue
            else:
                eof = True
                if self.buf[fill - 1: fill] != b"\n":
                    tail_start = self.buf.rfind(b"\n", 0, fill) + 1
                    tail = bytes(self.buf[tail_start:fill])
                    if (self.mode == "log" and tail.strip()
                            and _NUMERIC_START.match(tail)):
                        incomplete = True  # an engine always ends its lines
                        fill = tail_start
                    else:
                        if fill >= len(self.buf):
                            self.buf.extend(b"\n")
                        else:
                            self.buf[fill: fill + 1] = b"\n"
                        fill += 1
                k = fill - 1
            line_base = self._process(k, line_base)
            if not eof:
                carry = fill - k
                if id(self.buf) in self.users:
                    self._next_buffer(carry, k, fill)
                else:
                    self.buf[0:carry] = self.buf[k:fill]
                fill = carry
        if incomplete and self.cur is not None:
            self.cur.warnings.append(
                f"line {line_base} is incomplete (the file ends inside it; the run "
                "probably stopped while writing it); dropped"
            )
        elif incomplete:
            self.notes.append(f"line {line_base} is incomplete; ignored")
        self._close_block("end of file")
        lines = line_base - 1 + (1 if incomplete else 0)
        return lines, incomplete

    def _process(self, k: int, line_base: int) -> int:
        """Handle the lines in buf[1:k] (buf[0] and buf[k] are newlines).

        Returns the line number of the line that starts at buf[k + 1].
        """
        buf = self.buf
        pos = 1
        cur_line = line_base
        for m in _SPECIAL.finditer(buf, 0, k + 1):
            if m.start() >= k:
                break
            s = m.start() + 1
            e = buf.find(b"\n", s)
            if s - 1 > pos:
                nl = buf.count(b"\n", pos, s - 1) + 1
                if self._accept(pos, s - 1):
                    self.pending_segments.append((pos, s - 1, cur_line, nl))
                cur_line += nl
            nxt_end = buf.find(b"\n", e + 1)
            nxt = bytes(buf[e + 1: nxt_end]) if nxt_end >= 0 else b""
            self._special(cur_line, bytes(buf[s:e]), nxt)
            cur_line += 1
            pos = e + 1
        if k > pos:
            nl = buf.count(b"\n", pos, k) + 1
            if self._accept(pos, k):
                self.pending_segments.append((pos, k, cur_line, nl))
            cur_line += nl
        self._flush()
        return cur_line

    def _special(self, line: int, raw: bytes, nxt: bytes) -> None:
        text = raw.decode("utf-8", "replace").rstrip("\r").lstrip("\ufeff")
        stripped = text.strip()
        blk = self.cur
        hdr = None
        may_be_header = bool(stripped) and not stripped.startswith(("WARNING", "ERROR")) and (
            self.mode == "table" or not stripped.startswith("#"))
        self.mismatch = None
        if may_be_header:
            hdr = self._header_tokens(text, nxt)
        if hdr is None and blk is None and self.mismatch is not None:
            names, values = self.mismatch
            self.orphan = (line, stripped)
            self.orphan_detail = (f"it names {names} columns but the row after it (line "
                                  f"{line + 1}) has {values} values")
            self.warnings.append(
                f"{self.path}: the header at line {line} was not used: {self.orphan_detail}")
        if hdr is not None:
            if blk is not None:
                self._close_block(f"next header at line {line}")
            self._open_block(line, *hdr)
            return
        if blk is not None:
            if self.mode == "log" and stripped.startswith(_END_MARKERS):
                if stripped.startswith("Loop time"):
                    m = _LOOP_TIME.match(stripped)
                    if m:
                        blk.loop_seconds, blk.loop_steps = float(m[1]), int(m[2])
                    self._close_block(f"'Loop time' at line {line}")
                else:
                    self._close_block(f"line {line}: {stripped[:60]!r}")
                    self._command(line, text)
                return
            if stripped:
                blk.pending.append((line, stripped))
            return
        if self.mode == "log" and stripped:
            toks = stripped.split()
            if toks[0].lower() == "step" and all(_IDENT.match(t) for t in toks) and \
                    self.mismatch is None:
                self.orphan = (line, stripped)  # a header with no rows after it
                self.orphan_detail = ""
            self._command(line, text)



def scan(
    opened: Opened,
    *,
    mode: str,
    want: Callable[[dict[str, str]], Collection[str] | None] | None = None,
    progress: bool = False,
    spill: bool | None = False,
    scratch: Path | None = None,
) -> ScanResult:
    """Scan an opened text file into blocks.

    Parameters
    ----------
    opened : Opened
        The file, opened by :func:`transport.io._open.open_bytes`.
    mode : {"log", "table"}
        ``log``: headers are lines of thermo keywords and echoed commands are followed;
        ``table``: headers may be ``#`` comments and the delimiter is sniffed per block.
    want : callable, optional
        Given a block's canonical-name map, the canonical names to keep (None keeps all
        columns). Unkept columns are skipped by the parser. Kept columns are stored as the
        rows of one array, in the order given when `want` returns a list or tuple (in file
        order otherwise).
    progress : bool
        Show a progress bar on stderr for large files.
    spill, scratch : bool or None, Path or None
        Keep the rows in a scratch file in the folder `scratch` instead of memory
        (:func:`transport._memory.spills` decides; None: when memory is short).
    """
    return _Scanner(opened, mode=mode, want=want, progress=progress, spill=spill,
                    scratch=scratch).run()
