"""Opening input files: existence checks, transparent decompression, format sniffing, hashing."""

from __future__ import annotations

import bz2
import gzip
import hashlib
import lzma
import os
import re
import threading
import zlib
from dataclasses import dataclass
from pathlib import Path
from typing import IO, Any

from ..errors import InputError

__all__ = ["DECOMPRESSION_ERRORS", "FileHash", "Opened", "check_path", "open_bytes", "sniff"]

_MAGIC = {
    "gzip": b"\x1f\x8b",
    "bzip2": b"BZh",
    "xz": b"\xfd7zXZ\x00",
}
_SUFFIX_COMPRESSION = {".gz": "gzip", ".bz2": "bzip2", ".xz": "xz"}
_EDR_MAGIC = b"\xff\xff\x26\xfd"  # -55555 as a big-endian (XDR) int: the frame magic
_NPY_MAGIC = b"\x93NUMPY"
_ZIP_MAGIC = b"PK\x03\x04"

#: What reading a damaged compressed stream raises (zlib.error for corrupt gzip data).
DECOMPRESSION_ERRORS = (OSError, EOFError, lzma.LZMAError, zlib.error)

#: Formats :func:`sniff` can return.
FORMATS = ("lammps-log", "table", "npy", "npz", "edr")

_LOG_MARKERS = re.compile(
    rb"^(?:LAMMPS \(|Loop time of |Per MPI rank memory|\s*units\s+\w+\s*$|thermo_style\s|"
    rb"thermo\s+\d|Setting up (?:Verlet|Respa|cg|sd|fire)|Step\s+\S+.*\n\s*-?\d)",
    re.MULTILINE,
)


def check_path(path: str | os.PathLike[str]) -> Path:
    """Return `path` as a Path after checking that it is a readable, non-empty file."""
    p = Path(path)
    if not p.exists():
        raise InputError("file not found", path=str(p), fix="check the path and the spelling")
    if p.is_dir():
        raise InputError("is a directory, not a file", path=str(p),
                         fix="give the file inside the directory")
    try:
        size = p.stat().st_size
        with open(p, "rb"):
            pass
    except OSError as exc:
        raise InputError(f"cannot be read ({exc.strerror})", path=str(p),
                         fix="check the file permissions") from None
    if size == 0:
        raise InputError("file is empty", path=str(p),
                         expected="a thermo log, a table with a header, .npy/.npz or .edr",
                         fix="check that the run wrote its output to this file")
    return p


def compression_of(path: Path) -> str | None:
    """The compression of `path` from its first bytes (suffix as a fallback), or None."""
    with open(path, "rb") as fh:
        head = fh.read(8)
    for name, magic in _MAGIC.items():
        if head.startswith(magic):
            return name
    return None


class _Counting:
    """File wrapper that counts the bytes read from the disk (for progress bars) and, when
    given a hash object, feeds them to it (the checksum of exactly the bytes read, without
    reading the file twice)."""

    def __init__(self, fh: IO[bytes], hasher: Any = None) -> None:
        self._fh = fh
        self.bytes_read = 0
        self.hasher = hasher

    def read(self, n: int = -1) -> bytes:
        data = self._fh.read(n)
        self.bytes_read += len(data)
        if self.hasher is not None and data:
            self.hasher.update(data)
        return data

    def readinto(self, b: bytearray | memoryview) -> int:
        n = self._fh.readinto(b)
        self.bytes_read += n or 0
        if self.hasher is not None and n:
            with memoryview(b) as mv:
                self.hasher.update(mv[:n])
        return n

    def readable(self) -> bool:
        return True

    def close(self) -> None:
        self._fh.close()

    @property
    def closed(self) -> bool:
        return self._fh.closed

    def seekable(self) -> bool:
        return False


@dataclass
class Opened:
    """An opened input: a binary stream of the decompressed bytes."""

    path: Path
    stream: IO[bytes]
    raw: _Counting
    compression: str | None
    size: int

    def close(self) -> None:
        self.stream.close()
        self.raw.close()

    def sha256(self) -> str | None:
        """SHA-256 of the whole file (opened with ``digest=True``): the bytes not yet read
        are read now. None if the file was opened without a digest."""
        if self.raw.hasher is None:
            return None
        while self.raw.read(1 << 22):
            pass
        return str(self.raw.hasher.hexdigest())

    def __enter__(self) -> Opened:
        return self

    def __exit__(self, *exc: object) -> None:
        self.close()


def open_bytes(path: Path, *, digest: bool = False) -> Opened:
    """Open `path` for reading its (decompressed) bytes; with `digest`, the raw bytes are
    hashed as they are read (see :meth:`Opened.sha256`)."""
    comp = compression_of(path)
    raw = _Counting(open(path, "rb"),  # closed by Opened.close
                    hashlib.sha256() if digest else None)
    stream: IO[bytes]
    if comp == "gzip":
        stream = gzip.GzipFile(fileobj=raw, mode="rb")  # type: ignore[arg-type]
    elif comp == "bzip2":
        stream = bz2.BZ2File(raw, mode="rb")  # type: ignore[arg-type]
    elif comp == "xz":
        stream = lzma.LZMAFile(raw, mode="rb")  # type: ignore[arg-type]
    else:
        stream = raw  # type: ignore[assignment]
    return Opened(path, stream, raw, comp, path.stat().st_size)


def read_head(path: Path, n: int = 1 << 16) -> tuple[bytes, str | None]:
    """The first `n` decompressed bytes and the compression name."""
    with open_bytes(path) as op:
        try:
            head = op.stream.read(n)
        except DECOMPRESSION_ERRORS as exc:
            raise InputError(
                f"cannot be decompressed as {op.compression} ({exc})", path=str(path),
                fix="check that the file was copied completely",
            ) from None
        return head, op.compression


def _stem(path: Path) -> str:
    name = path.name.lower()
    for suf in _SUFFIX_COMPRESSION:
        if name.endswith(suf):
            return name[: -len(suf)]
    return name


def sniff(path: Path) -> tuple[str, str | None]:
    """Decide the format of `path` from its content and its suffix.

    Returns
    -------
    format : str
        One of ``lammps-log``, ``table``, ``npy``, ``npz``, ``edr``.
    compression : str or None
        ``gzip``, ``bzip2``, ``xz`` or None.
    """
    head, comp = read_head(path)
    name = _stem(path)
    if not head:
        raise InputError("file is empty" + (f" after {comp} decompression" if comp else ""),
                         path=str(path),
                         fix="check that the run wrote its output to this file")
    if head.startswith(_NPY_MAGIC):
        return "npy", comp
    if head.startswith(_ZIP_MAGIC):
        return "npz", comp
    if head.startswith(_EDR_MAGIC) or name.endswith(".edr"):
        return "edr", comp
    sample = head[:8192]
    if b"\x00" in sample or _binary_fraction(sample) > 0.05:
        encoding = _wide_text(sample)
        if encoding is not None:
            raise InputError(
                f"is {encoding} text", path=str(path),
                expected="text in UTF-8 (or ASCII)",
                fix=f"convert it, e.g. iconv -f {encoding} -t UTF-8 IN > OUT",
            )
        suffix_comp = next((c for suf, c in _SUFFIX_COMPRESSION.items()
                            if path.name.lower().endswith(suf)), None)
        if suffix_comp is not None and comp is None:
            raise InputError(
                f"is named like a {suffix_comp} file but is not {suffix_comp}-compressed, "
                "nor text", path=str(path),
                expected=f"{suffix_comp}-compressed text, a thermo log or a table",
                fix="check that the file was copied completely, or give the original file",
            )
        raise InputError(
            "is not a text file and not a known binary format",
            path=str(path),
            expected="a thermo log, a text/CSV table with a header, .npy, .npz or .edr",
            fix="give the engine's log or an exported table",
        )
    if b"\r" in sample and b"\n" not in sample:
        raise InputError(
            "has lines ended by a carriage return alone (old Mac style)", path=str(path),
            expected="lines ended by LF (Unix) or CR LF (Windows)",
            fix="convert the line endings, e.g. tr '\\r' '\\n' < IN > OUT",
        )
    if _LOG_MARKERS.search(head):
        return "lammps-log", comp
    if name.startswith("log.") or name.endswith((".log", ".lammps")):
        return "lammps-log", comp
    return "table", comp


def _wide_text(sample: bytes) -> str | None:
    """``UTF-16LE``/``UTF-16BE``/``UTF-32...`` if `sample` looks like such text, else None."""
    boms = ((b"\xff\xfe\x00\x00", "UTF-32LE"), (b"\x00\x00\xfe\xff", "UTF-32BE"),
            (b"\xff\xfe", "UTF-16LE"), (b"\xfe\xff", "UTF-16BE"))
    for bom, name in boms:
        if sample.startswith(bom):
            return name
    even, odd = sample[0::2], sample[1::2]
    if len(sample) >= 16:
        if odd.count(0) > 0.9 * len(odd) and even.count(0) < 0.1 * len(even):
            return "UTF-16LE"
        if even.count(0) > 0.9 * len(even) and odd.count(0) < 0.1 * len(odd):
            return "UTF-16BE"
    return None


def _binary_fraction(sample: bytes) -> float:
    if not sample:
        return 0.0
    text_bytes = bytes(range(32, 127)) + b"\n\r\t\f\b"
    non_text = sample.translate(None, text_bytes)
    # UTF-8 multibyte characters (units, names) are text too: count only control bytes.
    control = sum(1 for c in non_text if c < 32 or c == 127)
    return control / len(sample)


class FileHash:
    """SHA-256 of a file computed in a background thread (hashlib releases the GIL)."""

    def __init__(self, path: Path, *, background: bool = True) -> None:
        self._digest: str | None = None
        self._error: BaseException | None = None
        self._path = path
        self._thread: threading.Thread | None = None
        if background:
            self._thread = threading.Thread(target=self._run, daemon=True)
            self._thread.start()
        else:
            self._run()

    def _run(self) -> None:
        try:
            h = hashlib.sha256()
            with open(self._path, "rb") as fh:
                while True:
                    block = fh.read(1 << 22)
                    if not block:
                        break
                    h.update(block)
            self._digest = h.hexdigest()
        except OSError as exc:  # reported as "no digest": the read itself reports errors
            self._error = exc

    def result(self) -> str | None:
        """The hex digest (waits for the thread), or None if the file could not be read."""
        if self._thread is not None:
            self._thread.join()
        return self._digest
