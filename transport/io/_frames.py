"""Getting frames out of trajectory files through MDAnalysis, safely and fast.

* :class:`_ForkedFrames`: MDAnalysis's XTC/TRR decoder holds the GIL, so a forked child
  process decodes the later part of a big file into shared memory while the caller decodes
  and processes the first part (:func:`_fork_split` decides; ``TRANSPORT_NO_FORK`` turns it
  off).
* :func:`_frames`: iteration whose decoding errors become input errors naming the frame.
* :func:`_unread_tail`: data after the last frame MDAnalysis indexed (a partial last frame,
  or damage that stopped its index).
* :func:`_c_stderr_held`: what compiled decoders print on stderr, held back when the read
  fails (an input error reaches the user as one line).
"""

from __future__ import annotations

import contextlib
import mmap
import os
import signal
import struct
import sys
import tempfile
import warnings as _warnings
from pathlib import Path
from typing import Any

import numpy as np

from .._threads import available_cpus
from ..errors import InputError
from ._dcd import _dcd_partial_tail
from ._open import compression_of

__all__ = ["NO_FORK_ENV", "_ForkedFrames", "_c_stderr_held", "_fork_split", "_frames",
           "_mda_error", "_unread_tail", "_xtc_frame_bytes"]


def _mda_error(exc: BaseException) -> str:
    text = " ".join(str(exc).split())
    return text[:300] if text else type(exc).__name__


#: XTC/TRR files with fewer frames or coordinates than these are decoded in one process.
_FORK_MIN_FRAMES = 200
_FORK_MIN_VALUES = 1 << 20
#: Share of the frames this process decodes itself when a forked child takes the rest.
_FORK_OWN_SHARE = 0.4
#: Setting this environment variable (to anything) turns the forked decoding off.
NO_FORK_ENV = "TRANSPORT_NO_FORK"


def _shared(shape: tuple[int, ...], dtype: Any) -> np.ndarray:
    """A zero-filled array in anonymous shared memory (visible to forked children)."""
    dt = np.dtype(dtype)
    count = int(np.prod(shape, dtype=np.int64))
    buf = mmap.mmap(-1, max(1, count * dt.itemsize))  # anonymous maps are shared
    return np.frombuffer(buf, dtype=dt, count=count).reshape(shape)


class _ForkedFrames:
    """Frames ``start .. stop-1`` of an XTC or TRR file, decoded by a forked process.

    MDAnalysis's XDR decoder holds the GIL, so threads cannot share its work (measured: a
    numpy thread beside it gained nothing). A child process, forked with the reader's
    modules and the file's offset index already loaded, decodes the second part of the file
    into shared memory while this process decodes and processes the first. The child only
    reads the file and writes the shared arrays, then leaves with ``os._exit``; if it fails
    in any way, :meth:`wait` says so and the caller reads those frames itself.
    """

    def __init__(self, reader_type: Any, path: Path, reader_kw: dict[str, Any], start: int,
                 stop: int, n_atoms: int, velocities: bool) -> None:
        m = stop - start
        self.start, self.count = start, m
        self.x = _shared((m, n_atoms, 3), np.float32)
        self.t = _shared((m,), np.float64)
        self.step = _shared((m,), np.float64)
        self.box = _shared((m, 6), np.float64)
        self.v = _shared((m, n_atoms, 3), np.float32) if velocities else None
        self._done = _shared((1,), np.int64)
        with _warnings.catch_warnings():
            _warnings.simplefilter("ignore")  # Python >= 3.12 warns on fork with threads
            self.pid = os.fork()
        if self.pid == 0:  # the child: decode, then leave without running any cleanup
            code = 1
            try:
                self._decode(reader_type, path, reader_kw)
                self._done[0] = 1
                code = 0
            finally:
                os._exit(code)

    def _decode(self, reader_type: Any, path: Path, reader_kw: dict[str, Any]) -> None:
        with _warnings.catch_warnings():
            _warnings.simplefilter("ignore")
            reader = reader_type(str(path), **reader_kw)
            ts = reader[self.start]  # one seek, then frame after frame (slices seek each)
            for i in range(self.count):
                if i:
                    ts = reader.next()  # raises past the end: the child then fails
                self.x[i] = ts.positions
                self.t[i] = ts.time
                step = ts.data.get("step")
                self.step[i] = np.nan if step is None else step
                dims = ts.dimensions
                self.box[i] = np.nan if dims is None else dims
                if self.v is not None:
                    self.v[i] = ts.velocities  # raises where a frame has none

    def wait(self, path: Path) -> bool:
        """Wait for the child; True if it decoded every frame, False if it failed.

        Raises
        ------
        InputError
            The child was killed by a signal (a crash of the compiled decoder: decoding the
            same frames here would crash this process too).
        """
        _, status = os.waitpid(self.pid, 0)
        if os.WIFSIGNALED(status):
            raise InputError(
                f"the process decoding frames {self.start}-{self.start + self.count - 1} "
                f"ended on signal {os.WTERMSIG(status)}: MDAnalysis's decoder crashed (the "
                "file is damaged there) or the system stopped it (out of memory?)",
                path=str(path), expected="frames MDAnalysis can decode",
                fix=f"check the file from frame {self.start} on (repair or truncate it); "
                    f"if memory is short, set {NO_FORK_ENV}=1 (one process, no shared copy)")
        return (os.WIFEXITED(status) and os.WEXITSTATUS(status) == 0
                and int(self._done[0]) == 1)

    def stop(self) -> None:
        """End the child early (the reading failed here) and reap it."""
        with contextlib.suppress(OSError):
            os.kill(self.pid, signal.SIGKILL)
        with contextlib.suppress(OSError):
            os.waitpid(self.pid, 0)


def _fork_split(u: Any, n_atoms: int, velocities: bool, memory_limit: float) -> int | None:
    """The first frame to leave to a forked decoder (:class:`_ForkedFrames`), or None.

    Only for XTC and TRR files (whose frames MDAnalysis finds by offset), on Linux with two
    or more CPUs, for files big enough to be worth a process (>= 200 frames and >= 2^20
    coordinates) and when the shared copy fits a quarter of the memory limit. Setting the
    environment variable ``TRANSPORT_NO_FORK`` turns it off.
    """
    if (not sys.platform.startswith("linux") or not hasattr(os, "fork")
            or os.environ.get(NO_FORK_ENV) or available_cpus() < 2
            or type(u.trajectory).__name__ not in ("XTCReader", "TRRReader")):
        return None
    n = len(u.trajectory)
    values = n * n_atoms * 3
    if n < _FORK_MIN_FRAMES or values < _FORK_MIN_VALUES:
        return None
    if 2 * values * 4 * (2 if velocities else 1) > memory_limit / 4:
        return None
    # This process decodes its share *and* processes every frame, the child only decodes:
    # with processing ~0.45 of the decoding time (XTC, measured), both finish together
    # when this process keeps ~40% of the frames.
    return max(1, int(_FORK_OWN_SHARE * n))


@contextlib.contextmanager
def _c_stderr_held(enabled: bool) -> Any:
    """Hold what compiled readers print on file descriptor 2 while frames are read.

    The XTC decoder prints e.g. "Cannot allocate memory for decompressing coordinates." on a
    damaged frame before MDAnalysis raises; an input error must reach the user as one line.
    The text is kept in a temporary file and written out after a successful read (nothing
    is lost), dropped when the read fails with an :class:`InputError`. Off while a progress
    bar is shown (it writes to the same descriptor).
    """
    if not enabled:
        yield
        return
    try:
        saved = os.dup(2)
    except OSError:
        yield
        return
    with tempfile.TemporaryFile() as held:
        sys.stderr.flush()
        os.dup2(held.fileno(), 2)
        failed_on_input = False
        try:
            yield
        except InputError:
            failed_on_input = True
            raise
        finally:
            sys.stderr.flush()
            os.dup2(saved, 2)
            os.close(saved)
            if not failed_on_input:
                held.seek(0)
                text = held.read().decode("utf-8", "replace")
                if text:
                    sys.stderr.write(text)


def _frames(trajectory: Any, first: int, n_file: int, p: Path) -> Any:
    """Yield ``(index, Timestep)`` from an MDAnalysis trajectory iterator; an error while
    MDAnalysis decodes a frame becomes an :class:`InputError` naming the frame."""
    it = iter(trajectory)
    i = first
    while True:
        try:
            ts = next(it)
        except StopIteration:
            return
        except Exception as exc:
            raise InputError(
                f"frame {i} of {n_file} cannot be read ({_mda_error(exc)})", path=str(p),
                expected="frames MDAnalysis can decode",
                fix=f"repair the file, or truncate it before frame {i}") from None
        yield i, ts
        i += 1


def _xtc_frame_bytes(p: Path, offset: int) -> int | None:
    """Size of the compressed XTC frame starting at `offset`, from its header, or None.

    Layout (the GROMACS xdrfile format, big-endian, from memory): magic 1995, atom count,
    step, time, box (9 floats), atom count again, then for more than 9 atoms the precision,
    minimum and maximum integers (3 + 3), the small index and the byte count of the
    compressed coordinates, which follow padded to 4 bytes: 92 bytes of header in all.
    """
    try:
        with open(p, "rb") as fh:
            fh.seek(offset)
            head = fh.read(92)
        if len(head) < 92:
            return None
        magic, natoms = struct.unpack(">2i", head[:8])
        if magic != 1995 or natoms <= 9 or struct.unpack(">i", head[52:56])[0] != natoms:
            return None
        nbytes = struct.unpack(">i", head[88:92])[0]
        return 92 + (nbytes + 3) // 4 * 4 if nbytes >= 0 else None
    except (OSError, struct.error):
        return None


def _partial_frame_note(p: Path, nbytes: str, after: int) -> str:
    return (f"{p}: the file ends {nbytes} bytes into a frame after frame {after} (the run "
            "probably stopped while writing it); that partial frame was not read")


def _unread_tail(u: Any, p: Path, n_file: int) -> str | None:
    """A note when data follow the last frame MDAnalysis indexed in an XTC/TRR/DCD file or
    an uncompressed LAMMPS dump (a partial last frame); InputError when whole frames do (the
    file is damaged there and MDAnalysis's index stopped early). None otherwise, and when
    it cannot be told (MDAnalysis's XDR frame index is a private attribute: without it no
    check is made; DCD files only in the plain layout of :mod:`transport.io._dcd`)."""
    name = type(u.trajectory).__name__
    size = p.stat().st_size
    damaged = dict(path=str(p), expected="frames up to the end of the file")
    if name in ("XTCReader", "TRRReader") and n_file >= 2:
        try:
            offsets = np.asarray(u.trajectory._xdr.offsets, dtype=np.int64)
        except Exception:
            return None
        if offsets.size != n_file:
            return None
        steps = np.diff(offsets)
        mean = float(steps.mean())
        last = _xtc_frame_bytes(p, int(offsets[-1])) if name == "XTCReader" else None
        fixed = last is not None or bool(steps.min() == steps.max())  # TRR: equal frames
        # the bytes beyond a last frame of its own size (XTC header) or of the usual size
        extra = float(size - offsets[-1]) - (mean if last is None else last)
        whole = extra >= mean if fixed else extra > 1.5 * mean
        if whole:
            raise InputError(
                f"about {extra:.0f} bytes (~{extra / mean:.0f} frames) follow frame "
                f"{n_file - 1}, the last one MDAnalysis can find: the file is damaged there",
                fix=f"repair the file, or truncate it after frame {n_file - 1}", **damaged)
        if (fixed and extra > 0) or (not fixed and extra > 0.5 * mean):
            return _partial_frame_note(p, f"{'' if fixed else 'about '}{extra:.0f}",
                                       n_file - 1)
        return None
    if name == "DCDReader":
        tail = _dcd_partial_tail(p, n_file, u.atoms.n_atoms)
        return _partial_frame_note(p, str(tail), n_file) if tail else None
    if name == "DumpReader" and compression_of(p) is None:
        with open(p, "rb") as fh, mmap.mmap(fh.fileno(), 0, access=mmap.ACCESS_READ) as mm:
            found = 0
            at = mm.find(b"ITEM: TIMESTEP")
            while at >= 0:
                found += 1
                at = mm.find(b"ITEM: TIMESTEP", at + 14)
        if found > n_file + 1:
            raise InputError(
                f"the dump has {found} frames but only the first {n_file} can be read: frame "
                f"{n_file} is damaged", fix=f"repair the file, or truncate it before frame "
                f"{n_file}", **damaged)
        if found == n_file + 1:
            return (f"{p}: the last frame ({n_file}) is incomplete (the run probably stopped "
                    "while writing it) and was not read")
    return None
