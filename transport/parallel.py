"""Where the work of a study runs: local processes by default, a Dask cluster by address.

A study is many independent tasks (one per run: read the files, analyse, return a JSON
record). :func:`run_tasks` submits them to an executor and collects the results in the
order of the tasks:

- ``scheduler=None``: a local pool of ``workers`` processes (default: the CPUs this process
  may use; ``workers=1`` runs in the calling process), with a progress bar over tasks;
- ``scheduler="tcp://host:8786"``: the same tasks on an existing ``dask.distributed``
  cluster (the ``dask`` extra). The workers must see the input files at the same paths
  (a shared file system, as on any cluster).

Local workers are started once per call from a forkserver that has already imported the
package and numpy / scipy / pandas (so a worker starts in milliseconds, not seconds), and
each worker is limited to its share of the CPUs (``available_cpus() // workers`` threads,
:func:`transport._threads.limit_threads`): a task's own threads (Green–Kubo pieces, FFT
workers) would otherwise oversubscribe the cores. On Dask, a worker's tasks follow
``OMP_NUM_THREADS``, which Dask sets to 1 in its worker processes by default.

A task that raises does not lose the others: its slot holds a :class:`TaskFailure` naming
the task and the error, and the caller decides what to do.
"""

from __future__ import annotations

import multiprocessing
from collections.abc import Callable, Sequence
from concurrent.futures import Future, ProcessPoolExecutor, as_completed
from dataclasses import dataclass
from typing import Any, TypeVar

from ._threads import available_cpus, limit_threads
from .errors import InputError

__all__ = ["TaskFailure", "run_tasks", "start_early"]

T = TypeVar("T")

#: Modules the forkserver imports once, so that every worker process starts with them.
PRELOAD = ("numpy", "scipy.fft", "scipy.stats", "pandas", "transport.viscosity",
           "transport.diffusion", "transport.io", "transport.study_analysis")

INSTALL_DASK = "pip install 'transport-coefficients[dask]' (dask.distributed)"


@dataclass(frozen=True)
class TaskFailure:
    """A task that raised: its name, the error type and the one-line message."""

    name: str
    error: str
    message: str

    def one_line(self) -> str:
        """``name: message`` on one line."""
        return " ".join(f"{self.name}: {self.message}".split())


def _failure(name: str, exc: BaseException) -> TaskFailure:
    return TaskFailure(name, type(exc).__name__, str(exc) or type(exc).__name__)


def _call(fn: Callable[[T], Any], name: str, x: T) -> Any:
    """``fn(x)`` in a worker; an exception becomes a :class:`TaskFailure` there, so that
    its message comes back even when the exception itself cannot be pickled (one that
    carries a partial result, say)."""
    try:
        return fn(x)
    except Exception as exc:
        return _failure(name, exc)


def run_tasks(fn: Callable[[T], Any], items: Sequence[T], *, names: Sequence[str],
              workers: int | None = None, scheduler: str | None = None,
              progress: bool = False, timeout: float = 10.0) -> list[Any]:
    """``[fn(x) for x in items]`` on local processes or a Dask cluster; failures kept apart.

    Parameters
    ----------
    fn : callable
        A module-level (picklable) function of one item.
    items : sequence
        The tasks' arguments (picklable).
    names : sequence of str
        One name per item, used in failures and progress.
    workers : int, optional
        Local processes (default: the available CPUs). Ignored with `scheduler`.
    scheduler : str, optional
        Address of a running ``dask.distributed`` scheduler.
    progress : bool
        Show a progress bar over tasks (stderr).
    timeout : float
        Seconds to wait for the scheduler to answer.

    Returns
    -------
    list
        ``fn(item)`` or a :class:`TaskFailure`, in the order of `items`.

    Raises
    ------
    InputError
        Dask is not installed, or the scheduler cannot be reached (one line with the fix).
    """
    if len(names) != len(items):
        raise ValueError("one name per item")
    if not items:
        return []
    if scheduler is not None:
        return _on_dask(fn, items, names, scheduler, progress, timeout)
    n = min(len(items), available_cpus() if workers is None else max(1, int(workers)))
    bar = _bar(len(items), progress)
    out: list[Any] = [None] * len(items)
    try:
        if n <= 1:
            for i, x in enumerate(items):
                try:
                    out[i] = fn(x)
                except Exception as exc:
                    out[i] = _failure(names[i], exc)
                bar.update(1)
            return out
        threads = max(1, available_cpus() // n)
        with ProcessPoolExecutor(max_workers=n, mp_context=_context(),
                                 initializer=limit_threads, initargs=(threads,)) as pool:
            futs: dict[Future, int] = {pool.submit(_call, fn, names[i], x): i
                                       for i, x in enumerate(items)}
            for f in as_completed(futs):
                i = futs[f]
                try:
                    out[i] = f.result()
                except Exception as exc:  # the pool broke, or a result did not pickle
                    out[i] = _failure(names[i], exc)
                bar.update(1)
        return out
    finally:
        bar.close()


def start_early(workers: int | None = None, scheduler: str | None = None) -> None:
    """Start the local pool's forkserver now, in the background, if a pool will be used.

    The server imports :data:`PRELOAD` (about 1.5-2 s here) while the caller goes on with
    its own imports, the manifest and the content hashes; the pool of :func:`run_tasks`
    then starts its workers in milliseconds. Idempotent; nothing for ``workers=1`` or
    with a `scheduler`. A server started for nothing (every run found in the store) only
    costs that background import, and exits with the process.
    """
    n = available_cpus() if workers is None else max(1, int(workers))
    if scheduler is not None or n <= 1:
        return
    from multiprocessing import forkserver

    _context()
    forkserver.ensure_running()


def _context() -> Any:
    """The forkserver context, its server told to preload :data:`PRELOAD` (this takes
    effect when the server starts, i.e. at the first pool of the process)."""
    ctx = multiprocessing.get_context("forkserver")
    ctx.set_forkserver_preload(list(PRELOAD))
    return ctx


def _bar(total: int, progress: bool) -> Any:
    from tqdm.auto import tqdm

    return tqdm(total=total, desc="runs", unit="run", disable=not progress, leave=False)


def _on_dask(fn: Callable[[T], Any], items: Sequence[T], names: Sequence[str],
             scheduler: str, progress: bool, timeout: float) -> list[Any]:
    try:
        from dask.distributed import Client
        from dask.distributed import as_completed as dask_completed
    except ImportError:
        raise InputError("--scheduler needs dask.distributed, which is not installed",
                         fix=INSTALL_DASK) from None
    try:
        client = Client(scheduler, timeout=timeout, set_as_default=False)
    except (OSError, TimeoutError, ValueError) as exc:
        msg = " ".join(str(exc).split())[:200]
        raise InputError(f"cannot reach the Dask scheduler at {scheduler!r} ({msg})",
                         fix="start the cluster (dask scheduler; dask worker ADDRESS) or "
                             "correct --scheduler tcp://HOST:PORT") from None
    bar = _bar(len(items), progress)
    out: list[Any] = [None] * len(items)
    try:
        futs = [client.submit(_call, fn, names[i], x, key=f"transport-{i}-{_key(names[i])}",
                              pure=False) for i, x in enumerate(items)]
        index = {f.key: i for i, f in enumerate(futs)}
        for f in dask_completed(futs, loop=client.loop):
            i = index[f.key]
            try:
                out[i] = f.result()
            except Exception as exc:
                out[i] = _failure(names[i], exc)
            bar.update(1)
        return out
    finally:
        bar.close()
        client.close()


def _key(name: str) -> str:
    return "".join(c if c.isalnum() else "_" for c in name)[:60]
