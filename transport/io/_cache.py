"""Parse once: parsed tables kept as binary files in a cache folder.

A text log of 10^7 rows takes seconds to parse; the same file read again (``viscosity``,
then ``check``, then ``report``) is served from a binary copy of the parsed columns.

Layout of the folder (never beside the input; see :func:`cache_folder`):

* ``<key>.npy``: the kept columns as one (k, n) float64 array (rows in the reader's order,
  so that the pressure tensor converts in place as after a fresh parse);
* ``<key>.json``: everything else of the :class:`~transport.io.Table` (blocks, units,
  provenance, warnings) and the SHA-256 of the input's bytes. Written last: an entry
  exists only when its ``.json`` does.

``key`` is a BLAKE2b digest of the input's resolved path, device, inode, size, modification
time (ns) and status-change time (``ctime``, ns), the reader's settings (run, units, time
step, columns wanted), the package version and the layout version. Why no checksum of the
bytes at each look-up (it cost ~1.5 s of a 3.5 s cached re-analysis of a 1.5 GB log): the
kernel sets ``ctime`` to the current time on every write, rename onto the path (a new
inode), truncation and ``utime`` call, and no system call sets it back (``os.utime`` moves
``mtime`` and itself updates ``ctime``). A file rewritten with the same size, and ``mtime``
put back, therefore has another key: it is never served. Limits: a file system with coarse
timestamps (FAT: 2 s; some network file systems) can leave ``ctime`` unchanged by a write
within the same tick, so an entry stored less than :data:`RACY_NS` after the input's last
status change is marked *racy* and served only when the SHA-256 of the file (recomputed,
overlapping the load) equals the recorded one (the "racy" entries of git's index follow the
same reasoning); changing the system clock back or writing to the block device underneath
defeats ``ctime`` (use ``--no-cache`` there). The SHA-256 of the bytes is still recorded:
the reader computes it while parsing (no extra pass on a miss).

Files are written under a temporary name (``.partial-<pid>-...``) and renamed
(``os.replace``); temporaries of a process that died (a killed run) are removed by the next
run that uses the folder. The folder is bounded in size (default 4 GB,
``TRANSPORT_CACHE_MAX``): the least recently used entries go first. A folder that cannot
be created or written leaves the analysis running, with a note.
"""

from __future__ import annotations

import contextlib
import hashlib
import json
import os
import re
import time
from dataclasses import asdict, replace
from pathlib import Path
from typing import Any

import numpy as np

from ..errors import Note
from ..series import Source

LAYOUT = 2
#: An entry stored less than this after the input's last status change (ns) is checked by
#: content when served: 2 s covers the coarsest common timestamp (FAT's 2 s mtime).
RACY_NS = 2 * 10**9
DEFAULT_MAX_BYTES = 4 * 10**9
_PARTIAL = ".partial-"


def cache_folder(cache: str | os.PathLike[str] | None = None) -> Path:
    """The cache folder: `cache` if given, else ``$TRANSPORT_CACHE``, else
    ``$XDG_CACHE_HOME/transport``, else ``~/.cache/transport``."""
    if cache is not None:
        return Path(cache).expanduser()
    env = os.environ.get("TRANSPORT_CACHE")
    if env:
        return Path(env).expanduser()
    xdg = os.environ.get("XDG_CACHE_HOME")
    base = Path(xdg).expanduser() if xdg else Path.home() / ".cache"
    return base / "transport"


def max_bytes() -> int:
    """Size limit of the folder in bytes: ``$TRANSPORT_CACHE_MAX`` (a number of bytes, or
    with a suffix K, M, G, T as powers of 1000), default 4 GB."""
    env = os.environ.get("TRANSPORT_CACHE_MAX", "").strip()
    if not env:
        return DEFAULT_MAX_BYTES
    m = re.fullmatch(r"(\d+(?:\.\d*)?)\s*([kKmMgGtT]?)[bB]?", env)
    if not m:
        return DEFAULT_MAX_BYTES
    scale = {"": 1, "k": 10**3, "m": 10**6, "g": 10**9, "t": 10**12}[m.group(2).lower()]
    return int(float(m.group(1)) * scale)


def _key(path: Path, st: os.stat_result, settings: dict[str, Any]) -> str:
    from .. import __version__

    ident = {"path": str(path), "device": st.st_dev, "inode": st.st_ino,
             "size": st.st_size, "mtime_ns": st.st_mtime_ns, "ctime_ns": st.st_ctime_ns,
             "settings": settings, "version": __version__, "layout": LAYOUT}
    text = json.dumps(ident, sort_keys=True, default=str)
    return hashlib.blake2b(text.encode(), digest_size=20).hexdigest()


def _pid_alive(pid: int) -> bool:
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    except PermissionError:
        return True
    return True


def _clean_partials(folder: Path) -> None:
    """Remove temporaries left by processes that no longer run."""
    for p in folder.glob(_PARTIAL + "*"):
        try:
            pid = int(p.name[len(_PARTIAL):].split("-", 1)[0])
        except ValueError:
            continue
        if not _pid_alive(pid):
            with contextlib.suppress(OSError):
                p.unlink()


class ParseCache:
    """Look-up and storage of parsed tables in one folder.

    Parameters
    ----------
    folder : path-like
        The cache folder (created when first written).
    limit : int, optional
        Size bound in bytes (default :func:`max_bytes`).
    """

    def __init__(self, folder: str | os.PathLike[str], *, limit: int | None = None) -> None:
        self.folder = Path(folder)
        self.limit = max_bytes() if limit is None else int(limit)
        self._failed = False

    # ---- look-up ------------------------------------------------------------------------

    def load(self, path: Path, settings: dict[str, Any]) -> Any:
        """The cached Table of `path` read with `settings`, or None (a miss)."""
        from . import Table
        from ._open import FileHash

        try:
            st = path.stat()
        except OSError:
            return None
        key = _key(path, st, settings)
        meta_p = self.folder / f"{key}.json"
        data_p = self.folder / f"{key}.npy"
        if not meta_p.is_file():
            return None
        digest = None
        try:
            meta = json.loads(meta_p.read_text())
            if meta.get("layout") != LAYOUT or data_p.stat().st_size != meta["npy_bytes"]:
                return None
            if meta.get("racy", True):  # stored within a timestamp tick of a change
                digest = FileHash(path, background=True)  # overlaps the load
            data = np.load(data_p, allow_pickle=False)
        except (OSError, ValueError, KeyError):
            return None
        if digest is not None and digest.result() != meta["sha256"]:
            return None
        with contextlib.suppress(OSError):
            os.utime(meta_p)  # least recently used goes first
        return _table_from(meta, data, Table)

    # ---- storage ------------------------------------------------------------------------

    def store(self, path: Path, settings: dict[str, Any], table: Any,
              st_before: os.stat_result) -> list[str]:
        """Keep `table` (just parsed from `path`); returns the notes to show (a folder that
        cannot be written), once per cache object."""
        try:
            st = path.stat()
        except OSError:
            return []
        if (st.st_size, st.st_mtime_ns, st.st_ctime_ns) != (
                st_before.st_size, st_before.st_mtime_ns, st_before.st_ctime_ns):
            return []  # the file changed while it was read: do not keep it
        if table.source.sha256 is None or table.time is not None:
            return []
        record = _record_of(table)
        if record is None:
            return []
        names, cols = record["column_names"], [table.columns[c] for c in
                                               record["column_names"]]
        n = len(cols[0]) if cols else 0
        size = 8 * n * len(cols) + 4096
        if size > self.limit or self._failed:
            return []
        key = _key(path, st, settings)
        try:
            self.folder.mkdir(parents=True, exist_ok=True)
            _clean_partials(self.folder)
            npy_bytes = _write_atomic(self.folder / f"{key}.npy",
                                      lambda fh: _write_rows(fh, cols, n))
            # a change within RACY_NS of the status change recorded in the key could leave
            # size, mtime and ctime as they are on a file system with coarse timestamps:
            # such an entry is checked by content (SHA-256) when it is served
            racy = time.time_ns() - st.st_ctime_ns < RACY_NS
            record.update(layout=LAYOUT, npy_bytes=npy_bytes, sha256=table.source.sha256,
                          input=str(path), column_names=names, racy=racy)
            text = json.dumps(record).encode()
            _write_atomic(self.folder / f"{key}.json", lambda fh: fh.write(text))
            self._evict()
        except OSError as exc:
            self._failed = True
            return [Note(
                f"parse cache {self.folder} not written ({exc.strerror or exc}); "
                "the analysis ran without it (--cache DIR or TRANSPORT_CACHE to move it, "
                "--no-cache to skip)")]
        return []

    def _evict(self) -> None:
        """Remove the least recently used entries until the folder is within its limit."""
        entries = []
        total = 0
        for meta_p in self.folder.glob("*.json"):
            data_p = meta_p.with_suffix(".npy")
            try:
                size = meta_p.stat().st_size + (data_p.stat().st_size if data_p.exists()
                                                else 0)
                entries.append((meta_p.stat().st_mtime_ns, meta_p, data_p, size))
            except OSError:
                continue
            total += size
        metas = {e[1].with_suffix("") for e in entries}
        for data_p in self.folder.glob("*.npy"):  # data whose record never got written
            if data_p.with_suffix("") not in metas:
                with contextlib.suppress(OSError):
                    data_p.unlink()
        entries.sort(key=lambda e: e[0])
        for _, meta_p, data_p, size in entries:
            if total <= self.limit:
                break
            with contextlib.suppress(OSError):
                meta_p.unlink()  # the record first: an entry without it does not exist
                data_p.unlink()
            total -= size


def _write_atomic(target: Path, write: Any) -> int:
    tmp = target.with_name(f"{_PARTIAL}{os.getpid()}-{target.name}")
    try:
        with open(tmp, "wb") as fh:
            write(fh)
            fh.flush()
            os.fsync(fh.fileno())
        size = tmp.stat().st_size
        os.replace(tmp, target)
    finally:
        with contextlib.suppress(FileNotFoundError):
            tmp.unlink()
    return size


def _write_rows(fh: Any, cols: list[np.ndarray], n: int) -> None:
    header = {"descr": "<f8", "fortran_order": False, "shape": (len(cols), n)}
    np.lib.format.write_array_header_1_0(fh, header)
    for c in cols:
        fh.write(memoryview(np.ascontiguousarray(c, dtype="<f8")).cast("B"))


def _record_of(table: Any) -> dict[str, Any] | None:
    """The JSON-able parts of a Table, or None if some part cannot be kept."""
    if table.units is not None:
        from ..units import get_unit_system

        try:
            if get_unit_system(table.units.name) != table.units:
                return None
        except ValueError:
            return None
    return {
        "column_names": list(table.columns),
        "canonical": dict(table.canonical),
        "units": None if table.units is None else table.units.name,
        "timestep": table.timestep,
        "source": asdict(table.source),
        "warnings": [[str(w), isinstance(w, Note)] for w in table.warnings],
        "blocks": [asdict(b) for b in table.blocks],
        "line_map": [list(x) for x in table.line_map],
        "units_source": table.units_source,
        "timestep_source": table.timestep_source,
        "compression": table.compression,
        "notes": [[str(w), isinstance(w, Note)] for w in table.notes],
        "bounds": {k: list(v) for k, v in table.bounds.items()},
    }


def _table_from(meta: dict[str, Any], data: np.ndarray, table_cls: Any) -> Any:
    from ..units import get_unit_system
    from . import BlockInfo

    def msgs(items: list) -> tuple[str, ...]:
        return tuple(Note(t) if is_note else t for t, is_note in items)

    blocks = []
    for b in meta["blocks"]:
        b = dict(b)
        b["columns"] = tuple(b["columns"])
        b["notes"] = tuple(b["notes"])
        blocks.append(BlockInfo(**b))
    src = dict(meta["source"])
    source = replace(Source(), **src)
    columns = {name: data[i] for i, name in enumerate(meta["column_names"])}
    return table_cls(
        columns=columns, canonical=dict(meta["canonical"]),
        units=None if meta["units"] is None else get_unit_system(meta["units"]),
        timestep=meta["timestep"], time=None, source=source,
        warnings=msgs(meta["warnings"]), blocks=tuple(blocks),
        line_map=tuple(tuple(x) for x in meta["line_map"]),
        units_source=meta["units_source"], timestep_source=meta["timestep_source"],
        compression=meta["compression"], notes=msgs(meta["notes"]),
        bounds={k: tuple(v) for k, v in meta["bounds"].items()})
